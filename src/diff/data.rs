//! The `data` section: declared data inputs by digest, and which files of a folder changed.

use super::*;

rule_group! {
    /// The rules of declared data inputs (the conditions: `compare_data` below).
    DATA_RULES;
    DATA_CHANGED = "data.changed", "data", Retrain, 100,
        "declared data input changed",
        "the training data changed, and a model trained on different data is a different model",
        "common practice";
    DATA_ONE_SIDE = "data.one-side", "data", Verify, 45,
        "data input declared on one side only",
        "its content cannot be compared, so the same data cannot be confirmed",
        "common practice";

}

pub(super) fn compare_data(old: &Content, new: &Content, out: &mut Vec<Change>) {
    let index = |c: &Content| -> BTreeMap<String, DataInput> {
        c.data.iter().map(|d| (d.path.clone(), d.clone())).collect()
    };
    let (o, n) = (index(old), index(new));
    for (path, a, b) in outer_join(&o, &n) {
        let subject = format!("data {path}");
        match (a, b) {
            (Some(a), Some(b)) if a.sha256 != b.sha256 => {
                let lead = changed_files(a, b).map_or_else(String::new, |d| format!("files {d}"));
                out.push(Change::from_rule(
                    &DATA_CHANGED,
                    Section::Data,
                    subject,
                    lead,
                    Some(format!(
                        "{} files, {} bytes, {}",
                        a.files,
                        a.size,
                        digest_short(&a.sha256)
                    )),
                    Some(format!(
                        "{} files, {} bytes, {}",
                        b.files,
                        b.size,
                        digest_short(&b.sha256)
                    )),
                ));
            }
            (Some(_), Some(_)) => {}
            (a, b) => out.push(Change::from_rule(
                &DATA_ONE_SIDE,
                Section::Data,
                subject,
                "",
                a.map(|d| digest_short(&d.sha256)),
                b.map(|d| digest_short(&d.sha256)),
            )),
        }
    }
}

/// Names the files that differ between two listings of one folder, when both have listings.
fn changed_files(a: &DataInput, b: &DataInput) -> Option<String> {
    if a.entries.is_empty() || b.entries.is_empty() {
        return None;
    }
    let (ae, be): (BTreeMap<&str, &str>, BTreeMap<&str, &str>) = (
        a.entries
            .iter()
            .map(|e| (e.path.as_str(), e.sha256.as_str()))
            .collect(),
        b.entries
            .iter()
            .map(|e| (e.path.as_str(), e.sha256.as_str()))
            .collect(),
    );
    let mut parts = Vec::new();
    let changed: Vec<String> = ae
        .iter()
        .filter(|(p, d)| be.get(*p).is_some_and(|e| e != *d))
        .map(|(p, _)| p.to_string())
        .collect();
    let added: Vec<String> = be
        .keys()
        .filter(|p| !ae.contains_key(*p))
        .map(|p| p.to_string())
        .collect();
    let removed: Vec<String> = ae
        .keys()
        .filter(|p| !be.contains_key(*p))
        .map(|p| p.to_string())
        .collect();
    for (word, list) in [("changed", changed), ("added", added), ("removed", removed)] {
        if !list.is_empty() {
            parts.push(format!("{word}: {}", some_paths(&list)));
        }
    }
    Some(parts.join("; "))
}
