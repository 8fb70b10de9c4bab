//! Maximum-likelihood fit of the product model to reference rows (method.md section 3).
//!
//! Fisher scoring with Levenberg-Marquardt damping: the step solves (F + mu diag F) d = g
//! with F = sum_rows N sum_x dp_x dp_x^T / p_x, the expected information (R. A. Fisher's
//! scoring method; K. Levenberg 1944, D. Marquardt 1963), and is accepted only if the
//! log-likelihood rises. Steps are taken in natural coordinates restricted to the directions
//! the data identify, then mapped to raw coordinates, so every channel stays CPTP.
//! Identifiability is judged from the eigen-decomposition of F in natural coordinates at
//! the isotropic, incoherent projection of the start point (see [`FitOptions`]).
//! Rates on their lower bound with an outward gradient form an active set that the step
//! leaves fixed (projected Newton), trial points are assembled from natural values with
//! rates below zero put on the bound, and convergence is the KKT test.

use nalgebra::{DMatrix, DVector, SymmetricEigen};

use super::channel::{Family, KindIx, KindParams, ModelSpec, Params, Readout};
use super::predict::{predict_for_free, Channels, ParamRef, PreparedRow};
use crate::layout::QubitIx;
use crate::{Error, Result, Warning};

/// Settings of the optimiser.
#[derive(Clone, Debug, PartialEq)]
pub struct FitOptions {
    /// Largest number of accepted or rejected steps (a warm-started refit needs a few).
    pub max_iterations: usize,
    /// Converged when half the squared Newton decrement (the expected log-likelihood gain of
    /// a full step) falls below this.
    pub tolerance: f64,
    /// A direction of the natural-coordinate Fisher information whose eigenvalue is below
    /// this fraction of the largest is unidentified: held at its start value, flagged, and
    /// not counted as a fitted parameter. Exact symmetries (gauge freedoms, kinds that only
    /// ever occur together, coherent angles under twirling) sit near 1e-16; genuinely
    /// informed directions measured in the tests sit above 1e-6.
    pub identifiability_rel_tol: f64,
}

impl Default for FitOptions {
    fn default() -> Self {
        FitOptions { max_iterations: 200, tolerance: 1e-9, identifiability_rel_tol: 1e-10 }
    }
}

/// Which coordinates of the rows' kinds and readouts the fit moves.
#[derive(Copy, Clone, Debug, PartialEq, Eq)]
pub enum Free {
    /// Every kind and readout the rows use (a qubit's problem).
    All,
    /// Only two-qubit kinds; one-qubit channels and readout stay fixed (a coupler's problem).
    TwoQubitKinds,
}

/// A fitted kind in natural coordinates.
#[derive(Clone, Debug, PartialEq)]
pub struct KindFit {
    /// The kind.
    pub kind: KindIx,
    /// Coordinate names ("p", "p_X", "h_Z", "p_XZ", ...).
    pub names: Vec<String>,
    /// Fitted values.
    pub values: Vec<f64>,
    /// Standard errors from the inverse Fisher information on the identified directions;
    /// `None` for unidentified coordinates.
    pub std_errors: Vec<Option<f64>>,
    /// False where the data cannot identify the coordinate (it was held at its start).
    pub identified: Vec<bool>,
    /// Process infidelity of the error channel (total Pauli error for incoherent families).
    pub error_rate: f64,
    /// Depolarizing parameter with the same process fidelity.
    pub depolarizing_rate: f64,
}

/// A fitted readout.
#[derive(Clone, Debug, PartialEq)]
pub struct ReadoutFit {
    /// The qubit.
    pub qubit: QubitIx,
    /// (P(read 1 | 0), P(read 0 | 1)).
    pub errors: [f64; 2],
    /// Standard errors, `None` where unidentified.
    pub std_errors: [Option<f64>; 2],
    /// False where the data cannot identify the coordinate.
    pub identified: [bool; 2],
}

