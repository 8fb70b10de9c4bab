//! `check`: validates layout, circuits and counts together and summarises what the data
//! can and cannot tell.
//!
//! The summary says which qubits and couplers lack reference rows and which directed
//! neighbour pairs never appear as a context: those are the gaps a user must close before
//! an audit can attribute crosstalk there (method.md sections 2 and 3).

use std::collections::BTreeSet;

use crate::circuit::CircuitSet;
use crate::counts::agreement::{self, Agreement};
use crate::counts::Counts;
use crate::error::{Result, Warning};
use crate::layout::{Layout, QubitIx};
use crate::rows::{self, KindIx, OpKind, Row, Rows};

/// Smallest, median and largest of a list of values (the lower median for even lengths).
#[derive(Copy, Clone, Debug, PartialEq, Eq)]
pub struct Spread<T> {
    /// Smallest value.
    pub min: T,
    /// Median (lower middle for an even count).
    pub median: T,
    /// Largest value.
    pub max: T,
}

impl<T: Copy + Ord> Spread<T> {
    /// The spread of `values`; `None` when empty.
    pub fn of(mut values: Vec<T>) -> Option<Spread<T>> {
        values.sort_unstable();
        Some(Spread {
            min: *values.first()?,
            median: values[(values.len() - 1) / 2],
            max: *values.last()?,
        })
    }
}

/// What `slackmap check` reports. Plain data: the CLI decides how to show it.
#[derive(Clone, Debug)]
pub struct CheckSummary {
    /// Number of circuits.
    pub n_circuits: usize,
    /// Layers per circuit.
    pub layers: Option<Spread<usize>>,
    /// Rows with a one-qubit block.
    pub blocks_1q: usize,
    /// Rows with a two-qubit block.
    pub blocks_2q: usize,
    /// Shots per circuit, over circuits that have counts; `None` without counts.
    pub shots: Option<Spread<u64>>,
    /// Ids of circuits that have no counts (empty when no counts were given).
    pub circuits_without_counts: Vec<String>,
    /// Qubits with at least one one-qubit reference row.
    pub qubits_with_reference: Vec<QubitIx>,
    /// Qubits without any one-qubit reference row.
    pub qubits_without_reference: Vec<QubitIx>,
    /// Couplers (a, b), a < b, with at least one two-qubit reference row.
    pub couplers_with_reference: Vec<(QubitIx, QubitIx)>,
    /// Couplers without any two-qubit reference row.
    pub couplers_without_reference: Vec<(QubitIx, QubitIx)>,
    /// Number of directed neighbour pairs (victim, aggressor) in the layout.
    pub directed_pairs: usize,
    /// Directed pairs (victim, aggressor) that never appear as a context.
    pub pairs_never_context: Vec<(QubitIx, QubitIx)>,
    /// Agreement of the counts with the circuits' ideal outcomes; `None` without counts.
    pub agreement: Option<Agreement>,
    /// The OpenQASM delays the circuits hold (read as idles; durations not modelled).
    pub delays: DelaySummary,
    /// Every problem found, each once.
    pub warnings: Vec<Warning>,
}

/// The recorded OpenQASM delays of a circuit set, for the user to see: each is an explicit
/// idle in its layer, and its duration is not modelled.
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct DelaySummary {
    /// Number of delays (one per qubit a `delay` statement names).
    pub count: usize,
    /// Circuits holding at least one.
    pub circuits: usize,
    /// Each distinct duration as written, with how many delays have it, in order of first
    /// sight.
    pub durations: Vec<(String, usize)>,
    /// The first few, as `circuit: qubit layer t (duration)`.
    pub first: Vec<String>,
}

/// Delays listed by name in [`DelaySummary::first`].
const DELAYS_LISTED: usize = 5;

impl DelaySummary {
    /// The delays of `set`.
    pub fn of(layout: &Layout, set: &CircuitSet) -> DelaySummary {
        let mut out = DelaySummary::default();
        let mut last_circuit = None;
        for (i, d) in set.all_delays() {
            out.count += 1;
            if last_circuit != Some(i) {
                out.circuits += 1;
                last_circuit = Some(i);
            }
            match out.durations.iter_mut().find(|(t, _)| *t == d.duration) {
                Some(e) => e.1 += 1,
                None => out.durations.push((d.duration.clone(), 1)),
            }
            if out.first.len() < DELAYS_LISTED {
                out.first.push(format!(
                    "{}: {} layer {} ({})",
                    set.circuits[i].id,
                    layout.id(d.qubit),
                    d.layer,
                    crate::error::echo(&d.duration)
                ));
            }
        }
        out
    }

