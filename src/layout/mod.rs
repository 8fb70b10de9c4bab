//! Chip layouts: qubits, couplers, native gates and the neighbourhood that defines contexts.
//!
//! A [`Layout`] is validated once at construction (ids unique, couplers between distinct
//! known qubits, gate names known) and is immutable afterwards, so every later stage can
//! index qubits by [`QubitIx`] without re-checking. The TOML file format is documented in
//! the README ("Layout files").

use std::collections::BTreeSet;

use crate::counts::FastMap;

pub mod generate;
pub mod toml;

pub use self::toml::{parse_layout, read_layout, to_toml};

use crate::error::{echo, Warning};
use crate::gate::Gate;

/// Index of a qubit in its layout's `qubits` list. Valid only for the layout it came from.
pub type QubitIx = usize;

/// One qubit: its id as written in files, and an optional position for drawing.
#[derive(Clone, Debug, PartialEq)]
pub struct Qubit {
    /// The id used in every file (for example `q7`).
    pub id: String,
    /// Drawing position (x, y), arbitrary units.
    pub position: Option<[f64; 2]>,
}

/// A two-qubit native gate: the gate, and its fixed angle for `cp` and `rzz` (0 for gates
/// without one).
#[derive(Copy, Clone, Debug, PartialEq)]
pub struct Native2 {
    /// The gate (arity 2).
    pub gate: Gate,
    /// The angle in radians the chip runs it at (0 unless `gate.n_params() == 1`).
    pub angle: f64,
}

impl Native2 {
    /// A native without an angle.
    pub fn fixed(gate: Gate) -> Native2 {
        Native2 { gate, angle: 0.0 }
    }

    /// True when an operation runs this native: same gate and, for a parametrized gate, the
    /// same angle to 1e-9 rad.
    pub fn runs(&self, gate: Gate, angle: f64) -> bool {
        gate == self.gate && (gate.n_params() == 0 || (angle - self.angle).abs() <= 1e-9)
    }

    /// The ideal unitary (basis index bit(first) + 2 * bit(second)).
    pub fn unitary(&self) -> crate::gate::Mat4 {
        self.gate.unitary2(self.angle).unwrap_or_default()
    }
}

impl std::fmt::Display for Native2 {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        if self.gate.n_params() == 1 {
            write!(f, "{}({:?})", self.gate, self.angle)
        } else {
            write!(f, "{}", self.gate)
        }
    }
}

/// The layout's native gate set. [`Layout::new`] resolves each coupler's two-qubit list
/// once: to change the two-qubit gates, build a new layout.
#[derive(Clone, PartialEq)]
pub struct NativeGates {
    /// One-qubit gates the chip runs (virtual ones included).
    pub one_qubit: Vec<Gate>,
    /// The subset of `one_qubit` that are frame changes: no duration, no error.
    pub virtual_gates: Vec<Gate>,
    /// The two-qubit gates of every coupler that has no list of its own, in file order
    /// (the first one is what designs use first).
    pub two_qubit: Vec<Native2>,
    /// Couplers (qubit ids as written) with their own two-qubit gates, which replace
    /// `two_qubit` on that coupler.
    pub coupler_gates: Vec<(String, String, Vec<Native2>)>,
    /// Two-qubit gates the layout file defines by their unitary.
    pub custom: Vec<Gate>,
}

impl NativeGates {
    /// One-qubit gates and one two-qubit gate on every coupler.
    pub fn simple(one_qubit: Vec<Gate>, virtual_gates: Vec<Gate>, two_qubit: Gate) -> NativeGates {
        NativeGates {
            one_qubit,
            virtual_gates,
            two_qubit: vec![Native2::fixed(two_qubit)],
            coupler_gates: Vec::new(),
            custom: Vec::new(),
        }
    }

    /// True for one fixed two-qubit gate on every coupler and no custom gates.
    pub fn is_simple(&self) -> bool {
        self.two_qubit.len() == 1
            && self.two_qubit[0].gate.n_params() == 0
            && self.coupler_gates.is_empty()
            && self.custom.is_empty()
    }
}

