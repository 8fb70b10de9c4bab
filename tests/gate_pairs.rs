//! Gate-on-gate contexts from outside the library: the design's gate-pair and gate-qubit
//! circuits (which couplers and qubits run together, and in which layers), the standard
//! design left as it was, pattern counts by layout size, and the simulator's context term on
//! a two-qubit gate (it changes only circuits where victim and aggressor run together, and
//! the truth file states it by the published formulas).

mod common;

use std::collections::{BTreeMap, BTreeSet, HashMap};
use std::path::{Path, PathBuf};

use serde_json::Value;
use slackmap::design::{design, patterns, Context, DesignConfig, GateSelection, Kind};
use slackmap::layout::{read_layout, Layout};

fn grid4() -> PathBuf {
    common::layouts().join("grid-4x4.toml")
}

fn run(args: &[&str]) {
    let out = common::slackmap().args(args).output().unwrap();
    assert!(out.status.success(), "{args:?}: {}", String::from_utf8_lossy(&out.stderr));
}

fn p(path: &Path) -> String {
    path.to_string_lossy().to_string()
}

/// Runs `design` on the 4x4 grid into `out` (2 sequences unless `args` say otherwise).
fn design_4x4(out: &Path, args: &[&str]) {
    let (layout, out) = (p(&grid4()), p(out));
    let mut all = vec!["design", "--layout", &layout, "--sequences", "2", "--out", &out];
    all.extend_from_slice(args);
    run(&all);
}

/// One circuit of circuits.json: per layer, the gates as (name, qubit ids).
struct Circ {
    layers: Vec<Vec<(String, Vec<String>)>>,
}

impl Circ {
    /// Layers in which a two-qubit gate runs on the coupler {a, b}.
    fn gate_layers(&self, a: &str, b: &str) -> BTreeSet<usize> {
        (0..self.layers.len())
            .filter(|&t| {
                self.layers[t].iter().any(|(_, qs)| {
                    qs.len() == 2 && qs.iter().any(|q| q == a) && qs.iter().any(|q| q == b)
                })
            })
            .collect()
    }

    /// Layers in which qubit `q` is acted on by a timed, non-idle gate (`rz` is virtual on the
    /// shipped layouts).
    fn driven_layers(&self, q: &str) -> BTreeSet<usize> {
        (0..self.layers.len())
            .filter(|&t| {
                self.layers[t]
                    .iter()
                    .any(|(g, qs)| g != "id" && g != "rz" && qs.iter().any(|x| x == q))
            })
            .collect()
    }
}

fn read_circuits(path: &Path) -> Vec<(String, Circ)> {
    let v: Value = serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap();
    v["circuits"]
        .as_array()
        .unwrap()
        .iter()
        .map(|c| {
            let layers = c["layers"]
                .as_array()
                .unwrap()
                .iter()
                .map(|l| {
                    l.as_array()
                        .unwrap()
                        .iter()
                        .map(|op| {
                            let qs = op["qubits"].as_array().unwrap();
                            (
                                op["gate"].as_str().unwrap().to_string(),
                                qs.iter().map(|q| q.as_str().unwrap().to_string()).collect(),
                            )
                        })
                        .collect()
                })
                .collect();
            (c["id"].as_str().unwrap().to_string(), Circ { layers })
        })
        .collect()
}

/// Manifest rows: id -> (pattern, context, kind, depth, active blocks).
fn read_manifest(path: &Path) -> HashMap<String, (usize, String, String, usize, Vec<String>)> {
    let text = std::fs::read_to_string(path).unwrap();
    text.lines()
        .skip(1)
        .map(|l| {
            let f: Vec<&str> = l.split(',').collect();
            let blocks = f[6].split(';').filter(|b| !b.is_empty()).map(String::from).collect();
            (
                f[0].to_string(),
                (
                    f[1].parse().unwrap(),
                    f[2].to_string(),
                    f[3].to_string(),
                    f[4].parse().unwrap(),
                    blocks,
                ),
            )
        })
        .collect()
}

/// Counts per circuit: id -> outcome -> count.
fn read_counts(path: &Path) -> BTreeMap<String, BTreeMap<String, u64>> {
    let mut out: BTreeMap<String, BTreeMap<String, u64>> = BTreeMap::new();
    for l in std::fs::read_to_string(path).unwrap().lines().skip(1) {
        let f: Vec<&str> = l.split(',').collect();
        out.entry(f[0].to_string()).or_default().insert(f[1].to_string(), f[2].parse().unwrap());
    }
    out
}

