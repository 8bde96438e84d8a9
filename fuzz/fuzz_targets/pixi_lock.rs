#![no_main]
// Fuzzes the pixi.lock parser.
libfuzzer_sys::fuzz_target!(|data: &[u8]| runprint_fuzz::lockfile("pixi.lock", data));
