//! The `check` job: every term's df, expected mean square, error term and verdict,
//! gathered into a result that the renderers print.

use serde::{Serialize, Serializer};

use crate::ems::{Ems, Model, Rational};
use crate::error::Error;
use crate::errorterm::{ErrorTerm, Verdict, error_terms, weight_text};
use crate::goal::Goal;
use crate::layout::{Convention, Kind, Layout};
use crate::planning::{Cost, PlanningValues, cost, plan_tests};
use crate::repair::{Outcome, Repair, meets, repairs};

#[derive(Debug, Clone, Serialize)]
pub struct CheckReport {
    pub name: String,
    pub convention: Convention,
    pub observations: u64,
    pub alpha: f64,
    /// The power minimum detectable effects are solved for.
    pub target_power: f64,
    /// Overhead plus per-unit costs; null without a [cost] table.
    pub cost: Option<Cost>,
    /// What the planning values leave out (random terms without a prior, and so on).
    pub planning_notes: Vec<String>,
    pub terms: Vec<TermReport>,
    /// Plain-words findings: what cannot be tested, and why.
    pub findings: Vec<String>,
    /// For an unbalanced layout: which sums of squares, what was removed, what follows.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub unbalanced: Option<crate::unbalanced::report::Summary>,
}

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
            Coefficient::Exact(r) => *r.numer() as f64 / *r.denom() as f64,
            Coefficient::Approximate(x) => *x,
        }
    }

    /// A float within 1e-9 (relative) of a whole number, as that number.
    fn whole(x: f64) -> Option<i64> {
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

    /// `3`, `9/5`, or a float to four significant digits (`11.67`, `0.02714`).
    pub fn text(&self) -> String {
        match self {
            Coefficient::Exact(r) => weight_text(r),
            Coefficient::Approximate(x) => {
                if let Some(w) = Self::whole(*x) {
                    return w.to_string();
                }
                let digits = (3 - x.abs().log10().floor() as i32).clamp(0, 12) as usize;
                let t = format!("{x:.digits$}");
                if t.contains('.') {
                    t.trim_end_matches('0').trim_end_matches('.').to_string()
                } else {
                    t
                }
            }
        }
    }

    /// The magnitude, same kind.
    pub fn abs(&self) -> Coefficient {
        match self {
            Coefficient::Exact(r) => Coefficient::Exact(num_traits::Signed::abs(r)),
            Coefficient::Approximate(x) => Coefficient::Approximate(x.abs()),
        }
    }
}

impl Serialize for Coefficient {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        match self {
            Coefficient::Exact(r) => number(r, s),
            Coefficient::Approximate(x) => match Self::whole(*x) {
                Some(w) => s.serialize_i64(w),
                None => s.serialize_f64(*x),
            },
        }
    }
}

/// A denominator written out: `bench(light)`, or `MS[a x b] + MS[a x c] - MS[a x b x c]`,
/// or with float weights `0.9713·MS[chamber(light)] + 0.02871·MS[residual]`.
pub fn denominator_words(parts: &[(String, Coefficient)]) -> String {
    if let [(label, w)] = parts
        && w.is_one()
    {
        return label.clone();
    }
    parts
        .iter()
        .enumerate()
        .map(|(k, (label, w))| {
            let sign = match (k, w.is_negative()) {
                (0, false) => "",
                (0, true) => "-",
                (_, false) => " + ",
                (_, true) => " - ",
            };
            let mag = w.abs();
            let mag = if mag.is_one() {
                String::new()
            } else {
                format!("{}·", mag.text())
            };
            format!("{sign}{mag}MS[{label}]")
        })
        .collect()
}

#[derive(Debug, Clone, Serialize)]
pub struct TermReport {
    pub label: String,
    pub live: Vec<String>,
    pub within: Vec<String>,
    pub residual: bool,
    pub kind: Kind,
    pub df: u64,
    pub ems: Vec<Component>,
    pub test: Option<TestReport>,
}

