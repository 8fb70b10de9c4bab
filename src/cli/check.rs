//! `slackmap check`: reads layout, circuits and (optionally) counts, validates them
//! together and prints what the data covers and what is missing.

use std::path::{Path, PathBuf};

use comfy_table::{ContentArrangement, Table};

use slackmap::check::{self, CheckSummary, Spread};
use slackmap::circuit::qasm::QubitMap;
use slackmap::circuit::validate::{read_circuits, ReadOptions};
use slackmap::layout::Layout;

/// How outcome strings in a counts file are ordered.
#[derive(clap::ValueEnum, Clone, Copy, Debug, PartialEq, Eq)]
pub enum BitOrder {
    /// Character i is the i-th measured qubit.
    AsMeasured,
    /// Character i is the i-th measured qubit counted from the end.
    Reversed,
}

/// Arguments of `slackmap check`.
#[derive(clap::Args, Debug)]
pub struct CheckArgs {
    /// Layout file (TOML).
    #[arg(long)]
    layout: PathBuf,
    /// Circuits: a .json file, a .qasm file or a folder of .qasm files.
    #[arg(long)]
    circuits: PathBuf,
    /// Counts file (.csv or .json).
    #[arg(long)]
    counts: Option<PathBuf>,
    /// Order of the characters of each outcome string in the counts file.
    #[arg(long, value_enum, default_value = "as-measured")]
    bit_order: BitOrder,
    /// Accept gates that are not native on the layout.
    #[arg(long)]
    allow_non_native: bool,
    /// Where declared OpenQASM qubits sit: `q[0]=q3,q[1]=q4`, or a file of such entries.
    #[arg(long, value_name = "MAP|FILE")]
    qubit_map: Option<String>,
}

/// Runs the check and prints its summary.
pub fn run(args: CheckArgs) -> anyhow::Result<()> {
    let layout = shim::read_layout(&args.layout)?;
    let qubit_map = args.qubit_map.as_deref().map(QubitMap::from_arg).transpose()?;
    let opts = ReadOptions { allow_non_native: args.allow_non_native, qubit_map };
    let set = read_circuits(&args.circuits, &layout, &opts)?;
    let counts = match &args.counts {
        Some(p) => Some(shim::read_counts(p, &set, args.bit_order == BitOrder::Reversed)?),
        None => None,
    };
    let summary = check::summarise(&layout, &set, counts.as_ref())?;
    print(&layout, &summary);
    Ok(())
}

fn spread<T: std::fmt::Display>(s: &Option<Spread<T>>) -> String {
    match s {
        Some(s) => format!("{} / {} / {}", s.min, s.median, s.max),
        None => "-".into(),
    }
}

fn print(layout: &Layout, s: &CheckSummary) {
    let id = |q: usize| layout.id(q).to_string();
    let pair = |&(a, b): &(usize, usize), sep: &str| format!("{}{sep}{}", id(a), id(b));
    let list = |v: Vec<String>| if v.is_empty() { "none".to_string() } else { v.join(", ") };
    let mut t = Table::new();
    t.set_content_arrangement(ContentArrangement::Dynamic).set_header(vec!["", "value"]);
    t.add_row(vec![
        "layout".to_string(),
        format!("{} ({} qubits)", layout.name, layout.n_qubits()),
    ]);
    t.add_row(vec!["circuits".to_string(), s.n_circuits.to_string()]);
    t.add_row(vec!["layers (min / median / max)".to_string(), spread(&s.layers)]);
    t.add_row(vec!["blocks (1q / 2q)".to_string(), format!("{} / {}", s.blocks_1q, s.blocks_2q)]);
    t.add_row(vec!["shots per circuit (min / median / max)".to_string(), spread(&s.shots)]);
    t.add_row(vec![
        "qubits with reference rows".to_string(),
        format!("{} of {}", s.qubits_with_reference.len(), layout.n_qubits()),
    ]);
    t.add_row(vec![
        "qubits WITHOUT reference rows".to_string(),
        list(s.qubits_without_reference.iter().map(|&q| id(q)).collect()),
    ]);
    t.add_row(vec![
        "couplers with reference rows".to_string(),
        format!("{} of {}", s.couplers_with_reference.len(), layout.couplers.len()),
    ]);
    t.add_row(vec![
        "couplers WITHOUT reference rows".to_string(),
        list(s.couplers_without_reference.iter().map(|p| pair(p, "-")).collect()),
    ]);
    t.add_row(vec![
        "directed neighbour pairs seen as context".to_string(),
        format!("{} of {}", s.directed_pairs - s.pairs_never_context.len(), s.directed_pairs),
    ]);
    t.add_row(vec![
        "pairs never a context (victim <- aggressor)".to_string(),
        list(s.pairs_never_context.iter().map(|p| pair(p, " <- ")).collect()),
    ]);
    println!("{t}");
    if s.warnings.is_empty() {
        println!("no problems found");
    } else {
        println!("{} problem(s) found:", s.warnings.len());
        for w in &s.warnings {
            println!("  [{}] {w}", w.code);
        }
    }
}

/// TEMPORARY stand-ins for `slackmap::layout::read_layout(path)` and
/// `slackmap::counts::read_counts(path, &CircuitSet, &CountsOptions)`, which land
/// separately; replace the two calls in `run` and delete this module then.
mod shim {
    use std::collections::BTreeMap;

