//! The engine against published results on expected mean squares and error terms.
//! Each case names its source; "common practice" marks a fact of the trade found in
//! every design textbook; "from memory" marks a value recalled rather than looked up.

use std::collections::BTreeMap;

use emsplan::check::check;
use emsplan::errorterm::Verdict;
use emsplan::findings::CheckReport;
use emsplan::layout::{Convention, Layout};
use emsplan::planning::PlanningValues;

fn layout(text: &str) -> (Layout, PlanningValues) {
    let spec = emsplan::spec::parse(text).expect("test layout parses");
    let layout = Layout::from_spec(&spec, text).expect("test layout is valid");
    let plan = PlanningValues::from_spec(&spec, text, &layout).expect("planning values are valid");
    (layout, plan)
}

fn run(text: &str, convention: Convention) -> CheckReport {
    let (l, p) = layout(text);
    check(&l, convention, &p).expect("check runs")
}

/// E(MS) of a term as component label -> coefficient.
fn ems(report: &CheckReport, term: &str) -> BTreeMap<String, f64> {
    let t = report
        .terms
        .iter()
        .find(|t| t.label == term)
        .unwrap_or_else(|| panic!("no term {term}"));
    t.ems
        .iter()
        .map(|c| (c.component.clone(), c.coefficient.value()))
        .collect()
}

fn expect_ems(report: &CheckReport, term: &str, expected: &[(&str, f64)]) {
    let got = ems(report, term);
    let want: BTreeMap<String, f64> = expected.iter().map(|(k, v)| (k.to_string(), *v)).collect();
    assert_eq!(got, want, "E(MS) of {term} under {:?}", report.convention);
}

/// (verdict, denominator as label -> weight, denominator df)
fn test_of(report: &CheckReport, term: &str) -> (Verdict, BTreeMap<String, f64>, Option<f64>) {
    let t = report.terms.iter().find(|t| t.label == term).expect("term");
    let test = t.test.as_ref().expect("term has a test");
    (
        test.verdict,
        test.denominator
            .iter()
            .map(|d| (d.term.clone(), d.coefficient.value()))
            .collect(),
        test.denominator_df,
    )
}

fn expect_exact(report: &CheckReport, term: &str, over: &str, df: f64) {
    let (verdict, den, ddf) = test_of(report, term);
    assert_eq!(verdict, Verdict::Exact, "{term} should have an exact test");
    assert_eq!(
        den.keys().collect::<Vec<_>>(),
        vec![over],
        "{term} tested over"
    );
    assert_eq!(ddf, Some(df), "denominator df of {term}");
}

const MIXED_TWO_FACTOR: &str = r#"
[layout]
name = "feed (fixed) by farm (random)"
replicates = 2
[[factor]]
name = "feed"
kind = "fixed"
levels = 3
[[factor]]
name = "farm"
kind = "random"
levels = 4
"#;

/// Two-factor mixed model, A fixed (a = 3), B random (b = 4), n = 2. Restricted:
/// E(MS_B) = σ² + anσ²_B and B is tested over the residual; A over AB.
/// Unrestricted: E(MS_B) = σ² + nσ²_AB + anσ²_B and B is tested over AB.
/// Source: Montgomery, Design and Analysis of Experiments, chapter on random and mixed
/// models (the restricted and unrestricted mixed models); common practice.
#[test]
fn two_factor_mixed_model_both_conventions() {
    let r = run(MIXED_TWO_FACTOR, Convention::Restricted);
    expect_ems(&r, "farm", &[("residual", 1.0), ("farm", 6.0)]);
    expect_ems(
        &r,
        "feed",
        &[("residual", 1.0), ("feed x farm", 2.0), ("feed", 8.0)],
    );
    expect_ems(
        &r,
        "feed x farm",
        &[("residual", 1.0), ("feed x farm", 2.0)],
    );
    expect_exact(&r, "farm", "residual", 12.0);
    expect_exact(&r, "feed", "feed x farm", 6.0);
    expect_exact(&r, "feed x farm", "residual", 12.0);

    let u = run(MIXED_TWO_FACTOR, Convention::Unrestricted);
    expect_ems(
        &u,
        "farm",
        &[("residual", 1.0), ("feed x farm", 2.0), ("farm", 6.0)],
    );
    expect_ems(
        &u,
        "feed",
        &[("residual", 1.0), ("feed x farm", 2.0), ("feed", 8.0)],
    );
    expect_exact(&u, "farm", "feed x farm", 6.0);
    expect_exact(&u, "feed", "feed x farm", 6.0);
}

const THREE_RANDOM: &str = r#"
[layout]
name = "operators, gauges and parts all drawn at random"
replicates = 2
[[factor]]
name = "operator"
kind = "random"
levels = 3
[[factor]]
name = "gauge"
kind = "random"
levels = 4
[[factor]]
name = "part"
kind = "random"
levels = 5
"#;

