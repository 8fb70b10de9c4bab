//! Validation of circuits against a layout, and the one entry point that reads circuit
//! files of any supported kind.
//!
//! Every later stage (rows, model, slack) relies on what is checked here: operations in a
//! layer are disjoint, two-qubit gates sit on couplers, blocks have one or two qubits and
//! never reach an unmeasured qubit, and each circuit measures each qubit at most once.

use std::path::{Path, PathBuf};

use super::qasm::{self, QubitMap};
use super::{Circuit, CircuitSet};
use crate::error::{Error, Result};
use crate::gate::Gate;
use crate::layout::Layout;

/// How circuit files are read.
#[derive(Clone, Debug, Default)]
pub struct ReadOptions {
    /// Accept gates that are not among the layout's native gates.
    pub allow_non_native: bool,
    /// Where declared OpenQASM qubit registers sit on the layout.
    pub qubit_map: Option<QubitMap>,
}

/// Checks one circuit against the layout; the error names the circuit and, where there is
/// one, the layer (0-based) and the qubits.
pub fn validate_circuit(c: &Circuit, layout: &Layout, allow_non_native: bool) -> Result<()> {
    let fail = |m: String| Err(Error::circuit(&c.id, m));
    let n = layout.n_qubits();
    let name = |q: usize| layout.qubits.get(q).map_or_else(|| format!("#{q}"), |x| x.id.clone());
    if c.measured.is_empty() {
        return fail("measures no qubits: a circuit must end by measuring at least one".into());
    }
    let mut measured = vec![false; n];
    for &q in &c.measured {
        if q >= n {
            return fail(format!(
                "measures qubit {} which is not in layout '{}'",
                name(q),
                layout.name
            ));
        }
        if measured[q] {
            return fail(format!("measures qubit {} twice", name(q)));
        }
        measured[q] = true;
    }
    // The layer in which each qubit was last acted on (one table for the whole circuit
    // instead of a set per layer).
    let mut used_in = vec![usize::MAX; n];
    for (t, layer) in c.layers.iter().enumerate() {
        for op in layer {
            let qs = op.qubits();
            if let Some(&q) = qs.iter().find(|&&q| q >= n) {
                return fail(format!(
                    "layer {t}: qubit {} is not in layout '{}'",
                    name(q),
                    layout.name
                ));
            }
            if !op.angle.is_finite() {
                return fail(format!(
                    "layer {t}: {} on {} has a non-finite angle",
                    op.gate,
                    name(qs[0])
                ));
            }
            for &q in qs {
                if std::mem::replace(&mut used_in[q], t) == t {
                    return fail(format!(
                        "layer {t}: two operations act on qubit {} (operations in a layer must act on disjoint qubits)",
                        name(q)
                    ));
                }
            }
            let on_coupler = qs.len() == 2 && layout.coupler(qs[0], qs[1]).is_some();
            if let Some((from, to)) = layout.reversed_native(op.gate, qs, op.angle) {
                if !allow_non_native {
                    return fail(format!(
                        "layer {t}: {} on {}-{} runs against its coupler's direction: layout '{}' \
                         writes the coupler {}-{}, so its {} runs from {} (the control of cx and \
                         ecr), the only direction the chip calibrated. The reversed gate is \
                         another operation: write it the calibrated way round (cx reversed is \
                         h on both qubits, cx, h on both), or pass --allow-non-native to audit \
                         it as an operation of its own",
                        op.gate,
                        name(qs[0]),
                        name(qs[1]),
                        layout.name,
                        name(from),
                        name(to),
                        op.gate,
                        name(from)
                    ));
                }
            }
            if !allow_non_native
                && (qs.len() == 1 || on_coupler)
                && !layout.is_native_op(op.gate, qs, op.angle)
            {
                let natives: Vec<String> = match qs {
                    [a, b] => {
                        layout.natives_between(*a, *b).iter().map(ToString::to_string).collect()
                    }
                    _ => std::iter::once(Gate::Id)
                        .chain(layout.gates.one_qubit.iter().copied())
                        .map(|g| g.name().to_string())
                        .collect(),
                };
                let shown = if op.gate.n_params() == 1 && qs.len() == 2 {
                    format!("{}({:?})", op.gate, op.angle)
                } else {
                    op.gate.to_string()
                };
                return fail(format!(
                    "layer {t}: gate {shown} on {} is not native on layout '{}' (native {}: {}; pass --allow-non-native to accept it)",
                    qs.iter().map(|&q| name(q)).collect::<Vec<_>>().join("-"),
                    layout.name,
                    if qs.len() == 2 { "on this coupler" } else { "one-qubit gates" },
                    natives.join(", ")
                ));
            }
            if let [a, b] = *qs {
                if layout.coupler(a, b).is_none() {
                    return fail(format!(
                        "layer {t}: {} on {}-{} but that pair is not a coupler of layout '{}'",
                        op.gate,
                        name(a),
                        name(b),
                        layout.name
                    ));
                }
                if measured[a] != measured[b] {
                    let (m, u) = if measured[a] { (a, b) } else { (b, a) };
                    return fail(format!(
                        "layer {t}: {} joins measured qubit {} to unmeasured qubit {} (measure both or neither)",
                        op.gate,
                        name(m),
                        name(u)
                    ));
                }
            }
        }
    }
    for block in c.blocks() {
        if block.len() > 2 {
            let ids: Vec<String> = block.iter().map(|&q| name(q)).collect();
            return fail(format!(
                "two-qubit gates join {} measured qubits into one block ({}); at most two are supported",
                block.len(),
                ids.join(", ")
            ));
        }
    }
    Ok(())
}