#[derive(Debug, Clone, Serialize)]
pub struct Component {
    /// The component's term label.
    pub component: String,
    pub coefficient: Coefficient,
    /// The coefficient as an exact fraction, when it is not a whole number.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub exact: Option<String>,
    #[serde(skip)]
    pub symbol: String,
}

#[derive(Debug, Clone, Serialize)]
pub struct TestReport {
    pub verdict: Verdict,
    pub denominator: Vec<DenominatorPart>,
    /// Denominator df: the mean square's df for an exact test; Satterthwaite's
    /// approximation for a synthetic one, once planning values exist.
    pub denominator_df: Option<f64>,
    /// Power at alpha under the planning values; null where it cannot be computed.
    pub power: Option<f64>,
    /// Smallest effect found with the target power: a root mean square of effects for a
    /// fixed term, a standard deviation for a random one, in the response's units.
    pub min_detectable: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub reason: Option<String>,
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub repairs: Vec<RepairReport>,
}

#[derive(Debug, Clone, Serialize)]
pub struct DenominatorPart {
    pub term: String,
    pub coefficient: Coefficient,
}

#[derive(Debug, Clone, Serialize)]
pub struct RepairReport {
    pub change: String,
    pub verdict: Verdict,
    pub denominator_df: Option<f64>,
    pub power: Option<f64>,
    /// Cost after the change less cost before; null when the layout is not priced.
    pub cost_change: Option<f64>,
    pub assumption: bool,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub risk: Option<String>,
}

/// A rational as a JSON number: an integer when it is whole.
fn number<S: Serializer>(r: &Rational, s: S) -> Result<S::Ok, S::Error> {
    if r.is_integer() {
        s.serialize_i128(r.to_integer())
    } else {
        s.serialize_f64(*r.numer() as f64 / *r.denom() as f64)
    }
}

/// What `check` computes for a layout, before any rendering.
pub struct Analysis {
    pub model: Model,
    pub df: Vec<u64>,
    pub ems: Ems,
    pub tests: Vec<Option<ErrorTerm>>,
}

impl Analysis {
    pub fn new(layout: &Layout) -> Result<Analysis, Error> {
        let model = Model::new(&layout.structure);
        let df = model.df(&layout.levels);
        let ems = model
            .ems(&layout.levels)
            .map_err(|e| Error::invalid(None, e.to_string()))?;
        let tests = error_terms(&model, &ems, &df);
        Ok(Analysis {
            model,
            df,
            ems,
            tests,
        })
    }
}

/// Runs the check of a layout under a convention, with power and cost where planning
/// values are given.
pub fn check(
    layout: &Layout,
    convention: Convention,
    plan: &PlanningValues,
) -> Result<CheckReport, Error> {
    check_with_goal(layout, convention, plan, &Goal::default())
}

