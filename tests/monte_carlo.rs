//! The engine's expected mean squares hold against simulated balanced data.
//!
//! A small simulator, written here and sharing nothing with the engine but the list of
//! terms, draws data from the linear model of a layout, computes every term's mean square
//! by its own sums of squares, and averages over many seeded data sets. Each average must
//! lie within 4 standard errors (from the spread of the simulated mean squares) of
//! Σ coefficient × component from `Model::ems`. So must the average of every reported
//! denominator against E(MS) of its term less the term's own component.
//!
//! # The models simulated
//!
//! y = μ + Σ_T (effect of T at the observation's cell of T) + ε, ε ~ N(0, σ²).
//!
//! - Fixed terms (every subscript fixed): effects chosen once, centred to sum to zero over
//!   each live subscript; the component is κ²_T = Σ effect² / df_T (Montgomery, Design and
//!   Analysis of Experiments: Σ τᵢ² / (a - 1) for a main effect, and likewise for
//!   interactions).
//! - Restricted convention (Cornfield and Tukey 1956, Annals of Mathematical Statistics
//!   27:907-949; Montgomery's restricted mixed model): a random term's effects are iid
//!   N(0, σ²_T) draws centred over each fixed live subscript, so they sum to zero over it.
//!   For a two-factor mixed interaction this gives Var((τβ)ᵢⱼ) = ((a - 1)/a) σ²_τβ and
//!   Σᵢ (τβ)ᵢⱼ = 0, which is Montgomery's restricted model, with E(MS_AB) = σ² + nσ²_τβ.
//!   No rescaling is applied: scaling the centred draws by √(a/(a - 1)) would make the
//!   variance σ²_τβ itself and change the coefficients.
//! - Unrestricted convention (Searle, Casella and McCulloch 1992, Variance Components;
//!   Montgomery's unrestricted mixed model): every random effect iid N(0, σ²_T), with no
//!   constraint.
//! - A random factor drawn from a finite population of N levels (Cornfield and Tukey 1956):
//!   the effects of every random term live in that factor are drawn over the whole
//!   population, centred over it (so σ²_T = Σ effect² / (N - 1) over the population), and
//!   the layout's n levels are a sample without replacement, the same for every term of
//!   the data set. This is simulated under the restricted convention only, the setting in
//!   which Cornfield and Tukey derived the finite-population coefficients (1 - n/N).
//!
//! # Sums of squares
//!
//! For balanced data, with Q(X) = Σ over the cells of the marginal table X of
//! (total in the cell)² / (observations per cell), and Q(∅) = N ȳ², the sum of squares of
//! a term with live factors L nested in M is the inclusion–exclusion
//! SS_T = Σ_{S ⊆ L} (-1)^{|L| - |S|} Q(S ∪ M) (e.g. Bennett and Franklin 1954; it gives
//! the familiar SS_A = Q(A) - Q(∅) and SS_B(A) = Q(AB) - Q(A)). The residual is the total
//! Σy² less Q(all factors). Citations are from memory; the formulas are common practice.

use std::collections::BTreeMap;

use emsplan::ems::Model;
use emsplan::errorterm::error_terms;
use emsplan::layout::{Convention, Kind, Layout};
use emsplan::term::{Mask, Term};
use rand::seq::index;
use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::StandardNormal;

const DATA_SETS: usize = 20_000;
const TOLERANCE_SE: f64 = 4.0;

fn layout(text: &str) -> Layout {
    let spec = emsplan::spec::parse(text).expect("the layout parses");
    Layout::from_spec(&spec, text).expect("the layout is valid")
}

fn bits(mask: Mask, n: usize) -> Vec<usize> {
    (0..n).filter(|&j| mask & (1 << j) != 0).collect()
}

/// Effects of one term over its subscripts, in a dense array.
struct TermEffects {
    /// The term's subscripts (live and nesting), in factor order.
    dims: Vec<usize>,
    /// Size along each dim: the level count, or the population for a finite factor.
    sizes: Vec<usize>,
    values: Vec<f64>,
}

impl TermEffects {
    fn zeros(dims: Vec<usize>, sizes: Vec<usize>) -> Self {
        let len = sizes.iter().product();
        TermEffects {
            dims,
            sizes,
            values: vec![0.0; len],
        }
    }

