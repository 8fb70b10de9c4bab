//! Two audits side by side: per edge and per qubit, the change of the unlimited-shot
//! estimate from A to B, an interval for it, and whether it improved, got worse or stayed
//! within noise. Estimates, not scores, are compared: a score allows for its own audit's shot
//! noise, so two audits with different shot counts would differ in score for that alone.
//!
//! Intervals are basic bootstrap intervals for the difference, 2 d - quantiles of the
//! replicate differences (Davison & Hinkley, Bootstrap Methods and their Application, 1997,
//! ch. 5, eq. 5.6), from the two audits' stored replicate estimates: replicate i of A paired
//! with replicate i of B when both audits ran the same number, otherwise every difference
//! of an A replicate and a B replicate (the two bootstrap distributions taken as
//! independent). Quantiles are Hyndman & Fan (1996) type 7. Without replicates an edge only
//! counts as changed when the difference exceeds the larger detection limit.

use std::collections::{BTreeMap, HashMap};
use std::fmt::Write as _;

use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

use crate::error::{Error, Result};
use crate::report::terminal::{
    self, columns, number, per_mille, push_row, text, verdict_colour, Style, TextCell,
};
use crate::report::{AuditReport, Confidence, EdgeReport, OccurrenceConfidence, Verdict, CAUTION};

/// Version of the `compare.json` format written by this build (3: audit labels and creation
/// times, and warnings about layouts that differ).
pub const SCHEMA: u32 = 3;

/// Validated settings of a comparison.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct CompareOptions {
    /// Two-sided interval level, strictly between 0 and 1.
    level: f64,
}

impl CompareOptions {
    /// Settings at an interval level; refused unless 0 < level < 1.
    pub fn new(level: f64) -> Result<CompareOptions> {
        if level.is_finite() && level > 0.0 && level < 1.0 {
            Ok(CompareOptions { level })
        } else {
            Err(Error::Usage(format!(
                "--level {level} is not valid: give a two-sided level between 0 and 1, e.g. 0.95"
            )))
        }
    }

    /// The interval level.
    pub fn level(&self) -> f64 {
        self.level
    }
}

/// How B compares with A.
#[derive(Clone, Copy, Debug, Serialize, Deserialize, PartialEq, Eq, JsonSchema)]
#[serde(rename_all = "kebab-case")]
pub enum Change {
    /// B is lower: the interval lies entirely below zero.
    Improved,
    /// B is higher: the interval lies entirely above zero.
    Worse,
    /// The interval contains zero.
    Unchanged,
}

impl Change {
    /// The word in tables.
    pub fn word(self) -> &'static str {
        match self {
            Change::Improved => "improved",
            Change::Worse => "worse",
            Change::Unchanged => "unchanged",
        }
    }
}

/// What a change rests on.
#[derive(Clone, Copy, Debug, Serialize, Deserialize, PartialEq, Eq, JsonSchema)]
#[serde(rename_all = "kebab-case")]
pub enum Basis {
    /// Basic bootstrap interval from replicate i of A paired with replicate i of B.
    PairedBootstrap,
    /// Basic bootstrap interval from all differences of an A and a B replicate.
    IndependentBootstrap,
    /// No replicates: changed only when the difference exceeds the larger detection limit.
    DetectionLimit,
    /// No replicates and nothing to judge by: the estimate alone, no interval, no change.
    EstimateOnly,
    /// Present in one audit only.
    OneAuditOnly,
}

impl Basis {
    /// The word in files (as in JSON).
    pub fn word(self) -> &'static str {
        match self {
            Basis::PairedBootstrap => "paired-bootstrap",
            Basis::IndependentBootstrap => "independent-bootstrap",
            Basis::DetectionLimit => "detection-limit",
            Basis::EstimateOnly => "estimate-only",
            Basis::OneAuditOnly => "one-audit-only",
        }
    }
}

/// Where an edge or qubit appears.
#[derive(Clone, Copy, Debug, Serialize, Deserialize, PartialEq, Eq, JsonSchema)]
#[serde(rename_all = "kebab-case")]
pub enum Presence {
    /// In both audits.
    Both,
    /// Only in audit A.
    OnlyA,
    /// Only in audit B.
    OnlyB,
}

impl Presence {
    /// The word in files (as in JSON).
    pub fn word(self) -> &'static str {
        match self {
            Presence::Both => "both",
            Presence::OnlyA => "only-a",
            Presence::OnlyB => "only-b",
        }
    }
}

/// Sample quantiles (Hyndman & Fan 1996, type 7), shared with the bootstrap intervals.
pub use crate::confidence::intervals::quantile;

/// Basic bootstrap interval for the difference B - A (see the module header). `None` when
/// either side has no replicates.
pub fn difference_interval(
    estimate_a: f64,
    reps_a: &[f64],
    estimate_b: f64,
    reps_b: &[f64],
    level: f64,
) -> Option<(f64, f64, Basis)> {
    if reps_a.is_empty() || reps_b.is_empty() {
        return None;
    }
    let (mut diffs, basis) = if reps_a.len() == reps_b.len() {
        (
            reps_a.iter().zip(reps_b).map(|(a, b)| b - a).collect::<Vec<f64>>(),
            Basis::PairedBootstrap,
        )
    } else {
        let all = reps_a.iter().flat_map(|a| reps_b.iter().map(move |b| b - a)).collect();
        (all, Basis::IndependentBootstrap)
    };
    diffs.retain(|d| d.is_finite());
    if diffs.is_empty() {
        return None;
    }
    diffs.sort_by(f64::total_cmp);
    let d = estimate_b - estimate_a;
    let tail = (1.0 - level) / 2.0;
    let low = 2.0 * d - quantile(&diffs, 1.0 - tail);
    let high = 2.0 * d - quantile(&diffs, tail);
    Some((low, high, basis))
}

