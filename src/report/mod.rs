//! Audit results as the user sees them: the serialisable report types and their renderers.
//!
//! Only this module knows serde for outputs. Every field is documented here because this
//! is the wire format of `audit.json` (schema [`SCHEMA`]). Each output format is one file
//! behind [`Render`], which returns bytes; where the bytes go is decided by [`write_folder`].

use std::path::Path;

use rayon::prelude::*;
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

use crate::error::Result;

pub mod colour;
pub mod csv;
pub mod html;
pub mod json;
pub mod markup;
pub mod schema;
pub mod special;
pub mod svg;
pub mod terminal;

pub use special::SpecialWord;

/// Version of the `audit.json` format written by this build. Schema 3 writes numbers that
/// have no finite value as words ([`SpecialWord`]), records a reason code per edge, the
/// label and creation time, and per-pair depth profiles, and no longer carries a
/// bias-corrected centre; [`json::read`] still reads schema 2.
pub const SCHEMA: u32 = 3;

/// The caution every audit output carries, because a score can be mistaken for a diagnosis.
pub const CAUTION: &str = "Slack bounds unmodelled error in the data's own units (total variation \
distance per layer); it does not name a physical mechanism. A clean audit is no guarantee outside \
the contexts the circuits tested.";

/// A complete audit result: what `audit.json` holds.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq, JsonSchema)]
#[schemars(title = "slackmap audit.json")]
pub struct AuditReport {
    /// Format version, [`SCHEMA`].
    pub schema: u32,
    /// The slackmap version that wrote the file.
    pub tool_version: String,
    /// The user's label for this audit (`audit --label`), e.g. a chip and cooldown name.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub label: Option<String>,
    /// When the audit was written, as RFC 3339 UTC (`2026-12-02T06:52:00Z`). Taken from the
    /// `SOURCE_DATE_EPOCH` environment variable (seconds since 1970) when it is set, so that
    /// two runs on the same inputs give the same bytes; otherwise from the system clock. It
    /// is the only field that differs between two otherwise identical runs. Absent in files
    /// the library writes without the command line.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub created: Option<String>,
    /// The caution that slack names no mechanism (see [`CAUTION`]).
    pub caution: String,
    /// The layout analysed.
    pub layout: LayoutSummary,
    /// The input files and their SHA-256 digests.
    pub inputs: Vec<InputFile>,
    /// The settings of the run.
    pub parameters: Parameters,
    /// Sizes of the data.
    pub data: DataSummary,
    /// Quality of the crosstalk-free fit, before and after slack.
    pub fit: FitSummary,
    /// One entry per neighbour pair, ranked: detected edges first by score, then the rest.
    pub edges: Vec<EdgeReport>,
    /// One entry per directed neighbour pair (victim, aggressor).
    pub directed: Vec<DirectedReport>,
    /// Intrinsic (non-context) slack and fitted error per operation kind.
    pub intrinsic: Vec<IntrinsicReport>,
    /// Readout slack and fitted readout error per measured qubit.
    pub readout: Vec<ReadoutReport>,
    /// Non-fatal findings, each once.
    pub warnings: Vec<WarningReport>,
    /// Gate-on-gate crosstalk: a coupler's two-qubit gate disturbed by a nearby gate or a
    /// driven qubit, and a qubit disturbed by a nearby gate. Absent when the circuits measured
    /// no gate pair apart from other neighbours (`design --gate-pairs` does).
    #[serde(default, skip_serializing_if = "GateReport::is_empty")]
    pub gates: GateReport,
    /// Per-row fit diagnostics, written to `rows.csv` only (not part of `audit.json`, whose
    /// size they would multiply); empty when a report is re-read from `audit.json`.
    #[serde(skip)]
    pub rows: Vec<RowReport>,
}

/// Fit diagnostics of one row (circuit, block), for `rows.csv` (and the partial files of a
/// sharded audit, so that `merge` writes it too).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct RowReport {
    /// Circuit id.
    pub circuit: String,
    /// Block qubit ids joined by '-'.
    pub block: String,
    /// True for a reference row (no occurrence had an active neighbour).
    pub reference: bool,
    /// Shots of the circuit.
    pub shots: u64,
    /// Timed layers of the circuit.
    pub timed_layers: u32,
    /// LLR of the crosstalk-free prediction against the row's frequencies.
    #[serde(with = "special::number")]
    pub llr_before: f64,
    /// The row's requirement d_row, TVD.
    #[serde(with = "special::number")]
    pub requirement_tvd: f64,
    /// The slack the solved budgets give the row, TVD (at least the requirement).
    #[serde(with = "special::number")]
    pub slack_tvd: f64,
    /// LLR after the prediction is weakened by that slack.
    #[serde(with = "special::number")]
    pub llr_after: f64,
}

