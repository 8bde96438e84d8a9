#![no_main]
// Fuzzes the go.sum companion of go.mod.
libfuzzer_sys::fuzz_target!(|data: &[u8]| runprint_fuzz::go_sum(data));
