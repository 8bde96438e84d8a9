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
        for c in &report.changes {
            let word = format!("{:<7}", c.impact.as_str());
            let _ = write!(out, "{}  {}", paint(&word, c.impact, color), p(&c.subject));
            let v = value_change(c);
            if !v.is_empty() {
                let _ = write!(out, "  {}", p(&v));
            }
            out.push('\n');
            let _ = writeln!(out, "         {}", p(&c.reason));
            if report.verbose {
                if !c.rule.is_empty() {
                    let _ = writeln!(out, "         rule {}; source: {}", c.rule, p(&c.source));
                }
                if let Some(d) = &c.value_diff {
                    let _ = writeln!(out, "         diff: {}", p(d));
                }
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
    out.push_str("\n| Impact | Subject | Change | Reason |\n|---|---|---|---|\n");
    for c in &report.changes {
        let mut reason = md_text(&c.reason);
        if report.verbose && !c.rule.is_empty() {
            reason.push_str(&format!(" <br>rule `{}`; source: {}", c.rule, p(&c.source)));
            if let Some(d) = &c.value_diff {
                reason.push_str(&format!(" <br>diff: {}", md_code(d)));
            }
        }
        let _ = writeln!(
            out,
            "| {} | {} | {} | {} |",
            c.impact,
            md_code(&c.subject),
            md_text(&value_change(c)),
            reason
        );
    }
    for d in &report.details {
        // Inside a fence from `md_fence` everything but the escaped characters is literal.
        let body = printable_lines(&d.diff);
        let fence = md_fence(&body);
        let _ = write!(
            out,
            "\n<details><summary>Packages in <code>{}</code></summary>\n\n{fence}diff\n{body}{fence}\n</details>\n",
            md_text(&d.subject),
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
