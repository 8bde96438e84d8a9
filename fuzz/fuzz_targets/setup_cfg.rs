#![no_main]
// Fuzzes the setup.cfg parser.
libfuzzer_sys::fuzz_target!(|data: &[u8]| runprint_fuzz::lockfile("setup.cfg", data));
