//! The one-qubit Clifford group, its compilation to a layout's native gates, and an exact
//! two-qubit Clifford representation (a stabilizer tableau) with a table of native circuits.
//!
//! Randomized sequences need three things from here: uniform random one-qubit Cliffords,
//! their shortest native form (fewest timed pulses), and the native circuit that inverts a
//! two-qubit Clifford product. The tableau follows Aaronson and Gottesman, "Improved
//! simulation of stabilizer circuits", PRA 70, 052328 (2004): the signed images of X1, X2
//! (destabilizer rows) and Z1, Z2 (stabilizer rows), which fix a Clifford up to phase.

use std::collections::HashMap;
use std::sync::OnceLock;

use num_complex::Complex64;
use rand::RngExt;

use crate::error::{Error, Result};
use crate::gate::{Gate, Mat2, Mat4};
use crate::layout::{Layout, Native2};

/// Number of one-qubit Cliffords modulo global phase.
pub const N_CLIFFORD1: usize = 24;
/// Number of two-qubit Cliffords modulo global phase.
pub const N_CLIFFORD2: usize = 11520;

/// A one-qubit Clifford modulo global phase. Invariant: the index is below [`N_CLIFFORD1`];
/// index 0 is the identity.
#[derive(Copy, Clone, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub struct Clifford1(u8);

/// A signed Pauli image on one qubit: i^r X^x Z^z.
#[derive(Copy, Clone, Debug, PartialEq, Eq)]
struct Image1 {
    x: u8,
    z: u8,
    r: u8,
}

struct Group1 {
    unitaries: Vec<Mat2>,
    mul: Vec<[u8; N_CLIFFORD1]>,
    inv: [u8; N_CLIFFORD1],
    /// Conjugation images of X and Z.
    images: Vec<[Image1; 2]>,
}

fn c(re: f64, im: f64) -> Complex64 {
    Complex64::new(re, im)
}

fn matmul2(a: &Mat2, b: &Mat2) -> Mat2 {
    let mut m = [[c(0.0, 0.0); 2]; 2];
    for (i, row) in m.iter_mut().enumerate() {
        for (j, v) in row.iter_mut().enumerate() {
            *v = a[i][0] * b[0][j] + a[i][1] * b[1][j];
        }
    }
    m
}

fn dagger2(a: &Mat2) -> Mat2 {
    [[a[0][0].conj(), a[1][0].conj()], [a[0][1].conj(), a[1][1].conj()]]
}

/// True when a and b are equal up to a global phase.
pub fn equal_up_to_phase2(a: &Mat2, b: &Mat2) -> bool {
    let ip: Complex64 = (0..2)
        .flat_map(|i| (0..2).map(move |j| (i, j)))
        .map(|(i, j)| a[i][j].conj() * b[i][j])
        .sum();
    (ip.norm() - 2.0).abs() < 1e-9
}

fn pauli_matrix(x: u8, z: u8, r: u8) -> Mat2 {
    let id = Gate::Id.unitary1(0.0).unwrap_or_default();
    let xm = if x == 1 { Gate::X.unitary1(0.0).unwrap_or(id) } else { id };
    let zm = if z == 1 { Gate::Z.unitary1(0.0).unwrap_or(id) } else { id };
    let ph = [c(1.0, 0.0), c(0.0, 1.0), c(-1.0, 0.0), c(0.0, -1.0)][r as usize % 4];
    let m = matmul2(&xm, &zm);
    [[m[0][0] * ph, m[0][1] * ph], [m[1][0] * ph, m[1][1] * ph]]
}

fn group1() -> &'static Group1 {
    static G: OnceLock<Group1> = OnceLock::new();
    G.get_or_init(|| {
        // Closure of {H, S} from the identity: breadth first, so the order is fixed.
        let gens: Vec<Mat2> = [Gate::H, Gate::S].iter().filter_map(|g| g.unitary1(0.0)).collect();
        let mut unitaries: Vec<Mat2> = vec![Gate::Id.unitary1(0.0).unwrap_or_default()];
        let mut i = 0;
        while i < unitaries.len() {
            for g in &gens {
                let m = matmul2(g, &unitaries[i]);
                if !unitaries.iter().any(|u| equal_up_to_phase2(u, &m)) {
                    unitaries.push(m);
                }
            }
            i += 1;
        }
        let find = |m: &Mat2| {
            unitaries.iter().position(|u| equal_up_to_phase2(u, m)).map(|p| p as u8).unwrap_or(0)
        };
        let n = unitaries.len();
        let mut mul = vec![[0u8; N_CLIFFORD1]; n];
        let mut inv = [0u8; N_CLIFFORD1];
        for a in 0..n {
            for b in 0..n {
                mul[a][b] = find(&matmul2(&unitaries[a], &unitaries[b]));
            }
            inv[a] = find(&dagger2(&unitaries[a]));
        }
        let images = unitaries
            .iter()
            .map(|u| {
                let conj = |p: &Mat2| matmul2(&matmul2(u, p), &dagger2(u));
                let image = |p: Mat2| {
                    let m = conj(&p);
                    let mut found = Image1 { x: 0, z: 0, r: 0 };
                    for x in 0..2 {
                        for z in 0..2 {
                            for r in 0..4 {
                                let q = pauli_matrix(x, z, r);
                                let d: f64 = (0..2)
                                    .flat_map(|i| (0..2).map(move |j| (i, j)))
                                    .map(|(i, j)| (q[i][j] - m[i][j]).norm())
                                    .sum();
                                if d < 1e-9 {
                                    found = Image1 { x, z, r };
                                }
                            }
                        }
                    }
                    found
                };
                [image(pauli_matrix(1, 0, 0)), image(pauli_matrix(0, 1, 0))]
            })
            .collect();
        Group1 { unitaries, mul, inv, images }
    })
}