/// The outcome of one fit.
#[derive(Clone, Debug)]
pub struct FitResult {
    /// The full parameter table: free coordinates fitted, everything else as given.
    pub params: Params,
    /// Fitted kinds, in order of first appearance in the rows.
    pub kinds: Vec<KindFit>,
    /// Fitted readouts (empty for a coupler fit).
    pub readout: Vec<ReadoutFit>,
    /// Per-row LLR = 2 sum_x n_x ln(f_x / p_x), aligned with the input rows.
    pub row_llr: Vec<f64>,
    /// Sum of `row_llr`.
    pub llr: f64,
    /// Degrees of freedom: sum over rows of (outcomes - 1) minus identified parameters.
    pub dof: i64,
    /// (LLR - dof) / sqrt(2 dof); `None` when dof <= 0.
    pub excess_sigma: Option<f64>,
    /// The maximised log-likelihood sum n_x ln p_x.
    pub log_likelihood: f64,
    /// Free raw coordinates.
    pub n_free: usize,
    /// Identified directions (the fitted-parameter count in `dof`).
    pub n_identified: usize,
    /// Fisher-information eigenvalues in natural coordinates at the identifiability check,
    /// largest first.
    pub fisher_eigenvalues: Vec<f64>,
    /// Steps tried (accepted or not).
    pub iterations: usize,
    /// True when the convergence test passed.
    pub converged: bool,
    /// Non-convergence, unidentified coordinates.
    pub warnings: Vec<Warning>,
}

/// LLR = 2 sum_x n_x ln(f_x / p_x) of one row against its own frequencies.
pub fn llr(counts: &[u64], probs: &[f64]) -> f64 {
    let n: u64 = counts.iter().sum();
    if n == 0 {
        return 0.0;
    }
    counts
        .iter()
        .zip(probs)
        .filter(|(&c, _)| c > 0)
        .map(|(&c, &p)| {
            let f = c as f64 / n as f64;
            2.0 * c as f64 * (f / p.max(PROB_FLOOR)).ln()
        })
        .sum()
}

/// Bound on logistic and softmax raw coordinates: rates stay above about 1e-12, where the
/// likelihood is flat anyway, instead of running off to -infinity.
const RAW_LIMIT: f64 = 27.0;

/// Probabilities are floored here only inside logarithms, so that an impossible outcome
/// gives a huge but finite penalty instead of NaN.
const PROB_FLOOR: f64 = 1e-300;

/// A bounded raw coordinate at or below this sits on its lower bound (a rate of about
/// 1e-11 or less) and may join the active set.
const AT_BOUND: f64 = -RAW_LIMIT + 1.0;

/// Orthonormal basis of the reduced directions (columns of `basis` combinations) that keep
/// every coordinate in `active` fixed: the null space of those rows of `basis`.
fn free_directions(basis: &DMatrix<f64>, active: &[usize]) -> DMatrix<f64> {
    let rank = basis.ncols();
    if active.is_empty() {
        return DMatrix::identity(rank, rank);
    }
    let c = DMatrix::from_fn(active.len(), rank, |r, j| basis[(active[r], j)]);
    // Projector onto the null space of c, then its eigenvectors with eigenvalue 1.
    let pinv =
        c.clone().pseudo_inverse(1e-12).unwrap_or_else(|_| DMatrix::zeros(rank, active.len()));
    let proj = DMatrix::identity(rank, rank) - pinv * c;
    let proj = (&proj + proj.transpose()) * 0.5;
    let (vals, vecs) = sorted_eigen(&proj);
    let keep = vals.iter().filter(|&&l| l > 0.5).count();
    vecs.columns(0, keep).into_owned()
}

/// Fits one qubit's one-qubit kinds and readout to its one-qubit rows.
pub fn fit_qubit(
    rows: &[PreparedRow],
    spec: &ModelSpec,
    start: Option<&Params>,
    options: &FitOptions,
) -> Result<FitResult> {
    fit_qubit_checked(rows, spec, start, options, None)
}

