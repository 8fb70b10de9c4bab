//! CSV outputs: `edges.csv` (ranked edges), `replicates.csv` (every bootstrap replicate of
//! every directed pair, long form), `adjacency.csv` (the full victim x aggressor matrix),
//! `intrinsic.csv` (per-kind intrinsic slack), `rows.csv` (per-row fit diagnostics) and
//! `gate_pairs.csv` (ranked gate pairs).
//!
//! One value per cell, at full precision. Column names are the field names of `audit.json`,
//! nested fields joined with `.` (as `pandas.json_normalize` names them), so a column means
//! what the JSON field of the same name means. Lists (`confounded_with`, `qubits`) are joined
//! with `;`. A number without a finite value (JSON `"unbounded"` or `"not-identified"`) and
//! an absent value (JSON field missing or null) are empty cells.

use std::collections::HashMap;

use super::{AuditReport, Confidence, OccurrenceConfidence, Render};

fn to_bytes<S: AsRef<[u8]>>(header: &[S], rows: Vec<Vec<String>>) -> Vec<u8> {
    let mut w = csv::Writer::from_writer(Vec::new());
    let _ = w.write_record(header);
    for r in rows {
        let _ = w.write_record(&r);
    }
    w.into_inner().unwrap_or_default()
}

/// A number at full precision (shortest text that reads back to the same value); empty
/// when it has no finite value.
pub fn num(v: f64) -> String {
    if v.is_finite() {
        v.to_string()
    } else {
        String::new()
    }
}

fn opt<T: ToString>(v: Option<T>) -> String {
    v.map(|x| x.to_string()).unwrap_or_default()
}

fn opt_num(v: Option<f64>) -> String {
    v.map(num).unwrap_or_default()
}

/// The `confidence.*` columns (replicates excluded: they are in `replicates.csv` and
/// `audit.json`), for values in `unit`.
fn confidence_columns(unit: &str) -> Vec<String> {
    let mut v = vec!["confidence.level".to_string(), "confidence.method".to_string()];
    for name in ["low", "high", "upper_bound", "lower_bound", "median"] {
        v.push(format!("confidence.{name}_{unit}"));
    }
    v.push("confidence.p_positive".into());
    v
}

/// The cells of [`confidence_columns`]: level, method, low, high, upper bound, lower bound,
/// median, P(score > 0).
fn confidence_cells(c: Option<[f64; 6]>, level_method: Option<(f64, &str)>) -> Vec<String> {
    match (c, level_method) {
        (Some(v), Some((level, method))) => {
            let mut cells = vec![num(level), method.to_string()];
            cells.extend(v.iter().map(|&x| num(x)));
            cells
        }
        _ => vec![String::new(); 8],
    }
}

fn layer_cells(c: Option<&Confidence>) -> Vec<String> {
    confidence_cells(
        c.map(|c| {
            [
                c.low_tvd_per_layer,
                c.high_tvd_per_layer,
                c.upper_bound_tvd_per_layer,
                c.lower_bound_tvd_per_layer,
                c.median_tvd_per_layer,
                c.p_positive,
            ]
        }),
        c.map(|c| (c.level, c.method.as_str())),
    )
}

fn occurrence_cells(c: Option<&OccurrenceConfidence>) -> Vec<String> {
    confidence_cells(
        c.map(|c| {
            [
                c.low_tvd_per_occurrence,
                c.high_tvd_per_occurrence,
                c.upper_bound_tvd_per_occurrence,
                c.lower_bound_tvd_per_occurrence,
                c.median_tvd_per_occurrence,
                c.p_positive,
            ]
        }),
        c.map(|c| (c.level, c.method.as_str())),
    )
}

/// Renders `gate_pairs.csv`: one row per gate pair in ranked order (the fields of
/// `audit.json`'s `gates.pairs`), written only when the audit measured gate pairs.
pub struct GatePairsCsv;

/// The columns of `gate_pairs.csv`, in order.
pub fn gate_pairs_header() -> Vec<String> {
    [
        "rank",
        "a",
        "a_gate",
        "b",
        "b_gate",
        "victim",
        "aggressor",
        "verdict",
        "reason_code",
        "score_tvd_per_layer",
        "a_from_b_tvd_per_layer",
        "b_from_a_tvd_per_layer",
        "estimate_tvd_per_layer",
    ]
    .map(String::from)
    .into_iter()
    .chain(confidence_columns("tvd_per_layer"))
    .chain(
        ["detection_limit_tvd_per_layer", "p_value", "confounded_with", "reason"].map(String::from),
    )
    .collect()
}

