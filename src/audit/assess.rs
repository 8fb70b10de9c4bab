//! Directed scores, attribution ranges, the context-permutation null, leave-one-out and
//! verdicts (method.md sections 4-6).
//!
//! The verdict rule, in the order its steps are tried (each gives a reason code):
//! untested -> no slack -> attribution (another aggressor could carry it, unless the pair's
//! own circuits have the power to see it and need none) -> not tested against a null ->
//! mid-p significance -> robustness (leave one circuit out, or corroboration by the other
//! circuits at their own level) -> the interval's lower end against the action threshold.
//!
//! A directed score X(q <- r) is the context slack per layer that victim q's one-qubit
//! operations need while r is active: sum_k c_(k,r) kappa_(k,r) / sum_k c_(k,r), with
//! c_(k,r) the number of occurrences of k during which r was active. It is computed on the
//! victim's own problem, so the null and leave-one-out re-solve only that problem.

use std::collections::{BTreeSet, HashMap};

use rayon::prelude::*;

use super::problems::{Budget, Problem};
use super::{check_cancel, Analysis, AuditConfig, PassRows, Progress, Solved};
use crate::error::Result;
use crate::gate::Gate;
use crate::layout::QubitIx;
use crate::report::{DirectedReport, ReasonCode, Verdict};
use crate::rows::KindIx;
use crate::slack::lp::TwoStageSolution;

/// Scores below this are zero: the LP's own precision, far below any reported digit.
pub const ZERO_SCORE: f64 = 1e-9;

/// A row needs context slack when its requirement exceeds its intrinsic slack by more
/// than this (TVD): the LP's precision.
const SUPPORT_TOLERANCE: f64 = 1e-9;

/// Candidate circuits tried for leave-one-out, most loaded first.
const LEAVE_ONE_OUT_CANDIDATES: usize = 8;

/// The pair's own circuits (reference rows and rows where the aggressor is the victim's only
/// active neighbour) have the power to see a context slack s when their sensitivity is at
/// most s / POWER_MARGIN. The sensitivity is first order (see [`sensitivity`]), hence the
/// margin.
const POWER_MARGIN: f64 = 2.0;

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
    /// Mid-p value of the score against the permutation null (1 without one).
    pub p_value: f64,
    /// Significant (mid-p at most alpha) and robust: it survives leaving out its most
    /// influential circuit, or the other circuits corroborate it.
    pub detected: bool,
    /// When leaving out the most influential circuit drops the score to the null: the mid-p
    /// value of the other circuits' evidence, each row judged at its own (unadjusted)
    /// threshold, against shuffling r's activity within strata. None when not needed.
    pub corroboration_p: Option<f64>,
    /// The level `corroboration_p` must reach ([`corroboration_level`]); 0 when not needed.
    pub corroboration_level: f64,
    /// Sensitivity of the pair's own circuits (reference rows and rows where r is the
    /// victim's only active neighbour); infinite when there are none.
    pub isolated_sensitivity: f64,
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
    /// False when no row that carries r's label shares its stratum with a row that does not:
    /// no permutation can move the label, so the null cannot test the direction.
    pub testable: bool,
    /// The score on the rows that can test r (see [`testing_rows`]): what the null, the
    /// p-value, the detection limit and leave-one-out are about. Equal to `score` when every
    /// row can; 0 when none can.
    pub test_score: f64,
    /// Rows left out of the test because r's label never varies in their stratum.
    pub untestable_rows: usize,
    /// True when the exposure null decided (see [`NULLS`]); `null` then holds it.
    pub exposure_null: bool,
    /// The test score without the most influential circuit: what robustness is judged on
    /// (`loo` is the score's, for the reports).
    pub test_loo: f64,
}

/// The problem the permutation test is about: the victim's rows that can test r
/// ([`testing_rows`]), each labelled row carrying its own exposure to r.
struct TestProblem {
    problem: Problem,
    /// Row j's exposure: (Context(k, r), occurrences of k in the row) for every kind k of the
    /// victim with a context budget for r.
    labels: Vec<Vec<(usize, f64)>>,
    /// Whether r was active in row j.
    labelled: Vec<bool>,
}

/// The rows `keep` of `p` with r's label of each labelled row replaced by its exposure.
///
/// A row's label counts the occurrences during which r was active; a row the permutation
/// labels has no such count, so every row is given the same measure, its occurrences of each
/// kind, for its exposure. Observed and replicate statistics then differ only in which rows
/// are labelled.
fn test_problem(p: &Problem, keep: &[usize], r_vars: &[usize]) -> TestProblem {
    // The aggressor's context budget of each of the victim's kinds.
    let by_kind: HashMap<KindIx, usize> = r_vars
        .iter()
        .filter_map(|&v| match p.vars[v] {
            Budget::Context(k, _) | Budget::GateContext(k, _) => Some((k, v)),
            _ => None,
        })
        .collect();
    let mut problem = p.restricted(keep);
    let mut labels = Vec::with_capacity(keep.len());
    let mut labelled = Vec::with_capacity(keep.len());
    for row in &mut problem.lp.rows {
        let exposure: Vec<(usize, f64)> = row
            .terms
            .iter()
            .filter_map(|&(v, c)| match p.vars[v] {
                Budget::Intrinsic(k) => by_kind.get(&k).map(|&x| (x, c)),
                _ => None,
            })
            .collect();
        let on = carries_label(row, r_vars);
        row.terms.retain(|(v, _)| !r_vars.contains(v));
        if on {
            row.terms.extend_from_slice(&exposure);
        }
        labels.push(exposure);
        labelled.push(on);
    }
    TestProblem { problem, labels, labelled }
}