/// [`fit_qubit`] with a known identifiability check (see [`fit_checked`]); `start_check`
/// of the same rows, `start` and [`Free::All`] makes one.
pub fn fit_qubit_checked(
    rows: &[PreparedRow],
    spec: &ModelSpec,
    start: Option<&Params>,
    options: &FitOptions,
    known: Option<&StartCheck>,
) -> Result<FitResult> {
    let base = Params::given_or_initial(start, spec)?;
    fit_checked(rows, spec, &base, Free::All, options, known)
}

/// Fits a coupler's two-qubit kind(s) to its two-qubit rows with the one-qubit channels and
/// readout of `fixed_one_qubit`; two-qubit kinds start from `start` (or the default).
pub fn fit_coupler(
    rows: &[PreparedRow],
    spec: &ModelSpec,
    fixed_one_qubit: &Params,
    start: Option<&Params>,
    options: &FitOptions,
) -> Result<FitResult> {
    let mut base = fixed_one_qubit.clone();
    let from = Params::given_or_initial(start, spec)?;
    for (k, &a) in spec.kind_arity.iter().enumerate() {
        if a == 2 {
            if let (Some(dst), Some(src)) = (base.kinds.get_mut(k), from.kinds.get(k)) {
                *dst = src.clone();
            }
        }
    }
    fit(rows, spec, &base, Free::TwoQubitKinds, options)
}

/// The free raw coordinates and the block structure of the natural-coordinate map.
struct Coords {
    refs: Vec<ParamRef>,
    /// False for coherent angles; true for logistic and softmax coordinates, which are
    /// kept within +-[`RAW_LIMIT`] so that d natural / d raw stays invertible.
    bounded: Vec<bool>,
    /// Position in `refs` of each kind's first raw coordinate (indexed by kind), and of
    /// each qubit's first readout coordinate (indexed by qubit): an evaluation looks a
    /// row's columns up here once per row.
    kind_start: Vec<Option<usize>>,
    readout_start: Vec<Option<usize>>,
    kinds: Vec<KindIx>,
    qubits: Vec<QubitIx>,
}

impl Coords {
    fn new(rows: &[PreparedRow], params: &Params, free: Free) -> Coords {
        let mut kinds = Vec::new();
        let mut qubits = Vec::new();
        for r in rows {
            for &k in r.kinds() {
                let take = free == Free::All || params.kinds[k].arity() == 2;
                if take && !kinds.contains(&k) {
                    kinds.push(k);
                }
            }
            if free == Free::All {
                for &q in r.readout() {
                    if !qubits.contains(&q) {
                        qubits.push(q);
                    }
                }
            }
        }
        let mut refs = Vec::new();
        for &kind in &kinds {
            refs.extend(
                (0..params.kinds[kind].raw().len()).map(|index| ParamRef::Kind { kind, index }),
            );
        }
        for &qubit in &qubits {
            refs.extend((0..2).map(|index| ParamRef::Readout { qubit, index }));
        }
        let mut kind_start = vec![None; params.kinds.len()];
        let mut readout_start = vec![None; params.readout.len()];
        for (i, r) in refs.iter().enumerate() {
            match *r {
                ParamRef::Kind { kind, index: 0 } => kind_start[kind] = Some(i),
                ParamRef::Readout { qubit, index: 0 } => readout_start[qubit] = Some(i),
                _ => {}
            }
        }
        let bounded = refs
            .iter()
            .map(|r| match *r {
                ParamRef::Kind { kind, index } => params.kinds[kind]
                    .coherent_angles()
                    .is_none_or(|h| index < params.kinds[kind].raw().len() - h.len()),
                ParamRef::Readout { .. } => true,
            })
            .collect();
        Coords { refs, bounded, kind_start, readout_start, kinds, qubits }
    }

    /// Position of a raw coordinate among the free ones, if it is free.
    fn position(&self, r: &ParamRef) -> Option<usize> {
        match *r {
            ParamRef::Kind { kind, index } => {
                self.kind_start.get(kind).copied().flatten().map(|s| s + index)
            }
            ParamRef::Readout { qubit, index } => {
                self.readout_start.get(qubit).copied().flatten().map(|s| s + index)
            }
        }
    }

