//! The `slackmap` binary: parses arguments, calls the library, prints, maps errors to
//! exit codes (0 success, 1 analysis failed, 2 bad input or usage).

mod cli;

use std::process::ExitCode;

/// The allocator. An audit makes millions of small, short-lived allocations (parsed
/// operations, rows, LP terms) on every worker thread; mimalloc's per-thread free lists
/// serve them with less work than the system allocator's shared arenas.
#[global_allocator]
static ALLOCATOR: mimalloc::MiMalloc = mimalloc::MiMalloc;

fn main() -> ExitCode {
    cli::main()
}
