//! Counts that do not follow their circuits are stopped before anything is fitted: read in
//! the other bit order, made by another design, or made by other circuits under the same
//! ids. `check` shows the agreement figure; `audit` exits 2 naming the mistake.

mod common;

use std::path::{Path, PathBuf};

use common::slackmap;

fn demo(name: &str) -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("demo-data").join(name)
}

fn run(args: &[&str]) -> (i32, String) {
    let out = slackmap().args(args).output().expect("binary runs");
    let text =
        format!("{}{}", String::from_utf8_lossy(&out.stdout), String::from_utf8_lossy(&out.stderr));
    (out.status.code().unwrap_or(-1), text)
}

fn s(p: &Path) -> &str {
    p.to_str().unwrap()
}

#[test]
fn check_shows_the_agreement_and_names_reversed_counts() {
    let (layout, circuits, counts) =
        (demo("layout.toml"), demo("circuits.json"), demo("counts.csv"));
    let base =
        ["check", "--layout", s(&layout), "--circuits", s(&circuits), "--counts", s(&counts)];
    let (code, text) = run(&base);
    assert_eq!(code, 0, "{text}");
    assert!(text.contains("agreement with ideal outcomes"), "{text}");
    assert!(!text.contains("bit-reversed"), "{text}");
    let mut rev = base.to_vec();
    rev.extend(["--bit-order", "reversed"]);
    let (_, text) = run(&rev);
    assert!(text.contains("[counts-bit-reversed] these counts look bit-reversed"), "{text}");
}

#[test]
fn audit_stops_on_reversed_counts_before_fitting() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("audit");
    let (layout, circuits, counts) =
        (demo("layout.toml"), demo("circuits.json"), demo("counts.csv"));
    let (code, text) = run(&[
        "audit",
        "--layout",
        s(&layout),
        "--circuits",
        s(&circuits),
        "--counts",
        s(&counts),
        "--bit-order",
        "reversed",
        "--out",
        s(&out),
        "--quiet",
    ]);
    assert_eq!(code, 2, "{text}");
    assert!(
        text.contains("these counts look bit-reversed: rerun with --bit-order reversed"),
        "{text}"
    );
    assert!(!out.join("audit.json").exists());
}

#[test]
fn counts_of_another_design_are_named_and_renamed_ones_do_not_belong() {
    let dir = tempfile::tempdir().unwrap();
    let other = dir.path().join("other");
    let layout = demo("layout.toml");
    let (code, text) = run(&[
        "design",
        "--layout",
        s(&layout),
        "--depths",
        "1,4,16,48",
        "--sequences",
        "3",
        "--seed",
        "2027",
        "--out",
        s(&other),
    ]);
    assert_eq!(code, 0, "{text}");
    let counts = dir.path().join("counts.csv");
    let (code, text) = run(&[
        "simulate",
        "--layout",
        s(&layout),
        "--circuits",
        s(&other.join("circuits.json")),
        "--noise",
        s(&demo("noise.toml")),
        "--shots",
        "200",
        "--seed",
        "1",
        "--out",
        s(&counts),
    ]);
    assert_eq!(code, 0, "{text}");
    let circuits = demo("circuits.json");
    let audit = |counts: &Path| {
        run(&[
            "audit",
            "--layout",
            s(&layout),
            "--circuits",
            s(&circuits),
            "--counts",
            s(counts),
            "--out",
            s(&dir.path().join("audit")),
            "--quiet",
        ])
    };
    let (code, text) = audit(&counts);
    assert_eq!(code, 2, "{text}");
    assert!(text.contains("these counts come from another design"), "{text}");
    // The same counts with their ids renamed to this design's: the ids match, the data do not.
    // The digest ending the circuit id of a counts file's first row.
    let digest_of = |text: &str| {
        let id = text.lines().nth(1).unwrap().split(',').next().unwrap();
        id.rsplit('-').next().unwrap().to_string()
    };
    let theirs = std::fs::read_to_string(&counts).unwrap();
    let our_digest = digest_of(&std::fs::read_to_string(demo("counts.csv")).unwrap());
    let their_digest = digest_of(&theirs);
    assert_ne!(our_digest, their_digest);
    let renamed = dir.path().join("renamed.csv");
    std::fs::write(
        &renamed,
        theirs.replace(&format!("-{their_digest},"), &format!("-{our_digest},")),
    )
    .unwrap();
    let (code, text) = audit(&renamed);
    assert_eq!(code, 2, "{text}");
    assert!(text.contains("the counts do not belong to these circuits"), "{text}");
}