impl Clifford1 {
    /// The identity.
    pub const IDENTITY: Clifford1 = Clifford1(0);

    /// Every element, identity first.
    pub fn all() -> impl Iterator<Item = Clifford1> {
        (0..group1().unitaries.len() as u8).map(Clifford1)
    }

    /// The element's index in 0..24.
    pub fn index(self) -> usize {
        self.0 as usize
    }

    /// A representative unitary (the global phase is arbitrary).
    pub fn unitary(self) -> Mat2 {
        group1().unitaries[self.index()]
    }

    /// The element equal to `m` up to phase, if `m` is a Clifford.
    pub fn from_unitary(m: &Mat2) -> Option<Clifford1> {
        group1().unitaries.iter().position(|u| equal_up_to_phase2(u, m)).map(|p| Clifford1(p as u8))
    }

    /// The Clifford of a one-qubit gate at an angle, if it is one.
    pub fn of_gate(g: Gate, angle: f64) -> Option<Clifford1> {
        g.unitary1(angle).and_then(|m| Clifford1::from_unitary(&m))
    }

    /// `self` followed in time by `after` (the matrix product `after * self`).
    pub fn then(self, after: Clifford1) -> Clifford1 {
        Clifford1(group1().mul[after.index()][self.index()])
    }

    /// The inverse.
    pub fn inverse(self) -> Clifford1 {
        Clifford1(group1().inv[self.index()])
    }

    /// A uniformly random element.
    pub fn random<R: rand::Rng + ?Sized>(rng: &mut R) -> Clifford1 {
        Clifford1(rng.random_range(0..N_CLIFFORD1 as u8))
    }

    /// Pauli X as a Clifford.
    pub fn x() -> Clifford1 {
        Clifford1::of_gate(Gate::X, 0.0).unwrap_or(Clifford1::IDENTITY)
    }

    /// A Z rotation by `quarter_turns` * pi/2.
    pub fn z_quarter(quarter_turns: u8) -> Clifford1 {
        let angle = std::f64::consts::FRAC_PI_2 * f64::from(quarter_turns % 4);
        Clifford1::of_gate(Gate::Rz, angle).unwrap_or(Clifford1::IDENTITY)
    }

    fn images(self) -> [Image1; 2] {
        group1().images[self.index()]
    }
}

/// One timed pulse of a compiled Clifford: a native non-virtual gate at an angle.
#[derive(Copy, Clone, Debug, PartialEq)]
pub struct Pulse {
    /// The native gate.
    pub gate: Gate,
    /// Its angle (0 for fixed gates).
    pub angle: f64,
}

/// A native form of a one-qubit Clifford: for each pulse, the Z frame change (in quarter
/// turns, applied virtually just before it), then a final frame change.
#[derive(Clone, Debug, PartialEq)]
pub struct Compiled1 {
    /// (frame quarter turns before the pulse, pulse), in time order.
    pub steps: Vec<(u8, Pulse)>,
    /// Frame quarter turns after the last pulse.
    pub tail: u8,
}

/// Compiles one-qubit Cliffords to a layout's native gates with as few timed pulses as
/// possible, using the layout's virtual Z-type gates as free frame changes.
#[derive(Clone, Debug)]
pub struct Compiler1 {
    words: Vec<Compiled1>,
    frame_ops: [Vec<(Gate, f64)>; 4],
    pulse_half: Pulse,
}

/// (timed pulses, frame changes), compared lexicographically.
type Cost = (u32, u32);

#[derive(Copy, Clone, Debug)]
enum Token {
    Frame(u8),
    Pulse(Pulse),
}

const QUARTER_ANGLES: [f64; 3] =
    [std::f64::consts::FRAC_PI_2, -std::f64::consts::FRAC_PI_2, std::f64::consts::PI];

