//! Scheduling hints from an audit: which operations should not share a layer, groups of
//! operations that may, and how much crosstalk costs the layout in parallelism.
//!
//! A flagged directed pair (victim v, aggressor r) forbids any operation touching r in the
//! same layer as any operation touching v. Couplers are grouped by a proper colouring of
//! their conflict graph (shared qubit or crosstalk conflict); the figures are a maximum
//! independent set and the chromatic number of that graph, each exact when a branch and
//! bound search finishes inside its node budget and otherwise a heuristic with a bound.
//!
//! Sources: DSatur, D. Brelaz, "New methods to color the vertices of a graph", CACM 22
//! (1979) 251-256, and its exact branch-and-bound form (Brelaz 1979, section 4; see also
//! San Segundo, Computers & Operations Research 39 (2012) 1724); maximum matching by
//! Gabow's form of Edmonds' blossom algorithm (petgraph); Konig's line colouring theorem
//! (1916; Diestel, Graph Theory, Prop. 5.3.1) in the tests.

use std::collections::BTreeMap;
use std::fmt::Write as _;
use std::path::Path;

use petgraph::graph::{NodeIndex, UnGraph};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

use crate::bitset::{bit, clear_bit, count, members, set_bit};
use crate::error::{Error, Result};
use crate::layout::{generate, Layout, Qubit, QubitIx};
use crate::report::terminal::{self, columns, number, push_row, text, Style, TextCell};
use crate::report::{AuditReport, Verdict};

/// Version of the `hints.json` format written by this build.
pub const SCHEMA: u32 = 1;

/// Search nodes each exact search may visit before it settles for its best so far.
pub const DEFAULT_BUDGET: u64 = 200_000;

// ---------------------------------------------------------------------------------------
// Small dense graphs and the two searches
// ---------------------------------------------------------------------------------------

/// A simple undirected graph on vertices `0..n` stored as adjacency bit rows, so that the
/// searches below can intersect neighbourhoods a word at a time.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct BitGraph {
    n: usize,
    words: usize,
    rows: Vec<u64>,
}

impl BitGraph {
    /// An edgeless graph on `n` vertices.
    pub fn new(n: usize) -> BitGraph {
        let words = n.div_ceil(64).max(1);
        BitGraph { n, words, rows: vec![0; n * words] }
    }

    /// Number of vertices.
    pub fn len(&self) -> usize {
        self.n
    }

    /// True when the graph has no vertices.
    pub fn is_empty(&self) -> bool {
        self.n == 0
    }

    /// Joins a and b; loops and repeated edges are ignored.
    pub fn add_edge(&mut self, a: usize, b: usize) {
        if a != b && a < self.n && b < self.n {
            let w = self.words;
            set_bit(&mut self.rows[a * w..(a + 1) * w], b);
            set_bit(&mut self.rows[b * w..(b + 1) * w], a);
        }
    }

    /// True when a and b are joined.
    pub fn has_edge(&self, a: usize, b: usize) -> bool {
        a < self.n && b < self.n && bit(self.row(a), b)
    }

    fn row(&self, v: usize) -> &[u64] {
        &self.rows[v * self.words..(v + 1) * self.words]
    }

    /// Degree of v.
    pub fn degree(&self, v: usize) -> usize {
        count(self.row(v))
    }

    /// Number of edges.
    pub fn n_edges(&self) -> usize {
        (0..self.n).map(|v| self.degree(v)).sum::<usize>() / 2
    }

    fn full(&self) -> Vec<u64> {
        let mut s = vec![0u64; self.words];
        for v in 0..self.n {
            set_bit(&mut s, v);
        }
        s
    }

    fn degree_in(&self, v: usize, set: &[u64]) -> usize {
        self.row(v).iter().zip(set).map(|(a, b)| (a & b).count_ones() as usize).sum()
    }

    fn to_petgraph(&self) -> UnGraph<(), ()> {
        let mut g = UnGraph::with_capacity(self.n, self.n_edges());
        let nodes: Vec<NodeIndex> = (0..self.n).map(|_| g.add_node(())).collect();
        for a in 0..self.n {
            for b in members(self.row(a)).filter(|&b| b > a) {
                g.add_edge(nodes[a], nodes[b], ());
            }
        }
        g
    }

    /// True when no two of `set` are joined.
    pub fn is_independent(&self, set: &[usize]) -> bool {
        set.iter().enumerate().all(|(i, &a)| set[i + 1..].iter().all(|&b| !self.has_edge(a, b)))
    }

    /// True when `colour` gives joined vertices different colours.
    pub fn is_proper(&self, colour: &[usize]) -> bool {
        colour.len() == self.n
            && (0..self.n).all(|a| members(self.row(a)).all(|b| colour[a] != colour[b]))
    }
}

/// A figure from a search: the value found, the bound it is proven against, and whether
/// the two meet (the figure is then exact).
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
pub struct Figure {
    /// The value found (a set size or a number of layers).
    pub value: usize,
    /// The proven bound on the true optimum: an upper bound for a largest set, a lower bound
    /// for a number of layers. Equal to `value` when exact.
    pub bound: usize,
    /// True when `value` is proven optimal.
    pub exact: bool,
    /// How the value was found and the bound proven, in words.
    pub method: String,
}

/// Greedy clique partition of `set`: its size bounds any independent set inside `set`
/// from above, because an independent set takes at most one vertex of each clique.
fn clique_cover_bound(g: &BitGraph, set: &[u64]) -> usize {
    let mut commons: Vec<Vec<u64>> = Vec::new();
    for v in members(set) {
        match commons.iter_mut().find(|c| bit(c, v)) {
            Some(c) => c.iter_mut().zip(g.row(v)).for_each(|(a, b)| *a &= b),
            None => commons.push(g.row(v).iter().zip(set).map(|(a, b)| a & b).collect()),
        }
    }
    commons.len()
}

/// Minimum-degree greedy independent set (the classic heuristic; every pick removes the
/// fewest candidates).
fn greedy_independent(g: &BitGraph) -> Vec<usize> {
    let mut p = g.full();
    let mut out = Vec::new();
    while let Some(v) = members(&p).min_by_key(|&v| (g.degree_in(v, &p), v)) {
        out.push(v);
        clear_bit(&mut p, v);
        p.iter_mut().zip(g.row(v)).for_each(|(a, b)| *a &= !b);
    }
    out
}

struct MisSearch<'a> {
    g: &'a BitGraph,
    best: Vec<usize>,
    target: usize,
    nodes: u64,
    budget: u64,
    aborted: bool,
}