/// The change an interval shows: improved when entirely below zero, worse when entirely
/// above, unchanged when it contains zero.
pub fn change_of(low: f64, high: f64) -> Change {
    if high < 0.0 {
        Change::Improved
    } else if low > 0.0 {
        Change::Worse
    } else {
        Change::Unchanged
    }
}

/// A difference B - A with what it rests on.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq, JsonSchema)]
pub struct Difference {
    /// B - A; null when the item is in one audit only.
    pub estimate: Option<f64>,
    /// Lower end of the interval; null without replicates.
    pub low: Option<f64>,
    /// Upper end of the interval; null without replicates.
    pub high: Option<f64>,
    /// What the verdict rests on.
    pub basis: Basis,
    /// The verdict; null when there is nothing to judge by.
    pub change: Option<Change>,
}

fn replicates(c: &Option<Confidence>) -> &[f64] {
    c.as_ref().map_or(&[], |c| c.replicates_tvd_per_layer.as_slice())
}

fn occurrence_replicates(c: &Option<OccurrenceConfidence>) -> &[f64] {
    c.as_ref().map_or(&[], |c| c.replicates_tvd_per_occurrence.as_slice())
}

/// The difference of two estimates: bootstrap when both have replicates, else the
/// detection-limit rule when `limit` is positive, else the estimate only.
fn difference(
    a: f64,
    reps_a: &[f64],
    b: f64,
    reps_b: &[f64],
    limit: f64,
    level: f64,
) -> Difference {
    let d = b - a;
    match difference_interval(a, reps_a, b, reps_b, level) {
        Some((low, high, basis)) => Difference {
            estimate: Some(d),
            low: Some(low),
            high: Some(high),
            basis,
            change: Some(change_of(low, high)),
        },
        None if limit > 0.0 => {
            // Conservative: a change smaller than what either audit could detect is noise.
            let change = if d < -limit {
                Change::Improved
            } else if d > limit {
                Change::Worse
            } else {
                Change::Unchanged
            };
            Difference {
                estimate: Some(d),
                low: None,
                high: None,
                basis: Basis::DetectionLimit,
                change: Some(change),
            }
        }
        None => Difference {
            estimate: Some(d),
            low: None,
            high: None,
            basis: Basis::EstimateOnly,
            change: None,
        },
    }
}

fn one_only() -> Difference {
    Difference { estimate: None, low: None, high: None, basis: Basis::OneAuditOnly, change: None }
}

/// One audit as the comparison names it.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq, JsonSchema)]
pub struct AuditSide {
    /// The audit file as given.
    pub path: String,
    /// The audit's label (`audit --label`), when it has one.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub label: Option<String>,
    /// When the audit was written (RFC 3339 UTC), when recorded.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub created: Option<String>,
    /// Its layout name.
    pub layout: String,
    /// Bootstrap replicates it ran (0 = none).
    pub replicates: usize,
}

/// One neighbour pair in the comparison.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq, JsonSchema)]
pub struct EdgeChange {
    /// First qubit id (as in A when in both).
    pub a: String,
    /// Second qubit id.
    pub b: String,
    /// Where the edge appears.
    pub presence: Presence,
    /// Edge estimate in A, TVD per layer.
    pub estimate_a_tvd_per_layer: Option<f64>,
    /// Edge estimate in B, TVD per layer.
    pub estimate_b_tvd_per_layer: Option<f64>,
    /// Verdict in A.
    pub verdict_a: Option<Verdict>,
    /// Verdict in B.
    pub verdict_b: Option<Verdict>,
    /// B - A, TVD per layer, with its interval and verdict.
    pub difference_tvd_per_layer: Difference,
}

/// One qubit's intrinsic slack in the comparison: the occurrence-weighted mean over the
/// qubit's one-qubit kinds (gates and idle), TVD per occurrence.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq, JsonSchema)]
pub struct QubitChange {
    /// Qubit id.
    pub qubit: String,
    /// Where the qubit appears.
    pub presence: Presence,
    /// Intrinsic estimate in A (unlimited-shot), TVD per occurrence.
    pub intrinsic_a_tvd_per_occurrence: Option<f64>,
    /// Intrinsic estimate in B (unlimited-shot), TVD per occurrence.
    pub intrinsic_b_tvd_per_occurrence: Option<f64>,
    /// B - A, TVD per occurrence, with its interval and verdict ("no interval" when either
    /// audit lacks intrinsic replicates).
    pub difference_tvd_per_occurrence: Difference,
}

/// What `compare.json` holds.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq, JsonSchema)]
pub struct CompareReport {
    /// Format version, [`SCHEMA`].
    pub schema: u32,
    /// The slackmap version that wrote the file.
    pub tool_version: String,
    /// The caution that slack names no mechanism.
    pub caution: String,
    /// The earlier (or first) audit.
    pub a: AuditSide,
    /// The later (or second) audit; differences are B - A.
    pub b: AuditSide,
    /// Two-sided interval level.
    pub level: f64,
    /// What the reader should know about the bases used, in words.
    pub notes: Vec<String>,
    /// Differences between the two audits' layouts that make some rows incomparable (other
    /// qubits or neighbour pairs, another layout name); empty when the layouts agree.
    #[serde(default)]
    pub warnings: Vec<String>,
    /// Every neighbour pair of either audit: A's order, then B-only pairs.
    pub edges: Vec<EdgeChange>,
    /// Every qubit with intrinsic slack in either audit.
    pub qubits: Vec<QubitChange>,
    /// Drawing positions by qubit id (B's layout first, then A's), for the map.
    pub positions: BTreeMap<String, [f64; 2]>,
}

