//! emsplan: expected mean squares, error terms, power and cost for planned experiments.
//!
//! The pipeline runs one way: `spec` (the file as written) -> `layout` (validated) ->
//! `ems` and `errorterm` (the exact engine) or `unbalanced` (the synthesis engine),
//! gathered by `engine::Analysis` -> `planning` (power, cost) -> the jobs (`check`,
//! `compare`, `search`, `simulate`, `analyze`, `report`), whose results are data ->
//! `render`, the only place that writes words. `cli` is a thin shell over them.
//!
//! A layout read from text, and how one of its terms is tested:
//!
//! ```
//! use emsplan::check::check;
//! use emsplan::errorterm::Verdict;
//! use emsplan::layout::Layout;
//! use emsplan::planning::PlanningValues;
//!
//! let text = r#"
//! [layout]
//! replicates = 2
//!
//! [[factor]]
//! name = "diet"
//! kind = "fixed"
//! levels = 3
//!
//! [[factor]]
//! name = "tank"
//! kind = "random"
//! levels = 4
//! within = ["diet"]
//!
//! [sd]
//! residual = 1.0
//! tank = 0.5
//!
//! [effect]
//! diet = 0.8
//! "#;
//! let spec = emsplan::spec::parse(text)?;
//! let layout = Layout::from_spec(&spec, text)?;
//! let plan = PlanningValues::from_spec(&spec, text, &layout)?;
//! let report = check(&layout, layout.structure.convention, &plan)?;
//!
//! let diet = report.terms.iter().find(|t| t.label == "diet").unwrap();
//! let test = diet.test.as_ref().unwrap();
//! // Diet is applied to whole tanks, so it is tested over the tanks, on 3 × (4 - 1) df.
//! assert_eq!(test.verdict, Verdict::Exact);
//! assert_eq!(test.denominator[0].term, "tank(diet)");
//! assert_eq!(test.denominator_df, Some(9.0));
//! let power = test.power.unwrap();
//! assert!(power > 0.0 && power < 1.0);
//! # Ok::<(), emsplan::error::Error>(())
//! ```

pub mod analyze;
pub mod balanced;
pub mod check;
pub mod cli;
pub mod compare;
pub mod dist;
pub mod ems;
pub mod engine;
pub mod error;
pub mod errorterm;
pub mod findings;
pub mod goal;
pub mod layout;
pub mod planning;
pub mod progress;
pub mod render;
pub mod repair;
pub mod report;
pub mod search;
pub mod simulate;
pub mod spec;
pub mod unbalanced;
pub mod variant;

/// The model's terms, part of the layout layer (`layout::term`).
pub use layout::term;
