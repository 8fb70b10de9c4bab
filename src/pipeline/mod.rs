//! The pipeline of one pass: counts and prepared rows in, point result out.
//!
//! One pure computation serves the point pass and every replicate (bootstrap and parametric
//! null): rows -> crosstalk-free fit on reference rows -> predictions -> row requirements ->
//! two-stage covering LPs per qubit, then per coupler (method.md sections 2-4). A replicate
//! is the same computation on other counts, started from the point fit, with the row
//! programs, the thresholds and the LP structure of the point pass reused. `audit` and
//! `confidence` sit above this module and never call each other for it.

use std::borrow::Cow;
use std::collections::HashMap;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::OnceLock;

use rayon::prelude::*;

use crate::circuit::CircuitSet;
use crate::counts::Counts;
use crate::error::{Error, Result, Warning};
use crate::layout::{Layout, QubitIx};
use crate::model::{
    self, Family, FitOptions, FitResult, Free, KindParams, ModelSpec, Params, PreparedRow, Readout,
    StartCheck,
};
use crate::rows::{self, Rows};
use crate::slack::lp::TwoStageSolution;
use crate::slack::requirement::RowNeeds;

pub mod problems;

use problems::{Budget, Problem};

/// Progress of long work, reported by the library and drawn by the caller.
pub trait Progress: Sync {
    /// A new stage with `total` units of work.
    fn stage(&self, _name: &str, _total: u64) {}
    /// `n` units of the current stage done.
    fn advance(&self, _n: u64) {}
    /// True when the user asked to stop; the library then returns [`Error::Interrupted`].
    fn cancelled(&self) -> bool {
        false
    }
}

/// Progress that shows nothing.
pub struct Silent;
impl Progress for Silent {}

/// A flag-based cancellation wrapper (for Ctrl-C handlers).
pub struct Cancel<'a, P: Progress> {
    /// The inner progress display.
    pub inner: &'a P,
    /// Set to true to stop.
    pub flag: &'a AtomicBool,
}

impl<P: Progress> Progress for Cancel<'_, P> {
    fn stage(&self, name: &str, total: u64) {
        self.inner.stage(name, total)
    }
    fn advance(&self, n: u64) {
        self.inner.advance(n)
    }
    fn cancelled(&self) -> bool {
        self.flag.load(Ordering::Relaxed)
    }
}

/// The fitted crosstalk-free model and its diagnostics.
pub(crate) struct Fitted {
    pub params: Params,
    /// Each qubit's and coupler's fit, its fitted values taken into `params`: the fits'
    /// own parameter tables are left empty (each held every kind of the chip).
    pub qubit_fits: Vec<Option<FitResult>>,
    pub coupler_fits: Vec<Option<FitResult>>,
    /// Qubits and couplers fitted on all their rows for want of reference rows.
    pub fitted_on_all_rows_qubits: Vec<bool>,
    pub fitted_on_all_rows_couplers: Vec<bool>,
}

/// Everything the assessment needs about the data and the model.
pub(crate) struct Analysis<'a> {
    pub layout: &'a Layout,
    pub circuits: &'a CircuitSet,
    pub counts: &'a Counts,
    pub rows: Rows,
    /// Compiled model rows, aligned with `rows.rows` (None without counts); replicates
    /// reuse the programs with other counts.
    pub prepared: Vec<Option<PreparedRow>>,
    pub spec: ModelSpec,
    pub alpha: f64,
    /// Row thresholds at `alpha` over the `used` rows, per outcome count.
    pub thresholds: crate::stats::RowThresholds,
    /// Analysis rows that have counts (global indices into `rows.rows`).
    pub used: Vec<usize>,
    pub predictions: Vec<Vec<f64>>,
    pub requirement: Vec<f64>,
    /// Deviation requirements of the unlimited-shot estimate, aligned with `requirement`
    /// ([`crate::slack::requirement::conditional_need`]).
    pub deviation: Vec<f64>,
    /// 1q rows per qubit and 2q rows per coupler (global indices).
    pub qubit_rows: Vec<Vec<usize>>,
    pub coupler_rows: Vec<Vec<usize>>,
    pub fitted: Fitted,
    pub warnings: Vec<Warning>,
    /// The covering problems of `qubit_rows` and `coupler_rows` with zero requirements:
    /// a pass over these rows only sets requirements and fixed budgets.
    pub templates: Templates,
    /// Per qubit, the identifiability check of its refit from the point estimate, made by
    /// the first replicate that keeps every row's program and shots and shared by the others
    /// (it does not depend on how the shots fall; see [`model::StartCheck`]). `None` inside
    /// when the check failed: each such refit then makes it afresh and reports the failure.
    pub refit_checks: Vec<OnceLock<Option<StartCheck>>>,
}

