//! `slackmap audit` and `slackmap demo`: run the audit, print the report, write the files.

use std::io::Write;
use std::path::{Path, PathBuf};
use std::sync::atomic::AtomicBool;
use std::sync::Arc;

use anyhow::Context;

use slackmap::audit::{self, AuditConfig, Cancel};
use slackmap::confidence::partial::{self, Partial};
use slackmap::confidence::{self, BootstrapConfig, Resample};
use slackmap::model::Family;
use slackmap::report::{self, terminal};

use super::inputs::InputArgs;
use super::progress::Bar;

/// Error family of the crosstalk-free model.
#[derive(clap::ValueEnum, Clone, Copy, Debug, PartialEq, Eq)]
pub enum ModelArg {
    /// One depolarizing rate per operation kind (fastest; blind to the error's axis).
    Depolarizing,
    /// Stochastic Pauli channel: 3 rates per one-qubit kind, 15 per two-qubit kind.
    Pauli,
    /// A Pauli channel composed with a small coherent rotation (6 / 30 parameters).
    #[value(name = "pauli+coherent")]
    PauliCoherent,
}

impl ModelArg {
    /// The model family this argument names.
    pub fn family(self) -> Family {
        match self {
            ModelArg::Depolarizing => Family::Depolarizing,
            ModelArg::Pauli => Family::Pauli,
            ModelArg::PauliCoherent => Family::PauliCoherent,
        }
    }
}

/// Settings of the analysis (shared by `audit` and `demo`).
#[derive(clap::Args, Debug, Clone)]
pub struct AnalysisArgs {
    /// Error family of the crosstalk-free model fitted to the reference circuits.
    #[arg(long, value_enum, default_value = "depolarizing")]
    pub model: ModelArg,
    /// Family-wise error level: each row's threshold is the chi-squared quantile at
    /// 1 - alpha/R (R rows), and detection uses the (1 - alpha) null quantile.
    #[arg(long, default_value_t = 0.05)]
    pub alpha: f64,
    /// Context slack per layer above which a detected edge is worth recalibrating: raw TVD
    /// (0.001, 1e-3) or in the tables' unit of 1e-3 with suffix m (1m = 0.001); at most 0.5.
    #[arg(long, default_value = "1e-3", value_name = "TVD", value_parser = super::units::tvd_per_layer)]
    pub action_threshold: f64,
    /// Replicates of the context-permutation null per directed pair (0 turns detection off).
    #[arg(long, default_value_t = 200)]
    pub null_replicates: usize,
    /// Seed of every random draw; the same seed gives the same numbers on any thread count.
    #[arg(long, default_value_t = 0)]
    pub seed: u64,
    /// Worker threads (default: all cores).
    #[arg(long)]
    pub threads: Option<usize>,
    /// Bootstrap replicates for intervals, ranks and verdicts (0 turns the bootstrap off).
    #[arg(long, default_value_t = 200)]
    pub replicates: usize,
    /// What a bootstrap replicate resamples: each circuit's shots, or circuits within
    /// groups of the same pattern and depth and then their shots.
    #[arg(long, value_enum, default_value = "shots")]
    pub resample: ResampleArg,
    /// Two-sided level of the bootstrap intervals.
    #[arg(long, default_value_t = 0.95)]
    pub level: f64,
    /// The k of each edge's probability of ranking in the top k.
    #[arg(long, default_value_t = 5)]
    pub top_k: usize,
    /// Compute only bootstrap replicates A..B (A included, B not) and write OUT/partial.json
    /// for `slackmap merge`, instead of the report.
    #[arg(long, value_name = "A..B", value_parser = parse_range)]
    pub replicate_range: Option<std::ops::Range<usize>>,
    /// Output folder (written atomically: an existing folder is replaced only when done).
    #[arg(long, value_name = "DIR")]
    pub out: PathBuf,
    /// A label recorded in audit.json and shown on every output, e.g. "chip 7, cooldown 3".
    #[arg(long, value_name = "TEXT")]
    pub label: Option<String>,
    /// No progress bars.
    #[arg(long, short)]
    pub quiet: bool,
    /// Print each stage's wall time and the peak memory after it to stderr.
    #[arg(long)]
    pub timings: bool,
}

