//! Progress on stderr, never with --quiet: a bar (indicatif) on a terminal; otherwise (a log
//! file, a batch job) a plain line when a stage starts and every few seconds. Both label the
//! time left, estimated from the stage's average rate so far (it does not jump with the
//! speed of the last few items). Optionally a table of each stage's wall time and the
//! process's peak memory after it.

use std::fmt::Write as _;
use std::io::IsTerminal;
use std::sync::atomic::{AtomicU64, Ordering};
use std::sync::Mutex;
use std::time::{Duration, Instant};

use indicatif::{ProgressBar, ProgressDrawTarget, ProgressState, ProgressStyle};

/// One stage: its name, when it started, and the peak memory (KiB) when it ended.
type Stage = (String, Instant, Option<u64>);

/// Seconds between plain progress lines.
const PLAIN_EVERY: Duration = Duration::from_secs(5);

/// The plain-line display: the stage, its size and progress, and when a line was last
/// printed (milliseconds since `start`).
struct Plain {
    start: Instant,
    stage: Mutex<(String, Instant)>,
    total: AtomicU64,
    pos: AtomicU64,
    last_ms: AtomicU64,
}

/// A progress display for the library's [`slackmap::audit::Progress`] reports.
pub struct Bar {
    bar: Option<ProgressBar>,
    plain: Option<Plain>,
    /// Every stage so far, when timings were asked for.
    stages: Option<Mutex<Vec<Stage>>>,
}

/// The process's peak resident memory so far in KiB (Linux `VmHWM`), when known.
fn peak_kib() -> Option<u64> {
    let status = std::fs::read_to_string("/proc/self/status").ok()?;
    let line = status.lines().find(|l| l.starts_with("VmHWM:"))?;
    line.split_whitespace().nth(1)?.parse().ok()
}

/// "about 40 s left" from the stage's average rate: elapsed x (total - done) / done, rounded
/// so that the figure does not flicker; "estimating time left" before there is a rate.
pub fn time_left(elapsed: Duration, done: u64, total: u64) -> String {
    if done == 0 || total == 0 || elapsed < Duration::from_secs(1) {
        return "estimating time left".into();
    }
    if done >= total {
        return "finishing".into();
    }
    let left = elapsed.as_secs_f64() * (total - done) as f64 / done as f64;
    if left < 60.0 {
        format!("about {} s left", ((left / 5.0).ceil() * 5.0).max(5.0) as u64)
    } else if left < 3_600.0 {
        format!("about {} min left", (left / 60.0).round().max(1.0) as u64)
    } else {
        let m = (left / 60.0).round() as u64;
        format!("about {} h {} min left", m / 60, m % 60)
    }
}

impl Bar {
    /// A bar on a terminal, plain lines otherwise, nothing with `quiet`.
    pub fn new(quiet: bool) -> Bar {
        if quiet {
            return Bar { bar: None, plain: None, stages: None };
        }
        if !std::io::stderr().is_terminal() {
            let now = Instant::now();
            let plain = Plain {
                start: now,
                stage: Mutex::new((String::new(), now)),
                total: AtomicU64::new(0),
                pos: AtomicU64::new(0),
                last_ms: AtomicU64::new(0),
            };
            return Bar { bar: None, plain: Some(plain), stages: None };
        }
        let bar = ProgressBar::with_draw_target(Some(0), ProgressDrawTarget::stderr());
        bar.set_style(
            ProgressStyle::with_template("{msg:28} [{bar:40}] {pos}/{len}, {left}")
                .unwrap_or_else(|_| ProgressStyle::default_bar())
                .with_key("left", |s: &ProgressState, w: &mut dyn std::fmt::Write| {
                    let _ = w.write_str(&time_left(s.elapsed(), s.pos(), s.len().unwrap_or(0)));
                })
                .progress_chars("=> "),
        );
        Bar { bar: Some(bar), plain: None, stages: None }
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

impl Plain {
    /// One progress line: time since the start, stage, position, time left.
    fn line(&self) -> String {
        let (name, since) = self
            .stage
            .lock()
            .map(|s| (s.0.clone(), s.1))
            .unwrap_or_else(|_| (String::new(), Instant::now()));
        let (pos, total) = (self.pos.load(Ordering::Relaxed), self.total.load(Ordering::Relaxed));
        let mut s = format!("[{:>5.0} s] {name}", self.start.elapsed().as_secs_f64());
        if total > 0 {
            let _ = write!(
                s,
                ": {pos}/{total} ({:.0}%), {}",
                100.0 * pos as f64 / total as f64,
                time_left(since.elapsed(), pos, total)
            );
        }
        s
    }

    fn stage(&self, name: &str, total: u64) {
        if let Ok(mut s) = self.stage.lock() {
            *s = (name.to_string(), Instant::now());
        }
        self.total.store(total, Ordering::Relaxed);
        self.pos.store(0, Ordering::Relaxed);
        self.last_ms.store(self.start.elapsed().as_millis() as u64, Ordering::Relaxed);
        eprintln!("{}", self.line());
    }

    fn advance(&self, n: u64) {
        self.pos.fetch_add(n, Ordering::Relaxed);
        let now = self.start.elapsed().as_millis() as u64;
        let last = self.last_ms.load(Ordering::Relaxed);
        // One thread wins the exchange and prints; the others carry on.
        if now >= last + PLAIN_EVERY.as_millis() as u64
            && self
                .last_ms
                .compare_exchange(last, now, Ordering::Relaxed, Ordering::Relaxed)
                .is_ok()
        {
            eprintln!("{}", self.line());
        }
    }
}

impl slackmap::audit::Progress for Bar {
    fn stage(&self, name: &str, total: u64) {
        if let Some(b) = &self.bar {
            b.reset();
            b.set_message(name.to_string());
            b.set_length(total);
        }
        if let Some(p) = &self.plain {
            p.stage(name, total);
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
        if let Some(p) = &self.plain {
            p.advance(n);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn time_left_is_labelled_and_rounded() {
        let s = Duration::from_secs;
        assert_eq!(time_left(s(0), 0, 100), "estimating time left");
        assert_eq!(time_left(s(10), 50, 100), "about 10 s left");
        assert_eq!(time_left(s(11), 50, 100), "about 15 s left");
        assert_eq!(time_left(s(120), 10, 100), "about 18 min left");
        assert_eq!(time_left(s(3_600), 40, 100), "about 1 h 30 min left");
        assert_eq!(time_left(s(5), 100, 100), "finishing");
    }
}
