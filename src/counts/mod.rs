//! Counts: how many shots gave each outcome bitstring, per circuit.
//!
//! Outcomes are stored packed (64 bits a word); readers stream the file line by line, so
//! memory grows with the number of distinct outcomes (about 60 bytes each), never with the
//! number of lines or their length. Bit i of an outcome
//! is the i-th measured qubit of its circuit (after `--bit-order reversed` is applied).
//! Files are CSV (`circuit,outcome,count`) or JSON (`{circuit: {outcome: count}}`); the
//! README ("Counts files") documents both.

use std::collections::HashMap;
use std::io::{BufRead, BufReader, Read, Write};
use std::path::Path;

use serde::de::{self, DeserializeSeed, MapAccess, Visitor};

use crate::circuit::CircuitSet;
use crate::error::{echo, Error, Result, Warning};

pub mod agreement;

/// One outcome bitstring, packed: bit i is `words[i / 64] >> (i % 64) & 1`.
#[derive(Clone, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub struct Outcome(pub Box<[u64]>);

impl Outcome {
    /// Bit i of the outcome.
    pub fn bit(&self, i: usize) -> bool {
        (self.0[i / 64] >> (i % 64)) & 1 == 1
    }

    /// Packs a slice of bits.
    pub fn from_bits(bits: &[bool]) -> Outcome {
        let mut words = vec![0u64; bits.len().div_ceil(64).max(1)];
        for (i, &b) in bits.iter().enumerate() {
            if b {
                words[i / 64] |= 1 << (i % 64);
            }
        }
        Outcome(words.into_boxed_slice())
    }

    /// The outcome as a '0'/'1' string of `n` characters (character i = bit i).
    pub fn to_string_n(&self, n: usize) -> String {
        (0..n).map(|i| if self.bit(i) { '1' } else { '0' }).collect()
    }
}

/// Counts for one circuit: distinct outcomes with their shot counts (all > 0).
#[derive(Clone, Debug, Default, PartialEq)]
pub struct CircuitCounts {
    /// (outcome, count) pairs, each outcome once.
    pub outcomes: Vec<(Outcome, u64)>,
}

impl CircuitCounts {
    /// Total shots.
    pub fn shots(&self) -> u64 {
        self.outcomes.iter().map(|(_, n)| n).sum()
    }

    /// Marginal counts over the measured positions `positions` (at most 16): entry x holds
    /// the shots whose bit `positions[j]` equals bit j of x.
    pub fn marginal(&self, positions: &[usize]) -> Vec<u64> {
        let mut m = vec![0u64; 1 << positions.len()];
        for (o, n) in &self.outcomes {
            let x = positions
                .iter()
                .enumerate()
                .fold(0usize, |acc, (j, &p)| acc | ((o.bit(p) as usize) << j));
            m[x] += n;
        }
        m
    }

    /// [`CircuitCounts::marginal`] of several lists of positions at once (`None` entries get
    /// none), from one pass over the outcomes that adds each outcome's shots to the
    /// positions whose bit is set (and to the lists of two positions that have both set):
    /// the other entries follow by subtraction, in whole numbers, so they are exactly the
    /// sums [`CircuitCounts::marginal`] forms. Longer lists are summed as it sums them.
    pub fn marginals(&self, lists: &[Option<&[usize]>]) -> Vec<Option<Vec<u64>>> {
        let width = lists.iter().flatten().flat_map(|p| p.iter()).max().map_or(0, |&p| p + 1);
        let pairs: Vec<(usize, usize, usize)> = lists
            .iter()
            .enumerate()
            .filter_map(|(i, p)| match p {
                Some([a, b]) => Some((i, *a, *b)),
                _ => None,
            })
            .collect();
        let mut ones = vec![0u64; width];
        let mut both = vec![0u64; pairs.len()];
        let mut total = 0u64;
        for (o, n) in &self.outcomes {
            let n = *n;
            total += n;
            for (wi, &word) in o.0.iter().enumerate() {
                let mut w = word;
                while w != 0 {
                    let p = wi * 64 + w.trailing_zeros() as usize;
                    if p < width {
                        ones[p] += n;
                    }
                    w &= w - 1;
                }
            }
            for (k, &(_, a, b)) in pairs.iter().enumerate() {
                if o.bit(a) && o.bit(b) {
                    both[k] += n;
                }
            }
        }
        let mut pair_of = pairs.iter().zip(&both).map(|(&(i, _, _), &n)| (i, n)).peekable();
        lists
            .iter()
            .enumerate()
            .map(|(i, p)| {
                let p = (*p)?;
                let joint = match pair_of.peek() {
                    Some(&(j, n)) if j == i => {
                        pair_of.next();
                        n
                    }
                    _ => 0,
                };
                Some(match *p {
                    [a] => vec![total - ones[a], ones[a]],
                    [a, b] if a == b => vec![total - ones[a], 0, 0, ones[a]],
                    [a, b] => {
                        let (only_a, only_b) = (ones[a] - joint, ones[b] - joint);
                        vec![total - only_a - only_b - joint, only_a, only_b, joint]
                    }
                    _ => self.marginal(p),
                })
            })
            .collect()
    }
}

/// Counts for a circuit set: `per_circuit[i]` belongs to circuit i of the set; `None`
/// where the file had no counts for that circuit.
#[derive(Clone, Debug, Default)]
pub struct Counts {
    /// Per-circuit counts, aligned with the circuit set.
    pub per_circuit: Vec<Option<CircuitCounts>>,
}

/// How the characters of an outcome string map to measured qubits.
#[derive(Copy, Clone, Debug, Default, PartialEq, Eq)]
pub enum BitOrder {
    /// Character i is the i-th measured qubit (the tool's own order).
    #[default]
    AsMeasured,
    /// Character i is the i-th measured qubit counted from the end: each outcome string is
    /// reversed before packing (for files that write the last qubit first).
    Reversed,
}

/// Options for reading counts.
#[derive(Clone, Debug, Default)]
pub struct CountsOptions {
    /// Outcome bit order in the file.
    pub bit_order: BitOrder,
    /// Shots each circuit ran, for files that hold probabilities (or quasi-probabilities)
    /// rather than counts; `None` reads whole-number counts.
    pub shots: Option<u64>,
}

/// The counts file formats, chosen by extension.
#[derive(Copy, Clone, Debug, PartialEq, Eq)]
pub enum CountsFormat {
    /// `circuit,outcome,count` rows after that header.
    Csv,
    /// `{"circuit id": {"outcome": count, ...}, ...}`.
    Json,
}

impl CountsFormat {
    /// The format a file's extension names (`.csv` or `.json`, any case).
    pub fn from_path(path: &Path) -> Result<CountsFormat> {
        let ext = path.extension().and_then(|e| e.to_str()).map(str::to_ascii_lowercase);
        match ext.as_deref() {
            Some("csv") => Ok(CountsFormat::Csv),
            Some("json") => Ok(CountsFormat::Json),
            _ => Err(Error::input(
                path,
                None,
                "counts files must end in .csv (circuit,outcome,count rows) or .json \
                 ({circuit: {outcome: count}})",
            )),
        }
    }
}

/// Reads a counts file (format by extension) for `circuits`. `Counts::per_circuit` is
/// aligned with `circuits.circuits`; circuits without any counts are `None` and listed in
/// one `circuits-without-counts` warning.
pub fn read_counts(
    path: &Path,
    circuits: &CircuitSet,
    opts: &CountsOptions,
) -> Result<(Counts, Vec<Warning>)> {
    let format = CountsFormat::from_path(path)?;
    if format == CountsFormat::Csv {
        if let Some(read) = read_csv_split(path, circuits, opts, SPLIT_BLOCK) {
            return read;
        }
    }
    let file = std::fs::File::open(path).map_err(|e| Error::io(path, e))?;
    read_counts_from(file, format, path, circuits, opts)
}

/// How much of a CSV counts file [`read_csv_split`] reads at a time.
const SPLIT_BLOCK: usize = 1 << 24;

/// One data line of a CSV counts file, checked and packed away from the reader's state.
enum Prepared {
    /// Only separators and spaces.
    Blank,
    /// An outcome of circuit `ci` with its stored value.
    Row { line: usize, ci: usize, key: Key, value: u64 },
}

