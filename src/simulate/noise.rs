//! Noise files: the TOML scenario a simulation injects, read and validated against a layout.
//!
//! Wire types mirror the file (with spans, so every error names its line); [`Noise`] is the
//! validated form the simulator and the truth writer use. The format is documented with a
//! complete example in the parent module.

use std::collections::{BTreeMap, HashMap};
use std::path::Path;

use serde::Deserialize;
use toml::Spanned;

use crate::error::{echo, Error, Result, Warning};
use crate::gate::Gate;
use crate::layout::{Layout, QubitIx};

/// The noise-file schema this build reads.
pub const SCHEMA: u32 = 1;

type Num = Spanned<f64>;

#[derive(Deserialize, Debug)]
#[serde(deny_unknown_fields)]
struct FileWire {
    schema: Spanned<u32>,
    #[serde(default)]
    intrinsic: BTreeMap<String, Spanned<ErrorWire>>,
    #[serde(default)]
    intrinsic_override: Vec<Spanned<OverrideWire>>,
    #[serde(default)]
    readout: Option<ReadoutWire>,
    #[serde(default)]
    context: Vec<Spanned<ContextWire>>,
    #[serde(default)]
    gate_context: Vec<Spanned<GateContextWire>>,
    #[serde(default)]
    zz: Vec<Spanned<ZzWire>>,
    #[serde(default)]
    readout_crosstalk: Vec<Spanned<ReadoutCrosstalkWire>>,
    #[serde(default)]
    drift: Vec<Spanned<DriftWire>>,
}

#[derive(Deserialize, Debug, Default)]
#[serde(deny_unknown_fields)]
struct ErrorWire {
    depolarizing: Option<Num>,
    pauli: Option<Spanned<BTreeMap<String, f64>>>,
    over_rotation: Option<Spanned<RotationWire>>,
    leakage: Option<Num>,
}

#[derive(Deserialize, Debug)]
#[serde(deny_unknown_fields)]
struct OverrideWire {
    gate: String,
    qubits: Vec<Spanned<String>>,
    depolarizing: Option<Num>,
    pauli: Option<Spanned<BTreeMap<String, f64>>>,
    over_rotation: Option<Spanned<RotationWire>>,
    leakage: Option<Num>,
}

#[derive(Deserialize, Debug)]
#[serde(deny_unknown_fields)]
struct RotationWire {
    angle: f64,
    axis: String,
}

#[derive(Deserialize, Debug)]
#[serde(deny_unknown_fields)]
struct ReadoutWire {
    p1_given_0: Option<Num>,
    p0_given_1: Option<Num>,
    #[serde(default)]
    qubits: Vec<Spanned<ReadoutQubitWire>>,
}

#[derive(Deserialize, Debug)]
#[serde(deny_unknown_fields)]
struct ReadoutQubitWire {
    qubit: Spanned<String>,
    p1_given_0: Num,
    p0_given_1: Num,
}

#[derive(Deserialize, Debug)]
#[serde(deny_unknown_fields)]
struct ContextWire {
    victim: Spanned<String>,
    aggressor: Spanned<String>,
    role: Option<String>,
    depolarizing: Option<Num>,
    dephasing: Option<Num>,
    rotation: Option<Spanned<RotationWire>>,
}

#[derive(Deserialize, Debug)]
#[serde(deny_unknown_fields)]
struct GateContextWire {
    victim: Vec<Spanned<String>>,
    aggressor: Vec<Spanned<String>>,
    depolarizing: Option<Num>,
    pauli: Option<Spanned<BTreeMap<String, f64>>>,
    rotation: Option<Spanned<RotationWire>>,
}

#[derive(Deserialize, Debug)]
#[serde(deny_unknown_fields)]
struct ZzWire {
    qubits: Vec<Spanned<String>>,
    angle: Num,
}

#[derive(Deserialize, Debug)]
#[serde(deny_unknown_fields)]
struct ReadoutCrosstalkWire {
    victim: Spanned<String>,
    neighbour: Spanned<String>,
    flip: Num,
}

#[derive(Deserialize, Debug)]
#[serde(deny_unknown_fields)]
struct DriftWire {
    qubit: Spanned<String>,
    sigma: Num,
    axis: Option<String>,
    role: Option<String>,
}

/// What the victim (or drifting qubit) must be doing in a layer for a term to act.
#[derive(Copy, Clone, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum Role {
    /// Acted on by a non-idle, non-virtual operation.
    Driven,
    /// Idle (implicitly, by an explicit `id`, or with only a virtual frame change).
    Idle,
    /// Either.
    Both,
}

impl Role {
    /// True when a term restricted to `self` acts on a victim in role `actual`.
    pub fn admits(self, actual: Role) -> bool {
        self == Role::Both || self == actual
    }

    /// The name used in files.
    pub fn name(self) -> &'static str {
        match self {
            Role::Driven => "driven",
            Role::Idle => "idle",
            Role::Both => "both",
        }
    }
}

/// A coherent error exp(-i angle/2 P) about a Pauli string P.
///
/// Invariant: `angle` is finite; `pauli` has one entry (0 = I, 1 = X, 2 = Y, 3 = Z) per
/// qubit of the operation (in the operand order the spec refers to), not all identity.
#[derive(Clone, Debug, PartialEq)]
pub struct Rotation {
    /// Rotation angle in radians.
    pub angle_rad: f64,
    /// The axis, one Pauli letter per operand.
    pub pauli: Vec<u8>,
}

/// An intrinsic or context error on one operation: coherent part, then Pauli part, then
/// leakage (in that order of application, after the ideal unitary).
///
/// Invariant: `pauli` has 4^k probabilities (k = 1 or 2 qubits), index = sum_j p_j 4^j with
/// p_j the Pauli on operand j (0 = I, 1 = X, 2 = Y, 3 = Z), non-negative, summing to 1;
/// `leakage` is in [0, 1].
#[derive(Clone, Debug, PartialEq)]
pub struct ErrorSpec {
    /// Pauli probabilities, identity first.
    pub pauli: Vec<f64>,
    /// Optional coherent error, applied before the Pauli part.
    pub rotation: Option<Rotation>,
    /// Probability per application that each operand leaks.
    pub leakage: f64,
}

