//! End-to-end checks of the product-model fit on simulated rows: parameter recovery within
//! the Fisher-information standard errors, the LLR against its chi-squared reference, the
//! randomized-benchmarking decay relation, and flagging of unidentifiable directions.

use std::f64::consts::FRAC_PI_2;
use std::time::Instant;

use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::{Binomial, Distribution};
use slackmap::gate::Gate;
use slackmap::model::ptm;
use slackmap::model::{
    fit_coupler, fit_qubit, predict, predict_all, Action, Family, FitOptions, KindParams,
    ModelSpec, Params, PreparedRow, Readout, Row, Step,
};

const SX: usize = 0;
const ID: usize = 1;
const SX1: usize = 2;
const CZ: usize = 3;

fn spec(family: Family) -> ModelSpec {
    ModelSpec { family, kind_arity: vec![1, 1, 1, 2], n_qubits: 2 }
}

fn local(a: Action) -> Step {
    Step::Local([Some(a), None])
}

/// rz(a) sx rz(b) sx rz(c) with angles in multiples of pi/2: a one-qubit Clifford with
/// exactly two sx occurrences.
fn clifford(abc: [u32; 3]) -> Vec<Step> {
    let rz = |k: u32| local(Action::ideal(Gate::Rz, k as f64 * FRAC_PI_2));
    let sx = || local(Action::occurrence(Gate::Sx, 0.0, SX));
    vec![rz(abc[0]), sx(), rz(abc[1]), sx(), rz(abc[2])]
}

fn ideal_state(steps: &[Step]) -> nalgebra::DVector<f64> {
    let mut s = ptm::zero_state(1);
    for st in steps {
        if let Step::Local([Some(a), None]) = st {
            let u = ptm::gate_unitary(a.gate, a.angle, false).unwrap();
            s = ptm::unitary_ptm(&u) * s;
        }
    }
    s
}

/// A randomized sequence of `m` random Cliffords (with an `id` occurrence after each when
/// `interleave_id`), closed by the Clifford that returns the ideal state to |target>.
fn rb_row(m: usize, interleave_id: bool, target: usize, rng: &mut ChaCha8Rng) -> Row {
    let mut steps = Vec::new();
    for _ in 0..m {
        steps.extend(clifford([
            rng.random_range(0..4),
            rng.random_range(0..4),
            rng.random_range(0..4),
        ]));
        if interleave_id {
            steps.push(local(Action::occurrence(Gate::Id, 0.0, ID)));
        }
    }
    let want = if target == 0 { 1.0 } else { -1.0 };
    let close = (0..64u32)
        .map(|i| [i % 4, (i / 4) % 4, i / 16])
        .find(|&abc| {
            let mut all = steps.clone();
            all.extend(clifford(abc));
            (ideal_state(&all)[3] - want).abs() < 1e-9
        })
        .expect("the rz-sx-rz-sx-rz Cliffords reach every Pauli eigenstate");
    steps.extend(clifford(close));
    Row { steps, readout: vec![0], counts: vec![0, 0] }
}

/// Multinomial counts by successive binomials.
fn sample(probs: &[f64], shots: u64, rng: &mut ChaCha8Rng) -> Vec<u64> {
    let mut left = shots;
    let mut rest = 1.0;
    let mut out = Vec::with_capacity(probs.len());
    for (i, &p) in probs.iter().enumerate() {
        if i + 1 == probs.len() {
            out.push(left);
            break;
        }
        let q = if rest > 0.0 { (p / rest).clamp(0.0, 1.0) } else { 0.0 };
        let n = Binomial::new(left, q).unwrap().sample(rng);
        out.push(n);
        left -= n;
        rest -= p;
    }
    out
}

const DEPTHS: [usize; 6] = [1, 4, 10, 20, 35, 50];

fn rb_rows(rng: &mut ChaCha8Rng) -> Vec<Row> {
    let mut rows = Vec::new();
    for &m in &DEPTHS {
        for i in 0..10 {
            rows.push(rb_row(m, i % 2 == 1, (i / 2) % 2, rng));
        }
    }
    rows
}

