//! Writing a design: circuits.json (run order), one OpenQASM 3 program per circuit, and
//! manifest.csv, streamed as circuits are built. Files go to a staging folder beside the
//! target that is renamed at the end ([`crate::files`]), so an interrupted or failed write
//! leaves nothing partial behind.

use std::fs;
use std::io::{BufWriter, Write};
use std::path::{Path, PathBuf};

use rayon::prelude::*;

use super::{Blueprint, Design, ManifestRow};
use crate::circuit::{json, qasm, Circuit};
use crate::error::{Error, Result};
use crate::files::{size_text, FolderRule, OutputDir};
use crate::layout::Layout;
use crate::limits::{Limits, OVERRIDE_HINT};

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

/// The three outputs of a design, written as circuits arrive in run order.
struct Sink {
    json: BufWriter<fs::File>,
    json_path: PathBuf,
    manifest: BufWriter<fs::File>,
    manifest_path: PathBuf,
    qasm: PathBuf,
    total: usize,
    written: usize,
    bytes: u64,
}

fn io(p: &Path) -> impl FnOnce(std::io::Error) -> Error + '_ {
    move |e| Error::io(p, e)
}

impl Sink {
    /// Starts the files in `dir` for `total` circuits.
    fn open(dir: &Path, total: usize) -> Result<Sink> {
        let json_path = dir.join("circuits.json");
        let mut json = BufWriter::new(fs::File::create(&json_path).map_err(io(&json_path))?);
        // Same bytes as `json::to_json`, streamed so a large design is never held whole.
        writeln!(json, "{{\"schema\": {}, \"circuits\": [", json::SCHEMA)
            .map_err(io(&json_path))?;
        let manifest_path = dir.join("manifest.csv");
        let mut manifest =
            BufWriter::new(fs::File::create(&manifest_path).map_err(io(&manifest_path))?);
        writeln!(manifest, "{MANIFEST_HEADER}").map_err(io(&manifest_path))?;
        let qasm = dir.join("qasm");
        fs::create_dir(&qasm).map_err(io(&qasm))?;
        Ok(Sink { json, json_path, manifest, manifest_path, qasm, total, written: 0, bytes: 0 })
    }

    fn put(&mut self, id: &str, files: &Rendered) -> Result<()> {
        self.written += 1;
        let sep: &[u8] = if self.written < self.total { b",\n" } else { b"\n" };
        self.json.write_all(files.json.as_bytes()).map_err(io(&self.json_path))?;
        self.json.write_all(sep).map_err(io(&self.json_path))?;
        let p = self.qasm.join(format!("{id}.qasm"));
        fs::write(&p, &files.qasm).map_err(io(&p))?;
        writeln!(self.manifest, "{}", files.manifest).map_err(io(&self.manifest_path))?;
        self.bytes += (files.json.len() + files.qasm.len() + files.manifest.len() + 3) as u64;
        Ok(())
    }

    fn finish(mut self) -> Result<()> {
        self.json.write_all(b"]}\n").map_err(io(&self.json_path))?;
        self.json.flush().map_err(io(&self.json_path))?;
        self.manifest.flush().map_err(io(&self.manifest_path))
    }
}

/// One circuit as its three files hold it.
struct Rendered {
    json: String,
    qasm: String,
    manifest: String,
}

fn render(layout: &Layout, c: &Circuit, r: &ManifestRow) -> Rendered {
    Rendered {
        json: json::circuit_to_json(c, layout),
        qasm: qasm::export(c, layout),
        manifest: manifest_line(layout, r),
    }
}

/// Writes `circuits.json`, `qasm/<id>.qasm` and `manifest.csv` of a design built in memory
/// into `dir`, which must not exist or be an empty folder; nothing is left behind on
/// failure (see [`crate::files`]).
pub fn write_design(dir: &Path, layout: &Layout, d: &Design) -> Result<()> {
    let out = OutputDir::claim(dir, FolderRule::New)?;
    let mut sink = Sink::open(out.staging(), d.circuits.len())?;
    for (c, r) in d.circuits.circuits.iter().zip(&d.manifest) {
        sink.put(&c.id, &render(layout, c, r))?;
    }
    sink.finish()?;
    out.commit()
}

/// Operations built at once by [`write_blueprint`] (about 200 MB of working memory at the
/// size model's 200 bytes per operation).
const CHUNK_OPS: u64 = 1 << 20;

/// Builds a design's circuits a chunk at a time (each chunk in parallel) and writes them
/// into `dir` (an empty staging folder), so that memory stays that of one chunk. Stops
/// with [`Error::Interrupted`] when `stop` says so, and with a usage error when the files
/// pass the limit on a design's size. Returns the bytes written.
pub fn write_blueprint(dir: &Path, bp: &Blueprint, stop: &dyn Fn() -> bool) -> Result<u64> {
    let layout = bp.layout();
    let limits = bp.config().limits;
    let mut sink = Sink::open(dir, bp.len())?;
    let mut start = 0;
    while start < bp.len() {
        if stop() {
            return Err(Error::Interrupted);
        }
        let end = bp.chunk_end(start, CHUNK_OPS);
        let rendered: Vec<(String, Rendered)> = bp
            .circuits(start..end)?
            .into_par_iter()
            .map(|(c, r)| {
                let files = render(layout, &c, &r);
                (c.id, files)
            })
            .collect();
        for (id, files) in &rendered {
            sink.put(id, files)?;
        }
        if limits.enforced && sink.bytes > Limits::DESIGN_BYTES {
            return Err(Error::Usage(format!(
                "the design's files passed the limit of {} after {} of {} circuits; ask for \
                 fewer depths or sequences, or {OVERRIDE_HINT}",
                size_text(Limits::DESIGN_BYTES),
                sink.written,
                bp.len()
            )));
        }
        start = end;
    }
    let bytes = sink.bytes;
    sink.finish()?;
    Ok(bytes)
}
