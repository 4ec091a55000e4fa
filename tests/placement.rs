//! The search over where each treatment is randomised, which units to keep, and how many
//! units of each kind within stated capacities.
//!
//! The search's answer is held against brute force outside the search: every layout the
//! problem allows is written out as its own file of units, with the limits applied by
//! hand, and checked by `emsplan check`'s own code; the cheapest that meets the goal must
//! be the search's best. The denominator df are held against the textbook analyses: a
//! treatment on whole units of a completely randomised design is tested over units
//! within treatments with t(r - 1) df; one on the plots of a randomised complete block
//! design (one plot per treatment per block) over block x treatment with (b - 1)(t - 1)
//! df (Cochran and Cox 1957, Experimental Designs, 2nd ed., ch. 4 and 7; Steel and
//! Torrie 1980, Principles and Procedures of Statistics, ch. 9; common practice).

use emsplan::check::check;
use emsplan::errorterm::Verdict;
use emsplan::layout::{Convention, Layout};
use emsplan::planning::PlanningValues;
use emsplan::search::{Method, Options, Problem, Quiet, Search, SearchReport};
use emsplan::spec;

fn problem(text: &str) -> Result<Problem, String> {
    let spec = spec::parse(text).map_err(|e| e.to_string())?;
    let layout = Layout::from_spec(&spec, text).map_err(|e| e.to_string())?;
    let plan = PlanningValues::from_spec(&spec, text, &layout).map_err(|e| e.to_string())?;
    Problem::from_spec(&spec, text, layout, plan, None).map_err(|e| e.to_string())
}

fn run(text: &str, method: Method) -> SearchReport {
    let search = Search::new(problem(text).expect("valid problem")).expect("structures");
    let options = Options {
        method,
        ..Options::default()
    };
    search.run(&options, &Quiet).expect("search runs")
}

const SHIPPED: &str = include_str!("../problems/search-light-placement.toml");

/// The shipped problem's units and treatments with the given picks, as a file of units
/// that `check` reads.
fn layout_text(light_on: &str, chambers: u64, shelves: Option<u64>, pots: u64) -> String {
    let mut t = String::from("[layout]\nname = \"brute force\"\n");
    t += &format!("[[unit]]\nname = \"chamber\"\ncount = {chambers}\n");
    let pot_within = match shelves {
        Some(s) => {
            t += &format!("[[unit]]\nname = \"shelf\"\nwithin = \"chamber\"\ncount = {s}\n");
            "shelf"
        }
        None => "chamber",
    };
    t += &format!("[[unit]]\nname = \"pot\"\nwithin = \"{pot_within}\"\ncount = {pots}\n");
    t += &format!(
        "[[treatment]]\nname = \"light\"\nlevels = 2\nrandomised_to = \"{light_on}\"\n\
         [[treatment]]\nname = \"cultivar\"\nlevels = 4\nrandomised_to = \"pot\"\n"
    );
    t += "[sd]\nchamber = 1.2\npot = 1.0\n";
    if shelves.is_some() {
        t += "shelf = 0.5\n";
    }
    t += "[effect]\nlight = 1.0\ncultivar = 0.6\n\"light x cultivar\" = 0.5\n";
    t += "[cost]\noverhead = 800\n[cost.per_unit]\nchamber = 1500\npot = 6\n";
    if shelves.is_some() {
        t += "shelf = 120\n";
    }
    t
}

/// What `check` finds for one layout: (cost, light's and light x cultivar's den. df and
/// power), or `None` when the file is no layout (a count that is not a multiple of the
/// treatments randomised to the unit).
/// A must-test term's verdict, den. df and power.
type Found = (Verdict, Option<f64>, Option<f64>);

fn checked(text: &str) -> Option<(f64, Vec<Found>)> {
    let spec = spec::parse(text).ok()?;
    let layout = Layout::from_spec(&spec, text).ok()?;
    let plan = PlanningValues::from_spec(&spec, text, &layout).expect("planning values");
    let report = check(&layout, Convention::Restricted, &plan).expect("check");
    let cost = report.cost.as_ref().expect("cost").total;
    let tests = ["light", "light x cultivar"]
        .iter()
        .map(|label| {
            let t = report
                .terms
                .iter()
                .find(|t| t.short_label == *label)
                .expect("must-test term");
            let test = t.test.as_ref().expect("a test");
            (test.verdict, test.denominator_df, test.power)
        })
        .collect();
    Some((cost, tests))
}

