//! The terminal report: a summary in words, the ranked edges, the adjacency table and the
//! intrinsic-slack table. Scores are shown in units of 1e-3 TVD per layer; files keep full
//! precision. Colour is a caller's decision (only on a terminal, never with NO_COLOR).

use std::collections::HashMap;
use std::fmt::Write;

use comfy_table::{presets, Attribute, Cell, CellAlignment, Color, ContentArrangement, Table};

use super::{AuditReport, EdgeReport, Verdict};

/// How the terminal report is drawn.
#[derive(Clone, Copy, Debug)]
pub struct TerminalOptions {
    /// Use colour and bold.
    pub color: bool,
    /// Largest layout (in qubits) whose full adjacency table is printed.
    pub full_adjacency_up_to: usize,
    /// Most edges listed in the ranked table (the rest are in edges.csv).
    pub max_edges: usize,
}

impl Default for TerminalOptions {
    fn default() -> Self {
        TerminalOptions { color: false, full_adjacency_up_to: 24, max_edges: 20 }
    }
}

/// Per-mille string of a TVD-per-layer value.
pub fn per_mille(v: f64) -> String {
    if v == 0.0 {
        "0".into()
    } else if v * 1e3 >= 10.0 {
        format!("{:.1}", v * 1e3)
    } else {
        format!("{:.2}", v * 1e3)
    }
}

fn verdict_cell(v: Verdict, color: bool) -> Cell {
    let c = Cell::new(v.word());
    if !color {
        return c;
    }
    match v {
        Verdict::Recalibrate => c.fg(Color::Red).add_attribute(Attribute::Bold),
        Verdict::Watch => c.fg(Color::Yellow),
        Verdict::Confounded => c.fg(Color::Magenta),
        Verdict::Clean => c,
    }
}

fn table(color: bool) -> Table {
    let mut t = Table::new();
    t.load_style(presets::UTF8_FULL_CONDENSED).set_content_arrangement(ContentArrangement::Dynamic);
    if color {
        t.enforce_styling();
    } else {
        t.force_no_tty();
    }
    t
}

fn right(s: String) -> Cell {
    Cell::new(s).set_alignment(CellAlignment::Right)
}

/// The summary in words: what was found, how sure, what to do.
pub fn summary_words(r: &AuditReport) -> String {
    let count = |v: Verdict| r.edges.iter().filter(|e| e.verdict == v).count();
    let (rec, watch, conf) =
        (count(Verdict::Recalibrate), count(Verdict::Watch), count(Verdict::Confounded));
    let mut s = String::new();
    let _ = write!(
        s,
        "{} of {} neighbour pairs show crosstalk that the data cannot explain otherwise",
        rec + watch,
        r.edges.len()
    );
    if rec + watch == 0 {
        s.push('.');
    } else {
        let _ = write!(
            s,
            ": {rec} above the action threshold of {} x1e-3 per layer (recalibrate), {watch} below it (watch).",
            per_mille(r.parameters.action_threshold_tvd_per_layer)
        );
    }
    if conf > 0 {
        let _ = write!(s, " {conf} pairs carry slack that another aggressor could explain instead (confounded): the circuits cannot tell them apart.");
    }
    let worst: Vec<&EdgeReport> =
        r.edges.iter().filter(|e| matches!(e.verdict, Verdict::Recalibrate)).take(3).collect();
    if !worst.is_empty() {
        let names: Vec<String> = worst
            .iter()
            .map(|e| format!("{}-{} ({} x1e-3)", e.a, e.b, per_mille(e.score_tvd_per_layer)))
            .collect();
        let _ = write!(s, " Recalibrate first: {}.", names.join(", "));
    }
    s
}

/// The fit quality in words.
pub fn fit_words(r: &AuditReport) -> String {
    let f = &r.fit;
    let judge = |x: f64| {
        if x.abs() <= 3.0 {
            "fits within shot noise"
        } else if x <= 10.0 {
            "fits roughly"
        } else {
            "does not fit"
        }
    };
    format!(
        "Crosstalk-free model ({}): on reference circuits it {} ({:+.1} sigma); on all circuits \
         before slack it {} ({:+.1} sigma), after slack {:+.1} sigma. {} of {} rows needed slack.",
        r.parameters.model,
        judge(f.reference_excess_sigma),
        f.reference_excess_sigma,
        judge(f.all_excess_sigma_before),
        f.all_excess_sigma_before,
        f.all_excess_sigma_after,
        f.rows_needing_slack,
        r.data.rows
    )
}

