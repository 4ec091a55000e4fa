//! `simulate`: its Monte Carlo against the analytic figures and an independent reference,
//! its dummy data through `analyze`, and its reproducibility.
//!
//! Sources: the expected mean squares and power are the engine's (`ems`, `planning`),
//! themselves held to textbooks in `tests/textbook.rs` and `tests/planning.rs`; an exact F
//! test rejects a true null with probability alpha (common practice); the quasi-F's null
//! rate is held to an independent Monte Carlo in `tests/reference/anova_reference.py`,
//! which draws the mean squares as independent scaled chi-squares (Cochran's theorem).

use std::path::{Path, PathBuf};
use std::process::Command;

use emsplan::layout::{Convention, Layout};
use emsplan::planning::PlanningValues;
use emsplan::simulate::{Request, SimulateReport, simulate};
use serde_json::Value;

const BIN: &str = env!("CARGO_BIN_EXE_emsplan");

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

fn scratch(tag: &str) -> PathBuf {
    let dir = Path::new(env!("CARGO_TARGET_TMPDIR")).join(format!("simulate-{tag}"));
    std::fs::create_dir_all(&dir).unwrap();
    dir
}

fn load_text(text: &str) -> (Layout, PlanningValues) {
    let spec = emsplan::spec::parse(text).expect("parses");
    let layout = Layout::from_spec(&spec, text).expect("valid");
    let plan = PlanningValues::from_spec(&spec, text, &layout).expect("planning values");
    (layout, plan)
}

fn load_file(rel: &str) -> (Layout, PlanningValues) {
    load_text(&std::fs::read_to_string(root().join(rel)).unwrap())
}

fn monte_carlo(layout: &Layout, plan: &PlanningValues, seed: u64, runs: u64) -> SimulateReport {
    let request = Request {
        seed,
        runs,
        data: None,
    };
    simulate(layout, plan, &request).expect("simulate runs").0
}

fn emsplan(args: &[&str]) -> std::process::Output {
    Command::new(BIN)
        .current_dir(root())
        .args(args)
        .output()
        .expect("the binary runs")
}

/// Standard errors a simulated figure may stray from its expected value in these tests:
/// a two-sided tail of about 7e-6 for each comparison, so that a correct simulator passes
/// whatever the seed, while the report's own flags use the 99% intervals.
const TOLERANCE_SE: f64 = 4.5;

/// Every mean square's average lies within `TOLERANCE_SE` standard errors of E(MS), every
/// exact test's null rate within `TOLERANCE_SE` binomial standard errors of alpha, and
/// every power within as many of the analytic power. The report's flags must match its
/// own intervals.
fn assert_agrees(r: &SimulateReport, context: &str) {
    let n = r.runs as f64;
    for t in &r.terms {
        if let (Some(m), Some(se)) = (t.mean_ms, t.mean_ms_se) {
            assert!(
                (m - t.expected_ms).abs() <= TOLERANCE_SE * se,
                "{context}: MS of {} {m} ± {se} vs {}",
                t.label,
                t.expected_ms
            );
        }
        let Some(x) = &t.test else { continue };
        if let Some(null) = x.null {
            assert_eq!(
                x.null_flag,
                !null.holds(r.alpha),
                "{context}: flag of {}",
                t.label
            );
        }
        if x.verdict != emsplan::errorterm::Verdict::Exact {
            continue;
        }
        let binomial =
            |rate: f64, p: f64| (rate - p).abs() <= TOLERANCE_SE * (p * (1.0 - p) / n).sqrt();
        let null = x.null.unwrap();
        assert!(
            binomial(null.rate, r.alpha),
            "{context}: null of {}: {null:?}",
            t.label
        );
        if let (Some(power), Some(p)) = (x.power, x.analytic_power) {
            assert!(
                binomial(power.rate, p),
                "{context}: power of {}: {power:?} vs {p}",
                t.label
            );
        }
    }
}

/// The shipped growth-chamber layout: every test exact, so each null rate must hold alpha
/// and each power the analytic power.
#[test]
fn exact_tests_hold_alpha_and_power_on_a_shipped_layout() {
    let (layout, plan) = load_file("problems/growth-chambers.toml");
    let r = monte_carlo(&layout, &plan, 2024, 8000);
    assert_agrees(&r, "growth chambers");
    let light = r.terms.iter().find(|t| t.label == "light").unwrap();
    let x = light.test.as_ref().unwrap();
    // The power is far from alpha, so the comparison has teeth.
    assert!(x.analytic_power.unwrap() > 0.2 && x.power.unwrap().low > 0.15);
}

