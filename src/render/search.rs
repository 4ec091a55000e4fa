//! Rendering of `search` results.

use super::words::tested_over;
use super::{Format, csv_table, json, markdown_table, num, text_table};
use crate::findings::TestReport;
use crate::search::report::{CandidateReport, MustTestReport, SearchReport};

/// Rows shown of the frontier in text and Markdown (JSON has them all).
const FRONTIER_ROWS: usize = 12;

fn over(t: &MustTestReport) -> String {
    if t.denominator.is_empty() {
        return "none".into();
    }
    tested_over(&TestReport {
        verdict: t.verdict,
        denominator: t.denominator.clone(),
        denominator_df: t.denominator_df,
        power: t.power,
        min_detectable: t.min_detectable,
        reason: None,
        shortfall: None,
        repairs: Vec::new(),
    })
}

fn opt(x: Option<f64>) -> String {
    x.map_or("-".into(), |v| format!("{v:.3}"))
}

fn df(x: Option<f64>) -> String {
    x.map_or("-".into(), num)
}

/// `light=3 bench=3 cultivar=4 r=2`.
fn levels(c: &CandidateReport) -> String {
    let mut parts: Vec<String> = c
        .factors
        .iter()
        .map(|f| format!("{}={}", f.name, f.levels))
        .collect();
    parts.push(format!("r={}", c.replicates));
    parts.join(" ")
}

const TEST_HEADER: [&str; 6] = [
    "term",
    "tested over",
    "den. df",
    "verdict",
    "power",
    "min. effect",
];

fn test_rows(c: &CandidateReport) -> Vec<Vec<String>> {
    c.tests
        .iter()
        .map(|t| {
            vec![
                t.label.clone(),
                over(t),
                df(t.denominator_df),
                super::words::verdict(t.verdict).to_string(),
                opt(t.power),
                opt(t.min_detectable),
            ]
        })
        .collect()
}

fn ranked_header(r: &SearchReport) -> Vec<String> {
    let mut h: Vec<String> = ["rank", "structure", "levels", "cost", "observations"]
        .iter()
        .map(|s| s.to_string())
        .collect();
    for m in &r.constraints.must_test {
        h.push(format!("{m}: den. df"));
        h.push(format!("{m}: power"));
    }
    h
}

fn ranked_rows(r: &SearchReport) -> Vec<Vec<String>> {
    r.candidates
        .iter()
        .enumerate()
        .map(|(i, c)| {
            let mut row = vec![
                (i + 1).to_string(),
                c.structure.clone(),
                levels(c),
                num(c.cost),
                c.observations.to_string(),
            ];
            for t in &c.tests {
                row.push(df(t.denominator_df));
                row.push(opt(t.power));
            }
            row
        })
        .collect()
}

const FRONTIER_HEADER: [&str; 4] = ["cost", "smallest power", "structure", "levels"];

fn frontier_rows(r: &SearchReport) -> Vec<Vec<String>> {
    r.frontier
        .iter()
        .take(FRONTIER_ROWS)
        .map(|c| {
            vec![
                num(c.cost),
                opt(c.smallest_power),
                c.structure.clone(),
                levels(c),
            ]
        })
        .collect()
}

fn constraints_line(r: &SearchReport) -> String {
    let c = &r.constraints;
    let mut parts = vec![format!("must test {}", c.must_test.join(", "))];
    if c.exact_only {
        parts.push("exact F tests only".into());
    }
    if let Some(d) = c.min_df {
        parts.push(format!("denominator df at least {}", num(d)));
    }
    if let Some(p) = c.target_power {
        parts.push(format!("power at least {p} at alpha {}", c.alpha));
    }
    match c.budget {
        Some(b) => parts.push(format!("budget {}", num(b))),
        None => parts.push("no budget".into()),
    }
    parts.join("; ")
}

