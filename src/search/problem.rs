//! The search problem: a validated `[search]` table over a base layout.
//!
//! `Problem::from_spec` checks everything the user wrote under `[search]` against the
//! base layout and its planning values, and reports each mistake with its line. Past this
//! point the search does not re-check any of it.

use crate::error::Error;
use crate::goal::Goal;
use crate::layout::{Kind, Layout};
use crate::planning::{PlanningValues, check_probability};
use crate::spec::{self, Spec};
use crate::term::Mask;

/// Enumerations larger than this stop before they start, unless `--max-candidates` says
/// otherwise.
pub const DEFAULT_MAX_CANDIDATES: u64 = 50_000_000;

/// An inclusive range of level counts.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Range {
    pub lo: u64,
    pub hi: u64,
}

impl Range {
    pub fn values(&self) -> Vec<u64> {
        (self.lo..=self.hi).collect()
    }
}

/// Structural alternatives for one factor (indices are the base layout's).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Choice {
    pub factor: usize,
    /// Nesting alternatives (sets of factors it is directly nested in); empty keeps the
    /// factor's own nesting.
    pub within: Vec<Mask>,
    /// The factor may be left out of the layout.
    pub optional: bool,
}

/// A term that the experiment must be able to test, as a live set of the base layout.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct MustTest {
    pub label: String,
    pub live: Mask,
}

/// A capacity the user states: at most `at_most` units of one kind, in all or per
/// member of a larger unit.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Limit {
    pub unit: String,
    pub per: Option<String>,
    pub at_most: u64,
}

#[derive(Debug, Clone)]
pub struct Problem {
    pub base: Layout,
    pub plan: PlanningValues,
    pub budget: Option<f64>,
    pub must_test: Vec<MustTest>,
    /// Each must-test term's denominator df at least this; `None`: no minimum.
    pub min_df: Option<f64>,
    pub exact_only: bool,
    /// Each must-test term at least this power; `None`: no power target.
    pub target_power: Option<f64>,
    /// Level ranges by base factor; `None` keeps the factor's own level count.
    pub ranges: Vec<Option<Range>>,
    pub replicates: Range,
    pub choices: Vec<Choice>,
    /// Capacity limits, each a product of level counts that candidates may not exceed.
    pub limits: Vec<Limit>,
    /// In a layout of units: placements, optional units and count ranges.
    pub units: Option<super::placement::UnitSpace>,
}