impl MisSearch<'_> {
    fn run(&mut self, mut p: Vec<u64>, cur: &mut Vec<usize>) {
        if self.best.len() >= self.target || self.aborted {
            return;
        }
        self.nodes += 1;
        if self.nodes > self.budget {
            self.aborted = true;
            return;
        }
        let start = cur.len();
        // A vertex of degree 0 or 1 among the candidates lies in some maximum set.
        loop {
            let Some(v) = members(&p).find(|&v| self.g.degree_in(v, &p) <= 1) else { break };
            cur.push(v);
            clear_bit(&mut p, v);
            p.iter_mut().zip(self.g.row(v)).for_each(|(a, b)| *a &= !b);
        }
        if p.iter().all(|&w| w == 0) {
            if cur.len() > self.best.len() {
                self.best = cur.clone();
            }
        } else if cur.len() + clique_cover_bound(self.g, &p) > self.best.len() {
            let v = members(&p).max_by_key(|&v| self.g.degree_in(v, &p)).unwrap_or(0);
            let mut with = p.clone();
            clear_bit(&mut with, v);
            with.iter_mut().zip(self.g.row(v)).for_each(|(a, b)| *a &= !b);
            cur.push(v);
            self.run(with, cur);
            cur.pop();
            clear_bit(&mut p, v);
            self.run(p, cur);
        }
        cur.truncate(start);
    }
}

/// A largest set of pairwise non-adjacent vertices, with a proof of how large it may be.
#[derive(Clone, Debug)]
pub struct IndependentSet {
    /// The members, sorted.
    pub members: Vec<usize>,
    /// Size, bound and method.
    pub figure: Figure,
}

/// Maximum independent set by branch and bound (branch on a vertex of largest degree,
/// take degree <= 1 vertices outright, prune with a greedy clique partition). `known_upper`
/// is an outside upper bound (for couplers: the layout's maximum matching); when the search
/// uses up `budget` nodes the best set found is returned with the root bound.
pub fn max_independent_set(
    g: &BitGraph,
    known_upper: Option<usize>,
    budget: u64,
) -> IndependentSet {
    let root = clique_cover_bound(g, &g.full()).min(known_upper.unwrap_or(usize::MAX));
    let mut search = MisSearch {
        g,
        best: greedy_independent(g),
        target: root,
        nodes: 0,
        budget,
        aborted: false,
    };
    search.run(g.full(), &mut Vec::new());
    let mut found = search.best;
    found.sort_unstable();
    let exact = !search.aborted;
    let bound = if exact { found.len() } else { root };
    let method = if exact && search.nodes == 0 {
        "exact: greedy set meets the matching and clique-partition bound".to_string()
    } else if exact {
        format!("exact: branch and bound ({} search nodes)", search.nodes)
    } else {
        format!(
            "heuristic: minimum-degree greedy improved by branch and bound cut at {budget} nodes; \
             upper bound from the maximum matching and a clique partition"
        )
    };
    IndependentSet {
        figure: Figure { value: found.len(), bound, exact: exact || found.len() == bound, method },
        members: found,
    }
}

/// A greedy clique grown from the highest-degree vertices: its size bounds the number of
/// colours from below.
fn greedy_clique(g: &BitGraph) -> usize {
    let mut seeds: Vec<usize> = (0..g.n).collect();
    seeds.sort_by_key(|&v| std::cmp::Reverse(g.degree(v)));
    let mut best = usize::from(g.n > 0);
    for &s in seeds.iter().take(64) {
        let mut cand: Vec<u64> = g.row(s).to_vec();
        let mut size = 1;
        while let Some(v) = members(&cand).max_by_key(|&v| g.degree_in(v, &cand)) {
            size += 1;
            cand.iter_mut().zip(g.row(v)).for_each(|(a, b)| *a &= b);
        }
        best = best.max(size);
    }
    best
}

struct ColourSearch<'a> {
    adj: Vec<Vec<usize>>,
    degree: Vec<usize>,
    colour: Vec<usize>,
    seen: Vec<Vec<u32>>,
    sat: Vec<usize>,
    best: Vec<usize>,
    best_k: usize,
    lower: usize,
    nodes: u64,
    budget: u64,
    aborted: bool,
    _g: &'a BitGraph,
}

const NONE: usize = usize::MAX;

impl ColourSearch<'_> {
    fn assign(&mut self, v: usize, c: usize) {
        self.colour[v] = c;
        for i in 0..self.adj[v].len() {
            let u = self.adj[v][i];
            if self.seen[u][c] == 0 {
                self.sat[u] += 1;
            }
            self.seen[u][c] += 1;
        }
    }

    fn unassign(&mut self, v: usize, c: usize) {
        self.colour[v] = NONE;
        for i in 0..self.adj[v].len() {
            let u = self.adj[v][i];
            self.seen[u][c] -= 1;
            if self.seen[u][c] == 0 {
                self.sat[u] -= 1;
            }
        }
    }

    fn run(&mut self, coloured: usize, used: usize) {
        if self.aborted || self.best_k <= self.lower {
            return;
        }
        self.nodes += 1;
        if self.nodes > self.budget {
            self.aborted = true;
            return;
        }
        if coloured == self.colour.len() {
            if used < self.best_k {
                self.best_k = used;
                self.best = self.colour.clone();
            }
            return;
        }
        // DSatur rule: the uncoloured vertex with the most distinct neighbour colours.
        let v = (0..self.colour.len())
            .filter(|&v| self.colour[v] == NONE)
            .max_by_key(|&v| (self.sat[v], self.degree[v], std::cmp::Reverse(v)))
            .unwrap_or(0);
        for c in 0..used {
            if self.seen[v][c] == 0 {
                self.assign(v, c);
                self.run(coloured + 1, used);
                self.unassign(v, c);
                if self.aborted || self.best_k <= self.lower {
                    return;
                }
            }
        }
        if used + 1 < self.best_k {
            self.assign(v, used);
            self.run(coloured + 1, used + 1);
            self.unassign(v, used);
        }
    }
}

/// A proper colouring with as few colours as the search could prove.
#[derive(Clone, Debug)]
pub struct Colouring {
    /// Colour of each vertex, `0..figure.value`.
    pub colour: Vec<usize>,
    /// Number of colours, lower bound and method.
    pub figure: Figure,
}

impl Colouring {
    /// The colour classes, each sorted, in colour order.
    pub fn classes(&self) -> Vec<Vec<usize>> {
        let mut out = vec![Vec::new(); self.figure.value];
        for (v, &c) in self.colour.iter().enumerate() {
            if let Some(class) = out.get_mut(c) {
                class.push(v);
            }
        }
        out
    }
}

