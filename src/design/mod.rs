//! Experiment design: the circuits to run so that every operation has reference rows and
//! every neighbour relation has context rows (method.md section 7).
//!
//! [`design`] packs reference, pair, all-active and all-idle contexts into patterns
//! ([`patterns`]), fills every block with independent sequences ([`sequences`]) and shuffles
//! the run order; [`write_design`] writes the files. Randomized sequences follow randomized
//! benchmarking (Magesan, Gambetta, Emerson, PRL 106, 180504 (2011); simultaneous
//! randomized benchmarking, arXiv 1204.6308); repeated ones amplify small coherent errors
//! (common practice).

use rand::seq::SliceRandom;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;

use crate::circuit::{Circuit, CircuitSet};
use crate::error::{echo, Error, Result};
use crate::layout::Layout;
use crate::limits::{check_memory, Limits, OVERRIDE_HINT};

mod output;
pub mod patterns;
pub mod sequences;

pub use output::{manifest_csv, write_blueprint, write_design, MANIFEST_HEADER};
pub use patterns::{BlockSpec, Context, Pattern};
pub use sequences::{Ideal, Kind};

/// What to generate. Invariants (checked by [`DesignConfig::new`]): at least one depth, all
/// depths at least 1, at least one sequence, at least one kind, no duplicates.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct DesignConfig {
    /// Sequence lengths: Cliffords (randomized) or cycle repetitions (repeated).
    pub depths: Vec<usize>,
    /// Independent randomized sequences per depth and pattern (repeated sequences are
    /// deterministic and written once).
    pub sequences: usize,
    /// Seed of every random choice.
    pub seed: u64,
    /// Kinds of sequence.
    pub kinds: Vec<Kind>,
    /// Size limits (depth, sequences, circuits, bytes of the files); see [`Limits`].
    pub limits: Limits,
    /// Which gate-pair and gate-qubit patterns ([`patterns::gate_patterns`]) follow the
    /// standard ones; the standard circuits stay as they are whatever it is.
    pub gate_pairs: GateSelection,
}

/// The gate contexts a design adds (`design --gate-pairs`).
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub enum GateSelection {
    /// None: the standard design.
    #[default]
    None,
    /// Every gate pair and every coupler beside every nearby qubit.
    All,
    /// Only the gate pairs whose two couplers are both listed, and the listed couplers beside
    /// their nearby qubits ([`patterns::gate_patterns_among`]); an item `a-b/c-d` lists that
    /// one gate pair alone (no gate-qubit units). Couplers are named `a-b` as given; they are
    /// resolved against the layout when the design is built.
    Couplers(Vec<String>),
}

impl GateSelection {
    /// Reads `all` or a comma-separated list of couplers `a-b` and gate pairs `a-b/c-d` (the
    /// layout is checked later, by [`GateSelection::couplers`]).
    pub fn parse(text: &str) -> Result<GateSelection> {
        let text = text.trim();
        if text == "all" {
            return Ok(GateSelection::All);
        }
        let names: Vec<String> = text.split(',').map(|c| c.trim().to_string()).collect();
        let bad = |n: &str| n.split('/').count() > 2 || n.split('/').any(|c| !c.contains('-'));
        if names.iter().any(|n| bad(n)) {
            return Err(Error::Usage(format!(
                "--gate-pairs '{}': give 'all' or couplers as two qubit ids joined by '-', comma \
                 separated (e.g. q5-q6,q9-q10), or single gate pairs as two couplers joined by \
                 '/' (e.g. q5-q6/q9-q10)",
                echo(text)
            )));
        }
        Ok(GateSelection::Couplers(names))
    }

    /// True when the design adds gate contexts.
    pub fn any(&self) -> bool {
        *self != GateSelection::None
    }

