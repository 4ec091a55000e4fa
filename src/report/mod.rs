//! The `report` job: a document that justifies the design to a funder and a reviewer.
//! It gathers the check under the stated convention (and the other, for the reviewer's
//! question), the must-test terms with power curves, the planning values and what
//! reproduces the report. `render::report` writes it as HTML or Markdown.

pub mod svg;

use crate::check::{CheckReport, TermReport, check_with_goal};
use crate::error::Error;
use crate::goal::Goal;
use crate::layout::{Convention, Kind, Layout};
use crate::planning::{Effect, PlanningValues};
use crate::render::check::{ems_text, tested_over};
use crate::repair::outcome;
use crate::term::{REPLICATE, parse_term_label};

#[derive(Debug, Clone)]
pub struct FactorRow {
    pub name: String,
    pub kind: &'static str,
    pub levels: u64,
    pub within: String,
    pub population: Option<u64>,
}

#[derive(Debug, Clone)]
pub struct KeyTerm {
    pub label: String,
    pub verdict: String,
    pub tested_over: String,
    /// Why that error term: the components the two expected mean squares share.
    pub why: String,
    pub denominator_df: Option<f64>,
    pub power: Option<f64>,
    pub min_detectable: Option<f64>,
    /// "root mean square of effects" or "standard deviation".
    pub scale: &'static str,
    pub curve: Option<String>,
}

/// A term tested differently under the other convention.
#[derive(Debug, Clone)]
pub struct ConventionDifference {
    pub label: String,
    pub here: String,
    pub there: String,
}

#[derive(Debug, Clone)]
pub struct Report {
    pub title: String,
    pub version: &'static str,
    pub command_line: String,
    pub description: Vec<String>,
    pub factors: Vec<FactorRow>,
    pub diagram: String,
    pub check: CheckReport,
    /// The convention the reviewer may ask about; none for an unbalanced layout, which
    /// has the unrestricted model only.
    pub other_convention: Option<Convention>,
    pub differences: Vec<ConventionDifference>,
    pub key_terms: Vec<KeyTerm>,
    pub planning: Vec<(String, String)>,
    /// Extra sections other jobs contribute (the search, a Monte Carlo run), already
    /// rendered for each output format: (heading, html, markdown).
    pub sections: Vec<(String, String, String)>,
}

/// Builds the report of a layout under its own convention.
pub fn build(
    layout: &Layout,
    plan: &PlanningValues,
    goal: &Goal,
    command_line: String,
) -> Result<Report, Error> {
    let s = &layout.structure;
    let convention = s.convention;
    let other_convention = match convention {
        Convention::Restricted => Convention::Unrestricted,
        Convention::Unrestricted => Convention::Restricted,
    };
    let here = check_with_goal(layout, convention, plan, goal)?;
    let other_convention = layout.is_balanced().then_some(other_convention);
    let differences = match other_convention {
        None => Vec::new(),
        Some(other) => {
            let there = check_with_goal(layout, other, plan, goal)?;
            here.terms
                .iter()
                .zip(&there.terms)
                .filter_map(|(a, b)| {
                    let (x, y) = (a.test.as_ref()?, b.test.as_ref()?);
                    let (tx, ty) = (over(x), over(y));
                    (tx != ty).then(|| ConventionDifference {
                        label: a.label.clone(),
                        here: tx,
                        there: ty,
                    })
                })
                .collect()
        }
    };

    let factors: Vec<FactorRow> = s
        .factors
        .iter()
        .enumerate()
        .map(|(i, f)| FactorRow {
            name: f.name.clone(),
            kind: kind_name(f.kind),
            levels: layout.levels.per_factor[i],
            within: names(layout, f.within),
            population: f.population,
        })
        .collect();
    let nodes: Vec<svg::Node> = s
        .factors
        .iter()
        .enumerate()
        .map(|(i, f)| svg::Node {
            name: f.name.clone(),
            detail: format!(
                "{}, {} level{}{}",
                kind_name(f.kind),
                layout.levels.per_factor[i],
                if layout.levels.per_factor[i] == 1 {
                    ""
                } else {
                    "s"
                },
                if f.within != 0 { " each" } else { "" }
            ),
            parents: (0..s.factors.len())
                .filter(|j| f.within & (1 << j) != 0)
                .collect(),
        })
        .collect();
    let diagram = svg::layout_diagram(&nodes, "Nesting and crossing of the factors");

    // An unbalanced layout is fitted once for all its power curves.
    let fitted = if layout.is_balanced() {
        None
    } else {
        Some(crate::unbalanced::Analysis::new(layout)?)
    };
    let key_terms = here
        .terms
        .iter()
        .filter(|t| !t.residual && t.test.is_some())
        .filter(|t| parse_term_label(s, &t.label).is_ok_and(|term| goal.covers(term.live)))
        .map(|t| key_term(layout, fitted.as_ref(), plan, &here, t))
        .collect();

    Ok(Report {
        title: if layout.name.is_empty() {
            "Design report".into()
        } else {
            layout.name.clone()
        },
        version: env!("CARGO_PKG_VERSION"),
        command_line,
        description: describe(layout),
        factors,
        diagram,
        check: here,
        other_convention,
        differences,
        key_terms,
        planning: planning_rows(layout, plan, goal),
        sections: Vec::new(),
    })
}

