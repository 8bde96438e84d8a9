#![no_main]
// Fuzzes the manifest reader (TOML and JSON).
libfuzzer_sys::fuzz_target!(|data: &[u8]| runprint_fuzz::manifest(data));
