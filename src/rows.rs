//! Rows of the analysis: one per (circuit, block), with the block's operations, its
//! occurrences and their contexts, and the aggregates the fit and the LPs need.
//!
//! Definitions follow method.md section 2: an occurrence of kind k in a timed layer t on
//! qubits S has context A = { r in N(S) minus B : r active in t }, where B is the row's
//! block; a row is a reference row when every occurrence has A empty. B equals S for
//! one-qubit blocks. In a two-qubit block the partner is not an aggressor of the block's
//! own one-qubit operations and idles: the block is simulated jointly, and counting the
//! partner would leave no two-qubit reference rows at all (an idle beside a driven partner
//! would always have a context), against the coupler reference context of section 7
//! ("block active, all neighbours idle"). Rows are built once, in parallel over circuits, in a
//! deterministic order (circuit order, then block order) and stored compactly: kinds are
//! indices into one [`KindTable`].

use rayon::prelude::*;

use crate::circuit::{Circuit, CircuitSet};
use crate::counts::Counts;
use crate::error::{Error, Result};
use crate::gate::Gate;
use crate::layout::{Layout, QubitIx};

/// Index of an operation kind in a [`KindTable`].
pub type KindIx = u32;

/// An operation kind: a gate on specific qubits (`sx@q3`, `id@q3`, `cz@q3-q4`).
///
/// Invariant: for one-qubit gates `qubits[1] == qubits[0]`; for symmetric two-qubit gates
/// (`cz`, `iswap`, ...: [`Gate::is_symmetric`]) the qubits are sorted, so `cz@q3-q4` and `cz@q4-q3` are one kind; for `cx` the
/// order is (control, target).
#[derive(Copy, Clone, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub struct OpKind {
    /// The gate.
    pub gate: Gate,
    /// Operands; use [`OpKind::qubits`] for exactly `gate.arity()` of them.
    pub qubits: [QubitIx; 2],
}

impl OpKind {
    /// The kind of gate `gate` on `qubits` (normalised as the type's invariant says).
    pub fn new(gate: Gate, qubits: &[QubitIx]) -> OpKind {
        let (a, b) = (qubits[0], *qubits.last().unwrap_or(&qubits[0]));
        let qubits = if gate.is_symmetric() { [a.min(b), a.max(b)] } else { [a, b] };
        OpKind { gate, qubits }
    }

    /// The operands, exactly `gate.arity()` of them.
    pub fn qubits(&self) -> &[QubitIx] {
        &self.qubits[..self.gate.arity()]
    }

    /// The label used in every output: `sx@q3`, `cz@q3-q4`.
    pub fn label(&self, layout: &Layout) -> String {
        let ids: Vec<&str> = self.qubits().iter().map(|&q| layout.id(q)).collect();
        format!("{}@{}", self.gate, ids.join("-"))
    }
}

/// The operation kinds seen in a circuit set, in order of first appearance (circuit order,
/// then block order, then layer order).
#[derive(Clone, Debug, Default)]
pub struct KindTable {
    kinds: Vec<OpKind>,
    index: crate::counts::FastMap<OpKind, KindIx>,
}

impl KindTable {
    /// Index of a kind, adding it when new.
    pub fn intern(&mut self, k: OpKind) -> KindIx {
        if let Some(&i) = self.index.get(&k) {
            return i;
        }
        let i = self.kinds.len() as KindIx;
        self.kinds.push(k);
        self.index.insert(k, i);
        i
    }

    /// The kind at an index.
    pub fn get(&self, i: KindIx) -> OpKind {
        self.kinds[i as usize]
    }

    /// Index of a kind, if it was seen.
    pub fn find(&self, k: &OpKind) -> Option<KindIx> {
        self.index.get(k).copied()
    }

    /// All kinds, indexed by [`KindIx`].
    pub fn kinds(&self) -> &[OpKind] {
        &self.kinds
    }

    /// Number of kinds.
    pub fn len(&self) -> usize {
        self.kinds.len()
    }

    /// True when no kind was seen.
    pub fn is_empty(&self) -> bool {
        self.kinds.is_empty()
    }
}

