//! The `check` job for an unbalanced layout: the same `CheckReport` as for a balanced
//! one, with float coefficients and a summary of what was removed and what follows.

use serde::Serialize;

use crate::check::{
    CheckReport, Coefficient, Component, DenominatorPart, NO_COMBINATION, TermReport, TestReport,
    planning_notes, review, symbol, synthetic_reason,
};
use crate::errorterm::Verdict;
use crate::goal::Goal;
use crate::layout::{Kind, Layout, SumsOfSquares};
use crate::planning::{Cost, CostLine, PlanningValues};
use crate::repair::Outcome;
use crate::term::{Mask, REPLICATE};

use super::Analysis;
use super::denominator::plan_tests;

/// What an unbalanced check adds to the report.
#[derive(Debug, Clone, Serialize)]
pub struct Summary {
    /// `sequential` or `type3`.
    pub sums_of_squares: SumsOfSquares,
    /// Terms in the order they were fitted (the order of the sequential sums of squares).
    pub fit_order: Vec<String>,
    /// Observations of the full (balanced) layout, before the removals.
    pub full_observations: u64,
    pub removed_observations: u64,
    /// The removals as written: `light=2,chamber=3`.
    pub removals: Vec<String>,
    /// What follows from the removals and the method, in words.
    pub notes: Vec<String>,
}

/// How the term is tested, for the repair search and `compare`.
pub fn outcome(layout: &Layout, plan: &PlanningValues, live: Mask) -> Option<Outcome> {
    outcome_of(&Analysis::new(layout).ok()?, layout, plan, live)
}

/// `outcome` for a layout already fitted (`a` is `Analysis::new(layout)`), so that many
/// planning values can be tried on one synthesis.
pub fn outcome_of(
    a: &Analysis,
    layout: &Layout,
    plan: &PlanningValues,
    live: Mask,
) -> Option<Outcome> {
    let t = a.design.model.terms.iter().position(|u| u.live == live)?;
    let e = a.tests[t].as_ref()?;
    let plans = plan_tests(&a.design.model, &a.ems, &a.fit.df, &a.tests, plan, layout);
    let exact_df = (e.verdict == Verdict::Exact).then(|| a.fit.df[e.denominator[0].0] as f64);
    Some(Outcome {
        verdict: e.verdict,
        denominator_df: plans[t].and_then(|p| p.denominator_df).or(exact_df),
        power: plans[t].and_then(|p| p.power),
    })
}

/// Cost of an unbalanced layout: a priced term's units are its cells that hold at least
/// one observation; the residual's are the observations.
fn cost(a: &Analysis, layout: &Layout, plan: &PlanningValues) -> Option<Cost> {
    let model = plan.cost.as_ref()?;
    let s = &layout.structure;
    let terms = &a.design.model.terms;
    let breakdown: Vec<CostLine> = model
        .per_unit
        .iter()
        .map(|&(live, price)| {
            let (term, units) = if live == REPLICATE {
                ("residual".to_string(), a.design.len() as u64)
            } else {
                let t = crate::layout::term_of(s, live);
                let units = terms
                    .iter()
                    .position(|u| u.live == live)
                    .map(|i| a.design.occupied_cells(i) as u64)
                    // A priced interaction assumed absent: its cells are still bought.
                    .unwrap_or_else(|| t.cells(&layout.levels));
                (t.label(s), units)
            };
            CostLine {
                term,
                units,
                per_unit: price,
                cost: price * units as f64,
            }
        })
        .collect();
    Some(Cost {
        total: model.overhead + breakdown.iter().map(|l| l.cost).sum::<f64>(),
        overhead: model.overhead,
        breakdown,
    })
}