impl Render for GatePairsCsv {
    fn file_name(&self) -> &'static str {
        "gate_pairs.csv"
    }
    fn render(&self, r: &AuditReport) -> Vec<u8> {
        let rows = r
            .gates
            .pairs
            .iter()
            .map(|e| {
                let mut row = vec![
                    opt(e.rank),
                    e.a.clone(),
                    e.a_gate.clone().unwrap_or_default(),
                    e.b.clone(),
                    e.b_gate.clone().unwrap_or_default(),
                    e.victim.clone(),
                    e.aggressor.clone(),
                    e.verdict.word().to_string(),
                    e.reason_code.code().to_string(),
                    num(e.score_tvd_per_layer),
                    opt_num(e.a_from_b_tvd_per_layer),
                    opt_num(e.b_from_a_tvd_per_layer),
                    num(e.estimate_tvd_per_layer),
                ];
                row.extend(layer_cells(e.confidence.as_ref()));
                row.extend([
                    num(e.detection_limit_tvd_per_layer),
                    num(e.p_value),
                    e.confounded_with.join(";"),
                    e.reason.clone(),
                ]);
                row
            })
            .collect();
        to_bytes(&gate_pairs_header(), rows)
    }
}

/// Renders `edges.csv`: one row per edge in ranked order, one value per cell.
pub struct EdgesCsv;

/// The columns of `edges.csv`, in order.
pub fn edges_header() -> Vec<String> {
    [
        "rank",
        "a",
        "b",
        "coupled",
        "verdict",
        "reason_code",
        "score_tvd_per_layer",
        "a_from_b_tvd_per_layer",
        "b_from_a_tvd_per_layer",
        "estimate_tvd_per_layer",
    ]
    .map(String::from)
    .into_iter()
    .chain(confidence_columns("tvd_per_layer"))
    .chain(
        [
            "sensitivity_tvd_per_layer",
            "detection_limit_tvd_per_layer",
            "p_value",
            "attribution_min_tvd_per_layer",
            "attribution_max_tvd_per_layer",
            "supporting_rows",
            "supporting_circuits",
            "leave_one_out_tvd_per_layer",
            "most_influential_circuit",
            "confounded_with",
            "rank_confidence.median_rank",
            "rank_confidence.rank_low",
            "rank_confidence.rank_high",
            "rank_confidence.top_k",
            "rank_confidence.p_top_k",
            "parametric_limit_tvd_per_layer",
            "parametric_p_value",
            "reason",
        ]
        .map(String::from),
    )
    .collect()
}

impl Render for EdgesCsv {
    fn file_name(&self) -> &'static str {
        "edges.csv"
    }

    fn render(&self, r: &AuditReport) -> Vec<u8> {
        let rows = r
            .edges
            .iter()
            .map(|e| {
                vec![
                    opt(e.rank),
                    e.a.clone(),
                    e.b.clone(),
                    e.coupled.to_string(),
                    e.verdict.word().to_string(),
                    e.reason_code.code().to_string(),
                    num(e.score_tvd_per_layer),
                    num(e.a_from_b_tvd_per_layer),
                    num(e.b_from_a_tvd_per_layer),
                    num(e.estimate_tvd_per_layer),
                ]
                .into_iter()
                .chain(layer_cells(e.confidence.as_ref()))
                .chain([
                    num(e.sensitivity_tvd_per_layer),
                    num(e.detection_limit_tvd_per_layer),
                    num(e.p_value),
                    num(e.attribution_min_tvd_per_layer),
                    num(e.attribution_max_tvd_per_layer),
                    e.supporting_rows.to_string(),
                    e.supporting_circuits.to_string(),
                    num(e.leave_one_out_tvd_per_layer),
                    opt(e.most_influential_circuit.clone()),
                    e.confounded_with.join(";"),
                ])
                .chain(match &e.rank_confidence {
                    Some(k) => vec![
                        num(k.median_rank),
                        k.rank_low.to_string(),
                        k.rank_high.to_string(),
                        k.top_k.to_string(),
                        num(k.p_top_k),
                    ],
                    None => vec![String::new(); 5],
                })
                .chain([
                    opt_num(e.parametric_limit_tvd_per_layer),
                    opt_num(e.parametric_p_value),
                    e.reason.clone(),
                ])
                .collect()
            })
            .collect();
        to_bytes(&edges_header(), rows)
    }
}

