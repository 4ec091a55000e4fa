//! `analyze` on unbalanced data against reference values from outside the project.
//!
//! The reference is `tests/reference/unbalanced_reference.json`, written by the committed
//! script `tests/reference/unbalanced_reference.py` from the fixtures it writes in
//! `tests/fixtures/data/` (balanced invented fixtures with observations taken out):
//! sums of squares from projections built with numpy's pseudo-inverse (sequential) or
//! from statsmodels' `anova_lm(typ=3)` (type III, full rank), the coefficients of the
//! expected mean squares by Hartley's (1967) synthesis computed there at the level of the
//! observations (trace(A Z Z') / df, independent of emsplan's cell-space bases), the
//! method-of-moments components solved with numpy, F over the residual with scipy's p, and
//! raw means from pandas.
//!
//! Tolerances: 1e-8 relative on sums of squares, coefficients, F and components (double
//! precision on about a hundred observations, two independent routes); p to 1e-9 absolute
//! plus 1e-7 relative (scipy and `dist` are separate implementations of the F tail).

use std::path::PathBuf;
use std::process::Command;

use emsplan::analyze::{AnalyzeReport, analyze, read_data};
use emsplan::errorterm::Verdict;
use serde_json::Value;

mod common;

use common::{layout_from_file, layout_from_text, root, run};

fn reference() -> Value {
    common::reference("unbalanced_reference.json")
}

fn close(a: f64, b: f64, rel: f64, what: &str) {
    assert!(
        (a - b).abs() <= rel * b.abs().max(1e-12) + 1e-12,
        "{what}: {a} vs reference {b}"
    );
}

/// The coating fixture's layout (problems/coating-lines.toml) with type III sums of
/// squares asked for.
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

/// Everything the report says that the reference holds: sums of squares and df; every
/// planned denominator reproducing, under the reference's own synthesised coefficients,
/// the expected mean square it claims (E(MS_T) less T's own component); F and the
/// quasi-F from the reference's mean squares; p over the residual; the components.
fn holds(report: &AnalyzeReport, case: &Value) {
    let terms = &case["terms"];
    let ems = &case["ems"];
    assert_eq!(report.observations, case["observations"].as_u64().unwrap());
    assert!(report.imbalance.is_some(), "reported as unbalanced");
    let ms =
        |label: &str| terms[label]["ss"].as_f64().unwrap() / terms[label]["df"].as_f64().unwrap();
    for row in &report.terms {
        let r = &terms[&row.label];
        assert!(r.is_object(), "the reference has {}", row.label);
        assert_eq!(
            row.df as f64,
            r["df"].as_f64().unwrap(),
            "df of {}",
            row.label
        );
        close(
            row.ss,
            r["ss"].as_f64().unwrap(),
            1e-8,
            &format!("SS of {}", row.label),
        );
        let Some(test) = &row.test else { continue };
        if !test.verdict.is_testable() {
            continue;
        }
        // Σ w E(MS_v) against E(MS_T) without T's own component, component by component
        // (random components and σ², which is all the reference synthesises).
        let own = ems[&row.label].as_object().unwrap();
        for (component, coefficient) in own {
            if *component == row.label {
                continue;
            }
            let combined: f64 = test
                .denominator
                .iter()
                .map(|d| d.coefficient.value() * ems[&d.term][component].as_f64().unwrap_or(0.0))
                .sum();
            close(
                combined,
                coefficient.as_f64().unwrap(),
                1e-8,
                &format!("{} denominator, {component}", row.label),
            );
        }
        let d: f64 = test
            .denominator
            .iter()
            .map(|p| p.coefficient.value() * ms(&p.term))
            .sum();
        close(
            test.f.unwrap(),
            ms(&row.label) / d,
            1e-8,
            &format!("F of {}", row.label),
        );
        let over_residual =
            test.verdict == Verdict::Exact && test.denominator[0].term == "residual";
        if over_residual {
            let p = case["over_residual"][&row.label]["p"].as_f64().unwrap();
            let ours = test.p.unwrap();
            assert!(
                (ours - p).abs() <= 1e-9 + 1e-7 * p,
                "p of {}: {ours} vs scipy {p}",
                row.label
            );
        }
    }
    for c in &report.components {
        let want = case["components"][&c.term].as_f64().unwrap();
        close(
            c.estimate.unwrap(),
            want,
            1e-8,
            &format!("component of {}", c.term),
        );
    }
    close(
        report.grand_mean,
        case["grand_mean"].as_f64().unwrap(),
        1e-12,
        "grand mean",
    );
}

#[test]
fn lost_chamber_pot_and_cell_sequential() {
    let reference = reference();
    let case = &reference["chambers"];
    let layout = layout_from_file("problems/growth-chambers.toml");
    let report = run(&layout, case["data"].as_str().unwrap());
    holds(&report, case);
    let i = report.imbalance.as_ref().unwrap();
    // 108 planned: a chamber (12 pots), a cell (3 pots) and a pot lost.
    assert_eq!(
        (i.full_observations, i.empty_cells, i.lost_observations),
        (108, 5, 1)
    );
    assert_eq!(report.observations, 92);
    // The layout says restricted; unbalanced data are analysed under the unrestricted model.
    let notes: Vec<String> = report
        .notes
        .iter()
        .map(emsplan::render::analyze_words::note)
        .collect();
    assert!(notes.iter().any(|n| n.contains("unrestricted model")));
    assert!(
        notes.iter().any(|n| n.contains(
            "chamber within light = light2: 2 of its 3 levels observed (chamber1, chamber2)"
        )),
        "{notes:?}"
    );
    // Raw means against pandas' groupby.
    for table in report.means.iter().filter(|m| m.factors.len() == 1) {
        let want = &case["means"][&table.term];
        for row in &table.rows {
            close(
                row.mean,
                want[&row.levels[0]].as_f64().unwrap(),
                1e-12,
                &table.term,
            );
        }
        assert_eq!(table.per_mean, None, "unequal counts");
    }
}

