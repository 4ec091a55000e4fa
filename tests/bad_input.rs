//! Every bad layout file gets one clear line on stderr and exit code 1, never a panic.
//!
//! The contract under test is the binary's: bad input exits 1 with exactly one line,
//! `emsplan: FILE line N: message` (the line where it is known), and a usage error exits 2.
//! Exit code 101 is what a Rust panic gives, so it must never appear.
//!
//! Each case is a fixture under `tests/fixtures/bad/`, named for what is wrong with it.
//! Where the expected line is given, it is the line that TOML v1.0.0's grammar puts the
//! offending key, value or table header on (the fixtures are short enough to count by
//! eye). The reason each input is bad is named beside it: the TOML grammar, or a fact of
//! balanced designs found in any text on them (e.g. Montgomery, Design and Analysis of
//! Experiments, chapters on factorial, nested and random-effects designs).

use std::path::{Path, PathBuf};
use std::process::{Command, ExitStatus, Stdio};
use std::time::{Duration, Instant};

use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;

const BIN: &str = env!("CARGO_BIN_EXE_emsplan");

fn fixture(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests/fixtures/bad")
        .join(name)
}

/// What a run of the binary left behind.
struct Run {
    /// `None` when the process was killed for running past the time limit.
    status: Option<ExitStatus>,
    stdout: String,
    stderr: String,
}

/// A scratch directory for one test, under cargo's per-target temp dir; each test uses its
/// own tag, and a later run reuses it.
fn scratch(tag: &str) -> PathBuf {
    let dir = Path::new(env!("CARGO_TARGET_TMPDIR")).join(format!("bad_input-{tag}"));
    std::fs::create_dir_all(&dir).unwrap();
    dir
}

/// Runs the binary with a time limit. Output goes to files, not pipes, so that a large
/// output cannot block the child while we poll it.
fn run_with_limit(args: &[&std::ffi::OsStr], limit: Duration, dir: &Path) -> Run {
    let out_path = dir.join("stdout");
    let err_path = dir.join("stderr");
    let mut child = Command::new(BIN)
        .args(args)
        .stdin(Stdio::null())
        .stdout(std::fs::File::create(&out_path).unwrap())
        .stderr(std::fs::File::create(&err_path).unwrap())
        .spawn()
        .expect("the emsplan binary starts");
    let start = Instant::now();
    let status = loop {
        if let Some(status) = child.try_wait().unwrap() {
            break Some(status);
        }
        if start.elapsed() > limit {
            let _ = child.kill();
            let _ = child.wait();
            break None;
        }
        std::thread::sleep(Duration::from_millis(5));
    };
    Run {
        status,
        stdout: String::from_utf8_lossy(&std::fs::read(&out_path).unwrap()).into_owned(),
        stderr: String::from_utf8_lossy(&std::fs::read(&err_path).unwrap()).into_owned(),
    }
}

fn check_file(path: &Path, tag: &str) -> Run {
    let dir = scratch(tag);
    run_with_limit(
        &["check".as_ref(), path.as_os_str()],
        Duration::from_secs(10),
        &dir,
    )
}

/// Where the error must point.
#[derive(Debug, Clone, Copy)]
enum Line {
    /// Exactly this line.
    At(usize),
    /// Some line of this range (the offending factor's table), inclusive.
    Within(usize, usize),
    /// Nothing to point at (something is absent), so no line is asked for.
    Any,
}

