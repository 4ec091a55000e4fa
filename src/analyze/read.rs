//! Reading a data file: long-format CSV to the observations of a layout's cells, with
//! the file, line and column of every mistake.

use super::*;

/// Observations read from a data file, in cell order.
#[derive(Debug, Clone)]
pub struct Observations {
    /// The file they came from, for messages.
    pub path: String,
    pub response: String,
    /// Responses cell by cell (cells as in `balanced`), in the order read within a cell.
    pub y: Vec<f64>,
    /// Observations in every cell: the layout's replicates when the data are balanced,
    /// fewer (or none) where observations are missing.
    pub counts: Vec<usize>,
    /// `labels[j][nest][level]`: the label of factor j's level within a nest, the nest
    /// being the index of the combination of j's ancestors' levels. A nest can hold fewer
    /// labels than the layout's levels when a level has no observation.
    pub labels: Vec<Vec<Vec<String>>>,
    /// Lines of the rows whose response is missing (empty or `NA`); they are left out.
    pub missing_lines: Vec<usize>,
}

impl Observations {
    /// Whether every cell holds all the layout's replicates.
    pub fn is_balanced(&self, replicates: usize) -> bool {
        self.counts.iter().all(|&c| c == replicates)
    }

    /// Where each cell's observations start in `y`.
    pub fn offsets(&self) -> Vec<usize> {
        let mut at = 0;
        self.counts
            .iter()
            .map(|&c| {
                let here = at;
                at += c;
                here
            })
            .collect()
    }
}

/// Whether a response field means "no value": empty, or `NA` in any case.
fn is_missing(text: &str) -> bool {
    text.is_empty() || text.eq_ignore_ascii_case("na")
}

/// Reads a long-format CSV file of a layout's observations: every row in one of the
/// layout's cells, no cell with more than its replicates (fewer, or none, make the data
/// unbalanced).
pub fn read_data(
    path: &Path,
    layout: &Layout,
    response: Option<&str>,
) -> Result<Observations, Error> {
    read_data_with(path, layout, response, &crate::progress::Quiet)
}

/// `read_data`, telling `progress` how many bytes of the file are read.
pub fn read_data_with(
    path: &Path,
    layout: &Layout,
    response: Option<&str>,
    progress: &dyn crate::progress::Progress,
) -> Result<Observations, Error> {
    let name = path.display().to_string();
    let bytes = std::fs::read(path).map_err(|source| Error::Io {
        path: name.clone(),
        source,
    })?;
    parse_data_with(&name, &bytes, layout, response, progress)
}

/// Parses CSV bytes (see `read_data`); `name` is the file name for messages.
pub fn parse_data(
    name: &str,
    bytes: &[u8],
    layout: &Layout,
    response: Option<&str>,
) -> Result<Observations, Error> {
    parse_data_with(name, bytes, layout, response, &crate::progress::Quiet)
}

/// Rows between two progress reports.
const ROWS_PER_REPORT: usize = 1 << 16;