fn over(t: &crate::check::TestReport) -> String {
    if t.verdict.is_testable() {
        tested_over(t)
    } else {
        t.verdict.name().to_string()
    }
}

fn kind_name(k: Kind) -> &'static str {
    match k {
        Kind::Fixed => "fixed",
        Kind::Random => "random",
    }
}

fn names(layout: &Layout, mask: u32) -> String {
    layout
        .structure
        .factors
        .iter()
        .enumerate()
        .filter(|(i, _)| mask & (1 << i) != 0)
        .map(|(_, f)| f.name.as_str())
        .collect::<Vec<_>>()
        .join(", ")
}

/// The layout in words: one sentence per factor, then the replication.
fn describe(layout: &Layout) -> Vec<String> {
    let s = &layout.structure;
    let mut out: Vec<String> = s
        .factors
        .iter()
        .enumerate()
        .map(|(i, f)| {
            let n = layout.levels.per_factor[i];
            let what = match f.kind {
                Kind::Fixed => "a fixed factor (its levels are the ones compared)".to_string(),
                Kind::Random => match f.population {
                    Some(p) => {
                        format!("a random factor (its levels are {n} of a population of {p})")
                    }
                    None => {
                        "a random factor (its levels stand for a larger population)".to_string()
                    }
                },
            };
            let total: u64 = n * s
                .factors
                .iter()
                .enumerate()
                .filter(|(j, _)| f.ancestors & (1 << j) != 0)
                .map(|(j, _)| layout.levels.per_factor[j])
                .product::<u64>();
            if f.within == 0 {
                format!("{} is {what}, with {n} levels.", f.name)
            } else {
                format!(
                    "{} is {what}, with {n} in each level of {} ({total} in all), nested there.",
                    f.name,
                    names(layout, f.within)
                )
            }
        })
        .collect();
    let crossed: Vec<String> = s
        .factors
        .iter()
        .enumerate()
        .flat_map(|(i, a)| {
            s.factors
                .iter()
                .enumerate()
                .skip(i + 1)
                .filter_map(move |(j, b)| {
                    let related = a.ancestors & (1 << j) != 0 || b.ancestors & (1 << i) != 0;
                    (!related).then(|| format!("{} x {}", a.name, b.name))
                })
        })
        .collect();
    if !crossed.is_empty() {
        out.push(format!("Crossed: {}.", crossed.join(", ")));
    }
    if !s.omitted.is_empty() {
        let omitted: Vec<String> = s
            .omitted
            .iter()
            .map(|&m| crate::layout::term_of(s, m).short_label(s))
            .collect();
        out.push(format!(
            "Assumed absent (an assumption, not a measurement): {}.",
            omitted.join(", ")
        ));
    }
    let each = format!(
        "{} observation{}",
        layout.levels.replicates,
        if layout.levels.replicates == 1 {
            ""
        } else {
            "s"
        }
    );
    if layout.is_balanced() {
        out.push(format!(
            "Each cell holds {each}: {} observations in all.",
            layout.observations()
        ));
    } else {
        let removals: Vec<String> = layout.removed.iter().map(|r| r.describe(s)).collect();
        out.push(format!(
            "Each cell of the full layout holds {each} ({} in all); the layout removes {}, leaving {}.",
            layout.levels.observations(),
            removals.join("; "),
            layout.observations()
        ));
    }
    out
}

