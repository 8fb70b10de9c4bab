//! Patterns: which blocks run together in one circuit, found by greedy colouring.
//!
//! Two units (a reference qubit, a coupler, or a neighbour pair) share a circuit only when
//! their closed neighbourhoods are disjoint, so no active qubit of one is a neighbour of the
//! other and their measured spectators do not overlap (method.md section 7). The number of
//! colours depends on the layout's degree, not its size. The gate patterns pack two-coupler
//! and coupler-beside-qubit units the same way ([`gate_patterns`]).

use rayon::prelude::*;

use crate::bitset;
use crate::layout::{Layout, QubitIx};

/// The context a pattern provides.
#[derive(Copy, Clone, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum Context {
    /// One-qubit blocks, every neighbour idle and measured.
    Ref1q,
    /// Two-qubit blocks on couplers, every neighbour idle and measured.
    Ref2q,
    /// Both ends of a neighbour pair active as separate one-qubit blocks.
    Pair,
    /// Every qubit runs a one-qubit sequence.
    AllActive1q,
    /// One class of couplers runs two-qubit sequences, every other qubit one-qubit ones.
    AllActive2q,
    /// Every qubit idles for the length of a sequence.
    AllIdle,
    /// Two nearby couplers that share no qubit run two-qubit sequences in the same layers,
    /// every neighbour idle and measured: each coupler's gate beside the other's.
    GatePair,
    /// A coupler runs a two-qubit sequence and a nearby qubit a one-qubit one, every other
    /// neighbour idle and measured: the gate beside a driven qubit and the qubit beside the
    /// gate.
    GateQubit,
}

impl Context {
    /// The name written in the manifest.
    pub fn name(self) -> &'static str {
        match self {
            Context::Ref1q => "ref-1q",
            Context::Ref2q => "ref-2q",
            Context::Pair => "pair",
            Context::AllActive1q => "all-active-1q",
            Context::AllActive2q => "all-active-2q",
            Context::AllIdle => "all-idle",
            Context::GatePair => "gate-pair",
            Context::GateQubit => "gate-qubit",
        }
    }
}

/// An active block of a pattern.
#[derive(Copy, Clone, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum BlockSpec {
    /// A one-qubit block.
    One(QubitIx),
    /// A two-qubit block on a coupler (first operand, second operand).
    Two(QubitIx, QubitIx),
}

impl BlockSpec {
    /// The block's qubits.
    pub fn qubits(&self) -> Vec<QubitIx> {
        match *self {
            BlockSpec::One(q) => vec![q],
            BlockSpec::Two(a, b) => vec![a, b],
        }
    }

    /// The block written with layout ids: `q0` or `q3-q4`.
    pub fn label(&self, layout: &Layout) -> String {
        match *self {
            BlockSpec::One(q) => layout.id(q).to_string(),
            BlockSpec::Two(a, b) => format!("{}-{}", layout.id(a), layout.id(b)),
        }
    }
}

/// A set of blocks that run together, with the qubits measured.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Pattern {
    /// The context this pattern provides.
    pub context: Context,
    /// Active blocks, in qubit order.
    pub blocks: Vec<BlockSpec>,
    /// Measured qubits (active blocks and their neighbours), sorted.
    pub measured: Vec<QubitIx>,
}

/// The closed neighbourhood of a set of qubits: the set and every neighbour, sorted.
fn closed_neighbourhood(layout: &Layout, qubits: &[QubitIx]) -> Vec<QubitIx> {
    let mut v: Vec<QubitIx> = qubits
        .iter()
        .flat_map(|&q| std::iter::once(q).chain(layout.neighbours(q).iter().copied()))
        .collect();
    v.sort_unstable();
    v.dedup();
    v
}

/// A set of small integers, one bit each.
#[derive(Clone, Debug, Default)]
struct Bits(Vec<u64>);

impl Bits {
    fn empty(n: usize) -> Bits {
        Bits(vec![0; n.div_ceil(64)])
    }

    /// Adds `i`; true when it was not there.
    fn insert(&mut self, i: usize) -> bool {
        if i / 64 >= self.0.len() {
            self.0.resize(i / 64 + 1, 0);
        }
        let new = !bitset::bit(&self.0, i);
        bitset::set_bit(&mut self.0, i);
        new
    }

