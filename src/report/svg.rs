//! The two pictures of an audit: `adjacency.svg` (victims by aggressors, one cell per directed
//! neighbour pair) and `layout.svg` (the chip, each neighbour pair drawn as two half-edges).
//!
//! Both use one logarithmic score scale ([`ScoreScale`]: colour from [`colour::SCORE`], in
//! units of 1e-3 TVD per layer, the action threshold marked on the legend), so that scores
//! a hundred times apart look different even when one edge dwarfs the rest; the same verdict
//! marks; flagged edges labelled with their score; and data attributes plus `<title>`
//! tooltips so a reader (or a test) can find every cell and edge. Pure string building.

use std::collections::HashMap;
use std::fmt::Write;

use super::colour::{self, Ramp};
use super::markup::{escape, nice_ceil, px, tick_label, ticks, verdict_mark, verdict_mark_open};
use super::{AuditReport, Confidence, DirectedReport, EdgeReport, GatePairReport, Render, Verdict};

/// Whether an SVG is a file of its own or sits inside an HTML page (where the namespace is
/// implied and naming it would put a URL in a page that promises to have none).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Doc {
    /// A standalone `.svg` file.
    Standalone,
    /// Inline in HTML.
    Inline,
}

/// Layouts with more qubits than this draw only their flagged edges in `layout.svg`.
pub const FULL_LAYOUT_UP_TO: usize = 300;

const FONT: &str = "font-family=\"sans-serif\"";

/// Renders `adjacency.svg`.
pub struct AdjacencySvg;

impl Render for AdjacencySvg {
    fn file_name(&self) -> &'static str {
        "adjacency.svg"
    }

    fn render(&self, report: &AuditReport) -> Vec<u8> {
        adjacency(report, Doc::Standalone).into_bytes()
    }
}

/// Renders `layout.svg`.
pub struct LayoutSvg;

impl Render for LayoutSvg {
    fn file_name(&self) -> &'static str {
        "layout.svg"
    }

    fn render(&self, report: &AuditReport) -> Vec<u8> {
        layout(report, Doc::Standalone).into_bytes()
    }
}

fn open_svg(doc: Doc, w: f64, h: f64, label: &str) -> String {
    let ns = match doc {
        Doc::Standalone => " xmlns=\"http://www.w3.org/2000/svg\"",
        Doc::Inline => "",
    };
    format!(
        "<svg{ns} width=\"{}\" height=\"{}\" viewBox=\"0 0 {} {}\" role=\"img\" aria-label=\"{}\">\n\
         <rect width=\"100%\" height=\"100%\" fill=\"#ffffff\"/>\n",
        px(w),
        px(h),
        px(w),
        px(h),
        escape(label)
    )
}

fn text(x: f64, y: f64, size: f64, anchor: &str, extra: &str, body: &str) -> String {
    format!(
        "<text x=\"{}\" y=\"{}\" {FONT} font-size=\"{}\" text-anchor=\"{anchor}\" fill=\"#1a1a1a\"{extra}>{}</text>\n",
        px(x),
        px(y),
        px(size),
        escape(body)
    )
}

/// The logarithmic colour scale of the scores, in units of 1e-3 TVD per layer.
///
/// The top is the largest score or the action threshold, whichever is larger, rounded up
/// (anchoring at the threshold keeps a chip with only tiny scores from looking alarming).
/// The bottom is the decade of the smallest positive score, but at least two decades below
/// the top and one below the threshold, and at most four below the top; smaller positive
/// scores take the bottom colour. A linear scale would paint everything but the worst edge
/// the same pale colour.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct ScoreScale {
    /// Bottom of the scale, 1e-3 TVD per layer (a power of ten).
    pub low_per_mille: f64,
    /// Top of the scale, 1e-3 TVD per layer.
    pub high_per_mille: f64,
    /// The action threshold, 1e-3 TVD per layer.
    pub threshold_per_mille: f64,
}

impl ScoreScale {
    /// The scale of an audit's directed and edge scores.
    pub fn of(r: &AuditReport) -> ScoreScale {
        let scores = || {
            r.directed
                .iter()
                .map(|d| d.score_tvd_per_layer)
                .chain(r.edges.iter().map(|e| e.score_tvd_per_layer))
                .filter(|v| v.is_finite() && *v > 0.0)
        };
        let threshold = r.parameters.action_threshold_tvd_per_layer * 1e3;
        let high =
            nice_ceil(scores().fold(r.parameters.action_threshold_tvd_per_layer, f64::max) * 1e3);
        let decade = |x: f64| 10f64.powf(x.log10().floor());
        let smallest = scores().fold(f64::INFINITY, f64::min) * 1e3;
        let mut low = if smallest.is_finite() { decade(smallest) } else { high / 100.0 };
        low = low.min(decade(high / 100.0));
        if threshold > 0.0 {
            low = low.min(decade(threshold / 10.0));
        }
        low = low.max(10f64.powf((high / 1e4).log10().ceil()));
        ScoreScale { low_per_mille: low, high_per_mille: high, threshold_per_mille: threshold }
    }

    /// Position in [0, 1] of a value in TVD per layer (values at or below the bottom: 0).
    pub fn at(&self, v: f64) -> f64 {
        self.at_per_mille(v * 1e3)
    }

    fn at_per_mille(&self, pm: f64) -> f64 {
        if pm.is_nan() || pm <= self.low_per_mille {
            return 0.0;
        }
        let span = (self.high_per_mille / self.low_per_mille).log10();
        ((pm / self.low_per_mille).log10() / span).clamp(0.0, 1.0)
    }