/// Exact probabilities under `truth` (transfer-matrix path), then sampled counts.
fn simulate(
    rows: &[Row],
    spec: &ModelSpec,
    truth: &Params,
    shots: u64,
    rng: &mut ChaCha8Rng,
) -> Vec<PreparedRow> {
    let prepared: Vec<PreparedRow> =
        rows.iter().map(|r| PreparedRow::new(r, spec).unwrap()).collect();
    let probs = predict_all(&prepared, truth);
    prepared
        .iter()
        .zip(probs)
        .map(|(r, p)| r.with_counts(sample(&p, shots, rng)).unwrap())
        .collect()
}

fn within(name: &str, fitted: f64, truth: f64, se: Option<f64>, k: f64) {
    let se = se.unwrap_or_else(|| panic!("{name}: no standard error (unidentified)"));
    assert!(
        (fitted - truth).abs() <= k * se,
        "{name}: fitted {fitted:.6} vs injected {truth:.6}, se {se:.2e}"
    );
}

/// Truth: Pauli family with isotropic rates (a depolarizing channel, simulated through the
/// transfer-matrix path), readout (0.02, 0.04).
fn depolarizing_truth() -> (Params, f64, f64) {
    let (p_sx, p_id) = (0.008, 0.004);
    let mut t = Params::initial(&spec(Family::Pauli)).unwrap();
    t.kinds[SX] = KindParams::pauli(1, &[p_sx / 4.0; 3]).unwrap();
    t.kinds[ID] = KindParams::pauli(1, &[p_id / 4.0; 3]).unwrap();
    t.readout[0] = Readout::new(0.02, 0.04).unwrap();
    (t, p_sx, p_id)
}

#[test]
fn depolarizing_fit_recovers_injected_rates_and_llr_is_chi_squared() {
    let mut rng = ChaCha8Rng::seed_from_u64(20261201);
    let rows = rb_rows(&mut rng);
    let (truth, p_sx, p_id) = depolarizing_truth();
    let data = simulate(&rows, &spec(Family::Pauli), &truth, 1000, &mut rng);
    let s = spec(Family::Depolarizing);
    let fit = fit_qubit(&data, &s, None, &FitOptions::default()).unwrap();
    assert!(fit.converged, "{:?}", fit.warnings);
    assert_eq!(fit.n_identified, 4, "sx, id and both readout errors are identified");
    let sx = fit.kinds.iter().find(|k| k.kind == SX).unwrap();
    let id = fit.kinds.iter().find(|k| k.kind == ID).unwrap();
    within("sx p", sx.values[0], p_sx, sx.std_errors[0], 3.0);
    within("id p", id.values[0], p_id, id.std_errors[0], 3.0);
    let ro = &fit.readout[0];
    within("P(1|0)", ro.errors[0], 0.02, ro.std_errors[0], 3.0);
    within("P(0|1)", ro.errors[1], 0.04, ro.std_errors[1], 3.0);
    // Correct model: LLR ~ chi-squared with k = 60 - 4 dof (Wilks' theorem).
    assert_eq!(fit.dof, 56);
    let excess = fit.excess_sigma.unwrap();
    assert!(excess.abs() < 4.0, "excess {excess}");
}

/// Least-squares fit of S(m) = A f^m + B (randomized benchmarking decay, Magesan, Gambetta
/// and Emerson, PRL 106, 180504 (2011)): A, B linear for each f, f by golden section.
fn rb_decay(points: &[(f64, f64)]) -> f64 {
    let resid = |f: f64| {
        let xs: Vec<f64> = points.iter().map(|(m, _)| f.powf(*m)).collect();
        let n = xs.len() as f64;
        let (sx, sy) = (xs.iter().sum::<f64>(), points.iter().map(|p| p.1).sum::<f64>());
        let sxx: f64 = xs.iter().map(|x| x * x).sum();
        let sxy: f64 = xs.iter().zip(points).map(|(x, p)| x * p.1).sum();
        let a = (n * sxy - sx * sy) / (n * sxx - sx * sx);
        let b = (sy - a * sx) / n;
        xs.iter().zip(points).map(|(x, p)| (a * x + b - p.1).powi(2)).sum::<f64>()
    };
    let (mut lo, mut hi) = (0.9, 0.99999);
    let g = 0.618_033_988_749_895;
    for _ in 0..200 {
        let (x1, x2) = (hi - g * (hi - lo), lo + g * (hi - lo));
        if resid(x1) < resid(x2) {
            hi = x2;
        } else {
            lo = x1;
        }
    }
    0.5 * (lo + hi)
}

