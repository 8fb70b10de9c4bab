//! The same figures whatever the machine does: on a grid with two-qubit blocks, under the
//! `depolarizing` and the `pauli` families and both resampling schemes, audit.json is the
//! same byte for byte on one thread and on two, and when the bootstrap is split into shards
//! that are merged afterwards (method.md section 5, "Determinism"). Every audit runs with
//! SOURCE_DATE_EPOCH set, which fixes the one field that otherwise differs.

mod common;

use std::path::Path;

use common::slackmap;

const EPOCH: &str = "1700000000";

fn ok(dir: &Path, args: &[&str]) {
    let out = slackmap().args(args).env("SOURCE_DATE_EPOCH", EPOCH).current_dir(dir).output();
    let out = out.unwrap();
    assert!(out.status.success(), "{args:?}: {}", String::from_utf8_lossy(&out.stderr));
}

/// A 2x3 grid with q1 disturbing q4 (neighbours in the grid), a small design and counts.
fn scenario(dir: &Path) {
    ok(dir, &["layout", "new", "grid", "2x3", "--out", "chip.toml"]);
    std::fs::write(dir.join("noise.toml"), common::noise_with_context("q4", "q1", 8e-3)).unwrap();
    ok(
        dir,
        &["design", "--layout", "chip.toml", "--out", "d", "--depths", "1,6", "--sequences", "2"],
    );
    let sim = [
        "simulate",
        "--layout",
        "chip.toml",
        "--circuits",
        "d/circuits.json",
        "--noise",
        "noise.toml",
        "--shots",
        "300",
        "--seed",
        "5",
        "--out",
        "d/counts.csv",
    ];
    ok(dir, &sim);
}

fn audit(dir: &Path, out: &str, model: &str, resample: &str, extra: &[&str]) {
    let mut args = vec![
        "audit",
        "--layout",
        "chip.toml",
        "--circuits",
        "d/circuits.json",
        "--counts",
        "d/counts.csv",
        "--model",
        model,
        "--resample",
        resample,
        "--replicates",
        "8",
        "--null-replicates",
        "9",
        "--seed",
        "11",
        "-q",
        "--out",
        out,
    ];
    args.extend_from_slice(extra);
    ok(dir, &args);
}

#[test]
fn audits_are_identical_across_threads_and_shards() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    scenario(dir);
    for (model, resample) in [("depolarizing", "shots"), ("pauli", "circuits")] {
        let tag = |s: &str| format!("{}-{resample}-{s}", model.replace('+', "_"));
        audit(dir, &tag("one"), model, resample, &["--threads", "1"]);
        audit(dir, &tag("two"), model, resample, &["--threads", "2"]);
        audit(dir, &tag("a"), model, resample, &["--replicate-range", "0..3", "--threads", "2"]);
        audit(dir, &tag("b"), model, resample, &["--replicate-range", "3..8", "--threads", "1"]);
        ok(dir, &["merge", &tag("b"), &tag("a"), "--out", &tag("merged")]);
        let read = |s: &str| std::fs::read(dir.join(tag(s)).join("audit.json")).unwrap();
        let one = read("one");
        assert!(
            one == read("two"),
            "{model}/{resample}: audit.json differs between 1 and 2 threads"
        );
        assert!(one == read("merged"), "{model}/{resample}: the merged shards differ from one run");
        // The scenario exercises two-qubit blocks and the bootstrap: not a vacuous comparison.
        let v: serde_json::Value = serde_json::from_slice(&one).unwrap();
        let reps = &v["edges"][0]["confidence"]["replicates_tvd_per_layer"];
        assert_eq!(reps.as_array().map(Vec::len), Some(8), "{model}/{resample}");
        let text = String::from_utf8_lossy(&one);
        assert!(text.contains("cz@"), "{model}/{resample}: no two-qubit kind in the audit");
    }
}
