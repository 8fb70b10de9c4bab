//! The terminal report: a summary in words, the ranked edges, the adjacency table and the
//! intrinsic-slack table. Values are shown in units of 1e-3 TVD per layer; files keep full
//! precision and every column.
//!
//! Tables fit a given width: columns are dropped by priority (the least needed first) until
//! the table fits, and prose is wrapped. Colour is the caller's decision ([`Style`]): on a
//! terminal, never with `NO_COLOR` or into a pipe. The same [`Style`], column fitting and
//! number format serve `compare`, `hints` and `plan`.

use std::collections::HashMap;
use std::fmt::Write;

use comfy_table::{presets, Attribute, Cell, CellAlignment, Color, ContentArrangement, Table};

use super::{AuditReport, Confidence, EdgeReport, GatePairReport, ReasonCode, Verdict};

/// How terminal text is drawn.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct Style {
    /// Use colour and bold (ANSI escapes).
    pub color: bool,
    /// The width to fit, in columns; None for no limit (every column shown).
    pub width: Option<usize>,
}

/// How the audit's terminal report is drawn.
#[derive(Clone, Copy, Debug)]
pub struct TerminalOptions {
    /// Colour and width.
    pub style: Style,
    /// Largest layout (in qubits) whose full adjacency table is printed.
    pub full_adjacency_up_to: usize,
    /// Most edges listed in the ranked table (the rest are in edges.csv).
    pub max_edges: usize,
}

impl Default for TerminalOptions {
    fn default() -> Self {
        TerminalOptions { style: Style::default(), full_adjacency_up_to: 24, max_edges: 20 }
    }
}

/// Per-mille string of a TVD-per-layer value: the display unit, 1e-3 TVD per layer.
pub fn per_mille(v: f64) -> String {
    if v.is_nan() {
        "not-identified".into()
    } else if v == f64::INFINITY {
        "unbounded".into()
    } else if v == 0.0 {
        "0".into()
    } else if v * 1e3 >= 10.0 {
        format!("{:.1}", v * 1e3)
    } else {
        format!("{:.2}", v * 1e3)
    }
}

/// The colour of a verdict on a terminal (none for `clean`).
pub fn verdict_colour(v: Verdict) -> Option<(Color, bool)> {
    match v {
        Verdict::Recalibrate => Some((Color::Red, true)),
        Verdict::Watch => Some((Color::Yellow, false)),
        Verdict::Confounded => Some((Color::Magenta, false)),
        Verdict::NotTested => Some((Color::Blue, false)),
        Verdict::Clean => None,
    }
}

/// A cell with a verdict's word, coloured when the style says so.
pub fn verdict_cell(v: Verdict, style: Style) -> TextCell {
    TextCell {
        text: v.word().into(),
        right: false,
        colour: verdict_colour(v).filter(|_| style.color),
    }
}

/// Bold text when the style has colour.
pub fn bold(s: &str, style: Style) -> String {
    if style.color {
        format!("\x1b[1m{s}\x1b[0m")
    } else {
        s.to_string()
    }
}

/// A heading: wrapped to the width, bold when the style has colour, with a line break.
pub fn heading(s: &str, style: Style) -> String {
    format!("{}\n", bold(wrap(s, style.width, "  ").trim_end(), style))
}

/// One cell of a [`Column`].
#[derive(Clone, Debug, Default)]
pub struct TextCell {
    /// The text (may hold line breaks).
    pub text: String,
    /// Right-aligned (numbers).
    pub right: bool,
    /// Foreground colour and bold, when drawn in colour.
    pub colour: Option<(Color, bool)>,
}

/// A left-aligned cell.
pub fn text(s: impl Into<String>) -> TextCell {
    TextCell { text: s.into(), ..Default::default() }
}

/// A right-aligned cell.
pub fn number(s: impl Into<String>) -> TextCell {
    TextCell { text: s.into(), right: true, colour: None }
}

