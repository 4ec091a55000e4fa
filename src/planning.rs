//! Planning values and what follows from them: expected mean squares in the response's
//! units, Satterthwaite df, power, minimum detectable effects, and cost.
//!
//! Planning values are the user's guesses: standard deviations of random terms (`[sd]`,
//! once called `[prior]`), smallest effects worth detecting for fixed terms (`[effect]`),
//! unit costs (`[cost]`). Every result here is only as good as they are.

use std::collections::BTreeMap;

use serde::Serialize;

use crate::dist::{self, CriticalValue};
use crate::ems::{Ems, Model, Rational};
use crate::error::Error;
use crate::errorterm::{ErrorTerm, Verdict};
use crate::layout::{Kind, Layout, Levels, Structure, term_of};
use crate::spec::{self, EffectSpec, Spec};
use crate::term::{Mask, REPLICATE, Term, parse_term_label};

pub const DEFAULT_ALPHA: f64 = 0.05;
pub const DEFAULT_POWER: f64 = 0.8;

/// A smallest effect worth detecting for a fixed term.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Effect {
    /// Root mean square of the term's effects over its cells: sqrt(Σ effect² / cells).
    RootMeanSquare(f64),
    /// A main effect's least favourable configuration: two levels `D` apart, the rest
    /// midway. Its effects are +D/2, -D/2 and zeros, so Σ effect² = D²/2 and the root
    /// mean square over the a levels is D / sqrt(2a).
    Range(f64),
}

impl Effect {
    pub fn root_mean_square(self, cells: u64) -> f64 {
        match self {
            Effect::RootMeanSquare(x) => x,
            Effect::Range(d) => d / (2.0 * cells as f64).sqrt(),
        }
    }
}

/// Per-unit costs: overhead plus a price for each cell of a term.
#[derive(Debug, Clone, PartialEq)]
pub struct CostModel {
    pub overhead: f64,
    /// (live set of the term, or `REPLICATE` for each observation; price per cell)
    pub per_unit: Vec<(Mask, f64)>,
}

#[derive(Debug, Clone, PartialEq)]
pub struct PlanningValues {
    pub alpha: f64,
    /// The power the minimum detectable effects are solved for.
    pub power: f64,
    /// Standard deviations of random terms, by live set (`REPLICATE` for the residual).
    /// Empty when the file has no `[sd]` table.
    pub priors: BTreeMap<Mask, f64>,
    pub effects: BTreeMap<Mask, Effect>,
    pub cost: Option<CostModel>,
}

impl PlanningValues {
    pub fn has_priors(&self) -> bool {
        !self.priors.is_empty()
    }

    /// Reads the planning tables of a spec against the layout's terms.
    pub fn from_spec(spec: &Spec, text: &str, layout: &Layout) -> Result<PlanningValues, Error> {
        let at = |span: std::ops::Range<usize>| Some(spec::line_of(text, span.start));
        let s = &layout.structure;
        let alpha = match &spec.alpha {
            None => DEFAULT_ALPHA,
            Some(a) => check_probability(*a.get_ref(), "alpha")
                .map_err(|m| Error::invalid(at(a.span()), m))?,
        };
        let model = Model::new(s);
        let mut priors = BTreeMap::new();
        if let Some(spanned) = &spec.sd {
            let table = spanned.get_ref();
            for (key, value) in table {
                let line = at(value.span());
                let term =
                    resolve(s, key).map_err(|m| Error::invalid(line, format!("[sd] {m}")))?;
                if !term.is_residual() && term.kind(s) == Kind::Fixed {
                    return Err(Error::invalid(
                        line,
                        format!(
                            "[sd] \"{key}\" is a fixed term: give its smallest effect worth detecting under [effect] instead"
                        ),
                    ));
                }
                if !term.is_residual() && !model.terms.contains(&term) {
                    return Err(Error::invalid(
                        line,
                        format!(
                            "[sd] \"{key}\" is assumed absent (in `omit`), so it has no variance"
                        ),
                    ));
                }
                let sd = non_negative(*value.get_ref())
                    .map_err(|m| Error::invalid(line, format!("[sd] \"{key}\": {m}")))?;
                priors.insert(term.live, sd);
            }
            if !priors.contains_key(&REPLICATE) {
                return Err(Error::invalid(
                    at(spanned.span()),
                    "[sd] needs `residual`, the standard deviation between observations within a cell",
                ));
            }
        }
        let mut effects = BTreeMap::new();
        if let Some(table) = &spec.effect {
            for (key, value) in table {
                let line = at(value.span());
                let term =
                    resolve(s, key).map_err(|m| Error::invalid(line, format!("[effect] {m}")))?;
                if term.is_residual() || term.kind(s) == Kind::Random {
                    return Err(Error::invalid(
                        line,
                        format!(
                            "[effect] \"{key}\" is a random term: give its standard deviation under [sd] instead"
                        ),
                    ));
                }
                if !model.terms.contains(&term) {
                    return Err(Error::invalid(
                        line,
                        format!("[effect] \"{key}\" is assumed absent (in `omit`)"),
                    ));
                }
                let effect = match value.get_ref() {
                    EffectSpec::RootMeanSquare(x) => {
                        Effect::RootMeanSquare(non_negative(*x).map_err(|m| {
                            Error::invalid(line, format!("[effect] \"{key}\": {m}"))
                        })?)
                    }
                    EffectSpec::Range(r) => {
                        if term.live.count_ones() != 1 {
                            return Err(Error::invalid(
                                line,
                                format!(
                                    "[effect] \"{key}\": `range` describes a main effect; give an interaction's effect as a root mean square"
                                ),
                            ));
                        }
                        Effect::Range(non_negative(r.range).map_err(|m| {
                            Error::invalid(line, format!("[effect] \"{key}\" range: {m}"))
                        })?)
                    }
                };
                effects.insert(term.live, effect);
            }
        }
        let cost = match &spec.cost {
            None => None,
            Some(c) => {
                let overhead = match &c.overhead {
                    None => 0.0,
                    Some(o) => non_negative(*o.get_ref()).map_err(|m| {
                        Error::invalid(at(o.span()), format!("[cost] overhead: {m}"))
                    })?,
                };
                let mut per_unit = Vec::new();
                for (key, value) in &c.per_unit {
                    let line = at(value.span());
                    let term = resolve(s, key)
                        .map_err(|m| Error::invalid(line, format!("[cost.per_unit] {m}")))?;
                    let price = non_negative(*value.get_ref()).map_err(|m| {
                        Error::invalid(line, format!("[cost.per_unit] \"{key}\": {m}"))
                    })?;
                    per_unit.push((term.live, price));
                }
                Some(CostModel { overhead, per_unit })
            }
        };
        Ok(PlanningValues {
            alpha,
            power: DEFAULT_POWER,
            priors,
            effects,
            cost,
        })
    }
}