/// The layout, as far as a reader of the report needs it.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq, JsonSchema)]
pub struct LayoutSummary {
    /// Layout name.
    pub name: String,
    /// Qubit ids in layout order.
    pub qubits: Vec<String>,
    /// Qubit drawing positions (x, y), aligned with `qubits`; null where the layout has none.
    pub positions: Vec<Option<[f64; 2]>>,
    /// Couplers as id pairs.
    pub couplers: Vec<[String; 2]>,
    /// Number of neighbour pairs (edges of the analysis).
    pub neighbour_pairs: usize,
}

/// One input file.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq, JsonSchema)]
pub struct InputFile {
    /// What the file is: `layout`, `circuits` or `counts`.
    pub role: String,
    /// The path as given.
    pub path: String,
    /// Lower-case hex SHA-256 of the file's bytes (of the concatenated files, in name
    /// order, for a folder).
    pub sha256: String,
}

/// The run's settings.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq, JsonSchema)]
pub struct Parameters {
    /// Error family of the crosstalk-free model: `depolarizing`, `pauli` or `pauli+coherent`.
    pub model: String,
    /// Family-wise error level for row requirements and detection.
    pub alpha: f64,
    /// Action threshold for `recalibrate`, TVD per layer.
    pub action_threshold_tvd_per_layer: f64,
    /// Number of context-permutation null replicates per directed pair.
    pub null_replicates: usize,
    /// Seed of every random draw.
    pub seed: u64,
    /// Bit order of the counts file as read: `as-measured` or `reversed`.
    pub bit_order: String,
    /// Bootstrap replicates (0 = none).
    pub replicates: usize,
    /// Bootstrap resampling scheme: `shots` or `circuits`.
    pub resample: String,
    /// Two-sided interval level.
    pub level: f64,
}

/// Sizes of the data.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq, JsonSchema)]
pub struct DataSummary {
    /// Circuits in the circuit file.
    pub circuits: usize,
    /// Circuits that have counts.
    pub circuits_with_counts: usize,
    /// Rows of the analysis (circuit, block).
    pub rows: usize,
    /// Rows whose every occurrence has no active neighbour.
    pub reference_rows: usize,
    /// Fewest shots of any circuit.
    pub shots_min: u64,
    /// Median shots per circuit.
    pub shots_median: u64,
    /// Most shots of any circuit.
    pub shots_max: u64,
    /// Total shots.
    pub shots_total: u64,
}

/// Fit quality of the crosstalk-free model.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq, JsonSchema)]
pub struct FitSummary {
    /// Log-likelihood ratio 2 sum n ln(f/p) over reference rows, against the data's own
    /// frequencies.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub reference_llr: f64,
    /// Degrees of freedom of the reference fit: outcomes minus one, summed over reference
    /// rows, minus identified parameters.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub reference_dof: f64,
    /// (LLR - dof) / sqrt(2 dof) over reference rows: near 0 when the model fits.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub reference_excess_sigma: f64,
    /// LLR over all rows with the fitted model and no slack.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub all_llr_before: f64,
    /// Degrees of freedom over all rows (outcomes minus one summed, minus parameters).
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub all_dof: f64,
    /// Excess in standard deviations over all rows before slack.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub all_excess_sigma_before: f64,
    /// LLR over all rows after each row's prediction is weakened by its slack budget.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub all_llr_after: f64,
    /// Excess in standard deviations over all rows after slack.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub all_excess_sigma_after: f64,
    /// The per-row LLR threshold used (largest over row outcome counts).
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub row_threshold_llr: f64,
    /// Rows that needed any slack at all.
    pub rows_needing_slack: usize,
    /// Fitted parameters the data could not identify (held at zero), as `kind:parameter`.
    pub unidentified: Vec<String>,
    /// Fits that did not converge, by qubit or coupler.
    pub not_converged: Vec<String>,
}

/// Verdict for one edge.
#[derive(
    Clone, Copy, Debug, Serialize, Deserialize, PartialEq, Eq, PartialOrd, Ord, JsonSchema,
)]
#[serde(rename_all = "kebab-case")]
pub enum Verdict {
    /// Detected and above the action threshold: recalibrate this pair.
    Recalibrate,
    /// Detected but not above the action threshold.
    Watch,
    /// Positive score that another aggressor could carry instead, and the design cannot
    /// tell which.
    Confounded,
    /// Needs context slack, but no permutation null was run (`--null-replicates 0`), so it
    /// was not tested: neither detected nor clean.
    NotTested,
    /// Nothing found.
    Clean,
}

impl Verdict {
    /// The verdict's word in tables.
    pub fn word(self) -> &'static str {
        match self {
            Verdict::Recalibrate => "recalibrate",
            Verdict::Watch => "watch",
            Verdict::Confounded => "confounded",
            Verdict::NotTested => "not-tested",
            Verdict::Clean => "clean",
        }
    }
}

