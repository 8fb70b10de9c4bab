//! Truth files: what a noise scenario injects, in the units the audit reports.
//!
//! For every directed neighbour pair the context error per layer on the victim (split by
//! victim role), and per qubit and coupler the intrinsic error per operation kind, each as
//! a half diamond-norm distance and as an entanglement infidelity (1 - F_pro). They differ
//! for coherent errors: a rotation by theta has sin(theta/2) and sin^2(theta/2) (J. Watrous,
//! The Theory of Quantum Information (2018), unitary channels). Half-diamond figures are
//! exact for Pauli channels (1 - F_pro) and unitaries (sin of half the eigenphase gap); for a
//! composition of both they are the triangle-inequality upper bound (sum of the parts), and
//! `half_diamond_method` says which. Gate pairs (written only when the noise file has
//! `gate_context` terms) give the same measures per layer in which the victim's two-qubit gate
//! runs beside its aggressor, and the average gate infidelity 1 - F_avg, from
//! F_avg = (d F_pro + 1)/(d + 1) with d = 4 (M. Horodecki, P. Horodecki, R. Horodecki, PRA 60,
//! 1888 (1999); M. Nielsen, Phys. Lett. A 303, 249 (2002)).
//!
//! ```json
//! {"schema": 1, "layout": "grid-4x4",
//!  "pairs": [{"victim": "q5", "aggressor": "q6", "neighbours": true,
//!             "driven": {"half_diamond": 0.03999, "infidelity": 0.0015991,
//!                        "half_diamond_method": "exact_unitary"},
//!             "idle":   {"half_diamond": 0.03999, "infidelity": 0.0015991,
//!                        "half_diamond_method": "exact_unitary"},
//!             "role_dependent": false, "sources": ["context (line 83)"]}],
//!  "qubits": [{"qubit": "q8", "p1_given_0": 0.012, "p0_given_1": 0.02,
//!              "intrinsic": [{"kind": "sx@q8", "leakage": 0.0,
//!                             "error": {"half_diamond": 0.001, "infidelity": 0.001,
//!                                       "half_diamond_method": "exact_pauli"}}],
//!              "drift": [{"sigma_rad": 0.03, "axis": "Z", "role": "both",
//!                         "mean_infidelity_per_layer": 0.000225,
//!                         "mean_half_diamond_per_layer": 0.01197}]}],
//!  "couplers": [{"coupler": "q0-q1", "intrinsic": [{"kind": "cz@q0-q1", "leakage": 0.0,
//!                "error": {"half_diamond": 0.01, "infidelity": 0.01,
//!                          "half_diamond_method": "exact_pauli"}}]}],
//!  "readout_crosstalk": [{"victim": "q15", "neighbour": "q11", "flip": 0.02}],
//!  "gate_pairs": [{"victim": "q5-q6", "aggressor": "q9-q10", "aggressor_kind": "coupler",
//!                  "neighbours": true,
//!                  "error": {"half_diamond": 0.003, "infidelity": 0.003,
//!                            "half_diamond_method": "exact_pauli"},
//!                  "average_infidelity": 0.0024, "sources": ["gate_context (line 40)"]}]}
//! ```

// Index loops read like the matrix formulas they implement.
#![allow(clippy::needless_range_loop)]

use serde::Serialize;

use super::noise::{ErrorSpec, Noise, Role, Rotation};
use super::state::{pauli_mat, rotation1, BlockState, M};
use crate::gate::{Gate, Mat2};
use crate::layout::{Layout, QubitIx};
use num_complex::Complex64 as C;

/// The truth-file schema this build writes.
pub const SCHEMA: u32 = 1;

