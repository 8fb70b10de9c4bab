//! `slackmap merge`: combine the partial files of a sharded bootstrap into the audit a
//! single run would have written, byte for byte.

use std::path::PathBuf;

use anyhow::Context;

use slackmap::confidence::{self, partial};

/// Arguments of `slackmap merge`.
#[derive(clap::Args, Debug)]
pub struct MergeArgs {
    /// Partial files (`partial.json`) or the shard folders holding them.
    #[arg(required = true, value_name = "PARTS")]
    parts: Vec<PathBuf>,
    /// Output folder (written atomically, as by `slackmap audit`).
    #[arg(long, value_name = "DIR")]
    out: PathBuf,
}

/// Runs `slackmap merge`.
pub fn run(args: MergeArgs) -> anyhow::Result<()> {
    let mut parts = Vec::new();
    let mut names = Vec::new();
    for p in &args.parts {
        let path = if p.is_dir() { p.join(partial::FILE_NAME) } else { p.clone() };
        let bytes = std::fs::read(&path).map_err(|e| slackmap::Error::io(&path, e))?;
        let part: partial::Partial = serde_json::from_slice(&bytes).map_err(|e| {
            slackmap::Error::input(
                &path,
                Some(e.line()),
                format!("not a slackmap partial file: {e}"),
            )
        })?;
        parts.push(part);
        names.push(path.display().to_string());
    }
    let (mut rep, scores, cfg) = partial::merge(parts, &names)?;
    confidence::finish(&mut rep, &scores, &cfg).context("could not combine the replicates")?;
    super::audit::write_and_print(&rep, &args.out)
}
