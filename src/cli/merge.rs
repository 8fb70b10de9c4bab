//! `slackmap merge`: combine the partial files of a sharded bootstrap into the audit a
//! single run would have written, byte for byte, and the same set of files.

use std::path::PathBuf;

use anyhow::Context;

use slackmap::confidence::partial;

const HELP: &str = "Example (ten shards of 20 replicates each, then the merge):
  for i in 0 1 2 3 4 5 6 7 8 9; do
    slackmap audit --layout chip.toml --circuits circuits.json --counts counts.csv \\
      --replicates 200 --seed 42 --replicate-range $((i*20))..$((i*20+20)) --out shards/$i -q
  done
  slackmap merge shards/* --out audit

Checks that the parts share the inputs' digests, settings and version and that their ranges \
cover 0..replicates exactly once, then writes the files a single run with the same seed writes \
(audit.json, edges.csv, replicates.csv, adjacency.csv, intrinsic.csv, rows.csv, adjacency.svg, \
layout.svg, report.html), byte for byte apart from audit.json's creation time (set \
SOURCE_DATE_EPOCH to fix it).

Exit codes: 0 success, 1 the analysis failed, 2 bad input or usage.";

/// Arguments of `slackmap merge`.
#[derive(clap::Args, Debug)]
#[command(after_help = HELP)]
pub struct MergeArgs {
    /// Partial files (`partial.json`) or the shard folders holding them.
    #[arg(required = true, value_name = "PARTS")]
    parts: Vec<PathBuf>,
    /// Output folder (written atomically, as by `slackmap audit`).
    #[arg(long, value_name = "DIR")]
    out: PathBuf,
}

/// Checks that every replicate of a part has one value per directed pair and per kind of
/// the part's report, so that a damaged file is named rather than found later.
fn check_lengths(part: &partial::Partial, path: &std::path::Path) -> slackmap::Result<()> {
    let (nd, ni) = (part.report.scored_directions(), part.report.intrinsic.len());
    for s in &part.scores {
        let bad = [
            ("directed_tvd_per_layer", s.directed_tvd_per_layer.len(), nd),
            ("directed_estimate_tvd_per_layer", s.directed_estimate_tvd_per_layer.len(), nd),
            ("intrinsic_tvd_per_occurrence", s.intrinsic_tvd_per_occurrence.len(), ni),
            (
                "intrinsic_estimate_tvd_per_occurrence",
                s.intrinsic_estimate_tvd_per_occurrence.len(),
                ni,
            ),
        ]
        .into_iter()
        .find(|(_, got, want)| got != want);
        if let Some((field, got, want)) = bad {
            return Err(slackmap::Error::input(
                path,
                None,
                format!(
                    "replicate {}: {field} holds {got} values, the report needs {want} (a truncated or damaged partial file: rerun its shard)",
                    s.index
                ),
            ));
        }
    }
    Ok(())
}

/// Runs `slackmap merge`.
pub fn run(args: MergeArgs) -> anyhow::Result<()> {
    let mut parts = Vec::new();
    let mut names = Vec::new();
    for p in &args.parts {
        let path = if p.is_dir() { p.join(partial::FILE_NAME) } else { p.clone() };
        let text = slackmap::files::read_text_capped(
            &path,
            slackmap::report::json::MAX_AUDIT_FILE_BYTES,
            "partial file",
        )?;
        let part: partial::Partial = serde_json::from_str(&text).map_err(|e| {
            slackmap::Error::input(
                &path,
                Some(e.line()),
                format!("not a slackmap partial file: {e}"),
            )
        })?;
        check_lengths(&part, &path)?;
        parts.push(part);
        names.push(path.display().to_string());
    }
    let rows = parts.first().map(|p| p.rows.clone()).unwrap_or_default();
    let (mut rep, scores, cfg) = partial::merge(parts, &names)?;
    rep.rows = rows;
    slackmap::audit::finish(&mut rep, &scores, &cfg).context("could not combine the replicates")?;
    super::audit::write_and_print(&mut rep, &args.out)
}
