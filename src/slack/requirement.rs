//! Row requirements: the least TVD radius at which a row's weakened prediction passes
//! its chi-squared threshold, d_row = min { w : LLR(w) <= T } (method.md section 4).
//!
//! LLR(w) is convex and non-increasing, so Newton steps from the left never overshoot
//! the root; bisection guards the steps where the slope is unusable (LLR(0) infinite).

use super::projection::Weakening;

/// Width of the final bracket: the returned radius is feasible and within this of the root.
pub const REQUIREMENT_TOLERANCE: f64 = 1e-12;

/// d_row for prediction `p`, counts `n` and LLR threshold `threshold` (from
/// [`crate::stats::bonferroni_threshold`]). 0 when the row already passes; never more than
/// TVD(p, f).
///
/// For two outcomes q*(w) = (p_1 + w, p_2 - w) is explicit and each step is O(1); the
/// root itself has no elementary form (the binary relative entropy has no elementary
/// inverse), so the same safeguarded Newton iteration serves every K.
///
/// # Panics
/// When `p` and `n` differ in length.
pub fn requirement(p: &[f64], n: &[u64], threshold: f64) -> f64 {
    requirement_of(&Weakening::new(p, n), threshold)
}

/// A row's requirements (method.md section 4): `score` is d_row at the threshold T; the
/// deviations are the estimates' per-row needs, zero where d_row is zero, else the whole
/// deviation TVD(p, f) scaled to the share of it thought to be signal. LLR(0) is about N
/// times a squared distance, signal (the noncentrality lambda) and shot noise adding, so a
/// distance scales as the square root of the signal's share of LLR(0):
/// - `noncentral` = TVD sqrt(1 - T / LLR(0)), the interval's upper end's: the threshold's
///   whole share taken out, zero at T and still shrinking rows well above it;
/// - `shrunk` = TVD (1 - T / LLR(0)), the interval's lower end's: shrinking harder still.
///
/// The point estimate's need, [`conditional_need`], is made only in the point pass. Each is
/// at least `score`. Why the estimate and the interval's two ends take different needs:
/// DEVELOPERS.md, "Intervals".
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct RowNeeds {
    /// d_row, the score's need.
    pub score: f64,
    /// TVD (1 - T / LLR(0)), the need of the interval's lower end.
    pub shrunk: f64,
    /// TVD sqrt(1 - T / LLR(0)), the need of the interval's upper end.
    pub noncentral: f64,
}

/// The [`RowNeeds`] of a row with prediction `p`, counts `n` and LLR threshold `threshold`.
///
/// # Panics
/// When `p` and `n` differ in length.
pub fn row_needs(p: &[f64], n: &[u64], threshold: f64) -> RowNeeds {
    let wk = Weakening::new(p, n);
    let d = requirement_of(&wk, threshold);
    if d <= 0.0 {
        return RowNeeds::default();
    }
    let (tvd, llr0) = deviation(&wk);
    let keep = llr0.map_or(1.0, |l| (1.0 - threshold / l).max(0.0));
    RowNeeds { score: d, shrunk: (tvd * keep).max(d), noncentral: (tvd * keep.sqrt()).max(d) }
}

/// The point estimate's need of a row whose score need is `score` (its [`RowNeeds`] at the
/// same `threshold`): TVD sqrt(lambda / LLR(0)), with lambda the noncentrality's maximum-
/// likelihood estimate conditional on the row having passed T
/// ([`crate::stats::truncated_noncentrality`]). A row is asked for slack only because it
/// passed, so near T its LLR(0) is mostly selected noise (lambda is zero at T), while far
/// above T the selection no longer matters (lambda reaches LLR(0)). Zero where `score` is.
///
/// # Panics
/// When `p` and `n` differ in length.
pub fn conditional_need(p: &[f64], n: &[u64], threshold: f64, score: f64) -> f64 {
    if score <= 0.0 {
        return 0.0;
    }
    let (tvd, llr0) = deviation(&Weakening::new(p, n));
    let signal = llr0.map_or(1.0, |l| {
        (crate::stats::truncated_noncentrality(l, p.len() - 1, threshold) / l).min(1.0)
    });
    (tvd * signal.sqrt()).max(score)
}

