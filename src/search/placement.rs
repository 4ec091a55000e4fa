//! The search space of a layout of units: where each treatment is randomised, which
//! units the layout may do without, and how many units of each kind.
//!
//! Each arrangement is written back as a layout file of units (the user's own tables with
//! the picks applied) and built by `Layout::from_spec`, so every structure the search
//! screens is one `emsplan check` would build from such a file. A unit's count in
//! `[search.levels]` is its count per member of the units it is within, as in the file;
//! the model counts units per combination of the treatments randomised to them, so a
//! count that is not a multiple of those combinations is no candidate. Whether a unit
//! (below the top) has one member or several per combination changes the structure (one
//! member per combination is an interaction of the model, several are a random factor),
//! so the two are separate structures; so is each level count of a treatment whose
//! levels are searched, as it changes what the counts mean.

use std::collections::BTreeMap;

use toml::Spanned;

use crate::error::Error;
use crate::layout::{Layout, Place};
use crate::planning::PlanningValues;
use crate::spec::{self, Names, Spec};

use super::problem::{Problem, Range};
use super::space::{Dim, Target, Variant};

/// More structures than this stop the search before it builds them.
pub const MAX_STRUCTURES: usize = 4096;

/// A treatment's alternative units.
#[derive(Debug, Clone)]
pub struct Placement {
    /// The treatment, by its index among the file's `[[treatment]]` tables.
    pub treatment: usize,
    pub units: Vec<String>,
}

/// What a search over a layout of units may change, as the user wrote it.
#[derive(Debug, Clone)]
pub struct UnitSpace {
    spec: Spec,
    text: String,
    pub placements: Vec<Placement>,
    /// Units that may be left out, by index among the `[[unit]]` tables.
    pub optional: Vec<usize>,
    /// Count ranges (per member of the units above) by unit index.
    pub counts: Vec<(usize, Range)>,
    /// Level ranges by treatment index.
    pub levels: Vec<(usize, Range)>,
}

fn unit_names(spec: &Spec) -> Vec<String> {
    spec.unit
        .iter()
        .map(|u| u.get_ref().name.get_ref().trim().to_string())
        .collect()
}

fn treatment_names(spec: &Spec) -> Vec<String> {
    spec.treatment
        .iter()
        .map(|t| t.get_ref().name.get_ref().trim().to_string())
        .collect()
}

/// Whether unit `u` is within unit `p`, directly or through other units.
pub fn is_within(spec: &Spec, u: usize, p: usize) -> bool {
    let names = unit_names(spec);
    let mut stack = vec![u];
    let mut seen = vec![false; names.len()];
    while let Some(x) = stack.pop() {
        if std::mem::replace(&mut seen[x], true) {
            continue;
        }
        if let Some(w) = &spec.unit[x].get_ref().within {
            for name in w.get_ref().list() {
                if let Some(j) = names.iter().position(|n| n == name.trim()) {
                    if j == p {
                        return true;
                    }
                    stack.push(j);
                }
            }
        }
    }
    false
}

