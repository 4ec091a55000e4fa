//! Renderers: the only place that formats. Each takes a job's result struct and returns
//! text; none computes statistics.

pub mod analyze;
pub mod analyze_words;
pub mod check;
pub mod compare;
pub mod report;
pub mod search;
pub mod search_words;
pub mod simulate;
pub mod svg;
pub mod words;

use comfy_table::{Table, presets};

#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum Format {
    Text,
    Json,
    Markdown,
    Csv,
}

/// A plain terminal table: a rule under the header, columns aligned, no colour.
pub fn text_table(header: &[&str], rows: Vec<Vec<String>>) -> String {
    let mut table = Table::new();
    table.load_style(presets::NOTHING);
    table.set_header(header.to_vec());
    let rule: Vec<String> = header
        .iter()
        .map(|h| "-".repeat(h.chars().count().max(2)))
        .collect();
    table.add_row(rule);
    for row in rows {
        table.add_row(row);
    }
    for column in table.column_iter_mut() {
        column.set_padding((0, 2));
    }
    let mut out = String::new();
    for line in table.lines() {
        out.push_str(line.trim_end());
        out.push('\n');
    }
    out
}

/// A GitHub-flavoured Markdown table; pipes in cells are escaped.
pub fn markdown_table(header: &[&str], rows: Vec<Vec<String>>) -> String {
    let esc = |s: &str| s.replace('|', "\\|");
    let mut out = format!(
        "| {} |\n",
        header
            .iter()
            .map(|h| esc(h))
            .collect::<Vec<_>>()
            .join(" | ")
    );
    out.push_str(&format!("|{}\n", "---|".repeat(header.len())));
    for row in rows {
        out.push_str(&format!(
            "| {} |\n",
            row.iter().map(|c| esc(c)).collect::<Vec<_>>().join(" | ")
        ));
    }
    out
}

/// CSV with a header row, through the csv crate.
pub fn csv_table(header: &[&str], rows: Vec<Vec<String>>) -> String {
    let mut w = csv::Writer::from_writer(Vec::new());
    // Writing to memory cannot fail.
    let _ = w.write_record(header);
    for row in rows {
        let _ = w.write_record(&row);
    }
    let bytes = w.into_inner().unwrap_or_default();
    String::from_utf8(bytes).unwrap_or_default()
}

/// Pretty JSON of a result struct.
pub fn json<T: serde::Serialize>(value: &T) -> String {
    let mut s =
        serde_json::to_string_pretty(value).unwrap_or_else(|e| format!("{{\"error\":\"{e}\"}}"));
    s.push('\n');
    s
}

/// A number for a table: whole numbers bare, others to a sensible precision.
pub fn num(x: f64) -> String {
    if !x.is_finite() {
        return "-".into();
    }
    if x == x.round() && x.abs() < 1e12 {
        format!("{}", x as i64)
    } else if x.abs() >= 100.0 {
        format!("{x:.1}")
    } else {
        format!("{x:.2}")
    }
}