fn key(a: &str, b: &str) -> (String, String) {
    if a <= b {
        (a.to_string(), b.to_string())
    } else {
        (b.to_string(), a.to_string())
    }
}

struct QubitSlack {
    value: f64,
    replicates: Vec<f64>,
}

/// Occurrence-weighted intrinsic slack per qubit, with per-replicate values when every kind
/// of the qubit carries the same number of replicates.
fn intrinsic_per_qubit(r: &AuditReport) -> BTreeMap<String, QubitSlack> {
    let mut groups: BTreeMap<String, Vec<&crate::report::IntrinsicReport>> = BTreeMap::new();
    for k in r.intrinsic.iter().filter(|k| k.qubits.len() == 1) {
        groups.entry(k.qubits[0].clone()).or_default().push(k);
    }
    groups
        .into_iter()
        .map(|(q, kinds)| {
            let total: u64 = kinds.iter().map(|k| k.occurrences).sum();
            let weight = |k: &crate::report::IntrinsicReport| {
                if total > 0 {
                    k.occurrences as f64 / total as f64
                } else {
                    1.0 / kinds.len() as f64
                }
            };
            let value = kinds.iter().map(|k| weight(k) * k.estimate_tvd_per_occurrence).sum();
            let n = occurrence_replicates(&kinds[0].confidence).len();
            let same =
                n > 0 && kinds.iter().all(|k| occurrence_replicates(&k.confidence).len() == n);
            let reps = if same {
                (0..n)
                    .map(|i| {
                        kinds
                            .iter()
                            .map(|k| weight(k) * occurrence_replicates(&k.confidence)[i])
                            .sum()
                    })
                    .collect()
            } else {
                Vec::new()
            };
            (q, QubitSlack { value, replicates: reps })
        })
        .collect()
}

fn side(r: &AuditReport, path: &str) -> AuditSide {
    AuditSide {
        path: path.to_string(),
        label: r.label.clone(),
        created: r.created.clone(),
        layout: r.layout.name.clone(),
        replicates: r.parameters.replicates,
    }
}

/// What differs between two audits' layouts, in words (empty when nothing does).
fn layout_warnings(a: &AuditReport, b: &AuditReport) -> Vec<String> {
    let mut w = Vec::new();
    if a.layout.name != b.layout.name {
        w.push(format!(
            "the audits are of different layouts ('{}' and '{}'): edges are matched by qubit names",
            a.layout.name, b.layout.name
        ));
    }
    let set = |r: &AuditReport| {
        r.layout.qubits.iter().cloned().collect::<std::collections::BTreeSet<_>>()
    };
    let (qa, qb) = (set(a), set(b));
    if qa != qb {
        let only = |x: &std::collections::BTreeSet<String>,
                    y: &std::collections::BTreeSet<String>| {
            let v: Vec<&String> = x.difference(y).collect();
            let shown: Vec<&str> = v.iter().take(8).map(|s| s.as_str()).collect();
            format!(
                "{}{}",
                shown.join(", "),
                if v.len() > 8 { format!(" and {} more", v.len() - 8) } else { String::new() }
            )
        };
        w.push(format!(
            "the qubits differ: {} only in A, {} only in B",
            if qa.difference(&qb).next().is_some() { only(&qa, &qb) } else { "none".into() },
            if qb.difference(&qa).next().is_some() { only(&qb, &qa) } else { "none".into() }
        ));
    }
    let edges = |r: &AuditReport| {
        r.edges.iter().map(|e| key(&e.a, &e.b)).collect::<std::collections::BTreeSet<_>>()
    };
    let (ea, eb) = (edges(a), edges(b));
    if ea != eb {
        w.push(format!(
            "the neighbour pairs differ: {} only in A, {} only in B, {} in both; only those in both are compared",
            ea.difference(&eb).count(),
            eb.difference(&ea).count(),
            ea.intersection(&eb).count()
        ));
    }
    w
}