/// Asserts the one-line error contract for a bad file and returns the message.
fn assert_rejected(path: &Path, line: Line, phrase: &str) -> String {
    let tag = path.file_name().unwrap().to_string_lossy().into_owned();
    let run = check_file(path, &tag);
    let shown = path.display().to_string();
    let status = run
        .status
        .unwrap_or_else(|| panic!("{tag}: emsplan did not finish"));
    assert_ne!(
        status.code(),
        Some(101),
        "{tag}: emsplan panicked: {}",
        run.stderr
    );
    assert_eq!(
        status.code(),
        Some(1),
        "{tag}: exit code; stderr: {}",
        run.stderr
    );
    assert!(
        run.stdout.is_empty(),
        "{tag}: nothing goes to stdout on error, got {:?}",
        run.stdout
    );
    assert!(
        run.stderr.ends_with('\n') && run.stderr.matches('\n').count() == 1,
        "{tag}: stderr must be exactly one line, got {:?}",
        run.stderr
    );
    let message = run.stderr.trim_end();
    assert!(
        message.starts_with(&format!("emsplan: {shown}")),
        "{tag}: the message must start with the file name: {message}"
    );
    match line {
        Line::At(n) => assert!(
            message.starts_with(&format!("emsplan: {shown} line {n}: ")),
            "{tag}: the message must name line {n}: {message}"
        ),
        Line::Within(a, b) => {
            let n = line_named(message, &shown)
                .unwrap_or_else(|| panic!("{tag}: the message names no line: {message}"));
            assert!(
                (a..=b).contains(&n),
                "{tag}: line {n} is not in {a}..={b}: {message}"
            );
        }
        Line::Any => {}
    }
    assert!(
        message.contains(phrase),
        "{tag}: the message must say {phrase:?}: {message}"
    );
    message.to_string()
}

/// The line number in `emsplan: FILE line N: ...`, if there is one.
fn line_named(message: &str, shown: &str) -> Option<usize> {
    let rest = message.strip_prefix(&format!("emsplan: {shown} line "))?;
    rest.split(':').next()?.parse().ok()
}

/// One bad file: the fixture, where the error must point, a phrase it must contain, and
/// why the input is bad.
struct Case {
    file: &'static str,
    line: Line,
    phrase: &'static str,
    #[allow(dead_code)]
    why: &'static str,
}

