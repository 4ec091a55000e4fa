//! Layouts of units and treatments against the textbook analyses of the commonest
//! designs: each treatment term's error term and its df. Each case names its source;
//! "common practice" marks a fact found in every design textbook, "from memory" a value
//! recalled rather than looked up. The df formulas are in the trade's letters: r blocks
//! (or replicates), a, b, c levels of the treatments, s subsamples.

use emsplan::check::{CheckReport, check_with_goal};
use emsplan::errorterm::Verdict;
use emsplan::goal::Goal;
use emsplan::layout::{Convention, Layout};
use emsplan::planning::PlanningValues;
use proptest::prelude::*;

fn run(text: &str, convention: Convention) -> CheckReport {
    let spec = emsplan::spec::parse(text).expect("test layout parses");
    let layout = Layout::from_spec(&spec, text).expect("test layout is valid");
    let plan = PlanningValues::from_spec(&spec, text, &layout).expect("planning values");
    let goal = Goal::from_spec(&spec, text, &layout).expect("goal");
    check_with_goal(&layout, convention, &plan, &goal).expect("check runs")
}

/// The term's exact test: (the term it is tested over, its df).
fn test_of(report: &CheckReport, term: &str) -> (String, f64) {
    let t = report
        .terms
        .iter()
        .find(|t| t.label == term)
        .unwrap_or_else(|| panic!("no term {term} in {:?}", labels(report)));
    let test = t.test.as_ref().expect("the term has a test");
    assert_eq!(test.verdict, Verdict::Exact, "{term}: exact test expected");
    assert_eq!(test.denominator.len(), 1, "{term}: one mean square");
    let d = &test.denominator[0];
    let df = report
        .terms
        .iter()
        .find(|x| x.id == d.id)
        .map(|x| x.df as f64)
        .expect("the denominator is a term");
    (d.term.clone(), df)
}

fn labels(report: &CheckReport) -> Vec<String> {
    report.terms.iter().map(|t| t.label.clone()).collect()
}

/// Every treatment term tested as the textbook says, under both conventions (the unit
/// terms follow the randomisation model, so the conventions agree on treatment tests).
fn expect(text: &str, cases: &[(&str, &str, f64)]) {
    for convention in [Convention::Restricted, Convention::Unrestricted] {
        let report = run(text, convention);
        for &(term, over, df) in cases {
            assert_eq!(
                test_of(&report, term),
                (over.to_string(), df),
                "{term} under {convention:?}"
            );
        }
        let strata = report
            .strata
            .as_ref()
            .expect("a layout of units has strata");
        let total: u64 = strata.strata.iter().map(|s| s.df).sum();
        assert_eq!(total, report.observations - 1, "strata df add up");
        assert!(report.pseudoreplication().is_empty());
        assert_eq!(
            report.needing_attention().count(),
            0,
            "nothing needs attention"
        );
    }
}

/// Randomised complete block, one plot per variety per block: variety over the plot
/// error with (r - 1)(a - 1) = 3 x 5 = 15 df. Cochran and Cox (1957), Experimental
/// Designs, ch. 4; common practice.
const RCBD: &str = r#"
[[unit]]
name = "block"
count = 4
[[unit]]
name = "plot"
within = "block"
count = 6
[[treatment]]
name = "variety"
levels = 6
randomised_to = "plot"
"#;

#[test]
fn randomised_complete_block() {
    expect(RCBD, &[("variety", "plot", 15.0)]);
    let report = run(RCBD, Convention::Restricted);
    // The plot is block x variety; no 0-df residual row, no block advice.
    assert_eq!(labels(&report), ["block", "variety", "plot"]);
    let block = report.terms.iter().find(|t| t.label == "block").unwrap();
    assert!(!block.of_interest);
    assert!(block.test.as_ref().unwrap().repairs.is_empty());
}

