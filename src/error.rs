//! Typed errors and warnings at the library boundary.
//!
//! An [`Error`] carries what a user needs to fix the input: the file, the line where there
//! is one, the offending value and what would be valid. A [`Warning`] is not fatal: it is
//! shown once with a hint and recorded in machine-readable output.

use std::fmt;
use std::path::{Path, PathBuf};

/// Where in an input something was found: a file and, where there is one, a 1-based line.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Location {
    /// The input file.
    pub path: PathBuf,
    /// 1-based line number, when the format has lines.
    pub line: Option<usize>,
}

impl Location {
    /// A location naming a whole file.
    pub fn file(path: &Path) -> Location {
        Location { path: path.to_path_buf(), line: None }
    }

    /// A location naming one line of a file.
    pub fn line(path: &Path, line: usize) -> Location {
        Location { path: path.to_path_buf(), line: Some(line) }
    }
}

impl fmt::Display for Location {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self.line {
            Some(l) => write!(f, "{} line {}", self.path.display(), l),
            None => write!(f, "{}", self.path.display()),
        }
    }
}

/// Every failure the library reports.
#[derive(Debug, thiserror::Error)]
pub enum Error {
    /// A file could not be read or written.
    #[error("{}: {source}", path.display())]
    Io {
        /// The file concerned.
        path: PathBuf,
        /// The operating system's error.
        #[source]
        source: std::io::Error,
    },
    /// An input file is malformed or inconsistent.
    #[error("{location}: {message}")]
    Input {
        /// File and line of the problem.
        location: Location,
        /// What was wrong and what would be valid.
        message: String,
    },
    /// A circuit is inconsistent with the layout or outside what the analysis supports.
    #[error("circuit {circuit}: {message}")]
    Circuit {
        /// The circuit's id.
        circuit: String,
        /// What was wrong and what would be valid.
        message: String,
    },
    /// Options that do not fit together, or a value outside its range.
    #[error("{0}")]
    Usage(String),
    /// The analysis could not be completed on valid input.
    #[error("analysis failed: {0}")]
    Analysis(String),
    /// The user interrupted long work; nothing partial was written.
    #[error("interrupted; nothing was written")]
    Interrupted,
}

impl Error {
    /// Shorthand for an input error at a file (and line).
    pub fn input(path: &Path, line: Option<usize>, message: impl Into<String>) -> Error {
        Error::Input {
            location: Location { path: path.to_path_buf(), line },
            message: message.into(),
        }
    }

    /// Shorthand for a circuit error.
    pub fn circuit(circuit: &str, message: impl Into<String>) -> Error {
        Error::Circuit { circuit: circuit.to_string(), message: message.into() }
    }

    /// Shorthand for an I/O error on a path.
    pub fn io(path: &Path, source: std::io::Error) -> Error {
        Error::Io { path: path.to_path_buf(), source }
    }

    /// The process exit code documented in `--help`: 2 for bad input or usage, 1 when the
    /// analysis failed, 130 when interrupted.
    pub fn exit_code(&self) -> i32 {
        match self {
            Error::Io { .. } | Error::Input { .. } | Error::Circuit { .. } | Error::Usage(_) => 2,
            Error::Analysis(_) => 1,
            Error::Interrupted => 130,
        }
    }
}

/// Convenience alias used throughout the library.
pub type Result<T> = std::result::Result<T, Error>;

/// A non-fatal finding: shown once on the terminal with its hint, recorded in JSON output.
#[derive(Clone, Debug, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub struct Warning {
    /// A stable short code, e.g. `no-reference-rows`, for scripts that filter warnings.
    pub code: &'static str,
    /// What was found.
    pub message: String,
    /// What the user can do about it.
    pub hint: String,
}

impl Warning {
    /// Builds a warning.
    pub fn new(code: &'static str, message: impl Into<String>, hint: impl Into<String>) -> Warning {
        Warning { code, message: message.into(), hint: hint.into() }
    }
}

impl fmt::Display for Warning {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{} (hint: {})", self.message, self.hint)
    }
}
