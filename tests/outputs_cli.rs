//! The output commands from the outside: values in the display unit on the command line,
//! audits that `report` must refuse, the label and creation time, the published schemas,
//! progress lines into a log, and the examples in `--help`.

mod common;

use std::path::Path;

use common::{assert_file_valid, slackmap, BASE_NOISE};

/// A 3-qubit chain with a small design and counts in `dir`.
fn scenario(dir: &Path) {
    common::chain_scenario(dir, 3, BASE_NOISE, "1,8", 1, 200);
}

/// The audit command of the scenario, writing `out`, with `extra` arguments.
fn audit_cmd(dir: &Path, out: &str, extra: &[&str]) -> assert_cmd::Command {
    let mut c = slackmap();
    c.args(["audit", "--layout", "chip.toml", "--circuits", "d/circuits.json", "--counts"])
        .args(["d/counts.csv", "--replicates", "3", "--null-replicates", "9", "--out", out])
        .args(extra)
        .current_dir(dir);
    c
}

fn audit(dir: &Path, out: &str, extra: &[&str]) -> std::process::Output {
    audit_cmd(dir, out, extra).output().unwrap()
}

#[test]
fn thresholds_take_raw_tvd_or_the_display_unit_and_refuse_impossible_values() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    scenario(dir);
    for (value, want) in [("1m", 1e-3), ("2.5e-4", 2.5e-4), ("0.5m", 5e-4)] {
        let o = audit(dir, "a", &["--action-threshold", value, "-q"]);
        assert!(o.status.success(), "{value}: {}", String::from_utf8_lossy(&o.stderr));
        let v = assert_file_valid("audit", &dir.join("a/audit.json"));
        let got = v["parameters"]["action_threshold_tvd_per_layer"].as_f64().unwrap();
        assert!((got - want).abs() < 1e-15, "{value}: {got}");
    }
    for value in ["1", "0.6", "-1e-3", "1 permille", "nan"] {
        let flag = format!("--action-threshold={value}");
        let o = audit(dir, "bad", &[&flag, "-q"]);
        assert_eq!(o.status.code(), Some(2), "{value}");
        let err = String::from_utf8_lossy(&o.stderr);
        assert!(err.contains("--action-threshold"), "{err}");
        assert!(!dir.join("bad").exists());
    }
    let err = String::from_utf8_lossy(&audit(dir, "bad", &["--action-threshold", "1"]).stderr)
        .to_string();
    assert!(err.contains("1m") && err.contains("0.5"), "the hint names the unit: {err}");
    // plan's --target: the same units, refused before any work.
    let o = slackmap()
        .args(["plan", "--layout", "chip.toml", "--noise", "noise.toml", "--target", "2"])
        .args(["--out", "p"])
        .current_dir(dir)
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&o.stderr).contains("--target"));
}

#[test]
fn label_and_creation_time_are_recorded_and_shown() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    scenario(dir);
    let o = audit_cmd(dir, "a", &["-q", "--label", "chip 7 <cooldown 3>"])
        .env("SOURCE_DATE_EPOCH", "951782400")
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let v = assert_file_valid("audit", &dir.join("a/audit.json"));
    assert_eq!(v["label"], "chip 7 <cooldown 3>");
    assert_eq!(v["created"], "2000-02-29T00:00:00Z");
    let stdout = String::from_utf8_lossy(&o.stdout);
    assert!(stdout.contains("chip 7 <cooldown 3>") && stdout.contains("2000-02-29"), "{stdout}");
    let page = std::fs::read_to_string(dir.join("a/report.html")).unwrap();
    assert!(page.contains("chip 7 &lt;cooldown 3&gt;"));
    // Without SOURCE_DATE_EPOCH the clock is used; a bad value is refused.
    let o = audit(dir, "b", &["-q"]);
    assert!(o.status.success());
    let v: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.join("b/audit.json")).unwrap()).unwrap();
    assert!(v["created"].as_str().is_some_and(|c| c.starts_with("20") && c.ends_with('Z')));
    let o = audit_cmd(dir, "c", &["-q"]).env("SOURCE_DATE_EPOCH", "yesterday").output().unwrap();
    assert_eq!(o.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&o.stderr).contains("SOURCE_DATE_EPOCH"));
}

