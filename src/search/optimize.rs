//! An exact integer program for the cheapest candidate of each structure.
//!
//! Within one structure, the error terms of the must-test terms depend only on which
//! level-count dimensions are at 1 (see `evaluate`), so the level space is split into
//! these *patterns*; a pattern whose error terms fail the testability constraint is
//! rejected whole. In each remaining pattern the program is
//!
//! minimise   cost = overhead + Σ_U price_U × cells_U(n)
//! subject to cost ≤ budget,  df_D(n) ≥ min_df for each exact test's denominator D,
//!            each n_d one of its allowed values,
//!
//! where cells and df are products of one function per factor (n, or n - 1 for a live
//! factor's df). The products are linearised exactly:
//!
//! - each dimension d has one binary x_{d,v} per allowed value v, with Σ_v x_{d,v} = 1;
//! - a product P_k = P_{k-1} × g_k(n_k) is built factor by factor: for each value v a
//!   continuous z_{k,v} with 0 ≤ z_{k,v} ≤ U_{k-1} x_{k,v} and Σ_v z_{k,v} = P_{k-1}, and
//!   P_k = Σ_v g_k(v) z_{k,v}. With x binary, every z but the chosen value's is 0 and that
//!   one equals P_{k-1}, so P_k = g_k(n_k) P_{k-1} exactly (U_{k-1} is the largest value
//!   P_{k-1} can take). This is the disaggregated form of the product of a bounded
//!   variable and a choice among values; no logarithms or relaxations enter.
//!
//! Satterthwaite df and power are not linear. They are checked by exact evaluation
//! (`Screen::evaluate`) of the program's answer: when it fails, a no-good cut
//! Σ_d x_{d,n_d} ≤ D - 1 removes that one candidate and the program is solved again.
//! After a fixed number of cuts the pattern is finished by pruned enumeration under the
//! best cost found so far, so the answer stays exact. Among candidates of equal cost the
//! program collects a few more by cuts and keeps the best by the search's ranking.
//!
//! With a finite population the coefficients carry (1 - n/N), error terms may change
//! with the level counts inside a pattern, and such a structure is enumerated instead.

use good_lp::{Expression, ProblemVariables, Solution, SolverModel, Variable, microlp, variable};
use rayon::prelude::*;

use crate::layout::Levels;
use crate::term::REPLICATE;

use super::enumerate::{Entry, Quiet, enumerate, rank_key};
use super::evaluate::{Criticals, Rejection, Screen};
use super::problem::Problem;
use super::space::{Dim, Target, Variant};
use crate::errorterm::Verdict;

/// No-good cuts per pattern before it is finished by enumeration.
const MAX_CUTS: usize = 48;
/// Further candidates of equal cost looked at for the tie-break.
const MAX_TIES: usize = 8;

/// What the optimizer found.
#[derive(Debug, Clone, Default)]
pub struct Optimized {
    /// The best candidate of each structure that has one, ranked.
    pub best: Vec<Entry>,
    /// The best candidate of each structure, by structure index.
    pub per_structure: Vec<Option<Entry>>,
    /// Integer programs solved.
    pub solves: u64,
    /// Candidates screened exactly (the programs' answers, and any enumeration).
    pub screened: u64,
    /// Screened candidates rejected, by reason: budget, untestable, min_df, power.
    pub rejected: [u64; 5],
    /// Patterns finished by enumeration after too many cuts.
    pub fallbacks: u64,
    /// Structures enumerated whole, for a finite population.
    pub enumerated: u64,
}

/// The cheapest feasible candidate of every structure, ranked. `limit` bounds the
/// patterns finished by enumeration: one larger than that is an error that says so.
pub fn optimize(
    screens: &[Screen],
    problem: &Problem,
    top: usize,
    limit: u64,
) -> Result<Optimized, String> {
    let per: Vec<Optimized> = screens
        .par_iter()
        .enumerate()
        .map(|(vi, screen)| optimize_structure(vi, screen, problem, limit))
        .collect::<Result<_, String>>()?;
    let mut out = Optimized::default();
    for p in per {
        out.per_structure.push(p.best.first().cloned());
        out.best.extend(p.best);
        out.solves += p.solves;
        out.screened += p.screened;
        out.fallbacks += p.fallbacks;
        out.enumerated += p.enumerated;
        for k in 0..5 {
            out.rejected[k] += p.rejected[k];
        }
    }
    out.best.sort_by_key(|e| rank_key(&e.outcome));
    out.best.truncate(top.max(1));
    Ok(out)
}

