//! Shot planning: how many shots a design needs before the audit sees a given crosstalk.
//!
//! For each shot count, data are simulated under the noise scenario with its crosstalk
//! removed and audited, giving every edge's sensitivity (the least estimate its rows could
//! tell from zero; the permutation-null limit is zero on most edges of a clean chip and
//! measures nothing there); then context errors of growing size are injected on the
//! directed pairs of median and worst sensitivity until the audit flags them (verdict
//! watch or recalibrate), and bisected. Binomial shot noise scales as 1/sqrt(shots)
//! (common practice), which is how the recommendation interpolates between shot counts.

use std::time::Instant;

use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

use crate::audit::{self, AuditConfig, Progress};
use crate::design::{self, Context, Design, DesignConfig};
use crate::error::{Error, Result};
use crate::layout::{Layout, QubitIx};
use crate::report::{AuditReport, Verdict};
use crate::simulate::{
    self, Aggressor, ContextTerm, ErrorSpec, GateContextTerm, Noise, Role, Rotation, SimConfig,
};
use crate::stats::median;

/// Version of the `plan.json` format written by this build (3: an untested sensitivity is the
/// word "unbounded", no longer null; 4: the gate-pair patterns, sensitivities and searches).
pub const SCHEMA: u32 = 4;

/// Largest depolarizing rate the search injects (beyond it the "error" is a coin flip).
const MAX_STOCHASTIC: f64 = 0.5;
/// Largest rotation angle the search injects, radians.
const MAX_ANGLE_RAD: f64 = std::f64::consts::PI;
/// Smallest size the search goes down to; a pair flagged there is reported at this size.
const MIN_SIZE: f64 = 1e-6;
/// Ladder steps before a search gives up (factor 2 each: 2^16 covers 1e-6 to 0.07).
const MAX_LADDER_STEPS: usize = 16;

/// The two kinds of injected context error.
#[derive(
    Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, PartialOrd, Ord, JsonSchema,
)]
#[serde(rename_all = "kebab-case")]
pub enum ErrorKind {
    /// Extra depolarizing on the victim's operations (idle included) while the aggressor
    /// is active; the size is the total Pauli rate per layer (its infidelity and its half
    /// diamond distance).
    Stochastic,
    /// A rotation about X of the victim while the aggressor is active; the size is the
    /// angle in radians per layer.
    Coherent,
}

impl ErrorKind {
    /// The kind's word in tables and files.
    pub fn word(self) -> &'static str {
        match self {
            ErrorKind::Stochastic => "stochastic",
            ErrorKind::Coherent => "coherent",
        }
    }

    fn max_size(self) -> f64 {
        match self {
            ErrorKind::Stochastic => MAX_STOCHASTIC,
            ErrorKind::Coherent => MAX_ANGLE_RAD,
        }
    }
}

/// Settings of a plan, checked by [`PlanConfig::validate`].
#[derive(Clone, Debug)]
pub struct PlanConfig {
    /// Shots per circuit to evaluate, each at least 1, increasing, no duplicates.
    pub shots: Vec<u64>,
    /// The design every shot count is evaluated on.
    pub design: DesignConfig,
    /// Audit settings; its seed is replaced per data set by one derived from `seed`.
    pub audit: AuditConfig,
    /// Master seed: data set (shot index i, trial t) draws from a seed derived from
    /// (seed, i, t) alone.
    pub seed: u64,
    /// Independent data sets per tested size; a size counts as flagged only when every one
    /// of them flags it (at least 1).
    pub trials: usize,
    /// Bisection steps (in log size) after the geometric ladder has bracketed the minimum.
    pub bisection_steps: usize,
    /// The context error per layer the recommendation asks to see, TVD per layer (> 0).
    pub target_tvd_per_layer: f64,
}

impl PlanConfig {
    /// Checks ranges; errors name the setting and what would be valid.
    pub fn validate(&self) -> Result<()> {
        self.audit.validate()?;
        if self.shots.is_empty() || self.shots.contains(&0) {
            return Err(Error::Usage(format!(
                "--shots {:?}: give at least one shot count, each at least 1 (e.g. 300,1000,3000)",
                self.shots
            )));
        }
        if self.shots.windows(2).any(|w| w[0] >= w[1]) {
            return Err(Error::Usage(format!(
                "--shots {:?}: give the shot counts in increasing order, each once",
                self.shots
            )));
        }
        if self.trials == 0 {
            return Err(Error::Usage("--trials must be at least 1".into()));
        }
        if self.audit.null_replicates == 0 {
            return Err(Error::Usage(
                "--null-replicates must be at least 1: without the null nothing is flagged".into(),
            ));
        }
        if !(self.target_tvd_per_layer > 0.0 && self.target_tvd_per_layer < 1.0) {
            return Err(Error::Usage(format!(
                "--target {} must lie in (0, 1) (TVD per layer)",
                self.target_tvd_per_layer
            )));
        }
        Ok(())
    }
}

/// A complete plan: what `plan.json` holds.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq, JsonSchema)]
pub struct PlanReport {
    /// Format version, [`SCHEMA`].
    pub schema: u32,
    /// The slackmap version that wrote the file.
    pub tool_version: String,
    /// The layout's name.
    pub layout: String,
    /// Circuits in the design (the same for every shot count).
    pub circuits: usize,
    /// What the design adds for gate-on-gate crosstalk (`--gate-pairs`): patterns and
    /// circuits (all zero without it).
    pub gate_design: GateDesign,
    /// The settings of the run.
    pub parameters: PlanParameters,
    /// What was removed from the noise scenario to make the crosstalk-free baseline.
    pub removed_terms: RemovedTerms,
    /// One entry per shot count, in increasing order.
    pub shot_counts: Vec<ShotPlan>,
    /// The recommendation for seeing `parameters.target_tvd_per_layer` of stochastic
    /// crosstalk.
    pub recommendation: Recommendation,
}

/// The settings of a plan.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq, JsonSchema)]
pub struct PlanParameters {
    /// Sequence depths of the design.
    pub depths: Vec<usize>,
    /// Randomized sequences per depth and pattern.
    pub sequences: usize,
    /// Sequence kinds of the design.
    pub kinds: Vec<String>,
    /// Seed of the design's random choices.
    pub design_seed: u64,
    /// Master seed of the data sets and audits.
    pub seed: u64,
    /// Error family of the audit's crosstalk-free model.
    pub model: String,
    /// Family-wise error level of the audit.
    pub alpha: f64,
    /// The audit's action threshold, TVD per layer.
    pub action_threshold_tvd_per_layer: f64,
    /// Context-permutation null replicates per directed pair.
    pub null_replicates: usize,
    /// Data sets per tested size (a size is flagged only when all of them flag it).
    pub trials: usize,
    /// Bisection steps after the ladder.
    pub bisection_steps: usize,
    /// The stochastic crosstalk per layer the recommendation is for, TVD per layer.
    pub target_tvd_per_layer: f64,
}

