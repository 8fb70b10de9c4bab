//! The two-stage covering LP over slack budgets (method.md section 4), generic over rows.
//!
//! Stage 1 spends intrinsic slack on the reference rows only; stage 2 holds it fixed and
//! spends context slack on every row. Optima are not unique, so each stage is followed by a
//! lexicographic second solve that makes per-variable values deterministic, and attribution
//! ranges give the min and max of a score over the near-optimal face. Backend: microlp.

use std::collections::BTreeMap;

use good_lp::{microlp, variable, Expression, ProblemVariables, Solution, SolverModel, Variable};

use crate::{Error, Result};

/// A residual requirement at or below this is met already: the row is dropped.
pub const DROP_TOLERANCE: f64 = 1e-10;
/// A row with no free variable left counts as met up to this shortfall: the earlier stage
/// meets its rows only to the solver's precision (a shortfall of 1.2e-8 was seen on a
/// simulated 4x4 chip), and 1e-7 TVD is far below the least figure any output prints.
const UNCOVERED_TOLERANCE: f64 = 1e-7;
/// A row binds when its slack exceeds its requirement by no more than this (TVD).
pub const BINDING_TOLERANCE: f64 = 1e-9;
/// Relative width of the near-optimal face used for attribution ranges.
pub const FACE_RELATIVE: f64 = 1e-6;
/// Absolute width of the near-optimal face used for attribution ranges.
pub const FACE_ABSOLUTE: f64 = 1e-9;
/// Relative tolerance on the optimum during the tie-breaking second solve.
const TIE_RELATIVE: f64 = 1e-9;
/// Absolute tolerance on the optimum during the tie-breaking second solve.
const TIE_ABSOLUTE: f64 = 1e-12;

/// Which stage a budget variable belongs to.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum VarKind {
    /// Readout or per-kind intrinsic slack: set by stage 1 from reference rows.
    Intrinsic,
    /// Context slack of an (operation kind, aggressor) pair: set by stage 2.
    Context,
}

/// One covering constraint: sum of `coefficient * variable` over `terms` >= `requirement`.
///
/// Coefficients are occurrence counts (or 1 for readout) and so non-negative; a variable
/// may appear more than once (its coefficients add). A reference row carries no context
/// terms.
#[derive(Clone, Debug, PartialEq)]
pub struct Row {
    /// (variable index, coefficient >= 0) pairs.
    pub terms: Vec<(usize, f64)>,
    /// The row's requirement d_row (TVD), >= 0.
    pub requirement: f64,
    /// Whether the row enters stage 1 (all its occurrences are reference occurrences).
    pub reference: bool,
}

/// A covering problem: variable kinds, optionally some variables fixed to given values
/// (a coupler problem reuses its qubits' one-qubit budgets), and rows.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct CoveringProblem {
    /// Kind of each variable; the problem has `kinds.len()` variables.
    pub kinds: Vec<VarKind>,
    /// Either empty (nothing fixed) or one entry per variable: `Some(value)` fixes it.
    pub fixed: Vec<Option<f64>>,
    /// The rows, in any order (the result does not depend on it).
    pub rows: Vec<Row>,
}

/// What row preprocessing did before a stage's LP was built.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct Presolve {
    /// Rows the stage considered.
    pub rows_in: usize,
    /// Rows dropped because their residual requirement was 0 (they cannot bind).
    pub dropped_zero: usize,
    /// Rows dropped because another row had the same coefficients and at least as large a
    /// requirement.
    pub merged: usize,
    /// Constraints in the LP that was solved.
    pub constraints: usize,
}