fn slot(r: Rejection) -> usize {
    match r {
        Rejection::Budget => 0,
        Rejection::Untestable => 1,
        Rejection::MinDf => 2,
        Rejection::Power => 3,
        Rejection::Limit => 4,
    }
}

/// The patterns of a structure: for each dimension whose values include 1, whether it is
/// at 1. Returns the allowed values of every dimension in each pattern that has any.
pub fn patterns(variant: &Variant) -> Vec<Vec<Vec<u64>>> {
    let ones: Vec<usize> = (0..variant.dims.len())
        .filter(|&d| variant.dims[d].values.contains(&1))
        .collect();
    let mut out = Vec::new();
    for key in 0..1usize << ones.len() {
        let allowed: Vec<Vec<u64>> = variant
            .dims
            .iter()
            .enumerate()
            .map(|(d, dim)| match ones.iter().position(|&x| x == d) {
                Some(k) if key & (1 << k) != 0 => vec![1],
                Some(_) => dim.values.iter().copied().filter(|&v| v >= 2).collect(),
                None => dim.values.clone(),
            })
            .collect();
        if allowed.iter().all(|a| !a.is_empty()) {
            out.push(allowed);
        }
    }
    out
}

fn optimize_structure(
    vi: usize,
    screen: &Screen,
    problem: &Problem,
    limit: u64,
) -> Result<Optimized, String> {
    let mut out = Optimized::default();
    let mut best: Option<Entry> = None;
    let mut criticals = Criticals::default();
    if !screen.patterns_fix_error_terms() {
        // A finite population puts (1 - n/N) in the coefficients, so error terms can
        // change with the level counts within a pattern: enumerate the structure.
        let v = &screen.variant;
        let all: Vec<Vec<u64>> = v.dims.iter().map(|d| d.values.clone()).collect();
        let size = v.size();
        if size > limit as u128 {
            return Err(format!(
                "a structure with a finite population holds {size} candidates, which the integer program cannot take (its error terms change with the level counts) and which is more than the limit of {limit} to enumerate: narrow the ranges under [search.levels], or raise the limit with --max-candidates"
            ));
        }
        out.enumerated += 1;
        let (found, screened) = enumerate_pattern(vi, screen, problem, &all, problem.budget);
        out.screened += screened;
        out.best.extend(found);
        return Ok(out);
    }
    for allowed in patterns(&screen.variant) {
        let levels = at(&screen.variant, &allowed, &[0; 16][..allowed.len()]);
        let shapes = screen.shapes(&levels);
        // The pattern's error terms: every must-test term testable, or the pattern goes.
        let mut exact_denominators = Vec::new();
        let mut ok = true;
        for (k, m) in screen.must.iter().enumerate() {
            let (Ok(_), Some(shape)) = (m, &shapes[k]) else {
                ok = false;
                break;
            };
            match shape.verdict {
                Verdict::Exact => exact_denominators.push(shape.denominator[0].0),
                Verdict::QuasiF if !problem.exact_only => {
                    if problem.min_df.is_some() && !screen.variant.plan.has_priors() {
                        ok = false;
                    }
                }
                _ => ok = false,
            }
        }
        if !ok {
            continue;
        }
        let bound = match (&best, problem.budget) {
            (Some(b), Some(budget)) => Some(b.outcome.cost.min(budget)),
            (Some(b), None) => Some(b.outcome.cost),
            (None, budget) => budget,
        };
        let program = Program {
            screen,
            allowed: &allowed,
            exact_denominators: &exact_denominators,
            min_df: problem.min_df,
        };
        let mut cuts: Vec<Vec<usize>> = Vec::new();
        let mut found: Option<Entry> = None;
        let mut ties = 0;
        let mut finished = false;
        while cuts.len() < MAX_CUTS + MAX_TIES {
            let cap = found.as_ref().map_or(bound, |f| Some(f.outcome.cost));
            out.solves += 1;
            let Some(picks) = program.solve(cap, &cuts) else {
                finished = true;
                break;
            };
            let levels = at(&screen.variant, &allowed, &picks);
            let outcome = screen.evaluate(&levels, &mut criticals);
            out.screened += 1;
            match outcome.rejection {
                None => {
                    let e = Entry {
                        variant: vi,
                        levels,
                        outcome,
                    };
                    if found
                        .as_ref()
                        .is_none_or(|f| rank_key(&e.outcome) < rank_key(&f.outcome))
                    {
                        found = Some(e);
                    }
                    ties += 1;
                    if ties > MAX_TIES {
                        finished = true;
                        break;
                    }
                }
                Some(r) => out.rejected[slot(r)] += 1,
            }
            cuts.push(picks);
            if found.is_none() && cuts.len() >= MAX_CUTS {
                break;
            }
        }
        if !finished && found.is_none() {
            // Too many answers failed the non-linear checks: enumerate the pattern under
            // the best cost so far, which keeps the result exact.
            out.fallbacks += 1;
            let size: u128 = allowed.iter().map(|a| a.len() as u128).product();
            if size > limit as u128 {
                return Err(format!(
                    "the integer program's answers kept failing the non-linear checks (Satterthwaite df or power) in a part of the space of {size} candidates, more than the limit of {limit} to finish by enumeration: narrow the ranges under [search.levels], or raise the limit with --max-candidates"
                ));
            }
            let e = enumerate_pattern(vi, screen, problem, &allowed, bound);
            out.screened += e.1;
            found = e.0;
        }
        if let Some(f) = found
            && best
                .as_ref()
                .is_none_or(|b| rank_key(&f.outcome) < rank_key(&b.outcome))
        {
            best = Some(f);
        }
    }
    out.best.extend(best);
    Ok(out)
}

