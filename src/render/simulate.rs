//! Rendering of `simulate` results and of the dummy data set.

use super::text::{number, probability};
use super::words::CAUTION;
use super::{Format, Page, Width, and_list, combination, count, csv_table, json, sentence};
use crate::errorterm::Verdict;
use crate::layout::SumsOfSquares;
use crate::simulate::{DataSet, Rate, SimulateReport, SimulatedTerm, SimulatedTest};

/// The dummy data set as CSV: the factors' level labels, then the response.
pub fn data_csv(set: &DataSet) -> String {
    csv_table(
        &set.header.iter().map(String::as_str).collect::<Vec<_>>(),
        set.rows.clone(),
    )
}

/// `0.480 [0.391, 0.570]`: a rate and its interval. The interval's ends are plain three
/// decimals (`[0.000, 0.006]`), so that a bracket never holds a `<`.
fn rate(r: Option<Rate>) -> String {
    let end = |x: f64| {
        if x == 0.0 || x == 1.0 {
            format!("{x}")
        } else {
            format!("{x:.3}")
        }
    };
    r.map_or("-".into(), |r| {
        format!("{} [{}, {}]", probability(r.rate), end(r.low), end(r.high))
    })
}

fn opt(x: Option<f64>) -> String {
    x.filter(|v| v.is_finite()).map_or("-".into(), number)
}

/// The error term in a table cell: a mean square's term, or for a synthetic test a
/// pointer to the list of combinations under the table.
fn over_cell(t: &SimulatedTest) -> String {
    match t.verdict {
        Verdict::Exact => t.denominator[0].term.clone(),
        Verdict::QuasiF => "combined (below)".into(),
        _ => "none".into(),
    }
}

const MS_HEADER: [&str; 5] = ["term", "df", "E(MS)", "simulated mean (se)", "agreement"];

fn ms_rows(r: &SimulateReport) -> Vec<Vec<String>> {
    r.terms
        .iter()
        .map(|t| {
            let simulated = match (t.mean_ms, t.mean_ms_se) {
                (Some(m), Some(se)) => Some(format!("{} ({})", number(m), number(se))),
                _ => None,
            };
            vec![
                t.label.clone(),
                t.df.to_string(),
                if t.df > 0 {
                    number(t.expected_ms)
                } else {
                    "-".into()
                },
                simulated.clone().unwrap_or_else(|| "-".into()),
                match (simulated, t.ms_flag) {
                    (None, _) => String::new(),
                    (Some(_), true) => "differs".into(),
                    (Some(_), false) => "agrees".into(),
                },
            ]
        })
        .collect()
}

const TEST_HEADER: [&str; 4] = [
    "term",
    "tested over",
    "den. df planned",
    "den. df simulated",
];

const RATE_HEADER: [&str; 5] = [
    "term",
    "rejected under the null",
    "analytic power",
    "rejected at the planning values",
    "agreement",
];

/// Which rates miss the value they are held against, in words.
fn disagreement(t: &SimulatedTest) -> Option<&'static str> {
    match (t.null_flag, t.power_flag) {
        (false, false) => None,
        (true, false) => Some("null rate differs"),
        (false, true) => Some("power differs"),
        (true, true) => Some("both differ"),
    }
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
                over_cell(x),
                opt(x.planned_df),
                opt(x.simulated_df),
            ])
        })
        .collect()
}

fn rate_rows(r: &SimulateReport) -> Vec<Vec<String>> {
    r.terms
        .iter()
        .filter_map(|t| {
            let x = tested(t)?;
            Some(vec![
                t.label.clone(),
                rate(x.null),
                x.analytic_power.map_or("-".into(), probability),
                rate(x.power),
                disagreement(x).unwrap_or("agrees").into(),
            ])
        })
        .collect()
}

const CSV_HEADER: [&str; 22] = [
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
    "denominator_not_positive",
    "null_denominator_not_positive",
];

/// A number for CSV: the shortest text that reads back as the same f64; empty when
/// missing or not finite.
fn plain(x: Option<f64>) -> String {
    x.filter(|v| v.is_finite())
        .map_or(String::new(), |v| v.to_string())
}

