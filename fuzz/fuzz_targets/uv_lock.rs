#![no_main]
// Fuzzes the uv.lock parser.
libfuzzer_sys::fuzz_target!(|data: &[u8]| runprint_fuzz::lockfile("uv.lock", data));
