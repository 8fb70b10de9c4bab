//! Chips whose two-qubit natives are not cz: `design` compiles its Clifford sequences to
//! the layout's own natives (ecr, iswap, several per coupler, one defined by its unitary),
//! `simulate` injects crosstalk, and `audit` finds it with each native as its own operation
//! kind. The compiled circuits are checked against the Clifford they implement with gate
//! matrices written out here from the trade's definitions, independent of the program's.

mod common;

use std::collections::{BTreeMap, HashMap};
use std::path::Path;

use common::slackmap;
use num_complex::Complex64 as C;

fn ok(dir: &Path, args: &[&str]) -> String {
    let out = slackmap().args(args).current_dir(dir).output().unwrap();
    assert!(out.status.success(), "{args:?}: {}", String::from_utf8_lossy(&out.stderr));
    String::from_utf8_lossy(&out.stdout).into_owned()
}

/// A 2x3 grid (q0 q1 q2 over q3 q4 q5) whose `[gates]` two-qubit part is `gates`.
fn layout(dir: &Path, gates: &str) {
    ok(dir, &["layout", "new", "grid", "2x3", "--out", "grid.toml"]);
    let text = std::fs::read_to_string(dir.join("grid.toml")).unwrap();
    let (head, tail) = text.split_once("two_qubit = \"cz\"\n").unwrap();
    std::fs::write(dir.join("chip.toml"), format!("{head}{gates}\n{tail}")).unwrap();
    ok(dir, &["layout", "check", "chip.toml"]);
}

/// `simulate` of the design in d/ under noise.toml on chip.toml, with `rest` (shots, seed,
/// outputs).
fn simulate(dir: &Path, rest: &[&str]) {
    let mut args = vec!["simulate", "--layout", "chip.toml", "--circuits", "d/circuits.json"];
    args.extend(["--noise", "noise.toml"]);
    args.extend_from_slice(rest);
    ok(dir, &args);
}

/// Design, simulate q4 disturbed by q1 (depolarizing 8e-3 per layer) with a two-qubit
/// intrinsic error on each of `natives`, and audit. Returns audit.json.
fn run(dir: &Path, natives: &[&str]) -> serde_json::Value {
    let mut noise = common::noise_with_context("q4", "q1", 8e-3);
    for n in natives {
        if noise.contains(&format!("[intrinsic.{n}]")) {
            continue;
        }
        noise.push_str(&format!("[intrinsic.{n}]\ndepolarizing = 1.0e-2\n"));
    }
    std::fs::write(dir.join("noise.toml"), noise).unwrap();
    ok(
        dir,
        &[
            "design",
            "--layout",
            "chip.toml",
            "--out",
            "d",
            "--depths",
            "1,4,16",
            "--sequences",
            "4",
        ],
    );
    simulate(dir, &["--shots", "500", "--seed", "2", "--out", "d/counts.csv"]);
    ok(
        dir,
        &[
            "audit",
            "--layout",
            "chip.toml",
            "--circuits",
            "d/circuits.json",
            "--counts",
            "d/counts.csv",
            "--replicates",
            "20",
            "--null-replicates",
            "20",
            "--out",
            "a",
        ],
    );
    let text = std::fs::read_to_string(dir.join("a/audit.json")).unwrap();
    serde_json::from_str(&text).unwrap()
}

/// The injected edge is the only one with a score, and it is acted on.
fn finds_only_the_injected_edge(audit: &serde_json::Value) {
    let edges = audit["edges"].as_array().unwrap();
    let flagged: Vec<String> = edges
        .iter()
        .filter(|e| e["score_tvd_per_layer"].as_f64().unwrap() > 0.0)
        .map(|e| format!("{}-{}", e["a"].as_str().unwrap(), e["b"].as_str().unwrap()))
        .collect();
    assert_eq!(flagged, ["q1-q4"], "{flagged:?}");
    let est = edges[0]["estimate_tvd_per_layer"].as_f64().unwrap();
    assert!(est > 2e-3, "estimate {est}");
}

