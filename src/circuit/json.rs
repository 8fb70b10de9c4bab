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
    /// OpenQASM `delay[...]` idles as read: each names an explicit `id` of its qubit in a
    /// layer, with the duration as written (recorded, not modelled).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub delays: Vec<DelayWire>,
}

/// One recorded delay on the wire.
#[derive(Serialize, Deserialize, Debug)]
#[serde(deny_unknown_fields)]
pub struct DelayWire {
    /// The idling qubit's id.
    pub qubit: String,
    /// The layer (0-based) holding the qubit's `id`.
    pub layer: usize,
    /// The duration as written (`100ns`, `2dt`).
    pub duration: String,
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

use super::{Circuit, CircuitSet, Delay, Op};
use crate::layout::Layout;

/// Converts a circuit set to its wire form (ids from the layout; idles left implicit).
pub fn to_wire(set: &CircuitSet, layout: &Layout) -> FileWire {
    let circuits = set
        .circuits
        .iter()
        .enumerate()
        .map(|(i, c)| CircuitWire {
            id: c.id.clone(),
            measured: c.measured.iter().map(|&q| layout.id(q).to_string()).collect(),
            layers: c
                .layers
                .iter()
                .map(|l| l.iter().map(|op| op_wire(op, layout)).collect())
                .collect(),
            delays: set
                .delays_of(i)
                .iter()
                .map(|d| DelayWire {
                    qubit: layout.id(d.qubit).to_string(),
                    layer: d.layer,
                    duration: d.duration.clone(),
                })
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
        delays: Vec::new(),
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
///
/// The file is streamed: each operation becomes an [`Op`] as it is read, with gate names and
/// qubit ids looked up in place (no string is kept per operation), so memory is that of the
/// circuits themselves. Problems are reported as [`from_wire`] reports them for the whole
/// document: a JSON error anywhere first, then the schema, then the first circuit's fault.
///
/// A file laid out as this tool writes it (`{"schema": N, "circuits": [...]}`, any
/// whitespace) is cut at circuit boundaries a block at a time and its circuits parsed in
/// parallel ([`read_split`]); anything that reading does not accept, error or not, is read
/// again one token after another, so that every message (its line and column included) is
/// the streamed reader's.
pub fn read_json(path: &Path, layout: &Layout) -> Result<CircuitSet> {
    let parsed = match read_split(path, layout, SPLIT_BLOCK) {
        Some(parsed) => parsed,
        None => read_streamed(path, layout)?,
    };
    checked(parsed, path, layout)
}

/// A file as read, checked in the order the streamed reader reports: the schema, then the
/// first circuit's fault, then duplicate ids.
fn checked((schema, circuits, fault): Parsed, path: &Path, layout: &Layout) -> Result<CircuitSet> {
    check_schema(schema, path)?;
    if let Some((circuit, fault)) = fault {
        return Err(fault.error(path, layout, &circuit));
    }
    into_set(circuits, path)
}

/// A whole file as read, before it is checked: its schema, its circuits with their delays,
/// and the first circuit fault in file order with its circuit's id.
type Parsed = (u32, Vec<(Circuit, Vec<Delay>)>, Option<(String, Fault)>);

/// The whole file through one streaming parser.
fn read_streamed(path: &Path, layout: &Layout) -> Result<Parsed> {
    let file = std::fs::File::open(path).map_err(|e| Error::io(path, e))?;
    let reader = std::io::BufReader::with_capacity(1 << 16, file);
    let mut de = serde_json::Deserializer::from_reader(reader);
    let state = Stream { layout, fault: std::cell::RefCell::new(None) };
    let (schema, circuits) = serde::de::DeserializeSeed::deserialize(FileSeed(&state), &mut de)
        .and_then(|v| de.end().map(|()| v))
        .map_err(|e| {
            let line = (e.line() > 0).then_some(e.line());
            Error::input(path, line, format!("not a valid slackmap circuit file: {e}"))
        })?;
    Ok((schema, circuits, state.fault.into_inner()))
}

/// How much of a circuit file [`read_split`] reads at a time (a circuit longer than this
/// is carried over whole into the next block).
const SPLIT_BLOCK: usize = 1 << 24;

/// Reads a circuit file a block of `block` bytes at a time, cuts each block's complete
/// circuits out of the `circuits` array and parses them in parallel (in file order, so the
/// first fault is the one a single pass meets). `None` when anything is not as a valid file
/// laid out as the tool writes it: the header is not `{"schema": N, "circuits": [` (with any
/// whitespace), a circuit does not parse on its own, anything but whitespace and one comma
/// lies between circuits, or the array is not followed by `}` and the end of the file.
/// Every circuit is then a complete JSON value parsed by the streamed reader's own seeds,
/// and the bytes between them are what a single pass accepts, so whatever is returned is
/// what the streamed reader returns.
fn read_split(path: &Path, layout: &Layout, block: usize) -> Option<Parsed> {
    use crate::files::{take_front, Cut};
    use rayon::prelude::*;
    let mut file = std::fs::File::open(path).ok()?;
    let mut buf = Vec::new();
    // The header is looked for in the first 4 KiB at least.
    crate::files::read_block(&mut file, &mut buf, block.max(1 << 12))?;
    let (schema, body) = split_header(&buf)?;
    // Cut on the reading thread: each piece holds whole circuits and their spans; the
    // circuit being cut when a block ends is carried into the next piece.
    let mut sp =
        Splitter { depth: 0, in_string: false, escaped: false, start: 0, expect: Next::FirstOrEnd };
    // Both move into `cut`, which alone reads them.
    let (mut scanned, mut closed) = (body, false);
    // After the array: whitespace, `}`, whitespace and the end of the file.
    let tail_ok = |rest: &[u8]| {
        let i = skip_ws(rest, 0);
        rest.get(i) == Some(&b'}') && skip_ws(rest, i + 1) == rest.len()
    };
    let cut = move |buf: &mut Vec<u8>, ended: bool| {
        if closed {
            return if !ended || tail_ok(buf) { Cut::More } else { Cut::Refuse };
        }
        let mut spans = Vec::new();
        let Some(closed_at) = sp.scan(buf, scanned, &mut spans) else {
            return Cut::Refuse;
        };
        let chunk = match closed_at {
            Some(end) => {
                closed = true;
                let chunk = take_front(buf, end);
                if ended && !tail_ok(buf) {
                    return Cut::Refuse;
                }
                chunk
            }
            None if ended => return Cut::Refuse,
            None => {
                // Keep only the circuit being cut, if any.
                let keep = if sp.depth > 0 { sp.start } else { buf.len() };
                let chunk = take_front(buf, keep);
                sp.start -= keep.min(sp.start);
                scanned = buf.len();
                chunk
            }
        };
        Cut::Piece((chunk, spans))
    };
    let (mut circuits, mut fault) = (Vec::new(), None);
    let each = |(chunk, spans): (Vec<u8>, Vec<(usize, usize)>)| -> Option<()> {
        let parsed: Vec<Option<ParsedCircuit>> =
            spans.par_iter().map(|&(s, e)| parse_circuit(&chunk[s..e], layout)).collect();
        for one in parsed {
            let (circuit, delays, f) = one?;
            if let (None, Some(f)) = (&fault, f) {
                fault = Some((circuit.id.clone(), f));
            }
            circuits.push((circuit, delays));
        }
        Some(())
    };
    // The reading refuses a file that ends before the array closes or has more after it.
    crate::files::read_ahead(file, buf, block, cut, each)?;
    Some((schema, circuits, fault))
}

/// One circuit parsed on its own: the circuit, its delays and its first fault.
type ParsedCircuit = (Circuit, Vec<Delay>, Option<Fault>);

fn parse_circuit(bytes: &[u8], layout: &Layout) -> Option<ParsedCircuit> {
    let state = Stream { layout, fault: std::cell::RefCell::new(None) };
    let mut de = serde_json::Deserializer::from_slice(bytes);
    let (circuit, delays) =
        serde::de::DeserializeSeed::deserialize(CircuitSeed(&state), &mut de).ok()?;
    de.end().ok()?;
    Some((circuit, delays, state.fault.into_inner().map(|(_, f)| f)))
}

fn is_ws(b: u8) -> bool {
    matches!(b, b' ' | b'\t' | b'\n' | b'\r')
}

fn skip_ws(b: &[u8], mut i: usize) -> usize {
    while i < b.len() && is_ws(b[i]) {
        i += 1;
    }
    i
}

/// `{"schema": N, "circuits": [` at the start of `b`: N and where the array's body starts.
fn split_header(b: &[u8]) -> Option<(u32, usize)> {
    let token = |i: usize, t: &[u8]| -> Option<usize> {
        let i = skip_ws(b, i);
        (b.get(i..i + t.len())? == t).then_some(i + t.len())
    };
    let i = token(0, b"{")?;
    let i = token(i, b"\"schema\"")?;
    let from = skip_ws(b, token(i, b":")?);
    let mut to = from;
    while to < b.len() && b[to].is_ascii_digit() {
        to += 1;
    }
    let schema: u32 = serde_json::from_slice(&b[from..to]).ok()?;
    let i = token(to, b",")?;
    let i = token(i, b"\"circuits\"")?;
    let i = token(i, b":")?;
    Some((schema, token(i, b"[")?))
}

/// What may come next between the circuits of the array.
#[derive(Clone, Copy)]
enum Next {
    /// Right after `[`: a circuit or `]`.
    FirstOrEnd,
    /// After a comma: a circuit.
    Circuit,
    /// After a circuit: a comma or `]`.
    CommaOrEnd,
}

/// Finds where each circuit of the array begins and ends: it follows strings (and their
/// escapes) and the nesting of brackets, nothing else; each piece it cuts is parsed in full.
struct Splitter {
    /// Nesting inside the circuit being cut; 0 between circuits.
    depth: usize,
    in_string: bool,
    escaped: bool,
    /// Where the circuit being cut starts.
    start: usize,
    expect: Next,
}

impl Splitter {
    /// Scans `buf` from `from`, adding each complete circuit's span to `spans`: `Some(None)`
    /// when the block ends inside the array, `Some(Some(end))` just after its `]`, `None`
    /// when something other than whitespace, a comma, `]` or an object lies between circuits.
    fn scan(
        &mut self,
        buf: &[u8],
        from: usize,
        spans: &mut Vec<(usize, usize)>,
    ) -> Option<Option<usize>> {
        let mut i = from;
        while i < buf.len() {
            if self.depth > 0 && !self.escaped {
                // Jump to the next byte that can change the state: a quote or a backslash
                // in a string, a quote or a bracket outside (a tight search; the state
                // machine below then takes that one byte).
                let rest = &buf[i..];
                let next = if self.in_string {
                    rest.iter().position(|&b| b == b'"' || b == b'\\')
                } else {
                    rest.iter().position(|&b| matches!(b, b'"' | b'{' | b'[' | b'}' | b']'))
                };
                match next {
                    Some(k) => i += k,
                    None => break,
                }
            }
            let b = buf[i];
            if self.depth > 0 {
                if self.in_string {
                    if self.escaped {
                        self.escaped = false;
                    } else if b == b'\\' {
                        self.escaped = true;
                    } else if b == b'"' {
                        self.in_string = false;
                    }
                } else {
                    match b {
                        b'"' => self.in_string = true,
                        b'{' | b'[' => self.depth += 1,
                        b'}' | b']' => {
                            self.depth -= 1;
                            if self.depth == 0 {
                                spans.push((self.start, i + 1));
                                self.expect = Next::CommaOrEnd;
                            }
                        }
                        _ => {}
                    }
                }
            } else if !is_ws(b) {
                match (self.expect, b) {
                    (Next::FirstOrEnd | Next::Circuit, b'{') => {
                        self.start = i;
                        self.depth = 1;
                    }
                    (Next::FirstOrEnd | Next::CommaOrEnd, b']') => return Some(Some(i + 1)),
                    (Next::CommaOrEnd, b',') => self.expect = Next::Circuit,
                    _ => return None,
                }
            }
            i += 1;
        }
        Some(None)
    }
}

fn check_schema(schema: u32, path: &Path) -> Result<()> {
    if schema != SCHEMA {
        return Err(Error::input(
            path,
            None,
            format!("schema {schema} is not supported (this build reads schema {SCHEMA})"),
        ));
    }
    Ok(())
}

fn into_set(read: Vec<(Circuit, Vec<Delay>)>, path: &Path) -> Result<CircuitSet> {
    let (circuits, delays): (Vec<Circuit>, Vec<Vec<Delay>>) = read.into_iter().unzip();
    let mut set = CircuitSet::new(circuits).map_err(|m| {
        // The second circuit with the id is the one at fault.
        let line = super::duplicate_id(&m).and_then(|id| line_of_circuit(path, id, 1));
        Error::input(path, line, m)
    })?;
    for (i, d) in delays.into_iter().enumerate() {
        set.set_delays(i, d);
    }
    Ok(set)
}

/// A circuit's delays with qubit ids resolved; the first unknown id is the fault.
fn resolve_delays(wire: Vec<DelayWire>, layout: &Layout) -> std::result::Result<Vec<Delay>, Fault> {
    wire.into_iter()
        .map(|d| match layout.qubit(&d.qubit) {
            Some(qubit) => Ok(Delay { qubit, layer: d.layer, duration: d.duration }),
            None => Err(Fault::Qubit(d.qubit)),
        })
        .collect()
}

/// The first thing wrong with a circuit that is well-formed JSON.
#[derive(Debug)]
enum Fault {
    /// A qubit id that is not in the layout.
    Qubit(String),
    /// An unknown gate name in layer `layer`.
    Gate { layer: usize, name: String },
    /// A gate given the wrong number of qubits.
    Arity { layer: usize, gate: Gate, got: usize },
    /// A gate given the wrong number of angles, or an angle that is not finite.
    Params { layer: usize, gate: Gate, params: Vec<f64> },
}

impl Fault {
    fn error(&self, path: &Path, layout: &Layout, circuit: &str) -> Error {
        let line = line_of_circuit(path, circuit, 0);
        let message = match self {
            Fault::Qubit(id) => {
                format!("circuit {circuit}: qubit '{id}' is not in layout '{}'", layout.name)
            }
            Fault::Gate { layer, name } => format!(
                "circuit {circuit} layer {layer}: unknown gate '{name}' (known: {})",
                Gate::known_names()
            ),
            Fault::Arity { layer, gate, got } => format!(
                "circuit {circuit} layer {layer}: gate {gate} takes {} qubit(s), got {got}",
                gate.arity()
            ),
            Fault::Params { layer, gate, params } => format!(
                "circuit {circuit} layer {layer}: gate {gate} takes {} finite angle(s), got {params:?}",
                gate.n_params()
            ),
        };
        Error::input(path, line, message)
    }
}

/// One operation as read: the gate (or the unknown name), its angles, how many qubit ids it
/// named, the first two of them resolved, and the first id the layout does not know.
struct OpRead {
    gate: std::result::Result<Gate, String>,
    params: Vec<f64>,
    n_qubits: usize,
    qubits: [crate::layout::QubitIx; 2],
    unknown: Option<String>,
}

impl OpRead {
    /// The operation, checked in the order the format's reader has always used: gate name,
    /// operand count, angles, qubit ids.
    fn op(self, layer: usize) -> std::result::Result<Op, Fault> {
        let gate = self.gate.map_err(|name| Fault::Gate { layer, name })?;
        if self.n_qubits != gate.arity() {
            return Err(Fault::Arity { layer, gate, got: self.n_qubits });
        }
        if self.params.len() != gate.n_params() || !self.params.iter().all(|p| p.is_finite()) {
            return Err(Fault::Params { layer, gate, params: self.params });
        }
        if let Some(id) = self.unknown {
            return Err(Fault::Qubit(id));
        }
        let q = self.qubits;
        let operands = [q[0], if gate.arity() == 2 { q[1] } else { q[0] }];
        Ok(Op { gate, operands, angle: self.params.first().copied().unwrap_or(0.0) })
    }
}

/// Converts the wire form to circuits, resolving ids against the layout.
pub fn from_wire(wire: FileWire, path: &Path, layout: &Layout) -> Result<CircuitSet> {
    check_schema(wire.schema, path)?;
    let mut circuits = Vec::with_capacity(wire.circuits.len());
    for cw in wire.circuits {
        let fail = |f: Fault| f.error(path, layout, &cw.id);
        let resolve = |id: &String| layout.qubit(id).ok_or_else(|| Fault::Qubit(id.clone()));
        let measured = cw.measured.iter().map(resolve).collect::<std::result::Result<Vec<_>, _>>();
        let measured = measured.map_err(fail)?;
        let mut layers = Vec::with_capacity(cw.layers.len());
        for (t, lw) in cw.layers.iter().enumerate() {
            let mut layer = Vec::with_capacity(lw.len());
            for ow in lw {
                let mut read = OpRead {
                    gate: Gate::from_name(&ow.gate).ok_or_else(|| ow.gate.clone()),
                    params: ow.params.clone(),
                    n_qubits: ow.qubits.len(),
                    qubits: [0; 2],
                    unknown: None,
                };
                for (j, id) in ow.qubits.iter().enumerate() {
                    match layout.qubit(id) {
                        Some(q) if j < 2 => read.qubits[j] = q,
                        Some(_) => {}
                        None => {
                            read.unknown.get_or_insert_with(|| id.clone());
                        }
                    }
                }
                layer.push(read.op(t).map_err(fail)?);
            }
            layers.push(layer);
        }
        let delays = resolve_delays(cw.delays, layout).map_err(fail)?;
        circuits.push((Circuit { id: cw.id, layers, measured }, delays));
    }
    into_set(circuits, path)
}

/// The streaming reader's state: the layout ids resolve against, and the first circuit
/// fault met (with its circuit's id), reported once the whole file has parsed.
struct Stream<'a> {
    layout: &'a Layout,
    fault: std::cell::RefCell<Option<(String, Fault)>>,
}

use serde::de::{self, DeserializeSeed, MapAccess, SeqAccess, Visitor};
use std::fmt;

/// A seed that is its own visitor: the `DeserializeSeed` half calls deserializer method
/// `$call` (with `$arg`s before the visitor), and the visitor expects `$what`; the visit
/// methods follow.
macro_rules! seed {
    (<$de:lifetime> $ty:ty => $value:ty, $call:ident($($arg:expr),*), $what:literal; $($visit:tt)*) => {
        impl<$de> DeserializeSeed<$de> for $ty {
            type Value = $value;
            fn deserialize<D: de::Deserializer<$de>>(
                self,
                d: D,
            ) -> std::result::Result<$value, D::Error> {
                d.$call($($arg,)* self)
            }
        }
        impl<$de> Visitor<$de> for $ty {
            type Value = $value;
            fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
                f.write_str($what)
            }
            $($visit)*
        }
    };
}

/// A struct field name among `fields`, as its position (unknown names are errors, as the
/// wire types' `deny_unknown_fields` makes them).
struct Field(&'static [&'static str]);

impl<'de> DeserializeSeed<'de> for Field {
    type Value = usize;
    fn deserialize<D: de::Deserializer<'de>>(self, d: D) -> std::result::Result<usize, D::Error> {
        d.deserialize_identifier(self)
    }
}

