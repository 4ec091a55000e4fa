//! Pruned enumeration of level counts, structure by structure.
//!
//! Cost is overhead plus non-negative prices times products of level counts, so it never
//! falls when a level count grows. Taking the dimensions in turn, with the ones not yet
//! set at their smallest values, the cost so far is a lower bound for the whole branch:
//! when it is over the budget the branch is cut, and so are the larger values of the same
//! dimension. Every cut candidate is counted as rejected for the budget; the first
//! candidate of a cut branch is its cheapest, so the cheapest over-budget candidate is
//! known exactly without visiting the rest.

use rayon::prelude::*;

use crate::layout::Levels;

use super::evaluate::{Criticals, Outcome, Rejection, Screen};
use super::space::set;

/// One screened candidate: its structure (index into the screens) and level counts.
#[derive(Debug, Clone)]
pub struct Entry {
    pub variant: usize,
    pub levels: Levels,
    pub outcome: Outcome,
}

/// Reports progress (candidates done, pruned ones included) to whoever runs the search.
pub use crate::progress::{Progress, Quiet};

/// The ranking of feasible candidates: cheapest first (costs equal to a millionth of a
/// unit tie), then the larger smallest denominator df, then the higher smallest power.
pub fn rank_key(o: &Outcome) -> (i128, std::cmp::Reverse<OrdF64>, std::cmp::Reverse<OrdF64>) {
    (
        (o.cost * 1e6).round() as i128,
        std::cmp::Reverse(OrdF64(o.min_df.unwrap_or(-1.0))),
        std::cmp::Reverse(OrdF64(o.min_power.unwrap_or(-1.0))),
    )
}

/// How near a rejected candidate comes to meeting the goal, nearest first: one short of
/// the power target only (the most power first), then short of min_df (the most df
/// first), then untestable (the cheapest first).
pub fn miss_key(o: &Outcome) -> (u8, OrdF64, i128) {
    let cost = (o.cost * 1e6).round() as i128;
    match o.rejection {
        Some(Rejection::Power) => (0, OrdF64(-o.min_power.unwrap_or(-1.0)), cost),
        Some(Rejection::MinDf) => (1, OrdF64(-o.min_df.unwrap_or(-1.0)), cost),
        _ => (2, OrdF64(0.0), cost),
    }
}

/// An f64 ordered by `total_cmp`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct OrdF64(pub f64);
impl Eq for OrdF64 {}
impl PartialOrd for OrdF64 {
    fn partial_cmp(&self, other: &Self) -> Option<std::cmp::Ordering> {
        Some(self.cmp(other))
    }
}
impl Ord for OrdF64 {
    fn cmp(&self, other: &Self) -> std::cmp::Ordering {
        self.0.total_cmp(&other.0)
    }
}

/// What the enumeration gathers: counts, the best candidates, the frontier, the cheapest
/// candidate rejected for each reason and the nearest misses.
#[derive(Debug, Clone, Default)]
pub struct Tally {
    pub examined: u64,
    pub feasible: u64,
    pub untestable: u64,
    pub min_df: u64,
    pub power: u64,
    pub budget: u64,
    /// Candidates beyond a capacity limit.
    pub limit: u64,
    /// The best feasible candidates, ranked, at most `keep`.
    pub top: Vec<Entry>,
    pub keep: usize,
    /// Candidates that meet every constraint but the power target, with a power: the
    /// frontier is taken from them.
    pub frontier: Vec<Entry>,
    /// The cheapest candidate rejected for each reason (in `Rejection::ALL` order).
    pub cheapest: [Option<Entry>; 5],
    /// The best feasible candidate of each structure, and its nearest miss among the
    /// candidates that failed a test constraint (`miss_key`), by structure index.
    pub per_structure: Vec<(Option<Entry>, Option<Entry>)>,
    /// Whether `per_structure` is kept (a search that chooses where treatments go).
    pub track_structures: bool,
    /// Among candidates failing only the power target, the one with the highest power.
    pub nearest_power: Option<Entry>,
    /// Among testable candidates failing min_df, the one with the most df.
    pub nearest_df: Option<Entry>,
}

