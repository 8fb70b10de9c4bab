//! Checks of the simulator against published results and against its own invariants:
//! randomized-benchmarking decay, diamond distances, readout statistics, leakage, drift,
//! context terms and thread-count independence.

use std::path::Path;

use num_complex::Complex64 as C;
use slackmap::circuit::{Circuit, CircuitSet, Op};
use slackmap::gate::{Gate, Mat2};
use slackmap::layout::generate::grid;
use slackmap::layout::Layout;
use slackmap::simulate::truth::{rotation_spec, spec_measure};
use slackmap::simulate::{
    circuit_rng, draw_drift, exact_block_distribution, simulate, ErrorSpec, Noise, SimConfig,
};

fn noise(layout: &Layout, text: &str) -> Noise {
    Noise::from_toml_str(text, Path::new("test-noise.toml"), layout).expect("test noise is valid")
}

fn circuit(id: &str, layers: Vec<Vec<Op>>, measured: Vec<usize>) -> Circuit {
    Circuit { id: id.to_string(), layers, measured }
}

fn exact(layout: &Layout, c: &Circuit, block: &[usize], n: &Noise) -> Vec<f64> {
    exact_block_distribution(layout, c, block, n, &vec![0.0; n.drift().len()]).unwrap()
}

// ---------- one-qubit Cliffords ----------

fn mul(a: &Mat2, b: &Mat2) -> Mat2 {
    let mut m = [[C::new(0.0, 0.0); 2]; 2];
    for i in 0..2 {
        for j in 0..2 {
            m[i][j] = a[i][0] * b[0][j] + a[i][1] * b[1][j];
        }
    }
    m
}

fn dagger(a: &Mat2) -> Mat2 {
    [[a[0][0].conj(), a[1][0].conj()], [a[0][1].conj(), a[1][1].conj()]]
}

/// Equal up to a global phase: |tr(A^dagger B)| = 2.
fn same(a: &Mat2, b: &Mat2) -> bool {
    let m = mul(&dagger(a), b);
    ((m[0][0] + m[1][1]).norm() - 2.0).abs() < 1e-9
}

/// The 24 one-qubit Cliffords as the closure of H and S, each with a compilation
/// rz(a) sx rz(b) sx rz(c) (applied left to right) over quarter-turn angles.
fn cliffords() -> Vec<(Mat2, [f64; 3])> {
    let h = Gate::H.unitary1(0.0).unwrap();
    let s = Gate::S.unitary1(0.0).unwrap();
    let mut group = vec![Gate::Id.unitary1(0.0).unwrap()];
    let mut i = 0;
    while i < group.len() {
        for g in [&h, &s] {
            let n = mul(g, &group[i]);
            if !group.iter().any(|m| same(m, &n)) {
                group.push(n);
            }
        }
        i += 1;
    }
    assert_eq!(group.len(), 24, "the one-qubit Clifford group has 24 elements (common practice)");
    let sx = Gate::Sx.unitary1(0.0).unwrap();
    let q = std::f64::consts::FRAC_PI_2;
    group
        .into_iter()
        .map(|u| {
            for a in 0..4 {
                for b in 0..4 {
                    for c in 0..4 {
                        let ang = [a as f64 * q, b as f64 * q, c as f64 * q];
                        let rz = |t: f64| Gate::Rz.unitary1(t).unwrap();
                        let v =
                            mul(&rz(ang[2]), &mul(&sx, &mul(&rz(ang[1]), &mul(&sx, &rz(ang[0])))));
                        if same(&u, &v) {
                            return (u, ang);
                        }
                    }
                }
            }
            panic!("a Clifford without a quarter-turn rz-sx-rz-sx-rz compilation");
        })
        .collect()
}

fn rb_circuit(id: &str, cl: &[(Mat2, [f64; 3])], seq: &[usize]) -> Circuit {
    let mut total = Gate::Id.unitary1(0.0).unwrap();
    let mut layers = Vec::new();
    let push = |ang: [f64; 3], layers: &mut Vec<Vec<Op>>| {
        layers.push(vec![Op::rot(Gate::Rz, 0, ang[0])]);
        layers.push(vec![Op::one(Gate::Sx, 0)]);
        layers.push(vec![Op::rot(Gate::Rz, 0, ang[1])]);
        layers.push(vec![Op::one(Gate::Sx, 0)]);
        layers.push(vec![Op::rot(Gate::Rz, 0, ang[2])]);
    };
    for &k in seq {
        total = mul(&cl[k].0, &total);
        push(cl[k].1, &mut layers);
    }
    let inv = dagger(&total);
    let k = cl.iter().position(|(u, _)| same(u, &inv)).unwrap();
    push(cl[k].1, &mut layers);
    circuit(id, layers, vec![0])
}