    /// The listed couplers and gate pairs as indices into `layout.couplers` (sorted, each
    /// once); None for `None` and `All`. Fails on a name that is no coupler of the layout and
    /// on a listed pair that is no gate pair.
    #[allow(clippy::type_complexity)]
    pub fn couplers(&self, layout: &Layout) -> Result<Option<(Vec<usize>, Vec<(usize, usize)>)>> {
        let GateSelection::Couplers(names) = self else { return Ok(None) };
        let find = |n: &str| {
            patterns::coupler_by_name(layout, n).ok_or_else(|| {
                let example: Vec<String> = layout
                    .couplers
                    .iter()
                    .take(3)
                    .map(|&(a, b)| format!("{}-{}", layout.id(a), layout.id(b)))
                    .collect();
                Error::Usage(format!(
                    "--gate-pairs: '{}' is not a coupler of layout '{}' (name a coupler by its \
                     two qubit ids joined by '-', e.g. {})",
                    echo(n),
                    echo(&layout.name),
                    example.join(", ")
                ))
            })
        };
        let (mut couplers, mut pairs) = (Vec::new(), Vec::new());
        let near = patterns::gate_pairs(layout);
        for n in names {
            match n.split_once('/') {
                None => couplers.push(find(n)?),
                Some((x, y)) => {
                    let (i, j) = (find(x)?, find(y)?);
                    let pair = (i.min(j), i.max(j));
                    if !near.contains(&pair) {
                        return Err(Error::Usage(format!(
                            "--gate-pairs: '{}' is no gate pair of layout '{}': its couplers \
                             must share no qubit and have neighbouring ends",
                            echo(n),
                            echo(&layout.name)
                        )));
                    }
                    pairs.push(pair);
                }
            }
        }
        couplers.sort_unstable();
        couplers.dedup();
        pairs.sort_unstable();
        pairs.dedup();
        Ok(Some((couplers, pairs)))
    }

    /// The gate patterns this selection adds on `layout`.
    pub fn patterns(&self, layout: &Layout) -> Result<Vec<Pattern>> {
        Ok(match (self, self.couplers(layout)?) {
            (GateSelection::None, _) => Vec::new(),
            (_, Some((c, p))) => patterns::gate_patterns_among(layout, &c, &p),
            (_, None) => patterns::gate_patterns(layout),
        })
    }
}

impl DesignConfig {
    /// The default depths.
    pub const DEFAULT_DEPTHS: [usize; 4] = [1, 4, 16, 64];

    /// Validates a configuration (under the default limits; see
    /// [`DesignConfig::with_limits`]).
    pub fn new(
        depths: Vec<usize>,
        sequences: usize,
        seed: u64,
        kinds: Vec<Kind>,
    ) -> Result<DesignConfig> {
        if depths.is_empty() || depths.contains(&0) {
            return Err(Error::Usage(format!(
                "depths {depths:?}: give at least one depth, each at least 1 (e.g. 1,4,16,64)"
            )));
        }
        let mut d = depths.clone();
        d.sort_unstable();
        d.dedup();
        if d.len() != depths.len() {
            return Err(Error::Usage(format!("depths {depths:?}: each depth once")));
        }
        if sequences == 0 {
            return Err(Error::Usage("sequences must be at least 1".into()));
        }
        let mut k = kinds.clone();
        k.sort_unstable();
        k.dedup();
        if k.is_empty() {
            return Err(Error::Usage(
                "give at least one kind (randomized, repeated-x, repeated-z)".into(),
            ));
        }
        Ok(DesignConfig {
            depths,
            sequences,
            seed,
            kinds: k,
            limits: Limits::DEFAULT,
            gate_pairs: GateSelection::None,
        })
    }

    /// The same configuration under other limits (checked when the design is built).
    pub fn with_limits(self, limits: Limits) -> DesignConfig {
        DesignConfig { limits, ..self }
    }

    /// The same configuration with these gate-pair and gate-qubit patterns.
    pub fn with_gate_pairs(self, gate_pairs: GateSelection) -> DesignConfig {
        DesignConfig { gate_pairs, ..self }
    }

    /// Fails when a depth or the sequence count is above its limit.
    fn check_limits(&self) -> Result<()> {
        for &d in &self.depths {
            let what = "(Cliffords or cycles per sequence)";
            self.limits.check("--depths", d as u64, Limits::DEPTH, what)?;
        }
        let n = self.sequences as u64;
        self.limits.check("--sequences", n, Limits::SEQUENCES, "(per depth and pattern)")
    }

