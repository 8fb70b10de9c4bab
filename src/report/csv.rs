//! CSV outputs: `edges.csv` (ranked edges), `adjacency.csv` (the full victim x aggressor
//! matrix) and `intrinsic.csv` (per-kind intrinsic slack). Full precision, TVD per layer.

use std::collections::HashMap;

use super::{AuditReport, Render};

fn to_bytes<S: AsRef<[u8]>>(header: &[S], rows: Vec<Vec<String>>) -> Vec<u8> {
    let mut w = csv::Writer::from_writer(Vec::new());
    let _ = w.write_record(header);
    for r in rows {
        let _ = w.write_record(&r);
    }
    w.into_inner().unwrap_or_default()
}

fn opt<T: ToString>(v: Option<T>) -> String {
    v.map(|x| x.to_string()).unwrap_or_default()
}

/// A value that may be infinite (never tested): empty when it is.
fn finite(v: f64) -> String {
    if v.is_finite() {
        v.to_string()
    } else {
        String::new()
    }
}

/// Values joined by `;` in one cell (empty without any).
fn joined(v: Option<&Vec<f64>>) -> String {
    v.map_or(String::new(), |v| v.iter().map(|x| x.to_string()).collect::<Vec<_>>().join(";"))
}

/// The header names of [`confidence_cells`], values in `unit` (e.g. `tvd_per_layer`).
fn confidence_columns(unit: &str) -> Vec<String> {
    let mut v = vec!["interval_method".to_string(), "interval_level".to_string()];
    for name in
        ["interval_low", "interval_high", "upper_bound", "bootstrap_median", "bias_corrected"]
    {
        v.push(format!("{name}_{unit}"));
    }
    v.push("p_positive".into());
    v
}

/// Method, level, low, high, upper bound, median, bias-corrected estimate and P(score > 0)
/// of a confidence; empty cells without one.
fn confidence_cells(c: Option<&super::Confidence>) -> Vec<String> {
    match c {
        Some(c) => vec![
            c.method.clone(),
            c.level.to_string(),
            c.low_tvd_per_layer.to_string(),
            c.high_tvd_per_layer.to_string(),
            c.upper_bound_tvd_per_layer.to_string(),
            c.median_tvd_per_layer.to_string(),
            c.centre_tvd_per_layer.to_string(),
            c.p_positive.to_string(),
        ],
        None => vec![String::new(); 8],
    }
}

/// Renders `edges.csv`.
pub struct EdgesCsv;

impl Render for EdgesCsv {
    fn file_name(&self) -> &'static str {
        "edges.csv"
    }

    fn render(&self, r: &AuditReport) -> Vec<u8> {
        let header = [
            "rank",
            "a",
            "b",
            "coupled",
            "score_tvd_per_layer",
            "a_from_b_tvd_per_layer",
            "b_from_a_tvd_per_layer",
            "detection_limit_tvd_per_layer",
            "p_value",
            "attribution_min_tvd_per_layer",
            "attribution_max_tvd_per_layer",
            "supporting_rows",
            "supporting_circuits",
            "leave_one_out_tvd_per_layer",
            "most_influential_circuit",
            "confounded_with",
            "verdict",
            "estimate_tvd_per_layer",
            "sensitivity_tvd_per_layer",
        ]
        .map(String::from)
        .into_iter()
        .chain(confidence_columns("tvd_per_layer"))
        .chain(
            [
                "median_rank",
                "rank_low",
                "rank_high",
                "top_k",
                "p_top_k",
                "parametric_limit_tvd_per_layer",
                "parametric_p_value",
                "replicate_estimates_tvd_per_layer",
                "replicate_scores_tvd_per_layer",
            ]
            .map(String::from),
        )
        .collect::<Vec<_>>();
        let rows = r
            .edges
            .iter()
            .map(|e| {
                vec![
                    opt(e.rank),
                    e.a.clone(),
                    e.b.clone(),
                    e.coupled.to_string(),
                    e.score_tvd_per_layer.to_string(),
                    e.a_from_b_tvd_per_layer.to_string(),
                    e.b_from_a_tvd_per_layer.to_string(),
                    e.detection_limit_tvd_per_layer.to_string(),
                    e.p_value.to_string(),
                    e.attribution_min_tvd_per_layer.to_string(),
                    e.attribution_max_tvd_per_layer.to_string(),
                    e.supporting_rows.to_string(),
                    e.supporting_circuits.to_string(),
                    e.leave_one_out_tvd_per_layer.to_string(),
                    opt(e.most_influential_circuit.clone()),
                    e.confounded_with.join(";"),
                    e.verdict.word().to_string(),
                    e.estimate_tvd_per_layer.to_string(),
                    finite(e.sensitivity_tvd_per_layer),
                ]
                .into_iter()
                .chain(confidence_cells(e.confidence.as_ref()))
                .chain(match &e.rank_confidence {
                    Some(k) => vec![
                        k.median_rank.to_string(),
                        k.rank_low.to_string(),
                        k.rank_high.to_string(),
                        k.top_k.to_string(),
                        k.p_top_k.to_string(),
                    ],
                    None => vec![String::new(); 5],
                })
                .chain([opt(e.parametric_limit_tvd_per_layer), opt(e.parametric_p_value)])
                .chain([
                    joined(e.confidence.as_ref().map(|c| &c.replicates_tvd_per_layer)),
                    joined(e.confidence.as_ref().map(|c| &c.score_replicates_tvd_per_layer)),
                ])
                .collect()
            })
            .collect();
        to_bytes(&header, rows)
    }
}

