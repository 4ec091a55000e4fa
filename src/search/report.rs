//! The search's result: the structs the renderers print and JSON serialises.
//!
//! The candidates shown are checked again in full by `check::check`, so that their
//! tests, reasons, power and minimum detectable effects are those `emsplan check` gives
//! for the same layout.

use serde::Serialize;

use crate::check::check;
use crate::errorterm::Verdict;
use crate::findings::{DenominatorPart, Reason};
use crate::layout::{Kind, Layout, Levels};

use super::enumerate::{Entry, Tally};
use super::evaluate::Rejection;
use super::optimize::Optimized;
use super::{Method, Options, Search};

#[derive(Debug, Clone, Serialize)]
pub struct SearchReport {
    pub name: String,
    pub method: Method,
    /// The cheapest feasible candidate; null when nothing is feasible.
    pub best: Option<CandidateReport>,
    /// The best feasible candidates, ranked (the best first).
    pub candidates: Vec<CandidateReport>,
    /// Pareto points of cost against the smallest must-test power.
    pub frontier: Vec<CandidateReport>,
    /// Candidates in the space.
    pub space: u64,
    pub structures: usize,
    /// Candidates whose tests were evaluated.
    pub examined: u64,
    pub feasible: u64,
    pub rejected: Counts,
    /// The cheapest candidate rejected for each reason, with why.
    pub rejections: Vec<RejectionReport>,
    /// When nothing is feasible: which constraint binds and how far the nearest miss is.
    pub binding: Option<Binding>,
    /// When nothing is feasible within the budget: the cheapest candidate that meets
    /// every other constraint.
    pub without_budget: Option<CandidateReport>,
    pub constraints: Constraints,
    pub notes: Notes,
    /// When the search chooses where treatments go (or which units to keep): the best
    /// layout of each arrangement, or the nearest miss when none meets the goal.
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub arrangements: Vec<Arrangement>,
}

/// One arrangement of treatments on units, and what the search found for it.
#[derive(Debug, Clone, Serialize)]
pub struct Arrangement {
    /// Each treatment the search places, and the unit it is randomised to here.
    pub randomised: Vec<Randomised>,
    /// Optional units this arrangement does without.
    pub without: Vec<String>,
    /// Whether the best layout of the search has this arrangement.
    pub chosen: bool,
    /// Its cheapest layout that meets the goal.
    pub best: Option<CandidateReport>,
    /// When none does: its nearest miss within the budget and limits (the most power
    /// short of the target, else the most df short of min_df, else the cheapest
    /// untestable layout), which says what it fails.
    pub nearest: Option<CandidateReport>,
}

#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct Randomised {
    pub treatment: String,
    pub unit: String,
}

/// A unit of a candidate layout, as the user counts it.
#[derive(Debug, Clone, Serialize)]
pub struct UnitCount {
    pub name: String,
    /// Units per member of each unit it is within (in all, at the top).
    pub count: u64,
    pub within: Vec<String>,
    pub in_all: u64,
    /// Treatments randomised to it.
    pub carries: Vec<String>,
    /// Below the smallest unit a treatment is randomised to: a subsample.
    pub subsample: bool,
}

/// A capacity limit a candidate exceeds.
#[derive(Debug, Clone, Serialize)]
pub struct LimitReport {
    pub unit: String,
    pub per: Option<String>,
    pub at_most: u64,
    /// What the candidate needs.
    pub needed: u64,
}

/// What the reader should know about how the search was run.
#[derive(Debug, Clone, Default, Serialize)]
pub struct Notes {
    /// Structures left out of the space, as they give no valid layout.
    pub skipped: Vec<String>,
    /// The frontier's size when only its cheapest points are shown.
    pub frontier_points: Option<usize>,
    pub frontier_shown: usize,
    /// No standard deviations: no power, no frontier.
    pub no_sd: bool,
    /// Found by the integer program: (solves, candidates screened).
    pub optimizer: Option<(u64, u64)>,
}

/// The constraint that binds when nothing is feasible.
#[derive(Debug, Clone, Serialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum Binding {
    /// No layout reaches the power target; the closest one.
    Power {
        closest: Box<CandidateReport>,
        term: Option<String>,
    },
    /// No testable layout gives enough denominator df; the one with the most.
    MinDf {
        closest: Box<CandidateReport>,
        term: Option<String>,
    },
    /// No layout tests every must-test term; the cheapest (its rejection explains).
    Testability,
    /// Every candidate is over the budget.
    Budget,
    /// The space holds no candidate.
    Empty,
    /// The integer program proves that no candidate meets every constraint.
    Proven,
}

#[derive(Debug, Clone, Copy, Serialize, Default)]
pub struct Counts {
    pub untestable: u64,
    pub min_df: u64,
    pub power: u64,
    pub budget: u64,
    pub limit: u64,
}