    fn sequences_of(&self, kind: Kind) -> usize {
        match kind {
            Kind::Randomized => self.sequences,
            Kind::RepeatedX | Kind::RepeatedZ => 1,
        }
    }

    /// Circuits per pattern (at least 1), or None past u64.
    fn per_pattern(&self) -> Option<u64> {
        self.kinds.iter().try_fold(0u64, |sum, &k| {
            (self.depths.len() as u64).checked_mul(self.sequences_of(k) as u64)?.checked_add(sum)
        })
    }
}

/// One manifest row: what a circuit is for and what it should ideally give.
#[derive(Clone, Debug, PartialEq)]
pub struct ManifestRow {
    /// The circuit id.
    pub id: String,
    /// Index into [`Design::patterns`].
    pub pattern: usize,
    /// The pattern's context.
    pub context: Context,
    /// The sequence kind (for all-idle circuits: the kind whose length they match).
    pub kind: Kind,
    /// The depth.
    pub depth: usize,
    /// The sequence index at this depth (0-based).
    pub sequence: usize,
    /// Active blocks.
    pub active_blocks: Vec<BlockSpec>,
    /// Ideal outcome over the measured qubits (character i = measured qubit i) when it is
    /// deterministic.
    pub ideal_outcome: Option<String>,
    /// Ideal P(1) per measured qubit.
    pub ideal_p1: Vec<f64>,
}

/// A generated design. `manifest[i]` describes `circuits.circuits[i]`; both are in run order.
#[derive(Clone, Debug)]
pub struct Design {
    /// The circuits, in the (shuffled) run order.
    pub circuits: CircuitSet,
    /// One row per circuit, aligned with `circuits`.
    pub manifest: Vec<ManifestRow>,
    /// The distinct patterns.
    pub patterns: Vec<Pattern>,
    /// Number of distinct patterns (grows with the layout's degree, not its size).
    pub n_patterns: usize,
}

/// A run of patterns whose jobs are numbered together: `kind_start` holds the first job
/// index of each kind (in `cfg.kinds` order), then the end of the group's jobs.
struct Group {
    patterns: std::ops::Range<usize>,
    kind_start: Vec<usize>,
}

struct Job {
    pattern: usize,
    kind: Kind,
    depth: usize,
    sequence: usize,
}

/// The generator of circuit `index`: independent of every other circuit and of the order in
/// which circuits are built.
fn rng_for(seed: u64, index: u64) -> ChaCha8Rng {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    rng.set_stream(index);
    rng
}

/// Size model of the files and the working memory, per operation of a circuit: measured on
/// generated designs (circuits.json about 48 bytes and a QASM program about 18 per
/// operation; while a circuit is built its block sequences and layers take about 130).
const FILE_BYTES_PER_OP: u64 = 66;
const MEMORY_BYTES_PER_OP: u64 = 200;
/// Per measured qubit (its id in circuits.json, its measure line, its manifest entry) and per
/// circuit.
const FILE_BYTES_PER_MEASURED: u64 = 40;
const FILE_BYTES_PER_CIRCUIT: u64 = 200;

/// A design's circuits, built on demand in run order. [`design`] collects them all;
/// `slackmap design` writes them a chunk at a time ([`write_blueprint`]), so that its memory is
/// that of one chunk whatever the size of the design. Sizes are checked against the
/// configuration's [`Limits`] (and against this machine's memory) before anything large is
/// allocated.
pub struct Blueprint<'a> {
    layout: &'a Layout,
    cfg: DesignConfig,
    builder: sequences::Builder<'a>,
    patterns: Vec<Pattern>,
    /// Job index of each run position (the seeded shuffle of all jobs).
    order: Vec<u32>,
    /// The pattern groups: the standard patterns, then (optionally) the gate patterns. Each
    /// group's jobs follow the previous group's, so that adding a group leaves every
    /// standard circuit (and its generator) as it was.
    groups: Vec<Group>,
    all_active: Option<usize>,
    width: usize,
    digest: String,
}

