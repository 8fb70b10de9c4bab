//! Error channels of operation kinds and readout confusions, in unconstrained coordinates.
//!
//! The optimiser moves "raw" coordinates that map onto valid (CPTP) channels whatever their
//! values: a logistic map for the depolarizing rate and for readout errors, a softmax with
//! the identity component pinned for Pauli rates, and free angles for the coherent part.
//! Users read the "natural" coordinates (rates, angles, readout probabilities).

use nalgebra::DMatrix;
use std::sync::Arc;

use super::ptm::{self, CMat, Ptm};
use crate::{Error, Result};

/// Index of an operation kind in the problem's kind table.
pub type KindIx = usize;

/// The family of error channels every kind is fitted with (method.md section 3).
#[derive(Copy, Clone, Debug, PartialEq, Eq, Hash)]
pub enum Family {
    /// One rate per kind: E(rho) = (1 - p) rho + p I/d.
    Depolarizing,
    /// Stochastic Pauli channel: d^2 - 1 rates (3 per one-qubit kind, 15 per two-qubit kind).
    Pauli,
    /// A Pauli channel after a small unitary exp(-i sum_P h_P P): 6 / 30 parameters.
    PauliCoherent,
}

impl Family {
    /// Number of parameters of a kind acting on `arity` qubits.
    pub fn n_params(self, arity: usize) -> usize {
        let m = ptm::pauli_dim(arity) - 1;
        match self {
            Family::Depolarizing => 1,
            Family::Pauli => m,
            Family::PauliCoherent => 2 * m,
        }
    }

    /// The family's name as used on the command line and in reports.
    pub fn name(self) -> &'static str {
        match self {
            Family::Depolarizing => "depolarizing",
            Family::Pauli => "pauli",
            Family::PauliCoherent => "pauli+coherent",
        }
    }

    /// Looks a family up by [`Family::name`].
    pub fn from_name(s: &str) -> Option<Family> {
        [Family::Depolarizing, Family::Pauli, Family::PauliCoherent]
            .into_iter()
            .find(|f| f.name() == s)
    }
}

/// Largest valid depolarizing parameter p (lambda = 1 - p >= -1/(d^2 - 1)).
fn depolarizing_max(arity: usize) -> f64 {
    let d2 = ptm::pauli_dim(arity) as f64;
    d2 / (d2 - 1.0)
}

fn logistic(x: f64) -> f64 {
    1.0 / (1.0 + (-x).exp())
}

fn logit(p: f64) -> f64 {
    (p / (1.0 - p)).ln()
}

/// Smallest rate a raw coordinate is asked to represent; exact zeros sit at -infinity.
const RATE_FLOOR: f64 = 1e-12;

/// Label of Pauli index `p` on `arity` qubits, slot 0 first ("X", "XI" = X on slot 0).
pub fn pauli_label(arity: usize, p: usize) -> String {
    (0..arity).map(|slot| ['I', 'X', 'Y', 'Z'][(p >> (2 * slot)) & 3]).collect()
}

/// One kind's error channel E_k in raw coordinates.
///
/// Invariant: `raw.len() == family.n_params(arity)`, `arity` is 1 or 2.
///
/// The coordinates are shared until written (a fit copies the whole chip's parameters
/// several times, and writes a few kinds), so a copy allocates nothing per kind.
#[derive(Clone, Debug, PartialEq)]
pub struct KindParams {
    arity: usize,
    family: Family,
    raw: Arc<[f64]>,
}

/// An error channel's PTM and its derivatives with respect to each raw coordinate.
#[derive(Clone, Debug)]
pub struct ChannelEval {
    /// The error PTM E (4x4 or 16x16).
    pub e: Ptm,
    /// dE / d raw_i.
    pub de: Vec<Ptm>,
    /// True when E and every dE are diagonal (the incoherent families), which lets row
    /// evaluation skip the matrix products.
    pub diagonal: bool,
}

impl KindParams {
    fn check_arity(arity: usize) -> Result<()> {
        if arity == 1 || arity == 2 {
            Ok(())
        } else {
            Err(Error::Usage(format!("an operation kind acts on 1 or 2 qubits, not {arity}")))
        }
    }

    /// A depolarizing channel with parameter p (PTM eigenvalue 1 - p on every non-identity
    /// Pauli), 0 <= p <= d^2/(d^2 - 1).
    pub fn depolarizing(arity: usize, p: f64) -> Result<KindParams> {
        Self::check_arity(arity)?;
        let pmax = depolarizing_max(arity);
        if !(0.0..=pmax).contains(&p) {
            return Err(Error::Usage(format!(
                "depolarizing parameter {p} is outside [0, {pmax:.4}]"
            )));
        }
        let x = (p / pmax).clamp(RATE_FLOOR, 1.0 - RATE_FLOOR);
        Ok(KindParams { arity, family: Family::Depolarizing, raw: Arc::from([logit(x)]) })
    }