/// The assessment of every directed pair, keyed by (victim, aggressor).
pub(crate) struct Assessed {
    pub directed: Vec<Directed>,
    pub index: HashMap<(QubitIx, QubitIx), usize>,
}

/// Score weights of (victim q, aggressor r) on q's problem: (variable, weight), plus the
/// driven-only and idle-only weights.
pub(crate) type Weights = Vec<(usize, f64)>;

fn weights(a: &Analysis, p: &Problem, r: QubitIx) -> (Weights, Weights, Weights) {
    let counts = context_tallies(PassRows::own(&a.rows.rows), p, &[r]).pop().unwrap_or_default();
    let is_idle = |k: KindIx| a.rows.kinds.get(k).gate == Gate::Id;
    (
        normalised(&counts, &|_| true),
        normalised(&counts, &|k| !is_idle(k)),
        normalised(&counts, &is_idle),
    )
}

/// Per aggressor of `aggressors`, its context occurrences on the rows of `p` over `all` (a
/// replicate's rows, or the analysis' own): (context variable, kind, count), by variable.
fn context_tallies(
    all: PassRows<'_>,
    p: &Problem,
    aggressors: &[QubitIx],
) -> Vec<Vec<(usize, KindIx, f64)>> {
    let mut counts: Vec<Vec<(usize, KindIx, f64)>> = vec![Vec::new(); aggressors.len()];
    for &i in &p.rows {
        for &((k, r), c) in &all[i].context_counts {
            let Some(slot) = aggressors.iter().position(|&x| x == r) else { continue };
            let v = p.index[&Budget::Context(k, r)];
            let list = &mut counts[slot];
            match list.iter_mut().find(|e| e.0 == v) {
                Some(e) => e.2 += c as f64,
                None => list.push((v, k, c as f64)),
            }
        }
    }
    for list in &mut counts {
        list.sort_by_key(|e| e.0);
    }
    counts
}

/// The tallies of the kinds `sel` keeps, as weights summing to 1 (none when they are 0).
fn normalised(counts: &[(usize, KindIx, f64)], sel: &dyn Fn(KindIx) -> bool) -> Weights {
    let total: f64 = counts.iter().filter(|e| sel(e.1)).map(|e| e.2).sum();
    if total == 0.0 {
        return Vec::new();
    }
    counts.iter().filter(|e| sel(e.1)).map(|e| (e.0, e.2 / total)).collect()
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
pub(crate) fn depth_class(timed_layers: u32) -> i32 {
    (2.0 * f64::from(timed_layers.max(1)).log2()).round() as i32
}

/// Directed pairs in report order: victims in layout order, then their neighbours.
pub(crate) fn pairs(a: &Analysis) -> Vec<(QubitIx, QubitIx)> {
    (0..a.layout.n_qubits())
        .flat_map(|q| a.layout.neighbours(q).iter().map(move |&r| (q, r)))
        .collect()
}

/// The score weights (all kinds) of every directed pair of [`pairs`] on the victims'
/// problems in `s`, over `all` (a replicate's rows): one pass over each victim's rows.
pub(crate) fn direction_weights(a: &Analysis, all: PassRows<'_>, s: &Solved) -> Vec<Weights> {
    (0..a.layout.n_qubits())
        .into_par_iter()
        .flat_map_iter(|q| {
            context_tallies(all, &s.qubit[q].0, a.layout.neighbours(q))
                .into_iter()
                .map(|counts| normalised(&counts, &|_| true))
        })
        .collect()
}

/// Every directed score of a solution, in [`pairs`] order, under the weights of
/// [`direction_weights`]; 0 for a pair the rows never test.
pub(crate) fn directed_scores(a: &Analysis, weights: &[Weights], s: &Solved) -> Vec<f64> {
    pairs(a).into_iter().zip(weights).map(|((q, _), w)| score(&s.qubit[q].1, w)).collect()
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
            let d = assess_pair(a, s, cfg, q, r, &ranges[q], pairs.len());
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
    family: usize,
) -> Result<Directed> {
    let (p, sol) = &s.qubit[q];
    let w = weights(a, p, r);
    if w.0.is_empty() {
        return Ok(Directed {
            victim: q,
            aggressor: r,
            p_value: 1.0,
            sensitivity: f64::INFINITY,
            ..Default::default()
        });
    }
    let count = |p: &Problem, j: usize, kind: &dyn Fn(KindIx) -> bool| -> u32 {
        let row = &a.rows.rows[p.rows[j]];
        row.context_counts.iter().filter(|e| e.0 .1 == r && kind(e.0 .0)).map(|e| e.1).sum()
    };
    // Rows where no other neighbour of q was active: the isolated evidence.
    let isolated: Vec<usize> = (0..p.rows.len())
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
    let subject = Subject {
        p,
        sol,
        weights: w,
        range: ranges.get(&r).copied(),
        strata: p.rows.iter().map(|&i| stratum(a, i, q, r)).collect(),
        isolated,
        count: &count,
        seed: pair_seed(cfg.seed, q, r),
        corroboration_seed: pair_seed(cfg.seed ^ CORROBORATION_SALT, q, r),
        family,
    };
    let mut d = assess_direction(a, cfg, &subject)?;
    d.victim = q;
    d.aggressor = r;
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
    Ok(d)
}

/// Occurrences, in problem row `j` of a (possibly reduced) victim problem, of the victim's
/// operations with the aggressor active, counting only kinds the filter admits.
pub(crate) type OccurrenceCount<'a> = dyn Fn(&Problem, usize, &dyn Fn(KindIx) -> bool) -> u32 + 'a;

/// One direction (victim <- aggressor) on the victim's solved problem: what
/// [`assess_direction`] needs, whatever the victim and the aggressor are (a qubit's one-qubit
/// operations beside a qubit, or a gate beside a gate or a qubit).
pub(crate) struct Subject<'s> {
    /// The victim's problem and its solution.
    pub p: &'s Problem,
    pub sol: &'s TwoStageSolution,
    /// Score weights on the aggressor's context budgets: all, driven kinds, idle kinds.
    pub weights: (Weights, Weights, Weights),
    /// The attribution range of the score, when computed.
    pub range: Option<(f64, f64)>,
    /// Permutation stratum of each problem row.
    pub strata: Vec<u64>,
    /// Problem rows (positions) where the aggressor is the victim's only active neighbour,
    /// and reference rows.
    pub isolated: Vec<usize>,
    pub count: &'s OccurrenceCount<'s>,
    /// Seeds of the detection null and the corroboration null.
    pub seed: u64,
    pub corroboration_seed: u64,
    /// How many directions the audit tests alongside this one (it sets the corroboration's
    /// level, [`corroboration_level`]).
    pub family: usize,
}