impl Analysis<'_> {
    /// Frees the analysis on every thread: its rows, programs and predictions are millions
    /// of small allocations, which one thread took a tenth of a second to free on a
    /// 144-qubit chip, at the end of every audit.
    pub fn free(self) {
        use rayon::prelude::*;
        let Analysis { rows, prepared, predictions, .. } = self;
        rayon::join(
            || rows.rows.into_par_iter().for_each(drop),
            || {
                rayon::join(
                    || prepared.into_par_iter().for_each(drop),
                    || predictions.into_par_iter().for_each(drop),
                )
            },
        );
    }
}

/// Covering problems built once, aligned with [`Analysis::qubit_rows`] and
/// [`Analysis::coupler_rows`], with zero requirements. A coupler's template marks fixed
/// (at 0) the budgets its qubits' problems set, as every pass over these rows fixes them,
/// so that a pass in which none of its rows requires anything can share it
/// ([`Problem::solve_unrequired`]).
pub(crate) struct Templates {
    pub qubit: Vec<Problem>,
    pub coupler: Vec<Problem>,
}

/// The LP solutions of one audit. A replicate's problem in which no row requires anything
/// is its template, shared: its fixed budgets' values are those of the solution.
pub(crate) struct Solved<'t> {
    pub qubit: Vec<(Cow<'t, Problem>, TwoStageSolution)>,
    pub coupler: Vec<(Cow<'t, Problem>, TwoStageSolution)>,
}

/// Directed scores of a solved pass, in the audit's pair order: supplied by the audit, so
/// that the pipeline knows nothing of how pairs are chosen and weighted. The rows are the
/// pass's own; the optional slice gives, per row, the analysis row whose program it holds
/// (a bootstrap replicate that resamples circuits), so that a scorer can look at the circuit
/// a row really came from.
pub(crate) type Scorer =
    dyn Fn(&Analysis, PassRows<'_>, Option<&[usize]>, &Solved) -> Vec<f64> + Sync;

/// The rows of one pass: the analysis' own, or a replicate's, whose row i holds the program
/// (blocks, kinds, contexts, circuit) of analysis row `source[i]`. Borrowed, never copied:
/// a replicate owns only its counts.
#[derive(Clone, Copy)]
pub(crate) struct PassRows<'a> {
    rows: &'a [rows::Row],
    source: Option<&'a [usize]>,
}

impl<'a> PassRows<'a> {
    /// The analysis' own rows.
    pub fn own(rows: &'a [rows::Row]) -> PassRows<'a> {
        PassRows { rows, source: None }
    }

    /// Row i is `rows[source[i]]` (every row its own without `source`).
    pub fn resampled(rows: &'a [rows::Row], source: Option<&'a [usize]>) -> PassRows<'a> {
        PassRows { rows, source }
    }

    /// Number of rows.
    pub fn len(&self) -> usize {
        self.source.map_or(self.rows.len(), <[usize]>::len)
    }

    /// True when every row is its own (no row takes another's program).
    pub fn is_own(&self) -> bool {
        self.source.is_none()
    }
}

impl std::ops::Index<usize> for PassRows<'_> {
    type Output = rows::Row;

    fn index(&self, i: usize) -> &rows::Row {
        &self.rows[self.source.map_or(i, |s| s[i])]
    }
}

pub(crate) fn check_cancel(p: &dyn Progress) -> Result<()> {
    if p.cancelled() {
        Err(Error::Interrupted)
    } else {
        Ok(())
    }
}