/// One neighbour pair {a, b}.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq, JsonSchema)]
pub struct EdgeReport {
    /// First qubit id (lower layout index).
    pub a: String,
    /// Second qubit id.
    pub b: String,
    /// True when a and b share a coupler.
    pub coupled: bool,
    /// Edge score: the larger directed score, TVD per layer.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub score_tvd_per_layer: f64,
    /// Directed score X(a <- b), TVD per layer.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub a_from_b_tvd_per_layer: f64,
    /// Directed score X(b <- a), TVD per layer.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub b_from_a_tvd_per_layer: f64,
    /// Rank among edges with a positive score (1 = worst); null for "none found".
    pub rank: Option<usize>,
    /// Unlimited-shot estimate of the edge: the larger directed estimate, TVD per layer
    /// (see [`DirectedReport::estimate_tvd_per_layer`]); the interval in `confidence` is
    /// around it.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub estimate_tvd_per_layer: f64,
    /// Sensitivity: the smaller estimate that each direction's rows could tell from zero,
    /// taken over both directions (the larger of the two), TVD per layer (see
    /// [`DirectedReport::sensitivity_tvd_per_layer`]); `"unbounded"` when a direction was
    /// never tested.
    #[serde(with = "special::unbounded")]
    #[schemars(with = "special::Number")]
    pub sensitivity_tvd_per_layer: f64,
    /// Detection limit: the (1 - alpha) quantile of the permutation-null score of the
    /// direction that gives the edge score, TVD per layer.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub detection_limit_tvd_per_layer: f64,
    /// Permutation p-value of that direction.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub p_value: f64,
    /// Attribution range (min, max) of the edge score over near-optimal budgets.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub attribution_min_tvd_per_layer: f64,
    /// See `attribution_min_tvd_per_layer`.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub attribution_max_tvd_per_layer: f64,
    /// Rows whose context slack for this edge is binding.
    pub supporting_rows: usize,
    /// Circuits of those rows.
    pub supporting_circuits: usize,
    /// The score with its single most influential circuit left out, TVD per layer.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub leave_one_out_tvd_per_layer: f64,
    /// The circuit left out for `leave_one_out_tvd_per_layer`, if any.
    pub most_influential_circuit: Option<String>,
    /// Other aggressors that could carry this edge's slack (for `confounded`).
    pub confounded_with: Vec<String>,
    /// Bootstrap confidence for the edge's estimate; null when no replicates were run.
    pub confidence: Option<Confidence>,
    /// Bootstrap rank statistics of the edge score; null when no replicates were run.
    pub rank_confidence: Option<RankConfidence>,
    /// Parametric-null detection limit of the direction that gives the edge score: the
    /// (1 - alpha) quantile of its score on data drawn from the fitted crosstalk-free model,
    /// TVD per layer (shot noise alone); absent when that null was not run or too small.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub parametric_limit_tvd_per_layer: Option<f64>,
    /// Parametric-null p-value of that direction, (1 + #{null >= estimate}) / (1 + B).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub parametric_p_value: Option<f64>,
    /// The verdict.
    pub verdict: Verdict,
    /// Why the verdict is what it is, as a short code (the terminal's `why` column).
    pub reason_code: ReasonCode,
    /// Why the verdict is what it is, in words, naming the direction that decided it.
    pub reason: String,
}

/// Why an edge got its verdict: the step of the verdict rule (method.md section 6) that
/// decided it, for the direction that leads.
#[derive(Clone, Copy, Debug, Serialize, Deserialize, PartialEq, Eq, JsonSchema)]
#[serde(rename_all = "kebab-case")]
pub enum ReasonCode {
    /// No circuit ran the victim with the aggressor active.
    Untested,
    /// The data need no context slack for this pair.
    NoSlack,
    /// Another aggressor active at the same time could carry the slack (the attribution
    /// range reaches zero).
    Shared,
    /// Only circuits where other neighbours were active too need it (the isolated score is
    /// zero).
    NotAlone,
    /// The circuits where this aggressor is the victim's only active neighbour have the
    /// power to see the slack and need none: it belongs to another aggressor.
    NoneAlone,
    /// The slack sits only in rows where the aggressor is active in every circuit that
    /// agrees with them on depth and the other neighbours' activity: no permutation of its
    /// label can test it.
    Untestable,
    /// No permutation-null replicates were run, so nothing can be called detected.
    NoNull,
    /// The score is within the permutation-null detection limit.
    InNull,
    /// Without its most influential circuit the score falls to the detection limit.
    OneCircuit,
    /// Detected, and the one-sided lower bound of its estimate is above the action threshold.
    AboveThreshold,
    /// Detected, but the one-sided lower bound of its estimate is not above the action
    /// threshold.
    BelowThreshold,
}

