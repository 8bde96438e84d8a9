#![no_main]
// Fuzzes the Pipfile.lock parser.
libfuzzer_sys::fuzz_target!(|data: &[u8]| runprint_fuzz::lockfile("Pipfile.lock", data));
