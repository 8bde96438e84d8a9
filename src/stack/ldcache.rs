//! The dynamic loader's cache, `/etc/ld.so.cache`, in glibc's current format
//! (`glibc-ld.so.cache1.1`, laid out by `struct cache_file_new` and `struct file_entry_new` in
//! glibc's `sysdeps/generic/dl-cache.h`): a 48-byte header (magic and version, entry count,
//! string-table length, flags, extension offset), then 24-byte entries (`flags`, `key`,
//! `value`, `osversion`, `hwcap`) whose `key`/`value` are offsets of the library name and its
//! path, counted from the start of that header. An older `ld.so-1.7.0` table may come first;
//! the new header is then found after it.

/// Library name → path pairs from the cache, in file order.
pub fn parse(data: &[u8]) -> Result<Vec<(String, String)>, String> {
    const MAGIC: &[u8] = b"glibc-ld.so.cache1.1";
    let base = memchr::memmem::find(data, MAGIC)
        .ok_or("no `glibc-ld.so.cache1.1` header (unsupported cache format)")?;
    let d = &data[base..];
    let u32_at = |off: usize| -> Option<u32> {
        Some(u32::from_le_bytes(d.get(off..off + 4)?.try_into().ok()?))
    };
    let nlibs = u32_at(20).ok_or("truncated header")? as usize;
    let mut out = Vec::with_capacity(nlibs);
    let cstr = |off: usize| -> Option<String> {
        let s = d.get(off..)?;
        let end = s.iter().position(|&b| b == 0)?;
        Some(String::from_utf8_lossy(&s[..end]).into_owned())
    };
    for i in 0..nlibs {
        let e = 48 + i * 24;
        let (Some(key), Some(value)) = (u32_at(e + 4), u32_at(e + 8)) else {
            return Err(format!("truncated at entry {i} of {nlibs}"));
        };
        match (cstr(key as usize), cstr(value as usize)) {
            (Some(k), Some(v)) => out.push((k, v)),
            _ => return Err(format!("entry {i} points outside the file")),
        }
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn builds_and_reads_a_cache() {
        // A cache laid out as dl-cache.h describes, with one entry.
        let mut d = b"glibc-ld.so.cache1.1".to_vec();
        d.extend(1u32.to_le_bytes()); // nlibs
        d.extend(0u32.to_le_bytes()); // len_strings
        d.extend([0u8; 4]); // flags + padding
        d.extend([0u8; 16]); // extension offset + unused
        assert_eq!(d.len(), 48);
        let strings = 48 + 24;
        d.extend(0x0303i32.to_le_bytes());
        d.extend((strings as u32).to_le_bytes());
        d.extend((strings as u32 + 13).to_le_bytes());
        d.extend([0u8; 12]);
        d.extend(b"libgomp.so.1\0/lib/libgomp.so.1\0");
        assert_eq!(
            parse(&d).unwrap(),
            vec![("libgomp.so.1".into(), "/lib/libgomp.so.1".into())]
        );
        assert!(parse(b"junk").is_err());
        assert!(parse(&d[..60]).is_err());
    }
}
