//! Power, Satterthwaite df, minimum detectable effects and cost, through the whole
//! check pipeline, against published values and hand-worked examples.

use emsplan::check::{CheckReport, check};
use emsplan::layout::Layout;
use emsplan::planning::{PlanningValues, satterthwaite};

fn run(text: &str) -> CheckReport {
    let spec = emsplan::spec::parse(text).expect("parses");
    let layout = Layout::from_spec(&spec, text).expect("valid layout");
    let plan = PlanningValues::from_spec(&spec, text, &layout).expect("valid planning values");
    check(&layout, layout.structure.convention, &plan).expect("check runs")
}

fn test_of<'a>(r: &'a CheckReport, label: &str) -> &'a emsplan::check::TestReport {
    r.terms
        .iter()
        .find(|t| t.label == label)
        .and_then(|t| t.test.as_ref())
        .unwrap_or_else(|| panic!("no test for {label}"))
}

fn one_way(groups: u32, per_group: u32, f: f64) -> String {
    format!(
        r#"
[layout]
name = "one-way"
replicates = {per_group}
[[factor]]
name = "ration"
kind = "fixed"
levels = {groups}
[sd]
residual = 1.0
[effect]
ration = {f}
"#
    )
}

/// Cohen (1988), Statistical Power Analysis for the Behavioral Sciences, ch. 8: with
/// f = effect root mean square / σ and λ = f² N, a one-way F test at α = 0.05 has
/// power 0.80 for f = 0.25 (a "medium" effect) with n = 64 per group for two groups
/// (the d = 0.5 case of ch. 2) and n = 45 per group for four groups (u = 3). Both
/// values are from memory of Cohen's tables, which are given to two decimals, hence
/// the tolerance of 0.01.
#[test]
fn one_way_power_matches_cohen() {
    for (groups, n) in [(2, 64), (4, 45)] {
        let r = run(&one_way(groups, n, 0.25));
        let p = test_of(&r, "ration").power.expect("power");
        assert!((p - 0.80).abs() < 0.01, "{groups} groups of {n}: power {p}");
    }
}

/// The minimum detectable effect is the effect at which the power equals the target:
/// feeding it back must give the target power (an identity of the definition).
#[test]
fn minimum_detectable_effect_gives_target_power() {
    let r = run(&one_way(3, 10, 0.5));
    let mde = test_of(&r, "ration").min_detectable.expect("mde");
    let r2 = run(&one_way(3, 10, mde));
    let p = test_of(&r2, "ration").power.expect("power");
    assert!((p - 0.8).abs() < 1e-6, "power at the MDE: {p}");
}

/// Random term: E(MS_B) = σ² + nσ²_B against σ²; the power is P(F > F_crit / (1 +
/// nσ²_B/σ²)) (e.g. Montgomery, chapter on random models, the operating characteristic
/// of the random-effects test; common practice). At the minimum detectable SD the power
/// equals the target.
#[test]
fn random_term_minimum_detectable_sd_gives_target_power() {
    let text = |sd: f64| {
        format!(
            r#"
[layout]
replicates = 4
[[factor]]
name = "batch"
kind = "random"
levels = 6
[sd]
residual = 2.0
batch = {sd}
"#
        )
    };
    let r = run(&text(1.0));
    let t = test_of(&r, "batch");
    let mde = t.min_detectable.expect("mde");
    let p_at_mde = test_of(&run(&text(mde)), "batch").power.expect("power");
    assert!(
        (p_at_mde - 0.8).abs() < 1e-6,
        "power at MDE {mde}: {p_at_mde}"
    );
    // Larger variance, more power.
    assert!(test_of(&run(&text(2.0)), "batch").power.unwrap() > t.power.unwrap());
}

/// Satterthwaite (1946) worked by hand: D = MS1 + MS2 - MS3 with expected values 10, 8
/// and 4 on 3, 2 and 6 df: (10 + 8 - 4)² / (100/3 + 64/2 + 16/6) = 196 / 68 = 2.882352...
#[test]
fn satterthwaite_hand_worked() {
    let df = satterthwaite(&[(1.0, 10.0, 3), (1.0, 8.0, 2), (-1.0, 4.0, 6)]).unwrap();
    assert!((df - 196.0 / 68.0).abs() < 1e-12, "{df}");
    // A single mean square keeps its own df.
    assert_eq!(satterthwaite(&[(1.0, 5.0, 7)]), Some(7.0));
}

