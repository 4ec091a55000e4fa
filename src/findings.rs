//! What a check finds about a layout's terms, as data: the result types that `check`
//! builds and that `compare`, `report`, `search` and the renderers read.
//!
//! Terms are named by identity (`id`, their live set of factor indices) and, for people
//! and scripts, by label and factor names. Reasons, shortfalls and repairs are values:
//! which components cannot be isolated and why, which goal is missed by how much, which
//! change (factor, from, to) repairs it. No sentence is written here; `render` writes
//! every sentence a user reads.

use serde::Serialize;

use crate::engine::Coefficient;
use crate::errorterm::Verdict;
use crate::layout::{Convention, Kind, SumsOfSquares};
use crate::planning::Cost;
use crate::term::Mask;

#[derive(Debug, Clone, Serialize)]
pub struct CheckReport {
    pub name: String,
    pub convention: Convention,
    pub observations: u64,
    pub alpha: f64,
    /// The power minimum detectable effects are solved for.
    pub target_power: f64,
    /// Overhead plus per-unit costs; null without a [cost] table.
    pub cost: Option<Cost>,
    /// What the planning values leave out.
    pub planning_gaps: PlanningGaps,
    pub terms: Vec<TermReport>,
    /// Terms an unbalanced layout leaves with fewer df than a user would expect.
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub warnings: Vec<Warning>,
    /// For an unbalanced layout: which sums of squares, what was removed, what follows.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub unbalanced: Option<Summary>,
    /// For a layout of units: the strata, what is estimated in each, the assumption of
    /// additivity and any pseudoreplication.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub strata: Option<Strata>,
}

/// The strata of a layout of units, largest unit first.
#[derive(Debug, Clone, Serialize)]
pub struct Strata {
    pub strata: Vec<Stratum>,
    /// Whether units and treatments are taken as additive: the interactions of units
    /// with treatments randomised to smaller units pooled into the stratum errors.
    pub additive: bool,
    /// The interactions that additivity pools, and the term each joins.
    pub pooled: Vec<Pooled>,
    /// Treatment terms tested over smaller units than the ones they were randomised to.
    pub pseudoreplication: Vec<Pseudoreplication>,
}

#[derive(Debug, Clone, Serialize)]
pub struct Stratum {
    pub unit: String,
    /// Units per member of each unit it is within (in all, at the top).
    pub count: u64,
    pub within: Vec<String>,
    /// Units in the whole experiment.
    pub total: u64,
    /// Treatments randomised to this unit.
    pub carries: Vec<String>,
    /// The unit's term (its variation), by label; the smallest unit's is the residual.
    pub term: String,
    /// The unit's term by its factors, when the unit has no factor of its own
    /// (`block x nitrogen` for the main plot).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub same_as: Option<String>,
    /// Whether the smallest unit: the observations, and the residual.
    pub smallest: bool,
    /// Whether some unit below this one carries a treatment: when not, and the unit is
    /// below the smallest that does, it is a subsample.
    pub subsample: bool,
    /// Terms estimated in this stratum, the unit's own term first; their df add up to
    /// the stratum's df.
    pub terms: Vec<String>,
    pub df: u64,
}

#[derive(Debug, Clone, Serialize)]
pub struct Pooled {
    pub term: String,
    pub into: String,
}

/// A treatment term whose error is not the variation of the unit it was randomised to.
#[derive(Debug, Clone, Serialize)]
pub struct Pseudoreplication {
    #[serde(skip)]
    pub id: Mask,
    pub term: String,
    /// The unit the term's treatments were randomised to.
    pub unit: String,
    pub cause: PseudoCause,
    /// What the term is tested over instead (empty: it has no test).
    pub tested_over: Vec<String>,
}

#[derive(Debug, Clone, PartialEq, Serialize)]
#[serde(tag = "cause", rename_all = "snake_case")]
pub enum PseudoCause {
    /// One unit per combination of the treatments it carries: unit differences and
    /// treatment differences cannot be told apart. Replicating the unit fixes it.
    OneUnitPerLevel {
        count: u64,
        within: Vec<String>,
        /// The smallest count that replicates the unit: two per combination.
        fix_count: u64,
    },
    /// The unit's own term is assumed absent (`omit`), so its variation is pooled with
    /// that of smaller units.
    UnitOmitted { unit_term: String },
}

impl CheckReport {
    /// The term with this identity (live set).
    pub fn term(&self, id: Mask) -> Option<&TermReport> {
        self.terms.iter().find(|t| t.id == id)
    }

    /// Whether any test carries power or minimum detectable effects.
    pub fn planned(&self) -> bool {
        self.terms.iter().any(|t| {
            t.test
                .as_ref()
                .is_some_and(|x| x.min_detectable.is_some() || x.power.is_some())
        })
    }

    /// Terms of interest that need attention: a reason, a shortfall against the goal,
    /// or repairs. Nuisance terms (units, blocks) never do.
    pub fn needing_attention(&self) -> impl Iterator<Item = (&TermReport, &TestReport)> {
        self.terms.iter().filter_map(|t| {
            let test = t.test.as_ref()?;
            (t.of_interest && (test.reason.is_some() || test.shortfall.is_some()))
                .then_some((t, test))
        })
    }