/// Bootstrap resampling scheme.
#[derive(clap::ValueEnum, Clone, Copy, Debug, PartialEq, Eq)]
pub enum ResampleArg {
    /// Every circuit's shots, from its observed outcome frequencies.
    Shots,
    /// Circuits within groups of equal pattern and depth, then their shots.
    Circuits,
}

fn parse_range(s: &str) -> Result<std::ops::Range<usize>, String> {
    let bad = || format!("'{s}' is not a range A..B of replicate indices, e.g. 0..100");
    let (a, b) = s.split_once("..").ok_or_else(bad)?;
    let a: usize = a.trim().parse().map_err(|_| bad())?;
    let b: usize = b.trim().parse().map_err(|_| bad())?;
    if a >= b {
        return Err(format!("range {a}..{b} is empty: A must be below B"));
    }
    Ok(a..b)
}

const AUDIT_HELP: &str = "Examples:
  slackmap audit --layout chip.toml --circuits run1/circuits.json --counts run1/counts.csv \\
      --label \"chip 7, cooldown 3\" --out run1/audit
  slackmap audit ... --action-threshold 0.5m --replicates 400 --out run1/audit   # 0.5e-3 per layer
  slackmap audit ... --replicate-range 0..50 --out shards/0 -q   # one shard; then `slackmap merge`

Writes audit.json, edges.csv, replicates.csv, adjacency.csv, intrinsic.csv, rows.csv, \
adjacency.svg, layout.svg and report.html into DIR and prints the report. Values are shown in \
1e-3 TVD per layer; the files keep full precision. audit.json records the time it was written: \
set SOURCE_DATE_EPOCH (seconds since 1970) to fix it, e.g. to compare two runs byte for byte. \
Terminal tables fit the width in COLUMNS, else the terminal's (columns are dropped by priority; \
the files keep every column); colour only on a terminal and never with NO_COLOR set. Progress \
goes to stderr: a bar on a terminal, a plain line every few seconds otherwise (-q: none).

Exit codes: 0 success, 1 the analysis failed, 2 bad input or usage, 130 interrupted.";

/// Arguments of `slackmap audit`.
#[derive(clap::Args, Debug)]
#[command(after_help = AUDIT_HELP)]
pub struct AuditArgs {
    #[command(flatten)]
    inputs: InputArgs,
    /// Counts file (.csv `circuit,outcome,count`, or .json {circuit: {outcome: count}}).
    #[arg(long, value_name = "FILE")]
    counts: PathBuf,
    #[command(flatten)]
    analysis: AnalysisArgs,
}

/// Arguments of `slackmap demo`.
#[derive(clap::Args, Debug)]
pub struct DemoArgs {
    /// The demo scenario folder (layout.toml, circuits.json, counts.csv).
    #[arg(long, value_name = "DIR", default_value = concat!(env!("CARGO_MANIFEST_DIR"), "/demo-data"))]
    data: PathBuf,
    /// Output folder.
    #[arg(long, value_name = "DIR", default_value = "demo-out")]
    out: PathBuf,
    /// No progress bars.
    #[arg(long, short)]
    quiet: bool,
}

/// Runs `slackmap audit`.
pub fn run(args: AuditArgs) -> anyhow::Result<()> {
    run_audit(&args.inputs, &args.counts, &args.analysis)
}

/// Runs `slackmap demo`: the audit on the bundled scenario.
pub fn demo(args: DemoArgs) -> anyhow::Result<()> {
    let d = &args.data;
    let inputs = InputArgs {
        layout: d.join("layout.toml"),
        circuits: d.join("circuits.json"),
        bit_order: super::inputs::BitOrderArg::AsMeasured,
        allow_non_native: false,
        qubit_map: None,
    };
    let analysis = AnalysisArgs {
        model: ModelArg::Depolarizing,
        alpha: 0.05,
        action_threshold: 1e-3,
        null_replicates: 200,
        seed: 0,
        threads: None,
        replicates: 200,
        resample: ResampleArg::Shots,
        level: 0.95,
        top_k: 5,
        replicate_range: None,
        out: args.out.clone(),
        label: None,
        quiet: args.quiet,
        timings: false,
    };
    eprintln!("slackmap demo: auditing the bundled scenario in {}", d.display());
    run_audit(&inputs, &d.join("counts.csv"), &analysis)
}