fn reason_slot(r: Rejection) -> usize {
    Rejection::ALL.iter().position(|&x| x == r).unwrap_or(0)
}

impl Tally {
    pub fn new(keep: usize) -> Tally {
        Tally {
            keep: keep.max(1),
            ..Tally::default()
        }
    }

    pub fn count(&self, r: Rejection) -> u64 {
        match r {
            Rejection::Budget => self.budget,
            Rejection::Untestable => self.untestable,
            Rejection::MinDf => self.min_df,
            Rejection::Power => self.power,
            Rejection::Limit => self.limit,
        }
    }

    fn note_cheapest(&mut self, r: Rejection, e: &Entry) {
        let slot = &mut self.cheapest[reason_slot(r)];
        if slot
            .as_ref()
            .is_none_or(|c| e.outcome.cost < c.outcome.cost)
        {
            *slot = Some(e.clone());
        }
    }

    /// Counts a branch cut by the budget or a limit: `n` candidates, the cheapest of them
    /// `e`.
    pub fn cut(&mut self, n: u64, e: Entry) {
        let r = e.outcome.rejection.unwrap_or(Rejection::Budget);
        match r {
            Rejection::Limit => self.limit += n,
            _ => self.budget += n,
        }
        self.note_cheapest(r, &e);
    }

    fn note_structure(&mut self, e: &Entry) {
        if self.per_structure.len() <= e.variant {
            self.per_structure.resize(e.variant + 1, (None, None));
        }
        let slot = &mut self.per_structure[e.variant];
        match e.outcome.rejection {
            None => {
                if slot
                    .0
                    .as_ref()
                    .is_none_or(|b| rank_key(&e.outcome) < rank_key(&b.outcome))
                {
                    slot.0 = Some(e.clone());
                }
            }
            Some(Rejection::Untestable | Rejection::MinDf | Rejection::Power) => {
                if slot
                    .1
                    .as_ref()
                    .is_none_or(|b| miss_key(&e.outcome) < miss_key(&b.outcome))
                {
                    slot.1 = Some(e.clone());
                }
            }
            Some(_) => {}
        }
    }

    pub fn add(&mut self, e: Entry) {
        let o = e.outcome;
        if !matches!(o.rejection, Some(Rejection::Budget | Rejection::Limit)) {
            self.examined += 1;
        }
        if self.track_structures {
            self.note_structure(&e);
        }
        match o.rejection {
            None => {
                self.feasible += 1;
                if o.min_power.is_some() {
                    self.frontier.push(e.clone());
                }
                self.top.push(e);
                if self.top.len() >= 4 * self.keep {
                    self.trim_top();
                }
            }
            Some(r) => {
                match r {
                    Rejection::Budget => self.budget += 1,
                    Rejection::Limit => self.limit += 1,
                    Rejection::Untestable => self.untestable += 1,
                    Rejection::MinDf => {
                        self.min_df += 1;
                        let df = |x: &Entry| x.outcome.min_df.unwrap_or(-1.0);
                        if self.nearest_df.as_ref().is_none_or(|n| df(&e) > df(n)) {
                            self.nearest_df = Some(e.clone());
                        }
                    }
                    Rejection::Power => {
                        self.power += 1;
                        if o.min_power.is_some() {
                            self.frontier.push(e.clone());
                        }
                        let p = |x: &Entry| x.outcome.min_power.unwrap_or(-1.0);
                        if self.nearest_power.as_ref().is_none_or(|n| p(&e) > p(n)) {
                            self.nearest_power = Some(e.clone());
                        }
                    }
                }
                self.note_cheapest(r, &e);
            }
        }
        if self.frontier.len() > 50_000 {
            self.frontier = frontier(std::mem::take(&mut self.frontier));
        }
    }

    fn trim_top(&mut self) {
        self.top.sort_by_key(|e| rank_key(&e.outcome));
        self.top.truncate(self.keep);
    }

    /// Ranks the kept candidates and reduces the frontier to its Pareto points.
    pub fn finish(&mut self) {
        self.trim_top();
        self.frontier = frontier(std::mem::take(&mut self.frontier));
    }
}

