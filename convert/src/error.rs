//! The converter's error: where (file, key, layer, tensor) and what was wrong,
//! printed by the CLI as one line. Bad input maps to exit status 2.

use std::borrow::Cow;
use std::fmt;

/// Every error of the converter, the benches and the CLI. Each is printed
/// (`Display`) as one line; the CLI exits with status 2 for all of them.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Error {
    /// Bad input: where (a file path, optionally followed by a key, layer or
    /// tensor name) and what was wrong, with the expected and the found value
    /// where useful.
    Input { place: String, problem: String },
    /// The runtime refused a model file or its buffers: where, what the
    /// converter was doing, and the runtime's own error.
    Runtime {
        place: String,
        doing: &'static str,
        error: midge_runtime::Error,
    },
    /// Reading, writing or listing a file failed: where, what was being
    /// done, and the operating system's error (kind and message).
    Io {
        place: String,
        doing: String,
        kind: std::io::ErrorKind,
        message: String,
    },
    /// A program or compiler target the command needs is not installed:
    /// what it is (and what for), and how to install it.
    Missing { tool: String, install: String },
}

impl Error {
    /// Bad input at `place`.
    pub fn new(place: impl Into<String>, problem: impl Into<String>) -> Self {
        Error::Input {
            place: place.into(),
            problem: problem.into(),
        }
    }

    /// The runtime's `error` while `doing` something with the model at `place`.
    pub fn runtime(
        place: impl Into<String>,
        doing: &'static str,
        error: midge_runtime::Error,
    ) -> Self {
        Error::Runtime {
            place: place.into(),
            doing,
            error,
        }
    }

    /// An I/O `error` while `doing` something with the file at `place`.
    pub fn io(place: impl Into<String>, doing: impl Into<String>, error: &std::io::Error) -> Self {
        Error::Io {
            place: place.into(),
            doing: doing.into(),
            kind: error.kind(),
            message: error.to_string(),
        }
    }

    /// `tool` is not installed; `install` says how to get it.
    pub fn missing(tool: impl Into<String>, install: impl Into<String>) -> Self {
        Error::Missing {
            tool: tool.into(),
            install: install.into(),
        }
    }

    /// Where the error happened (a file, key, layer or tensor; the tool for
    /// `Missing`).
    pub fn place(&self) -> &str {
        match self {
            Error::Input { place, .. } | Error::Runtime { place, .. } | Error::Io { place, .. } => {
                place
            }
            Error::Missing { tool, .. } => tool,
        }
    }

    /// What was wrong, without the place.
    pub fn problem(&self) -> String {
        match self {
            Error::Input { problem, .. } => problem.clone(),
            Error::Runtime { doing, error, .. } => format!("{doing}: {error}"),
            Error::Io { doing, message, .. } => format!("{doing}: {message}"),
            Error::Missing { install, .. } => format!("not installed or cannot be run; {install}"),
        }
    }
}

impl fmt::Display for Error {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        // One line, always: names from files (paths, layer names, labels)
        // may hold newlines or terminal controls; `escape` shows them inert.
        let problem = self.problem();
        let problem = escape(&problem);
        let place = self.place();
        if place.is_empty() {
            write!(f, "{problem}")
        } else {
            write!(f, "{}: {problem}", escape(place))
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

impl std::error::Error for Error {
    fn source(&self) -> Option<&(dyn std::error::Error + 'static)> {
        match self {
            Error::Runtime { error, .. } => Some(error),
            _ => None,
        }
    }
}

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

    #[test]
    fn every_kind_is_one_line_and_keeps_its_cause() {
        let rt = Error::runtime(
            "m.midge",
            "not a valid midge model",
            midge_runtime::Error::BadMagic,
        );
        assert_eq!(rt.place(), "m.midge");
        assert!(rt
            .to_string()
            .starts_with("m.midge: not a valid midge model: "));
        let cause = std::error::Error::source(&rt).expect("the runtime error");
        assert_eq!(
            cause.to_string(),
            midge_runtime::Error::BadMagic.to_string()
        );

        let os = std::io::Error::new(std::io::ErrorKind::PermissionDenied, "denied\nby policy");
        let io = Error::io("out/m.midge", "cannot write", &os);
        assert!(matches!(
            io,
            Error::Io {
                kind: std::io::ErrorKind::PermissionDenied,
                ..
            }
        ));
        assert_eq!(
            io.to_string(),
            "out/m.midge: cannot write: denied\\nby policy"
        );

        let missing = Error::missing(
            "qemu-system-arm",
            "install with `apt-get install qemu-system-arm`",
        );
        assert_eq!(
            missing.to_string(),
            "qemu-system-arm: not installed or cannot be run; install with `apt-get install qemu-system-arm`"
        );
        for e in [rt, io, missing, Error::new("", "no place")] {
            assert_eq!(e.to_string().lines().count(), 1, "{e}");
        }
    }
}