    /// A Pauli channel with the d^2 - 1 non-identity rates in Pauli-index order.
    pub fn pauli(arity: usize, rates: &[f64]) -> Result<KindParams> {
        Self::check_arity(arity)?;
        let raw = softmax_inverse(arity, rates)?;
        Ok(KindParams { arity, family: Family::Pauli, raw: raw.into() })
    }

    /// A Pauli channel after exp(-i sum_P h_P P): rates and angles in Pauli-index order.
    pub fn pauli_coherent(arity: usize, rates: &[f64], angles: &[f64]) -> Result<KindParams> {
        Self::check_arity(arity)?;
        let mut raw = softmax_inverse(arity, rates)?;
        if angles.len() != raw.len() || angles.iter().any(|a| !a.is_finite()) {
            return Err(Error::Usage(format!(
                "a {arity}-qubit coherent error needs {} finite angles, got {:?}",
                raw.len(),
                angles
            )));
        }
        raw.extend_from_slice(angles);
        Ok(KindParams { arity, family: Family::PauliCoherent, raw: raw.into() })
    }

    /// The same error expressed in `family`: a Pauli channel with total error e becomes the
    /// depolarizing channel with the same process fidelity; dropped coherent angles are lost.
    pub fn convert(&self, family: Family) -> KindParams {
        let rates = self.pauli_rates();
        let m = rates.len();
        let out = match family {
            Family::Depolarizing => {
                let total: f64 = rates.iter().sum();
                KindParams::depolarizing(self.arity, total * depolarizing_max(self.arity))
            }
            Family::Pauli => KindParams::pauli(self.arity, &rates),
            Family::PauliCoherent => {
                let angles = self.coherent_angles().unwrap_or_else(|| vec![0.0; m]);
                KindParams::pauli_coherent(self.arity, &rates, &angles)
            }
        };
        // Every input here came from a valid channel, so the constructors cannot fail.
        out.unwrap_or_else(|_| self.clone())
    }

    /// The isotropic, incoherent channel with the same total Pauli error (used to judge
    /// identifiability away from accidental anisotropy).
    pub fn isotropic(&self) -> KindParams {
        let m = ptm::pauli_dim(self.arity) - 1;
        let total: f64 = self.pauli_rates().iter().sum();
        let rates = vec![total / m as f64; m];
        let k = match self.family {
            Family::Depolarizing => return self.clone(),
            Family::Pauli => KindParams::pauli(self.arity, &rates),
            Family::PauliCoherent => KindParams::pauli_coherent(self.arity, &rates, &vec![0.0; m]),
        };
        k.unwrap_or_else(|_| self.clone())
    }

    /// Number of qubits the kind acts on.
    pub fn arity(&self) -> usize {
        self.arity
    }

    /// The family of this channel.
    pub fn family(&self) -> Family {
        self.family
    }

    /// Raw (unconstrained) coordinates.
    pub fn raw(&self) -> &[f64] {
        &self.raw
    }

    /// Mutable raw coordinates (the optimiser's and tests' handle).
    pub fn raw_mut(&mut self) -> &mut [f64] {
        Arc::make_mut(&mut self.raw)
    }

    /// Pauli probabilities over all d^2 Paulis (index 0 = identity) and their derivatives
    /// with respect to the raw coordinates (`d[i][P]`).
    fn pauli_probs(&self) -> (Vec<f64>, Vec<Vec<f64>>) {
        let dim = ptm::pauli_dim(self.arity);
        match self.family {
            Family::Depolarizing => {
                let pmax = depolarizing_max(self.arity);
                let s = logistic(self.raw[0]);
                let p = pmax * s;
                let dp = pmax * s * (1.0 - s);
                let each = p / dim as f64;
                let mut probs = vec![each; dim];
                probs[0] = 1.0 - each * (dim - 1) as f64;
                let mut d = vec![dp / dim as f64; dim];
                d[0] = -dp * (dim - 1) as f64 / dim as f64;
                (probs, vec![d])
            }
            Family::Pauli | Family::PauliCoherent => {
                let m = dim - 1;
                let a = &self.raw[..m];
                let amax = a.iter().copied().fold(0.0f64, f64::max);
                let mut w: Vec<f64> = std::iter::once(0.0)
                    .chain(a.iter().copied())
                    .map(|x| (x - amax).exp())
                    .collect();
                let z: f64 = w.iter().sum();
                for x in &mut w {
                    *x /= z;
                }
                let probs = w;
                let mut d = vec![vec![0.0; dim]; self.raw.len()];
                for (j, dj) in d.iter_mut().enumerate().take(m) {
                    for (p, dp) in dj.iter_mut().enumerate() {
                        let delta = if p == j + 1 { 1.0 } else { 0.0 };
                        *dp = probs[p] * (delta - probs[j + 1]);
                    }
                }
                (probs, d)
            }
        }
    }

