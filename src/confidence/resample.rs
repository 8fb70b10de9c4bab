//! Drawing resampled data sets: shots of each circuit from its observed joint outcome
//! frequencies (then marginalised to its blocks, so blocks of one circuit stay as
//! correlated as the data), circuits within groups of the same pattern and depth then
//! shots (two-level bootstrap, Davison & Hinkley 1997, sec. 3.8), and rows drawn from
//! the fitted model's own predictions (the parametric null).

use std::collections::BTreeMap;

use rand::RngExt;
use rand_chacha::ChaCha8Rng;
use rand_distr::{Binomial, Distribution};

use crate::counts::CircuitCounts;
use crate::pipeline::{Analysis, Resampled};

/// Counts of `n` shots over outcomes of probabilities `p`, by sequential conditional
/// binomials (each outcome's count given those before it is binomial).
pub fn multinomial(n: u64, p: &[f64], rng: &mut ChaCha8Rng) -> Vec<u64> {
    let mut out = vec![0u64; p.len()];
    let (mut left, mut rest) = (n, 1.0f64);
    for (j, &pj) in p.iter().enumerate() {
        if left == 0 {
            break;
        }
        if j + 1 == p.len() {
            out[j] = left;
            break;
        }
        let q = if rest > 0.0 { (pj / rest).clamp(0.0, 1.0) } else { 1.0 };
        let x = if q >= 1.0 {
            left
        } else if q <= 0.0 {
            0
        } else {
            Binomial::new(left, q).map(|b| b.sample(rng)).unwrap_or(0)
        };
        out[j] = x;
        left -= x;
        rest -= pj;
    }
    out
}

/// Where each of one circuit's observed outcomes lands in each of its rows' marginals.
///
/// Kept outcome by outcome and sparse: each row has a usual marginal index (the one most of
/// the circuit's shots give it), and outcome j lists only the rows it gives another index
/// (`entries[starts[j]..starts[j + 1]]`, each `4 * row + index`, a row's block having at
/// most two qubits). A marginal's usual entry is then the shots left over. An outcome of a
/// wide circuit differs from the usual reading in a few rows (those where an error struck),
/// so a draw touches a small part of what a row-by-outcome table would. The outcome
/// frequencies are read from the counts when drawing.
struct CircuitDraw {
    shots: u64,
    /// Global index of each of the circuit's rows, in row order.
    rows: Vec<usize>,
    n_outcomes: Vec<u8>,
    /// Each row's usual marginal index.
    usual: Vec<u8>,
    starts: Vec<u32>,
    entries: Entries,
}

/// The entries of a [`CircuitDraw`], two bytes each while the circuit has fewer than 2^14
/// rows (the table is most of the plan's memory: a hundred megabytes on a 144-qubit chip at
/// four bytes an entry).
enum Entries {
    Narrow(Box<[u16]>),
    Wide(Box<[u32]>),
}

impl Entries {
    fn new(entries: Vec<u32>, n_rows: usize) -> Entries {
        if n_rows < 1 << 14 {
            Entries::Narrow(entries.into_iter().map(|e| e as u16).collect())
        } else {
            Entries::Wide(entries.into_boxed_slice())
        }
    }
}

/// Moves each drawn outcome's shots `tally[j]` from the usual entry of the marginals its
/// entries name to the entry they name (every marginal starts with all shots on its usual
/// entry, so no entry goes below zero).
fn tally_into<T: Copy + Into<u32>>(
    m: &mut [Vec<u64>],
    usual: &[u8],
    starts: &[u32],
    entries: &[T],
    tally: &[u64],
) {
    for (j, &t) in tally.iter().enumerate() {
        if t == 0 {
            continue;
        }
        for &e in &entries[starts[j] as usize..starts[j + 1] as usize] {
            let e: u32 = e.into();
            let row = (e / 4) as usize;
            m[row][usual[row] as usize] -= t;
            m[row][(e % 4) as usize] += t;
        }
    }
}

/// What stays fixed across replicates: per-circuit draws and circuit groups.
pub struct Plan {
    circuits: BTreeMap<u32, CircuitDraw>,
    /// Circuits that share a pattern (blocks, activity) and depth.
    groups: Vec<Vec<u32>>,
}

