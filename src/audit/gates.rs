//! Gate-on-gate crosstalk: context budgets whose aggressor is a coupler's two-qubit gate, and
//! whose victim is a qubit or a coupler's gate (method.md sections 4-6 with the coupler's
//! two-qubit rows as victim rows; DEVELOPERS.md says where the text needs reading for them).
//!
//! The LPs of the point pass charge context to aggressor *qubits*: a neighbour running a gate
//! and a neighbour driven by one-qubit pulses share one budget. The *gate view* of a victim's
//! rows splits them: an occurrence of one of the victim's own operations whose aggressor runs
//! a two-qubit gate in that layer charges the gate (`Budget::GateContext`), any other active
//! aggressor the qubit as before. Every other term of a row, and every fixed budget, stays as
//! in the victim's problem, so the view changes only who carries the victim's context slack.
//! The view is solved beside the victim's problem, never instead of it: every figure of the
//! point pass stays what it was, and the gate view adds the gate directions.
//!
//! A pair of units is listed when rows measured both its directions apart from other
//! neighbours (the aggressor, or the aggressor gate's qubits, the only active neighbours): the
//! gate-pair and gate-qubit circuits of `design --gate-pairs` do. Other gate contexts
//! (all-active circuits, 4-8 gates at once) cannot be told apart and are not listed; a
//! standard design lists a pair only where an all-active circuit happens to run two gates
//! apart from every other neighbour (the two end couplers of a 4-qubit chain).

use std::collections::{BTreeMap, BTreeSet, HashMap};

use rayon::prelude::*;

use super::assess::{self, Directed, Subject};
use super::problems::{Budget, Problem};
use super::{Analysis, AuditConfig, PassRows, Progress, Solved};
use crate::error::Result;
use crate::gate::Gate;
use crate::layout::{Layout, QubitIx};
use crate::rows::{KindIx, Row};
use crate::slack::lp::TwoStageSolution;

/// A victim or an aggressor: a qubit, or the two-qubit gate of a coupler (an index into the
/// layout's couplers).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub(crate) enum Unit {
    /// A qubit.
    Qubit(QubitIx),
    /// A coupler's two-qubit gate.
    Coupler(usize),
}

impl Unit {
    /// `q7` or `q5-q6`.
    pub fn label(self, layout: &Layout) -> String {
        match self {
            Unit::Qubit(q) => layout.id(q).to_string(),
            Unit::Coupler(c) => {
                let (a, b) = layout.couplers[c];
                format!("{}-{}", layout.id(a), layout.id(b))
            }
        }
    }

    /// Whether a context charged to `other` belongs to this aggressor: a qubit to itself, a
    /// gate to itself and to its own qubits (driven between its gates).
    fn holds(self, other: Unit, layout: &Layout) -> bool {
        match (self, other) {
            (x, y) if x == y => true,
            (Unit::Coupler(c), Unit::Qubit(r)) => {
                let (a, b) = layout.couplers[c];
                r == a || r == b
            }
            _ => false,
        }
    }
}

/// The aggressor a context budget charges.
fn charged(b: Budget) -> Option<(KindIx, Unit)> {
    match b {
        Budget::Context(k, r) => Some((k, Unit::Qubit(r))),
        Budget::GateContext(k, d) => Some((k, Unit::Coupler(d))),
        _ => None,
    }
}

/// Per circuit, the two-qubit gates each qubit runs: which coupler's gate acts on a qubit
/// in a layer.
pub(crate) struct GateIndex(Vec<CircuitGates>);

/// A two-qubit gate as one of its qubits sees it: (qubit, layer, coupler).
type QubitGate = (u32, u32, u32);

/// One circuit's two-qubit gates, sorted: a qubit's gates are one run, in layer order.
/// Empty when the circuit has no two-qubit gate.
struct CircuitGates(Vec<QubitGate>);

