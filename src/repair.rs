//! The cheapest single changes that would make a term meet its goal: testable at all,
//! and (when the goal says so) with enough denominator df and power.
//!
//! Each candidate change is applied to a copy of the layout and the term's test is
//! found again; a change is listed only when it really meets the goal. Changes of
//! material (more levels of a random factor, more replicates, a different nesting)
//! change what is bought; an omitted interaction changes what is assumed, and is marked
//! as an assumption with its risk.

use crate::ems::Model;
use crate::errorterm::{ErrorTerm, Verdict, error_term};
use crate::goal::Goal;
use crate::layout::{Kind, Layout, Structure};
use crate::planning::{PlanningValues, cost, plan_tests};
use crate::term::Mask;
use crate::variant::set_within;

/// The most extra levels or replicates a repair may ask for.
const MAX_EXTRA: u64 = 24;
/// The most repairs listed for one term.
const MAX_LISTED: usize = 5;

#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Change {
    /// Give factor `factor` this many levels (in each of its nests).
    Levels { factor: usize, to: u64 },
    /// Take this many replicates per cell.
    Replicates { to: u64 },
    /// Nest factor `factor` directly in `within` instead.
    Within { factor: usize, within: Mask },
    /// Assume this interaction (its live set) is absent.
    Omit { live: Mask },
}

/// How a term is tested in a layout: enough to judge it against a goal.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Outcome {
    pub verdict: Verdict,
    pub denominator_df: Option<f64>,
    pub power: Option<f64>,
}

#[derive(Debug, Clone, PartialEq)]
pub struct Repair {
    pub change: Change,
    pub outcome: Outcome,
    /// True when the change is an assumption about the model, not more material.
    pub assumption: bool,
    /// Cost after the change less cost before, when the layout is priced.
    pub cost_change: Option<f64>,
}

impl Change {
    pub fn describe(&self, structure: &Structure, before: &Layout) -> String {
        let names = |m: Mask| -> String {
            let v: Vec<&str> = structure
                .factors
                .iter()
                .enumerate()
                .filter(|(i, _)| m & (1 << i) != 0)
                .map(|(_, f)| f.name.as_str())
                .collect();
            if v.is_empty() {
                "nothing (crossed with everything)".into()
            } else {
                v.join(" and ")
            }
        };
        match self {
            Change::Levels { factor, to } => {
                let f = &structure.factors[*factor];
                let now = before.levels.per_factor[*factor];
                if f.within == 0 {
                    format!("use {to} levels of {} (now {now})", f.name)
                } else {
                    format!(
                        "use {to} levels of {} in each {} (now {now})",
                        f.name,
                        names(f.within)
                    )
                }
            }
            Change::Replicates { to } => {
                format!(
                    "take {to} replicates per cell (now {})",
                    before.levels.replicates
                )
            }
            Change::Within { factor, within } => {
                let f = &structure.factors[*factor];
                let added = within & !f.within;
                let removed = f.within & !within;
                if added != 0 {
                    format!(
                        "nest {} within {} as well (a separate {} for each level of {})",
                        f.name,
                        names(added),
                        f.name,
                        names(added)
                    )
                } else {
                    format!(
                        "cross {} with {} instead of nesting it there (only if every {} can take every level of {})",
                        f.name,
                        names(removed),
                        f.name,
                        names(removed)
                    )
                }
            }
            Change::Omit { live } => format!(
                "assume {} is absent",
                crate::layout::term_of(structure, *live).short_label(structure)
            ),
        }
    }

    pub fn apply(&self, layout: &Layout) -> Option<Layout> {
        let mut structure = layout.structure.clone();
        let mut levels = layout.levels.clone();
        match *self {
            Change::Levels { factor, to } => levels.per_factor[factor] = to,
            Change::Replicates { to } => levels.replicates = to,
            // Removals count units within nests, so a new nesting would move them.
            Change::Within { .. } if !layout.is_balanced() => return None,
            Change::Within { factor, within } => return set_within(layout, factor, within).ok(),
            Change::Omit { live } => structure.omitted.push(live),
        }
        let mut changed = Layout::new(layout.name.clone(), structure, levels).ok()?;
        changed.sums_of_squares = layout.sums_of_squares;
        changed.with_removals(layout.removed.clone()).ok()
    }
}