/// The two-qubit operation kinds of the audit's intrinsic table, as `gate@a-b`.
fn two_qubit_kinds(audit: &serde_json::Value) -> Vec<String> {
    let text = serde_json::to_string(&audit["intrinsic"]).unwrap();
    let mut kinds: Vec<String> = text
        .split('"')
        .filter(|s| s.contains('@') && s.contains('-'))
        .map(str::to_string)
        .collect();
    kinds.sort();
    kinds.dedup();
    kinds
}

// ---- gate matrices, basis index = bit(first operand) + 2 * bit(second) ------------------

type M = Vec<Vec<C>>;

/// A repeated sequence's block across depths: (pattern, kind, sequence, block qubits).
type CycleKey = (String, String, String, Vec<String>);

fn c(re: f64, im: f64) -> C {
    C::new(re, im)
}

fn eye(n: usize) -> M {
    (0..n).map(|i| (0..n).map(|j| c(f64::from(u8::from(i == j)), 0.0)).collect()).collect()
}

fn mul(a: &M, b: &M) -> M {
    let n = a.len();
    (0..n).map(|i| (0..n).map(|j| (0..n).map(|k| a[i][k] * b[k][j]).sum()).collect()).collect()
}

/// A one-qubit gate (OpenQASM 3 stdgates.inc definitions: sx = (1/2)[[1+i, 1-i], [1-i, 1+i]],
/// rz(t) = diag(e^{-it/2}, e^{it/2})).
fn one(gate: &str, params: &[f64]) -> M {
    let h = 0.5;
    match gate {
        "id" => eye(2),
        "x" => vec![vec![c(0.0, 0.0), c(1.0, 0.0)], vec![c(1.0, 0.0), c(0.0, 0.0)]],
        "sx" => vec![vec![c(h, h), c(h, -h)], vec![c(h, -h), c(h, h)]],
        "rz" => {
            let t = params[0] / 2.0;
            vec![
                vec![C::from_polar(1.0, -t), c(0.0, 0.0)],
                vec![c(0.0, 0.0), C::from_polar(1.0, t)],
            ]
        }
        g => panic!("no test matrix for one-qubit gate {g}"),
    }
}

/// A two-qubit gate from the trade's definitions (common practice, from memory): cz =
/// diag(1, 1, 1, -1); iswap swaps |01> and |10> with a factor i; ecr = (IX - XY)/sqrt(2)
/// with the first operand the right-hand factor; zz_quarter = diag(1, i, i, 1) as the
/// layout file of the mixed test defines it.
fn two(gate: &str) -> M {
    let (o, l, i) = (c(0.0, 0.0), c(1.0, 0.0), c(0.0, 1.0));
    let r = std::f64::consts::FRAC_1_SQRT_2;
    match gate {
        "cz" => vec![vec![l, o, o, o], vec![o, l, o, o], vec![o, o, l, o], vec![o, o, o, -l]],
        "iswap" => vec![vec![l, o, o, o], vec![o, o, i, o], vec![o, i, o, o], vec![o, o, o, l]],
        "ecr" => vec![
            vec![o, l * r, o, i * r],
            vec![l * r, o, -i * r, o],
            vec![o, i * r, o, l * r],
            vec![-i * r, o, l * r, o],
        ],
        "zz_quarter" => {
            vec![vec![l, o, o, o], vec![o, i, o, o], vec![o, o, i, o], vec![o, o, o, l]]
        }
        g => panic!("no test matrix for two-qubit gate {g}"),
    }
}

/// The 4x4 matrix of a one-qubit gate on block position `pos`.
fn on(pos: usize, u: &M) -> M {
    let mut m = vec![vec![c(0.0, 0.0); 4]; 4];
    for (i, row) in m.iter_mut().enumerate() {
        for (j, v) in row.iter_mut().enumerate() {
            let other = (i >> (1 - pos)) & 1 == (j >> (1 - pos)) & 1;
            let (bi, bj) = ((i >> pos) & 1, (j >> pos) & 1);
            *v = if other { u[bi][bj] } else { c(0.0, 0.0) };
        }
    }
    m
}

