//! The validated layout: factors, their kinds and nesting, level counts, replicates.
//!
//! A `Layout` cannot be built invalid: names are resolved to indices, nesting has no
//! cycle, every count is at least one and their product fits in 64 bits. Code past this
//! point does not re-check any of it.
//!
//! The layout is split in two so that the design search can share work: the `Structure`
//! (which factors, fixed or random, what is nested in what, which interactions are assumed
//! absent, the convention) fixes the symbolic expected mean squares; the `Levels` (level
//! counts and replicates) are plugged in afterwards.

use std::path::Path;

use crate::error::Error;
use crate::spec::{self, ConventionSpec, KindSpec, Spec, SumsOfSquaresSpec};
use crate::term::{Mask, Term, parse_term_label};
pub mod removal;
pub mod term;
pub mod units;

pub use removal::Removal;
pub use units::{Place, Unit, Units};

/// Why an unbalanced layout is not checked under the restricted convention.
pub const RESTRICTED_UNBALANCED: &str = "the restricted convention (mixed interaction effects summing to zero over the fixed levels) is defined for balanced layouts; with cells removed the sums run over unequal numbers of observations and the model is not defined the same way, so emsplan uses the unrestricted model for unbalanced layouts: set convention = \"unrestricted\" or leave the key out";

/// At most this many factors: the model has up to 2^k - 1 terms.
pub const MAX_FACTORS: usize = 12;

#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, serde::Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Kind {
    Fixed,
    Random,
}

/// How random interaction effects with fixed factors are modelled.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, serde::Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Convention {
    /// Cornfield and Tukey (1956): mixed interaction effects sum to zero over each fixed subscript.
    Restricted,
    /// Random interaction effects independent, no sum-to-zero constraint (as in Searle's texts).
    Unrestricted,
}

impl Convention {
    pub fn name(self) -> &'static str {
        match self {
            Convention::Restricted => "restricted",
            Convention::Unrestricted => "unrestricted",
        }
    }
}

#[derive(Debug, Clone, PartialEq, Eq, Hash)]
pub struct Factor {
    pub name: String,
    pub kind: Kind,
    /// Factors this one is directly nested in.
    pub within: Mask,
    /// Every factor this one is nested in, directly or through others.
    pub ancestors: Mask,
    /// Finite population a random factor's levels are drawn from.
    pub population: Option<u64>,
}

/// What fixes the symbolic expected mean squares.
#[derive(Debug, Clone, PartialEq, Eq, Hash)]
pub struct Structure {
    pub factors: Vec<Factor>,
    /// Live sets of interactions assumed absent; each is pooled into the smallest
    /// remaining random term that contains it (see `ems::Model`).
    pub omitted: Vec<Mask>,
    pub convention: Convention,
    /// The units and treatments, when the file declares them.
    pub units: Units,
}

/// Level counts: `per_factor[i]` levels of factor i in each combination of its nests.
#[derive(Debug, Clone, PartialEq, Eq, Hash)]
pub struct Levels {
    pub per_factor: Vec<u64>,
    pub replicates: u64,
}

/// Which sums of squares the expected mean squares of an unbalanced layout are of. In a
/// balanced layout every choice gives the same sums of squares.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Default, serde::Serialize)]
pub enum SumsOfSquares {
    /// Sequential (type I): each term adjusted for the terms fitted before it.
    #[default]
    #[serde(rename = "sequential")]
    Sequential,
    /// Type III: each term adjusted for every other term (sum-to-zero coding).
    #[serde(rename = "type3")]
    Type3,
}

impl SumsOfSquares {
    pub fn name(self) -> &'static str {
        match self {
            SumsOfSquares::Sequential => "sequential",
            SumsOfSquares::Type3 => "type3",
        }
    }
}

#[derive(Debug, Clone)]
pub struct Layout {
    pub name: String,
    pub structure: Structure,
    pub levels: Levels,
    /// Cells missing from the full layout; empty for a balanced layout.
    pub removed: Vec<Removal>,
    /// The sums of squares of an unbalanced layout (no effect on a balanced one).
    pub sums_of_squares: SumsOfSquares,
}

impl Structure {
    pub fn factor_index(&self, name: &str) -> Option<usize> {
        self.factors.iter().position(|f| f.name == name)
    }

