//! Screening one candidate: cost, then how each must-test term is tested, its denominator
//! df and its power.
//!
//! A structure's symbolic model is built once (`Screen::new`). Its error terms are
//! cached by the set of level-count dimensions at 1 when no factor has a finite
//! population: then the coefficient of component U is N / cells(U) in every expected mean
//! square it appears in, so dividing each component's column by it turns the system
//! Σ_V w_V E(MS_V) = E(MS_T) - c_T θ_T into one of 0/1 incidences whose solution does not
//! depend on the level counts; only which mean squares exist does, and a term has 0 df
//! exactly when one of its live factors has one level (the residual: one replicate and no
//! pooled df). With a finite population, (1 - n/N) enters the coefficients and each
//! candidate's error terms are found afresh.

use std::collections::HashMap;
use std::sync::{Arc, OnceLock};

use crate::dist::CriticalValue;
use crate::ems::Model;
use crate::errorterm::{Verdict, error_term};
use crate::layout::{Kind, Levels, term_of};
use crate::planning::{power, priced_total, satterthwaite, to_f64};
use crate::term::{Mask, REPLICATE};

use super::problem::Problem;
use super::space::{Target, Variant, get};

/// Why a candidate is not feasible, in the order the constraints are checked.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, serde::Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Rejection {
    /// More units of some kind than a stated capacity limit allows.
    Limit,
    Budget,
    Untestable,
    MinDf,
    Power,
}

impl Rejection {
    pub const ALL: [Rejection; 5] = [
        Rejection::Untestable,
        Rejection::MinDf,
        Rejection::Power,
        Rejection::Budget,
        Rejection::Limit,
    ];

    pub fn name(self) -> &'static str {
        match self {
            Rejection::Limit => "limit",
            Rejection::Budget => "budget",
            Rejection::Untestable => "untestable",
            Rejection::MinDf => "min_df",
            Rejection::Power => "power",
        }
    }
}

/// What screening found for one candidate.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Outcome {
    pub cost: f64,
    /// `None`: feasible.
    pub rejection: Option<Rejection>,
    /// The must-test term (its index in the problem's list) that failed first.
    pub failing: Option<usize>,
    /// Smallest denominator df over the must-test terms (`None`: some df unknown, or a
    /// term untestable).
    pub min_df: Option<f64>,
    /// Smallest power over the must-test terms (`None`: some power unknown).
    pub min_power: Option<f64>,
}

/// How one must-test term is tested in a structure, weights as floats.
#[derive(Debug, Clone, PartialEq)]
pub struct Shape {
    pub verdict: Verdict,
    pub denominator: Vec<(usize, f64)>,
}

/// The error terms of the must-test terms (`None`: the term is absent, or the counts
/// overflow exact arithmetic), shared between the candidates of one pattern.
pub type Shapes = Arc<Vec<Option<Shape>>>;

/// Per-thread cache of critical values by (df1, df2 bits).
#[derive(Default)]
pub struct Criticals(HashMap<(u64, u64), CriticalValue>);

impl Criticals {
    fn get(&mut self, alpha: f64, df1: f64, df2: f64) -> CriticalValue {
        if self.0.len() > 200_000 {
            self.0.clear();
        }
        *self
            .0
            .entry((df1.to_bits(), df2.to_bits()))
            .or_insert_with(|| CriticalValue::new(alpha, df1, df2))
    }
}

/// A structure prepared for screening.
pub struct Screen {
    pub variant: Variant,
    pub model: Model,
    /// Each must-test term's index in the model, or why it is no term here.
    pub must: Vec<Result<usize, String>>,
    overhead: f64,
    /// (subscripts of a priced term, with `REPLICATE` for each observation; price)
    priced: Vec<(Mask, f64)>,
    /// Dimensions whose values include 1, for the error-term cache.
    one_dims: Vec<usize>,
    cache: Option<Vec<OnceLock<Shapes>>>,
    /// σ² of each random term with a prior (0 without).
    prior_sq: Vec<f64>,
    has_priors: bool,
    /// Whether some omitted term is pooled into a term above the residual.
    pools_above_residual: bool,
    alpha: f64,
    min_df: Option<f64>,
    exact_only: bool,
    target_power: Option<f64>,
    budget: Option<f64>,
}

