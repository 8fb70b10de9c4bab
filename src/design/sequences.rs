//! Sequences for one block and the assembly of blocks into one layer-aligned circuit.
//!
//! A block's sequence is a list of slots (one Clifford, one Clifford layer plus the
//! two-qubit gate, or one repeated cycle). Every block of a circuit has the same number of
//! slots, and slot i spans the same timed layers in every block: shorter blocks idle at the
//! start of the slot, so a block's pulses line up with the two-qubit gate that closes a
//! neighbouring coupler's slot. Z frame changes are virtual and are merged per qubit.

use rand::RngExt;

use crate::circuit::{Circuit, Layer, Op};
use crate::clifford::{self, Clifford1, Compiler1, Entangler, Tableau2, Word2};
use crate::error::{Error, Result};
use crate::gate::Gate;
use crate::layout::{Layout, QubitIx};

/// The kind of sequence a circuit runs.
#[derive(Copy, Clone, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum Kind {
    /// Random Cliffords closed by their inverse and a random final X: a known bitstring.
    Randomized,
    /// A fixed identity cycle on an equatorial state, measured in Z: over- and
    /// under-rotations about X/Y change P(1) to first order.
    RepeatedX,
    /// A fixed identity cycle on an equatorial state, read out along the equator: Z
    /// phases (detuning, conditional phase) change the outcome to first order.
    RepeatedZ,
}

impl Kind {
    /// Every kind, in manifest order.
    pub const ALL: [Kind; 3] = [Kind::Randomized, Kind::RepeatedX, Kind::RepeatedZ];

    /// The name used in the manifest and on the command line.
    pub fn name(self) -> &'static str {
        match self {
            Kind::Randomized => "randomized",
            Kind::RepeatedX => "repeated-x",
            Kind::RepeatedZ => "repeated-z",
        }
    }

    /// Parses a name; `repeated` stands for both repeated framings.
    pub fn parse_list(name: &str) -> Option<Vec<Kind>> {
        match name {
            "repeated" => Some(vec![Kind::RepeatedX, Kind::RepeatedZ]),
            _ => Kind::ALL.iter().copied().find(|k| k.name() == name).map(|k| vec![k]),
        }
    }
}

/// The noise-free outcome of one measured qubit.
#[derive(Copy, Clone, Debug, PartialEq)]
pub enum Ideal {
    /// A definite bit.
    Bit(bool),
    /// P(1) = 1/2.
    Half,
}

impl Ideal {
    /// P(1) of the ideal outcome.
    pub fn p1(self) -> f64 {
        match self {
            Ideal::Bit(b) => f64::from(u8::from(b)),
            Ideal::Half => 0.5,
        }
    }
}

/// One timed layer of a block: frame changes (quarter turns per block position, applied
/// just before) and the operations in the layer.
#[derive(Clone, Debug, Default)]
struct Column {
    frames: [u8; 2],
    ops: Vec<Op>,
}

/// One slot of a block: timed columns, then frame changes carried into the next slot.
#[derive(Clone, Debug, Default)]
struct Slot {
    columns: Vec<Column>,
    tail: [u8; 2],
}

impl Slot {
    fn extend(&mut self, other: Slot) {
        let mut cols = other.columns.into_iter();
        match cols.next() {
            Some(mut first) => {
                for p in 0..2 {
                    first.frames[p] = (first.frames[p] + self.tail[p]) % 4;
                }
                self.columns.push(first);
                self.columns.extend(cols);
                self.tail = other.tail;
            }
            None => {
                for p in 0..2 {
                    self.tail[p] = (self.tail[p] + other.tail[p]) % 4;
                }
            }
        }
    }

    /// Runs slots on disjoint block positions side by side, right-aligned.
    fn beside(a: Slot, b: Slot) -> Slot {
        let m = a.columns.len().max(b.columns.len());
        let mut columns = vec![Column::default(); m];
        for s in [&a, &b] {
            let off = m - s.columns.len();
            for (j, c) in s.columns.iter().enumerate() {
                let col = &mut columns[off + j];
                for p in 0..2 {
                    col.frames[p] = (col.frames[p] + c.frames[p]) % 4;
                }
                col.ops.extend(c.ops.iter().copied());
            }
        }
        let tail = [(a.tail[0] + b.tail[0]) % 4, (a.tail[1] + b.tail[1]) % 4];
        Slot { columns, tail }
    }
}