/// Scores, attribution, permutation null, isolated evidence, supporting rows and
/// leave-one-out of one direction (method.md sections 4-6); `victim`, `aggressor` and
/// `co_active` are the caller's to fill.
pub(crate) fn assess_direction(a: &Analysis, cfg: &AuditConfig, x: &Subject) -> Result<Directed> {
    let (p, sol) = (x.p, x.sol);
    let (w, w_driven, w_idle) = &x.weights;
    let mut d = Directed::default();
    if w.is_empty() {
        d.p_value = 1.0;
        d.sensitivity = f64::INFINITY;
        return Ok(d);
    }
    d.tested = true;
    d.sensitivity = sensitivity_with(a, p, x.count, &|_| true);
    d.score = score(sol, w);
    d.driven = score(sol, w_driven);
    d.idle = score(sol, w_idle);
    let (lo, hi) = x.range.unwrap_or((d.score, d.score));
    d.attribution = (clip(lo), clip(hi));
    d.per_kind = w
        .iter()
        .map(|&(v, _)| match p.vars[v] {
            Budget::Context(k, _) | Budget::GateContext(k, _) => (k, sol.values[v]),
            _ => unreachable!("score weights are on context budgets only"),
        })
        .collect();
    let r_vars: Vec<usize> = w.iter().map(|e| e.0).collect();

    // The test (method.md section 5, with two departures; DEVELOPERS.md, "Significance").
    // 1. Rows that cannot test r: the permutation moves r's activity only within strata, so
    //    a labelled row in a stratum where every row is labelled stays labelled in every
    //    replicate and its slack comes back unchanged (all-active circuits: no circuit idles
    //    r while the same other neighbours are active). They only add ties; the test uses
    //    the other rows.
    // 2. Exposure: a row labelled in a replicate carries its own exposure to r (every
    //    occurrence of the victim's operations in it), not another row's label; see
    //    `slack::null::indicator_null`. The observed test statistic uses the same exposure.
    // The score, the estimate and the interval keep every row and the real labels.
    let all_strata = &x.strata;
    let testing = testing_rows(&p.lp.rows, &r_vars, all_strata);
    d.untestable_rows = p.rows.len() - testing.len();
    let test = test_problem(p, &testing, &r_vars);
    let label_problem = p.restricted(&testing);
    let strata: Vec<u64> = testing.iter().map(|&j| all_strata[j]).collect();
    d.testable = test.labelled.iter().any(|&l| l);
    let mut tp = &label_problem;
    let mut tsol = label_problem.lp.solve()?;
    d.test_score = if d.testable { score(&tsol, w) } else { 0.0 };

    // Two permutation nulls on the rows that can test r, combined by Bonferroni
    // ([`NULLS`]): labels moved between rows, and indicators with each row's own exposure.
    // The second is run only when the first does not already decide.
    if cfg.null_replicates > 0 && d.testable {
        let seed = x.seed;
        let clip_all = |v: Vec<f64>| -> Vec<f64> { v.into_iter().map(clip).collect() };
        d.null = clip_all(crate::slack::null::permutation_null(
            &tp.lp,
            &r_vars,
            &strata,
            w,
            cfg.null_replicates,
            seed,
        )?);
        if !significant(d.test_score, &d.null, cfg.alpha) && d.test_score > 0.0 {
            let esol = test.problem.lp.solve()?;
            let escore = score(&esol, w);
            let other = clip_all(crate::slack::null::indicator_null(
                &test.problem.lp,
                &r_vars,
                &test.labels,
                &test.labelled,
                &strata,
                w,
                cfg.null_replicates,
                seed ^ INDICATOR_SALT,
            )?);
            let pv = crate::slack::null::p_value;
            if pv(escore, &other) < pv(d.test_score, &d.null) {
                d.null = other;
                d.exposure_null = true;
                d.test_score = escore;
                tp = &test.problem;
                tsol = esol;
            }
        }
        d.limit = crate::slack::null::detection_limit(&d.null, cfg.alpha / NULLS);
        d.p_value = combined_p(d.test_score, &d.null);
    } else {
        d.p_value = 1.0;
    }

    // Isolated evidence: the same problem restricted to rows where no other neighbour of the
    // victim was active. A score that only multi-aggressor rows carry cannot be told apart
    // from the other aggressors' (method.md section 4, "Attribution range").
    if d.score > 0.0 {
        let reduced = p.restricted(&x.isolated);
        let rs = reduced.lp.solve()?;
        d.isolated = score(&rs, &remap(w, p, &reduced));
        // Power on the operations that carry the unexplained slack (a driven-only error is
        // invisible to rows where the victim idles beside the aggressor).
        let carrying: Vec<KindIx> = p
            .vars
            .iter()
            .enumerate()
            .filter_map(|(v, b)| match *b {
                Budget::Context(k, _) | Budget::GateContext(k, _) if sol.values[v] > ZERO_SCORE => {
                    Some(k)
                }
                _ => None,
            })
            .collect();
        d.isolated_sensitivity = sensitivity_with(a, &reduced, x.count, &|k| {
            carrying.is_empty() || carrying.contains(&k)
        });
    } else {
        d.isolated_sensitivity = f64::INFINITY;
    }

    // Supporting rows: rows with the aggressor active whose requirement the intrinsic
    // budgets alone do not meet, so that they need context slack; leave-one-out drops their
    // circuits.
    let mut load: HashMap<u32, f64> = HashMap::new();
    for (j, row) in tp.lp.rows.iter().enumerate() {
        if !row.terms.iter().any(|&(v, c)| c > 0.0 && r_vars.contains(&v)) {
            continue;
        }
        let intrinsic: f64 = row
            .terms
            .iter()
            .filter(|&&(v, _)| !matches!(tp.vars[v], Budget::Context(..) | Budget::GateContext(..)))
            .map(|&(v, c)| c * tsol.values[v])
            .sum();
        let need = row.requirement - intrinsic;
        if need > SUPPORT_TOLERANCE {
            d.supporting_rows += 1;
            *load.entry(a.rows.rows[tp.rows[j]].circuit).or_default() += need;
        }
    }
    d.supporting_circuits = load.len();
    d.loo = d.score;
    d.test_loo = d.test_score;
    if d.test_score > 0.0 {
        let mut cands: Vec<(u32, f64)> = load.into_iter().collect();
        cands.sort_by(|x, y| y.1.total_cmp(&x.1).then(x.0.cmp(&y.0)));
        d.top_circuits = cands.iter().take(10).map(|c| c.0).collect();
        cands.truncate(LEAVE_ONE_OUT_CANDIDATES);
        for (c, _) in cands {
            let reduced = tp.without_circuit(&a.rows.rows, c);
            let rs = reduced.lp.solve()?;
            let v = score(&rs, &remap(w, tp, &reduced));
            if v < d.test_loo {
                d.test_loo = v;
                d.most_influential = Some(c);
            }
        }
        if let Some(c) = d.most_influential {
            let reduced = p.without_circuit(&a.rows.rows, c);
            d.loo = score(&reduced.lp.solve()?, &remap(w, p, &reduced));
        }
    }

    if significant(d.test_score, &d.null, cfg.alpha) {
        let robust = significant(d.test_loo, &d.null, cfg.alpha);
        if !robust {
            if let Some(c) = d.most_influential {
                let seed = x.corroboration_seed;
                d.corroboration_level = corroboration_level(cfg.alpha, x.family);
                let level = d.corroboration_level;
                d.corroboration_p = Some(corroboration(a, tp, &test, &strata, c, cfg, level, seed));
            }
        }
        d.detected = robust || d.corroboration_p.is_some_and(|pv| pv <= d.corroboration_level);
    }
    Ok(d)
}

