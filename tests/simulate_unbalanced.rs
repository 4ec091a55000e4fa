//! `simulate` on unbalanced layouts (cells removed, observations lost): its Monte Carlo
//! against the expected mean squares and the exact tests' level, its data set against the
//! full layout's, and the binary on the shipped unbalanced problems.
//!
//! Sources: the expected mean squares of the random components are Hartley's (1967)
//! synthesis, held independently to projections in `tests/unbalanced_monte_carlo.rs`; the
//! hand values for the nested layout with unequal numbers of tanks follow the textbook
//! expected mean squares of the unbalanced two-stage nested model (Searle, Casella and
//! McCulloch 1992, ch. 3, from memory): with tanks of equal size n, E(MS[tank]) = σ² +
//! nσ²_tank, E(MS[temperature]) = σ² + nσ²_tank + Σ nᵢ (τᵢ - τ̄)² / (a - 1) with τ̄ the
//! observation-weighted mean; the sequential sum of squares of the first factor fitted is
//! the unadjusted one, Σ nᵢ (ȳᵢ - ȳ)² (common practice); an exact F test rejects a true
//! null with probability alpha.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::Command;

use emsplan::errorterm::Verdict;
use emsplan::layout::Layout;
use emsplan::planning::PlanningValues;
use emsplan::simulate::{DataRequest, Request, SimulateReport, simulate};
use serde_json::Value;

const BIN: &str = env!("CARGO_BIN_EXE_emsplan");

/// Standard errors a simulated figure may stray from its expected value: a two-sided tail
/// of about 7e-6 per comparison, so a correct simulator passes whatever the seed.
const TOLERANCE_SE: f64 = 4.5;

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

fn scratch(tag: &str) -> PathBuf {
    let dir = Path::new(env!("CARGO_TARGET_TMPDIR")).join(format!("simulate-unbalanced-{tag}"));
    std::fs::create_dir_all(&dir).unwrap();
    dir
}

fn load_text(text: &str) -> (Layout, PlanningValues) {
    let spec = emsplan::spec::parse(text).expect("parses");
    let layout = Layout::from_spec(&spec, text).expect("valid");
    let plan = PlanningValues::from_spec(&spec, text, &layout).expect("planning values");
    (layout, plan)
}

fn shipped(rel: &str) -> String {
    std::fs::read_to_string(root().join(rel)).unwrap()
}

/// The file's text without its `[[layout.remove]]` tables: the full layout.
fn without_removals(text: &str) -> String {
    let mut out = String::new();
    let mut skipping = false;
    for line in text.lines() {
        let head = line.trim_start();
        if head.starts_with('[') {
            skipping = head.starts_with("[[layout.remove]]");
        }
        if !skipping {
            out.push_str(line);
            out.push('\n');
        }
    }
    out
}

fn run(layout: &Layout, plan: &PlanningValues, seed: u64, runs: u64) -> SimulateReport {
    let request = Request {
        seed,
        runs,
        data: None,
    };
    simulate(layout, plan, &request).expect("simulate runs").0
}

fn term<'a>(r: &'a SimulateReport, label: &str) -> &'a emsplan::simulate::SimulatedTerm {
    r.terms
        .iter()
        .find(|t| t.label == label)
        .unwrap_or_else(|| panic!("no term {label}"))
}

/// Every mean square's average within `TOLERANCE_SE` standard errors of its expected value
/// and not flagged; every exact test's null rate within as many binomial standard errors
/// of alpha; the report's flags match its own intervals.
fn assert_mean_squares_and_exact_nulls(r: &SimulateReport, context: &str) {
    let n = r.runs as f64;
    for t in &r.terms {
        if let (Some(m), Some(se)) = (t.mean_ms, t.mean_ms_se) {
            assert!(
                (m - t.expected_ms).abs() <= TOLERANCE_SE * se,
                "{context}: MS of {} {m} ± {se} vs {}",
                t.label,
                t.expected_ms
            );
            assert!(!t.ms_flag, "{context}: {} flagged", t.label);
        }
        let Some(x) = &t.test else { continue };
        if let Some(null) = x.null {
            assert_eq!(x.null_flag, !null.holds(r.alpha), "{context}: {}", t.label);
        }
        if x.verdict == Verdict::Exact {
            let null = x.null.unwrap();
            let se = (r.alpha * (1.0 - r.alpha) / n).sqrt();
            assert!(
                (null.rate - r.alpha).abs() <= TOLERANCE_SE * se,
                "{context}: null of {}: {null:?}",
                t.label
            );
        }
    }
}

