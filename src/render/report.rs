//! The report as a self-contained HTML document (inline SVG, inline CSS, no scripts,
//! A4 print rules) or as Markdown with its figures written beside it.

use std::fmt::Write;

use super::num;
use super::svg::{self, esc};
use super::words::{self, CAUTION, ems as ems_text, tested_over};
use crate::findings::TestReport;
use crate::goal::Goal;
use crate::layout::{Convention, Kind, Layout};
use crate::planning::{Effect, PlanningValues};
use crate::report::Report;
use crate::term::REPLICATE;

fn convention_note(c: Convention) -> &'static str {
    match c {
        Convention::Restricted => {
            "restricted model: mixed interaction effects sum to zero over each fixed subscript (Cornfield and Tukey 1956, Annals of Mathematical Statistics 27:907-949)"
        }
        Convention::Unrestricted => {
            "unrestricted model: random interaction effects independent, with no sum-to-zero constraint (as in Searle's texts, e.g. Searle, Casella and McCulloch 1992, Variance Components)"
        }
    }
}

/// Why an unbalanced layout's report shows one convention.
const UNBALANCED_CONVENTION: &str = "The layout is unbalanced, and only the unrestricted model is defined for it (the restricted convention's sums to zero run over unequal numbers of observations), so there is no other convention to compare with. The coefficients are numerical (Hartley's synthesis), not exact fractions.";

/// What was removed from the full layout and which sums of squares the expected mean
/// squares are of.
fn unbalanced_sentence(u: &crate::findings::Summary) -> String {
    let what = match u.sums_of_squares {
        crate::layout::SumsOfSquares::Sequential => format!(
            "the expected mean squares are those of sequential sums of squares, the terms fitted in the order {}",
            u.fit_order.join(", ")
        ),
        crate::layout::SumsOfSquares::Type3 => {
            "the expected mean squares are those of type III sums of squares".to_string()
        }
    };
    format!(
        "Unbalanced: {} of the full layout's {} observations removed ({}); {what}.",
        u.removed_observations,
        u.full_observations,
        u.removals.join("; ")
    )
}

fn opt(x: Option<f64>, digits: usize) -> String {
    x.map_or("-".into(), |v| format!("{v:.digits$}"))
}

fn df_opt(x: Option<f64>) -> String {
    x.map_or("-".into(), num)
}