/// Pruned enumeration of one pattern of one structure, under `bound`.
fn enumerate_pattern(
    vi: usize,
    screen: &Screen,
    problem: &Problem,
    allowed: &[Vec<u64>],
    bound: Option<f64>,
) -> (Option<Entry>, u64) {
    let mut p = problem.clone();
    p.budget = bound;
    let mut variant = screen.variant.clone();
    for (d, a) in variant.dims.iter_mut().zip(allowed) {
        d.values = a.clone();
    }
    let sub = Screen::new(&p, variant);
    let tally = enumerate(std::slice::from_ref(&sub), 1, true, &Quiet);
    let best = tally.top.into_iter().next().map(|mut e| {
        e.variant = vi;
        e
    });
    (best, tally.examined)
}

/// The level counts of one value index per dimension.
fn at(variant: &Variant, allowed: &[Vec<u64>], picks: &[usize]) -> Levels {
    let mut levels = variant.template.clone();
    for ((d, a), &k) in variant.dims.iter().zip(allowed).zip(picks) {
        super::space::set(&mut levels, d.target, a[k]);
    }
    levels
}

/// n or n - 1 of one level count.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
enum Func {
    Count,
    LessOne,
}

impl Func {
    fn of(self, n: u64) -> f64 {
        match self {
            Func::Count => n as f64,
            Func::LessOne => n as f64 - 1.0,
        }
    }
}

/// One pattern's integer program.
struct Program<'a> {
    screen: &'a Screen,
    allowed: &'a [Vec<u64>],
    exact_denominators: &'a [usize],
    min_df: Option<f64>,
}

/// The variables and constraints being built.
struct Builder<'a> {
    vars: ProblemVariables,
    constraints: Vec<good_lp::Constraint>,
    /// Binaries per dimension (empty for a dimension with one allowed value).
    x: Vec<Vec<Variable>>,
    allowed: &'a [Vec<u64>],
}

impl Builder<'_> {
    /// Π over `factors` of g(n) as a linear expression, times `constant` (≥ 0).
    fn product(&mut self, constant: f64, factors: &[(usize, Func)]) -> Expression {
        let mut c = constant;
        let mut free: Vec<(usize, Func)> = Vec::new();
        for &(d, g) in factors {
            if self.x[d].is_empty() {
                c *= g.of(self.allowed[d][0]);
            } else {
                free.push((d, g));
            }
        }
        if c == 0.0 || free.is_empty() {
            return Expression::from(c);
        }
        let (d0, g0) = free[0];
        let mut p = Expression::from(0.0);
        for (k, &v) in self.allowed[d0].iter().enumerate() {
            p.add_mul(c * g0.of(v), self.x[d0][k]);
        }
        let mut upper = c * self.allowed[d0]
            .iter()
            .map(|&v| g0.of(v))
            .fold(0.0, f64::max);
        for &(d, g) in &free[1..] {
            let mut next = Expression::from(0.0);
            let mut sum = Expression::from(0.0);
            for (k, &v) in self.allowed[d].iter().enumerate() {
                let z = self.vars.add(variable().min(0.0).max(upper));
                self.constraints
                    .push((Expression::from(z) - upper * self.x[d][k]).leq(0.0));
                sum.add_mul(1.0, z);
                next.add_mul(g.of(v), z);
            }
            self.constraints.push((sum - p).eq(0.0));
            p = next;
            upper *= self.allowed[d].iter().map(|&v| g.of(v)).fold(0.0, f64::max);
        }
        p
    }
}