    use serde::Deserialize;
    use slackmap::circuit::CircuitSet;
    use slackmap::counts::{CircuitCounts, Counts, Outcome};
    use slackmap::gate::Gate;
    use slackmap::layout::{Layout, NativeGates, Qubit};
    use slackmap::{Error, Result};

    use super::Path;

    #[derive(Deserialize)]
    #[serde(deny_unknown_fields)]
    struct LayoutFile {
        name: String,
        qubits: Vec<QubitEntry>,
        #[serde(default)]
        couplers: Vec<(String, String)>,
        gates: GatesEntry,
        #[serde(default)]
        neighbourhood: Option<Hood>,
    }

    #[derive(Deserialize)]
    #[serde(deny_unknown_fields)]
    struct QubitEntry {
        id: String,
        position: Option<[f64; 2]>,
    }

    #[derive(Deserialize)]
    #[serde(deny_unknown_fields)]
    struct GatesEntry {
        one_qubit: Vec<String>,
        #[serde(rename = "virtual", default)]
        virtual_gates: Vec<String>,
        two_qubit: String,
    }

    #[derive(Deserialize)]
    #[serde(deny_unknown_fields)]
    struct Hood {
        radius: Option<usize>,
        #[serde(default)]
        extra_pairs: Vec<(String, String)>,
    }

    pub fn read_layout(path: &Path) -> Result<Layout> {
        let text = std::fs::read_to_string(path).map_err(|e| Error::io(path, e))?;
        let f: LayoutFile = toml::from_str(&text).map_err(|e| {
            let line = e.span().map(|s| text[..s.start.min(text.len())].lines().count().max(1));
            Error::input(path, line, e.message().to_string())
        })?;
        let gate = |n: &String| {
            Gate::from_name(n).ok_or_else(|| {
                Error::input(
                    path,
                    None,
                    format!("unknown gate '{n}' (known: {})", Gate::known_names()),
                )
            })
        };
        let gates = NativeGates {
            one_qubit: f.gates.one_qubit.iter().map(gate).collect::<Result<_>>()?,
            virtual_gates: f.gates.virtual_gates.iter().map(gate).collect::<Result<_>>()?,
            two_qubit: gate(&f.gates.two_qubit)?,
        };
        let qubits =
            f.qubits.into_iter().map(|q| Qubit { id: q.id, position: q.position }).collect();
        let (radius, extra) =
            f.neighbourhood.map_or((1, Vec::new()), |h| (h.radius.unwrap_or(1), h.extra_pairs));
        Layout::new(f.name, qubits, f.couplers, gates, radius, extra)
            .map_err(|m| Error::input(path, None, m))
    }

    pub fn read_counts(path: &Path, set: &CircuitSet, reversed: bool) -> Result<Counts> {
        let text = std::fs::read_to_string(path).map_err(|e| Error::io(path, e))?;
        let mut entries: Vec<(usize, String, String, u64)> = Vec::new();
        if path.extension().is_some_and(|e| e == "json") {
            let m: BTreeMap<String, BTreeMap<String, u64>> = serde_json::from_str(&text)
                .map_err(|e| Error::input(path, Some(e.line()), e.to_string()))?;
            for (c, o) in m {
                for (outcome, n) in o {
                    entries.push((0, c.clone(), outcome, n));
                }
            }
        } else {
            for (i, line) in text.lines().enumerate().skip(1) {
                if line.trim().is_empty() {
                    continue;
                }
                let f: Vec<&str> = line.split(',').map(str::trim).collect();
                let n = f.get(2).and_then(|n| n.parse::<u64>().ok());
                match (f.len(), n) {
                    (3, Some(n)) => entries.push((i + 1, f[0].into(), f[1].into(), n)),
                    _ => {
                        return Err(Error::input(
                            path,
                            Some(i + 1),
                            "expected 'circuit,outcome,count' with a whole-number count",
                        ))
                    }
                }
            }
        }
        let mut per: Vec<BTreeMap<Outcome, u64>> = vec![BTreeMap::new(); set.len()];
        for (line, c, outcome, n) in entries {
            let loc = (line > 0).then_some(line);
            let ci = set.position(&c).ok_or_else(|| {
                Error::input(path, loc, format!("circuit '{c}' is not in the circuit file"))
            })?;
            let m = set.circuits[ci].measured.len();
            let mut bits: Vec<bool> = Vec::with_capacity(m);
            for ch in outcome.chars() {
                match ch {
                    '0' => bits.push(false),
                    '1' => bits.push(true),
                    _ => bits.clear(),
                }
                if bits.is_empty() {
                    break;
                }
            }
            if bits.len() != m || outcome.chars().count() != m {
                return Err(Error::input(
                    path,
                    loc,
                    format!("outcome '{outcome}' is not a bitstring over the {m} measured qubits of circuit {c}"),
                ));
            }
            if reversed {
                bits.reverse();
            }
            *per[ci].entry(Outcome::from_bits(&bits)).or_default() += n;
        }
        Ok(Counts {
            per_circuit: per
                .into_iter()
                .map(|m| {
                    let outcomes: Vec<(Outcome, u64)> = m.into_iter().filter(|e| e.1 > 0).collect();
                    (!outcomes.is_empty()).then_some(CircuitCounts { outcomes })
                })
                .collect(),
        })
    }
}
