//! The error term of every term: the mean square (or combination of mean squares) whose
//! expectation equals E(MS) of the term less the term's own component.
//!
//! A term T with E(MS_T) = Σ_U c_U θ_U is tested by the ratio of MS_T to a denominator D
//! with E(D) = E(MS_T) - c_T θ_T, identically in every component. The test is
//!
//! - `exact` when one estimable mean square is such a D (an F ratio);
//! - `quasi_f` when only a linear combination Σ w_V MS_V is (a quasi-F ratio,
//!   Satterthwaite 1946 for its df); the combination with the fewest mean squares is
//!   preferred, and the weights are solved exactly over the rationals;
//! - `untestable` when no combination exists;
//! - `not_estimable` when the term has 0 df.
//!
//! Candidate mean squares are those of terms with df > 0 whose expected mean squares
//! hold only components of the target: the classical construction of quasi-F
//! denominators (e.g. Montgomery, Design and Analysis of Experiments, chapter on random
//! and mixed models).
//!
//! The weights need no search. Component U appears in E(MS_V) only when U's subscripts
//! include V's, and every candidate V carries its own component with a non-zero
//! coefficient, so the candidates' expected mean squares form a triangular system in the
//! containment order of their subscripts. Taken from the fewest subscripts up, each
//! candidate's weight is fixed by the coefficient of its own component:
//!
//! w_V = (t_V - Σ_{V' ⊊ V} w_V' c_{V'V}) / c_{VV},
//!
//! and the remaining components (those of terms without a mean square) only check that
//! the combination holds. The solution, when it exists, is unique among the candidates,
//! so it is also the one with the fewest mean squares; one weight of 1 is an exact test.

use num_traits::{CheckedAdd, CheckedDiv, CheckedMul, CheckedSub, Signed, Zero};
use serde::Serialize;

use crate::ems::{Ems, Model, Rational};

#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Verdict {
    /// One mean square is the error term: an F ratio.
    Exact,
    /// Only a combination of mean squares is: a quasi-F ratio (an approximate F test).
    QuasiF,
    /// No mean square or combination has the expectation needed.
    Untestable,
    /// The term has 0 df.
    NotEstimable,
}

impl Verdict {
    pub fn is_testable(self) -> bool {
        matches!(self, Verdict::Exact | Verdict::QuasiF)
    }
}

/// How a term is tested: the verdict and the denominator as (term index, weight) pairs.
#[derive(Debug, Clone, PartialEq)]
pub struct ErrorTerm {
    pub verdict: Verdict,
    pub denominator: Vec<(usize, Rational)>,
    /// Components of the target that no other estimable mean square carries.
    pub isolated: Vec<usize>,
}

/// The error term of every term; `None` for the residual, which is not tested.
pub fn error_terms(model: &Model, ems: &Ems, df: &[u64]) -> Vec<Option<ErrorTerm>> {
    (0..model.terms.len())
        .map(|t| {
            if t == model.residual() {
                None
            } else {
                Some(error_term(model, ems, df, t))
            }
        })
        .collect()
}

/// The error term of one term.
pub fn error_term(model: &Model, ems: &Ems, df: &[u64], t: usize) -> ErrorTerm {
    if df[t] == 0 {
        return ErrorTerm {
            verdict: Verdict::NotEstimable,
            denominator: Vec::new(),
            isolated: Vec::new(),
        };
    }
    let target: Vec<(usize, Rational)> = ems.rows[t]
        .iter()
        .filter(|(c, _)| *c != t)
        .copied()
        .collect();
    let mut in_target = vec![false; model.terms.len()];
    for &(c, _) in &target {
        in_target[c] = true;
    }
    let candidates: Vec<usize> = (0..model.terms.len())
        .filter(|&v| v != t && df[v] > 0 && in_target[v])
        .filter(|&v| ems.rows[v].iter().all(|(c, _)| in_target[*c]))
        .collect();

    if let Some(&v) = candidates.iter().find(|&&v| ems.rows[v] == target) {
        return ErrorTerm {
            verdict: Verdict::Exact,
            denominator: vec![(v, Rational::from_integer(1))],
            isolated: Vec::new(),
        };
    }

    let mut carried = vec![false; model.terms.len()];
    for &v in &candidates {
        for &(c, _) in &ems.rows[v] {
            carried[c] = true;
        }
    }
    let isolated: Vec<usize> = target
        .iter()
        .map(|(c, _)| *c)
        .filter(|&c| !carried[c])
        .collect();
    let untestable = |isolated: Vec<usize>| ErrorTerm {
        verdict: Verdict::Untestable,
        denominator: Vec::new(),
        isolated,
    };
    let pooled_above = model.pools_above_residual();
    if !isolated.is_empty() && !pooled_above {
        return untestable(isolated);
    }

    // A mean square pooled above the residual mixes in components of the terms pooled
    // into it, which breaks the containment order: solve the system in general then.
    let solved = triangular_weights(model, ems, &target, &candidates)
        .filter(|w| !pooled_above || reproduces(ems, t, w))
        .or_else(|| {
            let every: Vec<usize> = (0..model.terms.len())
                .filter(|&v| v != t && df[v] > 0)
                .collect();
            pooled_above
                .then(|| general_weights(ems, &target, &every))
                .flatten()
                .filter(|w| reproduces(ems, t, w))
        });
    match solved {
        Some(denominator)
            if denominator.len() == 1 && denominator[0].1 == Rational::from_integer(1) =>
        {
            ErrorTerm {
                verdict: Verdict::Exact,
                denominator,
                isolated: Vec::new(),
            }
        }
        Some(denominator) if !denominator.is_empty() => ErrorTerm {
            verdict: Verdict::QuasiF,
            denominator,
            isolated: Vec::new(),
        },
        _ => untestable(isolated),
    }
}