/// Least-squares fit of y = A p^m + B: golden-section search on p, linear solve for A, B.
fn fit_decay(ms: &[f64], ys: &[f64]) -> f64 {
    let sse = |p: f64| {
        let xs: Vec<f64> = ms.iter().map(|&m| p.powf(m)).collect();
        let n = xs.len() as f64;
        let (sx, sy) = (xs.iter().sum::<f64>(), ys.iter().sum::<f64>());
        let sxx: f64 = xs.iter().map(|x| x * x).sum();
        let sxy: f64 = xs.iter().zip(ys).map(|(x, y)| x * y).sum();
        let a = (n * sxy - sx * sy) / (n * sxx - sx * sx);
        let b = (sy - a * sx) / n;
        xs.iter().zip(ys).map(|(x, y)| (a * x + b - y).powi(2)).sum::<f64>()
    };
    let (mut lo, mut hi) = (0.8, 0.999_999);
    let g = (5f64.sqrt() - 1.0) / 2.0;
    for _ in 0..200 {
        let (c, d) = (hi - g * (hi - lo), lo + g * (hi - lo));
        if sse(c) < sse(d) {
            hi = d;
        } else {
            lo = c;
        }
    }
    (lo + hi) / 2.0
}

const RB_NOISE: &str = "schema = 1\n[intrinsic.sx]\ndepolarizing = 2e-3\n\
                        [readout]\np1_given_0 = 0.02\np0_given_1 = 0.03\n";

/// Per sx: Pauli depolarizing of total rate e shrinks the Bloch vector by 1 - 4e/3; each
/// Clifford holds two sx and virtual rz, so p = (1 - 4e/3)^2.
fn rb_expected_p() -> f64 {
    (1.0 - 4.0 * 2e-3 / 3.0f64).powi(2)
}

#[test]
fn randomized_benchmarking_decay_recovers_error_per_clifford_exactly() {
    // Survival A p^m + B, error per Clifford r = (d - 1)(1 - p)/d (Magesan, Gambetta,
    // Emerson, PRL 106, 180504 (2011); PRA 85, 042311 (2012)).
    let layout = grid(1, 1);
    let n = noise(&layout, RB_NOISE);
    let cl = cliffords();
    let depths = [1usize, 4, 16, 48, 100, 200];
    let mut rng = circuit_rng(11, 0);
    let mut ys = Vec::new();
    for &m in &depths {
        let mut s = 0.0;
        for k in 0..10 {
            let seq: Vec<usize> =
                (0..m).map(|_| rand::RngExt::random_range(&mut rng, 0..24)).collect();
            let c = rb_circuit(&format!("rb-{m}-{k}"), &cl, &seq);
            s += exact(&layout, &c, &[0], &n)[0];
        }
        ys.push(s / 10.0);
    }
    let ms: Vec<f64> = depths.iter().map(|&m| m as f64 + 1.0).collect();
    let p = fit_decay(&ms, &ys);
    let r = (1.0 - p) / 2.0;
    let r_true = (1.0 - rb_expected_p()) / 2.0;
    assert!((r - r_true).abs() < 1e-4 * r_true, "r = {r}, injected {r_true}");
}