    fn remove(&mut self, i: usize) {
        if i / 64 < self.0.len() {
            bitset::clear_bit(&mut self.0, i);
        }
    }

    fn union_with(&mut self, other: &Bits) {
        for (a, b) in self.0.iter_mut().zip(&other.0) {
            *a |= b;
        }
    }

    fn count(&self) -> usize {
        bitset::count(&self.0)
    }

    /// The least integer not in the set.
    fn first_absent(&self) -> usize {
        match self.0.iter().position(|&w| w != u64::MAX) {
            Some(w) => w * 64 + (!self.0[w]).trailing_zeros() as usize,
            None => self.0.len() * 64,
        }
    }

    fn iter(&self) -> impl Iterator<Item = usize> + '_ {
        bitset::members(&self.0)
    }
}

/// The units whose closed neighbourhood holds one qubit: a list where few, bits where
/// many, so memory stays within the lists' size on sparse layouts and within a bit per
/// unit on dense ones.
enum Cover {
    List(Vec<usize>),
    Bits(Bits),
}

/// Colours units (each a list of active qubits) so that two units of one colour have
/// disjoint closed neighbourhoods. DSatur (Brelaz, "New methods to color the vertices of a
/// graph", CACM 22(4), 251 (1979)): colour next the unit whose conflicts already use the
/// most colours, ties to more conflicts, then to the lower index (deterministic). Returns
/// the classes in colour order, units in input order.
///
/// Conflicts are recomputed from per-qubit covers when needed rather than stored: on a
/// dense layout every unit conflicts with every other, and stored lists grew as the square
/// of the unit count (1.5 GB for 60 qubits of degree 59).
fn pack(layout: &Layout, units: &[Vec<QubitIx>]) -> Vec<Vec<usize>> {
    let n = units.len();
    let mut lists: Vec<Vec<usize>> = vec![Vec::new(); layout.n_qubits()];
    for (u, qs) in units.iter().enumerate() {
        for r in closed_neighbourhood(layout, qs) {
            lists[r].push(u);
        }
    }
    let covering: Vec<Cover> = lists
        .into_iter()
        .map(|l| {
            if l.len() * 64 > n {
                let mut b = Bits::empty(n);
                for u in l {
                    b.insert(u);
                }
                Cover::Bits(b)
            } else {
                Cover::List(l)
            }
        })
        .collect();
    let conflicts = |u: usize| -> Bits {
        let mut c = Bits::empty(n);
        for r in closed_neighbourhood(layout, &units[u]) {
            match &covering[r] {
                Cover::List(l) => l.iter().for_each(|&v| {
                    c.insert(v);
                }),
                Cover::Bits(b) => c.union_with(b),
            }
        }
        c.remove(u);
        c
    };
    let degree: Vec<usize> = (0..n).into_par_iter().map(|u| conflicts(u).count()).collect();
    let mut colour: Vec<Option<usize>> = vec![None; n];
    // Colours seen among each uncoloured unit's coloured conflicts, and how many.
    let mut seen: Vec<Bits> = vec![Bits::default(); n];
    let mut saturation = vec![0usize; n];
    let mut classes: Vec<Vec<usize>> = Vec::new();
    for _ in 0..n {
        let next = (0..n)
            .filter(|&u| colour[u].is_none())
            .max_by_key(|&u| (saturation[u], degree[u], std::cmp::Reverse(u)));
        let Some(u) = next else { break };
        let c = seen[u].first_absent();
        colour[u] = Some(c);
        seen[u] = Bits::default();
        for v in conflicts(u).iter() {
            if colour[v].is_none() && seen[v].insert(c) {
                saturation[v] += 1;
            }
        }
        if classes.len() <= c {
            classes.resize(c + 1, Vec::new());
        }
        classes[c].push(u);
    }
    for class in &mut classes {
        class.sort_unstable();
    }
    classes
}

