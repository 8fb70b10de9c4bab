//! Pauli transfer matrices (PTMs) for one and two qubits, and the small complex algebra
//! needed to build them: Pauli operators, unitary PTMs and their derivatives, and the
//! exponential of a Hermitian generator with its derivative (Daleckii-Krein formula).
//!
//! Convention: a state is the real vector r_P = Tr(P rho), rho = (1/d) sum_P r_P P, and a
//! channel's PTM is R_ij = (1/d) Tr(P_i L(P_j)). Pauli index on two qubits is a + 4 b with
//! a the Pauli on slot 0 and b on slot 1 (0 = I, 1 = X, 2 = Y, 3 = Z); basis index of a
//! ket is bit(slot 0) + 2 bit(slot 1), as in [`crate::gate`].

use nalgebra::{DMatrix, DVector};
use num_complex::Complex64;

use crate::gate::Gate;

/// A complex square matrix (2x2 or 4x4 here).
pub type CMat = DMatrix<Complex64>;
/// A real transfer matrix (4x4 or 16x16).
pub type Ptm = DMatrix<f64>;

fn c(re: f64, im: f64) -> Complex64 {
    Complex64::new(re, im)
}

/// The 2x2 Pauli matrix for index 0..4 (I, X, Y, Z).
fn sigma(i: usize) -> [[Complex64; 2]; 2] {
    let (o, l) = (c(0.0, 0.0), c(1.0, 0.0));
    match i {
        0 => [[l, o], [o, l]],
        1 => [[o, l], [l, o]],
        2 => [[o, c(0.0, -1.0)], [c(0.0, 1.0), o]],
        _ => [[l, o], [o, -l]],
    }
}

/// Hilbert-space dimension of `n` qubits (n = 1 or 2).
pub fn hilbert_dim(n: usize) -> usize {
    1 << n
}

/// Number of Pauli operators (PTM dimension) on `n` qubits.
pub fn pauli_dim(n: usize) -> usize {
    1 << (2 * n)
}

/// The Pauli operator with index `p` on `n` qubits (slot 0 = least significant base-4 digit).
pub fn pauli(n: usize, p: usize) -> CMat {
    let d = hilbert_dim(n);
    CMat::from_fn(d, d, |r, col| {
        (0..n).fold(c(1.0, 0.0), |acc, slot| {
            let s = sigma((p >> (2 * slot)) & 3);
            acc * s[(r >> slot) & 1][(col >> slot) & 1]
        })
    })
}

/// True when Pauli operators `p` and `q` on `n` qubits commute.
pub fn commute(n: usize, p: usize, q: usize) -> bool {
    let anti = (0..n)
        .filter(|slot| {
            let (a, b) = ((p >> (2 * slot)) & 3, (q >> (2 * slot)) & 3);
            a != 0 && b != 0 && a != b
        })
        .count();
    anti % 2 == 0
}

/// The PTM of a Pauli channel with eigenvalues `lambda` (lambda_0 = 1): diagonal.
pub fn pauli_eigenvalues(n: usize, probs: &[f64]) -> Vec<f64> {
    let dim = pauli_dim(n);
    (0..dim)
        .map(|q| (0..dim).map(|p| if commute(n, p, q) { probs[p] } else { -probs[p] }).sum::<f64>())
        .collect()
}

/// PTM of the unitary channel rho -> U rho U^dagger.
pub fn unitary_ptm(u: &CMat) -> Ptm {
    let n = if u.nrows() == 2 { 1 } else { 2 };
    let dim = pauli_dim(n);
    let d = hilbert_dim(n) as f64;
    let paulis: Vec<CMat> = (0..dim).map(|p| pauli(n, p)).collect();
    let ud = u.adjoint();
    let images: Vec<CMat> = paulis.iter().map(|pj| u * pj * &ud).collect();
    Ptm::from_fn(dim, dim, |i, j| trace_product(&paulis[i], &images[j]).re / d)
}

