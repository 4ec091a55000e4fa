//! The CSV of `analyze`, `simulate` and `search` is tidy: snake_case headings, one row
//! per unit of the table (a term; a candidate and must-test term), the same fields on
//! every row, empty fields for missing values, and numbers that read back as the very
//! values of the JSON output.

use std::path::PathBuf;
use std::process::Command;

use serde_json::Value;

fn emsplan(args: &[&str]) -> String {
    let out = Command::new(env!("CARGO_BIN_EXE_emsplan"))
        .current_dir(PathBuf::from(env!("CARGO_MANIFEST_DIR")))
        .args(args)
        .output()
        .expect("run emsplan");
    assert!(
        out.status.success(),
        "{args:?}: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    String::from_utf8(out.stdout).expect("UTF-8")
}

/// The header and rows of a CSV text, every row as long as the header.
fn table(text: &str) -> (Vec<String>, Vec<Vec<String>>) {
    let mut r = csv::Reader::from_reader(text.as_bytes());
    let header: Vec<String> = r.headers().unwrap().iter().map(String::from).collect();
    let rows: Vec<Vec<String>> = r
        .records()
        .map(|x| x.unwrap().iter().map(String::from).collect())
        .collect();
    for h in &header {
        assert!(
            !h.is_empty()
                && h.chars()
                    .all(|c| c.is_ascii_lowercase() || c.is_ascii_digit() || c == '_'),
            "heading {h:?} is not snake_case"
        );
    }
    for row in &rows {
        assert_eq!(row.len(), header.len());
        assert!(
            !row.iter().any(|c| c == "-"),
            "a missing value is empty: {row:?}"
        );
    }
    (header, rows)
}

fn column(header: &[String], name: &str) -> usize {
    header
        .iter()
        .position(|h| h == name)
        .unwrap_or_else(|| panic!("no column {name}"))
}

/// A CSV field against a JSON number: equal to within two units in the last place (the
/// JSON reader's default float parsing may be one unit off; a rounded figure would be
/// millions of units off), or both missing.
fn same(field: &str, json: &Value, what: &str) {
    match json.as_f64() {
        Some(v) => {
            let x: f64 = field
                .parse()
                .unwrap_or_else(|_| panic!("{what}: {field:?} is not a number"));
            assert!(
                (x - v).abs() <= 2.0 * f64::EPSILON * v.abs(),
                "{what}: {field} against {v}"
            );
        }
        None => assert_eq!(field, "", "{what}"),
    }
}

#[test]
fn analyze_csv_is_one_row_per_term_in_full_precision() {
    let args = [
        "analyze",
        "problems/unbalanced-lost-chamber.toml",
        "problems/unbalanced-lost-chamber-data.csv",
    ];
    let (header, rows) = table(&emsplan(&[&args[..], &["--format", "csv"]].concat()));
    let v: Value =
        serde_json::from_str(&emsplan(&[&args[..], &["--format", "json"]].concat())).unwrap();
    let terms = v["terms"].as_array().unwrap();
    assert_eq!(rows.len(), terms.len());
    for (row, t) in rows.iter().zip(terms) {
        assert_eq!(row[column(&header, "term")], t["label"]);
        same(&row[column(&header, "sum_of_squares")], &t["ss"], "ss");
        same(&row[column(&header, "mean_square")], &t["ms"], "ms");
        same(&row[column(&header, "p")], &t["test"]["p"], "p");
        same(
            &row[column(&header, "denominator_df")],
            &t["test"]["denominator_df"],
            "den. df",
        );
    }
}

#[test]
fn simulate_csv_is_one_row_per_term_in_full_precision() {
    let args = ["simulate", "problems/coating-lines.toml", "--runs", "60"];
    let (header, rows) = table(&emsplan(&[&args[..], &["--format", "csv"]].concat()));
    let v: Value =
        serde_json::from_str(&emsplan(&[&args[..], &["--format", "json"]].concat())).unwrap();
    let terms = v["terms"].as_array().unwrap();
    assert_eq!(rows.len(), terms.len());
    for (row, t) in rows.iter().zip(terms) {
        assert_eq!(row[column(&header, "term")], t["label"]);
        same(&row[column(&header, "mean_ms")], &t["mean_ms"], "mean MS");
        same(
            &row[column(&header, "power_rate")],
            &t["test"]["power"]["rate"],
            "power rate",
        );
        let undefined = &row[column(&header, "denominator_not_positive")];
        if t["test"]["verdict"] == "quasi_f" {
            assert_eq!(undefined, &t["test"]["undefined"].to_string());
        } else {
            assert_eq!(
                undefined, "",
                "{}: only quasi-F tests count these",
                t["label"]
            );
        }
    }
}

#[test]
fn search_csv_is_one_row_per_candidate_and_must_test_term() {
    for p in [
        "problems/search-chamber-power.toml",
        "problems/search-bread-panel.toml",
    ] {
        let (header, rows) = table(&emsplan(&["search", p, "--format", "csv"]));
        let v: Value = serde_json::from_str(&emsplan(&["search", p, "--format", "json"])).unwrap();
        let candidates = v["candidates"].as_array().unwrap();
        let must = v["constraints"]["must_test"].as_array().unwrap();
        assert_eq!(rows.len(), candidates.len() * must.len(), "{p}");
        let mut k = 0;
        for (i, c) in candidates.iter().enumerate() {
            for (j, t) in c["tests"].as_array().unwrap().iter().enumerate() {
                let row = &rows[k];
                k += 1;
                assert_eq!(row[column(&header, "rank")], (i + 1).to_string());
                assert_eq!(row[column(&header, "term")], must[j]);
                same(&row[column(&header, "cost")], &c["cost"], "cost");
                same(&row[column(&header, "power")], &t["power"], "power");
                for f in c["factors"].as_array().unwrap() {
                    let name = f["name"].as_str().unwrap();
                    assert_eq!(
                        row[column(&header, &format!("{name}_levels"))],
                        f["levels"].to_string(),
                        "{p}: {name}"
                    );
                }
            }
        }
        // A factor a candidate leaves out has an empty level count.
        if p.contains("chamber-power") {
            let bench = column(&header, "bench_levels");
            let structure = column(&header, "structure");
            assert!(rows.iter().any(|r| r[structure] == "no bench"));
            for r in &rows {
                assert_eq!(r[bench].is_empty(), r[structure] == "no bench", "{r:?}");
            }
        }
    }
}
