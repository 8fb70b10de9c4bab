//! The exact state of one block (one or two qubits): a density matrix plus leaked branches.
//!
//! Small dense complex matrices (2x2 or 4x4) are enough because blocks never exceed two
//! qubits; Pauli channels act element-wise, so only unitaries need matrix products. Local
//! basis index = bit(block qubit 0) + 2 * bit(block qubit 1).

// Index loops read like the matrix formulas they implement.
#![allow(clippy::needless_range_loop)]

use num_complex::Complex64 as C;

use super::noise::{ErrorSpec, Rotation};
use crate::gate::{Mat2, Mat4};

const ZERO: C = C::new(0.0, 0.0);
const ONE: C = C::new(1.0, 0.0);

/// A square complex matrix of dimension 2 or 4, stored in a 4x4 array.
pub type M = [[C; 4]; 4];

/// One block's state. `rho` is unnormalised: its trace is the probability that no qubit of
/// the block has leaked. `frozen[j]` is the partner's reduced state (unnormalised) in the
/// branch where block qubit j leaked (two-qubit blocks), or the leaked mass in `[0][0]`
/// (one-qubit blocks).
#[derive(Clone, Debug)]
pub struct BlockState {
    /// Number of qubits (1 or 2).
    pub k: usize,
    /// Density matrix of the non-leaked branch.
    pub rho: M,
    /// Leaked branches, see the type doc.
    pub frozen: [[[C; 2]; 2]; 2],
}

impl BlockState {
    /// |0...0><0...0| on k qubits.
    pub fn ground(k: usize) -> BlockState {
        let mut rho = [[ZERO; 4]; 4];
        rho[0][0] = ONE;
        BlockState { k, rho, frozen: [[[ZERO; 2]; 2]; 2] }
    }

    fn dim(&self) -> usize {
        1 << self.k
    }

    /// rho <- U rho U^dagger for a full-dimension U.
    pub fn conj_full(&mut self, u: &M) {
        let d = self.dim();
        let mut t = [[ZERO; 4]; 4];
        for i in 0..d {
            for j in 0..d {
                let mut s = ZERO;
                for l in 0..d {
                    s += u[i][l] * self.rho[l][j];
                }
                t[i][j] = s;
            }
        }
        for i in 0..d {
            for j in 0..d {
                let mut s = ZERO;
                for l in 0..d {
                    s += t[i][l] * u[j][l].conj();
                }
                self.rho[i][j] = s;
            }
        }
    }

    /// Applies a one-qubit unitary to block qubit j.
    pub fn apply1(&mut self, u: &Mat2, j: usize) {
        self.conj_full(&embed1(u, j, self.k));
    }

    /// Applies a two-qubit unitary whose basis index is bit(first) + 2 bit(second), with
    /// `first` the block qubit of the first operand.
    pub fn apply2(&mut self, u: &Mat4, first: usize) {
        let mut m = *u;
        if first == 1 {
            let sw = |x: usize| ((x & 1) << 1) | (x >> 1);
            for (i, row) in m.iter_mut().enumerate() {
                for (j, v) in row.iter_mut().enumerate() {
                    *v = u[sw(i)][sw(j)];
                }
            }
        }
        self.conj_full(&m);
    }

