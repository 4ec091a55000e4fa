//! Text for a terminal: prose wrapped to a width, tables that fit it, and numbers written
//! with the digits their scale calls for.
//!
//! Every text renderer lays its output out with this module. The width is a value that
//! `cli` hands down (from `COLUMNS`, or the terminal, or [`Width::DEFAULT`]); nothing here
//! reads the environment.
//!
//! - **Prose** ([`paragraph`], [`item`], [`wrap_with`]) breaks at spaces only: never
//!   inside a word, and never inside square brackets, so `MS[chamber x cultivar(light)]`
//!   and an interval such as `[0.012, 0.125]` stay whole. A token longer than the width
//!   stands alone on its line and runs past it; nothing is cut or hyphenated.
//! - **Tables** ([`Table`]) keep one plain style: the header, a rule of dashes under each
//!   heading, two spaces between columns, no colour, no trailing spaces. When the natural
//!   table is too wide, headings wrap first, then the widest columns wrap their cells; when
//!   even the longest words of every column cannot sit side by side, each row is written
//!   as a block of `heading: value` lines instead.
//! - **Numbers** ([`number`], [`p_value`], [`probability`]) carry four significant
//!   digits, whole numbers bare.

use textwrap::core::{Word, display_width};
use textwrap::{Options, WordSeparator, WordSplitter, WrapAlgorithm};

/// The number of terminal columns text is laid out in.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Width(usize);

impl Width {
    /// When neither `COLUMNS` nor a terminal says otherwise: 100 columns.
    pub const DEFAULT: Width = Width(100);
    /// The narrowest width honoured; a narrower request is raised to it, since below it a
    /// heading and its value no longer fit on a line together.
    pub const NARROWEST: usize = 20;
    /// No limit: tables at their natural width, a paragraph on one line.
    pub const UNLIMITED: Width = Width(usize::MAX);

    /// A width of `columns`, at least [`Width::NARROWEST`].
    pub fn new(columns: usize) -> Width {
        Width(columns.max(Self::NARROWEST))
    }

    /// The columns available.
    pub fn columns(self) -> usize {
        self.0
    }
}

impl Default for Width {
    fn default() -> Self {
        Self::DEFAULT
    }
}

/// Columns of blank between two table columns.
const GAP: usize = 2;

/// The words of one line, for wrapping: a word runs to the next stretch of spaces, and
/// spaces inside balanced square brackets do not end it.
fn words(line: &str) -> Box<dyn Iterator<Item = Word<'_>> + '_> {
    Box::new(split_words(line).into_iter().map(Word::from))
}

/// The pieces of `line` that wrapping keeps whole, each with its trailing spaces.
fn split_words(line: &str) -> Vec<&str> {
    let bytes = line.as_bytes();
    let balanced = {
        let mut depth = 0i64;
        bytes.iter().all(|&b| {
            match b {
                b'[' => depth += 1,
                b']' => depth -= 1,
                _ => {}
            }
            depth >= 0
        }) && depth == 0
    };
    let mut pieces = Vec::new();
    let (mut start, mut depth, mut i) = (0, 0usize, 0);
    while i < bytes.len() {
        match bytes[i] {
            b'[' if balanced => depth += 1,
            b']' if balanced => depth -= 1,
            b' ' if depth == 0 => {
                while i < bytes.len() && bytes[i] == b' ' {
                    i += 1;
                }
                pieces.push(&line[start..i]);
                start = i;
                continue;
            }
            _ => {}
        }
        i += 1;
    }
    if start < bytes.len() {
        pieces.push(&line[start..]);
    }
    // A comparison sign stays with its two sides: `p < 0.0001`, `D ≤ 0`.
    let mut groups: Vec<(usize, usize)> = Vec::with_capacity(pieces.len());
    let (mut offset, mut glue) = (0, false);
    for p in pieces {
        let end = offset + p.len();
        let sign = COMPARISONS.contains(&p.trim_end_matches(' '));
        match groups.last_mut() {
            Some(last) if glue || sign => last.1 = end,
            _ => groups.push((offset, end)),
        }
        glue = sign;
        offset = end;
    }
    groups.into_iter().map(|(a, b)| &line[a..b]).collect()
}

