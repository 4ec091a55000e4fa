//! The table of planning standard deviations is `[sd]`; its old name `[prior]` still
//! works, with a one-line note on stderr, and so does `compare --set prior.TERM=...`.
//! The expected results are those of the same input under the new name: the rename
//! changes what the file may be called, never what it computes.

use std::path::{Path, PathBuf};
use std::process::Command;

use emsplan::spec::{self, Note};

const OLD: &str = "tests/fixtures/layouts/old-table-name-prior.toml";

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

fn run(args: &[&str]) -> (i32, String, String) {
    let out = Command::new(env!("CARGO_BIN_EXE_emsplan"))
        .current_dir(root())
        .args(args)
        .output()
        .expect("the binary runs");
    (
        out.status.code().unwrap_or(-1),
        String::from_utf8_lossy(&out.stdout).into_owned(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

/// The old fixture's text with the table under its new name, written to a scratch file.
fn new_name_copy(tag: &str) -> PathBuf {
    let text = std::fs::read_to_string(root().join(OLD)).expect("the fixture is committed");
    assert_eq!(
        text.matches("\n[prior]\n").count(),
        1,
        "the fixture has one [prior]"
    );
    let dir = Path::new(env!("CARGO_TARGET_TMPDIR")).join(format!("sd_table-{tag}"));
    std::fs::create_dir_all(&dir).unwrap();
    let path = dir.join("new-name.toml");
    std::fs::write(&path, text.replace("\n[prior]\n", "\n[sd]\n")).unwrap();
    path
}

#[test]
fn the_old_name_reads_as_the_new_one_with_a_note() {
    let text = std::fs::read_to_string(root().join(OLD)).unwrap();
    let old = spec::parse(&text).expect("parses");
    let new = spec::parse(&text.replace("\n[prior]\n", "\n[sd]\n")).expect("parses");
    // The fixture's [prior] header is on line 20.
    assert_eq!(
        old.notes,
        vec![Note {
            file: None,
            line: Some(20),
            message: "[prior] is now called [sd]; the old name still works".into(),
        }]
    );
    assert!(new.notes.is_empty(), "{:?}", new.notes);
    let values = |s: &spec::Spec| {
        s.sd.as_ref()
            .expect("the table is read")
            .get_ref()
            .iter()
            .map(|(k, v)| (k.clone(), *v.get_ref()))
            .collect::<Vec<_>>()
    };
    assert_eq!(values(&old), values(&new));
    assert_eq!(
        values(&old),
        vec![("residual".to_string(), 2.5), ("tank".to_string(), 1.2)]
    );
}

#[test]
fn the_note_names_the_file_and_line_when_read_from_disk() {
    let (old, _) = spec::read(&root().join(OLD)).expect("reads");
    let shown = root().join(OLD).display().to_string();
    assert_eq!(old.notes.len(), 1);
    assert_eq!(
        old.notes[0].to_string(),
        format!("{shown} line 20: [prior] is now called [sd]; the old name still works")
    );
}

/// `check` gives the same output under either name; only the old one prints the note,
/// as the one line on stderr.
#[test]
fn check_is_the_same_under_either_name() {
    let new = new_name_copy("check");
    for format in ["text", "json"] {
        let (code_old, out_old, err_old) = run(&["check", OLD, "--format", format]);
        let (code_new, out_new, err_new) =
            run(&["check", new.to_str().unwrap(), "--format", format]);
        assert_eq!((code_old, code_new), (0, 0), "{err_old}{err_new}");
        assert_eq!(out_old, out_new, "{format}");
        assert!(out_old.contains("tank(temperature)"), "{out_old}");
        assert_eq!(
            err_old,
            format!(
                "emsplan: {OLD} line 20: [prior] is now called [sd]; the old name still works\n"
            )
        );
        assert_eq!(err_new, "");
    }
}

/// simulate reads the table under the old name too: same seed, same output.
#[test]
fn simulate_is_the_same_under_either_name() {
    let new = new_name_copy("simulate");
    let args = ["--runs", "200", "--seed", "3", "--format", "json"];
    let (code_old, out_old, err_old) = run(&[&["simulate", OLD][..], &args].concat());
    let (code_new, out_new, err_new) =
        run(&[&["simulate", new.to_str().unwrap()][..], &args].concat());
    assert_eq!((code_old, code_new), (0, 0), "{err_old}{err_new}");
    assert_eq!(out_old, out_new);
    assert!(err_old.contains("[prior] is now called [sd]"), "{err_old}");
    assert!(!err_new.contains("[prior]"), "{err_new}");
}

/// Every shipped problem and fixture but the one kept for this test uses the new name,
/// so the examples teach it.
#[test]
fn shipped_files_use_the_new_name() {
    let mut files = Vec::new();
    let mut dirs = vec![root().join("problems"), root().join("tests/fixtures")];
    while let Some(dir) = dirs.pop() {
        for entry in std::fs::read_dir(&dir).unwrap() {
            let path = entry.unwrap().path();
            if path.is_dir() {
                dirs.push(path);
            } else if path.extension().is_some_and(|e| e == "toml") {
                files.push(path);
            }
        }
    }
    assert!(files.len() > 20, "{files:?}");
    let mut old = Vec::new();
    for path in &files {
        let text = std::fs::read_to_string(path).unwrap();
        if text.lines().any(|l| l.trim() == "[prior]") {
            old.push(path.strip_prefix(root()).unwrap().display().to_string());
        }
    }
    old.sort();
    assert_eq!(
        old,
        vec![
            "tests/fixtures/bad/sd-and-prior.toml".to_string(),
            OLD.to_string()
        ]
    );
}

/// `--set sd.TERM=...` and its old spelling `--set prior.TERM=...` make the same change;
/// the old one adds a note on stderr.
#[test]
fn compare_accepts_the_old_key_with_a_note() {
    let farms = "problems/field-sites.toml";
    let new = [
        "compare",
        farms,
        "--set",
        "farm.kind=random",
        "--set",
        "sd.farm=0.3",
        "--set",
        "sd.blend x farm=0.15",
        "--format",
        "json",
    ];
    let old: Vec<&str> = new
        .iter()
        .map(|a| match *a {
            "sd.farm=0.3" => "prior.farm=0.3",
            "sd.blend x farm=0.15" => "prior.blend x farm=0.15",
            other => other,
        })
        .collect();
    let (code_new, out_new, err_new) = run(&new);
    let (code_old, out_old, err_old) = run(&old);
    assert_eq!((code_new, code_old), (0, 0), "{err_new}{err_old}");
    assert_eq!(err_new, "");
    assert_eq!(
        err_old,
        "emsplan: --set prior.farm=0.3: prior.TERM is now called sd.TERM (sd.farm); the old name still works\n\
         emsplan: --set prior.blend x farm=0.15: prior.TERM is now called sd.TERM (sd.blend x farm); the old name still works\n"
    );
    let mut a: serde_json::Value = serde_json::from_str(&out_new).unwrap();
    let mut b: serde_json::Value = serde_json::from_str(&out_old).unwrap();
    // The list of changes repeats each key as typed; everything computed is the same.
    assert_eq!(a["changes"][1], "sd.farm = 0.3");
    assert_eq!(b["changes"][1], "prior.farm = 0.3");
    for v in [&mut a, &mut b] {
        v["changes"] = serde_json::Value::Null;
        v["verdict"] = serde_json::Value::Null;
    }
    assert_eq!(a, b);
    let blend = a["terms"]
        .as_array()
        .unwrap()
        .iter()
        .find(|t| t["label"] == "blend")
        .expect("the blend term");
    assert_eq!(blend["status"], "weaker", "{blend}");
}

/// An error under the old name comes after the note, which says why the message speaks
/// of `[sd]` and `sd.TERM`: the note, then the one-line error, exit 1.
#[test]
fn an_error_under_the_old_name_follows_the_note() {
    let (code, out, err) = run(&[
        "compare",
        "problems/growth-chambers.toml",
        "--set",
        "prior.light=1.0",
    ]);
    assert_eq!(code, 1, "{err}");
    assert!(out.is_empty());
    let lines: Vec<&str> = err.lines().collect();
    assert_eq!(lines.len(), 2, "{err}");
    assert!(
        lines[0].contains("prior.TERM is now called sd.TERM"),
        "{err}"
    );
    assert!(
        lines[1].starts_with("emsplan: --set prior.light=1.0: ")
            && lines[1].contains("\"light\" is a fixed term"),
        "{err}"
    );

    let text = std::fs::read_to_string(root().join(OLD)).unwrap();
    let dir = Path::new(env!("CARGO_TARGET_TMPDIR")).join("sd_table-error");
    std::fs::create_dir_all(&dir).unwrap();
    let path = dir.join("no-residual.toml");
    std::fs::write(&path, text.replace("residual = 2.5\n", "")).unwrap();
    let shown = path.display().to_string();
    let (code, out, err) = run(&["check", &shown]);
    assert_eq!(code, 1, "{err}");
    assert!(out.is_empty());
    assert_eq!(
        err,
        format!(
            "emsplan: {shown} line 20: [prior] is now called [sd]; the old name still works\n\
             emsplan: {shown} line 20: [sd] needs `residual`, the standard deviation between observations within a cell\n"
        )
    );
}

/// `search` and `report` read the old name too, with the note once per file read.
#[test]
fn search_and_report_read_the_old_name_with_one_note() {
    let new = "problems/search-chamber-power.toml";
    let text = std::fs::read_to_string(root().join(new)).unwrap();
    assert_eq!(text.matches("\n[sd]\n").count(), 1);
    let dir = Path::new(env!("CARGO_TARGET_TMPDIR")).join("sd_table-search");
    std::fs::create_dir_all(&dir).unwrap();
    let old = dir.join("old-name.toml");
    std::fs::write(&old, text.replace("\n[sd]\n", "\n[prior]\n")).unwrap();
    let old = old.to_str().unwrap();
    for command in [
        vec!["search", "--format", "json"],
        vec!["report", "--markdown"],
    ] {
        let (code_new, out_new, err_new) = run(&[&command[..1], &[new], &command[1..]].concat());
        let (code_old, out_old, err_old) = run(&[&command[..1], &[old], &command[1..]].concat());
        assert_eq!((code_new, code_old), (0, 0), "{err_new}{err_old}");
        assert!(!err_new.contains("[prior]"), "{err_new}");
        assert_eq!(
            err_old.matches("[prior] is now called [sd]").count(),
            1,
            "{command:?}: {err_old}"
        );
        if command[0] == "search" {
            assert_eq!(out_new, out_old);
        } else {
            // The report repeats its command line, which names the file.
            assert_eq!(
                out_new.replace(new, "FILE"),
                out_old.replace(old, "FILE"),
                "{command:?}"
            );
        }
    }
}