#[derive(Debug, Clone, Serialize)]
pub struct Constraints {
    pub must_test: Vec<String>,
    pub budget: Option<f64>,
    pub min_df: Option<f64>,
    pub exact_only: bool,
    pub target_power: Option<f64>,
    pub alpha: f64,
    /// Capacity limits: at most so many units, in all or per member of a larger unit.
    pub limits: Vec<LimitReport>,
}

#[derive(Debug, Clone, Serialize)]
pub struct RejectionReport {
    pub reason: Rejection,
    pub count: u64,
    pub cheapest: CandidateReport,
}

#[derive(Debug, Clone, Serialize)]
pub struct CandidateReport {
    pub cost: f64,
    pub replicates: u64,
    pub observations: u64,
    /// The structural picks: "bench within light, cultivar; no rack".
    pub structure: String,
    /// In a layout of units: every unit, largest first, with its count.
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub units: Vec<UnitCount>,
    /// The capacity limit this candidate exceeds, when it does.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub beyond: Option<LimitReport>,
    /// Cells of the layout (every combination of the factors' levels).
    pub cells: u64,
    /// Every factor left in the layout.
    pub factors: Vec<FactorLevels>,
    pub left_out: Vec<String>,
    pub tests: Vec<MustTestReport>,
    /// Smallest denominator df over the must-test terms (null when one is unknown).
    pub smallest_df: Option<f64>,
    /// Smallest power over the must-test terms (null when one is unknown).
    pub smallest_power: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub rejected: Option<Rejection>,
    /// The must-test term (its index in `tests`) that failed first.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub failing: Option<usize>,
}

#[derive(Debug, Clone, Serialize)]
pub struct FactorLevels {
    pub name: String,
    pub kind: Kind,
    /// Levels in each combination of its nests.
    pub levels: u64,
    pub within: Vec<String>,
    /// Levels in the whole layout: levels × the cells of its nests.
    pub in_all: u64,
}

#[derive(Debug, Clone, Serialize)]
pub struct MustTestReport {
    pub label: String,
    pub verdict: Verdict,
    pub denominator: Vec<DenominatorPart>,
    pub denominator_df: Option<f64>,
    pub power: Option<f64>,
    pub min_detectable: Option<f64>,
    /// Why the term is not simply tested, as `check` finds it.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub reason: Option<Reason>,
    /// Why the term is not in this layout at all.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub absent: Option<String>,
    /// Only a quasi-F test exists, and the problem asks for exact tests.
    pub needs_exact: bool,
}

/// Builds the full report from an enumeration.
pub fn build(
    search: &Search,
    options: &Options,
    tally: Tally,
    relaxed: Option<Entry>,
) -> SearchReport {
    let candidates: Vec<CandidateReport> = tally.top.iter().map(|e| describe(search, e)).collect();
    let frontier_cap = 40;
    let mut notes = notes(search);
    if tally.frontier.len() > frontier_cap {
        notes.frontier_points = Some(tally.frontier.len());
        notes.frontier_shown = frontier_cap;
    }
    let frontier = tally
        .frontier
        .iter()
        .take(frontier_cap)
        .map(|e| describe(search, e))
        .collect();
    let rejections: Vec<RejectionReport> = Rejection::ALL
        .iter()
        .enumerate()
        .filter_map(|(slot, &r)| {
            let e = tally.cheapest[slot].as_ref()?;
            Some(RejectionReport {
                reason: r,
                count: tally.count(r),
                cheapest: describe(search, e),
            })
        })
        .collect();
    let best = candidates.first().cloned();
    let best_variant = tally.top.first().map(|e| e.variant);
    let binding = best.is_none().then(|| binding(search, &tally, &rejections));
    let without_budget = relaxed.map(|e| describe(search, &e));
    SearchReport {
        name: search.problem.base.name.clone(),
        method: options.method,
        best,
        candidates,
        frontier,
        space: search.space().min(u64::MAX as u128) as u64,
        structures: search.screens.len(),
        examined: tally.examined,
        feasible: tally.feasible,
        rejected: Counts {
            untestable: tally.untestable,
            min_df: tally.min_df,
            power: tally.power,
            budget: tally.budget,
            limit: tally.limit,
        },
        rejections,
        binding,
        without_budget,
        constraints: constraints(search),
        notes,
        arrangements: arrangements(search, &tally.per_structure, best_variant),
    }
}