/// Signs that never end a line: a line break after one would part it from its value.
const COMPARISONS: [&str; 6] = ["<", ">", "≤", "≥", "=", "≈"];

/// The display width of the widest word of `text` (0 for blank text).
fn widest_word(text: &str) -> usize {
    text.lines()
        .flat_map(split_words)
        .map(|w| display_width(w.trim_end_matches(' ')))
        .max()
        .unwrap_or(0)
}

/// The display width of the widest line of `text`.
fn widest_line(text: &str) -> usize {
    text.lines().map(display_width).max().unwrap_or(0)
}

/// The lines of `text` wrapped to `columns`, without line ends. The first line starts
/// with `first`, the others with `rest`; a `\n` in the text is a line break kept.
fn wrap_lines(text: &str, columns: usize, first: &str, rest: &str) -> Vec<String> {
    let options = Options::new(columns.max(1))
        .initial_indent(first)
        .subsequent_indent(rest)
        .break_words(false)
        .word_separator(WordSeparator::Custom(words))
        .word_splitter(WordSplitter::NoHyphenation)
        .wrap_algorithm(WrapAlgorithm::FirstFit);
    textwrap::wrap(text, options)
        .into_iter()
        .map(|l| l.trim_end().to_string())
        .collect()
}

/// `text` wrapped to `width`, every line ended by a newline: the first line starts with
/// `first`, the following ones with `rest` (a hanging indent when `rest` is as wide as
/// `first`). A `\n` in the text starts a new line, indented by `rest`.
///
/// ```
/// use emsplan::render::text::{Width, wrap_with};
/// assert_eq!(
///     wrap_with("light: tested over chamber(light)", Width::new(20), "  ", "    "),
///     "  light: tested over\n    chamber(light)\n"
/// );
/// ```
pub fn wrap_with(text: &str, width: Width, first: &str, rest: &str) -> String {
    let mut out = String::new();
    if width == Width::UNLIMITED {
        for (k, line) in text.split('\n').enumerate() {
            out.push_str(if k == 0 { first } else { rest });
            out.push_str(line.trim_end());
            out.push('\n');
        }
        return out;
    }
    for line in wrap_lines(text, width.columns(), first, rest) {
        out.push_str(&line);
        out.push('\n');
    }
    out
}

/// A paragraph of prose wrapped to `width`, every line ended by a newline.
pub fn paragraph(text: &str, width: Width) -> String {
    wrap_with(text, width, "", "")
}

/// A list item: `  - ` and the text, its following lines indented under the text.
pub fn item(text: &str, width: Width) -> String {
    wrap_with(text, width, "  - ", "    ")
}

/// A plain table for a terminal, laid out to fit a [`Width`] by [`Table::render`].
///
/// Cells are text; a `\n` in a cell is a line break. A row shorter than the header is
/// padded with empty cells.
///
/// ```
/// use emsplan::render::text::{Table, Width};
/// let mut t = Table::new(&["term", "df"]);
/// t.row(vec!["light".into(), "2".into()]);
/// assert_eq!(t.render(Width::DEFAULT), "term   df\n----   --\nlight  2\n");
/// ```
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct Table {
    header: Vec<String>,
    rows: Vec<Vec<String>>,
}

impl Table {
    /// A table with these headings and no rows yet.
    pub fn new<S: AsRef<str>>(header: &[S]) -> Table {
        Table {
            header: header.iter().map(|h| h.as_ref().to_string()).collect(),
            rows: Vec::new(),
        }
    }

    /// Adds a row.
    pub fn row(&mut self, cells: Vec<String>) -> &mut Table {
        self.rows.push(cells);
        self
    }

    /// The table with these rows added.
    pub fn with_rows(mut self, rows: impl IntoIterator<Item = Vec<String>>) -> Table {
        self.rows.extend(rows);
        self
    }

    /// Whether the table has no rows.
    pub fn is_empty(&self) -> bool {
        self.rows.is_empty()
    }

    fn columns(&self) -> usize {
        self.rows
            .iter()
            .map(Vec::len)
            .chain([self.header.len()])
            .max()
            .unwrap_or(0)
    }

    fn cell(&self, row: usize, column: usize) -> &str {
        self.rows[row].get(column).map_or("", String::as_str)
    }