    pub fn all_factors(&self) -> Mask {
        (1u32 << self.factors.len()) - 1
    }

    /// Names of the factors in a set, in declaration order.
    pub fn names(&self, mask: Mask) -> Vec<&str> {
        self.factors
            .iter()
            .enumerate()
            .filter(|(i, _)| mask & (1 << i) != 0)
            .map(|(_, f)| f.name.as_str())
            .collect()
    }

    /// Names of the factors, for error messages.
    pub fn known_names(&self) -> String {
        self.factors
            .iter()
            .map(|f| f.name.as_str())
            .collect::<Vec<_>>()
            .join(", ")
    }

    pub fn is_omitted(&self, live: Mask) -> bool {
        self.omitted.contains(&live)
    }

    /// Builds a structure from factor definitions given by direct nesting only,
    /// computing ancestors and refusing cycles.
    pub fn new(
        mut factors: Vec<Factor>,
        omitted: Vec<Mask>,
        convention: Convention,
    ) -> Result<Self, String> {
        let n = factors.len();
        if n == 0 {
            return Err("the layout has no factors: add at least one [[factor]] table".into());
        }
        if n > MAX_FACTORS {
            return Err(format!(
                "the layout has {n} factors; emsplan handles at most {MAX_FACTORS}"
            ));
        }
        // Transitive closure of `within`, then a factor among its own ancestors is a cycle.
        let mut anc: Vec<Mask> = factors.iter().map(|f| f.within).collect();
        for _ in 0..n {
            let next: Vec<Mask> = (0..n)
                .map(|i| {
                    let mut m = anc[i];
                    for j in 0..n {
                        if anc[i] & (1 << j) != 0 {
                            m |= anc[j];
                        }
                    }
                    m
                })
                .collect();
            if next == anc {
                break;
            }
            anc = next;
        }
        for i in 0..n {
            if anc[i] & (1 << i) != 0 {
                let cycle: Vec<&str> = (0..n)
                    .filter(|&j| anc[i] & (1 << j) != 0 && anc[j] & (1 << i) != 0)
                    .map(|j| factors[j].name.as_str())
                    .collect();
                return Err(format!(
                    "factor \"{}\" is nested in itself through a cycle ({}): nesting must run one way",
                    factors[i].name,
                    cycle.join(" -> ")
                ));
            }
        }
        for (f, a) in factors.iter_mut().zip(anc) {
            f.ancestors = a;
        }
        Ok(Structure {
            factors,
            omitted,
            convention,
            units: Units::default(),
        })
    }
}

impl Levels {
    /// Cells of the full layout: the product of every factor's level count.
    pub fn cells(&self) -> u64 {
        self.per_factor.iter().product()
    }

    pub fn observations(&self) -> u64 {
        self.cells() * self.replicates
    }
}

impl Layout {
    /// Validates level counts against the structure: counts at least one, fixed factors
    /// with two levels or more, populations no smaller than levels, totals within 64 bits.
    pub fn new(name: String, structure: Structure, levels: Levels) -> Result<Self, String> {
        check_levels(&structure, &levels)?;
        Ok(Layout {
            name,
            structure,
            levels,
            removed: Vec::new(),
            sums_of_squares: SumsOfSquares::default(),
        })
    }

    /// The same layout with these removals (replacing any it had), validated: indices in
    /// range, each removal removing something, no fixed level left empty, within the
    /// unbalanced engine's size. Errors carry the line of the removal at fault.
    pub fn with_removals(mut self, removed: Vec<Removal>) -> Result<Self, (Option<usize>, String)> {
        self.removed = removed;
        removal::validate(&self)?;
        Ok(self)
    }

    /// Whether every cell holds the same number of observations (nothing removed).
    pub fn is_balanced(&self) -> bool {
        self.removed.is_empty()
    }

    /// Whether the convention is defined for this layout: the restricted model only for a
    /// balanced one (its sums to zero run over equal numbers of observations).
    pub fn defines(&self, convention: Convention) -> bool {
        convention == Convention::Unrestricted || self.removed.is_empty()
    }