/// Counts of the crosstalk terms taken out of the noise scenario for the baseline.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq, JsonSchema)]
pub struct RemovedTerms {
    /// Directed context terms, from `context` entries.
    pub context: usize,
    /// Directed context terms from `zz` entries (two per entry).
    pub zz: usize,
    /// Readout crosstalk terms.
    pub readout_crosstalk: usize,
}

/// The gate-pair part of a design.
#[derive(Clone, Debug, Default, Serialize, Deserialize, PartialEq, JsonSchema)]
pub struct GateDesign {
    /// Patterns in which two nearby couplers run their gates in the same layers.
    pub gate_pair_patterns: usize,
    /// Patterns in which a coupler runs beside a driven nearby qubit.
    pub gate_qubit_patterns: usize,
    /// Circuits of those patterns.
    pub circuits: usize,
}

/// Results at one shot count.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq, JsonSchema)]
pub struct ShotPlan {
    /// Shots per circuit.
    pub shots: u64,
    /// Median over tested edges of the baseline audit's sensitivity, TVD per layer (see
    /// [`crate::report::EdgeReport::sensitivity_tvd_per_layer`]).
    #[serde(with = "crate::report::special::number")]
    #[schemars(with = "crate::report::special::Number")]
    pub edge_sensitivity_median_tvd_per_layer: f64,
    /// Largest finite edge sensitivity (the least sensitive edge), TVD per layer.
    #[serde(with = "crate::report::special::number")]
    #[schemars(with = "crate::report::special::Number")]
    pub edge_sensitivity_worst_tvd_per_layer: f64,
    /// The least sensitive edge, as `a-b`.
    pub worst_edge: String,
    /// Edges the design never tests in some direction (infinite sensitivity).
    pub untested_edges: usize,
    /// Median over edges of the baseline's permutation-null detection limit, TVD per
    /// layer (zero on most edges of a clean chip).
    #[serde(with = "crate::report::special::number")]
    #[schemars(with = "crate::report::special::Number")]
    pub edge_limit_median_tvd_per_layer: f64,
    /// Largest edge permutation-null detection limit, TVD per layer.
    #[serde(with = "crate::report::special::number")]
    #[schemars(with = "crate::report::special::Number")]
    pub edge_limit_worst_tvd_per_layer: f64,
    /// Every edge's baseline sensitivity and detection limit.
    pub edges: Vec<EdgeLimit>,
    /// Every directed pair's baseline sensitivity and detection limit.
    pub directed: Vec<DirectedLimit>,
    /// Edges the baseline audit flagged although no crosstalk was simulated (false alarms),
    /// as `a-b`.
    pub baseline_flagged: Vec<String>,
    /// The searches for the smallest flagged context error, by pair and kind.
    pub searches: Vec<SearchResult>,
    /// Every gate direction's baseline sensitivity and detection limit (victim and aggressor
    /// a coupler `a-b` or a qubit; empty when the design has no gate-pair circuits).
    pub gate_directed: Vec<DirectedLimit>,
    /// Median over gate-on-gate directions (a coupler's gate beside another's) of the
    /// baseline sensitivity, TVD per layer (zero when there are none).
    #[serde(with = "crate::report::special::number")]
    #[schemars(with = "crate::report::special::Number")]
    pub gate_sensitivity_median_tvd_per_layer: f64,
    /// Largest finite gate-on-gate sensitivity, TVD per layer.
    #[serde(with = "crate::report::special::number")]
    #[schemars(with = "crate::report::special::Number")]
    pub gate_sensitivity_worst_tvd_per_layer: f64,
    /// The searches for the smallest flagged gate-context error (a two-qubit depolarizing
    /// rate on the victim coupler's gate while the aggressor coupler runs its gate; kind
    /// `stochastic`), on the gate-on-gate directions of median and worst sensitivity.
    pub gate_searches: Vec<SearchResult>,
    /// Audits run at this shot count (baseline included).
    pub audits: usize,
    /// Wall-clock seconds spent at this shot count: shown on the terminal, never written to
    /// plan.json, so that the file is a function of the inputs and seeds alone.
    #[serde(skip)]
    pub elapsed_seconds: f64,
}

/// One edge's baseline detection limit.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq, JsonSchema)]
pub struct EdgeLimit {
    /// First qubit id.
    pub a: String,
    /// Second qubit id.
    pub b: String,
    /// Sensitivity of the edge (its less sensitive direction), TVD per layer; `"unbounded"`
    /// when a direction is untested.
    #[serde(with = "crate::report::special::unbounded")]
    #[schemars(with = "crate::report::special::Number")]
    pub sensitivity_tvd_per_layer: f64,
    /// Permutation-null detection limit of the edge (of its higher-scoring direction), TVD
    /// per layer.
    #[serde(with = "crate::report::special::number")]
    #[schemars(with = "crate::report::special::Number")]
    pub detection_limit_tvd_per_layer: f64,
}

/// One directed pair's baseline detection limit.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq, JsonSchema)]
pub struct DirectedLimit {
    /// Victim qubit id.
    pub victim: String,
    /// Aggressor qubit id.
    pub aggressor: String,
    /// Sensitivity, TVD per layer; `"unbounded"` when the design never tests the pair.
    #[serde(with = "crate::report::special::unbounded")]
    #[schemars(with = "crate::report::special::Number")]
    pub sensitivity_tvd_per_layer: f64,
    /// Permutation-null detection limit, TVD per layer.
    #[serde(with = "crate::report::special::number")]
    #[schemars(with = "crate::report::special::Number")]
    pub detection_limit_tvd_per_layer: f64,
}

/// The search for the smallest flagged error of one kind on one directed pair.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq, JsonSchema)]
pub struct SearchResult {
    /// Why this pair was chosen: `median` or `worst` baseline directed sensitivity
    /// (`median+worst` when it is both).
    pub role: String,
    /// Victim qubit id.
    pub victim: String,
    /// Aggressor qubit id.
    pub aggressor: String,
    /// The pair's baseline directed sensitivity, TVD per layer.
    pub pair_sensitivity_tvd_per_layer: f64,
    /// The injected error kind.
    pub kind: ErrorKind,
    /// Smallest tested size flagged in every trial (depolarizing rate per layer for
    /// stochastic, angle in radians for coherent); null when even the largest size was not.
    pub smallest_flagged: Option<f64>,
    /// Largest tested size below it that was not flagged; null when the smallest size
    /// tried was already flagged.
    pub largest_unflagged: Option<f64>,
    /// Entanglement infidelity per layer of `smallest_flagged` (p for stochastic,
    /// sin^2(theta/2) for coherent).
    pub infidelity: Option<f64>,
    /// Half diamond distance per layer of `smallest_flagged` (p for stochastic,
    /// sin(theta/2) for coherent).
    pub half_diamond: Option<f64>,
    /// Every size tested, in order.
    pub steps: Vec<SearchStep>,
}

/// One tested size.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq, JsonSchema)]
pub struct SearchStep {
    /// The injected size (rate or radians).
    pub size: f64,
    /// Trials run at this size (stops at the first one that does not flag).
    pub trials_run: usize,
    /// True when every trial flagged the edge.
    pub flagged: bool,
}

