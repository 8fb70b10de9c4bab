//! Audit results as the user sees them: the serialisable report types and their renderers.
//!
//! Only this module knows serde for outputs. Every field is documented here because this
//! is the wire format of `audit.json` (schema [`SCHEMA`]). Each output format is one file
//! behind [`Render`], which returns bytes; where the bytes go is decided by [`write_folder`].

use std::path::{Path, PathBuf};

use serde::{Deserialize, Serialize};

use crate::error::{Error, Result};

pub mod colour;
pub mod csv;
pub mod html;
pub mod json;
pub mod markup;
pub mod svg;
pub mod terminal;

/// Version of the `audit.json` format written by this build.
pub const SCHEMA: u32 = 2;

/// The caution every audit output carries, because a score can be mistaken for a diagnosis.
pub const CAUTION: &str = "Slack bounds unmodelled error in the data's own units (total variation \
distance per layer); it does not name a physical mechanism. A clean audit is no guarantee outside \
the contexts the circuits tested.";

/// A complete audit result: what `audit.json` holds.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct AuditReport {
    /// Format version, [`SCHEMA`].
    pub schema: u32,
    /// The slackmap version that wrote the file.
    pub tool_version: String,
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
    /// Per-row fit diagnostics, written to `rows.csv` only (not part of `audit.json`, whose
    /// size they would multiply); empty when a report is re-read from `audit.json`.
    #[serde(skip)]
    pub rows: Vec<RowReport>,
}

/// Fit diagnostics of one row (circuit, block), for `rows.csv`.
#[derive(Clone, Debug, PartialEq)]
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
    pub llr_before: f64,
    /// The row's requirement d_row, TVD.
    pub requirement_tvd: f64,
    /// The slack the solved budgets give the row, TVD (at least the requirement).
    pub slack_tvd: f64,
    /// LLR after the prediction is weakened by that slack.
    pub llr_after: f64,
}

/// The layout, as far as a reader of the report needs it.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
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
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
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
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
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
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
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
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct FitSummary {
    /// Log-likelihood ratio 2 sum n ln(f/p) over reference rows, against the data's own
    /// frequencies.
    pub reference_llr: f64,
    /// Degrees of freedom of the reference fit: outcomes minus one, summed over reference
    /// rows, minus identified parameters.
    pub reference_dof: f64,
    /// (LLR - dof) / sqrt(2 dof) over reference rows: near 0 when the model fits.
    pub reference_excess_sigma: f64,
    /// LLR over all rows with the fitted model and no slack.
    pub all_llr_before: f64,
    /// Degrees of freedom over all rows (outcomes minus one summed, minus parameters).
    pub all_dof: f64,
    /// Excess in standard deviations over all rows before slack.
    pub all_excess_sigma_before: f64,
    /// LLR over all rows after each row's prediction is weakened by its slack budget.
    pub all_llr_after: f64,
    /// Excess in standard deviations over all rows after slack.
    pub all_excess_sigma_after: f64,
    /// The per-row LLR threshold used (largest over row outcome counts).
    pub row_threshold_llr: f64,
    /// Rows that needed any slack at all.
    pub rows_needing_slack: usize,
    /// Fitted parameters the data could not identify (held at zero), as `kind:parameter`.
    pub unidentified: Vec<String>,
    /// Fits that did not converge, by qubit or coupler.
    pub not_converged: Vec<String>,
}

/// Verdict for one edge.
#[derive(Clone, Copy, Debug, Serialize, Deserialize, PartialEq, Eq, PartialOrd, Ord)]
#[serde(rename_all = "kebab-case")]
pub enum Verdict {
    /// Detected and above the action threshold: recalibrate this pair.
    Recalibrate,
    /// Detected but not above the action threshold.
    Watch,
    /// Positive score that another aggressor could carry instead.
    Confounded,
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
            Verdict::Clean => "clean",
        }
    }
}

