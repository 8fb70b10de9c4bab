//! Test-only builder of audit reports: a layout, a few flagged edges with chosen directed
//! scores, and deterministic replicate scores, so hints and compare can be checked on
//! audits whose answers are known without running an audit.

use std::collections::BTreeMap;
use std::path::Path;
use std::process::{Command, Output};

use assert_cmd::cargo::CommandCargoExt;
use slackmap::layout::generate::default_gates;
use slackmap::layout::Layout;
use slackmap::report::{
    AuditReport, Confidence, DataSummary, DirectedReport, EdgeReport, FitSummary, IntrinsicReport,
    LayoutSummary, Parameters, ReasonCode, Verdict, CAUTION, SCHEMA,
};

/// Runs the binary with arguments.
pub fn run_slackmap(args: &[&str]) -> Output {
    Command::cargo_bin("slackmap").expect("binary builds").args(args).output().expect("binary runs")
}

/// A layout with extra spectator pairs (ids), rebuilt from a generated one.
pub fn with_extra_pairs(base: &Layout, extra: &[(&str, &str)]) -> Layout {
    let couplers = base
        .couplers
        .iter()
        .map(|&(a, b)| (base.id(a).to_string(), base.id(b).to_string()))
        .collect();
    let extra = extra.iter().map(|(a, b)| (a.to_string(), b.to_string())).collect();
    Layout::new(base.name.clone(), base.qubits.clone(), couplers, default_gates(), 1, extra)
        .expect("valid layout")
}

/// splitmix64 (Steele, Lea & Flood, OOPSLA 2014): a tiny seeded generator so fixtures do not
/// depend on any crate's stream.
struct Mix(u64);

impl Mix {
    fn next(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9e37_79b9_7f4a_7c15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
        z ^ (z >> 31)
    }

    fn uniform(&mut self) -> f64 {
        ((self.next() >> 11) as f64 + 0.5) / (1u64 << 53) as f64
    }

    /// Standard normal by Box-Muller.
    fn normal(&mut self) -> f64 {
        let (u, v) = (self.uniform(), self.uniform());
        (-2.0 * u.ln()).sqrt() * (std::f64::consts::TAU * v).cos()
    }
}

/// Builds an [`AuditReport`] for a layout.
pub struct AuditBuilder {
    layout: Layout,
    /// (victim id, aggressor id) -> directed score.
    directed: BTreeMap<(String, String), f64>,
    verdicts: BTreeMap<(String, String), Verdict>,
    replicates: usize,
    seed: u64,
    noise: f64,
    intrinsic: BTreeMap<String, f64>,
    limit: f64,
}

impl AuditBuilder {
    /// Every neighbour pair clean with score 0, no replicates.
    pub fn new(layout: &Layout) -> AuditBuilder {
        AuditBuilder {
            layout: layout.clone(),
            directed: BTreeMap::new(),
            verdicts: BTreeMap::new(),
            replicates: 0,
            seed: 1,
            noise: 2e-4,
            intrinsic: BTreeMap::new(),
            limit: 5e-4,
        }
    }

    /// Sets X(victim <- aggressor) and the edge's verdict.
    pub fn flag(mut self, victim: &str, aggressor: &str, score: f64, verdict: Verdict) -> Self {
        self.directed.insert((victim.into(), aggressor.into()), score);
        let k = self.key(victim, aggressor);
        self.verdicts.insert(k, verdict);
        self
    }

    /// Bootstrap replicates: score + noise * N(0, 1), clipped at zero, seeded.
    pub fn replicates(mut self, n: usize, seed: u64, noise: f64) -> Self {
        self.replicates = n;
        self.seed = seed;
        self.noise = noise;
        self
    }

    /// Intrinsic slack of a qubit's one-qubit kinds (default 1e-4 per occurrence).
    pub fn intrinsic(mut self, qubit: &str, slack: f64) -> Self {
        self.intrinsic.insert(qubit.into(), slack);
        self
    }

    fn key(&self, x: &str, y: &str) -> (String, String) {
        let (ix, iy) =
            (self.layout.qubit(x).expect("known id"), self.layout.qubit(y).expect("known id"));
        if ix < iy {
            (x.into(), y.into())
        } else {
            (y.into(), x.into())
        }
    }

