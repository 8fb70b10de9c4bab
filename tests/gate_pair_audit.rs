//! Gate-on-gate crosstalk found by the audit on simulated chips: an injected context error on
//! one two-qubit gate while a nearby gate runs is flagged in its own direction and nowhere
//! else, null chips flag no gate pair, qubit edges keep their verdicts when the design adds
//! gate-pair circuits, and designs without them leave the gate outputs out.
//!
//! The scenario is a 6-qubit chain (couplers q0-q1 and q2-q3 share no qubit and are joined by
//! q1-q2), `design --gate-pairs` at depths 1, 4, 16, 32 with 3 sequences, 1,000 shots per
//! circuit, and a depolarizing `[[gate_context]]` term on cz q2-q3 while cz q0-q1 runs. Its
//! detection level, measured by `gate_pair_study` (`cargo test --release --test
//! gate_pair_audit -- --ignored`): 0/10 seeds flagged at a rate of 0.002 per layer, 5/10 at
//! 0.004, 10/10 at 0.006; the fast tests inject 3x the 50% level, 0.012.

mod common;

use std::path::Path;

use serde_json::Value;

/// Injected rate at three times the measured detection level (see the module header).
const THREE_TIMES_DETECTION: f64 = 0.012;

fn run(dir: &Path, args: &[&str]) -> String {
    let out = common::slackmap().args(args).current_dir(dir).output().unwrap();
    assert!(out.status.success(), "{args:?}: {}", String::from_utf8_lossy(&out.stderr));
    String::from_utf8_lossy(&out.stdout).into_owned()
}

/// The chain layout (chip.toml) and its design into `out`, with or without gate pairs.
fn design(dir: &Path, out: &str, gate_pairs: bool) {
    if !dir.join("chip.toml").exists() {
        run(dir, &["layout", "new", "chain", "6", "--out", "chip.toml"]);
    }
    let mut args = vec![
        "design",
        "--layout",
        "chip.toml",
        "--depths",
        "1,4,16,32",
        "--sequences",
        "3",
        "--seed",
        "3",
        "--out",
        out,
    ];
    if gate_pairs {
        args.push("--gate-pairs");
    }
    run(dir, &args);
}

/// Noise: the shared baseline, an optional gate-pair term cz q2-q3 <- cz q0-q1 at `rate`,
/// and any extra terms.
fn noise(rate: Option<f64>, extra: &str) -> String {
    let mut s = common::BASE_NOISE.to_string();
    if let Some(p) = rate {
        s.push_str(&format!(
            "[[gate_context]]\nvictim = [\"q2\", \"q3\"]\naggressor = [\"q0\", \"q1\"]\ndepolarizing = {p:e}\n"
        ));
    }
    s.push_str(extra);
    s
}

/// Simulates `noise` on design `d` at `seed` and audits it (39 null replicates, no
/// bootstrap); returns audit.json and the terminal text.
fn audit(dir: &Path, d: &str, noise: &str, seed: u64, tag: &str) -> (Value, String) {
    let (noise_file, counts, out) =
        (format!("noise-{tag}.toml"), format!("counts-{tag}.csv"), format!("audit-{tag}"));
    std::fs::write(dir.join(&noise_file), noise).unwrap();
    let circuits = format!("{d}/circuits.json");
    let seed = seed.to_string();
    run(
        dir,
        &[
            "simulate",
            "--layout",
            "chip.toml",
            "--circuits",
            &circuits,
            "--noise",
            &noise_file,
            "--shots",
            "1000",
            "--seed",
            &seed,
            "--out",
            &counts,
        ],
    );
    let text = run(
        dir,
        &[
            "audit",
            "--layout",
            "chip.toml",
            "--circuits",
            &circuits,
            "--counts",
            &counts,
            "--replicates",
            "0",
            "--null-replicates",
            "39",
            "--seed",
            &seed,
            "--out",
            &out,
        ],
    );
    let json = std::fs::read_to_string(dir.join(&out).join("audit.json")).unwrap();
    (serde_json::from_str(&json).unwrap(), text)
}

fn flagged(v: &str) -> bool {
    v == "recalibrate" || v == "watch"
}

