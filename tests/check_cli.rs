//! `slackmap check` from the outside: every bad circuit fixture is refused with exit code
//! 2 and a message naming the file (and, for OpenQASM parse errors, the line); good inputs
//! pass; good OpenQASM fixtures and exported programs parse with the reference parser
//! when it is installed.

use std::path::Path;
use std::process::Command;

use assert_cmd::cargo::CommandCargoExt;

const LAYOUT: &str = "tests/fixtures/good/layout.toml";

fn check(args: &[&str]) -> std::process::Output {
    Command::cargo_bin("slackmap")
        .expect("binary builds")
        .args(["check", "--layout", LAYOUT])
        .args(args)
        .output()
        .expect("binary runs")
}

/// Runs `check` on every fixture of `table` whose name starts with `prefix`, with the extra
/// arguments `args(path)`, and asserts exit code 2, a message naming the file and holding the
/// listed fragment, and no panic. Returns how many fixtures ran.
fn refuses_all(table: &str, prefix: &str, args: impl Fn(&str) -> Vec<String>) -> usize {
    let text = std::fs::read_to_string(format!("tests/fixtures/bad/{table}")).unwrap();
    let mut n = 0;
    for line in text.lines().filter(|l| !l.starts_with('#') && !l.trim().is_empty()) {
        let (file, fragment) = line.split_once('\t').expect("file<TAB>fragment");
        if !file.starts_with(prefix) {
            continue;
        }
        let path = format!("tests/fixtures/bad/{file}");
        assert!(Path::new(&path).exists(), "{path} is listed but missing");
        let a = args(&path);
        let out = check(&a.iter().map(String::as_str).collect::<Vec<_>>());
        let stderr = String::from_utf8_lossy(&out.stderr);
        assert_eq!(out.status.code(), Some(2), "{file}: {stderr}");
        assert!(!stderr.contains("panicked"), "{file}: {stderr}");
        assert!(stderr.contains(&path), "{file}: message does not name the file: {stderr}");
        assert!(stderr.contains(fragment), "{file}: expected '{fragment}' in: {stderr}");
        n += 1;
    }
    // Every fixture on disk is listed, so none is silently skipped.
    for e in std::fs::read_dir("tests/fixtures/bad").unwrap() {
        let name = e.unwrap().file_name().to_string_lossy().into_owned();
        if name.starts_with(prefix) {
            assert!(text.lines().any(|l| l.split('\t').next() == Some(&name)), "{name} unlisted");
        }
    }
    n
}

#[test]
fn bad_circuit_fixtures_are_refused_with_file_and_reason() {
    let n =
        refuses_all("expect-circuits.tsv", "circuits-", |p| vec!["--circuits".into(), p.into()]);
    assert!(n >= 20, "only {n} bad circuit fixtures");
}

#[test]
fn bad_counts_fixtures_are_refused_through_the_binary() {
    let n = refuses_all("expect-layout-counts.tsv", "counts-", |p| {
        vec![
            "--circuits".into(),
            "tests/fixtures/good/circuits.json".into(),
            "--counts".into(),
            p.into(),
        ]
    });
    assert!(n >= 20, "only {n} bad counts fixtures");
}

#[test]
fn good_inputs_pass_and_summarise() {
    for counts in ["tests/fixtures/good/counts.csv", "tests/fixtures/good/counts.json"] {
        let out = check(&["--circuits", "tests/fixtures/good/circuits.json", "--counts", counts]);
        let stdout = String::from_utf8_lossy(&out.stdout);
        assert_eq!(out.status.code(), Some(0), "{}", String::from_utf8_lossy(&out.stderr));
        // 4 circuits; 1000 shots each (fixture counts sum to 1000 per circuit).
        assert!(stdout.contains("┆ 4 "), "{stdout}");
        assert!(stdout.contains("1000 / 1000 / 1000"), "{stdout}");
        assert!(stdout.contains("q1 <- q4"), "pair never a context is listed: {stdout}");
    }
    let out = check(&[
        "--circuits",
        "tests/fixtures/qasm",
        "--qubit-map",
        "q[0]=q1,q[1]=q4",
        "--bit-order",
        "reversed",
    ]);
    assert_eq!(out.status.code(), Some(0), "{}", String::from_utf8_lossy(&out.stderr));
    assert!(String::from_utf8_lossy(&out.stdout).contains("┆ 3 "));
}