impl Screen {
    pub fn new(problem: &Problem, variant: Variant) -> Screen {
        let s = &variant.structure;
        let model = Model::new(s);
        let must = problem
            .must_test
            .iter()
            .map(|m| locate(problem, &variant, &model, m.live, &m.label))
            .collect();
        let cost = variant.plan.cost.as_ref();
        let overhead = cost.map_or(0.0, |c| c.overhead);
        let priced = cost.map_or(Vec::new(), |c| {
            c.per_unit
                .iter()
                .map(|&(live, p)| {
                    let subs = if live == REPLICATE {
                        s.all_factors() | REPLICATE
                    } else {
                        term_of(s, live).subscripts()
                    };
                    (subs, p)
                })
                .collect()
        });
        let one_dims: Vec<usize> = (0..variant.dims.len())
            .filter(|&d| variant.dims[d].values.contains(&1))
            .collect();
        let finite = s.factors.iter().any(|f| f.population.is_some());
        // A mean square pooled above the residual mixes expectations in proportions
        // that change with the level counts, so its error terms are not shared.
        let pools_above_residual = model.pools_above_residual();
        let cache = (!finite && !pools_above_residual).then(|| {
            (0..1usize << one_dims.len())
                .map(|_| OnceLock::new())
                .collect()
        });
        let prior_sq = model
            .terms
            .iter()
            .enumerate()
            .map(|(i, t)| match model.kinds[i] {
                Kind::Random => variant.plan.priors.get(&t.live).map_or(0.0, |sd| sd * sd),
                Kind::Fixed => 0.0,
            })
            .collect();
        Screen {
            has_priors: variant.plan.has_priors(),
            pools_above_residual,
            alpha: variant.plan.alpha,
            variant,
            model,
            must,
            overhead,
            priced,
            one_dims,
            cache,
            prior_sq,
            min_df: problem.min_df,
            exact_only: problem.exact_only,
            target_power: problem.target_power,
            budget: problem.budget,
        }
    }

    /// Whether error terms are shared within a pattern of one-level dimensions (no
    /// factor has a finite population).
    pub fn patterns_fix_error_terms(&self) -> bool {
        self.cache.is_some()
    }

    pub fn overhead(&self) -> f64 {
        self.overhead
    }

    /// The priced terms: (subscripts, with `REPLICATE` for each observation; price).
    pub fn priced(&self) -> &[(Mask, f64)] {
        &self.priced
    }

    /// Overhead plus price × cells of every priced term (as `planning::cost`).
    pub fn cost(&self, levels: &Levels) -> f64 {
        let units = |subs: Mask| -> u64 {
            let mut n = if subs & REPLICATE != 0 {
                levels.replicates
            } else {
                1
            };
            for (i, &k) in levels.per_factor.iter().enumerate() {
                if subs & (1 << i) != 0 {
                    n *= k;
                }
            }
            n
        };
        priced_total(
            self.overhead,
            self.priced
                .iter()
                .map(|&(subs, price)| (price, units(subs))),
        )
    }

    pub fn over_budget(&self, cost: f64) -> bool {
        self.budget.is_some_and(|b| cost > b * (1.0 + 1e-12))
    }

    /// The error terms of the must-test terms at these level counts.
    pub fn shapes(&self, levels: &Levels) -> Shapes {
        match &self.cache {
            Some(cache) => {
                let mut key = 0usize;
                for (k, &d) in self.one_dims.iter().enumerate() {
                    if get(levels, self.variant.dims[d].target) == 1 {
                        key |= 1 << k;
                    }
                }
                cache[key]
                    .get_or_init(|| Arc::new(self.solve_shapes(&self.representative(key))))
                    .clone()
            }
            None => Arc::new(self.solve_shapes(levels)),
        }
    }

    /// Level counts with the dimensions of `key` at 1 and the rest at their smallest
    /// value above 1 (or their only value): any candidate of the pattern would do.
    fn representative(&self, key: usize) -> Levels {
        let mut levels = self.variant.template.clone();
        for (d, dim) in self.variant.dims.iter().enumerate() {
            let pos = self.one_dims.iter().position(|&x| x == d);
            let v = match pos {
                Some(k) if key & (1 << k) != 0 => 1,
                _ => dim
                    .values
                    .iter()
                    .copied()
                    .find(|&v| v >= 2)
                    .unwrap_or(dim.values[0]),
            };
            super::space::set(&mut levels, dim.target, v);
        }
        levels
    }

    fn solve_shapes(&self, levels: &Levels) -> Vec<Option<Shape>> {
        let Ok(ems) = self.model.ems(levels) else {
            return self.must.iter().map(|_| None).collect();
        };
        let df = self.model.df(levels);
        self.must
            .iter()
            .map(|m| {
                let t = *m.as_ref().ok()?;
                let e = error_term(&self.model, &ems, &df, t);
                Some(Shape {
                    verdict: e.verdict,
                    denominator: e.denominator.iter().map(|(v, w)| (*v, to_f64(w))).collect(),
                })
            })
            .collect()
    }

    /// df of term `t` of the model (the residual: cells × (replicates - 1) + pooled).
    pub fn df(&self, t: usize, levels: &Levels) -> u64 {
        self.model.own_df(t, levels)
            + self
                .model
                .pooled(t)
                .map(|o| self.model.omitted[o].df(levels))
                .sum::<u64>()
    }

