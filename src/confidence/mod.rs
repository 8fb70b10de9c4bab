//! Confidence of an audit (method.md section 5): bootstrap replicates and their intervals,
//! rank statistics, the parametric null, and the partial files of sharded runs.
//!
//! Replicate i draws only from ChaCha8 seeded by (seed, i), so results do not depend on the
//! thread count or on how replicates are split across machines. Interval method: see
//! [`METHOD`] for the measured choice.

use std::ops::Range;

use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

use crate::error::{Error, Result};
use crate::pipeline::{self, Analysis, Progress, Scorer};
use crate::report::{AuditReport, Confidence, RankConfidence};

pub mod intervals;
pub mod partial;
pub mod resample;

use intervals::{interval, quantile, ranks, Method};

/// The interval reported and used for verdicts: the bracketed percentile interval of the
/// replicate estimates (see [`intervals::REPORTED`] for why, and tests/study.rs for its
/// coverage).
pub const METHOD: Method = intervals::REPORTED;

/// Level of the rank interval (method.md section 5).
const RANK_LEVEL: f64 = 0.95;

/// How a bootstrap replicate resamples the data.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Resample {
    /// Every circuit's shots, from its observed joint outcome frequencies.
    Shots,
    /// Circuits with replacement within groups of the same pattern and depth, then shots.
    Circuits,
}

impl Resample {
    /// The scheme's name in reports and on the command line.
    pub fn name(self) -> &'static str {
        match self {
            Resample::Shots => "shots",
            Resample::Circuits => "circuits",
        }
    }

    /// The scheme of a name written by [`Resample::name`].
    pub fn from_name(s: &str) -> Option<Resample> {
        match s {
            "shots" => Some(Resample::Shots),
            "circuits" => Some(Resample::Circuits),
            _ => None,
        }
    }
}

/// Bootstrap settings of an audit.
#[derive(Clone, Debug, PartialEq)]
pub struct BootstrapConfig {
    /// Bootstrap replicates of the whole run (0 = none).
    pub replicates: usize,
    /// Resampling scheme.
    pub resample: Resample,
    /// Two-sided interval level, in (0, 1).
    pub level: f64,
    /// The k of P(in top k), at least 1.
    pub top_k: usize,
    /// Compute only these replicates (a shard); `None` = all.
    pub range: Option<Range<usize>>,
}

impl Default for BootstrapConfig {
    fn default() -> Self {
        BootstrapConfig {
            replicates: 0,
            resample: Resample::Shots,
            level: 0.95,
            top_k: 5,
            range: None,
        }
    }
}

impl BootstrapConfig {
    /// Checks ranges; errors name the setting and the valid range.
    pub fn validate(&self) -> Result<()> {
        if !(self.level > 0.0 && self.level < 1.0) {
            return Err(Error::Usage(format!("--level {} must lie in (0, 1)", self.level)));
        }
        if self.top_k == 0 {
            return Err(Error::Usage("--top-k must be at least 1".into()));
        }
        if let Some(r) = &self.range {
            if r.start >= r.end || r.end > self.replicates {
                return Err(Error::Usage(format!(
                    "--replicate-range {}..{} must be a non-empty range inside 0..{} (--replicates)",
                    r.start, r.end, self.replicates
                )));
            }
        }
        Ok(())
    }

    /// The replicates this run computes.
    pub fn computed(&self) -> Range<usize> {
        self.range.clone().unwrap_or(0..self.replicates)
    }
}

/// The scores of one bootstrap replicate, aligned with a point-estimate report.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct ReplicateScores {
    /// Replicate index (its generator is seeded by (seed, index)).
    pub index: usize,
    /// Directed scores aligned with the report's `directed`, TVD per layer.
    pub directed_tvd_per_layer: Vec<f64>,
    /// Intrinsic slack aligned with the report's `intrinsic`, TVD per occurrence.
    pub intrinsic_tvd_per_occurrence: Vec<f64>,
    /// Unlimited-shot estimates aligned with the report's `directed`, TVD per layer, under
    /// each row's `noncentral` need, which sets the intervals' upper ends (the point estimate
    /// takes the conditional need: [`crate::slack::requirement::conditional_need`]).
    pub directed_estimate_tvd_per_layer: Vec<f64>,
    /// Intrinsic estimates aligned with the report's `intrinsic`, TVD per occurrence.
    pub intrinsic_estimate_tvd_per_occurrence: Vec<f64>,
    /// The estimates under each row's shrunk need, which set the intervals' lower ends
    /// ([`intervals::bracketed`]), aligned like `directed_estimate_tvd_per_layer`.
    #[serde(default)]
    pub directed_lower_tvd_per_layer: Vec<f64>,
    /// The same for intrinsic slack, aligned like `intrinsic_estimate_tvd_per_occurrence`.
    #[serde(default)]
    pub intrinsic_lower_tvd_per_occurrence: Vec<f64>,
}

