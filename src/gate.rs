//! The gate vocabulary: OpenQASM 3 standard-library names, arities and ideal unitaries.
//!
//! Every other module names gates through [`Gate`]; the unitaries here are the single
//! source of truth for the ideal part of every channel (simulator and model alike).
//! Matrices follow the OpenQASM 3 `stdgates.inc` definitions (OpenQASM 3 specification,
//! "Standard library"), with qubit 0 as the least significant bit of a basis index.
//! Two-qubit natives outside the standard library (`ecr`, `iswap`, `sqrt_iswap`, `rzz`)
//! follow the definitions common in the trade, written beside each matrix. A layout may
//! define further two-qubit gates by their unitary ([`define_custom`]); they are kept in a
//! process-wide table so that a [`Gate`] stays a small `Copy` value everywhere.

use std::sync::{OnceLock, RwLock};

use num_complex::Complex64;

/// A 2x2 complex matrix, row-major.
pub type Mat2 = [[Complex64; 2]; 2];
/// A 4x4 complex matrix, row-major, basis index = bit(q0) + 2 * bit(q1).
pub type Mat4 = [[Complex64; 4]; 4];

/// A gate of the OpenQASM 3 standard library that slackmap understands.
#[derive(Copy, Clone, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum Gate {
    /// Identity (an explicit idle).
    Id,
    /// Pauli X.
    X,
    /// Pauli Y.
    Y,
    /// Pauli Z.
    Z,
    /// Hadamard.
    H,
    /// Phase gate sqrt(Z).
    S,
    /// Inverse phase gate.
    Sdg,
    /// sqrt(X).
    Sx,
    /// Rotation about X by an angle.
    Rx,
    /// Rotation about Y by an angle.
    Ry,
    /// Rotation about Z by an angle.
    Rz,
    /// Controlled Z (symmetric).
    Cz,
    /// Controlled X (first qubit controls).
    Cx,
    /// Swap of the two qubits (symmetric).
    Swap,
    /// Echoed cross-resonance, (IX - XY)/sqrt(2) with the first operand as the right-hand
    /// factor (not symmetric, self-inverse).
    Ecr,
    /// iSWAP: |01> -> i|10>, |10> -> i|01> (symmetric).
    Iswap,
    /// The square root of iSWAP (symmetric, not a Clifford gate).
    SqrtIswap,
    /// Controlled phase by an angle, diag(1, 1, 1, e^{i theta}) (symmetric).
    Cp,
    /// ZZ rotation by an angle, exp(-i theta/2 Z (x) Z) (symmetric).
    Rzz,
    /// A two-qubit gate defined by its unitary in a layout file ([`define_custom`]).
    Custom(u8),
}

/// A two-qubit gate defined by its unitary.
struct CustomGate {
    name: &'static str,
    matrix: Mat4,
}

fn customs() -> &'static RwLock<Vec<CustomGate>> {
    static TABLE: OnceLock<RwLock<Vec<CustomGate>>> = OnceLock::new();
    TABLE.get_or_init(|| RwLock::new(Vec::new()))
}

fn custom_get<T>(i: u8, f: impl FnOnce(&CustomGate) -> T) -> Option<T> {
    let table = customs().read().unwrap_or_else(|e| e.into_inner());
    table.get(usize::from(i)).map(f)
}

/// Most custom gates one process defines (a layout file names a handful). The index fits
/// a byte, so that a `Gate` stays two bytes in the analysis rows.
pub const MAX_CUSTOM_GATES: usize = 256;