/// A lower bound on the number of patterns of a layout, in time and memory linear in its
/// size: the units whose neighbourhoods share a qubit r all need colours of their own, and
/// every coupler (or neighbour pair) with an end in N[r] covers r. Lets a design too large
/// to build be refused before the packing itself is attempted.
pub fn min_patterns(layout: &Layout) -> u64 {
    let n = layout.n_qubits();
    let coupler_degree: Vec<u64> = (0..n).map(|q| layout.coupled(q).len() as u64).collect();
    let pair_degree: Vec<u64> = (0..n).map(|q| layout.neighbours(q).len() as u64).collect();
    let mut most = [0u64; 3];
    for r in 0..n {
        let hood = std::iter::once(r).chain(layout.neighbours(r).iter().copied());
        let (mut qubits, mut couplers, mut pairs) = (0u64, 0u64, 0u64);
        for q in hood {
            qubits += 1;
            couplers += coupler_degree[q];
            pairs += pair_degree[q];
        }
        // A coupler or pair with both ends in N[r] is counted twice.
        most[0] = most[0].max(qubits);
        most[1] = most[1].max(couplers.div_ceil(2));
        most[2] = most[2].max(pairs.div_ceil(2));
    }
    // Plus the all-active one-qubit and all-idle patterns.
    most.iter().sum::<u64>() + 2
}

/// A proper edge colouring of the couplers (greedy): each class is a matching.
fn matchings(layout: &Layout) -> Vec<Vec<(QubitIx, QubitIx)>> {
    let mut used: Vec<Vec<usize>> = vec![Vec::new(); layout.n_qubits()];
    let mut classes: Vec<Vec<(QubitIx, QubitIx)>> = Vec::new();
    for &(a, b) in &layout.couplers {
        let mut colour = 0;
        while used[a].contains(&colour) || used[b].contains(&colour) {
            colour += 1;
        }
        used[a].push(colour);
        used[b].push(colour);
        if classes.len() <= colour {
            classes.resize(colour + 1, Vec::new());
        }
        classes[colour].push((a, b));
    }
    classes
}

fn pattern(layout: &Layout, context: Context, mut blocks: Vec<BlockSpec>) -> Pattern {
    blocks.sort_unstable();
    let active: Vec<QubitIx> = blocks.iter().flat_map(|b| b.qubits()).collect();
    Pattern { context, blocks, measured: closed_neighbourhood(layout, &active) }
}

/// Every pattern of a design for the layout, in a fixed order: one-qubit references,
/// coupler references, pairs, all-active (one-qubit, then one per coupler class), all-idle.
pub fn patterns(layout: &Layout) -> Vec<Pattern> {
    let mut out = Vec::new();
    let qubit_units: Vec<Vec<QubitIx>> = (0..layout.n_qubits()).map(|q| vec![q]).collect();
    for class in pack(layout, &qubit_units) {
        let blocks = class.iter().map(|&u| BlockSpec::One(u)).collect();
        out.push(pattern(layout, Context::Ref1q, blocks));
    }
    let coupler_units: Vec<Vec<QubitIx>> =
        layout.couplers.iter().map(|&(a, b)| vec![a, b]).collect();
    for class in pack(layout, &coupler_units) {
        let blocks = class
            .iter()
            .map(|&u| {
                let (a, b) = layout.couplers[u];
                BlockSpec::Two(a, b)
            })
            .collect();
        out.push(pattern(layout, Context::Ref2q, blocks));
    }
    let pairs = layout.neighbour_pairs();
    let pair_units: Vec<Vec<QubitIx>> = pairs.iter().map(|&(a, b)| vec![a, b]).collect();
    for class in pack(layout, &pair_units) {
        let blocks = class
            .iter()
            .flat_map(|&u| {
                let (a, b) = pairs[u];
                [BlockSpec::One(a), BlockSpec::One(b)]
            })
            .collect();
        out.push(pattern(layout, Context::Pair, blocks));
    }
    let all: Vec<BlockSpec> = (0..layout.n_qubits()).map(BlockSpec::One).collect();
    out.push(pattern(layout, Context::AllActive1q, all));
    for class in matchings(layout) {
        let mut paired = vec![false; layout.n_qubits()];
        let mut blocks: Vec<BlockSpec> = class
            .iter()
            .map(|&(a, b)| {
                paired[a] = true;
                paired[b] = true;
                BlockSpec::Two(a, b)
            })
            .collect();
        blocks.extend((0..layout.n_qubits()).filter(|&q| !paired[q]).map(BlockSpec::One));
        out.push(pattern(layout, Context::AllActive2q, blocks));
    }
    out.push(Pattern {
        context: Context::AllIdle,
        blocks: Vec::new(),
        measured: (0..layout.n_qubits()).collect(),
    });
    out
}