    fn heading(&self, column: usize) -> &str {
        self.header.get(column).map_or("", String::as_str)
    }

    /// The table laid out in `width` columns, every line ended by a newline.
    ///
    /// Column widths are chosen in three steps, each taken only when the one before does
    /// not fit: every cell and heading on one line; headings wrapped at their spaces; cells
    /// wrapped down towards their longest word. Within a step the columns that need the
    /// least room to stay whole get it first, and the rest share what is left.
    /// When even the longest words do not fit side by side, the rows are stacked
    /// ([`Table::stacked`]).
    pub fn render(&self, width: Width) -> String {
        let n = self.columns();
        if n == 0 {
            return String::new();
        }
        let rows = 0..self.rows.len();
        let cells_line = |c: usize| {
            rows.clone()
                .map(|r| widest_line(self.cell(r, c)))
                .max()
                .unwrap_or(0)
        };
        let cells_word = |c: usize| {
            rows.clone()
                .map(|r| widest_word(self.cell(r, c)))
                .max()
                .unwrap_or(0)
        };
        // The rule under a heading is at least two dashes wide.
        let rule = |c: usize| widest_line(self.heading(c)).max(2);
        let heading_word = |c: usize| widest_word(self.heading(c)).max(2);
        let natural: Vec<usize> = (0..n).map(|c| cells_line(c).max(rule(c))).collect();
        let headings_wrapped: Vec<usize> =
            (0..n).map(|c| cells_line(c).max(heading_word(c))).collect();
        let words_only: Vec<usize> = (0..n).map(|c| cells_word(c).max(heading_word(c))).collect();
        let available = width.columns().saturating_sub(GAP * (n - 1));
        let sum = |v: &[usize]| v.iter().sum::<usize>();
        let widths = if sum(&natural) <= available {
            natural
        } else if sum(&headings_wrapped) <= available {
            fill(&headings_wrapped, &natural, available)
        } else if sum(&words_only) <= available {
            fill(&words_only, &headings_wrapped, available)
        } else {
            return self.stacked(width);
        };
        // Wrap every cell at its column's width, then narrow each column to what its
        // lines use (a column given room it cannot fill gives it back).
        let wrap_cell = |text: &str, w: usize| -> Vec<String> {
            if widest_line(text) <= w {
                text.lines().map(str::to_string).collect()
            } else {
                wrap_lines(text, w, "", "")
            }
        };
        let header: Vec<Vec<String>> = (0..n)
            .map(|c| wrap_cell(self.heading(c), widths[c]))
            .collect();
        let body: Vec<Vec<Vec<String>>> = rows
            .map(|r| {
                (0..n)
                    .map(|c| wrap_cell(self.cell(r, c), widths[c]))
                    .collect()
            })
            .collect();
        let used = |lines: &[String]| lines.iter().map(|l| display_width(l)).max().unwrap_or(0);
        let rules: Vec<Vec<String>> = header
            .iter()
            .map(|lines| vec!["-".repeat(used(lines).max(2))])
            .collect();
        let widths: Vec<usize> = (0..n)
            .map(|c| {
                body.iter()
                    .map(|row| used(&row[c]))
                    .chain([used(&rules[c])])
                    .max()
                    .unwrap_or(0)
            })
            .collect();
        let mut out = String::new();
        push_row(&mut out, &header, &widths);
        push_row(&mut out, &rules, &widths);
        for row in &body {
            push_row(&mut out, row, &widths);
        }
        out
    }

    /// Every row as a block: `heading: value` for its first cell, then one indented line
    /// (with a hanging indent) for each other cell that is not empty; a blank line between
    /// blocks. For tables too wide to lay out in columns.
    ///
    /// ```
    /// use emsplan::render::text::{Table, Width};
    /// let mut t = Table::new(&["term", "tested over"]);
    /// t.row(vec!["light".into(), "chamber(light)".into()]);
    /// assert_eq!(t.stacked(Width::DEFAULT), "term: light\n  tested over: chamber(light)\n");
    /// ```
    pub fn stacked(&self, width: Width) -> String {
        let n = self.columns();
        let mut out = String::new();
        for r in 0..self.rows.len() {
            if r > 0 {
                out.push('\n');
            }
            for c in 0..n {
                let value = self.cell(r, c);
                if c > 0 && value.trim().is_empty() {
                    continue;
                }
                let heading = self.heading(c).replace('\n', " ");
                let line = if heading.is_empty() {
                    value.to_string()
                } else {
                    format!("{heading}: {value}")
                };
                if c == 0 {
                    out.push_str(&wrap_with(&line, width, "", "  "));
                } else {
                    out.push_str(&wrap_with(&line, width, "  ", "    "));
                }
            }
        }
        out
    }
}