/// Defines (or finds) a two-qubit gate by name and unitary (rows of a 4x4 matrix, basis
/// index bit(first operand) + 2 * bit(second)). The matrix must be unitary within 1e-6 in
/// every entry of U U^dagger; it is then replaced by the nearest unitary (polar factor), so
/// entries written to a few digits still give an exact channel. The name must be an
/// identifier that is not a standard gate. Defining the same name and matrix again returns
/// the same gate; the latest definition of a name is the one [`Gate::from_name`] finds.
pub fn define_custom(name: &str, rows: &Mat4) -> Result<Gate, String> {
    let ident = name.chars().next().is_some_and(|c| c.is_ascii_alphabetic() || c == '_')
        && name.chars().all(|c| c.is_ascii_alphanumeric() || c == '_');
    if !ident {
        return Err(format!(
            "custom gate name '{}' is not an identifier (letters, digits and '_', not starting \
             with a digit)",
            crate::error::echo(name)
        ));
    }
    if Gate::ALL.iter().any(|g| g.name() == name)
        || is_reserved(name)
        || stdgates_translated(name).is_some()
    {
        return Err(format!(
            "custom gate name '{name}' is already a standard gate; choose another name"
        ));
    }
    if rows.iter().flatten().any(|v| !v.re.is_finite() || !v.im.is_finite()) {
        return Err(format!("custom gate '{name}': every entry must be a finite number"));
    }
    let m = nalgebra::Matrix4::from_fn(|r, c| rows[r][c]);
    let worst = (m * m.adjoint() - nalgebra::Matrix4::identity())
        .iter()
        .map(|v| v.norm())
        .fold(0.0, f64::max);
    if worst > 1e-6 {
        return Err(format!(
            "custom gate '{name}': the matrix is not unitary (U U^dagger differs from the identity \
             by {worst:.2e} in some entry; at most 1e-6 is accepted: write entries to at least 7 \
             digits)"
        ));
    }
    let svd = m.svd(true, true);
    let (Some(u), Some(v_t)) = (svd.u, svd.v_t) else {
        return Err(format!("custom gate '{name}': the matrix could not be decomposed"));
    };
    let polar = u * v_t;
    let matrix: Mat4 = std::array::from_fn(|r| std::array::from_fn(|c| polar[(r, c)]));
    let mut table = customs().write().unwrap_or_else(|e| e.into_inner());
    let same = |g: &CustomGate| {
        g.name == name
            && g.matrix
                .iter()
                .flatten()
                .zip(matrix.iter().flatten())
                .all(|(a, b)| (a - b).norm() < 1e-12)
    };
    if let Some(i) = table.iter().position(same) {
        return Ok(Gate::Custom(i as u8));
    }
    if table.len() >= MAX_CUSTOM_GATES {
        return Err(format!("more than {MAX_CUSTOM_GATES} custom gates defined"));
    }
    // Names live as long as the process, like the standard names.
    let name: &'static str = Box::leak(name.to_string().into_boxed_str());
    table.push(CustomGate { name, matrix });
    Ok(Gate::Custom((table.len() - 1) as u8))
}

/// Names the OpenQASM 3 standard library (and its built-ins) uses for gates slackmap reads
/// by translation; a custom gate may not take them.
fn is_reserved(name: &str) -> bool {
    matches!(
        name,
        "U" | "CX"
            | "p"
            | "phase"
            | "u1"
            | "u2"
            | "u3"
            | "t"
            | "tdg"
            | "sxdg"
            | "cy"
            | "ch"
            | "crx"
            | "cry"
            | "crz"
            | "cu"
            | "cu1"
            | "cu3"
            | "cphase"
            | "ccx"
            | "cswap"
            | "gphase"
    )
}

impl Gate {
    /// Every gate, in a fixed order.
    pub const ALL: [Gate; 19] = [
        Gate::Id,
        Gate::X,
        Gate::Y,
        Gate::Z,
        Gate::H,
        Gate::S,
        Gate::Sdg,
        Gate::Sx,
        Gate::Rx,
        Gate::Ry,
        Gate::Rz,
        Gate::Cz,
        Gate::Cx,
        Gate::Swap,
        Gate::Ecr,
        Gate::Iswap,
        Gate::SqrtIswap,
        Gate::Cp,
        Gate::Rzz,
    ];