/// TVD(p, f) of a row and its LLR(0) where that is finite and positive.
fn deviation(wk: &Weakening) -> (f64, Option<f64>) {
    let llr0 = wk.llr(0.0);
    (wk.tvd_to_frequencies(), (llr0.is_finite() && llr0 > 0.0).then_some(llr0))
}

/// The least shift `delta` of probability from outcome probability `p_top` to the other
/// outcomes at which a row of `shots` shots fails threshold `threshold`: the root of
/// 2 N KL(p_top - delta || p_top) = T in the binary grouping (top outcome against the rest).
/// Grouping outcomes never raises the LLR, so the full row is at least this sensitive.
/// Returns `p_top` when even moving all of it would pass, and infinity without shots.
pub fn detectable_shift(p_top: f64, shots: u64, threshold: f64) -> f64 {
    if shots == 0 {
        return f64::INFINITY;
    }
    let p = p_top.clamp(0.0, 1.0);
    let n = shots as f64;
    let t = threshold.max(0.0);
    let llr = |d: f64| {
        let (q, qc, pc) = (p - d, 1.0 - p + d, 1.0 - p);
        let term = |a: f64, b: f64| if a > 0.0 { a * (a / b).ln() } else { 0.0 };
        2.0 * n * (term(q, p) + term(qc, pc))
    };
    if p <= 0.0 || llr(p) <= t {
        return p;
    }
    // LLR(delta) rises from 0 at delta = 0 and is convex there: bisection.
    let (mut lo, mut hi) = (0.0, p);
    for _ in 0..200 {
        let mid = 0.5 * (lo + hi);
        if llr(mid) > t {
            hi = mid;
        } else {
            lo = mid;
        }
        if hi - lo <= REQUIREMENT_TOLERANCE {
            break;
        }
    }
    hi
}

