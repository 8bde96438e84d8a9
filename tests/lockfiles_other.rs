//! Go, NuGet, renv and Julia lockfiles, read from hand-written fixtures that follow each
//! format's published documentation (the README beside each fixture names the sections). No
//! writer for these formats runs on the CI machine, so the expected values below are what those
//! documents say the files mean.

use std::path::Path;

use runprint::lockfile::{Format, Parsed};
use runprint::manifest::Package;

fn fixture(rel: &str) -> String {
    let p = Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("fixtures/lockfiles")
        .join(rel);
    std::fs::read_to_string(&p).unwrap_or_else(|e| panic!("{}: {e}", p.display()))
}

fn parse(rel: &str, as_name: &str) -> Parsed {
    Format::detect(as_name)
        .unwrap()
        .parse(&fixture(rel), rel)
        .unwrap()
}

fn get<'a>(parsed: &'a Parsed, name: &str) -> &'a Package {
    parsed
        .packages
        .iter()
        .find(|p| p.name == name)
        .unwrap_or_else(|| panic!("{name} missing: {:?}", parsed.packages))
}

#[test]
fn file_names_and_ecosystems() {
    for (name, ecosystem) in [
        ("package-lock.json", "npm"),
        ("npm-shrinkwrap.json", "npm"),
        ("yarn.lock", "npm"),
        ("pnpm-lock.yaml", "npm"),
        ("go.mod", "go"),
        ("packages.lock.json", "nuget"),
        ("renv.lock", "cran"),
        ("Manifest.toml", "julia"),
        // Pkg.jl documentation: version-specific manifests `Manifest-v{major}.{minor}.toml`.
        ("Manifest-v1.11.toml", "julia"),
    ] {
        assert_eq!(
            Format::detect(name).map(|f| f.ecosystem()),
            Some(ecosystem),
            "{name}"
        );
    }
    assert_eq!(Format::detect("go.sum"), None);
    assert_eq!(Format::detect("package.json"), None);
    assert_eq!(
        Format::detect("go.mod").unwrap().companion(),
        Some("go.sum")
    );
}

#[test]
fn go_mod_and_sum() {
    let format = Format::detect("go.mod").unwrap();
    let go_sum = fixture("go/go.sum");
    let parsed = format
        .parse_with_companion(
            &fixture("go/go.mod"),
            "go/go.mod",
            Some((&go_sum, "go/go.sum")),
        )
        .unwrap();
    // "go directive" and "toolchain directive" (Go Modules Reference).
    assert_eq!(
        parsed.format_version.as_deref(),
        Some("1.22 (toolchain go1.22.4)")
    );
    assert!(parsed.warnings.is_empty(), "{:?}", parsed.warnings);
    let names: Vec<&str> = parsed.packages.iter().map(|p| p.name.as_str()).collect();
    assert_eq!(
        names,
        [
            "example.com/localtool",
            "golang.org/x/mod",
            "golang.org/x/text",
            "rsc.io/quote",
            "rsc.io/sampler"
        ]
    );
    // "require directive": `// indirect` marks transitive modules.
    let text = get(&parsed, "golang.org/x/text");
    assert_eq!(
        (text.version.as_str(), text.direct),
        ("v0.14.0", Some(true))
    );
    assert_eq!(get(&parsed, "rsc.io/sampler").direct, Some(false));
    // "go.sum files": the content hash, not the `/go.mod` one, and not the stale v0.13.0 line.
    assert_eq!(
        text.hashes,
        ["h1:ScX5w1eTa3QqT8oi6+ziP7dTV1S2+ALU0bI+0zXKWiQ="]
    );
    // Only a `/go.mod` line: that hash, marked as covering go.mod alone.
    assert_eq!(
        get(&parsed, "golang.org/x/mod").hashes,
        ["go.mod:h1:hTbmBsO62+eylJbnUtE2MGJUyE7QWk4xUqPFrRgJ+7c="]
    );
    // "replace directive": to another module (its hash is used) and to a directory.
    let quote = get(&parsed, "rsc.io/quote");
    assert_eq!(
        quote.source.as_deref(),
        Some("module+example.com/quote-fork@v1.5.3")
    );
    assert_eq!(
        quote.hashes,
        ["h1:0123456789abcdefghijklmnopqrstuvwxyzABCDEFG="]
    );
    let local = get(&parsed, "example.com/localtool");
    assert_eq!(local.source.as_deref(), Some("path+./tools/localtool"));
    assert!(local.hashes.is_empty());

    // Without go.sum the modules are still listed, without hashes.
    let alone = format.parse(&fixture("go/go.mod"), "go/go.mod").unwrap();
    assert_eq!(alone.packages.len(), 5);
    assert!(alone.packages.iter().all(|p| p.hashes.is_empty()));
}