/// Compares audit B with audit A. Prints nothing, reads nothing. Refuses two audits that
/// share no neighbour pair (nothing to compare); differing layouts are compared where they
/// overlap and listed in `warnings`.
pub fn compare(
    a: &AuditReport,
    a_path: &str,
    b: &AuditReport,
    b_path: &str,
    opt: &CompareOptions,
) -> Result<CompareReport> {
    let level = opt.level;
    let warnings = layout_warnings(a, b);
    {
        let keys: std::collections::HashSet<(String, String)> =
            a.edges.iter().map(|e| key(&e.a, &e.b)).collect();
        if !b.edges.is_empty()
            && !a.edges.is_empty()
            && !b.edges.iter().any(|e| keys.contains(&key(&e.a, &e.b)))
        {
            return Err(Error::Usage(format!(
                "{a_path} (layout '{}') and {b_path} (layout '{}') share no neighbour pair: nothing to compare. Compare audits of the same chip (the same qubit names)",
                a.layout.name, b.layout.name
            )));
        }
    }
    let b_edges: HashMap<(String, String), &EdgeReport> =
        b.edges.iter().map(|e| (key(&e.a, &e.b), e)).collect();
    let a_keys: std::collections::HashSet<(String, String)> =
        a.edges.iter().map(|e| key(&e.a, &e.b)).collect();
    let mut edges = Vec::new();
    for ea in &a.edges {
        let change = match b_edges.get(&key(&ea.a, &ea.b)) {
            Some(eb) => EdgeChange {
                a: ea.a.clone(),
                b: ea.b.clone(),
                presence: Presence::Both,
                estimate_a_tvd_per_layer: Some(ea.estimate_tvd_per_layer),
                estimate_b_tvd_per_layer: Some(eb.estimate_tvd_per_layer),
                verdict_a: Some(ea.verdict),
                verdict_b: Some(eb.verdict),
                difference_tvd_per_layer: difference(
                    ea.estimate_tvd_per_layer,
                    replicates(&ea.confidence),
                    eb.estimate_tvd_per_layer,
                    replicates(&eb.confidence),
                    ea.detection_limit_tvd_per_layer.max(eb.detection_limit_tvd_per_layer),
                    level,
                ),
            },
            None => EdgeChange {
                a: ea.a.clone(),
                b: ea.b.clone(),
                presence: Presence::OnlyA,
                estimate_a_tvd_per_layer: Some(ea.estimate_tvd_per_layer),
                estimate_b_tvd_per_layer: None,
                verdict_a: Some(ea.verdict),
                verdict_b: None,
                difference_tvd_per_layer: one_only(),
            },
        };
        edges.push(change);
    }
    for eb in b.edges.iter().filter(|e| !a_keys.contains(&key(&e.a, &e.b))) {
        edges.push(EdgeChange {
            a: eb.a.clone(),
            b: eb.b.clone(),
            presence: Presence::OnlyB,
            estimate_a_tvd_per_layer: None,
            estimate_b_tvd_per_layer: Some(eb.estimate_tvd_per_layer),
            verdict_a: None,
            verdict_b: Some(eb.verdict),
            difference_tvd_per_layer: one_only(),
        });
    }

    let (qa, qb) = (intrinsic_per_qubit(a), intrinsic_per_qubit(b));
    let mut ids: Vec<&String> = a.layout.qubits.iter().filter(|q| qa.contains_key(*q)).collect();
    ids.extend(b.layout.qubits.iter().filter(|q| qb.contains_key(*q) && !qa.contains_key(*q)));
    ids.extend(
        qa.keys()
            .chain(qb.keys())
            .filter(|q| !a.layout.qubits.contains(q) && !b.layout.qubits.contains(q)),
    );
    ids.dedup();
    let qubits = ids
        .into_iter()
        .map(|q| {
            let (x, y) = (qa.get(q), qb.get(q));
            let presence = match (x, y) {
                (Some(_), Some(_)) => Presence::Both,
                (Some(_), None) => Presence::OnlyA,
                _ => Presence::OnlyB,
            };
            let diff = match (x, y) {
                (Some(x), Some(y)) => {
                    difference(x.value, &x.replicates, y.value, &y.replicates, 0.0, level)
                }
                _ => one_only(),
            };
            QubitChange {
                qubit: q.clone(),
                presence,
                intrinsic_a_tvd_per_occurrence: x.map(|s| s.value),
                intrinsic_b_tvd_per_occurrence: y.map(|s| s.value),
                difference_tvd_per_occurrence: diff,
            }
        })
        .collect();

    let mut notes = Vec::new();
    for (name, r) in [("A", a), ("B", b)] {
        if r.edges.iter().all(|e| replicates(&e.confidence).is_empty()) {
            notes.push(format!(
                "audit {name} has no bootstrap replicates: edge changes use the detection-limit rule \
                 (changed only when |B - A| exceeds the larger detection limit), no interval"
            ));
        }
        if r.intrinsic.iter().all(|k| occurrence_replicates(&k.confidence).is_empty()) {
            notes.push(format!(
                "audit {name} has no intrinsic-slack replicates: qubit changes are estimates only, no interval"
            ));
        }
    }
    let mut positions = BTreeMap::new();
    for r in [a, b] {
        for (id, p) in r.layout.qubits.iter().zip(&r.layout.positions) {
            if let Some(p) = p {
                positions.insert(id.clone(), *p);
            }
        }
    }
    Ok(CompareReport {
        schema: SCHEMA,
        tool_version: env!("CARGO_PKG_VERSION").to_string(),
        caution: CAUTION.to_string(),
        a: side(a, a_path),
        b: side(b, b_path),
        level,
        notes,
        warnings,
        edges,
        qubits,
        positions,
    })
}

// ---------------------------------------------------------------------------------------
// Renderers: terminal, compare.json, compare.csv, compare.svg
// ---------------------------------------------------------------------------------------

fn opt_pm(v: Option<f64>) -> String {
    v.map(per_mille).unwrap_or_else(|| "-".into())
}

fn signed_pm(v: f64) -> String {
    if v < 0.0 {
        format!("-{}", per_mille(-v))
    } else if v > 0.0 {
        format!("+{}", per_mille(v))
    } else {
        "0".into()
    }
}

fn interval_text(d: &Difference) -> String {
    match (d.low, d.high) {
        (Some(l), Some(h)) => format!("{} .. {}", signed_pm(l), signed_pm(h)),
        _ => match d.basis {
            Basis::DetectionLimit => "no interval (detection limit)".into(),
            Basis::OneAuditOnly => "-".into(),
            _ => "no interval".into(),
        },
    }
}

