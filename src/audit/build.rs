//! Assembles the [`AuditReport`] from the analysis, the LP solutions and the assessment,
//! and decides verdicts (method.md section 6).

use super::assess::{detected_verdict, direction_verdict, is_detected, Assessed, ZERO_SCORE};
use super::gates::{GateDirected, Unit};
use super::problems::Budget;
use super::{kind_occurrences, row_slacks, Analysis, AuditConfig, Solved};
use crate::report::*;
use crate::slack::projection::{llr, weaken};

fn excess(llr: f64, dof: f64) -> f64 {
    if dof > 0.0 {
        (llr - dof) / (2.0 * dof).sqrt()
    } else {
        0.0
    }
}

fn median(v: &mut [u64]) -> u64 {
    if v.is_empty() {
        return 0;
    }
    v.sort_unstable();
    v[(v.len() - 1) / 2]
}

/// Revisits the verdicts of detected directions once the bootstrap intervals are in
/// (`pairs`: each edge's (a<-b, b<-a) positions in `report.directed`): `recalibrate` then
/// needs the one-sided lower bound above the action threshold. [`report`] used the
/// attribution minimum or leave-one-out; the same rule as `direction_verdict` decides
/// "detected". Orders the edges afterwards.
pub(crate) fn revisit_verdicts(report: &mut AuditReport, pairs: &[(usize, usize)]) {
    let threshold = report.parameters.action_threshold_tvd_per_layer;
    let nulls = report.parameters.null_replicates;
    for (e, &(ab, ba)) in report.edges.iter_mut().zip(pairs) {
        let both = [&report.directed[ab], &report.directed[ba]];
        if let Some((v, code, why)) = detected_lead(both.into_iter(), threshold, nulls) {
            e.verdict = v;
            e.reason_code = code;
            e.reason = why;
        }
    }
    order_edges(&mut report.edges);
    revisit_gate_verdicts(report);
}

/// The verdict of the strongest detected direction among `directions` once intervals are
/// in, naming it, or None when none is detected (the point verdict then stands).
fn detected_lead<'d>(
    directions: impl Iterator<Item = &'d DirectedReport>,
    threshold: f64,
    nulls: usize,
) -> Option<(Verdict, ReasonCode, String)> {
    let mut lead: Option<(Verdict, ReasonCode, String)> = None;
    for d in directions {
        if !(nulls > 0 && is_detected(d)) {
            continue;
        }
        let low = d.confidence.as_ref().map_or(0.0, |c| c.lower_bound_tvd_per_layer);
        let (v, code, why) = detected_verdict(d.p_value, low, threshold);
        if lead.as_ref().is_none_or(|l| v < l.0) {
            lead = Some((v, code, format!("{}<-{}: {}", d.victim, d.aggressor, why)));
        }
    }
    lead
}

/// Detected entries first, by score, then the rest (ties by the two names); ranks for
/// positive scores only. `key` gives (verdict, score, a, b), `rank` sets the rank.
fn order_ranked<T>(
    items: &mut [T],
    key: impl Fn(&T) -> (Verdict, f64, &str, &str),
    rank: impl Fn(&mut T, Option<usize>),
) {
    items.sort_by(|p, q| {
        let (kp, kq) = (key(p), key(q));
        let detected = |k: &(Verdict, f64, &str, &str)| k.0 <= Verdict::Watch;
        detected(&kq)
            .cmp(&detected(&kp))
            .then(kq.1.total_cmp(&kp.1))
            .then(kp.2.cmp(kq.2))
            .then(kp.3.cmp(kq.3))
    });
    let mut k = 0;
    for e in items.iter_mut() {
        let positive = key(e).1 > 0.0;
        rank(e, None);
        if positive {
            k += 1;
            rank(e, Some(k));
        }
    }
}

/// Detected edges first, by score, then the rest; ranks for positive scores only.
pub(crate) fn order_edges(edges: &mut [EdgeReport]) {
    order_ranked(
        edges,
        |e| (e.verdict, e.score_tvd_per_layer, e.a.as_str(), e.b.as_str()),
        |e, r| e.rank = r,
    );
}