/// Positions of the rows that can test aggressor variables `r_vars`: every row without r's
/// label, and every labelled row whose stratum also holds a row without it. A labelled row
/// alone with labelled rows in its stratum keeps its label under every permutation
/// (method.md section 5), so it can only reproduce the observed score in the null.
/// Whether a row carries the aggressor's label: a positive term on one of `r_vars`.
fn carries_label(row: &crate::slack::lp::Row, r_vars: &[usize]) -> bool {
    row.terms.iter().any(|&(v, c)| c > 0.0 && r_vars.contains(&v))
}

fn testing_rows(rows: &[crate::slack::lp::Row], r_vars: &[usize], strata: &[u64]) -> Vec<usize> {
    let labelled: Vec<bool> = rows.iter().map(|row| carries_label(row, r_vars)).collect();
    let mut unlabelled_strata: Vec<u64> =
        strata.iter().zip(&labelled).filter(|(_, &l)| !l).map(|(&s, _)| s).collect();
    unlabelled_strata.sort_unstable();
    unlabelled_strata.dedup();
    (0..rows.len())
        .filter(|&j| !labelled[j] || unlabelled_strata.binary_search(&strata[j]).is_ok())
        .collect()
}

/// The permutation nulls a direction is tested against, combined by Bonferroni: significant
/// when either null's mid-p value is at most alpha / NULLS.
///
/// Moving r's labels between rows (`slack::null::permutation_null`, method.md section 5)
/// pairs a row's need with another row's exposure; when the need grows with exposure (a gate
/// error per occurrence), the observed pairing needs the least budget and the null scores
/// above it, so strong errors fell inside their own null (a 3.4e-2 dephasing context error
/// on a 4x4 chip at mid-p 0.29). Moving only whether r was active, each row keeping its own
/// exposure (`slack::null::indicator_null`), has no such bias but little power when the
/// need does not grow with exposure (readout error that depends on r's outcome: the demo's
/// q15 <- q11 fell from mid-p 0.010 to 0.095). Each null is exact under the hypothesis that
/// the needs do not depend on r's activity, so the Bonferroni union keeps the level.
pub const NULLS: f64 = 2.0;

