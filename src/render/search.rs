//! Rendering of `search` results.

use super::text::{number, probability};
use super::{Format, Page, Width, and_list, combination, csv_table, json, sentence, verdict_words};
use crate::errorterm::Verdict;
use crate::search::evaluate::Rejection;
use crate::search::report::{
    CandidateReport, Constraints, MustTestReport, RejectionReport, SearchReport,
};

/// Rows shown of the frontier in text and Markdown (JSON has them all).
const FRONTIER_ROWS: usize = 12;

/// The error term of a must-test term: its mean square's term, the combination of a
/// synthetic test, or `none`.
fn over(t: &MustTestReport) -> String {
    if t.denominator.is_empty() {
        "none".into()
    } else {
        combination(&t.denominator)
    }
}

fn opt(x: Option<f64>, f: fn(f64) -> String) -> String {
    x.map_or("-".into(), f)
}

/// `recipe 3, storage 2, day 3, assessor 2, 1 replicate`: the level counts of a
/// candidate, each factor's within one of its nests.
fn levels(c: &CandidateReport) -> String {
    if !c.units.is_empty() {
        // A layout of units: each unit's count per member of the unit it is within.
        return c
            .units
            .iter()
            .map(|u| format!("{} {}", u.name, u.count))
            .collect::<Vec<_>>()
            .join(", ");
    }
    let mut parts: Vec<String> = c
        .factors
        .iter()
        .map(|f| format!("{} {}", f.name, f.levels))
        .collect();
    parts.push(if c.replicates == 1 {
        "1 replicate".into()
    } else {
        format!("{} replicates", c.replicates)
    });
    parts.join(", ")
}

/// Whether any candidate shown has a power (there is none without an [sd] table).
fn has_power(r: &SearchReport) -> bool {
    r.candidates
        .iter()
        .chain(&r.frontier)
        .any(|c| c.smallest_power.is_some() || c.tests.iter().any(|t| t.power.is_some()))
}

fn test_header(power: bool) -> Vec<&'static str> {
    let mut h = vec!["term", "tested over", "den. df", "test"];
    if power {
        h.extend(["power", "detectable effect"]);
    }
    h
}

fn test_rows(c: &CandidateReport, power: bool) -> Vec<Vec<String>> {
    c.tests
        .iter()
        .map(|t| {
            let mut row = vec![
                t.label.clone(),
                over(t),
                opt(t.denominator_df, number),
                verdict_words(t.verdict).to_string(),
            ];
            if power {
                row.push(opt(t.power, probability));
                row.push(opt(t.min_detectable, number));
            }
            row
        })
        .collect()
}

fn ranked_header(power: bool) -> Vec<&'static str> {
    let mut h = vec![
        "rank",
        "cost",
        "observations",
        "structure",
        "levels",
        "den. df",
    ];
    if power {
        h.push("power");
    }
    h
}

fn ranked_rows(r: &SearchReport, power: bool) -> Vec<Vec<String>> {
    r.candidates
        .iter()
        .enumerate()
        .map(|(i, c)| {
            let mut row = vec![
                (i + 1).to_string(),
                number(c.cost),
                c.observations.to_string(),
                c.structure.clone(),
                levels(c),
                opt(c.smallest_df, number),
            ];
            if power {
                row.push(opt(c.smallest_power, probability));
            }
            row
        })
        .collect()
}

const FRONTIER_HEADER: [&str; 4] = ["cost", "lowest power", "structure", "levels"];

fn frontier_rows(r: &SearchReport) -> Vec<Vec<String>> {
    r.frontier
        .iter()
        .take(FRONTIER_ROWS)
        .map(|c| {
            vec![
                number(c.cost),
                opt(c.smallest_power, probability),
                c.structure.clone(),
                levels(c),
            ]
        })
        .collect()
}

