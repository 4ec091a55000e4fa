//! Error terms from synthesised (floating-point) expected mean squares.
//!
//! The denominator of term T is a linear combination D = Σ w_V MS_V of other mean squares
//! with E(D) equal to E(MS_T) less T's own component, identically in the components. For a
//! fixed term, every fixed component of E(MS_T) is part of what its test tests (with
//! sequential sums of squares in an unbalanced layout a fixed term's mean square may carry
//! later fixed terms' components; see the findings), so the denominator matches its
//! random components. Coefficients are floats: two expectations match when no coefficient
//! differs by more than `MATCH_TOLERANCE` of the target's largest.
//!
//! - One mean square that matches: `exact` (an F ratio).
//! - Otherwise the weights are found by least squares over the candidate mean squares (those
//!   with df whose expectations hold only components of the target), the fit is verified,
//!   and candidates are dropped one at a time, smallest weight first, while the rest still
//!   match: `synthetic` (a quasi-F ratio, Satterthwaite 1946 for its df).
//! - No combination matches: `untestable`; a term with 0 df is `not_estimable`.

use nalgebra::{DMatrix, DVector};

use crate::ems::Model;
use crate::errorterm::Verdict;
use crate::layout::Kind;

use super::fit::SynthesisEms;

/// Relative tolerance of a match between expected mean squares.
pub const MATCH_TOLERANCE: f64 = 1e-9;

/// How a term is tested: the verdict and the denominator as (term, weight) pairs.
#[derive(Debug, Clone, PartialEq)]
pub struct SynthesisTest {
    pub verdict: Verdict,
    pub denominator: Vec<(usize, f64)>,
    /// Components of the target that no candidate mean square carries.
    pub isolated: Vec<usize>,
}

impl SynthesisTest {
    fn untestable(isolated: Vec<usize>) -> Self {
        SynthesisTest {
            verdict: Verdict::Untestable,
            denominator: Vec::new(),
            isolated,
        }
    }
}

/// E(MS_T) less what its test tests: T's own component, and for a fixed T every fixed one.
pub fn target(model: &Model, ems: &SynthesisEms, t: usize) -> Vec<(usize, f64)> {
    ems.rows[t]
        .iter()
        .filter(|(c, _)| *c != t)
        .filter(|(c, _)| {
            model.kinds[t] == Kind::Random
                || *c == model.residual()
                || model.kinds[*c] == Kind::Random
        })
        .copied()
        .collect()
}

/// The error term of every term; `None` for the residual.
pub fn error_terms(model: &Model, ems: &SynthesisEms, df: &[u64]) -> Vec<Option<SynthesisTest>> {
    (0..model.terms.len())
        .map(|t| (t != model.residual()).then(|| error_term(model, ems, df, t)))
        .collect()
}

fn largest(row: &[(usize, f64)]) -> f64 {
    row.iter().fold(0.0f64, |a, (_, x)| a.max(x.abs()))
}

/// Largest coefficient difference between Σ w_V E(MS_V) and the target.
fn misfit(
    ems: &SynthesisEms,
    target: &[(usize, f64)],
    weights: &[(usize, f64)],
    size: usize,
) -> f64 {
    let mut sum = vec![0.0; size];
    for &(v, w) in weights {
        for &(c, x) in &ems.rows[v] {
            sum[c] += w * x;
        }
    }
    for &(c, x) in target {
        sum[c] -= x;
    }
    sum.iter().fold(0.0f64, |a, x| a.max(x.abs()))
}

/// Least-squares weights of `chosen` mean squares for the target.
fn solve(
    ems: &SynthesisEms,
    target: &[(usize, f64)],
    chosen: &[usize],
    size: usize,
) -> Vec<(usize, f64)> {
    let a = DMatrix::from_fn(size, chosen.len(), |c, j| ems.coefficient(chosen[j], c));
    let mut b = DVector::zeros(size);
    for &(c, x) in target {
        b[c] = x;
    }
    let svd = a.svd(true, true);
    match svd.solve(&b, 1e-12) {
        Ok(w) => chosen.iter().zip(w.iter()).map(|(&v, &x)| (v, x)).collect(),
        Err(_) => Vec::new(),
    }
}

/// The error term of one term.
pub fn error_term(model: &Model, ems: &SynthesisEms, df: &[u64], t: usize) -> SynthesisTest {
    if df[t] == 0 || ems.rows[t].is_empty() {
        return SynthesisTest {
            verdict: Verdict::NotEstimable,
            denominator: Vec::new(),
            isolated: Vec::new(),
        };
    }
    let size = model.terms.len();
    let target = target(model, ems, t);
    let tolerance = MATCH_TOLERANCE * largest(&target).max(1.0);
    let mut in_target = vec![false; size];
    for &(c, _) in &target {
        in_target[c] = true;
    }
    let candidates: Vec<usize> = (0..size)
        .filter(|&v| v != t && df[v] > 0 && !ems.rows[v].is_empty())
        .filter(|&v| ems.rows[v].iter().all(|(c, _)| in_target[*c]))
        .collect();
    if let Some(&v) = candidates
        .iter()
        .find(|&&v| misfit(ems, &target, &[(v, 1.0)], size) <= tolerance)
    {
        return SynthesisTest {
            verdict: Verdict::Exact,
            denominator: vec![(v, 1.0)],
            isolated: Vec::new(),
        };
    }
    let mut carried = vec![false; size];
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
    if !isolated.is_empty() {
        return SynthesisTest::untestable(isolated);
    }
    let mut chosen = candidates;
    let mut weights = solve(ems, &target, &chosen, size);
    if weights.is_empty() || misfit(ems, &target, &weights, size) > tolerance {
        return SynthesisTest::untestable(Vec::new());
    }
    // Fewest mean squares: drop candidates, smallest weight first, while the rest match.
    loop {
        let mut by_size: Vec<(usize, f64)> = weights.clone();
        by_size.sort_by(|a, b| a.1.abs().total_cmp(&b.1.abs()));
        let mut dropped = false;
        for (v, _) in by_size {
            let rest: Vec<usize> = chosen.iter().copied().filter(|&u| u != v).collect();
            if rest.is_empty() {
                continue;
            }
            let w = solve(ems, &target, &rest, size);
            if !w.is_empty() && misfit(ems, &target, &w, size) <= tolerance {
                chosen = rest;
                weights = w;
                dropped = true;
                break;
            }
        }
        if !dropped {
            break;
        }
    }
    weights.retain(|(_, w)| w.abs() > tolerance);
    weights.sort_by_key(|(v, _)| *v);
    let verdict = if weights.len() == 1 && (weights[0].1 - 1.0).abs() <= tolerance {
        Verdict::Exact
    } else {
        Verdict::QuasiF
    };
    SynthesisTest {
        verdict,
        denominator: weights,
        isolated: Vec::new(),
    }
}