/// The same with three plants weighed per plot: variety is still tested over plots,
/// (r - 1)(a - 1) = 15 df, never over the r a (s - 1) = 48 df between plants. Steel and
/// Torrie (1980), Principles and Procedures of Statistics, 2nd ed., on subsampling in
/// randomised blocks (from memory); Hurlbert (1984), Ecological Monographs 54:187-211.
#[test]
fn randomised_block_with_subsamples() {
    let text = format!("{RCBD}\n[[unit]]\nname = \"plant\"\nwithin = \"plot\"\ncount = 3\n");
    expect(&text, &[("variety", "plot", 15.0)]);
    let report = run(&text, Convention::Restricted);
    let plant = report.terms.iter().find(|t| t.residual).unwrap();
    assert_eq!((plant.label.as_str(), plant.df), ("plant", 48));
    let strata = report.strata.unwrap();
    assert!(
        strata
            .strata
            .iter()
            .any(|s| s.unit == "plant" && s.subsample)
    );
}

/// Completely randomised, five tanks per diet, three fish per tank: diet over tanks
/// with a (r - 1) = 4 x 4 = 16 df; fish within tanks have a r (s - 1) = 40 df. Steel and
/// Torrie (1980), the completely random design with subsamples (from memory).
#[test]
fn completely_randomised_with_subsamples() {
    let text = r#"
[[unit]]
name = "tank"
count = 20
[[unit]]
name = "fish"
within = "tank"
count = 3
[[treatment]]
name = "diet"
levels = 4
randomised_to = "tank"
"#;
    expect(text, &[("diet", "tank(diet)", 16.0)]);
}

/// Split-plot in r = 4 blocks, a = 3 nitrogen levels on main plots, b = 4 varieties on
/// subplots: nitrogen over main plots, (r - 1)(a - 1) = 6 df; variety and nitrogen x
/// variety over subplots, a (r - 1)(b - 1) = 27 df. Gomez and Gomez (1984), Statistical
/// Procedures for Agricultural Research, 2nd ed., ch. 3 (from memory); Cochran and Cox
/// (1957), ch. 7.
const SPLIT_PLOT: &str = r#"
[[unit]]
name = "block"
count = 4
[[unit]]
name = "mainplot"
within = "block"
count = 3
[[unit]]
name = "subplot"
within = "mainplot"
count = 4
[[treatment]]
name = "nitrogen"
levels = 3
randomised_to = "mainplot"
[[treatment]]
name = "variety"
levels = 4
randomised_to = "subplot"
"#;

#[test]
fn split_plot() {
    expect(
        SPLIT_PLOT,
        &[
            ("nitrogen", "mainplot", 6.0),
            ("variety", "subplot", 27.0),
            ("nitrogen x variety", "subplot", 27.0),
        ],
    );
}

/// The mixed-model form of the same split-plot (additive = false): block x variety kept
/// as a random term; variety over it with (r - 1)(b - 1) = 9 df, nitrogen x variety over
/// the subplot error with (r - 1)(a - 1)(b - 1) = 18 df. The standard mixed-model
/// analysis with random block x treatment interactions (common practice; from memory).
#[test]
fn split_plot_mixed_model() {
    let text = format!("[layout]\nadditive = false\n{SPLIT_PLOT}");
    expect(
        &text,
        &[
            ("nitrogen", "mainplot", 6.0),
            ("variety", "block x variety", 9.0),
            ("nitrogen x variety", "subplot", 18.0),
        ],
    );
}

/// Split-split-plot, r = 3 blocks, a = 2, b = 3, c = 4: A over main plots (r - 1)(a - 1)
/// = 2 df; B and AB over subplots a (r - 1)(b - 1) = 8 df; C and every interaction with
/// C over sub-subplots a b (r - 1)(c - 1) = 36 df. Gomez and Gomez (1984), ch. 4 (from
/// memory).
#[test]
fn split_split_plot() {
    let text = r#"
[[unit]]
name = "block"
count = 3
[[unit]]
name = "mainplot"
within = "block"
count = 2
[[unit]]
name = "subplot"
within = "mainplot"
count = 3
[[unit]]
name = "subsubplot"
within = "subplot"
count = 4
[[treatment]]
name = "irrigation"
levels = 2
randomised_to = "mainplot"
[[treatment]]
name = "nitrogen"
levels = 3
randomised_to = "subplot"
[[treatment]]
name = "variety"
levels = 4
randomised_to = "subsubplot"
"#;
    expect(
        text,
        &[
            ("irrigation", "mainplot", 2.0),
            ("nitrogen", "subplot", 8.0),
            ("irrigation x nitrogen", "subplot", 8.0),
            ("variety", "subsubplot", 36.0),
            ("irrigation x variety", "subsubplot", 36.0),
            ("nitrogen x variety", "subsubplot", 36.0),
            ("irrigation x nitrogen x variety", "subsubplot", 36.0),
        ],
    );
}