const STYLE: &str = "body{font-family:Georgia,serif;max-width:46em;margin:2em auto;padding:0 1em;color:#000;background:#fff;line-height:1.4}
h1{font-size:1.6em}h2{font-size:1.25em;border-bottom:1px solid #000;margin-top:1.6em}h3{font-size:1.05em}
table{border-collapse:collapse;margin:0.6em 0;font-size:0.9em}th,td{border:1px solid #000;padding:0.2em 0.45em;text-align:left;vertical-align:top}
th{font-weight:bold}td.n{text-align:right}figure{margin:0.8em 0;page-break-inside:avoid}figcaption{font-size:0.85em}
.caution{border:2px solid #000;padding:0.6em}code{font-size:0.9em}svg{max-width:100%;height:auto}
@page{size:A4;margin:18mm}@media print{body{max-width:none;margin:0}h2{page-break-after:avoid}table{page-break-inside:avoid}}";

/// The report as one HTML file.
pub fn html(report: &Report) -> String {
    let r = &view(report);
    let mut h = String::new();
    let _ = write!(
        h,
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\"/>\n<title>{}</title>\n<style>{STYLE}</style>\n</head>\n<body>\n<h1>{}</h1>\n",
        esc(r.title),
        esc(r.title)
    );
    let _ = writeln!(
        h,
        "<p class=\"caution\"><strong>Caution.</strong> {}</p>",
        esc(CAUTION)
    );
    h.push_str("<h2>The layout</h2>\n");
    for line in &r.description {
        let _ = writeln!(h, "<p>{}</p>", esc(line));
    }
    let _ = writeln!(
        h,
        "<figure>{}<figcaption>Figure 1. The factors and how they are nested: an arrow points from a factor to each factor nested within it; factors joined by no arrow are crossed.</figcaption></figure>",
        r.diagram
    );
    h.push_str("<table>\n<tr><th>factor</th><th>kind</th><th>levels</th><th>nested in</th><th>population</th></tr>\n");
    for f in &r.factors {
        let _ = writeln!(
            h,
            "<tr><td>{}</td><td>{}</td><td class=\"n\">{}</td><td>{}</td><td>{}</td></tr>",
            esc(&f.name),
            f.kind,
            f.levels,
            if f.within.is_empty() {
                "-".into()
            } else {
                esc(&f.within)
            },
            f.population.map_or("-".into(), |p| p.to_string())
        );
    }
    h.push_str("</table>\n");

    h.push_str("<h2>Expected mean squares</h2>\n");
    let _ = writeln!(
        h,
        "<p>Convention: the {}. Expected mean squares follow the rules of the tableau of subscripts; σ² is a variance component, κ² the quadratic component of a fixed term (the sum of its squared effects over its df).</p>",
        esc(convention_note(r.check.convention))
    );
    h.push_str("<table>\n<tr><th>term</th><th>kind</th><th>df</th><th>expected mean square</th><th>tested over</th><th>den. df</th><th>verdict</th></tr>\n");
    for t in &r.check.terms {
        let (over, ddf, verdict) = match &t.test {
            Some(x) => (
                if x.verdict.is_testable() {
                    tested_over(x)
                } else {
                    "none".into()
                },
                df_opt(x.denominator_df),
                words::verdict(x.verdict).to_string(),
            ),
            None => ("-".into(), "-".into(), "-".into()),
        };
        let _ = writeln!(
            h,
            "<tr><td>{}</td><td>{}</td><td class=\"n\">{}</td><td>{}</td><td>{}</td><td class=\"n\">{}</td><td>{}</td></tr>",
            esc(&t.label),
            if t.kind == crate::layout::Kind::Fixed {
                "fixed"
            } else {
                "random"
            },
            t.df,
            esc(&ems_text(t)),
            esc(&over),
            ddf,
            verdict
        );
    }
    h.push_str("</table>\n");
    if let Some(u) = &r.check.unbalanced {
        let _ = writeln!(h, "<p>{}</p>", esc(&unbalanced_sentence(u)));
        let notes = words::unbalanced_notes(u);
        if !notes.is_empty() {
            h.push_str("<ul>\n");
            for n in &notes {
                let _ = writeln!(h, "<li>{}</li>", esc(n));
            }
            h.push_str("</ul>\n");
        }
    }
    match r.other_convention {
        None => {
            let _ = writeln!(h, "<p>{}</p>", esc(UNBALANCED_CONVENTION));
        }
        Some(other) if r.differences.is_empty() => {
            let _ = writeln!(
                h,
                "<p>Under the {} convention every term would be tested over the same error term.</p>",
                other.name()
            );
        }
        Some(other) => {
            let _ = writeln!(
                h,
                "<p>Under the {} convention these terms would be tested differently:</p>\n<ul>",
                other.name()
            );
            for d in &r.differences {
                let _ = writeln!(
                    h,
                    "<li>{}: over {} here, over {} there.</li>",
                    esc(&d.label),
                    esc(&d.here),
                    esc(&d.there)
                );
            }
            h.push_str("</ul>\n");
        }
    }
    if !r.findings.is_empty() {
        h.push_str("<h3>What needs attention</h3>\n<ul>\n");
        for f in &r.findings {
            let _ = writeln!(h, "<li>{}</li>", esc(f));
        }
        h.push_str("</ul>\n");
    }

    h.push_str("<h2>The tests that matter</h2>\n");
    let mut figure = 2;
    for k in &r.key_terms {
        let _ = writeln!(h, "<h3>{}</h3>", esc(&k.label));
        let _ = writeln!(
            h,
            "<p>Verdict: <strong>{}</strong>; tested over {}, with {} denominator df. {}</p>",
            k.verdict,
            esc(&k.tested_over),
            df_opt(k.denominator_df),
            esc(&k.why)
        );
        let _ = writeln!(
            h,
            "<p>Power at alpha = {}: {}. Smallest effect found with power {} ({}): {}.</p>",
            r.check.alpha,
            opt(k.power, 3),
            r.check.target_power,
            k.scale,
            opt(k.min_detectable, 3)
        );
        if let Some(svg) = &k.curve {
            let _ = writeln!(
                h,
                "<figure>{svg}<figcaption>Figure {figure}. Power of the {} test against the size of the effect, under the planning values.</figcaption></figure>",
                esc(&k.label)
            );
            figure += 1;
        }
    }
    if let Some(c) = &r.check.cost {
        h.push_str("<h2>What it costs</h2>\n<table>\n<tr><th>item</th><th>units</th><th>per unit</th><th>cost</th></tr>\n");
        if c.overhead > 0.0 {
            let _ = writeln!(
                h,
                "<tr><td>overhead</td><td></td><td></td><td class=\"n\">{}</td></tr>",
                num(c.overhead)
            );
        }
        for l in &c.breakdown {
            let _ = writeln!(
                h,
                "<tr><td>{}</td><td class=\"n\">{}</td><td class=\"n\">{}</td><td class=\"n\">{}</td></tr>",
                esc(&l.label),
                l.units,
                num(l.per_unit),
                num(l.cost)
            );
        }
        let _ = writeln!(
            h,
            "<tr><th>total</th><td></td><td></td><th class=\"n\">{}</th></tr>\n</table>",
            num(c.total)
        );
    }
    for (heading, section, _) in &r.sections {
        let _ = writeln!(h, "<h2>{}</h2>\n{section}", esc(heading));
    }
    h.push_str("<h2>Planning values and reproduction</h2>\n<table>\n");
    for (k, v) in &r.planning {
        let _ = writeln!(h, "<tr><td>{}</td><td>{}</td></tr>", esc(k), esc(v));
    }
    h.push_str("</table>\n");
    for n in &words::planning_notes(&r.check.planning_gaps) {
        let _ = writeln!(h, "<p>Note: {}</p>", esc(n));
    }
    let _ = writeln!(
        h,
        "<p>Made by emsplan {}. To reproduce this report: <code>{}</code></p>",
        r.version,
        esc(r.command_line)
    );
    let _ = writeln!(
        h,
        "<p class=\"caution\">{}</p>\n</body>\n</html>",
        esc(CAUTION)
    );
    h
}

/// The report as Markdown. Figures are returned separately as (file name, SVG) for the
/// caller to write beside the Markdown file; the text links to them by name.
pub fn markdown(report: &Report, figure_prefix: &str) -> (String, Vec<(String, String)>) {
    let r = &view(report);
    let mut m = String::new();
    let mut figures = Vec::new();
    let _ = writeln!(m, "# {}\n\n> **Caution.** {CAUTION}\n", r.title);
    m.push_str("## The layout\n\n");
    // A layout of units is described in the check's section below, strata and all.
    if r.check.strata.is_none() {
        for line in &r.description {
            let _ = writeln!(m, "{line}\n");
        }
    }
    let name = format!("{figure_prefix}layout.svg");
    let _ = writeln!(
        m,
        "![Figure 1. The factors and how they are nested: an arrow points from a factor to each factor nested within it; factors joined by no arrow are crossed.]({name})\n"
    );
    figures.push((name, r.diagram.clone()));
    m.push_str("| factor | kind | levels | nested in | population |\n|---|---|---|---|---|\n");
    for f in &r.factors {
        let _ = writeln!(
            m,
            "| {} | {} | {} | {} | {} |",
            f.name,
            f.kind,
            f.levels,
            if f.within.is_empty() { "-" } else { &f.within },
            f.population.map_or("-".into(), |p| p.to_string())
        );
    }
    let _ = writeln!(
        m,
        "\n## Expected mean squares\n\nConvention: the {}.\n",
        convention_note(r.check.convention)
    );
    m.push_str(
        &super::check::render(r.check, super::Format::Markdown, super::Width::DEFAULT)
            .replacen("## ", "### ", 1),
    );
    match r.other_convention {
        None => {
            let _ = writeln!(m, "\n{UNBALANCED_CONVENTION}\n");
        }
        Some(other) if r.differences.is_empty() => {
            let _ = writeln!(
                m,
                "\nUnder the {} convention every term would be tested over the same error term.\n",
                other.name()
            );
        }
        Some(other) => {
            let _ = writeln!(
                m,
                "\nUnder the {} convention these terms would be tested differently:\n",
                other.name()
            );
            for d in &r.differences {
                let _ = writeln!(
                    m,
                    "- {}: over {} here, over {} there.",
                    d.label, d.here, d.there
                );
            }
            m.push('\n');
        }
    }
    m.push_str("## The tests that matter\n\n");
    for (i, k) in r.key_terms.iter().enumerate() {
        let _ = writeln!(
            m,
            "### {}\n\nVerdict: **{}**; tested over {}, with {} denominator df. {}\n\nPower at alpha = {}: {}. Smallest effect found with power {} ({}): {}.\n",
            k.label,
            k.verdict,
            k.tested_over,
            df_opt(k.denominator_df),
            k.why,
            r.check.alpha,
            opt(k.power, 3),
            r.check.target_power,
            k.scale,
            opt(k.min_detectable, 3)
        );
        if let Some(svg) = &k.curve {
            let name = format!("{figure_prefix}power-{}.svg", i + 1);
            let _ = writeln!(
                m,
                "![Power of the {} test against the size of the effect.]({name})\n",
                k.label
            );
            figures.push((name, svg.clone()));
        }
    }
    for (heading, _, section) in &r.sections {
        let _ = writeln!(m, "## {heading}\n\n{section}\n");
    }
    m.push_str("## Planning values and reproduction\n\n| value | setting |\n|---|---|\n");
    for (k, v) in &r.planning {
        let _ = writeln!(m, "| {k} | {v} |");
    }
    let _ = writeln!(
        m,
        "\nMade by emsplan {}. To reproduce this report: `{}`\n\n> {CAUTION}",
        r.version, r.command_line
    );
    (m, figures)
}

/// The Monte Carlo confirmation as a report section: (heading, HTML, Markdown).
pub fn monte_carlo_section(r: &crate::simulate::SimulateReport) -> (String, String, String) {
    let header = [
        "term",
        "E(MS)",
        "mean simulated MS",
        "rejections under the null",
        "analytic power",
        "simulated power",
        "agrees?",
    ];
    let rate = |x: &Option<crate::simulate::Rate>| {
        x.as_ref().map_or("-".to_string(), |r| {
            format!("{:.3} [{:.3}, {:.3}]", r.rate, r.low, r.high)
        })
    };
    let rows: Vec<Vec<String>> = r
        .terms
        .iter()
        .map(|t| {
            let test = t.test.as_ref();
            let flags = t.ms_flag || test.is_some_and(|x| x.null_flag || x.power_flag);
            vec![
                t.label.clone(),
                format!("{:.4}", t.expected_ms),
                t.mean_ms.map_or("-".into(), |m| format!("{m:.4}")),
                test.map_or("-".into(), |x| rate(&x.null)),
                test.and_then(|x| x.analytic_power)
                    .map_or("-".into(), |p| format!("{p:.3}")),
                test.map_or("-".into(), |x| rate(&x.power)),
                if flags {
                    "NO: see flags".into()
                } else {
                    "yes".into()
                },
            ]
        })
        .collect();
    let intro = format!(
        "{} simulated data sets (seed {}), under the {} convention; rejection rates at alpha = {} with {:.0}% Wilson score intervals. Under the null each term's own component is set to zero, so its rate should be near alpha; at the planning values it should be near the analytic power.",
        r.runs,
        r.seed,
        r.convention.name(),
        r.alpha,
        100.0 * r.confidence
    );
    let mut html = format!("<p>{}</p>\n<table>\n<tr>", esc(&intro));
    for h in header {
        let _ = write!(html, "<th>{}</th>", esc(h));
    }
    html.push_str("</tr>\n");
    for row in &rows {
        html.push_str("<tr>");
        for c in row {
            let _ = write!(html, "<td>{}</td>", esc(c));
        }
        html.push_str("</tr>\n");
    }
    html.push_str("</table>\n");
    let notes: Vec<String> = r
        .notes
        .iter()
        .map(super::analyze_words::simulation_note)
        .collect();
    for n in &notes {
        let _ = writeln!(html, "<p>Note: {}</p>", esc(n));
    }
    let mut md = format!("{intro}\n\n{}", super::markdown_table(&header, rows));
    for n in &notes {
        let _ = write!(md, "\nNote: {n}\n");
    }
    ("Monte Carlo confirmation".into(), html, md)
}

/// The design search as a report section: the alternatives considered, the
/// cost-versus-power frontier, and why the cheaper alternatives were rejected.
pub fn search_section(s: &crate::search::SearchReport) -> (String, String, String) {
    let mut html = String::new();
    let mut md = String::new();
    let intro = format!(
        "The search examined {} of the {} candidate layouts in {} structure{}; {} met every constraint.",
        s.examined,
        s.space,
        s.structures,
        if s.structures == 1 { "" } else { "s" },
        s.feasible
    );
    let _ = writeln!(html, "<p>{}</p>", esc(&intro));
    let _ = writeln!(md, "{intro}\n");
    match &s.best {
        Some(b) => {
            let line = format!("Chosen: {}.", super::search_words::description(b));
            let _ = writeln!(html, "<p><strong>{}</strong></p>", esc(&line));
            let _ = writeln!(md, "**{line}**\n");
        }
        None => {
            let line = format!(
                "No candidate met every constraint. {}",
                super::search_words::binding(s).unwrap_or_default()
            );
            let _ = writeln!(html, "<p><strong>{}</strong></p>", esc(&line));
            let _ = writeln!(md, "**{line}**\n");
        }
    }
    if !s.arrangements.is_empty() {
        html.push_str("<h3>Where the treatments go</h3>\n<ul>\n");
        md.push_str("### Where the treatments go\n\n");
        let best = s.best.as_ref().map(|b| b.cost);
        for a in &s.arrangements {
            let line = super::search_words::arrangement(a, best, &s.constraints);
            let _ = writeln!(html, "<li>{}</li>", esc(&line));
            let _ = writeln!(md, "- {line}");
        }
        html.push_str("</ul>\n");
        md.push('\n');
    }
    let header = [
        "rank",
        "layout",
        "cost",
        "smallest den. df",
        "smallest power",
    ];
    let rows: Vec<Vec<String>> = s
        .candidates
        .iter()
        .enumerate()
        .map(|(i, c)| {
            vec![
                (i + 1).to_string(),
                super::search_words::description(c),
                num(c.cost),
                df_opt(c.smallest_df),
                opt(c.smallest_power, 3),
            ]
        })
        .collect();
    if !rows.is_empty() {
        html.push_str("<h3>Alternatives considered</h3>\n<table>\n<tr>");
        for h in header {
            let _ = write!(html, "<th>{h}</th>");
        }
        html.push_str("</tr>\n");
        for row in &rows {
            html.push_str("<tr>");
            for c in row {
                let _ = write!(html, "<td>{}</td>", esc(c));
            }
            html.push_str("</tr>\n");
        }
        html.push_str("</table>\n");
        let _ = writeln!(
            md,
            "### Alternatives considered\n\n{}",
            super::markdown_table(&header, rows)
        );
    }
    let points: Vec<(f64, f64)> = s
        .frontier
        .iter()
        .filter_map(|c| Some((c.cost, c.smallest_power?)))
        .collect();
    if points.len() >= 2 {
        let svg = svg::chart(
            "Cost against power: the frontier",
            "cost",
            "smallest power of the must-test terms",
            &[svg::Series {
                label: "Pareto-optimal layouts".into(),
                points,
                dash: "",
                markers: true,
            }],
            Some((0.0, 1.0)),
            &s.constraints
                .target_power
                .map(|p| vec![(p, "target")])
                .unwrap_or_default(),
        );
        let _ = writeln!(
            html,
            "<h3>The cost of more power</h3>\n<figure>{svg}<figcaption>Each point is a layout no other layout beats on both cost and power.</figcaption></figure>"
        );
        let _ = writeln!(
            md,
            "### The cost of more power\n\nThe frontier (each layout no other beats on both cost and power):\n"
        );
        for c in &s.frontier {
            let _ = writeln!(
                md,
                "- {}: cost {}, smallest power {}",
                super::search_words::description(c),
                num(c.cost),
                opt(c.smallest_power, 3)
            );
        }
        md.push('\n');
    }
    if !s.rejections.is_empty() {
        html.push_str("<h3>Why the cheaper alternatives were rejected</h3>\n<ul>\n");
        md.push_str("### Why the cheaper alternatives were rejected\n\n");
        for r in &s.rejections {
            let line = format!(
                "{} candidate{} rejected ({}); the cheapest, at {}: {}",
                r.count,
                if r.count == 1 { "" } else { "s" },
                super::search_words::rejection(r.reason),
                num(r.cheapest.cost),
                super::search_words::why(r, &s.constraints)
            );
            let _ = writeln!(html, "<li>{}</li>", esc(&line));
            let _ = writeln!(md, "- {line}");
        }
        html.push_str("</ul>\n");
        md.push('\n');
    }
    ("The design search".into(), html, md)
}

/// What the document shows, in words and figures, built from the report job's data.
struct View<'a> {
    title: &'a str,
    version: &'a str,
    command_line: &'a str,
    check: &'a crate::findings::CheckReport,
    other_convention: Option<Convention>,
    differences: Vec<Difference>,
    description: Vec<String>,
    factors: Vec<FactorRow>,
    diagram: String,
    key_terms: Vec<KeyTerm>,
    planning: Vec<(String, String)>,
    /// (heading, html, markdown) of the search and the Monte Carlo run.
    sections: Vec<(String, String, String)>,
    findings: Vec<String>,
}

struct Difference {
    label: String,
    here: String,
    there: String,
}

struct FactorRow {
    name: String,
    kind: &'static str,
    levels: u64,
    within: String,
    population: Option<u64>,
}

struct KeyTerm {
    label: String,
    verdict: &'static str,
    tested_over: String,
    /// Why that error term: the components the two expected mean squares share.
    why: String,
    denominator_df: Option<f64>,
    power: Option<f64>,
    min_detectable: Option<f64>,
    /// "root mean square of effects" or "standard deviation".
    scale: &'static str,
    curve: Option<String>,
}

fn over(t: &TestReport) -> String {
    if t.verdict.is_testable() {
        tested_over(t)
    } else {
        words::verdict(t.verdict).to_string()
    }
}

fn view(r: &Report) -> View<'_> {
    let layout = &r.layout;
    let s = &layout.structure;
    let factors: Vec<FactorRow> = s
        .factors
        .iter()
        .enumerate()
        .map(|(i, f)| FactorRow {
            name: f.name.clone(),
            kind: kind_name(f.kind),
            levels: layout.levels.per_factor[i],
            within: names(layout, f.within),
            population: f.population,
        })
        .collect();
    let nodes: Vec<svg::Node> = s
        .factors
        .iter()
        .enumerate()
        .map(|(i, f)| svg::Node {
            name: f.name.clone(),
            detail: format!(
                "{}, {} level{}{}",
                kind_name(f.kind),
                layout.levels.per_factor[i],
                if layout.levels.per_factor[i] == 1 {
                    ""
                } else {
                    "s"
                },
                if f.within != 0 { " each" } else { "" }
            ),
            parents: (0..s.factors.len())
                .filter(|j| f.within & (1 << j) != 0)
                .collect(),
        })
        .collect();
    let mut sections = Vec::new();
    if let Some(found) = &r.search {
        sections.push(search_section(found));
    }
    if let Some(mc) = &r.monte_carlo {
        sections.push(monte_carlo_section(mc));
    }
    View {
        title: &r.title,
        version: r.version,
        command_line: &r.command_line,
        check: &r.check,
        other_convention: r.other_convention,
        differences: r
            .differences
            .iter()
            .map(|d| Difference {
                label: d.label.clone(),
                here: over(&d.here),
                there: over(&d.there),
            })
            .collect(),
        description: match &r.check.strata {
            // A layout of units is described by its units, as the experimenter plans it.
            Some(st) => {
                let mut lines = words::strata_lines(st);
                lines.extend(words::additivity_note(st));
                lines.push(words::interest_note(&r.check));
                lines
            }
            None => describe(layout),
        },
        factors,
        diagram: svg::layout_diagram(&nodes, "Nesting and crossing of the factors"),
        key_terms: r
            .key_terms
            .iter()
            .map(|k| key_term(&r.check, k, r.plan.alpha))
            .collect(),
        planning: planning_rows(layout, &r.plan, &r.goal),
        sections,
        findings: words::findings(&r.check),
    }
}

fn kind_name(k: Kind) -> &'static str {
    match k {
        Kind::Fixed => "fixed",
        Kind::Random => "random",
    }
}

