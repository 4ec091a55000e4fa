//! The `report` job: a document that justifies the design to a funder and a reviewer.
//! It gathers the check under the stated convention (and the other, for the reviewer's
//! question), the must-test terms with their power against the effect size, the planning
//! values, and, when asked, the design search and a Monte Carlo run of the layout.
//! `render::report` writes it as HTML or Markdown.

use crate::check::check_with_goal;
use crate::engine::Analysis;
use crate::error::Error;
use crate::findings::{CheckReport, TermReport, TestReport, same_test};
use crate::goal::Goal;
use crate::layout::{Convention, Kind, Layout};
use crate::planning::{Effect, PlanningValues};
use crate::search::{Options, Problem, Quiet, Search, SearchReport};
use crate::simulate::{self, SimulateReport};

/// A must-test term with its power against the effect size.
#[derive(Debug, Clone)]
pub struct KeyTerm {
    pub term: TermReport,
    /// The planned effect (fixed: root mean square; random: standard deviation).
    pub planned: Option<f64>,
    /// (effect size, power) from zero to twice the larger of the planned effect and the
    /// minimum detectable one; empty without planning values.
    pub curve: Vec<(f64, f64)>,
}

/// A term tested differently under the other convention.
#[derive(Debug, Clone)]
pub struct ConventionDifference {
    pub label: String,
    pub here: TestReport,
    pub there: TestReport,
}

#[derive(Debug, Clone)]
pub struct Report {
    pub title: String,
    pub version: &'static str,
    pub command_line: String,
    pub layout: Layout,
    pub plan: PlanningValues,
    pub goal: Goal,
    pub check: CheckReport,
    /// The convention the reviewer may ask about; none for an unbalanced layout, which
    /// has the unrestricted model only.
    pub other_convention: Option<Convention>,
    pub differences: Vec<ConventionDifference>,
    pub key_terms: Vec<KeyTerm>,
    /// The design search, for a problem file with a [search] table.
    pub search: Option<SearchReport>,
    /// A Monte Carlo run of the layout, when asked for.
    pub monte_carlo: Option<SimulateReport>,
}

/// The whole report job: the report of the layout, the design search when a problem is
/// given, and a Monte Carlo run when a request is given.
pub fn compose(
    layout: &Layout,
    plan: &PlanningValues,
    goal: &Goal,
    command_line: String,
    problem: Option<Problem>,
    monte_carlo: Option<simulate::Request>,
) -> Result<Report, Error> {
    let mut report = build(layout, plan, goal, command_line)?;
    if let Some(p) = problem {
        let search = Search::new(p)?;
        report.search = Some(search.run(&Options::default(), &Quiet)?);
    }
    if let Some(request) = monte_carlo {
        report.monte_carlo = Some(simulate::simulate(layout, plan, &request)?.0);
    }
    Ok(report)
}

/// Builds the report of a layout under its own convention.
pub fn build(
    layout: &Layout,
    plan: &PlanningValues,
    goal: &Goal,
    command_line: String,
) -> Result<Report, Error> {
    let convention = layout.structure.convention;
    let other_convention = match convention {
        Convention::Restricted => Convention::Unrestricted,
        Convention::Unrestricted => Convention::Restricted,
    };
    let here = check_with_goal(layout, convention, plan, goal)?;
    let other_convention = layout.defines(other_convention).then_some(other_convention);
    let differences = match other_convention {
        None => Vec::new(),
        Some(other) => {
            let there = check_with_goal(layout, other, plan, goal)?;
            here.terms
                .iter()
                .filter_map(|a| {
                    let x = a.test.as_ref()?;
                    let y = there.term(a.id)?.test.as_ref()?;
                    (!same_test(Some(x), Some(y))).then(|| ConventionDifference {
                        label: a.label.clone(),
                        here: x.clone(),
                        there: y.clone(),
                    })
                })
                .collect()
        }
    };
    // One analysis of the layout for every power curve.
    let mut stated = layout.clone();
    stated.structure.convention = convention;
    let fitted = Analysis::new(&stated)?;
    let key_terms = here
        .terms
        .iter()
        .filter(|t| !t.residual && t.test.is_some() && goal.covers(t.id))
        .map(|t| key_term(&fitted, plan, t))
        .collect();

    Ok(Report {
        title: if layout.name.is_empty() {
            "Design report".into()
        } else {
            layout.name.clone()
        },
        version: env!("CARGO_PKG_VERSION"),
        command_line,
        layout: layout.clone(),
        plan: plan.clone(),
        goal: goal.clone(),
        check: here,
        other_convention,
        differences,
        key_terms,
        search: None,
        monte_carlo: None,
    })
}

fn key_term(fitted: &Analysis, plan: &PlanningValues, t: &TermReport) -> KeyTerm {
    let layout = &fitted.layout;
    let live = t.id;
    let planned = match t.kind {
        Kind::Fixed => plan.effects.get(&live).map(|e| {
            let cells = crate::layout::term_of(&layout.structure, live).cells(&layout.levels);
            e.root_mean_square(cells)
        }),
        Kind::Random => plan.priors.get(&live).copied(),
    };
    let testable = t.test.as_ref().is_some_and(|x| x.verdict.is_testable());
    let mde = t.test.as_ref().and_then(|x| x.min_detectable);
    let top = 2.0 * planned.unwrap_or(0.0).max(mde.unwrap_or(0.0));
    let curve = if testable && plan.has_priors() && top > 0.0 && top.is_finite() {
        (0..=40)
            .filter_map(|k| {
                let size = top * k as f64 / 40.0;
                let mut p = plan.clone();
                match t.kind {
                    Kind::Fixed => {
                        p.effects.insert(live, Effect::RootMeanSquare(size));
                    }
                    Kind::Random => {
                        p.priors.insert(live, size);
                    }
                }
                Some((size, fitted.outcome(&p, live)?.power?))
            })
            .collect()
    } else {
        Vec::new()
    };
    KeyTerm {
        term: t.clone(),
        planned,
        curve,
    }
}
