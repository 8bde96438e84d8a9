#![no_main]
// Fuzzes the yarn.lock parser.
libfuzzer_sys::fuzz_target!(|data: &[u8]| runprint_fuzz::lockfile("yarn.lock", data));
