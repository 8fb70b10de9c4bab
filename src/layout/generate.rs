//! Generated layouts (grid, chain, ring, ladder, hexagonal) with positions for drawing.
//!
//! Generated layouts use ids `q0`, `q1`, ... in row-major order, the native gate set
//! `sx`, `x`, `rz` (virtual) and `cz`, and coupler neighbourhoods. [`generate`] maps a
//! kind and a size such as `4x4` to a layout; the files in `layouts/` are its output.

use std::collections::{BTreeMap, BTreeSet};

use super::{Layout, NativeGates, Qubit};
use crate::error::{Error, Result};
use crate::gate::Gate;

/// Largest layout [`generate`] builds, so a typo in a size cannot exhaust memory.
pub const MAX_GENERATED_QUBITS: usize = 100_000;

/// The shapes [`generate`] knows.
#[derive(Copy, Clone, Debug, PartialEq, Eq)]
pub enum Kind {
    /// rows x cols square grid (size `RxC`, or `N` for N x N).
    Grid,
    /// Open chain (size `N`).
    Chain,
    /// Closed ring (size `N`, N >= 3).
    Ring,
    /// Two coupled chains (size `2xN` or `N`).
    Ladder,
    /// Honeycomb of rows x cols hexagonal cells (size `RxC`, or `N` for N x N).
    Hex,
}

impl Kind {
    /// Every kind, in the order help text lists them.
    pub const ALL: [Kind; 5] = [Kind::Grid, Kind::Chain, Kind::Ring, Kind::Ladder, Kind::Hex];

    /// The lower-case name used on the command line and in generated layout names.
    pub fn name(self) -> &'static str {
        match self {
            Kind::Grid => "grid",
            Kind::Chain => "chain",
            Kind::Ring => "ring",
            Kind::Ladder => "ladder",
            Kind::Hex => "hex",
        }
    }

    /// Looks a kind up by name.
    pub fn from_name(name: &str) -> Option<Kind> {
        Kind::ALL.into_iter().find(|k| k.name() == name)
    }
}

/// Builds a layout of `kind` from a size string (`4x4`, `8`, `2x8`). Sizes that are not
/// positive integers, shapes a kind cannot take, and layouts over
/// [`MAX_GENERATED_QUBITS`] are usage errors.
pub fn generate(kind: Kind, size: &str) -> Result<Layout> {
    let usage = |why: &str| {
        Error::Usage(format!(
            "size '{size}' does not fit a {} layout: {why} (examples: {})",
            kind.name(),
            match kind {
                Kind::Grid | Kind::Hex => "4x4, 3x5, 6",
                Kind::Chain => "8",
                Kind::Ring => "12",
                Kind::Ladder => "2x8, 8",
            }
        ))
    };
    let num = |t: &str| -> Result<usize> {
        match t.trim().parse::<usize>() {
            Ok(0) => Err(usage("sizes start at 1")),
            Ok(v) => Ok(v),
            Err(_) => Err(usage(&format!("'{t}' is not a positive whole number"))),
        }
    };
    let dims: Vec<usize> = size.split(['x', 'X']).map(num).collect::<Result<Vec<usize>>>()?;
    let too_big = |n: Option<usize>| match n {
        Some(n) if n <= MAX_GENERATED_QUBITS => Ok(()),
        _ => Err(usage(&format!("more than {MAX_GENERATED_QUBITS} qubits"))),
    };
    match (kind, dims.as_slice()) {
        (Kind::Grid, &[n]) | (Kind::Grid, &[n, _]) | (Kind::Hex, &[n]) | (Kind::Hex, &[n, _]) => {
            let (r, c) = (n, *dims.last().unwrap_or(&n));
            if kind == Kind::Grid {
                too_big(r.checked_mul(c))?;
                Ok(grid(r, c))
            } else {
                // A honeycomb of r x c cells has 2(r+1)(c+1) - 2 qubits.
                too_big(
                    r.checked_add(1).and_then(|a| a.checked_mul(c.checked_add(1)?)?.checked_mul(2)),
                )?;
                Ok(hex(r, c))
            }
        }
        (Kind::Chain, &[n]) => {
            too_big(Some(n))?;
            Ok(chain(n))
        }
        (Kind::Ring, &[n]) => {
            if n < 3 {
                return Err(usage("a ring needs at least 3 qubits"));
            }
            too_big(Some(n))?;
            Ok(ring(n))
        }
        (Kind::Ladder, &[n]) | (Kind::Ladder, &[2, n]) => {
            too_big(n.checked_mul(2))?;
            Ok(ladder(n))
        }
        (Kind::Ladder, &[_, _]) => Err(usage("a ladder has exactly 2 rows")),
        (Kind::Chain | Kind::Ring, _) => Err(usage("give one number")),
        _ => Err(usage("give one number or two joined by 'x'")),
    }
}

/// The default native gate set of generated layouts.
pub fn default_gates() -> NativeGates {
    NativeGates::simple(vec![Gate::Sx, Gate::X, Gate::Rz], vec![Gate::Rz], Gate::Cz)
}