/// Salts that keep the bootstrap's and the parametric null's streams apart.
const BOOTSTRAP_SALT: u64 = 0x626f_6f74_7374_7261;
const PARAMETRIC_SALT: u64 = 0x7061_7261_6d65_7472;

/// The generator of replicate `i` of the draw family `salt`: a function of (seed, i) only.
fn replicate_rng(seed: u64, salt: u64, i: usize) -> ChaCha8Rng {
    // SplitMix64 finaliser (Steele, Lea, Flood, OOPSLA 2014) to spread (seed, salt).
    let mut z = seed ^ salt;
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    let mut rng = ChaCha8Rng::seed_from_u64(z ^ (z >> 31));
    rng.set_stream(i as u64);
    rng
}

/// The bootstrap replicates of `b.computed()`, aligned with `report`: each is one call of
/// the pipeline on resampled counts ([`pipeline::rescore`]).
pub(crate) fn bootstrap(
    a: &Analysis,
    report: &AuditReport,
    b: &BootstrapConfig,
    seed: u64,
    scorer: &Scorer,
    progress: &dyn Progress,
) -> Result<Vec<ReplicateScores>> {
    let range = b.computed();
    if range.is_empty() {
        return Ok(Vec::new());
    }
    let plan = resample::Plan::new(a);
    let kinds = &a.rows.kinds;
    let kind_of: std::collections::HashMap<String, usize> =
        (0..kinds.len()).map(|k| (kinds.get(k as u32).label(a.layout), k)).collect();
    let order: Vec<Option<usize>> =
        report.intrinsic.iter().map(|r| kind_of.get(&r.kind).copied()).collect();
    progress.stage("bootstrap replicates", range.len() as u64);
    range
        .into_par_iter()
        .map(|i| {
            if progress.cancelled() {
                return Err(Error::Interrupted);
            }
            let mut rng = replicate_rng(seed, BOOTSTRAP_SALT, i);
            let data = plan.draw(a, b.resample == Resample::Circuits, &mut rng);
            let r = pipeline::rescore(a, data, true, true, scorer, progress)?;
            progress.advance(1);
            let aligned = |v: &[f64]| -> Vec<f64> {
                order.iter().map(|k| k.and_then(|k| v.get(k).copied()).unwrap_or(0.0)).collect()
            };
            let (est_directed, est_intrinsic) = r.estimate.unwrap_or_default();
            let (low_directed, low_intrinsic) = r.lower.unwrap_or_default();
            Ok(ReplicateScores {
                index: i,
                intrinsic_tvd_per_occurrence: aligned(&r.intrinsic),
                directed_tvd_per_layer: r.directed,
                intrinsic_estimate_tvd_per_occurrence: aligned(&est_intrinsic),
                directed_estimate_tvd_per_layer: est_directed,
                intrinsic_lower_tvd_per_occurrence: aligned(&low_intrinsic),
                directed_lower_tvd_per_layer: low_directed,
            })
        })
        .collect()
}

/// Settings of the parametric null.
pub(crate) struct NullConfig {
    /// Replicates (0 = none).
    pub replicates: usize,
    /// Seed of every draw.
    pub seed: u64,
    /// Level of the detection limit.
    pub alpha: f64,
}

/// The parametric null (method.md section 5): `cfg.replicates` data sets drawn from the
/// fitted crosstalk-free model's predictions, requirements recomputed against the
/// point-estimate model (no refit: the data come from that model, so the null asks only
/// how much slack its shot noise alone forces), both stages re-solved by the same pipeline
/// as the point pass. `point` holds the directed scores in `scorer`'s order. Returns per
/// directed pair (detection limit, p-value), or None without null replicates.
pub(crate) fn parametric_null(
    a: &Analysis,
    point: &[f64],
    cfg: &NullConfig,
    scorer: &Scorer,
    progress: &dyn Progress,
) -> Result<Option<Vec<(f64, f64)>>> {
    let b = cfg.replicates;
    if b == 0 {
        return Ok(None);
    }
    progress.stage("parametric null", b as u64);
    let reps: Vec<Vec<f64>> = (0..b)
        .into_par_iter()
        .map(|i| {
            if progress.cancelled() {
                return Err(Error::Interrupted);
            }
            let mut rng = replicate_rng(cfg.seed, PARAMETRIC_SALT, i);
            let data = resample::draw_from_model(a, &mut rng);
            let out =
                pipeline::rescore(a, data, false, false, scorer, progress).map(|r| r.directed);
            progress.advance(1);
            out
        })
        .collect::<Result<_>>()?;
    Ok(Some(
        point
            .iter()
            .enumerate()
            .map(|(j, &score)| {
                let null: Vec<f64> = reps.iter().map(|r| r[j]).collect();
                (
                    crate::slack::null::detection_limit(&null, cfg.alpha),
                    crate::slack::null::p_value(score, &null),
                )
            })
            .collect(),
    ))
}