/// Five tanks for two temperatures (3 + 2), six fish each: the expected mean squares by
/// the textbook formulas above, by hand. Planning values: σ = 4, σ_tank = 2.5, effects ∓3.
/// τ̄ = (18 × (-3) + 12 × 3) / 30 = -0.6, Σ nᵢ (τᵢ - τ̄)² = 18 × 2.4² + 12 × 3.6² = 259.2, so
/// E(MS[temperature]) = 16 + 6 × 6.25 + 259.2 = 312.7, E(MS[tank]) = 16 + 37.5 = 53.5,
/// E(MS[residual]) = 16. With tanks of equal size both F tests are exact F (under the
/// alternative too), so the simulated power must hold the analytic one: noncentral F(1, 3)
/// with λ = 259.2 / 53.5 for temperature.
#[test]
fn tanks_follow_the_textbook_expected_mean_squares_and_exact_tests() {
    let (layout, plan) = load_text(&shipped("problems/unbalanced-tanks.toml"));
    let r = run(&layout, &plan, 2025, 20_000);
    assert_eq!(r.observations, 30);
    let u = r.unbalanced.as_ref().expect("unbalanced");
    assert_eq!((u.full_observations, u.removed_observations), (36, 6));
    for (label, want, df) in [
        ("temperature", 312.7, 1),
        ("tank(temperature)", 53.5, 3),
        ("residual", 16.0, 25),
    ] {
        let t = term(&r, label);
        assert_eq!(t.df, df, "{label}");
        assert!(
            (t.expected_ms - want).abs() < 1e-9 * want,
            "{label}: {} vs {want}",
            t.expected_ms
        );
    }
    assert_mean_squares_and_exact_nulls(&r, "tanks");
    let n = r.runs as f64;
    let temperature = term(&r, "temperature").test.as_ref().unwrap();
    let want = emsplan::dist::fixed_power(0.05, 1.0, 3.0, 259.2 / 53.5);
    let p = temperature.analytic_power.unwrap();
    assert!((p - want).abs() < 1e-9, "{p} vs {want}");
    for label in ["temperature", "tank(temperature)"] {
        let x = term(&r, label).test.as_ref().unwrap();
        assert_eq!(x.verdict, Verdict::Exact, "{label}");
        let (power, p) = (x.power.unwrap(), x.analytic_power.unwrap());
        assert!(
            (power.rate - p).abs() <= TOLERANCE_SE * (p * (1.0 - p) / n).sqrt(),
            "{label}: {power:?} vs {p}"
        );
        // Far from alpha, so the comparison has teeth.
        assert!(p > 0.2, "{label}: {p}");
    }
}