/// The whole truth file.
#[derive(Serialize, Debug, Clone)]
pub struct Truth {
    /// Format version, [`SCHEMA`].
    pub schema: u32,
    /// The layout's name.
    pub layout: String,
    /// One entry per directed pair (victim, aggressor): every neighbour pair of the layout,
    /// and any other pair the noise file gives a context term.
    pub pairs: Vec<PairTruth>,
    /// Per qubit: intrinsic errors per one-qubit kind, readout, drift.
    pub qubits: Vec<QubitTruth>,
    /// Per coupler: intrinsic errors per two-qubit kind.
    pub couplers: Vec<CouplerTruth>,
    /// Readout crosstalk terms.
    pub readout_crosstalk: Vec<ReadoutCrosstalkTruth>,
    /// One entry per `gate_context` term, in file order; absent when there are none (a pair
    /// not listed has no injected gate-context error).
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub gate_pairs: Vec<GatePairTruth>,
}

/// Injected context error on a coupler's two-qubit gate while a nearby coupler runs its gate
/// (or a nearby qubit is driven) in the same layer.
#[derive(Serialize, Debug, Clone)]
pub struct GatePairTruth {
    /// The victim coupler, `qa-qb` in the layout's order.
    pub victim: String,
    /// The aggressor: a coupler `qc-qd` (layout order) or a qubit `qe`.
    pub aggressor: String,
    /// `coupler` or `qubit`.
    pub aggressor_kind: &'static str,
    /// True when a qubit of the aggressor is in the neighbourhood of a victim qubit (the
    /// audit only sees those).
    pub neighbours: bool,
    /// Per layer in which the victim's gate runs beside the active aggressor: half-diamond
    /// distance and entanglement infidelity of the two-qubit error.
    pub error: ErrorMeasure,
    /// Average gate infidelity 1 - F_avg of the same error, [`average_infidelity`] with d = 4.
    pub average_infidelity: f64,
    /// The noise-file term behind it, e.g. `gate_context (line 40)`.
    pub sources: Vec<String>,
}

/// Average gate infidelity 1 - F_avg from the entanglement infidelity 1 - F_pro of a channel
/// on dimension `d`: F_avg = (d F_pro + 1)/(d + 1) (Horodecki, Horodecki, Horodecki, PRA 60,
/// 1888 (1999); Nielsen, Phys. Lett. A 303, 249 (2002)), so 1 - F_avg = d (1 - F_pro)/(d + 1).
pub fn average_infidelity(entanglement_infidelity: f64, d: usize) -> f64 {
    let d = d as f64;
    d * entanglement_infidelity / (d + 1.0)
}

/// Two measures of one channel's distance from the identity, per application (per layer).
#[derive(Serialize, Debug, Clone, Copy, PartialEq)]
pub struct ErrorMeasure {
    /// Half the diamond-norm distance from the identity (TVD units: the most any
    /// measurement's outcome distribution can move).
    pub half_diamond: f64,
    /// Entanglement infidelity 1 - F_pro.
    pub infidelity: f64,
    /// How `half_diamond` was obtained: `exact_pauli`, `exact_unitary`, `exact_identity` or
    /// `upper_bound_triangle`.
    pub half_diamond_method: &'static str,
}

impl ErrorMeasure {
    const NONE: ErrorMeasure =
        ErrorMeasure { half_diamond: 0.0, infidelity: 0.0, half_diamond_method: "exact_identity" };
}

/// Injected context error on `victim` in layers where `aggressor` is active.
#[derive(Serialize, Debug, Clone)]
pub struct PairTruth {
    /// Victim qubit id.
    pub victim: String,
    /// Aggressor qubit id.
    pub aggressor: String,
    /// True when the pair is a neighbour pair of the layout (the audit only sees those).
    pub neighbours: bool,
    /// Per layer while the victim is driven.
    pub driven: ErrorMeasure,
    /// Per layer while the victim idles.
    pub idle: ErrorMeasure,
    /// True when `driven` and `idle` differ.
    pub role_dependent: bool,
    /// The noise-file terms behind it, e.g. `context (line 12)`.
    pub sources: Vec<String>,
}

/// One operation kind's intrinsic error.
#[derive(Serialize, Debug, Clone)]
pub struct KindTruth {
    /// The kind, e.g. `sx@q3` or `cz@q1-q2`.
    pub kind: String,
    /// Distance of the unitary-error-Pauli channel from the identity.
    pub error: ErrorMeasure,
    /// Leakage probability per application, per operand.
    pub leakage: f64,
}