impl CircuitGates {
    /// Qubit q's gates, in layer order.
    fn of(&self, q: QubitIx) -> &[QubitGate] {
        let q = q as u32;
        let from = self.0.partition_point(|e| e.0 < q);
        let to = from + self.0[from..].partition_point(|e| e.0 == q);
        &self.0[from..to]
    }
}

impl GateIndex {
    pub fn new(a: &Analysis) -> GateIndex {
        GateIndex(
            a.circuits
                .circuits
                .par_iter()
                .map(|c| {
                    let n: usize =
                        c.layers.iter().flatten().filter(|op| op.gate.arity() == 2).count();
                    let mut gates = Vec::with_capacity(2 * n);
                    for (t, layer) in c.layers.iter().enumerate() {
                        for op in layer.iter().filter(|op| op.gate.arity() == 2) {
                            let q = op.qubits();
                            if let Some(d) = a.layout.coupler(q[0], q[1]) {
                                let (t, d) = (t as u32, d as u32);
                                gates.extend([(q[0] as u32, t, d), (q[1] as u32, t, d)]);
                            }
                        }
                    }
                    gates.sort_unstable();
                    CircuitGates(gates)
                })
                .collect(),
        )
    }

    /// Whether circuit `circuit` has a two-qubit gate on a coupler.
    fn any(&self, circuit: usize) -> bool {
        !self.0[circuit].0.is_empty()
    }
}

/// The gate each aggressor of one row runs in a layer, for layers asked in time order (a
/// row's occurrences are): each aggressor's gates are read once per row, instead of a
/// search of the layer's gates per occurrence and aggressor (most of listing the gate
/// victims on a large chip). A layer earlier than the last one asked starts that
/// aggressor's reading again, so any order gives the right answer.
struct RowGates<'g> {
    circuit: &'g CircuitGates,
    /// Per aggressor met so far: the qubit, its gates, and how far they have been read.
    cursors: Vec<(QubitIx, &'g [QubitGate], usize)>,
}