/// Derivative of [`unitary_ptm`] along `du` (a derivative of `u`):
/// dR_ij = (2/d) Re Tr(P_i dU P_j U^dagger).
pub fn unitary_ptm_derivative(u: &CMat, du: &CMat) -> Ptm {
    let n = if u.nrows() == 2 { 1 } else { 2 };
    let dim = pauli_dim(n);
    let d = hilbert_dim(n) as f64;
    let paulis: Vec<CMat> = (0..dim).map(|p| pauli(n, p)).collect();
    let ud = u.adjoint();
    let images: Vec<CMat> = paulis.iter().map(|pj| du * pj * &ud).collect();
    Ptm::from_fn(dim, dim, |i, j| 2.0 * trace_product(&paulis[i], &images[j]).re / d)
}

/// Tr(A B) without forming the product.
fn trace_product(a: &CMat, b: &CMat) -> Complex64 {
    let mut s = c(0.0, 0.0);
    for i in 0..a.nrows() {
        for k in 0..a.ncols() {
            s += a[(i, k)] * b[(k, i)];
        }
    }
    s
}

/// The ideal unitary of a gate as a matrix: 2x2 for one-qubit gates; 4x4 for two-qubit
/// gates, whose first operand is slot 0 unless `reversed`.
pub fn gate_unitary(gate: Gate, angle: f64, reversed: bool) -> Option<CMat> {
    if let Some(m) = gate.unitary1(angle) {
        return Some(CMat::from_fn(2, 2, |r, col| m[r][col]));
    }
    let m = gate.unitary2(angle)?;
    let swap = |i: usize| if reversed { ((i & 1) << 1) | (i >> 1) } else { i };
    Some(CMat::from_fn(4, 4, |r, col| m[swap(r)][swap(col)]))
}

/// Two-qubit PTM of independent one-qubit channels: `a` on slot 0, `b` on slot 1.
pub fn kron(a: &Ptm, b: &Ptm) -> Ptm {
    Ptm::from_fn(16, 16, |i, j| a[(i & 3, j & 3)] * b[(i >> 2, j >> 2)])
}

/// A one-qubit PTM acting on `slot` of a two-qubit block.
pub fn embed(one: &Ptm, slot: usize) -> Ptm {
    let id = Ptm::identity(4, 4);
    if slot == 0 {
        kron(one, &id)
    } else {
        kron(&id, one)
    }
}

/// The state |0...0> on `n` qubits: r_P = 1 for P in {I, Z}^n, 0 otherwise.
pub fn zero_state(n: usize) -> DVector<f64> {
    DVector::from_fn(pauli_dim(n), |p, _| if is_diagonal(n, p) { 1.0 } else { 0.0 })
}

fn is_diagonal(n: usize, p: usize) -> bool {
    (0..n).all(|slot| matches!((p >> (2 * slot)) & 3, 0 | 3))
}

/// The linear maps from a state vector to the ideal outcome probabilities: row y gives
/// Tr(|y><y| rho) = (1/d) sum_{P in {I,Z}^n} r_P <y|P|y>. Outcome bit j is slot j.
pub fn outcome_functionals(n: usize) -> DMatrix<f64> {
    let d = hilbert_dim(n);
    DMatrix::from_fn(d, pauli_dim(n), |y, p| {
        if !is_diagonal(n, p) {
            return 0.0;
        }
        let sign = (0..n).fold(1.0, |acc, slot| {
            let z = (p >> (2 * slot)) & 3 == 3;
            if z && (y >> slot) & 1 == 1 {
                -acc
            } else {
                acc
            }
        });
        sign / d as f64
    })
}

