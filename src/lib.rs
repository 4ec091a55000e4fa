//! emsplan: expected mean squares, error terms, power and cost for planned experiments.
//!
//! The pipeline runs one way: `spec` (the file as written) -> `layout` (validated) ->
//! `term` and `ems` (the symbolic model, then numbers) -> `errorterm` (how each term is
//! tested) -> the jobs (`check`, ...) -> `render`. `cli` is a thin shell over them.

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
