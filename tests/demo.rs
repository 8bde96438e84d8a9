//! Snapshot tests (insta) of the reports for the demo in `fixtures/demo/`. The demo's data is
//! invented (see `examples/demo.rs`); these tests pin the wording and layout of the reports.

mod common;

use common::{crate_path, runprint};

fn demo_report(format: &str, verbose: bool) -> (i32, String) {
    let mut cmd = runprint();
    cmd.args([
        "diff",
        "fixtures/demo/baseline.toml",
        "fixtures/demo/candidate.toml",
        "--format",
        format,
    ])
    .current_dir(crate_path(""));
    if verbose {
        cmd.arg("--verbose");
    }
    let out = cmd.output().unwrap();
    (
        out.status.code().unwrap(),
        String::from_utf8(out.stdout).unwrap(),
    )
}

#[test]
fn demo_text_report() {
    let (code, text) = demo_report("text", false);
    assert_eq!(code, 4);
    insta::assert_snapshot!("demo_text", text);
}

#[test]
fn demo_markdown_report() {
    let (code, text) = demo_report("markdown", true);
    assert_eq!(code, 4);
    insta::assert_snapshot!("demo_markdown", text);
}

#[test]
fn demo_manifests_are_unmodified() {
    for name in ["baseline.toml", "candidate.toml"] {
        let m = runprint::manifest::Manifest::load(&crate_path(&format!("fixtures/demo/{name}")))
            .unwrap();
        assert!(
            !m.is_modified(),
            "{name}: regenerate with `cargo run --example demo`"
        );
    }
}