/// The recommendation in words and numbers.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq, JsonSchema)]
pub struct Recommendation {
    /// The recommendation as a sentence.
    pub text: String,
    /// Shots per circuit that suffice for the target; null when no figure can be given.
    pub shots_needed: Option<u64>,
    /// How `shots_needed` was obtained: `tested` (a tested count suffices and the next
    /// lower one does not, or it is the lowest), `interpolated` (in 1/sqrt(shots) between
    /// two tested counts), `extrapolated` (beyond the largest tested count, assuming
    /// 1/sqrt(shots) scaling, only when the tested counts follow it roughly),
    /// `not-shot-limited` (the worst pair's minimum does not fall with shots, so no shot
    /// count reaches the target) or `none`.
    pub basis: String,
}

/// Directed pairs that are searched at one shot count, with their roles.
#[derive(Clone, Debug, PartialEq)]
struct Representative {
    role: String,
    victim: QubitIx,
    aggressor: QubitIx,
    sensitivity: f64,
}

/// The state of one search.
struct Search {
    pair: usize,
    kind: ErrorKind,
    next: f64,
    lo: Option<f64>,
    hi: Option<f64>,
    bisected: usize,
    ladder: usize,
    steps: Vec<SearchStep>,
    done: bool,
}

impl Search {
    fn new(pair: usize, kind: ErrorKind, start: f64) -> Search {
        Search {
            pair,
            kind,
            next: start,
            lo: None,
            hi: None,
            bisected: 0,
            ladder: 0,
            steps: Vec::new(),
            done: false,
        }
    }

    fn record(&mut self, size: f64, trials_run: usize, flagged: bool, bisection_steps: usize) {
        self.steps.push(SearchStep { size, trials_run, flagged });
        if flagged {
            self.hi = Some(size);
        } else {
            self.lo = Some(size);
        }
        match (self.lo, self.hi) {
            (Some(lo), Some(hi)) => {
                if lo >= hi || self.bisected >= bisection_steps {
                    self.done = true;
                } else {
                    self.bisected += 1;
                    self.next = (lo * hi).sqrt();
                }
            }
            (None, Some(hi)) => {
                self.ladder += 1;
                self.next = hi / 2.0;
                if hi <= MIN_SIZE || self.ladder > MAX_LADDER_STEPS {
                    self.done = true;
                }
            }
            (Some(lo), None) => {
                self.ladder += 1;
                self.next = (lo * 2.0).min(self.kind.max_size());
                if lo >= self.kind.max_size() || self.ladder > MAX_LADDER_STEPS {
                    self.done = true;
                }
            }
            (None, None) => unreachable!("a size was just recorded"),
        }
        if self.done {
            return;
        }
        // Bisection may stop early once the bracket is finer than the precision worth having.
        if let (Some(lo), Some(hi)) = (self.lo, self.hi) {
            if hi / lo < 1.02 {
                self.done = true;
            }
        }
    }
}

/// A seed derived from (seed, a, b) alone (SplitMix64 finaliser; Steele, Lea, Flood,
/// OOPSLA 2014).
pub fn derive_seed(seed: u64, a: u64, b: u64) -> u64 {
    let mut z = seed
        ^ a.wrapping_mul(0x9E37_79B9_7F4A_7C15)
        ^ b.wrapping_add(1).wrapping_mul(0xD1B5_4A32_D192_ED03);
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

/// The context term that injects `size` of `kind` on `victim` while `aggressor` is active,
/// in every victim role.
pub fn injected_term(
    victim: QubitIx,
    aggressor: QubitIx,
    kind: ErrorKind,
    size: f64,
) -> ContextTerm {
    let mut error = ErrorSpec::none(1);
    match kind {
        ErrorKind::Stochastic => {
            let p = size.clamp(0.0, 1.0);
            error.pauli = vec![1.0 - p, p / 3.0, p / 3.0, p / 3.0];
        }
        ErrorKind::Coherent => {
            error.rotation = Some(Rotation { angle_rad: size, pauli: vec![1] });
        }
    }
    ContextTerm { victim, aggressor, role: Role::Both, error, line: 0, source: "context" }
}

/// Infidelity and half diamond distance per layer of an injected error (Watrous, The
/// Theory of Quantum Information (2018): a Pauli channel of total rate p has both equal to
/// p; a rotation by theta has sin^2(theta/2) and sin(theta/2)).
pub fn measures(kind: ErrorKind, size: f64) -> (f64, f64) {
    match kind {
        ErrorKind::Stochastic => (size, size),
        ErrorKind::Coherent => {
            let s = (size / 2.0).sin().abs();
            (s * s, s)
        }
    }
}

/// Simulates `shots` shots of every circuit of the design under `noise` and audits them,
/// with data and audit seeds derived from `seed`.
pub fn trial(
    layout: &Layout,
    design: &Design,
    noise: &Noise,
    shots: u64,
    audit_cfg: &AuditConfig,
    seed: u64,
    progress: &dyn Progress,
) -> Result<AuditReport> {
    let sim = SimConfig { shots, seed: derive_seed(seed, 0, 0) };
    progress.stage("simulating", design.circuits.len() as u64);
    let counts = simulate::simulate_with_progress(layout, &design.circuits, noise, &sim, &|| {
        progress.advance(1)
    })?;
    if progress.cancelled() {
        return Err(Error::Interrupted);
    }
    let cfg = AuditConfig { seed: derive_seed(seed, 0, 1), ..audit_cfg.clone() };
    audit::run(layout, &design.circuits, &counts, &cfg, progress)
}

/// True when the audit flags the edge {a, b} (verdict watch or recalibrate).
pub fn is_flagged(report: &AuditReport, a: &str, b: &str) -> bool {
    report.edges.iter().any(|e| flags(&e.a, &e.b, e.verdict, a, b))
}

/// True when an entry {ea, eb} with `verdict` is the pair {a, b}, flagged (watch or
/// recalibrate).
fn flags(ea: &str, eb: &str, verdict: Verdict, a: &str, b: &str) -> bool {
    ((ea == a && eb == b) || (ea == b && eb == a)) && verdict <= Verdict::Watch
}

/// Prefixes every stage name, so that a progress line says which audit of the plan runs.
struct Prefixed<'a> {
    inner: &'a dyn Progress,
    prefix: String,
}

impl Progress for Prefixed<'_> {
    fn stage(&self, name: &str, total: u64) {
        self.inner.stage(&format!("{}: {name}", self.prefix), total)
    }
    fn advance(&self, n: u64) {
        self.inner.advance(n)
    }
    fn cancelled(&self) -> bool {
        self.inner.cancelled()
    }
}

/// The median and the worst directed pair by baseline sensitivity, among pairs the design
/// tests and whose edge the baseline did not flag. Ties are broken by layout order
/// (victim, then aggressor).
fn representatives(layout: &Layout, rep: &AuditReport) -> Vec<Representative> {
    let pairs: Vec<(f64, QubitIx, QubitIx)> = rep
        .directed
        .iter()
        .filter(|d| d.sensitivity_tvd_per_layer.is_finite())
        .filter(|d| !is_flagged(rep, &d.victim, &d.aggressor))
        .filter_map(|d| {
            Some((
                d.sensitivity_tvd_per_layer,
                layout.qubit(&d.victim)?,
                layout.qubit(&d.aggressor)?,
            ))
        })
        .collect();
    median_and_worst(pairs)
}