#[test]
fn randomized_benchmarking_from_shots_within_statistical_error() {
    let layout = grid(1, 1);
    let n = noise(&layout, RB_NOISE);
    let cl = cliffords();
    let depths = [1usize, 20, 60, 120, 200];
    let mut seq_rng = circuit_rng(5, 0);
    let mut circuits = Vec::new();
    for &m in &depths {
        for k in 0..8 {
            let seq: Vec<usize> =
                (0..m).map(|_| rand::RngExt::random_range(&mut seq_rng, 0..24)).collect();
            circuits.push(rb_circuit(&format!("rb-{m}-{k}"), &cl, &seq));
        }
    }
    let set = CircuitSet::new(circuits).unwrap();
    let ms: Vec<f64> = depths.iter().map(|&m| m as f64 + 1.0).collect();
    let mut fits = Vec::new();
    for seed in 0..8 {
        let counts = simulate(&layout, &set, &n, &SimConfig { shots: 400, seed }).unwrap();
        let ys: Vec<f64> = depths
            .iter()
            .enumerate()
            .map(|(d, _)| {
                let mut zeros = 0u64;
                for k in 0..8 {
                    zeros += counts.per_circuit[d * 8 + k].as_ref().unwrap().marginal(&[0])[0];
                }
                zeros as f64 / (8.0 * 400.0)
            })
            .collect();
        fits.push(fit_decay(&ms, &ys));
    }
    let mean = fits.iter().sum::<f64>() / fits.len() as f64;
    let sd =
        (fits.iter().map(|p| (p - mean).powi(2)).sum::<f64>() / (fits.len() - 1) as f64).sqrt();
    let se = sd / (fits.len() as f64).sqrt();
    let p_true = rb_expected_p();
    assert!(sd > 0.0 && sd < 2e-3, "spread of fitted p: {sd}");
    assert!((mean - p_true).abs() < 4.0 * se, "p = {mean} +- {se}, injected {p_true}");
}

// ---------- diamond distances ----------

/// Two-qubit pure states (V (x) I)(cos a |00> + sin a |11>) over a grid of a and V, index
/// bit(system) + 2 bit(ancilla).
fn state_grid() -> Vec<[C; 4]> {
    let mut out = Vec::new();
    let steps = 12;
    for ia in 0..=steps {
        let a = ia as f64 * std::f64::consts::FRAC_PI_2 / steps as f64;
        for it in 0..=steps {
            let t = it as f64 * std::f64::consts::PI / steps as f64;
            for ip in 0..steps {
                let ph = ip as f64 * 2.0 * std::f64::consts::PI / steps as f64;
                // V maps |0> -> cos(t/2)|0> + e^{i ph} sin(t/2)|1>, |1> -> orthogonal.
                let v0 = [C::new((t / 2.0).cos(), 0.0), C::from_polar((t / 2.0).sin(), ph)];
                let v1 = [-v0[1].conj(), v0[0].conj()];
                let mut s = [C::new(0.0, 0.0); 4];
                for x in 0..2 {
                    s[x] += v0[x] * a.cos();
                    s[x + 2] += v1[x] * a.sin();
                }
                out.push(s);
            }
        }
    }
    out
}

#[test]
fn rotation_half_diamond_is_sin_half_angle() {
    // Half diamond-norm distance of a unitary rotation by theta from the identity is
    // sin(theta/2) (J. Watrous, The Theory of Quantum Information (2018), unitary channels).
    // For pure states the trace distance is sqrt(1 - |<phi|(U x I)|phi>|^2).
    for (theta, axis) in [(0.08, 1u8), (0.6, 2), (2.0, 3)] {
        let e = rotation_spec(theta, axis);
        let u = slackmap::simulate::Rotation { angle_rad: theta, pauli: vec![axis] };
        let spec = ErrorSpec { rotation: Some(u), ..ErrorSpec::none(1) };
        let m = spec_measure(&spec);
        assert_eq!(m, spec_measure(&e));
        let (c, s) = ((theta / 2.0).cos(), (theta / 2.0).sin());
        let p = pauli(axis);
        let mut best: f64 = 0.0;
        for phi in state_grid() {
            let mut overlap = C::new(0.0, 0.0);
            for x in 0..4 {
                let (sys, anc) = (x & 1, x >> 1);
                for y in 0..2 {
                    let uxy = if sys == y { C::new(c, 0.0) } else { C::new(0.0, 0.0) }
                        + p[sys][y] * C::new(0.0, -s);
                    overlap += phi[x].conj() * uxy * phi[y + 2 * anc];
                }
            }
            best = best.max((1.0 - overlap.norm_sqr()).max(0.0).sqrt());
        }
        assert!((m.half_diamond - (theta / 2.0).sin()).abs() < 1e-12);
        assert!(best <= m.half_diamond + 1e-12, "grid {best} above {}", m.half_diamond);
        assert!(best >= m.half_diamond - 2e-3, "grid {best} far below {}", m.half_diamond);
    }
}

fn pauli(p: u8) -> Mat2 {
    let (o, l, i) = (C::new(0.0, 0.0), C::new(1.0, 0.0), C::new(0.0, 1.0));
    match p {
        1 => [[o, l], [l, o]],
        2 => [[o, -i], [i, o]],
        3 => [[l, o], [o, -l]],
        _ => [[l, o], [o, l]],
    }
}