/// Minimum colouring: petgraph's DSatur heuristic first, then exact DSatur branch and bound
/// until the colours meet the lower bound (largest of `known_lower`, a greedy clique) or
/// the `budget` of search nodes is spent.
pub fn min_colouring(g: &BitGraph, known_lower: usize, budget: u64) -> Colouring {
    if g.n == 0 {
        let figure = Figure { value: 0, bound: 0, exact: true, method: "exact: empty".into() };
        return Colouring { colour: Vec::new(), figure };
    }
    let pg = g.to_petgraph();
    let (map, k0) = petgraph::algo::dsatur_coloring(&pg);
    let start: Vec<usize> =
        (0..g.n).map(|v| map.get(&NodeIndex::new(v)).copied().unwrap_or(v)).collect();
    let lower = known_lower.max(greedy_clique(g)).max(1);
    let adj: Vec<Vec<usize>> = (0..g.n).map(|v| members(g.row(v)).collect()).collect();
    let mut s = ColourSearch {
        degree: adj.iter().map(Vec::len).collect(),
        adj,
        colour: vec![NONE; g.n],
        seen: vec![vec![0; k0.max(1)]; g.n],
        sat: vec![0; g.n],
        best: start,
        best_k: k0,
        lower,
        nodes: 0,
        budget,
        aborted: false,
        _g: g,
    };
    s.run(0, 0);
    let exact = !s.aborted || s.best_k <= lower;
    let method = if exact && s.nodes == 0 {
        "exact: DSatur heuristic meets the clique lower bound".to_string()
    } else if exact {
        format!("exact: DSatur branch and bound ({} search nodes)", s.nodes)
    } else {
        format!(
            "heuristic: DSatur, branch and bound cut at {budget} nodes; lower bound from a \
             clique and the vertex count over the largest-set bound"
        )
    };
    let bound = if exact { s.best_k } else { lower };
    Colouring { colour: s.best, figure: Figure { value: s.best_k, bound, exact, method } }
}

/// Size of a maximum matching of the layout's coupler graph (an upper bound for any set of
/// couplers that can run together), by petgraph's blossom algorithm.
pub fn maximum_matching(layout: &Layout) -> usize {
    let mut g: UnGraph<(), ()> = UnGraph::with_capacity(layout.n_qubits(), layout.couplers.len());
    let nodes: Vec<NodeIndex> = (0..layout.n_qubits()).map(|_| g.add_node(())).collect();
    for &(a, b) in &layout.couplers {
        g.add_edge(nodes[a], nodes[b], ());
    }
    petgraph::algo::maximum_matching(&g).len()
}

// ---------------------------------------------------------------------------------------
// Conflicts from flagged pairs
// ---------------------------------------------------------------------------------------

/// Which verdicts count as flagged.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
pub enum FlagLevel {
    /// `watch` and `recalibrate`.
    #[default]
    Watch,
    /// Only `recalibrate`.
    Recalibrate,
}

impl FlagLevel {
    /// True when a verdict is at or above this level.
    pub fn admits(self, v: Verdict) -> bool {
        match self {
            FlagLevel::Watch => matches!(v, Verdict::Watch | Verdict::Recalibrate),
            FlagLevel::Recalibrate => v == Verdict::Recalibrate,
        }
    }

    /// The level's word.
    pub fn word(self) -> &'static str {
        match self {
            FlagLevel::Watch => "watch",
            FlagLevel::Recalibrate => "recalibrate",
        }
    }
}

/// A flagged direction: operations on `aggressor` disturb `victim`.
#[derive(Clone, Debug, PartialEq)]
pub struct FlaggedPair {
    /// The disturbed qubit.
    pub victim: QubitIx,
    /// The qubit whose operations disturb it.
    pub aggressor: QubitIx,
    /// The edge's verdict.
    pub verdict: Verdict,
    /// The directed score X(victim <- aggressor), TVD per layer.
    pub score_tvd_per_layer: f64,
}

/// Rebuilds a layout from an audit's summary (gates do not matter for scheduling hints).
pub fn layout_of(report: &AuditReport, path: &Path) -> Result<Layout> {
    let l = &report.layout;
    let qubits = l
        .qubits
        .iter()
        .enumerate()
        .map(|(i, id)| Qubit { id: id.clone(), position: l.positions.get(i).copied().flatten() })
        .collect();
    let couplers = l.couplers.iter().map(|[a, b]| (a.clone(), b.clone())).collect();
    Layout::new(l.name.clone(), qubits, couplers, generate::default_gates(), 1, Vec::new())
        .map_err(|m| Error::input(path, None, format!("layout in the audit: {m}")))
}

/// The flagged directions of an audit at a level. An edge at or above the level flags the
/// direction that gives its score (both on a tie) and any other direction whose own score
/// is positive and above its own detection limit.
pub fn flagged_pairs(
    report: &AuditReport,
    layout: &Layout,
    level: FlagLevel,
    path: &Path,
) -> Result<Vec<FlaggedPair>> {
    let lookup = |id: &str| {
        layout.qubit(id).ok_or_else(|| {
            Error::input(
                path,
                None,
                format!("edge names qubit '{id}', which the audit's layout lacks"),
            )
        })
    };
    let directed: BTreeMap<(&str, &str), (f64, f64)> = report
        .directed
        .iter()
        .map(|d| {
            (
                (d.victim.as_str(), d.aggressor.as_str()),
                (d.score_tvd_per_layer, d.detection_limit_tvd_per_layer),
            )
        })
        .collect();
    let mut out = Vec::new();
    for e in report.edges.iter().filter(|e| level.admits(e.verdict)) {
        let (a, b) = (lookup(&e.a)?, lookup(&e.b)?);
        let top = e.a_from_b_tvd_per_layer.max(e.b_from_a_tvd_per_layer);
        for (victim, aggressor, vid, aid, score) in [
            (a, b, &e.a, &e.b, e.a_from_b_tvd_per_layer),
            (b, a, &e.b, &e.a, e.b_from_a_tvd_per_layer),
        ] {
            let own = directed.get(&(vid.as_str(), aid.as_str()));
            let above_own_limit = own.is_some_and(|&(s, limit)| s > 0.0 && s > limit);
            if (score >= top && score > 0.0) || above_own_limit {
                out.push(FlaggedPair {
                    victim,
                    aggressor,
                    verdict: e.verdict,
                    score_tvd_per_layer: score,
                });
            }
        }
    }
    Ok(out)
}

/// A flagged gate direction: `aggressor` (a coupler's gate or a driven qubit) disturbs
/// `victim` (a coupler's gate or a qubit) when both run in one layer.
#[derive(Clone, Debug, PartialEq)]
pub struct FlaggedGatePair {
    /// The disturbed operation.
    pub victim: Operation,
    /// The operation that disturbs it.
    pub aggressor: Operation,
    /// The gate pair's verdict.
    pub verdict: Verdict,
    /// The directed score, TVD per layer.
    pub score_tvd_per_layer: f64,
}

/// The operation an audit's gate unit names: a coupler `a-b` for its two-qubit gate, a qubit
/// id for its one-qubit gates.
fn unit_operation(layout: &Layout, unit: &str, path: &Path) -> Result<Operation> {
    if let Some(q) = layout.qubit(unit) {
        return Ok(Operation::OneQubit(q));
    }
    unit.split_once('-')
        .and_then(|(a, b)| layout.coupler(layout.qubit(a)?, layout.qubit(b)?))
        .map(Operation::TwoQubit)
        .ok_or_else(|| {
            Error::input(
                path,
                None,
                format!(
                    "gate pair names '{unit}', which is neither a qubit nor a coupler of the audit's layout"
                ),
            )
        })
}