    /// One line for a summary: how many, the durations, the first few; "none" without any.
    pub fn describe(&self) -> String {
        if self.count == 0 {
            return "none".into();
        }
        let durations: Vec<String> =
            self.durations.iter().map(|(t, n)| format!("{} x{n}", crate::error::echo(t))).collect();
        let more = if self.count > self.first.len() { ", ..." } else { "" };
        format!(
            "{} in {} circuit(s); durations {}; {}{more}",
            self.count,
            self.circuits,
            durations.join(", "),
            self.first.join(", ")
        )
    }
}

/// Fewer shots than this in a circuit make a row's requirement mostly shot noise.
const FEW_SHOTS: u64 = 100;

/// Summarises a validated circuit set (and its counts, aligned with the set). The rows are
/// visited a circuit at a time and only their coverage is kept, so memory stays that of the
/// inputs whatever the chip's size.
pub fn summarise(
    layout: &Layout,
    set: &CircuitSet,
    counts: Option<&Counts>,
) -> Result<CheckSummary> {
    let per_circuit = rows::scan(layout, set, counts, &|rows, kinds| {
        let mut c = Coverage::default();
        for r in rows {
            c.add(r, &|k| kinds[k as usize]);
        }
        c
    })?;
    let mut coverage = Coverage::default();
    for c in per_circuit {
        coverage.merge(c);
    }
    Ok(summary(layout, set, counts, coverage))
}

/// Like [`summarise`], for rows already built from the same inputs.
pub fn summarise_rows(
    layout: &Layout,
    set: &CircuitSet,
    counts: Option<&Counts>,
    rows: &Rows,
) -> CheckSummary {
    let mut coverage = Coverage::default();
    for r in &rows.rows {
        coverage.add(r, &|k| rows.kinds.get(k));
    }
    summary(layout, set, counts, coverage)
}

/// What rows cover: blocks, reference rows per qubit, coupler and operation kind, and the
/// directed pairs seen as a context.
#[derive(Default)]
struct Coverage {
    blocks_1q: usize,
    blocks_2q: usize,
    ref_qubits: BTreeSet<QubitIx>,
    ref_couplers: BTreeSet<(QubitIx, QubitIx)>,
    seen_pairs: BTreeSet<(QubitIx, QubitIx)>,
    kinds: BTreeSet<OpKind>,
    kinds_with_reference: BTreeSet<OpKind>,
}

impl Coverage {
    /// Counts one row; `kind` names its kind indices.
    fn add(&mut self, r: &Row, kind: &dyn Fn(KindIx) -> OpKind) {
        match r.block.as_slice() {
            [q] => {
                self.blocks_1q += 1;
                if r.is_reference && !r.kind_counts.is_empty() {
                    self.ref_qubits.insert(*q);
                }
            }
            [a, b] => {
                self.blocks_2q += 1;
                let two_qubit_gate = r.kind_counts.iter().any(|&(k, _)| kind(k).gate.arity() == 2);
                if r.is_reference && two_qubit_gate {
                    self.ref_couplers.insert((*a.min(b), *a.max(b)));
                }
            }
            _ => {}
        }
        for &((k, agg), _) in &r.context_counts {
            for &v in kind(k).qubits() {
                self.seen_pairs.insert((v, agg));
            }
        }
        for &(k, _) in &r.kind_counts {
            self.kinds.insert(kind(k));
            if r.is_reference {
                self.kinds_with_reference.insert(kind(k));
            }
        }
    }

    fn merge(&mut self, other: Coverage) {
        self.blocks_1q += other.blocks_1q;
        self.blocks_2q += other.blocks_2q;
        self.ref_qubits.extend(other.ref_qubits);
        self.ref_couplers.extend(other.ref_couplers);
        self.seen_pairs.extend(other.seen_pairs);
        self.kinds.extend(other.kinds);
        self.kinds_with_reference.extend(other.kinds_with_reference);
    }
}