    /// Tick values, 1e-3 TVD per layer: every decade from the bottom, and the top.
    pub fn ticks(&self) -> Vec<f64> {
        let mut v = Vec::new();
        let mut t = self.low_per_mille;
        while t < self.high_per_mille * (1.0 - 1e-9) {
            v.push(t);
            t *= 10.0;
        }
        v.push(self.high_per_mille);
        // A top within a factor 2 of the last decade crowds its label: keep the top only.
        if v.len() >= 2 && v[v.len() - 1] / v[v.len() - 2] < 2.0 {
            v.remove(v.len() - 2);
        }
        v
    }

    /// Where the threshold sits on the scale, when it is inside it.
    pub fn threshold_at(&self) -> Option<f64> {
        (self.threshold_per_mille > self.low_per_mille
            && self.threshold_per_mille <= self.high_per_mille)
            .then(|| self.at_per_mille(self.threshold_per_mille))
    }
}

/// A tick label of a logarithmic scale value.
fn log_label(v: f64) -> String {
    tick_label(v, 10f64.powf(v.log10().floor()))
}

fn pm(v: f64) -> String {
    super::terminal::per_mille(v)
}

fn interval_words(c: &Option<Confidence>) -> String {
    match c {
        Some(c) => format!(
            "{:.0}% interval {}..{} x1e-3 ({} bootstrap)",
            c.level * 100.0,
            pm(c.low_tvd_per_layer),
            pm(c.high_tvd_per_layer),
            c.method
        ),
        None => "no interval (no bootstrap replicates)".into(),
    }
}

/// Edges by unordered pair of ids.
fn edge_index(r: &AuditReport) -> HashMap<(&str, &str), &EdgeReport> {
    let mut m = HashMap::new();
    for e in &r.edges {
        m.insert((e.a.as_str(), e.b.as_str()), e);
        m.insert((e.b.as_str(), e.a.as_str()), e);
    }
    m
}

/// True when the direction victim <- aggressor is the one that gives the edge its score.
fn is_scoring_direction(e: &EdgeReport, victim: &str) -> bool {
    if e.a_from_b_tvd_per_layer >= e.b_from_a_tvd_per_layer {
        victim == e.a
    } else {
        victim == e.b
    }
}

fn gradient(id: &str, ramp: Ramp, vertical: bool) -> String {
    let (x2, y2) = if vertical { ("0", "0") } else { ("1", "0") };
    let y1 = if vertical { "1" } else { "0" };
    let mut s =
        format!("<linearGradient id=\"{id}\" x1=\"0\" y1=\"{y1}\" x2=\"{x2}\" y2=\"{y2}\">");
    let n = ramp.stops().len();
    for (i, c) in ramp.stops().iter().enumerate() {
        let _ = write!(
            s,
            "<stop offset=\"{}\" stop-color=\"{}\"/>",
            px(i as f64 / (n - 1) as f64 * 100.0) + "%",
            colour::hex(*c)
        );
    }
    s.push_str("</linearGradient>");
    s
}

fn hatch(id: &str) -> String {
    format!(
        "<pattern id=\"{id}\" width=\"4\" height=\"4\" patternUnits=\"userSpaceOnUse\" \
         patternTransform=\"rotate(45)\"><rect width=\"4\" height=\"4\" fill=\"#ffffff\"/>\
         <line x1=\"0\" y1=\"0\" x2=\"0\" y2=\"4\" stroke=\"#8a8a8a\" stroke-width=\"1.4\"/></pattern>"
    )
}

/// Legend entries for the verdict marks, starting at (x, y); returns the svg and the next y.
fn mark_legend(x: f64, mut y: f64) -> (String, f64) {
    let mut s = String::new();
    for (v, words) in [
        (Verdict::Recalibrate, "recalibrate (detected, above threshold)"),
        (Verdict::Watch, "watch (detected, below threshold)"),
        (Verdict::Confounded, "confounded (another aggressor could carry it)"),
        (Verdict::NotTested, "not-tested (needs slack; no null could test it)"),
    ] {
        s.push_str(&format!("<g class=\"legend-mark\" data-verdict=\"{}\">", v.word()));
        s.push_str(&verdict_mark(v, x + 8.0, y - 4.0, 6.0));
        s.push_str(&text(x + 22.0, y, 11.0, "start", "", words));
        s.push_str("</g>\n");
        y += 20.0;
    }
    (s, y)
}

