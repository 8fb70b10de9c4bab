//! Row predictions with analytic derivatives.
//!
//! A row is compiled once into its ideal segments between error channels ([`PreparedRow`]);
//! every evaluation then runs a forward pass over the transfer-matrix product and a
//! backward pass that collects, per kind, d p / d E = sum_t l_t s_t^T, contracted with each
//! dE/dtheta once per row. Under `depolarizing`, a one-qubit row needs only its occurrence
//! count per kind and its ideal outcome, because a depolarizing channel commutes with every
//! one-qubit unitary (method.md section 8).
//!
//! When every ideal segment maps each Pauli to a multiple of one Pauli (Clifford gates) and
//! the family's channels are Pauli channels, a row is kept as its Pauli paths instead: each
//! Pauli component of the initial state travels to one final Pauli, and an error channel on
//! the way only scales it by the channel's eigenvalue there (method.md section 8). The
//! prediction is then a sum of a few products of eigenvalue powers, and the transfer
//! matrices are not stored at all.

use std::rc::Rc;
use std::sync::Arc;

use nalgebra::{DMatrix, DVector};

use super::channel::{ChannelEval, Family, KindIx, ModelSpec, Params};
use super::ptm::{self, Ptm};
use super::{Action, Row, Step};
use crate::layout::QubitIx;
use crate::{Error, Result};

/// Where an error channel acts in its block.
#[derive(Copy, Clone, Debug, PartialEq, Eq)]
enum Place {
    /// On the whole block (a one-qubit row, or a two-qubit kind on a pair).
    Full,
    /// A one-qubit kind on one slot of a two-qubit block.
    Slot(usize),
}

/// One error channel in a compiled row, and the ideal product that follows it.
#[derive(Clone, Debug)]
struct Seg {
    /// Index into the row's distinct kinds.
    local: usize,
    place: Place,
    /// Ideal transfer matrix up to (and including) the next occurrence's gate; `None` = I.
    after: Option<Ptm>,
}

/// The parts of a row that do not depend on its counts.
#[derive(Clone, Debug)]
struct Compiled {
    n_slots: usize,
    readout: Vec<QubitIx>,
    kinds: Vec<KindIx>,
    /// State just before the first error channel (or the final state without any).
    s0: DVector<f64>,
    segs: Vec<Seg>,
    functionals: DMatrix<f64>,
    /// Occurrences per kind (aligned with `kinds`), for the counted fast path.
    occurrences: Vec<u32>,
    /// Ideal <Z> of a one-qubit row, for the counted fast path.
    z_ideal: f64,
    /// The row as Pauli paths, when its ideal segments are Clifford; then `segs` is empty
    /// unless the family has non-diagonal channels.
    paths: Option<Vec<PauliPath>>,
    /// False when the transfer matrices were left out (Pauli paths under a Pauli-channel
    /// family): the row then serves only Pauli-channel families.
    matrices: bool,
}

/// One Pauli component of the initial state followed through a Clifford row: it ends as
/// `coef` times Pauli `out` times the product of the eigenvalues it met on the way.
#[derive(Clone, Debug)]
struct PauliPath {
    coef: f64,
    out: usize,
    /// (local kind, diagonal index of the kind's transfer matrix, times met), distinct keys.
    factors: Vec<(u32, u32, u32)>,
}

/// Entries smaller than this in an ideal transfer matrix are rounding residue of an exact 0.
const MONOMIAL_TOLERANCE: f64 = 1e-12;

/// The image of Pauli `q` under an ideal transfer matrix whose column `q` has one entry:
/// (row, value), or None when the column mixes Paulis (a non-Clifford gate).
fn monomial_image(m: &Ptm, q: usize) -> Option<(usize, f64)> {
    let mut found = None;
    for r in 0..m.nrows() {
        let v = m[(r, q)];
        if v.abs() > MONOMIAL_TOLERANCE {
            if found.is_some() {
                return None;
            }
            found = Some((r, v));
        }
    }
    found
}

/// The Pauli paths of a program, or None when an ideal layer is not Clifford: `r0` is the
/// initial state, `segs` the error channels in time order and `segment(i)` the ideal
/// layers before channel i (`segment(segs.len())`: after the last channel).
fn pauli_paths<'l>(
    r0: &DVector<f64>,
    segs: &[(usize, Place)],
    segment: &dyn Fn(usize) -> &'l [Rc<LayerPtm>],
) -> Option<Vec<PauliPath>> {
    let mut out = Vec::new();
    for (start, &v) in r0.iter().enumerate() {
        if v.abs() <= MONOMIAL_TOLERANCE {
            continue;
        }
        let (mut q, mut coef) = (start, v);
        let mut factors: Vec<(u32, u32, u32)> = Vec::new();
        for i in 0..=segs.len() {
            if i > 0 {
                let (local, place) = segs[i - 1];
                let key = (local as u32, diag_index(place, q) as u32);
                match factors.iter_mut().find(|f| (f.0, f.1) == key) {
                    Some(f) => f.2 += 1,
                    None => factors.push((key.0, key.1, 1)),
                }
            }
            for m in segment(i) {
                let (r, x) = m.mono[q]?;
                q = r;
                coef *= x;
            }
        }
        out.push(PauliPath { coef, out: q, factors });
    }
    Some(out)
}

/// An ideal layer of a row (one gate per slot, or one two-qubit gate): its transfer matrix
/// and, per Pauli, its image when that is a multiple of one Pauli ([`monomial_image`]; a
/// path through a non-Clifford layer may still only meet such Paulis).
#[derive(Debug)]
struct LayerPtm {
    m: Ptm,
    mono: Vec<Option<(usize, f64)>>,
}

/// What an ideal layer is made of: per slot a gate and its angle's bits (slot 1 unused in a
/// one-qubit row), or a two-qubit gate and whether its first operand is slot 1.
#[derive(Copy, Clone, Debug, PartialEq, Eq, Hash)]
enum LayerKey {
    Local(usize, [Option<(crate::gate::Gate, u64)>; 2]),
    Joint(crate::gate::Gate, bool),
}

/// Ideal layers kept by the thread that built them: a design repeats a few dozen distinct
/// layers across all its rows, and building their matrices per row was most of compiling.
/// Cleared when it grows past [`LAYER_CACHE_LIMIT`] (many distinct imported angles).
const LAYER_CACHE_LIMIT: usize = 1 << 14;

