//! The pictures and the HTML page, checked from outside: the SVGs parse as XML and show every
//! flagged edge, the legend and the zero cells; the page has one row per edge, no external
//! reference and escapes ids. The audit fixtures are built here and compared with the files.

use std::collections::HashMap;
use std::path::{Path, PathBuf};

use proptest::prelude::*;
use sha2::{Digest, Sha256};
use slackmap::report::svg::{self, Doc};
use slackmap::report::{
    self, html, AuditReport, Confidence, DataSummary, DepthPoint, DirectedReport, EdgeReport,
    FitSummary, InputFile, IntrinsicReport, KindValue, LayoutSummary, Parameters, RankConfidence,
    ReadoutReport, ReasonCode, Render, Verdict, WarningReport,
};

/// A flagged edge of a fixture: a, b, verdict, X(a <- b), X(b <- a), confounding partner.
type Flag = (usize, usize, Verdict, f64, f64, Option<usize>);

/// Deterministic value in [0, 1) from two indices (a small integer hash, no generator needed).
fn mix(i: usize, j: usize, salt: u64) -> f64 {
    let mut h = (i as u64).wrapping_mul(0x9e37_79b9_7f4a_7c15)
        ^ (j as u64).wrapping_mul(0xc2b2_ae3d_27d4_eb4f)
        ^ salt.wrapping_mul(0x1656_67b1_9e37_79f9);
    h ^= h >> 31;
    h = h.wrapping_mul(0xbf58_476d_1ce4_e5b9);
    h ^= h >> 29;
    (h >> 11) as f64 / (1u64 << 53) as f64
}

fn sha(s: &str) -> String {
    Sha256::digest(s.as_bytes()).iter().map(|b| format!("{b:02x}")).collect()
}

fn confidence(score: f64, salt: usize) -> Confidence {
    let reps: Vec<f64> = (0..8).map(|k| score * (0.7 + 0.6 * mix(salt, k, 7))).collect();
    Confidence {
        level: 0.95,
        method: "basic".into(),
        low_tvd_per_layer: score * 0.72,
        high_tvd_per_layer: score * 1.31,
        upper_bound_tvd_per_layer: score * 1.25,
        lower_bound_tvd_per_layer: score * 0.78,
        median_tvd_per_layer: score * 1.01,
        p_positive: 1.0,
        score_replicates_tvd_per_layer: reps.clone(),
        replicates_tvd_per_layer: reps,
    }
}

/// A made-up depth profile of a direction with score `s`: the prediction decays with depth,
/// the observed value with the aggressor active falls below it by about s per layer.
fn depth_profile(s: f64) -> Vec<DepthPoint> {
    let mut v = Vec::new();
    for active in [false, true] {
        for (k, layers) in [2.0, 8.0, 32.0, 128.0].into_iter().enumerate() {
            let predicted = 0.5 + 0.48 * (1.0f64 - 2e-3).powf(layers);
            let observed = predicted - if active { s * layers * 0.5 } else { 1e-4 * k as f64 };
            v.push(DepthPoint {
                timed_layers: layers,
                aggressor_active: active,
                rows: 12 + k,
                observed,
                predicted,
            });
        }
    }
    v
}