/// One neighbour pair {a, b}.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct EdgeReport {
    /// First qubit id (lower layout index).
    pub a: String,
    /// Second qubit id.
    pub b: String,
    /// True when a and b share a coupler.
    pub coupled: bool,
    /// Edge score: the larger directed score, TVD per layer.
    pub score_tvd_per_layer: f64,
    /// Directed score X(a <- b), TVD per layer.
    pub a_from_b_tvd_per_layer: f64,
    /// Directed score X(b <- a), TVD per layer.
    pub b_from_a_tvd_per_layer: f64,
    /// Rank among edges with a positive score (1 = worst); null for "none found".
    pub rank: Option<usize>,
    /// Unlimited-shot estimate of the edge: the larger directed estimate, TVD per layer
    /// (see [`DirectedReport::estimate_tvd_per_layer`]); the interval in `confidence` is
    /// around it.
    pub estimate_tvd_per_layer: f64,
    /// Sensitivity: the smaller estimate that each direction's rows could tell from zero,
    /// taken over both directions (the larger of the two), TVD per layer (see
    /// [`DirectedReport::sensitivity_tvd_per_layer`]); infinite when a direction was never
    /// tested.
    #[serde(with = "finite_or_null")]
    pub sensitivity_tvd_per_layer: f64,
    /// Detection limit: the (1 - alpha) quantile of the permutation-null score of the
    /// direction that gives the edge score, TVD per layer.
    pub detection_limit_tvd_per_layer: f64,
    /// Permutation p-value of that direction.
    pub p_value: f64,
    /// Attribution range (min, max) of the edge score over near-optimal budgets.
    pub attribution_min_tvd_per_layer: f64,
    /// See `attribution_min_tvd_per_layer`.
    pub attribution_max_tvd_per_layer: f64,
    /// Rows whose context slack for this edge is binding.
    pub supporting_rows: usize,
    /// Circuits of those rows.
    pub supporting_circuits: usize,
    /// The score with its single most influential circuit left out, TVD per layer.
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
    /// Why the verdict is what it is, in words.
    pub reason: String,
}

/// Bootstrap confidence of one unlimited-shot estimate (method.md section 5; the interval is
/// around the estimate, not around the score: DEVELOPERS.md explains why).
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct Confidence {
    /// Two-sided interval level, e.g. 0.95.
    pub level: f64,
    /// Interval method, e.g. `basic`.
    pub method: String,
    /// Lower end of the interval, TVD per layer (clipped at zero).
    pub low_tvd_per_layer: f64,
    /// Upper end of the interval, TVD per layer.
    pub high_tvd_per_layer: f64,
    /// One-sided upper bound at `level`, TVD per layer.
    pub upper_bound_tvd_per_layer: f64,
    /// Median of the replicate estimates, TVD per layer.
    pub median_tvd_per_layer: f64,
    /// Bias-corrected estimate, 2 x estimate - `median_tvd_per_layer`, clipped at zero: the
    /// centre of the basic interval, which always contains it (Efron & Tibshirani, An
    /// Introduction to the Bootstrap, 1993, sec. 10.6, with the median for the mean). The
    /// replicates of a maximum over noisy rows run above the estimate, so the plain
    /// estimate can sit above its own interval; this is the value to quote with it.
    #[serde(default)]
    pub centre_tvd_per_layer: f64,
    /// Fraction of replicates whose score (not estimate) is positive.
    pub p_positive: f64,
    /// Every replicate estimate in replicate order, TVD per layer (for comparing).
    pub replicates_tvd_per_layer: Vec<f64>,
    /// Every replicate score in replicate order, TVD per layer (the rank statistics and
    /// `p_positive` rest on these).
    #[serde(default)]
    pub score_replicates_tvd_per_layer: Vec<f64>,
}

/// The estimate tables quote beside an interval: with replicates the bias-corrected centre
/// of the interval, without them the plain estimate.
pub fn quoted_estimate(estimate: f64, c: Option<&Confidence>) -> f64 {
    c.map_or(estimate, |c| c.centre_tvd_per_layer)
}