impl UnitSpace {
    /// Reads the parts of `[search]` that belong to a layout of units. `levels` are the
    /// `[search.levels]` entries, already checked as ranges, by name.
    pub fn read(
        spec: &Spec,
        text: &str,
        levels: Vec<(String, Range, Option<usize>)>,
    ) -> Result<UnitSpace, Error> {
        let at = |span: std::ops::Range<usize>| Some(spec::line_of(text, span.start));
        let search = spec.search.as_ref();
        let units = unit_names(spec);
        let treatments = treatment_names(spec);
        let known_units = units.join(", ");

        let mut placements: Vec<Placement> = Vec::new();
        for p in search.map_or(&[][..], |s| &s.placement[..]) {
            let line = at(p.span());
            let p = p.get_ref();
            let name = p.treatment.get_ref().trim();
            let t = treatments.iter().position(|x| x == name).ok_or_else(|| {
                Error::invalid(
                    at(p.treatment.span()),
                    format!(
                        "[[search.placement]] treatment \"{name}\" is not a treatment (known: {})",
                        treatments.join(", ")
                    ),
                )
            })?;
            if placements.iter().any(|x| x.treatment == t) {
                return Err(Error::invalid(
                    line,
                    format!(
                        "[[search.placement]] \"{name}\" has two placement tables: list all its units in one"
                    ),
                ));
            }
            let mut alternatives: Vec<String> = Vec::new();
            for u in p.randomised_to.get_ref() {
                let u = u.trim().to_string();
                if !units.contains(&u) {
                    return Err(Error::invalid(
                        at(p.randomised_to.span()),
                        format!(
                            "[[search.placement]] \"{name}\": \"{u}\" is not a unit (known: {known_units})"
                        ),
                    ));
                }
                if alternatives.contains(&u) {
                    return Err(Error::invalid(
                        at(p.randomised_to.span()),
                        format!("[[search.placement]] \"{name}\" lists \"{u}\" twice"),
                    ));
                }
                alternatives.push(u);
            }
            if alternatives.len() < 2 {
                return Err(Error::invalid(
                    at(p.randomised_to.span()),
                    format!(
                        "[[search.placement]] \"{name}\": randomised_to must list at least two units to choose between (the file's own `randomised_to` is used when there is no choice)"
                    ),
                ));
            }
            placements.push(Placement {
                treatment: t,
                units: alternatives,
            });
        }

        let mut optional: Vec<usize> = Vec::new();
        for o in search.map_or(&[][..], |s| &s.optional_units[..]) {
            let line = at(o.span());
            let name = o.get_ref().trim();
            let u = units.iter().position(|x| x == name).ok_or_else(|| {
                Error::invalid(
                    line,
                    format!(
                        "[search] optional_units: \"{name}\" is not a unit (known: {known_units})"
                    ),
                )
            })?;
            if optional.contains(&u) {
                return Err(Error::invalid(
                    line,
                    format!("[search] optional_units lists \"{name}\" twice"),
                ));
            }
            let smallest = !spec.unit.iter().any(|x| {
                x.get_ref()
                    .within
                    .as_ref()
                    .is_some_and(|w| w.get_ref().list().iter().any(|n| n.trim() == name))
            });
            if smallest {
                return Err(Error::invalid(
                    line,
                    format!(
                        "[search] optional_units: \"{name}\" is the smallest unit, where the observations are made, so the layout cannot do without it"
                    ),
                ));
            }
            optional.push(u);
        }

        let mut counts = Vec::new();
        let mut level_ranges = Vec::new();
        for (name, range, line) in levels {
            if let Some(u) = units.iter().position(|x| *x == name) {
                counts.push((u, range));
            } else if let Some(t) = treatments.iter().position(|x| *x == name) {
                let ts = spec.treatment[t].get_ref();
                let fixed = !matches!(
                    ts.kind.as_ref().map(|k| *k.get_ref()),
                    Some(spec::KindSpec::Random)
                );
                if fixed && range.lo < 2 {
                    return Err(Error::invalid(
                        line,
                        format!(
                            "[search.levels] \"{name}\" = [{}, {}] starts below 2: \"{name}\" is fixed, and a fixed treatment needs at least 2 levels to compare anything",
                            range.lo, range.hi
                        ),
                    ));
                }
                if let Some(p) = &ts.population
                    && range.hi > (*p.get_ref()).max(0) as u64
                {
                    return Err(Error::invalid(
                        line,
                        format!(
                            "[search.levels] \"{name}\" reaches {} levels, but they are drawn from a population of {}: keep the range within the population",
                            range.hi,
                            p.get_ref()
                        ),
                    ));
                }
                level_ranges.push((t, range));
            } else if name == "replicates" {
                return Err(Error::invalid(
                    line,
                    "[search.levels] \"replicates\" is not used with units: give the range of the smallest unit's count instead, by its name",
                ));
            } else {
                return Err(Error::invalid(
                    line,
                    format!(
                        "[search.levels] \"{name}\" is not a unit or a treatment (known: {})",
                        units
                            .iter()
                            .chain(&treatments)
                            .cloned()
                            .collect::<Vec<_>>()
                            .join(", ")
                    ),
                ));
            }
        }

        // The largest candidate must fit in 64-bit counts: the observations are the
        // product of every unit's count.
        let mut largest: Option<u64> = Some(1);
        for (u, us) in spec.unit.iter().enumerate() {
            let n = counts
                .iter()
                .find(|(x, _)| *x == u)
                .map_or((*us.get_ref().count.get_ref()).max(1) as u64, |(_, r)| r.hi);
            largest = largest.and_then(|x| x.checked_mul(n));
        }
        if largest.is_none() {
            return Err(Error::invalid(
                None,
                "[search.levels]: the largest layout in these ranges has more observations than fit in a 64-bit count: narrow the ranges",
            ));
        }

        let space = UnitSpace {
            spec: spec.clone(),
            text: text.to_string(),
            placements,
            optional,
            counts,
            levels: level_ranges,
        };
        let n = space.arrangements();
        if n > MAX_STRUCTURES as u128 {
            return Err(Error::invalid(
                None,
                format!(
                    "[search]: the placements, optional units and searched treatment levels make {n} arrangements, more than the {MAX_STRUCTURES} the search builds: offer fewer alternatives, or fix the levels of a treatment"
                ),
            ));
        }
        Ok(space)
    }

