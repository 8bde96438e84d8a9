#![no_main]
// Fuzzes the Manifest.toml parser.
libfuzzer_sys::fuzz_target!(|data: &[u8]| runprint_fuzz::lockfile("Manifest.toml", data));