impl std::fmt::Debug for NativeGates {
    /// A layout of one fixed two-qubit gate prints as it always has (design digests hash
    /// this text); richer sets add their couplers' lists and the custom matrices.
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        let mut d = f.debug_struct("NativeGates");
        d.field("one_qubit", &self.one_qubit).field("virtual_gates", &self.virtual_gates);
        if self.is_simple() {
            return d.field("two_qubit", &self.two_qubit[0].gate).finish();
        }
        let custom: Vec<(&str, Option<crate::gate::Mat4>)> =
            self.custom.iter().map(|g| (g.name(), g.unitary2(0.0))).collect();
        d.field("two_qubit", &self.two_qubit)
            .field("coupler_gates", &self.coupler_gates)
            .field("custom", &custom)
            .finish()
    }
}

/// How the neighbourhood N(q) that defines an occurrence's context is built.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct NeighbourhoodSpec {
    /// Graph radius over couplers: 1 (coupler neighbours, the default) or 2.
    pub radius: usize,
    /// Extra spectator pairs (for example physically close but uncoupled qubits).
    pub extra_pairs: Vec<(QubitIx, QubitIx)>,
}

impl Default for NeighbourhoodSpec {
    fn default() -> Self {
        NeighbourhoodSpec { radius: 1, extra_pairs: Vec::new() }
    }
}

/// A validated chip layout.
///
/// Invariants: qubit ids are unique and non-empty; every coupler joins two distinct
/// qubits, is stored as (lower index, higher index), and appears once; `virtual_gates` is a
/// subset of `one_qubit`; the two-qubit gate has arity 2 and the others arity 1.
#[derive(Clone, Debug)]
pub struct Layout {
    /// The layout's name.
    pub name: String,
    /// The qubits, in file order.
    pub qubits: Vec<Qubit>,
    /// Couplers as (a, b) with a < b, sorted.
    pub couplers: Vec<(QubitIx, QubitIx)>,
    /// Native gates.
    pub gates: NativeGates,
    /// The neighbourhood definition.
    pub neighbourhood: NeighbourhoodSpec,
    /// Looked up for every qubit a circuit or a count names, and for every two-qubit gate:
    /// hashed with the crate's fast word hasher (these keys are not chosen by an attacker).
    index: FastMap<String, QubitIx>,
    coupler_index: FastMap<(QubitIx, QubitIx), usize>,
    /// The two-qubit natives of each coupler, by coupler index (never empty).
    coupler_natives: Vec<Vec<Native2>>,
    /// Per coupler index: true when the file writes it (higher index, lower index), so a
    /// directed native on it runs from the higher-index qubit.
    written_reversed: Vec<bool>,
    adjacency: Vec<Vec<QubitIx>>,
    neighbours: Vec<Vec<QubitIx>>,
}

impl Layout {
    /// How OpenQASM physical qubits `$k` are placed: `$k` is the k-th qubit of the layout
    /// file (the standard's meaning), shown as `$0=q0, $1=q1, ...` with at most `shown`
    /// entries and a count of the rest.
    pub fn placement(&self, shown: usize) -> String {
        let mut s: Vec<String> = self
            .qubits
            .iter()
            .take(shown)
            .enumerate()
            .map(|(k, q)| format!("${k}={}", q.id))
            .collect();
        if self.qubits.len() > shown {
            s.push(format!("... ({} more)", self.qubits.len() - shown));
        }
        s.join(", ")
    }

