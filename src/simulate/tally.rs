//! What a Monte Carlo run tallies, and the intervals of its rates.

use super::*;

/// What a block of runs found; blocks add up in order.
#[derive(Debug, Clone)]
pub struct Tally {
    pub runs: u64,
    /// Σ (MS - E(MS)) and Σ (MS - E(MS))² over runs, by term.
    pub ms_dev: Vec<f64>,
    pub ms_dev2: Vec<f64>,
    /// Rejections by planned test, under the planning values and under its null.
    pub alternative: Vec<u64>,
    pub null: Vec<u64>,
    /// Runs in which a synthetic denominator was not positive (no quasi-F).
    pub undefined: Vec<u64>,
    pub null_undefined: Vec<u64>,
    /// Σ denominator df over the runs that had one (Satterthwaite's for synthetic tests).
    pub df_sum: Vec<f64>,
    pub df_runs: Vec<u64>,
}

impl Tally {
    pub(super) fn new(terms: usize, tests: usize) -> Tally {
        Tally {
            runs: 0,
            ms_dev: vec![0.0; terms],
            ms_dev2: vec![0.0; terms],
            alternative: vec![0; tests],
            null: vec![0; tests],
            undefined: vec![0; tests],
            null_undefined: vec![0; tests],
            df_sum: vec![0.0; tests],
            df_runs: vec![0; tests],
        }
    }

    pub(super) fn add(&mut self, o: &Tally) {
        self.runs += o.runs;
        let add_f = |a: &mut Vec<f64>, b: &Vec<f64>| a.iter_mut().zip(b).for_each(|(x, y)| *x += y);
        let add_u = |a: &mut Vec<u64>, b: &Vec<u64>| a.iter_mut().zip(b).for_each(|(x, y)| *x += y);
        add_f(&mut self.ms_dev, &o.ms_dev);
        add_f(&mut self.ms_dev2, &o.ms_dev2);
        add_u(&mut self.alternative, &o.alternative);
        add_u(&mut self.null, &o.null);
        add_u(&mut self.undefined, &o.undefined);
        add_u(&mut self.null_undefined, &o.null_undefined);
        add_f(&mut self.df_sum, &o.df_sum);
        add_u(&mut self.df_runs, &o.df_runs);
    }
}

/// A simulated rejection rate with its Wilson score interval.
#[derive(Debug, Clone, Copy, Serialize)]
pub struct Rate {
    pub rejections: u64,
    pub runs: u64,
    pub rate: f64,
    pub low: f64,
    pub high: f64,
}

impl Rate {
    /// Wilson (1927), JASA 22:209-212: the score interval at `CONFIDENCE`.
    pub fn new(rejections: u64, runs: u64) -> Rate {
        let (low, high) = wilson(rejections, runs, Z);
        Rate {
            rejections,
            runs,
            rate: if runs > 0 {
                rejections as f64 / runs as f64
            } else {
                f64::NAN
            },
            low,
            high,
        }
    }

    pub fn holds(&self, value: f64) -> bool {
        value >= self.low && value <= self.high
    }
}

/// Wilson's score interval for k successes in n trials at normal quantile z.
pub fn wilson(k: u64, n: u64, z: f64) -> (f64, f64) {
    if n == 0 {
        return (0.0, 1.0);
    }
    let n = n as f64;
    let p = k as f64 / n;
    let z2 = z * z;
    let centre = (p + z2 / (2.0 * n)) / (1.0 + z2 / n);
    let half = z / (1.0 + z2 / n) * (p * (1.0 - p) / n + z2 / (4.0 * n * n)).sqrt();
    ((centre - half).max(0.0), (centre + half).min(1.0))
}
