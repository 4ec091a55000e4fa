//! The `check` job: every term's df, expected mean square, error term and verdict, with
//! power and cost under the planning values and repairs against the goal, gathered into
//! a `CheckReport` (see `findings`) that the renderers print.

use crate::engine::{Analysis, Outcome};
use crate::error::Error;
use crate::errorterm::{Verdict, weight_text};
pub use crate::findings::{BothReport, CheckReport, TermReport, TestReport};
use crate::findings::{
    Carried, ChangeReport, Component, DenominatorPart, EmptyCells, Gap, Isolated, PlanningGaps,
    Pooled, PseudoCause, Pseudoreplication, Reason, RepairReport, Shortfall, Strata, Stratum,
    Summary, Unit, Warning,
};
use crate::goal::Goal;
use crate::layout::{Convention, Kind, Layout, SumsOfSquares};
use crate::planning::PlanningValues;
use crate::repair::{Change, Repair, meets, repairs};
use crate::term::Mask;

/// Runs the check of a layout under a convention, with power and cost where planning
/// values are given.
pub fn check(
    layout: &Layout,
    convention: Convention,
    plan: &PlanningValues,
) -> Result<CheckReport, Error> {
    check_with_goal(layout, convention, plan, &Goal::default())
}

/// Both conventions side by side (a balanced layout).
pub fn check_both(
    layout: &Layout,
    plan: &PlanningValues,
    goal: &Goal,
) -> Result<BothReport, Error> {
    Ok(BothReport::new(
        check_with_goal(layout, Convention::Restricted, plan, goal)?,
        check_with_goal(layout, Convention::Unrestricted, plan, goal)?,
    ))
}

/// The check, with repairs listed for every term the goal covers that misses it
/// (untestable, or below the goal's df or power).
pub fn check_with_goal(
    layout: &Layout,
    convention: Convention,
    plan: &PlanningValues,
    goal: &Goal,
) -> Result<CheckReport, Error> {
    let mut layout = layout.clone();
    if !layout.defines(convention) {
        return Err(Error::invalid(None, crate::layout::RESTRICTED_UNBALANCED));
    }
    layout.structure.convention = convention;
    let a = Analysis::new(&layout)?;
    Ok(report_of(&a, plan, goal))
}

/// The report of an analysis already built.
pub fn report_of(a: &Analysis, plan: &PlanningValues, goal: &Goal) -> CheckReport {
    let layout = &a.layout;
    let s = &layout.structure;
    let model = &a.model;
    let plans = a.plans(plan);
    let terms = model
        .terms
        .iter()
        .enumerate()
        .map(|(i, t)| {
            let mut ems: Vec<Component> = a.ems[i]
                .iter()
                .map(|&(c, coefficient)| {
                    let u = model.terms[c];
                    Component {
                        id: u.live,
                        component: u.label(s),
                        short_label: u.short_label(s),
                        kind: model.kinds[c],
                        residual: u.is_residual(),
                        coefficient,
                        exact: coefficient
                            .exact()
                            .filter(|r| !r.is_integer())
                            .map(|r| weight_text(&r)),
                    }
                })
                .collect();
            // The trade's order: σ² first, then by growing coefficient (the smallest unit
            // up), the term's own component last.
            ems.sort_by(|x, y| {
                let own = |c: &Component| c.id == t.live;
                (own(x), !x.residual)
                    .cmp(&(own(y), !y.residual))
                    .then(x.coefficient.value().total_cmp(&y.coefficient.value()))
            });
            let test = a.tests[i].as_ref().map(|e| {
                let planned = plans[i];
                let outcome = Outcome {
                    verdict: e.verdict,
                    denominator_df: planned.and_then(|p| p.denominator_df),
                    power: planned.and_then(|p| p.power),
                };
                let (shortfall, repairs) = review(layout, plan, goal, t.live, &outcome);
                TestReport {
                    verdict: e.verdict,
                    denominator: e
                        .denominator
                        .iter()
                        .map(|&(v, w)| DenominatorPart {
                            id: model.terms[v].live,
                            term: model.terms[v].label(s),
                            coefficient: w,
                        })
                        .collect(),
                    denominator_df: outcome.denominator_df,
                    power: outcome.power,
                    min_detectable: planned.and_then(|p| p.min_detectable),
                    reason: reason(a, i),
                    shortfall,
                    repairs,
                }
            });
            TermReport {
                id: t.live,
                label: t.label(s),
                short_label: t.short_label(s),
                of_interest: !t.is_residual() && goal.covers(t.live),
                same_as: s
                    .units
                    .alias(t.live)
                    .filter(|_| !t.is_residual())
                    .map(|_| t.interaction_label(s)),
                stratum: s
                    .units
                    .stratum(t.subscripts())
                    .map(|u| s.units.list[u].name.clone()),
                live: t.live_names(s).iter().map(|n| n.to_string()).collect(),
                within: t.nest_names(s).iter().map(|n| n.to_string()).collect(),
                residual: t.is_residual(),
                kind: model.kinds[i],
                df: a.df[i],
                ems,
                test,
            }
        })
        .collect();
    CheckReport {
        name: layout.name.clone(),
        convention: s.convention,
        observations: a.observations,
        alpha: plan.alpha,
        target_power: plan.power,
        cost: a.cost(plan),
        planning_gaps: planning_gaps(a, plan),
        terms,
        warnings: warnings(a),
        unbalanced: summary(a),
        strata: strata(a, goal),
    }
}