/// Per-qubit truth.
#[derive(Serialize, Debug, Clone)]
pub struct QubitTruth {
    /// Qubit id.
    pub qubit: String,
    /// One-qubit kinds (non-virtual native gates, `id`, and any gate with an error).
    pub intrinsic: Vec<KindTruth>,
    /// P(read 1 | 0).
    pub p1_given_0: f64,
    /// P(read 0 | 1).
    pub p0_given_1: f64,
    /// Drift terms on this qubit.
    pub drift: Vec<DriftTruth>,
}

/// One drift term's level.
#[derive(Serialize, Debug, Clone)]
pub struct DriftTruth {
    /// Standard deviation of the per-circuit angle, radians.
    pub sigma_rad: f64,
    /// Rotation axis, X, Y or Z.
    pub axis: &'static str,
    /// Victim roles it acts in.
    pub role: &'static str,
    /// Mean infidelity per layer, E[sin^2(delta/2)] = (1 - exp(-sigma^2/2))/2 for
    /// delta ~ N(0, sigma^2) (Gaussian characteristic function).
    pub mean_infidelity_per_layer: f64,
    /// Mean half-diamond distance per layer, E|sin(delta/2)| ~ sigma/sqrt(2 pi) (small
    /// angles).
    pub mean_half_diamond_per_layer: f64,
}

/// Per-coupler truth.
#[derive(Serialize, Debug, Clone)]
pub struct CouplerTruth {
    /// The coupler, `qa-qb`.
    pub coupler: String,
    /// Its own two-qubit natives as operation kinds (a directed one in the direction it runs).
    pub intrinsic: Vec<KindTruth>,
}

/// One readout crosstalk term.
#[derive(Serialize, Debug, Clone)]
pub struct ReadoutCrosstalkTruth {
    /// Qubit whose bit flips.
    pub victim: String,
    /// Qubit whose reading 1 triggers the flip.
    pub neighbour: String,
    /// Flip probability.
    pub flip: f64,
}

/// Half-diamond distance of a rotation exp(-i theta/2 P) from the identity: sin of half
/// the eigenphase gap theta, folded into [0, pi].
pub fn rotation_half_diamond(theta_rad: f64) -> f64 {
    let t = theta_rad.abs() % (2.0 * std::f64::consts::PI);
    let gap = t.min(2.0 * std::f64::consts::PI - t);
    (gap / 2.0).sin()
}

/// Both measures of an error spec (coherent part then Pauli part; leakage not included).
/// F_pro of a Pauli channel after U = cos(theta/2) I - i sin(theta/2) A is
/// p_I cos^2(theta/2) + p_A sin^2(theta/2) (Kraus operators sqrt(p_P) P U).
pub fn spec_measure(e: &ErrorSpec) -> ErrorMeasure {
    // Summing the error terms avoids the cancellation in 1 - p_I.
    let pauli_rate: f64 = e.pauli[1..].iter().sum();
    match &e.rotation {
        None if pauli_rate <= 0.0 => ErrorMeasure::NONE,
        None => ErrorMeasure {
            half_diamond: pauli_rate,
            infidelity: pauli_rate,
            half_diamond_method: "exact_pauli",
        },
        Some(r) => {
            let a: usize = r.pauli.iter().enumerate().map(|(j, &p)| (p as usize) << (2 * j)).sum();
            let (c2, s2) = ((r.angle_rad / 2.0).cos().powi(2), (r.angle_rad / 2.0).sin().powi(2));
            let f_pro = e.pauli[0] * c2 + e.pauli[a] * s2;
            let rot = rotation_half_diamond(r.angle_rad);
            if pauli_rate <= 0.0 {
                ErrorMeasure {
                    half_diamond: rot,
                    infidelity: 1.0 - f_pro,
                    half_diamond_method: "exact_unitary",
                }
            } else {
                ErrorMeasure {
                    half_diamond: (rot + pauli_rate).min(1.0),
                    infidelity: 1.0 - f_pro,
                    half_diamond_method: "upper_bound_triangle",
                }
            }
        }
    }
}