/// One row per term. The two last columns count the data sets (at the planning values,
/// under the null) whose synthetic denominator was not positive; empty unless synthetic.
fn csv_rows(r: &SimulateReport) -> Vec<Vec<String>> {
    r.terms
        .iter()
        .map(|t| {
            let x = t.test.as_ref();
            let testable = tested(t);
            let synthetic = testable.filter(|x| x.verdict == Verdict::QuasiF);
            vec![
                t.label.clone(),
                if t.kind == crate::layout::Kind::Fixed {
                    "fixed".into()
                } else {
                    "random".into()
                },
                t.df.to_string(),
                plain(Some(t.expected_ms).filter(|_| t.df > 0)),
                plain(t.mean_ms),
                plain(t.mean_ms_se),
                t.mean_ms.map_or(String::new(), |_| t.ms_flag.to_string()),
                x.map_or(String::new(), |x| super::check::code(x.verdict).into()),
                testable.map_or(String::new(), |x| combination(&x.denominator)),
                plain(x.and_then(|x| x.planned_df)),
                plain(x.and_then(|x| x.simulated_df)),
                plain(x.and_then(|x| x.null).map(|r| r.rate)),
                plain(x.and_then(|x| x.null).map(|r| r.low)),
                plain(x.and_then(|x| x.null).map(|r| r.high)),
                testable.map_or(String::new(), |x| x.null_flag.to_string()),
                plain(x.and_then(|x| x.analytic_power)),
                plain(x.and_then(|x| x.power).map(|r| r.rate)),
                plain(x.and_then(|x| x.power).map(|r| r.low)),
                plain(x.and_then(|x| x.power).map(|r| r.high)),
                testable.map_or(String::new(), |x| x.power_flag.to_string()),
                synthetic.map_or(String::new(), |x| x.undefined.to_string()),
                synthetic.map_or(String::new(), |x| x.null_undefined.to_string()),
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

fn synthetic_tests(r: &SimulateReport) -> impl Iterator<Item = (&SimulatedTerm, &SimulatedTest)> {
    r.terms.iter().filter_map(|t| {
        let x = tested(t)?;
        (x.verdict == Verdict::QuasiF).then_some((t, x))
    })
}

/// What the simulation found: the flags, and the data sets without a quasi-F.
fn findings(r: &SimulateReport) -> Vec<String> {
    let mut out = Vec::new();
    let flagged: Vec<String> = r
        .terms
        .iter()
        .filter_map(|t| {
            let x = tested(t)?;
            disagreement(x).map(|d| format!("{} ({d})", t.label))
        })
        .chain(
            r.terms
                .iter()
                .filter(|t| t.ms_flag)
                .map(|t| format!("{} (mean square differs)", t.label)),
        )
        .collect();
    if flagged.is_empty() {
        out.push("Nothing is flagged: the simulated figures agree with the analytic ones.".into());
    } else {
        out.push(format!(
            "Flagged: {}. With many intervals an exact test is flagged now and then by chance (each interval misses about {}% of the time); a flag that stays with more runs (--runs) is real, and for a quasi-F test it measures the approximation.",
            flagged.join("; "),
            ((1.0 - r.confidence) * 100.0).round()
        ));
    }
    let mut all_positive = true;
    for (t, x) in synthetic_tests(r) {
        if x.undefined == 0 && x.null_undefined == 0 {
            continue;
        }
        all_positive = false;
        out.push(format!(
            "{}: the combined denominator was not positive, so there was no quasi-F, in {} of the {} data sets at the planning values and {} under the null; they count as not rejecting.",
            t.label, x.undefined, r.runs, x.null_undefined
        ));
    }
    if all_positive && synthetic_tests(r).next().is_some() {
        out.push(
            "Every combined denominator was positive in every data set, so every quasi-F could be computed."
                .into(),
        );
    }
    let untested: Vec<String> = r
        .terms
        .iter()
        .filter(|t| t.test.as_ref().is_some_and(|x| !x.verdict.is_testable()))
        .map(|t| t.label.clone())
        .collect();
    if !untested.is_empty() {
        out.push(format!(
            "No planned test, so no rates: {}.",
            and_list(&untested)
        ));
    }
    out
}

/// How the figures are made, in words.
fn method(r: &SimulateReport) -> Vec<String> {
    let pct = (r.confidence * 100.0).round();
    let mut out = vec![format!(
        "Each data set is drawn from the layout's model at the planning values ({} convention). A rate is the share of data sets in which the planned test rejected at alpha = {}; under the null the term's own component is set to zero and everything else is kept. A rate agrees when its {pct}% Wilson score interval holds the value it is held against: alpha under the null, the analytic power at the planning values. A mean square agrees when its expected value lies within the {pct}% normal quantile of standard errors of the simulated mean.",
        r.convention.name(),
        r.alpha
    )];
    if synthetic_tests(r).next().is_some() {
        out.push("Quasi-F tests: each data set's quasi-F takes its Satterthwaite df from that data set's own mean squares, as an analysis of real data would, and the simulated den. df are their mean; the null rate shows how far the approximation drifts from alpha. A data set whose combined denominator is not positive has no quasi-F and counts as not rejecting.".into());
    }
    out
}

fn data_text(r: &SimulateReport) -> Option<(String, Vec<Vec<String>>)> {
    let d = r.data.as_ref()?;
    let line = format!(
        "Wrote {} to {}: the first data set of seed {}, drawn around a grand mean of {} (its own grand mean is {}), responses to {} decimals. Its mean squares, which `emsplan analyze` finds from the file:",
        count(d.observations, "observation", "observations"),
        d.path,
        r.seed,
        number(d.drawn_around),
        number(d.mean),
        d.decimals
    );
    let rows = d
        .mean_squares
        .iter()
        .map(|m| {
            vec![
                m.term.clone(),
                m.df.to_string(),
                m.ms.map_or("-".into(), number),
            ]
        })
        .collect();
    Some((line, rows))
}

const DATA_HEADER: [&str; 3] = ["term", "df", "mean square"];

/// The report in text or Markdown.
fn write(r: &SimulateReport, page: Page) -> String {
    let mut out = match page {
        Page::Text(_) => page.paragraph(&format!(
            "{}: {} simulated data sets (seed {}), {} convention, {} observations each",
            title(r),
            r.runs,
            r.seed,
            r.convention.name(),
            r.observations
        )),
        Page::Markdown => format!(
            "## {}: {} simulated data sets\n\nSeed {}, {} convention, {} observations each.\n",
            title(r),
            r.runs,
            r.seed,
            r.convention.name(),
            r.observations
        ),
    };
    if let Some(u) = unbalanced_line(r) {
        out.push('\n');
        out.push_str(&page.paragraph(&u));
    }
    if r.runs > 0 {
        out.push_str(
            &page.heading("Mean squares against their expected values at the planning values"),
        );
        out.push_str(&page.table(&MS_HEADER, ms_rows(r)));
        let tests = test_rows(r);
        if !tests.is_empty() {
            out.push_str(&page.heading("Planned tests"));
            out.push_str(&page.table(&TEST_HEADER, tests));
            let synthetic: Vec<String> = synthetic_tests(r)
                .map(|(t, x)| format!("{}: {}", t.label, combination(&x.denominator)))
                .collect();
            if !synthetic.is_empty() {
                out.push('\n');
                out.push_str(&page.paragraph("Combined (Satterthwaite) error terms:"));
                if let Page::Markdown = page {
                    out.push('\n');
                }
                for s in &synthetic {
                    out.push_str(&page.item(s));
                }
            }
            out.push_str(&page.heading(&format!(
                "Rejection rates at alpha = {}, with {}% Wilson score intervals",
                r.alpha,
                (r.confidence * 100.0).round()
            )));
            out.push_str(&page.table(&RATE_HEADER, rate_rows(r)));
        }
        out.push_str(&page.heading("What the simulation shows"));
        for f in findings(r) {
            out.push_str(&page.item(&f));
        }
        out.push_str(&page.heading("How the figures are made"));
        for (k, m) in method(r).iter().enumerate() {
            if k > 0 {
                out.push('\n');
            }
            out.push_str(&page.paragraph(m));
        }
    }
    if !r.notes.is_empty() {
        out.push_str(&page.heading("Notes"));
        for n in r.notes.iter().map(super::analyze_words::simulation_note) {
            out.push_str(&page.item(&sentence(&n)));
        }
    }
    if let Some((line, rows)) = data_text(r) {
        out.push('\n');
        out.push_str(&page.paragraph(&line));
        out.push('\n');
        out.push_str(&page.table(&DATA_HEADER, rows));
    }
    out.push('\n');
    out.push_str(&page.paragraph(CAUTION));
    out
}

/// The simulation in `format`; text is laid out to `width`.
pub fn render(r: &SimulateReport, format: Format, width: Width) -> String {
    match format {
        Format::Json => json(r),
        Format::Csv => csv_table(&CSV_HEADER, csv_rows(r)),
        Format::Markdown => write(r, Page::Markdown),
        Format::Text => write(r, Page::Text(width)),
    }
}