/// Why a term is not simply tested, in words; `None` for an exact test.
fn explain(a: &Analysis, layout: &Layout, t: usize) -> Option<String> {
    let model = &a.design.model;
    let s = &layout.structure;
    let e = a.tests[t].as_ref()?;
    let label = |c: usize| model.terms[c].label(s);
    match e.verdict {
        Verdict::Exact => None,
        Verdict::NotEstimable => {
            let before = model.terms[t].df(&layout.levels);
            let still = match model.kinds[t] {
                Kind::Fixed => "its effects are still in the model",
                Kind::Random => "its variance is still in the model",
            };
            let why = if before == 0 {
                "it had none in the full layout either".to_string()
            } else if a.fit.sums_of_squares == SumsOfSquares::Type3 && a.fit.sequential_df[t] > 0 {
                format!(
                    "it had {before} in the full layout; type III leaves it none, sequential sums of squares {}",
                    a.fit.sequential_df[t]
                )
            } else {
                format!("it had {before} in the full layout")
            };
            Some(format!(
                "the layout leaves it 0 df ({why}), so it has no mean square of its own; {still}"
            ))
        }
        Verdict::Synthetic => {
            let parts: Vec<(String, Coefficient)> = e
                .denominator
                .iter()
                .map(|&(v, w)| (label(v), Coefficient::Approximate(w)))
                .collect();
            Some(synthetic_reason(&parts))
        }
        Verdict::Untestable => {
            if e.isolated.is_empty() {
                return Some(NO_COMBINATION.into());
            }
            let parts: Vec<String> = e
                .isolated
                .iter()
                .map(|&c| {
                    let sym = symbol(model, c);
                    if a.fit.df[c] == 0 {
                        if model.terms[c].is_residual() {
                            format!(
                                "{sym} is in its expected mean square, but the residual has no df left (no cell keeps two observations)"
                            )
                        } else {
                            format!(
                                "{sym} is in its expected mean square, but {} has 0 df after the removals, so that variance is confounded with it",
                                label(c)
                            )
                        }
                    } else if model.kinds[c] == Kind::Fixed {
                        format!(
                            "{sym} is in its expected mean square, and no other mean square carries it"
                        )
                    } else {
                        format!(
                            "{sym} is in its expected mean square and in no other estimable mean square"
                        )
                    }
                })
                .collect();
            Some(parts.join("; "))
        }
    }
}

