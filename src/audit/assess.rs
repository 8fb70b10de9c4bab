//! Directed scores, attribution ranges, the context-permutation null, leave-one-out and
//! verdicts (method.md sections 4-6).
//!
//! A directed score X(q <- r) is the context slack per layer that victim q's one-qubit
//! operations need while r is active: sum_k c_(k,r) kappa_(k,r) / sum_k c_(k,r), with
//! c_(k,r) the number of occurrences of k during which r was active. It is computed on the
//! victim's own problem, so the null and leave-one-out re-solve only that problem.

use std::collections::{BTreeSet, HashMap};

use rayon::prelude::*;

use super::problems::{Budget, Problem};
use super::{check_cancel, Analysis, AuditConfig, Progress, Solved};
use crate::error::Result;
use crate::gate::Gate;
use crate::layout::QubitIx;
use crate::rows::KindIx;
use crate::slack::lp::TwoStageSolution;

/// Scores below this are zero: the LP's own precision, far below any reported digit.
pub const ZERO_SCORE: f64 = 1e-9;

/// A row needs context slack when its requirement exceeds its intrinsic slack by more
/// than this (TVD): the LP's precision.
const SUPPORT_TOLERANCE: f64 = 1e-9;

/// Candidate circuits tried for leave-one-out, most loaded first.
const LEAVE_ONE_OUT_CANDIDATES: usize = 8;

/// The assessment of one directed pair.
#[derive(Clone, Debug, Default)]
pub(crate) struct Directed {
    pub victim: QubitIx,
    pub aggressor: QubitIx,
    /// True when the data holds any occurrence of a victim operation with r active.
    pub tested: bool,
    pub score: f64,
    /// The least estimate some row could tell from zero (first order; see
    /// [`sensitivity`]); infinite when untested.
    pub sensitivity: f64,
    pub driven: f64,
    pub idle: f64,
    pub attribution: (f64, f64),
    pub null: Vec<f64>,
    pub limit: f64,
    pub p_value: f64,
    pub supporting_rows: usize,
    pub supporting_circuits: usize,
    pub loo: f64,
    pub most_influential: Option<u32>,
    /// Supporting circuits, most loaded first (at most ten).
    pub top_circuits: Vec<u32>,
    pub per_kind: Vec<(KindIx, f64)>,
    /// The score on the victim's reference rows and the rows where r is its only active
    /// neighbour: evidence that r alone disturbs q.
    pub isolated: f64,
    /// Other aggressors that were active together with r on this victim.
    pub co_active: Vec<QubitIx>,
}

/// The assessment of every directed pair, keyed by (victim, aggressor).
pub(crate) struct Assessed {
    pub directed: Vec<Directed>,
    pub index: HashMap<(QubitIx, QubitIx), usize>,
}

/// Score weights of (victim q, aggressor r) on q's problem: (variable, weight), plus the
/// driven-only and idle-only weights.
type Weights = Vec<(usize, f64)>;

fn weights(a: &Analysis, p: &Problem, r: QubitIx) -> (Weights, Weights, Weights) {
    weights_in(a, &a.rows.rows, p, r)
}

/// [`weights`] over rows that share the analysis' kinds but not its programs (a replicate).
fn weights_in(
    a: &Analysis,
    all: &[crate::rows::Row],
    p: &Problem,
    r: QubitIx,
) -> (Weights, Weights, Weights) {
    let mut counts: Vec<(usize, KindIx, f64)> = Vec::new();
    for (j, &i) in p.rows.iter().enumerate() {
        let _ = j;
        for &((k, rr), c) in &all[i].context_counts {
            if rr != r {
                continue;
            }
            let v = p.index[&Budget::Context(k, r)];
            match counts.iter_mut().find(|e| e.0 == v) {
                Some(e) => e.2 += c as f64,
                None => counts.push((v, k, c as f64)),
            }
        }
    }
    counts.sort_by_key(|e| e.0);
    let norm = |sel: &dyn Fn(KindIx) -> bool| -> Weights {
        let total: f64 = counts.iter().filter(|e| sel(e.1)).map(|e| e.2).sum();
        if total == 0.0 {
            return Vec::new();
        }
        counts.iter().filter(|e| sel(e.1)).map(|e| (e.0, e.2 / total)).collect()
    };
    let is_idle = |k: KindIx| a.rows.kinds.get(k).gate == Gate::Id;
    (norm(&|_| true), norm(&|k| !is_idle(k)), norm(&is_idle))
}

