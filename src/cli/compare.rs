//! `slackmap compare`: how audit B differs from audit A, edge by edge and qubit by qubit.

use std::path::PathBuf;

use anyhow::Context;
use slackmap::compare::{self, CompareOptions};
use slackmap::report::{json, write_folder};

const HELP: &str = "Example (the chip before and after a recalibration):
  slackmap audit --layout chip.toml --circuits run1/circuits.json --counts run1/counts.csv \\
      --label before --out before
  slackmap audit --layout chip.toml --circuits run1/circuits.json --counts run2/counts.csv \\
      --label after --out after
  slackmap compare before/audit.json after/audit.json --out cmp

Compares unlimited-shot estimates (not scores, which grow with shots), with basic bootstrap \
intervals for B - A from the audits' stored replicates: improved when the interval lies below \
zero, worse when above, unchanged when it holds zero. Writes compare.json, compare.csv and \
compare.svg. Audits of different layouts are compared where their neighbour pairs (matched by \
qubit names) overlap, with a warning; audits that share no pair are refused. Terminal tables \
fit the width in COLUMNS, else the terminal's.

Exit codes: 0 success, 2 bad input or usage.";

/// Arguments of `slackmap compare`.
#[derive(clap::Args, Debug)]
#[command(after_help = HELP)]
pub struct CompareArgs {
    /// The earlier (or first) audit.json.
    a: PathBuf,
    /// The later (or second) audit.json; differences are B - A.
    b: PathBuf,
    /// Two-sided interval level for the differences.
    #[arg(long, default_value_t = 0.95)]
    level: f64,
    /// Output folder (compare.json, compare.csv, compare.svg).
    #[arg(long)]
    out: PathBuf,
    /// Most rows per terminal table (the files hold everything).
    #[arg(long, default_value_t = 30)]
    max_rows: usize,
}

/// Runs `compare`.
pub fn run(args: CompareArgs) -> anyhow::Result<()> {
    let opt = CompareOptions::new(args.level)?;
    let a = json::read(&args.a)?;
    let b = json::read(&args.b)?;
    let report = compare::compare(
        &a,
        &args.a.display().to_string(),
        &b,
        &args.b.display().to_string(),
        &opt,
    )?;
    for w in &report.warnings {
        eprintln!("warning: {w}");
    }
    write_folder(&args.out, &compare::files(&report))
        .with_context(|| format!("writing {}", args.out.display()))?;
    print!("{}", compare::terminal(&report, args.max_rows, super::style::stdout_style()));
    println!("wrote {}", args.out.display());
    Ok(())
}
