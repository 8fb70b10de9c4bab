//! Writing a design: circuits.json (run order), one OpenQASM 3 program per circuit, and
//! manifest.csv. Files go to a temporary folder beside the target that is renamed at the
//! end, so an interrupted or failed write leaves nothing partial behind.

use std::fs;
use std::io::{BufWriter, Write};
use std::path::{Path, PathBuf};

use super::{Design, ManifestRow};
use crate::circuit::{json, qasm};
use crate::error::{Error, Result};
use crate::layout::Layout;

/// The manifest's header line.
pub const MANIFEST_HEADER: &str =
    "id,pattern,context,kind,depth,sequence,active_blocks,ideal_outcome,ideal_p1";

fn p1_text(p: f64) -> String {
    if p == 0.0 || p == 1.0 {
        format!("{}", p as u8)
    } else {
        format!("{p}")
    }
}

fn manifest_line(layout: &Layout, r: &ManifestRow) -> String {
    let blocks: Vec<String> = r.active_blocks.iter().map(|b| b.label(layout)).collect();
    let p1: Vec<String> = r.ideal_p1.iter().map(|&p| p1_text(p)).collect();
    format!(
        "{},{},{},{},{},{},{},{},{}",
        r.id,
        r.pattern,
        r.context.name(),
        r.kind.name(),
        r.depth,
        r.sequence,
        blocks.join(";"),
        r.ideal_outcome.as_deref().unwrap_or(""),
        p1.join(";")
    )
}

/// The manifest as CSV text: header [`MANIFEST_HEADER`], one row per circuit in run order.
/// `active_blocks` lists blocks as `q0;q3-q4`; `ideal_outcome` is a bitstring over the
/// measured qubits (character i = measured qubit i), empty when not deterministic;
/// `ideal_p1` lists P(1) per measured qubit, `;`-separated.
pub fn manifest_csv(layout: &Layout, d: &Design) -> String {
    let mut s = String::from(MANIFEST_HEADER);
    s.push('\n');
    for r in &d.manifest {
        s.push_str(&manifest_line(layout, r));
        s.push('\n');
    }
    s
}

fn write_all(dir: &Path, layout: &Layout, d: &Design) -> Result<()> {
    let io = |p: &Path| {
        let p = p.to_path_buf();
        move |e| Error::io(&p, e)
    };
    let path = dir.join("circuits.json");
    let mut w = BufWriter::new(fs::File::create(&path).map_err(io(&path))?);
    // Same bytes as `json::to_json`, streamed so a large design is never held as one string.
    writeln!(w, "{{\"schema\": {}, \"circuits\": [", json::SCHEMA).map_err(io(&path))?;
    let n = d.circuits.len();
    for (i, c) in d.circuits.circuits.iter().enumerate() {
        w.write_all(json::circuit_to_json(c, layout).as_bytes()).map_err(io(&path))?;
        w.write_all(if i + 1 < n { b",\n" } else { b"\n" }).map_err(io(&path))?;
    }
    w.write_all(b"]}\n").map_err(io(&path))?;
    w.flush().map_err(io(&path))?;
    let qdir = dir.join("qasm");
    fs::create_dir(&qdir).map_err(io(&qdir))?;
    for c in &d.circuits.circuits {
        let p = qdir.join(format!("{}.qasm", c.id));
        fs::write(&p, qasm::export(c, layout)).map_err(io(&p))?;
    }
    let p = dir.join("manifest.csv");
    let mut w = BufWriter::new(fs::File::create(&p).map_err(io(&p))?);
    writeln!(w, "{MANIFEST_HEADER}").map_err(io(&p))?;
    for r in &d.manifest {
        writeln!(w, "{}", manifest_line(layout, r)).map_err(io(&p))?;
    }
    w.flush().map_err(io(&p))?;
    Ok(())
}

/// Writes `circuits.json`, `qasm/<id>.qasm` and `manifest.csv` into `dir`. `dir` must not
/// exist or be an empty folder; nothing is left behind on failure.
pub fn write_design(dir: &Path, layout: &Layout, d: &Design) -> Result<()> {
    if dir.exists() {
        let empty = fs::read_dir(dir).map_err(|e| Error::io(dir, e))?.next().is_none();
        if !empty {
            return Err(Error::Usage(format!(
                "output folder {} exists and is not empty; choose a new folder or remove it",
                dir.display()
            )));
        }
    }
    let name = dir.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default();
    let parent = match dir.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    };
    let tmp = parent.join(format!(".{name}.partial-{}", std::process::id()));
    if tmp.exists() {
        fs::remove_dir_all(&tmp).map_err(|e| Error::io(&tmp, e))?;
    }
    fs::create_dir_all(&tmp).map_err(|e| Error::io(&tmp, e))?;
    let result = write_all(&tmp, layout, d).and_then(|()| {
        if dir.exists() {
            fs::remove_dir(dir).map_err(|e| Error::io(dir, e))?;
        }
        fs::rename(&tmp, dir).map_err(|e| Error::io(dir, e))
    });
    if result.is_err() {
        let _ = fs::remove_dir_all(&tmp);
    }
    result
}
