#![no_main]
// Fuzzes the pdm.lock parser.
libfuzzer_sys::fuzz_target!(|data: &[u8]| runprint_fuzz::lockfile("pdm.lock", data));