/// Builds the report of the optimizer: the best per structure, ranked; no frontier and no
/// tally of the space (the optimizer does not visit it).
pub fn build_optimized(search: &Search, options: &Options, found: Optimized) -> SearchReport {
    let candidates: Vec<CandidateReport> = found.best.iter().map(|e| describe(search, e)).collect();
    let mut notes = notes(search);
    notes.optimizer = Some((found.solves, found.screened));
    let best = candidates.first().cloned();
    let best_variant = found.best.first().map(|e| e.variant);
    let per_structure: Vec<(Option<Entry>, Option<Entry>)> = found
        .per_structure
        .iter()
        .map(|e| (e.clone(), None))
        .collect();
    let binding = best.is_none().then_some(Binding::Proven);
    SearchReport {
        name: search.problem.base.name.clone(),
        method: options.method,
        best,
        candidates,
        frontier: Vec::new(),
        space: search.space().min(u64::MAX as u128) as u64,
        structures: search.screens.len(),
        examined: found.screened,
        feasible: found.best.len() as u64,
        rejected: Counts {
            untestable: found.rejected[1],
            min_df: found.rejected[2],
            power: found.rejected[3],
            budget: found.rejected[0],
            limit: found.rejected[4],
        },
        rejections: Vec::new(),
        binding,
        without_budget: None,
        constraints: constraints(search),
        notes,
        arrangements: arrangements(search, &per_structure, best_variant),
    }
}

fn constraints(search: &Search) -> Constraints {
    let p = &search.problem;
    Constraints {
        must_test: p.must_test.iter().map(|m| m.label.clone()).collect(),
        budget: p.budget,
        min_df: p.min_df,
        exact_only: p.exact_only,
        target_power: p.target_power,
        alpha: p.plan.alpha,
        limits: p
            .limits
            .iter()
            .map(|l| LimitReport {
                unit: l.unit.clone(),
                per: l.per.clone(),
                at_most: l.at_most,
                needed: 0,
            })
            .collect(),
    }
}

/// The arrangements of a search that chooses where treatments go, each with its best
/// layout or nearest miss; `per_structure` holds, by structure, its best feasible
/// candidate and its cheapest candidate that failed a test constraint.
fn arrangements(
    search: &Search,
    per_structure: &[(Option<Entry>, Option<Entry>)],
    best: Option<usize>,
) -> Vec<Arrangement> {
    let Some(space) = search.problem.units.as_ref() else {
        return Vec::new();
    };
    if !search.problem.chooses_arrangement() {
        return Vec::new();
    }
    let key = |vi: usize| {
        let v = &search.screens[vi].variant;
        let randomised: Vec<Randomised> = v
            .randomised
            .iter()
            .filter(|(t, _)| space.has_choice(t))
            .map(|(t, u)| Randomised {
                treatment: t.clone(),
                unit: u.clone(),
            })
            .collect();
        (randomised, v.without_units.clone())
    };
    // (the picks that name an arrangement, its structures)
    type Group = ((Vec<Randomised>, Vec<String>), Vec<usize>);
    let mut groups: Vec<Group> = Vec::new();
    for vi in 0..search.screens.len() {
        let k = key(vi);
        match groups.iter_mut().find(|(g, _)| *g == k) {
            Some((_, members)) => members.push(vi),
            None => groups.push((k, vec![vi])),
        }
    }
    let mut out: Vec<Arrangement> = groups
        .into_iter()
        .map(|((randomised, without), members)| {
            let entry = |vi: usize| per_structure.get(vi);
            let best_entry = members
                .iter()
                .filter_map(|&vi| entry(vi).and_then(|e| e.0.as_ref()))
                .min_by_key(|e| super::enumerate::rank_key(&e.outcome));
            let nearest = match best_entry {
                Some(_) => None,
                None => members
                    .iter()
                    .filter_map(|&vi| entry(vi).and_then(|e| e.1.as_ref()))
                    .min_by_key(|e| super::enumerate::miss_key(&e.outcome)),
            };
            Arrangement {
                randomised,
                without,
                chosen: best.is_some_and(|b| members.contains(&b)),
                best: best_entry.map(|e| describe(search, e)),
                nearest: nearest.map(|e| describe(search, e)),
            }
        })
        .collect();
    // The best layout's arrangement first, then those that meet the goal, cheapest first.
    out.sort_by(|a, b| {
        let key = |x: &Arrangement| (!x.chosen, x.best.as_ref().map_or(f64::INFINITY, |c| c.cost));
        let (ka, kb) = (key(a), key(b));
        ka.0.cmp(&kb.0).then(ka.1.total_cmp(&kb.1))
    });
    out
}

fn notes(search: &Search) -> Notes {
    Notes {
        skipped: search.skipped.clone(),
        no_sd: !search.problem.plan.has_priors(),
        ..Notes::default()
    }
}

/// The layout of a candidate, as `check` would read it.
pub fn layout_of(search: &Search, variant: usize, levels: &Levels) -> Option<Layout> {
    let v = &search.screens[variant].variant;
    Layout::new(
        search.problem.base.name.clone(),
        v.structure.clone(),
        levels.clone(),
    )
    .ok()
}