/// The strata of a layout of units: each unit, its df and what is estimated in it, what
/// additivity pools, and the treatment terms tested over smaller units than their own.
fn strata(a: &Analysis, goal: &Goal) -> Option<Strata> {
    let layout = &a.layout;
    let s = &layout.structure;
    let units = &s.units;
    if !units.declared() {
        return None;
    }
    let model = &a.model;
    let lv = &layout.levels;
    let names = |list: &[usize]| -> Vec<String> {
        list.iter().map(|&u| units.list[u].name.clone()).collect()
    };
    let factor_names =
        |m: Mask| -> Vec<String> { s.names(m).iter().map(|n| n.to_string()).collect() };
    // Largest units first: by how many factors pick out one unit.
    let mut order: Vec<usize> = (0..units.list.len()).collect();
    order.sort_by_key(|&u| (units.list[u].ident.count_ones(), u));
    let stratum_of = |t: usize| units.stratum(model.terms[t].subscripts());
    // The unit's own term in the model (none when it is assumed absent).
    let own_term = |u: &crate::layout::Unit| model.terms.iter().position(|t| t.live == u.live());
    let list = order
        .iter()
        .map(|&u| {
            let unit = &units.list[u];
            let in_it: Vec<usize> = (0..model.terms.len())
                .filter(|&t| stratum_of(t) == Some(u))
                .collect();
            let own = own_term(unit);
            let mut terms: Vec<String> = Vec::new();
            if let Some(o) = own {
                terms.push(model.terms[o].label(s));
            }
            for &t in &in_it {
                if Some(t) != own {
                    terms.push(model.terms[t].label(s));
                }
            }
            let below_carries = units.list.iter().any(|v| {
                v.ident & unit.ident == unit.ident && v.ident != unit.ident && v.carries != 0
            });
            Stratum {
                unit: unit.name.clone(),
                count: units.count(u, &lv.per_factor, lv.replicates),
                within: names(&unit.within),
                total: units.total(u, &lv.per_factor, lv.replicates),
                carries: factor_names(unit.carries),
                term: own.map_or_else(
                    || crate::layout::term_of(s, unit.live()).interaction_label(s),
                    |o| model.terms[o].label(s),
                ),
                same_as: match unit.place {
                    crate::layout::Place::Term(live) => {
                        Some(crate::layout::term_of(s, live).interaction_label(s))
                    }
                    _ => None,
                },
                smallest: unit.place == crate::layout::Place::Residual,
                subsample: unit.carries == 0 && unit.within.len() < 2 && !below_carries && {
                    // Below a unit that carries a treatment.
                    units.list.iter().any(|v| {
                        v.carries != 0 && unit.ident & v.ident == v.ident && v.ident != unit.ident
                    })
                },
                df: in_it.iter().map(|&t| a.df[t]).sum(),
                terms,
            }
        })
        .collect();
    let pooled = model
        .omitted
        .iter()
        .zip(&model.pooled_into)
        .filter(|(o, _)| units.pooled.contains(&o.live))
        .map(|(o, &t)| Pooled {
            term: o.label(s),
            into: model.terms[t].label(s),
        })
        .collect();
    let mut pseudo = Vec::new();
    for (t, term) in model.terms.iter().enumerate() {
        if term.is_residual() || !units.is_treatment_term(term.subscripts()) {
            continue;
        }
        if !goal.covers(term.live) {
            continue;
        }
        let Some(u) = stratum_of(t) else { continue };
        let unit = &units.list[u];
        let tested_over: Vec<String> = a.tests[t]
            .as_ref()
            .map(|e| {
                e.denominator
                    .iter()
                    .map(|&(v, _)| model.terms[v].label(s))
                    .collect()
            })
            .unwrap_or_default();
        let cause = match own_term(unit) {
            None if unit.place != crate::layout::Place::Residual => {
                let unit_term = crate::layout::term_of(s, unit.live()).interaction_label(s);
                if s.units.merged == Some(unit.live()) {
                    continue;
                }
                Some(PseudoCause::UnitOmitted { unit_term })
            }
            Some(o) if a.df[o] == 0 && matches!(unit.place, crate::layout::Place::Factor(_)) => {
                let count = units.count(u, &lv.per_factor, lv.replicates);
                Some(PseudoCause::OneUnitPerLevel {
                    count,
                    within: names(&unit.within),
                    fix_count: count * 2,
                })
            }
            _ => None,
        };
        if let Some(cause) = cause {
            pseudo.push(Pseudoreplication {
                id: term.live,
                term: term.label(s),
                unit: unit.name.clone(),
                cause,
                tested_over,
            });
        }
    }
    Some(Strata {
        strata: list,
        additive: units.additive,
        pooled,
        pseudoreplication: pseudo,
    })
}