#[rustfmt::skip]
const CASES: &[Case] = &[
    // TOML syntax and types.
    Case { file: "malformed-toml.toml", line: Line::At(2), phrase: "expected `]`",
        why: "TOML v1.0.0: a table header is closed by `]`" },
    Case { file: "levels-string.toml", line: Line::At(8), phrase: "string \"four\"",
        why: "a level count is an integer; TOML types \"four\" as a string" },
    Case { file: "levels-fraction.toml", line: Line::At(8), phrase: "2.5",
        why: "a level count is a whole number; TOML types 2.5 as a float" },
    Case { file: "replicates-string.toml", line: Line::At(3), phrase: "string \"three\"",
        why: "replicates are a count; TOML types \"three\" as a string" },
    // Unknown keys, one at each level of the file.
    Case { file: "unknown-key-top.toml", line: Line::At(2), phrase: "alhpa",
        why: "misspelt key at the top level" },
    Case { file: "unknown-key-layout.toml", line: Line::At(4), phrase: "convension",
        why: "misspelt key in [layout]" },
    Case { file: "unknown-key-factor.toml", line: Line::At(13), phrase: "levls",
        why: "misspelt key in [[factor]]" },
    // Names.
    Case { file: "factor-without-name.toml", line: Line::Within(5, 7), phrase: "name",
        why: "every factor needs a name to be referred to" },
    Case { file: "factor-empty-name.toml", line: Line::At(6), phrase: "empty name",
        why: "an empty name cannot be referred to" },
    Case { file: "duplicate-factor.toml", line: Line::At(16), phrase: "declared twice",
        why: "two factors of one name make `within` and `omit` ambiguous" },
    // Nesting: a hierarchical classification is a strict partial order.
    Case { file: "nested-in-itself.toml", line: Line::At(9), phrase: "nested in itself",
        why: "a factor cannot be nested in itself" },
    Case { file: "cycle-of-two.toml", line: Line::Any, phrase: "block -> plot",
        why: "nesting must be acyclic" },
    Case { file: "cycle-of-three.toml", line: Line::Any, phrase: "greenhouse -> bench -> pot",
        why: "nesting must be acyclic" },
    Case { file: "within-missing-factor.toml", line: Line::At(14), phrase: "\"lihgt\", which is not a factor",
        why: "a factor can only be nested in a factor of the layout" },
    // Omitted interactions.
    Case { file: "omit-missing-factor.toml", line: Line::At(4), phrase: "\"opertor\", which is not a factor",
        why: "an omitted interaction is made of the layout's factors" },
    Case { file: "omit-main-effect.toml", line: Line::At(4), phrase: "main effect",
        why: "pooling applies to interactions; a main effect is the object of the study" },
    Case { file: "omit-not-a-term.toml", line: Line::At(4), phrase: "not a term",
        why: "a nested factor cannot be crossed with its nest (no such interaction, Montgomery ch. on nested designs)" },
    // Counts.
    Case { file: "levels-zero.toml", line: Line::At(13), phrase: "levels must be",
        why: "a factor has at least one level" },
    Case { file: "levels-negative.toml", line: Line::At(13), phrase: "levels must be",
        why: "a factor has at least one level" },
    Case { file: "replicates-zero.toml", line: Line::At(3), phrase: "replicates must be",
        why: "a balanced cell holds at least one observation" },
    Case { file: "replicates-negative.toml", line: Line::At(3), phrase: "replicates must be",
        why: "a balanced cell holds at least one observation" },
    Case { file: "fixed-one-level.toml", line: Line::Within(10, 13), phrase: "one level",
        why: "a fixed factor of a levels has a - 1 df: one level compares nothing" },
    Case { file: "population-below-levels.toml", line: Line::Within(10, 14), phrase: "population of only 4",
        why: "levels sampled without replacement cannot outnumber the population (Cornfield and Tukey 1956)" },
    Case { file: "population-on-fixed.toml", line: Line::At(9), phrase: "is fixed, so it has no population",
        why: "a finite population is a property of a random factor's sampling" },
    Case { file: "counts-overflow.toml", line: Line::Any, phrase: "64-bit",
        why: "4096^6 = 2^72 observations exceeds 2^64" },
    // Enumerations.
    Case { file: "unknown-convention.toml", line: Line::At(4), phrase: "constrained",
        why: "the conventions are restricted and unrestricted" },
    Case { file: "unknown-kind.toml", line: Line::At(12), phrase: "mixed",
        why: "a factor is fixed or random" },
    // Missing parts.
    Case { file: "no-factors.toml", line: Line::Any, phrase: "no factors",
        why: "a layout without factors has no terms" },
    Case { file: "no-layout-table.toml", line: Line::Any, phrase: "[layout]",
        why: "replicates are required and live in [layout]" },
    // Missing keys.
    Case { file: "kind-missing.toml", line: Line::At(5), phrase: "missing field `kind`",
        why: "a factor is fixed or random, and the EMS depend on which" },
    Case { file: "levels-missing.toml", line: Line::At(5), phrase: "missing field `levels`",
        why: "df and EMS coefficients need every level count" },
    Case { file: "replicates-missing.toml", line: Line::At(2), phrase: "has no `replicates`",
        why: "the residual's df need the replicates per cell" },
    Case { file: "empty-file.toml", line: Line::Any, phrase: "[layout]",
        why: "an empty document describes no layout" },
    // More names, shapes and counts.
    Case { file: "factor-reserved-name.toml", line: Line::At(6), phrase: "reserved",
        why: "a factor called residual could not be told from the residual term" },
    Case { file: "factor-name-with-space.toml", line: Line::At(6), phrase: "must start with a letter",
        why: "term labels join names with \" x \", so a name must be one word" },
    Case { file: "omit-listed-twice.toml", line: Line::At(4), phrase: "listed twice",
        why: "machine x operator and operator x machine are one interaction" },
    Case { file: "levels-beyond-i64.toml", line: Line::At(8), phrase: "99999999999999999999",
        why: "TOML v1.0.0: integers are 64-bit, larger ones are an error" },
    Case { file: "population-zero.toml", line: Line::At(9), phrase: "population must be",
        why: "levels cannot be drawn from an empty population" },
    Case { file: "within-not-a-list.toml", line: Line::At(14), phrase: "expected a sequence",
        why: "`within` is a list of factor names" },
    Case { file: "factor-as-single-table.toml", line: Line::Within(5, 8), phrase: "expected a sequence",
        why: "TOML v1.0.0: [[factor]] is an array of tables, [factor] a single table" },
    Case { file: "duplicate-key.toml", line: Line::At(4), phrase: "duplicate key",
        why: "TOML v1.0.0: a key may not be defined twice in a table" },
    Case { file: "alpha-string.toml", line: Line::At(2), phrase: "five percent",
        why: "alpha is a probability, a number" },
    Case { file: "sd-and-prior.toml", line: Line::At(13), phrase: "[prior] and the [sd] table of line 10 are the same table",
        why: "[prior] is the old name of [sd]: two tables would give one term two values" },
    Case { file: "too-many-factors.toml", line: Line::Any, phrase: "at most 12",
        why: "the engine's documented limit (layout::MAX_FACTORS)" },
    // Not text.
    Case { file: "nul-byte.bin", line: Line::Any, phrase: "not a text file",
        why: "TOML v1.0.0: a document is UTF-8 and NUL is not allowed" },
    Case { file: "invalid-utf8.bin", line: Line::Any, phrase: "not a text file",
        why: "TOML v1.0.0: a document must be valid UTF-8 (byte 0xE9 alone is not)" },
];