/// A candidate in full: checked again by `check`, described in words.
pub fn describe(search: &Search, e: &Entry) -> CandidateReport {
    let screen = &search.screens[e.variant];
    let v = &screen.variant;
    let s = &v.structure;
    let base = &search.problem.base.structure;
    let levels = &e.levels;
    let factors: Vec<FactorLevels> = s
        .factors
        .iter()
        .enumerate()
        .map(|(i, f)| {
            let nests: u64 = s
                .factors
                .iter()
                .enumerate()
                .filter(|(j, _)| f.ancestors & (1 << j) != 0)
                .map(|(j, _)| levels.per_factor[j])
                .product();
            FactorLevels {
                name: f.name.clone(),
                kind: f.kind,
                levels: levels.per_factor[i],
                within: s
                    .factors
                    .iter()
                    .enumerate()
                    .filter(|(j, _)| f.within & (1 << j) != 0)
                    .map(|(_, g)| g.name.clone())
                    .collect(),
                in_all: levels.per_factor[i] * nests,
            }
        })
        .collect();
    let report = layout_of(search, e.variant, levels)
        .and_then(|layout| check(&layout, s.convention, &v.plan).ok());
    let tests = search
        .problem
        .must_test
        .iter()
        .zip(&screen.must)
        .map(|(m, located)| {
            let absent = |reason: String| MustTestReport {
                label: m.label.clone(),
                verdict: Verdict::Untestable,
                denominator: Vec::new(),
                denominator_df: None,
                power: None,
                min_detectable: None,
                reason: None,
                absent: Some(reason),
                needs_exact: false,
            };
            let t = match located {
                Ok(t) => *t,
                Err(why) => return absent(why.clone()),
            };
            let id = screen.model.terms[t].live;
            let Some(test) = report
                .as_ref()
                .and_then(|r| r.term(id))
                .and_then(|x| x.test.clone())
            else {
                return absent("its counts are too large for exact arithmetic".into());
            };
            let needs_exact = test.verdict == Verdict::QuasiF && search.problem.exact_only;
            MustTestReport {
                label: m.label.clone(),
                verdict: test.verdict,
                denominator: test.denominator.clone(),
                denominator_df: test.denominator_df,
                power: test.power,
                min_detectable: test.min_detectable,
                reason: test.reason.clone(),
                absent: None,
                needs_exact,
            }
        })
        .collect();
    let left_out = v
        .left_out
        .iter()
        .map(|&f| base.factors[f].name.clone())
        .collect();
    let units = report
        .as_ref()
        .and_then(|r| r.strata.as_ref())
        .map_or(Vec::new(), |st| {
            st.strata
                .iter()
                .map(|x| UnitCount {
                    name: x.unit.clone(),
                    count: x.count,
                    within: x.within.clone(),
                    in_all: x.total,
                    carries: x.carries.clone(),
                    subsample: x.subsample,
                })
                .collect()
        });
    let beyond = screen.beyond_limits(levels).map(|k| {
        let l = &search.problem.limits[k];
        let m = v.limits.iter().find(|m| m.limit == k);
        let needed = m.map_or(0, |m| {
            let mut n = if m.subscripts & crate::term::REPLICATE != 0 {
                levels.replicates
            } else {
                1
            };
            for (i, &c) in levels.per_factor.iter().enumerate() {
                if m.subscripts & (1 << i) != 0 {
                    n = n.saturating_mul(c);
                }
            }
            n
        });
        LimitReport {
            unit: l.unit.clone(),
            per: l.per.clone(),
            at_most: l.at_most,
            needed,
        }
    });
    CandidateReport {
        cost: e.outcome.cost,
        replicates: levels.replicates,
        observations: levels.observations(),
        structure: v.describe(base, &search.problem),
        units,
        beyond,
        cells: levels.cells(),
        factors,
        left_out,
        tests,
        smallest_df: e.outcome.min_df,
        smallest_power: e.outcome.min_power,
        rejected: e.outcome.rejection,
        failing: e.outcome.failing,
    }
}

/// Which constraint binds when nothing is feasible, and the nearest miss.
fn binding(search: &Search, tally: &Tally, rejections: &[RejectionReport]) -> Binding {
    let failing = |c: &CandidateReport| {
        c.failing
            .and_then(|k| c.tests.get(k))
            .map(|t| t.label.clone())
    };
    if let Some(e) = &tally.nearest_power {
        let c = describe(search, e);
        return Binding::Power {
            term: failing(&c),
            closest: Box::new(c),
        };
    }
    if let Some(e) = &tally.nearest_df {
        let c = describe(search, e);
        return Binding::MinDf {
            term: failing(&c),
            closest: Box::new(c),
        };
    }
    if rejections.iter().any(|r| r.reason == Rejection::Untestable) {
        Binding::Testability
    } else if rejections.iter().any(|r| r.reason == Rejection::Budget) {
        Binding::Budget
    } else {
        Binding::Empty
    }
}
