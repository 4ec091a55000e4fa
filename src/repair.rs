//! The cheapest single changes that would make a term meet its goal: testable at all,
//! and (when the goal says so) with enough denominator df and power.
//!
//! Each candidate change is applied to a copy of the layout and the term's test is
//! found again; a change is listed only when it really meets the goal. Changes of
//! material (more levels of a random factor, more replicates, a different nesting)
//! change what is bought; an omitted interaction changes what is assumed, and is marked
//! as an assumption with its risk.

use crate::engine::Analysis;
pub use crate::engine::Outcome;
use crate::errorterm::Verdict;
use crate::goal::Goal;
use crate::layout::{Kind, Layout};
use crate::planning::PlanningValues;
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
    pub fn apply(&self, layout: &Layout) -> Option<Layout> {
        let mut structure = layout.structure.clone();
        let mut levels = layout.levels.clone();
        match *self {
            Change::Levels { factor, to } => levels.per_factor[factor] = to,
            Change::Replicates { to } => levels.replicates = to,
            // Removals count units within nests, so a new nesting would move them.
            Change::Within { .. } if !layout.removed.is_empty() => return None,
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
    Analysis::for_term(layout, live).ok()?.outcome(plan, live)
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
    let Ok(base) = Analysis::for_term(layout, live) else {
        return Vec::new();
    };
    let base_cost = base.cost(plan).map(|c| c.total);
    let judge = |change: Change| -> Option<Repair> {
        let changed = Analysis::for_term(&change.apply(layout)?, live).ok()?;
        let o = changed.outcome(plan, live)?;
        meets(goal, &o).then(|| Repair {
            assumption: matches!(change, Change::Omit { .. }),
            cost_change: changed.cost(plan).zip(base_cost).map(|(c, b)| c.total - b),
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
    // A different nesting of a random factor: one nest more or one fewer. Not in a
    // layout of units, where the nesting is where the treatments were randomised.
    for (i, f) in s.factors.iter().enumerate() {
        if f.kind != Kind::Random || s.units.declared() {
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
    if let Some(t) = base.term(live) {
        for &(c, _) in &base.ems[t] {
            let u = base.model.terms[c];
            // A unit's own variation is never assumed away: that is pseudoreplication.
            if c != t
                && !u.is_residual()
                && u.live.count_ones() >= 2
                && !s.units.is_unit_term(u.live)
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
