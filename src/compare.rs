//! The `compare` job: two layouts side by side, term by term, with the cost of each and
//! a verdict in words. The other layout is a second file, or the base with changes
//! applied (`--set KEY=VALUE`, `--drop FACTOR`).

use serde::Serialize;

use crate::check::check_with_goal;
use crate::error::Error;
use crate::errorterm::Verdict;
use crate::findings::{CheckReport, DenominatorPart, TermReport};
use crate::goal::Goal;
use crate::layout::{Convention, Kind, Layout, RESTRICTED_UNBALANCED, SumsOfSquares};
use crate::planning::{CostModel, Effect, PlanningValues, check_probability};
use crate::term::{Mask, REPLICATE, parse_term_label};
use crate::unbalanced::removal::{Removal, parse_cell};
use crate::variant::{drop_factor, set_within};

/// The `--set` key of a planning standard deviation: `sd.TERM`.
const SD_KEY: &str = "sd";
/// Its old name, still accepted: `prior.TERM`.
const OLD_SD_KEY: &str = "prior";

/// One change to the base layout, as given on the command line.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Edit {
    Set { key: String, value: String },
    Drop(String),
    Remove(String),
}

impl Edit {
    pub fn parse_set(arg: &str) -> Result<Edit, Error> {
        let (key, value) = arg.split_once('=').ok_or_else(|| {
            Error::Usage(format!(
                "--set {arg}: write KEY=VALUE, e.g. bench.levels=3 or replicates=4"
            ))
        })?;
        Ok(Edit::Set {
            key: key.trim().to_string(),
            value: value.trim().to_string(),
        })
    }

    /// A note when the key is written under an old name (`prior.TERM` for `sd.TERM`);
    /// the edit works the same.
    pub fn old_name_note(&self) -> Option<String> {
        let Edit::Set { key, value } = self else {
            return None;
        };
        let (head, term) = key.split_once('.')?;
        (head == OLD_SD_KEY).then(|| {
            format!(
                "--set {key}={value}: {OLD_SD_KEY}.TERM is now called {SD_KEY}.TERM ({SD_KEY}.{term}); the old name still works"
            )
        })
    }

    pub fn describe(&self) -> String {
        match self {
            Edit::Set { key, value } => format!("{key} = {value}"),
            Edit::Drop(f) => format!("without {f}"),
            Edit::Remove(r) => format!("remove {r}"),
        }
    }
}

/// A layout with its planning values and goal: everything a comparison side needs.
#[derive(Debug, Clone)]
pub struct Side {
    pub layout: Layout,
    pub plan: PlanningValues,
    pub goal: Goal,
}

