//! JavaScript lockfiles written by the real package managers, read by runprint and compared
//! with each tool's own listing of what it resolved.
//!
//! The tools live where `.ci/run` installs them, named by `RUNPRINT_TEST_NODE_TOOLS` (a folder
//! whose `node_modules` holds `yarn` 1, `@yarnpkg/cli-dist` 4, `pnpm` 9 and `pnpm8`, an alias of
//! `pnpm` 8; `npm` and `node` come from PATH). Without the variable the tests print why they
//! skip; with it, a missing tool is a failure. The npm registry must be reachable.

use std::collections::{BTreeMap, BTreeSet};
use std::path::{Path, PathBuf};
use std::process::Command;

use runprint::lockfile::{Format, Parsed};
use serde_json::Value;

/// A small project: direct dependencies with transitive ones (`chalk`, `debug`), a scoped
/// package, one devDependency and one optionalDependency whose own dependency is a second,
/// nested version of the devDependency.
const PROJECT: &str = r#"{
  "name": "lock-probe",
  "version": "1.0.0",
  "private": true,
  "dependencies": { "debug": "4.3.4", "chalk": "^4.1.2", "@sindresorhus/is": "^4.6.0" },
  "devDependencies": { "is-number": "^7.0.0" },
  "optionalDependencies": { "is-odd": "^3.0.1" }
}
"#;

struct Tools {
    dir: PathBuf,
}

fn tools() -> Option<Tools> {
    match std::env::var_os("RUNPRINT_TEST_NODE_TOOLS") {
        None => {
            eprintln!(
                "skipped: RUNPRINT_TEST_NODE_TOOLS is not set (`.ci/run` installs npm, Yarn and pnpm and sets it)"
            );
            None
        }
        Some(d) => {
            let dir = PathBuf::from(d);
            assert!(
                dir.is_dir(),
                "RUNPRINT_TEST_NODE_TOOLS={} is not a folder",
                dir.display()
            );
            Some(Tools { dir })
        }
    }
}

impl Tools {
    /// A tool's entry script; missing is a failure once the variable is set.
    fn script(&self, rel: &str) -> PathBuf {
        let p = self.dir.join("node_modules").join(rel);
        assert!(
            p.is_file(),
            "RUNPRINT_TEST_NODE_TOOLS is set but {} is missing",
            p.display()
        );
        p
    }

    fn cache(&self, name: &str) -> PathBuf {
        self.dir.join("cache").join(name)
    }

    /// `node SCRIPT ARGS` in `cwd`, returning stdout; a failure shows stderr.
    fn node(&self, script: &str, args: &[&str], cwd: &Path, env: &[(&str, &str)]) -> String {
        let mut cmd = Command::new("node");
        cmd.arg(self.script(script)).args(args).current_dir(cwd);
        for (k, v) in env {
            cmd.env(k, v);
        }
        run(cmd)
    }

    fn npm(&self, args: &[&str], cwd: &Path) -> String {
        let mut cmd = Command::new("npm");
        cmd.args(args)
            .arg("--cache")
            .arg(self.cache("npm"))
            .args(["--no-audit", "--no-fund", "--ignore-scripts"])
            .current_dir(cwd);
        run(cmd)
    }
}

fn run(mut cmd: Command) -> String {
    let out = cmd
        .output()
        .unwrap_or_else(|e| panic!("cannot run {cmd:?}: {e}"));
    assert!(
        out.status.success(),
        "{cmd:?} failed: {}\n{}",
        String::from_utf8_lossy(&out.stderr),
        String::from_utf8_lossy(&out.stdout)
    );
    String::from_utf8(out.stdout).expect("tool output is UTF-8")
}

fn project() -> tempfile::TempDir {
    let dir = tempfile::tempdir().unwrap();
    std::fs::write(dir.path().join("package.json"), PROJECT).unwrap();
    dir
}