/// Two blocks of a circuit: its measured qubits joined by its two-qubit gates.
fn blocks(circuit: &serde_json::Value) -> Vec<Vec<String>> {
    let ids = |v: &serde_json::Value| -> Vec<String> {
        v.as_array().unwrap().iter().map(|q| q.as_str().unwrap().to_string()).collect()
    };
    let mut out: Vec<Vec<String>> =
        ids(&circuit["measured"]).into_iter().map(|q| vec![q]).collect();
    for op in circuit["layers"].as_array().unwrap().iter().flat_map(|l| l.as_array().unwrap()) {
        let qs = ids(&op["qubits"]);
        if qs.len() == 2 {
            let a = out.iter().position(|b| b.contains(&qs[0])).unwrap();
            let b = out.iter().position(|b| b.contains(&qs[1])).unwrap();
            if a != b {
                let moved = out.remove(a.max(b));
                out[a.min(b)].extend(moved);
            }
        }
    }
    out
}

/// The unitary of a circuit restricted to one block (one or two qubits; index bit j = block[j]).
fn block_unitary(circuit: &serde_json::Value, block: &[String]) -> M {
    let dim = 1 << block.len();
    let mut u = eye(dim);
    for op in circuit["layers"].as_array().unwrap().iter().flat_map(|l| l.as_array().unwrap()) {
        let qs: Vec<&str> =
            op["qubits"].as_array().unwrap().iter().map(|q| q.as_str().unwrap()).collect();
        let Some(p0) = block.iter().position(|b| b == qs[0]) else { continue };
        let gate = op["gate"].as_str().unwrap();
        let params: Vec<f64> = op
            .get("params")
            .map(|p| p.as_array().unwrap().iter().map(|v| v.as_f64().unwrap()).collect())
            .unwrap_or_default();
        let g = if qs.len() == 2 {
            let g = two(gate);
            if p0 == 0 {
                g
            } else {
                // Operands in the other order: exchange the bits of every index.
                let s = |i: usize| ((i & 1) << 1) | (i >> 1);
                (0..4).map(|i| (0..4).map(|j| g[s(i)][s(j)]).collect()).collect()
            }
        } else if dim == 2 {
            one(gate, &params)
        } else {
            on(p0, &one(gate, &params))
        };
        u = mul(&g, &u);
    }
    u
}

/// True when `d` is diagonal and a product of one-qubit phases: what the Z frame changes
/// that designs drop before a Z measurement can leave.
fn is_product_phase(d: &M) -> bool {
    let n = d.len();
    let diagonal = (0..n).all(|i| (0..n).all(|j| i == j || d[i][j].norm() < 1e-9));
    let unit = (0..n).all(|i| (d[i][i].norm() - 1.0).abs() < 1e-9);
    let product = n == 2 || (d[0][0] * d[3][3] - d[1][1] * d[2][2]).norm() < 1e-9;
    diagonal && unit && product
}

fn dagger(a: &M) -> M {
    let n = a.len();
    (0..n).map(|i| (0..n).map(|j| a[j][i].conj()).collect()).collect()
}

/// Every randomized circuit implements X on the qubits whose ideal bit is 1 (up to phases
/// dropped before measurement), and every repeated circuit's blocks implement the same
/// unitary at every depth: their cycles are identities.
fn compiled_sequences_implement_their_cliffords(dir: &Path) -> (usize, usize) {
    let text = std::fs::read_to_string(dir.join("d/circuits.json")).unwrap();
    let doc: serde_json::Value = serde_json::from_str(&text).unwrap();
    let manifest = std::fs::read_to_string(dir.join("d/manifest.csv")).unwrap();
    let rows: HashMap<String, Vec<String>> = manifest
        .lines()
        .skip(1)
        .map(|l| {
            let f: Vec<String> = l.split(',').map(str::to_string).collect();
            (f[0].clone(), f)
        })
        .collect();
    let (mut randomized, mut repeated) = (0, 0);
    let mut cycles: BTreeMap<CycleKey, Vec<(usize, M)>> = BTreeMap::new();
    for circuit in doc["circuits"].as_array().unwrap() {
        let id = circuit["id"].as_str().unwrap();
        let row = &rows[id];
        let measured: Vec<&str> =
            circuit["measured"].as_array().unwrap().iter().map(|q| q.as_str().unwrap()).collect();
        for block in blocks(circuit) {
            let u = block_unitary(circuit, &block);
            match row[3].as_str() {
                "randomized" => {
                    let ideal: Vec<char> = row[7].chars().collect();
                    let mut x = 0usize;
                    for (j, q) in block.iter().enumerate() {
                        let bit = measured.iter().position(|m| m == q).unwrap();
                        if ideal[bit] == '1' {
                            x |= 1 << j;
                        }
                    }
                    // u = D X^x  <=>  u X^x = D.
                    let n = u.len();
                    let flip: M = (0..n)
                        .map(|i| (0..n).map(|j| c(f64::from(u8::from(i == j ^ x)), 0.0)).collect())
                        .collect();
                    assert!(is_product_phase(&mul(&u, &flip)), "{id} block {block:?}");
                    randomized += 1;
                }
                kind => {
                    let key = (row[1].clone(), kind.to_string(), row[5].clone(), block.clone());
                    cycles.entry(key).or_default().push((row[4].parse().unwrap(), u));
                }
            }
        }
    }
    for (key, mut runs) in cycles {
        runs.sort_by_key(|r| r.0);
        for w in runs.windows(2) {
            let d = mul(&w[1].1, &dagger(&w[0].1));
            assert!(is_product_phase(&d), "{key:?}: depth {} and {} differ", w[0].0, w[1].0);
            repeated += 1;
        }
    }
    (randomized, repeated)
}

