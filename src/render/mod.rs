//! Renderers: the only place that formats. Each takes a job's result struct and returns
//! text; none computes statistics. Terminal text is laid out by [`text`], to a [`Width`]
//! that `cli` chooses.

pub mod analyze;
pub mod analyze_words;
pub mod check;
pub mod compare;
pub mod report;
pub mod search;
pub mod search_words;
pub mod simulate;
pub mod svg;
pub mod text;
pub mod words;

pub use text::Width;

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Format {
    Text,
    Json,
    Markdown,
    Csv,
}

/// A plain terminal table at its natural width (no wrapping): a rule under the header,
/// columns aligned, no colour. [`text::Table`] lays one out to fit a width.
pub fn text_table(header: &[&str], rows: Vec<Vec<String>>) -> String {
    text::Table::new(header)
        .with_rows(rows)
        .render(Width::UNLIMITED)
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

/// A number for a reader: [`text::number`] (four significant digits, whole numbers
/// bare, `-` when not finite).
pub fn num(x: f64) -> String {
    text::number(x)
}

/// Where a renderer's words go: terminal text laid out to a width, or Markdown (which
/// its viewer wraps). One renderer body can write both.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Page {
    Text(Width),
    Markdown,
}

impl Page {
    /// A paragraph: wrapped to the width, or one Markdown line.
    pub fn paragraph(self, s: &str) -> String {
        match self {
            Page::Text(w) => text::paragraph(s, w),
            Page::Markdown => format!("{s}\n"),
        }
    }

    /// A list item: `  - ` with a hanging indent, or a Markdown `- ` item.
    pub fn item(self, s: &str) -> String {
        match self {
            Page::Text(w) => text::item(s, w),
            Page::Markdown => format!("- {s}\n"),
        }
    }

    /// A table that fits the width, or a Markdown table.
    pub fn table<S: AsRef<str>>(self, header: &[S], rows: Vec<Vec<String>>) -> String {
        match self {
            Page::Text(w) => text::Table::new(header).with_rows(rows).render(w),
            Page::Markdown => {
                let header: Vec<&str> = header.iter().map(AsRef::as_ref).collect();
                markdown_table(&header, rows)
            }
        }
    }

    /// A section heading with a blank line before and after: `Means of light:` in text,
    /// `### Means of light` in Markdown.
    pub fn heading(self, s: &str) -> String {
        match self {
            Page::Text(w) => format!("\n{}\n", text::paragraph(&format!("{s}:"), w)),
            Page::Markdown => format!("\n### {s}\n\n"),
        }
    }
}

/// A sentence from a list of notes: the note as written, with a full stop added when it
/// has no closing punctuation.
pub fn sentence(note: &str) -> String {
    let t = note.trim_end();
    if t.ends_with(['.', '!', '?', ':']) {
        t.to_string()
    } else {
        format!("{t}.")
    }
}

/// A verdict and a combination of mean squares in words (see `words`).
pub use words::{denominator as combination, verdict as verdict_words};

/// `p = 0.0332`, or `p < 0.0001`.
pub fn p_equals(p: f64) -> String {
    let v = text::p_value(p);
    if v.starts_with('<') {
        format!("p {v}")
    } else {
        format!("p = {v}")
    }
}

/// `1 observation`, `3 observations`.
pub fn count(n: u64, one: &str, many: &str) -> String {
    format!("{n} {}", if n == 1 { one } else { many })
}

/// `a`, `a and b`, `a, b and c`.
pub fn and_list(items: &[String]) -> String {
    match items {
        [] => String::new(),
        [one] => one.clone(),
        [rest @ .., last] => format!("{} and {last}", rest.join(", ")),
    }
}
