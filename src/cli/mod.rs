//! Command-line glue: clap definitions, conversion to library configs, printing.

use std::io::Write;
use std::process::ExitCode;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::OnceLock;

use clap::{Parser, Subcommand};
use slackmap::limits::Limits;

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

/// Exit-code and limit documentation shown at the end of `--help`.
const EXIT_CODES: &str = "\
Limits (each refused with exit code 2 and a message; --no-limits lifts them all): at most
10^9 shots per circuit, 1024 threads, 100,000 bootstrap or null replicates, depth 10,000,
1,000 sequences per depth, 1,000,000 circuits and 16 GiB of files per design. A request
that cannot fit in this machine's memory is refused even with --no-limits.

Exit codes: 0 success, 1 the analysis failed, 2 bad input or usage, 130 interrupted.";

/// slackmap: find crosstalk between neighbouring qubits, with confidence.
#[derive(Parser, Debug)]
#[command(name = "slackmap", version, about, after_help = EXIT_CODES)]
pub struct Cli {
    /// Lift the limits on shots, threads, replicates, depths, sequences and design size
    /// (listed at the end of `slackmap --help`), for a request that is meant.
    #[arg(long, global = true)]
    no_limits: bool,
    #[command(subcommand)]
    command: Command,
}

static LIMITS: OnceLock<Limits> = OnceLock::new();

/// The limits of this run (`--no-limits` lifts them).
pub fn limits() -> Limits {
    LIMITS.get().copied().unwrap_or_default()
}

/// Set by the first Ctrl-C (or SIGTERM, SIGHUP).
static STOP: AtomicBool = AtomicBool::new(false);
/// True once the running command checks [`STOP`] at safe points.
static POLLED: AtomicBool = AtomicBool::new(false);

/// For long commands that check the flag at safe points and return `Interrupted`: the
/// first signal then sets it, and a second ends the process at once. Other commands end at
/// the first signal. Either way the outputs' temporaries are removed, so an interrupted run
/// leaves nothing behind.
pub fn stop_flag() -> &'static AtomicBool {
    POLLED.store(true, Ordering::SeqCst);
    &STOP
}

fn install_signal_handler() {
    let _ = ctrlc::set_handler(|| {
        let again = STOP.swap(true, Ordering::SeqCst);
        if POLLED.load(Ordering::SeqCst) && !again {
            eprintln!(
                "\nstopping at the next safe point; nothing will be written (press Ctrl-C \
                 again to stop at once)"
            );
            return;
        }
        slackmap::files::abandon();
        eprintln!("\ninterrupted; nothing was written");
        std::process::exit(130);
    });
}

/// Parses the command line; a usage error that quotes a long value is shown with the value
/// cut (as every message of the program does).
fn parse() -> Cli {
    match Cli::try_parse() {
        Ok(cli) => cli,
        Err(e) => {
            let text = e.render().to_string();
            let cut = cut_quoted(&text);
            if !e.use_stderr() || cut == text {
                e.exit();
            }
            eprint!("{cut}");
            std::process::exit(e.exit_code());
        }
    }
}

/// `text` with every single-quoted value longer than the echo limit cut by
/// [`slackmap::error::echo`].
fn cut_quoted(text: &str) -> String {
    text.split('\'')
        .enumerate()
        .map(|(i, part)| {
            if i % 2 == 1 && part.chars().count() > slackmap::error::ECHO_CHARS {
                slackmap::error::echo(part)
            } else {
                part.to_string()
            }
        })
        .collect::<Vec<_>>()
        .join("'")
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
    let cli = parse();
    let _ = LIMITS.set(if cli.no_limits { Limits::NONE } else { Limits::DEFAULT });
    install_signal_handler();
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

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn long_quoted_values_are_cut_and_short_ones_kept() {
        let long = "7".repeat(5000);
        let text = format!("error: invalid value '{long}' for '--depths <LIST>': too large\n");
        let cut = cut_quoted(&text);
        assert!(cut.len() < 250, "{cut}");
        assert!(cut.contains("(5000 bytes in all)' for '--depths <LIST>': too large"), "{cut}");
        let short = "error: invalid value 'x' for '--seed <S>'\n";
        assert_eq!(cut_quoted(short), short);
    }
}
