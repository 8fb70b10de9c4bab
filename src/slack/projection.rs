//! The weakened prediction: the most likely distribution within TVD radius w of a
//! prediction (method.md section 4), in closed form, and its log-likelihood ratio.
//!
//! KKT for max sum n_x ln q_x over the simplex and the ball (1/2)|q - p|_1 <= w give
//! q_x = clamp(p_x, a f_x, b f_x) with a <= 1 <= b: raised outcomes share one likelihood
//! ratio a, lowered ones share b, and mass on unobserved outcomes goes first (b = inf).

/// Total variation distance (1/2) sum |p_x - q_x|.
pub fn tvd(p: &[f64], q: &[f64]) -> f64 {
    0.5 * p.iter().zip(q).map(|(a, b)| (a - b).abs()).sum::<f64>()
}

/// The log-likelihood ratio 2 sum_x n_x ln(f_x / q_x) of counts `n` against `q`, with
/// 0 ln 0 = 0; infinite when an observed outcome has q_x = 0.
pub fn llr(n: &[u64], q: &[f64]) -> f64 {
    let total: u64 = n.iter().sum();
    if total == 0 {
        return 0.0;
    }
    let total = total as f64;
    let mut s = 0.0;
    for (&nx, &qx) in n.iter().zip(q) {
        if nx == 0 {
            continue;
        }
        if qx <= 0.0 {
            return f64::INFINITY;
        }
        let nx = nx as f64;
        s += nx * (nx / total / qx).ln();
    }
    (2.0 * s).max(0.0)
}

/// The best distribution within TVD `w` of `p` for counts `n` (see the module header).
///
/// `p` is clipped at 0 and renormalised (simulated predictions carry rounding); with no
/// shots the prediction is returned unchanged.
///
/// # Panics
/// When `p` and `n` differ in length (a caller's bug, never an input-file property).
pub fn weaken(p: &[f64], n: &[u64], w: f64) -> Vec<f64> {
    let mut q = vec![0.0; p.len()];
    Weakening::new(p, n).fill(w, &mut q);
    q
}

/// One row's prediction and counts prepared for repeated weakening: outcome orders by
/// the likelihood ratio p_x / f_x are sorted once, so each radius costs O(K).
#[derive(Clone, Debug)]
pub struct Weakening {
    shots: f64,
    p: Vec<f64>,
    f: Vec<f64>,
    counts: Vec<f64>,
    unobserved_mass: f64,
    tvd: f64,
    /// Observed outcomes by p/f rising: the order in which they are raised.
    rising: Vec<usize>,
}

/// Where the optimum sits at one radius: the common ratios of the raised and lowered sides
/// (`b = inf` while only unobserved mass is lowered) and how much unobserved mass is left.
#[derive(Clone, Copy, Debug)]
struct Ratios {
    a: f64,
    b: f64,
    unobserved_keep: f64,
}

impl Weakening {
    /// Prepares prediction `p` against counts `n` (same length).
    ///
    /// # Panics
    /// When `p` and `n` differ in length.
    pub fn new(p: &[f64], n: &[u64]) -> Weakening {
        assert_eq!(p.len(), n.len(), "prediction and counts must cover the same outcomes");
        let mut pp: Vec<f64> = p.iter().map(|&x| if x > 0.0 { x } else { 0.0 }).collect();
        let sum: f64 = pp.iter().sum();
        if sum > 0.0 && sum.is_finite() {
            pp.iter_mut().for_each(|x| *x /= sum);
        } else {
            let k = pp.len().max(1) as f64;
            pp.iter_mut().for_each(|x| *x = 1.0 / k);
        }
        let shots: u64 = n.iter().sum();
        let counts: Vec<f64> = n.iter().map(|&x| x as f64).collect();
        let f: Vec<f64> = if shots == 0 {
            pp.clone()
        } else {
            counts.iter().map(|&x| x / shots as f64).collect()
        };
        let unobserved_mass = if shots == 0 {
            0.0
        } else {
            n.iter().zip(&pp).filter(|(&nx, _)| nx == 0).map(|(_, &px)| px).sum()
        };
        let mut rising: Vec<usize> = (0..pp.len()).filter(|&x| n[x] > 0).collect();
        rising.sort_by(|&x, &y| (pp[x] / f[x]).total_cmp(&(pp[y] / f[y])).then(x.cmp(&y)));
        let tvd = tvd(&pp, &f);
        Weakening { shots: shots as f64, p: pp, f, counts, unobserved_mass, tvd, rising }
    }

