//! `slackmap compare`: how audit B differs from audit A, edge by edge and qubit by qubit.

use std::path::PathBuf;

use anyhow::Context;
use slackmap::compare::{self, CompareOptions};
use slackmap::report::{json, write_folder};

/// Arguments of `slackmap compare`.
#[derive(clap::Args, Debug)]
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
    );
    write_folder(&args.out, &compare::files(&report))
        .with_context(|| format!("writing {}", args.out.display()))?;
    print!("{}", compare::terminal(&report, args.max_rows));
    println!("wrote {}", args.out.display());
    Ok(())
}