impl ErrorSpec {
    /// The error-free spec on `k` qubits.
    pub fn none(k: usize) -> ErrorSpec {
        let mut pauli = vec![0.0; 1 << (2 * k)];
        pauli[0] = 1.0;
        ErrorSpec { pauli, rotation: None, leakage: 0.0 }
    }

    /// Number of qubits the spec acts on.
    pub fn n_qubits(&self) -> usize {
        if self.pauli.len() == 16 {
            2
        } else {
            1
        }
    }

    /// True when the spec does nothing.
    pub fn is_ideal(&self) -> bool {
        self.pauli[0] >= 1.0 && self.rotation.is_none() && self.leakage == 0.0
    }
}

/// Readout confusion of one qubit. Invariant: both probabilities in [0, 1].
#[derive(Copy, Clone, Debug, PartialEq)]
pub struct Readout {
    /// P(read 1 | state 0).
    pub p1_given_0: f64,
    /// P(read 0 | state 1).
    pub p0_given_1: f64,
}

/// One context-conditioned error: acts on `victim` in timed layers where `aggressor` is
/// active and is not part of the victim's own operation, when the victim's role fits.
#[derive(Clone, Debug, PartialEq)]
pub struct ContextTerm {
    /// The qubit whose operations suffer.
    pub victim: QubitIx,
    /// The qubit whose activity causes it.
    pub aggressor: QubitIx,
    /// Victim roles the term acts in.
    pub role: Role,
    /// The one-qubit error applied to the victim (no leakage).
    pub error: ErrorSpec,
    /// 1-based line of the term in the noise file (0 for terms built in code).
    pub line: usize,
    /// Where the term came from: `context` or `zz`.
    pub source: &'static str,
}

/// What makes a [`GateContextTerm`] act: a nearby coupler running its two-qubit gate, or a
/// nearby qubit acted on by a non-idle, non-virtual operation, in the same timed layer.
#[derive(Copy, Clone, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum Aggressor {
    /// A coupler (a < b) that shares no qubit with the victim.
    Coupler(QubitIx, QubitIx),
    /// A qubit outside the victim coupler.
    Qubit(QubitIx),
}

impl Aggressor {
    /// The aggressor's qubits.
    pub fn qubits(&self) -> Vec<QubitIx> {
        match *self {
            Aggressor::Coupler(a, b) => vec![a, b],
            Aggressor::Qubit(q) => vec![q],
        }
    }

    /// `coupler` or `qubit`.
    pub fn kind_name(&self) -> &'static str {
        match self {
            Aggressor::Coupler(..) => "coupler",
            Aggressor::Qubit(_) => "qubit",
        }
    }

    /// The aggressor written with layout ids: `q9` or `q9-q10`.
    pub fn label(&self, layout: &Layout) -> String {
        self.qubits().iter().map(|&q| layout.id(q)).collect::<Vec<_>>().join("-")
    }
}

/// A context error on a two-qubit gate: acts on the victim coupler's block right after its
/// two-qubit gate (any gate on that coupler) in timed layers where the aggressor is active.
///
/// Invariants: `victim` is a coupler of the layout (in the noise file's order, which the
/// error's Pauli labels and axis follow); the aggressor shares no qubit with it; `error` is a
/// two-qubit spec without leakage.
#[derive(Clone, Debug, PartialEq)]
pub struct GateContextTerm {
    /// The coupler whose gate suffers, first operand of the error first.
    pub victim: [QubitIx; 2],
    /// What causes it.
    pub aggressor: Aggressor,
    /// The two-qubit error applied to the victim block.
    pub error: ErrorSpec,
    /// 1-based line of the term in the noise file (0 for terms built in code).
    pub line: usize,
}

impl GateContextTerm {
    /// The victim coupler written with layout ids in the layout's order (`q5-q6`).
    pub fn victim_label(&self, layout: &Layout) -> String {
        let (a, b) = (self.victim[0].min(self.victim[1]), self.victim[0].max(self.victim[1]));
        format!("{}-{}", layout.id(a), layout.id(b))
    }

    /// True when some qubit of the aggressor is in the neighbourhood of a victim qubit: only
    /// then can an audit of the layout see the term.
    pub fn is_near(&self, layout: &Layout) -> bool {
        let aggr = self.aggressor.qubits();
        self.victim.iter().any(|&v| aggr.iter().any(|&r| layout.are_neighbours(v, r)))
    }
}

/// Readout crosstalk: `victim`'s reported bit flips with probability `flip` in shots where
/// `neighbour` reads 1 (its own confused bit, before any crosstalk flip).
#[derive(Clone, Debug, PartialEq)]
pub struct ReadoutCrosstalk {
    /// The qubit whose bit flips.
    pub victim: QubitIx,
    /// The qubit whose reading 1 triggers it.
    pub neighbour: QubitIx,
    /// Flip probability, in [0, 1].
    pub flip: f64,
}

/// Slow drift: an over-rotation of `qubit` about `pauli` in every timed layer where its role
/// fits, by an angle drawn once per circuit from N(0, sigma_rad^2).
#[derive(Clone, Debug, PartialEq)]
pub struct Drift {
    /// The drifting qubit.
    pub qubit: QubitIx,
    /// Standard deviation of the per-circuit angle, radians.
    pub sigma_rad: f64,
    /// Rotation axis: 1 = X, 2 = Y, 3 = Z.
    pub pauli: u8,
    /// Roles the drift acts in.
    pub role: Role,
}

/// A validated noise scenario for one layout.
#[derive(Clone, Debug)]
pub struct Noise {
    defaults: HashMap<Gate, ErrorSpec>,
    overrides: HashMap<(Gate, Vec<QubitIx>), ErrorSpec>,
    readout: Vec<Readout>,
    context: Vec<ContextTerm>,
    gate_context: Vec<GateContextTerm>,
    readout_crosstalk: Vec<ReadoutCrosstalk>,
    drift: Vec<Drift>,
    /// Terms no audit could see (see [`Noise::warnings`]).
    warnings: Vec<Warning>,
}

