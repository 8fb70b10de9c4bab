//! The tool's JSON circuit format (schema 1), documented in the README ("Circuit files").
//!
//! ```json
//! {"schema": 1, "circuits": [
//!   {"id": "c0", "measured": ["q0", "q1"],
//!    "layers": [[{"gate": "sx", "qubits": ["q0"]},
//!                {"gate": "rz", "params": [1.5707963267948966], "qubits": ["q1"]}],
//!               [{"gate": "cz", "qubits": ["q0", "q1"]}]]}]}
//! ```
//! Measured qubits not acted on in a timed layer idle implicitly.

use serde::{Deserialize, Serialize};

/// The schema version this build reads and writes.
pub const SCHEMA: u32 = 1;

/// File-level wire type.
#[derive(Serialize, Deserialize, Debug)]
#[serde(deny_unknown_fields)]
pub struct FileWire {
    /// Format version; must equal [`SCHEMA`].
    pub schema: u32,
    /// The circuits.
    pub circuits: Vec<CircuitWire>,
}

/// One circuit on the wire.
#[derive(Serialize, Deserialize, Debug)]
#[serde(deny_unknown_fields)]
pub struct CircuitWire {
    /// Circuit id (unique in the file).
    pub id: String,
    /// Measured qubit ids, in outcome bit order.
    pub measured: Vec<String>,
    /// Layers of operations.
    pub layers: Vec<Vec<OpWire>>,
}

/// One operation on the wire.
#[derive(Serialize, Deserialize, Debug)]
#[serde(deny_unknown_fields)]
pub struct OpWire {
    /// OpenQASM 3 standard-library gate name.
    pub gate: String,
    /// Angles in radians (only for rx, ry, rz).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub params: Vec<f64>,
    /// Operand qubit ids.
    pub qubits: Vec<String>,
}

use super::{Circuit, CircuitSet, Op};
use crate::layout::Layout;

/// Converts a circuit set to its wire form (ids from the layout; idles left implicit).
pub fn to_wire(set: &CircuitSet, layout: &Layout) -> FileWire {
    let circuits = set
        .circuits
        .iter()
        .map(|c| CircuitWire {
            id: c.id.clone(),
            measured: c.measured.iter().map(|&q| layout.id(q).to_string()).collect(),
            layers: c
                .layers
                .iter()
                .map(|l| l.iter().map(|op| op_wire(op, layout)).collect())
                .collect(),
        })
        .collect();
    FileWire { schema: SCHEMA, circuits }
}

fn op_wire(op: &Op, layout: &Layout) -> OpWire {
    OpWire {
        gate: op.gate.name().to_string(),
        params: if op.gate.n_params() == 1 { vec![op.angle] } else { Vec::new() },
        qubits: op.qubits().iter().map(|&q| layout.id(q).to_string()).collect(),
    }
}

/// Serialises a circuit set in the tool's JSON format: one circuit per line, so files
/// stay compact and diff well.
pub fn to_json(set: &CircuitSet, layout: &Layout) -> String {
    let wire = to_wire(set, layout);
    let mut s = format!("{{\"schema\": {}, \"circuits\": [\n", wire.schema);
    for (i, c) in wire.circuits.iter().enumerate() {
        s.push_str(&serde_json::to_string(c).expect("wire types always serialise"));
        s.push_str(if i + 1 < wire.circuits.len() { ",\n" } else { "\n" });
    }
    s.push_str("]}\n");
    s
}

/// Borrowed view used by writers that want a single circuit.
pub fn circuit_to_json(c: &Circuit, layout: &Layout) -> String {
    let wire = CircuitWire {
        id: c.id.clone(),
        measured: c.measured.iter().map(|&q| layout.id(q).to_string()).collect(),
        layers: c.layers.iter().map(|l| l.iter().map(|op| op_wire(op, layout)).collect()).collect(),
    };
    serde_json::to_string(&wire).expect("wire types always serialise")
}
