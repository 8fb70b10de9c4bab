//! `slackmap hints` from the outside: conflicts from flagged edges, parallel groups that are
//! valid schedules, and layer counts that graph theory fixes for the bare layouts.

mod common;

use std::collections::HashSet;
use std::path::Path;

use serde::Deserialize;
use slackmap::hints::{self, FlagLevel};
use slackmap::layout::generate::{grid, ring};
use slackmap::report::Verdict;

use common::{run_slackmap, write_audit, AuditBuilder, FIXTURES};

/// Test-only view of hints.json.
#[derive(Deserialize)]
struct HintsFile {
    schema: u32,
    flagged_level: String,
    flagged: Vec<Flagged>,
    operations: Vec<Op>,
    conflicts: Vec<ConflictRow>,
    coupler_groups: Vec<Vec<String>>,
    qubit_groups: Vec<Vec<String>>,
    largest_coupler_set: Vec<String>,
    with_conflicts: Figures,
    without_conflicts: Figures,
}

#[derive(Deserialize)]
struct Flagged {
    victim: String,
    aggressor: String,
}

#[derive(Deserialize)]
struct Op {
    id: String,
    qubits: Vec<String>,
}

#[derive(Deserialize)]
struct ConflictRow {
    a: String,
    b: String,
    because: Vec<String>,
}

#[derive(Deserialize)]
struct Figures {
    largest_coupler_set: Fig,
    layers_for_all_couplers: Fig,
    layers_for_all_qubits: Fig,
}

#[derive(Deserialize)]
struct Fig {
    value: usize,
    bound: usize,
    exact: bool,
}

fn run_hints(args: &[&str]) -> (HintsFile, tempfile::TempDir) {
    let tmp = tempfile::tempdir().unwrap();
    let out = tmp.path().join("h");
    let mut all = vec!["hints"];
    all.extend_from_slice(args);
    all.extend_from_slice(&["--out", out.to_str().unwrap()]);
    let o = run_slackmap(&all);
    assert!(o.status.success(), "stderr: {}", String::from_utf8_lossy(&o.stderr));
    let text = std::fs::read_to_string(out.join("hints.json")).expect("hints.json written");
    (serde_json::from_str(&text).expect("hints.json parses"), tmp)
}

/// Every coupler once, no group sharing a qubit or holding a conflicting pair.
fn assert_valid_groups(h: &HintsFile, n_couplers: usize) {
    let qubits_of =
        |id: &str| h.operations.iter().find(|o| o.id == id).expect("known op").qubits.clone();
    let conflicting: HashSet<(String, String)> = h
        .conflicts
        .iter()
        .flat_map(|c| [(c.a.clone(), c.b.clone()), (c.b.clone(), c.a.clone())])
        .collect();
    let mut seen = HashSet::new();
    for g in &h.coupler_groups {
        let mut used = HashSet::new();
        for (i, c) in g.iter().enumerate() {
            assert!(seen.insert(c.clone()), "{c} in two groups");
            for q in qubits_of(c) {
                assert!(used.insert(q.clone()), "group {g:?} uses {q} twice");
            }
            for d in &g[i + 1..] {
                assert!(!conflicting.contains(&(c.clone(), d.clone())), "{c} and {d} conflict");
            }
        }
    }
    assert_eq!(seen.len(), n_couplers);
    for g in &h.qubit_groups {
        for (i, a) in g.iter().enumerate() {
            for b in &g[i + 1..] {
                assert!(!conflicting.contains(&(a.clone(), b.clone())), "{a} and {b} conflict");
            }
        }
    }
}