/// Pauli transfer matrix of a sequence of one-qubit error specs (applied in order).
fn ptm1(steps: &[&ErrorSpec]) -> [[f64; 4]; 4] {
    let mut r = [[0.0; 4]; 4];
    for j in 0..4u8 {
        let pj = pauli_mat(j);
        let mut st = BlockState::ground(1);
        let mut m: M = [[C::new(0.0, 0.0); 4]; 4];
        for a in 0..2 {
            for b in 0..2 {
                m[a][b] = pj[a][b];
            }
        }
        st.rho = m;
        for s in steps {
            st.apply_error(s, &[0]);
        }
        for i in 0..4u8 {
            let pi = pauli_mat(i);
            let mut tr = C::new(0.0, 0.0);
            for a in 0..2 {
                for b in 0..2 {
                    tr += pi[a][b] * st.rho[b][a];
                }
            }
            r[i as usize][j as usize] = tr.re / 2.0;
        }
    }
    r
}

/// Both measures of a composition of one-qubit specs (no leakage).
pub fn composed_measure(steps: &[&ErrorSpec]) -> ErrorMeasure {
    match steps {
        [] => return ErrorMeasure::NONE,
        [one] => return spec_measure(one),
        _ => {}
    }
    let r = ptm1(steps);
    let infidelity = (1.0 - (r[0][0] + r[1][1] + r[2][2] + r[3][3]) / 4.0).max(0.0);
    let coherent = steps.iter().any(|s| s.rotation.is_some());
    let stochastic = steps.iter().any(|s| s.pauli[0] < 1.0);
    let (half_diamond, method) = match (coherent, stochastic) {
        (false, false) => (0.0, "exact_identity"),
        (false, true) => {
            // Compose the Pauli probabilities directly (Paulis multiply by XOR of their
            // (x, z) bits, up to phase), so that small rates keep their digits.
            let bits = |p: usize| [0usize, 2, 3, 1][p];
            let from_bits = |b: usize| [0usize, 3, 1, 2][b];
            let mut acc = vec![1.0, 0.0, 0.0, 0.0];
            for s in steps {
                let mut next = vec![0.0; 4];
                for (i, a) in acc.iter().enumerate() {
                    for (j, b) in s.pauli.iter().enumerate() {
                        next[from_bits(bits(i) ^ bits(j))] += a * b;
                    }
                }
                acc = next;
            }
            let rate: f64 = acc[1..].iter().sum();
            return ErrorMeasure {
                half_diamond: rate,
                infidelity: rate,
                half_diamond_method: "exact_pauli",
            };
        }
        (true, false) => {
            let mut u: Mat2 =
                [[C::new(1.0, 0.0), C::new(0.0, 0.0)], [C::new(0.0, 0.0), C::new(1.0, 0.0)]];
            for s in steps {
                if let Some(rot) = &s.rotation {
                    u = mul2(&rotation1(rot), &u);
                }
            }
            let c = ((u[0][0] + u[1][1]).norm() / 2.0).min(1.0);
            ((1.0 - c * c).sqrt(), "exact_unitary")
        }
        (true, true) => {
            let sum: f64 = steps.iter().map(|s| spec_measure(s).half_diamond).sum();
            (sum.min(1.0), "upper_bound_triangle")
        }
    };
    ErrorMeasure { half_diamond, infidelity, half_diamond_method: method }
}

fn mul2(a: &Mat2, b: &Mat2) -> Mat2 {
    let mut m = [[C::new(0.0, 0.0); 2]; 2];
    for i in 0..2 {
        for j in 0..2 {
            m[i][j] = a[i][0] * b[0][j] + a[i][1] * b[1][j];
        }
    }
    m
}

fn axis_name(p: u8) -> &'static str {
    match p {
        1 => "X",
        2 => "Y",
        _ => "Z",
    }
}