fn score(sol: &TwoStageSolution, w: &Weights) -> f64 {
    let s = sol.score(w);
    if s < ZERO_SCORE {
        0.0
    } else {
        s
    }
}

/// Stratum of a row for permuting aggressor r's labels on victim q: depth (timed layers),
/// the victim's role, and which of q's other neighbours were active.
fn stratum(a: &Analysis, row: usize, q: QubitIx, r: QubitIx) -> u64 {
    use std::hash::{Hash, Hasher};
    let row = &a.rows.rows[row];
    let mut h = std::collections::hash_map::DefaultHasher::new();
    depth_class(row.n_timed_layers).hash(&mut h);
    if let Some(v) = row.victims.iter().find(|v| v.qubit == q) {
        v.driven.hash(&mut h);
        for &n in v.active_neighbours.iter().filter(|&&n| n != r) {
            n.hash(&mut h);
        }
    }
    h.finish()
}

/// The depth class of a row for the permutation strata: timed layers in half-octave bins,
/// round(2 log2 L), so for instance 27 to 38 layers share a class. Sequences of one nominal
/// depth compile to different layer counts, and exact counts left most rows alone in their
/// stratum, where permuting changes nothing: on a 4-qubit chain (depths 1, 8, 32, two
/// sequences, 1000 shots, 20 seeds) power at a depolarizing context rate of 4e-3 rose from
/// 4/20 to 20/20, with no false detection on null data either way (tests/calibration.rs).
/// Whole-octave bins gave 18/20; half octaves keep rows of similar depth together.
fn depth_class(timed_layers: u32) -> i32 {
    (2.0 * f64::from(timed_layers.max(1)).log2()).round() as i32
}

/// Directed pairs in report order: victims in layout order, then their neighbours.
pub(crate) fn pairs(a: &Analysis) -> Vec<(QubitIx, QubitIx)> {
    (0..a.layout.n_qubits())
        .flat_map(|q| a.layout.neighbours(q).iter().map(move |&r| (q, r)))
        .collect()
}

/// Every directed score of a solution over `all` (a replicate's rows), in [`pairs`] order;
/// 0 for a pair the rows never test.
pub(crate) fn directed_scores(a: &Analysis, all: &[crate::rows::Row], s: &Solved) -> Vec<f64> {
    pairs(a)
        .into_iter()
        .map(|(q, r)| {
            let (p, sol) = &s.qubit[q];
            score(sol, &weights_in(a, all, p, r).0)
        })
        .collect()
}

pub(crate) fn assess(
    a: &Analysis,
    s: &Solved,
    cfg: &AuditConfig,
    progress: &dyn Progress,
) -> Result<Assessed> {
    let pairs = pairs(a);
    progress.stage("testing directed pairs", pairs.len() as u64);
    // Attribution ranges: one batch per victim.
    let ranges: Vec<HashMap<QubitIx, (f64, f64)>> = (0..a.layout.n_qubits())
        .into_par_iter()
        .map(|q| {
            let (p, sol) = &s.qubit[q];
            let rs: Vec<QubitIx> = a.layout.neighbours(q).to_vec();
            let scores: Vec<Weights> = rs.iter().map(|&r| weights(a, p, r).0).collect();
            let out = p.lp.attribution_ranges(sol, &scores)?;
            Ok(rs.into_iter().zip(out).collect())
        })
        .collect::<Result<_>>()?;
    check_cancel(progress)?;
    let directed: Vec<Directed> = pairs
        .par_iter()
        .map(|&(q, r)| {
            let d = assess_pair(a, s, cfg, q, r, &ranges[q]);
            progress.advance(1);
            if progress.cancelled() {
                return Err(crate::Error::Interrupted);
            }
            d
        })
        .collect::<Result<_>>()?;
    let index = directed.iter().enumerate().map(|(i, d)| ((d.victim, d.aggressor), i)).collect();
    Ok(Assessed { directed, index })
}

