//! The synthesis engine's parts for one unbalanced layout, for the tests that hold the
//! engine itself (the design, the fit, the synthesised E(MS) and the float error terms)
//! rather than the `engine::Analysis` built from them.

use emsplan::layout::Layout;
use emsplan::unbalanced::{Design, Fit, SynthesisEms, SynthesisTest, error_terms};

pub struct Analysis {
    pub design: Design,
    pub fit: Fit,
    pub ems: SynthesisEms,
    pub tests: Vec<Option<SynthesisTest>>,
}

impl Analysis {
    pub fn new(layout: &Layout) -> Result<Analysis, String> {
        let design = Design::new(layout)?;
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