fn read(dir: &Path, file: &str) -> Parsed {
    let text = std::fs::read_to_string(dir.join(file)).unwrap();
    let format = Format::detect(file).expect("a lockfile name");
    assert_eq!(format.ecosystem(), "npm");
    format.parse(&text, file).unwrap()
}

type NameVersion = (String, String);

fn name_versions(parsed: &Parsed) -> BTreeSet<NameVersion> {
    parsed
        .packages
        .iter()
        .map(|p| (p.name.clone(), p.version.clone()))
        .collect()
}

fn flagged(
    parsed: &Parsed,
    pick: impl Fn(&runprint::manifest::Package) -> bool,
) -> BTreeSet<NameVersion> {
    parsed
        .packages
        .iter()
        .filter(|p| pick(p))
        .map(|p| (p.name.clone(), p.version.clone()))
        .collect()
}

/// Every node of an `npm ls --json` or `pnpm list --json` tree, under the given child maps.
fn walk_tree(node: &Value, maps: &[&str], out: &mut BTreeMap<NameVersion, Value>) {
    for map in maps {
        if let Some(children) = node.get(*map).and_then(Value::as_object) {
            for (name, child) in children {
                if let Some(v) = child.get("version").and_then(Value::as_str) {
                    out.insert((name.clone(), v.to_string()), child.clone());
                }
                walk_tree(child, maps, out);
            }
        }
    }
}

/// npm's own integrity for each name@version, for cross-checking the other tools' hashes: the
/// same registry tarball has the same SHA-512 whoever locks it.
fn npm_integrities(tools: &Tools) -> BTreeMap<NameVersion, String> {
    let dir = project();
    tools.npm(&["install", "--package-lock-only"], dir.path());
    let listing: Value = serde_json::from_str(&tools.npm(
        &["ls", "--all", "--json", "--long", "--package-lock-only"],
        dir.path(),
    ))
    .unwrap();
    let mut all = BTreeMap::new();
    walk_tree(&listing, &["dependencies"], &mut all);
    all.into_iter()
        .filter_map(|(k, v)| Some((k, v.get("integrity")?.as_str()?.to_string())))
        .collect()
}

/// The dependency edges read from the lockfile (`requires`) against the tool's own account of
/// each package's dependencies, for every package both know; at least `min` compared.
fn assert_edges(
    parsed: &Parsed,
    expected: &BTreeMap<NameVersion, BTreeSet<String>>,
    min: usize,
    tool: &str,
) {
    let mut checked = 0;
    for p in &parsed.packages {
        if let Some(want) = expected.get(&(p.name.clone(), p.version.clone())) {
            let got: BTreeSet<String> = p.requires.iter().cloned().collect();
            assert_eq!(&got, want, "{tool}: edges of {}@{}", p.name, p.version);
            checked += 1;
        }
    }
    assert!(
        checked >= min,
        "{tool}: only {checked} packages' edges compared"
    );
}

/// The names a `package.json` depends on (`dependencies` and `optionalDependencies`).
fn manifest_edges(package_json: &Value) -> BTreeSet<String> {
    ["dependencies", "optionalDependencies"]
        .iter()
        .filter_map(|m| package_json.get(*m).and_then(Value::as_object))
        .flat_map(|m| m.keys().cloned())
        .collect()
}

fn assert_hashes_match_npm(parsed: &Parsed, npm: &BTreeMap<NameVersion, String>) {
    let mut checked = 0;
    for p in &parsed.packages {
        if let Some(i) = npm.get(&(p.name.clone(), p.version.clone())) {
            assert_eq!(
                p.hashes,
                std::slice::from_ref(i),
                "{}@{}",
                p.name,
                p.version
            );
            checked += 1;
        }
    }
    assert!(checked >= 10, "only {checked} hashes compared");
}