fn assess_pair(
    a: &Analysis,
    s: &Solved,
    cfg: &AuditConfig,
    q: QubitIx,
    r: QubitIx,
    ranges: &HashMap<QubitIx, (f64, f64)>,
) -> Result<Directed> {
    let (p, sol) = &s.qubit[q];
    let (w, w_driven, w_idle) = weights(a, p, r);
    let mut d = Directed { victim: q, aggressor: r, ..Default::default() };
    if w.is_empty() {
        d.p_value = 1.0;
        d.sensitivity = f64::INFINITY;
        return Ok(d);
    }
    d.tested = true;
    d.sensitivity = sensitivity(a, p, r);
    d.score = score(sol, &w);
    d.driven = score(sol, &w_driven);
    d.idle = score(sol, &w_idle);
    let (lo, hi) = ranges.get(&r).copied().unwrap_or((d.score, d.score));
    d.attribution = (clip(lo), clip(hi));
    d.per_kind = w
        .iter()
        .map(|&(v, _)| match p.vars[v] {
            Budget::Context(k, _) => (k, sol.values[v]),
            _ => unreachable!("score weights are on context budgets only"),
        })
        .collect();
    let r_vars: Vec<usize> = w.iter().map(|e| e.0).collect();
    let mut co: BTreeSet<QubitIx> = BTreeSet::new();
    for &i in &p.rows {
        let row = &a.rows.rows[i];
        for o in &row.occurrences {
            let ag = row.aggressors(o);
            if ag.contains(&r) {
                co.extend(ag.iter().copied().filter(|&x| x != r));
            }
        }
    }
    d.co_active = co.into_iter().collect();

    // Context-permutation null on the victim's problem.
    if cfg.null_replicates > 0 {
        let strata: Vec<u64> = p.rows.iter().map(|&i| stratum(a, i, q, r)).collect();
        let seed = pair_seed(cfg.seed, q, r);
        d.null = crate::slack::null::permutation_null(
            &p.lp,
            &r_vars,
            &strata,
            &w,
            cfg.null_replicates,
            seed,
        )?
        .into_iter()
        .map(clip)
        .collect();
        d.limit = crate::slack::null::detection_limit(&d.null, cfg.alpha);
        d.p_value = crate::slack::null::p_value(d.score, &d.null);
    } else {
        d.p_value = 1.0;
    }

    // Isolated evidence: the same problem restricted to rows where no other neighbour of q
    // was active. A score that only multi-aggressor rows carry cannot be told apart from
    // the other aggressors' (method.md section 4, "Attribution range").
    if d.score > 0.0 {
        let keep: Vec<usize> = (0..p.rows.len())
            .filter(|&j| {
                let row = &a.rows.rows[p.rows[j]];
                row.is_reference
                    || row
                        .victims
                        .iter()
                        .filter(|v| v.qubit == q)
                        .all(|v| v.active_neighbours.iter().all(|&n| n == r))
            })
            .collect();
        let reduced = p.restricted(&keep);
        let rs = reduced.lp.solve()?;
        d.isolated = score(&rs, &remap(&w, p, &reduced));
    }

    // Supporting rows: rows with r active whose requirement the intrinsic budgets alone do
    // not meet, so that they need context slack; leave-one-out drops their circuits.
    let mut load: HashMap<u32, f64> = HashMap::new();
    for (j, row) in p.lp.rows.iter().enumerate() {
        if !row.terms.iter().any(|&(v, c)| c > 0.0 && r_vars.contains(&v)) {
            continue;
        }
        let intrinsic: f64 = row
            .terms
            .iter()
            .filter(|&&(v, _)| !matches!(p.vars[v], Budget::Context(..)))
            .map(|&(v, c)| c * sol.values[v])
            .sum();
        let need = row.requirement - intrinsic;
        if need > SUPPORT_TOLERANCE {
            d.supporting_rows += 1;
            *load.entry(a.rows.rows[p.rows[j]].circuit).or_default() += need;
        }
    }
    d.supporting_circuits = load.len();
    d.loo = d.score;
    if d.score > 0.0 {
        let mut cands: Vec<(u32, f64)> = load.into_iter().collect();
        cands.sort_by(|x, y| y.1.total_cmp(&x.1).then(x.0.cmp(&y.0)));
        d.top_circuits = cands.iter().take(10).map(|c| c.0).collect();
        cands.truncate(LEAVE_ONE_OUT_CANDIDATES);
        for (c, _) in cands {
            let reduced = p.without_circuit(&a.rows.rows, c);
            let rs = reduced.lp.solve()?;
            let v = score(&rs, &remap(&w, p, &reduced));
            if v < d.loo {
                d.loo = v;
                d.most_influential = Some(c);
            }
        }
    }
    Ok(d)
}

