//! Limits on how much one command may be asked to do, so that a slip (`--shots 1e12`,
//! `--depths 1000000000`) ends in a clear message instead of hours of work, a full disk or
//! an aborted allocation. `--no-limits` lifts them for a user who means it; a request that
//! cannot fit in this machine's memory is refused even then.

use crate::error::{Error, Result};
use crate::files::size_text;

/// Whether the limits below are enforced (`--no-limits` turns them off).
#[derive(Copy, Clone, Debug, PartialEq, Eq)]
pub struct Limits {
    /// True unless the user asked for no limits.
    pub enforced: bool,
}

impl Default for Limits {
    fn default() -> Limits {
        Limits::DEFAULT
    }
}

/// What to add to go past a limit; every limit message ends with it.
pub const OVERRIDE_HINT: &str = "add --no-limits if you mean it";

impl Limits {
    /// The documented limits.
    pub const DEFAULT: Limits = Limits { enforced: true };
    /// No limits (`--no-limits`).
    pub const NONE: Limits = Limits { enforced: false };

    /// Shots per circuit (`simulate --shots`, `plan --shots`).
    pub const SHOTS: u64 = 1_000_000_000;
    /// Worker threads (`--threads`).
    pub const THREADS: u64 = 1024;
    /// Bootstrap and permutation-null replicates (`--replicates`, `--null-replicates`).
    pub const REPLICATES: u64 = 100_000;
    /// One sequence depth (`--depths`): Cliffords per randomized sequence, cycles per
    /// repeated one.
    pub const DEPTH: u64 = 10_000;
    /// Randomized sequences per depth and pattern (`--sequences`).
    pub const SEQUENCES: u64 = 1_000;
    /// Circuits in one design.
    pub const CIRCUITS: u64 = 1_000_000;
    /// Bytes of one design's files (circuits.json, qasm/ and manifest.csv together).
    pub const DESIGN_BYTES: u64 = 16 << 30;

    /// Fails with a usage error naming `option`, the value and the limit when `value` is
    /// above `max` and limits are enforced. `unit` follows the limit ("shots per circuit").
    pub fn check(&self, option: &str, value: u64, max: u64, unit: &str) -> Result<()> {
        if self.enforced && value > max {
            return Err(Error::Usage(format!(
                "{option} {value} is above the limit of {max} {unit}; {OVERRIDE_HINT}"
            )));
        }
        Ok(())
    }

    /// As [`Limits::check`] for a byte count, shown in KiB/MiB/GiB.
    pub fn check_bytes(&self, what: &str, bytes: u64, max: u64) -> Result<()> {
        if self.enforced && bytes > max {
            return Err(Error::Usage(format!(
                "{what} would be about {}, above the limit of {}; {OVERRIDE_HINT}",
                size_text(bytes),
                size_text(max)
            )));
        }
        Ok(())
    }
}

/// Memory this machine can still give (MemAvailable of /proc/meminfo), when known.
pub fn available_memory_bytes() -> Option<u64> {
    let text = std::fs::read_to_string("/proc/meminfo").ok()?;
    let line = text.lines().find(|l| l.starts_with("MemAvailable:"))?;
    let kib: u64 = line.split_whitespace().nth(1)?.parse().ok()?;
    kib.checked_mul(1024)
}

/// Fails, whatever the limits, when `bytes` of working memory cannot be had: more than
/// this machine has available, or more than can be addressed.
pub fn check_memory(what: &str, bytes: Option<u64>) -> Result<()> {
    let too_much = |need: String, have: String| {
        Err(Error::Usage(format!(
            "{what} needs about {need} of memory, more than {have}; ask for less"
        )))
    };
    match (bytes, available_memory_bytes()) {
        (None, _) => too_much("more bytes than can be counted".into(), "can be addressed".into()),
        (Some(b), _) if b > isize::MAX as u64 => too_much(size_text(b), "can be addressed".into()),
        (Some(b), Some(avail)) if b > avail => {
            too_much(size_text(b), format!("this machine has available ({})", size_text(avail)))
        }
        _ => Ok(()),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn limits_name_the_option_the_value_the_limit_and_the_way_past() {
        let e = Limits::DEFAULT.check("--shots", 2_000_000_000, Limits::SHOTS, "shots per circuit");
        let e = e.unwrap_err().to_string();
        assert!(e.contains("--shots 2000000000"), "{e}");
        assert!(e.contains("limit of 1000000000 shots per circuit"), "{e}");
        assert!(e.contains("--no-limits"), "{e}");
        assert!(Limits::NONE.check("--shots", u64::MAX, Limits::SHOTS, "shots").is_ok());
        assert!(Limits::DEFAULT.check("--shots", Limits::SHOTS, Limits::SHOTS, "shots").is_ok());
        let e = Limits::DEFAULT.check_bytes("the design", 20 << 30, Limits::DESIGN_BYTES);
        assert!(e.unwrap_err().to_string().contains("about 20 GiB, above the limit of 16 GiB"));
    }

    #[test]
    fn memory_beyond_the_machine_is_refused() {
        assert!(check_memory("x", Some(1 << 20)).is_ok());
        let e = check_memory("a circuit", Some(u64::MAX)).unwrap_err().to_string();
        assert!(e.contains("more than can be addressed"), "{e}");
        assert!(check_memory("a circuit", None).is_err());
    }
}