#[test]
fn pauli_channel_half_diamond_is_total_rate() {
    // For a Pauli channel the half diamond distance equals 1 - F_pro, attained by a
    // maximally entangled input (Watrous 2018; common practice). Check over the grid with
    // the trace norm of (Phi x I)(phi) - phi from its eigenvalues.
    let probs = [1.0 - 0.006, 0.001, 0.002, 0.003];
    let spec = ErrorSpec { pauli: probs.to_vec(), ..ErrorSpec::none(1) };
    let m = spec_measure(&spec);
    assert!((m.half_diamond - 0.006).abs() < 1e-15 && (m.infidelity - 0.006).abs() < 1e-15);
    let mut best: f64 = 0.0;
    for phi in state_grid() {
        let mut d = nalgebra::Matrix4::<C>::zeros();
        for (k, &pk) in probs.iter().enumerate() {
            let p = pauli(k as u8);
            // (P x I)|phi>
            let mut v = [C::new(0.0, 0.0); 4];
            for x in 0..4 {
                for y in 0..2 {
                    v[x] += p[x & 1][y] * phi[y + 2 * (x >> 1)];
                }
            }
            for x in 0..4 {
                for y in 0..4 {
                    d[(x, y)] += v[x] * v[y].conj() * pk;
                }
            }
        }
        for x in 0..4 {
            for y in 0..4 {
                d[(x, y)] -= phi[x] * phi[y].conj();
            }
        }
        let tn: f64 = d.symmetric_eigenvalues().iter().map(|e| e.abs()).sum();
        best = best.max(tn / 2.0);
    }
    assert!(best <= m.half_diamond + 1e-9, "grid {best} above {}", m.half_diamond);
    assert!(best >= m.half_diamond - 1e-9, "maximally entangled input reaches {best}");
}

// ---------- readout, leakage, drift ----------

fn binomial_ok(k: u64, n: u64, p: f64) -> bool {
    let f = k as f64 / n as f64;
    (f - p).abs() <= 4.0 * (p * (1.0 - p) / n as f64).sqrt() + 1e-12
}

#[test]
fn readout_flips_match_injected_confusion() {
    let layout = grid(1, 2);
    let n = noise(
        &layout,
        "schema = 1\n[readout]\np1_given_0 = 0.01\np0_given_1 = 0.02\n\
         [[readout.qubits]]\nqubit = \"q1\"\np1_given_0 = 0.03\np0_given_1 = 0.05\n\
         [[readout_crosstalk]]\nvictim = \"q1\"\nneighbour = \"q0\"\nflip = 0.04\n",
    );
    let set = CircuitSet::new(vec![
        circuit("prep00", vec![], vec![0, 1]),
        circuit("prep11", vec![vec![Op::one(Gate::X, 0), Op::one(Gate::X, 1)]], vec![0, 1]),
        circuit("prep10", vec![vec![Op::one(Gate::X, 0)]], vec![0, 1]),
    ])
    .unwrap();
    let shots = 40_000;
    let counts = simulate(&layout, &set, &n, &SimConfig { shots, seed: 9 }).unwrap();
    let m = |c: usize, q: usize| counts.per_circuit[c].as_ref().unwrap().marginal(&[q]);
    assert!(binomial_ok(m(0, 0)[1], shots, 0.01));
    assert!(binomial_ok(m(1, 0)[0], shots, 0.02));
    assert!(binomial_ok(m(1, 1)[0], shots, 0.05 * (1.0 - 0.04 * 0.98) + 0.95 * 0.04 * 0.98));
    // Victim prepared 0, neighbour prepared 1 (reads 1 with probability 0.98).
    let (a, fb) = (0.03, 0.04 * 0.98);
    assert!(binomial_ok(m(2, 1)[1], shots, a * (1.0 - fb) + (1.0 - a) * fb));
    // With the neighbour in 0 the victim only sees its own confusion and the rare
    // crosstalk from the neighbour's misread 1s.
    assert!(binomial_ok(m(0, 1)[1], shots, 0.03 * (1.0 - 0.04 * 0.01) + 0.97 * 0.04 * 0.01));
    assert_eq!(counts.per_circuit[0].as_ref().unwrap().shots(), shots);
}