/// One operation of a block, in time order, for predicting the block's outcomes.
///
/// `operands` are positions in the row's block (0 or 1), so a prediction never needs the
/// layout. Virtual gates have no kind (no error, no duration); idles appear as explicit
/// `id` steps with their kind.
#[derive(Copy, Clone, Debug, PartialEq)]
pub struct Step {
    /// Layer index in the circuit.
    pub layer: u32,
    /// The gate.
    pub gate: Gate,
    /// Operands as block positions; `operands[1]` is meaningful only for two-qubit gates.
    pub operands: [u8; 2],
    /// Rotation angle in radians (0 for gates without one).
    pub angle: f64,
    /// The operation kind; `None` for virtual gates.
    pub kind: Option<KindIx>,
}

/// One occurrence of an operation kind in a timed layer; its aggressors are
/// `row.aggressors(&occurrence)`.
#[derive(Copy, Clone, Debug, PartialEq, Eq)]
pub struct Occurrence {
    /// The kind.
    pub kind: KindIx,
    /// Layer index in the circuit.
    pub layer: u32,
    agg_start: u32,
    agg_len: u32,
}

/// What one victim qubit of a row was doing, for stratifying null permutations
/// (method.md section 5).
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct VictimRole {
    /// The victim qubit.
    pub qubit: QubitIx,
    /// True when it ran a non-idle operation in more than half of the timed layers.
    pub driven: bool,
    /// Neighbours of the victim outside the block that were active in some timed layer,
    /// sorted.
    pub active_neighbours: Vec<QubitIx>,
}

/// One row of the analysis: a block of one circuit, kept as what later stages read (the
/// block's program is handed to [`build_with`]'s callback once and not stored).
///
/// Invariants: `block` is sorted and has one or two qubits, all measured; `positions[j]`
/// is the position of `block[j]` in the circuit's measured list; `kind_counts` and
/// `context_counts` are sorted by key and hold only positive counts; `marginal`, when
/// present, has `1 << block.len()` entries whose index bit j is block qubit j.
#[derive(Clone, Debug)]
pub struct Row {
    /// Index of the circuit in the set.
    pub circuit: u32,
    /// Block qubits, sorted.
    pub block: Vec<QubitIx>,
    /// Positions of the block qubits in the circuit's measured list.
    pub positions: Vec<usize>,
    /// The occurrences that had an active neighbour, in time order (a reference row has
    /// none). Every occurrence, with or without one, is counted in `kind_counts`.
    pub occurrences: Vec<Occurrence>,
    aggressor_pool: Vec<QubitIx>,
    /// Occurrences per kind.
    pub kind_counts: Vec<(KindIx, u32)>,
    /// Per (kind, aggressor): occurrences of the kind while the aggressor was active.
    pub context_counts: Vec<((KindIx, QubitIx), u32)>,
    /// True when no occurrence has an active neighbour.
    pub is_reference: bool,
    /// Marginal counts of the block, when counts were given for the circuit.
    pub marginal: Option<Vec<u64>>,
    /// Shots of the circuit (0 without counts).
    pub shots: u64,
    /// Number of timed layers of the circuit.
    pub n_timed_layers: u32,
    /// Per block qubit, in block order: what it was doing.
    pub victims: Vec<VictimRole>,
}

impl Row {
    /// The aggressors of one of this row's occurrences, sorted.
    pub fn aggressors(&self, o: &Occurrence) -> &[QubitIx] {
        let s = o.agg_start as usize;
        &self.aggressor_pool[s..s + o.agg_len as usize]
    }

    /// Number of occurrences of a kind in this row.
    pub fn count(&self, k: KindIx) -> u32 {
        self.kind_counts.binary_search_by_key(&k, |e| e.0).map_or(0, |i| self.kind_counts[i].1)
    }

    /// Number of occurrences of kind `k` while `r` was active.
    pub fn context_count(&self, k: KindIx, r: QubitIx) -> u32 {
        self.context_counts
            .binary_search_by_key(&(k, r), |e| e.0)
            .map_or(0, |i| self.context_counts[i].1)
    }
}