/// Couplers by ids, and whether two qubits are joined by a coupler, from the layout file.
fn coupled(layout: &Layout, a: &str, b: &str) -> bool {
    match (layout.qubit(a), layout.qubit(b)) {
        (Some(x), Some(y)) => layout.coupler(x, y).is_some(),
        _ => false,
    }
}

fn ends(block: &str) -> Option<(String, String)> {
    block.split_once('-').map(|(a, b)| (a.to_string(), b.to_string()))
}

#[test]
fn gate_pair_design_covers_every_pair_in_shared_layers_and_passes_check() {
    let tmp = tempfile::tempdir().unwrap();
    let out = tmp.path().join("d");
    design_4x4(&out, &["--gate-pairs", "--depths", "2,8", "--kinds", "randomized", "--seed", "5"]);
    run(&["check", "--layout", &p(&grid4()), "--circuits", &p(&out.join("circuits.json"))]);
    let layout = read_layout(&grid4()).unwrap();
    let ids: Vec<String> = (0..layout.n_qubits()).map(|q| layout.id(q).to_string()).collect();
    let couplers: Vec<(String, String)> =
        layout.couplers.iter().map(|&(a, b)| (ids[a].clone(), ids[b].clone())).collect();
    // Expected units, from the layout's couplers alone.
    let mut want_pairs = BTreeSet::new();
    for (i, (a, b)) in couplers.iter().enumerate() {
        for (c, d) in &couplers[i + 1..] {
            let disjoint = ![a, b].contains(&c) && ![a, b].contains(&d);
            let joined = [a, b].iter().any(|x| [c, d].iter().any(|y| coupled(&layout, x, y)));
            if disjoint && joined {
                let (x, y) = (format!("{a}-{b}"), format!("{c}-{d}"));
                want_pairs.insert((x.clone().min(y.clone()), x.max(y)));
            }
        }
    }
    let mut want_beside = BTreeSet::new();
    for (a, b) in &couplers {
        for r in &ids {
            if r != a && r != b && (coupled(&layout, a, r) || coupled(&layout, b, r)) {
                want_beside.insert((format!("{a}-{b}"), r.clone()));
            }
        }
    }
    // 98 on the 4x4 grid: enumerated apart from slackmap, by a short script over its 24
    // couplers.
    assert_eq!(want_pairs.len(), 98);

    let manifest = read_manifest(&out.join("manifest.csv"));
    let circuits = read_circuits(&out.join("circuits.json"));
    let (mut pairs, mut beside) = (BTreeMap::new(), BTreeMap::new());
    let (mut shared, mut driven, mut gate_layers) = (0usize, 0usize, 0usize);
    for (id, c) in &circuits {
        let (pattern, context, _, depth, blocks) = &manifest[id];
        let near = |x: &str, y: &str| {
            let qx: Vec<String> = x.split('-').map(String::from).collect();
            let qy: Vec<String> = y.split('-').map(String::from).collect();
            qx.iter().any(|a| qy.iter().any(|b| coupled(&layout, a, b)))
        };
        for x in blocks {
            let partners: Vec<&String> = blocks.iter().filter(|y| *y != x && near(x, y)).collect();
            if context != "gate-pair" && context != "gate-qubit" {
                continue;
            }
            assert_eq!(partners.len(), 1, "{id} ({context}): {x} sees {partners:?}");
            let y = partners[0];
            match (context.as_str(), ends(x), ends(y)) {
                ("gate-pair", Some((a, b)), Some((e, f))) if x < y => {
                    pairs
                        .entry((x.clone(), y.clone()))
                        .or_insert_with(BTreeSet::new)
                        .insert(*pattern);
                    // The two gates run in the same layers: every main-sequence slot closes
                    // with both.
                    let both = c_both(c, &a, &b, &e, &f);
                    assert!(both >= *depth, "{id}: {x} and {y} share {both} gate layers");
                    shared += both;
                }
                ("gate-qubit", Some((a, b)), None) => {
                    beside
                        .entry((x.clone(), y.clone()))
                        .or_insert_with(BTreeSet::new)
                        .insert(*pattern);
                    let gates = c.gate_layers(&a, &b);
                    driven += gates.intersection(&c.driven_layers(y)).count();
                    gate_layers += gates.len();
                }
                _ => {}
            }
        }
    }
    // Every unit in exactly one pattern.
    assert_eq!(pairs.keys().cloned().collect::<BTreeSet<_>>(), want_pairs);
    assert!(pairs.values().all(|ps| ps.len() == 1));
    assert_eq!(beside.keys().cloned().collect::<BTreeSet<_>>(), want_beside);
    assert!(beside.values().all(|ps| ps.len() == 1));
    assert!(shared > 0);
    // The spectator's Clifford ends in the gate's layer unless it compiles to frame changes
    // only (4 of the 24 one-qubit Cliffords are diagonal), so most gate layers have it driven.
    let share = driven as f64 / gate_layers as f64;
    assert!(share > 0.6, "the qubit is driven in {driven} of {gate_layers} gate layers");
}