#[test]
fn shipped_placement_problem_finds_the_cheapest_layout_brute_force_finds() {
    // The problem's space, enumerated by hand: light on chamber or shelf, shelves kept or
    // not, chamber in [2, 8], shelf in [2, 6], pot in [4, 24]; at most 6 chambers in all
    // and 16 pots per shelf; budget 14000; min_df 3; power 0.8.
    let mut best: Option<(f64, String)> = None;
    let mut feasible = 0;
    for light_on in ["chamber", "shelf"] {
        for keep_shelves in [true, false] {
            if light_on == "shelf" && !keep_shelves {
                continue;
            }
            for chambers in 2..=8u64 {
                if chambers > 6 {
                    continue;
                }
                let shelf_counts: Vec<Option<u64>> = if keep_shelves {
                    (2..=6).map(Some).collect()
                } else {
                    vec![None]
                };
                for &shelves in &shelf_counts {
                    for pots in 4..=24u64 {
                        if shelves.is_some() && pots > 16 {
                            continue;
                        }
                        let text = layout_text(light_on, chambers, shelves, pots);
                        let Some((cost, tests)) = checked(&text) else {
                            continue;
                        };
                        let ok = cost <= 14000.0
                            && tests.iter().all(|&(v, df, power)| {
                                v.is_testable()
                                    && df.is_some_and(|d| d >= 3.0 - 1e-9)
                                    && power.is_some_and(|p| p >= 0.8)
                            });
                        if ok {
                            feasible += 1;
                            let what = format!(
                                "light on {light_on}, {chambers} chambers, {shelves:?} shelves, {pots} pots"
                            );
                            if best.as_ref().is_none_or(|(c, _)| cost < *c - 1e-6) {
                                best = Some((cost, what));
                            }
                        }
                    }
                }
            }
        }
    }
    let (cost, what) = best.expect("brute force finds a layout");
    for method in [Method::Enumerate, Method::Optimize] {
        let r = run(SHIPPED, method);
        let b = r.best.as_ref().expect("the search finds a layout");
        assert!(
            (b.cost - cost).abs() < 1e-6,
            "{method:?}: search best costs {}, brute force {cost} ({what})",
            b.cost
        );
        if method == Method::Enumerate {
            assert_eq!(r.feasible, feasible, "feasible candidates");
        }
    }
}

#[test]
fn every_arrangement_is_reported_with_its_best_or_why_not() {
    let r = run(SHIPPED, Method::Enumerate);
    let mut names: Vec<String> = r
        .arrangements
        .iter()
        .map(|a| {
            let mut n: Vec<String> = a
                .randomised
                .iter()
                .map(|x| format!("{} on {}", x.treatment, x.unit))
                .collect();
            n.extend(a.without.iter().map(|u| format!("no {u}")));
            n.join(", ")
        })
        .collect();
    names.sort();
    // Light on shelves needs shelves, so "light on shelf, no shelf" is no arrangement.
    assert_eq!(
        names,
        [
            "light on chamber",
            "light on chamber, no shelf",
            "light on shelf"
        ]
    );
    let chosen: Vec<_> = r.arrangements.iter().filter(|a| a.chosen).collect();
    assert_eq!(chosen.len(), 1, "one arrangement holds the best layout");
    assert_eq!(chosen[0].randomised[0].unit, "shelf");
    assert!(
        r.arrangements[0].chosen,
        "the best layout's arrangement first"
    );
    for a in &r.arrangements {
        assert!(
            a.best.is_some() != a.nearest.is_some(),
            "a best layout or a nearest miss"
        );
        if let Some(n) = &a.nearest {
            assert!(n.rejected.is_some(), "a nearest miss says what it fails");
            assert!(n.cost <= 14000.0);
        }
    }
}

#[test]
fn denominator_df_are_those_of_the_textbook_strata() {
    let r = run(SHIPPED, Method::Enumerate);
    for a in &r.arrangements {
        for c in a.best.iter().chain(&a.nearest) {
            let count = |name: &str| c.units.iter().find(|u| u.name == name).map(|u| u.count);
            let chambers = count("chamber").expect("chambers");
            let light = &c.tests[0];
            assert_eq!(light.label, "light");
            let df = light.denominator_df.expect("light's df");
            match a.randomised[0].unit.as_str() {
                // Chambers are the whole units of a completely randomised design of
                // light: t(r - 1) with r chambers per regime.
                "chamber" => assert_eq!(df, 2.0 * (chambers as f64 / 2.0 - 1.0)),
                // Chambers are blocks; with s shelves per regime in each chamber, the
                // shelf stratum's residual under additivity: cs·t − c − (t − 1) df,
                // which is (c − 1)(t − 1) for one shelf per regime.
                _ => {
                    let shelves = count("shelf").expect("shelves") as f64;
                    let c = chambers as f64;
                    assert_eq!(df, c * shelves - c - 1.0);
                }
            }
        }
    }
}