fn change_text(d: &Difference, presence: Presence) -> String {
    match (presence, d.change) {
        (Presence::OnlyA, _) => "only in A".into(),
        (Presence::OnlyB, _) => "only in B".into(),
        (_, Some(c)) => c.word().into(),
        (_, None) => "-".into(),
    }
}

fn verdict_text(v: Option<Verdict>, style: Style) -> TextCell {
    match v {
        Some(v) => terminal::verdict_cell(v, style),
        None => text("-"),
    }
}

fn change_cell(d: &Difference, presence: Presence, style: Style) -> TextCell {
    let colour = match d.change {
        Some(Change::Worse) if presence == Presence::Both => verdict_colour(Verdict::Recalibrate),
        Some(Change::Improved) if presence == Presence::Both => {
            Some((comfy_table::Color::Green, false))
        }
        _ => None,
    };
    TextCell {
        text: change_text(d, presence),
        right: false,
        colour: colour.filter(|_| style.color),
    }
}

fn side_words(s: &AuditSide) -> String {
    match &s.label {
        Some(l) => format!("{} \"{l}\", {}", s.path, s.layout),
        None => format!("{}, {}", s.path, s.layout),
    }
}

/// The terminal report: edges that changed, were flagged or appear in one audit only, then
/// the qubits. Values in 1e-3 per layer (edges) or per occurrence (qubits). Tables fit the
/// style's width.
pub fn terminal(r: &CompareReport, max_rows: usize, style: Style) -> String {
    let mut out = String::new();
    let prose = |out: &mut String, s: &str| out.push_str(&terminal::wrap(s, style.width, "  "));
    let count =
        |c: Change| r.edges.iter().filter(|e| e.difference_tvd_per_layer.change == Some(c)).count();
    prose(
        &mut out,
        &format!(
            "B ({}) against A ({}) at level {}: {} edges improved, {} worse, {} unchanged, {} in one audit only.",
            side_words(&r.b),
            side_words(&r.a),
            r.level,
            count(Change::Improved),
            count(Change::Worse),
            count(Change::Unchanged),
            r.edges.iter().filter(|e| e.presence != Presence::Both).count()
        ),
    );
    for w in &r.warnings {
        prose(&mut out, &format!("warning: {w}"));
    }
    for n in &r.notes {
        prose(&mut out, &format!("note: {n}"));
    }
    let interesting = |e: &&EdgeChange| {
        e.presence != Presence::Both
            || matches!(e.difference_tvd_per_layer.change, Some(Change::Improved | Change::Worse))
            || e.verdict_a.is_some_and(|v| v != Verdict::Clean)
            || e.verdict_b.is_some_and(|v| v != Verdict::Clean)
    };
    let shown: Vec<&EdgeChange> = r.edges.iter().filter(interesting).take(max_rows).collect();
    let mut cols = columns(&[
        ("edge", 0),
        ("estimate A", 0),
        ("estimate B", 0),
        ("B-A", 0),
        ("interval", 1),
        ("verdict A", 2),
        ("verdict B", 2),
        ("change", 0),
    ]);
    for e in &shown {
        let d = &e.difference_tvd_per_layer;
        let cells = [
            text(format!("{}-{}", e.a, e.b)),
            number(opt_pm(e.estimate_a_tvd_per_layer)),
            number(opt_pm(e.estimate_b_tvd_per_layer)),
            number(d.estimate.map(signed_pm).unwrap_or_else(|| "-".into())),
            number(interval_text(d)),
            verdict_text(e.verdict_a, style),
            verdict_text(e.verdict_b, style),
            change_cell(d, e.presence, style),
        ];
        push_row(&mut cols, cells);
    }
    out.push('\n');
    out.push_str(&terminal::heading(
        "Edges that changed, were flagged, or are in one audit only (unlimited-shot estimates, x1e-3 TVD per layer)",
        style,
    ));
    if !shown.is_empty() {
        terminal::fitted_table(cols, style, "compare.csv", &mut out);
    }
    let hidden = r.edges.len() - shown.len();
    if hidden > 0 {
        let _ = writeln!(
            out,
            "{hidden} more edges (clean in both, unchanged or not shown) are in compare.csv."
        );
    }
    let mut q =
        columns(&[("qubit", 0), ("A", 0), ("B", 0), ("B-A", 0), ("interval", 1), ("change", 0)]);
    for c in r.qubits.iter().take(max_rows) {
        let d = &c.difference_tvd_per_occurrence;
        let cells = [
            text(c.qubit.as_str()),
            number(opt_pm(c.intrinsic_a_tvd_per_occurrence)),
            number(opt_pm(c.intrinsic_b_tvd_per_occurrence)),
            number(d.estimate.map(signed_pm).unwrap_or_else(|| "-".into())),
            number(interval_text(d)),
            change_cell(d, c.presence, style),
        ];
        push_row(&mut q, cells);
    }
    let _ = writeln!(out);
    out.push_str(&terminal::heading(
        "Intrinsic slack per qubit: unlimited-shot estimate, occurrence-weighted over its one-qubit kinds, x1e-3 TVD per occurrence",
        style,
    ));
    terminal::fitted_table(q, style, "compare.csv", &mut out);
    if r.qubits.len() > max_rows {
        let _ = writeln!(out, "{} more qubits are in compare.csv.", r.qubits.len() - max_rows);
    }
    out
}

