//! Planning values and what follows from them: expected mean squares in the response's
//! units, Satterthwaite df, power, minimum detectable effects, and cost.
//!
//! Planning values are the user's guesses: standard deviations of random terms (`[sd]`,
//! once called `[prior]`), smallest effects worth detecting for fixed terms (`[effect]`),
//! unit costs (`[cost]`). Every result here is only as good as they are.

use std::collections::BTreeMap;

use serde::Serialize;

use crate::dist::{self, CriticalValue};
use crate::ems::{Model, Rational};
use crate::error::Error;
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
                    return Err(Error::invalid(line, absent("[sd]", key, s, &term)));
                }
                let sd = non_negative(*value.get_ref())
                    .map_err(|m| Error::invalid(line, format!("[sd] \"{key}\": {m}")))?;
                priors.insert(term.live, sd);
            }
            if !priors.contains_key(&REPLICATE) {
                let message = match s.units.alias(REPLICATE) {
                    Some(name) => format!(
                        "[sd] needs `{name}`, the standard deviation between {name}s (the smallest units, where the observations are made)"
                    ),
                    None => "[sd] needs `residual`, the standard deviation between observations within a cell".to_string(),
                };
                return Err(Error::invalid(at(spanned.span()), message));
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
                    return Err(Error::invalid(line, absent("[effect]", key, s, &term)));
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
    /// Denominator df: the mean square's df, or Satterthwaite's for a combination.
    pub denominator_df: Option<f64>,
    pub power: Option<f64>,
    /// Smallest effect (fixed: root mean square; random: standard deviation) found with
    /// the target power.
    pub min_detectable: Option<f64>,
    /// Noncentrality of a fixed term's test at its planned effect.
    pub noncentrality: Option<f64>,
}

/// What the power of one term's test depends on, whichever engine found the test.
#[derive(Debug, Clone, PartialEq)]
pub struct TestInput {
    pub kind: Kind,
    /// The term's df (numerator df).
    pub df: u64,
    /// Coefficient of the term's own component in its expected mean square.
    pub own: f64,
    /// The planned value of the term's own component (σ² or κ²), `None` when the
    /// planning values give the term none.
    pub own_value: Option<f64>,
    /// The denominator: (weight, expected mean square under the planning values, df)
    /// of each mean square in it.
    pub denominator: Vec<(f64, f64, u64)>,
    /// One mean square with weight 1: its df are the denominator df.
    pub exact: bool,
    /// df / cells of the term in the full layout: κ² = RMS² / effect_scale.
    pub effect_scale: f64,
}

/// The component values θ: σ² for a random term (its planned standard deviation
/// squared), κ² = Σ effect² / df = RMS² × cells / df for a fixed term; zero for a term
/// the planning values leave out.
impl PlanningValues {
    pub fn component_value(&self, term: &Term, kind: Kind, levels: &Levels) -> f64 {
        match kind {
            Kind::Random => self.priors.get(&term.live).map_or(0.0, |sd| sd * sd),
            Kind::Fixed => self.effects.get(&term.live).map_or(0.0, |e| {
                let cells = term.cells(levels);
                let df = term.df(levels);
                if df == 0 {
                    0.0
                } else {
                    let rms = e.root_mean_square(cells);
                    rms * rms * cells as f64 / df as f64
                }
            }),
        }
    }