/// A made-up audit of a rows x cols grid (ids q0.. row-major, coupler neighbourhoods) with the
/// given flagged edges and small background scores elsewhere, about 40% of them exactly zero.
fn grid_audit(rows: usize, cols: usize, flags: &[Flag]) -> AuditReport {
    let n = rows * cols;
    let id = |i: usize| format!("q{i}");
    let mut pairs = Vec::new();
    for r in 0..rows {
        for c in 0..cols {
            let i = r * cols + c;
            if c + 1 < cols {
                pairs.push((i, i + 1));
            }
            if r + 1 < rows {
                pairs.push((i, i + cols));
            }
        }
    }
    let background = |v: usize, a: usize| {
        let u = mix(v, a, 1);
        if u < 0.4 {
            0.0
        } else {
            2e-5 + 3.5e-4 * mix(v, a, 2)
        }
    };
    let flag_of = |a: usize, b: usize| flags.iter().find(|f| (f.0, f.1) == (a, b));
    let mut edges = Vec::new();
    let mut directed = Vec::new();
    for &(a, b) in &pairs {
        let (ab, ba, verdict, partner) = match flag_of(a, b) {
            Some(f) => (f.3, f.4, f.2, f.5),
            None => (background(a, b), background(b, a), Verdict::Clean, None),
        };
        let score = ab.max(ba);
        let flagged = verdict != Verdict::Clean;
        let limit = 4e-4 + 1e-4 * mix(a, b, 3);
        let conf =
            if flagged || mix(a, b, 4) < 0.5 { Some(confidence(score, a * n + b)) } else { None };
        let reason = match verdict {
            Verdict::Recalibrate => {
                "detected; interval lower end above the action threshold".to_string()
            }
            Verdict::Watch => "detected; below the action threshold".to_string(),
            Verdict::Confounded => {
                format!("attribution minimum is zero; {} could carry it", id(partner.unwrap_or(a)))
            }
            Verdict::NotTested => "no null replicates were run".to_string(),
            Verdict::Clean if score > 0.0 => "below the detection limit".to_string(),
            Verdict::Clean => "no context slack".to_string(),
        };
        edges.push(EdgeReport {
            a: id(a),
            b: id(b),
            coupled: true,
            score_tvd_per_layer: score,
            estimate_tvd_per_layer: score,
            sensitivity_tvd_per_layer: 5e-4,
            a_from_b_tvd_per_layer: ab,
            b_from_a_tvd_per_layer: ba,
            rank: None,
            detection_limit_tvd_per_layer: limit,
            p_value: if flagged { 0.002 } else { 0.2 + 0.8 * mix(a, b, 5) },
            attribution_min_tvd_per_layer: if verdict == Verdict::Confounded {
                0.0
            } else {
                score * 0.9
            },
            attribution_max_tvd_per_layer: score * 1.1,
            supporting_rows: if flagged { 24 + a % 7 } else { (score > 0.0) as usize * 2 },
            supporting_circuits: if flagged { 12 + b % 5 } else { (score > 0.0) as usize },
            leave_one_out_tvd_per_layer: score * 0.93,
            most_influential_circuit: (score > 0.0).then(|| format!("c{}", (a * 7 + b) % 97)),
            confounded_with: partner.map(id).into_iter().collect(),
            rank_confidence: conf.as_ref().map(|_| RankConfidence {
                median_rank: 1.0,
                rank_low: 1,
                rank_high: 3,
                top_k: 5,
                p_top_k: 0.9,
            }),
            confidence: conf.clone(),
            parametric_limit_tvd_per_layer: None,
            parametric_p_value: None,
            verdict,
            reason_code: match verdict {
                Verdict::Recalibrate => ReasonCode::AboveThreshold,
                Verdict::Watch => ReasonCode::BelowThreshold,
                Verdict::Confounded => ReasonCode::Shared,
                Verdict::NotTested => ReasonCode::NoNull,
                Verdict::Clean if score > 0.0 => ReasonCode::InNull,
                Verdict::Clean => ReasonCode::NoSlack,
            },
            reason,
        });
        for (v, g, s) in [(a, b, ab), (b, a, ba)] {
            directed.push(DirectedReport {
                victim: id(v),
                aggressor: id(g),
                score_tvd_per_layer: s,
                estimate_tvd_per_layer: s,
                sensitivity_tvd_per_layer: 5e-4,
                driven_tvd_per_layer: s * 0.6,
                idle_tvd_per_layer: s * 0.4,
                attribution_min_tvd_per_layer: if verdict == Verdict::Confounded {
                    0.0
                } else {
                    s * 0.9
                },
                attribution_max_tvd_per_layer: s * 1.1,
                detection_limit_tvd_per_layer: limit,
                p_value: if flagged { 0.002 } else { 0.3 },
                detected: flagged,
                corroboration_p_value: None,
                supporting_rows: (s > 0.0) as usize * 5,
                supporting_circuits: (s > 0.0) as usize * 3,
                isolated_tvd_per_layer: 0.0,
                top_supporting_circuits: Vec::new(),
                leave_one_out_tvd_per_layer: s * 0.93,
                most_influential_circuit: (s > 0.0).then(|| format!("c{}", (v * 5 + g) % 97)),
                per_kind: vec![
                    KindValue { kind: format!("sx@{}", id(v)), value: s * 0.5 },
                    KindValue { kind: format!("id@{}", id(v)), value: s * 0.3 },
                ],
                depth_profile: if flagged { depth_profile(s) } else { Vec::new() },
                confidence: conf.as_ref().map(|_| confidence(s, v * n + g)),
                parametric_limit_tvd_per_layer: None,
                parametric_p_value: None,
            });
        }
    }
    // Ranked first by score, then the pairs with nothing found, as the audit orders them.
    edges.sort_by(|x, y| y.score_tvd_per_layer.total_cmp(&x.score_tvd_per_layer));
    let mut rank = 0;
    for e in edges.iter_mut() {
        if e.score_tvd_per_layer > 0.0 {
            rank += 1;
            e.rank = Some(rank);
        }
    }
    let mut intrinsic = Vec::new();
    for q in 0..n {
        for (g, occ) in [("sx", 4000u64), ("x", 1500), ("id", 9000)] {
            let u = mix(q, g.len(), 6);
            intrinsic.push(IntrinsicReport {
                confidence: None,
                kind: format!("{g}@{}", id(q)),
                occurrences: occ + (q as u64 * 37) % 500,
                reference_occurrences: occ / 3,
                slack_tvd_per_occurrence: if u < 0.3 { 0.0 } else { 4e-4 * u * u },
                estimate_tvd_per_occurrence: if u < 0.3 { 0.0 } else { 4e-4 * u * u },
                fitted_error_rate: 2e-4 + 8e-4 * mix(q, g.len(), 8),
                fitted_on_all_rows: false,
                qubits: vec![id(q)],
            });
        }
    }
    for &(a, b) in &pairs {
        intrinsic.push(IntrinsicReport {
            confidence: None,
            kind: format!("cz@{}-{}", id(a), id(b)),
            occurrences: 2000,
            reference_occurrences: 600,
            slack_tvd_per_occurrence: 1e-3 * mix(a, b, 9),
            estimate_tvd_per_occurrence: 1e-3 * mix(a, b, 9),
            fitted_error_rate: 6e-3 + 4e-3 * mix(a, b, 10),
            fitted_on_all_rows: a == 0 && b == 1,
            qubits: vec![id(a), id(b)],
        });
    }
    let readout = (0..n)
        .map(|q| ReadoutReport {
            qubit: id(q),
            p1_given_0: 0.01 + 0.02 * mix(q, 0, 11),
            p0_given_1: 0.02 + 0.03 * mix(q, 0, 12),
            slack_tvd: if mix(q, 0, 13) < 0.7 { 0.0 } else { 2e-3 * mix(q, 0, 14) },
        })
        .collect();
    let name = format!("grid-{rows}x{cols}");
    AuditReport {
        schema: report::SCHEMA,
        tool_version: "0.1.0".into(),
        label: Some(format!("fixture {rows}x{cols}, cooldown 1")),
        created: Some("2026-01-01T00:00:00Z".into()),
        caution: report::CAUTION.into(),
        layout: LayoutSummary {
            name: name.clone(),
            qubits: (0..n).map(id).collect(),
            positions: (0..n).map(|i| Some([(i % cols) as f64, (i / cols) as f64])).collect(),
            couplers: pairs.iter().map(|&(a, b)| [id(a), id(b)]).collect(),
            neighbour_pairs: pairs.len(),
        },
        inputs: vec![
            InputFile {
                role: "layout".into(),
                path: format!("{name}.toml"),
                sha256: sha(&format!("{name} layout")),
            },
            InputFile {
                role: "circuits".into(),
                path: "circuits.json".into(),
                sha256: sha(&format!("{name} circuits")),
            },
            InputFile {
                role: "counts".into(),
                path: "counts.csv".into(),
                sha256: sha(&format!("{name} counts")),
            },
        ],
        parameters: Parameters {
            model: "pauli".into(),
            alpha: 0.05,
            action_threshold_tvd_per_layer: 1e-3,
            null_replicates: 200,
            seed: 7,
            bit_order: "as-measured".into(),
            replicates: 8,
            resample: "shots".into(),
            level: 0.95,
        },
        data: DataSummary {
            circuits: 40 * n,
            circuits_with_counts: 40 * n,
            rows: 120 * n,
            reference_rows: 30 * n,
            shots_min: 1000,
            shots_median: 2000,
            shots_max: 4000,
            shots_total: 2000 * 40 * n as u64,
        },
        fit: FitSummary {
            reference_llr: 30.0 * n as f64 + 12.0,
            reference_dof: 30.0 * n as f64,
            reference_excess_sigma: 12.0 / (60.0 * n as f64).sqrt(),
            all_llr_before: 140.0 * n as f64,
            all_dof: 120.0 * n as f64,
            all_excess_sigma_before: 20.0 * n as f64 / (240.0 * n as f64).sqrt(),
            all_llr_after: 121.0 * n as f64,
            all_excess_sigma_after: 1.0 * n as f64 / (240.0 * n as f64).sqrt(),
            row_threshold_llr: 18.5,
            rows_needing_slack: 4 * n,
            unidentified: vec![],
            not_converged: vec![],
        },
        edges,
        directed,
        intrinsic,
        readout,
        warnings: vec![WarningReport {
            code: "few-reference-rows".into(),
            message: "q0-q1 has fewer than 10 reference rows".into(),
            hint: "add reference circuits on q0-q1".into(),
        }],
        gates: Default::default(),
        rows: Vec::new(),
    }
}