impl<'de> Visitor<'de> for Field {
    type Value = usize;
    fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
        f.write_str("field identifier")
    }
    fn visit_str<E: de::Error>(self, v: &str) -> std::result::Result<usize, E> {
        self.0.iter().position(|&f| f == v).ok_or_else(|| E::unknown_field(v, self.0))
    }
}

const FILE_FIELDS: &[&str] = &["schema", "circuits"];
const CIRCUIT_FIELDS: &[&str] = &["id", "measured", "layers", "delays"];
const OP_FIELDS: &[&str] = &["gate", "params", "qubits"];

/// Fails with serde's duplicate-field error when `slot` is already filled.
fn once<T, E: de::Error>(slot: &Option<T>, name: &'static str) -> std::result::Result<(), E> {
    if slot.is_some() {
        return Err(E::duplicate_field(name));
    }
    Ok(())
}

struct FileSeed<'s, 'a>(&'s Stream<'a>);

seed! {
    <'de> FileSeed<'_, '_> => (u32, Vec<(Circuit, Vec<Delay>)>), deserialize_struct("FileWire", FILE_FIELDS), "struct FileWire";
    fn visit_map<A: MapAccess<'de>>(
        self,
        mut map: A,
    ) -> std::result::Result<Self::Value, A::Error> {
        let (mut schema, mut circuits) = (None, None);
        while let Some(field) = map.next_key_seed(Field(FILE_FIELDS))? {
            if field == 0 {
                once(&schema, "schema")?;
                schema = Some(map.next_value::<u32>()?);
            } else {
                once(&circuits, "circuits")?;
                circuits = Some(map.next_value_seed(CircuitsSeed(self.0))?);
            }
        }
        let schema = schema.ok_or_else(|| de::Error::missing_field("schema"))?;
        let circuits = circuits.ok_or_else(|| de::Error::missing_field("circuits"))?;
        Ok((schema, circuits))
    }
}