/// The flagged gate pairs as (victim, aggressor) of their leading direction.
fn flagged_gate_pairs(a: &Value) -> Vec<(String, String)> {
    a["gates"]["pairs"]
        .as_array()
        .map(|v| {
            v.iter()
                .filter(|p| flagged(p["verdict"].as_str().unwrap()))
                .map(|p| {
                    (p["victim"].as_str().unwrap().into(), p["aggressor"].as_str().unwrap().into())
                })
                .collect()
        })
        .unwrap_or_default()
}

fn flagged_edges(a: &Value) -> usize {
    a["edges"]
        .as_array()
        .unwrap()
        .iter()
        .filter(|e| flagged(e["verdict"].as_str().unwrap()))
        .count()
}

fn right_direction(a: &Value) -> bool {
    flagged_gate_pairs(a) == [("q2-q3".to_string(), "q0-q1".to_string())]
}

#[test]
fn an_injected_gate_pair_is_flagged_in_its_direction_and_shown() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    design(dir, "d", true);
    let n = noise(Some(THREE_TIMES_DETECTION), "");
    for seed in 1..=3 {
        let (a, text) = audit(dir, "d", &n, seed, &format!("s{seed}"));
        assert!(right_direction(&a), "seed {seed}: {:?}", flagged_gate_pairs(&a));
        assert_eq!(flagged_edges(&a), 0, "seed {seed}: a gate pair is no qubit edge");
        // The leading pair is first, with both directions: the reverse needs nothing.
        let top = &a["gates"]["pairs"][0];
        assert_eq!((top["a"].as_str(), top["b"].as_str()), (Some("q0-q1"), Some("q2-q3")));
        assert_eq!(top["rank"], 1);
        assert_eq!(top["a_from_b_tvd_per_layer"].as_f64(), Some(0.0));
        assert!(top["b_from_a_tvd_per_layer"].as_f64().unwrap() > 0.0);
        // The matrix holds the estimate at (victim q2-q3, aggressor q0-q1).
        let m = &a["gates"]["matrix"];
        let ix = |id: &str| {
            m["couplers"].as_array().unwrap().iter().position(|c| c == id).unwrap() as u64
        };
        let entry = m["coupler_from_coupler"]
            .as_array()
            .unwrap()
            .iter()
            .find(|e| e[0] == ix("q2-q3") && e[1] == ix("q0-q1"))
            .expect("matrix entry");
        assert_eq!(entry[2].as_f64(), top["estimate_tvd_per_layer"].as_f64());
        // The terminal ranks it with its gates and the rule; the CSV file leads with it.
        assert!(text.contains("Gate pairs with context slack"), "{text}");
        assert!(text.contains("cz q2-q3") && text.contains("cz q0-q1"), "{text}");
        assert!(text.contains("Do not schedule in one layer: cz q0-q1 and cz q2-q3"), "{text}");
        let csv = std::fs::read_to_string(dir.join(format!("audit-s{seed}/gate_pairs.csv")));
        let csv = csv.unwrap();
        let second = csv.lines().nth(1).unwrap();
        assert!(second.starts_with("1,q0-q1,cz,q2-q3,cz,q2-q3,q0-q1,"), "{second}");
        let svg = std::fs::read_to_string(dir.join(format!("audit-s{seed}/layout.svg"))).unwrap();
        assert!(svg.contains("class=\"gate-pair\" data-victim=\"q2-q3\" data-aggressor=\"q0-q1\""));
    }
}

#[test]
fn null_chips_flag_no_gate_pair() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    design(dir, "d", true);
    let n = noise(None, "");
    for seed in 101..=103 {
        let (a, _) = audit(dir, "d", &n, seed, &format!("n{seed}"));
        assert!(flagged_gate_pairs(&a).is_empty(), "seed {seed}: {:?}", flagged_gate_pairs(&a));
        // Every measured pair is listed, both gates' and gate-qubit ones.
        let pairs = a["gates"]["pairs"].as_array().unwrap();
        assert!(pairs.iter().any(|p| p["b_gate"].is_null()), "a gate-qubit pair is listed");
        assert!(pairs.iter().any(|p| p["b"] == "q2-q3" && p["a"] == "q0-q1"));
    }
}

