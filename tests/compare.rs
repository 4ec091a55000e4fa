//! `emsplan compare` through the binary: every status, stacked changes, bad changes.
//! The expected statuses follow from the textbook error terms held in tests/textbook.rs
//! (e.g. fewer chambers per light leave light fewer denominator df: a(b - 1)).

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

fn compare_json(args: &[&str]) -> Value {
    let mut all = vec!["compare"];
    all.extend_from_slice(args);
    all.extend_from_slice(&["--format", "json"]);
    let (code, out, err) = run(&all);
    assert_eq!(code, 0, "compare {args:?} failed: {err}");
    serde_json::from_str(&out).expect("compare prints JSON")
}

fn status(v: &Value, label: &str) -> String {
    v["terms"]
        .as_array()
        .unwrap()
        .iter()
        .find(|t| t["label"] == label)
        .unwrap_or_else(|| panic!("no term {label}"))["status"]
        .as_str()
        .unwrap()
        .to_string()
}

#[test]
fn every_status() {
    let chambers = problem("growth-chambers.toml");
    // Nothing changes: same.
    let v = compare_json(&[&chambers, "--set", "alpha=0.05"]);
    assert_eq!(status(&v, "light"), "same");
    // Two chambers per light instead of three: light over chamber(light) with 3 df
    // instead of 6, so weaker.
    let v = compare_json(&[&chambers, "--set", "chamber.levels=2"]);
    assert_eq!(status(&v, "light"), "weaker");
    assert_eq!(v["other"]["terms"][0]["test"]["denominator_df"], 3.0);
    assert!(v["cost"]["difference"].as_f64().unwrap() < 0.0);
    // Four: stronger.
    let v = compare_json(&[&chambers, "--set", "chamber.levels=4"]);
    assert_eq!(status(&v, "light"), "stronger");
    // One: the chamber variance is confounded with light (Hurlbert 1984): lost.
    let v = compare_json(&[&chambers, "--set", "chamber.levels=1"]);
    assert_eq!(status(&v, "light"), "lost");
    let (_, text, _) = run(&["compare", &chambers, "--set", "chamber.levels=1"]);
    assert!(text.contains("can no longer be tested"), "{text}");
    // And back: gained.
    let v = compare_json(&[
        &problem("one-chamber-per-light.toml"),
        "--set",
        "chamber.levels=2",
    ]);
    assert_eq!(status(&v, "light"), "gained");
}

#[test]
fn changes_stack() {
    let v = compare_json(&[
        &problem("growth-chambers.toml"),
        "--set",
        "chamber.levels=2",
        "--set",
        "replicates=4",
    ]);
    // 3 lights x 2 chambers x 4 cultivars x 4 pots.
    assert_eq!(v["other"]["observations"], 96);
    assert_eq!(v["changes"].as_array().unwrap().len(), 2);
}

#[test]
fn a_second_file_and_a_dropped_layer() {
    let v = compare_json(&[
        &problem("growth-chambers.toml"),
        &problem("one-chamber-per-light.toml"),
    ]);
    assert_eq!(status(&v, "light"), "lost");
    // Without the chamber layer light is tested over the residual (every pot its own
    // unit: the design this assumes is a fully randomised one).
    let v = compare_json(&[&problem("growth-chambers.toml"), "--drop", "chamber"]);
    let other = v["other"]["terms"].as_array().unwrap();
    assert!(
        other
            .iter()
            .all(|t| !t["label"].as_str().unwrap().contains("chamber"))
    );
    assert_eq!(other[0]["test"]["denominator"][0]["term"], "residual");
}

/// Fixed versus random farms: with random farms, blend is tested over blend x farm
/// (the two-factor mixed model, Montgomery, chapter on random and mixed models).
#[test]
fn what_if_a_factor_is_random() {
    let v = compare_json(&[
        &problem("field-sites.toml"),
        "--set",
        "farm.kind=random",
        "--set",
        "sd.farm=0.3",
        "--set",
        "sd.blend x farm=0.15",
    ]);
    let blend = v["terms"]
        .as_array()
        .unwrap()
        .iter()
        .find(|t| t["label"] == "blend")
        .unwrap()
        .clone();
    assert_eq!(blend["status"], "weaker");
    assert_eq!(blend["error_term_changed"], true);
    assert_eq!(blend["other"]["denominator"][0]["term"], "blend x farm");
}

#[test]
fn text_output_says_status_in_words() {
    let (code, out, _) = run(&[
        "compare",
        &problem("growth-chambers.toml"),
        "--set",
        "chamber.levels=1",
    ]);
    assert_eq!(code, 0);
    assert!(out.contains("lost its test"), "{out}");
    assert!(out.contains("statistician"));
}

