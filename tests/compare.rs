//! `slackmap compare` from the outside, on the hand-made fixture pair in
//! tests/fixtures/audit-decisions (regenerate with `SLACKMAP_REGENERATE_FIXTURES=1 cargo
//! test --test compare fixtures_match_their_generator`).

mod common;

use std::path::Path;

use serde::Deserialize;

use common::{fixture_pair, run_slackmap, write_audit, AuditBuilder, FIXTURES};

/// Test-only view of compare.json, so the format is checked from outside.
#[derive(Deserialize)]
struct CompareFile {
    schema: u32,
    level: f64,
    notes: Vec<String>,
    warnings: Vec<String>,
    edges: Vec<EdgeRow>,
    qubits: Vec<QubitRow>,
}

#[derive(Deserialize)]
struct EdgeRow {
    a: String,
    b: String,
    presence: String,
    difference_tvd_per_layer: Diff,
}

#[derive(Deserialize)]
struct QubitRow {
    qubit: String,
    difference_tvd_per_occurrence: Diff,
}

#[derive(Deserialize)]
struct Diff {
    estimate: Option<f64>,
    low: Option<f64>,
    high: Option<f64>,
    basis: String,
    change: Option<String>,
}

fn run_compare(a: &Path, b: &Path, extra: &[&str]) -> (CompareFile, tempfile::TempDir) {
    let out = tempfile::tempdir().expect("tempdir");
    let dir = out.path().join("cmp");
    let mut args =
        vec!["compare", a.to_str().unwrap(), b.to_str().unwrap(), "--out", dir.to_str().unwrap()];
    args.extend_from_slice(extra);
    let o = run_slackmap(&args);
    assert!(o.status.success(), "stderr: {}", String::from_utf8_lossy(&o.stderr));
    let text = std::fs::read_to_string(dir.join("compare.json")).expect("compare.json written");
    (serde_json::from_str(&text).expect("compare.json parses"), out)
}

fn edge<'a>(f: &'a CompareFile, a: &str, b: &str) -> &'a EdgeRow {
    f.edges
        .iter()
        .find(|e| (e.a == a && e.b == b) || (e.a == b && e.b == a))
        .unwrap_or_else(|| panic!("edge {a}-{b} listed"))
}

/// Numbers equal to 1e-12 relative, everything else exactly: fixtures rest on ln and cos,
/// whose last bits may differ between platforms.
fn same(x: &serde_json::Value, y: &serde_json::Value) -> bool {
    use serde_json::Value::*;
    match (x, y) {
        (Number(a), Number(b)) => {
            let (a, b) = (a.as_f64().unwrap_or(f64::NAN), b.as_f64().unwrap_or(f64::NAN));
            (a - b).abs() <= 1e-12 * a.abs().max(b.abs()).max(1e-300)
        }
        (Array(a), Array(b)) => a.len() == b.len() && a.iter().zip(b).all(|(p, q)| same(p, q)),
        (Object(a), Object(b)) => {
            a.len() == b.len() && a.iter().all(|(k, v)| b.get(k).is_some_and(|w| same(v, w)))
        }
        _ => x == y,
    }
}

#[test]
fn fixtures_match_their_generator() {
    let (before, after) = fixture_pair();
    for (name, r) in [("before.json", &before), ("after.json", &after)] {
        let path = Path::new(FIXTURES).join(name);
        let bytes = common::audit_bytes(r);
        if std::env::var_os("SLACKMAP_REGENERATE_FIXTURES").is_some() {
            std::fs::create_dir_all(FIXTURES).unwrap();
            std::fs::write(&path, &bytes).unwrap();
        }
        let stored: serde_json::Value =
            serde_json::from_str(&std::fs::read_to_string(&path).expect("fixture exists")).unwrap();
        let fresh: serde_json::Value = serde_json::from_slice(&bytes).unwrap();
        assert!(same(&stored, &fresh), "{name} differs from its generator; regenerate it");
    }
}

