//! Names and paths from a model or the command line made safe to print: control characters (ESC,
//! BEL, CR, ...) and the invisible characters that reorder text on a terminal are escaped, so a
//! crafted tensor name cannot move the cursor, ring the bell or hide part of a message.

use std::borrow::Cow;
use std::fmt::Write;
use std::path::Path;

/// `s` with every control or bidirectional-formatting character written as `\u{XX}` (`\t`, `\n`,
/// `\r` as themselves escaped); other text unchanged, and not copied when nothing needs escaping.
pub fn escape(s: &str) -> Cow<'_, str> {
    if !s.chars().any(needs_escape) {
        return Cow::Borrowed(s);
    }
    let mut out = String::with_capacity(s.len() + 8);
    for c in s.chars() {
        if needs_escape(c) {
            let _ = write!(out, "{}", c.escape_default());
        } else {
            out.push(c);
        }
    }
    Cow::Owned(out)
}

/// A path for a message, escaped like [`escape`].
pub fn escape_path(p: &Path) -> String {
    escape(&p.to_string_lossy()).into_owned()
}

/// C0 and C1 controls, DEL, and the bidirectional embedding, override and isolate marks.
fn needs_escape(c: char) -> bool {
    c.is_control()
        || matches!(c, '\u{200e}' | '\u{200f}' | '\u{202a}'..='\u{202e}' | '\u{2066}'..='\u{2069}')
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn plain_names_are_borrowed() {
        assert!(matches!(
            escape("/blocks.0/act/Mul_output_0"),
            Cow::Borrowed(_)
        ));
    }

    /// ECMA-48 (common practice for terminals): ESC starts a control sequence, BEL rings, CR
    /// returns the cursor; none may reach the terminal raw.
    #[test]
    fn control_characters_are_escaped() {
        assert_eq!(escape("a\u{1b}[2Jb"), "a\\u{1b}[2Jb");
        assert_eq!(escape("bell\u{7}"), "bell\\u{7}");
        assert_eq!(escape("x\ry\nz\t"), "x\\ry\\nz\\t");
        assert_eq!(escape("del\u{7f}c1\u{9b}"), "del\\u{7f}c1\\u{9b}");
    }

    /// Unicode TR9 (bidirectional algorithm): overrides and isolates reorder what follows them.
    #[test]
    fn bidirectional_marks_are_escaped() {
        assert_eq!(escape("abc\u{202e}fed"), "abc\\u{202e}fed");
        assert_eq!(escape("\u{2066}x"), "\\u{2066}x");
        assert_eq!(escape("ünïcödé"), "ünïcödé");
    }
}