/// A table column: heading, cells, and its priority (0 = always shown; larger numbers are
/// dropped first when the table is too wide).
#[derive(Clone, Debug)]
pub struct Column {
    /// Heading (may hold a line break).
    pub head: String,
    /// One cell per row.
    pub cells: Vec<TextCell>,
    /// Drop order: the highest priority number goes first.
    pub priority: u8,
}

impl Column {
    /// A column of `priority` with heading `head`.
    pub fn new(head: &str, priority: u8) -> Column {
        Column { head: head.to_string(), cells: Vec::new(), priority }
    }

    fn width(&self) -> usize {
        self.cells
            .iter()
            .map(|c| c.text.as_str())
            .chain(std::iter::once(self.head.as_str()))
            .flat_map(|t| t.lines())
            .map(|l| l.chars().count())
            .max()
            .unwrap_or(0)
    }
}

/// Appends one row: cell i to column i.
pub fn push_row<const N: usize>(cols: &mut [Column], cells: [TextCell; N]) {
    for (c, cell) in cols.iter_mut().zip(cells) {
        c.cells.push(cell);
    }
}

/// Empty columns from (heading, priority) pairs.
pub fn columns(spec: &[(&str, u8)]) -> Vec<Column> {
    spec.iter().map(|&(head, priority)| Column::new(head, priority)).collect()
}

/// Width of a table with columns of these content widths (box drawing, one space padding).
fn table_width(widths: &[usize]) -> usize {
    widths.iter().sum::<usize>() + 3 * widths.len() + 1
}

/// Drops columns by priority until the table fits `style.width`; returns the kept columns
/// and the headings of the dropped ones, in display order.
pub fn fit_columns(cols: Vec<Column>, style: Style) -> (Vec<Column>, Vec<String>) {
    let mut cols: Vec<(usize, Column)> = cols.into_iter().enumerate().collect();
    let mut dropped: Vec<(usize, String)> = Vec::new();
    if let Some(w) = style.width {
        loop {
            let widths: Vec<usize> = cols.iter().map(|(_, c)| c.width()).collect();
            if table_width(&widths) <= w {
                break;
            }
            let Some((i, _)) = cols
                .iter()
                .enumerate()
                .filter(|(_, (_, c))| c.priority > 0)
                .max_by_key(|(i, (_, c))| (c.priority, *i))
            else {
                break;
            };
            let (at, c) = cols.remove(i);
            dropped.push((at, c.head.replace("-\n", "-").replace('\n', " ")));
        }
    }
    dropped.sort();
    (cols.into_iter().map(|(_, c)| c).collect(), dropped.into_iter().map(|(_, h)| h).collect())
}

/// `prefix` then `text` wrapped to `width`, continuation lines indented to the text.
pub fn hanging(prefix: &str, text: &str, width: Option<usize>) -> String {
    let indent = " ".repeat(prefix.chars().count());
    let body = wrap(text, width.map(|w| w.saturating_sub(indent.len()).max(20)), "");
    let mut out = String::new();
    for (i, line) in body.lines().enumerate() {
        out.push_str(if i == 0 { prefix } else { &indent });
        out.push_str(line);
        out.push('\n');
    }
    out
}

/// The table of fitted columns (all rows as long as the first column), drawn with box
/// characters; wider than the width only when even the priority-0 columns do not fit, and
/// then wrapped by the table itself.
pub fn draw(cols: &[Column], style: Style) -> Table {
    let mut t = Table::new();
    t.load_style(presets::UTF8_FULL_CONDENSED);
    match style.width {
        Some(w) => {
            t.set_content_arrangement(ContentArrangement::Dynamic);
            t.set_width(w.min(u16::MAX as usize) as u16);
        }
        None => {
            t.set_content_arrangement(ContentArrangement::Disabled);
        }
    }
    if style.color {
        t.enforce_styling();
    } else {
        t.force_no_tty();
    }
    t.set_header(cols.iter().map(|c| Cell::new(&c.head)).collect::<Vec<_>>());
    let rows = cols.first().map_or(0, |c| c.cells.len());
    for i in 0..rows {
        t.add_row(
            cols.iter()
                .map(|c| {
                    let x = c.cells.get(i).cloned().unwrap_or_default();
                    let mut cell = Cell::new(x.text);
                    if x.right {
                        cell = cell.set_alignment(CellAlignment::Right);
                    }
                    if let Some((colour, strong)) = x.colour.filter(|_| style.color) {
                        cell = cell.fg(colour);
                        if strong {
                            cell = cell.add_attribute(Attribute::Bold);
                        }
                    }
                    cell
                })
                .collect::<Vec<_>>(),
        );
    }
    t
}