/// Applies one edit. Errors name the key and say what would be accepted.
pub fn apply(side: &Side, edit: &Edit) -> Result<(Side, Vec<EditNote>), Error> {
    let mut notes = Vec::new();
    let usage = |m: String| Error::Usage(m);
    match edit {
        Edit::Drop(name) => {
            let s = &side.layout.structure;
            let f = s.factor_index(name).ok_or_else(|| {
                usage(format!(
                    "--drop {name}: \"{name}\" is not a factor (known: {})",
                    s.known_names()
                ))
            })?;
            let (layout, plan, gone) = drop_factor(&side.layout, &side.plan, f)
                .map_err(|m| usage(format!("--drop {name}: {m}")))?;
            // Removals name units within nests: they survive only when they name neither
            // the layer left out nor a factor nested in it.
            let mut removed = Vec::new();
            for r in &side.layout.removed {
                let touched =
                    r.at.iter()
                        .any(|&(g, _)| g == f || s.factors[g].ancestors & (1 << f) != 0);
                if touched {
                    return Err(usage(format!(
                        "--drop {name}: the removal {} names {name} or a factor nested in it, so it would name other units without it; drop the layer in a copy of the file and give its removals there",
                        r.describe(s)
                    )));
                }
                removed.push(Removal {
                    at: r
                        .at
                        .iter()
                        .map(|&(g, i)| (if g > f { g - 1 } else { g }, i))
                        .collect(),
                    ..r.clone()
                });
            }
            let mut layout = layout;
            layout.sums_of_squares = side.layout.sums_of_squares;
            let layout = layout
                .with_removals(removed)
                .map_err(|(_, m)| usage(format!("--drop {name}: {m}")))?;
            // A random layer that fixed treatments are nested in (or, in a layout of
            // units, that treatments are randomised to) is their experimental unit:
            // without it, smaller units stand in as replicates.
            if s.factors[f].kind == crate::layout::Kind::Random {
                let carried = match s.units.unit_of_term(1 << f) {
                    Some(u) => u.carries,
                    None if !s.units.declared() => s
                        .factors
                        .iter()
                        .enumerate()
                        .filter(|(i, g)| {
                            s.factors[f].ancestors & (1 << i) != 0
                                && g.kind == crate::layout::Kind::Fixed
                        })
                        .fold(0, |m, (i, _)| m | (1 << i)),
                    None => 0,
                };
                if carried != 0 {
                    notes.push(EditNote::Pseudoreplication {
                        unit: name.clone(),
                        treatments: s.names(carried).iter().map(|n| n.to_string()).collect(),
                    });
                }
            }
            if !gone.is_empty() {
                notes.push(EditNote::PlanningValuesGone {
                    factor: name.clone(),
                    terms: gone,
                });
            }
            let goal = Goal {
                must_test: side
                    .goal
                    .must_test
                    .iter()
                    .filter_map(|&m| {
                        let r = crate::variant::remap_mask(m, f);
                        if r.is_none() {
                            notes.push(EditNote::MustTestGone {
                                factor: name.clone(),
                                term: crate::layout::term_of(s, m).short_label(s),
                            });
                        }
                        r
                    })
                    .collect(),
                ..side.goal.clone()
            };
            Ok((Side { layout, plan, goal }, notes))
        }
        Edit::Remove(what) => {
            let bad = |m: String| usage(format!("--remove {what}: {m}"));
            let l = &side.layout;
            let r = parse_cell(&l.structure, &l.levels, what).map_err(bad)?;
            let mut removed = l.removed.clone();
            removed.push(r);
            let mut layout = l.clone();
            if layout.structure.convention == Convention::Restricted {
                layout.structure.convention = Convention::Unrestricted;
                notes.push(EditNote::UnrestrictedAfterRemoval);
            }
            let layout = layout.with_removals(removed).map_err(|(_, m)| bad(m))?;
            Ok((
                Side {
                    layout,
                    ..side.clone()
                },
                notes,
            ))
        }
        Edit::Set { key, value } => {
            let mut side = side.clone();
            let bad = |m: String| usage(format!("--set {key}={value}: {m}"));
            let whole = |v: &str| -> Result<u64, Error> {
                v.parse::<u64>()
                    .ok()
                    .filter(|&n| n >= 1)
                    .ok_or_else(|| bad(format!("\"{v}\" is not a whole number of at least 1")))
            };
            let size = |v: &str| -> Result<f64, Error> {
                v.parse::<f64>()
                    .ok()
                    .filter(|x| x.is_finite() && *x >= 0.0)
                    .ok_or_else(|| bad(format!("\"{v}\" is not a finite number of zero or more")))
            };
            let s = side.layout.structure.clone();
            let term_key = |t: &str| -> Result<Mask, Error> {
                parse_term_label(&s, t).map(|t| t.live).map_err(bad)
            };
            let mut layout = side.layout.clone();
            match key.split_once('.') {
                None => match key.as_str() {
                    "replicates" => layout.levels.replicates = whole(value)?,
                    "alpha" => {
                        side.plan.alpha = value
                            .parse::<f64>()
                            .map_err(|_| bad("alpha must be a number between 0 and 1".into()))
                            .and_then(|a| check_probability(a, "alpha").map_err(bad))?
                    }
                    "sums_of_squares" => {
                        layout.sums_of_squares = match value.as_str() {
                            "sequential" => SumsOfSquares::Sequential,
                            "type3" => SumsOfSquares::Type3,
                            _ => {
                                return Err(bad(
                                    "the sums of squares are \"sequential\" or \"type3\"".into(),
                                ));
                            }
                        }
                    }
                    "convention" => {
                        layout.structure.convention = match value.as_str() {
                            "restricted" if !layout.defines(Convention::Restricted) => {
                                return Err(bad(RESTRICTED_UNBALANCED.into()));
                            }
                            "restricted" => Convention::Restricted,
                            "unrestricted" => Convention::Unrestricted,
                            _ => {
                                return Err(bad(
                                    "the convention is \"restricted\" or \"unrestricted\"".into(),
                                ));
                            }
                        }
                    }
                    "omit" => {
                        // What the units imply (the smallest unit's interaction, the
                        // interactions additivity pools) stays; the list replaces `omit`.
                        let units = &layout.structure.units;
                        let mut omitted: Vec<Mask> = units
                            .merged
                            .into_iter()
                            .chain(units.pooled.iter().copied())
                            .collect();
                        for t in value.split(';').map(str::trim).filter(|t| !t.is_empty()) {
                            let live = term_key(t)?;
                            if live.count_ones() < 2 || live & REPLICATE != 0 {
                                return Err(bad(format!("\"{t}\" is not an interaction")));
                            }
                            if units.pooled.contains(&live) {
                                notes.push(EditNote::AlreadyPooled {
                                    term: t.to_string(),
                                });
                                continue;
                            }
                            if !omitted.contains(&live) {
                                omitted.push(live);
                            }
                        }
                        layout.structure.omitted = omitted;
                    }
                    _ => {
                        return Err(bad(format!(
                            "unknown key \"{key}\" (known: replicates, alpha, convention, sums_of_squares, omit, FACTOR.levels, FACTOR.kind, FACTOR.within, FACTOR.population, sd.TERM, effect.TERM, cost.TERM, cost.overhead)"
                        )));
                    }
                },
                Some((SD_KEY | OLD_SD_KEY, term)) => {
                    let live = term_key(term)?;
                    let t = crate::layout::term_of(&s, live);
                    if live != REPLICATE && t.kind(&s) == Kind::Fixed {
                        return Err(bad(format!(
                            "\"{term}\" is a fixed term: set effect.{term} instead"
                        )));
                    }
                    if side.plan.priors.is_empty() && live != REPLICATE {
                        return Err(bad(
                            "the layout has no [sd] table: set sd.residual first".into()
                        ));
                    }
                    side.plan.priors.insert(live, size(value)?);
                }
                Some(("effect", term)) => {
                    let live = term_key(term)?;
                    let t = crate::layout::term_of(&s, live);
                    if live == REPLICATE || t.kind(&s) == Kind::Random {
                        return Err(bad(format!(
                            "\"{term}\" is a random term: set sd.{term} instead"
                        )));
                    }
                    side.plan
                        .effects
                        .insert(live, Effect::RootMeanSquare(size(value)?));
                }
                Some(("cost", what)) => {
                    let price = size(value)?;
                    let model = side.plan.cost.get_or_insert_with(|| CostModel {
                        overhead: 0.0,
                        per_unit: Vec::new(),
                    });
                    if what == "overhead" {
                        model.overhead = price;
                    } else {
                        let live = term_key(what)?;
                        model.per_unit.retain(|(m, _)| *m != live);
                        model.per_unit.push((live, price));
                    }
                }
                Some((factor, field)) => {
                    let f = s.factor_index(factor).ok_or_else(|| {
                        bad(format!(
                            "\"{factor}\" is not a factor (known: {})",
                            s.known_names()
                        ))
                    })?;
                    match field {
                        "levels" => layout.levels.per_factor[f] = whole(value)?,
                        "kind" => {
                            let kind = match value.as_str() {
                                "fixed" => Kind::Fixed,
                                "random" => Kind::Random,
                                _ => return Err(bad("the kind is \"fixed\" or \"random\"".into())),
                            };
                            layout.structure.factors[f].kind = kind;
                            if kind == Kind::Fixed {
                                layout.structure.factors[f].population = None;
                            }
                            notes.extend(reconcile_kinds(&mut side.plan, &layout));
                        }
                        "within" => {
                            let mut within: Mask = 0;
                            for w in value.split(',').map(str::trim).filter(|w| !w.is_empty()) {
                                let j = s.factor_index(w).ok_or_else(|| {
                                    bad(format!(
                                        "\"{w}\" is not a factor (known: {})",
                                        s.known_names()
                                    ))
                                })?;
                                within |= 1 << j;
                            }
                            let moved = layout.removed.iter().find(|r| {
                                r.at.iter().any(|&(g, _)| {
                                    g == f || layout.structure.factors[g].ancestors & (1 << f) != 0
                                })
                            });
                            if let Some(r) = moved {
                                return Err(bad(format!(
                                    "the removal {} counts units of \"{factor}\" or of a factor nested in it within their nests, so a new nesting would name other units: change the nesting in a copy of the file and give its removals there",
                                    r.describe(&s)
                                )));
                            }
                            let removed = layout.removed.clone();
                            let sums = layout.sums_of_squares;
                            layout = set_within(&layout, f, within).map_err(bad)?;
                            layout.removed = removed;
                            layout.sums_of_squares = sums;
                        }
                        "population" => {
                            layout.structure.factors[f].population = if value == "none" {
                                None
                            } else {
                                if layout.structure.factors[f].kind == Kind::Fixed {
                                    return Err(bad(format!(
                                        "\"{factor}\" is fixed, so it has no population"
                                    )));
                                }
                                Some(whole(value)?)
                            };
                        }
                        _ => {
                            return Err(bad(format!(
                                "unknown field \"{field}\" of factor \"{factor}\" (known: levels, kind, within, population)"
                            )));
                        }
                    }
                }
            }
            // Rebuild through validation, so a change cannot leave an invalid layout.
            let mut factors = layout.structure.factors.clone();
            for fac in &mut factors {
                fac.ancestors = 0;
            }
            let renested = factors
                .iter()
                .zip(&side.layout.structure.factors)
                .any(|(a, b)| a.within != b.within || a.kind != b.kind);
            let mut structure = crate::layout::Structure::new(
                factors,
                layout.structure.omitted.clone(),
                layout.structure.convention,
            )
            .map_err(bad)?;
            // The units describe the nesting as the file gave it; nested differently, the
            // layout is one of factors.
            if !renested {
                structure.units = layout.structure.units.clone();
            }
            let mut rebuilt =
                Layout::new(layout.name.clone(), structure, layout.levels.clone()).map_err(bad)?;
            rebuilt.sums_of_squares = layout.sums_of_squares;
            side.layout = rebuilt
                .with_removals(layout.removed.clone())
                .map_err(|(_, m)| bad(m))?;
            Ok((side, notes))
        }
    }
}