#[test]
fn npm_lockfile_versions_match_npm_ls() {
    let Some(tools) = tools() else { return };
    // npm 11 still writes versions 1 and 2 on request (`--lockfile-version`, npm docs
    // "config"), so all three are generated rather than hand-made.
    for version in ["1", "2", "3"] {
        let dir = project();
        tools.npm(
            &[
                "install",
                "--package-lock-only",
                "--lockfile-version",
                version,
                "--omit-lockfile-registry-resolved=false",
            ],
            dir.path(),
        );
        let parsed = read(dir.path(), "package-lock.json");
        assert_eq!(parsed.format_version.as_deref(), Some(version));
        assert!(parsed.warnings.is_empty(), "{:?}", parsed.warnings);

        // Source of truth: `npm ls`, which loads the same lockfile through npm's own code.
        let ls = |extra: &[&str]| -> BTreeMap<NameVersion, Value> {
            let mut args = vec!["ls", "--all", "--json", "--long", "--package-lock-only"];
            args.extend_from_slice(extra);
            let listing: Value = serde_json::from_str(&tools.npm(&args, dir.path())).unwrap();
            let mut out = BTreeMap::new();
            walk_tree(&listing, &["dependencies"], &mut out);
            out
        };
        let all = ls(&[]);
        let keys: BTreeSet<NameVersion> = all.keys().cloned().collect();
        assert_eq!(name_versions(&parsed), keys, "lockfile v{version}");
        assert!(keys.len() >= 12, "{keys:?}");

        for p in &parsed.packages {
            let node = &all[&(p.name.clone(), p.version.clone())];
            let integrity = node.get("integrity").and_then(Value::as_str);
            assert_eq!(
                p.hashes.first().map(String::as_str),
                integrity,
                "{}",
                p.name
            );
            let resolved = node.get("resolved").and_then(Value::as_str);
            assert_eq!(p.source.as_deref(), resolved, "{}", p.name);
        }

        // Dev-only and optional-only packages: what `--omit=dev` / `--omit=optional` drop.
        let prod: BTreeSet<NameVersion> = ls(&["--omit=dev"]).into_keys().collect();
        let dev_only: BTreeSet<NameVersion> = keys.difference(&prod).cloned().collect();
        assert_eq!(flagged(&parsed, |p| p.dev), dev_only, "v{version} dev");
        let required: BTreeSet<NameVersion> = ls(&["--omit=optional"]).into_keys().collect();
        let optional_only: BTreeSet<NameVersion> = keys.difference(&required).cloned().collect();
        assert_eq!(
            flagged(&parsed, |p| p.optional),
            optional_only,
            "v{version} optional"
        );
        assert!(!dev_only.is_empty() && !optional_only.is_empty());

        if version != "1" {
            // Direct: the top level of `npm ls` without `--all`.
            let top: Value = serde_json::from_str(
                &tools.npm(&["ls", "--json", "--package-lock-only"], dir.path()),
            )
            .unwrap();
            let direct: BTreeSet<NameVersion> = top["dependencies"]
                .as_object()
                .unwrap()
                .iter()
                .map(|(n, v)| (n.clone(), v["version"].as_str().unwrap().to_string()))
                .collect();
            assert_eq!(flagged(&parsed, |p| p.direct == Some(true)), direct);
        }
    }
}

