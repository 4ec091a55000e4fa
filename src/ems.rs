//! Expected mean squares of a balanced layout, symbolic and numeric.
//!
//! The symbolic rule is the tableau of subscripts (Bennett and Franklin 1954, Statistical
//! Analysis in Chemistry and the Chemical Industry; Cornfield and Tukey 1956, Annals of
//! Mathematical Statistics 27:907-949). Rows are components (one per term, plus the
//! residual), columns are subscripts (one per factor, plus the replicate). For component U
//! and subscript j the entry is
//!
//! - n_j, the level count, when j is not a subscript of U;
//! - 1 when j is a nesting subscript of U;
//! - 1 - n_j/N_j when j is live in U: 0 for a fixed factor, 1 for a random factor drawn
//!   from an infinite population, in between for a finite population of N_j.
//!
//! Component U appears in E(MS_T) when U's subscripts include all of T's; its coefficient
//! is the product of U's entries over the columns that are not live in T. Under the
//! unrestricted convention a random component has no sum-to-zero constraint across its
//! fixed subscripts, so their entries are 1 instead of 0 (a fixed component, all of whose
//! subscripts are fixed, still appears only in its own mean square).
//!
//! `Model` holds the symbolic form, computed once per structure; `Model::ems` plugs in the
//! level counts. The design search depends on that split.

use num_rational::Ratio;
use num_traits::{CheckedMul, One, Zero};

use crate::layout::{Convention, Kind, Levels, Structure};
use crate::term::{Mask, REPLICATE, Term, model_terms};

pub type Rational = Ratio<i128>;

/// One symbolic entry: component `component` appears with coefficient
/// Π_{j ∈ multiply} n_j × Π_{j ∈ finite} (1 - n_j/N_j).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct SymbolicEntry {
    pub component: usize,
    /// Subscripts whose level counts multiply (the replicate bit means the replicates).
    pub multiply: Mask,
    /// Live random subscripts of the component with a finite population.
    pub finite: Mask,
}

/// The symbolic model of a structure: its terms (residual last) and expected mean squares.
#[derive(Debug, Clone)]
pub struct Model {
    pub structure: Structure,
    pub terms: Vec<Term>,
    pub kinds: Vec<Kind>,
    /// Terms assumed absent, whose df pool into the residual.
    pub omitted: Vec<Term>,
    pub rows: Vec<Vec<SymbolicEntry>>,
}

/// Numeric expected mean squares: for each term, its components with their coefficients,
/// sorted by component index. Coefficients are exact rationals and never zero.
#[derive(Debug, Clone, PartialEq)]
pub struct Ems {
    pub rows: Vec<Vec<(usize, Rational)>>,
}

#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error("the layout's counts are too large for exact arithmetic: reduce the level counts")]
pub struct Overflow;

impl Model {
    pub fn new(structure: &Structure) -> Model {
        let mut terms = model_terms(structure);
        terms.push(Term::residual(structure));
        let omitted = structure
            .omitted
            .iter()
            .map(|&live| crate::layout::term_of(structure, live))
            .collect();
        let kinds: Vec<Kind> = terms.iter().map(|t| t.kind(structure)).collect();
        let fixed_mask: Mask = structure
            .factors
            .iter()
            .enumerate()
            .filter(|(_, f)| f.kind == Kind::Fixed)
            .fold(0, |m, (i, _)| m | (1 << i));
        let finite_mask: Mask = structure
            .factors
            .iter()
            .enumerate()
            .filter(|(_, f)| f.kind == Kind::Random && f.population.is_some())
            .fold(0, |m, (i, _)| m | (1 << i));
        let all_subscripts = structure.all_factors() | REPLICATE;

        let rows = terms
            .iter()
            .map(|t| {
                let mut row = Vec::new();
                for (u_index, u) in terms.iter().enumerate() {
                    if t.subscripts() & !u.subscripts() != 0 {
                        continue;
                    }
                    let uncovered_live = u.live & !t.live;
                    let fixed_uncovered = uncovered_live & fixed_mask;
                    let constrained = match structure.convention {
                        Convention::Restricted => fixed_uncovered != 0,
                        Convention::Unrestricted => {
                            kinds[u_index] == Kind::Fixed && fixed_uncovered != 0
                        }
                    };
                    if constrained {
                        continue;
                    }
                    row.push(SymbolicEntry {
                        component: u_index,
                        multiply: all_subscripts & !u.subscripts(),
                        finite: uncovered_live & finite_mask,
                    });
                }
                row
            })
            .collect();
        Model {
            structure: structure.clone(),
            terms,
            kinds,
            omitted,
            rows,
        }
    }

    pub fn residual(&self) -> usize {
        self.terms.len() - 1
    }

    /// Degrees of freedom of every term; the residual gets cells × (replicates - 1)
    /// plus the df of the omitted interactions.
    pub fn df(&self, levels: &Levels) -> Vec<u64> {
        let mut df: Vec<u64> = self.terms.iter().map(|t| t.df(levels)).collect();
        let pooled: u64 = self.omitted.iter().map(|t| t.df(levels)).sum();
        df[self.residual()] = levels.cells() * (levels.replicates - 1) + pooled;
        df
    }

    /// Numeric expected mean squares at these level counts. Components whose coefficient
    /// is zero (a finite population fully sampled) are dropped.
    pub fn ems(&self, levels: &Levels) -> Result<Ems, Overflow> {
        let count = |j: u32| -> i128 {
            if 1u32 << j == REPLICATE {
                levels.replicates as i128
            } else {
                levels.per_factor[j as usize] as i128
            }
        };
        let rows = self
            .rows
            .iter()
            .map(|row| {
                let mut out = Vec::with_capacity(row.len());
                for e in row {
                    let mut c = Rational::one();
                    for j in bits(e.multiply) {
                        c = c
                            .checked_mul(&Rational::from_integer(count(j)))
                            .ok_or(Overflow)?;
                    }
                    for j in bits(e.finite) {
                        let n = count(j);
                        let big_n =
                            self.structure.factors[j as usize].population.unwrap_or(0) as i128;
                        let f = Rational::new(big_n - n, big_n);
                        c = c.checked_mul(&f).ok_or(Overflow)?;
                    }
                    if !c.is_zero() {
                        out.push((e.component, c));
                    }
                }
                Ok(out)
            })
            .collect::<Result<Vec<_>, Overflow>>()?;
        Ok(Ems { rows })
    }
}

impl Ems {
    /// The coefficient of `component` in E(MS) of `term` (zero when absent).
    pub fn coefficient(&self, term: usize, component: usize) -> Rational {
        self.rows[term]
            .iter()
            .find(|(c, _)| *c == component)
            .map(|(_, v)| *v)
            .unwrap_or_else(Rational::zero)
    }
}

/// Indices of the set bits of a mask.
pub fn bits(mask: Mask) -> impl Iterator<Item = u32> {
    (0..32u32).filter(move |j| mask & (1 << j) != 0)
}