impl<'g> RowGates<'g> {
    fn new(gates: &'g GateIndex, circuit: usize) -> RowGates<'g> {
        RowGates { circuit: &gates.0[circuit], cursors: Vec::new() }
    }

    /// The coupler whose gate acts on qubit `q` in layer `layer`, if any.
    fn gate_on(&mut self, layer: u32, q: QubitIx) -> Option<usize> {
        let i = match self.cursors.iter().position(|c| c.0 == q) {
            Some(i) => i,
            None => {
                self.cursors.push((q, self.circuit.of(q), 0));
                self.cursors.len() - 1
            }
        };
        let (_, list, at) = &mut self.cursors[i];
        if *at > 0 && list[*at - 1].1 >= layer {
            *at = 0;
        }
        while *at < list.len() && list[*at].1 < layer {
            *at += 1;
        }
        list.get(*at).filter(|e| e.1 == layer).map(|e| e.2 as usize)
    }
}

/// Whether kind `k` is one of the victim's own operations: a one-qubit operation of the
/// victim qubit, or the victim coupler's two-qubit gate.
fn own(a: &Analysis, victim: Unit, k: KindIx) -> bool {
    let kind = a.rows.kinds.get(k);
    match victim {
        Unit::Qubit(q) => kind.gate.arity() == 1 && kind.qubits[0] == q,
        Unit::Coupler(c) => {
            kind.gate.arity() == 2 && a.layout.coupler(kind.qubits[0], kind.qubits[1]) == Some(c)
        }
    }
}

/// The terms of `row` in the gate view of `victim`; the row's program came from circuit
/// `circuit` (it differs from `row.circuit` in a replicate that resamples circuits).
fn view_terms(
    a: &Analysis,
    gates: &GateIndex,
    victim: Unit,
    row: &Row,
    circuit: usize,
) -> Vec<(Budget, f64)> {
    let mut t: Vec<(Budget, f64)> = row.block.iter().map(|&q| (Budget::Readout(q), 1.0)).collect();
    t.extend(row.kind_counts.iter().map(|&(k, c)| (Budget::Intrinsic(k), c as f64)));
    t.extend(
        row.context_counts
            .iter()
            .filter(|e| !own(a, victim, e.0 .0))
            .map(|&((k, r), c)| (Budget::Context(k, r), c as f64)),
    );
    // A row charges few distinct (kind, unit) budgets: a short list searched in place, sorted
    // at the end (the order a map would give), instead of a tree per row.
    let mut mine: Vec<(Budget, u32)> = Vec::new();
    own_charges(a, gates, victim, row, circuit, |b| match mine.iter_mut().find(|e| e.0 == b) {
        Some(e) => e.1 += 1,
        None => mine.push((b, 1)),
    });
    mine.sort_unstable_by_key(|x| x.0);
    t.extend(mine.into_iter().map(|(b, c)| (b, c as f64)));
    t
}

/// Each budget that an occurrence of the victim's own operations in `row` charges (program
/// of circuit `circuit`): per aggressor, the gate it runs in that layer (once per gate and
/// occurrence), or the aggressor qubit itself.
fn own_charges(
    a: &Analysis,
    gates: &GateIndex,
    victim: Unit,
    row: &Row,
    circuit: usize,
    mut charge: impl FnMut(Budget),
) {
    let mut seen: Vec<usize> = Vec::new();
    let mut gates = RowGates::new(gates, circuit);
    for o in row.occurrences.iter().filter(|o| own(a, victim, o.kind)) {
        seen.clear();
        for &r in row.aggressors(o) {
            match gates.gate_on(o.layer, r) {
                Some(d) if !seen.contains(&d) => {
                    seen.push(d);
                    charge(Budget::GateContext(o.kind, d));
                }
                Some(_) => {}
                None => charge(Budget::Context(o.kind, r)),
            }
        }
    }
}

/// A victim whose gate view lists some direction, and the aggressors listed, sorted
/// (qubits before gates).
#[derive(Clone, Debug)]
pub(crate) struct GateVictim {
    pub victim: Unit,
    pub aggressors: Vec<Unit>,
    /// The victim's gate view over the analysis' own rows, built on first use by a pass
    /// over them: such passes change only its requirements and fixed values.
    own_view: std::sync::OnceLock<Problem>,
}

/// The analysis rows of a victim (its one-qubit rows, or its coupler's two-qubit rows).
fn victim_rows<'a>(a: &'a Analysis, victim: Unit) -> &'a [usize] {
    match victim {
        Unit::Qubit(q) => &a.qubit_rows[q],
        Unit::Coupler(c) => &a.coupler_rows[c],
    }
}

/// The aggressors whose context charges the terms of one row of the view.
fn row_aggressors(terms: &[(Budget, f64)]) -> BTreeSet<Unit> {
    terms.iter().filter_map(|&(b, _)| charged(b).map(|x| x.1)).collect()
}

/// Every victim with a listed direction, couplers first (layout order), then qubits: a
/// coupler's gate beside a gate or a qubit, and a qubit beside a gate. A pair of units is
/// listed when both its directions were measured apart from other neighbours, as one
/// gate-pair or gate-qubit circuit measures them (each block is the other's aggressor); a
/// spectator that only idles beside a gate (the coupler reference circuits) measures one
/// direction, which the qubit edges already cover.
pub(crate) fn victims(a: &Analysis, gates: &GateIndex) -> Vec<GateVictim> {
    let all: Vec<Unit> = (0..a.layout.couplers.len())
        .map(Unit::Coupler)
        .chain((0..a.layout.n_qubits()).map(Unit::Qubit))
        .collect();
    let measured: Vec<(Unit, BTreeSet<Unit>)> =
        all.into_par_iter().map(|victim| (victim, measured_apart(a, gates, victim))).collect();
    let both: BTreeSet<(Unit, Unit)> =
        measured.iter().flat_map(|(v, xs)| xs.iter().map(move |&x| (*v, x))).collect();
    measured
        .into_iter()
        .filter_map(|(victim, xs)| {
            let aggressors: Vec<Unit> =
                xs.into_iter().filter(|&x| both.contains(&(x, victim))).collect();
            (!aggressors.is_empty()).then_some(GateVictim {
                victim,
                aggressors,
                own_view: std::sync::OnceLock::new(),
            })
        })
        .collect()
}

