//! Sums of squares do not depend on where the response sits: adding a constant to every
//! observation changes none of them, nor any mean square, F, p or moment estimate.
//!
//! Source of every check: the invariance of sums of squares (and of everything computed
//! from them) to a shift of the response is common practice: every sum of squares is a
//! quadratic form y'Ay whose matrix annihilates the constant vector (A1 = 0, the intercept
//! being in every model), so (y + c1)'A(y + c1) = y'Ay.
//!
//! Each data set is analysed with 10^k added to every response, k = 0..=12, and compared
//! with the analysis of the same doubles shifted back exactly: for z = fl(y + 10^k) the
//! difference z - 10^k is exact in floating point (10^k is a multiple of the spacing of
//! the doubles near z), so both analyses see exactly the same data set, one of them far
//! from zero. Any difference is digits the computation lost. Tolerances: 1e-9 relative up
//! to 10^7, 1e-6 beyond (at 10^12 the input doubles are 1.2e-4 apart, and a cell mean of
//! uncentred values cannot be held more finely than that).
//!
//! The data: the committed unbalanced fixtures of `tests/analyze_unbalanced.rs`
//! (sequential and type III), whose sums of squares are also held to the reference
//! computed outside the project while the offset barely moves the data; one balanced
//! fixture (the balanced engine); invented scenarios below with a lost cell; and, through
//! the binary, `simulate --mean 1e7 --data` read back by `analyze`.

use emsplan::analyze::{AnalyzeReport, analyze, parse_data};
use emsplan::layout::{Layout, SumsOfSquares};
use emsplan::unbalanced::{Design, Fit};
use serde_json::Value;

#[allow(dead_code)] // `run` is not needed here
mod common;

use common::{layout_from_file, layout_from_text, root};

/// The coating fixture's layout with type III sums of squares (as in
/// `tests/analyze_unbalanced.rs`).
const COATING_TYPE3: &str = r#"
[layout]
name = "Coating recipes, three panels lost"
replicates = 2
sums_of_squares = "type3"
[[factor]]
name = "recipe"
kind = "fixed"
levels = 2
[[factor]]
name = "line"
kind = "random"
levels = 4
[[factor]]
name = "shift"
kind = "random"
levels = 3
"#;

/// Five batches, three samples each, two determinations (the purity fixture's layout).
const BATCHES: &str = r#"
[layout]
name = "Purity of batches, a sample lost"
replicates = 2
[[factor]]
name = "batch"
kind = "random"
levels = 5
[[factor]]
name = "sample"
kind = "random"
levels = 3
within = ["batch"]
"#;

/// Invented: tablet hardness (newtons) for three coating recipes (fixed) on four presses
/// (random), three tablets per recipe and press. Press 2 broke down before recipe 3 was
/// pressed (a lost cell), and one tablet of recipe 1 on press 4 chipped.
const TABLETS: &str = r#"
[layout]
name = "Tablet hardness, a press lost for one recipe"
replicates = 3
SUMS
[[factor]]
name = "recipe"
kind = "fixed"
levels = 3
[[factor]]
name = "press"
kind = "random"
levels = 4
"#;

/// Invented: yield of four seed lots (fixed) in five field blocks (random), one plot per
/// lot and block, additivity assumed (the lot x block interaction omitted, so the
/// residual is what the additive model leaves). A plot was flooded and lost.
const SEED_LOTS: &str = r#"
[layout]
name = "Seed lots in blocks, one plot flooded"
replicates = 1
omit = ["lot x block"]
SUMS
[[factor]]
name = "lot"
kind = "fixed"
levels = 4
[[factor]]
name = "block"
kind = "random"
levels = 5
"#;

fn with_sums(text: &str, sums: &str) -> String {
    text.replace("SUMS", &format!("sums_of_squares = \"{sums}\""))
}

/// A small deterministic spread in [-1, 1] (a Weyl sequence), so the invented data need
/// no generator.
fn spread(i: usize) -> f64 {
    let x = (i as f64 * 0.618_033_988_749_895).fract();
    2.0 * x - 1.0
}