thread_local! {
    static LAYERS: std::cell::RefCell<crate::counts::FastMap<LayerKey, Rc<LayerPtm>>> =
        std::cell::RefCell::new(crate::counts::FastMap::default());
}

/// The cached layer of `key`, built by `build` on first use.
fn layer(key: LayerKey, build: impl FnOnce() -> Result<Ptm>) -> Result<Rc<LayerPtm>> {
    if let Some(l) = LAYERS.with(|c| c.borrow().get(&key).cloned()) {
        return Ok(l);
    }
    let m = build()?;
    let mono = (0..m.ncols()).map(|q| monomial_image(&m, q)).collect();
    let l = Rc::new(LayerPtm { m, mono });
    LAYERS.with(|c| {
        let mut c = c.borrow_mut();
        if c.len() >= LAYER_CACHE_LIMIT {
            c.clear();
        }
        c.insert(key, Rc::clone(&l));
    });
    Ok(l)
}

/// A validated, compiled row: cheap to clone, and [`PreparedRow::with_counts`] reuses the
/// compiled program (bootstrap replicates differ only in counts).
#[derive(Clone, Debug)]
pub struct PreparedRow {
    compiled: Arc<Compiled>,
    counts: Vec<u64>,
}

/// Identifies one raw coordinate of the model.
#[derive(Copy, Clone, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum ParamRef {
    /// Raw coordinate `index` of kind `kind`'s error channel.
    Kind {
        /// The kind.
        kind: KindIx,
        /// Coordinate within the kind.
        index: usize,
    },
    /// Raw coordinate `index` (0: P(1|0), 1: P(0|1)) of a qubit's readout.
    Readout {
        /// The qubit.
        qubit: QubitIx,
        /// 0 or 1.
        index: usize,
    },
}

/// A row's predicted outcome distribution and its Jacobian with respect to the raw
/// coordinates the row depends on.
#[derive(Clone, Debug)]
pub struct Prediction {
    /// Outcome probabilities (bit j of the index = slot j).
    pub probs: Vec<f64>,
    /// The coordinate of each Jacobian column.
    pub columns: Vec<ParamRef>,
    /// d probs[x] / d columns[c] at (x, c).
    pub jacobian: DMatrix<f64>,
}

fn gate_ptm(a: &Action, reversed: bool) -> Result<Ptm> {
    let u = ptm::gate_unitary(a.gate, a.angle, reversed)
        .ok_or_else(|| Error::Analysis(format!("gate {} has no unitary", a.gate)))?;
    Ok(ptm::unitary_ptm(&u))
}

fn times(pending: Option<Ptm>, step: &Ptm) -> Option<Ptm> {
    Some(match pending {
        None => step.clone(),
        Some(p) => step * p,
    })
}

impl PreparedRow {
    /// Validates `row` against `spec` and compiles it.
    pub fn new(row: &Row, spec: &ModelSpec) -> Result<PreparedRow> {
        let arity = |k: KindIx| spec.kind_arity.get(k).copied();
        Self::with_kinds(row, spec.family, spec.n_qubits, spec.kind_arity.len(), &arity)
    }

    /// Renumbers the row's kinds: kind k becomes `map(k)`.
    pub fn relabel_kinds(&mut self, map: &dyn Fn(KindIx) -> KindIx) {
        let compiled = Arc::make_mut(&mut self.compiled);
        for k in &mut compiled.kinds {
            *k = map(*k);
        }
    }