fn fixture_4x4() -> AuditReport {
    grid_audit(
        4,
        4,
        &[
            (5, 6, Verdict::Recalibrate, 2.4e-3, 3e-4, None),
            (10, 14, Verdict::Recalibrate, 0.0, 1.6e-3, None),
            (9, 10, Verdict::Watch, 7e-4, 1e-4, None),
            (1, 5, Verdict::Confounded, 4.5e-4, 0.0, Some(4)),
        ],
    )
}

fn fixture_12x12() -> AuditReport {
    grid_audit(
        12,
        12,
        &[
            (13, 14, Verdict::Recalibrate, 3.1e-3, 4e-4, None),
            (50, 62, Verdict::Recalibrate, 5e-4, 1.9e-3, None),
            (100, 101, Verdict::Recalibrate, 1.4e-3, 1.2e-3, None),
            (30, 31, Verdict::Watch, 8e-4, 0.0, None),
            (77, 89, Verdict::Watch, 2e-4, 6e-4, None),
            (120, 121, Verdict::Confounded, 5e-4, 1e-4, Some(109)),
        ],
    )
}

fn fixture_dir() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures/audit")
}

fn fixtures() -> Vec<(&'static str, AuditReport)> {
    vec![("grid-4x4.json", fixture_4x4()), ("grid-12x12.json", fixture_12x12())]
}