/// Tablet data: every cell but (recipe3, press2), and recipe1/press4 with two tablets.
fn tablets_csv() -> String {
    let recipe = [0.0, 6.5, -3.0];
    let press = [1.2, -0.8, 2.1, -2.5];
    let mut out = String::from("recipe,press,hardness\n");
    let mut i = 0;
    for (a, ra) in recipe.iter().enumerate() {
        for (b, pb) in press.iter().enumerate() {
            let tablets = match (a, b) {
                (2, 1) => 0,
                (0, 3) => 2,
                _ => 3,
            };
            for _ in 0..tablets {
                i += 1;
                let y = 84.0 + ra + pb + 0.4 * spread(7 * a + b) + 1.5 * spread(i);
                out.push_str(&format!("recipe{},press{},{y:.2}\n", a + 1, b + 1));
            }
        }
    }
    out
}

/// Seed-lot data: every plot but lot 2 in block 4.
fn seed_lots_csv() -> String {
    let lot = [0.0, 0.9, -0.4, 1.7];
    let block = [-1.1, 0.3, 0.8, -0.2, 0.6];
    let mut out = String::from("lot,block,yield\n");
    for (a, la) in lot.iter().enumerate() {
        for (b, bb) in block.iter().enumerate() {
            if (a, b) == (1, 3) {
                continue;
            }
            let y = 6.2 + la + bb + 0.35 * spread(11 * a + 3 * b + 1);
            out.push_str(&format!("lot{},block{},{y:.3}\n", a + 1, b + 1));
        }
    }
    out
}

/// The CSV with every response replaced by `f` of it (written so that it reads back as
/// the same double).
fn map_responses(csv: &str, f: impl Fn(f64) -> f64) -> String {
    let mut lines = csv.lines();
    let mut out = format!("{}\n", lines.next().unwrap());
    for line in lines.filter(|l| !l.trim().is_empty()) {
        let (labels, value) = line.rsplit_once(',').unwrap();
        let y: f64 = value.trim().parse().unwrap();
        out.push_str(&format!("{labels},{}\n", f(y)));
    }
    out
}

fn analysis(layout: &Layout, csv: &str) -> AnalyzeReport {
    let obs = parse_data("shifted.csv", csv.as_bytes(), layout, None).expect("reads");
    analyze(layout, &obs, 0.05).expect("analyses")
}

fn relative(a: f64, b: f64) -> f64 {
    if a == b {
        0.0
    } else {
        (a - b).abs() / b.abs().max(f64::MIN_POSITIVE)
    }
}

/// The largest relative difference between two analyses of the same data, over every
/// sum of squares, mean square, denominator, F, p and moment estimate, with what it was.
fn worst(shifted: &AnalyzeReport, exact: &AnalyzeReport) -> (f64, String) {
    let mut worst = (0.0, String::new());
    let mut see = |a: Option<f64>, b: Option<f64>, what: String| {
        let e = match (a, b) {
            (Some(a), Some(b)) => relative(a, b),
            (None, None) => 0.0,
            _ => f64::INFINITY,
        };
        if e > worst.0 || e.is_nan() {
            worst = (e, format!("{what}: {a:?} vs {b:?}"));
        }
    };
    assert_eq!(shifted.terms.len(), exact.terms.len());
    for (s, e) in shifted.terms.iter().zip(&exact.terms) {
        assert_eq!((&s.label, s.df), (&e.label, e.df));
        see(Some(s.ss), Some(e.ss), format!("SS {}", s.label));
        see(s.ms, e.ms, format!("MS {}", s.label));
        match (&s.test, &e.test) {
            (Some(a), Some(b)) => {
                see(
                    a.denominator_ms,
                    b.denominator_ms,
                    format!("MS_D {}", s.label),
                );
                see(
                    a.denominator_df,
                    b.denominator_df,
                    format!("df_D {}", s.label),
                );
                see(a.f, b.f, format!("F {}", s.label));
                see(a.p, b.p, format!("p {}", s.label));
            }
            (None, None) => {}
            _ => panic!("{}: tested in one analysis only", s.label),
        }
    }
    assert_eq!(shifted.components.len(), exact.components.len());
    for (s, e) in shifted.components.iter().zip(&exact.components) {
        see(s.estimate, e.estimate, format!("component {}", s.term));
    }
    worst
}

fn tolerance(k: i32) -> f64 {
    if k <= 7 { 1e-9 } else { 1e-6 }
}