#[test]
fn ecr_chip_design_simulate_audit() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    layout(dir, "two_qubit = \"ecr\"");
    let audit = run(dir, &["ecr"]);
    finds_only_the_injected_edge(&audit);
    let kinds = two_qubit_kinds(&audit);
    assert_eq!(kinds.len(), 7, "{kinds:?}");
    assert!(kinds.iter().all(|k| k.starts_with("ecr@")), "{kinds:?}");
    let (randomized, repeated) = compiled_sequences_implement_their_cliffords(dir);
    assert!(randomized > 300 && repeated > 50, "{randomized} {repeated}");
}

#[test]
fn iswap_chip_design_simulate_audit() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    layout(dir, "two_qubit = \"iswap\"");
    let audit = run(dir, &["iswap"]);
    finds_only_the_injected_edge(&audit);
    let kinds = two_qubit_kinds(&audit);
    assert_eq!(kinds.len(), 7, "{kinds:?}");
    assert!(kinds.iter().all(|k| k.starts_with("iswap@")), "{kinds:?}");
    let (randomized, repeated) = compiled_sequences_implement_their_cliffords(dir);
    assert!(randomized > 300 && repeated > 50, "{randomized} {repeated}");
}

/// cz and iswap on every coupler but two; ecr on q1-q2; on q4-q5 a gate defined by its
/// unitary beside a non-Clifford cp, which the design leaves out.
#[test]
fn several_natives_on_different_couplers() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    let gates = "two_qubit = [\"cz\", \"iswap\"]\n\n[[gates.coupler]]\nqubits = [\"q1\", \"q2\"]\n\
        two_qubit = \"ecr\"\n\n[[gates.coupler]]\nqubits = [\"q5\", \"q4\"]\n\
        two_qubit = [\"zz_quarter\", \"cp(pi/3)\"]\n\n[[gates.custom]]\nname = \"zz_quarter\"\n\
        unitary = [[1, 0, 0, 0], [0, [0, 1], 0, 0], [0, 0, [0, 1], 0], [0, 0, 0, 1]]";
    layout(dir, gates);
    let audit = run(dir, &["cz", "iswap", "ecr", "zz_quarter"]);
    finds_only_the_injected_edge(&audit);
    let kinds = two_qubit_kinds(&audit);
    let expected = [
        "cz@q0-q1",
        "cz@q0-q3",
        "cz@q1-q4",
        "cz@q2-q5",
        "cz@q3-q4",
        "ecr@q1-q2",
        "iswap@q0-q1",
        "iswap@q0-q3",
        "iswap@q1-q4",
        "iswap@q2-q5",
        "iswap@q3-q4",
        "zz_quarter@q4-q5",
    ];
    assert_eq!(kinds, expected);
    let (randomized, repeated) = compiled_sequences_implement_their_cliffords(dir);
    assert!(randomized > 300 && repeated > 50, "{randomized} {repeated}");
    // The circuits read back as OpenQASM 3 give the same audit input.
    let check = ok(
        dir,
        &["check", "--layout", "chip.toml", "--circuits", "d/qasm", "--counts", "d/counts.csv"],
    );
    assert!(check.contains("no problems found"), "{check}");
}