/// The aggressors of `victim`'s own operations that some row measured apart from other
/// neighbours (every context of the row held by that aggressor); for a qubit victim, gates
/// only (its qubit aggressors are the qubit edges').
fn measured_apart(a: &Analysis, gates: &GateIndex, victim: Unit) -> BTreeSet<Unit> {
    let mut listed: BTreeSet<Unit> = BTreeSet::new();
    for &i in victim_rows(a, victim) {
        let row = &a.rows.rows[i];
        if row.is_reference || !gates.any(row.circuit as usize) {
            continue;
        }
        // A unit holds at most two qubits, so a row with more distinct aggressors than
        // that measures nothing apart (most rows of the all-active circuits).
        let mut aggressors: [Option<QubitIx>; 2] = [None; 2];
        let few = row.context_counts.iter().all(|&((_, r), _)| {
            match aggressors.iter().position(|&x| x.is_none() || x == Some(r)) {
                Some(slot) => {
                    aggressors[slot] = Some(r);
                    true
                }
                None => false,
            }
        });
        if !few {
            continue;
        }
        let (present, mine) = charged_units(a, gates, victim, row);
        for &x in &mine {
            let wanted = !matches!((victim, x), (Unit::Qubit(_), Unit::Qubit(_)));
            if wanted && present.iter().all(|&y| x.holds(y, a.layout)) {
                listed.insert(x);
            }
        }
    }
    listed
}

/// The units that [`view_terms`] charges in `row` (its program from the row's own circuit):
/// every charged unit, and those charged on the victim's own operations. The same sets as
/// the terms give, without building them: [`measured_apart`] reads nothing else, and it
/// looks at every occurrence of every row once.
fn charged_units(
    a: &Analysis,
    gates: &GateIndex,
    victim: Unit,
    row: &Row,
) -> (Vec<Unit>, Vec<Unit>) {
    let add = |set: &mut Vec<Unit>, u: Unit| {
        if !set.contains(&u) {
            set.push(u);
        }
    };
    let mut present: Vec<Unit> = Vec::new();
    let mut mine: Vec<Unit> = Vec::new();
    for &((k, r), _) in &row.context_counts {
        if !own(a, victim, k) {
            add(&mut present, Unit::Qubit(r));
        }
    }
    own_charges(a, gates, victim, row, row.circuit as usize, |b| {
        let (_, u) = charged(b).expect("own charges are context budgets");
        add(&mut present, u);
        add(&mut mine, u);
    });
    (present, mine)
}

/// The gate view of one victim, built over `all` (row i holds the program of analysis row
/// `source[i]`) with the requirements and fixed budgets of the victim's solved problem
/// `(p, sol)`. The fixed budgets' values are read from the solution: a replicate's problem
/// may be the template it shares, which marks them fixed without their values.
fn view(
    a: &Analysis,
    gates: &GateIndex,
    victim: Unit,
    all: PassRows<'_>,
    source: Option<&[usize]>,
    (p, sol): (&Problem, &TwoStageSolution),
    zero: &[f64],
) -> Problem {
    let fixed = view_fixed((p, sol));
    let circuit = |i: usize| -> usize {
        let j = source.map_or(i, |s| s[i]);
        a.rows.rows[j].circuit as usize
    };
    let terms = |i: usize, row: &Row| view_terms(a, gates, victim, row, circuit(i));
    let mut v = Problem::build_with(all, p.rows.clone(), zero, &fixed, &terms);
    for (row, src) in v.lp.rows.iter_mut().zip(&p.lp.rows) {
        row.requirement = src.requirement;
    }
    v
}