#[test]
fn every_bad_fixture_gets_a_one_line_error() {
    for case in CASES {
        assert_rejected(&fixture(case.file), case.line, case.phrase);
    }
}

/// Every fixture in the directory is in the table (or in a test of its own), so no case
/// is left unrun.
#[test]
fn every_fixture_is_exercised() {
    let own_tests = [
        "alpha-nan.toml",
        "alpha-inf.toml",
        "alpha-minus-inf.toml",
        "alpha-0-0.toml",
        "alpha-1-0.toml",
        "alpha-minus-0-05.toml",
        "alpha-1-5.toml",
        "omit-residual.toml",
    ];
    let mut missing = Vec::new();
    for entry in std::fs::read_dir(fixture("")).unwrap() {
        let name = entry.unwrap().file_name().to_string_lossy().into_owned();
        if name.starts_with('.') {
            continue;
        }
        let listed = CASES.iter().any(|c| c.file == name);
        let own = own_tests.contains(&name.as_str());
        if !listed && !own {
            missing.push(name);
        }
    }
    assert!(
        missing.is_empty(),
        "fixtures not run by any test: {missing:?}"
    );
}

// The significance level of a test is a probability strictly between 0 and 1
// (Neyman and Pearson's size of a test). Each of these parses as a TOML float.

#[test]
fn alpha_nan_is_rejected() {
    assert_rejected(&fixture("alpha-nan.toml"), Line::At(2), "alpha");
}

#[test]
fn alpha_inf_is_rejected() {
    assert_rejected(&fixture("alpha-inf.toml"), Line::At(2), "alpha");
}

#[test]
fn alpha_minus_inf_is_rejected() {
    assert_rejected(&fixture("alpha-minus-inf.toml"), Line::At(2), "alpha");
}

#[test]
fn alpha_zero_is_rejected() {
    assert_rejected(&fixture("alpha-0-0.toml"), Line::At(2), "alpha");
}

#[test]
fn alpha_one_is_rejected() {
    assert_rejected(&fixture("alpha-1-0.toml"), Line::At(2), "alpha");
}

#[test]
fn alpha_negative_is_rejected() {
    assert_rejected(&fixture("alpha-minus-0-05.toml"), Line::At(2), "alpha");
}

#[test]
fn alpha_above_one_is_rejected() {
    assert_rejected(&fixture("alpha-1-5.toml"), Line::At(2), "alpha");
}

/// The TOML parser knows where every `within` entry is, so a cycle can be pointed at:
/// the `within` of the factor the message names first.
#[test]
fn a_cycle_names_the_line_of_a_within_in_it() {
    // cycle-of-two.toml: block's `within = ["plot"]` is line 9, plot's is line 15.
    let m = assert_rejected(&fixture("cycle-of-two.toml"), Line::Within(9, 15), "cycle");
    assert!(m.contains(" line 9: ") || m.contains(" line 15: "), "{m}");
    // cycle-of-three.toml: the `within` lines are 9, 15 and 21.
    let m = assert_rejected(
        &fixture("cycle-of-three.toml"),
        Line::Within(9, 21),
        "cycle",
    );
    assert!(
        m.contains(" line 9: ") || m.contains(" line 15: ") || m.contains(" line 21: "),
        "{m}"
    );
}

/// The residual is the variation between replicates within a cell, not a main effect;
/// it cannot be omitted because the other terms' df do not absorb it.
#[test]
fn omitting_the_residual_is_rejected() {
    assert_rejected(&fixture("omit-residual.toml"), Line::At(4), "\"residual\"");
}