/// All rows of a circuit set, with the kind table their indices refer to.
#[derive(Clone, Debug, Default)]
pub struct Rows {
    /// The operation kinds.
    pub kinds: KindTable,
    /// The rows, in circuit order then block order.
    pub rows: Vec<Row>,
}

/// Builds the rows of a validated circuit set. `counts`, when given, must be aligned with
/// the set (`counts.per_circuit[i]` for circuit i). A block of more than two qubits or one
/// that reaches an unmeasured qubit is an error (validation rejects both earlier).
pub fn build(layout: &Layout, set: &CircuitSet, counts: Option<&Counts>) -> Result<Rows> {
    Ok(build_with(layout, set, counts, &|_, _, _| Ok(()), &|_, _| {})?.0)
}

/// A row's program while its circuit is being read: the row (kinds still local to the
/// circuit), its operations in time order, and the circuit's kinds so far, which the local
/// kind indices of both refer to.
pub type Program<'a, T> = dyn Fn(&Row, &[Step], &[OpKind]) -> Result<T> + Sync + 'a;

/// [`build`], also making one `T` per row from its program while the circuit is at hand,
/// so that the program itself is never stored. `relabel` then renumbers a `T`'s kinds from
/// its circuit's local indices to the set's (`map[local]`). Results are aligned with the rows.
pub fn build_with<T: Send>(
    layout: &Layout,
    set: &CircuitSet,
    counts: Option<&Counts>,
    program: &Program<'_, T>,
    relabel: &(dyn Fn(&mut T, &[KindIx]) + Sync),
) -> Result<(Rows, Vec<T>)> {
    check_aligned(set, counts)?;
    type PerCircuit<T> = (Vec<OpKind>, Vec<Row>, Vec<T>);
    let per_circuit: Vec<PerCircuit<T>> = set
        .circuits
        .par_iter()
        .enumerate()
        .map(|(ci, c)| {
            let cc = counts.and_then(|k| k.per_circuit[ci].as_ref());
            let mut made = Vec::new();
            let (local, rows) = circuit_rows(layout, ci, c, cc, &mut |r, s, k| {
                made.push(program(r, s, k)?);
                Ok(())
            })?;
            Ok((local, rows, made))
        })
        .collect::<Result<_>>()?;
    let mut kinds = KindTable::default();
    let mut rows = Vec::with_capacity(per_circuit.iter().map(|c| c.1.len()).sum());
    let mut made = Vec::with_capacity(rows.capacity());
    for (local, mut circuit_rows, mut circuit_made) in per_circuit {
        let map: Vec<KindIx> = local.iter().map(|&k| kinds.intern(k)).collect();
        for row in &mut circuit_rows {
            remap(row, &map);
        }
        for t in &mut circuit_made {
            relabel(t, &map);
        }
        rows.extend(circuit_rows);
        made.extend(circuit_made);
    }
    Ok((Rows { kinds, rows }, made))
}

/// Visits the rows of every circuit without keeping them: `visit` gets one circuit's rows,
/// with kind indices into that circuit's own kind list (the second argument), and its
/// results come back in circuit order. Memory stays that of a few circuits' rows.
/// `counts`, when given, must be aligned with the set; rows get no marginal counts here.
pub fn scan<T: Send>(
    layout: &Layout,
    set: &CircuitSet,
    counts: Option<&Counts>,
    visit: &(dyn Fn(&[Row], &[OpKind]) -> T + Sync),
) -> Result<Vec<T>> {
    check_aligned(set, counts)?;
    set.circuits
        .par_iter()
        .enumerate()
        .map(|(ci, c)| {
            let (local, rows) = circuit_rows(layout, ci, c, None, &mut |_, _, _| Ok(()))?;
            Ok(visit(&rows, &local))
        })
        .collect()
}

fn check_aligned(set: &CircuitSet, counts: Option<&Counts>) -> Result<()> {
    match counts {
        Some(c) if c.per_circuit.len() != set.len() => Err(Error::Analysis(format!(
            "counts cover {} circuits but the set has {}",
            c.per_circuit.len(),
            set.len()
        ))),
        _ => Ok(()),
    }
}