/// The largest noise file read: far above any real scenario (a few hundred bytes per
/// qubit), low enough that a file that never ends fails fast.
pub const MAX_NOISE_FILE_BYTES: u64 = 64 << 20;

impl Noise {
    /// A noise-free scenario (ideal gates, perfect readout).
    pub fn ideal(layout: &Layout) -> Noise {
        Noise {
            defaults: HashMap::new(),
            overrides: HashMap::new(),
            readout: vec![Readout { p1_given_0: 0.0, p0_given_1: 0.0 }; layout.n_qubits()],
            context: Vec::new(),
            gate_context: Vec::new(),
            readout_crosstalk: Vec::new(),
            drift: Vec::new(),
            warnings: Vec::new(),
        }
    }

    /// Findings about the file that are not errors: crosstalk terms between qubits that
    /// are not neighbours under the layout's neighbourhood, which no audit of that layout
    /// can see.
    pub fn warnings(&self) -> &[Warning] {
        &self.warnings
    }

    /// The intrinsic error of `gate` on `qubits` (in the operation's operand order), with
    /// the Pauli labels and rotation axis expressed in that same order. `None` when error
    /// free.
    pub fn intrinsic(&self, gate: Gate, qubits: &[QubitIx]) -> Option<ErrorSpec> {
        if qubits.len() == 2 {
            if let Some(s) = self.overrides.get(&(gate, qubits.to_vec())) {
                return Some(s.clone());
            }
            if let Some(s) = self.overrides.get(&(gate, vec![qubits[1], qubits[0]])) {
                return Some(swap_operands(s));
            }
        } else if let Some(s) = self.overrides.get(&(gate, qubits.to_vec())) {
            return Some(s.clone());
        }
        self.defaults.get(&gate).cloned()
    }

    /// Context terms, in file order (`zz` terms expanded into one term per end).
    pub fn context(&self) -> &[ContextTerm] {
        &self.context
    }

    /// Context terms on two-qubit gates (`gate_context`), in file order.
    pub fn gate_context(&self) -> &[GateContextTerm] {
        &self.gate_context
    }

    /// Readout crosstalk terms, in file order.
    pub fn readout_crosstalk(&self) -> &[ReadoutCrosstalk] {
        &self.readout_crosstalk
    }

    /// Drift terms, in file order; simulation draws one angle per term per circuit.
    pub fn drift(&self) -> &[Drift] {
        &self.drift
    }

    /// The readout confusion of a qubit.
    pub fn readout(&self, q: QubitIx) -> Readout {
        self.readout[q]
    }

    /// Gate names with a default intrinsic error, and gates with per-qubit overrides.
    pub fn gates_with_errors(&self) -> Vec<Gate> {
        let mut g: Vec<Gate> =
            self.defaults.keys().chain(self.overrides.keys().map(|(g, _)| g)).copied().collect();
        g.sort_unstable();
        g.dedup();
        g
    }

    /// The same scenario without its crosstalk: no context terms (`zz` and `gate_context`
    /// included) and no readout crosstalk. Intrinsic errors, readout confusion and drift stay, so the result
    /// is what a perfectly crosstalk-free chip with the same gates would give.
    pub fn without_crosstalk(&self) -> Noise {
        Noise {
            context: Vec::new(),
            gate_context: Vec::new(),
            readout_crosstalk: Vec::new(),
            warnings: Vec::new(),
            ..self.clone()
        }
    }

    /// The scenario with one more context term, applied after the existing ones. Fails when
    /// the term names a qubit outside the layout, the victim is its own aggressor, or its
    /// error is not a one-qubit spec without leakage (what a context term may carry).
    pub fn with_context_term(&self, term: ContextTerm) -> Result<Noise> {
        let n = self.readout.len();
        if term.victim >= n || term.aggressor >= n || term.victim == term.aggressor {
            return Err(Error::Usage(format!(
                "context term {} <- {}: victim and aggressor must be two different qubits of \
                 the {n}-qubit layout",
                term.victim, term.aggressor
            )));
        }
        let e = &term.error;
        let pauli_ok = e.pauli.len() == 4
            && e.pauli.iter().all(|p| (0.0..=1.0).contains(p))
            && (e.pauli.iter().sum::<f64>() - 1.0).abs() < 1e-9;
        let rotation_ok =
            e.rotation.as_ref().is_none_or(|r| r.angle_rad.is_finite() && r.pauli.len() == 1);
        if !pauli_ok || !rotation_ok || e.leakage != 0.0 {
            return Err(Error::Usage(
                "a context term carries a one-qubit Pauli channel (4 probabilities summing \
                 to 1), an optional one-qubit rotation and no leakage"
                    .into(),
            ));
        }
        let mut out = self.clone();
        out.context.push(term);
        Ok(out)
    }

    /// The same scenario with one more gate-context term (used by `plan`). Fails when the
    /// victim is not a coupler, the aggressor shares a qubit with it, or the error is not a
    /// two-qubit Pauli channel (16 probabilities summing to 1) without leakage.
    pub fn with_gate_context_term(&self, term: GateContextTerm) -> Result<Noise> {
        let n = self.readout.len();
        let [a, b] = term.victim;
        let aggr = term.aggressor.qubits();
        if a >= n || b >= n || a == b || aggr.iter().any(|&q| q >= n || q == a || q == b) {
            return Err(Error::Usage(format!(
                "gate-context term on {a}-{b}: the victim must be two different qubits of the \
                 {n}-qubit layout and the aggressor must share no qubit with it"
            )));
        }
        let e = &term.error;
        let pauli_ok = e.pauli.len() == 16
            && e.pauli.iter().all(|p| (0.0..=1.0).contains(p))
            && (e.pauli.iter().sum::<f64>() - 1.0).abs() < 1e-9;
        if !pauli_ok || e.leakage != 0.0 {
            return Err(Error::Usage(
                "a gate-context term carries a two-qubit Pauli channel (16 probabilities \
                 summing to 1), an optional rotation and no leakage"
                    .into(),
            ));
        }
        let mut out = self.clone();
        out.gate_context.push(term);
        Ok(out)
    }

