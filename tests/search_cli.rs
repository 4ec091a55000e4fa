//! `emsplan search` through the binary: every shipped problem in every format, and one
//! bad problem file per kind of mistake, each getting exit code 1 and one line on stderr
//! that names the file, the line (where there is one to name) and what is wrong.
//!
//! The expected line of each bad file is the line its offending key sits on, found by
//! the test from a marker in the text (TOML v1.0.0 puts a key and its value on one line).

use std::path::{Path, PathBuf};
use std::process::{Command, Output, Stdio};

const BIN: &str = env!("CARGO_BIN_EXE_emsplan");

fn run(args: &[&str]) -> Output {
    Command::new(BIN)
        .args(args)
        .stdin(Stdio::null())
        .output()
        .expect("the emsplan binary runs")
}

fn shipped() -> Vec<PathBuf> {
    let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("problems");
    let mut out: Vec<PathBuf> = std::fs::read_dir(&dir)
        .expect("problems/")
        .map(|e| e.expect("entry").path())
        .filter(|p| {
            p.file_name()
                .and_then(|n| n.to_str())
                .is_some_and(|n| n.starts_with("search-") && n.ends_with(".toml"))
        })
        .collect();
    out.sort();
    out
}

#[test]
fn at_least_two_search_problems_ship() {
    assert!(shipped().len() >= 2, "{:?}", shipped());
}

/// Each shipped problem runs in every format, says how large its space is on stderr, and
/// has a best layout; the text ends with the caution.
#[test]
fn every_shipped_problem_runs_in_every_format() {
    for path in shipped() {
        let p = path.to_str().expect("utf-8 path");
        for format in ["text", "json", "markdown", "csv"] {
            let out = run(&["search", p, "--format", format]);
            let stderr = String::from_utf8_lossy(&out.stderr);
            assert_eq!(out.status.code(), Some(0), "{p} {format}: {stderr}");
            assert!(
                stderr.contains("candidates in"),
                "{p}: the space size goes to stderr: {stderr}"
            );
            let stdout = String::from_utf8_lossy(&out.stdout);
            assert!(!stdout.trim().is_empty(), "{p} {format}: empty output");
            match format {
                "text" => {
                    assert!(stdout.contains("Best layout"), "{p}: {stdout}");
                    assert!(
                        stdout.contains("statistician"),
                        "{p}: the caution closes the output"
                    );
                }
                "csv" => assert!(
                    stdout.starts_with("rank,structure,cost,observations,replicates,"),
                    "{p}: {stdout}"
                ),
                _ => {}
            }
        }
    }
}

/// The JSON contract: best with cost, replicates, factors (name, levels, within) and tests
/// (label, verdict, denominator, denominator_df, power, min_detectable); candidates,
/// frontier, examined and the rejected counts by reason (candidates over the budget or
/// beyond a capacity limit are not examined).
#[test]
fn json_follows_the_contract() {
    for path in shipped() {
        let p = path.to_str().expect("utf-8 path");
        let out = run(&["search", p, "--format", "json"]);
        assert_eq!(out.status.code(), Some(0));
        let v: serde_json::Value = serde_json::from_slice(&out.stdout).expect("JSON");
        let best = &v["best"];
        assert!(best["cost"].is_number(), "{p}");
        assert!(best["replicates"].is_u64(), "{p}");
        for f in best["factors"].as_array().expect("factors") {
            assert!(f["name"].is_string() && f["levels"].is_u64() && f["within"].is_array());
        }
        let tests = best["tests"].as_array().expect("tests");
        assert!(!tests.is_empty());
        for t in tests {
            for key in [
                "label",
                "verdict",
                "denominator",
                "denominator_df",
                "power",
                "min_detectable",
            ] {
                assert!(t.get(key).is_some(), "{p}: tests lack {key}");
            }
        }
        assert!(v["candidates"].is_array() && v["frontier"].is_array());
        let examined = v["examined"].as_u64().expect("examined");
        let r = &v["rejected"];
        let budget = r["budget"].as_u64().expect("budget");
        let limit = r["limit"].as_u64().expect("limit");
        for key in ["untestable", "min_df", "power"] {
            assert!(r[key].is_u64(), "{p}: rejected.{key}");
        }
        assert_eq!(
            examined + budget + limit,
            v["space"].as_u64().expect("space"),
            "{p}"
        );
        assert_eq!(
            v["candidates"][0]["cost"], best["cost"],
            "{p}: the best is ranked first"
        );
    }
}

