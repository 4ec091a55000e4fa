//! The `simulate` job: dummy data drawn from a layout's model at its planning values, and
//! a Monte Carlo confirmation of its expected mean squares, error rates and power.
//!
//! # The model simulated
//!
//! y = μ + Σ_T (effect of T at the observation's cell of T) + ε, with ε ~ N(0, σ²) and σ the
//! `residual` value of `[sd]`.
//!
//! - A fixed term gets fixed effects in a linear pattern: the product over its live
//!   factors of the centred level scores i - (n + 1)/2 (i = 1..n), the same in every cell of
//!   its nest, scaled so that the root mean square over the term's cells is the `[effect]`
//!   size. A main effect given as `{ range = D }` gets the least favourable configuration
//!   instead: -D/2 at its first level, +D/2 at its last, 0 between. Both sum to zero over
//!   each live subscript, so κ² = Σ effect² / df is what `planning` puts in the expected
//!   mean squares. A fixed term without an `[effect]` has no effect.
//! - A random term's effects are drawn afresh for every data set, independent N(0, σ²_T)
//!   over its cells with σ_T its `[sd]`. Under the restricted convention (Cornfield and
//!   Tukey 1956) they are then centred over every fixed live subscript, so that mixed
//!   interaction effects sum to zero over each fixed subscript; for a two-factor mixed
//!   interaction this gives Var = ((a - 1)/a) σ², which is the parameterisation of the
//!   restricted model whose expected mean squares `ems` computes (`tests/monte_carlo.rs`
//!   holds the engine to it). Under the unrestricted convention they are left independent.
//!   A random term without an `[sd]` value has no effect.
//! - A random factor from a finite population of N (Cornfield and Tukey 1956): the effects
//!   of every random term live in it are drawn over the whole population and centred over
//!   it (so σ² = Σ effect² / (N - 1) over the population), and in every data set the
//!   layout's n levels in each nest are a fresh sample without replacement of the N, the
//!   same sample for every term. Under either convention this gives the factors (1 - n/N)
//!   of the engine's expected mean squares (the tests hold it).
//!
//! # Monte Carlo
//!
//! Run i draws its data set from a ChaCha8 generator seeded with the seed and set to
//! stream i, so a run's numbers do not depend on which thread ran it; runs are tallied in
//! fixed blocks combined in order, so the whole result is the same on every machine. For
//! every term it records the mean square; for every testable term the planned test (F, or
//! the quasi-F with Satterthwaite df from the run's own mean squares) on the data set and
//! on the same data set less that term's own effects (its null hypothesis). Because the
//! effects of a term are constant within cells, the null data set differs from the run's
//! only in its cell totals, so the per-observation work is done once per run.
//!
//! # Unbalanced layouts
//!
//! A layout with removals is drawn exactly as its full layout (the same effects, the same
//! generator streams), and the observations the removals take are dropped: a run's data
//! set is the full layout's less the removed observations. Each kept observation is found
//! in the full layout by the balanced engine's own cell numbering from its level tuple.
//! Sums of squares are `unbalanced::Fit::sums_of_squares` (sequential or type III, as the
//! layout says), mean squares SS / df with the fit's df, and the tests are the synthesis
//! error terms (`unbalanced::denominator`), exact F or quasi-F with Satterthwaite df from
//! the run's own mean squares. The null data set is the kept observations less the term's
//! own effects. Only the unrestricted model with infinite populations reaches here (the
//! layout refuses the rest).
//!
//! Expected mean squares, Hartley (1967): E(y'Ay) = σ² tr(A) + Σ_U σ²_U tr(A Z_U Z_U') +
//! μ'Aμ. The random part is the synthesis coefficients times the variances. The fixed part
//! μ'Aμ depends on the pattern of the fixed effects in an unbalanced layout; the synthesis
//! gives its average over patterns, but the simulator draws one pattern, so it is computed
//! exactly: the sum of squares of the noise-free fixed mean μ through the same fit, divided
//! by df. The analytic power of a fixed term is likewise that of the simulated pattern,
//! with noncentrality λ = SS_T(μ) / E(D) and the planned denominator df.
//!
//! Rejection rates carry Wilson's (1927) score interval,
//! (p̂ + z²/2n ± z √(p̂(1 - p̂)/n + z²/4n²)) / (1 + z²/n), and are flagged when the value
//! they are held against (alpha, or the analytic power) lies outside it.