impl Compiler1 {
    /// Builds the compiler for a layout. Fails when the native one-qubit gates cannot
    /// express every Clifford.
    pub fn new(layout: &Layout) -> Result<Compiler1> {
        let virt: Vec<Gate> = layout
            .gates
            .virtual_gates
            .iter()
            .copied()
            .filter(|g| matches!(g, Gate::Rz | Gate::Z | Gate::S | Gate::Sdg))
            .collect();
        // Frame change k quarter turns, as the fewest virtual gates.
        let mut frame_ops: [Vec<(Gate, f64)>; 4] = Default::default();
        if virt.contains(&Gate::Rz) {
            for (k, ops) in frame_ops.iter_mut().enumerate().skip(1) {
                let angle = [0.0, QUARTER_ANGLES[0], QUARTER_ANGLES[2], QUARTER_ANGLES[1]][k];
                *ops = vec![(Gate::Rz, angle)];
            }
        } else {
            let quarter = |g: Gate| match g {
                Gate::S => 1u8,
                Gate::Z => 2,
                _ => 3,
            };
            let mut best: [Option<Vec<(Gate, f64)>>; 4] = [Some(Vec::new()), None, None, None];
            for _ in 0..3 {
                for k in 0..4 {
                    if let Some(w) = best[k].clone() {
                        for &g in &virt {
                            let nk = ((k as u8 + quarter(g)) % 4) as usize;
                            if best[nk].as_ref().is_none_or(|b| b.len() > w.len() + 1) {
                                let mut nw = w.clone();
                                nw.push((g, 0.0));
                                best[nk] = Some(nw);
                            }
                        }
                    }
                }
            }
            for k in 1..4 {
                frame_ops[k] = best[k].clone().unwrap_or_default();
            }
        }
        let frames: Vec<u8> = (1..4u8).filter(|&k| !frame_ops[k as usize].is_empty()).collect();
        let mut pulses = Vec::new();
        for &g in &layout.gates.one_qubit {
            if layout.is_virtual(g) || g == Gate::Id {
                continue;
            }
            let angles: &[f64] = if g.n_params() == 1 { &QUARTER_ANGLES } else { &[0.0] };
            for &angle in angles {
                if Clifford1::of_gate(g, angle).is_some_and(|c| c != Clifford1::IDENTITY) {
                    pulses.push(Pulse { gate: g, angle });
                }
            }
        }
        let mut edges: Vec<(Token, Clifford1, Cost)> = Vec::new();
        for &k in &frames {
            edges.push((Token::Frame(k), Clifford1::z_quarter(k), (0, 1)));
        }
        for &p in &pulses {
            if let Some(cl) = Clifford1::of_gate(p.gate, p.angle) {
                edges.push((Token::Pulse(p), cl, (1, 0)));
            }
        }
        // Shortest words by (pulses, frame changes): relaxation over 24 nodes converges in
        // a few rounds; strict improvement keeps the result independent of hash order.
        let mut best: Vec<Option<(Cost, Vec<Token>)>> = vec![None; N_CLIFFORD1];
        best[0] = Some(((0, 0), Vec::new()));
        let mut changed = true;
        while changed {
            changed = false;
            for i in 0..N_CLIFFORD1 {
                let Some((cost, word)) = best[i].clone() else { continue };
                for (tok, cl, ec) in &edges {
                    let j = Clifford1(i as u8).then(*cl).index();
                    let nc = (cost.0 + ec.0, cost.1 + ec.1);
                    if best[j].as_ref().is_none_or(|(bc, _)| nc < *bc) {
                        let mut nw = word.clone();
                        nw.push(*tok);
                        best[j] = Some((nc, nw));
                        changed = true;
                    }
                }
            }
        }
        let native =
            || layout.gates.one_qubit.iter().map(|g| g.name()).collect::<Vec<_>>().join(", ");
        let mut words = Vec::with_capacity(N_CLIFFORD1);
        for b in &best {
            let Some((_, word)) = b else {
                return Err(Error::Usage(format!(
                    "layout '{}': its native one-qubit gates ({}) cannot express every \
                     one-qubit Clifford; randomized sequences need sx (or rx/ry) and a Z \
                     rotation such as a virtual rz",
                    layout.name,
                    native()
                )));
            };
            let mut steps = Vec::new();
            let mut pending = 0u8;
            for tok in word {
                match *tok {
                    Token::Frame(k) => pending = (pending + k) % 4,
                    Token::Pulse(p) => {
                        steps.push((pending, p));
                        pending = 0;
                    }
                }
            }
            words.push(Compiled1 { steps, tail: pending });
        }
        let pulse_half = pulses
            .iter()
            .copied()
            .find(|p| Clifford1::of_gate(p.gate, p.angle) == Clifford1::of_gate(Gate::Sx, 0.0))
            .or_else(|| pulses.iter().copied().find(is_quarter_pulse))
            .ok_or_else(|| {
                Error::Usage(format!(
                    "layout '{}': no native half-turn pulse (sx, rx or ry) among {}",
                    layout.name,
                    native()
                ))
            })?;
        Ok(Compiler1 { words, frame_ops, pulse_half })
    }

    /// The native form of a Clifford.
    pub fn compile(&self, c: Clifford1) -> &Compiled1 {
        &self.words[c.index()]
    }

    /// The virtual gates that change the frame by `quarter_turns` * pi/2 about Z (empty
    /// for 0, and when the layout has no virtual Z gates, in which case frames never occur).
    pub fn frame_ops(&self, quarter_turns: u8) -> &[(Gate, f64)] {
        &self.frame_ops[(quarter_turns % 4) as usize]
    }

    /// The Clifford of the native half-turn pulse (`sx` where native), used by repeated
    /// sequences to put a qubit on the equator.
    pub fn half_pulse(&self) -> Clifford1 {
        Clifford1::of_gate(self.pulse_half.gate, self.pulse_half.angle)
            .unwrap_or(Clifford1::IDENTITY)
    }

    /// Mean number of timed pulses over the 24 Cliffords (a cost figure).
    pub fn mean_pulses(&self) -> f64 {
        self.words.iter().map(|w| w.steps.len() as f64).sum::<f64>() / N_CLIFFORD1 as f64
    }
}

