//! `report.html`: one self-contained page (no external scripts, fonts, images or network) with
//! the summary in words, both pictures inline, every table of the audit, a drill-down per
//! flagged edge (with a small plot of observed against predicted outcome probability by
//! depth), the run's parameters and input digests, and the caution. Wide tables scroll inside
//! their box with the edge column pinned. Tables sort by clicking a heading (a few lines of
//! inline script) and read fully without script. Every string from the report is escaped.

use std::fmt::Write;

use super::markup::{escape, px, verdict_mark};
use super::svg::{self, Doc};
use super::terminal::{
    fit_words, outside_interval, per_mille, quantity_words, summary_words, unit_text,
};
use super::{AuditReport, DirectedReport, EdgeReport, GatePairReport, ReasonCode, Render, Verdict};

/// Renders `report.html`.
pub struct ReportHtml;

impl Render for ReportHtml {
    fn file_name(&self) -> &'static str {
        "report.html"
    }

    fn render(&self, report: &AuditReport) -> Vec<u8> {
        html(report).into_bytes()
    }
}

const STYLE: &str = r#"
:root { color-scheme: light; }
body { font-family: system-ui, -apple-system, "Segoe UI", sans-serif; color: #1a1a1a;
  background: #ffffff; margin: 0 auto; padding: 1.5rem 2rem 3rem; max-width: 1280px; line-height: 1.45; }
h1 { font-size: 1.6rem; margin: 0 0 0.2rem; }
h2 { font-size: 1.2rem; margin: 2rem 0 0.6rem; border-bottom: 1px solid #d0d0d0; padding-bottom: 0.2rem; }
.meta { color: #555555; margin: 0 0 1rem; }
.caution { border: 2px solid #1a1a1a; border-left-width: 10px; padding: 0.7rem 1rem;
  margin: 1rem 0; background: #fbf8ee; font-size: 1.02rem; }
.caution strong { text-transform: uppercase; letter-spacing: 0.05em; margin-right: 0.4em; }
.summary p { margin: 0.4rem 0; max-width: 62rem; }
figure { margin: 1rem 0 2rem; }
figure svg { max-width: 100%; height: auto; border: 1px solid #e2e2e2; }
figcaption { color: #444444; font-size: 0.92rem; margin-top: 0.3rem; }
table { border-collapse: collapse; margin: 0.4rem 0 1rem; font-size: 0.88rem; }
th, td { border: 1px solid #d4d4d4; padding: 0.2rem 0.45rem; vertical-align: top; }
th { background: #f2f2f2; text-align: left; white-space: nowrap; }
td.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
tbody tr:nth-child(even) { background: #fafafa; }
tr.verdict-recalibrate td.verdict { font-weight: bold; }
td.id, td.verdict, td.code { white-space: nowrap; }
td.words { min-width: 30rem; }
td.verdict svg { vertical-align: -2px; margin-right: 0.3em; }
table.sortable th { cursor: pointer; }
table.sortable th[aria-sort="ascending"]::after { content: " \25B2"; font-size: 0.7em; }
table.sortable th[aria-sort="descending"]::after { content: " \25BC"; font-size: 0.7em; }
code, .digest { font-family: ui-monospace, "DejaVu Sans Mono", monospace; font-size: 0.85rem; }
.digest { word-break: break-all; }
.hint { color: #555555; font-size: 0.9rem; }
.scroll { overflow-x: auto; max-width: 100%; border: 1px solid #e2e2e2; margin: 0.4rem 0 1rem; }
.scroll table { margin: 0; }
table.pinned td.id, table.pinned th:first-child { position: sticky; left: 0; z-index: 1;
  background: #ffffff; box-shadow: 1px 0 0 #b0b0b0; }
table.pinned th:first-child { background: #f2f2f2; z-index: 2; }
td.id a { color: inherit; }
.legend-list { columns: 2 22rem; font-size: 0.88rem; margin: 0.3rem 0 1rem; padding-left: 1.2rem; }
.legend-list code { font-weight: bold; }
details.drill { border: 1px solid #d0d0d0; border-left: 6px solid #888888; padding: 0.4rem 0.8rem;
  margin: 0.6rem 0; }
details.drill.verdict-recalibrate { border-left-color: #c0392b; }
details.drill.verdict-watch { border-left-color: #d4a017; }
details.drill.verdict-confounded { border-left-color: #8e44ad; }
details.drill.verdict-not-tested { border-left-color: #2c6fbb; }
details.drill summary { cursor: pointer; font-weight: bold; }
.drill .dirs { display: flex; flex-wrap: wrap; gap: 1.2rem; }
.drill .dir { flex: 1 1 26rem; min-width: 0; }
.drill h4 { margin: 0.6rem 0 0.2rem; font-size: 1rem; }
.drill svg { border: 1px solid #e2e2e2; max-width: 100%; height: auto; }
details.folded { margin: 0.2rem 0 1rem; }
details.folded summary { cursor: pointer; }
@media print {
  body { padding: 0; max-width: none; }
  .hint.sort { display: none; }
  h2 { break-after: avoid; }
  tr, figure { break-inside: avoid; }
  .scroll { overflow: visible; }
}
"#;

/// Sorts any `table.sortable` by the clicked heading; numeric columns by `data-sort`, empty
/// cells last in both directions.
const SCRIPT: &str = r#"
(function () {
  function key(cell) {
    var k = cell.getAttribute('data-sort');
    return k === null ? cell.textContent.trim() : k;
  }
  var tables = document.querySelectorAll('table.sortable');
  Array.prototype.forEach.call(tables, function (t) {
    var heads = t.tHead.rows[0].cells;
    Array.prototype.forEach.call(heads, function (th, i) {
      th.tabIndex = 0;
      function sort() {
        var body = t.tBodies[0];
        var rows = Array.prototype.slice.call(body.rows);
        var asc = th.getAttribute('aria-sort') !== 'ascending';
        var num = th.getAttribute('data-type') === 'num';
        rows.sort(function (x, y) {
          var u = key(x.cells[i]), v = key(y.cells[i]);
          if (u === '' || v === '') { return (u === '') - (v === ''); }
          var c = num ? parseFloat(u) - parseFloat(v) : u.localeCompare(v, undefined, { numeric: true });
          return asc ? c : -c;
        });
        rows.forEach(function (r) { body.appendChild(r); });
        Array.prototype.forEach.call(heads, function (h) { h.removeAttribute('aria-sort'); });
        th.setAttribute('aria-sort', asc ? 'ascending' : 'descending');
      }
      th.addEventListener('click', sort);
      th.addEventListener('keydown', function (e) {
        if (e.key === 'Enter' || e.key === ' ') { e.preventDefault(); sort(); }
      });
    });
    t.setAttribute('data-sort-ready', 'yes');
  });
})();
"#;

/// A table cell: text, optional numeric sort key, optional class.
struct Td {
    text: String,
    sort: Option<f64>,
    class: &'static str,
    raw: bool,
}

fn td(text: impl Into<String>) -> Td {
    Td { text: text.into(), sort: None, class: "", raw: false }
}

/// A numeric cell shown as `shown` and sorted by `value` (None sorts last).
fn num(shown: impl Into<String>, value: Option<f64>) -> Td {
    Td {
        text: shown.into(),
        sort: Some(value.filter(|v| v.is_finite()).unwrap_or(f64::NAN)),
        class: "num",
        raw: false,
    }
}

fn pm_cell(v: f64) -> Td {
    num(per_mille(v), Some(v))
}

fn write_table(
    out: &mut String,
    id: &str,
    sortable: bool,
    heads: &[(&str, bool)],
    rows: Vec<(String, Vec<Td>)>,
) {
    write_table_with(out, id, if sortable { "sortable" } else { "" }, heads, rows)
}

/// A table in a scrolling box, with the given classes (`sortable`, `pinned`).
fn write_table_with(
    out: &mut String,
    id: &str,
    classes: &str,
    heads: &[(&str, bool)],
    rows: Vec<(String, Vec<Td>)>,
) {
    let _ = write!(
        out,
        "<div class=\"scroll\" id=\"{id}-box\"><table id=\"{id}\"{}><thead><tr>",
        if classes.is_empty() { String::new() } else { format!(" class=\"{classes}\"") },
        id = escape(id)
    );
    for (h, numeric) in heads {
        let _ = write!(
            out,
            "<th{}>{}</th>",
            if *numeric { " data-type=\"num\"" } else { "" },
            escape(h)
        );
    }
    out.push_str("</tr></thead>\n<tbody>\n");
    for (class, cells) in rows {
        if class.is_empty() {
            out.push_str("<tr>");
        } else {
            let _ = write!(out, "<tr class=\"{}\">", escape(&class));
        }
        for c in cells {
            out.push_str("<td");
            if !c.class.is_empty() {
                let _ = write!(out, " class=\"{}\"", c.class);
            }
            if let Some(v) = c.sort {
                let k = if v.is_nan() { String::new() } else { format!("{v:e}") };
                let _ = write!(out, " data-sort=\"{k}\"");
            }
            out.push('>');
            out.push_str(&if c.raw { c.text } else { escape(&c.text) });
            out.push_str("</td>");
        }
        out.push_str("</tr>\n");
    }
    out.push_str("</tbody></table></div>\n");
}

fn kv_table(out: &mut String, id: &str, rows: &[(&str, String)]) {
    let rows = rows.iter().map(|(k, v)| (String::new(), vec![td(*k), td(v.clone())])).collect();
    write_table(out, id, false, &[("", false), ("value", false)], rows);
}

fn mark_icon(v: Verdict) -> String {
    let m = verdict_mark(v, 7.0, 7.0, 5.0);
    if m.is_empty() {
        "<svg width=\"14\" height=\"14\" aria-hidden=\"true\"></svg>".into()
    } else {
        format!("<svg width=\"14\" height=\"14\" aria-hidden=\"true\">{m}</svg>")
    }
}

fn sigma(v: f64) -> String {
    format!("{v:+.2}")
}

/// The whole page.
pub fn html(r: &AuditReport) -> String {
    let mut o = String::with_capacity(64 * 1024);
    let name = escape(&r.layout.name);
    let _ = write!(
        o,
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n\
         <meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n\
         <title>slackmap audit: {name}</title>\n<style>{STYLE}</style>\n</head>\n<body>\n"
    );
    let _ = writeln!(o, "<header><h1>Crosstalk audit of layout {name}</h1>");
    if let Some(label) = &r.label {
        let _ = writeln!(
            o,
            "<p class=\"label\" id=\"audit-label\"><strong>{}</strong></p>",
            escape(label)
        );
    }
    let _ = writeln!(
        o,
        "<p class=\"meta\">{} qubits, {} neighbour pairs, {} circuits ({} with counts), written by slackmap {} (audit schema {}){}.</p></header>",
        r.layout.qubits.len(),
        r.layout.neighbour_pairs,
        r.data.circuits,
        r.data.circuits_with_counts,
        escape(&r.tool_version),
        r.schema,
        r.created.as_ref().map_or(String::new(), |c| format!(" on {}", escape(c)))
    );
    let _ = writeln!(
        o,
        "<aside class=\"caution\" role=\"note\"><strong>Caution</strong>{}</aside>",
        escape(&r.caution)
    );

    let _ = writeln!(o, "<section class=\"summary\" id=\"summary\"><h2>Summary</h2>");
    let _ = writeln!(o, "<p>{}</p>", escape(&summary_words(r)));
    let _ = writeln!(o, "<p>{}</p>", escape(&fit_words(r)));
    let d = &r.data;
    let _ = writeln!(
        o,
        "<p>{} rows ({} reference rows); shots per circuit {} / {} / {} (min / median / max), {} in all. \
         Values are in units of 1e-3 TVD per layer; files keep full precision.</p></section>",
        d.rows, d.reference_rows, d.shots_min, d.shots_median, d.shots_max, d.shots_total
    );

    let _ = writeln!(o, "<section id=\"pictures\"><h2>Pictures</h2>");
    let _ = writeln!(
        o,
        "<figure id=\"fig-layout\">{}<figcaption>The chip: each neighbour pair is drawn as two halves; the half \
         nearer a qubit is the crosstalk onto it (width and colour, on a logarithmic scale with the action \
         threshold marked); flagged pairs carry their score. Qubits are shaded by intrinsic slack. \
         Hover an edge or qubit for its numbers.</figcaption></figure>",
        svg::layout(r, Doc::Inline)
    );
    let _ = writeln!(
        o,
        "<figure id=\"fig-adjacency\">{}<figcaption>Victims (rows) by aggressors (columns); only neighbours have \
         cells. Hatched cells are neighbours with a score of exactly zero.</figcaption></figure></section>",
        svg::adjacency(r, Doc::Inline)
    );

    edge_section(&mut o, r);
    gate_section(&mut o, r);
    drill_section(&mut o, r);
    intrinsic_section(&mut o, r);

    // Readout.
    let _ = writeln!(o, "<section id=\"readout\"><h2>Readout</h2>");
    let rows = r
        .readout
        .iter()
        .map(|q| {
            (
                String::new(),
                vec![
                    td(q.qubit.clone()),
                    num(format!("{:.4}", q.p1_given_0), Some(q.p1_given_0)),
                    num(format!("{:.4}", q.p0_given_1), Some(q.p0_given_1)),
                    pm_cell(q.slack_tvd),
                ],
            )
        })
        .collect();
    write_table(
        &mut o,
        "readout-table",
        true,
        &[("qubit", false), ("P(1 | 0)", true), ("P(0 | 1)", true), ("slack x1e-3 per row", true)],
        rows,
    );
    o.push_str("</section>\n");

    // Fit quality.
    let f = &r.fit;
    let _ = writeln!(o, "<section id=\"fit\"><h2>Fit quality, before and after slack</h2>");
    let rows = [
        ("reference rows", f.reference_llr, f.reference_dof, f.reference_excess_sigma),
        ("all rows, before slack", f.all_llr_before, f.all_dof, f.all_excess_sigma_before),
        ("all rows, after slack", f.all_llr_after, f.all_dof, f.all_excess_sigma_after),
    ]
    .iter()
    .map(|&(what, llr, dof, s)| {
        (
            String::new(),
            vec![
                td(what),
                num(format!("{llr:.1}"), Some(llr)),
                num(format!("{dof:.0}"), Some(dof)),
                num(sigma(s), Some(s)),
            ],
        )
    })
    .collect();
    write_table(
        &mut o,
        "fit-table",
        false,
        &[
            ("rows", false),
            ("log-likelihood ratio", true),
            ("degrees of freedom", true),
            ("excess (sigma)", true),
        ],
        rows,
    );
    let list = |v: &[String]| if v.is_empty() { "none".to_string() } else { v.join(", ") };
    kv_table(
        &mut o,
        "fit-extra",
        &[
            ("per-row LLR threshold", format!("{:.2}", f.row_threshold_llr)),
            ("rows needing slack", format!("{} of {}", f.rows_needing_slack, r.data.rows)),
            ("unidentified parameters (held at zero)", list(&f.unidentified)),
            ("fits that did not converge", list(&f.not_converged)),
        ],
    );
    o.push_str("<p class=\"hint\">Excess is (LLR - dof) / sqrt(2 dof): near 0 when the model fits within shot noise.</p></section>\n");

    // Warnings.
    let _ = writeln!(o, "<section id=\"warnings\"><h2>Warnings</h2>");
    if r.warnings.is_empty() {
        o.push_str("<p>None.</p>\n");
    } else {
        o.push_str("<ul>\n");
        for w in &r.warnings {
            let _ = writeln!(
                o,
                "<li><code>{}</code>: {} <span class=\"hint\">Hint: {}</span></li>",
                escape(&w.code),
                escape(&w.message),
                escape(&w.hint)
            );
        }
        o.push_str("</ul>\n");
    }
    o.push_str("</section>\n");

    // Parameters and inputs.
    let p = &r.parameters;
    let _ = writeln!(o, "<section id=\"run\"><h2>Run parameters</h2>");
    kv_table(
        &mut o,
        "parameter-table",
        &[
            ("model", p.model.clone()),
            ("alpha (family-wise)", p.alpha.to_string()),
            (
                "action threshold",
                format!("{} x1e-3 TVD per layer", per_mille(p.action_threshold_tvd_per_layer)),
            ),
            ("null replicates", p.null_replicates.to_string()),
            ("bootstrap replicates", p.replicates.to_string()),
            ("bootstrap resampling", p.resample.clone()),
            ("interval level", p.level.to_string()),
            ("seed", p.seed.to_string()),
            ("bit order", p.bit_order.clone()),
        ],
    );
    let _ = writeln!(o, "<h2>Inputs</h2>");
    let rows = r
        .inputs
        .iter()
        .map(|i| {
            (
                String::new(),
                vec![
                    td(i.role.clone()),
                    Td { text: escape(&i.path), sort: None, class: "", raw: true },
                    Td { text: escape(&i.sha256), sort: None, class: "digest", raw: true },
                ],
            )
        })
        .collect();
    write_table(
        &mut o,
        "input-table",
        false,
        &[("role", false), ("path", false), ("SHA-256", false)],
        rows,
    );
    o.push_str("</section>\n");
    let _ = write!(o, "<script>{SCRIPT}</script>\n</body>\n</html>\n");
    o
}

/// The interval of a confidence as `low..high (95%)`, sorted by its low end.
fn interval_cell(c: Option<&super::Confidence>) -> Td {
    match c {
        Some(c) => num(
            format!(
                "{}..{} ({:.0}%)",
                per_mille(c.low_tvd_per_layer),
                per_mille(c.high_tvd_per_layer),
                c.level * 100.0
            ),
            Some(c.low_tvd_per_layer),
        ),
        None => num("-", None),
    }
}

/// The anchor of an edge's drill-down.
fn drill_id(e: &EdgeReport) -> String {
    format!("drill-{}-{}", e.a, e.b)
}

/// The ranked edge table, scrolling in its box with the edge column pinned, and the legend
/// of the reason codes.
fn edge_section(o: &mut String, r: &AuditReport) {
    let _ = writeln!(o, "<section id=\"edges\"><h2>Neighbour pairs, worst first</h2>");
    let _ = writeln!(
        o,
        "<p class=\"hint sort\">Click a column heading to sort; click again to reverse. The table scrolls sideways inside its box; the edge stays in view. Flagged edges link to their drill-down.</p>"
    );
    let heads = [
        ("edge", false),
        ("rank", true),
        ("verdict", false),
        ("why", false),
        ("score x1e-3", true),
        ("a<-b x1e-3", true),
        ("b<-a x1e-3", true),
        ("estimate x1e-3", true),
        ("interval x1e-3", true),
        ("detection limit x1e-3", true),
        ("sensitivity x1e-3", true),
        ("p", true),
        ("attribution x1e-3", true),
        ("rows", true),
        ("circuits", true),
        ("leave-one-out x1e-3", true),
        ("most influential", false),
        ("confounded with", false),
        ("coupled", false),
        ("reason", false),
    ];
    let rows = r
        .edges
        .iter()
        .map(|e| {
            let verdict = Td {
                text: format!("{}{}", mark_icon(e.verdict), e.verdict.word()),
                sort: None,
                class: "verdict",
                raw: true,
            };
            let name = format!("{}-{}", e.a, e.b);
            let edge = if e.verdict == Verdict::Clean {
                Td { class: "id", ..td(name) }
            } else {
                Td {
                    text: format!("<a href=\"#{}\">{}</a>", escape(&drill_id(e)), escape(&name)),
                    sort: None,
                    class: "id",
                    raw: true,
                }
            };
            let star = if outside_interval(e.estimate_tvd_per_layer, e.confidence.as_ref()) {
                "*"
            } else {
                ""
            };
            (
                format!("edge verdict-{}", e.verdict.word()),
                vec![
                    edge,
                    num(
                        e.rank.map(|k| k.to_string()).unwrap_or_else(|| "-".into()),
                        e.rank.map(|k| k as f64),
                    ),
                    verdict,
                    Td { class: "code", ..td(e.reason_code.code()) },
                    pm_cell(e.score_tvd_per_layer),
                    pm_cell(e.a_from_b_tvd_per_layer),
                    pm_cell(e.b_from_a_tvd_per_layer),
                    num(
                        format!("{}{star}", per_mille(e.estimate_tvd_per_layer)),
                        Some(e.estimate_tvd_per_layer),
                    ),
                    interval_cell(e.confidence.as_ref()),
                    pm_cell(e.detection_limit_tvd_per_layer),
                    if e.sensitivity_tvd_per_layer.is_finite() {
                        pm_cell(e.sensitivity_tvd_per_layer)
                    } else {
                        num("untested", None)
                    },
                    num(format!("{:.3}", e.p_value), Some(e.p_value)),
                    num(
                        format!(
                            "{}..{}",
                            per_mille(e.attribution_min_tvd_per_layer),
                            per_mille(e.attribution_max_tvd_per_layer)
                        ),
                        Some(e.attribution_min_tvd_per_layer),
                    ),
                    num(e.supporting_rows.to_string(), Some(e.supporting_rows as f64)),
                    num(e.supporting_circuits.to_string(), Some(e.supporting_circuits as f64)),
                    pm_cell(e.leave_one_out_tvd_per_layer),
                    td(e.most_influential_circuit.clone().unwrap_or_default()),
                    td(e.confounded_with.join(", ")),
                    td(if e.coupled { "yes" } else { "no" }),
                    Td { class: "words", ..td(e.reason.clone()) },
                ],
            )
        })
        .collect();
    write_table_with(o, "edge-table", "sortable pinned", &heads, rows);
    let mut codes: Vec<ReasonCode> = Vec::new();
    for e in &r.edges {
        if !codes.contains(&e.reason_code) {
            codes.push(e.reason_code);
        }
    }
    codes.sort_by_key(|c| ReasonCode::ALL.iter().position(|x| x == c));
    o.push_str("<p class=\"hint\">why:</p><ul class=\"legend-list\" id=\"why-legend\">");
    for c in codes {
        let _ = write!(o, "<li><code>{}</code> {}</li>", c.code(), escape(c.legend()));
    }
    o.push_str("</ul>\n");
    let _ = writeln!(
        o,
        "<p class=\"hint\">a&lt;-b is the crosstalk onto a from b. {} Sensitivity is about the smallest estimate these circuits could tell from zero (first order, depolarizing-like error): a clean edge can still hide crosstalk below it. Attribution is the range of the score over near-optimal budgets; leave-one-out drops the most influential circuit. An estimate marked * lies outside its interval (its replicates ran to one side of it): act on the interval.</p></section>",
        escape(&quantity_words(r))
    );
}

/// The ranked gate-pair table (absent when the audit measured no gate pair).
fn gate_section(o: &mut String, r: &AuditReport) {
    if r.gates.pairs.is_empty() {
        return;
    }
    let _ = writeln!(o, "<section id=\"gate-pairs\"><h2>Gate pairs, worst first</h2>");
    let _ = writeln!(
        o,
        "<p class=\"hint\">A coupler's two-qubit gate disturbed while a nearby gate runs in the same layer, or while a nearby qubit is driven, and a qubit disturbed by a nearby gate. The score is the victim's context slack per layer while the aggressor runs; the layout picture draws these pairs as arcs with the arrow at the victim. Flagged pairs should not share a layer (see <code>slackmap hints</code>).</p>"
    );
    let heads = [
        ("victim", false),
        ("aggressor", false),
        ("rank", true),
        ("verdict", false),
        ("why", false),
        ("score x1e-3", true),
        ("reverse x1e-3", true),
        ("estimate x1e-3", true),
        ("interval x1e-3", true),
        ("detection limit x1e-3", true),
        ("p", true),
        ("confounded with", false),
        ("reason", false),
    ];
    let unit = |e: &GatePairReport, u: &str| {
        if u == e.a {
            unit_text(&e.a, e.a_gate.as_deref())
        } else {
            unit_text(&e.b, e.b_gate.as_deref())
        }
    };
    let rows = r
        .gates
        .pairs
        .iter()
        .map(|e| {
            let (lead, reverse) = if e.victim == e.a {
                (e.a_from_b_tvd_per_layer, e.b_from_a_tvd_per_layer)
            } else {
                (e.b_from_a_tvd_per_layer, e.a_from_b_tvd_per_layer)
            };
            let opt = |x: Option<f64>| x.map_or(num("-", None), pm_cell);
            let verdict = Td {
                text: format!("{}{}", mark_icon(e.verdict), e.verdict.word()),
                sort: None,
                class: "verdict",
                raw: true,
            };
            (
                format!("gate-pair verdict-{}", e.verdict.word()),
                vec![
                    Td { class: "id", ..td(unit(e, &e.victim)) },
                    td(unit(e, &e.aggressor)),
                    num(
                        e.rank.map(|k| k.to_string()).unwrap_or_else(|| "-".into()),
                        e.rank.map(|k| k as f64),
                    ),
                    verdict,
                    Td { class: "code", ..td(e.reason_code.code()) },
                    opt(lead),
                    opt(reverse),
                    pm_cell(e.estimate_tvd_per_layer),
                    interval_cell(e.confidence.as_ref()),
                    pm_cell(e.detection_limit_tvd_per_layer),
                    num(format!("{:.3}", e.p_value), Some(e.p_value)),
                    td(e.confounded_with.join(", ")),
                    Td { class: "words", ..td(e.reason.clone()) },
                ],
            )
        })
        .collect();
    write_table_with(o, "gate-pair-table", "sortable pinned", &heads, rows);
    o.push_str("</section>\n");
}

/// Per flagged edge: both directions' numbers, the driven/idle split, the per-kind values,
/// the supporting circuits and the depth plot.
fn drill_section(o: &mut String, r: &AuditReport) {
    let flagged: Vec<&EdgeReport> =
        r.edges.iter().filter(|e| e.verdict != Verdict::Clean).collect();
    let _ = writeln!(o, "<section id=\"drill\"><h2>Flagged edges in detail</h2>");
    if flagged.is_empty() {
        o.push_str("<p>No edge is flagged.</p></section>\n");
        return;
    }
    o.push_str("<p class=\"hint\">Each flagged edge, both directions: where the context slack sits (the victim's driven gates or its idles, and per operation kind), the circuits that need it most, and the victim's outcome probability against the crosstalk-free prediction by depth. Crosstalk shows as the observed points with the aggressor active falling below the prediction, more so in deeper circuits.</p>\n");
    let directed: std::collections::HashMap<(&str, &str), &DirectedReport> =
        r.directed.iter().map(|d| ((d.victim.as_str(), d.aggressor.as_str()), d)).collect();
    for (i, e) in flagged.iter().enumerate() {
        let _ = write!(
            o,
            "<details class=\"drill verdict-{}\" id=\"{}\"{}><summary>{}{}-{}: {} (<code>{}</code>), score {} x1e-3, estimate {} x1e-3</summary>\n<p>{}</p>\n<div class=\"dirs\">",
            e.verdict.word(),
            escape(&drill_id(e)),
            if i < 3 { " open" } else { "" },
            mark_icon(e.verdict),
            escape(&e.a),
            escape(&e.b),
            e.verdict.word(),
            e.reason_code.code(),
            per_mille(e.score_tvd_per_layer),
            escape(&super::terminal::estimate_text(e.estimate_tvd_per_layer, e.confidence.as_ref())),
            escape(&e.reason)
        );
        for (v, a) in [(&e.a, &e.b), (&e.b, &e.a)] {
            let Some(d) = directed.get(&(v.as_str(), a.as_str())) else { continue };
            direction_detail(o, d);
        }
        o.push_str("</div></details>\n");
    }
    o.push_str("</section>\n");
}

fn direction_detail(o: &mut String, d: &DirectedReport) {
    let _ = write!(
        o,
        "<div class=\"dir\" data-victim=\"{}\" data-aggressor=\"{}\"><h4>{} &lt;- {}</h4>",
        escape(&d.victim),
        escape(&d.aggressor),
        escape(&d.victim),
        escape(&d.aggressor)
    );
    let list = |v: &[String]| if v.is_empty() { "none".to_string() } else { v.join(", ") };
    kv_table(
        o,
        &format!("drill-{}-{}-numbers", d.victim, d.aggressor),
        &[
            ("score x1e-3", per_mille(d.score_tvd_per_layer)),
            (
                "estimate x1e-3",
                super::terminal::estimate_text(d.estimate_tvd_per_layer, d.confidence.as_ref()),
            ),
            ("on driven gates x1e-3", per_mille(d.driven_tvd_per_layer)),
            ("on idles x1e-3", per_mille(d.idle_tvd_per_layer)),
            ("where it is the only active neighbour x1e-3", per_mille(d.isolated_tvd_per_layer)),
            (
                "detection limit x1e-3, p",
                format!("{}, p = {:.3}", per_mille(d.detection_limit_tvd_per_layer), d.p_value),
            ),
            (
                "supporting rows (circuits)",
                format!("{} ({})", d.supporting_rows, d.supporting_circuits),
            ),
            ("circuits needing the most", list(&d.top_supporting_circuits)),
            (
                "leave-one-out x1e-3",
                format!(
                    "{}{}",
                    per_mille(d.leave_one_out_tvd_per_layer),
                    d.most_influential_circuit
                        .as_ref()
                        .map_or(String::new(), |c| format!(" without {c}"))
                ),
            ),
        ],
    );
    let kinds: Vec<(String, Vec<Td>)> = d
        .per_kind
        .iter()
        .filter(|k| k.value > 0.0)
        .map(|k| (String::new(), vec![td(k.kind.clone()), pm_cell(k.value)]))
        .collect();
    if kinds.is_empty() {
        o.push_str(
            "<p class=\"hint\">No operation kind needs context slack in this direction.</p>",
        );
    } else {
        write_table(
            o,
            &format!("drill-{}-{}-kinds", d.victim, d.aggressor),
            false,
            &[("victim's kind", false), ("context slack x1e-3 per op", true)],
            kinds,
        );
    }
    o.push_str(&depth_plot(d));
    o.push_str("</div>");
}

/// A small SVG: probability of the victim's likeliest outcome against timed layers (log
/// axis), observed (dots) and predicted (line), with the aggressor active (dark) and idle
/// (grey, open).
pub fn depth_plot(d: &DirectedReport) -> String {
    let pts = &d.depth_profile;
    if pts.is_empty() {
        return "<p class=\"hint\">No depth profile recorded for this direction.</p>".into();
    }
    let (w, h) = (420.0, 262.0);
    let (left, right, top, bottom) = (46.0, 12.0, 10.0, 70.0);
    let xs: Vec<f64> = pts.iter().map(|p| p.timed_layers.max(1.0).log2()).collect();
    let (x0, x1) =
        xs.iter().fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &x| (a.min(x), b.max(x)));
    let (x0, x1) = if x1 - x0 < 1e-9 { (x0 - 1.0, x1 + 1.0) } else { (x0, x1) };
    let ys = pts.iter().flat_map(|p| [p.observed, p.predicted]);
    let (y0, y1) = ys.fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), y| (a.min(y), b.max(y)));
    let pad = ((y1 - y0) * 0.1).max(0.005);
    let (y0, y1) = ((y0 - pad).max(0.0), (y1 + pad).min(1.0));
    let sx = |x: f64| left + (x - x0) / (x1 - x0) * (w - left - right);
    let sy = |y: f64| top + (y1 - y) / (y1 - y0).max(1e-9) * (h - top - bottom);
    let mut s = format!(
        "<svg class=\"depth-plot\" width=\"{w}\" height=\"{h}\" viewBox=\"0 0 {w} {h}\" role=\"img\" aria-label=\"{} &lt;- {}: observed against predicted outcome probability by depth\">",
        escape(&d.victim),
        escape(&d.aggressor)
    );
    let _ = write!(s, "<rect width=\"100%\" height=\"100%\" fill=\"#ffffff\"/>");
    // Axes and ticks.
    let _ = write!(
        s,
        "<path d=\"M{l} {t}V{b}H{r}\" fill=\"none\" stroke=\"#555555\" stroke-width=\"1\"/>",
        l = px(left),
        t = px(top),
        b = px(h - bottom),
        r = px(w - right)
    );
    for k in 0..=4 {
        let y = y0 + (y1 - y0) * k as f64 / 4.0;
        let _ = write!(
            s,
            "<text x=\"{}\" y=\"{}\" font-size=\"10\" text-anchor=\"end\" font-family=\"sans-serif\">{:.3}</text>",
            px(left - 4.0),
            px(sy(y) + 3.0),
            y
        );
    }
    // Ticks at powers of two (every other one when there are many).
    let (k0, k1) = (x0.ceil() as i32, x1.floor() as i32);
    let every = if k1 - k0 > 8 { 2 } else { 1 };
    for k in (k0..=k1).filter(|k| k % every == 0) {
        let l = 2f64.powi(k);
        let x = sx(k as f64);
        let _ = write!(
            s,
            "<text class=\"xtick\" x=\"{}\" y=\"{}\" font-size=\"10\" text-anchor=\"middle\" font-family=\"sans-serif\">{}</text>",
            px(x),
            px(h - bottom + 13.0),
            l
        );
    }
    let _ = write!(
        s,
        "<text x=\"{}\" y=\"{}\" font-size=\"10\" text-anchor=\"middle\" font-family=\"sans-serif\">timed layers (log scale)</text>",
        px((left + w - right) / 2.0),
        px(h - bottom + 27.0)
    );
    for (active, colour, open) in [(false, "#8a8a8a", true), (true, "#1f3b73", false)] {
        let mut series: Vec<(f64, &super::DepthPoint)> = pts
            .iter()
            .filter(|p| p.aggressor_active == active)
            .map(|p| (p.timed_layers.max(1.0).log2(), p))
            .collect();
        series.sort_by(|a, b| a.0.total_cmp(&b.0));
        if series.is_empty() {
            continue;
        }
        let line: Vec<String> =
            series.iter().map(|(x, p)| format!("{},{}", px(sx(*x)), px(sy(p.predicted)))).collect();
        let _ = write!(
            s,
            "<polyline class=\"predicted\" data-active=\"{active}\" points=\"{}\" fill=\"none\" stroke=\"{colour}\" stroke-width=\"1.5\"{}/>",
            line.join(" "),
            if open { " stroke-dasharray=\"4 3\"" } else { "" }
        );
        for (x, p) in &series {
            let _ = write!(
                s,
                "<circle class=\"observed\" data-active=\"{active}\" cx=\"{}\" cy=\"{}\" r=\"3.5\" fill=\"{}\" stroke=\"{colour}\" stroke-width=\"1.5\"><title>{} timed layers, {} rows, aggressor {}: observed {:.4}, predicted {:.4}</title></circle>",
                px(sx(*x)),
                px(sy(p.observed)),
                if open { "#ffffff" } else { colour },
                px(p.timed_layers),
                p.rows,
                if active { "active" } else { "idle" },
                p.observed,
                p.predicted
            );
        }
    }
    // Key.
    let _ = write!(
        s,
        "<g font-size=\"10\" font-family=\"sans-serif\"><circle cx=\"{}\" cy=\"{}\" r=\"3.5\" fill=\"#1f3b73\"/><text x=\"{}\" y=\"{}\">{} active: observed (dots), predicted (line)</text>\
         <circle cx=\"{}\" cy=\"{}\" r=\"3.5\" fill=\"#ffffff\" stroke=\"#8a8a8a\" stroke-width=\"1.5\"/><text x=\"{}\" y=\"{}\">{} idle: the same, dashed line</text></g>",
        px(left + 4.0),
        px(h - 26.0),
        px(left + 12.0),
        px(h - 22.0),
        escape(&d.aggressor),
        px(left + 4.0),
        px(h - 10.0),
        px(left + 12.0),
        px(h - 6.0),
        escape(&d.aggressor)
    );
    s.push_str("</svg>");
    s
}

/// Intrinsic slack in layout order of the qubits; kinds with no slack and a zero estimate
/// are folded into one line that opens to list them.
fn intrinsic_section(o: &mut String, r: &AuditReport) {
    let _ = writeln!(
        o,
        "<section id=\"intrinsic\"><h2>Intrinsic slack (unmodelled error that is not crosstalk)</h2>"
    );
    let all = r.intrinsic_in_layout_order();
    let zero = |k: &super::IntrinsicReport| {
        k.slack_tvd_per_occurrence == 0.0 && k.estimate_tvd_per_occurrence == 0.0
    };
    let (folded, shown): (Vec<_>, Vec<_>) = all.into_iter().partition(|k| zero(k));
    let row = |k: &super::IntrinsicReport| {
        (
            String::new(),
            vec![
                td(k.kind.clone()),
                td(k.qubits.join(", ")),
                num(k.occurrences.to_string(), Some(k.occurrences as f64)),
                num(k.reference_occurrences.to_string(), Some(k.reference_occurrences as f64)),
                pm_cell(k.slack_tvd_per_occurrence),
                pm_cell(k.estimate_tvd_per_occurrence),
                match &k.confidence {
                    Some(c) => num(
                        format!(
                            "{}..{}",
                            per_mille(c.low_tvd_per_occurrence),
                            per_mille(c.high_tvd_per_occurrence)
                        ),
                        Some(c.low_tvd_per_occurrence),
                    ),
                    None => num("-", None),
                },
                pm_cell(k.fitted_error_rate),
                td(if k.fitted_on_all_rows { "no reference rows: fitted on all rows" } else { "" }),
            ],
        )
    };
    let heads = [
        ("kind", false),
        ("qubits", false),
        ("occurrences", true),
        ("reference occurrences", true),
        ("slack x1e-3 per op", true),
        ("estimate x1e-3 per op", true),
        ("interval x1e-3", true),
        ("fitted error x1e-3", true),
        ("note", false),
    ];
    if shown.is_empty() {
        o.push_str("<p>No operation kind needs intrinsic slack: the crosstalk-free model explains the reference circuits.</p>\n");
    } else {
        write_table(o, "intrinsic-table", true, &heads, shown.iter().map(|k| row(k)).collect());
    }
    if !folded.is_empty() {
        let _ = write!(
            o,
            "<details class=\"folded\" id=\"intrinsic-zero\"><summary>{} more kinds need no intrinsic slack (slack and estimate 0): {}</summary>",
            folded.len(),
            escape(&folded.iter().map(|k| k.kind.as_str()).collect::<Vec<_>>().join(", "))
        );
        write_table(
            o,
            "intrinsic-zero-table",
            true,
            &heads,
            folded.iter().map(|k| row(k)).collect(),
        );
        o.push_str("</details>\n");
    }
    o.push_str("</section>\n");
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sort_keys_put_missing_values_last() {
        let mut out = String::new();
        write_table(
            &mut out,
            "t",
            true,
            &[("x", true)],
            vec![(String::new(), vec![num("-", None)])],
        );
        assert!(out.contains("data-sort=\"\""), "{out}");
        let mut out = String::new();
        write_table(
            &mut out,
            "t",
            true,
            &[("x", true)],
            vec![(String::new(), vec![num("2", Some(2.0))])],
        );
        assert!(out.contains("data-sort=\"2e0\""), "{out}");
    }

    #[test]
    fn script_has_no_closing_tag_inside() {
        assert!(!SCRIPT.contains("</"));
        assert!(!STYLE.contains("</"));
    }
}
