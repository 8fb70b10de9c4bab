//! The `slackmap` binary: parses arguments, calls the library, prints, maps errors to
//! exit codes (0 success, 1 analysis failed, 2 bad input or usage).

mod cli;

use std::process::ExitCode;

fn main() -> ExitCode {
    cli::main()
}