fn resolve(s: &Structure, key: &str) -> Result<Term, String> {
    parse_term_label(s, key)
}

pub fn check_probability(x: f64, what: &str) -> Result<f64, String> {
    if x.is_finite() && x > 0.0 && x < 1.0 {
        Ok(x)
    } else {
        Err(format!("{what} must be a number between 0 and 1 (got {x})"))
    }
}

fn non_negative(x: f64) -> Result<f64, String> {
    if !x.is_finite() {
        Err(format!("{x} is not a finite number"))
    } else if x < 0.0 {
        Err(format!("{x} is negative; give a size of zero or more"))
    } else {
        Ok(x)
    }
}

/// Power and related figures of one term's test.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct TestPlan {
    /// Denominator df: the mean square's df, or Satterthwaite's for a synthetic test.
    pub denominator_df: Option<f64>,
    pub power: Option<f64>,
    /// Smallest effect (fixed: root mean square; random: standard deviation) found with
    /// the target power.
    pub min_detectable: Option<f64>,
    /// Noncentrality of a fixed term's test at its planned effect.
    pub noncentrality: Option<f64>,
}

/// Expected mean squares in the response's units (squared), from the planning values.
/// Components with no planning SD or effect count as zero.
pub fn ems_values(model: &Model, ems: &Ems, plan: &PlanningValues, levels: &Levels) -> Vec<f64> {
    let theta: Vec<f64> = component_values(model, plan, levels);
    ems.rows
        .iter()
        .map(|row| row.iter().map(|(c, k)| to_f64(k) * theta[*c]).sum())
        .collect()
}

/// The value of each component: σ² for a random term (its SD squared), κ² = Σ effect² / df
/// = RMS² × cells / df for a fixed term.
pub fn component_values(model: &Model, plan: &PlanningValues, levels: &Levels) -> Vec<f64> {
    model
        .terms
        .iter()
        .enumerate()
        .map(|(i, t)| match model.kinds[i] {
            Kind::Random => plan.priors.get(&t.live).map_or(0.0, |sd| sd * sd),
            Kind::Fixed => plan.effects.get(&t.live).map_or(0.0, |e| {
                let cells = t.cells(levels);
                let df = t.df(levels);
                if df == 0 {
                    0.0
                } else {
                    let rms = e.root_mean_square(cells);
                    rms * rms * cells as f64 / df as f64
                }
            }),
        })
        .collect()
}

pub fn to_f64(r: &Rational) -> f64 {
    *r.numer() as f64 / *r.denom() as f64
}

/// Satterthwaite (1946), Biometrics Bulletin 2:110-114: a combination D = Σ wᵢ MSᵢ has
/// approximate df = (Σ wᵢ E(MSᵢ))² / Σ (wᵢ E(MSᵢ))² / dfᵢ.
pub fn satterthwaite(parts: &[(f64, f64, u64)]) -> Option<f64> {
    let total: f64 = parts.iter().map(|(w, e, _)| w * e).sum();
    let spread: f64 = parts
        .iter()
        .map(|(w, e, df)| (w * e).powi(2) / *df as f64)
        .sum();
    if total > 0.0 && spread > 0.0 && total.is_finite() {
        Some(total * total / spread)
    } else {
        None
    }
}