/// Notes on the removals and the method, and warnings of what became untestable.
fn notes_and_warnings(a: &Analysis, layout: &Layout) -> (Vec<String>, Vec<String>) {
    let model = &a.design.model;
    let s = &layout.structure;
    let levels = &layout.levels;
    let residual = model.residual();
    let mut notes = Vec::new();
    let mut warnings = Vec::new();
    notes.push(
        "unrestricted model: random effects, interactions with fixed factors included, are independent with no sum-to-zero constraint (the restricted model is not defined for unbalanced layouts)".to_string(),
    );
    match layout.sums_of_squares {
        SumsOfSquares::Sequential => notes.push(
            "sequential (type I) sums of squares, each term adjusted for the terms fitted before it (the fit order above: fixed terms first, so the random terms' mean squares hold no fixed effect); expected mean squares by Hartley's (1967) method of synthesis".to_string(),
        ),
        SumsOfSquares::Type3 => notes.push(
            "type III sums of squares, each term adjusted for every other term in sum-to-zero coding; expected mean squares by Hartley's (1967) method of synthesis".to_string(),
        ),
    }
    notes.push(
        "κ² coefficients are averages over effect patterns of the planned size (in an unbalanced layout a fixed term's mean square depends on the pattern, not only on its size); in unbalanced layouts the mean squares are not scaled chi-squares in general, so F ratios, Satterthwaite df and power are approximations".to_string(),
    );
    // Random units with no observation left: fewer units sampled there.
    let mut emptied: Vec<String> = Vec::new();
    for (i, t) in model.terms[..residual].iter().enumerate() {
        if t.live.count_ones() != 1 || model.kinds[i] != Kind::Random {
            continue;
        }
        let f = t.live.trailing_zeros() as usize;
        let grid = a.design.grid(i);
        for (cell, n) in a.design.term_counts(i).iter().enumerate() {
            if *n > 0.0 {
                continue;
            }
            // Decode the cell's levels over the term's subscripts.
            let mut rest = cell;
            let mut at = vec![0usize; grid.sizes.len()];
            for k in (0..grid.sizes.len()).rev() {
                at[k] = rest % grid.sizes[k];
                rest /= grid.sizes[k];
            }
            let mut words = String::new();
            for (k, &g) in grid.subscripts.iter().enumerate() {
                if g == f {
                    words.insert_str(0, &format!("{} {}", s.factors[g].name, at[k] + 1));
                }
            }
            let nests: Vec<String> = grid
                .subscripts
                .iter()
                .enumerate()
                .filter(|(_, g)| **g != f)
                .map(|(k, &g)| format!("{} {}", s.factors[g].name, at[k] + 1))
                .collect();
            if !nests.is_empty() {
                words.push_str(&format!(" within {}", nests.join(", ")));
            }
            emptied.push(words);
        }
    }
    if !emptied.is_empty() {
        let shown: Vec<String> = emptied.iter().take(6).cloned().collect();
        let more = if emptied.len() > 6 {
            format!(" and {} more", emptied.len() - 6)
        } else {
            String::new()
        };
        notes.push(format!(
            "no observation is left of {}{more}: such units count as not sampled",
            shown.join("; ")
        ));
    }
    // Fixed cells with no observation: their interaction loses df.
    for (i, t) in model.terms[..residual].iter().enumerate() {
        if model.kinds[i] != Kind::Fixed || t.live.count_ones() < 2 {
            continue;
        }
        let cells = a.design.grid(i).cells();
        let occupied = a.design.occupied_cells(i);
        if occupied < cells {
            let mut note = format!(
                "{} has {} of its {cells} cells empty: its test is of the interaction in the cells that remain",
                t.label(s),
                cells - occupied
            );
            if layout.sums_of_squares == SumsOfSquares::Type3 {
                note.push_str(
                    "; with empty cells, type III hypotheses depend on how the effects are coded (here sum-to-zero contrasts over every level), so sequential sums of squares are the plainer choice",
                );
            }
            notes.push(note);
        }
    }
    // Fixed terms whose sequential mean square carries later fixed terms' effects.
    for (i, row) in a.ems.rows[..residual].iter().enumerate() {
        if model.kinds[i] != Kind::Fixed {
            continue;
        }
        let others: Vec<String> = row
            .iter()
            .filter(|(c, _)| *c != i && *c != residual && model.kinds[*c] == Kind::Fixed)
            .map(|(c, x)| {
                format!(
                    "{} ({})",
                    symbol(model, *c),
                    Coefficient::Approximate(*x).text()
                )
            })
            .collect();
        if !others.is_empty() {
            notes.push(format!(
                "E(MS[{}]) also carries {}: with sequential sums of squares it is adjusted only for the terms fitted before it, so its test is not of its own effects alone; sums_of_squares = \"type3\" tests each fixed term adjusted for the others",
                model.terms[i].label(s),
                others.join(", ")
            ));
        }
    }
    // Terms the removals left without df, and the tests lost with them.
    for (i, t) in model.terms.iter().enumerate() {
        let before = if i == residual {
            model.df(levels)[residual]
        } else {
            t.df(levels)
        };
        let label = t.label(s);
        let sequential = a.fit.sequential_df[i];
        let type3_short = a.fit.sums_of_squares == SumsOfSquares::Type3 && sequential > a.fit.df[i];
        if a.fit.df[i] > 0 || before == 0 {
            if type3_short {
                warnings.push(format!(
                    "with type III sums of squares {label} keeps {} of its {sequential} df: part of its type III hypothesis concerns cells with no observation (an empty cell), so that part cannot be tested; sequential sums of squares (sums_of_squares = \"sequential\") give it {sequential}",
                    a.fit.df[i]
                ));
            }
            continue;
        }
        let lost: Vec<String> = a
            .tests
            .iter()
            .enumerate()
            .filter_map(|(j, e)| {
                let e = e.as_ref()?;
                (e.verdict == Verdict::Untestable && e.isolated.contains(&i))
                    .then(|| model.terms[j].label(s))
            })
            .collect();
        let mut w = format!(
            "the removals leave {label} with no df (it had {before}): it has no mean square, so {}",
            if i == residual {
                "nothing can be tested over the residual".to_string()
            } else {
                format!("{label} cannot be tested")
            }
        );
        if !lost.is_empty() {
            w.push_str(&format!(
                ", and {} cannot be tested either, since {} variance is in {} expected mean square{}",
                lost.join(", "),
                if i == residual { "the residual" } else { "its" },
                if lost.len() == 1 { "its" } else { "their" },
                if lost.len() == 1 { "" } else { "s" }
            ));
        }
        if type3_short {
            w.push_str(&format!(
                "; with type III sums of squares its hypothesis concerns cells with no observation (an empty cell), while sequential sums of squares (sums_of_squares = \"sequential\") give it {sequential} df"
            ));
        } else {
            w.push_str("; keep more of those units, or remove fewer");
        }
        warnings.push(w);
    }
    (notes, warnings)
}

