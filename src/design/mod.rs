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
use crate::error::{Error, Result};
use crate::layout::Layout;

mod output;
pub mod patterns;
pub mod sequences;

pub use output::{manifest_csv, write_design, MANIFEST_HEADER};
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
}

impl DesignConfig {
    /// The default depths.
    pub const DEFAULT_DEPTHS: [usize; 4] = [1, 4, 16, 64];

    /// Validates a configuration.
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
        Ok(DesignConfig { depths, sequences, seed, kinds: k })
    }

    fn sequences_of(&self, kind: Kind) -> usize {
        match kind {
            Kind::Randomized => self.sequences,
            Kind::RepeatedX | Kind::RepeatedZ => 1,
        }
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

struct Job {
    index: usize,
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

/// Builds the design for a layout. Fails when the native gates cannot express Clifford
/// sequences.
pub fn design(layout: &Layout, cfg: &DesignConfig) -> Result<Design> {
    let builder = sequences::Builder::new(layout)?;
    let pats = patterns::patterns(layout);
    let mut jobs = Vec::new();
    for &kind in &cfg.kinds {
        for &depth in &cfg.depths {
            for sequence in 0..cfg.sequences_of(kind) {
                for pattern in 0..pats.len() {
                    jobs.push(Job { index: jobs.len(), pattern, kind, depth, sequence });
                }
            }
        }
    }
    let width = jobs.len().saturating_sub(1).to_string().len();
    let id_of = |i: usize| format!("c{i:0width$}");
    let built: Vec<Option<(Circuit, ManifestRow)>> = jobs
        .par_iter()
        .map(|job| {
            let p = &pats[job.pattern];
            if p.context == Context::AllIdle {
                return Ok(None);
            }
            let mut rng = rng_for(cfg.seed, job.index as u64);
            let mut runs = Vec::with_capacity(p.blocks.len());
            for b in &p.blocks {
                runs.push(match *b {
                    BlockSpec::One(q) => builder.one(q, job.kind, job.depth, &mut rng),
                    BlockSpec::Two(a, b) => builder.two(a, b, job.kind, job.depth, &mut rng)?,
                });
            }
            let circuit = builder.assemble(id_of(job.index), &runs, p.measured.clone());
            let mut ideal = vec![Ideal::Bit(false); layout.n_qubits()];
            for run in &runs {
                for (q, i) in run.ideals() {
                    ideal[q] = i;
                }
            }
            let row = row_for(job, p, &circuit, |q| ideal[q]);
            Ok(Some((circuit, row)))
        })
        .collect::<Result<Vec<_>>>()?;
    let all_active = pats.iter().position(|p| p.context == Context::AllActive1q);
    let timed_len: Vec<Option<usize>> = built
        .iter()
        .map(|b| {
            b.as_ref().map(|(c, _)| (0..c.layers.len()).filter(|&t| c.is_timed(layout, t)).count())
        })
        .collect();
    let mut circuits = Vec::with_capacity(jobs.len());
    let mut rows = Vec::with_capacity(jobs.len());
    for (job, b) in jobs.iter().zip(built) {
        match b {
            Some((c, r)) => {
                circuits.push(c);
                rows.push(r);
            }
            None => {
                // Idle as long as the all-active circuit of the same kind, depth, sequence.
                let len = all_active
                    .and_then(|a| timed_len.get(job.index - job.pattern + a).copied().flatten())
                    .unwrap_or(job.depth);
                let p = &pats[job.pattern];
                let c = builder.idle(id_of(job.index), len, p.measured.clone());
                rows.push(row_for(job, p, &c, |_| Ideal::Bit(false)));
                circuits.push(c);
            }
        }
    }
    let mut order: Vec<usize> = (0..circuits.len()).collect();
    order.shuffle(&mut rng_for(cfg.seed, u64::MAX));
    let mut slots: Vec<Option<(Circuit, ManifestRow)>> =
        circuits.into_iter().zip(rows).map(Some).collect();
    let (circuits, manifest): (Vec<Circuit>, Vec<ManifestRow>) =
        order.iter().filter_map(|&i| slots[i].take()).unzip();
    let circuits = CircuitSet::new(circuits).map_err(Error::Analysis)?;
    Ok(Design { circuits, manifest, n_patterns: pats.len(), patterns: pats })
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
    fn unsupported_two_qubit_gate_is_a_clear_error() {
        let mut layout = generate::chain(3);
        layout.gates.two_qubit = crate::gate::Gate::Id;
        let cfg = DesignConfig::new(vec![1], 1, 0, vec![Kind::Randomized]).unwrap();
        let err = design(&layout, &cfg).unwrap_err().to_string();
        assert!(err.contains("valid: cz, cx"), "{err}");
    }
}