/// The pairs of couplers (indices i < j, sorted) that share no qubit and whose ends are
/// neighbours: joined by a coupler, or within the layout's widened neighbourhood (radius 2,
/// extra pairs), exactly as neighbour pairs of qubits are found.
pub fn gate_pairs(layout: &Layout) -> Vec<(usize, usize)> {
    let mut out = Vec::new();
    for (i, near) in near_couplers(layout).into_iter().enumerate() {
        out.extend(near.into_iter().filter(|&j| j > i).map(|j| (i, j)));
    }
    out
}

/// For every coupler, the couplers that share no qubit with it and have an end among its
/// [`gate_spectators`] (sorted).
fn near_couplers(layout: &Layout) -> Vec<Vec<usize>> {
    gate_spectators(layout)
        .into_iter()
        .zip(&layout.couplers)
        .map(|(spectators, &(a, b))| {
            let mut near: Vec<usize> = spectators
                .into_iter()
                .flat_map(|y| layout.coupled(y).iter().map(move |&z| (y, z)))
                .filter(|&(_, z)| z != a && z != b)
                .filter_map(|(y, z)| layout.coupler(y, z))
                .collect();
            near.sort_unstable();
            near.dedup();
            near
        })
        .collect()
}

/// For every coupler (by index), the qubits outside it in the neighbourhood of its ends
/// (sorted): the spectators whose one-qubit gates can disturb its gate, and the reverse.
pub fn gate_spectators(layout: &Layout) -> Vec<Vec<QubitIx>> {
    layout
        .couplers
        .iter()
        .map(|&(a, b)| {
            let mut v: Vec<QubitIx> = [a, b]
                .iter()
                .flat_map(|&x| layout.neighbours(x).iter().copied())
                .filter(|&r| r != a && r != b)
                .collect();
            v.sort_unstable();
            v.dedup();
            v
        })
        .collect()
}

/// A lower bound on the number of gate-pair and gate-qubit patterns, in time linear in the
/// layout's size times its degree squared and memory linear in its size: every unit with a
/// coupler end in N[r] covers r, so those units need colours of their own. A gate pair is
/// counted at most four times that way (two couplers, two ends each), a gate-qubit unit at
/// most twice.
pub fn min_gate_patterns(layout: &Layout) -> u64 {
    let pair_degree: Vec<u64> =
        near_couplers(layout).iter().map(|near| near.len() as u64).collect();
    let spectators: Vec<u64> = gate_spectators(layout).iter().map(|s| s.len() as u64).collect();
    let mut most = [0u64; 2];
    for r in 0..layout.n_qubits() {
        let (mut pairs, mut beside) = (0u64, 0u64);
        for q in std::iter::once(r).chain(layout.neighbours(r).iter().copied()) {
            for &s in layout.coupled(q) {
                if let Some(c) = layout.coupler(q, s) {
                    pairs += pair_degree[c];
                    beside += spectators[c];
                }
            }
        }
        most[0] = most[0].max(pairs.div_ceil(4));
        most[1] = most[1].max(beside.div_ceil(2));
    }
    most[0] + most[1]
}

/// The patterns a design adds to measure gate-on-gate crosstalk, in a fixed order: gate
/// pairs (both couplers of every [`gate_pairs`] entry run in the same layers), then a coupler
/// beside each of its [`gate_spectators`] driven. Units are packed like the reference ones,
/// so the number of patterns depends on the layout's degree, not its size.
pub fn gate_patterns(layout: &Layout) -> Vec<Pattern> {
    gate_patterns_where(layout, &vec![true; layout.couplers.len()], &|_, _| true)
}

