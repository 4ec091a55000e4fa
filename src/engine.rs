//! One analysis of a layout, whatever its balance.
//!
//! [`Analysis::new`] builds the model's terms, df, expected mean squares and every term's
//! error term. A balanced layout goes through the exact engine (`ems` and `errorterm`:
//! the tableau of subscripts, rational coefficients, weights by back-substitution); a
//! layout with cells removed goes through the synthesis engine (`unbalanced`: sums of
//! squares as projections, Hartley's synthesis, float weights). Both give the same
//! [`Analysis`]: coefficients are [`Coefficient`]s, tests are [`Test`]s, and power,
//! Satterthwaite df, minimum detectable effects and cost are computed from it by one path
//! (`planning`), whichever constructor built it. A caller never asks which one it holds;
//! only code that computes sums of squares from data reads [`Analysis::synthesis`].

use crate::ems::{Model, Rational};
use crate::error::Error;
use crate::errorterm::{Verdict, error_term};
use crate::layout::{Kind, Layout, SumsOfSquares};
use crate::planning::{self, Cost, PlanningValues, TestInput, TestPlan};
use crate::term::{Mask, REPLICATE};
use crate::unbalanced::{Design, Fit, SynthesisEms};

/// A coefficient of an expected mean square or a denominator weight: exact in balanced
/// layouts, a float from the synthesis in unbalanced ones.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Coefficient {
    Exact(Rational),
    Approximate(f64),
}

impl Coefficient {
    pub fn value(&self) -> f64 {
        match self {
            Coefficient::Exact(r) => planning::to_f64(r),
            Coefficient::Approximate(x) => *x,
        }
    }

    /// A float within 1e-9 (relative) of a whole number, as that number.
    pub fn whole(x: f64) -> Option<i64> {
        let r = x.round();
        ((x - r).abs() <= 1e-9 * x.abs().max(1.0) && r.abs() < 1e15).then_some(r as i64)
    }

    /// The exact fraction, for a balanced layout's coefficient.
    pub fn exact(&self) -> Option<Rational> {
        match self {
            Coefficient::Exact(r) => Some(*r),
            Coefficient::Approximate(_) => None,
        }
    }

    pub fn is_one(&self) -> bool {
        match self {
            Coefficient::Exact(r) => *r == Rational::from_integer(1),
            Coefficient::Approximate(x) => Self::whole(*x) == Some(1),
        }
    }

    pub fn is_negative(&self) -> bool {
        self.value() < 0.0
    }

    /// The magnitude, same kind.
    pub fn abs(&self) -> Coefficient {
        match self {
            Coefficient::Exact(r) => Coefficient::Exact(num_traits::Signed::abs(r)),
            Coefficient::Approximate(x) => Coefficient::Approximate(x.abs()),
        }
    }
}

impl serde::Serialize for Coefficient {
    fn serialize<S: serde::Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        match self {
            Coefficient::Exact(r) if r.is_integer() => s.serialize_i128(r.to_integer()),
            Coefficient::Exact(r) => s.serialize_f64(planning::to_f64(r)),
            Coefficient::Approximate(x) => match Self::whole(*x) {
                Some(w) => s.serialize_i64(w),
                None => s.serialize_f64(*x),
            },
        }
    }
}

/// How a term is tested: the verdict, the denominator as (term index, weight) pairs, and
/// for an untestable term the components of its target that no other estimable mean
/// square carries.
#[derive(Debug, Clone, PartialEq)]
pub struct Test {
    pub verdict: Verdict,
    pub denominator: Vec<(usize, Coefficient)>,
    pub isolated: Vec<usize>,
}

/// How a term is tested in a layout, with its planned figures: enough to judge it against
/// a goal.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Outcome {
    pub verdict: Verdict,
    pub denominator_df: Option<f64>,
    pub power: Option<f64>,
}

/// The synthesis engine's own state, for code that computes sums of squares from data.
#[derive(Debug, Clone)]
pub struct Synthesis {
    pub design: Design,
    pub fit: Fit,
}

/// What the engine computes for a layout: terms, df, expected mean squares and tests.
#[derive(Debug, Clone)]
pub struct Analysis {
    pub layout: Layout,
    pub model: Model,
    /// df of every term, the residual last.
    pub df: Vec<u64>,
    /// For every term, its components (term indices, the residual's for σ²) with their
    /// coefficients, sorted by component; no zero coefficients.
    pub ems: Vec<Vec<(usize, Coefficient)>>,
    /// Every term's test; `None` for the residual, and for terms not asked for.
    pub tests: Vec<Option<Test>>,
    /// Observations the layout keeps.
    pub observations: u64,
    /// `Some` for a layout with cells removed.
    pub synthesis: Option<Synthesis>,
}

