//! The file-opening policy (`src/limits.rs`) is the only way runprint reads a file it did not
//! write: this test fails when a module outside it reads with `std::fs::read*`, `File::open` or
//! `OpenOptions` (test modules, and the atomic writer's own files, excepted).

use std::path::Path;

/// Modules allowed to open files themselves: the policy, and the writer of runprint's own
/// outputs.
const ALLOWED: &[&str] = &["src/limits.rs", "src/atomic.rs"];

const FORBIDDEN: &[&str] = &[
    "fs::read(",
    "fs::read_to_string(",
    "File::open(",
    "OpenOptions::new()",
];

fn visit(dir: &Path, found: &mut Vec<String>) {
    for entry in std::fs::read_dir(dir).unwrap() {
        let path = entry.unwrap().path();
        if path.is_dir() {
            visit(&path, found);
            continue;
        }
        if path.extension().and_then(|e| e.to_str()) != Some("rs") {
            continue;
        }
        let rel = path
            .strip_prefix(env!("CARGO_MANIFEST_DIR"))
            .unwrap()
            .to_string_lossy()
            .replace('\\', "/");
        if ALLOWED.contains(&rel.as_str()) {
            continue;
        }
        let text = std::fs::read_to_string(&path).unwrap();
        // Unit tests sit at the bottom of each module, after `#[cfg(test)]`.
        let code = text.split("#[cfg(test)]").next().unwrap_or("");
        for (i, line) in code.lines().enumerate() {
            if line.trim_start().starts_with("//") {
                continue;
            }
            for f in FORBIDDEN {
                if line.contains(f) {
                    found.push(format!("{rel}:{}: {}", i + 1, line.trim()));
                }
            }
        }
    }
}

#[test]
fn every_read_goes_through_the_file_opening_policy() {
    let mut found = Vec::new();
    visit(
        &Path::new(env!("CARGO_MANIFEST_DIR")).join("src"),
        &mut found,
    );
    assert!(
        found.is_empty(),
        "read through crate::limits instead:\n{}",
        found.join("\n")
    );
}
