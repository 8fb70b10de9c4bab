//! Circuits: layers of operations on a layout's qubits, ending in a measurement.
//!
//! A [`Circuit`] is layer-structured because contexts are defined per layer (method.md
//! section 1). Measured qubits that a timed layer does not act on idle implicitly; an
//! explicit `id` is also an idle. Readers live in [`json`] (the tool's format) and
//! [`qasm`] (the OpenQASM 3 subset); [`validate`] checks a set against a layout.

use std::collections::HashMap;

use crate::gate::Gate;
use crate::layout::{Layout, QubitIx};

pub mod json;
pub mod qasm;
pub mod validate;

/// One gate application. `qubits[1]` is meaningful only for two-qubit gates and `angle`
/// only for rotation gates (it is 0 otherwise).
#[derive(Copy, Clone, Debug, PartialEq)]
pub struct Op {
    /// The gate.
    pub gate: Gate,
    /// Operands; use [`Op::qubits`] to get exactly `gate.arity()` of them.
    pub operands: [QubitIx; 2],
    /// Rotation angle in radians for `rx`, `ry`, `rz`.
    pub angle: f64,
}

impl Op {
    /// A parameter-free one-qubit gate.
    pub fn one(gate: Gate, q: QubitIx) -> Op {
        Op { gate, operands: [q, q], angle: 0.0 }
    }

    /// A rotation gate.
    pub fn rot(gate: Gate, q: QubitIx, angle: f64) -> Op {
        Op { gate, operands: [q, q], angle }
    }

    /// A two-qubit gate.
    pub fn two(gate: Gate, a: QubitIx, b: QubitIx) -> Op {
        Op { gate, operands: [a, b], angle: 0.0 }
    }

    /// The operands, exactly `gate.arity()` of them.
    pub fn qubits(&self) -> &[QubitIx] {
        &self.operands[..self.gate.arity()]
    }
}

/// One time step: operations on disjoint qubits.
pub type Layer = Vec<Op>;

/// A circuit: layers, then a measurement of `measured` in order. Bit i of an outcome is
/// the i-th measured qubit.
#[derive(Clone, Debug, PartialEq)]
pub struct Circuit {
    /// Identifier used by counts files.
    pub id: String,
    /// Time steps, in order.
    pub layers: Vec<Layer>,
    /// Measured qubits, in outcome bit order.
    pub measured: Vec<QubitIx>,
}

impl Circuit {
    /// True when layer `t` takes time on this layout: it holds at least one operation that
    /// is not a virtual frame change (an explicit `id` takes a time step). A layer of only
    /// virtual gates takes no time: nobody idles in it and it is no context for anyone.
    pub fn is_timed(&self, layout: &Layout, t: usize) -> bool {
        self.layers[t].iter().any(|op| !layout.is_virtual(op.gate))
    }
}

const DUPLICATE_ID: &str = "duplicate circuit id ";

/// The id named by [`CircuitSet::new`]'s duplicate-id message.
pub(crate) fn duplicate_id(message: &str) -> Option<&str> {
    message.strip_prefix(DUPLICATE_ID)?.strip_prefix('\'')?.strip_suffix('\'')
}

/// An OpenQASM `delay[...]` as read: an explicit idle of `qubit` in layer `layer` (an `id`
/// operation there), with its duration as written (`100ns`, `2dt`, `1.5us`). Durations are
/// recorded for the user to see, not modelled: the analysis sees an idle layer.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Delay {
    /// The idling qubit.
    pub qubit: QubitIx,
    /// The layer (0-based, counting every layer) that holds the idle.
    pub layer: usize,
    /// The duration as written in the program.
    pub duration: String,
}

/// A set of circuits with unique ids, in file order.
#[derive(Clone, Debug, Default)]
pub struct CircuitSet {
    /// The circuits.
    pub circuits: Vec<Circuit>,
    index: HashMap<String, usize>,
    /// Recorded delays, by circuit position (only circuits that have some).
    delays: std::collections::BTreeMap<usize, Vec<Delay>>,
}

impl CircuitSet {
    /// Builds a set; fails with the first duplicate id.
    pub fn new(circuits: Vec<Circuit>) -> Result<CircuitSet, String> {
        let mut index = HashMap::with_capacity(circuits.len());
        for (i, c) in circuits.iter().enumerate() {
            if index.insert(c.id.clone(), i).is_some() {
                return Err(format!("{DUPLICATE_ID}'{}'", c.id));
            }
        }
        Ok(CircuitSet { circuits, index, delays: Default::default() })
    }

