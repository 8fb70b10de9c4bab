//! Agreement of counts with their circuits' ideal outcomes, checked before anything is
//! fitted.
//!
//! Two mistakes give a confident wrong audit if nothing stops them: counts written in the
//! other bit order, and counts of another design. Both show as counts that do not follow
//! the circuits' ideal distributions. Blocks have at most two qubits and do not interact in
//! the ideal circuit, so each block's ideal distribution is exact from a 4-amplitude state
//! vector (the unitaries of [`crate::gate`]); a randomized or repeated sequence ends in a
//! known outcome, and any other circuit has its own ideal distribution.
//!
//! Per block with ideal distribution p over d outcomes and observed frequencies f, the
//! overlap above chance is `sum_y p_y f_y - 1/d`; its largest value, reached at f = p, is
//! `sum_y p_y^2 - 1/d`. The agreement is the ratio of their sums over all blocks of all
//! circuits with counts: 1 when the data follow the ideal distributions, about 0 for data
//! that have nothing to do with them (a uniform-noise reading scores exactly 0), negative
//! when they anti-correlate. Blocks whose ideal distribution is uniform carry no weight, nor
//! do blocks no gate acts on (they end in 0 in every circuit).
//! Noise pulls the figure toward 0 (a depolarized outcome is uniform), so the thresholds
//! below are far from both ends.

use num_complex::Complex64 as C;

use super::Counts;
use crate::circuit::CircuitSet;
use crate::error::{Error, Result, Warning};
use crate::layout::Layout;

/// Below this agreement, counts do not belong to the circuits. Common practice for
/// randomized sequences keeps survival well above chance (a design whose deepest sequences
/// decay to chance still has shallow ones), so the design-wide figure of data that belong
/// stays far above it; the demo scenario reads about 0.86 (about 0 with reversed strings or
/// with the counts of another seed's design).
pub const MIN_AGREEMENT: f64 = 0.2;

/// The reversed reading must agree at least this much better to call counts bit-reversed.
pub const REVERSED_MARGIN: f64 = 0.2;

/// How well the counts agree with the circuits' ideal distributions, as read and with
/// every outcome string read backwards.
#[derive(Copy, Clone, Debug, PartialEq)]
pub struct Agreement {
    /// Agreement of the counts as read (1 = ideal, 0 = chance).
    pub as_read: f64,
    /// Agreement if each outcome string were reversed.
    pub reversed: f64,
    /// Blocks (of circuits with counts) that a gate acts on and whose ideal distribution is
    /// not uniform.
    pub informative_blocks: usize,
}

/// What the agreement says about the counts.
#[derive(Copy, Clone, Debug, PartialEq, Eq)]
pub enum Verdict {
    /// The counts follow their circuits (or no block can tell).
    Agrees,
    /// The reversed reading agrees far better.
    BitReversed,
    /// Neither reading agrees.
    Unrelated,
}

impl Agreement {
    /// The verdict under [`MIN_AGREEMENT`] and [`REVERSED_MARGIN`].
    pub fn verdict(&self) -> Verdict {
        if self.informative_blocks == 0 {
            Verdict::Agrees
        } else if self.reversed >= self.as_read + REVERSED_MARGIN && self.reversed >= MIN_AGREEMENT
        {
            Verdict::BitReversed
        } else if self.as_read < MIN_AGREEMENT {
            Verdict::Unrelated
        } else {
            Verdict::Agrees
        }
    }

    /// (code, what is wrong, the fix), or `None` when the counts agree.
    fn finding(&self) -> Option<(&'static str, &'static str, &'static str)> {
        match self.verdict() {
            Verdict::Agrees => None,
            Verdict::BitReversed => Some((
                "counts-bit-reversed",
                "these counts look bit-reversed",
                "rerun with --bit-order reversed (or without it, if it was given)",
            )),
            Verdict::Unrelated => Some((
                "counts-unrelated",
                "the counts do not belong to these circuits",
                "they follow the circuits' ideal outcomes in neither bit order; use the counts \
                 made by running this circuit file",
            )),
        }
    }

    /// The problem in words with its fix, or `None` when the counts agree.
    pub fn problem(&self) -> Option<String> {
        self.finding().map(|(_, what, fix)| format!("{what}: {fix} ({})", self.figures()))
    }

    /// Fails (exit 2) when the counts look bit-reversed or unrelated, naming the counts file.
    pub fn require(&self, counts_path: &std::path::Path) -> Result<()> {
        match self.problem() {
            None => Ok(()),
            Some(m) => Err(Error::input(counts_path, None, m)),
        }
    }

    /// The problem as a warning (for `check`, which lists problems rather than stopping).
    pub fn warning(&self) -> Option<Warning> {
        self.finding().map(|(code, what, fix)| {
            Warning::new(code, format!("{what} ({})", self.figures()), fix)
        })
    }

    fn figures(&self) -> String {
        format!(
            "agreement with the circuits' ideal outcomes {:.2} as read, {:.2} with reversed \
             outcome strings; 1 = ideal, 0 = chance",
            self.as_read, self.reversed
        )
    }
}

