//! The search's result: the structs the renderers print and JSON serialises.
//!
//! The candidates shown are checked again in full by `check::check`, so that their
//! tests, reasons, power and minimum detectable effects are those `emsplan check` gives
//! for the same layout.

use serde::Serialize;

use crate::check::{DenominatorPart, check};
use crate::errorterm::Verdict;
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
    pub binding: Option<String>,
    /// When nothing is feasible within the budget: the cheapest candidate that meets
    /// every other constraint.
    pub without_budget: Option<CandidateReport>,
    pub constraints: Constraints,
    pub notes: Vec<String>,
    pub caution: String,
}

#[derive(Debug, Clone, Copy, Serialize, Default)]
pub struct Counts {
    pub untestable: u64,
    pub min_df: u64,
    pub power: u64,
    pub budget: u64,
}

#[derive(Debug, Clone, Serialize)]
pub struct Constraints {
    pub must_test: Vec<String>,
    pub budget: Option<f64>,
    pub min_df: Option<f64>,
    pub exact_only: bool,
    pub target_power: Option<f64>,
    pub alpha: f64,
}

#[derive(Debug, Clone, Serialize)]
pub struct RejectionReport {
    pub reason: Rejection,
    pub count: u64,
    pub cheapest: CandidateReport,
    /// Why the cheapest candidate is rejected, in a sentence.
    pub why: String,
}

#[derive(Debug, Clone, Serialize)]
pub struct CandidateReport {
    pub cost: f64,
    pub replicates: u64,
    pub observations: u64,
    /// The structural picks: "bench within light, cultivar; no rack".
    pub structure: String,
    /// The layout in words: what to buy and how to arrange it.
    pub description: String,
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
    #[serde(skip_serializing_if = "Option::is_none")]
    pub reason: Option<String>,
}

/// The caution at the end of every search.
pub fn caution() -> String {
    format!(
        "The search ranks layouts by the prices, planning values and constraints in the problem file; they are assumptions. {}",
        crate::render::check::CAUTION
    )
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
        notes.push(format!(
            "the frontier has {} points; the {frontier_cap} cheapest are shown",
            tally.frontier.len()
        ));
    }
    if !search.problem.plan.has_priors() {
        notes.push(
            "no [sd] table, so no power: the frontier of cost against power is empty, and ties in cost go to the larger smallest denominator df".into(),
        );
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
            let cheapest = describe(search, e);
            let why = why(search, r, e, &cheapest);
            Some(RejectionReport {
                reason: r,
                count: tally.count(r),
                cheapest,
                why,
            })
        })
        .collect();
    let best = candidates.first().cloned();
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
        },
        rejections,
        binding,
        without_budget,
        constraints: constraints(search),
        notes,
        caution: caution(),
    }
}

/// Builds the report of the optimizer: the best per structure, ranked; no frontier and no
/// tally of the space (the optimizer does not visit it).
pub fn build_optimized(search: &Search, options: &Options, found: Optimized) -> SearchReport {
    let candidates: Vec<CandidateReport> = found.best.iter().map(|e| describe(search, e)).collect();
    let mut notes = notes(search);
    notes.push(format!(
        "found by the integer program ({} solves, {} candidates screened exactly): only the best of each structure is ranked, and there is no frontier or tally of the whole space; use --method enumerate for those",
        found.solves, found.screened
    ));
    let best = candidates.first().cloned();
    let binding = best.is_none().then(|| {
        "no candidate meets every constraint (the optimizer proves it per structure; run --method enumerate to see the nearest misses)".to_string()
    });
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
        },
        rejections: Vec::new(),
        binding,
        without_budget: None,
        constraints: constraints(search),
        notes,
        caution: caution(),
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
    }
}

fn notes(search: &Search) -> Vec<String> {
    let mut notes = Vec::new();
    for s in &search.skipped {
        notes.push(format!(
            "left out of the space, as it gives no valid layout: {s}"
        ));
    }
    notes
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
                reason: Some(reason),
            };
            let t = match located {
                Ok(t) => *t,
                Err(why) => return absent(why.clone()),
            };
            let label = screen.model.terms[t].label(s);
            let Some(test) = report
                .as_ref()
                .and_then(|r| r.terms.iter().find(|x| x.label == label))
                .and_then(|x| x.test.clone())
            else {
                return absent("its counts are too large for exact arithmetic".into());
            };
            let mut reason = test.reason.clone();
            if test.verdict == Verdict::Synthetic && search.problem.exact_only {
                reason = Some(
                    "only a quasi-F (synthetic) test exists, and exact_only asks for an exact F test"
                        .into(),
                );
            }
            MustTestReport {
                label: m.label.clone(),
                verdict: test.verdict,
                denominator: test.denominator.clone(),
                denominator_df: test.denominator_df,
                power: test.power,
                min_detectable: test.min_detectable,
                reason,
            }
        })
        .collect();
    let left_out = v
        .left_out
        .iter()
        .map(|&f| base.factors[f].name.clone())
        .collect();
    CandidateReport {
        cost: e.outcome.cost,
        replicates: levels.replicates,
        observations: levels.observations(),
        structure: v.describe(base),
        description: words(&factors, levels, e.outcome.cost),
        factors,
        left_out,
        tests,
        smallest_df: e.outcome.min_df,
        smallest_power: e.outcome.min_power,
        rejected: e.outcome.rejection,
    }
}