/// The point pass up to the requirements: rows, fit, predictions and requirements under
/// error family `family` at family-wise level `alpha`.
pub(crate) fn analyse<'a>(
    layout: &'a Layout,
    circuits: &'a CircuitSet,
    counts: &'a Counts,
    family: Family,
    alpha: f64,
    progress: &dyn Progress,
) -> Result<Analysis<'a>> {
    // Each row's program is compiled while its circuit is at hand and never stored: the
    // rows keep only what the fit, the LPs and the assessment read.
    let n_qubits = layout.n_qubits();
    progress
        .stage("preparing rows", circuits.circuits.iter().map(|c| c.measured.len() as u64).sum());
    let program = |r: &rows::Row,
                   steps: &[rows::Step],
                   kinds: &[rows::OpKind]|
     -> Result<Option<PreparedRow>> {
        progress.advance(r.block.len() as u64);
        match &r.marginal {
            Some(m) if r.shots > 0 => {
                let arity = |k: usize| kinds.get(k).map(|o| o.gate.arity());
                let row = model_row(&r.block, steps, m.clone());
                PreparedRow::with_kinds(&row, family, n_qubits, kinds.len(), &arity).map(Some)
            }
            _ => Ok(None),
        }
    };
    let relabel = |p: &mut Option<PreparedRow>, map: &[rows::KindIx]| {
        if let Some(p) = p {
            p.relabel_kinds(&|k| map[k] as usize);
        }
    };
    let (rows, prepared) = rows::build_with(layout, circuits, Some(counts), &program, &relabel)?;
    let mut warnings = Vec::new();
    let used: Vec<usize> = (0..rows.rows.len())
        .filter(|&i| rows.rows[i].marginal.is_some() && rows.rows[i].shots > 0)
        .collect();
    if used.is_empty() {
        return Err(Error::Analysis(
            "no circuit has counts: nothing to analyse (check the circuit ids in the counts file)"
                .into(),
        ));
    }
    let spec = ModelSpec {
        family,
        kind_arity: rows.kinds.kinds().iter().map(|k| k.gate.arity()).collect(),
        n_qubits,
    };

    let mut qubit_rows = vec![Vec::new(); layout.n_qubits()];
    let mut coupler_rows = vec![Vec::new(); layout.couplers.len()];
    for &i in &used {
        let b = &rows.rows[i].block;
        match b.len() {
            1 => qubit_rows[b[0]].push(i),
            _ => {
                let c = layout.coupler(b[0], b[1]).ok_or_else(|| {
                    Error::Analysis(format!(
                        "block {}-{} is not a coupler",
                        layout.id(b[0]),
                        layout.id(b[1])
                    ))
                })?;
                coupler_rows[c].push(i)
            }
        }
    }

    let zero = vec![0.0; rows.rows.len()];
    let template = |list: &Vec<usize>, fixed: &(dyn Fn(Budget) -> Option<f64> + Sync)| {
        Problem::build(PassRows::own(&rows.rows), list.clone(), &zero, fixed)
    };
    let qubit: Vec<Problem> = qubit_rows.par_iter().map(|l| template(l, &|_| None)).collect();
    let set_by_qubits = |b: Budget| -> Option<f64> {
        let q = budget_owner(&rows.kinds, b)?;
        qubit[q].index.contains_key(&b).then_some(0.0)
    };
    let coupler = coupler_rows.par_iter().map(|l| template(l, &set_by_qubits)).collect();
    let templates = Templates { qubit, coupler };

    let fitted = fit_model(
        layout,
        PassRows::own(&rows.rows),
        &|i| Ok(prepared[i].clone()),
        &qubit_rows,
        &coupler_rows,
        &spec,
        progress,
        &mut warnings,
        None,
        None,
        Spread::Parallel,
    )?;
    check_cancel(progress)?;

    let predictions = model::predict::predict_rows(&prepared, &fitted.params);
    let marginals: Vec<Option<&Vec<u64>>> =
        rows.rows.iter().map(|r| r.marginal.as_ref().filter(|_| r.shots > 0)).collect();
    let thresholds = crate::stats::RowThresholds::new(alpha, used.len());
    let needs = requirements(&marginals, &|i| &predictions[i], &thresholds, Spread::Parallel);
    let requirement = needs.iter().map(|n| n.score).collect();
    let deviation = (0..rows.rows.len())
        .into_par_iter()
        .map(|i| match marginals[i] {
            Some(m) => crate::slack::requirement::conditional_need(
                &predictions[i],
                m,
                thresholds.of_outcomes(m.len()),
                needs[i].score,
            ),
            None => 0.0,
        })
        .collect();
    Ok(Analysis {
        layout,
        circuits,
        counts,
        rows,
        prepared,
        spec,
        alpha,
        thresholds,
        used,
        predictions,
        requirement,
        deviation,
        qubit_rows,
        coupler_rows,
        fitted,
        warnings,
        templates,
        refit_checks: (0..n_qubits).map(|_| OnceLock::new()).collect(),
    })
}

