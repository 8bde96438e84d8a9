//! Rendering a [`Report`] for people (text, optionally coloured), programs (JSON) and pull
//! requests (Markdown). Rendering is pure: the caller decides where the text goes and whether
//! colour is allowed ([`color_allowed`]).

use std::fmt::Write;

use crate::diff::{Change, Impact, Report};
use crate::escape::{md_code, md_fence, md_text, printable as p, printable_lines};

/// Output formats of `diff`.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ReportFormat {
    /// Plain text for a terminal or a log.
    Text,
    /// One JSON object.
    Json,
    /// A Markdown block for a pull-request comment.
    Markdown,
}

/// Colour is used only on a terminal, never when `NO_COLOR` is set (https://no-color.org) or
/// `TERM=dumb`.
pub fn color_allowed(is_terminal: bool, no_color: Option<&str>, term: Option<&str>) -> bool {
    is_terminal && no_color.is_none_or(str::is_empty) && term != Some("dumb")
}

/// Renders a report.
pub fn render(report: &Report, format: ReportFormat, color: bool) -> String {
    let mut out = Vec::new();
    write(report, format, color, &mut out).expect("writing to memory cannot fail");
    String::from_utf8(out).expect("reports are UTF-8")
}

/// Writes [`render`]'s text to `out`; JSON is serialized straight into it (a report of
/// thousands of changes is never held whole).
pub fn write(
    report: &Report,
    format: ReportFormat,
    color: bool,
    out: &mut dyn std::io::Write,
) -> std::io::Result<()> {
    match format {
        ReportFormat::Text => out.write_all(text(report, color).as_bytes()),
        ReportFormat::Json => {
            serde_json::to_writer_pretty(&mut *out, report).map_err(std::io::Error::from)?;
            out.write_all(b"\n")
        }
        ReportFormat::Markdown => out.write_all(markdown(report).as_bytes()),
    }
}

/// The old and new values as `old → new`, unescaped (each renderer escapes for its medium).
pub(crate) fn value_change(c: &Change) -> String {
    match (&c.old, &c.new) {
        (Some(a), Some(b)) => format!("{a} → {b}"),
        (Some(a), None) => format!("{a} → (absent)"),
        (None, Some(b)) => format!("(absent) → {b}"),
        (None, None) => String::new(),
    }
}

/// The first twelve characters of a fingerprint, cut on a character boundary (a damaged
/// manifest may hold any text there).
fn short(fp: &str) -> &str {
    let fp = fp.strip_prefix("sha256:").unwrap_or(fp);
    let end = fp.char_indices().nth(12).map_or(fp.len(), |(i, _)| i);
    &fp[..end]
}

fn counts(report: &Report) -> String {
    // Rows grouped under another are part of its fact.
    let n = |i: Impact| {
        report
            .changes
            .iter()
            .filter(|c| c.impact == i && c.group.is_none())
            .count()
    };
    format!(
        "{} retrain, {} verify, {} none",
        n(Impact::Retrain),
        n(Impact::Verify),
        n(Impact::None)
    )
}

fn paint(s: &str, impact: Impact, color: bool) -> String {
    if !color {
        return s.to_string();
    }
    let code = match impact {
        Impact::Retrain => "1;31",
        Impact::Verify => "1;33",
        Impact::None => "2",
    };
    format!("\x1b[{code}m{s}\x1b[0m")
}

/// The members of the group headed by `head`.
fn members<'a>(report: &'a Report, head: &'a Change) -> impl Iterator<Item = &'a Change> {
    report
        .changes
        .iter()
        .filter(move |c| c.group.as_deref() == Some(head.subject.as_str()))
}

/// The `none` rows by what they are (their rule's title), with counts, largest first.
fn none_summary(report: &Report) -> Vec<(usize, String)> {
    let mut by: std::collections::BTreeMap<String, usize> = std::collections::BTreeMap::new();
    for c in report
        .changes
        .iter()
        .filter(|c| c.impact == Impact::None && c.group.is_none())
    {
        let what = if c.accepted.is_some() {
            "accepted by the policy file".to_string()
        } else {
            c.rule.title.to_string()
        };
        *by.entry(what).or_default() += 1;
    }
    let mut v: Vec<(usize, String)> = by.into_iter().map(|(k, n)| (n, k)).collect();
    v.sort_by(|a, b| b.0.cmp(&a.0).then_with(|| a.1.cmp(&b.1)));
    v
}