/// The fixed budgets of a gate view: those of the victim's solved problem `(p, sol)`, with
/// their values from the solution.
fn view_fixed<'s>(
    (p, sol): (&'s Problem, &'s TwoStageSolution),
) -> impl Fn(Budget) -> Option<f64> + 's {
    move |b: Budget| -> Option<f64> {
        let &v = p.index.get(&b)?;
        p.lp.fixed.get(v).copied().flatten().map(|_| sol.values[v])
    }
}

/// The victim's solved problem in `s`.
fn solved_of<'s>(s: &'s Solved, victim: Unit) -> (&'s Problem, &'s TwoStageSolution) {
    let (p, sol) = match victim {
        Unit::Qubit(q) => &s.qubit[q],
        Unit::Coupler(c) => &s.coupler[c],
    };
    (p, sol)
}

type Weights = Vec<(usize, f64)>;

/// Score weights of aggressor `x` on a view: its context budgets on the victim's own kinds,
/// weighted by their occurrences (as the qubit score, DEVELOPERS.md "Directed score"); all,
/// driven kinds, idle kinds.
fn weights(a: &Analysis, victim: Unit, v: &Problem, x: Unit) -> (Weights, Weights, Weights) {
    let mut counts: BTreeMap<usize, (KindIx, f64)> = BTreeMap::new();
    for row in &v.lp.rows {
        for &(var, c) in &row.terms {
            if let Some((k, y)) = charged(v.vars[var]) {
                if y == x && own(a, victim, k) {
                    counts.entry(var).or_insert((k, 0.0)).1 += c;
                }
            }
        }
    }
    let norm = |sel: &dyn Fn(KindIx) -> bool| -> Weights {
        let total: f64 = counts.values().filter(|e| sel(e.0)).map(|e| e.1).sum();
        if total == 0.0 {
            return Vec::new();
        }
        counts.iter().filter(|e| sel(e.1 .0)).map(|(&var, e)| (var, e.1 / total)).collect()
    };
    let is_idle = |k: KindIx| a.rows.kinds.get(k).gate == Gate::Id;
    (norm(&|_| true), norm(&|k| !is_idle(k)), norm(&is_idle))
}

/// Gate-direction scores of a solved pass, in the order of `victims` then their aggressors
/// (the order of the report's `gate_directed`): each victim's gate view solved on the pass's
/// rows and requirements.
pub(crate) fn scores(
    a: &Analysis,
    gates: &GateIndex,
    victims: &[GateVictim],
    all: PassRows<'_>,
    source: Option<&[usize]>,
    s: &Solved,
) -> Vec<f64> {
    if victims.is_empty() {
        return Vec::new();
    }
    let zero = vec![0.0; all.len()];
    victims
        .par_iter()
        .map(|gv| {
            let solved = solved_of(s, gv.victim);
            let fresh = || view(a, gates, gv.victim, all, source, solved, &zero);
            let v = if all.is_own() {
                // The view's rows and terms are the same in every pass over the own rows.
                let shared = gv.own_view.get_or_init(fresh);
                let fixed = view_fixed(solved);
                if shared.fixes_as(&fixed) {
                    let (p, _) = solved;
                    shared.renewed(&|j| p.lp.rows[j].requirement, &fixed)
                } else {
                    fresh()
                }
            } else {
                fresh()
            };
            // A view that cannot be solved scores zero, as a pair the rows never test.
            let sol = v.lp.solve().ok();
            gv.aggressors
                .iter()
                .map(|&x| {
                    let w = weights(a, gv.victim, &v, x).0;
                    sol.as_ref().map_or(0.0, |sol| clip(sol.score(&w)))
                })
                .collect::<Vec<f64>>()
        })
        .collect::<Vec<_>>()
        .concat()
}

