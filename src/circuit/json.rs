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
