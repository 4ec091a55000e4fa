//! Terms of the model: which factors are live, which they are nested in, and their df.

use crate::layout::{Kind, Levels, Structure, term_of};

/// A set of factors, bit i for factor i.
pub type Mask = u32;

/// The residual's own subscript (the replicate within a cell), above every factor bit.
pub const REPLICATE: Mask = 1 << 31;

/// A term: its live factors and the factors they are nested in. The residual has the
/// replicate as its only live subscript and is nested in every factor.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub struct Term {
    pub live: Mask,
    pub nest: Mask,
}

impl Term {
    pub fn residual(structure: &Structure) -> Term {
        Term {
            live: REPLICATE,
            nest: structure.all_factors(),
        }
    }

    pub fn is_residual(&self) -> bool {
        self.live & REPLICATE != 0
    }

    /// Every subscript of the term, live or nested.
    pub fn subscripts(&self) -> Mask {
        self.live | self.nest
    }

    /// Fixed when every factor it involves is fixed; random otherwise (the residual is random).
    pub fn kind(&self, structure: &Structure) -> Kind {
        if self.is_residual() {
            return Kind::Random;
        }
        let any_random = structure
            .factors
            .iter()
            .enumerate()
            .any(|(i, f)| self.subscripts() & (1 << i) != 0 && f.kind == Kind::Random);
        if any_random {
            Kind::Random
        } else {
            Kind::Fixed
        }
    }

    /// Names of the live factors, in declaration order.
    pub fn live_names<'a>(&self, structure: &'a Structure) -> Vec<&'a str> {
        structure.names(self.live)
    }

    pub fn nest_names<'a>(&self, structure: &'a Structure) -> Vec<&'a str> {
        structure.names(self.nest)
    }

    /// `cultivar x bench(light)`; `residual` for the residual. A term that is a unit
    /// with no factor of its own goes by the unit's name (`plot` for block x nitrogen),
    /// and so does the residual of a layout of units.
    pub fn label(&self, structure: &Structure) -> String {
        if let Some(name) = structure.units.alias(self.live) {
            return name.to_string();
        }
        if self.is_residual() {
            return "residual".into();
        }
        self.interaction_label(structure)
    }

    /// The label by factors alone, whatever unit the term is: `block x nitrogen`.
    pub fn interaction_label(&self, structure: &Structure) -> String {
        if self.is_residual() {
            return "residual".into();
        }
        let live = self.live_names(structure).join(" x ");
        if self.nest == 0 {
            live
        } else {
            format!("{live}({})", self.nest_names(structure).join(", "))
        }
    }

    /// The live factors alone (`cultivar x bench`), which identify the term.
    pub fn short_label(&self, structure: &Structure) -> String {
        if let Some(name) = structure.units.alias(self.live) {
            return name.to_string();
        }
        if self.is_residual() {
            return "residual".into();
        }
        self.live_names(structure).join(" x ")
    }

    /// Degrees of freedom: Π(levels - 1) over live factors × Π levels over nesting factors.
    /// The residual's df are not given by this rule; see `Model::residual_df`.
    pub fn df(&self, levels: &Levels) -> u64 {
        let mut df: u64 = 1;
        for (i, &n) in levels.per_factor.iter().enumerate() {
            if self.live & (1 << i) != 0 {
                df *= n - 1;
            } else if self.nest & (1 << i) != 0 {
                df *= n;
            }
        }
        df
    }

    /// Cells of the term: Π levels over its live and nesting factors (the residual: every observation).
    pub fn cells(&self, levels: &Levels) -> u64 {
        let mut c: u64 = if self.is_residual() {
            levels.replicates
        } else {
            1
        };
        for (i, &n) in levels.per_factor.iter().enumerate() {
            if self.subscripts() & (1 << i) != 0 {
                c *= n;
            }
        }
        c
    }
}