/// Checks every circuit of a set; the first problem, in circuit order, is returned.
/// A recorded delay must name a layer of its circuit where its qubit idles explicitly.
pub fn validate(set: &CircuitSet, layout: &Layout, allow_non_native: bool) -> Result<()> {
    use rayon::prelude::*;
    // Circuits are checked in parallel; the error reported is the first circuit's in file
    // order, as a check one circuit after another would report.
    let first = set
        .circuits
        .par_iter()
        .enumerate()
        .map(|(i, c)| validate_one(set, i, c, layout, allow_non_native))
        .find_map_first(Result::err);
    first.map_or(Ok(()), Err)
}

/// [`validate`] for circuit `i` of `set`: its operations and its delays.
fn validate_one(
    set: &CircuitSet,
    i: usize,
    c: &Circuit,
    layout: &Layout,
    allow_non_native: bool,
) -> Result<()> {
    validate_circuit(c, layout, allow_non_native)?;
    for d in set.delays_of(i) {
        let idles = c
            .layers
            .get(d.layer)
            .is_some_and(|l| l.iter().any(|op| op.gate == Gate::Id && op.operands[0] == d.qubit));
        if !idles {
            return Err(Error::circuit(
                &c.id,
                format!(
                    "delay[{}] on {} names layer {}, which has no explicit idle (`id`) of {} \
                     (a delay is an idle of its qubit in a layer of 0 to {})",
                    crate::error::echo(&d.duration),
                    layout.id(d.qubit),
                    d.layer,
                    layout.id(d.qubit),
                    c.layers.len().saturating_sub(1)
                ),
            ));
        }
    }
    Ok(())
}

fn at_file(path: &Path, e: Error) -> Error {
    match e {
        Error::Circuit { circuit, message } => {
            Error::input(path, None, format!("circuit {circuit}: {message}"))
        }
        other => other,
    }
}