/// The check, with repairs listed for every term the goal covers that misses it
/// (untestable, or below the goal's df or power).
pub fn check_with_goal(
    layout: &Layout,
    convention: Convention,
    plan: &PlanningValues,
    goal: &Goal,
) -> Result<CheckReport, Error> {
    let mut layout = layout.clone();
    layout.structure.convention = convention;
    if !layout.is_balanced() {
        if convention == Convention::Restricted {
            return Err(Error::invalid(None, crate::layout::RESTRICTED_UNBALANCED));
        }
        return crate::unbalanced::report::check(&layout, plan, goal);
    }
    let a = Analysis::new(&layout)?;
    let plans = plan_tests(&a.model, &a.ems, &a.df, &a.tests, plan, &layout.levels);
    let s = &layout.structure;
    let model = &a.model;
    let labels: Vec<String> = model.terms.iter().map(|t| t.label(s)).collect();

    let mut findings = Vec::new();
    let terms = model
        .terms
        .iter()
        .enumerate()
        .map(|(i, t)| {
            let mut ems: Vec<Component> = a.ems.rows[i]
                .iter()
                .map(|&(c, coefficient)| Component {
                    component: labels[c].clone(),
                    coefficient: Coefficient::Exact(coefficient),
                    exact: (!coefficient.is_integer()).then(|| weight_text(&coefficient)),
                    symbol: symbol(model, c),
                })
                .collect();
            // Trade notation: σ² first, then by growing coefficient, the term's own last.
            ems.sort_by(|x, y| {
                let own = |c: &Component| c.component == labels[i];
                own(x)
                    .cmp(&own(y))
                    .then(x.coefficient.value().total_cmp(&y.coefficient.value()))
            });
            let test = a.tests[i].as_ref().map(|e| {
                let reason = explain(&layout, &a, i, e);
                let outcome = Outcome {
                    verdict: e.verdict,
                    denominator_df: plans[i].and_then(|p| p.denominator_df).or_else(|| {
                        (e.verdict == Verdict::Exact).then(|| a.df[e.denominator[0].0] as f64)
                    }),
                    power: plans[i].and_then(|p| p.power),
                };
                let (repairs, reason) = review(
                    &layout,
                    plan,
                    goal,
                    t.live,
                    &labels[i],
                    &outcome,
                    reason,
                    &mut findings,
                );
                TestReport {
                    verdict: e.verdict,
                    denominator: e
                        .denominator
                        .iter()
                        .map(|&(v, w)| DenominatorPart {
                            term: labels[v].clone(),
                            coefficient: Coefficient::Exact(w),
                        })
                        .collect(),
                    denominator_df: match (e.verdict, &plans[i]) {
                        (_, Some(p)) => p.denominator_df,
                        (Verdict::Exact, None) => Some(a.df[e.denominator[0].0] as f64),
                        _ => None,
                    },
                    power: plans[i].and_then(|p| p.power),
                    min_detectable: plans[i].and_then(|p| p.min_detectable),
                    reason,
                    repairs,
                }
            });
            TermReport {
                label: labels[i].clone(),
                live: t.live_names(s).iter().map(|n| n.to_string()).collect(),
                within: t.nest_names(s).iter().map(|n| n.to_string()).collect(),
                residual: t.is_residual(),
                kind: model.kinds[i],
                df: a.df[i],
                ems,
                test,
            }
        })
        .collect();
    Ok(CheckReport {
        name: layout.name.clone(),
        convention,
        observations: layout.observations(),
        alpha: plan.alpha,
        target_power: plan.power,
        cost: plan
            .cost
            .as_ref()
            .map(|c| cost(c, &layout.structure, &layout.levels)),
        planning_notes: planning_notes(&a.model, plan),
        terms,
        findings,
        unbalanced: None,
    })
}

/// What the planning values leave out, in words.
pub(crate) fn planning_notes(model: &Model, plan: &PlanningValues) -> Vec<String> {
    let s = &model.structure;
    if !plan.has_priors() {
        return vec![
            "no [sd] table: power, minimum detectable effects and Satterthwaite df need planning standard deviations of the random terms and the residual".into(),
        ];
    }
    let mut notes = Vec::new();
    let missing: Vec<String> = model
        .terms
        .iter()
        .enumerate()
        .filter(|(i, t)| model.kinds[*i] == Kind::Random && !plan.priors.contains_key(&t.live))
        .map(|(_, t)| t.label(s))
        .collect();
    if !missing.is_empty() {
        notes.push(format!(
            "taken as zero, having no [sd] value: {} (their variance adds nothing to any expected mean square, and their own tests get no power)",
            missing.join(", ")
        ));
    }
    let no_effect: Vec<String> = model
        .terms
        .iter()
        .enumerate()
        .filter(|(i, t)| model.kinds[*i] == Kind::Fixed && !plan.effects.contains_key(&t.live))
        .map(|(_, t)| t.label(s))
        .collect();
    if !no_effect.is_empty() {
        notes.push(format!(
            "no [effect] given, so no power (the minimum detectable effect is still shown): {}",
            no_effect.join(", ")
        ));
    }
    notes
}