use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, StandardNormal};
use rayon::prelude::*;
use serde::Serialize;

use crate::balanced::{self, Balanced, anova_numbers, index_in, odometer};
use crate::dist::{self, CriticalValue};
use crate::engine::{Analysis, Coefficient, Synthesis};
use crate::error::Error;
use crate::errorterm::Verdict;
use crate::findings::DenominatorPart;
use crate::layout::{Convention, Kind, Layout, SumsOfSquares};
use crate::planning::{self, Effect, PlanningValues, TestPlan};
use crate::progress::Progress;
use crate::term::REPLICATE;

mod data;
mod generator;
mod report;
mod tally;

pub use data::*;
pub use generator::*;
pub use report::*;
pub use tally::*;

/// Runs the Monte Carlo and, when asked, draws the data set to write.
pub fn simulate(
    layout: &Layout,
    plan: &PlanningValues,
    request: &Request,
) -> Result<(SimulateReport, Option<DataSet>), Error> {
    simulate_with(layout, plan, request, &crate::progress::Quiet)
}

/// `simulate`, telling `progress` how many data sets are done.
pub fn simulate_with(
    layout: &Layout,
    plan: &PlanningValues,
    request: &Request,
    progress: &dyn Progress,
) -> Result<(SimulateReport, Option<DataSet>), Error> {
    let sim = Simulator::new(layout, plan)?;
    let a = &sim.analysis;
    let model = &a.model;
    let s = &layout.structure;
    let df = &sim.df;
    let labels: Vec<String> = model.terms.iter().map(|t| t.label(s)).collect();
    // How every term is tested (verdict, denominator weights), and the planned df and
    // analytic power, from the layout's own analysis; for a layout with removals, the
    // power of a fixed term is that of the simulated pattern.
    type Tested = Option<(Verdict, Vec<(usize, Coefficient)>)>;
    let fitted = &sim.fitted;
    let mut plans = fitted.plans(plan);
    // The power `check` gives a fixed term of an unbalanced layout (averaged over patterns).
    let mut averaged: Vec<Option<f64>> = Vec::new();
    if let Some(kept) = &sim.kept {
        averaged = plans.iter().map(|p| p.and_then(|p| p.power)).collect();
        for test in &sim.tests {
            let t = test.term;
            let with_effect = matches!(test.own, Own::Fixed(_));
            if let Some(p) = plans[t].as_mut().filter(|_| with_effect) {
                p.noncentrality = sim.noncentrality(test, kept.fixed_ss[t]);
                p.power = sim.pattern_power(test, p.denominator_df, kept.fixed_ss[t]);
            }
        }
    }
    let tested: Vec<Tested> = fitted
        .tests
        .iter()
        .map(|e| e.as_ref().map(|e| (e.verdict, e.denominator.clone())))
        .collect();
    let tally =
        (request.runs > 0).then(|| sim.monte_carlo_with(request.seed, request.runs, progress));

    let terms = model
        .terms
        .iter()
        .enumerate()
        .map(|(t, term)| {
            let (mean_ms, mean_ms_se) = match &tally {
                Some(tl) if df[t] > 0 => {
                    let n = tl.runs as f64;
                    let dev = tl.ms_dev[t] / n;
                    let se = if tl.runs > 1 {
                        ((tl.ms_dev2[t] - n * dev * dev).max(0.0) / (n - 1.0) / n).sqrt()
                    } else {
                        f64::NAN
                    };
                    (Some(sim.expected[t] + dev), Some(se))
                }
                _ => (None, None),
            };
            let ms_flag = match (mean_ms, mean_ms_se) {
                (Some(m), Some(se)) => (m - sim.expected[t]).abs() > Z * se + 1e-12 * m.abs(),
                _ => false,
            };
            let test = tested[t].as_ref().map(|(verdict, parts)| {
                let i = sim.tests.iter().position(|p| p.term == t);
                let planned = plans[t];
                let analytic_power = planned.and_then(|p| p.power);
                let (null, power, simulated_df, undefined, null_undefined) = match (&tally, i) {
                    (Some(tl), Some(i)) => (
                        Some(Rate::new(tl.null[i], tl.runs)),
                        Some(Rate::new(tl.alternative[i], tl.runs)),
                        (tl.df_runs[i] > 0).then(|| tl.df_sum[i] / tl.df_runs[i] as f64),
                        tl.undefined[i],
                        tl.null_undefined[i],
                    ),
                    _ => (None, None, None, 0, 0),
                };
                SimulatedTest {
                    verdict: *verdict,
                    denominator: parts
                        .iter()
                        .map(|&(v, w)| DenominatorPart {
                            id: model.terms[v].live,
                            term: labels[v].clone(),
                            coefficient: w,
                        })
                        .collect(),
                    planned_df: planned.and_then(|p| p.denominator_df),
                    simulated_df,
                    null_flag: null.is_some_and(|r| !r.holds(plan.alpha)),
                    null,
                    power_flag: match (power, analytic_power) {
                        (Some(r), Some(p)) => !r.holds(p),
                        _ => false,
                    },
                    power,
                    analytic_power,
                    undefined,
                    null_undefined,
                }
            });
            SimulatedTerm {
                label: labels[t].clone(),
                kind: model.kinds[t],
                residual: term.is_residual(),
                df: df[t],
                expected_ms: sim.expected[t],
                mean_ms,
                mean_ms_se,
                ms_flag,
                test,
            }
        })
        .collect();

    let mut notes = Vec::new();
    let no_prior: Vec<&str> = model
        .terms
        .iter()
        .enumerate()
        .filter(|(t, term)| {
            model.kinds[*t] == Kind::Random && !plan.priors.contains_key(&term.live)
        })
        .map(|(t, _)| labels[t].as_str())
        .collect();
    if !no_prior.is_empty() {
        notes.push(SimulationNote::NoVariance {
            terms: no_prior.iter().map(|t| t.to_string()).collect(),
        });
    }
    let no_effect: Vec<&str> = model
        .terms
        .iter()
        .enumerate()
        .filter(|(t, term)| {
            model.kinds[*t] == Kind::Fixed
                && !term.is_residual()
                && !plan.effects.contains_key(&term.live)
        })
        .map(|(t, _)| labels[t].as_str())
        .collect();
    if !no_effect.is_empty() {
        notes.push(SimulationNote::NoEffect {
            terms: no_effect.iter().map(|t| t.to_string()).collect(),
        });
    }
    if let Some(kept) = &sim.kept {
        notes.extend(unbalanced_notes(
            &sim, kept, &labels, &plans, &averaged, layout,
        ));
    }

    let (data, data_set) = match &request.data {
        None => (None, None),
        Some(d) => {
            let y = sim.data_set(request.seed, d.mean);
            let set = data_set(layout, &sim, &y, decimals(plan), d.unique_labels);
            let (ms, mean) = match &sim.kept {
                None => {
                    let (_, ms, mean) = anova_numbers(sim.balanced(), &set.y);
                    (ms, mean)
                }
                Some(kept) => {
                    let mut ms = vec![0.0; df.len()];
                    sim.kept_mean_squares(kept, &set.y, &mut ms);
                    (ms, set.y.iter().sum::<f64>() / set.y.len() as f64)
                }
            };
            let summary = DataSummary {
                path: d.path.clone(),
                observations: set.y.len() as u64,
                decimals: set.decimals,
                drawn_around: d.mean,
                mean,
                mean_squares: (0..model.terms.len())
                    .map(|t| TermMeanSquare {
                        term: labels[t].clone(),
                        df: df[t],
                        ms: (df[t] > 0).then_some(ms[t]),
                    })
                    .collect(),
            };
            (Some(summary), Some(set))
        }
    };

    Ok((
        SimulateReport {
            name: layout.name.clone(),
            convention: s.convention,
            seed: request.seed,
            runs: request.runs,
            alpha: plan.alpha,
            confidence: CONFIDENCE,
            observations: layout.observations(),
            unbalanced: sim.kept.as_ref().map(|k| UnbalancedRun {
                sums_of_squares: layout.sums_of_squares,
                full_observations: layout.levels.observations(),
                removed_observations: layout.levels.observations() - layout.observations(),
                removals: layout.removed.iter().map(|r| r.describe(s)).collect(),
                fit_order: k
                    .synthesis
                    .fit
                    .order
                    .iter()
                    .map(|&t| labels[t].clone())
                    .collect(),
            }),
            terms,
            data,
            notes,
        },
        data_set,
    ))
}