/// The median and the worst of (sensitivity, victim, aggressor) triples, ties broken by
/// victim then aggressor index; one representative when they are the same pair.
fn median_and_worst(mut pairs: Vec<(f64, usize, usize)>) -> Vec<Representative> {
    pairs.sort_by(|x, y| x.0.total_cmp(&y.0).then(x.1.cmp(&y.1)).then(x.2.cmp(&y.2)));
    let Some(&worst) = pairs.last() else { return Vec::new() };
    let mid = pairs[(pairs.len() - 1) / 2];
    let rep = |role: &str, p: (f64, usize, usize)| Representative {
        role: role.into(),
        victim: p.1,
        aggressor: p.2,
        sensitivity: p.0,
    };
    if (mid.1, mid.2) == (worst.1, worst.2) {
        vec![rep("median+worst", worst)]
    } else {
        vec![rep("median", mid), rep("worst", worst)]
    }
}

/// True when two injections can share a data set: different victims (a context term only
/// changes its victim's outcomes, and a directed score uses only its victim's rows) and
/// different edges (an edge's verdict combines both directions).
fn compatible(a: &Representative, b: &Representative) -> bool {
    let edge = |r: &Representative| (r.victim.min(r.aggressor), r.victim.max(r.aggressor));
    a.victim != b.victim && edge(a) != edge(b)
}

/// Runs the whole plan.
pub fn plan(
    layout: &Layout,
    noise: &Noise,
    cfg: &PlanConfig,
    progress: &dyn Progress,
) -> Result<PlanReport> {
    cfg.validate()?;
    let design = design::design(layout, &cfg.design)?;
    let base = noise.without_crosstalk();
    let zz = noise.context().iter().filter(|t| t.source == "zz").count();
    let removed = RemovedTerms {
        context: noise.context().len() - zz,
        zz,
        readout_crosstalk: noise.readout_crosstalk().len(),
    };
    let mut shot_counts = Vec::with_capacity(cfg.shots.len());
    // The pairs are chosen once, at the first shot count, and searched at every count, so
    // that the minima of different counts are comparable.
    let mut pairs: Option<Vec<Representative>> = None;
    let mut gate_pairs: Option<Vec<Representative>> = None;
    for (i, &shots) in cfg.shots.iter().enumerate() {
        let bench = Bench { layout, design: &design, base: &base, cfg };
        let (plan, chosen, gates) =
            plan_shots(&bench, i, shots, pairs.as_deref(), gate_pairs.as_deref(), progress)?;
        shot_counts.push(plan);
        pairs.get_or_insert(chosen);
        gate_pairs.get_or_insert(gates);
    }
    let count = |c: Context| design.patterns.iter().filter(|p| p.context == c).count();
    let (gp, gq) = (count(Context::GatePair), count(Context::GateQubit));
    let gate_design = GateDesign {
        gate_pair_patterns: gp,
        gate_qubit_patterns: gq,
        circuits: design
            .manifest
            .iter()
            .filter(|r| matches!(r.context, Context::GatePair | Context::GateQubit))
            .count(),
    };
    let recommendation = recommend(&shot_counts, cfg.target_tvd_per_layer);
    let a = &cfg.audit;
    Ok(PlanReport {
        schema: SCHEMA,
        tool_version: env!("CARGO_PKG_VERSION").to_string(),
        layout: layout.name.clone(),
        circuits: design.circuits.len(),
        gate_design,
        parameters: PlanParameters {
            depths: cfg.design.depths.clone(),
            sequences: cfg.design.sequences,
            kinds: cfg.design.kinds.iter().map(|k| k.name().to_string()).collect(),
            design_seed: cfg.design.seed,
            seed: cfg.seed,
            model: a.family.name().to_string(),
            alpha: a.alpha,
            action_threshold_tvd_per_layer: a.action_threshold_tvd_per_layer,
            null_replicates: a.null_replicates,
            trials: cfg.trials,
            bisection_steps: cfg.bisection_steps,
            target_tvd_per_layer: cfg.target_tvd_per_layer,
        },
        removed_terms: removed,
        shot_counts,
        recommendation,
    })
}

/// What every shot count of a plan shares: the chip, the design, the crosstalk-free
/// baseline and the settings.
struct Bench<'a> {
    layout: &'a Layout,
    design: &'a Design,
    base: &'a Noise,
    cfg: &'a PlanConfig,
}