    fn confidence(&self, estimate: f64, salt: u64) -> Option<Confidence> {
        if self.replicates == 0 {
            return None;
        }
        let mut g = Mix(self.seed.wrapping_mul(1_000_003).wrapping_add(salt));
        let reps: Vec<f64> =
            (0..self.replicates).map(|_| (estimate + self.noise * g.normal()).max(0.0)).collect();
        let mut sorted = reps.clone();
        sorted.sort_by(f64::total_cmp);
        let q = |p: f64| sorted[((sorted.len() - 1) as f64 * p).round() as usize];
        Some(Confidence {
            level: 0.95,
            method: "basic".into(),
            low_tvd_per_layer: (2.0 * estimate - q(0.975)).max(0.0),
            high_tvd_per_layer: 2.0 * estimate - q(0.025),
            upper_bound_tvd_per_layer: 2.0 * estimate - q(0.05),
            lower_bound_tvd_per_layer: (2.0 * estimate - q(0.95)).max(0.0),
            median_tvd_per_layer: q(0.5),
            p_positive: reps.iter().filter(|&&r| r > 0.0).count() as f64 / reps.len() as f64,
            score_replicates_tvd_per_layer: reps.clone(),
            replicates_tvd_per_layer: reps,
        })
    }

    /// The report.
    pub fn build(&self) -> AuditReport {
        let l = &self.layout;
        let id = |q: usize| l.id(q).to_string();
        let score = |v: &str, a: &str| {
            self.directed.get(&(v.to_string(), a.to_string())).copied().unwrap_or(0.0)
        };
        let mut edges = Vec::new();
        let mut directed = Vec::new();
        for (i, (a, b)) in l.neighbour_pairs().into_iter().enumerate() {
            let (ia, ib) = (id(a), id(b));
            let (ab, ba) = (score(&ia, &ib), score(&ib, &ia));
            let s = ab.max(ba);
            let verdict =
                self.verdicts.get(&(ia.clone(), ib.clone())).copied().unwrap_or(Verdict::Clean);
            edges.push(EdgeReport {
                a: ia.clone(),
                b: ib.clone(),
                coupled: l.coupler(a, b).is_some(),
                score_tvd_per_layer: s,
                a_from_b_tvd_per_layer: ab,
                b_from_a_tvd_per_layer: ba,
                rank: None,
                estimate_tvd_per_layer: s,
                sensitivity_tvd_per_layer: 5e-4,
                detection_limit_tvd_per_layer: self.limit,
                p_value: if verdict == Verdict::Clean { 0.6 } else { 0.001 },
                attribution_min_tvd_per_layer: s,
                attribution_max_tvd_per_layer: s,
                supporting_rows: 0,
                supporting_circuits: 0,
                leave_one_out_tvd_per_layer: s,
                most_influential_circuit: None,
                confounded_with: Vec::new(),
                confidence: self.confidence(s, 3 * i as u64),
                rank_confidence: None,
                parametric_limit_tvd_per_layer: None,
                parametric_p_value: None,
                verdict,
                reason_code: match verdict {
                    Verdict::Recalibrate => ReasonCode::AboveThreshold,
                    Verdict::Watch => ReasonCode::BelowThreshold,
                    Verdict::Confounded => ReasonCode::Shared,
                    Verdict::NotTested => ReasonCode::NoNull,
                    Verdict::Clean if s > 0.0 => ReasonCode::InNull,
                    Verdict::Clean => ReasonCode::NoSlack,
                },
                reason: "built for a test".into(),
            });
            for (v, ag, x, salt) in
                [(&ia, &ib, ab, 3 * i as u64 + 1), (&ib, &ia, ba, 3 * i as u64 + 2)]
            {
                directed.push(DirectedReport {
                    victim: v.clone(),
                    aggressor: ag.clone(),
                    score_tvd_per_layer: x,
                    estimate_tvd_per_layer: x,
                    sensitivity_tvd_per_layer: 5e-4,
                    driven_tvd_per_layer: x,
                    idle_tvd_per_layer: 0.0,
                    attribution_min_tvd_per_layer: x,
                    attribution_max_tvd_per_layer: x,
                    detection_limit_tvd_per_layer: self.limit,
                    p_value: if x > self.limit { 0.001 } else { 0.6 },
                    detected: x > self.limit,
                    corroboration_p_value: None,
                    supporting_rows: 0,
                    supporting_circuits: 0,
                    isolated_tvd_per_layer: 0.0,
                    top_supporting_circuits: Vec::new(),
                    leave_one_out_tvd_per_layer: x,
                    most_influential_circuit: None,
                    per_kind: Vec::new(),
                    depth_profile: Vec::new(),
                    confidence: self.confidence(x, salt),
                    parametric_limit_tvd_per_layer: None,
                    parametric_p_value: None,
                });
            }
        }
        // Rank positive edges, worst first, as the audit does.
        let mut order: Vec<usize> =
            (0..edges.len()).filter(|&i| edges[i].score_tvd_per_layer > 0.0).collect();
        order.sort_by(|&x, &y| {
            edges[y].score_tvd_per_layer.total_cmp(&edges[x].score_tvd_per_layer)
        });
        for (r, &i) in order.iter().enumerate() {
            edges[i].rank = Some(r + 1);
        }
        let mut intrinsic = Vec::new();
        for q in 0..l.n_qubits() {
            let slack = self.intrinsic.get(l.id(q)).copied().unwrap_or(1e-4);
            for (gate, occ) in [("sx", 1200u64), ("id", 400)] {
                intrinsic.push(IntrinsicReport {
                    kind: format!("{gate}@{}", l.id(q)),
                    occurrences: occ,
                    reference_occurrences: occ / 2,
                    slack_tvd_per_occurrence: slack,
                    estimate_tvd_per_occurrence: slack,
                    fitted_error_rate: 1e-3,
                    fitted_on_all_rows: false,
                    qubits: vec![id(q)],
                    confidence: self
                        .confidence(slack, 1_000_000 + 2 * q as u64 + u64::from(gate == "id"))
                        .map(Into::into),
                });
            }
        }
        for &(a, b) in &l.couplers {
            intrinsic.push(IntrinsicReport {
                kind: format!("cz@{}-{}", l.id(a), l.id(b)),
                occurrences: 600,
                reference_occurrences: 300,
                slack_tvd_per_occurrence: 5e-4,
                estimate_tvd_per_occurrence: 5e-4,
                fitted_error_rate: 8e-3,
                fitted_on_all_rows: false,
                qubits: vec![id(a), id(b)],
                confidence: None,
            });
        }
        AuditReport {
            schema: SCHEMA,
            tool_version: "test".into(),
            label: None,
            created: None,
            caution: CAUTION.into(),
            layout: LayoutSummary {
                name: l.name.clone(),
                qubits: l.qubits.iter().map(|q| q.id.clone()).collect(),
                positions: l.qubits.iter().map(|q| q.position).collect(),
                couplers: l.couplers.iter().map(|&(a, b)| [id(a), id(b)]).collect(),
                neighbour_pairs: l.neighbour_pairs().len(),
            },
            inputs: Vec::new(),
            parameters: Parameters {
                model: "pauli".into(),
                alpha: 0.05,
                action_threshold_tvd_per_layer: 1e-3,
                null_replicates: 200,
                seed: self.seed,
                bit_order: "as-measured".into(),
                replicates: self.replicates,
                resample: "shots".into(),
                level: 0.95,
            },
            data: DataSummary {
                circuits: 0,
                circuits_with_counts: 0,
                rows: 0,
                reference_rows: 0,
                shots_min: 0,
                shots_median: 0,
                shots_max: 0,
                shots_total: 0,
            },
            fit: FitSummary {
                reference_llr: 0.0,
                reference_dof: 0.0,
                reference_excess_sigma: 0.0,
                all_llr_before: 0.0,
                all_dof: 0.0,
                all_excess_sigma_before: 0.0,
                all_llr_after: 0.0,
                all_excess_sigma_after: 0.0,
                row_threshold_llr: 0.0,
                rows_needing_slack: 0,
                unidentified: Vec::new(),
                not_converged: Vec::new(),
            },
            edges,
            directed,
            intrinsic,
            readout: Vec::new(),
            warnings: Vec::new(),
            gates: Default::default(),
            rows: Vec::new(),
        }
    }
}