/// Salt that keeps the exposure null's stream apart from the label null's.
const INDICATOR_SALT: u64 = 0x6578_706f_7375_7265;

/// The combined p-value of score `x` against the null that decided ([`NULLS`]).
fn combined_p(x: f64, null: &[f64]) -> f64 {
    (NULLS * crate::slack::null::p_value(x, null)).min(1.0)
}

/// Whether `x` is significant at `alpha` against the null that decided ([`NULLS`]).
fn significant(x: f64, null: &[f64], alpha: f64) -> bool {
    !null.is_empty() && combined_p(x, null) <= alpha
}

/// Salt that keeps the corroboration null's stream apart from the detection null's.
pub(crate) const CORROBORATION_SALT: u64 = 0x636f_7272_6f62_6f72;

/// Least permutations of the corroboration null: it solves no linear program, so it can
/// afford enough to resolve its level finely whatever `--null-replicates` is (20 per unit of
/// 1 / level, at least this many).
const CORROBORATION_REPLICATES: usize = 1999;

/// The level a corroboration p-value must reach, when the audit tests `family` directions
/// at `alpha` each: min(alpha, 1 / family).
///
/// Corroboration rescues a score that rests on one circuit, which is what a chance detection
/// looks like; with `family` directions tested at alpha, about family x alpha chance
/// detections reach this step on a chip with no crosstalk at all. Tested at level c, they add
/// about family x alpha x c false flags per chip (the two tests see nearly disjoint rows), so
/// c = 1 / family keeps that at alpha. At alpha itself, 2 of 20 simulated chips with two
/// drifting qubits (tests/audit_recovery.rs) got a `watch` this way (p = 0.023 and 0.047,
/// family 48), while the real context errors of tests/study.rs that needed corroboration
/// reached p <= 0.0043.
pub(crate) fn corroboration_level(alpha: f64, family: usize) -> f64 {
    alpha.min(1.0 / family.max(1) as f64)
}

/// Whether the victim's other circuits corroborate a score that rests on circuit `c`: the
/// mid-p value of the total requirement of the rows where r was active, on the rows that can
/// test r without `c`, each row's requirement recomputed at its own unadjusted threshold (the
/// chi-squared (1 - alpha) quantile, not the Bonferroni one), against the stratified
/// permutation of r's activity ([`crate::slack::null::labelled_sum_null`]).
///
/// The Bonferroni threshold is there to find a deviation among all rows; once one circuit
/// has pointed at the pair, the question is whether the rest lean the same way, and each of
/// them can show the error only at its own level. A coherent error shows strongly in a few
/// repeated-gate circuits and weakly in the rest, and a dephasing error most in the deepest
/// randomized sequence, so leaving out the strongest circuit loses every row above the
/// Bonferroni threshold while the rows below it still lean with r's activity. The question
/// is about many rows at once, so the statistic is their sum: the score's linear program
/// answers with its largest row, and with few rows per stratum the permutation distribution
/// of a maximum cannot reach alpha (two rows of which one is labelled give it 1/2 at best).
/// A chance outlier leaves rows whose excesses are independent of r's activity, and the
/// null then finds them no more often than alpha.
#[allow(clippy::too_many_arguments)]
fn corroboration(
    a: &Analysis,
    p: &Problem,
    test: &TestProblem,
    strata: &[u64],
    c: u32,
    cfg: &AuditConfig,
    level: f64,
    seed: u64,
) -> f64 {
    let keep: Vec<usize> =
        (0..p.rows.len()).filter(|&j| a.rows.rows[p.rows[j]].circuit != c).collect();
    // Each row at its own level: the Bonferroni thresholds of a family of one row.
    let thresholds = crate::stats::RowThresholds::new(cfg.alpha, 1);
    let values: Vec<f64> = keep
        .iter()
        .map(|&j| {
            let i = p.rows[j];
            let pred = &a.predictions[i];
            match &a.rows.rows[i].marginal {
                Some(m) if pred.len() >= 2 => crate::slack::requirement::requirement(
                    pred,
                    m,
                    thresholds.of_outcomes(pred.len()),
                ),
                _ => 0.0,
            }
        })
        .collect();
    let labelled: Vec<bool> = keep.iter().map(|&j| test.labelled[j]).collect();
    let sub_strata: Vec<u64> = keep.iter().map(|&j| strata[j]).collect();
    let observed = crate::slack::null::labelled_sum(&values, &labelled);
    let null = crate::slack::null::labelled_sum_null(
        &values,
        &labelled,
        &sub_strata,
        CORROBORATION_REPLICATES.max((20.0 / level).ceil() as usize),
        seed,
    );
    crate::slack::null::p_value(observed, &null)
}

