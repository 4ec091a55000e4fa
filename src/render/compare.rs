//! Rendering of `compare` results.

use super::words::CAUTION;
use super::{Format, Page, Width, csv_table, json, num};
use crate::compare::{Comparison, EditNote, SideTest, Status, TermComparison};

/// A note of the comparison in words.
pub fn edit_note(n: &EditNote) -> String {
    match n {
        EditNote::PlanningValuesGone { factor, terms } => format!(
            "without {factor}, these planning values no longer apply: {}",
            terms.join(", ")
        ),
        EditNote::MustTestGone { factor, term } => {
            format!("the must-test term {term} goes with {factor}")
        }
        EditNote::UnrestrictedAfterRemoval => "with cells removed the layout is unbalanced, and the restricted convention is not defined there: the unrestricted model is used".into(),
        EditNote::NowFixed { term } => format!(
            "{term} is now fixed: its planning SD no longer applies (give an effect with --set effect.{term}=...)"
        ),
        EditNote::NowRandom { term } => format!(
            "{term} is now random: its effect no longer applies (give a standard deviation with --set sd.{term}=...)"
        ),
        EditNote::Pseudoreplication { unit, treatments } => format!(
            "{} {} applied to whole {unit}s; without the {unit} layer {} tested over smaller units, as if each were an independent {unit}: that is pseudoreplication (Hurlbert 1984), and the test is valid only if {} truly randomised to each smaller unit on its own",
            super::and_list(treatments),
            if treatments.len() == 1 { "is" } else { "are" },
            if treatments.len() == 1 { "it is" } else { "they are" },
            if treatments.len() == 1 { "it is" } else { "they are" },
        ),
        EditNote::AlreadyPooled { term } => format!(
            "{term} is already pooled into its stratum's error, since units and treatments are taken as additive; omitting it changes nothing"
        ),
        EditNote::BothUnrestricted => "one side is unbalanced, so both sides are computed under the unrestricted model (the restricted model is not defined for unbalanced layouts)".into(),
    }
}

/// What a side's term is tested over, in words.
fn over(t: &SideTest) -> String {
    if t.denominator.is_empty() {
        "none".into()
    } else {
        super::words::denominator(&t.denominator)
    }
}

const HEADER: [&str; 9] = [
    "term",
    "base: tested over",
    "den. df",
    "power",
    "other: tested over",
    "den. df",
    "power",
    "status",
    "error term",
];

fn opt(x: Option<f64>) -> String {
    x.map_or("-".into(), |v| format!("{v:.2}"))
}

fn side(t: &Option<SideTest>) -> [String; 3] {
    match t {
        None => ["(absent)".into(), "-".into(), "-".into()],
        Some(t) => [
            match t.verdict {
                None => "-".into(),
                Some(v) if v.is_testable() => over(t),
                Some(v) => super::words::verdict(v).to_string(),
            },
            t.denominator_df.map_or("-".into(), num),
            opt(t.power),
        ],
    }
}

/// Status in words, loud where testability changes, so it reads without colour.
fn status(s: Status) -> &'static str {
    match s {
        Status::Same => "same",
        Status::Weaker => "weaker",
        Status::Stronger => "stronger",
        Status::Lost => "lost its test",
        Status::Gained => "gained a test",
        Status::Pseudoreplicated => "pseudoreplicated",
    }
}

fn rows(c: &Comparison) -> Vec<Vec<String>> {
    c.terms
        .iter()
        .filter(|t| !t.residual)
        .map(|t| {
            let [bo, bd, bp] = side(&t.base);
            let [oo, od, op] = side(&t.other);
            let changed = t.error_term_changed && t.base.is_some() && t.other.is_some();
            vec![
                t.label.clone(),
                bo,
                bd,
                bp,
                oo,
                od,
                op,
                status(t.status).into(),
                if changed {
                    "changes".into()
                } else {
                    String::new()
                },
            ]
        })
        .collect()
}

fn cost_line(c: &Comparison) -> Option<String> {
    let (b, o, d) = (c.cost.base?, c.cost.other?, c.cost.difference?);
    Some(format!(
        "Cost: base {}, other {} ({}{}).",
        num(b),
        num(o),
        if d >= 0.0 { "+" } else { "" },
        num(d)
    ))
}

