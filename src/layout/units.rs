//! Units and treatments: the physical units of an experiment (blocks, chambers, plots,
//! animals) nested in one another, and the treatments randomised to them, as one
//! model of factors.
//!
//! Every kind of unit is a term of the model (Nelder 1965, Proc. Royal Society A
//! 283:147-178; Bailey 2008, Design of Comparative Experiments, ch. 10): the factors that
//! pick out one unit are the units above it, the treatments randomised to it and, when
//! it holds several units per combination of those, a random factor of its own. A unit
//! with one member per combination of the treatments it carries is the interaction of
//! those treatments with the units above it (one main plot per nitrogen level in each
//! block is block x nitrogen): it gets no factor of its own, and that term carries both
//! names. The smallest unit is where the observations are: its variation is the
//! residual, and a unit below the smallest unit that carries a treatment is a
//! subsample, not a replicate.

use serde::Serialize;

use crate::term::{Mask, REPLICATE};

/// Where a unit sits in the model.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Place {
    /// A random factor of its own (several units per combination above).
    Factor(usize),
    /// The same term as an interaction (one unit per combination), by its live set.
    Term(Mask),
    /// The smallest unit: the residual.
    Residual,
}

#[derive(Debug, Clone, PartialEq, Eq, Hash)]
pub struct Unit {
    pub name: String,
    pub place: Place,
    /// The factors that pick out one unit: its term's subscripts (with `REPLICATE` for
    /// the smallest unit, which the replicate picks out within a cell).
    pub ident: Mask,
    /// Treatments randomised to this unit.
    pub carries: Mask,
    /// The units this one divides, by index.
    pub within: Vec<usize>,
}

impl Unit {
    /// The live set of the unit's term (`REPLICATE` for the residual).
    pub fn live(&self) -> Mask {
        match self.place {
            Place::Factor(f) => 1 << f,
            Place::Term(live) => live,
            Place::Residual => REPLICATE,
        }
    }
}

/// The units of a layout; empty for a layout of `[[factor]]` tables.
#[derive(Debug, Clone, PartialEq, Eq, Hash, Default)]
pub struct Units {
    pub list: Vec<Unit>,
    /// The factors that are treatments; the others belong to units.
    pub treatments: Mask,
    /// Whether units and treatments are taken as additive (unit-treatment additivity).
    pub additive: bool,
    /// The interactions of units with treatments that additivity takes as absent, by
    /// live set; they are also in the structure's `omitted`.
    pub pooled: Vec<Mask>,
    /// The interaction that is the smallest unit itself (one per combination of
    /// everything above), pooled into the residual; also in `omitted`.
    pub merged: Option<Mask>,
}

impl Units {
    pub fn declared(&self) -> bool {
        !self.list.is_empty()
    }

    /// Whether a term (by live set) is a unit's, the residual included.
    pub fn is_unit_term(&self, live: Mask) -> bool {
        self.list.iter().any(|u| u.live() == live)
    }

    /// The unit whose term this is.
    pub fn unit_of_term(&self, live: Mask) -> Option<&Unit> {
        self.list.iter().find(|u| u.live() == live)
    }

    /// A unit by name.
    pub fn by_name(&self, name: &str) -> Option<&Unit> {
        self.list.iter().find(|u| u.name == name)
    }

    /// The name a term goes by when it is a unit with no factor of its own.
    /// A treatment term keeps its treatment's name even when a unit coincides with it
    /// (one chamber per light regime): that unit is not replicated.
    pub fn alias(&self, live: Mask) -> Option<&str> {
        self.list
            .iter()
            .find(|u| {
                u.live() == live
                    && match u.place {
                        Place::Factor(_) => false,
                        Place::Residual => true,
                        Place::Term(_) => u.ident & !self.treatments != 0,
                    }
            })
            .map(|u| u.name.as_str())
    }

    /// Whether a term (by its subscripts) involves treatments only.
    pub fn is_treatment_term(&self, subscripts: Mask) -> bool {
        self.declared() && subscripts & !REPLICATE & !self.treatments == 0 && subscripts != 0
    }

    /// The stratum a term is estimated in: the largest unit whose factors include the
    /// term's (for a treatment term, the unit its treatments were randomised to; for an
    /// interaction of treatments on different units, the smaller one).
    pub fn stratum(&self, subscripts: Mask) -> Option<usize> {
        let wanted = subscripts & !REPLICATE;
        if !self.declared() {
            return None;
        }
        if subscripts & REPLICATE != 0 {
            return self.list.iter().position(|u| u.place == Place::Residual);
        }
        (0..self.list.len())
            .filter(|&u| self.list[u].ident & wanted == wanted)
            .min_by_key(|&u| self.list[u].ident.count_ones())
    }