    fn get(&self, p: &Params) -> DVector<f64> {
        DVector::from_iterator(
            self.refs.len(),
            self.refs.iter().map(|r| match *r {
                ParamRef::Kind { kind, index } => p.kinds[kind].raw()[index],
                ParamRef::Readout { qubit, index } => p.readout[qubit].raw[index],
            }),
        )
    }

    fn set(&self, p: &mut Params, x: &DVector<f64>) {
        for (r, &v) in self.refs.iter().zip(x.iter()) {
            match *r {
                ParamRef::Kind { kind, index } => p.kinds[kind].raw_mut()[index] = v,
                ParamRef::Readout { qubit, index } => p.readout[qubit].raw[index] = v,
            }
        }
    }

    /// Natural values of the free coordinates, aligned with `refs`.
    fn natural(&self, p: &Params) -> DVector<f64> {
        let mut v = Vec::with_capacity(self.refs.len());
        for &k in &self.kinds {
            v.extend(p.kinds[k].natural());
        }
        for &q in &self.qubits {
            v.extend(p.readout[q].errors());
        }
        DVector::from_vec(v)
    }

    /// `base` with the free coordinates set from natural values `v`; rates below zero are
    /// put on their lower bound. `None` when `v` leaves a channel's range otherwise (rates
    /// summing to 1 or more, a readout error of 0.5 or more).
    fn with_natural(&self, base: &Params, v: &DVector<f64>) -> Option<Params> {
        let mut p = base.clone();
        let mut at = 0;
        for &k in &self.kinds {
            let kp = &base.kinds[k];
            let m = kp.raw().len();
            let vals: Vec<f64> = v.rows(at, m).iter().copied().collect();
            let rates = |r: &[f64]| r.iter().map(|&x| x.max(0.0)).collect::<Vec<f64>>();
            p.kinds[k] = match kp.family() {
                Family::Depolarizing => KindParams::depolarizing(kp.arity(), vals[0].max(0.0)),
                Family::Pauli => KindParams::pauli(kp.arity(), &rates(&vals)),
                Family::PauliCoherent => {
                    KindParams::pauli_coherent(kp.arity(), &rates(&vals[..m / 2]), &vals[m / 2..])
                }
            }
            .ok()?;
            at += m;
        }
        for &q in &self.qubits {
            p.readout[q] = Readout::new(v[at].max(0.0), v[at + 1].max(0.0)).ok()?;
            at += 2;
        }
        let mut x = self.get(&p);
        for (xi, &b) in x.iter_mut().zip(&self.bounded) {
            if b {
                *xi = xi.clamp(-RAW_LIMIT, RAW_LIMIT);
            }
        }
        self.set(&mut p, &x);
        Some(p)
    }

    /// d natural / d raw: block diagonal over kinds and readout coordinates.
    fn natural_jacobian(&self, p: &Params) -> DMatrix<f64> {
        let n = self.refs.len();
        let mut s = DMatrix::zeros(n, n);
        let mut at = 0;
        for &k in &self.kinds {
            let b = p.kinds[k].natural_jacobian();
            s.view_mut((at, at), (b.nrows(), b.ncols())).copy_from(&b);
            at += b.nrows();
        }
        for &q in &self.qubits {
            let d = p.readout[q].derivatives();
            s[(at, at)] = d[0];
            s[(at + 1, at + 1)] = d[1];
            at += 2;
        }
        s
    }
}

/// Log-likelihood, its raw gradient and the raw expected information.
struct Eval {
    ll: f64,
    grad: DVector<f64>,
    fisher: DMatrix<f64>,
    row_llr: Vec<f64>,
}

