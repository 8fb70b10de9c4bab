//! OpenQASM 3 import and export (the subset a characterization experiment uses).
//!
//! Export writes physical qubits `$k` (k = the qubit's position in the layout), one
//! `barrier` between layers, explicit `id` for every measured qubit that idles in a timed
//! layer, and measurement into a bit array in measured order. Import is a small
//! hand-written tokenizer and recursive-descent parser for the grammar below (OpenQASM 3
//! specification, "Language"); everything outside it is an error naming file and line.
//!
//! ```text
//! program    = [ "OPENQASM" version ";" ] { statement } ;     (version 3, 3.x, 2 or 2.x)
//! statement  = "include" string ";"           ("stdgates.inc", or "qelib1.inc")
//!            | "qubit" [ "[" int "]" ] ident ";"
//!            | "bit" [ "[" int "]" ] ident ";"
//!            | "qreg" ident "[" int "]" ";"        (OpenQASM 2: a qubit register)
//!            | "creg" ident "[" int "]" ";"        (OpenQASM 2: a bit register)
//!            | "delay" "[" duration "]" targets ";"   (an idle; duration recorded)
//!            | "reset" targets ";"                 (before the qubit's first gate only)
//!            | "gate" ident [ "(" idents ")" ] idents "{" { gate call } "}"
//!            | "barrier" [ target { "," target } ] ";"    (target = operand | register)
//!            | gate [ "(" expr ")" ] operand { "," operand } ";"
//!            | bitref "=" "measure" operand ";"
//!            | "measure" operand "->" bitref ";" ;
//!            | "gphase" [ "(" expr ")" ] ";"          (ignored: no outcome sees it)
//! gate       = "id" | "x" | "y" | "z" | "h" | "s" | "sdg" | "sx"
//!            | "rx" | "ry" | "rz" | "cz" | "cx"
//!            | "p" | "phase" | "u1" | "t" | "tdg"     (read as rz, equal up to a phase)
//!            | other stdgates.inc gates, the layout's natives, defined gates ;
//! operand    = "$" int | ident "[" int "]" | ident ;   (ident alone: a one-qubit register)
//! bitref     = ident "[" int "]" | ident ;
//! expr       = term { ("+" | "-") term } ;
//! term       = unary { ("*" | "/") unary } ;
//! unary      = ("-" | "+") unary | primary ;
//! primary    = number | "pi" | "π" | "tau" | "τ" | "(" expr ")" ;
//! ```
//! Comments `//` and `/* */`, `#pragma` lines and annotation lines (`@name ...`) are skipped.
//! After `OPENQASM 2.0;` qelib1.inc's `cu1`, `cu3` and `u` are read as stdgates.inc's `cp`,
//! `cu` (fourth angle 0) and `u3`; every other construct reads as in OpenQASM 3.
//! Layers: the operations between two barriers (the whole program when it has none) form
//! one segment, laid out by `segment_layers` (a partial `barrier q...;` separates segments just the same).
//! All measurements come after the last gate; the measured list is ordered by bit
//! (registers in declaration order, then index), and every declared bit must be
//! measured exactly once. Explicit `id` operations are kept: they
//! are idles, which the analysis treats exactly like implicit ones, so an export-import
//! round trip gives the same circuit up to `id` operations on measured qubits.

use std::collections::{BTreeMap, HashMap};
use std::fmt::Write;
use std::path::Path;

use super::{Circuit, Delay, Layer, Op};
use crate::error::{Error, Result};
use crate::gate::{Gate, Mat2, Unitary};
use crate::layout::{Layout, QubitIx};

/// The largest OpenQASM file read (one circuit; anything this large is not one).
pub const MAX_QASM_FILE_BYTES: u64 = 64 << 20;

/// The largest qubit-map file read.
pub const MAX_QUBIT_MAP_BYTES: u64 = 16 << 20;

/// Writes one circuit as an OpenQASM 3 program on physical qubits.
pub fn export(c: &Circuit, layout: &Layout) -> String {
    let mut s = String::new();
    let _ = writeln!(s, "OPENQASM 3.0;");
    let _ = writeln!(s, "include \"stdgates.inc\";");
    let _ = writeln!(s, "// circuit {} on layout {}", c.id, layout.name);
    let mut used: Vec<Gate> = c.layers.iter().flatten().map(|op| op.gate).collect();
    used.sort_unstable();
    used.dedup();
    for g in used {
        match definition(g) {
            Some(body) => {
                let _ = writeln!(s, "{body}");
            }
            None if matches!(g, Gate::Custom(_)) => {
                let _ = writeln!(
                    s,
                    "// {g}: a two-qubit gate defined by its unitary in layout {}",
                    layout.name
                );
            }
            None => {}
        }
    }
    let _ = writeln!(s, "bit[{}] c;", c.measured.len());
    let mut first = true;
    for (t, layer) in c.layers.iter().enumerate() {
        if !first {
            let _ = writeln!(s, "barrier;");
        }
        first = false;
        for op in layer {
            let args: Vec<String> = op.qubits().iter().map(|q| format!("${q}")).collect();
            if op.gate.n_params() == 1 {
                let _ = writeln!(s, "{}({:?}) {};", op.gate, op.angle, args.join(", "));
            } else {
                let _ = writeln!(s, "{} {};", op.gate, args.join(", "));
            }
        }
        if c.is_timed(layout, t) {
            for &q in &c.measured {
                if !layer.iter().any(|op| op.qubits().contains(&q)) {
                    let _ = writeln!(s, "{} ${q};", Gate::Id);
                }
            }
        }
    }
    if !c.layers.is_empty() {
        let _ = writeln!(s, "barrier;");
    }
    for (i, q) in c.measured.iter().enumerate() {
        let _ = writeln!(s, "c[{i}] = measure ${q};");
    }
    s
}

/// The definition, in stdgates.inc gates, of a native gate the standard library lacks, so
/// that exported programs stand alone; reading one back checks it against the gate's
/// unitary. ecr = X on the first operand after exp(-i pi/4 Z(x)X); iswap as s, s, h, cx,
/// cx, h; sqrt_iswap = exp(i pi/8 XX) exp(i pi/8 YY); rzz = cx, rz, cx (common practice,
/// from memory; each is checked in this module's tests).
fn definition(g: Gate) -> Option<&'static str> {
    Some(match g {
        Gate::Ecr => "gate ecr a, b { h b; cx a, b; rz(pi/2) b; cx a, b; h b; x a; }",
        Gate::Iswap => "gate iswap a, b { s a; s b; h a; cx a, b; cx b, a; h b; }",
        Gate::SqrtIswap => {
            "gate sqrt_iswap a, b { h a; h b; cx a, b; rz(-pi/4) b; cx a, b; h a; h b; \
             rx(pi/2) a; rx(pi/2) b; cx a, b; rz(-pi/4) b; cx a, b; rx(-pi/2) a; rx(-pi/2) b; }"
        }
        Gate::Rzz => "gate rzz(theta) a, b { cx a, b; rz(theta) b; cx a, b; }",
        _ => return None,
    })
}

/// Where declared qubit-register elements sit on the layout: `q[0]=q3, q[1]=q4`.
///
/// Syntax: entries `NAME[INDEX]=QUBIT_ID` (or `NAME=QUBIT_ID` for a one-qubit register
/// `qubit NAME;`), separated by commas or newlines; `#` starts a comment that runs to the
/// end of the line. Invariant: each register element appears once and no two elements
/// share a layout qubit id.
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct QubitMap {
    entries: BTreeMap<(String, usize), String>,
}

impl QubitMap {
    /// Parses map text; an error carries the 1-based line and what was wrong.
    pub fn parse(text: &str) -> std::result::Result<QubitMap, (usize, String)> {
        let mut entries = BTreeMap::new();
        let mut targets: HashMap<String, String> = HashMap::new();
        for (ln, raw) in text.lines().enumerate() {
            let line = ln + 1;
            let body = raw.split('#').next().unwrap_or("");
            for item in body.split(',').map(str::trim).filter(|s| !s.is_empty()) {
                let bad = || {
                    (
                        line,
                        format!(
                            "qubit map entry '{item}' is not NAME[INDEX]=QUBIT or NAME=QUBIT \
                             (for example q[0]=q3)"
                        ),
                    )
                };
                let (lhs, rhs) = item.split_once('=').ok_or_else(bad)?;
                let (lhs, rhs) = (lhs.trim(), rhs.trim());
                let (name, index) = match lhs.split_once('[') {
                    Some((n, rest)) => {
                        let idx = rest.strip_suffix(']').ok_or_else(bad)?.trim();
                        (n.trim(), idx.parse::<usize>().map_err(|_| bad())?)
                    }
                    None => (lhs, 0),
                };
                let ident_ok = |s: &str| {
                    s.chars().next().is_some_and(|c| c.is_alphabetic() || c == '_')
                        && s.chars().all(|c| c.is_alphanumeric() || c == '_')
                };
                if !ident_ok(name) || rhs.is_empty() || rhs.contains(char::is_whitespace) {
                    return Err(bad());
                }
                let key = (name.to_string(), index);
                let shown = format!("{name}[{index}]");
                if let Some(prev) = targets.insert(rhs.to_string(), shown.clone()) {
                    return Err((
                        line,
                        format!("qubit map sends both {prev} and {shown} to qubit '{rhs}'"),
                    ));
                }
                if entries.insert(key, rhs.to_string()).is_some() {
                    return Err((line, format!("qubit map gives {shown} twice")));
                }
            }
        }
        Ok(QubitMap { entries })
    }

    /// Reads a map from a command-line value: inline entries when it contains `=`,
    /// otherwise the path of a map file.
    pub fn from_arg(arg: &str) -> Result<QubitMap> {
        if arg.contains('=') {
            return QubitMap::parse(arg)
                .map_err(|(_, m)| Error::Usage(format!("--qubit-map: {m}")));
        }
        if arg.trim().is_empty() {
            return Err(Error::Usage(
                "--qubit-map is empty: give a map file, or entries like 'q[0]=q5,q[1]=q6'".into(),
            ));
        }
        let path = Path::new(arg);
        let text = crate::files::read_text_capped(path, MAX_QUBIT_MAP_BYTES, "qubit map")?;
        QubitMap::parse(&text).map_err(|(line, m)| Error::input(path, Some(line), m))
    }