/// Runs the check of an unbalanced layout (the unrestricted convention), with power,
/// cost and repairs as for a balanced one.
pub fn check(
    layout: &Layout,
    plan: &PlanningValues,
    goal: &Goal,
) -> Result<CheckReport, crate::error::Error> {
    let a = Analysis::new(layout)?;
    let model = &a.design.model;
    let s = &layout.structure;
    let plans = plan_tests(model, &a.ems, &a.fit.df, &a.tests, plan, layout);
    let labels: Vec<String> = model.terms.iter().map(|t| t.label(s)).collect();
    let (notes, warnings) = notes_and_warnings(&a, layout);
    let mut findings = warnings;
    let terms = model
        .terms
        .iter()
        .enumerate()
        .map(|(i, t)| {
            let mut ems: Vec<Component> = a.ems.rows[i]
                .iter()
                .map(|&(c, x)| Component {
                    component: labels[c].clone(),
                    coefficient: Coefficient::Approximate(x),
                    exact: None,
                    symbol: symbol(model, c),
                })
                .collect();
            // Trade notation: σ² first, the term's own component last, the others by
            // growing coefficient.
            ems.sort_by(|x, y| {
                let own = |c: &Component| c.component == labels[i];
                let sigma = |c: &Component| c.component != "residual";
                (own(x), sigma(x))
                    .cmp(&(own(y), sigma(y)))
                    .then(x.coefficient.value().total_cmp(&y.coefficient.value()))
            });
            let test = a.tests[i].as_ref().map(|e| {
                let reason = explain(&a, layout, i);
                let exact_df =
                    (e.verdict == Verdict::Exact).then(|| a.fit.df[e.denominator[0].0] as f64);
                let outcome = Outcome {
                    verdict: e.verdict,
                    denominator_df: plans[i].and_then(|p| p.denominator_df).or(exact_df),
                    power: plans[i].and_then(|p| p.power),
                };
                let (repairs, reason) = review(
                    layout,
                    plan,
                    goal,
                    t.live,
                    &labels[i],
                    &outcome,
                    reason,
                    &mut findings,
                );
                TestReport {
                    verdict: e.verdict,
                    denominator: e
                        .denominator
                        .iter()
                        .map(|&(v, w)| DenominatorPart {
                            term: labels[v].clone(),
                            coefficient: Coefficient::Approximate(w),
                        })
                        .collect(),
                    denominator_df: plans[i].and_then(|p| p.denominator_df).or(exact_df),
                    power: plans[i].and_then(|p| p.power),
                    min_detectable: plans[i].and_then(|p| p.min_detectable),
                    reason,
                    repairs,
                }
            });
            TermReport {
                label: labels[i].clone(),
                live: t.live_names(s).iter().map(|n| n.to_string()).collect(),
                within: t.nest_names(s).iter().map(|n| n.to_string()).collect(),
                residual: t.is_residual(),
                kind: model.kinds[i],
                df: a.fit.df[i],
                ems,
                test,
            }
        })
        .collect();
    let full = layout.levels.observations();
    Ok(CheckReport {
        name: layout.name.clone(),
        convention: layout.structure.convention,
        observations: a.design.len() as u64,
        alpha: plan.alpha,
        target_power: plan.power,
        cost: cost(&a, layout, plan),
        planning_notes: planning_notes(model, plan),
        terms,
        findings,
        unbalanced: Some(Summary {
            sums_of_squares: layout.sums_of_squares,
            fit_order: a.fit.order.iter().map(|&t| labels[t].clone()).collect(),
            full_observations: full,
            removed_observations: full - a.design.len() as u64,
            removals: layout.removed.iter().map(|r| r.describe(s)).collect(),
            notes,
        }),
    })
}