#[test]
fn yarn_classic_matches_yarn_list() {
    let Some(tools) = tools() else { return };
    let dir = project();
    let cache = tools.cache("yarn1");
    let cache = cache.to_str().unwrap();
    tools.node(
        "yarn/bin/yarn.js",
        &[
            "install",
            "--ignore-scripts",
            "--non-interactive",
            "--no-progress",
            "--cache-folder",
            cache,
        ],
        dir.path(),
        &[],
    );
    let parsed = read(dir.path(), "yarn.lock");
    assert_eq!(parsed.format_version.as_deref(), Some("1"));
    assert!(parsed.warnings.is_empty(), "{:?}", parsed.warnings);

    // `yarn list --json`: one tree of `name@version` nodes; "shadow" nodes name a range.
    let out = tools.node(
        "yarn/bin/yarn.js",
        &["list", "--json", "--no-progress", "--cache-folder", cache],
        dir.path(),
        &[],
    );
    let tree: Value = out
        .lines()
        .filter_map(|l| serde_json::from_str::<Value>(l).ok())
        .find(|v| v["type"] == "tree")
        .expect("a tree line from yarn list");
    fn walk(nodes: &Value, out: &mut BTreeSet<NameVersion>) {
        for n in nodes.as_array().into_iter().flatten() {
            if n.get("shadow") != Some(&Value::Bool(true)) {
                let spec = n["name"].as_str().unwrap();
                let at = spec[1..].find('@').unwrap() + 1;
                out.insert((spec[..at].to_string(), spec[at + 1..].to_string()));
            }
            walk(&n["children"], out);
        }
    }
    let mut listed = BTreeSet::new();
    walk(&tree["data"]["trees"], &mut listed);
    assert_eq!(name_versions(&parsed), listed);
    assert_hashes_match_npm(&parsed, &npm_integrities(&tools));
    // Edges: each hoisted package's own package.json, as yarn installed it.
    let mut installed = BTreeMap::new();
    for p in &parsed.packages {
        let file = dir
            .path()
            .join("node_modules")
            .join(&p.name)
            .join("package.json");
        let Ok(text) = std::fs::read_to_string(&file) else {
            continue;
        };
        let json: Value = serde_json::from_str(&text).unwrap();
        if json["version"].as_str() == Some(p.version.as_str()) {
            installed.insert((p.name.clone(), p.version.clone()), manifest_edges(&json));
        }
    }
    assert_edges(&parsed, &installed, 5, "yarn 1");
}

#[test]
fn yarn_berry_matches_yarn_info() {
    let Some(tools) = tools() else { return };
    let dir = project();
    std::fs::write(dir.path().join("yarn.lock"), "").unwrap();
    let cache = tools.cache("berry");
    let env = [
        ("YARN_ENABLE_TELEMETRY", "0"),
        ("YARN_ENABLE_GLOBAL_CACHE", "0"),
        ("YARN_ENABLE_IMMUTABLE_INSTALLS", "false"),
        ("YARN_CACHE_FOLDER", cache.to_str().unwrap()),
    ];
    let berry = "@yarnpkg/cli-dist/bin/yarn.js";
    tools.node(
        berry,
        &["install", "--mode=update-lockfile"],
        dir.path(),
        &env,
    );
    let parsed = read(dir.path(), "yarn.lock");
    assert!(parsed.warnings.is_empty(), "{:?}", parsed.warnings);
    assert!(parsed.format_version.is_some());

    // `yarn info --all --recursive --json`: one locator per line; the project's own workspace
    // is left out of runprint's list by design.
    let out = tools.node(
        berry,
        &["info", "--all", "--recursive", "--json"],
        dir.path(),
        &env,
    );
    let mut listed = BTreeSet::new();
    for line in out.lines() {
        let v: Value = serde_json::from_str(line).unwrap();
        let locator = v["value"].as_str().unwrap();
        let at = locator[1..].find('@').unwrap() + 1;
        let (name, reference) = (&locator[..at], &locator[at + 1..]);
        if reference.starts_with("workspace:") {
            continue;
        }
        listed.insert((
            name.to_string(),
            v["children"]["Version"].as_str().unwrap().to_string(),
        ));
    }
    assert_eq!(name_versions(&parsed), listed);
    // The project's own dependencies, of every kind, are the direct ones.
    let direct: BTreeSet<String> = flagged(&parsed, |p| p.direct == Some(true))
        .into_iter()
        .map(|(n, _)| n)
        .collect();
    let declared: Value = serde_json::from_str(PROJECT).unwrap();
    let mut wanted: BTreeSet<String> = BTreeSet::new();
    for map in ["dependencies", "devDependencies", "optionalDependencies"] {
        wanted.extend(declared[map].as_object().unwrap().keys().cloned());
    }
    assert_eq!(direct, wanted);
}