fn evaluate(rows: &[PreparedRow], params: &Params, coords: &Coords) -> Eval {
    let n = coords.refs.len();
    let ch = Channels::new(rows, params);
    let mut ll = 0.0;
    let mut grad = DVector::zeros(n);
    let mut fisher = DMatrix::zeros(n, n);
    let mut row_llr = Vec::with_capacity(rows.len());
    for row in rows {
        let pred = predict_for_free(row, params, &ch, &|k| {
            coords.kind_start.get(k).is_some_and(Option::is_some)
        });
        let counts = row.counts();
        let shots = row.shots() as f64;
        for (x, &c) in counts.iter().enumerate() {
            if c > 0 {
                ll += c as f64 * pred.probs[x].max(PROB_FLOOR).ln();
            }
        }
        row_llr.push(llr(counts, &pred.probs));
        let cols: Vec<(usize, usize)> = pred
            .columns
            .iter()
            .enumerate()
            .filter_map(|(c, r)| coords.position(r).map(|g| (c, g)))
            .collect();
        for (x, &c) in counts.iter().enumerate() {
            let p = pred.probs[x].max(1e-15);
            for &(ci, gi) in &cols {
                let di = pred.jacobian[(x, ci)];
                grad[gi] += c as f64 * di / p;
                for &(cj, gj) in &cols {
                    fisher[(gi, gj)] += shots * di * pred.jacobian[(x, cj)] / p;
                }
            }
        }
    }
    Eval { ll, grad, fisher, row_llr }
}

/// Natural-coordinate information: T^T F T with T = (d natural / d raw)^-1.
fn to_natural(
    fisher: &DMatrix<f64>,
    grad: &DVector<f64>,
    s: &DMatrix<f64>,
) -> Option<(DMatrix<f64>, DVector<f64>, DMatrix<f64>)> {
    let t = s.clone().try_inverse()?;
    let f = t.transpose() * fisher * &t;
    let f = (&f + f.transpose()) * 0.5;
    let g = t.transpose() * grad;
    Some((f, g, t))
}

/// Eigen-decomposition sorted by eigenvalue, largest first.
fn sorted_eigen(m: &DMatrix<f64>) -> (Vec<f64>, DMatrix<f64>) {
    if m.is_empty() {
        // Every direction held (all rates on their bounds): nothing to decompose.
        return (Vec::new(), DMatrix::zeros(m.nrows(), 0));
    }
    let e = SymmetricEigen::new(m.clone());
    let mut order: Vec<usize> = (0..e.eigenvalues.len()).collect();
    order.sort_by(|&a, &b| e.eigenvalues[b].total_cmp(&e.eigenvalues[a]));
    let vals = order.iter().map(|&i| e.eigenvalues[i]).collect();
    let vecs = DMatrix::from_fn(m.nrows(), order.len(), |r, c| e.eigenvectors[(r, order[c])]);
    (vals, vecs)
}

/// The identifiability check of a fit: the eigen-decomposition of the expected information
/// in natural coordinates at the isotropic, incoherent projection of the start point. The
/// expected information reads each row's program and shots, never how its shots fall, so
/// a fit from the same start on the same programs with the same shots per row (a bootstrap
/// replicate that resamples each circuit's shots) has the same check to the last bit.
#[derive(Clone, Debug)]
pub struct StartCheck {
    /// Eigenvalues, largest first.
    eigenvalues: Vec<f64>,
    /// The identified directions (columns), in natural coordinates.
    basis: DMatrix<f64>,
    /// Per free raw coordinate: whether the data identify it.
    identified: Vec<bool>,
    /// Number of identified directions.
    rank: usize,
    /// Shots of each row the check was made on.
    shots: Vec<u64>,
}

impl StartCheck {
    /// True when `rows` have the shots of the rows this check was made on. The caller
    /// answers for the rest: the same programs, start point and free coordinates.
    fn holds_for(&self, rows: &[PreparedRow]) -> bool {
        self.shots.len() == rows.len() && rows.iter().zip(&self.shots).all(|(r, &n)| r.shots() == n)
    }
}

/// The [`StartCheck`] of fitting the free coordinates (per `free`) of `base` to `rows`.
pub fn start_check(
    rows: &[PreparedRow],
    base: &Params,
    free: Free,
    options: &FitOptions,
) -> Result<StartCheck> {
    check_start(rows, base, &Coords::new(rows, base, free), options)
}