/// One block's whole sequence.
#[derive(Clone, Debug)]
pub(crate) struct BlockRun {
    qubits: Vec<QubitIx>,
    slots: Vec<Slot>,
    /// Ideal outcome per block qubit.
    pub ideal: Vec<Ideal>,
}

impl BlockRun {
    /// The block's qubits with their ideal outcomes.
    pub fn ideals(&self) -> impl Iterator<Item = (QubitIx, Ideal)> + '_ {
        self.qubits.iter().copied().zip(self.ideal.iter().copied())
    }
}

/// How a pending Z frame change moves past a gate on operand `k`, up to global phase.
enum Passage {
    /// The gate is diagonal on that operand: the frame moves past unchanged.
    Commutes,
    /// rz(t) then g equals g then rz(-t): x and y.
    Negates,
    /// The frame must be applied before the gate.
    Blocks,
}

fn frame_passage(op: &Op, k: usize) -> Passage {
    match (op.gate, k) {
        (Gate::Cz, _)
        | (Gate::Cx, 0)
        | (Gate::Id | Gate::Z | Gate::S | Gate::Sdg | Gate::Rz, _) => Passage::Commutes,
        (Gate::X | Gate::Y, _) => Passage::Negates,
        (g, _) if g.arity() == 2 && commutes_with_z(g, op.angle, k) => Passage::Commutes,
        _ => Passage::Blocks,
    }
}

/// True when a two-qubit gate commutes with Z on operand `k`: it never connects basis
/// states that differ in that bit.
fn commutes_with_z(g: Gate, angle: f64, k: usize) -> bool {
    g.unitary2(angle).is_some_and(|u| {
        (0..4).all(|i| (0..4).all(|j| (i >> k) & 1 == (j >> k) & 1 || u[i][j].norm() < 1e-12))
    })
}

/// The one-qubit Cliffords a set of gates reaches (closure under composition), counting
/// each parametric gate at quarter, minus-quarter and half turns.
fn reachable(gates: &[Gate]) -> Vec<Clifford1> {
    let quarter = std::f64::consts::FRAC_PI_2;
    let mut gens = Vec::new();
    for &g in gates {
        let angles: &[f64] =
            if g.n_params() == 1 { &[quarter, -quarter, 2.0 * quarter] } else { &[0.0] };
        gens.extend(angles.iter().filter_map(|&a| Clifford1::of_gate(g, a)));
    }
    let mut seen = vec![Clifford1::IDENTITY];
    let mut i = 0;
    while i < seen.len() {
        for &g in &gens {
            let c = seen[i].then(g);
            if !seen.contains(&c) {
                seen.push(c);
            }
        }
        i += 1;
    }
    seen
}

/// Fails, saying what is missing and what would work, when the layout's one-qubit gates
/// cannot run randomized sequences: they must reach all 24 one-qubit Cliffords, with a
/// timed pulse that turns a qubit from |0> onto the equator (the repeated sequences' first
/// step, and every Clifford that is not diagonal).
fn check_clifford_gates(layout: &Layout) -> Result<()> {
    let gates: Vec<Gate> =
        layout.gates.one_qubit.iter().copied().filter(|&g| g != Gate::Id).collect();
    let timed: Vec<Gate> = gates.iter().copied().filter(|&g| !layout.is_virtual(g)).collect();
    // The Cliffords that keep Z on the Z axis: everything but an equatorial turn.
    let keeps_z = reachable(&[Gate::S, Gate::X]);
    let equator = reachable(&timed).iter().any(|c| !keeps_z.contains(c));
    let all = reachable(&gates).len();
    let missing = if !equator {
        "a timed pulse that turns a qubit from |0> onto the equator (add sx, or rx or ry, to \
         one_qubit)"
    } else if all < 24 {
        "a rotation about a second axis (add a Z rotation such as rz, best declared virtual; \
         or ry beside rx)"
    } else {
        return Ok(());
    };
    let names = if gates.is_empty() {
        "none".to_string()
    } else {
        gates.iter().map(|g| g.name()).collect::<Vec<_>>().join(", ")
    };
    Err(Error::Usage(format!(
        "layout '{}' cannot run Clifford sequences: its one-qubit gates ({names}) reach {all} \
         of the 24 one-qubit Cliffords. Missing: {missing}. A set that works: one_qubit = \
         [\"sx\", \"x\", \"rz\"] with virtual = [\"rz\"] (what `slackmap layout new` writes)",
        crate::error::echo(&layout.name)
    )))
}

