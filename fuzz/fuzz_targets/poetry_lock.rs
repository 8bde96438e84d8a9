#![no_main]
// Fuzzes the poetry.lock parser.
libfuzzer_sys::fuzz_target!(|data: &[u8]| runprint_fuzz::lockfile("poetry.lock", data));
