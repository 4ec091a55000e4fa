//! The `analyze` job: the analysis of variance of real data, each term tested over the
//! error term the layout plans for it, with variance components by the method of moments
//! and the means of the fixed terms. This module holds the reading and the balanced
//! analysis; data with missing observations go to `unbalanced`.
//!
//! # Reading the data
//!
//! Long format: one row per observation, one column of level labels per factor (named as
//! the factor) and a numeric response column. Labels are any strings. A nested factor's
//! labels are read within their nest: `bench1` under `light1` and `bench1` under `light2`
//! are different benches. Labels that are unique across nests (`bench1` ... `bench6`) work
//! as well, since each nest then simply holds its own labels. Levels are numbered in the
//! order they first appear. A cell may hold fewer rows than the layout's replicates, or
//! none, and a response that is empty or `NA` is a missing value (the row is left out).
//!
//! # Tests
//!
//! - exact: F = MS_T / MS_D on (df_T, df_D), p = P(F > f) from the central F;
//! - synthetic: the quasi-F F = MS_T / D with D = Σ wᵥ MSᵥ from the observed mean squares,
//!   and the denominator df from Satterthwaite (1946): df = D² / Σ (wᵥ MSᵥ)² / dfᵥ;
//!   when D ≤ 0 for the data there is no quasi-F.
//!
//! # Variance components (method of moments)
//!
//! The expected mean squares are set equal to the observed ones, MS_T = Σ_U c_TU θ_U, and
//! solved for the components θ (the ANOVA, or moment, estimators of e.g. Searle, Casella
//! and McCulloch 1992, Variance Components, ch. 4; common practice). Component U appears
//! in E(MS_T) only when U's subscripts include T's, so taken from the most subscripts down
//! (the residual first) the system is triangular and each step is
//!
//! θ_T = (MS_T - Σ_{U ≠ T} c_TU θ_U) / c_TT.
//!
//! A term with 0 df has no mean square: its component, and every component whose equation
//! needs it, is not estimable. Estimates can be negative; they are shown and flagged.

use std::collections::HashMap;
use std::path::Path;

use serde::Serialize;

mod read;
mod unbalanced;

pub use read::{Observations, parse_data, parse_data_with, read_data, read_data_with};

use crate::balanced::{Balanced, cell_summaries, index_in};
use crate::dist;
use crate::engine::{Analysis, Coefficient};
use crate::error::Error;
use crate::errorterm::Verdict;
use crate::findings::DenominatorPart;
use crate::layout::{Convention, Kind, Layout, SumsOfSquares};
use crate::planning::satterthwaite;
use crate::term::Mask;

#[derive(Debug, Clone, Serialize)]
pub struct AnalyzeReport {
    pub name: String,
    pub convention: Convention,
    pub data: String,
    pub response: String,
    pub observations: u64,
    pub alpha: f64,
    pub grand_mean: f64,
    /// How the data fall short of the full layout, when they do.
    pub imbalance: Option<Imbalance>,
    pub terms: Vec<AnovaRow>,
    pub components: Vec<ComponentEstimate>,
    pub means: Vec<MeansTable>,
    /// What needs attention: negative estimates, synthetic denominators below zero, ...
    pub notes: Vec<Note>,
}

/// Unbalanced data: what is missing, and which sums of squares were used.
#[derive(Debug, Clone, Serialize)]
pub struct Imbalance {
    /// Observations of the full layout.
    pub full_observations: u64,
    /// Cells of the full layout with no observation.
    pub empty_cells: u64,
    /// Observations missing from cells that hold some.
    pub lost_observations: u64,
    pub sums_of_squares: SumsOfSquares,
    /// The order the terms were fitted in (what sequential sums of squares adjust for).
    pub fit_order: Vec<String>,
}

#[derive(Debug, Clone, Serialize)]
pub struct AnovaRow {
    pub label: String,
    pub kind: Kind,
    pub residual: bool,
    pub df: u64,
    pub ss: f64,
    /// Null for a term with 0 df.
    pub ms: Option<f64>,
    pub test: Option<AnovaTest>,
}

#[derive(Debug, Clone, Serialize)]
pub struct AnovaTest {
    pub verdict: Verdict,
    pub denominator: Vec<DenominatorPart>,
    /// The denominator's value for these data: MS_D, or Σ wᵥ MSᵥ.
    pub denominator_ms: Option<f64>,
    /// Denominator df: the mean square's df, or Satterthwaite's from the observed mean squares.
    pub denominator_df: Option<f64>,
    /// F, or the quasi-F of a synthetic test.
    pub f: Option<f64>,
    pub p: Option<f64>,
}

