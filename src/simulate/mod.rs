//! The crosstalk simulator: noise files, context-conditioned channels, shot sampling.
//!
//! It makes data with known crosstalk so that the audit can be checked against the truth:
//! every block (one or two qubits) of every circuit is simulated exactly as a density
//! matrix, then shots are sampled from a generator seeded by (seed, circuit index) alone.
//!
//! # Noise files
//!
//! ```toml
//! schema = 1
//!
//! # Intrinsic errors per gate name (every qubit / coupler), applied after the ideal
//! # unitary: coherent over-rotation, then the Pauli part, then leakage. `id` is the idle
//! # channel of a measured qubit in a timed layer it is not otherwise busy in.
//! [intrinsic.sx]
//! depolarizing = 1e-3            # total Pauli error rate, spread evenly over X, Y, Z
//! [intrinsic.id]
//! pauli = { X = 5e-5, Y = 5e-5, Z = 2e-4 }
//! [intrinsic.cz]
//! depolarizing = 1e-2            # spread evenly over the 15 two-qubit Paulis
//! over_rotation = { angle = 0.01, axis = "ZZ" }   # exp(-i angle/2 P), radians
//! leakage = 1e-4                 # per application, for each operand
//!
//! # Per-qubit and per-coupler overrides replace the gate's default spec entirely.
//! [[intrinsic_override]]
//! gate = "cz"
//! qubits = ["q1", "q2"]          # two-letter labels: first letter acts on q1
//! pauli = { ZI = 2e-3, IZ = 1e-3, ZZ = 4e-3 }
//!
//! [readout]                      # default confusion of every qubit
//! p1_given_0 = 0.01
//! p0_given_1 = 0.02
//! [[readout.qubits]]
//! qubit = "q3"
//! p1_given_0 = 0.03
//! p0_given_1 = 0.025
//!
//! # Context crosstalk: acts on the victim's operation (idle included) in timed layers where
//! # the aggressor is active and not part of the victim's own operation. Applied in the
//! # order rotation, depolarizing, dephasing.
//! [[context]]
//! victim = "q5"
//! aggressor = "q6"
//! role = "both"                  # driven | idle | both (default)
//! rotation = { angle = 0.08, axis = "X" }
//! depolarizing = 0.0
//! dephasing = 0.0                # Z flip probability
//!
//! # Context error on a two-qubit gate: acts on the victim coupler's block right after its
//! # two-qubit gate, in timed layers where the aggressor runs too: a coupler (two qubits)
//! # running its two-qubit gate, or a qubit (one) driven by a non-idle, non-virtual gate.
//! # Pauli labels and the rotation axis are two letters, the first on the victim's first
//! # qubit. One term per victim and aggressor; they must share no qubit.
//! [[gate_context]]
//! victim = ["q5", "q6"]
//! aggressor = ["q9", "q10"]      # or one qubit: ["q7"]
//! pauli = { ZI = 1e-3, ZZ = 2e-3 }   # or depolarizing = 3e-3 (over the 15 Paulis)
//! rotation = { angle = 0.05, axis = "ZZ" }
//!
//! # Static ZZ with conditional phase `angle` (CP = diag(1, 1, 1, e^{i angle})), simulated
//! # in its Pauli-twirled form: each end dephases at rate sin^2(angle/2)/2 per layer while
//! # the other end is active (see `noise::zz_dephasing_rate` for the derivation).
//! [[zz]]
//! qubits = ["q9", "q10"]
//! angle = 0.2
//!
//! # Readout crosstalk: the victim's reported bit flips with probability `flip` in shots
//! # where the neighbour (measured in the same circuit) reads 1.
//! [[readout_crosstalk]]
//! victim = "q13"
//! neighbour = "q14"
//! flip = 0.02
//!
//! # Slow drift: an over-rotation in every timed layer by an angle drawn once per circuit
//! # from N(0, sigma^2).
//! [[drift]]
//! qubit = "q0"
//! sigma = 0.03                   # radians
//! axis = "Z"                     # X, Y or Z (default Z)
//! role = "both"
//! ```
//!
//! Every field is optional except `schema`; what is not given is error free. Rates must lie
//! in [0, 1], Pauli rates of one spec sum to at most 1, qubits must be in the layout, an
//! override of a two-qubit gate must name a coupler, and virtual gates take no error.
//!
//! # Conventions
//!
//! - Per layer: ideal unitaries and intrinsic channels of every operation, idle channels
//!   of block qubits not acted on (only in timed layers), then gate-context terms on a
//!   block whose two-qubit gate runs, then context terms in file order, then drift. Virtual gates are ideal; a qubit whose only operation in a timed layer is
//!   virtual still waits out the layer, so it gets the idle channel and counts as idle.
//! - Leakage: a leaked qubit never returns and reads 1 (readout confusion does not apply to
//!   it). In a two-qubit block the branch where one qubit leaked keeps its partner's reduced
//!   state as it was at the moment of the leak; the partner's later operations are not
//!   applied in that branch (exact when they do not change its Z populations; the branch
//!   carries weight of order the leakage rate).
//! - Readout confusion is applied per qubit to the exact distribution; readout crosstalk
//!   per shot, from the confused bits before any crosstalk flip.