/// The point-estimate report; `parametric[i]` is directed pair i's parametric-null
/// (limit, p-value) when that null was run.
pub(crate) fn report(
    a: &Analysis,
    s: &Solved,
    x: &Assessed,
    gates: &[GateDirected],
    estimate: &(Vec<f64>, Vec<f64>),
    cfg: &AuditConfig,
    parametric: Option<&[(f64, f64)]>,
) -> AuditReport {
    let (est_directed, est_intrinsic) = estimate;
    let par = |i: usize| parametric.and_then(|p| p.get(i).copied());
    let finite = |v: f64| v.is_finite().then_some(v);
    let layout = a.layout;
    let id = |q: usize| layout.id(q).to_string();
    let kinds = &a.rows.kinds;

    // Directed reports.
    let directed: Vec<DirectedReport> = x
        .directed
        .iter()
        .enumerate()
        .map(|(i, d)| {
            let profile =
                if d.score > 0.0 || x.directed[x.index[&(d.aggressor, d.victim)]].score > 0.0 {
                    super::profile::depth_profile(a, d.victim, d.aggressor)
                } else {
                    Vec::new()
                };
            directed_report(a, d, id(d.victim), id(d.aggressor), est_directed[i], par(i), profile)
        })
        .collect();

    // Edges.
    let mut edges: Vec<EdgeReport> = layout
        .neighbour_pairs()
        .into_iter()
        .map(|(qa, qb)| {
            let (iab, iba) = (x.index[&(qa, qb)], x.index[&(qb, qa)]);
            let (ab, ba) = (&x.directed[iab], &x.directed[iba]);
            let imain = if ba.score > ab.score { iba } else { iab };
            let (va, ca, ra) = direction_verdict(ab, cfg);
            let (vb, cb, rb) = direction_verdict(ba, cfg);
            let main = if ba.score > ab.score { ba } else { ab };
            // The direction with the stronger verdict leads; between equal verdicts, the larger score.
            let a_leads = va < vb || (va == vb && ab.score >= ba.score);
            let (verdict, code, reason, lead) =
                if a_leads { (va, ca, ra, ab) } else { (vb, cb, rb, ba) };
            let confounded_with = if verdict == Verdict::Confounded {
                lead.co_active
                    .iter()
                    .filter(|&&o| {
                        x.index
                            .get(&(lead.victim, o))
                            .is_some_and(|&i| x.directed[i].attribution.1 > ZERO_SCORE)
                    })
                    .map(|&o| id(o))
                    .collect()
            } else {
                Vec::new()
            };
            EdgeReport {
                a: id(qa),
                b: id(qb),
                coupled: layout.coupler(qa, qb).is_some(),
                score_tvd_per_layer: ab.score.max(ba.score),
                a_from_b_tvd_per_layer: ab.score,
                b_from_a_tvd_per_layer: ba.score,
                rank: None,
                estimate_tvd_per_layer: est_directed[iab].max(est_directed[iba]),
                sensitivity_tvd_per_layer: ab.sensitivity.max(ba.sensitivity),
                detection_limit_tvd_per_layer: main.limit,
                p_value: main.p_value,
                attribution_min_tvd_per_layer: main.attribution.0,
                attribution_max_tvd_per_layer: main.attribution.1,
                supporting_rows: main.supporting_rows,
                supporting_circuits: main.supporting_circuits,
                leave_one_out_tvd_per_layer: main.loo,
                most_influential_circuit: main
                    .most_influential
                    .map(|c| a.circuits.circuits[c as usize].id.clone()),
                confounded_with,
                confidence: None,
                rank_confidence: None,
                parametric_limit_tvd_per_layer: par(imain).and_then(|p| finite(p.0)),
                parametric_p_value: par(imain).map(|p| p.1),
                verdict,
                reason_code: code,
                reason: format!("{}<-{}: {}", id(lead.victim), id(lead.aggressor), reason),
            }
        })
        .collect();
    order_edges(&mut edges);

    // Intrinsic slack per kind.
    let occ = kind_occurrences(a);
    let fit_of = |k: crate::rows::KindIx| {
        let kind = kinds.get(k);
        let fits = if kind.gate.arity() == 1 {
            a.fitted.qubit_fits[kind.qubits[0]].as_ref()
        } else {
            layout
                .coupler(kind.qubits[0], kind.qubits[1])
                .and_then(|c| a.fitted.coupler_fits[c].as_ref())
        };
        fits.and_then(|f| f.kinds.iter().find(|kf| kf.kind == k as usize)).map(|kf| kf.error_rate)
    };
    let omega = |k: crate::rows::KindIx| super::intrinsic_slack(a, s, k);
    let mut intrinsic: Vec<IntrinsicReport> = (0..kinds.len() as u32)
        .filter(|k| occ.contains_key(k))
        .map(|k| {
            let kind = kinds.get(k);
            let all_rows = if kind.gate.arity() == 1 {
                a.fitted.fitted_on_all_rows_qubits[kind.qubits[0]]
            } else {
                layout
                    .coupler(kind.qubits[0], kind.qubits[1])
                    .is_some_and(|c| a.fitted.fitted_on_all_rows_couplers[c])
            };
            IntrinsicReport {
                kind: kind.label(layout),
                occurrences: occ[&k].0,
                reference_occurrences: occ[&k].1,
                slack_tvd_per_occurrence: omega(k),
                estimate_tvd_per_occurrence: est_intrinsic[k as usize],
                fitted_error_rate: fit_of(k).unwrap_or(f64::NAN),
                fitted_on_all_rows: all_rows,
                qubits: kind.qubits().iter().map(|&q| id(q)).collect(),
                confidence: None,
            }
        })
        .collect();
    intrinsic.sort_by(|p, q| p.kind.cmp(&q.kind));
    let readout: Vec<ReadoutReport> = (0..layout.n_qubits())
        .filter(|&q| a.fitted.qubit_fits[q].is_some())
        .map(|q| {
            let e = a.fitted.params.readout[q].errors();
            let (p, sol) = &s.qubit[q];
            ReadoutReport {
                qubit: id(q),
                p1_given_0: e[0],
                p0_given_1: e[1],
                slack_tvd: p.value(sol, Budget::Readout(q)),
            }
        })
        .collect();

    // Fit summary.
    let fits = a.fitted.qubit_fits.iter().chain(&a.fitted.coupler_fits).flatten();
    let (mut ref_llr, mut ref_dof, mut n_ident) = (0.0, 0.0, 0usize);
    let mut unidentified = Vec::new();
    let mut not_converged = Vec::new();
    for f in fits {
        ref_llr += f.llr;
        ref_dof += f.dof as f64;
        n_ident += f.n_identified;
        for kf in &f.kinds {
            for (name, ok) in kf.names.iter().zip(&kf.identified) {
                if !ok {
                    unidentified.push(format!(
                        "{}:{}",
                        kinds.get(kf.kind as u32).label(layout),
                        name
                    ));
                }
            }
        }
        if !f.converged {
            not_converged.push(
                f.kinds.first().map(|k| kinds.get(k.kind as u32).label(layout)).unwrap_or_default(),
            );
        }
    }
    let slacks = row_slacks(a, s);
    let (mut before, mut after, mut dof_all, mut needing) = (0.0, 0.0, 0.0, 0usize);
    let mut threshold = 0.0f64;
    let mut row_reports = Vec::with_capacity(a.used.len());
    for &i in &a.used {
        let row = &a.rows.rows[i];
        let Some(m) = &row.marginal else { continue };
        let p = &a.predictions[i];
        let (l0, l1) = (llr(m, p), llr(m, &weaken(p, m, slacks[i])));
        before += l0;
        after += l1;
        row_reports.push(RowReport {
            circuit: a.circuits.circuits[row.circuit as usize].id.clone(),
            block: row.block.iter().map(|&q| id(q)).collect::<Vec<_>>().join("-"),
            reference: row.is_reference,
            shots: row.shots,
            timed_layers: row.n_timed_layers,
            llr_before: l0,
            requirement_tvd: a.requirement[i],
            slack_tvd: slacks[i],
            llr_after: l1,
        });
        dof_all += (m.len() - 1) as f64;
        if a.requirement[i] > 0.0 {
            needing += 1;
        }
        threshold = threshold.max(a.thresholds.of_outcomes(m.len()));
    }
    dof_all -= n_ident as f64;

    // Per circuit, the shots of its first used row (one pass: a search of the used rows
    // per circuit was quadratic, seconds on a thousand-qubit chip).
    let mut first_used: Vec<Option<u64>> = vec![None; a.circuits.circuits.len()];
    for &i in &a.used {
        let row = &a.rows.rows[i];
        first_used[row.circuit as usize].get_or_insert(row.shots);
    }
    let mut shots: Vec<u64> = first_used.into_iter().flatten().collect();
    let circuits_with_counts = shots.len();
    let shots_total = shots.iter().sum();
    let shots_min = shots.iter().copied().min().unwrap_or(0);
    let shots_max = shots.iter().copied().max().unwrap_or(0);
    let shots_median = median(&mut shots);

    let mut warnings: Vec<WarningReport> = a.warnings.iter().map(WarningReport::from).collect();
    warnings.dedup();

    AuditReport {
        schema: SCHEMA,
        tool_version: env!("CARGO_PKG_VERSION").to_string(),
        label: None,
        created: None,
        caution: CAUTION.to_string(),
        layout: LayoutSummary {
            name: layout.name.clone(),
            qubits: layout.qubits.iter().map(|q| q.id.clone()).collect(),
            positions: layout.qubits.iter().map(|q| q.position).collect(),
            couplers: layout.couplers.iter().map(|&(p, q)| [id(p), id(q)]).collect(),
            neighbour_pairs: layout.neighbour_pairs().len(),
        },
        inputs: cfg.inputs.clone(),
        parameters: Parameters {
            model: cfg.family.name().to_string(),
            alpha: cfg.alpha,
            action_threshold_tvd_per_layer: cfg.action_threshold_tvd_per_layer,
            null_replicates: cfg.null_replicates,
            seed: cfg.seed,
            bit_order: cfg.bit_order.clone(),
            replicates: cfg.bootstrap.replicates,
            resample: if cfg.bootstrap.replicates > 0 {
                cfg.bootstrap.resample.name().into()
            } else {
                "none".into()
            },
            level: cfg.bootstrap.level,
        },
        data: DataSummary {
            circuits: a.circuits.len(),
            circuits_with_counts,
            rows: a.used.len(),
            reference_rows: a.used.iter().filter(|&&i| a.rows.rows[i].is_reference).count(),
            shots_min,
            shots_median,
            shots_max,
            shots_total,
        },
        fit: FitSummary {
            reference_llr: ref_llr,
            reference_dof: ref_dof,
            reference_excess_sigma: excess(ref_llr, ref_dof),
            all_llr_before: before,
            all_dof: dof_all,
            all_excess_sigma_before: excess(before, dof_all),
            all_llr_after: after,
            all_excess_sigma_after: excess(after, dof_all),
            row_threshold_llr: threshold,
            rows_needing_slack: needing,
            unidentified,
            not_converged,
        },
        edges,
        directed,
        intrinsic,
        readout,
        warnings,
        gates: gate_report(a, gates, &est_directed[x.directed.len()..], cfg, &|i| {
            par(x.directed.len() + i)
        }),
        rows: row_reports,
    }
}