/// The solution of both stages.
#[derive(Clone, Debug, PartialEq)]
pub struct TwoStageSolution {
    /// Value of every variable (fixed ones included), clamped at 0.
    pub values: Vec<f64>,
    /// Stage-1 objective: the reference rows' total slack carried by free intrinsic
    /// variables (fixed variables add a constant that is left out).
    pub stage1_objective: f64,
    /// Stage-2 objective: the total context slack over all rows carried by free context
    /// variables.
    pub stage2_objective: f64,
    /// Indices (into the problem's rows) of rows with positive requirement whose slack
    /// equals it within [`BINDING_TOLERANCE`].
    pub binding: Vec<usize>,
    /// Preprocessing of stage 1.
    pub stage1_presolve: Presolve,
    /// Preprocessing of stage 2.
    pub stage2_presolve: Presolve,
}

impl TwoStageSolution {
    /// Binding rows with a non-zero coefficient on any of `vars`: the rows that hold a
    /// score (over those variables) up.
    pub fn supporting_rows(&self, problem: &CoveringProblem, vars: &[usize]) -> Vec<usize> {
        self.binding
            .iter()
            .copied()
            .filter(|&i| problem.rows[i].terms.iter().any(|&(v, c)| c > 0.0 && vars.contains(&v)))
            .collect()
    }

    /// A linear score sum w_v x_v at this solution.
    pub fn score(&self, weights: &[(usize, f64)]) -> f64 {
        weights.iter().map(|&(v, w)| w * self.values.get(v).copied().unwrap_or(0.0)).sum()
    }
}

/// A row after fixed contributions are taken out: free terms sorted by variable, merged.
#[derive(Clone, Debug)]
struct Canon {
    terms: Vec<(usize, f64)>,
    residual: f64,
}

/// The LP of one stage in compact form: columns are the stage's free variables that appear
/// in at least one row, constraints are the canonical rows.
struct StageLp {
    /// Problem variable index of each column.
    columns: Vec<usize>,
    /// Column of each problem variable, when it has one.
    column_of: Vec<Option<usize>>,
    /// Constraints over columns.
    rows: Vec<Canon>,
    presolve: Presolve,
}

impl CoveringProblem {
    /// Number of variables.
    pub fn n_vars(&self) -> usize {
        self.kinds.len()
    }

    fn fixed_value(&self, v: usize) -> Option<f64> {
        self.fixed.get(v).copied().flatten()
    }

    /// Checks shapes and signs, naming the first offending row or variable.
    pub fn validate(&self) -> Result<()> {
        let n = self.n_vars();
        if !self.fixed.is_empty() && self.fixed.len() != n {
            return Err(Error::Analysis(format!(
                "covering problem: {} fixed entries for {n} variables (give none or one each)",
                self.fixed.len()
            )));
        }
        for (v, f) in self.fixed.iter().enumerate() {
            if let Some(x) = f {
                if !(x.is_finite() && *x >= 0.0) {
                    return Err(Error::Analysis(format!(
                        "covering problem: variable {v} fixed to {x}; a budget is a finite value >= 0"
                    )));
                }
            }
        }
        for (i, row) in self.rows.iter().enumerate() {
            if !(row.requirement.is_finite() && row.requirement >= 0.0) {
                return Err(Error::Analysis(format!(
                    "covering row {i}: requirement {} is not a finite value >= 0",
                    row.requirement
                )));
            }
            for &(v, c) in &row.terms {
                if v >= n {
                    return Err(Error::Analysis(format!(
                        "covering row {i}: variable {v} out of range (problem has {n})"
                    )));
                }
                if !(c.is_finite() && c >= 0.0) {
                    return Err(Error::Analysis(format!(
                        "covering row {i}: coefficient {c} on variable {v} is not a finite value >= 0"
                    )));
                }
                if row.reference
                    && c > 0.0
                    && self.kinds[v] == VarKind::Context
                    && self.fixed_value(v).is_none()
                {
                    return Err(Error::Analysis(format!(
                        "covering row {i}: reference row has context variable {v}"
                    )));
                }
            }
        }
        Ok(())
    }