impl<'a> Blueprint<'a> {
    /// Packs the patterns and fixes the run order; fails with a usage error when the
    /// design is above the limits, or when the native gates cannot run Clifford sequences.
    pub fn new(layout: &'a Layout, cfg: &DesignConfig) -> Result<Blueprint<'a>> {
        cfg.check_limits()?;
        let builder = sequences::Builder::new(layout)?;
        let limits = cfg.limits;
        let per_pattern = cfg.per_pattern().unwrap_or(u64::MAX);
        let mut least = patterns::min_patterns(layout);
        if cfg.gate_pairs == GateSelection::All {
            least = least.saturating_add(patterns::min_gate_patterns(layout));
        }
        let at_least = least.saturating_mul(per_pattern);
        if limits.enforced && at_least > Limits::CIRCUITS {
            return Err(Error::Usage(format!(
                "layout '{}' would need at least {at_least} circuits ({per_pattern} per \
                 pattern, and its neighbourhoods are too dense to share many), above the \
                 limit of {} circuits; ask for fewer depths or sequences, or {OVERRIDE_HINT}",
                echo(&layout.name),
                Limits::CIRCUITS
            )));
        }
        let mut patterns = patterns::patterns(layout);
        let standard = patterns.len();
        patterns.extend(cfg.gate_pairs.patterns(layout)?);
        let total = (patterns.len() as u64).saturating_mul(per_pattern);
        if limits.enforced && total > Limits::CIRCUITS {
            return Err(Error::Usage(format!(
                "the design would have {total} circuits ({} patterns x {per_pattern}), above \
                 the limit of {} circuits; ask for fewer depths or sequences, or {OVERRIDE_HINT}",
                patterns.len(),
                Limits::CIRCUITS
            )));
        }
        let n = u32::try_from(total).map_err(|_| {
            Error::Usage(format!("a design of {total} circuits cannot be written; ask for fewer"))
        })? as usize;
        let mut bp = Blueprint {
            layout,
            cfg: cfg.clone(),
            builder,
            patterns,
            order: Vec::new(),
            groups: Vec::new(),
            all_active: None,
            width: n.saturating_sub(1).to_string().len(),
            digest: design_digest(layout, cfg),
        };
        bp.all_active = bp.patterns.iter().position(|p| p.context == Context::AllActive1q);
        let mut start = 0;
        for range in [0..standard, standard..bp.patterns.len()] {
            if range.is_empty() {
                continue;
            }
            let p = range.len();
            let mut kind_start = Vec::new();
            for &k in &cfg.kinds {
                kind_start.push(start);
                start += cfg.depths.len() * cfg.sequences_of(k) * p;
            }
            kind_start.push(start);
            bp.groups.push(Group { patterns: range, kind_start });
        }
        limits.check_bytes(
            "the design's files",
            bp.estimated_file_bytes(),
            Limits::DESIGN_BYTES,
        )?;
        let (largest, depth, qubits) = bp.largest_circuit_ops();
        check_memory(
            &format!("a circuit of depth {depth} on {qubits} qubits"),
            largest.checked_mul(MEMORY_BYTES_PER_OP),
        )?;
        check_memory("the run order", (n as u64).checked_mul(4))?;
        let mut order: Vec<u32> = Vec::new();
        order.try_reserve_exact(n).map_err(|_| {
            Error::Usage(format!("no memory for the run order of {n} circuits; ask for fewer"))
        })?;
        order.extend(0..n as u32);
        order.shuffle(&mut rng_for(cfg.seed, u64::MAX));
        bp.order = order;
        Ok(bp)
    }

    /// Number of circuits.
    pub fn len(&self) -> usize {
        self.order.len()
    }

    /// True when the design has no circuits (never, for a valid layout).
    pub fn is_empty(&self) -> bool {
        self.order.is_empty()
    }

    /// The distinct patterns.
    pub fn patterns(&self) -> &[Pattern] {
        &self.patterns
    }

    /// The layout designed for.
    pub fn layout(&self) -> &Layout {
        self.layout
    }

    /// The configuration.
    pub fn config(&self) -> &DesignConfig {
        &self.cfg
    }

    fn job(&self, index: usize) -> Job {
        let g = self.groups.iter().position(|g| index < g.kind_start[g.kind_start.len() - 1]);
        let g = &self.groups[g.unwrap_or(self.groups.len() - 1)];
        let p = g.patterns.len();
        let k = g.kind_start.partition_point(|&s| s <= index) - 1;
        let kind = self.cfg.kinds[k];
        let r = index - g.kind_start[k];
        let seqs = self.cfg.sequences_of(kind);
        let (pattern, r) = (g.patterns.start + r % p, r / p);
        Job { pattern, kind, depth: self.cfg.depths[r / seqs], sequence: r % seqs }
    }

    /// A circuit's id, from its index before the shuffle, and the design's digest: counts
    /// of another design then name circuits this design does not have, and the reader can
    /// say that they come from another design (see [`design_of_id`]).
    fn id(&self, index: usize) -> String {
        format!("c{index:0width$}-{}", self.digest, width = self.width)
    }

    /// The short digest of the design that every circuit id ends in.
    pub fn digest(&self) -> &str {
        &self.digest
    }

    /// Rough operation count of a job's circuit (see the size model above): operations per
    /// active qubit and depth step, measured on generated designs (randomized one-qubit
    /// blocks about 1.3, coupler blocks about 1.8 per qubit, repeated cycles 4).
    fn ops_estimate(&self, pattern: usize, kind: Kind, depth: usize) -> u64 {
        let p = &self.patterns[pattern];
        let per_step_x10: u64 = match kind {
            Kind::Randomized => 14,
            Kind::RepeatedX | Kind::RepeatedZ => 40,
        };
        let steps = depth as u64 + 2;
        let qubit_steps: u64 = if p.context == Context::AllIdle {
            p.measured.len() as u64 * per_step_x10
        } else {
            p.blocks
                .iter()
                .map(|b| match b {
                    BlockSpec::One(_) => per_step_x10,
                    BlockSpec::Two(..) => 2 * 19,
                })
                .sum()
        };
        qubit_steps.saturating_mul(steps) / 10
    }

    fn estimated_file_bytes(&self) -> u64 {
        let mut total = 0u64;
        for (i, p) in self.patterns.iter().enumerate() {
            let fixed = FILE_BYTES_PER_CIRCUIT + FILE_BYTES_PER_MEASURED * p.measured.len() as u64;
            for &kind in &self.cfg.kinds {
                for &depth in &self.cfg.depths {
                    let one = self
                        .ops_estimate(i, kind, depth)
                        .saturating_mul(FILE_BYTES_PER_OP)
                        .saturating_add(fixed);
                    total = total
                        .saturating_add(one.saturating_mul(self.cfg.sequences_of(kind) as u64));
                }
            }
        }
        total
    }

    /// (operations, depth, active qubits) of the largest circuit.
    fn largest_circuit_ops(&self) -> (u64, usize, usize) {
        let mut best = (0, 0, 0);
        for (i, p) in self.patterns.iter().enumerate() {
            for &kind in &self.cfg.kinds {
                for &depth in &self.cfg.depths {
                    let ops = self.ops_estimate(i, kind, depth);
                    if ops > best.0 {
                        best = (ops, depth, p.measured.len());
                    }
                }
            }
        }
        best
    }

    /// Builds the circuits at run positions `run` (in parallel), with their manifest rows.
    pub fn circuits(&self, run: std::ops::Range<usize>) -> Result<Vec<(Circuit, ManifestRow)>> {
        self.order[run].par_iter().map(|&index| self.build(index as usize)).collect()
    }

    /// Circuit positions `start..end` whose estimated working memory stays within
    /// `budget_ops` operations (at least one circuit).
    fn chunk_end(&self, start: usize, budget_ops: u64) -> usize {
        let mut ops = 0u64;
        let mut end = start;
        while end < self.order.len() && end - start < 4096 {
            let job = self.job(self.order[end] as usize);
            ops = ops.saturating_add(self.ops_estimate(job.pattern, job.kind, job.depth));
            if ops > budget_ops && end > start {
                break;
            }
            end += 1;
        }
        end
    }

    fn build(&self, index: usize) -> Result<(Circuit, ManifestRow)> {
        let job = self.job(index);
        let p = &self.patterns[job.pattern];
        if p.context == Context::AllIdle {
            // Idle as long as the all-active circuit of the same kind, depth and sequence.
            let len = match self.all_active {
                Some(a) => {
                    let (c, _) = self.build(index - job.pattern + a)?;
                    (0..c.layers.len()).filter(|&t| c.is_timed(self.layout, t)).count()
                }
                None => job.depth,
            };
            let c = self.builder.idle(self.id(index), len, p.measured.clone());
            let row = row_for(&job, p, &c, |_| Ideal::Bit(false));
            return Ok((c, row));
        }
        let mut rng = rng_for(self.cfg.seed, index as u64);
        let mut runs = Vec::with_capacity(p.blocks.len());
        for b in &p.blocks {
            runs.push(match *b {
                BlockSpec::One(q) => self.builder.one(q, job.kind, job.depth, &mut rng),
                BlockSpec::Two(a, b) => self.builder.two(a, b, job.kind, job.depth, &mut rng)?,
            });
        }
        let circuit = self.builder.assemble(self.id(index), &runs, p.measured.clone());
        let mut ideal = vec![Ideal::Bit(false); self.layout.n_qubits()];
        for run in &runs {
            for (q, i) in run.ideals() {
                ideal[q] = i;
            }
        }
        let row = row_for(&job, p, &circuit, |q| ideal[q]);
        Ok((circuit, row))
    }
}

/// Hex characters of the design digest in circuit ids.
const DIGEST_CHARS: usize = 6;

/// A short SHA-256 digest of everything that decides a design's circuits: the layout's
/// qubits, couplers, gates and neighbourhoods, and the depths, sequences, kinds and seed.
fn design_digest(layout: &Layout, cfg: &DesignConfig) -> String {
    use sha2::{Digest, Sha256};
    let mut h = Sha256::new();
    let ids: Vec<&str> = layout.qubits.iter().map(|q| q.id.as_str()).collect();
    h.update(format!(
        "qubits {ids:?}\ncouplers {:?}\ngates {:?}\nneighbourhood {:?}\n",
        layout.couplers, layout.gates, layout.neighbourhood
    ));
    if layout.has_reversed_directed() {
        // Directions change the circuits only here; other digests stay as they were.
        let d: Vec<(usize, usize)> =
            (0..layout.couplers.len()).map(|c| layout.coupler_direction(c)).collect();
        h.update(format!("directions {d:?}\n"));
    }
    h.update(format!(
        "depths {:?}\nsequences {}\nkinds {:?}\nseed {}\n",
        cfg.depths, cfg.sequences, cfg.kinds, cfg.seed
    ));
    // A design with every gate context or none shares its ids (the gate circuits follow the
    // standard ones, which stay as they are). A selection of couplers gets ids of its own, so
    // that counts of one selection's gate circuits are never read as another's.
    if let Ok(Some((couplers, pairs))) = cfg.gate_pairs.couplers(layout) {
        h.update(format!("gate couplers {couplers:?}\n"));
        if !pairs.is_empty() {
            h.update(format!("gate pairs {pairs:?}\n"));
        }
    }
    h.finalize().iter().take(DIGEST_CHARS / 2).map(|b| format!("{b:02x}")).collect()
}

/// The design digest at the end of a designed circuit id (`c0042-1a2b3c` gives `1a2b3c`);
/// `None` for ids of another shape.
pub fn design_of_id(id: &str) -> Option<&str> {
    let (head, digest) = id.rsplit_once('-')?;
    let number = head.strip_prefix('c')?;
    let hex = |c: u8| c.is_ascii_digit() || (b'a'..=b'f').contains(&c);
    (!number.is_empty()
        && number.bytes().all(|c| c.is_ascii_digit())
        && digest.len() == DIGEST_CHARS
        && digest.bytes().all(hex))
    .then_some(digest)
}

/// Builds the whole design in memory. Fails when the native gates cannot express Clifford
/// sequences, or when the design is above the configuration's limits or would not fit in
/// memory.
pub fn design(layout: &Layout, cfg: &DesignConfig) -> Result<Design> {
    let bp = Blueprint::new(layout, cfg)?;
    let ops: u64 = (0..bp.len())
        .map(|i| {
            let job = bp.job(i);
            bp.ops_estimate(job.pattern, job.kind, job.depth)
        })
        .fold(0u64, u64::saturating_add);
    check_memory("the design", ops.checked_mul(MEMORY_BYTES_PER_OP))?;
    let (circuits, manifest): (Vec<Circuit>, Vec<ManifestRow>) =
        bp.circuits(0..bp.len())?.into_iter().unzip();
    let circuits = CircuitSet::new(circuits).map_err(Error::Analysis)?;
    let n_patterns = bp.patterns.len();
    Ok(Design { circuits, manifest, n_patterns, patterns: bp.patterns })
}

fn row_for(job: &Job, p: &Pattern, c: &Circuit, ideal: impl Fn(usize) -> Ideal) -> ManifestRow {
    let ideals: Vec<Ideal> = c.measured.iter().map(|&q| ideal(q)).collect();
    let deterministic = ideals.iter().all(|i| matches!(i, Ideal::Bit(_)));
    ManifestRow {
        id: c.id.clone(),
        pattern: job.pattern,
        context: p.context,
        kind: job.kind,
        depth: job.depth,
        sequence: job.sequence,
        active_blocks: p.blocks.clone(),
        ideal_outcome: deterministic
            .then(|| ideals.iter().map(|i| if i.p1() > 0.5 { '1' } else { '0' }).collect()),
        ideal_p1: ideals.iter().map(|i| i.p1()).collect(),
    }
}

#[cfg(test)]
mod tests {
    #[test]
    fn ids_carry_the_design_digest() {
        assert_eq!(design_of_id("c0042-1a2b3c"), Some("1a2b3c"));
        for other in ["c0042", "c42-1A2B3C", "x42-1a2b3c", "c-1a2b3c", "c1-1a2b3"] {
            assert_eq!(design_of_id(other), None, "{other}");
        }
        let l = crate::layout::generate::chain(3);
        let cfg = |seed| DesignConfig::new(vec![1, 4], 2, seed, vec![Kind::Randomized]).unwrap();
        let (a, b) = (Blueprint::new(&l, &cfg(1)).unwrap(), Blueprint::new(&l, &cfg(2)).unwrap());
        assert_ne!(a.digest(), b.digest());
        assert_eq!(a.digest(), Blueprint::new(&l, &cfg(1)).unwrap().digest());
        let (c, _) = &a.circuits(0..1).unwrap()[0];
        assert_eq!(design_of_id(&c.id), Some(a.digest()));
    }

