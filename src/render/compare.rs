//! Rendering of `compare` results.

use super::check::CAUTION;
use super::{Format, csv_table, json, markdown_table, num, text_table};
use crate::compare::{Comparison, SideTest, Status};

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
                Some(v) if v.is_testable() => t.tested_over.clone().unwrap_or_default(),
                Some(v) => v.name().to_string(),
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
        Status::Lost => "LOST",
        Status::Gained => "GAINED",
    }
}

fn rows(c: &Comparison) -> Vec<Vec<String>> {
    c.terms
        .iter()
        .filter(|t| t.label != "residual")
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

pub fn render(c: &Comparison, format: Format) -> String {
    match format {
        Format::Json => json(c),
        Format::Csv => csv_table(&HEADER, rows(c)),
        Format::Markdown | Format::Text => {
            let md = format == Format::Markdown;
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
            out.push_str(&if md {
                format!("## {title}\n\n")
            } else {
                format!("{title}\n\n")
            });
            out.push_str(&if md {
                markdown_table(&HEADER, rows(c))
            } else {
                text_table(&HEADER, rows(c))
            });
            let bullet = if md { "- " } else { "  note: " };
            out.push('\n');
            for n in &c.notes {
                out.push_str(&format!("{bullet}{n}\n"));
            }
            for n in &c.other.planning_notes {
                if !c.base.planning_notes.contains(n) {
                    out.push_str(&format!("{bullet}other layout: {n}\n"));
                }
            }
            if let Some(line) = cost_line(c) {
                out.push_str(&format!("{line}\n"));
            }
            out.push_str(&format!("\n{}\n", c.verdict));
            if !c.other.findings.is_empty() {
                out.push_str(if md {
                    "\n### What needs attention in the other layout\n\n"
                } else {
                    "\nWhat needs attention in the other layout:\n"
                });
                for f in &c.other.findings {
                    out.push_str(&format!("{}{f}\n", if md { "- " } else { "  - " }));
                }
            }
            out.push_str(&format!("\n{CAUTION}\n"));
            out
        }
    }
}

fn name(n: &str, fallback: &str) -> String {
    if n.is_empty() {
        fallback.to_string()
    } else {
        n.to_string()
    }
}
