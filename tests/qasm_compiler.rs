//! OpenQASM 3 written the way compilers write it, read through the binary, and the same
//! fixtures accepted by the reference parser `openqasm3[parser]` (PyPI).

use std::path::Path;
use std::process::Command;

use assert_cmd::prelude::*;
use slackmap::circuit::qasm;
use slackmap::layout::toml::read_layout;

const LAYOUT: &str = "tests/fixtures/good/layout.toml";
const DIR: &str = "tests/fixtures/qasm-compiler";

fn fixtures() -> Vec<std::path::PathBuf> {
    let mut v: Vec<_> = std::fs::read_dir(DIR).unwrap().map(|e| e.unwrap().path()).collect();
    v.sort();
    v
}

#[test]
fn check_accepts_compiler_style_files() {
    let out = Command::cargo_bin("slackmap")
        .unwrap()
        .args(["check", "--layout", LAYOUT, "--circuits", DIR])
        .output()
        .unwrap();
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(0), "{stderr}");
}

#[test]
fn several_gates_on_one_qubit_between_barriers_become_layers() {
    let layout = read_layout(Path::new(LAYOUT)).unwrap();
    let path = Path::new(DIR).join("segments.qasm");
    let text = std::fs::read_to_string(&path).unwrap();
    let c = qasm::import(&text, &path, "segments", &layout, None).unwrap();
    let shown: Vec<Vec<String>> = c
        .layers
        .iter()
        .map(|l| {
            l.iter()
                .map(|o| {
                    let qs: Vec<String> = o.qubits().iter().map(|q| format!("${q}")).collect();
                    format!("{} {}", o.gate, qs.join(","))
                })
                .collect()
        })
        .collect();
    // First segment: the first rz $0 precedes the first sx $0 in a layer of frame changes
    // only; the second rz $0 and t $1 (an rz up to phase) wait together for the second
    // sx $0, which shares $0, so they stay a frame-only layer too; x $1 shares the first
    // timed layer with sx $0. Second segment: the two rz on $1 after cz are summed.
    let want: Vec<Vec<&str>> = vec![
        vec!["rz $0"],
        vec!["sx $0", "x $1"],
        vec!["rz $0", "rz $1"],
        vec!["sx $0"],
        vec!["cz $0,$1"],
        vec!["rz $1"],
    ];
    assert_eq!(shown, want);
    let timed: Vec<bool> = (0..c.layers.len()).map(|t| c.is_timed(&layout, t)).collect();
    assert_eq!(timed, vec![false, true, false, true, true, false]);
    // t = p(pi/4) equals rz(pi/4) up to a global phase (OpenQASM 3 stdgates.inc).
    assert!((c.layers[2][1].angle - std::f64::consts::FRAC_PI_4).abs() < 1e-12);
    assert!((c.layers[5][0].angle + std::f64::consts::PI / 8.0).abs() < 1e-12);
}

/// Every fixture here also parses with the reference parser; CI sets
/// SLACKMAP_REQUIRE_TOOLS so that a missing parser fails there instead of skipping.
#[test]
fn reference_parser_accepts_every_fixture() {
    let probe = Command::new("python3")
        .args(["-c", "import openqasm3; openqasm3.parse('OPENQASM 3;')"])
        .output();
    if !probe.map(|o| o.status.success()).unwrap_or(false) {
        assert!(
            std::env::var_os("SLACKMAP_REQUIRE_TOOLS").is_none(),
            "python3 module openqasm3[parser] is not installed, but SLACKMAP_REQUIRE_TOOLS is set"
        );
        println!("SKIPPED: python3 module openqasm3[parser] is not installed");
        return;
    }
    for f in fixtures() {
        let out = Command::new("python3")
            .args(["-c", "import sys, openqasm3; openqasm3.parse(open(sys.argv[1]).read())"])
            .arg(&f)
            .output()
            .unwrap();
        assert!(
            out.status.success(),
            "reference parser rejects {}: {}",
            f.display(),
            String::from_utf8_lossy(&out.stderr)
        );
    }
}
