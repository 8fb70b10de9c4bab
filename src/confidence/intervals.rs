//! Bootstrap intervals of one score from its replicates: percentile, basic and
//! bias-corrected percentile (Efron, "Better bootstrap confidence intervals", JASA 1987;
//! Davison & Hinkley, Bootstrap Methods and their Application, 1997, ch. 5), all clipped
//! at zero because slack cannot be negative, and the rank statistics of an edge.

use statrs::distribution::{ContinuousCDF, Normal};

/// The interval every output reports and `recalibrate` rests on: the bracketed percentile
/// interval ([`bracketed`]).
///
/// The estimate is a boundary-constrained quantity: slack cannot be negative, and a row's
/// need is its deviation shrunk toward zero as it nears its threshold
/// ([`crate::slack::requirement::RowNeeds`]). How much to shrink is not known from one data
/// set: the estimate's conditional noncentrality runs close from a few times the detection
/// level but, a maximum over many noisy rows, up to a third high far above it for a
/// depolarizing error; shrinking to zero at the threshold runs low near the detection
/// level. The interval spans both: its lower end is the percentile of the replicates under
/// the shrunk needs, its upper end the percentile of the replicate estimates. The basic
/// (2t - q) and bias-corrected intervals assume the replicates sit as far from t as t sits from the
/// truth, in the same direction; near the detection level the truth lies above t while the
/// replicates scatter on both sides, so both reflect the interval the wrong way and miss
/// high. Measured coverage and widths: DEVELOPERS.md, "Intervals" (tests/study.rs).
pub const REPORTED: Method = Method::Bracketed;

/// How an interval is formed from the replicates.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Method {
    /// [q(a/2), q(1 - a/2)] of the replicates (Davison & Hinkley 1997, eq. 5.18).
    Percentile,
    /// [2t - q(1 - a/2), 2t - q(a/2)]: corrects a pure shift of the replicate
    /// distribution (Davison & Hinkley 1997, eq. 5.6).
    Basic,
    /// Percentile at levels Phi(2 z0 + z_a), z0 = Phi^-1(share of replicates below t)
    /// (Efron 1987, the BC interval without acceleration).
    BiasCorrected,
    /// [q(a/2) of the lower-end replicates, q(1 - a/2) of the estimates]: see [`bracketed`];
    /// with one set of replicates it is the percentile interval.
    Bracketed,
}

impl Method {
    /// The method's name in reports.
    pub fn name(self) -> &'static str {
        match self {
            Method::Percentile => "percentile",
            Method::Basic => "basic",
            Method::BiasCorrected => "bias-corrected",
            Method::Bracketed => "bracketed-percentile",
        }
    }
}

/// Sample quantile of sorted values by linear interpolation between order statistics
/// (Hyndman & Fan, "Sample quantiles in statistical packages", 1996, definition 7);
/// 0 for no values.
pub fn quantile(sorted: &[f64], p: f64) -> f64 {
    let n = sorted.len();
    if n == 0 {
        return 0.0;
    }
    let h = (n - 1) as f64 * p.clamp(0.0, 1.0);
    let lo = h.floor() as usize;
    let hi = (lo + 1).min(n - 1);
    sorted[lo] + (h - lo as f64) * (sorted[hi] - sorted[lo])
}

/// An interval and one-sided upper bound of one score at a level.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Interval {
    /// Lower end (>= 0).
    pub low: f64,
    /// Upper end (>= low).
    pub high: f64,
    /// One-sided upper bound at the level.
    pub upper: f64,
    /// One-sided lower bound at the level (>= 0): what `recalibrate` rests on.
    pub lower: f64,
}

fn standard_normal() -> Normal {
    // Mean 0 and standard deviation 1 are valid parameters.
    Normal::new(0.0, 1.0).unwrap_or_else(|_| unreachable!("N(0, 1) is a valid distribution"))
}