/// `pnpm install` (pnpm's entry `script`) in `dir`, scripts off, with the shared store;
/// returns the environment pnpm ran with, for the listing that follows.
fn pnpm_install(tools: &Tools, script: &str, dir: &Path) -> [(&'static str, &'static str); 1] {
    let env = [("CI", "true")];
    let store = tools.cache("pnpm-store");
    tools.node(
        script,
        &[
            "install",
            "--ignore-scripts",
            "--no-frozen-lockfile",
            "--store-dir",
            store.to_str().unwrap(),
        ],
        dir,
        &env,
    );
    env
}

fn pnpm_case(tools: &Tools, script: &str, expected_version: &str) {
    let dir = project();
    let env = pnpm_install(tools, script, dir.path());
    let parsed = read(dir.path(), "pnpm-lock.yaml");
    assert_eq!(parsed.format_version.as_deref(), Some(expected_version));
    assert!(parsed.warnings.is_empty(), "{:?}", parsed.warnings);

    let listing: Value = serde_json::from_str(&tools.node(
        script,
        &["list", "--json", "--depth", "Infinity"],
        dir.path(),
        &env,
    ))
    .unwrap();
    let root = &listing[0];
    let maps = ["dependencies", "devDependencies", "optionalDependencies"];
    let mut all = BTreeMap::new();
    walk_tree(root, &maps, &mut all);
    let keys: BTreeSet<NameVersion> = all.keys().cloned().collect();
    assert_eq!(name_versions(&parsed), keys, "pnpm {expected_version}");
    // Edges: the children pnpm's own tree gives each package.
    let edges: BTreeMap<NameVersion, BTreeSet<String>> = all
        .iter()
        .map(|(k, node)| {
            let children = ["dependencies", "optionalDependencies"]
                .iter()
                .filter_map(|m| node.get(*m).and_then(Value::as_object))
                .flat_map(|m| m.keys().cloned())
                .collect();
            (k.clone(), children)
        })
        .collect();
    assert_edges(&parsed, &edges, 5, &format!("pnpm {expected_version}"));

    // Dev-only: reachable from devDependencies and not from the others, per pnpm's own tree.
    let subtree = |names: &[&str]| {
        let mut sub = serde_json::Map::new();
        for name in names {
            sub.insert(name.to_string(), root[*name].clone());
        }
        let mut out = BTreeMap::new();
        walk_tree(&Value::Object(sub), &maps, &mut out);
        out
    };
    let prod = subtree(&["dependencies", "optionalDependencies"]);
    let dev = subtree(&["devDependencies"]);
    let dev_only: BTreeSet<NameVersion> =
        dev.into_keys().filter(|k| !prod.contains_key(k)).collect();
    assert_eq!(flagged(&parsed, |p| p.dev), dev_only);
    assert!(!dev_only.is_empty());
    // Direct: the top level of each map.
    let mut direct = BTreeSet::new();
    for map in maps {
        for (name, child) in root[map].as_object().into_iter().flatten() {
            direct.insert((name.clone(), child["version"].as_str().unwrap().to_string()));
        }
    }
    assert_eq!(flagged(&parsed, |p| p.direct == Some(true)), direct);
    assert_hashes_match_npm(&parsed, &npm_integrities(tools));
}

#[test]
fn pnpm9_lockfile_matches_pnpm_list() {
    let Some(tools) = tools() else { return };
    pnpm_case(&tools, "pnpm/bin/pnpm.cjs", "9.0");
}

#[test]
fn pnpm8_lockfile_matches_pnpm_list() {
    let Some(tools) = tools() else { return };
    pnpm_case(&tools, "pnpm8/bin/pnpm.cjs", "6.0");
}