    /// E(MS) of term `t` under the planning values: Σ coefficient × θ over its row, with
    /// θ = σ² for a random component and κ² = RMS² × cells / df for a fixed one.
    fn ems_value(&self, t: usize, levels: &Levels) -> f64 {
        let own = self.row_value(&self.model.rows[t], levels);
        if !self.pools_above_residual {
            return own;
        }
        // A pooled mean square: the df-weighted mean of the pooled expectations.
        let mut df = self.model.own_df(t, levels) as f64;
        let mut total = own * df;
        for o in self.model.pooled(t) {
            let d = self.model.omitted[o].df(levels) as f64;
            total += d * self.row_value(&self.model.omitted_rows[o], levels);
            df += d;
        }
        if df > 0.0 { total / df } else { own }
    }

    /// Σ coefficient × θ over one symbolic row.
    fn row_value(&self, row: &[crate::ems::SymbolicEntry], levels: &Levels) -> f64 {
        let plan = &self.variant.plan;
        let count = |j: u32| -> f64 {
            if 1u32 << j == REPLICATE {
                levels.replicates as f64
            } else {
                levels.per_factor[j as usize] as f64
            }
        };
        let mut total = 0.0;
        for e in row {
            let u = self.model.terms[e.component];
            let theta = match self.model.kinds[e.component] {
                Kind::Random => self.prior_sq[e.component],
                Kind::Fixed => plan.component_value(&u, Kind::Fixed, levels),
            };
            if theta == 0.0 {
                continue;
            }
            let mut c = 1.0;
            for j in set_bits(e.multiply) {
                c *= count(j);
            }
            for j in set_bits(e.finite) {
                let big_n = self.variant.structure.factors[j as usize]
                    .population
                    .unwrap_or(0) as f64;
                c *= 1.0 - count(j) / big_n;
            }
            total += c * theta;
        }
        total
    }

    /// The first capacity limit these level counts exceed (its index in the problem).
    /// A limit is a product of level counts, so it never falls when a count grows.
    pub fn beyond_limits(&self, levels: &Levels) -> Option<usize> {
        self.variant.limits.iter().find_map(|l| {
            let mut n: u128 = if l.subscripts & REPLICATE != 0 {
                levels.replicates as u128
            } else {
                1
            };
            for (i, &k) in levels.per_factor.iter().enumerate() {
                if l.subscripts & (1 << i) != 0 {
                    n = n.saturating_mul(k as u128);
                }
            }
            (n > l.at_most as u128).then_some(l.limit)
        })
    }

