#![no_main]
// Fuzzes the rust-toolchain.toml parser.
libfuzzer_sys::fuzz_target!(|data: &[u8]| runprint_fuzz::lockfile("rust-toolchain.toml", data));
