//! What `--help` says about the engine must stay true: the limits come from the
//! constants the engine enforces, and no command is described as narrower than it is.

use std::process::Command;

fn help(args: &[&str]) -> String {
    let out = Command::new(env!("CARGO_BIN_EXE_emsplan"))
        .args(args)
        .arg("--help")
        .output()
        .expect("the binary runs");
    assert_eq!(out.status.code(), Some(0));
    String::from_utf8(out.stdout).expect("UTF-8")
}

#[test]
fn the_help_states_the_limits_the_engine_enforces() {
    let limits = [
        format!("at most {} factors", emsplan::layout::MAX_FACTORS),
        format!(
            "at most {} observations and {} cells",
            emsplan::unbalanced::removal::MAX_OBSERVATIONS,
            emsplan::unbalanced::removal::MAX_CELLS
        ),
        format!("--runs at most {}", emsplan::simulate::MAX_RUNS),
        format!("(default {})", emsplan::search::DEFAULT_MAX_CANDIDATES),
    ];
    for command in [
        &[][..],
        &["check"],
        &["compare"],
        &["simulate"],
        &["analyze"],
        &["search"],
        &["report"],
    ] {
        let text = help(command);
        for l in &limits {
            assert!(text.contains(l.as_str()), "{command:?} --help lacks {l:?}");
        }
    }
    assert!(help(&[]).contains(
        "Exit status: 0 success; 1 bad input (a file or value to fix); 2 usage (the command line could not be parsed); 3 the output could not be written."
    ));
}

/// analyze reads unbalanced data (tests/analyze_unbalanced.rs), simulate reads the table
/// under its current name.
#[test]
fn the_help_describes_what_the_commands_do_now() {
    let top = help(&[]);
    assert!(!top.contains("balanced data:"), "{top}");
    assert!(top.contains("Analyze the data, balanced or not"), "{top}");
    assert!(help(&["analyze"]).contains("balanced or not"));
    let simulate = help(&["simulate"]);
    assert!(simulate.contains("[sd] table") && !simulate.contains("[prior]"));
    assert!(help(&["compare"]).contains("sd.bench=2.0"));
}
