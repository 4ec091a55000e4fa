//! Unbalanced layouts: cells removed from the full layout ("we lost a chamber", "one
//! treatment got three benches and the other two").
//!
//! The balanced engine's rules (the tableau of subscripts) do not hold once cells hold
//! unequal numbers of observations. Here everything is computed numerically from the
//! design matrices:
//!
//! - `removal`: which observations are missing, parsed and validated for `layout`;
//! - `design`: the observations that are left and the cells of every term;
//! - `fit`: the sums of squares (sequential or type III) as projections, their df from
//!   ranks, and their expected mean squares by Hartley's (1967) method of synthesis;
//! - `denominator`: error terms as float combinations of mean squares, Satterthwaite df
//!   and power;
//! - `report`: the `check` report for an unbalanced layout.
//!
//! For reuse (e.g. analysing data): `Design::new(layout)` lists the observations in a
//! fixed order, `Fit::new(&design, kind)` fits the layout once, and
//! `Fit::sums_of_squares(&design, &y)` gives every term's sum of squares for a response.

mod blocked;
pub mod denominator;
pub mod design;
pub mod fit;
pub mod removal;
pub mod report;

pub use denominator::{SynthesisTest, error_terms};
pub use design::{Design, Observation};
pub use fit::{Fit, SynthesisEms};
pub use removal::Removal;
pub use report::outcome;

use crate::error::Error;
use crate::layout::Layout;

/// What an unbalanced check computes before any report: the design, the fit, the
/// expected mean squares and every term's error term.
#[derive(Debug, Clone)]
pub struct Analysis {
    pub design: Design,
    pub fit: Fit,
    pub ems: SynthesisEms,
    pub tests: Vec<Option<SynthesisTest>>,
}

impl Analysis {
    /// Fits the layout with its own choice of sums of squares.
    pub fn new(layout: &Layout) -> Result<Analysis, Error> {
        let design = Design::new(layout).map_err(|m| Error::invalid(None, m))?;
        let fit = Fit::new(&design, layout.sums_of_squares);
        let ems = fit.ems(&design);
        let tests = error_terms(&design.model, &ems, &fit.df);
        Ok(Analysis {
            design,
            fit,
            ems,
            tests,
        })
    }
}