/// The report of one direction (a qubit pair's, or a gate pair's with unit labels).
fn directed_report(
    a: &Analysis,
    d: &super::assess::Directed,
    victim: String,
    aggressor: String,
    estimate: f64,
    parametric: Option<(f64, f64)>,
    depth_profile: Vec<DepthPoint>,
) -> DirectedReport {
    let circuit = |c: u32| a.circuits.circuits[c as usize].id.clone();
    let kinds = &a.rows.kinds;
    DirectedReport {
        victim,
        aggressor,
        score_tvd_per_layer: d.score,
        estimate_tvd_per_layer: estimate,
        sensitivity_tvd_per_layer: d.sensitivity,
        driven_tvd_per_layer: d.driven,
        idle_tvd_per_layer: d.idle,
        attribution_min_tvd_per_layer: d.attribution.0,
        attribution_max_tvd_per_layer: d.attribution.1,
        detection_limit_tvd_per_layer: d.limit,
        p_value: d.p_value,
        detected: d.detected,
        corroboration_p_value: d.corroboration_p,
        supporting_rows: d.supporting_rows,
        supporting_circuits: d.supporting_circuits,
        isolated_tvd_per_layer: d.isolated,
        top_supporting_circuits: d.top_circuits.iter().map(|&c| circuit(c)).collect(),
        leave_one_out_tvd_per_layer: d.loo,
        most_influential_circuit: d.most_influential.map(circuit),
        per_kind: d
            .per_kind
            .iter()
            .map(|&(k, v)| KindValue { kind: kinds.get(k).label(a.layout), value: v })
            .collect(),
        depth_profile,
        confidence: None,
        parametric_limit_tvd_per_layer: parametric.and_then(|p| p.0.is_finite().then_some(p.0)),
        parametric_p_value: parametric.map(|p| p.1),
    }
}