    /// The layout qubit id of register element `name[index]`.
    pub fn get(&self, name: &str, index: usize) -> Option<&str> {
        self.entries.get(&(name.to_string(), index)).map(String::as_str)
    }

    /// Number of entries.
    pub fn len(&self) -> usize {
        self.entries.len()
    }

    /// True when the map has no entries.
    pub fn is_empty(&self) -> bool {
        self.entries.is_empty()
    }
}

#[derive(Clone, Debug, PartialEq)]
enum Tok {
    Ident(String),
    Num(String),
    Hw(String),
    Str(String),
    Punct(&'static str),
}

#[derive(Clone, Debug)]
struct Token {
    tok: Tok,
    line: usize,
}

const PUNCTS: [&str; 24] = [
    "->", "==", "+=", "-=", "*=", "/=", ";", ",", "(", ")", "[", "]", "{", "}", "=", "+", "-", "*",
    "/", "@", ":", "<", ">", "!",
];

fn tokenize(text: &str) -> std::result::Result<Vec<Token>, (usize, String)> {
    let chars: Vec<char> = text.chars().collect();
    let mut out = Vec::new();
    let mut i = 0;
    let mut line = 1;
    while i < chars.len() {
        let c = chars[i];
        let next = chars.get(i + 1).copied();
        if c == '\n' {
            line += 1;
            i += 1;
        } else if c.is_whitespace() {
            i += 1;
        } else if c == '#' && chars[i..].starts_with(&['#', 'p', 'r', 'a', 'g', 'm', 'a']) {
            // `#pragma` lines speak to other tools; they change nothing here.
            while i < chars.len() && chars[i] != '\n' {
                i += 1;
            }
        } else if c == '/' && next == Some('/') {
            while i < chars.len() && chars[i] != '\n' {
                i += 1;
            }
        } else if c == '/' && next == Some('*') {
            let start = line;
            i += 2;
            loop {
                match chars.get(i) {
                    None => return Err((start, "comment '/*' is never closed by '*/'".into())),
                    Some('*') if chars.get(i + 1) == Some(&'/') => {
                        i += 2;
                        break;
                    }
                    Some('\n') => line += 1,
                    Some(_) => {}
                }
                i += 1;
            }
        } else if c.is_ascii_digit() || (c == '.' && next.is_some_and(|d| d.is_ascii_digit())) {
            let start = i;
            while i < chars.len() && chars[i].is_ascii_digit() {
                i += 1;
            }
            if chars.get(i) == Some(&'.') {
                i += 1;
                while i < chars.len() && chars[i].is_ascii_digit() {
                    i += 1;
                }
            }
            if matches!(chars.get(i), Some('e' | 'E')) {
                let mut j = i + 1;
                if matches!(chars.get(j), Some('+' | '-')) {
                    j += 1;
                }
                if chars.get(j).is_some_and(|d| d.is_ascii_digit()) {
                    i = j;
                    while i < chars.len() && chars[i].is_ascii_digit() {
                        i += 1;
                    }
                }
            }
            out.push(Token { tok: Tok::Num(chars[start..i].iter().collect()), line });
        } else if c.is_alphabetic() || c == '_' {
            let start = i;
            while i < chars.len() && (chars[i].is_alphanumeric() || chars[i] == '_') {
                i += 1;
            }
            out.push(Token { tok: Tok::Ident(chars[start..i].iter().collect()), line });
        } else if c == '$' {
            let start = i + 1;
            i += 1;
            while i < chars.len() && chars[i].is_ascii_digit() {
                i += 1;
            }
            if i == start {
                return Err((
                    line,
                    "'$' must be followed by a physical qubit number, e.g. $3".into(),
                ));
            }
            out.push(Token { tok: Tok::Hw(chars[start..i].iter().collect()), line });
        } else if c == '"' || c == '\'' {
            let start = i + 1;
            i += 1;
            while i < chars.len() && chars[i] != c && chars[i] != '\n' {
                i += 1;
            }
            if chars.get(i) != Some(&c) {
                return Err((line, "string is not closed on its line".into()));
            }
            out.push(Token { tok: Tok::Str(chars[start..i].iter().collect()), line });
            i += 1;
        } else {
            let two: String = chars[i..chars.len().min(i + 2)].iter().collect();
            let p = PUNCTS
                .iter()
                .find(|p| two.starts_with(**p))
                .ok_or_else(|| (line, format!("unexpected character '{c}'")))?;
            i += p.chars().count();
            out.push(Token { tok: Tok::Punct(p), line });
        }
    }
    Ok(out)
}

fn describe(t: Option<&Token>) -> String {
    match t.map(|t| &t.tok) {
        None => "end of file".into(),
        Some(Tok::Ident(s)) => format!("'{s}'"),
        Some(Tok::Num(s)) => format!("number {s}"),
        Some(Tok::Hw(s)) => format!("'${s}'"),
        Some(Tok::Str(s)) => format!("string \"{s}\""),
        Some(Tok::Punct(p)) => format!("'{p}'"),
    }
}

/// Constructs of OpenQASM 3 outside the subset, with the name used in the error message.
fn unsupported(word: &str) -> Option<&'static str> {
    Some(match word {
        "def" | "opaque" => "subroutine and opaque definitions",
        "if" | "else" | "switch" | "case" => "classical control flow",
        "for" | "while" | "break" | "continue" => "loops",
        "ctrl" | "negctrl" | "inv" | "pow" => "gate modifiers such as 'ctrl @'",
        "int" | "uint" | "float" | "angle" | "bool" | "complex" | "duration" | "stretch"
        | "const" | "input" | "output" | "let" | "array" => {
            "classical declarations other than 'bit'"
        }
        "box" | "defcal" | "cal" | "defcalgrammar" | "extern" | "return" | "end" => {
            "timing boxes, calibration and subroutine constructs"
        }
        "ccx" | "cswap" => "three-qubit gates",
        _ => return None,
    })
}

/// Standard-library gates that equal `rz` up to a global phase (OpenQASM 3 specification,
/// stdgates.inc: `p(λ)`, its alias `phase(λ)` and `u1(λ)` are diag(1, e^{iλ}); `t` is
/// `p(π/4)` and `tdg` is `p(-π/4)`): `Some(None)` when the angle is written, `Some(Some(a))`
/// for a fixed angle.
fn phase_gate(word: &str) -> Option<Option<f64>> {
    use std::f64::consts::FRAC_PI_4;
    match word {
        "p" | "phase" | "u1" => Some(None),
        "t" => Some(Some(FRAC_PI_4)),
        "tdg" => Some(Some(-FRAC_PI_4)),
        _ => None,
    }
}

/// The OpenQASM 3 (stdgates.inc) gate that a qelib1.inc gate of OpenQASM 2 is, and how
/// many angles it takes there: `cu1(λ)` is `cp(λ)`, `cu3(θ, φ, λ)` is `cu(θ, φ, λ, 0)`
/// and `u(θ, φ, λ)` is `u3` (OpenQASM 2 specification, qelib1.inc; OpenQASM 3
/// specification, stdgates.inc, which keeps the other names).
fn qelib1_alias(word: &str) -> Option<(&'static str, usize)> {
    Some(match word {
        "cu1" => ("cp", 1),
        "cu3" => ("cu", 3),
        "u" => ("u3", 3),
        _ => return None,
    })
}

/// Deepest parenthesis nesting accepted in an angle, so hostile input cannot overflow
/// the stack.
const MAX_DEPTH: usize = 64;

struct Parser<'a> {
    toks: Vec<Token>,
    pos: usize,
    path: &'a Path,
    id: &'a str,
    layout: &'a Layout,
    map: Option<&'a QubitMap>,
    qregs: HashMap<String, usize>,
    bregs: HashMap<String, (usize, usize)>,
    breg_order: Vec<(String, usize)>,
    items: Vec<Item>,
    /// Delays as (position in `items` of their idle, duration as written).
    delays: Vec<(usize, String)>,
    measures: Vec<((usize, usize), QubitIx, usize)>,
    n_statements: usize,
    /// `gate` definitions whose calls are expanded.
    defs: HashMap<String, GateDef>,
    /// Formal parameters and qubits of the definitions being expanded, innermost last.
    scopes: Vec<Scope>,
    /// While a definition of a known gate is checked: each call's unitary and operands
    /// (formal qubits numbered from 0), instead of operations.
    collect: Option<Vec<(Unitary, Vec<QubitIx>)>>,
    /// True after `OPENQASM 2.0;`: qelib1.inc's names are read too.
    qasm2: bool,
}

/// A `gate` definition: formal angles and qubits, and the body's tokens.
#[derive(Clone, Debug)]
struct GateDef {
    params: Vec<String>,
    qubits: Vec<String>,
    body: Vec<Token>,
}

#[derive(Clone, Debug, Default)]
struct Scope {
    params: HashMap<String, f64>,
    qubits: HashMap<String, QubitIx>,
}

/// Nesting of gate definitions (a definition that calls itself stops here).
const MAX_EXPANSION: usize = 16;

enum Item {
    Op(Op),
    Barrier,
}