fn summary(
    layout: &Layout,
    set: &CircuitSet,
    counts: Option<&Counts>,
    coverage: Coverage,
) -> CheckSummary {
    let id = |q: QubitIx| layout.id(q);
    let Coverage {
        blocks_1q,
        blocks_2q,
        ref_qubits,
        ref_couplers,
        seen_pairs,
        kinds,
        kinds_with_reference,
    } = coverage;
    let mut warnings = BTreeSet::new();
    let qubits_without_reference: Vec<QubitIx> =
        (0..layout.n_qubits()).filter(|q| !ref_qubits.contains(q)).collect();
    for &q in &qubits_without_reference {
        warnings.insert(Warning::new(
            "no-reference-rows",
            format!("qubit {} has no one-qubit reference row (a row where all its neighbours idle)", id(q)),
            "add circuits that drive it alone with its neighbours idle, and all-idle circuits for id",
        ));
    }
    let couplers_without_reference: Vec<(QubitIx, QubitIx)> =
        layout.couplers.iter().copied().filter(|c| !ref_couplers.contains(c)).collect();
    for &(a, b) in &couplers_without_reference {
        warnings.insert(Warning::new(
            "no-reference-rows",
            format!("coupler {}-{} has no two-qubit reference row", id(a), id(b)),
            "add circuits that run its two-qubit gate with every neighbour idle",
        ));
    }
    let mut directed_pairs = 0;
    let mut pairs_never_context = Vec::new();
    for q in 0..layout.n_qubits() {
        for &r in layout.neighbours(q) {
            directed_pairs += 1;
            if !seen_pairs.contains(&(q, r)) {
                pairs_never_context.push((q, r));
                warnings.insert(Warning::new(
                    "pair-never-context",
                    format!("{} is never active while {} runs an operation", id(r), id(q)),
                    format!("add circuits that drive {} and {} in the same layers", id(r), id(q)),
                ));
            }
        }
    }
    for k in kinds.difference(&kinds_with_reference) {
        warnings.insert(Warning::new(
            "kind-without-reference",
            format!("operation {} occurs only with an active neighbour", k.label(layout)),
            "its crosstalk-free rate will be fitted on context rows, so its context slack is a lower bound",
        ));
    }
    let agreement = counts.map(|c| agreement::agreement(layout, set, c));
    warnings.extend(agreement.as_ref().and_then(Agreement::warning));
    let mut circuits_without_counts = Vec::new();
    let mut shots = Vec::new();
    if let Some(counts) = counts {
        for (c, cc) in set.circuits.iter().zip(&counts.per_circuit) {
            match cc {
                Some(cc) => {
                    let n = cc.shots();
                    shots.push(n);
                    if n < FEW_SHOTS {
                        warnings.insert(Warning::new(
                            "few-shots",
                            format!("circuit {} has only {n} shots", c.id),
                            format!("run it with at least {FEW_SHOTS} shots"),
                        ));
                    }
                }
                None => {
                    circuits_without_counts.push(c.id.clone());
                    warnings.insert(Warning::new(
                        "no-counts",
                        format!("circuit {} has no counts", c.id),
                        "run it, or drop it from the circuit file",
                    ));
                }
            }
        }
    }
    CheckSummary {
        n_circuits: set.len(),
        layers: Spread::of(set.circuits.iter().map(|c| c.layers.len()).collect()),
        blocks_1q,
        blocks_2q,
        shots: Spread::of(shots),
        circuits_without_counts,
        qubits_with_reference: ref_qubits.into_iter().collect(),
        qubits_without_reference,
        couplers_with_reference: ref_couplers.into_iter().collect(),
        couplers_without_reference,
        directed_pairs,
        pairs_never_context,
        agreement,
        delays: DelaySummary::of(layout, set),
        warnings: warnings.into_iter().collect(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::circuit::{Circuit, Op};
    use crate::gate::Gate;
    use crate::layout::generate::chain;

    #[test]
    fn spread_uses_the_lower_median() {
        assert_eq!(Spread::of(vec![5, 1, 3, 9]), Some(Spread { min: 1, median: 3, max: 9 }));
        assert_eq!(Spread::<u64>::of(Vec::new()), None);
    }

    #[test]
    fn gaps_in_references_and_contexts_are_listed() {
        // chain(3): q0 - q1 - q2. q0 alone is a reference; q1 with q2 active is a context.
        let l = chain(3);
        let set = CircuitSet::new(vec![
            Circuit {
                id: "r0".into(),
                layers: vec![vec![Op::one(Gate::Sx, 0)]],
                measured: vec![0],
            },
            Circuit {
                id: "p12".into(),
                layers: vec![vec![Op::one(Gate::Sx, 1), Op::one(Gate::X, 2)]],
                measured: vec![1, 2],
            },
        ])
        .unwrap();
        let s = summarise(&l, &set, None).unwrap();
        assert_eq!((s.blocks_1q, s.blocks_2q), (3, 0));
        assert_eq!(s.qubits_with_reference, vec![0]);
        assert_eq!(s.qubits_without_reference, vec![1, 2]);
        assert_eq!(s.couplers_without_reference, vec![(0, 1), (1, 2)]);
        assert_eq!(s.directed_pairs, 4);
        assert_eq!(s.pairs_never_context, vec![(0, 1), (1, 0)]);
        assert!(s.warnings.iter().any(|w| w.code == "pair-never-context"));
        assert!(s.shots.is_none() && s.circuits_without_counts.is_empty());
    }
}