/// Starts `threads` worker threads for the whole run (all cores when None).
pub fn start_threads(threads: Option<usize>) -> anyhow::Result<()> {
    if let Some(t) = threads {
        rayon::ThreadPoolBuilder::new()
            .num_threads(t.max(1))
            .build_global()
            .context("could not start the worker threads")?;
    }
    Ok(())
}

fn run_audit(inputs: &InputArgs, counts: &Path, a: &AnalysisArgs) -> anyhow::Result<()> {
    start_threads(a.threads)?;
    let loaded = inputs.load(Some(counts))?;
    let counts = loaded.counts.as_ref().context("counts were not read")?;
    let cfg = AuditConfig {
        family: a.model.family(),
        alpha: a.alpha,
        action_threshold_tvd_per_layer: a.action_threshold,
        null_replicates: a.null_replicates,
        seed: a.seed,
        bit_order: inputs.bit_order.label().to_string(),
        inputs: loaded.files.clone(),
        bootstrap: BootstrapConfig {
            replicates: a.replicates,
            resample: match a.resample {
                ResampleArg::Shots => Resample::Shots,
                ResampleArg::Circuits => Resample::Circuits,
            },
            level: a.level,
            top_k: a.top_k,
            range: a.replicate_range.clone(),
        },
    };
    cfg.validate()?;
    let stop = Arc::new(AtomicBool::new(false));
    {
        let stop = stop.clone();
        let _ = ctrlc::set_handler(move || stop.store(true, std::sync::atomic::Ordering::SeqCst));
    }
    let bar = Bar::new(a.quiet).with_timings(a.timings);
    let progress = Cancel { inner: &bar, flag: &stop };
    let (mut rep, replicates) =
        audit::run_parts(&loaded.layout, &loaded.circuits, counts, &cfg, &progress)?;
    bar.finish();
    for w in &loaded.warnings {
        rep.warnings.insert(0, w.into());
    }
    rep.label = a.label.clone();
    if cfg.bootstrap.range.is_some() {
        let part = Partial::new(rep, replicates, &cfg.bootstrap);
        let bytes = serde_json::to_vec_pretty(&part).context("could not encode the partial")?;
        report::write_folder(&a.out, &[(partial::FILE_NAME.to_string(), bytes)])?;
        let r = cfg.bootstrap.computed();
        eprintln!(
            "Wrote replicates {}..{} of {} to {}; combine the parts with `slackmap merge`",
            r.start,
            r.end,
            cfg.bootstrap.replicates,
            a.out.join(partial::FILE_NAME).display()
        );
        return Ok(());
    }
    confidence::finish(&mut rep, &replicates, &cfg.bootstrap)?;
    write_and_print(&mut rep, &a.out)
}

/// The time an audit is written, RFC 3339 UTC: `SOURCE_DATE_EPOCH` (seconds since 1970, the
/// reproducible-builds convention) when set, else the system clock.
pub fn creation_time() -> anyhow::Result<String> {
    let secs = match std::env::var("SOURCE_DATE_EPOCH") {
        Ok(v) => v.trim().parse::<u64>().map_err(|_| {
            slackmap::Error::Usage(format!(
                "SOURCE_DATE_EPOCH '{v}' is not a whole number of seconds since 1970-01-01 UTC"
            ))
        })?,
        Err(_) => std::time::SystemTime::now()
            .duration_since(std::time::UNIX_EPOCH)
            .map(|d| d.as_secs())
            .unwrap_or(0),
    };
    Ok(report::rfc3339_utc(secs))
}

/// Stamps the creation time, writes every audit file into `out` and prints the terminal
/// report (audit and merge).
pub fn write_and_print(rep: &mut report::AuditReport, out_dir: &Path) -> anyhow::Result<()> {
    rep.created = Some(creation_time()?);
    let rep = &*rep;
    let files = report::audit_files(rep);
    report::write_folder(out_dir, &files)?;
    let style = super::style::stdout_style();
    let text = terminal::render(rep, &terminal::TerminalOptions { style, ..Default::default() });
    let mut out = std::io::stdout().lock();
    out.write_all(text.as_bytes())?;
    let main_file =
        if files.iter().any(|(n, _)| n == "report.html") { "report.html" } else { "audit.json" };
    writeln!(out, "\nWrote {}", out_dir.join(main_file).display())?;
    Ok(())
}