/// Renders `replicates.csv`: one row per (edge, direction, bootstrap replicate) with the
/// replicate's score and unlimited-shot estimate, edges in ranked order. The edge's own
/// replicate value is the larger of its two directions' in the same replicate. Only the
/// header when no replicates were run.
pub struct ReplicatesCsv;

impl Render for ReplicatesCsv {
    fn file_name(&self) -> &'static str {
        "replicates.csv"
    }

    fn render(&self, r: &AuditReport) -> Vec<u8> {
        let header =
            ["edge", "direction", "replicate", "score_tvd_per_layer", "estimate_tvd_per_layer"];
        let directed: HashMap<(&str, &str), &super::DirectedReport> =
            r.directed.iter().map(|d| ((d.victim.as_str(), d.aggressor.as_str()), d)).collect();
        let mut rows = Vec::new();
        for e in &r.edges {
            for (v, a) in [(&e.a, &e.b), (&e.b, &e.a)] {
                let Some(c) =
                    directed.get(&(v.as_str(), a.as_str())).and_then(|d| d.confidence.as_ref())
                else {
                    continue;
                };
                for (i, est) in c.replicates_tvd_per_layer.iter().enumerate() {
                    rows.push(vec![
                        format!("{}-{}", e.a, e.b),
                        format!("{v}<-{a}"),
                        i.to_string(),
                        c.score_replicates_tvd_per_layer.get(i).map_or(String::new(), |&s| num(s)),
                        num(*est),
                    ]);
                }
            }
        }
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
                row.extend(
                    ids.iter().map(|a| opt_num(scores.get(&(v.as_str(), a.as_str())).copied())),
                );
                row
            })
            .collect();
        to_bytes(&header, rows)
    }
}

/// Renders `intrinsic.csv`, kinds in layout order of their qubits.
pub struct IntrinsicCsv;

impl Render for IntrinsicCsv {
    fn file_name(&self) -> &'static str {
        "intrinsic.csv"
    }

    fn render(&self, r: &AuditReport) -> Vec<u8> {
        let header = [
            "kind",
            "qubits",
            "occurrences",
            "reference_occurrences",
            "slack_tvd_per_occurrence",
            "estimate_tvd_per_occurrence",
        ]
        .map(String::from)
        .into_iter()
        .chain(confidence_columns("tvd_per_occurrence"))
        .chain(["fitted_error_rate", "fitted_on_all_rows"].map(String::from))
        .collect::<Vec<_>>();
        let rows = r
            .intrinsic_in_layout_order()
            .into_iter()
            .map(|k| {
                vec![
                    k.kind.clone(),
                    k.qubits.join(";"),
                    k.occurrences.to_string(),
                    k.reference_occurrences.to_string(),
                    num(k.slack_tvd_per_occurrence),
                    num(k.estimate_tvd_per_occurrence),
                ]
                .into_iter()
                .chain(occurrence_cells(k.confidence.as_ref()))
                .chain([num(k.fitted_error_rate), k.fitted_on_all_rows.to_string()])
                .collect()
            })
            .collect();
        to_bytes(&header, rows)
    }
}

/// Renders `rows.csv`: per-row fit diagnostics (written by an audit or a merge, not by a
/// re-render).
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
        // A row per analysis row (about a hundred thousand on a 144-qubit chip): the fields
        // are written as they are formatted, into one reused buffer, instead of a string
        // each. Same text as `num` and `to_string` give.
        let mut w = csv::Writer::from_writer(Vec::with_capacity(96 * (r.rows.len() + 1)));
        let _ = w.write_record(header);
        let mut field = String::new();
        let mut put = |w: &mut csv::Writer<Vec<u8>>, v: &dyn std::fmt::Display| {
            use std::fmt::Write;
            field.clear();
            let _ = write!(field, "{v}");
            let _ = w.write_field(&field);
        };
        for x in &r.rows {
            let _ = w.write_field(&x.circuit);
            let _ = w.write_field(&x.block);
            put(&mut w, &x.reference);
            put(&mut w, &x.shots);
            put(&mut w, &x.timed_layers);
            for v in [x.llr_before, x.requirement_tvd, x.slack_tvd, x.llr_after] {
                match v.is_finite() {
                    true => put(&mut w, &v),
                    false => {
                        let _ = w.write_field("");
                    }
                }
            }
            let _ = w.write_record(None::<&[u8]>);
        }
        w.into_inner().unwrap_or_default()
    }
}