#[test]
fn no_candidate_exceeds_a_limit() {
    let r = run(SHIPPED, Method::Enumerate);
    assert!(r.rejected.limit > 0, "the limits cut some candidates");
    for c in r.candidates.iter().chain(&r.frontier) {
        for u in &c.units {
            match u.name.as_str() {
                "chamber" => assert!(u.in_all <= 6),
                "pot" if c.units.iter().any(|x| x.name == "shelf") => assert!(u.count <= 16),
                _ => {}
            }
        }
    }
    let limit = r
        .rejections
        .iter()
        .find(|x| x.reason == emsplan::search::Rejection::Limit)
        .expect("a limit rejection");
    let beyond = limit
        .cheapest
        .beyond
        .as_ref()
        .expect("the limit it exceeds");
    assert!(beyond.needed > beyond.at_most);
}

/// A problem of units with a `[search]` table appended.
fn with_search(search: &str) -> String {
    let base = SHIPPED.split("[search]").next().expect("layout part");
    format!("{base}[search]\nmust_test = [\"light\"]\n{search}")
}

#[test]
fn bad_search_tables_of_units_are_refused_in_one_line() {
    let cases: [(&str, &str); 12] = [
        (
            "[[search.placement]]\ntreatment = \"lamp\"\nrandomised_to = [\"chamber\", \"shelf\"]\n",
            "\"lamp\" is not a treatment",
        ),
        (
            "[[search.placement]]\ntreatment = \"light\"\nrandomised_to = [\"chamber\", \"bench\"]\n",
            "\"bench\" is not a unit",
        ),
        (
            "[[search.placement]]\ntreatment = \"light\"\nrandomised_to = [\"chamber\"]\n",
            "at least two units",
        ),
        (
            "[[search.placement]]\ntreatment = \"light\"\nrandomised_to = [\"shelf\", \"shelf\"]\n",
            "twice",
        ),
        ("optional_units = [\"pot\"]\n", "is the smallest unit"),
        ("optional_units = [\"tray\"]\n", "\"tray\" is not a unit"),
        (
            "[[search.limit]]\nunit = \"chamber\"\nat_most = 0\n",
            "at least 1",
        ),
        (
            "[[search.limit]]\nunit = \"chamber\"\nper = \"pot\"\nat_most = 3\n",
            "chamber is not within pot",
        ),
        (
            "[[search.limit]]\nunit = \"tray\"\nat_most = 3\n",
            "\"tray\" is not a unit",
        ),
        (
            "[[search.choice]]\nfactor = \"shelf\"\noptional = true\n",
            "described by units",
        ),
        (
            "[search.levels]\nreplicates = [1, 3]\n",
            "not used with units",
        ),
        ("[search.levels]\npot = [0, 3]\n", "starts below 1"),
    ];
    for (search, phrase) in cases {
        let text = with_search(search);
        let err = problem(&text).expect_err(search);
        assert!(err.contains(phrase), "{search}: {err}");
        assert!(!err.contains('\n'), "one line: {err}");
        assert!(err.contains("line "), "{search}: the line is named: {err}");
    }
}

#[test]
fn placements_in_a_layout_of_factors_are_refused() {
    let text = std::fs::read_to_string(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/problems/search-chamber-power.toml"
    ))
    .expect("problem");
    let text = text.replace(
        "[[search.choice]]",
        "[[search.placement]]\ntreatment = \"light\"\nrandomised_to = [\"chamber\", \"bench\"]\n[[search.choice]]",
    );
    let err = problem(&text).expect_err("placement in a factor file");
    assert!(err.contains("has no units"), "{err}");
}

#[test]
fn a_count_range_without_a_multiple_of_the_treatments_is_no_candidate() {
    // Light on shelves with 3 shelves per chamber: 3 is not a multiple of 2 regimes, so
    // only 2 (one shelf per regime, chamber x light) and 4 (two per regime) are
    // candidates, and the search says nothing of 3.
    let text = with_search(
        "budget = 50000\n[[search.placement]]\ntreatment = \"light\"\nrandomised_to = [\"chamber\", \"shelf\"]\n[search.levels]\nshelf = [2, 4]\n",
    );
    let r = run(&text, Method::Enumerate);
    for c in r.candidates.iter().chain(&r.frontier) {
        let on_shelf = c
            .units
            .iter()
            .any(|u| u.name == "shelf" && u.carries.contains(&"light".to_string()));
        let shelves = c.units.iter().find(|u| u.name == "shelf").expect("shelf");
        if on_shelf {
            assert_ne!(shelves.count, 3, "3 shelves cannot carry 2 regimes equally");
        }
    }
    // Two structures for light on shelves (one shelf per regime, or several), one for
    // light on chambers; a structure with no count searched is one candidate, and the
    // integer program finds the same best.
    assert_eq!(r.structures, 3);
    let o = run(&text, Method::Optimize);
    assert_eq!(
        o.best.as_ref().map(|b| b.cost),
        r.best.as_ref().map(|b| b.cost)
    );
}