/// The model's program for one analysis row: its block, its operations in time order and
/// its marginal counts.
fn model_row(block: &[QubitIx], row_steps: &[rows::Step], marginal: Vec<u64>) -> model::Row {
    use model::{Action, Step};
    let mut steps: Vec<Step> = Vec::new();
    let mut current: Option<(u32, [Option<Action>; 2])> = None;
    for s in row_steps {
        let action = Action { gate: s.gate, angle: s.angle, kind: s.kind.map(|k| k as usize) };
        if s.gate.arity() == 2 {
            if let Some((_, local)) = current.take() {
                steps.push(Step::Local(local));
            }
            steps.push(Step::Joint { action, reversed: s.operands[0] == 1 });
            continue;
        }
        let slot = s.operands[0] as usize;
        match &mut current {
            Some((layer, local)) if *layer == s.layer && local[slot].is_none() => {
                local[slot] = Some(action)
            }
            _ => {
                if let Some((_, local)) = current.take() {
                    steps.push(Step::Local(local));
                }
                let mut local = [None, None];
                local[slot] = Some(action);
                current = Some((s.layer, local));
            }
        }
    }
    if let Some((_, local)) = current {
        steps.push(Step::Local(local));
    }
    model::Row { steps, readout: block.to_vec(), counts: marginal }
}

/// Row i of a pass with the pass's counts (None for a row without counts).
type RowOf<'a> = dyn Fn(usize) -> Result<Option<PreparedRow>> + Sync + 'a;

/// How a pass spreads its work over the worker threads.
#[derive(Clone, Copy, PartialEq)]
enum Spread {
    /// Over every worker thread (the point pass).
    Parallel,
    /// In order on the calling thread: replicates already run in parallel with each other,
    /// and a replicate that waited for its own parallel parts would let its thread start
    /// another replicate meanwhile, holding the buffers of both.
    InOrder,
}

/// `f` of every item, in item order, spread as `spread` says.
fn map_each<T: Sync, R: Send>(
    items: &[T],
    spread: Spread,
    f: impl Fn(usize, &T) -> R + Sync + Send,
) -> Vec<R> {
    match spread {
        Spread::Parallel => items.par_iter().enumerate().map(|(i, x)| f(i, x)).collect(),
        Spread::InOrder => items.iter().enumerate().map(|(i, x)| f(i, x)).collect(),
    }
}