/// Running sums of one reading.
#[derive(Copy, Clone, Default)]
struct Sums {
    overlap: f64,
    best: f64,
}

/// Computes the agreement of `counts` (aligned with `set`) with the ideal circuits.
pub fn agreement(layout: &Layout, set: &CircuitSet, counts: &Counts) -> Agreement {
    use rayon::prelude::*;
    // Each circuit's terms are found in parallel; they are summed here in circuit order,
    // then block order, as a single pass adds them.
    let n = layout.n_qubits();
    let terms: Vec<Vec<[Sums; 2]>> = set
        .circuits
        .par_iter()
        .zip(counts.per_circuit.par_iter())
        .map_init(
            || (vec![(u32::MAX, 0u8); n], vec![usize::MAX; n]),
            |(slot, at), (c, cc)| circuit_terms(c, cc.as_ref(), slot, at),
        )
        .collect();
    let (mut fwd, mut rev) = (Sums::default(), Sums::default());
    let mut informative = 0;
    for [f, r] in terms.iter().flatten() {
        informative += 1;
        for (sums, t) in [(&mut fwd, f), (&mut rev, r)] {
            sums.overlap += t.overlap;
            sums.best += t.best;
        }
    }
    let ratio = |s: Sums| if s.best > 0.0 { s.overlap / s.best } else { 1.0 };
    Agreement { as_read: ratio(fwd), reversed: ratio(rev), informative_blocks: informative }
}

/// One circuit's terms: per informative block, in block order, its overlap above chance and
/// its best overlap as read and reversed. `slot` (per qubit) and `at` (per qubit, its first
/// position in the measured list) are scratch of the layout's size, left as they came.
fn circuit_terms(
    c: &crate::circuit::Circuit,
    cc: Option<&super::CircuitCounts>,
    slot: &mut [(u32, u8)],
    at: &mut [usize],
) -> Vec<[Sums; 2]> {
    let Some(cc) = cc else { return Vec::new() };
    let shots = cc.shots();
    if shots == 0 {
        return Vec::new();
    }
    let blocks = c.blocks();
    for (b, qs) in blocks.iter().enumerate() {
        for (j, &q) in qs.iter().enumerate() {
            slot[q] = (b as u32, j as u8);
        }
    }
    c.first_positions(at);
    let states = ideal_states(c, &blocks, slot);
    let n = c.measured.len();
    // (ideal distribution, its best overlap, positions as read, positions reversed)
    let mut informative = Vec::new();
    for (qs, (amp, driven)) in blocks.iter().zip(&states) {
        if !driven {
            continue;
        }
        let d = 1usize << qs.len();
        let p: Vec<f64> = amp[..d].iter().map(|a| a.norm_sqr()).collect();
        let best = p.iter().map(|x| x * x).sum::<f64>() - 1.0 / d as f64;
        if best < 1e-9 {
            continue;
        }
        let Some(pos) = qs
            .iter()
            .map(|&q| Some(at[q]).filter(|&i| i != usize::MAX))
            .collect::<Option<Vec<usize>>>()
        else {
            continue;
        };
        let back: Vec<usize> = pos.iter().map(|&i| n - 1 - i).collect();
        informative.push((p, best, pos, back));
    }
    let lists: Vec<Option<&[usize]>> = informative
        .iter()
        .flat_map(|(_, _, pos, back)| [Some(pos.as_slice()), Some(back.as_slice())])
        .collect();
    let marginals = cc.marginals(&lists);
    let term = |m: &Option<Vec<u64>>, p: &[f64], best: f64| {
        let m = m.as_deref().unwrap_or_default();
        let d = p.len();
        let dot: f64 = m.iter().zip(p).map(|(&k, &py)| k as f64 * py).sum::<f64>() / shots as f64;
        Sums { overlap: dot - 1.0 / d as f64, best }
    };
    let out = informative
        .iter()
        .zip(marginals.chunks(2))
        .map(|((p, best, _, _), m)| [term(&m[0], p, *best), term(&m[1], p, *best)])
        .collect();
    for qs in &blocks {
        for &q in qs {
            slot[q] = (u32::MAX, 0);
        }
    }
    for &m in &c.measured {
        at[m] = usize::MAX;
    }
    out
}