struct CircuitsSeed<'s, 'a>(&'s Stream<'a>);

seed! {
    <'de> CircuitsSeed<'_, '_> => Vec<(Circuit, Vec<Delay>)>, deserialize_seq(), "a sequence";
    fn visit_seq<A: SeqAccess<'de>>(
        self,
        mut seq: A,
    ) -> std::result::Result<Self::Value, A::Error> {
        let mut out = Vec::new();
        while let Some(c) = seq.next_element_seed(CircuitSeed(self.0))? {
            out.push(c);
        }
        Ok(out)
    }
}

struct CircuitSeed<'s, 'a>(&'s Stream<'a>);

seed! {
    <'de> CircuitSeed<'_, '_> => (Circuit, Vec<Delay>), deserialize_struct("CircuitWire", CIRCUIT_FIELDS), "struct CircuitWire";
    fn visit_map<A: MapAccess<'de>>(self, mut map: A) -> std::result::Result<Self::Value, A::Error> {
        let layout = self.0.layout;
        let (mut id, mut measured, mut layers, mut delays) = (None, None, None, None);
        while let Some(field) = map.next_key_seed(Field(CIRCUIT_FIELDS))? {
            match field {
                0 => {
                    once(&id, "id")?;
                    id = Some(map.next_value::<String>()?);
                }
                1 => {
                    once(&measured, "measured")?;
                    measured = Some(map.next_value_seed(QubitsSeed(layout, true))?);
                }
                2 => {
                    once(&layers, "layers")?;
                    layers = Some(map.next_value_seed(LayersSeed(layout))?);
                }
                _ => {
                    once(&delays, "delays")?;
                    delays = Some(map.next_value::<Vec<DelayWire>>()?);
                }
            }
        }
        let id: String = id.ok_or_else(|| de::Error::missing_field("id"))?;
        let measured: QubitsRead = measured.ok_or_else(|| de::Error::missing_field("measured"))?;
        let (layers, layer_fault) = layers.ok_or_else(|| de::Error::missing_field("layers"))?;
        // Measured ids are checked before the layers, and the layers before the delays, as
        // in [`from_wire`].
        let (delays, delay_fault) = match resolve_delays(delays.unwrap_or_default(), layout) {
            Ok(d) => (d, None),
            Err(f) => (Vec::new(), Some(f)),
        };
        let fault = measured.unknown.map(Fault::Qubit).or(layer_fault).or(delay_fault);
        if let Some(fault) = fault {
            let mut first = self.0.fault.borrow_mut();
            if first.is_none() {
                *first = Some((id.clone(), fault));
            }
        }
        Ok((Circuit { id, layers, measured: measured.qubits }, delays))
    }
}