#[test]
fn progress_goes_to_a_log_as_plain_lines() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    scenario(dir);
    // stderr is a pipe here: a plain line per stage with its size, no bar or escapes.
    let o = audit(dir, "a", &[]);
    assert!(o.status.success());
    let err = String::from_utf8_lossy(&o.stderr);
    let lines: Vec<&str> = err.lines().filter(|l| l.starts_with('[')).collect();
    assert!(lines.len() >= 3, "{err}");
    assert!(lines.iter().any(|l| l.contains("bootstrap") && l.contains("/3")), "{err}");
    assert!(!err.contains('\x1b') && !err.contains('\r'), "{err}");
    // -q: nothing.
    let o = audit(dir, "b", &["-q"]);
    assert!(o.status.success() && o.stderr.is_empty(), "{}", String::from_utf8_lossy(&o.stderr));
}

#[test]
fn report_refuses_inconsistent_audits_naming_file_and_fault() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    let fixture = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures/audit/grid-4x4.json");
    let good: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&fixture).unwrap()).unwrap();
    type Break = fn(&mut serde_json::Value);
    let cases: [(&str, Break, &str); 5] = [
        (
            "few-positions.json",
            |v| {
                v["layout"]["positions"].as_array_mut().unwrap().truncate(10);
            },
            "layout.positions has 10 entries for 16 qubits",
        ),
        ("unknown-qubit.json", |v| v["edges"][0]["b"] = "q99".into(), "names qubit 'q99'"),
        (
            "no-qubits.json",
            |v| {
                v["layout"]["qubits"] = serde_json::json!([]);
                v["layout"]["positions"] = serde_json::json!([]);
            },
            "lists no qubits",
        ),
        ("twice.json", |v| v["layout"]["qubits"][1] = "q0".into(), "listed twice"),
        ("null-number.json", |v| v["edges"][0]["p_value"] = serde_json::Value::Null, "p_value"),
    ];
    for (name, break_it, fault) in cases {
        let mut v = good.clone();
        break_it(&mut v);
        let path = dir.join(name);
        std::fs::write(&path, serde_json::to_vec_pretty(&v).unwrap()).unwrap();
        for cmd in [&["report"][..], &["hints"][..]] {
            let mut args: Vec<&str> = cmd.to_vec();
            let p = path.to_string_lossy().to_string();
            args.extend_from_slice(&[&p, "--out"]);
            let out = dir.join("out");
            let o_str = out.to_string_lossy().to_string();
            args.push(&o_str);
            let o = slackmap().args(&args).output().unwrap();
            assert_eq!(o.status.code(), Some(2), "{cmd:?} {name}");
            let err = String::from_utf8_lossy(&o.stderr);
            assert!(err.contains(name) && err.contains(fault), "{cmd:?} {name}: {err}");
            assert!(!out.exists(), "nothing written for {name}");
        }
    }
    // A schema-2 file (written before reason codes) is still read.
    let ok = slackmap()
        .args(["report", "tests/fixtures/audit-decisions/before.json", "--out"])
        .arg(dir.join("old"))
        .current_dir(env!("CARGO_MANIFEST_DIR"))
        .output()
        .unwrap();
    assert!(ok.status.success(), "{}", String::from_utf8_lossy(&ok.stderr));
}

#[test]
fn schemas_are_published_and_help_has_examples() {
    let tmp = tempfile::tempdir().unwrap();
    let o = slackmap().args(["schema", "all", "--out"]).arg(tmp.path()).output().unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    for name in ["audit", "compare", "hints", "hints-compare", "plan"] {
        let path = tmp.path().join(format!("{name}.schema.json"));
        let s: serde_json::Value =
            serde_json::from_str(&std::fs::read_to_string(&path).unwrap()).unwrap();
        assert_eq!(s["$schema"], "https://json-schema.org/draft/2020-12/schema", "{name}");
        assert!(jsonschema::meta::is_valid(&s), "{name}: not a valid JSON Schema");
    }
    let one = slackmap().args(["schema", "audit"]).output().unwrap();
    assert!(one.status.success());
    let s: serde_json::Value = serde_json::from_slice(&one.stdout).unwrap();
    assert_eq!(s["title"], "slackmap audit.json");
    assert_eq!(slackmap().args(["schema", "all"]).output().unwrap().status.code(), Some(2));
    for cmd in ["audit", "report", "compare", "hints", "merge", "schema", "plan"] {
        let o = slackmap().args([cmd, "--help"]).output().unwrap();
        let text = String::from_utf8_lossy(&o.stdout);
        assert!(text.contains("Example"), "{cmd} --help has no example");
        assert!(text.contains(&format!("slackmap {cmd}")), "{cmd} --help");
        assert!(text.contains("Exit codes"), "{cmd} --help");
    }
}