/// After a change of kind, priors of terms that became fixed and effects of terms that
/// became random no longer apply; drop them and say so.
fn reconcile_kinds(plan: &mut PlanningValues, layout: &Layout) -> Vec<EditNote> {
    let s = &layout.structure;
    let mut notes = Vec::new();
    let label = |m: Mask| crate::layout::term_of(s, m).short_label(s);
    plan.priors.retain(|&m, _| {
        let keep = m == REPLICATE || crate::layout::term_of(s, m).kind(s) == Kind::Random;
        if !keep {
            notes.push(EditNote::NowFixed { term: label(m) });
        }
        keep
    });
    plan.effects.retain(|&m, _| {
        let keep = crate::layout::term_of(s, m).kind(s) == Kind::Fixed;
        if !keep {
            notes.push(EditNote::NowRandom { term: label(m) });
        }
        keep
    });
    notes
}

/// What an edit or the comparison itself changes beyond what was asked.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum EditNote {
    /// Planning values of the terms that went with a dropped factor.
    PlanningValuesGone { factor: String, terms: Vec<String> },
    /// A must-test term that went with a dropped factor.
    MustTestGone { factor: String, term: String },
    /// Removing cells made a restricted layout unbalanced: the unrestricted model.
    UnrestrictedAfterRemoval,
    /// A term made fixed: its standard deviation no longer applies.
    NowFixed { term: String },
    /// A term made random: its effect no longer applies.
    NowRandom { term: String },
    /// One side is unbalanced, so both are computed under the unrestricted model.
    BothUnrestricted,
    /// A dropped layer was the unit these treatments were applied to: without it they
    /// are tested over smaller units, which are not replicates of theirs.
    Pseudoreplication {
        unit: String,
        treatments: Vec<String>,
    },
    /// An interaction to omit that unit-treatment additivity already pools.
    AlreadyPooled { term: String },
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Status {
    Same,
    Weaker,
    Stronger,
    Lost,
    Gained,
    /// Tested, but over smaller units than those the treatment is applied to.
    Pseudoreplicated,
}