/// The synthetic test of a fixed factor crossed with two random factors: its
/// Satterthwaite df follow from the planning values, worked by hand from the expected
/// mean squares (a = 2, b = 4, c = 3, n = 2; σ = 2, σ_AB = 0.8, σ_AC = 0.6, σ_ABC = 0.5):
/// E(MS_AB) = 4 + 2(0.25) + 6(0.64) = 8.34 on 3 df, E(MS_AC) = 4 + 0.5 + 8(0.36) = 7.38
/// on 2 df, E(MS_ABC) = 4.5 on 6 df: df = (8.34 + 7.38 - 4.5)² / (8.34²/3 + 7.38²/2 +
/// 4.5²/6) = 125.8884 / 53.8050 = 2.3397...
#[test]
fn synthetic_test_gets_satterthwaite_df() {
    let text = std::fs::read_to_string(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/problems/coating-lines.toml"
    ))
    .unwrap();
    let r = run(&text);
    let t = test_of(&r, "recipe");
    let want = (8.34f64 + 7.38 - 4.5).powi(2)
        / (8.34f64.powi(2) / 3.0 + 7.38f64.powi(2) / 2.0 + 4.5f64.powi(2) / 6.0);
    let got = t.denominator_df.expect("Satterthwaite df");
    assert!((got - want).abs() < 1e-9, "{got} vs {want}");
    assert!(t.power.is_some());
}

/// Cost: overhead plus per-unit prices times the cells of each priced term (each
/// chamber is one of 3 per light regime, 9 in all; each pot one of 108 observations).
#[test]
fn cost_breakdown() {
    let text = std::fs::read_to_string(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/problems/growth-chambers.toml"
    ))
    .unwrap();
    let r = run(&text);
    let c = r.cost.as_ref().expect("cost");
    assert_eq!(c.total, 1500.0 + 9.0 * 900.0 + 108.0 * 6.0);
    let chamber = c
        .breakdown
        .iter()
        .find(|l| l.label == "chamber(light)")
        .unwrap();
    assert_eq!(chamber.units, 9);
}

/// `range = D` for a main effect: two levels D apart and the rest midway have effects
/// +D/2, -D/2, 0, ..., so the root mean square over a levels is D / sqrt(2a).
#[test]
fn range_maps_to_root_mean_square() {
    let with = |effect: &str| {
        run(&format!(
            r#"
[layout]
replicates = 5
[[factor]]
name = "dose"
kind = "fixed"
levels = 4
[sd]
residual = 1.0
[effect]
dose = {effect}
"#
        ))
    };
    let a = test_of(&with("{ range = 2.0 }"), "dose").power.unwrap();
    let b = test_of(&with(&format!("{}", 2.0 / 8f64.sqrt())), "dose")
        .power
        .unwrap();
    assert!((a - b).abs() < 1e-12, "{a} vs {b}");
}

/// Bad planning values are errors that name the key.
#[test]
fn bad_planning_values_are_errors() {
    let base = r#"
[layout]
replicates = 2
[[factor]]
name = "dose"
kind = "fixed"
levels = 3
[[factor]]
name = "tray"
kind = "random"
levels = 2
"#;
    let cases = [
        ("[sd]\nresidual = -1.0\n", "negative"),
        ("[sd]\nresidual = nan\n", "not a finite number"),
        (
            "[sd]\nresidual = 1.0\nbench = 1.0\n",
            "\"bench\", which is not a factor",
        ),
        ("[sd]\nresidual = 1.0\ndose = 1.0\n", "is a fixed term"),
        ("[sd]\ntray = 1.0\n", "needs `residual`"),
        ("[effect]\ntray = 1.0\n", "is a random term"),
        ("[effect]\n\"dose x tray\" = 1.0\n", "is a random term"),
        ("[effect]\ndose = inf\n", "not a finite number"),
        ("[cost.per_unit]\nshelf = 3.0\n", "not a factor"),
        ("[cost]\noverhead = -5.0\n", "negative"),
        ("alpha = 1.5\n", "alpha must be a number between 0 and 1"),
    ];
    for (extra, phrase) in cases {
        let text = if extra.starts_with("alpha") {
            format!("{extra}{base}")
        } else {
            format!("{base}{extra}")
        };
        let spec = emsplan::spec::parse(&text).expect("parses");
        let layout = Layout::from_spec(&spec, &text).expect("layout is fine");
        let err = PlanningValues::from_spec(&spec, &text, &layout).expect_err(extra);
        let msg = err.to_string();
        assert!(msg.contains(phrase), "{extra:?}: {msg}");
        assert!(
            msg.starts_with("line "),
            "{extra:?} should name a line: {msg}"
        );
    }
}
