//! The bodies of runprint's fuzz targets (`fuzz_targets/`, one per parser). Each takes the
//! fuzzer's bytes the way runprint reads a file it did not write, and checks what must hold for
//! every input: no panic, an error that names the file, and for the manifest a round trip.
//!
//! The same functions replay the regression corpus in `tests/corpus/` (see `DEVELOPERS.md`).

use std::path::Path;

use runprint::lockfile::{decode, Format};
use runprint::manifest::{Manifest, ManifestFormat};
use runprint::policy::Policy;

/// The path shown in errors; every error must name it.
fn shown(name: &str) -> String {
    format!("fuzz/{name}")
}

/// Parses `data` as the lockfile named `name` (a file name runprint detects, such as
/// `Cargo.lock`), as `stamp` and `check` do.
pub fn lockfile(name: &str, data: &[u8]) {
    let format = Format::detect(name).expect("fuzz targets name lockfiles runprint detects");
    let path = shown(name);
    match decode(data, &path).and_then(|text| format.parse(text, &path)) {
        Ok(parsed) => {
            // Every package has a name (a nameless entry is left out with a warning).
            for p in &parsed.packages {
                assert!(!p.name.is_empty(), "{p:?}");
            }
        }
        Err(e) => assert!(
            e.to_string().contains(&path),
            "error does not name the file: {e}"
        ),
    }
}

/// A valid `go.mod` read with the fuzzer's bytes as its `go.sum` companion.
pub fn go_sum(data: &[u8]) {
    const GO_MOD: &str = "module example.com/m\n\ngo 1.22\n\nrequire (\n\tgolang.org/x/text v0.14.0\n\texample.com/a v1.2.3 // indirect\n)\n";
    let path = shown("go.sum");
    let Ok(sum) = decode(data, &path) else {
        return;
    };
    if let Err(e) =
        Format::GoMod.parse_with_companion(GO_MOD, &shown("go.mod"), Some((sum, path.as_str())))
    {
        assert!(
            e.to_string().contains("fuzz/go."),
            "error names no file: {e}"
        );
    }
}

/// Reads a manifest (TOML or JSON). Whatever parses must render in both forms and parse back
/// to itself, with the same fingerprint check result.
pub fn manifest(data: &[u8]) {
    let Ok(text) = std::str::from_utf8(data) else {
        return;
    };
    // The event reader (the fast path for large manifests) answers as the `toml` crate
    // does, or not at all: as a generic document and as a manifest; read whole and cut
    // before every line that opens a table.
    for piece in [usize::MAX, 1] {
        if let Some(fast) = runprint::toml_events::from_str_in_pieces::<toml::Value>(text, piece) {
            let full: Result<toml::Value, _> = toml::from_str(text);
            assert_eq!(
                Some(&fast),
                full.as_ref().ok(),
                "the readers differ on:\n{text}"
            );
        }
    }
    if let Some(fast) = runprint::toml_events::from_str::<Manifest>(text) {
        let full: Result<Manifest, _> = toml::from_str(text);
        assert_eq!(
            Some(&fast),
            full.as_ref().ok(),
            "the readers differ on:\n{text}"
        );
    }
    let path = Path::new("fuzz/m.toml");
    match Manifest::parse(text, path) {
        Ok(m) => {
            for format in [ManifestFormat::Toml, ManifestFormat::Json] {
                let rendered = m.render(format);
                let back = Manifest::parse(&rendered, path).unwrap_or_else(|e| {
                    panic!("rendered manifest does not parse: {e}\n{rendered}")
                });
                assert_eq!(back, m, "round trip changed the manifest:\n{rendered}");
                assert_eq!(back.is_modified(), m.is_modified());
            }
            // A stamp serializes everything after `[git]` ahead of time and puts the manifest
            // together from the parts: byte for byte what a full serialization gives.
            let mut content = m.content.clone();
            content.git = Default::default();
            let texts: Vec<_> = content
                .lockfiles
                .iter()
                .map(runprint::manifest::LockfileText::of)
                .collect();
            if let Some(prepared) = content.prepare(&texts) {
                content.git = m.content.git.clone();
                let rebuilt = Manifest::new_prepared(m.run.clone(), content, Some(&prepared));
                let full = Manifest::new(m.run.clone(), m.content.clone());
                assert_eq!(rebuilt, full);
                assert_eq!(
                    rebuilt.render_prepared(ManifestFormat::Toml, Some(&prepared)),
                    full.render(ManifestFormat::Toml)
                );
            }
        }
        Err(e) => assert!(e.to_string().contains("fuzz/m.toml"), "{e}"),
    }
}

/// Reads a policy file (`runprint.toml`).
pub fn policy(data: &[u8]) {
    let Ok(text) = std::str::from_utf8(data) else {
        return;
    };
    if let Err(e) = Policy::parse(text, Path::new("fuzz/runprint.toml")) {
        assert!(e.to_string().contains("fuzz/runprint.toml"), "{e}");
    }
}

/// Reads the fuzzer's bytes as an OpenBLAS library file, as the native collector does: its
/// configuration from the code of `openblas_get_config` or from constants, its thread limit
/// and kernel tables; then follows the bytes as x86-64 code from their first byte. Nothing
/// may panic, whatever the headers, symbols or instructions say.
pub fn openblas_library(data: &[u8]) {
    use runprint::stack::{blas, elf::ElfFile, x86};
    let elf = ElfFile::parse(data).ok();
    let _ = blas::read_openblas(elf.as_ref(), data);
    if let Some(e) = &elf {
        let _ = x86::string_built_before_first_call(e, 0, data);
        let _ = x86::integer_after_format(e, 0, data, "MAX_THREADS=%d");
    }
}
