//! The sentences and notations every renderer shares, written once: verdicts, E(MS) in
//! the trade's notation, denominators, reasons, repairs, the notes of an unbalanced
//! layout and the cautions.

use crate::engine::Coefficient;
use crate::errorterm::{Verdict, weight_text};
use crate::findings::{
    Cause, ChangeReport, CheckReport, Component, DenominatorPart, PlanningGaps, PseudoCause,
    Pseudoreplication, Reason, RepairReport, Shortfall, Strata, Summary, TermReport, TestReport,
    Unit, Warning,
};
use crate::layout::{Kind, SumsOfSquares};

use super::{and_list, num};

/// The caution that goes wherever users decide on power.
pub const CAUTION: &str = "Power and minimum detectable effects rest on the planning values, which are guesses: they are only as good as those guesses. Have a statistician review designs that carry real cost or risk.";

/// What the symbols of an expected mean square mean.
pub const LEGEND: &str = "σ²: the variance between observations in a cell; σ²(term): the variance of a random term's effects; κ²(term): Σ effect² / df of a fixed term's effects.";

/// A verdict in words.
pub fn verdict(v: Verdict) -> &'static str {
    match v {
        Verdict::Exact => "exact F",
        Verdict::QuasiF => "quasi-F",
        Verdict::Untestable => "no test",
        Verdict::NotEstimable => "not estimable",
    }
}

/// A kind in words.
pub fn kind(k: Kind) -> &'static str {
    match k {
        Kind::Fixed => "fixed",
        Kind::Random => "random",
    }
}