    fn offset(&self, at: &[usize]) -> usize {
        self.dims
            .iter()
            .zip(&self.sizes)
            .fold(0, |o, (&d, &s)| o * s + at[d])
    }

    /// Subtracts the mean along the k-th dim, for every setting of the others.
    fn centre_along(&mut self, k: usize) {
        let size = self.sizes[k];
        let inner: usize = self.sizes[k + 1..].iter().product();
        let outer: usize = self.sizes[..k].iter().product();
        for o in 0..outer {
            for i in 0..inner {
                let at = |x: usize| (o * size + x) * inner + i;
                let mean = (0..size).map(|x| self.values[at(x)]).sum::<f64>() / size as f64;
                for x in 0..size {
                    self.values[at(x)] -= mean;
                }
            }
        }
    }
}

/// A layout's linear model, ready to draw data from.
struct Simulator {
    layout: Layout,
    model: Model,
    /// σ for each random term, by term index (the residual included); None for fixed terms.
    sd: Vec<Option<f64>>,
    /// Effects of the fixed terms, chosen once.
    fixed: Vec<Option<TermEffects>>,
    /// The component each term's EMS refers to: σ²_T, or κ²_T for a fixed term.
    component: Vec<f64>,
}

impl Simulator {
    /// `variances` gives σ² for each random term by its short label (`residual` for σ²).
    fn new(layout: Layout, variances: &[(&str, f64)], seed: u64) -> Self {
        let s = &layout.structure;
        let n = s.factors.len();
        let model = Model::new(s);
        let table: BTreeMap<&str, f64> = variances.iter().copied().collect();
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let mut sd = Vec::new();
        let mut fixed = Vec::new();
        let mut component = Vec::new();
        for (t, term) in model.terms.iter().enumerate() {
            let label = term.short_label(s);
            if model.kinds[t] == Kind::Random {
                let v = *table
                    .get(label.as_str())
                    .unwrap_or_else(|| panic!("no variance given for {label}"));
                sd.push(Some(v.sqrt()));
                fixed.push(None);
                component.push(v);
            } else {
                assert!(!table.contains_key(label.as_str()), "{label} is fixed");
                // Effects spread over [-2, 2], centred over each live subscript.
                let dims = bits(term.live | term.nest, n);
                let sizes = dims
                    .iter()
                    .map(|&d| layout.levels.per_factor[d] as usize)
                    .collect();
                let mut e = TermEffects::zeros(dims.clone(), sizes);
                for x in &mut e.values {
                    *x = rng.random_range(-2.0..2.0);
                }
                for (k, &d) in dims.iter().enumerate() {
                    if term.live & (1 << d) != 0 {
                        e.centre_along(k);
                    }
                }
                let df = own_df(term, &layout);
                let kappa = e.values.iter().map(|x| x * x).sum::<f64>() / df as f64;
                sd.push(None);
                fixed.push(Some(e));
                component.push(kappa);
            }
        }
        for f in &s.factors {
            assert!(
                f.population.is_none() || f.within == 0,
                "the simulator draws finite populations for factors nested in nothing"
            );
        }
        Simulator {
            layout,
            model,
            sd,
            fixed,
            component,
        }
    }