impl Program<'_> {
    /// The dimension that sets a target, or the target's fixed value.
    fn factor(&self, target: Target, g: Func) -> Result<(usize, Func), f64> {
        let v = &self.screen.variant;
        match v.dims.iter().position(|d: &Dim| d.target == target) {
            Some(d) => Ok((d, g)),
            None => Err(g.of(super::space::get(&v.template, target))),
        }
    }

    /// A product over factors of the structure: `live` factors contribute g = n - 1 when
    /// `df`, `all` the rest of the subscripts n; `REPLICATE` in `all` is the replicates.
    fn monomial(&self, b: &mut Builder, live: u32, all: u32, df: bool) -> Expression {
        let mut constant = 1.0;
        let mut factors = Vec::new();
        let n = self.screen.variant.structure.factors.len();
        let mut push = |r: Result<(usize, Func), f64>| match r {
            Ok(f) => factors.push(f),
            Err(c) => constant *= c,
        };
        for i in 0..n {
            if all & (1 << i) != 0 {
                let g = if df && live & (1 << i) != 0 {
                    Func::LessOne
                } else {
                    Func::Count
                };
                push(self.factor(Target::Factor(i), g));
            }
        }
        if all & REPLICATE != 0 {
            let g = if df { Func::LessOne } else { Func::Count };
            push(self.factor(Target::Replicates, g));
        }
        b.product(constant, &factors)
    }

    /// Solves with cost at most `cap` and the given candidates cut off; the answer as one
    /// value index per dimension.
    fn solve(&self, cap: Option<f64>, cuts: &[Vec<usize>]) -> Option<Vec<usize>> {
        let screen = self.screen;
        let v = &screen.variant;
        let s = &v.structure;
        let mut vars = ProblemVariables::new();
        let x: Vec<Vec<Variable>> = self
            .allowed
            .iter()
            .map(|a| {
                if a.len() == 1 {
                    Vec::new()
                } else {
                    a.iter().map(|_| vars.add(variable().binary())).collect()
                }
            })
            .collect();
        let mut b = Builder {
            vars,
            constraints: Vec::new(),
            x,
            allowed: self.allowed,
        };
        for xs in b.x.clone() {
            if !xs.is_empty() {
                let sum: Expression = xs.iter().map(|&x| Expression::from(x)).sum();
                b.constraints.push(sum.eq(1.0));
            }
        }
        // Cost.
        let mut cost = Expression::from(screen.overhead());
        for &(subs, price) in screen.priced() {
            if price > 0.0 {
                let cells = self.monomial(&mut b, 0, subs, false);
                cost.add_mul(price, cells);
            }
        }
        if let Some(cap) = cap {
            b.constraints
                .push(cost.clone().leq(cap * (1.0 + 1e-9) + 1e-7));
        }
        // Capacity limits: products of level counts, like the cost's.
        for l in &v.limits {
            let n = self.monomial(&mut b, 0, l.subscripts, false);
            b.constraints.push(n.leq(l.at_most as f64 + 1e-7));
        }
        // Denominator df of the exact tests.
        if let Some(min) = self.min_df {
            for &d in self.exact_denominators {
                let mut df = if d == screen.model.residual() {
                    let all = s.all_factors() | REPLICATE;
                    self.monomial(&mut b, REPLICATE, all, true)
                } else {
                    let t = screen.model.terms[d];
                    self.monomial(&mut b, t.live, t.subscripts(), true)
                };
                for o in screen.model.pooled(d) {
                    let o = screen.model.omitted[o];
                    df += self.monomial(&mut b, o.live, o.subscripts(), true);
                }
                b.constraints.push(df.geq(min - 1e-7));
            }
        }
        // No-good cuts.
        let free: Vec<usize> = (0..b.x.len()).filter(|&d| !b.x[d].is_empty()).collect();
        for cut in cuts {
            if free.is_empty() {
                return None;
            }
            let hit: Expression = free.iter().map(|&d| Expression::from(b.x[d][cut[d]])).sum();
            b.constraints.push(hit.leq(free.len() as f64 - 1.0));
        }
        let Builder {
            vars,
            constraints,
            x,
            ..
        } = b;
        let mut model = vars.minimise(cost).using(microlp);
        for c in constraints {
            model = model.with(c);
        }
        let solution = model.solve().ok()?;
        Some(
            x.iter()
                .map(|xs| {
                    xs.iter()
                        .enumerate()
                        .max_by(|a, b| solution.value(*a.1).total_cmp(&solution.value(*b.1)))
                        .map_or(0, |(k, _)| k)
                })
                .collect(),
        )
    }
}
