//! The converter's error: where (file, key, layer, tensor) and what was wrong,
//! printed by the CLI as one line. Bad input maps to exit status 2.

use std::borrow::Cow;
use std::fmt;

#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Error {
    /// Where: a file path, optionally followed by a key, layer or tensor name.
    pub place: String,
    /// What was wrong, with the expected and the found value where useful.
    pub problem: String,
}

impl Error {
    pub fn new(place: impl Into<String>, problem: impl Into<String>) -> Self {
        Error {
            place: place.into(),
            problem: problem.into(),
        }
    }
}

impl fmt::Display for Error {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        // One line, always: names from files (paths, layer names, labels)
        // may hold newlines or terminal controls; `escape` shows them inert.
        let problem = escape(&self.problem);
        if self.place.is_empty() {
            write!(f, "{problem}")
        } else {
            write!(f, "{}: {problem}", escape(&self.place))
        }
    }
}

/// Characters that would break a one-line message or change how a terminal
/// shows it: control characters, line and paragraph separators, and the
/// bidirectional overrides and isolates (which can reorder what is shown).
fn needs_escape(c: char) -> bool {
    c.is_control()
        || matches!(c, '\u{2028}' | '\u{2029}' | '\u{200e}' | '\u{200f}')
        || ('\u{202a}'..='\u{202e}').contains(&c)
        || ('\u{2066}'..='\u{2069}').contains(&c)
}

/// `s` with every character of [`needs_escape`] written as a Rust-style
/// escape (`\n`, `\t`, `\u{1b}`), everything else as it is. Used for every
/// file name, place and name the CLI prints.
pub fn escape(s: &str) -> Cow<'_, str> {
    if !s.chars().any(needs_escape) {
        return Cow::Borrowed(s);
    }
    let mut out = String::with_capacity(s.len() + 8);
    for c in s.chars() {
        if needs_escape(c) {
            out.extend(c.escape_default());
        } else {
            out.push(c);
        }
    }
    Cow::Owned(out)
}

/// [`escape`] of a path as displayed.
pub fn escape_path(p: &std::path::Path) -> String {
    escape(&p.display().to_string()).into_owned()
}

impl std::error::Error for Error {}

pub type Result<T, E = Error> = std::result::Result<T, E>;

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn one_line_whatever_the_names() {
        let e = Error::new(
            "a\nb.toml: layer 1 (x\ry)",
            "name \"\u{1b}[31m\" \u{202e}ok\nfn",
        );
        let s = e.to_string();
        assert_eq!(s.lines().count(), 1);
        assert_eq!(
            s,
            "a\\nb.toml: layer 1 (x\\ry): name \"\\u{1b}[31m\" \\u{202e}ok\\nfn"
        );
        assert!(matches!(escape("plain × text"), Cow::Borrowed(_)));
    }
}