/// What the planning values leave out.
pub(crate) fn planning_gaps(a: &Analysis, plan: &PlanningValues) -> PlanningGaps {
    let model = &a.model;
    let s = &model.structure;
    if !plan.has_priors() {
        return PlanningGaps {
            no_sd: true,
            ..PlanningGaps::default()
        };
    }
    let labels = |kind: Kind, given: &dyn Fn(Mask) -> bool| -> Vec<String> {
        model
            .terms
            .iter()
            .zip(&model.kinds)
            .filter(|(t, k)| **k == kind && !given(t.live))
            .map(|(t, _)| t.label(s))
            .collect()
    };
    PlanningGaps {
        no_sd: false,
        zero_sd: labels(Kind::Random, &|l| plan.priors.contains_key(&l)),
        no_effect: labels(Kind::Fixed, &|l| plan.effects.contains_key(&l)),
    }
}

/// Why a term is not simply tested; `None` for an exact test.
fn reason(a: &Analysis, t: usize) -> Option<Reason> {
    let layout = &a.layout;
    let s = &layout.structure;
    let model = &a.model;
    let e = a.tests[t].as_ref()?;
    let unbalanced = a.synthesis.is_some();
    match e.verdict {
        Verdict::Exact => None,
        Verdict::QuasiF => Some(Reason::QuasiF),
        Verdict::NotEstimable => {
            let full = model.terms[t].df(&layout.levels);
            let sequential = a.sequential_df()[t];
            Some(Reason::NoDf {
                one_level: if unbalanced {
                    Vec::new()
                } else {
                    one_level_factors(layout, model.terms[t].live)
                },
                full_layout_df: unbalanced.then_some(full),
                sequential_df: (a.sums_of_squares() == Some(SumsOfSquares::Type3)
                    && sequential > 0
                    && full > 0)
                    .then_some(sequential),
            })
        }
        Verdict::Untestable if e.isolated.is_empty() => Some(Reason::NoCombination),
        Verdict::Untestable => Some(Reason::Confounded {
            components: e
                .isolated
                .iter()
                .map(|&c| {
                    let u = model.terms[c];
                    let cause = if a.df[c] > 0 {
                        crate::findings::Cause::NowhereElse
                    } else if unbalanced {
                        crate::findings::Cause::ZeroDfAfterRemovals
                    } else {
                        crate::findings::Cause::ZeroDf {
                            one_level: one_level_factors(layout, u.live),
                        }
                    };
                    Isolated {
                        id: u.live,
                        component: u.label(s),
                        short_label: u.short_label(s),
                        kind: model.kinds[c],
                        residual: u.is_residual(),
                        cause,
                    }
                })
                .collect(),
        }),
    }
}