/// What a simulation notes about how it was run and what its figures mean.
#[derive(Debug, Clone, PartialEq, Serialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum SimulationNote {
    /// Random terms simulated with no variance (no standard deviation given).
    NoVariance { terms: Vec<String> },
    /// Fixed terms simulated with no effect (no effect given).
    NoEffect { terms: Vec<String> },
    /// An unbalanced layout: how its data sets and expectations are made, and that its
    /// F ratios are approximations.
    Unbalanced,
    /// Fixed terms whose analytic power for the simulated pattern differs from the
    /// average over patterns `check` gives: (term, check's, here).
    PatternPower { terms: Vec<(String, f64, f64)> },
    /// A fixed term's null data sets still carry other fixed terms' effects.
    NullCarries {
        term: String,
        sums_of_squares: SumsOfSquares,
        null_rate: f64,
    },
}

/// What the report says of an unbalanced layout's simulation: how the data sets and their
/// expectations are made, the fixed terms' power for the simulated pattern against the
/// average `check` gives, and the null data sets that still carry other fixed effects.
fn unbalanced_notes(
    sim: &Simulator,
    kept: &Kept,
    labels: &[String],
    plans: &[Option<TestPlan>],
    averaged: &[Option<f64>],
    layout: &Layout,
) -> Vec<SimulationNote> {
    let mut notes = vec![SimulationNote::Unbalanced];
    let mut differs = Vec::new();
    for test in &sim.tests {
        let t = test.term;
        if let (Some(Some(mine)), Some(Some(theirs))) = (
            plans.get(t).map(|p| p.and_then(|p| p.power)),
            averaged.get(t),
        ) && matches!(test.own, Own::Fixed(_))
            && (mine - theirs).abs() >= 0.0005
        {
            differs.push((labels[t].clone(), *theirs, mine));
        }
    }
    if !differs.is_empty() {
        notes.push(SimulationNote::PatternPower { terms: differs });
    }
    for (test, &ss) in sim.tests.iter().zip(&kept.null_fixed_ss) {
        let t = test.term;
        if sim.analysis.model.kinds[t] != Kind::Fixed {
            continue;
        }
        let df2 = plans[t].and_then(|p| p.denominator_df);
        let Some(rate) = sim.pattern_power(test, df2, ss) else {
            continue;
        };
        if rate - sim.alpha >= 0.0005 {
            notes.push(SimulationNote::NullCarries {
                term: labels[t].clone(),
                sums_of_squares: layout.sums_of_squares,
                null_rate: rate,
            });
        }
    }
    notes
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Wilson (1927) for 0 of 10 and 5 of 10 at z = 1.96, computed by hand from the
    /// formula: 0/10 gives (0, z²/(n + z²)) = (0, 0.2775); 5/10 gives 0.5 ± 0.2634 =
    /// (0.2366, 0.7634).
    #[test]
    fn wilson_interval_by_hand() {
        let (lo, hi) = wilson(0, 10, 1.96);
        assert!(lo.abs() < 1e-12 && (hi - 0.2775).abs() < 1e-4, "{lo} {hi}");
        let (lo, hi) = wilson(5, 10, 1.96);
        assert!(
            (lo - 0.2366).abs() < 1e-4 && (hi - 0.7634).abs() < 1e-4,
            "{lo} {hi}"
        );
    }

    #[test]
    fn linear_pattern_sums_to_zero() {
        let lv = [3usize, 4];
        let mut sums = [0.0; 4];
        for i in 0..3 {
            for (j, s) in sums.iter_mut().enumerate() {
                *s += fixed_pattern(Effect::RootMeanSquare(1.0), 0b11, &lv, &[i, j]);
            }
        }
        assert!(sums.iter().all(|s| s.abs() < 1e-12));
    }
}