impl ReasonCode {
    /// Every code, in the order of the verdict rule.
    pub const ALL: [ReasonCode; 11] = [
        ReasonCode::Untested,
        ReasonCode::NoSlack,
        ReasonCode::Shared,
        ReasonCode::NotAlone,
        ReasonCode::NoneAlone,
        ReasonCode::Untestable,
        ReasonCode::NoNull,
        ReasonCode::InNull,
        ReasonCode::OneCircuit,
        ReasonCode::AboveThreshold,
        ReasonCode::BelowThreshold,
    ];

    /// The code as written in every output (JSON, CSV, terminal, HTML).
    pub fn code(self) -> &'static str {
        match self {
            ReasonCode::Untested => "untested",
            ReasonCode::NoSlack => "no-slack",
            ReasonCode::Shared => "shared",
            ReasonCode::NotAlone => "not-alone",
            ReasonCode::NoneAlone => "none-alone",
            ReasonCode::Untestable => "untestable",
            ReasonCode::NoNull => "no-null",
            ReasonCode::InNull => "in-null",
            ReasonCode::OneCircuit => "one-circuit",
            ReasonCode::AboveThreshold => "above-threshold",
            ReasonCode::BelowThreshold => "below-threshold",
        }
    }

    /// One line for a legend.
    pub fn legend(self) -> &'static str {
        match self {
            ReasonCode::Untested => "no circuit ran the victim with this aggressor active",
            ReasonCode::NoSlack => "the data need no context slack for this pair",
            ReasonCode::Shared => {
                "another aggressor, active at the same time, could carry the slack"
            }
            ReasonCode::NotAlone => "only circuits with other neighbours active too need it",
            ReasonCode::NoneAlone => {
                "its own circuits could see the slack and need none: another aggressor's"
            }
            ReasonCode::Untestable => {
                "needs slack only where the aggressor's activity never varies: no null can test it"
            }
            ReasonCode::NoNull => "no null replicates were run: not tested (--null-replicates)",
            ReasonCode::InNull => "score within the permutation null (mid-p above alpha)",
            ReasonCode::OneCircuit => {
                "rests on one circuit: without it within the null, and the others do not lean"
            }
            ReasonCode::AboveThreshold => {
                "detected; the estimate's lower bound is above the action threshold"
            }
            ReasonCode::BelowThreshold => {
                "detected; the estimate's lower bound is not above the action threshold"
            }
        }
    }

    /// The code of a reason sentence written by schema-2 audits (which recorded words only).
    pub fn from_words(words: &str) -> Option<ReasonCode> {
        let table = [
            ("never tested", ReasonCode::Untested),
            ("no context slack needed", ReasonCode::NoSlack),
            ("another aggressor active at the same time", ReasonCode::Shared),
            ("only circuits where other neighbours", ReasonCode::NotAlone),
            ("no null replicates", ReasonCode::NoNull),
            ("within the permutation-null limit", ReasonCode::InNull),
            ("within the permutation null", ReasonCode::InNull),
            ("rests on one circuit", ReasonCode::OneCircuit),
            ("exceeds the action threshold", ReasonCode::AboveThreshold),
            ("not above the action threshold", ReasonCode::BelowThreshold),
        ];
        table.iter().find(|(w, _)| words.contains(w)).map(|&(_, c)| c)
    }
}

/// Bootstrap confidence of one unlimited-shot estimate (method.md section 5; the interval is
/// around the estimate, not around the score: DEVELOPERS.md explains why).
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq, JsonSchema)]
pub struct Confidence {
    /// Two-sided interval level, e.g. 0.95.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub level: f64,
    /// Interval method, e.g. `basic`.
    pub method: String,
    /// Lower end of the interval, TVD per layer (clipped at zero).
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub low_tvd_per_layer: f64,
    /// Upper end of the interval, TVD per layer.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub high_tvd_per_layer: f64,
    /// One-sided upper bound at `level`, TVD per layer.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub upper_bound_tvd_per_layer: f64,
    /// One-sided lower bound at `level`, TVD per layer: `recalibrate` needs it above the
    /// action threshold (a one-sided question: is the error above it?).
    #[serde(default, with = "special::number")]
    #[schemars(with = "special::Number")]
    pub lower_bound_tvd_per_layer: f64,
    /// Median of the replicate estimates, TVD per layer. The replicates shrink each row's
    /// shot noise by the threshold's whole share, as the interval's upper end does, and
    /// resampling adds noise of its own; the point estimate takes out only what selecting
    /// the row put in. So this median is not the point estimate's, and the estimate can sit
    /// outside the interval: the interval is the statement to act on.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub median_tvd_per_layer: f64,
    /// Fraction of replicates whose score (not estimate) is positive.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub p_positive: f64,
    /// Every replicate estimate in replicate order, TVD per layer (for comparing), under
    /// the upper end's shrinking (see `median_tvd_per_layer`).
    #[serde(with = "special::numbers")]
    #[schemars(with = "Vec<special::Number>")]
    pub replicates_tvd_per_layer: Vec<f64>,
    /// Every replicate score in replicate order, TVD per layer (the rank statistics and
    /// `p_positive` rest on these).
    #[serde(default, with = "special::numbers")]
    #[schemars(with = "Vec<special::Number>")]
    pub score_replicates_tvd_per_layer: Vec<f64>,
}

