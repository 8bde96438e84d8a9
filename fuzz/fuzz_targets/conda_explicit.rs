#![no_main]
// Fuzzes the spec-file.txt parser.
libfuzzer_sys::fuzz_target!(|data: &[u8]| runprint_fuzz::lockfile("spec-file.txt", data));
