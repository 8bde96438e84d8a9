//! `runprint fleet`: many manifests at once, typically one per node (or per rank) of a
//! distributed training job, which must all share one environment.
//!
//! Every manifest gets a **fleet key**: the fingerprint of its content after removing what is
//! expected to differ between the nodes of one job ([`fleet_content`]):
//!
//! * the host name, time and label are in `[run]`, which never enters a fingerprint;
//! * rank and launcher variables ([`PER_NODE_VARS`], [`PER_NODE_PREFIXES`]) are dropped;
//! * device lists such as `CUDA_VISIBLE_DEVICES` (one GPU per local rank) keep only how many
//!   devices they name, so a node that sees fewer GPUs still stands out;
//! * the CPU list a process is pinned to keeps only its size;
//! * the total memory (firmware reservations make it differ by a few MiB between identical
//!   machines, and the comparison rates it `none`) and the remote URL are dropped.
//!
//! Manifests with equal keys form a group. The largest group is the majority; every other
//! group is compared with it by the ordinary [`crate::diff::compare`], once per group, and
//! each of its nodes inherits the group's differences, so the cost grows with the number of
//! distinct environments, not with the number of nodes.

use std::collections::HashMap;
use std::fmt::Write;
use std::path::{Path, PathBuf};

use rayon::prelude::*;
use serde::Serialize;

use crate::diff::{compare, Change, Impact};
use crate::error::ManifestError;
use crate::escape::{md_code, md_text, printable as p};
use crate::manifest::{Content, Manifest, RunInfo};
use crate::report::value_change;

/// Variables set per rank or per node by launchers (torchrun, Slurm, Open MPI, PMI, Kubernetes
/// indexed Jobs). Common practice: each launcher's documentation lists them.
pub const PER_NODE_VARS: &[&str] = &[
    "RANK",
    "LOCAL_RANK",
    "WORLD_SIZE",
    "LOCAL_WORLD_SIZE",
    "GROUP_RANK",
    "GROUP_WORLD_SIZE",
    "ROLE_RANK",
    "ROLE_WORLD_SIZE",
    "NODE_RANK",
    "MASTER_ADDR",
    "MASTER_PORT",
    "JOB_COMPLETION_INDEX",
];

/// Prefixes of per-node launcher variables.
pub const PER_NODE_PREFIXES: &[&str] = &[
    "SLURM_",
    "OMPI_COMM_WORLD_",
    "PMI_",
    "PMIX_",
    "TORCHELASTIC_",
    "MV2_COMM_WORLD_",
];

/// Device lists that differ per local rank by design; only their length is compared.
pub const DEVICE_LIST_VARS: &[&str] = &[
    "CUDA_VISIBLE_DEVICES",
    "HIP_VISIBLE_DEVICES",
    "ROCR_VISIBLE_DEVICES",
    "NVIDIA_VISIBLE_DEVICES",
];

/// True when a variable is expected to differ between the nodes of one job.
pub fn is_per_node_var(name: &str) -> bool {
    PER_NODE_VARS.contains(&name) || PER_NODE_PREFIXES.iter().any(|p| name.starts_with(p))
}

/// A device list reduced to what must agree across nodes: how many devices it names
/// (`all`, `none` and the empty list are kept as they are).
fn device_count(value: &str) -> String {
    match value.trim() {
        v @ ("all" | "none" | "void" | "") => v.to_string(),
        v => format!(
            "{} device(s)",
            v.split(',').filter(|d| !d.trim().is_empty()).count()
        ),
    }
}

/// The content with everything expected to differ between nodes removed (see the module
/// docs). Its fingerprint is the fleet key.
pub fn fleet_content(content: &Content) -> Content {
    let mut c = content.clone();
    c.env.vars.retain(|name, _| !is_per_node_var(name));
    for name in DEVICE_LIST_VARS {
        if let Some(v) = c.env.vars.get_mut(*name) {
            *v = device_count(v);
        }
    }
    c.env.redacted.retain(|name| !is_per_node_var(name));
    c.cpu.allowed_cpus = None;
    c.system.memory_bytes = 0;
    c.git.remote = None;
    c
}

/// One manifest of the fleet.
#[derive(Debug, Clone, Serialize)]
pub struct Node {
    /// The manifest's path as given.
    pub file: String,
    /// The host name recorded in it.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub host: Option<String>,
    /// Its stored fingerprint.
    pub fingerprint: String,
    /// True when it was edited after stamping.
    #[serde(skip_serializing_if = "std::ops::Not::not")]
    pub modified: bool,
}

