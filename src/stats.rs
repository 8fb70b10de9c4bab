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

/// The conditional maximum-likelihood estimate of the noncentrality of a chi-squared
/// statistic `x` with `dof` degrees of freedom, given that it was selected for exceeding
/// `threshold`: the lambda that maximises f(x; lambda) / P(X > threshold; lambda). Selecting
/// a statistic because it passed a threshold biases it upward (the winner's curse); the
/// likelihood conditional on the selection removes that bias (Ghosh, Zou & Wright, "Estimating
/// odds ratios in genome scans: an approximate conditional likelihood approach", Am. J. Hum.
/// Genet. 82, 2008; Zhong & Prentice, "Bias-reduced estimators and confidence intervals for
/// odds ratios in genome-wide association studies", Biostatistics 9, 2008).
///
/// Near the threshold the estimate falls to zero (a statistic just over it is what zero
/// noncentrality gives, once selected); far above it the conditioning no longer matters and
/// the estimate is the unconditional one. One and three degrees of freedom (the rows of one
/// and two qubits) use the exact noncentral chi-squared densities, those of a normal vector
/// with mean of length m = sqrt(lambda) (Johnson, Kotz & Balakrishnan, Continuous Univariate
/// Distributions vol. 2, 2nd ed., 1995, ch. 29): with s = sqrt(x) and phi the standard
/// normal density,
/// - dof 1: f ~ phi(s - m) + phi(s + m), P(X > c^2) = Q(c - m) + Q(c + m);
/// - dof 3: f ~ (phi(s - m) - phi(s + m)) / m, P(X > c^2) = Q(c - m) + Q(c + m) +
///   (phi(c - m) - phi(c + m)) / m.
///
/// Other `dof` take the one-direction approximation: the noncentrality lies along one
/// direction and the other dof - 1 carry noise of mean dof - 1, so the dof 1 form is applied
/// to x - (dof - 1) and threshold - (dof - 1). Returns 0 for `x <= threshold`, and `x` when
/// either is not finite.
pub fn truncated_noncentrality(x: f64, dof: usize, threshold: f64) -> f64 {
    if !(x.is_finite() && threshold.is_finite()) {
        return x;
    }
    if dof == 0 || x <= threshold.max(0.0) {
        return 0.0;
    }
    let shift = if dof == 3 { 0.0 } else { dof.saturating_sub(1) as f64 };
    let form = if dof == 3 { 3 } else { 1 };
    let s = (x - shift).max(0.0).sqrt();
    let c = (threshold - shift).max(0.0).sqrt();
    let log_likelihood =
        |m: f64| noncentral_log_density(form, s, m) - noncentral_sf(form, c, m).ln();
    // Golden-section search on [0, s + 3]: the conditional likelihood has one maximum (the
    // truncated family's conditional mean rises with m). 60 steps narrow the bracket by 1e-12.
    let g = 0.5 * (5f64.sqrt() - 1.0);
    let (mut lo, mut hi) = (0.0_f64, s + 3.0);
    let (mut a, mut b) = (hi - g * (hi - lo), lo + g * (hi - lo));
    let (mut fa, mut fb) = (log_likelihood(a), log_likelihood(b));
    for _ in 0..60 {
        if fa < fb {
            lo = a;
            a = b;
            fa = fb;
            b = lo + g * (hi - lo);
            fb = log_likelihood(b);
        } else {
            hi = b;
            b = a;
            fb = fa;
            a = hi - g * (hi - lo);
            fa = log_likelihood(a);
        }
    }
    let m = 0.5 * (lo + hi);
    // Endpoint check: the maximum may sit at m = 0 (a statistic at the threshold).
    let m = if log_likelihood(0.0) >= log_likelihood(m) { 0.0 } else { m };
    m * m
}

/// The standard normal upper tail Q(t) = P(Z > t).
fn normal_sf(t: f64) -> f64 {
    0.5 * statrs::function::erf::erfc(t / std::f64::consts::SQRT_2)
}

/// ln[(phi(a - m) - phi(a + m)) / m] + ln sqrt(2 pi), written as phi(a - m) (1 - e^(-2am)) / m
/// so that it keeps its accuracy, and its limit 2 a phi(a), as m goes to 0.
fn log_odd_difference(a: f64, m: f64) -> f64 {
    let ratio = if m > 1e-300 { -(-2.0 * a * m).exp_m1() / m } else { 2.0 * a };
    -0.5 * (a - m) * (a - m) + ratio.ln()
}

