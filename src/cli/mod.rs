//! Command-line glue: clap definitions, conversion to library configs, printing.

use std::io::Write;
use std::process::ExitCode;

use clap::{Parser, Subcommand};

mod check;
mod report;

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
    /// Validate layout, circuits and counts together and show what the data covers.
    Check(check::CheckArgs),
    /// Re-render tables, pictures and report.html from a saved audit.json.
    Report(report::ReportArgs),
}

/// Runs the CLI and maps the outcome to an exit code.
pub fn main() -> ExitCode {
    let cli = Cli::parse();
    let result: anyhow::Result<()> = match cli.command {
        Command::Check(args) => check::run(args),
        Command::Report(args) => report::run(args),
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
