#![no_main]
// Fuzzes the packages.lock.json parser.
libfuzzer_sys::fuzz_target!(|data: &[u8]| runprint_fuzz::lockfile("packages.lock.json", data));
