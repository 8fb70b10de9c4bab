//! Helpers shared by the integration tests: fixture paths, the expected-error tables and a
//! ready-made command for the `slackmap` binary.
#![allow(dead_code)]

use std::path::PathBuf;

use assert_cmd::Command;

/// The directory `tests/fixtures`.
pub fn fixtures() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures")
}

/// A file under `tests/fixtures/good`.
pub fn good(name: &str) -> PathBuf {
    fixtures().join("good").join(name)
}

/// A file under `tests/fixtures/bad`.
pub fn bad(name: &str) -> PathBuf {
    fixtures().join("bad").join(name)
}

/// The shipped layouts directory, `layouts/`.
pub fn layouts() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("layouts")
}

/// Rows `(file, fragment)` of a `tests/fixtures/bad/expect-*.tsv` table; blank lines and
/// lines starting with '#' are skipped.
pub fn expectations(table: &str) -> Vec<(String, String)> {
    let path = fixtures().join("bad").join(table);
    let text = std::fs::read_to_string(&path)
        .unwrap_or_else(|e| panic!("cannot read {}: {e}", path.display()));
    text.lines()
        .filter(|l| !l.trim().is_empty() && !l.starts_with('#'))
        .map(|l| {
            let (file, fragment) =
                l.split_once('\t').unwrap_or_else(|| panic!("{table}: line without a tab: {l:?}"));
            (file.to_string(), fragment.to_string())
        })
        .collect()
}

/// A command running the `slackmap` binary built for these tests.
pub fn slackmap() -> Command {
    Command::cargo_bin("slackmap").expect("the slackmap binary is built for integration tests")
}

/// A crosstalk-free noise file for small simulated scenarios: intrinsic errors of the usual
/// magnitudes (one-qubit 1e-3, idle 2e-4, two-qubit 1e-2, readout 1-2%; common practice).
pub const BASE_NOISE: &str = r#"schema = 1
[intrinsic.sx]
depolarizing = 1.0e-3
[intrinsic.x]
depolarizing = 1.0e-3
[intrinsic.id]
depolarizing = 2.0e-4
[intrinsic.cz]
depolarizing = 1.0e-2
[readout]
p1_given_0 = 0.01
p0_given_1 = 0.02
"#;

mod builder;
#[allow(unused_imports)]
pub use builder::*;

/// Asserts that a JSON document is valid under the schema `slackmap schema NAME` publishes
/// (validated by the `jsonschema` crate, an independent implementation of JSON Schema).
pub fn assert_valid(name: &str, value: &serde_json::Value) {
    let doc = slackmap::report::schema::Document::from_name(name)
        .unwrap_or_else(|| panic!("no schema named {name}"));
    let schema = doc.schema();
    let validator = jsonschema::validator_for(&schema)
        .unwrap_or_else(|e| panic!("the {name} schema is not a valid JSON Schema: {e}"));
    let errors: Vec<String> = validator
        .iter_errors(value)
        .take(5)
        .map(|e| format!("{} at {}", e, e.instance_path()))
        .collect();
    assert!(errors.is_empty(), "{name}.json does not match its schema: {errors:#?}");
}

/// Reads a JSON file and asserts it is valid under the schema `name`.
pub fn assert_file_valid(name: &str, path: &std::path::Path) -> serde_json::Value {
    let text = std::fs::read_to_string(path)
        .unwrap_or_else(|e| panic!("cannot read {}: {e}", path.display()));
    let value: serde_json::Value = serde_json::from_str(&text)
        .unwrap_or_else(|e| panic!("{} is not JSON: {e}", path.display()));
    assert_valid(name, &value);
    value
}

