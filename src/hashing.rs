//! Streaming SHA-256 of files. Memory stays flat whatever the file size: a file is read in
//! blocks of [`BLOCK`] bytes into one buffer per call. The `sha2` crate picks the processor's
//! SHA extensions at run time where they exist (see [`sha_extensions_in_use`]).

use std::io::Read;
use std::path::Path;

use sha2::{Digest, Sha256};

use crate::manifest::hex;

/// Read size: large enough that system-call overhead vanishes next to hashing, small enough to
/// stay in the CPU caches.
pub const BLOCK: usize = 1 << 20;

/// Hex SHA-256 and size of a file's content, read in blocks. `on_bytes` is called after each
/// block with its length (for progress bars).
pub fn sha256_file(path: &Path, on_bytes: &dyn Fn(u64)) -> std::io::Result<(String, u64)> {
    thread_local! {
        // One block buffer per thread, reused across files: allocating and zeroing a fresh
        // megabyte per file would cost more than hashing a small file.
        static BUF: std::cell::RefCell<Vec<u8>> = std::cell::RefCell::new(vec![0u8; BLOCK]);
    }
    // A file swapped for a FIFO or a device after it was listed must not block the stamp
    // (the file-opening policy, `crate::limits`).
    let mut file = crate::limits::open_regular(path, true)?;
    BUF.with(|buf| {
        let mut buf = buf.borrow_mut();
        let mut hasher = Sha256::new();
        let mut total = 0u64;
        loop {
            let n = match file.read(&mut buf) {
                Ok(0) => break,
                Ok(n) => n,
                Err(e) if e.kind() == std::io::ErrorKind::Interrupted => continue,
                Err(e) => return Err(e),
            };
            hasher.update(&buf[..n]);
            total += n as u64;
            on_bytes(n as u64);
        }
        Ok((hex(&hasher.finalize()), total))
    })
}

/// Hex SHA-256 of bytes in memory.
pub fn sha256_bytes(bytes: &[u8]) -> String {
    hex(&Sha256::digest(bytes))
}

/// True when this processor has the SHA extensions that `sha2` uses for SHA-256 (x86: `sha`
/// with SSE4.1; aarch64: `sha2`).
pub fn sha_extensions_in_use() -> bool {
    #[cfg(any(target_arch = "x86", target_arch = "x86_64"))]
    {
        std::is_x86_feature_detected!("sha") && std::is_x86_feature_detected!("sse4.1")
    }
    #[cfg(target_arch = "aarch64")]
    {
        std::arch::is_aarch64_feature_detected!("sha2")
    }
    #[cfg(not(any(target_arch = "x86", target_arch = "x86_64", target_arch = "aarch64")))]
    {
        false
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // FIPS 180-4 examples (NIST "Example Algorithm" SHA-256 vectors): "abc" and the 448-bit
    // two-block message, and the empty string.
    #[test]
    fn fips_180_4_vectors() {
        assert_eq!(
            sha256_bytes(b"abc"),
            "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
        );
        assert_eq!(
            sha256_bytes(b"abcdbcdecdefdefgefghfghighijhijkijkljklmklmnlmnomnopnopq"),
            "248d6a61d20638b8e5c026930c3e6039a33ce45964ff2167f6ecedd419db06c1"
        );
        assert_eq!(
            sha256_bytes(b""),
            "e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855"
        );
    }

    #[test]
    fn streaming_equals_one_shot_across_block_boundaries() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("f");
        // A million 'a's: FIPS 180-4's long-message vector, spanning a block boundary here.
        std::fs::write(&p, vec![b'a'; 1_000_000]).unwrap();
        let (digest, size) = sha256_file(&p, &|_| {}).unwrap();
        assert_eq!(
            digest,
            "cdc76e5c9914fb9281a1c7e284d73e67f1809a48a497200e046d39ccc7112cd0"
        );
        assert_eq!(size, 1_000_000);
        let big = dir.path().join("g");
        let data: Vec<u8> = (0..(BLOCK * 2 + 17)).map(|i| (i % 251) as u8).collect();
        std::fs::write(&big, &data).unwrap();
        assert_eq!(sha256_file(&big, &|_| {}).unwrap().0, sha256_bytes(&data));
    }
}
