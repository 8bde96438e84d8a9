//! Plain text out: every string that runprint did not write itself (a package name or version
//! from a lockfile, a path, a label, a variable's value) is escaped before it reaches a
//! terminal, a log or a Markdown page, so that it cannot move the cursor, recolour the screen,
//! rewrite a log line, hide characters, or inject HTML into a pull-request comment.
//!
//! Escaped, as `\u{XXXX}` (or `\n`, `\t`, `\r`, `\e` for the common ones):
//! * C0 controls (U+0000–U+001F), DEL (U+007F) and C1 controls (U+0080–U+009F): terminals act
//!   on them (ECMA-48, "Control Functions for Coded Character Sets", sections 5 and 8);
//! * the Unicode bidirectional formatting characters (U+061C, U+200E, U+200F, U+202A–U+202E,
//!   U+2066–U+2069; Unicode Standard Annex #9, "Unicode Bidirectional Algorithm", section 2),
//!   which reorder what is displayed (CVE-2021-42574);
//! * invisible format characters that make two different names look alike: zero-width space,
//!   joiners and word joiner (U+200B–U+200D, U+2060–U+2064), soft hyphen (U+00AD), Mongolian
//!   vowel separator (U+180E), the byte-order mark (U+FEFF), interlinear annotation marks
//!   (U+FFF9–U+FFFB) and tag characters (U+E0000–U+E007F); all of general category Cf in the
//!   Unicode Character Database;
//! * line and paragraph separators (U+2028, U+2029), which some viewers break lines on.
//!
//! Markdown cells ([`md_text`], [`md_code`]) escape as well `|` (which ends a GitHub table
//! cell, "GitHub Flavored Markdown Spec" 0.29, section 4.10), and in text outside code spans
//! `<`, `>` and `&` as HTML entities (raw HTML passes through GitHub Flavored Markdown,
//! section 4.6), and the characters Markdown gives a meaning to inline (`` ` ``, `*`, `_`,
//! `[`, `]`, `\`) by a backslash (section 2.4).

use std::borrow::Cow;
use std::fmt::Write;

/// True for a character that must never reach a terminal or a page as it is.
pub fn is_unsafe(c: char) -> bool {
    let u = c as u32;
    u < 0x20
        || (0x7f..=0x9f).contains(&u)
        || matches!(
            u,
            0x00ad
                | 0x061c
                | 0x180e
                | 0x200b..=0x200f
                | 0x2028..=0x202e
                | 0x2060..=0x2064
                | 0x2066..=0x206f
                | 0xfeff
                | 0xfff9..=0xfffb
                | 0xe0000..=0xe007f
        )
}

fn push_escaped(out: &mut String, c: char) {
    match c {
        '\n' => out.push_str("\\n"),
        '\t' => out.push_str("\\t"),
        '\r' => out.push_str("\\r"),
        '\u{1b}' => out.push_str("\\e"),
        c => {
            let _ = write!(out, "\\u{{{:04x}}}", c as u32);
        }
    }
}

/// One line of plain text: every unsafe character escaped, newlines included.
pub fn printable(s: &str) -> Cow<'_, str> {
    if !s.chars().any(is_unsafe) {
        return Cow::Borrowed(s);
    }
    let mut out = String::with_capacity(s.len() + 8);
    for c in s.chars() {
        if is_unsafe(c) {
            push_escaped(&mut out, c);
        } else {
            out.push(c);
        }
    }
    Cow::Owned(out)
}

/// Several lines of plain text: as [`printable`], but newlines are kept.
pub fn printable_lines(s: &str) -> Cow<'_, str> {
    if !s.chars().any(|c| c != '\n' && is_unsafe(c)) {
        return Cow::Borrowed(s);
    }
    let mut out = String::with_capacity(s.len() + 8);
    for c in s.chars() {
        if c != '\n' && is_unsafe(c) {
            push_escaped(&mut out, c);
        } else {
            out.push(c);
        }
    }
    Cow::Owned(out)
}

/// Text for a Markdown table cell or paragraph: one line, unsafe characters escaped, HTML
/// and inline Markdown neutralised, `|` escaped.
pub fn md_text(s: &str) -> String {
    let s = printable(s);
    let mut out = String::with_capacity(s.len() + 8);
    for c in s.chars() {
        match c {
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '&' => out.push_str("&amp;"),
            '|' | '`' | '*' | '_' | '[' | ']' | '\\' => {
                out.push('\\');
                out.push(c);
            }
            c => out.push(c),
        }
    }
    out
}

/// A Markdown code span holding `s` on one line: the fence is one backtick longer than the
/// longest run of backticks inside (GFM section 6.1), `|` is escaped for tables, unsafe
/// characters are escaped.
pub fn md_code(s: &str) -> String {
    let s = printable(s).replace('|', "\\|");
    let fence = "`".repeat(longest_backtick_run(&s) + 1);
    let pad = if s.starts_with('`') || s.ends_with('`') {
        " "
    } else {
        ""
    };
    format!("{fence}{pad}{s}{pad}{fence}")
}

/// A fence for a fenced code block holding `body`: at least three backticks, and more than
/// any run of backticks in the body (GFM section 4.5).
pub fn md_fence(body: &str) -> String {
    "`".repeat(longest_backtick_run(body).max(2) + 1)
}

fn longest_backtick_run(s: &str) -> usize {
    let (mut best, mut run) = (0, 0);
    for c in s.chars() {
        if c == '`' {
            run += 1;
            best = best.max(run);
        } else {
            run = 0;
        }
    }
    best
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn terminal_controls_are_escaped() {
        // ECMA-48: ESC [ 2 J clears the screen; CSI (U+009B) is its C1 form.
        assert_eq!(printable("1.0\u{1b}[2J"), "1.0\\e[2J");
        assert_eq!(printable("a\u{9b}31m"), "a\\u{009b}31m");
        assert_eq!(printable("a\rb\nc"), "a\\rb\\nc");
        assert_eq!(printable_lines("a\nb\r"), "a\nb\\r");
        assert_eq!(printable("plain 2.1.0+cu121 → é"), "plain 2.1.0+cu121 → é");
        assert!(matches!(printable("numpy"), Cow::Borrowed(_)));
    }

    #[test]
    fn look_alikes_are_made_visible() {
        // Zero-width space (U+200B) and right-to-left override (U+202E), UAX #9.
        assert_eq!(printable("to\u{200b}rch"), "to\\u{200b}rch");
        assert_eq!(printable("x\u{202e}cod.exe"), "x\\u{202e}cod.exe");
        assert_eq!(printable("\u{feff}a\u{e0041}"), "\\u{feff}a\\u{e0041}");
    }

    #[test]
    fn markdown_cannot_inject_html_or_break_cells() {
        assert_eq!(
            md_text("<img src=x onerror=alert(1)> | *b*"),
            "&lt;img src=x onerror=alert(1)&gt; \\| \\*b\\*"
        );
        assert_eq!(md_code("a`b|c"), "``a`b\\|c``");
        assert_eq!(md_code("`x"), "`` `x ``");
        assert_eq!(md_fence("x\n```\n"), "````");
        assert_eq!(md_fence("x"), "```");
    }
}
