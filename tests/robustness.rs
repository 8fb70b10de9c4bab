//! No crash, no clobber, no hidden leftovers, through the binary: size limits and their
//! override, capped input files, outputs that refuse to replace an existing file or an
//! input, a lock between two runs writing one output, and runs killed (SIGKILL) or
//! interrupted (SIGINT) in the middle that leave nothing a later run trips on.

mod common;

use std::path::{Path, PathBuf};
use std::process::{Child, Command, Stdio};
use std::time::{Duration, Instant};

use common::slackmap;
use predicates::prelude::*;

fn demo(name: &str) -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("demo-data").join(name)
}

fn grid4() -> PathBuf {
    common::layouts().join("grid-4x4.toml")
}

fn s(p: &Path) -> &str {
    p.to_str().expect("test paths are UTF-8")
}

/// The hidden entries of a folder (temporaries, lock files), sorted.
fn hidden(dir: &Path) -> Vec<String> {
    let mut v: Vec<String> = std::fs::read_dir(dir)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .filter(|n| n.starts_with('.'))
        .collect();
    v.sort();
    v
}

/// A complete layout: every qubit coupled to every other (degree n - 1).
fn complete_layout(dir: &Path, n: usize) -> PathBuf {
    let qubits: Vec<String> = (0..n).map(|i| format!("{{ id = \"q{i}\" }}")).collect();
    let couplers: Vec<String> =
        (0..n).flat_map(|a| (a + 1..n).map(move |b| format!("[\"q{a}\", \"q{b}\"]"))).collect();
    let text = format!(
        "name = \"k{n}\"\nqubits = [{}]\ncouplers = [{}]\n[gates]\none_qubit = [\"sx\", \"x\", \
         \"rz\"]\nvirtual = [\"rz\"]\ntwo_qubit = \"cz\"\n",
        qubits.join(", "),
        couplers.join(", ")
    );
    let p = dir.join(format!("k{n}.toml"));
    std::fs::write(&p, text).unwrap();
    p
}

// ---------------------------------------------------------------------------------------
// Limits

#[test]
fn design_sizes_above_the_limits_are_refused_before_any_work() {
    let tmp = tempfile::tempdir().unwrap();
    let out = tmp.path().join("d");
    for (args, limit) in [
        (vec!["--depths", "1000000000"], "limit of 10000"),
        (vec!["--depths", "100000"], "limit of 10000"),
        (vec!["--sequences", "1000000000"], "limit of 1000"),
    ] {
        slackmap()
            .args(["design", "--layout", s(&grid4()), "--out", s(&out)])
            .args(&args)
            .assert()
            .code(2)
            .stderr(predicate::str::contains(limit).and(predicate::str::contains("--no-limits")));
    }
    // With the override, what cannot fit in memory is still refused, with a message.
    slackmap()
        .args(["design", "--layout", s(&grid4()), "--depths", "1000000000", "--no-limits"])
        .args(["--out", s(&out)])
        .assert()
        .code(2)
        .stderr(predicate::str::contains("of memory"));
    slackmap()
        .args(["design", "--layout", s(&grid4()), "--sequences", "1000000000", "--no-limits"])
        .args(["--out", s(&out)])
        .assert()
        .code(2)
        .stderr(predicate::str::contains("cannot be written"));
    assert!(std::fs::read_dir(tmp.path()).unwrap().next().is_none(), "nothing written");
}

#[test]
fn the_override_lets_a_meant_request_through() {
    let tmp = tempfile::tempdir().unwrap();
    let chain = tmp.path().join("chain.toml");
    slackmap().args(["layout", "new", "chain", "2", "--out", s(&chain)]).assert().success();
    let out = tmp.path().join("deep");
    let args = ["--depths", "12000", "--sequences", "1", "--kinds", "randomized"];
    slackmap()
        .args(["design", "--layout", s(&chain), "--out", s(&out)])
        .args(args)
        .assert()
        .code(2);
    slackmap()
        .args(["design", "--layout", s(&chain), "--out", s(&out), "--no-limits"])
        .args(args)
        .assert()
        .success();
    let manifest = std::fs::read_to_string(out.join("manifest.csv")).unwrap();
    assert!(manifest.lines().skip(1).all(|l| l.contains(",12000,")), "{manifest:.300}");
}