    /// Whether the search chooses the unit of this treatment.
    pub fn has_choice(&self, treatment: &str) -> bool {
        let names = treatment_names(&self.spec);
        self.placements
            .iter()
            .any(|p| names[p.treatment] == treatment)
    }

    /// Arrangements before counts are split by structure: placements × optional units ×
    /// treatment level counts.
    fn arrangements(&self) -> u128 {
        let mut n: u128 = 1;
        for p in &self.placements {
            n = n.saturating_mul(p.units.len() as u128);
        }
        n = n.saturating_mul(1u128 << self.optional.len().min(100));
        for (_, r) in &self.levels {
            n = n.saturating_mul((r.hi - r.lo + 1) as u128);
        }
        n
    }

    /// The structures of the space, and the picks that gave no layout (with why).
    pub fn variants(&self, problem: &Problem) -> (Vec<Variant>, Vec<String>) {
        let mut out: Vec<Variant> = Vec::new();
        let mut skipped: Vec<String> = Vec::new();
        let mut note = |m: String| {
            if !skipped.contains(&m) {
                skipped.push(m);
            }
        };
        let treatments = treatment_names(&self.spec);
        let units = unit_names(&self.spec);
        // Choices: one per placement, one per optional unit, one per searched treatment.
        let mut sizes: Vec<usize> = self.placements.iter().map(|p| p.units.len()).collect();
        sizes.extend(self.optional.iter().map(|_| 2));
        sizes.extend(self.levels.iter().map(|(_, r)| (r.hi - r.lo + 1) as usize));
        for picks in odometer(&sizes) {
            let (placed, rest) = picks.split_at(self.placements.len());
            let (kept, levels) = rest.split_at(self.optional.len());
            let mut spec = self.spec.clone();
            let mut randomised: BTreeMap<usize, String> = BTreeMap::new();
            for (p, &k) in self.placements.iter().zip(placed) {
                randomised.insert(p.treatment, p.units[k].clone());
            }
            let without: Vec<usize> = self
                .optional
                .iter()
                .zip(kept)
                .filter(|(_, k)| **k == 1)
                .map(|(&u, _)| u)
                .collect();
            // A treatment cannot go to a unit the arrangement does without.
            let on_absent = (0..treatments.len()).any(|t| {
                let unit = randomised.get(&t).cloned().unwrap_or_else(|| {
                    first_name(self.spec.treatment[t].get_ref().randomised_to.get_ref())
                });
                without.iter().any(|&u| units[u] == unit)
            });
            if on_absent {
                continue;
            }
            for (t, unit) in &randomised {
                let ts = spec.treatment[*t].get_mut();
                let span = ts.randomised_to.span();
                ts.randomised_to = Spanned::new(span, Names::One(unit.clone()));
            }
            for ((t, r), &k) in self.levels.iter().zip(levels) {
                let ts = spec.treatment[*t].get_mut();
                let span = ts.levels.span();
                ts.levels = Spanned::new(span, (r.lo + k as u64) as i64);
            }
            let dropped: Vec<String> = without.iter().map(|&u| units[u].clone()).collect();
            for name in &dropped {
                drop_unit(&mut spec, name);
            }
            let describe = describe_picks(&self.spec, &randomised, &dropped);
            self.split_counts(problem, &spec, &dropped, &describe, &mut out, &mut note);
        }
        (out, skipped)
    }