fn text(report: &Report, color: bool) -> String {
    let mut out = String::new();
    let verdict = report.verdict.as_str().to_uppercase();
    let _ = writeln!(out, "verdict: {}", paint(&verdict, report.verdict, color));
    if let Some(cause) = &report.most_likely_cause {
        let _ = writeln!(out, "Most likely cause: {}", p(cause));
    }
    for (tag, side) in [("old", &report.old), ("new", &report.new)] {
        let _ = write!(
            out,
            "  {tag}: {}  {}  {}",
            p(&side.path),
            p(short(&side.fingerprint)),
            p(&side.created)
        );
        if let Some(label) = &side.label {
            let _ = write!(out, "  \"{}\"", p(label));
        }
        if side.modified {
            let _ = write!(out, "  (modified after stamping)");
        }
        out.push('\n');
    }
    if let Some(policy) = &report.policy {
        let _ = writeln!(out, "  policy: {}", p(policy));
    }
    if report.changes.is_empty() {
        out.push_str("\nNo differences that runprint records.\n");
    } else {
        let _ = writeln!(out, "  {}", counts(report));
        out.push('\n');
        for c in report.changes.iter().filter(|c| c.group.is_none()) {
            if c.impact == Impact::None && !report.all {
                continue;
            }
            let word = format!("{:<7}", c.impact.as_str());
            let _ = write!(out, "{}  {}", paint(&word, c.impact, color), p(&c.subject));
            let v = value_change(c);
            if !v.is_empty() {
                let _ = write!(out, "  {}", p(&v));
            }
            out.push('\n');
            let _ = writeln!(out, "         {}", p(&c.reason));
            if c.lockfiles.len() > 1 {
                let _ = writeln!(out, "         in {}", p(&c.lockfiles.join(", ")));
            }
            if report.verbose {
                let _ = writeln!(out, "         rule {}; source: {}", c.rule.id, p(c.source));
                if let Some(d) = &c.value_diff {
                    let _ = writeln!(out, "         diff: {}", p(d));
                }
            }
            for m in members(report, c) {
                let _ = write!(out, "         + {}", p(&m.subject));
                let v = value_change(m);
                if !v.is_empty() {
                    let _ = write!(out, "  {}", p(&v));
                }
                let _ = writeln!(out, "  ({})", m.impact);
                if report.verbose {
                    let _ = writeln!(out, "           {}", p(&m.reason));
                }
            }
        }
        let summary = none_summary(report);
        if !report.all && !summary.is_empty() {
            let total: usize = summary.iter().map(|(n, _)| n).sum();
            let _ = writeln!(
                out,
                "{}  {total} change(s) judged harmless (--all lists them):",
                paint("none   ", Impact::None, color)
            );
            for (n, what) in summary {
                let _ = writeln!(out, "         {n} × {}", p(&what));
            }
        }
    }
    for note in &report.notes {
        let _ = writeln!(out, "\nnote: {}", p(note));
    }
    for d in &report.details {
        let _ = write!(
            out,
            "\npackages in {}:\n{}",
            p(&d.subject),
            printable_lines(&d.diff)
        );
    }
    out
}

/// The most a Markdown report may hold: a pull-request comment takes 65,536 characters, and
/// this leaves room for what a CI job wraps around it.
pub const MARKDOWN_LIMIT: usize = 60_000;

/// A Markdown table row for a change.
fn md_row(report: &Report, c: &Change) -> String {
    let mut reason = md_text(&c.reason);
    if c.lockfiles.len() > 1 {
        reason.push_str(&format!(
            " <br>in {}",
            c.lockfiles
                .iter()
                .map(|l| md_code(l))
                .collect::<Vec<_>>()
                .join(", ")
        ));
    }
    if report.verbose {
        reason.push_str(&format!(
            " <br>rule `{}`; source: {}",
            c.rule.id,
            p(c.source)
        ));
        if let Some(d) = &c.value_diff {
            reason.push_str(&format!(" <br>diff: {}", md_code(d)));
        }
    }
    format!(
        "| {} | {} | {} | {} |\n",
        c.impact,
        md_code(&c.subject),
        md_text(&value_change(c)),
        reason
    )
}

const MD_TABLE_HEAD: &str = "| Impact | Subject | Change | Reason |\n|---|---|---|---|\n";