#[test]
fn a_dense_layout_is_designed_or_refused_with_the_limit() {
    let tmp = tempfile::tempdir().unwrap();
    let k30 = complete_layout(tmp.path(), 30);
    let out = tmp.path().join("k30");
    slackmap()
        .args(["design", "--layout", s(&k30), "--depths", "1", "--sequences", "1"])
        .args(["--out", s(&out)])
        .assert()
        .success();
    // Nothing packs on a complete layout: one pattern per qubit, coupler and pair, plus
    // the all-active and all-idle ones.
    let manifest = std::fs::read_to_string(out.join("manifest.csv")).unwrap();
    let patterns: std::collections::BTreeSet<&str> =
        manifest.lines().skip(1).map(|l| l.split(',').nth(1).unwrap()).collect();
    assert!(patterns.len() >= 30 + 2 * 435, "{}", patterns.len());
    // A design whose lower bound alone is above the circuit limit is refused at once.
    let k60 = complete_layout(tmp.path(), 60);
    let started = Instant::now();
    slackmap()
        .args(["design", "--layout", s(&k60), "--sequences", "1000"])
        .args(["--out", s(&tmp.path().join("k60"))])
        .assert()
        .code(2)
        .stderr(predicate::str::contains("limit of 1000000 circuits"));
    assert!(started.elapsed() < Duration::from_secs(20));
}

#[test]
fn shots_threads_and_replicates_are_capped() {
    let tmp = tempfile::tempdir().unwrap();
    slackmap()
        .args(["simulate", "--layout", s(&demo("layout.toml"))])
        .args(["--circuits", s(&demo("circuits.json")), "--noise", s(&demo("noise.toml"))])
        .args(["--shots", "2000000000", "--out", s(&tmp.path().join("c.csv"))])
        .assert()
        .code(2)
        .stderr(predicate::str::contains("--shots 2000000000 is above the limit of 1000000000"));
    for (option, value) in [
        ("--threads", "100000"),
        ("--replicates", "1000000000000"),
        ("--null-replicates", "1000000"),
    ] {
        slackmap()
            .args(["audit", "--layout", s(&demo("layout.toml"))])
            .args(["--circuits", s(&demo("circuits.json")), "--counts", s(&demo("counts.csv"))])
            .args([option, value, "--out", s(&tmp.path().join("a"))])
            .assert()
            .code(2)
            .stderr(predicate::str::contains(format!("{option} {value} is above the limit")));
    }
    assert!(std::fs::read_dir(tmp.path()).unwrap().next().is_none(), "nothing written");
}

// ---------------------------------------------------------------------------------------
// Inputs and messages

#[cfg(unix)]
#[test]
fn a_noise_file_that_never_ends_is_cut_off() {
    let tmp = tempfile::tempdir().unwrap();
    slackmap()
        .args(["simulate", "--layout", s(&demo("layout.toml"))])
        .args(["--circuits", s(&demo("circuits.json")), "--noise", "/dev/zero"])
        .args(["--out", s(&tmp.path().join("c.csv"))])
        .timeout(Duration::from_secs(60))
        .assert()
        .code(2)
        .stderr(predicate::str::contains("larger than 64 MiB, the most a noise file may be"));
}

#[test]
fn a_second_readout_entry_names_both_lines_and_hidden_crosstalk_is_warned_about() {
    let tmp = tempfile::tempdir().unwrap();
    let noise = tmp.path().join("noise.toml");
    let run = |text: &str| {
        std::fs::write(&noise, text).unwrap();
        slackmap()
            .args(["simulate", "--layout", s(&demo("layout.toml"))])
            .args(["--circuits", s(&demo("circuits.json")), "--noise", s(&noise)])
            .args(["--shots", "10", "--out", s(&tmp.path().join("c.csv"))])
            .assert()
    };
    let twice = "schema = 1\n[readout]\n[[readout.qubits]]\nqubit = \"q3\"\np1_given_0 = 0.01\n\
                 p0_given_1 = 0.02\n[[readout.qubits]]\nqubit = \"q3\"\np1_given_0 = 0.03\n\
                 p0_given_1 = 0.04\n";
    run(twice).code(2).stderr(
        predicate::str::contains("line 7")
            .and(predicate::str::contains("the first is on line 3"))
            .and(predicate::str::contains("q3")),
    );
    // q0 and q15 are corners of the 4x4 grid: no audit can see a term between them.
    let far = "schema = 1\n[[context]]\nvictim = \"q0\"\naggressor = \"q15\"\n\
               depolarizing = 0.01\n";
    run(far).success().stderr(
        predicate::str::contains("warning:")
            .and(predicate::str::contains("joins q0 and q15, which are not neighbours")),
    );
}

