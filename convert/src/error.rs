//! The converter's error: where (file, key, layer, tensor) and what was wrong,
//! printed by the CLI as one line. Bad input maps to exit status 2.

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
        // One line, always: embedded newlines would break the CLI contract.
        let problem = self.problem.replace('\n', " ");
        if self.place.is_empty() {
            write!(f, "{problem}")
        } else {
            write!(f, "{}: {problem}", self.place)
        }
    }
}

impl std::error::Error for Error {}

pub type Result<T, E = Error> = std::result::Result<T, E>;