impl<'a> Parser<'a> {
    fn new(
        toks: Vec<Token>,
        path: &'a Path,
        id: &'a str,
        layout: &'a Layout,
        map: Option<&'a QubitMap>,
    ) -> Parser<'a> {
        Parser {
            toks,
            pos: 0,
            path,
            id,
            layout,
            map,
            qregs: HashMap::new(),
            bregs: HashMap::new(),
            breg_order: Vec::new(),
            items: Vec::new(),
            delays: Vec::new(),
            measures: Vec::new(),
            n_statements: 0,
            defs: HashMap::new(),
            scopes: Vec::new(),
            collect: None,
            qasm2: false,
        }
    }

    fn line(&self) -> usize {
        self.toks.get(self.pos).or(self.toks.last()).map_or(1, |t| t.line)
    }

    fn err(&self, line: usize, msg: impl Into<String>) -> Error {
        Error::input(self.path, Some(line), format!("circuit {}: {}", self.id, msg.into()))
    }

    fn peek(&self) -> Option<&Tok> {
        self.toks.get(self.pos).map(|t| &t.tok)
    }

    fn bump(&mut self) -> Option<Token> {
        let t = self.toks.get(self.pos).cloned();
        self.pos += 1;
        t
    }

    fn is_punct(&self, p: &str) -> bool {
        matches!(self.peek(), Some(Tok::Punct(q)) if *q == p)
    }

    fn expect_punct(&mut self, p: &str, after: &str) -> Result<()> {
        if self.is_punct(p) {
            self.pos += 1;
            Ok(())
        } else {
            Err(self.err(
                self.line(),
                format!("expected '{p}' {after}, found {}", describe(self.toks.get(self.pos))),
            ))
        }
    }

    fn ident(&mut self, what: &str) -> Result<String> {
        match self.peek() {
            Some(Tok::Ident(s)) => {
                let s = s.clone();
                self.pos += 1;
                Ok(s)
            }
            _ => Err(self.err(
                self.line(),
                format!("expected {what}, found {}", describe(self.toks.get(self.pos))),
            )),
        }
    }

    fn int(&mut self, what: &str) -> Result<usize> {
        let line = self.line();
        match self.peek() {
            Some(Tok::Num(s)) if s.chars().all(|c| c.is_ascii_digit()) => {
                let v = s
                    .parse::<usize>()
                    .map_err(|_| self.err(line, format!("{what} {s} is too large")));
                self.pos += 1;
                v
            }
            _ => Err(self.err(
                line,
                format!(
                    "expected {what} (a whole number), found {}",
                    describe(self.toks.get(self.pos))
                ),
            )),
        }
    }

    fn optional_size(&mut self) -> Result<Option<usize>> {
        if !self.is_punct("[") {
            return Ok(None);
        }
        self.pos += 1;
        let n = self.int("register size")?;
        self.expect_punct("]", "after the register size")?;
        Ok(Some(n))
    }

    fn declared(&self, name: &str) -> bool {
        self.qregs.contains_key(name) || self.bregs.contains_key(name)
    }

    fn run(&mut self) -> Result<()> {
        while self.pos < self.toks.len() {
            self.statement()?;
            self.n_statements += 1;
        }
        Ok(())
    }

    fn statement(&mut self) -> Result<()> {
        let line = self.line();
        let word = match self.peek() {
            Some(Tok::Ident(s)) => s.clone(),
            Some(Tok::Punct("@")) => {
                // An annotation (`@name ...`) runs to the end of its line and only informs
                // other tools; the statement it annotates follows on the next line.
                while self.toks.get(self.pos).is_some_and(|t| t.line == line) {
                    self.pos += 1;
                }
                return Ok(());
            }
            _ => {
                return Err(self.err(
                    line,
                    format!("expected a statement, found {}", describe(self.toks.get(self.pos))),
                ))
            }
        };
        match word.as_str() {
            "OPENQASM" => {
                self.pos += 1;
                if self.n_statements > 0 {
                    return Err(self.err(line, "'OPENQASM' must be the first statement"));
                }
                match self.bump().map(|t| t.tok) {
                    Some(Tok::Num(v)) if v == "3" || v.starts_with("3.") => {}
                    Some(Tok::Num(v)) if v == "2" || v.starts_with("2.") => self.qasm2 = true,
                    other => {
                        let shown = other
                            .map_or("nothing".into(), |t| describe(Some(&Token { tok: t, line })));
                        return Err(self.err(
                            line,
                            format!(
                                "OpenQASM version {shown} is not supported (valid: 3, 3.0, or 2.0 \
                                 for OpenQASM 2 programs)"
                            ),
                        ));
                    }
                }
                self.expect_punct(";", "after the OpenQASM version")
            }
            "include" => {
                self.pos += 1;
                match self.bump().map(|t| t.tok) {
                    Some(Tok::Str(s)) if s == "stdgates.inc" || s == "qelib1.inc" => {}
                    Some(Tok::Str(s)) => {
                        return Err(self.err(
                            line,
                            format!(
                                "include \"{s}\" is not supported (only \"stdgates.inc\", or \
                                 \"qelib1.inc\" in OpenQASM 2 programs)"
                            ),
                        ))
                    }
                    _ => return Err(self.err(line, "include needs a file name in quotes")),
                }
                self.expect_punct(";", "after the include")
            }
            "qubit" | "bit" => {
                self.pos += 1;
                let size = self.optional_size()?;
                let name = self.ident("a register name")?;
                if self.declared(&name) {
                    return Err(self.err(line, format!("register '{name}' is declared twice")));
                }
                if self.is_punct("=") {
                    return Err(self.err(line, "initialised declarations are not supported"));
                }
                self.expect_punct(";", "after the declaration")?;
                let size = size.unwrap_or(1);
                if word == "qubit" {
                    self.qregs.insert(name, size);
                } else {
                    self.bregs.insert(name.clone(), (self.breg_order.len(), size));
                    self.breg_order.push((name, size));
                }
                Ok(())
            }
            "qreg" | "creg" => {
                // OpenQASM 2: `qreg q[n];` is `qubit[n] q;` and `creg c[n];` is `bit[n] c;`.
                self.pos += 1;
                let name = self.ident("a register name")?;
                if self.declared(&name) {
                    return Err(self.err(line, format!("register '{name}' is declared twice")));
                }
                let size = self.optional_size()?.ok_or_else(|| {
                    self.err(line, format!("{word} needs a size, like '{word} {name}[2];'"))
                })?;
                self.expect_punct(";", "after the declaration")?;
                if word == "qreg" {
                    self.qregs.insert(name, size);
                } else {
                    self.bregs.insert(name.clone(), (self.breg_order.len(), size));
                    self.breg_order.push((name, size));
                }
                Ok(())
            }
            "barrier" => {
                self.pos += 1;
                if !self.is_punct(";") {
                    self.barrier_operand()?;
                    while self.is_punct(",") {
                        self.pos += 1;
                        self.barrier_operand()?;
                    }
                }
                self.expect_punct(";", "after the barrier")?;
                self.items.push(Item::Barrier);
                Ok(())
            }
            "gate" => self.gate_def(line),
            "reset" => {
                self.pos += 1;
                let qs = self.operands_or_registers()?;
                self.expect_punct(";", "after the reset")?;
                if !self.measures.is_empty() {
                    return Err(self.err(
                        line,
                        "a reset after a measurement is not supported: measure at the end of the program",
                    ));
                }
                for q in qs {
                    let used = self
                        .items
                        .iter()
                        .any(|i| matches!(i, Item::Op(op) if op.qubits().contains(&q)));
                    if used {
                        return Err(self.err(
                            line,
                            format!(
                                "reset of {} after a gate on it (a reset between gates) is not supported; a reset before a qubit's first gate is read as nothing, since every qubit starts in |0>",
                                self.layout.id(q)
                            ),
                        ));
                    }
                }
                Ok(())
            }
            "delay" => {
                self.pos += 1;
                self.expect_punct("[", "after 'delay' (a duration such as delay[100ns])")?;
                let start = self.pos;
                while self.pos < self.toks.len() && !self.is_punct("]") && !self.is_punct(";") {
                    self.pos += 1;
                }
                if self.pos == start {
                    return Err(self.err(line, "delay needs a duration, like delay[100ns] $0;"));
                }
                let duration: String = self.toks[start..self.pos]
                    .iter()
                    .map(|t| match &t.tok {
                        Tok::Num(v) | Tok::Ident(v) => v.clone(),
                        Tok::Hw(v) => format!("${v}"),
                        Tok::Str(v) => format!("\"{v}\""),
                        Tok::Punct(p) => p.to_string(),
                    })
                    .collect();
                self.expect_punct("]", "after the delay's duration")?;
                if self.is_punct(";") {
                    return Err(
                        self.err(line, "delay needs the qubits it idles, like delay[100ns] $0;")
                    );
                }
                let qs = self.operands_or_registers()?;
                self.expect_punct(";", "after the delay")?;
                if !self.measures.is_empty() {
                    return Err(self.err(line, "gates after a measurement are not supported: measure at the end of the program"));
                }
                // An explicit idle in its layer; its duration is recorded, not modelled.
                for q in qs {
                    self.delays.push((self.items.len(), duration.clone()));
                    self.items.push(Item::Op(Op::one(Gate::Id, q)));
                }
                Ok(())
            }
            "measure" if self.whole_register_at(self.pos + 1) => {
                self.pos += 1;
                let qreg = self.ident("a qubit register")?;
                self.expect_punct("->", "after the measured register")?;
                let breg = self.ident("a bit register")?;
                self.expect_punct(";", "after the measurement")?;
                self.measure_registers(&breg, &qreg, line)
            }
            "measure" => {
                self.pos += 1;
                let q = self.operand()?;
                if !self.is_punct("->") {
                    return Err(self.err(
                        line,
                        "expected 'measure $k -> c[i];' (or write 'c[i] = measure $k;')",
                    ));
                }
                self.pos += 1;
                let bit = self.bitref()?;
                self.expect_punct(";", "after the measurement")?;
                self.measures.push((bit, q, line));
                Ok(())
            }
            w if self.bregs.contains_key(w) => {
                // `c = measure q;` on a register of several bits measures it whole.
                let whole = self.bregs[w].1 > 1
                    && matches!(self.toks.get(self.pos + 1).map(|t| &t.tok), Some(Tok::Punct("=")));
                let bit = if whole {
                    self.pos += 1;
                    None
                } else {
                    Some(self.bitref()?)
                };
                if !self.is_punct("=") {
                    return Err(self.err(line, format!("expected '=' after bit '{w}'")));
                }
                self.pos += 1;
                if self.peek() != Some(&Tok::Ident("measure".into())) {
                    return Err(self.err(
                        line,
                        "only measurements may be assigned to bits ('c[i] = measure $k;')",
                    ));
                }
                self.pos += 1;
                let Some(bit) = bit else {
                    let qreg = self.ident("a qubit register (c = measure q;)")?;
                    self.expect_punct(";", "after the measurement")?;
                    return self.measure_registers(w, &qreg, line);
                };
                let q = self.operand()?;
                self.expect_punct(";", "after the measurement")?;
                self.measures.push((bit, q, line));
                Ok(())
            }
            w => self.gate_call(w, line),
        }
    }

    fn gate_call(&mut self, word: &str, line: usize) -> Result<()> {
        if word == "gphase" {
            // A global phase changes no outcome probability.
            self.pos += 1;
            if self.is_punct("(") {
                self.pos += 1;
                self.expr(0)?;
                self.expect_punct(")", "after the phase")?;
            }
            return self.expect_punct(";", "after gphase");
        }
        // OpenQASM 2's qelib1.inc names that stdgates.inc spells otherwise; cu3 is cu with
        // its fourth angle (a phase on the controlled branch) at 0.
        let alias =
            if self.qasm2 && !self.defs.contains_key(word) { qelib1_alias(word) } else { None };
        let signature = match alias {
            Some((name, n)) => self.signature(name).map(|(arity, _)| (arity, n)),
            None => self.signature(word),
        };
        let Some((arity, n_angles)) = signature else {
            let msg = match unsupported(word) {
                Some(what) => format!("'{word}': {what} are not supported by this importer"),
                None => format!(
                    "unknown gate or statement '{word}' (supported gates: {}, the rest of \
                     stdgates.inc where it equals a native gate, and gates defined with 'gate')",
                    Gate::known_names()
                ),
            };
            return Err(self.err(line, msg));
        };
        self.pos += 1;
        if self.is_punct("@") {
            return Err(self.err(line, "gate modifiers ('@') are not supported"));
        }
        let mut angles = Vec::new();
        if self.is_punct("(") {
            if n_angles == 0 {
                return Err(self.err(line, format!("gate {word} takes no angle")));
            }
            self.pos += 1;
            angles.push(self.expr(0)?);
            while self.is_punct(",") {
                if n_angles == 1 {
                    return Err(self.err(line, format!("gate {word} takes at most one angle")));
                }
                self.pos += 1;
                angles.push(self.expr(0)?);
            }
            self.expect_punct(")", "after the angle")?;
            if angles.iter().any(|v| !v.is_finite()) {
                return Err(self.err(line, format!("angle of {word} is not a finite number")));
            }
        }
        if angles.len() != n_angles {
            return Err(self.err(
                line,
                match n_angles {
                    1 => format!("gate {word} needs an angle, e.g. {word}(pi/2)"),
                    n => format!("gate {word} takes {n} angles, got {}", angles.len()),
                },
            ));
        }
        let mut qs = vec![self.operand()?];
        while self.is_punct(",") {
            self.pos += 1;
            qs.push(self.operand()?);
        }
        self.expect_punct(";", &format!("after the operands of {word}"))?;
        if qs.len() != arity {
            return Err(
                self.err(line, format!("gate {word} takes {arity} qubit(s), got {}", qs.len()))
            );
        }
        if !self.measures.is_empty() {
            return Err(self.err(
                line,
                "gates after a measurement are not supported: measure at the end of the program",
            ));
        }
        match alias {
            Some((name, _)) => {
                if name == "cu" {
                    angles.push(0.0);
                }
                self.emit(name, &angles, &qs, line)
            }
            None => self.emit(word, &angles, &qs, line),
        }
    }

    /// (qubits, angles) of a gate name this program may call.
    fn signature(&self, word: &str) -> Option<(usize, usize)> {
        if let Some(d) = self.defs.get(word) {
            return Some((d.qubits.len(), d.params.len()));
        }
        if let Some(g) = Gate::from_name(word) {
            return Some((g.arity(), g.n_params()));
        }
        if let Some(fixed) = phase_gate(word) {
            return Some((1, usize::from(fixed.is_none())));
        }
        crate::gate::stdgates_translated(word)
    }

    /// The unitary slackmap knows for a gate name at its angles (defined gates excluded).
    fn known_unitary(word: &str, angles: &[f64]) -> Option<Unitary> {
        if let Some(g) = Gate::from_name(word) {
            return Unitary::of(g, angles.first().copied().unwrap_or(0.0));
        }
        if let Some(fixed) = phase_gate(word) {
            return Unitary::of(Gate::Rz, fixed.or(angles.first().copied())?);
        }
        crate::gate::stdgates_unitary(word, angles)
    }

    /// Adds one call: a defined gate is expanded; a gate that is not native where it runs
    /// is read as the native that equals it up to a global phase, if one does.
    fn emit(&mut self, word: &str, angles: &[f64], qs: &[QubitIx], line: usize) -> Result<()> {
        if let Some(def) = self.defs.get(word).cloned() {
            return self.expand(word, &def, angles, qs, line);
        }
        let u = Self::known_unitary(word, angles)
            .ok_or_else(|| self.err(line, format!("gate {word} has no unitary")))?;
        if let Some(c) = self.collect.as_mut() {
            c.push((u, qs.to_vec()));
            return Ok(());
        }
        let standard = Gate::from_name(word)
            .map(|g| (g, angles.first().copied().unwrap_or(0.0)))
            .or_else(|| {
                phase_gate(word)
                    .map(|fixed| (Gate::Rz, fixed.or(angles.first().copied()).unwrap_or(0.0)))
            });
        let operands = [qs[0], *qs.last().unwrap_or(&qs[0])];
        let op = match standard {
            Some((gate, angle)) if self.layout.is_native_op(gate, qs, angle) => {
                Op { gate, operands, angle }
            }
            // A standard gate equal to the identity stays itself rather than becoming an
            // idle or a frame change: `rx(0)` is a pulse the program asked for.
            Some((gate, angle))
                if Unitary::of(Gate::Id, 0.0).is_some_and(|i| i.same_up_to_phase(&u)) =>
            {
                Op { gate, operands, angle }
            }
            Some((gate, angle)) => {
                self.as_native(&u, qs, false).unwrap_or(Op { gate, operands, angle })
            }
            None => self.as_native(&u, qs, true).ok_or_else(|| {
                let shown = if angles.is_empty() {
                    word.to_string()
                } else {
                    format!(
                        "{word}({})",
                        angles.iter().map(|a| format!("{a:?}")).collect::<Vec<_>>().join(", ")
                    )
                };
                let on: Vec<&str> = qs.iter().map(|&q| self.layout.id(q)).collect();
                let natives = match qs {
                    [a, b] => {
                        let n: Vec<String> = self
                            .layout
                            .natives_between(*a, *b)
                            .iter()
                            .map(ToString::to_string)
                            .collect();
                        if n.is_empty() {
                            "none: the qubits are not coupled".to_string()
                        } else {
                            n.join(", ")
                        }
                    }
                    _ => std::iter::once(Gate::Id)
                        .chain(self.layout.gates.one_qubit.iter().copied())
                        .map(|g| g.name().to_string())
                        .collect::<Vec<_>>()
                        .join(", "),
                };
                self.err(
                    line,
                    format!(
                        "{shown} on {} equals no native gate of layout '{}' there, as one gate \
                         in one layer (native there: {natives}); write it as native gates",
                        on.join("-"),
                        self.layout.name
                    ),
                )
            })?,
        };
        self.items.push(Item::Op(op));
        Ok(())
    }

    /// The native operation on `qs` whose unitary equals `u` up to a global phase; `id`
    /// counts only with `idle`.
    fn as_native(&self, u: &Unitary, qs: &[QubitIx], idle: bool) -> Option<Op> {
        match (u, qs) {
            (Unitary::One(m), &[q]) => {
                let first = idle.then_some(Gate::Id);
                for g in first.into_iter().chain(self.layout.gates.one_qubit.iter().copied()) {
                    let angle = match g.n_params() {
                        0 => 0.0,
                        _ => match rotation_angle(g, m) {
                            Some(a) => a,
                            None => continue,
                        },
                    };
                    if Unitary::of(g, angle).is_some_and(|v| v.same_up_to_phase(u)) {
                        return Some(Op::rot(g, q, angle));
                    }
                }
                None
            }
            (Unitary::Two(_), &[a, b]) => {
                // A directed native counts only in its coupler's direction: the other way
                // round is not the operation the chip calibrated.
                let either = |n: &crate::layout::Native2| n.gate.is_symmetric();
                for n in self.layout.natives_between(a, b) {
                    let v = Unitary::Two(n.unitary());
                    let forward = either(n) || self.layout.runs_forward(a, b);
                    if forward && v.same_up_to_phase(u) {
                        return Some(Op { gate: n.gate, operands: [a, b], angle: n.angle });
                    }
                    let backward = either(n) || self.layout.runs_forward(b, a);
                    if backward && v.swapped().same_up_to_phase(u) {
                        return Some(Op { gate: n.gate, operands: [b, a], angle: n.angle });
                    }
                }
                None
            }
            _ => None,
        }
    }

    /// Expands a call of a defined gate: its body with the formal angles and qubits bound.
    fn expand(
        &mut self,
        word: &str,
        def: &GateDef,
        angles: &[f64],
        qs: &[QubitIx],
        line: usize,
    ) -> Result<()> {
        if self.scopes.len() >= MAX_EXPANSION {
            return Err(self.err(
                line,
                format!("gate '{word}': definitions nest more than {MAX_EXPANSION} deep (does it call itself?)"),
            ));
        }
        let scope = Scope {
            params: def.params.iter().cloned().zip(angles.iter().copied()).collect(),
            qubits: def.qubits.iter().cloned().zip(qs.iter().copied()).collect(),
        };
        let toks = std::mem::replace(&mut self.toks, def.body.clone());
        let pos = std::mem::replace(&mut self.pos, 0);
        self.scopes.push(scope);
        let result = self.body();
        self.scopes.pop();
        self.toks = toks;
        self.pos = pos;
        result
    }

    /// The statements of a gate body: gate calls only.
    fn body(&mut self) -> Result<()> {
        while self.pos < self.toks.len() {
            let line = self.line();
            match self.peek() {
                Some(Tok::Ident(w))
                    if self.signature(w).is_some()
                        || w == "gphase"
                        || (self.qasm2 && qelib1_alias(w).is_some()) =>
                {
                    let w = w.clone();
                    self.gate_call(&w, line)?;
                }
                _ => {
                    return Err(self.err(
                        line,
                        format!(
                            "a gate body holds gate calls only, found {}",
                            describe(self.toks.get(self.pos))
                        ),
                    ))
                }
            }
        }
        Ok(())
    }

    /// `gate name(params) q0, q1 { body }`. A definition of a gate slackmap knows is checked
    /// against that gate's unitary and calls keep using it; other definitions are expanded
    /// where they are called.
    fn gate_def(&mut self, line: usize) -> Result<()> {
        self.pos += 1;
        if !self.scopes.is_empty() {
            return Err(self.err(line, "gate definitions cannot be nested"));
        }
        let name = self.ident("a gate name")?;
        let mut params = Vec::new();
        if self.is_punct("(") {
            self.pos += 1;
            while !self.is_punct(")") {
                if !params.is_empty() {
                    self.expect_punct(",", "between the angle names")?;
                }
                params.push(self.ident("an angle name")?);
            }
            self.pos += 1;
        }
        let mut qubits = vec![self.ident("a qubit argument name")?];
        while self.is_punct(",") {
            self.pos += 1;
            qubits.push(self.ident("a qubit argument name")?);
        }
        self.expect_punct("{", &format!("to open the body of gate '{name}'"))?;
        let start = self.pos;
        while self.pos < self.toks.len() && !self.is_punct("}") {
            if self.is_punct("{") {
                return Err(
                    self.err(self.line(), format!("gate '{name}': a body holds gate calls only"))
                );
            }
            self.pos += 1;
        }
        if self.pos >= self.toks.len() {
            return Err(
                self.err(line, format!("the body of gate '{name}' is never closed with '}}'"))
            );
        }
        let body = self.toks[start..self.pos].to_vec();
        self.pos += 1;
        for (i, n) in qubits.iter().chain(&params).enumerate() {
            if qubits.iter().chain(&params).take(i).any(|m| m == n) {
                return Err(self.err(line, format!("gate '{name}': argument '{n}' is named twice")));
            }
        }
        if self.defs.contains_key(&name) {
            return Err(self.err(line, format!("gate '{name}' is defined twice")));
        }
        let def = GateDef { params, qubits, body };
        match self.signature(&name) {
            Some(sig) => self.check_definition(&name, &def, sig, line),
            None => {
                self.defs.insert(name, def);
                Ok(())
            }
        }
    }

    /// Checks a definition of a gate slackmap knows: same qubits and angles, and a body whose
    /// product equals the gate's unitary up to a global phase at a few angles.
    fn check_definition(
        &mut self,
        name: &str,
        def: &GateDef,
        sig: (usize, usize),
        line: usize,
    ) -> Result<()> {
        if sig != (def.qubits.len(), def.params.len()) {
            return Err(self.err(
                line,
                format!(
                    "gate '{name}' is defined on {} qubit(s) with {} angle(s); slackmap's {name} takes {} and {} (rename the definition to have it expanded)",
                    def.qubits.len(),
                    def.params.len(),
                    sig.0,
                    sig.1
                ),
            ));
        }
        for trial in [[0.7, -0.3, 1.1, 0.4], [-2.1, 0.9, -0.6, 2.5]] {
            let angles = &trial[..sig.1];
            let formal: Vec<QubitIx> = (0..sig.0).collect();
            let outer = self.collect.replace(Vec::new());
            let expanded = self.expand(name, def, angles, &formal, line);
            let calls = std::mem::replace(&mut self.collect, outer).unwrap_or_default();
            expanded?;
            let want = Self::known_unitary(name, angles)
                .ok_or_else(|| self.err(line, format!("gate {name} has no unitary")))?;
            let mut got = match sig.0 {
                1 => Unitary::of(Gate::Id, 0.0),
                _ => Unitary::of(Gate::Cz, 0.0).and_then(|cz| cz.then(&cz)),
            };
            for (u, on) in &calls {
                let step = match (u, on.as_slice()) {
                    (Unitary::One(m), [q]) if sig.0 == 2 => Unitary::on_operand(m, *q),
                    (Unitary::Two(_), [a, _]) if *a == 1 => u.swapped(),
                    _ => *u,
                };
                got = got.and_then(|g| g.then(&step));
            }
            if !got.is_some_and(|g| g.same_up_to_phase(&want)) {
                return Err(self.err(
                    line,
                    format!(
                        "gate '{name}' is defined here with a body that differs from slackmap's {name} (not equal up to a global phase); rename the definition to have its body used"
                    ),
                ));
            }
        }
        Ok(())
    }

    /// Operands where whole qubit registers may stand for all their elements (reset, delay).
    fn operands_or_registers(&mut self) -> Result<Vec<QubitIx>> {
        let mut out = Vec::new();
        loop {
            let line = self.line();
            if self.whole_register_at(self.pos) {
                let name = self.ident("a qubit register")?;
                let size = self.qregs[&name];
                for i in 0..size {
                    out.push(self.register_qubit(&name, i, line)?);
                }
            } else {
                out.push(self.operand()?);
            }
            if !self.is_punct(",") {
                return Ok(out);
            }
            self.pos += 1;
        }
    }

    /// True when the token at `at` names a whole qubit register (no index follows).
    fn whole_register_at(&self, at: usize) -> bool {
        matches!(self.toks.get(at).map(|t| &t.tok), Some(Tok::Ident(n)) if self.qregs.contains_key(n) && !self.scopes.last().is_some_and(|s| s.qubits.contains_key(n)))
            && !matches!(self.toks.get(at + 1).map(|t| &t.tok), Some(Tok::Punct("[")))
    }

    /// `c = measure q;` and `measure q -> c;` on whole registers of one size: bit i of c
    /// gets qubit i of q.
    fn measure_registers(&mut self, breg: &str, qreg: &str, line: usize) -> Result<()> {
        let (reg, bits) = *self.bregs.get(breg).ok_or_else(|| {
            self.err(
                line,
                format!("'{breg}' is not a declared bit register (declare 'bit[n] {breg};')"),
            )
        })?;
        let qubits = *self.qregs.get(qreg).ok_or_else(|| {
            self.err(
                line,
                format!("'{qreg}' is not a declared qubit register (declare 'qubit[n] {qreg};')"),
            )
        })?;
        if bits != qubits {
            return Err(self.err(
                line,
                format!("measuring register {qreg} ({qubits} qubits) into {breg} ({bits} bits) needs equal sizes"),
            ));
        }
        for i in 0..bits {
            let q = self.register_qubit(qreg, i, line)?;
            self.measures.push(((reg, i), q, line));
        }
        Ok(())
    }

    fn index_of(&mut self, name: &str, size: usize, kind: &str) -> Result<usize> {
        let line = self.line();
        if !self.is_punct("[") {
            if size == 1 {
                return Ok(0);
            }
            return Err(self.err(
                line,
                format!("'{name}' is a {kind} register of {size}: index it ({name}[i]); broadcasting is not supported"),
            ));
        }
        self.pos += 1;
        let i = self.int("an index")?;
        self.expect_punct("]", "after the index")?;
        if i >= size {
            return Err(self.err(
                line,
                format!("index {name}[{i}] is out of range: '{name}' has {size} {kind}(s)"),
            ));
        }
        Ok(i)
    }

    fn operand(&mut self) -> Result<QubitIx> {
        let line = self.line();
        match self.bump().map(|t| t.tok) {
            Some(Tok::Hw(k)) => {
                let n = self.layout.n_qubits();
                match k.parse::<usize>() {
                    Ok(k) if k < n => Ok(k),
                    _ => Err(self.err(
                        line,
                        format!(
                            "physical qubit ${k} is not in layout '{}' (valid: $0 to ${})",
                            self.layout.name,
                            n - 1
                        ),
                    )),
                }
            }
            Some(Tok::Ident(name))
                if self.scopes.last().is_some_and(|s| s.qubits.contains_key(&name)) =>
            {
                Ok(self.scopes.last().map_or(0, |s| s.qubits[&name]))
            }
            Some(Tok::Ident(name)) if !self.scopes.is_empty() => Err(self
                .err(line, format!("'{name}' is not a qubit argument of the gate being defined"))),
            Some(Tok::Ident(name)) => {
                let size = match self.qregs.get(&name) {
                    Some(&s) => s,
                    None => {
                        return Err(self.err(
                            line,
                            format!("'{name}' is not a declared qubit register (declare 'qubit[n] {name};' or use physical qubits $k)"),
                        ))
                    }
                };
                let i = self.index_of(&name, size, "qubit")?;
                self.register_qubit(&name, i, line)
            }
            other => {
                let shown = other.map(|tok| Token { tok, line });
                Err(self.err(
                    line,
                    format!("expected a qubit ($k or q[i]), found {}", describe(shown.as_ref())),
                ))
            }
        }
    }

    /// The layout qubit of element `i` of qubit register `name`, through the qubit map.
    fn register_qubit(&self, name: &str, i: usize, line: usize) -> Result<QubitIx> {
        let map = self.map.ok_or_else(|| {
                    self.err(
                        line,
                        format!("{name}[{i}] is a declared qubit but no qubit map was given (e.g. --qubit-map {name}[{i}]=q0)"),
                    )
                })?;
        let target = map
            .get(name, i)
            .ok_or_else(|| self.err(line, format!("the qubit map has no entry for {name}[{i}]")))?;
        self.layout.qubit(target).ok_or_else(|| {
            self.err(
                line,
                format!(
                    "the qubit map sends {name}[{i}] to '{target}', which is not in layout '{}'",
                    self.layout.name
                ),
            )
        })
    }

    /// A barrier may name a whole register; it separates layers whatever it names.
    fn barrier_operand(&mut self) -> Result<()> {
        if let Some(Tok::Ident(name)) = self.peek() {
            if self.qregs.contains_key(name)
                && !matches!(self.toks.get(self.pos + 1).map(|t| &t.tok), Some(Tok::Punct("[")))
            {
                self.pos += 1;
                return Ok(());
            }
        }
        self.operand().map(|_| ())
    }

    fn bitref(&mut self) -> Result<(usize, usize)> {
        let line = self.line();
        let name = self.ident("a bit")?;
        let (reg, size) = *self.bregs.get(&name).ok_or_else(|| {
            self.err(
                line,
                format!("'{name}' is not a declared bit register (declare 'bit[n] {name};')"),
            )
        })?;
        let i = self.index_of(&name, size, "bit")?;
        Ok((reg, i))
    }

    fn expr(&mut self, depth: usize) -> Result<f64> {
        let mut v = self.term(depth)?;
        loop {
            if self.is_punct("+") {
                self.pos += 1;
                v += self.term(depth)?;
            } else if self.is_punct("-") {
                self.pos += 1;
                v -= self.term(depth)?;
            } else {
                return Ok(v);
            }
        }
    }

    fn term(&mut self, depth: usize) -> Result<f64> {
        let mut v = self.unary(depth)?;
        loop {
            if self.is_punct("*") {
                self.pos += 1;
                v *= self.unary(depth)?;
            } else if self.is_punct("/") {
                self.pos += 1;
                v /= self.unary(depth)?;
            } else {
                return Ok(v);
            }
        }
    }

    fn unary(&mut self, depth: usize) -> Result<f64> {
        if depth > MAX_DEPTH {
            return Err(self.err(self.line(), "angle expression is nested too deeply"));
        }
        if self.is_punct("-") {
            self.pos += 1;
            return Ok(-self.unary(depth + 1)?);
        }
        if self.is_punct("+") {
            self.pos += 1;
            return self.unary(depth + 1);
        }
        let line = self.line();
        match self.bump().map(|t| t.tok) {
            Some(Tok::Num(s)) => s
                .parse::<f64>()
                .map_err(|_| self.err(line, format!("'{s}' is not a number"))),
            Some(Tok::Ident(s)) if self.scopes.last().is_some_and(|sc| sc.params.contains_key(&s)) => {
                Ok(self.scopes.last().map_or(0.0, |sc| sc.params[&s]))
            }
            Some(Tok::Ident(s)) => match s.as_str() {
                "pi" | "π" => Ok(std::f64::consts::PI),
                "tau" | "τ" => Ok(std::f64::consts::TAU),
                _ => Err(self.err(
                    line,
                    format!("'{s}' is not allowed in an angle (numbers, pi, π, tau, + - * / and parentheses)"),
                )),
            },
            Some(Tok::Punct("(")) => {
                let v = self.expr(depth + 1)?;
                self.expect_punct(")", "to close the parenthesis")?;
                Ok(v)
            }
            other => {
                let shown = other.map(|tok| Token { tok, line });
                Err(self.err(line, format!("expected an angle, found {}", describe(shown.as_ref()))))
            }
        }
    }

    fn finish(self) -> Result<(Circuit, Vec<Delay>)> {
        let layers = self.barrier_layers();
        let delays = self.delay_layers(&layers);
        let mut measures = self.measures.clone();
        measures.sort_by_key(|&(bit, _, line)| (bit, line));
        for w in measures.windows(2) {
            if w[0].0 == w[1].0 {
                let (reg, i) = w[1].0;
                return Err(self.err(
                    w[1].2,
                    format!("bit {}[{i}] is measured twice", self.breg_order[reg].0),
                ));
            }
        }
        let mut seen: HashMap<QubitIx, usize> = HashMap::new();
        for &(_, q, line) in &self.measures {
            if let Some(prev) = seen.insert(q, line) {
                return Err(self.err(
                    line,
                    format!("qubit {} is measured twice (first on line {prev})", self.layout.id(q)),
                ));
            }
        }
        for (reg, (name, size)) in self.breg_order.iter().enumerate() {
            for i in 0..*size {
                if measures.binary_search_by_key(&(reg, i), |m| m.0).is_err() {
                    return Err(self.err(
                        self.line(),
                        format!("bit {name}[{i}] is declared but never measured"),
                    ));
                }
            }
        }
        let circuit = Circuit {
            id: self.id.to_string(),
            layers,
            measured: measures.iter().map(|m| m.1).collect(),
        };
        Ok((circuit, delays))
    }

    /// Where each delay's idle landed. Layering keeps every qubit's program order, so the
    /// k-th `id` on a qubit in the program is the k-th `id` on it in layer order.
    fn delay_layers(&self, layers: &[Layer]) -> Vec<Delay> {
        let mut idles_in_layers: HashMap<QubitIx, Vec<usize>> = HashMap::new();
        for (t, layer) in layers.iter().enumerate() {
            for op in layer.iter().filter(|op| op.gate == Gate::Id) {
                idles_in_layers.entry(op.operands[0]).or_default().push(t);
            }
        }
        let mut seen: HashMap<QubitIx, usize> = HashMap::new();
        let mut out = Vec::with_capacity(self.delays.len());
        let mut next = self.delays.iter().peekable();
        for (i, item) in self.items.iter().enumerate() {
            let Item::Op(op) = item else { continue };
            if op.gate != Gate::Id {
                continue;
            }
            let q = op.operands[0];
            let k = seen.entry(q).or_insert(0);
            if let Some((_, duration)) = next.next_if(|(at, _)| *at == i) {
                if let Some(&layer) = idles_in_layers.get(&q).and_then(|v| v.get(*k)) {
                    out.push(Delay { qubit: q, layer, duration: duration.clone() });
                }
            }
            *k += 1;
        }
        out
    }

    /// The layers: each stretch between barriers (the whole program when it has none)
    /// laid out by [`segment_layers`].
    fn barrier_layers(&self) -> Vec<Layer> {
        self.items
            .split(|item| matches!(item, Item::Barrier))
            .flat_map(|seg| {
                let ops: Vec<Op> = seg
                    .iter()
                    .filter_map(|item| match item {
                        Item::Op(op) => Some(*op),
                        Item::Barrier => None,
                    })
                    .collect();
                segment_layers(&ops, self.layout)
            })
            .collect()
    }
}