/// The log density of a noncentral chi-squared statistic of `dof` 1 or 3 degrees of freedom
/// at s^2, as a function of m = sqrt(lambda), up to a term that does not depend on m.
fn noncentral_log_density(dof: usize, s: f64, m: f64) -> f64 {
    if dof == 3 {
        log_odd_difference(s, m)
    } else {
        -0.5 * (s - m) * (s - m) + (-2.0 * s * m).exp().ln_1p()
    }
}

/// P(X > c^2) for a noncentral chi-squared X of `dof` 1 or 3 degrees of freedom and
/// noncentrality m^2.
fn noncentral_sf(dof: usize, c: f64, m: f64) -> f64 {
    let two_sided = normal_sf(c - m) + normal_sf(c + m);
    if dof == 3 {
        two_sided + log_odd_difference(c, m).exp() / std::f64::consts::TAU.sqrt()
    } else {
        two_sided
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

    /// The noncentral chi-squared law as the Poisson mixture of central ones (Johnson, Kotz
    /// & Balakrishnan, Continuous Univariate Distributions vol. 2, 2nd ed., 1995, eq. 29.2),
    /// with statrs' central chi-squared: (density at x, P(X > x)).
    fn mixture(dof: usize, lambda: f64, x: f64) -> (f64, f64) {
        let (mut pdf, mut sf) = (0.0, 0.0);
        let mut weight = (-lambda / 2.0).exp();
        for j in 0..400 {
            let central = ChiSquared::new((dof + 2 * j) as f64).unwrap();
            pdf += weight * central.pdf(x);
            sf += weight * central.sf(x);
            weight *= lambda / 2.0 / (j + 1) as f64;
        }
        (pdf, sf)
    }

    #[test]
    fn closed_forms_match_the_poisson_mixture() {
        for dof in [1, 3] {
            for m in [0.0, 1e-6, 0.5, 1.7, 4.0, 7.5] {
                for c in [0.5, 2.5, 4.6, 6.0] {
                    let (_, want) = mixture(dof, m * m, c * c);
                    let got = noncentral_sf(dof, c, m);
                    assert!(
                        (got / want - 1.0).abs() < 1e-9,
                        "dof {dof} m {m} c {c}: {got} vs {want}"
                    );
                }
                // The density up to a factor free of m: ratios between two m agree.
                let s = 3.3;
                let (p0, _) = mixture(dof, 1.0, s * s);
                let (p1, _) = mixture(dof, m * m, s * s);
                let got = noncentral_log_density(dof, s, m) - noncentral_log_density(dof, s, 1.0);
                assert!((got - (p1 / p0).ln()).abs() < 1e-9, "dof {dof} m {m}: {got}");
            }
        }
    }

    #[test]
    fn conditional_estimate_maximises_the_mixture_likelihood() {
        // The conditional likelihood f(x; lambda) / P(X > T; lambda), computed from the
        // Poisson mixture on a fine grid, peaks where the closed form's search says.
        for (dof, x, t) in [(1, 25.0, 21.0), (1, 30.0, 21.0), (3, 34.0, 27.0), (3, 45.0, 27.0)] {
            let conditional = |lambda: f64| {
                let (pdf, _) = mixture(dof, lambda, x);
                let (_, sf) = mixture(dof, lambda, t);
                pdf / sf
            };
            let got = truncated_noncentrality(x, dof, t);
            let grid = (0..=6000).map(|i| i as f64 * 0.01);
            let best = grid.max_by(|a, b| conditional(*a).total_cmp(&conditional(*b))).unwrap();
            assert!((got - best).abs() <= 0.011, "dof {dof} x {x}: {got} vs grid {best}");
            assert!(got < x, "selection pulls the estimate below the statistic");
        }
    }

    #[test]
    fn conditional_estimate_limits() {
        // At the threshold a selected statistic is what zero noncentrality gives.
        assert_eq!(truncated_noncentrality(20.0, 1, 21.0), 0.0);
        assert!(truncated_noncentrality(21.2, 1, 21.0) < 0.5);
        // Far above it the selection no longer matters: for one degree of freedom the
        // unconditional estimate of a folded normal's squared mean is the statistic itself.
        let x = 400.0;
        assert!((truncated_noncentrality(x, 1, 21.0) / x - 1.0).abs() < 1e-6);
        // And it rises with the statistic.
        let mut last = 0.0;
        for i in 0..200 {
            let l = truncated_noncentrality(21.0 + 0.25 * i as f64, 3, 21.0);
            assert!(l >= last - 1e-9, "{l} after {last}");
            last = l;
        }
    }
}
