//! `audit.json`: the complete report, pretty-printed, every number at full precision.

use super::{AuditReport, Render};

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

/// Reads a saved `audit.json` back (for re-rendering and comparisons).
pub fn read(path: &std::path::Path) -> crate::Result<AuditReport> {
    let text = std::fs::read_to_string(path).map_err(|e| crate::Error::io(path, e))?;
    let report: AuditReport = serde_json::from_str(&text).map_err(|e| {
        crate::Error::input(path, Some(e.line()), format!("not a slackmap audit file: {e}"))
    })?;
    if report.schema != super::SCHEMA {
        return Err(crate::Error::input(
            path,
            None,
            format!(
                "audit schema {} is not supported (this build reads schema {})",
                report.schema,
                super::SCHEMA
            ),
        ));
    }
    Ok(report)
}