fn kind_truth(noise: &Noise, gate: Gate, qs: &[QubitIx], label: String) -> KindTruth {
    match noise.intrinsic(gate, qs) {
        Some(e) => KindTruth { kind: label, error: spec_measure(&e), leakage: e.leakage },
        None => KindTruth { kind: label, error: ErrorMeasure::NONE, leakage: 0.0 },
    }
}

/// Computes the truth of a scenario on its layout.
pub fn truth(layout: &Layout, noise: &Noise) -> Truth {
    let mut pair_keys: Vec<(QubitIx, QubitIx)> = (0..layout.n_qubits())
        .flat_map(|q| layout.neighbours(q).iter().map(move |&r| (q, r)))
        .collect();
    for t in noise.context() {
        pair_keys.push((t.victim, t.aggressor));
    }
    pair_keys.sort_unstable();
    pair_keys.dedup();
    let pairs = pair_keys
        .into_iter()
        .map(|(q, r)| {
            let terms: Vec<_> =
                noise.context().iter().filter(|t| t.victim == q && t.aggressor == r).collect();
            let measure = |role: Role| {
                let steps: Vec<&ErrorSpec> =
                    terms.iter().filter(|t| t.role.admits(role)).map(|t| &t.error).collect();
                composed_measure(&steps)
            };
            let (driven, idle) = (measure(Role::Driven), measure(Role::Idle));
            PairTruth {
                victim: layout.id(q).to_string(),
                aggressor: layout.id(r).to_string(),
                neighbours: layout.are_neighbours(q, r),
                role_dependent: driven != idle,
                driven,
                idle,
                sources: terms.iter().map(|t| format!("{} (line {})", t.source, t.line)).collect(),
            }
        })
        .collect();
    let mut one_q: Vec<Gate> = std::iter::once(Gate::Id)
        .chain(layout.gates.one_qubit.iter().copied().filter(|&g| !layout.is_virtual(g)))
        .chain(noise.gates_with_errors().into_iter().filter(|g| g.arity() == 1))
        .collect();
    one_q.sort_unstable();
    one_q.dedup();
    let qubits = (0..layout.n_qubits())
        .map(|q| {
            let ro = noise.readout(q);
            QubitTruth {
                qubit: layout.id(q).to_string(),
                intrinsic: one_q
                    .iter()
                    .map(|&g| kind_truth(noise, g, &[q], format!("{g}@{}", layout.id(q))))
                    .collect(),
                p1_given_0: ro.p1_given_0,
                p0_given_1: ro.p0_given_1,
                drift: noise
                    .drift()
                    .iter()
                    .filter(|d| d.qubit == q)
                    .map(|d| DriftTruth {
                        sigma_rad: d.sigma_rad,
                        axis: axis_name(d.pauli),
                        role: d.role.name(),
                        mean_infidelity_per_layer: (1.0 - (-d.sigma_rad.powi(2) / 2.0).exp()) / 2.0,
                        mean_half_diamond_per_layer: d.sigma_rad
                            / (2.0 * std::f64::consts::PI).sqrt(),
                    })
                    .collect(),
            }
        })
        .collect();
    // Each coupler lists only its own natives; a directed one (cx, ecr) is labelled and
    // measured in the direction the layout runs it, as the audit names its kind.
    let couplers = layout
        .couplers
        .iter()
        .enumerate()
        .map(|(c, &(a, b))| {
            let name = format!("{}-{}", layout.id(a), layout.id(b));
            let mut gates: Vec<Gate> = layout.natives(c).iter().map(|n| n.gate).collect();
            gates.sort_unstable();
            gates.dedup();
            CouplerTruth {
                intrinsic: gates
                    .iter()
                    .map(|&g| {
                        let (x, y) =
                            if g.is_symmetric() { (a, b) } else { layout.coupler_direction(c) };
                        kind_truth(
                            noise,
                            g,
                            &[x, y],
                            format!("{g}@{}-{}", layout.id(x), layout.id(y)),
                        )
                    })
                    .collect(),
                coupler: name,
            }
        })
        .collect();
    let readout_crosstalk = noise
        .readout_crosstalk()
        .iter()
        .map(|t| ReadoutCrosstalkTruth {
            victim: layout.id(t.victim).to_string(),
            neighbour: layout.id(t.neighbour).to_string(),
            flip: t.flip,
        })
        .collect();
    let gate_pairs = noise
        .gate_context()
        .iter()
        .map(|t| {
            // One term per victim and aggressor (the noise file refuses a second), so the
            // measures of its spec are those of the pair.
            let error = spec_measure(&t.error);
            GatePairTruth {
                victim: t.victim_label(layout),
                aggressor: t.aggressor.label(layout),
                aggressor_kind: t.aggressor.kind_name(),
                neighbours: t.is_near(layout),
                average_infidelity: average_infidelity(error.infidelity, 4),
                error,
                sources: vec![format!("gate_context (line {})", t.line)],
            }
        })
        .collect();
    Truth {
        schema: SCHEMA,
        layout: layout.name.clone(),
        pairs,
        qubits,
        couplers,
        readout_crosstalk,
        gate_pairs,
    }
}

