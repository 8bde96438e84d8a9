#![no_main]
// Fuzzes the go.mod parser.
libfuzzer_sys::fuzz_target!(|data: &[u8]| runprint_fuzz::lockfile("go.mod", data));