#[test]
fn fixtures_are_the_builders_output_and_parse() {
    for (name, built) in fixtures() {
        let path = fixture_dir().join(name);
        let bytes = report::json::AuditJson.render(&built);
        if std::env::var_os("SLACKMAP_REGENERATE_FIXTURES").is_some() {
            std::fs::write(&path, &bytes).expect("write fixture");
        }
        let read = report::json::read(&path).expect("fixture parses as an audit");
        assert_eq!(read.edges.len(), built.edges.len(), "{name}");
        let on_disk = std::fs::read(&path).expect("fixture exists");
        assert!(
            on_disk == bytes,
            "{name} differs from its builder: rerun with SLACKMAP_REGENERATE_FIXTURES=1"
        );
    }
}

fn attr<'a>(n: &roxmltree::Node<'a, 'a>, name: &str) -> &'a str {
    n.attribute(name).unwrap_or("")
}

fn title_of(n: &roxmltree::Node) -> String {
    n.children().find(|c| c.has_tag_name("title")).and_then(|t| t.text()).unwrap_or("").to_string()
}

fn has_class(n: &roxmltree::Node, class: &str) -> bool {
    attr(n, "class").split_whitespace().any(|c| c == class)
}

#[test]
fn adjacency_shows_every_flagged_edge_legend_and_zero_cells() {
    for (name, r) in fixtures() {
        let text = svg::adjacency(&r, Doc::Standalone);
        let doc = roxmltree::Document::parse(&text).unwrap_or_else(|e| panic!("{name}: {e}"));
        let cells: Vec<_> =
            doc.descendants().filter(|n| n.has_tag_name("g") && has_class(n, "cell")).collect();
        assert_eq!(cells.len(), r.directed.len(), "{name}: one cell per directed pair");
        let by_pair: HashMap<(&str, &str), &roxmltree::Node> = cells
            .iter()
            .map(|c| ((attr(c, "data-victim"), attr(c, "data-aggressor")), c))
            .collect();
        for e in r.edges.iter().filter(|e| e.verdict != Verdict::Clean) {
            for (v, a) in [(e.a.as_str(), e.b.as_str()), (e.b.as_str(), e.a.as_str())] {
                let c = by_pair.get(&(v, a)).unwrap_or_else(|| panic!("{name}: no cell {v}<-{a}"));
                assert_eq!(attr(c, "data-verdict"), e.verdict.word());
                assert!(title_of(c).contains(e.verdict.word()), "{name}: {}", title_of(c));
            }
            if e.confidence.is_some() {
                let c = by_pair[&(e.a.as_str(), e.b.as_str())];
                assert!(title_of(c).contains("95% interval"), "{}", title_of(c));
            }
        }
        // One mark per flagged edge, of the verdict's own shape.
        for v in [Verdict::Recalibrate, Verdict::Watch, Verdict::Confounded] {
            let want = r.edges.iter().filter(|e| e.verdict == v).count();
            let got = doc
                .descendants()
                .filter(|n| has_class(n, &format!("mark-{}", v.word())))
                .filter(|n| n.ancestors().any(|a| has_class(&a, "marks")))
                .count();
            assert_eq!(got, want, "{name}: marks for {}", v.word());
        }
        // Zero cells are hatched; positive cells are plain colours.
        let mut zeros = 0;
        for d in &r.directed {
            let c = by_pair[&(d.victim.as_str(), d.aggressor.as_str())];
            let rect = c.children().find(|n| n.has_tag_name("rect")).expect("cell rect");
            if d.score_tvd_per_layer == 0.0 {
                zeros += 1;
                assert!(has_class(c, "zero"));
                assert_eq!(attr(&rect, "fill"), "url(#adj-hatch)");
            } else {
                assert!(attr(&rect, "fill").starts_with('#'), "{}", attr(&rect, "fill"));
            }
        }
        assert!(zeros > 0, "{name}: the fixture has zero cells");
        let legend = doc.descendants().find(|n| has_class(n, "legend")).expect("legend");
        let ticks = legend.descendants().filter(|n| has_class(n, "tick")).count();
        assert!((4..=6).contains(&ticks), "{name}: {ticks} ticks");
        assert!(legend.descendants().any(|n| n.text() == Some("x1e-3 TVD per layer")));
        assert!(legend.descendants().any(|n| has_class(&n, "zero-key")));
        assert_eq!(legend.descendants().filter(|n| has_class(n, "legend-mark")).count(), 4);
    }
}

