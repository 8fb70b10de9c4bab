//! Scale benchmark: grid scenarios of 16, 144 and 1,024 qubits made with slackmap's own
//! `design` and `simulate`, then checked and audited; prints per command and per audit stage
//! the wall time and the peak resident memory, and the cost of one bootstrap and one parametric-null
//! replicate. It reports figures; it asserts nothing about them. The noise is the tests'
//! base noise with one depolarizing context term.
//!
//! ```sh
//! cargo bench --bench scale                          # 4x4, 12x12 and 32x32, point pass + replicates
//! cargo bench --bench scale -- --sizes 4x4 --full    # also the full default audit (200 + 200)
//! ```
//!
//! Options after `--`: `--sizes LIST` (grid sizes, default `4x4,12x12,32x32`), `--shots N`
//! (default 1000), `--replicates N` (replicates timed for the per-replicate cost, default
//! 10), `--full` (also run the default audit), `--threads N` (default: all cores), `--keep`
//! (leave the scenario files under target/bench-scale). Whole-process peak memory comes from
//! the kernel's accounting of each finished child (getrusage through wait4).

#[path = "../common/mod.rs"]
mod common;

use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::Instant;

/// Wall seconds and peak resident memory (MiB) of one finished command, and its stderr.
struct Measured {
    wall_s: f64,
    peak_mib: f64,
    stderr: String,
}

/// Runs the slackmap binary with `args` in `dir`, waiting with wait4 to read its peak memory.
// The child is reaped by wait4, which std's wait cannot replace: it also returns the
// child's resource usage.
#[allow(clippy::zombie_processes)]
fn run(dir: &Path, args: &[String]) -> Measured {
    let start = Instant::now();
    let child = Command::new(env!("CARGO_BIN_EXE_slackmap"))
        .args(args)
        .current_dir(dir)
        .env("SOURCE_DATE_EPOCH", "0")
        .stdout(std::process::Stdio::null())
        .stderr(std::process::Stdio::piped())
        .spawn()
        .unwrap_or_else(|e| panic!("cannot start slackmap: {e}"));
    let pid = child.id() as libc::pid_t;
    // Read stderr before waiting so a chatty child never blocks on a full pipe.
    let mut stderr = String::new();
    if let Some(mut e) = child.stderr {
        use std::io::Read;
        let _ = e.read_to_string(&mut stderr);
    }
    let mut status = 0;
    // SAFETY: an all-zero rusage is a valid value; wait4 fills it for the child `pid` we own.
    let mut usage: libc::rusage = unsafe { std::mem::zeroed() };
    // SAFETY: `pid` is our own child, not yet waited for; the pointers are to live locals.
    let got = unsafe { libc::wait4(pid, &mut status, 0, &mut usage) };
    let wall_s = start.elapsed().as_secs_f64();
    assert!(got == pid, "wait4 failed for slackmap {args:?}");
    assert!(
        libc::WIFEXITED(status) && libc::WEXITSTATUS(status) == 0,
        "slackmap {args:?} failed:\n{stderr}"
    );
    // ru_maxrss is in KiB on Linux.
    Measured { wall_s, peak_mib: usage.ru_maxrss as f64 / 1024.0, stderr }
}

/// (stage, wall seconds) pairs from an audit's `--timings` block.
fn stages(stderr: &str) -> Vec<(String, f64)> {
    stderr
        .lines()
        .skip_while(|l| !l.starts_with("stage timings"))
        .skip(1)
        .take_while(|l| l.starts_with("  "))
        .filter_map(|l| {
            let (name, rest) = l.trim().split_at(l.trim().find("  ")?);
            let secs = rest.split_whitespace().next()?.parse().ok()?;
            Some((name.trim().to_string(), secs))
        })
        .collect()
}

fn stage(stderr: &str, name: &str) -> f64 {
    stages(stderr).into_iter().find(|s| s.0 == name).map_or(0.0, |s| s.1)
}

struct Options {
    sizes: Vec<String>,
    shots: u64,
    replicates: usize,
    full: bool,
    threads: Option<usize>,
    keep: bool,
}