impl Plan {
    /// Prepares the draws of an analysis.
    pub(crate) fn new(a: &Analysis) -> Plan {
        let mut by_circuit: BTreeMap<u32, Vec<usize>> = BTreeMap::new();
        for &i in &a.used {
            by_circuit.entry(a.rows.rows[i].circuit).or_default().push(i);
        }
        let mut circuits = BTreeMap::new();
        let mut groups: BTreeMap<Vec<u64>, Vec<u32>> = BTreeMap::new();
        for (&c, list) in &by_circuit {
            let Some(Some(cc)) = a.counts.per_circuit.get(c as usize) else { continue };
            let shots = cc.shots();
            if shots == 0 {
                continue;
            }
            let mut rows = Vec::with_capacity(list.len());
            let mut n_outcomes = Vec::with_capacity(list.len());
            let mut key = vec![a.rows.rows[list[0]].n_timed_layers as u64];
            for &i in list {
                let r = &a.rows.rows[i];
                rows.push(i);
                n_outcomes.push(1u8 << r.positions.len());
                key.push(u64::MAX);
                key.extend(r.block.iter().map(|&q| q as u64));
                for v in &r.victims {
                    key.push(v.driven as u64 + 2);
                    key.extend(v.active_neighbours.iter().map(|&q| q as u64));
                }
            }
            // Each outcome's marginal index in each row, and each row's usual index.
            let codes: Vec<u8> = cc
                .outcomes
                .iter()
                .flat_map(|(o, _)| {
                    list.iter().map(move |&i| {
                        a.rows.rows[i]
                            .positions
                            .iter()
                            .enumerate()
                            .fold(0u8, |acc, (j, &p)| acc | ((o.bit(p) as u8) << j))
                    })
                })
                .collect();
            let mut shots_by_code = vec![[0u64; 4]; list.len()];
            for (row_codes, (_, n)) in codes.chunks_exact(list.len()).zip(&cc.outcomes) {
                for (by_code, &code) in shots_by_code.iter_mut().zip(row_codes) {
                    by_code[code as usize] += n;
                }
            }
            let usual: Vec<u8> = shots_by_code
                .iter()
                .map(|by_code| (0..4u8).rev().max_by_key(|&x| by_code[x as usize]).unwrap_or(0))
                .collect();
            let mut starts = Vec::with_capacity(cc.outcomes.len() + 1);
            let mut entries = Vec::new();
            starts.push(0u32);
            for row_codes in codes.chunks_exact(list.len()) {
                for (slot, (&code, &u)) in row_codes.iter().zip(&usual).enumerate() {
                    if code != u {
                        entries.push(4 * slot as u32 + code as u32);
                    }
                }
                starts.push(entries.len() as u32);
            }
            groups.entry(key).or_default().push(c);
            let entries = Entries::new(entries, list.len());
            circuits.insert(c, CircuitDraw { shots, rows, n_outcomes, usual, starts, entries });
        }
        Plan { circuits, groups: groups.into_values().collect() }
    }

    /// Number of circuit groups (for reports and tests).
    pub fn n_groups(&self) -> usize {
        self.groups.len()
    }

    /// Resampled shots of circuit `from` (whose counts are `counts`), marginalised onto
    /// the rows of circuit `to` (the same circuit, or one of its group with the same blocks
    /// in the same order).
    fn draw_shots(
        &self,
        from: &CircuitDraw,
        counts: &CircuitCounts,
        to: &CircuitDraw,
        rng: &mut ChaCha8Rng,
        out: &mut Resampled,
    ) {
        let freq: Vec<f64> =
            counts.outcomes.iter().map(|(_, n)| *n as f64 / from.shots as f64).collect();
        let tally = multinomial(from.shots, &freq, rng);
        let mut m: Vec<Vec<u64>> = (from.n_outcomes.iter().zip(&from.usual))
            .map(|(&k, &u)| {
                let mut m = vec![0u64; k as usize];
                m[u as usize] = from.shots;
                m
            })
            .collect();
        // Counts are whole numbers, so the order of the sums does not matter.
        match &from.entries {
            Entries::Narrow(e) => tally_into(&mut m, &from.usual, &from.starts, e, &tally),
            Entries::Wide(e) => tally_into(&mut m, &from.usual, &from.starts, e, &tally),
        }
        for ((dst, src), m) in to.rows.iter().zip(&from.rows).zip(m) {
            out.counts[*dst] = Some(m);
            if let Some(s) = out.source.as_mut() {
                s[*dst] = *src;
            }
        }
    }

    /// One bootstrap data set: every circuit's shots resampled (`circuits` false), or
    /// circuits resampled with replacement within their group, then their shots.
    pub(crate) fn draw(&self, a: &Analysis, circuits: bool, rng: &mut ChaCha8Rng) -> Resampled {
        let n = a.rows.rows.len();
        let mut out =
            Resampled { source: circuits.then(|| (0..n).collect()), counts: vec![None; n] };
        let counts = |c: u32| {
            a.counts.per_circuit[c as usize].as_ref().expect("a planned circuit has counts")
        };
        if circuits {
            for g in &self.groups {
                for &c in g {
                    let pick = g[rng.random_range(0..g.len())];
                    let (from, to) = (&self.circuits[&pick], &self.circuits[&c]);
                    self.draw_shots(from, counts(pick), to, rng, &mut out);
                }
            }
        } else {
            for (&c, cd) in &self.circuits {
                self.draw_shots(cd, counts(c), cd, rng, &mut out);
            }
        }
        out
    }
}

/// One parametric-null data set: each analysis row's counts drawn from its fitted
/// prediction with the row's own shots. Rows of one circuit are drawn independently,
/// which is exactly the crosstalk-free product model's joint distribution.
pub(crate) fn draw_from_model(a: &Analysis, rng: &mut ChaCha8Rng) -> Resampled {
    let n = a.rows.rows.len();
    let mut counts = vec![None; n];
    for &i in &a.used {
        counts[i] = Some(multinomial(a.rows.rows[i].shots, &a.predictions[i], rng));
    }
    Resampled { source: None, counts }
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::SeedableRng;

    #[test]
    fn multinomial_keeps_total_and_mean() {
        let mut rng = ChaCha8Rng::seed_from_u64(5);
        let p = [0.1, 0.0, 0.6, 0.3];
        let mut sum = [0u64; 4];
        for _ in 0..400 {
            let x = multinomial(1000, &p, &mut rng);
            assert_eq!(x.iter().sum::<u64>(), 1000);
            assert_eq!(x[1], 0);
            for j in 0..4 {
                sum[j] += x[j];
            }
        }
        for j in 0..4 {
            let mean = sum[j] as f64 / 400.0;
            // Standard error of the mean of 400 binomial(1000, p) draws: at most 0.8 here.
            assert!((mean - 1000.0 * p[j]).abs() < 4.0, "outcome {j}: mean {mean}");
        }
    }
}