impl Problem {
    /// Reads the `[search]` table of a spec. `power` is the command line's `--power`,
    /// which overrides `target_power`.
    pub fn from_spec(
        spec: &Spec,
        text: &str,
        base: Layout,
        mut plan: PlanningValues,
        power: Option<f64>,
    ) -> Result<Problem, Error> {
        let at = |span: std::ops::Range<usize>| Some(spec::line_of(text, span.start));
        let s = &base.structure;
        if !base.removed.is_empty() {
            return Err(Error::Usage(
                "the design search plans balanced layouts; remove the [[layout.remove]] tables to search, then check the chosen layout with its losses".into(),
            ));
        }
        let search = spec.search.as_ref().ok_or_else(|| {
            Error::invalid(
                None,
                "no [search] table: a problem file is a layout file plus a [search] table with at least `must_test` (see docs/search.md)",
            )
        })?;
        let cost = plan.cost.as_ref().ok_or_else(|| {
            Error::invalid(
                None,
                "the search compares layouts by cost, and the file has no [cost] table: add [cost] with prices under [cost.per_unit] (see docs/planning.md)",
            )
        })?;
        if cost.overhead == 0.0 && cost.per_unit.iter().all(|&(_, p)| p == 0.0) {
            return Err(Error::invalid(
                None,
                "every price in [cost] is zero, so every layout costs nothing and the search cannot rank them: give the units their prices under [cost.per_unit]",
            ));
        }

        let budget = match &search.budget {
            None => None,
            Some(b) => {
                let v = *b.get_ref();
                if !(v.is_finite() && v > 0.0) {
                    return Err(Error::invalid(
                        at(b.span()),
                        format!(
                            "[search] budget must be a finite positive number (got {v}); leave it out for no limit"
                        ),
                    ));
                }
                Some(v)
            }
        };

        // The goal (must-test terms, min_df, target_power, exact_only) is read as `check`
        // and `compare` read it; the search adds what a search needs on top.
        let goal = Goal::from_spec(spec, text, &base)?;
        if goal.must_test.is_empty() {
            return Err(Error::invalid(
                None,
                "[search] must_test is empty or missing: name the terms the experiment must be able to test, e.g. must_test = [\"light\"]",
            ));
        }
        let mut must_test: Vec<MustTest> = Vec::new();
        for (k, &live) in goal.must_test.iter().enumerate() {
            let line = search.must_test.get(k).and_then(|m| at(m.span()));
            let label = crate::layout::term_of(s, live).short_label(s);
            if s.is_omitted(live) {
                return Err(Error::invalid(
                    line,
                    format!(
                        "[search] must_test: \"{label}\" is assumed absent (in `omit`), so it has no test: remove it from one of the two"
                    ),
                ));
            }
            if must_test.iter().any(|t| t.live == live) {
                return Err(Error::invalid(
                    line,
                    format!("[search] must_test: \"{label}\" is listed twice"),
                ));
            }
            must_test.push(MustTest {
                label: crate::layout::term_of(s, live).short_label(s),
                live,
            });
        }
        let min_df = goal.min_df;

        let (target_power, power_line) = match (power, &search.target_power) {
            (Some(p), _) => (Some(p), None),
            (None, Some(t)) => (goal.target_power, at(t.span())),
            (None, None) => (None, None),
        };
        if let Some(p) = target_power {
            let what = if power_line.is_some() {
                "target_power"
            } else {
                "--power"
            };
            if !plan.has_priors() {
                return Err(Error::invalid(
                    power_line,
                    format!(
                        "{what} {p} asks for power, which needs an [sd] table (the standard deviations of the random terms): add one, or leave out {what}"
                    ),
                ));
            }
            for m in &must_test {
                let term = crate::layout::term_of(s, m.live);
                let (has, table) = match term.kind(s) {
                    Kind::Fixed => (plan.effects.contains_key(&m.live), "[effect]"),
                    Kind::Random => (plan.priors.contains_key(&m.live), "[sd]"),
                };
                if !has {
                    return Err(Error::invalid(
                        power_line,
                        format!(
                            "{what} {p} needs the size of \"{}\" to compute its power: add it under {table}",
                            m.label
                        ),
                    ));
                }
            }
            plan.power = p;
        }

        let mut ranges: Vec<Option<Range>> = vec![None; s.factors.len()];
        let mut replicates = Range {
            lo: base.levels.replicates,
            hi: base.levels.replicates,
        };
        let declared = s.units.declared();
        let mut unit_levels: Vec<(String, Range, Option<usize>)> = Vec::new();
        for (key, value) in &search.levels {
            let line = at(value.span());
            let v = value.get_ref();
            let key_name = key.trim();
            if declared {
                unit_levels.push((key_name.to_string(), read_range(key_name, v, line)?, line));
                continue;
            }
            let name = key_name;
            let factor = s.factor_index(name);
            if factor.is_some() && name == "replicates" {
                return Err(Error::invalid(
                    line,
                    "[search.levels] \"replicates\" names both a factor and the replicates per cell: rename the factor",
                ));
            }
            if factor.is_none() && name != "replicates" {
                return Err(Error::invalid(
                    line,
                    format!(
                        "[search.levels] \"{name}\" is not a factor (known: {}; or `replicates`)",
                        s.known_names()
                    ),
                ));
            }
            let range = read_range(name, v, line)?;
            let (lo, hi) = (range.lo, range.hi);
            let least = match factor {
                Some(i) if s.factors[i].kind == Kind::Fixed => 2,
                _ => 1,
            };
            if lo < least {
                let why = if least == 2 {
                    format!(
                        "\"{name}\" is fixed, and a fixed factor needs at least 2 levels to compare anything"
                    )
                } else if factor.is_some() {
                    format!("\"{name}\" needs at least 1 level")
                } else {
                    "every cell needs at least 1 replicate".to_string()
                };
                return Err(Error::invalid(
                    line,
                    format!(
                        "[search.levels] \"{name}\" = [{lo}, {hi}] starts below {least}: {why}"
                    ),
                ));
            }
            match factor {
                Some(i) => {
                    if let Some(p) = s.factors[i].population
                        && range.hi > p
                    {
                        return Err(Error::invalid(
                            line,
                            format!(
                                "[search.levels] \"{name}\" reaches {hi} levels, but they are drawn from a population of {p}: keep the range within the population"
                            ),
                        ));
                    }
                    ranges[i] = Some(range);
                }
                None => replicates = range,
            }
        }

        // The largest candidate must fit in the layout's 64-bit counts.
        let mut largest: Option<u64> = Some(replicates.hi);
        for (i, r) in ranges.iter().enumerate() {
            let n = r.map_or(base.levels.per_factor[i], |r| r.hi);
            largest = largest.and_then(|x| x.checked_mul(n));
        }
        if largest.is_none() {
            return Err(Error::invalid(
                None,
                "[search.levels]: the largest layout in these ranges has more observations than fit in a 64-bit count: narrow the ranges",
            ));
        }

        if !declared && let Some(p) = search.placement.first() {
            return Err(Error::invalid(
                at(p.span()),
                "[[search.placement]] chooses the unit a treatment is randomised to, and this layout has no units: describe it with [[unit]] and [[treatment]] tables (see docs/units.md), or use [[search.choice]] to change nesting",
            ));
        }
        if !declared && let Some(o) = search.optional_units.first() {
            return Err(Error::invalid(
                at(o.span()),
                "[search] optional_units names units, and this layout has no units: use a [[search.choice]] table with `optional = true` for a factor the layout may do without",
            ));
        }
        if declared && let Some(c) = search.choice.first() {
            return Err(Error::invalid(
                at(c.span()),
                "[[search.choice]] changes factors, and this layout is described by units: list the units a treatment may go to in [[search.placement]], and units the layout may do without in `optional_units`",
            ));
        }
        let limits = read_limits(spec, search, text, &base)?;
        let units = if declared {
            for (name, range, line) in &unit_levels {
                if range.lo < 1 {
                    return Err(Error::invalid(
                        *line,
                        format!(
                            "[search.levels] \"{name}\" = [{}, {}] starts below 1: every unit and treatment needs at least 1",
                            range.lo, range.hi
                        ),
                    ));
                }
            }
            Some(super::placement::UnitSpace::read(spec, text, unit_levels)?)
        } else {
            None
        };

        let mut choices: Vec<Choice> = Vec::new();
        for c in &search.choice {
            let line = at(c.span());
            let c = c.get_ref();
            let name = c.factor.get_ref().trim();
            let factor = s.factor_index(name).ok_or_else(|| {
                Error::invalid(
                    at(c.factor.span()),
                    format!(
                        "[[search.choice]] factor \"{name}\" is not a factor (known: {})",
                        s.known_names()
                    ),
                )
            })?;
            if choices.iter().any(|x| x.factor == factor) {
                return Err(Error::invalid(
                    line,
                    format!(
                        "[[search.choice]] \"{name}\" has two choice tables: put its alternatives in one"
                    ),
                ));
            }
            let optional = c.optional.unwrap_or(false);
            let alternatives = c.within.as_deref().unwrap_or(&[]);
            if c.within.is_some() && alternatives.is_empty() {
                return Err(Error::invalid(
                    line,
                    format!(
                        "[[search.choice]] \"{name}\": `within` lists no alternatives; give each as a list of factors, e.g. within = [[\"light\"], [\"light\", \"cultivar\"]]"
                    ),
                ));
            }
            if alternatives.is_empty() && !optional {
                return Err(Error::invalid(
                    line,
                    format!(
                        "[[search.choice]] \"{name}\" offers no alternative: give `within` (nesting alternatives) or `optional = true` (a layer that may be left out)"
                    ),
                ));
            }
            let mut within = Vec::new();
            for alt in alternatives {
                let mut mask: Mask = 0;
                for w in alt {
                    let w = w.trim();
                    let j = s.factor_index(w).ok_or_else(|| {
                        Error::invalid(
                            line,
                            format!(
                                "[[search.choice]] \"{name}\": within names \"{w}\", which is not a factor (known: {})",
                                s.known_names()
                            ),
                        )
                    })?;
                    if j == factor {
                        return Err(Error::invalid(
                            line,
                            format!(
                                "[[search.choice]] \"{name}\" cannot be nested in itself: remove \"{w}\" from that alternative"
                            ),
                        ));
                    }
                    mask |= 1 << j;
                }
                if within.contains(&mask) {
                    return Err(Error::invalid(
                        line,
                        format!("[[search.choice]] \"{name}\" lists the same nesting twice"),
                    ));
                }
                // Each alternative on its own must give a layout.
                crate::variant::set_within(&base, factor, mask).map_err(|m| {
                    Error::invalid(line, format!("[[search.choice]] \"{name}\": {m}"))
                })?;
                within.push(mask);
            }
            choices.push(Choice {
                factor,
                within,
                optional,
            });
        }

        Ok(Problem {
            base,
            plan,
            budget,
            must_test,
            min_df,
            exact_only: goal.exact_only,
            target_power,
            ranges,
            replicates,
            choices,
            limits,
            units,
        })
    }