    /// A warning when qubit ids look like `q<k>` but stand in another order in the file:
    /// `$k` then is not `qk`, and every gate of an OpenQASM program on physical qubits lands
    /// elsewhere than its author may think.
    pub fn placement_warning(&self) -> Option<Warning> {
        let numbered: Vec<Option<usize>> = self
            .qubits
            .iter()
            .map(|q| q.id.strip_prefix('q').and_then(|n| n.parse::<usize>().ok()))
            .collect();
        if numbered.iter().any(Option::is_none) {
            return None;
        }
        let (k, q) = numbered.iter().enumerate().find(|&(k, n)| *n != Some(k))?;
        Some(Warning::new(
            "placement-order",
            format!(
                "layout '{}' lists its qubits out of order: ${k} (qubit {k} of the file, counting \
                 from 0) is q{}, not q{k}",
                echo(&self.name),
                q.unwrap_or_default()
            ),
            "OpenQASM $k means the k-th qubit of the layout file; reorder the layout's qubits \
             as q0, q1, ... if the programs mean qubit qk",
        ))
    }
    /// Builds and validates a layout. Errors name the offending id or gate; the caller adds
    /// the file location.
    pub fn new(
        name: String,
        qubits: Vec<Qubit>,
        couplers: Vec<(String, String)>,
        gates: NativeGates,
        radius: usize,
        extra_pairs: Vec<(String, String)>,
    ) -> std::result::Result<Layout, String> {
        if qubits.is_empty() {
            return Err("a layout needs at least one qubit".into());
        }
        let mut index = FastMap::default();
        for (i, q) in qubits.iter().enumerate() {
            if q.id.is_empty() || q.id.chars().any(|c| c.is_whitespace() || c == ',') {
                return Err(format!(
                    "qubit id {:?} is not valid: ids are non-empty and contain no spaces or commas",
                    q.id
                ));
            }
            if index.insert(q.id.clone(), i).is_some() {
                return Err(format!("duplicate qubit id '{}'", q.id));
            }
            if let Some(p) = q.position {
                if !p.iter().all(|v| v.is_finite()) {
                    return Err(format!("qubit '{}': position must be two finite numbers", q.id));
                }
            }
        }
        let lookup = |id: &str, what: &str| -> std::result::Result<QubitIx, String> {
            index.get(id).copied().ok_or_else(|| format!("{what} names unknown qubit '{id}'"))
        };
        let mut set = BTreeSet::new();
        let mut reversed = BTreeSet::new();
        for (a, b) in &couplers {
            let (ia, ib) = (lookup(a, "a coupler")?, lookup(b, "a coupler")?);
            if ia == ib {
                return Err(format!("coupler {a}-{b} joins a qubit to itself"));
            }
            if !set.insert((ia.min(ib), ia.max(ib))) {
                return Err(format!("duplicate coupler {a}-{b}"));
            }
            if ia > ib {
                reversed.insert((ib, ia));
            }
        }
        let couplers: Vec<(QubitIx, QubitIx)> = set.into_iter().collect();
        let written_reversed: Vec<bool> = couplers.iter().map(|c| reversed.contains(c)).collect();
        let coupler_index: FastMap<(QubitIx, QubitIx), usize> =
            couplers.iter().enumerate().map(|(i, &c)| (c, i)).collect();
        let check_list = |list: &[Native2], whose: &str| -> std::result::Result<(), String> {
            for (i, n) in list.iter().enumerate() {
                if n.gate.arity() != 2 {
                    return Err(format!("{whose}: gate '{}' is not a two-qubit gate", n.gate));
                }
                if !n.angle.is_finite() || (n.gate.n_params() == 0 && n.angle != 0.0) {
                    return Err(format!("{whose}: gate '{n}' has an angle it cannot take"));
                }
                if list[..i].iter().any(|m| m.gate == n.gate) {
                    return Err(format!(
                        "{whose}: gate '{}' is listed twice (one angle per gate and coupler)",
                        n.gate
                    ));
                }
            }
            Ok(())
        };
        check_list(&gates.two_qubit, "[gates] two_qubit")?;
        let mut coupler_natives: Vec<Option<Vec<Native2>>> = vec![None; couplers.len()];
        for (a, b, list) in &gates.coupler_gates {
            let (ia, ib) =
                (lookup(a, "a coupler's gate list")?, lookup(b, "a coupler's gate list")?);
            let c = coupler_index
                .get(&(ia.min(ib), ia.max(ib)))
                .copied()
                .ok_or_else(|| format!("gates are listed for {a}-{b}, which is not a coupler"))?;
            if coupler_natives[c].is_some() {
                return Err(format!("coupler {a}-{b} has two gate lists"));
            }
            if list.is_empty() {
                return Err(format!("coupler {a}-{b}: its gate list is empty"));
            }
            check_list(list, &format!("coupler {a}-{b}"))?;
            if written_reversed[c] != (ia > ib) {
                if let Some(n) = list.iter().find(|n| !n.gate.is_symmetric()) {
                    return Err(format!(
                        "coupler {a}-{b} lists the directed gate {n} but `couplers` writes it \
                         {b}-{a}: write both in the same order"
                    ));
                }
            }
            coupler_natives[c] = Some(list.clone());
        }
        let mut resolved = Vec::with_capacity(couplers.len());
        for (c, own) in coupler_natives.into_iter().enumerate() {
            match own {
                Some(list) => resolved.push(list),
                None if gates.two_qubit.is_empty() => {
                    let (a, b) = couplers[c];
                    return Err(format!(
                        "coupler {}-{} has no two-qubit gate: give [gates] two_qubit, or a list \
                         for this coupler",
                        qubits[a].id, qubits[b].id
                    ));
                }
                None => resolved.push(gates.two_qubit.clone()),
            }
        }
        if let Some(g) = gates.custom.iter().find(|g| !matches!(g, Gate::Custom(_))) {
            return Err(format!("gate '{g}' is a standard gate, not a custom one"));
        }
        if let Some(g) = gates.one_qubit.iter().find(|g| g.arity() != 1) {
            return Err(format!("one_qubit gate '{g}' is not a one-qubit gate"));
        }
        if let Some(g) = gates.virtual_gates.iter().find(|g| !gates.one_qubit.contains(g)) {
            return Err(format!("virtual gate '{g}' is not listed among one_qubit gates"));
        }
        if !(1..=2).contains(&radius) {
            return Err(format!("neighbourhood radius {radius} is not supported (valid: 1 or 2)"));
        }
        let mut extra = BTreeSet::new();
        for (a, b) in &extra_pairs {
            let (ia, ib) =
                (lookup(a, "an extra spectator pair")?, lookup(b, "an extra spectator pair")?);
            if ia == ib {
                return Err(format!("extra spectator pair {a}-{b} joins a qubit to itself"));
            }
            extra.insert((ia.min(ib), ia.max(ib)));
        }
        let n = qubits.len();
        let mut adjacency = vec![Vec::new(); n];
        for &(a, b) in &couplers {
            adjacency[a].push(b);
            adjacency[b].push(a);
        }
        for list in &mut adjacency {
            list.sort_unstable();
        }
        let mut neighbours: Vec<BTreeSet<QubitIx>> =
            adjacency.iter().map(|l| l.iter().copied().collect()).collect();
        if radius == 2 {
            for q in 0..n {
                for &r in &adjacency[q] {
                    for &s in &adjacency[r] {
                        if s != q {
                            neighbours[q].insert(s);
                        }
                    }
                }
            }
        }
        for &(a, b) in &extra {
            neighbours[a].insert(b);
            neighbours[b].insert(a);
        }
        Ok(Layout {
            name,
            qubits,
            couplers,
            gates,
            neighbourhood: NeighbourhoodSpec { radius, extra_pairs: extra.into_iter().collect() },
            index,
            coupler_index,
            coupler_natives: resolved,
            written_reversed,
            adjacency,
            neighbours: neighbours.into_iter().map(|s| s.into_iter().collect()).collect(),
        })
    }