#[test]
fn non_clifford_natives_cannot_serve_a_clifford_design() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    layout(dir, "two_qubit = [\"cp(0.3)\", \"sqrt_iswap\"]");
    let out = slackmap()
        .args(["design", "--layout", "chip.toml", "--out", "d"])
        .current_dir(dir)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("cp(0.3) is not a Clifford gate")
            && err.contains("sqrt_iswap is not a Clifford gate")
            && err.contains("such as cz, cx, ecr or iswap"),
        "{err}"
    );
    assert!(!dir.join("d").exists());
}

fn fails(dir: &Path, args: &[&str]) -> String {
    let out = slackmap().args(args).current_dir(dir).output().unwrap();
    assert_eq!(out.status.code(), Some(2), "{args:?}: {}", String::from_utf8_lossy(&out.stdout));
    let err = String::from_utf8_lossy(&out.stderr).into_owned();
    assert!(!err.contains("panicked"), "{err}");
    err
}

/// A directed native (ecr, cx) runs from the first qubit of its `couplers` entry: the chip
/// calibrated that direction only. `design` runs it that way round, and a program that runs
/// it the other way is refused (the reversed gate is another operation) unless
/// `--allow-non-native`, which audits it as an operation kind of its own.
#[test]
fn directed_natives_run_the_way_the_layout_writes_their_coupler() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    layout(dir, "two_qubit = \"ecr\"");
    let text = std::fs::read_to_string(dir.join("chip.toml")).unwrap();
    let reversed = text.replace("[\"q1\", \"q2\"]", "[\"q2\", \"q1\"]");
    assert_ne!(reversed, text, "the generated layout changed; update this test");
    std::fs::write(dir.join("chip.toml"), &reversed).unwrap();
    ok(
        dir,
        &["design", "--layout", "chip.toml", "--out", "d", "--depths", "1,4", "--sequences", "2"],
    );
    // Every ecr on q1-q2 runs q2 -> q1; every other coupler runs from its lower qubit.
    let doc: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.join("d/circuits.json")).unwrap())
            .unwrap();
    let mut directions: BTreeMap<String, usize> = BTreeMap::new();
    for c in doc["circuits"].as_array().unwrap() {
        for op in c["layers"].as_array().unwrap().iter().flat_map(|l| l.as_array().unwrap()) {
            if op["gate"] == "ecr" {
                let q: Vec<&str> =
                    op["qubits"].as_array().unwrap().iter().map(|q| q.as_str().unwrap()).collect();
                *directions.entry(q.join("-")).or_default() += 1;
            }
        }
    }
    let keys: Vec<&str> = directions.keys().map(String::as_str).collect();
    assert_eq!(keys, ["q0-q1", "q0-q3", "q1-q4", "q2-q1", "q2-q5", "q3-q4", "q4-q5"]);
    // The sequences still implement their Cliffords with the gate run the other way round.
    let (randomized, repeated) = compiled_sequences_implement_their_cliffords(dir);
    assert!(randomized > 50 && repeated > 10, "{randomized} {repeated}");
    let out = ok(dir, &["check", "--layout", "chip.toml", "--circuits", "d/qasm"]);
    assert!(out.contains("circuits"), "{out}");

    // A program that runs ecr q1 -> q2 on that coupler is refused, naming both directions.
    std::fs::create_dir(dir.join("p")).unwrap();
    let program = "OPENQASM 3.0;\ninclude \"stdgates.inc\";\nbit[2] c;\necr $1, $2;\n\
                   c[0] = measure $1;\nc[1] = measure $2;\n";
    std::fs::write(dir.join("p/rev.qasm"), program).unwrap();
    let err = fails(dir, &["check", "--layout", "chip.toml", "--circuits", "p"]);
    assert!(
        err.contains("rev.qasm")
            && err.contains("ecr on q1-q2 runs against its coupler's direction")
            && err.contains("writes the coupler q2-q1")
            && err.contains("--allow-non-native"),
        "{err}"
    );
    // The calibrated way round passes; with --allow-non-native the reversed one is read.
    std::fs::write(dir.join("p/fwd.qasm"), program.replace("ecr $1, $2;", "ecr $2, $1;")).unwrap();
    std::fs::remove_file(dir.join("p/rev.qasm")).unwrap();
    ok(dir, &["check", "--layout", "chip.toml", "--circuits", "p"]);
    std::fs::write(dir.join("p/rev.qasm"), program).unwrap();
    ok(dir, &["check", "--layout", "chip.toml", "--circuits", "p", "--allow-non-native"]);

    // The same rule holds for circuits in slackmap's JSON format.
    let json = r#"{"schema": 1, "circuits": [{"id": "r", "measured": ["q1", "q2"], "layers": [[{"gate": "ecr", "qubits": ["q1", "q2"]}]]}]}"#;
    std::fs::write(dir.join("rev.json"), json).unwrap();
    let err = fails(dir, &["check", "--layout", "chip.toml", "--circuits", "rev.json"]);
    assert!(err.contains("circuit r: layer 0: ecr on q1-q2 runs against"), "{err}");

    // A coupler's own list may not name a directed gate in the other order than `couplers`.
    let own = reversed.replace(
        "two_qubit = \"ecr\"",
        "two_qubit = \"cz\"\n\n[[gates.coupler]]\nqubits = [\"q1\", \"q2\"]\ntwo_qubit = \"cx\"",
    );
    std::fs::write(dir.join("own.toml"), own).unwrap();
    let err = fails(dir, &["layout", "check", "own.toml"]);
    assert!(
        err.contains("own.toml line")
            && err.contains("[[gates.coupler]] q1-q2 lists the directed gate cx")
            && err.contains("writes this coupler q2-q1"),
        "{err}"
    );
}