/// The flagged gate directions of an audit at a level, by the rule of [`flagged_pairs`]: a
/// pair at or above the level flags its leading direction and any other direction whose
/// score is positive and above its own detection limit.
pub fn flagged_gate_pairs(
    report: &AuditReport,
    layout: &Layout,
    level: FlagLevel,
    path: &Path,
) -> Result<Vec<FlaggedGatePair>> {
    let directed: BTreeMap<(&str, &str), (f64, f64)> = report
        .gates
        .directed
        .iter()
        .map(|d| {
            (
                (d.victim.as_str(), d.aggressor.as_str()),
                (d.score_tvd_per_layer, d.detection_limit_tvd_per_layer),
            )
        })
        .collect();
    let mut out = Vec::new();
    for e in report.gates.pairs.iter().filter(|e| level.admits(e.verdict)) {
        for (vid, aid) in [(&e.a, &e.b), (&e.b, &e.a)] {
            let Some(&(score, limit)) = directed.get(&(vid.as_str(), aid.as_str())) else {
                continue;
            };
            let leads = *vid == e.victim && *aid == e.aggressor;
            if score > 0.0 && (leads || score > limit) {
                out.push(FlaggedGatePair {
                    victim: unit_operation(layout, vid, path)?,
                    aggressor: unit_operation(layout, aid, path)?,
                    verdict: e.verdict,
                    score_tvd_per_layer: score,
                });
            }
        }
    }
    Ok(out)
}

/// An operation a scheduler places in a layer.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub enum Operation {
    /// A one-qubit gate on a qubit.
    OneQubit(QubitIx),
    /// The two-qubit gate on a coupler (index into `Layout::couplers`).
    TwoQubit(usize),
}

/// Two operations that should not share a layer, and the flagged directions that say so.
#[derive(Clone, Debug, PartialEq)]
pub struct Conflict {
    /// One operation (the smaller).
    pub a: Operation,
    /// The other operation.
    pub b: Operation,
    /// The (victim, aggressor) qubit pairs behind the conflict.
    pub because: Vec<(QubitIx, QubitIx)>,
    /// The flagged gate pairs behind it, as (victim, aggressor) operations.
    pub because_gates: Vec<(Operation, Operation)>,
}

/// The crosstalk conflict graph of a layout: every operation and the conflicts between
/// operations on disjoint qubits (operations sharing a qubit cannot share a layer anyway).
#[derive(Clone, Debug)]
pub struct ConflictGraph {
    /// The operations: one per qubit, then one per coupler.
    pub operations: Vec<Operation>,
    /// The conflicts, sorted by operation pair.
    pub conflicts: Vec<Conflict>,
    /// The same graph for graph algorithms: node i is `operations[i]`.
    pub graph: UnGraph<Operation, Vec<(QubitIx, QubitIx)>>,
}

fn qubits_of(layout: &Layout, op: Operation) -> Vec<QubitIx> {
    match op {
        Operation::OneQubit(q) => vec![q],
        Operation::TwoQubit(c) => {
            let (a, b) = layout.couplers[c];
            vec![a, b]
        }
    }
}

impl ConflictGraph {
    /// Builds the conflict graph from flagged (victim, aggressor) pairs; pairs naming a
    /// qubit outside the layout are ignored.
    pub fn new(layout: &Layout, flagged: &[(QubitIx, QubitIx)]) -> ConflictGraph {
        let n = layout.n_qubits();
        let touching = |q: QubitIx| {
            let mut ops = vec![Operation::OneQubit(q)];
            ops.extend(
                layout
                    .coupled(q)
                    .iter()
                    .filter_map(|&r| layout.coupler(q, r).map(Operation::TwoQubit)),
            );
            ops
        };
        let mut found: BTreeMap<(Operation, Operation), Vec<(QubitIx, QubitIx)>> = BTreeMap::new();
        for &(v, r) in flagged.iter().filter(|&&(v, r)| v < n && r < n && v != r) {
            for x in touching(r) {
                for y in touching(v) {
                    let (qx, qy) = (qubits_of(layout, x), qubits_of(layout, y));
                    if qx.iter().any(|q| qy.contains(q)) {
                        continue;
                    }
                    let key = (x.min(y), x.max(y));
                    let because = found.entry(key).or_default();
                    if !because.contains(&(v, r)) {
                        because.push((v, r));
                    }
                }
            }
        }
        let operations: Vec<Operation> = (0..n)
            .map(Operation::OneQubit)
            .chain((0..layout.couplers.len()).map(Operation::TwoQubit))
            .collect();
        let node = |op: Operation| match op {
            Operation::OneQubit(q) => q,
            Operation::TwoQubit(c) => n + c,
        };
        let mut graph = UnGraph::with_capacity(operations.len(), found.len());
        for &op in &operations {
            graph.add_node(op);
        }
        let mut conflicts = Vec::with_capacity(found.len());
        for ((a, b), mut because) in found {
            because.sort_unstable();
            graph.add_edge(NodeIndex::new(node(a)), NodeIndex::new(node(b)), because.clone());
            conflicts.push(Conflict { a, b, because, because_gates: Vec::new() });
        }
        ConflictGraph { operations, conflicts, graph }
    }

    /// Adds the conflicts of flagged gate pairs: the victim operation and the aggressor
    /// operation themselves must not share a layer (a gate beside a gate, a gate beside a
    /// driven qubit, a qubit beside a gate). Unlike a qubit edge, which forbids every
    /// operation on the aggressor beside every operation on the victim, a gate pair was
    /// measured for exactly these two operations. Pairs outside the layout are ignored.
    pub fn add_gate_pairs(&mut self, layout: &Layout, flagged: &[(Operation, Operation)]) {
        let n = layout.n_qubits();
        let valid = |op: Operation| match op {
            Operation::OneQubit(q) => q < n,
            Operation::TwoQubit(c) => c < layout.couplers.len(),
        };
        let node = |op: Operation| match op {
            Operation::OneQubit(q) => q,
            Operation::TwoQubit(c) => n + c,
        };
        for &(v, r) in flagged.iter().filter(|&&(v, r)| valid(v) && valid(r)) {
            let (qv, qr) = (qubits_of(layout, v), qubits_of(layout, r));
            if qv.iter().any(|q| qr.contains(q)) {
                continue;
            }
            let (a, b) = (v.min(r), v.max(r));
            match self.conflicts.binary_search_by(|c| (c.a, c.b).cmp(&(a, b))) {
                Ok(i) => {
                    let c = &mut self.conflicts[i];
                    if !c.because_gates.contains(&(v, r)) {
                        c.because_gates.push((v, r));
                        c.because_gates.sort_unstable();
                    }
                }
                Err(i) => {
                    self.graph.add_edge(
                        NodeIndex::new(node(a)),
                        NodeIndex::new(node(b)),
                        Vec::new(),
                    );
                    self.conflicts.insert(
                        i,
                        Conflict { a, b, because: Vec::new(), because_gates: vec![(v, r)] },
                    );
                }
            }
        }
    }