    /// The OpenQASM 3 standard-library name.
    pub fn name(self) -> &'static str {
        match self {
            Gate::Id => "id",
            Gate::X => "x",
            Gate::Y => "y",
            Gate::Z => "z",
            Gate::H => "h",
            Gate::S => "s",
            Gate::Sdg => "sdg",
            Gate::Sx => "sx",
            Gate::Rx => "rx",
            Gate::Ry => "ry",
            Gate::Rz => "rz",
            Gate::Cz => "cz",
            Gate::Cx => "cx",
            Gate::Swap => "swap",
            Gate::Ecr => "ecr",
            Gate::Iswap => "iswap",
            Gate::SqrtIswap => "sqrt_iswap",
            Gate::Cp => "cp",
            Gate::Rzz => "rzz",
            Gate::Custom(i) => custom_get(i, |g| g.name).unwrap_or("custom"),
        }
    }

    /// Looks a gate up by its name (exact, lower case): the standard ones, then the custom
    /// gates defined so far (the latest definition of a name).
    pub fn from_name(name: &str) -> Option<Gate> {
        Gate::ALL.iter().copied().find(|g| g.name() == name).or_else(|| {
            let table = customs().read().unwrap_or_else(|e| e.into_inner());
            table.iter().rposition(|g| g.name == name).map(|i| Gate::Custom(i as u8))
        })
    }

    /// The names of all known gates, comma separated (for error messages).
    pub fn known_names() -> String {
        Gate::ALL.iter().map(|g| g.name()).collect::<Vec<_>>().join(", ")
    }

    /// Number of qubits the gate acts on.
    pub fn arity(self) -> usize {
        match self {
            Gate::Cz
            | Gate::Cx
            | Gate::Swap
            | Gate::Ecr
            | Gate::Iswap
            | Gate::SqrtIswap
            | Gate::Cp
            | Gate::Rzz
            | Gate::Custom(_) => 2,
            _ => 1,
        }
    }

    /// True when exchanging the operands gives the same gate: `g(a, b)` and `g(b, a)` are
    /// one operation.
    pub fn is_symmetric(self) -> bool {
        match self {
            Gate::Cz | Gate::Swap | Gate::Iswap | Gate::SqrtIswap | Gate::Cp | Gate::Rzz => true,
            Gate::Custom(_) => self.unitary2(0.0).is_some_and(|m| {
                let s = |i: usize| ((i & 1) << 1) | (i >> 1);
                (0..4).all(|r| (0..4).all(|c| (m[s(r)][s(c)] - m[r][c]).norm() < 1e-12))
            }),
            _ => false,
        }
    }

    /// Number of angle parameters (0 or 1).
    pub fn n_params(self) -> usize {
        match self {
            Gate::Rx | Gate::Ry | Gate::Rz | Gate::Cp | Gate::Rzz => 1,
            _ => 0,
        }
    }

    /// The ideal unitary of a one-qubit gate; `None` for a two-qubit gate.
    pub fn unitary1(self, angle: f64) -> Option<Mat2> {
        let c = |re: f64, im: f64| Complex64::new(re, im);
        let o = c(0.0, 0.0);
        let h = std::f64::consts::FRAC_1_SQRT_2;
        let (ch, sh) = ((angle / 2.0).cos(), (angle / 2.0).sin());
        Some(match self {
            Gate::Id => [[c(1.0, 0.0), o], [o, c(1.0, 0.0)]],
            Gate::X => [[o, c(1.0, 0.0)], [c(1.0, 0.0), o]],
            Gate::Y => [[o, c(0.0, -1.0)], [c(0.0, 1.0), o]],
            Gate::Z => [[c(1.0, 0.0), o], [o, c(-1.0, 0.0)]],
            Gate::H => [[c(h, 0.0), c(h, 0.0)], [c(h, 0.0), c(-h, 0.0)]],
            Gate::S => [[c(1.0, 0.0), o], [o, c(0.0, 1.0)]],
            Gate::Sdg => [[c(1.0, 0.0), o], [o, c(0.0, -1.0)]],
            // stdgates.inc: sx = exp(i pi/4) rx(pi/2) = (1/2)[[1+i, 1-i], [1-i, 1+i]]
            Gate::Sx => [[c(0.5, 0.5), c(0.5, -0.5)], [c(0.5, -0.5), c(0.5, 0.5)]],
            Gate::Rx => [[c(ch, 0.0), c(0.0, -sh)], [c(0.0, -sh), c(ch, 0.0)]],
            Gate::Ry => [[c(ch, 0.0), c(-sh, 0.0)], [c(sh, 0.0), c(ch, 0.0)]],
            Gate::Rz => [[c(ch, -sh), o], [o, c(ch, sh)]],
            _ => return None,
        })
    }

    /// The ideal unitary of a two-qubit gate on (first, second) operand at an angle (used by
    /// `cp` and `rzz`), basis index bit(first) + 2 * bit(second); `None` for a one-qubit gate.
    pub fn unitary2(self, angle: f64) -> Option<Mat4> {
        let z = Complex64::new(0.0, 0.0);
        let one = Complex64::new(1.0, 0.0);
        let i = Complex64::new(0.0, 1.0);
        let h = std::f64::consts::FRAC_1_SQRT_2;
        let mut m = [[z; 4]; 4];
        match self {
            Gate::Cz => {
                for (i, row) in m.iter_mut().enumerate() {
                    row[i] = if i == 3 { -one } else { one };
                }
            }
            Gate::Cx => {
                // control = first operand (bit 0), target = second (bit 1)
                m[0][0] = one;
                m[2][2] = one;
                m[1][3] = one;
                m[3][1] = one;
            }
            Gate::Swap => {
                m[0][0] = one;
                m[1][2] = one;
                m[2][1] = one;
                m[3][3] = one;
            }
            Gate::Ecr => {
                // (IX - XY)/sqrt(2) in the order (second) (x) (first): X on the first
                // operand in the first term, X on the second and Y on the first in the other
                // (common practice, from memory). Self-inverse.
                let (a, b) = (Complex64::new(h, 0.0), i * h);
                m[0] = [z, a, z, b];
                m[1] = [a, z, -b, z];
                m[2] = [z, b, z, a];
                m[3] = [-b, z, a, z];
            }
            Gate::Iswap | Gate::SqrtIswap => {
                // iSWAP = exp(i pi/4 (XX + YY)); its square root halves the angle
                // (common practice, from memory).
                let (c, s) = if self == Gate::Iswap { (z, i) } else { (one * h, i * h) };
                m[0][0] = one;
                m[1][1] = c;
                m[1][2] = s;
                m[2][1] = s;
                m[2][2] = c;
                m[3][3] = one;
            }
            Gate::Cp => {
                // stdgates.inc: cp(lambda) = diag(1, 1, 1, e^{i lambda}).
                for (k, row) in m.iter_mut().enumerate() {
                    row[k] = if k == 3 { Complex64::from_polar(1.0, angle) } else { one };
                }
            }
            Gate::Rzz => {
                // exp(-i theta/2 Z (x) Z): e^{-i theta/2} where the bits agree.
                for (k, row) in m.iter_mut().enumerate() {
                    let agree = (k & 1) == (k >> 1);
                    row[k] =
                        Complex64::from_polar(1.0, if agree { -angle / 2.0 } else { angle / 2.0 });
                }
            }
            Gate::Custom(c) => return custom_get(c, |g| g.matrix),
            _ => return None,
        }
        Some(m)
    }
}

