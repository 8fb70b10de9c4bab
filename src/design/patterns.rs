//! Patterns: which blocks run together in one circuit, found by greedy colouring.
//!
//! Two units (a reference qubit, a coupler, or a neighbour pair) share a circuit only when
//! their closed neighbourhoods are disjoint, so no active qubit of one is a neighbour of the
//! other and their measured spectators do not overlap (method.md section 7). The number of
//! colours depends on the layout's degree, not its size.

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

/// Colours units (each a list of active qubits) so that two units of one colour have
/// disjoint closed neighbourhoods. DSatur (Brelaz, "New methods to color the vertices of a
/// graph", CACM 22(4), 251 (1979)): colour next the unit whose conflicts already use the
/// most colours, ties to more conflicts, then to the lower index (deterministic). Returns
/// the classes in colour order, units in input order.
fn pack(layout: &Layout, units: &[Vec<QubitIx>]) -> Vec<Vec<usize>> {
    let n = units.len();
    let hoods: Vec<Vec<QubitIx>> =
        units.iter().map(|qs| closed_neighbourhood(layout, qs)).collect();
    let mut covering: Vec<Vec<usize>> = vec![Vec::new(); layout.n_qubits()];
    for (u, h) in hoods.iter().enumerate() {
        for &r in h {
            covering[r].push(u);
        }
    }
    let conflicts: Vec<Vec<usize>> = hoods
        .iter()
        .enumerate()
        .map(|(u, h)| {
            let mut c: Vec<usize> =
                h.iter().flat_map(|&r| covering[r].iter().copied()).filter(|&v| v != u).collect();
            c.sort_unstable();
            c.dedup();
            c
        })
        .collect();
    let mut colour: Vec<Option<usize>> = vec![None; n];
    // Colours seen among each unit's coloured conflicts (sorted, distinct).
    let mut seen: Vec<Vec<usize>> = vec![Vec::new(); n];
    let mut classes: Vec<Vec<usize>> = Vec::new();
    for _ in 0..n {
        let next = (0..n)
            .filter(|&u| colour[u].is_none())
            .max_by_key(|&u| (seen[u].len(), conflicts[u].len(), std::cmp::Reverse(u)));
        let Some(u) = next else { break };
        let c = (0..).find(|c| seen[u].binary_search(c).is_err()).unwrap_or(0);
        colour[u] = Some(c);
        for &v in &conflicts[u] {
            if let Err(pos) = seen[v].binary_search(&c) {
                seen[v].insert(pos, c);
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