#[test]
fn the_fixture_grid_gets_valid_groups_and_konig_layers() {
    let path = Path::new(FIXTURES).join("before.json");
    let (h, tmp) = run_hints(&[path.to_str().unwrap()]);
    assert_eq!(h.schema, 1);
    assert_eq!(h.flagged_level, "watch");
    // Konig (1916; Diestel, Graph Theory, Prop. 5.3.1): a bipartite grid's couplers need
    // exactly max-degree = 4 layers; a 4x4 grid has a perfect matching of 8 couplers.
    let bare = &h.without_conflicts;
    assert_eq!((bare.layers_for_all_couplers.value, bare.layers_for_all_couplers.exact), (4, true));
    assert_eq!((bare.largest_coupler_set.value, bare.largest_coupler_set.exact), (8, true));
    assert_eq!(bare.layers_for_all_qubits.value, 1);
    // Three flagged edges, one direction each (the other direction scores zero).
    let mut flagged: Vec<(String, String)> =
        h.flagged.iter().map(|f| (f.victim.clone(), f.aggressor.clone())).collect();
    flagged.sort();
    assert_eq!(
        flagged,
        [("q1", "q2"), ("q6", "q5"), ("q9", "q10")].map(|(v, a)| (v.to_string(), a.to_string()))
    );
    // q6 <- q5: the one-qubit gates on q5 and q6 conflict, and the couplers q4-q5 / q6-q7.
    let has = |a: &str, b: &str| {
        h.conflicts.iter().any(|c| (c.a == a && c.b == b) || (c.a == b && c.b == a))
    };
    assert!(has("q5", "q6"));
    assert!(has("q4-q5", "q6-q7"));
    assert!(h.conflicts.iter().any(|c| c.because == ["q6<-q5"]));
    let with = &h.with_conflicts;
    assert!(with.layers_for_all_couplers.value >= 4);
    assert!(with.largest_coupler_set.value <= 8);
    assert_eq!(with.layers_for_all_qubits.value, 2);
    assert_eq!(h.largest_coupler_set.len(), with.largest_coupler_set.value);
    assert_valid_groups(&h, 24);
    for f in
        [&bare.largest_coupler_set, &bare.layers_for_all_couplers, &with.layers_for_all_couplers]
    {
        assert!(f.exact && f.value == f.bound);
    }
    let dot = std::fs::read_to_string(tmp.path().join("h/conflicts.dot")).unwrap();
    assert!(dot.starts_with("graph conflicts {") && dot.contains("\"q5\" -- \"q6\""));
    assert_eq!(dot.matches(" -- ").count(), h.conflicts.len());
}

#[test]
fn recalibrate_level_drops_watch_edges() {
    let path = Path::new(FIXTURES).join("before.json");
    let (watch, _t1) = run_hints(&[path.to_str().unwrap()]);
    let (rec, _t2) = run_hints(&[path.to_str().unwrap(), "--flagged", "recalibrate"]);
    assert_eq!(rec.flagged.len(), 2);
    assert!(rec.flagged.iter().all(|f| f.victim != "q9"));
    assert!(rec.conflicts.len() < watch.conflicts.len());
    assert!(
        rec.with_conflicts.layers_for_all_couplers.value
            <= watch.with_conflicts.layers_for_all_couplers.value
    );
}

#[test]
fn compare_mode_writes_both_sides() {
    let dir = Path::new(FIXTURES);
    let tmp = tempfile::tempdir().unwrap();
    let out = tmp.path().join("h");
    let (a, b) = (dir.join("before.json"), dir.join("after.json"));
    let o = run_slackmap(&[
        "hints",
        "--compare",
        a.to_str().unwrap(),
        b.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let stdout = String::from_utf8_lossy(&o.stdout);
    assert!(stdout.contains("layers to run every coupler once"));
    let both: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("hints-compare.json")).unwrap())
            .unwrap();
    // After recalibration q6 <- q5 is clean: fewer flagged directions in B.
    assert_eq!(both["a"]["flagged"].as_array().unwrap().len(), 3);
    assert_eq!(both["b"]["flagged"].as_array().unwrap().len(), 2);
    assert!(out.join("a/conflicts.dot").exists() && out.join("b/hints.json").exists());
}

#[test]
fn an_odd_ring_needs_three_layers_and_conflicts_only_add() {
    // The chromatic index of an odd cycle is 3 (Diestel, Graph Theory, section 5.3).
    let r = ring(7);
    let tmp = tempfile::tempdir().unwrap();
    let bare = write_audit(tmp.path(), "bare.json", &AuditBuilder::new(&r).build());
    let (h, _t) = run_hints(&[bare.to_str().unwrap()]);
    assert_eq!(h.without_conflicts.layers_for_all_couplers.value, 3);
    assert_eq!(h.with_conflicts.layers_for_all_couplers.value, 3);
    assert_eq!(h.without_conflicts.largest_coupler_set.value, 3);
    let flagged = AuditBuilder::new(&r).flag("q0", "q1", 2e-3, Verdict::Recalibrate).build();
    let p = write_audit(tmp.path(), "flagged.json", &flagged);
    let (h, _t) = run_hints(&[p.to_str().unwrap()]);
    assert!(h.with_conflicts.layers_for_all_couplers.value >= 3);
    assert_valid_groups(&h, 7);
}