/// The growth chambers with a chamber and a pot lost, sequential and type III: the mean
/// squares follow the expectation (synthesis for the random part, the simulated pattern's
/// μ'Aμ for the fixed part), the exact test (chamber x cultivar over the residual) holds
/// alpha, and `light`'s mean square is far from the value `check` gives for the average
/// pattern, so the exact fixed part matters.
#[test]
fn lost_chamber_mean_squares_follow_their_expectation() {
    let text = shipped("problems/unbalanced-lost-chamber.toml");
    for type3 in [false, true] {
        let text = if type3 {
            text.replace(
                "replicates = 3\n",
                "replicates = 3\nsums_of_squares = \"type3\"\n",
            )
        } else {
            text.clone()
        };
        let context = if type3 { "type III" } else { "sequential" };
        let (layout, plan) = load_text(&text);
        let r = run(&layout, &plan, 99, 20_000);
        assert_eq!(r.observations, 95, "{context}");
        let u = r.unbalanced.as_ref().unwrap();
        assert_eq!(u.sums_of_squares, layout.sums_of_squares);
        assert_mean_squares_and_exact_nulls(&r, context);
        let exact = term(&r, "chamber x cultivar(light)").test.as_ref().unwrap();
        assert_eq!(exact.verdict, Verdict::Exact, "{context}");

        let averaged = emsplan::engine::Analysis::new(&layout)
            .unwrap()
            .ems_values(&plan);
        let light = r.terms.iter().position(|t| t.label == "light").unwrap();
        let t = &r.terms[light];
        assert!(type3 || t.df > 0, "{context}: light has df");
        if t.df > 0 {
            let (m, se) = (t.mean_ms.unwrap(), t.mean_ms_se.unwrap());
            assert!(
                (m - averaged[light]).abs() > 5.0 * se,
                "{context}: light {m} ± {se}, average pattern {}",
                averaged[light]
            );
        }
    }
}

/// Two fixed factors in a 2 x 2 layout with 1, 4, 4 and 3 observations per cell, only a
/// large `b` effect besides a small `a`: the sequential sum of squares of `a` (fitted
/// first) is the unadjusted Σ nᵢ (ȳᵢ - ȳ)², which carries `b`'s effects. Its null data sets
/// (a's effects removed) are rejected with the noncentral F power at λ = Σ nᵢ (m̄ᵢ - m̄)² / σ²,
/// m̄ᵢ the row means of b's effects, computed here by hand; the tests of `b` and `a x b`
/// (no effect of `a x b`, nothing carried) hold alpha; type III removes the carry-over.
#[test]
fn sequential_null_carries_the_other_fixed_effects() {
    let text = |ss: &str| {
        format!(
            r#"
[layout]
replicates = 4
sums_of_squares = "{ss}"
[[layout.remove]]
a = 1
b = 1
replicate = 1
[[layout.remove]]
a = 1
b = 1
replicate = 2
[[layout.remove]]
a = 1
b = 1
replicate = 3
[[layout.remove]]
a = 2
b = 2
replicate = 4
[[factor]]
name = "a"
kind = "fixed"
levels = 2
[[factor]]
name = "b"
kind = "fixed"
levels = 2
[sd]
residual = 1.0
[effect]
a = 0.3
b = 1.5
"#
        )
    };
    // b's effects: -1.5 at its first level, +1.5 at its second (linear pattern, root mean
    // square 1.5). Row means over the kept observations: (1 x -1.5 + 4 x 1.5) / 5 and
    // (4 x -1.5 + 3 x 1.5) / 7.
    let counts = [[1.0, 4.0], [4.0, 3.0]];
    let beta = [-1.5, 1.5];
    let rows: Vec<(f64, f64)> = counts
        .iter()
        .map(|c| {
            let n = c[0] + c[1];
            (n, (c[0] * beta[0] + c[1] * beta[1]) / n)
        })
        .collect();
    let total: f64 = rows.iter().map(|r| r.0).sum();
    let grand = rows.iter().map(|r| r.0 * r.1).sum::<f64>() / total;
    let lambda: f64 = rows.iter().map(|(n, m)| n * (m - grand).powi(2)).sum();
    let want = emsplan::dist::fixed_power(0.05, 1.0, 8.0, lambda);
    assert!(want > 0.3, "{want}");

    let runs = 20_000u64;
    let n = runs as f64;
    let (layout, plan) = load_text(&text("sequential"));
    let r = run(&layout, &plan, 5, runs);
    let binomial =
        |rate: f64, p: f64| (rate - p).abs() <= TOLERANCE_SE * (p * (1.0 - p) / n).sqrt();
    let a = term(&r, "a").test.as_ref().unwrap();
    let null = a.null.unwrap();
    assert!(binomial(null.rate, want), "{null:?} vs {want}");
    assert!(a.null_flag);
    assert!(
        r.notes.iter().any(|n| matches!(n,
            emsplan::simulate::SimulationNote::NullCarries { term, null_rate, .. }
                if term == "a" && (null_rate - want).abs() < 5e-4)),
        "{:?}",
        r.notes
    );
    for label in ["b", "a x b"] {
        let x = term(&r, label).test.as_ref().unwrap();
        assert!(
            binomial(x.null.unwrap().rate, 0.05),
            "{label}: {:?}",
            x.null
        );
    }
    for t in &r.terms {
        if let (Some(m), Some(se)) = (t.mean_ms, t.mean_ms_se) {
            assert!(
                (m - t.expected_ms).abs() <= TOLERANCE_SE * se,
                "{}",
                t.label
            );
        }
    }

    let (layout, plan) = load_text(&text("type3"));
    let r = run(&layout, &plan, 5, runs);
    assert_mean_squares_and_exact_nulls(&r, "type III");
    assert!(
        !r.notes
            .iter()
            .any(|n| matches!(n, emsplan::simulate::SimulationNote::NullCarries { .. }))
    );
}