/// One score's replicates: the estimates (`reps`), the estimates under the shrunk needs
/// (`lower`, for the interval's lower end) and the scores.
struct Draws {
    reps: Vec<f64>,
    lower: Vec<f64>,
    scores: Vec<f64>,
}

impl Draws {
    /// The estimate, lower-end and score columns of every replicate.
    fn of(
        reps: &[ReplicateScores],
        estimate: impl Fn(&ReplicateScores) -> f64,
        lower: impl Fn(&ReplicateScores) -> f64,
        score: impl Fn(&ReplicateScores) -> f64,
    ) -> Draws {
        Draws {
            reps: reps.iter().map(&estimate).collect(),
            lower: reps.iter().map(&lower).collect(),
            scores: reps.iter().map(&score).collect(),
        }
    }
}

/// The confidence of an unlimited-shot `estimate` from its replicates, with P(score > 0)
/// from the replicate scores.
fn summarise(estimate: f64, d: &Draws, level: f64) -> Confidence {
    let (reps, scores) = (&d.reps, &d.scores);
    let i = match METHOD {
        Method::Bracketed => intervals::bracketed(&d.lower, reps, level),
        m => interval(estimate, reps, level, m),
    };
    let mut sorted = reps.to_vec();
    sorted.sort_by(f64::total_cmp);
    let median = quantile(&sorted, 0.5);
    Confidence {
        level,
        method: METHOD.name().to_string(),
        low_tvd_per_layer: i.low,
        high_tvd_per_layer: i.high,
        upper_bound_tvd_per_layer: i.upper,
        lower_bound_tvd_per_layer: i.lower,
        median_tvd_per_layer: median,
        p_positive: scores.iter().filter(|&&x| x > 0.0).count() as f64 / scores.len().max(1) as f64,
        replicates_tvd_per_layer: reps.to_vec(),
        score_replicates_tvd_per_layer: scores.to_vec(),
    }
}

