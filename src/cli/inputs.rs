//! The input options shared by `check` and `audit`, and loading them once.

use std::path::{Path, PathBuf};

use anyhow::Context;
use sha2::{Digest, Sha256};

use slackmap::circuit::qasm::QubitMap;
use slackmap::circuit::validate::{read_circuits, ReadOptions};
use slackmap::circuit::CircuitSet;
use slackmap::counts::{agreement, read_counts, BitOrder, Counts, CountsOptions};
use slackmap::layout::{read_layout, Layout};
use slackmap::limits::Limits;
use slackmap::report::InputFile;
use slackmap::Warning;

/// How outcome strings in a counts file are ordered.
#[derive(clap::ValueEnum, Clone, Copy, Debug, PartialEq, Eq)]
pub enum BitOrderArg {
    /// Character i of an outcome is the i-th measured qubit of its circuit.
    AsMeasured,
    /// Character i is the i-th measured qubit counted from the end (the other common
    /// convention).
    Reversed,
}

impl BitOrderArg {
    /// The label recorded in reports.
    pub fn label(self) -> &'static str {
        match self {
            BitOrderArg::AsMeasured => "as-measured",
            BitOrderArg::Reversed => "reversed",
        }
    }
}

/// Where the data is.
#[derive(clap::Args, Debug, Clone)]
pub struct InputArgs {
    /// Layout file (TOML; see the README, "Layout files").
    #[arg(long, value_name = "FILE")]
    pub layout: PathBuf,
    /// Circuits: a .json file in slackmap's format, a .qasm file, or a folder of .qasm files.
    #[arg(long, value_name = "PATH")]
    pub circuits: PathBuf,
    /// Order of the characters of each outcome string in the counts file: by default
    /// character i is the i-th measured qubit of the circuit.
    #[arg(long, value_enum, default_value = "as-measured")]
    pub bit_order: BitOrderArg,
    /// The shots each circuit ran, for a counts file that holds probabilities (or
    /// quasi-probabilities) instead of counts: each becomes round(p x N) shots after
    /// negative entries are set to 0 and the rest rescaled to sum 1.
    #[arg(long, value_name = "N")]
    pub shots: Option<u64>,
    /// Accept gates that are not native on the layout.
    #[arg(long)]
    pub allow_non_native: bool,
    /// Where declared OpenQASM qubits sit on the layout: `q[0]=q3,q[1]=q4`, or a file of
    /// such entries.
    #[arg(long, value_name = "MAP|FILE")]
    pub qubit_map: Option<String>,
}

/// Loaded, validated inputs.
pub struct Inputs {
    pub layout: Layout,
    pub circuits: CircuitSet,
    pub counts: Option<Counts>,
    /// Where the counts came from (for messages).
    pub counts_path: Option<PathBuf>,
    pub warnings: Vec<Warning>,
    pub files: Vec<InputFile>,
}

impl InputArgs {
    /// Reads layout, circuits and (when given) counts, validating them together.
    pub fn load(&self, counts: Option<&Path>) -> anyhow::Result<Inputs> {
        let layout = read_layout(&self.layout)?;
        let qubit_map = self.qubit_map.as_deref().map(QubitMap::from_arg).transpose()?;
        let opts = ReadOptions { allow_non_native: self.allow_non_native, qubit_map };
        // The files' digests are taken beside the reading (they are a pass over the same
        // bytes, a tenth of a second per 100 MB, and need nothing the reading makes).
        let (read, digests) = std::thread::scope(|scope| {
            let digests = scope.spawn(|| -> anyhow::Result<Vec<InputFile>> {
                let mut v =
                    vec![digest("layout", &self.layout)?, digest("circuits", &self.circuits)?];
                if let Some(p) = counts {
                    v.push(digest("counts", p)?);
                }
                Ok(v)
            });
            let read = self.read_rest(&layout, &opts, counts);
            (read, digests.join().expect("the digest thread does not panic"))
        });
        let (circuits, warnings, counts_read) = read?;
        let files = digests?;
        Ok(Inputs {
            layout,
            circuits,
            counts: counts_read,
            counts_path: counts.map(Path::to_path_buf),
            warnings,
            files,
        })
    }