/// Bootstrap rank statistics of one edge.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
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
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct DirectedReport {
    /// Victim qubit id.
    pub victim: String,
    /// Aggressor qubit id.
    pub aggressor: String,
    /// X(q <- r): context slack per layer, averaged over q's kinds by frequency, TVD.
    pub score_tvd_per_layer: f64,
    /// Unlimited-shot estimate of X(q <- r): the same two stages with every row that needs
    /// slack asked for its whole deviation TVD(p, f) rather than the least radius that
    /// passes its threshold, TVD per layer. The score is built to detect (it allows for shot
    /// noise, so it grows with shots); this estimates the size.
    pub estimate_tvd_per_layer: f64,
    /// Sensitivity: the least estimate at which some row of this pair would need slack, to
    /// first order: min over the victim's rows with the aggressor active of (detectable
    /// shift of the row) / (occurrences with the aggressor active x the row's polarization
    /// relative to the victim's most polarized row), TVD per layer. Infinite (null in
    /// JSON) when no row tests the pair.
    #[serde(with = "finite_or_null")]
    pub sensitivity_tvd_per_layer: f64,
    /// The part of the score from the victim's driven operations (gates), TVD per layer.
    pub driven_tvd_per_layer: f64,
    /// The victim's idle context slack, TVD per layer.
    pub idle_tvd_per_layer: f64,
    /// Minimum of the score over the near-optimal face.
    pub attribution_min_tvd_per_layer: f64,
    /// Maximum of the score over the near-optimal face.
    pub attribution_max_tvd_per_layer: f64,
    /// Permutation-null detection limit, TVD per layer.
    pub detection_limit_tvd_per_layer: f64,
    /// Permutation p-value, (1 + #{null >= estimate}) / (1 + replicates).
    pub p_value: f64,
    /// Binding rows with positive coefficient on this pair's variables.
    pub supporting_rows: usize,
    /// Distinct circuits among them.
    pub supporting_circuits: usize,
    /// The score on reference rows and rows where the aggressor is the victim's only active
    /// neighbour; zero means other aggressors could carry it (`confounded`).
    #[serde(default)]
    pub isolated_tvd_per_layer: f64,
    /// The supporting circuits that need the most context slack (at most ten), most first.
    #[serde(default)]
    pub top_supporting_circuits: Vec<String>,
    /// Score with the most influential circuit left out.
    pub leave_one_out_tvd_per_layer: f64,
    /// That circuit.
    pub most_influential_circuit: Option<String>,
    /// Per-kind context slack kappa(k, r), TVD per occurrence, as `kind` to value.
    pub per_kind: Vec<KindValue>,
    /// Bootstrap confidence for the directed estimate; null when no replicates were run.
    pub confidence: Option<Confidence>,
    /// Parametric-null detection limit (see [`EdgeReport::parametric_limit_tvd_per_layer`]).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub parametric_limit_tvd_per_layer: Option<f64>,
    /// Parametric-null p-value.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub parametric_p_value: Option<f64>,
}

/// A value attached to an operation kind.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct KindValue {
    /// Operation kind label, e.g. `sx@q3`.
    pub kind: String,
    /// The value.
    pub value: f64,
}

/// Intrinsic slack of one operation kind.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct IntrinsicReport {
    /// Operation kind label, e.g. `sx@q3`, `id@q3`, `cz@q3-q4`.
    pub kind: String,
    /// Occurrences of the kind in all rows.
    pub occurrences: u64,
    /// Occurrences in reference rows.
    pub reference_occurrences: u64,
    /// Intrinsic slack omega_k, TVD per occurrence.
    pub slack_tvd_per_occurrence: f64,
    /// Unlimited-shot estimate of omega_k (deviation requirements), TVD per occurrence.
    pub estimate_tvd_per_occurrence: f64,
    /// Fitted error rate of the kind's channel (total error probability).
    pub fitted_error_rate: f64,
    /// True when the kind had no reference rows and was fitted on all its rows (its context
    /// slack is then a lower bound).
    pub fitted_on_all_rows: bool,
    /// The qubits the kind acts on (ids), for drawing and comparing.
    pub qubits: Vec<String>,
    /// Bootstrap confidence for the intrinsic estimate, TVD per occurrence (the `_tvd_per_layer`
    /// field names of [`Confidence`] then carry per-occurrence values); absent when no
    /// replicates were run or the writer predates the field.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub confidence: Option<Confidence>,
}

