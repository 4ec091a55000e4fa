//! `check` and `compare` on unbalanced layouts through the binary: the shipped examples,
//! `compare --remove`, and every kind of bad removal (one line on stderr naming the file
//! and line, exit 1 for a file, exit 2 for a command line; never a panic).
//!
//! Expected values come from the unbalanced nested formulas held in tests/unbalanced.rs
//! (Sokal and Rohlf, Biometry; Searle, Casella and McCulloch 1992): with tanks of equal
//! size n, σ²(tank) enters E(MS[temperature]) with n₀' = n, κ²(temperature) with
//! n₀'' = (N - Σ n_i.²/N)/(a - 1), and temperature is tested over tank(temperature) on
//! Σ b_i - a df.

use std::path::PathBuf;
use std::process::Command;

use serde_json::Value;

fn problem(name: &str) -> String {
    format!("{}/problems/{name}", env!("CARGO_MANIFEST_DIR"))
}

fn run(args: &[&str]) -> (i32, String, String) {
    let out = Command::new(env!("CARGO_BIN_EXE_emsplan"))
        .args(args)
        .output()
        .expect("the binary runs");
    (
        out.status.code().unwrap_or(-1),
        String::from_utf8_lossy(&out.stdout).into_owned(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

fn json(args: &[&str]) -> Value {
    let mut all = args.to_vec();
    all.extend_from_slice(&["--format", "json"]);
    let (code, out, err) = run(&all);
    assert_eq!(code, 0, "{args:?}: {err}");
    serde_json::from_str(&out).expect("JSON")
}

fn term<'a>(report: &'a Value, label: &str) -> &'a Value {
    report["terms"]
        .as_array()
        .unwrap()
        .iter()
        .find(|t| t["label"] == label)
        .unwrap_or_else(|| panic!("no term {label}"))
}

fn coefficient(t: &Value, component: &str) -> f64 {
    t["ems"]
        .as_array()
        .unwrap()
        .iter()
        .find(|c| c["component"] == component)
        .map_or(0.0, |c| c["coefficient"].as_f64().unwrap())
}

fn scratch(name: &str, text: &str) -> PathBuf {
    let dir = PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join("unbalanced_cli");
    std::fs::create_dir_all(&dir).unwrap();
    let path = dir.join(name);
    std::fs::write(&path, text).unwrap();
    path
}

/// "We have five units for two treatments": 3 tanks under one temperature, 2 under the
/// other, 6 fish each. N = 30, n_i. = 18 and 12.
#[test]
fn five_tanks_for_two_temperatures() {
    let v = json(&["check", &problem("unbalanced-tanks.toml")]);
    assert_eq!(v["observations"], 30);
    assert_eq!(v["convention"], "unrestricted");
    assert_eq!(v["unbalanced"]["sums_of_squares"], "sequential");
    let t = term(&v, "temperature");
    assert_eq!(t["df"], 1);
    assert!((coefficient(t, "tank(temperature)") - 6.0).abs() < 1e-9);
    let n0pp = 30.0 - (18.0f64 * 18.0 + 12.0 * 12.0) / 30.0;
    assert!((coefficient(t, "temperature") - n0pp).abs() < 1e-9);
    assert_eq!(t["test"]["verdict"], "exact");
    assert_eq!(t["test"]["denominator"][0]["term"], "tank(temperature)");
    assert_eq!(t["test"]["denominator_df"], 3.0);
    assert!(t["test"]["power"].as_f64().unwrap() > 0.05);
    assert_eq!(term(&v, "residual")["df"], 25);
    // Five tanks and thirty fish are paid for.
    assert_eq!(v["cost"]["total"], 5.0 * 1200.0 + 30.0 * 15.0);
    // Every format runs, and the text carries the caution and what was removed.
    for format in ["text", "markdown", "csv"] {
        let (code, out, err) = run(&[
            "check",
            &problem("unbalanced-tanks.toml"),
            "--format",
            format,
        ]);
        assert_eq!(code, 0, "{format}: {err}");
        if format != "csv" {
            assert!(out.contains("statistician"), "{format}");
            assert!(out.contains("temperature=2,tank=3"), "{format}");
        }
    }
}

/// "We lost one unit": the lost-chamber example keeps every test; most are synthetic.
#[test]
fn lost_chamber_example() {
    let v = json(&["check", &problem("unbalanced-lost-chamber.toml")]);
    assert_eq!(v["observations"], 95);
    for t in v["terms"].as_array().unwrap() {
        if t["residual"] == true {
            continue;
        }
        let verdict = t["test"]["verdict"].as_str().unwrap();
        assert!(verdict == "exact" || verdict == "quasi_f", "{t}");
        assert!(t["test"]["denominator_df"].as_f64().unwrap() > 0.0);
    }
    assert_eq!(term(&v, "light")["df"], 2);
    assert_eq!(term(&v, "chamber(light)")["df"], 5);
}

/// `compare --remove`: drop one chamber from one light regime.
#[test]
fn compare_remove_one_chamber() {
    let v = json(&[
        "compare",
        &problem("growth-chambers.toml"),
        "--remove",
        "light=2,chamber=3",
    ]);
    let light = v["terms"]
        .as_array()
        .unwrap()
        .iter()
        .find(|t| t["label"] == "light")
        .unwrap();
    assert_eq!(light["status"], "weaker");
    assert_eq!(light["base"]["denominator_df"], 6.0);
    assert_eq!(light["other"]["denominator_df"], 5.0);
    assert_eq!(light["other"]["denominator"][0]["term"], "chamber(light)");
    // One chamber (900) and its 12 pots (6 each) fewer.
    assert_eq!(v["cost"]["difference"], -(900.0 + 12.0 * 6.0));
    // Both sides under the unrestricted model, and the output says so.
    assert_eq!(v["base"]["convention"], "unrestricted");
    assert_eq!(v["other"]["convention"], "unrestricted");
    assert!(
        v["notes"]
            .as_array()
            .unwrap()
            .iter()
            .any(|n| n["kind"] == "both_unrestricted" || n["kind"] == "unrestricted_after_removal"),
        "{}",
        v["notes"]
    );
    // Removals stack with other changes, and a second removal of a single pot adds one.
    let v = json(&[
        "compare",
        &problem("growth-chambers.toml"),
        "--set",
        "replicates=4",
        "--remove",
        "light=2,chamber=3",
        "--remove",
        "light=1,chamber=1,cultivar=1,replicate=4",
    ]);
    assert_eq!(v["other"]["observations"], 144 - 16 - 1);
    // Type III through --set.
    let v = json(&[
        "compare",
        &problem("unbalanced-lost-chamber.toml"),
        "--set",
        "sums_of_squares=type3",
    ]);
    assert_eq!(v["other"]["unbalanced"]["sums_of_squares"], "type3");
    let light = term(&v["other"], "light");
    assert_eq!(coefficient(light, "cultivar"), 0.0);
    assert!(coefficient(term(&v["base"], "light"), "cultivar") > 0.0);
}

/// Bad `--remove` values are bad input (exit 1), one line naming the change.
#[test]
fn bad_removals_on_the_command_line() {
    let chambers = problem("growth-chambers.toml");
    let cases: &[(&[&str], &str)] = &[
        (&["--remove", "light=4"], "beyond the 3 levels of light"),
        (&["--remove", "bench=1"], "\"bench\" is not a factor"),
        (&["--remove", "light=1,chamber=0"], "start at 1"),
        (&["--remove", "light"], "is not FACTOR=INDEX"),
        (&["--remove", "light=two"], "not a whole-number level index"),
        (
            &["--remove", "light=2,replicate=9"],
            "beyond the 3 replicates",
        ),
        (&["--remove", ""], "names no factor"),
        (
            &[
                "--remove",
                "light=2,chamber=3",
                "--remove",
                "chamber=3,light=2",
            ],
            "removes nothing",
        ),
        (
            &["--remove", "light=2"],
            "leaves no observation at light = 2",
        ),
        (
            &[
                "--remove",
                "light=2,chamber=3",
                "--convention",
                "restricted",
            ],
            "restricted convention",
        ),
        (
            &["--remove", "light=2,chamber=3", "--set", "chamber.levels=2"],
            "beyond the 2 levels of chamber in each light",
        ),
    ];
    for (extra, phrase) in cases {
        let mut args = vec!["compare", chambers.as_str()];
        args.extend_from_slice(extra);
        let (code, out, err) = run(&args);
        assert_eq!(code, 1, "{extra:?}: {err}");
        assert!(out.is_empty(), "{extra:?} printed to stdout");
        assert_eq!(err.trim_end().lines().count(), 1, "{extra:?}: {err}");
        assert!(err.contains(phrase), "{extra:?}: {err}");
    }
    // Changes to a layout that has removals: a new nesting or a dropped layer would make
    // its removals name other units.
    let lost = problem("unbalanced-lost-chamber.toml");
    for (extra, phrase) in [
        (["--set", "chamber.within="], "new nesting"),
        (["--drop", "chamber"], "names chamber"),
        (["--set", "convention=restricted"], "restricted convention"),
    ] {
        let mut args = vec!["compare", lost.as_str()];
        args.extend_from_slice(&extra);
        let (code, _, err) = run(&args);
        assert_eq!(code, 1, "{extra:?}: {err}");
        assert_eq!(err.trim_end().lines().count(), 1, "{extra:?}: {err}");
        assert!(err.contains(phrase), "{extra:?}: {err}");
    }
    // Dropping a layer the removals do not name keeps them: without cultivar, 8 chambers
    // of 3 pots are left.
    let text = std::fs::read_to_string(&lost).unwrap().replace(
        "[[layout.remove]]       # a single lost pot\nlight = 1\nchamber = 1\ncultivar = 2\nreplicate = 3\n",
        "",
    );
    let path = scratch("lost-chamber-only.toml", &text);
    let v = json(&["compare", path.to_str().unwrap(), "--drop", "cultivar"]);
    assert_eq!(v["base"]["observations"], 96);
    assert_eq!(v["other"]["observations"], 24);
    assert_eq!(v["other"]["unbalanced"]["removals"][0], "light=2,chamber=3");
}

const TANKS: &str = r#"[layout]
replicates = 4
[[layout.remove]]
REMOVAL
[[factor]]
name = "temperature"
kind = "fixed"
levels = 2
[[factor]]
name = "tank"
kind = "random"
levels = 3
within = ["temperature"]
"#;

/// Bad removals in a layout file: exit 1, one line, the file and the line of the removal.
#[test]
fn bad_removals_in_a_file() {
    // The removal's entries start on line 4 of TANKS.
    let cases: &[(&str, &str, Option<usize>, &str)] = &[
        (
            "beyond",
            "temperature = 2\ntank = 4",
            Some(5),
            "tank = 4 is beyond the 3 levels of tank in each temperature",
        ),
        (
            "unknown",
            "temperature = 2\nbench = 1",
            Some(5),
            "\"bench\" is not a factor (known: temperature, tank; or replicate)",
        ),
        (
            "zero",
            "temperature = 0",
            Some(4),
            "level indices start at 1",
        ),
        ("negative", "tank = -1", Some(4), "level indices start at 1"),
        (
            "replicate-beyond",
            "tank = 1\nreplicate = 5",
            Some(5),
            "beyond the 4 replicates",
        ),
        ("string", "tank = \"one\"", Some(4), "invalid type"),
        ("fraction", "tank = 1.5", Some(4), "invalid type"),
        ("empty", "", None, "names no factor"),
        (
            "whole-level",
            "temperature = 1",
            None,
            "leaves no observation at temperature = 1",
        ),
        (
            "twice",
            "tank = 2\n[[layout.remove]]\ntemperature = 1\ntank = 2",
            None,
            "removes nothing that the removals before it",
        ),
        (
            "everything",
            "tank = 1\n[[layout.remove]]\ntank = 2\n[[layout.remove]]\ntank = 3",
            None,
            "leave no observation at all",
        ),
    ];
    for (name, removal, line, phrase) in cases {
        let path = scratch(&format!("{name}.toml"), &TANKS.replace("REMOVAL", removal));
        let shown = path.display().to_string();
        let (code, out, err) = run(&["check", &shown]);
        assert_eq!(code, 1, "{name}: {err}");
        assert!(out.is_empty(), "{name}");
        assert_eq!(err.matches('\n').count(), 1, "{name}: {err}");
        assert!(
            err.starts_with(&format!("emsplan: {shown}")),
            "{name}: {err}"
        );
        if let Some(n) = line {
            assert!(err.contains(&format!(" line {n}: ")), "{name}: {err}");
        } else {
            assert!(err.contains(" line "), "{name}: no line in {err}");
        }
        assert!(err.contains(phrase), "{name}: {err}");
    }
    // The restricted convention, asked for in the file or on the command line.
    let text = TANKS
        .replace("REMOVAL", "temperature = 2\ntank = 3")
        .replace(
            "replicates = 4",
            "replicates = 4\nconvention = \"restricted\"",
        );
    let path = scratch("restricted.toml", &text);
    let (code, _, err) = run(&["check", path.to_str().unwrap()]);
    assert_eq!(code, 1);
    assert!(
        err.contains(" line 3: ") && err.contains("restricted convention"),
        "{err}"
    );
    let path = scratch(
        "plain.toml",
        &TANKS.replace("REMOVAL", "temperature = 2\ntank = 3"),
    );
    for c in ["restricted", "both"] {
        let (code, out, err) = run(&["check", path.to_str().unwrap(), "--convention", c]);
        assert_eq!(code, 1, "{c}: {err}");
        assert!(out.is_empty());
        assert_eq!(err.matches('\n').count(), 1, "{err}");
        assert!(
            err.contains(path.to_str().unwrap()) && err.contains("unrestricted"),
            "{err}"
        );
    }
    // A finite population: the synthesis assumes large populations.
    let text = TANKS
        .replace("REMOVAL", "temperature = 2\ntank = 3")
        .replace(
            "within = [\"temperature\"]",
            "within = [\"temperature\"]\npopulation = 10",
        );
    let path = scratch("population.toml", &text);
    let (code, _, err) = run(&["check", path.to_str().unwrap()]);
    assert_eq!(code, 1);
    assert!(err.contains("finite population"), "{err}");
    // Beyond the engine's size.
    let text = TANKS
        .replace("REMOVAL", "temperature = 2\ntank = 3")
        .replace("levels = 3", "levels = 4000");
    let path = scratch("huge.toml", &text);
    let (code, _, err) = run(&["check", path.to_str().unwrap()]);
    assert_eq!(code, 1);
    assert!(err.contains("handles up to"), "{err}");
}

/// A removal that leaves a term with no df is a warning that says what became untestable:
/// two tanks per temperature, the second lost under both, leaves tank(temperature) with
/// Σ b_i - a = 0 df, so temperature (whose expectation holds σ²(tank)) cannot be tested.
#[test]
fn a_term_left_without_df_is_reported_with_what_it_takes_down() {
    let text = TANKS
        .replace("REMOVAL", "tank = 2")
        .replace("levels = 3", "levels = 2");
    let path = scratch("no-df.toml", &text);
    let (code, out, err) = run(&["check", path.to_str().unwrap(), "--format", "json"]);
    assert_eq!(code, 0, "{err}");
    let v: Value = serde_json::from_str(&out).unwrap();
    assert_eq!(term(&v, "tank(temperature)")["df"], 0);
    assert_eq!(
        term(&v, "tank(temperature)")["test"]["verdict"],
        "not_estimable"
    );
    assert_eq!(term(&v, "temperature")["test"]["verdict"], "untestable");
    // The warning names the term left without df and the test it takes down.
    let warnings = v["warnings"].as_array().unwrap();
    assert!(
        warnings.iter().any(|w| w["kind"] == "lost_df"
            && w["term"] == "tank(temperature)"
            && w["lost"]
                .as_array()
                .unwrap()
                .iter()
                .any(|l| l == "temperature")),
        "{warnings:?}"
    );
    // The reason is structured: σ²(tank) cannot be isolated, its term has no df left.
    let reason = &term(&v, "temperature")["test"]["reason"];
    assert_eq!(reason["kind"], "confounded");
    assert!(
        reason["components"]
            .as_array()
            .unwrap()
            .iter()
            .any(|c| c["component"] == "tank(temperature)"
                && c["cause"]["kind"] == "zero_df_after_removals"),
        "{reason}"
    );
    // A whole tank of a random nest may go: it is a unit not sampled, noted as such.
    let emptied = &v["unbalanced"]["emptied_units"];
    assert!(
        emptied
            .as_array()
            .unwrap()
            .iter()
            .any(|u| u["factor"] == "tank"
                && u["level"] == 2
                && u["within"] == serde_json::json!([["temperature", 1]])),
        "{emptied}"
    );
}

/// The report's Monte Carlo on an unbalanced layout: the section is there, and says
/// what was removed.
#[test]
fn the_report_runs_its_monte_carlo_on_an_unbalanced_layout() {
    let tanks = problem("unbalanced-tanks.toml");
    let out = PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join("unbalanced_cli/tanks-runs.md");
    std::fs::create_dir_all(out.parent().unwrap()).unwrap();
    let args = [
        "report",
        tanks.as_str(),
        "--runs",
        "200",
        "--markdown",
        "-o",
        out.to_str().unwrap(),
    ];
    let (code, _, err) = run(&args);
    assert_eq!(code, 0, "{args:?}: {err}");
    let text = std::fs::read_to_string(&out).unwrap();
    assert!(text.contains("Monte Carlo confirmation"), "{text}");
    assert!(text.contains("200 simulated data sets"), "{text}");
}

/// The report of an unbalanced layout: one convention (the unrestricted model), what was
/// removed, and numerical coefficients.
#[test]
fn the_report_of_an_unbalanced_layout() {
    let dir = PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join("unbalanced_cli");
    std::fs::create_dir_all(&dir).unwrap();
    for (file, format) in [("lost.html", None), ("lost.md", Some("--markdown"))] {
        let out = dir.join(file);
        let mut args = vec![
            "report".to_string(),
            problem("unbalanced-lost-chamber.toml"),
            "-o".into(),
            out.to_str().unwrap().into(),
        ];
        args.extend(format.map(String::from));
        let args: Vec<&str> = args.iter().map(String::as_str).collect();
        let (code, _, err) = run(&args);
        assert_eq!(code, 0, "{err}");
        let text = std::fs::read_to_string(&out).unwrap();
        assert!(
            text.contains("only the unrestricted model is defined"),
            "{file}"
        );
        assert!(
            text.contains("13 of the full layout's 108 observations removed"),
            "{file}"
        );
        assert!(text.contains("leaving 95"), "{file}");
        // light's sequential mean square carries κ²(cultivar), which its error term
        // does not reproduce; the report says so rather than claim it does.
        assert!(text.contains("which the error term does not"), "{file}");
    }
}
