//! Rendering of `check` results.

use serde::Serialize;

use super::{Format, csv_table, json, markdown_table, num, text_table};
use crate::check::denominator_words;
use crate::check::{CheckReport, TermReport, TestReport};
use crate::errorterm::Verdict;
use crate::layout::Kind;

/// E(MS) in the trade's notation: `σ² + 6σ²(bench) + 24κ²(light)`.
pub fn ems_text(term: &TermReport) -> String {
    term.ems
        .iter()
        .map(|c| {
            if c.coefficient.is_one() {
                c.symbol.clone()
            } else {
                format!("{}{}", c.coefficient.text(), c.symbol)
            }
        })
        .collect::<Vec<_>>()
        .join(" + ")
}

/// What a term is tested over: a term label, a combination of mean squares, or a dash.
pub fn tested_over(test: &TestReport) -> String {
    match test.verdict {
        Verdict::Exact => test.denominator[0].term.clone(),
        Verdict::Synthetic => {
            let parts: Vec<(String, crate::check::Coefficient)> = test
                .denominator
                .iter()
                .map(|d| (d.term.clone(), d.coefficient))
                .collect();
            denominator_words(&parts)
        }
        Verdict::Untestable | Verdict::NotEstimable => "none".into(),
    }
}

fn den_df(test: &TestReport) -> String {
    match test.denominator_df {
        Some(df) => num(df),
        None if test.verdict == Verdict::Synthetic => "needs [sd]".into(),
        None => "-".into(),
    }
}

fn kind(k: Kind) -> &'static str {
    match k {
        Kind::Fixed => "fixed",
        Kind::Random => "random",
    }
}

const HEADER: [&str; 7] = [
    "term",
    "kind",
    "df",
    "expected mean square",
    "tested over",
    "den. df",
    "verdict",
];

const PLAN_HEADER: [&str; 9] = [
    "term",
    "kind",
    "df",
    "expected mean square",
    "tested over",
    "den. df",
    "verdict",
    "power",
    "min. effect",
];

/// Whether the report carries power figures (the layout had planning values).
fn planned(report: &CheckReport) -> bool {
    report.terms.iter().any(|t| {
        t.test
            .as_ref()
            .is_some_and(|x| x.min_detectable.is_some() || x.power.is_some())
    })
}

fn header(report: &CheckReport) -> &'static [&'static str] {
    if planned(report) {
        &PLAN_HEADER
    } else {
        &HEADER
    }
}

fn opt(x: Option<f64>) -> String {
    x.map_or("-".into(), |v| format!("{v:.3}"))
}

fn rows(report: &CheckReport) -> Vec<Vec<String>> {
    let with_plan = planned(report);
    report
        .terms
        .iter()
        .map(|t| {
            let (over, ddf, verdict) = match &t.test {
                Some(test) => (
                    tested_over(test),
                    den_df(test),
                    test.verdict.name().to_string(),
                ),
                None => ("-".into(), "-".into(), "-".into()),
            };
            let mut row = vec![
                t.label.clone(),
                kind(t.kind).into(),
                t.df.to_string(),
                ems_text(t),
                over,
                ddf,
                verdict,
            ];
            if with_plan {
                row.push(opt(t.test.as_ref().and_then(|x| x.power)));
                row.push(opt(t.test.as_ref().and_then(|x| x.min_detectable)));
            }
            row
        })
        .collect()
}

/// The cost breakdown, one line per priced term.
fn cost_text(report: &CheckReport) -> Option<String> {
    let cost = report.cost.as_ref()?;
    let mut out = format!("Cost: {} in all", num(cost.total));
    let mut parts: Vec<String> = Vec::new();
    if cost.overhead > 0.0 {
        parts.push(format!("overhead {}", num(cost.overhead)));
    }
    for line in &cost.breakdown {
        parts.push(format!(
            "{} {} x {} = {}",
            line.term,
            line.units,
            num(line.per_unit),
            num(line.cost)
        ));
    }
    if !parts.is_empty() {
        out.push_str(&format!(" ({})", parts.join("; ")));
    }
    out.push('.');
    Some(out)
}

/// The caution that goes wherever users decide on power.
pub const CAUTION: &str = "Power and minimum detectable effects rest on the planning values, which are guesses: they are only as good as those guesses. Have a statistician review designs that carry real cost or risk.";

fn planning_text(report: &CheckReport, bullet: &str) -> String {
    let mut out = String::new();
    if planned(report) {
        out.push_str(&format!(
            "\nPower at alpha = {}. min. effect: the smallest effect found with power {} (fixed terms: root mean square of effects; random terms: standard deviation), in the response's units.\n",
            report.alpha, report.target_power
        ));
    }
    for n in &report.planning_notes {
        out.push_str(&format!("{bullet}{n}\n"));
    }
    if let Some(c) = cost_text(report) {
        out.push_str(&format!("\n{c}\n"));
    }
    if planned(report) {
        out.push_str(&format!("\n{CAUTION}\n"));
    }
    out
}

