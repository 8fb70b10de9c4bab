//! The layout TOML format: reading with file-and-line errors, and writing it back.
//!
//! Every id, pair and gate name is read with its byte span so that semantic errors
//! (duplicate ids, couplers to unknown qubits, unknown gates) name the line they are on,
//! not only the file. [`to_toml`] writes the same format and round-trips through
//! [`parse_layout`]. The format is documented in the README ("Layout files").

use std::collections::HashMap;
use std::fmt::Write as _;
use std::ops::Range;
use std::path::Path;

use ::toml::{Spanned, Value};
use serde::Deserialize;

use super::{Layout, Native2, NativeGates, Qubit};
use crate::error::{echo, Error, Result};
use crate::gate::{Gate, Mat4};

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct LayoutWire {
    name: Spanned<String>,
    qubits: Vec<Spanned<QubitWire>>,
    couplers: Vec<Spanned<Vec<Spanned<String>>>>,
    gates: GatesWire,
    neighbourhood: Option<NeighbourhoodWire>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct QubitWire {
    id: Spanned<String>,
    position: Option<Spanned<Value>>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct GatesWire {
    one_qubit: Vec<Spanned<String>>,
    #[serde(rename = "virtual", default)]
    virtual_gates: Vec<Spanned<String>>,
    /// One name, or a list: the two-qubit gates of every coupler without its own list.
    two_qubit: Option<Spanned<Value>>,
    /// Couplers with their own two-qubit gates.
    #[serde(default)]
    coupler: Vec<Spanned<CouplerGatesWire>>,
    /// Two-qubit gates defined by their unitary.
    #[serde(default)]
    custom: Vec<Spanned<CustomWire>>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct CouplerGatesWire {
    qubits: Spanned<Vec<Spanned<String>>>,
    two_qubit: Spanned<Value>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct CustomWire {
    name: Spanned<String>,
    unitary: Spanned<Value>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct NeighbourhoodWire {
    radius: Option<Spanned<i64>>,
    #[serde(default)]
    extra_pairs: Vec<Spanned<Vec<Spanned<String>>>>,
}

/// Reads and validates a layout file.
pub fn read_layout(path: &Path) -> Result<Layout> {
    let bytes = std::fs::read(path).map_err(|e| Error::io(path, e))?;
    let text = String::from_utf8(bytes).map_err(|e| {
        let line = line_of(e.as_bytes(), e.utf8_error().valid_up_to());
        Error::input(path, Some(line), "the file is not UTF-8 text")
    })?;
    parse_layout(&text, path)
}

/// Parses and validates layout TOML; `path` is used only in error messages.
pub fn parse_layout(text: &str, path: &Path) -> Result<Layout> {
    // A byte-order mark has no newline, so stripping it keeps every line number.
    let text = text.strip_prefix('\u{feff}').unwrap_or(text);
    if text.trim().is_empty() {
        return Err(Error::input(
            path,
            None,
            "the file is empty; a layout needs `name`, `qubits`, `couplers` and a [gates] table",
        ));
    }
    let wire: LayoutWire = ::toml::from_str(text).map_err(|e| {
        let line = e.span().map(|s| line_of(text.as_bytes(), s.start));
        Error::input(path, line, format!("not a valid layout file: {}", e.message().trim()))
    })?;
    Checker { text, path }.build(wire)
}

/// Turns spans into 1-based lines for error messages.
struct Checker<'a> {
    text: &'a str,
    path: &'a Path,
}

impl Checker<'_> {
    fn err(&self, span: Range<usize>, message: impl Into<String>) -> Error {
        Error::input(self.path, Some(line_of(self.text.as_bytes(), span.start)), message)
    }

    fn line(&self, span: Range<usize>) -> usize {
        line_of(self.text.as_bytes(), span.start)
    }

    fn build(&self, wire: LayoutWire) -> Result<Layout> {
        let name_span = wire.name.span();
        let name = wire.name.into_inner();
        if name.trim().is_empty() {
            return Err(self.err(name_span, "`name` must not be empty"));
        }
        if wire.qubits.is_empty() {
            return Err(Error::input(
                self.path,
                None,
                "`qubits` is empty; a layout needs at least one qubit",
            ));
        }
        let mut seen: HashMap<String, Range<usize>> = HashMap::new();
        let mut qubits = Vec::with_capacity(wire.qubits.len());
        for q in wire.qubits {
            let q = q.into_inner();
            let span = q.id.span();
            let id = q.id.into_inner();
            if id.is_empty() || id.chars().any(|c| c.is_whitespace() || c == ',' || c.is_control())
            {
                return Err(self.err(
                    span,
                    format!("qubit id {id:?} is not valid: ids are non-empty and contain no spaces or commas"),
                ));
            }
            if let Some(first) = seen.get(&id) {
                return Err(self.err(
                    span,
                    format!(
                        "duplicate qubit id '{id}' (first defined on line {})",
                        self.line(first.clone())
                    ),
                ));
            }
            let position = match q.position {
                None => None,
                Some(p) => Some(self.position(&id, p)?),
            };
            seen.insert(id.clone(), span);
            qubits.push(Qubit { id, position });
        }
        let couplers = self.pairs(wire.couplers, &seen, "coupler", true)?;
        let gates = self.gates(wire.gates, &seen, &couplers)?;
        let (radius, extra_pairs) = match wire.neighbourhood {
            None => (1, Vec::new()),
            Some(n) => {
                let radius = match n.radius {
                    None => 1,
                    Some(r) => {
                        let span = r.span();
                        match *r.get_ref() {
                            1 => 1,
                            2 => 2,
                            v => {
                                return Err(self.err(
                                    span,
                                    format!("neighbourhood radius {v} is not supported (valid: 1 = coupler neighbours, 2 = within two couplers)"),
                                ))
                            }
                        }
                    }
                };
                (radius, self.pairs(n.extra_pairs, &seen, "extra spectator pair", false)?)
            }
        };
        // Everything Layout::new checks has been checked above with a line; this mapping is
        // a safety net for rules added there later.
        Layout::new(name, qubits, couplers, gates, radius, extra_pairs)
            .map_err(|m| Error::input(self.path, None, m))
    }

    fn position(&self, id: &str, p: Spanned<Value>) -> Result<[f64; 2]> {
        let span = p.span();
        let bad = || {
            self.err(
                span.clone(),
                format!("qubit '{id}': position must be two finite numbers, like [1.0, 2]"),
            )
        };
        let Value::Array(items) = p.into_inner() else { return Err(bad()) };
        if items.len() != 2 {
            return Err(bad());
        }
        let mut out = [0.0; 2];
        for (slot, v) in out.iter_mut().zip(&items) {
            *slot = match v {
                Value::Integer(i) => *i as f64,
                Value::Float(f) if f.is_finite() => *f,
                _ => return Err(bad()),
            };
        }
        Ok(out)
    }

    /// Checks a list of id pairs; `unique` rejects repeats (in either order).
    fn pairs(
        &self,
        list: Vec<Spanned<Vec<Spanned<String>>>>,
        ids: &HashMap<String, Range<usize>>,
        what: &str,
        unique: bool,
    ) -> Result<Vec<(String, String)>> {
        let mut seen: HashMap<(String, String), Range<usize>> = HashMap::new();
        let mut out = Vec::with_capacity(list.len());
        for pair in list {
            let span = pair.span();
            let items = pair.into_inner();
            if items.len() != 2 {
                return Err(self.err(
                    span,
                    format!(
                        "a {what} is a pair of two qubit ids, like [\"q0\", \"q1\"]; got {} id(s)",
                        items.len()
                    ),
                ));
            }
            let (a, b) = (items[0].get_ref().clone(), items[1].get_ref().clone());
            for it in &items {
                if !ids.contains_key(it.get_ref()) {
                    return Err(self.err(
                        it.span(),
                        format!("{what} {a}-{b} names unknown qubit '{}'", it.get_ref()),
                    ));
                }
            }
            if a == b {
                return Err(self.err(span, format!("{what} {a}-{b} joins a qubit to itself")));
            }
            let key = if a < b { (a.clone(), b.clone()) } else { (b.clone(), a.clone()) };
            if let Some(first) = seen.get(&key) {
                if unique {
                    return Err(self.err(
                        span,
                        format!(
                            "duplicate {what} {a}-{b} (first listed on line {})",
                            self.line(first.clone())
                        ),
                    ));
                }
                continue;
            }
            seen.insert(key, span);
            out.push((a, b));
        }
        Ok(out)
    }

    fn gate(&self, name: &Spanned<String>, field: &str, arity: usize) -> Result<Gate> {
        self.gate_at(name.get_ref(), name.span(), field, arity)
    }

    fn gate_at(&self, name: &str, span: Range<usize>, field: &str, arity: usize) -> Result<Gate> {
        let g = Gate::from_name(name).ok_or_else(|| {
            self.err(
                span.clone(),
                format!(
                    "unknown gate '{}' in [gates] {field} (known: {}; or define it in a \
                     [[gates.custom]] table)",
                    echo(name),
                    Gate::known_names()
                ),
            )
        })?;
        if g.arity() != arity {
            let valid: Vec<&str> =
                Gate::ALL.iter().filter(|g| g.arity() == arity).map(|g| g.name()).collect();
            return Err(self.err(
                span,
                format!(
                    "gate '{g}' in [gates] {field} acts on {} qubit(s); valid here: {}",
                    g.arity(),
                    valid.join(", ")
                ),
            ));
        }
        Ok(g)
    }

    fn gates(
        &self,
        wire: GatesWire,
        ids: &HashMap<String, Range<usize>>,
        couplers: &[(String, String)],
    ) -> Result<NativeGates> {
        let mut one_qubit = Vec::new();
        for n in &wire.one_qubit {
            let g = self.gate(n, "one_qubit", 1)?;
            if one_qubit.contains(&g) {
                return Err(
                    self.err(n.span(), format!("gate '{g}' is listed twice in [gates] one_qubit"))
                );
            }
            one_qubit.push(g);
        }
        let mut virtual_gates = Vec::new();
        for n in &wire.virtual_gates {
            let g = self.gate(n, "virtual", 1)?;
            if !one_qubit.contains(&g) {
                return Err(self.err(
                    n.span(),
                    format!(
                        "virtual gate '{g}' is not listed in [gates] one_qubit ({})",
                        names(&one_qubit)
                    ),
                ));
            }
            if !virtual_gates.contains(&g) {
                virtual_gates.push(g);
            }
        }
        let mut custom = Vec::new();
        for c in &wire.custom {
            custom.push(self.custom(c.get_ref())?);
        }
        let two_qubit = match &wire.two_qubit {
            Some(v) => self.natives(v, "two_qubit")?,
            None => Vec::new(),
        };
        let mut coupler_gates = Vec::new();
        for c in &wire.coupler {
            let w = c.get_ref();
            let [a, b] = w.qubits.get_ref().as_slice() else {
                return Err(self.err(
                    w.qubits.span(),
                    "[[gates.coupler]] qubits is a pair of two qubit ids, like [\"q0\", \"q1\"]",
                ));
            };
            let (a, b) = (a.get_ref(), b.get_ref());
            if let Some(q) = [a, b].into_iter().find(|q| !ids.contains_key(*q)) {
                return Err(self.err(
                    w.qubits.span(),
                    format!("[[gates.coupler]] names unknown qubit '{}'", echo(q)),
                ));
            }
            if !couplers.iter().any(|(x, y)| (x == a && y == b) || (x == b && y == a)) {
                return Err(self.err(
                    w.qubits.span(),
                    format!(
                        "[[gates.coupler]] {a}-{b} is not a coupler (list it in `couplers` first)"
                    ),
                ));
            }
            if coupler_gates
                .iter()
                .any(|(x, y, _): &(String, String, _)| (x == a && y == b) || (x == b && y == a))
            {
                return Err(
                    self.err(w.qubits.span(), format!("[[gates.coupler]] {a}-{b} is listed twice"))
                );
            }
            let list = self.natives(&w.two_qubit, "coupler two_qubit")?;
            // A directed gate runs from the first qubit `couplers` writes; a list written
            // the other way round would leave the reader guessing which way the chip runs it.
            let reversed = couplers.iter().any(|(x, y)| x == b && y == a);
            if let Some(n) = list.iter().find(|n| !n.gate.is_symmetric()).filter(|_| reversed) {
                return Err(self.err(
                    w.qubits.span(),
                    format!(
                        "[[gates.coupler]] {a}-{b} lists the directed gate {n}, but `couplers` \
                         writes this coupler {b}-{a}; a directed gate runs from the first qubit \
                         of its `couplers` entry (here {b}, the control of cx and ecr): write \
                         both in the same order"
                    ),
                ));
            }
            coupler_gates.push((a.clone(), b.clone(), list));
        }
        if wire.two_qubit.is_none() && coupler_gates.len() < couplers.len() {
            return Err(Error::input(
                self.path,
                None,
                "[gates] needs `two_qubit` (a gate name or a list, like \"cz\" or [\"ecr\"]) \
                 unless every coupler has its own [[gates.coupler]] list",
            ));
        }
        Ok(NativeGates { one_qubit, virtual_gates, two_qubit, coupler_gates, custom })
    }

    /// A list of two-qubit natives: one string or an array of strings, each a gate name or
    /// a parametrized gate at its angle (`cp(pi/2)`).
    fn natives(&self, value: &Spanned<Value>, field: &str) -> Result<Vec<Native2>> {
        let span = value.span();
        let names: Vec<&str> = match value.get_ref() {
            Value::String(s) => vec![s.as_str()],
            Value::Array(items) if !items.is_empty() => items
                .iter()
                .map(|v| v.as_str())
                .collect::<Option<Vec<&str>>>()
                .ok_or_else(|| self.err(span.clone(), format!("[gates] {field}: every entry is a gate name in quotes")))?,
            _ => {
                return Err(self.err(
                    span,
                    format!("[gates] {field} is a gate name or a non-empty list of names, like \"cz\" or [\"ecr\", \"cp(pi/2)\"]"),
                ))
            }
        };
        let mut out: Vec<Native2> = Vec::new();
        for text in names {
            let text = text.trim();
            let (name, angle) = match text.split_once('(') {
                Some((n, rest)) => match rest.strip_suffix(')') {
                    Some(a) => (n.trim(), Some(a)),
                    None => {
                        return Err(self.err(
                            span,
                            format!("[gates] {field}: '{}' lacks its closing ')'", echo(text)),
                        ))
                    }
                },
                None => (text, None),
            };
            let gate = self.gate_at(name, span.clone(), field, 2)?;
            let angle = match (gate.n_params(), angle) {
                (0, None) => 0.0,
                (0, Some(_)) => {
                    return Err(self.err(span, format!("[gates] {field}: gate '{gate}' takes no angle")))
                }
                (_, None) => {
                    return Err(self.err(
                        span,
                        format!("[gates] {field}: gate '{gate}' runs at one calibrated angle on a chip; write it, like \"{gate}(pi/2)\""),
                    ))
                }
                (_, Some(a)) => crate::circuit::qasm::angle_expression(a)
                    .map_err(|m| self.err(span.clone(), format!("[gates] {field}: {m}")))?,
            };
            let native = Native2 { gate, angle };
            if out.iter().any(|n| n.gate == gate) {
                return Err(
                    self.err(span, format!("[gates] {field}: gate '{gate}' is listed twice"))
                );
            }
            out.push(native);
        }
        Ok(out)
    }

    /// A `[[gates.custom]]` table: a name and four rows of four complex entries, each a
    /// number or `[re, im]`.
    fn custom(&self, w: &CustomWire) -> Result<Gate> {
        let span = w.unitary.span();
        let name = w.name.get_ref();
        let shape = || {
            self.err(
                span.clone(),
                format!(
                    "custom gate '{}': `unitary` is 4 rows of 4 entries, each a number or [re, im] \
                     (basis index = bit of the first operand + 2 * bit of the second)",
                    echo(name)
                ),
            )
        };
        let Value::Array(rows) = w.unitary.get_ref() else { return Err(shape()) };
        if rows.len() != 4 {
            return Err(shape());
        }
        let num = |v: &Value| match v {
            Value::Integer(i) => Some(*i as f64),
            Value::Float(f) => Some(*f),
            _ => None,
        };
        let mut m: Mat4 = Default::default();
        for (r, row) in rows.iter().enumerate() {
            let Value::Array(entries) = row else { return Err(shape()) };
            if entries.len() != 4 {
                return Err(shape());
            }
            for (c, e) in entries.iter().enumerate() {
                m[r][c] = match e {
                    Value::Array(pair) if pair.len() == 2 => match (num(&pair[0]), num(&pair[1])) {
                        (Some(re), Some(im)) => num_complex::Complex64::new(re, im),
                        _ => return Err(shape()),
                    },
                    v => num_complex::Complex64::new(num(v).ok_or_else(shape)?, 0.0),
                };
            }
        }
        crate::gate::define_custom(name, &m).map_err(|msg| self.err(w.name.span(), msg))
    }
}

fn names(gates: &[Gate]) -> String {
    gates.iter().map(|g| g.name()).collect::<Vec<_>>().join(", ")
}

/// 1-based line of a byte offset (clamped to the text).
fn line_of(text: &[u8], offset: usize) -> usize {
    1 + text[..offset.min(text.len())].iter().filter(|&&b| b == b'\n').count()
}

/// A TOML basic string literal.
fn quote(s: &str) -> String {
    let mut out = String::with_capacity(s.len() + 2);
    out.push('"');
    for c in s.chars() {
        match c {
            '"' => out.push_str("\\\""),
            '\\' => out.push_str("\\\\"),
            '\n' => out.push_str("\\n"),
            '\t' => out.push_str("\\t"),
            c if c.is_control() => {
                let _ = write!(out, "\\u{:04X}", c as u32);
            }
            c => out.push(c),
        }
    }
    out.push('"');
    out
}

/// Shortest decimal that parses back to the same f64; always has a '.' or exponent so
/// TOML reads it as a float.
fn number(v: f64) -> String {
    let v = if v == 0.0 { 0.0 } else { v };
    format!("{v:?}")
}

/// Writes a layout in the TOML format [`parse_layout`] reads (one qubit and one coupler
/// per line, so diffs and error lines stay readable).
pub fn to_toml(layout: &Layout) -> String {
    let mut s = String::new();
    let _ = writeln!(
        s,
        "# {} qubits, {} couplers. Format: README, \"Layout files\".",
        layout.n_qubits(),
        layout.couplers.len()
    );
    let _ = writeln!(s, "name = {}", quote(&layout.name));
    s.push_str("qubits = [\n");
    for q in &layout.qubits {
        match q.position {
            Some([x, y]) => {
                let _ = writeln!(
                    s,
                    "  {{ id = {}, position = [{}, {}] }},",
                    quote(&q.id),
                    number(x),
                    number(y)
                );
            }
            None => {
                let _ = writeln!(s, "  {{ id = {} }},", quote(&q.id));
            }
        }
    }
    s.push_str("]\n");
    let pair_list = |s: &mut String, key: &str, pairs: &[(usize, usize)]| {
        if pairs.is_empty() {
            let _ = writeln!(s, "{key} = []");
            return;
        }
        let _ = writeln!(s, "{key} = [");
        for &(a, b) in pairs {
            let _ = writeln!(s, "  [{}, {}],", quote(layout.id(a)), quote(layout.id(b)));
        }
        s.push_str("]\n");
    };
    // Each coupler as written: a directed native runs from its first qubit.
    let couplers: Vec<(usize, usize)> =
        (0..layout.couplers.len()).map(|c| layout.coupler_direction(c)).collect();
    pair_list(&mut s, "couplers", &couplers);
    let list =
        |gates: &[Gate]| gates.iter().map(|g| quote(g.name())).collect::<Vec<_>>().join(", ");
    s.push_str("\n[gates]\n");
    let _ = writeln!(s, "one_qubit = [{}]", list(&layout.gates.one_qubit));
    let _ = writeln!(s, "virtual = [{}]", list(&layout.gates.virtual_gates));
    let natives = |list: &[Native2]| match list {
        [one] => quote(&one.to_string()),
        _ => format!(
            "[{}]",
            list.iter().map(|n| quote(&n.to_string())).collect::<Vec<_>>().join(", ")
        ),
    };
    if !layout.gates.two_qubit.is_empty() {
        let _ = writeln!(s, "two_qubit = {}", natives(&layout.gates.two_qubit));
    }
    for g in &layout.gates.custom {
        let m = g.unitary2(0.0).unwrap_or_default();
        let _ = writeln!(s, "\n[[gates.custom]]\nname = {}\nunitary = [", quote(g.name()));
        for row in &m {
            let entries: Vec<String> =
                row.iter().map(|v| format!("[{}, {}]", number(v.re), number(v.im))).collect();
            let _ = writeln!(s, "  [{}],", entries.join(", "));
        }
        s.push_str("]\n");
    }
    for (a, b, list) in &layout.gates.coupler_gates {
        let _ = writeln!(
            s,
            "\n[[gates.coupler]]\nqubits = [{}, {}]\ntwo_qubit = {}",
            quote(a),
            quote(b),
            natives(list)
        );
    }
    s.push_str("\n[neighbourhood]\n");
    let _ = writeln!(s, "radius = {}", layout.neighbourhood.radius);
    pair_list(&mut s, "extra_pairs", &layout.neighbourhood.extra_pairs);
    s
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::layout::generate;
    use proptest::prelude::*;
    use std::path::PathBuf;

    fn good_text() -> String {
        let p = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures/good/layout.toml");
        std::fs::read_to_string(p).unwrap()
    }

    fn parse(text: &str) -> Result<Layout> {
        parse_layout(text, Path::new("chip.toml"))
    }

    fn err(text: &str) -> String {
        match parse(text) {
            Ok(_) => panic!("expected an error for:\n{text}"),
            Err(e) => e.to_string(),
        }
    }

    fn same(a: &Layout, b: &Layout) {
        assert_eq!(a.name, b.name);
        assert_eq!(a.qubits, b.qubits);
        assert_eq!(a.couplers, b.couplers);
        for c in 0..a.couplers.len() {
            assert_eq!(a.coupler_direction(c), b.coupler_direction(c));
        }
        assert_eq!(a.gates, b.gates);
        assert_eq!(a.neighbourhood, b.neighbourhood);
    }

    #[test]
    fn good_fixture_parses() {
        let l = parse(&good_text()).unwrap();
        assert_eq!(l.name, "fixture-2x3");
        assert_eq!(l.n_qubits(), 6);
        assert_eq!(l.couplers.len(), 7);
        assert_eq!(l.qubits[4].position, Some([1.0, 1.0]));
        assert_eq!(l.gates.virtual_gates, vec![Gate::Rz]);
        assert_eq!(l.gates.two_qubit, vec![Native2::fixed(Gate::Cz)]);
        assert_eq!(l.neighbourhood.radius, 1);
        // q1 sits in the middle of the top row: couplers to q0, q2 and q4.
        assert_eq!(l.coupled(1), &[0, 2, 4]);
    }

    #[test]
    fn round_trips_good_fixture_and_generated_layouts() {
        let mut layouts = vec![parse(&good_text()).unwrap()];
        layouts.extend([generate::grid(3, 4), generate::ring(7), generate::hex(2, 3)]);
        for l in &layouts {
            let back = parse(&to_toml(l)).unwrap();
            same(l, &back);
            assert_eq!(to_toml(&back), to_toml(l));
        }
    }

    #[test]
    fn round_trips_optional_parts() {
        let text = "name = \"odd \\\"one\\\"\"\nqubits = [{ id = \"a\" }, { id = \"b\", position = [-1, 2.5e-3] }, { id = \"c\" }]\n\
                    couplers = [[\"b\", \"a\"]]\n[gates]\none_qubit = [\"h\"]\ntwo_qubit = \"cx\"\n\
                    [neighbourhood]\nradius = 2\nextra_pairs = [[\"c\", \"a\"]]\n";
        let l = parse(text).unwrap();
        assert_eq!(l.name, "odd \"one\"");
        assert_eq!(l.qubits[0].position, None);
        assert_eq!(l.qubits[1].position, Some([-1.0, 2.5e-3]));
        assert_eq!(l.couplers, vec![(0, 1)]);
        // cx runs from b, the first qubit written: b -> a is native, a -> b is not.
        assert_eq!(l.coupler_direction(0), (1, 0));
        assert!(l.is_native_op(Gate::Cx, &[1, 0], 0.0) && !l.is_native_op(Gate::Cx, &[0, 1], 0.0));
        assert_eq!(l.reversed_native(Gate::Cx, &[0, 1], 0.0), Some((1, 0)));
        assert!(to_toml(&l).contains("couplers = [\n  [\"b\", \"a\"],\n]"));
        assert_eq!(l.neighbourhood.extra_pairs, vec![(0, 2)]);
        assert!(l.gates.virtual_gates.is_empty());
        same(&l, &parse(&to_toml(&l)).unwrap());
    }

    #[test]
    fn neighbourhood_defaults_to_radius_one() {
        let text = good_text();
        let cut = text.find("[neighbourhood]").unwrap();
        let l = parse(&text[..cut]).unwrap();
        assert_eq!(l.neighbourhood.radius, 1);
        assert!(l.neighbourhood.extra_pairs.is_empty());
    }

    #[test]
    fn semantic_errors_name_the_line() {
        let text = good_text();
        // Line 8 of the fixture defines q4, line 7 q3.
        let dup = text.replace("id = \"q4\"", "id = \"q3\"");
        let m = err(&dup);
        assert!(
            m.contains("chip.toml line 8: duplicate qubit id 'q3' (first defined on line 7)"),
            "{m}"
        );
        let unknown = text.replace("[\"q4\", \"q5\"]", "[\"q4\", \"q9\"]");
        let m = err(&unknown);
        assert!(m.contains("line 12:") && m.contains("unknown qubit 'q9'"), "{m}");
        let reversed_dup = text.replace("[\"q2\", \"q5\"]", "[\"q1\", \"q0\"]");
        let m = err(&reversed_dup);
        assert!(m.contains("line 13: duplicate coupler q1-q0 (first listed on line 12)"), "{m}");
        let gate = text.replace("\"sx\", \"x\"", "\"sx\", \"u9\"");
        let m = err(&gate);
        assert!(
            m.contains("line 17: unknown gate 'u9'") && m.contains(&Gate::known_names()),
            "{m}"
        );
        let m = err(&text.replace("radius = 1", "radius = 3"));
        assert!(m.contains("line 22: neighbourhood radius 3"), "{m}");
        let m = err(&text.replace("virtual = [\"rz\"]", "virtual = [\"h\"]"));
        assert!(m.contains("line 18: virtual gate 'h' is not listed"), "{m}");
        let m = err(&text.replace("[2.0, 1.0]", "[2.0]"));
        assert!(m.contains("line 9: qubit 'q5': position must be two finite numbers"), "{m}");
        let m = err(&text.replace("two_qubit = \"cz\"", "two_qubit = \"x\""));
        assert!(m.contains("line 19: gate 'x' in [gates] two_qubit acts on 1 qubit(s)"), "{m}");
    }

    #[test]
    fn syntax_and_shape_errors() {
        let m = err("");
        assert!(m.contains("chip.toml: the file is empty"), "{m}");
        let m = err("name = \"x\"\nqubits = [\n  { id = \"q0\" \n");
        assert!(m.starts_with("chip.toml line"), "{m}");
        let text = good_text();
        let m = err(&text.replace("radius = 1", "radius = 1\ncolour = \"red\""));
        assert!(m.contains("line 23:") && m.contains("unknown field `colour`"), "{m}");
        let m = err(&text.replace("[\"q0\", \"q3\"]", "[\"q0\", \"q0\"]"));
        assert!(m.contains("line 13: coupler q0-q0 joins a qubit to itself"), "{m}");
        let m = err(&text.replace("position = [0.0, 0.0]", "position = [nan, 0.0]"));
        assert!(m.contains("line 4:") && m.contains("finite"), "{m}");
    }

    /// The good fixture with its `two_qubit = "cz"` line replaced by `gates`.
    fn with_gates(gates: &str) -> String {
        good_text().replace("two_qubit = \"cz\"\n", &format!("{gates}\n"))
    }

    #[test]
    fn several_natives_per_coupler_and_custom_gates_round_trip() {
        let text = with_gates(
            "two_qubit = [\"ecr\", \"cp(pi/2)\"]\n[[gates.coupler]]\nqubits = [\"q4\", \"q1\"]\n\
             two_qubit = [\"iswap\", \"rzz(-pi/4)\", \"half_swap\"]\n[[gates.custom]]\n\
             name = \"half_swap\"\nunitary = [[1, 0, 0, 0], [0, [0.5, 0.5], [0.5, -0.5], 0], \
             [0, [0.5, -0.5], [0.5, 0.5], 0], [0, 0, 0, 1]]",
        );
        let l = parse(&text).unwrap();
        let half_swap = Gate::from_name("half_swap").unwrap();
        assert_eq!(
            l.gates.two_qubit,
            vec![
                Native2::fixed(Gate::Ecr),
                Native2 { gate: Gate::Cp, angle: std::f64::consts::FRAC_PI_2 }
            ]
        );
        assert_eq!(l.gates.custom, vec![half_swap]);
        let c = l.coupler(1, 4).unwrap();
        let own: Vec<Gate> = l.natives(c).iter().map(|n| n.gate).collect();
        assert_eq!(own, vec![Gate::Iswap, Gate::Rzz, half_swap]);
        assert_eq!(l.natives(l.coupler(0, 1).unwrap()), &l.gates.two_qubit[..]);
        assert!(l.is_native_op(Gate::Cp, &[0, 1], std::f64::consts::FRAC_PI_2));
        assert!(!l.is_native_op(Gate::Cp, &[0, 1], 0.3));
        assert!(!l.is_native_op(Gate::Ecr, &[1, 4], 0.0));
        // sqrt(SWAP) as written is symmetric under exchange of its operands.
        assert!(half_swap.is_symmetric() && !Gate::Ecr.is_symmetric());
        let back = parse(&to_toml(&l)).unwrap();
        same(&l, &back);
        assert_eq!(to_toml(&back), to_toml(&l));
        // A simple layout still writes one name.
        assert!(to_toml(&parse(&good_text()).unwrap()).contains("two_qubit = \"cz\"\n"));
    }

    #[test]
    fn native_errors_name_the_line() {
        let m = err(&with_gates("two_qubit = \"cp\""));
        assert!(m.contains("line 19:") && m.contains("write it, like \"cp(pi/2)\""), "{m}");
        let m = err(&with_gates("two_qubit = \"ecr(pi)\""));
        assert!(m.contains("line 19:") && m.contains("gate 'ecr' takes no angle"), "{m}");
        let m = err(&with_gates("two_qubit = [\"cz\", \"cz\"]"));
        assert!(m.contains("line 19:") && m.contains("listed twice"), "{m}");
        let m = err(&with_gates("two_qubit = \"rzz(pi/x)\""));
        assert!(m.contains("line 19:") && m.contains("is not an angle"), "{m}");
        let m = err(&with_gates("two_qubit = \"fsim\""));
        assert!(
            m.contains("line 19: unknown gate 'fsim'") && m.contains("[[gates.custom]]"),
            "{m}"
        );
        let coupler = |pair: &str| {
            with_gates(&format!(
                "two_qubit = \"cz\"\n[[gates.coupler]]\nqubits = {pair}\ntwo_qubit = \"ecr\""
            ))
        };
        let m = err(&coupler("[\"q0\", \"q5\"]"));
        assert!(m.contains("line 21: [[gates.coupler]] q0-q5 is not a coupler"), "{m}");
        let m = err(&coupler("[\"q0\", \"q9\"]"));
        assert!(m.contains("line 21:") && m.contains("unknown qubit 'q9'"), "{m}");
        let custom = |name: &str, last: &str| {
            with_gates(&format!(
                "two_qubit = \"cz\"\n[[gates.custom]]\nname = \"{name}\"\n\
                 unitary = [[1, 0, 0, 0], [0, 1, 0, 0], [0, 0, 1, 0], {last}]"
            ))
        };
        let m = err(&custom("cx", "[0, 0, 0, 1]"));
        assert!(m.contains("line 21:") && m.contains("already a standard gate"), "{m}");
        let m = err(&custom("near", "[0, 0, 0, 0.99]"));
        assert!(m.contains("line 21:") && m.contains("not unitary"), "{m}");
        let m = err(&custom("short", "[0, 0, 1]"));
        assert!(m.contains("line 22:") && m.contains("4 rows of 4 entries"), "{m}");
        // No list for some coupler and no default.
        let m = err(&with_gates(""));
        assert!(m.contains("needs `two_qubit`"), "{m}");
    }

    #[test]
    fn tolerates_bom_and_crlf() {
        let text = format!("\u{feff}{}", good_text().replace('\n', "\r\n"));
        assert_eq!(parse(&text).unwrap().n_qubits(), 6);
        let m = err(&text.replace("id = \"q4\"", "id = \"q3\""));
        assert!(m.contains("line 8:"), "{m}");
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(300))]

        #[test]
        fn arbitrary_text_never_panics(s in "\\PC{0,200}", bytes in proptest::collection::vec(any::<u8>(), 0..300)) {
            let _ = parse(&s);
            let _ = parse(&String::from_utf8_lossy(&bytes));
        }

        #[test]
        fn mutations_never_panic(pos in 0usize..2000, op in 0u8..3, c in proptest::char::any()) {
            let text = good_text();
            let mut chars: Vec<char> = text.chars().collect();
            let i = pos % chars.len();
            match op {
                0 => { chars.remove(i); }
                1 => chars.insert(i, c),
                _ => chars[i] = c,
            }
            let mutated: String = chars.into_iter().collect();
            match parse(&mutated) {
                Ok(l) => prop_assert!(l.n_qubits() >= 1),
                Err(e) => prop_assert!(e.to_string().starts_with("chip.toml")),
            }
        }
    }
}