/// The angle at which rotation gate `g` (rx, ry or rz) could equal `m` up to a phase: with
/// m = e^{iφ}(cos(θ/2) I - i sin(θ/2) P), the traces of m and of i P m give e^{iφ} times
/// cos(θ/2) and sin(θ/2). The caller checks that the rotation does equal `m`.
fn rotation_angle(g: Gate, m: &Mat2) -> Option<f64> {
    let i = num_complex::Complex64::new(0.0, 1.0);
    let a = (m[0][0] + m[1][1]) / 2.0;
    let b = match g {
        Gate::Rx => i * (m[0][1] + m[1][0]) / 2.0,
        Gate::Ry => (m[1][0] - m[0][1]) / 2.0,
        Gate::Rz => i * (m[0][0] - m[1][1]) / 2.0,
        _ => return None,
    };
    let big = if a.norm() >= b.norm() { a } else { b };
    if big.norm() < 1e-12 {
        return None;
    }
    let phase = big / big.norm();
    Some(2.0 * (b / phase).re.atan2((a / phase).re))
}

/// True when an operation is a frame change for segment layering: `rz`, or a one-qubit
/// gate the layout lists as virtual.
fn is_frame_change(op: &Op, layout: &Layout) -> bool {
    op.gate.arity() == 1 && (op.gate == Gate::Rz || layout.is_virtual(op.gate))
}

