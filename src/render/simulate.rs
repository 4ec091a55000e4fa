//! Rendering of `simulate` results and of the dummy data set.

use super::words::CAUTION;
use super::{Format, csv_table, json, markdown_table, text_table};
use crate::errorterm::Verdict;
use crate::layout::SumsOfSquares;
use crate::render::analyze::sig;
use crate::simulate::{DataSet, Rate, SimulateReport, SimulatedTerm, SimulatedTest};

/// The dummy data set as CSV: the factors' level labels, then the response.
pub fn data_csv(set: &DataSet) -> String {
    csv_table(
        &set.header.iter().map(String::as_str).collect::<Vec<_>>(),
        set.rows.clone(),
    )
}

fn rate(r: Option<Rate>) -> String {
    r.map_or("-".into(), |r| {
        format!("{:.3} [{:.3}, {:.3}]", r.rate, r.low, r.high)
    })
}

fn opt(x: Option<f64>) -> String {
    x.filter(|v| v.is_finite()).map_or("-".into(), sig)
}

fn over(t: &SimulatedTest) -> String {
    match t.verdict {
        Verdict::Exact | Verdict::QuasiF => super::words::denominator(&t.denominator),
        _ => "none".into(),
    }
}

const MS_HEADER: [&str; 5] = ["term", "df", "E(MS)", "simulated mean MS (se)", "flag"];

fn ms_rows(r: &SimulateReport) -> Vec<Vec<String>> {
    r.terms
        .iter()
        .map(|t| {
            vec![
                t.label.clone(),
                t.df.to_string(),
                if t.df > 0 {
                    sig(t.expected_ms)
                } else {
                    "-".into()
                },
                match (t.mean_ms, t.mean_ms_se) {
                    (Some(m), Some(se)) => format!("{} ({})", sig(m), sig(se)),
                    _ => "-".into(),
                },
                if t.ms_flag {
                    "DIFFERS".into()
                } else {
                    String::new()
                },
            ]
        })
        .collect()
}

const TEST_HEADER: [&str; 8] = [
    "term",
    "tested over",
    "den. df planned / simulated",
    "rejected under null",
    "analytic power",
    "rejected at planning values",
    "flag",
    "no quasi-F",
];

fn flags(t: &SimulatedTest) -> String {
    let mut f = Vec::new();
    if t.null_flag {
        f.push("null rate");
    }
    if t.power_flag {
        f.push("power");
    }
    f.join(", ")
}

fn tested(t: &SimulatedTerm) -> Option<&SimulatedTest> {
    t.test.as_ref().filter(|x| x.verdict.is_testable())
}

fn test_rows(r: &SimulateReport) -> Vec<Vec<String>> {
    r.terms
        .iter()
        .filter_map(|t| {
            let x = tested(t)?;
            Some(vec![
                t.label.clone(),
                over(x),
                format!("{} / {}", opt(x.planned_df), opt(x.simulated_df)),
                rate(x.null),
                x.analytic_power.map_or("-".into(), |p| format!("{p:.3}")),
                rate(x.power),
                flags(x),
                if x.verdict == Verdict::QuasiF {
                    format!("{} / {}", x.undefined, x.null_undefined)
                } else {
                    "-".into()
                },
            ])
        })
        .collect()
}

const CSV_HEADER: [&str; 20] = [
    "term",
    "kind",
    "df",
    "expected_ms",
    "mean_ms",
    "mean_ms_se",
    "ms_flag",
    "verdict",
    "tested_over",
    "planned_df",
    "simulated_df",
    "null_rate",
    "null_low",
    "null_high",
    "null_flag",
    "analytic_power",
    "power_rate",
    "power_low",
    "power_high",
    "power_flag",
];

fn plain(x: Option<f64>) -> String {
    x.filter(|v| v.is_finite())
        .map_or(String::new(), |v| v.to_string())
}

fn csv_rows(r: &SimulateReport) -> Vec<Vec<String>> {
    r.terms
        .iter()
        .map(|t| {
            let x = t.test.as_ref();
            let testable = tested(t);
            vec![
                t.label.clone(),
                if t.kind == crate::layout::Kind::Fixed {
                    "fixed".into()
                } else {
                    "random".into()
                },
                t.df.to_string(),
                plain(Some(t.expected_ms)),
                plain(t.mean_ms),
                plain(t.mean_ms_se),
                t.ms_flag.to_string(),
                x.map_or(String::new(), |x| super::check::code(x.verdict).into()),
                testable.map_or(String::new(), over),
                plain(x.and_then(|x| x.planned_df)),
                plain(x.and_then(|x| x.simulated_df)),
                plain(x.and_then(|x| x.null).map(|r| r.rate)),
                plain(x.and_then(|x| x.null).map(|r| r.low)),
                plain(x.and_then(|x| x.null).map(|r| r.high)),
                x.map_or(String::new(), |x| x.null_flag.to_string()),
                plain(x.and_then(|x| x.analytic_power)),
                plain(x.and_then(|x| x.power).map(|r| r.rate)),
                plain(x.and_then(|x| x.power).map(|r| r.low)),
                plain(x.and_then(|x| x.power).map(|r| r.high)),
                x.map_or(String::new(), |x| x.power_flag.to_string()),
            ]
        })
        .collect()
}

fn title(r: &SimulateReport) -> String {
    if r.name.is_empty() {
        "Layout".into()
    } else {
        r.name.clone()
    }
}