/// The truth file lists, per coupler, only that coupler's own natives, a directed one in the
/// direction the layout runs it (the audit's kind label).
#[test]
fn truth_lists_each_couplers_own_natives() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    let gates = "two_qubit = [\"cz\", \"iswap\"]";
    layout(dir, gates);
    let text = std::fs::read_to_string(dir.join("chip.toml")).unwrap();
    let own =
        format!("{gates}\n\n[[gates.coupler]]\nqubits = [\"q2\", \"q1\"]\ntwo_qubit = \"ecr\"");
    let text = text.replace("[\"q1\", \"q2\"]", "[\"q2\", \"q1\"]").replace(gates, &own);
    std::fs::write(dir.join("chip.toml"), text).unwrap();
    ok(dir, &["layout", "check", "chip.toml"]);
    let noise = "schema = 1\n[intrinsic.ecr]\ndepolarizing = 1.0e-2\n[intrinsic.cx]\n\
                 depolarizing = 3.0e-2\n";
    std::fs::write(dir.join("noise.toml"), noise).unwrap();
    ok(
        dir,
        &["design", "--layout", "chip.toml", "--out", "d", "--depths", "1", "--sequences", "1"],
    );
    simulate(dir, &["--shots", "10", "--out", "counts.csv", "--truth", "truth.json"]);
    let truth: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.join("truth.json")).unwrap()).unwrap();
    let listed: BTreeMap<String, Vec<String>> = truth["couplers"]
        .as_array()
        .unwrap()
        .iter()
        .map(|c| {
            let kinds = c["intrinsic"].as_array().unwrap();
            let kinds = kinds.iter().map(|k| k["kind"].as_str().unwrap().to_string()).collect();
            (c["coupler"].as_str().unwrap().to_string(), kinds)
        })
        .collect();
    assert_eq!(listed["q1-q2"], ["ecr@q2-q1"]);
    assert_eq!(listed["q0-q1"], ["cz@q0-q1", "iswap@q0-q1"]);
    assert_eq!(listed.len(), 7);
    // cx has an error in the noise file but is no coupler's native: it is not listed.
    assert!(listed.values().flatten().all(|k| !k.starts_with("cx@")), "{listed:?}");
    let ecr =
        &truth["couplers"].as_array().unwrap().iter().find(|c| c["coupler"] == "q1-q2").unwrap()
            ["intrinsic"][0];
    assert!(ecr["error"]["infidelity"].as_f64().unwrap() > 0.0, "{ecr}");
}
