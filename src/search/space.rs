//! The candidate space: every structure the choices allow, and the level counts each
//! structure ranges over.
//!
//! A structure is one pick per `[[search.choice]]` (a nesting alternative, and for an
//! optional layer whether it is kept). Nesting picks are applied to the base layout first
//! (`variant::set_within`), then optional layers are left out (`variant::drop_factor`,
//! which moves the factors nested in a layer up to its nests and renumbers the planning
//! values). Picks that give the same structure are one structure.

use crate::layout::{Layout, Levels, Structure};
use crate::planning::PlanningValues;
use crate::term::Mask;
use crate::variant::{drop_factor, set_within};

use super::problem::Problem;

/// What a level-count dimension sets.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Target {
    /// A factor, by its index in the structure.
    Factor(usize),
    Replicates,
}

/// One dimension of a structure's level space: the values it ranges over, ascending.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Dim {
    pub target: Target,
    pub values: Vec<u64>,
}

/// One structure of the space.
#[derive(Debug, Clone)]
pub struct Variant {
    pub structure: Structure,
    /// Planning values renumbered for this structure.
    pub plan: PlanningValues,
    /// Base factor index -> index in this structure (`None`: left out).
    pub index: Vec<Option<usize>>,
    /// Base factors left out.
    pub left_out: Vec<usize>,
    /// Nesting picks: (base factor, base mask it is directly nested in).
    pub nesting: Vec<(usize, Mask)>,
    /// Level counts of the factors that are not searched, and the dimensions that are.
    pub template: Levels,
    pub dims: Vec<Dim>,
    /// In a layout of units: each treatment and the unit it is randomised to.
    pub randomised: Vec<(String, String)>,
    /// In a layout of units: the optional units this structure does without.
    pub without_units: Vec<String>,
    /// The capacity limits that apply here.
    pub limits: Vec<LimitMask>,
}

/// A capacity limit in one structure: the product of the level counts of `subscripts`
/// (`REPLICATE`: the replicates) is at most `at_most`.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct LimitMask {
    /// The limit's index in the problem.
    pub limit: usize,
    pub subscripts: Mask,
    pub at_most: u64,
}

impl Variant {
    /// Candidates in this structure: the product of the dimensions' sizes.
    pub fn size(&self) -> u128 {
        self.dims.iter().map(|d| d.values.len() as u128).product()
    }

    /// The level counts of a choice of one value index per dimension.
    pub fn levels_at(&self, picks: &[usize]) -> Levels {
        let mut levels = self.template.clone();
        for (d, &k) in self.dims.iter().zip(picks) {
            set(&mut levels, d.target, d.values[k]);
        }
        levels
    }

    /// "bench within light, cultivar; rack left out", in base names; in a layout of
    /// units, "light on chamber; no shelf" for the treatments with a choice of unit.
    pub fn describe(&self, base: &Structure, problem: &Problem) -> String {
        if let Some(space) = &problem.units {
            let mut parts: Vec<String> = self
                .randomised
                .iter()
                .filter(|(t, _)| space.has_choice(t))
                .map(|(t, u)| format!("{t} on {u}"))
                .collect();
            parts.extend(self.without_units.iter().map(|u| format!("no {u}")));
            return if parts.is_empty() {
                "as given".into()
            } else {
                parts.join("; ")
            };
        }
        let mut parts: Vec<String> = self
            .nesting
            .iter()
            .filter(|(f, _)| !self.left_out.contains(f))
            .map(|&(f, m)| {
                let name = &base.factors[f].name;
                if m == 0 {
                    format!("{name} crossed with the rest")
                } else {
                    format!("{name} within {}", base.names(m).join(", "))
                }
            })
            .collect();
        for &f in &self.left_out {
            parts.push(format!("no {}", base.factors[f].name));
        }
        if parts.is_empty() {
            "as given".into()
        } else {
            parts.join("; ")
        }
    }
}

pub fn set(levels: &mut Levels, target: Target, value: u64) {
    match target {
        Target::Factor(i) => levels.per_factor[i] = value,
        Target::Replicates => levels.replicates = value,
    }
}

pub fn get(levels: &Levels, target: Target) -> u64 {
    match target {
        Target::Factor(i) => levels.per_factor[i],
        Target::Replicates => levels.replicates,
    }
}

