#![no_main]
// Fuzzes the .nvmrc parser.
libfuzzer_sys::fuzz_target!(|data: &[u8]| runprint_fuzz::lockfile(".nvmrc", data));
