//! The design search against checks from outside it: exhaustive enumeration without
//! pruning (every candidate screened, the plainest possible search) for the optimizer and
//! the pruned enumeration; `check` and `planning::cost` for the figures of each candidate;
//! and a hand-worked optimum.

use emsplan::errorterm::error_term;
use emsplan::layout::Layout;
use emsplan::planning::{PlanningValues, cost};
use emsplan::search::enumerate::{Quiet, enumerate};
use emsplan::search::evaluate::Criticals;
use emsplan::search::optimize::optimize;
use emsplan::search::report::describe;
use emsplan::search::{Options, Problem, Rejection, Search};
use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;

fn problem(text: &str) -> Result<Problem, String> {
    let spec = emsplan::spec::parse(text).map_err(|e| e.to_string())?;
    let layout = Layout::from_spec(&spec, text).map_err(|e| e.to_string())?;
    let plan = PlanningValues::from_spec(&spec, text, &layout).map_err(|e| e.to_string())?;
    Problem::from_spec(&spec, text, layout, plan, None).map_err(|e| e.to_string())
}

fn search(text: &str) -> Search {
    Search::new(problem(text).expect("valid problem")).expect("structures")
}

/// A random small problem: 2 to 4 factors, random kinds and nesting, random ranges,
/// prices, constraints and choices. Some are invalid; the caller skips those.
fn random_problem(rng: &mut ChaCha8Rng) -> String {
    let nf = rng.random_range(2..=4usize);
    let names = ["f1", "f2", "f3", "f4"];
    let mut kinds = Vec::new();
    let mut t = String::from("[layout]\nreplicates = 1\n");
    let mut within: Vec<Option<usize>> = Vec::new();
    for (i, name) in names.iter().enumerate().take(nf) {
        let fixed = rng.random_bool(0.45);
        kinds.push(fixed);
        let levels = if fixed {
            rng.random_range(2..=3)
        } else {
            rng.random_range(1..=3)
        };
        t.push_str(&format!(
            "[[factor]]\nname = \"{name}\"\nkind = \"{}\"\nlevels = {levels}\n",
            if fixed { "fixed" } else { "random" }
        ));
        // Now and then a finite population, no smaller than any range below reaches.
        if !fixed && rng.random_bool(0.15) {
            t.push_str(&format!("population = {}\n", rng.random_range(5..=7)));
        }
        let w = (i > 0 && rng.random_bool(0.35)).then(|| rng.random_range(0..i));
        if let Some(j) = w {
            t.push_str(&format!("within = [\"{}\"]\n", names[j]));
        }
        within.push(w);
    }
    // Must-test terms: a main effect, sometimes a two-way interaction.
    let a = rng.random_range(0..nf);
    let mut must = vec![names[a].to_string()];
    let mut must_kinds = vec![(vec![a], kinds[a])];
    if rng.random_bool(0.5) {
        let b = rng.random_range(0..nf);
        if b != a {
            must.push(format!("{} x {}", names[a.min(b)], names[a.max(b)]));
            must_kinds.push((vec![a.min(b), a.max(b)], kinds[a] && kinds[b]));
        }
    }
    let priors = rng.random_bool(0.5);
    if priors {
        t.push_str("[sd]\nresidual = 1.0\n");
        for i in 0..nf {
            if !kinds[i] {
                t.push_str(&format!(
                    "{} = {:.2}\n",
                    names[i],
                    rng.random_range(0.1..1.0)
                ));
            }
        }
        for (m, (fs, fixed)) in must.iter().zip(&must_kinds) {
            if fs.len() == 2 && !fixed {
                t.push_str(&format!("\"{m}\" = {:.2}\n", rng.random_range(0.1..0.8)));
            }
        }
        t.push_str("[effect]\n");
        for (m, (_, fixed)) in must.iter().zip(&must_kinds) {
            if *fixed {
                t.push_str(&format!("\"{m}\" = {:.2}\n", rng.random_range(0.2..1.5)));
            }
        }
    }
    t.push_str(&format!(
        "[cost]\noverhead = {}\n[cost.per_unit]\nresidual = {}\n",
        rng.random_range(0..100),
        rng.random_range(0..6)
    ));
    for name in names.iter().take(nf) {
        if rng.random_bool(0.6) {
            t.push_str(&format!("{name} = {}\n", rng.random_range(1..60)));
        }
    }
    t.push_str("[search]\n");
    t.push_str(&format!(
        "must_test = [{}]\n",
        must.iter()
            .map(|m| format!("\"{m}\""))
            .collect::<Vec<_>>()
            .join(", ")
    ));
    if rng.random_bool(0.6) {
        t.push_str(&format!("budget = {}\n", rng.random_range(100..3000)));
    }
    if rng.random_bool(0.5) {
        t.push_str(&format!("min_df = {}\n", rng.random_range(1..8)));
    }
    if rng.random_bool(0.25) {
        t.push_str("exact_only = true\n");
    }
    if priors && rng.random_bool(0.5) {
        t.push_str(&format!(
            "target_power = {:.2}\n",
            rng.random_range(0.3..0.9)
        ));
    }
    t.push_str("[search.levels]\n");
    for (i, name) in names.iter().enumerate().take(nf) {
        if rng.random_bool(0.65) {
            let lo = if kinds[i] {
                rng.random_range(2..=3)
            } else {
                rng.random_range(1..=2)
            };
            let hi = lo + rng.random_range(0..=3);
            t.push_str(&format!("{name} = [{lo}, {hi}]\n"));
        }
    }
    let lo = rng.random_range(1..=2);
    t.push_str(&format!(
        "replicates = [{lo}, {}]\n",
        lo + rng.random_range(0..=3)
    ));
    // Choices: a renesting of a random factor, or an optional layer.
    if rng.random_bool(0.4) {
        let f = rng.random_range(1..nf);
        let g = rng.random_range(0..f);
        t.push_str(&format!(
            "[[search.choice]]\nfactor = \"{}\"\nwithin = [[], [\"{}\"]]\n",
            names[f], names[g]
        ));
    }
    if rng.random_bool(0.3) {
        let f = rng.random_range(0..nf);
        if within.iter().all(|w| *w != Some(f)) || rng.random_bool(0.5) {
            t.push_str(&format!(
                "[[search.choice]]\nfactor = \"{}\"\noptional = true\n",
                names[f]
            ));
        }
    }
    t
}