#[test]
fn layout_draws_two_halves_per_pair_and_marks_flagged_edges() {
    for (name, r) in fixtures() {
        let text = svg::layout(&r, Doc::Standalone);
        let doc = roxmltree::Document::parse(&text).unwrap_or_else(|e| panic!("{name}: {e}"));
        let edges: Vec<_> =
            doc.descendants().filter(|n| n.has_tag_name("g") && has_class(n, "edge")).collect();
        assert_eq!(edges.len(), r.edges.len(), "{name}");
        for g in &edges {
            let e = r
                .edges
                .iter()
                .find(|e| e.a == attr(g, "data-a") && e.b == attr(g, "data-b"))
                .expect("known edge");
            let halves: Vec<_> = g.children().filter(|n| has_class(n, "half")).collect();
            assert_eq!(halves.len(), 2, "{name}");
            // The first half starts at a and carries X(a <- b).
            for (h, s) in halves.iter().zip([e.a_from_b_tvd_per_layer, e.b_from_a_tvd_per_layer]) {
                assert_eq!(has_class(h, "zero"), s == 0.0, "{name} {}-{}", e.a, e.b);
                assert_eq!(h.attribute("stroke-dasharray").is_some(), s == 0.0);
            }
            let marked = g.descendants().any(|n| has_class(&n, "mark"));
            assert_eq!(marked, e.verdict != Verdict::Clean, "{name} {}-{}", e.a, e.b);
            assert!(title_of(g).contains(e.verdict.word()));
        }
        // Wider half for the larger score.
        let e =
            r.edges.iter().find(|e| e.verdict == Verdict::Recalibrate).expect("a recalibrate edge");
        let g = edges
            .iter()
            .find(|g| attr(g, "data-a") == e.a && attr(g, "data-b") == e.b)
            .expect("drawn");
        let w: Vec<f64> = g
            .children()
            .filter(|n| has_class(n, "half"))
            .map(|h| attr(&h, "stroke-width").parse().expect("width"))
            .collect();
        assert_eq!(w[0] > w[1], e.a_from_b_tvd_per_layer > e.b_from_a_tvd_per_layer);
        let qubits = doc.descendants().filter(|n| has_class(n, "qubit")).count();
        assert_eq!(qubits, r.layout.qubits.len());
        for q in &r.layout.qubits {
            assert!(
                doc.descendants().any(|n| n.has_tag_name("text") && n.text() == Some(q.as_str())),
                "{name}: label {q}"
            );
        }
        let legend = doc.descendants().find(|n| has_class(n, "legend")).expect("legend");
        let ticks = legend.descendants().filter(|n| has_class(n, "tick")).count();
        assert!((7..=12).contains(&ticks), "{name}: {ticks} ticks on two scales");
    }
}