/// A nested mixed layout (fertiliser sections on benches in greenhouses) whose error
/// terms differ between the conventions: simulated under each, the mean squares follow
/// that convention's EMS, and not the other's.
#[test]
fn each_convention_simulates_its_own_expected_mean_squares() {
    let text = |c: &str| {
        format!(
            r#"
[layout]
replicates = 2
convention = "{c}"
[[factor]]
name = "fertiliser"
kind = "fixed"
levels = 3
[[factor]]
name = "greenhouse"
kind = "random"
levels = 4
[[factor]]
name = "bench"
kind = "random"
levels = 2
within = ["greenhouse"]
[sd]
residual = 1.0
greenhouse = 1.4
bench = 1.2
"fertiliser x greenhouse" = 1.7
"fertiliser x bench" = 1.4
[effect]
fertiliser = 0.8
"#
        )
    };
    let mut means = Vec::new();
    for c in ["restricted", "unrestricted"] {
        let (layout, plan) = load_text(&text(c));
        let r = monte_carlo(&layout, &plan, 5, 6000);
        assert_agrees(&r, c);
        let g = r.terms.iter().find(|t| t.label == "greenhouse").unwrap();
        means.push((g.expected_ms, g.mean_ms.unwrap(), g.mean_ms_se.unwrap()));
    }
    // Unrestricted E(MS[greenhouse]) adds 2σ²(f x b) + 6σ²(f x g) ≈ 21.3 to the restricted
    // one; each simulation is far from the other convention's value.
    let (er, mr, sr) = means[0];
    let (eu, mu, su) = means[1];
    assert!(eu - er > 15.0);
    assert!((mr - eu).abs() > 10.0 * sr && (mu - er).abs() > 10.0 * su);
}

/// The quasi-F of `recipe` in the shipped coating layout: its null rate, the share of data
/// sets without a quasi-F, and the mean Satterthwaite df agree with the independent
/// chi-square Monte Carlo of the reference script (within 4 standard errors of the
/// difference of two binomial proportions).
#[test]
fn quasi_f_drift_matches_an_independent_monte_carlo() {
    let reference: Value = serde_json::from_str(
        &std::fs::read_to_string(root().join("tests/reference/anova_reference.json")).unwrap(),
    )
    .unwrap();
    let want = &reference["quasi_f_null"];
    let (layout, plan) = load_file("problems/coating-lines.toml");
    assert_eq!(layout.structure.convention, Convention::Restricted);
    let runs = 40_000;
    let r = monte_carlo(&layout, &plan, 77, runs);
    let recipe = r.terms.iter().find(|t| t.label == "recipe").unwrap();
    let x = recipe.test.as_ref().unwrap();
    assert_eq!(x.verdict, emsplan::errorterm::Verdict::QuasiF);
    let m = want["draws"].as_f64().unwrap();
    let n = runs as f64;
    let within = |ours: f64, theirs: f64, what: &str| {
        let p = (ours + theirs) / 2.0;
        let se = (p * (1.0 - p) * (1.0 / n + 1.0 / m)).sqrt().max(1e-4);
        assert!(
            (ours - theirs).abs() < 4.0 * se,
            "{what}: {ours} vs reference {theirs} (se {se})"
        );
    };
    within(
        x.null.unwrap().rate,
        want["null_rate"].as_f64().unwrap(),
        "null rate",
    );
    within(
        x.null_undefined as f64 / n,
        want["undefined"].as_f64().unwrap(),
        "no quasi-F",
    );
    let df = x.simulated_df.unwrap();
    let want_df = want["mean_df"].as_f64().unwrap();
    assert!(
        (df - want_df).abs() < 0.03 * want_df,
        "mean df {df} vs {want_df}"
    );
    // The approximation drifts well below alpha here, and the report flags it.
    assert!(x.null_flag && x.null.unwrap().high < 0.05);
    // The layout's mean squares and exact tests still hold.
    assert_agrees(&r, "coating lines");
}