/// Polarization of a prediction: how far its most likely outcome stands above uniform, as a
/// fraction of the most it could, (p_top - 1/K) / (1 - 1/K); with it, p_top.
fn polarization(p: &[f64]) -> (f64, f64) {
    let k = p.len().max(2) as f64;
    let top = p.iter().copied().fold(0.0, f64::max);
    (((top - 1.0 / k) / (1.0 - 1.0 / k)).max(0.0), top)
}

/// The sensitivity of victim q's problem `p` to aggressor r: the least unlimited-shot
/// estimate of X(q <- r) at which some row would need slack, to first order.
///
/// A depolarizing error of strength e on each of a row's c occurrences with r active moves
/// e (1 - 1/K) pi_row c of probability off the most likely outcome (depolarizing channels
/// commute, so the place in the circuit does not matter; pi is the row's polarization),
/// and the estimate then comes out at e (1 - 1/K) pi_max, pi_max the largest polarization
/// among the victim's rows. The row needs slack once that shift reaches its detectable
/// shift s_row, so the sensitivity is min over rows of s_row pi_max / (c pi_row).
/// Coherent errors under twirling and errors that are not depolarizing move other outcomes
/// first: this is a yardstick for planning and for reading a zero score, not a guarantee.
fn sensitivity(a: &Analysis, p: &Problem, r: QubitIx) -> f64 {
    let n_rows = a.used.len();
    let pi_max = p.rows.iter().map(|&i| polarization(&a.predictions[i]).0).fold(0.0, f64::max);
    // The threshold depends on the outcome count alone; a quantile costs a root search.
    let mut thresholds: Vec<(usize, f64)> = Vec::new();
    let mut best = f64::INFINITY;
    for &i in &p.rows {
        let row = &a.rows.rows[i];
        let c: u32 = row.context_counts.iter().filter(|e| e.0 .1 == r).map(|e| e.1).sum();
        let pred = &a.predictions[i];
        if c == 0 || pred.len() < 2 {
            continue;
        }
        let (pi, top) = polarization(pred);
        if pi <= 0.0 {
            continue;
        }
        let dof = pred.len() - 1;
        let t = match thresholds.iter().find(|e| e.0 == dof) {
            Some(e) => e.1,
            None => {
                let t = crate::stats::bonferroni_threshold(dof, a.alpha, n_rows);
                thresholds.push((dof, t));
                t
            }
        };
        let shift = crate::slack::requirement::detectable_shift(top, row.shots, t);
        best = best.min(shift * pi_max / (c as f64 * pi));
    }
    best
}

/// Score weights of `from` expressed on the variables of `to` (a sub-problem of it).
fn remap(w: &Weights, from: &Problem, to: &Problem) -> Weights {
    w.iter().filter_map(|&(v, wt)| to.index.get(&from.vars[v]).map(|&nv| (nv, wt))).collect()
}

fn clip(x: f64) -> f64 {
    if x < ZERO_SCORE {
        0.0
    } else {
        x
    }
}

/// The seed of one directed pair's null: a function of (seed, victim, aggressor) only.
fn pair_seed(seed: u64, q: QubitIx, r: QubitIx) -> u64 {
    // SplitMix64 finaliser over the packed indices (Steele, Lea, Flood, OOPSLA 2014).
    let mut z = seed ^ ((q as u64) << 32 | r as u64).wrapping_mul(0x9E37_79B9_7F4A_7C15);
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}
