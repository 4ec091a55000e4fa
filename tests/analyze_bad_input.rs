//! Every bad data file gets exit code 1 and one line on stderr that names the file, the
//! CSV line (where there is one) and what is wrong, never a panic.
//!
//! Each case edits the good fixture `tests/fixtures/data/chambers-nested.csv` (the header
//! on line 1, then 108 rows on lines 2 to 109, for `problems/growth-chambers.toml`: 3
//! light regimes, 3 chambers in each, 4 cultivars, 3 pots per cell) and states the line the
//! message must point at, counted from that layout of the file. Why each input is bad is a
//! fact of the layout (a cell holds at most its replicates; a level label names one unit
//! in its nest; common practice). Missing cells and observations are not errors: the data
//! are then unbalanced, and `tests/analyze_unbalanced.rs` holds their analysis.

use std::path::{Path, PathBuf};
use std::process::Command;

const BIN: &str = env!("CARGO_BIN_EXE_emsplan");
const LAYOUT: &str = "problems/growth-chambers.toml";

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

fn good() -> Vec<String> {
    std::fs::read_to_string(root().join("tests/fixtures/data/chambers-nested.csv"))
        .unwrap()
        .lines()
        .map(str::to_string)
        .collect()
}

fn write(tag: &str, bytes: &[u8]) -> PathBuf {
    let dir = Path::new(env!("CARGO_TARGET_TMPDIR")).join("analyze-bad");
    std::fs::create_dir_all(&dir).unwrap();
    let path = dir.join(format!("{tag}.csv"));
    std::fs::write(&path, bytes).unwrap();
    path
}

fn lines_to_bytes(lines: &[String]) -> Vec<u8> {
    let mut s = lines.join("\n");
    s.push('\n');
    s.into_bytes()
}

/// Runs `analyze` on the file and checks the contract: exit 1, one line on stderr,
/// `emsplan: FILE line N: ...` with the phrase in it.
fn assert_refused(path: &Path, extra: &[&str], line: Option<usize>, phrase: &str) {
    let out = Command::new(BIN)
        .current_dir(root())
        .arg("analyze")
        .arg(LAYOUT)
        .arg(path)
        .args(extra)
        .output()
        .unwrap();
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(1), "{}: {err}", path.display());
    assert!(out.stdout.is_empty(), "nothing on stdout");
    assert_eq!(err.lines().count(), 1, "one line: {err}");
    let head = match line {
        Some(l) => format!("emsplan: {} line {l}: ", path.display()),
        None => format!("emsplan: {}: ", path.display()),
    };
    assert!(err.starts_with(&head), "expected {head:?}, got {err}");
    assert!(err.contains(phrase), "expected {phrase:?} in {err}");
}

fn case(tag: &str, edit: impl FnOnce(&mut Vec<String>), line: Option<usize>, phrase: &str) {
    let mut lines = good();
    edit(&mut lines);
    let path = write(tag, &lines_to_bytes(&lines));
    assert_refused(&path, &[], line, phrase);
}

#[test]
fn the_good_fixture_is_accepted() {
    let out = Command::new(BIN)
        .current_dir(root())
        .args(["analyze", LAYOUT, "tests/fixtures/data/chambers-nested.csv"])
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
}

#[test]
fn a_factor_column_is_missing() {
    // The header names "chambre" instead of "chamber".
    case(
        "wrong-column",
        |l| l[0] = "light,chambre,cultivar,mass".into(),
        Some(1),
        "no column for the factor \"chamber\"",
    );
}

#[test]
fn too_many_levels() {
    // Line 5, the first pot of cultivar2 in its cell, says cultivar5: a fifth label, and
    // the rarest, so the message points at its row.
    case(
        "five-cultivars",
        |l| l[4] = l[4].replace("cultivar2", "cultivar5"),
        Some(5),
        "has 5 levels (cultivar1, cultivar5, cultivar2, cultivar3, cultivar4), but the layout declares 4: \"cultivar5\" is the rarest (1 row, first here)",
    );
}