/// The gate section: every gate direction, the pairs they form with their verdicts (by the
/// edges' rules), and the sparse matrices. `estimates[i]` and `parametric(i)` belong to
/// `gates[i]`.
fn gate_report(
    a: &Analysis,
    gates: &[GateDirected],
    estimates: &[f64],
    cfg: &AuditConfig,
    parametric: &dyn Fn(usize) -> Option<(f64, f64)>,
) -> GateReport {
    if gates.is_empty() {
        return GateReport::default();
    }
    let layout = a.layout;
    let directed: Vec<DirectedReport> = gates
        .iter()
        .enumerate()
        .map(|(i, g)| {
            let (v, r) = (g.victim.label(layout), g.aggressor.label(layout));
            directed_report(a, &g.d, v, r, estimates[i], parametric(i), Vec::new())
        })
        .collect();
    let index = super::gates::index(gates);
    // Unordered pairs, a coupler first.
    let key = |u: Unit| match u {
        Unit::Coupler(c) => (0, c),
        Unit::Qubit(q) => (1, q),
    };
    let mut pairs: Vec<(Unit, Unit)> = gates
        .iter()
        .map(|g| {
            let (u, v) = (g.victim, g.aggressor);
            if key(u) <= key(v) {
                (u, v)
            } else {
                (v, u)
            }
        })
        .collect();
    pairs.sort_by_key(|&(u, v)| (key(u), key(v)));
    pairs.dedup();
    let gate_name = |u: Unit| match u {
        Unit::Coupler(c) => Some(layout.natives_text(c)),
        Unit::Qubit(_) => None,
    };
    let mut out: Vec<GatePairReport> = pairs
        .into_iter()
        .map(|(u, v)| {
            let ab = index.get(&(u, v)).copied();
            let ba = index.get(&(v, u)).copied();
            let verdicts: Vec<(usize, (Verdict, ReasonCode, String))> = [ab, ba]
                .into_iter()
                .flatten()
                .map(|i| (i, direction_verdict(&gates[i].d, cfg)))
                .collect();
            // The direction with the stronger verdict leads; between equal verdicts, the
            // larger score (as for edges).
            let (lead, (verdict, code, why)) = verdicts
                .into_iter()
                .reduce(|p, q| {
                    let (sp, sq) = (gates[p.0].d.score, gates[q.0].d.score);
                    if q.1 .0 < p.1 .0 || (q.1 .0 == p.1 .0 && sq > sp) {
                        q
                    } else {
                        p
                    }
                })
                .expect("a pair has at least one measured direction");
            let g = &gates[lead];
            let score = |i: Option<usize>| i.map(|i| gates[i].d.score);
            let confounded_with = if verdict == Verdict::Confounded {
                g.co_active
                    .iter()
                    .filter(|&&o| {
                        index
                            .get(&(g.victim, o))
                            .is_none_or(|&i| gates[i].d.attribution.1 > ZERO_SCORE)
                    })
                    .map(|&o| o.label(layout))
                    .collect()
            } else {
                Vec::new()
            };
            GatePairReport {
                a: u.label(layout),
                a_gate: gate_name(u),
                b: v.label(layout),
                b_gate: gate_name(v),
                score_tvd_per_layer: score(ab).unwrap_or(0.0).max(score(ba).unwrap_or(0.0)),
                a_from_b_tvd_per_layer: score(ab),
                b_from_a_tvd_per_layer: score(ba),
                rank: None,
                estimate_tvd_per_layer: [ab, ba]
                    .into_iter()
                    .flatten()
                    .map(|i| estimates[i])
                    .fold(0.0, f64::max),
                detection_limit_tvd_per_layer: g.d.limit,
                p_value: g.d.p_value,
                victim: g.victim.label(layout),
                aggressor: g.aggressor.label(layout),
                confounded_with,
                confidence: None,
                verdict,
                reason_code: code,
                reason: format!(
                    "{}<-{}: {}",
                    g.victim.label(layout),
                    g.aggressor.label(layout),
                    why
                ),
            }
        })
        .collect();
    order_gate_pairs(&mut out);
    let couplers: Vec<String> =
        (0..layout.couplers.len()).map(|c| Unit::Coupler(c).label(layout)).collect();
    let mut matrix = GateMatrix {
        couplers,
        qubits: layout.qubits.iter().map(|q| q.id.clone()).collect(),
        ..Default::default()
    };
    for (g, &e) in gates.iter().zip(estimates) {
        match (g.victim, g.aggressor) {
            (Unit::Coupler(c), Unit::Coupler(d)) => matrix.coupler_from_coupler.push((c, d, e)),
            (Unit::Coupler(c), Unit::Qubit(r)) => matrix.coupler_from_qubit.push((c, r, e)),
            (Unit::Qubit(q), Unit::Coupler(d)) => matrix.qubit_from_coupler.push((q, d, e)),
            (Unit::Qubit(_), Unit::Qubit(_)) => {}
        }
    }
    GateReport { directed, pairs: out, matrix }
}