/// Renders `adjacency.csv`: one row per victim, one column per aggressor (every qubit),
/// the directed score where the two are neighbours and empty otherwise.
pub struct AdjacencyCsv;

impl Render for AdjacencyCsv {
    fn file_name(&self) -> &'static str {
        "adjacency.csv"
    }

    fn render(&self, r: &AuditReport) -> Vec<u8> {
        let ids = &r.layout.qubits;
        let scores: HashMap<(&str, &str), f64> = r
            .directed
            .iter()
            .map(|d| ((d.victim.as_str(), d.aggressor.as_str()), d.score_tvd_per_layer))
            .collect();
        let mut header = vec!["victim"];
        header.extend(ids.iter().map(String::as_str));
        let rows = ids
            .iter()
            .map(|v| {
                let mut row = vec![v.clone()];
                row.extend(ids.iter().map(|a| opt(scores.get(&(v.as_str(), a.as_str())).copied())));
                row
            })
            .collect();
        to_bytes(&header, rows)
    }
}

/// Renders `intrinsic.csv`.
pub struct IntrinsicCsv;

impl Render for IntrinsicCsv {
    fn file_name(&self) -> &'static str {
        "intrinsic.csv"
    }

    fn render(&self, r: &AuditReport) -> Vec<u8> {
        let header = [
            "kind",
            "occurrences",
            "reference_occurrences",
            "slack_tvd_per_occurrence",
            "fitted_error_rate",
            "fitted_on_all_rows",
            "estimate_tvd_per_occurrence",
        ]
        .map(String::from)
        .into_iter()
        .chain(confidence_columns("tvd_per_occurrence"))
        .collect::<Vec<_>>();
        let rows = r
            .intrinsic
            .iter()
            .map(|k| {
                vec![
                    k.kind.clone(),
                    k.occurrences.to_string(),
                    k.reference_occurrences.to_string(),
                    k.slack_tvd_per_occurrence.to_string(),
                    k.fitted_error_rate.to_string(),
                    k.fitted_on_all_rows.to_string(),
                    k.estimate_tvd_per_occurrence.to_string(),
                ]
                .into_iter()
                .chain(confidence_cells(k.confidence.as_ref()))
                .collect()
            })
            .collect();
        to_bytes(&header, rows)
    }
}

/// Renders `rows.csv`: per-row fit diagnostics (written by an audit, not by a re-render).
pub struct RowsCsv;

impl Render for RowsCsv {
    fn file_name(&self) -> &'static str {
        "rows.csv"
    }

    fn render(&self, r: &AuditReport) -> Vec<u8> {
        let header = [
            "circuit",
            "block",
            "reference",
            "shots",
            "timed_layers",
            "llr_before",
            "requirement_tvd",
            "slack_tvd",
            "llr_after",
        ];
        let rows = r
            .rows
            .iter()
            .map(|x| {
                vec![
                    x.circuit.clone(),
                    x.block.clone(),
                    x.reference.to_string(),
                    x.shots.to_string(),
                    x.timed_layers.to_string(),
                    x.llr_before.to_string(),
                    x.requirement_tvd.to_string(),
                    x.slack_tvd.to_string(),
                    x.llr_after.to_string(),
                ]
            })
            .collect();
        to_bytes(&header, rows)
    }
}