/// Valid random problems from a fixed seed, at least `n` of them.
fn random_problems(seed: u64, n: usize) -> Vec<(String, Search)> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut out = Vec::new();
    let mut tries = 0;
    while out.len() < n {
        tries += 1;
        assert!(tries < 50 * n, "too few valid random problems");
        let text = random_problem(&mut rng);
        if let Ok(p) = problem(&text)
            && let Ok(s) = Search::new(p)
        {
            out.push((text, s));
        }
    }
    out
}

fn same_cost(a: f64, b: f64) -> bool {
    (a - b).abs() <= 1e-6 * a.abs().max(1.0)
}

/// The external check of the optimizer: on many random small problems, the cheapest
/// feasible cost it finds is the one that exhaustive, unpruned enumeration finds (or
/// both find nothing), and its answer is feasible when screened on its own.
#[test]
fn optimizer_agrees_with_exhaustive_enumeration() {
    let problems = random_problems(20240611, 250);
    let mut with_best = 0;
    for (text, s) in &problems {
        let exhaustive = enumerate(&s.screens, 1, false, &Quiet);
        let found = optimize(&s.screens, &s.problem, 1, u64::MAX).expect("bounded");
        match (exhaustive.top.first(), found.best.first()) {
            (None, None) => {}
            (Some(e), Some(o)) => {
                with_best += 1;
                assert!(
                    same_cost(e.outcome.cost, o.outcome.cost),
                    "cost {} by enumeration, {} by the optimizer:\n{text}",
                    e.outcome.cost,
                    o.outcome.cost
                );
                let again = s.screens[o.variant].evaluate(&o.levels, &mut Criticals::default());
                assert_eq!(
                    again.rejection, None,
                    "optimizer's answer infeasible:\n{text}"
                );
            }
            (e, o) => panic!(
                "enumeration found {:?}, the optimizer {:?}:\n{text}",
                e.map(|x| x.outcome.cost),
                o.map(|x| x.outcome.cost)
            ),
        }
    }
    // The comparison must not be vacuous: most problems have a feasible layout.
    assert!(
        with_best >= 80,
        "only {with_best} problems had a best layout"
    );
}