/// --top limits the ranked table; --method optimize finds the same best.
#[test]
fn top_and_method_options_work() {
    for path in shipped() {
        let p = path.to_str().expect("utf-8 path");
        let out = run(&["search", p, "--format", "json", "--top", "3"]);
        let v: serde_json::Value = serde_json::from_slice(&out.stdout).expect("JSON");
        assert!(v["candidates"].as_array().expect("candidates").len() <= 3);
        let o = run(&["search", p, "--format", "json", "--method", "optimize"]);
        assert_eq!(o.status.code(), Some(0));
        let w: serde_json::Value = serde_json::from_slice(&o.stdout).expect("JSON");
        assert_eq!(v["best"]["cost"], w["best"]["cost"], "{p}");
    }
}

/// A problem with nothing feasible says which constraint binds and how far the nearest
/// candidate misses it, and what the cheapest feasible layout would cost without the
/// budget.
#[test]
fn nothing_feasible_says_what_binds() {
    let text = BASE.replace("budget = 25000", "budget = 6000");
    let dir = scratch("nothing-feasible");
    let path = dir.join("tight.toml");
    std::fs::write(&path, &text).expect("write");
    let out = run(&["search", path.to_str().expect("path"), "--format", "json"]);
    assert_eq!(out.status.code(), Some(0));
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).expect("JSON");
    assert!(v["best"].is_null());
    assert!(v["binding"]["kind"].is_string(), "{}", v["binding"]);
    assert!(v["without_budget"]["cost"].as_f64().expect("cost") > 6000.0);
    let text_out = run(&["search", path.to_str().expect("path")]);
    let s = String::from_utf8_lossy(&text_out.stdout);
    assert!(s.contains("No layout meets every constraint"), "{s}");
    assert!(s.contains("Without the budget"), "{s}");
}

/// A valid problem the bad ones are made from.
const BASE: &str = r#"[layout]
name = "Chambers"
replicates = 2

[[factor]]
name = "light"
kind = "fixed"
levels = 3

[[factor]]
name = "chamber"
kind = "random"
levels = 2
within = ["light"]
population = 12

[[factor]]
name = "cultivar"
kind = "fixed"
levels = 4

[sd]
residual = 1.0
chamber = 0.5

[effect]
light = 1.0
"light x cultivar" = 0.5

[cost]
overhead = 100
[cost.per_unit]
chamber = 700
residual = 5

[search]
budget = 25000
must_test = ["light", "light x cultivar"]
min_df = 4
target_power = 0.8
[search.levels]
chamber = [1, 4]
replicates = [1, 6]
[[search.choice]]
factor = "chamber"
within = [["light"], ["light", "cultivar"]]
"#;

fn scratch(tag: &str) -> PathBuf {
    let dir = Path::new(env!("CARGO_TARGET_TMPDIR")).join(format!("search_cli-{tag}"));
    std::fs::create_dir_all(&dir).expect("scratch dir");
    dir
}

/// Line of the first occurrence of `marker` in `text`.
fn line_of(text: &str, marker: &str) -> usize {
    let at = text
        .find(marker)
        .unwrap_or_else(|| panic!("marker {marker:?} not in the text"));
    text[..at].matches('\n').count() + 1
}

/// Writes `text`, runs `search` on it with `extra` arguments and asserts the one-line
/// error contract: exit 1, nothing on stdout, one line naming the file, the line of
/// `marker` (when given) and `phrase`.
fn rejected(tag: &str, text: &str, marker: Option<&str>, phrase: &str, extra: &[&str]) {
    let path = scratch(tag).join("problem.toml");
    std::fs::write(&path, text).expect("write");
    let p = path.to_str().expect("path");
    let mut args = vec!["search", p];
    args.extend_from_slice(extra);
    let out = run(&args);
    let stderr = String::from_utf8_lossy(&out.stderr).into_owned();
    assert_ne!(out.status.code(), Some(101), "{tag}: panic: {stderr}");
    assert_eq!(
        out.status.code(),
        Some(1),
        "{tag}: exit code; stderr: {stderr}"
    );
    assert!(out.stdout.is_empty(), "{tag}: stdout on error");
    let lines: Vec<&str> = stderr
        .lines()
        .filter(|l| !l.contains("candidates in"))
        .collect();
    assert_eq!(lines.len(), 1, "{tag}: one line on stderr, got {stderr:?}");
    let line = lines[0];
    let head = match marker {
        Some(m) => format!("emsplan: {p} line {}: ", line_of(text, m)),
        None => format!("emsplan: {p}: "),
    };
    assert!(
        line.starts_with(&head),
        "{tag}: {line:?} should start {head:?}"
    );
    assert!(
        line.contains(phrase),
        "{tag}: {line:?} should say {phrase:?}"
    );
}

