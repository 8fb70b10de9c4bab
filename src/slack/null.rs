//! The context-permutation null (method.md section 5): permute one aggressor's labels among
//! a victim's rows within strata, keep the requirements, re-solve both stages.
//!
//! Monte Carlo p-values and detection limits follow Davison & Hinkley, Bootstrap Methods
//! and their Application (1997), ch. 4: the observed score is one of B + 1 values, and the
//! limit is the ceil((1 - alpha)(B + 1))-th smallest replicate. Scores are solutions of
//! linear programs, so replicates often tie with the observed score exactly (a permutation
//! that leaves the binding rows' labels in place reproduces it). Ties are split by the
//! mid-p rule (Lancaster, "Significance tests in discrete distributions", JASA 56, 1961;
//! Agresti, Categorical Data Analysis, 2nd ed., 2002, sec. 1.4.5): a tie counts half, so a
//! score equal to its limit is neither always detected nor never.

use std::collections::BTreeMap;

use rand::seq::SliceRandom;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;

use super::lp::{CoveringProblem, Row, VarKind};
use crate::{Error, Result};

/// A replicate scoring within this of the estimate (TVD per layer) counts as a tie.
pub const TIE_TOLERANCE: f64 = 1e-12;

/// A row split into what stays put (`base`) and what the permutation moves (`label`).
struct SplitRow {
    base: Vec<(usize, f64)>,
    label: Vec<(usize, f64)>,
    /// Whether `base` has context terms of its own (other aggressors, free ones).
    other_context: bool,
}

/// Null scores for aggressor variables `r_vars` on the victim problem `problem`.
///
/// A row's label is its terms on `r_vars`; within each stratum (`strata[i]` for row i,
/// computed by the caller from depth, sequence kind, victim role and the activity of the
/// victim's other neighbours) the labels are shuffled among rows, requirements stay, and a
/// row left with no context term becomes a reference row (and one that gains a label stops
/// being one). Each replicate re-solves both stages and returns
/// sum_v `score_weights` x_v. Replicate i draws from ChaCha8 seeded by `seed` on stream i,
/// so its value depends on (seed, i) alone, whatever the thread count or replicate total.
pub fn permutation_null(
    problem: &CoveringProblem,
    r_vars: &[usize],
    strata: &[u64],
    score_weights: &[(usize, f64)],
    replicates: usize,
    seed: u64,
) -> Result<Vec<f64>> {
    problem.validate()?;
    if strata.len() != problem.rows.len() {
        return Err(Error::Analysis(format!(
            "permutation null: {} strata for {} rows (give one per row)",
            strata.len(),
            problem.rows.len()
        )));
    }
    let free_context = |v: usize| {
        problem.kinds[v] == VarKind::Context && problem.fixed.get(v).copied().flatten().is_none()
    };
    let split: Vec<SplitRow> = problem
        .rows
        .iter()
        .map(|row| {
            let (label, base): (Vec<_>, Vec<_>) =
                row.terms.iter().copied().partition(|(v, _)| r_vars.contains(v));
            let other_context = base.iter().any(|&(v, c)| c > 0.0 && free_context(v));
            SplitRow { base, label, other_context }
        })
        .collect();
    let groups = stratum_groups(strata);
    replicate_scores(problem, &groups, score_weights, replicates, seed, |source| {
        split
            .iter()
            .zip(&problem.rows)
            .zip(source)
            .map(|((s, row), &src)| {
                let label = &split[src].label;
                let mut terms = Vec::with_capacity(s.base.len() + label.len());
                terms.extend_from_slice(&s.base);
                terms.extend_from_slice(label);
                let labelled = label.iter().any(|&(v, c)| c > 0.0 && free_context(v));
                Row {
                    terms,
                    requirement: row.requirement,
                    reference: !(s.other_context || labelled),
                }
            })
            .collect()
    })
}