/// Widths between `low` and `high` (column by column) that add up to at most `available`
/// (at least the sum of `low`). The columns that need the least to reach `high` get it
/// first, so that as few columns as possible wrap; the room left is shared among the
/// others by water-filling (a common cap, the narrower ones whole).
fn fill(low: &[usize], high: &[usize], available: usize) -> Vec<usize> {
    let need = |c: usize| high[c].saturating_sub(low[c]);
    let mut widths = low.to_vec();
    let mut spare = available.saturating_sub(low.iter().sum());
    let mut order: Vec<usize> = (0..low.len()).collect();
    order.sort_by_key(|&c| need(c));
    let mut short = Vec::new();
    for c in order {
        if need(c) <= spare {
            widths[c] = high[c].max(low[c]);
            spare -= need(c);
        } else {
            short.push(c);
        }
    }
    // The largest cap whose columns still fit in the spare room.
    let extra = |cap: usize| -> usize {
        short
            .iter()
            .map(|&c| cap.clamp(low[c], high[c]) - low[c])
            .sum()
    };
    let (mut lo, mut hi) = (0usize, short.iter().map(|&c| high[c]).max().unwrap_or(0));
    while lo < hi {
        let mid = (lo + hi).div_ceil(2);
        if extra(mid) <= spare {
            lo = mid;
        } else {
            hi = mid - 1;
        }
    }
    spare -= extra(lo);
    for &c in &short {
        widths[c] = lo.clamp(low[c], high[c]);
    }
    for &c in &short {
        if spare > 0 && widths[c] < high[c] {
            widths[c] += 1;
            spare -= 1;
        }
    }
    widths
}

/// One table row of wrapped cells, the columns side by side.
fn push_row(out: &mut String, cells: &[Vec<String>], widths: &[usize]) {
    let height = cells.iter().map(Vec::len).max().unwrap_or(0).max(1);
    for k in 0..height {
        let mut line = String::new();
        for (c, lines) in cells.iter().enumerate() {
            let text = lines.get(k).map_or("", String::as_str);
            line.push_str(text);
            if c + 1 < cells.len() {
                let pad = widths[c].saturating_sub(display_width(text)) + GAP;
                line.extend(std::iter::repeat_n(' ', pad));
            }
        }
        out.push_str(line.trim_end());
        out.push('\n');
    }
}

/// Significant digits of [`number`].
pub const SIGNIFICANT: usize = 4;

/// A number for a reader, with digits suited to its scale:
///
/// - four significant digits, trailing zeros dropped: `51.75`, `0.0016`, `6.333`, `-3.5`;
/// - whole numbers bare: `72`, `1978`;
/// - from 1000 up, rounded to the unit (`12346`), with no thousands separator, since
///   our prose separates list items with commas (`light 3, cultivar 4`);
/// - from 1e9 up and below 1e-4 in magnitude, scientific: `1.235e9`, `2.5e-5`;
/// - `-` for a value that is not finite.
///
/// ```
/// use emsplan::render::text::number;
/// assert_eq!(number(0.0016), "0.0016");
/// assert_eq!(number(12345.678), "12346");
/// assert_eq!(number(51.75), "51.75");
/// ```
pub fn number(x: f64) -> String {
    if !x.is_finite() {
        return "-".into();
    }
    if x == 0.0 {
        return "0".into();
    }
    let a = x.abs();
    if !(1e-4..1e9).contains(&a) {
        let digits = SIGNIFICANT - 1;
        let text = format!("{x:.digits$e}");
        return match text.split_once('e') {
            Some((mantissa, exponent)) => format!("{}e{exponent}", trim_zeros(mantissa)),
            None => text,
        };
    }
    if a >= 1000.0 {
        return format!("{x:.0}");
    }
    let magnitude = a.log10().floor() as i32;
    let decimals = (SIGNIFICANT as i32 - 1 - magnitude).max(0) as usize;
    trim_zeros(&format!("{x:.decimals$}")).to_string()
}

