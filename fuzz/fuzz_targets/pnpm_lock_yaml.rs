#![no_main]
// Fuzzes the pnpm-lock.yaml parser.
libfuzzer_sys::fuzz_target!(|data: &[u8]| runprint_fuzz::lockfile("pnpm-lock.yaml", data));