/// Reads circuits and validates them: a `.json` file in the tool's format, one `.qasm`
/// file (one circuit, id = file stem), or a folder of `.qasm` files (one circuit per
/// file, id = file stem, sorted by file name). Validation errors name the file.
pub fn read_circuits(path: &Path, layout: &Layout, opts: &ReadOptions) -> Result<CircuitSet> {
    let read_qasm = |p: &Path| -> Result<(super::Circuit, Vec<super::Delay>)> {
        let text = crate::files::read_text_capped(p, qasm::MAX_QASM_FILE_BYTES, "OpenQASM file")?;
        let id = p.file_stem().map(|s| s.to_string_lossy().into_owned()).unwrap_or_default();
        let (c, delays) = qasm::import_with_delays(&text, p, &id, layout, opts.qubit_map.as_ref())?;
        validate_circuit(&c, layout, opts.allow_non_native).map_err(|e| at_file(p, e))?;
        Ok((c, delays))
    };
    let with_delays = |read: Vec<(super::Circuit, Vec<super::Delay>)>, at: &Path| {
        let (circuits, delays): (Vec<_>, Vec<_>) = read.into_iter().unzip();
        let mut set = CircuitSet::new(circuits).map_err(|m| Error::input(at, None, m))?;
        for (i, d) in delays.into_iter().enumerate() {
            set.set_delays(i, d);
        }
        Ok::<CircuitSet, Error>(set)
    };
    let ext = path.extension().and_then(|e| e.to_str()).map(str::to_ascii_lowercase);
    if path.is_dir() {
        let files = qasm_files_in(path)?;
        if files.is_empty() {
            return Err(Error::input(path, None, "folder holds no .qasm files"));
        }
        // Files are read in parallel; the error reported is the first file's in name order.
        let read: Vec<Result<_>> = {
            use rayon::prelude::*;
            files.par_iter().map(|p| read_qasm(p)).collect()
        };
        let circuits = read.into_iter().collect::<Result<Vec<_>>>()?;
        return with_delays(circuits, path);
    }
    match ext.as_deref() {
        Some("json") => {
            let set = super::json::read_json(path, layout)?;
            validate(&set, layout, opts.allow_non_native).map_err(|e| match e {
                Error::Circuit { circuit, message } => Error::input(
                    path,
                    super::json::line_of_circuit(path, &circuit, 0),
                    format!("circuit {circuit}: {message}"),
                ),
                other => other,
            })?;
            Ok(set)
        }
        Some("qasm") => {
            let c = read_qasm(path)?;
            with_delays(vec![c], path)
        }
        _ => {
            // The operating system's own reason (missing, a loop of links, no permission).
            if let Err(e) = std::fs::metadata(path) {
                return Err(Error::io(path, e));
            }
            Err(Error::input(
                path,
                None,
                "circuit files must be .json (slackmap format), .qasm (OpenQASM 3) or a folder of .qasm files",
            ))
        }
    }
}

/// One warning listing the `#pragma` and annotation lines that the OpenQASM files behind
/// `path` (a `.qasm` file or a folder of them) hold: each distinct line once, with how many
/// files hold it and where it first appears. None for JSON circuits or programs without any.
pub fn skipped_directives_warning(path: &Path) -> Result<Option<crate::Warning>> {
    let files: Vec<PathBuf> = if path.is_dir() {
        qasm_files_in(path)?
    } else if is_qasm(path) {
        vec![path.to_path_buf()]
    } else {
        return Ok(None);
    };
    // Distinct text -> (files holding it, first file, first line), in order of first sight.
    let mut seen: Vec<(String, usize, PathBuf, usize)> = Vec::new();
    for f in &files {
        let text = crate::files::read_text_capped(f, qasm::MAX_QASM_FILE_BYTES, "OpenQASM file")?;
        let mut here: Vec<String> = Vec::new();
        for (line, t) in qasm::skipped_directives(&text) {
            if here.contains(&t) {
                continue;
            }
            match seen.iter_mut().find(|e| e.0 == t) {
                Some(e) => e.1 += 1,
                None => seen.push((t.clone(), 1, f.clone(), line)),
            }
            here.push(t);
        }
    }
    if seen.is_empty() {
        return Ok(None);
    }
    const SHOWN: usize = 8;
    let mut list: Vec<String> = seen
        .iter()
        .take(SHOWN)
        .map(|(t, n, f, line)| {
            let files = if *n == 1 { "1 file".to_string() } else { format!("{n} files") };
            format!("'{t}' ({files}; first {} line {line})", f.display())
        })
        .collect();
    if seen.len() > SHOWN {
        list.push(format!("and {} more", seen.len() - SHOWN));
    }
    Ok(Some(crate::Warning::new(
        "skipped-directives",
        format!(
            "the OpenQASM programs hold {} distinct #pragma or annotation line(s), which slackmap skips: {}",
            seen.len(),
            list.join("; ")
        ),
        "they change nothing in the circuits read; if one sets something the run depends on \
         (timing, a gate's calibration), express it as gates or leave it out",
    )))
}

/// Whether `path` names an OpenQASM file (extension `.qasm`, any case).
fn is_qasm(path: &Path) -> bool {
    path.extension().and_then(|e| e.to_str()).is_some_and(|e| e.eq_ignore_ascii_case("qasm"))
}

/// The `.qasm` files directly in folder `dir`, sorted by name.
fn qasm_files_in(dir: &Path) -> Result<Vec<PathBuf>> {
    let mut files = Vec::new();
    for entry in std::fs::read_dir(dir).map_err(|e| Error::io(dir, e))? {
        let p = entry.map_err(|e| Error::io(dir, e))?.path();
        if is_qasm(&p) {
            files.push(p);
        }
    }
    files.sort();
    Ok(files)
}