fn constraints_line(r: &SearchReport) -> String {
    let c = &r.constraints;
    let mut parts = vec![format!("must test {}", and_list(&c.must_test))];
    if c.exact_only {
        parts.push("exact F tests only".into());
    }
    if let Some(d) = c.min_df {
        parts.push(format!("at least {} denominator df", number(d)));
    }
    if let Some(p) = c.target_power {
        parts.push(format!("power at least {p} at alpha = {}", c.alpha));
    }
    match c.budget {
        Some(b) => parts.push(format!("budget {}", number(b))),
        None => parts.push("no budget".into()),
    }
    parts.extend(c.limits.iter().map(super::search_words::limit));
    format!("Constraints: {}.", parts.join("; "))
}

fn counts_line(r: &SearchReport) -> String {
    let structures = if r.structures == 1 {
        "1 structure".to_string()
    } else {
        format!("{} structures", r.structures)
    };
    if r.method == crate::search::Method::Optimize {
        return format!(
            "{} candidates in {structures}: the integer program screened {} exactly; {} with a feasible layout.",
            r.space,
            r.examined,
            if r.feasible == 1 {
                "1 structure".to_string()
            } else {
                format!("{} structures", r.feasible)
            }
        );
    }
    let limit = if r.constraints.limits.is_empty() {
        String::new()
    } else {
        format!(", {} beyond the limits", r.rejected.limit)
    };
    format!(
        "{} candidates in {structures}: {} examined, {} over the budget{limit}, {} feasible.",
        r.space, r.examined, r.rejected.budget, r.feasible
    )
}

fn title(r: &SearchReport) -> String {
    if r.name.is_empty() {
        "Design search".into()
    } else {
        format!("{}: design search", r.name)
    }
}

/// A candidate's value of each must-test term, in words: `recipe x storage 2, recipe 4`.
fn per_term(c: &CandidateReport, value: impl Fn(&MustTestReport) -> String) -> String {
    and_list(
        &c.tests
            .iter()
            .map(|t| format!("{} {}", t.label, value(t)))
            .collect::<Vec<_>>(),
    )
}

/// Why the cheapest candidate of a rejection fails, from its tests.
fn rejection_text(x: &RejectionReport, c: &Constraints) -> String {
    let cheapest = &x.cheapest;
    let candidates = if x.count == 1 {
        "1 candidate".to_string()
    } else {
        format!("{} candidates", x.count)
    };
    let layout = &super::search_words::description(cheapest);
    match x.reason {
        Rejection::Budget => format!(
            "Over the budget ({candidates}). The cheapest: {layout}, {} over the budget of {}.",
            number(cheapest.cost - c.budget.unwrap_or(0.0)),
            c.budget.map_or("none".into(), number)
        ),
        Rejection::Untestable => {
            let mut failing: Vec<String> = Vec::new();
            let quasi: Vec<String> = cheapest
                .tests
                .iter()
                .filter(|t| t.verdict == Verdict::QuasiF && c.exact_only)
                .map(|t| t.label.clone())
                .collect();
            match quasi.len() {
                0 => {}
                1 => failing.push(format!(
                    "{} has only a quasi-F test, and the problem asks for exact F tests",
                    quasi[0]
                )),
                _ => failing.push(format!(
                    "{} have only quasi-F tests, and the problem asks for exact F tests",
                    and_list(&quasi)
                )),
            }
            failing.extend(
                cheapest
                    .tests
                    .iter()
                    .filter(|t| !t.verdict.is_testable())
                    .map(|t| {
                        format!(
                            "{} cannot be tested: {}",
                            t.label,
                            super::search_words::must_test_reason(t)
                        )
                    }),
            );
            format!(
                "Without an acceptable test ({candidates}). The cheapest: {layout}. There {}.",
                failing.join(". ")
            )
        }
        Rejection::MinDf => format!(
            "Too few denominator df ({candidates}; at least {} asked for). The cheapest: {layout}. Its den. df: {}.",
            c.min_df.map_or("-".into(), number),
            per_term(cheapest, |t| match (t.denominator_df, t.verdict) {
                (Some(d), _) => number(d),
                (None, Verdict::QuasiF) => {
                    "unknown (a quasi-F, whose Satterthwaite df need an [sd] table)".into()
                }
                (None, _) => "none".into(),
            })
        ),
        Rejection::Power => format!(
            "Too little power ({candidates}; at least {} asked for). The cheapest: {layout}. Its power: {}.",
            c.target_power.map_or("-".into(), |p| p.to_string()),
            per_term(cheapest, |t| opt(t.power, probability))
        ),
        Rejection::Limit => format!(
            "Beyond a capacity limit ({candidates}). The cheapest: {layout}; {}.",
            super::search_words::failure(cheapest, Rejection::Limit, c)
        ),
    }
}