    /// One data set: every observation, in the order of `observations()`.
    fn draw(&self, rng: &mut ChaCha8Rng) -> Vec<f64> {
        let s = &self.layout.structure;
        let lv = &self.layout.levels;
        let n = s.factors.len();
        let restricted = s.convention == Convention::Restricted;
        // The sampled population levels of each finite factor (identity otherwise).
        let chosen: Vec<Vec<usize>> = (0..n)
            .map(|j| match s.factors[j].population {
                Some(pop) => index::sample(rng, pop as usize, lv.per_factor[j] as usize).into_vec(),
                None => (0..lv.per_factor[j] as usize).collect(),
            })
            .collect();
        let mut effects: Vec<Option<TermEffects>> = Vec::new();
        for (t, term) in self.model.terms.iter().enumerate() {
            if term.is_residual() || self.sd[t].is_none() {
                effects.push(None);
                continue;
            }
            let sd = self.sd[t].unwrap();
            let dims = bits(term.live | term.nest, n);
            let sizes = dims
                .iter()
                .map(|&d| s.factors[d].population.unwrap_or(lv.per_factor[d]) as usize)
                .collect();
            let mut e = TermEffects::zeros(dims.clone(), sizes);
            for x in &mut e.values {
                let z: f64 = rng.sample(StandardNormal);
                *x = sd * z;
            }
            for (k, &d) in dims.iter().enumerate() {
                let live = term.live & (1 << d) != 0;
                let f = &s.factors[d];
                let constrained = (restricted && f.kind == Kind::Fixed) || f.population.is_some();
                if live && constrained {
                    e.centre_along(k);
                }
            }
            effects.push(Some(e));
        }
        let sigma = self.sd[self.model.residual()].unwrap();
        let mut y = Vec::with_capacity(lv.observations() as usize);
        for at in observations(&self.layout) {
            // Population index of each factor's level.
            let pop_at: Vec<usize> = (0..n).map(|j| chosen[j][at[j]]).collect();
            let mut value = 10.0;
            for (fixed, random) in self.fixed.iter().zip(&effects) {
                if let Some(e) = fixed {
                    value += e.values[e.offset(&at)];
                } else if let Some(e) = random {
                    value += e.values[e.offset(&pop_at)];
                }
            }
            let z: f64 = rng.sample(StandardNormal);
            y.push(value + sigma * z);
        }
        y
    }
}

/// Every observation's factor indices (the replicate last), in a fixed order.
fn observations(layout: &Layout) -> Vec<Vec<usize>> {
    let mut sizes: Vec<usize> = layout
        .levels
        .per_factor
        .iter()
        .map(|&x| x as usize)
        .collect();
    sizes.push(layout.levels.replicates as usize);
    let total: usize = sizes.iter().product();
    (0..total)
        .map(|mut o| {
            let mut at = vec![0; sizes.len()];
            for k in (0..sizes.len()).rev() {
                at[k] = o % sizes[k];
                o /= sizes[k];
            }
            at
        })
        .collect()
}

/// df of a term, Π(n - 1) over live factors × Π n over nesting factors (common practice).
fn own_df(term: &Term, layout: &Layout) -> u64 {
    let n = layout.structure.factors.len();
    let lv = &layout.levels.per_factor;
    let live: u64 = bits(term.live, n).iter().map(|&j| lv[j] - 1).product();
    let nest: u64 = bits(term.nest, n).iter().map(|&j| lv[j]).product();
    live * nest
}

/// Mean squares of every term (residual last) for one data set, by inclusion–exclusion
/// over marginal totals.
fn mean_squares(layout: &Layout, model: &Model, at: &[Vec<usize>], y: &[f64]) -> Vec<f64> {
    let n = layout.structure.factors.len();
    let lv = &layout.levels.per_factor;
    let obs = y.len() as f64;
    // Q(X) for every subset X of the factors.
    let q: Vec<f64> = (0..(1u32 << n))
        .map(|x| {
            let dims = bits(x, n);
            let cells: usize = dims.iter().map(|&d| lv[d] as usize).product();
            let mut totals = vec![0.0; cells];
            for (a, v) in at.iter().zip(y) {
                let k = dims.iter().fold(0, |o, &d| o * lv[d] as usize + a[d]);
                totals[k] += v;
            }
            let per_cell = obs / cells as f64;
            totals.iter().map(|t| t * t).sum::<f64>() / per_cell
        })
        .collect();
    let all = (1u32 << n) - 1;
    let total_ss: f64 = y.iter().map(|v| v * v).sum();
    model
        .terms
        .iter()
        .map(|term| {
            if term.is_residual() {
                let df = obs - lv.iter().product::<u64>() as f64;
                return (total_ss - q[all as usize]) / df;
            }
            let live = bits(term.live, n);
            let mut ss = 0.0;
            for sub in 0..(1u32 << live.len()) {
                let s_mask: Mask = bits(sub, live.len()).iter().map(|&k| 1 << live[k]).sum();
                let sign = if (live.len() - sub.count_ones() as usize).is_multiple_of(2) {
                    1.0
                } else {
                    -1.0
                };
                ss += sign * q[(s_mask | term.nest) as usize];
            }
            ss / own_df(term, layout) as f64
        })
        .collect()
}