/// The live factors of a term that have one level in each nest.
fn one_level_factors(layout: &Layout, live: Mask) -> Vec<String> {
    layout
        .structure
        .factors
        .iter()
        .enumerate()
        .filter(|(i, _)| live & (1 << i) != 0 && layout.levels.per_factor[*i] == 1)
        .map(|(_, f)| f.name.clone())
        .collect()
}

/// Holds a term's test to the goal: when it falls short, how, and the cheapest repairs.
pub(crate) fn review(
    layout: &Layout,
    plan: &PlanningValues,
    goal: &Goal,
    live: Mask,
    outcome: &Outcome,
) -> (Option<Shortfall>, Vec<RepairReport>) {
    let wanted = outcome.verdict != Verdict::NotEstimable && goal.covers(live);
    if !wanted || meets(goal, outcome) {
        return (None, Vec::new());
    }
    let found: Vec<RepairReport> = repairs(layout, plan, goal, live)
        .iter()
        .map(|r| repair_report(layout, r))
        .collect();
    let shortfall = outcome
        .verdict
        .is_testable()
        .then(|| shortfall(goal, outcome));
    (shortfall, found)
}

fn shortfall(goal: &Goal, o: &Outcome) -> Shortfall {
    Shortfall {
        needs_exact: goal.exact_only && o.verdict != Verdict::Exact,
        denominator_df: goal
            .min_df
            .filter(|&m| o.denominator_df.is_none_or(|d| d < m))
            .map(|want| Gap {
                have: o.denominator_df,
                want,
            }),
        power: goal
            .target_power
            .filter(|&p| o.power.is_none_or(|x| x < p))
            .map(|want| Gap {
                have: o.power,
                want,
            }),
    }
}

/// A repair as data: the change with its values before and after, and what it gives.
pub(crate) fn repair_report(layout: &Layout, r: &Repair) -> RepairReport {
    let s = &layout.structure;
    let names = |m: Mask| -> Vec<String> { s.names(m).iter().map(|n| n.to_string()).collect() };
    let change = match r.change {
        Change::Levels { factor, to } => ChangeReport::Levels {
            factor: s.factors[factor].name.clone(),
            within: names(s.factors[factor].within),
            from: layout.levels.per_factor[factor],
            to,
            unit: s.units.is_unit_term(1 << factor),
        },
        Change::Replicates { to } => ChangeReport::Replicates {
            from: layout.levels.replicates,
            to,
            unit: s.units.alias(crate::term::REPLICATE).map(str::to_string),
        },
        Change::Within { factor, within } => ChangeReport::Within {
            factor: s.factors[factor].name.clone(),
            from: names(s.factors[factor].within),
            to: names(within),
        },
        Change::Omit { live } => ChangeReport::Omit {
            term: crate::layout::term_of(s, live).short_label(s),
        },
    };
    RepairReport {
        change,
        verdict: r.outcome.verdict,
        denominator_df: r.outcome.denominator_df,
        power: r.outcome.power,
        cost_change: r.cost_change,
        assumption: r.assumption,
    }
}