#[test]
fn fonts_and_strokes_scale_with_the_layout() {
    let font = |r: &AuditReport| -> f64 {
        let text = svg::layout(r, Doc::Standalone);
        let doc = roxmltree::Document::parse(&text).expect("xml");
        let q = doc.descendants().find(|n| has_class(n, "qubit")).expect("qubit");
        let t = q.children().find(|n| n.has_tag_name("text")).expect("label");
        t.attribute("font-size").and_then(|v| v.parse().ok()).expect("size")
    };
    let (small, large) = (font(&fixture_4x4()), font(&fixture_12x12()));
    // Readable at both sizes: no label under 8 px, none over 14 px.
    assert!((8.0..=14.0).contains(&small) && (8.0..=14.0).contains(&large), "{small} {large}");
}

#[test]
fn big_layouts_draw_only_flagged_edges_and_say_so() {
    let r = grid_audit(
        18,
        18,
        &[(0, 1, Verdict::Recalibrate, 2e-3, 0.0, None), (40, 58, Verdict::Watch, 6e-4, 0.0, None)],
    );
    assert!(r.layout.qubits.len() > svg::FULL_LAYOUT_UP_TO);
    let text = svg::layout(&r, Doc::Standalone);
    let doc = roxmltree::Document::parse(&text).expect("xml");
    let drawn: Vec<_> =
        doc.descendants().filter(|n| n.has_tag_name("g") && has_class(n, "edge")).collect();
    assert_eq!(drawn.len(), 2);
    let note =
        doc.descendants().find(|n| has_class(n, "note")).and_then(|n| n.text()).unwrap_or("");
    assert!(note.contains("only the 2 flagged pairs"), "{note}");
}

#[test]
fn missing_positions_fall_back_to_a_circle() {
    let mut r = fixture_4x4();
    r.layout.positions = vec![None; r.layout.qubits.len()];
    let text = svg::layout(&r, Doc::Standalone);
    let doc = roxmltree::Document::parse(&text).expect("xml");
    let mut centres = Vec::new();
    for c in doc
        .descendants()
        .filter(|n| n.has_tag_name("circle") && n.parent().is_some_and(|p| has_class(&p, "qubit")))
    {
        let x: f64 = attr(&c, "cx").parse().expect("cx");
        let y: f64 = attr(&c, "cy").parse().expect("cy");
        centres.push((x, y));
    }
    assert_eq!(centres.len(), 16);
    let (mx, my) = (
        centres.iter().map(|c| c.0).sum::<f64>() / 16.0,
        centres.iter().map(|c| c.1).sum::<f64>() / 16.0,
    );
    let radii: Vec<f64> =
        centres.iter().map(|c| ((c.0 - mx).powi(2) + (c.1 - my).powi(2)).sqrt()).collect();
    let r0 = radii[0];
    assert!(r0 > 10.0 && radii.iter().all(|r| (r - r0).abs() < 0.5), "{radii:?}");
}

fn edge_rows(page: &str) -> usize {
    page.matches("<tr class=\"edge verdict-").count()
}