/// "light 3; bench 3 in each light (9 in all); cultivar 4; 2 replicates in each of the
/// 108 cells: 216 observations; cost 4810".
pub fn words(factors: &[FactorLevels], levels: &Levels, cost: f64) -> String {
    let mut parts: Vec<String> = factors
        .iter()
        .map(|f| {
            if f.within.is_empty() {
                format!("{} {}", f.name, f.levels)
            } else {
                format!(
                    "{} {} in each {} ({} in all)",
                    f.name,
                    f.levels,
                    f.within.join(" x "),
                    f.in_all
                )
            }
        })
        .collect();
    let cells = levels.cells();
    let reps = if levels.replicates == 1 {
        format!("1 observation in each of the {cells} cells")
    } else {
        format!(
            "{} replicates in each of the {cells} cells: {} observations",
            levels.replicates,
            levels.observations()
        )
    };
    parts.push(reps);
    format!("{}; cost {}", parts.join("; "), crate::render::num(cost))
}

/// Why a candidate is rejected, in a sentence.
fn why(search: &Search, r: Rejection, e: &Entry, c: &CandidateReport) -> String {
    let p = &search.problem;
    let test = e.outcome.failing.and_then(|k| c.tests.get(k));
    let layout = &c.description;
    match (r, test) {
        (Rejection::Budget, _) => format!(
            "{layout}, over the budget of {} by {}",
            p.budget.map_or("none".into(), crate::render::num),
            crate::render::num(e.outcome.cost - p.budget.unwrap_or(0.0))
        ),
        (Rejection::Untestable, Some(t)) => format!(
            "with {layout}, {} cannot be tested: {}",
            t.label,
            t.reason
                .clone()
                .unwrap_or_else(|| "it has no error term".into())
        ),
        (Rejection::MinDf, Some(t)) => match t.denominator_df {
            Some(df) => format!(
                "with {layout}, {} is tested with only {} denominator df (min_df {})",
                t.label,
                crate::render::num(df),
                p.min_df.map_or("-".into(), crate::render::num)
            ),
            None => format!(
                "with {layout}, {} has only a quasi-F test, whose Satterthwaite df are unknown without an [sd] table, so min_df cannot be met",
                t.label
            ),
        },
        (Rejection::Power, Some(t)) => format!(
            "with {layout}, {} has power {} (target {})",
            t.label,
            t.power.map_or("unknown".into(), |x| format!("{x:.3}")),
            p.target_power.unwrap_or(0.0)
        ),
        (_, None) => format!("{layout}: rejected ({})", r.name()),
    }
}

/// Which constraint binds when nothing is feasible, and how far the nearest miss is.
fn binding(search: &Search, tally: &Tally, rejections: &[RejectionReport]) -> String {
    let p = &search.problem;
    if let Some(e) = &tally.nearest_power {
        let c = describe(search, e);
        let t = e.outcome.failing.and_then(|k| c.tests.get(k));
        return format!(
            "the power target binds: no layout within the constraints reaches power {} for every must-test term; the closest, {}, reaches {} for {}",
            p.target_power.unwrap_or(0.0),
            c.description,
            e.outcome
                .min_power
                .map_or("unknown".into(), |x| format!("{x:.3}")),
            t.map_or("a must-test term".into(), |t| t.label.clone())
        );
    }
    if let Some(e) = &tally.nearest_df {
        let c = describe(search, e);
        let t = e.outcome.failing.and_then(|k| c.tests.get(k));
        return match e.outcome.min_df {
            Some(df) => format!(
                "min_df binds: the most denominator df any testable layout gives its worst must-test term is {} ({}, {}), short of {}",
                crate::render::num(df),
                t.map_or("a must-test term".into(), |t| t.label.clone()),
                c.description,
                p.min_df.map_or("-".into(), crate::render::num)
            ),
            None => format!(
                "min_df binds: the testable layouts leave {} with a quasi-F test whose df are unknown without an [sd] table",
                t.map_or("a must-test term".into(), |t| t.label.clone())
            ),
        };
    }
    if let Some(r) = rejections
        .iter()
        .find(|r| r.reason == Rejection::Untestable)
    {
        return format!(
            "testability binds: no layout in the space tests every must-test term; the cheapest of them: {}",
            r.why
        );
    }
    match rejections.iter().find(|r| r.reason == Rejection::Budget) {
        Some(r) => format!("the budget binds: every candidate is over it; {}", r.why),
        None => "the space holds no candidate".into(),
    }
}
