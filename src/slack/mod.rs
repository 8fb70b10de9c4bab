//! Slack: weakened predictions, row requirements and the two-stage covering LPs.
//!
//! Everything here works on plain numbers (predictions, counts, sparse rows); the
//! analysis that turns circuits into rows lives elsewhere and calls in (method.md 4-5).
//!
//! ```
//! use slackmap::slack::{permutation_null, p_value, requirement, CoveringProblem, Row, VarKind};
//! use slackmap::stats::bonferroni_threshold;
//! // Variables: omega (intrinsic), kappa_r and kappa_s (context of aggressors r and s).
//! let kinds = vec![VarKind::Intrinsic, VarKind::Context, VarKind::Context];
//! let t = bonferroni_threshold(1, 0.05, 4);
//! let d = |p0: f64, n0: u64| requirement(&[p0, 1.0 - p0], &[n0, 1000 - n0], t);
//! let rows = vec![
//!     Row { terms: vec![(0, 20.0)], requirement: d(0.95, 930), reference: true },
//!     Row { terms: vec![(0, 40.0)], requirement: d(0.90, 880), reference: true },
//!     Row { terms: vec![(0, 20.0), (1, 20.0)], requirement: d(0.95, 850), reference: false },
//!     Row { terms: vec![(0, 20.0), (2, 20.0)], requirement: d(0.95, 935), reference: false },
//! ];
//! let problem = CoveringProblem { kinds, fixed: vec![], rows };
//! let sol = problem.solve()?;                       // stage 1, then stage 2
//! let score = vec![(1, 1.0)];                        // X(q <- r) with one kind
//! let (lo, hi) = problem.attribution_ranges(&sol, &[score.clone()])?[0];
//! let support = sol.supporting_rows(&problem, &[1]);
//! let null = permutation_null(&problem, &[1], &[0, 0, 0, 1], &score, 19, 7)?;
//! let p = p_value(sol.score(&score), &null);
//! assert!(sol.values[1] > 0.0 && lo > 0.0 && lo <= hi && support == vec![2] && p <= 1.0);
//! # Ok::<(), slackmap::Error>(())
//! ```

pub mod lp;
pub mod null;
pub mod projection;
pub mod requirement;

pub use lp::{CoveringProblem, Presolve, Row, TwoStageSolution, VarKind};
pub use null::{detection_limit, p_value, permutation_null};
pub use projection::{llr, tvd, weaken, Weakening};
pub use requirement::requirement;