/// Lays out the operations between two barriers (in program order). Timed operations go
/// as soon as possible into consecutive timed layers (a qubit's k-th timed gate in the
/// segment lands in layer k or later). Frame changes take no time: each goes just before
/// the next timed layer of its qubit (or after the last one), into that timed layer when
/// its qubit is free there, else into the timed layer before it when free, else into a
/// layer of frame changes only; consecutive `rz` on one qubit are summed. Program order on
/// every qubit is kept.
fn segment_layers(ops: &[Op], layout: &Layout) -> Vec<Layer> {
    // Operations carry their program position so each layer lists them in program order.
    type Placed = Vec<(usize, Op)>;
    // timed[k]: timed layer k; frames[k]: frame layers before timed layer k
    // (frames[timed.len()] after the last one).
    let mut timed: Vec<Placed> = Vec::new();
    let mut frames: Vec<Vec<Placed>> = vec![Vec::new()];
    let mut next: HashMap<QubitIx, usize> = HashMap::new();
    for (i, op) in ops.iter().enumerate() {
        if is_frame_change(op, layout) {
            let q = op.operands[0];
            let slot = &mut frames[next.get(&q).copied().unwrap_or(0)];
            let last_on_q =
                slot.iter_mut().rev().find_map(|l| l.iter_mut().find(|(_, o)| o.operands[0] == q));
            match last_on_q {
                Some((_, prev)) if prev.gate == Gate::Rz && op.gate == Gate::Rz => {
                    prev.angle += op.angle;
                }
                Some(_) => slot.push(vec![(i, *op)]),
                None => match slot.first_mut() {
                    Some(l) => l.push((i, *op)),
                    None => slot.push(vec![(i, *op)]),
                },
            }
            continue;
        }
        let k = op.qubits().iter().map(|q| next.get(q).copied().unwrap_or(0)).max().unwrap_or(0);
        while timed.len() <= k {
            timed.push(Vec::new());
            frames.push(Vec::new());
        }
        timed[k].push((i, *op));
        for &q in op.qubits() {
            next.insert(q, k + 1);
        }
    }
    // A frame layer joins a neighbouring timed layer (the one it precedes first, else the
    // one it follows) when they share no qubit, which keeps every qubit's order.
    let disjoint = |a: &Placed, b: &Placed| {
        let qa: Vec<QubitIx> = a.iter().flat_map(|(_, o)| o.qubits().to_vec()).collect();
        b.iter().all(|(_, o)| o.qubits().iter().all(|q| !qa.contains(q)))
    };
    let mut out: Vec<Placed> = Vec::new();
    let mut timed = timed.into_iter();
    for (k, mut slot) in frames.into_iter().enumerate() {
        let mut here = timed.next();
        if slot.len() == 1 {
            let after_prev = k > 0 && out.last().is_some_and(|l| disjoint(l, &slot[0]));
            match here.as_mut() {
                Some(t) if disjoint(t, &slot[0]) => t.append(&mut slot[0]),
                _ if after_prev => {
                    if let Some(last) = out.last_mut() {
                        last.append(&mut slot[0]);
                    }
                }
                _ => {}
            }
        }
        out.extend(slot);
        out.extend(here);
    }
    out.into_iter()
        .filter(|l| !l.is_empty())
        .map(|mut l| {
            l.sort_by_key(|&(i, _)| i);
            l.into_iter().map(|(_, op)| op).collect()
        })
        .collect()
}