/// Reads a CSV counts file `block` bytes at a time (up to the last whole line), checks and packs each block's
/// lines in parallel, and adds them to the counts in file order. `None` whenever the file is
/// not one this reading is sure to read as [`read_csv`] does (a quote or a carriage return
/// anywhere, a line that is not UTF-8 or is longer than [`MAX_CSV_LINE_BYTES`], a header
/// other than `circuit,outcome,count`) and whenever any line would be an error: the file is
/// then read again one record after another, which gives every message. A line's fields are
/// what the CSV reader splits it into when no field is quoted: the text between commas.
fn read_csv_split(
    path: &Path,
    circuits: &CircuitSet,
    opts: &CountsOptions,
    block: usize,
) -> Option<Result<(Counts, Vec<Warning>)>> {
    use crate::files::Cut;
    use rayon::prelude::*;
    let file = std::fs::File::open(path).ok()?;
    let mut acc = Accumulator::new(path, circuits, opts);
    // Cut on the reading thread: whole lines, split, each line's span.
    let mut first = true;
    let cut = move |buf: &mut Vec<u8>, ended: bool| {
        if first {
            first = false;
            if buf.starts_with(b"\xEF\xBB\xBF") {
                buf.drain(..3);
            }
            if buf.is_empty() {
                return Cut::Refuse;
            }
        }
        let end = if ended {
            buf.len()
        } else {
            match buf.iter().rposition(|&b| b == b'\n') {
                Some(i) => i + 1,
                None if buf.len() as u64 > MAX_CSV_LINE_BYTES => return Cut::Refuse,
                None => return Cut::More,
            }
        };
        let chunk = crate::files::take_front(buf, end);
        if chunk.iter().any(|&b| b == b'"' || b == b'\r') {
            return Cut::Refuse;
        }
        let mut lines: Vec<(usize, usize)> = Vec::new();
        let mut from = 0;
        for (i, _) in chunk.iter().enumerate().filter(|&(_, &b)| b == b'\n') {
            lines.push((from, i));
            from = i + 1;
        }
        if chunk.last() != Some(&b'\n') {
            lines.push((from, chunk.len()));
        }
        if lines.iter().any(|&(a, b)| (b - a) as u64 > MAX_CSV_LINE_BYTES) {
            return Cut::Refuse;
        }
        Cut::Piece((chunk, lines))
    };
    let (mut lines_before, mut header_seen) = (0usize, false);
    let each = |(chunk, spans): (Vec<u8>, Vec<(usize, usize)>)| -> Option<()> {
        let line = |i: usize| &chunk[spans[i].0..spans[i].1];
        let mut from = 0;
        while !header_seen && from < spans.len() {
            let text = std::str::from_utf8(line(from)).ok()?;
            from += 1;
            if text.split(',').all(|f| f.trim().is_empty()) {
                continue;
            }
            let fields: Vec<&str> = text.split(',').map(str::trim).collect();
            if fields != HEADER {
                return None;
            }
            header_seen = true;
        }
        let prepared: Vec<Option<Prepared>> = (from..spans.len())
            .into_par_iter()
            .map(|i| acc.prepare(lines_before + i + 1, line(i)))
            .collect();
        for p in prepared {
            if let Prepared::Row { line, ci, key, value } = p? {
                acc.commit(line, ci, key, value)?;
            }
        }
        lines_before += spans.len();
        Some(())
    };
    crate::files::read_ahead(file, Vec::new(), block, cut, each)?;
    (header_seen && acc.rows > 0).then(|| acc.finish())
}

/// The longest line of a CSV counts file.
pub const MAX_CSV_LINE_BYTES: u64 = 1 << 20;

/// Reads counts from any reader; `path` is used only in messages. Streams: memory grows
/// with the number of distinct outcomes, not with the file size.
pub fn read_counts_from<R: Read>(
    reader: R,
    format: CountsFormat,
    path: &Path,
    circuits: &CircuitSet,
    opts: &CountsOptions,
) -> Result<(Counts, Vec<Warning>)> {
    let max_line = match format {
        // One row per line: an outcome string of a thousand qubits is a kilobyte.
        CountsFormat::Csv => MAX_CSV_LINE_BYTES,
        // A JSON counts file may legitimately be one line.
        CountsFormat::Json => u64::MAX,
    };
    let reader = crate::files::LineCapped::new(reader, max_line, "counts file");
    let mut reader = BufReader::with_capacity(1 << 16, reader);
    // A byte-order mark carries no newline, so dropping it keeps every line number.
    let buf = reader.fill_buf().map_err(|e| Error::io(path, e))?;
    if buf.starts_with(b"\xEF\xBB\xBF") {
        reader.consume(3);
    }
    if reader.fill_buf().map_err(|e| Error::io(path, e))?.is_empty() {
        return Err(Error::input(
            path,
            None,
            match format {
                CountsFormat::Csv => "the file is empty; expected the header circuit,outcome,count",
                CountsFormat::Json => "the file is empty; expected {circuit id: {outcome: count}}",
            },
        ));
    }
    let mut acc = Accumulator::new(path, circuits, opts);
    match format {
        CountsFormat::Csv => read_csv(reader, &mut acc)?,
        CountsFormat::Json => read_json(reader, &mut acc)?,
    }
    acc.finish()
}

/// A hasher for keys of a few machine words (packed outcomes, operation kinds, layer keys):
/// a multiply-rotate mix per word and a final avalanche (the finaliser of SplitMix64,
/// Steele, Lea & Flood 2014). For maps whose keys the program itself made and whose order
/// is never read (outcomes are sorted before use; the others are only looked up), so a
/// faster hash than the default changes no result.
#[derive(Clone, Copy, Default)]
pub(crate) struct WordHasher(u64);

impl WordHasher {
    #[inline]
    fn add(&mut self, w: u64) {
        self.0 = (self.0.rotate_left(5) ^ w).wrapping_mul(0x51_7c_c1_b7_27_22_0a_95);
    }
}

impl std::hash::Hasher for WordHasher {
    fn write(&mut self, bytes: &[u8]) {
        let mut chunks = bytes.chunks_exact(8);
        for c in &mut chunks {
            self.add(u64::from_le_bytes(c.try_into().expect("8 bytes")));
        }
        let rest = chunks.remainder();
        if !rest.is_empty() {
            let mut b = [0u8; 8];
            b[..rest.len()].copy_from_slice(rest);
            self.add(u64::from_le_bytes(b));
        }
    }

    fn write_u8(&mut self, w: u8) {
        self.add(w as u64);
    }

    fn write_u16(&mut self, w: u16) {
        self.add(w as u64);
    }

    fn write_u32(&mut self, w: u32) {
        self.add(w as u64);
    }

    fn write_u64(&mut self, w: u64) {
        self.add(w);
    }

    fn write_isize(&mut self, w: isize) {
        self.add(w as u64);
    }

    fn write_usize(&mut self, w: usize) {
        self.add(w as u64);
    }

    fn finish(&self) -> u64 {
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
        z ^ (z >> 31)
    }
}

/// A map hashed with [`WordHasher`].
pub(crate) type FastMap<K, V> = HashMap<K, V, std::hash::BuildHasherDefault<WordHasher>>;

type WordMap<K> = FastMap<K, u64>;

/// The rows of one circuit while reading, by outcome. Up to 64 measured qubits the key is
/// the packed word itself: about 20 bytes an entry instead of about 80 for a boxed
/// [`Outcome`], which is what lets a file with millions of distinct outcomes be read in
/// memory close to its own size.
enum OutcomeRows {
    Packed(WordMap<u64>),
    Wide(WordMap<Outcome>),
}

/// An outcome packed as [`OutcomeRows`] keys it: the word itself up to 64 measured qubits.
enum Key {
    Packed(u64),
    Wide(Outcome),
}

impl Key {
    /// The key of an outcome of `n` measured qubits, bit i the i-th of `bits`.
    fn of(bits: impl Iterator<Item = bool>, n: usize) -> Key {
        if n <= 64 {
            Key::Packed(bits.enumerate().fold(0u64, |w, (i, b)| w | ((b as u64) << i)))
        } else {
            Key::Wide(packed(bits, n))
        }
    }
}

impl OutcomeRows {
    fn new(n_measured: usize) -> OutcomeRows {
        if n_measured <= 64 {
            OutcomeRows::Packed(WordMap::default())
        } else {
            OutcomeRows::Wide(WordMap::default())
        }
    }

    /// Inserts; false when the outcome was already there.
    fn insert(&mut self, key: Key, count: u64) -> bool {
        match (self, key) {
            (OutcomeRows::Packed(m), Key::Packed(w)) => m.insert(w, count).is_none(),
            (OutcomeRows::Wide(m), Key::Wide(o)) => m.insert(o, count).is_none(),
            _ => unreachable!("a key is packed for its circuit's width"),
        }
    }

