#![no_main]
// Fuzzes the Cargo.lock parser.
libfuzzer_sys::fuzz_target!(|data: &[u8]| runprint_fuzz::lockfile("Cargo.lock", data));