    /// The coupler graph a scheduler must colour: couplers joined when they share a qubit
    /// and, with `with_conflicts`, when their two-qubit gates conflict.
    pub fn coupler_graph(&self, layout: &Layout, with_conflicts: bool) -> BitGraph {
        let m = layout.couplers.len();
        let mut g = BitGraph::new(m);
        for i in 0..m {
            for j in i + 1..m {
                let (a, b) = layout.couplers[i];
                let (c, d) = layout.couplers[j];
                if a == c || a == d || b == c || b == d {
                    g.add_edge(i, j);
                }
            }
        }
        if with_conflicts {
            for c in &self.conflicts {
                if let (Operation::TwoQubit(x), Operation::TwoQubit(y)) = (c.a, c.b) {
                    g.add_edge(x, y);
                }
            }
        }
        g
    }

    /// The qubit graph for one-qubit layers: qubits joined when their gates conflict.
    pub fn qubit_graph(&self, layout: &Layout, with_conflicts: bool) -> BitGraph {
        let mut g = BitGraph::new(layout.n_qubits());
        if with_conflicts {
            for c in &self.conflicts {
                if let (Operation::OneQubit(x), Operation::OneQubit(y)) = (c.a, c.b) {
                    g.add_edge(x, y);
                }
            }
        }
        g
    }
}

/// The layout's crosstalk-aware parallelism, with or without the flagged conflicts.
#[derive(Clone, Debug)]
pub struct Parallelism {
    /// Largest set of couplers whose two-qubit gates can share one layer.
    pub largest_coupler_set: IndependentSet,
    /// Layers to run every coupler once, and the coupler groups (one per layer).
    pub coupler_layers: Colouring,
    /// Layers to run a one-qubit gate on every qubit once, and the qubit groups.
    pub qubit_layers: Colouring,
}

/// Computes the parallelism figures of a layout under a conflict graph.
pub fn parallelism(
    layout: &Layout,
    conflicts: &ConflictGraph,
    with_conflicts: bool,
    budget: u64,
) -> Parallelism {
    let cg = conflicts.coupler_graph(layout, with_conflicts);
    let matching = maximum_matching(layout);
    let largest = max_independent_set(&cg, Some(matching), budget);
    // Every coupler at a qubit needs its own layer, and no layer holds more couplers than
    // the largest set can.
    let per_set = cg.len().div_ceil(largest.figure.bound.max(1));
    let coupler_layers = min_colouring(&cg, layout.max_degree().max(per_set), budget);
    let qg = conflicts.qubit_graph(layout, with_conflicts);
    let qubit_layers = min_colouring(&qg, usize::from(!qg.is_empty()), budget);
    Parallelism { largest_coupler_set: largest, coupler_layers, qubit_layers }
}

// ---------------------------------------------------------------------------------------
// hints.json: the wire format
// ---------------------------------------------------------------------------------------

/// What `hints.json` holds: the conflict graph, the parallel groups and the figures.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq, JsonSchema)]
pub struct HintsReport {
    /// Format version, [`SCHEMA`].
    pub schema: u32,
    /// The slackmap version that wrote the file.
    pub tool_version: String,
    /// The audit file the hints come from.
    pub audit: String,
    /// Layout name.
    pub layout: String,
    /// Verdict level counted as flagged: `watch` (watch and recalibrate) or `recalibrate`.
    pub flagged_level: String,
    /// The flagged directions behind the conflicts.
    pub flagged: Vec<FlaggedEntry>,
    /// The flagged gate directions behind the conflicts, each with the rule it sets
    /// (absent when the audit flagged no gate pair).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub flagged_gate_pairs: Vec<FlaggedGateEntry>,
    /// Every operation: one-qubit gates by qubit id (`q3`), two-qubit gates by coupler
    /// (`q3-q4`).
    pub operations: Vec<OperationEntry>,
    /// Pairs of operations that should not share a layer because of crosstalk.
    pub conflicts: Vec<ConflictEntry>,
    /// Coupler groups: the couplers of one group share no qubit and no conflict, so a
    /// scheduler can run one group per layer. With the flagged conflicts.
    pub coupler_groups: Vec<Vec<String>>,
    /// Qubit groups for one-qubit layers, with the flagged conflicts.
    pub qubit_groups: Vec<Vec<String>>,
    /// The largest set of couplers that can share one layer, with the flagged conflicts.
    pub largest_coupler_set: Vec<String>,
    /// The figures with the flagged conflicts.
    pub with_conflicts: Figures,
    /// The figures of the bare layout (no crosstalk conflicts).
    pub without_conflicts: Figures,
}

/// One flagged direction.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq, JsonSchema)]
pub struct FlaggedEntry {
    /// Victim qubit id.
    pub victim: String,
    /// Aggressor qubit id.
    pub aggressor: String,
    /// The edge's verdict.
    pub verdict: Verdict,
    /// Directed score X(victim <- aggressor), TVD per layer.
    pub score_tvd_per_layer: f64,
}

/// One flagged gate direction.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq, JsonSchema)]
pub struct FlaggedGateEntry {
    /// Victim operation id: a coupler `a-b` (its two-qubit gate) or a qubit id.
    pub victim: String,
    /// Aggressor operation id.
    pub aggressor: String,
    /// The gate pair's verdict.
    pub verdict: Verdict,
    /// Directed score, TVD per layer.
    pub score_tvd_per_layer: f64,
    /// The scheduling rule in words, e.g. `cz q5-q6 and cz q9-q10 must not share a layer`.
    pub rule: String,
}

/// One operation.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq, JsonSchema)]
pub struct OperationEntry {
    /// Operation id: a qubit id for a one-qubit gate, `a-b` for a coupler's two-qubit gate.
    pub id: String,
    /// `one-qubit` or `two-qubit`.
    pub kind: String,
    /// The qubits it acts on.
    pub qubits: Vec<String>,
}

/// One conflict.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq, JsonSchema)]
pub struct ConflictEntry {
    /// First operation id.
    pub a: String,
    /// Second operation id.
    pub b: String,
    /// The flagged directions behind it, as `victim<-aggressor` (qubits for an edge,
    /// operations for a gate pair).
    pub because: Vec<String>,
}

/// The parallelism figures of one setting.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq, JsonSchema)]
pub struct Figures {
    /// Most couplers whose two-qubit gates can share one layer (bound: upper).
    pub largest_coupler_set: Figure,
    /// Layers to run every coupler's two-qubit gate once (bound: lower).
    pub layers_for_all_couplers: Figure,
    /// Layers to run a one-qubit gate on every qubit once (bound: lower).
    pub layers_for_all_qubits: Figure,
}