/// True for a quarter turn about an equatorial axis: its Clifford maps Z into the equator.
fn is_quarter_pulse(p: &Pulse) -> bool {
    Clifford1::of_gate(p.gate, p.angle).is_some_and(|c| {
        let z = c.images()[1];
        z.x == 1
    })
}

/// A two-qubit Pauli i^r X1^(x&1) X2^(x>>1) Z1^(z&1) Z2^(z>>1): all X factors before all Z
/// factors, so products need only one commutation sign.
#[derive(Copy, Clone, Debug, PartialEq, Eq, Hash)]
struct Pauli2 {
    x: u8,
    z: u8,
    r: u8,
}

impl Pauli2 {
    const ONE: Pauli2 = Pauli2 { x: 0, z: 0, r: 0 };

    fn mul(self, b: Pauli2) -> Pauli2 {
        // (X^a Z^b)(X^c Z^d) = (-1)^{b.c} X^{a+c} Z^{b+d}
        let sign = 2 * (self.z & b.x).count_ones() as u8;
        Pauli2 { x: self.x ^ b.x, z: self.z ^ b.z, r: (self.r + b.r + sign) % 4 }
    }

    fn key(self) -> u32 {
        u32::from(self.x) | u32::from(self.z) << 2 | u32::from(self.r) << 4
    }
}

/// A two-qubit Clifford modulo global phase, as the images of X1, X2, Z1, Z2 under
/// conjugation (Aaronson and Gottesman, PRA 70, 052328 (2004)). Exact: the images fix the
/// unitary up to phase.
#[derive(Copy, Clone, Debug, PartialEq, Eq, Hash)]
pub struct Tableau2 {
    images: [Pauli2; 4],
}

impl Tableau2 {
    /// The identity.
    pub fn identity() -> Tableau2 {
        Tableau2 {
            images: [
                Pauli2 { x: 1, z: 0, r: 0 },
                Pauli2 { x: 2, z: 0, r: 0 },
                Pauli2 { x: 0, z: 1, r: 0 },
                Pauli2 { x: 0, z: 2, r: 0 },
            ],
        }
    }

    /// A layer of one one-qubit Clifford per qubit (first operand = bit 0).
    pub fn layer(a: Clifford1, b: Clifford1) -> Tableau2 {
        let embed = |im: Image1, bit: u8| Pauli2 { x: im.x << bit, z: im.z << bit, r: im.r };
        let (ia, ib) = (a.images(), b.images());
        Tableau2 { images: [embed(ia[0], 0), embed(ib[0], 1), embed(ia[1], 0), embed(ib[1], 1)] }
    }

    /// The tableau of cz, or cx with the first operand as control (written out); `None`
    /// for other gates (see [`Tableau2::from_unitary`]).
    pub fn gate(g: Gate) -> Option<Tableau2> {
        let p = |x, z| Pauli2 { x, z, r: 0 };
        match g {
            Gate::Cz => Some(Tableau2 { images: [p(1, 2), p(2, 1), p(0, 1), p(0, 2)] }),
            Gate::Cx => Some(Tableau2 { images: [p(3, 0), p(2, 0), p(0, 1), p(0, 3)] }),
            _ => None,
        }
    }

    /// The tableau of a two-qubit unitary (basis index bit(first) + 2 * bit(second)), or
    /// `None` when it is not a Clifford: some Pauli X1, X2, Z1, Z2 is not conjugated to a
    /// signed Pauli (to 1e-9 in every entry).
    pub fn from_unitary(u: &Mat4) -> Option<Tableau2> {
        let generators = [(1, 0), (2, 0), (0, 1), (0, 2)];
        let mut images = [Pauli2::ONE; 4];
        for (slot, &(x, z)) in generators.iter().enumerate() {
            let conj = mul4(&mul4(u, &pauli4(x, z, 0)), &dagger4(u));
            images[slot] =
                (0..64u8).map(|k| Pauli2 { x: k & 3, z: (k >> 2) & 3, r: k >> 4 }).find(|p| {
                    let q = pauli4(p.x, p.z, p.r);
                    (0..4).all(|i| (0..4).all(|j| (q[i][j] - conj[i][j]).norm() < 1e-9))
                })?;
        }
        Some(Tableau2 { images })
    }

    /// The inverse: `self.then(&self.inverse())` is the identity. Found through the word
    /// of a gate whose table holds every two-qubit Clifford.
    pub fn inverse(&self, with: &Entangler) -> Tableau2 {
        let Some(w) = with.word_for(self) else { return Tableau2::identity() };
        let mut t = Tableau2::identity();
        for (i, l) in w.layers.iter().enumerate().rev() {
            t = t.then(&Tableau2::layer(l[0].inverse(), l[1].inverse()));
            if i > 0 {
                t = t.then(&with.inverse);
            }
        }
        t
    }

    fn conjugate(&self, p: Pauli2) -> Pauli2 {
        let mut out = Pauli2 { r: p.r, ..Pauli2::ONE };
        for j in 0..2 {
            if p.x >> j & 1 == 1 {
                out = out.mul(self.images[j]);
            }
        }
        for j in 0..2 {
            if p.z >> j & 1 == 1 {
                out = out.mul(self.images[2 + j]);
            }
        }
        out
    }

    /// `self` followed in time by `after`.
    pub fn then(&self, after: &Tableau2) -> Tableau2 {
        Tableau2 { images: self.images.map(|p| after.conjugate(p)) }
    }