/// A direction's verdict and the reason (method.md section 6), before edge-level
/// combination; the steps are those of the module header.
///
/// A positive score that another aggressor could carry is `confounded` only when the share
/// it might carry exceeds the action threshold (tiny shares are noise, and calling them
/// confounded would send users to redesign circuits for nothing), and only when the pair's
/// own circuits cannot settle it: when they have the power to see that share and need no
/// slack, the slack belongs to the other aggressor and the pair is clean (`none-alone`).
pub(crate) fn direction_verdict(d: &Directed, cfg: &AuditConfig) -> (Verdict, ReasonCode, String) {
    let pm = |x: f64| crate::report::terminal::per_mille(x);
    if !d.tested {
        return (
            Verdict::Clean,
            ReasonCode::Untested,
            "never tested: no circuit ran the victim with this aggressor active".into(),
        );
    }
    if d.score <= 0.0 {
        return (Verdict::Clean, ReasonCode::NoSlack, "no context slack needed".into());
    }
    if d.attribution.0 <= ZERO_SCORE || d.isolated <= ZERO_SCORE {
        let share = d.attribution.1.max(d.score);
        if d.isolated <= ZERO_SCORE && POWER_MARGIN * d.isolated_sensitivity <= share {
            return (
                Verdict::Clean,
                ReasonCode::NoneAlone,
                format!(
                    "circuits where this aggressor is the only active neighbour could see {} per layer (they see down to {}) and need none: the slack belongs to another aggressor active at the same time",
                    pm(share),
                    pm(d.isolated_sensitivity)
                ),
            );
        }
        let (code, why) = if d.attribution.0 <= ZERO_SCORE {
            (ReasonCode::Shared, "another aggressor active at the same time could carry this slack")
        } else {
            (ReasonCode::NotAlone, "only circuits where other neighbours were active too need it")
        };
        // Whether it is significant cannot be asked of the conditional null: permuting r among
        // rows where its partner is always active changes nothing. Size is what matters.
        return if d.attribution.1 > cfg.action_threshold_tvd_per_layer {
            (
                Verdict::Confounded,
                code,
                format!(
                    "{why}: up to {} per layer could be this pair's, which would be above the action threshold, and the circuits where it is the only active neighbour cannot tell (they see down to {}); run circuits where they are active apart",
                    pm(d.attribution.1),
                    pm(d.isolated_sensitivity)
                ),
            )
        } else {
            (
                Verdict::Clean,
                code,
                format!(
                    "{why}, and at most {} per layer: below the action threshold",
                    pm(d.attribution.1)
                ),
            )
        };
    }
    if !d.testable {
        return (
            Verdict::NotTested,
            ReasonCode::Untestable,
            format!(
                "needs {} per layer of context slack, but only in circuits where this aggressor is active in every circuit alike in depth and in the other neighbours' activity, so no permutation can test it; add circuits where it is the victim's only active neighbour (design's pair contexts)",
                pm(d.score)
            ),
        );
    }
    if cfg.null_replicates == 0 {
        return (
            Verdict::NotTested,
            ReasonCode::NoNull,
            format!(
                "needs {} per layer of context slack, but no null replicates were run (--null-replicates 0), so it was not tested",
                pm(d.score)
            ),
        );
    }
    if !significant(d.test_score, &d.null, cfg.alpha) {
        let rows = if d.untestable_rows == 0 {
            String::new()
        } else {
            format!(
                " on the rows that can test it ({} rows, where this aggressor is active in every circuit alike, cannot)",
                d.untestable_rows
            )
        };
        return (
            Verdict::Clean,
            ReasonCode::InNull,
            format!(
                "score {}{rows} is within the permutation null (limit {}, mid-p {:.3})",
                pm(d.test_score),
                pm(d.limit),
                d.p_value
            ),
        );
    }
    if !d.detected {
        return (
            Verdict::Clean,
            ReasonCode::OneCircuit,
            format!(
                "rests on one circuit: without it the score falls to {} (limit {}), and the other circuits, each judged at its own level, do not lean with this aggressor (mid-p {:.4}, needs {:.4})",
                pm(d.test_loo),
                pm(d.limit),
                d.corroboration_p.unwrap_or(1.0),
                d.corroboration_level
            ),
        );
    }
    // Without replicates the lower value is the attribution minimum or leave-one-out;
    // with them, crate::confidence::finish replaces it by the interval's lower end.
    let lower = d.attribution.0.min(d.loo);
    detected_verdict(d.p_value, lower, cfg.action_threshold_tvd_per_layer)
}

/// The detection rule of method.md section 6 on a reported direction (null replicates run):
/// every minimal budget needs it, rows where it is the only active neighbour need it, and it
/// is significant and robust ([`Directed::detected`]). [`direction_verdict`] applies the
/// same rule, in steps that give reasons.
pub(crate) fn is_detected(d: &DirectedReport) -> bool {
    d.score_tvd_per_layer > 0.0
        && d.attribution_min_tvd_per_layer > ZERO_SCORE
        && d.isolated_tvd_per_layer > ZERO_SCORE
        && d.detected
}