/// The report in text or Markdown.
fn write(r: &SearchReport, page: Page) -> String {
    let power = has_power(r);
    let mut out = match page {
        Page::Text(_) => page.paragraph(&title(r)),
        Page::Markdown => format!("## {}\n", title(r)),
    };
    out.push('\n');
    out.push_str(&page.paragraph(&counts_line(r)));
    if let Page::Markdown = page {
        out.push('\n');
    }
    out.push_str(&page.paragraph(&constraints_line(r)));
    match &r.best {
        Some(b) => {
            out.push_str(&page.heading(&format!("Best layout ({})", b.structure)));
            out.push_str(&page.paragraph(&format!("{}.", super::search_words::description(b))));
            out.push('\n');
            out.push_str(&page.table(&test_header(power), test_rows(b, power)));
            if power && b.tests.iter().any(|t| t.min_detectable.is_some()) {
                out.push('\n');
                out.push_str(&page.paragraph(&format!(
                    "Detectable effect: the smallest effect the test finds with power {} (fixed terms: root mean square of the effects; random terms: standard deviation), in the response's units.",
                    r.constraints
                        .target_power
                        .map_or("as planned".to_string(), |p| p.to_string())
                )));
            }
        }
        None => {
            out.push_str(&page.heading("No layout meets every constraint"));
            if let Some(why) = &super::search_words::binding(r) {
                out.push_str(&page.paragraph(&sentence(&capitalise(why))));
            }
            if let Some(w) = &r.without_budget {
                if r.binding.is_some() {
                    out.push('\n');
                }
                let over = r.constraints.budget.map(|b| w.cost - b).unwrap_or(0.0);
                out.push_str(&page.paragraph(&format!(
                    "Without the budget, the cheapest layout that meets every other constraint is {} ({} over the budget; {}).",
                    super::search_words::description(w),
                    number(over),
                    w.structure
                )));
            }
        }
    }
    if !r.arrangements.is_empty() {
        out.push_str(&page.heading("Where the treatments go"));
        let best = r.best.as_ref().map(|b| b.cost);
        for a in &r.arrangements {
            out.push_str(&page.item(&super::search_words::arrangement(a, best, &r.constraints)));
        }
    }
    if r.candidates.len() > 1 {
        out.push_str(&page.heading(&format!(
            "The {} best candidates, cheapest first",
            r.candidates.len()
        )));
        out.push_str(&page.table(&ranked_header(power), ranked_rows(r, power)));
        out.push('\n');
        out.push_str(&page.paragraph(if power {
            "Levels are counted within each nest; den. df and power are those of the weakest must-test term."
        } else {
            "Levels are counted within each nest; den. df are those of the weakest must-test term."
        }));
    }
    if !r.frontier.is_empty() {
        out.push_str(
            &page.heading("Cost against power (each point has more power than every cheaper one)"),
        );
        out.push_str(&page.table(&FRONTIER_HEADER, frontier_rows(r)));
        if r.frontier.len() > FRONTIER_ROWS {
            out.push('\n');
            out.push_str(&page.paragraph(&format!(
                "{} more points in --format json.",
                r.frontier.len() - FRONTIER_ROWS
            )));
        }
    }
    if !r.rejections.is_empty() {
        out.push_str(&page.heading("Why candidates were rejected"));
        for x in &r.rejections {
            out.push_str(&page.item(&rejection_text(x, &r.constraints)));
        }
    }
    let notes = super::search_words::notes(&r.notes);
    if !notes.is_empty() {
        out.push_str(&page.heading("Notes"));
        for n in &notes {
            out.push_str(&page.item(&sentence(&capitalise(n))));
        }
    }
    out.push('\n');
    out.push_str(&page.paragraph(&super::search_words::caution()));
    out
}

