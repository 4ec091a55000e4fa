//! One exit-code scheme for every command (README.md, docs/check.md):
//!
//! | code | meaning |
//! |---|---|
//! | 0 | success |
//! | 1 | bad input: a file or value the user must fix |
//! | 2 | usage: the argument parser could not parse the command line |
//! | 3 | the output could not be written |
//!
//! Each case runs the binary and names why it is that code. Every failure is one line on
//! stderr, starting `emsplan: `, and nothing on stdout; 101 (a panic) never appears.

use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

/// A scratch directory of this test binary, emptied first.
fn scratch(tag: &str) -> PathBuf {
    let dir = Path::new(env!("CARGO_TARGET_TMPDIR")).join(format!("exit_codes-{tag}"));
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    dir
}

struct Run {
    code: Option<i32>,
    stdout: String,
    stderr: String,
}

fn run(args: &[&str]) -> Run {
    let out = Command::new(env!("CARGO_BIN_EXE_emsplan"))
        .current_dir(root())
        .args(args)
        .stdin(Stdio::null())
        .output()
        .expect("the binary runs");
    Run {
        code: out.status.code(),
        stdout: String::from_utf8_lossy(&out.stdout).into_owned(),
        stderr: String::from_utf8_lossy(&out.stderr).into_owned(),
    }
}

/// Asserts the code, and for a failure the one-line message with `phrase` in it.
fn assert_exit(args: &[&str], code: i32, phrase: &str) {
    let r = run(args);
    assert_ne!(r.code, Some(101), "{args:?} panicked: {}", r.stderr);
    assert_eq!(r.code, Some(code), "{args:?}: stderr {}", r.stderr);
    if code == 0 {
        return;
    }
    assert!(r.stdout.is_empty(), "{args:?}: stdout {:?}", r.stdout);
    assert!(r.stderr.contains(phrase), "{args:?}: {}", r.stderr);
    if code != 2 {
        // The argument parser writes its own, longer usage message; ours are one line.
        assert_eq!(r.stderr.lines().count(), 1, "{args:?}: {}", r.stderr);
        assert!(r.stderr.starts_with("emsplan: "), "{args:?}: {}", r.stderr);
    }
}

const CHAMBERS: &str = "problems/growth-chambers.toml";
const DATA: &str = "problems/growth-chambers-data.csv";
const BREAD: &str = "problems/search-bread-panel.toml";
const BAD: &str = "tests/fixtures/bad/levels-zero.toml";

#[test]
fn success_is_0() {
    let dir = scratch("success");
    let report = dir.join("report.html");
    let data = dir.join("data.csv");
    for args in [
        vec!["check", CHAMBERS],
        vec!["compare", CHAMBERS, "--set", "chamber.levels=2"],
        vec!["analyze", CHAMBERS, DATA],
        vec!["search", BREAD, "--format", "json"],
        vec![
            "simulate",
            CHAMBERS,
            "--runs",
            "0",
            "--data",
            data.to_str().unwrap(),
        ],
        vec!["report", CHAMBERS, "-o", report.to_str().unwrap()],
        vec!["--help"],
        vec!["check", "--help"],
        vec!["--version"],
    ] {
        assert_exit(&args, 0, "");
    }
    assert!(report.is_file() && data.is_file());
}