fn names(layout: &Layout, mask: u32) -> String {
    layout.structure.names(mask).join(", ")
}

/// The layout in words: one sentence per factor, then the replication.
fn describe(layout: &Layout) -> Vec<String> {
    let s = &layout.structure;
    let mut out: Vec<String> = s
        .factors
        .iter()
        .enumerate()
        .map(|(i, f)| {
            let n = layout.levels.per_factor[i];
            let what = match f.kind {
                Kind::Fixed => "a fixed factor (its levels are the ones compared)".to_string(),
                Kind::Random => match f.population {
                    Some(p) => {
                        format!("a random factor (its levels are {n} of a population of {p})")
                    }
                    None => {
                        "a random factor (its levels stand for a larger population)".to_string()
                    }
                },
            };
            let total: u64 = n * s
                .factors
                .iter()
                .enumerate()
                .filter(|(j, _)| f.ancestors & (1 << j) != 0)
                .map(|(j, _)| layout.levels.per_factor[j])
                .product::<u64>();
            if f.within == 0 {
                format!("{} is {what}, with {n} levels.", f.name)
            } else {
                format!(
                    "{} is {what}, with {n} in each level of {} ({total} in all), nested there.",
                    f.name,
                    names(layout, f.within)
                )
            }
        })
        .collect();
    let crossed: Vec<String> = s
        .factors
        .iter()
        .enumerate()
        .flat_map(|(i, a)| {
            s.factors
                .iter()
                .enumerate()
                .skip(i + 1)
                .filter_map(move |(j, b)| {
                    let related = a.ancestors & (1 << j) != 0 || b.ancestors & (1 << i) != 0;
                    (!related).then(|| format!("{} x {}", a.name, b.name))
                })
        })
        .collect();
    if !crossed.is_empty() {
        out.push(format!("Crossed: {}.", crossed.join(", ")));
    }
    if !s.omitted.is_empty() {
        let omitted: Vec<String> = s
            .omitted
            .iter()
            .map(|&m| crate::layout::term_of(s, m).short_label(s))
            .collect();
        out.push(format!(
            "Assumed absent (an assumption, not a measurement): {}.",
            omitted.join(", ")
        ));
    }
    let each = format!(
        "{} observation{}",
        layout.levels.replicates,
        if layout.levels.replicates == 1 {
            ""
        } else {
            "s"
        }
    );
    if layout.removed.is_empty() {
        out.push(format!(
            "Each cell holds {each}: {} observations in all.",
            layout.observations()
        ));
    } else {
        let removals: Vec<String> = layout.removed.iter().map(|r| r.describe(s)).collect();
        out.push(format!(
            "Each cell of the full layout holds {each} ({} in all); the layout removes {}, leaving {}.",
            layout.levels.observations(),
            removals.join("; "),
            layout.observations()
        ));
    }
    out
}