/// Every offset 10^k, k = 0..=12, against the exactly re-centred data.
fn holds_at_every_offset(name: &str, layout: &Layout, csv: &str) {
    holds_against(name, layout, csv, None);
}

/// The same, and while the offset moves the data by less than 1e-10 (10^k ≤ 10^6: the
/// doubles near 10^6 are 1.2e-10 apart), every sum of squares against the reference
/// computed outside the project on the unshifted data (`tests/reference/
/// unbalanced_reference.json`, numpy projections and statsmodels; see
/// `tests/analyze_unbalanced.rs`), to its tolerance there, 1e-8 relative.
fn holds_against(name: &str, layout: &Layout, csv: &str, reference: Option<&Value>) {
    let mut failures = Vec::new();
    for k in 0..=12 {
        let offset: f64 = format!("1e{k}").parse().unwrap();
        let shifted = map_responses(csv, |y| y + offset);
        let recentred = map_responses(&shifted, |z| z - offset);
        let a = analysis(layout, &shifted);
        let b = analysis(layout, &recentred);
        if let Some(case) = reference.filter(|_| k <= 6) {
            for row in &a.terms {
                let want = case["terms"][&row.label]["ss"].as_f64().unwrap();
                let e = relative(row.ss, want);
                if e.is_nan() || e > 1e-8 {
                    failures.push(format!(
                        "offset 1e{k}: SS {} {} vs reference {want}",
                        row.label, row.ss
                    ));
                }
            }
        }
        let (e, what) = worst(&a, &b);
        eprintln!("{name}, offset 1e{k}: worst relative error {e:.1e} ({what})");
        if e.is_nan() || e > tolerance(k) {
            failures.push(format!("offset 1e{k}: {e:.1e} at {what}"));
        }
    }
    assert!(failures.is_empty(), "{name}: {failures:#?}");
}

fn fixture(rel: &str) -> String {
    std::fs::read_to_string(root().join(rel)).expect("the fixture is committed")
}

#[test]
fn lost_chamber_pot_and_cell_sequential() {
    let layout = layout_from_file("problems/growth-chambers.toml");
    holds_against(
        "chambers, sequential",
        &layout,
        &fixture("tests/fixtures/data/chambers-lost.csv"),
        Some(&common::reference("unbalanced_reference.json")["chambers"]),
    );
}

#[test]
fn lost_chamber_pot_and_cell_type_three() {
    let text = std::fs::read_to_string(root().join("problems/growth-chambers.toml"))
        .unwrap()
        .replace("[layout]", "[layout]\nsums_of_squares = \"type3\"");
    holds_at_every_offset(
        "chambers, type III",
        &layout_from_text(&text),
        &fixture("tests/fixtures/data/chambers-lost.csv"),
    );
}

#[test]
fn coating_three_panels_lost_type_three() {
    holds_against(
        "coating, type III",
        &layout_from_text(COATING_TYPE3),
        &fixture("tests/fixtures/data/coating-lost.csv"),
        Some(&common::reference("unbalanced_reference.json")["coating"]),
    );
}

#[test]
fn batches_with_a_lost_sample_sequential() {
    holds_against(
        "batches, sequential",
        &layout_from_text(BATCHES),
        &fixture("tests/fixtures/data/batches-lost.csv"),
        Some(&common::reference("unbalanced_reference.json")["batches"]),
    );
}

#[test]
fn tablets_with_a_lost_cell() {
    for sums in ["sequential", "type3"] {
        let layout = layout_from_text(&with_sums(TABLETS, sums));
        let csv = tablets_csv();
        let report = analysis(&layout, &csv);
        assert_eq!(report.imbalance.as_ref().unwrap().empty_cells, 1);
        holds_at_every_offset(&format!("tablets, {sums}"), &layout, &csv);
    }
}

#[test]
fn additive_seed_lots_with_a_lost_plot() {
    for sums in ["sequential", "type3"] {
        let layout = layout_from_text(&with_sums(SEED_LOTS, sums));
        let csv = seed_lots_csv();
        let report = analysis(&layout, &csv);
        assert_eq!(report.imbalance.as_ref().unwrap().empty_cells, 1);
        holds_at_every_offset(&format!("seed lots, {sums}"), &layout, &csv);
    }
}