#[test]
fn depolarizing_rate_per_sx_matches_rb_decay_per_clifford() {
    let mut rng = ChaCha8Rng::seed_from_u64(7);
    let rows = rb_rows(&mut rng);
    let (truth, p_sx, _) = depolarizing_truth();
    let exact = predict_all(
        &rows
            .iter()
            .map(|r| PreparedRow::new(r, &spec(Family::Pauli)).unwrap())
            .collect::<Vec<_>>(),
        &truth,
    );
    // Survival of the non-interleaved sequences ending in |0>, by Clifford count m + 1.
    let mut points = Vec::new();
    for (i, &m) in DEPTHS.iter().enumerate() {
        let s: f64 = exact[i * 10][0];
        points.push(((m + 1) as f64, s));
    }
    let f = rb_decay(&points);
    // Each Clifford holds two sx, so f = (1 - p_sx)^2 and r = (d - 1)(1 - f)/d, d = 2.
    let f_want = (1.0 - p_sx).powi(2);
    assert!((f - f_want).abs() < 1e-6, "RB decay {f} vs (1 - p)^2 = {f_want}");
    let r_rb = 0.5 * (1.0 - f);
    // The model fit (counted fast path) on sampled data gives the same r within 3 sigma.
    let data = simulate(&rows, &spec(Family::Pauli), &truth, 1000, &mut rng);
    let fit = fit_qubit(&data, &spec(Family::Depolarizing), None, &FitOptions::default()).unwrap();
    let sx = fit.kinds.iter().find(|k| k.kind == SX).unwrap();
    let p = sx.values[0];
    let r_model = 0.5 * (1.0 - (1.0 - p).powi(2));
    let se_r = (1.0 - p) * sx.std_errors[0].unwrap();
    assert!(
        (r_model - r_rb).abs() < 3.0 * se_r,
        "r from fit {r_model:.5} vs RB {r_rb:.5} (se {se_r:.1e})"
    );
}

#[test]
fn pauli_fit_recovers_rates_and_flags_what_twirling_hides() {
    let mut rng = ChaCha8Rng::seed_from_u64(99);
    let rows = rb_rows(&mut rng);
    let mut truth = Params::initial(&spec(Family::Pauli)).unwrap();
    let sx_rates = [0.001, 0.002, 0.004];
    truth.kinds[SX] = KindParams::pauli(1, &sx_rates).unwrap();
    truth.kinds[ID] = KindParams::pauli(1, &[0.0005, 0.0005, 0.002]).unwrap();
    truth.readout[0] = Readout::new(0.02, 0.04).unwrap();
    let data = simulate(&rows, &spec(Family::Pauli), &truth, 1000, &mut rng);
    let fit = fit_qubit(&data, &spec(Family::Pauli), None, &FitOptions::default()).unwrap();
    assert!(fit.converged, "{:?}", fit.warnings);
    let sx = fit.kinds.iter().find(|k| k.kind == SX).unwrap();
    let total: f64 = sx.values.iter().sum();
    // Measured on these sequences: p_Y - p_Z of sx is an exact null direction of the
    // Fisher information (eigenvalue ~1e-17 of the largest), so both are flagged and their
    // split is held at the isotropic start; p_X and the total are identified.
    assert_eq!(sx.identified, vec![true, false, false]);
    assert!((sx.values[1] - sx.values[2]).abs() < 1e-12);
    assert_eq!(fit.n_free - fit.n_identified, 1);
    within("sx p_X", sx.values[0], sx_rates[0], sx.std_errors[0], 3.0);
    let id = fit.kinds.iter().find(|k| k.kind == ID).unwrap();
    for (i, want) in [0.0005, 0.0005, 0.002].into_iter().enumerate() {
        within(&id.names[i], id.values[i], want, id.std_errors[i], 3.0);
    }
    assert!((total - 0.007).abs() < 0.0015, "total sx Pauli error {total}");
    assert!((sx.error_rate - total).abs() < 1e-12);
    assert!(fit.excess_sigma.unwrap().abs() < 4.0);

    // Coherent angles: a closed randomized sequence maps the final Bloch vector onto Z and
    // a small rotation anywhere moves it perpendicular, so to first order no angle changes
    // any outcome: every angle must be flagged and held at zero.
    // Rows prepared for a Pauli family keep only their Pauli paths: the coherent family
    // needs them prepared again, and refuses them until then.
    let coherent = spec(Family::PauliCoherent);
    assert!(fit_qubit(&data, &coherent, None, &FitOptions::default()).is_err());
    let data: Vec<PreparedRow> = rows
        .iter()
        .zip(&data)
        .map(|(r, d)| {
            PreparedRow::new(&Row { counts: d.counts().to_vec(), ..r.clone() }, &coherent)
        })
        .collect::<Result<_, _>>()
        .unwrap();
    let fit = fit_qubit(&data, &coherent, None, &FitOptions::default()).unwrap();
    for k in &fit.kinds {
        for (i, name) in k.names.iter().enumerate().filter(|(_, n)| n.starts_with("h_")) {
            assert!(!k.identified[i], "{name} of kind {} should be unidentified", k.kind);
            assert!(k.values[i].abs() < 1e-12, "{name} moved to {}", k.values[i]);
            assert!(k.std_errors[i].is_none());
        }
    }
    assert!(fit.warnings.iter().any(|w| w.code == "unidentified-parameters"));
    assert_eq!(fit.n_free - fit.n_identified, 7, "three angles per kind and sx's p_Y - p_Z");
}