fn counts_line(r: &SearchReport) -> String {
    if r.method == crate::search::Method::Optimize {
        return format!(
            "{} candidates in {} structure{}: the integer program screened {} exactly; {} structure{} with a feasible layout.",
            r.space,
            r.structures,
            if r.structures == 1 { "" } else { "s" },
            r.examined,
            r.feasible,
            if r.feasible == 1 { "" } else { "s" }
        );
    }
    format!(
        "{} candidates in {} structure{}: {} examined, {} over the budget, {} feasible.",
        r.space,
        r.structures,
        if r.structures == 1 { "" } else { "s" },
        r.examined,
        r.rejected.budget,
        r.feasible
    )
}

fn title(r: &SearchReport) -> String {
    if r.name.is_empty() {
        "Design search".into()
    } else {
        format!("{}: design search", r.name)
    }
}

type Table = fn(&[&str], Vec<Vec<String>>) -> String;

/// The body shared by text and Markdown; `heading` formats a section heading.
fn body(r: &SearchReport, table: Table, heading: fn(&str) -> String, bullet: &str) -> String {
    let mut out = String::new();
    out.push_str(&format!("{}\n{}\n", counts_line(r), constraints_line(r)));
    match &r.best {
        Some(b) => {
            out.push_str(&heading(&format!("Best layout ({})", b.structure)));
            out.push_str(&format!("{}.\n\n", super::search_words::description(b)));
            out.push_str(&table(&TEST_HEADER, test_rows(b)));
        }
        None => {
            out.push_str(&heading("No layout meets every constraint"));
            if let Some(why) = &super::search_words::binding(r) {
                out.push_str(&format!("{}.\n", capitalise(why)));
            }
            if let Some(w) = &r.without_budget {
                let over = r.constraints.budget.map(|b| w.cost - b).unwrap_or(0.0);
                out.push_str(&format!(
                    "Without the budget, the cheapest layout that meets every other constraint is {} ({} over the budget; {}).\n",
                    super::search_words::description(w),
                    num(over),
                    w.structure
                ));
            }
        }
    }
    if r.candidates.len() > 1 {
        out.push_str(&heading(&format!(
            "The {} best candidates",
            r.candidates.len()
        )));
        let h = ranked_header(r);
        let h: Vec<&str> = h.iter().map(|s| s.as_str()).collect();
        out.push_str(&table(&h, ranked_rows(r)));
    }
    if !r.frontier.is_empty() {
        out.push_str(&heading(
            "Cost against power (each point has more power than every cheaper one)",
        ));
        out.push_str(&table(&FRONTIER_HEADER, frontier_rows(r)));
        if r.frontier.len() > FRONTIER_ROWS {
            out.push_str(&format!(
                "\n({} more points in --format json)\n",
                r.frontier.len() - FRONTIER_ROWS
            ));
        }
    }
    if !r.rejections.is_empty() {
        out.push_str(&heading("Why candidates were rejected"));
        for x in &r.rejections {
            out.push_str(&format!(
                "{bullet}{} ({}): the cheapest: {}.\n",
                x.reason.name(),
                x.count,
                super::search_words::why(x, &r.constraints)
            ));
        }
    }
    let notes = super::search_words::notes(&r.notes);
    if !notes.is_empty() {
        out.push('\n');
        for n in &notes {
            out.push_str(&format!("{bullet}note: {n}\n"));
        }
    }
    out.push_str(&format!("\n{}\n", super::search_words::caution()));
    out
}

fn capitalise(s: &str) -> String {
    let mut c = s.chars();
    match c.next() {
        Some(f) => f.to_uppercase().collect::<String>() + c.as_str(),
        None => String::new(),
    }
}

pub fn render(r: &SearchReport, format: Format) -> String {
    match format {
        Format::Json => json(r),
        Format::Csv => {
            let h = ranked_header(r);
            let h: Vec<&str> = h.iter().map(|s| s.as_str()).collect();
            csv_table(&h, ranked_rows(r))
        }
        Format::Markdown => format!(
            "## {}\n\n{}",
            title(r),
            body(r, markdown_table, |h| format!("\n### {h}\n\n"), "- ")
        ),
        Format::Text => format!(
            "{}\n\n{}",
            title(r),
            body(r, text_table, |h| format!("\n{h}:\n"), "  - ")
        ),
    }
}