#[test]
fn long_values_come_back_cut_to_about_80_characters() {
    let tmp = tempfile::tempdir().unwrap();
    let noise = tmp.path().join("noise.toml");
    let huge = "q".repeat(10 << 20);
    std::fs::write(
        &noise,
        format!("schema = 1\n[[context]]\nvictim = \"{huge}\"\naggressor = \"q1\"\n"),
    )
    .unwrap();
    let out = slackmap()
        .args(["simulate", "--layout", s(&demo("layout.toml"))])
        .args(["--circuits", s(&demo("circuits.json")), "--noise", s(&noise)])
        .args(["--out", s(&tmp.path().join("c.csv"))])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.len() < 1000, "{} bytes of message", err.len());
    assert!(err.contains("(10485760 bytes in all)"), "{err}");
    // Command-line values too: ours, and the parser's.
    let long = "x".repeat(100_000);
    for args in [["--kinds", long.as_str()], ["--depths", long.as_str()]] {
        let out = slackmap()
            .args(["design", "--layout", s(&grid4()), "--out", s(&tmp.path().join("d"))])
            .args(args)
            .output()
            .unwrap();
        assert_eq!(out.status.code(), Some(2));
        let err = String::from_utf8_lossy(&out.stderr);
        assert!(err.len() < 1000, "{} bytes of message: {err:.200}", err.len());
        assert!(err.contains("(100000 bytes in all)"), "{err}");
    }
}

#[cfg(unix)]
#[test]
fn a_symlink_loop_reads_as_one() {
    let tmp = tempfile::tempdir().unwrap();
    // Two links pointing at each other, and one pointing at itself (no extension).
    let (a, b, own) = (tmp.path().join("a.json"), tmp.path().join("b.json"), tmp.path().join("c"));
    std::os::unix::fs::symlink(&b, &a).unwrap();
    std::os::unix::fs::symlink(&a, &b).unwrap();
    std::os::unix::fs::symlink(&own, &own).unwrap();
    let loop_err = || {
        predicate::str::contains("loop of symbolic links")
            .and(predicate::str::contains("entity not found").not())
    };
    for circuits in [&a, &own] {
        slackmap()
            .args(["simulate", "--layout", s(&demo("layout.toml")), "--circuits", s(circuits)])
            .args(["--noise", s(&demo("noise.toml")), "--out", s(&tmp.path().join("c.csv"))])
            .assert()
            .code(2)
            .stderr(loop_err());
    }
    slackmap().args(["layout", "check", s(&a)]).assert().code(2).stderr(loop_err());
}

#[test]
fn a_gate_set_without_cliffords_says_what_is_missing_and_what_works() {
    let tmp = tempfile::tempdir().unwrap();
    let layout = tmp.path().join("t.toml");
    for (gates, missing) in
        [("[\"x\", \"rz\"]", "onto the equator"), ("[\"sx\"]", "a rotation about a second axis")]
    {
        std::fs::write(
            &layout,
            format!(
                "name = \"t\"\nqubits = [{{ id = \"q0\" }}, {{ id = \"q1\" }}]\ncouplers = \
                 [[\"q0\", \"q1\"]]\n[gates]\none_qubit = {gates}\nvirtual = []\ntwo_qubit = \
                 \"cz\"\n"
            ),
        )
        .unwrap();
        slackmap()
            .args(["design", "--layout", s(&layout), "--out", s(&tmp.path().join("d"))])
            .assert()
            .code(2)
            .stderr(
                predicate::str::starts_with("error: layout 't' cannot run Clifford sequences")
                    .and(predicate::str::contains(missing))
                    .and(predicate::str::contains("A set that works: one_qubit = [\"sx\"")),
            );
    }
}