/// What the removals leave of each term's df, for an unbalanced layout.
fn warnings(a: &Analysis) -> Vec<Warning> {
    let Some(syn) = &a.synthesis else {
        return Vec::new();
    };
    let model = &a.model;
    let s = &a.layout.structure;
    let levels = &a.layout.levels;
    let residual = model.residual();
    let type3 = syn.fit.sums_of_squares == SumsOfSquares::Type3;
    let full_df = model.df(levels);
    let mut out = Vec::new();
    for (i, t) in model.terms.iter().enumerate() {
        let before = full_df[i];
        let term = t.label(s);
        let sequential = syn.fit.sequential_df[i];
        let type3_short = type3 && sequential > a.df[i];
        if a.df[i] > 0 || before == 0 {
            if type3_short {
                out.push(Warning::Type3Short {
                    term,
                    kept: a.df[i],
                    sequential_df: sequential,
                });
            }
            continue;
        }
        let lost = a
            .tests
            .iter()
            .enumerate()
            .filter_map(|(j, e)| {
                let e = e.as_ref()?;
                (e.verdict == Verdict::Untestable && e.isolated.contains(&i))
                    .then(|| model.terms[j].label(s))
            })
            .collect();
        out.push(Warning::LostDf {
            term,
            residual: i == residual,
            full_layout_df: before,
            lost,
            sequential_df: type3_short.then_some(sequential),
        });
    }
    out
}

/// What an unbalanced layout adds to the report: the removals, the method, and what
/// follows from them.
fn summary(a: &Analysis) -> Option<Summary> {
    let syn = a.synthesis.as_ref()?;
    let layout = &a.layout;
    let model = &a.model;
    let s = &layout.structure;
    let residual = model.residual();
    let design = &syn.design;
    let mut emptied_units = Vec::new();
    for (i, t) in model.terms[..residual].iter().enumerate() {
        if t.live.count_ones() != 1 || model.kinds[i] != Kind::Random {
            continue;
        }
        let f = t.live.trailing_zeros() as usize;
        let grid = design.grid(i);
        for (cell, n) in design.term_counts(i).iter().enumerate() {
            if *n > 0.0 {
                continue;
            }
            // The cell's levels over the term's subscripts (mixed radix, first slowest).
            let mut rest = cell;
            let mut at = vec![0usize; grid.sizes.len()];
            for k in (0..grid.sizes.len()).rev() {
                at[k] = rest % grid.sizes[k];
                rest /= grid.sizes[k];
            }
            let mut unit = Unit {
                factor: s.factors[f].name.clone(),
                level: 0,
                within: Vec::new(),
            };
            for (k, &g) in grid.subscripts.iter().enumerate() {
                if g == f {
                    unit.level = at[k] as u64 + 1;
                } else {
                    unit.within
                        .push((s.factors[g].name.clone(), at[k] as u64 + 1));
                }
            }
            emptied_units.push(unit);
        }
    }
    let empty_cells = model.terms[..residual]
        .iter()
        .enumerate()
        .filter(|(i, t)| model.kinds[*i] == Kind::Fixed && t.live.count_ones() >= 2)
        .filter_map(|(i, t)| {
            let cells = design.grid(i).cells() as u64;
            let occupied = design.occupied_cells(i) as u64;
            (occupied < cells).then(|| EmptyCells {
                term: t.label(s),
                empty: cells - occupied,
                cells,
            })
        })
        .collect();
    let carried = a.ems[..residual]
        .iter()
        .enumerate()
        .filter(|(i, _)| model.kinds[*i] == Kind::Fixed)
        .filter_map(|(i, row)| {
            let components: Vec<(String, f64)> = row
                .iter()
                .filter(|(c, _)| *c != i && *c != residual && model.kinds[*c] == Kind::Fixed)
                .map(|(c, x)| (model.terms[*c].short_label(s), x.value()))
                .collect();
            (!components.is_empty()).then(|| Carried {
                term: model.terms[i].label(s),
                components,
            })
        })
        .collect();
    let full = layout.levels.observations();
    Some(Summary {
        sums_of_squares: syn.fit.sums_of_squares,
        fit_order: syn
            .fit
            .order
            .iter()
            .map(|&t| model.terms[t].label(s))
            .collect(),
        full_observations: full,
        removed_observations: full - a.observations,
        removals: layout.removed.iter().map(|r| r.describe(s)).collect(),
        emptied_units,
        empty_cells,
        carried,
    })
}