/// The gate patterns of a few couplers and gate pairs (indices into `layout.couplers`): the
/// gate pairs whose two couplers are both in `couplers`, every pair in `pairs`, and every
/// coupler of `couplers` beside each of its [`gate_spectators`] driven. A targeted follow-up:
/// on a small chip little packs, so the full set has many patterns, while a handful of
/// couplers adds a pattern or two per unit and a listed pair one pattern.
pub fn gate_patterns_among(
    layout: &Layout,
    couplers: &[usize],
    pairs: &[(usize, usize)],
) -> Vec<Pattern> {
    let mut chosen = vec![false; layout.couplers.len()];
    for &c in couplers {
        if let Some(x) = chosen.get_mut(c) {
            *x = true;
        }
    }
    let pairs: Vec<(usize, usize)> = pairs.iter().map(|&(i, j)| (i.min(j), i.max(j))).collect();
    gate_patterns_where(layout, &chosen, &|i, j| {
        (chosen[i] && chosen[j]) || pairs.contains(&(i, j))
    })
}

fn gate_patterns_where(
    layout: &Layout,
    chosen: &[bool],
    pair_chosen: &dyn Fn(usize, usize) -> bool,
) -> Vec<Pattern> {
    let two = |c: usize| {
        let (a, b) = layout.couplers[c];
        BlockSpec::Two(a, b)
    };
    let mut out = Vec::new();
    let pairs: Vec<(usize, usize)> =
        gate_pairs(layout).into_iter().filter(|&(i, j)| pair_chosen(i, j)).collect();
    let units: Vec<Vec<QubitIx>> = pairs
        .iter()
        .map(|&(i, j)| two(i).qubits().into_iter().chain(two(j).qubits()).collect())
        .collect();
    for class in pack(layout, &units) {
        let blocks = class.iter().flat_map(|&u| [two(pairs[u].0), two(pairs[u].1)]).collect();
        out.push(pattern(layout, Context::GatePair, blocks));
    }
    let beside: Vec<(usize, QubitIx)> = gate_spectators(layout)
        .into_iter()
        .enumerate()
        .filter(|&(c, _)| chosen[c])
        .flat_map(|(c, qs)| qs.into_iter().map(move |r| (c, r)))
        .collect();
    let units: Vec<Vec<QubitIx>> =
        beside.iter().map(|&(c, r)| two(c).qubits().into_iter().chain([r]).collect()).collect();
    for class in pack(layout, &units) {
        let blocks =
            class.iter().flat_map(|&u| [two(beside[u].0), BlockSpec::One(beside[u].1)]).collect();
        out.push(pattern(layout, Context::GateQubit, blocks));
    }
    out
}

