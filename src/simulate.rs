//! The `simulate` job: dummy data drawn from a layout's model at its planning values, and
//! a Monte Carlo confirmation of its expected mean squares, error rates and power.
//!
//! # The model simulated
//!
//! y = μ + Σ_T (effect of T at the observation's cell of T) + ε, with ε ~ N(0, σ²) and σ the
//! `residual` value of `[sd]`.
//!
//! - A fixed term gets fixed effects in a linear pattern: the product over its live
//!   factors of the centred level scores i - (n + 1)/2 (i = 1..n), the same in every cell of
//!   its nest, scaled so that the root mean square over the term's cells is the `[effect]`
//!   size. A main effect given as `{ range = D }` gets the least favourable configuration
//!   instead: -D/2 at its first level, +D/2 at its last, 0 between. Both sum to zero over
//!   each live subscript, so κ² = Σ effect² / df is what `planning` puts in the expected
//!   mean squares. A fixed term without an `[effect]` has no effect.
//! - A random term's effects are drawn afresh for every data set, independent N(0, σ²_T)
//!   over its cells with σ_T its `[sd]`. Under the restricted convention (Cornfield and
//!   Tukey 1956) they are then centred over every fixed live subscript, so that mixed
//!   interaction effects sum to zero over each fixed subscript; for a two-factor mixed
//!   interaction this gives Var = ((a - 1)/a) σ², which is the parameterisation of the
//!   restricted model whose expected mean squares `ems` computes (`tests/monte_carlo.rs`
//!   holds the engine to it). Under the unrestricted convention they are left independent.
//!   A random term without an `[sd]` value has no effect.
//! - A random factor from a finite population of N (Cornfield and Tukey 1956): the effects
//!   of every random term live in it are drawn over the whole population and centred over
//!   it (so σ² = Σ effect² / (N - 1) over the population), and in every data set the
//!   layout's n levels in each nest are a fresh sample without replacement of the N, the
//!   same sample for every term. Under either convention this gives the factors (1 - n/N)
//!   of the engine's expected mean squares (the tests hold it).
//!
//! # Monte Carlo
//!
//! Run i draws its data set from a ChaCha8 generator seeded with the seed and set to
//! stream i, so a run's numbers do not depend on which thread ran it; runs are tallied in
//! fixed blocks combined in order, so the whole result is the same on every machine. For
//! every term it records the mean square; for every testable term the planned test (F, or
//! the quasi-F with Satterthwaite df from the run's own mean squares) on the data set and
//! on the same data set less that term's own effects (its null hypothesis). Because the
//! effects of a term are constant within cells, the null data set differs from the run's
//! only in its cell totals, so the per-observation work is done once per run.
//!
//! # Unbalanced layouts
//!
//! A layout with removals is drawn exactly as its full layout (the same effects, the same
//! generator streams), and the observations the removals take are dropped: a run's data
//! set is the full layout's less the removed observations. Each kept observation is found
//! in the full layout by the balanced engine's own cell numbering from its level tuple.
//! Sums of squares are `unbalanced::Fit::sums_of_squares` (sequential or type III, as the
//! layout says), mean squares SS / df with the fit's df, and the tests are the synthesis
//! error terms (`unbalanced::denominator`), exact F or quasi-F with Satterthwaite df from
//! the run's own mean squares. The null data set is the kept observations less the term's
//! own effects. Only the unrestricted model with infinite populations reaches here (the
//! layout refuses the rest).
//!
//! Expected mean squares, Hartley (1967): E(y'Ay) = σ² tr(A) + Σ_U σ²_U tr(A Z_U Z_U') +
//! μ'Aμ. The random part is the synthesis coefficients times the variances. The fixed part
//! μ'Aμ depends on the pattern of the fixed effects in an unbalanced layout; the synthesis
//! gives its average over patterns, but the simulator draws one pattern, so it is computed
//! exactly: the sum of squares of the noise-free fixed mean μ through the same fit, divided
//! by df. The analytic power of a fixed term is likewise that of the simulated pattern,
//! with noncentrality λ = SS_T(μ) / E(D) and the planned denominator df.
//!
//! Rejection rates carry Wilson's (1927) score interval,
//! (p̂ + z²/2n ± z √(p̂(1 - p̂)/n + z²/4n²)) / (1 + z²/n), and are flagged when the value
//! they are held against (alpha, or the analytic power) lies outside it.

use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, StandardNormal};
use rayon::prelude::*;
use serde::Serialize;

use crate::balanced::{self, Balanced, anova_numbers, index_in, odometer};
use crate::dist::{self, CriticalValue};
use crate::engine::{Analysis, Coefficient, Synthesis};
use crate::error::Error;
use crate::errorterm::Verdict;
use crate::findings::DenominatorPart;
use crate::layout::{Convention, Kind, Layout, SumsOfSquares};
use crate::planning::{self, Effect, PlanningValues, TestPlan};
use crate::progress::Progress;
use crate::term::REPLICATE;

/// Confidence level of the intervals around simulated rates and mean squares.
pub const CONFIDENCE: f64 = 0.99;
/// The standard normal quantile for `CONFIDENCE` (two-sided): Φ⁻¹(0.995).
const Z: f64 = 2.5758293035489004;
/// Runs tallied together before blocks are combined (in order).
const BLOCK: u64 = 64;
/// Most runs one command may ask for.
pub const MAX_RUNS: u64 = 100_000_000;

#[derive(Debug, Clone, Copy)]
struct CentreAlong {
    outer: usize,
    size: usize,
    inner: usize,
}

#[derive(Debug, Clone)]
struct RandomTerm {
    sd: f64,
    /// Where the term's effects start in the scratch buffer, and how many there are.
    offset: usize,
    size: usize,
    /// Full cell -> the term's cell, counting the subscripts from finite populations at 0.
    map: Vec<u32>,
    /// Live subscripts from a finite population, whose place in the term's array is the
    /// sampled population member, different in every data set.
    finite: Vec<FiniteDim>,
    /// Where its per-data-set map lives in the scratch maps (terms with `finite` only).
    map_slot: usize,
    /// The subscripts it is centred over: fixed live ones (restricted convention) and
    /// live ones from a finite population.
    centre: Vec<CentreAlong>,
}