/// [`Confidence`] of a per-occurrence value (intrinsic slack): the same fields, TVD per
/// occurrence.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq, JsonSchema)]
pub struct OccurrenceConfidence {
    /// Two-sided interval level, e.g. 0.95.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub level: f64,
    /// Interval method, e.g. `basic`.
    pub method: String,
    /// Lower end of the interval, TVD per occurrence (clipped at zero).
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub low_tvd_per_occurrence: f64,
    /// Upper end of the interval, TVD per occurrence.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub high_tvd_per_occurrence: f64,
    /// One-sided upper bound at `level`, TVD per occurrence.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub upper_bound_tvd_per_occurrence: f64,
    /// One-sided lower bound at `level`, TVD per occurrence.
    #[serde(default, with = "special::number")]
    #[schemars(with = "special::Number")]
    pub lower_bound_tvd_per_occurrence: f64,
    /// Median of the replicate estimates, TVD per occurrence.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub median_tvd_per_occurrence: f64,
    /// Fraction of replicates whose slack (not estimate) is positive.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub p_positive: f64,
    /// Every replicate estimate in replicate order, TVD per occurrence.
    #[serde(with = "special::numbers")]
    #[schemars(with = "Vec<special::Number>")]
    pub replicates_tvd_per_occurrence: Vec<f64>,
    /// Every replicate's slack in replicate order, TVD per occurrence.
    #[serde(default, with = "special::numbers")]
    #[schemars(with = "Vec<special::Number>")]
    pub score_replicates_tvd_per_occurrence: Vec<f64>,
}

impl From<Confidence> for OccurrenceConfidence {
    fn from(c: Confidence) -> Self {
        OccurrenceConfidence {
            level: c.level,
            method: c.method,
            low_tvd_per_occurrence: c.low_tvd_per_layer,
            high_tvd_per_occurrence: c.high_tvd_per_layer,
            upper_bound_tvd_per_occurrence: c.upper_bound_tvd_per_layer,
            lower_bound_tvd_per_occurrence: c.lower_bound_tvd_per_layer,
            median_tvd_per_occurrence: c.median_tvd_per_layer,
            p_positive: c.p_positive,
            replicates_tvd_per_occurrence: c.replicates_tvd_per_layer,
            score_replicates_tvd_per_occurrence: c.score_replicates_tvd_per_layer,
        }
    }
}

/// Bootstrap rank statistics of one edge.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq, JsonSchema)]
pub struct RankConfidence {
    /// Median rank over replicates (1 = worst).
    pub median_rank: f64,
    /// Lower end of the 95% rank interval.
    pub rank_low: usize,
    /// Upper end of the 95% rank interval.
    pub rank_high: usize,
    /// The k of `p_top_k`.
    pub top_k: usize,
    /// Fraction of replicates in which the edge ranks in the top k.
    pub p_top_k: f64,
}