#[test]
fn qubit_edges_keep_their_verdicts_when_gate_pair_circuits_are_added() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    design(dir, "plain", false);
    design(dir, "gates", true);
    // A qubit edge (q4 <- q5) and a gate pair, both well above their detection levels.
    let extra =
        "[[context]]\nvictim = \"q4\"\naggressor = \"q5\"\nrole = \"both\"\ndepolarizing = 8e-3\n";
    let n = noise(Some(THREE_TIMES_DETECTION), extra);
    let verdicts = |a: &Value| -> Vec<(String, String, String)> {
        let mut v: Vec<(String, String, String)> = a["edges"]
            .as_array()
            .unwrap()
            .iter()
            .map(|e| {
                (
                    e["a"].as_str().unwrap().into(),
                    e["b"].as_str().unwrap().into(),
                    e["verdict"].as_str().unwrap().into(),
                )
            })
            .collect();
        v.sort();
        v
    };
    for seed in [7, 8] {
        let (plain, _) = audit(dir, "plain", &n, seed, &format!("p{seed}"));
        let (gates, _) = audit(dir, "gates", &n, seed, &format!("g{seed}"));
        assert_eq!(verdicts(&plain), verdicts(&gates), "seed {seed}");
        assert!(verdicts(&plain).iter().any(|e| e.0 == "q4" && e.1 == "q5" && flagged(&e.2)));
        // Without gate-pair circuits the audit measures no gate pair and writes no gate
        // outputs; with them it finds the injected one.
        assert!(plain.get("gates").is_none());
        assert!(!dir.join(format!("audit-p{seed}/gate_pairs.csv")).exists());
        // The injected gate pair is found. The injected q4 <- q5 error acts on q4 whatever q4
        // runs, its cz with q3 included (the simulator's context term), so the gate view may
        // also flag a gate of q4 beside q5: the same error, not a false pair.
        let found = flagged_gate_pairs(&gates);
        assert!(
            found.contains(&("q2-q3".to_string(), "q0-q1".to_string())),
            "seed {seed}: {found:?}"
        );
        let holds = |unit: &str, q: &str| unit.split('-').any(|x| x == q);
        assert!(
            found
                .iter()
                .all(|(v, g)| (v == "q2-q3" && g == "q0-q1") || (holds(v, "q4") && holds(g, "q5"))),
            "seed {seed}: {found:?}"
        );
    }
}

/// The wide study: 10 seeds at three times the detection level (at least 9 flagged in the
/// right direction, nothing else flagged), 20 null chips (at most one with a flagged gate
/// pair), and the detection scan quoted in the module header.
#[test]
#[ignore]
fn gate_pair_study() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    design(dir, "d", true);
    let hits = |rate: f64, seeds: std::ops::RangeInclusive<u64>| -> (usize, usize) {
        let n = noise(Some(rate), "");
        let mut hit = 0;
        let mut wrong = 0;
        for seed in seeds {
            let (a, _) = audit(dir, "d", &n, seed, &format!("r{rate}-{seed}"));
            if right_direction(&a) {
                hit += 1;
            } else if !flagged_gate_pairs(&a).is_empty() || flagged_edges(&a) > 0 {
                wrong += 1;
            }
        }
        (hit, wrong)
    };
    for rate in [0.002, 0.004, 0.006] {
        let (hit, wrong) = hits(rate, 1..=10);
        println!("rate {rate}: {hit}/10 flagged in the right direction, {wrong} with other flags");
    }
    let (hit, wrong) = hits(THREE_TIMES_DETECTION, 11..=20);
    println!("3x detection level: {hit}/10, {wrong} with other flags");
    assert!(hit >= 9 && wrong == 0, "{hit}/10, {wrong} wrong");
    let n = noise(None, "");
    let mut chips_flagged = 0;
    for seed in 201..=220 {
        let (a, _) = audit(dir, "d", &n, seed, &format!("null{seed}"));
        if !flagged_gate_pairs(&a).is_empty() {
            chips_flagged += 1;
        }
    }
    println!("null chips with a flagged gate pair: {chips_flagged}/20");
    assert!(chips_flagged <= 1);
}