#[derive(Debug, Clone, Serialize)]
pub struct ComponentEstimate {
    pub term: String,
    #[serde(skip)]
    pub short_label: String,
    pub residual: bool,
    /// Method-of-moments estimate of the variance; null when not estimable.
    pub estimate: Option<f64>,
    /// Its square root when it is not negative.
    pub sd: Option<f64>,
    pub negative: bool,
}

#[derive(Debug, Clone, Serialize)]
pub struct MeansTable {
    pub term: String,
    /// The factors whose levels index the table (the term's live and nesting factors).
    pub factors: Vec<String>,
    /// Observations behind each mean, when it is the same for every mean (balanced data).
    pub per_mean: Option<u64>,
    pub rows: Vec<MeanRow>,
}

#[derive(Debug, Clone, Serialize)]
pub struct MeanRow {
    pub levels: Vec<String>,
    pub mean: f64,
    /// Observations behind the mean.
    pub observations: u64,
}

/// The advice that goes with a negative variance component estimate.
/// What the analysis notes about the data and the results.
#[derive(Debug, Clone, PartialEq, Serialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum Note {
    /// Rows with no response value, left out (their line numbers).
    MissingResponses { lines: Vec<usize> },
    /// The layout removes cells or observations, but the data hold every one.
    FullDataForRemovals { removals: usize },
    /// A restricted layout's unbalanced data, analysed under the unrestricted model.
    RestrictedAsUnrestricted,
    /// Units the data have no observation of, nest by nest.
    LostUnits { units: Vec<LostUnit>, more: usize },
    /// The data hold observations the layout removes (the first of them, by level).
    ExtraObservations { at: Vec<(String, String)> },
    /// A combined denominator that is not positive for these data.
    NoQuasiF { term: String, denominator: f64 },
    /// An error term whose mean square is zero for these data.
    ZeroErrorMeanSquare { term: String },
    /// With unbalanced data, tests over anything but the residual are approximate.
    ApproximateTests,
    /// Negative moment estimates.
    NegativeComponents { terms: Vec<String> },
    /// Components no usable moment equation determines.
    NotEstimable { terms: Vec<String> },
    /// The means are raw means of unbalanced data.
    RawMeans,
}

/// A factor with fewer levels observed than the layout declares, in one nest.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct LostUnit {
    pub factor: String,
    /// The nest: each ancestor factor with its label.
    pub within: Vec<(String, String)>,
    pub observed: Vec<String>,
    pub levels: usize,
}

/// `light = light1, chamber = chamber2` for the factors of `mask` at level indices `at`.
pub(crate) fn describe(
    layout: &Layout,
    labels: &[Vec<Vec<String>>],
    mask: Mask,
    at: &[usize],
) -> String {
    level_pairs(layout, labels, mask, at)
        .iter()
        .map(|(f, l)| format!("{f} = {l}"))
        .collect::<Vec<_>>()
        .join(", ")
}

/// (factor, label) of each factor in `mask` at the levels `at`.
pub(crate) fn level_pairs(
    layout: &Layout,
    labels: &[Vec<Vec<String>>],
    mask: Mask,
    at: &[usize],
) -> Vec<(String, String)> {
    let s = &layout.structure;
    let levels: Vec<usize> = layout
        .levels
        .per_factor
        .iter()
        .map(|&n| n as usize)
        .collect();
    (0..s.factors.len())
        .filter(|&j| mask & (1 << j) != 0)
        .map(|j| {
            let nest = index_in(&levels, s.factors[j].ancestors, at);
            let label = labels[j]
                .get(nest)
                .and_then(|l| l.get(at[j]))
                .cloned()
                .unwrap_or_else(|| format!("level {}", at[j] + 1));
            (s.factors[j].name.clone(), label)
        })
        .collect()
}

fn cell_text(layout: &Layout, b: &Balanced, labels: &[Vec<Vec<String>>], cell: usize) -> String {
    let mut at = vec![0usize; layout.structure.factors.len()];
    b.levels_of_cell(cell, &mut at);
    describe(layout, labels, layout.structure.all_factors(), &at)
}

pub use crate::balanced::anova_numbers;

/// Coefficients smaller than this (relative to the row's largest) count as zero when
/// deciding which moment equations can be used.
const ZERO: f64 = 1e-9;