/// Fits every qubit, then every coupler, on the rows `row` gives. `refit_checks`, when
/// given, holds per qubit the identifiability check of its fit, shared by every pass with
/// the same programs and shots per row.
#[allow(clippy::too_many_arguments)]
fn fit_model(
    layout: &Layout,
    rows: PassRows<'_>,
    row: &RowOf,
    qubit_rows: &[Vec<usize>],
    coupler_rows: &[Vec<usize>],
    spec: &ModelSpec,
    progress: &dyn Progress,
    warnings: &mut Vec<Warning>,
    start: Option<&Params>,
    refit_checks: Option<&[OnceLock<Option<StartCheck>>]>,
    spread: Spread,
) -> Result<Fitted> {
    let options = FitOptions::default();
    // One default start for every qubit and coupler fit (each would otherwise build it for
    // every kind of the chip: quadratic in its size).
    let start = &*Params::given_or_initial(start, spec)?;
    let select = |list: &[usize]| -> Result<(Vec<PreparedRow>, bool)> {
        let mut reference = Vec::new();
        for &i in list.iter().filter(|&&i| rows[i].is_reference) {
            reference.extend(row(i)?);
        }
        if reference.is_empty() {
            let mut all = Vec::new();
            for &i in list {
                all.extend(row(i)?);
            }
            Ok((all, true))
        } else {
            Ok((reference, false))
        }
    };
    progress.stage("fitting qubits", qubit_rows.len() as u64);
    let qubit_fits = fit_each(
        qubit_rows,
        &select,
        &|q, sel| {
            let known = refit_checks.and_then(|c| {
                c[q].get_or_init(|| model::start_check(sel, start, Free::All, &options).ok())
                    .as_ref()
            });
            model::fit_qubit_checked(sel, spec, Some(start), &options, known)
        },
        progress,
        spread,
        true,
    )?;
    let mut params = start.clone();
    for (q, (fit, all)) in qubit_fits.iter().enumerate() {
        let Some(fit) = fit else { continue };
        if let Some(r) = fit.readout {
            params.readout[q] = r;
        }
        let who = format!("qubit {}", layout.id(q));
        let hint = "add circuits where this qubit runs while every neighbour idles";
        absorb(&mut params, fit, *all, &who, "its model", hint, warnings);
    }
    check_cancel(progress)?;
    progress.stage("fitting couplers", coupler_rows.len() as u64);
    let coupler_fits = fit_each(
        coupler_rows,
        &select,
        &|_, sel| model::fit_coupler(sel, spec, &params, Some(start), &options),
        progress,
        spread,
        false,
    )?;
    for (c, (fit, all)) in coupler_fits.iter().enumerate() {
        let Some(fit) = fit else { continue };
        let (a, b) = layout.couplers[c];
        let who = format!("coupler {}-{}", layout.id(a), layout.id(b));
        let hint = "add circuits where this coupler runs while its neighbours idle";
        absorb(&mut params, fit, *all, &who, "its two-qubit gate", hint, warnings);
    }
    let fitted_on_all_rows_qubits = qubit_fits.iter().map(|f| f.1).collect();
    let fitted_on_all_rows_couplers = coupler_fits.iter().map(|f| f.1).collect();
    let result = |x: (Option<Slim>, bool)| x.0.map(|s| s.fit);
    Ok(Fitted {
        params,
        qubit_fits: qubit_fits.into_iter().map(result).collect(),
        coupler_fits: coupler_fits.into_iter().map(result).collect(),
        fitted_on_all_rows_qubits,
        fitted_on_all_rows_couplers,
    })
}

/// Picks the rows to fit from a row list, and says whether they are all its rows for want of
/// reference rows.
type Select<'a> = dyn Fn(&[usize]) -> Result<(Vec<PreparedRow>, bool)> + Sync + 'a;

/// A fit with its fitted values taken out of its parameter table, and the table emptied:
/// it holds every kind of the chip, so keeping one per qubit and coupler fit grew with the
/// square of the chip.
struct Slim {
    fit: FitResult,
    /// The fitted kinds' channels, aligned with `fit.kinds`.
    values: Vec<KindParams>,
    /// The fitted readout of a qubit's own qubit.
    readout: Option<Readout>,
}

impl Slim {
    fn new(mut fit: FitResult, own_readout: Option<QubitIx>) -> Slim {
        let values = fit.kinds.iter().map(|kf| fit.params.kinds[kf.kind].clone()).collect();
        let readout = own_readout.and_then(|q| fit.params.readout.get(q).copied());
        fit.params.kinds = Vec::new();
        fit.params.readout = Vec::new();
        Slim { fit, values, readout }
    }
}

/// One fit per row list (a qubit's or a coupler's; `fit` is given the list's position,
/// which is the qubit whose readout the fit sets when `qubits`).
fn fit_each(
    lists: &[Vec<usize>],
    select: &Select,
    fit: &(dyn Fn(usize, &[PreparedRow]) -> Result<FitResult> + Sync),
    progress: &dyn Progress,
    spread: Spread,
    qubits: bool,
) -> Result<Vec<(Option<Slim>, bool)>> {
    map_each(lists, spread, |at, list| {
        let out = if list.is_empty() {
            Ok((None, false))
        } else {
            let slim = |f| Slim::new(f, qubits.then_some(at));
            select(list).and_then(|(sel, all)| fit(at, &sel).map(|f| (Some(slim(f)), all)))
        };
        progress.advance(1);
        out
    })
    .into_iter()
    .collect()
}

/// Takes a qubit's or a coupler's fitted kinds into the model and records its warnings,
/// loudly when it had to be fitted on all its rows (method.md section 3).
fn absorb(
    params: &mut Params,
    slim: &Slim,
    all_rows: bool,
    who: &str,
    what: &str,
    hint: &str,
    warnings: &mut Vec<Warning>,
) {
    let fit = &slim.fit;
    for (kf, v) in fit.kinds.iter().zip(&slim.values) {
        params.kinds[kf.kind] = v.clone();
    }
    if all_rows {
        warnings.push(Warning::new(
            "no-reference-rows",
            format!(
                "{who} has no reference rows: {what} was fitted on all its rows, so its context slack is only a lower bound"
            ),
            hint,
        ));
    }
    let name = who.split_once(' ').map_or(who, |x| x.1);
    warnings.extend(fit.warnings.iter().cloned().map(|w| prefix(w, name)));
}