#[test]
fn leakage_accumulates_over_a_thousand_gates() {
    // 1e-4 per gate over 1000 gates: 1 - (1 - 1e-4)^1000 = 0.0952 leaked (common practice).
    let layout = grid(1, 2);
    let n = noise(&layout, "schema = 1\n[intrinsic.x]\nleakage = 1e-4\n");
    let c = circuit("leak", (0..1000).map(|_| vec![Op::one(Gate::X, 0)]).collect(), vec![0]);
    let p = exact(&layout, &c, &[0], &n);
    assert!((p[1] - 0.095_167_8).abs() < 1e-6, "P(1) = {}", p[1]);
    assert!((p[1] - (1.0 - (1.0 - 1e-4f64).powi(1000))).abs() < 1e-12);
    // In a two-qubit block probabilities still sum to one.
    let n2 = noise(&layout, "schema = 1\n[intrinsic.cz]\nleakage = 1e-3\ndepolarizing = 1e-2\n");
    let mut layers = vec![vec![Op::one(Gate::Sx, 0), Op::one(Gate::Sx, 1)]];
    layers.extend((0..300).map(|_| vec![Op::two(Gate::Cz, 1, 0)]));
    let c2 = circuit("leak2", layers, vec![0, 1]);
    let p2 = exact(&layout, &c2, &[0, 1], &n2);
    assert!((p2.iter().sum::<f64>() - 1.0).abs() < 1e-12 && p2.iter().all(|&x| x >= -1e-15));
    // Each qubit has leaked in about 1 - (1 - 1e-3)^300 of shots, read as 1 on top of the
    // half of the rest that reads 1.
    assert!(p2[3] > 0.25, "both read 1 with probability {}", p2[3]);
}

#[test]
fn drift_dephases_on_average() {
    // Ramsey with Z drift delta ~ N(0, sigma^2) per layer over n idles: P(1) averages to
    // (1 + E cos(n delta))/2 = (1 + exp(-n^2 sigma^2/2))/2 (Gaussian characteristic function).
    let layout = grid(1, 1);
    let n = noise(&layout, "schema = 1\n[[drift]]\nqubit = \"q0\"\nsigma = 0.05\n");
    let mut layers = vec![vec![Op::one(Gate::Sx, 0)]];
    layers.extend((0..10).map(|_| vec![Op::one(Gate::Id, 0)]));
    layers.push(vec![Op::one(Gate::Sx, 0)]);
    let c = circuit("ramsey", layers, vec![0]);
    // Drift acts after each layer's gate: the first sx layer and the 10 idles put 11 delta
    // of phase on the equator; the last layer's rotation comes after the closing sx and
    // does not change populations. sx rz(a) sx gives P(1) = (1 + cos a)/2.
    let k = 11.0;
    let want = (1.0 + (-(k * 0.05f64).powi(2) / 2.0).exp()) / 2.0;
    let trials = 4000;
    let (mut sum, mut sum2) = (0.0, 0.0);
    for i in 0..trials {
        let d = draw_drift(&n, &mut circuit_rng(3, i));
        let p = exact_block_distribution(&layout, &c, &[0], &n, &d).unwrap()[1];
        sum += p;
        sum2 += p * p;
    }
    let mean = sum / trials as f64;
    let se = ((sum2 / trials as f64 - mean * mean) / trials as f64).sqrt();
    assert!((mean - want).abs() < 4.0 * se, "mean {mean} +- {se}, want {want}");
    assert!(mean < 0.99, "drift must lower the Ramsey contrast, got {mean}");
}

// ---------- context terms ----------