/// The linearisation alone is exact: when every constraint is linear (no power target,
/// and no synthetic test whose Satterthwaite df would be checked), the integer
/// program's first answer in each pattern is feasible, so no candidate is ever cut for
/// failing min_df or the budget and no pattern falls back to enumeration.
#[test]
fn integer_program_alone_is_exact_when_constraints_are_linear() {
    let mut linear = 0;
    for (text, s) in random_problems(4242, 250) {
        if s.problem.target_power.is_some() || s.problem.plan.has_priors() {
            continue;
        }
        linear += 1;
        let found = optimize(&s.screens, &s.problem, 1, u64::MAX).expect("bounded");
        assert_eq!(found.rejected[0], 0, "budget cuts:\n{text}");
        assert_eq!(found.rejected[2], 0, "min_df cuts:\n{text}");
        assert_eq!(found.fallbacks, 0, "fallbacks:\n{text}");
        let exhaustive = enumerate(&s.screens, 1, false, &Quiet);
        assert_eq!(
            exhaustive
                .top
                .first()
                .map(|e| (e.outcome.cost * 1e6).round()),
            found.best.first().map(|e| (e.outcome.cost * 1e6).round()),
            "{text}"
        );
    }
    assert!(linear > 60, "only {linear} linear problems");
}

/// Cutting over-budget branches changes nothing but the work: the same best, the same
/// counts of every kind, the same cheapest rejected candidate for each reason.
#[test]
fn pruned_search_finds_what_unpruned_search_finds() {
    let mut cut_some = 0;
    for (text, s) in random_problems(7, 150) {
        let full = enumerate(&s.screens, 5, false, &Quiet);
        let pruned = enumerate(&s.screens, 5, true, &Quiet);
        let costs = |t: &emsplan::search::Tally| -> Vec<f64> {
            t.top.iter().map(|e| e.outcome.cost).collect()
        };
        assert_eq!(costs(&full), costs(&pruned), "top costs differ:\n{text}");
        for r in Rejection::ALL {
            assert_eq!(full.count(r), pruned.count(r), "{r:?} count:\n{text}");
        }
        assert_eq!(full.feasible, pruned.feasible, "{text}");
        for k in 0..4 {
            let c = |t: &emsplan::search::Tally| t.cheapest[k].as_ref().map(|e| e.outcome.cost);
            assert_eq!(c(&full), c(&pruned), "cheapest rejected {k}:\n{text}");
        }
        if pruned.examined < full.examined + full.budget {
            cut_some += 1;
        }
        assert!(pruned.examined <= full.examined + full.budget);
    }
    assert!(cut_some > 10, "pruning never cut anything ({cut_some})");
}

/// Every candidate of the space is counted once: examined + rejected for the budget is
/// the space, and examined is feasible + untestable + min_df + power.
#[test]
fn every_candidate_is_counted_once() {
    for (text, s) in random_problems(99, 120) {
        let t = enumerate(&s.screens, 3, true, &Quiet);
        assert_eq!((t.examined + t.budget) as u128, s.space(), "{text}");
        assert_eq!(
            t.examined,
            t.feasible + t.untestable + t.min_df + t.power,
            "{text}"
        );
    }
}