/// Why a term has no error term although every component is carried somewhere.
pub const NO_COMBINATION: &str =
    "no combination of the other mean squares has the expected value it needs";

/// Why a term is tested by a quasi-F ratio, with the caution that goes with it (shared
/// by the balanced and the unbalanced check).
pub fn synthetic_reason(parts: &[(String, Coefficient)]) -> String {
    format!(
        "no single mean square has the expected value it needs, so it is tested by a quasi-F ratio over {}; its denominator df come from Satterthwaite's approximation (1946) under the planning values; with few denominator df its real level and power can be far from the nominal ones, so confirm them with `emsplan simulate`",
        denominator_words(parts)
    )
}

/// `σ²`, `σ²(bench)` or `κ²(light)`: the component in the trade's notation.
pub fn symbol(model: &Model, c: usize) -> String {
    let t = model.terms[c];
    if t.is_residual() {
        return "σ²".into();
    }
    let greek = match model.kinds[c] {
        Kind::Fixed => "κ²",
        Kind::Random => "σ²",
    };
    format!("{greek}({})", t.short_label(&model.structure))
}

/// Why a term is not simply tested, in words; `None` for an exact test.
fn explain(layout: &Layout, a: &Analysis, t: usize, e: &ErrorTerm) -> Option<String> {
    let s = &layout.structure;
    let model = &a.model;
    let label = |c: usize| model.terms[c].label(s);
    match e.verdict {
        Verdict::Exact => None,
        Verdict::NotEstimable => {
            let ones = one_level_factors(layout, model.terms[t].live);
            let still = match model.kinds[t] {
                Kind::Fixed => "its effects are still in the model",
                Kind::Random => "its variance is still in the model",
            };
            Some(format!(
                "it has 0 df ({ones} one level in each nest), so it has no mean square of its own; {still}"
            ))
        }
        Verdict::Synthetic => {
            let parts: Vec<(String, Coefficient)> = e
                .denominator
                .iter()
                .map(|&(v, w)| (label(v), Coefficient::Exact(w)))
                .collect();
            Some(synthetic_reason(&parts))
        }
        Verdict::Untestable => {
            if e.isolated.is_empty() {
                return Some(NO_COMBINATION.into());
            }
            let parts: Vec<String> = e
                .isolated
                .iter()
                .map(|&c| {
                    let u = model.terms[c];
                    let sym = symbol(model, c);
                    if a.df[c] == 0 {
                        if u.is_residual() {
                            format!(
                                "{sym} is in its expected mean square, but with one observation per cell the residual has no df"
                            )
                        } else {
                            format!(
                                "{sym} is in its expected mean square, but {} has 0 df ({} one level in each nest), so that variance is confounded with it",
                                label(c),
                                one_level_factors(layout, u.live)
                            )
                        }
                    } else {
                        format!("{sym} is in its expected mean square and in no other estimable mean square")
                    }
                })
                .collect();
            Some(parts.join("; "))
        }
    }
}

fn one_level_factors(layout: &Layout, live: u32) -> String {
    let s = &layout.structure;
    let names: Vec<&str> = s
        .factors
        .iter()
        .enumerate()
        .filter(|(i, _)| live & (1 << i) != 0 && layout.levels.per_factor[*i] == 1)
        .map(|(_, f)| f.name.as_str())
        .collect();
    match names.len() {
        0 => "no factor has".into(),
        1 => format!("{} has", names[0]),
        _ => format!("{} have", names.join(" and ")),
    }
}