pub fn render(c: &Comparison, format: Format, width: Width) -> String {
    match format {
        Format::Json => json(c),
        Format::Csv => csv_table(&CSV_HEADER, csv_rows(c)),
        Format::Markdown => write(c, Page::Markdown),
        Format::Text => write(c, Page::Text(width)),
    }
}

const CSV_HEADER: [&str; 10] = [
    "term",
    "base_tested_over",
    "base_denominator_df",
    "base_power",
    "other_tested_over",
    "other_denominator_df",
    "other_power",
    "status",
    "error_term_changed",
    "must_test",
];

/// Tidy rows: one per term, full-precision numbers, empty fields where a value is missing.
fn csv_rows(c: &Comparison) -> Vec<Vec<String>> {
    let full = |x: Option<f64>| {
        x.filter(|v| v.is_finite())
            .map_or(String::new(), |v| v.to_string())
    };
    let side = |t: &Option<SideTest>| -> [String; 3] {
        match t {
            None => [String::new(), String::new(), String::new()],
            Some(t) => [
                if t.denominator.is_empty() {
                    String::new()
                } else {
                    over(t)
                },
                full(t.denominator_df),
                full(t.power),
            ],
        }
    };
    c.terms
        .iter()
        .filter(|t| !t.residual)
        .map(|t| {
            let [bo, bd, bp] = side(&t.base);
            let [oo, od, op] = side(&t.other);
            let status = serde_json::to_value(t.status)
                .ok()
                .and_then(|v| v.as_str().map(str::to_string))
                .unwrap_or_default();
            vec![
                t.label.clone(),
                bo,
                bd,
                bp,
                oo,
                od,
                op,
                status,
                t.error_term_changed.to_string(),
                t.must_test.to_string(),
            ]
        })
        .collect()
}

/// The comparison in words, laid out for `page`.
fn write(c: &Comparison, page: Page) -> String {
    let mut out = String::new();
    let title = format!(
        "{} compared with {}",
        name(&c.base.name, "base"),
        if c.changes.is_empty() {
            name(&c.other.name, "the other layout")
        } else {
            c.changes.join(", ")
        }
    );
    out.push_str(&match page {
        Page::Markdown => format!("## {title}\n\n"),
        Page::Text(_) => page.paragraph(&title) + "\n",
    });
    out.push_str(&page.table(&HEADER, rows(c)));
    out.push('\n');
    for n in c.notes.iter().map(edit_note) {
        out.push_str(&page.item(&n));
    }
    let base_notes = super::words::planning_notes(&c.base.planning_gaps);
    for n in super::words::planning_notes(&c.other.planning_gaps) {
        if !base_notes.contains(&n) {
            out.push_str(&page.item(&format!("other layout: {n}")));
        }
    }
    if let Some(line) = cost_line(c) {
        out.push_str(&page.paragraph(&line));
    }
    out.push('\n');
    out.push_str(&page.paragraph(&verdict_text(c)));
    let findings = super::words::findings(&c.other);
    if !findings.is_empty() {
        out.push_str(&page.heading("What needs attention in the other layout"));
        for f in &findings {
            out.push_str(&page.item(f));
        }
    }
    out.push('\n');
    out.push_str(&page.paragraph(CAUTION));
    out
}

fn name(n: &str, fallback: &str) -> String {
    if n.is_empty() {
        fallback.to_string()
    } else {
        n.to_string()
    }
}

fn df_text(x: Option<f64>) -> String {
    x.map_or("unknown".into(), num)
}