/// The verdict of a detected direction whose lower bound is `lower` (TVD per layer).
pub(crate) fn detected_verdict(
    p_value: f64,
    lower: f64,
    threshold: f64,
) -> (Verdict, ReasonCode, String) {
    let pm = |x: f64| crate::report::terminal::per_mille(x);
    if lower > threshold {
        (
            Verdict::Recalibrate,
            ReasonCode::AboveThreshold,
            format!(
                "detected (p = {:.3}); even its lower bound {} exceeds the action threshold {}",
                p_value,
                pm(lower),
                pm(threshold)
            ),
        )
    } else {
        (
            Verdict::Watch,
            ReasonCode::BelowThreshold,
            format!(
                "detected (p = {:.3}) but its lower bound {} is not above the action threshold {}",
                p_value,
                pm(lower),
                pm(threshold)
            ),
        )
    }
}

/// Polarization of a prediction: how far its most likely outcome stands above uniform, as a
/// fraction of the most it could, (p_top - 1/K) / (1 - 1/K); with it, p_top.
fn polarization(p: &[f64]) -> (f64, f64) {
    let k = p.len().max(2) as f64;
    let top = p.iter().copied().fold(0.0, f64::max);
    (((top - 1.0 / k) / (1.0 - 1.0 / k)).max(0.0), top)
}