    /// TVD between the (normalised) prediction and the observed frequencies: beyond this
    /// radius the weakened prediction is the frequencies themselves.
    pub fn tvd_to_frequencies(&self) -> f64 {
        self.tvd
    }

    fn ratios(&self, w: f64) -> Ratios {
        let ratio = |x: usize| self.p[x] / self.f[x];
        // Raised side: solve sum_{x raised} (a f_x - p_x) = w along the rising order.
        let (mut fs, mut ps) = (0.0, 0.0);
        let mut a = 1.0;
        for (j, &x) in self.rising.iter().enumerate() {
            fs += self.f[x];
            ps += self.p[x];
            let cand = (w + ps) / fs;
            let next = self.rising.get(j + 1).map_or(f64::INFINITY, |&y| ratio(y));
            if cand <= next {
                a = cand;
                break;
            }
        }
        // Lowered side: unobserved mass first, then observed outcomes by p/f falling.
        if w <= self.unobserved_mass {
            let keep =
                if self.unobserved_mass > 0.0 { 1.0 - w / self.unobserved_mass } else { 1.0 };
            return Ratios { a, b: f64::INFINITY, unobserved_keep: keep };
        }
        let rest = w - self.unobserved_mass;
        let (mut fs, mut ps) = (0.0, 0.0);
        let mut b = 1.0;
        for (j, &x) in
            self.rising.iter().enumerate().rev().map(|(j, x)| (self.rising.len() - 1 - j, x))
        {
            fs += self.f[x];
            ps += self.p[x];
            let cand = (ps - rest) / fs;
            let next = if j + 1 < self.rising.len() {
                ratio(self.rising[self.rising.len() - 2 - j])
            } else {
                0.0
            };
            if cand >= next {
                b = cand;
                break;
            }
        }
        Ratios { a, b, unobserved_keep: 0.0 }
    }

    /// Writes q*(w) into `q` (length K).
    pub fn fill(&self, w: f64, q: &mut [f64]) {
        if self.shots == 0.0 {
            q.copy_from_slice(&self.p);
            return;
        }
        if w >= self.tvd {
            q.copy_from_slice(&self.f);
            return;
        }
        let w = w.max(0.0);
        let r = self.ratios(w);
        for (x, qx) in q.iter_mut().enumerate() {
            let (px, fx) = (self.p[x], self.f[x]);
            *qx = if self.counts[x] == 0.0 {
                px * r.unobserved_keep
            } else if r.a * fx > px {
                r.a * fx
            } else if r.b * fx < px {
                r.b * fx
            } else {
                px
            };
        }
    }

    /// LLR(w) = 2 sum n_x ln(f_x / q*_x(w)) and its derivative in w, 2N (1/b - 1/a)
    /// (the ball constraint's multiplier), computed without forming q.
    pub fn llr_and_slope(&self, w: f64) -> (f64, f64) {
        if self.shots == 0.0 || w >= self.tvd {
            return (0.0, 0.0);
        }
        let r = self.ratios(w.max(0.0));
        let mut s = 0.0;
        for &x in &self.rising {
            let (px, fx, nx) = (self.p[x], self.f[x], self.counts[x]);
            s += if r.a * fx > px {
                -nx * r.a.ln()
            } else if r.b * fx < px {
                -nx * r.b.ln()
            } else {
                nx * (fx / px).ln()
            };
        }
        let slope = 2.0 * self.shots * (1.0 / r.b - 1.0 / r.a);
        ((2.0 * s).max(0.0), slope)
    }

