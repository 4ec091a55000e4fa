//! The simulate job's result: what every term and test showed, and the dummy data set.

use super::*;

#[derive(Debug, Clone, Serialize)]
pub struct SimulateReport {
    pub name: String,
    pub convention: Convention,
    pub seed: u64,
    pub runs: u64,
    pub alpha: f64,
    pub confidence: f64,
    /// Observations in each data set (after the removals of an unbalanced layout).
    pub observations: u64,
    /// What was removed and which sums of squares were used; absent for a balanced layout.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub unbalanced: Option<UnbalancedRun>,
    pub terms: Vec<SimulatedTerm>,
    /// The data set written with `--data`, when there is one.
    pub data: Option<DataSummary>,
    pub notes: Vec<SimulationNote>,
}

/// The removals of an unbalanced layout, as simulated.
#[derive(Debug, Clone, Serialize)]
pub struct UnbalancedRun {
    /// `sequential` or `type3`.
    pub sums_of_squares: SumsOfSquares,
    /// Observations of the full layout, and how many of them the removals take.
    pub full_observations: u64,
    pub removed_observations: u64,
    /// The removals as written: `light=2,chamber=3`.
    pub removals: Vec<String>,
    /// Terms in the order they were fitted (the order of the sequential sums of squares).
    pub fit_order: Vec<String>,
}

#[derive(Debug, Clone, Serialize)]
pub struct SimulatedTerm {
    pub label: String,
    pub kind: Kind,
    pub residual: bool,
    pub df: u64,
    /// E(MS) at the planning values.
    pub expected_ms: f64,
    /// Mean of the simulated mean squares and its standard error (null for 0 df or no runs).
    pub mean_ms: Option<f64>,
    pub mean_ms_se: Option<f64>,
    /// The expected mean square lies outside the interval around the simulated mean.
    pub ms_flag: bool,
    pub test: Option<SimulatedTest>,
}

#[derive(Debug, Clone, Serialize)]
pub struct SimulatedTest {
    pub verdict: Verdict,
    pub denominator: Vec<DenominatorPart>,
    /// The denominator df `check` plans with (Satterthwaite's at the planning values for
    /// a synthetic test).
    pub planned_df: Option<f64>,
    /// The mean over runs of the denominator df used (Satterthwaite's from each run's
    /// mean squares for a synthetic test).
    pub simulated_df: Option<f64>,
    /// Rejection rate with the term's own component set to zero; held against alpha.
    pub null: Option<Rate>,
    pub null_flag: bool,
    /// Rejection rate at the planning values; held against the analytic power.
    pub power: Option<Rate>,
    pub analytic_power: Option<f64>,
    pub power_flag: bool,
    /// Runs with no quasi-F because the synthetic denominator was not positive (counted
    /// as not rejecting), at the planning values and under the null.
    pub undefined: u64,
    pub null_undefined: u64,
}

#[derive(Debug, Clone, Serialize)]
pub struct DataSummary {
    pub path: String,
    pub observations: u64,
    pub decimals: usize,
    /// The grand mean the data were drawn around (`--mean`).
    pub drawn_around: f64,
    /// The data set's own grand mean.
    pub mean: f64,
    /// The written data set's mean squares, as `analyze` computes them from the file.
    pub mean_squares: Vec<TermMeanSquare>,
}

#[derive(Debug, Clone, Serialize)]
pub struct TermMeanSquare {
    pub term: String,
    pub df: u64,
    pub ms: Option<f64>,
}

/// A dummy data set in long format, ready to render as CSV.
#[derive(Debug, Clone)]
pub struct DataSet {
    pub header: Vec<String>,
    pub rows: Vec<Vec<String>>,
    /// The responses as written (parsed back from their text).
    pub y: Vec<f64>,
    pub decimals: usize,
}

/// What to simulate.
#[derive(Debug, Clone)]
pub struct Request {
    pub seed: u64,
    pub runs: u64,
    /// Write a data set: its path (for the report), its mean, and global level numbering.
    pub data: Option<DataRequest>,
}

#[derive(Debug, Clone)]
pub struct DataRequest {
    pub path: String,
    pub mean: f64,
    pub unique_labels: bool,
}
