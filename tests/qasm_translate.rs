//! The rest of OpenQASM 3 as real programs use it: stdgates.inc gates read as the native
//! they equal up to a global phase, `gate` definitions expanded, `delay` as an explicit
//! idle, `reset` before the first gate, whole-register measurement into several bit
//! registers. The measured order is checked against the reference parser
//! `openqasm3[parser]` (PyPI) on every fixture.

mod common;

use std::path::{Path, PathBuf};
use std::process::Command;

use slackmap::circuit::qasm::{self, QubitMap};
use slackmap::gate::Gate;
use slackmap::layout::read_layout;

const FIXTURE_DIRS: [&str; 3] =
    ["tests/fixtures/qasm-compiler", "tests/fixtures/qasm", "tests/fixtures/qasm-translate"];

fn layout() -> slackmap::layout::Layout {
    read_layout(&common::good("layout.toml")).unwrap()
}

fn fixtures() -> Vec<PathBuf> {
    let mut v: Vec<PathBuf> = FIXTURE_DIRS
        .iter()
        .flat_map(|d| std::fs::read_dir(d).unwrap().map(|e| e.unwrap().path()))
        .filter(|p| p.extension().is_some_and(|e| e == "qasm"))
        .collect();
    v.sort();
    v
}

/// The qubit map a fixture names in its comments (`--qubit-map ...`), if any.
fn map_of(text: &str) -> Option<String> {
    let at = text.find("--qubit-map ")?;
    Some(text[at + 12..].split_whitespace().next()?.to_string())
}

fn import(path: &Path) -> slackmap::circuit::Circuit {
    let text = std::fs::read_to_string(path).unwrap();
    let map = map_of(&text).map(|m| QubitMap::parse(&m.replace(',', "\n")).unwrap());
    let stem = path.file_stem().unwrap().to_string_lossy().into_owned();
    qasm::import(&text, path, &stem, &layout(), map.as_ref())
        .unwrap_or_else(|e| panic!("{}: {e}", path.display()))
}

/// The reference parser's reading of a program's bit registers and measurements, one
/// line each: `bit NAME SIZE`, `qubit NAME SIZE`, `measure BITREG INDEX|* QUBIT INDEX|*`.
const READER: &str = r#"
import sys, openqasm3, openqasm3.ast as ast
p = openqasm3.parse(open(sys.argv[1]).read())
def size(t):
    return t.size.value if getattr(t, 'size', None) is not None else 1
def ref(x):
    if isinstance(x, ast.IndexedIdentifier):
        return x.name.name, str(x.indices[0][0].value)
    return x.name, '*'
for s in p.statements:
    if isinstance(s, ast.ClassicalDeclaration) and isinstance(s.type, ast.BitType):
        print('bit', s.identifier.name, size(s.type))
    elif isinstance(s, ast.QubitDeclaration):
        print('qubit', s.qubit.name, s.size.value if s.size is not None else 1)
    elif isinstance(s, ast.QuantumMeasurementStatement):
        b, i = ref(s.target)
        q, j = ref(s.measure.qubit)
        print('measure', b, i, q, j)
"#;

fn reference_parser() -> bool {
    let probe = Command::new("python3")
        .args(["-c", "import openqasm3; openqasm3.parse('OPENQASM 3;')"])
        .output();
    if probe.map(|o| o.status.success()).unwrap_or(false) {
        return true;
    }
    assert!(
        std::env::var_os("SLACKMAP_REQUIRE_TOOLS").is_none(),
        "python3 module openqasm3[parser] is not installed, but SLACKMAP_REQUIRE_TOOLS is set"
    );
    println!("SKIPPED: python3 module openqasm3[parser] is not installed");
    false
}