/// Fits and draws; appends a line naming the dropped columns and where they are.
pub fn fitted_table(cols: Vec<Column>, style: Style, files: &str, out: &mut String) {
    let (cols, dropped) = fit_columns(cols, style);
    let _ = writeln!(out, "{}", draw(&cols, style));
    if !dropped.is_empty() {
        let line = format!(
            "Not shown at this width ({} columns): {}; {files} has every column.",
            style.width.unwrap_or(0),
            dropped.join(", ")
        );
        out.push_str(&wrap(&line, style.width, ""));
    }
}

/// Wraps prose at word boundaries to `width` (no limit: unchanged), continuation lines
/// indented by `indent`; ends with a line break.
pub fn wrap(text: &str, width: Option<usize>, indent: &str) -> String {
    let mut out = String::new();
    for para in text.split('\n') {
        let Some(w) = width else {
            out.push_str(para);
            out.push('\n');
            continue;
        };
        let lead: String = para.chars().take_while(|c| *c == ' ').collect();
        let mut line = lead.clone();
        let mut empty = true;
        for word in para.split_whitespace() {
            let len = line.chars().count();
            if !empty && len + 1 + word.chars().count() > w {
                out.push_str(&line);
                out.push('\n');
                line = format!("{lead}{indent}");
                empty = true;
            }
            if !empty {
                line.push(' ');
            }
            line.push_str(word);
            empty = false;
        }
        out.push_str(&line);
        out.push('\n');
    }
    out
}

/// The summary in words: what was found, how sure, what to do.
pub fn summary_words(r: &AuditReport) -> String {
    let count = |v: Verdict| r.edges.iter().filter(|e| e.verdict == v).count();
    let (rec, watch, conf) =
        (count(Verdict::Recalibrate), count(Verdict::Watch), count(Verdict::Confounded));
    let untested = count(Verdict::NotTested);
    let mut s = String::new();
    if r.parameters.null_replicates == 0 {
        let _ = write!(
            s,
            "Not tested: no null replicates were run (--null-replicates 0), so no pair that needs context slack can be called detected or clean: {untested} of {} neighbour pairs need it (not-tested). Rerun with null replicates before acting on them.",
            r.edges.len()
        );
    } else {
        let _ = write!(
            s,
            "{} of {} neighbour pairs show crosstalk that the data cannot explain otherwise",
            rec + watch,
            r.edges.len()
        );
    }
    let tested = r.parameters.null_replicates > 0;
    if tested && rec + watch == 0 {
        s.push('.');
    } else if tested {
        let _ = write!(
            s,
            ": {rec} above the action threshold of {} x1e-3 per layer (recalibrate), {watch} below it (watch).",
            per_mille(r.parameters.action_threshold_tvd_per_layer)
        );
    }
    if tested && untested > 0 {
        let (n, verb) = if untested == 1 { ("pair", "needs") } else { ("pairs", "need") };
        let _ = write!(s, " {untested} {n} {verb} context slack only in circuits where no permutation can test it (not-tested, untestable): add circuits where the aggressor is the victim's only active neighbour.");
    }
    if conf > 0 {
        let (n, verb) = if conf == 1 { ("pair", "carries") } else { ("pairs", "carry") };
        let _ = write!(s, " {conf} {n} {verb} slack that another aggressor could explain instead (confounded): the circuits cannot tell them apart.");
    }
    let worst: Vec<&EdgeReport> =
        r.edges.iter().filter(|e| matches!(e.verdict, Verdict::Recalibrate)).take(3).collect();
    if !worst.is_empty() {
        let names: Vec<String> = worst
            .iter()
            .map(|e| {
                format!(
                    "{}-{} (estimate {} x1e-3)",
                    e.a,
                    e.b,
                    estimate_text(e.estimate_tvd_per_layer, e.confidence.as_ref())
                )
            })
            .collect();
        let _ = write!(s, " Recalibrate first: {}.", names.join(", "));
    }
    s
}