    /// A canonical key: equal keys mean equal Cliffords up to phase.
    pub fn key(&self) -> u32 {
        self.images.iter().enumerate().fold(0, |acc, (i, p)| acc | p.key() << (6 * i))
    }
}

/// A native two-qubit circuit: `layers[0]`, the two-qubit gate, `layers[1]`, the gate, ...
/// (`layers.len() - 1` two-qubit gates), each layer one Clifford per qubit.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Word2 {
    /// One-qubit layers in time order, between which the two-qubit gate runs.
    pub layers: Vec<[Clifford1; 2]>,
}

impl Word2 {
    /// The tableau of the word when the gate between its layers has tableau `gate`.
    pub fn tableau(&self, gate: &Tableau2) -> Tableau2 {
        let gate = *gate;
        let mut t = Tableau2::identity();
        for (i, l) in self.layers.iter().enumerate() {
            if i > 0 {
                t = t.then(&gate);
            }
            t = t.then(&Tableau2::layer(l[0], l[1]));
        }
        t
    }
}

#[derive(Debug)]
struct Table2 {
    words: HashMap<u32, Word2>,
}

fn build_table2(gate: Tableau2) -> Table2 {
    let layers: Vec<([Clifford1; 2], Tableau2)> = Clifford1::all()
        .flat_map(|a| Clifford1::all().map(move |b| ([a, b], Tableau2::layer(a, b))))
        .collect();
    let mut words: HashMap<u32, Word2> = HashMap::with_capacity(N_CLIFFORD2);
    let mut frontier: Vec<(Tableau2, Word2)> = Vec::new();
    for (l, t) in &layers {
        let w = Word2 { layers: vec![*l] };
        words.insert(t.key(), w.clone());
        frontier.push((*t, w));
    }
    // Breadth first in the number of two-qubit gates. Each level is a union of whole
    // left cosets of the one-qubit layers, so one probe per element decides its coset.
    while !frontier.is_empty() && words.len() < N_CLIFFORD2 {
        let mut next = Vec::new();
        for (t, w) in &frontier {
            let h = t.then(&gate);
            if words.contains_key(&h.key()) {
                continue;
            }
            for (l, lt) in &layers {
                let e = h.then(lt);
                let mut nw = w.clone();
                nw.layers.push(*l);
                words.entry(e.key()).or_insert_with(|| nw.clone());
                next.push((e, nw));
            }
        }
        frontier = next;
    }
    Table2 { words }
}

/// The word table of a two-qubit gate, by its tableau: built once per process (a table
/// depends only on the gate's tableau, so cz's is the same whichever layout asks).
fn table2(gate: &Tableau2) -> &'static Table2 {
    static TABLES: OnceLock<std::sync::Mutex<HashMap<u32, &'static Table2>>> = OnceLock::new();
    let tables = TABLES.get_or_init(Default::default);
    let mut map = tables.lock().unwrap_or_else(|e| e.into_inner());
    // A handful of gates per process; each table lives as long as the process.
    map.entry(gate.key()).or_insert_with(|| Box::leak(Box::new(build_table2(*gate))))
}

/// A two-qubit native that can build and close Clifford sequences: a Clifford gate that,
/// with one-qubit Cliffords, reaches every two-qubit Clifford.
#[derive(Clone, Debug)]
pub struct Entangler {
    /// The native (gate and angle).
    pub native: Native2,
    /// Its tableau.
    pub tableau: Tableau2,
    /// The tableau of its inverse.
    pub inverse: Tableau2,
    table: &'static Table2,
}

impl Entangler {
    /// The entangler of a native; the error says why the native cannot serve Clifford
    /// sequences.
    pub fn new(native: Native2) -> std::result::Result<Entangler, String> {
        let tableau = Tableau2::from_unitary(&native.unitary())
            .ok_or_else(|| format!("{native} is not a Clifford gate"))?;
        let table = table2(&tableau);
        if table.words.len() < N_CLIFFORD2 {
            return Err(format!(
                "{native} is a Clifford gate but does not entangle (with one-qubit gates it \
                 reaches {} of the {N_CLIFFORD2} two-qubit Cliffords)",
                table.words.len()
            ));
        }
        // The order of a Clifford divides |C2 / U(1)|; the inverse is the power before it.
        let mut inverse = Tableau2::identity();
        let mut power = tableau;
        while power != Tableau2::identity() {
            inverse = power;
            power = power.then(&tableau);
        }
        Ok(Entangler { native, tableau, inverse, table })
    }

    /// True when the gate is its own inverse (up to phase), like cz, cx and ecr.
    pub fn is_self_inverse(&self) -> bool {
        self.inverse == self.tableau
    }

    /// A shortest word (fewest two-qubit gates) for a two-qubit Clifford.
    pub fn word_for(&self, t: &Tableau2) -> Option<&'static Word2> {
        self.table.words.get(&t.key())
    }

    /// Number of distinct two-qubit Cliffords the table holds (11520).
    pub fn table_size(&self) -> usize {
        self.table.words.len()
    }
}