#[derive(Debug, Clone, Serialize)]
pub struct SideTest {
    pub label: String,
    pub verdict: Option<Verdict>,
    /// The error term: one mean square, or a combination.
    pub denominator: Vec<DenominatorPart>,
    pub df: u64,
    pub denominator_df: Option<f64>,
    pub power: Option<f64>,
    pub min_detectable: Option<f64>,
}

#[derive(Debug, Clone, Serialize)]
pub struct TermComparison {
    pub label: String,
    /// Whether the term is the residual (under whatever name the smallest unit gives it).
    #[serde(skip)]
    pub residual: bool,
    pub base: Option<SideTest>,
    pub other: Option<SideTest>,
    pub status: Status,
    pub error_term_changed: bool,
    /// Whether the goal (the must-test terms, or every term) covers it.
    pub must_test: bool,
}

#[derive(Debug, Clone, Serialize)]
pub struct CostComparison {
    pub base: Option<f64>,
    pub other: Option<f64>,
    pub difference: Option<f64>,
}

#[derive(Debug, Clone, Serialize)]
pub struct Comparison {
    pub base: CheckReport,
    pub other: CheckReport,
    pub changes: Vec<String>,
    pub notes: Vec<EditNote>,
    pub terms: Vec<TermComparison>,
    pub cost: CostComparison,
}