/// Null scores when the permutation moves only *whether* the aggressor was active, not its
/// label: within each stratum the indicators `labelled` are shuffled among rows, and a row
/// labelled in a replicate carries its own label `labels[j]` (its own exposure, for instance
/// every occurrence of the victim's operations in it). The rows of `problem` hold their base
/// terms and, where `labelled[j]`, `labels[j]`; terms on `r_vars` are taken as the label.
///
/// [`permutation_null`] moves labels between rows, so a row needing slack in proportion to
/// its exposure receives another row's exposure in the null; the least budget covering it
/// then rises (by the rearrangement inequality the observed pairing of needs and exposures is
/// the one that needs least), and a strong real effect scored inside its own null. Here a
/// labelled row keeps its own exposure, so only the dependence on the aggressor's activity is
/// destroyed, as the test intends (method.md section 5).
#[allow(clippy::too_many_arguments)]
pub fn indicator_null(
    problem: &CoveringProblem,
    r_vars: &[usize],
    labels: &[Vec<(usize, f64)>],
    labelled: &[bool],
    strata: &[u64],
    score_weights: &[(usize, f64)],
    replicates: usize,
    seed: u64,
) -> Result<Vec<f64>> {
    problem.validate()?;
    let n = problem.rows.len();
    if strata.len() != n || labels.len() != n || labelled.len() != n {
        return Err(Error::Analysis(format!(
            "indicator null: {} strata, {} labels and {} indicators for {n} rows (give one per row)",
            strata.len(),
            labels.len(),
            labelled.len()
        )));
    }
    let free_context = |v: usize| {
        problem.kinds[v] == VarKind::Context && problem.fixed.get(v).copied().flatten().is_none()
    };
    let base: Vec<Vec<(usize, f64)>> = problem
        .rows
        .iter()
        .map(|row| row.terms.iter().copied().filter(|(v, _)| !r_vars.contains(v)).collect())
        .collect();
    let other_context: Vec<bool> =
        base.iter().map(|b| b.iter().any(|&(v, c)| c > 0.0 && free_context(v))).collect();
    let groups = stratum_groups(strata);
    replicate_scores(problem, &groups, score_weights, replicates, seed, |source| {
        (0..n)
            .map(|j| {
                let on = labelled[source[j]];
                let mut terms = base[j].clone();
                if on {
                    terms.extend_from_slice(&labels[j]);
                }
                let carries = on && labels[j].iter().any(|&(v, c)| c > 0.0 && free_context(v));
                Row {
                    terms,
                    requirement: problem.rows[j].requirement,
                    reference: !(other_context[j] || carries),
                }
            })
            .collect()
    })
}

/// Null of the sum statistic sum_j [labelled_j] values_j: within each stratum the indicators
/// `labelled` are shuffled among rows (a stratified permutation test, Davison & Hinkley 1997,
/// sec. 4.3), and replicate i sums `values` over the rows labelled in it, in row order.
/// Replicate i draws from ChaCha8 seeded by `seed` on stream i, as the other nulls do.
///
/// Unlike the scores of [`permutation_null`] and [`indicator_null`], which a linear program
/// makes a maximum over rows, the sum pools every row that leans with the label: it is the
/// statistic for asking whether many rows, none decisive alone, lean the same way.
pub fn labelled_sum_null(
    values: &[f64],
    labelled: &[bool],
    strata: &[u64],
    replicates: usize,
    seed: u64,
) -> Vec<f64> {
    let groups = stratum_groups(strata);
    (0..replicates)
        .into_par_iter()
        .map(|i| {
            let mut rng = ChaCha8Rng::seed_from_u64(seed);
            rng.set_stream(i as u64);
            let mut on = labelled.to_vec();
            let mut perm: Vec<bool> = Vec::new();
            for g in &groups {
                perm.clear();
                perm.extend(g.iter().map(|&j| labelled[j]));
                perm.shuffle(&mut rng);
                for (&j, &l) in g.iter().zip(&perm) {
                    on[j] = l;
                }
            }
            labelled_sum(values, &on)
        })
        .collect()
}