/// Strip-plot (split-block), r = 3 blocks, a = 4 levels on horizontal strips, b = 3 on
/// vertical strips: A over the strips it is randomised to, (r - 1)(a - 1) = 6 df; B over
/// its strips, (r - 1)(b - 1) = 4 df; A x B over the intersection plots, (r - 1)(a - 1)
/// (b - 1) = 12 df. Gomez and Gomez (1984), ch. 3 (from memory).
#[test]
fn strip_plot() {
    let text = r#"
[[unit]]
name = "block"
count = 3
[[unit]]
name = "row"
within = "block"
count = 4
[[unit]]
name = "column"
within = "block"
count = 3
[[unit]]
name = "cell"
within = ["row", "column"]
count = 1
[[treatment]]
name = "spacing"
levels = 4
randomised_to = "row"
[[treatment]]
name = "sowing"
levels = 3
randomised_to = "column"
"#;
    expect(
        text,
        &[
            ("spacing", "row", 6.0),
            ("sowing", "column", 4.0),
            ("spacing x sowing", "cell", 12.0),
        ],
    );
}

/// Split-plot with subsamples: r = 4 rooms, t = 2 temperatures on tanks, d = 3 diets on
/// compartments, five fish per compartment. Temperature over tanks (r - 1)(t - 1) = 3
/// df; diet and temperature x diet over compartments t (r - 1)(d - 1) = 12 df, never
/// over the 5-fish subsamples (Gomez and Gomez 1984 for the split-plot; Hurlbert 1984).
#[test]
fn split_plot_with_subsamples() {
    let text = r#"
[[unit]]
name = "room"
count = 4
[[unit]]
name = "tank"
within = "room"
count = 2
[[unit]]
name = "compartment"
within = "tank"
count = 3
[[unit]]
name = "fish"
within = "compartment"
count = 5
[[treatment]]
name = "temperature"
levels = 2
randomised_to = "tank"
[[treatment]]
name = "diet"
levels = 3
randomised_to = "compartment"
"#;
    expect(
        text,
        &[
            ("temperature", "tank", 3.0),
            ("diet", "compartment", 12.0),
            ("temperature x diet", "compartment", 12.0),
        ],
    );
}

/// One chamber per light regime: light is pseudoreplicated, and the check says which
/// unit to replicate (Hurlbert 1984).
#[test]
fn one_unit_per_level_is_pseudoreplication() {
    let text = r#"
[[unit]]
name = "chamber"
count = 3
[[unit]]
name = "pot"
within = "chamber"
count = 8
[[treatment]]
name = "light"
levels = 3
randomised_to = "chamber"
[[treatment]]
name = "cultivar"
levels = 4
randomised_to = "pot"
"#;
    let report = run(text, Convention::Restricted);
    let p = report.pseudoreplication();
    assert_eq!(p.len(), 1, "{p:?}");
    assert_eq!(
        (p[0].term.as_str(), p[0].unit.as_str()),
        ("light", "chamber")
    );
    assert_eq!(
        p[0].cause,
        emsplan::findings::PseudoCause::OneUnitPerLevel {
            count: 3,
            within: vec![],
            fix_count: 6
        }
    );
    // Six chambers, two per light, fix it.
    let fixed = run(
        &text.replace("count = 3\n", "count = 6\n"),
        Convention::Restricted,
    );
    assert!(fixed.pseudoreplication().is_empty());
    assert_eq!(test_of(&fixed, "light"), ("chamber(light)".into(), 3.0));
}

/// Omitting the main plot's own variation tests nitrogen over subplots: named.
#[test]
fn omitting_a_unit_is_pseudoreplication() {
    let text = format!("[layout]\nomit = [\"mainplot\"]\n{SPLIT_PLOT}");
    let report = run(&text, Convention::Restricted);
    let p = report.pseudoreplication();
    assert_eq!(p.len(), 1, "{p:?}");
    assert_eq!(p[0].term, "nitrogen");
    assert_eq!(p[0].tested_over, ["subplot"]);
}

