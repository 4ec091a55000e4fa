//! Unbalanced layouts: cells removed from the full layout ("we lost a chamber", "one
//! treatment got three benches and the other two").
//!
//! The balanced engine's rules (the tableau of subscripts) do not hold once cells hold
//! unequal numbers of observations. Here everything is computed numerically from the
//! design matrices:
//!
//! - `removal` (in `layout`): which observations are missing, parsed and validated;
//! - `design`: the observations that are left and the cells of every term;
//! - `fit`: the sums of squares (sequential or type III) as projections, their df from
//!   ranks, and their expected mean squares by Hartley's (1967) method of synthesis;
//! - `denominator`: error terms as float combinations of mean squares.
//!
//! `engine::Analysis` gathers them into the same analysis the balanced engine gives.
//!
//! For reuse (e.g. analysing data): `Design::new(layout)` lists the observations in a
//! fixed order, `Fit::new(&design, kind)` fits the layout once, and
//! `Fit::sums_of_squares(&design, &y)` gives every term's sum of squares for a response.

mod blocked;
pub mod denominator;
pub mod design;
pub mod fit;
/// Removals belong to the layout (`layout::removal`); re-exported where they are used.
pub use crate::layout::removal;

pub use denominator::{SynthesisTest, error_terms};
pub use design::{Design, Observation};
pub use fit::{Fit, SynthesisEms};
pub use removal::Removal;
