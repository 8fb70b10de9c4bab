//! The covering problems of one audit: budget variables and one LP per qubit and coupler.
//!
//! A qubit's problem holds its one-qubit rows and its readout, intrinsic and context
//! budgets; a coupler's problem holds its two-qubit rows, with every budget that a qubit
//! problem already set held fixed (method.md section 4, "The stages decompose").

use std::collections::HashMap;

use super::PassRows;
use crate::layout::QubitIx;
use crate::rows::{KindIx, Row};
use crate::slack::lp::{CoveringProblem, Row as CoverRow, TwoStageSolution, VarKind};

/// A budget variable, in TVD.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum Budget {
    /// Readout slack rho_q, once per row that measures q.
    Readout(QubitIx),
    /// Intrinsic slack omega_k, per occurrence of kind k.
    Intrinsic(KindIx),
    /// Context slack kappa_(k, r), per occurrence of k while r is active.
    Context(KindIx, QubitIx),
    /// Context slack per occurrence of k while coupler `d` (an index into the layout's
    /// couplers) runs its two-qubit gate in the same layer: the aggressor is that gate, not
    /// one of its qubits. Only the gate view of a victim's rows uses it (`audit::gates`).
    GateContext(KindIx, usize),
}

impl Budget {
    fn var_kind(self) -> VarKind {
        match self {
            Budget::Context(..) | Budget::GateContext(..) => VarKind::Context,
            _ => VarKind::Intrinsic,
        }
    }
}

/// The coefficient terms of a row given its global index.
pub type RowTerms<'a> = dyn Fn(usize, &Row) -> Vec<(Budget, f64)> + 'a;

/// One covering problem with its variables named.
#[derive(Clone, Debug)]
pub struct Problem {
    /// The budget behind each LP variable.
    pub vars: Vec<Budget>,
    /// LP variable of each budget.
    pub index: HashMap<Budget, usize>,
    /// The LP; `lp.rows[i]` is analysis row `rows[i]`.
    pub lp: CoveringProblem,
    /// Global indices of the analysis rows in this problem.
    pub rows: Vec<usize>,
}

/// The coefficient terms of one analysis row, as budgets.
pub fn row_budgets(row: &Row) -> Vec<(Budget, f64)> {
    let mut t: Vec<(Budget, f64)> = row.block.iter().map(|&q| (Budget::Readout(q), 1.0)).collect();
    t.extend(row.kind_counts.iter().map(|&(k, c)| (Budget::Intrinsic(k), c as f64)));
    t.extend(row.context_counts.iter().map(|&((k, r), c)| (Budget::Context(k, r), c as f64)));
    t
}

/// Marks as reference rows the rows whose every context term is fixed by an earlier stage.
///
/// In a coupler's problem a two-qubit row can have context only on its one-qubit operations
/// (a spectator driven between the gates, idle during them), whose budgets the qubit stage
/// has set: nothing free in stage 2 could carry what those fixed budgets leave, while the
/// coupler's own operations ran with no aggressor. For the coupler's free variables the row is
/// a reference row, and stage 1 charges the rest to its intrinsic budgets, as the permutation
/// null already does for rows left without a free context term. Rows of problems without
/// fixed budgets are unchanged.
fn settled_contexts_as_reference(lp: &mut CoveringProblem) {
    if lp.fixed.is_empty() {
        return;
    }
    for row in lp.rows.iter_mut().filter(|r| !r.reference) {
        let free_context = row
            .terms
            .iter()
            .any(|&(v, c)| c > 0.0 && lp.kinds[v] == VarKind::Context && lp.fixed[v].is_none());
        if !free_context {
            row.reference = true;
        }
    }
}

impl Problem {
    /// Builds a problem over `rows` (global indices into `all`), with requirements
    /// `requirement[global index]`; `fixed` gives the value of budgets set elsewhere.
    pub(crate) fn build(
        all: PassRows<'_>,
        rows: Vec<usize>,
        requirement: &[f64],
        fixed: &dyn Fn(Budget) -> Option<f64>,
    ) -> Problem {
        Problem::build_with(all, rows, requirement, fixed, &|_, row| row_budgets(row))
    }