    /// [`PreparedRow::new`] for a row whose kinds index a list other than the model's (the
    /// kinds of one circuit while its rows are built): `arity(k)` is kind k's arity, `None`
    /// past the `n_kinds` kinds of that list. [`PreparedRow::relabel_kinds`] then renumbers
    /// them into the model's table.
    pub fn with_kinds(
        row: &Row,
        family: Family,
        n_qubits: usize,
        n_kinds: usize,
        arity: &dyn Fn(KindIx) -> Option<usize>,
    ) -> Result<PreparedRow> {
        let n = row.readout.len();
        let bad = |m: String| Err(Error::Analysis(format!("row program: {m}")));
        if n == 0 || n > 2 {
            return bad(format!("a row has 1 or 2 slots, not {n}"));
        }
        if n == 2 && row.readout[0] == row.readout[1] {
            return bad(format!("both slots read out qubit {}", row.readout[0]));
        }
        if let Some(&q) = row.readout.iter().find(|&&q| q >= n_qubits) {
            return bad(format!("readout qubit {q} is outside the {n_qubits} qubits"));
        }
        if row.counts.len() != 1 << n {
            return bad(format!(
                "a {n}-slot row has {} outcomes, got {} counts",
                1 << n,
                row.counts.len()
            ));
        }
        let kind_arity = arity;
        let check_kind = |k: KindIx, arity: usize| -> Result<()> {
            match kind_arity(k) {
                Some(a) if a == arity => Ok(()),
                Some(a) => Err(Error::Analysis(format!(
                    "row program: kind {k} acts on {a} qubit(s) but is used on {arity}"
                ))),
                None => Err(Error::Analysis(format!(
                    "row program: kind {k} is not in the table of {n_kinds} kinds"
                ))),
            }
        };
        let dim = ptm::pauli_dim(n);
        let r0 = ptm::zero_state(n);
        let mut kinds: Vec<KindIx> = Vec::new();
        let mut occurrences: Vec<u32> = Vec::new();
        // The ideal layers in time order; segment i (the layers before error channel i, and
        // after the last one) starts at bounds[i]. Multiplied out only when the row cannot
        // be kept as Pauli paths.
        // Sized once: these grew one push at a time, a twentieth of preparing the rows.
        let steps = row.steps.len();
        let mut segs: Vec<(usize, Place)> = Vec::with_capacity(2 * steps);
        let mut layers: Vec<Rc<LayerPtm>> = Vec::with_capacity(steps);
        let mut bounds: Vec<usize> = Vec::with_capacity(2 * steps + 1);
        bounds.push(0);
        let (mut ideal, mut next) = (r0.clone(), DVector::zeros(dim));
        let mut push = |k: KindIx, place: Place, at: usize, segs: &mut Vec<(usize, Place)>| {
            let local = match kinds.iter().position(|&x| x == k) {
                Some(i) => i,
                None => {
                    kinds.push(k);
                    occurrences.push(0);
                    kinds.len() - 1
                }
            };
            occurrences[local] += 1;
            bounds.push(at);
            segs.push((local, place));
        };
        for (t, step) in row.steps.iter().enumerate() {
            let m = match step {
                Step::Local(acts) => {
                    if n == 1 && acts[1].is_some() {
                        return bad(format!("layer {t}: slot 1 used in a one-qubit row"));
                    }
                    let mut key = [None; 2];
                    for (slot, a) in acts.iter().enumerate().take(n) {
                        if let Some(a) = a {
                            if a.gate.arity() != 1 || !a.angle.is_finite() {
                                return bad(format!(
                                    "layer {t}: {} (angle {}) is not a one-qubit gate",
                                    a.gate, a.angle
                                ));
                            }
                            if let Some(k) = a.kind {
                                check_kind(k, 1)?;
                            }
                            key[slot] = Some((a.gate, a.angle.to_bits()));
                        }
                    }
                    layer(LayerKey::Local(n, key), || {
                        let one = |a: &Option<Action>| match a {
                            Some(a) => gate_ptm(a, false),
                            None => Ok(Ptm::identity(4, 4)),
                        };
                        Ok(if n == 1 {
                            one(&acts[0])?
                        } else {
                            ptm::kron(&one(&acts[0])?, &one(&acts[1])?)
                        })
                    })?
                }
                Step::Joint { action, reversed } => {
                    if n != 2 || action.gate.arity() != 2 {
                        return bad(format!(
                            "layer {t}: two-qubit step {} in a {n}-slot row",
                            action.gate
                        ));
                    }
                    if let Some(k) = action.kind {
                        check_kind(k, 2)?;
                    }
                    layer(LayerKey::Joint(action.gate, *reversed), || gate_ptm(action, *reversed))?
                }
            };
            next.gemv(1.0, &m.m, &ideal, 0.0);
            std::mem::swap(&mut ideal, &mut next);
            layers.push(m);
            match step {
                Step::Local(acts) => {
                    for (slot, a) in acts.iter().enumerate().take(n) {
                        if let Some(k) = a.and_then(|a| a.kind) {
                            let place = if n == 1 { Place::Full } else { Place::Slot(slot) };
                            push(k, place, layers.len(), &mut segs);
                        }
                    }
                }
                Step::Joint { action, .. } => {
                    if let Some(k) = action.kind {
                        push(k, Place::Full, layers.len(), &mut segs);
                    }
                }
            }
        }
        let z_ideal = if n == 1 { ideal[3] } else { 0.0 };
        let segment = |i: usize| -> &[Rc<LayerPtm>] {
            let end = bounds.get(i + 1).copied().unwrap_or(layers.len());
            &layers[bounds[i]..end]
        };
        let paths = pauli_paths(&r0, &segs, &segment);
        // Pauli channels never need the transfer matrices once the paths are known.
        let keep_matrices =
            paths.is_none() || !matches!(family, Family::Depolarizing | Family::Pauli);
        let (s0, segs) = if keep_matrices {
            let product = |ls: &[Rc<LayerPtm>]| ls.iter().map(|l| &l.m).fold(None, times);
            let s0 = product(segment(0)).map_or_else(|| r0.clone(), |m| m * &r0);
            let segs = segs
                .iter()
                .enumerate()
                .map(|(i, &(local, place))| Seg { local, place, after: product(segment(i + 1)) })
                .collect();
            (s0, segs)
        } else {
            let s0 = segment(0).iter().fold(r0.clone(), |v, m| &m.m * v);
            (s0, Vec::new())
        };
        debug_assert_eq!(s0.len(), dim);
        let compiled = Compiled {
            n_slots: n,
            readout: row.readout.clone(),
            kinds,
            s0,
            segs,
            functionals: ptm::outcome_functionals(n),
            occurrences,
            z_ideal,
            paths,
            matrices: keep_matrices,
        };
        Ok(PreparedRow { compiled: Arc::new(compiled), counts: row.counts.clone() })
    }

    /// The same program with other counts (same number of outcomes).
    pub fn with_counts(&self, counts: Vec<u64>) -> Result<PreparedRow> {
        if counts.len() != self.counts.len() {
            return Err(Error::Analysis(format!(
                "row program: {} counts for a row with {} outcomes",
                counts.len(),
                self.counts.len()
            )));
        }
        Ok(PreparedRow { compiled: Arc::clone(&self.compiled), counts })
    }

    /// Shots per outcome.
    pub fn counts(&self) -> &[u64] {
        &self.counts
    }

    /// Total shots.
    pub fn shots(&self) -> u64 {
        self.counts.iter().sum()
    }

    /// Number of slots (1 or 2).
    pub fn n_slots(&self) -> usize {
        self.compiled.n_slots
    }

    /// The distinct kinds with an occurrence in this row, in order of first occurrence.
    pub fn kinds(&self) -> &[KindIx] {
        &self.compiled.kinds
    }

    /// Occurrences of each of [`PreparedRow::kinds`].
    pub fn occurrences(&self) -> &[u32] {
        &self.compiled.occurrences
    }

    /// Readout qubit per slot.
    pub fn readout(&self) -> &[QubitIx] {
        &self.compiled.readout
    }

    /// Whether this row can predict under `family`: a row prepared for a Pauli-channel
    /// family keeps only its Pauli paths, which a coherent error cannot follow; prepare it
    /// again for that family.
    pub fn serves(&self, family: Family) -> bool {
        self.compiled.matrices || matches!(family, Family::Depolarizing | Family::Pauli)
    }
}

/// Channels of the kinds a set of rows needs, built once per parameter point and indexed
/// by kind.
pub(crate) struct Channels {
    by_kind: Vec<Option<ChannelEval>>,
}

impl Channels {
    /// Builds the channels of every kind appearing in `rows`.
    pub(crate) fn new<'a>(
        rows: impl IntoIterator<Item = &'a PreparedRow>,
        params: &Params,
    ) -> Channels {
        let mut by_kind: Vec<Option<ChannelEval>> = vec![None; params.kinds.len()];
        for r in rows {
            for &k in r.kinds() {
                if by_kind[k].is_none() {
                    by_kind[k] = Some(params.kinds[k].channel());
                }
            }
        }
        Channels { by_kind }
    }

    fn get(&self, k: KindIx) -> &ChannelEval {
        self.by_kind[k].as_ref().expect("channel built for every kind of the rows")
    }
}