fn check_start(
    rows: &[PreparedRow],
    base: &Params,
    coords: &Coords,
    options: &FitOptions,
) -> Result<StartCheck> {
    let n = coords.refs.len();
    let mut probe = base.clone();
    for &k in &coords.kinds {
        probe.kinds[k] = probe.kinds[k].isotropic();
    }
    let e0 = evaluate(rows, &probe, coords);
    let s0 = coords.natural_jacobian(&probe);
    let (f0, _, _) = to_natural(&e0.fisher, &e0.grad, &s0).ok_or_else(|| {
        Error::Analysis("a channel parameter sits on its boundary at the start".into())
    })?;
    let (eigenvalues, vec0) = sorted_eigen(&f0);
    let top = eigenvalues.first().copied().unwrap_or(0.0).max(0.0);
    let rank = eigenvalues
        .iter()
        .filter(|&&l| top > 0.0 && l > options.identifiability_rel_tol * top)
        .count();
    let basis = vec0.columns(0, rank).into_owned();
    let null = vec0.columns(rank, n - rank).into_owned();
    let identified: Vec<bool> = (0..n).map(|i| null.row(i).norm_squared() < 0.01).collect();
    let shots = rows.iter().map(PreparedRow::shots).collect();
    Ok(StartCheck { eigenvalues, basis, identified, rank, shots })
}

/// Fits the free coordinates (per `free`) of `base` to `rows`; all other coordinates of
/// `base` stay as they are.
pub fn fit(
    rows: &[PreparedRow],
    spec: &ModelSpec,
    base: &Params,
    free: Free,
    options: &FitOptions,
) -> Result<FitResult> {
    fit_checked(rows, spec, base, free, options, None)
}

