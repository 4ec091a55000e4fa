//! Single changes to a layout that would make an untestable term testable.
//!
//! Each candidate change is applied to a copy of the layout and the term's error term is
//! found again; a change is listed only when it really makes the test exist. Changes of
//! replication (one more level of a factor that has one, a second replicate) change what
//! is bought; an omitted interaction changes what is assumed, and is marked as such.

use crate::ems::Model;
use crate::errorterm::{Verdict, error_term};
use crate::layout::{Layout, Structure};
use crate::term::{Mask, Term};

#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Change {
    /// Give factor `factor` this many levels.
    Levels { factor: usize, to: u64 },
    /// Take this many replicates per cell.
    Replicates { to: u64 },
    /// Assume this interaction (its live set) is absent.
    Omit { live: Mask },
}

#[derive(Debug, Clone, PartialEq)]
pub struct Repair {
    pub change: Change,
    /// The verdict the term gets after the change.
    pub verdict: Verdict,
    /// True when the change is an assumption about the model, not more material.
    pub assumption: bool,
}

impl Change {
    pub fn describe(&self, structure: &Structure) -> String {
        match self {
            Change::Levels { factor, to } => {
                let f = &structure.factors[*factor];
                if f.within == 0 {
                    format!("use {to} levels of {}", f.name)
                } else {
                    format!("use {to} levels of {} in each of its nests", f.name)
                }
            }
            Change::Replicates { to } => format!("take {to} replicates per cell"),
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
            Change::Omit { live } => structure.omitted.push(live),
        }
        Layout::new(layout.name.clone(), structure, levels).ok()
    }
}

/// The single changes that would make `term` testable, replication first.
pub fn repairs(layout: &Layout, term: Term) -> Vec<Repair> {
    let structure = &layout.structure;
    let mut changes: Vec<Change> = Vec::new();
    for (i, &n) in layout.levels.per_factor.iter().enumerate() {
        if n == 1 {
            changes.push(Change::Levels { factor: i, to: 2 });
        }
    }
    if layout.levels.replicates == 1 {
        changes.push(Change::Replicates { to: 2 });
    }
    // Interactions that carry a component of the term's expected mean square.
    let model = Model::new(structure);
    if let Some(t) = model.terms.iter().position(|u| *u == term)
        && let Ok(ems) = model.ems(&layout.levels)
    {
        for &(c, _) in &ems.rows[t] {
            let u = model.terms[c];
            if c != t && !u.is_residual() && u.live.count_ones() >= 2 {
                changes.push(Change::Omit { live: u.live });
            }
        }
    }
    changes
        .into_iter()
        .filter_map(|change| {
            let changed = change.apply(layout)?;
            let model = Model::new(&changed.structure);
            let t = model.terms.iter().position(|u| *u == term)?;
            let ems = model.ems(&changed.levels).ok()?;
            let df = model.df(&changed.levels);
            let verdict = error_term(&model, &ems, &df, t).verdict;
            verdict.is_testable().then(|| Repair {
                assumption: matches!(change, Change::Omit { .. }),
                change,
                verdict,
            })
        })
        .collect()
}