/// Renders the whole terminal report.
pub fn render(r: &AuditReport, opt: &TerminalOptions) -> String {
    let mut out = String::new();
    let bold = |s: &str| if opt.color { format!("\x1b[1m{s}\x1b[0m") } else { s.to_string() };
    let _ = writeln!(
        out,
        "{}",
        bold(&format!(
            "slackmap audit of layout {} ({} qubits, {} neighbour pairs)",
            r.layout.name,
            r.layout.qubits.len(),
            r.layout.neighbour_pairs
        ))
    );
    let _ = writeln!(
        out,
        "{} circuits, {} rows ({} reference), shots per circuit {}/{}/{} (min/median/max)",
        r.data.circuits,
        r.data.rows,
        r.data.reference_rows,
        r.data.shots_min,
        r.data.shots_median,
        r.data.shots_max
    );
    let _ = writeln!(out, "{}", fit_words(r));
    let _ = writeln!(out, "\n{}\n", summary_words(r));

    let mut t = table(opt.color);
    t.set_header(vec![
        "rank",
        "edge",
        "a<-b x1e-3",
        "b<-a x1e-3",
        "rows",
        "estimate [interval] x1e-3",
        "attribution x1e-3",
        "limit x1e-3",
        "p",
        "verdict",
    ]);
    let mut shown = 0;
    for e in r.edges.iter().filter(|e| e.rank.is_some()).take(opt.max_edges) {
        shown += 1;
        t.add_row(vec![
            right(e.rank.map(|k| k.to_string()).unwrap_or_default()),
            Cell::new(format!("{}-{}", e.a, e.b)),
            right(per_mille(e.a_from_b_tvd_per_layer)),
            right(per_mille(e.b_from_a_tvd_per_layer)),
            right(e.supporting_rows.to_string()),
            right(estimate_text(e.estimate_tvd_per_layer, e.confidence.as_ref())),
            right(format!(
                "{}..{}",
                per_mille(e.attribution_min_tvd_per_layer),
                per_mille(e.attribution_max_tvd_per_layer)
            )),
            right(per_mille(e.detection_limit_tvd_per_layer)),
            right(format!("{:.3}", e.p_value)),
            verdict_cell(e.verdict, opt.color),
        ]);
    }
    let ranked = r.edges.iter().filter(|e| e.rank.is_some()).count();
    let none = r.edges.len() - ranked;
    let _ = writeln!(out, "{}", bold("Edges with context slack (worst first)"));
    if shown > 0 {
        let _ = writeln!(out, "{t}");
    }
    if ranked > shown {
        let _ = writeln!(out, "... {} more ranked edges in edges.csv", ranked - shown);
    }
    let _ = writeln!(out, "{none} edges: none found (score exactly zero, not ranked).");
    if let Some((median, worst)) = sensitivity_spread(r.edges.iter().filter(|e| e.rank.is_none())) {
        let _ = writeln!(
            out,
            "  None found is not zero: their rows would show crosstalk from about {median} (median edge) to {worst} (least sensitive edge) x1e-3 per layer (first-order sensitivity, depolarizing-like error)."
        );
    }
    let _ = writeln!(
        out,
        "The score is the least slack the data demand (a lower bound, for detection); the estimate is its size at unlimited shots (bias-corrected where replicates were run), and the interval ({}) is around it.",
        r.edges.iter().find_map(|e| e.confidence.as_ref()).map_or("none: no replicates", |c| c.method.as_str())
    );
    for e in r.edges.iter().filter(|e| e.verdict == Verdict::Confounded) {
        let _ = writeln!(
            out,
            "  {}-{} is confounded with {}: add circuits where they run apart.",
            e.a,
            e.b,
            e.confounded_with.join(", ")
        );
    }

    render_adjacency(
        r,
        opt,
        &mut out,
        bold("Directed scores x1e-3 per layer: victims (rows) by aggressors (columns)"),
    );
    render_intrinsic(
        r,
        opt.color,
        &mut out,
        bold("Intrinsic slack (unmodelled error that is not crosstalk), worst kinds"),
    );

    if !r.warnings.is_empty() {
        let _ = writeln!(out, "\n{}", bold("Warnings"));
        for w in &r.warnings {
            let _ = writeln!(out, "- {} (hint: {})", w.message, w.hint);
        }
    }
    let _ = writeln!(out, "\nCaution: {}", r.caution);
    out
}

/// The quoted estimate in 1e-3 units, with "[low..high]" when replicates were run.
fn estimate_text(estimate: f64, c: Option<&super::Confidence>) -> String {
    let quoted = per_mille(super::quoted_estimate(estimate, c));
    match c {
        Some(c) => format!(
            "{quoted} [{}..{}]",
            per_mille(c.low_tvd_per_layer),
            per_mille(c.high_tvd_per_layer)
        ),
        None => quoted,
    }
}

