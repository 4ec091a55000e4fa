//! The sentences of a design search, shared by the search renderer and the report.

use super::num;
use super::words;
use crate::search::Rejection;
use crate::search::report::{
    Arrangement, Binding, CandidateReport, Constraints, LimitReport, MustTestReport, Notes,
    RejectionReport, SearchReport,
};

/// The caution at the end of every search.
pub fn caution() -> String {
    format!(
        "The search ranks layouts by the prices, planning values and constraints in the problem file; they are assumptions. {}",
        words::CAUTION
    )
}

/// "light 3; bench 3 in each light (9 in all); cultivar 4; 2 replicates in each of the
/// 108 cells: 216 observations; cost 4810".
pub fn description(c: &CandidateReport) -> String {
    if !c.units.is_empty() {
        return unit_description(c);
    }
    let mut parts: Vec<String> = c
        .factors
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
    let cells = c.cells;
    parts.push(if c.replicates == 1 {
        format!("1 observation in each of the {cells} cells")
    } else {
        format!(
            "{} replicates in each of the {cells} cells: {} observations",
            c.replicates, c.observations
        )
    });
    format!("{}; cost {}", parts.join("; "), num(c.cost))
}

/// "chamber 6 in all; shelf 2 per chamber (12 in all); pot 4 per shelf (48 in all);
/// light on chamber, cultivar on pot; cost 4810": a candidate of a layout of units.
fn unit_description(c: &CandidateReport) -> String {
    let mut parts: Vec<String> = c
        .units
        .iter()
        .map(|u| {
            let sub = if u.subsample { ", subsamples" } else { "" };
            if u.within.is_empty() {
                format!("{} {} in all{sub}", u.name, u.count)
            } else {
                format!(
                    "{} {} per {} ({} in all{sub})",
                    u.name,
                    u.count,
                    u.within.join(" and "),
                    u.in_all
                )
            }
        })
        .collect();
    let placed: Vec<String> = c
        .units
        .iter()
        .flat_map(|u| u.carries.iter().map(move |t| format!("{t} on {}", u.name)))
        .collect();
    if !placed.is_empty() {
        parts.push(placed.join(", "));
    }
    format!("{}; cost {}", parts.join("; "), num(c.cost))
}

/// "chamber: at most 6 in all", "plant: at most 5 per tray".
pub fn limit(l: &LimitReport) -> String {
    match &l.per {
        None => format!("{}: at most {} in all", l.unit, l.at_most),
        Some(p) => format!("{}: at most {} per {p}", l.unit, l.at_most),
    }
}

/// Why a candidate fails, as a clause after its description: "light cannot be tested:
/// ...", "light has power 0.412 (target 0.8)".
pub fn failure(c: &CandidateReport, reason: Rejection, p: &Constraints) -> String {
    let test = c.failing.and_then(|k| c.tests.get(k));
    match (reason, test) {
        (Rejection::Limit, _) => match &c.beyond {
            Some(l) => format!(
                "its {} count is {} {}, above the limit of {}",
                l.unit,
                l.needed,
                l.per
                    .as_ref()
                    .map_or("in all".to_string(), |x| format!("per {x}")),
                l.at_most
            ),
            None => "it is beyond a capacity limit".into(),
        },
        (Rejection::Budget, _) => format!(
            "it is over the budget of {} by {}",
            p.budget.map_or("none".into(), num),
            num(c.cost - p.budget.unwrap_or(0.0))
        ),
        (Rejection::Untestable, Some(t)) => {
            format!("{} cannot be tested: {}", t.label, must_test_reason(t))
        }
        (Rejection::MinDf, Some(t)) => match t.denominator_df {
            Some(df) => format!(
                "{} is tested with only {} denominator df (min_df {})",
                t.label,
                num(df),
                p.min_df.map_or("-".into(), num)
            ),
            None => format!(
                "{} has only a quasi-F test, whose Satterthwaite df are unknown without an [sd] table, so min_df cannot be met",
                t.label
            ),
        },
        (Rejection::Power, Some(t)) => format!(
            "{} has power {} (target {})",
            t.label,
            t.power.map_or("unknown".into(), |x| format!("{x:.3}")),
            p.target_power.unwrap_or(0.0)
        ),
        (r, None) => format!("it is rejected ({})", rejection(r)),
    }
}

/// How each must-test term is tested in a candidate: "light over chamber, 4 den. df,
/// power 0.83".
pub fn tests_in_brief(c: &CandidateReport) -> String {
    let parts: Vec<String> = c
        .tests
        .iter()
        .map(|t| {
            if !t.verdict.is_testable() {
                return format!("{} cannot be tested", t.label);
            }
            let over = if t.denominator.is_empty() {
                "nothing".to_string()
            } else {
                super::combination(&t.denominator)
            };
            let df = t
                .denominator_df
                .map_or(String::new(), |d| format!(", {} den. df", num(d)));
            let power = t.power.map_or(String::new(), |x| {
                format!(", power {}", super::text::probability(x))
            });
            format!("{} over {over}{df}{power}", t.label)
        })
        .collect();
    parts.join("; ")
}