    /// The d^2 - 1 non-identity Pauli error rates (for `depolarizing`, p/d^2 each).
    pub fn pauli_rates(&self) -> Vec<f64> {
        self.pauli_probs().0[1..].to_vec()
    }

    /// The coherent angles h_P, for `pauli+coherent` only.
    pub fn coherent_angles(&self) -> Option<Vec<f64>> {
        let m = ptm::pauli_dim(self.arity) - 1;
        (self.family == Family::PauliCoherent).then(|| self.raw[m..].to_vec())
    }

    /// The depolarizing parameter p with the same process fidelity: p = e d^2/(d^2 - 1) for
    /// total Pauli error e (the exact parameter for the `depolarizing` family).
    pub fn depolarizing_rate(&self) -> f64 {
        let e: f64 = self.pauli_rates().iter().sum();
        e * depolarizing_max(self.arity)
    }

    /// Error rate: the process infidelity 1 - Tr(E)/d^2 of the error channel (equal to the
    /// total Pauli error probability for the incoherent families).
    pub fn error_rate(&self) -> f64 {
        let e = self.channel().e;
        1.0 - e.trace() / e.nrows() as f64
    }

    /// The error PTM and its raw-coordinate derivatives.
    pub fn channel(&self) -> ChannelEval {
        let n = self.arity;
        let (probs, dprobs) = self.pauli_probs();
        let lam = ptm::pauli_eigenvalues(n, &probs);
        let dim = lam.len();
        let diag = |v: &[f64]| Ptm::from_fn(dim, dim, |i, j| if i == j { v[i] } else { 0.0 });
        let dlam: Vec<Vec<f64>> = dprobs.iter().map(|dp| ptm::pauli_eigenvalues(n, dp)).collect();
        match self.family {
            Family::Depolarizing | Family::Pauli => ChannelEval {
                e: diag(&lam),
                de: dlam.iter().map(|d| diag(d)).collect(),
                diagonal: true,
            },
            Family::PauliCoherent => {
                let m = dim - 1;
                let gens: Vec<CMat> = (1..dim).map(|p| ptm::pauli(n, p)).collect();
                let (v, dv) = ptm::expm_hermitian(&gens, &self.raw[m..]);
                let rv = ptm::unitary_ptm(&v);
                let d = diag(&lam);
                let e = &d * &rv;
                let mut de: Vec<Ptm> = dlam.iter().take(m).map(|dl| diag(dl) * &rv).collect();
                de.extend(dv.iter().map(|dvj| &d * ptm::unitary_ptm_derivative(&v, dvj)));
                ChannelEval { e, de, diagonal: false }
            }
        }
    }

    /// Natural coordinates: [p] for `depolarizing`; the d^2 - 1 Pauli rates for `pauli`;
    /// rates then angles for `pauli+coherent`.
    pub fn natural(&self) -> Vec<f64> {
        match self.family {
            Family::Depolarizing => vec![self.depolarizing_rate()],
            Family::Pauli => self.pauli_rates(),
            Family::PauliCoherent => {
                let mut v = self.pauli_rates();
                v.extend(self.coherent_angles().unwrap_or_default());
                v
            }
        }
    }

    /// Names of the natural coordinates ("p", "p_X", "h_ZZ", ...).
    pub fn natural_names(&self) -> Vec<String> {
        let m = ptm::pauli_dim(self.arity) - 1;
        match self.family {
            Family::Depolarizing => vec!["p".to_string()],
            Family::Pauli => (1..=m).map(|p| format!("p_{}", pauli_label(self.arity, p))).collect(),
            Family::PauliCoherent => (1..=m)
                .map(|p| format!("p_{}", pauli_label(self.arity, p)))
                .chain((1..=m).map(|p| format!("h_{}", pauli_label(self.arity, p))))
                .collect(),
        }
    }