/// A bad file, a bad value: the user must fix the input.
#[test]
fn bad_input_is_1() {
    let missing = "tests/fixtures/no-such-layout.toml";
    let cases: &[(&[&str], &str)] = &[
        // A layout file with a level count of 0 (line 13), under every command.
        (&["check", BAD], "line 13"),
        (&["compare", BAD, "--set", "replicates=2"], "line 13"),
        (&["compare", CHAMBERS, BAD], "line 13"),
        (&["simulate", BAD], "line 13"),
        (&["analyze", BAD, DATA], "line 13"),
        (&["search", BAD], "line 13"),
        (&["report", BAD], "line 13"),
        // A file that is not there.
        (&["check", missing], "cannot read the file"),
        (
            &["analyze", CHAMBERS, "tests/fixtures/data/no-such.csv"],
            "cannot read the file",
        ),
        // A data file that does not fit the layout (its factor columns are not there).
        (&["analyze", BREAD, DATA], "no column for the factor"),
        // Bad --set, --drop and --remove values.
        (
            &["compare", CHAMBERS, "--set", "bnch.levels=3"],
            "\"bnch\" is not a factor",
        ),
        (
            &["compare", CHAMBERS, "--set", "chamber.levels=0"],
            "not a whole number",
        ),
        (
            &["compare", CHAMBERS, "--set", "replicates"],
            "write KEY=VALUE",
        ),
        (
            &["compare", CHAMBERS, "--drop", "shelf"],
            "\"shelf\" is not a factor",
        ),
        (
            &["compare", CHAMBERS, "--remove", "light=9"],
            "beyond the 3 levels",
        ),
        (&["compare", CHAMBERS], "needs something to compare with"),
        // Values the parser accepts but the job refuses.
        (&["check", CHAMBERS, "--alpha", "1.5"], "between 0 and 1"),
        (&["search", BREAD, "--top", "0"], "--top"),
        (&["simulate", CHAMBERS, "--runs", "1000000000"], "--runs"),
        (&["report", CHAMBERS, "--runs", "0"], "--runs"),
    ];
    for (args, phrase) in cases {
        assert_exit(args, 1, phrase);
    }
}

/// What the argument parser refuses: unknown flags, missing arguments, a value of the
/// wrong type or outside its list.
#[test]
fn usage_is_2() {
    let cases: &[(&[&str], &str)] = &[
        (&["check", CHAMBERS, "--nonsense"], "--nonsense"),
        (&["compare", CHAMBERS, "--sett", "replicates=2"], "--sett"),
        (&["search", BREAD, "--top", "ten"], "ten"),
        (&["simulate", CHAMBERS, "--runs", "-1"], "-1"),
        (&["analyze", CHAMBERS], "<DATA>"),
        (&["report"], "<LAYOUT>"),
        (&["check", CHAMBERS, "--format", "yaml"], "yaml"),
        (&["plan", CHAMBERS], "plan"),
        (&[], "Usage"),
    ];
    for (args, phrase) in cases {
        assert_exit(args, 2, phrase);
    }
}

/// Output that cannot be written: a directory that does not exist.
#[test]
fn cannot_write_is_3() {
    let dir = scratch("cannot-write");
    let gone = dir.join("no-such-dir");
    let html = gone.join("report.html");
    let md = gone.join("report.md");
    let csv = gone.join("data.csv");
    let cases: [(Vec<&str>, &Path); 3] = [
        (
            vec!["report", CHAMBERS, "-o", html.to_str().unwrap()],
            &html,
        ),
        (
            vec!["report", CHAMBERS, "--markdown", "-o", md.to_str().unwrap()],
            &md,
        ),
        (
            vec![
                "simulate",
                CHAMBERS,
                "--runs",
                "0",
                "--data",
                csv.to_str().unwrap(),
            ],
            &csv,
        ),
    ];
    for (args, path) in &cases {
        assert_exit(args, 3, &format!("{}: cannot write", path.display()));
    }
    assert!(!gone.exists());
    // The input is read first: a bad file is still bad input, whatever the output.
    assert_exit(&["report", BAD, "-o", html.to_str().unwrap()], 1, "line 13");
}

/// Standard output that refuses writes (a full device) is an output failure too.
#[cfg(target_os = "linux")]
#[test]
fn a_full_standard_output_is_3() {
    let full = std::fs::OpenOptions::new()
        .write(true)
        .open("/dev/full")
        .expect("/dev/full is there on Linux");
    let out = Command::new(env!("CARGO_BIN_EXE_emsplan"))
        .current_dir(root())
        .args(["check", CHAMBERS])
        .stdout(full)
        .output()
        .expect("the binary runs");
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(3), "{stderr}");
    assert!(
        stderr.starts_with("emsplan: standard output: cannot write:")
            && stderr.lines().count() == 1,
        "{stderr}"
    );
}

/// A reader that stops early (`| head`) is not a failure of emsplan's.
#[test]
fn a_closed_pipe_is_not_an_error() {
    let mut child = Command::new(env!("CARGO_BIN_EXE_emsplan"))
        .current_dir(root())
        .args(["check", CHAMBERS, "--format", "json"])
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("the binary runs");
    drop(child.stdout.take());
    let out = child.wait_with_output().unwrap();
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert!(out.stderr.is_empty());
}
