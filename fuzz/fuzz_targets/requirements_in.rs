#![no_main]
// Fuzzes the requirements.in parser.
libfuzzer_sys::fuzz_target!(|data: &[u8]| runprint_fuzz::lockfile("requirements.in", data));