    /// The arrangement of units and treatments the search chooses between, in a layout of
    /// units with placements or optional units.
    pub fn chooses_arrangement(&self) -> bool {
        self.units
            .as_ref()
            .is_some_and(|u| !u.placements.is_empty() || !u.optional.is_empty())
    }

    /// Reads a problem file: the layout, its planning values (with the command line's
    /// overrides) and the `[search]` table.
    pub fn from_file(
        path: &std::path::Path,
        alpha: Option<f64>,
        power: Option<f64>,
    ) -> Result<Problem, Error> {
        let (layout, spec, text) = Layout::from_file(path)?;
        let mut plan =
            PlanningValues::from_spec(&spec, &text, &layout).map_err(|e| e.in_file(path))?;
        if let Some(a) = alpha {
            plan.alpha = check_probability(a, "--alpha").map_err(Error::Usage)?;
        }
        let power = match power {
            None => None,
            Some(p) => Some(check_probability(p, "--power").map_err(Error::Usage)?),
        };
        Problem::from_spec(&spec, &text, layout, plan, power).map_err(|e| e.in_file(path))
    }
}

/// A `[search.levels]` value: two whole numbers, the lowest first.
fn read_range(name: &str, v: &[i64], line: Option<usize>) -> Result<Range, Error> {
    let [lo, hi] = v[..] else {
        return Err(Error::invalid(
            line,
            format!(
                "[search.levels] \"{name}\" must be a range of two whole numbers, [lowest, highest] (got {} numbers)",
                v.len()
            ),
        ));
    };
    if lo > hi {
        return Err(Error::invalid(
            line,
            format!(
                "[search.levels] \"{name}\" = [{lo}, {hi}] is inverted: write the lowest level count first"
            ),
        ));
    }
    if lo < 0 {
        return Err(Error::invalid(
            line,
            format!(
                "[search.levels] \"{name}\" = [{lo}, {hi}] starts below 1: counts are whole numbers of at least 1"
            ),
        ));
    }
    Ok(Range {
        lo: lo as u64,
        hi: hi as u64,
    })
}

