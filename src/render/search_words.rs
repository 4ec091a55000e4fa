//! The sentences of a design search, shared by the search renderer and the report.

use super::num;
use super::words;
use crate::search::Rejection;
use crate::search::report::{
    Binding, CandidateReport, Constraints, MustTestReport, Notes, RejectionReport, SearchReport,
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
    let test = c.failing.and_then(|k| c.tests.get(k));
    let layout = description(c);
    match (r.reason, test) {
        (Rejection::Budget, _) => format!(
            "{layout}, over the budget of {} by {}",
            p.budget.map_or("none".into(), num),
            num(c.cost - p.budget.unwrap_or(0.0))
        ),
        (Rejection::Untestable, Some(t)) => format!(
            "with {layout}, {} cannot be tested: {}",
            t.label,
            must_test_reason(t)
        ),
        (Rejection::MinDf, Some(t)) => match t.denominator_df {
            Some(df) => format!(
                "with {layout}, {} is tested with only {} denominator df (min_df {})",
                t.label,
                num(df),
                p.min_df.map_or("-".into(), num)
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
        (_, None) => format!("{layout}: rejected ({})", rejection(r.reason)),
    }
}

/// A rejection's reason in words.
pub fn rejection(r: Rejection) -> &'static str {
    match r {
        Rejection::Budget => "over budget",
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