/// Running mean and variance (Welford 1962).
#[derive(Default, Clone)]
struct Moments {
    n: f64,
    mean: f64,
    m2: f64,
}

impl Moments {
    fn push(&mut self, x: f64) {
        self.n += 1.0;
        let d = x - self.mean;
        self.mean += d / self.n;
        self.m2 += d * (x - self.mean);
    }

    fn standard_error(&self) -> f64 {
        (self.m2 / (self.n - 1.0) / self.n).sqrt()
    }
}

/// What a run found for one quantity: the simulated mean, its standard error, and what
/// the engine expects.
struct Finding {
    what: String,
    mean: f64,
    se: f64,
    expected: f64,
}

impl Finding {
    fn z(&self) -> f64 {
        (self.mean - self.expected) / self.se
    }
}

/// Simulates `DATA_SETS` data sets under the layout's convention and holds each term's
/// mean square, and each reported denominator, against the engine's EMS.
fn simulate(sim: &Simulator, seed: u64) -> Vec<Finding> {
    let layout = &sim.layout;
    let model = &sim.model;
    let s = &layout.structure;
    let ems = model.ems(&layout.levels).unwrap();
    let df = model.df(&layout.levels);
    let tests = error_terms(model, &ems, &df);
    let at = observations(layout);
    let terms = model.terms.len();
    for (t, term) in model.terms.iter().enumerate() {
        if !term.is_residual() {
            assert_eq!(df[t], own_df(term, layout), "df of {}", term.label(s));
        }
    }

    let mut ms_moments = vec![Moments::default(); terms];
    let mut den_moments = vec![Moments::default(); terms];
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    for _ in 0..DATA_SETS {
        let y = sim.draw(&mut rng);
        let ms = mean_squares(layout, model, &at, &y);
        for t in 0..terms {
            ms_moments[t].push(ms[t]);
            if let Some(test) = &tests[t]
                && test.verdict.is_testable()
            {
                let d: f64 = test
                    .denominator
                    .iter()
                    .map(|&(v, w)| ms[v] * (*w.numer() as f64 / *w.denom() as f64))
                    .sum();
                den_moments[t].push(d);
            }
        }
    }

    let value = |t: usize, skip_own: bool| -> f64 {
        ems.rows[t]
            .iter()
            .filter(|(c, _)| !(skip_own && *c == t))
            .map(|&(c, x)| (*x.numer() as f64 / *x.denom() as f64) * sim.component[c])
            .sum()
    };
    let mut findings = Vec::new();
    for t in 0..terms {
        let label = model.terms[t].label(s);
        findings.push(Finding {
            what: format!("MS[{label}]"),
            mean: ms_moments[t].mean,
            se: ms_moments[t].standard_error(),
            expected: value(t, false),
        });
        if let Some(test) = &tests[t]
            && test.verdict.is_testable()
        {
            findings.push(Finding {
                what: format!("denominator of {label} ({:?})", test.verdict),
                mean: den_moments[t].mean,
                se: den_moments[t].standard_error(),
                expected: value(t, true),
            });
        }
    }
    findings
}

fn assert_all_hold(findings: &[Finding], context: &str) {
    eprintln!("{context}:");
    for f in findings {
        eprintln!(
            "  {:<48} simulated {:>9.3} ± {:.3}   EMS {:>9.3}   z = {:>5.2}",
            f.what,
            f.mean,
            f.se,
            f.expected,
            f.z()
        );
    }
    let bad: Vec<String> = findings
        .iter()
        .filter(|f| f.z().abs() > TOLERANCE_SE)
        .map(|f| {
            format!(
                "{}: simulated {:.3} ± {:.3}, EMS {:.3} (z = {:.1})",
                f.what,
                f.mean,
                f.se,
                f.expected,
                f.z()
            )
        })
        .collect();
    assert!(bad.is_empty(), "{context}:\n{}", bad.join("\n"));
}

/// E(MS) of every term under `other` convention with the same component values, held
/// against data simulated under the layout's own convention.
fn under_other_convention(sim: &Simulator, other: Convention) -> Vec<f64> {
    let mut s = sim.layout.structure.clone();
    s.convention = other;
    let ems = Model::new(&s).ems(&sim.layout.levels).unwrap();
    (0..sim.model.terms.len())
        .map(|t| {
            ems.rows[t]
                .iter()
                .map(|&(c, x)| (*x.numer() as f64 / *x.denom() as f64) * sim.component[c])
                .sum()
        })
        .collect()
}