#[test]
fn kinds_that_always_occur_together_are_flagged() {
    // id after every sx pair: only lambda_sx^2 lambda_id is visible.
    let mut rng = ChaCha8Rng::seed_from_u64(3);
    let rows: Vec<Row> = DEPTHS
        .iter()
        .flat_map(|&m| (0..4).map(move |i| (m, i)))
        .map(|(m, i)| rb_row(m, true, i % 2, &mut rng))
        .collect();
    let rows: Vec<Row> = rows
        .into_iter()
        .map(|mut r| {
            // The closing Clifford gets its id too: every row holds exactly two sx per id.
            r.steps.push(local(Action::occurrence(Gate::Id, 0.0, ID)));
            r
        })
        .collect();
    let (truth, _, _) = depolarizing_truth();
    let data = simulate(&rows, &spec(Family::Pauli), &truth, 1000, &mut rng);
    let fit = fit_qubit(&data, &spec(Family::Depolarizing), None, &FitOptions::default()).unwrap();
    for k in &fit.kinds {
        assert!(!k.identified[0], "kind {} is confounded and must be flagged", k.kind);
    }
    assert!(fit.readout[0].identified.iter().all(|&b| b));
    assert_eq!(fit.n_identified, 3, "the product and two readout errors");
}

/// Two-qubit rows: random continuous-angle one-qubit layers alternating with cz.
fn pair_row(layers: usize, rng: &mut ChaCha8Rng) -> Row {
    let mut steps = Vec::new();
    for _ in 0..layers {
        for _ in 0..2 {
            let rz =
                |rng: &mut ChaCha8Rng| Some(Action::ideal(Gate::Rz, rng.random_range(-3.1..3.1)));
            steps.push(Step::Local([rz(rng), rz(rng)]));
            steps.push(Step::Local([
                Some(Action::occurrence(Gate::Sx, 0.0, SX)),
                Some(Action::occurrence(Gate::Sx, 0.0, SX1)),
            ]));
        }
        steps.push(Step::Joint { action: Action::occurrence(Gate::Cz, 0.0, CZ), reversed: false });
    }
    Row { steps, readout: vec![0, 1], counts: vec![0; 4] }
}

