//! What one command writes, every command that reads it reads back. Over randomly drawn
//! small designs (layout, depths, sequences, shots, seeds), design -> simulate -> audit with
//! few replicates, also as two shards and a merge; then `report`, `hints` (one audit and two),
//! `compare` and `merge` must read every file, every JSON file must match its published
//! schema, and every CSV cell must be a finite number, a word, or empty. Two designs that
//! once produced unreadable audits on the demo chip (`--depths 1`, and `--depths 4
//! --sequences 1`) are checked every time.

mod common;

use std::path::Path;

use proptest::prelude::*;

use common::{assert_csv_matches_json, assert_file_valid, slackmap};

/// Runs the binary in `dir` with a fixed creation time; asserts success.
fn ok(dir: &Path, args: &[&str]) -> String {
    let out = slackmap()
        .args(args)
        .env("SOURCE_DATE_EPOCH", "1700000000")
        .env("COLUMNS", "80")
        .current_dir(dir)
        .output()
        .expect("binary runs");
    assert!(
        out.status.success(),
        "{args:?} exit {:?}: {}",
        out.status.code(),
        String::from_utf8_lossy(&out.stderr)
    );
    let text = String::from_utf8_lossy(&out.stdout).to_string();
    // Into a pipe: no colour; with COLUMNS=80 nothing wider.
    assert!(!text.contains('\x1b'), "{args:?}: colour escapes into a pipe");
    for line in text.lines() {
        assert!(line.chars().count() <= 80, "{args:?}: line wider than COLUMNS=80:\n{line}");
    }
    text
}