/// A one- or two-qubit unitary.
#[derive(Copy, Clone, Debug, PartialEq)]
pub enum Unitary {
    /// On one qubit.
    One(Mat2),
    /// On two qubits, basis index bit(first) + 2 * bit(second).
    Two(Mat4),
}

impl Unitary {
    /// The unitary of a gate at an angle.
    pub fn of(gate: Gate, angle: f64) -> Option<Unitary> {
        gate.unitary1(angle).map(Unitary::One).or_else(|| gate.unitary2(angle).map(Unitary::Two))
    }

    /// Number of qubits.
    pub fn arity(&self) -> usize {
        match self {
            Unitary::One(_) => 1,
            Unitary::Two(_) => 2,
        }
    }

    fn entries(&self) -> Vec<Complex64> {
        match self {
            Unitary::One(m) => m.iter().flatten().copied().collect(),
            Unitary::Two(m) => m.iter().flatten().copied().collect(),
        }
    }

    /// True when both act on as many qubits and are equal up to a global phase, to 1e-9 in
    /// every entry (a first-order test: a rotation by 1e-7 is not the identity).
    pub fn same_up_to_phase(&self, other: &Unitary) -> bool {
        if self.arity() != other.arity() {
            return false;
        }
        let (a, b) = (self.entries(), other.entries());
        let ip: Complex64 = a.iter().zip(&b).map(|(x, y)| x.conj() * y).sum();
        if ip.norm() < 1e-9 {
            return false;
        }
        let phase = ip / ip.norm();
        a.iter().zip(&b).all(|(x, y)| (x * phase - y).norm() < 1e-9)
    }