/// A list of qubit ids resolved against the layout: all of them (a measured list) or only
/// the first two (an operation's operands, so that no list is allocated per operation),
/// how many there were, and the first id the layout does not know.
struct QubitsRead {
    qubits: Vec<crate::layout::QubitIx>,
    first: [crate::layout::QubitIx; 2],
    n: usize,
    unknown: Option<String>,
}

/// Reads a list of qubit ids; `.1` keeps every id, not only the first two.
struct QubitsSeed<'a>(&'a Layout, bool);

seed! {
    <'de> QubitsSeed<'_> => QubitsRead, deserialize_seq(), "a sequence";
    fn visit_seq<A: SeqAccess<'de>>(self, mut seq: A) -> std::result::Result<QubitsRead, A::Error> {
        let mut out = QubitsRead { qubits: Vec::new(), first: [0; 2], n: 0, unknown: None };
        while let Some(q) = seq.next_element_seed(QubitSeed(self.0))? {
            match q {
                Ok(q) if self.1 => out.qubits.push(q),
                Ok(q) if out.n < 2 => out.first[out.n] = q,
                Ok(_) => {}
                Err(id) => {
                    out.unknown.get_or_insert(id);
                }
            }
            out.n += 1;
        }
        Ok(out)
    }
}

/// One qubit id, looked up in place; the id itself is kept only when the layout lacks it.
struct QubitSeed<'a>(&'a Layout);