use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, StandardNormal};
use rayon::prelude::*;

use crate::circuit::{Circuit, CircuitSet, Op};
use crate::counts::{CircuitCounts, Counts, Outcome};
use crate::error::{Error, Result};
use crate::gate::Gate;
use crate::layout::{Layout, QubitIx};

pub mod noise;
mod state;
pub mod truth;

pub use noise::{
    Aggressor, ContextTerm, Drift, ErrorSpec, GateContextTerm, Noise, Readout, ReadoutCrosstalk,
    Role, Rotation,
};

use state::{rotation1, BlockState};

/// How many shots to sample and from which seed.
#[derive(Copy, Clone, Debug, PartialEq, Eq)]
pub struct SimConfig {
    /// Shots per circuit (at least 1).
    pub shots: u64,
    /// Master seed; circuit i draws from a generator seeded by (seed, i) alone.
    pub seed: u64,
}

/// Simulates every circuit of the set and samples `cfg.shots` shots of each.
pub fn simulate(
    layout: &Layout,
    circuits: &CircuitSet,
    noise: &Noise,
    cfg: &SimConfig,
) -> Result<Counts> {
    simulate_with_progress(layout, circuits, noise, cfg, &|| {})
}

/// As [`simulate`], calling `tick` once per finished circuit (from worker threads).
pub fn simulate_with_progress(
    layout: &Layout,
    circuits: &CircuitSet,
    noise: &Noise,
    cfg: &SimConfig,
    tick: &(dyn Fn() + Sync),
) -> Result<Counts> {
    simulate_until(layout, circuits, noise, cfg, tick, &|| false)
}

/// As [`simulate_with_progress`], returning [`Error::Interrupted`] as soon as `stop` says
/// so (checked before each circuit).
pub fn simulate_until(
    layout: &Layout,
    circuits: &CircuitSet,
    noise: &Noise,
    cfg: &SimConfig,
    tick: &(dyn Fn() + Sync),
    stop: &(dyn Fn() -> bool + Sync),
) -> Result<Counts> {
    if cfg.shots == 0 {
        return Err(Error::Usage("shots must be at least 1".into()));
    }
    let per_circuit = circuits
        .circuits
        .par_iter()
        .enumerate()
        .map(|(i, c)| {
            if stop() {
                return Err(Error::Interrupted);
            }
            let r = simulate_circuit(layout, c, i, noise, cfg);
            tick();
            r.map(Some)
        })
        .collect::<Result<Vec<_>>>()?;
    Ok(Counts { per_circuit })
}

/// The generator of circuit `index`: depends on (seed, index) only.
pub fn circuit_rng(seed: u64, index: usize) -> ChaCha8Rng {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    rng.set_stream(index as u64);
    rng
}