/// Median and largest finite sensitivity of some edges, in 1e-3 units; None when no edge
/// has a finite one.
fn sensitivity_spread<'e>(edges: impl Iterator<Item = &'e EdgeReport>) -> Option<(String, String)> {
    let mut v: Vec<f64> =
        edges.map(|e| e.sensitivity_tvd_per_layer).filter(|x| x.is_finite()).collect();
    if v.is_empty() {
        return None;
    }
    v.sort_by(f64::total_cmp);
    let median = crate::confidence::intervals::quantile(&v, 0.5);
    Some((per_mille(median), per_mille(v[v.len() - 1])))
}

fn render_adjacency(r: &AuditReport, opt: &TerminalOptions, out: &mut String, title: String) {
    let ids = &r.layout.qubits;
    let score: HashMap<(&str, &str), f64> = r
        .directed
        .iter()
        .map(|d| ((d.victim.as_str(), d.aggressor.as_str()), d.score_tvd_per_layer))
        .collect();
    let _ = writeln!(out, "\n{title}");
    let (victims, note): (Vec<&String>, Option<String>) = if ids.len() <= opt.full_adjacency_up_to {
        (ids.iter().collect(), None)
    } else {
        let mut worst: Vec<(&String, f64)> = ids
            .iter()
            .map(|v| {
                let m = r
                    .directed
                    .iter()
                    .filter(|d| &d.victim == v)
                    .map(|d| d.score_tvd_per_layer)
                    .fold(0.0, f64::max);
                (v, m)
            })
            .filter(|(_, m)| *m > 0.0)
            .collect();
        worst.sort_by(|a, b| b.1.total_cmp(&a.1));
        worst.truncate(10);
        (
            worst.into_iter().map(|(v, _)| v).collect(),
            Some("Worst victims only; the full matrix is in adjacency.csv.".to_string()),
        )
    };
    if victims.is_empty() {
        let _ = writeln!(out, "no victim has any context slack.");
        return;
    }
    let aggressors: Vec<&String> = ids
        .iter()
        .filter(|a| victims.iter().any(|v| score.contains_key(&(v.as_str(), a.as_str()))))
        .collect();
    let mut t = table(opt.color);
    let mut header = vec![Cell::new("victim")];
    header.extend(aggressors.iter().map(|a| Cell::new(a.as_str())));
    t.set_header(header);
    for v in victims {
        let mut row = vec![Cell::new(v.as_str())];
        for a in &aggressors {
            row.push(match score.get(&(v.as_str(), a.as_str())) {
                Some(&s) if s > 0.0 => right(per_mille(s)),
                Some(_) => right(".".into()),
                None => Cell::new(""),
            });
        }
        t.add_row(row);
    }
    let _ = writeln!(out, "{t}");
    let _ = writeln!(out, "'.' = neighbours with no context slack; blank = not neighbours.");
    if let Some(n) = note {
        let _ = writeln!(out, "{n}");
    }
}

fn render_intrinsic(r: &AuditReport, color: bool, out: &mut String, title: String) {
    let mut kinds: Vec<_> = r.intrinsic.iter().collect();
    kinds.sort_by(|a, b| b.slack_tvd_per_occurrence.total_cmp(&a.slack_tvd_per_occurrence));
    let _ = writeln!(out, "\n{title}");
    let with_slack = kinds.iter().filter(|k| k.slack_tvd_per_occurrence > 0.0).count();
    if with_slack == 0 {
        let _ = writeln!(out, "no operation kind needed intrinsic slack: the crosstalk-free model explains the reference circuits.");
        return;
    }
    let mut t = table(color);
    t.set_header(vec![
        "kind",
        "occurrences",
        "slack x1e-3 per op",
        "estimate [interval] x1e-3",
        "fitted error x1e-3",
        "note",
    ]);
    for k in kinds.iter().filter(|k| k.slack_tvd_per_occurrence > 0.0).take(12) {
        t.add_row(vec![
            Cell::new(&k.kind),
            right(k.occurrences.to_string()),
            right(per_mille(k.slack_tvd_per_occurrence)),
            right(estimate_text(k.estimate_tvd_per_occurrence, k.confidence.as_ref())),
            right(per_mille(k.fitted_error_rate)),
            Cell::new(if k.fitted_on_all_rows { "no reference rows" } else { "" }),
        ]);
    }
    let _ = writeln!(out, "{t}");
    let _ = writeln!(
        out,
        "{with_slack} kinds need intrinsic slack (drift, leakage or other error the model lacks); all kinds in intrinsic.csv."
    );
}