/// A live subscript of a random term drawn from a finite population.
#[derive(Debug, Clone)]
struct FiniteDim {
    /// Index into `Simulator::finite`.
    factor: usize,
    /// Stride of the subscript in the term's array.
    stride: u32,
    /// For each full cell: where its level's sampled member is in the factor's sample.
    pos: Vec<u32>,
}

/// A random factor whose levels are a sample without replacement from a finite
/// population: in every data set, n of its N members in each of its nests.
#[derive(Debug, Clone, Copy)]
struct FinitePopulation {
    population: u32,
    levels: usize,
    nests: usize,
}

/// Most effects the random terms may need per data set, finite populations included.
const MAX_EFFECTS: usize = 1 << 26;

#[derive(Debug, Clone, Copy)]
enum Own {
    Fixed(usize),
    Random(usize),
    Nothing,
}

#[derive(Debug, Clone)]
struct PlannedTest {
    term: usize,
    df1: f64,
    /// (term, weight, df) of the denominator's mean squares.
    parts: Vec<(usize, f64, f64)>,
    /// The critical F of an exact test.
    critical: Option<f64>,
    own: Own,
}

/// What a layout with removals adds: the observations it keeps, their fit, and where
/// each sits in the full layout.
struct Kept {
    synthesis: Synthesis,
    /// Index among the full layout's observations (cell × replicates + replicate) of each
    /// kept observation, in the design's order.
    observation: Vec<usize>,
    /// Full cell of each kept observation.
    cell: Vec<usize>,
    /// Sums of squares of the noise-free fixed mean μ over the kept observations, every
    /// term (residual last): μ'Aμ for the simulated pattern.
    fixed_ss: Vec<f64>,
    /// Of each planned test: the sum of squares of its term for μ less the term's own
    /// effects (if it has any), what its null data sets still carry of the other fixed
    /// terms.
    null_fixed_ss: Vec<f64>,
}

/// A layout's model at its planning values, ready to draw data sets from.
pub struct Simulator {
    /// The full (balanced) layout's analysis: what the data sets are drawn from.
    pub analysis: Analysis,
    /// The layout's own analysis: how the data sets are analysed (the full layout's, or
    /// the synthesis of the observations a layout with removals keeps).
    pub fitted: Analysis,
    balanced: Balanced,
    /// Present when the layout has removals.
    kept: Option<Kept>,
    /// df of every term as analysed: the balanced ones, or the fit's after the removals.
    df: Vec<u64>,
    alpha: f64,
    /// Fixed effects of each fixed term over the full cells, and their sum.
    fixed: Vec<Vec<f64>>,
    fixed_sum: Vec<f64>,
    random: Vec<RandomTerm>,
    effects_len: usize,
    finite: Vec<FinitePopulation>,
    map_slots: usize,
    sigma: f64,
    tests: Vec<PlannedTest>,
    /// Expected mean squares at the planning values.
    pub expected: Vec<f64>,
}

/// Working memory of one thread; nothing is allocated per data set.
#[derive(Debug, Clone)]
pub struct Scratch {
    effects: Vec<f64>,
    /// The sampled population members of each finite factor, nest by nest.
    samples: Vec<Vec<u32>>,
    /// Room for one population's members while sampling.
    members: Vec<u32>,
    /// Per-data-set maps of the random terms with finite live subscripts.
    maps: Vec<Vec<u32>>,
    cell_mean: Vec<f64>,
    eps: Vec<f64>,
    totals: Vec<f64>,
    null_totals: Vec<f64>,
    within: f64,
    ss: Vec<f64>,
    ms: Vec<f64>,
    balanced: balanced::Scratch,
    /// The kept observations of an unbalanced layout, and its null data set (empty for a
    /// balanced one).
    y: Vec<f64>,
    null_y: Vec<f64>,
}