/// `3`, `9/5`, or a float to four significant digits (`11.67`, `0.02714`).
pub fn coefficient(c: &Coefficient) -> String {
    match c {
        Coefficient::Exact(r) => weight_text(r),
        Coefficient::Approximate(x) => {
            if let Some(w) = Coefficient::whole(*x) {
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

/// `σ²`, `σ²(bench)` or `κ²(light)`: a component in the trade's notation.
/// The residual of a layout of units carries the smallest unit's name: `σ²(pot)`.
pub fn symbol(kind: Kind, residual: bool, short_label: &str) -> String {
    if residual && short_label == "residual" {
        return "σ²".into();
    }
    match kind {
        Kind::Fixed => format!("κ²({short_label})"),
        Kind::Random => format!("σ²({short_label})"),
    }
}

fn component_symbol(c: &Component) -> String {
    symbol(c.kind, c.residual, &c.short_label)
}

/// E(MS) in the trade's notation: `σ² + 6σ²(bench) + 24κ²(light)`.
pub fn ems(term: &TermReport) -> String {
    term.ems
        .iter()
        .map(|c| {
            if c.coefficient.is_one() {
                component_symbol(c)
            } else {
                format!("{}{}", coefficient(&c.coefficient), component_symbol(c))
            }
        })
        .collect::<Vec<_>>()
        .join(" + ")
}

/// A weight smaller than this share of the largest is left out of a written
/// denominator (it is kept in the JSON and in every computation).
const NEGLIGIBLE_WEIGHT: f64 = 0.005;

/// A combination of mean squares as a textbook writes it: `MS(a x b) + MS(a x c) −
/// MS(a x b x c)`, with float weights `0.9713 MS(chamber(light)) + 0.0287 MS(residual)`.
/// Float weights below half a percent of the largest are left out, and counted.
pub fn combination(parts: &[(String, Coefficient)]) -> String {
    let largest = parts
        .iter()
        .fold(0.0f64, |m, (_, w)| m.max(w.value().abs()));
    let shown: Vec<&(String, Coefficient)> = parts
        .iter()
        .filter(|(_, w)| {
            matches!(w, Coefficient::Exact(_)) || w.value().abs() >= NEGLIGIBLE_WEIGHT * largest
        })
        .collect();
    let mut out: String = shown
        .iter()
        .enumerate()
        .map(|(k, (label, w))| {
            let sign = match (k, w.is_negative()) {
                (0, false) => "",
                (0, true) => "−",
                (_, false) => " + ",
                (_, true) => " − ",
            };
            let mag = w.abs();
            let mag = if mag.is_one() {
                String::new()
            } else {
                format!("{} ", coefficient(&mag))
            };
            format!("{sign}{mag}MS({label})")
        })
        .collect();
    let left = parts.len() - shown.len();
    if left > 0 {
        out.push_str(&format!(
            " (+ {left} smaller term{})",
            if left == 1 { "" } else { "s" }
        ));
    }
    out
}

/// A test's denominator in words: a term label, or a combination of mean squares.
pub fn denominator(parts: &[DenominatorPart]) -> String {
    if let [p] = parts
        && p.coefficient.is_one()
    {
        return p.term.clone();
    }
    let parts: Vec<(String, Coefficient)> = parts
        .iter()
        .map(|d| (d.term.clone(), d.coefficient))
        .collect();
    combination(&parts)
}

/// What a term is tested over: a term label, a combination of mean squares, or "none".
pub fn tested_over(test: &TestReport) -> String {
    match test.verdict {
        Verdict::Exact | Verdict::QuasiF => denominator(&test.denominator),
        Verdict::Untestable | Verdict::NotEstimable => "none".into(),
    }
}

fn one_level(names: &[String]) -> String {
    match names.len() {
        0 => "no factor has".into(),
        1 => format!("{} has", names[0]),
        _ => format!("{} have", names.join(" and ")),
    }
}

/// Why a term is not simply tested, in words.
pub fn reason(term: &TermReport, test: &TestReport) -> Option<String> {
    let r = test.reason.as_ref()?;
    Some(reason_words(r, Some(term.kind), &test.denominator))
}

/// A reason in words, for a term whose kind may not be known.
pub fn reason_of(r: &Reason, denominator_parts: &[DenominatorPart]) -> String {
    reason_words(r, None, denominator_parts)
}

fn reason_words(r: &Reason, kind: Option<Kind>, parts: &[DenominatorPart]) -> String {
    let still = match kind {
        Some(Kind::Fixed) => "its effects are still in the model",
        Some(Kind::Random) => "its variance is still in the model",
        None => "it is still in the model",
    };
    match r {
        Reason::NoDf {
            one_level: ones,
            full_layout_df,
            sequential_df,
        } => match (full_layout_df, sequential_df) {
            (None, _) => format!(
                "it has 0 df ({} one level in each nest), so it has no mean square of its own; {still}",
                one_level(ones)
            ),
            (Some(0), _) => format!(
                "the layout leaves it 0 df (it had none in the full layout either), so it has no mean square of its own; {still}"
            ),
            (Some(before), Some(seq)) => format!(
                "the layout leaves it 0 df (it had {before} in the full layout; type III leaves it none, sequential sums of squares {seq}), so it has no mean square of its own; {still}"
            ),
            (Some(before), None) => format!(
                "the layout leaves it 0 df (it had {before} in the full layout), so it has no mean square of its own; {still}"
            ),
        },
        Reason::QuasiF => format!(
            "no single mean square has the expected value it needs, so it is tested by a quasi-F ratio over {}; its denominator df come from Satterthwaite's approximation (1946) under the planning values; with few denominator df its real level and power can be far from the nominal ones, so confirm them with `emsplan simulate`",
            denominator(parts)
        ),
        Reason::NoCombination => {
            "no combination of the other mean squares has the expected value it needs".into()
        }
        Reason::Confounded { components } => components
            .iter()
            .map(|c| {
                let sym = symbol(c.kind, c.residual, &c.short_label);
                match (&c.cause, c.residual) {
                    (Cause::ZeroDf { .. }, true) => format!(
                        "{sym} is in its expected mean square, but with one observation per cell the residual has no df"
                    ),
                    (Cause::ZeroDf { one_level: ones }, false) => format!(
                        "{sym} is in its expected mean square, but {} has 0 df ({} one level in each nest), so that variance is confounded with it",
                        c.component,
                        one_level(ones)
                    ),
                    (Cause::ZeroDfAfterRemovals, true) => format!(
                        "{sym} is in its expected mean square, but the residual has no df left (no cell keeps two observations)"
                    ),
                    (Cause::ZeroDfAfterRemovals, false) => format!(
                        "{sym} is in its expected mean square, but {} has 0 df after the removals, so that variance is confounded with it",
                        c.component
                    ),
                    (Cause::NowhereElse, _) if c.kind == Kind::Fixed => format!(
                        "{sym} is in its expected mean square, and no other mean square carries it"
                    ),
                    (Cause::NowhereElse, _) => format!(
                        "{sym} is in its expected mean square and in no other estimable mean square"
                    ),
                }
            })
            .collect::<Vec<_>>()
            .join("; "),
    }
}

/// How a test misses the goal, in words.
pub fn shortfall(s: &Shortfall) -> String {
    let mut parts = Vec::new();
    if s.needs_exact {
        parts.push("the goal asks for an exact F test".to_string());
    }
    if let Some(g) = s.denominator_df {
        parts.push(match g.have {
            Some(d) => format!(
                "its {} denominator df are below the {} asked for",
                num(d),
                num(g.want)
            ),
            None => format!(
                "its denominator df are unknown without planning values, and {} are asked for",
                num(g.want)
            ),
        });
    }
    if let Some(g) = s.power {
        parts.push(match g.have {
            Some(x) => format!("its power {x:.2} is below the target {}", g.want),
            None => format!(
                "its power is unknown (it needs [sd] and [effect]) and {} is the target",
                g.want
            ),
        });
    }
    parts.join("; ")
}

fn factor_list(names: &[String]) -> String {
    if names.is_empty() {
        "nothing (crossed with everything)".into()
    } else {
        names.join(" and ")
    }
}

/// A change to a layout in words.
pub fn change(c: &ChangeReport) -> String {
    match c {
        ChangeReport::Levels {
            factor,
            within,
            from,
            to,
            unit: true,
        } => {
            if within.is_empty() {
                format!("use {to} {factor}s (now {from})")
            } else {
                format!(
                    "use {to} {factor}s for each {} (now {from})",
                    factor_list(within)
                )
            }
        }
        ChangeReport::Levels {
            factor,
            within,
            from,
            to,
            unit: false,
        } => {
            if within.is_empty() {
                format!("use {to} levels of {factor} (now {from})")
            } else {
                format!(
                    "use {to} levels of {factor} in each {} (now {from})",
                    factor_list(within)
                )
            }
        }
        ChangeReport::Replicates {
            from,
            to,
            unit: None,
        } => {
            format!("take {to} replicates per cell (now {from})")
        }
        ChangeReport::Replicates {
            from,
            to,
            unit: Some(unit),
        } => {
            format!(
                "use {to} {unit}s for each combination of the units and treatments above them (now {from})"
            )
        }
        ChangeReport::Within { factor, from, to } => {
            let added: Vec<String> = to.iter().filter(|n| !from.contains(n)).cloned().collect();
            let removed: Vec<String> = from.iter().filter(|n| !to.contains(n)).cloned().collect();
            if !added.is_empty() {
                let a = factor_list(&added);
                format!(
                    "nest {factor} within {a} as well (a separate {factor} for each level of {a})"
                )
            } else {
                let r = factor_list(&removed);
                format!(
                    "cross {factor} with {r} instead of nesting it there (only if every {factor} can take every level of {r})"
                )
            }
        }
        ChangeReport::Omit { term } => format!("assume {term} is absent"),
    }
}

/// The risk of a repair that is an assumption.
pub const ASSUMPTION_RISK: &str = "an assumption, not a measurement: if the interaction is really there, the test is biased and its error rate is wrong";

/// A repair with what it gives: `use 4 levels of chamber (now 3) (exact F test on 9 df,
/// power 0.61, cost +972)`.
pub fn repair(r: &RepairReport) -> String {
    let mut what = format!("{} test", verdict(r.verdict));
    if let Some(d) = r.denominator_df {
        what.push_str(&format!(" on {} df", num(d)));
    }
    if let Some(p) = r.power {
        what.push_str(&format!(", power {p:.2}"));
    }
    if let Some(c) = r.cost_change {
        let sign = if c >= 0.0 { "+" } else { "" };
        what.push_str(&format!(", cost {sign}{}", num(c)));
    }
    if r.assumption {
        what.push_str("; an assumption: if it is really there the test is biased");
    }
    format!("{} ({what})", change(&r.change))
}

/// A term's finding: what is wrong, why, and the repairs that would fix it.
pub fn finding(term: &TermReport, test: &TestReport) -> String {
    let label = &term.label;
    let mut why: Vec<String> = Vec::new();
    if let Some(s) = &test.shortfall {
        why.push(shortfall(s));
    }
    if let Some(r) = reason(term, test) {
        why.push(r);
    }
    let why = why.join("; ");
    let head = match test.verdict {
        Verdict::Untestable => format!("{label} cannot be tested: {why}."),
        Verdict::NotEstimable => format!("{label} is not estimable: {why}."),
        Verdict::QuasiF | Verdict::Exact => format!("{label}: {why}."),
    };
    if test.repairs.is_empty() {
        return head;
    }
    let fixes: Vec<String> = test.repairs.iter().map(repair).collect();
    let fix = if test.verdict.is_testable() {
        "It meets the goal if you"
    } else {
        "It becomes testable if you"
    };
    format!("{head} {fix} {}.", fixes.join("; or "))
}

/// A warning of an unbalanced layout in words.
pub fn warning(w: &Warning) -> String {
    match w {
        Warning::Type3Short {
            term,
            kept,
            sequential_df,
        } => format!(
            "with type III sums of squares {term} keeps {kept} of its {sequential_df} df: part of its type III hypothesis concerns cells with no observation (an empty cell), so that part cannot be tested; sequential sums of squares (sums_of_squares = \"sequential\") give it {sequential_df}"
        ),
        Warning::LostDf {
            term,
            residual,
            full_layout_df,
            lost,
            sequential_df,
        } => {
            let mut w = format!(
                "the removals leave {term} with no df (it had {full_layout_df}): it has no mean square, so {}",
                if *residual {
                    "nothing can be tested over the residual".to_string()
                } else {
                    format!("{term} cannot be tested")
                }
            );
            if !lost.is_empty() {
                w.push_str(&format!(
                    ", and {} cannot be tested either, since {} variance is in {} expected mean square{}",
                    lost.join(", "),
                    if *residual { "the residual" } else { "its" },
                    if lost.len() == 1 { "its" } else { "their" },
                    if lost.len() == 1 { "" } else { "s" }
                ));
            }
            match sequential_df {
                Some(seq) => w.push_str(&format!(
                    "; with type III sums of squares its hypothesis concerns cells with no observation (an empty cell), while sequential sums of squares (sums_of_squares = \"sequential\") give it {seq} df"
                )),
                None => w.push_str("; keep more of those units, or remove fewer"),
            }
            w
        }
    }
}

/// Everything that needs attention, in words: pseudoreplication, the warnings, then
/// each term's finding.
pub fn findings(report: &CheckReport) -> Vec<String> {
    report
        .pseudoreplication()
        .iter()
        .map(pseudoreplication)
        .chain(report.warnings.iter().map(warning))
        .chain(report.needing_attention().map(|(t, x)| finding(t, x)))
        .collect()
}

/// The legend of the E(MS) notation, for a layout of factors or of units.
pub fn legend(report: &CheckReport) -> &'static str {
    if report.strata.is_some() {
        LEGEND_UNITS
    } else {
        LEGEND
    }
}

pub const LEGEND_UNITS: &str = "σ²(unit): the variance between units of that kind (the smallest unit's is the residual); σ²(term): the variance of a random term's effects; κ²(term): Σ effect² / df of a fixed term's effects.";

/// A treatment term tested over smaller units than it was randomised to, in words.
pub fn pseudoreplication(p: &Pseudoreplication) -> String {
    let over = if p.tested_over.is_empty() {
        "it has no test at all".to_string()
    } else {
        format!("its test over {} treats", and_list(&p.tested_over))
    };
    match &p.cause {
        PseudoCause::OneUnitPerLevel {
            count,
            within,
            fix_count,
        } => {
            let per = per_unit(within);
            let test = if p.tested_over.is_empty() {
                over
            } else {
                format!("{over} smaller units as if they were replicate {}s", p.unit)
            };
            format!(
                "{term} is pseudoreplicated (Hurlbert 1984): {term} was randomised to {unit}s, but there are {count} {unit}s {per}, one for each level, so differences between {unit}s cannot be told apart from the effect of {term}, and {test}. Replicate the {unit}: {fix_count} {unit}s {per} (two for each level) give {term} a test over {unit}s.",
                term = p.term,
                unit = p.unit,
            )
        }
        PseudoCause::UnitOmitted { unit_term } => {
            let test = if p.tested_over.is_empty() {
                over
            } else {
                format!("{over} smaller units as if they were replicate {}s", p.unit)
            };
            format!(
                "{term} is pseudoreplicated (Hurlbert 1984): {term} was randomised to {unit}s, but `omit` takes {unit} ({unit_term}) as absent, so {test}. Take {unit_term} out of `omit`.",
                term = p.term,
                unit = p.unit,
            )
        }
    }
}

/// Which terms get advice.
pub fn interest_note(report: &CheckReport) -> String {
    let interest: Vec<String> = report
        .terms
        .iter()
        .filter(|t| t.of_interest)
        .map(|t| t.label.clone())
        .collect();
    let others = report
        .terms
        .iter()
        .filter(|t| !t.of_interest && !t.residual)
        .count();
    if others == 0 {
        return format!("Terms of interest: all of them ({}).", and_list(&interest));
    }
    let nuisance_only = report
        .terms
        .iter()
        .all(|t| t.of_interest || t.residual || !is_treatment_term(report, t));
    if nuisance_only {
        format!(
            "Terms of interest: {}. The others (units, blocks, their interactions) are shown with their df and E(MS) but draw no advice; name the terms that matter in [layout] of_interest to change this.",
            and_list(&interest)
        )
    } else {
        format!(
            "Terms of interest ([layout] of_interest): {}. The other terms are shown with their df and E(MS) but draw no advice.",
            and_list(&interest)
        )
    }
}

/// Whether a term involves treatments only (no unit).
fn is_treatment_term(report: &CheckReport, t: &TermReport) -> bool {
    report.strata.as_ref().is_some_and(|st| {
        t.live
            .iter()
            .chain(&t.within)
            .all(|n| st.strata.iter().any(|u| u.carries.contains(n)))
    })
}

/// `in all` for a top unit, `per row and column` for one within others.
fn per_unit(within: &[String]) -> String {
    if within.is_empty() {
        "in all".to_string()
    } else {
        format!("per {}", within.join(" and "))
    }
}

/// The units and strata in words: one line per unit, largest first.
pub fn strata_lines(s: &Strata) -> Vec<String> {
    s.strata
        .iter()
        .map(|st| {
            let per = if st.within.is_empty() {
                format!("{} in all", st.count)
            } else {
                format!("{} {}, {} in all", st.count, per_unit(&st.within), st.total)
            };
            let what = if st.smallest && st.subsample {
                ", subsamples: the units measured"
            } else if st.smallest {
                ", the units measured"
            } else {
                ""
            };
            let carries = if st.carries.is_empty() {
                if st.within.len() >= 2 {
                    format!(
                        "the crossing of {}; no treatment is randomised to them",
                        and_list(&st.within)
                    )
                } else if st.subsample || st.smallest {
                    "no treatment is randomised to them".to_string()
                } else {
                    "no treatment is randomised to them (a block)".to_string()
                }
            } else {
                format!(
                    "{} {} randomised to them",
                    and_list(&st.carries),
                    if st.carries.len() == 1 { "is" } else { "are" }
                )
            };
            let same = st
                .same_as
                .as_ref()
                .map_or(String::new(), |x| format!(" (the {x} term)"));
            format!(
                "{}{same}: {per}{what}; {carries}. Estimated here ({} df): {}.",
                st.unit,
                st.df,
                st.terms.join(", ")
            )
        })
        .collect()
}

/// The additivity assumption and its risk, or what keeping the interactions costs.
pub fn additivity_note(s: &Strata) -> Option<String> {
    if s.additive && !s.pooled.is_empty() {
        let pooled: Vec<String> = s
            .pooled
            .iter()
            .map(|p| format!("{} into {}", p.term, p.into))
            .collect();
        Some(format!(
            "Assumed: units and treatments are additive (no unit x treatment interaction), so each such interaction is pooled into its stratum's error: {}. This is the textbook analysis; if treatments may act differently from unit to unit (varieties ranking differently from block to block), the pooled error is too small and the tests too liberal: set additive = false in [layout] to keep these interactions as random terms, at the cost of fewer denominator df.",
            and_list(&pooled)
        ))
    } else if !s.additive {
        Some("Units and treatments are not taken as additive (additive = false): the interactions of units with treatments are kept as random terms, the mixed-model analysis. Their tests have fewer denominator df than the textbook analysis, which pools them.".into())
    } else {
        None
    }
}

/// What the planning values leave out, in words.
pub fn planning_notes(g: &PlanningGaps) -> Vec<String> {
    if g.no_sd {
        return vec![
            "no [sd] table: power, minimum detectable effects and Satterthwaite df need planning standard deviations of the random terms and the residual".into(),
        ];
    }
    let mut notes = Vec::new();
    if !g.zero_sd.is_empty() {
        notes.push(format!(
            "taken as zero, having no [sd] value: {} (their variance adds nothing to any expected mean square, and their own tests get no power)",
            g.zero_sd.join(", ")
        ));
    }
    if !g.no_effect.is_empty() {
        notes.push(format!(
            "no [effect] given, so no power (the minimum detectable effect is still shown): {}",
            g.no_effect.join(", ")
        ));
    }
    notes
}

fn unit(u: &Unit) -> String {
    let mut words = format!("{} {}", u.factor, u.level);
    if !u.within.is_empty() {
        let nests: Vec<String> = u.within.iter().map(|(f, l)| format!("{f} {l}")).collect();
        words.push_str(&format!(" within {}", nests.join(", ")));
    }
    words
}

/// The notes of an unbalanced layout: the model, the method, and what the removals do.
pub fn unbalanced_notes(u: &Summary) -> Vec<String> {
    let mut notes = vec![
        "unrestricted model: random effects, interactions with fixed factors included, are independent with no sum-to-zero constraint (the restricted model is not defined for unbalanced layouts)".to_string(),
        match u.sums_of_squares {
            SumsOfSquares::Sequential => "sequential (type I) sums of squares, each term adjusted for the terms fitted before it (the fit order above: fixed terms first, so the random terms' mean squares hold no fixed effect); expected mean squares by Hartley's (1967) method of synthesis".to_string(),
            SumsOfSquares::Type3 => "type III sums of squares, each term adjusted for every other term in sum-to-zero coding; expected mean squares by Hartley's (1967) method of synthesis".to_string(),
        },
        "κ² coefficients are averages over effect patterns of the planned size (in an unbalanced layout a fixed term's mean square depends on the pattern, not only on its size); in unbalanced layouts the mean squares are not scaled chi-squares in general, so F ratios, Satterthwaite df and power are approximations".to_string(),
    ];
    if !u.emptied_units.is_empty() {
        let shown: Vec<String> = u.emptied_units.iter().take(6).map(unit).collect();
        let more = if u.emptied_units.len() > 6 {
            format!(" and {} more", u.emptied_units.len() - 6)
        } else {
            String::new()
        };
        notes.push(format!(
            "no observation is left of {}{more}: such units count as not sampled",
            shown.join("; ")
        ));
    }
    for e in &u.empty_cells {
        let mut note = format!(
            "{} has {} of its {} cells empty: its test is of the interaction in the cells that remain",
            e.term, e.empty, e.cells
        );
        if u.sums_of_squares == SumsOfSquares::Type3 {
            note.push_str(
                "; with empty cells, type III hypotheses depend on how the effects are coded (here sum-to-zero contrasts over every level), so sequential sums of squares are the plainer choice",
            );
        }
        notes.push(note);
    }
    for c in &u.carried {
        let others: Vec<String> = c
            .components
            .iter()
            .map(|(short, x)| {
                format!(
                    "κ²({short}) ({})",
                    coefficient(&Coefficient::Approximate(*x))
                )
            })
            .collect();
        notes.push(format!(
            "E(MS) of {} also carries {}: with sequential sums of squares it is adjusted only for the terms fitted before it, so its test is not of its own effects alone; sums_of_squares = \"type3\" tests each fixed term adjusted for the others",
            c.term,
            and_list(&others)
        ));
    }
    notes
}

/// The one-line summary of an unbalanced layout.
pub fn unbalanced_line(u: &Summary) -> String {
    let what = match u.sums_of_squares {
        SumsOfSquares::Sequential => format!(
            "sequential sums of squares, fitted in the order {}",
            u.fit_order.join(", ")
        ),
        SumsOfSquares::Type3 => "type III sums of squares".to_string(),
    };
    format!(
        "Unbalanced: {} of the full layout's {} observations removed ({}); {what}.",
        u.removed_observations,
        u.full_observations,
        u.removals.join("; ")
    )
}