#[test]
fn context_rotation_accumulates_only_where_it_applies() {
    let layout = grid(1, 3);
    let text = "schema = 1\n[[context]]\nvictim = \"q0\"\naggressor = \"q1\"\nrole = \"idle\"\n\
                rotation = { angle = 0.05, axis = \"X\" }\n";
    let n = noise(&layout, text);
    let layers = (0..20).map(|_| vec![Op::one(Gate::X, 1)]).collect();
    let c = circuit("ctx", layers, vec![0, 1]);
    let p = exact(&layout, &c, &[0], &n);
    // 20 coherent rotations by 0.05 about X add up: P(1) = sin^2(20 * 0.05 / 2).
    assert!((p[1] - (0.5f64).sin().powi(2)).abs() < 1e-12, "P(1) = {}", p[1]);
    // Victim driven (x on q0 twice per pair of layers): the idle-only term does not act.
    let layers = (0..20).map(|_| vec![Op::one(Gate::X, 0), Op::one(Gate::X, 1)]).collect();
    let c = circuit("ctx-driven", layers, vec![0, 1]);
    assert!(exact(&layout, &c, &[0], &n)[1] < 1e-12);
    // An aggressor that is the victim's own two-qubit partner is no context.
    let n = noise(&layout, &text.replace("role = \"idle\"\n", ""));
    let layers = (0..20).map(|_| vec![Op::two(Gate::Cz, 0, 1)]).collect();
    let c = circuit("ctx-cz", layers, vec![0, 1]);
    let p = exact(&layout, &c, &[0, 1], &n);
    assert!(p[0] > 1.0 - 1e-12);
    // A virtual gate on the aggressor makes it no aggressor.
    let layers = (0..20).map(|_| vec![Op::rot(Gate::Rz, 1, 0.3), Op::one(Gate::X, 2)]).collect();
    let c = circuit("ctx-virtual", layers, vec![0, 1]);
    assert!(exact(&layout, &c, &[0], &n)[1] < 1e-12);
}

#[test]
fn zz_term_dephases_the_idle_end() {
    let layout = grid(1, 2);
    let phi: f64 = 0.3;
    let n =
        noise(&layout, &format!("schema = 1\n[[zz]]\nqubits = [\"q0\", \"q1\"]\nangle = {phi}\n"));
    let nl = 15;
    let mut layers = vec![vec![Op::one(Gate::Sx, 0)]];
    layers.extend((0..nl).map(|_| vec![Op::one(Gate::X, 1)]));
    layers.push(vec![Op::one(Gate::Sx, 0)]);
    let c = circuit("ramsey-zz", layers, vec![0, 1]);
    let e = slackmap::simulate::noise::zz_dephasing_rate(phi);
    let want = (1.0 + (1.0 - 2.0 * e).powi(nl)) / 2.0;
    let p = exact(&layout, &c, &[0], &n);
    assert!((p[1] - want).abs() < 1e-12, "P(1) = {}, want {want}", p[1]);
}

#[test]
fn blocks_above_two_qubits_are_rejected() {
    let layout = grid(1, 3);
    let n = Noise::ideal(&layout);
    let c = circuit(
        "chain",
        vec![vec![Op::two(Gate::Cz, 0, 1)], vec![Op::two(Gate::Cz, 1, 2)]],
        vec![0, 1, 2],
    );
    let set = CircuitSet::new(vec![c]).unwrap();
    let e = simulate(&layout, &set, &n, &SimConfig { shots: 10, seed: 0 }).unwrap_err();
    let msg = e.to_string();
    assert!(msg.contains("chain") && msg.contains("q0, q1, q2"), "{msg}");
}

// ---------- determinism ----------

#[test]
fn same_seed_same_counts_on_one_and_two_threads() {
    let layout = grid(2, 2);
    let n = noise(
        &layout,
        "schema = 1\n[intrinsic.sx]\ndepolarizing = 0.01\n[intrinsic.cz]\ndepolarizing = 0.05\n\
         [readout]\np1_given_0 = 0.02\np0_given_1 = 0.03\n\
         [[context]]\nvictim = \"q0\"\naggressor = \"q1\"\ndephasing = 0.02\n\
         [[drift]]\nqubit = \"q3\"\nsigma = 0.1\n\
         [[readout_crosstalk]]\nvictim = \"q2\"\nneighbour = \"q3\"\nflip = 0.05\n",
    );
    let circuits = (0..40)
        .map(|i| {
            let mut layers = vec![vec![Op::one(Gate::Sx, 0), Op::one(Gate::Sx, 1)]];
            layers.extend((0..i % 7).map(|_| vec![Op::two(Gate::Cz, 0, 1), Op::one(Gate::Sx, 3)]));
            layers.push(vec![Op::one(Gate::Sx, 2), Op::one(Gate::X, 3)]);
            circuit(&format!("c{i}"), layers, vec![0, 1, 2, 3])
        })
        .collect();
    let set = CircuitSet::new(circuits).unwrap();
    let cfg = SimConfig { shots: 300, seed: 42 };
    let run = |threads: usize| {
        let pool = rayon::ThreadPoolBuilder::new().num_threads(threads).build().unwrap();
        pool.install(|| simulate(&layout, &set, &n, &cfg)).unwrap()
    };
    let (a, b) = (run(1), run(2));
    assert_eq!(a.per_circuit, b.per_circuit);
    let other = simulate(&layout, &set, &n, &SimConfig { seed: 43, ..cfg }).unwrap();
    assert_ne!(a.per_circuit, other.per_circuit, "a different seed must give other counts");
}