#[test]
fn coupler_fit_recovers_two_qubit_rate_with_one_qubit_channels_fixed() {
    let mut rng = ChaCha8Rng::seed_from_u64(5);
    let rows: Vec<Row> = [2usize, 5, 10, 20]
        .iter()
        .flat_map(|&l| (0..10).map(move |_| l))
        .map(|l| pair_row(l, &mut rng))
        .collect();
    let s = spec(Family::Depolarizing);
    let mut truth = Params::initial(&s).unwrap();
    truth.kinds[SX] = KindParams::depolarizing(1, 0.004).unwrap();
    truth.kinds[SX1] = KindParams::depolarizing(1, 0.006).unwrap();
    truth.kinds[CZ] = KindParams::depolarizing(2, 0.03).unwrap();
    truth.readout = vec![Readout::new(0.02, 0.03).unwrap(), Readout::new(0.015, 0.04).unwrap()];
    let data = simulate(&rows, &s, &truth, 2000, &mut rng);
    let fit = fit_coupler(&data, &s, &truth, None, &FitOptions::default()).unwrap();
    assert!(fit.converged, "{:?}", fit.warnings);
    assert_eq!(fit.kinds.len(), 1, "only the two-qubit kind is free");
    assert!(fit.readout.is_empty());
    let cz = &fit.kinds[0];
    within("cz p", cz.values[0], 0.03, cz.std_errors[0], 3.0);
    assert_eq!(fit.dof, 40 * 3 - 1);
    assert!(fit.excess_sigma.unwrap().abs() < 4.0);
    // The one-qubit channels were held fixed.
    assert_eq!(fit.params.kinds[SX], truth.kinds[SX]);

    // The same data under the Pauli family: 15 rates; the total stays near the truth.
    let sp = spec(Family::Pauli);
    let fixed = Params {
        family: Family::Pauli,
        kinds: truth.kinds.iter().map(|k| k.convert(Family::Pauli)).collect(),
        readout: truth.readout.clone(),
    };
    let fit = fit_coupler(&data, &sp, &fixed, None, &FitOptions::default()).unwrap();
    let cz = &fit.kinds[0];
    let e_true = 0.03 * 15.0 / 16.0;
    assert!(
        (cz.error_rate - e_true).abs() < 0.2 * e_true,
        "cz error {} vs {e_true}",
        cz.error_rate
    );
}

/// Log-likelihood sum n_x ln p_x of prepared rows under `params`, straight from `predict`.
fn log_likelihood(rows: &[PreparedRow], params: &Params) -> f64 {
    rows.iter()
        .map(|r| {
            let probs = predict(r, params).probs;
            r.counts().iter().zip(&probs).map(|(&c, &p)| c as f64 * p.ln()).sum::<f64>()
        })
        .sum()
}

