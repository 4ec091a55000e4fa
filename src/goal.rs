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
    /// The goal of a file: `[search] must_test`, else `[layout] of_interest`, else (in a
    /// layout of units) the treatment terms, else every term.
    pub fn from_spec(spec: &Spec, text: &str, layout: &Layout) -> Result<Goal, Error> {
        let at = |span: std::ops::Range<usize>| Some(spec::line_of(text, span.start));
        let s = &layout.structure;
        let listed = |key: &str, names: &[toml::Spanned<String>]| -> Result<Vec<Mask>, Error> {
            let mut out = Vec::new();
            for m in names {
                let term = parse_term_label(s, m.get_ref())
                    .map_err(|e| Error::invalid(at(m.span()), format!("{key}: {e}")))?;
                if term.is_residual() {
                    return Err(Error::invalid(
                        at(m.span()),
                        format!("{key}: the residual is not tested; list model terms"),
                    ));
                }
                if out.contains(&term.live) {
                    return Err(Error::invalid(
                        at(m.span()),
                        format!("{key}: \"{}\" is listed twice", m.get_ref()),
                    ));
                }
                out.push(term.live);
            }
            Ok(out)
        };
        let of_interest = match &spec.layout {
            Some(l) => listed("[layout] of_interest", &l.get_ref().of_interest)?,
            None => Vec::new(),
        };
        let treatment_terms = || -> Vec<Mask> {
            crate::term::model_terms(s)
                .iter()
                .filter(|t| s.units.is_treatment_term(t.subscripts()))
                .map(|t| t.live)
                .collect()
        };
        let default_terms = if !of_interest.is_empty() {
            of_interest
        } else if s.units.declared() {
            treatment_terms()
        } else {
            Vec::new()
        };
        let Some(search) = &spec.search else {
            return Ok(Goal {
                must_test: default_terms,
                ..Goal::default()
            });
        };
        let mut must_test = listed("[search] must_test", &search.must_test)?;
        if must_test.is_empty() {
            must_test = default_terms;
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