fn key_term(
    report: &crate::findings::CheckReport,
    k: &crate::report::KeyTerm,
    alpha: f64,
) -> KeyTerm {
    let t = &k.term;
    let test = t.test.as_ref();
    let scale = match t.kind {
        Kind::Fixed => "root mean square of effects",
        Kind::Random => "standard deviation",
    };
    let sym = |c: &crate::findings::Component| words::symbol(c.kind, c.residual, &c.short_label);
    let why = match test {
        Some(x) if x.verdict.is_testable() => {
            // A fixed term's error term reproduces the random components and σ² of its
            // expectation; another fixed term's κ² (which only an unbalanced layout's
            // sequential sums of squares put there) it does not.
            let fixed_other = |c: &crate::findings::Component| {
                t.kind == Kind::Fixed && c.id != t.id && !c.residual && c.kind == Kind::Fixed
            };
            let shared: Vec<String> = t
                .ems
                .iter()
                .filter(|c| c.id != t.id && !fixed_other(c))
                .map(sym)
                .collect();
            let carried: Vec<String> = t.ems.iter().filter(|c| fixed_other(c)).map(sym).collect();
            if carried.is_empty() {
                format!(
                    "E(MS) = {}; the error term's expectation holds everything but the term's own component: {}.",
                    ems_text(t),
                    shared.join(", ")
                )
            } else {
                format!(
                    "E(MS) = {}; the error term's expectation holds its random components and σ²: {}. It also carries {}, which the error term does not: with sequential sums of squares the test is not of the term's own effects alone (see the notes).",
                    ems_text(t),
                    shared.join(", "),
                    carried.join(", ")
                )
            }
        }
        Some(x) => words::reason(t, x).unwrap_or_default(),
        None => String::new(),
    };
    let curve = (!k.curve.is_empty()).then(|| {
        let series = vec![svg::Series {
            label: format!("power of {}", t.label),
            points: k.curve.clone(),
            dash: "",
            markers: false,
        }];
        let unit = match t.kind {
            Kind::Fixed => "effect (root mean square)",
            Kind::Random => "standard deviation",
        };
        svg::chart(
            &format!("Power of the {} test", t.label),
            unit,
            "power",
            &series,
            Some((0.0, 1.0)),
            &[(report.target_power, "target"), (alpha, "alpha")],
        )
    });
    KeyTerm {
        label: t.label.clone(),
        verdict: test.map_or("-", |x| words::verdict(x.verdict)),
        tested_over: test.map_or("-".into(), over),
        why,
        denominator_df: test.and_then(|x| x.denominator_df),
        power: test.and_then(|x| x.power),
        min_detectable: test.and_then(|x| x.min_detectable),
        scale,
        curve,
    }
}