    /// Adds one to an outcome's count.
    fn increment(&mut self, key: Key) {
        match (self, key) {
            (OutcomeRows::Packed(m), Key::Packed(w)) => *m.entry(w).or_default() += 1,
            (OutcomeRows::Wide(m), Key::Wide(o)) => *m.entry(o).or_default() += 1,
            _ => unreachable!("a key is packed for its circuit's width"),
        }
    }

    /// Turns stored probabilities (as `f64` bits) into counts of `shots`: negative entries
    /// of a quasi-distribution are set to 0, the rest rescaled to sum 1 and rounded.
    /// `None` when nothing positive is left.
    fn probabilities_to_counts(self, shots: u64) -> Option<OutcomeRows> {
        fn convert<K: std::hash::Hash + Eq>(m: WordMap<K>, shots: u64) -> Option<WordMap<K>> {
            let clipped: Vec<(K, f64)> =
                m.into_iter().map(|(k, v)| (k, f64::from_bits(v).max(0.0))).collect();
            let total: f64 = clipped.iter().map(|(_, p)| p).sum();
            (total > 0.0).then(|| {
                clipped
                    .into_iter()
                    .map(|(k, p)| (k, (p / total * shots as f64).round() as u64))
                    .collect()
            })
        }
        Some(match self {
            OutcomeRows::Packed(m) => OutcomeRows::Packed(convert(m, shots)?),
            OutcomeRows::Wide(m) => OutcomeRows::Wide(convert(m, shots)?),
        })
    }

    /// The rows with a positive count, sorted by outcome.
    fn into_outcomes(self) -> Vec<(Outcome, u64)> {
        let mut v: Vec<(Outcome, u64)> = match self {
            OutcomeRows::Packed(m) => m
                .into_iter()
                .filter(|&(_, n)| n > 0)
                .map(|(w, n)| (Outcome(Box::new([w])), n))
                .collect(),
            OutcomeRows::Wide(m) => m.into_iter().filter(|&(_, n)| n > 0).collect(),
        };
        v.sort_unstable();
        v
    }
}

/// The `n` bits as an [`Outcome`], the same as [`Outcome::from_bits`] of them collected.
fn packed(bits: impl Iterator<Item = bool>, n: usize) -> Outcome {
    let mut words = vec![0u64; n.div_ceil(64).max(1)];
    for (i, b) in bits.enumerate() {
        words[i / 64] |= (b as u64) << (i % 64);
    }
    Outcome(words.into_boxed_slice())
}

/// Collects rows, checking each against its circuit. One `HashMap` per circuit that has
/// rows, because rows of a circuit may be spread through a file and repeats must be found.
struct Accumulator<'a> {
    path: &'a Path,
    circuits: &'a CircuitSet,
    reversed: bool,
    /// With `Some(n)` the values are probabilities, stored as `f64::to_bits` in the maps
    /// until [`Accumulator::finish`] turns them into counts of `n` shots.
    shots: Option<u64>,
    maps: Vec<Option<OutcomeRows>>,
    totals: Vec<u64>,
    first_line: Vec<Option<usize>>,
    rows: usize,
    /// The circuit of the row before: a file's rows come grouped by circuit.
    last: Option<usize>,
}

impl<'a> Accumulator<'a> {
    fn new(path: &'a Path, circuits: &'a CircuitSet, opts: &CountsOptions) -> Accumulator<'a> {
        let n = circuits.len();
        Accumulator {
            path,
            circuits,
            reversed: opts.bit_order == BitOrder::Reversed,
            shots: opts.shots,
            maps: (0..n).map(|_| None).collect(),
            totals: vec![0; n],
            first_line: vec![None; n],
            rows: 0,
            last: None,
        }
    }

    fn err(&self, line: Option<usize>, message: impl Into<String>) -> Error {
        Error::input(self.path, line, message)
    }

    /// The key of a checked bitstring (one byte per measured qubit), in the file's bit order.
    fn key(&self, bytes: &[u8]) -> Key {
        let n = bytes.len();
        let reversed = self.reversed;
        Key::of((0..n).map(|i| bytes[if reversed { n - 1 - i } else { i }] == b'1'), n)
    }

    /// One data line of a CSV counts file checked and packed as [`read_csv`] and
    /// [`Accumulator::add`] would take it, without the reader's state; `None` where either
    /// would fail or where the line's circuit has more than one row per shot to add.
    fn prepare(&self, line: usize, bytes: &[u8]) -> Option<Prepared> {
        let text = std::str::from_utf8(bytes).ok()?;
        let mut fields = text.split(',');
        let (Some(id), Some(outcome), Some(count), None) =
            (fields.next(), fields.next(), fields.next(), fields.next())
        else {
            return text.split(',').all(|f| f.trim().is_empty()).then_some(Prepared::Blank);
        };
        if [id, outcome, count].iter().all(|f| f.trim().is_empty()) {
            return Some(Prepared::Blank);
        }
        let value = parse_value(count.trim()).and_then(|v| self.stored(v)).ok()?;
        let ci = self.circuits.position(id.trim())?;
        let n = self.circuits.circuits[ci].measured.len();
        let outcome = outcome.trim();
        let expanded = expand_outcome(outcome, n).ok()?;
        let bytes = expanded.as_deref().unwrap_or(outcome).as_bytes();
        if bytes.len() != n || bytes.iter().any(|&b| b != b'0' && b != b'1') {
            return None;
        }
        Some(Prepared::Row { line, ci, key: self.key(bytes), value })
    }

    /// Adds a prepared row as [`Accumulator::circuit`] and [`Accumulator::add`] do; `None`
    /// where they would fail (a repeated outcome, a total past 64 bits).
    fn commit(&mut self, line: usize, ci: usize, key: Key, value: u64) -> Option<()> {
        self.mark(Some(line), ci);
        if !self.maps[ci].as_mut()?.insert(key, value) {
            return None;
        }
        if self.shots.is_none() {
            self.totals[ci] = self.totals[ci].checked_add(value)?;
        }
        self.rows += 1;
        Some(())
    }

    /// Marks circuit `ci` as having counts, first met on `line`.
    fn mark(&mut self, line: Option<usize>, ci: usize) {
        if self.maps[ci].is_none() {
            self.maps[ci] = Some(OutcomeRows::new(self.circuits.circuits[ci].measured.len()));
            self.first_line[ci] = line;
        }
        self.last = Some(ci);
    }

    /// The index of a circuit id, marking it as having counts.
    fn circuit(&mut self, line: Option<usize>, id: &str) -> Result<usize> {
        if let Some(ci) = self.last.filter(|&ci| self.circuits.circuits[ci].id == id) {
            return Ok(ci);
        }
        let Some(ci) = self.circuits.position(id) else {
            let theirs = crate::design::design_of_id(id);
            let ours =
                self.circuits.circuits.first().and_then(|c| crate::design::design_of_id(&c.id));
            if let (Some(theirs), Some(ours)) = (theirs, ours) {
                if theirs != ours {
                    return Err(self.err(
                        line,
                        format!(
                            "these counts come from another design: circuit id '{}' belongs to \
                             design {theirs}, but the circuit file is design {ours} (another \
                             seed, layout or settings); use the counts made by running this \
                             circuit file",
                            echo(id)
                        ),
                    ));
                }
            }
            let some: Vec<&str> =
                self.circuits.circuits.iter().take(3).map(|c| c.id.as_str()).collect();
            return Err(self.err(
                line,
                format!(
                    "unknown circuit id '{}'; the circuit file has {} circuit(s){}",
                    echo(id),
                    self.circuits.len(),
                    if some.is_empty() {
                        String::new()
                    } else {
                        format!(" ({}, ...)", some.join(", "))
                    }
                ),
            ));
        };
        self.mark(line, ci);
        Ok(ci)
    }

    fn add(&mut self, line: Option<usize>, ci: usize, outcome: &str, count: u64) -> Result<()> {
        self.add_value(line, ci, outcome, count, false)
    }

    /// Adds one shot of `outcome` (a per-shot list): repeats add up.
    fn add_shot(&mut self, line: Option<usize>, ci: usize, outcome: &str) -> Result<()> {
        self.add_value(line, ci, outcome, 1, true)
    }

    fn add_value(
        &mut self,
        line: Option<usize>,
        ci: usize,
        outcome: &str,
        count: u64,
        accumulate: bool,
    ) -> Result<()> {
        let c = &self.circuits.circuits[ci];
        let n = c.measured.len();
        let written = outcome;
        let expanded = expand_outcome(outcome, n).map_err(|m| {
            self.err(line, format!("outcome '{}' of circuit {}: {m}", echo(written), c.id))
        })?;
        let outcome = expanded.as_deref().unwrap_or(outcome);
        let bytes = outcome.as_bytes();
        let bad = bytes.iter().position(|&b| b != b'0' && b != b'1');
        let len = if bad.is_some() { outcome.chars().count() } else { bytes.len() };
        if len != n {
            return Err(self.err(
                line,
                format!(
                    "outcome '{outcome}' has {len} character(s), but circuit {} measures {n} qubit(s)",
                    c.id
                ),
            ));
        }
        if bad.is_some() {
            let (i, ch) = outcome
                .chars()
                .enumerate()
                .find(|&(_, ch)| ch != '0' && ch != '1')
                .unwrap_or((0, '?'));
            return Err(self.err(
                line,
                format!(
                    "outcome '{outcome}' is not a bitstring over the {n} measured qubits of circuit \
                     {} (character {} is {ch:?}; only 0 and 1 are allowed)",
                    c.id,
                    i + 1
                ),
            ));
        }
        let key = self.key(bytes);
        let rows = self.maps[ci].get_or_insert_with(|| OutcomeRows::new(n));
        if accumulate {
            rows.increment(key);
        } else if !rows.insert(key, count) {
            return Err(Error::input(
                self.path,
                line,
                format!(
                    "duplicate outcome '{outcome}' for circuit {} (each outcome may appear once \
                     per circuit)",
                    c.id
                ),
            ));
        }
        if self.shots.is_some() {
            self.rows += 1;
            return Ok(());
        }
        self.totals[ci] = self.totals[ci].checked_add(count).ok_or_else(|| {
            Error::input(
                self.path,
                line,
                format!("circuit {}: total shots overflow a 64-bit count", c.id),
            )
        })?;
        self.rows += 1;
        Ok(())
    }

    fn finish(self) -> Result<(Counts, Vec<Warning>)> {
        if self.rows == 0 && self.maps.iter().all(Option::is_none) {
            return Err(self.err(None, "the file holds no counts"));
        }
        let mut missing = Vec::new();
        let mut per_circuit = Vec::with_capacity(self.maps.len());
        for (ci, map) in self.maps.into_iter().enumerate() {
            let id = &self.circuits.circuits[ci].id;
            let Some(map) = map else {
                missing.push(id.as_str());
                per_circuit.push(None);
                continue;
            };
            let map = match self.shots {
                None => map,
                Some(shots) => match map.probabilities_to_counts(shots) {
                    Some(m) => m,
                    None => {
                        return Err(Error::input(
                            self.path,
                            self.first_line[ci],
                            format!("circuit {id}: no outcome has a positive probability"),
                        ))
                    }
                },
            };
            if self.shots.is_none() && self.totals[ci] == 0 {
                return Err(Error::input(
                    self.path,
                    self.first_line[ci],
                    format!("circuit {id} has a total of zero shots; every circuit with counts needs at least one"),
                ));
            }
            // Zero-count rows carry no shots; keeping them out keeps every stored count > 0.
            per_circuit.push(Some(CircuitCounts { outcomes: map.into_outcomes() }));
        }
        let mut warnings = Vec::new();
        if !missing.is_empty() {
            const SHOWN: usize = 10;
            let mut list = missing.iter().take(SHOWN).copied().collect::<Vec<_>>().join(", ");
            if missing.len() > SHOWN {
                list.push_str(&format!(" and {} more", missing.len() - SHOWN));
            }
            warnings.push(Warning::new(
                "circuits-without-counts",
                format!(
                    "{}: {} of {} circuits have no counts: {list}",
                    self.path.display(),
                    missing.len(),
                    self.circuits.len()
                ),
                "they are left out of the analysis; check that the counts file belongs to this circuit file",
            ));
        }
        Ok((Counts { per_circuit }, warnings))
    }
}