/// The plan at shot count `shots` (index `index` of the plan's counts), searching `pairs`
/// or, when None, the pairs this count's baseline picks; returns the pairs searched too.
fn plan_shots(
    bench: &Bench,
    index: usize,
    shots: u64,
    pairs: Option<&[Representative]>,
    gate_pairs: Option<&[Representative]>,
    progress: &dyn Progress,
) -> Result<(ShotPlan, Vec<Representative>, Vec<Representative>)> {
    let Bench { layout, design, base, cfg } = *bench;
    let start = Instant::now();
    let data_seed = |t: usize| derive_seed(cfg.seed, index as u64, t as u64);
    let mut audits = 0usize;
    let mut run = |noise: &Noise, t: usize| -> Result<AuditReport> {
        audits += 1;
        let p = Prefixed { inner: progress, prefix: format!("{shots} shots #{audits}") };
        trial(layout, design, noise, shots, &cfg.audit, data_seed(t), &p)
    };
    let baseline = run(base, 0)?;
    let finite = |v: f64| v.is_finite().then_some(v);
    let edges: Vec<EdgeLimit> = baseline
        .edges
        .iter()
        .map(|e| EdgeLimit {
            a: e.a.clone(),
            b: e.b.clone(),
            sensitivity_tvd_per_layer: e.sensitivity_tvd_per_layer,
            detection_limit_tvd_per_layer: e.detection_limit_tvd_per_layer,
        })
        .collect();
    let directed: Vec<DirectedLimit> = baseline
        .directed
        .iter()
        .map(|d| DirectedLimit {
            victim: d.victim.clone(),
            aggressor: d.aggressor.clone(),
            sensitivity_tvd_per_layer: d.sensitivity_tvd_per_layer,
            detection_limit_tvd_per_layer: d.detection_limit_tvd_per_layer,
        })
        .collect();
    let worst = edges
        .iter()
        .filter_map(|e| finite(e.sensitivity_tvd_per_layer).map(|v| (v, e)))
        .max_by(|x, y| x.0.total_cmp(&y.0));
    let reps = match pairs {
        Some(p) => p.to_vec(),
        None => representatives(layout, &baseline),
    };
    let mut searches: Vec<Search> = Vec::new();
    for kind in [ErrorKind::Stochastic, ErrorKind::Coherent] {
        for (pair, r) in reps.iter().enumerate() {
            let start = start_size(r.sensitivity, cfg);
            let start = match kind {
                ErrorKind::Stochastic => start,
                ErrorKind::Coherent => 2.0 * start.sqrt().min(1.0).asin(),
            };
            searches.push(Search::new(pair, kind, start));
        }
    }
    let compatible = |i: usize, j: usize| compatible(&reps[i], &reps[j]);
    let inject = |noise: &Noise, s: &Search| {
        let r = &reps[s.pair];
        noise.with_context_term(injected_term(r.victim, r.aggressor, s.kind, s.next))
    };
    let flagged = |rep: &AuditReport, pair: usize| {
        let r = &reps[pair];
        is_flagged(rep, layout.id(r.victim), layout.id(r.aggressor))
    };
    run_searches(&mut searches, &compatible, &inject, &flagged, &mut run, base, cfg)?;
    let results = search_results(searches, &|pair| {
        let r = &reps[pair];
        (
            r.role.clone(),
            layout.id(r.victim).to_string(),
            layout.id(r.aggressor).to_string(),
            r.sensitivity,
        )
    });
    // Gate pairs: the same, on the gate-on-gate directions of the design's gate-pair circuits.
    let gate_directed: Vec<DirectedLimit> = baseline
        .gates
        .directed
        .iter()
        .map(|d| DirectedLimit {
            victim: d.victim.clone(),
            aggressor: d.aggressor.clone(),
            sensitivity_tvd_per_layer: d.sensitivity_tvd_per_layer,
            detection_limit_tvd_per_layer: d.detection_limit_tvd_per_layer,
        })
        .collect();
    let gate_reps = match gate_pairs {
        Some(p) => p.to_vec(),
        None => gate_representatives(layout, &baseline),
    };
    let on_gates: Vec<f64> =
        gate_on_gate(layout, &gate_directed).filter_map(|(_, _, v)| finite(v)).collect();
    let mut gate_searches: Vec<Search> = gate_reps
        .iter()
        .enumerate()
        .map(|(pair, r)| Search::new(pair, ErrorKind::Stochastic, start_size(r.sensitivity, cfg)))
        .collect();
    let gate_compatible = |i: usize, j: usize| {
        let (x, y) = (&gate_reps[i], &gate_reps[j]);
        x.victim != y.victim && (x.victim, x.aggressor) != (y.aggressor, y.victim)
    };
    let gate_inject = |noise: &Noise, s: &Search| {
        let r = &gate_reps[s.pair];
        noise.with_gate_context_term(injected_gate_term(layout, r.victim, r.aggressor, s.next))
    };
    let gate_flagged = |rep: &AuditReport, pair: usize| {
        let r = &gate_reps[pair];
        is_gate_pair_flagged(
            rep,
            &coupler_label(layout, r.victim),
            &coupler_label(layout, r.aggressor),
        )
    };
    run_searches(
        &mut gate_searches,
        &gate_compatible,
        &gate_inject,
        &gate_flagged,
        &mut run,
        base,
        cfg,
    )?;
    let gate_results = search_results(gate_searches, &|pair| {
        let r = &gate_reps[pair];
        (
            r.role.clone(),
            coupler_label(layout, r.victim),
            coupler_label(layout, r.aggressor),
            r.sensitivity,
        )
    });
    let plan = ShotPlan {
        shots,
        edge_sensitivity_median_tvd_per_layer: median(
            edges.iter().filter_map(|e| finite(e.sensitivity_tvd_per_layer)).collect(),
        )
        .unwrap_or(0.0),
        edge_sensitivity_worst_tvd_per_layer: worst.map_or(0.0, |w| w.0),
        worst_edge: worst.map_or(String::new(), |w| format!("{}-{}", w.1.a, w.1.b)),
        untested_edges: edges.iter().filter(|e| !e.sensitivity_tvd_per_layer.is_finite()).count(),
        edge_limit_median_tvd_per_layer: median(
            edges.iter().map(|e| e.detection_limit_tvd_per_layer).collect(),
        )
        .unwrap_or(0.0),
        edge_limit_worst_tvd_per_layer: edges
            .iter()
            .map(|e| e.detection_limit_tvd_per_layer)
            .fold(0.0, f64::max),
        baseline_flagged: baseline
            .edges
            .iter()
            .filter(|e| e.verdict <= Verdict::Watch)
            .map(|e| format!("{}-{}", e.a, e.b))
            .collect(),
        edges,
        directed,
        searches: results,
        gate_sensitivity_median_tvd_per_layer: median(on_gates.clone()).unwrap_or(0.0),
        gate_sensitivity_worst_tvd_per_layer: on_gates.iter().copied().fold(0.0, f64::max),
        gate_directed,
        gate_searches: gate_results,
        audits,
        elapsed_seconds: start.elapsed().as_secs_f64(),
    };
    Ok((plan, reps, gate_reps))
}

/// Where a search starts: where the pair's sensitivity says rows would just need slack, or at
/// the target when that is larger; the ladder corrects either way.
fn start_size(sensitivity: f64, cfg: &PlanConfig) -> f64 {
    (1.5 * sensitivity).max(cfg.target_tvd_per_layer).min(0.5)
}

/// Runs searches to completion. Each round groups the live searches whose injections can
/// share a data set (`compatible` on their pair indices), injects each one's current size
/// (`inject`) into the baseline, and records whether every trial flagged its pair (`flagged`).
fn run_searches(
    searches: &mut [Search],
    compatible: &dyn Fn(usize, usize) -> bool,
    inject: &dyn Fn(&Noise, &Search) -> Result<Noise>,
    flagged: &dyn Fn(&AuditReport, usize) -> bool,
    run: &mut dyn FnMut(&Noise, usize) -> Result<AuditReport>,
    base: &Noise,
    cfg: &PlanConfig,
) -> Result<()> {
    while searches.iter().any(|s| !s.done) {
        // Greedy groups of searches whose injections can share data sets.
        let mut groups: Vec<Vec<usize>> = Vec::new();
        for (k, s) in searches.iter().enumerate().filter(|(_, s)| !s.done) {
            let fits = |g: &Vec<usize>| g.iter().all(|&j| compatible(searches[j].pair, s.pair));
            match groups.iter_mut().find(|g| fits(g)) {
                Some(g) => g.push(k),
                None => groups.push(vec![k]),
            }
        }
        for g in groups {
            let mut alive: Vec<usize> = g.clone();
            let mut runs = vec![0usize; searches.len()];
            for t in 0..cfg.trials {
                if alive.is_empty() {
                    break;
                }
                let mut noise = base.clone();
                for &k in &alive {
                    noise = inject(&noise, &searches[k])?;
                }
                let rep = run(&noise, t)?;
                for &k in &alive {
                    runs[k] += 1;
                }
                alive.retain(|&k| flagged(&rep, searches[k].pair));
            }
            for &k in &g {
                let size = searches[k].next;
                let flagged = alive.contains(&k);
                searches[k].record(size, runs[k], flagged, cfg.bisection_steps);
            }
        }
    }
    Ok(())
}

