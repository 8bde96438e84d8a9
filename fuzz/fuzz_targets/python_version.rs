#![no_main]
// Fuzzes the .python-version parser.
libfuzzer_sys::fuzz_target!(|data: &[u8]| runprint_fuzz::lockfile(".python-version", data));