/// Three random factors crossed: no main effect has an exact test; the synthetic
/// denominator of A is MS_AB + MS_AC - MS_ABC (Montgomery, chapter on random and mixed
/// models, the approximate F tests; Satterthwaite 1946 for its df).
#[test]
fn three_random_factors_need_a_synthetic_denominator() {
    for convention in [Convention::Restricted, Convention::Unrestricted] {
        let r = run(THREE_RANDOM, convention);
        let (verdict, den, ddf) = test_of(&r, "operator");
        assert_eq!(verdict, Verdict::QuasiF);
        let want: BTreeMap<String, f64> = [
            ("operator x gauge", 1.0),
            ("operator x part", 1.0),
            ("operator x gauge x part", -1.0),
        ]
        .iter()
        .map(|(k, v)| (k.to_string(), *v))
        .collect();
        assert_eq!(den, want);
        assert_eq!(ddf, None, "no planning values, so no Satterthwaite df yet");
        // E(MS_A) = σ² + nσ²_ABC + cnσ²_AB + bnσ²_AC + bcnσ²_A with a=3, b=4, c=5, n=2.
        expect_ems(
            &r,
            "operator",
            &[
                ("residual", 1.0),
                ("operator x gauge x part", 2.0),
                ("operator x gauge", 10.0),
                ("operator x part", 8.0),
                ("operator", 40.0),
            ],
        );
        expect_exact(&r, "operator x gauge", "operator x gauge x part", 24.0);
    }
}

/// Two-stage nested design, A fixed (a = 4), B(A) random (b = 3), n = 2: A is tested
/// over B(A) with a(b - 1) = 8 df; E(MS_A) = σ² + nσ²_B(A) + bnκ²_A (Montgomery, chapter
/// on nested designs, the two-stage nested design; common practice).
#[test]
fn two_stage_nested() {
    let text = r#"
[layout]
name = "litters within diets"
replicates = 2
[[factor]]
name = "diet"
kind = "fixed"
levels = 4
[[factor]]
name = "litter"
kind = "random"
levels = 3
within = ["diet"]
"#;
    let r = run(text, Convention::Restricted);
    expect_exact(&r, "diet", "litter(diet)", 8.0);
    expect_exact(&r, "litter(diet)", "residual", 12.0);
    expect_ems(
        &r,
        "diet",
        &[("residual", 1.0), ("litter(diet)", 2.0), ("diet", 6.0)],
    );
}

/// Split-plot in random blocks: blocks random, whole-plot treatment A fixed, split-plot
/// treatment B fixed. The whole-plot treatment is tested over block x A, the split-plot
/// treatment over block x B, and A x B over block x A x B (Montgomery, chapter on
/// split-plot designs, the restricted-model analysis; common practice).
#[test]
fn split_plot_in_random_blocks() {
    let text = r#"
[layout]
name = "irrigation on whole plots, cultivar on split plots, in random blocks"
replicates = 1
[[factor]]
name = "block"
kind = "random"
levels = 4
[[factor]]
name = "irrigation"
kind = "fixed"
levels = 3
[[factor]]
name = "cultivar"
kind = "fixed"
levels = 2
"#;
    let r = run(text, Convention::Restricted);
    expect_exact(&r, "irrigation", "block x irrigation", 6.0);
    expect_exact(&r, "cultivar", "block x cultivar", 3.0);
    expect_exact(
        &r,
        "irrigation x cultivar",
        "block x irrigation x cultivar",
        6.0,
    );
    // One observation per cell: the residual has no df, so the highest interaction
    // with blocks is not testable and the block effect is not either (no error).
    let (verdict, _, _) = test_of(&r, "block");
    assert_eq!(verdict, Verdict::Untestable);
}

/// A fixed factor crossed with a random factor nested in a second fixed factor
/// (treatment B, units C(B), treatment A applied within every unit): A over A x C(B),
/// B over C(B), A x B over A x C(B), C(B) over the residual. Common practice (the
/// repeated-measures / split-plot-in-units layout of every design text).
#[test]
fn fixed_crossed_with_random_nested_in_fixed() {
    let text = r#"
[layout]
name = "tank temperature (B), tanks (C), diet within every tank (A)"
replicates = 3
[[factor]]
name = "diet"
kind = "fixed"
levels = 3
[[factor]]
name = "temperature"
kind = "fixed"
levels = 2
[[factor]]
name = "tank"
kind = "random"
levels = 4
within = ["temperature"]
"#;
    let r = run(text, Convention::Restricted);
    expect_exact(&r, "diet", "diet x tank(temperature)", 12.0);
    expect_exact(&r, "temperature", "tank(temperature)", 6.0);
    expect_exact(&r, "diet x temperature", "diet x tank(temperature)", 12.0);
    expect_exact(&r, "tank(temperature)", "residual", 48.0);
}

