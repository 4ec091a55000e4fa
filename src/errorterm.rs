//! The error term of every term: the mean square (or combination of mean squares) whose
//! expectation equals E(MS) of the term less the term's own component.
//!
//! A term T with E(MS_T) = Σ_U c_U θ_U is tested by the ratio of MS_T to a denominator D
//! with E(D) = E(MS_T) - c_T θ_T, identically in every component. The test is
//!
//! - `exact` when one estimable mean square is such a D (an F ratio);
//! - `synthetic` when only a linear combination Σ w_V MS_V is (a quasi-F ratio,
//!   Satterthwaite 1946 for its df); the combination with the fewest mean squares is
//!   preferred, and the weights are solved exactly over the rationals;
//! - `untestable` when no combination exists;
//! - `not_estimable` when the term has 0 df.
//!
//! Candidate mean squares are those of terms with df > 0 whose expected mean squares
//! hold only components of the target: the classical construction of quasi-F
//! denominators (e.g. Montgomery, Design and Analysis of Experiments, chapter on random
//! and mixed models).

use itertools::Itertools;
use num_traits::{CheckedDiv, CheckedMul, CheckedSub, Signed, Zero};
use serde::Serialize;

use crate::ems::{Ems, Model, Rational};

#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Verdict {
    Exact,
    Synthetic,
    Untestable,
    NotEstimable,
}

impl Verdict {
    pub fn name(self) -> &'static str {
        match self {
            Verdict::Exact => "exact",
            Verdict::Synthetic => "synthetic",
            Verdict::Untestable => "untestable",
            Verdict::NotEstimable => "not_estimable",
        }
    }

    pub fn is_testable(self) -> bool {
        matches!(self, Verdict::Exact | Verdict::Synthetic)
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

/// How many subsets of candidate mean squares to try before settling for the
/// combination that elimination gives (valid, but maybe not the shortest).
const SUBSET_BUDGET: usize = 20_000;

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
    let in_target = |c: usize| target.iter().any(|(tc, _)| *tc == c);
    let candidates: Vec<usize> = (0..model.terms.len())
        .filter(|&v| v != t && df[v] > 0)
        .filter(|&v| ems.rows[v].iter().all(|(c, _)| in_target(*c)))
        .collect();

    if let Some(&v) = candidates.iter().find(|&&v| ems.rows[v] == target) {
        return ErrorTerm {
            verdict: Verdict::Exact,
            denominator: vec![(v, Rational::from_integer(1))],
            isolated: Vec::new(),
        };
    }

    let isolated: Vec<usize> = target
        .iter()
        .map(|(c, _)| *c)
        .filter(|&c| {
            !candidates
                .iter()
                .any(|&v| ems.rows[v].iter().any(|(vc, _)| *vc == c))
        })
        .collect();
    let untestable = |isolated: Vec<usize>| ErrorTerm {
        verdict: Verdict::Untestable,
        denominator: Vec::new(),
        isolated,
    };
    if !isolated.is_empty() {
        return untestable(isolated);
    }

    let components: Vec<usize> = target.iter().map(|(c, _)| *c).collect();
    let column =
        |v: usize| -> Vec<Rational> { components.iter().map(|&c| ems.coefficient(v, c)).collect() };
    let rhs: Vec<Rational> = target.iter().map(|(_, v)| *v).collect();

    let mut tried = 0usize;
    for size in 2..=candidates.len().min(4) {
        for subset in candidates.iter().copied().combinations(size) {
            tried += 1;
            if tried > SUBSET_BUDGET {
                break;
            }
            let columns: Vec<Vec<Rational>> = subset.iter().map(|&v| column(v)).collect();
            if let Some(w) = solve(&columns, &rhs)
                && w.iter().all(|x| !x.is_zero())
            {
                return ErrorTerm {
                    verdict: Verdict::Synthetic,
                    denominator: subset.into_iter().zip(w).collect(),
                    isolated: Vec::new(),
                };
            }
        }
        if tried > SUBSET_BUDGET {
            break;
        }
    }
    // Fall back on elimination over every candidate: a basic solution, if one exists.
    let columns: Vec<Vec<Rational>> = candidates.iter().map(|&v| column(v)).collect();
    match solve(&columns, &rhs) {
        Some(w) => {
            let denominator: Vec<(usize, Rational)> = candidates
                .iter()
                .copied()
                .zip(w)
                .filter(|(_, x)| !x.is_zero())
                .collect();
            ErrorTerm {
                verdict: Verdict::Synthetic,
                denominator,
                isolated: Vec::new(),
            }
        }
        None => untestable(Vec::new()),
    }
}

/// Solves Σ_k w_k columns[k] = rhs exactly. Returns a basic solution (free variables at
/// zero) or `None` when the system is inconsistent or the arithmetic would overflow.
pub fn solve(columns: &[Vec<Rational>], rhs: &[Rational]) -> Option<Vec<Rational>> {
    let rows = rhs.len();
    let cols = columns.len();
    // Augmented matrix, row-major.
    let mut m: Vec<Vec<Rational>> = (0..rows)
        .map(|r| {
            let mut row: Vec<Rational> = columns.iter().map(|c| c[r]).collect();
            row.push(rhs[r]);
            row
        })
        .collect();
    let mut pivots: Vec<(usize, usize)> = Vec::new();
    let mut r = 0;
    for c in 0..cols {
        if r == rows {
            break;
        }
        let Some(p) = (r..rows).find(|&i| !m[i][c].is_zero()) else {
            continue;
        };
        m.swap(r, p);
        let pivot = m[r][c];
        for k in c..=cols {
            m[r][k] = m[r][k].checked_div(&pivot)?;
        }
        for i in 0..rows {
            if i != r && !m[i][c].is_zero() {
                let factor = m[i][c];
                for k in c..=cols {
                    let d = m[r][k].checked_mul(&factor)?;
                    m[i][k] = m[i][k].checked_sub(&d)?;
                }
            }
        }
        pivots.push((r, c));
        r += 1;
    }
    if (r..rows).any(|i| !m[i][cols].is_zero()) {
        return None;
    }
    let mut w = vec![Rational::zero(); cols];
    for (row, col) in pivots {
        w[col] = m[row][cols];
    }
    Some(w)
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

/// A denominator written out: `bench(light)`, or `MS[a x b] + MS[a x c] - MS[a x b x c]`.
pub fn denominator_text(parts: &[(String, Rational)]) -> String {
    if let [(label, w)] = parts
        && *w == Rational::from_integer(1)
    {
        return label.clone();
    }
    parts
        .iter()
        .enumerate()
        .map(|(k, (label, w))| {
            let sign = match (k, w.is_negative()) {
                (0, false) => "",
                (0, true) => "-",
                (_, false) => " + ",
                (_, true) => " - ",
            };
            let mag = w.abs();
            let mag = if mag == Rational::from_integer(1) {
                String::new()
            } else {
                format!("{}·", weight_text(&mag))
            };
            format!("{sign}{mag}MS[{label}]")
        })
        .collect()
}

/// Whether every weight is positive (a denominator that cannot go negative).
pub fn all_positive(denominator: &[(usize, Rational)]) -> bool {
    denominator.iter().all(|(_, w)| w.is_positive())
}