/// Finds a coupler named `a-b` (or `b-a`) by its qubit ids. Ids may themselves hold `-`, so
/// every split is tried; None when no split names a coupler.
pub fn coupler_by_name(layout: &Layout, name: &str) -> Option<usize> {
    name.match_indices('-').find_map(|(i, _)| {
        let (a, b) = (layout.qubit(&name[..i])?, layout.qubit(&name[i + 1..])?);
        layout.coupler(a, b)
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::layout::generate;

    fn hood(layout: &Layout, b: &BlockSpec) -> Vec<QubitIx> {
        closed_neighbourhood(layout, &b.qubits())
    }

    #[test]
    fn packed_units_have_disjoint_closed_neighbourhoods() {
        let layout = generate::grid(5, 6);
        for p in patterns(&layout) {
            let units: Vec<Vec<QubitIx>> = match p.context {
                Context::Ref1q | Context::Ref2q => {
                    p.blocks.iter().map(|b| hood(&layout, b)).collect()
                }
                Context::Pair => {
                    // Rebuild the pairs: each active qubit has exactly one active neighbour.
                    let active: Vec<QubitIx> = p.blocks.iter().flat_map(|b| b.qubits()).collect();
                    let mut units = Vec::new();
                    for &q in &active {
                        let partners: Vec<QubitIx> = layout
                            .neighbours(q)
                            .iter()
                            .copied()
                            .filter(|r| active.contains(r))
                            .collect();
                        assert_eq!(partners.len(), 1, "pair pattern: q{q} sees {partners:?}");
                        if q < partners[0] {
                            units.push(closed_neighbourhood(&layout, &[q, partners[0]]));
                        }
                    }
                    units
                }
                _ => Vec::new(),
            };
            for i in 0..units.len() {
                for j in i + 1..units.len() {
                    assert!(units[i].iter().all(|q| !units[j].contains(q)), "{:?}", p.context);
                }
            }
        }
    }

    #[test]
    fn the_lower_bound_holds_and_is_tight_on_complete_layouts() {
        for layout in [generate::grid(4, 4), generate::ring(7), generate::chain(3)] {
            assert!(min_patterns(&layout) <= patterns(&layout).len() as u64);
        }
        // A complete layout: nothing packs, one pattern per unit.
        let n = 7;
        let ids: Vec<String> = (0..n).map(|i| format!("q{i}")).collect();
        let couplers: Vec<(usize, usize)> =
            (0..n).flat_map(|a| (a + 1..n).map(move |b| (a, b))).collect();
        let mut text = format!("name = \"k{n}\"\nqubits = [");
        text += &ids.iter().map(|i| format!("{{ id = \"{i}\" }}")).collect::<Vec<_>>().join(", ");
        text += "]\ncouplers = [";
        text += &couplers
            .iter()
            .map(|(a, b)| format!("[\"q{a}\", \"q{b}\"]"))
            .collect::<Vec<_>>()
            .join(", ");
        text +=
            "]\n[gates]\none_qubit = [\"sx\", \"rz\"]\nvirtual = [\"rz\"]\ntwo_qubit = \"cz\"\n";
        let layout = crate::layout::parse_layout(&text, std::path::Path::new("k7.toml")).unwrap();
        let ps = patterns(&layout);
        let units = n + 2 * couplers.len();
        let packed =
            |p: &&Pattern| matches!(p.context, Context::Ref1q | Context::Ref2q | Context::Pair);
        assert_eq!(ps.iter().filter(packed).count(), units);
        assert!(min_patterns(&layout) <= ps.len() as u64);
        assert!(min_patterns(&layout) >= units as u64);
    }

    /// The units of a gate pattern: couplers paired with their near coupler (gate-pair) or
    /// with the one-qubit block beside them (gate-qubit), rebuilt from the blocks alone.
    fn gate_units(layout: &Layout, p: &Pattern) -> Vec<Vec<QubitIx>> {
        let near = |x: &BlockSpec, y: &BlockSpec| {
            x.qubits().iter().any(|&a| y.qubits().iter().any(|&b| layout.are_neighbours(a, b)))
        };
        let mut units = Vec::new();
        for (i, x) in p.blocks.iter().enumerate() {
            let partners: Vec<&BlockSpec> = p
                .blocks
                .iter()
                .enumerate()
                .filter(|&(j, y)| j != i && near(x, y))
                .map(|t| t.1)
                .collect();
            assert_eq!(partners.len(), 1, "{:?}: {x:?} sees {partners:?}", p.context);
            if x < partners[0] {
                units.push(x.qubits().into_iter().chain(partners[0].qubits()).collect());
            }
        }
        units
    }

    #[test]
    fn gate_patterns_cover_every_unit_once_with_disjoint_neighbourhoods() {
        for layout in [generate::grid(5, 6), generate::hex(2, 3), generate::ring(9)] {
            let ps = gate_patterns(&layout);
            let mut pairs = Vec::new();
            let mut beside = Vec::new();
            for p in &ps {
                let units = gate_units(&layout, p);
                let hoods: Vec<Vec<QubitIx>> =
                    units.iter().map(|u| closed_neighbourhood(&layout, u)).collect();
                for i in 0..hoods.len() {
                    for j in i + 1..hoods.len() {
                        assert!(hoods[i].iter().all(|q| !hoods[j].contains(q)), "{:?}", p.context);
                    }
                }
                for u in units {
                    match (p.context, u.len()) {
                        (Context::GatePair, 4) => {
                            let c1 = layout.coupler(u[0], u[1]).unwrap();
                            let c2 = layout.coupler(u[2], u[3]).unwrap();
                            pairs.push((c1.min(c2), c1.max(c2)));
                        }
                        // One(r) sorts before Two(a, b): the unit is [r, a, b].
                        (Context::GateQubit, 3) => {
                            beside.push((layout.coupler(u[1], u[2]).unwrap(), u[0]))
                        }
                        other => panic!("unexpected unit {other:?}"),
                    }
                }
            }
            pairs.sort_unstable();
            beside.sort_unstable();
            // Every two couplers that share no qubit but are joined by a coupler.
            let mut want = Vec::new();
            for (i, &(a, b)) in layout.couplers.iter().enumerate() {
                for (j, &(c, d)) in layout.couplers.iter().enumerate().skip(i + 1) {
                    let disjoint = ![a, b].contains(&c) && ![a, b].contains(&d);
                    let joined = [a, b]
                        .iter()
                        .any(|&x| [c, d].iter().any(|&y| layout.coupler(x, y).is_some()));
                    if disjoint && joined {
                        want.push((i, j));
                    }
                }
            }
            assert_eq!(pairs, want, "{}", layout.name);
            let mut want: Vec<(usize, QubitIx)> = Vec::new();
            for (c, &(a, b)) in layout.couplers.iter().enumerate() {
                for r in 0..layout.n_qubits() {
                    if r != a
                        && r != b
                        && (layout.coupler(a, r).is_some() || layout.coupler(b, r).is_some())
                    {
                        want.push((c, r));
                    }
                }
            }
            assert_eq!(beside, want, "{}", layout.name);
            assert!(min_gate_patterns(&layout) <= ps.len() as u64, "{}", layout.name);
        }
    }

    #[test]
    fn wider_neighbourhoods_add_wider_gate_pairs() {
        // A chain q0-...-q5; couplers 0 = q0-q1, 1 = q1-q2, ..., 4 = q4-q5.
        let chain =
            |hood: &str| {
                let text =
                    format!(
                "name = \"c6\"\nqubits = [{}]\ncouplers = [{}]\n[gates]\none_qubit = [\"sx\", \
                 \"rz\"]\nvirtual = [\"rz\"]\ntwo_qubit = \"cz\"\n{hood}",
                (0..6).map(|i| format!("{{ id = \"q{i}\" }}")).collect::<Vec<_>>().join(", "),
                (0..5).map(|i| format!("[\"q{i}\", \"q{}\"]", i + 1)).collect::<Vec<_>>().join(", ")
            );
                crate::layout::parse_layout(&text, std::path::Path::new("c6.toml")).unwrap()
            };
        let near = chain("");
        assert_eq!(gate_pairs(&near), vec![(0, 2), (1, 3), (2, 4)]);
        // Radius 2: q1 sees q3 and q2 sees q4.
        let wide = chain("[neighbourhood]\nradius = 2\n");
        assert_eq!(gate_pairs(&wide), vec![(0, 2), (0, 3), (1, 3), (1, 4), (2, 4)]);
        // An extra spectator pair q0-q5 joins the chain's two ends.
        let extra = chain("[neighbourhood]\nextra_pairs = [[\"q0\", \"q5\"]]\n");
        assert_eq!(gate_pairs(&extra), vec![(0, 2), (0, 4), (1, 3), (2, 4)]);
        assert_eq!(gate_spectators(&extra)[0], vec![2, 5]);
        for layout in [&wide, &extra] {
            let found: usize = gate_patterns(layout)
                .iter()
                .filter(|p| p.context == Context::GatePair)
                .map(|p| gate_units(layout, p).len())
                .sum();
            assert_eq!(found, gate_pairs(layout).len());
        }
    }

    #[test]
    fn a_selection_keeps_the_pairs_among_its_couplers_and_their_spectators() {
        let layout = generate::grid(4, 4);
        let c = |name: &str| coupler_by_name(&layout, name).unwrap();
        assert_eq!(coupler_by_name(&layout, "q9-q8"), Some(c("q8-q9")));
        assert_eq!(coupler_by_name(&layout, "q5-q7"), None);
        assert_eq!(coupler_by_name(&layout, "q5"), None);
        let chosen = [c("q8-q9"), c("q10-q14")];
        let ps = gate_patterns_among(&layout, &chosen, &[]);
        let all = gate_patterns(&layout);
        // The one gate pair of the two couplers, and each coupler beside each of its
        // spectators (five each on this grid), every unit in a pattern of its own here.
        let mut pairs = Vec::new();
        let mut beside = Vec::new();
        for p in &ps {
            for u in gate_units(&layout, p) {
                if p.context == Context::GatePair {
                    pairs.push(u);
                } else {
                    let k = layout.coupler(u[1], u[2]).unwrap();
                    assert!(chosen.contains(&k), "{u:?}");
                    beside.push((k, u[0]));
                }
            }
        }
        assert_eq!(pairs.len(), 1);
        let spectators = gate_spectators(&layout);
        let mut want: Vec<(usize, QubitIx)> =
            chosen.iter().flat_map(|&k| spectators[k].iter().map(move |&r| (k, r))).collect();
        want.sort_unstable();
        beside.sort_unstable();
        assert_eq!(beside, want);
        assert_eq!(ps.len(), 11);
        assert!(all.len() > 10 * ps.len(), "{}", all.len());
        // Every coupler selected is the full set.
        let every: Vec<usize> = (0..layout.couplers.len()).collect();
        assert_eq!(gate_patterns_among(&layout, &every, &[]), all);
        // A listed pair alone is one gate-pair pattern and no gate-qubit unit.
        let one = gate_patterns_among(&layout, &[], &[(c("q10-q14"), c("q8-q9"))]);
        assert_eq!(one.len(), 1);
        assert_eq!(one[0].context, Context::GatePair);
        assert_eq!(gate_units(&layout, &one[0]).len(), 1);
    }

    /// Pattern counts on square grids of 16, 144 and 1,024 qubits (all of degree 4): they
    /// depend on the layout's degree, not its size (method.md section 7). Figures quoted in
    /// DEVELOPERS.md ("Gate contexts"); the greedy colouring can use a few more colours on a
    /// larger grid, where more units compete, so the test allows a small margin above the
    /// smallest and a bound far below the unit counts, which grow with the size.
    #[test]
    fn pattern_counts_depend_on_degree_not_size() {
        let mut counts = Vec::new();
        for n in [4, 12, 32] {
            let layout = generate::grid(n, n);
            let standard = patterns(&layout).len();
            let gates = gate_patterns(&layout);
            let pairs = gates.iter().filter(|p| p.context == Context::GatePair).count();
            let units = gate_pairs(&layout).len()
                + gate_spectators(&layout).iter().map(Vec::len).sum::<usize>();
            println!(
                "grid {n}x{n}: {standard} standard patterns, {} gate patterns ({pairs} \
                 gate-pair, {} gate-qubit) for {units} gate units",
                gates.len(),
                gates.len() - pairs
            );
            counts.push((standard, gates.len(), units));
        }
        let (s12, g12, u12) = counts[1];
        let (s32, g32, u32_) = counts[2];
        assert!(s32 <= s12 + 3 && g32 <= g12 + g12 / 10, "{counts:?}");
        assert!(u32_ > 7 * u12 && g32 * 20 < u32_, "{counts:?}");
    }

    #[test]
    fn bits_behave_as_a_set() {
        let mut b = Bits::empty(10);
        assert!(b.insert(3));
        assert!(!b.insert(3));
        assert!(b.insert(130));
        assert_eq!(b.iter().collect::<Vec<_>>(), vec![3, 130]);
        assert_eq!(b.count(), 2);
        assert_eq!(b.first_absent(), 0);
        let mut full = Bits::default();
        for i in 0..64 {
            full.insert(i);
        }
        assert_eq!(full.first_absent(), 64);
        full.remove(5);
        assert_eq!(full.first_absent(), 5);
    }

    #[test]
    fn every_unit_appears_once() {
        let layout = generate::grid(4, 4);
        let ps = patterns(&layout);
        let ref1: usize =
            ps.iter().filter(|p| p.context == Context::Ref1q).map(|p| p.blocks.len()).sum();
        assert_eq!(ref1, 16);
        let ref2: usize =
            ps.iter().filter(|p| p.context == Context::Ref2q).map(|p| p.blocks.len()).sum();
        assert_eq!(ref2, layout.couplers.len());
        let pair: usize =
            ps.iter().filter(|p| p.context == Context::Pair).map(|p| p.blocks.len()).sum();
        assert_eq!(pair, 2 * layout.neighbour_pairs().len());
        for p in ps.iter().filter(|p| p.context == Context::AllActive2q) {
            let n: usize = p.blocks.iter().map(|b| b.qubits().len()).sum();
            assert_eq!(n, 16);
        }
        let classes: usize = ps.iter().filter(|p| p.context == Context::AllActive2q).count();
        // A grid's coupler graph is bipartite with degree 4, so 4 classes suffice (Konig's
        // line colouring theorem); greedy may use a few more.
        assert!((4..=7).contains(&classes), "{classes}");
    }
}