impl Simulator {
    pub fn new(layout: &Layout, plan: &PlanningValues) -> Result<Simulator, Error> {
        let s = &layout.structure;
        if !plan.has_priors() {
            return Err(Error::invalid(
                None,
                "simulate draws data from the planning values: add an [sd] table with at least `residual`, the standard deviation within cells (see docs/planning.md)",
            ));
        }
        let mut full = layout.clone();
        full.removed.clear();
        let analysis = Analysis::new(&full)?;
        let fitted = Analysis::new(layout)?;
        let model = &analysis.model;
        let balanced = Balanced::new(model, &layout.levels)?;
        let lv: Vec<usize> = balanced.levels().to_vec();
        let k = lv.len();
        let cells = balanced.cells();
        let cell_levels: Vec<Vec<usize>> = {
            let mut at = vec![0usize; k];
            (0..cells)
                .map(|_| {
                    let here = at.clone();
                    odometer(&lv, &mut at);
                    here
                })
                .collect()
        };

        let mut fixed = Vec::new();
        let mut fixed_sum = vec![0.0; cells];
        let mut random = Vec::new();
        let mut effects_len = 0;
        let mut own = vec![Own::Nothing; model.terms.len()];
        // Factors from finite populations, and where each cell's level sits in its sample.
        let mut finite_index = vec![usize::MAX; k];
        let mut finite = Vec::new();
        for (j, f) in s.factors.iter().enumerate() {
            if let Some(n_pop) = f.population {
                finite_index[j] = finite.len();
                finite.push(FinitePopulation {
                    population: u32::try_from(n_pop).map_err(|_| too_many_effects())?,
                    levels: lv[j],
                    nests: (0..k)
                        .filter(|a| f.ancestors & (1 << a) != 0)
                        .map(|a| lv[a])
                        .product(),
                });
            }
        }
        let mut map_slots = 0;
        for (t, term) in model.terms.iter().enumerate() {
            if term.is_residual() {
                continue;
            }
            match model.kinds[t] {
                Kind::Fixed => {
                    let Some(effect) = plan.effects.get(&term.live) else {
                        continue;
                    };
                    let pattern: Vec<f64> = cell_levels
                        .iter()
                        .map(|at| fixed_pattern(*effect, term.live, &lv, at))
                        .collect();
                    let cells_t = term.cells(&layout.levels);
                    let target = effect.root_mean_square(cells_t);
                    // Every term cell appears cells / cells_t times among the full cells.
                    let rms = (pattern.iter().map(|p| p * p).sum::<f64>() / cells as f64).sqrt();
                    let scale = if rms > 0.0 { target / rms } else { 0.0 };
                    let values: Vec<f64> = pattern.iter().map(|p| p * scale).collect();
                    for (s, v) in fixed_sum.iter_mut().zip(&values) {
                        *s += v;
                    }
                    own[t] = Own::Fixed(fixed.len());
                    fixed.push(values);
                }
                Kind::Random => {
                    let Some(&sd) = plan.priors.get(&term.live) else {
                        continue;
                    };
                    if sd == 0.0 {
                        continue;
                    }
                    let subs = term.subscripts();
                    let dims: Vec<usize> = (0..k).filter(|j| subs & (1 << j) != 0).collect();
                    let is_finite =
                        |j: usize| term.live & (1 << j) != 0 && finite_index[j] != usize::MAX;
                    // A live subscript from a finite population spans the whole population.
                    let extent = |j: usize| {
                        if is_finite(j) {
                            finite[finite_index[j]].population as usize
                        } else {
                            lv[j]
                        }
                    };
                    let size = dims
                        .iter()
                        .try_fold(1usize, |p, &j| p.checked_mul(extent(j)))
                        .filter(|&n| n <= MAX_EFFECTS)
                        .ok_or_else(too_many_effects)?;
                    let stride_of =
                        |d: usize| -> usize { dims[d + 1..].iter().map(|&j| extent(j)).product() };
                    let map = cell_levels
                        .iter()
                        .map(|at| {
                            dims.iter()
                                .enumerate()
                                .filter(|&(_, &j)| !is_finite(j))
                                .map(|(d, &j)| at[j] * stride_of(d))
                                .sum::<usize>() as u32
                        })
                        .collect();
                    let finite_dims: Vec<FiniteDim> = dims
                        .iter()
                        .enumerate()
                        .filter(|&(_, &j)| is_finite(j))
                        .map(|(d, &j)| FiniteDim {
                            factor: finite_index[j],
                            stride: stride_of(d) as u32,
                            pos: cell_levels
                                .iter()
                                .map(|at| {
                                    (index_in(&lv, s.factors[j].ancestors, at) * lv[j] + at[j])
                                        as u32
                                })
                                .collect(),
                        })
                        .collect();
                    let restricted = s.convention == Convention::Restricted;
                    let centre = dims
                        .iter()
                        .enumerate()
                        .filter(|&(_, &j)| {
                            let fixed_live =
                                term.live & (1 << j) != 0 && s.factors[j].kind == Kind::Fixed;
                            (restricted && fixed_live) || is_finite(j)
                        })
                        .map(|(d, _)| CentreAlong {
                            outer: dims[..d].iter().map(|&j| extent(j)).product(),
                            size: extent(dims[d]),
                            inner: stride_of(d),
                        })
                        .collect();
                    own[t] = Own::Random(random.len());
                    let map_slot = if finite_dims.is_empty() {
                        usize::MAX
                    } else {
                        map_slots += 1;
                        map_slots - 1
                    };
                    random.push(RandomTerm {
                        sd,
                        offset: effects_len,
                        size,
                        map,
                        finite: finite_dims,
                        map_slot,
                        centre,
                    });
                    effects_len = effects_len
                        .checked_add(size)
                        .filter(|&n| n <= MAX_EFFECTS)
                        .ok_or_else(too_many_effects)?;
                }
            }
        }
        let sigma = plan.priors.get(&REPLICATE).copied().unwrap_or(0.0);

        let df = fitted.df.clone();
        let tests: Vec<PlannedTest> = fitted
            .tests
            .iter()
            .enumerate()
            .filter_map(|(t, e)| {
                let e = e.as_ref()?;
                let weights: Vec<(usize, f64)> =
                    e.denominator.iter().map(|(v, w)| (*v, w.value())).collect();
                planned_test(t, e.verdict, &weights, &df, plan.alpha, own[t])
            })
            .collect();
        let (expected, kept) = match &fitted.synthesis {
            None => (fitted.ems_values(plan), None),
            Some(syn) => {
                let (kept, expected) =
                    Kept::new(&fitted, syn, plan, &balanced, &fixed, &fixed_sum, &tests)?;
                (expected, Some(kept))
            }
        };
        Ok(Simulator {
            analysis,
            fitted,
            balanced,
            kept,
            df,
            alpha: plan.alpha,
            fixed,
            fixed_sum,
            random,
            effects_len,
            finite,
            map_slots,
            sigma,
            tests,
            expected,
        })
    }

    pub fn balanced(&self) -> &Balanced {
        &self.balanced
    }

    pub fn scratch(&self) -> Scratch {
        let terms = self.analysis.model.terms.len();
        Scratch {
            effects: vec![0.0; self.effects_len],
            samples: self
                .finite
                .iter()
                .map(|f| vec![0; f.nests * f.levels])
                .collect(),
            members: vec![
                0;
                self.finite
                    .iter()
                    .map(|f| f.population as usize)
                    .max()
                    .unwrap_or(0)
            ],
            maps: vec![vec![0; self.balanced.cells()]; self.map_slots],
            cell_mean: vec![0.0; self.balanced.cells()],
            eps: vec![0.0; self.balanced.observations()],
            totals: vec![0.0; self.balanced.cells()],
            null_totals: vec![0.0; self.balanced.cells()],
            within: 0.0,
            ss: vec![0.0; terms],
            ms: vec![0.0; terms],
            balanced: self.balanced.scratch(),
            y: vec![0.0; self.kept.as_ref().map_or(0, |k| k.cell.len())],
            null_y: vec![0.0; self.kept.as_ref().map_or(0, |k| k.cell.len())],
        }
    }

    /// The generator of run `run`: the seed, on stream `run`.
    pub fn rng(seed: u64, run: u64) -> ChaCha8Rng {
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        rng.set_stream(run);
        rng
    }