/// The error terms cached per set of one-level dimensions are the ones found afresh at
/// every candidate's own level counts (the level-independence argument in `evaluate`).
#[test]
fn cached_error_terms_match_fresh_ones() {
    let mut compared = 0;
    for (text, s) in random_problems(5, 80) {
        for screen in &s.screens {
            let v = &screen.variant;
            let mut picks = vec![0usize; v.dims.len()];
            loop {
                let levels = v.levels_at(&picks);
                let shapes = screen.shapes(&levels);
                let ems = screen.model.ems(&levels).expect("small counts");
                let df = screen.model.df(&levels);
                for (k, m) in screen.must.iter().enumerate() {
                    if let Ok(t) = m {
                        let fresh = error_term(&screen.model, &ems, &df, *t);
                        let cached = shapes[k].as_ref().expect("shape");
                        assert_eq!(cached.verdict, fresh.verdict, "{text}");
                        let terms: Vec<usize> = fresh.denominator.iter().map(|d| d.0).collect();
                        let cached_terms: Vec<usize> =
                            cached.denominator.iter().map(|d| d.0).collect();
                        assert_eq!(cached_terms, terms, "{text}");
                        compared += 1;
                    }
                }
                // Next combination.
                let mut d = 0;
                while d < picks.len() {
                    picks[d] += 1;
                    if picks[d] < v.dims[d].values.len() {
                        break;
                    }
                    picks[d] = 0;
                    d += 1;
                }
                if d == picks.len() {
                    break;
                }
            }
        }
    }
    assert!(compared > 1000, "only {compared} comparisons");
}

/// The screening's own cost, denominator df and power agree with `planning::cost` and
/// `check` (through the report, which re-checks each candidate shown).
#[test]
fn screening_figures_match_check_and_planning() {
    let mut with_power = 0;
    for (text, s) in random_problems(31, 120) {
        let t = enumerate(&s.screens, 3, true, &Quiet);
        for e in &t.top {
            let v = &s.screens[e.variant].variant;
            let layout =
                Layout::new(String::new(), v.structure.clone(), e.levels.clone()).expect("valid");
            let c = cost(
                v.plan.cost.as_ref().expect("cost"),
                &layout.structure,
                &e.levels,
            );
            assert!(same_cost(c.total, e.outcome.cost), "cost:\n{text}");
            let report = describe(&s, e);
            let checked_df = report
                .tests
                .iter()
                .map(|x| x.denominator_df)
                .try_fold(f64::INFINITY, |m, d| d.map(|d| m.min(d)));
            match (checked_df, e.outcome.min_df) {
                (Some(a), Some(b)) => assert!((a - b).abs() < 1e-9 * a.max(1.0), "df:\n{text}"),
                (a, b) => assert_eq!(a, b, "df:\n{text}"),
            }
            let checked_power = report
                .tests
                .iter()
                .map(|x| x.power)
                .try_fold(1.0f64, |m, p| p.map(|p| m.min(p)));
            if let (Some(a), Some(b)) = (checked_power, e.outcome.min_power) {
                assert!((a - b).abs() < 1e-9, "power {a} vs {b}:\n{text}");
                with_power += 1;
            }
        }
    }
    assert!(with_power > 20, "only {with_power} candidates with power");
}

const BREAD: &str = include_str!("../problems/search-bread-panel.toml");
const CHAMBERS: &str = include_str!("../problems/search-chamber-power.toml");