/// The `#pragma` and annotation (`@name ...`) lines of a program, as (line, text). The reader
/// skips them; the commands list them once (see
/// [`crate::circuit::validate::skipped_directives_warning`]), so that nothing a control stack
/// meant by them is dropped unseen.
pub fn skipped_directives(text: &str) -> Vec<(usize, String)> {
    text.lines()
        .enumerate()
        .filter_map(|(i, l)| {
            let t = l.trim();
            (t.starts_with("#pragma") || t.starts_with('@')).then(|| (i + 1, t.to_string()))
        })
        .collect()
}

/// Imports one OpenQASM 3 program (the subset in the module doc) as circuit `id`.
/// Physical qubit `$k` is `layout.qubits[k]`; declared registers need `map`. Errors name
/// `path`, the line and the construct. Layout-level rules (couplers, native gates,
/// blocks) are left to [`super::validate`].
pub fn import(
    text: &str,
    path: &Path,
    id: &str,
    layout: &Layout,
    map: Option<&QubitMap>,
) -> Result<Circuit> {
    import_with_delays(text, path, id, layout, map).map(|(c, _)| c)
}

/// [`import`], also giving the program's `delay[...]` statements: each idle's qubit, layer
/// and duration as written (recorded for the user; durations are not modelled).
pub fn import_with_delays(
    text: &str,
    path: &Path,
    id: &str,
    layout: &Layout,
    map: Option<&QubitMap>,
) -> Result<(Circuit, Vec<Delay>)> {
    let toks = tokenize(text)
        .map_err(|(line, m)| Error::input(path, Some(line), format!("circuit {id}: {m}")))?;
    let mut p = Parser::new(toks, path, id, layout, map);
    p.run()?;
    p.finish()
}