    /// Draws one data set (μ = 0): the random effects, each cell's mean, the residuals, and
    /// from them the cell totals and the pooled within-cell sum of squares.
    pub fn draw(&self, rng: &mut ChaCha8Rng, x: &mut Scratch) {
        // Levels of finite factors: n of the N members in each nest, by a partial
        // Fisher-Yates shuffle (sampling without replacement).
        for (f, sample) in self.finite.iter().zip(x.samples.iter_mut()) {
            let members = &mut x.members[..f.population as usize];
            for chosen in sample.chunks_exact_mut(f.levels) {
                for (i, m) in members.iter_mut().enumerate() {
                    *m = i as u32;
                }
                for (i, c) in chosen.iter_mut().enumerate() {
                    let pick = rng.random_range(i as u32..f.population) as usize;
                    members.swap(i, pick);
                    *c = members[i];
                }
            }
        }
        for r in self.random.iter().filter(|r| !r.finite.is_empty()) {
            let map = &mut x.maps[r.map_slot];
            map.copy_from_slice(&r.map);
            for d in &r.finite {
                let sample = &x.samples[d.factor];
                for (m, &p) in map.iter_mut().zip(&d.pos) {
                    *m += d.stride * sample[p as usize];
                }
            }
        }
        for r in &self.random {
            let e = &mut x.effects[r.offset..r.offset + r.size];
            for v in e.iter_mut() {
                let z: f64 = StandardNormal.sample(rng);
                *v = r.sd * z;
            }
            for c in &r.centre {
                for o in 0..c.outer {
                    for i in 0..c.inner {
                        let at = |l: usize| (o * c.size + l) * c.inner + i;
                        let mean = (0..c.size).map(|l| e[at(l)]).sum::<f64>() / c.size as f64;
                        for l in 0..c.size {
                            e[at(l)] -= mean;
                        }
                    }
                }
            }
        }
        x.cell_mean.copy_from_slice(&self.fixed_sum);
        for r in &self.random {
            let e = &x.effects[r.offset..r.offset + r.size];
            let map = if r.finite.is_empty() {
                &r.map
            } else {
                &x.maps[r.map_slot]
            };
            for (m, &i) in x.cell_mean.iter_mut().zip(map) {
                *m += e[i as usize];
            }
        }
        let reps = self.balanced.replicates();
        let mut within = 0.0;
        for ((cell, m), t) in x
            .eps
            .chunks_exact_mut(reps)
            .zip(&x.cell_mean)
            .zip(x.totals.iter_mut())
        {
            let mut sum = 0.0;
            for v in cell.iter_mut() {
                let z: f64 = StandardNormal.sample(rng);
                *v = self.sigma * z;
                sum += *v;
            }
            let mean = sum / reps as f64;
            within += cell.iter().map(|v| (v - mean) * (v - mean)).sum::<f64>();
            *t = reps as f64 * m + sum;
        }
        x.within = within;
    }

    /// Mean squares of the data set in `x.totals` into `x.ms`.
    fn mean_squares(&self, x: &mut Scratch, null: bool) {
        let totals = if null { &x.null_totals } else { &x.totals };
        self.balanced
            .sums_of_squares(totals, x.within, &mut x.balanced, &mut x.ss);
        self.balanced.mean_squares(&x.ss, &mut x.ms);
    }

    /// The data set less one term's own effects, as cell totals in `x.null_totals`.
    fn null_totals(&self, own: Own, x: &mut Scratch) {
        let reps = self.balanced.replicates() as f64;
        x.null_totals.copy_from_slice(&x.totals);
        match own {
            Own::Nothing => {}
            Own::Fixed(f) => {
                for (t, e) in x.null_totals.iter_mut().zip(&self.fixed[f]) {
                    *t -= reps * e;
                }
            }
            Own::Random(r) => {
                let r = &self.random[r];
                let e = &x.effects[r.offset..r.offset + r.size];
                let map = if r.finite.is_empty() {
                    &r.map
                } else {
                    &x.maps[r.map_slot]
                };
                for (t, &i) in x.null_totals.iter_mut().zip(map) {
                    *t -= reps * e[i as usize];
                }
            }
        }
    }

    /// The outcome of a planned test on the mean squares in `ms`: rejected, and the
    /// denominator df used (None when a synthetic denominator is not positive).
    fn test(&self, test: &PlannedTest, ms: &[f64]) -> (bool, Option<f64>) {
        let d: f64 = test.parts.iter().map(|&(v, w, _)| w * ms[v]).sum();
        if d <= 0.0 || !d.is_finite() {
            return (false, None);
        }
        let f = ms[test.term] / d;
        match test.critical {
            Some(c) => (f > c, Some(test.parts[0].2)),
            None => {
                // Satterthwaite (1946) from this data set's mean squares.
                let spread: f64 = test
                    .parts
                    .iter()
                    .map(|&(v, w, df)| (w * ms[v]).powi(2) / df)
                    .sum();
                let df2 = d * d / spread;
                (dist::f_sf(f, test.df1, df2) < self.alpha, Some(df2))
            }
        }
    }

    /// Simulates `runs` data sets and tallies every term's mean square and every test's
    /// rejections, under the planning values and under each test's null.
    pub fn monte_carlo(&self, seed: u64, runs: u64) -> Tally {
        self.monte_carlo_with(seed, runs, &crate::progress::Quiet)
    }

    /// `monte_carlo`, telling `progress` of each block of data sets done.
    pub fn monte_carlo_with(&self, seed: u64, runs: u64, progress: &dyn Progress) -> Tally {
        let blocks = runs.div_ceil(BLOCK);
        let tallies: Vec<Tally> = (0..blocks)
            .into_par_iter()
            .map_init(
                || self.scratch(),
                |x, b| {
                    let mut tally = Tally::new(self.analysis.model.terms.len(), self.tests.len());
                    let end = ((b + 1) * BLOCK).min(runs);
                    for run in b * BLOCK..end {
                        self.run(seed, run, x, &mut tally);
                    }
                    progress.advance(end - b * BLOCK);
                    tally
                },
            )
            .collect();
        let mut total = Tally::new(self.analysis.model.terms.len(), self.tests.len());
        for t in &tallies {
            total.add(t);
        }
        total
    }

