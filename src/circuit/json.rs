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
    /// Angles in radians (only for rx, ry, rz, cp, rzz).
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

use std::path::Path;

use crate::error::{Error, Result};
use crate::gate::Gate;

/// Reads a circuit file in the tool's JSON format. Structural problems (bad JSON, unknown
/// fields, unknown gates or qubits, wrong operand or parameter counts) are errors naming
/// the file and, for JSON syntax, the line; layout-level rules are checked by
/// [`super::validate`].
pub fn read_json(path: &Path, layout: &Layout) -> Result<CircuitSet> {
    let file = std::fs::File::open(path).map_err(|e| Error::io(path, e))?;
    let reader = std::io::BufReader::new(file);
    let wire: FileWire = serde_json::from_reader(reader).map_err(|e| {
        let line = (e.line() > 0).then_some(e.line());
        Error::input(path, line, format!("not a valid slackmap circuit file: {e}"))
    })?;
    from_wire(wire, path, layout)
}

/// Converts the wire form to circuits, resolving ids against the layout.
pub fn from_wire(wire: FileWire, path: &Path, layout: &Layout) -> Result<CircuitSet> {
    if wire.schema != SCHEMA {
        return Err(Error::input(
            path,
            None,
            format!("schema {} is not supported (this build reads schema {SCHEMA})", wire.schema),
        ));
    }
    let qubit = |cid: &str, id: &str| {
        layout.qubit(id).ok_or_else(|| {
            Error::input(
                path,
                line_of_circuit(path, cid, 0),
                format!("circuit {cid}: qubit '{id}' is not in layout '{}'", layout.name),
            )
        })
    };
    let mut circuits = Vec::with_capacity(wire.circuits.len());
    for cw in wire.circuits {
        let measured =
            cw.measured.iter().map(|id| qubit(&cw.id, id)).collect::<Result<Vec<_>>>()?;
        let mut layers = Vec::with_capacity(cw.layers.len());
        for (t, lw) in cw.layers.iter().enumerate() {
            let mut layer = Vec::with_capacity(lw.len());
            for ow in lw {
                let here = format!("circuit {} layer {t}", cw.id);
                let gate = Gate::from_name(&ow.gate).ok_or_else(|| {
                    Error::input(
                        path,
                        line_of_circuit(path, &cw.id, 0),
                        format!(
                            "{here}: unknown gate '{}' (known: {})",
                            ow.gate,
                            Gate::known_names()
                        ),
                    )
                })?;
                if ow.qubits.len() != gate.arity() {
                    return Err(Error::input(
                        path,
                        line_of_circuit(path, &cw.id, 0),
                        format!(
                            "{here}: gate {gate} takes {} qubit(s), got {}",
                            gate.arity(),
                            ow.qubits.len()
                        ),
                    ));
                }
                if ow.params.len() != gate.n_params() || !ow.params.iter().all(|p| p.is_finite()) {
                    return Err(Error::input(
                        path,
                        line_of_circuit(path, &cw.id, 0),
                        format!(
                            "{here}: gate {gate} takes {} finite angle(s), got {:?}",
                            gate.n_params(),
                            ow.params
                        ),
                    ));
                }
                let qs =
                    ow.qubits.iter().map(|id| qubit(&cw.id, id)).collect::<Result<Vec<_>>>()?;
                let angle = ow.params.first().copied().unwrap_or(0.0);
                layer.push(Op { gate, operands: [qs[0], *qs.last().unwrap_or(&qs[0])], angle });
            }
            layers.push(layer);
        }
        circuits.push(Circuit { id: cw.id, layers, measured });
    }
    CircuitSet::new(circuits).map_err(|m| {
        // The second circuit with the id is the one at fault.
        let line = super::duplicate_id(&m).and_then(|id| line_of_circuit(path, id, 1));
        Error::input(path, line, m)
    })
}

/// The line on which the `nth` (from 0) circuit with id `id` starts in a circuit file, for
/// messages about that circuit: the file is read again, on the error path only. Circuit
/// files hold one circuit per line as this tool writes them; a hand-written file gets the
/// line of the circuit's `"id"`.
pub fn line_of_circuit(path: &Path, id: &str, nth: usize) -> Option<usize> {
    use std::io::BufRead;
    let quoted = format!("\"{id}\"");
    let file = std::fs::File::open(path).ok()?;
    let mut seen = 0;
    for (i, line) in std::io::BufReader::new(file).split(b'\n').enumerate() {
        let line = line.ok()?;
        let text = String::from_utf8_lossy(&line);
        let mut rest: &str = &text;
        while let Some(at) = rest.find("\"id\"") {
            rest = &rest[at + 4..];
            let value = rest.trim_start().strip_prefix(':').map(str::trim_start);
            if value.is_some_and(|v| v.starts_with(&quoted)) {
                if seen == nth {
                    return Some(i + 1);
                }
                seen += 1;
            }
        }
    }
    None
}