// ---------------------------------------------------------------------------------------
// Outputs: never clobber, standard output, lock

#[test]
fn an_existing_file_is_never_turned_into_a_folder() {
    let tmp = tempfile::tempdir().unwrap();
    let f = tmp.path().join("F");
    std::fs::write(&f, "precious").unwrap();
    let audit = common::fixtures().join("audit/grid-4x4.json");
    let (g4, layout, circuits, counts) =
        (grid4(), demo("layout.toml"), demo("circuits.json"), demo("counts.csv"));
    let runs: Vec<Vec<&str>> = vec![
        vec!["report", s(&audit), "--out", s(&f)],
        vec!["hints", s(&audit), "--out", s(&f)],
        vec!["compare", s(&audit), s(&audit), "--out", s(&f)],
        vec!["design", "--layout", s(&g4), "--out", s(&f)],
        vec![
            "audit",
            "--layout",
            s(&layout),
            "--circuits",
            s(&circuits),
            "--counts",
            s(&counts),
            "--out",
            s(&f),
        ],
    ];
    for args in runs {
        slackmap().args(&args).assert().code(2).stderr(predicate::str::contains("existing file"));
        assert_eq!(std::fs::read_to_string(&f).unwrap(), "precious", "{args:?}");
        assert!(hidden(tmp.path()).is_empty(), "{args:?}: {:?}", hidden(tmp.path()));
    }
}

#[test]
fn simulate_never_writes_over_an_input() {
    let tmp = tempfile::tempdir().unwrap();
    let circuits = tmp.path().join("c.json");
    let noise = tmp.path().join("noise.toml");
    std::fs::copy(demo("circuits.json"), &circuits).unwrap();
    std::fs::copy(demo("noise.toml"), &noise).unwrap();
    let sub = tmp.path().join("sub");
    let roundabout = sub.join("..").join("c.json");
    for (out, truth) in [
        (circuits.clone(), None),
        (roundabout, None),
        (tmp.path().join("counts.csv"), Some(noise.clone())),
        (tmp.path().join("counts.csv"), Some(tmp.path().join("counts.csv"))),
    ] {
        let mut cmd = slackmap();
        cmd.args(["simulate", "--layout", s(&demo("layout.toml")), "--circuits", s(&circuits)])
            .args(["--noise", s(&noise), "--shots", "10", "--out", s(&out)]);
        if let Some(t) = &truth {
            cmd.args(["--truth", s(t)]);
        }
        cmd.assert().code(2).stderr(
            predicate::str::contains("would destroy that input")
                .or(predicate::str::contains("are the same file")),
        );
    }
    assert_eq!(std::fs::read(&circuits).unwrap(), std::fs::read(demo("circuits.json")).unwrap());
    assert_eq!(std::fs::read(&noise).unwrap(), std::fs::read(demo("noise.toml")).unwrap());
    let mut names: Vec<String> = std::fs::read_dir(tmp.path())
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    names.sort();
    assert_eq!(names, ["c.json", "noise.toml"], "nothing else written, no folder left");
}

#[test]
fn simulate_writes_nothing_when_an_output_path_is_bad() {
    let tmp = tempfile::tempdir().unwrap();
    let file = tmp.path().join("F");
    std::fs::write(&file, "x").unwrap();
    slackmap()
        .args(["simulate", "--layout", s(&demo("layout.toml"))])
        .args(["--circuits", s(&demo("circuits.json")), "--noise", s(&demo("noise.toml"))])
        .args(["--shots", "10", "--out", s(&tmp.path().join("counts.csv"))])
        .args(["--truth", s(&file.join("truth.json"))])
        .assert()
        .code(2);
    assert!(!tmp.path().join("counts.csv").exists());
    assert!(hidden(tmp.path()).is_empty(), "{:?}", hidden(tmp.path()));
}