    /// Adds a data set at the planning values to a tally: every term's mean square (in
    /// `ms`) against its expectation, and every planned test's outcome.
    fn tally_planned(&self, ms: &[f64], tally: &mut Tally) {
        tally.runs += 1;
        for (t, &m) in ms.iter().enumerate() {
            let d = m - self.expected[t];
            tally.ms_dev[t] += d;
            tally.ms_dev2[t] += d * d;
        }
        for (i, test) in self.tests.iter().enumerate() {
            let (reject, df2) = self.test(test, ms);
            tally.alternative[i] += reject as u64;
            match df2 {
                Some(df2) => {
                    tally.df_sum[i] += df2;
                    tally.df_runs[i] += 1;
                }
                None => tally.undefined[i] += 1,
            }
        }
    }

    /// One Monte Carlo run, added to a tally.
    pub fn run(&self, seed: u64, run: u64, x: &mut Scratch, tally: &mut Tally) {
        if let Some(kept) = &self.kept {
            return self.run_kept(kept, seed, run, x, tally);
        }
        let mut rng = Simulator::rng(seed, run);
        self.draw(&mut rng, x);
        self.mean_squares(x, false);
        self.tally_planned(&x.ms, tally);
        for (i, test) in self.tests.iter().enumerate() {
            self.null_totals(test.own, x);
            self.mean_squares(x, true);
            let (reject, df2) = self.test(test, &x.ms);
            tally.null[i] += reject as u64;
            tally.null_undefined[i] += df2.is_none() as u64;
        }
    }

    /// E(D) of a planned test: its denominator's weights times the expected mean squares.
    fn expected_denominator(&self, test: &PlannedTest) -> f64 {
        test.parts
            .iter()
            .map(|&(v, w, _)| w * self.expected[v])
            .sum()
    }

    /// Noncentrality of a fixed term's test for a fixed mean whose sum of squares of the
    /// term is `ss`: λ = SS_T(μ) / E(D) (μ'Aμ over the denominator's expectation).
    fn noncentrality(&self, test: &PlannedTest, ss: f64) -> Option<f64> {
        let den = self.expected_denominator(test);
        (den > 0.0 && den.is_finite()).then(|| ss.max(0.0) / den)
    }

    /// Power of a fixed term's test at noncentrality SS_T(μ) / E(D), on the term's df and
    /// the planned denominator df `df2`; the noncentral F is an approximation unless the
    /// term's mean square is a scaled noncentral chi-square.
    fn pattern_power(&self, test: &PlannedTest, df2: Option<f64>, ss: f64) -> Option<f64> {
        let den = self.expected_denominator(test);
        self.noncentrality(test, ss)?;
        let critical = CriticalValue::new(self.alpha, test.df1, df2?);
        let power = planning::power(
            &critical,
            Kind::Fixed,
            test.df1,
            ss.max(0.0) / test.df1,
            den,
        );
        power.is_finite().then_some(power)
    }

    /// Mean squares SS / df of the kept observations `y` into `ms` (NaN for 0 df).
    fn kept_mean_squares(&self, kept: &Kept, y: &[f64], ms: &mut [f64]) {
        let a = &kept.synthesis;
        let ss = a.fit.sums_of_squares(&a.design, y);
        for ((o, s), &df) in ms.iter_mut().zip(&ss).zip(&self.df) {
            *o = if df == 0 { f64::NAN } else { s / df as f64 };
        }
    }

    /// One Monte Carlo run of a layout with removals: the full layout's data set drawn, the
    /// kept observations analysed, then each test's null data set (the kept observations
    /// less the term's own effects).
    fn run_kept(&self, kept: &Kept, seed: u64, run: u64, x: &mut Scratch, tally: &mut Tally) {
        let mut rng = Simulator::rng(seed, run);
        self.draw(&mut rng, x);
        for ((y, &o), &c) in x.y.iter_mut().zip(&kept.observation).zip(&kept.cell) {
            *y = x.cell_mean[c] + x.eps[o];
        }
        self.kept_mean_squares(kept, &x.y, &mut x.ms);
        self.tally_planned(&x.ms, tally);
        for (i, test) in self.tests.iter().enumerate() {
            x.null_y.copy_from_slice(&x.y);
            match test.own {
                Own::Nothing => {}
                Own::Fixed(f) => {
                    for (y, &c) in x.null_y.iter_mut().zip(&kept.cell) {
                        *y -= self.fixed[f][c];
                    }
                }
                Own::Random(r) => {
                    let r = &self.random[r];
                    let e = &x.effects[r.offset..r.offset + r.size];
                    let map = if r.finite.is_empty() {
                        &r.map
                    } else {
                        &x.maps[r.map_slot]
                    };
                    for (y, &c) in x.null_y.iter_mut().zip(&kept.cell) {
                        *y -= e[map[c] as usize];
                    }
                }
            }
            self.kept_mean_squares(kept, &x.null_y, &mut x.ms);
            let (reject, df2) = self.test(test, &x.ms);
            tally.null[i] += reject as u64;
            tally.null_undefined[i] += df2.is_none() as u64;
        }
    }

    /// The data set of run 0 as observations, cell by cell, with mean `mean`: every
    /// observation of a balanced layout, the kept ones (in the design's order) of a layout
    /// with removals.
    pub fn data_set(&self, seed: u64, mean: f64) -> Vec<f64> {
        let mut x = self.scratch();
        let mut rng = Simulator::rng(seed, 0);
        self.draw(&mut rng, &mut x);
        if let Some(kept) = &self.kept {
            return kept
                .observation
                .iter()
                .zip(&kept.cell)
                .map(|(&o, &c)| mean + x.cell_mean[c] + x.eps[o])
                .collect();
        }
        let reps = self.balanced.replicates();
        x.eps
            .chunks_exact(reps)
            .zip(&x.cell_mean)
            .flat_map(|(cell, m)| cell.iter().map(move |e| mean + m + e))
            .collect()
    }
}

