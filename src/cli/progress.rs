//! Progress bars on stderr (indicatif), shown only on a terminal and never with --quiet;
//! optionally a table of each stage's wall time and the process's peak memory after it.

use std::io::IsTerminal;
use std::sync::Mutex;
use std::time::Instant;

use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};

/// One stage: its name, when it started, and the peak memory (KiB) when it ended.
type Stage = (String, Instant, Option<u64>);

/// A progress display for the library's [`slackmap::audit::Progress`] reports.
pub struct Bar {
    bar: Option<ProgressBar>,
    /// Every stage so far, when timings were asked for.
    stages: Option<Mutex<Vec<Stage>>>,
}

/// The process's peak resident memory so far in KiB (Linux `VmHWM`), when known.
fn peak_kib() -> Option<u64> {
    let status = std::fs::read_to_string("/proc/self/status").ok()?;
    let line = status.lines().find(|l| l.starts_with("VmHWM:"))?;
    line.split_whitespace().nth(1)?.parse().ok()
}

impl Bar {
    /// A bar on stderr, or nothing when stderr is not a terminal or `quiet` is set.
    pub fn new(quiet: bool) -> Bar {
        if quiet || !std::io::stderr().is_terminal() {
            return Bar { bar: None, stages: None };
        }
        let bar = ProgressBar::with_draw_target(Some(0), ProgressDrawTarget::stderr());
        bar.set_style(
            ProgressStyle::with_template("{msg:28} [{bar:40}] {pos}/{len} ({eta})")
                .unwrap_or_else(|_| ProgressStyle::default_bar())
                .progress_chars("=> "),
        );
        Bar { bar: Some(bar), stages: None }
    }

    /// Also records each stage's wall time and peak memory, printed by [`Bar::finish`].
    pub fn with_timings(mut self, on: bool) -> Bar {
        if on {
            self.stages = Some(Mutex::new(Vec::new()));
        }
        self
    }

    /// Clears the bar and, with timings on, prints them to stderr.
    pub fn finish(&self) {
        if let Some(b) = &self.bar {
            b.finish_and_clear();
        }
        let Some(stages) = &self.stages else { return };
        let Ok(mut v) = stages.lock() else { return };
        if let Some(last) = v.last_mut() {
            last.2 = peak_kib();
        }
        let end = Instant::now();
        eprintln!("stage timings (wall seconds; peak memory of the process after the stage):");
        for (i, (name, start, peak)) in v.iter().enumerate() {
            let stop = v.get(i + 1).map_or(end, |n| n.1);
            let mem = peak.map_or("-".to_string(), |k| format!("{:.0} MiB", k as f64 / 1024.0));
            eprintln!("  {name:32} {:8.2} s  {mem}", (stop - *start).as_secs_f64());
        }
    }
}

impl slackmap::audit::Progress for Bar {
    fn stage(&self, name: &str, total: u64) {
        if let Some(b) = &self.bar {
            b.set_message(name.to_string());
            b.set_length(total);
            b.set_position(0);
        }
        if let Some(stages) = &self.stages {
            if let Ok(mut v) = stages.lock() {
                if let Some(last) = v.last_mut() {
                    last.2 = peak_kib();
                }
                v.push((name.to_string(), Instant::now(), None));
            }
        }
    }

    fn advance(&self, n: u64) {
        if let Some(b) = &self.bar {
            b.inc(n);
        }
    }
}