    /// The same two-qubit unitary with its operands exchanged; a one-qubit unitary as it is.
    pub fn swapped(&self) -> Unitary {
        match self {
            Unitary::One(m) => Unitary::One(*m),
            Unitary::Two(m) => {
                let s = |i: usize| ((i & 1) << 1) | (i >> 1);
                Unitary::Two(std::array::from_fn(|r| std::array::from_fn(|c| m[s(r)][s(c)])))
            }
        }
    }

    /// The product `self` then `after` (matrix `after * self`); `None` for unequal arity.
    pub fn then(&self, after: &Unitary) -> Option<Unitary> {
        fn mul<const N: usize>(
            a: &[[Complex64; N]; N],
            b: &[[Complex64; N]; N],
        ) -> [[Complex64; N]; N] {
            std::array::from_fn(|i| {
                std::array::from_fn(|j| (0..N).map(|k| a[i][k] * b[k][j]).sum())
            })
        }
        match (self, after) {
            (Unitary::One(a), Unitary::One(b)) => Some(Unitary::One(mul(b, a))),
            (Unitary::Two(a), Unitary::Two(b)) => Some(Unitary::Two(mul(b, a))),
            _ => None,
        }
    }

    /// A one-qubit unitary on operand `k` (0 or 1) of a two-qubit register.
    pub fn on_operand(m: &Mat2, k: usize) -> Unitary {
        let o = Complex64::new(0.0, 0.0);
        Unitary::Two(std::array::from_fn(|r| {
            std::array::from_fn(|c| {
                let other = (r >> (1 - k)) & 1 == (c >> (1 - k)) & 1;
                if other {
                    m[(r >> k) & 1][(c >> k) & 1]
                } else {
                    o
                }
            })
        }))
    }
}

/// Gates of the OpenQASM 3 `stdgates.inc` (and the built-in `U` and `CX`) that slackmap
/// reads by translation into a gate it knows: (qubits, angles) of each name.
pub fn stdgates_translated(name: &str) -> Option<(usize, usize)> {
    Some(match name {
        "sxdg" => (1, 0),
        "u2" => (1, 2),
        "u3" | "U" => (1, 3),
        "CX" | "cy" | "ch" => (2, 0),
        "crx" | "cry" | "crz" | "cphase" => (2, 1),
        "cu" => (2, 4),
        _ => return None,
    })
}