#[test]
fn the_improved_edge_is_improved_and_the_rest_unchanged() {
    let dir = Path::new(FIXTURES);
    let (f, out) = run_compare(&dir.join("before.json"), &dir.join("after.json"), &[]);
    assert_eq!(f.schema, 3);
    assert!((f.level - 0.95).abs() < 1e-12);
    let e = edge(&f, "q5", "q6");
    assert_eq!(e.difference_tvd_per_layer.change.as_deref(), Some("improved"));
    assert_eq!(e.difference_tvd_per_layer.basis, "paired-bootstrap");
    let d = e.difference_tvd_per_layer.estimate.unwrap();
    assert!((d - (3e-4 - 4e-3)).abs() < 1e-12, "B - A = {d}");
    assert!(e.difference_tvd_per_layer.high.unwrap() < 0.0);
    for (a, b) in [("q1", "q2"), ("q9", "q10")] {
        assert_eq!(
            edge(&f, a, b).difference_tvd_per_layer.change.as_deref(),
            Some("unchanged"),
            "{a}-{b}"
        );
    }
    let others = f.edges.iter().filter(|e| e.presence == "both" && !(e.a == "q5" && e.b == "q6"));
    for e in others {
        let d = &e.difference_tvd_per_layer;
        assert_eq!(d.change.as_deref(), Some("unchanged"), "{}-{}", e.a, e.b);
    }
    // 24 couplers of a 4x4 grid in both, the diagonal pair only in B.
    assert_eq!(f.edges.iter().filter(|e| e.presence == "both").count(), 24);
    let only = edge(&f, "q0", "q5");
    assert_eq!(only.presence, "only-b");
    assert_eq!(only.difference_tvd_per_layer.basis, "one-audit-only");
    assert!(only.difference_tvd_per_layer.change.is_none());
    // Intrinsic slack: q3 rose from 1e-4 to 6e-4 per occurrence in B.
    let q3 = f.qubits.iter().find(|q| q.qubit == "q3").expect("q3 listed");
    assert_eq!(q3.difference_tvd_per_occurrence.change.as_deref(), Some("worse"));
    let q0 = f.qubits.iter().find(|q| q.qubit == "q0").expect("q0 listed");
    assert_eq!(q0.difference_tvd_per_occurrence.change.as_deref(), Some("unchanged"));
    assert_eq!(f.qubits.len(), 16);
    assert!(f.notes.is_empty(), "{:?}", f.notes);
    let csv = std::fs::read_to_string(out.path().join("cmp/compare.csv")).unwrap();
    assert_eq!(csv.lines().count(), 1 + 25 + 16);
    assert!(csv.lines().any(|l| l.starts_with("edge,q0,q5,only-b,")));
    let svg = std::fs::read_to_string(out.path().join("cmp/compare.svg")).unwrap();
    assert!(svg.starts_with("<svg") && svg.trim_end().ends_with("</svg>"));
    assert_eq!(svg.matches("<polygon").count(), 1, "one improved edge, one mark");
    assert_eq!(svg.matches("stroke-dasharray").count(), 1, "one pair in one audit only");
}

#[test]
fn identical_audits_give_intervals_containing_zero() {
    let p = Path::new(FIXTURES).join("before.json");
    let (f, _out) = run_compare(&p, &p, &["--level", "0.9"]);
    for e in &f.edges {
        let d = &e.difference_tvd_per_layer;
        let (low, high) = (d.low.unwrap(), d.high.unwrap());
        assert!(low <= 0.0 && high >= 0.0, "{}-{}: {low}..{high}", e.a, e.b);
        assert_eq!(d.change.as_deref(), Some("unchanged"));
    }
}