/// Draws the per-circuit drift angles (radians), one per drift term of `noise`, in order.
pub fn draw_drift(noise: &Noise, rng: &mut ChaCha8Rng) -> Vec<f64> {
    noise
        .drift()
        .iter()
        .map(|d| {
            let z: f64 = StandardNormal.sample(rng);
            z * d.sigma_rad
        })
        .collect()
}

fn simulate_circuit(
    layout: &Layout,
    c: &Circuit,
    index: usize,
    noise: &Noise,
    cfg: &SimConfig,
) -> Result<CircuitCounts> {
    check_circuit(layout, c)?;
    let mut rng = circuit_rng(cfg.seed, index);
    let drift = draw_drift(noise, &mut rng);
    let pos = |q: QubitIx| c.measured.iter().position(|&m| m == q);
    let mut blocks = Vec::new();
    for b in c.blocks() {
        let dist = exact_block_distribution(layout, c, &b, noise, &drift)?;
        let positions: Vec<usize> = b.iter().filter_map(|&q| pos(q)).collect();
        let mut cum = Vec::with_capacity(dist.len());
        let mut acc = 0.0;
        for p in dist {
            acc += p.max(0.0);
            cum.push(acc);
        }
        blocks.push((positions, cum));
    }
    let crosstalk: Vec<(usize, usize, f64)> = noise
        .readout_crosstalk()
        .iter()
        .filter_map(|t| Some((pos(t.victim)?, pos(t.neighbour)?, t.flip)))
        .filter(|t| t.2 > 0.0)
        .collect();
    let m = c.measured.len();
    let n_words = m.div_ceil(64).max(1);
    let mut tally: std::collections::HashMap<Vec<u64>, u64> = std::collections::HashMap::new();
    let mut words = vec![0u64; n_words];
    let mut before = vec![0u64; n_words];
    let bit = |w: &[u64], i: usize| (w[i / 64] >> (i % 64)) & 1 == 1;
    for _ in 0..cfg.shots {
        words.iter_mut().for_each(|w| *w = 0);
        for (positions, cum) in &blocks {
            let total = cum.last().copied().unwrap_or(1.0);
            let u: f64 = rng.random::<f64>() * total;
            let x = cum.iter().position(|&c| u < c).unwrap_or(cum.len() - 1);
            for (j, &p) in positions.iter().enumerate() {
                if (x >> j) & 1 == 1 {
                    words[p / 64] |= 1 << (p % 64);
                }
            }
        }
        if !crosstalk.is_empty() {
            before.copy_from_slice(&words);
            for &(v, n, f) in &crosstalk {
                if bit(&before, n) && rng.random::<f64>() < f {
                    words[v / 64] ^= 1 << (v % 64);
                }
            }
        }
        match tally.get_mut(&words) {
            Some(n) => *n += 1,
            None => {
                tally.insert(words.clone(), 1);
            }
        }
    }
    let mut outcomes: Vec<(Outcome, u64)> =
        tally.into_iter().map(|(w, n)| (Outcome(w.into_boxed_slice()), n)).collect();
    outcomes.sort();
    Ok(CircuitCounts { outcomes })
}