/// One arrangement of treatments on units and what it costs, in a sentence.
pub fn arrangement(a: &Arrangement, best_cost: Option<f64>, p: &Constraints) -> String {
    let mut name: Vec<String> = a
        .randomised
        .iter()
        .map(|r| format!("{} on {}", r.treatment, r.unit))
        .collect();
    name.extend(a.without.iter().map(|u| format!("no {u}")));
    let name = if name.is_empty() {
        "As given".to_string()
    } else {
        let n = name.join(", ");
        let mut c = n.chars();
        c.next().map_or(String::new(), |f| {
            f.to_uppercase().collect::<String>() + c.as_str()
        })
    };
    match (&a.best, &a.nearest) {
        (Some(b), _) if a.chosen => format!(
            "{name} (the best layout): {}. Tests: {}.",
            description(b),
            tests_in_brief(b)
        ),
        (Some(b), _) => {
            let more = best_cost.map_or(String::new(), |c| {
                format!(", {} more than the best", num(b.cost - c))
            });
            format!(
                "{name}: its cheapest layout that meets the goal costs {}{more}: {}. Tests: {}.",
                num(b.cost),
                description(b),
                tests_in_brief(b)
            )
        }
        (None, Some(n)) => format!(
            "{name}: no layout within the budget and limits meets the goal. The nearest, {}, fails because {}. Tests: {}.",
            description(n),
            n.rejected
                .map_or("it is rejected".into(), |r| failure(n, r, p)),
            tests_in_brief(n)
        ),
        (None, None) => format!(
            "{name}: no layout meets the goal; every layout is over the budget or beyond the limits{}.",
            if p.budget.is_none() && p.limits.is_empty() {
                " (or the search found none)"
            } else {
                ""
            }
        ),
    }
}

/// Why a must-test term is not tested, in words.
pub fn must_test_reason(t: &MustTestReport) -> String {
    if let Some(a) = &t.absent {
        return a.clone();
    }
    if t.needs_exact {
        return "only a quasi-F test exists, and exact_only asks for an exact F test".into();
    }
    match &t.reason {
        Some(r) => words::reason_of(r, &t.denominator),
        None => "it has no error term".into(),
    }
}

/// Why the cheapest candidate of a rejection is rejected, in a sentence.
pub fn why(r: &RejectionReport, p: &Constraints) -> String {
    let c = &r.cheapest;
    let layout = description(c);
    match r.reason {
        Rejection::Budget | Rejection::Limit => format!("{layout}: {}", failure(c, r.reason, p)),
        _ => format!("with {layout}, {}", failure(c, r.reason, p)),
    }
}

/// A rejection's reason in words.
pub fn rejection(r: Rejection) -> &'static str {
    match r {
        Rejection::Budget => "over budget",
        Rejection::Limit => "beyond a capacity limit",
        Rejection::Untestable => "a must-test term untestable",
        Rejection::MinDf => "too few denominator df",
        Rejection::Power => "below the power target",
    }
}

/// Which constraint binds when nothing is feasible, in a sentence.
pub fn binding(s: &SearchReport) -> Option<String> {
    let b = s.binding.as_ref()?;
    let p = &s.constraints;
    let term = |t: &Option<String>| t.clone().unwrap_or_else(|| "a must-test term".into());
    let first = |reason: Rejection| {
        s.rejections
            .iter()
            .find(|r| r.reason == reason)
            .map(|r| why(r, p))
    };
    Some(match b {
        Binding::Power { closest, term: t } => format!(
            "the power target binds: no layout within the constraints reaches power {} for every must-test term; the closest, {}, reaches {} for {}",
            p.target_power.unwrap_or(0.0),
            description(closest),
            closest
                .smallest_power
                .map_or("unknown".into(), |x| format!("{x:.3}")),
            term(t)
        ),
        Binding::MinDf { closest, term: t } => match closest.smallest_df {
            Some(df) => format!(
                "min_df binds: the most denominator df any testable layout gives its worst must-test term is {} ({}, {}), short of {}",
                num(df),
                term(t),
                description(closest),
                p.min_df.map_or("-".into(), num)
            ),
            None => format!(
                "min_df binds: the testable layouts leave {} with a quasi-F test whose df are unknown without an [sd] table",
                term(t)
            ),
        },
        Binding::Testability => format!(
            "testability binds: no layout in the space tests every must-test term; the cheapest of them: {}",
            first(Rejection::Untestable).unwrap_or_default()
        ),
        Binding::Budget => format!(
            "the budget binds: every candidate is over it; {}",
            first(Rejection::Budget).unwrap_or_default()
        ),
        Binding::Empty => "the space holds no candidate".into(),
        Binding::Proven => "no candidate meets every constraint (the optimizer proves it per structure; run --method enumerate to see the nearest misses)".into(),
    })
}

/// The notes of a search in words.
pub fn notes(n: &Notes) -> Vec<String> {
    let mut out: Vec<String> = n
        .skipped
        .iter()
        .map(|s| format!("left out of the space, as it gives no valid layout: {s}"))
        .collect();
    if let Some(points) = n.frontier_points {
        out.push(format!(
            "the frontier has {points} points; the {} cheapest are shown",
            n.frontier_shown
        ));
    }
    if n.no_sd {
        out.push(
            "no [sd] table, so no power: the frontier of cost against power is empty, and ties in cost go to the larger smallest denominator df".into(),
        );
    }
    if let Some((solves, screened)) = n.optimizer {
        out.push(format!(
            "found by the integer program ({solves} solves, {screened} candidates screened exactly): only the best of each structure is ranked, and there is no frontier or tally of the whole space; use --method enumerate for those"
        ));
    }
    out
}