/// Power, Satterthwaite df and minimum detectable effect of every test.
/// `values` are the expected mean squares from `ems_values`.
pub fn plan_tests(
    model: &Model,
    ems: &Ems,
    df: &[u64],
    tests: &[Option<ErrorTerm>],
    plan: &PlanningValues,
    levels: &Levels,
) -> Vec<Option<TestPlan>> {
    let values = ems_values(model, ems, plan, levels);
    let n = levels.observations() as f64;
    tests
        .iter()
        .enumerate()
        .map(|(t, test)| {
            let test = test.as_ref()?;
            if !test.verdict.is_testable() {
                return None;
            }
            Some(plan_one(model, ems, df, test, plan, &values, n, t))
        })
        .collect()
}

#[allow(clippy::too_many_arguments)]
fn plan_one(
    model: &Model,
    ems: &Ems,
    df: &[u64],
    test: &ErrorTerm,
    plan: &PlanningValues,
    values: &[f64],
    n: f64,
    t: usize,
) -> TestPlan {
    let exact_df = (test.verdict == Verdict::Exact).then(|| df[test.denominator[0].0] as f64);
    let mut out = TestPlan {
        denominator_df: exact_df,
        power: None,
        min_detectable: None,
        noncentrality: None,
    };
    if !plan.has_priors() {
        return out;
    }
    let den: f64 = test
        .denominator
        .iter()
        .map(|(v, w)| to_f64(w) * values[*v])
        .sum();
    let df2 = match exact_df {
        Some(d) => Some(d),
        None => satterthwaite(
            &test
                .denominator
                .iter()
                .map(|(v, w)| (to_f64(w), values[*v], df[*v]))
                .collect::<Vec<_>>(),
        ),
    };
    out.denominator_df = df2;
    let Some(df2) = df2 else { return out };
    if den <= 0.0 || !den.is_finite() {
        return out;
    }
    let df1 = df[t] as f64;
    let critical = CriticalValue::new(plan.alpha, df1, df2);
    let term = model.terms[t];
    match model.kinds[t] {
        Kind::Fixed => {
            // λ = df1 (E(MS_T) - E(D)) / E(D) = N × RMS² / E(D).
            if plan.effects.contains_key(&term.live) {
                let lambda = df1 * (values[t] - den) / den;
                out.noncentrality = Some(lambda);
                out.power = Some(critical.fixed_power(lambda.max(0.0)));
            }
            out.min_detectable =
                min_noncentrality(&critical, plan.power).map(|lambda| (lambda * den / n).sqrt());
        }
        Kind::Random => {
            let own = ems.coefficient(t, t);
            let own = to_f64(&own);
            if plan.priors.contains_key(&term.live) && values[t] > 0.0 {
                out.power = Some(critical.random_power(den / values[t]));
            }
            // P(F > F_crit × r) = power  ⇔  F_crit × r = F quantile at 1 - power.
            let q = dist::f_quantile(1.0 - plan.power, df1, df2);
            let r = q / critical.value();
            if r > 0.0 && r < 1.0 && own > 0.0 {
                out.min_detectable = Some((den * (1.0 / r - 1.0) / own).sqrt());
            }
        }
    }
    out
}

/// The noncentrality at which a fixed term's test reaches `power`, by bisection on a
/// bracket that doubles until it holds the root (power grows with λ). A target at or
/// below the test's level is met with no effect at all.
pub fn min_noncentrality(critical: &CriticalValue, power: f64) -> Option<f64> {
    if !(power > 0.0 && power < 1.0) {
        return None;
    }
    if critical.fixed_power(0.0) >= power {
        return Some(0.0);
    }
    let mut hi = 1.0;
    let mut doublings = 0;
    while critical.fixed_power(hi) < power {
        hi *= 2.0;
        doublings += 1;
        if doublings > 60 {
            return None;
        }
    }
    let mut lo = 0.0;
    for _ in 0..200 {
        let mid = 0.5 * (lo + hi);
        if critical.fixed_power(mid) < power {
            lo = mid;
        } else {
            hi = mid;
        }
        if hi - lo <= 1e-10 * hi.max(1.0) {
            break;
        }
    }
    Some(0.5 * (lo + hi))
}

/// What a layout costs, with the breakdown by term.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Cost {
    pub total: f64,
    pub overhead: f64,
    pub breakdown: Vec<CostLine>,
}

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct CostLine {
    pub term: String,
    /// Cells of the term: each unit bought (each observation for the residual).
    pub units: u64,
    pub per_unit: f64,
    pub cost: f64,
}

/// Overhead plus, for each priced term, its price times its number of cells.
pub fn cost(model: &CostModel, structure: &Structure, levels: &Levels) -> Cost {
    let breakdown: Vec<CostLine> = model
        .per_unit
        .iter()
        .map(|&(live, price)| {
            let (term, units) = if live == REPLICATE {
                ("residual".to_string(), levels.observations())
            } else {
                let t = term_of(structure, live);
                (t.label(structure), t.cells(levels))
            };
            CostLine {
                term,
                units,
                per_unit: price,
                cost: price * units as f64,
            }
        })
        .collect();
    Cost {
        total: model.overhead + breakdown.iter().map(|l| l.cost).sum::<f64>(),
        overhead: model.overhead,
        breakdown,
    }
}