/// Rewrites an outcome written in another accepted shape as the tool's own '0'/'1' string
/// (character i = i-th measured qubit, before `--bit-order`); `None` when it already is one.
/// - `0x` hex: bit i of the number (least significant first) is character i; the number
///   must be below 2^n for the circuit's n measured qubits.
/// - Space-separated groups (one per bit register): the spaces are dropped and the
///   characters read in the order written.
fn expand_outcome(outcome: &str, n: usize) -> std::result::Result<Option<String>, String> {
    if let Some(hex) = outcome.strip_prefix("0x").or_else(|| outcome.strip_prefix("0X")) {
        if hex.is_empty() || !hex.bytes().all(|b| b.is_ascii_hexdigit()) {
            return Err("a 0x outcome needs hexadecimal digits after 0x".into());
        }
        let mut bits = vec![b'0'; n];
        for (j, ch) in hex.bytes().rev().enumerate() {
            let d = (ch as char).to_digit(16).unwrap_or(0);
            for k in 0..4 {
                if d >> k & 1 == 1 {
                    let i = 4 * j + k;
                    if i >= n {
                        return Err(format!(
                            "the number is too large for the {n} measured qubit(s) (at most {n} bits)"
                        ));
                    }
                    bits[i] = b'1';
                }
            }
        }
        return Ok(Some(String::from_utf8(bits).unwrap_or_default()));
    }
    if outcome.contains(' ') {
        return Ok(Some(outcome.chars().filter(|&c| c != ' ').collect()));
    }
    Ok(None)
}

/// A number as written in a counts file, before the reader decides what it means.
#[derive(Copy, Clone, Debug)]
enum Value {
    /// Digits only.
    Whole(u64),
    /// Anything else that reads as a number (`490.0`, `0.25`, `1e3`, `-2`).
    Real(f64),
}

/// Parses a value as written in a CSV field.
fn parse_value(text: &str) -> std::result::Result<Value, String> {
    if text.is_empty() {
        return Err("count is empty".into());
    }
    if text.bytes().all(|b| b.is_ascii_digit()) {
        return text
            .parse::<u64>()
            .map(Value::Whole)
            .map_err(|_| format!("count '{}' is too large (at most {})", echo(text), u64::MAX));
    }
    match text.parse::<f64>() {
        Ok(v) if v.is_finite() => Ok(Value::Real(v)),
        _ => Err(format!("count '{}' is not a number", echo(text))),
    }
}

/// Largest whole number a float holds exactly (2^53).
const EXACT_FLOAT: f64 = 9_007_199_254_740_992.0;

impl Accumulator<'_> {
    /// What a value means here: a count of shots, or (with `--shots`) a probability kept as
    /// `f64` bits until [`Accumulator::finish`].
    fn stored(&self, v: Value) -> std::result::Result<u64, String> {
        let shown = |v: Value| match v {
            Value::Whole(n) => n.to_string(),
            Value::Real(x) => x.to_string(),
        };
        match (self.shots, v) {
            (None, Value::Whole(n)) => Ok(n),
            (None, Value::Real(x)) if x < 0.0 => {
                Err(format!("count {x} is negative; counts are whole numbers of shots"))
            }
            (None, Value::Real(x)) if x.fract() == 0.0 && x <= EXACT_FLOAT => Ok(x as u64),
            (None, Value::Real(x)) if x.fract() == 0.0 => {
                Err(format!("count {x} is too large to be exact as written; write it as digits"))
            }
            (None, Value::Real(x)) => Err(format!(
                "count {x} is fractional; counts are whole numbers of shots (if the file holds \
                 probabilities, pass --shots N with the shots each circuit ran)"
            )),
            (Some(_), v) => {
                let p = match v {
                    Value::Whole(n) => n as f64,
                    Value::Real(x) => x,
                };
                if (-1.0..=1.0 + 1e-9).contains(&p) {
                    Ok(p.to_bits())
                } else {
                    Err(format!(
                        "value {} is not a probability; with --shots the values are \
                         probabilities (quasi-probabilities from -1 to 1); drop --shots to read \
                         counts",
                        shown(v)
                    ))
                }
            }
        }
    }
}

const HEADER: [&str; 3] = ["circuit", "outcome", "count"];

/// A counts file row is one outcome with its count; a per-shot file row is one shot.
#[derive(Copy, Clone, PartialEq, Eq)]
enum CsvShape {
    Counts,
    Shots,
}

