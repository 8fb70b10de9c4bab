//! `report.html`: one self-contained page (no external scripts, fonts, images or network) with
//! the summary in words, both pictures inline, every table of the audit, the run's parameters
//! and input digests, and the caution. Tables sort by clicking a heading (a few lines of inline
//! script) and read fully without script. Every string from the report is escaped.

use std::fmt::Write;

use super::markup::{escape, verdict_mark};
use super::svg::{self, Doc};
use super::terminal::{fit_words, per_mille, summary_words};
use super::{AuditReport, Render, Verdict};

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
td.id, td.verdict { white-space: nowrap; }
td.words { min-width: 18rem; }
td.verdict svg { vertical-align: -2px; margin-right: 0.3em; }
table.sortable th { cursor: pointer; }
table.sortable th[aria-sort="ascending"]::after { content: " \25B2"; font-size: 0.7em; }
table.sortable th[aria-sort="descending"]::after { content: " \25BC"; font-size: 0.7em; }
code, .digest { font-family: ui-monospace, "DejaVu Sans Mono", monospace; font-size: 0.85rem; }
.digest { word-break: break-all; }
.hint { color: #555555; font-size: 0.9rem; }
.scroll { overflow-x: auto; }
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
    let _ = write!(
        out,
        "<div class=\"scroll\"><table id=\"{id}\"{}><thead><tr>",
        if sortable { " class=\"sortable\"" } else { "" }
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
    let _ = writeln!(
        o,
        "<p class=\"meta\">{} qubits, {} neighbour pairs, {} circuits ({} with counts), written by slackmap {} (audit schema {}).</p></header>",
        r.layout.qubits.len(),
        r.layout.neighbour_pairs,
        r.data.circuits,
        r.data.circuits_with_counts,
        escape(&r.tool_version),
        r.schema
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
         Scores are in units of 1e-3 TVD per layer; files keep full precision.</p></section>",
        d.rows, d.reference_rows, d.shots_min, d.shots_median, d.shots_max, d.shots_total
    );

    let _ = writeln!(o, "<section id=\"pictures\"><h2>Pictures</h2>");
    let _ = writeln!(
        o,
        "<figure id=\"fig-layout\">{}<figcaption>The chip: each neighbour pair is drawn as two halves; the half \
         nearer a qubit is the crosstalk onto it (width and colour). Qubits are shaded by intrinsic slack. \
         Hover an edge or qubit for its numbers.</figcaption></figure>",
        svg::layout(r, Doc::Inline)
    );
    let _ = writeln!(
        o,
        "<figure id=\"fig-adjacency\">{}<figcaption>Victims (rows) by aggressors (columns); only neighbours have \
         cells. Hatched cells are neighbours with a score of exactly zero.</figcaption></figure></section>",
        svg::adjacency(r, Doc::Inline)
    );

    // Edges.
    let _ = writeln!(o, "<section id=\"edges\"><h2>Neighbour pairs, worst first</h2>");
    let _ = writeln!(
        o,
        "<p class=\"hint sort\">Click a column heading to sort; click again to reverse.</p>"
    );
    let heads = [
        ("rank", true),
        ("edge", false),
        ("coupled", false),
        ("verdict", false),
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
        ("reason", false),
    ];
    let rows = r
        .edges
        .iter()
        .map(|e| {
            let interval = match &e.confidence {
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
            };
            let verdict = Td {
                text: format!("{}{}", mark_icon(e.verdict), e.verdict.word()),
                sort: None,
                class: "verdict",
                raw: true,
            };
            (
                format!("edge verdict-{}", e.verdict.word()),
                vec![
                    num(
                        e.rank.map(|k| k.to_string()).unwrap_or_else(|| "-".into()),
                        e.rank.map(|k| k as f64),
                    ),
                    Td { class: "id", ..td(format!("{}-{}", e.a, e.b)) },
                    td(if e.coupled { "yes" } else { "no" }),
                    verdict,
                    pm_cell(e.score_tvd_per_layer),
                    pm_cell(e.a_from_b_tvd_per_layer),
                    pm_cell(e.b_from_a_tvd_per_layer),
                    pm_cell(super::quoted_estimate(
                        e.estimate_tvd_per_layer,
                        e.confidence.as_ref(),
                    )),
                    interval,
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
                    Td { class: "words", ..td(e.reason.clone()) },
                ],
            )
        })
        .collect();
    write_table(&mut o, "edge-table", true, &heads, rows);
    o.push_str("<p class=\"hint\">a&lt;-b is the crosstalk onto a from b. The score is the least slack the data demand, a lower bound built for detection; the estimate is the size it would have at unlimited shots (bias-corrected where replicates were run), and the interval is around it. Sensitivity is about the smallest estimate these circuits could tell from zero (first order, depolarizing-like error): a clean edge can still hide crosstalk below it. Attribution is the range of the score over near-optimal budgets; leave-one-out drops the most influential circuit.</p></section>\n");

    // Intrinsic slack.
    let _ = writeln!(o, "<section id=\"intrinsic\"><h2>Intrinsic slack (unmodelled error that is not crosstalk)</h2>");
    let mut kinds: Vec<_> = r.intrinsic.iter().collect();
    kinds.sort_by(|a, b| b.slack_tvd_per_occurrence.total_cmp(&a.slack_tvd_per_occurrence));
    let rows = kinds
        .iter()
        .map(|k| {
            (
                String::new(),
                vec![
                    td(k.kind.clone()),
                    td(k.qubits.join(", ")),
                    num(k.occurrences.to_string(), Some(k.occurrences as f64)),
                    num(k.reference_occurrences.to_string(), Some(k.reference_occurrences as f64)),
                    pm_cell(k.slack_tvd_per_occurrence),
                    pm_cell(super::quoted_estimate(
                        k.estimate_tvd_per_occurrence,
                        k.confidence.as_ref(),
                    )),
                    match &k.confidence {
                        Some(c) => num(
                            format!(
                                "{}..{}",
                                per_mille(c.low_tvd_per_layer),
                                per_mille(c.high_tvd_per_layer)
                            ),
                            Some(c.low_tvd_per_layer),
                        ),
                        None => num("-", None),
                    },
                    pm_cell(k.fitted_error_rate),
                    td(if k.fitted_on_all_rows {
                        "no reference rows: fitted on all rows"
                    } else {
                        ""
                    }),
                ],
            )
        })
        .collect();
    write_table(
        &mut o,
        "intrinsic-table",
        true,
        &[
            ("kind", false),
            ("qubits", false),
            ("occurrences", true),
            ("reference occurrences", true),
            ("slack x1e-3 per op", true),
            ("estimate x1e-3 per op", true),
            ("interval x1e-3", true),
            ("fitted error x1e-3", true),
            ("note", false),
        ],
        rows,
    );
    o.push_str("</section>\n");

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