/// How a testable term misses the goal, in words (added to any other reason).
/// Holds a term's test to the goal: when it falls short, the cheapest repairs and the
/// shortfall added to its reason; a reason there is goes into the findings.
#[allow(clippy::too_many_arguments)]
pub(crate) fn review(
    layout: &Layout,
    plan: &PlanningValues,
    goal: &Goal,
    live: crate::term::Mask,
    label: &str,
    outcome: &Outcome,
    reason: Option<String>,
    findings: &mut Vec<String>,
) -> (Vec<RepairReport>, Option<String>) {
    let wanted = outcome.verdict != Verdict::NotEstimable && goal.covers(live);
    let short = wanted && !meets(goal, outcome);
    let repairs: Vec<RepairReport> = if short {
        repairs(layout, plan, goal, live)
            .iter()
            .map(|r| repair_report(layout, r))
            .collect()
    } else {
        Vec::new()
    };
    let mut reason = reason;
    if short && outcome.verdict.is_testable() {
        reason = Some(shortfall(goal, outcome, reason));
    }
    if let Some(r) = &reason {
        findings.push(finding(label, outcome.verdict, r, &repairs));
    }
    (repairs, reason)
}

pub(crate) fn shortfall(goal: &Goal, o: &Outcome, reason: Option<String>) -> String {
    let mut parts = Vec::new();
    if goal.exact_only && o.verdict != Verdict::Exact {
        parts.push("the goal asks for an exact F test".to_string());
    }
    if let Some(m) = goal.min_df {
        match o.denominator_df {
            Some(d) if d < m => parts.push(format!(
                "its {} denominator df are below the {} asked for",
                crate::render::num(d),
                m
            )),
            None => parts.push(format!(
                "its denominator df are unknown without planning values, and {m} are asked for"
            )),
            _ => {}
        }
    }
    if let Some(p) = goal.target_power {
        match o.power {
            Some(x) if x < p => parts.push(format!("its power {x:.2} is below the target {p}")),
            None => parts.push(format!(
                "its power is unknown (it needs [sd] and [effect]) and {p} is the target"
            )),
            _ => {}
        }
    }
    let head = parts.join("; ");
    match reason {
        Some(r) => format!("{head}; {r}"),
        None => head,
    }
}

pub(crate) fn repair_report(layout: &Layout, r: &Repair) -> RepairReport {
    RepairReport {
        change: r.change.describe(&layout.structure, layout),
        verdict: r.outcome.verdict,
        denominator_df: r.outcome.denominator_df,
        power: r.outcome.power,
        cost_change: r.cost_change,
        assumption: r.assumption,
        risk: r.assumption.then(|| {
            "an assumption, not a measurement: if the interaction is really there, the test is biased and its error rate is wrong".to_string()
        }),
    }
}

pub(crate) fn finding(
    label: &str,
    verdict: Verdict,
    reason: &str,
    repairs: &[RepairReport],
) -> String {
    let head = match verdict {
        Verdict::Untestable => format!("{label} cannot be tested: {reason}."),
        Verdict::NotEstimable => format!("{label} is not estimable: {reason}."),
        Verdict::Synthetic => format!("{label}: {reason}."),
        Verdict::Exact => format!("{label}: {reason}."),
    };
    if repairs.is_empty() {
        return head;
    }
    let fixes: Vec<String> = repairs
        .iter()
        .map(|r| {
            let mut what = format!("{} test", r.verdict.name());
            if let Some(d) = r.denominator_df {
                what.push_str(&format!(" on {} df", crate::render::num(d)));
            }
            if let Some(p) = r.power {
                what.push_str(&format!(", power {p:.2}"));
            }
            if let Some(c) = r.cost_change {
                let sign = if c >= 0.0 { "+" } else { "" };
                what.push_str(&format!(", cost {sign}{}", crate::render::num(c)));
            }
            if r.assumption {
                what.push_str("; an assumption: if it is really there the test is biased");
            }
            format!("{} ({what})", r.change)
        })
        .collect();
    let fix = if verdict.is_testable() {
        "It meets the goal if you"
    } else {
        "It becomes testable if you"
    };
    format!("{head} {fix} {}.", fixes.join("; or "))
}