/// The unitary of a translated standard-library gate at its angles (OpenQASM 3
/// specification, stdgates.inc; the first operand controls): `U(θ, φ, λ)` =
/// [[cos θ/2, -e^{iλ} sin θ/2], [e^{iφ} sin θ/2, e^{i(φ+λ)} cos θ/2]], `u3` equals it up to a
/// phase and `u2(φ, λ)` = `u3(π/2, φ, λ)`; `cu(θ, φ, λ, γ)` applies e^{iγ} U(θ, φ, λ) to the
/// target when the control is 1; `cphase` is `cp`.
pub fn stdgates_unitary(name: &str, angles: &[f64]) -> Option<Unitary> {
    let (arity, n) = stdgates_translated(name)?;
    if angles.len() != n {
        return None;
    }
    let u = |t: f64, p: f64, l: f64| -> Mat2 {
        let (c, s) = ((t / 2.0).cos(), (t / 2.0).sin());
        [
            [Complex64::new(c, 0.0), -Complex64::from_polar(s, l)],
            [Complex64::from_polar(s, p), Complex64::from_polar(c, p + l)],
        ]
    };
    let controlled = |m: Mat2| -> Unitary {
        let o = Complex64::new(0.0, 0.0);
        let one = Complex64::new(1.0, 0.0);
        Unitary::Two(std::array::from_fn(|r| {
            std::array::from_fn(|c| match (r & 1, c & 1) {
                (1, 1) => m[r >> 1][c >> 1],
                (0, 0) if r == c => one,
                _ => o,
            })
        }))
    };
    let one_qubit = |g: Gate, a: f64| g.unitary1(a).unwrap_or_default();
    let _ = arity;
    Some(match name {
        "sxdg" => {
            let m = one_qubit(Gate::Sx, 0.0);
            Unitary::One([[m[0][0].conj(), m[1][0].conj()], [m[0][1].conj(), m[1][1].conj()]])
        }
        "u2" => Unitary::One(u(std::f64::consts::FRAC_PI_2, angles[0], angles[1])),
        "u3" | "U" => Unitary::One(u(angles[0], angles[1], angles[2])),
        "CX" => Unitary::of(Gate::Cx, 0.0)?,
        "cy" => controlled(one_qubit(Gate::Y, 0.0)),
        "ch" => controlled(one_qubit(Gate::H, 0.0)),
        "crx" => controlled(one_qubit(Gate::Rx, angles[0])),
        "cry" => controlled(one_qubit(Gate::Ry, angles[0])),
        "crz" => controlled(one_qubit(Gate::Rz, angles[0])),
        "cphase" => Unitary::of(Gate::Cp, angles[0])?,
        "cu" => {
            let m = u(angles[0], angles[1], angles[2]);
            let g = Complex64::from_polar(1.0, angles[3]);
            controlled([[m[0][0] * g, m[0][1] * g], [m[1][0] * g, m[1][1] * g]])
        }
        _ => return None,
    })
}

impl std::fmt::Display for Gate {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.name())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn is_unitary2(m: &Mat2) -> bool {
        (0..2).all(|i| {
            (0..2).all(|j| {
                let s: Complex64 = (0..2).map(|k| m[i][k] * m[j][k].conj()).sum();
                let want = if i == j { 1.0 } else { 0.0 };
                (s - Complex64::new(want, 0.0)).norm() < 1e-12
            })
        })
    }

    #[test]
    fn a_gate_stays_two_bytes() {
        // Rows hold one per step; a wider gate grew the demo audit's peak memory by 4%.
        assert_eq!(std::mem::size_of::<Gate>(), 2);
    }

    #[test]
    fn names_round_trip() {
        for g in Gate::ALL {
            assert_eq!(Gate::from_name(g.name()), Some(g));
        }
        assert_eq!(Gate::from_name("u3"), None);
    }

    #[test]
    fn one_qubit_unitaries_are_unitary() {
        for g in Gate::ALL.iter().filter(|g| g.arity() == 1) {
            assert!(is_unitary2(&g.unitary1(0.3).unwrap()), "{g}");
        }
    }

    #[test]
    fn sx_squared_is_x() {
        // stdgates.inc defines sx so that sx * sx = x exactly (no global phase).
        let s = Gate::Sx.unitary1(0.0).unwrap();
        let x = Gate::X.unitary1(0.0).unwrap();
        for i in 0..2 {
            for j in 0..2 {
                let v: Complex64 = (0..2).map(|k| s[i][k] * s[k][j]).sum();
                assert!((v - x[i][j]).norm() < 1e-12);
            }
        }
    }
}