#[test]
fn a_dash_means_standard_output() {
    let tmp = tempfile::tempdir().unwrap();
    let out = slackmap()
        .current_dir(tmp.path())
        .args(["layout", "new", "chain", "3", "--out", "-"])
        .output()
        .unwrap();
    assert!(out.status.success());
    assert!(String::from_utf8_lossy(&out.stdout).contains("name = \"chain-3\""));
    let truth = tmp.path().join("truth.json");
    let out = slackmap()
        .current_dir(tmp.path())
        .args(["simulate", "--layout", s(&demo("layout.toml"))])
        .args(["--circuits", s(&demo("circuits.json")), "--noise", s(&demo("noise.toml"))])
        .args(["--shots", "10", "--out", "-", "--truth", s(&truth)])
        .output()
        .unwrap();
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    assert!(String::from_utf8_lossy(&out.stdout).starts_with("circuit,outcome,count\n"));
    assert!(truth.exists());
    slackmap()
        .current_dir(tmp.path())
        .args(["simulate", "--layout", s(&demo("layout.toml"))])
        .args(["--circuits", s(&demo("circuits.json")), "--noise", s(&demo("noise.toml"))])
        .args(["--out", "-"])
        .assert()
        .code(2)
        .stderr(predicate::str::contains("give --truth FILE"));
    let mut names: Vec<String> = std::fs::read_dir(tmp.path())
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    names.sort();
    assert_eq!(names, ["truth.json"], "no file named '-'");
}

#[test]
fn a_run_writing_the_same_folder_is_told_and_a_released_lock_does_not_block() {
    let tmp = tempfile::tempdir().unwrap();
    let audit = common::fixtures().join("audit/grid-4x4.json");
    let out = tmp.path().join("rep");
    // Another run holds the lock beside the output (as the program itself does).
    let lock_path = tmp.path().join(".rep.slackmap-lock");
    let lock = std::fs::File::create(&lock_path).unwrap();
    lock.try_lock().unwrap();
    std::fs::write(&lock_path, "4242\n").unwrap();
    slackmap()
        .args(["report", s(&audit), "--out", s(&out)])
        .assert()
        .code(2)
        .stderr(predicate::str::contains("is being written by another slackmap run (pid 4242)"));
    assert!(!out.exists());
    drop(lock);
    // Released (as when its holder is killed): the next run goes ahead and tidies up.
    slackmap().args(["report", s(&audit), "--out", s(&out)]).assert().success();
    assert!(out.join("report.html").exists());
    assert!(hidden(tmp.path()).is_empty(), "{:?}", hidden(tmp.path()));
}

#[cfg(unix)]
#[test]
fn two_processes_never_write_one_output_at_once() {
    let tmp = tempfile::tempdir().unwrap();
    let runs = long_runs(tmp.path());
    let design = runs.into_iter().find(|r| r.0 == "design").unwrap();
    let (_, dir, mut child) = start(tmp.path(), "two", design);
    let audit = common::fixtures().join("audit/grid-4x4.json");
    slackmap()
        .current_dir(&dir)
        .args(["report", s(&audit), "--out", "out"])
        .assert()
        .code(2)
        .stderr(predicate::str::contains(format!(
            "out is being written by another slackmap run (pid {})",
            child.id()
        )));
    child.kill().unwrap();
    child.wait().unwrap();
}

// ---------------------------------------------------------------------------------------
// Killed and interrupted runs

fn spawn(args: &[&str], dir: &Path) -> Child {
    Command::new(assert_cmd::cargo::cargo_bin("slackmap"))
        .args(args)
        .current_dir(dir)
        .stdin(Stdio::null())
        .stdout(Stdio::null())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap()
}

/// Waits until `ready` holds (the run is under way), at most a minute.
fn wait_for(what: &str, ready: impl Fn() -> bool) {
    let start = Instant::now();
    while !ready() {
        assert!(start.elapsed() < Duration::from_secs(60), "never saw: {what}");
        std::thread::sleep(Duration::from_millis(20));
    }
}

#[cfg(unix)]
fn interrupt(child: &Child) {
    let ok = Command::new("kill").args(["-INT", &child.id().to_string()]).status().unwrap();
    assert!(ok.success());
}

/// True when `dir` holds a hidden entry whose name starts with `prefix`.
fn has_hidden(dir: &Path, prefix: &str) -> bool {
    hidden(dir).iter().any(|n| n.starts_with(prefix))
}