/// Bad changes are bad input (exit 1), one line naming the key.
#[test]
fn bad_changes_are_clear_errors() {
    let chambers = problem("growth-chambers.toml");
    let cases: &[(&[&str], &str)] = &[
        (&["--set", "bnch.levels=3"], "\"bnch\" is not a factor"),
        (&["--set", "chamber.levls=3"], "unknown field \"levls\""),
        (&["--set", "chamber.levels=three"], "not a whole number"),
        (&["--set", "chamber.levels=0"], "not a whole number"),
        (&["--set", "light.levels=1"], "fixed with one level"),
        (
            &["--set", "chamber.kind=sometimes"],
            "\"fixed\" or \"random\"",
        ),
        (&["--set", "chamber.within=chamber"], "nested in itself"),
        (
            &["--set", "chamber.within=bench"],
            "\"bench\" is not a factor",
        ),
        (&["--set", "colour=blue"], "unknown key \"colour\""),
        (&["--set", "replicates"], "write KEY=VALUE"),
        (&["--set", "alpha=2"], "between 0 and 1"),
        (&["--set", "sd.light=1.0"], "is a fixed term"),
        (&["--set", "effect.chamber=1.0"], "is a random term"),
        (
            &["--set", "sd.residual=-1"],
            "finite number of zero or more",
        ),
        (&["--drop", "shelf"], "\"shelf\" is not a factor"),
        (
            &["--remove", "light=4,chamber=3"],
            "beyond the 3 levels of light",
        ),
        (&[], "needs something to compare with"),
    ];
    for (extra, phrase) in cases {
        let mut args = vec!["compare", chambers.as_str()];
        args.extend_from_slice(extra);
        let (code, out, err) = run(&args);
        assert_eq!(code, 1, "{extra:?}: {err}");
        assert!(out.is_empty(), "{extra:?} printed to stdout");
        assert_eq!(err.trim_end().lines().count(), 1, "{extra:?}: {err}");
        assert!(err.contains(phrase), "{extra:?}: {err}");
        if let Some(set) = extra.get(1) {
            assert!(
                err.contains(set),
                "{extra:?}: the message names the change: {err}"
            );
        }
    }
}

/// A layout file that lists removed units is checked by the unbalanced engine, under the
/// unrestricted model only: a file that asks for the restricted convention is refused at
/// the line of its `convention`.
#[test]
fn removed_units_in_a_file_are_checked_unrestricted() {
    let dir = std::env::temp_dir().join(format!("emsplan-compare-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let path = dir.join("lost-chamber.toml");
    let original = std::fs::read_to_string(problem("growth-chambers.toml")).unwrap();
    let line = original
        .lines()
        .position(|l| l.starts_with("convention"))
        .unwrap()
        + 1;
    let text = original.replace(
        "convention = \"restricted\"",
        "convention = \"restricted\"\n[[layout.remove]]\nlight = 2\nchamber = 3",
    );
    std::fs::write(&path, text).unwrap();
    let (code, _, err) = run(&["check", path.to_str().unwrap()]);
    assert_eq!(code, 1);
    assert!(err.contains("restricted convention"), "{err}");
    assert!(err.contains(&format!(" line {line}: ")), "{err}");
    let text = original.replace(
        "convention = \"restricted\"",
        "convention = \"unrestricted\"\n[[layout.remove]]\nlight = 2\nchamber = 3",
    );
    std::fs::write(&path, text).unwrap();
    let (code, out, err) = run(&["check", path.to_str().unwrap(), "--format", "json"]);
    assert_eq!(code, 0, "{err}");
    let v: Value = serde_json::from_str(&out).unwrap();
    // 3 lights x 3 chambers x 4 cultivars x 3 pots, less the 12 pots of one chamber.
    assert_eq!(v["observations"], 96);
    assert_eq!(v["unbalanced"]["removed_observations"], 12);
    // light over chamber(light) on Σ b_i - a = 8 - 3 = 5 df.
    assert_eq!(
        v["terms"][0]["test"]["denominator"][0]["term"],
        "chamber(light)"
    );
    assert_eq!(v["terms"][0]["test"]["denominator_df"], 5.0);
}

/// Repairs for a must-test term below its power target: each listed change really
/// reaches the target (re-checked here through the same binary), cheapest first.
#[test]
fn repairs_reach_the_goal_cheapest_first() {
    let dir = std::env::temp_dir().join(format!("emsplan-repairs-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let path = dir.join("chambers-goal.toml");
    let mut text = std::fs::read_to_string(problem("growth-chambers.toml")).unwrap();
    text.push_str("\n[search]\nmust_test = [\"light\"]\ntarget_power = 0.8\n");
    std::fs::write(&path, &text).unwrap();
    let (code, out, err) = run(&["check", path.to_str().unwrap(), "--format", "json"]);
    assert_eq!(code, 0, "{err}");
    let v: Value = serde_json::from_str(&out).unwrap();
    let light = &v["terms"][0];
    assert_eq!(light["label"], "light");
    let repairs = light["test"]["repairs"].as_array().expect("repairs listed");
    assert!(!repairs.is_empty());
    let mut last = f64::NEG_INFINITY;
    for r in repairs {
        assert!(r["power"].as_f64().unwrap() >= 0.8, "{r}");
        let c = r["cost_change"].as_f64().unwrap();
        assert!(c >= last, "cheapest first: {repairs:?}");
        last = c;
    }
    // The cheapest material change is more chambers per light; check it directly.
    let more = repairs
        .iter()
        .find(|r| r["change"]["kind"] == "levels" && r["change"]["factor"] == "chamber")
        .expect("more chambers is a repair");
    let n = more["change"]["to"].as_u64().unwrap().to_string();
    let (_, out, _) = run(&[
        "compare",
        path.to_str().unwrap(),
        "--set",
        &format!("chamber.levels={n}"),
        "--format",
        "json",
    ]);
    let v: Value = serde_json::from_str(&out).unwrap();
    let p = v["other"]["terms"][0]["test"]["power"].as_f64().unwrap();
    assert!(p >= 0.8, "power with {n} chambers: {p}");
    // Other terms are not must-test, so they carry no repairs.
    assert!(v["base"]["terms"][2]["test"].get("repairs").is_none());
}
