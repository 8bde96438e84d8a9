#![no_main]
// Fuzzes the environment.yml parser.
libfuzzer_sys::fuzz_target!(|data: &[u8]| runprint_fuzz::lockfile("environment.yml", data));
