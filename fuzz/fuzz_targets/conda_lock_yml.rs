#![no_main]
// Fuzzes the conda-lock.yml parser.
libfuzzer_sys::fuzz_target!(|data: &[u8]| runprint_fuzz::lockfile("conda-lock.yml", data));