#[test]
fn coating_three_panels_lost_type_three() {
    let reference = reference();
    let case = &reference["coating"];
    let report = run(
        &layout_from_text(COATING_TYPE3),
        case["data"].as_str().unwrap(),
    );
    holds(&report, case);
    assert_eq!(report.imbalance.as_ref().unwrap().lost_observations, 3);
}

#[test]
fn batches_with_a_lost_sample_sequential() {
    let reference = reference();
    let case = &reference["batches"];
    let report = run(&layout_from_text(BATCHES), case["data"].as_str().unwrap());
    holds(&report, case);
    // batch is tested over sample(batch) by a combination: with unequal samples per batch
    // the sample coefficient in E(MS batch) is not that in E(MS sample(batch)) (the
    // two-stage nested coefficients, e.g. Sokal and Rohlf, Biometry; from memory).
    let batch = report.terms.iter().find(|t| t.label == "batch").unwrap();
    assert_eq!(batch.test.as_ref().unwrap().verdict, Verdict::QuasiF);
}

/// Balanced data give the balanced analysis unchanged, even when rows with a missing
/// response are added (they are left out and noted).
#[test]
fn missing_values_are_left_out() {
    let layout = layout_from_file("problems/growth-chambers.toml");
    let good =
        std::fs::read_to_string(root().join("tests/fixtures/data/chambers-nested.csv")).unwrap();
    let with_na = format!("{good}light1,chamber1,cultivar1,NA\nlight2,chamber2,cultivar3,\n");
    let dir = PathBuf::from(env!("CARGO_TARGET_TMPDIR"));
    let path = dir.join("chambers-with-na.csv");
    std::fs::write(&path, with_na).unwrap();
    let plain = run(&layout, "tests/fixtures/data/chambers-nested.csv");
    let obs = read_data(&path, &layout, None).unwrap();
    let report = analyze(&layout, &obs, 0.05).unwrap();
    assert!(report.imbalance.is_none());
    for (a, b) in report.terms.iter().zip(&plain.terms) {
        assert_eq!(a.ss, b.ss);
    }
    assert_eq!(
        report.notes[0],
        emsplan::analyze::Note::MissingResponses {
            lines: vec![110, 111]
        }
    );
    let first = emsplan::render::analyze_words::note(&report.notes[0]);
    assert!(
        first.contains("2 rows have no response value and are left out (lines 110, 111)"),
        "{first}"
    );
}

/// The binary on the shipped example data of an unbalanced layout.
#[test]
fn the_binary_analyses_the_shipped_unbalanced_data() {
    let out = Command::new(env!("CARGO_BIN_EXE_emsplan"))
        .current_dir(root())
        .args([
            "analyze",
            "problems/unbalanced-lost-chamber.toml",
            "problems/unbalanced-lost-chamber-data.csv",
        ])
        .output()
        .unwrap();
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert!(
        text.contains("Unbalanced data: 94 of the layout's 108 observations"),
        "{text}"
    );
    assert!(
        text.contains("combined (below)") && text.contains("Quasi-F tests"),
        "synthetic tests: {text}"
    );
}

/// A fixed level with no observation at all cannot be compared: refused, naming it.
#[test]
fn an_unobserved_fixed_level_is_refused() {
    let layout = layout_from_file("problems/growth-chambers.toml");
    let good =
        std::fs::read_to_string(root().join("tests/fixtures/data/chambers-nested.csv")).unwrap();
    let without: String = good
        .lines()
        .filter(|l| !l.contains("cultivar4"))
        .map(|l| format!("{l}\n"))
        .collect();
    let obs = emsplan::analyze::parse_data("no-cultivar4.csv", without.as_bytes(), &layout, None)
        .expect("reads");
    let err = analyze(&layout, &obs, 0.05).unwrap_err().to_string();
    assert!(
        err.starts_with("no-cultivar4.csv: the data hold observations of only 3 of the 4 levels of the fixed factor \"cultivar\" (cultivar1, cultivar2, cultivar3)"),
        "{err}"
    );
    assert!(
        err.contains("give cultivar 3 levels in the layout"),
        "{err}"
    );
}

/// Unbalanced data of a layout with a finite population: refused in one line that says
/// what to change (the synthesis assumes random factors drawn from large populations).
#[test]
fn unbalanced_data_with_a_finite_population_are_refused() {
    let text = std::fs::read_to_string(root().join("problems/growth-chambers.toml"))
        .unwrap()
        .replace(
            "within = [\"light\"]",
            "within = [\"light\"]\npopulation = 12",
        );
    let layout = layout_from_text(&text);
    let data = std::fs::read(root().join("tests/fixtures/data/chambers-lost.csv")).unwrap();
    let obs = emsplan::analyze::parse_data("lost.csv", &data, &layout, None).expect("reads");
    let err = analyze(&layout, &obs, 0.05).unwrap_err().to_string();
    assert!(
        err.starts_with("lost.csv: the data are unbalanced"),
        "{err}"
    );
    assert!(err.contains("remove `population`"), "{err}");
    assert_eq!(err.lines().count(), 1);
}
