//! `slackmap audit` and `slackmap demo`: run the audit, print the report, write the files.

use std::io::Write;
use std::path::{Path, PathBuf};

use anyhow::Context;
use sha2::{Digest, Sha256};

use slackmap::audit::{self, AuditConfig, Cancel};
use slackmap::confidence::partial::{self, Partial};
use slackmap::confidence::{BootstrapConfig, Resample};
use slackmap::counts::{read_counts_from, BitOrder, CountsFormat, CountsOptions};
use slackmap::files::{FolderRule, OutputDir};
use slackmap::limits::Limits;
use slackmap::model::Family;
use slackmap::report::{self, terminal, InputFile};

use super::inputs::{InputArgs, Inputs};
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
    /// `recalibrate` needs the estimate's one-sided lower bound at --level above it.
    #[arg(long, default_value = "1e-3", value_name = "TVD", value_parser = super::units::tvd_per_layer)]
    pub action_threshold: f64,
    /// Replicates of the context-permutation null per directed pair, and as many of the
    /// parametric null (at most 100,000 unless --no-limits). 0 turns detection off: a pair
    /// that needs context slack is then `not-tested`, never `clean`.
    #[arg(long, default_value_t = 200)]
    pub null_replicates: usize,
    /// Seed of every random draw; the same seed gives the same numbers on any thread count.
    #[arg(long, default_value_t = 0)]
    pub seed: u64,
    /// Worker threads (default: all cores; at most 1024 unless --no-limits). Reading the
    /// inputs adds two light threads of its own beside them (file reads, digests).
    #[arg(long)]
    pub threads: Option<usize>,
    /// Bootstrap replicates for intervals, ranks and verdicts (0 turns the bootstrap off;
    /// at most 100,000 unless --no-limits).
    #[arg(long, default_value_t = 200)]
    pub replicates: usize,
    /// What a bootstrap replicate resamples: each circuit's shots, or circuits within
    /// groups of the same pattern and depth and then their shots.
    #[arg(long, value_enum, default_value = "shots")]
    pub resample: ResampleArg,
    /// Level of the bootstrap intervals: two-sided for the [low..high] interval, one-sided for
    /// the lower bound that `recalibrate` rests on (0.95: the 5% quantile of the replicates).
    #[arg(long, default_value_t = 0.95)]
    pub level: f64,
    /// The k of each edge's probability of ranking in the top k.
    #[arg(long, default_value_t = 5)]
    pub top_k: usize,
    /// Compute only bootstrap replicates A..B (A included, B not) and write OUT/partial.json
    /// for `slackmap merge`, instead of the report.
    #[arg(long, value_name = "A..B", value_parser = parse_range)]
    pub replicate_range: Option<std::ops::Range<usize>>,
    /// Output folder (written atomically: an existing folder is replaced only when done;
    /// other files in it are kept; an existing file is refused).
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
#[command(after_help = "\
Examples:
  slackmap demo                          # the scenario built into the program
  slackmap demo --replicates 20 --null-replicates 20 --out quick   # a quicker look
  slackmap demo --data my-scenario/      # layout.toml, circuits.json, counts.csv

The demo scenario is described in demo-data/README.md of the source. Exit codes: 0
success, 1 the analysis failed, 2 bad input or usage, 130 interrupted.")]
pub struct DemoArgs {
    /// A scenario folder (layout.toml, circuits.json, counts.csv) to audit instead of the
    /// demo scenario built into the program.
    #[arg(long, value_name = "DIR")]
    data: Option<PathBuf>,
    /// Output folder.
    #[arg(long, value_name = "DIR", default_value = "demo-out")]
    out: PathBuf,
    /// Bootstrap replicates (fewer for a quicker look).
    #[arg(long, default_value_t = 200, value_name = "N")]
    replicates: usize,
    /// Permutation-null replicates per directed pair (fewer for a quicker look).
    #[arg(long, default_value_t = 200, value_name = "N")]
    null_replicates: usize,
    /// No progress bars.
    #[arg(long, short)]
    quiet: bool,
}

/// The demo scenario's files, built into the program so that `slackmap demo` runs from
/// any folder and wherever the binary is moved.
const DEMO_LAYOUT: &[u8] = include_bytes!("../../demo-data/layout.toml");
const DEMO_CIRCUITS: &[u8] = include_bytes!("../../demo-data/circuits.json");
const DEMO_COUNTS: &[u8] = include_bytes!("../../demo-data/counts.csv");

/// Runs `slackmap audit`.
pub fn run(args: AuditArgs) -> anyhow::Result<()> {
    let out = OutputDir::claim(&args.analysis.out, FolderRule::Update)?;
    check_analysis(&args.analysis)?;
    // Before reading: the readers already work in parallel.
    start_threads(args.analysis.threads)?;
    let loaded = args.inputs.load(Some(&args.counts))?;
    run_audit(loaded, args.inputs.bit_order.label(), &args.analysis, out)
}

