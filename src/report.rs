//! Rendering a [`Report`] for people (text, optionally coloured), programs (JSON) and pull
//! requests (Markdown). Rendering is pure: the caller decides where the text goes and whether
//! colour is allowed ([`color_allowed`]).

use std::fmt::Write;

use crate::diff::{Change, Impact, Report};

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
    match format {
        ReportFormat::Text => text(report, color),
        ReportFormat::Json => {
            let mut s = serde_json::to_string_pretty(report).expect("report always serializes");
            s.push('\n');
            s
        }
        ReportFormat::Markdown => markdown(report),
    }
}

fn value_change(c: &Change) -> String {
    match (&c.old, &c.new) {
        (Some(a), Some(b)) => format!("{a} → {b}"),
        (Some(a), None) => format!("{a} → (absent)"),
        (None, Some(b)) => format!("(absent) → {b}"),
        (None, None) => String::new(),
    }
}

fn counts(report: &Report) -> String {
    let n = |i: Impact| report.changes.iter().filter(|c| c.impact == i).count();
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

fn text(report: &Report, color: bool) -> String {
    let mut out = String::new();
    let verdict = report.verdict.as_str().to_uppercase();
    let _ = writeln!(out, "verdict: {}", paint(&verdict, report.verdict, color));
    if let Some(cause) = &report.most_likely_cause {
        let _ = writeln!(out, "Most likely cause: {cause}");
    }
    for (tag, side) in [("old", &report.old), ("new", &report.new)] {
        let fp = side
            .fingerprint
            .strip_prefix("sha256:")
            .unwrap_or(&side.fingerprint);
        let _ = write!(
            out,
            "  {tag}: {}  {}  {}",
            side.path,
            &fp[..fp.len().min(12)],
            side.created
        );
        if let Some(label) = &side.label {
            let _ = write!(out, "  \"{label}\"");
        }
        if side.modified {
            let _ = write!(out, "  (modified after stamping)");
        }
        out.push('\n');
    }
    if let Some(policy) = &report.policy {
        let _ = writeln!(out, "  policy: {policy}");
    }
    if report.changes.is_empty() {
        out.push_str("\nNo differences that runprint records.\n");
    } else {
        let _ = writeln!(out, "  {}", counts(report));
        out.push('\n');
        for c in &report.changes {
            let word = format!("{:<7}", c.impact.as_str());
            let _ = write!(out, "{}  {}", paint(&word, c.impact, color), c.subject);
            let v = value_change(c);
            if !v.is_empty() {
                let _ = write!(out, "  {v}");
            }
            out.push('\n');
            let _ = writeln!(out, "         {}", c.reason);
            if report.verbose {
                if !c.rule.is_empty() {
                    let _ = writeln!(out, "         rule {}; source: {}", c.rule, c.source);
                }
                if let Some(d) = &c.value_diff {
                    let _ = writeln!(out, "         diff: {d}");
                }
            }
        }
    }
    for note in &report.notes {
        let _ = writeln!(out, "\nnote: {note}");
    }
    for d in &report.details {
        let _ = write!(out, "\npackages in {}:\n{}", d.subject, d.diff);
    }
    out
}

fn md_cell(s: &str) -> String {
    s.replace('|', "\\|").replace('\n', " ")
}

fn markdown(report: &Report) -> String {
    let mut out = String::new();
    let _ = writeln!(out, "### runprint: **{}**", report.verdict);
    out.push('\n');
    if let Some(cause) = &report.most_likely_cause {
        let _ = writeln!(out, "**Most likely cause:** {}\n", md_cell(cause));
    }
    let _ = writeln!(
        out,
        "Compared `{}` (old) with `{}` (new): {}.",
        md_cell(&report.old.path),
        md_cell(&report.new.path),
        counts(report)
    );
    if let Some(policy) = &report.policy {
        let _ = writeln!(out, "\nPolicy: `{}`.", md_cell(policy));
    }
    for note in &report.notes {
        let _ = writeln!(out, "\n> **Note:** {}", md_cell(note));
    }
    if report.changes.is_empty() {
        out.push_str("\nNo differences that runprint records.\n");
        return out;
    }
    out.push_str("\n| Impact | Subject | Change | Reason |\n|---|---|---|---|\n");
    for c in &report.changes {
        let mut reason = md_cell(&c.reason);
        if report.verbose && !c.rule.is_empty() {
            reason.push_str(&format!(
                " <br>rule `{}`; source: {}",
                c.rule,
                md_cell(&c.source)
            ));
            if let Some(d) = &c.value_diff {
                reason.push_str(&format!(" <br>diff: `{}`", md_cell(d).replace('`', "'")));
            }
        }
        let _ = writeln!(
            out,
            "| {} | `{}` | {} | {} |",
            c.impact,
            md_cell(&c.subject),
            md_cell(&value_change(c)),
            reason
        );
    }
    for d in &report.details {
        let _ = write!(
            out,
            "\n<details><summary>Packages in <code>{}</code></summary>\n\n```diff\n{}```\n</details>\n",
            md_cell(&d.subject),
            d.diff
        );
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn no_color_rules() {
        assert!(color_allowed(true, None, Some("xterm")));
        assert!(!color_allowed(false, None, None));
        assert!(!color_allowed(true, Some("1"), None));
        assert!(color_allowed(true, Some(""), None));
        assert!(!color_allowed(true, None, Some("dumb")));
    }
}