fn clip(x: f64) -> f64 {
    if x < assess::ZERO_SCORE {
        0.0
    } else {
        x
    }
}

/// The assessment of one gate direction.
#[derive(Clone, Debug)]
pub(crate) struct GateDirected {
    pub victim: Unit,
    pub aggressor: Unit,
    pub d: Directed,
    /// Other aggressors active together with this one on the victim's own operations.
    pub co_active: Vec<Unit>,
}

/// Stratum of view row `j` for permuting aggressor `x`: depth class, what the victim's
/// qubits were doing, and which other aggressors were active (method.md section 5).
fn stratum(a: &Analysis, v: &Problem, j: usize, x: Unit) -> u64 {
    use std::hash::{Hash, Hasher};
    let row = &a.rows.rows[v.rows[j]];
    let mut h = std::collections::hash_map::DefaultHasher::new();
    assess::depth_class(row.n_timed_layers).hash(&mut h);
    for r in &row.victims {
        r.driven.hash(&mut h);
    }
    let terms: Vec<(Budget, f64)> =
        v.lp.rows[j].terms.iter().map(|&(var, c)| (v.vars[var], c)).collect();
    for y in row_aggressors(&terms) {
        if !x.holds(y, a.layout) {
            y.hash(&mut h);
        }
    }
    h.finish()
}

/// Assesses every listed gate direction on the point pass: the same steps as a qubit edge's
/// directions ([`assess::assess_direction`]) on each victim's gate view.
pub(crate) fn assess(
    a: &Analysis,
    gates: &GateIndex,
    victims: &[GateVictim],
    s: &Solved,
    cfg: &AuditConfig,
    progress: &dyn Progress,
) -> Result<Vec<GateDirected>> {
    if victims.is_empty() {
        return Ok(Vec::new());
    }
    let n: usize = victims.iter().map(|v| v.aggressors.len()).sum();
    progress.stage("testing gate pairs", n as u64);
    let zero = vec![0.0; a.rows.rows.len()];
    let per_victim: Vec<Vec<GateDirected>> = victims
        .par_iter()
        .map(|gv| -> Result<Vec<GateDirected>> {
            let victim = gv.victim;
            let own_rows = PassRows::own(&a.rows.rows);
            let v = view(a, gates, victim, own_rows, None, solved_of(s, victim), &zero);
            let sol = v.lp.solve()?;
            let all_w: Vec<(Weights, Weights, Weights)> =
                gv.aggressors.iter().map(|&x| weights(a, victim, &v, x)).collect();
            let scores: Vec<Weights> = all_w.iter().map(|w| w.0.clone()).collect();
            let ranges = v.lp.attribution_ranges(&sol, &scores)?;
            let row_units: Vec<BTreeSet<Unit>> =
                v.lp.rows
                    .iter()
                    .map(|row| {
                        let terms: Vec<(Budget, f64)> =
                            row.terms.iter().map(|&(var, c)| (v.vars[var], c)).collect();
                        row_aggressors(&terms)
                    })
                    .collect();
            let mut out = Vec::with_capacity(gv.aggressors.len());
            for ((&x, w), range) in gv.aggressors.iter().zip(all_w).zip(ranges) {
                let vars: Vec<usize> = w.0.iter().map(|e| e.0).collect();
                let count = |q: &Problem, j: usize, kind: &dyn Fn(KindIx) -> bool| -> u32 {
                    q.lp.rows[j]
                        .terms
                        .iter()
                        .filter(|&&(var, _)| {
                            charged(q.vars[var])
                                .is_some_and(|(k, y)| y == x && own(a, victim, k) && kind(k))
                        })
                        .map(|&(_, c)| c as u32)
                        .sum()
                };
                let isolated: Vec<usize> = (0..v.rows.len())
                    .filter(|&j| {
                        v.lp.rows[j].reference || row_units[j].iter().all(|&y| x.holds(y, a.layout))
                    })
                    .collect();
                let ids = unit_seed(victim, x);
                let subject = Subject {
                    p: &v,
                    sol: &sol,
                    weights: w,
                    range: Some(range),
                    strata: (0..v.rows.len()).map(|j| stratum(a, &v, j, x)).collect(),
                    isolated,
                    count: &count,
                    seed: assess::pair_seed(cfg.seed ^ GATE_SALT, ids.0, ids.1),
                    corroboration_seed: assess::pair_seed(
                        cfg.seed ^ GATE_SALT ^ assess::CORROBORATION_SALT,
                        ids.0,
                        ids.1,
                    ),
                    family: n,
                };
                let d = assess::assess_direction(a, cfg, &subject)?;
                let mut co: BTreeSet<Unit> = BTreeSet::new();
                for (j, units) in row_units.iter().enumerate() {
                    if v.lp.rows[j].terms.iter().any(|&(var, c)| c > 0.0 && vars.contains(&var)) {
                        co.extend(units.iter().copied().filter(|&y| !x.holds(y, a.layout)));
                    }
                }
                progress.advance(1);
                out.push(GateDirected {
                    victim,
                    aggressor: x,
                    d,
                    co_active: co.into_iter().collect(),
                });
            }
            Ok(out)
        })
        .collect::<Result<_>>()?;
    Ok(per_victim.into_iter().flatten().collect())
}

