//! Rendering of `analyze` results.

use super::analyze_words::NEGATIVE_ADVICE;
use super::{Format, csv_table, json, markdown_table, text_table};
use crate::analyze::{AnalyzeReport, AnovaRow, MeansTable};
use crate::errorterm::Verdict;
use crate::layout::{Kind, SumsOfSquares};

/// The caution that goes with an analysis people will act on.
pub const ANALYSIS_CAUTION: &str = "The tests take the layout's error terms as given: they are right only if the layout file describes how the experiment was really run (what was randomised to what, what is nested in what). Have a statistician review conclusions that carry real cost or risk.";

/// A number to about four significant digits, in plain or scientific notation.
pub fn sig(x: f64) -> String {
    if !x.is_finite() {
        return "-".into();
    }
    if x == 0.0 {
        return "0".into();
    }
    let a = x.abs();
    if !(1e-3..1e7).contains(&a) {
        return format!("{x:.3e}");
    }
    let digits = (3 - a.log10().floor() as i32).max(0) as usize;
    format!("{x:.digits$}")
}

/// A p-value to four decimals, or `< 0.0001`.
pub fn p_text(p: f64) -> String {
    if !p.is_finite() {
        "-".into()
    } else if p < 1e-4 {
        "< 0.0001".into()
    } else {
        format!("{p:.4}")
    }
}

fn opt(x: Option<f64>, f: fn(f64) -> String) -> String {
    x.map_or("-".into(), f)
}

fn over(row: &AnovaRow) -> String {
    match &row.test {
        None => "-".into(),
        Some(t) => match t.verdict {
            Verdict::Exact | Verdict::QuasiF => super::words::denominator(&t.denominator),
            Verdict::Untestable => "none (untestable)".into(),
            Verdict::NotEstimable => "none (0 df)".into(),
        },
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
            let f = t.and_then(|t| t.f);
            let quasi = t.is_some_and(|t| t.verdict == Verdict::QuasiF);
            vec![
                row.label.clone(),
                row.df.to_string(),
                sig(row.ss),
                opt(row.ms, sig),
                over(row),
                match f {
                    Some(f) if quasi => format!("{} (quasi)", sig(f)),
                    Some(f) => sig(f),
                    None => "-".into(),
                },
                opt(t.and_then(|t| t.denominator_df), sig),
                opt(t.and_then(|t| t.p), p_text),
            ]
        })
        .collect()
}

const CSV_HEADER: [&str; 11] = [
    "term",
    "kind",
    "df",
    "sum_of_squares",
    "mean_square",
    "tested_over",
    "verdict",
    "f",
    "denominator_df",
    "p",
    "variance_component",
];

fn plain(x: Option<f64>) -> String {
    x.filter(|v| v.is_finite())
        .map_or(String::new(), |v| v.to_string())
}

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
                row.ss.to_string(),
                plain(row.ms),
                if t.is_some() {
                    over(row)
                } else {
                    String::new()
                },
                t.map_or(String::new(), |t| super::check::code(t.verdict).into()),
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

fn component_rows(r: &AnalyzeReport) -> Vec<Vec<String>> {
    r.components
        .iter()
        .map(|c| {
            vec![
                super::words::symbol(crate::layout::Kind::Random, c.residual, &c.short_label),
                c.term.clone(),
                opt(c.estimate, sig),
                opt(c.sd, sig),
                if c.negative {
                    "NEGATIVE".into()
                } else if c.estimate.is_none() {
                    "not estimable".into()
                } else {
                    String::new()
                },
            ]
        })
        .collect()
}

const COMPONENT_HEADER: [&str; 5] = ["component", "term", "estimate", "sd", "flag"];

fn title(r: &AnalyzeReport) -> String {
    if r.name.is_empty() {
        "Layout".into()
    } else {
        r.name.clone()
    }
}

fn explanations(r: &AnalyzeReport) -> Vec<String> {
    let mut out = vec![format!(
        "Each term is tested over its planned error term ({} convention); p is the upper tail of the F distribution.",
        r.convention.name()
    )];
    if r.terms.iter().any(|t| {
        t.test
            .as_ref()
            .is_some_and(|x| x.verdict == Verdict::QuasiF)
    }) {
        out.push("A quasi-F divides by a combination of mean squares; its den. df are Satterthwaite's (1946) approximation from these mean squares, so its p is approximate.".into());
    }
    out
}