seed! {
    <'de> QubitSeed<'_> => std::result::Result<crate::layout::QubitIx, String>, deserialize_str(), "a string";
    fn visit_str<E: de::Error>(self, v: &str) -> std::result::Result<Self::Value, E> {
        Ok(self.0.qubit(v).ok_or_else(|| v.to_string()))
    }
}

/// A gate name, looked up in place; kept only when unknown.
struct GateSeed;

seed! {
    <'de> GateSeed => std::result::Result<Gate, String>, deserialize_str(), "a string";
    fn visit_str<E: de::Error>(self, v: &str) -> std::result::Result<Self::Value, E> {
        Ok(Gate::from_name(v).ok_or_else(|| v.to_string()))
    }
}

/// The layers of a circuit, and the first operation fault in them.
struct LayersSeed<'a>(&'a Layout);

seed! {
    <'de> LayersSeed<'_> => (Vec<super::Layer>, Option<Fault>), deserialize_seq(), "a sequence";
    fn visit_seq<A: SeqAccess<'de>>(
        self,
        mut seq: A,
    ) -> std::result::Result<Self::Value, A::Error> {
        let mut layers = Vec::new();
        let mut fault = None;
        while let Some(layer) =
            seq.next_element_seed(LayerSeed(self.0, layers.len(), &mut fault))?
        {
            layers.push(layer);
        }
        Ok((layers, fault))
    }
}