#[test]
fn qubit_map_file_and_bad_map() {
    let dir = tempfile::tempdir().unwrap();
    let map = dir.path().join("map.txt");
    std::fs::write(&map, "# placement\nq[0] = q1\nq[1] = q4\n").unwrap();
    let out = check(&[
        "--circuits",
        "tests/fixtures/qasm/registers.qasm",
        "--qubit-map",
        map.to_str().unwrap(),
    ]);
    assert_eq!(out.status.code(), Some(0), "{}", String::from_utf8_lossy(&out.stderr));
    std::fs::write(&map, "q[0] = q1\nq[1] q4\n").unwrap();
    let out = check(&[
        "--circuits",
        "tests/fixtures/qasm/registers.qasm",
        "--qubit-map",
        map.to_str().unwrap(),
    ]);
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(2));
    assert!(stderr.contains("map.txt line 2"), "{stderr}");
    let out = check(&[
        "--circuits",
        "tests/fixtures/qasm/registers.qasm",
        "--qubit-map",
        "q[0]=q1,q[1]=q5",
    ]);
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(2));
    assert!(stderr.contains("cz on q1-q5 but that pair is not a coupler"), "{stderr}");
    let out = check(&[
        "--circuits",
        "tests/fixtures/qasm/registers.qasm",
        "--qubit-map",
        "q[0]=q1,q[1]q5",
    ]);
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(2));
    assert!(stderr.contains("--qubit-map: qubit map entry 'q[1]q5'"), "{stderr}");
}

/// Parses files with the reference OpenQASM 3 parser (PyPI `openqasm3[parser]`);
/// `None` when it is not installed.
fn reference_parse(files: &[&Path]) -> Option<Vec<(String, bool, String)>> {
    let probe = Command::new("python3")
        .args(["-c", "import openqasm3; openqasm3.parse('OPENQASM 3;')"])
        .output();
    if !probe.map(|o| o.status.success()).unwrap_or(false) {
        return None;
    }
    Some(
        files
            .iter()
            .map(|f| {
                let out = Command::new("python3")
                    .args([
                        "-c",
                        "import sys, openqasm3; openqasm3.parse(open(sys.argv[1]).read())",
                    ])
                    .arg(f)
                    .output()
                    .expect("python3 runs");
                (
                    f.display().to_string(),
                    out.status.success(),
                    String::from_utf8_lossy(&out.stderr).into_owned(),
                )
            })
            .collect(),
    )
}

#[test]
fn good_qasm_and_exports_parse_with_the_reference_parser() {
    use slackmap::circuit::{qasm, Circuit, Op};
    use slackmap::gate::Gate;
    let layout = slackmap::layout::generate::grid(2, 3);
    let c = Circuit {
        id: "x".into(),
        layers: vec![
            vec![Op::one(Gate::Sx, 0), Op::rot(Gate::Rz, 2, -0.25)],
            vec![Op::two(Gate::Cz, 0, 1)],
            vec![Op::rot(Gate::Rz, 1, 3.0)],
        ],
        measured: vec![1, 0, 2],
    };
    let dir = tempfile::tempdir().unwrap();
    let exported = dir.path().join("export.qasm");
    std::fs::write(&exported, qasm::export(&c, &layout)).unwrap();
    let mut files: Vec<std::path::PathBuf> =
        std::fs::read_dir("tests/fixtures/qasm").unwrap().map(|e| e.unwrap().path()).collect();
    files.sort();
    files.push(exported);
    let refs: Vec<&Path> = files.iter().map(|p| p.as_path()).collect();
    match reference_parse(&refs) {
        None => skipped("python3 module openqasm3[parser] is not installed"),
        Some(results) => {
            for (f, ok, err) in results {
                assert!(ok, "reference parser rejects {f}: {err}");
            }
        }
    }
}

/// Reports a test that cannot run here; CI sets SLACKMAP_REQUIRE_TOOLS so that it fails there.
fn skipped(what: &str) {
    assert!(
        std::env::var_os("SLACKMAP_REQUIRE_TOOLS").is_none(),
        "{what}, but SLACKMAP_REQUIRE_TOOLS is set: .ci/run should have installed it"
    );
    println!("SKIPPED: {what}");
}