/// One random unit per treatment level: the treatment is untestable, because the
/// unit's variance is confounded with the treatment (Hurlbert 1984, Ecological
/// Monographs 54:187-211, on pseudoreplication).
#[test]
fn one_unit_per_treatment_is_untestable() {
    let text = r#"
[layout]
name = "one pen per ration"
replicates = 8
[[factor]]
name = "ration"
kind = "fixed"
levels = 3
[[factor]]
name = "pen"
kind = "random"
levels = 1
within = ["ration"]
"#;
    let r = run(text, Convention::Restricted);
    let (verdict, den, _) = test_of(&r, "ration");
    assert_eq!(verdict, Verdict::Untestable);
    assert!(den.is_empty());
    let pen = r.terms.iter().find(|t| t.label == "pen(ration)").unwrap();
    assert_eq!(pen.df, 0);
    assert_eq!(pen.test.as_ref().unwrap().verdict, Verdict::NotEstimable);
    // The pen variance is still in the ration's expected mean square.
    expect_ems(
        &r,
        "ration",
        &[("residual", 1.0), ("pen(ration)", 8.0), ("ration", 8.0)],
    );
    // The reason names the confounded variance, and the repair is a second pen.
    let ration = r.terms.iter().find(|t| t.label == "ration").unwrap();
    let test = ration.test.as_ref().unwrap();
    let reason = emsplan::render::words::reason(ration, test).unwrap();
    assert!(reason.contains("pen"), "{reason}");
    assert!(
        test.repairs
            .iter()
            .any(
                |x| emsplan::render::words::change(&x.change).contains("2 levels of pen")
                    && !x.assumption
            ),
        "{:?}",
        test.repairs
    );
}

/// A finite population: the coefficient of a random component in the mean square of
/// a term it is not live in carries (1 - n/N) (Cornfield and Tukey 1956, Annals of
/// Mathematical Statistics 27:907-949). A fixed (a = 2), B random, b = 4 of N = 10:
/// E(MS_A) = σ² + (1 - 4/10) n σ²_AB + bn κ²_A, with n = 3.
#[test]
fn finite_population_coefficient() {
    let text = r#"
[layout]
name = "two mowing regimes on 4 of the reserve's 10 meadows"
replicates = 3
[[factor]]
name = "mowing"
kind = "fixed"
levels = 2
[[factor]]
name = "meadow"
kind = "random"
levels = 4
population = 10
"#;
    let r = run(text, Convention::Restricted);
    expect_ems(
        &r,
        "mowing",
        &[
            ("residual", 1.0),
            ("mowing x meadow", 1.8),
            ("mowing", 12.0),
        ],
    );
    // The meadow row: the mixed interaction drops out under the restricted model
    // (its fixed subscript is uncovered).
    expect_ems(&r, "meadow", &[("residual", 1.0), ("meadow", 6.0)]);
    // The fraction is exact, not rounded.
    let m = r.terms.iter().find(|t| t.label == "mowing").unwrap();
    let c = m
        .ems
        .iter()
        .find(|c| c.component == "mowing x meadow")
        .unwrap();
    let exact = c
        .coefficient
        .exact()
        .expect("balanced coefficients are exact");
    assert_eq!((*exact.numer(), *exact.denom()), (9, 5));
}

/// Two random factors from finite populations (Cornfield and Tukey 1956): E(MS_A) =
/// σ² + n(1 - b/N_b)σ²_AB + bnσ²_A. With every level of the population sampled
/// (b = N_b) the interaction drops out, as if B were fixed.
#[test]
fn finite_population_fully_sampled_acts_as_fixed() {
    let text = |pop: u32| {
        format!(
            r#"
[layout]
name = "batches and kilns"
replicates = 2
[[factor]]
name = "batch"
kind = "random"
levels = 3
[[factor]]
name = "kiln"
kind = "random"
levels = 4
population = {pop}
"#
        )
    };
    let r = run(&text(8), Convention::Restricted);
    expect_ems(
        &r,
        "batch",
        &[("residual", 1.0), ("batch x kiln", 1.0), ("batch", 8.0)],
    );
    let r = run(&text(4), Convention::Restricted);
    expect_ems(&r, "batch", &[("residual", 1.0), ("batch", 8.0)]);
    expect_exact(&r, "batch", "residual", 12.0);
}

/// Omitted interactions pool into the residual: df(residual) = cells(n - 1) + df(AB).
/// Common practice (pooling an interaction assumed absent).
#[test]
fn omitted_interaction_pools_into_residual() {
    let text = r#"
[layout]
name = "varieties in blocks, additivity assumed"
replicates = 1
omit = ["variety x block"]
[[factor]]
name = "variety"
kind = "fixed"
levels = 5
[[factor]]
name = "block"
kind = "random"
levels = 4
"#;
    let r = run(text, Convention::Restricted);
    assert!(r.terms.iter().all(|t| t.label != "variety x block"));
    expect_exact(&r, "variety", "residual", 12.0);
    expect_exact(&r, "block", "residual", 12.0);
}