impl Node {
    /// `file (host)`, or the file alone.
    pub fn name(&self) -> String {
        match &self.host {
            Some(h) => format!("{} ({h})", self.file),
            None => self.file.clone(),
        }
    }
}

/// Manifests sharing one fleet key.
#[derive(Debug, Clone, Serialize)]
pub struct Group {
    /// `sha256:` + hex fingerprint of the shared [`fleet_content`].
    pub key: String,
    /// How many manifests share it.
    pub size: usize,
    /// True for the reference group (the largest).
    pub majority: bool,
    /// The worst impact of its differences from the majority (`none` for the majority).
    pub impact: Impact,
    /// Its manifests, sorted by file.
    pub nodes: Vec<Node>,
    /// How its environment differs from the majority's, most important first.
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub differences: Vec<Change>,
}

/// The result of `runprint fleet`.
#[derive(Debug, Clone, Serialize)]
pub struct FleetReport {
    /// The worst impact found (`none` when every node shares the majority environment).
    pub verdict: Impact,
    /// Every difference of every node outside the majority, most important first; each
    /// subject starts with the node's file (and host).
    pub changes: Vec<Change>,
    /// Number of manifests read.
    pub manifests: usize,
    /// Groups of identical environments: the majority first, then the others, worst first.
    pub groups: Vec<Group>,
    /// Remarks: no strict majority, manifests edited after stamping.
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub notes: Vec<String>,
}

