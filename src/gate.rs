//! The gate vocabulary: OpenQASM 3 standard-library names, arities and ideal unitaries.
//!
//! Every other module names gates through [`Gate`]; the unitaries here are the single
//! source of truth for the ideal part of every channel (simulator and model alike).
//! Matrices follow the OpenQASM 3 `stdgates.inc` definitions (OpenQASM 3 specification,
//! "Standard library"), with qubit 0 as the least significant bit of a basis index.

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
}

impl Gate {
    /// Every gate, in a fixed order.
    pub const ALL: [Gate; 13] = [
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
        }
    }

    /// Looks a gate up by its standard-library name (exact, lower case).
    pub fn from_name(name: &str) -> Option<Gate> {
        Gate::ALL.iter().copied().find(|g| g.name() == name)
    }

    /// The names of all known gates, comma separated (for error messages).
    pub fn known_names() -> String {
        Gate::ALL.iter().map(|g| g.name()).collect::<Vec<_>>().join(", ")
    }

    /// Number of qubits the gate acts on.
    pub fn arity(self) -> usize {
        match self {
            Gate::Cz | Gate::Cx => 2,
            _ => 1,
        }
    }

    /// Number of angle parameters (0 or 1).
    pub fn n_params(self) -> usize {
        match self {
            Gate::Rx | Gate::Ry | Gate::Rz => 1,
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
            Gate::Cz | Gate::Cx => return None,
        })
    }

    /// The ideal unitary of a two-qubit gate on (first, second) operand, basis index
    /// bit(first) + 2 * bit(second); `None` for a one-qubit gate.
    pub fn unitary2(self) -> Option<Mat4> {
        let z = Complex64::new(0.0, 0.0);
        let one = Complex64::new(1.0, 0.0);
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
            _ => return None,
        }
        Some(m)
    }
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
