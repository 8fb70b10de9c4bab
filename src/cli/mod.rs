//! Command-line glue: clap definitions, conversion to library configs, printing.

use std::io::Write;
use std::process::ExitCode;

use clap::{Parser, Subcommand};

mod audit;
mod check;
mod compare;
mod design;
mod hints;
mod inputs;
mod layout;
mod merge;
mod plan;
mod progress;
mod report;
mod schema;
mod simulate;
mod style;
mod units;

/// Exit-code documentation shown at the end of `--help`.
const EXIT_CODES: &str = "Exit codes: 0 success, 1 the analysis failed, 2 bad input or usage.";

/// slackmap: find crosstalk between neighbouring qubits, with confidence.
#[derive(Parser, Debug)]
#[command(name = "slackmap", version, about, after_help = EXIT_CODES)]
pub struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand, Debug)]
enum Command {
    /// Run the audit on the bundled demo scenario and write its report.
    Demo(audit::DemoArgs),
    /// Check a layout file, or write a generated one.
    Layout(layout::LayoutArgs),
    /// Write the circuits to run for a layout.
    Design(design::DesignArgs),
    /// Simulate counts (and a truth file) under an injected noise scenario.
    Simulate(simulate::SimulateArgs),
    /// Validate layout, circuits and counts together and show what the data covers.
    Check(check::CheckArgs),
    /// Find crosstalk: fit the crosstalk-free model, budget slack, rank the edges.
    Audit(audit::AuditArgs),
    /// Re-render tables, pictures and report.html from a saved audit.json.
    Report(report::ReportArgs),
    /// Compare two audits edge by edge: improved, worse or unchanged, with intervals.
    Compare(compare::CompareArgs),
    /// Scheduling hints from an audit: conflict graph, parallel groups, layer counts.
    Hints(hints::HintsArgs),
    /// Plan shot counts: sensitivity and smallest flagged crosstalk from simulated audits.
    Plan(plan::PlanArgs),
    /// Combine the partial results of `audit --replicate-range` shards into one audit.
    Merge(merge::MergeArgs),
    /// Print or write the JSON Schemas of audit.json, compare.json, hints.json and plan.json.
    Schema(schema::SchemaArgs),
}

/// Runs the CLI and maps the outcome to an exit code.
pub fn main() -> ExitCode {
    let cli = Cli::parse();
    let result: anyhow::Result<()> = match cli.command {
        Command::Layout(args) => layout::run(args),
        Command::Check(args) => check::run(args),
        Command::Audit(args) => audit::run(args),
        Command::Demo(args) => audit::demo(args),
        Command::Design(a) => design::run(a),
        Command::Simulate(a) => simulate::run(a),
        Command::Hints(args) => hints::run(args),
        Command::Compare(args) => compare::run(args),
        Command::Report(args) => report::run(args),
        Command::Plan(args) => plan::run(args),
        Command::Merge(args) => merge::run(args),
        Command::Schema(args) => schema::run(args),
    };
    match result {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => report_error(&e),
    }
}

/// Prints `error: ...` with its chain of causes; a broken pipe ends quietly with success.
fn report_error(e: &anyhow::Error) -> ExitCode {
    for cause in e.chain() {
        if let Some(io) = cause.downcast_ref::<std::io::Error>() {
            if io.kind() == std::io::ErrorKind::BrokenPipe {
                return ExitCode::SUCCESS;
            }
        }
    }
    let mut err = std::io::stderr().lock();
    let _ = writeln!(err, "error: {e}");
    for cause in e.chain().skip(1) {
        let _ = writeln!(err, "  caused by: {cause}");
    }
    let code = e
        .chain()
        .find_map(|c| c.downcast_ref::<slackmap::Error>())
        .map(|le| le.exit_code())
        .unwrap_or(2);
    ExitCode::from(code as u8)
}