    /// The units once factor `f` is left out: the unit that is that factor goes, and so
    /// does a unit whose term involved it; the other masks are renumbered.
    pub fn without_factor(&self, f: usize) -> Units {
        use crate::term::remap_mask;
        let keep = |m: Mask| remap_mask(m & !(1 << f), f).unwrap_or(0);
        let mut index: Vec<Option<usize>> = Vec::new();
        let mut list: Vec<Unit> = Vec::new();
        for u in &self.list {
            let place = match u.place {
                Place::Factor(g) if g == f => None,
                Place::Factor(g) => Some(Place::Factor(if g > f { g - 1 } else { g })),
                Place::Term(live) => remap_mask(live, f).map(Place::Term),
                Place::Residual => Some(Place::Residual),
            };
            index.push(place.map(|_| list.len()));
            if let Some(place) = place {
                list.push(Unit {
                    name: u.name.clone(),
                    place,
                    ident: keep(u.ident),
                    carries: keep(u.carries),
                    within: u.within.clone(),
                });
            }
        }
        for u in &mut list {
            u.within = u.within.iter().filter_map(|&p| index[p]).collect();
        }
        Units {
            list,
            treatments: keep(self.treatments),
            additive: self.additive,
            pooled: self
                .pooled
                .iter()
                .filter_map(|&m| remap_mask(m, f))
                .collect(),
            merged: self.merged.and_then(|m| remap_mask(m, f)),
        }
    }

    /// Units per member of the units it is within (in all, at the top).
    pub fn count(&self, u: usize, per_factor: &[u64], replicates: u64) -> u64 {
        let unit = &self.list[u];
        let own = match unit.place {
            Place::Factor(f) => per_factor[f],
            Place::Residual => replicates,
            Place::Term(_) => 1,
        };
        own * product(unit.carries, per_factor)
    }

    /// Units in the whole experiment.
    pub fn total(&self, u: usize, per_factor: &[u64], replicates: u64) -> u64 {
        let unit = &self.list[u];
        let own = if unit.place == Place::Residual {
            replicates
        } else {
            1
        };
        own * product(unit.ident, per_factor)
    }

    /// The unit a treatment factor is randomised to.
    pub fn unit_carrying(&self, factor: usize) -> Option<usize> {
        self.list
            .iter()
            .position(|u| u.carries & (1 << factor) != 0)
    }
}

fn product(mask: Mask, per_factor: &[u64]) -> u64 {
    per_factor
        .iter()
        .enumerate()
        .filter(|(i, _)| mask & (1 << i) != 0)
        .map(|(_, &n)| n)
        .product()
}

/// What a file of units and treatments builds: the factors of the model, their level
/// counts, the observations per smallest unit, and the units.
pub(super) struct Built {
    pub factors: Vec<super::Factor>,
    pub per_factor: Vec<u64>,
    pub replicates: u64,
    pub units: Units,
}