/// (E (x) I) v or (I (x) E) v on a two-qubit state.
fn apply_slot(e: &Ptm, slot: usize, v: &DVector<f64>, out: &mut DVector<f64>) {
    for i in 0..16 {
        let (a, b) = (i & 3, i >> 2);
        out[i] = if slot == 0 {
            (0..4).map(|x| e[(a, x)] * v[x + 4 * b]).sum()
        } else {
            (0..4).map(|x| e[(b, x)] * v[a + 4 * x]).sum()
        };
    }
}

fn apply(e: &Ptm, place: Place, v: &DVector<f64>, out: &mut DVector<f64>) {
    match place {
        Place::Full => out.gemv(1.0, e, v, 0.0),
        Place::Slot(s) => apply_slot(e, s, v, out),
    }
}

/// The diagonal entry of a (possibly slot-embedded) diagonal channel acting on index i.
fn diag_index(place: Place, i: usize) -> usize {
    match place {
        Place::Full => i,
        Place::Slot(0) => i & 3,
        Place::Slot(_) => i >> 2,
    }
}

/// Readout confusion of one slot: c[x][y] = P(read x | true y).
fn confusion(e: [f64; 2]) -> [[f64; 2]; 2] {
    [[1.0 - e[0], e[1]], [e[0], 1.0 - e[1]]]
}

/// Ideal (pre-readout) outcome distribution and, if asked, dq/dE per local kind and outcome.
struct Ideal {
    q: Vec<f64>,
    grad: IdealGrad,
}

/// d q_y / d E per local kind and outcome y, in the kind's own space (4x4 or 16x16).
enum IdealGrad {
    /// `[local][y]`: the whole matrix (transfer-matrix rows).
    Full(Vec<Vec<Ptm>>),
    /// Its diagonal, the rest being zero (Pauli paths meet only the diagonal of a Pauli
    /// channel), in one buffer: entry a of (local, y) at `start[local] + y * dim[local] + a`.
    /// A local kind with `dim` 0 has none (its gradient was not asked for).
    Diagonal { data: Vec<f64>, start: Vec<usize>, dim: Vec<usize> },
}

impl IdealGrad {
    /// The contraction sum_ij de_ij (d q_y / d E)_ij. On a diagonal gradient the sum runs
    /// over the diagonal in the order a full matrix's column-by-column sum meets it, so
    /// both give the same number to the last bit.
    fn contract(&self, local: usize, y: usize, de: &Ptm) -> f64 {
        match self {
            IdealGrad::Full(g) => de.dot(&g[local][y]),
            IdealGrad::Diagonal { data, start, dim } => {
                let from = start[local] + y * dim[local];
                data[from..from + dim[local]]
                    .iter()
                    .enumerate()
                    .fold(0.0, |acc, (a, &d)| acc + de[(a, a)] * d)
            }
        }
    }
}

/// [`ideal_ptm`] over the Pauli paths: q_y = sum over paths of F[y, out] coef prod f^n,
/// and dq_y / dE[a, a] of a kind from the same products with one factor differentiated.
/// Only the local kinds `wanted` gets a gradient (the others' stay zero): a fit that holds
/// some kinds fixed never reads theirs, and each entry is summed on its own, so the
/// wanted ones are the same numbers either way.
fn ideal_paths(
    c: &Compiled,
    paths: &[PauliPath],
    ch: &Channels,
    want_grad: bool,
    wanted: &dyn Fn(usize) -> bool,
) -> Ideal {
    let k_out = c.functionals.nrows();
    let mut q = vec![0.0; k_out];
    let (mut start, mut dim) = (Vec::new(), Vec::new());
    if want_grad {
        let mut len = 0;
        for local in 0..c.kinds.len() {
            let d = if wanted(local) { ch.get(c.kinds[local]).e.nrows() } else { 0 };
            start.push(len);
            dim.push(d);
            len += d * k_out;
        }
        start.push(len);
    }
    let mut data = vec![0.0; start.last().copied().unwrap_or(0)];
    let mut powers: Vec<f64> = Vec::new();
    let mut eigs: Vec<f64> = Vec::new();
    for path in paths {
        eigs.clear();
        eigs.extend(path.factors.iter().map(|f| {
            let a = f.1 as usize;
            ch.get(c.kinds[f.0 as usize]).e[(a, a)]
        }));
        powers.clear();
        powers.extend(path.factors.iter().zip(&eigs).map(|(f, e)| e.powi(f.2 as i32)));
        let value = path.coef * powers.iter().product::<f64>();
        for (y, qy) in q.iter_mut().enumerate() {
            *qy += c.functionals[(y, path.out)] * value;
        }
        if !want_grad {
            continue;
        }
        for (j, f) in path.factors.iter().enumerate() {
            let local = f.0 as usize;
            let kd = dim[local];
            if kd == 0 {
                continue;
            }
            let others: f64 =
                powers.iter().enumerate().filter(|&(i, _)| i != j).map(|(_, p)| p).product();
            let d = path.coef * others * f.2 as f64 * eigs[j].powi(f.2 as i32 - 1);
            let a = f.1 as usize;
            for y in 0..k_out {
                data[start[local] + y * kd + a] += c.functionals[(y, path.out)] * d;
            }
        }
    }
    start.pop();
    Ideal { q, grad: IdealGrad::Diagonal { data, start, dim } }
}

fn ideal_ptm(c: &Compiled, ch: &Channels, want_grad: bool) -> Ideal {
    ideal_ptm_for(c, ch, want_grad, &|_| true)
}

