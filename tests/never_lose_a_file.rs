//! The command line never loses a user's file: an output that is one of the inputs is
//! refused and the input stays byte for byte as it was; outputs are written whole or not
//! at all; a Markdown report removes its own earlier figures, and only those.

use std::path::{Path, PathBuf};
use std::process::Command;

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

fn scratch(name: &str) -> PathBuf {
    let dir = Path::new(env!("CARGO_TARGET_TMPDIR")).join(format!("never-lose-{name}"));
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    dir
}

fn run(dir: &Path, args: &[&str]) -> (i32, String) {
    let out = Command::new(env!("CARGO_BIN_EXE_emsplan"))
        .current_dir(dir)
        .args(args)
        .output()
        .expect("the binary runs");
    (
        out.status.code().unwrap_or(-1),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

/// A copy of a shipped problem in its own folder.
fn copy(dir: &Path, problem: &str) -> (PathBuf, Vec<u8>) {
    let bytes = std::fs::read(root().join("problems").join(problem)).unwrap();
    let path = dir.join(problem);
    std::fs::write(&path, &bytes).unwrap();
    (path, bytes)
}

#[test]
fn a_report_over_its_own_layout_is_refused_and_the_layout_kept() {
    let dir = scratch("report-self");
    let (path, before) = copy(&dir, "growth-chambers.toml");
    // The same file however it is spelled: plainly, through `./` and `..`, or a link.
    std::fs::create_dir_all(dir.join("sub")).unwrap();
    #[cfg(unix)]
    std::os::unix::fs::symlink(&path, dir.join("link.toml")).unwrap();
    let spellings = [
        "growth-chambers.toml",
        "./growth-chambers.toml",
        "sub/../growth-chambers.toml",
        #[cfg(unix)]
        "link.toml",
    ];
    for out in spellings {
        for markdown in [false, true] {
            let mut args = vec!["report", "growth-chambers.toml", "-o", out];
            if markdown {
                args.push("--markdown");
            }
            let (code, err) = run(&dir, &args);
            assert_eq!(code, 1, "{args:?}: {err}");
            assert!(err.contains("that is the input file"), "{err}");
            assert_eq!(err.lines().count(), 1, "one line: {err}");
            assert_eq!(
                std::fs::read(&path).unwrap(),
                before,
                "{args:?} kept the file"
            );
        }
    }
}

#[test]
fn simulated_data_over_the_layout_is_refused() {
    let dir = scratch("data-self");
    let (path, before) = copy(&dir, "growth-chambers.toml");
    let (code, err) = run(
        &dir,
        &[
            "simulate",
            "growth-chambers.toml",
            "--runs",
            "10",
            "--data",
            "./growth-chambers.toml",
        ],
    );
    assert_eq!(code, 1, "{err}");
    assert!(err.contains("--data"), "{err}");
    assert_eq!(std::fs::read(&path).unwrap(), before);
}

#[test]
fn outputs_are_written_whole_with_nothing_left_beside_them() {
    let dir = scratch("whole");
    copy(&dir, "growth-chambers.toml");
    let (code, err) = run(&dir, &["report", "growth-chambers.toml", "-o", "r.html"]);
    assert_eq!(code, 0, "{err}");
    let html = std::fs::read_to_string(dir.join("r.html")).unwrap();
    assert!(html.trim_end().ends_with("</html>"));
    // An existing output is replaced whole, and no temporary file stays behind.
    std::fs::write(dir.join("d.csv"), "old contents\n").unwrap();
    let (code, err) = run(
        &dir,
        &[
            "simulate",
            "growth-chambers.toml",
            "--runs",
            "10",
            "--data",
            "d.csv",
        ],
    );
    assert_eq!(code, 0, "{err}");
    let csv = std::fs::read_to_string(dir.join("d.csv")).unwrap();
    assert!(!csv.contains("old contents") && csv.lines().count() > 100);
    let mut names: Vec<String> = std::fs::read_dir(&dir)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    names.sort();
    assert_eq!(names, ["d.csv", "growth-chambers.toml", "r.html"]);
}

#[test]
fn a_failed_write_leaves_no_file_and_says_cannot_write() {
    let dir = scratch("failed");
    copy(&dir, "growth-chambers.toml");
    let (code, err) = run(
        &dir,
        &["report", "growth-chambers.toml", "-o", "missing/r.html"],
    );
    assert_eq!(code, 3, "{err}");
    assert!(err.contains("cannot write"), "{err}");
    assert!(!dir.join("missing").exists());
}

#[test]
fn a_markdown_report_removes_its_own_earlier_figures_only() {
    let dir = scratch("figures");
    copy(&dir, "growth-chambers.toml");
    // Figures an earlier, longer report of the same name left, and one of another report.
    for stale in [
        "r-power-7.svg",
        "r-power-12.svg",
        "other-power-1.svg",
        "r-notes.svg",
    ] {
        std::fs::write(dir.join(stale), "<svg/>").unwrap();
    }
    let (code, err) = run(
        &dir,
        &["report", "growth-chambers.toml", "-o", "r.md", "--markdown"],
    );
    assert_eq!(code, 0, "{err}");
    let md = std::fs::read_to_string(dir.join("r.md")).unwrap();
    for (name, exists) in [
        ("r-power-7.svg", false),
        ("r-power-12.svg", false),
        ("other-power-1.svg", true),
        ("r-notes.svg", true),
        ("r-layout.svg", true),
        ("r-power-1.svg", true),
    ] {
        assert_eq!(dir.join(name).exists(), exists, "{name}");
        if exists && name.starts_with("r-") && name != "r-notes.svg" {
            assert!(md.contains(name), "the report links {name}");
        }
    }
}
