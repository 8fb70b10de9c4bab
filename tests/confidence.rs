//! Bootstrap determinism and sharding through the binary: the same seed gives the same
//! audit.json on one thread and on two, and merging two shards gives the single run's files,
//! byte for byte. The audits run with SOURCE_DATE_EPOCH set, which fixes audit.json's
//! creation time (the one field that otherwise differs between identical runs).

mod common;

use std::path::Path;

use common::slackmap;

/// A 4-chain with q2 disturbing q1, a small design and simulated counts in `dir`.
fn scenario(dir: &Path) {
    common::chain_scenario(dir, 4, &common::noise_with_context("q1", "q2", 6e-3), "1,8", 2, 400);
}

fn audit(dir: &Path, out: &str, extra: &[&str]) -> std::process::Output {
    let mut args = vec![
        "audit",
        "--layout",
        "chip.toml",
        "--circuits",
        "d/circuits.json",
        "--counts",
        "d/counts.csv",
        "--replicates",
        "12",
        "--null-replicates",
        "19",
        "--seed",
        "7",
        "-q",
        "--out",
        out,
    ];
    args.extend_from_slice(extra);
    slackmap().args(&args).env("SOURCE_DATE_EPOCH", "1700000000").current_dir(dir).output().unwrap()
}

#[test]
fn threads_and_shards_give_identical_audits() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    scenario(dir);
    for (out, extra) in [
        ("one", &["--threads", "1"][..]),
        ("two", &["--threads", "2"][..]),
        ("p1", &["--replicate-range", "0..5"][..]),
        ("p2", &["--replicate-range", "5..12", "--threads", "1"][..]),
        ("p3", &["--replicate-range", "2..7"][..]),
    ] {
        let o = audit(dir, out, extra);
        assert!(o.status.success(), "{out}: {}", String::from_utf8_lossy(&o.stderr));
    }
    let one = std::fs::read(dir.join("one/audit.json")).unwrap();
    let two = std::fs::read(dir.join("two/audit.json")).unwrap();
    assert!(one == two, "audit.json differs between 1 and 2 threads");
    let v: serde_json::Value = serde_json::from_slice(&one).unwrap();
    let conf = &v["edges"][0]["confidence"];
    assert_eq!(conf["replicates_tvd_per_layer"].as_array().unwrap().len(), 12, "{conf}");
    assert!(v["directed"][0]["parametric_p_value"].is_number(), "{}", v["directed"][0]);
    assert!(!dir.join("p1/audit.json").exists(), "a shard writes only its partial file");

    // Merge in either order gives the single run's bytes.
    let m = slackmap()
        .args(["merge", "p2", "p1/partial.json", "--out", "merged"])
        .env("SOURCE_DATE_EPOCH", "1700000000")
        .current_dir(dir)
        .output()
        .unwrap();
    assert!(m.status.success(), "{}", String::from_utf8_lossy(&m.stderr));
    let merged = std::fs::read(dir.join("merged/audit.json")).unwrap();
    assert!(merged == one, "merged audit.json differs from the single run");
    assert!(String::from_utf8_lossy(&one).contains("\"created\": \"2023-11-14T22:13:20Z\""));
    // The same set of files, each with the same bytes (rows.csv and replicates.csv too).
    let names = |d: &str| {
        let mut v: Vec<String> = std::fs::read_dir(dir.join(d))
            .unwrap()
            .map(|e| e.unwrap().file_name().to_string_lossy().to_string())
            .collect();
        v.sort();
        v
    };
    assert_eq!(names("merged"), names("one"));
    for f in names("one") {
        let (x, y) =
            (std::fs::read(dir.join("one").join(&f)), std::fs::read(dir.join("merged").join(&f)));
        assert!(x.unwrap() == y.unwrap(), "{f} differs between the merge and the single run");
    }
    assert!(names("one").contains(&"rows.csv".to_string()));

    // A truncated score vector is refused naming its file.
    let text = std::fs::read_to_string(dir.join("p1/partial.json")).unwrap();
    let mut v: serde_json::Value = serde_json::from_str(&text).unwrap();
    v["scores"][0]["directed_tvd_per_layer"].as_array_mut().unwrap().pop();
    std::fs::create_dir_all(dir.join("cut")).unwrap();
    std::fs::write(dir.join("cut/partial.json"), serde_json::to_vec(&v).unwrap()).unwrap();
    let m =
        slackmap().args(["merge", "cut", "p2", "--out", "bad"]).current_dir(dir).output().unwrap();
    assert_eq!(m.status.code(), Some(2));
    let err = String::from_utf8_lossy(&m.stderr);
    assert!(err.contains("cut/partial.json") && err.contains("directed_tvd_per_layer"), "{err}");
    assert!(!dir.join("bad").exists());

    // Overlapping or incomplete parts are refused, with exit code 2 and nothing written.
    for parts in [&["p1", "p2", "p3"][..], &["p1"][..]] {
        let mut args = vec!["merge"];
        args.extend_from_slice(parts);
        args.extend_from_slice(&["--out", "bad"]);
        let m = slackmap().args(&args).current_dir(dir).output().unwrap();
        assert_eq!(m.status.code(), Some(2), "{parts:?}");
        let err = String::from_utf8_lossy(&m.stderr);
        assert!(err.contains("overlap") || err.contains("missing"), "{err}");
        assert!(!dir.join("bad").exists());
    }
}

#[test]
fn bad_bootstrap_settings_are_usage_errors() {
    let tmp = tempfile::tempdir().unwrap();
    scenario(tmp.path());
    for extra in
        [&["--replicate-range", "5..20"][..], &["--level", "1.5"][..], &["--top-k", "0"][..]]
    {
        let o = audit(tmp.path(), "x", extra);
        assert_eq!(o.status.code(), Some(2), "{extra:?}: {}", String::from_utf8_lossy(&o.stderr));
    }
}