/// The ideal state vector of each block (local index = bit(block qubit 0) + 2 bit(qubit 1)),
/// and whether any gate other than `id` acted on it. An undriven block ends in 0 whatever
/// the circuit, so it cannot tell one circuit from another and is left out.
fn ideal_states(
    c: &crate::circuit::Circuit,
    blocks: &[Vec<usize>],
    slot: &[(u32, u8)],
) -> Vec<([C; 4], bool)> {
    let zero = C::new(0.0, 0.0);
    let mut states = vec![([C::new(1.0, 0.0), zero, zero, zero], false); blocks.len()];
    for op in c.layers.iter().flatten() {
        let qs = op.qubits();
        let (b, j) = slot[qs[0]];
        if b == u32::MAX || op.gate == crate::gate::Gate::Id {
            continue;
        }
        let (s, driven) = &mut states[b as usize];
        *driven = true;
        if let Some(u) = op.gate.unitary1(op.angle) {
            let bit = 1usize << j;
            for i in (0..4).filter(|i| i & bit == 0) {
                let (a0, a1) = (s[i], s[i | bit]);
                s[i] = u[0][0] * a0 + u[0][1] * a1;
                s[i | bit] = u[1][0] * a0 + u[1][1] * a1;
            }
        } else if let (Some(u), [_, q1]) = (op.gate.unitary2(op.angle), qs) {
            // Validation keeps a two-qubit gate inside one block.
            let j1 = slot[*q1].1;
            let local = |g: usize| ((g & 1) << j) | (((g >> 1) & 1) << j1);
            let mut out = [zero; 4];
            for (r, row) in u.iter().enumerate() {
                out[local(r)] = (0..4).map(|k| row[k] * s[local(k)]).sum();
            }
            *s = out;
        }
    }
    states
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::circuit::{Circuit, Op};
    use crate::counts::{CircuitCounts, Outcome};
    use crate::gate::Gate;
    use crate::layout::generate::chain;

    fn counts_of(rows: &[(&[bool], u64)]) -> Option<CircuitCounts> {
        Some(CircuitCounts {
            outcomes: rows.iter().map(|(b, n)| (Outcome::from_bits(b), *n)).collect(),
        })
    }

    /// q0 gets x (ideal 1), q1 gets z (ideal 0), q2 gets h (uniform: no weight).
    fn set() -> CircuitSet {
        CircuitSet::new(vec![Circuit {
            id: "a".into(),
            layers: vec![vec![Op::one(Gate::X, 0), Op::one(Gate::Z, 1), Op::one(Gate::H, 2)]],
            measured: vec![0, 1, 2],
        }])
        .unwrap()
    }

    #[test]
    fn ideal_data_agree_and_reversed_data_are_named() {
        let l = chain(3);
        let good = Counts {
            per_circuit: vec![counts_of(&[
                (&[true, false, false], 50),
                (&[true, false, true], 50),
            ])],
        };
        let a = agreement(&l, &set(), &good);
        assert_eq!(a.informative_blocks, 2);
        assert!((a.as_read - 1.0).abs() < 1e-12, "{a:?}");
        // Reversed, q0's bit is read from q2's position (half ones) and q1's from q1.
        assert!((a.reversed - 0.5).abs() < 1e-12, "{a:?}");
        assert_eq!(a.verdict(), Verdict::Agrees);
        let bad = Counts { per_circuit: vec![counts_of(&[(&[false, false, true], 100)])] };
        let a = agreement(&l, &set(), &bad);
        assert_eq!(a.verdict(), Verdict::BitReversed, "{a:?}");
        assert!(a.problem().unwrap().contains("rerun with --bit-order reversed"));
    }

    #[test]
    fn uniform_noise_scores_chance_and_is_unrelated() {
        let l = chain(3);
        let all: Vec<Vec<bool>> =
            (0..8).map(|x| (0..3).map(|i| x >> i & 1 == 1).collect()).collect();
        let rows: Vec<(&[bool], u64)> = all.iter().map(|b| (b.as_slice(), 10)).collect();
        let noise = Counts { per_circuit: vec![counts_of(&rows)] };
        let a = agreement(&l, &set(), &noise);
        assert!(a.as_read.abs() < 1e-12 && a.reversed.abs() < 1e-12, "{a:?}");
        assert_eq!(a.verdict(), Verdict::Unrelated);
        assert!(a.problem().unwrap().contains("do not belong to these circuits"));
    }

    #[test]
    fn two_qubit_blocks_use_the_exact_state() {
        // h q0; cx q0,q1 makes a Bell pair: ideal 00 and 11 with one half each.
        let l = chain(2);
        let set = CircuitSet::new(vec![Circuit {
            id: "bell".into(),
            layers: vec![vec![Op::one(Gate::H, 0)], vec![Op::two(Gate::Cx, 0, 1)]],
            measured: vec![0, 1],
        }])
        .unwrap();
        let ok =
            Counts { per_circuit: vec![counts_of(&[(&[false, false], 40), (&[true, true], 60)])] };
        let a = agreement(&l, &set, &ok);
        assert!((a.as_read - 1.0).abs() < 1e-12, "{a:?}");
        let wrong = Counts { per_circuit: vec![counts_of(&[(&[true, false], 100)])] };
        let a = agreement(&l, &set, &wrong);
        // overlap 0 - 1/4 over best 1/2 - 1/4: -1 in both readings
        assert!((a.as_read + 1.0).abs() < 1e-12 && (a.reversed + 1.0).abs() < 1e-12, "{a:?}");
        assert_eq!(a.verdict(), Verdict::Unrelated);
    }
}