/// Rows whose id-interleaved sequences look better than the sx rate alone explains: the
/// id rate's unconstrained optimum lies below zero, so the fit must hold it at zero.
/// Counts are the expected counts (no sampling), so the case is the same on every run.
#[test]
fn rate_with_outward_gradient_is_held_at_zero_and_kkt_conditions_hold() {
    let mut rng = ChaCha8Rng::seed_from_u64(7);
    let rows = rb_rows(&mut rng);
    let s = spec(Family::Depolarizing);
    let truth = |p_sx: f64| {
        let mut t = Params::initial(&s).unwrap();
        t.kinds[SX] = KindParams::depolarizing(1, p_sx).unwrap();
        t.kinds[ID] = KindParams::depolarizing(1, 0.0).unwrap();
        t.readout[0] = Readout::new(0.02, 0.04).unwrap();
        t
    };
    let (plain, better) = (truth(0.008), truth(0.006));
    let shots = 4000u64;
    let data: Vec<PreparedRow> = rows
        .iter()
        .map(|r| {
            let pr = PreparedRow::new(r, &s).unwrap();
            let interleaved = r
                .steps
                .iter()
                .any(|st| matches!(st, Step::Local([Some(a), None]) if a.gate == Gate::Id));
            let probs = predict(&pr, if interleaved { &better } else { &plain }).probs;
            let c0 = (probs[0] * shots as f64).round() as u64;
            pr.with_counts(vec![c0, shots - c0]).unwrap()
        })
        .collect();
    let fit = fit_qubit(&data, &s, None, &FitOptions::default()).unwrap();
    assert!(fit.converged, "{:?}", fit.warnings);
    assert!(fit.warnings.is_empty(), "{:?}", fit.warnings);
    assert!(fit.iterations <= 30, "{} steps", fit.iterations);
    let id = fit.kinds.iter().find(|k| k.kind == ID).unwrap();
    let sx = fit.kinds.iter().find(|k| k.kind == SX).unwrap();
    assert!(id.values[0] < 1e-10, "id rate {} is not at its bound", id.values[0]);
    assert!(sx.values[0] > 1e-3, "sx rate {} should be interior", sx.values[0]);

    // KKT conditions (common practice), checked by finite differences of the likelihood
    // computed from `predict`, not from the optimiser's own gradient.
    let at = &fit.params;
    let ll0 = log_likelihood(&data, at);
    assert!((ll0 - fit.log_likelihood).abs() <= 1e-9 * ll0.abs());
    let h = 1e-5;
    // Lower bound active: moving the id rate into the feasible side lowers the likelihood,
    // and by a first-order amount (the gradient is strictly outward).
    let mut up = at.clone();
    up.kinds[ID] = KindParams::depolarizing(1, h).unwrap();
    let d_id = (log_likelihood(&data, &up) - ll0) / h;
    assert!(d_id < -1.0, "d ll / d p_id = {d_id} at the bound; want clearly negative");
    // Interior coordinates: the central-difference gradient vanishes, measured against the
    // curvature (gradient x standard error is the likelihood change over one sigma).
    let central = |set: &dyn Fn(&mut Params, f64)| {
        let (mut a, mut b) = (at.clone(), at.clone());
        set(&mut a, h);
        set(&mut b, -h);
        (log_likelihood(&data, &a) - log_likelihood(&data, &b)) / (2.0 * h)
    };
    let p_sx = sx.values[0];
    let g_sx = central(&|p, d| p.kinds[SX] = KindParams::depolarizing(1, p_sx + d).unwrap());
    let ro = fit.readout[0].errors;
    let g_e0 = central(&|p, d| p.readout[0] = Readout::new(ro[0] + d, ro[1]).unwrap());
    let g_e1 = central(&|p, d| p.readout[0] = Readout::new(ro[0], ro[1] + d).unwrap());
    let se_sx = sx.std_errors[0].unwrap();
    let [se0, se1] = fit.readout[0].std_errors.map(Option::unwrap);
    for (name, g, se) in [("p_sx", g_sx, se_sx), ("P(1|0)", g_e0, se0), ("P(0|1)", g_e1, se1)] {
        assert!((g * se).abs() < 1e-3, "{name}: gradient {g:.3e} x se {se:.2e} is not small");
    }
}

/// Every shot on the ideal outcome: every rate and readout error has its optimum at zero,
/// so the whole active set is held and the fit must still end converged and without error.
#[test]
fn error_free_rows_put_every_rate_on_its_bound() {
    let mut rng = ChaCha8Rng::seed_from_u64(11);
    let rows = rb_rows(&mut rng);
    let s = spec(Family::Depolarizing);
    let ideal = {
        let mut t = Params::initial(&s).unwrap();
        for k in [SX, ID] {
            t.kinds[k] = KindParams::depolarizing(1, 0.0).unwrap();
        }
        t.readout[0] = Readout::new(0.0, 0.0).unwrap();
        t
    };
    let data: Vec<PreparedRow> = rows
        .iter()
        .map(|r| {
            let pr = PreparedRow::new(r, &s).unwrap();
            let p0 = predict(&pr, &ideal).probs[0];
            let c0 = if p0 > 0.5 { 1000 } else { 0 };
            pr.with_counts(vec![c0, 1000 - c0]).unwrap()
        })
        .collect();
    let fit = fit_qubit(&data, &s, None, &FitOptions::default()).unwrap();
    assert!(fit.converged, "{:?}", fit.warnings);
    for k in &fit.kinds {
        assert!(k.values[0] < 1e-10, "kind {}: rate {}", k.kind, k.values[0]);
    }
    for e in fit.readout[0].errors {
        assert!(e < 1e-10, "readout error {e}");
    }
}

