//! Verdicts on small simulated chips (method.md section 6): a pair whose own circuits could
//! see slack and need none is clean even beside a strong aggressor, a strong edge audited
//! without a null is `not-tested` (never `clean`) and the summary says so, and a coherent
//! rotation that shows mostly in the repeated-gate circuits is flagged.

mod common;

use slackmap::audit::{self, AuditConfig, Silent};
use slackmap::circuit::CircuitSet;
use slackmap::confidence::BootstrapConfig;
use slackmap::design::{self, DesignConfig, Kind};
use slackmap::layout::{generate, Layout};
use slackmap::model::Family;
use slackmap::report::{terminal, AuditReport, EdgeReport, ReasonCode, Verdict};
use slackmap::simulate::{self, Noise, SimConfig};

fn config(nulls: usize, seed: u64) -> AuditConfig {
    AuditConfig {
        family: Family::Depolarizing,
        alpha: 0.05,
        action_threshold_tvd_per_layer: 1e-3,
        null_replicates: nulls,
        seed,
        bit_order: "as-measured".into(),
        inputs: Vec::new(),
        bootstrap: BootstrapConfig { replicates: 20, ..Default::default() },
    }
}

/// A 3-chain under the full design (reference, pair, all-active and all-idle contexts).
fn chain3() -> (Layout, CircuitSet) {
    let layout = generate::chain(3);
    let kinds = vec![Kind::Randomized, Kind::RepeatedX, Kind::RepeatedZ];
    let cfg = DesignConfig::new(vec![1, 4, 16, 48], 3, 11, kinds).unwrap();
    let circuits = design::design(&layout, &cfg).unwrap().circuits;
    (layout, circuits)
}

fn audit(layout: &Layout, circuits: &CircuitSet, context: &str, nulls: usize) -> AuditReport {
    let text = format!("{}{context}", common::BASE_NOISE);
    let noise = Noise::from_toml_str(&text, std::path::Path::new("noise.toml"), layout).unwrap();
    let counts =
        simulate::simulate(layout, circuits, &noise, &SimConfig { shots: 1000, seed: 5 }).unwrap();
    audit::run(layout, circuits, &counts, &config(nulls, 5), &Silent).unwrap()
}

fn edge<'r>(r: &'r AuditReport, a: &str, b: &str) -> &'r EdgeReport {
    r.edges.iter().find(|e| e.a == a && e.b == b).unwrap()
}

/// q0 disturbs q1 strongly; q2 does nothing. In the all-active circuits q0 and q2 run
/// together beside q1, but the pair circuits run q2 alone beside q1 and have the power to
/// see slack of the size the all-active rows could put on it: q1-q2 is clean, not confounded.
#[test]
fn a_quiet_neighbour_of_a_strong_aggressor_is_clean() {
    let (layout, circuits) = chain3();
    let context = "[[context]]\nvictim = \"q1\"\naggressor = \"q0\"\nrole = \"both\"\ndepolarizing = 1.0e-2\n";
    let r = audit(&layout, &circuits, context, 39);
    let strong = edge(&r, "q0", "q1");
    assert_eq!(strong.verdict, Verdict::Recalibrate, "{}", strong.reason);
    let quiet = edge(&r, "q1", "q2");
    assert_eq!(quiet.verdict, Verdict::Clean, "{:?}: {}", quiet.verdict, quiet.reason);
    assert_ne!(quiet.verdict, Verdict::Confounded);
}

/// Without null replicates a pair that needs slack is `not-tested`, the reason says why, and
/// the summary says that nothing was tested rather than counting pairs without crosstalk.
#[test]
fn without_a_null_a_strong_edge_is_not_tested() {
    let (layout, circuits) = chain3();
    let context = "[[context]]\nvictim = \"q1\"\naggressor = \"q0\"\nrole = \"both\"\ndepolarizing = 1.0e-2\n";
    let r = audit(&layout, &circuits, context, 0);
    let strong = edge(&r, "q0", "q1");
    assert_eq!(strong.verdict, Verdict::NotTested, "{}", strong.reason);
    assert_eq!(strong.reason_code, ReasonCode::NoNull);
    for e in &r.edges {
        assert!(
            !matches!(e.reason_code, ReasonCode::InNull | ReasonCode::OneCircuit),
            "{}-{} judged against a null that was not run: {}",
            e.a,
            e.b,
            e.reason
        );
        assert_eq!(e.reason_code == ReasonCode::NoNull, e.verdict == Verdict::NotTested);
    }
    let words = terminal::summary_words(&r);
    assert!(words.starts_with("Not tested"), "{words}");
    assert!(!words.contains("0 of"), "{words}");
    // Every output carries the word.
    let json = serde_json::to_value(&r).unwrap();
    let e = json["edges"].as_array().unwrap().iter().find(|e| e["a"] == "q0").unwrap();
    assert_eq!(e["verdict"], "not-tested");
    assert_eq!(e["reason_code"], "no-null");
    common::assert_valid("audit", &json);
}

/// A coherent X rotation of 0.05 rad per layer on q1 while q0 is active: under randomized
/// sequences it costs about its infidelity (6e-4 per layer), in the repeated-gate circuits it
/// adds up in amplitude. It must be flagged, not cleared as resting on one circuit.
#[test]
fn a_coherent_rotation_seen_in_repeated_circuits_is_flagged() {
    let (layout, circuits) = chain3();
    let context = "[[context]]\nvictim = \"q1\"\naggressor = \"q0\"\nrole = \"both\"\nrotation = { angle = 0.05, axis = \"X\" }\n";
    let r = audit(&layout, &circuits, context, 99);
    let e = edge(&r, "q0", "q1");
    assert!(
        matches!(e.verdict, Verdict::Recalibrate | Verdict::Watch),
        "{:?} ({}): {}",
        e.verdict,
        e.reason_code.code(),
        e.reason
    );
}