/// The capacity limits of a problem as masks of one structure's subscripts; a limit on
/// a unit (or relative to a unit) the structure does without does not apply.
pub fn limit_masks(problem: &Problem, s: &Structure) -> Vec<LimitMask> {
    let subscripts = |name: &str| -> Option<Mask> {
        if s.units.declared() {
            s.units.by_name(name).map(|u| u.ident)
        } else {
            s.factor_index(name)
                .map(|i| crate::layout::term_of(s, 1 << i).subscripts())
        }
    };
    problem
        .limits
        .iter()
        .enumerate()
        .filter_map(|(k, l)| {
            let own = subscripts(&l.unit)?;
            let mask = match &l.per {
                None => own,
                Some(p) => own & !subscripts(p)?,
            };
            Some(LimitMask {
                limit: k,
                subscripts: mask,
                at_most: l.at_most,
            })
        })
        .collect()
}

/// The structures of a problem, and the picks that gave no layout (with why).
pub fn variants(problem: &Problem) -> (Vec<Variant>, Vec<String>) {
    if let Some(space) = &problem.units {
        return space.variants(problem);
    }
    // Options per choice: (nesting pick, left out?).
    let options: Vec<Vec<(Option<Mask>, bool)>> = problem
        .choices
        .iter()
        .map(|c| {
            let nests: Vec<Option<Mask>> = if c.within.is_empty() {
                vec![None]
            } else {
                c.within.iter().map(|&m| Some(m)).collect()
            };
            let mut out = Vec::new();
            for &n in &nests {
                out.push((n, false));
            }
            if c.optional {
                // Left out, its nesting does not matter.
                out.push((nests[0], true));
            }
            out
        })
        .collect();
    let mut picks = vec![0usize; options.len()];
    let mut out: Vec<Variant> = Vec::new();
    let mut skipped = Vec::new();
    loop {
        match build(problem, &options, &picks) {
            Ok(v) => {
                if !out.iter().any(|o| o.structure == v.structure) {
                    out.push(v);
                }
            }
            Err(m) => {
                if !skipped.contains(&m) {
                    skipped.push(m);
                }
            }
        }
        // Next combination, last choice fastest.
        let mut k = options.len();
        loop {
            if k == 0 {
                return (out, skipped);
            }
            k -= 1;
            picks[k] += 1;
            if picks[k] < options[k].len() {
                break;
            }
            picks[k] = 0;
        }
    }
}

fn build(
    problem: &Problem,
    options: &[Vec<(Option<Mask>, bool)>],
    picks: &[usize],
) -> Result<Variant, String> {
    let base = &problem.base;
    let mut layout: Layout = base.clone();
    let mut nesting = Vec::new();
    let mut left_out = Vec::new();
    for (c, (&k, opts)) in problem.choices.iter().zip(picks.iter().zip(options)) {
        let (nest, out) = opts[k];
        if out {
            left_out.push(c.factor);
        } else if let Some(m) = nest {
            layout = set_within(&layout, c.factor, m).map_err(|e| {
                format!(
                    "{} within {}: {e}",
                    base.structure.factors[c.factor].name,
                    base.structure.names(m).join(", ")
                )
            })?;
            nesting.push((c.factor, m));
        }
    }
    let mut plan = problem.plan.clone();
    left_out.sort_unstable();
    // Highest first, so that each index is still the base's when it is dropped.
    for &f in left_out.iter().rev() {
        let (l, p, _) = drop_factor(&layout, &plan, f)
            .map_err(|e| format!("without {}: {e}", base.structure.factors[f].name))?;
        layout = l;
        plan = p;
    }
    let mut index = Vec::new();
    let mut next = 0;
    for f in 0..base.structure.factors.len() {
        if left_out.contains(&f) {
            index.push(None);
        } else {
            index.push(Some(next));
            next += 1;
        }
    }
    let mut dims = Vec::new();
    for (f, range) in problem.ranges.iter().enumerate() {
        if let (Some(r), Some(i)) = (range, index[f]) {
            dims.push(Dim {
                target: Target::Factor(i),
                values: r.values(),
            });
        }
    }
    dims.push(Dim {
        target: Target::Replicates,
        values: problem.replicates.values(),
    });
    let mut template = layout.levels.clone();
    for d in &dims {
        set(&mut template, d.target, d.values[0]);
    }
    let limits = limit_masks(problem, &layout.structure);
    Ok(Variant {
        structure: layout.structure,
        plan,
        index,
        left_out,
        nesting,
        template,
        dims,
        randomised: Vec::new(),
        without_units: Vec::new(),
        limits,
    })
}