/// Numbers of one scale (the means of a table) with the same decimals, so that they
/// line up and read alike: as many decimals as four significant digits of the largest
/// magnitude need, trailing zeros kept (`10.60`, `12.09`). Falls back to [`number`] for
/// each when the largest magnitude is 0, not finite, or outside [1e-4, 1e9).
///
/// ```
/// use emsplan::render::text::same_decimals;
/// assert_eq!(same_decimals(&[10.6, 12.09, 9.0]), ["10.60", "12.09", "9.00"]);
/// ```
pub fn same_decimals(xs: &[f64]) -> Vec<String> {
    let largest = xs.iter().map(|x| x.abs()).fold(0.0, f64::max);
    if !(1e-4..1e9).contains(&largest) || xs.iter().any(|x| !x.is_finite()) {
        return xs.iter().map(|&x| number(x)).collect();
    }
    let magnitude = largest.log10().floor() as i32;
    let decimals = (SIGNIFICANT as i32 - 1 - magnitude).max(0) as usize;
    xs.iter()
        .map(|&x| {
            let t = format!("{x:.decimals$}");
            // `-0.00` reads as a sign without a value.
            if t.trim_start_matches('-')
                .chars()
                .all(|c| c == '0' || c == '.')
            {
                t.trim_start_matches('-').to_string()
            } else {
                t
            }
        })
        .collect()
}

/// `12.500` -> `12.5`, `3.000` -> `3`; text without a decimal point is left alone.
fn trim_zeros(text: &str) -> &str {
    if text.contains('.') {
        text.trim_end_matches('0').trim_end_matches('.')
    } else {
        text
    }
}

/// A p-value: four decimals (`0.0332`, `0.0500`), or `< 0.0001`; `-` when not finite.
pub fn p_value(p: f64) -> String {
    if !p.is_finite() {
        "-".into()
    } else if p < 1e-4 {
        "< 0.0001".into()
    } else {
        format!("{p:.4}")
    }
}

