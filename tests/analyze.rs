//! `analyze` against reference values from outside the project.
//!
//! The reference is `tests/reference/anova_reference.json`, written by the committed script
//! `tests/reference/anova_reference.py` (statsmodels' `anova_lm` with typ=1, scipy's F
//! tail, and the method-of-moments equations solved with numpy; the versions are inside
//! the JSON). The fixture data sets in `tests/fixtures/data/` are invented.
//!
//! Tolerances: sums of squares, F and variance components agree to 1e-9 relative (both
//! sides are double precision on a few dozen observations); p-values to 1e-9 absolute
//! plus 1e-7 relative (scipy and `dist` are separate implementations of the F tail).

use std::path::Path;
use std::process::Command;

use emsplan::analyze::AnalyzeReport;
use serde_json::Value;

mod common;

use common::{layout_from_file, layout_from_text, root, run};

fn reference() -> Value {
    common::reference("anova_reference.json")
}

/// Five batches drawn at random, three samples drawn from each, two determinations of each
/// sample: the two-stage nested random design of the purity fixture.
const BATCHES: &str = r#"
[layout]
name = "Purity of batches"
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

fn close(a: f64, b: f64, rel: f64) -> bool {
    (a - b).abs() <= rel * a.abs().max(b.abs()).max(1e-300)
}

fn num(v: &Value) -> f64 {
    v.as_f64().unwrap_or_else(|| panic!("not a number: {v}"))
}

/// Holds a report against one fixture's reference: SS, df and F over the residual
/// (statsmodels), the planned tests (by hand in the script, p from scipy) and the variance
/// components (numpy's solve of the moment equations).
fn check_against(r: &AnalyzeReport, reference: &Value) {
    let residual_ms = r
        .terms
        .iter()
        .find(|t| t.residual)
        .and_then(|t| t.ms)
        .unwrap();
    let terms = reference["terms"].as_object().unwrap();
    assert_eq!(terms.len(), r.terms.len(), "every term is in the reference");
    for t in &r.terms {
        let want = &terms[&t.label];
        assert!(
            close(t.ss, num(&want["ss"]), 1e-9),
            "SS of {}: {} vs statsmodels {}",
            t.label,
            t.ss,
            want["ss"]
        );
        assert_eq!(t.df as f64, num(&want["df"]), "df of {}", t.label);
        if !t.residual {
            let f = t.ms.unwrap() / residual_ms;
            assert!(
                close(f, num(&want["f_over_residual"]), 1e-9),
                "F over the residual of {}: {f} vs statsmodels {}",
                t.label,
                want["f_over_residual"]
            );
        }
    }
    let planned = reference["planned"].as_object().unwrap();
    for (label, want) in planned {
        let row = r.terms.iter().find(|t| &t.label == label).unwrap();
        let test = row.test.as_ref().unwrap();
        let f = test.f.expect("an F");
        let df2 = test.denominator_df.expect("den. df");
        let p = test.p.expect("a p-value");
        assert!(
            close(f, num(&want["f"]), 1e-9),
            "F of {label}: {f} vs {}",
            want["f"]
        );
        assert!(
            close(df2, num(&want["df2"]), 1e-9),
            "den. df of {label}: {df2} vs {}",
            want["df2"]
        );
        let wp = num(&want["p"]);
        assert!(
            (p - wp).abs() <= 1e-9 + 1e-7 * wp,
            "p of {label}: {p} vs scipy {wp}"
        );
    }
    let comps = reference["components"].as_object().unwrap();
    assert_eq!(comps.len(), r.components.len());
    for c in &r.components {
        let want = num(&comps[&c.term]);
        let got = c.estimate.expect("estimable");
        assert!(
            (got - want).abs() <= 1e-9 * want.abs().max(1.0),
            "component {}: {got} vs {want}",
            c.term
        );
        assert_eq!(c.negative, want < 0.0, "negative flag of {}", c.term);
    }
}

/// A crossed mixed layout with a quasi-F test: recipe (fixed) x line x shift (random).
#[test]
fn crossed_layout_against_statsmodels() {
    let reference = reference();
    let layout = layout_from_file("problems/coating-lines.toml");
    let r = run(&layout, "tests/fixtures/data/coating-crossed.csv");
    assert_eq!(r.response, "thickness");
    check_against(&r, &reference["coating"]);
    // The fixture has negative estimates, which must be flagged with the usual advice.
    assert!(r.components.iter().any(|c| c.negative));
    assert!(
        r.notes
            .iter()
            .any(|n| matches!(n, emsplan::analyze::Note::NegativeComponents { .. }))
    );
}