fn read_csv<R: Read>(reader: R, acc: &mut Accumulator<'_>) -> Result<()> {
    let path = acc.path;
    let mut rdr = csv::ReaderBuilder::new().has_headers(false).flexible(true).from_reader(reader);
    let csv_err = |e: csv::Error| {
        let line = e.position().map(|p| p.line() as usize);
        match e.into_kind() {
            csv::ErrorKind::Io(io) => Error::io(path, io),
            csv::ErrorKind::Utf8 { .. } => Error::input(path, line, "the line is not UTF-8 text"),
            other => Error::input(path, line, format!("not valid CSV: {:?}", other)),
        }
    };
    let mut rec = csv::StringRecord::new();
    let mut header_seen = false;
    let mut shape = CsvShape::Counts;
    while rdr.read_record(&mut rec).map_err(csv_err)? {
        let line = rec.position().map(|p| p.line() as usize);
        // A line of only separators or spaces is as blank as an empty one.
        if rec.iter().all(|f| f.trim().is_empty()) {
            continue;
        }
        if !header_seen {
            let named = |n: usize| rec.iter().zip(&HEADER[..n]).all(|(f, h)| f.trim() == *h);
            shape = match rec.len() {
                3 if named(3) => CsvShape::Counts,
                2 if named(2) => CsvShape::Shots,
                _ => {
                    let got = rec.iter().map(str::trim).collect::<Vec<_>>().join(",");
                    return Err(acc.err(
                        line,
                        format!(
                            "the header is '{}'; expected 'circuit,outcome,count' (one row per \
                             outcome) or 'circuit,outcome' (one row per shot)",
                            echo(&got)
                        ),
                    ));
                }
            };
            header_seen = true;
            continue;
        }
        if shape == CsvShape::Shots {
            if rec.len() != 2 {
                return Err(acc.err(
                    line,
                    format!(
                        "expected 2 fields (circuit,outcome: one row per shot), found {}",
                        rec.len()
                    ),
                ));
            }
            let ci = acc.circuit(line, rec[0].trim())?;
            acc.add_shot(line, ci, rec[1].trim())?;
            continue;
        }
        if rec.len() != 3 {
            return Err(acc.err(
                line,
                format!("expected 3 fields (circuit,outcome,count), found {}", rec.len()),
            ));
        }
        // Trimming here rather than in the csv reader avoids a copy of every record.
        let count =
            parse_value(rec[2].trim()).and_then(|v| acc.stored(v)).map_err(|m| acc.err(line, m))?;
        let ci = acc.circuit(line, rec[0].trim())?;
        acc.add(line, ci, rec[1].trim(), count)?;
    }
    if !header_seen {
        return Err(acc.err(None, "the file is empty; expected the header circuit,outcome,count"));
    }
    if acc.rows == 0 {
        return Err(acc.err(None, "the file has a header but no counts rows"));
    }
    Ok(())
}

/// Streams the JSON object with serde visitors, so no document tree is ever built. A
/// semantic error is parked in `failure` and a placeholder error stops the parser, which
/// then supplies the line it had reached.
fn read_json<R: Read>(reader: R, acc: &mut Accumulator<'_>) -> Result<()> {
    let path = acc.path;
    let mut failure = None;
    let mut de = serde_json::Deserializer::from_reader(reader);
    let parsed =
        FileSeed { acc, failure: &mut failure }.deserialize(&mut de).and_then(|()| de.end());
    match parsed {
        Ok(()) => Ok(()),
        Err(e) => {
            let line = (e.line() > 0).then_some(e.line());
            match failure {
                Some(Error::Input { location, message }) => {
                    Err(Error::input(path, location.line.or(line), message))
                }
                Some(other) => Err(other),
                None if e.is_io() => Err(Error::io(path, std::io::Error::other(e.to_string()))),
                None if e.is_eof() => Err(Error::input(
                    path,
                    line,
                    "the JSON ends before it is complete (truncated file?)",
                )),
                None => {
                    let text = e.to_string();
                    // serde_json appends " at line L column C"; keep only the column.
                    let text = match text.rfind(" at line ") {
                        Some(i) => format!("{} (column {})", &text[..i], e.column()),
                        None => text,
                    };
                    Err(Error::input(path, line, format!("not valid counts JSON: {text}")))
                }
            }
        }
    }
}

struct FileSeed<'s, 'a> {
    acc: &'s mut Accumulator<'a>,
    failure: &'s mut Option<Error>,
}

impl<'de> DeserializeSeed<'de> for FileSeed<'_, '_> {
    type Value = ();
    fn deserialize<D: de::Deserializer<'de>>(self, d: D) -> std::result::Result<(), D::Error> {
        d.deserialize_map(self)
    }
}

impl<'de> Visitor<'de> for FileSeed<'_, '_> {
    type Value = ();

    fn expecting(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str("an object mapping circuit ids to {outcome: count} objects")
    }

    fn visit_map<A: MapAccess<'de>>(self, mut map: A) -> std::result::Result<(), A::Error> {
        let FileSeed { acc, failure } = self;
        while let Some(id) = map.next_key::<String>()? {
            if acc.circuits.position(&id).is_some_and(|ci| acc.maps[ci].is_some()) {
                *failure = Some(acc.err(None, format!("circuit {id} appears twice")));
                return Err(de::Error::custom("duplicate circuit"));
            }
            let ci = match acc.circuit(None, &id) {
                Ok(ci) => ci,
                Err(e) => {
                    *failure = Some(e);
                    return Err(de::Error::custom("unknown circuit"));
                }
            };
            map.next_value_seed(CircuitSeed {
                acc: &mut *acc,
                failure: &mut *failure,
                ci,
                id: &id,
            })?;
        }
        Ok(())
    }
}

struct CircuitSeed<'s, 'a> {
    acc: &'s mut Accumulator<'a>,
    failure: &'s mut Option<Error>,
    ci: usize,
    id: &'s str,
}

impl<'de> DeserializeSeed<'de> for CircuitSeed<'_, '_> {
    type Value = ();
    fn deserialize<D: de::Deserializer<'de>>(self, d: D) -> std::result::Result<(), D::Error> {
        d.deserialize_any(self)
    }
}

impl<'de> Visitor<'de> for CircuitSeed<'_, '_> {
    type Value = ();

    fn expecting(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(
            f,
            "an object of outcome: count pairs, or a list of per-shot outcomes, for circuit {}",
            self.id
        )
    }

    fn visit_map<A: MapAccess<'de>>(self, mut map: A) -> std::result::Result<(), A::Error> {
        while let Some(outcome) = map.next_key::<String>()? {
            let value = map.next_value_seed(CountSeed)?;
            let added = value
                .and_then(|v| self.acc.stored(v))
                .map_err(|why| {
                    self.acc.err(
                        None,
                        format!("circuit {} outcome '{}': {why}", self.id, echo(&outcome)),
                    )
                })
                .and_then(|n| self.acc.add(None, self.ci, &outcome, n));
            if let Err(e) = added {
                *self.failure = Some(e);
                return Err(de::Error::custom("bad count"));
            }
        }
        Ok(())
    }

    fn visit_seq<A: de::SeqAccess<'de>>(self, mut seq: A) -> std::result::Result<(), A::Error> {
        if self.acc.shots.is_some() {
            *self.failure = Some(self.acc.err(
                None,
                format!(
                    "circuit {} holds a per-shot list of outcomes; --shots is only for files of \
                     probabilities: drop it",
                    self.id
                ),
            ));
            return Err(de::Error::custom("shots with a list"));
        }
        while let Some(outcome) = seq.next_element::<String>()? {
            if let Err(e) = self.acc.add_shot(None, self.ci, &outcome) {
                *self.failure = Some(e);
                return Err(de::Error::custom("bad shot"));
            }
        }
        Ok(())
    }
}

/// A JSON count as a [`Value`]; strings and other non-numbers come back as `Err(reason)`,
/// which the caller reports with the circuit and outcome.
struct CountSeed;

impl<'de> DeserializeSeed<'de> for CountSeed {
    type Value = std::result::Result<Value, String>;
    fn deserialize<D: de::Deserializer<'de>>(
        self,
        d: D,
    ) -> std::result::Result<Self::Value, D::Error> {
        d.deserialize_any(self)
    }
}

impl<'de> Visitor<'de> for CountSeed {
    type Value = std::result::Result<Value, String>;

    fn expecting(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str("a count (a whole number of shots)")
    }

    fn visit_u64<E: de::Error>(self, v: u64) -> std::result::Result<Self::Value, E> {
        Ok(Ok(Value::Whole(v)))
    }

    fn visit_i64<E: de::Error>(self, v: i64) -> std::result::Result<Self::Value, E> {
        Ok(Ok(Value::Real(v as f64)))
    }

    fn visit_f64<E: de::Error>(self, v: f64) -> std::result::Result<Self::Value, E> {
        // serde_json hands integers beyond u64 over as floats.
        Ok(if v >= u64::MAX as f64 {
            Err(format!("count {v} is too large (at most {})", u64::MAX))
        } else {
            Ok(Value::Real(v))
        })
    }