/// Reads a written data set: header, then rows of labels and the response.
fn read_csv(path: &Path) -> (Vec<String>, Vec<Vec<String>>) {
    let text = std::fs::read_to_string(path).unwrap();
    let mut lines = text.lines();
    let header = lines.next().unwrap().split(',').map(String::from).collect();
    let rows = lines
        .map(|l| l.split(',').map(String::from).collect())
        .collect();
    (header, rows)
}

/// The data set written for an unbalanced layout: the full layout's data set of the same
/// seed (drawn from the file without its removals, same convention) less the removed
/// observations, row for row; so no row for the lost chamber and two for the cell that
/// lost a pot.
#[test]
fn data_set_is_the_full_one_less_the_removed_observations() {
    let dir = scratch("data");
    let text = shipped("problems/unbalanced-lost-chamber.toml");
    let full_text = without_removals(&text);
    assert!(!full_text.contains("layout.remove") && full_text.contains("[[factor]]"));
    let write = |text: &str, name: &str| {
        let (layout, plan) = load_text(text);
        let path = dir.join(name);
        let request = Request {
            seed: 17,
            runs: 0,
            data: Some(DataRequest {
                path: path.display().to_string(),
                mean: 12.0,
                unique_labels: false,
            }),
        };
        let (report, set) = simulate(&layout, &plan, &request).unwrap();
        std::fs::write(&path, emsplan::render::simulate::data_csv(&set.unwrap())).unwrap();
        (report, path)
    };
    let (report, kept_path) = write(&text, "kept.csv");
    let (_, full_path) = write(&full_text, "full.csv");
    let (header, kept) = read_csv(&kept_path);
    let (full_header, full) = read_csv(&full_path);
    assert_eq!(header, ["light", "chamber", "cultivar", "response"]);
    assert_eq!(header, full_header);
    assert_eq!((kept.len(), full.len()), (95, 108));
    assert_eq!(report.data.as_ref().unwrap().observations, 95);

    // Walk the full data set, numbering the replicates of each cell, and drop the removed.
    let mut replicate: BTreeMap<Vec<String>, usize> = BTreeMap::new();
    let expected: Vec<&Vec<String>> = full
        .iter()
        .filter(|row| {
            let cell = row[..3].to_vec();
            let k = replicate.entry(cell.clone()).or_insert(0);
            *k += 1;
            let lost_chamber = row[0] == "light2" && row[1] == "chamber3";
            let lost_pot = cell == ["light1", "chamber1", "cultivar2"] && *k == 3;
            !(lost_chamber || lost_pot)
        })
        .collect();
    assert_eq!(expected.len(), 95);
    for (i, (a, b)) in kept.iter().zip(&expected).enumerate() {
        assert_eq!(&a, b, "row {}", i + 2);
    }
    assert!(!kept.iter().any(|r| r[0] == "light2" && r[1] == "chamber3"));
    let pot = kept
        .iter()
        .filter(|r| r[..3] == ["light1", "chamber1", "cultivar2"])
        .count();
    assert_eq!(pot, 2);
}