/// The statistic of [`labelled_sum_null`]: `values` summed over the rows `labelled`, in row
/// order.
pub fn labelled_sum(values: &[f64], labelled: &[bool]) -> f64 {
    values.iter().zip(labelled).filter(|(_, &l)| l).map(|(&v, _)| v).sum()
}

/// Rows grouped by stratum, groups of one left out (permuting them changes nothing).
fn stratum_groups(strata: &[u64]) -> Vec<Vec<usize>> {
    let mut groups: BTreeMap<u64, Vec<usize>> = BTreeMap::new();
    for (i, &s) in strata.iter().enumerate() {
        groups.entry(s).or_default().push(i);
    }
    groups.into_values().filter(|g| g.len() > 1).collect()
}

/// Scores of `replicates` replicates: replicate i shuffles each group with ChaCha8 seeded by
/// `seed` on stream i, `rows(source)` builds its rows (`source[j]` = the row whose label or
/// indicator row j receives), and both stages are re-solved.
fn replicate_scores(
    problem: &CoveringProblem,
    groups: &[Vec<usize>],
    score_weights: &[(usize, f64)],
    replicates: usize,
    seed: u64,
    rows: impl Fn(&[usize]) -> Vec<Row> + Sync,
) -> Result<Vec<f64>> {
    (0..replicates)
        .into_par_iter()
        .map(|i| {
            let mut rng = ChaCha8Rng::seed_from_u64(seed);
            rng.set_stream(i as u64);
            let mut source: Vec<usize> = (0..problem.rows.len()).collect();
            let mut perm = Vec::new();
            for g in groups {
                perm.clear();
                perm.extend_from_slice(g);
                perm.shuffle(&mut rng);
                for (&dst, &src) in g.iter().zip(&perm) {
                    source[dst] = src;
                }
            }
            let replicate = CoveringProblem {
                kinds: problem.kinds.clone(),
                fixed: problem.fixed.clone(),
                rows: rows(&source),
            };
            Ok(replicate.solve()?.score(score_weights))
        })
        .collect()
}

/// Monte Carlo mid-p value (#{null > t} + (1 + #{null = t}) / 2) / (1 + B): the observed
/// score t is one of 1 + B values and ties (within [`TIE_TOLERANCE`]) count half; 1 with no
/// replicates or when t is zero (slack cannot be negative, so a zero score is no evidence
/// whatever the replicates).
///
/// Without ties this is (#{null > t} + 1/2) / (1 + B), half a replicate below the
/// conventional (1 + #{null >= t}) / (1 + B). Measured on null chips in tests/study.rs: the
/// rate of any flag per chip stays within its target (see the study's figures).
pub fn p_value(estimate: f64, null: &[f64]) -> f64 {
    if null.is_empty() || estimate <= 0.0 {
        return 1.0;
    }
    let above = null.iter().filter(|&&x| x > estimate + TIE_TOLERANCE).count();
    let ties = null.iter().filter(|&&x| (x - estimate).abs() <= TIE_TOLERANCE).count();
    (above as f64 + 0.5 * (1 + ties) as f64) / (1 + null.len()) as f64
}

/// True when `estimate` is significant at level `alpha` against `null` by the mid-p rule
/// ([`p_value`]). Above [`detection_limit`] always is; at it, it depends on the ties.
pub fn significant(estimate: f64, null: &[f64], alpha: f64) -> bool {
    p_value(estimate, null) <= alpha
}