/// [`ideal_ptm`], with gradients needed only for the local kinds `wanted` (see
/// [`ideal_paths`]; transfer-matrix rows compute them all).
fn ideal_ptm_for(
    c: &Compiled,
    ch: &Channels,
    want_grad: bool,
    wanted: &dyn Fn(usize) -> bool,
) -> Ideal {
    if let Some(paths) = &c.paths {
        if c.kinds.iter().all(|&k| ch.get(k).diagonal) {
            return ideal_paths(c, paths, ch, want_grad, wanted);
        }
    }
    if !c.matrices {
        // A coherent channel on a row kept as Pauli paths only ([`PreparedRow::serves`]):
        // no number rather than a wrong one; the fit refuses such rows up front.
        let k_out = c.functionals.nrows();
        let grad = if want_grad {
            (0..c.kinds.len())
                .map(|l| {
                    let d = ch.get(c.kinds[l]).e.nrows();
                    vec![Ptm::from_element(d, d, f64::NAN); k_out]
                })
                .collect()
        } else {
            Vec::new()
        };
        return Ideal { q: vec![f64::NAN; k_out], grad: IdealGrad::Full(grad) };
    }
    let dim = c.s0.len();
    let k_out = c.functionals.nrows();
    let mut s = c.s0.clone();
    let mut tmp = DVector::zeros(dim);
    let mut states: Vec<DVector<f64>> =
        Vec::with_capacity(if want_grad { c.segs.len() } else { 0 });
    for seg in &c.segs {
        if want_grad {
            states.push(s.clone());
        }
        let ev = ch.get(c.kinds[seg.local]);
        if ev.diagonal {
            for i in 0..dim {
                tmp[i] = ev.e[(diag_index(seg.place, i), diag_index(seg.place, i))] * s[i];
            }
        } else {
            apply(&ev.e, seg.place, &s, &mut tmp);
        }
        match &seg.after {
            Some(m) => s.gemv(1.0, m, &tmp, 0.0),
            None => std::mem::swap(&mut s, &mut tmp),
        }
    }
    let qv = &c.functionals * &s;
    let q: Vec<f64> = qv.iter().copied().collect();
    if !want_grad {
        return Ideal { q, grad: IdealGrad::Full(Vec::new()) };
    }
    let kdim = |local: usize| ch.get(c.kinds[local]).e.nrows();
    let mut grad: Vec<Vec<Ptm>> =
        (0..c.kinds.len()).map(|l| vec![Ptm::zeros(kdim(l), kdim(l)); k_out]).collect();
    // l holds the backward functionals as rows (one per ideal outcome).
    let mut l = c.functionals.clone();
    let mut ltmp = DMatrix::zeros(k_out, dim);
    for (seg, sj) in c.segs.iter().zip(&states).rev() {
        if let Some(m) = &seg.after {
            ltmp.gemm(1.0, &l, m, 0.0);
            std::mem::swap(&mut l, &mut ltmp);
        }
        let ev = ch.get(c.kinds[seg.local]);
        let e = &ev.e;
        let g = &mut grad[seg.local];
        if ev.diagonal {
            // Only the diagonal of dq/dE meets a diagonal dE.
            for (y, gy) in g.iter_mut().enumerate() {
                for i in 0..dim {
                    let a = diag_index(seg.place, i);
                    gy[(a, a)] += l[(y, i)] * sj[i];
                }
            }
            for y in 0..k_out {
                for i in 0..dim {
                    let a = diag_index(seg.place, i);
                    ltmp[(y, i)] = l[(y, i)] * e[(a, a)];
                }
            }
            std::mem::swap(&mut l, &mut ltmp);
            continue;
        }
        match seg.place {
            Place::Full => {
                for (y, gy) in g.iter_mut().enumerate() {
                    gy.ger(1.0, &l.row(y).transpose(), sj, 1.0);
                }
                ltmp.gemm(1.0, &l, e, 0.0);
            }
            Place::Slot(slot) => {
                for (y, gy) in g.iter_mut().enumerate() {
                    for i in 0..16 {
                        let li = l[(y, i)];
                        if li == 0.0 {
                            continue;
                        }
                        let (a, b) = (i & 3, i >> 2);
                        for x in 0..4 {
                            if slot == 0 {
                                gy[(a, x)] += li * sj[x + 4 * b];
                            } else {
                                gy[(b, x)] += li * sj[a + 4 * x];
                            }
                        }
                    }
                }
                for y in 0..k_out {
                    for j in 0..16 {
                        let (a, b) = (j & 3, j >> 2);
                        ltmp[(y, j)] = if slot == 0 {
                            (0..4).map(|x| l[(y, x + 4 * b)] * e[(x, a)]).sum()
                        } else {
                            (0..4).map(|x| l[(y, a + 4 * x)] * e[(x, b)]).sum()
                        };
                    }
                }
            }
        }
        std::mem::swap(&mut l, &mut ltmp);
    }
    Ideal { q, grad: IdealGrad::Full(grad) }
}

/// The counted fast path: one-qubit row, depolarizing family.
/// <Z> = z_ideal prod_k lambda_k^{n_k}; returns q and d q_0 / d lambda_k per local kind.
fn ideal_counted(c: &Compiled, ch: &Channels) -> (Vec<f64>, Vec<f64>) {
    let lam: Vec<f64> = c.kinds.iter().map(|&k| ch.get(k).e[(1, 1)]).collect();
    let pw: Vec<f64> = lam.iter().zip(&c.occurrences).map(|(l, &n)| l.powi(n as i32)).collect();
    let z = c.z_ideal * pw.iter().product::<f64>();
    let dq0 = (0..lam.len())
        .map(|i| {
            let others: f64 =
                pw.iter().enumerate().filter(|&(j, _)| j != i).map(|(_, p)| p).product();
            let n = c.occurrences[i] as i32;
            0.5 * c.z_ideal * others * n as f64 * lam[i].powi(n - 1)
        })
        .collect();
    (vec![0.5 * (1.0 + z), 0.5 * (1.0 - z)], dq0)
}

/// [`ideal_counted`]'s q without the derivatives: the same products in the same order,
/// with nothing allocated.
fn counted_probabilities(c: &Compiled, ch: &Channels) -> [f64; 2] {
    let mut product = 1.0;
    for (&k, &n) in c.kinds.iter().zip(&c.occurrences) {
        product *= ch.get(k).e[(1, 1)].powi(n as i32);
    }
    let z = c.z_ideal * product;
    [0.5 * (1.0 + z), 0.5 * (1.0 - z)]
}

fn uses_counted_path(c: &Compiled, params: &Params) -> bool {
    c.n_slots == 1 && params.family == Family::Depolarizing
}

/// Applies readout to q; returns p and dp/de for (slot, which) pairs.
fn with_readout(c: &Compiled, params: &Params, q: &[f64]) -> (Vec<f64>, Vec<[Vec<f64>; 2]>) {
    readout_apply(c, params, q, true)
}