/// Bits in register declaration order, then index (the documented order): the measured
/// qubits the reference parser's statements give must be the circuit's measured list.
#[test]
fn measured_order_matches_the_reference_parser() {
    if !reference_parser() {
        return;
    }
    let l = layout();
    for f in fixtures() {
        let out = Command::new("python3").args(["-c", READER]).arg(&f).output().unwrap();
        assert!(out.status.success(), "{}: {}", f.display(), String::from_utf8_lossy(&out.stderr));
        let text = std::fs::read_to_string(&f).unwrap();
        let map = map_of(&text).map(|m| QubitMap::parse(&m.replace(',', "\n")).unwrap());
        let mut bits: Vec<(String, usize)> = Vec::new();
        let mut qubits: Vec<(String, usize)> = Vec::new();
        let mut measured: Vec<((usize, usize), usize)> = Vec::new();
        let qubit = |name: &str, i: usize| -> usize {
            match name.strip_prefix('$') {
                Some(k) => k.parse().unwrap(),
                None => l.qubit(map.as_ref().unwrap().get(name, i).unwrap()).unwrap(),
            }
        };
        for line in String::from_utf8_lossy(&out.stdout).lines() {
            let w: Vec<&str> = line.split(' ').collect();
            match w[0] {
                "bit" => bits.push((w[1].to_string(), w[2].parse().unwrap())),
                "qubit" => qubits.push((w[1].to_string(), w[2].parse().unwrap())),
                _ => {
                    let reg = bits.iter().position(|b| b.0 == w[1]).unwrap();
                    if w[2] == "*" {
                        for i in 0..bits[reg].1 {
                            measured.push(((reg, i), qubit(w[3], i)));
                        }
                    } else {
                        let j = if w[4] == "*" { 0 } else { w[4].parse().unwrap() };
                        measured.push(((reg, w[2].parse().unwrap()), qubit(w[3], j)));
                    }
                }
            }
        }
        measured.sort();
        let want: Vec<usize> = measured.iter().map(|m| m.1).collect();
        assert_eq!(import(&f).measured, want, "{}", f.display());
    }
}

/// stdgates.qasm on the fixture layout (one-qubit natives sx, x, rz; cz on every coupler).
#[test]
fn stdgates_and_definitions_read_as_natives() {
    let c = import(Path::new("tests/fixtures/qasm-compiler/stdgates.qasm"));
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
    // OpenQASM 3 specification, stdgates.inc: U(pi/2, -pi/2, pi/2) = rx(pi/2) and
    // u3(pi, 0, pi) = x up to phase; sx = rx(pi/2) up to phase; cphase(pi) = cz; p = rz up
    // to phase. The delay is an explicit idle; frame_sx and entangle are expanded.
    let want: Vec<Vec<&str>> = vec![
        vec!["sx $0", "x $1", "id $2"],
        vec!["rz $2"],
        vec!["cz $1,$0", "sx $2"],
        vec!["rz $2"],
        vec!["rz $0", "rz $2"],
        vec!["cz $2,$5"],
    ];
    assert_eq!(shown, want);
    assert_eq!(c.measured, vec![0, 1, 5, 2]);
    let rz: Vec<f64> =
        c.layers.iter().flatten().filter(|o| o.gate == Gate::Rz).map(|o| o.angle).collect();
    let q = std::f64::consts::FRAC_PI_2;
    assert_eq!(rz.len(), 4);
    for (got, want) in rz.iter().zip([-q, q, q / 2.0, q / 4.0]) {
        assert!((got - want).abs() < 1e-12, "{rz:?}");
    }
}

#[test]
fn check_reads_whole_registers_with_a_qubit_map() {
    let out = common::slackmap()
        .args(["check", "--layout", common::good("layout.toml").to_str().unwrap()])
        .args(["--circuits", "tests/fixtures/qasm-translate/registers.qasm"])
        .args(["--qubit-map", "q[0]=q1,q[1]=q4,r[0]=q2"])
        .output()
        .unwrap();
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(0), "{stderr}");
    let c = import(Path::new("tests/fixtures/qasm-translate/registers.qasm"));
    // c (q[0], q[1]) before e (r), as the bit registers are declared.
    assert_eq!(c.measured, vec![1, 4, 2]);
    assert_eq!(c.layers[0].iter().map(|o| o.gate).collect::<Vec<_>>(), [Gate::Sx, Gate::Id]);
}

/// A gate no native equals in one layer is refused through the binary with file and line.
#[test]
fn a_gate_without_a_native_equal_is_refused_with_its_line() {
    let dir = tempfile::tempdir().unwrap();
    let f = dir.path().join("cy.qasm");
    std::fs::write(
        &f,
        "OPENQASM 3.0;\ninclude \"stdgates.inc\";\nbit[2] c;\ncy $0, $1;\nc[0] = measure $0;\nc[1] = measure $1;\n",
    )
    .unwrap();
    let out = common::slackmap()
        .args(["check", "--layout", common::good("layout.toml").to_str().unwrap()])
        .args(["--circuits", f.to_str().unwrap()])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    let m = String::from_utf8_lossy(&out.stderr);
    assert!(
        m.contains("cy.qasm line 4")
            && m.contains("cy on q0-q1 equals no native gate")
            && m.contains("native there: cz"),
        "{m}"
    );
}