/// The demo's point fits converge without a warning, and each qubit's fit reaches a
/// log-likelihood at least as high as the earlier optimiser did on the same rows: those of the
/// demo scenario before it gained its gate-pair circuit (rebuilt here: the standard design and
/// demo-data/noise.toml without its `[[gate_context]]` term, which is that scenario bit for bit).
#[test]
fn demo_fits_converge_and_no_qubit_fit_gets_worse() {
    let tmp = tempfile::tempdir().unwrap();
    let run = |args: &[&str]| {
        let o = std::process::Command::new(env!("CARGO_BIN_EXE_slackmap")).args(args).output();
        let o = o.unwrap();
        assert!(o.status.success(), "{args:?}: {}", String::from_utf8_lossy(&o.stderr));
        String::from_utf8_lossy(&o.stdout).into_owned()
    };
    let path = |p: &std::path::Path| p.to_string_lossy().into_owned();
    let demo_dir = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-data");
    let out = tmp.path().join("demo");
    let stdout =
        run(&["demo", "--replicates", "20", "--null-replicates", "20", "-q", "--out", &path(&out)]);
    assert!(!stdout.contains("without converging"), "{stdout}");
    let audit: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("audit.json")).unwrap()).unwrap();
    assert_eq!(audit["fit"]["not_converged"], serde_json::json!([]));
    let codes: Vec<&str> =
        audit["warnings"].as_array().unwrap().iter().filter_map(|w| w["code"].as_str()).collect();
    assert!(!codes.contains(&"fit-not-converged"), "{codes:?}");

    // The earlier scenario: standard design, no gate-context term.
    let layout = path(&demo_dir.join("layout.toml"));
    let design = tmp.path().join("design");
    run(&["design", "--layout", &layout, "--depths", "1,4,16,48", "--sequences", "3"]
        .into_iter()
        .chain(["--seed", "2026", "--out", &path(&design)])
        .collect::<Vec<_>>());
    let noise = std::fs::read_to_string(demo_dir.join("noise.toml")).unwrap();
    let mut kept = String::new();
    let mut skipping = false;
    for line in noise.lines() {
        if line.trim().starts_with('[') {
            skipping = line.trim() == "[[gate_context]]";
        }
        if !skipping {
            kept.push_str(line);
            kept.push('\n');
        }
    }
    std::fs::write(tmp.path().join("noise.toml"), kept).unwrap();
    let circuits = path(&design.join("circuits.json"));
    let counts = path(&tmp.path().join("counts.csv"));
    let noise = path(&tmp.path().join("noise.toml"));
    run(&["simulate", "--layout", &layout, "--circuits", &circuits, "--noise", &noise]
        .into_iter()
        .chain(["--shots", "1000", "--seed", "7", "--out", &counts])
        .collect::<Vec<_>>());
    let out = tmp.path().join("earlier");
    let stdout = run(&["audit", "--layout", &layout, "--circuits", &circuits, "--counts", &counts]
        .into_iter()
        .chain(["--replicates", "0", "--null-replicates", "0", "-q", "--out", &path(&out)])
        .collect::<Vec<_>>());
    assert!(!stdout.contains("without converging"), "{stdout}");

    // Sum of reference-row LLR (2 sum n ln(f/p)) per qubit block; a lower LLR is a higher
    // log-likelihood on the same rows. Recorded from the earlier optimiser's demo output.
    let earlier = [
        42.53243560632523,
        27.961444672907476,
        50.00626825095921,
        46.43830568929767,
        39.67493434758079,
        63.79659939568466,
        35.85412774411408,
        881.2329671536144,
        351.1378411093564,
        44.52264766347806,
        41.11138982295096,
        51.4087343533679,
        37.76507039122863,
        31.706720099325366,
        36.32006816596886,
        46.22020062787055,
    ];
    let mut now = [0.0f64; 16];
    let mut reader = csv::Reader::from_path(out.join("rows.csv")).unwrap();
    let head = reader.headers().unwrap().clone();
    let col = |name: &str| head.iter().position(|h| h == name).unwrap();
    let (block, reference, llr) = (col("block"), col("reference"), col("llr_before"));
    for rec in reader.records() {
        let rec = rec.unwrap();
        let b = &rec[block];
        if &rec[reference] == "true" && b.starts_with('q') && !b.contains('-') {
            let q: usize = b[1..].parse().unwrap();
            now[q] += rec[llr].parse::<f64>().unwrap();
        }
    }
    for (q, (&was, &is)) in earlier.iter().zip(&now).enumerate() {
        assert!(is <= was * (1.0 + 1e-9) + 1e-9, "q{q}: reference LLR {is} above earlier {was}");
    }
}