// ---------- demo scenarios and the command line ----------

fn demo(name: &str) -> (Layout, Noise, slackmap::simulate::truth::Truth) {
    let layout = grid(4, 4);
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-data").join(name);
    let n = Noise::read(&path, &layout).unwrap();
    let t = slackmap::simulate::truth::truth(&layout, &n);
    (layout, n, t)
}

#[test]
fn demo_recalibration_changes_only_the_strong_edge() {
    let (_, _, before) = demo("noise.toml");
    let (_, _, after) = demo("noise-recalibrated.toml");
    let find = |t: &slackmap::simulate::truth::Truth, v: &str, a: &str| {
        t.pairs.iter().find(|p| p.victim == v && p.aggressor == a).unwrap().clone()
    };
    let strong = find(&before, "q5", "q6");
    assert!((strong.driven.half_diamond - 0.04f64.sin()).abs() < 1e-12);
    assert!((find(&after, "q5", "q6").driven.half_diamond - 0.004f64.sin()).abs() < 1e-12);
    let deph = find(&before, "q12", "q13");
    // Dephasing acts on q12 whether driven or idle; a Pauli channel's half-diamond distance
    // is its total rate (Watrous 2018).
    assert!(!deph.role_dependent);
    assert!((deph.driven.half_diamond - 5e-3).abs() < 1e-15);
    assert!((deph.idle.half_diamond - 5e-3).abs() < 1e-15);
    assert!((find(&before, "q2", "q3").idle.infidelity - 1.5e-3).abs() < 1e-15);
    let injected = |t: &slackmap::simulate::truth::Truth| {
        t.pairs.iter().filter(|p| p.driven.half_diamond > 0.0 || p.idle.half_diamond > 0.0).count()
    };
    assert_eq!(injected(&before), 3);
    assert_eq!(injected(&after), 3);
    for (b, a) in before.pairs.iter().zip(&after.pairs) {
        if (b.victim.as_str(), b.aggressor.as_str()) != ("q5", "q6") {
            assert_eq!((b.driven, b.idle), (a.driven, a.idle), "{} <- {}", b.victim, b.aggressor);
        }
    }
    let q8 = before.qubits.iter().find(|q| q.qubit == "q8").unwrap();
    assert_eq!(q8.drift.len(), 1);
}

#[test]
fn cli_writes_counts_and_truth() {
    let dir = tempfile::tempdir().unwrap();
    let fixtures = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures/good");
    let noise_path = dir.path().join("noise.toml");
    std::fs::write(
        &noise_path,
        "schema = 1\n[intrinsic.sx]\ndepolarizing = 1e-3\n[[context]]\nvictim = \"q0\"\n\
         aggressor = \"q1\"\nrotation = { angle = 0.05, axis = \"X\" }\n",
    )
    .unwrap();
    let out = dir.path().join("counts.csv");
    // `slackmap simulate` on the fixture, writing `out`; callers add shots and seed.
    let simulate = || {
        let mut c = assert_cmd::Command::cargo_bin("slackmap").unwrap();
        c.arg("simulate")
            .arg("--layout")
            .arg(fixtures.join("layout.toml"))
            .arg("--circuits")
            .arg(fixtures.join("circuits.json"))
            .arg("--noise")
            .arg(&noise_path)
            .arg("--out")
            .arg(&out);
        c
    };
    let run = || {
        simulate().args(["--shots", "500", "--seed", "4"]).assert().success();
        std::fs::read_to_string(&out).unwrap()
    };
    let first = run();
    assert_eq!(first, run(), "same seed, same file");
    let mut lines = first.lines();
    assert_eq!(lines.next(), Some("circuit,outcome,count"));
    let mut per_circuit = std::collections::BTreeMap::new();
    for l in lines {
        let f: Vec<&str> = l.split(',').collect();
        assert_eq!(f.len(), 3, "{l}");
        assert!(f[1].chars().all(|c| c == '0' || c == '1'));
        *per_circuit.entry(f[0].to_string()).or_insert(0u64) += f[2].parse::<u64>().unwrap();
    }
    assert_eq!(per_circuit.len(), 4);
    assert!(per_circuit.values().all(|&n| n == 500));
    let truth: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.path().join("truth.json")).unwrap())
            .unwrap();
    assert_eq!(truth["schema"], 1);
    let pair = truth["pairs"]
        .as_array()
        .unwrap()
        .iter()
        .find(|p| p["victim"] == "q0" && p["aggressor"] == "q1")
        .unwrap();
    let hd = pair["driven"]["half_diamond"].as_f64().unwrap();
    assert!((hd - 0.025f64.sin()).abs() < 1e-12);
    assert_eq!(pair["driven"]["half_diamond_method"], "exact_unitary");
    // A bad noise file fails with exit code 2 and names the line.
    std::fs::write(&noise_path, "schema = 1\n[intrinsic.sx]\n\ndepolarizing = -0.1\n").unwrap();
    let a = simulate().assert().code(2);
    let err = String::from_utf8_lossy(&a.get_output().stderr).into_owned();
    assert!(err.contains("line 4") && err.contains("[0, 1]"), "{err}");
}

