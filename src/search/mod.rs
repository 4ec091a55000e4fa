//! The design search: the cheapest layout whose must-test terms are all testable, with
//! enough denominator df and power, within the budget.
//!
//! - `problem`: the `[search]` table, validated against the base layout.
//! - `space`: the structures the choices allow, and each one's level-count dimensions.
//! - `evaluate`: screening one candidate (cost, error terms, df, power), with the error
//!   terms cached per structure and set of one-level dimensions.
//! - `enumerate`: pruned enumeration of every structure, in parallel batches, into a tally.
//! - `optimize`: an exact integer program per structure for the cheapest candidate.
//! - `report`: the result structs the renderers print.
//!
//! Nothing here prints: progress goes through the `Progress` trait.

pub mod enumerate;
pub mod evaluate;
pub mod optimize;
pub mod placement;
pub mod problem;
pub mod report;
pub mod space;

use crate::error::Error;

pub use enumerate::{Progress, Quiet, Tally};
pub use evaluate::{Outcome, Rejection, Screen};
pub use problem::{DEFAULT_MAX_CANDIDATES, Problem};
pub use report::SearchReport;

/// How the search looks for the best layout.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Method {
    /// Pruned enumeration of every candidate: the best, the ranking, the frontier and
    /// the tally of rejections.
    Enumerate,
    /// The integer program per structure: the best only, without listing the space.
    Optimize,
}

#[derive(Debug, Clone, Copy)]
pub struct Options {
    /// Candidates in the ranked table.
    pub top: usize,
    /// Enumerations larger than this stop before they start.
    pub max_candidates: u64,
    /// Cut over-budget branches (off only to test that cutting changes nothing).
    pub prune: bool,
    pub method: Method,
}

impl Default for Options {
    fn default() -> Self {
        Options {
            top: 10,
            max_candidates: DEFAULT_MAX_CANDIDATES,
            prune: true,
            method: Method::Enumerate,
        }
    }
}

/// A problem with its structures prepared for screening.
pub struct Search {
    pub problem: Problem,
    pub screens: Vec<Screen>,
    /// Picks of the choices that gave no valid layout, with why.
    pub skipped: Vec<String>,
}

impl Search {
    pub fn new(problem: Problem) -> Result<Search, Error> {
        let (variants, skipped) = space::variants(&problem);
        if variants.is_empty() {
            return Err(Error::invalid(
                None,
                format!(
                    "no combination of the [[search.choice]] alternatives gives a valid layout ({}): change the alternatives",
                    skipped.join("; ")
                ),
            ));
        }
        let screens = variants
            .into_iter()
            .map(|v| Screen::new(&problem, v))
            .collect();
        Ok(Search {
            problem,
            screens,
            skipped,
        })
    }

    /// Candidates in the space: Σ over structures of Π of their dimensions' sizes.
    pub fn space(&self) -> u128 {
        self.screens.iter().map(|s| s.variant.size()).sum()
    }

    /// Runs the search.
    pub fn run(&self, options: &Options, progress: &dyn Progress) -> Result<SearchReport, Error> {
        let space = self.space();
        match options.method {
            Method::Enumerate => {
                if space > options.max_candidates as u128 {
                    return Err(Error::invalid(
                        None,
                        format!(
                            "the search space holds {space} candidates, more than the limit of {}: narrow the ranges under [search.levels] or the [[search.choice]] alternatives, raise the limit with --max-candidates, or find the best alone with --method optimize",
                            options.max_candidates
                        ),
                    ));
                }
                let tally =
                    enumerate::enumerate(&self.screens, options.top, options.prune, progress);
                let relaxed = if tally.top.is_empty() && self.problem.budget.is_some() {
                    self.without_budget()?.best_by_enumeration()
                } else {
                    None
                };
                Ok(report::build(self, options, tally, relaxed))
            }
            Method::Optimize => {
                let found = optimize::optimize(
                    &self.screens,
                    &self.problem,
                    options.top,
                    options.max_candidates,
                )
                .map_err(|m| Error::invalid(None, m))?;
                Ok(report::build_optimized(self, options, found))
            }
        }
    }

    /// The same search with no budget.
    fn without_budget(&self) -> Result<Search, Error> {
        let mut problem = self.problem.clone();
        problem.budget = None;
        Search::new(problem)
    }

    /// The best candidate by pruned enumeration. Structures are numbered as in every
    /// search of the same problem whatever its budget, so the entry can be described
    /// by either.
    pub fn best_by_enumeration(&self) -> Option<enumerate::Entry> {
        let tally = enumerate::enumerate(&self.screens, 1, true, &Quiet);
        tally.top.into_iter().next()
    }
}
