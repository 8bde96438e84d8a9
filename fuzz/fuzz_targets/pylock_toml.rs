#![no_main]
// Fuzzes the pylock.toml parser.
libfuzzer_sys::fuzz_target!(|data: &[u8]| runprint_fuzz::lockfile("pylock.toml", data));