/// Hand-worked optimum of problems/search-bread-panel.toml. With assessors crossed with
/// days, recipe x storage has E(MS) with σ² of its interactions with day, assessor and
/// both, and no single mean square matches: a quasi-F test (the classical case of two
/// crossed random factors, e.g. Montgomery, Design and Analysis of Experiments, ch. on
/// random and mixed models), which exact_only refuses. With assessors within days it is
/// tested exactly over recipe x storage x day, with (3-1)(2-1)(d-1) df, and recipe over
/// recipe x day with (3-1)(d-1) df; min_df 4 needs d ≥ 3. The cheapest is then d = 3
/// days, 2 assessors per day, 1 loaf per cell: 400 + 3·250 + 6·120 + 36·3 = 1978.
#[test]
fn bread_panel_optimum_by_hand() {
    let s = search(BREAD);
    let r = s.run(&Options::default(), &Quiet).expect("runs");
    let best = r.best.expect("a best layout");
    assert_eq!(best.cost, 1978.0);
    assert_eq!(best.structure, "assessor within day");
    let levels: Vec<(String, u64)> = best
        .factors
        .iter()
        .map(|f| (f.name.clone(), f.levels))
        .collect();
    assert_eq!(
        levels,
        [
            ("recipe".to_string(), 3),
            ("storage".to_string(), 2),
            ("day".to_string(), 3),
            ("assessor".to_string(), 2)
        ]
    );
    assert_eq!(best.replicates, 1);
    assert_eq!(best.tests[0].denominator_df, Some(4.0));
    // The crossed alternative is the cheapest rejected one, for want of an exact test.
    let untestable = r
        .rejections
        .iter()
        .find(|x| x.reason == Rejection::Untestable)
        .expect("untestable candidates");
    assert_eq!(
        untestable.cheapest.structure,
        "assessor crossed with the rest"
    );
    let why = emsplan::render::search_words::why(untestable, &r.constraints);
    assert!(why.contains("exact_only"), "{why}");
}

/// Hand check of the chamber problem's best: with no benches, light is tested over
/// chamber(light) with 3(c - 1) df and light x cultivar over chamber x cultivar(light)
/// with 3·3·(c - 1) df; the best has c = 4 (9 and 27 df), and its cost is
/// 1000 + 12·700 + 144·5 = 10120 for 3 pots per cell.
#[test]
fn chamber_power_best_is_priced_and_tested_as_by_hand() {
    let s = search(CHAMBERS);
    let r = s.run(&Options::default(), &Quiet).expect("runs");
    let best = r.best.expect("a best layout");
    assert_eq!(best.structure, "no bench");
    assert_eq!(best.cost, 1000.0 + 12.0 * 700.0 + 144.0 * 5.0);
    assert_eq!(best.tests[0].denominator_df, Some(9.0));
    assert_eq!(best.tests[1].denominator_df, Some(27.0));
    for t in &best.tests {
        assert!(t.power.expect("power") >= 0.8, "{}", t.label);
    }
    // Every cheaper candidate that meets all but the power target falls short of it.
    for c in &r.frontier {
        if c.cost < best.cost {
            assert!(c.smallest_power.expect("power") < 0.8);
        }
    }
}

/// The optimizer finds the same best as the enumeration on the shipped problems.
#[test]
fn optimizer_matches_enumeration_on_shipped_problems() {
    for text in [BREAD, CHAMBERS] {
        let s = search(text);
        let e = s.run(&Options::default(), &Quiet).expect("runs");
        let o = s
            .run(
                &Options {
                    method: emsplan::search::Method::Optimize,
                    ..Options::default()
                },
                &Quiet,
            )
            .expect("runs");
        let (e, o) = (e.best.expect("best"), o.best.expect("best"));
        assert_eq!(e.cost, o.cost);
        assert_eq!(
            emsplan::render::search_words::description(&e),
            emsplan::render::search_words::description(&o)
        );
    }
}

/// The count of the candidates rejected for `reason`, and why the cheapest is.
fn rejection(r: &emsplan::search::SearchReport, reason: Rejection) -> (u64, String) {
    let x = r
        .rejections
        .iter()
        .find(|x| x.reason == reason)
        .unwrap_or_else(|| panic!("no {reason:?} rejection"));
    (
        x.count,
        emsplan::render::search_words::why(x, &r.constraints),
    )
}

