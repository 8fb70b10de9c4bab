//! `slackmap plan`: how many shots the design needs, from simulated audits.
//!
//! Converts the arguments into a validated [`PlanConfig`], runs the plan with a progress
//! bar and Ctrl-C handling, prints the tables and writes plan.json only when all is done.

use slackmap::audit::{AuditConfig, Cancel};
use slackmap::files::{FolderRule, OutputDir};
use slackmap::plan::{self, PlanConfig};
use slackmap::simulate::Noise;
use std::io::Write;
use std::path::PathBuf;

use super::progress::Bar;

const EXAMPLE: &str = "Example:
  slackmap plan --layout layouts/grid-4x4.toml --noise demo-data/noise.toml \\
      --shots 300,1000,3000 --out plan1

For each shot count: designs the circuits, simulates them under the noise file with its
crosstalk removed (context, zz and readout crosstalk terms), audits them for every edge's
sensitivity (the least estimate its rows could tell from zero), then injects context
errors of growing size (stochastic: extra depolarizing; coherent: a rotation about X) on
the pairs with the median and the worst sensitivity until the audit flags them, and
recommends a shot count for the --target (e.g. --target 0.5m for 0.5e-3 per layer). With
--gate-pairs (the same selection as design: alone, all, or couplers) the design holds gate-pair
circuits too: the plan counts their patterns and circuits and searches the gate-on-gate
directions of median and worst sensitivity the same way (a two-qubit depolarizing rate on the
victim's gate while the aggressor's gate runs), which gives the gate pairs' detection level
per shot count. Progress
goes to stderr: a bar on a terminal, a plain line every few seconds otherwise. Writes plan1/plan.json (no wall-clock times in
it: the same inputs and seed give the same file on any machine and thread count).

Exit codes: 0 success, 1 the analysis failed, 2 bad input or usage, 130 interrupted.";

/// Plan shot counts from simulated audits of a crosstalk-free version of a noise scenario.
#[derive(clap::Args, Debug)]
#[command(after_help = EXAMPLE)]
pub struct PlanArgs {
    /// Layout file (TOML).
    #[arg(long, value_name = "FILE")]
    layout: PathBuf,
    /// Noise scenario (TOML); its crosstalk terms are removed for the baseline.
    #[arg(long, value_name = "FILE")]
    noise: PathBuf,
    /// Shots per circuit to evaluate, comma separated, increasing.
    #[arg(long, value_delimiter = ',', default_value = "300,1000,3000", value_name = "LIST")]
    shots: Vec<u64>,
    /// The design every shot count is evaluated on (as `slackmap design`).
    #[command(flatten)]
    design: super::design::SequenceArgs,
    /// Seed of the design, the simulated data and the audits.
    #[arg(long, default_value_t = 0, value_name = "S")]
    seed: u64,
    /// Error family of the audits' crosstalk-free model.
    #[arg(long, value_enum, default_value = "depolarizing")]
    model: super::audit::ModelArg,
    /// Family-wise error level of every audit (as `slackmap audit --alpha`).
    #[arg(long, default_value_t = 0.05)]
    alpha: f64,
    /// The audits' action threshold (as `slackmap audit --action-threshold`): raw TVD per
    /// layer (1e-3) or in the tables' unit with suffix m (1m).
    #[arg(long, default_value = "1e-3", value_name = "TVD", value_parser = super::units::tvd_per_layer)]
    action_threshold: f64,
    /// Worker threads (default: all cores); results do not depend on it.
    #[arg(long)]
    threads: Option<usize>,
    /// Context-permutation null replicates per directed pair in every audit.
    #[arg(long, default_value_t = 100, value_name = "N")]
    null_replicates: usize,
    /// Independent data sets per tested size; a size counts as flagged only when all flag it.
    #[arg(long, default_value_t = 2, value_name = "N")]
    trials: usize,
    /// Bisection steps after the factor-2 ladder has bracketed the smallest flagged size.
    #[arg(long, default_value_t = 3, value_name = "N")]
    bisection_steps: usize,
    /// Stochastic crosstalk per layer the recommendation is for: raw TVD per layer (1e-3) or
    /// in the tables' unit of 1e-3 with suffix m (1m = 0.001); at most 0.5.
    #[arg(long, default_value = "1e-3", value_name = "TVD", value_parser = super::units::tvd_per_layer)]
    target: f64,
    /// Output folder for plan.json (written atomically, only when the plan is complete).
    #[arg(long, value_name = "DIR")]
    out: PathBuf,
    /// No progress bars.
    #[arg(long, short)]
    quiet: bool,
}

/// Runs `slackmap plan`.
pub fn run(args: PlanArgs) -> anyhow::Result<()> {
    let out = OutputDir::claim(&args.out, FolderRule::Update)?;
    super::audit::start_threads(args.threads)?;
    for &s in &args.shots {
        super::simulate::check_shots(s)?;
    }
    super::audit::check_replicates("--null-replicates", args.null_replicates)?;
    let layout = slackmap::layout::read_layout(&args.layout)?;
    let noise = Noise::read(&args.noise, &layout)?;
    let design = args.design.config(args.seed)?;
    let cfg = PlanConfig {
        shots: args.shots.clone(),
        design,
        audit: AuditConfig {
            family: args.model.family(),
            alpha: args.alpha,
            action_threshold_tvd_per_layer: args.action_threshold,
            null_replicates: args.null_replicates,
            seed: args.seed,
            bit_order: "as-measured".into(),
            inputs: Vec::new(),
            bootstrap: slackmap::confidence::BootstrapConfig::default(),
        },
        seed: args.seed,
        trials: args.trials,
        bisection_steps: args.bisection_steps,
        target_tvd_per_layer: args.target,
    };
    cfg.validate()?;
    let bar = Bar::new(args.quiet);
    let progress = Cancel { inner: &bar, flag: super::stop_flag() };
    let result = plan::plan(&layout, &noise, &cfg, &progress);
    bar.finish();
    let report = result?;
    out.write_files(&[("plan.json".into(), plan::plan_json(&report))])?;
    let mut out = std::io::stdout().lock();
    out.write_all(plan::render_terminal(&report, super::style::stdout_style()).as_bytes())?;
    writeln!(out, "\nWrote {}", args.out.join("plan.json").display())?;
    Ok(())
}