fn capitalise(s: &str) -> String {
    let mut c = s.chars();
    match c.next() {
        Some(f) => f.to_uppercase().collect::<String>() + c.as_str(),
        None => String::new(),
    }
}

/// The factors whose level counts the CSV has a column for: every factor of any
/// candidate, in the layout's order (a factor one candidate leaves out is put back after
/// the factor it follows in the candidates that have it).
fn csv_factors(r: &SearchReport) -> Vec<String> {
    let mut names: Vec<String> = Vec::new();
    for c in &r.candidates {
        let mut at = 0;
        for f in &c.factors {
            match names.iter().position(|n| n == &f.name) {
                Some(k) => at = k + 1,
                None => {
                    names.insert(at, f.name.clone());
                    at += 1;
                }
            }
        }
    }
    names
}

/// `bench` -> `bench_levels`; a factor name is letters, digits, `_` and `-`, so this is
/// snake_case once lowered and `-` turned into `_`.
fn levels_column(factor: &str) -> String {
    format!("{}_levels", factor.to_lowercase().replace('-', "_"))
}

/// The ranked candidates as tidy CSV: one row per candidate and must-test term, the
/// candidate's own columns repeated on each of its rows; the level count of a factor a
/// candidate leaves out is empty.
fn csv(r: &SearchReport) -> String {
    let factors = csv_factors(r);
    let mut header: Vec<String> = ["rank", "structure", "cost", "observations", "replicates"]
        .iter()
        .map(|s| s.to_string())
        .collect();
    header.extend(factors.iter().map(|f| levels_column(f)));
    header.extend(
        [
            "term",
            "verdict",
            "tested_over",
            "denominator_df",
            "power",
            "min_detectable",
        ]
        .iter()
        .map(|s| s.to_string()),
    );
    let plain = |x: Option<f64>| {
        x.filter(|v| v.is_finite())
            .map_or(String::new(), |v| v.to_string())
    };
    let mut rows = Vec::new();
    for (i, c) in r.candidates.iter().enumerate() {
        let mut head = vec![
            (i + 1).to_string(),
            c.structure.clone(),
            plain(Some(c.cost)),
            c.observations.to_string(),
            c.replicates.to_string(),
        ];
        for name in &factors {
            head.push(
                c.factors
                    .iter()
                    .find(|f| &f.name == name)
                    .map_or(String::new(), |f| f.levels.to_string()),
            );
        }
        for t in &c.tests {
            let mut row = head.clone();
            row.extend([
                t.label.clone(),
                super::check::code(t.verdict).to_string(),
                if t.denominator.is_empty() {
                    String::new()
                } else {
                    combination(&t.denominator)
                },
                plain(t.denominator_df),
                plain(t.power),
                plain(t.min_detectable),
            ]);
            rows.push(row);
        }
    }
    let header: Vec<&str> = header.iter().map(String::as_str).collect();
    csv_table(&header, rows)
}

/// The search in `format`; text is laid out to `width`.
pub fn render(r: &SearchReport, format: Format, width: Width) -> String {
    match format {
        Format::Json => json(r),
        Format::Csv => csv(r),
        Format::Markdown => write(r, Page::Markdown),
        Format::Text => write(r, Page::Text(width)),
    }
}
