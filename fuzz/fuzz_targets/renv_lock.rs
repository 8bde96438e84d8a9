#![no_main]
// Fuzzes the renv.lock parser.
libfuzzer_sys::fuzz_target!(|data: &[u8]| runprint_fuzz::lockfile("renv.lock", data));