    /// Screens one candidate, capacity limits and budget first (see `Rejection`).
    pub fn evaluate(&self, levels: &Levels, criticals: &mut Criticals) -> Outcome {
        let cost = self.cost(levels);
        let mut out = Outcome {
            cost,
            rejection: None,
            failing: None,
            min_df: None,
            min_power: None,
        };
        if self.beyond_limits(levels).is_some() {
            out.rejection = Some(Rejection::Limit);
            return out;
        }
        if self.over_budget(cost) {
            out.rejection = Some(Rejection::Budget);
            return out;
        }
        let reject = |mut out: Outcome, r: Rejection, k: usize| {
            out.rejection = Some(r);
            out.failing = Some(k);
            out
        };
        let shapes = self.shapes(levels);
        let mut tests: Vec<(usize, &Shape)> = Vec::with_capacity(self.must.len());
        for (k, m) in self.must.iter().enumerate() {
            let (Ok(t), Some(shape)) = (m, &shapes[k]) else {
                return reject(out, Rejection::Untestable, k);
            };
            let ok = match shape.verdict {
                Verdict::Exact => true,
                Verdict::QuasiF => !self.exact_only,
                _ => false,
            };
            if !ok {
                return reject(out, Rejection::Untestable, k);
            }
            tests.push((*t, shape));
        }

        // Denominator df, then power, of each must-test term.
        // E(MS) values computed so far (a handful per candidate: a short list beats a map).
        let mut values: Vec<(usize, f64)> = Vec::with_capacity(8);
        let mut value = |v: usize| -> f64 {
            if let Some(&(_, x)) = values.iter().find(|(u, _)| *u == v) {
                return x;
            }
            let x = self.ems_value(v, levels);
            values.push((v, x));
            x
        };
        let mut dfs: Vec<Option<f64>> = Vec::with_capacity(tests.len());
        for &(_, shape) in &tests {
            let df2 = match shape.verdict {
                Verdict::Exact => Some(self.df(shape.denominator[0].0, levels) as f64),
                _ if self.has_priors => satterthwaite(
                    &shape
                        .denominator
                        .iter()
                        .map(|&(v, w)| (w, value(v), self.df(v, levels)))
                        .collect::<Vec<_>>(),
                ),
                _ => None,
            };
            dfs.push(df2);
        }
        out.min_df = dfs
            .iter()
            .try_fold(f64::INFINITY, |m, d| d.map(|d| m.min(d)));
        if let Some(min) = self.min_df {
            // The term named is the worst: an unknown df first, else the fewest.
            let worst = (0..dfs.len())
                .min_by(|&a, &b| dfs[a].unwrap_or(-1.0).total_cmp(&dfs[b].unwrap_or(-1.0)));
            if let Some(k) = worst
                && dfs[k].is_none_or(|d| d < min - 1e-9)
            {
                return reject(out, Rejection::MinDf, k);
            }
        }
        if !self.has_priors {
            return out;
        }
        let mut powers: Vec<Option<f64>> = Vec::with_capacity(tests.len());
        for (&(t, shape), df2) in tests.iter().zip(&dfs) {
            let power = df2.and_then(|df2| {
                let den: f64 = shape.denominator.iter().map(|&(v, w)| w * value(v)).sum();
                if !(den > 0.0 && den.is_finite()) {
                    return None;
                }
                let df1 = self.df(t, levels) as f64;
                let live = self.model.terms[t].live;
                let plan = &self.variant.plan;
                // E(MS_T) less E(D): the term's own part of its expectation.
                let own = value(t);
                let kind = self.model.kinds[t];
                let planned = match kind {
                    Kind::Fixed => plan.effects.contains_key(&live),
                    Kind::Random => plan.priors.contains_key(&live) && own > 0.0,
                };
                planned.then(|| {
                    let critical = criticals.get(self.alpha, df1, df2);
                    power(&critical, kind, df1, own - den, den)
                })
            });
            powers.push(power.filter(|p| p.is_finite()));
        }
        out.min_power = powers.iter().try_fold(1.0f64, |m, p| p.map(|p| m.min(p)));
        if let Some(target) = self.target_power {
            let worst = (0..powers.len()).min_by(|&a, &b| {
                powers[a]
                    .unwrap_or(-1.0)
                    .total_cmp(&powers[b].unwrap_or(-1.0))
            });
            if let Some(k) = worst
                && powers[k].is_none_or(|p| p < target)
            {
                return reject(out, Rejection::Power, k);
            }
        }
        out
    }
}

/// Indices of the set bits of a mask, lowest first.
fn set_bits(mut mask: Mask) -> impl Iterator<Item = u32> {
    std::iter::from_fn(move || {
        if mask == 0 {
            return None;
        }
        let j = mask.trailing_zeros();
        mask &= mask - 1;
        Some(j)
    })
}

/// A must-test term's index in a structure's model, or why it is not a term there.
fn locate(
    problem: &Problem,
    variant: &Variant,
    model: &Model,
    base_live: Mask,
    label: &str,
) -> Result<usize, String> {
    let base = &problem.base.structure;
    let gone: Vec<&str> = variant
        .left_out
        .iter()
        .filter(|&&f| base_live & (1 << f) != 0)
        .map(|&f| base.factors[f].name.as_str())
        .collect();
    if !gone.is_empty() {
        return Err(format!(
            "{label} is not in this layout, because {} is left out",
            gone.join(" and ")
        ));
    }
    let mut live: Mask = 0;
    for (f, i) in variant.index.iter().enumerate() {
        if base_live & (1 << f) == 0 {
            continue;
        }
        match i {
            Some(i) => live |= 1 << i,
            // A unit that has one member per treatment combination here is that
            // interaction of the model.
            None => match variant.structure.units.by_name(&base.factors[f].name) {
                Some(u) if matches!(u.place, crate::layout::Place::Term(_)) => live |= u.live(),
                _ => {
                    return Err(format!(
                        "{label} is not a term of this layout: {} has no term of its own here",
                        base.factors[f].name
                    ));
                }
            },
        }
    }
    if let Some(t) = model.terms.iter().position(|t| t.live == live) {
        return Ok(t);
    }
    let s = &variant.structure;
    for (i, f) in s.factors.iter().enumerate() {
        if live & (1 << i) != 0 && f.ancestors & live != 0 {
            let outer: Vec<&str> = s
                .factors
                .iter()
                .enumerate()
                .filter(|(j, _)| f.ancestors & live & (1 << j) != 0)
                .map(|(_, g)| g.name.as_str())
                .collect();
            return Err(format!(
                "{label} is not a term of this layout: {} is nested in {}, so they are not crossed",
                f.name,
                outer.join(" and ")
            ));
        }
    }
    Err(format!("{label} is not a term of this layout"))
}

/// The dimension of a structure that sets `target`, if it is searched.
pub fn dim_of(variant: &Variant, target: Target) -> Option<usize> {
    variant.dims.iter().position(|d| d.target == target)
}