/// Detected gate pairs first, by score, then the rest; ranks for positive scores only.
pub(crate) fn order_gate_pairs(pairs: &mut [GatePairReport]) {
    order_ranked(
        pairs,
        |e| (e.verdict, e.score_tvd_per_layer, e.a.as_str(), e.b.as_str()),
        |e, r| e.rank = r,
    );
}

/// [`revisit_verdicts`] for the gate pairs: a detected direction's verdict then rests on its
/// interval's lower end.
fn revisit_gate_verdicts(report: &mut AuditReport) {
    let threshold = report.parameters.action_threshold_tvd_per_layer;
    let nulls = report.parameters.null_replicates;
    let gates = &mut report.gates;
    let index: std::collections::HashMap<(&str, &str), usize> = gates
        .directed
        .iter()
        .enumerate()
        .map(|(j, d)| ((d.victim.as_str(), d.aggressor.as_str()), j))
        .collect();
    for e in gates.pairs.iter_mut() {
        let both = [(e.a.as_str(), e.b.as_str()), (e.b.as_str(), e.a.as_str())];
        let directions = both.iter().filter_map(|k| index.get(k)).map(|&j| &gates.directed[j]);
        if let Some((v, code, why)) = detected_lead(directions, threshold, nulls) {
            e.verdict = v;
            e.reason_code = code;
            e.reason = why;
        }
    }
    order_gate_pairs(&mut gates.pairs);
}