    /// rho <- sum_P p_P P rho P, where `qubits[j]` is the block qubit of operand j and P's
    /// index is sum_j p_j 4^j.
    pub fn pauli_channel(&mut self, probs: &[f64], qubits: &[usize]) {
        if probs[0] >= 1.0 {
            return;
        }
        let d = self.dim();
        let mut out = [[ZERO; 4]; 4];
        for (idx, &p) in probs.iter().enumerate() {
            if p == 0.0 {
                continue;
            }
            let (mut flip, mut phase) = (0usize, 0usize);
            for (j, &bq) in qubits.iter().enumerate() {
                match (idx >> (2 * j)) & 3 {
                    1 => flip |= 1 << bq,
                    2 => {
                        flip |= 1 << bq;
                        phase |= 1 << bq;
                    }
                    3 => phase |= 1 << bq,
                    _ => {}
                }
            }
            // (P rho P)[x][y] = s(x, y) rho[x^flip][y^flip], s = (-1)^{|(x ^ y) & phase|}.
            for (x, row) in out.iter_mut().enumerate().take(d) {
                for (y, v) in row.iter_mut().enumerate().take(d) {
                    let s = if ((x ^ y) & phase).count_ones() % 2 == 1 { -p } else { p };
                    *v += self.rho[x ^ flip][y ^ flip] * s;
                }
            }
        }
        self.rho = out;
    }

    /// Block qubit j leaks with probability `l`: the leaked branch keeps the partner's
    /// reduced state at this moment (see the module doc of `simulate`).
    pub fn leak(&mut self, l: f64, j: usize) {
        if l == 0.0 {
            return;
        }
        if self.k == 1 {
            let tr = self.rho[0][0] + self.rho[1][1];
            self.frozen[0][0][0] += tr * l;
        } else {
            // Partial trace over qubit j: partner index a, traced bit b.
            let idx = |a: usize, b: usize| if j == 0 { b | (a << 1) } else { a | (b << 1) };
            for a in 0..2 {
                for a2 in 0..2 {
                    let s = self.rho[idx(a, 0)][idx(a2, 0)] + self.rho[idx(a, 1)][idx(a2, 1)];
                    self.frozen[j][a][a2] += s * l;
                }
            }
        }
        for row in self.rho.iter_mut() {
            for v in row.iter_mut() {
                *v *= 1.0 - l;
            }
        }
    }

    /// Applies an error spec to the operands at block qubits `qubits` (operand order):
    /// coherent part, then Pauli part, then leakage.
    pub fn apply_error(&mut self, e: &ErrorSpec, qubits: &[usize]) {
        if let Some(r) = &e.rotation {
            match qubits.len() {
                1 => self.apply1(&rotation1(r), qubits[0]),
                _ => self.apply2(&rotation2(r), qubits[0]),
            }
        }
        self.pauli_channel(&e.pauli, qubits);
        for &q in qubits {
            self.leak(e.leakage, q);
        }
    }

    /// Probabilities over per-qubit states s_j in {0, 1, 2 = leaked}, index sum_j s_j 3^j.
    pub fn populations(&self) -> Vec<f64> {
        if self.k == 1 {
            vec![self.rho[0][0].re, self.rho[1][1].re, self.frozen[0][0][0].re]
        } else {
            let mut p = vec![0.0; 9];
            for s1 in 0..2 {
                for s0 in 0..2 {
                    p[s0 + 3 * s1] = self.rho[s0 + 2 * s1][s0 + 2 * s1].re;
                }
            }
            for a in 0..2 {
                p[2 + 3 * a] = self.frozen[0][a][a].re;
                p[a + 6] = self.frozen[1][a][a].re;
            }
            p
        }
    }
}

/// The Pauli matrix with letter p (0 = I, 1 = X, 2 = Y, 3 = Z).
pub fn pauli_mat(p: u8) -> Mat2 {
    let i = C::new(0.0, 1.0);
    match p {
        1 => [[ZERO, ONE], [ONE, ZERO]],
        2 => [[ZERO, -i], [i, ZERO]],
        3 => [[ONE, ZERO], [ZERO, -ONE]],
        _ => [[ONE, ZERO], [ZERO, ONE]],
    }
}

/// exp(-i angle/2 P) for a one-qubit Pauli axis.
pub fn rotation1(r: &Rotation) -> Mat2 {
    let (c, s) = ((r.angle_rad / 2.0).cos(), (r.angle_rad / 2.0).sin());
    let p = pauli_mat(r.pauli[0]);
    let mut u = [[ZERO; 2]; 2];
    for a in 0..2 {
        for b in 0..2 {
            let id = if a == b { c } else { 0.0 };
            u[a][b] = C::new(id, 0.0) + p[a][b] * C::new(0.0, -s);
        }
    }
    u
}