/// `adjacency.svg`: victims as rows, aggressors as columns, in layout order; only neighbour
/// cells are drawn. Zero scores are hatched so they never pass for small positive ones.
pub fn adjacency(r: &AuditReport, doc: Doc) -> String {
    let ids = &r.layout.qubits;
    let n = ids.len().max(1);
    let index: HashMap<&str, usize> =
        ids.iter().enumerate().map(|(i, q)| (q.as_str(), i)).collect();
    let edges = edge_index(r);
    let scale = ScoreScale::of(r);

    let cell = (900.0 / n as f64).clamp(2.0, 26.0);
    let font = (cell * 0.75).clamp(6.0, 11.0);
    let every = ((font * 1.2) / cell).ceil().max(1.0) as usize;
    let longest = ids.iter().map(|q| q.chars().count()).max().unwrap_or(1) as f64;
    let label_w = longest * font * 0.62 + 6.0;
    let left = 30.0 + label_w;
    let top = 66.0 + label_w;
    let grid = n as f64 * cell;
    let legend_x = left + grid + 28.0;
    let legend_h = 420.0;
    let width = legend_x + 300.0;
    let height = top + grid.max(legend_h) + 24.0;

    let mut s = open_svg(doc, width, height, "Directed crosstalk scores, victims by aggressors");
    let _ = writeln!(
        s,
        "<defs>{}{}</defs>",
        gradient("adj-ramp", colour::SCORE, true),
        hatch("adj-hatch")
    );
    s.push_str(&text(
        10.0,
        22.0,
        15.0,
        "start",
        " font-weight=\"bold\"",
        &format!(
            "Crosstalk onto each victim (row) from each aggressor (column): layout {}",
            r.layout.name
        ),
    ));
    s.push_str(&text(
        10.0,
        40.0,
        11.0,
        "start",
        "",
        "Cell colour: directed score X(victim <- aggressor); blank: not neighbours.",
    ));
    // Axis titles.
    s.push_str(&text(
        left + grid / 2.0,
        top - label_w - 4.0,
        11.0,
        "middle",
        " font-style=\"italic\"",
        "aggressor",
    ));
    let _ = writeln!(
        s,
        "<text x=\"14\" y=\"{}\" {FONT} font-size=\"11\" font-style=\"italic\" text-anchor=\"middle\" \
         fill=\"#1a1a1a\" transform=\"rotate(-90 14 {})\">victim</text>",
        px(top + grid / 2.0),
        px(top + grid / 2.0)
    );
    // Labels.
    s.push_str("<g class=\"labels\">\n");
    for (i, q) in ids.iter().enumerate() {
        if i % every != 0 {
            continue;
        }
        let c = i as f64 * cell + cell / 2.0;
        s.push_str(&text(left - 4.0, top + c + font * 0.35, font, "end", "", q));
        let (x, y) = (left + c + font * 0.35, top - 4.0);
        let _ = writeln!(
            s,
            "<text x=\"{}\" y=\"{}\" {FONT} font-size=\"{}\" text-anchor=\"start\" fill=\"#1a1a1a\" \
             transform=\"rotate(-90 {} {})\">{}</text>",
            px(x),
            px(y),
            px(font),
            px(x),
            px(y),
            escape(q)
        );
    }
    s.push_str("</g>\n");
    let _ = writeln!(
        s,
        "<rect x=\"{}\" y=\"{}\" width=\"{}\" height=\"{}\" fill=\"none\" stroke=\"#c8c8c8\" stroke-width=\"1\"/>",
        px(left),
        px(top),
        px(grid),
        px(grid)
    );

    s.push_str("<g class=\"cells\">\n");
    let mut marks = String::new();
    for d in &r.directed {
        let (Some(&i), Some(&j)) = (index.get(d.victim.as_str()), index.get(d.aggressor.as_str()))
        else {
            continue;
        };
        let (x, y) = (left + j as f64 * cell, top + i as f64 * cell);
        let edge = edges.get(&(d.victim.as_str(), d.aggressor.as_str()));
        let verdict = edge.map(|e| e.verdict).unwrap_or(Verdict::Clean);
        let zero = d.score_tvd_per_layer <= 0.0 || !d.score_tvd_per_layer.is_finite();
        let fill = if zero {
            "url(#adj-hatch)".to_string()
        } else {
            colour::SCORE.hex(scale.at(d.score_tvd_per_layer))
        };
        let _ = write!(
            s,
            "<g class=\"cell{}\" data-victim=\"{}\" data-aggressor=\"{}\" data-verdict=\"{}\"><title>{}</title>\
             <rect x=\"{}\" y=\"{}\" width=\"{}\" height=\"{}\" fill=\"{fill}\" stroke=\"#ffffff\" stroke-width=\"{}\"/>",
            if zero { " zero" } else { "" },
            escape(&d.victim),
            escape(&d.aggressor),
            verdict.word(),
            escape(&cell_title(d, edge.copied())),
            px(x),
            px(y),
            px(cell),
            px(cell),
            px((cell * 0.06).min(1.0)),
        );
        if zero {
            // The hatch alone can vanish in tiny cells; a thin grey frame keeps it visible.
            let _ = write!(
                s,
                "<rect x=\"{}\" y=\"{}\" width=\"{}\" height=\"{}\" fill=\"none\" stroke=\"#8a8a8a\" stroke-width=\"{}\"/>",
                px(x + 0.5),
                px(y + 0.5),
                px((cell - 1.0).max(0.5)),
                px((cell - 1.0).max(0.5)),
                px((cell * 0.05).clamp(0.3, 0.8))
            );
        }
        s.push_str("</g>\n");
        if let Some(e) = edge {
            if verdict != Verdict::Clean && is_scoring_direction(e, &d.victim) {
                let (cx, cy) = (x + cell / 2.0, y + cell / 2.0);
                // Small cells: an open mark around the cell, so its colour stays visible.
                marks.push_str(&if cell >= 14.0 {
                    verdict_mark(verdict, cx, cy, cell * 0.32)
                } else {
                    verdict_mark_open(verdict, cx, cy, cell * 0.55 + 2.5)
                });
                marks.push('\n');
            }
        }
    }
    s.push_str("</g>\n<g class=\"marks\">\n");
    s.push_str(&marks);
    s.push_str("</g>\n");

    // Legend.
    let lx = legend_x;
    let mut ly = top;
    s.push_str("<g class=\"legend\">\n");
    s.push_str(&text(lx, ly, 12.0, "start", " font-weight=\"bold\"", "X(victim <- aggressor)"));
    ly += 15.0;
    s.push_str(&text(lx, ly, 11.0, "start", "", "x1e-3 TVD per layer"));
    ly += 10.0;
    let bar_h = 170.0;
    let _ = writeln!(
        s,
        "<rect x=\"{}\" y=\"{}\" width=\"18\" height=\"{}\" fill=\"url(#adj-ramp)\" stroke=\"#666666\" stroke-width=\"0.6\"/>",
        px(lx),
        px(ly),
        px(bar_h)
    );
    for v in scale.ticks() {
        let y = ly + bar_h - bar_h * scale.at_per_mille(v);
        let _ = writeln!(
            s,
            "<line x1=\"{}\" y1=\"{}\" x2=\"{}\" y2=\"{}\" stroke=\"#333333\" stroke-width=\"0.8\"/>",
            px(lx + 18.0),
            px(y),
            px(lx + 23.0),
            px(y)
        );
        s.push_str(&text(lx + 27.0, y + 4.0, 11.0, "start", " class=\"tick\"", &log_label(v)));
    }
    if let Some(t) = scale.threshold_at() {
        let y = ly + bar_h - bar_h * t;
        let _ = writeln!(
            s,
            "<g class=\"threshold\"><line x1=\"{}\" y1=\"{}\" x2=\"{}\" y2=\"{}\" stroke=\"#c0392b\" stroke-width=\"2\"/>{}</g>",
            px(lx - 4.0),
            px(y),
            px(lx + 22.0),
            px(y),
            text(lx + 60.0, y + 4.0, 10.0, "start", " fill-opacity=\"1\"", &format!("action threshold {}", pm(scale.threshold_per_mille / 1e3)))
        );
    }
    ly += bar_h + 8.0;
    s.push_str(&text(
        lx,
        ly + 6.0,
        10.0,
        "start",
        "",
        "logarithmic; smaller scores take the palest colour",
    ));
    ly += 26.0;
    let _ = writeln!(
        s,
        "<rect x=\"{}\" y=\"{}\" width=\"16\" height=\"16\" fill=\"url(#adj-hatch)\" stroke=\"#8a8a8a\" stroke-width=\"0.8\"/>",
        px(lx),
        px(ly - 12.0)
    );
    s.push_str(&text(
        lx + 22.0,
        ly,
        11.0,
        "start",
        " class=\"zero-key\"",
        "neighbours, score exactly 0",
    ));
    ly += 22.0;
    let _ = writeln!(
        s,
        "<rect x=\"{}\" y=\"{}\" width=\"16\" height=\"16\" fill=\"#ffffff\" stroke=\"#c8c8c8\" stroke-width=\"0.8\"/>",
        px(lx),
        px(ly - 12.0)
    );
    s.push_str(&text(lx + 22.0, ly, 11.0, "start", "", "not neighbours"));
    ly += 26.0;
    let (m, next) = mark_legend(lx, ly);
    s.push_str(&m);
    s.push_str(&text(lx, next + 2.0, 10.0, "start", "", "A mark sits on the direction that gives"));
    s.push_str(&text(
        lx,
        next + 15.0,
        10.0,
        "start",
        "",
        "the edge its score; hover for intervals.",
    ));
    s.push_str("</g>\n</svg>\n");
    s
}