/// Builds the model of a file of `[[unit]]` and `[[treatment]]` tables.
pub(super) fn build(spec: &crate::spec::Spec, text: &str) -> Result<Built, crate::error::Error> {
    use crate::error::Error;
    use crate::spec::{KindSpec, line_of};

    use super::{Factor, Kind, check_name, positive};

    let at = |span: std::ops::Range<usize>| Some(line_of(text, span.start));
    if !spec.factor.is_empty() {
        let line = at(spec.factor[0].span());
        return Err(Error::invalid(
            line,
            "a file describes its layout either by [[factor]] tables or by [[unit]] and [[treatment]] tables, not both: write each factor as a unit or a treatment",
        ));
    }
    if spec.unit.is_empty() {
        return Err(Error::invalid(
            at(spec.treatment[0].span()),
            "treatments are randomised to units, and the file has no [[unit]] table: add one for each kind of unit (block, chamber, plot, pot), with its name and count",
        ));
    }
    if spec.treatment.is_empty() {
        return Err(Error::invalid(
            at(spec.unit[0].span()),
            "the file has units but no [[treatment]] table: add the treatments, each with name, levels and randomised_to",
        ));
    }
    if let Some(l) = spec.layout.as_ref()
        && let Some(r) = &l.get_ref().replicates
    {
        return Err(Error::invalid(
            at(r.span()),
            "`replicates` is not used with units: more replicates are more units (raise the `count` of the unit the treatment is randomised to), and measurements within the smallest unit are subsamples (add a [[unit]] below it, e.g. name = \"leaf\", within = \"plant\", count = 3)",
        ));
    }

    // Names, once across units and treatments.
    let mut seen: Vec<String> = Vec::new();
    let mut named = |name: &str, line: Option<usize>| -> Result<String, Error> {
        let name = name.trim().to_string();
        check_name(&name).map_err(|m| Error::invalid(line, m))?;
        if seen.contains(&name) {
            return Err(Error::invalid(
                line,
                format!("\"{name}\" is declared twice: give each unit and treatment its own name"),
            ));
        }
        seen.push(name.clone());
        Ok(name)
    };
    let unit_names: Vec<String> = spec
        .unit
        .iter()
        .map(|u| named(u.get_ref().name.get_ref(), at(u.get_ref().name.span())))
        .collect::<Result<_, _>>()?;
    let treatment_names: Vec<String> = spec
        .treatment
        .iter()
        .map(|t| named(t.get_ref().name.get_ref(), at(t.get_ref().name.span())))
        .collect::<Result<_, _>>()?;
    if unit_names.len() + treatment_names.len() > super::MAX_FACTORS + 1 {
        return Err(Error::invalid(
            None,
            format!(
                "the layout has {} units and treatments; emsplan handles at most {} factors",
                unit_names.len() + treatment_names.len(),
                super::MAX_FACTORS
            ),
        ));
    }
    let known_units = unit_names.join(", ");

    // Parents.
    let n = unit_names.len();
    let mut parents: Vec<Vec<usize>> = vec![Vec::new(); n];
    for (u, spec_u) in spec.unit.iter().enumerate() {
        let Some(w) = &spec_u.get_ref().within else {
            continue;
        };
        for p in w.get_ref().list() {
            let p = p.trim();
            let line = at(w.span());
            let j = unit_names.iter().position(|x| x == p).ok_or_else(|| {
                let what = if treatment_names.iter().any(|t| t == p) {
                    format!("\"{p}\" is a treatment; a unit is within other units only")
                } else {
                    format!("\"{p}\" is not a unit (known: {known_units})")
                };
                Error::invalid(line, format!("unit \"{}\" is within {what}", unit_names[u]))
            })?;
            if j == u {
                return Err(Error::invalid(
                    line,
                    format!("unit \"{p}\" is within itself: remove it from its `within`"),
                ));
            }
            if parents[u].contains(&j) {
                return Err(Error::invalid(
                    line,
                    format!("unit \"{}\" names \"{p}\" twice in `within`", unit_names[u]),
                ));
            }
            parents[u].push(j);
        }
    }
    // Units in an order where parents come first (Kahn); what is left is a cycle.
    let mut order: Vec<usize> = Vec::new();
    while order.len() < n {
        let next =
            (0..n).find(|&u| !order.contains(&u) && parents[u].iter().all(|p| order.contains(p)));
        match next {
            Some(u) => order.push(u),
            None => {
                let cycle: Vec<&str> = (0..n)
                    .filter(|u| !order.contains(u))
                    .map(|u| unit_names[u].as_str())
                    .collect();
                let first = (0..n).find(|u| !order.contains(u)).unwrap_or(0);
                return Err(Error::invalid(
                    at(spec.unit[first].span()),
                    format!(
                        "units {} are within one another in a circle: each unit must be within larger ones only",
                        cycle.join(", ")
                    ),
                ));
            }
        }
    }
    let smallest: Vec<usize> = (0..n)
        .filter(|&u| !parents.iter().any(|ps| ps.contains(&u)))
        .collect();
    let bottom = match smallest.as_slice() {
        [one] => *one,
        many => {
            let names: Vec<&str> = many.iter().map(|&u| unit_names[u].as_str()).collect();
            return Err(Error::invalid(
                at(spec.unit[many[1]].span()),
                format!(
                    "units {} are each the smallest unit; the observations are made on one kind of unit: put the others above it with `within`",
                    names.join(" and ")
                ),
            ));
        }
    };

    // Treatments: kind, levels, the unit they are randomised to.
    let mut carried_by: Vec<usize> = Vec::new();
    let mut treatment_levels: Vec<u64> = Vec::new();
    let mut treatment_kinds: Vec<Kind> = Vec::new();
    let mut populations: Vec<Option<u64>> = Vec::new();
    for (t, ts) in spec.treatment.iter().enumerate() {
        let ts = ts.get_ref();
        let name = &treatment_names[t];
        let targets = ts.randomised_to.get_ref().list();
        let line = at(ts.randomised_to.span());
        let target = match targets.as_slice() {
            [one] => one.trim(),
            [] => {
                return Err(Error::invalid(
                    line,
                    format!(
                        "treatment \"{name}\": randomised_to names no unit (known: {known_units})"
                    ),
                ));
            }
            many => {
                return Err(Error::invalid(
                    line,
                    format!(
                        "treatment \"{name}\" is randomised to {} units ({}); each treatment is randomised to one kind of unit: keep one",
                        many.len(),
                        many.join(", ")
                    ),
                ));
            }
        };
        let u = unit_names.iter().position(|x| x == target).ok_or_else(|| {
            Error::invalid(
                line,
                format!(
                    "treatment \"{name}\" is randomised to \"{target}\", which is not a unit (known: {known_units})"
                ),
            )
        })?;
        carried_by.push(u);
        treatment_levels.push(
            positive(*ts.levels.get_ref(), || {
                format!("treatment \"{name}\": levels must be a whole number of at least 1")
            })
            .map_err(|m| Error::invalid(at(ts.levels.span()), m))?,
        );
        let kind = match ts.kind.as_ref().map(|k| *k.get_ref()) {
            None | Some(KindSpec::Fixed) => Kind::Fixed,
            Some(KindSpec::Random) => Kind::Random,
        };
        treatment_kinds.push(kind);
        populations.push(match &ts.population {
            None => None,
            Some(p) if kind == Kind::Fixed => {
                return Err(Error::invalid(
                    at(p.span()),
                    format!("treatment \"{name}\" is fixed, so it has no population: remove `population` or make it random"),
                ));
            }
            Some(p) => Some(
                positive(*p.get_ref(), || {
                    format!("treatment \"{name}\": population must be a whole number of at least 1")
                })
                .map_err(|m| Error::invalid(at(p.span()), m))?,
            ),
        });
    }

    // Units per combination of the treatments each carries.
    let mut per_combination: Vec<u64> = Vec::new();
    for (u, us) in spec.unit.iter().enumerate() {
        let us = us.get_ref();
        let name = &unit_names[u];
        let line = at(us.count.span());
        let count = positive(*us.count.get_ref(), || {
            format!("unit \"{name}\": count must be a whole number of at least 1")
        })
        .map_err(|m| Error::invalid(line, m))?;
        let carried: Vec<usize> = (0..carried_by.len())
            .filter(|&t| carried_by[t] == u)
            .collect();
        let combinations: u64 = carried
            .iter()
            .try_fold(1u64, |m, &t| m.checked_mul(treatment_levels[t]))
            .unwrap_or(u64::MAX);
        let per = if parents[u].is_empty() {
            "in all".to_string()
        } else {
            let p: Vec<&str> = parents[u].iter().map(|&p| unit_names[p].as_str()).collect();
            format!("per {}", p.join(" and "))
        };
        if count % combinations != 0 && parents[u].len() >= 2 {
            return Err(Error::invalid(
                line,
                format!(
                    "unit \"{name}\": {count} {per} is fewer than the {combinations} treatment combinations randomised to it; a row-column design such as a Latin square (each treatment once in every row and column) is not a complete crossing, and emsplan cannot check it yet"
                ),
            ));
        }
        if count % combinations != 0 {
            let what: Vec<String> = carried
                .iter()
                .map(|&t| format!("{} {}", treatment_levels[t], treatment_names[t]))
                .collect();
            return Err(Error::invalid(
                line,
                format!(
                    "unit \"{name}\": {count} {per} is not a multiple of the {combinations} combinations of the treatments randomised to it ({}): use a count of {combinations}, {}, ...",
                    what.join(" x "),
                    combinations.saturating_mul(2)
                ),
            ));
        }
        let r = count / combinations;
        // One per unit above with nothing randomised to it is that unit again; one per
        // crossing of two units (a strip-plot's intersection plots) is a unit of its own.
        if r == 1 && carried.is_empty() && parents[u].len() < 2 {
            let msg = if parents[u].is_empty() {
                format!(
                    "unit \"{name}\": a count of 1 {per} with no treatment randomised to it does not vary: remove the unit"
                )
            } else {
                format!(
                    "unit \"{name}\": one {per} with no treatment randomised to it is the same unit as the one it is within: remove it, or give it a count above 1"
                )
            };
            return Err(Error::invalid(line, msg));
        }
        per_combination.push(r);
    }

    // The factors of the model, unit by unit from the largest: the treatments a unit
    // carries, then the unit's own factor when it holds several per combination.
    let mut factors: Vec<Factor> = Vec::new();
    let mut per_factor: Vec<u64> = Vec::new();
    let mut treatment_index = vec![0usize; treatment_names.len()];
    let mut unit_factor: Vec<Option<usize>> = vec![None; n];
    let mut ident: Vec<Mask> = vec![0; n];
    let mut anc: Vec<Mask> = Vec::new();
    let mut unit_mask: Mask = 0;
    for &u in &order {
        let above = parents[u].iter().fold(0, |m, &p| m | ident[p]);
        let mut carries: Mask = 0;
        for t in (0..treatment_names.len()).filter(|&t| carried_by[t] == u) {
            treatment_index[t] = factors.len();
            carries |= 1 << factors.len();
            factors.push(Factor {
                name: treatment_names[t].clone(),
                kind: treatment_kinds[t],
                within: 0,
                ancestors: 0,
                population: populations[t],
            });
            anc.push(0);
            per_factor.push(treatment_levels[t]);
        }
        let mut id = above | carries;
        // A unit with one member per treatment combination and no unit above it is not
        // replicated: it keeps a factor of its own, with one level, so that its variance
        // stays in the expected mean squares (and the treatment has no test).
        let unreplicated = per_combination[u] == 1 && (above | carries) & unit_mask == 0;
        if (per_combination[u] > 1 || unreplicated) && u != bottom {
            unit_mask |= 1 << factors.len();
            unit_factor[u] = Some(factors.len());
            id |= 1 << factors.len();
            factors.push(Factor {
                name: unit_names[u].clone(),
                kind: Kind::Random,
                within: above | carries,
                ancestors: 0,
                population: None,
            });
            anc.push(above | carries);
            per_factor.push(per_combination[u]);
        }
        ident[u] = id;
    }
    let all: Mask = if factors.len() >= 32 {
        Mask::MAX
    } else {
        (1 << factors.len()) - 1
    };
    let minimal = |m: Mask| -> Mask {
        let nested = (0..factors.len())
            .filter(|&i| m & (1 << i) != 0)
            .fold(0, |x, i| x | anc[i]);
        m & !nested
    };
    let treatments: Mask = treatment_index.iter().fold(0, |m, &i| m | (1 << i));
    let mut list: Vec<Unit> = Vec::new();
    for u in 0..n {
        let place = if u == bottom {
            Place::Residual
        } else if let Some(f) = unit_factor[u] {
            Place::Factor(f)
        } else {
            Place::Term(minimal(ident[u]))
        };
        let carries = (0..treatment_names.len())
            .filter(|&t| carried_by[t] == u)
            .fold(0, |m, t| m | (1 << treatment_index[t]));
        list.push(Unit {
            name: unit_names[u].clone(),
            place,
            ident: if u == bottom {
                all | REPLICATE
            } else {
                ident[u]
            },
            carries,
            within: parents[u].clone(),
        });
    }
    // Where a unit divides the crossing of two units (strip-plot intersections), the
    // crossing is itself a unit, whether or not it is declared: the interaction of the
    // treatments on the crossed units is estimated on it.
    for u in 0..n {
        let is_the_crossing = per_combination[u] == 1 && list[u].carries == 0;
        if parents[u].len() < 2 || is_the_crossing {
            continue;
        }
        let crossing = parents[u].iter().fold(0, |m, &p| m | ident[p]);
        if list.iter().any(|x| x.ident == crossing) {
            continue;
        }
        let name = parents[u]
            .iter()
            .map(|&p| unit_names[p].as_str())
            .collect::<Vec<_>>()
            .join(" x ");
        list.push(Unit {
            name,
            place: Place::Term(minimal(crossing)),
            ident: crossing,
            carries: 0,
            within: parents[u].clone(),
        });
    }
    for u in 0..n {
        for v in 0..u {
            if list[u].ident == list[v].ident {
                return Err(Error::invalid(
                    at(spec.unit[u].span()),
                    format!(
                        "units \"{}\" and \"{}\" are the same units here (one of one per one of the other, with nothing randomised between them): remove one",
                        list[v].name, list[u].name
                    ),
                ));
            }
        }
    }
    // One smallest unit per combination of everything above it: the interaction of
    // everything is that unit, and its variation is the residual.
    let merged = (per_combination[bottom] == 1)
        .then(|| minimal(all))
        .filter(|&top| {
            (0..factors.len()).any(|i| all & (1 << i) != 0 && factors[i].kind == Kind::Random)
                && top.count_ones() >= 2
        });
    Ok(Built {
        factors,
        per_factor,
        replicates: per_combination[bottom],
        units: Units {
            list,
            treatments,
            additive: false,
            pooled: Vec::new(),
            merged,
        },
    })
}
