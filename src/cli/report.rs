//! `slackmap report`: re-renders every output file of a saved audit (tables, pictures, the
//! HTML page) from its `audit.json`, without recomputing anything.

use std::path::PathBuf;

use anyhow::Context;
use slackmap::report;

/// Arguments of `slackmap report`.
#[derive(clap::Args, Debug)]
#[command(after_help = "Examples:
  slackmap report run1/audit/audit.json --out run1/audit      # re-render in place
  slackmap report colleague/audit.json --out review           # render a saved audit elsewhere

Writes audit.json, edges.csv, replicates.csv, adjacency.csv, intrinsic.csv, adjacency.svg, \
layout.svg and report.html into DIR (other files already in DIR are kept; rows.csv is written \
only by audit and merge) and prints the path of report.html. The page is one self-contained \
file: open it from disk, no network needed. Reads audit schemas 2 and 3, and refuses an \
inconsistent audit (no qubits, fewer positions than qubits, an edge or pair naming a qubit the \
layout lacks), naming the file and what is wrong.

Exit codes: 0 success, 2 bad input or usage.")]
pub struct ReportArgs {
    /// A saved audit (the audit.json an earlier audit wrote).
    #[arg(value_name = "AUDIT.json")]
    audit: PathBuf,
    /// Folder to write the files into (created if missing; replaced atomically).
    #[arg(long, value_name = "DIR")]
    out: PathBuf,
}

/// Reads the audit, renders every file and writes the folder.
pub fn run(args: ReportArgs) -> anyhow::Result<()> {
    let audit = report::json::read(&args.audit)?;
    let files = report::audit_files(&audit);
    report::write_folder(&args.out, &files)
        .with_context(|| format!("writing the report into {}", args.out.display()))?;
    println!("{}", args.out.join("report.html").display());
    Ok(())
}