#[test]
fn nuget_lock_v1_and_v2() {
    let parsed = parse("nuget/packages.lock.json", "packages.lock.json");
    assert_eq!(parsed.format_version.as_deref(), Some("1"));
    let rows: Vec<(&str, &str, Option<&str>, Option<bool>)> = parsed
        .packages
        .iter()
        .map(|p| {
            (
                p.name.as_str(),
                p.version.as_str(),
                p.platform.as_deref(),
                p.direct,
            )
        })
        .collect();
    // Ids compare case-insensitively (NuGet documentation, "Package ID"); runprint keeps the
    // lower-case form. The empty `net8.0/win-x64` graph adds nothing.
    assert_eq!(
        rows,
        [
            ("helper.project", "", Some("net8.0"), None),
            ("packagea", "1.2.0", Some("net8.0"), Some(true)),
            ("packageb", "2.0.1", Some("net8.0"), Some(false)),
            (
                "packagec.native",
                "3.1.0",
                Some("net8.0/linux-x64"),
                Some(false)
            ),
        ]
    );
    assert_eq!(
        parsed.packages[1].hashes,
        ["sha512-sQ7f9XvI5mVQkF8Wl2q3o3r6PzI0rK0m9nJ8b5c4d3e2f1g0h9i8j7k6l5m4n3o2p1q0r9s8t7u6v5w4x3y2z1A=="]
    );
    assert_eq!(parsed.packages[0].source.as_deref(), Some("project"));

    let v2 = parse("nuget/packages.lock.v2.json", "packages.lock.json");
    assert_eq!(v2.format_version.as_deref(), Some("2"));
    assert!(v2.warnings.is_empty());
    // "Transitive pinning": CentralTransitive is transitive.
    assert_eq!(get(&v2, "packageb").direct, Some(false));
}

#[test]
fn renv_lock() {
    let parsed = parse("cran/renv.lock", "renv.lock");
    assert_eq!(parsed.format_version, None);
    // `R.Version` and `Bioconductor.Version` are recorded as entries of their own.
    assert_eq!(get(&parsed, "R").version, "4.4.1");
    assert_eq!(get(&parsed, "Bioconductor").version, "3.19");
    let markdown = get(&parsed, "markdown");
    assert_eq!(markdown.version, "1.0");
    assert_eq!(
        markdown.source.as_deref(),
        Some("https://cloud.r-project.org")
    );
    assert_eq!(
        markdown.hashes,
        ["renv-md5:4584a57f565dd7987d59dda3a02cfb41"]
    );
    // R versions keep their `-` (R documentation, `package_version`).
    assert_eq!(get(&parsed, "internal").version, "1.2-3");
    assert_eq!(
        get(&parsed, "toolkit").source.as_deref(),
        Some("git+https://github.com/example-org/toolkit#0123456789abcdef0123456789abcdef01234567")
    );
    let internal = get(&parsed, "internal").source.as_deref().unwrap();
    assert_eq!(
        internal,
        "git+https://git.example.org/stats/internal.git#89abcdef0123456789abcdef0123456789abcdef"
    );
    assert!(!format!("{:?}", parsed.packages).contains("hunter2"));
    assert_eq!(
        get(&parsed, "Biobase").source.as_deref(),
        Some("Bioconductor")
    );
    assert_eq!(parsed.packages.len(), 8);
}

#[test]
fn julia_manifest_formats() {
    let parsed = parse("julia/Manifest.toml", "Manifest.toml");
    assert_eq!(parsed.format_version.as_deref(), Some("2.0"));
    assert!(parsed.warnings.is_empty());
    assert_eq!(get(&parsed, "julia").version, "1.11.1");
    let example = get(&parsed, "Example");
    assert_eq!(example.version, "0.5.3");
    assert!(example.source.is_none());
    assert_eq!(
        example.hashes,
        ["git-tree-sha1:46e44e869b4d90b96bd8ed1fdcf32244fddfb6cc"]
    );
    assert_eq!(
        get(&parsed, "Tracked").source.as_deref(),
        Some("git+https://github.com/example-org/Tracked.jl.git#main")
    );
    assert_eq!(
        get(&parsed, "Worker").source.as_deref(),
        Some("path+dev/Worker")
    );
    // Standard libraries: with a version in newer manifests, none in older ones.
    assert_eq!(get(&parsed, "Dates").version, "1.11.0");
    let printf = get(&parsed, "Printf");
    assert_eq!(
        (printf.version.as_str(), printf.source.as_deref()),
        ("", Some("stdlib"))
    );
    assert_eq!(parsed.packages.len(), 7);

    let old = parse("julia/Manifest-old.toml", "Manifest.toml");
    assert_eq!(old.format_version.as_deref(), Some("1.0"));
    let names: Vec<&str> = old.packages.iter().map(|p| p.name.as_str()).collect();
    assert_eq!(names, ["Base64", "Example"]);
}