#[test]
fn base_problem_is_valid() {
    let path = scratch("base").join("problem.toml");
    std::fs::write(&path, BASE).expect("write");
    let out = run(&["search", path.to_str().expect("path")]);
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
}

#[test]
fn unknown_factor_in_levels() {
    let t = BASE.replace("chamber = [1, 4]", "chamber = [1, 4]\nbnch = [1, 3]");
    rejected(
        "levels-unknown",
        &t,
        Some("bnch ="),
        "\"bnch\" is not a factor",
        &[],
    );
}

#[test]
fn unknown_factor_in_choice() {
    let t = BASE.replace("factor = \"chamber\"", "factor = \"chambr\"");
    rejected(
        "choice-unknown",
        &t,
        Some("factor = \"chambr\""),
        "\"chambr\" is not a factor",
        &[],
    );
}

#[test]
fn unknown_factor_in_choice_within() {
    let t = BASE.replace("[\"light\", \"cultivar\"]]", "[\"light\", \"cultivr\"]]");
    rejected(
        "choice-within-unknown",
        &t,
        Some("[[search.choice]]"),
        "\"cultivr\", which is not a factor",
        &[],
    );
}

#[test]
fn choice_with_neither_within_nor_optional() {
    let t = BASE.replace("within = [[\"light\"], [\"light\", \"cultivar\"]]\n", "");
    rejected(
        "choice-empty",
        &t,
        Some("[[search.choice]]"),
        "offers no alternative",
        &[],
    );
}

#[test]
fn choice_nesting_a_factor_in_itself() {
    let t = BASE.replace("[\"light\", \"cultivar\"]]", "[\"light\", \"chamber\"]]");
    rejected(
        "choice-self",
        &t,
        Some("[[search.choice]]"),
        "cannot be nested in itself",
        &[],
    );
}

#[test]
fn choice_making_a_cycle() {
    // cultivar within chamber, while chamber may be nested in cultivar: a cycle.
    let t = BASE
        .replace(
            "name = \"cultivar\"\nkind = \"fixed\"\nlevels = 4\n",
            "name = \"cultivar\"\nkind = \"fixed\"\nlevels = 4\nwithin = [\"chamber\"]\n",
        )
        .replace("\"light x cultivar\" = 0.5\n", "")
        .replace(
            "must_test = [\"light\", \"light x cultivar\"]",
            "must_test = [\"light\"]",
        );
    rejected("choice-cycle", &t, Some("[[search.choice]]"), "cycle", &[]);
}

#[test]
fn two_choice_tables_for_one_factor() {
    let t = format!("{BASE}[[search.choice]]\nfactor = \"chamber\"\noptional = true\n");
    let marker_at = BASE.len();
    let tag = "choice-twice";
    // The second table is the offending one.
    let line = t[..marker_at].matches('\n').count() + 1;
    let path = scratch(tag).join("problem.toml");
    std::fs::write(&path, &t).expect("write");
    let out = run(&["search", path.to_str().expect("path")]);
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(1), "{stderr}");
    assert!(stderr.contains(&format!("line {line}: ")), "{stderr}");
    assert!(stderr.contains("two choice tables"), "{stderr}");
}

#[test]
fn empty_range() {
    let t = BASE.replace("chamber = [1, 4]", "chamber = []");
    rejected(
        "range-empty",
        &t,
        Some("chamber = []"),
        "range of two whole numbers",
        &[],
    );
}

#[test]
fn range_of_three_numbers() {
    let t = BASE.replace("chamber = [1, 4]", "chamber = [1, 2, 4]");
    rejected(
        "range-three",
        &t,
        Some("chamber = [1, 2, 4]"),
        "got 3 numbers",
        &[],
    );
}