/// The data set written by `simulate --data` and read back by `analyze` gives the mean
/// squares the same run reported, with labels numbered within nests or globally.
#[test]
fn dummy_data_round_trip_through_analyze() {
    let dir = scratch("round-trip");
    for unique in [false, true] {
        let data = dir.join(format!("chambers-{unique}.csv"));
        let data_s = data.to_str().unwrap();
        let mut args = vec![
            "simulate",
            "problems/growth-chambers.toml",
            "--seed",
            "31",
            "--runs",
            "0",
            "--mean",
            "12",
            "--data",
            data_s,
            "--format",
            "json",
        ];
        if unique {
            args.push("--unique-labels");
        }
        let out = emsplan(&args);
        assert!(
            out.status.success(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
        let sim: Value = serde_json::from_slice(&out.stdout).unwrap();
        let text = std::fs::read_to_string(&data).unwrap();
        assert_eq!(text.lines().next(), Some("light,chamber,cultivar,response"));
        assert_eq!(text.lines().count(), 109);
        let chamber_labels: std::collections::BTreeSet<&str> = text
            .lines()
            .skip(1)
            .map(|l| l.split(',').nth(1).unwrap())
            .collect();
        assert_eq!(chamber_labels.len(), if unique { 9 } else { 3 }, "{unique}");

        let out = emsplan(&[
            "analyze",
            "problems/growth-chambers.toml",
            data_s,
            "--format",
            "json",
        ]);
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
            assert_eq!(w["term"], t["label"]);
            let (a, b) = (w["ms"].as_f64().unwrap(), t["ms"].as_f64().unwrap());
            assert!(
                (a - b).abs() <= 1e-12 * a.abs(),
                "{}: {a} vs {b}",
                w["term"]
            );
        }
        assert!((ana["grand_mean"].as_f64().unwrap() - 12.0).abs() < 1.5);
    }
}

/// The same seed gives the same output, whatever the number of threads; another seed
/// gives other numbers.
#[test]
fn seeded_and_independent_of_threads() {
    let run = |seed: &str, threads: &str| {
        let out = Command::new(BIN)
            .current_dir(root())
            .env("RAYON_NUM_THREADS", threads)
            .args([
                "simulate",
                "problems/coating-lines.toml",
                "--runs",
                "700",
                "--seed",
                seed,
                "--format",
                "json",
            ])
            .output()
            .unwrap();
        assert!(out.status.success());
        String::from_utf8(out.stdout).unwrap()
    };
    let one = run("9", "1");
    assert_eq!(one, run("9", "2"));
    assert_eq!(one, run("9", "3"));
    assert_ne!(one, run("10", "2"));
}

/// Every format renders, with the caution about planning values.
#[test]
fn binary_runs_in_every_format() {
    for format in ["text", "json", "markdown", "csv"] {
        let out = emsplan(&[
            "simulate",
            "problems/coating-lines.toml",
            "--runs",
            "300",
            "--format",
            format,
        ]);
        assert!(out.status.success(), "{format}");
        let text = String::from_utf8(out.stdout).unwrap();
        assert!(text.contains("recipe x line x shift"), "{format}");
        if format == "text" || format == "markdown" {
            assert!(
                text.contains("statistician") && text.contains("Wilson"),
                "{format}"
            );
        }
    }
}

/// Without planning values simulate says why and what to do; too many runs is refused too.
#[test]
fn refuses_what_it_cannot_simulate() {
    let out = emsplan(&["simulate", "problems/tank-split-plot.toml"]);
    assert_eq!(out.status.code(), Some(1));
    let err = String::from_utf8(out.stderr).unwrap();
    assert_eq!(err.lines().count(), 1);
    assert!(
        err.contains("problems/tank-split-plot.toml") && err.contains("[sd]"),
        "{err}"
    );

    let out = emsplan(&[
        "simulate",
        "problems/coating-lines.toml",
        "--runs",
        "1000000000",
    ]);
    assert_eq!(out.status.code(), Some(1));
}

/// The shipped data set is what its stated command writes, byte for byte, and `analyze`
/// reads it: `emsplan simulate problems/growth-chambers.toml --seed 7 --mean 12 --data
/// problems/growth-chambers-data.csv` (README.md).
#[test]
fn shipped_data_set_is_reproduced() {
    let dir = scratch("shipped");
    let again = dir.join("again.csv");
    let out = emsplan(&[
        "simulate",
        "problems/growth-chambers.toml",
        "--seed",
        "7",
        "--mean",
        "12",
        "--runs",
        "0",
        "--data",
        again.to_str().unwrap(),
    ]);
    assert!(out.status.success());
    let shipped = std::fs::read(root().join("problems/growth-chambers-data.csv")).unwrap();
    assert_eq!(std::fs::read(&again).unwrap(), shipped);
    let out = emsplan(&[
        "analyze",
        "problems/growth-chambers.toml",
        "problems/growth-chambers-data.csv",
    ]);
    assert!(out.status.success());
    assert!(
        String::from_utf8(out.stdout)
            .unwrap()
            .contains("Variance components")
    );
}

/// Random factors from finite populations (Cornfield and Tukey 1956): three operators
/// from a crew of five, crossed with a fixed machine and random batches; and three
/// greenhouses of six, with two benches of four in each. In every data set the levels are
/// a fresh sample without replacement, and the effects of every term live in a finite
/// factor are centred over its population. Under both conventions the mean squares follow
/// the engine's expected mean squares, with their factors (1 - n/N), and the exact tests
/// hold alpha and their power.
#[test]
fn finite_populations_follow_their_expected_mean_squares() {
    let crew = |c: &str, population: &str| {
        format!(
            r#"
[layout]
replicates = 2
convention = "{c}"
[[factor]]
name = "machine"
kind = "fixed"
levels = 2
[[factor]]
name = "operator"
kind = "random"
levels = 3
{population}
[[factor]]
name = "batch"
kind = "random"
levels = 4
[sd]
residual = 1.0
operator = 1.4
batch = 1.0
"machine x operator" = 1.2
"machine x batch" = 1.0
"operator x batch" = 1.7
"machine x operator x batch" = 1.4
[effect]
machine = 0.5
"#
        )
    };
    let greenhouses = |c: &str| {
        format!(
            r#"
[layout]
replicates = 2
convention = "{c}"
[[factor]]
name = "fertiliser"
kind = "fixed"
levels = 3
[[factor]]
name = "greenhouse"
kind = "random"
levels = 3
population = 6
[[factor]]
name = "bench"
kind = "random"
levels = 2
population = 4
within = ["greenhouse"]
[sd]
residual = 1.0
greenhouse = 1.4
bench = 1.2
"fertiliser x greenhouse" = 1.7
"fertiliser x bench" = 1.4
[effect]
fertiliser = 0.8
"#
        )
    };
    for c in ["restricted", "unrestricted"] {
        let (layout, plan) = load_text(&crew(c, "population = 5"));
        let r = monte_carlo(&layout, &plan, 41, 20_000);
        assert_agrees(&r, &format!("crew, {c}"));
        // With an infinite crew E(MS[batch]) would hold 4σ²(operator x batch) in full, not
        // (1 - 3/5) of it: 4 × (3/5) × 1.7² = 6.936 more; unrestricted, also 2σ²(machine x
        // operator x batch) in full: 2 × (3/5) × 1.4² = 2.352 more. The simulation rules
        // the infinite crew out.
        let want_gap = 2.4 * 1.7f64.powi(2)
            + if c == "unrestricted" {
                1.2 * 1.4f64.powi(2)
            } else {
                0.0
            };
        let (inf_layout, inf_plan) = load_text(&crew(c, ""));
        let inf = monte_carlo(&inf_layout, &inf_plan, 41, 0);
        let b = r.terms.iter().position(|t| t.label == "batch").unwrap();
        let gap = inf.terms[b].expected_ms - r.terms[b].expected_ms;
        assert!((gap - want_gap).abs() < 1e-9, "{c}: {gap}");
        let (m, se) = (r.terms[b].mean_ms.unwrap(), r.terms[b].mean_ms_se.unwrap());
        assert!((inf.terms[b].expected_ms - m).abs() > 10.0 * se, "{c}");

        let (layout, plan) = load_text(&greenhouses(c));
        let r = monte_carlo(&layout, &plan, 42, 20_000);
        assert_agrees(&r, &format!("greenhouses, {c}"));
    }
}