/// A Rotation helper for tests and callers building specs in code.
pub fn rotation_spec(angle_rad: f64, axis: u8) -> ErrorSpec {
    let mut e = ErrorSpec::none(1);
    e.rotation = Some(Rotation { angle_rad, pauli: vec![axis] });
    e
}

#[cfg(test)]
mod tests {
    use super::*;

    fn pauli_spec(p: [f64; 3]) -> ErrorSpec {
        ErrorSpec {
            pauli: vec![1.0 - p.iter().sum::<f64>(), p[0], p[1], p[2]],
            rotation: None,
            leakage: 0.0,
        }
    }

    /// Average gate fidelity over the 6 Pauli eigenstates, a state 2-design for d = 2
    /// (common practice), computed by running the channel on each state.
    fn f_avg_two_design(steps: &[&ErrorSpec]) -> f64 {
        let h = std::f64::consts::FRAC_1_SQRT_2;
        let states: [[C; 2]; 6] = [
            [C::new(1.0, 0.0), C::new(0.0, 0.0)],
            [C::new(0.0, 0.0), C::new(1.0, 0.0)],
            [C::new(h, 0.0), C::new(h, 0.0)],
            [C::new(h, 0.0), C::new(-h, 0.0)],
            [C::new(h, 0.0), C::new(0.0, h)],
            [C::new(h, 0.0), C::new(0.0, -h)],
        ];
        let mut total = 0.0;
        for psi in states {
            let mut st = BlockState::ground(1);
            for a in 0..2 {
                for b in 0..2 {
                    st.rho[a][b] = psi[a] * psi[b].conj();
                }
            }
            for s in steps {
                st.apply_error(s, &[0]);
            }
            let mut f = C::new(0.0, 0.0);
            for a in 0..2 {
                for b in 0..2 {
                    f += psi[a].conj() * st.rho[a][b] * psi[b];
                }
            }
            total += f.re;
        }
        total / 6.0
    }

    #[test]
    fn average_fidelity_matches_process_fidelity() {
        // F_avg = (d F_pro + 1)/(d + 1) (Nielsen, Phys. Lett. A 303, 249 (2002)), d = 2.
        let rot = rotation_spec(0.3, 1);
        let mut mixed = pauli_spec([1e-3, 2e-3, 5e-3]);
        mixed.rotation = Some(Rotation { angle_rad: 0.2, pauli: vec![3] });
        let deph = pauli_spec([0.0, 0.0, 0.04]);
        let cases: Vec<Vec<&ErrorSpec>> = vec![
            vec![&rot],
            vec![&mixed],
            vec![&deph],
            vec![&rot, &deph],
            vec![&deph, &mixed, &rot],
        ];
        for steps in cases {
            let m = composed_measure(&steps);
            let f_pro = 1.0 - m.infidelity;
            let want = (2.0 * f_pro + 1.0) / 3.0;
            let got = f_avg_two_design(&steps);
            assert!((got - want).abs() < 1e-12, "{got} vs {want} ({} steps)", steps.len());
        }
    }