    /// Observations in the layout, after any removals.
    pub fn observations(&self) -> u64 {
        if self.is_balanced() {
            self.levels.observations()
        } else {
            removal::cell_counts(self).iter().sum()
        }
    }

    /// Reads, parses and validates a layout file.
    pub fn from_file(path: &Path) -> Result<(Layout, Spec, String), Error> {
        let (spec, text) = spec::read(path)?;
        let layout = Layout::from_spec(&spec, &text).map_err(|e| e.in_file(path))?;
        Ok((layout, spec, text))
    }

    /// Turns a parsed spec into a layout, with line numbers taken from `text`.
    pub fn from_spec(spec: &Spec, text: &str) -> Result<Layout, Error> {
        let at = |span: std::ops::Range<usize>| Some(spec::line_of(text, span.start));
        let default_layout = spec::LayoutSpec::default();
        let (layout_spec, layout_line) = match &spec.layout {
            Some(l) => (l.get_ref(), at(l.span())),
            None if !spec.unit.is_empty() => (&default_layout, None),
            None => {
                return Err(Error::invalid(
                    None,
                    "missing [layout] table: add one with at least `replicates = N`",
                ));
            }
        };
        let units_file = !spec.unit.is_empty() || !spec.treatment.is_empty();
        let (factors, per_factor, built_replicates, units) = if units_file {
            let b = units::build(spec, text)?;
            (b.factors, b.per_factor, Some(b.replicates), b.units)
        } else {
            let (factors, per_factor) = factors_from_spec(spec, text)?;
            (factors, per_factor, None, Units::default())
        };
        let names: Vec<String> = factors.iter().map(|f| f.name.clone()).collect();
        let convention = match layout_spec.convention.as_ref().map(|c| *c.get_ref()) {
            None | Some(ConventionSpec::Restricted) => Convention::Restricted,
            Some(ConventionSpec::Unrestricted) => Convention::Unrestricted,
        };
        let mut structure = Structure::new(factors, Vec::new(), convention).map_err(|m| {
            // A cycle: point at the first `within` entry of a factor on it.
            let line = spec
                .factor
                .iter()
                .zip(&names)
                .find(|(f, n)| m.contains(&format!("\"{n}\"")) && !f.get_ref().within.is_empty())
                .and_then(|(f, _)| f.get_ref().within.first())
                .map(|w| spec::line_of(text, w.span().start));
            Error::invalid(line, m)
        })?;
        if units.declared() {
            let additive = layout_spec.additive.as_ref().is_none_or(|a| *a.get_ref());
            structure.units = units;
            structure.units.additive = additive;
            structure.omitted.extend(structure.units.merged);
            if additive {
                let pooled: Vec<Mask> = crate::term::model_terms(&structure)
                    .iter()
                    .map(|t| (t.live, t.subscripts()))
                    .filter(|&(live, subs)| {
                        let u = &structure.units;
                        !u.is_unit_term(live)
                            && subs & u.treatments != 0
                            && subs & !u.treatments != 0
                    })
                    .map(|(live, _)| live)
                    .collect();
                structure.units.pooled = pooled.clone();
                structure.omitted.extend(pooled);
            }
        } else if let Some(a) = &layout_spec.additive {
            return Err(Error::invalid(
                at(a.span()),
                "`additive` is about units and treatments, and this file has [[factor]] tables: list interactions assumed absent in `omit` instead",
            ));
        }

        for o in &layout_spec.omit {
            let line = at(o.span());
            let term = parse_term_label(&structure, o.get_ref())
                .map_err(|m| Error::invalid(line, format!("omit: {m}")))?;
            if term.is_residual() {
                return Err(Error::invalid(
                    line,
                    "omit: \"residual\" is the variation within cells, not an interaction, and cannot be assumed absent",
                ));
            }
            if term.live.count_ones() < 2 {
                return Err(Error::invalid(
                    line,
                    format!(
                        "omit: \"{}\" is a main effect; only interactions can be assumed absent",
                        o.get_ref()
                    ),
                ));
            }
            if structure.units.pooled.contains(&term.live) {
                return Err(Error::invalid(
                    line,
                    format!(
                        "omit: \"{}\" is already pooled, since units and treatments are taken as additive: remove it from `omit`",
                        o.get_ref()
                    ),
                ));
            }
            if structure.omitted.contains(&term.live) {
                return Err(Error::invalid(
                    line,
                    format!("omit: \"{}\" is listed twice", o.get_ref()),
                ));
            }
            structure.omitted.push(term.live);
        }

        let replicates = match (built_replicates, &layout_spec.replicates) {
            (Some(r), _) => r,
            (None, Some(r)) => positive(*r.get_ref(), || {
                "replicates must be a whole number of at least 1 (observations per cell)"
                    .to_string()
            })
            .map_err(|m| Error::invalid(at(r.span()), m))?,
            (None, None) => {
                return Err(Error::invalid(
                    layout_line,
                    "[layout] has no `replicates`: say how many observations each cell holds, e.g. replicates = 3",
                ));
            }
        };
        let levels = Levels {
            per_factor,
            replicates,
        };
        let name = layout_spec.name.clone().unwrap_or_default();
        // Level-dependent checks, with the line of the offending factor where there is one.
        if let Err(m) = check_levels(&structure, &levels) {
            let line = spec
                .factor
                .iter()
                .zip(&names)
                .find(|(_, n)| m.contains(&format!("\"{n}\"")))
                .map(|(f, _)| spec::line_of(text, f.get_ref().name.span().start));
            return Err(Error::invalid(line, m));
        }
        let mut removed = Vec::new();
        for r in &layout_spec.remove {
            let entries: Vec<(String, i64, Option<usize>)> = r
                .get_ref()
                .iter()
                .map(|(k, v)| (k.clone(), *v.get_ref(), at(v.span())))
                .collect();
            let line = at(r.span());
            removed.push(
                Removal::parse(&structure, &levels, &entries, line)
                    .map_err(|(l, m)| Error::invalid(l, m))?,
            );
        }
        if !removed.is_empty()
            && let Some(c) = &layout_spec.convention
            && *c.get_ref() == ConventionSpec::Restricted
        {
            return Err(Error::invalid(at(c.span()), RESTRICTED_UNBALANCED));
        }
        if !removed.is_empty() && layout_spec.convention.is_none() {
            // The unrestricted model is the only one defined for unbalanced layouts.
            structure.convention = Convention::Unrestricted;
        }
        let sums_of_squares = match layout_spec.sums_of_squares.as_ref().map(|x| *x.get_ref()) {
            None | Some(SumsOfSquaresSpec::Sequential) => SumsOfSquares::Sequential,
            Some(SumsOfSquaresSpec::Type3) => SumsOfSquares::Type3,
        };
        let layout = Layout {
            name,
            structure,
            levels,
            removed: Vec::new(),
            sums_of_squares,
        };
        layout
            .with_removals(removed)
            .map_err(|(l, m)| Error::invalid(l, m))
    }
}