    /// d natural / d raw (square, invertible while every rate is inside its range).
    pub fn natural_jacobian(&self) -> DMatrix<f64> {
        let n = self.raw.len();
        let (probs, dprobs) = self.pauli_probs();
        match self.family {
            Family::Depolarizing => {
                let dp: f64 = dprobs[0][1..].iter().sum::<f64>() * depolarizing_max(self.arity);
                DMatrix::from_element(1, 1, dp)
            }
            Family::Pauli | Family::PauliCoherent => {
                let m = probs.len() - 1;
                DMatrix::from_fn(n, n, |i, j| {
                    if i < m && j < m {
                        dprobs[j][i + 1]
                    } else if i == j {
                        1.0
                    } else {
                        0.0
                    }
                })
            }
        }
    }
}

/// Raw softmax coordinates a_P = ln(p_P / p_I) for given non-identity rates.
fn softmax_inverse(arity: usize, rates: &[f64]) -> Result<Vec<f64>> {
    let m = ptm::pauli_dim(arity) - 1;
    let total: f64 = rates.iter().sum();
    if rates.len() != m || rates.iter().any(|r| !(0.0..=1.0).contains(r)) || total >= 1.0 {
        return Err(Error::Usage(format!(
            "a {arity}-qubit Pauli channel needs {m} rates in [0, 1] summing below 1, got {rates:?}"
        )));
    }
    let pi = 1.0 - total;
    Ok(rates.iter().map(|&r| (r.max(RATE_FLOOR) / pi).ln()).collect())
}

/// One qubit's readout confusion in raw coordinates: e = 0.5 * logistic(raw), so each of
/// P(read 1 | 0) and P(read 0 | 1) stays in (0, 0.5).
#[derive(Copy, Clone, Debug, PartialEq)]
pub struct Readout {
    /// Raw coordinates for (P(1|0), P(0|1)).
    pub raw: [f64; 2],
}

impl Readout {
    /// A readout with P(read 1 | 0) = `e0` and P(read 0 | 1) = `e1`, both in [0, 0.5).
    pub fn new(e0: f64, e1: f64) -> Result<Readout> {
        for e in [e0, e1] {
            if !(0.0..0.5).contains(&e) {
                return Err(Error::Usage(format!("readout error {e} is outside [0, 0.5)")));
            }
        }
        let r = |e: f64| logit((2.0 * e).clamp(RATE_FLOOR, 1.0 - RATE_FLOOR));
        Ok(Readout { raw: [r(e0), r(e1)] })
    }

    /// (P(read 1 | 0), P(read 0 | 1)).
    pub fn errors(&self) -> [f64; 2] {
        self.raw.map(|x| 0.5 * logistic(x))
    }

    /// d error / d raw for each of the two errors.
    pub fn derivatives(&self) -> [f64; 2] {
        self.raw.map(|x| {
            let s = logistic(x);
            0.5 * s * (1.0 - s)
        })
    }
}

/// The structure of a model problem: family, the arity of every kind in the kind table,
/// and how many qubits carry readout parameters.
#[derive(Clone, Debug, PartialEq)]
pub struct ModelSpec {
    /// The error family every kind uses.
    pub family: Family,
    /// `kind_arity[k]` is 1 or 2.
    pub kind_arity: Vec<usize>,
    /// Qubits (readout parameters) indexed by [`crate::layout::QubitIx`].
    pub n_qubits: usize,
}

/// All parameters of the product model: one channel per kind, one readout per qubit.
#[derive(Clone, Debug, PartialEq)]
pub struct Params {
    /// The family every kind uses.
    pub family: Family,
    /// Channel of kind k at index k.
    pub kinds: Vec<KindParams>,
    /// Readout of qubit q at index q.
    pub readout: Vec<Readout>,
}

