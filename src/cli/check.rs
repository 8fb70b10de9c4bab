//! `slackmap check`: reads layout, circuits and (optionally) counts, validates them
//! together and prints what the data covers and what is missing.

use std::path::PathBuf;

use slackmap::check::{self, CheckSummary, Spread};
use slackmap::layout::Layout;
use slackmap::report::terminal::{self, Style};

use super::inputs::InputArgs;

/// Arguments of `slackmap check`.
#[derive(clap::Args, Debug)]
pub struct CheckArgs {
    #[command(flatten)]
    inputs: InputArgs,
    /// Counts file (.csv or .json); without it only layout and circuits are checked.
    #[arg(long, value_name = "FILE")]
    counts: Option<PathBuf>,
}

/// Runs the check and prints its summary.
pub fn run(args: CheckArgs) -> anyhow::Result<()> {
    let loaded = args.inputs.load(args.counts.as_deref())?;
    let summary = check::summarise(&loaded.layout, &loaded.circuits, loaded.counts.as_ref())?;
    print(&loaded.layout, &summary, super::style::stdout_style());
    for w in &loaded.warnings {
        println!("warning: {w}");
    }
    Ok(())
}

/// The two columns of the summary table, drawn like every other command's tables.
struct Rows(Vec<terminal::Column>);

impl Rows {
    fn add_row(&mut self, [what, value]: [String; 2]) {
        terminal::push_row(&mut self.0, [terminal::text(what), terminal::text(value)]);
    }
}

/// Physical qubits listed by name in the placement row.
const PLACEMENT_SHOWN: usize = 16;

fn spread<T: std::fmt::Display>(s: &Option<Spread<T>>) -> String {
    match s {
        Some(s) => format!("{} / {} / {}", s.min, s.median, s.max),
        None => "-".into(),
    }
}

fn print(layout: &Layout, s: &CheckSummary, style: Style) {
    let id = |q: usize| layout.id(q).to_string();
    let pair = |&(a, b): &(usize, usize), sep: &str| format!("{}{sep}{}", id(a), id(b));
    let list = |v: Vec<String>| if v.is_empty() { "none".to_string() } else { v.join(", ") };
    let mut t = Rows(terminal::columns(&[("", 0), ("value", 0)]));
    t.add_row(["layout".to_string(), format!("{} ({} qubits)", layout.name, layout.n_qubits())]);
    t.add_row([
        "placement of OpenQASM $k (k-th qubit of the layout file)".to_string(),
        layout.placement(PLACEMENT_SHOWN),
    ]);
    t.add_row(["circuits".to_string(), s.n_circuits.to_string()]);
    if s.delays.count > 0 {
        t.add_row([
            "delays (read as idle layers; durations recorded, not modelled)".to_string(),
            s.delays.describe(),
        ]);
    }
    t.add_row(["layers (min / median / max)".to_string(), spread(&s.layers)]);
    t.add_row(["blocks (1q / 2q)".to_string(), format!("{} / {}", s.blocks_1q, s.blocks_2q)]);
    t.add_row(["shots per circuit (min / median / max)".to_string(), spread(&s.shots)]);
    if let Some(a) = &s.agreement {
        t.add_row([
            "agreement with ideal outcomes (1 = ideal, 0 = chance)".to_string(),
            format!("{:.3} as read ({:.3} with reversed outcome strings)", a.as_read, a.reversed),
        ]);
    }
    t.add_row([
        "qubits with reference rows".to_string(),
        format!("{} of {}", s.qubits_with_reference.len(), layout.n_qubits()),
    ]);
    t.add_row([
        "qubits WITHOUT reference rows".to_string(),
        list(s.qubits_without_reference.iter().map(|&q| id(q)).collect()),
    ]);
    t.add_row([
        "couplers with reference rows".to_string(),
        format!("{} of {}", s.couplers_with_reference.len(), layout.couplers.len()),
    ]);
    t.add_row([
        "couplers WITHOUT reference rows".to_string(),
        list(s.couplers_without_reference.iter().map(|p| pair(p, "-")).collect()),
    ]);
    t.add_row([
        "directed neighbour pairs seen as context".to_string(),
        format!("{} of {}", s.directed_pairs - s.pairs_never_context.len(), s.directed_pairs),
    ]);
    t.add_row([
        "pairs never a context (victim <- aggressor)".to_string(),
        list(s.pairs_never_context.iter().map(|p| pair(p, " <- ")).collect()),
    ]);
    println!("{}", terminal::draw(&t.0, style));
    if s.warnings.is_empty() {
        println!("no problems found");
    } else {
        println!("{} problem(s) found:", s.warnings.len());
        for w in &s.warnings {
            println!("  [{}] {w}", w.code);
        }
    }
}