/// [`with_readout`], with the derivatives only when `want_d` (empty otherwise). Works on
/// fixed-size arrays: a row has at most two slots.
fn readout_apply(
    c: &Compiled,
    params: &Params,
    q: &[f64],
    want_d: bool,
) -> (Vec<f64>, Vec<[Vec<f64>; 2]>) {
    let n = c.n_slots;
    let mut conf = [[[0.0; 2]; 2]; 2];
    for (s, &r) in c.readout.iter().enumerate() {
        conf[s] = confusion(params.readout[r].errors());
    }
    let k = q.len();
    let mut p = vec![0.0; k];
    let mut dp: Vec<[Vec<f64>; 2]> =
        if want_d { (0..n).map(|_| [vec![0.0; k], vec![0.0; k]]).collect() } else { Vec::new() };
    // dc/de0 and dc/de1 of one slot's confusion.
    let dconf = [[[-1.0, 0.0], [1.0, 0.0]], [[0.0, 1.0], [0.0, -1.0]]];
    for x in 0..k {
        for (y, &qy) in q.iter().enumerate() {
            let mut f = [0.0; 2];
            for (s, fs) in f.iter_mut().enumerate().take(n) {
                *fs = conf[s][(x >> s) & 1][(y >> s) & 1];
            }
            p[x] += f[..n].iter().product::<f64>() * qy;
            if !want_d {
                continue;
            }
            for s in 0..n {
                let rest: f64 = (0..n).filter(|&t| t != s).map(|t| f[t]).product();
                for (w, dc) in dconf.iter().enumerate() {
                    dp[s][w][x] += rest * dc[(x >> s) & 1][(y >> s) & 1] * qy;
                }
            }
        }
    }
    (p, dp)
}

/// The probabilities of a row, without derivatives (faster).
pub(crate) fn probabilities_with(row: &PreparedRow, params: &Params, ch: &Channels) -> Vec<f64> {
    let c = &row.compiled;
    let q = if uses_counted_path(c, params) {
        counted_probabilities(c, ch).to_vec()
    } else {
        ideal_ptm(c, ch, false).q
    };
    readout_apply(c, params, &q, false).0
}

/// The prediction of a row with its Jacobian, given prebuilt channels.
pub(crate) fn predict_with(row: &PreparedRow, params: &Params, ch: &Channels) -> Prediction {
    predict_path(row, params, ch, uses_counted_path(&row.compiled, params), &|_| true)
}

/// [`predict_with`] for a fit that moves only the kinds `free`: the Jacobian's columns of
/// the other kinds may be left zero (their values are never read by such a fit); every
/// other figure is the same number.
pub(crate) fn predict_for_free(
    row: &PreparedRow,
    params: &Params,
    ch: &Channels,
    free: &dyn Fn(KindIx) -> bool,
) -> Prediction {
    predict_path(row, params, ch, uses_counted_path(&row.compiled, params), free)
}

fn predict_path(
    row: &PreparedRow,
    params: &Params,
    ch: &Channels,
    counted: bool,
    free: &dyn Fn(KindIx) -> bool,
) -> Prediction {
    let c = &row.compiled;
    let k_out = 1 << c.n_slots;
    let mut columns = Vec::new();
    for &k in &c.kinds {
        for index in 0..params.kinds[k].raw().len() {
            columns.push(ParamRef::Kind { kind: k, index });
        }
    }
    let n_kind_cols = columns.len();
    for &qubit in &c.readout {
        for index in 0..2 {
            columns.push(ParamRef::Readout { qubit, index });
        }
    }
    // dq[y][col] for kind columns.
    let mut dq = DMatrix::zeros(k_out, n_kind_cols);
    let q = if counted {
        let (q, dq0) = ideal_counted(c, ch);
        // One raw coordinate per kind under `depolarizing`: column = local kind index.
        for (col, &k) in c.kinds.iter().enumerate() {
            let dlam = ch.get(k).de[0][(1, 1)];
            dq[(0, col)] = dq0[col] * dlam;
            dq[(1, col)] = -dq0[col] * dlam;
        }
        q
    } else {
        let ideal = ideal_ptm_for(c, ch, true, &|local| free(c.kinds[local]));
        let mut col = 0;
        for (local, &k) in c.kinds.iter().enumerate() {
            let wanted = free(k);
            for de in &ch.get(k).de {
                for y in (0..k_out).filter(|_| wanted) {
                    dq[(y, col)] = ideal.grad.contract(local, y, de);
                }
                col += 1;
            }
        }
        ideal.q
    };
    let (p, dp_read) = with_readout(c, params, &q);
    let mut jac = DMatrix::zeros(k_out, columns.len());
    // Readout is linear in q: dp/dtheta = C dq/dtheta; build C column by column.
    for y in 0..k_out {
        let mut unit = vec![0.0; k_out];
        unit[y] = 1.0;
        let cy = readout_apply(c, params, &unit, false).0;
        for x in 0..k_out {
            for col in 0..n_kind_cols {
                jac[(x, col)] += cy[x] * dq[(y, col)];
            }
        }
    }
    for (s, &r) in c.readout.iter().enumerate() {
        let de = params.readout[r].derivatives();
        for w in 0..2 {
            for x in 0..k_out {
                jac[(x, n_kind_cols + 2 * s + w)] = dp_read[s][w][x] * de[w];
            }
        }
    }
    Prediction { probs: p, columns, jacobian: jac }
}

/// A row's outcome distribution under `params` and its Jacobian with respect to the raw
/// coordinates of the row's kinds and readouts. `params` must have the shape of the
/// [`ModelSpec`] the row was prepared with (see [`Params::matches`]).
pub fn predict(row: &PreparedRow, params: &Params) -> Prediction {
    let ch = Channels::new(std::iter::once(row), params);
    predict_with(row, params, &ch)
}

/// Outcome distributions of rows that may be missing (empty for a missing row), in
/// parallel, with every channel built once; same precondition as [`predict`].
pub fn predict_rows(rows: &[Option<PreparedRow>], params: &Params) -> Vec<Vec<f64>> {
    predict_each(rows, params, true)
}