/// Timing figures (run with `cargo test --release --test model_fit -- --ignored --nocapture`).
#[test]
#[ignore = "prints timing figures; not a pass/fail test"]
fn timing_figures() {
    let mut rng = ChaCha8Rng::seed_from_u64(1);
    let time = |label: &str, reps: usize, f: &mut dyn FnMut()| {
        let t = Instant::now();
        for _ in 0..reps {
            f();
        }
        println!("{label}: {:.1} us", t.elapsed().as_secs_f64() * 1e6 / reps as f64);
    };
    // One qubit, 150 layers (30 Cliffords of 5 layers).
    let row = rb_row(29, false, 0, &mut rng);
    println!("1q row layers: {}", row.steps.len());
    for fam in [Family::Depolarizing, Family::Pauli, Family::PauliCoherent] {
        let s = spec(fam);
        let p = Params::initial(&s).unwrap();
        let pr = PreparedRow::new(&row, &s).unwrap();
        time(&format!("predict+jacobian 1q 150 layers {}", fam.name()), 2000, &mut || {
            std::hint::black_box(predict(&pr, &p));
        });
    }
    let row2 = pair_row(40, &mut rng);
    println!("2q row layers: {}", row2.steps.len());
    for fam in [Family::Depolarizing, Family::Pauli, Family::PauliCoherent] {
        let s = spec(fam);
        let p = Params::initial(&s).unwrap();
        let pr = PreparedRow::new(&row2, &s).unwrap();
        time(&format!("predict+jacobian 2q 200 layers {}", fam.name()), 200, &mut || {
            std::hint::black_box(predict(&pr, &p));
        });
    }
    let rows = rb_rows(&mut rng);
    let (truth, _, _) = depolarizing_truth();
    let data = simulate(&rows, &spec(Family::Pauli), &truth, 1000, &mut rng);
    for fam in [Family::Depolarizing, Family::Pauli, Family::PauliCoherent] {
        let s = spec(fam);
        let mut iters = 0;
        time(&format!("fit_qubit 60 rows {}", fam.name()), 5, &mut || {
            iters = fit_qubit(&data, &s, None, &FitOptions::default()).unwrap().iterations;
        });
        println!("  iterations {iters}");
    }
    let s = spec(Family::Depolarizing);
    let t = Instant::now();
    let point = fit_qubit(&data, &s, None, &FitOptions::default()).unwrap();
    let first = t.elapsed();
    let t = Instant::now();
    let warm = fit_qubit(&data, &s, Some(&point.params), &FitOptions::default()).unwrap();
    println!("cold fit {:?}, warm refit {:?} ({} steps)", first, t.elapsed(), warm.iterations);
    // A bootstrap-like replicate: counts resampled from the observed frequencies.
    let replicate: Vec<PreparedRow> = data
        .iter()
        .map(|r| {
            let n = r.shots();
            let f: Vec<f64> = r.counts().iter().map(|&c| c as f64 / n as f64).collect();
            r.with_counts(sample(&f, n, &mut rng)).unwrap()
        })
        .collect();
    for fam in [Family::Depolarizing, Family::Pauli] {
        let s = spec(fam);
        let point = fit_qubit(&data, &s, None, &FitOptions::default()).unwrap();
        let t = Instant::now();
        let refit = fit_qubit(&replicate, &s, Some(&point.params), &FitOptions::default()).unwrap();
        println!(
            "replicate refit {}: {:?} ({} steps, converged {}) {:?}",
            fam.name(),
            t.elapsed(),
            refit.iterations,
            refit.converged,
            refit.warnings
        );
    }
}