/// A workspace of two members (npm documentation, "workspaces"; pnpm's
/// `pnpm-workspace.yaml`), locked by the tools themselves. The members are the project's own
/// code, not dependencies; every other package is checked against the tools' own listing of
/// the whole workspace (`npm ls --all --workspaces`, `pnpm list -r`).
fn write_workspace(dir: &Path, pnpm: bool) {
    let root = if pnpm {
        "{\n  \"name\": \"kelp-monorepo\",\n  \"private\": true\n}\n"
    } else {
        "{\n  \"name\": \"kelp-monorepo\",\n  \"private\": true,\n  \"workspaces\": [\"packages/*\"]\n}\n"
    };
    std::fs::write(dir.join("package.json"), root).unwrap();
    if pnpm {
        std::fs::write(
            dir.join("pnpm-workspace.yaml"),
            "packages:\n  - 'packages/*'\n",
        )
        .unwrap();
    }
    for (member, deps) in [
        (
            "dashboard",
            "{ \"debug\": \"4.3.4\", \"kelp-charts\": \"*\" }",
        ),
        ("charts", "{ \"is-number\": \"^7.0.0\" }"),
    ] {
        let d = dir.join("packages").join(member);
        std::fs::create_dir_all(&d).unwrap();
        let name = if member == "charts" {
            "kelp-charts"
        } else {
            "kelp-dashboard"
        };
        let deps = if pnpm {
            deps.replace("\"kelp-charts\": \"*\"", "\"kelp-charts\": \"workspace:*\"")
        } else {
            deps.to_string()
        };
        std::fs::write(
            d.join("package.json"),
            format!("{{\n  \"name\": \"{name}\",\n  \"version\": \"1.0.0\",\n  \"dependencies\": {deps}\n}}\n"),
        )
        .unwrap();
    }
}

/// The lockfile's packages equal the tool's listing, leaving out the workspace's own members
/// (`kelp-*`), and both hold the members' dependencies.
fn assert_same_dependencies(parsed: &Parsed, listed: impl Iterator<Item = NameVersion>) {
    let theirs: BTreeSet<NameVersion> = listed.filter(|(n, _)| !n.starts_with("kelp-")).collect();
    let ours: BTreeSet<NameVersion> = name_versions(parsed)
        .into_iter()
        .filter(|(n, _)| !n.starts_with("kelp-"))
        .collect();
    assert_eq!(ours, theirs);
    assert!(
        theirs.iter().any(|(n, _)| n == "debug") && theirs.iter().any(|(n, _)| n == "is-number")
    );
}

#[test]
fn npm_workspace_lock_matches_npm_ls() {
    let Some(tools) = tools() else { return };
    let dir = tempfile::tempdir().unwrap();
    write_workspace(dir.path(), false);
    tools.npm(&["install", "--package-lock-only"], dir.path());
    let parsed = read(dir.path(), "package-lock.json");
    assert!(parsed.warnings.is_empty(), "{:?}", parsed.warnings);
    let listing: Value = serde_json::from_str(&tools.npm(
        &[
            "ls",
            "--all",
            "--json",
            "--package-lock-only",
            "--workspaces",
        ],
        dir.path(),
    ))
    .unwrap();
    let mut all = BTreeMap::new();
    walk_tree(&listing, &["dependencies"], &mut all);
    assert_same_dependencies(&parsed, all.into_keys());
}

#[test]
fn pnpm_workspace_lock_matches_pnpm_list() {
    let Some(tools) = tools() else { return };
    let dir = tempfile::tempdir().unwrap();
    write_workspace(dir.path(), true);
    let script = "pnpm/bin/pnpm.cjs";
    let env = pnpm_install(&tools, script, dir.path());
    let parsed = read(dir.path(), "pnpm-lock.yaml");
    assert!(parsed.warnings.is_empty(), "{:?}", parsed.warnings);
    let listing: Value = serde_json::from_str(&tools.node(
        script,
        &["list", "-r", "--json", "--depth", "Infinity"],
        dir.path(),
        &env,
    ))
    .unwrap();
    let maps = ["dependencies", "devDependencies", "optionalDependencies"];
    let mut all = BTreeMap::new();
    for project in listing.as_array().unwrap() {
        walk_tree(project, &maps, &mut all);
    }
    assert_same_dependencies(&parsed, all.into_keys());
}