/// Every cell of a CSV file is empty, a finite number, or text that is not a number; no
/// `inf` or `NaN` in any spelling. Returns the header.
fn check_csv(path: &Path) -> Vec<String> {
    let mut r = csv::Reader::from_path(path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    let header: Vec<String> = r.headers().expect("header").iter().map(String::from).collect();
    for (i, rec) in r.records().enumerate() {
        let rec = rec.unwrap_or_else(|e| panic!("{} record {i}: {e}", path.display()));
        assert_eq!(rec.len(), header.len(), "{} record {i}", path.display());
        for (cell, name) in rec.iter().zip(&header) {
            let lower = cell.to_ascii_lowercase();
            assert!(
                !matches!(lower.trim_start_matches(['+', '-']), "inf" | "infinity" | "nan"),
                "{} record {i} column {name}: '{cell}'",
                path.display()
            );
            if let Ok(v) = cell.parse::<f64>() {
                assert!(v.is_finite(), "{} column {name}: {cell}", path.display());
            }
        }
    }
    header
}

/// A layout, design and audit in `dir`, then every reader on every file.
fn pipeline(dir: &Path, layout: &[&str], design: &[&str], shots: u32, seed: u64) {
    let mut new = vec!["layout", "new"];
    new.extend_from_slice(layout);
    new.extend_from_slice(&["--out", "chip.toml"]);
    ok(dir, &new);
    // A context error on q1 from q0, so that some designs flag an edge.
    std::fs::write(dir.join("noise.toml"), common::noise_with_context("q1", "q0", 8e-3)).unwrap();
    let seed = seed.to_string();
    let mut d = vec!["design", "--layout", "chip.toml", "--seed", &seed, "--out", "run"];
    d.extend_from_slice(design);
    ok(dir, &d);
    let shots = shots.to_string();
    ok(
        dir,
        &[
            "simulate",
            "--layout",
            "chip.toml",
            "--circuits",
            "run/circuits.json",
            "--noise",
            "noise.toml",
            "--shots",
            &shots,
            "--seed",
            &seed,
            "--out",
            "run/counts.csv",
        ],
    );
    let audit = |out: &str, extra: &[&str]| {
        let mut a = vec![
            "audit",
            "--layout",
            "chip.toml",
            "--circuits",
            "run/circuits.json",
            "--counts",
            "run/counts.csv",
            "--replicates",
            "4",
            "--null-replicates",
            "9",
            "--seed",
            &seed,
            "--label",
            "round trip",
            "-q",
            "--out",
            out,
        ];
        a.extend_from_slice(extra);
        ok(dir, &a);
    };
    audit("a", &[]);
    audit("s0", &["--replicate-range", "0..2"]);
    audit("s1", &["--replicate-range", "2..4"]);
    ok(dir, &["merge", "s0", "s1", "--out", "m"]);

    // What audit and merge write.
    for folder in ["a", "m"] {
        let f = dir.join(folder);
        let v = assert_file_valid("audit", &f.join("audit.json"));
        assert_eq!(v["label"], "round trip");
        let edges = v["edges"].as_array().expect("edges");
        let header = assert_csv_matches_json(&f.join("edges.csv"), edges, None);
        assert!(header.iter().all(|h| !h.contains("replicates")), "{header:?}");
        let kinds = v["intrinsic"].as_array().expect("intrinsic");
        assert_csv_matches_json(&f.join("intrinsic.csv"), kinds, Some("kind"));
        for csv in ["edges.csv", "replicates.csv", "adjacency.csv", "intrinsic.csv", "rows.csv"] {
            check_csv(&f.join(csv));
        }
    }
    // replicates.csv: one row per edge, direction and replicate, the values audit.json holds.
    let v: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.join("a/audit.json")).unwrap()).unwrap();
    let mut want = 0;
    for d in v["directed"].as_array().unwrap() {
        want += d["confidence"]["replicates_tvd_per_layer"].as_array().map_or(0, |r| r.len());
    }
    let mut reps = csv::Reader::from_path(dir.join("a/replicates.csv")).unwrap();
    assert_eq!(
        reps.headers().unwrap().iter().collect::<Vec<_>>(),
        ["edge", "direction", "replicate", "score_tvd_per_layer", "estimate_tvd_per_layer"]
    );
    assert_eq!(reps.records().count(), want);
    for name in ["audit.json", "edges.csv", "replicates.csv", "rows.csv", "intrinsic.csv"] {
        assert!(
            std::fs::read(dir.join("a").join(name)).unwrap()
                == std::fs::read(dir.join("m").join(name)).unwrap(),
            "{name}: merge differs from the single run"
        );
    }
    // Every reader of audit.json.
    ok(dir, &["report", "a/audit.json", "--out", "r"]);
    assert_file_valid("audit", &dir.join("r/audit.json"));
    ok(dir, &["hints", "a/audit.json", "--out", "h"]);
    assert_file_valid("hints", &dir.join("h/hints.json"));
    ok(dir, &["hints", "--compare", "a/audit.json", "m/audit.json", "--out", "hc"]);
    assert_file_valid("hints-compare", &dir.join("hc/hints-compare.json"));
    ok(dir, &["compare", "a/audit.json", "m/audit.json", "--out", "c"]);
    assert_file_valid("compare", &dir.join("c/compare.json"));
    check_csv(&dir.join("c/compare.csv"));
    // A re-rendered audit is read back again (report of report).
    ok(dir, &["report", "r/audit.json", "--out", "r2"]);
    assert!(
        std::fs::read(dir.join("r/audit.json")).unwrap()
            == std::fs::read(dir.join("r2/audit.json")).unwrap(),
        "re-rendering changes audit.json"
    );
}

#[test]
fn designs_that_once_broke_the_readers_round_trip_on_the_demo_chip() {
    for design in [&["--depths", "1"][..], &["--depths", "4", "--sequences", "1"][..]] {
        let tmp = tempfile::tempdir().unwrap();
        pipeline(tmp.path(), &["grid", "4x4"], design, 200, 3);
    }
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 6, .. ProptestConfig::default() })]

    #[test]
    fn every_file_is_read_back_by_every_reader(
        layout in prop_oneof![
            Just(vec!["chain", "3"]), Just(vec!["chain", "5"]), Just(vec!["grid", "2x3"]),
            Just(vec!["ring", "4"]), Just(vec!["ladder", "2x3"]),
        ],
        depths in prop_oneof![Just("1"), Just("4"), Just("1,4"), Just("2,8"), Just("1,2,16")],
        sequences in 1u32..3,
        shots in prop_oneof![Just(30u32), Just(100), Just(400)],
        seed in 0u64..1000,
    ) {
        let tmp = tempfile::tempdir().unwrap();
        let seqs = sequences.to_string();
        pipeline(tmp.path(), &layout, &["--depths", depths, "--sequences", &seqs], shots, seed);
    }
}