    /// Builds one stage's LP: `free` marks the stage's variables, `values` holds the value of
    /// every other variable; rows are those with `use_row` true.
    fn stage_lp(
        &self,
        free: &[bool],
        values: &[f64],
        use_row: impl Fn(&Row) -> bool,
    ) -> Result<StageLp> {
        let mut presolve = Presolve::default();
        // Keyed by the exact coefficient bits: identical rows meet, and the BTreeMap's
        // order makes the LP independent of the input row order.
        let mut merged: BTreeMap<Vec<(usize, u64)>, f64> = BTreeMap::new();
        let mut terms: Vec<(usize, f64)> = Vec::new();
        for (i, row) in self.rows.iter().enumerate() {
            if !use_row(row) {
                continue;
            }
            presolve.rows_in += 1;
            terms.clear();
            let mut residual = row.requirement;
            for &(v, c) in &row.terms {
                if c <= 0.0 {
                    continue;
                }
                if free[v] {
                    terms.push((v, c));
                } else {
                    residual -= c * values[v];
                }
            }
            // A row with nothing free left is met when the earlier stage met it to solver
            // precision; only a real shortfall is an error.
            let drop_at = if terms.is_empty() { UNCOVERED_TOLERANCE } else { DROP_TOLERANCE };
            if residual <= drop_at {
                presolve.dropped_zero += 1;
                continue;
            }
            if terms.is_empty() {
                return Err(Error::Analysis(format!(
                    "covering row {i}: requirement {:.3e} left uncovered with no free variable \
                     to carry it (residual {residual:.3e} after fixed and earlier-stage slack)",
                    row.requirement
                )));
            }
            terms.sort_by_key(|&(v, _)| v);
            let mut key: Vec<(usize, u64)> = Vec::with_capacity(terms.len());
            for &(v, c) in &terms {
                match key.last_mut() {
                    Some((lv, lc)) if *lv == v => *lc = (f64::from_bits(*lc) + c).to_bits(),
                    _ => key.push((v, c.to_bits())),
                }
            }
            match merged.get_mut(&key) {
                Some(r) => {
                    presolve.merged += 1;
                    if residual > *r {
                        *r = residual;
                    }
                }
                None => {
                    merged.insert(key, residual);
                }
            }
        }
        let mut column_of = vec![None; self.n_vars()];
        let mut columns = Vec::new();
        for key in merged.keys() {
            for &(v, _) in key {
                if column_of[v].is_none() {
                    column_of[v] = Some(0);
                }
            }
        }
        for (v, c) in column_of.iter_mut().enumerate() {
            if c.is_some() {
                *c = Some(columns.len());
                columns.push(v);
            }
        }
        let rows: Vec<Canon> = merged
            .into_iter()
            .map(|(key, residual)| Canon {
                terms: key
                    .into_iter()
                    .filter_map(|(v, c)| column_of[v].map(|j| (j, f64::from_bits(c))))
                    .collect(),
                residual,
            })
            .collect();
        presolve.constraints = rows.len();
        Ok(StageLp { columns, column_of, rows, presolve })
    }

    /// Per-variable sum of coefficients over the rows with `use_row` true: the stage's
    /// objective weights (sum over rows of row slack).
    fn coefficient_sums(&self, use_row: impl Fn(&Row) -> bool) -> Vec<f64> {
        let mut sums = vec![0.0; self.n_vars()];
        for row in self.rows.iter().filter(|r| use_row(r)) {
            for &(v, c) in &row.terms {
                sums[v] += c;
            }
        }
        sums
    }

    fn free_mask(&self, kind: VarKind) -> Vec<bool> {
        (0..self.n_vars()).map(|v| self.kinds[v] == kind && self.fixed_value(v).is_none()).collect()
    }