#[test]
fn html_has_one_row_per_edge_and_nothing_external() {
    for (name, r) in fixtures() {
        let page = html::html(&r);
        assert_eq!(edge_rows(&page), r.edges.len(), "{name}");
        let lower = page.to_lowercase();
        for bad in ["http://", "https://", "<link", "@import", " src=", "//cdn", "file://"] {
            assert!(!lower.contains(bad), "{name}: contains {bad}");
        }
        assert!(
            !lower.replace("url(#", "").contains("url("),
            "{name}: url() to something outside the page"
        );
        assert_eq!(
            page.matches("<svg width").count() - page.matches("<svg width=\"14\"").count(),
            2
        );
        assert!(page.contains(&r.caution.replace('\'', "&#39;")));
        for i in &r.inputs {
            assert!(page.contains(&i.sha256), "{name}: digest of {}", i.path);
        }
        for k in &r.intrinsic {
            assert!(page.contains(&format!("<td>{}</td>", k.kind)), "{name}: {}", k.kind);
        }
        assert!(page.contains("id=\"readout-table\"") && page.contains("id=\"fit-table\""));
        assert!(page.contains(&slackmap::report::markup::escape(
            &slackmap::report::terminal::summary_words(&r)
        )));
    }
}

/// Renames qubit `q` everywhere it appears as an id.
fn rename(r: &mut AuditReport, q: &str, new: &str) {
    let f = |s: &mut String| {
        if s == q {
            *s = new.to_string();
        }
    };
    r.layout.qubits.iter_mut().for_each(f);
    for c in r.layout.couplers.iter_mut() {
        c.iter_mut().for_each(f);
    }
    for e in r.edges.iter_mut() {
        f(&mut e.a);
        f(&mut e.b);
        e.confounded_with.iter_mut().for_each(f);
    }
    for d in r.directed.iter_mut() {
        f(&mut d.victim);
        f(&mut d.aggressor);
    }
    for k in r.intrinsic.iter_mut() {
        k.qubits.iter_mut().for_each(f);
    }
    r.readout.iter_mut().for_each(|x| f(&mut x.qubit));
}

#[test]
fn ids_with_markup_are_escaped_everywhere() {
    let mut r = fixture_4x4();
    let evil = "q5<script>&\"'";
    rename(&mut r, "q5", evil);
    r.layout.name = "<b>chip</b>".into();
    let page = html::html(&r);
    assert!(!page.contains(evil) && !page.contains("<b>chip"));
    assert!(page.contains("q5&lt;script&gt;&amp;&quot;&#39;"));
    assert_eq!(page.matches("<script>").count(), 1, "only the page's own script");
    assert_eq!(edge_rows(&page), r.edges.len());
    for text in [svg::adjacency(&r, Doc::Standalone), svg::layout(&r, Doc::Standalone)] {
        let doc = roxmltree::Document::parse(&text).expect("still XML");
        assert!(doc.descendants().any(
            |n| n.attribute("data-victim") == Some(evil) || n.attribute("data-a") == Some(evil)
        ));
    }
}

#[test]
fn every_audit_writes_the_pictures_and_the_page() {
    let names: Vec<String> =
        report::audit_files(&fixture_4x4()).into_iter().map(|(n, _)| n).collect();
    for want in ["adjacency.svg", "layout.svg", "report.html", "audit.json"] {
        assert!(names.iter().any(|n| n == want), "{names:?}");
    }
}

/// A three-qubit chain: small enough to read its snapshot by eye.
fn tiny() -> AuditReport {
    let mut r = grid_audit(1, 3, &[(0, 1, Verdict::Recalibrate, 1.8e-3, 2e-4, None)]);
    r.layout.name = "chain-3".into();
    r
}

#[test]
fn snapshot_of_a_small_case() {
    let r = tiny();
    insta::assert_snapshot!("adjacency_chain3", svg::adjacency(&r, Doc::Standalone));
    insta::assert_snapshot!("layout_chain3", svg::layout(&r, Doc::Standalone));
}