/// The balanced engine centres on the grand mean before it squares: it keeps its digits.
#[test]
fn balanced_data_keep_their_digits() {
    let layout = layout_from_file("problems/growth-chambers.toml");
    let csv = fixture("tests/fixtures/data/chambers-nested.csv");
    assert!(analysis(&layout, &csv).imbalance.is_none());
    holds_at_every_offset("chambers, balanced", &layout, &csv);
}

/// The library's own entry point: `Fit::sums_of_squares` of y + 10^k against that of the
/// re-centred doubles, for both kinds of sums of squares on the lost-chamber layout
/// shipped in problems/.
#[test]
fn fit_sums_of_squares_are_shift_invariant() {
    let layout = layout_from_file("problems/unbalanced-lost-chamber.toml");
    let design = Design::new(&layout).unwrap();
    let y: Vec<f64> = (0..design.len())
        .map(|i| 20.0 + 3.0 * spread(i) + spread(5 * i + 2))
        .collect();
    for kind in [SumsOfSquares::Sequential, SumsOfSquares::Type3] {
        let fit = Fit::new(&design, kind);
        for k in 0..=12 {
            let offset: f64 = format!("1e{k}").parse().unwrap();
            let z: Vec<f64> = y.iter().map(|v| v + offset).collect();
            let back: Vec<f64> = z.iter().map(|v| v - offset).collect();
            let a = fit.sums_of_squares(&design, &z);
            let b = fit.sums_of_squares(&design, &back);
            for (t, (a, b)) in a.iter().zip(&b).enumerate() {
                let e = relative(*a, *b);
                assert!(
                    e <= tolerance(k),
                    "{kind:?}, offset 1e{k}, term {t}: {a} vs {b} ({e:.1e})"
                );
            }
        }
    }
}