    /// Reads and validates a noise file.
    pub fn read(path: &Path, layout: &Layout) -> Result<Noise> {
        let text = crate::files::read_text_capped(path, MAX_NOISE_FILE_BYTES, "noise file")?;
        Noise::from_toml_str(&text, path, layout)
    }

    /// Parses and validates noise-file text; `path` is used in error messages only.
    pub fn from_toml_str(text: &str, path: &Path, layout: &Layout) -> Result<Noise> {
        let wire: FileWire = toml::from_str(text).map_err(|e| {
            let line = e.span().map(|s| line_of(text, s.start));
            Error::input(path, line, format!("not a valid noise file: {}", e.message()))
        })?;
        Builder { text, path, layout }.build(wire)
    }
}

/// 1-based line of a byte offset.
fn line_of(text: &str, offset: usize) -> usize {
    text.as_bytes().iter().take(offset).filter(|&&b| b == b'\n').count() + 1
}

fn swap_operands(s: &ErrorSpec) -> ErrorSpec {
    let mut pauli = vec![0.0; 16];
    for (i, p) in s.pauli.iter().enumerate() {
        pauli[(i >> 2) | ((i & 3) << 2)] = *p;
    }
    let rotation = s
        .rotation
        .as_ref()
        .map(|r| Rotation { angle_rad: r.angle_rad, pauli: vec![r.pauli[1], r.pauli[0]] });
    ErrorSpec { pauli, rotation, leakage: s.leakage }
}

fn pauli_letter(c: char) -> Option<u8> {
    match c.to_ascii_uppercase() {
        'I' => Some(0),
        'X' => Some(1),
        'Y' => Some(2),
        'Z' => Some(3),
        _ => None,
    }
}

type ErrorFields<'a> = (
    &'a Option<Num>,
    &'a Option<Spanned<BTreeMap<String, f64>>>,
    &'a Option<Spanned<RotationWire>>,
);

struct Builder<'a> {
    text: &'a str,
    path: &'a Path,
    layout: &'a Layout,
}