fn options() -> Options {
    let mut o = Options {
        sizes: vec!["4x4".into(), "12x12".into(), "32x32".into()],
        shots: 1000,
        replicates: 10,
        full: false,
        threads: None,
        keep: false,
    };
    let mut args = std::env::args().skip(1);
    while let Some(a) = args.next() {
        let mut value = |name: &str| {
            args.next().unwrap_or_else(|| panic!("{name} needs a value (see tests/bench/scale.rs)"))
        };
        match a.as_str() {
            "--sizes" => o.sizes = value("--sizes").split(',').map(str::to_string).collect(),
            "--shots" => o.shots = value("--shots").parse().expect("--shots: a whole number"),
            "--replicates" => {
                o.replicates = value("--replicates").parse().expect("--replicates: a whole number")
            }
            "--threads" => {
                o.threads = Some(value("--threads").parse().expect("--threads: a whole number"))
            }
            "--full" => o.full = true,
            "--keep" => o.keep = true,
            // cargo bench passes --bench; other harness flags are ignored too.
            _ => {}
        }
    }
    o
}

fn s(x: &str) -> String {
    x.to_string()
}

fn line(what: &str, m: &Measured) {
    println!("  {what:34} {:9.2} s  {:9.0} MiB", m.wall_s, m.peak_mib);
}

fn bench(size: &str, o: &Options, root: &Path) {
    let dir: PathBuf = root.join(size);
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    // Intrinsic errors of the usual magnitudes and one context term on q1 while q0 is
    // active (neighbours in every grid the layout generator makes).
    let noise = common::noise_with_context("q1", "q0", 5e-3);
    std::fs::write(dir.join("noise.toml"), noise).unwrap();
    println!("grid {size}, {} shots", o.shots);
    let threads: Vec<String> =
        o.threads.map(|t| vec![s("--threads"), t.to_string()]).unwrap_or_default();
    let m = run(&dir, &[s("layout"), s("new"), s("grid"), s(size), s("--out"), s("chip.toml")]);
    line("layout new", &m);
    let m = run(&dir, &[s("design"), s("--layout"), s("chip.toml"), s("--out"), s("d")]);
    line("design (default)", &m);
    let mut sim = vec![s("simulate"), s("--layout"), s("chip.toml"), s("--circuits")];
    sim.extend([s("d/circuits.json"), s("--noise"), s("noise.toml"), s("--shots")]);
    sim.extend([o.shots.to_string(), s("--seed"), s("1"), s("--out"), s("d/counts.csv")]);
    sim.extend(threads.iter().cloned());
    line("simulate", &run(&dir, &sim));
    let mut check = vec![s("check"), s("--layout"), s("chip.toml"), s("--circuits")];
    check.extend([s("d/circuits.json"), s("--counts"), s("d/counts.csv")]);
    line("check", &run(&dir, &check));
    let audit = |out: &str, replicates: usize, nulls: usize, full: bool| -> Measured {
        let mut a = vec![s("audit"), s("--layout"), s("chip.toml"), s("--circuits")];
        a.extend([s("d/circuits.json"), s("--counts"), s("d/counts.csv"), s("-q")]);
        a.extend([s("--timings"), s("--out"), s(out)]);
        if !full {
            a.extend([s("--replicates"), replicates.to_string()]);
            a.extend([s("--null-replicates"), nulls.to_string()]);
        }
        a.extend(threads.iter().cloned());
        run(&dir, &a)
    };
    let point = audit("point", 0, 0, false);
    line("audit point pass (0 + 0)", &point);
    let analysed: f64 = stages(&point.stderr).iter().map(|s| s.1).sum();
    println!("    of which reading, rows and writing   {:9.2} s", point.wall_s - analysed);
    for (name, secs) in stages(&point.stderr) {
        println!("    {name:32} {secs:9.2} s");
    }
    let r = o.replicates.max(1);
    let reps = audit("replicates", r, r, false);
    line(&format!("audit with {r} + {r} replicates"), &reps);
    let boot = stage(&reps.stderr, "bootstrap replicates") / r as f64;
    let null = stage(&reps.stderr, "parametric null") / r as f64;
    println!("    one bootstrap replicate              {boot:9.3} s wall");
    println!("    one parametric-null replicate        {null:9.3} s wall");
    if o.full {
        let full = audit("full", 0, 0, true);
        line("audit full default (200 + 200)", &full);
        for (name, secs) in stages(&full.stderr) {
            println!("    {name:32} {secs:9.2} s");
        }
    }
    if !o.keep {
        let _ = std::fs::remove_dir_all(&dir);
    }
}

fn main() {
    let o = options();
    let root = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("target/bench-scale");
    println!("slackmap scale benchmark (wall seconds, peak resident memory per process)");
    for size in &o.sizes {
        bench(size, &o, &root);
    }
}
