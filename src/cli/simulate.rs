//! `slackmap simulate`: reads a layout, circuits and a noise file, writes counts and truth.
//!
//! Both outputs are claimed before any work (neither may be an input, nor the other), then
//! written to temporaries that are renamed into place only when both are complete, so a
//! failed or interrupted run leaves nothing behind.

use std::io::IsTerminal;
use std::path::{Path, PathBuf};
use std::sync::atomic::Ordering;

use anyhow::Context;
use slackmap::error::echo_path;
use slackmap::files::{is_stdout, same_file, same_target, OutputFile};
use slackmap::limits::Limits;
use slackmap::simulate::{self, Noise, SimConfig};

const EXAMPLE: &str = "Example:
  slackmap simulate --layout chip.toml --circuits circuits.json --noise noise.toml \\
      --shots 1000 --seed 7 --out counts.csv

Writes counts.csv (circuit,outcome,count; character i of outcome is the i-th measured qubit)
and truth.json beside it: the injected context error of every directed neighbour pair and the
intrinsic error of every operation kind, as half diamond-norm distance and infidelity.
The same seed gives the same counts on any number of threads. `--out -` writes the counts
to standard output (then give --truth FILE). Neither output may be one of the inputs; both
appear only when the run completes.

Crosstalk terms between qubits that are not neighbours under the layout's neighbourhood are
simulated but warned about: no audit of that layout can see them.

Exit codes: 0 success, 1 the analysis failed, 2 bad input or usage, 130 interrupted.";

/// Simulate counts for a circuit set under an injected noise scenario.
#[derive(clap::Args, Debug)]
#[command(after_help = EXAMPLE)]
pub struct SimulateArgs {
    /// Layout file (TOML).
    #[arg(long, value_name = "FILE")]
    layout: PathBuf,
    /// Circuit file (slackmap JSON).
    #[arg(long, value_name = "FILE")]
    circuits: PathBuf,
    /// Noise scenario (TOML; format in the README, "Noise files").
    #[arg(long, value_name = "FILE")]
    noise: PathBuf,
    /// Shots per circuit (at most 10^9 unless --no-limits).
    #[arg(long, default_value_t = 1000, value_parser = clap::value_parser!(u64).range(1..))]
    shots: u64,
    /// Seed; circuit i draws from a generator seeded by (seed, i) alone.
    #[arg(long, default_value_t = 0)]
    seed: u64,
    /// Counts file to write (CSV), or - for standard output.
    #[arg(long, value_name = "FILE")]
    out: PathBuf,
    /// Truth file to write (JSON) [default: truth.json beside --out; needed with --out -].
    #[arg(long, value_name = "FILE")]
    truth: Option<PathBuf>,
}

/// Fails when a shot count is above the limit (`simulate --shots`, `plan --shots`).
pub fn check_shots(shots: u64) -> anyhow::Result<()> {
    Ok(super::limits().check("--shots", shots, Limits::SHOTS, "shots per circuit")?)
}

/// The truth file's path: `--truth`, or truth.json beside `--out`.
fn truth_path(args: &SimulateArgs) -> anyhow::Result<PathBuf> {
    match (&args.truth, is_stdout(&args.out)) {
        (Some(t), _) => Ok(t.clone()),
        (None, true) => Err(slackmap::Error::Usage(
            "--out - writes the counts to standard output; give --truth FILE for the truth file"
                .into(),
        )
        .into()),
        (None, false) => Ok(args.out.parent().unwrap_or_else(|| Path::new("")).join("truth.json")),
    }
}

/// Claims both outputs, refusing one that is an input or the other output (compared as
/// resolved paths, so `./x/../c.json` and a link to it count as `c.json`).
fn claim_outputs(args: &SimulateArgs, truth: &Path) -> anyhow::Result<(OutputFile, OutputFile)> {
    let usage = |m: String| -> anyhow::Error { slackmap::Error::Usage(m).into() };
    let same_outputs = || {
        usage(format!(
            "--truth and --out are the same file ({}); give them different paths",
            echo_path(&args.out)
        ))
    };
    if (is_stdout(truth) && is_stdout(&args.out)) || same_target(truth, &args.out) {
        return Err(same_outputs());
    }
    let out = OutputFile::claim(&args.out)?;
    let truth_out = OutputFile::claim(truth)?;
    if out.target().is_some() && out.target() == truth_out.target() {
        return Err(same_outputs());
    }
    let inputs =
        [("--layout", &args.layout), ("--circuits", &args.circuits), ("--noise", &args.noise)];
    for (option, path, claimed) in
        [("--out", args.out.as_path(), &out), ("--truth", truth, &truth_out)]
    {
        let Some(target) = claimed.target() else { continue };
        for (input, given) in inputs {
            if same_file(&target, given) {
                return Err(usage(format!(
                    "{option} {} is the {input} file; writing it would destroy that input. \
                     Give another path",
                    echo_path(path)
                )));
            }
        }
    }
    Ok((out, truth_out))
}

/// Runs the subcommand.
pub fn run(args: SimulateArgs) -> anyhow::Result<()> {
    check_shots(args.shots)?;
    let truth_path = truth_path(&args)?;
    let (out, truth_out) = claim_outputs(&args, &truth_path)?;
    let layout = slackmap::layout::read_layout(&args.layout)?;
    let circuits = slackmap::circuit::validate::read_circuits(
        &args.circuits,
        &layout,
        &slackmap::circuit::validate::ReadOptions::default(),
    )?;
    let noise = Noise::read(&args.noise, &layout)?;
    for w in noise.warnings() {
        eprintln!("warning: {w}");
    }
    let cfg = SimConfig { shots: args.shots, seed: args.seed };
    let stop = super::stop_flag();
    let stopped = || stop.load(Ordering::SeqCst);
    // Sampling dominates: about one draw per measured qubit per shot; a bar from ~1 s up.
    let draws: u64 = circuits
        .circuits
        .iter()
        .map(|c| c.measured.len() as u64)
        .sum::<u64>()
        .saturating_mul(args.shots);
    let long_run = draws > 20_000_000;
    let counts = if long_run && std::io::stderr().is_terminal() {
        let bar = indicatif::ProgressBar::new(circuits.len() as u64).with_style(
            indicatif::ProgressStyle::with_template(
                "simulating {bar:40} {pos}/{len} circuits {eta}",
            )
            .unwrap_or_else(|_| indicatif::ProgressStyle::default_bar()),
        );
        let r =
            simulate::simulate_until(&layout, &circuits, &noise, &cfg, &|| bar.inc(1), &stopped);
        bar.finish_and_clear();
        r?
    } else {
        simulate::simulate_until(&layout, &circuits, &noise, &cfg, &|| {}, &stopped)?
    };
    let truth = simulate::truth::truth(&layout, &noise);
    let mut json = serde_json::to_string_pretty(&truth).context("serialising the truth file")?;
    json.push('\n');
    truth_out.write_with(|w| w.write_all(json.as_bytes()))?;
    out.write_with(|w| slackmap::counts::write_csv(w, &circuits, &counts))?;
    if stopped() {
        return Err(slackmap::Error::Interrupted.into());
    }
    out.commit()?;
    truth_out.commit()?;
    eprintln!(
        "wrote {} ({} circuits x {} shots) and {}",
        if is_stdout(&args.out) { "the counts".into() } else { args.out.display().to_string() },
        circuits.len(),
        args.shots,
        truth_path.display()
    );
    Ok(())
}