/// Every reason a candidate can be turned down for, each counted and explained. The
/// expected reasons are facts of the designs: one chamber per regime confounds the chamber
/// variance with light (pseudoreplication; Hurlbert 1984, Ecological Monographs
/// 54:187-211); two days give recipe x day only 2 df; exact_only refuses the quasi-F test
/// of two crossed random factors.
#[test]
fn every_rejection_reason_is_counted_and_explained() {
    let chambers = search(CHAMBERS)
        .run(&Options::default(), &Quiet)
        .expect("runs");
    let (n, why) = rejection(&chambers, Rejection::Untestable);
    assert!(n > 0 && why.contains("chamber(light) has 0 df"), "{why}");
    let (n, why) = rejection(&chambers, Rejection::MinDf);
    assert!(n > 0 && why.contains("denominator df (min_df 4)"), "{why}");
    let (n, why) = rejection(&chambers, Rejection::Power);
    assert!(n > 0 && why.contains("(target 0.8)"), "{why}");

    let bread = search(BREAD)
        .run(&Options::default(), &Quiet)
        .expect("runs");
    let (n, why) = rejection(&bread, Rejection::Budget);
    assert!(n > 0 && why.contains("over the budget of 6000"), "{why}");
    let (_, why) = rejection(&bread, Rejection::Untestable);
    assert!(why.contains("exact_only"), "{why}");
    assert_eq!(bread.rejected.budget, n);
}

/// A problem whose must-test terms stop existing in some structures.
const LOST: &str = r#"[layout]
replicates = 2
[[factor]]
name = "light"
kind = "fixed"
levels = 2
[[factor]]
name = "bench"
kind = "random"
levels = 2
within = ["light"]
[[factor]]
name = "cultivar"
kind = "fixed"
levels = 3
[[factor]]
name = "tray"
kind = "random"
levels = 2
within = ["bench"]
[cost]
[cost.per_unit]
bench = 50
tray = 5
residual = 1
[search]
must_test = ["cultivar x bench", "tray"]
[search.levels]
bench = [2, 3]
[[search.choice]]
factor = "bench"
within = [["light"], ["light", "cultivar"]]
[[search.choice]]
factor = "tray"
optional = true
"#;

/// A must-test term whose factor is left out, or whose factors are no longer crossed,
/// makes the candidate untestable, and the reason says which.
#[test]
fn must_test_terms_that_stop_existing_are_untestable_with_a_reason() {
    let s = search(LOST);
    assert_eq!(s.screens.len(), 4);
    let mut reasons = Vec::new();
    for screen in &s.screens {
        for m in &screen.must {
            if let Err(why) = m {
                reasons.push(why.clone());
            }
        }
    }
    assert!(
        reasons
            .iter()
            .any(|r| r == "tray is not in this layout, because tray is left out"),
        "{reasons:?}"
    );
    assert!(
        reasons
            .iter()
            .any(|r| r.contains("bench is nested in cultivar, so they are not crossed")),
        "{reasons:?}"
    );
    let r = s.run(&Options::default(), &Quiet).expect("runs");
    // Only the structure that keeps the tray and crosses bench with cultivar is feasible.
    let best = r.best.expect("best");
    assert_eq!(best.structure, "bench within light");
    assert!(best.left_out.is_empty());
    assert_eq!(r.rejected.untestable, 3 * 2);
}

/// Without [sd], a synthetic test's Satterthwaite df are unknown, so it fails min_df,
/// and the sentence says why. Two crossed random factors with a fixed one give the
/// classical quasi-F test of the fixed factor.
#[test]
fn synthetic_test_without_priors_fails_min_df_with_a_reason() {
    let text = r#"[layout]
replicates = 2
[[factor]]
name = "recipe"
kind = "fixed"
levels = 3
[[factor]]
name = "day"
kind = "random"
levels = 3
[[factor]]
name = "assessor"
kind = "random"
levels = 3
[cost]
[cost.per_unit]
day = 10
assessor = 10
[search]
must_test = ["recipe"]
min_df = 2
[search.levels]
day = [2, 3]
"#;
    let r = search(text).run(&Options::default(), &Quiet).expect("runs");
    assert!(r.best.is_none());
    let (n, why) = rejection(&r, Rejection::MinDf);
    assert_eq!(n, 2);
    assert!(why.contains("unknown without an [sd] table"), "{why}");
    let binding = emsplan::render::search_words::binding(&r).expect("binding");
    assert!(binding.contains("min_df binds"), "{binding}");
}