/// The test of the term with live set `live`, or `None` when the layout has no such term.
pub fn outcome(layout: &Layout, plan: &PlanningValues, live: Mask) -> Option<Outcome> {
    if !layout.is_balanced() {
        return crate::unbalanced::outcome(layout, plan, live);
    }
    let model = Model::new(&layout.structure);
    let t = model.terms.iter().position(|u| u.live == live)?;
    let ems = model.ems(&layout.levels).ok()?;
    let df = model.df(&layout.levels);
    let e = error_term(&model, &ems, &df, t);
    let verdict = e.verdict;
    let exact_df = (verdict == Verdict::Exact).then(|| df[e.denominator[0].0] as f64);
    let mut tests: Vec<Option<ErrorTerm>> = vec![None; model.terms.len()];
    tests[t] = Some(e);
    let planned = plan_tests(&model, &ems, &df, &tests, plan, &layout.levels)[t];
    Some(Outcome {
        verdict,
        denominator_df: planned.and_then(|p| p.denominator_df).or(exact_df),
        power: planned.and_then(|p| p.power),
    })
}

/// Whether an outcome meets the goal: testable (exactly, if the goal says so), with at
/// least `min_df` denominator df and `target_power` power where those are asked for.
pub fn meets(goal: &Goal, o: &Outcome) -> bool {
    let testable = if goal.exact_only {
        o.verdict == Verdict::Exact
    } else {
        o.verdict.is_testable()
    };
    let df_ok = goal
        .min_df
        .is_none_or(|m| o.denominator_df.is_some_and(|d| d >= m));
    let power_ok = goal
        .target_power
        .is_none_or(|p| o.power.is_some_and(|x| x >= p));
    testable && df_ok && power_ok
}

/// The single changes that make the term with live set `live` meet the goal, cheapest
/// first, changes of material before assumptions at equal cost.
pub fn repairs(layout: &Layout, plan: &PlanningValues, goal: &Goal, live: Mask) -> Vec<Repair> {
    let s = &layout.structure;
    let base_cost = plan.cost.as_ref().map(|c| cost(c, s, &layout.levels).total);
    let judge = |change: Change| -> Option<Repair> {
        let changed = change.apply(layout)?;
        let o = outcome(&changed, plan, live)?;
        meets(goal, &o).then(|| Repair {
            assumption: matches!(change, Change::Omit { .. }),
            cost_change: plan
                .cost
                .as_ref()
                .zip(base_cost)
                .map(|(c, b)| cost(c, &changed.structure, &changed.levels).total - b),
            change,
            outcome: o,
        })
    };
    let mut found: Vec<Repair> = Vec::new();
    // More of a random factor, or more replicates: the smallest increase that works.
    for (i, f) in s.factors.iter().enumerate() {
        if f.kind != Kind::Random {
            continue;
        }
        let now = layout.levels.per_factor[i];
        let ceiling = f.population.unwrap_or(u64::MAX).min(now + MAX_EXTRA);
        if let Some(r) = (now + 1..=ceiling).find_map(|to| judge(Change::Levels { factor: i, to }))
        {
            found.push(r);
        }
    }
    let r = layout.levels.replicates;
    if let Some(rep) = (r + 1..=r + MAX_EXTRA).find_map(|to| judge(Change::Replicates { to })) {
        found.push(rep);
    }
    // A different nesting of a random factor: one nest more or one fewer.
    for (i, f) in s.factors.iter().enumerate() {
        if f.kind != Kind::Random {
            continue;
        }
        for j in 0..s.factors.len() {
            if j == i {
                continue;
            }
            let within = f.within ^ (1 << j);
            if let Some(rep) = judge(Change::Within { factor: i, within }) {
                found.push(rep);
            }
        }
    }
    // Assumptions: an interaction in the term's expected mean square assumed absent.
    let model = Model::new(s);
    if let Some(t) = model.terms.iter().position(|u| u.live == live)
        && let Ok(ems) = model.ems(&layout.levels)
    {
        for &(c, _) in &ems.rows[t] {
            let u = model.terms[c];
            if c != t
                && !u.is_residual()
                && u.live.count_ones() >= 2
                && let Some(rep) = judge(Change::Omit { live: u.live })
            {
                found.push(rep);
            }
        }
    }
    found.sort_by(|a, b| {
        let key = |r: &Repair| (r.assumption, r.cost_change.unwrap_or(0.0));
        let (aa, ac) = key(a);
        let (ba, bc) = key(b);
        ac.total_cmp(&bc).then(aa.cmp(&ba))
    });
    found.truncate(MAX_LISTED);
    found
}