    /// The circuits, the warnings about them and the counts, read in that order.
    fn read_rest(
        &self,
        layout: &Layout,
        opts: &ReadOptions,
        counts: Option<&Path>,
    ) -> anyhow::Result<(CircuitSet, Vec<Warning>, Option<Counts>)> {
        let circuits = read_circuits(&self.circuits, layout, opts)?;
        let mut warnings = Vec::new();
        let is_json = self.circuits.extension().is_some_and(|e| e.eq_ignore_ascii_case("json"));
        if !is_json {
            warnings.extend(layout.placement_warning());
            warnings
                .extend(slackmap::circuit::validate::skipped_directives_warning(&self.circuits)?);
        }
        let delays = slackmap::check::DelaySummary::of(layout, &circuits);
        if delays.count > 0 {
            warnings.push(Warning::new(
                "delays-not-modelled",
                format!(
                    "the circuits hold {} delay(s) in {} circuit(s), read as explicit idles in \
                     their layers; their durations ({}) are not modelled",
                    delays.count,
                    delays.circuits,
                    delays
                        .durations
                        .iter()
                        .take(8)
                        .map(|(t, _)| slackmap::error::echo(t))
                        .collect::<Vec<_>>()
                        .join(", ")
                ),
                "an idle layer is judged like any other idle: a long delay's decoherence shows \
                 as error of that qubit's idle, not of the time it lasted; `check` lists where \
                 each delay sits",
            ));
        }
        let counts_read = match counts {
            Some(p) => {
                if let Some(n) = self.shots {
                    super::limits().check("--shots", n, Limits::SHOTS, "shots per circuit")?;
                    if n == 0 {
                        return Err(slackmap::Error::Usage(
                            "--shots 0: give the shots each circuit ran (at least 1)".into(),
                        )
                        .into());
                    }
                }
                let bit_order = match self.bit_order {
                    BitOrderArg::AsMeasured => BitOrder::AsMeasured,
                    BitOrderArg::Reversed => BitOrder::Reversed,
                };
                let (c, w) =
                    read_counts(p, &circuits, &CountsOptions { bit_order, shots: self.shots })?;
                warnings.extend(w);
                Some(c)
            }
            None => None,
        };
        Ok((circuits, warnings, counts_read))
    }
}

impl Inputs {
    /// Fails (exit 2) when the counts do not follow the circuits' ideal outcomes: read in
    /// the other bit order, or made from other circuits.
    pub fn require_agreement(&self) -> anyhow::Result<()> {
        if let (Some(counts), Some(path)) = (&self.counts, &self.counts_path) {
            agreement::agreement(&self.layout, &self.circuits, counts).require(path)?;
        }
        Ok(())
    }
}

/// SHA-256 of a file, or of a folder's files concatenated in name order.
pub fn digest(role: &str, path: &Path) -> anyhow::Result<InputFile> {
    let mut h = Sha256::new();
    let mut files = Vec::new();
    if path.is_dir() {
        let mut v: Vec<PathBuf> = std::fs::read_dir(path)
            .with_context(|| format!("reading folder {}", path.display()))?
            .filter_map(|e| e.ok().map(|e| e.path()))
            .filter(|p| p.is_file())
            .collect();
        v.sort();
        files.extend(v);
    } else {
        files.push(path.to_path_buf());
    }
    for f in &files {
        let mut file = std::fs::File::open(f).map_err(|e| slackmap::Error::io(f, e))?;
        let mut buf = vec![0u8; 1 << 16];
        loop {
            let n =
                std::io::Read::read(&mut file, &mut buf).map_err(|e| slackmap::Error::io(f, e))?;
            if n == 0 {
                break;
            }
            h.update(&buf[..n]);
        }
    }
    let hex: String = h.finalize().iter().map(|b| format!("{b:02x}")).collect();
    Ok(InputFile { role: role.to_string(), path: path.display().to_string(), sha256: hex })
}