#[test]
fn a_large_grid_reports_figures_with_bounds() {
    let g = grid(12, 12);
    let path = Path::new("grid-12x12.json");
    let bare = AuditBuilder::new(&g).build();
    let flagged = AuditBuilder::new(&g)
        .flag("q13", "q14", 3e-3, Verdict::Recalibrate)
        .flag("q50", "q62", 2e-3, Verdict::Recalibrate)
        .flag("q100", "q101", 9e-4, Verdict::Watch)
        .flag("q77", "q78", 4e-3, Verdict::Recalibrate)
        .build();
    for (name, r) in [("no conflicts", &bare), ("four flagged", &flagged)] {
        let h = hints::hints(r, path, FlagLevel::Watch, hints::DEFAULT_BUDGET).expect("hints");
        let w = &h.with_conflicts;
        let s = &w.largest_coupler_set.figure;
        let c = &w.coupler_layers.figure;
        println!("grid-12x12 {name}: largest set {s:?}; layers {c:?}");
        assert!(s.value <= s.bound && c.value >= c.bound);
        // A 12x12 grid has a perfect matching (72) and max degree 4 (Konig).
        assert!(s.bound <= 72 && c.bound >= 4);
        if name == "no conflicts" {
            assert_eq!((s.value, c.value), (72, 4));
        }
    }
}

#[test]
fn a_broken_audit_is_refused() {
    let tmp = tempfile::tempdir().unwrap();
    let p = tmp.path().join("broken.json");
    std::fs::write(&p, "not json").unwrap();
    let o = run_slackmap(&[
        "hints",
        p.to_str().unwrap(),
        "--out",
        tmp.path().join("o").to_str().unwrap(),
    ]);
    assert_eq!(o.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&o.stderr).contains("broken.json"));
    let o = run_slackmap(&["hints", "--out", "x"]);
    assert_eq!(o.status.code(), Some(2));
}

/// The least number of colours of a graph on `n` vertices by trying every assignment with
/// k = 1, 2, ... colours (exhaustive search; only for a handful of vertices), and the size of
/// its largest independent set by trying every subset.
fn brute_force(n: usize, edges: &[(usize, usize)]) -> (usize, usize) {
    let proper = |colour: &[usize]| edges.iter().all(|&(a, b)| colour[a] != colour[b]);
    let mut chromatic = n;
    'k: for k in 1..=n {
        let mut colour = vec![0usize; n];
        loop {
            if proper(&colour) {
                chromatic = k;
                break 'k;
            }
            // Next assignment in base k.
            let mut i = 0;
            while i < n && colour[i] == k - 1 {
                colour[i] = 0;
                i += 1;
            }
            if i == n {
                break;
            }
            colour[i] += 1;
        }
    }
    let independent = (0u32..1 << n)
        .filter(|&set| edges.iter().all(|&(a, b)| set >> a & 1 == 0 || set >> b & 1 == 0))
        .map(|set| set.count_ones() as usize)
        .max()
        .unwrap_or(0);
    (chromatic, independent)
}

/// An audit of `layout` with no flagged edge and one flagged gate pair victim <- aggressor
/// (units as the audit names them: `q2-q3` for a coupler's gate, `q5` for a qubit).
fn audit_with_gate_pair(
    layout: &slackmap::layout::Layout,
    victim: &str,
    aggressor: &str,
) -> slackmap::report::AuditReport {
    use slackmap::report::{GatePairReport, ReasonCode};
    let mut r = AuditBuilder::new(layout).build();
    let mut d = r.directed[0].clone();
    d.victim = victim.into();
    d.aggressor = aggressor.into();
    d.score_tvd_per_layer = 6e-3;
    d.detection_limit_tvd_per_layer = 1e-3;
    let mut reverse = d.clone();
    reverse.victim = aggressor.into();
    reverse.aggressor = victim.into();
    reverse.score_tvd_per_layer = 0.0;
    r.gates.directed = vec![d, reverse];
    let gate = |u: &str| u.contains('-').then(|| "cz".to_string());
    r.gates.pairs = vec![GatePairReport {
        a: victim.into(),
        a_gate: gate(victim),
        b: aggressor.into(),
        b_gate: gate(aggressor),
        score_tvd_per_layer: 6e-3,
        a_from_b_tvd_per_layer: Some(6e-3),
        b_from_a_tvd_per_layer: Some(0.0),
        rank: Some(1),
        estimate_tvd_per_layer: 6e-3,
        detection_limit_tvd_per_layer: 1e-3,
        p_value: 0.01,
        victim: victim.into(),
        aggressor: aggressor.into(),
        confounded_with: Vec::new(),
        confidence: None,
        verdict: Verdict::Recalibrate,
        reason_code: ReasonCode::AboveThreshold,
        reason: format!("{victim}<-{aggressor}: detected"),
    }];
    r
}

