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
use num_traits::{CheckedAdd, CheckedMul, One, Zero};

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
    /// Terms assumed absent. Each one's sum of squares and df join the smallest remaining
    /// random term that contains it (the next stratum up), or the residual.
    pub omitted: Vec<Term>,
    /// For each omitted term, the index of the term it is pooled into.
    pub pooled_into: Vec<usize>,
    /// For each omitted term, its symbolic E(MS) without its own component: what its
    /// mean square would estimate, pooled into its target's.
    pub omitted_rows: Vec<Vec<SymbolicEntry>>,
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
        let omitted: Vec<Term> = structure
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

        // A unit's variation is the unit's, not an interaction: a plot effect does not sum
        // to zero over the treatments randomised to plots, so a unit term follows the
        // unrestricted rule under either convention (the randomisation model of Nelder
        // 1965, Proc. Royal Society A 283:147-178).
        let row_of = |t: &Term| -> Vec<SymbolicEntry> {
            let mut row = Vec::new();
            for (u_index, u) in terms.iter().enumerate() {
                if t.subscripts() & !u.subscripts() != 0 {
                    continue;
                }
                let uncovered_live = u.live & !t.live;
                let fixed_uncovered = uncovered_live & fixed_mask;
                let restricted = structure.convention == Convention::Restricted
                    && !structure.units.is_unit_term(u.live);
                let constrained = if restricted {
                    fixed_uncovered != 0
                } else {
                    kinds[u_index] == Kind::Fixed && fixed_uncovered != 0
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
        };
        let rows = terms.iter().map(row_of).collect();
        let omitted_rows = omitted.iter().map(row_of).collect();
        let pooled_into = omitted
            .iter()
            .map(|o| pool_target(&terms, &kinds, o))
            .collect();
        Model {
            structure: structure.clone(),
            terms,
            kinds,
            omitted,
            pooled_into,
            omitted_rows,
            rows,
        }
    }

    /// Indices of the omitted terms pooled into term `t`.
    pub fn pooled(&self, t: usize) -> impl Iterator<Item = usize> + '_ {
        (0..self.omitted.len()).filter(move |&o| self.pooled_into[o] == t)
    }

    /// Whether some omitted term is pooled into a term other than the residual.
    pub fn pools_above_residual(&self) -> bool {
        self.pooled_into.iter().any(|&t| t != self.residual())
    }

    pub fn residual(&self) -> usize {
        self.terms.len() - 1
    }

    /// Degrees of freedom of every term; the residual gets cells × (replicates - 1), and
    /// each term the df of the omitted interactions pooled into it.
    pub fn df(&self, levels: &Levels) -> Vec<u64> {
        let mut df: Vec<u64> = (0..self.terms.len())
            .map(|t| self.own_df(t, levels))
            .collect();
        for (o, &t) in self.omitted.iter().zip(&self.pooled_into) {
            df[t] += o.df(levels);
        }
        df
    }

    /// A term's df before anything is pooled into it: the term's own, or for the
    /// residual cells × (replicates - 1).
    pub fn own_df(&self, t: usize, levels: &Levels) -> u64 {
        if t == self.residual() {
            levels.cells() * (levels.replicates - 1)
        } else {
            self.terms[t].df(levels)
        }
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
        let numeric = |row: &[SymbolicEntry]| -> Result<Vec<(usize, Rational)>, Overflow> {
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
                    let big_n = self.structure.factors[j as usize].population.unwrap_or(0) as i128;
                    let f = Rational::new(big_n - n, big_n);
                    c = c.checked_mul(&f).ok_or(Overflow)?;
                }
                if !c.is_zero() {
                    out.push((e.component, c));
                }
            }
            Ok(out)
        };
        let mut rows = self
            .rows
            .iter()
            .map(|row| numeric(row))
            .collect::<Result<Vec<_>, Overflow>>()?;
        if !self.omitted.is_empty() {
            // A pooled mean square (SS_T + Σ SS_O) / (df_T + Σ df_O) has the df-weighted
            // mean of the expectations: (df_T E(MS_T) + Σ df_O E(MS_O)) / (df_T + Σ df_O).
            let df = self.df(levels);
            for t in 0..self.terms.len() {
                let pooled: Vec<usize> = self.pooled(t).collect();
                if pooled.is_empty() || t == self.residual() && self.pooled_rows_are_sigma(t) {
                    continue;
                }
                let own = self.own_df(t, levels);
                let total = Rational::from_integer(df[t] as i128);
                if total.is_zero() {
                    continue;
                }
                let mut sum: Vec<(usize, Rational)> = Vec::new();
                let mut add = |row: &[(usize, Rational)], weight: u64| -> Result<(), Overflow> {
                    let w = Rational::from_integer(weight as i128) / total;
                    for &(c, v) in row {
                        let x = v.checked_mul(&w).ok_or(Overflow)?;
                        match sum.iter_mut().find(|(k, _)| *k == c) {
                            Some((_, acc)) => *acc = acc.checked_add(&x).ok_or(Overflow)?,
                            None => sum.push((c, x)),
                        }
                    }
                    Ok(())
                };
                add(&rows[t], own)?;
                for o in pooled {
                    add(&numeric(&self.omitted_rows[o])?, self.omitted[o].df(levels))?;
                }
                sum.sort_by_key(|(c, _)| *c);
                sum.retain(|(_, v)| !v.is_zero());
                rows[t] = sum;
            }
        }
        Ok(Ems { rows })
    }

    /// Whether every term pooled into `t` estimates σ² alone, as the residual does.
    fn pooled_rows_are_sigma(&self, t: usize) -> bool {
        let residual = self.residual();
        self.pooled(t)
            .all(|o| self.omitted_rows[o].iter().all(|e| e.component == residual))
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

/// The term an omitted term is pooled into: the smallest remaining random term whose
/// subscripts include its own (the next stratum up). When several are smallest, the
/// smallest term containing all of them; the residual contains every term.
fn pool_target(terms: &[Term], kinds: &[Kind], omitted: &Term) -> usize {
    let residual = terms.len() - 1;
    let containing: Vec<usize> = (0..residual)
        .filter(|&u| kinds[u] == Kind::Random && omitted.subscripts() & !terms[u].subscripts() == 0)
        .collect();
    let below = |a: usize, b: usize| a != b && terms[b].subscripts() & !terms[a].subscripts() == 0;
    let smallest: Vec<usize> = containing
        .iter()
        .copied()
        .filter(|&u| !containing.iter().any(|&v| below(u, v)))
        .collect();
    match smallest.as_slice() {
        [] => residual,
        [one] => *one,
        many => {
            let all = many.iter().fold(0, |m, &u| m | terms[u].subscripts());
            containing
                .iter()
                .copied()
                .filter(|&u| all & !terms[u].subscripts() == 0)
                .min_by_key(|&u| terms[u].subscripts().count_ones())
                .unwrap_or(residual)
        }
    }
}

/// Indices of the set bits of a mask.
pub fn bits(mask: Mask) -> impl Iterator<Item = u32> {
    (0..32u32).filter(move |j| mask & (1 << j) != 0)
}