/// Runs `slackmap demo`: the audit on the built-in scenario (or the one in `--data`).
pub fn demo(args: DemoArgs) -> anyhow::Result<()> {
    let out = OutputDir::claim(&args.out, FolderRule::Update)?;
    let analysis = AnalysisArgs {
        model: ModelArg::Depolarizing,
        alpha: 0.05,
        action_threshold: 1e-3,
        null_replicates: args.null_replicates,
        seed: 0,
        threads: None,
        replicates: args.replicates,
        resample: ResampleArg::Shots,
        level: 0.95,
        top_k: 5,
        replicate_range: None,
        out: args.out.clone(),
        label: None,
        quiet: args.quiet,
        timings: false,
    };
    check_analysis(&analysis)?;
    start_threads(analysis.threads)?;
    let loaded = match &args.data {
        Some(d) => {
            eprintln!("slackmap demo: auditing the scenario in {}", d.display());
            let inputs = InputArgs {
                layout: d.join("layout.toml"),
                circuits: d.join("circuits.json"),
                bit_order: super::inputs::BitOrderArg::AsMeasured,
                shots: None,
                allow_non_native: false,
                qubit_map: None,
            };
            inputs.load(Some(&d.join("counts.csv")))?
        }
        None => {
            eprintln!("slackmap demo: auditing the built-in demo scenario (a simulated 4x4 grid)");
            built_in_demo()?
        }
    };
    run_audit(loaded, "as-measured", &analysis, out)
}

/// Loads the built-in demo scenario; files are named `demo-data/...` in the report.
fn built_in_demo() -> anyhow::Result<Inputs> {
    let name = |f: &str| PathBuf::from(format!("demo-data/{f}"));
    let text = std::str::from_utf8(DEMO_LAYOUT).context("the built-in demo layout")?;
    let layout = slackmap::layout::parse_layout(text, &name("layout.toml"))?;
    let wire = serde_json::from_slice(DEMO_CIRCUITS).context("the built-in demo circuits")?;
    let circuits = slackmap::circuit::json::from_wire(wire, &name("circuits.json"), &layout)?;
    slackmap::circuit::validate::validate(&circuits, &layout, false)?;
    let opts = CountsOptions { bit_order: BitOrder::AsMeasured, shots: None };
    let (counts, warnings) =
        read_counts_from(DEMO_COUNTS, CountsFormat::Csv, &name("counts.csv"), &circuits, &opts)?;
    let digest = |role: &str, file: &str, bytes: &[u8]| InputFile {
        role: role.to_string(),
        path: format!("demo-data/{file} (built in)"),
        sha256: Sha256::digest(bytes).iter().map(|b| format!("{b:02x}")).collect(),
    };
    let files = vec![
        digest("layout", "layout.toml", DEMO_LAYOUT),
        digest("circuits", "circuits.json", DEMO_CIRCUITS),
        digest("counts", "counts.csv", DEMO_COUNTS),
    ];
    Ok(Inputs {
        layout,
        circuits,
        counts: Some(counts),
        counts_path: Some(name("counts.csv")),
        warnings,
        files,
    })
}

/// Checks the analysis settings against the limits, before any input is read.
fn check_analysis(a: &AnalysisArgs) -> anyhow::Result<()> {
    check_replicates("--replicates", a.replicates)?;
    check_replicates("--null-replicates", a.null_replicates)?;
    check_threads(a.threads)
}

/// Fails when a replicate count is above the limit (`--replicates`, `--null-replicates`).
pub fn check_replicates(option: &str, n: usize) -> anyhow::Result<()> {
    Ok(super::limits().check(option, n as u64, Limits::REPLICATES, "replicates")?)
}

fn check_threads(threads: Option<usize>) -> anyhow::Result<()> {
    let n = threads.unwrap_or(0) as u64;
    Ok(super::limits().check("--threads", n, Limits::THREADS, "threads")?)
}

/// Starts `threads` worker threads for the whole run (all cores when None).
pub fn start_threads(threads: Option<usize>) -> anyhow::Result<()> {
    check_threads(threads)?;
    if let Some(t) = threads {
        rayon::ThreadPoolBuilder::new()
            .num_threads(t.max(1))
            .build_global()
            .context("could not start the worker threads")?;
    }
    Ok(())
}

fn run_audit(
    loaded: Inputs,
    bit_order: &str,
    a: &AnalysisArgs,
    out: OutputDir,
) -> anyhow::Result<()> {
    let counts = loaded.counts.as_ref().context("counts were not read")?;
    loaded.require_agreement()?;
    let cfg = AuditConfig {
        family: a.model.family(),
        alpha: a.alpha,
        action_threshold_tvd_per_layer: a.action_threshold,
        null_replicates: a.null_replicates,
        seed: a.seed,
        bit_order: bit_order.to_string(),
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
    let bar = Bar::new(a.quiet).with_timings(a.timings);
    let progress = Cancel { inner: &bar, flag: super::stop_flag() };
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
        out.write_files(&[(partial::FILE_NAME.to_string(), bytes)])?;
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
    audit::finish(&mut rep, &replicates, &cfg.bootstrap)?;
    write_claimed_and_print(&mut rep, out)
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

/// Stamps the creation time, writes every audit file into `out_dir` and prints the terminal
/// report (merge).
pub fn write_and_print(rep: &mut report::AuditReport, out_dir: &Path) -> anyhow::Result<()> {
    write_claimed_and_print(rep, OutputDir::claim(out_dir, FolderRule::Update)?)
}

/// Stamps the creation time, writes every audit file into the claimed folder and prints the
/// terminal report.
fn write_claimed_and_print(rep: &mut report::AuditReport, out: OutputDir) -> anyhow::Result<()> {
    rep.created = Some(creation_time()?);
    let rep = &*rep;
    let out_dir = out.shown().to_path_buf();
    let files = report::audit_files(rep);
    out.write_files(&files)?;
    let style = super::style::stdout_style();
    let text = terminal::render(rep, &terminal::TerminalOptions { style, ..Default::default() });
    let mut out = std::io::stdout().lock();
    out.write_all(text.as_bytes())?;
    let main_file =
        if files.iter().any(|(n, _)| n == "report.html") { "report.html" } else { "audit.json" };
    writeln!(out, "\nWrote {}", out_dir.join(main_file).display())?;
    Ok(())
}