/// The interval of `estimate` from its replicates at two-sided `level` in (0, 1).
pub fn interval(estimate: f64, replicates: &[f64], level: f64, method: Method) -> Interval {
    let mut sorted = replicates.to_vec();
    sorted.sort_by(f64::total_cmp);
    let a = 1.0 - level;
    let q = |p: f64| quantile(&sorted, p);
    let (low, high, upper, lower) = match method {
        Method::Percentile | Method::Bracketed => (q(a / 2.0), q(1.0 - a / 2.0), q(level), q(a)),
        Method::Basic => (
            2.0 * estimate - q(1.0 - a / 2.0),
            2.0 * estimate - q(a / 2.0),
            2.0 * estimate - q(a),
            2.0 * estimate - q(level),
        ),
        Method::BiasCorrected => {
            let n = standard_normal();
            let b = sorted.len().max(1) as f64;
            let below = sorted.iter().filter(|&&x| x < estimate).count() as f64;
            let ties = sorted.iter().filter(|&&x| x == estimate).count() as f64;
            // Ties count half (a score at zero ties with many replicates); the share is kept
            // inside (0, 1) so z0 stays finite.
            let share = ((below + 0.5 * ties) / b).clamp(0.5 / b, 1.0 - 0.5 / b);
            let z0 = n.inverse_cdf(share);
            let at = |p: f64| q(n.cdf(2.0 * z0 + n.inverse_cdf(p)));
            (at(a / 2.0), at(1.0 - a / 2.0), at(level), at(a))
        }
    };
    let low = low.max(0.0);
    let high = high.max(low);
    Interval { low, high, upper: upper.max(0.0), lower: lower.max(low) }
}

/// The bracketed percentile interval at two-sided `level` in (0, 1): the lower end is the
/// a/2 quantile of `lower` (replicates under the shrunk row needs), the upper end the
/// 1 - a/2 quantile of `upper` (replicates of the estimate, under the noncentral needs; never
/// taken below the 1 - a/2 quantile of `lower`); the one-sided bounds are the `level`
/// quantile of `upper` and the 1 - `level` quantile of `lower`. Each end is a percentile end
/// (Davison & Hinkley 1997, eq. 5.18) of an estimator that brackets the row needs from one
/// side.
pub fn bracketed(lower: &[f64], upper: &[f64], level: f64) -> Interval {
    let sort = |v: &[f64]| {
        let mut s = v.to_vec();
        s.sort_by(f64::total_cmp);
        s
    };
    let (lo, up) = (sort(lower), sort(upper));
    let a = 1.0 - level;
    let low = quantile(&lo, a / 2.0).max(0.0);
    let high = quantile(&up, 1.0 - a / 2.0).max(quantile(&lo, 1.0 - a / 2.0)).max(low);
    let one_sided = quantile(&up, level).max(quantile(&lo, level)).max(0.0);
    Interval { low, high, upper: one_sided, lower: quantile(&lo, a).max(low) }
}