/// Method-of-moments estimates of the random components (see the module notes): the
/// square system MS_t = Σ_u c_tu θ_u over the random terms (and the residual) whose
/// equations hold only components that have equations of their own, solved by LU. In a
/// balanced layout the system is triangular and this is the classical back-substitution;
/// with sequential sums of squares fitted fixed terms first it is Henderson's method III
/// (citation from memory). `None` where a mean square the solution needs does not exist.
pub fn moment_estimates(a: &Analysis, ms: &[f64]) -> Vec<Option<f64>> {
    let model = &a.model;
    let n = model.terms.len();
    let residual = model.residual();
    let random = |t: usize| t == residual || model.kinds[t] == Kind::Random;
    let mut usable: Vec<usize> = (0..n)
        .filter(|&t| random(t) && a.df[t] > 0 && !a.ems[t].is_empty() && ms[t].is_finite())
        .collect();
    // An equation is usable when every component in it has an equation of its own (and it
    // holds no fixed component).
    loop {
        let before = usable.len();
        let inside = usable.clone();
        usable.retain(|&t| {
            let largest = a.ems[t]
                .iter()
                .fold(0.0f64, |m, (_, x)| m.max(x.value().abs()));
            a.ems[t]
                .iter()
                .filter(|(_, x)| x.value().abs() > ZERO * largest)
                .all(|(c, _)| inside.contains(c))
        });
        if usable.len() == before {
            break;
        }
    }
    let mut theta = vec![None; n];
    if usable.is_empty() {
        return theta;
    }
    let k = usable.len();
    let c = nalgebra::DMatrix::from_fn(k, k, |i, j| a.coefficient(usable[i], usable[j]));
    let b = nalgebra::DVector::from_fn(k, |i, _| ms[usable[i]]);
    if let Some(x) = c.lu().solve(&b) {
        for (i, &t) in usable.iter().enumerate() {
            if x[i].is_finite() {
                theta[t] = Some(x[i]);
            }
        }
    }
    theta
}

/// Runs the analysis of variance of the observations: the balanced one under the layout's
/// convention when every cell holds all its replicates, else the unbalanced one (see
/// `unbalanced`).
pub fn analyze(layout: &Layout, data: &Observations, alpha: f64) -> Result<AnalyzeReport, Error> {
    if !data.is_balanced(layout.levels.replicates as usize) {
        return unbalanced::analyze(layout, data, alpha);
    }
    let mut full = layout.clone();
    full.removed.clear();
    let a = Analysis::new(&full)?;
    let s = &layout.structure;
    let b = Balanced::new(&a.model, &layout.levels)?;
    let (ss, ms, grand_mean) = anova_numbers(&b, &data.y);
    let labels: Vec<String> = a.model.terms.iter().map(|t| t.label(s)).collect();
    let mut notes = data_notes(data);
    if !layout.removed.is_empty() {
        notes.push(Note::FullDataForRemovals {
            removals: layout.removed.len(),
        });
    }

    let terms: Vec<AnovaRow> = a
        .model
        .terms
        .iter()
        .enumerate()
        .map(|(t, term)| {
            let test = a.tests[t].as_ref().map(|e| {
                let parts: Vec<(usize, f64)> =
                    e.denominator.iter().map(|(v, w)| (*v, w.value())).collect();
                let denominator = denominator_parts(&a, &e.denominator);
                planned_test(
                    e.verdict,
                    denominator,
                    &parts,
                    Numbers { ms: &ms, df: &a.df },
                    t,
                    &labels[t],
                    &mut notes,
                )
            });
            AnovaRow {
                label: labels[t].clone(),
                kind: a.model.kinds[t],
                residual: term.is_residual(),
                df: a.df[t],
                ss: ss[t],
                ms: (a.df[t] > 0).then_some(ms[t]),
                test,
            }
        })
        .collect();

    let theta = moment_estimates(&a, &ms);
    let components = component_estimates(&a.model, &labels, &theta, &mut notes);
    let means = means_tables(layout, &a, &b, data, grand_mean);
    Ok(AnalyzeReport {
        name: layout.name.clone(),
        convention: s.convention,
        data: data.path.clone(),
        response: data.response.clone(),
        observations: data.y.len() as u64,
        alpha,
        grand_mean,
        imbalance: None,
        terms,
        components,
        means,
        notes,
    })
}

/// A test's denominator with the terms named.
pub(crate) fn denominator_parts(
    a: &Analysis,
    parts: &[(usize, Coefficient)],
) -> Vec<DenominatorPart> {
    let s = &a.layout.structure;
    parts
        .iter()
        .map(|&(v, coefficient)| DenominatorPart {
            id: a.model.terms[v].live,
            term: a.model.terms[v].label(s),
            coefficient,
        })
        .collect()
}

/// Notes on what was read: rows left out for a missing response.
pub(crate) fn data_notes(data: &Observations) -> Vec<Note> {
    if data.missing_lines.is_empty() {
        return Vec::new();
    }
    vec![Note::MissingResponses {
        lines: data.missing_lines.clone(),
    }]
}

/// Every term's mean square (NaN for 0 df) and df, the residual last.
#[derive(Debug, Clone, Copy)]
pub(crate) struct Numbers<'a> {
    pub ms: &'a [f64],
    pub df: &'a [u64],
}