fn remap(row: &mut Row, map: &[KindIx]) {
    for o in &mut row.occurrences {
        o.kind = map[o.kind as usize];
    }
    for e in &mut row.kind_counts {
        e.0 = map[e.0 as usize];
    }
    row.kind_counts.sort_unstable();
    for e in &mut row.context_counts {
        e.0 .0 = map[e.0 .0 as usize];
    }
    row.context_counts.sort_unstable();
}

/// Sorted (key, count) pairs of a list of keys, each key once.
fn tally<K: Copy + Ord>(keys: &mut [K]) -> Vec<(K, u32)> {
    keys.sort_unstable();
    let mut out: Vec<(K, u32)> = Vec::new();
    for &k in keys.iter() {
        match out.last_mut() {
            Some(e) if e.0 == k => e.1 += 1,
            _ => out.push((k, 1)),
        }
    }
    out.shrink_to_fit();
    out
}

type OnRow<'a> = dyn FnMut(&Row, &[Step], &[OpKind]) -> Result<()> + 'a;

fn circuit_rows(
    layout: &Layout,
    ci: usize,
    c: &Circuit,
    counts: Option<&crate::counts::CircuitCounts>,
    on_row: &mut OnRow<'_>,
) -> Result<(Vec<OpKind>, Vec<Row>)> {
    let mut local = KindTable::default();
    let timed: Vec<bool> = (0..c.layers.len()).map(|t| c.is_timed(layout, t)).collect();
    let active: Vec<Vec<QubitIx>> = (0..c.layers.len())
        .map(|t| if timed[t] { c.active_qubits(layout, t) } else { Vec::new() })
        .collect();
    let n_timed = timed.iter().filter(|&&t| t).count();
    let n = layout.n_qubits();
    // Whether qubit q is active in layer t, at t * n + q (a search of the layer's list per
    // neighbour was a tenth of building the rows).
    let mut is_active = vec![false; n * c.layers.len()];
    for (t, list) in active.iter().enumerate() {
        for &q in list.iter().filter(|&&q| q < n) {
            is_active[t * n + q] = true;
        }
    }
    let on = |t: usize, q: QubitIx| q < n && is_active[t * n + q];
    // Which op of layer t acts on qubit q, so each block reads only its own ops instead of
    // scanning whole layers (blocks x layer width would dominate on large layouts).
    const NONE: u32 = u32::MAX;
    let mut op_at = vec![NONE; n * c.layers.len()];
    for (t, layer) in c.layers.iter().enumerate() {
        for (i, op) in layer.iter().enumerate() {
            for &q in op.qubits() {
                if q < n {
                    op_at[t * n + q] = i as u32;
                }
            }
        }
    }
    // Position of each qubit in the measured list (the first, as a search would find).
    let mut measured_at = vec![usize::MAX; n];
    c.first_positions(&mut measured_at);
    // Scratch reused across the circuit's blocks; each row keeps exact-size copies.
    let mut steps: Vec<Step> = Vec::new();
    let mut occurrences: Vec<Occurrence> = Vec::new();
    let mut pool: Vec<QubitIx> = Vec::new();
    let mut kinds_seen: Vec<KindIx> = Vec::new();
    let mut contexts_seen: Vec<(KindIx, QubitIx)> = Vec::new();
    let mut agg: Vec<QubitIx> = Vec::new();
    let blocks = c.blocks();
    let mut positions_of: Vec<Option<Vec<usize>>> = blocks
        .iter()
        .map(|block| {
            block
                .iter()
                .map(|&q| measured_at.get(q).copied().filter(|&p| p != usize::MAX))
                .collect()
        })
        .collect();
    // Every block's marginal in one pass over the circuit's outcomes (a pass per block read
    // each outcome once per block), and the shots once per circuit.
    let mut marginals = match counts {
        Some(k) => k.marginals(
            &positions_of.iter().map(|p| p.as_deref().filter(|p| p.len() <= 2)).collect::<Vec<_>>(),
        ),
        None => vec![None; blocks.len()],
    };
    let shots = counts.map_or(0, |k| k.shots());
    let mut rows = Vec::with_capacity(blocks.len());
    for (bi, block) in blocks.into_iter().enumerate() {
        let positions: Vec<usize> = positions_of[bi].take().ok_or_else(|| {
            Error::circuit(&c.id, "a two-qubit gate joins a measured qubit to an unmeasured one")
        })?;
        if block.len() > 2 {
            let ids: Vec<&str> = block.iter().map(|&q| layout.id(q)).collect();
            return Err(Error::circuit(
                &c.id,
                format!(
                    "block of {} qubits ({}); at most two are supported",
                    block.len(),
                    ids.join(", ")
                ),
            ));
        }
        let pos_in_block = |q: QubitIx| block.iter().position(|&b| b == q).unwrap_or(0) as u8;
        steps.clear();
        occurrences.clear();
        pool.clear();
        kinds_seen.clear();
        contexts_seen.clear();
        let mut any_context = false;
        let mut driven_layers = [0usize; 2];
        let mut ever_active: [Vec<QubitIx>; 2] = [Vec::new(), Vec::new()];
        for (t, layer) in c.layers.iter().enumerate() {
            let mut touched = [false; 2];
            // At most two ops and two idles: the block has at most two qubits.
            let mut layer_ops: [(Gate, [QubitIx; 2], f64); 4] = [(Gate::Id, [0, 0], 0.0); 4];
            let mut n_ops = 0;
            let mut ixs = [NONE; 2];
            for (j, &q) in block.iter().enumerate() {
                ixs[j] = op_at[t * n + q];
            }
            if ixs[1] < ixs[0] {
                ixs.swap(0, 1);
            }
            for (j, &i) in ixs.iter().enumerate() {
                if i == NONE || (j == 1 && i == ixs[0]) {
                    continue;
                }
                let op = &layer[i as usize];
                for &q in op.qubits() {
                    touched[pos_in_block(q) as usize] = true;
                }
                layer_ops[n_ops] = (op.gate, op.operands, op.angle);
                n_ops += 1;
            }
            if timed[t] {
                for (j, &q) in block.iter().enumerate() {
                    if !touched[j] {
                        layer_ops[n_ops] = (Gate::Id, [q, q], 0.0);
                        n_ops += 1;
                    }
                }
                for (j, &q) in block.iter().enumerate() {
                    for &r in layout.neighbours(q) {
                        if !block.contains(&r) && on(t, r) && !ever_active[j].contains(&r) {
                            ever_active[j].push(r);
                        }
                    }
                    if on(t, q) {
                        driven_layers[j] += 1;
                    }
                }
            }
            for &(gate, operands, angle) in &layer_ops[..n_ops] {
                let qs = &operands[..gate.arity()];
                let kind = (!layout.is_virtual(gate)).then(|| local.intern(OpKind::new(gate, qs)));
                let operands = [pos_in_block(qs[0]), pos_in_block(*qs.last().unwrap_or(&qs[0]))];
                steps.push(Step { layer: t as u32, gate, operands, angle, kind });
                let Some(k) = kind else { continue };
                agg.clear();
                agg.extend(
                    qs.iter()
                        .flat_map(|&q| layout.neighbours(q).iter().copied())
                        .filter(|&r| !block.contains(&r) && on(t, r)),
                );
                agg.sort_unstable();
                agg.dedup();
                any_context |= !agg.is_empty();
                contexts_seen.extend(agg.iter().map(|&r| (k, r)));
                kinds_seen.push(k);
                if !agg.is_empty() {
                    // Layer after layer an occurrence mostly meets the same neighbours as
                    // one just before it: share that slice of the pool rather than repeat it.
                    let same = occurrences.iter().rev().take(4).find(|o| {
                        let s = o.agg_start as usize;
                        pool[s..s + o.agg_len as usize] == agg[..]
                    });
                    let agg_start = match same {
                        Some(o) => o.agg_start,
                        None => {
                            pool.extend_from_slice(&agg);
                            (pool.len() - agg.len()) as u32
                        }
                    };
                    occurrences.push(Occurrence {
                        kind: k,
                        layer: t as u32,
                        agg_start,
                        agg_len: agg.len() as u32,
                    });
                }
            }
        }
        let victims = block
            .iter()
            .enumerate()
            .map(|(j, &q)| {
                let mut n = std::mem::take(&mut ever_active[j]);
                n.sort_unstable();
                n.dedup();
                n.shrink_to_fit();
                VictimRole {
                    qubit: q,
                    driven: 2 * driven_layers[j] > n_timed,
                    active_neighbours: n,
                }
            })
            .collect();
        let marginal = marginals[bi].take();
        let row = Row {
            circuit: ci as u32,
            is_reference: !any_context,
            block,
            positions,
            occurrences: occurrences.clone(),
            aggressor_pool: pool.clone(),
            kind_counts: tally(&mut kinds_seen),
            context_counts: tally(&mut contexts_seen),
            marginal,
            shots,
            n_timed_layers: n_timed as u32,
            victims,
        };
        on_row(&row, &steps, local.kinds())?;
        rows.push(row);
    }
    Ok((local.kinds, rows))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::circuit::Op;
    use crate::counts::{CircuitCounts, Outcome};
    use crate::layout::generate::grid;

    // grid(2, 3):  q0 - q1 - q2
    //              |    |    |
    //              q3 - q4 - q5
    fn set(circuits: Vec<Circuit>) -> CircuitSet {
        CircuitSet::new(circuits).unwrap()
    }

    /// The rows and each row's program, with the program's kinds in the set's numbering.
    fn with_steps(l: &Layout, s: &CircuitSet, counts: Option<&Counts>) -> (Rows, Vec<Vec<Step>>) {
        build_with(l, s, counts, &|_, steps, _| Ok(steps.to_vec()), &|steps, map| {
            for s in steps {
                s.kind = s.kind.map(|k| map[k as usize]);
            }
        })
        .unwrap()
    }

    fn kind(rows: &Rows, layout: &Layout, label: &str) -> KindIx {
        (0..rows.kinds.len() as KindIx)
            .find(|&k| rows.kinds.get(k).label(layout) == label)
            .unwrap_or_else(|| panic!("no kind {label}"))
    }

    #[test]
    fn contexts_idles_and_untimed_layers() {
        let l = grid(2, 3);
        let c = Circuit {
            id: "a".into(),
            layers: vec![
                vec![Op::one(Gate::Sx, 0), Op::one(Gate::X, 1), Op::one(Gate::X, 4)],
                vec![Op::rot(Gate::Rz, 0, 0.5)],
                vec![Op::one(Gate::Sx, 0)],
                vec![Op::two(Gate::Cz, 1, 2)],
            ],
            measured: vec![4, 0],
        };
        let (rows, steps) = with_steps(&l, &set(vec![c]), None);
        assert_eq!(rows.rows.len(), 2);
        let (r4, r0) = (&rows.rows[0], &rows.rows[1]);
        let s0 = &steps[1];
        assert_eq!((r4.block.clone(), r4.positions.clone()), (vec![4], vec![0]));
        assert_eq!((r0.block.clone(), r0.positions.clone()), (vec![0], vec![1]));
        let (sx0, id0) = (kind(&rows, &l, "sx@q0"), kind(&rows, &l, "id@q0"));
        // Layer 1 holds only a virtual rz: no occurrence there, no idle of q0 or q4. The sx
        // of layer 2 has no active neighbour, so only layers 0 and 3 are listed.
        assert_eq!(r0.occurrences.iter().map(|o| o.layer).collect::<Vec<_>>(), vec![0, 3]);
        assert_eq!(r0.aggressors(&r0.occurrences[0]), &[1]);
        assert_eq!(r0.aggressors(&r0.occurrences[1]), &[1], "cz on q1-q2 is active on q1");
        assert_eq!(s0.iter().filter(|s| s.kind.is_some()).count(), 3);
        assert_eq!((r0.count(sx0), r0.count(id0)), (2, 1));
        assert_eq!((r0.context_count(sx0, 1), r0.context_count(id0, 1)), (1, 1));
        assert_eq!(r0.context_count(sx0, 3), 0);
        assert!(!r0.is_reference);
        assert_eq!(s0.len(), 4);
        assert_eq!((s0[1].gate, s0[1].kind), (Gate::Rz, None));
        assert!((s0[1].angle - 0.5).abs() < 1e-15);
        assert_eq!((s0[3].gate, s0[3].kind), (Gate::Id, Some(id0)));
        assert_eq!(s0[0].kind, Some(sx0));
        assert_eq!(r0.n_timed_layers, 3);
        assert!(r0.victims[0].driven, "q0 runs sx in 2 of 3 timed layers");
        assert!(!r4.victims[0].driven, "q4 runs x in 1 of 3 timed layers");
        assert_eq!(r4.victims[0].active_neighbours, vec![1]);
        let x4 = kind(&rows, &l, "x@q4");
        assert_eq!(r4.context_count(x4, 1), 1);
        assert_eq!(r4.count(kind(&rows, &l, "id@q4")), 2);
    }

    #[test]
    fn reference_rows_and_virtual_only_circuits() {
        let l = grid(2, 3);
        let reference = Circuit {
            id: "ref".into(),
            layers: vec![
                vec![Op::one(Gate::Sx, 0)],
                vec![Op::rot(Gate::Rz, 0, 1.0), Op::rot(Gate::Rz, 1, 1.0)],
                vec![Op::one(Gate::Sx, 5)],
            ],
            measured: vec![0],
        };
        let frames = Circuit {
            id: "frames".into(),
            layers: vec![vec![Op::rot(Gate::Rz, 0, 1.0), Op::rot(Gate::Rz, 1, 2.0)]],
            measured: vec![0, 1],
        };
        let (rows, steps) = with_steps(&l, &set(vec![reference, frames]), None);
        let r = &rows.rows[0];
        assert!(r.is_reference, "q5 is not a neighbour of q0, rz is virtual");
        assert!(r.occurrences.is_empty(), "no occurrence has an active neighbour");
        assert_eq!(r.count(kind(&rows, &l, "id@q0")), 1);
        assert_eq!(r.kind_counts.len(), 2);
        for (r, s) in rows.rows[1..].iter().zip(&steps[1..]) {
            assert!(r.occurrences.is_empty() && r.context_counts.is_empty() && r.is_reference);
            assert_eq!(r.n_timed_layers, 0);
            assert_eq!(s.len(), 1);
        }
        assert_eq!(rows.kinds.len(), 2, "only sx@q0 and id@q0");
    }

    #[test]
    fn two_qubit_block_contexts_and_marginal_bit_order() {
        let l = grid(2, 3);
        let c = Circuit {
            id: "pair".into(),
            layers: vec![
                vec![Op::two(Gate::Cz, 1, 0)],
                vec![Op::one(Gate::Sx, 0), Op::one(Gate::Sx, 1), Op::one(Gate::X, 4)],
            ],
            measured: vec![1, 0],
        };
        // Bit i of an outcome is measured qubit i: "10" means q1 = 1, q0 = 0.
        let counts = Counts {
            per_circuit: vec![Some(CircuitCounts {
                outcomes: vec![
                    (Outcome::from_bits(&[true, false]), 7),
                    (Outcome::from_bits(&[false, true]), 3),
                ],
            })],
        };
        let (rows, steps) = with_steps(&l, &set(vec![c]), Some(&counts));
        assert_eq!(rows.rows.len(), 1);
        let r = &rows.rows[0];
        assert_eq!((r.block.clone(), r.positions.clone()), (vec![0, 1], vec![1, 0]));
        // index bit j = block qubit j: q0 = 0, q1 = 1 -> 0b10.
        assert_eq!(r.marginal.as_deref(), Some(&[0u64, 3, 7, 0][..]));
        assert_eq!(r.shots, 10);
        let cz = kind(&rows, &l, "cz@q0-q1");
        assert_eq!(OpKind::new(Gate::Cz, &[1, 0]), OpKind::new(Gate::Cz, &[0, 1]));
        assert_eq!(r.count(cz), 1);
        assert_eq!(r.occurrences.len(), 1, "only sx@q1 beside x@q4 has a context");
        assert_eq!(r.aggressors(&r.occurrences[0]), &[4]);
        let (sx0, sx1) = (kind(&rows, &l, "sx@q0"), kind(&rows, &l, "sx@q1"));
        assert_eq!(r.context_count(sx0, 1), 0, "the block partner is no aggressor");
        assert_eq!((r.context_count(sx1, 0), r.context_count(sx1, 4)), (0, 1));
        assert_eq!(r.context_count(sx0, 3), 0, "q3 idles");
        assert!(!r.is_reference, "x on q4 is a context of sx@q1");
        assert_eq!(steps[0][0].operands, [1, 0], "steps keep operand order (cx needs it)");
    }

    #[test]
    fn two_qubit_reference_row() {
        let l = grid(2, 3);
        // Partner driven while the other idles, cz, and spectators that are not neighbours
        // of the block (q2 neighbours q1; q5 is two steps from both q0 and q3).
        let c = Circuit {
            id: "ref-cz".into(),
            layers: vec![
                vec![Op::one(Gate::Sx, 0), Op::one(Gate::Sx, 5)],
                vec![Op::two(Gate::Cz, 0, 3)],
                vec![Op::one(Gate::X, 3)],
            ],
            measured: vec![0, 3, 5],
        };
        let rows = build(&l, &set(vec![c]), None).unwrap();
        let r = &rows.rows[0];
        assert_eq!(r.block, vec![0, 3]);
        assert!(r.is_reference);
        assert_eq!(r.count(kind(&rows, &l, "id@q3")), 1);
        assert_eq!(r.count(kind(&rows, &l, "id@q0")), 1);
        assert!(r.occurrences.is_empty());
        assert_eq!(r.kind_counts.iter().map(|e| e.1).sum::<u32>(), 5);
    }

    #[test]
    fn only_occurrences_beside_an_active_neighbour_are_listed() {
        let l = grid(2, 3);
        // q0 runs sx four times: twice beside an active q1, twice alone.
        let c = Circuit {
            id: "rep".into(),
            layers: vec![
                vec![Op::one(Gate::Sx, 0), Op::one(Gate::X, 1)],
                vec![Op::one(Gate::Sx, 0)],
                vec![Op::one(Gate::Sx, 0), Op::one(Gate::X, 1)],
                vec![Op::one(Gate::Sx, 0)],
            ],
            measured: vec![0],
        };
        let rows = build(&l, &set(vec![c]), None).unwrap();
        let r = &rows.rows[0];
        let sx0 = kind(&rows, &l, "sx@q0");
        assert_eq!(r.occurrences.iter().map(|o| o.layer).collect::<Vec<_>>(), vec![0, 2]);
        assert!(r.occurrences.iter().all(|o| r.aggressors(o) == [1] && o.kind == sx0));
        assert_eq!((r.count(sx0), r.context_count(sx0, 1)), (4, 2));
    }

    #[test]
    fn blocks_larger_than_two_are_errors_and_order_is_deterministic() {
        let l = grid(2, 3);
        let bad = Circuit {
            id: "tri".into(),
            layers: vec![vec![Op::two(Gate::Cz, 0, 1)], vec![Op::two(Gate::Cz, 1, 2)]],
            measured: vec![0, 1, 2],
        };
        let e = build(&l, &set(vec![bad]), None).unwrap_err().to_string();
        assert!(e.contains("tri") && e.contains("q0, q1, q2"), "{e}");
        let many: Vec<Circuit> = (0..40)
            .map(|i| Circuit {
                id: format!("c{i}"),
                layers: vec![vec![Op::one(if i % 2 == 0 { Gate::Sx } else { Gate::X }, i % 6)]],
                measured: vec![(i + 1) % 6, i % 6],
            })
            .collect();
        let (a, b) =
            (build(&l, &set(many.clone()), None).unwrap(), build(&l, &set(many), None).unwrap());
        assert_eq!(a.kinds.kinds(), b.kinds.kinds());
        let key = |r: &Row| (r.circuit, r.block.clone());
        assert_eq!(
            a.rows.iter().map(key).collect::<Vec<_>>(),
            b.rows.iter().map(key).collect::<Vec<_>>()
        );
        assert!(a.rows.windows(2).all(|w| w[0].circuit <= w[1].circuit));
    }
}