/// The `[[search.limit]]` tables, checked against the base layout.
fn read_limits(
    spec: &Spec,
    search: &spec::SearchSpec,
    text: &str,
    base: &Layout,
) -> Result<Vec<Limit>, Error> {
    let at = |span: std::ops::Range<usize>| Some(spec::line_of(text, span.start));
    let s = &base.structure;
    let declared = s.units.declared();
    let known = || {
        if declared {
            s.units
                .list
                .iter()
                .map(|u| u.name.clone())
                .collect::<Vec<_>>()
                .join(", ")
        } else {
            s.known_names()
        }
    };
    let exists = |name: &str| {
        if declared {
            s.units.by_name(name).is_some()
        } else {
            s.factor_index(name).is_some()
        }
    };
    let what = if declared { "unit" } else { "factor" };
    let mut out: Vec<Limit> = Vec::new();
    for l in &search.limit {
        let line = at(l.span());
        let l = l.get_ref();
        let unit = l.unit.get_ref().trim().to_string();
        if !exists(&unit) {
            return Err(Error::invalid(
                at(l.unit.span()),
                format!(
                    "[[search.limit]] unit \"{unit}\" is not a {what} (known: {})",
                    known()
                ),
            ));
        }
        let n = *l.at_most.get_ref();
        if n < 1 {
            return Err(Error::invalid(
                at(l.at_most.span()),
                format!(
                    "[[search.limit]] \"{unit}\": at_most must be a whole number of at least 1 (got {n})"
                ),
            ));
        }
        let per = match &l.per {
            None => None,
            Some(p) => {
                let p_name = p.get_ref().trim().to_string();
                let line = at(p.span());
                if !declared {
                    return Err(Error::invalid(
                        line,
                        format!(
                            "[[search.limit]] \"{unit}\": in a layout of factors a factor's levels are already counted per combination of what it is nested in, so `per` is not needed: narrow its range under [search.levels] instead"
                        ),
                    ));
                }
                let index = |name: &str| {
                    spec.unit
                        .iter()
                        .position(|x| x.get_ref().name.get_ref().trim() == name)
                };
                let (Some(u), Some(q)) = (index(&unit), index(&p_name)) else {
                    return Err(Error::invalid(
                        line,
                        format!(
                            "[[search.limit]] \"{unit}\": per \"{p_name}\" is not a unit declared in the file (known: {})",
                            known()
                        ),
                    ));
                };
                if !super::placement::is_within(spec, u, q) {
                    return Err(Error::invalid(
                        line,
                        format!(
                            "[[search.limit]] \"{unit}\" per \"{p_name}\": {unit} is not within {p_name}, so there is no count of one per the other: name a unit it is within, or leave out `per` for a limit in all"
                        ),
                    ));
                }
                Some(p_name)
            }
        };
        let limit = Limit {
            unit,
            per,
            at_most: n as u64,
        };
        if out.contains(&limit) {
            return Err(Error::invalid(line, "[[search.limit]] is given twice"));
        }
        out.push(limit);
    }
    Ok(out)
}