/// Layers in which both couplers run their gate.
fn c_both(c: &Circ, a: &str, b: &str, x: &str, y: &str) -> usize {
    c.gate_layers(a, b).intersection(&c.gate_layers(x, y)).count()
}

#[test]
fn the_standard_design_is_unchanged_by_the_gate_patterns() {
    let layout = read_layout(&grid4()).unwrap();
    let cfg = DesignConfig::new(vec![1, 4], 2, 11, Kind::ALL.to_vec()).unwrap();
    let standard = design(&layout, &cfg).unwrap();
    let with = design(&layout, &cfg.clone().with_gate_pairs(GateSelection::All)).unwrap();
    assert!(!standard
        .manifest
        .iter()
        .any(|r| matches!(r.context, Context::GatePair | Context::GateQubit)));
    // The standard patterns come first, unchanged.
    assert_eq!(with.patterns[..standard.patterns.len()], standard.patterns[..]);
    // Every standard circuit is in the larger design with the same gates, measured qubits
    // and manifest entry (ids aside: they number the circuits of the whole design).
    let key = |r: &slackmap::design::ManifestRow| (r.pattern, r.kind, r.depth, r.sequence);
    let index: HashMap<_, usize> =
        with.manifest.iter().enumerate().map(|(i, r)| (key(r), i)).collect();
    for (c, r) in standard.circuits.circuits.iter().zip(&standard.manifest) {
        let i = index[&key(r)];
        let (c2, r2) = (&with.circuits.circuits[i], &with.manifest[i]);
        assert_eq!((&c.layers, &c.measured), (&c2.layers, &c2.measured), "{}", c.id);
        assert_eq!(
            (r.context, &r.active_blocks, &r.ideal_outcome, &r.ideal_p1),
            (r2.context, &r2.active_blocks, &r2.ideal_outcome, &r2.ideal_p1)
        );
    }
    let extra = with.manifest.len() - standard.manifest.len();
    let per_pattern = standard.manifest.len() / standard.patterns.len();
    assert_eq!(extra, (with.patterns.len() - standard.patterns.len()) * per_pattern);
}

#[test]
fn pattern_counts_depend_on_degree_not_size() {
    let mut counts = Vec::new();
    for name in ["grid-4x4", "grid-12x12", "grid-32x32"] {
        let layout = read_layout(&common::layouts().join(format!("{name}.toml"))).unwrap();
        let standard = patterns::patterns(&layout);
        let gate = patterns::gate_patterns(&layout);
        let of = |c: Context| gate.iter().filter(|p| p.context == c).count();
        let (pairs, beside) = (of(Context::GatePair), of(Context::GateQubit));
        println!(
            "{name}: {} standard + {} gate-pair + {} gate-qubit = {} patterns (at least {} gate ones)",
            standard.len(),
            pairs,
            beside,
            standard.len() + gate.len(),
            patterns::min_gate_patterns(&layout)
        );
        assert!(patterns::min_gate_patterns(&layout) <= gate.len() as u64);
        counts.push((pairs, beside));
    }
    // 144 and 1,024 qubits of the same degree: 7 times the qubits, the same count within the
    // greedy colouring's play (DSatur does not promise the same colouring on both).
    let total = |c: (usize, usize)| (c.0 + c.1) as f64;
    assert!(total(counts[2]) <= 1.1 * total(counts[1]), "{counts:?}");
    // The small grid has fewer interior qubits, never more patterns.
    assert!(counts[0].0 <= counts[1].0 && counts[0].1 <= counts[1].1, "{counts:?}");
}