    /// Pseudoreplication found in a layout of units.
    pub fn pseudoreplication(&self) -> &[Pseudoreplication] {
        self.strata
            .as_ref()
            .map_or(&[], |s| s.pseudoreplication.as_slice())
    }
}

/// What the planning values leave out.
#[derive(Debug, Clone, Default, PartialEq, Serialize)]
pub struct PlanningGaps {
    /// No standard deviations at all: no power, no Satterthwaite df.
    pub no_sd: bool,
    /// Random terms without a standard deviation, taken as zero.
    pub zero_sd: Vec<String>,
    /// Fixed terms without an effect: no power (minimum detectable effects still shown).
    pub no_effect: Vec<String>,
}

#[derive(Debug, Clone, Serialize)]
pub struct TermReport {
    /// Identity: the live set of factor indices (`REPLICATE` for the residual).
    #[serde(skip)]
    pub id: Mask,
    pub label: String,
    /// The label without the nesting: `chamber` for `chamber(light)`.
    #[serde(skip)]
    pub short_label: String,
    pub live: Vec<String>,
    pub within: Vec<String>,
    pub residual: bool,
    pub kind: Kind,
    /// Whether the term matters (the goal's terms; by default the treatment terms of a
    /// layout of units, every term otherwise): only these get advice and repairs.
    pub of_interest: bool,
    /// A unit's term with no factor of its own, by its factors: `block x nitrogen`.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub same_as: Option<String>,
    /// The unit (stratum) the term is estimated in, in a layout of units.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub stratum: Option<String>,
    pub df: u64,
    /// E(MS) in the trade's order: σ² first, then the other components from the
    /// smallest unit up (growing coefficient), the term's own component last.
    pub ems: Vec<Component>,
    pub test: Option<TestReport>,
}

#[derive(Debug, Clone, Serialize)]
pub struct Component {
    #[serde(skip)]
    pub id: Mask,
    /// The component's term label.
    pub component: String,
    #[serde(skip)]
    pub short_label: String,
    /// Fixed (κ²) or random (σ²); the residual is random.
    #[serde(skip)]
    pub kind: Kind,
    #[serde(skip)]
    pub residual: bool,
    pub coefficient: Coefficient,
    /// The coefficient as an exact fraction, when it is not a whole number.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub exact: Option<String>,
}

#[derive(Debug, Clone, Serialize)]
pub struct TestReport {
    pub verdict: Verdict,
    pub denominator: Vec<DenominatorPart>,
    /// Denominator df: the mean square's df for an exact test; Satterthwaite's
    /// approximation for a combination, once planning values exist.
    pub denominator_df: Option<f64>,
    /// Power at alpha under the planning values; null where it cannot be computed.
    pub power: Option<f64>,
    /// Smallest effect found with the target power: a root mean square of effects for a
    /// fixed term, a standard deviation for a random one, in the response's units.
    pub min_detectable: Option<f64>,
    /// Why the term is not simply tested by one mean square.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub reason: Option<Reason>,
    /// How the test misses the goal, when it does.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub shortfall: Option<Shortfall>,
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub repairs: Vec<RepairReport>,
}

#[derive(Debug, Clone, Serialize)]
pub struct DenominatorPart {
    #[serde(skip)]
    pub id: Mask,
    pub term: String,
    pub coefficient: Coefficient,
}

/// Why a term is not tested by a single mean square.
#[derive(Debug, Clone, PartialEq, Serialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum Reason {
    /// The term has 0 df, so no mean square of its own.
    NoDf {
        /// Its live factors with one level in each nest (balanced layouts).
        one_level: Vec<String>,
        /// Its df in the full layout, when cells were removed.
        #[serde(skip_serializing_if = "Option::is_none")]
        full_layout_df: Option<u64>,
        /// Its df with sequential sums of squares, when type III leaves it none.
        #[serde(skip_serializing_if = "Option::is_none")]
        sequential_df: Option<u64>,
    },
    /// Tested by a quasi-F ratio over the combination in `denominator`.
    QuasiF,
    /// Components of its expected mean square that no other mean square isolates.
    Confounded { components: Vec<Isolated> },
    /// Every component is carried somewhere, but no combination has the expectation.
    NoCombination,
}

/// A component of a term's target that no other estimable mean square carries.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Isolated {
    #[serde(skip)]
    pub id: Mask,
    pub component: String,
    #[serde(skip)]
    pub short_label: String,
    #[serde(skip)]
    pub kind: Kind,
    pub residual: bool,
    pub cause: Cause,
}

#[derive(Debug, Clone, PartialEq, Serialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum Cause {
    /// The component's own term has 0 df, with these factors at one level.
    ZeroDf { one_level: Vec<String> },
    /// The component's own term has 0 df once the cells are removed.
    ZeroDfAfterRemovals,
    /// No other estimable mean square carries it.
    NowhereElse,
}