/// `compare.csv`: one row per edge, then one per qubit, full precision.
pub fn csv_bytes(r: &CompareReport) -> Vec<u8> {
    let mut w = csv::Writer::from_writer(Vec::new());
    // Names follow compare.json: `estimate_a`/`estimate_b` are `estimate_a_tvd_per_layer`
    // (edges) or `intrinsic_a_tvd_per_occurrence` (qubits) in the unit of column `unit`, and
    // `difference.*` the fields of the difference.
    let _ = w.write_record([
        "item",
        "a",
        "b",
        "presence",
        "unit",
        "estimate_a",
        "estimate_b",
        "difference.estimate",
        "difference.low",
        "difference.high",
        "difference.basis",
        "difference.change",
        "verdict_a",
        "verdict_b",
    ]);
    let f = |v: Option<f64>| v.map(crate::report::csv::num).unwrap_or_default();
    let verdict = |v: Option<Verdict>| v.map(|v| v.word().to_string()).unwrap_or_default();
    let word = |d: &Difference| d.change.map(|c| c.word().to_string()).unwrap_or_default();
    for e in &r.edges {
        let d = &e.difference_tvd_per_layer;
        let _ = w.write_record([
            "edge".to_string(),
            e.a.clone(),
            e.b.clone(),
            e.presence.word().to_string(),
            "tvd_per_layer".into(),
            f(e.estimate_a_tvd_per_layer),
            f(e.estimate_b_tvd_per_layer),
            f(d.estimate),
            f(d.low),
            f(d.high),
            d.basis.word().to_string(),
            word(d),
            verdict(e.verdict_a),
            verdict(e.verdict_b),
        ]);
    }
    for q in &r.qubits {
        let d = &q.difference_tvd_per_occurrence;
        let _ = w.write_record([
            "qubit".to_string(),
            q.qubit.clone(),
            String::new(),
            q.presence.word().to_string(),
            "tvd_per_occurrence".into(),
            f(q.intrinsic_a_tvd_per_occurrence),
            f(q.intrinsic_b_tvd_per_occurrence),
            f(d.estimate),
            f(d.low),
            f(d.high),
            d.basis.word().to_string(),
            word(d),
            String::new(),
            String::new(),
        ]);
    }
    w.into_inner().unwrap_or_default()
}

/// `compare.json`, pretty-printed.
pub fn json_bytes(r: &CompareReport) -> Vec<u8> {
    let mut v = serde_json::to_vec_pretty(r).unwrap_or_default();
    v.push(b'\n');
    v
}

const NEUTRAL: [f64; 3] = [242.0, 242.0, 242.0];
const BLUE: [f64; 3] = [38.0, 98.0, 168.0];
const RED: [f64; 3] = [187.0, 42.0, 52.0];

/// Diverging colour of t in [-1, 1]: blue (lower in B) through light grey to red.
fn diverging(t: f64) -> String {
    let t = if t.is_finite() { t.clamp(-1.0, 1.0) } else { 0.0 };
    let end = if t < 0.0 { BLUE } else { RED };
    let c: Vec<u8> =
        (0..3).map(|i| (NEUTRAL[i] + t.abs() * (end[i] - NEUTRAL[i])).round() as u8).collect();
    format!("#{:02x}{:02x}{:02x}", c[0], c[1], c[2])
}

fn xml(s: &str) -> String {
    s.replace('&', "&amp;").replace('<', "&lt;").replace('>', "&gt;").replace('"', "&quot;")
}