/// The fixture pair: a 4x4 grid before (three flagged edges) and after (q5-q6 improved,
/// and a diagonal spectator pair q0-q5 analysed only after).
pub fn fixture_pair() -> (AuditReport, AuditReport) {
    use slackmap::layout::generate::grid;
    let g = grid(4, 4);
    let before = AuditBuilder::new(&g)
        .flag("q6", "q5", 4e-3, Verdict::Recalibrate)
        .flag("q1", "q2", 2.5e-3, Verdict::Recalibrate)
        .flag("q9", "q10", 8e-4, Verdict::Watch)
        .replicates(40, 11, 2e-4)
        .build();
    let after = AuditBuilder::new(&with_extra_pairs(&g, &[("q0", "q5")]))
        .flag("q6", "q5", 3e-4, Verdict::Clean)
        .flag("q1", "q2", 2.5e-3, Verdict::Recalibrate)
        .flag("q9", "q10", 8e-4, Verdict::Watch)
        .intrinsic("q3", 6e-4)
        .replicates(40, 29, 2e-4)
        .build();
    (before, after)
}

/// Where the fixtures live.
pub const FIXTURES: &str = "tests/fixtures/audit-decisions";

/// Bytes of an audit as `audit.json` holds them.
pub fn audit_bytes(r: &AuditReport) -> Vec<u8> {
    use slackmap::report::Render;
    slackmap::report::json::AuditJson.render(r)
}

/// Writes an audit into a folder as `name`.
pub fn write_audit(dir: &Path, name: &str, r: &AuditReport) -> std::path::PathBuf {
    let p = dir.join(name);
    std::fs::write(&p, audit_bytes(r)).expect("write audit");
    p
}
