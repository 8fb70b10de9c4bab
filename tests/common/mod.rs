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
