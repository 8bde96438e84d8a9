#![no_main]
// Fuzzes the OpenBLAS library reader (ELF symbols, x86-64 code, constants).
libfuzzer_sys::fuzz_target!(|data: &[u8]| runprint_fuzz::openblas_library(data));