/// [`fit`] with the identifiability check `known` of the same programs, start and free
/// coordinates when there is one (it is made afresh when the rows' shots differ from the
/// ones it was made on).
pub fn fit_checked(
    rows: &[PreparedRow],
    spec: &ModelSpec,
    base: &Params,
    free: Free,
    options: &FitOptions,
    known: Option<&StartCheck>,
) -> Result<FitResult> {
    if !base.matches(spec) {
        return Err(Error::Analysis(
            "model parameters do not match the problem's kind table".into(),
        ));
    }
    if let Some(r) = rows.iter().position(|r| !r.serves(spec.family)) {
        return Err(Error::Analysis(format!(
            "row {r} was prepared for a Pauli-channel family and cannot predict under {}: prepare the rows for it",
            spec.family.name()
        )));
    }
    let coords = Coords::new(rows, base, free);
    let n = coords.refs.len();
    let mut params = base.clone();
    let mut warnings = Vec::new();

    let computed;
    let check = match known.filter(|c| c.holds_for(rows)) {
        Some(c) => c,
        None => {
            computed = check_start(rows, base, &coords, options)?;
            &computed
        }
    };
    let StartCheck { eigenvalues: eig0, basis, identified, rank, .. } = check;
    let rank = *rank;

    let mut x = coords.get(&params);
    let mut cur = evaluate(rows, &params, &coords);
    let mut mu = 1e-3;
    let mut iterations = 0;
    let mut converged = rank == 0;
    let mut last_info: Option<DMatrix<f64>> = None;
    while !converged && iterations < options.max_iterations {
        let s = coords.natural_jacobian(&params);
        let Some((f, g, _)) = to_natural(&cur.fisher, &cur.grad, &s) else {
            warnings.push(Warning::new(
                "fit-boundary",
                "a channel parameter reached its boundary",
                "check the rows for outcomes the model cannot produce",
            ));
            break;
        };
        // Active set: rates held at their lower bound whose gradient points outward. The
        // step is a Newton step on the other directions (projected Newton, D. P. Bertsekas,
        // "Projected Newton methods for optimization problems with simple constraints",
        // SIAM J. Control Optim. 20 (1982) 221-246), and convergence is the KKT test:
        // outward gradient on the active rates, small Newton decrement elsewhere.
        let active: Vec<usize> =
            (0..n).filter(|&i| coords.bounded[i] && x[i] <= AT_BOUND && g[i] <= 0.0).collect();
        let z = free_directions(basis, &active);
        let a = z.transpose() * basis.transpose() * &f * basis * &z;
        let b = z.transpose() * basis.transpose() * &g;
        let (av, avec) = sorted_eigen(&a);
        let amax = av.first().copied().unwrap_or(0.0).max(f64::MIN_POSITIVE);
        let decrement: f64 = (0..av.len())
            .filter(|&i| av[i] > 1e-14 * amax)
            .map(|i| avec.column(i).dot(&b).powi(2) / av[i])
            .sum();
        last_info = Some(basis.transpose() * &f * basis);
        if 0.5 * decrement < options.tolerance {
            converged = true;
            break;
        }
        let natural = coords.natural(&params);
        let mut accepted = false;
        while iterations < options.max_iterations {
            iterations += 1;
            let mut damped = a.clone();
            for i in 0..a.nrows() {
                damped[(i, i)] += mu * a[(i, i)].max(1e-12 * amax);
            }
            let Some(step_red) = damped.cholesky().map(|c| c.solve(&b)) else {
                mu *= 10.0;
                continue;
            };
            // The trial point is built in natural coordinates: a linearised raw step
            // near a bound would change a rate only by a constant factor per step.
            let step_nat = basis * (&z * step_red);
            let Some(trial) = coords.with_natural(&params, &(&natural + step_nat)) else {
                mu *= 10.0;
                if mu > 1e12 {
                    break;
                }
                continue;
            };
            let trial_x = coords.get(&trial);
            // Evaluated with its derivatives at once: a warm Newton step is seldom refused,
            // and an accepted point would otherwise be evaluated twice.
            let trial_eval = evaluate(rows, &trial, &coords);
            if trial_eval.ll.is_finite() && trial_eval.ll >= cur.ll {
                let gain = trial_eval.ll - cur.ll;
                x = trial_x;
                params = trial;
                cur = trial_eval;
                mu = (mu * 0.3).max(1e-10);
                accepted = true;
                if gain < 1e-13 * (1.0 + cur.ll.abs()) && 0.5 * decrement < 1e3 * options.tolerance
                {
                    converged = true;
                }
                break;
            }
            mu *= 10.0;
            if mu > 1e12 {
                break;
            }
        }
        if !accepted {
            break;
        }
    }
    if !converged {
        warnings.push(Warning::new(
            "fit-not-converged",
            format!("the model fit stopped after {iterations} steps without converging"),
            "the fitted values may not be the best the rows allow; try --model depolarizing (fewer parameters) or add circuits that separate the error parameters",
        ));
    }

    // Standard errors on the identified directions at the final point.
    let s = coords.natural_jacobian(&params);
    let info = match to_natural(&cur.fisher, &cur.grad, &s) {
        Some((f, _, _)) => basis.transpose() * f * basis,
        None => last_info.unwrap_or_else(|| DMatrix::zeros(rank, rank)),
    };
    let cov_red = info
        .clone()
        .pseudo_inverse(1e-14 * info.amax().max(f64::MIN_POSITIVE))
        .unwrap_or_else(|_| DMatrix::zeros(rank, rank));
    let cov = basis * cov_red * basis.transpose();
    let se = |i: usize| identified[i].then(|| cov[(i, i)].max(0.0).sqrt());

    let mut kinds = Vec::new();
    let mut at = 0;
    for &k in &coords.kinds {
        let kp = &params.kinds[k];
        let m = kp.raw().len();
        kinds.push(KindFit {
            kind: k,
            names: kp.natural_names(),
            values: kp.natural(),
            std_errors: (at..at + m).map(se).collect(),
            identified: identified[at..at + m].to_vec(),
            error_rate: kp.error_rate(),
            depolarizing_rate: kp.depolarizing_rate(),
        });
        at += m;
    }
    let mut readout = Vec::new();
    for &q in &coords.qubits {
        readout.push(ReadoutFit {
            qubit: q,
            errors: params.readout[q].errors(),
            std_errors: [se(at), se(at + 1)],
            identified: [identified[at], identified[at + 1]],
        });
        at += 2;
    }
    let unidentified = identified.iter().filter(|&&b| !b).count();
    if unidentified > 0 {
        warnings.push(Warning::new(
            "unidentified-parameters",
            format!("{unidentified} model coordinate(s) cannot be identified from these rows and were held at their start values"),
            "add circuits that separate them (for coherent errors: repeated-gate sequences)",
        ));
    }
    let outcomes: i64 = rows.iter().map(|r| r.counts().len() as i64 - 1).sum();
    let dof = outcomes - rank as i64;
    let llr_total: f64 = cur.row_llr.iter().sum();
    let excess_sigma = (dof > 0).then(|| (llr_total - dof as f64) / (2.0 * dof as f64).sqrt());
    Ok(FitResult {
        params,
        kinds,
        readout,
        row_llr: cur.row_llr,
        llr: llr_total,
        dof,
        excess_sigma,
        log_likelihood: cur.ll,
        n_free: n,
        n_identified: rank,
        fisher_eigenvalues: eig0.clone(),
        iterations,
        converged,
        warnings,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::predict::tests::{random_params, random_row, spec};
    use crate::model::predict::{predict_all, PreparedRow};
    use rand::{RngExt, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    /// `rows` with `shots` shots each drawn from their predictions under `truth`.
    fn drawn(
        rows: &[PreparedRow],
        truth: &Params,
        shots: u64,
        rng: &mut ChaCha8Rng,
    ) -> Vec<PreparedRow> {
        let probs = predict_all(rows, truth);
        rows.iter()
            .zip(&probs)
            .map(|(r, p)| {
                let mut counts = vec![0u64; p.len()];
                for _ in 0..shots {
                    let u: f64 = rng.random();
                    let mut acc = 0.0;
                    let x = (0..p.len()).find(|&x| {
                        acc += p[x];
                        u < acc
                    });
                    counts[x.unwrap_or(p.len() - 1)] += 1;
                }
                r.with_counts(counts).unwrap()
            })
            .collect()
    }

    /// A check made on rows with other counts but the same shots stands for the fit's own
    /// (the expected information reads only programs and shots: Fisher's scoring method);
    /// one made on other shots is not used.
    #[test]
    fn start_check_of_same_shots_gives_the_same_fit() {
        let mut rng = ChaCha8Rng::seed_from_u64(11);
        for family in [Family::Depolarizing, Family::Pauli] {
            let s = spec(family);
            let truth = random_params(family, &mut rng);
            let rows: Vec<PreparedRow> = (0..30)
                .map(|_| {
                    let layers = rng.random_range(2..12);
                    PreparedRow::new(&random_row(1, layers, &mut rng), &s).unwrap()
                })
                .collect();
            let data = drawn(&rows, &truth, 1000, &mut rng);
            let options = FitOptions::default();
            let point = fit_qubit(&data, &s, None, &options).unwrap();
            let start = Some(&point.params);
            let one = drawn(&rows, &truth, 1000, &mut rng);
            let other = drawn(&rows, &truth, 1000, &mut rng);
            let check = start_check(&one, &point.params, Free::All, &options).unwrap();
            let with = fit_qubit_checked(&other, &s, start, &options, Some(&check)).unwrap();
            let without = fit_qubit(&other, &s, start, &options).unwrap();
            assert_eq!(with.params, without.params, "{}", family.name());
            assert_eq!(with.fisher_eigenvalues, without.fisher_eigenvalues);
            assert_eq!(with.llr.to_bits(), without.llr.to_bits());
            assert_eq!(with.n_identified, without.n_identified);

            let fewer = drawn(&rows, &truth, 300, &mut rng);
            assert!(!check.holds_for(&fewer));
            let with = fit_qubit_checked(&fewer, &s, start, &options, Some(&check)).unwrap();
            let without = fit_qubit(&fewer, &s, start, &options).unwrap();
            assert_eq!(with.params, without.params);
            assert_eq!(with.fisher_eigenvalues, without.fisher_eigenvalues);
        }
    }
}
