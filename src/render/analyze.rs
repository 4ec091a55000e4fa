//! Rendering of `analyze` results.

use super::text::{number, p_value, same_decimals};
use super::{
    Format, Page, Width, and_list, combination, count, csv_table, json, p_equals, sentence,
};
use crate::analyze::{AnalyzeReport, AnovaRow, MeansTable};
use crate::errorterm::Verdict;
use crate::layout::{Kind, SumsOfSquares};

/// The caution that goes with an analysis people will act on.
pub const ANALYSIS_CAUTION: &str = "The tests take the layout's error terms as given: they are right only if the layout file describes how the experiment was really run (what was randomised to what, what is nested in what). Have a statistician review conclusions that carry real cost or risk.";

/// What the "tested over" cell says when the error term is listed under the table.
const SYNTHETIC_CELL: &str = "combined (below)";

fn opt(x: Option<f64>, f: fn(f64) -> String) -> String {
    x.map_or("-".into(), f)
}

/// The error term in a table cell: a mean square's term, or for a synthetic test a
/// pointer to the list of combinations under the table.
fn over_cell(row: &AnovaRow) -> String {
    match &row.test {
        None => "-".into(),
        Some(t) => match t.verdict {
            Verdict::Exact => t.denominator[0].term.clone(),
            Verdict::QuasiF => SYNTHETIC_CELL.into(),
            Verdict::Untestable => "no error term".into(),
            Verdict::NotEstimable => "none (0 df)".into(),
        },
    }
}

/// The error term written out in full, for CSV: empty when there is none.
fn over_full(row: &AnovaRow) -> String {
    match &row.test {
        Some(t) if t.verdict.is_testable() => combination(&t.denominator),
        _ => String::new(),
    }
}

const HEADER: [&str; 8] = [
    "term",
    "df",
    "sum of squares",
    "mean square",
    "tested over",
    "F",
    "den. df",
    "p",
];

fn rows(r: &AnalyzeReport) -> Vec<Vec<String>> {
    r.terms
        .iter()
        .map(|row| {
            let t = row.test.as_ref();
            vec![
                row.label.clone(),
                row.df.to_string(),
                number(row.ss),
                opt(row.ms, number),
                over_cell(row),
                opt(t.and_then(|t| t.f), number),
                opt(t.and_then(|t| t.denominator_df), number),
                opt(t.and_then(|t| t.p), p_value),
            ]
        })
        .collect()
}

const CSV_HEADER: [&str; 12] = [
    "term",
    "kind",
    "df",
    "sum_of_squares",
    "mean_square",
    "tested_over",
    "verdict",
    "denominator_ms",
    "f",
    "denominator_df",
    "p",
    "variance_component",
];

/// A number for CSV: the shortest text that reads back as the same f64; empty when
/// missing or not finite.
fn plain(x: Option<f64>) -> String {
    x.filter(|v| v.is_finite())
        .map_or(String::new(), |v| v.to_string())
}

/// One row per term of the analysis of variance.
fn csv_rows(r: &AnalyzeReport) -> Vec<Vec<String>> {
    r.terms
        .iter()
        .map(|row| {
            let t = row.test.as_ref();
            let component = r
                .components
                .iter()
                .find(|c| c.term == row.label)
                .and_then(|c| c.estimate);
            vec![
                row.label.clone(),
                kind(row.kind).into(),
                row.df.to_string(),
                plain(Some(row.ss)),
                plain(row.ms),
                over_full(row),
                t.map_or(String::new(), |t| super::check::code(t.verdict).into()),
                plain(t.and_then(|t| t.denominator_ms)),
                plain(t.and_then(|t| t.f)),
                plain(t.and_then(|t| t.denominator_df)),
                plain(t.and_then(|t| t.p)),
                plain(component),
            ]
        })
        .collect()
}

fn kind(k: Kind) -> &'static str {
    match k {
        Kind::Fixed => "fixed",
        Kind::Random => "random",
    }
}

const COMPONENT_HEADER: [&str; 5] = ["component", "term", "estimate", "sd", "note"];

fn component_rows(r: &AnalyzeReport) -> Vec<Vec<String>> {
    r.components
        .iter()
        .map(|c| {
            vec![
                super::words::symbol(crate::layout::Kind::Random, c.residual, &c.short_label),
                c.term.clone(),
                opt(c.estimate, number),
                opt(c.sd, number),
                if c.negative {
                    "negative (see below)".into()
                } else if c.estimate.is_none() {
                    "not estimable".into()
                } else {
                    String::new()
                },
            ]
        })
        .collect()
}

fn title(r: &AnalyzeReport) -> String {
    if r.name.is_empty() {
        "Layout".into()
    } else {
        r.name.clone()
    }
}

/// What the tests found, in two sentences: the terms significant at alpha, and those
/// that are not.
fn findings(r: &AnalyzeReport) -> Option<String> {
    let tested: Vec<(&AnovaRow, f64)> = r
        .terms
        .iter()
        .filter_map(|row| Some((row, row.test.as_ref()?.p?)))
        .collect();
    if tested.is_empty() {
        return None;
    }
    let words = |rows: Vec<&(&AnovaRow, f64)>| -> String {
        and_list(
            &rows
                .iter()
                .map(|(row, p)| format!("{} ({})", row.label, p_equals(*p)))
                .collect::<Vec<_>>(),
        )
    };
    let (significant, not): (Vec<_>, Vec<_>) = tested.iter().partition(|(_, p)| *p <= r.alpha);
    let mut parts = Vec::new();
    if !significant.is_empty() {
        parts.push(format!(
            "Significant at alpha = {}: {}.",
            r.alpha,
            words(significant)
        ));
    }
    if !not.is_empty() {
        parts.push(format!(
            "Not significant at alpha = {}: {}.",
            r.alpha,
            words(not)
        ));
    }
    Some(parts.join(" "))
}