    /// Solves both stages with deterministic tie-breaking.
    pub fn solve(&self) -> Result<TwoStageSolution> {
        self.validate()?;
        let n = self.n_vars();
        let mut values: Vec<f64> = (0..n).map(|v| self.fixed_value(v).unwrap_or(0.0)).collect();

        let free1 = self.free_mask(VarKind::Intrinsic);
        let cost1 = self.coefficient_sums(|r| r.reference);
        let lp1 = self.stage_lp(&free1, &values, |r| r.reference)?;
        let x1 = lp1.solve_tie_broken(&cost1)?;
        lp1.scatter(&x1, &mut values);
        let stage1_objective = lp1.columns.iter().map(|&v| cost1[v] * values[v]).sum();

        let free2 = self.free_mask(VarKind::Context);
        let cost2 = self.coefficient_sums(|_| true);
        let lp2 = self.stage_lp(&free2, &values, |_| true)?;
        let x2 = lp2.solve_tie_broken(&cost2)?;
        lp2.scatter(&x2, &mut values);
        let stage2_objective = lp2.columns.iter().map(|&v| cost2[v] * values[v]).sum();

        let binding = self.binding_rows(&values);
        Ok(TwoStageSolution {
            values,
            stage1_objective,
            stage2_objective,
            binding,
            stage1_presolve: lp1.presolve,
            stage2_presolve: lp2.presolve,
        })
    }

    /// [`Self::solve`] for a problem none of whose rows requires anything, with `fixed` in
    /// place of [`Self::fixed`]'s values: every row is met at zero, so both stages drop every
    /// row and solve nothing, and the free variables are zero. Most problems of a replicate
    /// are such (a row needs slack only where the data depart from the model).
    ///
    /// None (solve it instead) unless every requirement is 0, `fixed` fixes exactly the
    /// variables [`Self::fixed`] fixes, to finite values >= 0, and the problem is valid;
    /// otherwise the result is the one [`Self::solve`] gives with these fixed values.
    pub fn solve_unrequired(&self, fixed: &[Option<f64>]) -> Option<TwoStageSolution> {
        let n = self.n_vars();
        let given = |v: usize| fixed.get(v).copied().flatten();
        let same_fixed = fixed.len() <= n
            && (0..n).all(|v| match (self.fixed_value(v), given(v)) {
                (None, None) => true,
                (Some(_), Some(x)) => x.is_finite() && x >= 0.0,
                _ => false,
            });
        if !same_fixed || self.rows.iter().any(|r| r.requirement != 0.0) {
            return None;
        }
        self.validate().ok()?;
        // What `solve` finds: a zero requirement less fixed slack is at most 0, so every row
        // is dropped in both stages, no column is left and no row binds.
        let reference = self.rows.iter().filter(|r| r.reference).count();
        let all = self.rows.len();
        let dropped =
            |rows: usize| Presolve { rows_in: rows, dropped_zero: rows, merged: 0, constraints: 0 };
        let nothing_free = || std::iter::empty::<f64>().sum::<f64>();
        Some(TwoStageSolution {
            values: (0..n).map(|v| given(v).unwrap_or(0.0)).collect(),
            stage1_objective: nothing_free(),
            stage2_objective: nothing_free(),
            binding: Vec::new(),
            stage1_presolve: dropped(reference),
            stage2_presolve: dropped(all),
        })
    }

    /// Rows with positive requirement whose slack at `values` meets it within
    /// [`BINDING_TOLERANCE`].
    pub fn binding_rows(&self, values: &[f64]) -> Vec<usize> {
        self.rows
            .iter()
            .enumerate()
            .filter(|(_, r)| r.requirement > DROP_TOLERANCE)
            .filter(|(_, r)| row_slack(r, values) - r.requirement <= BINDING_TOLERANCE)
            .map(|(i, _)| i)
            .collect()
    }