fn cell_title(d: &DirectedReport, edge: Option<&EdgeReport>) -> String {
    let mut t = format!(
        "{} <- {}: {} x1e-3 per layer; {}; detection limit {} x1e-3, p = {:.3}",
        d.victim,
        d.aggressor,
        pm(d.score_tvd_per_layer),
        interval_words(&d.confidence),
        pm(d.detection_limit_tvd_per_layer),
        d.p_value
    );
    if let Some(e) = edge {
        let _ = write!(t, "; edge {}-{}: {}", e.a, e.b, e.verdict.word());
    }
    t
}

/// Per-qubit intrinsic slack: occurrence-weighted over the qubit's one-qubit kinds (idle
/// included), with the worst such kind, TVD per occurrence.
struct QubitSlack {
    weighted: f64,
    kinds: usize,
    worst: Option<(String, f64)>,
}

/// Running sums for [`QubitSlack`]: weighted sum, occurrences, plain sum, kinds, worst kind.
type SlackSums = (f64, f64, f64, usize, Option<(String, f64)>);

fn qubit_slack(r: &AuditReport) -> HashMap<&str, QubitSlack> {
    let mut acc: HashMap<&str, SlackSums> = HashMap::new();
    for k in &r.intrinsic {
        let [q] = k.qubits.as_slice() else { continue };
        let v =
            if k.slack_tvd_per_occurrence.is_finite() { k.slack_tvd_per_occurrence } else { 0.0 };
        let e = acc.entry(q.as_str()).or_insert((0.0, 0.0, 0.0, 0, None));
        e.0 += v * k.occurrences as f64;
        e.1 += k.occurrences as f64;
        e.2 += v;
        e.3 += 1;
        if e.4.as_ref().is_none_or(|(_, w)| v > *w) {
            e.4 = Some((k.kind.clone(), v));
        }
    }
    acc.into_iter()
        .map(|(q, (ws, occ, sum, kinds, worst))| {
            let weighted = if occ > 0.0 { ws / occ } else { sum / kinds.max(1) as f64 };
            (q, QubitSlack { weighted, kinds, worst })
        })
        .collect()
}