/// What an unbalanced layout adds: what was removed, which sums of squares, the notes.
fn unbalanced_text(report: &CheckReport, bullet: &str) -> String {
    let Some(u) = &report.unbalanced else {
        return String::new();
    };
    let what = match u.sums_of_squares {
        crate::layout::SumsOfSquares::Sequential => format!(
            "sequential sums of squares, fitted in the order {}",
            u.fit_order.join(", ")
        ),
        crate::layout::SumsOfSquares::Type3 => "type III sums of squares".to_string(),
    };
    let mut out = format!(
        "\nUnbalanced: {} of the full layout's {} observations removed ({}); {what}.\n",
        u.removed_observations,
        u.full_observations,
        u.removals.join("; ")
    );
    for n in &u.notes {
        out.push_str(&format!("{bullet}{n}\n"));
    }
    out
}

pub fn render(report: &CheckReport, format: Format) -> String {
    match format {
        Format::Json => json(report),
        Format::Csv => csv_table(header(report), rows(report)),
        Format::Markdown => {
            let mut out = format!(
                "## {}\n\n{} convention, {} observations.\n\n",
                title(report),
                report.convention.name(),
                report.observations
            );
            out.push_str(&markdown_table(header(report), rows(report)));
            out.push_str(&unbalanced_text(report, "- "));
            out.push_str(&planning_text(report, "- "));
            if !report.findings.is_empty() {
                out.push_str("\n### What needs attention\n\n");
                for f in &report.findings {
                    out.push_str(&format!("- {f}\n"));
                }
            }
            out
        }
        Format::Text => {
            let mut out = format!(
                "{}: {} convention, {} observations\n\n",
                title(report),
                report.convention.name(),
                report.observations
            );
            out.push_str(&text_table(header(report), rows(report)));
            out.push_str(&unbalanced_text(report, "  note: "));
            out.push_str(&planning_text(report, "  note: "));
            if report.findings.is_empty() {
                out.push_str("\nEvery term with df has an exact F test.\n");
            } else {
                out.push_str("\nWhat needs attention, and why:\n");
                for f in &report.findings {
                    out.push_str(&format!("  - {f}\n"));
                }
            }
            out
        }
    }
}

fn title(report: &CheckReport) -> String {
    if report.name.is_empty() {
        "Layout".into()
    } else {
        report.name.clone()
    }
}

/// Both conventions side by side.
#[derive(Debug, Serialize)]
pub struct BothReport {
    pub restricted: CheckReport,
    pub unrestricted: CheckReport,
    /// Terms whose error term differs between the conventions.
    pub differ: Vec<String>,
}

impl BothReport {
    pub fn new(restricted: CheckReport, unrestricted: CheckReport) -> Self {
        let differ = restricted
            .terms
            .iter()
            .zip(&unrestricted.terms)
            .filter(|(r, u)| over(r) != over(u))
            .map(|(r, _)| r.label.clone())
            .collect();
        BothReport {
            restricted,
            unrestricted,
            differ,
        }
    }
}

fn over(t: &TermReport) -> String {
    t.test.as_ref().map(tested_over).unwrap_or_default()
}

const BOTH_HEADER: [&str; 7] = [
    "term",
    "df",
    "E(MS), restricted",
    "tested over (restricted)",
    "E(MS), unrestricted",
    "tested over (unrestricted)",
    "same test?",
];

fn both_rows(b: &BothReport) -> Vec<Vec<String>> {
    b.restricted
        .terms
        .iter()
        .zip(&b.unrestricted.terms)
        .map(|(r, u)| {
            let differs = b.differ.contains(&r.label);
            vec![
                r.label.clone(),
                r.df.to_string(),
                ems_text(r),
                over(r),
                ems_text(u),
                over(u),
                if r.residual {
                    "-".into()
                } else if differs {
                    "DIFFERS".into()
                } else {
                    "same".into()
                },
            ]
        })
        .collect()
}

pub fn render_both(b: &BothReport, format: Format) -> String {
    let header = &BOTH_HEADER;
    let rows = || both_rows(b);
    let summary = if b.differ.is_empty() {
        "Every term is tested over the same error term under both conventions.".to_string()
    } else {
        format!(
            "The error term depends on the convention for: {}. State the convention you used when you report these tests.",
            b.differ.join(", ")
        )
    };
    match format {
        Format::Json => json(b),
        Format::Csv => csv_table(header, rows()),
        Format::Markdown => format!(
            "## {}: both conventions\n\n{}\n{summary}\n",
            title(&b.restricted),
            markdown_table(header, rows())
        ),
        Format::Text => format!(
            "{}: both conventions, {} observations\n\n{}\n{summary}\n",
            title(&b.restricted),
            b.restricted.observations,
            text_table(header, rows())
        ),
    }
}