    /// The structures of one arrangement: each searched unit below the top with one
    /// member per treatment combination, or several.
    fn split_counts(
        &self,
        problem: &Problem,
        spec: &Spec,
        dropped: &[String],
        describe: &str,
        out: &mut Vec<Variant>,
        note: &mut impl FnMut(String),
    ) {
        let units = unit_names(spec);
        let treatments = treatment_names(spec);
        // Per searched unit still in the layout: its combinations and its classes of counts.
        let mut searched: Vec<(usize, u64, Vec<Vec<u64>>)> = Vec::new();
        for &(u0, range) in &self.counts {
            let name = &unit_names(&self.spec)[u0];
            let Some(u) = units.iter().position(|x| x == name) else {
                continue;
            };
            let combinations: u64 = spec
                .treatment
                .iter()
                .filter(|t| first_name(t.get_ref().randomised_to.get_ref()) == *name)
                .map(|t| (*t.get_ref().levels.get_ref()).max(1) as u64)
                .product();
            let valid: Vec<u64> = (range.lo..=range.hi)
                .filter(|c| c % combinations == 0)
                .collect();
            if valid.is_empty() {
                note(format!(
                    "{describe}: no {name} count in [{}, {}] is a multiple of the {combinations} treatment combinations randomised to it",
                    range.lo, range.hi
                ));
                return;
            }
            let top = spec.unit[u].get_ref().within.is_none();
            let classes: Vec<Vec<u64>> = if top {
                vec![valid]
            } else {
                let (one, many): (Vec<u64>, Vec<u64>) =
                    valid.into_iter().partition(|&c| c == combinations);
                [one, many].into_iter().filter(|c| !c.is_empty()).collect()
            };
            searched.push((u, combinations, classes));
        }
        let sizes: Vec<usize> = searched.iter().map(|(_, _, c)| c.len()).collect();
        for picks in odometer(&sizes) {
            let mut spec = spec.clone();
            for ((u, _, classes), &k) in searched.iter().zip(&picks) {
                let us = spec.unit[*u].get_mut();
                let span = us.count.span();
                us.count = Spanned::new(span, classes[k][0] as i64);
            }
            let layout = match Layout::from_spec(&spec, &self.text) {
                Ok(l) => l,
                Err(e) => {
                    note(format!("{describe}: {}", message(&e)));
                    continue;
                }
            };
            let mut plan = match PlanningValues::from_spec(&spec, &self.text, &layout) {
                Ok(p) => p,
                Err(e) => {
                    note(format!("{describe}: {}", message(&e)));
                    continue;
                }
            };
            plan.alpha = problem.plan.alpha;
            plan.power = problem.plan.power;
            let s = &layout.structure;
            let mut dims = Vec::new();
            for ((u, combinations, classes), &k) in searched.iter().zip(&picks) {
                let unit = s.units.by_name(&units[*u]);
                let target = match unit.map(|x| x.place) {
                    Some(Place::Factor(i)) => Target::Factor(i),
                    Some(Place::Residual) => Target::Replicates,
                    _ => continue,
                };
                dims.push(Dim {
                    target,
                    values: classes[k].iter().map(|c| c / combinations).collect(),
                });
            }
            let base = &problem.base.structure;
            let index: Vec<Option<usize>> = base
                .factors
                .iter()
                .map(|f| s.factor_index(&f.name))
                .collect();
            let left_out: Vec<usize> = (0..base.factors.len())
                .filter(|&f| dropped.contains(&base.factors[f].name))
                .collect();
            let randomised: Vec<(String, String)> = treatments
                .iter()
                .zip(&spec.treatment)
                .map(|(t, ts)| (t.clone(), first_name(ts.get_ref().randomised_to.get_ref())))
                .collect();
            let mut template = layout.levels.clone();
            for d in &dims {
                super::space::set(&mut template, d.target, d.values[0]);
            }
            let limits = super::space::limit_masks(problem, s);
            out.push(Variant {
                structure: layout.structure,
                plan,
                index,
                left_out,
                nesting: Vec::new(),
                template,
                dims,
                randomised,
                without_units: dropped.to_vec(),
                limits,
            });
        }
    }
}