impl Analysis {
    /// The analysis of a layout: the exact engine for a balanced one, the synthesis for
    /// one with cells removed.
    pub fn new(layout: &Layout) -> Result<Analysis, Error> {
        Self::build(layout, None)
    }

    /// The same, with the test of one term only (the term with live set `live`): what the
    /// repair search needs for each change it tries.
    pub fn for_term(layout: &Layout, live: Mask) -> Result<Analysis, Error> {
        Self::build(layout, Some(live))
    }

    fn build(layout: &Layout, only: Option<Mask>) -> Result<Analysis, Error> {
        if layout.is_balanced() {
            Self::balanced(layout, only)
        } else {
            Self::unbalanced(layout, only)
        }
    }

    fn balanced(layout: &Layout, only: Option<Mask>) -> Result<Analysis, Error> {
        let model = Model::new(&layout.structure);
        let df = model.df(&layout.levels);
        let exact = model
            .ems(&layout.levels)
            .map_err(|e| Error::invalid(None, e.to_string()))?;
        let tests = (0..model.terms.len())
            .map(|t| {
                let wanted = t != model.residual() && only.is_none_or(|l| model.terms[t].live == l);
                wanted.then(|| {
                    let e = error_term(&model, &exact, &df, t);
                    Test {
                        verdict: e.verdict,
                        denominator: e
                            .denominator
                            .iter()
                            .map(|&(v, w)| (v, Coefficient::Exact(w)))
                            .collect(),
                        isolated: e.isolated,
                    }
                })
            })
            .collect();
        let ems = exact
            .rows
            .iter()
            .map(|row| {
                row.iter()
                    .map(|&(c, x)| (c, Coefficient::Exact(x)))
                    .collect()
            })
            .collect();
        Ok(Analysis {
            layout: layout.clone(),
            observations: layout.observations(),
            model,
            df,
            ems,
            tests,
            synthesis: None,
        })
    }

    fn unbalanced(layout: &Layout, only: Option<Mask>) -> Result<Analysis, Error> {
        let design = Design::new(layout).map_err(|m| Error::invalid(None, m))?;
        if design.model.pools_above_residual() {
            let s = &layout.structure;
            let (o, t) = design
                .model
                .omitted
                .iter()
                .zip(&design.model.pooled_into)
                .find(|(_, t)| **t != design.model.residual())
                .map(|(o, &t)| (o.label(s), design.model.terms[t].label(s)))
                .unwrap_or_default();
            return Err(Error::invalid(
                None,
                format!(
                    "with cells removed, emsplan pools an interaction assumed absent only into the residual, and {o} would join {t}: keep {o} in the model (set additive = false, or take it out of `omit`), or check the layout without the removals"
                ),
            ));
        }
        let fit = Fit::new(&design, layout.sums_of_squares);
        let synthesised: SynthesisEms = fit.ems(&design);
        let model = design.model.clone();
        let tests = (0..model.terms.len())
            .map(|t| {
                let wanted = t != model.residual() && only.is_none_or(|l| model.terms[t].live == l);
                wanted.then(|| {
                    let e = crate::unbalanced::denominator::error_term(
                        &model,
                        &synthesised,
                        &fit.df,
                        t,
                    );
                    Test {
                        verdict: e.verdict,
                        denominator: e
                            .denominator
                            .iter()
                            .map(|&(v, w)| (v, Coefficient::Approximate(w)))
                            .collect(),
                        isolated: e.isolated,
                    }
                })
            })
            .collect();
        let ems = synthesised
            .rows
            .iter()
            .map(|row| {
                row.iter()
                    .map(|&(c, x)| (c, Coefficient::Approximate(x)))
                    .collect()
            })
            .collect();
        Ok(Analysis {
            layout: layout.clone(),
            observations: design.len() as u64,
            df: fit.df.clone(),
            model,
            ems,
            tests,
            synthesis: Some(Synthesis { design, fit }),
        })
    }

    /// The index of the term with live set `live`.
    pub fn term(&self, live: Mask) -> Option<usize> {
        self.model.terms.iter().position(|u| u.live == live)
    }