fn noise_with(extra: &str) -> String {
    format!("{}{extra}", common::BASE_NOISE)
}

#[test]
fn a_gate_context_term_changes_only_circuits_where_victim_and_aggressor_run_together() {
    let tmp = tempfile::tempdir().unwrap();
    let t = |n: &str| tmp.path().join(n);
    design_4x4(&t("d"), &["--gate-pairs", "--depths", "1,4", "--seed", "9"]);
    let circuits_path = t("d").join("circuits.json");
    let circuits = read_circuits(&circuits_path);
    let manifest = read_manifest(&t("d").join("manifest.csv"));
    std::fs::write(t("base.toml"), noise_with("")).unwrap();
    let simulate = |noise: &str, out: &str| {
        run(&[
            "simulate",
            "--layout",
            &p(&grid4()),
            "--circuits",
            &p(&circuits_path),
            "--noise",
            &p(&t(noise)),
            "--shots",
            "400",
            "--seed",
            "3",
            "--out",
            &p(&t(out)),
            "--truth",
            &p(&t(&format!("{out}.truth.json"))),
        ]);
        read_counts(&t(out))
    };
    let base = simulate("base.toml", "base.csv");
    // q5-q6 and q9-q10 are parallel couplers of the 4x4 grid joined by q5-q9 and q6-q10;
    // q7 is coupled to q6.
    for (aggressor, active_in) in [
        (
            "[\"q9\", \"q10\"]",
            Box::new(|c: &Circ| !c.gate_layers("q5", "q6").is_disjoint(&c.gate_layers("q9", "q10")))
                as Box<dyn Fn(&Circ) -> bool>,
        ),
        (
            "[\"q7\"]",
            Box::new(|c: &Circ| !c.gate_layers("q5", "q6").is_disjoint(&c.driven_layers("q7"))),
        ),
    ] {
        let term = format!(
            "[[gate_context]]\nvictim = [\"q5\", \"q6\"]\naggressor = {aggressor}\n\
             pauli = {{ ZZ = 0.04, ZI = 0.02 }}\n"
        );
        std::fs::write(t("gate.toml"), noise_with(&term)).unwrap();
        let counts = simulate("gate.toml", "gate.csv");
        let (mut together, mut changed, mut contexts) = (0, 0, BTreeSet::new());
        for (id, c) in &circuits {
            // Repeated-x circuits end on equatorial states read in Z: Z-type errors leave
            // their outcome distribution exactly as it was, so only randomized circuits are
            // counted (all of them must match when the layers do not coincide).
            if active_in(c) && manifest[id].2 == "randomized" {
                together += 1;
                if counts[id] != base[id] {
                    changed += 1;
                    contexts.insert(manifest[id].1.clone());
                }
            } else if !active_in(c) {
                assert_eq!(counts[id], base[id], "{id} ({}) has no such layer", manifest[id].1);
            }
        }
        assert!(together > 0 && changed * 10 >= together * 9, "{changed} of {together} changed");
        let want = if aggressor.contains("q9") { "gate-pair" } else { "gate-qubit" };
        assert!(contexts.contains(want), "{contexts:?}");
        // The truth file states the term: a Pauli channel's half-diamond distance and
        // entanglement infidelity are its total error probability (common practice), and
        // 1 - F_avg = d (1 - F_pro)/(d + 1), d = 4 (Nielsen, Phys. Lett. A 303, 249 (2002)).
        let truth: Value =
            serde_json::from_str(&std::fs::read_to_string(t("gate.csv.truth.json")).unwrap())
                .unwrap();
        let gp = truth["gate_pairs"].as_array().unwrap();
        assert_eq!(gp.len(), 1);
        assert_eq!(gp[0]["victim"], "q5-q6");
        assert_eq!(
            gp[0]["aggressor"],
            aggressor.replace(['[', ']', '"', ' '], "").replace(',', "-")
        );
        assert_eq!(gp[0]["neighbours"], true);
        let e = &gp[0]["error"];
        assert!((e["half_diamond"].as_f64().unwrap() - 0.06).abs() < 1e-12);
        assert!((e["infidelity"].as_f64().unwrap() - 0.06).abs() < 1e-12);
        assert!((gp[0]["average_infidelity"].as_f64().unwrap() - 0.048).abs() < 1e-12);
    }
    // Without gate_context terms the truth file has no gate_pairs entry at all.
    let base_truth = std::fs::read_to_string(t("base.csv.truth.json")).unwrap();
    assert!(!base_truth.contains("gate_pairs"));
}

