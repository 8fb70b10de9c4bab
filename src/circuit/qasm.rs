//! OpenQASM 3 import and export (the documented subset).
//!
//! Export writes physical qubits `$k` (k = the qubit's position in the layout), one
//! `barrier` between layers, explicit `id` for every measured qubit that idles in a timed
//! layer, and measurement into a bit array in measured order.

use std::fmt::Write;

use super::Circuit;
use crate::gate::Gate;
use crate::layout::Layout;

/// Writes one circuit as an OpenQASM 3 program on physical qubits.
pub fn export(c: &Circuit, layout: &Layout) -> String {
    let mut s = String::new();
    let _ = writeln!(s, "OPENQASM 3.0;");
    let _ = writeln!(s, "include \"stdgates.inc\";");
    let _ = writeln!(s, "// circuit {} on layout {}", c.id, layout.name);
    let _ = writeln!(s, "bit[{}] c;", c.measured.len());
    let mut first = true;
    for (t, layer) in c.layers.iter().enumerate() {
        if !first {
            let _ = writeln!(s, "barrier;");
        }
        first = false;
        for op in layer {
            let args: Vec<String> = op.qubits().iter().map(|q| format!("${q}")).collect();
            if op.gate.n_params() == 1 {
                let _ = writeln!(s, "{}({:?}) {};", op.gate, op.angle, args.join(", "));
            } else {
                let _ = writeln!(s, "{} {};", op.gate, args.join(", "));
            }
        }
        if c.is_timed(layout, t) {
            for &q in &c.measured {
                if !layer.iter().any(|op| op.qubits().contains(&q)) {
                    let _ = writeln!(s, "{} ${q};", Gate::Id);
                }
            }
        }
    }
    if !c.layers.is_empty() {
        let _ = writeln!(s, "barrier;");
    }
    for (i, q) in c.measured.iter().enumerate() {
        let _ = writeln!(s, "c[{i}] = measure ${q};");
    }
    s
}