/// The synthetic error terms, one item per term.
fn synthetic_items(r: &AnalyzeReport) -> Vec<String> {
    r.terms
        .iter()
        .filter_map(|row| {
            let t = row.test.as_ref()?;
            (t.verdict == Verdict::QuasiF)
                .then(|| format!("{}: {}", row.label, combination(&t.denominator)))
        })
        .collect()
}

/// The report in text or Markdown.
fn write(r: &AnalyzeReport, page: Page) -> String {
    let mut out = match page {
        Page::Text(_) => page.paragraph(&format!(
            "{}: analysis of variance of {} ({}), {} observations, {} convention",
            title(r),
            r.response,
            r.data,
            r.observations,
            r.convention.name()
        )),
        Page::Markdown => format!(
            "## {}: analysis of variance of {}\n\n{} observations from `{}`, {} convention.\n",
            title(r),
            r.response,
            r.observations,
            r.data,
            r.convention.name()
        ),
    };
    out.push('\n');
    if let Some(t) = imbalance_text(r) {
        out.push_str(&page.paragraph(&t));
        out.push('\n');
    }
    out.push_str(&page.table(&HEADER, rows(r)));
    out.push('\n');
    if let Some(f) = findings(r) {
        out.push_str(&page.paragraph(&f));
        out.push('\n');
    }
    out.push_str(&page.paragraph(&format!(
        "Each term is tested over its planned error term ({} convention); p is the upper tail of the F distribution on the term's df and the den. df.",
        r.convention.name()
    )));
    let synthetic = synthetic_items(r);
    if !synthetic.is_empty() {
        out.push('\n');
        out.push_str(&page.paragraph(
            "Quasi-F tests: these terms are tested over a combined error term, a combination of mean squares whose expectation is the term's own expected mean square without its component; their den. df are Satterthwaite's (1946) approximation from these mean squares, so their p-values are approximate.",
        ));
        if let Page::Markdown = page {
            out.push('\n');
        }
        for s in &synthetic {
            out.push_str(&page.item(s));
        }
    }
    if !r.components.is_empty() {
        out.push_str(&page.heading(
            "Variance components, by the method of moments (the expected mean squares set equal to the observed ones)",
        ));
        out.push_str(&page.table(&COMPONENT_HEADER, component_rows(r)));
    }
    out.push('\n');
    out.push_str(&page.paragraph(&format!("Grand mean {}.", number(r.grand_mean))));
    for m in &r.means {
        out.push_str(&page.heading(&format!("Means of {}", means_heading(m))));
        out.push_str(&page.table(&means_header(m), mean_rows(m)));
    }
    if !r.notes.is_empty() {
        out.push_str(&page.heading("What needs attention"));
        for n in r.notes.iter().map(super::analyze_words::note) {
            out.push_str(&page.item(&sentence(&n)));
        }
    }
    out.push('\n');
    out.push_str(&page.paragraph(ANALYSIS_CAUTION));
    out
}

/// The analysis in `format`; text is laid out to `width`.
pub fn render(r: &AnalyzeReport, format: Format, width: Width) -> String {
    match format {
        Format::Json => json(r),
        Format::Csv => csv_table(&CSV_HEADER, csv_rows(r)),
        Format::Markdown => write(r, Page::Markdown),
        Format::Text => write(r, Page::Text(width)),
    }
}

/// `cultivar (6 observations per mean)`, or for unequal counts the raw means' heading.
fn means_heading(m: &MeansTable) -> String {
    match m.per_mean {
        Some(n) => format!(
            "{} ({} per mean)",
            m.term,
            count(n, "observation", "observations")
        ),
        None => format!(
            "{} (raw means of the observations present, n of them each)",
            m.term
        ),
    }
}

fn means_header(m: &MeansTable) -> Vec<&str> {
    let mut header: Vec<&str> = m.factors.iter().map(String::as_str).collect();
    header.push("mean");
    if m.per_mean.is_none() {
        header.push("n");
    }
    header
}

fn mean_rows(m: &MeansTable) -> Vec<Vec<String>> {
    let means = same_decimals(&m.rows.iter().map(|row| row.mean).collect::<Vec<_>>());
    m.rows
        .iter()
        .zip(means)
        .map(|(row, mean)| {
            let mut cells = row.levels.clone();
            cells.push(mean);
            if m.per_mean.is_none() {
                cells.push(row.observations.to_string());
            }
            cells
        })
        .collect()
}

/// What unbalanced data lack and how they were analysed.
fn imbalance_text(r: &AnalyzeReport) -> Option<String> {
    let i = r.imbalance.as_ref()?;
    let mut missing = Vec::new();
    if i.empty_cells > 0 {
        missing.push(format!("{} empty", count(i.empty_cells, "cell", "cells")));
    }
    if i.lost_observations > 0 {
        missing.push(format!(
            "{} missing from cells that have some",
            count(i.lost_observations, "observation", "observations")
        ));
    }
    let sums = match i.sums_of_squares {
        SumsOfSquares::Sequential => format!(
            "sequential (type I) sums of squares, terms fitted in the order {}",
            i.fit_order.join(", ")
        ),
        SumsOfSquares::Type3 => {
            "type III sums of squares (each term adjusted for every other)".into()
        }
    };
    Some(format!(
        "Unbalanced data: {} of the layout's {} observations ({}). Analysed with {sums}; expected mean squares by Hartley's (1967) synthesis under the unrestricted model, error terms from them.",
        r.observations,
        i.full_observations,
        missing.join(", ")
    ))
}