/// Readout of one qubit.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct ReadoutReport {
    /// Qubit id.
    pub qubit: String,
    /// Fitted P(read 1 | prepared 0).
    pub p1_given_0: f64,
    /// Fitted P(read 0 | prepared 1).
    pub p0_given_1: f64,
    /// Readout slack rho_q, TVD per row.
    pub slack_tvd: f64,
}

/// A warning as recorded in the report.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
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

/// Every file an audit writes, in order.
pub fn audit_files(report: &AuditReport) -> Vec<(String, Vec<u8>)> {
    let renderers: [&dyn Render; 7] = [
        &json::AuditJson,
        &csv::EdgesCsv,
        &csv::AdjacencyCsv,
        &csv::IntrinsicCsv,
        &svg::AdjacencySvg,
        &svg::LayoutSvg,
        &html::ReportHtml,
    ];
    let mut files: Vec<(String, Vec<u8>)> =
        renderers.iter().map(|r| (r.file_name().to_string(), r.render(report))).collect();
    if !report.rows.is_empty() {
        files.push((csv::RowsCsv.file_name().to_string(), csv::RowsCsv.render(report)));
    }
    files
}

/// Writes files into `dir` atomically: everything goes into a fresh sibling folder that
/// then replaces `dir` by rename, so an existing folder is never half overwritten. Files
/// already in `dir` that this run does not write are kept.
pub fn write_folder(dir: &Path, files: &[(String, Vec<u8>)]) -> Result<()> {
    let parent = match dir.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    };
    std::fs::create_dir_all(&parent).map_err(|e| Error::io(&parent, e))?;
    let name = dir.file_name().map(|n| n.to_string_lossy().to_string()).unwrap_or("out".into());
    let stage = parent.join(format!(".{name}.tmp-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&stage);
    std::fs::create_dir_all(&stage).map_err(|e| Error::io(&stage, e))?;
    if dir.is_dir() {
        for entry in std::fs::read_dir(dir).map_err(|e| Error::io(dir, e))? {
            let entry = entry.map_err(|e| Error::io(dir, e))?;
            let fname = entry.file_name().to_string_lossy().to_string();
            if !files.iter().any(|(n, _)| n.split('/').next() == Some(fname.as_str())) {
                copy_tree(&entry.path(), &stage.join(&fname))?;
            }
        }
    }
    for (fname, bytes) in files {
        let p = stage.join(fname);
        if let Some(d) = p.parent() {
            std::fs::create_dir_all(d).map_err(|e| Error::io(d, e))?;
        }
        std::fs::write(&p, bytes).map_err(|e| Error::io(&p, e))?;
    }
    let old = parent.join(format!(".{name}.old-{}", std::process::id()));
    if dir.exists() {
        std::fs::rename(dir, &old).map_err(|e| Error::io(dir, e))?;
    }
    std::fs::rename(&stage, dir).map_err(|e| Error::io(dir, e))?;
    let _ = std::fs::remove_dir_all(&old);
    Ok(())
}

/// Copies a file or a folder tree.
fn copy_tree(from: &Path, to: &Path) -> Result<()> {
    if from.is_dir() {
        std::fs::create_dir_all(to).map_err(|e| Error::io(to, e))?;
        for entry in std::fs::read_dir(from).map_err(|e| Error::io(from, e))? {
            let entry = entry.map_err(|e| Error::io(from, e))?;
            copy_tree(&entry.path(), &to.join(entry.file_name()))?;
        }
    } else {
        std::fs::copy(from, to).map_err(|e| Error::io(from, e))?;
    }
    Ok(())
}

/// Serialises a non-negative value that may be infinite as a number or null (JSON has no
/// infinity), and reads null back as infinity.
mod finite_or_null {
    use serde::{Deserialize, Deserializer, Serializer};

    pub fn serialize<S: Serializer>(v: &f64, s: S) -> Result<S::Ok, S::Error> {
        if v.is_finite() {
            s.serialize_f64(*v)
        } else {
            s.serialize_none()
        }
    }

    pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<f64, D::Error> {
        Ok(Option::<f64>::deserialize(d)?.unwrap_or(f64::INFINITY))
    }
}