fn build(name: String, positions: Vec<[f64; 2]>, couplers: Vec<(usize, usize)>) -> Layout {
    let qubits = positions
        .into_iter()
        .enumerate()
        .map(|(i, p)| Qubit { id: format!("q{i}"), position: Some(p) })
        .collect();
    // Lower index first, so a directed native swapped in later runs from the lower index.
    let couplers = couplers
        .into_iter()
        .map(|(a, b)| (format!("q{}", a.min(b)), format!("q{}", a.max(b))))
        .collect();
    Layout::new(name, qubits, couplers, default_gates(), 1, Vec::new())
        .expect("generated layouts are valid by construction")
}

/// A rows x cols grid, couplers between horizontal and vertical neighbours.
pub fn grid(rows: usize, cols: usize) -> Layout {
    let rows = rows.max(1);
    let cols = cols.max(1);
    let mut pos = Vec::new();
    let mut c = Vec::new();
    for r in 0..rows {
        for k in 0..cols {
            let i = r * cols + k;
            pos.push([k as f64, r as f64]);
            if k + 1 < cols {
                c.push((i, i + 1));
            }
            if r + 1 < rows {
                c.push((i, i + cols));
            }
        }
    }
    build(format!("grid-{rows}x{cols}"), pos, c)
}

/// An open chain of n qubits.
pub fn chain(n: usize) -> Layout {
    let n = n.max(1);
    let pos = (0..n).map(|i| [i as f64, 0.0]).collect();
    build(format!("chain-{n}"), pos, (1..n).map(|i| (i - 1, i)).collect())
}

/// A closed ring of n >= 3 qubits, drawn on a circle.
pub fn ring(n: usize) -> Layout {
    let n = n.max(3);
    let radius = n as f64 / (2.0 * std::f64::consts::PI);
    let pos = (0..n)
        .map(|i| {
            let t = 2.0 * std::f64::consts::PI * i as f64 / n as f64;
            [radius * t.cos(), radius * t.sin()]
        })
        .collect();
    build(format!("ring-{n}"), pos, (0..n).map(|i| (i, (i + 1) % n)).collect())
}

/// A 2 x n ladder.
pub fn ladder(n: usize) -> Layout {
    let mut l = grid(2, n);
    l.name = format!("ladder-2x{}", n.max(1));
    l
}

/// Rounds a drawing coordinate to 6 decimals so generated files stay short and readable.
fn tidy(v: f64) -> f64 {
    let r = (v * 1e6).round() / 1e6;
    if r == 0.0 {
        0.0
    } else {
        r
    }
}

/// The cells of a rows x cols honeycomb in brick-wall form, each as its six vertices
/// (line, column). Cell j of cell-row i spans columns c..=c+2 with c = 2j + (i mod 2) on
/// lines i and i+1, so neighbouring rows are offset by one column like courses of bricks.
fn hex_cells(rows: usize, cols: usize) -> Vec<[(usize, usize); 6]> {
    let mut cells = Vec::with_capacity(rows * cols);
    for i in 0..rows {
        for j in 0..cols {
            let c = 2 * j + i % 2;
            cells.push([
                (i, c),
                (i, c + 1),
                (i, c + 2),
                (i + 1, c + 2),
                (i + 1, c + 1),
                (i + 1, c),
            ]);
        }
    }
    cells
}