pub fn render(r: &AnalyzeReport, format: Format) -> String {
    match format {
        Format::Json => json(r),
        Format::Csv => csv_table(&CSV_HEADER, csv_rows(r)),
        Format::Markdown => {
            let mut out = format!(
                "## {}: analysis of variance of {}\n\n{} observations from `{}`, {} convention.\n\n",
                title(r),
                r.response,
                r.observations,
                r.data,
                r.convention.name()
            );
            if let Some(t) = imbalance_text(r) {
                out.push_str(&format!("{t}\n\n"));
            }
            out.push_str(&markdown_table(&HEADER, rows(r)));
            out.push('\n');
            for e in explanations(r) {
                out.push_str(&format!("{e}\n"));
            }
            if !r.components.is_empty() {
                out.push_str("\n### Variance components (method of moments)\n\n");
                out.push_str(&markdown_table(&COMPONENT_HEADER, component_rows(r)));
            }
            out.push_str(&format!(
                "\n### Means\n\nGrand mean {}.\n",
                sig(r.grand_mean)
            ));
            for m in &r.means {
                out.push_str(&format!("\n{}\n\n", means_heading(m)));
                out.push_str(&markdown_table(&means_header(m), mean_rows(m)));
            }
            if !r.notes.is_empty() {
                out.push_str("\n### What needs attention\n\n");
                for n in r.notes.iter().map(super::analyze_words::note) {
                    out.push_str(&format!("- {n}\n"));
                }
            }
            out.push_str(&format!("\n{ANALYSIS_CAUTION}\n"));
            out
        }
        Format::Text => {
            let mut out = format!(
                "{}: analysis of variance of {} ({}), {} observations, {} convention\n\n",
                title(r),
                r.response,
                r.data,
                r.observations,
                r.convention.name()
            );
            if let Some(t) = imbalance_text(r) {
                out.push_str(&format!("{t}\n\n"));
            }
            out.push_str(&text_table(&HEADER, rows(r)));
            out.push('\n');
            for e in explanations(r) {
                out.push_str(&format!("{e}\n"));
            }
            if !r.components.is_empty() {
                out.push_str("\nVariance components, by the method of moments from the expected mean squares:\n\n");
                out.push_str(&text_table(&COMPONENT_HEADER, component_rows(r)));
                if r.components.iter().any(|c| c.negative) {
                    out.push_str(&format!("  NEGATIVE: {NEGATIVE_ADVICE}.\n"));
                }
            }
            out.push_str(&format!("\nGrand mean {}.\n", sig(r.grand_mean)));
            for m in &r.means {
                out.push_str(&format!("\nMeans of {}:\n\n", means_heading(m)));
                out.push_str(&text_table(&means_header(m), mean_rows(m)));
            }
            if !r.notes.is_empty() {
                out.push_str("\nWhat needs attention:\n");
                for n in r.notes.iter().map(super::analyze_words::note) {
                    out.push_str(&format!("  - {n}\n"));
                }
            }
            out.push_str(&format!("\n{ANALYSIS_CAUTION}\n"));
            out
        }
    }
}

/// `cultivar (6 observations per mean)`, or for unequal counts the raw means' heading.
fn means_heading(m: &MeansTable) -> String {
    match m.per_mean {
        Some(n) => format!("{} ({n} observations per mean)", m.term),
        None => format!(
            "{} (raw means of the observations present; n is each one's count)",
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
    m.rows
        .iter()
        .map(|row| {
            let mut cells = row.levels.clone();
            cells.push(sig(row.mean));
            if m.per_mean.is_none() {
                cells.push(row.observations.to_string());
            }
            cells
        })
        .collect()
}

/// What unbalanced data lack and how they were analysed, in one sentence.
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

fn count(n: u64, one: &str, many: &str) -> String {
    format!("{n} {}", if n == 1 { one } else { many })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn numbers_to_four_significant_digits() {
        for (x, want) in [
            (0.0, "0"),
            (1234.5678, "1235"),
            (12.345678, "12.35"),
            (0.012346, "0.01235"),
            (0.00012346, "1.235e-4"),
            (-3.5, "-3.500"),
            (f64::NAN, "-"),
        ] {
            assert_eq!(sig(x), want, "{x}");
        }
        assert_eq!(p_text(0.00001), "< 0.0001");
        assert_eq!(p_text(0.04567), "0.0457");
    }
}