/// One layer (index `.1`) of operations; the first fault in it goes to `.2` when that is
/// still empty.
struct LayerSeed<'a, 'f>(&'a Layout, usize, &'f mut Option<Fault>);

seed! {
    <'de> LayerSeed<'_, '_> => super::Layer, deserialize_seq(), "a sequence";
    fn visit_seq<A: SeqAccess<'de>>(
        self,
        mut seq: A,
    ) -> std::result::Result<Self::Value, A::Error> {
        let mut ops = Vec::with_capacity(seq.size_hint().unwrap_or(0));
        while let Some(read) = seq.next_element_seed(OpSeed(self.0))? {
            match read.op(self.1) {
                Ok(op) => ops.push(op),
                Err(f) => {
                    self.2.get_or_insert(f);
                }
            }
        }
        ops.shrink_to_fit();
        Ok(ops)
    }
}

struct OpSeed<'a>(&'a Layout);

seed! {
    <'de> OpSeed<'_> => OpRead, deserialize_struct("OpWire", OP_FIELDS), "struct OpWire";
    fn visit_map<A: MapAccess<'de>>(self, mut map: A) -> std::result::Result<OpRead, A::Error> {
        let (mut gate, mut params, mut qubits) = (None, None, None);
        while let Some(field) = map.next_key_seed(Field(OP_FIELDS))? {
            match field {
                0 => {
                    once(&gate, "gate")?;
                    gate = Some(map.next_value_seed(GateSeed)?);
                }
                1 => {
                    once(&params, "params")?;
                    params = Some(map.next_value::<Vec<f64>>()?);
                }
                _ => {
                    once(&qubits, "qubits")?;
                    qubits = Some(map.next_value_seed(QubitsSeed(self.0, false))?);
                }
            }
        }
        let gate = gate.ok_or_else(|| de::Error::missing_field("gate"))?;
        let qubits: QubitsRead = qubits.ok_or_else(|| de::Error::missing_field("qubits"))?;
        Ok(OpRead {
            gate,
            params: params.unwrap_or_default(),
            n_qubits: qubits.n,
            qubits: qubits.first,
            unknown: qubits.unknown,
        })
    }
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

