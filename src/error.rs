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
            Some(l) => write!(f, "{} line {}", echo_path(&self.path), l),
            None => write!(f, "{}", echo_path(&self.path)),
        }
    }
}

/// The longest value, in characters, that a message quotes whole.
pub const ECHO_CHARS: usize = 80;

/// A value as a message quotes it: control characters escaped (so the message stays on one
/// line) and anything past [`ECHO_CHARS`] characters cut, with the full length said. Every
/// message that repeats what the user gave goes through here, so a 10 MB bad value never
/// comes back whole.
pub fn echo(value: &str) -> String {
    let mut out = escaped(value.chars().take(ECHO_CHARS));
    if value.chars().nth(ECHO_CHARS).is_some() {
        out.push_str(&format!("... ({} bytes in all)", value.len()));
    }
    out
}

/// A path as a message shows it: as [`echo`], but paths may be long and still valid, so
/// the cut comes at 1024 characters and keeps the end (the file name).
pub fn echo_path(path: &Path) -> String {
    const PATH_CHARS: usize = 1024;
    let text = path.to_string_lossy();
    let n = text.chars().count();
    if n <= PATH_CHARS {
        escaped(text.chars())
    } else {
        let tail = escaped(text.chars().skip(n - PATH_CHARS));
        format!("...{tail} ({} bytes in all)", text.len())
    }
}

/// The characters with control characters escaped.
fn escaped(chars: impl Iterator<Item = char>) -> String {
    let mut out = String::new();
    for c in chars {
        if c.is_control() {
            out.extend(c.escape_debug());
        } else {
            out.push(c);
        }
    }
    out
}

/// The operating system's message, in words a user can act on where the usual text
/// misleads.
fn io_text(e: &std::io::Error) -> String {
    // ELOOP is 40 on Linux and 62 on macOS and the BSDs; the usual text ("too many levels")
    // does not say that a link points back into its own path.
    let eloop = if cfg!(target_os = "linux") { 40 } else { 62 };
    if cfg!(unix) && e.raw_os_error() == Some(eloop) {
        format!("a loop of symbolic links: a link on this path points back into it ({e})")
    } else {
        e.to_string()
    }
}

/// Every failure the library reports.
#[derive(Debug, thiserror::Error)]
pub enum Error {
    /// A file could not be read or written.
    #[error("{}: {}", echo_path(path), io_text(source))]
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

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn echo_keeps_short_values_and_cuts_long_ones() {
        assert_eq!(echo("q12"), "q12");
        let long = "x".repeat(10 << 20);
        let shown = echo(&long);
        assert!(shown.starts_with(&"x".repeat(ECHO_CHARS)));
        assert!(shown.ends_with("... (10485760 bytes in all)"), "{shown}");
        assert!(shown.len() < ECHO_CHARS + 40);
        // Characters, not bytes: a multi-byte character is never split.
        let greek = "\u{3c0}".repeat(200);
        assert!(echo(&greek).starts_with(&"\u{3c0}".repeat(ECHO_CHARS)));
        // Control characters are escaped so that a message stays on one line.
        assert_eq!(echo("a\nb\u{7}"), "a\\nb\\u{7}");
    }

    #[test]
    fn long_paths_keep_their_end() {
        let p = PathBuf::from(format!("/{}/counts.csv", "d".repeat(5000)));
        let shown = echo_path(&p);
        assert!(shown.ends_with("counts.csv (5012 bytes in all)"), "{shown:.60}");
        assert!(shown.len() < 1100);
        assert_eq!(echo_path(Path::new("run1/counts.csv")), "run1/counts.csv");
    }

    #[test]
    fn a_symlink_loop_is_named_as_such() {
        let e = std::io::Error::from_raw_os_error(if cfg!(target_os = "linux") { 40 } else { 62 });
        let shown = Error::io(Path::new("a"), e).to_string();
        if cfg!(unix) {
            assert!(shown.contains("loop of symbolic links"), "{shown}");
        }
    }
}