/// A term's planned test on the data: F (or the quasi-F, with Satterthwaite's df from the
/// observed mean squares) over the denominator Σ wᵥ MSᵥ given by `parts`, and its p.
/// Adds a note when the denominator is not positive for these data.
pub(crate) fn planned_test(
    verdict: Verdict,
    denominator: Vec<DenominatorPart>,
    parts: &[(usize, f64)],
    x: Numbers,
    t: usize,
    label: &str,
    notes: &mut Vec<Note>,
) -> AnovaTest {
    let mut out = AnovaTest {
        verdict,
        denominator,
        denominator_ms: None,
        denominator_df: None,
        f: None,
        p: None,
    };
    if !verdict.is_testable() {
        return out;
    }
    let d: f64 = parts.iter().map(|(v, w)| w * x.ms[*v]).sum();
    out.denominator_ms = Some(d);
    let df2 = match verdict {
        Verdict::Exact => Some(x.df[parts[0].0] as f64),
        _ => satterthwaite(
            &parts
                .iter()
                .map(|&(v, w)| (w, x.ms[v], x.df[v]))
                .collect::<Vec<_>>(),
        ),
    };
    out.denominator_df = df2;
    if d > 0.0 && d.is_finite() {
        let f = x.ms[t] / d;
        out.f = Some(f);
        if let Some(df2) = df2 {
            out.p = Some(dist::f_sf(f, x.df[t] as f64, df2));
        }
    } else if verdict == Verdict::QuasiF {
        notes.push(Note::NoQuasiF {
            term: label.to_string(),
            denominator: d,
        });
    } else {
        notes.push(Note::ZeroErrorMeanSquare {
            term: label.to_string(),
        });
    }
    out
}

/// The random terms' component estimates, with notes on negative and missing ones.
pub(crate) fn component_estimates(
    model: &crate::ems::Model,
    labels: &[String],
    theta: &[Option<f64>],
    notes: &mut Vec<Note>,
) -> Vec<ComponentEstimate> {
    let components: Vec<ComponentEstimate> = (0..model.terms.len())
        .filter(|&t| model.kinds[t] == Kind::Random)
        .map(|t| {
            let estimate = theta[t];
            let negative = estimate.is_some_and(|v| v < 0.0);
            ComponentEstimate {
                term: labels[t].clone(),
                short_label: model.terms[t].short_label(&model.structure),
                residual: model.terms[t].is_residual(),
                estimate,
                sd: estimate.filter(|v| *v >= 0.0).map(f64::sqrt),
                negative,
            }
        })
        .collect();
    let negatives: Vec<String> = components
        .iter()
        .filter(|c| c.negative)
        .map(|c| c.term.clone())
        .collect();
    if !negatives.is_empty() {
        notes.push(Note::NegativeComponents { terms: negatives });
    }
    let missing: Vec<String> = components
        .iter()
        .filter(|c| c.estimate.is_none())
        .map(|c| c.term.clone())
        .collect();
    if !missing.is_empty() {
        notes.push(Note::NotEstimable { terms: missing });
    }
    components
}

/// Means over the cells of every fixed term (its live and nesting factors).
fn means_tables(
    layout: &Layout,
    a: &Analysis,
    b: &Balanced,
    data: &Observations,
    grand_mean: f64,
) -> Vec<MeansTable> {
    let s = &layout.structure;
    let mut totals = vec![0.0; b.cells()];
    cell_summaries(&data.y, b.replicates(), grand_mean, &mut totals);
    let levels = b.levels();
    a.model
        .terms
        .iter()
        .enumerate()
        .filter(|(t, term)| a.model.kinds[*t] == Kind::Fixed && !term.is_residual())
        .map(|(_, term)| {
            let mask = term.subscripts();
            let (sums, per) = b.margin_totals(mask, &totals);
            let factors: Vec<usize> = (0..s.factors.len())
                .filter(|j| mask & (1 << j) != 0)
                .collect();
            let mut at = vec![0usize; levels.len()];
            let rows = sums
                .iter()
                .enumerate()
                .map(|(i, total)| {
                    let mut rest = i;
                    for &j in factors.iter().rev() {
                        at[j] = rest % levels[j];
                        rest /= levels[j];
                    }
                    let labels = factors
                        .iter()
                        .map(|&j| {
                            let nest = index_in(levels, s.factors[j].ancestors, &at);
                            data.labels[j][nest][at[j]].clone()
                        })
                        .collect();
                    MeanRow {
                        levels: labels,
                        mean: grand_mean + total / per as f64,
                        observations: per as u64,
                    }
                })
                .collect();
            MeansTable {
                term: term.label(s),
                factors: factors.iter().map(|&j| s.factors[j].name.clone()).collect(),
                per_mean: Some(per as u64),
                rows,
            }
        })
        .collect()
}