    /// Number of qubits.
    pub fn n_qubits(&self) -> usize {
        self.qubits.len()
    }

    /// The index of a qubit id, if the layout has it.
    pub fn qubit(&self, id: &str) -> Option<QubitIx> {
        self.index.get(id).copied()
    }

    /// The id of a qubit index.
    pub fn id(&self, q: QubitIx) -> &str {
        &self.qubits[q].id
    }

    /// The coupler index of an unordered pair, if it is a coupler.
    pub fn coupler(&self, a: QubitIx, b: QubitIx) -> Option<usize> {
        self.coupler_index.get(&(a.min(b), a.max(b))).copied()
    }

    /// Coupler neighbours of q (sorted).
    pub fn coupled(&self, q: QubitIx) -> &[QubitIx] {
        &self.adjacency[q]
    }

    /// The context neighbourhood N(q) (sorted): coupler neighbours, widened by the radius
    /// and the extra spectator pairs.
    pub fn neighbours(&self, q: QubitIx) -> &[QubitIx] {
        &self.neighbours[q]
    }

    /// True when r is in N(q) (symmetric).
    pub fn are_neighbours(&self, q: QubitIx, r: QubitIx) -> bool {
        self.neighbours[q].binary_search(&r).is_ok()
    }

    /// The analysis edges: unordered neighbour pairs (a, b), a < b, sorted.
    pub fn neighbour_pairs(&self) -> Vec<(QubitIx, QubitIx)> {
        (0..self.n_qubits())
            .flat_map(|a| self.neighbours[a].iter().filter(move |&&b| b > a).map(move |&b| (a, b)))
            .collect()
    }

    /// True when the gate is a virtual frame change on this layout.
    pub fn is_virtual(&self, g: Gate) -> bool {
        self.gates.virtual_gates.contains(&g)
    }