/// How a testable term's test falls short of the goal.
#[derive(Debug, Clone, Default, PartialEq, Serialize)]
pub struct Shortfall {
    /// The goal asks for an exact F test and this one is a quasi-F.
    pub needs_exact: bool,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub denominator_df: Option<Gap>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub power: Option<Gap>,
}

/// What a test has (unknown without planning values) against what the goal asks.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Gap {
    pub have: Option<f64>,
    pub want: f64,
}

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RepairReport {
    pub change: ChangeReport,
    pub verdict: Verdict,
    pub denominator_df: Option<f64>,
    pub power: Option<f64>,
    /// Cost after the change less cost before; null when the layout is not priced.
    pub cost_change: Option<f64>,
    /// The change is an assumption about the model, not more material.
    pub assumption: bool,
}

/// One change to a layout, with the values before and after.
#[derive(Debug, Clone, PartialEq, Serialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum ChangeReport {
    /// More levels of a random factor, in each of its nests.
    Levels {
        factor: String,
        within: Vec<String>,
        from: u64,
        to: u64,
        /// Whether the factor is a unit of a layout of units (more chambers, blocks).
        unit: bool,
    },
    /// More replicates per cell; in a layout of units, more of the smallest unit.
    Replicates {
        from: u64,
        to: u64,
        #[serde(skip_serializing_if = "Option::is_none")]
        unit: Option<String>,
    },
    /// A different nesting of a factor.
    Within {
        factor: String,
        from: Vec<String>,
        to: Vec<String>,
    },
    /// An interaction assumed absent.
    Omit { term: String },
}

/// What an unbalanced layout leaves of a term's df.
#[derive(Debug, Clone, PartialEq, Serialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum Warning {
    /// Type III leaves the term fewer df than sequential sums of squares (an empty cell).
    Type3Short {
        term: String,
        kept: u64,
        sequential_df: u64,
    },
    /// The removals leave the term no df, and with it these tests.
    LostDf {
        term: String,
        residual: bool,
        full_layout_df: u64,
        /// Terms that cannot be tested since this one's variance is in their E(MS).
        lost: Vec<String>,
        /// Its df with sequential sums of squares, when type III took them.
        #[serde(skip_serializing_if = "Option::is_none")]
        sequential_df: Option<u64>,
    },
}

/// What an unbalanced check adds to the report.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Summary {
    /// `sequential` or `type3`.
    pub sums_of_squares: SumsOfSquares,
    /// Terms in the order they were fitted (the order of the sequential sums of squares).
    pub fit_order: Vec<String>,
    /// Observations of the full (balanced) layout, before the removals.
    pub full_observations: u64,
    pub removed_observations: u64,
    /// The removals as written: `light=2,chamber=3`.
    pub removals: Vec<String>,
    /// Random units with no observation left.
    pub emptied_units: Vec<Unit>,
    /// Fixed interactions with empty cells.
    pub empty_cells: Vec<EmptyCells>,
    /// Fixed terms whose sequential mean square carries other fixed terms' κ².
    pub carried: Vec<Carried>,
}

/// One unit (a level of a random factor within its nests).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Unit {
    pub factor: String,
    /// 1-based level.
    pub level: u64,
    /// The nesting factors' names and 1-based levels.
    pub within: Vec<(String, u64)>,
}

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct EmptyCells {
    pub term: String,
    pub empty: u64,
    pub cells: u64,
}

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Carried {
    pub term: String,
    /// The other fixed components (their symbols' short labels) and coefficients.
    pub components: Vec<(String, f64)>,
}

/// Both conventions side by side.
#[derive(Debug, Clone, Serialize)]
pub struct BothReport {
    pub restricted: CheckReport,
    pub unrestricted: CheckReport,
    /// Terms whose error term differs between the conventions.
    pub differ: Vec<String>,
}

impl BothReport {
    pub fn new(restricted: CheckReport, unrestricted: CheckReport) -> Self {
        let differ = restricted
            .terms
            .iter()
            .filter(|r| {
                let u = unrestricted.term(r.id);
                !same_test(r.test.as_ref(), u.and_then(|u| u.test.as_ref()))
            })
            .map(|r| r.label.clone())
            .collect();
        BothReport {
            restricted,
            unrestricted,
            differ,
        }
    }
}

/// Whether two tests of one layout have the same verdict and the same denominator
/// (terms and weights).
pub fn same_test(a: Option<&TestReport>, b: Option<&TestReport>) -> bool {
    match (a, b) {
        (None, None) => true,
        (Some(a), Some(b)) => {
            a.verdict == b.verdict
                && a.denominator.len() == b.denominator.len()
                && a.denominator.iter().zip(&b.denominator).all(|(x, y)| {
                    x.id == y.id
                        && (x.coefficient.value() - y.coefficient.value()).abs()
                            <= 1e-9 * x.coefficient.value().abs().max(1.0)
                })
        }
        _ => false,
    }
}