/// The Clifford natives of a list that can serve sequences, in list order; when none can,
/// the error names each native and why.
pub fn entanglers(natives: &[Native2]) -> std::result::Result<Vec<Entangler>, String> {
    let mut out = Vec::new();
    let mut why = Vec::new();
    for &n in natives {
        match Entangler::new(n) {
            Ok(e) => out.push(e),
            Err(m) => why.push(m),
        }
    }
    if out.is_empty() {
        return Err(format!(
            "{}; Clifford sequences need a Clifford entangling two-qubit gate such as cz, cx, \
             ecr or iswap (cp only at an angle of pi, rzz only at an odd multiple of pi/2)",
            why.join("; ")
        ));
    }
    Ok(out)
}

/// The native word that, run after a circuit whose product is `t`, leaves the final
/// X^b1 (x) X^b2: the inverse of `t` followed by the requested Pauli X's. For a gate that
/// is its own inverse this is `t`'s word run backwards with each layer inverted; otherwise
/// the shortest word of that Clifford.
pub fn recovery(t: &Tableau2, e: &Entangler, final_x: [bool; 2]) -> Option<Word2> {
    if !e.is_self_inverse() {
        let flips = Tableau2::layer(
            if final_x[0] { Clifford1::x() } else { Clifford1::IDENTITY },
            if final_x[1] { Clifford1::x() } else { Clifford1::IDENTITY },
        );
        return e.word_for(&t.inverse(e).then(&flips)).cloned();
    }
    let w = e.word_for(t)?;
    let mut layers: Vec<[Clifford1; 2]> =
        w.layers.iter().rev().map(|l| [l[0].inverse(), l[1].inverse()]).collect();
    if let Some(last) = layers.last_mut() {
        for (k, flip) in final_x.iter().enumerate() {
            if *flip {
                last[k] = last[k].then(Clifford1::x());
            }
        }
    }
    Some(Word2 { layers })
}

fn pauli4(x: u8, z: u8, r: u8) -> Mat4 {
    let ph = [c(1.0, 0.0), c(0.0, 1.0), c(-1.0, 0.0), c(0.0, -1.0)][r as usize % 4];
    let mut m = [[c(0.0, 0.0); 4]; 4];
    for (k, col) in (0..4usize).enumerate() {
        let sign = if (col & usize::from(z)).count_ones() % 2 == 1 { -1.0 } else { 1.0 };
        m[k ^ usize::from(x)][col] = ph * sign;
    }
    m
}

fn mul4(a: &Mat4, b: &Mat4) -> Mat4 {
    let mut m = [[c(0.0, 0.0); 4]; 4];
    for (i, row) in m.iter_mut().enumerate() {
        for (j, v) in row.iter_mut().enumerate() {
            *v = (0..4).map(|k| a[i][k] * b[k][j]).sum();
        }
    }
    m
}