/// The three long commands, each writing `out` inside `dir`, and how to tell it is busy.
fn long_runs(dir: &Path) -> Vec<(&'static str, Vec<String>, &'static str)> {
    let k40 = complete_layout(dir, 40);
    let st = |p: &Path| p.to_string_lossy().into_owned();
    vec![
        (
            "design",
            ["design", "--layout", &st(&k40), "--out", "out"].map(String::from).to_vec(),
            // Files are being written into the staging folder.
            ".out.slackmap-tmp-",
        ),
        (
            "simulate",
            [
                "simulate",
                "--layout",
                &st(&demo("layout.toml")),
                "--circuits",
                &st(&demo("circuits.json")),
                "--noise",
                &st(&demo("noise.toml")),
                "--shots",
                "20000000",
                "--out",
                "out",
            ]
            .map(String::from)
            .to_vec(),
            ".out.slackmap-lock",
        ),
        ("audit", ["demo", "--out", "out", "-q"].map(String::from).to_vec(), ".out.slackmap-tmp-"),
    ]
}

/// Starts one of [`long_runs`] in its own folder `<tag>-<name>` and returns once it is under
/// way.
fn start(
    root: &Path,
    tag: &str,
    (name, args, busy): (&'static str, Vec<String>, &'static str),
) -> (&'static str, PathBuf, Child) {
    let dir = root.join(format!("{tag}-{name}"));
    std::fs::create_dir(&dir).unwrap();
    let args: Vec<&str> = args.iter().map(String::as_str).collect();
    let child = spawn(&args, &dir);
    wait_for(&format!("{name} under way"), || has_hidden(&dir, busy));
    std::thread::sleep(Duration::from_millis(300));
    (name, dir, child)
}

#[cfg(unix)]
#[test]
fn killed_runs_leave_nothing_a_later_run_trips_on() {
    let tmp = tempfile::tempdir().unwrap();
    let (g4, layout, circuits, noise) =
        (grid4(), demo("layout.toml"), demo("circuits.json"), demo("noise.toml"));
    for run in long_runs(tmp.path()) {
        let (name, dir, mut child) = start(tmp.path(), "kill", run);
        child.kill().unwrap();
        child.wait().unwrap();
        assert!(!hidden(&dir).is_empty(), "{name}: a killed run cannot tidy up");
        // A later run into the same place succeeds (a small one, so the test stays short)
        // and removes what the killed run left.
        let later: Vec<&str> = match name {
            "design" => vec!["design", "--layout", s(&g4), "--depths", "1", "--out", "out"],
            "simulate" => vec![
                "simulate",
                "--layout",
                s(&layout),
                "--circuits",
                s(&circuits),
                "--noise",
                s(&noise),
                "--shots",
                "10",
                "--out",
                "out",
            ],
            _ => vec!["demo", "--replicates", "2", "--null-replicates", "2", "--out", "out", "-q"],
        };
        slackmap().current_dir(&dir).args(&later).assert().success();
        assert!(hidden(&dir).is_empty(), "{name}: {:?}", hidden(&dir));
    }
}

#[cfg(unix)]
#[test]
fn interrupted_runs_stop_with_130_and_leave_nothing() {
    let tmp = tempfile::tempdir().unwrap();
    for run in long_runs(tmp.path()) {
        let (name, dir, mut child) = start(tmp.path(), "int", run);
        interrupt(&child);
        let start = Instant::now();
        let status = loop {
            if let Some(st) = child.try_wait().unwrap() {
                break st;
            }
            if start.elapsed() > Duration::from_secs(60) {
                child.kill().unwrap();
                panic!("{name} did not stop within a minute of Ctrl-C");
            }
            std::thread::sleep(Duration::from_millis(20));
        };
        let mut err = String::new();
        std::io::Read::read_to_string(child.stderr.as_mut().unwrap(), &mut err).unwrap();
        assert_eq!(status.code(), Some(130), "{name}: {err}");
        assert!(err.contains("nothing was written"), "{name}: {err}");
        let left: Vec<_> = std::fs::read_dir(&dir).unwrap().collect();
        assert!(left.is_empty(), "{name} left {:?}", hidden(&dir));
    }
}