impl Builder<'_> {
    fn err<T>(&self, span: std::ops::Range<usize>, msg: impl Into<String>) -> Result<T> {
        Err(Error::input(self.path, Some(line_of(self.text, span.start)), msg.into()))
    }

    /// Warns when a crosstalk term joins two qubits that are not neighbours: the audit
    /// scores only neighbour pairs, so such a term shows up, if at all, as intrinsic slack.
    fn unseen(
        &self,
        warnings: &mut Vec<Warning>,
        table: &str,
        a: QubitIx,
        b: QubitIx,
        span: std::ops::Range<usize>,
    ) {
        if self.layout.are_neighbours(a, b) {
            return;
        }
        let (la, lb) = (self.layout.id(a), self.layout.id(b));
        self.warn_unseen(warnings, table, la, lb, span);
    }

    /// The warning of [`Builder::unseen`] for a term that joins `la` and `lb` (qubits or
    /// couplers).
    fn warn_unseen(
        &self,
        warnings: &mut Vec<Warning>,
        table: &str,
        la: &str,
        lb: &str,
        span: std::ops::Range<usize>,
    ) {
        warnings.push(Warning::new(
            "crosstalk-between-non-neighbours",
            format!(
                "{} line {}: the [[{table}]] term joins {la} and {lb}, which are not neighbours \
                 in layout '{}', so no audit of this layout can see it (it can only show up as \
                 intrinsic slack)",
                crate::error::echo_path(self.path),
                line_of(self.text, span.start),
                echo(&self.layout.name)
            ),
            format!(
                "simulate crosstalk between neighbours, or widen the layout's [neighbourhood] \
                 (radius, extra_pairs) to take in {la}-{lb}"
            ),
        ));
    }

    fn qubit(&self, id: &Spanned<String>, what: &str) -> Result<QubitIx> {
        let span = id.span();
        let id = id.get_ref();
        match self.layout.qubit(id) {
            Some(q) => Ok(q),
            None => self.err(
                span,
                format!(
                    "{what} names qubit '{}', which is not in layout '{}' ({} qubits)",
                    echo(id),
                    echo(&self.layout.name),
                    self.layout.n_qubits()
                ),
            ),
        }
    }

    /// One `[[gate_context]]` entry: the victim must be a coupler, the aggressor a coupler or
    /// a qubit that shares no qubit with it.
    fn gate_context(&self, g: &Spanned<GateContextWire>) -> Result<GateContextTerm> {
        let layout = self.layout;
        let s = g.get_ref();
        let ids = |v: &[Spanned<String>]| {
            v.iter().map(|q| echo(q.get_ref())).collect::<Vec<_>>().join("-")
        };
        if s.victim.len() != 2 {
            return self.err(
                g.span(),
                format!(
                    "gate_context victim '{}' names {} qubit(s); name the two qubits of a \
                     coupler, e.g. victim = [\"q5\", \"q6\"]",
                    ids(&s.victim),
                    s.victim.len()
                ),
            );
        }
        let victim = [
            self.qubit(&s.victim[0], "gate_context victim")?,
            self.qubit(&s.victim[1], "gate_context victim")?,
        ];
        if layout.coupler(victim[0], victim[1]).is_none() {
            return self.err(
                g.span(),
                format!(
                    "gate_context victim {} is not a coupler of layout '{}': the term acts on a \
                     two-qubit gate",
                    ids(&s.victim),
                    echo(&layout.name)
                ),
            );
        }
        let aggr = s
            .aggressor
            .iter()
            .map(|q| self.qubit(q, "gate_context aggressor"))
            .collect::<Result<Vec<_>>>()?;
        let aggressor = match aggr[..] {
            [q] => Aggressor::Qubit(q),
            [a, b] if layout.coupler(a, b).is_some() => Aggressor::Coupler(a.min(b), a.max(b)),
            [_, _] => {
                return self.err(
                    g.span(),
                    format!(
                        "gate_context aggressor {} is not a coupler of layout '{}' (name a \
                         coupler's two qubits, or one qubit)",
                        ids(&s.aggressor),
                        echo(&layout.name)
                    ),
                )
            }
            _ => {
                return self.err(
                    g.span(),
                    format!(
                        "gate_context aggressor '{}' names {} qubits; name a coupler's two \
                         qubits or one qubit",
                        ids(&s.aggressor),
                        aggr.len()
                    ),
                )
            }
        };
        if let Some(&q) = aggr.iter().find(|q| victim.contains(q)) {
            return self.err(
                g.span(),
                format!(
                    "gate_context aggressor {} shares qubit {} with the victim {}: a gate and \
                     its own qubits never run side by side in one layer; name a coupler or \
                     qubit outside the victim",
                    ids(&s.aggressor),
                    layout.id(q),
                    ids(&s.victim)
                ),
            );
        }
        let error = self.error_spec((&s.depolarizing, &s.pauli, &s.rotation), &None, 2)?;
        Ok(GateContextTerm { victim, aggressor, error, line: line_of(self.text, g.span().start) })
    }

    fn prob(&self, v: &Num, what: &str) -> Result<f64> {
        let x = *v.get_ref();
        if !(0.0..=1.0).contains(&x) {
            return self.err(v.span(), format!("{what} = {x} is not a probability in [0, 1]"));
        }
        Ok(x)
    }

    fn role(&self, r: Option<&str>, span: std::ops::Range<usize>) -> Result<Role> {
        match r {
            None | Some("both") => Ok(Role::Both),
            Some("driven") => Ok(Role::Driven),
            Some("idle") => Ok(Role::Idle),
            Some(other) => {
                self.err(span, format!("role '{}' is not one of: driven, idle, both", echo(other)))
            }
        }
    }

    fn rotation(&self, r: &Spanned<RotationWire>, k: usize) -> Result<Rotation> {
        let w = r.get_ref();
        if !w.angle.is_finite() {
            return self.err(r.span(), format!("rotation angle {} is not finite", w.angle));
        }
        let pauli: Option<Vec<u8>> = w.axis.chars().map(pauli_letter).collect();
        match pauli {
            Some(p) if p.len() == k && p.iter().any(|&x| x != 0) => {
                Ok(Rotation { angle_rad: w.angle, pauli: p })
            }
            _ => self.err(
                r.span(),
                format!(
                    "axis '{}' is not a Pauli string of {k} letter(s) from I, X, Y, Z (not all I)",
                    echo(&w.axis)
                ),
            ),
        }
    }

    fn error_spec(&self, w: ErrorFields<'_>, leakage: &Option<Num>, k: usize) -> Result<ErrorSpec> {
        let (depol, pauli, rot) = w;
        let mut spec = ErrorSpec::none(k);
        let n = spec.pauli.len();
        match (depol, pauli) {
            (Some(_), Some(p)) => {
                return self.err(p.span(), "give either depolarizing or pauli, not both");
            }
            (Some(d), None) => {
                let e = self.prob(d, "depolarizing")?;
                spec.pauli = vec![e / (n - 1) as f64; n];
                spec.pauli[0] = 1.0 - e;
            }
            (None, Some(p)) => {
                let mut total = 0.0;
                for (label, &rate) in p.get_ref() {
                    let idx: Option<Vec<u8>> = label.chars().map(pauli_letter).collect();
                    let idx = match idx {
                        Some(v) if v.len() == k && v.iter().any(|&x| x != 0) => v,
                        _ => {
                            return self.err(
                                p.span(),
                                format!(
                                    "pauli label '{}' is not a Pauli string of {k} letter(s) \
                                     (first letter = first operand), e.g. {}",
                                    echo(label),
                                    if k == 1 { "X" } else { "XZ" }
                                ),
                            )
                        }
                    };
                    if !(0.0..=1.0).contains(&rate) {
                        return self.err(
                            p.span(),
                            format!("pauli rate {label} = {rate} is not a probability in [0, 1]"),
                        );
                    }
                    let i: usize =
                        idx.iter().enumerate().map(|(j, &v)| (v as usize) << (2 * j)).sum();
                    spec.pauli[i] += rate;
                    total += rate;
                }
                if total > 1.0 {
                    return self.err(p.span(), format!("pauli rates sum to {total}, above 1"));
                }
                spec.pauli[0] = 1.0 - total;
            }
            (None, None) => {}
        }
        if let Some(r) = rot {
            spec.rotation = Some(self.rotation(r, k)?);
        }
        if let Some(l) = leakage {
            spec.leakage = self.prob(l, "leakage")?;
        }
        Ok(spec)
    }

    fn build(&self, w: FileWire) -> Result<Noise> {
        let layout = self.layout;
        if *w.schema.get_ref() != SCHEMA {
            return self.err(
                w.schema.span(),
                format!(
                    "schema {} is not supported (this build reads schema {SCHEMA})",
                    w.schema.get_ref()
                ),
            );
        }
        let mut noise = Noise::ideal(layout);
        let gate_of = |name: &str, span: std::ops::Range<usize>| -> Result<Gate> {
            let g = match Gate::from_name(name) {
                Some(g) => g,
                None => {
                    return self.err(
                        span,
                        format!("unknown gate '{}' (known: {})", echo(name), Gate::known_names()),
                    )
                }
            };
            if layout.is_virtual(g) {
                return self.err(
                    span,
                    format!(
                        "gate '{}' is virtual on this layout: it is ideal and error-free",
                        echo(name)
                    ),
                );
            }
            Ok(g)
        };
        for (name, spec) in &w.intrinsic {
            let g = gate_of(name, spec.span())?;
            let s = spec.get_ref();
            let e = self.error_spec(
                (&s.depolarizing, &s.pauli, &s.over_rotation),
                &s.leakage,
                g.arity(),
            )?;
            noise.defaults.insert(g, e);
        }
        for o in &w.intrinsic_override {
            let s = o.get_ref();
            let g = gate_of(&s.gate, o.span())?;
            if s.qubits.len() != g.arity() {
                return self.err(
                    o.span(),
                    format!(
                        "gate {g} acts on {} qubit(s) but the override lists {}",
                        g.arity(),
                        s.qubits.len()
                    ),
                );
            }
            let qs = s
                .qubits
                .iter()
                .map(|id| self.qubit(id, "intrinsic_override"))
                .collect::<Result<Vec<_>>>()?;
            if qs.len() == 2 && layout.coupler(qs[0], qs[1]).is_none() {
                return self.err(
                    o.span(),
                    format!(
                        "{}-{} is not a coupler of the layout",
                        s.qubits[0].get_ref(),
                        s.qubits[1].get_ref()
                    ),
                );
            }
            let e = self.error_spec(
                (&s.depolarizing, &s.pauli, &s.over_rotation),
                &s.leakage,
                g.arity(),
            )?;
            let rev = if qs.len() == 2 { Some(vec![qs[1], qs[0]]) } else { None };
            if noise.overrides.contains_key(&(g, qs.clone()))
                || rev.is_some_and(|r| noise.overrides.contains_key(&(g, r)))
            {
                return self.err(
                    o.span(),
                    format!(
                        "a second override for {g} on {}",
                        s.qubits.iter().map(|q| q.get_ref().as_str()).collect::<Vec<_>>().join("-")
                    ),
                );
            }
            noise.overrides.insert((g, qs), e);
        }
        if let Some(r) = &w.readout {
            let d = Readout {
                p1_given_0: r
                    .p1_given_0
                    .as_ref()
                    .map_or(Ok(0.0), |v| self.prob(v, "p1_given_0"))?,
                p0_given_1: r
                    .p0_given_1
                    .as_ref()
                    .map_or(Ok(0.0), |v| self.prob(v, "p0_given_1"))?,
            };
            noise.readout = vec![d; layout.n_qubits()];
            let mut first_line: HashMap<QubitIx, usize> = HashMap::new();
            for q in &r.qubits {
                let s = q.get_ref();
                let ix = self.qubit(&s.qubit, "readout.qubits")?;
                let line = line_of(self.text, q.span().start);
                if let Some(first) = first_line.insert(ix, line) {
                    return self.err(
                        q.span(),
                        format!(
                            "a second [[readout.qubits]] entry for {} (the first is on line \
                             {first}); give one entry per qubit",
                            echo(s.qubit.get_ref())
                        ),
                    );
                }
                noise.readout[ix] = Readout {
                    p1_given_0: self.prob(&s.p1_given_0, "p1_given_0")?,
                    p0_given_1: self.prob(&s.p0_given_1, "p0_given_1")?,
                };
            }
        }
        for c in &w.context {
            let s = c.get_ref();
            let victim = self.qubit(&s.victim, "context victim")?;
            let aggressor = self.qubit(&s.aggressor, "context aggressor")?;
            if victim == aggressor {
                return self.err(c.span(), "victim and aggressor are the same qubit");
            }
            let role = self.role(s.role.as_deref(), c.span())?;
            self.unseen(&mut noise.warnings, "context", victim, aggressor, c.span());
            let mut e = self.error_spec((&s.depolarizing, &None, &s.rotation), &None, 1)?;
            if let Some(d) = &s.dephasing {
                // Dephasing after depolarizing: compose the two Pauli channels exactly.
                let z = self.prob(d, "dephasing")?;
                let p = e.pauli.clone();
                e.pauli = vec![
                    (1.0 - z) * p[0] + z * p[3],
                    (1.0 - z) * p[1] + z * p[2],
                    (1.0 - z) * p[2] + z * p[1],
                    (1.0 - z) * p[3] + z * p[0],
                ];
            }
            noise.context.push(ContextTerm {
                victim,
                aggressor,
                role,
                error: e,
                line: line_of(self.text, c.span().start),
                source: "context",
            });
        }
        for z in &w.zz {
            let s = z.get_ref();
            if s.qubits.len() != 2 {
                return self.err(z.span(), "a zz term names exactly two qubits");
            }
            let a = self.qubit(&s.qubits[0], "zz")?;
            let b = self.qubit(&s.qubits[1], "zz")?;
            if a == b {
                return self.err(z.span(), "a zz term joins two different qubits");
            }
            self.unseen(&mut noise.warnings, "zz", a, b, z.span());
            let phi = *s.angle.get_ref();
            if !phi.is_finite() {
                return self.err(s.angle.span(), format!("zz angle {phi} is not finite"));
            }
            let rate = zz_dephasing_rate(phi);
            for (victim, aggressor) in [(a, b), (b, a)] {
                let mut e = ErrorSpec::none(1);
                e.pauli = vec![1.0 - rate, 0.0, 0.0, rate];
                noise.context.push(ContextTerm {
                    victim,
                    aggressor,
                    role: Role::Both,
                    error: e,
                    line: line_of(self.text, z.span().start),
                    source: "zz",
                });
            }
        }
        let mut first_line: HashMap<([QubitIx; 2], Aggressor), usize> = HashMap::new();
        for g in &w.gate_context {
            let term = self.gate_context(g)?;
            let mut victim = term.victim;
            victim.sort_unstable();
            if let Some(first) = first_line.insert((victim, term.aggressor), term.line) {
                return self.err(
                    g.span(),
                    format!(
                        "a second [[gate_context]] term for victim {} and aggressor {} (the \
                         first is on line {first}); give one term per victim and aggressor",
                        term.victim_label(layout),
                        term.aggressor.label(layout)
                    ),
                );
            }
            if !term.is_near(layout) {
                let (v, a) = (term.victim_label(layout), term.aggressor.label(layout));
                self.warn_unseen(&mut noise.warnings, "gate_context", &v, &a, g.span());
            }
            noise.gate_context.push(term);
        }
        for r in &w.readout_crosstalk {
            let s = r.get_ref();
            let victim = self.qubit(&s.victim, "readout_crosstalk victim")?;
            let neighbour = self.qubit(&s.neighbour, "readout_crosstalk neighbour")?;
            if victim == neighbour {
                return self.err(r.span(), "victim and neighbour are the same qubit");
            }
            let flip = self.prob(&s.flip, "flip")?;
            self.unseen(&mut noise.warnings, "readout_crosstalk", victim, neighbour, r.span());
            noise.readout_crosstalk.push(ReadoutCrosstalk { victim, neighbour, flip });
        }
        for d in &w.drift {
            let s = d.get_ref();
            let qubit = self.qubit(&s.qubit, "drift")?;
            let sigma = *s.sigma.get_ref();
            if !(sigma.is_finite() && sigma >= 0.0) {
                return self.err(
                    s.sigma.span(),
                    format!("drift sigma {sigma} is not a finite non-negative angle in radians"),
                );
            }
            let axis = s.axis.as_deref().unwrap_or("Z");
            let pauli = match axis.chars().map(pauli_letter).collect::<Option<Vec<u8>>>() {
                Some(p) if p.len() == 1 && p[0] != 0 => p[0],
                _ => {
                    return self
                        .err(d.span(), format!("drift axis '{}' is not X, Y or Z", echo(axis)))
                }
            };
            let role = self.role(s.role.as_deref(), d.span())?;
            noise.drift.push(Drift { qubit, sigma_rad: sigma, pauli, role });
        }
        Ok(noise)
    }
}