/// Compares two sides under an optional convention override.
pub fn compare(
    base: &Side,
    other: &Side,
    changes: Vec<String>,
    notes: Vec<EditNote>,
    convention: Option<Convention>,
) -> Result<Comparison, Error> {
    let mut notes = notes;
    // An unbalanced side is computed under the unrestricted model; so is the other, so
    // that the two differ only in the changes.
    let unbalanced = [base, other]
        .iter()
        .any(|x| !x.layout.defines(Convention::Restricted));
    let convention = if unbalanced {
        if convention == Some(Convention::Restricted) {
            return Err(Error::Usage(format!(
                "--convention restricted: {RESTRICTED_UNBALANCED}"
            )));
        }
        if [base, other]
            .iter()
            .any(|x| x.layout.structure.convention == Convention::Restricted)
        {
            notes.push(EditNote::BothUnrestricted);
        }
        Some(Convention::Unrestricted)
    } else {
        convention
    };
    let run = |side: &Side| {
        let c = convention.unwrap_or(side.layout.structure.convention);
        check_with_goal(&side.layout, c, &side.plan, &side.goal)
    };
    let b = run(base)?;
    let o = run(other)?;
    let key = |t: &TermReport| -> Vec<String> {
        let mut k = t.live.clone();
        k.sort();
        if t.residual {
            k.push("residual".into());
        }
        k
    };
    let side_test = |t: &TermReport| SideTest {
        label: t.label.clone(),
        verdict: t.test.as_ref().map(|x| x.verdict),
        denominator: t
            .test
            .as_ref()
            .filter(|x| x.verdict.is_testable())
            .map(|x| x.denominator.clone())
            .unwrap_or_default(),
        df: t.df,
        denominator_df: t.test.as_ref().and_then(|x| x.denominator_df),
        power: t.test.as_ref().and_then(|x| x.power),
        min_detectable: t.test.as_ref().and_then(|x| x.min_detectable),
    };
    let covers = |side: &Side, t: &TermReport| -> bool {
        !t.residual && {
            let live = side
                .layout
                .structure
                .factors
                .iter()
                .enumerate()
                .filter(|(_, f)| t.live.contains(&f.name))
                .fold(0u32, |m, (i, _)| m | (1 << i));
            side.goal.covers(live)
        }
    };
    let mut terms: Vec<TermComparison> = Vec::new();
    for t in &b.terms {
        let matching = o.terms.iter().find(|u| key(u) == key(t));
        terms.push(judge(
            t.label.clone(),
            t.residual,
            Some(side_test(t)),
            matching.map(side_test),
            covers(base, t) || matching.is_some_and(|u| covers(other, u)),
        ));
    }
    for u in &o.terms {
        if !b.terms.iter().any(|t| key(t) == key(u)) {
            terms.push(judge(
                u.label.clone(),
                u.residual,
                None,
                Some(side_test(u)),
                covers(other, u),
            ));
        }
    }
    // A test over smaller units than the treatment's own is not stronger: it is
    // pseudoreplicated (Hurlbert 1984).
    let moved: Vec<&String> = notes
        .iter()
        .filter_map(|n| match n {
            EditNote::Pseudoreplication { treatments, .. } => Some(treatments),
            _ => None,
        })
        .flatten()
        .collect();
    for tc in &mut terms {
        let named = o.pseudoreplication().iter().any(|p| p.term == tc.label);
        let dropped_unit = o
            .terms
            .iter()
            .find(|u| u.label == tc.label)
            .is_some_and(|u| u.live.iter().any(|n| moved.contains(&n)));
        if (named || dropped_unit) && testable(&tc.other) {
            tc.status = Status::Pseudoreplicated;
        }
    }
    let total = |r: &CheckReport| r.cost.as_ref().map(|c| c.total);
    let cost = CostComparison {
        base: total(&b),
        other: total(&o),
        difference: total(&b).zip(total(&o)).map(|(x, y)| y - x),
    };
    Ok(Comparison {
        base: b,
        other: o,
        changes,
        notes,
        terms,
        cost,
    })
}