/// An omitted interaction joins the smallest remaining random term that contains it,
/// not the residual: in a split-plot read as factors (unrestricted, where room x
/// temperature x diet is in diet's E(MS)), omitting room x diet pools it into room x
/// temperature x diet, and diet is tested over that, never over the fish.
#[test]
fn omitted_interaction_pools_into_the_next_stratum() {
    let text = r#"
[layout]
replicates = 5
omit = ["room x diet"]
[[factor]]
name = "room"
kind = "random"
levels = 4
[[factor]]
name = "temperature"
kind = "fixed"
levels = 2
[[factor]]
name = "diet"
kind = "fixed"
levels = 3
"#;
    let report = run(text, Convention::Unrestricted);
    // room x temperature x diet: (4-1)(2-1)(3-1) = 6 df, plus room x diet's 6.
    assert_eq!(
        test_of(&report, "diet"),
        ("room x temperature x diet".into(), 12.0)
    );
    let fish = report.terms.iter().find(|t| t.residual).unwrap();
    assert_eq!(fish.df, 4 * 2 * 3 * 4);
}

/// Bad unit layouts: one line each, with the line at fault.
#[test]
fn bad_unit_layouts_are_refused_with_their_line() {
    let cases = [
        (
            "[[unit]]\nname = \"plot\"\ncount = 6\n[[treatment]]\nname = \"v\"\nlevels = 3\nrandomised_to = \"bed\"\n",
            7,
            "not a unit",
        ),
        (
            "[[unit]]\nname = \"plot\"\ncount = 5\n[[treatment]]\nname = \"v\"\nlevels = 3\nrandomised_to = \"plot\"\n",
            3,
            "not a multiple",
        ),
        (
            "[[unit]]\nname = \"plot\"\ncount = 6\n[[unit]]\nname = \"pot\"\nwithin = \"plot\"\ncount = 2\n[[treatment]]\nname = \"v\"\nlevels = 3\nrandomised_to = [\"plot\", \"pot\"]\n",
            11,
            "randomised to 2 units",
        ),
        (
            "[layout]\nreplicates = 3\n[[unit]]\nname = \"plot\"\ncount = 6\n[[treatment]]\nname = \"v\"\nlevels = 3\nrandomised_to = \"plot\"\n",
            2,
            "subsamples",
        ),
    ];
    for (text, line, words) in cases {
        let spec = emsplan::spec::parse(text).expect("parses");
        let err = Layout::from_spec(&spec, text)
            .expect_err("refused")
            .to_string();
        assert!(err.starts_with(&format!("line {line}: ")), "{err}");
        assert!(err.contains(words), "{err}");
        assert!(!err.contains('\n'));
    }
}

/// A random layout of units: a chain of two to four units, each treatment randomised
/// to one of them, counts a multiple of the combinations each carries.
fn unit_layout() -> impl Strategy<Value = String> {
    (
        2usize..=4,
        proptest::collection::vec((2u64..=3, 0usize..4), 1..=3),
        proptest::collection::vec(1u64..=3, 4),
        any::<bool>(),
    )
        .prop_map(|(n, treatments, per, additive)| {
            let mut text = format!("[layout]\nadditive = {additive}\n");
            let mut carried = vec![1u64; n];
            for &(levels, u) in &treatments {
                carried[u % n] *= levels;
            }
            for u in 0..n {
                // Replicate the largest unit so every stratum has an error.
                let r = if u == 0 { per[u].max(2) } else { per[u] };
                let r = if carried[u] == 1 { r.max(2) } else { r };
                text.push_str(&format!(
                    "[[unit]]\nname = \"u{u}\"\ncount = {}\n",
                    r * carried[u]
                ));
                if u > 0 {
                    text.push_str(&format!("within = \"u{}\"\n", u - 1));
                }
            }
            for (k, &(levels, u)) in treatments.iter().enumerate() {
                text.push_str(&format!(
                    "[[treatment]]\nname = \"t{k}\"\nlevels = {levels}\nrandomised_to = \"u{}\"\n",
                    u % n
                ));
            }
            text
        })
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(200))]

    /// Nelder's strata partition the observations: their df add up to N - 1; and every
    /// treatment term with an exact test is tested within the stratum of its unit.
    #[test]
    fn strata_partition_and_hold_their_tests(text in unit_layout()) {
        for convention in [Convention::Restricted, Convention::Unrestricted] {
            let report = run(&text, convention);
            let strata = report.strata.as_ref().unwrap();
            let total: u64 = strata.strata.iter().map(|s| s.df).sum();
            prop_assert_eq!(total, report.observations - 1);
            for t in report.terms.iter().filter(|t| t.of_interest) {
                let test = t.test.as_ref().unwrap();
                if test.verdict != Verdict::Exact {
                    continue;
                }
                for d in &test.denominator {
                    let over = report.terms.iter().find(|x| x.id == d.id).unwrap();
                    prop_assert_eq!(&over.stratum, &t.stratum, "{} over {}\n{}", t.label, over.label, text);
                }
            }
        }
    }
}