/// Appends `rows` as a table while they fit under `limit`; returns how many were left out.
fn md_table(out: &mut String, rows: &[String], limit: usize) -> usize {
    out.push_str(MD_TABLE_HEAD);
    for (i, r) in rows.iter().enumerate() {
        if out.len() + r.len() > limit {
            return rows.len() - i;
        }
        out.push_str(r);
    }
    0
}

fn markdown(report: &Report) -> String {
    let mut out = String::new();
    let _ = writeln!(out, "### runprint: **{}**", report.verdict);
    out.push('\n');
    if let Some(cause) = &report.most_likely_cause {
        let _ = writeln!(out, "**Most likely cause:** {}\n", md_text(cause));
    }
    let _ = writeln!(
        out,
        "Compared {} (old) with {} (new): {}.",
        md_code(&report.old.path),
        md_code(&report.new.path),
        counts(report)
    );
    if let Some(policy) = &report.policy {
        let _ = writeln!(out, "\nPolicy: {}.", md_code(policy));
    }
    for note in &report.notes {
        let _ = writeln!(out, "\n> **Note:** {}", md_text(note));
    }
    if report.changes.is_empty() {
        out.push_str("\nNo differences that runprint records.\n");
        return out;
    }
    // Room kept for the closing lines and the note on what was left out.
    let limit = MARKDOWN_LIMIT - 1_000;
    let mut left_out = 0;
    let heads: Vec<&Change> = report
        .changes
        .iter()
        .filter(|c| c.group.is_none())
        .collect();
    let main: Vec<String> = heads
        .iter()
        .filter(|c| c.impact > Impact::None)
        .map(|c| md_row(report, c))
        .collect();
    if !main.is_empty() {
        out.push('\n');
        left_out += md_table(&mut out, &main, limit);
    }
    let grouped: Vec<String> = report
        .changes
        .iter()
        .filter(|c| c.group.is_some())
        .map(|c| {
            let mut c = c.clone();
            c.subject = format!("{} (with {})", c.subject, c.group.as_deref().unwrap_or(""));
            md_row(report, &c)
        })
        .collect();
    if !grouped.is_empty() && left_out == 0 {
        let _ = write!(
            out,
            "\n<details><summary>{} change(s) that came with the rows above</summary>\n\n",
            grouped.len()
        );
        left_out += md_table(&mut out, &grouped, limit);
        out.push_str("\n</details>\n");
    } else {
        left_out += grouped.len();
    }
    let none: Vec<String> = heads
        .iter()
        .filter(|c| c.impact == Impact::None)
        .map(|c| md_row(report, c))
        .collect();
    if !none.is_empty() && left_out == 0 {
        let _ = write!(
            out,
            "\n<details><summary>{} change(s) judged harmless</summary>\n\n",
            none.len()
        );
        for (n, what) in none_summary(report) {
            let _ = writeln!(out, "- {n} × {}", md_text(&what));
        }
        out.push('\n');
        left_out += md_table(&mut out, &none, limit);
        out.push_str("\n</details>\n");
    } else {
        left_out += none.len();
    }
    for d in &report.details {
        // Inside a fence from `md_fence` everything but the escaped characters is literal.
        let body = printable_lines(&d.diff);
        let fence = md_fence(&body);
        let block = format!(
            "\n<details><summary>Packages in <code>{}</code></summary>\n\n{fence}diff\n{body}{fence}\n</details>\n",
            md_text(&d.subject),
        );
        if out.len() + block.len() > limit {
            left_out += 1;
            continue;
        }
        out.push_str(&block);
    }
    if left_out > 0 {
        let _ = writeln!(
            out,
            "\n*{left_out} more row(s) left out to fit a pull-request comment; `runprint diff --format json` lists every change.*"
        );
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_fingerprint_with_any_text_is_cut_on_a_character_boundary() {
        // A damaged manifest may hold multi-byte characters where the digest belongs; a byte
        // slice at 12 would cut `é` (2 bytes in UTF-8) in half and panic.
        assert_eq!(short("sha256:ééééééééééééééé"), "éééééééééééé");
        assert_eq!(short("sha256:0123456789abcdef"), "0123456789ab");
        assert_eq!(short("abc"), "abc");
    }

    #[test]
    fn no_color_rules() {
        assert!(color_allowed(true, None, Some("xterm")));
        assert!(!color_allowed(false, None, None));
        assert!(!color_allowed(true, Some("1"), None));
        assert!(color_allowed(true, Some(""), None));
        assert!(!color_allowed(true, None, Some("dumb")));
    }
}