    /// The coefficient of component `c` in E(MS) of term `t` (0 when absent).
    pub fn coefficient(&self, t: usize, c: usize) -> f64 {
        self.ems[t]
            .iter()
            .find(|(u, _)| *u == c)
            .map_or(0.0, |(_, x)| x.value())
    }

    /// Which sums of squares the mean squares are: sequential or type III for an
    /// unbalanced layout; `None` for a balanced one, where every kind agrees.
    pub fn sums_of_squares(&self) -> Option<SumsOfSquares> {
        self.synthesis.as_ref().map(|s| s.fit.sums_of_squares)
    }

    /// The df the terms would have with sequential sums of squares (type III can leave a
    /// term fewer when a cell is empty); the df themselves in a balanced layout.
    pub fn sequential_df(&self) -> &[u64] {
        match &self.synthesis {
            Some(s) => &s.fit.sequential_df,
            None => &self.df,
        }
    }

    /// Cells of term `live` that are bought: every cell in a balanced layout, those that
    /// keep at least one observation in an unbalanced one; observations for `REPLICATE`.
    pub fn units(&self, live: Mask) -> u64 {
        if live == REPLICATE {
            return self.observations;
        }
        let levels = &self.layout.levels;
        let structure = &self.layout.structure;
        match (&self.synthesis, self.term(live)) {
            (Some(s), Some(t)) => s.design.occupied_cells(t) as u64,
            // A priced interaction assumed absent: its cells are still bought.
            _ => crate::layout::term_of(structure, live).cells(levels),
        }
    }

    /// What the layout costs under the planning values' prices.
    pub fn cost(&self, plan: &PlanningValues) -> Option<Cost> {
        let prices = plan.cost.as_ref()?;
        Some(prices.cost(&self.layout.structure, |live| self.units(live)))
    }

    /// Expected mean squares in the response's units (squared) under the planning values.
    pub fn ems_values(&self, plan: &PlanningValues) -> Vec<f64> {
        let theta = plan.component_values(&self.model, &self.layout.levels);
        self.ems
            .iter()
            .map(|row| row.iter().map(|(c, k)| k.value() * theta[*c]).sum())
            .collect()
    }

    /// Power, denominator df and minimum detectable effect of every test.
    pub fn plans(&self, plan: &PlanningValues) -> Vec<Option<TestPlan>> {
        let values = self.ems_values(plan);
        let theta = plan.component_values(&self.model, &self.layout.levels);
        (0..self.model.terms.len())
            .map(|t| self.plan_of(t, plan, &values, &theta))
            .collect()
    }

    fn plan_of(
        &self,
        t: usize,
        plan: &PlanningValues,
        values: &[f64],
        theta: &[f64],
    ) -> Option<TestPlan> {
        let test = self.tests[t].as_ref()?;
        if !test.verdict.is_testable() {
            return None;
        }
        let term = self.model.terms[t];
        let levels = &self.layout.levels;
        let kind = self.model.kinds[t];
        let planned = match kind {
            Kind::Fixed => plan.effects.contains_key(&term.live),
            Kind::Random => plan.priors.contains_key(&term.live),
        };
        Some(planning::plan_test(
            &TestInput {
                kind,
                df: self.df[t],
                own: self.coefficient(t, t),
                own_value: planned.then_some(theta[t]),
                denominator: test
                    .denominator
                    .iter()
                    .map(|(v, w)| (w.value(), values[*v], self.df[*v]))
                    .collect(),
                exact: test.verdict == Verdict::Exact,
                effect_scale: term.df(levels) as f64 / term.cells(levels) as f64,
            },
            plan,
        ))
    }

    /// How the term with live set `live` is tested, with its planned df and power.
    pub fn outcome(&self, plan: &PlanningValues, live: Mask) -> Option<Outcome> {
        let t = self.term(live)?;
        let test = self.tests[t].as_ref()?;
        let planned = if plan.has_priors() || test.verdict == Verdict::Exact {
            let values = self.ems_values(plan);
            let theta = plan.component_values(&self.model, &self.layout.levels);
            self.plan_of(t, plan, &values, &theta)
        } else {
            None
        };
        Some(Outcome {
            verdict: test.verdict,
            denominator_df: planned.and_then(|p| p.denominator_df),
            power: planned.and_then(|p| p.power),
        })
    }
}