#[test]
fn inverted_range() {
    let t = BASE.replace("chamber = [1, 4]", "chamber = [4, 1]");
    rejected(
        "range-inverted",
        &t,
        Some("chamber = [4, 1]"),
        "inverted",
        &[],
    );
}

#[test]
fn range_below_one_for_a_random_factor() {
    let t = BASE.replace("chamber = [1, 4]", "chamber = [0, 4]");
    rejected(
        "range-zero",
        &t,
        Some("chamber = [0, 4]"),
        "starts below 1",
        &[],
    );
}

/// A fixed factor with one level compares nothing (common practice; Layout::new refuses it).
#[test]
fn range_below_two_for_a_fixed_factor() {
    let t = BASE.replace("chamber = [1, 4]", "chamber = [1, 4]\ncultivar = [1, 5]");
    rejected(
        "range-fixed-one",
        &t,
        Some("cultivar = [1, 5]"),
        "starts below 2",
        &[],
    );
}

#[test]
fn replicates_range_below_one() {
    let t = BASE.replace("replicates = [1, 6]", "replicates = [0, 6]");
    rejected(
        "range-replicates",
        &t,
        Some("replicates = [0, 6]"),
        "at least 1 replicate",
        &[],
    );
}

/// Levels are drawn from the population, so n ≤ N (Cornfield and Tukey 1956).
#[test]
fn range_beyond_the_population() {
    let t = BASE.replace("chamber = [1, 4]", "chamber = [1, 20]");
    rejected(
        "range-population",
        &t,
        Some("chamber = [1, 20]"),
        "population of 12",
        &[],
    );
}

#[test]
fn must_test_term_not_in_the_layout() {
    let t = BASE.replace("must_test = [\"light\", ", "must_test = [\"moisture\", ");
    rejected(
        "must-unknown",
        &t,
        Some("must_test"),
        "\"moisture\", which is not a factor",
        &[],
    );
}

/// A factor nested in another is not crossed with it, so their interaction is no term.
#[test]
fn must_test_term_that_is_no_term() {
    let t = BASE.replace(
        "must_test = [\"light\", ",
        "must_test = [\"chamber x light\", ",
    );
    rejected(
        "must-nested",
        &t,
        Some("must_test"),
        "cannot be crossed",
        &[],
    );
}

#[test]
fn must_test_missing() {
    let t = BASE.replace("must_test = [\"light\", \"light x cultivar\"]\n", "");
    rejected("must-missing", &t, None, "must_test is empty", &[]);
}

#[test]
fn budget_negative() {
    let t = BASE.replace("budget = 25000", "budget = -5");
    rejected(
        "budget-negative",
        &t,
        Some("budget = -5"),
        "finite positive number",
        &[],
    );
}

#[test]
fn budget_zero() {
    let t = BASE.replace("budget = 25000", "budget = 0.0");
    rejected(
        "budget-zero",
        &t,
        Some("budget = 0.0"),
        "finite positive number",
        &[],
    );
}

#[test]
fn budget_not_finite() {
    let t = BASE.replace("budget = 25000", "budget = inf");
    rejected(
        "budget-inf",
        &t,
        Some("budget = inf"),
        "finite positive number",
        &[],
    );
    let t = BASE.replace("budget = 25000", "budget = nan");
    rejected(
        "budget-nan",
        &t,
        Some("budget = nan"),
        "finite positive number",
        &[],
    );
}

#[test]
fn min_df_negative() {
    let t = BASE.replace("min_df = 4", "min_df = -1");
    rejected(
        "min-df-negative",
        &t,
        Some("min_df = -1"),
        "min_df must be a finite number",
        &[],
    );
}

#[test]
fn min_df_not_finite() {
    let t = BASE.replace("min_df = 4", "min_df = inf");
    rejected(
        "min-df-inf",
        &t,
        Some("min_df = inf"),
        "min_df must be a finite number",
        &[],
    );
}

#[test]
fn target_power_outside_zero_one() {
    for (tag, v) in [
        ("power-one", "1.0"),
        ("power-big", "1.5"),
        ("power-zero", "0.0"),
    ] {
        let t = BASE.replace("target_power = 0.8", &format!("target_power = {v}"));
        rejected(tag, &t, Some("target_power ="), "between 0 and 1", &[]);
    }
}

#[test]
fn target_power_without_priors() {
    let t = BASE.replace("[sd]\nresidual = 1.0\nchamber = 0.5\n", "");
    rejected(
        "power-no-prior",
        &t,
        Some("target_power"),
        "needs an [sd] table",
        &[],
    );
}