    use super::*;
    use crate::layout::generate;

    #[test]
    fn config_rejects_empty_zero_and_duplicate_values() {
        assert!(DesignConfig::new(vec![], 1, 0, vec![Kind::Randomized]).is_err());
        assert!(DesignConfig::new(vec![0, 4], 1, 0, vec![Kind::Randomized]).is_err());
        assert!(DesignConfig::new(vec![4, 4], 1, 0, vec![Kind::Randomized]).is_err());
        assert!(DesignConfig::new(vec![1], 0, 0, vec![Kind::Randomized]).is_err());
        assert!(DesignConfig::new(vec![1], 1, 0, vec![]).is_err());
        let ok = DesignConfig::new(vec![1, 4], 2, 0, vec![Kind::RepeatedZ, Kind::Randomized]);
        assert_eq!(ok.unwrap().kinds, vec![Kind::Randomized, Kind::RepeatedZ]);
    }

    #[test]
    fn circuit_count_is_patterns_times_sequences() {
        let layout = generate::chain(5);
        let cfg = DesignConfig::new(vec![1, 2, 3], 3, 9, Kind::ALL.to_vec()).unwrap();
        let d = design(&layout, &cfg).unwrap();
        // randomized: 3 depths x 3 sequences; repeated: 3 depths x 1, for each framing.
        assert_eq!(d.circuits.len(), d.n_patterns * (9 + 3 + 3));
        assert_eq!(d.manifest.len(), d.circuits.len());
        for (c, r) in d.circuits.circuits.iter().zip(&d.manifest) {
            assert_eq!(c.id, r.id);
            assert_eq!(r.ideal_p1.len(), c.measured.len());
        }
    }