fn prefix(w: Warning, who: &str) -> Warning {
    Warning { message: format!("{who}: {}", w.message), ..w }
}

/// Solves the qubit problems, then the coupler problems with the qubit budgets fixed.
pub(crate) fn solve_all<'t>(a: &'t Analysis, progress: &dyn Progress) -> Result<Solved<'t>> {
    let own = PassRows::own(&a.rows.rows);
    let templates = Some((&a.templates, Share::Never));
    solve_rows(a, own, &a.requirement, templates, progress, Spread::Parallel)
}

/// Whether a pass may share a template for a problem in which no row requires anything.
#[derive(Clone, Copy, PartialEq)]
enum Share {
    /// The point pass: every problem is its own, fixed values included (the assessment
    /// builds nulls and leave-one-out problems from them).
    Never,
    /// A replicate or the estimate: only solutions and row structure are read.
    Unrequired,
}

/// The qubit whose problem sets budget `b`: a readout's, or a one-qubit kind's (None for a
/// two-qubit kind's budgets, which a coupler's problem sets).
fn budget_owner(kinds: &rows::KindTable, b: Budget) -> Option<QubitIx> {
    match b {
        Budget::Readout(q) => Some(q),
        Budget::Intrinsic(k) | Budget::Context(k, _) | Budget::GateContext(k, _) => {
            let kind = kinds.get(k);
            (kind.gate.arity() == 1).then_some(kind.qubits[0])
        }
    }
}

/// [`solve_all`] for rows with the analysis' block structure but other programs or
/// requirements (a bootstrap replicate).
fn solve_rows<'t>(
    a: &Analysis,
    all: PassRows<'_>,
    requirement: &[f64],
    templates: Option<(&'t Templates, Share)>,
    progress: &dyn Progress,
    spread: Spread,
) -> Result<Solved<'t>> {
    progress.stage("solving qubit budgets", a.qubit_rows.len() as u64);
    let none = |_: Budget| None;
    let share = templates.map_or(Share::Never, |t| t.1);
    let qubit = solve_each(
        &a.qubit_rows,
        templates.map(|t| (&t.0.qubit[..], share)),
        all,
        requirement,
        &none,
        progress,
        spread,
    )?;
    let kinds = &a.rows.kinds;
    let fixed = |b: Budget| -> Option<f64> {
        let q = budget_owner(kinds, b)?;
        let (p, s) = &qubit[q];
        p.index.get(&b).map(|&v| s.values[v])
    };
    progress.stage("solving coupler budgets", a.coupler_rows.len() as u64);
    let coupler = solve_each(
        &a.coupler_rows,
        templates.map(|t| (&t.0.coupler[..], share)),
        all,
        requirement,
        &fixed,
        progress,
        spread,
    )?;
    Ok(Solved { qubit, coupler })
}

/// One covering problem per row list, solved in parallel: from its template when there is one
/// (a replicate changes only the requirements; one in which no row requires anything shares
/// the template when `Share` allows), else built afresh. `fixed` gives the budgets already
/// solved in an earlier stage.
fn solve_each<'t>(
    lists: &[Vec<usize>],
    templates: Option<(&'t [Problem], Share)>,
    all: PassRows<'_>,
    requirement: &[f64],
    fixed: &(dyn Fn(Budget) -> Option<f64> + Sync),
    progress: &dyn Progress,
    spread: Spread,
) -> Result<Vec<(Cow<'t, Problem>, TwoStageSolution)>> {
    map_each(lists, spread, |i, list| {
        let shared = match templates {
            Some((t, Share::Unrequired)) => {
                t[i].solve_unrequired(requirement, fixed).map(|s| (Cow::Borrowed(&t[i]), s))
            }
            _ => None,
        };
        let out = match shared {
            Some(done) => Ok(done),
            None => {
                let p = match templates {
                    Some((t, _)) => t[i].with_requirements(requirement, fixed),
                    None => Problem::build(all, list.clone(), requirement, fixed),
                };
                p.lp.solve().map(|s| (Cow::Owned(p), s))
            }
        };
        progress.advance(1);
        out
    })
    .into_iter()
    .collect()
}