#[test]
fn report_command_rerenders_a_saved_audit() {
    let dir = tempfile::tempdir().expect("tempdir");
    let out = dir.path().join("out");
    let assert = assert_cmd::Command::cargo_bin("slackmap")
        .expect("binary")
        .args(["report"])
        .arg(fixture_dir().join("grid-4x4.json"))
        .arg("--out")
        .arg(&out)
        .assert()
        .success();
    let stdout = String::from_utf8_lossy(&assert.get_output().stdout).to_string();
    assert_eq!(stdout.trim(), out.join("report.html").display().to_string());
    for f in ["audit.json", "edges.csv", "adjacency.svg", "layout.svg", "report.html"] {
        assert!(out.join(f).is_file(), "{f}");
    }
    let page = std::fs::read_to_string(out.join("report.html")).expect("page");
    assert_eq!(edge_rows(&page), fixture_4x4().edges.len());

    let bad = dir.path().join("bad.json");
    std::fs::write(&bad, "{\"schema\": 1}").expect("write");
    assert_cmd::Command::cargo_bin("slackmap")
        .expect("binary")
        .args(["report"])
        .arg(&bad)
        .arg("--out")
        .arg(dir.path().join("o2"))
        .assert()
        .code(2)
        .stderr(predicates::str::contains("not a slackmap audit file"));
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(24))]

    /// Whatever the ids, scores and verdicts, both pictures are well-formed XML with one cell
    /// per directed pair, and the page has one row per edge.
    #[test]
    fn any_report_renders_well_formed(
        ids in proptest::collection::vec("[a-z<>&\"' ]{1,6}", 4),
        scores in proptest::collection::vec(prop_oneof![Just(0.0), 0.0f64..0.01, Just(f64::NAN)], 6),
        verdicts in proptest::collection::vec(0usize..4, 3),
    ) {
        let vs = [Verdict::Recalibrate, Verdict::Watch, Verdict::Confounded, Verdict::Clean];
        let mut r = grid_audit(2, 2, &[]);
        for (k, e) in r.edges.iter_mut().enumerate().take(3) {
            e.verdict = vs[verdicts[k]];
            e.a_from_b_tvd_per_layer = scores[2 * k];
            e.b_from_a_tvd_per_layer = scores[2 * k + 1];
        }
        for (k, d) in r.directed.iter_mut().enumerate().take(6) {
            d.score_tvd_per_layer = scores[k];
        }
        let mut seen = std::collections::HashSet::new();
        for (i, id) in ids.iter().enumerate() {
            let id = format!("{id}{i}");
            if seen.insert(id.clone()) {
                rename(&mut r, &format!("q{i}"), &id);
            }
        }
        for text in [svg::adjacency(&r, Doc::Standalone), svg::layout(&r, Doc::Standalone)] {
            let doc = roxmltree::Document::parse(&text);
            prop_assert!(doc.is_ok(), "{:?}", doc.err());
        }
        let adj = svg::adjacency(&r, Doc::Standalone);
        let doc = roxmltree::Document::parse(&adj).expect("xml");
        prop_assert_eq!(doc.descendants().filter(|n| has_class(n, "cell")).count(), r.directed.len());
        prop_assert_eq!(edge_rows(&html::html(&r)), r.edges.len());
    }
}

/// The terminal report of the 4x4 fixture at 80 and 160 columns: no line wider than the
/// terminal, the reason codes and their legend shown, and the text as accepted.
#[test]
fn terminal_report_fits_80_and_160_columns() {
    use slackmap::report::terminal::{render, Style, TerminalOptions};
    let r = report::json::read(&fixture_dir().join("grid-4x4.json")).expect("fixture");
    for width in [80, 160] {
        let opt = TerminalOptions {
            style: Style { color: false, width: Some(width) },
            ..Default::default()
        };
        let text = render(&r, &opt);
        for line in text.lines() {
            assert!(line.chars().count() <= width, "{width}: {line}");
        }
        assert!(text.contains("why:") && text.contains("above-threshold"), "{text}");
        assert!(!text.contains('\x1b'));
        insta::assert_snapshot!(format!("terminal_{width}"), text);
    }
    // Without a width every column is shown; with colour the verdicts are coloured.
    let wide = render(&r, &TerminalOptions::default());
    assert!(
        wide.contains("leave-") && wide.contains("attribution") && wide.contains("sensitivity")
    );
    let opt =
        TerminalOptions { style: Style { color: true, width: Some(160) }, ..Default::default() };
    let coloured = render(&r, &opt);
    assert!(coloured.contains("\x1b["), "no colour escapes with colour on");
}