    #[test]
    fn closed_form_infidelity_matches_ptm() {
        let mut e = pauli_spec([1e-3, 0.0, 4e-3]);
        e.rotation = Some(Rotation { angle_rad: 0.5, pauli: vec![1] });
        let closed = spec_measure(&e).infidelity;
        let r = ptm1(&[&e]);
        let ptm = 1.0 - (r[0][0] + r[1][1] + r[2][2] + r[3][3]) / 4.0;
        assert!((closed - ptm).abs() < 1e-12);
    }

    #[test]
    fn rotation_measures() {
        // sin(theta/2) and sin^2(theta/2) (Watrous 2018, unitary channels).
        let m = spec_measure(&rotation_spec(0.08, 1));
        assert!((m.half_diamond - 0.04f64.sin()).abs() < 1e-12);
        assert!((m.infidelity - 0.04f64.sin().powi(2)).abs() < 1e-12);
        assert_eq!(m.half_diamond_method, "exact_unitary");
        // Two rotations about the same axis compose into one.
        let a = rotation_spec(0.05, 3);
        let m2 = composed_measure(&[&a, &a]);
        assert!((m2.half_diamond - 0.05f64.sin()).abs() < 1e-12);
        assert!(
            (rotation_half_diamond(2.0 * std::f64::consts::PI - 0.1) - 0.05f64.sin()).abs() < 1e-12
        );
    }

    #[test]
    fn composed_pauli_rates_match_the_ptm() {
        let a = pauli_spec([1e-3, 0.0, 2e-3]);
        let b = pauli_spec([0.0, 5e-4, 4e-3]);
        let m = composed_measure(&[&a, &b]);
        let r = ptm1(&[&a, &b]);
        let ptm = 1.0 - (r[0][0] + r[1][1] + r[2][2] + r[3][3]) / 4.0;
        assert_eq!(m.half_diamond_method, "exact_pauli");
        assert!((m.infidelity - ptm).abs() < 1e-12 && m.half_diamond == m.infidelity);
        // To first order the rates add.
        assert!((m.infidelity - 7.5e-3).abs() < 1e-4);
    }

    /// A two-qubit error spec: Pauli rates by label index (sum_j p_j 4^j), optional rotation.
    fn spec2(rates: &[(usize, f64)], rotation: Option<(f64, [u8; 2])>) -> ErrorSpec {
        let mut e = ErrorSpec::none(2);
        for &(i, p) in rates {
            e.pauli[i] += p;
            e.pauli[0] -= p;
        }
        e.rotation = rotation.map(|(a, p)| Rotation { angle_rad: a, pauli: p.to_vec() });
        e
    }

    /// The 4x4 matrix of a two-qubit Pauli by label index (basis bit(q0) + 2 bit(q1)).
    fn pauli4(idx: usize) -> [[C; 4]; 4] {
        let (p0, p1) = (pauli_mat((idx & 3) as u8), pauli_mat((idx >> 2) as u8));
        let mut m = [[C::new(0.0, 0.0); 4]; 4];
        for x in 0..4 {
            for y in 0..4 {
                m[x][y] = p0[x & 1][y & 1] * p1[x >> 1][y >> 1];
            }
        }
        m
    }

    fn mul4(a: &[[C; 4]; 4], b: &[[C; 4]; 4]) -> [[C; 4]; 4] {
        let mut m = [[C::new(0.0, 0.0); 4]; 4];
        for i in 0..4 {
            for j in 0..4 {
                for l in 0..4 {
                    m[i][j] += a[i][l] * b[l][j];
                }
            }
        }
        m
    }