/// Default starting point: total error 0.5% per one-qubit kind, 2% per two-qubit kind,
/// 2% readout error each way (typical magnitudes of the trade: common practice).
impl Params {
    /// `given`, or the default starting point for `spec` when none is given (built only
    /// then: it holds every kind of the chip).
    pub fn given_or_initial<'a>(
        given: Option<&'a Params>,
        spec: &ModelSpec,
    ) -> Result<std::borrow::Cow<'a, Params>> {
        Ok(match given {
            Some(p) => std::borrow::Cow::Borrowed(p),
            None => std::borrow::Cow::Owned(Params::initial(spec)?),
        })
    }

    /// The default starting point for `spec`.
    pub fn initial(spec: &ModelSpec) -> Result<Params> {
        let kinds = spec
            .kind_arity
            .iter()
            .map(|&a| {
                let total = if a == 1 { 0.005 } else { 0.02 };
                let m = ptm::pauli_dim(a.clamp(1, 2)) - 1;
                let rates = vec![total / m as f64; m];
                KindParams::pauli(a, &rates).map(|k| k.convert(spec.family))
            })
            .collect::<Result<Vec<_>>>()?;
        let r = Readout::new(0.02, 0.02)?;
        Ok(Params { family: spec.family, kinds, readout: vec![r; spec.n_qubits] })
    }

    /// True when `self` has the shape `spec` describes.
    pub fn matches(&self, spec: &ModelSpec) -> bool {
        self.family == spec.family
            && self.readout.len() == spec.n_qubits
            && self.kinds.len() == spec.kind_arity.len()
            && self
                .kinds
                .iter()
                .zip(&spec.kind_arity)
                .all(|(k, &a)| k.arity == a && k.family == spec.family)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn fd_check(k: &KindParams) {
        let ev = k.channel();
        for i in 0..k.raw.len() {
            let h = 1e-6;
            let (mut kp, mut km) = (k.clone(), k.clone());
            kp.raw_mut()[i] += h;
            km.raw_mut()[i] -= h;
            let fd = (kp.channel().e - km.channel().e) / (2.0 * h);
            let err = (fd - &ev.de[i]).amax();
            assert!(err < 1e-7, "{:?} coordinate {i}: {err}", k.family);
        }
    }

    #[test]
    fn channel_derivatives_match_finite_differences() {
        fd_check(&KindParams::depolarizing(1, 0.03).unwrap());
        fd_check(&KindParams::depolarizing(2, 0.05).unwrap());
        fd_check(&KindParams::pauli(1, &[0.01, 0.02, 0.03]).unwrap());
        let r2: Vec<f64> = (1..16).map(|i| 0.001 * i as f64).collect();
        fd_check(&KindParams::pauli(2, &r2).unwrap());
        fd_check(&KindParams::pauli_coherent(1, &[0.01, 0.02, 0.03], &[0.05, -0.02, 0.1]).unwrap());
        let h2: Vec<f64> = (1..16).map(|i| 0.01 * (i as f64 - 7.0)).collect();
        fd_check(&KindParams::pauli_coherent(2, &r2, &h2).unwrap());
    }

    #[test]
    fn natural_round_trip_and_jacobian() {
        let k = KindParams::pauli_coherent(1, &[0.01, 0.02, 0.03], &[0.05, -0.02, 0.1]).unwrap();
        let nat = k.natural();
        let want = [0.01, 0.02, 0.03, 0.05, -0.02, 0.1];
        for (a, b) in nat.iter().zip(want) {
            assert!((a - b).abs() < 1e-12);
        }
        let s = k.natural_jacobian();
        for j in 0..k.raw.len() {
            let h = 1e-6;
            let (mut kp, mut km) = (k.clone(), k.clone());
            kp.raw_mut()[j] += h;
            km.raw_mut()[j] -= h;
            for i in 0..nat.len() {
                let fd = (kp.natural()[i] - km.natural()[i]) / (2.0 * h);
                assert!((fd - s[(i, j)]).abs() < 1e-7);
            }
        }
        let d = KindParams::depolarizing(1, 0.04).unwrap();
        assert!((d.natural()[0] - 0.04).abs() < 1e-12);
        // Pauli total error e = p (d^2 - 1)/d^2 for a depolarizing channel with parameter p
        // (Nielsen and Chuang, section 8.3.4).
        assert!((d.error_rate() - 0.03).abs() < 1e-12);
    }

    #[test]
    fn coherent_error_rate_is_process_infidelity() {
        // A rotation by angle 2h about Z has process fidelity cos^2(h) (from memory: the
        // entanglement fidelity |Tr U|^2 / d^2).
        let h = 0.1;
        let k = KindParams::pauli_coherent(1, &[0.0, 0.0, 0.0], &[0.0, 0.0, h]).unwrap();
        assert!((k.error_rate() - h.sin().powi(2)).abs() < 1e-9);
    }

    #[test]
    fn bad_channels_are_rejected() {
        assert!(KindParams::depolarizing(1, 1.5).is_err());
        assert!(KindParams::pauli(1, &[0.5, 0.5, 0.1]).is_err());
        assert!(KindParams::pauli(2, &[0.1, 0.1]).is_err());
        assert!(KindParams::depolarizing(3, 0.1).is_err());
        assert!(Readout::new(0.6, 0.1).is_err());
    }

    #[test]
    fn readout_round_trip() {
        let r = Readout::new(0.013, 0.041).unwrap();
        let e = r.errors();
        assert!((e[0] - 0.013).abs() < 1e-12 && (e[1] - 0.041).abs() < 1e-12);
    }
}
