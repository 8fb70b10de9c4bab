//! The audit: from layout, circuits and counts to ranked, explained crosstalk edges.
//!
//! One run goes rows -> crosstalk-free fit on reference rows -> row requirements ->
//! two-stage covering LPs per qubit, then per coupler -> directed scores, attribution
//! ranges, permutation null, leave-one-out -> verdicts (method.md sections 2-6). Every
//! stage is a pure function of the previous ones; [`run`] only sequences them.

use crate::circuit::CircuitSet;
use crate::confidence::{BootstrapConfig, ReplicateScores};
use crate::counts::Counts;
use crate::error::{Error, Result};
use crate::layout::Layout;
use crate::model::Family;
use crate::report::{AuditReport, InputFile};

mod assess;
mod build;
mod gates;
mod profile;

pub use crate::pipeline::problems;
pub(crate) use crate::pipeline::{
    check_cancel, intrinsic_slack, kind_occurrences, row_slacks, Analysis, PassRows, Solved,
};
pub use crate::pipeline::{Cancel, Progress, Silent};

/// Settings of one audit, validated by [`AuditConfig::validate`].
#[derive(Clone, Debug)]
pub struct AuditConfig {
    /// Error family of the crosstalk-free model.
    pub family: Family,
    /// Family-wise error level (row thresholds and detection), in (0, 1).
    pub alpha: f64,
    /// `recalibrate` needs the edge's lower bound above this, TVD per layer.
    pub action_threshold_tvd_per_layer: f64,
    /// Context-permutation null replicates per directed pair.
    pub null_replicates: usize,
    /// Seed of every random draw.
    pub seed: u64,
    /// How the counts' bit order was read (recorded in the report).
    pub bit_order: String,
    /// Input files and digests (recorded in the report).
    pub inputs: Vec<InputFile>,
    /// Bootstrap settings (replicates, resampling scheme, level, top k, shard range).
    pub bootstrap: BootstrapConfig,
}

impl AuditConfig {
    /// Checks ranges; errors name the setting and the valid range.
    pub fn validate(&self) -> Result<()> {
        if !(self.alpha > 0.0 && self.alpha < 1.0) {
            return Err(Error::Usage(format!("--alpha {} must lie in (0, 1)", self.alpha)));
        }
        if !(self.action_threshold_tvd_per_layer >= 0.0
            && self.action_threshold_tvd_per_layer.is_finite())
        {
            return Err(Error::Usage(format!(
                "--action-threshold {} must be a non-negative number (TVD per layer)",
                self.action_threshold_tvd_per_layer
            )));
        }
        self.bootstrap.validate()
    }
}

/// Runs a whole audit.
pub fn run(
    layout: &Layout,
    circuits: &CircuitSet,
    counts: &Counts,
    cfg: &AuditConfig,
    progress: &dyn Progress,
) -> Result<AuditReport> {
    let (mut report, replicates) = run_parts(layout, circuits, counts, cfg, progress)?;
    finish(&mut report, &replicates, &cfg.bootstrap)?;
    Ok(report)
}

/// Fills a point-estimate report's bootstrap fields from all its replicates (in index
/// order 0..replicates; [`crate::confidence::fill`]) and revisits the verdicts of detected
/// directions: `recalibrate` then needs the interval's lower end above the action
/// threshold. A run and the merge of its shards both end here, so they write the same bytes.
pub fn finish(
    report: &mut AuditReport,
    reps: &[ReplicateScores],
    cfg: &BootstrapConfig,
) -> Result<()> {
    if reps.is_empty() {
        return Ok(());
    }
    let pairs = crate::confidence::fill(report, reps, cfg)?;
    build::revisit_verdicts(report, &pairs);
    Ok(())
}

/// The point-estimate report (verdicts before any bootstrap interval, parametric null
/// filled in) and the bootstrap replicates of `cfg.bootstrap`'s range; [`run`] combines
/// them with [`finish`], and a shard writes them to a partial file.
pub fn run_parts(
    layout: &Layout,
    circuits: &CircuitSet,
    counts: &Counts,
    cfg: &AuditConfig,
    progress: &dyn Progress,
) -> Result<(AuditReport, Vec<ReplicateScores>)> {
    use crate::pipeline;
    cfg.validate()?;
    let analysis = pipeline::analyse(layout, circuits, counts, cfg.family, cfg.alpha, progress)?;
    check_cancel(progress)?;
    let solved = pipeline::solve_all(&analysis, progress)?;
    check_cancel(progress)?;
    let assessed = assess::assess(&analysis, &solved, cfg, progress)?;
    check_cancel(progress)?;
    let gate_index = gates::GateIndex::new(&analysis);
    let gate_victims = gates::victims(&analysis, &gate_index);
    let gate_directed =
        gates::assess(&analysis, &gate_index, &gate_victims, &solved, cfg, progress)?;
    check_cancel(progress)?;
    // Qubit directions in `assessed` order, then gate directions in `gate_directed` order.
    // The weights over the analysis' own rows are the same in every pass that keeps them
    // (the parametric null, a bootstrap that resamples shots): found once.
    let own_weights = std::sync::OnceLock::new();
    let scorer = &move |a: &Analysis, all: PassRows<'_>, source: Option<&[usize]>, s: &Solved| {
        let computed;
        let weights = if all.is_own() {
            own_weights.get_or_init(|| assess::direction_weights(a, all, s))
        } else {
            computed = assess::direction_weights(a, all, s);
            &computed
        };
        let mut v = assess::directed_scores(a, weights, s);
        v.extend(gates::scores(a, &gate_index, &gate_victims, all, source, s));
        v
    };
    let point: Vec<f64> = assessed
        .directed
        .iter()
        .map(|d| d.score)
        .chain(gate_directed.iter().map(|g| g.d.score))
        .collect();
    let parametric = crate::confidence::parametric_null(
        &analysis,
        &point,
        &crate::confidence::NullConfig {
            replicates: cfg.null_replicates,
            seed: cfg.seed,
            alpha: cfg.alpha,
        },
        scorer,
        progress,
    )?;
    check_cancel(progress)?;
    let estimate = pipeline::estimate(&analysis, scorer, progress)?;
    check_cancel(progress)?;
    let report = build::report(
        &analysis,
        &solved,
        &assessed,
        &gate_directed,
        &estimate,
        cfg,
        parametric.as_deref(),
    );
    let replicates = crate::confidence::bootstrap(
        &analysis,
        &report,
        &cfg.bootstrap,
        cfg.seed,
        scorer,
        progress,
    )?;
    drop((gate_directed, assessed, solved));
    analysis.free();
    Ok((report, replicates))
}