/// The finished searches as results; `pair` gives a pair's role, victim, aggressor and
/// sensitivity.
fn search_results(
    searches: Vec<Search>,
    pair: &dyn Fn(usize) -> (String, String, String, f64),
) -> Vec<SearchResult> {
    searches
        .into_iter()
        .map(|s| {
            let (role, victim, aggressor, sensitivity) = pair(s.pair);
            let m = s.hi.map(|h| measures(s.kind, h));
            SearchResult {
                role,
                victim,
                aggressor,
                pair_sensitivity_tvd_per_layer: sensitivity,
                kind: s.kind,
                smallest_flagged: s.hi,
                largest_unflagged: match (s.lo, s.hi) {
                    (Some(lo), Some(hi)) if lo < hi => Some(lo),
                    (lo, None) => lo,
                    _ => None,
                },
                infidelity: m.map(|m| m.0),
                half_diamond: m.map(|m| m.1),
                steps: s.steps,
            }
        })
        .collect()
}

/// A coupler written `a-b` with layout ids in the layout's order.
fn coupler_label(layout: &Layout, c: usize) -> String {
    let (a, b) = layout.couplers[c];
    format!("{}-{}", layout.id(a), layout.id(b))
}

/// A unit label of a gate direction as a coupler index, when it names a coupler and no qubit.
fn as_coupler(layout: &Layout, label: &str) -> Option<usize> {
    if layout.qubit(label).is_some() {
        return None;
    }
    crate::design::patterns::coupler_by_name(layout, label)
}

/// The gate-on-gate directions (victim coupler, aggressor coupler, sensitivity) of a list of
/// gate directions.
fn gate_on_gate<'a>(
    layout: &'a Layout,
    directed: &'a [DirectedLimit],
) -> impl Iterator<Item = (usize, usize, f64)> + 'a {
    directed.iter().filter_map(|d| {
        Some((
            as_coupler(layout, &d.victim)?,
            as_coupler(layout, &d.aggressor)?,
            d.sensitivity_tvd_per_layer,
        ))
    })
}

/// The median and the worst gate-on-gate direction by baseline sensitivity, among those the
/// design tests and whose pair the baseline did not flag (ties by layout order).
fn gate_representatives(layout: &Layout, rep: &AuditReport) -> Vec<Representative> {
    let directed: Vec<DirectedLimit> = rep
        .gates
        .directed
        .iter()
        .map(|d| DirectedLimit {
            victim: d.victim.clone(),
            aggressor: d.aggressor.clone(),
            sensitivity_tvd_per_layer: d.sensitivity_tvd_per_layer,
            detection_limit_tvd_per_layer: d.detection_limit_tvd_per_layer,
        })
        .collect();
    let pairs: Vec<(f64, usize, usize)> = gate_on_gate(layout, &directed)
        .filter(|&(v, x, s)| {
            s.is_finite()
                && !is_gate_pair_flagged(rep, &coupler_label(layout, v), &coupler_label(layout, x))
        })
        .map(|(v, x, s)| (s, v, x))
        .collect();
    median_and_worst(pairs)
}

/// The gate-context term that injects a two-qubit depolarizing rate `p` per layer on the
/// victim coupler's gate while the aggressor coupler runs its gate (couplers by index).
pub fn injected_gate_term(
    layout: &Layout,
    victim: usize,
    aggressor: usize,
    p: f64,
) -> GateContextTerm {
    let (a, b) = layout.couplers[victim];
    let (c, d) = layout.couplers[aggressor];
    let p = p.clamp(0.0, 1.0);
    let mut error = ErrorSpec::none(2);
    error.pauli = std::iter::once(1.0 - p).chain(std::iter::repeat_n(p / 15.0, 15)).collect();
    GateContextTerm {
        victim: [a, b],
        aggressor: Aggressor::Coupler(c.min(d), c.max(d)),
        error,
        line: 0,
    }
}

/// True when the audit flags the gate pair {a, b} (couplers or a qubit and a coupler, as the
/// report writes them; verdict watch or recalibrate).
pub fn is_gate_pair_flagged(report: &AuditReport, a: &str, b: &str) -> bool {
    report.gates.pairs.iter().any(|e| flags(&e.a, &e.b, e.verdict, a, b))
}

/// The stochastic error the worst searched pair needs before it is flagged, per shot count
/// (infinite when it never was).
fn worst_stochastic(s: &ShotPlan) -> f64 {
    s.searches
        .iter()
        .filter(|r| r.kind == ErrorKind::Stochastic)
        .map(|r| r.smallest_flagged.unwrap_or(f64::INFINITY))
        .fold(0.0, f64::max)
}

/// Rounds a shot count up to two significant digits.
fn round_up(n: f64) -> u64 {
    if !n.is_finite() || n <= 1.0 {
        return 1;
    }
    let scale = 10f64.powi((n.log10().floor() as i32 - 1).max(0));
    // A hair below the next step, so that rounding noise does not cost a whole step.
    ((n / scale - 1e-9).ceil() * scale) as u64
}