    fn visit_str<E: de::Error>(self, v: &str) -> std::result::Result<Self::Value, E> {
        Ok(Err(format!("count \"{}\" is a string; write the number without quotes", echo(v))))
    }

    fn visit_bool<E: de::Error>(self, v: bool) -> std::result::Result<Self::Value, E> {
        Ok(Err(format!("count {v} is not a number")))
    }

    fn visit_unit<E: de::Error>(self) -> std::result::Result<Self::Value, E> {
        Ok(Err("count null is not a number".into()))
    }

    fn visit_map<A: MapAccess<'de>>(self, _: A) -> std::result::Result<Self::Value, A::Error> {
        Err(de::Error::custom(
            "a nested object where a count belongs; expected {circuit id: {outcome: count}} \
             with numbers as counts",
        ))
    }

    fn visit_seq<A: de::SeqAccess<'de>>(self, _: A) -> std::result::Result<Self::Value, A::Error> {
        Err(de::Error::custom(
            "a list where a count belongs; expected {circuit id: {outcome: count}}, or \
             {circuit id: [outcome, ...]} with one outcome per shot",
        ))
    }
}

/// The outcomes of one circuit as ('0'/'1' string in measured order, count), sorted by
/// the string.
fn sorted_strings(n: usize, cc: &CircuitCounts) -> Vec<(String, u64)> {
    let mut v: Vec<(String, u64)> =
        cc.outcomes.iter().map(|(o, c)| (o.to_string_n(n), *c)).collect();
    v.sort_unstable();
    v
}

/// Writes counts as CSV (`circuit,outcome,count`): circuits in set order, outcomes sorted
/// by their string, measured order (character i = i-th measured qubit). Circuits without
/// counts are skipped.
pub fn write_csv<W: Write>(w: W, circuits: &CircuitSet, counts: &Counts) -> std::io::Result<()> {
    let mut out = csv::Writer::from_writer(w);
    out.write_record(HEADER)?;
    for (c, cc) in circuits.circuits.iter().zip(&counts.per_circuit) {
        let Some(cc) = cc else { continue };
        for (o, n) in sorted_strings(c.measured.len(), cc) {
            out.write_record([c.id.as_str(), o.as_str(), n.to_string().as_str()])?;
        }
    }
    out.flush()
}

