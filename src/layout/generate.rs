//! Generated layouts (grid, chain, ring, ladder, ...) with positions for drawing.
//!
//! Generated layouts use ids `q0`, `q1`, ... in row-major order, the native gate set
//! `sx`, `x`, `rz` (virtual) and `cz`, and coupler neighbourhoods.

use super::{Layout, NativeGates, Qubit};
use crate::gate::Gate;

/// The default native gate set of generated layouts.
pub fn default_gates() -> NativeGates {
    NativeGates {
        one_qubit: vec![Gate::Sx, Gate::X, Gate::Rz],
        virtual_gates: vec![Gate::Rz],
        two_qubit: Gate::Cz,
    }
}

fn build(name: String, positions: Vec<[f64; 2]>, couplers: Vec<(usize, usize)>) -> Layout {
    let qubits = positions
        .into_iter()
        .enumerate()
        .map(|(i, p)| Qubit { id: format!("q{i}"), position: Some(p) })
        .collect();
    let couplers = couplers.into_iter().map(|(a, b)| (format!("q{a}"), format!("q{b}"))).collect();
    Layout::new(name, qubits, couplers, default_gates(), 1, Vec::new())
        .expect("generated layouts are valid by construction")
}

/// A rows x cols grid, couplers between horizontal and vertical neighbours.
pub fn grid(rows: usize, cols: usize) -> Layout {
    let rows = rows.max(1);
    let cols = cols.max(1);
    let mut pos = Vec::new();
    let mut c = Vec::new();
    for r in 0..rows {
        for k in 0..cols {
            let i = r * cols + k;
            pos.push([k as f64, r as f64]);
            if k + 1 < cols {
                c.push((i, i + 1));
            }
            if r + 1 < rows {
                c.push((i, i + cols));
            }
        }
    }
    build(format!("grid-{rows}x{cols}"), pos, c)
}

/// An open chain of n qubits.
pub fn chain(n: usize) -> Layout {
    let n = n.max(1);
    let pos = (0..n).map(|i| [i as f64, 0.0]).collect();
    build(format!("chain-{n}"), pos, (1..n).map(|i| (i - 1, i)).collect())
}

/// A closed ring of n >= 3 qubits, drawn on a circle.
pub fn ring(n: usize) -> Layout {
    let n = n.max(3);
    let radius = n as f64 / (2.0 * std::f64::consts::PI);
    let pos = (0..n)
        .map(|i| {
            let t = 2.0 * std::f64::consts::PI * i as f64 / n as f64;
            [radius * t.cos(), radius * t.sin()]
        })
        .collect();
    build(format!("ring-{n}"), pos, (0..n).map(|i| (i, (i + 1) % n)).collect())
}

/// A 2 x n ladder.
pub fn ladder(n: usize) -> Layout {
    let mut l = grid(2, n);
    l.name = format!("ladder-2x{}", n.max(1));
    l
}