/// The smallest shot count at which the worst searched pair's smallest flagged stochastic
/// error is at most `target`: a tested count, an interpolation linear in 1/sqrt(shots)
/// between the last failing and the first passing count, or an extrapolation from the
/// largest count assuming the minimum scales as 1/sqrt(shots) (binomial error: common
/// practice).
fn recommend(plans: &[ShotPlan], target: f64) -> Recommendation {
    let depths = "these depths";
    let pm = |x: f64| format!("{:.2} x1e-3", x * 1e3);
    let pts: Vec<(u64, f64)> = plans.iter().map(|s| (s.shots, worst_stochastic(s))).collect();
    if pts.is_empty() || pts.iter().all(|p| p.1 == 0.0) {
        return Recommendation {
            text: "no directed pair could be searched, so no recommendation can be given".into(),
            shots_needed: None,
            basis: "none".into(),
        };
    }
    let searched: Vec<String> = {
        let mut v: Vec<String> = Vec::new();
        for s in plans.iter().flat_map(|p| &p.searches) {
            let label = format!("{}<-{} ({})", s.victim, s.aggressor, s.role);
            if !v.contains(&label) {
                v.push(label);
            }
        }
        v
    };
    let sentence = |n: u64, how: &str| {
        format!(
            "to see {} per layer of stochastic crosstalk on every edge, take at least {n} shots \
             per circuit at {depths}{how}; measured on the pairs of median and lowest \
             sensitivity ({}), so an edge whose victim drifts or carries error the model \
             lacks can need more",
            pm(target),
            searched.join(", ")
        )
    };
    // The first tested count from which every larger one suffices too (a pair limited by
    // drift can fail at more shots than a count that passed by chance).
    let first = (0..pts.len()).find(|&i| pts[i..].iter().all(|p| p.1 <= target));
    match first {
        Some(0) => Recommendation {
            text: sentence(pts[0].0, " (the smallest tested count already suffices; fewer may do)"),
            shots_needed: Some(pts[0].0),
            basis: "tested".into(),
        },
        Some(i) => {
            let (n1, s1) = pts[i - 1];
            let (n2, s2) = pts[i];
            let (x1, x2) = (1.0 / (n1 as f64).sqrt(), 1.0 / (n2 as f64).sqrt());
            if s1.is_finite() && s1 > s2 {
                let x = x1 + (target - s1) * (x2 - x1) / (s2 - s1);
                let n = round_up(1.0 / (x * x)).clamp(n1 + 1, n2);
                Recommendation {
                    text: sentence(
                        n,
                        &format!(" (interpolated in 1/sqrt(shots) between {n1} and {n2})"),
                    ),
                    shots_needed: Some(n),
                    basis: "interpolated".into(),
                }
            } else {
                Recommendation {
                    text: sentence(n2, &format!(" ({n1} shots did not suffice)")),
                    shots_needed: Some(n2),
                    basis: "tested".into(),
                }
            }
        }
        None => {
            let (n, s) = *pts.last().unwrap_or(&(0, f64::INFINITY));
            let (n0, s0) = pts[0];
            // Log-log slope of the minimum against shots: -1/2 when shot noise limits it.
            let slope = (s / s0).ln() / (n as f64 / n0 as f64).ln();
            let shot_limited = pts.len() < 2 || slope < -0.25;
            if s.is_finite() && s > 0.0 && !shot_limited {
                Recommendation {
                    text: format!(
                        "no tested shot count suffices to see {} per layer of stochastic \
                         crosstalk on every edge, and more shots alone will not: the worst \
                         pair's smallest flagged error barely falls with shots ({} at {n0}, {} \
                         at {n}; log-log slope {slope:.2}, shot noise alone gives -0.5), so it \
                         is limited by error that is not shot noise (drift, or intrinsic error \
                         the crosstalk-free model does not capture, on its victim); fix that \
                         first",
                        pm(target),
                        pm(s0),
                        pm(s)
                    ),
                    shots_needed: None,
                    basis: "not-shot-limited".into(),
                }
            } else if s.is_finite() && s > 0.0 {
                let need = round_up(n as f64 * (s / target).powi(2));
                Recommendation {
                    text: format!(
                        "no tested shot count suffices to see {} per layer of stochastic \
                         crosstalk on every edge (at {n} shots the worst pair needs {}); \
                         assuming 1/sqrt(shots) scaling, about {need} shots per circuit at \
                         {depths} would",
                        pm(target),
                        pm(s)
                    ),
                    shots_needed: Some(need),
                    basis: "extrapolated".into(),
                }
            } else {
                Recommendation {
                    text: format!(
                        "no tested shot count suffices to see {} per layer of stochastic \
                         crosstalk on every edge, and the worst pair was never flagged, so no \
                         shot count can be extrapolated; change the design",
                        pm(target)
                    ),
                    shots_needed: None,
                    basis: "none".into(),
                }
            }
        }
    }
}

/// `plan.json`: the plan, pretty-printed, every number at full precision.
pub fn plan_json(report: &PlanReport) -> Vec<u8> {
    let mut v = serde_json::to_vec_pretty(report).expect("plan types always serialise");
    v.push(b'\n');
    v
}