    /// Min and max of each linear score over the stage-2 near-optimal face: the rows, the
    /// stage-1 values of `solution` held fixed, and total context slack at most
    /// (1 + [`FACE_RELATIVE`]) * optimum + [`FACE_ABSOLUTE`].
    ///
    /// Terms on variables that are not free in stage 2 add their fixed value. A context
    /// variable that appears in no row carries no evidence and is held at 0.
    pub fn attribution_ranges(
        &self,
        solution: &TwoStageSolution,
        scores: &[Vec<(usize, f64)>],
    ) -> Result<Vec<(f64, f64)>> {
        self.validate()?;
        let free2 = self.free_mask(VarKind::Context);
        let cost2 = self.coefficient_sums(|_| true);
        let lp2 = self.stage_lp(&free2, &solution.values, |_| true)?;
        let opt: f64 = lp2.columns.iter().map(|&v| cost2[v] * solution.values[v]).sum();
        let cost: Vec<f64> = lp2.columns.iter().map(|&v| cost2[v]).collect();
        let budget = (cost.as_slice(), opt * (1.0 + FACE_RELATIVE) + FACE_ABSOLUTE);
        let mut out = Vec::with_capacity(scores.len());
        let mut objective = vec![0.0; lp2.columns.len()];
        for score in scores {
            objective.iter_mut().for_each(|c| *c = 0.0);
            let mut constant = 0.0;
            for &(v, w) in score {
                match lp2.column_of.get(v).copied().flatten() {
                    Some(j) => objective[j] += w,
                    None if v < self.n_vars() && !free2[v] => constant += w * solution.values[v],
                    None => {}
                }
            }
            if objective.iter().all(|&c| c == 0.0) {
                out.push((constant, constant));
                continue;
            }
            let lo = lp2.optimise(&objective, Some(budget), false)?;
            let hi = lp2.optimise(&objective, Some(budget), true)?;
            let eval =
                |x: &[f64]| constant + objective.iter().zip(x).map(|(c, x)| c * x).sum::<f64>();
            let (a, b) = (eval(&lo), eval(&hi));
            out.push((a.min(b), a.max(b)));
        }
        Ok(out)
    }
}

/// Row slack sum c_v x_v.
pub fn row_slack(row: &Row, values: &[f64]) -> f64 {
    row.terms.iter().map(|&(v, c)| c * values.get(v).copied().unwrap_or(0.0)).sum()
}

/// Distinct tie-break weight of problem variable `v`: 1 + frac((v + 1) phi), phi the golden
/// ratio, so that no two variables (nor small integer combinations of them) weigh the same.
fn tie_weight(v: usize) -> f64 {
    let phi = 0.618_033_988_749_894_9_f64;
    1.0 + ((v as f64 + 1.0) * phi).fract()
}

impl StageLp {
    fn scatter(&self, x: &[f64], values: &mut [f64]) {
        for (j, &v) in self.columns.iter().enumerate() {
            values[v] = x[j];
        }
    }

    /// Minimises `cost` (problem-indexed), then, on the optimal face (objective within
    /// TIE_RELATIVE / TIE_ABSOLUTE), minimises the distinct tie weights. Falls back to a
    /// looser face, then to the first solution, if the face is numerically empty.
    fn solve_tie_broken(&self, cost: &[f64]) -> Result<Vec<f64>> {
        if self.columns.is_empty() {
            return Ok(Vec::new());
        }
        let c: Vec<f64> = self.columns.iter().map(|&v| cost[v]).collect();
        let first = self.optimise(&c, None, false)?;
        let opt: f64 = c.iter().zip(&first).map(|(a, b)| a * b).sum();
        let tie: Vec<f64> = self.columns.iter().map(|&v| tie_weight(v)).collect();
        let mut widen = 1.0;
        for _ in 0..3 {
            let bound = opt * (1.0 + TIE_RELATIVE * widen) + TIE_ABSOLUTE * widen;
            if let Ok(x) = self.optimise(&tie, Some((&c, bound)), false) {
                return Ok(x);
            }
            widen *= 100.0;
        }
        Ok(first)
    }