/// Everything `hints` computes for one audit.
#[derive(Clone, Debug)]
pub struct Hints {
    /// The rebuilt layout.
    pub layout: Layout,
    /// The flagged directions.
    pub flagged: Vec<FlaggedPair>,
    /// The flagged gate directions.
    pub flagged_gates: Vec<FlaggedGatePair>,
    /// The name of the layout's two-qubit gate, as the audit wrote it (`cz`).
    pub two_qubit_gate: String,
    /// The conflict graph.
    pub conflicts: ConflictGraph,
    /// Figures and groups with the flagged conflicts.
    pub with_conflicts: Parallelism,
    /// Figures and groups of the bare layout.
    pub without_conflicts: Parallelism,
}

/// Reads nothing, prints nothing: the hints of one audit at a flag level.
pub fn hints(report: &AuditReport, path: &Path, level: FlagLevel, budget: u64) -> Result<Hints> {
    let layout = layout_of(report, path)?;
    let flagged = flagged_pairs(report, &layout, level, path)?;
    let flagged_gates = flagged_gate_pairs(report, &layout, level, path)?;
    let pairs: Vec<(QubitIx, QubitIx)> = flagged.iter().map(|f| (f.victim, f.aggressor)).collect();
    let mut conflicts = ConflictGraph::new(&layout, &pairs);
    let gate_pairs: Vec<(Operation, Operation)> =
        flagged_gates.iter().map(|f| (f.victim, f.aggressor)).collect();
    conflicts.add_gate_pairs(&layout, &gate_pairs);
    let with_conflicts = parallelism(&layout, &conflicts, true, budget);
    let without_conflicts = parallelism(&layout, &conflicts, false, budget);
    let two_qubit_gate =
        report.gates.pairs.iter().find_map(|e| e.a_gate.clone()).unwrap_or_else(|| {
            let names: Vec<String> = layout.all_natives().iter().map(ToString::to_string).collect();
            names.join("/")
        });
    Ok(Hints {
        layout,
        flagged,
        flagged_gates,
        two_qubit_gate,
        conflicts,
        with_conflicts,
        without_conflicts,
    })
}

fn op_id(layout: &Layout, op: Operation) -> String {
    match op {
        Operation::OneQubit(q) => layout.id(q).to_string(),
        Operation::TwoQubit(c) => {
            let (a, b) = layout.couplers[c];
            format!("{}-{}", layout.id(a), layout.id(b))
        }
    }
}

/// An operation in a rule: `cz q5-q6` for a coupler's gate, `q7` for a qubit.
fn op_words(layout: &Layout, gate: &str, op: Operation) -> String {
    match op {
        Operation::OneQubit(_) => op_id(layout, op),
        Operation::TwoQubit(_) => format!("{gate} {}", op_id(layout, op)),
    }
}

/// The causes of a conflict as `victim<-aggressor`: qubit edges, then gate pairs.
fn because_words(layout: &Layout, c: &Conflict) -> Vec<String> {
    c.because
        .iter()
        .map(|&(v, r)| format!("{}<-{}", layout.id(v), layout.id(r)))
        .chain(
            c.because_gates
                .iter()
                .map(|&(v, r)| format!("{}<-{}", op_id(layout, v), op_id(layout, r))),
        )
        .collect()
}

fn figures(p: &Parallelism) -> Figures {
    Figures {
        largest_coupler_set: p.largest_coupler_set.figure.clone(),
        layers_for_all_couplers: p.coupler_layers.figure.clone(),
        layers_for_all_qubits: p.qubit_layers.figure.clone(),
    }
}

impl Hints {
    /// The wire form written to `hints.json`.
    pub fn report(&self, audit: &str, level: FlagLevel) -> HintsReport {
        let l = &self.layout;
        let coupler = |c: usize| op_id(l, Operation::TwoQubit(c));
        HintsReport {
            schema: SCHEMA,
            tool_version: env!("CARGO_PKG_VERSION").to_string(),
            audit: audit.to_string(),
            layout: l.name.clone(),
            flagged_level: level.word().to_string(),
            flagged: self
                .flagged
                .iter()
                .map(|f| FlaggedEntry {
                    victim: l.id(f.victim).to_string(),
                    aggressor: l.id(f.aggressor).to_string(),
                    verdict: f.verdict,
                    score_tvd_per_layer: f.score_tvd_per_layer,
                })
                .collect(),
            flagged_gate_pairs: self
                .flagged_gates
                .iter()
                .map(|f| FlaggedGateEntry {
                    victim: op_id(l, f.victim),
                    aggressor: op_id(l, f.aggressor),
                    verdict: f.verdict,
                    score_tvd_per_layer: f.score_tvd_per_layer,
                    rule: format!(
                        "{} and {} must not share a layer",
                        op_words(l, &self.two_qubit_gate, f.victim),
                        op_words(l, &self.two_qubit_gate, f.aggressor)
                    ),
                })
                .collect(),
            operations: self
                .conflicts
                .operations
                .iter()
                .map(|&op| OperationEntry {
                    id: op_id(l, op),
                    kind: match op {
                        Operation::OneQubit(_) => "one-qubit".into(),
                        Operation::TwoQubit(_) => "two-qubit".into(),
                    },
                    qubits: qubits_of(l, op).into_iter().map(|q| l.id(q).to_string()).collect(),
                })
                .collect(),
            conflicts: self
                .conflicts
                .conflicts
                .iter()
                .map(|c| ConflictEntry {
                    a: op_id(l, c.a),
                    b: op_id(l, c.b),
                    because: because_words(l, c),
                })
                .collect(),
            coupler_groups: self
                .with_conflicts
                .coupler_layers
                .classes()
                .into_iter()
                .map(|g| g.into_iter().map(coupler).collect())
                .collect(),
            qubit_groups: self
                .with_conflicts
                .qubit_layers
                .classes()
                .into_iter()
                .map(|g| g.into_iter().map(|q| l.id(q).to_string()).collect())
                .collect(),
            largest_coupler_set: self
                .with_conflicts
                .largest_coupler_set
                .members
                .iter()
                .map(|&c| coupler(c))
                .collect(),
            with_conflicts: figures(&self.with_conflicts),
            without_conflicts: figures(&self.without_conflicts),
        }
    }