/// The plan as terminal text: limits and smallest flagged errors per shot count, then the
/// recommendation; tables fit the style's width.
pub fn render_terminal(r: &PlanReport, style: crate::report::terminal::Style) -> String {
    use crate::report::terminal::{self, columns, number, push_row, text, wrap};
    let pm = |x: f64| terminal::per_mille(x);
    let opt = |x: Option<f64>, f: &dyn Fn(f64) -> String| x.map_or("not flagged".into(), f);
    let mut out = wrap(
        &format!(
            "slackmap plan for layout {} ({} circuits per shot count; depths {:?}, {} sequences; \
             {} null replicates, {} trial(s) per size)\n\
             Baseline: the noise scenario without its crosstalk ({} context, {} zz, {} readout \
             crosstalk terms removed).",
            r.layout,
            r.circuits,
            r.parameters.depths,
            r.parameters.sequences,
            r.parameters.null_replicates,
            r.parameters.trials,
            r.removed_terms.context,
            r.removed_terms.zz,
            r.removed_terms.readout_crosstalk
        ),
        style.width,
        "",
    );
    out.push('\n');
    let mut cols = columns(&[
        ("shots", 0),
        ("sensitivity\nmedian", 0),
        ("sensitivity\nworst (edge)", 0),
        ("null limit\nmedian/worst", 2),
        ("false\nalarms", 1),
        ("audits", 3),
        ("seconds", 3),
    ]);
    for s in &r.shot_counts {
        let cells = [
            number(s.shots.to_string()),
            number(pm(s.edge_sensitivity_median_tvd_per_layer)),
            number(format!("{} ({})", pm(s.edge_sensitivity_worst_tvd_per_layer), s.worst_edge)),
            number(format!(
                "{}/{}",
                pm(s.edge_limit_median_tvd_per_layer),
                pm(s.edge_limit_worst_tvd_per_layer)
            )),
            number(s.baseline_flagged.len().to_string()),
            number(s.audits.to_string()),
            number(format!("{:.0}", s.elapsed_seconds)),
        ];
        push_row(&mut cols, cells);
    }
    out.push_str(&terminal::heading(
        "Sensitivity of the crosstalk-free baseline per edge, x1e-3 TVD per layer",
        style,
    ));
    terminal::fitted_table(cols, style, "plan.json", &mut out);
    out.push_str(&wrap(
        "Sensitivity: the least estimate at which some row of the edge would need slack, to \
         first order. Below it nothing can be seen; detection needs more than that (the \
         permutation null must also tell it apart), which the searched minima below measure. \
         The permutation-null limit is zero wherever the clean data never needed context slack.",
        style.width,
        "",
    ));
    out.push('\n');
    out.push_str(&terminal::heading(
        "Smallest context error the audit flags (watch or recalibrate)",
        style,
    ));
    let mut cols = columns(&[
        ("shots", 0),
        ("pair (victim<-aggressor)", 0),
        ("stochastic\nx1e-3", 0),
        ("coherent\nangle rad", 0),
        ("infidelity", 2),
        ("half-diamond\nx1e-3", 1),
    ]);
    for s in &r.shot_counts {
        let pairs: Vec<(String, String)> = {
            let mut v: Vec<(String, String)> = Vec::new();
            for x in &s.searches {
                let key = (format!("{}<-{} ({})", x.victim, x.aggressor, x.role), x.victim.clone());
                if !v.contains(&key) {
                    v.push(key);
                }
            }
            v
        };
        for (label, _) in pairs {
            let find = |k: ErrorKind| {
                s.searches.iter().find(|x| {
                    x.kind == k && format!("{}<-{} ({})", x.victim, x.aggressor, x.role) == label
                })
            };
            let st = find(ErrorKind::Stochastic);
            let co = find(ErrorKind::Coherent);
            let cells = [
                number(s.shots.to_string()),
                text(label),
                number(opt(st.and_then(|x| x.smallest_flagged), &|v| pm(v))),
                number(opt(co.and_then(|x| x.smallest_flagged), &|v| format!("{v:.4}"))),
                number(opt(co.and_then(|x| x.infidelity), &|v| format!("{v:.1e}"))),
                number(opt(co.and_then(|x| x.half_diamond), &|v| pm(v))),
            ];
            push_row(&mut cols, cells);
        }
    }
    terminal::fitted_table(cols, style, "plan.json", &mut out);
    let g = &r.gate_design;
    if g.gate_pair_patterns + g.gate_qubit_patterns > 0 {
        out.push('\n');
        out.push_str(&terminal::heading(
            &format!(
                "Gate pairs: {} gate-pair and {} gate-qubit patterns, {} of the {} circuits; \
                 smallest gate-context error the audit flags (two-qubit depolarizing on the \
                 victim's gate while the aggressor's gate runs)",
                g.gate_pair_patterns, g.gate_qubit_patterns, g.circuits, r.circuits
            ),
            style,
        ));
        let mut cols = columns(&[
            ("shots", 0),
            ("sensitivity\nmedian/worst", 0),
            ("pair (victim<-aggressor)", 0),
            ("stochastic\nx1e-3", 0),
        ]);
        for s in &r.shot_counts {
            let sens = format!(
                "{}/{}",
                pm(s.gate_sensitivity_median_tvd_per_layer),
                pm(s.gate_sensitivity_worst_tvd_per_layer)
            );
            if s.gate_searches.is_empty() {
                let cells = [
                    number(s.shots.to_string()),
                    number(sens.clone()),
                    text("no gate-on-gate direction to search"),
                    number("-"),
                ];
                push_row(&mut cols, cells);
            }
            for x in &s.gate_searches {
                let cells = [
                    number(s.shots.to_string()),
                    number(sens.clone()),
                    text(format!("{}<-{} ({})", x.victim, x.aggressor, x.role)),
                    number(opt(x.smallest_flagged, &|v| pm(v))),
                ];
                push_row(&mut cols, cells);
            }
        }
        terminal::fitted_table(cols, style, "plan.json", &mut out);
        out.push_str(&wrap(
            "The recommendation below is for qubit edges; the gate pairs' smallest flagged \
             rate above is their detection level at each shot count.",
            style.width,
            "",
        ));
    }
    out.push('\n');
    out.push_str(&wrap(&format!("Recommendation: {}.", r.recommendation.text), style.width, ""));
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn coherent_measures_match_the_unitary_formulas() {
        // A rotation by theta: infidelity sin^2(theta/2), half diamond sin(theta/2)
        // (Watrous 2018, unitary channels). theta = 0.08: 1.5991e-3 and 0.039989.
        let (inf, hd) = measures(ErrorKind::Coherent, 0.08);
        assert!((inf - 1.5991e-3).abs() < 1e-6, "{inf}");
        assert!((hd - 0.039989).abs() < 1e-5, "{hd}");
        let (inf, hd) = measures(ErrorKind::Stochastic, 2e-3);
        assert!((inf - 2e-3).abs() < 1e-15 && (hd - 2e-3).abs() < 1e-15);
    }

    #[test]
    fn search_brackets_then_bisects() {
        let mut s = Search {
            pair: 0,
            kind: ErrorKind::Stochastic,
            next: 1e-3,
            lo: None,
            hi: None,
            bisected: 0,
            ladder: 0,
            steps: Vec::new(),
            done: false,
        };
        // Flagged from 3e-3 up: the ladder goes 1e-3, 2e-3, 4e-3, then bisects 3 times.
        while !s.done {
            let x = s.next;
            s.record(x, 1, x >= 3e-3, 3);
        }
        let hi = s.hi.unwrap();
        let lo = s.lo.unwrap();
        assert!(lo < 3e-3 && hi >= 3e-3, "{lo} {hi}");
        assert!(hi / lo < 2f64.powf(1.0 / 8.0) + 1e-9, "{lo} {hi}");
        assert_eq!(s.steps.len(), 6);
    }

    #[test]
    fn recommendation_interpolates_in_inverse_root_shots() {
        let plan = |shots: u64, min: f64| ShotPlan {
            shots,
            edge_sensitivity_median_tvd_per_layer: 0.0,
            edge_sensitivity_worst_tvd_per_layer: 0.0,
            worst_edge: String::new(),
            untested_edges: 0,
            edge_limit_median_tvd_per_layer: 0.0,
            edge_limit_worst_tvd_per_layer: 0.0,
            edges: Vec::new(),
            directed: Vec::new(),
            baseline_flagged: Vec::new(),
            gate_directed: Vec::new(),
            gate_sensitivity_median_tvd_per_layer: 0.0,
            gate_sensitivity_worst_tvd_per_layer: 0.0,
            gate_searches: Vec::new(),
            searches: vec![SearchResult {
                role: "worst".into(),
                victim: "q0".into(),
                aggressor: "q1".into(),
                pair_sensitivity_tvd_per_layer: 0.0,
                kind: ErrorKind::Stochastic,
                smallest_flagged: Some(min),
                largest_unflagged: None,
                infidelity: Some(min),
                half_diamond: Some(min),
                steps: Vec::new(),
            }],
            audits: 1,
            elapsed_seconds: 0.0,
        };
        // Exact 1/sqrt(N) data: min = 0.04/sqrt(N) reaches 1e-3 at N = 1600.
        let f = |n: u64| 0.04 / (n as f64).sqrt();
        let r = recommend(&[plan(300, f(300)), plan(3000, f(3000))], 1e-3);
        assert_eq!(r.basis, "interpolated");
        assert_eq!(r.shots_needed, Some(1600));
        let r = recommend(&[plan(300, f(300)), plan(1000, f(1000))], 1e-3);
        assert_eq!(r.basis, "extrapolated");
        assert_eq!(r.shots_needed, Some(1600));
        assert!(r.text.contains("no tested shot count suffices"), "{}", r.text);
        // A minimum that does not fall with shots is not extrapolated.
        let r = recommend(&[plan(300, 3.1e-3), plan(3000, 3.8e-3)], 1e-3);
        assert_eq!((r.basis.as_str(), r.shots_needed), ("not-shot-limited", None));
        let r = recommend(&[plan(3000, f(3000))], 1e-3);
        assert_eq!((r.basis.as_str(), r.shots_needed), ("tested", Some(3000)));
        // A count that passes is not recommended when a larger one fails after it.
        let r = recommend(&[plan(300, 0.9e-3), plan(1000, 2e-3), plan(3000, 0.5e-3)], 1e-3);
        assert_eq!(r.basis, "interpolated");
        assert!(r.shots_needed.is_some_and(|n| n > 1000 && n <= 3000), "{r:?}");
        let r = recommend(&[plan(300, 0.9e-3), plan(1000, 2e-3)], 1e-3);
        assert_eq!((r.basis.as_str(), r.shots_needed), ("not-shot-limited", None));
    }

    #[test]
    fn derived_seeds_differ_by_index() {
        let s: Vec<u64> = (0..4).flat_map(|a| (0..4).map(move |b| derive_seed(7, a, b))).collect();
        let mut d = s.clone();
        d.sort_unstable();
        d.dedup();
        assert_eq!(d.len(), s.len());
    }
}