/// Builds block sequences and circuits for one layout.
pub(crate) struct Builder<'a> {
    layout: &'a Layout,
    comp: Compiler1,
    /// The Clifford two-qubit natives of each coupler (by coupler index), never empty.
    entanglers: Vec<Vec<Entangler>>,
}

/// The Clifford natives of every coupler; fails naming every coupler whose natives cannot
/// serve Clifford sequences, each with its natives and why.
fn coupler_entanglers(layout: &Layout) -> Result<Vec<Vec<Entangler>>> {
    // Couplers share a few lists; each distinct list is resolved once.
    type Resolved = std::result::Result<Vec<Entangler>, String>;
    let mut seen: Vec<(&[crate::layout::Native2], Resolved)> = Vec::new();
    let mut out = Vec::with_capacity(layout.couplers.len());
    let mut refused: Vec<String> = Vec::new();
    for (c, &(a, b)) in layout.couplers.iter().enumerate() {
        let natives = layout.natives(c);
        let resolved = match seen.iter().find(|(n, _)| *n == natives) {
            Some((_, e)) => e.clone(),
            None => {
                // Each native on its own, so the message says why each one cannot serve.
                let (ok, why): (Vec<_>, Vec<_>) =
                    natives.iter().map(|&n| Entangler::new(n)).partition(|e| e.is_ok());
                let e = if ok.is_empty() {
                    Err(why.into_iter().filter_map(|e| e.err()).collect::<Vec<_>>().join(", "))
                } else {
                    Ok(ok.into_iter().filter_map(|e| e.ok()).collect())
                };
                seen.push((natives, e.clone()));
                e
            }
        };
        match resolved {
            Ok(e) => out.push(e),
            Err(m) => refused.push(format!("{}-{} ({m})", layout.id(a), layout.id(b))),
        }
    }
    if refused.is_empty() {
        return Ok(out);
    }
    const SHOWN: usize = 6;
    let n = refused.len();
    let mut shown: Vec<String> = refused.into_iter().take(SHOWN).collect();
    if n > SHOWN {
        shown.push(format!("and {} more", n - SHOWN));
    }
    Err(Error::Usage(format!(
        "layout '{}': {n} coupler(s) have no two-qubit gate that can serve Clifford sequences, \
         so `design` cannot measure them: {}. Clifford sequences need a Clifford entangling \
         two-qubit gate on every coupler, such as cz, cx, ecr or iswap, cp only at an angle of \
         pi, rzz only at an odd multiple of pi/2, or a custom gate whose unitary is one: add \
         one to each coupler's list beside the gates it has",
        crate::error::echo(&layout.name),
        shown.join("; ")
    )))
}

