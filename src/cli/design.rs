//! `slackmap design`: write the circuits to run for a layout.
//!
//! Converts the typed arguments into a validated [`DesignConfig`], calls the library, and
//! prints the pattern count, circuit count and output folder.

use std::path::PathBuf;
use std::sync::atomic::Ordering;

use clap::Args;
use slackmap::design::{write_blueprint, Blueprint, Context, DesignConfig, GateSelection, Kind};
use slackmap::error::echo;
use slackmap::files::{size_text, FolderRule, OutputDir};

const EXAMPLE: &str = "\
Example:
  slackmap design --layout chip.toml --depths 1,4,16,64 --sequences 4 --seed 7 --out run1

Writes run1/circuits.json (circuits in run order), run1/qasm/<id>.qasm (one OpenQASM 3
program per circuit) and run1/manifest.csv (columns id, pattern, context, kind, depth,
sequence, active_blocks, ideal_outcome, ideal_p1). The same seed gives identical files.
The folder appears only when every file is written: a failed or interrupted run leaves
nothing, and a second run writing the same folder at the same time is refused.

Limits: each depth at most 10,000, --sequences at most 1,000, at most 1,000,000 circuits
and 16 GiB of files; --no-limits lifts them.

Exit codes: 0 success, 1 the analysis failed, 2 bad input or usage, 130 interrupted.";

/// Write reference, pair, all-active and all-idle circuits for a layout.
///
/// Every qubit and coupler gets reference circuits (its neighbours idle and measured),
/// every neighbour pair a pair context, and the whole chip all-active and all-idle
/// circuits. Blocks far enough apart share a circuit, so the number of patterns depends on
/// the layout's degree, not its size.
#[derive(Args, Debug)]
#[command(after_help = EXAMPLE)]
pub struct DesignArgs {
    /// Layout file (TOML).
    #[arg(long, value_name = "FILE")]
    layout: PathBuf,
    #[command(flatten)]
    sequences: SequenceArgs,
    /// Seed for every random choice (sequences and run order).
    #[arg(long, default_value_t = 0, value_name = "S")]
    seed: u64,
    /// Output folder (must not exist, or be empty).
    #[arg(long, value_name = "DIR")]
    out: PathBuf,
}

/// The sequences of a design (shared by `design` and `plan`).
#[derive(Args, Debug, Clone)]
pub struct SequenceArgs {
    /// Sequence depths, comma separated: Cliffords per randomized sequence, cycle
    /// repetitions per repeated one (each at most 10,000 unless --no-limits).
    #[arg(long, value_delimiter = ',', default_value = "1,4,16,64", value_name = "LIST")]
    depths: Vec<usize>,
    /// Independent randomized sequences per depth and pattern (at most 1,000 unless
    /// --no-limits).
    #[arg(long, default_value_t = 4, value_name = "N")]
    sequences: usize,
    /// Sequence kinds, comma separated: randomized, repeated-x, repeated-z, or repeated
    /// (both repeated framings).
    #[arg(long, value_delimiter = ',', default_value = "randomized,repeated", value_name = "LIST")]
    kinds: Vec<String>,
    /// Also write circuits for gate-on-gate crosstalk. Alone or with `all`: every two nearby
    /// couplers that share no qubit run two-qubit sequences in the same layers (context
    /// gate-pair), and every coupler runs beside each nearby qubit driven by one-qubit gates
    /// (gate-qubit); a square grid gets 180 (4x4) to 380 (32x32) patterns besides its 39 to
    /// 47 standard ones. With
    /// a list of couplers (e.g. q5-q6,q9-q10): only the gate pairs whose two couplers are
    /// both listed, and the listed couplers beside their nearby qubits, a targeted follow-up
    /// after a first audit; an item a-b/c-d adds that one gate pair alone (e.g.
    /// q5-q6/q9-q10: one pattern). The standard circuits stay as they are.
    #[arg(long, num_args = 0..=1, default_missing_value = "all", value_name = "all|COUPLERS")]
    gate_pairs: Option<String>,
}

impl SequenceArgs {
    /// The validated design settings with this `seed`.
    pub fn config(&self, seed: u64) -> anyhow::Result<DesignConfig> {
        let mut kinds = Vec::new();
        for k in &self.kinds {
            let parsed = Kind::parse_list(k).ok_or_else(|| {
                slackmap::Error::Usage(format!(
                    "--kinds: '{}' is not a kind (valid: randomized, repeated-x, repeated-z, \
                     repeated)",
                    echo(k)
                ))
            })?;
            kinds.extend(parsed);
        }
        let gates = match &self.gate_pairs {
            Some(text) => GateSelection::parse(text)?,
            None => GateSelection::None,
        };
        let cfg = DesignConfig::new(self.depths.clone(), self.sequences, seed, kinds)?;
        Ok(cfg.with_limits(super::limits()).with_gate_pairs(gates))
    }
}

/// Runs `slackmap design`: claims the output folder first (so that a bad path fails before
/// any work), streams the circuits into its staging folder and commits it at the end.
pub fn run(args: DesignArgs) -> anyhow::Result<()> {
    let cfg = args.sequences.config(args.seed)?;
    let out = OutputDir::claim(&args.out, FolderRule::New)?;
    let layout = slackmap::layout::read_layout(&args.layout)?;
    let blueprint = Blueprint::new(&layout, &cfg)?;
    let stop = super::stop_flag();
    let bytes = write_blueprint(out.staging(), &blueprint, &|| stop.load(Ordering::SeqCst))?;
    out.commit()?;
    let gate = |c: Context| blueprint.patterns().iter().filter(|p| p.context == c).count();
    if cfg.gate_pairs.any() && gate(Context::GatePair) == 0 {
        eprintln!(
            "warning: no two of the selected couplers form a gate pair (two couplers that share \
             no qubit and whose ends are neighbours), so no gate-pair circuit was written; only \
             the selected couplers beside their nearby qubits ({} patterns)",
            gate(Context::GateQubit)
        );
    }
    let gates = match gate(Context::GatePair) + gate(Context::GateQubit) {
        0 => String::new(),
        n => format!(" ({n} of them gate-pair and gate-qubit)"),
    };
    println!(
        "{} patterns{gates}, {} circuits written to {} ({})",
        blueprint.patterns().len(),
        blueprint.len(),
        args.out.display(),
        size_text(bytes)
    );
    Ok(())
}