    #[test]
    fn all_idle_matches_the_all_active_length() {
        let layout = generate::ring(6);
        let cfg = DesignConfig::new(vec![8], 1, 4, vec![Kind::Randomized]).unwrap();
        let d = design(&layout, &cfg).unwrap();
        let timed = |c: &Circuit| (0..c.layers.len()).filter(|&t| c.is_timed(&layout, t)).count();
        let find = |ctx: Context| {
            let i = d.manifest.iter().position(|r| r.context == ctx).unwrap();
            timed(&d.circuits.circuits[i])
        };
        assert_eq!(find(Context::AllIdle), find(Context::AllActive1q));
        assert!(find(Context::AllIdle) >= 8);
    }

    #[test]
    fn gate_selections_parse_resolve_and_get_ids_of_their_own() {
        assert_eq!(GateSelection::parse("all").unwrap(), GateSelection::All);
        let sel = GateSelection::parse("q1-q2, q0-q1").unwrap();
        assert_eq!(sel, GateSelection::Couplers(vec!["q1-q2".into(), "q0-q1".into()]));
        for bad in ["", "q1", "q1-q2,,q0-q1", "q0-q1/q2", "q0-q1/q2-q3/q3-q4"] {
            let err = GateSelection::parse(bad).unwrap_err().to_string();
            assert!(err.contains("e.g. q5-q6,q9-q10"), "{err}");
        }
        let layout = generate::chain(5);
        assert_eq!(sel.couplers(&layout).unwrap(), Some((vec![0, 1], vec![])));
        let pair = GateSelection::parse("q3-q4/q1-q2").unwrap();
        assert_eq!(pair.couplers(&layout).unwrap(), Some((vec![], vec![(1, 3)])));
        let err = GateSelection::parse("q0-q1/q1-q2").unwrap().couplers(&layout).unwrap_err();
        assert!(err.to_string().contains("is no gate pair"), "{err}");
        let err = GateSelection::parse("q0-q2").unwrap().couplers(&layout).unwrap_err();
        assert!(err.to_string().contains("'q0-q2' is not a coupler of layout"), "{err}");
        let cfg = |g: GateSelection| {
            DesignConfig::new(vec![1], 1, 0, vec![Kind::Randomized]).unwrap().with_gate_pairs(g)
        };
        let digest = |g| Blueprint::new(&layout, &cfg(g)).unwrap().digest().to_string();
        let none = digest(GateSelection::None);
        assert_eq!(digest(GateSelection::All), none);
        assert_ne!(digest(GateSelection::parse("q0-q1,q2-q3").unwrap()), none);
    }

    #[test]
    fn unsupported_two_qubit_gate_is_a_clear_error() {
        let text = crate::layout::to_toml(&generate::chain(3))
            .replace("two_qubit = \"cz\"", "two_qubit = \"cp(0.3)\"");
        let layout = crate::layout::parse_layout(&text, std::path::Path::new("l.toml")).unwrap();
        let cfg = DesignConfig::new(vec![1], 1, 0, vec![Kind::Randomized]).unwrap();
        let err = design(&layout, &cfg).unwrap_err().to_string();
        assert!(err.contains("cp(0.3) is not a Clifford gate") && err.contains("ecr"), "{err}");
    }
}