/// Pareto points of cost against the smallest power: sorted by cost (then power, highest
/// first), a candidate is kept when its power beats every cheaper one's.
pub fn frontier(mut points: Vec<Entry>) -> Vec<Entry> {
    points.sort_by(|a, b| {
        a.outcome.cost.total_cmp(&b.outcome.cost).then(
            b.outcome
                .min_power
                .unwrap_or(-1.0)
                .total_cmp(&a.outcome.min_power.unwrap_or(-1.0)),
        )
    });
    let mut best = f64::NEG_INFINITY;
    let mut out = Vec::new();
    for e in points {
        let p = e.outcome.min_power.unwrap_or(-1.0);
        if p > best {
            best = p;
            out.push(e);
        }
    }
    out
}

/// Candidates per parallel batch.
const BATCH: usize = 16_384;

/// Enumerates every structure's level counts, cutting over-budget branches when `prune`,
/// screening the rest in parallel batches, and gathers the tally.
pub fn enumerate(screens: &[Screen], keep: usize, prune: bool, progress: &dyn Progress) -> Tally {
    let mut tally = Tally::new(keep);
    tally.track_structures = screens
        .iter()
        .any(|s| !s.variant.randomised.is_empty() || !s.variant.without_units.is_empty());
    let mut batch: Vec<(usize, Levels)> = Vec::with_capacity(BATCH);
    for (vi, screen) in screens.iter().enumerate() {
        let dims = &screen.variant.dims;
        let mut levels = screen.variant.template.clone();
        if dims.is_empty() {
            // A structure with nothing searched is one candidate.
            batch.push((vi, levels));
            continue;
        }
        let mut picks = vec![0usize; dims.len()];
        // Depth-first over the dimensions, iteratively: `depth` is the dimension being set.
        let mut depth = 0usize;
        // The number of candidates below one value of each dimension.
        let below: Vec<u64> = (0..dims.len())
            .map(|d| {
                dims[d + 1..]
                    .iter()
                    .map(|x| x.values.len() as u64)
                    .product()
            })
            .collect();
        loop {
            if depth == dims.len() {
                batch.push((vi, levels.clone()));
                if batch.len() >= BATCH {
                    flush(screens, &mut batch, &mut tally, progress);
                }
                // Back up to the last dimension and take its next value.
                depth -= 1;
                picks[depth] += 1;
                continue;
            }
            let dim = &dims[depth];
            let k = picks[depth];
            if k >= dim.values.len() {
                // This dimension is done: reset it and back up.
                picks[depth] = 0;
                set(&mut levels, dim.target, dim.values[0]);
                if depth == 0 {
                    break;
                }
                depth -= 1;
                picks[depth] += 1;
                continue;
            }
            set(&mut levels, dim.target, dim.values[k]);
            if prune {
                let bound = screen.cost(&levels);
                let beyond = screen.beyond_limits(&levels).is_some();
                if beyond || screen.over_budget(bound) {
                    let n = (dim.values.len() - k) as u64 * below[depth];
                    tally.cut(
                        n,
                        Entry {
                            variant: vi,
                            levels: levels.clone(),
                            outcome: Outcome {
                                cost: bound,
                                rejection: Some(if beyond {
                                    Rejection::Limit
                                } else {
                                    Rejection::Budget
                                }),
                                failing: None,
                                min_df: None,
                                min_power: None,
                            },
                        },
                    );
                    progress.advance(n);
                    picks[depth] = dim.values.len();
                    continue;
                }
            }
            depth += 1;
        }
    }
    flush(screens, &mut batch, &mut tally, progress);
    tally.finish();
    tally
}

fn flush(
    screens: &[Screen],
    batch: &mut Vec<(usize, Levels)>,
    tally: &mut Tally,
    progress: &dyn Progress,
) {
    if batch.is_empty() {
        return;
    }
    let outcomes: Vec<Outcome> = batch
        .par_iter()
        .map_init(Criticals::default, |c, (vi, levels)| {
            screens[*vi].evaluate(levels, c)
        })
        .collect();
    let n = batch.len() as u64;
    for ((variant, levels), outcome) in batch.drain(..).zip(outcomes) {
        tally.add(Entry {
            variant,
            levels,
            outcome,
        });
    }
    progress.advance(n);
}