fn planning_rows(layout: &Layout, plan: &PlanningValues, goal: &Goal) -> Vec<(String, String)> {
    let s = &layout.structure;
    let label = |m: u32| {
        if m == REPLICATE {
            "residual".to_string()
        } else {
            crate::layout::term_of(s, m).short_label(s)
        }
    };
    let mut rows = vec![
        ("alpha".to_string(), format!("{}", plan.alpha)),
        (
            "power for minimum detectable effects".to_string(),
            format!("{}", plan.power),
        ),
    ];
    for (m, sd) in &plan.priors {
        rows.push((format!("planning SD of {}", label(*m)), format!("{sd}")));
    }
    for (m, e) in &plan.effects {
        let v = match e {
            Effect::RootMeanSquare(x) => format!("{x} (root mean square)"),
            Effect::Range(d) => format!("range {d} (least favourable configuration)"),
        };
        rows.push((format!("smallest effect of {}", label(*m)), v));
    }
    if let Some(c) = &plan.cost {
        rows.push(("overhead".to_string(), format!("{}", c.overhead)));
        for (m, price) in &c.per_unit {
            rows.push((
                format!("cost per unit of {}", label(*m)),
                format!("{price}"),
            ));
        }
    }
    if !goal.must_test.is_empty() {
        let terms: Vec<String> = goal.must_test.iter().map(|&m| label(m)).collect();
        rows.push(("must test".to_string(), terms.join(", ")));
    }
    if let Some(d) = goal.min_df {
        rows.push(("minimum denominator df".to_string(), format!("{d}")));
    }
    if let Some(p) = goal.target_power {
        rows.push(("target power".to_string(), format!("{p}")));
    }
    rows
}