/// `check` shows where `$k` lands, and warns when a layout of `q<k>` ids lists them out of
/// order (then `$0` is not `q0`).
#[test]
fn placement_is_shown_and_out_of_order_ids_warned() {
    let text = std::fs::read_to_string(LAYOUT).unwrap();
    let swapped = text.replace(
        "{ id = \"q0\", position = [0.0, 0.0] },\n  { id = \"q1\", position = [1.0, 0.0] },",
        "{ id = \"q1\", position = [1.0, 0.0] },\n  { id = \"q0\", position = [0.0, 0.0] },",
    );
    assert_ne!(swapped, text, "the fixture layout changed; update this test");
    let dir = tempfile::tempdir().unwrap();
    let layout = dir.path().join("layout.toml");
    std::fs::write(&layout, swapped).unwrap();
    let qasm = "tests/fixtures/qasm/ref-q0.qasm";
    let run = |layout: &Path| {
        let out = Command::cargo_bin("slackmap")
            .unwrap()
            .args(["check", "--layout", layout.to_str().unwrap(), "--circuits", qasm])
            .output()
            .unwrap();
        assert_eq!(out.status.code(), Some(0));
        String::from_utf8_lossy(&out.stdout).into_owned()
    };
    let out = run(&layout);
    assert!(out.contains("$0=q1, $1=q0, $2=q2"), "{out}");
    assert!(out.contains("lists its qubits out of order: $0"), "{out}");
    let out = run(Path::new(LAYOUT));
    assert!(out.contains("$0=q0, $1=q1"), "{out}");
    assert!(!out.contains("out of order"), "{out}");
}

/// `delay[...]` is an explicit idle in its layer: `check` shows where each one sits and its
/// duration as written, and says that durations are not modelled.
#[test]
fn delays_are_listed_with_their_durations_and_not_modelled() {
    let dir = tempfile::tempdir().unwrap();
    let a = "OPENQASM 3.0;\ninclude \"stdgates.inc\";\nbit[3] c;\nsx $0;\ndelay[100ns] $1;\n\
             barrier;\ndelay[1.5us] $0, $1;\nsx $2;\nbarrier;\nc[0] = measure $0;\n\
             c[1] = measure $1;\nc[2] = measure $2;\n";
    let b = "OPENQASM 3.0;\nbit c;\nx $0;\ndelay[2dt] $0;\nx $0;\nc = measure $0;\n";
    std::fs::write(dir.path().join("a.qasm"), a).unwrap();
    std::fs::write(dir.path().join("b.qasm"), b).unwrap();
    let out = check(&["--circuits", dir.path().to_str().unwrap()]);
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert_eq!(out.status.code(), Some(0), "{}", String::from_utf8_lossy(&out.stderr));
    // a: layer 0 holds sx q0 and q1's 100ns idle, layer 1 both 1.5us idles and sx q2; b: the
    // delay sits between the two x gates, in layer 1.
    assert!(stdout.contains("delays (read as idle layers; durations recorded, not modelled)"));
    assert!(
        stdout.contains(
            "4 in 2 circuit(s); durations 100ns x1, 1.5us x2, 2dt x1; a: q1 layer 0 (100ns), \
             a: q0 layer 1 (1.5us), a: q1 layer 1 (1.5us), b: q0 layer 1 (2dt)"
        ),
        "{stdout}"
    );
    assert!(stdout.contains("warning: the circuits hold 4 delay(s) in 2 circuit(s)"), "{stdout}");
    assert!(stdout.contains("(100ns, 1.5us, 2dt) are not modelled"), "{stdout}");
    // Without delays the row is absent.
    let out = check(&["--circuits", "tests/fixtures/good/circuits.json"]);
    assert!(!String::from_utf8_lossy(&out.stdout).contains("delays"));
    // In slackmap's JSON format a delay names an explicit idle of its qubit.
    let json = |layer: usize| {
        format!(
            r#"{{"schema": 1, "circuits": [{{"id": "d", "measured": ["q0"], "layers": [[{{"gate": "x", "qubits": ["q0"]}}], [{{"gate": "id", "qubits": ["q0"]}}]], "delays": [{{"qubit": "q0", "layer": {layer}, "duration": "40ns"}}]}}]}}"#
        )
    };
    let path = dir.path().join("d.json");
    std::fs::write(&path, json(1)).unwrap();
    let out = check(&["--circuits", path.to_str().unwrap()]);
    assert_eq!(out.status.code(), Some(0), "{}", String::from_utf8_lossy(&out.stderr));
    assert!(String::from_utf8_lossy(&out.stdout).contains("1 in 1 circuit(s); durations 40ns x1"));
    std::fs::write(&path, json(0)).unwrap();
    let out = check(&["--circuits", path.to_str().unwrap()]);
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(2));
    assert!(
        stderr.contains("d.json")
            && stderr.contains("delay[40ns] on q0 names layer 0, which has no explicit idle"),
        "{stderr}"
    );
}