/// Row slack of every analysis row under the solved budgets (0 for rows without counts).
pub(crate) fn row_slacks(a: &Analysis, s: &Solved) -> Vec<f64> {
    let mut out = vec![0.0; a.rows.rows.len()];
    for (p, sol) in s.qubit.iter().chain(&s.coupler) {
        for (j, &i) in p.rows.iter().enumerate() {
            out[i] = crate::slack::lp::row_slack(&p.lp.rows[j], &sol.values);
        }
    }
    out
}

/// Frequencies of each kind over all rows (for weighting scores).
pub(crate) fn kind_occurrences(a: &Analysis) -> HashMap<rows::KindIx, (u64, u64)> {
    let mut m: HashMap<rows::KindIx, (u64, u64)> = HashMap::new();
    for &i in &a.used {
        let r = &a.rows.rows[i];
        for &(k, c) in &r.kind_counts {
            let e = m.entry(k).or_default();
            e.0 += c as u64;
            if r.is_reference {
                e.1 += c as u64;
            }
        }
    }
    m
}

/// Progress for work nested inside a replicate: shows nothing, but still honours Ctrl-C.
struct Nested<'a>(&'a dyn Progress);
impl Progress for Nested<'_> {
    fn cancelled(&self) -> bool {
        self.0.cancelled()
    }
}

/// One resampled data set, aligned with the analysis rows.
pub(crate) struct Resampled {
    /// Row i takes the program of analysis row `source[i]` (same block, another circuit of
    /// the same group); `None` keeps every row's own program.
    pub source: Option<Vec<usize>>,
    /// New marginal counts of each analysis row (None where the row has no counts).
    pub counts: Vec<Option<Vec<u64>>>,
}

/// Directed scores (in `scorer`'s pair order) and intrinsic slack per kind (indexed by
/// kind) of a resampled data set: refit from the point estimate when `refit` (a few
/// Newton steps; PreparedRow programs are reused), recompute requirements, solve both
/// stages. Runs on the calling thread: replicates run in parallel with each other. The
/// data set is dropped once the requirements are known.
pub(crate) fn rescore(
    a: &Analysis,
    data: Resampled,
    refit: bool,
    with_estimate: bool,
    scorer: &Scorer,
    progress: &dyn Progress,
) -> Result<Rescored> {
    let quiet = Nested(progress);
    let src = |i: usize| data.source.as_ref().map_or(i, |s| s[i]);
    let all = PassRows::resampled(&a.rows.rows, data.source.as_deref());
    // Row i with the replicate's counts, made only for the rows a fit reads.
    let row = |i: usize| -> Result<Option<PreparedRow>> {
        match (&data.counts[i], &a.prepared[src(i)]) {
            (Some(c), Some(p)) => p.with_counts(c.clone()).map(Some),
            _ => Ok(None),
        }
    };
    // A predicted distribution reads a row's program, not its counts: every analysis row
    // is predicted once under the pass's model, and a row that takes another's program
    // takes its prediction. Without a refit the model is the point estimate's.
    let mut computed: Vec<Vec<f64>> = Vec::new();
    let predictions: &[Vec<f64>] = if refit {
        // Shot resampling keeps every row's program and shots: the qubits' identifiability
        // checks are those of the first such replicate.
        let checks = data.source.is_none().then_some(&a.refit_checks[..]);
        let mut ignored = Vec::new();
        let params = fit_model(
            a.layout,
            all,
            &row,
            &a.qubit_rows,
            &a.coupler_rows,
            &a.spec,
            &quiet,
            &mut ignored,
            Some(&a.fitted.params),
            checks,
            Spread::InOrder,
        )?
        .params;
        check_cancel(progress)?;
        computed = model::predict::predict_each(&a.prepared, &params, false);
        &computed
    } else {
        &a.predictions
    };
    let marginals: Vec<Option<&Vec<u64>>> =
        data.counts.iter().map(|m| m.as_ref().filter(|m| m.iter().sum::<u64>() > 0)).collect();
    let needs = requirements(&marginals, &|i| &predictions[src(i)], &a.thresholds, Spread::InOrder);
    // The counts and predictions are not read again: the covering problems that follow
    // need the memory more.
    drop(marginals);
    drop(computed);
    let Resampled { source, counts } = data;
    drop(counts);
    let source = source.as_deref();
    let all = PassRows::resampled(&a.rows.rows, source);
    let need = |f: fn(&RowNeeds) -> f64| -> Vec<f64> { needs.iter().map(f).collect() };
    let in_order = Spread::InOrder;
    let (directed, intrinsic) =
        scores_of(a, all, source, &need(|n| n.score), scorer, &quiet, in_order)?;
    check_cancel(progress)?;
    let (estimate, lower) = if with_estimate {
        let estimate =
            scores_of(a, all, source, &need(|n| n.noncentral), scorer, &quiet, in_order)?;
        check_cancel(progress)?;
        let lower = scores_of(a, all, source, &need(|n| n.shrunk), scorer, &quiet, in_order)?;
        (Some(estimate), Some(lower))
    } else {
        (None, None)
    };
    Ok(Rescored { directed, intrinsic, estimate, lower })
}

