//! Partial results of a sharded bootstrap (`audit --replicate-range A..B`) and their merge.
//!
//! A partial file holds the point-estimate report (identical in every shard: it depends on
//! the inputs and settings only), the shard's range and its raw replicate scores. Merging
//! checks that the parts belong to one run and cover 0..replicates exactly once, then
//! finishes the report as a single run would.

use serde::{Deserialize, Serialize};

use super::{BootstrapConfig, ReplicateScores, Resample};
use crate::error::{Error, Result};
use crate::report::{AuditReport, InputFile, RowReport};

/// The `format` field of every partial file.
pub const FORMAT: &str = "slackmap-partial";

/// Version of the partial-file layout written by this build.
pub const SCHEMA: u32 = 1;

/// The file name a shard writes inside its output folder.
pub const FILE_NAME: &str = "partial.json";

/// One shard's result: what `partial.json` holds.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct Partial {
    /// Always [`FORMAT`].
    pub format: String,
    /// Layout version, [`SCHEMA`].
    pub schema: u32,
    /// The slackmap version that wrote the file (merging needs the same version).
    pub tool_version: String,
    /// The input files and their SHA-256 digests (also inside `report`).
    pub inputs: Vec<InputFile>,
    /// Bootstrap replicates of the whole run.
    pub replicates: usize,
    /// Resampling scheme: `shots` or `circuits`.
    pub resample: String,
    /// Two-sided interval level.
    pub level: f64,
    /// The k of P(in top k).
    pub top_k: usize,
    /// This shard's replicates, [start, end).
    pub range: [usize; 2],
    /// The point-estimate report before bootstrap fields are filled.
    pub report: AuditReport,
    /// The shard's replicate scores in index order.
    pub scores: Vec<ReplicateScores>,
    /// The point report's per-row diagnostics (for `rows.csv`; not part of `report`).
    #[serde(default)]
    pub rows: Vec<RowReport>,
}

impl Partial {
    /// A shard's partial result.
    pub fn new(report: AuditReport, scores: Vec<ReplicateScores>, cfg: &BootstrapConfig) -> Self {
        let r = cfg.computed();
        Partial {
            format: FORMAT.into(),
            schema: SCHEMA,
            tool_version: env!("CARGO_PKG_VERSION").into(),
            inputs: report.inputs.clone(),
            replicates: cfg.replicates,
            resample: cfg.resample.name().into(),
            level: cfg.level,
            top_k: cfg.top_k,
            range: [r.start, r.end],
            rows: report.rows.clone(),
            report,
            scores,
        }
    }

    /// The bootstrap settings of the run this shard belongs to (whole range).
    pub fn settings(&self) -> Result<BootstrapConfig> {
        let resample = Resample::from_name(&self.resample).ok_or_else(|| {
            Error::Usage(format!(
                "partial file: resample '{}' is not 'shots' or 'circuits'",
                self.resample
            ))
        })?;
        let cfg = BootstrapConfig {
            replicates: self.replicates,
            resample,
            level: self.level,
            top_k: self.top_k,
            range: None,
        };
        cfg.validate()?;
        Ok(cfg)
    }
}

/// Checks that `parts` (named by `names` in messages) are shards of one run covering
/// 0..replicates exactly once, and returns the point report, all replicates in index order
/// and the run's settings, ready for [`super::finish`].
pub fn merge(
    parts: Vec<Partial>,
    names: &[String],
) -> Result<(AuditReport, Vec<ReplicateScores>, BootstrapConfig)> {
    let name = |i: usize| names.get(i).cloned().unwrap_or_else(|| format!("part {}", i + 1));
    let Some(first) = parts.first() else {
        return Err(Error::Usage("merge needs at least one partial file".into()));
    };
    for (i, p) in parts.iter().enumerate() {
        if p.format != FORMAT || p.schema != SCHEMA {
            return Err(Error::Usage(format!(
                "{}: not a partial file of schema {SCHEMA} (format '{}', schema {})",
                name(i),
                p.format,
                p.schema
            )));
        }
        if p.tool_version != env!("CARGO_PKG_VERSION") {
            return Err(Error::Usage(format!(
                "{}: written by slackmap {}, this is {}; rerun the shard with this version",
                name(i),
                p.tool_version,
                env!("CARGO_PKG_VERSION")
            )));
        }
    }
    let cfg = first.settings()?;
    for (i, p) in parts.iter().enumerate().skip(1) {
        if p.inputs != first.inputs {
            return Err(Error::Usage(format!(
                "{} and {}: the input files differ (digests do not match)",
                name(0),
                name(i)
            )));
        }
        if p.settings()? != cfg {
            return Err(Error::Usage(format!(
                "{} and {}: bootstrap settings differ (replicates, resample, level or top k)",
                name(0),
                name(i)
            )));
        }
        // Compared as written: a value the data cannot identify (NaN) equals itself there.
        if serde_json::to_value(&p.report).ok() != serde_json::to_value(&first.report).ok() {
            return Err(Error::Usage(format!(
                "{} and {}: point estimates differ (other settings, seed or version)",
                name(0),
                name(i)
            )));
        }
    }
    let mut order: Vec<usize> = (0..parts.len()).collect();
    order.sort_by_key(|&i| parts[i].range);
    let mut next = 0;
    for &i in &order {
        let [a, b] = parts[i].range;
        if a != next {
            return Err(Error::Usage(if a < next {
                format!("{}: replicates {a}..{b} overlap another part (up to {next})", name(i))
            } else {
                format!("replicates {next}..{a} are missing: no part covers them")
            }));
        }
        let idx: Vec<usize> = parts[i].scores.iter().map(|s| s.index).collect();
        if idx != (a..b).collect::<Vec<_>>() {
            return Err(Error::Usage(format!(
                "{}: holds {} replicate scores, not replicates {a}..{b}",
                name(i),
                idx.len()
            )));
        }
        next = b;
    }
    if next != cfg.replicates {
        return Err(Error::Usage(format!(
            "replicates {next}..{} are missing: no part covers them",
            cfg.replicates
        )));
    }
    let report = first.report.clone();
    let mut scores = Vec::with_capacity(cfg.replicates);
    let mut parts = parts;
    for &i in &order {
        scores.append(&mut parts[i].scores);
    }
    Ok((report, scores, cfg))
}