fn key_term(
    layout: &Layout,
    fitted: Option<&crate::unbalanced::Analysis>,
    plan: &PlanningValues,
    report: &CheckReport,
    t: &TermReport,
) -> KeyTerm {
    let s = &layout.structure;
    let test = t.test.as_ref().expect("key terms have tests");
    let scale = match t.kind {
        Kind::Fixed => "root mean square of effects",
        Kind::Random => "standard deviation",
    };
    let why = if test.verdict.is_testable() {
        // A fixed term's error term reproduces the random components and σ² of its
        // expectation; another fixed term's κ² (which only an unbalanced layout's
        // sequential sums of squares put there) it does not.
        let fixed_other = |c: &crate::check::Component| {
            t.kind == Kind::Fixed
                && c.component != t.label
                && report
                    .terms
                    .iter()
                    .any(|u| u.label == c.component && !u.residual && u.kind == Kind::Fixed)
        };
        let shared: Vec<&str> = t
            .ems
            .iter()
            .filter(|c| c.component != t.label && !fixed_other(c))
            .map(|c| c.symbol.as_str())
            .collect();
        let carried: Vec<&str> = t
            .ems
            .iter()
            .filter(|c| fixed_other(c))
            .map(|c| c.symbol.as_str())
            .collect();
        let mut why = format!(
            "E(MS) = {}; the error term's expectation holds everything but the term's own component: {}.",
            ems_text(t),
            shared.join(", ")
        );
        if !carried.is_empty() {
            why = format!(
                "E(MS) = {}; the error term's expectation holds its random components and σ²: {}. It also carries {}, which the error term does not: with sequential sums of squares the test is not of the term's own effects alone (see the notes).",
                ems_text(t),
                shared.join(", "),
                carried.join(", ")
            );
        }
        why
    } else {
        test.reason.clone().unwrap_or_default()
    };
    let live = parse_term_label(s, &t.label).map(|x| x.live).unwrap_or(0);
    let curve = if test.verdict.is_testable() && plan.has_priors() {
        power_curve(
            layout,
            fitted,
            plan,
            live,
            t,
            test.min_detectable,
            report.target_power,
        )
    } else {
        None
    };
    KeyTerm {
        label: t.label.clone(),
        verdict: test.verdict.name().to_string(),
        tested_over: over(test),
        why,
        denominator_df: test.denominator_df,
        power: test.power,
        min_detectable: test.min_detectable,
        scale,
        curve,
    }
}

/// Power against the effect size, from zero to twice the larger of the planned effect
/// and the minimum detectable one.
fn power_curve(
    layout: &Layout,
    fitted: Option<&crate::unbalanced::Analysis>,
    plan: &PlanningValues,
    live: u32,
    t: &TermReport,
    mde: Option<f64>,
    target: f64,
) -> Option<String> {
    let planned = match t.kind {
        Kind::Fixed => plan.effects.get(&live).map(|e| {
            let cells = crate::layout::term_of(&layout.structure, live).cells(&layout.levels);
            e.root_mean_square(cells)
        }),
        Kind::Random => plan.priors.get(&live).copied(),
    };
    let top = 2.0 * planned.unwrap_or(0.0).max(mde.unwrap_or(0.0));
    if top <= 0.0 || !top.is_finite() {
        return None;
    }
    let points: Vec<(f64, f64)> = (0..=40)
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
            let power = match fitted {
                Some(a) => crate::unbalanced::report::outcome_of(a, layout, &p, live),
                None => outcome(layout, &p, live),
            }?
            .power?;
            Some((size, power))
        })
        .collect();
    let series = vec![svg::Series {
        label: format!("power of {}", t.label),
        points,
        dash: "",
        markers: false,
    }];
    let unit = match t.kind {
        Kind::Fixed => "effect (root mean square)",
        Kind::Random => "standard deviation",
    };
    Some(svg::chart(
        &format!("Power of the {} test", t.label),
        unit,
        "power",
        &series,
        Some((0.0, 1.0)),
        &[(target, "target"), (plan.alpha, "alpha")],
    ))
}

fn planning_rows(layout: &Layout, plan: &PlanningValues, goal: &Goal) -> Vec<(String, String)> {
    let s = &layout.structure;
    let label = |m: u32| {
        if m == REPLICATE {
            "residual".to_string()
        } else {
            crate::layout::term_of(s, m).short_label(s)
        }
    };
    let mut rows = vec![
        ("alpha".to_string(), format!("{}", plan.alpha)),
        (
            "power for minimum detectable effects".to_string(),
            format!("{}", plan.power),
        ),
    ];
    for (m, sd) in &plan.priors {
        rows.push((format!("planning SD of {}", label(*m)), format!("{sd}")));
    }
    for (m, e) in &plan.effects {
        let v = match e {
            Effect::RootMeanSquare(x) => format!("{x} (root mean square)"),
            Effect::Range(d) => format!("range {d} (least favourable configuration)"),
        };
        rows.push((format!("smallest effect of {}", label(*m)), v));
    }
    if let Some(c) = &plan.cost {
        rows.push(("overhead".to_string(), format!("{}", c.overhead)));
        for (m, price) in &c.per_unit {
            rows.push((
                format!("cost per unit of {}", label(*m)),
                format!("{price}"),
            ));
        }
    }
    if !goal.must_test.is_empty() {
        let terms: Vec<String> = goal.must_test.iter().map(|&m| label(m)).collect();
        rows.push(("must test".to_string(), terms.join(", ")));
    }
    if let Some(d) = goal.min_df {
        rows.push(("minimum denominator df".to_string(), format!("{d}")));
    }
    if let Some(p) = goal.target_power {
        rows.push(("target power".to_string(), format!("{p}")));
    }
    rows
}