/// exp(-i angle/2 P1 (x) P2), basis index bit(first) + 2 bit(second).
pub fn rotation2(r: &Rotation) -> Mat4 {
    let (c, s) = ((r.angle_rad / 2.0).cos(), (r.angle_rad / 2.0).sin());
    let (p0, p1) = (pauli_mat(r.pauli[0]), pauli_mat(r.pauli[1]));
    let mut u = [[ZERO; 4]; 4];
    for (x, row) in u.iter_mut().enumerate() {
        for (y, v) in row.iter_mut().enumerate() {
            let pp = p0[x & 1][y & 1] * p1[x >> 1][y >> 1];
            let id = if x == y { c } else { 0.0 };
            *v = C::new(id, 0.0) + pp * C::new(0.0, -s);
        }
    }
    u
}

fn embed1(u: &Mat2, j: usize, k: usize) -> M {
    let mut m = [[ZERO; 4]; 4];
    if k == 1 {
        for a in 0..2 {
            for b in 0..2 {
                m[a][b] = u[a][b];
            }
        }
        return m;
    }
    for (x, row) in m.iter_mut().enumerate() {
        for (y, v) in row.iter_mut().enumerate() {
            let (xo, yo) = ((x >> (1 - j)) & 1, (y >> (1 - j)) & 1);
            if xo == yo {
                *v = u[(x >> j) & 1][(y >> j) & 1];
            }
        }
    }
    m
}

#[cfg(test)]
mod tests {
    use super::*;

    fn trace(s: &BlockState) -> f64 {
        s.populations().iter().sum()
    }

    #[test]
    fn pauli_conjugation_matches_matrix_product() {
        // A generic two-qubit state; compare the element-wise rule with P rho P by matrices.
        let mut s = BlockState::ground(2);
        let h = std::f64::consts::FRAC_1_SQRT_2;
        let hm: Mat2 = [[C::new(h, 0.0), C::new(h, 0.0)], [C::new(h, 0.0), C::new(-h, 0.0)]];
        s.apply1(&hm, 0);
        s.apply1(&rotation1(&Rotation { angle_rad: 0.7, pauli: vec![2] }), 1);
        s.apply2(&rotation2(&Rotation { angle_rad: 0.4, pauli: vec![1, 3] }), 0);
        for idx in 1..16usize {
            let mut probs = vec![0.0; 16];
            probs[idx] = 1.0;
            let mut a = s.clone();
            a.pauli_channel(&probs, &[0, 1]);
            let mut b = s.clone();
            b.apply1(&pauli_mat((idx & 3) as u8), 0);
            b.apply1(&pauli_mat((idx >> 2) as u8), 1);
            for x in 0..4 {
                for y in 0..4 {
                    assert!((a.rho[x][y] - b.rho[x][y]).norm() < 1e-12, "P index {idx}");
                }
            }
        }
    }

    #[test]
    fn leakage_keeps_total_probability() {
        let mut s = BlockState::ground(2);
        s.apply1(&rotation1(&Rotation { angle_rad: 1.1, pauli: vec![1] }), 1);
        s.leak(0.1, 0);
        s.leak(0.2, 1);
        assert!((trace(&s) - 1.0).abs() < 1e-12);
        let p = s.populations();
        // q0 leaked in 10% of the mass; the partner kept its populations (cos^2, sin^2).
        let (c2, s2) = ((0.55f64).cos().powi(2), (0.55f64).sin().powi(2));
        assert!((p[2] - 0.1 * c2).abs() < 1e-12 && (p[5] - 0.1 * s2).abs() < 1e-12);
        assert!((p[6] - 0.9 * 0.2).abs() < 1e-12);
    }
}