/// Any file of units and treatments, however wrong, is either refused in one line or
/// checked: never a panic. Names, parents, counts and targets are drawn at random,
/// unknown names and cycles included.
fn any_unit_file() -> impl Strategy<Value = String> {
    let names = ["a", "b", "c", "d"];
    (
        proptest::collection::vec(
            (
                0usize..4,
                0u64..5,
                proptest::option::of(0usize..5),
                0usize..3,
            ),
            1..=4,
        ),
        proptest::collection::vec((0u64..4, 0usize..6, any::<bool>()), 0..=3),
        any::<bool>(),
    )
        .prop_map(move |(mut units, mut treatments, tidy)| {
            // Half the draws are tidied into layouts that can hold: parents declared
            // earlier, levels of two or more, counts a multiple of what each unit carries.
            if tidy {
                let n = units.len();
                for t in &mut treatments {
                    t.0 = t.0.max(2);
                    t.1 %= n;
                }
                for (k, u) in units.iter_mut().enumerate() {
                    u.2 = if k == 0 { None } else { Some(u.0 % k) };
                    let carried: u64 = treatments
                        .iter()
                        .filter(|t| t.1 == k)
                        .map(|t| t.0)
                        .product();
                    u.1 = u.1.clamp(1, 3) * carried;
                    if u.1 == 1 && k > 0 && u.3 != 2 {
                        u.1 = 2;
                    }
                    if u.3 == 2 && k < 2 {
                        u.3 = 0;
                    }
                    if u.3 == 2 {
                        // The crossing of the two units declared just before.
                        u.2 = Some(k - 2);
                    }
                }
            }
            let mut text = String::new();
            for (k, &(_, count, parent, second)) in units.iter().enumerate() {
                text.push_str(&format!(
                    "[[unit]]\nname = \"{}\"\ncount = {count}\n",
                    names[k]
                ));
                match (parent, second) {
                    (Some(p), 2) => text.push_str(&format!(
                        "within = [\"{}\", \"{}\"]\n",
                        names.get(p).unwrap_or(&"zz"),
                        names[(p + 1) % 4]
                    )),
                    (Some(p), _) => {
                        text.push_str(&format!("within = \"{}\"\n", names.get(p).unwrap_or(&"zz")))
                    }
                    (None, _) => {}
                }
            }
            for (k, &(levels, unit, random)) in treatments.iter().enumerate() {
                text.push_str(&format!(
                    "[[treatment]]\nname = \"t{k}\"\nlevels = {levels}\nrandomised_to = \"{}\"\n{}",
                    names.get(unit).unwrap_or(&"zz"),
                    if random { "kind = \"random\"\n" } else { "" }
                ));
            }
            text
        })
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(400))]

    #[test]
    fn unit_files_are_refused_in_one_line_or_checked(text in any_unit_file()) {
        let spec = emsplan::spec::parse(&text).expect("the drawn text is TOML");
        match Layout::from_spec(&spec, &text) {
            Err(e) => prop_assert!(!e.to_string().contains('\n'), "{e}"),
            Ok(layout) => {
                for convention in [Convention::Restricted, Convention::Unrestricted] {
                    let plan = PlanningValues::from_spec(&spec, &text, &layout).unwrap();
                    let goal = Goal::from_spec(&spec, &text, &layout).unwrap();
                    let report = check_with_goal(&layout, convention, &plan, &goal);
                    if let Ok(r) = report {
                        let total: u64 = r.strata.as_ref().unwrap().strata.iter().map(|s| s.df).sum();
                        prop_assert_eq!(total, r.observations - 1, "{}", text);
                    }
                }
            }
        }
    }
}