/// Drawing positions: the layout's own when every qubit has one and they are not all the
/// same point, else a circle with neighbours about one unit apart.
fn positions(r: &AuditReport) -> Vec<[f64; 2]> {
    let n = r.layout.qubits.len();
    let given: Option<Vec<[f64; 2]>> = if r.layout.positions.len() == n {
        r.layout
            .positions
            .iter()
            .map(|p| p.filter(|p| p[0].is_finite() && p[1].is_finite()))
            .collect()
    } else {
        None
    };
    if let Some(p) = given {
        let spread = p.iter().any(|q| (q[0] - p[0][0]).abs() + (q[1] - p[0][1]).abs() > 1e-12);
        if spread || n == 1 {
            return p;
        }
    }
    let radius = (n as f64 / (2.0 * std::f64::consts::PI)).max(0.5);
    (0..n)
        .map(|i| {
            let t = 2.0 * std::f64::consts::PI * i as f64 / n.max(1) as f64
                - std::f64::consts::FRAC_PI_2;
            [radius * t.cos(), radius * t.sin()]
        })
        .collect()
}

/// `layout.svg`: the chip at its positions. Each neighbour pair is two half-edges; the half
/// nearer a qubit shows the crosstalk onto that qubit, by width and colour. Qubits are shaded
/// by intrinsic slack. Above [`FULL_LAYOUT_UP_TO`] qubits only flagged edges are drawn.
pub fn layout(r: &AuditReport, doc: Doc) -> String {
    let ids = &r.layout.qubits;
    let n = ids.len();
    let index: HashMap<&str, usize> =
        ids.iter().enumerate().map(|(i, q)| (q.as_str(), i)).collect();
    let pos = positions(r);
    let score_scale = ScoreScale::of(r);
    let only_flagged = n > FULL_LAYOUT_UP_TO;

    let pairs: Vec<(&EdgeReport, usize, usize)> = r
        .edges
        .iter()
        .filter_map(|e| Some((e, *index.get(e.a.as_str())?, *index.get(e.b.as_str())?)))
        .filter(|(_, i, j)| i != j)
        .collect();
    let dist = |i: usize, j: usize| {
        ((pos[i][0] - pos[j][0]).powi(2) + (pos[i][1] - pos[j][1]).powi(2)).sqrt()
    };
    let mut ds: Vec<f64> =
        pairs.iter().map(|&(_, i, j)| dist(i, j)).filter(|d| *d > 1e-9).collect();
    ds.sort_by(f64::total_cmp);
    let (minx, maxx, miny, maxy) = pos.iter().fold(
        (f64::INFINITY, f64::NEG_INFINITY, f64::INFINITY, f64::NEG_INFINITY),
        |(a, b, c, d), p| (a.min(p[0]), b.max(p[0]), c.min(p[1]), d.max(p[1])),
    );
    let (minx, maxx, miny, maxy) =
        if n == 0 { (0.0, 0.0, 0.0, 0.0) } else { (minx, maxx, miny, maxy) };
    let (ex, ey) = (maxx - minx, maxy - miny);
    let unit = ds.get(ds.len() / 2).copied().unwrap_or_else(|| {
        let e = ex.max(ey);
        if e > 0.0 {
            e / (n as f64).sqrt().max(1.0)
        } else {
            1.0
        }
    });
    // Pixels per layout unit: fit 860 px, but never spread neighbours more than 130 px apart.
    let avail = 860.0;
    let fit = |e: f64| if e > 1e-12 { avail / e } else { f64::INFINITY };
    let scale = fit(ex).min(fit(ey)).min(130.0 / unit);
    let dpx = unit * scale;
    let node_r = (dpx * 0.2).clamp(1.5, 30.0);
    let (wmin, wmax) = ((dpx * 0.025).max(0.6), (dpx * 0.12).max(1.5));
    let gap = dpx * 0.03;
    let margin = node_r + 16.0;
    let left = margin;
    let top = 58.0 + margin;
    let width_draw = ex * scale;
    let height_draw = ey * scale;
    let legend_x = left + width_draw + margin + 10.0;
    let width = legend_x + 310.0;
    let height = top + height_draw.max(470.0 - margin) + margin;
    let at = |i: usize| (left + (pos[i][0] - minx) * scale, top + (pos[i][1] - miny) * scale);

    let mut s = open_svg(doc, width, height, "Chip layout with directed crosstalk scores");
    let _ = writeln!(
        s,
        "<defs>{}{}</defs>",
        gradient("lay-ramp", colour::SCORE, false),
        gradient("lay-qramp", colour::QUBIT, false)
    );
    s.push_str(&text(
        10.0,
        22.0,
        15.0,
        "start",
        " font-weight=\"bold\"",
        &format!(
            "Layout {}: crosstalk along each neighbour pair, intrinsic slack on each qubit",
            r.layout.name
        ),
    ));
    let flagged = |e: &EdgeReport| e.verdict != Verdict::Clean;
    let note = if only_flagged {
        format!(
            "{} qubits: only the {} flagged pairs (recalibrate, watch, confounded, not-tested) are drawn, of {}; all pairs are in edges.csv.",
            n,
            pairs.iter().filter(|(e, _, _)| flagged(e)).count(),
            pairs.len()
        )
    } else {
        "Each pair is two halves: the half nearer a qubit is the crosstalk onto it from the other."
            .into()
    };
    s.push_str(&text(10.0, 40.0, 11.0, "start", " class=\"note\"", &note));

    // Weakest first so the worst edges are drawn on top.
    let mut order: Vec<&(&EdgeReport, usize, usize)> =
        pairs.iter().filter(|(e, _, _)| !only_flagged || flagged(e)).collect();
    order.sort_by(|a, b| a.0.score_tvd_per_layer.total_cmp(&b.0.score_tvd_per_layer));
    s.push_str("<g class=\"edges\">\n");
    for &&(e, i, j) in &order {
        let ((xa, ya), (xb, yb)) = (at(i), at(j));
        let len = ((xb - xa).powi(2) + (yb - ya).powi(2)).sqrt();
        let _ = write!(
            s,
            "<g class=\"edge\" data-a=\"{}\" data-b=\"{}\" data-verdict=\"{}\"><title>{}</title>",
            escape(&e.a),
            escape(&e.b),
            e.verdict.word(),
            escape(&edge_title(e))
        );
        if len > 2.0 * (node_r + gap) {
            let (ux, uy) = ((xb - xa) / len, (yb - ya) / len);
            let (mx, my) = ((xa + xb) / 2.0, (ya + yb) / 2.0);
            for (from, score, sign) in [
                ((xa, ya), e.a_from_b_tvd_per_layer, 1.0),
                ((xb, yb), e.b_from_a_tvd_per_layer, -1.0),
            ] {
                let start =
                    (from.0 + sign * ux * (node_r + gap), from.1 + sign * uy * (node_r + gap));
                let end = (mx - sign * ux * gap, my - sign * uy * gap);
                let zero = score <= 0.0 || !score.is_finite();
                let (stroke, w, dash) = if zero {
                    (
                        "#a0a0a0".to_string(),
                        wmin,
                        format!(" stroke-dasharray=\"{} {}\"", px(wmin * 3.0), px(wmin * 2.5)),
                    )
                } else {
                    let t = score_scale.at(score);
                    (colour::SCORE.hex(t), wmin + (wmax - wmin) * t, String::new())
                };
                let _ = write!(
                    s,
                    "<line class=\"half{}\" x1=\"{}\" y1=\"{}\" x2=\"{}\" y2=\"{}\" stroke=\"{stroke}\" stroke-width=\"{}\"{dash}/>",
                    if zero { " zero" } else { "" },
                    px(start.0),
                    px(start.1),
                    px(end.0),
                    px(end.1),
                    px(w)
                );
            }
            if flagged(e) {
                let h = (dpx * 0.09).clamp(3.0, 9.0);
                s.push_str(&verdict_mark(e.verdict, mx, my, h));
                // The score beside the mark, offset across the edge so it never sits on it.
                let (nx, ny) = (-uy, ux);
                let off = h + 4.0 + (dpx * 0.06).clamp(4.0, 9.0);
                let _ = write!(
                    s,
                    "<text class=\"value\" x=\"{}\" y=\"{}\" {FONT} font-size=\"{}\" font-weight=\"bold\" text-anchor=\"middle\" fill=\"#1a1a1a\" stroke=\"#ffffff\" stroke-width=\"3\" paint-order=\"stroke\">{}</text>",
                    px(mx + nx * off),
                    px(my + ny * off + 4.0),
                    px((dpx * 0.1).clamp(8.0, 12.0)),
                    escape(&pm(e.score_tvd_per_layer))
                );
            }
        }
        s.push_str("</g>\n");
    }
    s.push_str("</g>\n");

    s.push_str(&gate_arcs(r, &index, &|i| at(i), &score_scale, (wmin, wmax), dpx));

    // Qubits.
    let slack = qubit_slack(r);
    let qtop_pm = nice_ceil(slack.values().map(|q| q.weighted * 1e3).fold(0.0, f64::max));
    let longest = ids.iter().map(|q| q.chars().count()).max().unwrap_or(1) as f64;
    let font = (dpx * 0.2).min(14.0).min(2.0 * node_r * 0.92 / (0.6 * longest));
    s.push_str("<g class=\"qubits\">\n");
    for (i, q) in ids.iter().enumerate() {
        let (x, y) = at(i);
        let (fill, title) = match slack.get(q.as_str()) {
            Some(qs) => {
                let c = colour::QUBIT.at(qs.weighted * 1e3 / qtop_pm);
                let worst = qs
                    .worst
                    .as_ref()
                    .map(|(k, v)| format!("; largest {k} {} x1e-3", pm(*v)))
                    .unwrap_or_default();
                (
                    c,
                    format!(
                        "{q}: intrinsic slack {} x1e-3 per operation (occurrence-weighted over {} one-qubit kinds{worst})",
                        pm(qs.weighted),
                        qs.kinds
                    ),
                )
            }
            None => ([255, 255, 255], format!("{q}: no one-qubit kinds in the audit")),
        };
        let _ = write!(
            s,
            "<g class=\"qubit\" data-qubit=\"{}\"><title>{}</title><circle cx=\"{}\" cy=\"{}\" r=\"{}\" fill=\"{}\" stroke=\"#3a3a3a\" stroke-width=\"{}\"/>",
            escape(q),
            escape(&title),
            px(x),
            px(y),
            px(node_r),
            colour::hex(fill),
            px((dpx * 0.02).clamp(0.5, 1.6))
        );
        if font >= 4.0 {
            let _ = write!(
                s,
                "<text x=\"{}\" y=\"{}\" {FONT} font-size=\"{}\" text-anchor=\"middle\" fill=\"{}\">{}</text>",
                px(x),
                px(y + font * 0.35),
                px(font),
                colour::ink_on(fill),
                escape(q)
            );
        }
        s.push_str("</g>\n");
    }
    s.push_str("</g>\n");

    // Legend.
    let lx = legend_x;
    let mut ly = top - margin + 10.0;
    let bar_w = 200.0;
    s.push_str("<g class=\"legend\">\n");
    s.push_str(&text(
        lx,
        ly,
        12.0,
        "start",
        " font-weight=\"bold\"",
        "Half-edge: X(victim <- aggressor)",
    ));
    ly += 15.0;
    s.push_str(&text(lx, ly, 11.0, "start", "", "x1e-3 TVD per layer (width and colour)"));
    ly += if score_scale.threshold_at().is_some() { 24.0 } else { 10.0 };
    let (lw0, lw1) = (3.0, 14.0);
    let _ = writeln!(
        s,
        "<path d=\"M{x0} {a}L{x1} {b}L{x1} {c}L{x0} {d}Z\" fill=\"url(#lay-ramp)\" stroke=\"#666666\" stroke-width=\"0.6\"/>",
        x0 = px(lx),
        x1 = px(lx + bar_w),
        a = px(ly + lw1 / 2.0 - lw0 / 2.0),
        b = px(ly),
        c = px(ly + lw1),
        d = px(ly + lw1 / 2.0 + lw0 / 2.0)
    );
    for v in score_scale.ticks() {
        let x = lx + bar_w * score_scale.at_per_mille(v);
        let _ = writeln!(
            s,
            "<line x1=\"{}\" y1=\"{}\" x2=\"{}\" y2=\"{}\" stroke=\"#333333\" stroke-width=\"0.8\"/>",
            px(x),
            px(ly + lw1),
            px(x),
            px(ly + lw1 + 4.0)
        );
        s.push_str(&text(x, ly + lw1 + 16.0, 11.0, "middle", " class=\"tick\"", &log_label(v)));
    }
    if let Some(t) = score_scale.threshold_at() {
        let x = lx + bar_w * t;
        let _ = writeln!(
            s,
            "<g class=\"threshold\"><line x1=\"{}\" y1=\"{}\" x2=\"{}\" y2=\"{}\" stroke=\"#c0392b\" stroke-width=\"2\"/>{}</g>",
            px(x),
            px(ly - 4.0),
            px(x),
            px(ly + lw1 + 2.0),
            text(x, ly - 7.0, 10.0, "middle", "", &format!("action threshold {}", pm(score_scale.threshold_per_mille / 1e3)))
        );
    }
    ly += lw1 + 30.0;
    s.push_str(&text(
        lx,
        ly,
        10.0,
        "start",
        "",
        "logarithmic; flagged pairs are labelled with their score",
    ));
    ly += 18.0;
    let _ = writeln!(
        s,
        "<line x1=\"{}\" y1=\"{}\" x2=\"{}\" y2=\"{}\" stroke=\"#a0a0a0\" stroke-width=\"1.5\" stroke-dasharray=\"4.5 3.5\"/>",
        px(lx),
        px(ly - 4.0),
        px(lx + 40.0),
        px(ly - 4.0)
    );
    s.push_str(&text(lx + 48.0, ly, 11.0, "start", " class=\"zero-key\"", "score exactly 0"));
    if r.gates.pairs.iter().any(|e| e.score_tvd_per_layer > 0.0) {
        ly += 20.0;
        let _ = writeln!(
            s,
            "<path d=\"M{} {}Q{} {} {} {}\" fill=\"none\" stroke=\"#555555\" stroke-width=\"1.5\" stroke-dasharray=\"6 2.5\"/>",
            px(lx),
            px(ly - 2.0),
            px(lx + 20.0),
            px(ly - 12.0),
            px(lx + 40.0),
            px(ly - 2.0)
        );
        s.push_str(&text(
            lx + 48.0,
            ly,
            11.0,
            "start",
            " class=\"gate-key\"",
            "gate pair, arrow at the victim gate or qubit",
        ));
    }
    ly += 26.0;
    let (m, next) = mark_legend(lx, ly);
    s.push_str(&m);
    ly = next + 16.0;
    s.push_str(&text(lx, ly, 12.0, "start", " font-weight=\"bold\"", "Qubit: intrinsic slack"));
    ly += 15.0;
    s.push_str(&text(lx, ly, 11.0, "start", "", "x1e-3 TVD per operation, occurrence-weighted"));
    ly += 8.0;
    let _ = writeln!(
        s,
        "<rect x=\"{}\" y=\"{}\" width=\"{}\" height=\"12\" fill=\"url(#lay-qramp)\" stroke=\"#666666\" stroke-width=\"0.6\"/>",
        px(lx),
        px(ly),
        px(bar_w)
    );
    let (qv, qstep) = ticks(qtop_pm);
    for v in qv {
        let x = lx + bar_w * v / qtop_pm;
        let _ = writeln!(
            s,
            "<line x1=\"{}\" y1=\"{}\" x2=\"{}\" y2=\"{}\" stroke=\"#333333\" stroke-width=\"0.8\"/>",
            px(x),
            px(ly + 12.0),
            px(x),
            px(ly + 16.0)
        );
        s.push_str(&text(x, ly + 28.0, 11.0, "middle", " class=\"tick\"", &tick_label(v, qstep)));
    }
    s.push_str("</g>\n</svg>\n");
    s
}