/// Salt that keeps the gate directions' null streams apart from the qubit directions'.
const GATE_SALT: u64 = 0x6761_7465_7061_6972;

/// Distinct indices of a (victim, aggressor) pair of units for seeding.
fn unit_seed(victim: Unit, aggressor: Unit) -> (QubitIx, QubitIx) {
    let ix = |u: Unit| match u {
        Unit::Qubit(q) => 2 * q,
        Unit::Coupler(c) => 2 * c + 1,
    };
    (ix(victim), ix(aggressor))
}

/// Aggressors of each listed direction, by (victim, aggressor).
pub(crate) fn index(directed: &[GateDirected]) -> HashMap<(Unit, Unit), usize> {
    directed.iter().enumerate().map(|(i, g)| ((g.victim, g.aggressor), i)).collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{RngExt, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    /// The row reader answers as a search of the circuit's gates does, for queries in time
    /// order (as a row's occurrences ask) and out of it.
    #[test]
    fn row_gates_answer_as_a_search_does() {
        let mut rng = ChaCha8Rng::seed_from_u64(5);
        for _ in 0..200 {
            let (n, layers) = (rng.random_range(2..9usize), rng.random_range(1..12u32));
            let mut gates = Vec::new();
            for t in 0..layers {
                let mut free: Vec<u32> = (0..n as u32).collect();
                while free.len() >= 2 && rng.random_bool(0.6) {
                    let a = free.swap_remove(rng.random_range(0..free.len()));
                    let b = free.swap_remove(rng.random_range(0..free.len()));
                    let d = rng.random_range(0..20u32);
                    gates.extend([(a, t, d), (b, t, d)]);
                }
            }
            gates.sort_unstable();
            let index = GateIndex(vec![CircuitGates(gates.clone())]);
            let search = |t: u32, q: QubitIx| {
                gates.iter().find(|e| e.0 == q as u32 && e.1 == t).map(|e| e.2 as usize)
            };
            let mut asks: Vec<(u32, QubitIx)> = (0..30)
                .map(|_| (rng.random_range(0..layers + 1), rng.random_range(0..n + 1)))
                .collect();
            if rng.random_bool(0.5) {
                asks.sort_unstable();
            }
            let mut row = RowGates::new(&index, 0);
            for (t, q) in asks {
                assert_eq!(row.gate_on(t, q), search(t, q), "layer {t}, qubit {q}");
            }
        }
    }
}