/// Directed scores (in `scorer`'s pair order) and intrinsic slack per kind of both stages
/// solved on `all` under `requirement`.
fn scores_of(
    a: &Analysis,
    all: PassRows<'_>,
    source: Option<&[usize]>,
    requirement: &[f64],
    scorer: &Scorer,
    progress: &dyn Progress,
    spread: Spread,
) -> Result<(Vec<f64>, Vec<f64>)> {
    // The point pass's problems hold exactly when the rows are the analysis' own.
    let templates = all.is_own().then_some((&a.templates, Share::Unrequired));
    let solved = solve_rows(a, all, requirement, templates, progress, spread)?;
    let directed = scorer(a, all, source, &solved);
    let intrinsic =
        (0..a.rows.kinds.len() as u32).map(|k| intrinsic_slack(a, &solved, k)).collect();
    Ok((directed, intrinsic))
}

/// The unlimited-shot estimate of the point pass: directed scores and intrinsic slack
/// under the deviation requirements.
pub(crate) fn estimate(
    a: &Analysis,
    scorer: &Scorer,
    progress: &dyn Progress,
) -> Result<(Vec<f64>, Vec<f64>)> {
    let own = PassRows::own(&a.rows.rows);
    scores_of(a, own, None, &a.deviation, scorer, &Nested(progress), Spread::Parallel)
}

/// Scores of one rescoring: directed scores in `scorer`'s pair order and intrinsic slack
/// per kind, and the same for the interval's upper end (under the `noncentral` needs of
/// [`RowNeeds`]; the point estimate's conditional needs run wider in replicates, see
/// DEVELOPERS.md, "Intervals") and its lower end (under the `shrunk` needs) when asked for.
pub(crate) struct Rescored {
    pub directed: Vec<f64>,
    pub intrinsic: Vec<f64>,
    pub estimate: Option<(Vec<f64>, Vec<f64>)>,
    pub lower: Option<(Vec<f64>, Vec<f64>)>,
}

/// Row requirements and deviation requirements ([`RowNeeds`], method.md section 4) of rows
/// with these counts and predictions `prediction(i)`, under the Bonferroni thresholds
/// `thresholds`; zero for rows without counts.
fn requirements<'p>(
    marginals: &[Option<&Vec<u64>>],
    prediction: &(dyn Fn(usize) -> &'p Vec<f64> + Sync),
    thresholds: &crate::stats::RowThresholds,
    spread: Spread,
) -> Vec<RowNeeds> {
    map_each(marginals, spread, |i, m| match m {
        Some(m) => {
            crate::slack::requirement::row_needs(prediction(i), m, thresholds.of_outcomes(m.len()))
        }
        None => RowNeeds::default(),
    })
}

/// Intrinsic slack omega_k of kind `k` in a solution (0 when the kind has no problem).
pub(crate) fn intrinsic_slack(a: &Analysis, s: &Solved, k: rows::KindIx) -> f64 {
    let kind = a.rows.kinds.get(k);
    let b = Budget::Intrinsic(k);
    if kind.gate.arity() == 1 {
        let (p, sol) = &s.qubit[kind.qubits[0]];
        p.value(sol, b)
    } else {
        a.layout
            .coupler(kind.qubits[0], kind.qubits[1])
            .map(|c| {
                let (p, sol) = &s.coupler[c];
                p.value(sol, b)
            })
            .unwrap_or(0.0)
    }
}