/// The gate pairs with a positive score as arcs between the units' centres (a coupler's
/// midpoint, or a qubit), bowed to one side so that they do not lie on the couplers, coloured
/// and sized by the pair's score like the half-edges, with an arrowhead at the victim of the
/// leading direction. Flagged pairs carry their verdict mark at the arc's middle.
fn gate_arcs(
    r: &AuditReport,
    index: &HashMap<&str, usize>,
    at: &dyn Fn(usize) -> (f64, f64),
    scale: &ScoreScale,
    (wmin, wmax): (f64, f64),
    dpx: f64,
) -> String {
    let centre = |unit: &str| -> Option<(f64, f64)> {
        match unit.split_once('-') {
            Some((a, b)) if index.contains_key(a) && index.contains_key(b) => {
                let (p, q) = (at(index[a]), at(index[b]));
                Some(((p.0 + q.0) / 2.0, (p.1 + q.1) / 2.0))
            }
            _ => index.get(unit).map(|&i| at(i)),
        }
    };
    let mut pairs: Vec<&GatePairReport> =
        r.gates.pairs.iter().filter(|e| e.score_tvd_per_layer > 0.0).collect();
    if pairs.is_empty() {
        return String::new();
    }
    pairs.sort_by(|a, b| a.score_tvd_per_layer.total_cmp(&b.score_tvd_per_layer));
    let mut s = String::from("<g class=\"gate-pairs\">\n");
    for e in pairs {
        let (Some(v), Some(g)) = (centre(&e.victim), centre(&e.aggressor)) else { continue };
        let (dx, dy) = (v.0 - g.0, v.1 - g.1);
        let len = (dx * dx + dy * dy).sqrt();
        if len < 1.0 {
            continue;
        }
        // Control point off the chord's middle, a third of its length to the side.
        let (mx, my) = ((v.0 + g.0) / 2.0 - dy / 3.0, (v.1 + g.1) / 2.0 + dx / 3.0);
        let t = scale.at(e.score_tvd_per_layer);
        let (stroke, w) = (colour::SCORE.hex(t), wmin + (wmax - wmin) * t);
        // Arrowhead at the victim along the curve's end tangent (control point to victim).
        let (tx, ty) = (v.0 - mx, v.1 - my);
        let tl = (tx * tx + ty * ty).sqrt().max(1e-9);
        let (ux, uy) = (tx / tl, ty / tl);
        let head = (dpx * 0.08).clamp(4.0, 10.0) + w;
        let tip = (v.0 - ux * dpx * 0.05, v.1 - uy * dpx * 0.05);
        let base = (tip.0 - ux * head, tip.1 - uy * head);
        let (nx, ny) = (-uy * head * 0.5, ux * head * 0.5);
        let _ = write!(
            s,
            "<g class=\"gate-pair\" data-victim=\"{}\" data-aggressor=\"{}\" data-verdict=\"{}\"><title>{}</title><path d=\"M{} {}Q{} {} {} {}\" fill=\"none\" stroke=\"{stroke}\" stroke-width=\"{}\" stroke-dasharray=\"{} {}\" stroke-linecap=\"round\"/><path d=\"M{} {}L{} {}L{} {}Z\" fill=\"{stroke}\"/>",
            escape(&e.victim),
            escape(&e.aggressor),
            e.verdict.word(),
            escape(&gate_pair_title(e)),
            px(g.0),
            px(g.1),
            px(mx),
            px(my),
            px(base.0),
            px(base.1),
            px(w),
            px(w * 4.0),
            px(w * 1.5),
            px(tip.0),
            px(tip.1),
            px(base.0 + nx),
            px(base.1 + ny),
            px(base.0 - nx),
            px(base.1 - ny)
        );
        if e.verdict != Verdict::Clean {
            // The curve's middle: (g + 2 m + v) / 4 for a quadratic Bezier at t = 1/2.
            let (cx, cy) = ((g.0 + 2.0 * mx + v.0) / 4.0, (g.1 + 2.0 * my + v.1) / 4.0);
            s.push_str(&verdict_mark(e.verdict, cx, cy, (dpx * 0.09).clamp(3.0, 9.0)));
        }
        s.push_str("</g>\n");
    }
    s.push_str("</g>\n");
    s
}

fn gate_pair_title(e: &GatePairReport) -> String {
    let unit = |u: &str| {
        if u == e.a {
            crate::report::terminal::unit_text(&e.a, e.a_gate.as_deref())
        } else {
            crate::report::terminal::unit_text(&e.b, e.b_gate.as_deref())
        }
    };
    format!(
        "gate pair {} <- {}: {} (score {} x1e-3 per layer; {}); {}",
        unit(&e.victim),
        unit(&e.aggressor),
        e.verdict.word(),
        pm(e.score_tvd_per_layer),
        interval_words(&e.confidence),
        e.reason
    )
}

fn edge_title(e: &EdgeReport) -> String {
    let mut t = format!(
        "{a}-{b}{}: {} (score {} x1e-3 per layer; {a} <- {b} {}, {b} <- {a} {}); {}",
        if e.coupled { "" } else { " (not coupled)" },
        e.verdict.word(),
        pm(e.score_tvd_per_layer),
        pm(e.a_from_b_tvd_per_layer),
        pm(e.b_from_a_tvd_per_layer),
        interval_words(&e.confidence),
        a = e.a,
        b = e.b,
    );
    if !e.reason.is_empty() {
        let _ = write!(t, "; {}", e.reason);
    }
    t
}