/// The planned test of term `t` over a denominator of (term, weight) pairs, when it is
/// testable: an exact test gets its critical F once.
fn planned_test(
    t: usize,
    verdict: Verdict,
    denominator: &[(usize, f64)],
    df: &[u64],
    alpha: f64,
    own: Own,
) -> Option<PlannedTest> {
    if !verdict.is_testable() {
        return None;
    }
    let df1 = df[t] as f64;
    let parts: Vec<(usize, f64, f64)> = denominator
        .iter()
        .map(|&(v, w)| (v, w, df[v] as f64))
        .collect();
    let critical =
        (verdict == Verdict::Exact).then(|| CriticalValue::new(alpha, df1, parts[0].2).value());
    Some(PlannedTest {
        term: t,
        df1,
        parts,
        critical,
        own,
    })
}

impl Kept {
    /// Fits the layout's kept observations, finds each in the full layout, and gives the
    /// planned tests over the synthesis error terms and the expected mean squares of the
    /// simulated model: the synthesis coefficients of the random components times the
    /// priors, plus the exact fixed part SS(μ) / df of the simulated pattern.
    fn new(
        fitted: &Analysis,
        syn: &Synthesis,
        plan: &PlanningValues,
        balanced: &Balanced,
        fixed: &[Vec<f64>],
        fixed_sum: &[f64],
        tests: &[PlannedTest],
    ) -> Result<(Kept, Vec<f64>), Error> {
        let a = syn;
        let model = &fitted.model;
        let df = &fitted.df;
        let reps = balanced.replicates();
        let mut at = vec![0usize; balanced.levels().len()];
        let (observation, cell): (Vec<usize>, Vec<usize>) = a
            .design
            .observations()
            .iter()
            .map(|o| {
                for (x, &l) in at.iter_mut().zip(&o.levels) {
                    *x = l as usize;
                }
                let c = balanced.cell(&at);
                (c * reps + o.replicate as usize, c)
            })
            .unzip();
        let mu: Vec<f64> = cell.iter().map(|&c| fixed_sum[c]).collect();
        let fixed_ss = a.fit.sums_of_squares(&a.design, &mu);
        let theta = plan.component_values(model, &fitted.layout.levels);
        let residual = model.residual();
        let expected = fitted
            .ems
            .iter()
            .enumerate()
            .map(|(t, row)| {
                let random: f64 = row
                    .iter()
                    .filter(|(c, _)| *c == residual || model.kinds[*c] == Kind::Random)
                    .map(|(c, k)| k.value() * theta[*c])
                    .sum();
                let fixed = if df[t] > 0 {
                    fixed_ss[t] / df[t] as f64
                } else {
                    0.0
                };
                random + fixed
            })
            .collect();
        // What the null data sets of a fixed term still carry of the other fixed terms.
        let null_fixed_ss = tests
            .iter()
            .map(|test| match test.own {
                Own::Fixed(f) => {
                    let mu0: Vec<f64> = mu
                        .iter()
                        .zip(&cell)
                        .map(|(m, &c)| m - fixed[f][c])
                        .collect();
                    a.fit.sums_of_squares(&a.design, &mu0)[test.term]
                }
                _ => fixed_ss[test.term],
            })
            .collect();
        Ok((
            Kept {
                synthesis: syn.clone(),
                observation,
                cell,
                fixed_ss,
                null_fixed_ss,
            },
            expected,
        ))
    }
}

fn too_many_effects() -> Error {
    Error::invalid(
        None,
        "the random terms need too many effects per simulated data set (a large finite `population` counts in full): reduce the level counts or the populations",
    )
}