    /// The conflict graph in Graphviz DOT: qubits as circles and couplers as boxes at the
    /// layout's positions (for `neato -n`), conflicts as red edges labelled with their cause.
    pub fn dot(&self) -> String {
        let l = &self.layout;
        let mut s = String::new();
        let _ = writeln!(s, "graph conflicts {{");
        let _ = writeln!(s, "  label=\"crosstalk conflicts on {}\";", escape(&l.name));
        let _ = writeln!(s, "  node [fontsize=10];");
        let pos = |q: QubitIx| l.qubits[q].position;
        for &op in &self.conflicts.operations {
            let id = escape(&op_id(l, op));
            let (shape, at) = match op {
                Operation::OneQubit(q) => ("circle", pos(q)),
                Operation::TwoQubit(c) => {
                    let (a, b) = l.couplers[c];
                    let mid =
                        pos(a).zip(pos(b)).map(|(p, r)| [(p[0] + r[0]) / 2.0, (p[1] + r[1]) / 2.0]);
                    ("box", mid)
                }
            };
            let place = at
                .map(|p| format!(", pos=\"{:.1},{:.1}!\"", p[0] * 100.0, -p[1] * 100.0))
                .unwrap_or_default();
            let _ = writeln!(s, "  \"{id}\" [shape={shape}{place}];");
        }
        for c in &self.conflicts.conflicts {
            let because = because_words(l, c);
            let _ = writeln!(
                s,
                "  \"{}\" -- \"{}\" [color=red, label=\"{}\"];",
                escape(&op_id(l, c.a)),
                escape(&op_id(l, c.b)),
                escape(&because.join(" "))
            );
        }
        let _ = writeln!(s, "}}");
        s
    }
}

fn escape(s: &str) -> String {
    s.replace('\\', "\\\\").replace('"', "\\\"")
}

/// A table row: its name, how to pick the figure, and the word for its bound.
type FigureRow = (&'static str, fn(&Figures) -> &Figure, &'static str);

fn figure_rows() -> [FigureRow; 3] {
    [
        ("most couplers in one layer", |f| &f.largest_coupler_set, "at most"),
        ("layers to run every coupler once", |f| &f.layers_for_all_couplers, "at least"),
        ("layers to run every qubit once", |f| &f.layers_for_all_qubits, "at least"),
    ]
}

fn figure_cell(f: &Figure, bound_word: &str) -> TextCell {
    if f.exact {
        number(format!("{} (exact)", f.value))
    } else {
        number(format!("{} ({bound_word} {})", f.value, f.bound))
    }
}

/// The terminal table of one audit's hints, fitted to the style's width.
pub fn terminal(h: &HintsReport, style: Style) -> String {
    let mut cols = columns(&[("", 0), ("bare layout", 0), ("with flagged\nconflicts", 0)]);
    for (name, get, word) in figure_rows() {
        push_row(
            &mut cols,
            [
                text(name),
                figure_cell(get(&h.without_conflicts), word),
                figure_cell(get(&h.with_conflicts), word),
            ],
        );
    }
    let mut out = terminal::heading(
        &format!(
                "Scheduling hints for layout {} from {} ({} flagged directions at level {}, {} conflicts)",
                h.layout,
                h.audit,
                h.flagged.len(),
                h.flagged_level,
                h.conflicts.len()
            ),
        style,
    );
    terminal::fitted_table(cols, style, "hints.json", &mut out);
    if !h.flagged_gate_pairs.is_empty() {
        let _ = writeln!(out, "{}", terminal::bold("Flagged gate pairs", style));
        for f in &h.flagged_gate_pairs {
            out.push_str(&terminal::wrap(
                &format!(
                    "- {} ({} <- {}, {}, {} x1e-3 per layer)",
                    f.rule,
                    f.victim,
                    f.aggressor,
                    f.verdict.word(),
                    terminal::per_mille(f.score_tvd_per_layer)
                ),
                style.width,
                "  ",
            ));
        }
    }
    out
}

/// Two audits' hints side by side ("which layout should we schedule on").
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq, JsonSchema)]
pub struct HintsComparison {
    /// Format version, [`SCHEMA`].
    pub schema: u32,
    /// The first audit's hints.
    pub a: HintsReport,
    /// The second audit's hints.
    pub b: HintsReport,
}

/// The terminal table of two audits' hints, fitted to the style's width.
pub fn terminal_compare(c: &HintsComparison, style: Style) -> String {
    let mut cols = columns(&[
        ("", 0),
        (&format!("A: {}\nbare", c.a.layout), 0),
        (&format!("A: {}\nflagged", c.a.layout), 0),
        (&format!("B: {}\nbare", c.b.layout), 0),
        (&format!("B: {}\nflagged", c.b.layout), 0),
    ]);
    for (name, get, word) in figure_rows() {
        push_row(
            &mut cols,
            [
                text(name),
                figure_cell(get(&c.a.without_conflicts), word),
                figure_cell(get(&c.a.with_conflicts), word),
                figure_cell(get(&c.b.without_conflicts), word),
                figure_cell(get(&c.b.with_conflicts), word),
            ],
        );
    }
    push_row(
        &mut cols,
        [
            text("flagged directions / conflicts"),
            text(""),
            number(format!("{} / {}", c.a.flagged.len(), c.a.conflicts.len())),
            text(""),
            number(format!("{} / {}", c.b.flagged.len(), c.b.conflicts.len())),
        ],
    );
    let mut out = terminal::wrap(
        &format!("A = {}, B = {} (flag level {})", c.a.audit, c.b.audit, c.a.flagged_level),
        style.width,
        "",
    );
    terminal::fitted_table(cols, style, "hints-compare.json", &mut out);
    out
}

/// The files `hints` writes for one audit: `hints.json` and `conflicts.dot`.
pub fn files(h: &Hints, report: &HintsReport) -> Vec<(String, Vec<u8>)> {
    vec![("hints.json".into(), json_bytes(report)), ("conflicts.dot".into(), h.dot().into_bytes())]
}

