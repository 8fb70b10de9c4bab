//! Statistical helpers: chi-squared quantiles and the Bonferroni row threshold.
//!
//! Quantiles come from statrs' inverse CDF, polished by Newton steps on the survival
//! function so that upper-tail levels such as 1 - 5e-7 keep their accuracy. Values are
//! checked against the NIST/SEMATECH e-Handbook of Statistical Methods, section 1.3.6.7.4
//! ("Critical values of the chi-square distribution").

use statrs::distribution::{ChiSquared, Continuous, ContinuousCDF};

/// The `p` quantile of the chi-squared distribution with `dof` degrees of freedom.
///
/// `dof == 0` is the point mass at 0 (a one-outcome row can never disagree with a
/// prediction), so it returns 0. `p <= 0` gives 0 and `p >= 1` gives infinity.
pub fn chi2_quantile(dof: usize, p: f64) -> f64 {
    if dof == 0 || p.is_nan() || p <= 0.0 {
        return 0.0;
    }
    if p >= 1.0 {
        return f64::INFINITY;
    }
    let Ok(dist) = ChiSquared::new(dof as f64) else {
        return f64::NAN;
    };
    let mut x = dist.inverse_cdf(p);
    if !x.is_finite() || x <= 0.0 {
        // Fall back to the Wilson-Hilferty start (Johnson, Kotz & Balakrishnan,
        // Continuous Univariate Distributions vol. 1, ch. 18) when the inverse is unusable.
        let k = dof as f64;
        let z = statrs::distribution::Normal::standard().inverse_cdf(p);
        let t = 1.0 - 2.0 / (9.0 * k) + z * (2.0 / (9.0 * k)).sqrt();
        x = (k * t * t * t).max(1e-8);
    }
    // Newton on the upper tail: the survival function keeps relative accuracy where
    // 1 - p is tiny, which the Bonferroni levels are.
    let upper = 1.0 - p;
    for _ in 0..8 {
        let density = dist.pdf(x);
        if !(density.is_finite() && density > 0.0) {
            break;
        }
        let step = (dist.sf(x) - upper) / density;
        let next = (x + step).max(x * 0.5);
        if !next.is_finite() {
            break;
        }
        let done = (next - x).abs() <= 1e-13 * x.max(1.0);
        x = next;
        if done {
            break;
        }
    }
    x
}

/// The per-row LLR threshold: the chi-squared quantile at level `1 - alpha / n_rows`
/// (Bonferroni over `n_rows` rows, at least one).
pub fn bonferroni_threshold(dof: usize, alpha: f64, n_rows: usize) -> f64 {
    chi2_quantile(dof, 1.0 - alpha / n_rows.max(1) as f64)
}

/// The Bonferroni row thresholds of one analysis, computed once per outcome count.
///
/// A threshold depends only on a row's outcome count (and on alpha and the row count), while
/// a quantile costs a root search: an audit asks for one per row in every replicate, so the
/// values for the outcome counts a block can have (2 and 4) are computed up front.
#[derive(Clone, Debug)]
pub struct RowThresholds {
    alpha: f64,
    n_rows: usize,
    /// Threshold of a row with `i` outcomes, for every `i` up to four.
    by_outcomes: [f64; 5],
}

impl RowThresholds {
    /// Thresholds at family-wise level `alpha` over `n_rows` rows.
    pub fn new(alpha: f64, n_rows: usize) -> RowThresholds {
        let mut by_outcomes = [0.0; 5];
        for (k, t) in by_outcomes.iter_mut().enumerate().skip(2) {
            *t = bonferroni_threshold(k - 1, alpha, n_rows);
        }
        RowThresholds { alpha, n_rows, by_outcomes }
    }

    /// The threshold of a row with `outcomes` outcomes ([`bonferroni_threshold`] with
    /// `outcomes - 1` degrees of freedom).
    pub fn of_outcomes(&self, outcomes: usize) -> f64 {
        match self.by_outcomes.get(outcomes) {
            Some(&t) => t,
            None => bonferroni_threshold(outcomes.saturating_sub(1), self.alpha, self.n_rows),
        }
    }
}

/// The median of `values` (the mean of the two middle values for an even count), or `None`
/// when there are none.
pub fn median(mut values: Vec<f64>) -> Option<f64> {
    if values.is_empty() {
        return None;
    }
    values.sort_by(f64::total_cmp);
    let n = values.len();
    Some(if n % 2 == 1 { values[n / 2] } else { (values[n / 2 - 1] + values[n / 2]) / 2.0 })
}

#[cfg(test)]
mod tests {
    use super::*;
    use statrs::distribution::Normal;

    fn close(a: f64, b: f64, tol: f64) -> bool {
        (a - b).abs() <= tol
    }

    #[test]
    fn matches_nist_sematech_table() {
        // NIST/SEMATECH e-Handbook of Statistical Methods, 1.3.6.7.4, upper critical values.
        let table = [
            (1, 0.95, 3.841),
            (2, 0.95, 5.991),
            (3, 0.95, 7.815),
            (10, 0.95, 18.307),
            (1, 0.99, 6.635),
            (15, 0.99, 30.578),
        ];
        for (dof, p, want) in table {
            let got = chi2_quantile(dof, p);
            assert!(close(got, want, 5e-4), "dof {dof} p {p}: {got} vs table {want}");
        }
    }

    #[test]
    fn bonferroni_one_dof_matches_normal_relation() {
        // chi2_1(1 - a) = z(1 - a/2)^2 (standard identity); 16.45 for a = 5e-5 (from memory).
        let t = bonferroni_threshold(1, 0.05, 1000);
        let z = Normal::standard().inverse_cdf(1.0 - 5e-5 / 2.0);
        assert!(close(t, z * z, 1e-8 * z * z), "{t} vs {}", z * z);
        assert!(close(t, 16.45, 0.01), "{t}");
    }

    #[test]
    fn deep_tail_round_trips_through_survival_function() {
        for dof in [1, 3, 15] {
            for upper in [1e-3, 1e-6, 1e-9] {
                let x = chi2_quantile(dof, 1.0 - upper);
                let sf = ChiSquared::new(dof as f64).unwrap().sf(x);
                assert!((sf / upper - 1.0).abs() < 1e-6, "dof {dof} upper {upper}: sf {sf}");
            }
        }
    }

    #[test]
    fn row_thresholds_equal_the_quantile_they_cache() {
        let t = RowThresholds::new(0.05, 1234);
        for k in 1..=9 {
            let want = bonferroni_threshold(k - 1, 0.05, 1234);
            assert_eq!(t.of_outcomes(k), want, "{k} outcomes");
        }
    }

    #[test]
    fn degenerate_levels() {
        assert_eq!(chi2_quantile(0, 0.95), 0.0);
        assert_eq!(chi2_quantile(3, 0.0), 0.0);
        assert!(chi2_quantile(3, 1.0).is_infinite());
        assert!(bonferroni_threshold(2, 0.05, 0).is_finite());
    }
}