/// Checks what the simulator relies on: operands distinct, each qubit at most once per
/// layer, blocks of at most two qubits, all of them measured.
fn check_circuit(layout: &Layout, c: &Circuit) -> Result<()> {
    let mut seen = vec![usize::MAX; layout.n_qubits()];
    for (t, layer) in c.layers.iter().enumerate() {
        for op in layer {
            let qs = op.qubits();
            if qs.len() == 2 && qs[0] == qs[1] {
                return Err(Error::circuit(
                    &c.id,
                    format!("layer {t}: {} acts twice on {}", op.gate, layout.id(qs[0])),
                ));
            }
            for &q in qs {
                if q >= layout.n_qubits() {
                    return Err(Error::circuit(&c.id, format!("layer {t}: qubit index {q}")));
                }
                if seen[q] == t {
                    return Err(Error::circuit(
                        &c.id,
                        format!(
                            "layer {t} acts on {} more than once (operations of a layer must \
                             act on disjoint qubits)",
                            layout.id(q)
                        ),
                    ));
                }
                seen[q] = t;
            }
        }
    }
    for b in c.blocks() {
        let ids = || b.iter().map(|&q| layout.id(q)).collect::<Vec<_>>().join(", ");
        if b.len() > 2 {
            return Err(Error::circuit(
                &c.id,
                format!(
                    "two-qubit gates join measured qubits {} into a block of {}; the simulator \
                     supports blocks of one or two qubits",
                    ids(),
                    b.len()
                ),
            ));
        }
        if let Some(&q) = b.iter().find(|q| !c.measured.contains(q)) {
            return Err(Error::circuit(
                &c.id,
                format!(
                    "qubit {} shares a two-qubit gate with measured qubits ({}) but is not \
                     measured; measure it too",
                    layout.id(q),
                    ids()
                ),
            ));
        }
    }
    Ok(())
}

/// The exact outcome probabilities of one block of a circuit, readout confusion included
/// (readout crosstalk, which couples blocks, is not). Entry x is the probability that the
/// block's j-th qubit (in the order of `block`) reads bit j of x. `drift_rad` holds one angle
/// per drift term of `noise` (see [`draw_drift`]); pass zeros for none.
pub fn exact_block_distribution(
    layout: &Layout,
    circuit: &Circuit,
    block: &[QubitIx],
    noise: &Noise,
    drift_rad: &[f64],
) -> Result<Vec<f64>> {
    let pops = block_populations(layout, circuit, block, noise, drift_rad)?;
    let k = block.len();
    let ro: Vec<Readout> = block.iter().map(|&q| noise.readout(q)).collect();
    // P(read y | state s): s = 2 is leaked and always reads 1.
    let read = |y: usize, s: usize, r: &Readout| -> f64 {
        match (s, y) {
            (0, 1) => r.p1_given_0,
            (0, _) => 1.0 - r.p1_given_0,
            (1, 0) => r.p0_given_1,
            (1, _) => 1.0 - r.p0_given_1,
            (_, 1) => 1.0,
            _ => 0.0,
        }
    };
    let mut out = vec![0.0; 1 << k];
    for (s_idx, &p) in pops.iter().enumerate() {
        if p == 0.0 {
            continue;
        }
        for (y, o) in out.iter_mut().enumerate() {
            let mut w = p;
            let mut s = s_idx;
            for (j, r) in ro.iter().enumerate() {
                w *= read((y >> j) & 1, s % 3, r);
                s /= 3;
            }
            *o += w;
        }
    }
    Ok(out)
}

/// True when the aggressor of a gate-context term is active in a layer: a coupler when the
/// layer runs a two-qubit gate on it, a qubit when it is in `active` (sorted).
fn aggressor_active(layer: &[Op], active: &[QubitIx], aggressor: Aggressor) -> bool {
    match aggressor {
        Aggressor::Coupler(a, b) => layer.iter().any(|op| {
            let qs = op.qubits();
            op.gate.arity() == 2 && qs.contains(&a) && qs.contains(&b)
        }),
        Aggressor::Qubit(q) => active.binary_search(&q).is_ok(),
    }
}