/// The side's test, when it has one.
fn tested(t: &Option<SideTest>) -> Option<&SideTest> {
    t.as_ref().filter(|_| testable(t))
}

pub fn testable(t: &Option<SideTest>) -> bool {
    t.as_ref()
        .and_then(|x| x.verdict)
        .is_some_and(|v| v.is_testable())
}

fn judge(
    label: String,
    residual: bool,
    base: Option<SideTest>,
    other: Option<SideTest>,
    must_test: bool,
) -> TermComparison {
    let error_term_changed = match (&base, &other) {
        (Some(b), Some(o)) => !same_denominator(&b.denominator, &o.denominator),
        _ => true,
    };
    let status = match (tested(&base), tested(&other)) {
        (Some(_), None) => Status::Lost,
        (None, Some(_)) => Status::Gained,
        (None, None) => Status::Same,
        (Some(b), Some(o)) => {
            let by = |x: Option<f64>, y: Option<f64>| -> Option<std::cmp::Ordering> {
                match (x, y) {
                    (Some(x), Some(y)) if (x - y).abs() > 1e-9 * x.abs().max(1.0) => {
                        x.partial_cmp(&y)
                    }
                    _ => None,
                }
            };
            let exact = |v: Option<Verdict>| u8::from(v == Some(Verdict::Exact));
            let order = by(o.power, b.power)
                .or_else(|| by(o.denominator_df, b.denominator_df))
                .or_else(|| match exact(o.verdict).cmp(&exact(b.verdict)) {
                    std::cmp::Ordering::Equal => None,
                    other => Some(other),
                });
            match order {
                Some(std::cmp::Ordering::Greater) => Status::Stronger,
                Some(std::cmp::Ordering::Less) => Status::Weaker,
                _ => Status::Same,
            }
        }
    };
    TermComparison {
        label,
        residual,
        base,
        other,
        status,
        error_term_changed,
        must_test,
    }
}

/// Whether two layouts' denominators are the same mean squares (by the terms' factor
/// names: a term's identity across two layout files) with the same weights.
fn same_denominator(a: &[DenominatorPart], b: &[DenominatorPart]) -> bool {
    a.len() == b.len()
        && a.iter().zip(b).all(|(x, y)| {
            x.term == y.term
                && (x.coefficient.value() - y.coefficient.value()).abs()
                    <= 1e-9 * x.coefficient.value().abs().max(1.0)
        })
}