// Fertiliser (fixed, 3 levels) in 4 greenhouses drawn at random; each greenhouse holds 2
// benches drawn at random, and each bench is split into the 3 fertiliser sections with
// 2 pots each. The fertiliser x greenhouse and fertiliser x bench(greenhouse) interactions
// are mixed, so the conventions give different EMS for greenhouse and bench.
const GREENHOUSES: &str = r#"
[layout]
name = "Fertiliser sections on benches in greenhouses"
replicates = 2

[[factor]]
name = "fertiliser"
kind = "fixed"
levels = 3

[[factor]]
name = "greenhouse"
kind = "random"
levels = 4

[[factor]]
name = "bench"
kind = "random"
levels = 2
within = ["greenhouse"]
"#;

const GREENHOUSE_VARIANCES: &[(&str, f64)] = &[
    ("greenhouse", 2.0),
    ("bench", 1.5),
    ("fertiliser x greenhouse", 3.0),
    ("fertiliser x bench", 2.0),
    ("residual", 1.0),
];

fn with_convention(text: &str, c: Convention) -> Layout {
    let mut l = layout(text);
    l.structure.convention = c;
    l
}

#[test]
fn nested_mixed_layout_restricted() {
    let sim = Simulator::new(
        with_convention(GREENHOUSES, Convention::Restricted),
        GREENHOUSE_VARIANCES,
        11,
    );
    let findings = simulate(&sim, 101);
    assert_all_hold(&findings, "restricted greenhouses");

    // The simulation can tell the conventions apart: with these components the
    // unrestricted E(MS[greenhouse]) is larger by n·σ²(f x b) + c·n·σ²(f x g) = 4 + 12,
    // far outside the simulated mean's error.
    let other = under_other_convention(&sim, Convention::Unrestricted);
    let g = sim
        .model
        .terms
        .iter()
        .position(|t| t.short_label(&sim.layout.structure) == "greenhouse")
        .unwrap();
    let f = findings
        .iter()
        .find(|f| f.what == "MS[greenhouse]")
        .unwrap();
    assert!(
        (other[g] - f.expected - 16.0).abs() < 1e-9,
        "{} vs {}",
        other[g],
        f.expected
    );
    assert!(((f.mean - other[g]) / f.se).abs() > 2.0 * TOLERANCE_SE);
}

#[test]
fn nested_mixed_layout_unrestricted() {
    let sim = Simulator::new(
        with_convention(GREENHOUSES, Convention::Unrestricted),
        GREENHOUSE_VARIANCES,
        12,
    );
    let findings = simulate(&sim, 102);
    assert_all_hold(&findings, "unrestricted greenhouses");

    let other = under_other_convention(&sim, Convention::Restricted);
    let bench = sim
        .model
        .terms
        .iter()
        .position(|t| t.short_label(&sim.layout.structure) == "bench")
        .unwrap();
    let f = findings
        .iter()
        .find(|f| f.what.starts_with("MS[bench"))
        .unwrap();
    // Restricted E(MS[bench(greenhouse)]) lacks n·σ²(f x b) = 2·2 = 4.
    assert!((f.expected - other[bench] - 4.0).abs() < 1e-9);
    assert!(((f.mean - other[bench]) / f.se).abs() > 2.0 * TOLERANCE_SE);
}

// Two coating recipes (fixed) on 4 production lines and 3 shifts drawn at random, 2 panels
// per cell: recipe has only a quasi-F test (Satterthwaite 1946; Montgomery's three-factor
// mixed example), so the simulation checks a synthetic denominator too.
const COATING: &str = r#"
[layout]
name = "Coating recipes on lines and shifts"
replicates = 2

[[factor]]
name = "recipe"
kind = "fixed"
levels = 2

[[factor]]
name = "line"
kind = "random"
levels = 4

[[factor]]
name = "shift"
kind = "random"
levels = 3
"#;

const COATING_VARIANCES: &[(&str, f64)] = &[
    ("line", 1.0),
    ("shift", 2.0),
    ("recipe x line", 1.5),
    ("recipe x shift", 0.5),
    ("line x shift", 1.0),
    ("recipe x line x shift", 2.0),
    ("residual", 1.0),
];