fn block_populations(
    layout: &Layout,
    c: &Circuit,
    block: &[QubitIx],
    noise: &Noise,
    drift_rad: &[f64],
) -> Result<Vec<f64>> {
    let k = block.len();
    if !(1..=2).contains(&k) {
        return Err(Error::circuit(
            &c.id,
            format!("a block of {k} qubits cannot be simulated (supported: 1 or 2)"),
        ));
    }
    if drift_rad.len() != noise.drift().len() {
        return Err(Error::Usage(format!(
            "{} drift angles given for {} drift terms",
            drift_rad.len(),
            noise.drift().len()
        )));
    }
    let local = |q: QubitIx| block.iter().position(|&b| b == q);
    let terms: Vec<Vec<&ContextTerm>> =
        block.iter().map(|&q| noise.context().iter().filter(|t| t.victim == q).collect()).collect();
    let drifts: Vec<Vec<(Rotation, Role)>> = block
        .iter()
        .map(|&q| {
            noise
                .drift()
                .iter()
                .zip(drift_rad)
                .filter(|(d, _)| d.qubit == q)
                .map(|(d, &a)| (Rotation { angle_rad: a, pauli: vec![d.pauli] }, d.role))
                .collect()
        })
        .collect();
    // Gate-context terms on this block, with the block positions of the victim's qubits.
    let gate_terms: Vec<(&GateContextTerm, [usize; 2])> = noise
        .gate_context()
        .iter()
        .filter_map(|t| Some((t, [local(t.victim[0])?, local(t.victim[1])?])))
        .filter(|_| k == 2)
        .collect();
    let idle: Vec<Option<ErrorSpec>> =
        block.iter().map(|&q| noise.intrinsic(Gate::Id, &[q])).collect();
    let mut st = BlockState::ground(k);
    let bad = |op: &Op| Error::circuit(&c.id, format!("gate {} has no unitary", op.gate));
    for t in 0..c.layers.len() {
        let timed = c.is_timed(layout, t);
        let mut on: [Option<&Op>; 2] = [None; 2];
        for op in &c.layers[t] {
            for &q in op.qubits() {
                if let Some(j) = local(q) {
                    on[j] = Some(op);
                }
            }
        }
        for j in 0..k {
            let q = block[j];
            match on[j] {
                Some(op) if op.gate.arity() == 2 => {
                    if op.operands[0] != q {
                        continue;
                    }
                    let other = local(op.operands[1]).ok_or_else(|| {
                        Error::circuit(&c.id, format!("layer {t}: {} leaves its block", op.gate))
                    })?;
                    st.apply2(&op.gate.unitary2(op.angle).ok_or_else(|| bad(op))?, j);
                    if let Some(e) = noise.intrinsic(op.gate, op.qubits()) {
                        st.apply_error(&e, &[j, other]);
                    }
                }
                Some(op) => {
                    st.apply1(&op.gate.unitary1(op.angle).ok_or_else(|| bad(op))?, j);
                    if !layout.is_virtual(op.gate) {
                        if let Some(e) = noise.intrinsic(op.gate, &[q]) {
                            st.apply_error(&e, &[j]);
                        }
                    } else if timed {
                        if let Some(e) = &idle[j] {
                            st.apply_error(e, &[j]);
                        }
                    }
                }
                None if timed => {
                    if let Some(e) = &idle[j] {
                        st.apply_error(e, &[j]);
                    }
                }
                None => {}
            }
        }
        if !timed {
            continue;
        }
        let active = c.active_qubits(layout, t);
        if on[0].is_some_and(|op| op.gate.arity() == 2) {
            for (term, at) in &gate_terms {
                if aggressor_active(&c.layers[t], &active, term.aggressor) {
                    st.apply_error(&term.error, at);
                }
            }
        }
        for j in 0..k {
            let (role, own): (Role, &[QubitIx]) = match on[j] {
                Some(op) if op.gate != Gate::Id && !layout.is_virtual(op.gate) => {
                    (Role::Driven, op.qubits())
                }
                _ => (Role::Idle, &[]),
            };
            for term in &terms[j] {
                if term.role.admits(role)
                    && !own.contains(&term.aggressor)
                    && active.binary_search(&term.aggressor).is_ok()
                {
                    st.apply_error(&term.error, &[j]);
                }
            }
            for (rot, r) in &drifts[j] {
                if r.admits(role) && rot.angle_rad != 0.0 {
                    st.apply1(&rotation1(rot), j);
                }
            }
        }
    }
    Ok(st.populations())
}