/// The one-paragraph verdict: what the change costs or saves, what stays testable, and
/// what gets weaker or stronger among the terms the goal covers.
pub fn verdict_text(c: &Comparison) -> String {
    let (changes, terms, cost) = (&c.changes, &c.terms, &c.cost);
    let what = if changes.is_empty() {
        "The other layout".to_string()
    } else {
        format!("The change ({})", changes.join(", "))
    };
    let money = match cost.difference {
        Some(d) if d < 0.0 => format!("saves {}", num(-d)),
        Some(d) if d > 0.0 => format!("costs {} more", num(d)),
        Some(_) => "costs the same".into(),
        None => "has no price (no [cost] table)".into(),
    };
    let focus: Vec<&TermComparison> = terms.iter().filter(|t| t.must_test).collect();
    let testable = crate::compare::testable;
    let lost: Vec<&str> = focus
        .iter()
        .filter(|t| t.status == Status::Lost)
        .map(|t| t.label.as_str())
        .collect();
    let gained: Vec<&str> = focus
        .iter()
        .filter(|t| t.status == Status::Gained)
        .map(|t| t.label.as_str())
        .collect();
    let all_testable = focus.iter().all(|t| testable(&t.other));
    let pseudo: Vec<&str> = focus
        .iter()
        .filter(|t| t.status == Status::Pseudoreplicated)
        .map(|t| t.label.as_str())
        .collect();
    // Every drawback goes in one "but" clause.
    let mut but: Vec<String> = Vec::new();
    let mut sentence = format!("{what} {money}");
    if !pseudo.is_empty() {
        but.push(format!(
            "{} would be tested over smaller units than {} applied to (pseudoreplication), so {} not valid",
            super::and_list(&pseudo.iter().map(|x| x.to_string()).collect::<Vec<_>>()),
            if pseudo.len() == 1 { "it is" } else { "they are" },
            if pseudo.len() == 1 { "that test is" } else { "those tests are" },
        ));
    }
    if !lost.is_empty() {
        but.push(format!("{} can no longer be tested", lost.join(", ")));
    } else if pseudo.is_empty() {
        if all_testable {
            sentence.push_str(" and keeps every term that matters testable");
        } else {
            sentence.push_str(" and loses no test");
        }
    }
    if !gained.is_empty() {
        sentence.push_str(&format!("; {} becomes testable", gained.join(", ")));
    }
    let change_of = |t: &TermComparison| -> Option<String> {
        let (b, o) = (t.base.as_ref()?, t.other.as_ref()?);
        let mut parts = Vec::new();
        if b.denominator_df != o.denominator_df {
            parts.push(format!(
                "denominator df from {} to {}",
                df_text(b.denominator_df),
                df_text(o.denominator_df)
            ));
        }
        if let (Some(x), Some(y)) = (b.power, o.power)
            && (x - y).abs() > 0.005
        {
            parts.push(format!("power from {x:.2} to {y:.2}"));
        }
        if t.error_term_changed {
            parts.push(format!("error term {} instead of {}", over(o), over(b)));
        }
        (!parts.is_empty()).then(|| parts.join(", "))
    };
    let weaker: Vec<String> = focus
        .iter()
        .filter(|t| t.status == Status::Weaker)
        .filter_map(|t| change_of(t).map(|c| format!("the {} test gets weaker ({c})", t.label)))
        .collect();
    let stronger: Vec<String> = focus
        .iter()
        .filter(|t| t.status == Status::Stronger)
        .filter_map(|t| change_of(t).map(|c| format!("the {} test gets stronger ({c})", t.label)))
        .collect();
    let moved: Vec<String> = focus
        .iter()
        .filter(|t| {
            t.status == Status::Same
                && t.error_term_changed
                && testable(&t.base)
                && testable(&t.other)
        })
        .filter_map(|t| {
            let (b, o) = (t.base.as_ref()?, t.other.as_ref()?);
            Some(format!(
                "{} is tested over {} instead of {}",
                t.label,
                over(o),
                over(b)
            ))
        })
        .collect();
    but.extend(weaker);
    if !but.is_empty() {
        sentence.push_str(&format!(", but {}", but.join("; ")));
    }
    if !stronger.is_empty() {
        let joiner = if but.is_empty() { ", and " } else { "; " };
        sentence.push_str(&format!("{joiner}{}", stronger.join("; ")));
    }
    if !moved.is_empty() {
        sentence.push_str(&format!("; {}", moved.join("; ")));
    }
    sentence.push('.');
    sentence
}