/// The binary run from the repository root, its stdout as JSON.
fn emsplan_json(args: &[&str]) -> Value {
    let out = std::process::Command::new(env!("CARGO_BIN_EXE_emsplan"))
        .current_dir(root())
        .args(args)
        .output()
        .expect("the binary runs");
    assert!(
        out.status.success(),
        "{args:?}: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    serde_json::from_slice(&out.stdout).expect("JSON")
}

/// Every term's mean square as `analyze --format json` reports it.
fn analyzed_mean_squares(layout: &str, data: &str) -> Vec<(String, Option<f64>)> {
    let report = emsplan_json(&["analyze", layout, data, "--format", "json"]);
    report["terms"]
        .as_array()
        .unwrap()
        .iter()
        .map(|t| (t["label"].as_str().unwrap().to_string(), t["ms"].as_f64()))
        .collect()
}

/// The data file with `offset` taken off every response, written so that it reads back
/// as the same double (exact: the responses are within a factor of two of the offset).
fn shifted_copy(from: &std::path::Path, to: &std::path::Path, offset: f64) {
    let text = std::fs::read_to_string(from).unwrap();
    std::fs::write(to, map_responses(&text, |y| y - offset)).unwrap();
}

fn same_mean_squares(a: &[(String, Option<f64>)], b: &[(String, Option<f64>)], what: &str) {
    assert_eq!(a.len(), b.len(), "{what}");
    for ((ta, ma), (tb, mb)) in a.iter().zip(b) {
        assert_eq!(ta, tb, "{what}");
        match (ma, mb) {
            (Some(x), Some(y)) => assert!(
                relative(*x, *y) <= 1e-9,
                "{what}: MS {ta}: {x} vs {y} ({:.1e})",
                relative(*x, *y)
            ),
            (None, None) => {}
            _ => panic!("{what}: MS {ta}: {ma:?} vs {mb:?}"),
        }
    }
}

/// `simulate --mean 1e7 --data` on the shipped unbalanced layouts prints the mean squares
/// of the file it writes: `analyze` of that file gets them to 1e-9 (the file is the data
/// set; Architecture: simulate and analyze share the unbalanced fit), and so does
/// `analyze` of the same file with 1e7 taken off every response (the invariance of sums
/// of squares to a shift of the response: common practice). For the tanks, the mean
/// squares are also computed here from the shifted-back file by the textbook sums of
/// squares of a two-stage nested layout, SS[temperature] = Σᵢ nᵢ (ȳᵢ - ȳ)², SS[tank] =
/// Σᵢⱼ nᵢⱼ (ȳᵢⱼ - ȳᵢ)², SS[residual] = Σ (y - ȳᵢⱼ)² (as in tests/simulate_unbalanced.rs).
#[test]
fn simulate_at_1e7_reports_the_mean_squares_of_its_file() {
    let dir = std::path::Path::new(env!("CARGO_TARGET_TMPDIR")).join("offset-simulate");
    std::fs::create_dir_all(&dir).unwrap();
    let chambers =
        std::fs::read_to_string(root().join("problems/unbalanced-lost-chamber.toml")).unwrap();
    let mut layouts = vec![(
        "tanks".to_string(),
        root().join("problems/unbalanced-tanks.toml"),
    )];
    for ss in ["sequential", "type3"] {
        let path = dir.join(format!("chambers-{ss}.toml"));
        std::fs::write(
            &path,
            chambers.replace(
                "replicates = 3\n",
                &format!("replicates = 3\nsums_of_squares = \"{ss}\"\n"),
            ),
        )
        .unwrap();
        layouts.push((format!("chambers-{ss}"), path));
    }
    for (name, layout) in &layouts {
        let data = dir.join(format!("{name}.csv"));
        let back = dir.join(format!("{name}-less-1e7.csv"));
        let (layout, data_s) = (layout.to_str().unwrap(), data.to_str().unwrap());
        let sim = emsplan_json(&[
            "simulate", layout, "--runs", "0", "--seed", "11", "--mean", "1e7", "--data", data_s,
            "--format", "json",
        ]);
        let written: Vec<(String, Option<f64>)> = sim["data"]["mean_squares"]
            .as_array()
            .unwrap()
            .iter()
            .map(|m| (m["term"].as_str().unwrap().to_string(), m["ms"].as_f64()))
            .collect();
        let analyzed = analyzed_mean_squares(layout, data_s);
        same_mean_squares(&written, &analyzed, &format!("{name}: simulate vs analyze"));
        shifted_copy(&data, &back, 1e7);
        let centred = analyzed_mean_squares(layout, back.to_str().unwrap());
        same_mean_squares(
            &written,
            &centred,
            &format!("{name}: simulate vs analyze less 1e7"),
        );
        if name == "tanks" {
            let textbook = nested_mean_squares(&back);
            same_mean_squares(&written, &textbook, "tanks: simulate vs textbook");
        }
    }
}

/// Mean squares of a two-stage nested data file (first column outer, second inner) by
/// the textbook formulas above, in the order temperature, tank(temperature), residual.
fn nested_mean_squares(path: &std::path::Path) -> Vec<(String, Option<f64>)> {
    use std::collections::BTreeMap;
    let text = std::fs::read_to_string(path).unwrap();
    let mut cells: BTreeMap<(String, String), Vec<f64>> = BTreeMap::new();
    for line in text.lines().skip(1).filter(|l| !l.is_empty()) {
        let f: Vec<&str> = line.split(',').collect();
        cells
            .entry((f[0].to_string(), f[1].to_string()))
            .or_default()
            .push(f[2].parse().unwrap());
    }
    let mean = |v: &[f64]| v.iter().sum::<f64>() / v.len() as f64;
    let all: Vec<f64> = cells.values().flatten().copied().collect();
    let grand = mean(&all);
    let mut outer: BTreeMap<String, Vec<f64>> = BTreeMap::new();
    for ((a, _), v) in &cells {
        outer.entry(a.clone()).or_default().extend(v);
    }
    let ss_a: f64 = outer
        .values()
        .map(|v| v.len() as f64 * (mean(v) - grand).powi(2))
        .sum();
    let ss_b: f64 = cells
        .iter()
        .map(|((a, _), v)| v.len() as f64 * (mean(v) - mean(&outer[a])).powi(2))
        .sum();
    let ss_e: f64 = cells
        .values()
        .map(|v| v.iter().map(|y| (y - mean(v)).powi(2)).sum::<f64>())
        .sum();
    let df_a = (outer.len() - 1) as f64;
    let df_b = (cells.len() - outer.len()) as f64;
    let df_e = (all.len() - cells.len()) as f64;
    vec![
        ("temperature".into(), Some(ss_a / df_a)),
        ("tank(temperature)".into(), Some(ss_b / df_b)),
        ("residual".into(), Some(ss_e / df_e)),
    ]
}