    /// `component_value` of every term of a model, the residual last.
    pub fn component_values(&self, model: &Model, levels: &Levels) -> Vec<f64> {
        model
            .terms
            .iter()
            .zip(&model.kinds)
            .map(|(t, &k)| self.component_value(t, k, levels))
            .collect()
    }
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

/// The power of a term's test, the one formula every job uses.
///
/// - Fixed term: noncentral F with λ = df₁ c_T κ²_T / E(D), where c_T κ²_T (`signal`) is
///   the term's own part of E(MS_T) (in a balanced layout λ = N × RMS² / E(D)).
/// - Random term: P(F > F_crit × E(D) / E(MS_T)) with E(MS_T) = E(D) + c_T σ²_T, since
///   MS_T / E(MS_T) over D / E(D) is F-distributed under the model.
pub fn power(critical: &CriticalValue, kind: Kind, df: f64, signal: f64, denominator: f64) -> f64 {
    match kind {
        Kind::Fixed => critical.fixed_power((df * signal / denominator).max(0.0)),
        Kind::Random => critical.random_power(denominator / (denominator + signal)),
    }
}

/// Power, denominator df and minimum detectable effect of one test (see `power`).
///
/// Minimum detectable effects: for a fixed term the noncentrality λ* that gives the
/// target power, so κ² = λ* E(D) / (df₁ c_T) and RMS = √(κ² × df / cells); for a random
/// term, P(F > F_crit × r) = power ⇔ F_crit × r = F quantile at 1 - power, and
/// σ = √(E(D) (1/r - 1) / c_T).
pub fn plan_test(input: &TestInput, plan: &PlanningValues) -> TestPlan {
    let exact_df = input
        .exact
        .then(|| input.denominator.first().map(|&(_, _, d)| d as f64))
        .flatten();
    let mut out = TestPlan {
        denominator_df: exact_df,
        power: None,
        min_detectable: None,
        noncentrality: None,
    };
    if !plan.has_priors() {
        return out;
    }
    let den: f64 = input.denominator.iter().map(|(w, e, _)| w * e).sum();
    let df2 = exact_df.or_else(|| satterthwaite(&input.denominator));
    out.denominator_df = df2;
    let Some(df2) = df2 else { return out };
    if den <= 0.0 || !den.is_finite() || input.own <= 0.0 {
        return out;
    }
    let df1 = input.df as f64;
    let critical = CriticalValue::new(plan.alpha, df1, df2);
    let signal = input.own_value.map(|theta| input.own * theta);
    match input.kind {
        Kind::Fixed => {
            if let Some(signal) = signal {
                out.noncentrality = Some(df1 * signal / den);
                out.power = Some(power(&critical, Kind::Fixed, df1, signal, den));
            }
            out.min_detectable = min_noncentrality(&critical, plan.power).map(|lambda| {
                let kappa = lambda * den / (df1 * input.own);
                (kappa * input.effect_scale).sqrt()
            });
        }
        Kind::Random => {
            if let Some(signal) = signal.filter(|s| *s > 0.0) {
                out.power = Some(power(&critical, Kind::Random, df1, signal, den));
            }
            let q = dist::f_quantile(1.0 - plan.power, df1, df2);
            let r = q / critical.value();
            if r > 0.0 && r < 1.0 {
                out.min_detectable = Some((den * (1.0 / r - 1.0) / input.own).sqrt());
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
    /// The priced term's live set (`REPLICATE`: each observation).
    #[serde(skip)]
    pub term: Mask,
    /// Its label, `residual` for each observation.
    #[serde(rename = "term")]
    pub label: String,
    /// Cells of the term: each unit bought (each observation for the residual).
    pub units: u64,
    pub per_unit: f64,
    pub cost: f64,
}

/// Why a planning key names no term: the term is assumed absent, by `omit`, by
/// unit-treatment additivity, or because it is the smallest unit itself.
fn absent(table: &str, key: &str, s: &Structure, term: &Term) -> String {
    if s.units.pooled.contains(&term.live) {
        format!(
            "{table} \"{key}\" is pooled into its stratum's error, since units and treatments are taken as additive: remove the key, or set additive = false in [layout] to keep the interaction"
        )
    } else if s.units.merged == Some(term.live) {
        let name = s.units.alias(REPLICATE).unwrap_or("residual");
        format!("{table} \"{key}\" is the {name} itself: give its standard deviation as \"{name}\"")
    } else {
        format!("{table} \"{key}\" is assumed absent (in `omit`), so it has no variance")
    }
}

/// The one cost formula: overhead plus Σ price × units bought, over (price, units) lines.
pub fn priced_total(overhead: f64, lines: impl IntoIterator<Item = (f64, u64)>) -> f64 {
    overhead
        + lines
            .into_iter()
            .map(|(price, units)| price * units as f64)
            .sum::<f64>()
}

impl CostModel {
    /// What a layout costs, with the breakdown by term: `priced_total` over the units
    /// bought of each priced term (`units` of its live set; of `REPLICATE` for each
    /// observation).
    pub fn cost(&self, structure: &Structure, mut units: impl FnMut(Mask) -> u64) -> Cost {
        let breakdown: Vec<CostLine> = self
            .per_unit
            .iter()
            .map(|&(live, price)| {
                let n = units(live);
                CostLine {
                    term: live,
                    label: if live == REPLICATE {
                        structure
                            .units
                            .alias(REPLICATE)
                            .unwrap_or("residual")
                            .to_string()
                    } else {
                        term_of(structure, live).label(structure)
                    },
                    units: n,
                    per_unit: price,
                    cost: price * n as f64,
                }
            })
            .collect();
        Cost {
            total: priced_total(
                self.overhead,
                breakdown.iter().map(|l| (l.per_unit, l.units)),
            ),
            overhead: self.overhead,
            breakdown,
        }
    }
}

/// What a balanced layout costs: every cell of a priced term is bought.
pub fn cost(model: &CostModel, structure: &Structure, levels: &Levels) -> Cost {
    model.cost(structure, |live| {
        if live == REPLICATE {
            levels.observations()
        } else {
            term_of(structure, live).cells(levels)
        }
    })
}
