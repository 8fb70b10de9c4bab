//! `audit.json`: the complete report, pretty-printed, every number at full precision; and its
//! reader, which checks that the file is consistent before anything is drawn from it.

use std::collections::HashSet;
use std::path::Path;

use super::{AuditReport, ReasonCode, Render};
use crate::error::{Error, Result};

/// Renders `audit.json`.
pub struct AuditJson;

impl Render for AuditJson {
    fn file_name(&self) -> &'static str {
        "audit.json"
    }

    fn render(&self, report: &AuditReport) -> Vec<u8> {
        let mut v = serde_json::to_vec_pretty(report).expect("report types always serialise");
        v.push(b'\n');
        v
    }
}

/// The largest `audit.json` read back (a 1,024-qubit audit is tens of MB; anything this large is
/// not an audit file, or a broken one).
pub const MAX_AUDIT_FILE_BYTES: u64 = 1 << 30;

/// The oldest `audit.json` schema this build reads.
pub const OLDEST_SCHEMA: u32 = 2;

/// Reads a saved `audit.json` back (for re-rendering and comparisons): schema 3, or schema 2
/// brought up to date (reason codes from the reason words). Refuses a file that is not
/// consistent (see [`check`]), naming the file and what is wrong.
pub fn read(path: &Path) -> Result<AuditReport> {
    let text = crate::files::read_text_capped(path, MAX_AUDIT_FILE_BYTES, "audit file")?;
    let bad = |e: serde_json::Error| {
        let line = (e.line() > 0).then_some(e.line());
        Error::input(path, line, format!("not a slackmap audit file: {e}"))
    };
    #[derive(serde::Deserialize)]
    struct Version {
        schema: u32,
    }
    let version: Version = serde_json::from_str(&text).map_err(bad)?;
    // The field at fault, as a path (`edges[0].p_value`), beside the line.
    let at_path = |e: serde_path_to_error::Error<serde_json::Error>| {
        let field = e.path().to_string();
        let inner = e.into_inner();
        let line = (inner.line() > 0).then_some(inner.line());
        Error::input(path, line, format!("not a slackmap audit file: {field}: {inner}"))
    };
    let report = match version.schema {
        super::SCHEMA => {
            let de = &mut serde_json::Deserializer::from_str(&text);
            serde_path_to_error::deserialize::<_, AuditReport>(de).map_err(at_path)?
        }
        2 => {
            let mut v: serde_json::Value = serde_json::from_str(&text).map_err(bad)?;
            if let Some(edges) = v.get_mut("edges").and_then(|e| e.as_array_mut()) {
                for e in edges {
                    let words = e.get("reason").and_then(|r| r.as_str()).unwrap_or("");
                    let code = ReasonCode::from_words(words).unwrap_or(ReasonCode::NoSlack);
                    e["reason_code"] = serde_json::Value::from(code.code());
                }
            }
            // Schema 2 wrote numbers without a finite value as null: an unidentified fitted
            // error rate, an unbounded detection limit.
            let word = |x: &mut serde_json::Value, field: &str, w: &str| {
                if x.get(field).is_some_and(|f| f.is_null()) {
                    x[field] = serde_json::Value::from(w);
                }
            };
            for list in ["edges", "directed"] {
                if let Some(items) = v.get_mut(list).and_then(|e| e.as_array_mut()) {
                    for x in items {
                        word(x, "detection_limit_tvd_per_layer", "unbounded");
                    }
                }
            }
            if let Some(kinds) = v.get_mut("intrinsic").and_then(|e| e.as_array_mut()) {
                for k in kinds {
                    word(k, "fitted_error_rate", "not-identified");
                }
            }
            // Schema 2 wrote intrinsic intervals under per-layer names.
            if let Some(kinds) = v.get_mut("intrinsic").and_then(|e| e.as_array_mut()) {
                for k in kinds {
                    let Some(c) = k.get_mut("confidence").and_then(|c| c.as_object_mut()) else {
                        continue;
                    };
                    for name in [
                        "low",
                        "high",
                        "upper_bound",
                        "lower_bound",
                        "median",
                        "replicates",
                        "score_replicates",
                    ] {
                        if let Some(x) = c.remove(&format!("{name}_tvd_per_layer")) {
                            c.insert(format!("{name}_tvd_per_occurrence"), x);
                        }
                    }
                }
            }
            let mut r: AuditReport = serde_path_to_error::deserialize(v).map_err(|e| {
                let field = e.path().to_string();
                Error::input(path, None, format!("not a slackmap audit file: {field}: {}", e.into_inner()))
            })?;
            r.schema = super::SCHEMA;
            r
        }
        other => {
            return Err(Error::input(
                path,
                None,
                format!(
                    "not a slackmap audit file this build reads: audit schema {other} (this build reads schemas {OLDEST_SCHEMA} to {})",
                    super::SCHEMA
                ),
            ))
        }
    };
    check(&report).map_err(|m| Error::input(path, None, format!("inconsistent audit: {m}")))?;
    Ok(report)
}

/// Checks that an audit is consistent: at least one qubit, no repeated qubit id, one position
/// entry per qubit, and couplers, edges, directed pairs, kinds and readout entries that name
/// only the layout's qubits; every edge has both directed entries. Returns what is wrong.
pub fn check(r: &AuditReport) -> std::result::Result<(), String> {
    let l = &r.layout;
    if l.qubits.is_empty() {
        return Err("the layout lists no qubits".into());
    }
    let mut ids: HashSet<&str> = HashSet::new();
    for q in &l.qubits {
        if !ids.insert(q.as_str()) {
            return Err(format!("qubit '{q}' is listed twice in layout.qubits"));
        }
    }
    if l.positions.len() != l.qubits.len() {
        return Err(format!(
            "layout.positions has {} entries for {} qubits (one entry, or null, per qubit)",
            l.positions.len(),
            l.qubits.len()
        ));
    }
    let known = |what: &str, q: &str| {
        if ids.contains(q) {
            Ok(())
        } else {
            Err(format!("{what} names qubit '{q}', which layout.qubits lacks"))
        }
    };
    for [a, b] in &l.couplers {
        known(&format!("coupler {a}-{b}"), a)?;
        known(&format!("coupler {a}-{b}"), b)?;
    }
    let mut directed: HashSet<(&str, &str)> = HashSet::new();
    for d in &r.directed {
        let what = format!("directed pair {}<-{}", d.victim, d.aggressor);
        known(&what, &d.victim)?;
        known(&what, &d.aggressor)?;
        directed.insert((d.victim.as_str(), d.aggressor.as_str()));
    }
    for e in &r.edges {
        let what = format!("edge {}-{}", e.a, e.b);
        known(&what, &e.a)?;
        known(&what, &e.b)?;
        if e.a == e.b {
            return Err(format!("{what} joins a qubit to itself"));
        }
        if !directed.contains(&(e.a.as_str(), e.b.as_str()))
            || !directed.contains(&(e.b.as_str(), e.a.as_str()))
        {
            return Err(format!(
                "{what} lacks its directed entries ({0}<-{1} and {1}<-{0})",
                e.a, e.b
            ));
        }
    }
    for k in &r.intrinsic {
        for q in &k.qubits {
            known(&format!("kind {}", k.kind), q)?;
        }
    }
    for q in &r.readout {
        known("a readout entry", &q.qubit)?;
    }
    Ok(())
}