/// [`predict_rows`], in parallel or, when `parallel` is false, in order on the calling
/// thread (for work that already runs in parallel with other work of its kind). The same
/// numbers either way.
pub fn predict_each(
    rows: &[Option<PreparedRow>],
    params: &Params,
    parallel: bool,
) -> Vec<Vec<f64>> {
    use rayon::prelude::*;
    let ch = Channels::new(rows.iter().flatten(), params);
    let one = |r: &Option<PreparedRow>| {
        r.as_ref().map(|r| probabilities_with(r, params, &ch)).unwrap_or_default()
    };
    if parallel {
        rows.par_iter().map(one).collect()
    } else {
        rows.iter().map(one).collect()
    }
}

/// Outcome distributions of every row (reference and context rows alike); same
/// precondition as [`predict`].
pub fn predict_all(rows: &[PreparedRow], params: &Params) -> Vec<Vec<f64>> {
    let ch = Channels::new(rows, params);
    rows.iter().map(|r| probabilities_with(r, params, &ch)).collect()
}

#[cfg(test)]
pub(crate) mod tests {
    use super::*;
    use crate::gate::Gate;
    use crate::model::channel::KindParams;
    use crate::model::Readout;
    use rand::{RngExt, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    /// A random program: one-qubit rotations and occurrences; on two slots also joint cz
    /// and cx steps. Kinds: 0 = sx-like on slot 0, 1 = id-like, 2 = on slot 1, 3 = pair.
    pub(crate) fn random_row(n: usize, layers: usize, rng: &mut ChaCha8Rng) -> Row {
        let mut steps = Vec::new();
        let one = |rng: &mut ChaCha8Rng, kinds: [usize; 2]| {
            let g = [Gate::Sx, Gate::Rz, Gate::H, Gate::Id][rng.random_range(0..4)];
            let angle = if g == Gate::Rz { rng.random_range(-3.0..3.0) } else { 0.0 };
            match g {
                Gate::Rz => Some(Action::ideal(g, angle)),
                Gate::Id => Some(Action::occurrence(g, 0.0, kinds[1])),
                _ => Some(Action::occurrence(g, angle, kinds[0])),
            }
        };
        for _ in 0..layers {
            if n == 2 && rng.random_range(0..3) == 0 {
                let gate = if rng.random::<bool>() { Gate::Cz } else { Gate::Cx };
                steps.push(Step::Joint {
                    action: Action::occurrence(gate, 0.0, 3),
                    reversed: rng.random(),
                });
            } else {
                let a0 = one(rng, [0, 1]);
                let a1 = if n == 2 { one(rng, [2, 1]) } else { None };
                steps.push(Step::Local([a0, a1]));
            }
        }
        let counts = vec![10; 1 << n];
        Row { steps, readout: (0..n).collect(), counts }
    }

    pub(crate) fn spec(family: Family) -> ModelSpec {
        ModelSpec { family, kind_arity: vec![1, 1, 1, 2], n_qubits: 2 }
    }

    pub(crate) fn random_params(family: Family, rng: &mut ChaCha8Rng) -> Params {
        let mut p = Params::initial(&spec(family)).unwrap();
        for k in &mut p.kinds {
            let rates: Vec<f64> =
                (1..ptm::pauli_dim(k.arity())).map(|_| rng.random_range(0.001..0.01)).collect();
            let angles: Vec<f64> = rates.iter().map(|_| rng.random_range(-0.1..0.1)).collect();
            let base = KindParams::pauli_coherent(k.arity(), &rates, &angles).unwrap();
            *k = base.convert(family);
        }
        p.readout = vec![Readout::new(0.02, 0.05).unwrap(), Readout::new(0.03, 0.01).unwrap()];
        p
    }

    /// [`random_row`] with Clifford angles only (rz by multiples of pi/2), so that the row
    /// compiles to Pauli paths.
    fn random_clifford_row(n: usize, layers: usize, rng: &mut ChaCha8Rng) -> Row {
        let mut row = random_row(n, layers, rng);
        for step in &mut row.steps {
            if let Step::Local(acts) = step {
                for a in acts.iter_mut().flatten() {
                    if a.gate == Gate::Rz {
                        a.angle = std::f64::consts::FRAC_PI_2 * rng.random_range(-3..=3) as f64;
                    }
                }
            }
        }
        row
    }

    #[test]
    fn pauli_paths_equal_the_transfer_matrix_product() {
        let mut rng = ChaCha8Rng::seed_from_u64(23);
        for family in [Family::Depolarizing, Family::Pauli] {
            for n in [1, 2] {
                for _ in 0..20 {
                    let row = random_clifford_row(n, 40, &mut rng);
                    let fast = PreparedRow::new(&row, &spec(family)).unwrap();
                    assert!(fast.compiled.paths.is_some() && fast.compiled.segs.is_empty());
                    // The coherent family keeps the matrices; without paths it must use them.
                    let mut slow = PreparedRow::new(&row, &spec(Family::PauliCoherent)).unwrap();
                    Arc::get_mut(&mut slow.compiled).unwrap().paths = None;
                    let params = random_params(family, &mut rng);
                    let run = |r: &PreparedRow| {
                        predict_path(r, &params, &Channels::new([r], &params), false, &|_| true)
                    };
                    let (a, b) = (run(&fast), run(&slow));
                    for (x, y) in a.probs.iter().zip(&b.probs) {
                        assert!((x - y).abs() < 1e-13, "{family:?} {n}: {x} vs {y}");
                    }
                    assert_eq!(a.columns, b.columns);
                    assert!((&a.jacobian - &b.jacobian).amax() < 1e-12, "{family:?} {n}");
                }
            }
        }
        // A non-Clifford angle keeps the transfer matrices.
        let mut row = random_clifford_row(2, 10, &mut rng);
        row.steps.push(Step::Local([Some(Action::ideal(Gate::Rz, 0.3)), None]));
        row.steps.push(Step::Local([Some(Action::occurrence(Gate::Sx, 0.0, 0)), None]));
        let p = PreparedRow::new(&row, &spec(Family::Depolarizing)).unwrap();
        assert!(p.compiled.paths.is_none() && !p.compiled.segs.is_empty());
    }

    fn check_jacobian(family: Family, n: usize, counted: bool) {
        let mut rng = ChaCha8Rng::seed_from_u64(11 + n as u64);
        let row = PreparedRow::new(&random_row(n, 30, &mut rng), &spec(family)).unwrap();
        let params = random_params(family, &mut rng);
        let ch = Channels::new([&row], &params);
        let pred = predict_path(&row, &params, &ch, counted, &|_| true);
        let total: f64 = pred.probs.iter().sum();
        assert!((total - 1.0).abs() < 1e-12);
        for (col, r) in pred.columns.iter().enumerate() {
            let h = 1e-6;
            let (mut pp, mut pm) = (params.clone(), params.clone());
            match *r {
                ParamRef::Kind { kind, index } => {
                    pp.kinds[kind].raw_mut()[index] += h;
                    pm.kinds[kind].raw_mut()[index] -= h;
                }
                ParamRef::Readout { qubit, index } => {
                    pp.readout[qubit].raw[index] += h;
                    pm.readout[qubit].raw[index] -= h;
                }
            }
            let fp = predict_path(&row, &pp, &Channels::new([&row], &pp), counted, &|_| true).probs;
            let fm = predict_path(&row, &pm, &Channels::new([&row], &pm), counted, &|_| true).probs;
            for x in 0..fp.len() {
                let fd = (fp[x] - fm[x]) / (2.0 * h);
                let an = pred.jacobian[(x, col)];
                assert!(
                    (fd - an).abs() < 1e-6 * (1.0 + an.abs()),
                    "{family:?} n={n} {r:?} x={x}: fd {fd} vs {an}"
                );
            }
        }
    }

    #[test]
    fn jacobian_matches_central_differences() {
        for family in [Family::Depolarizing, Family::Pauli, Family::PauliCoherent] {
            for n in [1, 2] {
                check_jacobian(family, n, false);
            }
        }
        check_jacobian(Family::Depolarizing, 1, true);
    }

    #[test]
    fn free_kind_columns_are_the_full_prediction_s_to_the_bit() {
        // A fit holding kinds fixed reads only the free kinds' (and readout) columns: those
        // must be exactly the numbers of the prediction with every gradient.
        let mut rng = ChaCha8Rng::seed_from_u64(11);
        for family in [Family::Depolarizing, Family::Pauli] {
            for _ in 0..4 {
                let row = PreparedRow::new(&random_row(2, 30, &mut rng), &spec(family)).unwrap();
                let params = random_params(family, &mut rng);
                let ch = Channels::new([&row], &params);
                let all = predict_with(&row, &params, &ch);
                let free = |k: KindIx| k == 3;
                let some = predict_for_free(&row, &params, &ch, &free);
                assert_eq!(all.probs, some.probs);
                assert_eq!(all.columns, some.columns);
                for (c, r) in all.columns.iter().enumerate() {
                    let kept = match *r {
                        ParamRef::Kind { kind, .. } => free(kind),
                        ParamRef::Readout { .. } => true,
                    };
                    if kept {
                        for x in 0..all.probs.len() {
                            assert_eq!(
                                all.jacobian[(x, c)].to_bits(),
                                some.jacobian[(x, c)].to_bits()
                            );
                        }
                    }
                }
            }
        }
    }

    #[test]
    fn counted_path_equals_transfer_matrix_path() {
        let mut rng = ChaCha8Rng::seed_from_u64(5);
        for _ in 0..5 {
            let row = PreparedRow::new(&random_row(1, 40, &mut rng), &spec(Family::Depolarizing))
                .unwrap();
            let params = random_params(Family::Depolarizing, &mut rng);
            let ch = Channels::new([&row], &params);
            let a = predict_path(&row, &params, &ch, true, &|_| true);
            let b = predict_path(&row, &params, &ch, false, &|_| true);
            for x in 0..2 {
                assert!((a.probs[x] - b.probs[x]).abs() < 1e-12);
            }
            assert!((a.jacobian.clone() - b.jacobian).amax() < 1e-10);
        }
    }

    #[test]
    fn invalid_programs_are_errors() {
        let s = spec(Family::Pauli);
        let good = Row { steps: vec![], readout: vec![0], counts: vec![1, 2] };
        assert!(PreparedRow::new(&good, &s).is_ok());
        let mut r = good.clone();
        r.counts = vec![1, 2, 3];
        assert!(PreparedRow::new(&r, &s).is_err());
        let mut r = good.clone();
        r.steps = vec![Step::Local([Some(Action::occurrence(Gate::Sx, 0.0, 3)), None])];
        assert!(PreparedRow::new(&r, &s).is_err(), "two-qubit kind on one slot");
        let mut r = good.clone();
        r.steps = vec![Step::Joint { action: Action::ideal(Gate::Cz, 0.0), reversed: false }];
        assert!(PreparedRow::new(&r, &s).is_err(), "joint step in one-slot row");
        let mut r = good.clone();
        r.readout = vec![7];
        assert!(PreparedRow::new(&r, &s).is_err());
        let mut r = good;
        r.steps = vec![Step::Local([Some(Action::occurrence(Gate::Sx, 0.0, 99)), None])];
        assert!(PreparedRow::new(&r, &s).is_err());
    }

    proptest::proptest! {
        /// Whatever raw coordinates the optimiser tries, every channel stays CPTP, so every
        /// prediction is a probability distribution.
        #[test]
        fn predictions_stay_in_the_simplex(seed in 0u64..1000, spread in 0.0f64..25.0, fam in 0usize..3) {
            let family = [Family::Depolarizing, Family::Pauli, Family::PauliCoherent][fam];
            let mut rng = ChaCha8Rng::seed_from_u64(seed);
            let n = 1 + (seed % 2) as usize;
            let row = PreparedRow::new(&random_row(n, 12, &mut rng), &spec(family)).unwrap();
            let mut params = random_params(family, &mut rng);
            for k in &mut params.kinds {
                for x in k.raw_mut() {
                    *x = rng.random_range(-spread..=spread);
                }
            }
            for r in &mut params.readout {
                r.raw = [rng.random_range(-spread..=spread), rng.random_range(-spread..=spread)];
            }
            let p = predict(&row, &params).probs;
            let total: f64 = p.iter().sum();
            proptest::prop_assert!((total - 1.0).abs() < 1e-9);
            proptest::prop_assert!(p.iter().all(|&x| x > -1e-12 && x < 1.0 + 1e-12), "{:?}", p);
        }
    }
}