/// The factors of a file of `[[factor]]` tables, with their level counts.
fn factors_from_spec(spec: &Spec, text: &str) -> Result<(Vec<Factor>, Vec<u64>), Error> {
    let at = |span: std::ops::Range<usize>| Some(spec::line_of(text, span.start));
    if spec.factor.is_empty() {
        return Err(Error::invalid(
            None,
            "the layout has no factors: add at least one [[factor]] table with name, kind and levels",
        ));
    }

    // Names first, so that `within` can refer to factors declared later.
    let mut names: Vec<String> = Vec::new();
    for f in &spec.factor {
        let name = f.get_ref().name.get_ref().trim().to_string();
        let line = at(f.get_ref().name.span());
        check_name(&name).map_err(|m| Error::invalid(line, m))?;
        if names.contains(&name) {
            return Err(Error::invalid(
                line,
                format!("factor \"{name}\" is declared twice: give each factor its own name"),
            ));
        }
        names.push(name);
    }
    if names.len() > MAX_FACTORS {
        return Err(Error::invalid(
            None,
            format!(
                "the layout has {} factors; emsplan handles at most {MAX_FACTORS}",
                names.len()
            ),
        ));
    }
    let known = names.join(", ");

    let mut factors = Vec::new();
    let mut per_factor = Vec::new();
    for (i, f) in spec.factor.iter().enumerate() {
        let f = f.get_ref();
        let name = &names[i];
        let mut within: Mask = 0;
        for w in &f.within {
            let wname = w.get_ref().trim();
            let j = names.iter().position(|n| n == wname).ok_or_else(|| {
                    Error::invalid(
                        at(w.span()),
                        format!(
                            "factor \"{name}\" is nested in \"{wname}\", which is not a factor (known: {known})"
                        ),
                    )
                })?;
            if j == i {
                return Err(Error::invalid(
                    at(w.span()),
                    format!(
                        "factor \"{name}\" is nested in itself: remove \"{wname}\" from its `within`"
                    ),
                ));
            }
            within |= 1 << j;
        }
        let levels = positive(*f.levels.get_ref(), || {
            format!("factor \"{name}\": levels must be a whole number of at least 1")
        })
        .map_err(|m| Error::invalid(at(f.levels.span()), m))?;
        per_factor.push(levels);
        let kind = match f.kind.get_ref() {
            KindSpec::Fixed => Kind::Fixed,
            KindSpec::Random => Kind::Random,
        };
        let population = match &f.population {
            None => None,
            Some(p) => {
                if kind == Kind::Fixed {
                    return Err(Error::invalid(
                        at(p.span()),
                        format!(
                            "factor \"{name}\" is fixed, so it has no population: remove `population` or make it random"
                        ),
                    ));
                }
                Some(
                    positive(*p.get_ref(), || {
                        format!(
                            "factor \"{name}\": population must be a whole number of at least 1"
                        )
                    })
                    .map_err(|m| Error::invalid(at(p.span()), m))?,
                )
            }
        };
        factors.push(Factor {
            name: name.clone(),
            kind,
            within,
            ancestors: 0,
            population,
        });
    }
    Ok((factors, per_factor))
}

