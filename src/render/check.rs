//! Rendering of `check` results.

use super::words::{self, CAUTION, ems as ems_text, tested_over};
use super::{Format, Page, Width, csv_table, json, markdown_table, num};
use crate::errorterm::Verdict;
use crate::findings::{BothReport, CheckReport, TermReport, TestReport};

fn den_df(test: &TestReport) -> String {
    match test.denominator_df {
        Some(df) => num(df),
        None if test.verdict == Verdict::QuasiF => "needs [sd]".into(),
        None => "-".into(),
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

fn header(report: &CheckReport) -> &'static [&'static str] {
    if report.planned() {
        &PLAN_HEADER
    } else {
        &HEADER
    }
}

fn opt(x: Option<f64>) -> String {
    x.map_or("-".into(), |v| format!("{v:.3}"))
}

fn rows(report: &CheckReport) -> Vec<Vec<String>> {
    let with_plan = report.planned();
    report
        .terms
        .iter()
        .map(|t| {
            let (over, ddf, verdict) = match &t.test {
                Some(test) => (
                    tested_over(test),
                    den_df(test),
                    words::verdict(test.verdict).to_string(),
                ),
                None => ("-".into(), "-".into(), "-".into()),
            };
            let mut row = vec![
                t.label.clone(),
                words::kind(t.kind).into(),
                t.df.to_string(),
                ems_text(t),
                over,
                ddf,
                verdict,
            ];
            if with_plan {
                row.push(opt(t.test.as_ref().and_then(|x| x.power)));
                row.push(
                    t.test
                        .as_ref()
                        .and_then(|x| x.min_detectable)
                        .map_or("-".into(), num),
                );
            }
            row
        })
        .collect()
}

const CSV_HEADER: [&str; 9] = [
    "term",
    "kind",
    "df",
    "expected_mean_square",
    "tested_over",
    "denominator_df",
    "verdict",
    "power",
    "min_detectable",
];

/// A number at full precision for CSV; an empty field when missing.
fn full(x: Option<f64>) -> String {
    x.filter(|v| v.is_finite())
        .map_or(String::new(), |v| v.to_string())
}

/// Tidy rows: one per term, codes for verdicts, full-precision numbers, empty fields.
fn csv_rows(report: &CheckReport) -> Vec<Vec<String>> {
    report
        .terms
        .iter()
        .map(|t| {
            let test = t.test.as_ref();
            vec![
                t.label.clone(),
                words::kind(t.kind).into(),
                t.df.to_string(),
                ems_text(t),
                test.filter(|x| x.verdict.is_testable())
                    .map_or(String::new(), tested_over),
                full(test.and_then(|x| x.denominator_df)),
                test.map_or(String::new(), |x| code(x.verdict).to_string()),
                full(test.and_then(|x| x.power)),
                full(test.and_then(|x| x.min_detectable)),
            ]
        })
        .collect()
}

/// A verdict as the JSON spells it, for machine-read formats.
pub fn code(v: Verdict) -> &'static str {
    match v {
        Verdict::Exact => "exact",
        Verdict::QuasiF => "quasi_f",
        Verdict::Untestable => "untestable",
        Verdict::NotEstimable => "not_estimable",
    }
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
            line.label,
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

/// The check in words: the table, the legend, the unbalanced notes, the planning notes,
/// the cost, the caution and what needs attention, laid out for `page`.
fn write(report: &CheckReport, page: Page) -> String {
    let mut out = match page {
        Page::Markdown => format!(
            "## {}\n\n{} convention, {} observations.\n\n",
            title(report),
            report.convention.name(),
            report.observations
        ),
        Page::Text(_) => {
            page.paragraph(&format!(
                "{}: {} convention, {} observations",
                title(report),
                report.convention.name(),
                report.observations
            )) + "\n"
        }
    };
    out.push_str(&page.table(header(report), rows(report)));
    out.push('\n');
    out.push_str(&page.paragraph(words::legend(report)));
    if let Some(u) = &report.unbalanced {
        out.push('\n');
        out.push_str(&page.paragraph(&words::unbalanced_line(u)));
        for n in words::unbalanced_notes(u) {
            out.push_str(&page.item(&n));
        }
    }
    if report.planned() {
        out.push('\n');
        out.push_str(&page.paragraph(&format!(
            "Power at alpha = {}. min. effect: the smallest effect found with power {} (fixed terms: root mean square of effects; random terms: standard deviation), in the response's units.",
            report.alpha, report.target_power
        )));
    }
    for n in words::planning_notes(&report.planning_gaps) {
        out.push_str(&page.item(&n));
    }
    if let Some(c) = cost_text(report) {
        out.push('\n');
        out.push_str(&page.paragraph(&c));
    }
    if let Some(st) = &report.strata {
        out.push_str(&page.heading("Units and strata, largest first"));
        for line in words::strata_lines(st) {
            out.push_str(&page.item(&line));
        }
        if let Some(note) = words::additivity_note(st) {
            out.push('\n');
            out.push_str(&page.paragraph(&note));
        }
        out.push('\n');
        out.push_str(&page.paragraph(&words::interest_note(report)));
    }
    if report.planned() {
        out.push('\n');
        out.push_str(&page.paragraph(CAUTION));
    }
    let findings = words::findings(report);
    if findings.is_empty() {
        if let Page::Text(_) = page {
            out.push('\n');
            out.push_str(&page.paragraph(if report.strata.is_some() {
                "Every term of interest has an exact F test within its own stratum."
            } else {
                "Every term with df has an exact F test."
            }));
        }
    } else {
        out.push_str(&page.heading("What needs attention, and why"));
        for f in &findings {
            out.push_str(&page.item(f));
        }
    }
    out
}

pub fn render(report: &CheckReport, format: Format, width: Width) -> String {
    match format {
        Format::Json => json(report),
        Format::Csv => csv_table(&CSV_HEADER, csv_rows(report)),
        Format::Markdown => write(report, Page::Markdown),
        Format::Text => write(report, Page::Text(width)),
    }
}

fn title(report: &CheckReport) -> String {
    if report.name.is_empty() {
        "Layout".into()
    } else {
        report.name.clone()
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
    "same test",
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
                    "differs".into()
                } else {
                    "same".into()
                },
            ]
        })
        .collect()
}

pub fn render_both(b: &BothReport, format: Format, width: Width) -> String {
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
        Format::Csv => csv_table(
            &[
                "term",
                "df",
                "expected_mean_square_restricted",
                "tested_over_restricted",
                "expected_mean_square_unrestricted",
                "tested_over_unrestricted",
                "same_test",
            ],
            both_rows(b)
                .into_iter()
                .zip(&b.restricted.terms)
                .map(|(mut row, t)| {
                    row[6] = if t.residual {
                        String::new()
                    } else {
                        (!b.differ.contains(&t.label)).to_string()
                    };
                    row
                })
                .collect(),
        ),
        Format::Markdown => format!(
            "## {}: both conventions\n\n{}\n{summary}\n",
            title(&b.restricted),
            markdown_table(header, rows())
        ),
        Format::Text => {
            let page = Page::Text(width);
            format!(
                "{}\n{}\n{}{}",
                page.paragraph(&format!(
                    "{}: both conventions, {} observations",
                    title(&b.restricted),
                    b.restricted.observations
                )),
                page.table(header, rows()),
                page.paragraph(words::legend(&b.restricted)),
                page.paragraph(&summary)
            )
        }
    }
}
