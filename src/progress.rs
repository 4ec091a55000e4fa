//! How a long job tells how far it has come, without printing: the job calls
//! `advance`, and the caller (the command line) decides whether and how to show it.

/// Receives a job's progress: `advance(n)` when `n` more units (candidates, data sets)
/// are done. Called from several threads.
pub trait Progress: Sync {
    fn advance(&self, _done: u64) {}
}

/// No progress report.
pub struct Quiet;

impl Progress for Quiet {}