/// V = exp(-i sum_j h_j G_j) for Hermitian generators G_j, with dV/dh_j for every j.
///
/// Uses the eigen-decomposition H = Q diag(l) Q^dagger and the Daleckii-Krein formula
/// dV = Q (Phi o (Q^dagger dH Q)) Q^dagger, Phi_ab = (f(l_a) - f(l_b)) / (l_a - l_b),
/// written as -i exp(-i (l_a + l_b)/2) sinc((l_a - l_b)/2) so equal eigenvalues need no
/// special case (R. Bhatia, Matrix Analysis, Springer 1997, Theorem V.3.3).
pub fn expm_hermitian(generators: &[CMat], h: &[f64]) -> (CMat, Vec<CMat>) {
    let d = generators.first().map_or(2, |g| g.nrows());
    let mut hm = CMat::zeros(d, d);
    for (g, &x) in generators.iter().zip(h) {
        hm += g * c(x, 0.0);
    }
    let eig = hm.symmetric_eigen();
    let q = eig.eigenvectors;
    let l = eig.eigenvalues;
    let qd = q.adjoint();
    let diag =
        CMat::from_fn(
            d,
            d,
            |a, b| if a == b { Complex64::from_polar(1.0, -l[a]) } else { c(0.0, 0.0) },
        );
    let v = &q * diag * &qd;
    let phi = CMat::from_fn(d, d, |a, b| {
        let half = 0.5 * (l[a] - l[b]);
        let sinc = if half.abs() < 1e-8 { 1.0 - half * half / 6.0 } else { half.sin() / half };
        c(0.0, -1.0) * Complex64::from_polar(sinc, -0.5 * (l[a] + l[b]))
    });
    let dvs = generators
        .iter()
        .map(|g| {
            let inner = &qd * g * &q;
            let hadamard = inner.component_mul(&phi);
            &q * hadamard * &qd
        })
        .collect();
    (v, dvs)
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{RngExt, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    fn random_unitary(n: usize, rng: &mut ChaCha8Rng) -> CMat {
        let gens: Vec<CMat> = (1..pauli_dim(n)).map(|p| pauli(n, p)).collect();
        let h: Vec<f64> = gens.iter().map(|_| rng.random_range(-1.5..1.5)).collect();
        expm_hermitian(&gens, &h).0
    }

    fn random_density(n: usize, rng: &mut ChaCha8Rng) -> CMat {
        let d = hilbert_dim(n);
        let a =
            CMat::from_fn(d, d, |_, _| c(rng.random_range(-1.0..1.0), rng.random_range(-1.0..1.0)));
        let rho = &a * a.adjoint();
        let tr = rho.trace();
        rho / tr
    }

    fn to_vector(n: usize, rho: &CMat) -> DVector<f64> {
        DVector::from_fn(pauli_dim(n), |p, _| trace_product(&pauli(n, p), rho).re)
    }

    #[test]
    fn unitary_ptms_are_orthogonal() {
        let mut rng = ChaCha8Rng::seed_from_u64(1);
        for n in [1, 2] {
            for _ in 0..5 {
                let r = unitary_ptm(&random_unitary(n, &mut rng));
                let err = (&r * r.transpose() - Ptm::identity(r.nrows(), r.nrows())).amax();
                assert!(err < 1e-12, "R R^T - I = {err}");
                assert!((r[(0, 0)] - 1.0).abs() < 1e-12);
            }
        }
    }

    #[test]
    fn pauli_channel_ptm_is_diagonal_with_expected_eigenvalues() {
        // Depolarizing with total error e on one qubit: lambda = 1 - 4e/3 (Nielsen and
        // Chuang, Quantum Computation and Quantum Information, section 8.3.4).
        let e = 0.09;
        let probs = [1.0 - e, e / 3.0, e / 3.0, e / 3.0];
        let lam = pauli_eigenvalues(1, &probs);
        assert!((lam[0] - 1.0).abs() < 1e-12);
        for &l in &lam[1..] {
            assert!((l - (1.0 - 4.0 * e / 3.0)).abs() < 1e-12);
        }
        // Built as a sum of Pauli conjugations, the PTM has no off-diagonal entries.
        let mut rng = ChaCha8Rng::seed_from_u64(2);
        let w: Vec<f64> = (0..16).map(|_| rng.random::<f64>()).collect();
        let s: f64 = w.iter().sum();
        let p2: Vec<f64> = w.iter().map(|x| x / s).collect();
        let mut r = Ptm::zeros(16, 16);
        for (k, &pk) in p2.iter().enumerate() {
            r += unitary_ptm(&pauli(2, k)) * pk;
        }
        let lam2 = pauli_eigenvalues(2, &p2);
        for i in 0..16 {
            for j in 0..16 {
                let want = if i == j { lam2[i] } else { 0.0 };
                assert!((r[(i, j)] - want).abs() < 1e-12);
            }
        }
    }

    #[test]
    fn composition_matches_density_matrix_evolution() {
        let mut rng = ChaCha8Rng::seed_from_u64(3);
        for n in [1, 2] {
            let rho = random_density(n, &mut rng);
            let us: Vec<CMat> = (0..4).map(|_| random_unitary(n, &mut rng)).collect();
            let mut direct = rho.clone();
            let mut vec = to_vector(n, &rho);
            for u in &us {
                direct = u * direct * u.adjoint();
                vec = unitary_ptm(u) * vec;
            }
            let err = (to_vector(n, &direct) - vec).amax();
            assert!(err < 1e-12, "n={n}: {err}");
        }
    }

    #[test]
    fn kron_of_gates_matches_tensor_product_unitary() {
        let h = gate_unitary(Gate::H, 0.0, false).unwrap();
        let s = gate_unitary(Gate::S, 0.0, false).unwrap();
        // Slot 0 is the low bit: U = S (slot 1) tensor H (slot 0).
        let u = CMat::from_fn(4, 4, |r, col| h[(r & 1, col & 1)] * s[(r >> 1, col >> 1)]);
        let err = (kron(&unitary_ptm(&h), &unitary_ptm(&s)) - unitary_ptm(&u)).amax();
        assert!(err < 1e-12);
    }

    #[test]
    fn reversed_cx_swaps_control_and_target() {
        let cx = gate_unitary(Gate::Cx, 0.0, false).unwrap();
        let xc = gate_unitary(Gate::Cx, 0.0, true).unwrap();
        // |slot0=1, slot1=0> = index 1: cx (control slot 0) flips slot 1 -> index 3.
        assert!((cx[(3, 1)].re - 1.0).abs() < 1e-12);
        // reversed: control slot 1; index 2 (slot1=1) -> index 3.
        assert!((xc[(3, 2)].re - 1.0).abs() < 1e-12);
        assert!(xc[(3, 1)].norm() < 1e-12);
    }

    #[test]
    fn outcome_functionals_read_the_zero_state() {
        for n in [1, 2] {
            let p = outcome_functionals(n) * zero_state(n);
            assert!((p[0] - 1.0).abs() < 1e-12);
            assert!(p.iter().skip(1).all(|x| x.abs() < 1e-12));
        }
        // X on slot 1 sends |00> to outcome index 2.
        let x = unitary_ptm(&gate_unitary(Gate::X, 0.0, false).unwrap());
        let p = outcome_functionals(2) * embed(&x, 1) * zero_state(2);
        assert!((p[2] - 1.0).abs() < 1e-12);
    }

    #[test]
    fn expm_derivative_matches_finite_differences() {
        for n in [1, 2] {
            let gens: Vec<CMat> = (1..pauli_dim(n)).map(|p| pauli(n, p)).collect();
            let mut rng = ChaCha8Rng::seed_from_u64(4);
            // Include h = 0, where every eigenvalue is degenerate.
            for scale in [0.0, 0.3] {
                let h: Vec<f64> =
                    gens.iter().map(|_| scale * rng.random_range(-1.0..1.0)).collect();
                let (v, dv) = expm_hermitian(&gens, &h);
                let uerr = (&v * v.adjoint() - CMat::identity(v.nrows(), v.nrows())).camax();
                assert!(uerr < 1e-12);
                for j in 0..gens.len() {
                    let step = 1e-6;
                    let (mut hp, mut hm) = (h.clone(), h.clone());
                    hp[j] += step;
                    hm[j] -= step;
                    let fd = (expm_hermitian(&gens, &hp).0 - expm_hermitian(&gens, &hm).0)
                        / c(2.0 * step, 0.0);
                    let err = (fd - &dv[j]).camax();
                    assert!(err < 1e-7, "n={n} j={j} err={err}");
                }
            }
        }
    }
}