    /// Records the delays of the circuit at position `i` (replacing any recorded before).
    pub fn set_delays(&mut self, i: usize, delays: Vec<Delay>) {
        if delays.is_empty() {
            self.delays.remove(&i);
        } else {
            self.delays.insert(i, delays);
        }
    }

    /// The recorded delays of the circuit at position `i`.
    pub fn delays_of(&self, i: usize) -> &[Delay] {
        self.delays.get(&i).map_or(&[], Vec::as_slice)
    }

    /// Every recorded delay with its circuit's position, in circuit order.
    pub fn all_delays(&self) -> impl Iterator<Item = (usize, &Delay)> {
        self.delays.iter().flat_map(|(&i, v)| v.iter().map(move |d| (i, d)))
    }

    /// Position of a circuit id.
    pub fn position(&self, id: &str) -> Option<usize> {
        self.index.get(id).copied()
    }

    /// Number of circuits.
    pub fn len(&self) -> usize {
        self.circuits.len()
    }

    /// True when there are no circuits.
    pub fn is_empty(&self) -> bool {
        self.circuits.is_empty()
    }
}

impl Circuit {
    /// Qubits acted on by a non-idle, non-virtual operation in layer `t` (the qubits that
    /// can be aggressors there), sorted.
    pub fn active_qubits(&self, layout: &Layout, t: usize) -> Vec<QubitIx> {
        let mut v: Vec<QubitIx> = self.layers[t]
            .iter()
            .filter(|op| op.gate != Gate::Id && !layout.is_virtual(op.gate))
            .flat_map(|op| op.qubits().iter().copied())
            .collect();
        v.sort_unstable();
        v
    }

    /// Writes into `at` (indexed by qubit) each measured qubit's first position in the
    /// measured list, as a search would find it; other entries are left as they are, and
    /// qubits past the end of `at` are skipped.
    pub fn first_positions(&self, at: &mut [usize]) {
        for (i, &q) in self.measured.iter().enumerate().rev() {
            if let Some(slot) = at.get_mut(q) {
                *slot = i;
            }
        }
    }

    /// The blocks: connected components of the measured qubits under this circuit's
    /// two-qubit gates, each sorted, in order of their first measured qubit. Qubits a
    /// two-qubit gate joins to a measured qubit are included even if unmeasured, so a
    /// caller can reject such blocks.
    pub fn blocks(&self) -> Vec<Vec<QubitIx>> {
        // Maps keyed by qubit index with a word hash: only looked up, never iterated in an
        // order that shows (the blocks are sorted by their first measured qubit at the end).
        type Map<V> = crate::counts::FastMap<QubitIx, V>;
        let mut parent: Map<QubitIx> = Map::default();
        fn find(p: &mut crate::counts::FastMap<QubitIx, QubitIx>, x: QubitIx) -> QubitIx {
            let mut r = x;
            while let Some(&up) = p.get(&r) {
                if up == r {
                    break;
                }
                r = up;
            }
            p.insert(x, r);
            r
        }
        for &q in &self.measured {
            parent.insert(q, q);
        }
        for op in self.layers.iter().flatten().filter(|op| op.gate.arity() == 2) {
            let [a, b] = op.operands;
            if !(parent.contains_key(&a) || parent.contains_key(&b)) {
                continue;
            }
            parent.entry(a).or_insert(a);
            parent.entry(b).or_insert(b);
            let (ra, rb) = (find(&mut parent, a), find(&mut parent, b));
            if ra != rb {
                parent.insert(ra.max(rb), ra.min(rb));
            }
        }
        let mut groups: Map<Vec<QubitIx>> = Map::default();
        let keys: Vec<QubitIx> = parent.keys().copied().collect();
        for q in keys {
            let r = find(&mut parent, q);
            groups.entry(r).or_default().push(q);
        }
        let mut out: Vec<Vec<QubitIx>> = groups.into_values().collect();
        for g in &mut out {
            g.sort_unstable();
        }
        // Each qubit's first position in the measured list, looked up once: searching the
        // list per comparison made this quadratic in the qubits measured.
        let mut at: Map<usize> = Map::default();
        at.reserve(self.measured.len());
        for (i, &m) in self.measured.iter().enumerate() {
            at.entry(m).or_insert(i);
        }
        let first_measured = |g: &Vec<QubitIx>| {
            g.iter().filter_map(|q| at.get(q)).min().copied().unwrap_or(usize::MAX)
        };
        out.sort_by_cached_key(first_measured);
        out
    }
}