/// `compare.svg`: the chip at its positions, each neighbour pair drawn in the colour of
/// B - A on a diverging scale symmetric about zero (legend in 1e-3 per layer), with a
/// down-triangle on improved pairs, an up-triangle on worse ones, and dashed grey pairs
/// present in one audit only. Qubits without positions are placed on a circle.
pub fn svg(r: &CompareReport) -> String {
    let mut ids: Vec<String> = Vec::new();
    for e in &r.edges {
        for q in [&e.a, &e.b] {
            if !ids.contains(q) {
                ids.push(q.clone());
            }
        }
    }
    for q in &r.qubits {
        if !ids.contains(&q.qubit) {
            ids.push(q.qubit.clone());
        }
    }
    let all_placed = ids.iter().all(|q| r.positions.contains_key(q));
    let n = ids.len().max(1) as f64;
    let pos: HashMap<&str, [f64; 2]> = ids
        .iter()
        .enumerate()
        .map(|(i, q)| {
            let p = match (all_placed, r.positions.get(q)) {
                (true, Some(p)) => *p,
                _ => {
                    let t = std::f64::consts::TAU * i as f64 / n;
                    let rad = n / std::f64::consts::TAU;
                    [rad * t.cos(), rad * t.sin()]
                }
            };
            (q.as_str(), p)
        })
        .collect();
    let (mut x0, mut y0, mut x1, mut y1) = (f64::MAX, f64::MAX, f64::MIN, f64::MIN);
    for p in pos.values() {
        x0 = x0.min(p[0]);
        y0 = y0.min(p[1]);
        x1 = x1.max(p[0]);
        y1 = y1.max(p[1]);
    }
    if pos.is_empty() {
        (x0, y0, x1, y1) = (0.0, 0.0, 0.0, 0.0);
    }
    let unit = 90.0;
    let margin = 50.0;
    let width = ((x1 - x0) * unit + 2.0 * margin).max(360.0);
    let map_h = (y1 - y0) * unit + 2.0 * margin;
    let height = map_h + 110.0;
    let at = |q: &str| {
        let p = pos.get(q).copied().unwrap_or([x0, y0]);
        (margin + (p[0] - x0) * unit, 40.0 + margin + (p[1] - y0) * unit)
    };
    let scale = r
        .edges
        .iter()
        .filter_map(|e| e.difference_tvd_per_layer.estimate)
        .map(f64::abs)
        .filter(|v| v.is_finite())
        .fold(0.0, f64::max)
        .max(1e-4);
    let mut s = String::new();
    let _ = writeln!(
        s,
        "<svg xmlns=\"http://www.w3.org/2000/svg\" width=\"{width:.0}\" height=\"{height:.0}\" \
         viewBox=\"0 0 {width:.0} {height:.0}\" font-family=\"sans-serif\">"
    );
    let _ = writeln!(s, "<rect width=\"100%\" height=\"100%\" fill=\"#fcfcfa\"/>");
    let _ = writeln!(
        s,
        "<text x=\"12\" y=\"22\" font-size=\"14\" fill=\"#222\">Change of edge estimate, B ({}) minus A ({})</text>",
        xml(&r.b.layout),
        xml(&r.a.layout)
    );
    for e in &r.edges {
        let ((ax, ay), (bx, by)) = (at(&e.a), at(&e.b));
        let d = &e.difference_tvd_per_layer;
        let title = format!(
            "{}-{}: A {} B {} x1e-3 per layer, {}",
            e.a,
            e.b,
            opt_pm(e.estimate_a_tvd_per_layer),
            opt_pm(e.estimate_b_tvd_per_layer),
            change_text(d, e.presence)
        );
        match (e.presence, d.estimate) {
            (Presence::Both, Some(v)) => {
                // A darker underlay keeps near-zero pairs visible on the light background.
                let _ = writeln!(
                    s,
                    "<line x1=\"{ax:.1}\" y1=\"{ay:.1}\" x2=\"{bx:.1}\" y2=\"{by:.1}\" stroke=\"#b8b8b8\" \
                     stroke-width=\"10\" stroke-linecap=\"round\"/>"
                );
                let _ = writeln!(
                    s,
                    "<line x1=\"{ax:.1}\" y1=\"{ay:.1}\" x2=\"{bx:.1}\" y2=\"{by:.1}\" stroke=\"{}\" \
                     stroke-width=\"8\" stroke-linecap=\"round\"><title>{}</title></line>",
                    diverging(v / scale),
                    xml(&title)
                );
            }
            _ => {
                let _ = writeln!(
                    s,
                    "<line x1=\"{ax:.1}\" y1=\"{ay:.1}\" x2=\"{bx:.1}\" y2=\"{by:.1}\" stroke=\"#9a9a9a\" \
                     stroke-width=\"3\" stroke-dasharray=\"6 4\"><title>{}</title></line>",
                    xml(&title)
                );
                let label = if e.presence == Presence::OnlyA { "A only" } else { "B only" };
                let _ = writeln!(
                    s,
                    "<text x=\"{:.1}\" y=\"{:.1}\" font-size=\"9\" fill=\"#666\" text-anchor=\"middle\">{label}</text>",
                    (ax + bx) / 2.0,
                    (ay + by) / 2.0 - 6.0
                );
            }
        }
        let (mx, my) = ((ax + bx) / 2.0, (ay + by) / 2.0);
        let mark = match d.change {
            Some(Change::Improved) => Some((
                format!(
                    "{:.1},{:.1} {:.1},{:.1} {mx:.1},{:.1}",
                    mx - 7.0,
                    my - 5.0,
                    mx + 7.0,
                    my - 5.0,
                    my + 7.0
                ),
                BLUE,
            )),
            Some(Change::Worse) => Some((
                format!(
                    "{:.1},{:.1} {:.1},{:.1} {mx:.1},{:.1}",
                    mx - 7.0,
                    my + 5.0,
                    mx + 7.0,
                    my + 5.0,
                    my - 7.0
                ),
                RED,
            )),
            _ => None,
        };
        if let Some((points, _)) = mark {
            let _ = writeln!(s, "<polygon points=\"{points}\" fill=\"#ffffff\" stroke=\"#222\" stroke-width=\"1.5\"/>");
        }
    }
    for q in &ids {
        let (x, y) = at(q);
        let _ = writeln!(s, "<circle cx=\"{x:.1}\" cy=\"{y:.1}\" r=\"13\" fill=\"#ffffff\" stroke=\"#333\" stroke-width=\"1.5\"/>");
        let _ = writeln!(
            s,
            "<text x=\"{x:.1}\" y=\"{:.1}\" font-size=\"9\" text-anchor=\"middle\" fill=\"#222\">{}</text>",
            y + 3.0,
            xml(q)
        );
    }
    // Legend: a gradient bar symmetric about zero.
    let (lx, ly, lw) = (20.0, map_h + 60.0, 240.0);
    let _ = writeln!(
        s,
        "<defs><linearGradient id=\"diff\" x1=\"0\" x2=\"1\" y1=\"0\" y2=\"0\"><stop offset=\"0\" stop-color=\"{}\"/>\
         <stop offset=\"0.5\" stop-color=\"{}\"/><stop offset=\"1\" stop-color=\"{}\"/></linearGradient></defs>",
        diverging(-1.0),
        diverging(0.0),
        diverging(1.0)
    );
    let _ = writeln!(s, "<rect x=\"{lx}\" y=\"{ly:.1}\" width=\"{lw}\" height=\"12\" fill=\"url(#diff)\" stroke=\"#555\" stroke-width=\"0.5\"/>");
    for (frac, v) in [(0.0, -scale), (0.5, 0.0), (1.0, scale)] {
        let _ = writeln!(
            s,
            "<text x=\"{:.1}\" y=\"{:.1}\" font-size=\"10\" text-anchor=\"middle\" fill=\"#222\">{}</text>",
            lx + frac * lw,
            ly + 26.0,
            signed_pm(v)
        );
    }
    let _ = writeln!(
        s,
        "<text x=\"{lx}\" y=\"{:.1}\" font-size=\"10\" fill=\"#222\">B - A, x1e-3 TVD per layer: blue lower in B, \
         red higher</text>\n<text x=\"{lx}\" y=\"{:.1}\" font-size=\"10\" fill=\"#222\">down-triangle improved, \
         up-triangle worse (level {}); dashed: one audit only</text>",
        ly - 22.0,
        ly - 8.0,
        r.level
    );
    let _ = writeln!(s, "</svg>");
    s
}