/// The mean squares reported for a written data set are those of the file: for the tanks,
/// computed here from the file by the textbook sums of squares of a two-stage nested
/// layout (sequential, temperature first): SS[temperature] = Σᵢ nᵢ (ȳᵢ - ȳ)², SS[tank] =
/// Σᵢⱼ nᵢⱼ (ȳᵢⱼ - ȳᵢ)², SS[residual] = Σ (y - ȳᵢⱼ)².
#[test]
fn written_mean_squares_are_the_files() {
    let dir = scratch("nested");
    let path = dir.join("tanks.csv");
    let out = Command::new(BIN)
        .current_dir(root())
        .args([
            "simulate",
            "problems/unbalanced-tanks.toml",
            "--runs",
            "0",
            "--seed",
            "3",
            "--mean",
            "50",
            "--data",
            path.to_str().unwrap(),
            "--format",
            "json",
        ])
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let report: Value = serde_json::from_slice(&out.stdout).unwrap();
    let (header, rows) = read_csv(&path);
    assert_eq!(header, ["temperature", "tank", "response"]);
    assert_eq!(rows.len(), 30);
    assert!(
        !rows
            .iter()
            .any(|r| r[0] == "temperature2" && r[1] == "tank3")
    );
    let mut by_tank: BTreeMap<(String, String), Vec<f64>> = BTreeMap::new();
    for r in &rows {
        by_tank
            .entry((r[0].clone(), r[1].clone()))
            .or_default()
            .push(r[2].parse().unwrap());
    }
    assert_eq!(by_tank.len(), 5);
    let mean = |v: &[f64]| v.iter().sum::<f64>() / v.len() as f64;
    let all: Vec<f64> = by_tank.values().flatten().copied().collect();
    let grand = mean(&all);
    let mut by_temperature: BTreeMap<String, Vec<f64>> = BTreeMap::new();
    for ((temp, _), v) in &by_tank {
        by_temperature.entry(temp.clone()).or_default().extend(v);
    }
    let ss_temperature: f64 = by_temperature
        .values()
        .map(|v| v.len() as f64 * (mean(v) - grand).powi(2))
        .sum();
    let ss_tank: f64 = by_tank
        .iter()
        .map(|((temp, _), v)| v.len() as f64 * (mean(v) - mean(&by_temperature[temp])).powi(2))
        .sum();
    let ss_residual: f64 = by_tank
        .values()
        .map(|v| v.iter().map(|y| (y - mean(v)).powi(2)).sum::<f64>())
        .sum();
    let want = [ss_temperature / 1.0, ss_tank / 3.0, ss_residual / 25.0];
    let written = report["data"]["mean_squares"].as_array().unwrap();
    let labels: Vec<&str> = written
        .iter()
        .map(|m| m["term"].as_str().unwrap())
        .collect();
    assert_eq!(labels, ["temperature", "tank(temperature)", "residual"]);
    for (m, w) in written.iter().zip(want) {
        let got = m["ms"].as_f64().unwrap();
        assert!((got - w).abs() <= 1e-9 * w, "{}: {got} vs {w}", m["term"]);
    }
    let own_mean = report["data"]["mean"].as_f64().unwrap();
    assert!((own_mean - grand).abs() < 1e-9 * grand);
}