    /// True when the gate is native on this layout (a two-qubit gate: on some coupler).
    pub fn is_native(&self, g: Gate) -> bool {
        g == Gate::Id
            || self.gates.one_qubit.contains(&g)
            || self.coupler_natives.iter().flatten().any(|n| n.gate == g)
    }

    /// The two-qubit natives of coupler `coupler` as written in reports: "cz", "cz/iswap".
    pub fn natives_text(&self, coupler: usize) -> String {
        let names: Vec<String> = self.natives(coupler).iter().map(ToString::to_string).collect();
        names.join("/")
    }

    /// The two-qubit natives of a coupler (by coupler index), never empty.
    pub fn natives(&self, coupler: usize) -> &[Native2] {
        &self.coupler_natives[coupler]
    }

    /// The two-qubit natives between two qubits (empty when they are not coupled).
    pub fn natives_between(&self, a: QubitIx, b: QubitIx) -> &[Native2] {
        self.coupler(a, b).map_or(&[], |c| self.natives(c))
    }

    /// Every distinct two-qubit native of the layout, in order of first appearance.
    pub fn all_natives(&self) -> Vec<Native2> {
        let mut out: Vec<Native2> = Vec::new();
        for n in self.gates.two_qubit.iter().chain(self.coupler_natives.iter().flatten()) {
            if !out.contains(n) {
                out.push(*n);
            }
        }
        out
    }

    /// Coupler `coupler` as the file writes it, (first, second): a directed native on it
    /// (one whose unitary changes when its operands swap, like `cx` and `ecr`) runs with
    /// `first` as its first operand, the only direction the chip calibrated.
    pub fn coupler_direction(&self, coupler: usize) -> (QubitIx, QubitIx) {
        let (a, b) = self.couplers[coupler];
        if self.written_reversed[coupler] {
            (b, a)
        } else {
            (a, b)
        }
    }

    /// True when an operation (gate, operands, angle) is native where it runs: a one-qubit
    /// gate of the layout, or a two-qubit gate at its angle on a coupler that lists it and,
    /// for a directed gate, in the coupler's direction ([`Layout::coupler_direction`]).
    pub fn is_native_op(&self, gate: Gate, qubits: &[QubitIx], angle: f64) -> bool {
        match qubits {
            [a, b] => {
                self.natives_between(*a, *b).iter().any(|n| n.runs(gate, angle))
                    && (gate.is_symmetric() || self.runs_forward(*a, *b))
            }
            _ => gate == Gate::Id || self.gates.one_qubit.contains(&gate),
        }
    }

    /// True when (a, b) is the direction of coupler a-b ([`Layout::coupler_direction`]);
    /// false when they are not coupled.
    pub fn runs_forward(&self, a: QubitIx, b: QubitIx) -> bool {
        self.coupler(a, b).is_some_and(|c| self.coupler_direction(c) == (a, b))
    }

    /// A directed gate on a coupler that lists it, applied against the coupler's direction:
    /// the coupler as the file writes it, else `None`.
    pub fn reversed_native(
        &self,
        gate: Gate,
        qubits: &[QubitIx],
        angle: f64,
    ) -> Option<(QubitIx, QubitIx)> {
        let [a, b] = *qubits else { return None };
        let c = self.coupler(a, b)?;
        let listed = self.natives(c).iter().any(|n| n.runs(gate, angle));
        (listed && !gate.is_symmetric() && self.coupler_direction(c) != (a, b))
            .then(|| self.coupler_direction(c))
    }

    /// True when some coupler carries a directed native and is written against index order
    /// (the only case where directions change what `design` writes).
    pub fn has_reversed_directed(&self) -> bool {
        (0..self.couplers.len()).any(|c| {
            self.written_reversed[c] && self.natives(c).iter().any(|n| !n.gate.is_symmetric())
        })
    }

    /// Maximum coupler degree.
    pub fn max_degree(&self) -> usize {
        self.adjacency.iter().map(Vec::len).max().unwrap_or(0)
    }

    /// True when the coupler graph is connected.
    pub fn is_connected(&self) -> bool {
        let n = self.n_qubits();
        let mut seen = vec![false; n];
        let mut stack = vec![0];
        seen[0] = true;
        while let Some(q) = stack.pop() {
            for &r in &self.adjacency[q] {
                if !seen[r] {
                    seen[r] = true;
                    stack.push(r);
                }
            }
        }
        seen.into_iter().all(|s| s)
    }
}