/// Rank of every edge in one replicate: 1 + the number of edges scoring strictly more
/// (ties share a rank; a zero score ranks after every positive one).
pub fn ranks(scores: &[f64]) -> Vec<usize> {
    let mut sorted = scores.to_vec();
    sorted.sort_by(|x, y| y.total_cmp(x));
    scores.iter().map(|&s| 1 + sorted.partition_point(|&x| x > s)).collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    #[test]
    fn quantile_type_7() {
        // Hyndman & Fan (1996) definition 7 on 1..=5: the 0.3 quantile is 2.2.
        let v = [1.0, 2.0, 3.0, 4.0, 5.0];
        assert!((quantile(&v, 0.3) - 2.2).abs() < 1e-12);
        assert!((quantile(&v, 0.0) - 1.0).abs() < 1e-12);
        assert!((quantile(&v, 1.0) - 5.0).abs() < 1e-12);
    }

    #[test]
    fn basic_interval_undoes_a_shift() {
        // Replicates centred 0.5 above the estimate: the percentile interval lies above the
        // estimate; the basic one assumes the estimate sits as far above the truth and is
        // centred 0.5 below it (Davison & Hinkley 1997, sec. 5.2).
        let reps: Vec<f64> = (0..1000).map(|i| 1.5 + (i as f64 - 499.5) / 1000.0).collect();
        let p = interval(1.0, &reps, 0.9, Method::Percentile);
        assert!(p.low > 1.0, "{p:?}");
        let b = interval(1.0, &reps, 0.9, Method::Basic);
        assert!(b.high < 1.0, "{b:?}");
        assert!(((b.low + b.high) / 2.0 - 0.5).abs() < 0.01, "{b:?}");
    }

    #[test]
    fn bracketed_takes_each_end_from_its_own_replicates() {
        // Type-7 quantiles of 0..=100 (Hyndman & Fan 1996): q(0.025) = 2.5, q(0.975) = 97.5.
        let lower: Vec<f64> = (0..=100).map(f64::from).collect();
        let upper: Vec<f64> = lower.iter().map(|x| x + 10.0).collect();
        let b = bracketed(&lower, &upper, 0.95);
        assert!((b.low - 2.5).abs() < 1e-12 && (b.high - 107.5).abs() < 1e-12, "{b:?}");
        assert!((b.upper - 105.0).abs() < 1e-12 && (b.lower - 5.0).abs() < 1e-12, "{b:?}");
        // Equal sets: the percentile interval.
        let p = interval(0.0, &lower, 0.95, Method::Percentile);
        let same = bracketed(&lower, &lower, 0.95);
        assert_eq!((p.low, p.high, p.upper), (same.low, same.high, same.upper));
        // An upper set below the lower one never pulls the upper end under the percentile's.
        let below: Vec<f64> = lower.iter().map(|x| x - 50.0).collect();
        assert!((bracketed(&lower, &below, 0.95).high - 97.5).abs() < 1e-12);
    }

    #[test]
    fn bias_corrected_with_no_bias_is_percentile() {
        let reps: Vec<f64> = (0..999).map(|i| 2.0 + (i as f64 - 499.0) / 1000.0).collect();
        let p = interval(2.0, &reps, 0.95, Method::Percentile);
        let c = interval(2.0, &reps, 0.95, Method::BiasCorrected);
        assert!((p.low - c.low).abs() < 1e-3 && (p.high - c.high).abs() < 1e-3, "{p:?} {c:?}");
    }

    #[test]
    fn ranks_share_ties() {
        assert_eq!(ranks(&[0.0, 3.0, 1.0, 3.0, 0.0]), vec![4, 1, 3, 1, 4]);
    }

    proptest! {
        /// Every interval is ordered and non-negative; the basic interval contains the
        /// estimate whenever the replicates straddle it.
        #[test]
        fn intervals_are_ordered(est in 0.0f64..1.0, reps in proptest::collection::vec(0.0f64..2.0, 1..60), level in 0.5f64..0.99) {
            for m in [Method::Percentile, Method::Basic, Method::BiasCorrected] {
                let i = interval(est, &reps, level, m);
                prop_assert!(i.low >= 0.0 && i.low <= i.high && i.upper >= 0.0);
            }
            let lo = reps.iter().cloned().fold(f64::INFINITY, f64::min);
            let hi = reps.iter().cloned().fold(0.0, f64::max);
            if lo <= est && est <= hi {
                // 2t - q(1-a/2) <= t <= 2t - q(a/2) iff q(a/2) <= t <= q(1-a/2): only then.
                let mut s = reps.clone();
                s.sort_by(f64::total_cmp);
                let a = 1.0 - level;
                if quantile(&s, a / 2.0) <= est && est <= quantile(&s, 1.0 - a / 2.0) {
                    let b = interval(est, &reps, level, Method::Basic);
                    prop_assert!(b.low <= est + 1e-12 && est <= b.high + 1e-12);
                }
            }
        }
    }
}