/// Detection limit: the ceil((1 - alpha)(B + 1))-th smallest null score (1-based); infinite
/// when B is too small for that order statistic to exist, e.g. B < 19 at alpha = 0.05.
/// An estimate above the limit has [`p_value`] at most alpha; one tied with it may too.
pub fn detection_limit(null: &[f64], alpha: f64) -> f64 {
    let b = null.len();
    let k = ((1.0 - alpha) * (b + 1) as f64 - 1e-9).ceil();
    if k.is_nan() || k < 1.0 || k as usize > b {
        return f64::INFINITY;
    }
    let mut sorted = null.to_vec();
    sorted.sort_by(f64::total_cmp);
    sorted[k as usize - 1]
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::RngExt;

    #[test]
    fn labelled_sum_null_draws_each_arrangement_equally_within_strata() {
        // Stratum 0: values 1, 2, 3, 4 with two labelled: the C(4, 2) = 6 arrangements give
        // sums 3, 4, 5, 5, 6, 7 with probability 1/6 each (enumeration). Stratum 1: one row of
        // two labelled, value 100 or 0, so every replicate adds 100 with probability 1/2, and
        // a stratum of one row (value 1000, labelled) always adds it.
        let values = [1.0, 2.0, 3.0, 4.0, 100.0, 0.0, 1000.0];
        let labelled = [true, false, true, false, false, true, true];
        let strata = [0, 0, 0, 0, 1, 1, 2];
        let b = 24_000;
        let null = labelled_sum_null(&values, &labelled, &strata, b, 5);
        let share =
            |f: &dyn Fn(f64) -> bool| null.iter().filter(|&&x| f(x)).count() as f64 / b as f64;
        for (sum, expected) in [(3.0, 1.0), (4.0, 1.0), (5.0, 2.0), (6.0, 1.0), (7.0, 1.0)] {
            let got = share(&|x| (x - 1000.0) % 100.0 == sum);
            assert!((got - expected / 6.0).abs() < 0.01, "sum {sum}: {got}");
        }
        assert!((share(&|x| x >= 1100.0) - 0.5).abs() < 0.01);
        assert!(null.iter().all(|&x| x >= 1000.0));
        // Replicate i depends on (seed, i) alone.
        assert_eq!(labelled_sum_null(&values, &labelled, &strata, 10, 5), null[..10]);
    }

    /// Victim with omega (0), kappa_r (1), kappa_s (2). Rows at depths 4..32 with r and s
    /// active independently; requirement grows by `effect_r` per layer where r is active.
    fn synthetic(effect_r: f64, seed: u64) -> (CoveringProblem, Vec<u64>) {
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let mut rows = Vec::new();
        let mut strata = Vec::new();
        for (di, depth) in [4.0, 8.0, 16.0, 32.0].into_iter().enumerate() {
            for _ in 0..12 {
                let r: bool = rng.random();
                let s: bool = rng.random();
                let mut terms = vec![(0, depth)];
                if r {
                    terms.push((1, depth));
                }
                if s {
                    terms.push((2, depth));
                }
                let truth = depth * (1e-3 + effect_r * r as u8 as f64 + 5e-4 * s as u8 as f64);
                let requirement = (truth + 0.01 * (rng.random::<f64>() - 0.5)).max(0.0);
                rows.push(Row { terms, requirement, reference: !r && !s });
                strata.push(di as u64 * 2 + s as u64);
            }
        }
        let kinds = vec![VarKind::Intrinsic, VarKind::Context, VarKind::Context];
        (CoveringProblem { kinds, fixed: vec![], rows }, strata)
    }

    #[test]
    fn true_aggressor_gets_small_p_value() {
        let (p, strata) = synthetic(2e-3, 1);
        let estimate = p.solve().unwrap().score(&[(1, 1.0)]);
        let null = permutation_null(&p, &[1], &strata, &[(1, 1.0)], 99, 42).unwrap();
        let pv = p_value(estimate, &null);
        assert!(estimate > 1e-3, "{estimate}");
        assert!(pv <= 0.02, "p = {pv}, estimate {estimate}, null {null:?}");
        assert!(estimate > detection_limit(&null, 0.05));
    }

    #[test]
    fn independent_label_gives_valid_p_values() {
        // Over independent data sets the null p-value must not be small too often:
        // P(p <= a) <= a for a Monte Carlo test (Davison & Hinkley 1997, ch. 4), up to
        // three binomial standard deviations over 40 sets.
        let mut ps = Vec::new();
        for seed in 0..40 {
            let (p, strata) = synthetic(0.0, 1000 + seed);
            let estimate = p.solve().unwrap().score(&[(1, 1.0)]);
            let null = permutation_null(&p, &[1], &strata, &[(1, 1.0)], 39, seed).unwrap();
            ps.push(p_value(estimate, &null));
        }
        for a in [0.1, 0.25, 0.5] {
            let frac = ps.iter().filter(|&&x| x <= a).count() as f64 / ps.len() as f64;
            let sd = (a * (1.0 - a) / ps.len() as f64).sqrt();
            assert!(frac <= a + 3.0 * sd, "P(p <= {a}) = {frac}; {ps:?}");
        }
        let mean = ps.iter().sum::<f64>() / ps.len() as f64;
        assert!(mean > 0.35, "mean p {mean}: {ps:?}");
        // Not degenerate either: a null stuck at ties would give p = 1 everywhere.
        let low = ps.iter().filter(|&&x| x <= 0.5).count() as f64 / ps.len() as f64;
        assert!(low >= 0.15, "P(p <= 0.5) = {low}: {ps:?}");
    }

    #[test]
    fn replicates_depend_on_seed_and_index_only() {
        let (p, strata) = synthetic(1e-3, 3);
        let run = |threads: usize, b: usize| {
            rayon::ThreadPoolBuilder::new()
                .num_threads(threads)
                .build()
                .unwrap()
                .install(|| permutation_null(&p, &[1], &strata, &[(1, 1.0)], b, 9).unwrap())
        };
        let one = run(1, 12);
        let two = run(2, 12);
        assert_eq!(one, two);
        assert_eq!(run(2, 6)[..], one[..6]);
        let other = permutation_null(&p, &[1], &strata, &[(1, 1.0)], 12, 10).unwrap();
        assert_ne!(one, other);
    }

    #[test]
    fn p_value_and_limit_rules() {
        let null: Vec<f64> = (1..=19).map(|i| i as f64).collect();
        // Above every replicate: (0 + 1/2) / 20.
        assert!((p_value(19.5, &null) - 0.025).abs() < 1e-12);
        // A tie with the largest counts half: (0 + (1 + 1) / 2) / 20.
        assert!((p_value(19.0, &null) - 0.05).abs() < 1e-12);
        assert!(significant(19.0, &null, 0.05));
        // Between replicates: one above, no tie.
        assert!((p_value(18.5, &null) - 0.075).abs() < 1e-12);
        // B = 19, alpha = 0.05: the 19th smallest.
        assert_eq!(detection_limit(&null, 0.05), 19.0);
        assert!(detection_limit(&null[..10], 0.05).is_infinite());
        assert_eq!(p_value(1.0, &[]), 1.0);
        assert_eq!(p_value(0.0, &[0.0; 19]), 1.0);
    }

    #[test]
    fn mid_p_splits_a_block_of_ties() {
        // Lancaster's mid-p (JASA 1961): with 39 replicates of which 4 tie with the score and
        // 35 lie below, the conventional p is 5/40 = 0.125 and the mid-p (0 + 5/2) / 40.
        let mut null = vec![0.0; 35];
        null.extend([2.0; 4]);
        assert!((p_value(2.0, &null) - 0.0625).abs() < 1e-12);
        assert!(!significant(2.0, &null, 0.05));
        // Two ties: 1.5 / 40 = 0.0375, significant at 0.05 where the conventional 3/40 is not.
        let mut null = vec![0.0; 37];
        null.extend([2.0; 2]);
        assert!(significant(2.0, &null, 0.05));
    }

    #[test]
    fn strata_length_is_checked() {
        let (p, _) = synthetic(0.0, 0);
        assert!(permutation_null(&p, &[1], &[0, 1], &[(1, 1.0)], 3, 0).is_err());
    }
}