/// Errors of `fleet` before any comparison.
#[derive(Debug, thiserror::Error)]
pub enum FleetError {
    /// A folder could not be listed.
    #[error("cannot list folder `{}`: {source}", path.display())]
    Folder {
        /// The folder.
        path: PathBuf,
        /// The operating system's reason.
        source: std::io::Error,
    },
    /// Nothing to read.
    #[error("no manifests (`.toml` or `.json` files) found in {0}")]
    Empty(String),
    /// A manifest could not be read.
    #[error(transparent)]
    Manifest(#[from] ManifestError),
}

/// Files named directly, plus the `.toml` and `.json` files directly inside named folders
/// (sorted, hidden and temporary files skipped, so a half-written `.runprint-*.tmp` from a
/// node still stamping is never read).
pub fn expand_inputs(inputs: &[PathBuf]) -> Result<Vec<PathBuf>, FleetError> {
    let mut out = Vec::new();
    for input in inputs {
        if !input.is_dir() {
            out.push(input.clone());
            continue;
        }
        let entries = std::fs::read_dir(input).map_err(|source| FleetError::Folder {
            path: input.clone(),
            source,
        })?;
        let mut found: Vec<PathBuf> = entries
            .filter_map(Result::ok)
            .map(|e| e.path())
            .filter(|p| p.is_file())
            .filter(|p| {
                let name = p.file_name().and_then(|n| n.to_str()).unwrap_or("");
                !name.starts_with('.') && (name.ends_with(".toml") || name.ends_with(".json"))
            })
            .collect();
        found.sort();
        out.extend(found);
    }
    if out.is_empty() {
        let named = inputs
            .iter()
            .map(|p| format!("`{}`", p.display()))
            .collect::<Vec<_>>()
            .join(", ");
        return Err(FleetError::Empty(named));
    }
    Ok(out)
}

/// A manifest as `fleet` needs it: the node, its fleet key and the normalized manifest.
struct Loaded {
    node: Node,
    key: String,
    normalized: Manifest,
}

fn load(path: &Path) -> Result<Loaded, ManifestError> {
    let m = Manifest::load(path)?;
    let content = fleet_content(&m.content);
    let normalized = Manifest::new(RunInfo::default(), content);
    let node = Node {
        file: path.display().to_string(),
        host: m.run.hostname.clone(),
        modified: m.is_modified(),
        fingerprint: m.fingerprint,
    };
    Ok(Loaded {
        key: normalized.fingerprint.clone(),
        node,
        normalized,
    })
}

/// Reads every manifest (in parallel), groups them and compares each group with the majority.
/// `repo` holds the commits, to classify commit differences (see [`crate::diff::compare`]).
pub fn analyse(paths: &[PathBuf], repo: Option<&Path>) -> Result<FleetReport, FleetError> {
    let loaded: Vec<Loaded> = paths
        .par_iter()
        .map(|p| load(p))
        .collect::<Result<_, _>>()?;
    let total = loaded.len();

    // Group by key, keeping one normalized manifest per group.
    let mut index: HashMap<String, usize> = HashMap::new();
    let mut groups: Vec<(Group, Manifest)> = Vec::new();
    for l in loaded {
        let i = *index.entry(l.key.clone()).or_insert_with(|| {
            groups.push((
                Group {
                    key: l.key.clone(),
                    size: 0,
                    majority: false,
                    impact: Impact::None,
                    nodes: Vec::new(),
                    differences: Vec::new(),
                },
                l.normalized,
            ));
            groups.len() - 1
        });
        groups[i].0.size += 1;
        groups[i].0.nodes.push(l.node);
    }
    for (g, _) in &mut groups {
        g.nodes.sort_by(|a, b| a.file.cmp(&b.file));
    }
    groups.sort_by(|(a, _), (b, _)| {
        b.size
            .cmp(&a.size)
            .then_with(|| a.nodes[0].file.cmp(&b.nodes[0].file))
    });

    let mut notes = Vec::new();
    if groups.len() > 1 && groups[0].0.size * 2 <= total {
        notes.push(format!(
            "no environment is shared by more than half of the {total} manifests; the largest group ({} of {total}) is used as the reference",
            groups[0].0.size
        ));
    }
    let modified: Vec<&str> = groups
        .iter()
        .flat_map(|(g, _)| &g.nodes)
        .filter(|n| n.modified)
        .map(|n| n.file.as_str())
        .collect();
    if !modified.is_empty() {
        notes.push(format!(
            "{} manifest(s) were modified after stamping (their stored fingerprint does not match): {}",
            modified.len(),
            list_some(&modified)
        ));
    }

    let reference = groups[0].1.clone();
    groups[0].0.majority = true;
    let ref_name = format!("majority ({})", groups[0].0.nodes[0].file);
    let compared: Vec<Vec<Change>> = groups
        .par_iter()
        .skip(1)
        .map(|(g, m)| {
            let files = crate::check::commit_files(repo, &reference, m);
            let mut report = compare(&ref_name, &reference, &g.nodes[0].file, m, files.as_deref());
            report.changes.retain(|c| c.section != "run");
            report.changes
        })
        .collect();
    for ((g, _), diffs) in groups.iter_mut().skip(1).zip(compared) {
        g.impact = diffs.iter().map(|c| c.impact).max().unwrap_or(Impact::None);
        g.differences = diffs;
    }
    // The odd ones out, worst first; the majority stays first.
    groups[1..].sort_by(|(a, _), (b, _)| {
        b.impact
            .cmp(&a.impact)
            .then_with(|| b.size.cmp(&a.size))
            .then_with(|| a.nodes[0].file.cmp(&b.nodes[0].file))
    });

    let mut changes: Vec<Change> = Vec::new();
    for (g, _) in groups.iter().skip(1) {
        for node in &g.nodes {
            let name = node.name();
            changes.extend(g.differences.iter().map(|c| Change {
                subject: format!("{name}: {}", c.subject),
                ..c.clone()
            }));
        }
    }
    // Stable: within one impact, groups stay in size order and nodes in file order.
    changes.sort_by_key(|c| std::cmp::Reverse(c.impact));
    let verdict = changes
        .iter()
        .map(|c| c.impact)
        .max()
        .unwrap_or(Impact::None);
    Ok(FleetReport {
        verdict,
        changes,
        manifests: total,
        groups: groups.into_iter().map(|(g, _)| g).collect(),
        notes,
    })
}

/// Up to five items, then a count.
fn list_some(items: &[&str]) -> String {
    let mut s = items.iter().take(5).copied().collect::<Vec<_>>().join(", ");
    if items.len() > 5 {
        let _ = write!(s, " and {} more", items.len() - 5);
    }
    s
}

fn node_list(g: &Group) -> String {
    let names: Vec<String> = g.nodes.iter().map(Node::name).collect();
    list_some(&names.iter().map(String::as_str).collect::<Vec<_>>())
}

fn short_key(key: &str) -> &str {
    let h = key.strip_prefix("sha256:").unwrap_or(key);
    &h[..h.len().min(12)]
}

/// Plain text: the verdict, then each group with its members and its differences.
pub fn render_text(report: &FleetReport, color: bool) -> String {
    let paint = |s: &str, impact: Impact| -> String {
        if !color {
            return s.to_string();
        }
        let code = match impact {
            Impact::Retrain => "1;31",
            Impact::Verify => "1;33",
            Impact::None => "2",
        };
        format!("\x1b[{code}m{s}\x1b[0m")
    };
    let mut out = String::new();
    let verdict = report.verdict.as_str().to_uppercase();
    let _ = writeln!(out, "verdict: {}", paint(&verdict, report.verdict));
    let majority = &report.groups[0];
    let _ = writeln!(
        out,
        "  {} manifests, {} environment(s); majority: {} of {}",
        report.manifests,
        report.groups.len(),
        majority.size,
        report.manifests
    );
    for (i, g) in report.groups.iter().enumerate() {
        let tag = if g.majority {
            "majority".to_string()
        } else {
            paint(g.impact.as_str(), g.impact)
        };
        let _ = writeln!(
            out,
            "\ngroup {}: {} manifest(s), {tag}, key {}",
            i + 1,
            g.size,
            short_key(&g.key)
        );
        let _ = writeln!(out, "  {}", p(&node_list(g)));
        for c in &g.differences {
            let word = format!("{:<7}", c.impact.as_str());
            let _ = write!(out, "  {}  {}", paint(&word, c.impact), p(&c.subject));
            let v = value_change(c);
            if !v.is_empty() {
                let _ = write!(out, "  {}", p(&v));
            }
            let _ = writeln!(out, "\n           {}", p(&c.reason));
        }
    }
    if report.groups.len() == 1 {
        out.push_str("\nEvery manifest shares one environment.\n");
    }
    for note in &report.notes {
        let _ = writeln!(out, "\nnote: {}", p(note));
    }
    out
}

/// One JSON object: `verdict`, `changes` (per node, most important first), `groups`.
pub fn render_json(report: &FleetReport) -> String {
    let mut s = serde_json::to_string_pretty(report).expect("fleet report always serializes");
    s.push('\n');
    s
}

/// A Markdown block for a job summary or a pull-request comment.
pub fn render_markdown(report: &FleetReport) -> String {
    let mut out = String::new();
    let _ = writeln!(out, "### runprint fleet: **{}**\n", report.verdict);
    let _ = writeln!(
        out,
        "{} manifests, {} environment(s); the majority ({} of {}) is the reference.",
        report.manifests,
        report.groups.len(),
        report.groups[0].size,
        report.manifests
    );
    for note in &report.notes {
        let _ = writeln!(out, "\n> **Note:** {}", md_text(note));
    }
    out.push_str("\n| Group | Manifests | Impact | Members |\n|---|---|---|---|\n");
    for (i, g) in report.groups.iter().enumerate() {
        let impact = if g.majority {
            "majority".to_string()
        } else {
            g.impact.to_string()
        };
        let _ = writeln!(
            out,
            "| {} | {} | {impact} | {} |",
            i + 1,
            g.size,
            md_text(&node_list(g))
        );
    }
    for (i, g) in report.groups.iter().enumerate().skip(1) {
        let _ = writeln!(
            out,
            "\n#### Group {}: how it differs from the majority\n\n| Impact | Subject | Change | Reason |\n|---|---|---|---|",
            i + 1
        );
        for c in &g.differences {
            let _ = writeln!(
                out,
                "| {} | {} | {} | {} |",
                c.impact,
                md_code(&c.subject),
                md_text(&value_change(c)),
                md_text(&c.reason)
            );
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn device_lists_keep_their_length_only() {
        assert_eq!(device_count("0,1,2,3"), "4 device(s)");
        assert_eq!(device_count("3"), "1 device(s)");
        assert_eq!(device_count("GPU-1a2b,GPU-3c4d"), "2 device(s)");
        assert_eq!(device_count("all"), "all");
    }

    #[test]
    fn per_node_facts_leave_the_key_and_the_rest_stays() {
        let mut a = Content::default();
        a.env.vars.insert("OMP_NUM_THREADS".into(), "8".into());
        a.env.vars.insert("CUDA_VISIBLE_DEVICES".into(), "0".into());
        a.cpu.allowed_cpus = Some("0-7".into());
        a.system.memory_bytes = 1 << 40;
        let mut b = a.clone();
        b.env.vars.insert("CUDA_VISIBLE_DEVICES".into(), "1".into());
        b.env.vars.insert("SLURM_PROCID".into(), "1".into());
        b.cpu.allowed_cpus = Some("8-15".into());
        b.system.memory_bytes = (1 << 40) - 4096;
        assert_eq!(
            fleet_content(&a).fingerprint(),
            fleet_content(&b).fingerprint()
        );
        b.env.vars.insert("OMP_NUM_THREADS".into(), "4".into());
        assert_ne!(
            fleet_content(&a).fingerprint(),
            fleet_content(&b).fingerprint()
        );
        let mut c = a.clone();
        c.env
            .vars
            .insert("CUDA_VISIBLE_DEVICES".into(), "0,1".into());
        assert_ne!(
            fleet_content(&a).fingerprint(),
            fleet_content(&c).fingerprint()
        );
    }
}