fn dagger4(a: &Mat4) -> Mat4 {
    let mut m = [[c(0.0, 0.0); 4]; 4];
    for (i, row) in m.iter_mut().enumerate() {
        for (j, v) in row.iter_mut().enumerate() {
            *v = a[j][i].conj();
        }
    }
    m
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::gate::Mat4;
    use crate::layout::generate;
    use rand::SeedableRng;
    use rand_chacha::ChaCha8Rng;

    fn kron(a: &Mat2, b: &Mat2) -> Mat4 {
        // basis index = bit(q0) + 2 bit(q1): a acts on q0, b on q1
        let mut m = [[c(0.0, 0.0); 4]; 4];
        for i in 0..4 {
            for j in 0..4 {
                m[i][j] = a[i & 1][j & 1] * b[i >> 1][j >> 1];
            }
        }
        m
    }

    fn matmul4(a: &Mat4, b: &Mat4) -> Mat4 {
        let mut m = [[c(0.0, 0.0); 4]; 4];
        for i in 0..4 {
            for j in 0..4 {
                m[i][j] = (0..4).map(|k| a[i][k] * b[k][j]).sum();
            }
        }
        m
    }

    fn is_identity_up_to_phase4(m: &Mat4) -> bool {
        let tr: Complex64 = (0..4).map(|i| m[i][i]).sum();
        (tr.norm() - 4.0).abs() < 1e-9
    }

    fn compiled_unitary(cm: &Compiled1, comp: &Compiler1) -> Mat2 {
        let mut u = Gate::Id.unitary1(0.0).unwrap();
        let frame = |u: &mut Mat2, k: u8| {
            for &(g, a) in comp.frame_ops(k) {
                *u = matmul2(&g.unitary1(a).unwrap(), u);
            }
        };
        for (k, p) in &cm.steps {
            frame(&mut u, *k);
            u = matmul2(&p.gate.unitary1(p.angle).unwrap(), &u);
        }
        frame(&mut u, cm.tail);
        u
    }

    fn word_unitary(w: &Word2, comp: &Compiler1, g: Gate) -> Mat4 {
        let gate = g.unitary2(0.0).unwrap();
        let mut u = kron(&Gate::Id.unitary1(0.0).unwrap(), &Gate::Id.unitary1(0.0).unwrap());
        for (i, l) in w.layers.iter().enumerate() {
            if i > 0 {
                u = matmul4(&gate, &u);
            }
            let a = compiled_unitary(comp.compile(l[0]), comp);
            let b = compiled_unitary(comp.compile(l[1]), comp);
            u = matmul4(&kron(&a, &b), &u);
        }
        u
    }

    #[test]
    fn group_has_24_elements_closed_with_inverses() {
        // |C1 / U(1)| = 24 (common practice: the rotation group of the octahedron).
        assert_eq!(Clifford1::all().count(), 24);
        for a in Clifford1::all() {
            assert_eq!(a.then(a.inverse()), Clifford1::IDENTITY);
            for b in Clifford1::all() {
                let m = matmul2(&b.unitary(), &a.unitary());
                assert_eq!(Clifford1::from_unitary(&m), Some(a.then(b)));
            }
        }
        let distinct: std::collections::HashSet<_> =
            Clifford1::all().map(|a| a.images().map(|i| (i.x, i.z, i.r))).collect();
        assert_eq!(distinct.len(), 24);
    }

    #[test]
    fn random_draw_covers_the_group_uniformly() {
        let mut rng = ChaCha8Rng::seed_from_u64(7);
        let mut hist = [0usize; 24];
        for _ in 0..24_000 {
            hist[Clifford1::random(&mut rng).index()] += 1;
        }
        // 1000 expected per element; 5 sigma is about 160.
        assert!(hist.iter().all(|&h| (840..1160).contains(&h)), "{hist:?}");
    }

    #[test]
    fn compiled_cliffords_match_their_unitaries_with_few_pulses() {
        let layout = generate::grid(2, 2);
        let comp = Compiler1::new(&layout).unwrap();
        for cl in Clifford1::all() {
            let cm = comp.compile(cl);
            // rz(a) P rz(b) with P in {sx, x} reaches all 24 (4 + 16 + 4), so one pulse
            // suffices when x is native.
            assert!(cm.steps.len() <= 1, "{cl:?} needs {} pulses", cm.steps.len());
            assert!(equal_up_to_phase2(&compiled_unitary(cm, &comp), &cl.unitary()));
        }
        let zero = Clifford1::all().filter(|&c| comp.compile(c).steps.is_empty()).count();
        assert_eq!(zero, 4);
        // Without x, the Z-X-Z form needs two sx for the 4 Cliffords that flip Z (common
        // practice).
        let mut sx_only = layout.clone();
        sx_only.gates.one_qubit = vec![Gate::Sx, Gate::Rz];
        let comp = Compiler1::new(&sx_only).unwrap();
        let two = Clifford1::all().filter(|&c| comp.compile(c).steps.len() == 2).count();
        assert_eq!(two, 4);
        for cl in Clifford1::all() {
            let cm = comp.compile(cl);
            assert!(cm.steps.iter().all(|(_, p)| p.gate == Gate::Sx));
            assert!(equal_up_to_phase2(&compiled_unitary(cm, &comp), &cl.unitary()));
        }
    }

    #[test]
    fn compiles_with_rx_ry_and_rejects_insufficient_sets() {
        let mut layout = generate::grid(1, 2);
        layout.gates.one_qubit = vec![Gate::Rx, Gate::Ry];
        layout.gates.virtual_gates = vec![];
        let comp = Compiler1::new(&layout).unwrap();
        for cl in Clifford1::all() {
            let cm = comp.compile(cl);
            assert!(cm.steps.iter().all(|(k, _)| *k == 0) && cm.tail == 0);
            assert!(equal_up_to_phase2(&compiled_unitary(cm, &comp), &cl.unitary()));
        }
        layout.gates.one_qubit = vec![Gate::X, Gate::Rz];
        layout.gates.virtual_gates = vec![Gate::Rz];
        let err = Compiler1::new(&layout).unwrap_err().to_string();
        assert!(err.contains("cannot express every one-qubit Clifford"), "{err}");
    }

    fn entangler(g: Gate) -> Entangler {
        Entangler::new(Native2::fixed(g)).unwrap()
    }

    #[test]
    fn two_qubit_table_holds_the_whole_group() {
        // |C2 / U(1)| = 11520 (Aaronson and Gottesman, PRA 70, 052328 (2004), counting
        // formula for n = 2); at most 3 two-qubit gates are needed (common practice), for
        // cnot-class gates (cz, cx, ecr) and for iswap alike (from memory).
        for g in [Gate::Cz, Gate::Cx, Gate::Ecr, Gate::Iswap] {
            let e = entangler(g);
            assert_eq!(e.table_size(), N_CLIFFORD2, "{g}");
            let max = e.table.words.values().map(|w| w.layers.len() - 1).max();
            assert_eq!(max, Some(3), "{g}");
        }
    }

    #[test]
    fn tableaus_from_unitaries_match_the_written_ones() {
        for g in [Gate::Cz, Gate::Cx] {
            assert_eq!(Tableau2::from_unitary(&g.unitary2(0.0).unwrap()), Tableau2::gate(g));
        }
        // Pauli conjugation rules of the trade (common practice, from memory): ecr and cz are
        // self-inverse, iswap squares to Z (x) Z, swap exchanges the qubits.
        assert!(entangler(Gate::Ecr).is_self_inverse());
        let iswap = entangler(Gate::Iswap);
        assert!(!iswap.is_self_inverse());
        let zz = Tableau2::layer(Clifford1::z_quarter(2), Clifford1::z_quarter(2));
        assert_eq!(iswap.tableau.then(&iswap.tableau), zz);
        assert_eq!(iswap.tableau.then(&iswap.inverse), Tableau2::identity());
        // Not Clifford: sqrt(iSWAP), cp at a generic angle; Clifford: cp(pi) = cz and
        // rzz(pi/2), locally equivalent to cz.
        assert!(Tableau2::from_unitary(&Gate::SqrtIswap.unitary2(0.0).unwrap()).is_none());
        assert!(Tableau2::from_unitary(&Gate::Cp.unitary2(0.3).unwrap()).is_none());
        let cp_pi = Tableau2::from_unitary(&Gate::Cp.unitary2(std::f64::consts::PI).unwrap());
        assert_eq!(cp_pi, Tableau2::gate(Gate::Cz));
        let rzz = Native2 { gate: Gate::Rzz, angle: std::f64::consts::FRAC_PI_2 };
        assert_eq!(Entangler::new(rzz).unwrap().table_size(), N_CLIFFORD2);
        let swap = Entangler::new(Native2::fixed(Gate::Swap)).unwrap_err();
        assert!(swap.contains("does not entangle"), "{swap}");
        let err = entanglers(&[Native2 { gate: Gate::Cp, angle: 0.3 }]).unwrap_err();
        assert!(err.contains("cp(0.3) is not a Clifford gate"), "{err}");
    }

    #[test]
    fn random_sequences_times_recovery_give_the_identity() {
        let layout = generate::grid(1, 2);
        let comp = Compiler1::new(&layout).unwrap();
        let mut rng = ChaCha8Rng::seed_from_u64(11);
        for g in [Gate::Cz, Gate::Cx, Gate::Ecr, Gate::Iswap] {
            let e = entangler(g);
            for depth in [0usize, 1, 3, 8] {
                let layers: Vec<[Clifford1; 2]> = (0..=depth)
                    .map(|_| [Clifford1::random(&mut rng), Clifford1::random(&mut rng)])
                    .collect();
                let seq = Word2 { layers };
                let t = seq.tableau(&e.tableau);
                let rec = recovery(&t, &e, [false, false]).unwrap();
                let u = matmul4(&word_unitary(&rec, &comp, g), &word_unitary(&seq, &comp, g));
                assert!(is_identity_up_to_phase4(&u), "{g} depth {depth}");
                // The word found for t reproduces t's unitary.
                let w = e.word_for(&t).unwrap();
                let v = matmul4(&word_unitary(&rec, &comp, g), &word_unitary(w, &comp, g));
                assert!(is_identity_up_to_phase4(&v), "{g} depth {depth}: table word");
                assert_eq!(t.then(&t.inverse(&e)), Tableau2::identity());
            }
        }
    }

    #[test]
    fn recovery_with_final_x_flips_exactly_those_bits() {
        let layout = generate::grid(1, 2);
        let comp = Compiler1::new(&layout).unwrap();
        let mut rng = ChaCha8Rng::seed_from_u64(5);
        let seq = Word2 {
            layers: (0..4)
                .map(|_| [Clifford1::random(&mut rng), Clifford1::random(&mut rng)])
                .collect(),
        };
        for g in [Gate::Cz, Gate::Iswap] {
            let e = entangler(g);
            let rec = recovery(&seq.tableau(&e.tableau), &e, [true, false]).unwrap();
            let u = matmul4(&word_unitary(&rec, &comp, g), &word_unitary(&seq, &comp, g));
            // Column 0 is the image of |00>: all weight on |q0=1, q1=0> = index 1.
            assert!((u[1][0].norm() - 1.0).abs() < 1e-9, "{g}");
        }
    }
}