/// A live set with factor `dropped` removed and the factors above it renumbered down;
/// `None` when the set holds the dropped factor.
pub fn remap_mask(mask: Mask, dropped: usize) -> Option<Mask> {
    if mask & (1 << dropped) != 0 {
        return None;
    }
    let replicate = mask & REPLICATE;
    let factors = mask & !REPLICATE;
    let low = factors & ((1 << dropped) - 1);
    let high = (factors >> (dropped + 1)) << dropped;
    Some(low | high | replicate)
}

/// Every term of the full model, main effects first, then by order and declaration;
/// omitted interactions are left out. The residual is not included.
pub fn model_terms(structure: &Structure) -> Vec<Term> {
    let all = structure.all_factors();
    let mut terms: Vec<Term> = (1..=all)
        .filter(|&live| {
            structure
                .factors
                .iter()
                .enumerate()
                .all(|(i, f)| live & (1 << i) == 0 || f.ancestors & live == 0)
        })
        .filter(|&live| !structure.is_omitted(live))
        .map(|live| term_of(structure, live))
        .collect();
    terms.sort_by_key(|t| {
        let indices: Vec<u32> = (0..32).filter(|i| t.live & (1 << i) != 0).collect();
        (t.live.count_ones(), indices)
    });
    terms
}

/// Parses a term written as its live factors joined by ` x ` (or `×`), optionally
/// followed by its nesting in parentheses: `cultivar x bench(light)`. The live set alone
/// identifies the term; a nesting that is written must be the term's own.
pub fn parse_term_label(structure: &Structure, text: &str) -> Result<Term, String> {
    let text = text.trim();
    if text == "residual" {
        return Ok(Term::residual(structure));
    }
    if let Some(u) = structure.units.by_name(text) {
        return Ok(match u.place {
            crate::layout::Place::Residual => Term::residual(structure),
            _ => term_of(structure, u.live()),
        });
    }
    let (live_text, nest_text) = match text.find('(') {
        Some(open) => {
            let close = text
                .rfind(')')
                .filter(|&c| c == text.len() - 1)
                .ok_or_else(|| {
                    format!("\"{text}\" has an unclosed parenthesis: write e.g. \"bench(light)\"")
                })?;
            (&text[..open], Some(&text[open + 1..close]))
        }
        None => (text, None),
    };
    let live = parse_factor_set(structure, live_text, text)?;
    if live == 0 {
        return Err(format!("\"{text}\" names no factor"));
    }
    for (i, f) in structure.factors.iter().enumerate() {
        if live & (1 << i) != 0 && f.ancestors & live != 0 {
            let inner = structure.names(f.ancestors & live).join(", ");
            return Err(format!(
                "\"{text}\" is not a term: \"{}\" is nested in {inner}, so they cannot be crossed",
                f.name
            ));
        }
    }
    let term = term_of(structure, live);
    if let Some(nest_text) = nest_text {
        let nest = if nest_text.trim().is_empty() {
            0
        } else {
            parse_factor_set(structure, nest_text, text)?
        };
        if nest != term.nest {
            return Err(format!(
                "\"{text}\" gives the wrong nesting: the term is {}",
                term.label(structure)
            ));
        }
    }
    Ok(term)
}

fn parse_factor_set(structure: &Structure, part: &str, whole: &str) -> Result<Mask, String> {
    let mut mask = 0;
    let normalised = part.replace(['×', ','], " x ");
    for name in normalised.split(" x ").map(str::trim) {
        if name.is_empty() {
            return Err(format!(
                "\"{whole}\" has an empty factor name: join factors with \" x \", e.g. \"cultivar x light\""
            ));
        }
        let i = structure.factor_index(name).ok_or_else(|| {
            let units: Vec<&str> = structure
                .units
                .list
                .iter()
                .map(|u| u.name.as_str())
                .collect();
            let known = if units.is_empty() {
                structure.known_names()
            } else {
                format!("{}; units: {}", structure.known_names(), units.join(", "))
            };
            format!("\"{whole}\" names \"{name}\", which is not a factor (known: {known})")
        })?;
        if mask & (1 << i) != 0 {
            return Err(format!("\"{whole}\" names \"{name}\" twice"));
        }
        mask |= 1 << i;
    }
    Ok(mask)
}