/// [`requirement`] for a row already prepared, so a caller that tries several thresholds
/// sorts the outcomes once.
pub fn requirement_of(wk: &Weakening, threshold: f64) -> f64 {
    let t = threshold.max(0.0);
    let mut hi = wk.tvd_to_frequencies();
    let (mut g_lo, mut s_lo) = wk.llr_and_slope(0.0);
    if hi <= 0.0 || g_lo <= t {
        return 0.0;
    }
    let mut lo = 0.0;
    for _ in 0..200 {
        if hi - lo <= REQUIREMENT_TOLERANCE {
            break;
        }
        let newton = if g_lo.is_finite() && s_lo < 0.0 { lo + (t - g_lo) / s_lo } else { f64::NAN };
        let converging = newton.is_finite() && newton - lo < 0.25 * REQUIREMENT_TOLERANCE;
        let c = if converging {
            // Newton has stalled just left of the root: probe the far end of the tolerance.
            lo + REQUIREMENT_TOLERANCE
        } else if newton > lo && newton < hi {
            newton
        } else {
            0.5 * (lo + hi)
        };
        let (g, s) = wk.llr_and_slope(c);
        if g > t {
            lo = c;
            g_lo = g;
            s_lo = s;
        } else {
            hi = c;
        }
    }
    hi
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stats::chi2_quantile;
    use proptest::prelude::*;

    #[test]
    fn two_outcome_case_checked_by_hand() {
        // p = (0.5, 0.5), 600 of 1000 shots on outcome 0, T = 3.841 (1 dof, 95%).
        // Wald check: 0.6 - 1.96 sqrt(0.24 / 1000) = 0.5696, so d is about 0.07; a plain
        // bisection of 2[600 ln(0.6/(0.5+w)) + 400 ln(0.4/(0.5-w))] = 3.841 gives
        // 0.0694110039144 (independent computation in double precision).
        let d = requirement(&[0.5, 0.5], &[600, 400], 3.841);
        assert!((d - 0.069_411_003_914_4).abs() < 1e-11, "{d}");
    }

    #[test]
    fn deviation_requirement_is_the_shrunk_tvd_on_failing_rows_only() {
        let t = 3.841;
        let RowNeeds { score: d, shrunk: full, noncentral } =
            row_needs(&[0.5, 0.5], &[600, 400], t);
        let conditional = conditional_need(&[0.5, 0.5], &[600, 400], t, d);
        assert!((d - 0.069_411_003_914_4).abs() < 1e-11);
        // TVD 0.1 shrunk by 1 - T / LLR(0), LLR(0) = 2 [600 ln 1.2 + 400 ln 0.8].
        let llr0 = 2.0 * (600.0 * 1.2f64.ln() + 400.0 * 0.8f64.ln());
        assert!((full - 0.1 * (1.0 - t / llr0)).abs() < 1e-12, "{full}");
        assert!(full > d);
        // The upper end's: TVD sqrt(1 - T / LLR(0)).
        assert!((noncentral - 0.1 * (1.0 - t / llr0).sqrt()).abs() < 1e-12, "{noncentral}");
        assert!(noncentral > full);
        // The estimate's: TVD sqrt(lambda / LLR(0)); LLR(0) = 40.3 is far above T = 3.84,
        // where the selection no longer matters and lambda is LLR(0) itself.
        assert!((conditional - 0.1).abs() < 1e-6, "{conditional}");
        assert!(conditional > noncentral);
        assert_eq!(row_needs(&[0.5, 0.5], &[510, 490], t), RowNeeds::default());
    }

    #[test]
    fn detectable_shift_matches_the_wald_approximation() {
        // Common practice (from memory): a binomial proportion p moves detectably at level
        // T when N delta^2 / (p (1 - p)) reaches T, to first order in delta.
        let (p, n, t) = (0.9, 100_000u64, 3.841);
        let wald = (t * p * (1.0 - p) / n as f64).sqrt();
        let d = detectable_shift(p, n, t);
        assert!((d / wald - 1.0).abs() < 0.02, "{d} against {wald}");
        // The root is tight: a row shifted by it sits at the threshold.
        let k = (n as f64 * (p - d)).round() as u64;
        let llr = crate::slack::llr(&[k, n - k], &[p, 1.0 - p]);
        assert!((llr - t).abs() < 0.05, "{llr}");
        // Four times the shots halve it, as binomial error does (common practice).
        let d4 = detectable_shift(p, 4 * n, t);
        assert!((d / d4 - 2.0).abs() < 0.02, "{}", d / d4);
        assert!(detectable_shift(p, 0, t).is_infinite());
        assert_eq!(detectable_shift(0.6, 1, 100.0), 0.6);
    }

    #[test]
    fn passing_row_needs_nothing() {
        let d = requirement(&[0.5, 0.5], &[510, 490], chi2_quantile(1, 0.95));
        assert_eq!(d, 0.0);
        assert_eq!(requirement(&[0.3, 0.7], &[0, 0], 3.0), 0.0);
    }

    #[test]
    fn infinite_llr_at_zero_is_handled() {
        let d = requirement(&[1.0, 0.0], &[95, 5], 3.841);
        let wk = Weakening::new(&[1.0, 0.0], &[95, 5]);
        assert!(d > 0.0 && d < 0.05, "{d}");
        assert!(wk.llr(d) <= 3.841 + 1e-9);
        assert!(wk.llr(d - 1e-9) > 3.841);
    }

    proptest! {
        #[test]
        fn root_is_tight(k in 2usize..=16, seed in any::<u64>(), t in 0.5f64..40.0) {
            use rand::{RngExt, SeedableRng};
            let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
            let p: Vec<f64> = (0..k).map(|_| rng.random::<f64>() + 0.01).collect();
            let n: Vec<u64> = (0..k).map(|_| rng.random_range(0..400)).collect();
            let wk = Weakening::new(&p, &n);
            let d = requirement_of(&wk, t);
            prop_assert!(d >= 0.0 && d <= wk.tvd_to_frequencies() + 1e-15);
            prop_assert!(wk.llr(d) <= t + 1e-9);
            if d > 2e-12 {
                prop_assert!(wk.llr(d - 2e-12) > t - 1e-9);
            }
        }
    }
}
