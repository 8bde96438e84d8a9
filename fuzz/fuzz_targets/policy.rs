#![no_main]
// Fuzzes the policy file.
libfuzzer_sys::fuzz_target!(|data: &[u8]| runprint_fuzz::policy(data));