#[test]
fn one_flagged_gate_pair_gives_exact_layer_counts_by_brute_force() {
    use slackmap::layout::generate::chain;
    // Small layouts and one flagged pair of couplers that share no qubit.
    let cases = [
        (chain(5), "q2-q3", "q0-q1"),
        (chain(6), "q2-q3", "q4-q5"),
        (grid(2, 3), "q0-q1", "q4-q5"),
        (ring(6), "q1-q2", "q4-q5"),
        (grid(2, 4), "q1-q2", "q5-q6"),
    ];
    for (layout, victim, aggressor) in cases {
        let report = audit_with_gate_pair(&layout, victim, aggressor);
        let h = hints::hints(&report, Path::new("audit.json"), FlagLevel::Watch, 100_000).unwrap();
        let wire = h.report("audit.json", FlagLevel::Watch);
        // Exactly one conflict, between the two gates themselves, with its rule in words.
        assert!(wire.flagged.is_empty());
        assert_eq!(wire.conflicts.len(), 1, "{:?}", wire.conflicts);
        let c = &wire.conflicts[0];
        let mut ends = [c.a.as_str(), c.b.as_str()];
        ends.sort();
        let mut want = [victim, aggressor];
        want.sort();
        assert_eq!(ends, want);
        assert_eq!(c.because, [format!("{victim}<-{aggressor}")]);
        assert_eq!(wire.flagged_gate_pairs.len(), 1);
        assert_eq!(
            wire.flagged_gate_pairs[0].rule,
            format!("cz {victim} and cz {aggressor} must not share a layer")
        );
        // The coupler graph by hand: couplers sharing a qubit, plus the flagged pair.
        let m = layout.couplers.len();
        let index = |u: &str| {
            let (a, b) = u.split_once('-').unwrap();
            layout.coupler(layout.qubit(a).unwrap(), layout.qubit(b).unwrap()).unwrap()
        };
        let mut edges: Vec<(usize, usize)> = Vec::new();
        for i in 0..m {
            for j in i + 1..m {
                let (a, b) = layout.couplers[i];
                let (c, d) = layout.couplers[j];
                if a == c || a == d || b == c || b == d {
                    edges.push((i, j));
                }
            }
        }
        let (bare_layers, bare_set) = brute_force(m, &edges);
        edges.push((index(victim), index(aggressor)));
        let (layers, set) = brute_force(m, &edges);
        let name = &layout.name;
        let figures = |f: &slackmap::hints::Figures| {
            assert!(f.layers_for_all_couplers.exact && f.largest_coupler_set.exact, "{name}");
            (f.layers_for_all_couplers.value, f.largest_coupler_set.value)
        };
        assert_eq!(figures(&wire.without_conflicts), (bare_layers, bare_set), "{name} bare");
        assert_eq!(figures(&wire.with_conflicts), (layers, set), "{name} with the gate pair");
        // The groups are a schedule: every coupler once, no group holds the flagged pair.
        let together = wire
            .coupler_groups
            .iter()
            .any(|g| g.iter().any(|x| x == victim) && g.iter().any(|x| x == aggressor));
        assert!(!together, "{name}: {:?}", wire.coupler_groups);
        assert_eq!(wire.coupler_groups.iter().map(Vec::len).sum::<usize>(), m);
        // One-qubit layers are untouched by a gate-on-gate conflict.
        assert_eq!(wire.with_conflicts.layers_for_all_qubits.value, 1);
    }
}

#[test]
fn a_gate_beside_a_driven_qubit_conflicts_with_that_qubit_only() {
    let layout = grid(2, 3);
    let report = audit_with_gate_pair(&layout, "q0-q1", "q2");
    let h = hints::hints(&report, Path::new("audit.json"), FlagLevel::Watch, 100_000).unwrap();
    let wire = h.report("audit.json", FlagLevel::Watch);
    assert_eq!(wire.conflicts.len(), 1);
    assert_eq!((wire.conflicts[0].a.as_str(), wire.conflicts[0].b.as_str()), ("q2", "q0-q1"));
    assert_eq!(wire.flagged_gate_pairs[0].rule, "cz q0-q1 and q2 must not share a layer");
    // A mixed conflict changes neither the coupler layers nor the one-qubit layers.
    assert_eq!(
        wire.with_conflicts.layers_for_all_couplers.value,
        wire.without_conflicts.layers_for_all_couplers.value
    );
    let dot = h.dot();
    assert!(dot.contains("\"q2\" -- \"q0-q1\" [color=red, label=\"q0-q1<-q2\"]"), "{dot}");
}