/// Chambers nested in light regimes, crossed with cultivars; chamber labels within light.
#[test]
fn nested_mixed_layout_against_statsmodels() {
    let reference = reference();
    let layout = layout_from_file("problems/growth-chambers.toml");
    let r = run(&layout, "tests/fixtures/data/chambers-nested.csv");
    let reference = &reference["chambers"];
    check_against(&r, reference);
    assert!(close(r.grand_mean, num(&reference["grand_mean"]), 1e-12));
    // Marginal means against pandas' groupby means.
    for factor in ["light", "cultivar"] {
        let table = r.means.iter().find(|m| m.term == factor).unwrap();
        let want = reference["means"][factor].as_object().unwrap();
        assert_eq!(table.rows.len(), want.len());
        for row in &table.rows {
            let w = num(&want[&row.levels[0]]);
            assert!(
                close(row.mean, w, 1e-12),
                "{factor} {}: {} vs {w}",
                row.levels[0],
                row.mean
            );
        }
    }
    let cells = r
        .means
        .iter()
        .find(|m| m.term == "light x cultivar")
        .unwrap();
    assert_eq!((cells.rows.len(), cells.per_mean), (12, Some(9)));
}

/// A two-stage nested random design with sample labels unique across batches.
#[test]
fn nested_random_layout_against_numpy() {
    let reference = reference();
    let layout = layout_from_text(BATCHES);
    let r = run(&layout, "tests/fixtures/data/batches-nested.csv");
    check_against(&r, &reference["batches"]);
    assert!(r.means.is_empty(), "no fixed terms, no means tables");
}

/// The method-of-moments estimate of a testable term is (MS_T - D) / c_TT, D being its
/// error term's denominator, whose expectation is E(MS_T) less c_TT θ_T: an identity of
/// the definitions that holds the back-substitution to the error terms.
#[test]
fn moment_estimates_agree_with_error_terms() {
    let layout = layout_from_file("problems/coating-lines.toml");
    let r = run(&layout, "tests/fixtures/data/coating-crossed.csv");
    let a = emsplan::engine::Analysis::new(&layout).unwrap();
    let ms: Vec<f64> = r.terms.iter().map(|t| t.ms.unwrap_or(f64::NAN)).collect();
    let theta = emsplan::analyze::moment_estimates(&a, &ms);
    for (t, e) in a.tests.iter().enumerate() {
        let Some(e) = e else { continue };
        if a.model.kinds[t] != emsplan::layout::Kind::Random {
            continue;
        }
        let d: f64 = e.denominator.iter().map(|(v, w)| w.value() * ms[*v]).sum();
        let own = a.coefficient(t, t);
        let want = (ms[t] - d) / own;
        let got = theta[t].unwrap();
        assert!(
            (got - want).abs() < 1e-9 * want.abs().max(1.0),
            "{t}: {got} vs {want}"
        );
    }
}

/// The binary on the shipped layout and fixture, in every format.
#[test]
fn binary_runs_in_every_format() {
    let bin = env!("CARGO_BIN_EXE_emsplan");
    for format in ["text", "json", "markdown", "csv"] {
        let out = Command::new(bin)
            .current_dir(root())
            .args([
                "analyze",
                "problems/coating-lines.toml",
                "tests/fixtures/data/coating-crossed.csv",
                "--format",
                format,
            ])
            .output()
            .unwrap();
        assert!(
            out.status.success(),
            "{format}: {}",
            String::from_utf8_lossy(&out.stderr)
        );
        let text = String::from_utf8(out.stdout).unwrap();
        assert!(text.contains("recipe x line x shift"), "{format}");
        if format == "json" {
            let v: Value = serde_json::from_str(&text).unwrap();
            assert_eq!(v["terms"].as_array().unwrap().len(), 8);
        }
        if format == "text" {
            // A quasi-F's error term is listed under the table; a negative component
            // is marked in words.
            assert!(text.contains("combined (below)") && text.contains("Quasi-F tests"));
            assert!(text.contains("negative (see below)"));
            assert!(text.contains("statistician"));
        }
    }
}

/// `--response` picks a column; with several candidate columns and none named `response`
/// the binary asks for it.
#[test]
fn response_column_choice() {
    let dir = Path::new(env!("CARGO_TARGET_TMPDIR")).join("analyze-response");
    std::fs::create_dir_all(&dir).unwrap();
    let src =
        std::fs::read_to_string(root().join("tests/fixtures/data/batches-nested.csv")).unwrap();
    let mut lines = src.lines();
    let mut text = format!("{},operator\n", lines.next().unwrap());
    for l in lines {
        text.push_str(&format!("{l},ana\n"));
    }
    let data = dir.join("two.csv");
    std::fs::write(&data, &text).unwrap();
    let lay = dir.join("batches.toml");
    std::fs::write(&lay, BATCHES).unwrap();
    let bin = env!("CARGO_BIN_EXE_emsplan");
    let out = Command::new(bin)
        .arg("analyze")
        .arg(&lay)
        .arg(&data)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(1));
    let err = String::from_utf8(out.stderr).unwrap();
    assert!(
        err.contains("--response") && err.contains("purity, operator"),
        "{err}"
    );
    let out = Command::new(bin)
        .arg("analyze")
        .arg(&lay)
        .arg(&data)
        .args(["--response", "purity", "--format", "json"])
        .output()
        .unwrap();
    assert!(out.status.success());
    let v: Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(v["response"], "purity");
}