#[test]
fn crossed_mixed_layout_with_a_quasi_f_test() {
    for (c, seed) in [(Convention::Restricted, 21), (Convention::Unrestricted, 22)] {
        let sim = Simulator::new(with_convention(COATING, c), COATING_VARIANCES, seed);
        let findings = simulate(&sim, seed + 100);
        assert!(
            findings.iter().any(|f| f.what.contains("QuasiF")),
            "the layout has a synthetic test under {c:?}"
        );
        assert_all_hold(&findings, &format!("coating lines, {c:?}"));
    }
}

// Two machines (fixed), 3 operators drawn from a crew of 5, and 4 batches of raw material
// drawn at random, 2 parts per cell. The finite crew puts (1 - 3/5) into the coefficients
// of every operator interaction in the mean squares of the terms that do not contain
// operator (Cornfield and Tukey 1956).
const WORKSHOP: &str = r#"
[layout]
name = "Machines, operators from a small crew, and batches"
replicates = 2
convention = "restricted"

[[factor]]
name = "machine"
kind = "fixed"
levels = 2

[[factor]]
name = "operator"
kind = "random"
levels = 3
population = 5

[[factor]]
name = "batch"
kind = "random"
levels = 4
"#;

const WORKSHOP_VARIANCES: &[(&str, f64)] = &[
    ("operator", 2.0),
    ("batch", 1.0),
    ("machine x operator", 1.5),
    ("machine x batch", 1.0),
    ("operator x batch", 3.0),
    ("machine x operator x batch", 2.0),
    ("residual", 1.0),
];

#[test]
fn finite_population_of_operators() {
    let sim = Simulator::new(layout(WORKSHOP), WORKSHOP_VARIANCES, 31);
    let ems = sim.model.ems(&sim.layout.levels).unwrap();
    // The finite population shows in the EMS: some coefficient is a proper fraction.
    assert!(ems.rows.iter().flatten().any(|(_, x)| !x.is_integer()));
    let findings = simulate(&sim, 131);
    assert_all_hold(&findings, "workshop, finite crew");

    // With an infinite crew the coefficient of σ²(operator x batch) in E(MS[batch]) is
    // machines × replicates = 4; the crew of 5 multiplies it by (1 - 3/5), so at
    // σ² = 3 the two differ by 3·4·(3/5) = 7.2, and the simulation must tell them apart.
    let mut infinite = sim.layout.clone();
    infinite.structure.factors[1].population = None;
    let ems_inf = Model::new(&infinite.structure)
        .ems(&infinite.levels)
        .unwrap();
    let b = sim
        .model
        .terms
        .iter()
        .position(|t| t.short_label(&sim.layout.structure) == "batch")
        .unwrap();
    let inf_value: f64 = ems_inf.rows[b]
        .iter()
        .map(|&(c, x)| (*x.numer() as f64 / *x.denom() as f64) * sim.component[c])
        .sum();
    let f = findings.iter().find(|f| f.what == "MS[batch]").unwrap();
    assert!(
        (inf_value - f.expected - 7.2).abs() < 1e-9,
        "{inf_value} vs {}",
        f.expected
    );
    assert!(((f.mean - inf_value) / f.se).abs() > 2.0 * TOLERANCE_SE);
}

/// The simulator's own sums of squares, checked on a data set small enough to do by hand:
/// one factor at 2 levels, 2 replicates, y = (1, 3 | 4, 8). Grand mean 4; level means 2
/// and 6; SS_A = 2·((2-4)² + (6-4)²) = 16, SS_residual = (1-2)² + (3-2)² + (4-6)² + (8-6)² = 10.
#[test]
fn sums_of_squares_by_hand() {
    let l = layout(
        "[layout]\nreplicates = 2\n[[factor]]\nname = \"tank\"\nkind = \"fixed\"\nlevels = 2\n",
    );
    let model = Model::new(&l.structure);
    let at = observations(&l);
    let y = [1.0, 3.0, 4.0, 8.0];
    let ms = mean_squares(&l, &model, &at, &y);
    assert_eq!(ms, vec![16.0 / 1.0, 10.0 / 2.0]);
}
