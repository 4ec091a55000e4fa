//! The simulator: a layout's model at its planning values, the data sets drawn from it
//! (the generator), and the Monte Carlo runs over them.

use super::*;

/// Confidence level of the intervals around simulated rates and mean squares.
pub const CONFIDENCE: f64 = 0.99;
/// The standard normal quantile for `CONFIDENCE` (two-sided): Φ⁻¹(0.995).
pub(super) const Z: f64 = 2.5758293035489004;
/// Runs tallied together before blocks are combined (in order).
pub(super) const BLOCK: u64 = 64;
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
pub(super) enum Own {
    Fixed(usize),
    Random(usize),
    Nothing,
}

#[derive(Debug, Clone)]
pub(super) struct PlannedTest {
    pub(super) term: usize,
    df1: f64,
    /// (term, weight, df) of the denominator's mean squares.
    pub(super) parts: Vec<(usize, f64, f64)>,
    /// The critical F of an exact test.
    pub(super) critical: Option<f64>,
    pub(super) own: Own,
}

/// What a layout with removals adds: the observations it keeps, their fit, and where
/// each sits in the full layout.
pub(super) struct Kept {
    pub(super) synthesis: Synthesis,
    /// Index among the full layout's observations (cell × replicates + replicate) of each
    /// kept observation, in the design's order.
    pub(super) observation: Vec<usize>,
    /// Full cell of each kept observation.
    pub(super) cell: Vec<usize>,
    /// Sums of squares of the noise-free fixed mean μ over the kept observations, every
    /// term (residual last): μ'Aμ for the simulated pattern.
    pub(super) fixed_ss: Vec<f64>,
    /// Of each planned test: the sum of squares of its term for μ less the term's own
    /// effects (if it has any), what its null data sets still carry of the other fixed
    /// terms.
    pub(super) null_fixed_ss: Vec<f64>,
}

/// A layout's model at its planning values, ready to draw data sets from.
pub struct Simulator {
    /// The full (balanced) layout's analysis: what the data sets are drawn from.
    pub analysis: Analysis,
    /// The layout's own analysis: how the data sets are analysed (the full layout's, or
    /// the synthesis of the observations a layout with removals keeps).
    pub fitted: Analysis,
    pub(super) balanced: Balanced,
    /// Present when the layout has removals.
    pub(super) kept: Option<Kept>,
    /// df of every term as analysed: the balanced ones, or the fit's after the removals.
    pub(super) df: Vec<u64>,
    pub(super) alpha: f64,
    /// Fixed effects of each fixed term over the full cells, and their sum.
    pub(super) fixed: Vec<Vec<f64>>,
    pub(super) fixed_sum: Vec<f64>,
    random: Vec<RandomTerm>,
    pub(super) effects_len: usize,
    finite: Vec<FinitePopulation>,
    pub(super) map_slots: usize,
    pub(super) sigma: f64,
    pub(super) tests: Vec<PlannedTest>,
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

impl RandomTerm {
    /// Each cell's effect index: fixed, or drawn per data set for a finite population.
    fn cell_map<'a>(&'a self, maps: &'a [Vec<u32>]) -> &'a [u32] {
        if self.finite.is_empty() {
            &self.map
        } else {
            &maps[self.map_slot]
        }
    }
}

impl Simulator {
    pub fn new(layout: &Layout, plan: &PlanningValues) -> Result<Simulator, Error> {
        let s = &layout.structure;
        if !plan.has_priors() {
            let message = match s.units.alias(crate::term::REPLICATE) {
                Some(name) => format!(
                    "simulate draws data from the planning values: add an [sd] table with at least `{name}`, the standard deviation between {name}s (see docs/planning.md)"
                ),
                None => "simulate draws data from the planning values: add an [sd] table with at least `residual`, the standard deviation within cells (see docs/planning.md)".to_string(),
            };
            return Err(Error::invalid(None, message));
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
                    // A unit's effects are the unit's: not centred over the treatments
                    // it carries, as the expected mean squares have it (ems::Model).
                    let restricted =
                        s.convention == Convention::Restricted && !s.units.is_unit_term(term.live);
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
            for (m, &i) in x.cell_mean.iter_mut().zip(r.cell_map(&x.maps)) {
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
                for (t, &i) in x.null_totals.iter_mut().zip(r.cell_map(&x.maps)) {
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
    pub(super) fn noncentrality(&self, test: &PlannedTest, ss: f64) -> Option<f64> {
        let den = self.expected_denominator(test);
        (den > 0.0 && den.is_finite()).then(|| ss.max(0.0) / den)
    }

    /// Power of a fixed term's test at noncentrality SS_T(μ) / E(D), on the term's df and
    /// the planned denominator df `df2`; the noncentral F is an approximation unless the
    /// term's mean square is a scaled noncentral chi-square.
    pub(super) fn pattern_power(
        &self,
        test: &PlannedTest,
        df2: Option<f64>,
        ss: f64,
    ) -> Option<f64> {
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
    pub(super) fn kept_mean_squares(&self, kept: &Kept, y: &[f64], ms: &mut [f64]) {
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
pub(super) fn planned_test(
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
    pub(super) fn new(
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
pub(super) fn fixed_pattern(effect: Effect, live: u32, lv: &[usize], at: &[usize]) -> f64 {
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
