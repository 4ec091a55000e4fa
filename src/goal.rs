//! What a layout must achieve: the must-test terms and how well they must be tested,
//! from the `[search]` table. `check` and `compare` use it to decide which terms need a
//! repair; the design search uses the same goal to judge candidates.

use crate::error::Error;
use crate::layout::Layout;
use crate::planning::check_probability;
use crate::spec::{self, Spec};
use crate::term::{Mask, parse_term_label};

#[derive(Debug, Clone, PartialEq, Default)]
pub struct Goal {
    /// Live sets of the must-test terms; empty means every term.
    pub must_test: Vec<Mask>,
    pub min_df: Option<f64>,
    pub target_power: Option<f64>,
    pub exact_only: bool,
}

impl Goal {
    pub fn from_spec(spec: &Spec, text: &str, layout: &Layout) -> Result<Goal, Error> {
        let Some(search) = &spec.search else {
            return Ok(Goal::default());
        };
        let at = |span: std::ops::Range<usize>| Some(spec::line_of(text, span.start));
        let mut must_test = Vec::new();
        for m in &search.must_test {
            let term = parse_term_label(&layout.structure, m.get_ref())
                .map_err(|e| Error::invalid(at(m.span()), format!("[search] must_test: {e}")))?;
            if term.is_residual() {
                return Err(Error::invalid(
                    at(m.span()),
                    "[search] must_test: the residual is not tested; list model terms",
                ));
            }
            must_test.push(term.live);
        }
        let min_df = match &search.min_df {
            None => None,
            Some(d) => {
                let v = *d.get_ref();
                if !v.is_finite() || v < 0.0 {
                    return Err(Error::invalid(
                        at(d.span()),
                        format!("[search] min_df must be a finite number of at least 0 (got {v})"),
                    ));
                }
                Some(v)
            }
        };
        let target_power = match &search.target_power {
            None => None,
            Some(p) => Some(
                check_probability(*p.get_ref(), "[search] target_power")
                    .map_err(|m| Error::invalid(at(p.span()), m))?,
            ),
        };
        Ok(Goal {
            must_test,
            min_df,
            target_power,
            exact_only: search.exact_only.unwrap_or(false),
        })
    }

    /// Whether a term (by live set) is one the goal cares about.
    pub fn covers(&self, live: Mask) -> bool {
        self.must_test.is_empty() || self.must_test.contains(&live)
    }
}
