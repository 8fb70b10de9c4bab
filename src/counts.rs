//! Counts: how many shots gave each outcome bitstring, per circuit.
//!
//! Outcomes are stored packed (64 bits a word) so that a large file costs about an eighth
//! of its text size in memory; readers stream the file line by line. Bit i of an outcome
//! is the i-th measured qubit of its circuit (after `--bit-order reversed` is applied).

/// One outcome bitstring, packed: bit i is `words[i / 64] >> (i % 64) & 1`.
#[derive(Clone, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub struct Outcome(pub Box<[u64]>);

impl Outcome {
    /// Bit i of the outcome.
    pub fn bit(&self, i: usize) -> bool {
        (self.0[i / 64] >> (i % 64)) & 1 == 1
    }

    /// Packs a slice of bits.
    pub fn from_bits(bits: &[bool]) -> Outcome {
        let mut words = vec![0u64; bits.len().div_ceil(64).max(1)];
        for (i, &b) in bits.iter().enumerate() {
            if b {
                words[i / 64] |= 1 << (i % 64);
            }
        }
        Outcome(words.into_boxed_slice())
    }

    /// The outcome as a '0'/'1' string of `n` characters (character i = bit i).
    pub fn to_string_n(&self, n: usize) -> String {
        (0..n).map(|i| if self.bit(i) { '1' } else { '0' }).collect()
    }
}

/// Counts for one circuit: distinct outcomes with their shot counts (all > 0).
#[derive(Clone, Debug, Default, PartialEq)]
pub struct CircuitCounts {
    /// (outcome, count) pairs, each outcome once.
    pub outcomes: Vec<(Outcome, u64)>,
}

impl CircuitCounts {
    /// Total shots.
    pub fn shots(&self) -> u64 {
        self.outcomes.iter().map(|(_, n)| n).sum()
    }

    /// Marginal counts over the measured positions `positions` (at most 16): entry x holds
    /// the shots whose bit `positions[j]` equals bit j of x.
    pub fn marginal(&self, positions: &[usize]) -> Vec<u64> {
        let mut m = vec![0u64; 1 << positions.len()];
        for (o, n) in &self.outcomes {
            let x = positions
                .iter()
                .enumerate()
                .fold(0usize, |acc, (j, &p)| acc | ((o.bit(p) as usize) << j));
            m[x] += n;
        }
        m
    }
}

/// Counts for a circuit set: `per_circuit[i]` belongs to circuit i of the set; `None`
/// where the file had no counts for that circuit.
#[derive(Clone, Debug, Default)]
pub struct Counts {
    /// Per-circuit counts, aligned with the circuit set.
    pub per_circuit: Vec<Option<CircuitCounts>>,
}