#[test]
fn omitting_the_residual_is_not_called_a_main_effect() {
    let m = assert_rejected(&fixture("omit-residual.toml"), Line::At(4), "residual");
    assert!(!m.contains("main effect"), "{m}");
}

/// The engine documents `MAX_FACTORS` = 12 as the largest layout it handles. A 2^12
/// layout of random factors at two levels (8192 observations, 4095 terms) is within
/// that limit, so `check` should answer it in reasonable time.
#[test]
fn a_layout_at_the_factor_limit_is_checked_within_a_minute() {
    let mut text = String::from("[layout]\nreplicates = 2\n");
    for i in 0..emsplan::layout::MAX_FACTORS {
        text.push_str(&format!(
            "\n[[factor]]\nname = \"plot{i}\"\nkind = \"random\"\nlevels = 2\n"
        ));
    }
    let dir = scratch("factor-limit");
    let path = dir.join("twelve-random-factors.toml");
    std::fs::write(&path, text).unwrap();
    let run = run_with_limit(
        &["check".as_ref(), path.as_os_str()],
        Duration::from_secs(60),
        &dir,
    );
    let status = run
        .status
        .expect("check of 12 factors finishes within 60 s");
    assert_eq!(status.code(), Some(0), "{}", run.stderr);
}

#[test]
fn a_missing_file_is_reported_with_its_name() {
    let path = scratch("missing").join("no-such-layout.toml");
    let m = assert_rejected(&path, Line::Any, "cannot read the file");
    assert!(m.contains("no-such-layout.toml"), "{m}");
}

#[test]
fn a_directory_is_not_a_layout_file() {
    let dir = scratch("a-directory");
    assert_rejected(&dir, Line::Any, "cannot read the file");
}

/// A usage error is not a bad layout: clap's convention (and the binary's contract) is
/// exit code 2, with the offending value named.
#[test]
fn unknown_command_line_values_are_usage_errors() {
    let good = Path::new(env!("CARGO_MANIFEST_DIR")).join("problems/growth-chambers.toml");
    let cases: [(&[&str], &str); 3] = [
        (&["--convention", "constrained"], "constrained"),
        (&["--format", "yaml"], "yaml"),
        (&["--convention", ""], "--convention"),
    ];
    for (extra, phrase) in cases {
        let mut args: Vec<&std::ffi::OsStr> = vec!["check".as_ref(), good.as_os_str()];
        args.extend(extra.iter().map(|s| std::ffi::OsStr::new(*s)));
        let run = run_with_limit(&args, Duration::from_secs(10), &scratch("usage"));
        let status = run.status.expect("finishes");
        assert_eq!(status.code(), Some(2), "{extra:?}: {}", run.stderr);
        assert!(run.stdout.is_empty(), "{extra:?}: {}", run.stdout);
        assert!(run.stderr.contains(phrase), "{extra:?}: {}", run.stderr);
    }
}

// ----------------------------------------------------------------------------------
// Random mutations of valid layouts: whatever the file says, the answer is a result
// (exit 0) or a one-line error (exit 1), within a few seconds.

/// Valid layouts to mutate: the shipped examples and one of our own with every kind of
/// key (population, omit, convention, within).
fn seeds() -> Vec<String> {
    let mut seeds: Vec<String> =
        std::fs::read_dir(Path::new(env!("CARGO_MANIFEST_DIR")).join("problems"))
            .unwrap()
            .map(|e| e.unwrap().path())
            .filter(|p| p.extension().is_some_and(|x| x == "toml"))
            .map(|p| std::fs::read_to_string(p).unwrap())
            .collect();
    seeds.sort();
    seeds.push(
        r#"alpha = 0.05

[layout]
name = "Feed trial in barns and pens"
replicates = 2
convention = "unrestricted"
omit = ["feed x barn"]

[[factor]]
name = "feed"
kind = "fixed"
levels = 3

[[factor]]
name = "barn"
kind = "random"
levels = 4
population = 12

[[factor]]
name = "pen"
kind = "random"
levels = 2
within = ["barn"]
"#
        .to_string(),
    );
    seeds
}