/// A term made only of this structure's factors, with its nesting.
pub fn term_of(structure: &Structure, live: Mask) -> Term {
    let nest = structure
        .factors
        .iter()
        .enumerate()
        .filter(|(i, _)| live & (1 << i) != 0)
        .fold(0, |m, (_, f)| m | f.ancestors);
    Term { live, nest }
}

fn positive(v: i64, message: impl FnOnce() -> String) -> Result<u64, String> {
    if v >= 1 { Ok(v as u64) } else { Err(message()) }
}

/// Factor names are words: a letter, then letters, digits, `_` or `-`.
fn check_name(name: &str) -> Result<(), String> {
    if name.is_empty() {
        return Err("a factor has an empty name: give it a short name such as \"bench\"".into());
    }
    let mut chars = name.chars();
    let first_ok = chars.next().is_some_and(|c| c.is_alphabetic());
    let rest_ok = chars.all(|c| c.is_alphanumeric() || c == '_' || c == '-');
    if !first_ok || !rest_ok {
        return Err(format!(
            "factor name \"{name}\" must start with a letter and hold only letters, digits, '_' or '-'"
        ));
    }
    if name == "x" || name == "residual" || name == "replicate" || name == "overhead" {
        return Err(format!(
            "\"{name}\" is a reserved word in emsplan and cannot name a factor: choose another name"
        ));
    }
    Ok(())
}

fn check_levels(structure: &Structure, levels: &Levels) -> Result<(), String> {
    if levels.per_factor.len() != structure.factors.len() {
        return Err("level counts do not match the factors".into());
    }
    if levels.replicates == 0 {
        return Err("replicates must be at least 1".into());
    }
    let mut total: u64 = levels.replicates;
    for (f, &n) in structure.factors.iter().zip(&levels.per_factor) {
        if n == 0 {
            return Err(format!("factor \"{}\": levels must be at least 1", f.name));
        }
        if f.kind == Kind::Fixed && n < 2 {
            return Err(format!(
                "factor \"{}\" is fixed with one level, so it compares nothing: give it at least 2 levels or remove it",
                f.name
            ));
        }
        if let Some(p) = f.population
            && p < n
        {
            return Err(format!(
                "factor \"{}\" has {n} levels drawn from a population of only {p}: the population must be at least the levels",
                f.name
            ));
        }
        total = total.checked_mul(n).ok_or_else(|| {
            "the layout has more observations than fit in a 64-bit count: reduce the level counts"
                .to_string()
        })?;
    }
    Ok(())
}