#[test]
fn target_power_without_an_effect_for_a_fixed_must_test_term() {
    let t = BASE.replace("\"light x cultivar\" = 0.5\n", "");
    rejected(
        "power-no-effect",
        &t,
        Some("target_power"),
        "add it under [effect]",
        &[],
    );
}

#[test]
fn power_flag_without_priors() {
    let t = BASE
        .replace("[sd]\nresidual = 1.0\nchamber = 0.5\n", "")
        .replace("target_power = 0.8\n", "");
    rejected(
        "power-flag-no-prior",
        &t,
        None,
        "--power 0.9 asks for power",
        &["--power", "0.9"],
    );
}

#[test]
fn no_cost_table() {
    let t = BASE.replace(
        "[cost]\noverhead = 100\n[cost.per_unit]\nchamber = 700\nresidual = 5\n",
        "",
    );
    rejected("no-cost", &t, None, "no [cost] table", &[]);
}

#[test]
fn no_search_table() {
    let at = BASE.find("[search]").expect("search");
    rejected("no-search", &BASE[..at], None, "no [search] table", &[]);
}

/// serde's deny_unknown_fields: a misspelt key is an error with its line.
#[test]
fn unknown_key_in_search() {
    let t = BASE.replace("min_df = 4", "min_dff = 4");
    rejected("unknown-key", &t, Some("min_dff"), "unknown field", &[]);
}

#[test]
fn space_beyond_the_limit() {
    rejected(
        "too-large",
        BASE,
        None,
        "more than the limit of 10",
        &["--max-candidates", "10"],
    );
}

#[test]
fn bad_command_line_values_are_refused() {
    let path = scratch("usage").join("problem.toml");
    std::fs::write(&path, BASE).expect("write");
    let p = path.to_str().expect("path");
    // Values the argument parser accepts but the search refuses are bad input (exit 1);
    // what the parser itself refuses is a usage error (exit 2).
    for (args, code) in [
        (vec!["search", p, "--top", "0"], 1),
        (vec!["search", p, "--power", "1.5"], 1),
        (vec!["search", p, "--alpha", "0"], 1),
        (vec!["search", p, "--method", "guess"], 2),
        (vec!["search", p, "--top", "ten"], 2),
    ] {
        let out = run(&args);
        assert_eq!(out.status.code(), Some(code), "{args:?}");
    }
}

/// The optimizer finishes by enumeration where its answers keep failing the power target,
/// and that enumeration is bounded by --max-candidates too.
#[test]
fn optimizer_fallback_is_bounded_by_the_limit() {
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("benches/search-million.toml");
    let p = path.to_str().expect("path");
    let out = run(&[
        "search",
        p,
        "--method",
        "optimize",
        "--max-candidates",
        "100",
    ]);
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(1), "{stderr}");
    let last = stderr.lines().last().expect("a message");
    assert!(last.starts_with(&format!("emsplan: {p}: ")), "{last}");
    assert!(last.contains("more than the limit of 100"), "{last}");
    assert!(out.stdout.is_empty());
}

fn best_cost(args: &[&str]) -> (f64, serde_json::Value) {
    let out = run(args);
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).expect("JSON");
    (v["best"]["cost"].as_f64().expect("a best layout"), v)
}

/// --power replaces the file's power target and --alpha its level; a stricter target or
/// a smaller alpha can only make the cheapest feasible layout dearer (power falls as
/// alpha falls, for the same layout: common practice).
#[test]
fn power_and_alpha_flags_change_the_search() {
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("problems/search-chamber-power.toml");
    let p = path.to_str().expect("path");
    let (base, _) = best_cost(&["search", p, "--format", "json"]);
    let (strict, v) = best_cost(&["search", p, "--format", "json", "--power", "0.95"]);
    assert_eq!(v["constraints"]["target_power"], 0.95);
    assert!(strict > base, "{strict} vs {base}");
    for t in v["best"]["tests"].as_array().expect("tests") {
        assert!(t["power"].as_f64().expect("power") >= 0.95);
    }
    let (small_alpha, v) = best_cost(&["search", p, "--format", "json", "--alpha", "0.01"]);
    assert_eq!(v["constraints"]["alpha"], 0.01);
    assert!(small_alpha >= base, "{small_alpha} vs {base}");
}