/// A probability (a power, a rejection rate, an interval's end): three decimals
/// (`0.480`); exactly 0 and 1 bare; a value that three decimals would show as 0 or 1 but
/// is not, as `< 0.001` or `> 0.999`; `-` when not finite.
pub fn probability(x: f64) -> String {
    if !x.is_finite() {
        "-".into()
    } else if x == 0.0 || x == 1.0 {
        format!("{x}")
    } else if x > 0.0 && x < 0.0005 {
        "< 0.001".into()
    } else if (0.9995..1.0).contains(&x) {
        "> 0.999".into()
    } else {
        format!("{x:.3}")
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn table(header: &[&str], rows: &[&[&str]]) -> Table {
        Table::new(header).with_rows(
            rows.iter()
                .map(|r| r.iter().map(|c| c.to_string()).collect()),
        )
    }

    /// Every line of `text` fits `columns`, or is a single word.
    fn fits(text: &str, columns: usize) -> bool {
        text.lines()
            .all(|l| display_width(l) <= columns || split_words(l.trim()).len() == 1)
    }

    #[test]
    fn prose_wraps_at_spaces() {
        // Expected strings worked by hand: first fit, breaking at the last space that
        // keeps the line within the width.
        let text = "Each term is tested over its planned error term; p is the upper tail.";
        assert_eq!(
            paragraph(text, Width::new(30)),
            "Each term is tested over its\nplanned error term; p is the\nupper tail.\n"
        );
        assert_eq!(paragraph(text, Width::UNLIMITED), format!("{text}\n"));
        assert_eq!(paragraph("", Width::DEFAULT), "\n");
    }

    #[test]
    fn list_items_hang_under_their_text() {
        assert_eq!(
            item(
                "negative variance component estimate for chamber x cultivar(light)",
                Width::new(40)
            ),
            "  - negative variance component estimate\n    for chamber x cultivar(light)\n"
        );
    }

    #[test]
    fn a_long_token_overflows_alone() {
        let text = "see problems/a-very-long-file-name-that-cannot-break.toml now";
        assert_eq!(
            paragraph(text, Width::new(20)),
            "see\nproblems/a-very-long-file-name-that-cannot-break.toml\nnow\n"
        );
    }

    #[test]
    fn brackets_hold_together() {
        assert_eq!(
            split_words("1.009·MS[chamber x cultivar(light)] - MS[residual]"),
            ["1.009·MS[chamber x cultivar(light)] ", "- ", "MS[residual]"]
        );
        assert_eq!(
            split_words("0.480 [0.391, 0.570]"),
            ["0.480 ", "[0.391, 0.570]"]
        );
        assert_eq!(
            split_words("(p < 0.0001) and D ≤ 0"),
            ["(p < 0.0001) ", "and ", "D ≤ 0"]
        );
        assert_eq!(split_words("a <"), ["a <"]);
        assert_eq!(split_words("< a b"), ["< a ", "b"]);
        // Unbalanced brackets are ordinary characters.
        assert_eq!(split_words("a [b c"), ["a ", "[b ", "c"]);
        assert_eq!(split_words("a] b"), ["a] ", "b"]);
        assert_eq!(
            paragraph("rate 0.480 [0.391, 0.570] here", Width::new(20)),
            "rate 0.480\n[0.391, 0.570] here\n"
        );
    }

    #[test]
    fn a_table_that_fits_is_left_alone() {
        let t = table(
            &["term", "df", "F"],
            &[&["light", "2", "6.333"], &["chamber(light)", "6", "6.17"]],
        );
        let want = "\
term            df  F
----            --  --
light           2   6.333
chamber(light)  6   6.17
";
        assert_eq!(t.render(Width::DEFAULT), want);
        assert_eq!(t.render(Width::UNLIMITED), want);
        assert_eq!(t.render(Width::new(25)), want, "exactly 25 columns");
    }

    #[test]
    fn headings_wrap_before_cells() {
        let t = table(
            &["term", "sum of squares", "mean square"],
            &[&["light", "103.5", "51.75"]],
        );
        // Natural: 5 + 14 + 11 + 4 = 34; at 30 the widest heading wraps first.
        assert_eq!(
            t.render(Width::new(30)),
            "\
term   sum of   mean square
       squares
----   -------  -----------
light  103.5    51.75
"
        );
    }

    #[test]
    fn wide_columns_wrap_their_cells() {
        let t = table(
            &["term", "tested over", "df"],
            &[
                &["light", "chamber(light)", "6"],
                &["cultivar", "chamber x cultivar(light)", "18"],
            ],
        );
        // Natural 8 + 25 + 2 + 4 = 39; at 32 the tested-over column gets 32 - 4 - 8 - 2 = 18,
        // of which its wrapped lines use 15 (`cultivar(light)`).
        assert_eq!(
            t.render(Width::new(32)),
            "\
term      tested over      df
----      -----------      --
light     chamber(light)   6
cultivar  chamber x        18
          cultivar(light)
"
        );
    }

    #[test]
    fn a_table_too_wide_is_stacked() {
        let t = table(
            &["term", "tested over", "den. df"],
            &[
                &[
                    "light",
                    "1.009·MS[chamber(light)] - 0.000576·MS[residual]",
                    "4.981",
                ],
                &["residual", "", ""],
            ],
        );
        assert_eq!(
            t.render(Width::new(30)),
            "\
term: light
  tested over:
    1.009·MS[chamber(light)] -
    0.000576·MS[residual]
  den. df: 4.981

term: residual
"
        );
    }

    #[test]
    fn rendered_tables_fit_every_width() {
        let t = table(
            &[
                "term",
                "df",
                "sum of squares",
                "mean square",
                "tested over",
                "F",
                "den. df",
                "p",
            ],
            &[
                &[
                    "chamber x cultivar(light)",
                    "18",
                    "17.45",
                    "0.9693",
                    "residual",
                    "0.7318",
                    "72",
                    "0.7676",
                ],
                &[
                    "light",
                    "2",
                    "103.5",
                    "51.75",
                    "chamber(light)",
                    "6.333",
                    "6",
                    "< 0.0001",
                ],
            ],
        );
        for columns in Width::NARROWEST..130 {
            let text = t.render(Width::new(columns));
            assert!(fits(&text, columns), "{columns}:\n{text}");
            for cell in ["0.9693", "< 0.0001", "103.5"] {
                assert!(text.contains(cell), "{columns}: {cell} kept whole");
            }
        }
    }

    #[test]
    fn cells_with_line_breaks() {
        let t = table(&["a", "b"], &[&["one\ntwo", "x"]]);
        assert_eq!(t.render(Width::DEFAULT), "a    b\n--   --\none  x\ntwo\n");
    }

    #[test]
    fn short_rows_are_padded_and_empty_tables_have_a_header() {
        let t = table(&["a", "b"], &[&["1"]]);
        assert_eq!(t.render(Width::DEFAULT), "a   b\n--  --\n1\n");
        assert_eq!(
            Table::new(&["a", "b"]).render(Width::DEFAULT),
            "a   b\n--  --\n"
        );
        assert_eq!(Table::new::<&str>(&[]).render(Width::DEFAULT), "");
    }

    #[test]
    fn fill_gives_narrow_columns_their_width() {
        // Water-filling: caps at 6, then the 1 spare column to the one nearest its width.
        assert_eq!(fill(&[2, 4, 4], &[2, 14, 7], 13), vec![2, 4, 7]);
        assert_eq!(fill(&[2, 4, 4], &[2, 14, 7], 20), vec![2, 11, 7]);
        assert_eq!(fill(&[2, 4, 4], &[2, 14, 7], 23), vec![2, 14, 7]);
    }

    #[test]
    fn numbers_carry_four_significant_digits() {
        for (x, want) in [
            (0.0, "0"),
            (-0.0, "0"),
            (0.0016, "0.0016"),
            (0.001_634_5, "0.001635"),
            (51.75, "51.75"),
            (12345.678, "12346"),
            (1234.5678, "1235"),
            (999.96, "1000"),
            (103.49, "103.5"),
            (12.345678, "12.35"),
            (6.0, "6"),
            (72.0, "72"),
            (-3.5, "-3.5"),
            (0.969_286_5, "0.9693"),
            (0.0001, "0.0001"),
            (0.000_099_996, "1e-4"),
            (0.000_025, "2.5e-5"),
            (-0.000_012_346, "-1.235e-5"),
            (1.2346e9, "1.235e9"),
            (1e12, "1e12"),
            (f64::NAN, "-"),
            (f64::INFINITY, "-"),
        ] {
            assert_eq!(number(x), want, "{x}");
        }
    }

    #[test]
    fn numbers_of_one_scale_share_their_decimals() {
        assert_eq!(
            same_decimals(&[10.6, 12.09, 12.973]),
            ["10.60", "12.09", "12.97"]
        );
        assert_eq!(same_decimals(&[-0.0001, 1.5]), ["0.000", "1.500"]);
        assert_eq!(same_decimals(&[1234.6, 3.0]), ["1235", "3"]);
        assert_eq!(same_decimals(&[0.0, 0.0]), ["0", "0"]);
        assert_eq!(same_decimals(&[f64::NAN, 1.0]), ["-", "1"]);
        assert_eq!(same_decimals(&[]), Vec::<String>::new());
    }

    #[test]
    fn p_values_and_probabilities() {
        for (p, want) in [
            (0.033_215, "0.0332"),
            (0.05, "0.0500"),
            (0.000_029, "< 0.0001"),
            (0.0001, "0.0001"),
            (1.0, "1.0000"),
            (f64::NAN, "-"),
        ] {
            assert_eq!(p_value(p), want, "{p}");
        }
        for (x, want) in [
            (0.48, "0.480"),
            (0.0, "0"),
            (1.0, "1"),
            (0.0004, "< 0.001"),
            (0.0005, "0.001"),
            (0.9996, "> 0.999"),
            (0.9994, "0.999"),
            (f64::NAN, "-"),
        ] {
            assert_eq!(probability(x), want, "{x}");
        }
    }

    #[test]
    fn width_has_a_floor() {
        assert_eq!(Width::new(5).columns(), Width::NARROWEST);
        assert_eq!(Width::new(80).columns(), 80);
        assert_eq!(Width::default(), Width::DEFAULT);
    }
}