/// Evaluates an angle written as a gate call writes it (`pi/2`, `-0.25*tau`, `1.2e-3`): the
/// `expr` of the grammar above. The error says what is allowed.
pub fn angle_expression(text: &str) -> std::result::Result<f64, String> {
    let bad = || {
        format!(
            "'{}' is not an angle (numbers, pi, tau, + - * / and parentheses, e.g. pi/2)",
            crate::error::echo(text)
        )
    };
    let toks = tokenize(text).map_err(|_| bad())?;
    // The expression grammar needs no qubits; the parser is built on a one-qubit layout.
    let layout = crate::layout::generate::chain(1);
    let mut p = Parser::new(toks, Path::new(""), "", &layout, None);
    let v = p.expr(0).map_err(|_| bad())?;
    if p.pos != p.toks.len() || !v.is_finite() {
        return Err(bad());
    }
    Ok(v)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::layout::generate::grid;
    use proptest::prelude::*;
    use std::f64::consts::PI;

    fn imp(text: &str) -> Result<Circuit> {
        import(text, Path::new("t.qasm"), "t", &grid(2, 3), None)
    }

    fn angle_of(expr: &str) -> f64 {
        let c = imp(&format!("rz({expr}) $0;\nbit c;\nc = measure $0;\n")).unwrap();
        c.layers[0][0].angle
    }

    fn err_text(text: &str) -> String {
        imp(text).unwrap_err().to_string()
    }

    #[test]
    fn exported_definitions_equal_the_gates() {
        // Each definition read back is checked against the gate's unitary (the reader fails
        // otherwise), on a layout where cx, h, s and rx are not native.
        for g in [Gate::Ecr, Gate::Iswap, Gate::SqrtIswap, Gate::Rzz] {
            let text = format!("{}\nbit c;\nc = measure $0;\n", definition(g).unwrap());
            imp(&text).unwrap_or_else(|e| panic!("{g}: {e}"));
            // A wrong body is refused.
            let wrong = text.replace("cx a, b;", "cz a, b;");
            let m = imp(&wrong).unwrap_err().to_string();
            assert!(m.contains("differs from slackmap's"), "{g}: {m}");
        }
    }

    #[test]
    fn definitions_expand_and_stdgates_translate_to_natives() {
        use std::f64::consts::FRAC_PI_2;
        let text = "OPENQASM 3.0;\ninclude \"stdgates.inc\";\nqubit[2] q;\nbit[2] c;\n\
                    gate half(t) a { rz(t/2) a; }\ngate pulse(t) a, b { half(t) a; sx b; half(-t) b; }\n\
                    reset q;\npulse(pi) $0, $1;\nbarrier;\nu3(pi/2, -pi/2, pi/2) $0;\ndelay[40ns] $1;\n\
                    barrier;\ncphase(pi) $1, $0;\nbarrier;\nz $1;\nc = measure q;\n";
        let map = QubitMap::parse("q[0]=q0, q[1]=q1").unwrap();
        let c = import(text, Path::new("t.qasm"), "t", &grid(2, 3), Some(&map)).unwrap();
        let shown: Vec<Vec<(Gate, Vec<QubitIx>)>> = c
            .layers
            .iter()
            .map(|l| l.iter().map(|o| (o.gate, o.qubits().to_vec())).collect())
            .collect();
        assert_eq!(
            shown,
            vec![
                vec![(Gate::Rz, vec![0]), (Gate::Sx, vec![1])],
                vec![(Gate::Rz, vec![1])],
                // u3(pi/2, -pi/2, pi/2) = rx(pi/2) up to phase (stdgates.inc), = sx.
                vec![(Gate::Sx, vec![0]), (Gate::Id, vec![1])],
                // cphase(pi) = cz (symmetric).
                vec![(Gate::Cz, vec![1, 0])],
                // z = rz(pi) up to phase.
                vec![(Gate::Rz, vec![1])],
            ]
        );
        assert!((c.layers[0][0].angle - FRAC_PI_2).abs() < 1e-12);
        assert!((c.layers[1][0].angle + FRAC_PI_2).abs() < 1e-12);
        assert!((c.layers[4][0].angle.abs() - PI).abs() < 1e-12);
        assert_eq!(c.measured, vec![0, 1]);
    }

    #[test]
    fn standard_gates_equal_to_the_identity_keep_their_name() {
        // rx(0) equals id and rz(0) up to phase, but it is a pulse the program asked for; a
        // translated gate equal to the identity is an explicit idle.
        let c = imp("rx(0) $0;\nbarrier;\nu3(0, 0, 0) $0;\nbit c;\nc = measure $0;\n").unwrap();
        assert_eq!(c.layers[0][0].gate, Gate::Rx);
        assert_eq!(c.layers[1][0].gate, Gate::Id);
    }

    #[test]
    fn what_no_native_expresses_in_one_layer_is_refused() {
        let m = err_text("u3(0.3, 0.2, 0.1) $0;\nbit c;\nc = measure $0;\n");
        assert!(
            m.contains("line 1:") && m.contains("u3(0.3, 0.2, 0.1) on q0 equals no native gate"),
            "{m}"
        );
        let m = err_text("cy $0, $1;\nbit[2] c;\nc[0] = measure $0;\nc[1] = measure $1;\n");
        assert!(
            m.contains("cy on q0-q1 equals no native gate") && m.contains("native there: cz"),
            "{m}"
        );
        let m = err_text("x $0;\nreset $0;\nbit c;\nc = measure $0;\n");
        assert!(m.contains("line 2:") && m.contains("reset of q0 after a gate"), "{m}");
        let m = err_text("gate g a { g a; }\ng $0;\nbit c;\nc = measure $0;\n");
        assert!(m.contains("nest more than"), "{m}");
        let m = err_text("gate g a { measure a; }\ng $0;\nbit c;\nc = measure $0;\n");
        assert!(m.contains("line 1:") && m.contains("gate calls only"), "{m}");
    }

    #[test]
    fn angle_expressions() {
        let cases = [
            ("pi/2", PI / 2.0),
            ("-3*pi/4", -3.0 * PI / 4.0),
            ("1.5e-3", 1.5e-3),
            ("π", PI),
            ("tau - pi", PI),
            ("-(pi + 1) * 2", -(PI + 1.0) * 2.0),
            ("2 * -pi", -2.0 * PI),
            (".5", 0.5),
            ("1 - 2 - 3", -4.0),
            ("8 / 2 / 2", 2.0),
            ("1E2", 100.0),
        ];
        for (e, want) in cases {
            assert!((angle_of(e) - want).abs() < 1e-12, "{e}: {} vs {want}", angle_of(e));
        }
    }

    #[test]
    fn asap_layering_without_barriers() {
        let c = imp("OPENQASM 3;\ninclude \"stdgates.inc\";\nbit[3] c;\nsx $0;\nsx $1;\ncz $0, $1;\nx $2;\nrz(pi) $2;\nc[0] = measure $0;\nc[1] = measure $1;\nc[2] = measure $2;\n").unwrap();
        assert_eq!(c.layers.len(), 2);
        assert_eq!(
            c.layers[0],
            vec![Op::one(Gate::Sx, 0), Op::one(Gate::Sx, 1), Op::one(Gate::X, 2)]
        );
        assert_eq!(c.layers[1][0], Op::two(Gate::Cz, 0, 1));
        assert_eq!(c.layers[1][1].gate, Gate::Rz);
        assert_eq!(c.measured, vec![0, 1, 2]);
    }

    #[test]
    fn barrier_layering_and_partial_barrier() {
        let c = imp("bit[2] c;\nsx $0;\nbarrier;\nbarrier;\nsx $1;\nx $0;\nbarrier $0, $1;\nsx $0;\nbarrier;\nc[0] = measure $0;\nc[1] = measure $1;\n").unwrap();
        assert_eq!(c.layers.len(), 3, "empty segments are dropped");
        assert_eq!(c.layers[0], vec![Op::one(Gate::Sx, 0)]);
        assert_eq!(c.layers[1], vec![Op::one(Gate::Sx, 1), Op::one(Gate::X, 0)]);
        assert_eq!(c.layers[2], vec![Op::one(Gate::Sx, 0)]);
    }

    #[test]
    fn segment_gates_on_one_qubit_become_consecutive_layers_with_frames_between() {
        // rz before, between and after timed gates; two rz in a row are summed.
        let c = imp("bit[2] c;\nbarrier;\nrz(0.1) $0;\nrz(0.2) $0;\nsx $0;\nrz(0.3) $0;\nsx $0;\nx $1;\ncz $0, $1;\nrz(0.4) $1;\nbarrier;\nc[0] = measure $0;\nc[1] = measure $1;\n").unwrap();
        let layout = grid(2, 3);
        let shown: Vec<Vec<(Gate, Vec<usize>)>> = c
            .layers
            .iter()
            .map(|l| l.iter().map(|o| (o.gate, o.qubits().to_vec())).collect())
            .collect();
        assert_eq!(
            shown,
            vec![
                vec![(Gate::Rz, vec![0])],
                vec![(Gate::Sx, vec![0]), (Gate::X, vec![1])],
                vec![(Gate::Rz, vec![0])],
                vec![(Gate::Sx, vec![0])],
                vec![(Gate::Cz, vec![0, 1])],
                vec![(Gate::Rz, vec![1])],
            ]
        );
        assert!((c.layers[0][0].angle - 0.3).abs() < 1e-15, "rz(0.1) rz(0.2) compose");
        let timed: Vec<bool> = (0..c.layers.len()).map(|t| c.is_timed(&layout, t)).collect();
        assert_eq!(timed, vec![false, true, false, true, true, false]);
        super::super::validate::validate_circuit(&c, &layout, true).unwrap();
    }

    #[test]
    fn both_measurement_syntaxes_order_by_bit() {
        let c = imp("bit[3] c;\nc[2] = measure $0;\nmeasure $4 -> c[0];\nc[1] = measure $5;\n")
            .unwrap();
        assert_eq!(c.measured, vec![4, 5, 0]);
        let c =
            imp("bit a;\nbit[2] b;\nmeasure $1 -> b[1];\nb[0] = measure $2;\na = measure $3;\n")
                .unwrap();
        assert_eq!(c.measured, vec![3, 2, 1], "registers in declaration order, then index");
    }

    #[test]
    fn registers_with_qubit_map() {
        let map = QubitMap::parse("q[0]=q3, q[1]=q4\n# spare\nr = q5\n").unwrap();
        let c = import(
            "qubit[2] q;\nqubit r;\nbit[3] c;\ncz q[0], q[1];\nsx r;\nc[0] = measure q[0];\nc[1] = measure q[1];\nc[2] = measure r;\n",
            Path::new("m.qasm"),
            "m",
            &grid(2, 3),
            Some(&map),
        )
        .unwrap();
        assert_eq!(c.layers[0], vec![Op::two(Gate::Cz, 3, 4), Op::one(Gate::Sx, 5)]);
        assert_eq!(c.measured, vec![3, 4, 5]);
        let e = imp("qubit[2] q;\nbit c;\nsx q[0];\nc = measure q[0];\n").unwrap_err().to_string();
        assert!(e.contains("line 3") && e.contains("no qubit map"), "{e}");
        assert!(QubitMap::parse("q[0]=q1\nq[1]=q1").unwrap_err().0 == 2);
        assert!(QubitMap::parse("q[x]=q1").is_err());
        assert!(QubitMap::parse("q[0]q1").is_err());
    }

    #[test]
    fn errors_name_line_and_construct() {
        let cases = [
            ("bit c;\nsx $0;\ndef foo(qubit a) { x a; }\n", "line 3", "definitions"),
            ("bit c;\nsx $0;\ngate foo a { x a;\n", "line 3", "never closed"),
            ("bit c;\n\nif (c == 1) x $0;\n", "line 3", "control flow"),
            ("bit c;\nfor i in [0:2] { x $0; }\n", "line 2", "loops"),
            ("bit c;\nx $0;\nreset $0;\n", "line 3", "reset of q0 after a gate"),
            ("bit c;\ndelay $0;\n", "line 2", "expected '['"),
            ("int i;\n", "line 1", "classical declarations"),
            ("gphase(pi;\n", "line 1", "after the phase"),
            ("bit c;\nctrl @ x $0, $1;\n", "line 2", "modifiers"),
            ("bit c;\nu4(1,2,3) $0;\n", "line 2", "unknown gate"),
            ("bit c;\nu3(1,2) $0;\n", "line 2", "takes 3 angles"),
            ("/* a\ncomment */ bit c;\nrz $0;\n", "line 3", "needs an angle"),
            ("bit c;\nx(0.1) $0;\n", "line 2", "takes no angle"),
            ("bit c;\ncz $0;\n", "line 2", "takes 2 qubit"),
            ("bit c;\nx $9;\n", "line 2", "$9"),
            ("bit c;\nrz(pi/0) $0;\n", "line 2", "finite"),
            ("bit c;\nrz(foo) $0;\n", "line 2", "'foo'"),
            ("bit c;\nx $0\nx $1;\n", "line 3", "expected ';'"),
            ("OPENQASM 4.0;\n", "line 1", "valid: 3, 3.0, or 2.0"),
            ("include \"other.inc\";\n", "line 1", "\"qelib1.inc\" in OpenQASM 2"),
            ("bit[2] c;\nc[0] = measure $0;\n", "line 2", "c[1] is declared but never measured"),
            ("bit[2] c;\nc[0] = measure $0;\nc[0] = measure $1;\n", "line 3", "measured twice"),
            ("bit[2] c;\nc[0] = measure $0;\nc[1] = measure $0;\n", "line 3", "measured twice"),
            ("bit c;\nc = measure $0;\nx $0;\n", "line 3", "after a measurement"),
            ("bit c;\nc[3] = measure $0;\n", "line 2", "out of range"),
            ("bit c;\n/* never closed\n", "line 2", "never closed"),
            ("bit c; x $0; # no\n", "line 1", "unexpected character"),
            ("qreg q;\n", "line 1", "qreg needs a size, like 'qreg q[2];'"),
            ("bit c;\nc = measure $0;\nreset $0;\n", "line 3", "reset after a measurement"),
            ("OPENQASM 2.0;\nbit c;\ncu3(1, 2) $0, $1;\n", "line 3", "takes 3 angles"),
        ];
        for (text, line, frag) in cases {
            let e = err_text(text);
            assert!(
                e.starts_with("t.qasm ") && e.contains(line) && e.contains(frag),
                "{text:?} -> {e}"
            );
        }
    }

    fn strip_ids(c: &Circuit) -> Vec<Vec<Op>> {
        c.layers
            .iter()
            .map(|l| l.iter().filter(|op| op.gate != Gate::Id).copied().collect())
            .collect()
    }

    fn arb_circuit() -> impl Strategy<Value = Circuit> {
        // Layers on a 2x3 grid: each qubit gets at most one gate per layer; cz on q0-q1.
        let op = (0usize..8, -10.0f64..10.0);
        let layer = proptest::collection::vec(op, 6).prop_map(|v| {
            let mut layer = Vec::new();
            let cz = v[0].0 == 7;
            if cz {
                layer.push(Op::two(Gate::Cz, 0, 1));
            }
            for (q, &(g, a)) in v.iter().enumerate() {
                if cz && q < 2 {
                    continue;
                }
                match g {
                    0 => layer.push(Op::one(Gate::Sx, q)),
                    1 => layer.push(Op::one(Gate::X, q)),
                    2 => layer.push(Op::rot(Gate::Rz, q, a)),
                    3 => layer.push(Op::rot(Gate::Rx, q, a * 1e-7)),
                    4 => layer.push(Op::one(Gate::Id, q)),
                    _ => {}
                }
            }
            layer
        });
        (
            proptest::collection::vec(layer, 1..6),
            proptest::sample::subsequence(vec![0usize, 1, 2, 3, 4, 5], 1..6),
            any::<bool>(),
        )
            .prop_map(|(layers, mut measured, rev)| {
                if rev {
                    measured.reverse();
                }
                let layers = layers.into_iter().filter(|l| !l.is_empty()).collect();
                Circuit { id: "p".into(), layers, measured }
            })
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(128))]

        #[test]
        fn export_then_import_round_trips(c in arb_circuit()) {
            let layout = grid(2, 3);
            let back = import(&export(&c, &layout), Path::new("r.qasm"), "p", &layout, None).unwrap();
            prop_assert_eq!(&back.measured, &c.measured);
            let (a, b) = (strip_ids(&c), strip_ids(&back));
            prop_assert_eq!(a.len(), b.len());
            for (la, lb) in a.iter().zip(&b) {
                prop_assert_eq!(la.len(), lb.len());
                for (x, y) in la.iter().zip(lb) {
                    prop_assert_eq!(x.gate, y.gate);
                    prop_assert_eq!(x.qubits(), y.qubits());
                    prop_assert!((x.angle - y.angle).abs() < 1e-12);
                }
            }
            for t in 0..c.layers.len() {
                prop_assert_eq!(c.is_timed(&layout, t), back.is_timed(&layout, t));
            }
        }

        #[test]
        fn arbitrary_bytes_never_panic(bytes in proptest::collection::vec(any::<u8>(), 0..300)) {
            let text = String::from_utf8_lossy(&bytes);
            let _ = imp(&text);
        }

        #[test]
        fn near_valid_mutations_never_panic(
            c in arb_circuit(),
            cuts in proptest::collection::vec((any::<prop::sample::Index>(), 0usize..12), 1..4),
        ) {
            let layout = grid(2, 3);
            let mut text: Vec<char> = export(&c, &layout).chars().collect();
            let pieces = ['(', ')', ';', '$', '9', '[', ']', '-', '>', '/', '*', 'π'];
            for (at, what) in cuts {
                let i = at.index(text.len().max(1)).min(text.len());
                if what % 2 == 0 && i < text.len() {
                    text.remove(i);
                } else {
                    text.insert(i, pieces[what]);
                }
            }
            let s: String = text.into_iter().collect();
            let _ = import(&s, Path::new("m.qasm"), "m", &layout, None);
            let deep = format!("rz({}1{}) $0;", "(".repeat(500), ")".repeat(500));
            prop_assert!(imp(&deep).is_err());
        }
    }
}