// ---------- invariants ----------

proptest::proptest! {
    #![proptest_config(proptest::prelude::ProptestConfig::with_cases(64))]

    #[test]
    fn block_distributions_are_distributions(
        ops in proptest::collection::vec(0u8..6, 1..40),
        depol in 0.0f64..0.2,
        leak in 0.0f64..0.05,
        angle in -3.0f64..3.0,
        ro in 0.0f64..0.3,
    ) {
        let layout = grid(1, 3);
        let text = format!(
            "schema = 1\n[intrinsic.sx]\ndepolarizing = {depol}\nleakage = {leak}\n\
             [intrinsic.cz]\npauli = {{ XZ = {depol}, YY = {d2} }}\n\
             over_rotation = {{ angle = {angle}, axis = \"ZY\" }}\nleakage = {leak}\n\
             [intrinsic.id]\npauli = {{ Z = {depol} }}\n\
             [readout]\np1_given_0 = {ro}\np0_given_1 = {r2}\n\
             [[context]]\nvictim = \"q0\"\naggressor = \"q2\"\ndephasing = {depol}\n\
             rotation = {{ angle = {angle}, axis = \"Y\" }}\n\
             [[context]]\nvictim = \"q1\"\naggressor = \"q2\"\ndepolarizing = {depol}\n",
            d2 = depol / 2.0,
            r2 = ro / 2.0,
        );
        let n = noise(&layout, &text);
        let layers: Vec<Vec<Op>> = ops
            .iter()
            .map(|&k| match k {
                0 => vec![Op::one(Gate::Sx, 0), Op::one(Gate::X, 2)],
                1 => vec![Op::two(Gate::Cz, 1, 0)],
                2 => vec![Op::rot(Gate::Rz, 1, 0.7), Op::one(Gate::Sx, 2)],
                3 => vec![Op::one(Gate::Sx, 1), Op::one(Gate::Id, 0)],
                4 => vec![Op::two(Gate::Cx, 0, 1), Op::one(Gate::X, 2)],
                _ => vec![Op::rot(Gate::Rz, 0, 0.3)],
            })
            .collect();
        let c = circuit("p", layers, vec![0, 1]);
        let p = exact(&layout, &c, &[0, 1], &n);
        proptest::prop_assert!((p.iter().sum::<f64>() - 1.0).abs() < 1e-9, "{:?}", p);
        proptest::prop_assert!(p.iter().all(|&x| x >= -1e-12), "{:?}", p);
    }

    #[test]
    fn half_diamond_is_at_least_infidelity(
        px in 0.0f64..0.1, py in 0.0f64..0.1, pz in 0.0f64..0.1,
        angle in -6.0f64..6.0, axis in 1u8..4,
    ) {
        // 1 - F_pro = 1 - <Omega|(Phi x I)(Omega)|Omega> is at most the trace distance of
        // the output from the input, hence at most the half diamond distance (Watrous 2018).
        let spec = ErrorSpec {
            pauli: vec![1.0 - px - py - pz, px, py, pz],
            rotation: Some(slackmap::simulate::Rotation { angle_rad: angle, pauli: vec![axis] }),
            leakage: 0.0,
        };
        let m = spec_measure(&spec);
        proptest::prop_assert!(m.half_diamond + 1e-12 >= m.infidelity, "{:?}", m);
        proptest::prop_assert!(m.half_diamond <= 1.0 && m.infidelity >= -1e-12);
    }
}