#[test]
fn the_demo_runs_from_anywhere_with_the_binary_moved() {
    let tmp = tempfile::tempdir().unwrap();
    let bin = tmp.path().join("elsewhere/bin");
    std::fs::create_dir_all(&bin).unwrap();
    let moved = bin.join("slackmap");
    std::fs::copy(assert_cmd::cargo::cargo_bin("slackmap"), &moved).unwrap();
    let cwd = tmp.path().join("work");
    std::fs::create_dir(&cwd).unwrap();
    let out = Command::new(&moved)
        .current_dir(&cwd)
        .args(["demo", "--replicates", "2", "--null-replicates", "2", "-q"])
        .output()
        .unwrap();
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    let audit = std::fs::read_to_string(cwd.join("demo-out/audit.json")).unwrap();
    assert!(audit.contains("demo-data/counts.csv (built in)"), "{audit:.400}");
    // The built-in files are the shipped ones: their digests match.
    let v: serde_json::Value = serde_json::from_str(&audit).unwrap();
    let text = v["inputs"].to_string();
    for f in ["layout.toml", "circuits.json", "counts.csv"] {
        use sha2::Digest;
        let hex: String = sha2::Sha256::digest(std::fs::read(demo(f)).unwrap())
            .iter()
            .map(|b| format!("{b:02x}"))
            .collect();
        assert!(text.contains(&hex), "{f}: {text:.300}");
    }
}

#[test]
fn an_audit_file_that_is_not_utf8_is_named_with_its_line() {
    let tmp = tempfile::tempdir().unwrap();
    let bad = tmp.path().join("audit.json");
    std::fs::write(&bad, b"{\n  \"schema\": 3,\n  \"layout\": \"\xff\xfe\"\n}\n").unwrap();
    for args in [
        vec!["report", s(&bad), "--out", s(&tmp.path().join("r"))],
        vec!["compare", s(&bad), s(&bad), "--out", s(&tmp.path().join("c"))],
        vec!["hints", s(&bad), "--out", s(&tmp.path().join("h"))],
        vec!["merge", s(&bad), "--out", s(&tmp.path().join("m"))],
    ] {
        slackmap().args(&args).assert().code(2).stderr(
            predicate::str::contains("line 3")
                .and(predicate::str::contains("not UTF-8"))
                .and(predicate::str::contains(s(&bad))),
        );
    }
}

#[test]
fn qasm_with_bad_bytes_and_an_empty_qubit_map_are_named() {
    let tmp = tempfile::tempdir().unwrap();
    let bad = tmp.path().join("c.qasm");
    std::fs::write(&bad, b"OPENQASM 3.0;\nqubit[2] q;\n\xff\xfe sx q[0];\n").unwrap();
    slackmap()
        .args(["check", "--layout", s(&grid4()), "--circuits", s(&bad)])
        .assert()
        .code(2)
        .stderr(predicate::str::contains("line 3").and(predicate::str::contains("not UTF-8")));
    slackmap()
        .args(["check", "--layout", s(&demo("layout.toml")), "--circuits"])
        .args([s(&demo("circuits.json")), "--qubit-map", ""])
        .assert()
        .code(2)
        .stderr(
            predicate::str::contains("--qubit-map is empty").and(predicate::str::contains("q[0]=")),
        );
}

#[test]
fn check_draws_its_table_like_every_other_command() {
    let out = slackmap()
        .env("COLUMNS", "100")
        .args(["check", "--layout", s(&demo("layout.toml")), "--circuits"])
        .args([s(&demo("circuits.json")), "--counts", s(&demo("counts.csv"))])
        .output()
        .unwrap();
    assert!(out.status.success());
    let text = String::from_utf8(out.stdout).unwrap();
    assert!(text.contains('┌') && text.contains('│'), "{text}");
    assert!(!text.contains("+---"), "{text}");
    assert!(text.lines().all(|l| l.chars().count() <= 100), "{text}");
}

#[test]
fn a_counts_line_that_never_ends_is_cut_off() {
    let tmp = tempfile::tempdir().unwrap();
    let bad = tmp.path().join("counts.csv");
    let mut text = b"circuit,outcome,count\n".to_vec();
    text.extend(std::iter::repeat_n(b'0', 3 << 20));
    std::fs::write(&bad, text).unwrap();
    slackmap()
        .args(["check", "--layout", s(&demo("layout.toml")), "--circuits"])
        .args([s(&demo("circuits.json")), "--counts", s(&bad)])
        .assert()
        .code(2)
        .stderr(predicate::str::contains("line 2 is longer than 1 MiB"));
}