/// One directed pair: victim q, aggressor r.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq, JsonSchema)]
pub struct DirectedReport {
    /// Victim qubit id.
    pub victim: String,
    /// Aggressor qubit id.
    pub aggressor: String,
    /// X(q <- r): context slack per layer, averaged over q's kinds by frequency, TVD.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub score_tvd_per_layer: f64,
    /// Unlimited-shot estimate of X(q <- r): the same two stages with every row that needs
    /// slack asked for its whole deviation TVD(p, f) rather than the least radius that
    /// passes its threshold, TVD per layer. The score is built to detect (it allows for shot
    /// noise, so it grows with shots); this estimates the size.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub estimate_tvd_per_layer: f64,
    /// Sensitivity: the least estimate at which some row of this pair would need slack, to
    /// first order: min over the victim's rows with the aggressor active of (detectable
    /// shift of the row) / (occurrences with the aggressor active x the row's polarization
    /// relative to the victim's most polarized row), TVD per layer. `"unbounded"` when no
    /// row tests the pair.
    #[serde(with = "special::unbounded")]
    #[schemars(with = "special::Number")]
    pub sensitivity_tvd_per_layer: f64,
    /// The part of the score from the victim's driven operations (gates), TVD per layer.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub driven_tvd_per_layer: f64,
    /// The victim's idle context slack, TVD per layer.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub idle_tvd_per_layer: f64,
    /// Minimum of the score over the near-optimal face.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub attribution_min_tvd_per_layer: f64,
    /// Maximum of the score over the near-optimal face.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub attribution_max_tvd_per_layer: f64,
    /// Permutation-null detection limit, TVD per layer.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub detection_limit_tvd_per_layer: f64,
    /// Permutation mid-p value of the score, (#{null > score} + (1 + #{null = score}) / 2) /
    /// (1 + replicates); 1 for a zero score or without null replicates.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub p_value: f64,
    /// Significant (p-value at most alpha) and robust: it survives leaving out its most
    /// influential circuit, or the other circuits corroborate it
    /// (`corroboration_p_value`). False without null replicates.
    #[serde(default)]
    pub detected: bool,
    /// When the score falls into the null without its most influential circuit: the mid-p
    /// value of the other circuits' evidence (the total requirement, each row judged at its
    /// own unadjusted threshold, of the rows where the aggressor was active) against
    /// shuffling the aggressor's activity within strata; absent otherwise.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub corroboration_p_value: Option<f64>,
    /// Binding rows with positive coefficient on this pair's variables.
    pub supporting_rows: usize,
    /// Distinct circuits among them.
    pub supporting_circuits: usize,
    /// The score on reference rows and rows where the aggressor is the victim's only active
    /// neighbour; zero means other aggressors could carry it (`confounded`).
    #[serde(default)]
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub isolated_tvd_per_layer: f64,
    /// The supporting circuits that need the most context slack (at most ten), most first.
    #[serde(default)]
    pub top_supporting_circuits: Vec<String>,
    /// Score with the most influential circuit left out.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub leave_one_out_tvd_per_layer: f64,
    /// That circuit.
    pub most_influential_circuit: Option<String>,
    /// Per-kind context slack kappa(k, r), TVD per occurrence, as `kind` to value.
    pub per_kind: Vec<KindValue>,
    /// Observed against predicted probability of the victim's likeliest outcome, by depth
    /// class, in the victim's rows with and without the aggressor active: where crosstalk
    /// shows as the observed value falling below the crosstalk-free prediction as sequences
    /// grow. Filled for both directions of every edge with a positive score.
    #[serde(default)]
    pub depth_profile: Vec<DepthPoint>,
    /// Bootstrap confidence for the directed estimate; null when no replicates were run.
    pub confidence: Option<Confidence>,
    /// Parametric-null detection limit (see [`EdgeReport::parametric_limit_tvd_per_layer`]).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub parametric_limit_tvd_per_layer: Option<f64>,
    /// Parametric-null p-value.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub parametric_p_value: Option<f64>,
}

/// One point of a [`DirectedReport::depth_profile`]: the victim's rows of one depth class
/// (half-octave classes of the timed-layer count, as the permutation strata), with or
/// without the aggressor active.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq, JsonSchema)]
pub struct DepthPoint {
    /// Mean timed layers of the rows in the class.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub timed_layers: f64,
    /// True for rows in which the aggressor was active beside the victim, false for the
    /// victim's rows in which it never was.
    pub aggressor_active: bool,
    /// Rows in the class.
    pub rows: usize,
    /// Observed frequency of the victim's likeliest outcome (the bit value the
    /// crosstalk-free model predicts more often in each row), shot-weighted over the rows.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub observed: f64,
    /// The crosstalk-free model's probability of the same outcome, shot-weighted.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub predicted: f64,
}

/// A value attached to an operation kind.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq, JsonSchema)]
pub struct KindValue {
    /// Operation kind label, e.g. `sx@q3`.
    pub kind: String,
    /// The value.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub value: f64,
}

/// Intrinsic slack of one operation kind.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq, JsonSchema)]
pub struct IntrinsicReport {
    /// Operation kind label, e.g. `sx@q3`, `id@q3`, `cz@q3-q4`.
    pub kind: String,
    /// Occurrences of the kind in all rows.
    pub occurrences: u64,
    /// Occurrences in reference rows.
    pub reference_occurrences: u64,
    /// Intrinsic slack omega_k, TVD per occurrence.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub slack_tvd_per_occurrence: f64,
    /// Unlimited-shot estimate of omega_k (deviation requirements), TVD per occurrence.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub estimate_tvd_per_occurrence: f64,
    /// Fitted error rate of the kind's channel (total error probability); `"not-identified"`
    /// when the data could not determine it.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub fitted_error_rate: f64,
    /// True when the kind had no reference rows and was fitted on all its rows (its context
    /// slack is then a lower bound).
    pub fitted_on_all_rows: bool,
    /// The qubits the kind acts on (ids), for drawing and comparing.
    pub qubits: Vec<String>,
    /// Bootstrap confidence for the intrinsic estimate; absent when no replicates were run.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub confidence: Option<OccurrenceConfidence>,
}

