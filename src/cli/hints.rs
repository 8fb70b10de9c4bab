//! `slackmap hints`: scheduling hints from one audit, or two audits side by side.

use std::path::PathBuf;

use anyhow::Context;
use slackmap::hints::{self, FlagLevel, HintsComparison};
use slackmap::report::{json, write_folder};

/// Verdict level counted as flagged.
#[derive(clap::ValueEnum, Clone, Copy, Debug, PartialEq, Eq)]
pub enum Flagged {
    /// `watch` and `recalibrate` edges.
    Watch,
    /// Only `recalibrate` edges.
    Recalibrate,
}

const HELP: &str = "Examples:
  slackmap hints run1/audit/audit.json --out hints               # one chip
  slackmap hints --compare grid/audit.json hex/audit.json --out hints-ab   # two layouts
  slackmap hints run1/audit/audit.json --flagged recalibrate --out hints

Turns flagged directions into conflicts a scheduler should respect: two operations conflict \
when one's qubit is the aggressor of a flagged direction onto the other's. Writes hints.json \
(the conflicts, coupler and qubit groups that can share a layer, and how many layers the \
layout needs with and without the conflicts; each figure is exact or bounded) and \
conflicts.dot (Graphviz, `neato -n -Tsvg conflicts.dot`).

Exit codes: 0 success, 2 bad input or usage.";

/// Arguments of `slackmap hints`.
#[derive(clap::Args, Debug)]
#[command(after_help = HELP)]
pub struct HintsArgs {
    /// The audit.json to read.
    #[arg(required_unless_present = "compare", conflicts_with = "compare")]
    audit: Option<PathBuf>,
    /// Two audits (two layouts or two calibrations) to show side by side.
    #[arg(long, num_args = 2, value_names = ["A", "B"])]
    compare: Option<Vec<PathBuf>>,
    /// Which verdicts make a conflict.
    #[arg(long, value_enum, default_value = "watch")]
    flagged: Flagged,
    /// Output folder (hints.json, conflicts.dot; with --compare also hints-compare.json).
    #[arg(long)]
    out: PathBuf,
}

/// Runs `hints`.
pub fn run(args: HintsArgs) -> anyhow::Result<()> {
    let level = match args.flagged {
        Flagged::Watch => FlagLevel::Watch,
        Flagged::Recalibrate => FlagLevel::Recalibrate,
    };
    let one = |path: &PathBuf| -> anyhow::Result<(hints::Hints, hints::HintsReport)> {
        let report = json::read(path)?;
        let h = hints::hints(&report, path, level, hints::DEFAULT_BUDGET)?;
        let wire = h.report(&path.display().to_string(), level);
        Ok((h, wire))
    };
    match (&args.audit, &args.compare) {
        (Some(path), _) => {
            let (h, wire) = one(path)?;
            write_folder(&args.out, &hints::files(&h, &wire))
                .with_context(|| format!("writing {}", args.out.display()))?;
            print!("{}", hints::terminal(&wire, super::style::stdout_style()));
        }
        (None, Some(pair)) if pair.len() == 2 => {
            let (ha, wa) = one(&pair[0])?;
            let (hb, wb) = one(&pair[1])?;
            let mut files: Vec<(String, Vec<u8>)> = Vec::new();
            for (tag, h, w) in [("a", &ha, &wa), ("b", &hb, &wb)] {
                for (name, bytes) in hints::files(h, w) {
                    files.push((format!("{tag}/{name}"), bytes));
                }
            }
            let both = HintsComparison { schema: hints::SCHEMA, a: wa, b: wb };
            files.push(("hints-compare.json".into(), hints::json_bytes(&both)));
            write_folder(&args.out, &files)
                .with_context(|| format!("writing {}", args.out.display()))?;
            print!("{}", hints::terminal_compare(&both, super::style::stdout_style()));
        }
        _ => anyhow::bail!(slackmap::Error::Usage(
            "give one AUDIT.json, or --compare A.json B.json".into()
        )),
    }
    println!("wrote {}", args.out.display());
    Ok(())
}
