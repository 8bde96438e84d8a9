#![no_main]
// Fuzzes the container-recipe (Dockerfile) parser.
libfuzzer_sys::fuzz_target!(|data: &[u8]| runprint_fuzz::lockfile("Dockerfile", data));
