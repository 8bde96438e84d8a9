#![no_main]
// Fuzzes the requirements.txt parser.
libfuzzer_sys::fuzz_target!(|data: &[u8]| runprint_fuzz::lockfile("requirements.txt", data));