    /// [`Problem::build`] with the terms of each row given by `terms(global index, row)`
    /// instead of [`row_budgets`] (the gate view of a victim's rows).
    pub(crate) fn build_with(
        all: PassRows<'_>,
        rows: Vec<usize>,
        requirement: &[f64],
        fixed: &dyn Fn(Budget) -> Option<f64>,
        terms: &RowTerms,
    ) -> Problem {
        let mut vars = Vec::new();
        let mut index = HashMap::new();
        let mut lp_rows = Vec::with_capacity(rows.len());
        for &i in &rows {
            let terms = terms(i, &all[i])
                .into_iter()
                .map(|(b, c)| {
                    let v = *index.entry(b).or_insert_with(|| {
                        vars.push(b);
                        vars.len() - 1
                    });
                    (v, c)
                })
                .collect();
            lp_rows.push(CoverRow {
                terms,
                requirement: requirement[i],
                reference: all[i].is_reference,
            });
        }
        let kinds = vars.iter().map(|b| b.var_kind()).collect();
        let fixed_values: Vec<Option<f64>> = vars.iter().map(|&b| fixed(b)).collect();
        let fixed_values =
            if fixed_values.iter().any(Option::is_some) { fixed_values } else { Vec::new() };
        let mut lp = CoveringProblem { kinds, fixed: fixed_values, rows: lp_rows };
        settled_contexts_as_reference(&mut lp);
        Problem { vars, index, lp, rows }
    }

    /// The same problem with other requirements (`requirement[global index]`) and fixed
    /// budgets from `fixed`: what [`Problem::build`] gives on the same rows, without
    /// building the variables and terms again (a replicate changes only these).
    pub fn with_requirements(
        &self,
        requirement: &[f64],
        fixed: &dyn Fn(Budget) -> Option<f64>,
    ) -> Problem {
        self.renewed(&|j| requirement[self.rows[j]], fixed)
    }

    /// The same problem with row j's requirement `requirement(j)` (j a position into
    /// `rows`) and fixed budgets from `fixed`: what [`Problem::build_with`] gives on the same
    /// rows and terms when `fixed` fixes the budgets this problem was built with fixed (or
    /// none were), without building the variables and terms again.
    pub fn renewed(
        &self,
        requirement: &dyn Fn(usize) -> f64,
        fixed: &dyn Fn(Budget) -> Option<f64>,
    ) -> Problem {
        let mut p = self.clone();
        for (j, row) in p.lp.rows.iter_mut().enumerate() {
            row.requirement = requirement(j);
        }
        let fixed_values: Vec<Option<f64>> = p.vars.iter().map(|&b| fixed(b)).collect();
        p.lp.fixed =
            if fixed_values.iter().any(Option::is_some) { fixed_values } else { Vec::new() };
        settled_contexts_as_reference(&mut p.lp);
        p
    }

    /// True when `fixed` fixes exactly the budgets this problem holds fixed.
    pub fn fixes_as(&self, fixed: &dyn Fn(Budget) -> Option<f64>) -> bool {
        self.vars
            .iter()
            .enumerate()
            .all(|(v, &b)| self.lp.fixed.get(v).copied().flatten().is_some() == fixed(b).is_some())
    }

    /// The solution of [`Problem::with_requirements`]`(requirement, fixed)` without building
    /// that problem, when none of its rows requires anything: this problem, built with zero
    /// requirements and budgets fixed where `fixed` fixes them (as the coupler templates
    /// are), then stands for it, and the fixed values are in the solution. None otherwise
    /// ([`CoveringProblem::solve_unrequired`]).
    pub fn solve_unrequired(
        &self,
        requirement: &[f64],
        fixed: &dyn Fn(Budget) -> Option<f64>,
    ) -> Option<TwoStageSolution> {
        if self.rows.iter().any(|&i| requirement[i] != 0.0) {
            return None;
        }
        let values: Vec<Option<f64>> = self.vars.iter().map(|&b| fixed(b)).collect();
        self.lp.solve_unrequired(&values)
    }

    /// The same problem without the rows of one circuit (for leave-one-out).
    pub fn without_circuit(&self, all: &[Row], circuit: u32) -> Problem {
        let keep: Vec<usize> =
            (0..self.rows.len()).filter(|&j| all[self.rows[j]].circuit != circuit).collect();
        self.restricted(&keep)
    }

    /// The same problem on a subset of its rows (positions into `rows`).
    pub fn restricted(&self, keep: &[usize]) -> Problem {
        let mut p = self.clone();
        p.rows = keep.iter().map(|&j| self.rows[j]).collect();
        p.lp.rows = keep.iter().map(|&j| self.lp.rows[j].clone()).collect();
        p
    }

    /// Value of a budget in a solution of this problem (0 when it is not a variable).
    pub fn value(&self, sol: &TwoStageSolution, b: Budget) -> f64 {
        self.index.get(&b).map_or(0.0, |&v| sol.values[v])
    }
}