    #[test]
    fn two_qubit_fidelities_match_the_kraus_formulas() {
        // Kraus operators K_P = sqrt(p_P) P U. F_pro = sum |tr K|^2 / d^2 and
        // F_avg = (sum |tr K|^2 + d) / (d (d + 1)) (Nielsen, Phys. Lett. A 303, 249 (2002);
        // Horodecki, Horodecki, Horodecki, PRA 60, 1888 (1999)), d = 4.
        let (zz, zi, xy) = (3 + 4 * 3, 3, 1 + 4 * 2);
        let cases = [
            spec2(&[], Some((0.2, [3, 3]))),
            spec2(&[], Some((0.3, [3, 0]))),
            spec2(&[(zz, 2e-3), (zi, 1e-3), (xy, 5e-4)], None),
            spec2(&[(zz, 4e-3), (zi, 1e-3)], Some((0.15, [3, 3]))),
            spec2(&[(xy, 1e-2)], Some((0.4, [0, 3]))),
        ];
        for e in &cases {
            let u = match &e.rotation {
                Some(r) => super::super::state::rotation2(r),
                None => pauli4(0),
            };
            let sum_tr2: f64 = (0..16)
                .map(|i| {
                    let k = mul4(&pauli4(i), &u);
                    e.pauli[i] * (0..4).map(|x| k[x][x]).sum::<C>().norm_sqr()
                })
                .sum();
            let m = spec_measure(e);
            assert!((1.0 - sum_tr2 / 16.0 - m.infidelity).abs() < 1e-12, "{e:?}");
            let f_avg = (sum_tr2 + 4.0) / 20.0;
            assert!((1.0 - f_avg - average_infidelity(m.infidelity, 4)).abs() < 1e-12, "{e:?}");
        }
    }

    #[test]
    fn two_qubit_half_diamond_of_pauli_channels_and_rotations() {
        // A Pauli channel: its total error probability (common practice, from memory: the
        // diamond distance of a Pauli channel from the identity is 2 (1 - p_I)).
        let e = spec2(&[(15, 2e-3), (3, 1e-3)], None);
        let m = spec_measure(&e);
        assert!((m.half_diamond - 3e-3).abs() < 1e-15 && m.half_diamond_method == "exact_pauli");
        // A rotation exp(-i theta/2 ZZ): sin(theta/2) (Watrous 2018, unitary channels). The
        // input (|00> + |01>)/sqrt(2) attains it: its trace distance to U psi is
        // sqrt(1 - |<psi|U|psi>|^2), a lower bound on the half-diamond distance.
        for (theta, axis) in [(0.2, [3u8, 3u8]), (0.5, [3, 0]), (1.1, [0, 3])] {
            let e = spec2(&[], Some((theta, axis)));
            let u = super::super::state::rotation2(e.rotation.as_ref().unwrap());
            let h = std::f64::consts::FRAC_1_SQRT_2;
            // Superpose eigenvectors of opposite eigenvalue: |00> and the basis state that
            // flips the sign of the axis.
            let other = if axis[1] == 3 { 2 } else { 1 };
            let mut psi = [C::new(0.0, 0.0); 4];
            psi[0] = C::new(h, 0.0);
            psi[other] = C::new(h, 0.0);
            let overlap: C =
                (0..4).map(|x| psi[x].conj() * (0..4).map(|y| u[x][y] * psi[y]).sum::<C>()).sum();
            let attained = (1.0 - overlap.norm_sqr()).sqrt();
            let m = spec_measure(&e);
            assert!((m.half_diamond - (theta / 2.0).sin()).abs() < 1e-12);
            assert!((m.half_diamond - attained).abs() < 1e-12, "{theta} {axis:?}");
            assert_eq!(m.half_diamond_method, "exact_unitary");
        }
    }

    #[test]
    fn triangle_bound_brackets_the_parts() {
        let mut e = pauli_spec([0.0, 0.0, 1e-2]);
        e.rotation = Some(Rotation { angle_rad: 0.1, pauli: vec![1] });
        let m = spec_measure(&e);
        assert_eq!(m.half_diamond_method, "upper_bound_triangle");
        assert!(m.half_diamond >= 0.05f64.sin() - 1e-15 && m.half_diamond >= 1e-2);
        assert!(m.half_diamond >= m.infidelity);
    }
}