/// Victim dephasing rate per layer of the Pauli-twirled conditional phase CP(phi) =
/// diag(1, 1, 1, e^{i phi}).
///
/// Writing |11><11| = (I - Z1 - Z2 + Z1 Z2)/4 gives CP = c_I I + c (Z1 + Z2 - Z1 Z2) with
/// |c|^2 = |e^{i phi} - 1|^2 / 16 = sin^2(phi/2)/4. Twirling over Paulis keeps the Pauli
/// channel with probabilities |c_P|^2 (Pauli twirl, common practice): Z1, Z2 and Z1Z2 each
/// sin^2(phi/2)/4. The victim's phase flips under Z1 and under Z1Z2, so its marginal
/// dephasing rate is sin^2(phi/2)/2. No frame correction of the single-qubit Z parts is
/// assumed.
pub fn zz_dephasing_rate(phi_rad: f64) -> f64 {
    (phi_rad / 2.0).sin().powi(2) / 2.0
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::layout::generate::grid;

    fn parse(text: &str) -> Result<Noise> {
        Noise::from_toml_str(text, Path::new("noise.toml"), &grid(2, 2))
    }

    fn line_of_err(e: &Error) -> Option<usize> {
        match e {
            Error::Input { location, .. } => location.line,
            _ => None,
        }
    }

    #[test]
    fn full_file_parses() {
        let n = parse(
            r#"
schema = 1
[intrinsic.sx]
depolarizing = 1e-3
[intrinsic.cz]
pauli = { ZZ = 1e-3, XI = 2e-3 }
over_rotation = { angle = 0.01, axis = "ZZ" }
[[intrinsic_override]]
gate = "sx"
qubits = ["q1"]
pauli = { X = 1e-4, Z = 3e-4 }
leakage = 1e-5
[readout]
p1_given_0 = 0.01
p0_given_1 = 0.02
[[readout.qubits]]
qubit = "q3"
p1_given_0 = 0.03
p0_given_1 = 0.04
[[context]]
victim = "q0"
aggressor = "q1"
role = "idle"
dephasing = 5e-3
rotation = { angle = 0.05, axis = "X" }
[[zz]]
qubits = ["q2", "q3"]
angle = 0.1
[[readout_crosstalk]]
victim = "q0"
neighbour = "q2"
flip = 0.02
[[drift]]
qubit = "q3"
sigma = 0.03
"#,
        )
        .unwrap();
        let sx0 = n.intrinsic(Gate::Sx, &[0]).unwrap();
        assert!((sx0.pauli[1] - 1e-3 / 3.0).abs() < 1e-15);
        let sx1 = n.intrinsic(Gate::Sx, &[1]).unwrap();
        assert!((sx1.pauli[3] - 3e-4).abs() < 1e-15 && sx1.leakage == 1e-5);
        // XI = X on the first operand: index 1; swapped operands put it at index 4.
        let cz = n.intrinsic(Gate::Cz, &[0, 1]).unwrap();
        assert!((cz.pauli[1] - 2e-3).abs() < 1e-15);
        assert!(n.intrinsic(Gate::X, &[0]).is_none());
        assert_eq!(n.readout(3).p0_given_1, 0.04);
        assert_eq!(n.readout(1).p1_given_0, 0.01);
        assert_eq!(n.context.len(), 3);
        assert_eq!(n.context[0].role, Role::Idle);
        assert!((n.context[0].error.pauli[3] - 5e-3).abs() < 1e-15);
        assert_eq!(n.drift[0].pauli, 3);
    }

    #[test]
    fn override_on_a_coupler_follows_qubit_identity() {
        let n = parse(
            "schema = 1\n[[intrinsic_override]]\ngate = \"cz\"\nqubits = [\"q0\", \"q1\"]\n\
             pauli = { XZ = 1e-3 }\n",
        )
        .unwrap();
        // XZ on (q0, q1): X on q0 = index 1 + 4*3 = 13; seen from (q1, q0) it is ZX = 3 + 4.
        assert!((n.intrinsic(Gate::Cz, &[0, 1]).unwrap().pauli[13] - 1e-3).abs() < 1e-15);
        assert!((n.intrinsic(Gate::Cz, &[1, 0]).unwrap().pauli[7] - 1e-3).abs() < 1e-15);
    }

    #[test]
    fn a_second_readout_entry_for_a_qubit_names_both_lines() {
        let text = "schema = 1\n[readout]\n[[readout.qubits]]\nqubit = \"q3\"\np1_given_0 = 0.01\n\
                    p0_given_1 = 0.02\n[[readout.qubits]]\nqubit = \"q3\"\np1_given_0 = 0.03\n\
                    p0_given_1 = 0.04\n";
        let e = parse(text).unwrap_err();
        assert_eq!(line_of_err(&e), Some(7), "{e}");
        assert!(e.to_string().contains("the first is on line 3"), "{e}");
    }

    #[test]
    fn crosstalk_between_non_neighbours_is_warned_about() {
        let layout = grid(3, 3);
        let text = "schema = 1\n[[context]]\nvictim = \"q0\"\naggressor = \"q8\"\n\
                    depolarizing = 0.01\n[[zz]]\nqubits = [\"q0\", \"q1\"]\nangle = 0.1\n\
                    [[readout_crosstalk]]\nvictim = \"q2\"\nneighbour = \"q6\"\nflip = 0.01\n";
        let n = Noise::from_toml_str(text, Path::new("n.toml"), &layout).unwrap();
        let w: Vec<&str> = n.warnings().iter().map(|w| w.message.as_str()).collect();
        assert_eq!(w.len(), 2, "{w:?}");
        assert!(w[0].starts_with("n.toml line 2: the [[context]] term joins q0 and q8"), "{w:?}");
        assert!(w[1].contains("[[readout_crosstalk]] term joins q2 and q6"), "{w:?}");
        assert!(n.without_crosstalk().warnings().is_empty());
    }

    #[test]
    fn errors_name_the_line() {
        let e = parse("schema = 1\n\n[intrinsic.sx]\ndepolarizing = 1.5\n").unwrap_err();
        assert_eq!(line_of_err(&e), Some(4), "{e}");
        assert!(e.to_string().contains("[0, 1]"), "{e}");
        let e =
            parse("schema = 1\n[[context]]\nvictim = \"q9\"\naggressor = \"q1\"\n").unwrap_err();
        assert_eq!(line_of_err(&e), Some(3), "{e}");
        assert!(e.to_string().contains("q9"), "{e}");
        let e = parse("schema = 1\n[intrinsic.sx]\nbogus = 1\n").unwrap_err();
        assert_eq!(line_of_err(&e), Some(3), "{e}");
        let e = parse("schema = 1\n[intrinsic.rz]\ndepolarizing = 0.1\n").unwrap_err();
        assert!(e.to_string().contains("virtual"), "{e}");
        let e = parse("schema = 2\n").unwrap_err();
        assert_eq!(line_of_err(&e), Some(1), "{e}");
        let e = parse("schema = 1\n[intrinsic.cz]\npauli = { X = 0.1 }\n").unwrap_err();
        assert!(e.to_string().contains("2 letter"), "{e}");
        let e =
            parse("schema = 1\n[[intrinsic_override]]\ngate = \"cz\"\nqubits = [\"q0\", \"q3\"]\n")
                .unwrap_err();
        assert!(e.to_string().contains("not a coupler"), "{e}");
    }

    #[test]
    fn gate_context_terms_are_validated_with_their_line() {
        // grid(3, 3): q0 q1 q2 / q3 q4 q5 / q6 q7 q8, couplers along rows and columns.
        let layout = grid(3, 3);
        let head = "schema = 1\n[[gate_context]]\nvictim = [\"q1\", \"q0\"]\n";
        let with = |aggr: &str, rest: &str| format!("{head}aggressor = {aggr}\n{rest}");
        let parse = |t: &str| Noise::from_toml_str(t, Path::new("n.toml"), &layout);
        let n = parse(&with("[\"q4\", \"q3\"]", "pauli = { ZI = 1e-3, ZZ = 2e-3 }\n")).unwrap();
        let t = &n.gate_context()[0];
        assert_eq!((t.victim, t.aggressor), ([1, 0], Aggressor::Coupler(3, 4)));
        assert_eq!((t.line, t.victim_label(&layout)), (2, "q0-q1".to_string()));
        // ZI: Z on the first listed victim qubit (q1).
        assert!(
            (t.error.pauli[3] - 1e-3).abs() < 1e-15 && (t.error.pauli[15] - 2e-3).abs() < 1e-15
        );
        assert!(n.warnings().is_empty() && n.without_crosstalk().gate_context().is_empty());
        let q = parse(&with("[\"q2\"]", "rotation = { angle = 0.1, axis = \"ZZ\" }\n")).unwrap();
        assert_eq!(q.gate_context()[0].aggressor, Aggressor::Qubit(2));
        // Far couplers are simulated, with a warning.
        let far = parse(&with("[\"q6\", \"q7\"]", "depolarizing = 1e-3\n")).unwrap();
        let w = &far.warnings()[0].message;
        assert!(
            w.starts_with("n.toml line 2: the [[gate_context]] term joins q0-q1 and q6-q7"),
            "{w}"
        );
        for (aggr, rest, line, want) in [
            ("[\"q1\", \"q2\"]", "", 2, "shares qubit q1 with the victim"),
            ("[\"q0\"]", "", 2, "shares qubit q0"),
            ("[\"q3\", \"q5\"]", "", 2, "aggressor q3-q5 is not a coupler"),
            ("[\"q3\", \"q4\", \"q5\"]", "", 2, "names 3 qubits"),
            ("[\"q9\"]", "", 4, "qubit 'q9', which is not in layout"),
            ("[\"q4\"]", "pauli = { Z = 1e-3 }\n", 5, "2 letter"),
            ("[\"q4\"]", "leakage = 1e-3\n", 5, "unknown field"),
            (
                "[\"q4\", \"q3\"]",
                "[[gate_context]]\nvictim = [\"q0\", \"q1\"]\naggressor = [\"q3\", \"q4\"]\n",
                5,
                "a second [[gate_context]] term for victim q0-q1 and aggressor q3-q4 (the first is \
                 on line 2)",
            ),
        ] {
            let e = parse(&with(aggr, rest)).unwrap_err();
            assert_eq!(line_of_err(&e), Some(line), "{e}");
            assert!(e.to_string().contains(want), "{e}");
        }
        let e = parse(
            "schema = 1\n[[gate_context]]\nvictim = [\"q0\", \"q4\"]\naggressor = [\"q2\"]\n",
        )
        .unwrap_err();
        assert!(e.to_string().contains("victim q0-q4 is not a coupler"), "{e}");
        let e = parse("schema = 1\n[[gate_context]]\nvictim = [\"q0\"]\naggressor = [\"q2\"]\n")
            .unwrap_err();
        assert!(e.to_string().contains("names 1 qubit(s)"), "{e}");
    }

    #[test]
    fn zz_rate_small_angle() {
        // sin^2(phi/2)/2 ~ phi^2/8 for small phi (Taylor expansion).
        assert!((zz_dephasing_rate(0.02) - 0.02f64.powi(2) / 8.0).abs() < 1e-8);
        assert!((zz_dephasing_rate(std::f64::consts::PI) - 0.5).abs() < 1e-12);
    }
}
