#![no_main]
// Fuzzes the package-lock.json parser.
libfuzzer_sys::fuzz_target!(|data: &[u8]| runprint_fuzz::lockfile("package-lock.json", data));