#[test]
fn audits_without_replicates_use_the_detection_limit() {
    let g = slackmap::layout::generate::grid(2, 2);
    let a = AuditBuilder::new(&g)
        .flag("q0", "q1", 3e-3, slackmap::report::Verdict::Recalibrate)
        .build();
    let b = AuditBuilder::new(&g)
        .flag("q0", "q1", 2.8e-3, slackmap::report::Verdict::Recalibrate)
        .build();
    let tmp = tempfile::tempdir().unwrap();
    let (pa, pb) = (write_audit(tmp.path(), "a.json", &a), write_audit(tmp.path(), "b.json", &b));
    let (f, _out) = run_compare(&pa, &pb, &[]);
    let e = edge(&f, "q0", "q1");
    assert_eq!(e.difference_tvd_per_layer.basis, "detection-limit");
    assert_eq!(
        e.difference_tvd_per_layer.change.as_deref(),
        Some("unchanged"),
        "0.2e-3 is below the 0.5e-3 limit"
    );
    assert!(e.difference_tvd_per_layer.low.is_none());
    assert!(f.qubits.iter().all(|q| q.difference_tvd_per_occurrence.basis == "estimate-only"
        && q.difference_tvd_per_occurrence.change.is_none()));
    assert!(f.notes.iter().any(|n| n.contains("no bootstrap replicates")));
}

#[test]
fn a_bad_level_or_file_is_a_usage_error() {
    let p = Path::new(FIXTURES).join("before.json");
    let tmp = tempfile::tempdir().unwrap();
    let out = tmp.path().join("o");
    let o = run_slackmap(&[
        "compare",
        p.to_str().unwrap(),
        p.to_str().unwrap(),
        "--level",
        "95",
        "--out",
        out.to_str().unwrap(),
    ]);
    assert_eq!(o.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&o.stderr).contains("--level"));
    let junk = tmp.path().join("junk.json");
    std::fs::write(&junk, "{\"schema\": 1}").unwrap();
    let o = run_slackmap(&[
        "compare",
        junk.to_str().unwrap(),
        p.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
    ]);
    assert_eq!(o.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&o.stderr).contains("junk.json"));
}

#[test]
fn audits_of_different_layouts_warn_and_disjoint_ones_are_refused() {
    use slackmap::layout::generate::{chain, grid};
    let tmp = tempfile::tempdir().unwrap();
    let g = AuditBuilder::new(&grid(4, 4)).replicates(20, 1, 2e-4).build();
    let c = AuditBuilder::new(&chain(4)).replicates(20, 2, 2e-4).build();
    let (pg, pc) = (write_audit(tmp.path(), "g.json", &g), write_audit(tmp.path(), "c.json", &c));
    // The chain's q0-q1, q1-q2, q2-q3 are also grid pairs: compared there, with warnings.
    let out = tmp.path().join("o");
    let o = run_slackmap(&[
        "compare",
        pg.to_str().unwrap(),
        pc.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(err.contains("warning: the audits are of different layouts"), "{err}");
    assert!(err.contains("warning: the qubits differ"), "{err}");
    assert!(err.contains("3 in both"), "{err}");
    let f: CompareFile =
        serde_json::from_str(&std::fs::read_to_string(out.join("compare.json")).unwrap()).unwrap();
    assert_eq!(f.warnings.len(), 3, "{:?}", f.warnings);
    assert_eq!(f.edges.iter().filter(|e| e.presence == "both").count(), 3);
    // A layout whose qubits have other names shares no pair: refused, naming both files.
    let renamed = slackmap::layout::Layout::new(
        "other".into(),
        (0..4).map(|i| slackmap::layout::Qubit { id: format!("r{i}"), position: None }).collect(),
        (0..3).map(|i| (format!("r{i}"), format!("r{}", i + 1))).collect(),
        slackmap::layout::generate::default_gates(),
        1,
        Vec::new(),
    )
    .unwrap();
    let r = AuditBuilder::new(&renamed).build();
    let pr = write_audit(tmp.path(), "r.json", &r);
    let o = run_slackmap(&[
        "compare",
        pg.to_str().unwrap(),
        pr.to_str().unwrap(),
        "--out",
        tmp.path().join("o2").to_str().unwrap(),
    ]);
    assert_eq!(o.status.code(), Some(2));
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(err.contains("share no neighbour pair") && err.contains("r.json"), "{err}");
    assert!(!tmp.path().join("o2").exists(), "nothing written");
}