const NUMBERS: &[&str] = &[
    "0",
    "-1",
    "1",
    "2",
    "1e400",
    "-1e400",
    "nan",
    "inf",
    "2.5",
    "4096",
    "99999999999999999999",
    "9223372036854775807",
    "\"3\"",
    "[]",
    "{}",
    "true",
];
const STRINGS: &[&str] = &[
    "\"\"",
    "\"x\"",
    "\"residual\"",
    "\"feed x pen\"",
    "\"pen(barn)\"",
    "\"barn x pen\"",
    "\"light x chamber\"",
    "\"chamber\"",
    "\"mixed\"",
    "\"fixed\"",
    "\"random\"",
    "\"ünïcödé\"",
    "\"a\\\"b\"",
    "[\"light\", \"light\"]",
    "[\"chamber\"]",
    "[]",
    "7",
    "\"line x shift x recipe\"",
];
const JUNK: &[&str] = &[
    "[[factor]]",
    "[layout]",
    "within = [\"pen\"]",
    "within = [\"barn\", \"feed\"]",
    "population = 1",
    "omit = [\"light x cultivar\"]",
    "= 3",
    "[",
    "\"",
    "levels = 1",
    "kind = \"random\"",
    "name = \"extra\"",
    "\u{0}",
    "replicates = 1",
];

/// One random edit of a layout text.
fn mutate(text: &str, rng: &mut ChaCha8Rng) -> String {
    let mut lines: Vec<String> = text.lines().map(str::to_string).collect();
    if lines.is_empty() {
        return String::new();
    }
    let i = rng.random_range(0..lines.len());
    match rng.random_range(0..6) {
        0 => {
            lines.remove(i);
        }
        1 => {
            let l = lines[i].clone();
            lines.insert(i, l);
        }
        2 | 3 => {
            // Replace the value of a `key = value` line: a number-like or a string-like one.
            let Some(eq) = lines[i].find(" = ") else {
                lines.insert(i, JUNK[rng.random_range(0..JUNK.len())].to_string());
                return lines.join("\n") + "\n";
            };
            let pool = if lines[i][eq + 3..].starts_with(['"', '[']) {
                STRINGS
            } else {
                NUMBERS
            };
            let value = pool[rng.random_range(0..pool.len())];
            lines[i] = format!("{}{}", &lines[i][..eq + 3], value);
        }
        4 => {
            let j = rng.random_range(0..lines.len());
            lines.swap(i, j);
        }
        _ => lines.insert(i, JUNK[rng.random_range(0..JUNK.len())].to_string()),
    }
    lines.join("\n") + "\n"
}

#[test]
fn random_mutations_never_panic_or_hang() {
    let seeds = seeds();
    let mut rng = ChaCha8Rng::seed_from_u64(0x6d75_7461_7465);
    let dir = scratch("mutations");
    let path = dir.join("mutated.toml");
    let (mut accepted, mut rejected) = (0, 0);
    for round in 0..300 {
        let mut text = seeds[round % seeds.len()].clone();
        // One to three edits on top of each other.
        for _ in 0..rng.random_range(1..=3) {
            text = mutate(&text, &mut rng);
        }
        std::fs::write(&path, &text).unwrap();
        let run = run_with_limit(
            &[
                "check".as_ref(),
                path.as_os_str(),
                "--convention".as_ref(),
                "both".as_ref(),
            ],
            Duration::from_secs(5),
            &dir,
        );
        let status = run
            .status
            .unwrap_or_else(|| panic!("round {round}: emsplan ran past 5 s on:\n{text}"));
        match status.code() {
            Some(0) => accepted += 1,
            Some(1) => {
                rejected += 1;
                assert_eq!(
                    run.stderr.matches('\n').count(),
                    1,
                    "round {round}: one line on stderr, got {:?} for:\n{text}",
                    run.stderr
                );
                assert!(
                    run.stderr.starts_with("emsplan: "),
                    "round {round}: {}",
                    run.stderr
                );
            }
            other => panic!(
                "round {round}: exit {other:?} (101 is a panic); stderr {}\nfor:\n{text}",
                run.stderr
            ),
        }
    }
    eprintln!("mutations: {accepted} accepted, {rejected} rejected with one line");
    // Both outcomes occur, so the mutations neither all break nor all spare the file.
    assert!(
        accepted > 0 && rejected > 0,
        "accepted {accepted}, rejected {rejected}"
    );
}