/// Every file `compare` writes: `compare.json`, `compare.csv`, `compare.svg`.
pub fn files(r: &CompareReport) -> Vec<(String, Vec<u8>)> {
    vec![
        ("compare.json".into(), json_bytes(r)),
        ("compare.csv".into(), csv_bytes(r)),
        ("compare.svg".into(), svg(r).into_bytes()),
    ]
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    #[test]
    fn type_7_quantiles_match_known_values() {
        // Hyndman & Fan (1996) type 7 (R's default): on 1..=5, the 0.25 quantile is 2 and
        // the 0.1 quantile is 1.4.
        let x = [1.0, 2.0, 3.0, 4.0, 5.0];
        assert!((quantile(&x, 0.25) - 2.0).abs() < 1e-12);
        assert!((quantile(&x, 0.1) - 1.4).abs() < 1e-12);
        assert!((quantile(&x, 1.0) - 5.0).abs() < 1e-12);
    }

    #[test]
    fn the_basic_interval_undoes_a_pure_shift() {
        // Davison & Hinkley (1997) eq. 5.6: the basic interval is 2d - quantiles, so
        // replicates that sit a constant b above the estimate give an interval at d - b.
        let reps_a: Vec<f64> = (0..101).map(|i| 2e-3 + (i as f64 - 50.0) * 1e-5).collect();
        let reps_b: Vec<f64> = reps_a.iter().map(|a| a + 1e-3).collect();
        let (low, high, basis) = difference_interval(2e-3, &reps_a, 2e-3, &reps_b, 0.9).unwrap();
        assert_eq!(basis, Basis::PairedBootstrap);
        // Every replicate difference is +1e-3 while the estimate is 0: both ends at -1e-3.
        assert!((low + 1e-3).abs() < 1e-12 && (high + 1e-3).abs() < 1e-12);
    }

    #[test]
    fn unequal_counts_use_all_differences() {
        let a = [1e-3, 2e-3, 3e-3];
        let b = [1e-3, 2e-3];
        let (low, high, basis) = difference_interval(2e-3, &a, 1.5e-3, &b, 0.95).unwrap();
        assert_eq!(basis, Basis::IndependentBootstrap);
        // differences range over -2e-3 .. 1e-3; d = -0.5e-3.
        assert!(low >= 2.0 * -0.5e-3 - 1e-3 - 1e-12 && high <= 2.0 * -0.5e-3 + 2e-3 + 1e-12);
        assert!(low < high);
    }

    #[test]
    fn the_detection_limit_rule_is_conservative() {
        let d = difference(4e-3, &[], 1e-3, &[], 1e-3, 0.95);
        assert_eq!((d.basis, d.change), (Basis::DetectionLimit, Some(Change::Improved)));
        let d = difference(1.5e-3, &[], 1e-3, &[], 1e-3, 0.95);
        assert_eq!(d.change, Some(Change::Unchanged));
        let d = difference(1e-3, &[], 2e-3, &[], 0.0, 0.95);
        assert_eq!((d.basis, d.change), (Basis::EstimateOnly, None));
    }

    #[test]
    fn the_level_is_validated() {
        assert!(CompareOptions::new(0.95).is_ok());
        for bad in [0.0, 1.0, -0.2, f64::NAN, 95.0] {
            assert!(CompareOptions::new(bad).is_err(), "{bad}");
        }
    }

    proptest! {
        #[test]
        fn identical_replicates_give_an_interval_containing_zero(
            est in 0.0f64..1e-2,
            reps in proptest::collection::vec(0.0f64..1e-2, 1..60),
            level in 0.5f64..0.99,
        ) {
            let (low, high, _) = difference_interval(est, &reps, est, &reps, level).unwrap();
            prop_assert!(low <= 0.0 && high >= 0.0);
            prop_assert_eq!(change_of(low, high), Change::Unchanged);
        }

        #[test]
        fn intervals_are_ordered_and_widen_with_the_level(
            a in proptest::collection::vec(0.0f64..1e-2, 2..40),
            b in proptest::collection::vec(0.0f64..1e-2, 2..40),
        ) {
            let (l1, h1, _) = difference_interval(3e-3, &a, 2e-3, &b, 0.8).unwrap();
            let (l2, h2, _) = difference_interval(3e-3, &a, 2e-3, &b, 0.95).unwrap();
            prop_assert!(l1 <= h1 + 1e-15);
            prop_assert!(l2 <= l1 + 1e-15 && h2 >= h1 - 1e-15);
        }
    }

    #[test]
    fn diverging_colours_run_blue_grey_red() {
        assert_eq!(diverging(0.0), "#f2f2f2");
        assert_eq!(diverging(-1.0), "#2662a8");
        assert_eq!(diverging(1.0), "#bb2a34");
        assert_eq!(diverging(f64::NAN), "#f2f2f2");
    }
}
