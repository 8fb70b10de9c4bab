//! `slackmap simulate`: reads a layout, circuits and a noise file, writes counts and truth.
//!
//! Both outputs are written atomically (a temporary file beside the target, then a
//! rename), so an interrupted run never leaves a half-written file behind.

use std::io::{IsTerminal, Write};
use std::path::{Path, PathBuf};

use anyhow::Context;
use slackmap::simulate::{self, Noise, SimConfig};

const EXAMPLE: &str = "Example:
  slackmap simulate --layout chip.toml --circuits circuits.json --noise noise.toml \\
      --shots 1000 --seed 7 --out counts.csv

Writes counts.csv (circuit,outcome,count; character i of outcome is the i-th measured qubit)
and truth.json beside it: the injected context error of every directed neighbour pair and the
intrinsic error of every operation kind, as half diamond-norm distance and infidelity.
The same seed gives the same counts on any number of threads.

Exit codes: 0 success, 1 the analysis failed, 2 bad input or usage.";

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
    /// Shots per circuit.
    #[arg(long, default_value_t = 1000, value_parser = clap::value_parser!(u64).range(1..))]
    shots: u64,
    /// Seed; circuit i draws from a generator seeded by (seed, i) alone.
    #[arg(long, default_value_t = 0)]
    seed: u64,
    /// Counts file to write (CSV).
    #[arg(long, value_name = "FILE")]
    out: PathBuf,
    /// Truth file to write (JSON) [default: truth.json beside --out].
    #[arg(long, value_name = "FILE")]
    truth: Option<PathBuf>,
}

/// Runs the subcommand.
pub fn run(args: SimulateArgs) -> anyhow::Result<()> {
    let layout = slackmap::layout::read_layout(&args.layout)?;
    let circuits = slackmap::circuit::validate::read_circuits(
        &args.circuits,
        &layout,
        &slackmap::circuit::validate::ReadOptions::default(),
    )?;
    let noise = Noise::read(&args.noise, &layout)?;
    let cfg = SimConfig { shots: args.shots, seed: args.seed };
    let truth_path = args
        .truth
        .clone()
        .unwrap_or_else(|| args.out.parent().unwrap_or_else(|| Path::new("")).join("truth.json"));
    if truth_path == args.out {
        return Err(slackmap::Error::Usage(format!(
            "--truth and --out are the same file ({}); give them different paths",
            args.out.display()
        ))
        .into());
    }
    // Sampling dominates: about one draw per measured qubit per shot; a bar from ~1 s up.
    let draws: u64 =
        circuits.circuits.iter().map(|c| c.measured.len() as u64).sum::<u64>() * args.shots;
    let long_run = draws > 20_000_000;
    let counts = if long_run && std::io::stderr().is_terminal() {
        let bar = indicatif::ProgressBar::new(circuits.len() as u64).with_style(
            indicatif::ProgressStyle::with_template(
                "simulating {bar:40} {pos}/{len} circuits {eta}",
            )
            .unwrap_or_else(|_| indicatif::ProgressStyle::default_bar()),
        );
        let r = simulate::simulate_with_progress(&layout, &circuits, &noise, &cfg, &|| bar.inc(1));
        bar.finish_and_clear();
        r?
    } else {
        simulate::simulate(&layout, &circuits, &noise, &cfg)?
    };
    let truth = simulate::truth::truth(&layout, &noise);
    let mut json = serde_json::to_string_pretty(&truth).context("serialising the truth file")?;
    json.push('\n');
    write_atomic(&args.out, |w| slackmap::counts::write_csv(w, &circuits, &counts))?;
    write_atomic(&truth_path, |w| w.write_all(json.as_bytes()))?;
    eprintln!(
        "wrote {} ({} circuits x {} shots) and {}",
        args.out.display(),
        circuits.len(),
        args.shots,
        truth_path.display()
    );
    Ok(())
}

/// Streams `fill` into a temporary file beside `path`, then renames it into place.
fn write_atomic(
    path: &Path,
    fill: impl FnOnce(&mut dyn Write) -> std::io::Result<()>,
) -> anyhow::Result<()> {
    let name = path.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default();
    let tmp = path.with_file_name(format!(".{name}.{}.tmp", std::process::id()));
    let io = |e| slackmap::Error::io(path, e);
    let written = (|| {
        let mut w = std::io::BufWriter::new(std::fs::File::create(&tmp)?);
        fill(&mut w)?;
        w.into_inner().map_err(|e| e.into_error())?.sync_all()?;
        std::fs::rename(&tmp, path)
    })();
    if let Err(e) = written {
        let _ = std::fs::remove_file(&tmp);
        return Err(io(e).into());
    }
    Ok(())
}