#[cfg(test)]
mod props {
    use super::*;
    use crate::layout::generate;
    use proptest::prelude::*;

    proptest! {
        /// The compiled native gates of any Clifford sequence multiply to the group product.
        #[test]
        fn compiled_sequence_matches_group_product(seq in proptest::collection::vec(0u8..24, 0..12)) {
            let layout = generate::chain(2);
            let comp = Compiler1::new(&layout).unwrap();
            let mut u = Gate::Id.unitary1(0.0).unwrap();
            let mut total = Clifford1::IDENTITY;
            for &i in &seq {
                let cl = Clifford1(i);
                total = total.then(cl);
                let cm = comp.compile(cl);
                for (k, p) in &cm.steps {
                    for &(g, a) in comp.frame_ops(*k) {
                        u = matmul2(&g.unitary1(a).unwrap(), &u);
                    }
                    u = matmul2(&p.gate.unitary1(p.angle).unwrap(), &u);
                }
                for &(g, a) in comp.frame_ops(cm.tail) {
                    u = matmul2(&g.unitary1(a).unwrap(), &u);
                }
            }
            prop_assert!(equal_up_to_phase2(&u, &total.unitary()));
        }

        /// Tableau composition is associative and the identity is neutral.
        #[test]
        fn tableau_composition_is_associative(a in 0u8..24, b in 0u8..24, c in 0u8..24, d in 0u8..24) {
            let cz = Tableau2::gate(Gate::Cz).unwrap();
            let x = Tableau2::layer(Clifford1(a), Clifford1(b));
            let y = Tableau2::layer(Clifford1(c), Clifford1(d));
            prop_assert_eq!(x.then(&cz).then(&y), x.then(&cz.then(&y)));
            prop_assert_eq!(Tableau2::identity().then(&x), x);
        }
    }
}