/// Solves Σ_V w_V E(MS_V) = target by back-substitution in the containment order (see the
/// module notes). Returns the non-zero weights, or `None` when the combination does not
/// exist or the arithmetic would overflow.
fn triangular_weights(
    model: &Model,
    ems: &Ems,
    target: &[(usize, Rational)],
    candidates: &[usize],
) -> Option<Vec<(usize, Rational)>> {
    let size = |c: usize| model.terms[c].subscripts().count_ones();
    let mut order: Vec<usize> = target.iter().map(|(c, _)| *c).collect();
    order.sort_by_key(|&c| size(c));
    let mut want = vec![Rational::zero(); model.terms.len()];
    for &(c, v) in target {
        want[c] = v;
    }
    // acc[U] = Σ over solved candidates V of w_V × c_{VU}.
    let mut acc = vec![Rational::zero(); model.terms.len()];
    let mut is_candidate = vec![false; model.terms.len()];
    for &v in candidates {
        is_candidate[v] = true;
    }
    let mut weights = Vec::new();
    for u in order {
        let residual = want[u].checked_sub(&acc[u])?;
        if !is_candidate[u] {
            if !residual.is_zero() {
                return None;
            }
            continue;
        }
        let own = ems.coefficient(u, u);
        let w = residual.checked_div(&own)?;
        if w.is_zero() {
            continue;
        }
        for &(c, x) in &ems.rows[u] {
            acc[c] = acc[c].checked_add(&w.checked_mul(&x)?)?;
        }
        weights.push((u, w));
    }
    weights.sort_by_key(|(v, _)| *v);
    Some(weights)
}

/// Solves Σ_V w_V E(MS_V) = target over the candidates by Gaussian elimination with
/// exact rationals (free weights set to zero). `None` when no combination exists or the
/// arithmetic would overflow.
fn general_weights(
    ems: &Ems,
    target: &[(usize, Rational)],
    candidates: &[usize],
) -> Option<Vec<(usize, Rational)>> {
    let mut components: Vec<usize> = target.iter().map(|(c, _)| *c).collect();
    for &v in candidates {
        components.extend(ems.rows[v].iter().map(|(c, _)| *c));
    }
    components.sort_unstable();
    components.dedup();
    let n = candidates.len();
    // Augmented rows: one equation per component.
    let mut m: Vec<Vec<Rational>> = components
        .iter()
        .map(|&c| {
            let mut row: Vec<Rational> =
                candidates.iter().map(|&v| ems.coefficient(v, c)).collect();
            row.push(
                target
                    .iter()
                    .find(|(x, _)| *x == c)
                    .map_or_else(Rational::zero, |(_, v)| *v),
            );
            row
        })
        .collect();
    let mut pivots: Vec<(usize, usize)> = Vec::new();
    let mut r = 0;
    for col in 0..n {
        let Some(p) = (r..m.len()).find(|&i| !m[i][col].is_zero()) else {
            continue;
        };
        m.swap(r, p);
        let lead = m[r][col];
        for x in m[r].iter_mut() {
            *x = x.checked_div(&lead)?;
        }
        let pivot_row = m[r].clone();
        for (i, row) in m.iter_mut().enumerate() {
            if i != r && !row[col].is_zero() {
                let f = row[col];
                for (x, p) in row.iter_mut().zip(&pivot_row) {
                    *x = x.checked_sub(&f.checked_mul(p)?)?;
                }
            }
        }
        pivots.push((r, col));
        r += 1;
    }
    if m[r..].iter().any(|row| !row[n].is_zero()) {
        return None;
    }
    let mut weights: Vec<(usize, Rational)> = pivots
        .iter()
        .filter(|(row, _)| !m[*row][n].is_zero())
        .map(|&(row, col)| (candidates[col], m[row][n]))
        .collect();
    weights.sort_by_key(|(v, _)| *v);
    Some(weights)
}

/// True when Σ w_V E(MS_V) equals E(MS_T) less T's own component, identically.
pub fn reproduces(ems: &Ems, t: usize, denominator: &[(usize, Rational)]) -> bool {
    let mut sum: std::collections::BTreeMap<usize, Rational> = Default::default();
    for &(v, w) in denominator {
        for &(c, x) in &ems.rows[v] {
            *sum.entry(c).or_insert_with(Rational::zero) += w * x;
        }
    }
    sum.retain(|_, x| !x.is_zero());
    let target: std::collections::BTreeMap<usize, Rational> = ems.rows[t]
        .iter()
        .filter(|(c, _)| *c != t)
        .copied()
        .collect();
    sum == target
}

/// A weight written for people: `1`, `-1`, `3/2`.
pub fn weight_text(w: &Rational) -> String {
    if w.is_integer() {
        w.to_integer().to_string()
    } else {
        format!("{}/{}", w.numer(), w.denom())
    }
}

/// Whether every weight is positive (a denominator that cannot go negative).
pub fn all_positive(denominator: &[(usize, Rational)]) -> bool {
    denominator.iter().all(|(_, w)| w.is_positive())
}