impl AuditReport {
    /// The number of directed scores a bootstrap replicate holds: the qubit directions
    /// (`directed`), then the gate directions (`gates.directed`).
    pub fn scored_directions(&self) -> usize {
        self.directed.len() + self.gates.directed.len()
    }

    /// The intrinsic kinds in layout order: by the layout index of their qubits (so `q2`
    /// comes before `q10`), one-qubit kinds before two-qubit kinds on the same first qubit,
    /// then by label.
    pub fn intrinsic_in_layout_order(&self) -> Vec<&IntrinsicReport> {
        let index: std::collections::HashMap<&str, usize> =
            self.layout.qubits.iter().enumerate().map(|(i, q)| (q.as_str(), i)).collect();
        let key = |k: &IntrinsicReport| {
            let ix: Vec<usize> = k
                .qubits
                .iter()
                .map(|q| index.get(q.as_str()).copied().unwrap_or(usize::MAX))
                .collect();
            (ix.first().copied().unwrap_or(usize::MAX), ix.len(), ix, k.kind.clone())
        };
        let mut v: Vec<&IntrinsicReport> = self.intrinsic.iter().collect();
        v.sort_by_cached_key(|k| key(k));
        v
    }
}

/// Gate-on-gate crosstalk of an audit (`audit.json`'s `gates`).
///
/// Units are qubits (`q7`) and couplers' two-qubit gates (`q5-q6`). Each direction is scored on
/// the victim's *gate view*: its rows with the context of its own operations charged to the
/// gate an aggressor qubit ran in that layer, or to the qubit when it ran none. Scores, null,
/// leave-one-out, intervals and verdicts follow the same rules as `directed` and `edges`.
#[derive(Clone, Debug, Default, Serialize, Deserialize, PartialEq, JsonSchema)]
pub struct GateReport {
    /// One entry per measured direction: victim a coupler (`q5-q6`) beside a coupler or a
    /// qubit, or a qubit beside a coupler. Same fields as [`DirectedReport`]; the score
    /// averages the context slack of the victim's own operations (its two-qubit gate, or its
    /// one-qubit gates and idles) while the aggressor ran.
    pub directed: Vec<DirectedReport>,
    /// One entry per unordered pair of units with a measured direction, ranked like `edges`.
    pub pairs: Vec<GatePairReport>,
    /// The directed estimates as sparse matrices.
    pub matrix: GateMatrix,
}

impl GateReport {
    /// True when no gate direction was measured.
    pub fn is_empty(&self) -> bool {
        self.directed.is_empty() && self.pairs.is_empty()
    }
}

/// One gate pair {a, b}: two couplers' gates, or a coupler's gate and a qubit.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq, JsonSchema)]
pub struct GatePairReport {
    /// First unit: a coupler (`q5-q6`) or a qubit (`q7`); a coupler comes first.
    pub a: String,
    /// The two-qubit gate of `a` (`cz`), absent for a qubit.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub a_gate: Option<String>,
    /// Second unit.
    pub b: String,
    /// The two-qubit gate of `b`, absent for a qubit.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub b_gate: Option<String>,
    /// The larger directed score, TVD per layer.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub score_tvd_per_layer: f64,
    /// X(a <- b), TVD per layer; absent when that direction was not measured.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub a_from_b_tvd_per_layer: Option<f64>,
    /// X(b <- a), TVD per layer; absent when that direction was not measured.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub b_from_a_tvd_per_layer: Option<f64>,
    /// Rank among gate pairs with a positive score (1 = worst); null for "none found".
    pub rank: Option<usize>,
    /// The larger directed unlimited-shot estimate, TVD per layer; `confidence` is around it.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub estimate_tvd_per_layer: f64,
    /// Permutation-null detection limit of the leading direction, TVD per layer.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub detection_limit_tvd_per_layer: f64,
    /// Permutation mid-p value of the leading direction.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub p_value: f64,
    /// Victim of the leading direction (`a` or `b`).
    pub victim: String,
    /// Aggressor of the leading direction.
    pub aggressor: String,
    /// Other aggressors that could carry the slack (for `confounded`).
    pub confounded_with: Vec<String>,
    /// Bootstrap confidence of the estimate; null when no replicates were run.
    pub confidence: Option<Confidence>,
    /// The verdict, by the rules of `edges`.
    pub verdict: Verdict,
    /// Why, as a short code.
    pub reason_code: ReasonCode,
    /// Why, in words, naming the direction that decided it.
    pub reason: String,
}