/// `parse_data`, telling `progress` how many bytes are read.
pub fn parse_data_with(
    name: &str,
    bytes: &[u8],
    layout: &Layout,
    response: Option<&str>,
    progress: &dyn crate::progress::Progress,
) -> Result<Observations, Error> {
    let fail = |line: Option<usize>, message: String| Error::Data {
        path: name.to_string(),
        line,
        message,
    };
    let bytes = bytes.strip_prefix(b"\xEF\xBB\xBF").unwrap_or(bytes);
    let s = &layout.structure;
    let k = s.factors.len();
    let factor_list = s.known_names();
    if bytes.iter().all(|b| b.is_ascii_whitespace()) {
        return Err(fail(
            Some(1),
            format!(
                "the file is empty: it needs a header row naming the factors ({factor_list}) and a response column, then one row per observation"
            ),
        ));
    }
    let mut reader = csv::ReaderBuilder::new()
        .has_headers(true)
        .flexible(true)
        .trim(csv::Trim::All)
        .from_reader(bytes);
    let header: Vec<String> = reader
        .headers()
        .map_err(|e| csv_error(name, &e))?
        .iter()
        .map(str::to_string)
        .collect();
    for (i, h) in header.iter().enumerate() {
        if h.is_empty() {
            return Err(fail(
                Some(1),
                format!(
                    "column {} of the header has no name: name every column",
                    i + 1
                ),
            ));
        }
        if header[..i].contains(h) {
            return Err(fail(
                Some(1),
                format!("the header names the column \"{h}\" twice: give each column its own name"),
            ));
        }
    }
    let columns = header.join(", ");
    let mut factor_col = Vec::with_capacity(k);
    for f in &s.factors {
        let c = header.iter().position(|h| *h == f.name).ok_or_else(|| {
            fail(
                Some(1),
                format!(
                    "no column for the factor \"{}\" (the header has: {columns}): add a column of its level labels named \"{}\"",
                    f.name, f.name
                ),
            )
        })?;
        factor_col.push(c);
    }
    let others: Vec<usize> = (0..header.len())
        .filter(|c| !factor_col.contains(c))
        .collect();
    let response_col = match response {
        Some(r) => header.iter().position(|h| h == r).ok_or_else(|| {
            fail(
                Some(1),
                format!("no column \"{r}\" for the response (the header has: {columns}): check --response"),
            )
        })?,
        None => match others.as_slice() {
            [] => {
                return Err(fail(
                    Some(1),
                    format!(
                        "no response column: the header has only the factors ({columns}); add a column of measurements"
                    ),
                ));
            }
            [only] => *only,
            _ => header.iter().position(|h| h == "response").ok_or_else(|| {
                let names: Vec<&str> = others.iter().map(|&c| header[c].as_str()).collect();
                fail(
                    Some(1),
                    format!(
                        "several columns could be the response ({}): choose one with --response",
                        names.join(", ")
                    ),
                )
            })?,
        },
    };
    if factor_col.contains(&response_col) {
        return Err(fail(
            Some(1),
            format!(
                "\"{}\" is a factor, not a response: choose a column of measurements with --response",
                header[response_col]
            ),
        ));
    }
    let response_name = header[response_col].clone();

    let levels: Vec<usize> = layout
        .levels
        .per_factor
        .iter()
        .map(|&n| n as usize)
        .collect();
    let r = layout.levels.replicates as usize;
    let balanced_shape = Balanced::new(&crate::ems::Model::new(s), &layout.levels)?;
    // Factors in an order where every factor's ancestors come before it.
    let mut order: Vec<usize> = (0..k).collect();
    order.sort_by_key(|&j| s.factors[j].ancestors.count_ones());
    let nests: Vec<usize> = (0..k)
        .map(|j| nest_count(&levels, s.factors[j].ancestors))
        .collect();

    // First pass: every row's labels (interned per factor), response and line.
    struct Row {
        cell: usize,
        line: usize,
        y: f64,
    }
    let mut names_of: Vec<Vec<String>> = vec![Vec::new(); k];
    let mut ids: Vec<HashMap<String, u32>> = vec![HashMap::new(); k];
    let mut raw: Vec<u32> = Vec::new();
    let mut rows: Vec<Row> = Vec::new();
    let mut missing_lines: Vec<usize> = Vec::new();
    let mut record = csv::StringRecord::new();
    let (mut counted_to, mut counted_line) = (0usize, 1usize);
    let (mut read_rows, mut reported) = (0usize, 0u64);
    loop {
        match reader.read_record(&mut record) {
            Ok(true) => {}
            Ok(false) => break,
            Err(e) => return Err(csv_error(name, &e)),
        }
        read_rows += 1;
        if read_rows % ROWS_PER_REPORT == 0 {
            let at = reader.position().byte();
            progress.advance(at.saturating_sub(reported));
            reported = at;
        }
        // Lines counted from the bytes: the reader's own count drifts on CRLF files.
        let line = match record.position() {
            Some(p) => {
                let mut at = (p.byte() as usize).min(bytes.len());
                // On CRLF files the record is placed at the line feed that ends the
                // line before it.
                while at < bytes.len() && matches!(bytes[at], b'\r' | b'\n') {
                    at += 1;
                }
                counted_line += bytes[counted_to..at]
                    .iter()
                    .filter(|&&b| b == b'\n')
                    .count();
                counted_to = at;
                counted_line
            }
            None => 0,
        };
        if record.len() != header.len() {
            return Err(fail(
                Some(line),
                format!(
                    "the row has {} fields, but the header has {} columns ({columns})",
                    record.len(),
                    header.len()
                ),
            ));
        }
        let text = &record[response_col];
        if is_missing(text) {
            missing_lines.push(line);
            continue;
        }
        let y: f64 = text.parse().ok().filter(|v: &f64| v.is_finite()).ok_or_else(|| {
            fail(
                Some(line),
                format!(
                    "the response \"{response_name}\" is \"{text}\", which is not a finite number: write a number such as 12.5 (or leave it empty, or NA, for a missing value)"
                ),
            )
        })?;
        for j in 0..k {
            let label = &record[factor_col[j]];
            if label.is_empty() {
                return Err(fail(
                    Some(line),
                    format!(
                        "no level label for the factor \"{}\": every row needs one",
                        s.factors[j].name
                    ),
                ));
            }
            let id = match ids[j].get(label) {
                Some(&id) => id,
                None => {
                    let id = names_of[j].len() as u32;
                    names_of[j].push(label.to_string());
                    ids[j].insert(label.to_string(), id);
                    id
                }
            };
            raw.push(id);
        }
        rows.push(Row { cell: 0, line, y });
    }
    if rows.is_empty() {
        let why = if missing_lines.is_empty() {
            "the file has a header but no data rows".to_string()
        } else {
            format!(
                "every one of the {} rows has no response value",
                missing_lines.len()
            )
        };
        return Err(fail(
            Some(1),
            format!(
                "{why}: add one row per observation ({} in the layout)",
                layout.observations()
            ),
        ));
    }

    // Second pass, factor by factor with ancestors first: number each label within its
    // nest, in order of first appearance, and hold the count to the layout's.
    let mut level_of: Vec<usize> = vec![0; rows.len() * k];
    let mut labels: Vec<Vec<Vec<String>>> = nests.iter().map(|&n| vec![Vec::new(); n]).collect();
    let mut at = vec![0usize; k];
    for &j in &order {
        let f = &s.factors[j];
        let mut index: HashMap<(usize, u32), usize> = HashMap::new();
        // Per nest: (label id, rows, first line) by level.
        let mut seen: Vec<Vec<(u32, usize, usize)>> = vec![Vec::new(); nests[j]];
        let mut nest_of_row = vec![0usize; rows.len()];
        for (i, row) in rows.iter().enumerate() {
            for a in 0..k {
                at[a] = level_of[i * k + a];
            }
            let nest = index_in(&levels, f.ancestors, &at);
            nest_of_row[i] = nest;
            let id = raw[i * k + j];
            let level = *index.entry((nest, id)).or_insert_with(|| {
                seen[nest].push((id, 0, row.line));
                seen[nest].len() - 1
            });
            seen[nest][level].1 += 1;
            level_of[i * k + j] = level;
        }
        for (nest, found) in seen.iter().enumerate() {
            if found.len() > levels[j] {
                // The rarest label is the likeliest mistake: point at its first row.
                let &(id, count, line) = found
                    .iter()
                    .min_by_key(|(_, count, line)| (*count, std::cmp::Reverse(*line)))
                    .unwrap_or(&found[0]);
                let all: Vec<&str> = found
                    .iter()
                    .map(|(id, _, _)| names_of[j][*id as usize].as_str())
                    .collect();
                let first = nest_of_row.iter().position(|&n| n == nest).unwrap_or(0);
                for a in 0..k {
                    at[a] = level_of[first * k + a];
                }
                return Err(fail(
                    Some(line),
                    format!(
                        "the factor \"{}\" has {} levels{} ({}), but the layout declares {}: \"{}\" is the rarest ({count} row{}, first here); check the labels, or the layout's levels",
                        f.name,
                        found.len(),
                        nest_text_at(layout, &labels, j, &at),
                        all.join(", "),
                        levels[j],
                        names_of[j][id as usize],
                        if count == 1 { "" } else { "s" },
                    ),
                ));
            }
            labels[j][nest] = found
                .iter()
                .map(|(id, _, _)| names_of[j][*id as usize].clone())
                .collect();
        }
    }
    for (i, row) in rows.iter_mut().enumerate() {
        row.cell = balanced_shape.cell(&level_of[i * k..(i + 1) * k]);
    }
    // No cell may hold more than its replicates; fewer (or none) make the data unbalanced.
    let cells = balanced_shape.cells();
    let mut count = vec![0usize; cells];
    let mut y = vec![0.0; cells * r];
    for row in &rows {
        let c = row.cell;
        if count[c] == r {
            let earlier: Vec<String> = rows
                .iter()
                .filter(|o| o.cell == c && o.line < row.line)
                .map(|o| o.line.to_string())
                .collect();
            return Err(fail(
                Some(row.line),
                format!(
                    "one row too many for the cell {}: the layout has {r} replicate{} per cell, already given on line{} {}; is a row duplicated?",
                    cell_text(layout, &balanced_shape, &labels, c),
                    if r == 1 { "" } else { "s" },
                    if earlier.len() == 1 { "" } else { "s" },
                    earlier.join(", ")
                ),
            ));
        }
        y[c * r + count[c]] = row.y;
        count[c] += 1;
    }
    let mut packed = Vec::with_capacity(rows.len());
    for c in 0..cells {
        packed.extend_from_slice(&y[c * r..c * r + count[c]]);
    }
    Ok(Observations {
        path: name.to_string(),
        response: response_name,
        y: packed,
        counts: count,
        labels,
        missing_lines,
    })
}

fn csv_error(name: &str, e: &csv::Error) -> Error {
    let line = e.position().map(|p| p.line() as usize);
    let message = match e.kind() {
        csv::ErrorKind::Utf8 { .. } => {
            "this row is not UTF-8 text: save the file as UTF-8 CSV".to_string()
        }
        _ => format!("cannot read the CSV: {e}"),
    };
    Error::Data {
        path: name.to_string(),
        line,
        message,
    }
}

fn nest_count(levels: &[usize], ancestors: Mask) -> usize {
    (0..levels.len())
        .filter(|j| ancestors & (1 << j) != 0)
        .map(|j| levels[j])
        .product()
}

/// ` within light = light2` for factor j at level indices `at` of its ancestors.
fn nest_text_at(layout: &Layout, labels: &[Vec<Vec<String>>], j: usize, at: &[usize]) -> String {
    let anc = layout.structure.factors[j].ancestors;
    if anc == 0 {
        String::new()
    } else {
        format!(" within {}", describe(layout, labels, anc, at))
    }
}