/// The pattern of a fixed term's effects at a cell, before scaling (see the module notes).
fn fixed_pattern(effect: Effect, live: u32, lv: &[usize], at: &[usize]) -> f64 {
    match effect {
        Effect::Range(_) => {
            let j = live.trailing_zeros() as usize;
            if at[j] == 0 {
                -1.0
            } else if at[j] == lv[j] - 1 {
                1.0
            } else {
                0.0
            }
        }
        Effect::RootMeanSquare(_) => (0..lv.len())
            .filter(|j| live & (1 << j) != 0)
            .map(|j| at[j] as f64 - (lv[j] as f64 - 1.0) / 2.0)
            .product(),
    }
}

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
    fn new(terms: usize, tests: usize) -> Tally {
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

    fn add(&mut self, o: &Tally) {
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

/// Decimals the responses are written with: four significant digits of the smallest
/// standard deviation in the planning values (three decimals when there is none).
pub fn decimals(plan: &PlanningValues) -> usize {
    let smallest = plan
        .priors
        .values()
        .copied()
        .filter(|v| *v > 0.0)
        .fold(f64::INFINITY, f64::min);
    if smallest.is_finite() {
        (3 - smallest.log10().floor() as i64).clamp(0, 12) as usize
    } else {
        3
    }
}

/// Labels the cells' observations: `bench2`, numbered within the nest or globally. `y` is
/// what `Simulator::data_set` gives: every observation of a balanced layout, the kept ones
/// of a layout with removals.
pub fn data_set(
    layout: &Layout,
    sim: &Simulator,
    y: &[f64],
    decimals: usize,
    unique_labels: bool,
) -> DataSet {
    let s = &layout.structure;
    let b = sim.balanced();
    let lv = b.levels();
    let mut header: Vec<String> = s.factors.iter().map(|f| f.name.clone()).collect();
    header.push("response".into());
    let mut rows = Vec::with_capacity(y.len());
    let mut written = Vec::with_capacity(y.len());
    let mut at = vec![0usize; lv.len()];
    let labels_of = |at: &[usize]| -> Vec<String> {
        s.factors
            .iter()
            .enumerate()
            .map(|(j, f)| {
                let number = if unique_labels {
                    index_in(lv, f.ancestors, at) * lv[j] + at[j] + 1
                } else {
                    at[j] + 1
                };
                format!("{}{number}", f.name)
            })
            .collect()
    };
    let mut push = |labels: &[String], v: f64| {
        let text = format!("{v:.decimals$}");
        // The value as the file holds it, so the report's mean squares are the file's.
        written.push(text.parse::<f64>().unwrap_or(v));
        let mut row = labels.to_vec();
        row.push(text);
        rows.push(row);
    };
    match &sim.kept {
        None => {
            for (c, cell) in y.chunks_exact(b.replicates()).enumerate() {
                b.levels_of_cell(c, &mut at);
                let labels = labels_of(&at);
                for &v in cell {
                    push(&labels, v);
                }
            }
        }
        Some(kept) => {
            let mut last = usize::MAX;
            let mut labels = Vec::new();
            for (&c, &v) in kept.cell.iter().zip(y) {
                if c != last {
                    b.levels_of_cell(c, &mut at);
                    labels = labels_of(&at);
                    last = c;
                }
                push(&labels, v);
            }
        }
    }
    DataSet {
        header,
        rows,
        y: written,
        decimals,
    }
}

/// Runs the Monte Carlo and, when asked, draws the data set to write.
pub fn simulate(
    layout: &Layout,
    plan: &PlanningValues,
    request: &Request,
) -> Result<(SimulateReport, Option<DataSet>), Error> {
    simulate_with(layout, plan, request, &crate::progress::Quiet)
}

/// `simulate`, telling `progress` how many data sets are done.
pub fn simulate_with(
    layout: &Layout,
    plan: &PlanningValues,
    request: &Request,
    progress: &dyn Progress,
) -> Result<(SimulateReport, Option<DataSet>), Error> {
    let sim = Simulator::new(layout, plan)?;
    let a = &sim.analysis;
    let model = &a.model;
    let s = &layout.structure;
    let df = &sim.df;
    let labels: Vec<String> = model.terms.iter().map(|t| t.label(s)).collect();
    // How every term is tested (verdict, denominator weights), and the planned df and
    // analytic power, from the layout's own analysis; for a layout with removals, the
    // power of a fixed term is that of the simulated pattern.
    type Tested = Option<(Verdict, Vec<(usize, Coefficient)>)>;
    let fitted = &sim.fitted;
    let mut plans = fitted.plans(plan);
    // The power `check` gives a fixed term of an unbalanced layout (averaged over patterns).
    let mut averaged: Vec<Option<f64>> = Vec::new();
    if let Some(kept) = &sim.kept {
        averaged = plans.iter().map(|p| p.and_then(|p| p.power)).collect();
        for test in &sim.tests {
            let t = test.term;
            let with_effect = matches!(test.own, Own::Fixed(_));
            if let Some(p) = plans[t].as_mut().filter(|_| with_effect) {
                p.noncentrality = sim.noncentrality(test, kept.fixed_ss[t]);
                p.power = sim.pattern_power(test, p.denominator_df, kept.fixed_ss[t]);
            }
        }
    }
    let tested: Vec<Tested> = fitted
        .tests
        .iter()
        .map(|e| e.as_ref().map(|e| (e.verdict, e.denominator.clone())))
        .collect();
    let tally =
        (request.runs > 0).then(|| sim.monte_carlo_with(request.seed, request.runs, progress));

    let terms = model
        .terms
        .iter()
        .enumerate()
        .map(|(t, term)| {
            let (mean_ms, mean_ms_se) = match &tally {
                Some(tl) if df[t] > 0 => {
                    let n = tl.runs as f64;
                    let dev = tl.ms_dev[t] / n;
                    let se = if tl.runs > 1 {
                        ((tl.ms_dev2[t] - n * dev * dev).max(0.0) / (n - 1.0) / n).sqrt()
                    } else {
                        f64::NAN
                    };
                    (Some(sim.expected[t] + dev), Some(se))
                }
                _ => (None, None),
            };
            let ms_flag = match (mean_ms, mean_ms_se) {
                (Some(m), Some(se)) => (m - sim.expected[t]).abs() > Z * se + 1e-12 * m.abs(),
                _ => false,
            };
            let test = tested[t].as_ref().map(|(verdict, parts)| {
                let i = sim.tests.iter().position(|p| p.term == t);
                let planned = plans[t];
                let analytic_power = planned.and_then(|p| p.power);
                let (null, power, simulated_df, undefined, null_undefined) = match (&tally, i) {
                    (Some(tl), Some(i)) => (
                        Some(Rate::new(tl.null[i], tl.runs)),
                        Some(Rate::new(tl.alternative[i], tl.runs)),
                        (tl.df_runs[i] > 0).then(|| tl.df_sum[i] / tl.df_runs[i] as f64),
                        tl.undefined[i],
                        tl.null_undefined[i],
                    ),
                    _ => (None, None, None, 0, 0),
                };
                SimulatedTest {
                    verdict: *verdict,
                    denominator: parts
                        .iter()
                        .map(|&(v, w)| DenominatorPart {
                            id: model.terms[v].live,
                            term: labels[v].clone(),
                            coefficient: w,
                        })
                        .collect(),
                    planned_df: planned.and_then(|p| p.denominator_df),
                    simulated_df,
                    null_flag: null.is_some_and(|r| !r.holds(plan.alpha)),
                    null,
                    power_flag: match (power, analytic_power) {
                        (Some(r), Some(p)) => !r.holds(p),
                        _ => false,
                    },
                    power,
                    analytic_power,
                    undefined,
                    null_undefined,
                }
            });
            SimulatedTerm {
                label: labels[t].clone(),
                kind: model.kinds[t],
                residual: term.is_residual(),
                df: df[t],
                expected_ms: sim.expected[t],
                mean_ms,
                mean_ms_se,
                ms_flag,
                test,
            }
        })
        .collect();

    let mut notes = Vec::new();
    let no_prior: Vec<&str> = model
        .terms
        .iter()
        .enumerate()
        .filter(|(t, term)| {
            model.kinds[*t] == Kind::Random && !plan.priors.contains_key(&term.live)
        })
        .map(|(t, _)| labels[t].as_str())
        .collect();
    if !no_prior.is_empty() {
        notes.push(SimulationNote::NoVariance {
            terms: no_prior.iter().map(|t| t.to_string()).collect(),
        });
    }
    let no_effect: Vec<&str> = model
        .terms
        .iter()
        .enumerate()
        .filter(|(t, term)| {
            model.kinds[*t] == Kind::Fixed
                && !term.is_residual()
                && !plan.effects.contains_key(&term.live)
        })
        .map(|(t, _)| labels[t].as_str())
        .collect();
    if !no_effect.is_empty() {
        notes.push(SimulationNote::NoEffect {
            terms: no_effect.iter().map(|t| t.to_string()).collect(),
        });
    }
    if let Some(kept) = &sim.kept {
        notes.extend(unbalanced_notes(
            &sim, kept, &labels, &plans, &averaged, layout,
        ));
    }

    let (data, data_set) = match &request.data {
        None => (None, None),
        Some(d) => {
            let y = sim.data_set(request.seed, d.mean);
            let set = data_set(layout, &sim, &y, decimals(plan), d.unique_labels);
            let (ms, mean) = match &sim.kept {
                None => {
                    let (_, ms, mean) = anova_numbers(sim.balanced(), &set.y);
                    (ms, mean)
                }
                Some(kept) => {
                    let mut ms = vec![0.0; df.len()];
                    sim.kept_mean_squares(kept, &set.y, &mut ms);
                    (ms, set.y.iter().sum::<f64>() / set.y.len() as f64)
                }
            };
            let summary = DataSummary {
                path: d.path.clone(),
                observations: set.y.len() as u64,
                decimals: set.decimals,
                drawn_around: d.mean,
                mean,
                mean_squares: (0..model.terms.len())
                    .map(|t| TermMeanSquare {
                        term: labels[t].clone(),
                        df: df[t],
                        ms: (df[t] > 0).then_some(ms[t]),
                    })
                    .collect(),
            };
            (Some(summary), Some(set))
        }
    };

    Ok((
        SimulateReport {
            name: layout.name.clone(),
            convention: s.convention,
            seed: request.seed,
            runs: request.runs,
            alpha: plan.alpha,
            confidence: CONFIDENCE,
            observations: layout.observations(),
            unbalanced: sim.kept.as_ref().map(|k| UnbalancedRun {
                sums_of_squares: layout.sums_of_squares,
                full_observations: layout.levels.observations(),
                removed_observations: layout.levels.observations() - layout.observations(),
                removals: layout.removed.iter().map(|r| r.describe(s)).collect(),
                fit_order: k
                    .synthesis
                    .fit
                    .order
                    .iter()
                    .map(|&t| labels[t].clone())
                    .collect(),
            }),
            terms,
            data,
            notes,
        },
        data_set,
    ))
}

/// What a simulation notes about how it was run and what its figures mean.
#[derive(Debug, Clone, PartialEq, Serialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum SimulationNote {
    /// Random terms simulated with no variance (no standard deviation given).
    NoVariance { terms: Vec<String> },
    /// Fixed terms simulated with no effect (no effect given).
    NoEffect { terms: Vec<String> },
    /// An unbalanced layout: how its data sets and expectations are made, and that its
    /// F ratios are approximations.
    Unbalanced,
    /// Fixed terms whose analytic power for the simulated pattern differs from the
    /// average over patterns `check` gives: (term, check's, here).
    PatternPower { terms: Vec<(String, f64, f64)> },
    /// A fixed term's null data sets still carry other fixed terms' effects.
    NullCarries {
        term: String,
        sums_of_squares: SumsOfSquares,
        null_rate: f64,
    },
}

/// What the report says of an unbalanced layout's simulation: how the data sets and their
/// expectations are made, the fixed terms' power for the simulated pattern against the
/// average `check` gives, and the null data sets that still carry other fixed effects.
fn unbalanced_notes(
    sim: &Simulator,
    kept: &Kept,
    labels: &[String],
    plans: &[Option<TestPlan>],
    averaged: &[Option<f64>],
    layout: &Layout,
) -> Vec<SimulationNote> {
    let mut notes = vec![SimulationNote::Unbalanced];
    let mut differs = Vec::new();
    for test in &sim.tests {
        let t = test.term;
        if let (Some(Some(mine)), Some(Some(theirs))) = (
            plans.get(t).map(|p| p.and_then(|p| p.power)),
            averaged.get(t),
        ) && matches!(test.own, Own::Fixed(_))
            && (mine - theirs).abs() >= 0.0005
        {
            differs.push((labels[t].clone(), *theirs, mine));
        }
    }
    if !differs.is_empty() {
        notes.push(SimulationNote::PatternPower { terms: differs });
    }
    for (test, &ss) in sim.tests.iter().zip(&kept.null_fixed_ss) {
        let t = test.term;
        if sim.analysis.model.kinds[t] != Kind::Fixed {
            continue;
        }
        let df2 = plans[t].and_then(|p| p.denominator_df);
        let Some(rate) = sim.pattern_power(test, df2, ss) else {
            continue;
        };
        if rate - sim.alpha >= 0.0005 {
            notes.push(SimulationNote::NullCarries {
                term: labels[t].clone(),
                sums_of_squares: layout.sums_of_squares,
                null_rate: rate,
            });
        }
    }
    notes
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Wilson (1927) for 0 of 10 and 5 of 10 at z = 1.96, computed by hand from the
    /// formula: 0/10 gives (0, z²/(n + z²)) = (0, 0.2775); 5/10 gives 0.5 ± 0.2634 =
    /// (0.2366, 0.7634).
    #[test]
    fn wilson_interval_by_hand() {
        let (lo, hi) = wilson(0, 10, 1.96);
        assert!(lo.abs() < 1e-12 && (hi - 0.2775).abs() < 1e-4, "{lo} {hi}");
        let (lo, hi) = wilson(5, 10, 1.96);
        assert!(
            (lo - 0.2366).abs() < 1e-4 && (hi - 0.7634).abs() < 1e-4,
            "{lo} {hi}"
        );
    }

    #[test]
    fn linear_pattern_sums_to_zero() {
        let lv = [3usize, 4];
        let mut sums = [0.0; 4];
        for i in 0..3 {
            for (j, s) in sums.iter_mut().enumerate() {
                *s += fixed_pattern(Effect::RootMeanSquare(1.0), 0b11, &lv, &[i, j]);
            }
        }
        assert!(sums.iter().all(|s| s.abs() < 1e-12));
    }
}