    /// Optimises `objective` over the columns subject to the rows and, when given,
    /// `budget.0 . x <= budget.1`; values are clamped at 0.
    fn optimise(
        &self,
        objective: &[f64],
        budget: Option<(&[f64], f64)>,
        maximise: bool,
    ) -> Result<Vec<f64>> {
        let mut vars = ProblemVariables::new();
        let xs: Vec<Variable> =
            self.columns.iter().map(|_| vars.add(variable().min(0.0))).collect();
        let mut obj = Expression::with_capacity(xs.len());
        for (j, &c) in objective.iter().enumerate() {
            if c != 0.0 {
                obj.add_mul(c, xs[j]);
            }
        }
        let mut model = if maximise {
            vars.maximise(obj).using(microlp)
        } else {
            vars.minimise(obj).using(microlp)
        };
        for row in &self.rows {
            let mut e = Expression::with_capacity(row.terms.len());
            for &(j, c) in &row.terms {
                e.add_mul(c, xs[j]);
            }
            model.add_constraint(e.geq(row.residual));
        }
        if let Some((c, bound)) = budget {
            let mut e = Expression::with_capacity(xs.len());
            for (j, &cj) in c.iter().enumerate() {
                if cj != 0.0 {
                    e.add_mul(cj, xs[j]);
                }
            }
            model.add_constraint(e.leq(bound));
        }
        let sol = model.solve().map_err(|e| {
            Error::Analysis(format!(
                "covering LP ({} variables, {} rows) failed: {e}",
                xs.len(),
                self.rows.len()
            ))
        })?;
        Ok(xs.iter().map(|&x| sol.value(x).max(0.0)).collect())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn row(terms: &[(usize, f64)], requirement: f64, reference: bool) -> Row {
        Row { terms: terms.to_vec(), requirement, reference }
    }

    /// omega (0), kappa_r (1), kappa_s (2); depth-d rows.
    fn small() -> CoveringProblem {
        CoveringProblem {
            kinds: vec![VarKind::Intrinsic, VarKind::Context, VarKind::Context],
            fixed: vec![],
            rows: vec![
                row(&[(0, 10.0)], 0.02, true),
                row(&[(0, 20.0)], 0.03, true),
                row(&[(0, 10.0), (1, 10.0)], 0.05, false),
                row(&[(0, 10.0), (2, 10.0)], 0.01, false),
                row(&[(0, 10.0), (1, 10.0), (2, 10.0)], 0.0, false),
            ],
        }
    }

    #[test]
    fn stages_by_hand() {
        let sol = small().solve().unwrap();
        // Stage 1: omega >= max(0.02 / 10, 0.03 / 20) = 0.002.
        assert!((sol.values[0] - 0.002).abs() < 1e-12, "{:?}", sol.values);
        // Stage 2: kappa_r covers 0.05 - 10 * 0.002 = 0.03 over 10 occurrences.
        assert!((sol.values[1] - 0.003).abs() < 1e-12, "{:?}", sol.values);
        assert!(sol.values[2].abs() < 1e-12);
        // Objectives: stage 1 weight of omega is 30; stage 2 weight of kappa_r is 20.
        assert!((sol.stage1_objective - 0.06).abs() < 1e-12);
        assert!((sol.stage2_objective - 0.06).abs() < 1e-12);
        assert_eq!(sol.binding, vec![0, 2]);
        assert_eq!(sol.supporting_rows(&small(), &[1]), vec![2]);
        assert_eq!(sol.stage2_presolve.dropped_zero, 4);
    }

    #[test]
    fn fixed_variables_are_subtracted() {
        let mut p = small();
        p.fixed = vec![Some(0.004), None, None];
        let sol = p.solve().unwrap();
        assert!((sol.values[0] - 0.004).abs() < 1e-15);
        assert!((sol.values[1] - 0.001).abs() < 1e-12, "{:?}", sol.values);
        assert_eq!(sol.stage1_presolve.dropped_zero, 2);
    }

    #[test]
    fn inseparable_aggressors_have_wide_ranges() {
        // r and s are always active together: the data cannot tell them apart.
        let p = CoveringProblem {
            kinds: vec![VarKind::Intrinsic, VarKind::Context, VarKind::Context],
            fixed: vec![],
            rows: vec![
                row(&[(0, 10.0)], 0.01, true),
                row(&[(0, 10.0), (1, 10.0), (2, 10.0)], 0.05, false),
            ],
        };
        let sol = p.solve().unwrap();
        let ranges = p.attribution_ranges(&sol, &[vec![(1, 1.0)], vec![(2, 1.0)]]).unwrap();
        for (lo, hi) in ranges {
            assert!(lo.abs() < 1e-9 && (hi - 0.004).abs() < 1e-8, "{lo} {hi}");
        }
        // Separable case: a lone r row pins r's share.
        let ranges = small().attribution_ranges(&small().solve().unwrap(), &[vec![(1, 1.0)]]);
        let (lo, hi) = ranges.unwrap()[0];
        assert!((lo - 0.003).abs() < 1e-8 && (hi - 0.003).abs() < 1e-8, "{lo} {hi}");
    }

    #[test]
    fn uncoverable_row_and_bad_input_are_errors() {
        let p = CoveringProblem {
            kinds: vec![VarKind::Intrinsic],
            fixed: vec![Some(0.0)],
            rows: vec![row(&[(0, 1.0)], 0.1, true)],
        };
        assert!(p.solve().is_err());
        let p = CoveringProblem {
            kinds: vec![VarKind::Intrinsic, VarKind::Context],
            fixed: vec![],
            rows: vec![row(&[(1, 1.0)], 0.1, true)],
        };
        assert!(p.solve().is_err());
        let p = CoveringProblem {
            kinds: vec![VarKind::Intrinsic],
            fixed: vec![],
            rows: vec![row(&[(3, 1.0)], f64::NAN, true)],
        };
        assert!(p.validate().is_err());
    }

    /// Without requirements the shortcut gives `solve`'s solution to the bit, fixed values,
    /// presolve counts and all, and declines what it does not cover.
    #[test]
    fn unrequired_problem_shortcut_is_the_solve() {
        let mut p = small();
        p.rows.iter_mut().for_each(|r| r.requirement = 0.0);
        assert_eq!(p.solve_unrequired(&[]), Some(p.solve().unwrap()));
        p.rows[2].reference = true; // a reference row with a free context term: invalid
        assert_eq!(p.solve_unrequired(&[]), None);
        p.rows[2].reference = false;
        // Fixed variables: the given values stand in for the problem's own.
        p.fixed = vec![Some(0.0), None, Some(0.0)];
        let given = [Some(0.004), None, Some(0.25)];
        let mut q = p.clone();
        q.fixed = given.to_vec();
        let sol = p.solve_unrequired(&given).unwrap();
        assert_eq!(sol, q.solve().unwrap());
        assert_eq!(sol.values, vec![0.004, 0.0, 0.25]);
        assert_eq!(sol.stage1_presolve.rows_in, 2);
        assert_eq!(sol.stage2_presolve.dropped_zero, 5);
        // Another fixed pattern, a bad value or a requirement: solve instead.
        assert_eq!(p.solve_unrequired(&[Some(0.004), Some(0.0), Some(0.25)]), None);
        assert_eq!(p.solve_unrequired(&[Some(0.004), None, None]), None);
        assert_eq!(p.solve_unrequired(&[Some(f64::NAN), None, Some(0.25)]), None);
        p.rows[3].requirement = 1e-300;
        assert_eq!(p.solve_unrequired(&given), None);
    }

    #[test]
    fn empty_problem_is_all_zero() {
        let p = CoveringProblem { kinds: vec![VarKind::Context; 3], ..Default::default() };
        let sol = p.solve().unwrap();
        assert_eq!(sol.values, vec![0.0; 3]);
        assert!(sol.binding.is_empty());
    }
}