/// `emsplan analyze` reads a data set written for an unbalanced layout (it finds the
/// missing cells and observations in the data) and gets the mean squares simulate
/// reported for it, with sequential and with type III sums of squares.
#[test]
fn written_data_round_trip_through_analyze() {
    let dir = scratch("round-trip");
    let text = shipped("problems/unbalanced-lost-chamber.toml");
    for ss in ["sequential", "type3"] {
        let layout = dir.join(format!("chambers-{ss}.toml"));
        std::fs::write(
            &layout,
            text.replace(
                "replicates = 3\n",
                &format!("replicates = 3\nsums_of_squares = \"{ss}\"\n"),
            ),
        )
        .unwrap();
        let data = dir.join(format!("chambers-{ss}.csv"));
        let (layout, data) = (layout.to_str().unwrap(), data.to_str().unwrap());
        let args = [
            "simulate", layout, "--runs", "0", "--seed", "8", "--mean", "12", "--data", data,
            "--format", "json",
        ];
        let out = emsplan(&args, "2");
        assert!(
            out.status.success(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
        let sim: Value = serde_json::from_slice(&out.stdout).unwrap();
        assert_eq!(sim["unbalanced"]["sums_of_squares"], ss);
        let out = emsplan(&["analyze", layout, data, "--format", "json"], "2");
        assert!(
            out.status.success(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
        let ana: Value = serde_json::from_slice(&out.stdout).unwrap();
        let written = sim["data"]["mean_squares"].as_array().unwrap();
        let terms = ana["terms"].as_array().unwrap();
        assert_eq!(written.len(), terms.len());
        for (w, t) in written.iter().zip(terms) {
            assert_eq!(w["term"], t["label"], "{ss}");
            assert_eq!(w["df"], t["df"], "{ss}: {}", w["term"]);
            if let (Some(a), Some(b)) = (w["ms"].as_f64(), t["ms"].as_f64()) {
                assert!(
                    (a - b).abs() <= 1e-12 * a.abs(),
                    "{ss}: {}: {a} vs {b}",
                    w["term"]
                );
            } else {
                assert!(
                    w["ms"].is_null() && t["ms"].is_null(),
                    "{ss}: {}",
                    w["term"]
                );
            }
        }
        assert_eq!(ana["observations"], 95);
    }
}

fn emsplan(args: &[&str], threads: &str) -> std::process::Output {
    Command::new(BIN)
        .current_dir(root())
        .env("RAYON_NUM_THREADS", threads)
        .args(args)
        .output()
        .expect("the binary runs")
}

/// The binary on the shipped unbalanced problems: every format renders, the text says
/// what was removed and which sums of squares were used, the JSON carries it, and the
/// output is the same with any number of threads.
#[test]
fn binary_runs_on_the_shipped_unbalanced_problems() {
    for (file, kept, removed) in [
        ("problems/unbalanced-lost-chamber.toml", 95, 13),
        ("problems/unbalanced-tanks.toml", 30, 6),
    ] {
        for format in ["text", "json", "markdown", "csv"] {
            let out = emsplan(
                &["simulate", file, "--runs", "400", "--format", format],
                "2",
            );
            assert!(
                out.status.success(),
                "{file} {format}: {}",
                String::from_utf8_lossy(&out.stderr)
            );
            let text = String::from_utf8(out.stdout).unwrap();
            assert!(text.contains("residual"), "{file} {format}");
            if format == "text" || format == "markdown" {
                assert!(
                    text.contains(&format!(
                        "Unbalanced: {removed} of the full layout's {} observations removed",
                        kept + removed
                    )) && text.contains("sequential sums of squares"),
                    "{file} {format}: {text}"
                );
            }
            if format == "json" {
                let v: Value = serde_json::from_str(&text).unwrap();
                assert_eq!(v["observations"], kept);
                assert_eq!(v["unbalanced"]["removed_observations"], removed);
                assert_eq!(v["unbalanced"]["sums_of_squares"], "sequential");
            }
        }
        let args = [
            "simulate", file, "--runs", "300", "--seed", "4", "--format", "json",
        ];
        let one = emsplan(&args, "1");
        assert_eq!(one.stdout, emsplan(&args, "2").stdout, "{file}");
    }
}
