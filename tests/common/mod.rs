//! What the `analyze` tests share: paths, layouts and a run of the analysis.

use std::path::PathBuf;

use emsplan::analyze::{AnalyzeReport, analyze, read_data};
use emsplan::layout::Layout;
use serde_json::Value;

pub fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

/// A committed reference file under tests/reference/, parsed.
pub fn reference(name: &str) -> Value {
    let text = std::fs::read_to_string(root().join("tests/reference").join(name))
        .expect("the reference file is committed");
    serde_json::from_str(&text).expect("the reference is JSON")
}

pub fn layout_from_text(text: &str) -> Layout {
    let spec = emsplan::spec::parse(text).expect("parses");
    Layout::from_spec(&spec, text).expect("valid layout")
}

pub fn layout_from_file(rel: &str) -> Layout {
    Layout::from_file(&root().join(rel))
        .expect("the shipped layout loads")
        .0
}

/// `analyze` at alpha 0.05 on a data file (a path from the repository root).
pub fn run(layout: &Layout, data: &str) -> AnalyzeReport {
    let obs = read_data(&root().join(data), layout, None).expect("the fixture reads");
    analyze(layout, &obs, 0.05).expect("analyze runs")
}
