//! `slackmap layout check` and `slackmap layout new`: validate a layout file with a short
//! summary, or write a generated layout as TOML.

use std::collections::BTreeMap;
use std::io::Write;
use std::path::{Path, PathBuf};

use anyhow::Context;
use clap::{Args, Subcommand, ValueEnum};
use slackmap::files::OutputFile;
use slackmap::layout::generate::{self, Kind};
use slackmap::layout::{read_layout, to_toml, Layout};

const LAYOUT_HELP: &str = "\
Examples:
  slackmap layout check chip.toml
  slackmap layout new grid 4x4 --out grid-4x4.toml
  slackmap layout new hex 3x3 > hex-3x3.toml

The layout file format is described in the README, \"Layout files\".
Exit codes: 0 success, 2 bad input or usage.";

/// Arguments of `slackmap layout`.
#[derive(Args, Debug)]
#[command(
    about = "Check a layout file, or write a generated one",
    long_about = "Layouts name a chip's qubits, couplers and native gates, and the neighbourhood \
                  that decides which qubits count as spectators of each other.",
    after_help = LAYOUT_HELP
)]
pub struct LayoutArgs {
    #[command(subcommand)]
    command: LayoutCommand,
}

#[derive(Subcommand, Debug)]
enum LayoutCommand {
    /// Validate a layout file and print a summary.
    #[command(
        long_about = "Validate a layout file and print its name, qubit and coupler counts, \
                      degree histogram, neighbourhood, connectivity and native gates. \
                      Problems are reported with the file and line.",
        after_help = "Example:\n  slackmap layout check layouts/grid-4x4.toml\n\n\
                      Exit codes: 0 the file is valid, 2 it is not (or cannot be read)."
    )]
    Check {
        /// The layout TOML file.
        file: PathBuf,
    },
    /// Write a generated layout as TOML.
    #[command(
        long_about = "Write a generated layout as TOML. Qubits are named q0, q1, ... with \
                      positions for drawing; native gates are sx, x, rz (virtual) and cz; the \
                      neighbourhood is the coupler neighbours. Edit the file to match a chip.",
        after_help = "Sizes:\n  grid    RxC or N (N x N)      e.g. 4x4, 12x12, 32x32\n  \
                      chain   N                     e.g. 8\n  \
                      ring    N (at least 3)        e.g. 12\n  \
                      ladder  2xN or N              e.g. 2x8\n  \
                      hex     RxC or N hexagonal cells in brick-wall form (degree <= 3), \
                      e.g. 3x3 (30 qubits)\n\n\
                      Examples:\n  slackmap layout new grid 4x4 --out grid-4x4.toml\n  \
                      slackmap layout new ring 12\n  \
                      slackmap layout new chain 8 --out - | less\n\n\
                      Exit codes: 0 success, 2 bad size or unwritable file."
    )]
    New {
        /// Shape of the layout.
        kind: KindArg,
        /// Size, such as 4x4, 8 or 2x8 (see below).
        size: String,
        /// Write to this file instead of standard output (`-` is standard output too). The
        /// file is replaced only once it is complete.
        #[arg(long, short)]
        out: Option<PathBuf>,
    },
}

/// The generator kinds as the command line spells them.
#[derive(Copy, Clone, Debug, ValueEnum)]
enum KindArg {
    /// Square grid.
    Grid,
    /// Open chain.
    Chain,
    /// Closed ring.
    Ring,
    /// Two coupled chains.
    Ladder,
    /// Honeycomb of hexagonal cells.
    Hex,
}

impl From<KindArg> for Kind {
    fn from(k: KindArg) -> Kind {
        match k {
            KindArg::Grid => Kind::Grid,
            KindArg::Chain => Kind::Chain,
            KindArg::Ring => Kind::Ring,
            KindArg::Ladder => Kind::Ladder,
            KindArg::Hex => Kind::Hex,
        }
    }
}

/// Runs `slackmap layout ...`.
pub fn run(args: LayoutArgs) -> anyhow::Result<()> {
    match args.command {
        LayoutCommand::Check { file } => {
            let layout = read_layout(&file)?;
            let mut out = std::io::stdout().lock();
            out.write_all(summary(&layout).as_bytes())?;
            out.flush()?;
            Ok(())
        }
        LayoutCommand::New { kind, size, out } => {
            let out = OutputFile::claim(out.as_deref().unwrap_or(Path::new("-")))?;
            let layout = generate::generate(kind.into(), &size)?;
            let text = to_toml(&layout);
            out.write_with(|w| w.write_all(text.as_bytes()))
                .with_context(|| format!("writing layout {}", layout.name))?;
            out.commit()?;
            Ok(())
        }
    }
}

/// The text `layout check` prints.
fn summary(l: &Layout) -> String {
    let mut degrees: BTreeMap<usize, usize> = BTreeMap::new();
    for q in 0..l.n_qubits() {
        *degrees.entry(l.coupled(q).len()).or_default() += 1;
    }
    let histogram =
        degrees.iter().map(|(d, n)| format!("{n} of degree {d}")).collect::<Vec<_>>().join(", ");
    let names = |gs: &[slackmap::gate::Gate]| {
        if gs.is_empty() {
            "none".to_string()
        } else {
            gs.iter().map(|g| g.name()).collect::<Vec<_>>().join(", ")
        }
    };
    let radius = match l.neighbourhood.radius {
        1 => "radius 1 (coupler neighbours)".to_string(),
        r => format!("radius {r} (within {r} couplers)"),
    };
    let extra = match l.neighbourhood.extra_pairs.len() {
        0 => String::new(),
        n => format!(", {n} extra spectator pair(s)"),
    };
    let positions = l.qubits.iter().filter(|q| q.position.is_some()).count();
    format!(
        "layout '{}' is valid\n  qubits:        {} ({} with positions)\n  couplers:      {}\n  \
         degrees:       {}\n  neighbourhood: {radius}{extra}: {} neighbour pairs\n  \
         connected:     {}\n  one-qubit:     {} (virtual: {})\n  two-qubit:     {}\n",
        l.name,
        l.n_qubits(),
        positions,
        l.couplers.len(),
        histogram,
        l.neighbour_pairs().len(),
        if l.is_connected() { "yes" } else { "no" },
        names(&l.gates.one_qubit),
        names(&l.gates.virtual_gates),
        two_qubit(l),
    )
}

/// The two-qubit gates: the list every coupler runs, then the couplers with their own.
fn two_qubit(l: &Layout) -> String {
    let list = |v: &[slackmap::layout::Native2]| {
        v.iter().map(ToString::to_string).collect::<Vec<_>>().join(", ")
    };
    let mut parts = Vec::new();
    if !l.gates.two_qubit.is_empty() {
        parts.push(list(&l.gates.two_qubit));
    }
    for (a, b, v) in &l.gates.coupler_gates {
        parts.push(format!("{a}-{b}: {}", list(v)));
    }
    parts.join("; ")
}