/// Directed gate estimates as sparse matrices: each entry is (victim index, aggressor index,
/// unlimited-shot estimate in TVD per layer) over the lists `couplers` and `qubits`; a
/// direction that was not measured has no entry.
#[derive(Clone, Debug, Default, Serialize, Deserialize, PartialEq, JsonSchema)]
pub struct GateMatrix {
    /// Couplers, as `q5-q6`, in layout order.
    pub couplers: Vec<String>,
    /// Qubit ids, in layout order.
    pub qubits: Vec<String>,
    /// Victim coupler, aggressor coupler.
    pub coupler_from_coupler: Vec<(usize, usize, f64)>,
    /// Victim coupler, aggressor qubit.
    pub coupler_from_qubit: Vec<(usize, usize, f64)>,
    /// Victim qubit, aggressor coupler.
    pub qubit_from_coupler: Vec<(usize, usize, f64)>,
}

/// Readout of one qubit.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq, JsonSchema)]
pub struct ReadoutReport {
    /// Qubit id.
    pub qubit: String,
    /// Fitted P(read 1 | prepared 0).
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub p1_given_0: f64,
    /// Fitted P(read 0 | prepared 1).
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub p0_given_1: f64,
    /// Readout slack rho_q, TVD per row.
    #[serde(with = "special::number")]
    #[schemars(with = "special::Number")]
    pub slack_tvd: f64,
}

/// A warning as recorded in the report.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq, JsonSchema)]
pub struct WarningReport {
    /// Stable code.
    pub code: String,
    /// What was found.
    pub message: String,
    /// What to do.
    pub hint: String,
}

impl From<&crate::Warning> for WarningReport {
    fn from(w: &crate::Warning) -> Self {
        WarningReport { code: w.code.to_string(), message: w.message.clone(), hint: w.hint.clone() }
    }
}

/// One output format: turns a report into the bytes of one file.
pub trait Render {
    /// The file name this renderer writes inside the output folder.
    fn file_name(&self) -> &'static str;
    /// The file's bytes.
    fn render(&self, report: &AuditReport) -> Vec<u8>;
}

/// Every file an audit writes, in order (`rows.csv` only when the report carries rows: an
/// audit and a merge do, a re-render from `audit.json` does not; `gate_pairs.csv` only when
/// the audit measured gate pairs).
pub fn audit_files(report: &AuditReport) -> Vec<(String, Vec<u8>)> {
    let mut renderers: Vec<&(dyn Render + Sync)> = vec![
        &json::AuditJson,
        &csv::EdgesCsv,
        &csv::ReplicatesCsv,
        &csv::AdjacencyCsv,
        &csv::IntrinsicCsv,
        &svg::AdjacencySvg,
        &svg::LayoutSvg,
        &html::ReportHtml,
    ];
    if !report.rows.is_empty() {
        renderers.push(&csv::RowsCsv);
    }
    if !report.gates.is_empty() {
        renderers.push(&csv::GatePairsCsv);
    }
    // Independent of each other; on a large chip the JSON, rows table and report each take
    // a tenth of a second or more.
    renderers.par_iter().map(|r| (r.file_name().to_string(), r.render(report))).collect()
}

/// Writes files into `dir` atomically: everything goes into a fresh sibling folder that
/// then replaces `dir` by rename, so an existing folder is never half overwritten. Files
/// already in `dir` that this run does not write are kept. An existing file at `dir` is
/// refused, and a run writing `dir` at the same time is a clear error (see
/// [`crate::files`]).
pub fn write_folder(dir: &Path, files: &[(String, Vec<u8>)]) -> Result<()> {
    crate::files::OutputDir::claim(dir, crate::files::FolderRule::Update)?.write_files(files)
}

/// A time as RFC 3339 UTC to the second (`2023-11-14T22:13:20Z`), from seconds since
/// 1970-01-01 (civil-from-days: H. Hinnant, "chrono-Compatible Low-Level Date Algorithms").
pub fn rfc3339_utc(secs: u64) -> String {
    let days = (secs / 86_400) as i64;
    let rem = secs % 86_400;
    let z = days + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z - era * 146_097;
    let yoe = (doe - doe / 1_460 + doe / 36_524 - doe / 146_096) / 365;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let day = doy - (153 * mp + 2) / 5 + 1;
    let month = if mp < 10 { mp + 3 } else { mp - 9 };
    let year = yoe + era * 400 + i64::from(month <= 2);
    format!(
        "{year:04}-{month:02}-{day:02}T{:02}:{:02}:{:02}Z",
        rem / 3_600,
        rem % 3_600 / 60,
        rem % 60
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn rfc3339_matches_known_instants() {
        // `date -u -d @SECONDS` (GNU coreutils) gives these.
        assert_eq!(rfc3339_utc(0), "1970-01-01T00:00:00Z");
        assert_eq!(rfc3339_utc(1_700_000_000), "2023-11-14T22:13:20Z");
        // 2000-02-29, a leap day in a year divisible by 400.
        assert_eq!(rfc3339_utc(951_782_400), "2000-02-29T00:00:00Z");
    }
}