/// Asserts that every column of a CSV file is the JSON field of the same name (nested names
/// joined by `.`, as `pandas.json_normalize` names them) of `rows`, with the same value:
/// numbers equal, lists joined by `;`, booleans and words as written, and empty cells for
/// null, absent fields and the words `unbounded` and `not-identified`. Records are matched to
/// `rows` by the column `key` when given, else by position. Returns the header.
pub fn assert_csv_matches_json(
    path: &std::path::Path,
    rows: &[serde_json::Value],
    key: Option<&str>,
) -> Vec<String> {
    use serde_json::Value;
    let mut r = csv::Reader::from_path(path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    let header: Vec<String> = r.headers().unwrap().iter().map(String::from).collect();
    let records: Vec<csv::StringRecord> = r.records().map(|x| x.unwrap()).collect();
    assert_eq!(records.len(), rows.len(), "{}: one record per JSON entry", path.display());
    for (i, rec) in records.iter().enumerate() {
        let obj = match key {
            Some(k) => {
                let col = header.iter().position(|h| h == k).expect("key column");
                rows.iter().find(|o| o[k].as_str() == Some(&rec[col])).unwrap_or_else(|| {
                    panic!("{}: no JSON entry {k} = {}", path.display(), &rec[col])
                })
            }
            None => &rows[i],
        };
        for (name, cell) in header.iter().zip(rec.iter()) {
            let mut v = obj;
            for part in name.split('.') {
                v = v.get(part).unwrap_or(&Value::Null);
            }
            let want = match v {
                Value::Null => String::new(),
                Value::String(s) if s == "unbounded" || s == "not-identified" => String::new(),
                Value::String(s) => s.clone(),
                Value::Bool(b) => b.to_string(),
                Value::Number(n) => {
                    let x = n.as_f64().unwrap();
                    let got: f64 = cell.parse().unwrap_or_else(|_| {
                        panic!("{} record {i} column {name}: '{cell}' is not {x}", path.display())
                    });
                    assert_eq!(got, x, "{} record {i} column {name}", path.display());
                    continue;
                }
                Value::Array(a) => a
                    .iter()
                    .map(|x| x.as_str().map(String::from).unwrap_or_else(|| x.to_string()))
                    .collect::<Vec<_>>()
                    .join(";"),
                Value::Object(_) => panic!("{}: column {name} is not a leaf field", path.display()),
            };
            assert_eq!(cell, want, "{} record {i} column {name}", path.display());
        }
    }
    header
}

/// The base noise with one context term: `victim`'s operations depolarize at `rate` per
/// layer while `aggressor` is active.
pub fn noise_with_context(victim: &str, aggressor: &str, rate: f64) -> String {
    format!(
        "{BASE_NOISE}[[context]]\nvictim = \"{victim}\"\naggressor = \"{aggressor}\"\nrole = \"both\"\ndepolarizing = {rate:e}\n"
    )
}

/// A chain of `qubits` in `dir` (chip.toml), the given noise (noise.toml), a design with
/// `depths` and `sequences` (d/circuits.json) and `shots` simulated counts (d/counts.csv).
pub fn chain_scenario(
    dir: &std::path::Path,
    qubits: usize,
    noise: &str,
    depths: &str,
    sequences: usize,
    shots: u64,
) {
    let ok = |args: &[&str]| {
        let out = slackmap().args(args).current_dir(dir).output().unwrap();
        assert!(out.status.success(), "{args:?}: {}", String::from_utf8_lossy(&out.stderr));
    };
    let (n, seqs, shots) = (qubits.to_string(), sequences.to_string(), shots.to_string());
    ok(&["layout", "new", "chain", &n, "--out", "chip.toml"]);
    std::fs::write(dir.join("noise.toml"), noise).unwrap();
    ok(&[
        "design",
        "--layout",
        "chip.toml",
        "--out",
        "d",
        "--depths",
        depths,
        "--sequences",
        &seqs,
    ]);
    ok(&[
        "simulate",
        "--layout",
        "chip.toml",
        "--circuits",
        "d/circuits.json",
        "--noise",
        "noise.toml",
        "--shots",
        &shots,
        "--seed",
        "3",
        "--out",
        "d/counts.csv",
    ]);
}