#[test]
fn a_nested_factor_with_too_many_levels_in_its_nest() {
    // Line 2 puts a fourth chamber under light1.
    case(
        "four-chambers",
        |l| l[1] = l[1].replace("chamber1", "chamber4"),
        Some(2),
        "has 4 levels within light = light1",
    );
}

#[test]
fn too_few_levels() {
    // Every cultivar4 row becomes cultivar3: the first cell's cultivar3 pots are on lines
    // 8 to 10, and the renamed ones from line 11 are one too many.
    case(
        "three-cultivars",
        |l| {
            for x in l.iter_mut() {
                *x = x.replace("cultivar4", "cultivar3");
            }
        },
        Some(11),
        "one row too many for the cell light = light1, chamber = chamber1, cultivar = cultivar3",
    );
}

#[test]
fn a_duplicated_row() {
    // Line 2 repeated after line 4: the copy lands on line 5, a fourth pot in the cell.
    case(
        "duplicated-row",
        |l| {
            let row = l[1].clone();
            l.insert(4, row);
        },
        Some(5),
        "one row too many for the cell light = light1, chamber = chamber1, cultivar = cultivar1",
    );
}

#[test]
fn a_non_numeric_response() {
    case(
        "not-a-number",
        |l| {
            l[9] = l[9]
                .rsplit_once(',')
                .map(|(a, _)| format!("{a},12.5g"))
                .unwrap()
        },
        Some(10),
        "is \"12.5g\"",
    );
}

#[test]
fn a_comma_decimal_gives_the_field_count() {
    // 12,5 splits into two fields: the row has one field too many.
    case(
        "comma-decimal",
        |l| {
            l[6] = l[6]
                .rsplit_once(',')
                .map(|(a, _)| format!("{a},12,5"))
                .unwrap()
        },
        Some(7),
        "the row has 5 fields, but the header has 4 columns",
    );
}

#[test]
fn an_infinite_response() {
    case(
        "inf-response",
        |l| {
            l[20] = l[20]
                .rsplit_once(',')
                .map(|(a, _)| format!("{a},inf"))
                .unwrap()
        },
        Some(21),
        "not a finite number",
    );
}

#[test]
fn a_missing_label() {
    // Line 31 loses its light label.
    case(
        "empty-label",
        |l| l[30] = l[30].split_once(',').map(|(_, b)| format!(",{b}")).unwrap(),
        Some(31),
        "no level label for the factor \"light\"",
    );
}

#[test]
fn an_empty_file() {
    let path = write("empty", b"");
    assert_refused(&path, &[], Some(1), "the file is empty");
    let path = write("blank", b"\n\n  \n");
    assert_refused(&path, &[], Some(1), "the file is empty");
}

#[test]
fn a_header_only() {
    let path = write("header-only", b"light,chamber,cultivar,mass\n");
    assert_refused(&path, &[], Some(1), "a header but no data rows");
}

#[test]
fn a_missing_file() {
    let path = root().join("tests/fixtures/data/no-such-file.csv");
    assert_refused(&path, &[], None, "cannot read the file");
}

#[test]
fn not_utf8() {
    let mut lines = lines_to_bytes(&good());
    // Put a Latin-1 byte into line 2's label.
    let at = lines.iter().position(|&b| b == b'\n').unwrap() + 3;
    lines[at] = 0xE9;
    let path = write("latin1", &lines);
    assert_refused(&path, &[], Some(2), "not UTF-8");
}

#[test]
fn a_response_that_is_not_there() {
    let path = root().join("tests/fixtures/data/chambers-nested.csv");
    assert_refused(
        &path,
        &["--response", "weight"],
        Some(1),
        "no column \"weight\"",
    );
    assert_refused(
        &path,
        &["--response", "light"],
        Some(1),
        "is a factor, not a response",
    );
}

#[test]
fn only_factor_columns() {
    case(
        "no-response",
        |l| {
            for x in l.iter_mut() {
                *x = x.rsplit_once(',').unwrap().0.to_string();
            }
        },
        Some(1),
        "no response column",
    );
}

#[test]
fn a_header_naming_a_column_twice() {
    case(
        "twice",
        |l| l[0] = "light,chamber,cultivar,light".into(),
        Some(1),
        "names the column \"light\" twice",
    );
}