#[test]
fn a_bad_gate_context_term_is_refused_with_file_and_line() {
    let tmp = tempfile::tempdir().unwrap();
    let t = |n: &str| tmp.path().join(n);
    design_4x4(&t("d"), &["--depths", "1"]);
    let term = "[[gate_context]]\nvictim = [\"q5\", \"q6\"]\naggressor = [\"q6\", \"q7\"]\n\
                depolarizing = 0.01\n";
    std::fs::write(t("noise.toml"), noise_with(term)).unwrap();
    let line = common::BASE_NOISE.lines().count() + 1;
    common::slackmap()
        .args(["simulate", "--layout", &p(&grid4()), "--circuits"])
        .arg(t("d").join("circuits.json"))
        .args(["--noise", &p(&t("noise.toml")), "--out", &p(&t("counts.csv"))])
        .assert()
        .code(2)
        .stderr(predicates::str::contains(format!("noise.toml line {line}")))
        .stderr(predicates::str::contains("shares qubit q6 with the victim q5-q6"));
    assert!(!t("counts.csv").exists() && !t("truth.json").exists());
}

#[test]
fn the_gate_term_acts_exactly_when_its_aggressor_runs_beside_the_gate() {
    use slackmap::circuit::{Circuit, Op};
    use slackmap::gate::Gate;
    use slackmap::simulate::{exact_block_distribution, Noise};
    // grid(3, 3): q0 q1 q2 / q3 q4 q5 / q6 q7 q8. Victim q0-q1, aggressors q3-q4 and q2.
    let layout = slackmap::layout::generate::grid(3, 3);
    let theta: f64 = 0.3;
    let text = format!(
        "schema = 1\n[[gate_context]]\nvictim = [\"q0\", \"q1\"]\naggressor = [\"q3\", \"q4\"]\n\
         rotation = {{ angle = {theta}, axis = \"XX\" }}\n[[gate_context]]\n\
         victim = [\"q1\", \"q0\"]\naggressor = [\"q2\"]\npauli = {{ XI = 0.25 }}\n"
    );
    let noise = Noise::from_toml_str(&text, Path::new("n.toml"), &layout).unwrap();
    let cz = |a, b| Op::two(Gate::Cz, a, b);
    let p11 = |layer: Vec<Op>| {
        let measured: Vec<usize> = (0..9).collect();
        let c = Circuit { id: "c".into(), layers: vec![layer], measured };
        let d = exact_block_distribution(&layout, &c, &[0, 1], &noise, &[]).unwrap();
        (d[1], d[2], d[3])
    };
    // Alone: cz|00> = |00>.
    assert_eq!(p11(vec![cz(0, 1)]), (0.0, 0.0, 0.0));
    // Beside cz on q3-q4: exp(-i theta/2 XX)|00> = cos|00> - i sin|11>, so P(11) =
    // sin^2(theta/2) (closed form of a Pauli rotation).
    let (p10, p01, p11_) = p11(vec![cz(0, 1), cz(4, 3)]);
    assert!(p10.abs() < 1e-15 && p01.abs() < 1e-15);
    assert!((p11_ - (theta / 2.0).sin().powi(2)).abs() < 1e-12);
    // q3, q4 driven by one-qubit gates is not the coupler running its gate.
    let sx = |q| Op::one(Gate::Sx, q);
    assert_eq!(p11(vec![cz(0, 1), sx(3), sx(4)]).2, 0.0);
    // Beside a driven q2: X on the first listed victim qubit (q1) with probability 1/4;
    // an idle or virtual q2 is no aggressor.
    let (_, p_q1, _) = p11(vec![cz(0, 1), sx(2)]);
    assert!((p_q1 - 0.25).abs() < 1e-12, "{p_q1}");
    assert_eq!(p11(vec![cz(0, 1), Op::one(Gate::Id, 2)]).1, 0.0);
    assert_eq!(p11(vec![cz(0, 1), Op::rot(Gate::Rz, 2, 0.5)]).1, 0.0);
}