/// A honeycomb (degree-3 hexagonal lattice) of rows x cols cells: 2(rows+1)(cols+1) - 2
/// qubits, every qubit of degree 2 or 3, interior qubits of degree 3. Qubits are numbered
/// along each line of the brick wall, top to bottom, and drawn as regular hexagons of
/// unit edge.
pub fn hex(rows: usize, cols: usize) -> Layout {
    let rows = rows.max(1);
    let cols = cols.max(1);
    let cells = hex_cells(rows, cols);
    let vertices: BTreeSet<(usize, usize)> = cells.iter().flatten().copied().collect();
    let index: BTreeMap<(usize, usize), usize> =
        vertices.iter().enumerate().map(|(i, &v)| (v, i)).collect();
    let mut edges = BTreeSet::new();
    for cell in &cells {
        for k in 0..6 {
            let (a, b) = (index[&cell[k]], index[&cell[(k + 1) % 6]]);
            edges.insert((a.min(b), a.max(b)));
        }
    }
    let half_sqrt3 = 3f64.sqrt() / 2.0;
    let pos = vertices
        .iter()
        .map(|&(line, col)| {
            // A vertex whose vertical coupler goes down (to line+1) sits a quarter edge
            // lower, one going up a quarter higher: zigzag rows of regular hexagons.
            let down = col % 2 == line % 2;
            let y = 1.5 * line as f64 + if down { 0.25 } else { -0.25 };
            [tidy(half_sqrt3 * col as f64), tidy(y)]
        })
        .collect();
    build(format!("hex-{rows}x{cols}"), pos, edges.into_iter().collect())
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::path::PathBuf;

    fn degrees(l: &Layout) -> Vec<usize> {
        (0..l.n_qubits()).map(|q| l.coupled(q).len()).collect()
    }

    #[test]
    fn hex_is_a_honeycomb() {
        for (r, c) in [(1, 1), (1, 4), (2, 2), (3, 3), (4, 5)] {
            let l = hex(r, c);
            let (v, e) = (l.n_qubits(), l.couplers.len());
            // Euler's formula for a connected plane graph: V - E + F = 2, with the r*c
            // hexagons plus the outer face as faces.
            assert_eq!(v as i64 - e as i64 + (r * c + 1) as i64, 2, "{r}x{c}");
            assert_eq!(v, 2 * (r + 1) * (c + 1) - 2, "{r}x{c}");
            assert!(l.is_connected());
            let d = degrees(&l);
            assert!(d.iter().all(|&k| (2..=3).contains(&k)), "{r}x{c}: {d:?}");
            // A vertex shared by three cells is interior and must have degree 3.
            let cells = hex_cells(r, c);
            let ix: BTreeMap<(usize, usize), usize> = cells
                .iter()
                .flatten()
                .copied()
                .collect::<BTreeSet<_>>()
                .into_iter()
                .enumerate()
                .map(|(i, v)| (v, i))
                .collect();
            for (&vert, &q) in &ix {
                let shared = cells.iter().filter(|cell| cell.contains(&vert)).count();
                if shared == 3 {
                    assert_eq!(d[q], 3, "{r}x{c} vertex {vert:?}");
                }
            }
            // Every cell is a 6-cycle of couplers.
            for cell in &cells {
                for k in 0..6 {
                    assert!(l.coupler(ix[&cell[k]], ix[&cell[(k + 1) % 6]]).is_some());
                }
            }
        }
        assert!(degrees(&hex(3, 3)).iter().filter(|&&k| k == 3).count() >= 12);
    }

    #[test]
    fn hex_couplers_have_unit_length() {
        let l = hex(3, 4);
        for &(a, b) in &l.couplers {
            let (p, q) = (l.qubits[a].position.unwrap(), l.qubits[b].position.unwrap());
            let len = ((p[0] - q[0]).powi(2) + (p[1] - q[1]).powi(2)).sqrt();
            assert!((len - 1.0).abs() < 1e-5, "{a}-{b}: {len}");
        }
    }

    #[test]
    fn generate_parses_sizes() {
        assert_eq!(generate(Kind::Grid, "4x3").unwrap().n_qubits(), 12);
        assert_eq!(generate(Kind::Grid, "5").unwrap().n_qubits(), 25);
        assert_eq!(generate(Kind::Chain, "8").unwrap().couplers.len(), 7);
        assert_eq!(generate(Kind::Ring, "12").unwrap().couplers.len(), 12);
        assert_eq!(generate(Kind::Ladder, "2x8").unwrap().name, "ladder-2x8");
        assert_eq!(generate(Kind::Ladder, "8").unwrap().couplers.len(), 22);
        assert_eq!(generate(Kind::Hex, "3x3").unwrap().n_qubits(), 30);
        for (k, s, want) in [
            (Kind::Grid, "0x4", "sizes start at 1"),
            (Kind::Grid, "4y4", "not a positive whole number"),
            (Kind::Grid, "4x4x4", "one number or two"),
            (Kind::Chain, "2x8", "give one number"),
            (Kind::Ring, "2", "at least 3"),
            (Kind::Ladder, "3x8", "exactly 2 rows"),
            (Kind::Grid, "1000x1000", "more than 100000"),
            (Kind::Hex, "99999999999999999999", "not a positive whole number"),
            (Kind::Hex, "4000000000x4000000000", "more than"),
        ] {
            let m = generate(k, s).unwrap_err().to_string();
            assert!(m.contains(want), "{s}: {m}");
        }
    }

    /// The files in layouts/ and the command that regenerates each.
    const SHIPPED: [(&str, Kind, &str); 7] = [
        ("grid-4x4.toml", Kind::Grid, "4x4"),
        ("grid-12x12.toml", Kind::Grid, "12x12"),
        ("grid-32x32.toml", Kind::Grid, "32x32"),
        ("chain-8.toml", Kind::Chain, "8"),
        ("ring-12.toml", Kind::Ring, "12"),
        ("ladder-2x8.toml", Kind::Ladder, "2x8"),
        ("hex-3x3.toml", Kind::Hex, "3x3"),
    ];

    #[test]
    fn shipped_layouts_match_the_generators() {
        let dir = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("layouts");
        for (file, kind, size) in SHIPPED {
            let path = dir.join(file);
            let want = crate::layout::to_toml(&generate(kind, size).unwrap());
            let have = std::fs::read_to_string(&path).unwrap_or_default();
            assert!(
                have == want,
                "{file} differs from the generator; regenerate with \
                 `slackmap layout new {} {size} --out layouts/{file}`",
                kind.name()
            );
            let back = crate::layout::read_layout(&path).unwrap();
            assert_eq!(back.name, file.trim_end_matches(".toml"));
            assert_eq!(back.n_qubits(), generate(kind, size).unwrap().n_qubits());
        }
        let big = crate::layout::read_layout(&dir.join("grid-32x32.toml")).unwrap();
        assert_eq!((big.n_qubits(), big.couplers.len()), (1024, 2 * 32 * 31));
    }
}