/// The sensitivity of a victim's problem `p` to an aggressor r: the least unlimited-shot
/// estimate of X(q <- r) at which some row would need slack, to first order; `count` gives
/// each row's occurrences c with r active.
///
/// A depolarizing error of strength e on each of a row's c occurrences with r active moves
/// e (1 - 1/K) pi_row c of probability off the most likely outcome (depolarizing channels
/// commute, so the place in the circuit does not matter; pi is the row's polarization),
/// and the estimate then comes out at e (1 - 1/K) pi_max, pi_max the largest polarization
/// among the victim's rows. The row needs slack once that shift reaches its detectable
/// shift s_row, so the sensitivity is min over rows of s_row pi_max / (c pi_row).
/// Coherent errors under twirling and errors that are not depolarizing move other outcomes
/// first: this is a yardstick for planning and for reading a zero score, not a guarantee.
/// Only occurrences of kinds that `kind` admits count.
fn sensitivity_with(
    a: &Analysis,
    p: &Problem,
    count: &OccurrenceCount,
    kind: &dyn Fn(KindIx) -> bool,
) -> f64 {
    let n_rows = a.used.len();
    let pi_max = p.rows.iter().map(|&i| polarization(&a.predictions[i]).0).fold(0.0, f64::max);
    // The threshold depends on the outcome count alone; a quantile costs a root search.
    let mut thresholds: Vec<(usize, f64)> = Vec::new();
    let mut best = f64::INFINITY;
    for (j, &i) in p.rows.iter().enumerate() {
        let row = &a.rows.rows[i];
        let c: u32 = count(p, j, kind);
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
pub(crate) fn pair_seed(seed: u64, q: QubitIx, r: QubitIx) -> u64 {
    // SplitMix64 finaliser over the packed indices (Steele, Lea, Flood, OOPSLA 2014).
    let mut z = seed ^ ((q as u64) << 32 | r as u64).wrapping_mul(0x9E37_79B9_7F4A_7C15);
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn cfg(nulls: usize) -> AuditConfig {
        AuditConfig {
            family: crate::model::Family::Depolarizing,
            alpha: 0.05,
            action_threshold_tvd_per_layer: 1e-3,
            null_replicates: nulls,
            seed: 0,
            bit_order: "as-measured".into(),
            inputs: Vec::new(),
            bootstrap: Default::default(),
        }
    }

    /// A tested direction with score s, every minimal budget and the isolated rows needing
    /// it, 39 null replicates at zero.
    fn direction(s: f64) -> Directed {
        Directed {
            tested: true,
            score: s,
            attribution: (s, s),
            isolated: s,
            isolated_sensitivity: 1e-4,
            null: vec![0.0; 39],
            limit: 0.0,
            p_value: crate::slack::null::p_value(s, &[0.0; 39]),
            detected: true,
            loo: s,
            testable: true,
            test_score: s,
            test_loo: s,
            ..Default::default()
        }
    }

    #[test]
    fn rows_whose_stratum_never_varies_the_label_do_not_test_it() {
        use crate::slack::lp::Row;
        let row = |terms: Vec<(usize, f64)>| Row { terms, requirement: 0.0, reference: false };
        // Variables: 0 intrinsic, 1 the aggressor's context budget, 2 another's.
        let rows = vec![
            row(vec![(0, 4.0)]),                     // stratum 0, unlabelled
            row(vec![(0, 4.0), (1, 4.0)]),           // stratum 0, labelled: testable
            row(vec![(0, 8.0), (1, 8.0), (2, 8.0)]), // stratum 1, labelled only: not
            row(vec![(0, 8.0), (1, 8.0), (2, 8.0)]), // stratum 1
            row(vec![(0, 8.0), (2, 8.0)]),           // stratum 2, unlabelled
            row(vec![(0, 8.0), (1, 0.0)]),           // stratum 3, a zero term is no label
        ];
        let strata = [0, 0, 1, 1, 2, 3];
        assert_eq!(testing_rows(&rows, &[1], &strata), vec![0, 1, 4, 5]);
        // For the other aggressor every labelled row is alone with labelled rows.
        assert_eq!(testing_rows(&rows, &[2], &strata), vec![0, 1, 5]);
        assert_eq!(testing_rows(&rows, &[0], &[0; 6]), Vec::<usize>::new());
    }

    #[test]
    fn untestable_slack_is_not_tested_never_clean() {
        let mut d = direction(5e-3);
        d.testable = false;
        d.test_score = 0.0;
        d.null.clear();
        d.p_value = 1.0;
        d.detected = false;
        let (v, code, why) = direction_verdict(&d, &cfg(39));
        assert_eq!((v, code), (Verdict::NotTested, ReasonCode::Untestable), "{why}");
        // Confounding is decided first: the advice to run them apart is the more useful one.
        d.attribution = (0.0, 5e-3);
        d.isolated = 0.0;
        d.isolated_sensitivity = 3e-3;
        let (v, _, _) = direction_verdict(&d, &cfg(39));
        assert_eq!(v, Verdict::Confounded);
    }

    #[test]
    fn in_null_is_judged_on_the_rows_that_test_it() {
        // The score is set by rows the permutation cannot move; the testing rows need less,
        // and that is what the null is about.
        let mut d = direction(5e-3);
        d.test_score = 1e-4;
        d.untestable_rows = 12;
        d.null = vec![1e-4; 39];
        d.limit = 1e-4;
        d.p_value = crate::slack::null::p_value(d.test_score, &d.null);
        d.detected = false;
        let (v, code, why) = direction_verdict(&d, &cfg(39));
        assert_eq!((v, code), (Verdict::Clean, ReasonCode::InNull), "{why}");
        assert!(why.contains("0.10") && why.contains("12 rows"), "{why}");
    }

    #[test]
    fn no_null_is_not_tested_never_clean() {
        let mut d = direction(5e-3);
        d.null.clear();
        d.detected = false;
        let (v, code, why) = direction_verdict(&d, &cfg(0));
        assert_eq!((v, code), (Verdict::NotTested, ReasonCode::NoNull), "{why}");
        // A direction that needs no slack is clean with or without a null.
        let (v, code, _) = direction_verdict(&direction(0.0), &cfg(0));
        assert_eq!((v, code), (Verdict::Clean, ReasonCode::NoSlack));
    }

    #[test]
    fn own_circuits_with_power_clear_a_shared_score() {
        let mut d = direction(4e-3);
        d.attribution = (0.0, 4e-3);
        d.isolated = 0.0;
        // The pair's own circuits see down to 1e-4: they would have shown 4e-3.
        let (v, code, why) = direction_verdict(&d, &cfg(39));
        assert_eq!((v, code), (Verdict::Clean, ReasonCode::NoneAlone), "{why}");
        // Without that power the design cannot tell: confounded.
        d.isolated_sensitivity = 3e-3;
        let (v, code, why) = direction_verdict(&d, &cfg(39));
        assert_eq!((v, code), (Verdict::Confounded, ReasonCode::Shared), "{why}");
    }

    #[test]
    fn a_tie_with_the_limit_is_split_not_rejected() {
        // Two nulls combined by Bonferroni: significant at mid-p <= 0.025. With 77 replicates
        // below and 2 tied with the score: mid-p 1.5 / 80 = 0.01875 (Lancaster 1961).
        let mut d = direction(2e-3);
        d.null = vec![0.0; 77];
        d.null.extend([2e-3; 2]);
        d.limit = 2e-3;
        d.p_value = combined_p(d.score, &d.null);
        assert!((d.p_value - 0.0375).abs() < 1e-12);
        let (v, _, why) = direction_verdict(&d, &cfg(79));
        assert_eq!(v, Verdict::Recalibrate, "{why}");
        // Four ties: 2.5 / 80 = 0.03125 > 0.025, within the null.
        d.null = vec![0.0; 75];
        d.null.extend([2e-3; 4]);
        let (v, code, _) = direction_verdict(&d, &cfg(79));
        assert_eq!((v, code), (Verdict::Clean, ReasonCode::InNull));
    }

    #[test]
    fn one_circuit_unless_corroborated() {
        let mut d = direction(3e-3);
        d.loo = 0.0;
        d.test_loo = 0.0;
        d.detected = false;
        d.corroboration_p = Some(0.4);
        let (v, code, _) = direction_verdict(&d, &cfg(39));
        assert_eq!((v, code), (Verdict::Clean, ReasonCode::OneCircuit));
        d.detected = true;
        d.corroboration_p = Some(0.01);
        let (v, _, _) = direction_verdict(&d, &cfg(39));
        assert!(matches!(v, Verdict::Watch | Verdict::Recalibrate));
    }

    #[test]
    fn corroboration_level_keeps_the_expected_false_flags_per_chip_at_alpha() {
        // family x alpha chance detections, each passing at the level: at most alpha of them.
        for family in [1, 4, 20, 48, 528, 4000] {
            let c = corroboration_level(0.05, family);
            assert!(c <= 0.05 && family as f64 * 0.05 * c <= 0.05 + 1e-15, "{family}: {c}");
        }
        assert_eq!(corroboration_level(0.05, 48), 1.0 / 48.0);
        assert_eq!(corroboration_level(0.05, 0), 0.05);
    }
}