#[cfg(test)]
mod tests {
    use super::*;
    use crate::layout::generate::grid;

    /// The whole-document path: parse into the wire types, then convert.
    fn via_wire(text: &str, path: &Path, layout: &Layout) -> Result<CircuitSet> {
        let wire: FileWire = serde_json::from_reader(text.as_bytes()).map_err(|e| {
            let line = (e.line() > 0).then_some(e.line());
            Error::input(path, line, format!("not a valid slackmap circuit file: {e}"))
        })?;
        from_wire(wire, path, layout)
    }

    #[test]
    fn streaming_reader_reads_and_fails_as_the_wire_types_do() {
        let l = grid(2, 3);
        let good = r#"{"schema": 1, "circuits": [
{"id":"a","measured":["q0","q1"],"layers":[[{"gate":"sx","qubits":["q0"]},{"gate":"rz","params":[0.5],"qubits":["q1"]}],[{"gate":"cz","qubits":["q1","q0"]}]]},
{"layers":[[{"qubits":["q4"],"gate":"x"}]],"measured":["q4"],"id":"b"}
]}"#;
        let docs = [
            good.to_string(),
            good.replace("\"sx\"", "\"sqx\""),
            good.replace("[\"q4\"],\"gate\"", "[\"q9\"],\"gate\""),
            good.replace("\"measured\":[\"q4\"]", "\"measured\":[\"q4\",\"q77\"]"),
            good.replace("\"qubits\":[\"q0\"]}", "\"qubits\":[\"q0\",\"q1\"]}"),
            good.replace("[0.5]", "[]"),
            good.replace("[0.5]", "[0.5, 1.0]"),
            good.replace("\"id\":\"b\"", "\"id\":\"a\""),
            good.replace("\"id\":\"b\"", "\"id\":\"b\",\"extra\":1"),
            good.replace(",\"gate\":\"x\"", ""),
            good.replace("\"schema\": 1", "\"schema\": 2"),
            good.replace("\"schema\": 1", "\"schema\": 2").replace("\"sx\"", "\"sqx\""),
            // A gate fault in circuit a and a measured-qubit fault in circuit b: a's is first.
            good.replace("\"sx\"", "\"sqx\"").replace("[\"q4\"],\"id\"", "[\"q99\"],\"id\""),
            good.replace("]]}", "]]"),
            good.replace("\"id\":\"a\"", "\"id\":3"),
            format!("{good} trailing"),
            good.replace(
                "\"id\":\"b\"",
                "\"id\":\"b\",\"delays\":[{\"qubit\":\"q4\",\"layer\":0,\"duration\":\"40ns\"}]",
            ),
            good.replace(
                "\"id\":\"b\"",
                "\"id\":\"b\",\"delays\":[{\"qubit\":\"q99\",\"layer\":0,\"duration\":\"4dt\"}]",
            ),
            good.replace(
                "\"id\":\"b\"",
                "\"id\":\"b\",\"delays\":[{\"qubit\":\"q4\",\"layer\":0}]",
            ),
        ];
        let dir = tempfile::tempdir().unwrap();
        for (i, doc) in docs.iter().enumerate() {
            let path = dir.path().join(format!("c{i}.json"));
            std::fs::write(&path, doc).unwrap();
            let streamed = read_json(&path, &l);
            let whole = via_wire(doc, &path, &l);
            match (streamed, whole) {
                (Ok(a), Ok(b)) => {
                    assert_eq!(a.circuits, b.circuits, "document {i}");
                    let (da, db): (Vec<_>, Vec<_>) =
                        (a.all_delays().collect(), b.all_delays().collect());
                    assert_eq!(da, db, "document {i}");
                }
                (Err(a), Err(b)) => assert_eq!(a.to_string(), b.to_string(), "document {i}"),
                (a, b) => panic!("document {i}: streamed {a:?}, whole {b:?}"),
            }
        }
        let set = read_json(&dir.path().join("c0.json"), &l).unwrap();
        let a = &set.circuits[0];
        assert_eq!(a.measured, vec![0, 1]);
        assert_eq!(a.layers[0][1], Op::rot(Gate::Rz, 1, 0.5));
        assert_eq!(a.layers[1][0], Op::two(Gate::Cz, 1, 0));
        assert_eq!(set.circuits[1].layers[0][0], Op::one(Gate::X, 4));
        // Delays are carried through the reader and back out by the writer.
        let set = read_json(&dir.path().join(format!("c{}.json", docs.len() - 3)), &l).unwrap();
        let want = Delay { qubit: 4, layer: 0, duration: "40ns".into() };
        assert_eq!(set.delays_of(1), std::slice::from_ref(&want));
        assert!(
            to_json(&set, &l).contains(r#""delays":[{"qubit":"q4","layer":0,"duration":"40ns"}]"#)
        );
        let m = read_json(&dir.path().join(format!("c{}.json", docs.len() - 2)), &l).unwrap_err();
        assert!(m.to_string().contains("qubit 'q99' is not in layout"), "{m}");
    }

    /// The circuits of a file cut at circuit boundaries and parsed in parallel are those of
    /// the streamed reading, and so are the messages, at any block size (so circuits that
    /// straddle blocks are carried over), with brackets, braces and escaped quotes inside
    /// strings; what it does not accept is left to the streamed reader.
    #[test]
    fn split_reading_is_the_streamed_reading() {
        let l = grid(2, 3);
        let one = |i: usize| {
            format!(
                r#"{{"id":"c{i}-\"]}}{{[","measured":["q0","q1"],"layers":[[{{"gate":"sx","qubits":["q0"]}},{{"gate":"rz","params":[0.{i}],"qubits":["q1"]}}],[{{"gate":"cz","qubits":["q1","q0"]}}]]}}"#
            )
        };
        let many: Vec<String> = (0..60).map(one).collect();
        let long = format!("{{\"schema\": 1, \"circuits\": [\n{}\n]}}\n", many.join(",\n"));
        let pretty = format!(
            " \r\n{{\t\"schema\" :\n1 ,\"circuits\"\n:\t[ {} ] \n}}  ",
            many[..3].join(" ,\n\t")
        );
        // (document, whether the split reading takes it)
        let docs = [
            (long.clone(), true),
            (pretty.clone(), true),
            ("{\"schema\": 1, \"circuits\": []}".to_string(), true),
            (long.replace("\"sx\"", "\"sqx\""), true),
            (long.replace("\"schema\": 1", "\"schema\": 2"), true),
            (long.replace("\"id\":\"c7-", "\"id\":\"c6-"), true),
            (long.replace("[0.5]", "[0.5, 1.0]"), true),
            (long.replace("[\"q1\",\"q0\"]", "[\"q1\",\"q0\",\"q9\"]"), true),
            (long.replace("\"id\":\"c9-", "\"id\":9,\"x\":\"c9-"), false),
            (long.replace("]]}", "]]"), false),
            (long.replace("]]},\n{", "]]}\n{"), false),
            (long.replace("]]},\n{", "]]},,\n{"), false),
            (long.replace("]]},\n{\"id\":\"c3", "]]}]}\n{\"id\":\"c3"), false),
            (format!("{long} trailing"), false),
            (long.replace("\n]}", "\n]"), false),
            (long.replace("\"schema\": 1", "\"schema\": 1.0"), false),
            (long.replace("{\"schema\": 1, \"circuits\"", "{\"circuits\""), false),
            (format!("\u{feff}{long}"), false),
        ];
        let dir = tempfile::tempdir().unwrap();
        for (i, (doc, split)) in docs.iter().enumerate() {
            let path = dir.path().join(format!("s{i}.json"));
            std::fs::write(&path, doc).unwrap();
            let whole = via_wire(doc, &path, &l);
            for block in [1 << 20, 333, 7] {
                let parsed = read_split(&path, &l, block);
                assert_eq!(parsed.is_some(), *split, "document {i}, block {block}");
                let read = match parsed {
                    Some(p) => checked(p, &path, &l),
                    None => read_json(&path, &l),
                };
                match (read, &whole) {
                    (Ok(a), Ok(b)) => {
                        assert_eq!(a.circuits, b.circuits, "document {i}, block {block}");
                        assert_eq!(
                            a.all_delays().collect::<Vec<_>>(),
                            b.all_delays().collect::<Vec<_>>()
                        );
                    }
                    (Err(a), Err(b)) => {
                        assert_eq!(a.to_string(), b.to_string(), "document {i}, block {block}")
                    }
                    (a, b) => panic!("document {i}, block {block}: split {a:?}, whole {b:?}"),
                }
            }
        }
        assert_eq!(read_json(&dir.path().join("s0.json"), &l).unwrap().circuits.len(), 60);
    }
}