    /// LLR(w) alone.
    pub fn llr(&self, w: f64) -> f64 {
        self.llr_and_slope(w).0
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    fn loglik(n: &[u64], q: &[f64]) -> f64 {
        n.iter()
            .zip(q)
            .filter(|(&nx, _)| nx > 0)
            .map(|(&nx, &qx)| if qx > 0.0 { nx as f64 * qx.ln() } else { f64::NEG_INFINITY })
            .sum()
    }

    fn case() -> impl Strategy<Value = (Vec<f64>, Vec<u64>)> {
        (2usize..=16).prop_flat_map(|k| {
            (prop::collection::vec(0.0f64..1.0, k), prop::collection::vec(0u64..200, k)).prop_map(
                |(mut p, n)| {
                    let s: f64 = p.iter().sum::<f64>() + 1e-12;
                    p.iter_mut().for_each(|x| *x /= s);
                    (p, n)
                },
            )
        })
    }

    proptest! {
        #[test]
        fn stays_in_simplex_and_ball((p, n) in case(), frac in 0.0f64..1.2) {
            let wk = Weakening::new(&p, &n);
            let w = frac * wk.tvd_to_frequencies();
            let q = weaken(&p, &n, w);
            prop_assert!(q.iter().all(|&x| x >= 0.0));
            prop_assert!((q.iter().sum::<f64>() - 1.0).abs() < 1e-9);
            prop_assert!(tvd(&q, &wk.p) <= w + 1e-9, "tvd {} > w {}", tvd(&q, &wk.p), w);
        }

        #[test]
        fn llr_non_increasing_and_convex((p, n) in case()) {
            prop_assume!(n.iter().sum::<u64>() > 0);
            // Keep LLR(0) finite so second differences are defined.
            let p: Vec<f64> = p.iter().map(|x| x + 1e-3).collect();
            let wk = Weakening::new(&p, &n);
            let d = wk.tvd_to_frequencies();
            let grid: Vec<f64> = (0..=40).map(|i| wk.llr(d * i as f64 / 40.0)).collect();
            let scale = grid[0].max(1.0);
            for i in 1..grid.len() {
                prop_assert!(grid[i] <= grid[i - 1] + 1e-9 * scale);
            }
            for i in 1..grid.len() - 1 {
                prop_assert!(grid[i - 1] + grid[i + 1] - 2.0 * grid[i] >= -1e-7 * scale);
            }
            prop_assert!(grid[40].abs() < 1e-9);
        }

        #[test]
        fn slope_matches_finite_difference((p, n) in case(), frac in 0.05f64..0.95) {
            prop_assume!(n.iter().sum::<u64>() > 0);
            let p: Vec<f64> = p.iter().map(|x| x + 1e-3).collect();
            let wk = Weakening::new(&p, &n);
            let w = frac * wk.tvd_to_frequencies();
            // h well above rounding: LLR sums terms far larger than itself, so with h at
            // 1e-7 of the TVD the difference quotient carried rounding error above the
            // tolerance (a two-outcome row of 359 shots and TVD 1.1e-3 failed).
            let h = 1e-5 * wk.tvd_to_frequencies();
            prop_assume!(h > 1e-12);
            let (_, slope) = wk.llr_and_slope(w);
            let fd = (wk.llr(w + h) - wk.llr(w - h)) / (2.0 * h);
            // One-sided slopes differ at a kink; the central difference lies between them.
            let (lo, hi) = (wk.llr_and_slope(w - h).1, wk.llr_and_slope(w + h).1);
            prop_assert!(fd >= lo.min(hi) - 1e-4 * slope.abs().max(1.0));
            prop_assert!(fd <= lo.max(hi) + 1e-4 * slope.abs().max(1.0));
        }

        #[test]
        fn llr_helper_agrees_with_struct((p, n) in case(), frac in 0.0f64..1.0) {
            let p: Vec<f64> = p.iter().map(|x| x + 1e-3).collect();
            let wk = Weakening::new(&p, &n);
            let w = frac * wk.tvd_to_frequencies();
            let q = weaken(&p, &n, w);
            let a = llr(&n, &q);
            let b = wk.llr(w);
            prop_assert!((a - b).abs() <= 1e-7 * a.max(1.0), "{a} vs {b}");
        }
    }

    proptest! {
        /// Optimality for any K: no feasible move of mass between two outcomes improves
        /// the log-likelihood (pairwise moves span the simplex's directions, and the problem
        /// is concave, so a local check is a global one up to the step sizes tried).
        #[test]
        fn no_pairwise_move_improves((p, n) in case(), frac in 0.01f64..0.99, zero_p in 0usize..16) {
            let mut p = p;
            if zero_p < p.len() {
                p[zero_p] = 0.0;
            }
            prop_assume!(p.iter().sum::<f64>() > 0.1 && n.iter().sum::<u64>() > 0);
            let wk = Weakening::new(&p, &n);
            let w = frac * wk.tvd_to_frequencies();
            let q = weaken(&p, &n, w);
            let base = loglik(&n, &q);
            prop_assume!(base.is_finite());
            for x in 0..q.len() {
                for y in 0..q.len() {
                    for t in [1e-3, 1e-5] {
                        if x == y || q[y] < t {
                            continue;
                        }
                        let mut r = q.clone();
                        r[x] += t;
                        r[y] -= t;
                        if tvd(&r, &wk.p) <= w {
                            let v = loglik(&n, &r);
                            prop_assert!(v <= base + 1e-9 * base.abs().max(1.0), "move {x}<-{y} by {t}: {v} > {base}");
                        }
                    }
                }
            }
        }
    }

    #[test]
    fn beyond_tvd_is_frequencies() {
        let p = [0.5, 0.3, 0.2];
        let n = [10u64, 60, 30];
        let q = weaken(&p, &n, 0.5);
        for (a, b) in q.iter().zip([0.1, 0.6, 0.3]) {
            assert!((a - b).abs() < 1e-12);
        }
        assert!(llr(&n, &q).abs() < 1e-12);
    }

    #[test]
    fn unobserved_mass_goes_first() {
        // Outcome 2 never seen: its 0.2 is removed before anything observed is lowered.
        let p = [0.4, 0.4, 0.2];
        let n = [30u64, 70, 0];
        let q = weaken(&p, &n, 0.1);
        assert!((q[2] - 0.1).abs() < 1e-12, "{q:?}");
        assert!((q[0] - 0.4).abs() < 1e-12, "{q:?}");
        assert!((q[1] - 0.5).abs() < 1e-12, "{q:?}");
    }

    #[test]
    fn zero_prediction_on_observed_outcome_is_infinite_at_zero() {
        let wk = Weakening::new(&[1.0, 0.0], &[90, 10]);
        assert!(wk.llr(0.0).is_infinite());
        assert!(wk.llr(1e-6).is_finite());
    }

    /// Grid search over the ball, then a random local search from the grid's best point
    /// (shrinking steps) so the comparison is not limited by the grid spacing.
    fn brute_force_best(p: &[f64], n: &[u64], w: f64, steps: usize) -> f64 {
        use rand::{RngExt, SeedableRng};
        let k = p.len();
        let h = 1.0 / steps as f64;
        let mut best_q = vec![0.0; k];
        let mut best = f64::NEG_INFINITY;
        let consider = |q: &[f64], best: &mut f64, best_q: &mut [f64]| {
            if tvd(q, p) <= w && q.iter().all(|&x| x >= 0.0) {
                let v = loglik(n, q);
                if v > *best {
                    *best = v;
                    best_q.copy_from_slice(q);
                }
            }
        };
        for i in 0..=steps {
            if k == 2 {
                consider(&[i as f64 * h, 1.0 - i as f64 * h], &mut best, &mut best_q);
            } else {
                for j in 0..=steps - i {
                    let q = [i as f64 * h, j as f64 * h, 1.0 - (i + j) as f64 * h];
                    consider(&q, &mut best, &mut best_q);
                }
            }
        }
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(7);
        let mut radius = 4.0 * h;
        for _ in 0..200 {
            for _ in 0..500 {
                let mut q = best_q.clone();
                // Move mass between two random outcomes: stays on the simplex.
                let (x, y) = (rng.random_range(0..k), rng.random_range(0..k));
                let t = radius * rng.random::<f64>();
                q[x] += t;
                q[y] -= t;
                consider(&q, &mut best, &mut best_q);
            }
            radius *= 0.9;
        }
        best
    }

    #[test]
    fn agrees_with_grid_search_for_two_and_three_outcomes() {
        let cases: [(&[f64], &[u64]); 5] = [
            (&[0.9, 0.1], &[700, 300]),
            (&[0.2, 0.8], &[50, 950]),
            (&[0.5, 0.3, 0.2], &[100, 600, 300]),
            (&[0.7, 0.2, 0.1], &[400, 0, 600]),
            (&[0.05, 0.05, 0.9], &[300, 300, 400]),
        ];
        for (p, n) in cases {
            let d = Weakening::new(p, n).tvd_to_frequencies();
            for frac in [0.1, 0.37, 0.8] {
                let w = frac * d;
                let closed = loglik(n, &weaken(p, n, w));
                let steps = if p.len() == 2 { 20_000 } else { 400 };
                let brute = brute_force_best(p, n, w, steps);
                // A search can only do worse than the optimum; it should come close to it.
                assert!(brute <= closed + 1e-9, "{p:?} w {w}: search {brute} beats {closed}");
                assert!(closed - brute <= 1e-6 * closed.abs(), "{p:?} w {w}: {closed} vs {brute}");
            }
        }
    }
}