/// Writes counts as JSON `{circuit: {outcome: count}}`, one circuit per line, in the same
/// order and bit order as [`write_csv`].
pub fn write_json<W: Write>(
    mut w: W,
    circuits: &CircuitSet,
    counts: &Counts,
) -> std::io::Result<()> {
    let quote = |s: &str| serde_json::to_string(s).map_err(std::io::Error::other);
    w.write_all(b"{")?;
    let mut first = true;
    for (c, cc) in circuits.circuits.iter().zip(&counts.per_circuit) {
        let Some(cc) = cc else { continue };
        w.write_all(if first { b"\n  " } else { b",\n  " })?;
        first = false;
        write!(w, "{}: {{", quote(&c.id)?)?;
        for (k, (o, n)) in sorted_strings(c.measured.len(), cc).into_iter().enumerate() {
            write!(w, "{}\"{o}\": {n}", if k == 0 { "" } else { ", " })?;
        }
        w.write_all(b"}")?;
    }
    w.write_all(b"\n}\n")?;
    w.flush()
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;
    use std::path::PathBuf;

    fn fixtures() -> PathBuf {
        PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures")
    }

    fn good_circuits() -> CircuitSet {
        let layout = crate::layout::read_layout(&fixtures().join("good/layout.toml")).unwrap();
        crate::circuit::json::read_json(&fixtures().join("good/circuits.json"), &layout).unwrap()
    }

    fn read_text(
        text: &str,
        format: CountsFormat,
        opts: &CountsOptions,
    ) -> Result<(Counts, Vec<Warning>)> {
        let name = match format {
            CountsFormat::Csv => "shots.csv",
            CountsFormat::Json => "shots.json",
        };
        read_counts_from(text.as_bytes(), format, Path::new(name), &good_circuits(), opts)
    }

    fn lookup(cc: &CircuitCounts, bits: &[bool]) -> u64 {
        let key = Outcome::from_bits(bits);
        cc.outcomes.iter().find(|(o, _)| *o == key).map_or(0, |(_, n)| *n)
    }

    #[test]
    fn reads_good_csv_and_json_alike() {
        let set = good_circuits();
        let opts = CountsOptions::default();
        let (csv, w1) = read_counts(&fixtures().join("good/counts.csv"), &set, &opts).unwrap();
        let (json, w2) = read_counts(&fixtures().join("good/counts.json"), &set, &opts).unwrap();
        assert!(w1.is_empty() && w2.is_empty());
        assert_eq!(csv.per_circuit, json.per_circuit);
        assert_eq!(csv.per_circuit.len(), set.len());
        let ref_q0 = csv.per_circuit[0].as_ref().unwrap();
        assert_eq!(ref_q0.shots(), 1000);
        // "100": the first measured qubit (q0) read 1.
        assert_eq!(lookup(ref_q0, &[true, false, false]), 500);
        assert_eq!(lookup(ref_q0, &[false, true, false]), 20);
        assert_eq!(ref_q0.marginal(&[0]), vec![500, 500]);
        let cz = csv.per_circuit[2].as_ref().unwrap();
        assert_eq!(cz.marginal(&[1]), vec![980, 20]);
    }

    #[test]
    fn reversed_bit_order_flips_each_outcome() {
        let opts = CountsOptions { bit_order: BitOrder::Reversed, shots: None };
        let text = std::fs::read_to_string(fixtures().join("good/counts.csv")).unwrap();
        let (c, _) = read_text(&text, CountsFormat::Csv, &opts).unwrap();
        let ref_q0 = c.per_circuit[0].as_ref().unwrap();
        // "100" now means the last measured qubit (q3) read 1.
        assert_eq!(lookup(ref_q0, &[false, false, true]), 500);
        assert_eq!(lookup(ref_q0, &[false, true, false]), 20);
        assert_eq!(ref_q0.marginal(&[2]), vec![500, 500]);
    }

    #[test]
    fn tolerates_bom_crlf_blank_lines_and_spaces() {
        let text =
            "\u{feff}circuit,outcome,count\r\nref-q0, 000 ,480\r\n\r\nref-q0,100,500\r\n\r\n\r\n";
        let (c, w) = read_text(text, CountsFormat::Csv, &CountsOptions::default()).unwrap();
        assert_eq!(c.per_circuit[0].as_ref().unwrap().shots(), 980);
        assert_eq!(w.len(), 1);
        let json = "\u{feff}{\r\n\"ref-q0\": {\"000\": 3}\r\n}\r\n\r\n";
        let (c, _) = read_text(json, CountsFormat::Json, &CountsOptions::default()).unwrap();
        assert_eq!(c.per_circuit[0].as_ref().unwrap().shots(), 3);
    }

    /// Every lab shape of the same counts reads as the plain form: hex keys (bit i of the
    /// number = character i), floats that are whole numbers, space-separated groups,
    /// per-shot lists (CSV and JSON), and probabilities with --shots.
    #[test]
    fn lab_shapes_read_as_the_plain_form() {
        let plain = "circuit,outcome,count\nref-q0,000,480\nref-q0,100,500\nref-q0,010,20\n";
        let opts = CountsOptions::default();
        let (want, _) = read_text(plain, CountsFormat::Csv, &opts).unwrap();
        let want = &want.per_circuit[0];
        let same = |text: &str, f: CountsFormat, opts: &CountsOptions| {
            let (got, _) = read_text(text, f, opts).unwrap_or_else(|e| panic!("{text}: {e}"));
            assert_eq!(&got.per_circuit[0], want, "{text}");
        };
        same(
            "circuit,outcome,count\nref-q0,0x0,480\nref-q0,0x1,500\nref-q0,0X2,20\n",
            CountsFormat::Csv,
            &opts,
        );
        same(
            "circuit,outcome,count\nref-q0,000,480.0\nref-q0,100,5e2\nref-q0,010,20\n",
            CountsFormat::Csv,
            &opts,
        );
        same(
            "circuit,outcome,count\nref-q0,0 00,480\nref-q0,1 00,500\nref-q0,01 0,20\n",
            CountsFormat::Csv,
            &opts,
        );
        same(r#"{"ref-q0": {"0x0": 480.0, "0x1": 500, "0 1 0": 20}}"#, CountsFormat::Json, &opts);
        let mut shots = String::from("circuit,outcome\n");
        let mut list = Vec::new();
        for (o, n) in [("000", 480), ("100", 500), ("010", 20)] {
            for _ in 0..n {
                shots.push_str(&format!("ref-q0,{o}\n"));
                list.push(format!("\"{o}\""));
            }
        }
        same(&shots, CountsFormat::Csv, &opts);
        same(&format!("{{\"ref-q0\": [{}]}}", list.join(",")), CountsFormat::Json, &opts);
        let with_shots = CountsOptions { shots: Some(1000), ..Default::default() };
        same(
            "circuit,outcome,count\nref-q0,000,0.48\nref-q0,100,0.5\nref-q0,010,0.02\n",
            CountsFormat::Csv,
            &with_shots,
        );
        // A quasi-distribution: the negative entry goes, the rest is rescaled.
        same(
            r#"{"ref-q0": {"000": 0.4704, "100": 0.49, "010": 0.0196, "001": -0.02}}"#,
            CountsFormat::Json,
            &with_shots,
        );
        // Without --shots, probabilities are refused with the fix; with it, counts are.
        let m = read_text("circuit,outcome,count\nref-q0,000,0.48\n", CountsFormat::Csv, &opts)
            .unwrap_err()
            .to_string();
        assert!(m.contains("fractional") && m.contains("pass --shots N"), "{m}");
        let m = read_text(plain, CountsFormat::Csv, &with_shots).unwrap_err().to_string();
        assert!(m.contains("value 480 is not a probability") && m.contains("drop --shots"), "{m}");
        let m = read_text("circuit,outcome,count\nref-q0,0x8,1\n", CountsFormat::Csv, &opts)
            .unwrap_err()
            .to_string();
        assert!(m.contains("too large for the 3 measured qubit(s)"), "{m}");
        let m = read_text(r#"{"ref-q0": {"000": {"count": 3}}}"#, CountsFormat::Json, &opts)
            .unwrap_err()
            .to_string();
        assert!(m.contains("a nested object where a count belongs"), "{m}");
        let m = read_text("circuit,bits\nref-q0,000\n", CountsFormat::Csv, &opts)
            .unwrap_err()
            .to_string();
        assert!(m.contains("or 'circuit,outcome' (one row per shot)"), "{m}");
    }

    #[test]
    fn missing_circuits_give_one_warning() {
        let text = "circuit,outcome,count\nref-q0,000,480\npair-q0-q1,00,0\npair-q0-q1,01,2\n";
        let (c, w) = read_text(text, CountsFormat::Csv, &CountsOptions::default()).unwrap();
        assert_eq!(w.len(), 1);
        assert_eq!(w[0].code, "circuits-without-counts");
        assert!(
            w[0].message.contains("2 of 4 circuits have no counts: cz-q1-q4, idle-all"),
            "{}",
            w[0]
        );
        assert!(c.per_circuit[2].is_none() && c.per_circuit[3].is_none());
        // The zero-count row is dropped: stored counts are all > 0.
        assert_eq!(c.per_circuit[1].as_ref().unwrap().outcomes.len(), 1);
    }

    #[test]
    fn extension_chooses_the_format() {
        assert_eq!(CountsFormat::from_path(Path::new("a/B.CSV")).unwrap(), CountsFormat::Csv);
        assert_eq!(CountsFormat::from_path(Path::new("b.json")).unwrap(), CountsFormat::Json);
        let m = CountsFormat::from_path(Path::new("counts.txt")).unwrap_err().to_string();
        assert!(m.contains("counts.txt: counts files must end in .csv"), "{m}");
        let m =
            read_counts(Path::new("no/such/file.csv"), &good_circuits(), &CountsOptions::default())
                .unwrap_err();
        assert!(matches!(m, Error::Io { .. }));
    }

    #[test]
    fn writers_round_trip() {
        let set = good_circuits();
        let opts = CountsOptions::default();
        let (c, _) = read_counts(&fixtures().join("good/counts.csv"), &set, &opts).unwrap();
        let mut csv = Vec::new();
        write_csv(&mut csv, &set, &c).unwrap();
        let csv = String::from_utf8(csv).unwrap();
        assert!(
            csv.starts_with(
                "circuit,outcome,count\nref-q0,000,480\nref-q0,010,20\nref-q0,100,500\n"
            ),
            "{csv}"
        );
        let mut json = Vec::new();
        write_json(&mut json, &set, &c).unwrap();
        let json = String::from_utf8(json).unwrap();
        assert!(
            json.starts_with("{\n  \"ref-q0\": {\"000\": 480, \"010\": 20, \"100\": 500},\n"),
            "{json}"
        );
        for (text, f) in [(csv, CountsFormat::Csv), (json, CountsFormat::Json)] {
            let (back, w) = read_text(&text, f, &opts).unwrap();
            assert!(w.is_empty());
            assert_eq!(back.per_circuit, c.per_circuit);
        }
    }

    #[test]
    fn wide_outcomes_over_64_qubits() {
        use crate::circuit::Circuit;
        let wide = Circuit { id: "w".into(), layers: vec![], measured: (0..70).collect() };
        let narrow = Circuit { id: "n".into(), layers: vec![], measured: (0..3).collect() };
        let set = CircuitSet::new(vec![wide, narrow]).unwrap();
        let mut first = "0".repeat(70);
        first.replace_range(65..66, "1");
        let text = format!("circuit,outcome,count\nw,{first},5\nw,{},7\nn,011,2\n", "1".repeat(70));
        for (order, bit) in [(BitOrder::AsMeasured, 65), (BitOrder::Reversed, 4)] {
            let opts = CountsOptions { bit_order: order, shots: None };
            let (c, w) = read_counts_from(
                text.as_bytes(),
                CountsFormat::Csv,
                Path::new("w.csv"),
                &set,
                &opts,
            )
            .unwrap();
            assert!(w.is_empty());
            let mut bits = vec![false; 70];
            bits[bit] = true;
            assert_eq!(lookup(c.per_circuit[0].as_ref().unwrap(), &bits), 5, "{order:?}");
            assert_eq!(lookup(c.per_circuit[0].as_ref().unwrap(), &[true; 70]), 7);
            let n_bits =
                if order == BitOrder::Reversed { [true, true, false] } else { [false, true, true] };
            assert_eq!(lookup(c.per_circuit[1].as_ref().unwrap(), &n_bits), 2);
        }
        let dup = format!("{text}w,{first},1\n");
        let m = read_counts_from(
            dup.as_bytes(),
            CountsFormat::Csv,
            Path::new("w.csv"),
            &set,
            &CountsOptions::default(),
        )
        .unwrap_err()
        .to_string();
        assert!(m.contains("w.csv line 5: duplicate outcome"), "{m}");
    }

    /// Every counts-* fixture listed in expect-layout-counts.tsv fails against the good
    /// circuits with a message naming the file and containing the listed fragment.
    #[test]
    fn bad_fixtures_fail_with_their_fragment() {
        let set = good_circuits();
        let dir = fixtures().join("bad");
        let tsv = std::fs::read_to_string(dir.join("expect-layout-counts.tsv")).unwrap();
        let mut listed = Vec::new();
        for line in tsv.lines().filter(|l| l.starts_with("counts-")) {
            let (file, fragment) = line.split_once('\t').unwrap();
            listed.push(file.to_string());
            let path = dir.join(file);
            let e = match read_counts(&path, &set, &CountsOptions::default()) {
                Ok(_) => panic!("{file} was accepted"),
                Err(e) => e,
            };
            let m = e.to_string();
            assert!(m.contains(file), "{file}: message does not name the file: {m}");
            assert!(m.contains(fragment), "{file}: expected '{fragment}' in: {m}");
            assert_eq!(e.exit_code(), 2);
        }
        let mut on_disk: Vec<String> = std::fs::read_dir(&dir)
            .unwrap()
            .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
            .filter(|n| n.starts_with("counts-"))
            .collect();
        on_disk.sort();
        listed.sort();
        assert_eq!(on_disk, listed, "every counts fixture is listed once");
        assert!(listed.len() >= 25);
    }

    fn mutate(text: &str, pos: usize, op: u8, c: char) -> String {
        let mut chars: Vec<char> = text.chars().collect();
        let i = pos % chars.len();
        match op {
            0 => {
                chars.remove(i);
            }
            1 => chars.insert(i, c),
            _ => chars[i] = c,
        }
        chars.into_iter().collect()
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(300))]

        #[test]
        fn arbitrary_bytes_never_panic(bytes in proptest::collection::vec(any::<u8>(), 0..200)) {
            let set = good_circuits();
            let opts = CountsOptions::default();
            for f in [CountsFormat::Csv, CountsFormat::Json] {
                let _ = read_counts_from(&bytes[..], f, Path::new("x"), &set, &opts);
            }
        }

        #[test]
        fn mutations_never_panic(pos in 0usize..400, op in 0u8..3, c in prop_oneof![
            Just('0'), Just('1'), Just(','), Just('"'), Just('{'), Just('}'), Just('\n'),
            Just('-'), Just('.'), proptest::char::any()]) {
            let set = good_circuits();
            for (file, f) in [("good/counts.csv", CountsFormat::Csv), ("good/counts.json", CountsFormat::Json)] {
                let text = std::fs::read_to_string(fixtures().join(file)).unwrap();
                let m = mutate(&text, pos, op, c);
                let opts = CountsOptions::default();
                match read_counts_from(m.as_bytes(), f, Path::new("x"), &set, &opts) {
                    Ok((counts, _)) => prop_assert_eq!(counts.per_circuit.len(), set.len()),
                    Err(e) => prop_assert!(e.to_string().starts_with('x')),
                }
            }
        }

        #[test]
        fn random_counts_round_trip(rows in proptest::collection::vec((0usize..4, any::<u64>(), 1u64..1_000_000), 1..40)) {
            let set = good_circuits();
            let mut maps: Vec<std::collections::BTreeMap<Outcome, u64>> = vec![Default::default(); set.len()];
            for (ci, bits, n) in rows {
                let m = set.circuits[ci].measured.len();
                let b: Vec<bool> = (0..m).map(|i| bits >> i & 1 == 1).collect();
                maps[ci].insert(Outcome::from_bits(&b), n);
            }
            let counts = Counts { per_circuit: maps.into_iter().map(|m| {
                (!m.is_empty()).then(|| CircuitCounts { outcomes: m.into_iter().collect() })
            }).collect() };
            let opts = CountsOptions::default();
            let mut csv = Vec::new();
            write_csv(&mut csv, &set, &counts).unwrap();
            let mut json = Vec::new();
            write_json(&mut json, &set, &counts).unwrap();
            for (bytes, f) in [(csv, CountsFormat::Csv), (json, CountsFormat::Json)] {
                let (back, _) = read_counts_from(&bytes[..], f, Path::new("x"), &set, &opts).unwrap();
                prop_assert_eq!(&back.per_circuit, &counts.per_circuit);
            }
        }
    }

    /// The marginals of many position lists at once are, entry for entry, those formed one
    /// list at a time, for outcomes of one word and of several, lists of one, two (also
    /// a position twice), none and three positions, and lists left out.
    #[test]
    fn marginals_at_once_are_the_marginals_one_at_a_time() {
        let mut seed = 0x2545_f491_4f6c_dd1du64;
        let mut next = move || {
            seed ^= seed << 13;
            seed ^= seed >> 7;
            seed ^= seed << 17;
            seed
        };
        for width in [1usize, 5, 64, 65, 130] {
            let mut outcomes: Vec<(Outcome, u64)> = (0..300)
                .map(|_| {
                    let bits: Vec<bool> = (0..width).map(|_| next() % 5 == 0).collect();
                    (Outcome::from_bits(&bits), 1 + next() % 40)
                })
                .collect();
            outcomes.sort();
            outcomes.dedup_by(|a, b| a.0 == b.0);
            let cc = CircuitCounts { outcomes };
            let at = |r: u64| (r % width as u64) as usize;
            let mut lists: Vec<Option<Vec<usize>>> = vec![Some(vec![]), None];
            for _ in 0..40 {
                let (a, b, c) = (at(next()), at(next()), at(next()));
                lists.push(Some(vec![a]));
                lists.push(Some(vec![a, b]));
                lists.push(Some(vec![b, b]));
                lists.push(Some(vec![c, a, b]));
                lists.push(None);
            }
            let borrowed: Vec<Option<&[usize]>> = lists.iter().map(|l| l.as_deref()).collect();
            let got = cc.marginals(&borrowed);
            for (l, m) in lists.iter().zip(&got) {
                assert_eq!(m, &l.as_ref().map(|p| cc.marginal(p)), "width {width}, list {l:?}");
            }
        }
    }

    /// The block-parallel CSV reading gives the counts, warnings and messages of the
    /// record-by-record reading, at any block size, on one-word and wide outcomes, blank
    /// lines, hex and grouped outcomes, probabilities and the reversed bit order; what it
    /// does not take (quotes, carriage returns, per-shot files, any line in error) it leaves
    /// to that reading.
    #[test]
    fn split_csv_reading_is_the_record_reading() {
        use crate::circuit::Circuit;
        let set = CircuitSet::new(vec![
            Circuit { id: "a".into(), layers: vec![], measured: vec![0, 1, 2] },
            Circuit { id: "b".into(), layers: vec![], measured: (0..70).collect() },
            Circuit { id: "c".into(), layers: vec![], measured: vec![5] },
        ])
        .unwrap();
        let wide = |k: usize| {
            (0..70)
                .map(|i| if (i * 7 + k).is_multiple_of(5) { '1' } else { '0' })
                .collect::<String>()
        };
        let good = format!(
            "circuit,outcome,count\na,000,5\na,101,7\n\nb,{},3\n , ,\na,0x3,2\nb,{},4\na, 0 1 0 ,1\n",
            wide(0),
            wide(1)
        );
        let counts = CountsOptions::default();
        let reversed = CountsOptions { bit_order: BitOrder::Reversed, shots: None };
        let probs = CountsOptions { bit_order: BitOrder::AsMeasured, shots: Some(100) };
        // (document, options, whether the split reading takes it)
        let docs = [
            (good.clone(), &counts, true),
            (good.trim_end().to_string(), &counts, true),
            (format!("\u{feff}{good}"), &counts, true),
            (format!("\n , \n{good}"), &counts, true),
            (good.clone(), &reversed, true),
            (good.replace(",7\n", ",7.0\n"), &counts, true),
            (
                good.replace(",5\n", ",0\n")
                    .replace(",7\n", ",0\n")
                    .replace(",2\n", ",0\n")
                    .replace(",1\n", ",0\n"),
                &counts,
                true,
            ),
            ("circuit,outcome,count\na,000,0.25\na,111,0.75\n".to_string(), &probs, true),
            (good.replace('\n', "\r\n"), &counts, false),
            (good.replace("a,101", "\"a\",101"), &counts, false),
            (good.replace("a,101", "a,000"), &counts, false),
            (good.replace("a,101", "zz,101"), &counts, false),
            (good.replace("a,101", "a,1011"), &counts, false),
            (good.replace("a,101", "a,1x1"), &counts, false),
            (good.replace(",7\n", ",2.5\n"), &counts, false),
            (good.replace(",7\n", ",7,9\n"), &counts, false),
            (good.replace("circuit,outcome,count", "circuit,outcome"), &counts, false),
            (good.replace("circuit,outcome,count", "circ,outcome,count"), &counts, false),
            (format!("circuit,outcome,count\na,000,{}\na,001,{}\n", u64::MAX, 1), &counts, false),
            ("circuit,outcome,count\n".to_string(), &counts, false),
            (String::new(), &counts, false),
        ];
        let dir = tempfile::tempdir().unwrap();
        for (i, (doc, opts, split)) in docs.iter().enumerate() {
            let path = dir.path().join(format!("c{i}.csv"));
            std::fs::write(&path, doc).unwrap();
            let file = std::fs::File::open(&path).unwrap();
            let whole = read_counts_from(file, CountsFormat::Csv, &path, &set, opts);
            let same = |got: Result<(Counts, Vec<Warning>)>, at: &str| match (got, &whole) {
                (Ok(a), Ok(b)) => {
                    assert_eq!(a.0.per_circuit, b.0.per_circuit, "document {i}, {at}");
                    assert_eq!(format!("{:?}", a.1), format!("{:?}", b.1), "document {i}, {at}");
                }
                (Err(a), Err(b)) => assert_eq!(a.to_string(), b.to_string(), "document {i}, {at}"),
                (a, b) => panic!("document {i}, {at}: split {a:?}, whole {b:?}"),
            };
            for block in [1 << 20, 64, 5] {
                let got = read_csv_split(&path, &set, opts, block);
                assert_eq!(got.is_some(), *split, "document {i}, block {block}");
                if let Some(got) = got {
                    same(got, &format!("block {block}"));
                }
            }
            same(read_counts(&path, &set, opts), "read_counts");
        }
    }
}