impl<'a> Builder<'a> {
    pub fn new(layout: &'a Layout) -> Result<Builder<'a>> {
        check_clifford_gates(layout)?;
        let comp = Compiler1::new(layout)?;
        let entanglers = coupler_entanglers(layout)?;
        Ok(Builder { layout, comp, entanglers })
    }

    /// The Clifford natives of coupler a-b.
    fn entanglers_of(&self, a: QubitIx, b: QubitIx) -> Result<&[Entangler]> {
        self.layout
            .coupler(a, b)
            .and_then(|c| self.entanglers.get(c))
            .map(Vec::as_slice)
            .ok_or_else(|| {
                Error::Usage(format!(
                    "{}-{} is not a coupler of layout '{}'",
                    self.layout.id(a),
                    self.layout.id(b),
                    crate::error::echo(&self.layout.name)
                ))
            })
    }

    fn slot1(&self, pos: usize, q: QubitIx, cliffords: &[Clifford1]) -> Slot {
        let mut slot = Slot::default();
        for &c in cliffords {
            let cm = self.comp.compile(c);
            let mut one = Slot::default();
            for (k, p) in &cm.steps {
                let mut frames = [0; 2];
                frames[pos] = *k;
                one.columns.push(Column { frames, ops: vec![Op::rot(p.gate, q, p.angle)] });
            }
            one.tail[pos] = cm.tail;
            slot.extend(one);
        }
        slot
    }

    fn layer(&self, a: QubitIx, b: QubitIx, l: [Clifford1; 2]) -> Slot {
        Slot::beside(self.slot1(0, a, &[l[0]]), self.slot1(1, b, &[l[1]]))
    }

    fn gate_slot(&self, a: QubitIx, b: QubitIx, e: &Entangler) -> Slot {
        let op = Op { gate: e.native.gate, operands: [a, b], angle: e.native.angle };
        Slot { columns: vec![Column { frames: [0; 2], ops: vec![op] }], tail: [0; 2] }
    }

    fn word(&self, a: QubitIx, b: QubitIx, w: &Word2, e: &Entangler) -> Slot {
        let mut slot = Slot::default();
        for (i, l) in w.layers.iter().enumerate() {
            if i > 0 {
                slot.extend(self.gate_slot(a, b, e));
            }
            slot.extend(self.layer(a, b, *l));
        }
        slot
    }

    /// One identity cycle of a native: the gate twice, then (for a gate that is not its
    /// own inverse) the native word that undoes the pair, such as Z on both qubits after
    /// two iswaps.
    fn cycle(&self, a: QubitIx, b: QubitIx, e: &Entangler) -> Result<Slot> {
        let mut slot = self.gate_slot(a, b, e);
        slot.extend(self.gate_slot(a, b, e));
        if !e.is_self_inverse() {
            let twice = e.tableau.then(&e.tableau);
            let undo = e.word_for(&twice.inverse(e)).ok_or_else(|| {
                Error::Usage(format!("two-qubit gate '{}' cannot close its cycle", e.native))
            })?;
            slot.extend(self.word(a, b, undo, e));
        }
        Ok(slot)
    }

    /// Quarter turn about an equatorial axis (`sx` where native) and the readout rotation
    /// that maps the equatorial X axis onto Z.
    fn framing(&self) -> (Clifford1, Clifford1) {
        let h = self.comp.half_pulse();
        (h, Clifford1::z_quarter(1).then(h))
    }

    /// A one-qubit block's sequence.
    pub fn one<R: rand::Rng>(&self, q: QubitIx, kind: Kind, depth: usize, rng: &mut R) -> BlockRun {
        let (h, readout) = self.framing();
        let mut slots = Vec::with_capacity(depth + 2);
        let ideal = match kind {
            Kind::Randomized => {
                let mut total = Clifford1::IDENTITY;
                for _ in 0..depth {
                    let c = Clifford1::random(rng);
                    slots.push(self.slot1(0, q, &[c]));
                    total = total.then(c);
                }
                // The final X is folded into the recovery Clifford: one slot, same ideal.
                let flip: bool = rng.random();
                let mut rec = total.inverse();
                if flip {
                    rec = rec.then(Clifford1::x());
                }
                slots.push(self.slot1(0, q, &[rec]));
                Ideal::Bit(flip)
            }
            Kind::RepeatedX => {
                slots.push(self.slot1(0, q, &[h]));
                for _ in 0..depth {
                    slots.push(self.slot1(0, q, &[h, h, h, h]));
                }
                Ideal::Half
            }
            Kind::RepeatedZ => {
                // h Z h Z is the identity and refocuses over-rotations, so the phase
                // framing sees Z errors without the amplitude errors (and vice versa).
                let z = Clifford1::z_quarter(2);
                slots.push(self.slot1(0, q, &[h]));
                for _ in 0..depth {
                    slots.push(self.slot1(0, q, &[h, z, h, z]));
                }
                slots.push(self.slot1(0, q, &[readout]));
                Ideal::Half
            }
        };
        BlockRun { qubits: vec![q], slots, ideal: vec![ideal] }
    }

    /// A coupler block's sequence (first operand a).
    pub fn two<R: rand::Rng>(
        &self,
        a: QubitIx,
        b: QubitIx,
        kind: Kind,
        depth: usize,
        rng: &mut R,
    ) -> Result<BlockRun> {
        let (h, readout) = self.framing();
        let mut slots = Vec::with_capacity(depth + 2);
        let natives = self.entanglers_of(a, b)?;
        // A directed native runs only the way the layout writes its coupler; the block's
        // first operand is that coupler's first qubit (symmetric natives keep a, b).
        let (a, b) = match self.layout.coupler(a, b) {
            Some(c) if natives.iter().any(|e| !e.native.gate.is_symmetric()) => {
                self.layout.coupler_direction(c)
            }
            _ => (a, b),
        };
        let ideal = match kind {
            Kind::Randomized => {
                let mut total = Tableau2::identity();
                for _ in 0..depth {
                    let l = [Clifford1::random(rng), Clifford1::random(rng)];
                    // A coupler with several Clifford natives runs a random one per slot
                    // (a draw only then, so one-native designs keep their stream).
                    let e = match natives.len() {
                        1 => &natives[0],
                        n => &natives[rng.random_range(0..n)],
                    };
                    let mut slot = self.layer(a, b, l);
                    slot.extend(self.gate_slot(a, b, e));
                    slots.push(slot);
                    total = total.then(&Tableau2::layer(l[0], l[1])).then(&e.tableau);
                }
                let flips: [bool; 2] = [rng.random(), rng.random()];
                let e = &natives[0];
                let rec = clifford::recovery(&total, e, flips).ok_or_else(|| {
                    Error::Usage(format!("two-qubit gate '{}' cannot close sequences", e.native))
                })?;
                slots.push(self.word(a, b, &rec, e));
                vec![Ideal::Bit(flips[0]), Ideal::Bit(flips[1])]
            }
            Kind::RepeatedX | Kind::RepeatedZ => {
                slots.push(self.layer(a, b, [h, h]));
                for _ in 0..depth {
                    // One identity cycle of every Clifford native of the coupler.
                    let mut slot = Slot::default();
                    for e in natives {
                        slot.extend(self.cycle(a, b, e)?);
                    }
                    slots.push(slot);
                }
                if kind == Kind::RepeatedZ {
                    // Reading b along the equator and a in Z makes the correlation <Z_a X_b>
                    // first order in a conditional phase, and b's marginal in its detuning.
                    slots.push(self.layer(a, b, [Clifford1::IDENTITY, readout]));
                }
                vec![Ideal::Half, Ideal::Half]
            }
        };
        Ok(BlockRun { qubits: vec![a, b], slots, ideal })
    }

    /// Assembles block sequences (with equal slot counts) into a circuit measuring
    /// `measured`.
    pub fn assemble(&self, id: String, runs: &[BlockRun], measured: Vec<QubitIx>) -> Circuit {
        let n = self.layout.n_qubits();
        let mut pending = vec![0u8; n];
        let mut started = vec![false; n];
        let mut layers: Vec<Layer> = Vec::new();
        let n_slots = runs.iter().map(|r| r.slots.len()).max().unwrap_or(0);
        for s in 0..n_slots {
            let m = runs.iter().filter_map(|r| r.slots.get(s)).map(|x| x.columns.len()).max();
            for j in 0..m.unwrap_or(0) {
                let mut frames: Vec<(QubitIx, &[(Gate, f64)])> = Vec::new();
                let mut timed: Layer = Vec::new();
                for run in runs {
                    let Some(slot) = run.slots.get(s) else { continue };
                    let off = m.unwrap_or(0) - slot.columns.len();
                    if j < off {
                        continue;
                    }
                    let col = &slot.columns[j - off];
                    for (pos, &q) in run.qubits.iter().enumerate() {
                        pending[q] = (pending[q] + col.frames[pos]) % 4;
                    }
                    for op in &col.ops {
                        for (k, &q) in op.qubits().iter().enumerate() {
                            match frame_passage(op, k) {
                                Passage::Commutes => continue,
                                Passage::Negates => {
                                    pending[q] = (4 - pending[q]) % 4;
                                    started[q] = true;
                                    continue;
                                }
                                Passage::Blocks => {}
                            }
                            // A frame change before the first pulse acts on |0>: a phase.
                            if pending[q] != 0 && started[q] {
                                frames.push((q, self.comp.frame_ops(pending[q])));
                            }
                            pending[q] = 0;
                            started[q] = true;
                        }
                        timed.push(*op);
                    }
                }
                let depth = frames.iter().map(|f| f.1.len()).max().unwrap_or(0);
                for k in 0..depth {
                    layers.push(
                        frames
                            .iter()
                            .filter_map(|(q, ops)| ops.get(k).map(|&(g, a)| Op::rot(g, *q, a)))
                            .collect(),
                    );
                }
                layers.push(timed);
            }
            for run in runs {
                if let Some(slot) = run.slots.get(s) {
                    for (pos, &q) in run.qubits.iter().enumerate() {
                        pending[q] = (pending[q] + slot.tail[pos]) % 4;
                    }
                }
            }
        }
        // Frame changes left at the end commute with the Z-basis measurement: dropped.
        Circuit { id, layers, measured }
    }

    /// A circuit in which every measured qubit idles explicitly for `timed_layers` layers.
    pub fn idle(&self, id: String, timed_layers: usize, measured: Vec<QubitIx>) -> Circuit {
        let layer: Layer = measured.iter().map(|&q| Op::one(Gate::Id, q)).collect();
        Circuit { id, layers: vec![layer; timed_layers], measured }
    }
}