/// What the three numbers of an edge mean, in words (terminal and HTML say the same).
pub fn quantity_words(r: &AuditReport) -> String {
    let interval = r
        .edges
        .iter()
        .find_map(|e| e.confidence.as_ref())
        .map_or("no interval: no bootstrap replicates were run".to_string(), |c| {
            format!("[interval]: its {:.0}% {} bootstrap interval", c.level * 100.0, c.method)
        });
    format!(
        "score: the least slack these data demand at this shot count (built for detection; it \
         grows with shots). estimate: the size at unlimited shots, {interval}; the interval is \
         what a verdict rests on, and compare estimates, not scores, across audits."
    )
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

/// True when an estimate lies outside its own interval (the replicates ran to one side of it).
pub fn outside_interval(estimate: f64, c: Option<&Confidence>) -> bool {
    c.is_some_and(|c| estimate < c.low_tvd_per_layer || estimate > c.high_tvd_per_layer)
}

/// The estimate in 1e-3 units, with `[low..high]` when replicates were run and `*` when it
/// lies outside that interval.
pub fn estimate_text(estimate: f64, c: Option<&Confidence>) -> String {
    let star = if outside_interval(estimate, c) { "*" } else { "" };
    match c {
        Some(c) => format!(
            "{}{star} [{}..{}]",
            per_mille(estimate),
            per_mille(c.low_tvd_per_layer),
            per_mille(c.high_tvd_per_layer)
        ),
        None => per_mille(estimate),
    }
}

/// The edge table's columns for these edges, in display order, with priorities.
fn edge_columns(edges: &[&EdgeReport], style: Style) -> Vec<Column> {
    let level = edges
        .iter()
        .find_map(|e| e.confidence.as_ref())
        .map_or(String::new(), |c| format!("{:.0}% ", c.level * 100.0));
    let estimate = format!("estimate\n[{level}interval]");
    let mut cols = columns(&[
        ("rank", 4),
        ("edge", 0),
        ("score", 0),
        ("a<-b", 6),
        ("b<-a", 6),
        (estimate.as_str(), 0),
        ("p", 3),
        ("limit", 5),
        ("sensitivity", 8),
        ("rows", 7),
        ("attribution", 9),
        ("leave-\none-out", 10),
        ("verdict", 0),
        ("why", 0),
    ]);
    for e in edges {
        let cells = [
            number(e.rank.map(|k| k.to_string()).unwrap_or_default()),
            text(format!("{}-{}", e.a, e.b)),
            number(per_mille(e.score_tvd_per_layer)),
            number(per_mille(e.a_from_b_tvd_per_layer)),
            number(per_mille(e.b_from_a_tvd_per_layer)),
            number(estimate_text(e.estimate_tvd_per_layer, e.confidence.as_ref())),
            number(format!("{:.3}", e.p_value)),
            number(per_mille(e.detection_limit_tvd_per_layer)),
            number(per_mille(e.sensitivity_tvd_per_layer)),
            number(e.supporting_rows.to_string()),
            number(format!(
                "{}..{}",
                per_mille(e.attribution_min_tvd_per_layer),
                per_mille(e.attribution_max_tvd_per_layer)
            )),
            number(per_mille(e.leave_one_out_tvd_per_layer)),
            verdict_cell(e.verdict, style),
            text(e.reason_code.code()),
        ];
        push_row(&mut cols, cells);
    }
    cols
}

/// Renders the whole terminal report.
pub fn render(r: &AuditReport, opt: &TerminalOptions) -> String {
    let style = opt.style;
    let mut out = String::new();
    let title = format!(
        "slackmap audit of layout {} ({} qubits, {} neighbour pairs){}",
        r.layout.name,
        r.layout.qubits.len(),
        r.layout.neighbour_pairs,
        r.label.as_ref().map_or(String::new(), |l| format!(": {l}"))
    );
    out.push_str(&heading(&title, style));
    let prose = |out: &mut String, s: &str| out.push_str(&wrap(s, style.width, ""));
    prose(
        &mut out,
        &format!(
            "{} circuits, {} rows ({} reference), shots per circuit {}/{}/{} (min/median/max){}",
            r.data.circuits,
            r.data.rows,
            r.data.reference_rows,
            r.data.shots_min,
            r.data.shots_median,
            r.data.shots_max,
            r.created.as_ref().map_or(String::new(), |c| format!("; written {c}"))
        ),
    );
    prose(&mut out, &fit_words(r));
    out.push('\n');
    prose(&mut out, &summary_words(r));
    out.push('\n');

    let shown: Vec<&EdgeReport> =
        r.edges.iter().filter(|e| e.rank.is_some()).take(opt.max_edges).collect();
    let ranked = r.edges.iter().filter(|e| e.rank.is_some()).count();
    let none = r.edges.len() - ranked;
    let _ = writeln!(
        out,
        "{}",
        bold("Edges with context slack, worst first (x1e-3 TVD per layer)", style)
    );
    if !shown.is_empty() {
        fitted_table(edge_columns(&shown, style), style, "edges.csv", &mut out);
        let mut codes: Vec<ReasonCode> = Vec::new();
        for e in &shown {
            if !codes.contains(&e.reason_code) {
                codes.push(e.reason_code);
            }
        }
        codes.sort_by_key(|c| ReasonCode::ALL.iter().position(|x| x == c));
        let _ = writeln!(out, "why:");
        let pad = codes.iter().map(|c| c.code().len()).max().unwrap_or(0);
        for c in codes {
            out.push_str(&hanging(&format!("  {:pad$}  ", c.code()), c.legend(), style.width));
        }
        if shown.iter().any(|e| outside_interval(e.estimate_tvd_per_layer, e.confidence.as_ref())) {
            prose(
                &mut out,
                "* the estimate lies outside its interval: its bootstrap replicates ran to one side of it (the estimate is bounded at zero and noisy near it); act on the interval.",
            );
        }
    }
    if ranked > shown.len() {
        let _ = writeln!(out, "... {} more ranked edges in edges.csv", ranked - shown.len());
    }
    let _ = writeln!(out, "{none} edges: none found (score exactly zero, not ranked).");
    if let Some((median, worst)) = sensitivity_spread(r.edges.iter().filter(|e| e.rank.is_none())) {
        prose(
            &mut out,
            &format!("  None found is not zero: their rows would show crosstalk from about {median} (median edge) to {worst} (least sensitive edge) x1e-3 per layer (first-order sensitivity, depolarizing-like error)."),
        );
    }
    prose(&mut out, &quantity_words(r));
    for e in r.edges.iter().filter(|e| e.verdict == Verdict::Confounded) {
        prose(
            &mut out,
            &format!(
                "  {}-{} is confounded with {}: add circuits where they run apart.",
                e.a,
                e.b,
                e.confounded_with.join(", ")
            ),
        );
    }

    render_gate_pairs(r, opt, &mut out);
    render_adjacency(r, opt, &mut out);
    render_intrinsic(r, style, &mut out);

    if !r.warnings.is_empty() {
        let _ = writeln!(out, "\n{}", bold("Warnings", style));
        for w in &r.warnings {
            out.push_str(&wrap(&format!("- {} (hint: {})", w.message, w.hint), style.width, "  "));
        }
    }
    out.push('\n');
    prose(&mut out, &format!("Caution: {}", r.caution));
    out
}

/// A gate pair's unit as the tables write it: `cz q5-q6` for a coupler's gate, `q7` for a
/// qubit.
pub fn unit_text(unit: &str, gate: Option<&str>) -> String {
    match gate {
        Some(g) => format!("{g} {unit}"),
        None => unit.to_string(),
    }
}

/// The gate-pair table: ranked pairs, victim and aggressor of the leading direction, both
/// directions' scores. Nothing when the audit measured no gate pair.
fn render_gate_pairs(r: &AuditReport, opt: &TerminalOptions, out: &mut String) {
    let style = opt.style;
    let pairs = &r.gates.pairs;
    if pairs.is_empty() {
        return;
    }
    let shown: Vec<&GatePairReport> =
        pairs.iter().filter(|e| e.rank.is_some()).take(opt.max_edges).collect();
    let ranked = pairs.iter().filter(|e| e.rank.is_some()).count();
    let _ = writeln!(
        out,
        "\n{}",
        bold("Gate pairs with context slack, worst first (x1e-3 TVD per layer)", style)
    );
    if !shown.is_empty() {
        let level = shown
            .iter()
            .find_map(|e| e.confidence.as_ref())
            .map_or(String::new(), |c| format!("{:.0}% ", c.level * 100.0));
        let estimate = format!("estimate\n[{level}interval]");
        let mut cols = columns(&[
            ("rank", 4),
            ("victim", 0),
            ("aggressor", 0),
            ("score", 0),
            ("reverse", 5),
            (estimate.as_str(), 0),
            ("p", 3),
            ("limit", 6),
            ("verdict", 0),
            ("why", 1),
        ]);
        let gate_of = |e: &GatePairReport, unit: &str| {
            if unit == e.a {
                unit_text(&e.a, e.a_gate.as_deref())
            } else {
                unit_text(&e.b, e.b_gate.as_deref())
            }
        };
        for e in &shown {
            let (lead, reverse) = if e.victim == e.a {
                (e.a_from_b_tvd_per_layer, e.b_from_a_tvd_per_layer)
            } else {
                (e.b_from_a_tvd_per_layer, e.a_from_b_tvd_per_layer)
            };
            let cell = |x: Option<f64>| x.map_or("-".to_string(), per_mille);
            let cells = [
                number(e.rank.map(|k| k.to_string()).unwrap_or_default()),
                text(gate_of(e, &e.victim)),
                text(gate_of(e, &e.aggressor)),
                number(cell(lead)),
                number(cell(reverse)),
                number(estimate_text(e.estimate_tvd_per_layer, e.confidence.as_ref())),
                number(format!("{:.3}", e.p_value)),
                number(per_mille(e.detection_limit_tvd_per_layer)),
                verdict_cell(e.verdict, style),
                text(e.reason_code.code()),
            ];
            push_row(&mut cols, cells);
        }
        fitted_table(cols, style, "gate_pairs.csv", out);
    }
    if ranked > shown.len() {
        let _ =
            writeln!(out, "... {} more ranked gate pairs in gate_pairs.csv", ranked - shown.len());
    }
    let _ = writeln!(
        out,
        "{} gate pairs: none found (score exactly zero, not ranked).",
        pairs.len() - ranked
    );
    let flagged: Vec<String> = pairs
        .iter()
        .filter(|e| e.verdict <= Verdict::Watch)
        .map(|e| {
            format!(
                "{} and {}",
                unit_text(&e.a, e.a_gate.as_deref()),
                unit_text(&e.b, e.b_gate.as_deref())
            )
        })
        .collect();
    if !flagged.is_empty() {
        out.push_str(&wrap(
            &format!(
                "  Do not schedule in one layer: {}. The score is the victim's context slack per layer while the aggressor runs; it bounds unmodelled error and names no mechanism.",
                flagged.join("; ")
            ),
            style.width,
            "",
        ));
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

fn render_adjacency(r: &AuditReport, opt: &TerminalOptions, out: &mut String) {
    let style = opt.style;
    let ids = &r.layout.qubits;
    let score: HashMap<(&str, &str), f64> = r
        .directed
        .iter()
        .map(|d| ((d.victim.as_str(), d.aggressor.as_str()), d.score_tvd_per_layer))
        .collect();
    let worst_of = |v: &String| {
        r.directed
            .iter()
            .filter(|d| &d.victim == v)
            .map(|d| d.score_tvd_per_layer)
            .fold(0.0, f64::max)
    };
    let title = "Directed scores x1e-3 per layer, victim <- aggressor";
    let _ = writeln!(out, "\n{}", bold(title, style));
    let mut victims: Vec<&String> = ids.iter().collect();
    let mut note = None;
    if ids.len() > opt.full_adjacency_up_to {
        let mut worst: Vec<(&String, f64)> =
            ids.iter().map(|v| (v, worst_of(v))).filter(|(_, m)| *m > 0.0).collect();
        worst.sort_by(|a, b| b.1.total_cmp(&a.1));
        worst.truncate(10);
        victims = worst.into_iter().map(|(v, _)| v).collect();
        note = Some("Worst victims only; the full matrix is in adjacency.csv.");
    }
    if victims.is_empty() {
        let _ = writeln!(out, "no victim has any context slack.");
        return;
    }
    let aggressors: Vec<&String> = ids
        .iter()
        .filter(|a| victims.iter().any(|v| score.contains_key(&(v.as_str(), a.as_str()))))
        .collect();
    let mut cols = vec![Column::new("victim", 0)];
    cols.extend(aggressors.iter().map(|a| Column::new(a, 0)));
    for v in &victims {
        cols[0].cells.push(text(v.as_str()));
        for (c, a) in cols[1..].iter_mut().zip(&aggressors) {
            c.cells.push(match score.get(&(v.as_str(), a.as_str())) {
                Some(&s) if s > 0.0 => number(per_mille(s)),
                Some(_) => number("."),
                None => text(""),
            });
        }
    }
    let widths: Vec<usize> = cols.iter().map(Column::width).collect();
    if style.width.is_none_or(|w| table_width(&widths) <= w) {
        let _ = writeln!(out, "victims (rows) by aggressors (columns)\n{}", draw(&cols, style));
        let _ = writeln!(out, "'.' = neighbours with no context slack; blank = not neighbours.");
    } else {
        // Too wide for a matrix: one line per victim with its aggressors that need slack.
        let mut cols =
            vec![Column::new("victim", 0), Column::new("aggressors with context slack", 0)];
        for v in victims.iter().filter(|v| worst_of(v) > 0.0) {
            let mut parts: Vec<(&str, f64)> = r
                .directed
                .iter()
                .filter(|d| &d.victim == *v && d.score_tvd_per_layer > 0.0)
                .map(|d| (d.aggressor.as_str(), d.score_tvd_per_layer))
                .collect();
            parts.sort_by(|a, b| b.1.total_cmp(&a.1));
            cols[0].cells.push(text(v.as_str()));
            cols[1].cells.push(text(
                parts
                    .iter()
                    .map(|(a, s)| format!("<-{a} {}", per_mille(*s)))
                    .collect::<Vec<_>>()
                    .join(", "),
            ));
        }
        if cols[0].cells.is_empty() {
            let _ = writeln!(out, "no victim has any context slack.");
        } else {
            let _ = writeln!(out, "{}", draw(&cols, style));
            out.push_str(&wrap(
                "Victims with any context slack only (the matrix is wider than the terminal); the full matrix is in adjacency.csv.",
                style.width,
                "",
            ));
        }
    }
    if let Some(n) = note {
        let _ = writeln!(out, "{n}");
    }
}

fn render_intrinsic(r: &AuditReport, style: Style, out: &mut String) {
    let mut kinds: Vec<_> = r.intrinsic.iter().collect();
    kinds.sort_by(|a, b| b.slack_tvd_per_occurrence.total_cmp(&a.slack_tvd_per_occurrence));
    let title = "Intrinsic slack (unmodelled error that is not crosstalk), worst kinds";
    let _ = writeln!(out, "\n{}", bold(title, style));
    let with_slack = kinds.iter().filter(|k| k.slack_tvd_per_occurrence > 0.0).count();
    if with_slack == 0 {
        out.push_str(&wrap("no operation kind needed intrinsic slack: the crosstalk-free model explains the reference circuits.", style.width, ""));
        return;
    }
    let mut cols = columns(&[
        ("kind", 0),
        ("occurrences", 3),
        ("slack\nper op", 0),
        ("estimate per op\n[interval]", 0),
        ("fitted\nerror", 2),
        ("note", 1),
    ]);
    for k in kinds.iter().filter(|k| k.slack_tvd_per_occurrence > 0.0).take(12) {
        let est = match &k.confidence {
            Some(c) => format!(
                "{} [{}..{}]",
                per_mille(k.estimate_tvd_per_occurrence),
                per_mille(c.low_tvd_per_occurrence),
                per_mille(c.high_tvd_per_occurrence)
            ),
            None => per_mille(k.estimate_tvd_per_occurrence),
        };
        let cells = [
            text(k.kind.as_str()),
            number(k.occurrences.to_string()),
            number(per_mille(k.slack_tvd_per_occurrence)),
            number(est),
            number(per_mille(k.fitted_error_rate)),
            text(if k.fitted_on_all_rows { "no reference rows" } else { "" }),
        ];
        push_row(&mut cols, cells);
    }
    if cols[5].cells.iter().all(|c| c.text.is_empty()) {
        cols.pop();
    }
    let _ = writeln!(out, "x1e-3 TVD per operation");
    fitted_table(cols, style, "intrinsic.csv", out);
    out.push_str(&wrap(
        &format!("{with_slack} kinds need intrinsic slack (drift, leakage or other error the model lacks); all kinds in intrinsic.csv."),
        style.width,
        "",
    ));
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn wrap_breaks_at_words_and_keeps_short_lines() {
        assert_eq!(wrap("a bb ccc", Some(4), "  "), "a bb\n  ccc\n");
        assert_eq!(wrap("short", Some(80), ""), "short\n");
        assert_eq!(wrap("no limit at all", None, ""), "no limit at all\n");
    }

    #[test]
    fn columns_drop_by_priority_until_the_table_fits() {
        let col = |h: &str, p: u8, w: usize| Column {
            head: h.into(),
            cells: vec![text("x".repeat(w))],
            priority: p,
        };
        let cols = vec![col("a", 0, 10), col("b", 2, 10), col("c", 1, 10), col("d", 0, 10)];
        // Four columns of 10: 40 + 13 = 53; three: 40; two: 27.
        let (kept, dropped) = fit_columns(cols.clone(), Style { color: false, width: Some(45) });
        assert_eq!(kept.iter().map(|c| c.head.as_str()).collect::<Vec<_>>(), ["a", "c", "d"]);
        assert_eq!(dropped, ["b"]);
        let (kept, _) = fit_columns(cols.clone(), Style { color: false, width: Some(30) });
        assert_eq!(kept.len(), 2);
        let (kept, _) = fit_columns(cols, Style { color: false, width: None });
        assert_eq!(kept.len(), 4);
        let drawn = draw(&kept[..2], Style::default()).to_string();
        let first = drawn.lines().next().unwrap_or("");
        assert_eq!(first.chars().count(), table_width(&[10, 10]), "{drawn}");
    }

    #[test]
    fn per_mille_names_special_values() {
        assert_eq!(per_mille(f64::INFINITY), "unbounded");
        assert_eq!(per_mille(f64::NAN), "not-identified");
        assert_eq!(per_mille(2.59e-3), "2.59");
        assert_eq!(per_mille(0.0259), "25.9");
    }
}
