//! `slackmap layout check` and `slackmap layout new` run as a user would: every bad layout
//! fixture fails with exit code 2 and a message naming the file (and line), good inputs
//! succeed with a summary.

mod common;

use common::{bad, expectations, good, layouts, slackmap};
use predicates::prelude::*;

#[test]
fn every_bad_layout_fails_with_file_line_and_fragment() {
    let rows: Vec<_> = expectations("expect-layout-counts.tsv")
        .into_iter()
        .filter(|(f, _)| f.starts_with("layout-"))
        .collect();
    assert!(rows.len() >= 15, "only {} layout fixtures listed", rows.len());
    for (file, fragment) in &rows {
        let out = slackmap().args(["layout", "check"]).arg(bad(file)).output().unwrap();
        let stderr = String::from_utf8_lossy(&out.stderr);
        assert_eq!(out.status.code(), Some(2), "{file}: {stderr}");
        assert!(!stderr.contains("panicked"), "{file}: {stderr}");
        assert!(stderr.contains(file.as_str()), "{file}: message does not name the file: {stderr}");
        assert!(stderr.contains(fragment), "{file}: expected '{fragment}' in: {stderr}");
        if let Some(rest) = fragment.strip_prefix("line ") {
            let line = rest.split(':').next().unwrap();
            assert!(stderr.contains(&format!("{file} line {line}:")), "{file}: {stderr}");
        }
        assert!(out.stdout.is_empty(), "{file}: nothing on stdout for a bad file");
    }
    let mut on_disk: Vec<String> = std::fs::read_dir(common::fixtures().join("bad"))
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .filter(|n| n.starts_with("layout-"))
        .collect();
    on_disk.sort();
    let mut listed: Vec<String> = rows.into_iter().map(|(f, _)| f).collect();
    listed.sort();
    assert_eq!(on_disk, listed, "every layout fixture is listed once");
}

#[test]
fn check_prints_a_summary() {
    slackmap()
        .args(["layout", "check"])
        .arg(good("layout.toml"))
        .assert()
        .success()
        .stdout(predicate::str::contains("layout 'fixture-2x3' is valid"))
        .stdout(predicate::str::contains("qubits:        6"))
        .stdout(predicate::str::contains("couplers:      7"))
        .stdout(predicate::str::contains("4 of degree 2, 2 of degree 3"))
        .stdout(predicate::str::contains("7 neighbour pairs"))
        .stdout(predicate::str::contains("connected:     yes"))
        .stdout(predicate::str::contains("sx, x, rz (virtual: rz)"))
        .stdout(predicate::str::contains("two-qubit:     cz"));
}

#[test]
fn check_reports_missing_files() {
    slackmap()
        .args(["layout", "check", "no-such-layout.toml"])
        .assert()
        .code(2)
        .stderr(predicate::str::contains("no-such-layout.toml"));
}

#[test]
fn new_writes_what_check_accepts() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("hex.toml");
    slackmap().args(["layout", "new", "hex", "3x3", "--out"]).arg(&out).assert().success();
    slackmap()
        .args(["layout", "check"])
        .arg(&out)
        .assert()
        .success()
        .stdout(predicate::str::contains("qubits:        30"))
        .stdout(predicate::str::contains("14 of degree 2, 16 of degree 3"));
    // stdout and --out carry the same text, equal to the shipped file.
    let shipped = std::fs::read_to_string(layouts().join("hex-3x3.toml")).unwrap();
    assert_eq!(std::fs::read_to_string(&out).unwrap(), shipped);
    slackmap().args(["layout", "new", "hex", "3x3"]).assert().success().stdout(shipped);
}

#[test]
fn new_rejects_bad_sizes_and_kinds() {
    slackmap()
        .args(["layout", "new", "ring", "2"])
        .assert()
        .code(2)
        .stderr(predicate::str::contains("a ring needs at least 3 qubits"));
    slackmap()
        .args(["layout", "new", "grid", "4by4"])
        .assert()
        .code(2)
        .stderr(predicate::str::contains("size '4by4' does not fit a grid layout"));
    slackmap().args(["layout", "new", "torus", "4"]).assert().code(2);
}

#[test]
fn shipped_layouts_check() {
    for entry in std::fs::read_dir(layouts()).unwrap() {
        let path = entry.unwrap().path();
        slackmap().args(["layout", "check"]).arg(&path).assert().success();
    }
}

#[test]
fn help_shows_examples() {
    slackmap()
        .args(["layout", "new", "--help"])
        .assert()
        .success()
        .stdout(predicate::str::contains("slackmap layout new grid 4x4 --out grid-4x4.toml"))
        .stdout(predicate::str::contains("Exit codes"));
}