/// Every combination of one pick per choice, the last choice fastest.
fn odometer(sizes: &[usize]) -> Vec<Vec<usize>> {
    if sizes.contains(&0) {
        return Vec::new();
    }
    let mut out = Vec::new();
    let mut picks = vec![0usize; sizes.len()];
    loop {
        out.push(picks.clone());
        let mut k = sizes.len();
        loop {
            if k == 0 {
                return out;
            }
            k -= 1;
            picks[k] += 1;
            if picks[k] < sizes[k] {
                break;
            }
            picks[k] = 0;
        }
    }
}

fn first_name(names: &Names) -> String {
    names
        .list()
        .first()
        .map(|n| n.trim().to_string())
        .unwrap_or_default()
}

/// An error's message without its file and line (the picks say where it comes from).
fn message(e: &Error) -> String {
    match e {
        Error::Invalid { message, .. } => message.clone(),
        other => other.to_string(),
    }
}

/// "light on shelf; no tray": the picks that differ from the file.
fn describe_picks(spec: &Spec, randomised: &BTreeMap<usize, String>, dropped: &[String]) -> String {
    let names = treatment_names(spec);
    let mut parts: Vec<String> = randomised
        .iter()
        .map(|(t, u)| format!("{} on {u}", names[*t]))
        .collect();
    parts.extend(dropped.iter().map(|u| format!("no {u}")));
    if parts.is_empty() {
        "as given".into()
    } else {
        parts.join("; ")
    }
}

/// Leaves a unit out of a spec: the units within it are within what it was within, and
/// planning values that name it go with it.
fn drop_unit(spec: &mut Spec, name: &str) {
    let Some(u) = spec
        .unit
        .iter()
        .position(|x| x.get_ref().name.get_ref().trim() == name)
    else {
        return;
    };
    let removed = spec.unit.remove(u);
    let parents: Vec<String> = removed
        .get_ref()
        .within
        .as_ref()
        .map(|w| {
            w.get_ref()
                .list()
                .iter()
                .map(|n| n.trim().to_string())
                .collect()
        })
        .unwrap_or_default();
    for x in &mut spec.unit {
        let us = x.get_mut();
        let Some(w) = &us.within else { continue };
        let old: Vec<String> = w
            .get_ref()
            .list()
            .iter()
            .map(|n| n.trim().to_string())
            .collect();
        if !old.iter().any(|n| n == name) {
            continue;
        }
        let span = w.span();
        let mut new: Vec<String> = Vec::new();
        for n in old {
            if n == name {
                for p in &parents {
                    if !new.contains(p) {
                        new.push(p.clone());
                    }
                }
            } else if !new.contains(&n) {
                new.push(n);
            }
        }
        us.within = match new.len() {
            0 => None,
            1 => Some(Spanned::new(span, Names::One(new.remove(0)))),
            _ => Some(Spanned::new(span, Names::Many(new))),
        };
    }
    let mentions = |key: &str| {
        key.split(" x ")
            .map(|part| part.split('(').next().unwrap_or("").trim())
            .any(|part| part == name)
    };
    if let Some(sd) = &mut spec.sd {
        sd.get_mut().retain(|k, _| !mentions(k));
    }
    if let Some(effect) = &mut spec.effect {
        effect.retain(|k, _| !mentions(k));
    }
    if let Some(cost) = &mut spec.cost {
        cost.per_unit.retain(|k, _| !mentions(k));
    }
    if let Some(layout) = &mut spec.layout {
        let l = layout.get_mut();
        l.omit.retain(|k| !mentions(k.get_ref()));
        l.of_interest.retain(|k| !mentions(k.get_ref()));
    }
}