/// Pretty JSON with a final newline.
pub fn json_bytes<T: Serialize>(v: &T) -> Vec<u8> {
    let mut out = serde_json::to_vec_pretty(v).unwrap_or_default();
    out.push(b'\n');
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::layout::generate::{chain, grid, ring};
    use proptest::prelude::*;

    fn bare(layout: &Layout) -> Parallelism {
        let cg = ConflictGraph::new(layout, &[]);
        parallelism(layout, &cg, true, DEFAULT_BUDGET)
    }

    #[test]
    fn bipartite_layouts_need_max_degree_layers() {
        // Konig's line colouring theorem (1916; Diestel, Graph Theory, Prop. 5.3.1): a
        // bipartite graph's edges colour with max-degree colours.
        for (layout, want) in
            [(grid(4, 4), 4), (grid(3, 5), 4), (ring(8), 2), (chain(6), 2), (grid(2, 3), 3)]
        {
            let p = bare(&layout);
            assert_eq!(p.coupler_layers.figure.value, want, "{}", layout.name);
            assert!(p.coupler_layers.figure.exact, "{}", layout.name);
            assert_eq!(layout.max_degree(), want);
            let cg = ConflictGraph::new(&layout, &[]).coupler_graph(&layout, true);
            assert!(cg.is_proper(&p.coupler_layers.colour));
        }
    }

    #[test]
    fn odd_rings_need_three_layers() {
        // An odd cycle's chromatic index is 3 (Diestel, Graph Theory, section 5.3).
        for n in [3, 5, 7, 9] {
            let p = bare(&ring(n));
            assert_eq!(p.coupler_layers.figure.value, 3, "ring-{n}");
            assert!(p.coupler_layers.figure.exact);
        }
    }

    #[test]
    fn largest_coupler_sets_are_maximum_matchings() {
        // A cycle on 2n vertices has a perfect matching of n edges; a path on n vertices and
        // an odd cycle on n vertices have floor(n/2); an r x c grid with rc even has a
        // perfect matching, rc/2 (graph theory facts, e.g. Lovasz & Plummer, Matching Theory).
        for (layout, want) in [
            (ring(8), 4),
            (ring(12), 6),
            (ring(7), 3),
            (chain(7), 3),
            (grid(4, 4), 8),
            (grid(3, 3), 4),
            (grid(3, 4), 6),
        ] {
            let p = bare(&layout);
            assert_eq!(p.largest_coupler_set.figure.value, want, "{}", layout.name);
            assert!(p.largest_coupler_set.figure.exact);
            assert_eq!(maximum_matching(&layout), want);
        }
    }

    #[test]
    fn a_flagged_pair_forbids_operations_on_both_ends_together() {
        // chain q0-q1-q2-q3 with q2 disturbing q0: every operation touching q2 conflicts
        // with every operation touching q0 that shares no qubit with it.
        let l = chain(4);
        let g = ConflictGraph::new(&l, &[(0, 2)]);
        let has = |x, y| g.conflicts.iter().any(|c| (c.a, c.b) == (x, y) || (c.a, c.b) == (y, x));
        assert!(has(Operation::OneQubit(0), Operation::OneQubit(2)));
        // q0 with coupler q2-q3 (index 2) conflicts; coupler q0-q1 with coupler q2-q3 too.
        assert!(has(Operation::OneQubit(0), Operation::TwoQubit(2)));
        assert!(has(Operation::TwoQubit(0), Operation::TwoQubit(2)));
        // coupler q1-q2 shares no qubit with q0 and touches the aggressor.
        assert!(has(Operation::OneQubit(0), Operation::TwoQubit(1)));
        // q1 and q3 are not involved.
        assert!(!has(Operation::OneQubit(1), Operation::OneQubit(3)));
        // The bare chain runs in 2 layers and 2 couplers at once; the conflict between the
        // outer couplers leaves 1 coupler per layer for them, so 3 layers.
        let with = parallelism(&l, &g, true, DEFAULT_BUDGET);
        assert_eq!(with.coupler_layers.figure.value, 3);
        assert_eq!(with.largest_coupler_set.figure.value, 1);
        assert_eq!(with.qubit_layers.figure.value, 2);
        assert_eq!(graph_edges(&g), g.conflicts.len());
    }

    fn graph_edges(g: &ConflictGraph) -> usize {
        g.graph.edge_count()
    }

    fn brute_alpha(g: &BitGraph) -> usize {
        (0u32..1 << g.len())
            .filter(|m| {
                let set: Vec<usize> = (0..g.len()).filter(|&v| m >> v & 1 == 1).collect();
                g.is_independent(&set)
            })
            .map(|m| m.count_ones() as usize)
            .max()
            .unwrap_or(0)
    }

    fn brute_chi(g: &BitGraph) -> usize {
        if g.is_empty() {
            return 0;
        }
        (1..=g.len())
            .find(|&k| {
                let total = k.pow(g.len() as u32);
                (0..total).any(|mut code| {
                    let colour: Vec<usize> = (0..g.len())
                        .map(|_| {
                            let c = code % k;
                            code /= k;
                            c
                        })
                        .collect();
                    g.is_proper(&colour)
                })
            })
            .unwrap_or(g.len())
    }

    fn random_graph(n: usize, edges: &[(usize, usize)]) -> BitGraph {
        let mut g = BitGraph::new(n);
        for &(a, b) in edges {
            g.add_edge(a % n, b % n);
        }
        g
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(48))]

        #[test]
        fn searches_agree_with_brute_force(n in 1usize..8, edges in proptest::collection::vec((0usize..8, 0usize..8), 0..20)) {
            let g = random_graph(n, &edges);
            let mis = max_independent_set(&g, None, DEFAULT_BUDGET);
            prop_assert!(mis.figure.exact);
            prop_assert!(g.is_independent(&mis.members));
            prop_assert_eq!(mis.figure.value, brute_alpha(&g));
            let col = min_colouring(&g, 1, DEFAULT_BUDGET);
            prop_assert!(col.figure.exact);
            prop_assert!(g.is_proper(&col.colour));
            prop_assert_eq!(col.figure.value, brute_chi(&g));
        }

        #[test]
        fn a_conflict_never_lowers_the_layer_count(
            shape in 0usize..3,
            pairs in proptest::collection::vec((0usize..12, 0usize..12), 1..5),
        ) {
            let layout = match shape { 0 => grid(3, 3), 1 => ring(7), _ => chain(8) };
            let n = layout.n_qubits();
            let pairs: Vec<(usize, usize)> = pairs.into_iter().map(|(a, b)| (a % n, b % n)).collect();
            let mut before = bare(&layout);
            for k in 1..=pairs.len() {
                let g = ConflictGraph::new(&layout, &pairs[..k]);
                let after = parallelism(&layout, &g, true, DEFAULT_BUDGET);
                prop_assert!(after.coupler_layers.figure.exact && after.largest_coupler_set.figure.exact);
                prop_assert!(after.coupler_layers.figure.value >= before.coupler_layers.figure.value);
                prop_assert!(after.largest_coupler_set.figure.value <= before.largest_coupler_set.figure.value);
                prop_assert!(after.qubit_layers.figure.value >= before.qubit_layers.figure.value);
                // Groups are valid schedules: no shared qubit, no conflict inside a group.
                let cg = g.coupler_graph(&layout, true);
                prop_assert!(cg.is_proper(&after.coupler_layers.colour));
                prop_assert!(cg.is_independent(&after.largest_coupler_set.members));
                prop_assert!(g.qubit_graph(&layout, true).is_proper(&after.qubit_layers.colour));
                before = after;
            }
        }
    }

    #[test]
    fn a_spent_budget_reports_a_heuristic_with_a_bound() {
        let layout = grid(6, 6);
        let pairs: Vec<(usize, usize)> = (0..30).map(|i| (i, i + 6)).collect();
        let g = ConflictGraph::new(&layout, &pairs);
        let p = parallelism(&layout, &g, true, 3);
        let s = &p.largest_coupler_set.figure;
        assert!(s.value <= s.bound);
        let c = &p.coupler_layers.figure;
        assert!(c.value >= c.bound);
        if !c.exact {
            assert!(c.method.starts_with("heuristic"));
        }
        assert!(g.coupler_graph(&layout, true).is_proper(&p.coupler_layers.colour));
    }
}