/// Fills a point-estimate report's bootstrap fields (intervals, medians, P(score > 0), rank
/// statistics) from all its replicates, in index order 0..replicates, and returns each
/// edge's (a<-b, b<-a) positions in `report.directed`. Verdicts are the audit's to revisit
/// ([`crate::audit::finish`]).
pub fn fill(
    report: &mut AuditReport,
    reps: &[ReplicateScores],
    cfg: &BootstrapConfig,
) -> Result<Vec<(usize, usize)>> {
    if reps.is_empty() {
        return Ok(Vec::new());
    }
    // Replicates hold the qubit directions, then the gate directions.
    let nq = report.directed.len();
    let (nd, ni) = (report.scored_directions(), report.intrinsic.len());
    for (i, r) in reps.iter().enumerate() {
        if r.index != i
            || r.directed_tvd_per_layer.len() != nd
            || r.intrinsic_tvd_per_occurrence.len() != ni
            || r.directed_estimate_tvd_per_layer.len() != nd
            || r.intrinsic_estimate_tvd_per_occurrence.len() != ni
            || r.directed_lower_tvd_per_layer.len() != nd
            || r.intrinsic_lower_tvd_per_occurrence.len() != ni
        {
            return Err(Error::Analysis(format!(
                "bootstrap replicate {} does not match the report (expected index {i}, {nd} directed pairs, {ni} kinds)",
                r.index
            )));
        }
    }
    let level = cfg.level;
    for (j, d) in report.directed.iter_mut().enumerate() {
        let draws = Draws::of(
            reps,
            |r| r.directed_estimate_tvd_per_layer[j],
            |r| r.directed_lower_tvd_per_layer[j],
            |r| r.directed_tvd_per_layer[j],
        );
        d.confidence = Some(summarise(d.estimate_tvd_per_layer, &draws, level));
    }
    fill_gates(report, reps, nq, level);
    for (j, k) in report.intrinsic.iter_mut().enumerate() {
        let draws = Draws::of(
            reps,
            |r| r.intrinsic_estimate_tvd_per_occurrence[j],
            |r| r.intrinsic_lower_tvd_per_occurrence[j],
            |r| r.intrinsic_tvd_per_occurrence[j],
        );
        k.confidence = Some(summarise(k.estimate_tvd_per_occurrence, &draws, level).into());
    }
    let index: std::collections::HashMap<(&str, &str), usize> = report
        .directed
        .iter()
        .enumerate()
        .map(|(j, d)| ((d.victim.as_str(), d.aggressor.as_str()), j))
        .collect();
    let mut pairs = Vec::with_capacity(report.edges.len());
    for e in &report.edges {
        match (index.get(&(e.a.as_str(), e.b.as_str())), index.get(&(e.b.as_str(), e.a.as_str()))) {
            (Some(&ab), Some(&ba)) => pairs.push((ab, ba)),
            _ => {
                return Err(Error::Analysis(format!(
                    "edge {}-{} has no directed entries in the report",
                    e.a, e.b
                )))
            }
        }
    }
    // An edge's replicate is the larger of its two directions' (scores, estimates and lower
    // ends alike).
    let larger = |v: &[f64], (ab, ba): (usize, usize)| v[ab].max(v[ba]);
    let edge_reps: Vec<Vec<f64>> = reps
        .iter()
        .map(|r| pairs.iter().map(|&p| larger(&r.directed_tvd_per_layer, p)).collect())
        .collect();
    let edge_ranks: Vec<Vec<usize>> = edge_reps.iter().map(|s| ranks(s)).collect();
    for (e, (col, &pair)) in report.edges.iter_mut().zip(pairs.iter().enumerate()) {
        let draws = Draws {
            reps: reps.iter().map(|r| larger(&r.directed_estimate_tvd_per_layer, pair)).collect(),
            lower: reps.iter().map(|r| larger(&r.directed_lower_tvd_per_layer, pair)).collect(),
            scores: edge_reps.iter().map(|r| r[col]).collect(),
        };
        e.confidence = Some(summarise(e.estimate_tvd_per_layer, &draws, level));
        let mut rk: Vec<f64> = edge_ranks.iter().map(|r| r[col] as f64).collect();
        rk.sort_by(f64::total_cmp);
        let a = 1.0 - RANK_LEVEL;
        let top = edge_ranks
            .iter()
            .zip(&edge_reps)
            .filter(|(r, s)| s[col] > 0.0 && r[col] <= cfg.top_k)
            .count();
        e.rank_confidence = Some(RankConfidence {
            median_rank: quantile(&rk, 0.5),
            rank_low: quantile(&rk, a / 2.0).floor() as usize,
            rank_high: quantile(&rk, 1.0 - a / 2.0).ceil() as usize,
            top_k: cfg.top_k,
            p_top_k: top as f64 / reps.len() as f64,
        });
    }
    Ok(pairs)
}

/// The gate section's confidence: each gate direction's (replicate position `offset + j`),
/// and each gate pair's from the larger of its directions, as for edges.
fn fill_gates(report: &mut AuditReport, reps: &[ReplicateScores], offset: usize, level: f64) {
    let gates = &mut report.gates;
    for (j, d) in gates.directed.iter_mut().enumerate() {
        let draws = Draws::of(
            reps,
            |r| r.directed_estimate_tvd_per_layer[offset + j],
            |r| r.directed_lower_tvd_per_layer[offset + j],
            |r| r.directed_tvd_per_layer[offset + j],
        );
        d.confidence = Some(summarise(d.estimate_tvd_per_layer, &draws, level));
    }
    let index: std::collections::HashMap<(&str, &str), usize> = gates
        .directed
        .iter()
        .enumerate()
        .map(|(j, d)| ((d.victim.as_str(), d.aggressor.as_str()), offset + j))
        .collect();
    for e in gates.pairs.iter_mut() {
        let cols: Vec<usize> = [(e.a.as_str(), e.b.as_str()), (e.b.as_str(), e.a.as_str())]
            .iter()
            .filter_map(|k| index.get(k).copied())
            .collect();
        let most = |v: &[f64]| cols.iter().map(|&c| v[c]).fold(0.0, f64::max);
        let draws = Draws::of(
            reps,
            |r| most(&r.directed_estimate_tvd_per_layer),
            |r| most(&r.directed_lower_tvd_per_layer),
            |r| most(&r.directed_tvd_per_layer),
        );
        e.confidence = Some(summarise(e.estimate_tvd_per_layer, &draws, level));
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    proptest! {
        /// The replicates' median lies in the reported (bracketed percentile) interval.
        #[test]
        fn median_lies_in_the_interval(est in 0.0f64..1.0, reps in proptest::collection::vec(0.0f64..2.0, 1..60), level in 0.5f64..0.99) {
            let draws = Draws { reps: reps.clone(), lower: reps.clone(), scores: reps };
            let c = summarise(est, &draws, level);
            prop_assert!(c.low_tvd_per_layer <= c.median_tvd_per_layer + 1e-12);
            prop_assert!(c.median_tvd_per_layer <= c.high_tvd_per_layer + 1e-12);
        }
    }
}