/// What an unbalanced layout's removals took, and which sums of squares were used.
fn unbalanced_line(r: &SimulateReport) -> Option<String> {
    let u = r.unbalanced.as_ref()?;
    let what = match u.sums_of_squares {
        SumsOfSquares::Sequential => format!(
            "sequential sums of squares, fitted in the order {}",
            u.fit_order.join(", ")
        ),
        SumsOfSquares::Type3 => "type III sums of squares".to_string(),
    };
    Some(format!(
        "Unbalanced: {} of the full layout's {} observations removed ({}), {} kept in every data set; {what}.",
        u.removed_observations,
        u.full_observations,
        u.removals.join("; "),
        r.observations
    ))
}

/// The paragraphs after the tables, in words.
fn explanation(r: &SimulateReport) -> Vec<String> {
    let pct = (r.confidence * 100.0).round();
    let mut out: Vec<String> = unbalanced_line(r).into_iter().collect();
    out.extend([
        format!(
            "Each data set is drawn from the layout's model at the planning values ({} convention). Rates are the share of data sets in which the planned test rejected at alpha = {}, with {pct}% Wilson score intervals; a flag means the value they are held against (alpha under the null, the analytic power at the planning values) lies outside the interval. A flagged mean square lies more than the {pct}% normal quantile of standard errors from its expected value.",
            r.convention.name(),
            r.alpha
        ),
        "Under the null the term's own component is set to zero and everything else is kept."
            .into(),
    ]);
    if r.terms
        .iter()
        .any(|t| tested(t).is_some_and(|x| x.verdict == Verdict::QuasiF))
    {
        out.push("Synthetic tests: each data set's quasi-F takes its Satterthwaite df from that data set's own mean squares, as an analysis of real data would; the null rate shows how far the approximation drifts from alpha. \"no quasi-F\" counts the data sets (planning values / null) whose denominator was not positive, counted as not rejecting.".into());
    }
    let flagged: Vec<String> = r
        .terms
        .iter()
        .filter_map(|t| {
            let x = tested(t)?;
            (x.null_flag || x.power_flag).then(|| format!("{} ({})", t.label, flags(x)))
        })
        .chain(
            r.terms
                .iter()
                .filter(|t| t.ms_flag)
                .map(|t| format!("{} (mean square)", t.label)),
        )
        .collect();
    if r.runs > 0 {
        if flagged.is_empty() {
            out.push(
                "Nothing is flagged: the simulated figures agree with the analytic ones.".into(),
            );
        } else {
            out.push(format!(
                "Flagged: {}. With many intervals, an exact test is flagged now and then by chance (each interval misses about {}% of the time); a flag that stays with more runs (--runs) is real: for a synthetic test it measures the approximation.",
                flagged.join("; "),
                ((1.0 - r.confidence) * 100.0).round()
            ));
        }
    }
    out.extend(r.notes.iter().map(super::analyze_words::simulation_note));
    out
}

fn data_text(r: &SimulateReport) -> Option<(String, Vec<Vec<String>>)> {
    let d = r.data.as_ref()?;
    let line = format!(
        "Wrote {} observations to {}: the first data set of seed {}, drawn around a grand mean of {} (its own grand mean is {}), responses to {} decimals. Its mean squares, which `emsplan analyze` finds from the file:",
        d.observations,
        d.path,
        r.seed,
        sig(d.drawn_around),
        sig(d.mean),
        d.decimals
    );
    let rows = d
        .mean_squares
        .iter()
        .map(|m| {
            vec![
                m.term.clone(),
                m.df.to_string(),
                m.ms.map_or("-".into(), sig),
            ]
        })
        .collect();
    Some((line, rows))
}

const DATA_HEADER: [&str; 3] = ["term", "df", "mean square"];

pub fn render(r: &SimulateReport, format: Format) -> String {
    match format {
        Format::Json => json(r),
        Format::Csv => csv_table(&CSV_HEADER, csv_rows(r)),
        Format::Markdown => {
            let mut out = format!(
                "## {}: {} simulated data sets\n\nSeed {}, {} convention, {} observations each.\n\n",
                title(r),
                r.runs,
                r.seed,
                r.convention.name(),
                r.observations
            );
            if r.runs > 0 {
                out.push_str("### Mean squares\n\n");
                out.push_str(&markdown_table(&MS_HEADER, ms_rows(r)));
                out.push_str("\n### Tests\n\n");
                out.push_str(&markdown_table(&TEST_HEADER, test_rows(r)));
                out.push('\n');
            }
            for e in explanation(r) {
                out.push_str(&format!("- {e}\n"));
            }
            if let Some((line, rows)) = data_text(r) {
                out.push_str(&format!("\n### Data set\n\n{line}\n\n"));
                out.push_str(&markdown_table(&DATA_HEADER, rows));
            }
            out.push_str(&format!("\n{CAUTION}\n"));
            out
        }
        Format::Text => {
            let mut out = format!(
                "{}: {} simulated data sets (seed {}), {} convention, {} observations each\n",
                title(r),
                r.runs,
                r.seed,
                r.convention.name(),
                r.observations
            );
            if r.runs > 0 {
                out.push_str(
                    "\nMean squares against their expected values at the planning values:\n\n",
                );
                out.push_str(&text_table(&MS_HEADER, ms_rows(r)));
                out.push_str("\nPlanned tests, rejection rates with Wilson score intervals:\n\n");
                out.push_str(&text_table(&TEST_HEADER, test_rows(r)));
            }
            out.push('\n');
            for e in explanation(r) {
                out.push_str(&format!("{e}\n"));
            }
            if let Some((line, rows)) = data_text(r) {
                out.push_str(&format!("\n{line}\n\n"));
                out.push_str(&text_table(&DATA_HEADER, rows));
            }
            out.push_str(&format!("\n{CAUTION}\n"));
            out
        }
    }
}
