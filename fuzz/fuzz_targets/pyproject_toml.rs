#![no_main]
// Fuzzes the pyproject.toml parser.
libfuzzer_sys::fuzz_target!(|data: &[u8]| runprint_fuzz::lockfile("pyproject.toml", data));
