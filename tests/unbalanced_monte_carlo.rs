//! The synthesised expected mean squares of an unbalanced layout hold against simulated
//! data.
//!
//! A simulator written here draws data from the unrestricted mixed model of an unbalanced
//! layout, computes the sequential sums of squares by its own projections (pseudo-inverses
//! of the observation-level incidence matrices by singular value decomposition, not the
//! engine's cell-space bases), and averages the mean squares over seeded data sets. Each
//! average must lie within 4 standard errors of Σ coefficient × component from the
//! engine; so must the average of every reported denominator against the expectation it
//! claims.
//!
//! The model (Searle, Casella and McCulloch 1992, Variance Components, for the unrestricted
//! mixed model): y = μ + Σ_fixed F (effect at the observation's cell of F) + Σ_random U
//! (effect of its cell of U) + e, random effects iid N(0, σ²_U), e iid N(0, σ²). The fixed
//! effects are drawn afresh for every data set, each term's as iid normals over its cells
//! centred along each live factor and scaled so that E(Σ effect²)/df = κ²: the engine's κ²
//! coefficient is the average over such patterns (see src/unbalanced/fit.rs).
//!
//! The sequential sums of squares (common practice): SS_k = y'(P_k - P_{k-1})y, P_k the
//! projection onto the columns of the intercept and the first k terms' incidence matrices in
//! the fit order; the residual is y'(I - P_K)y; df are rank increases.

use emsplan::layout::{Kind, Layout};
use emsplan::unbalanced::Design;

#[path = "common/synthesis.rs"]
mod synthesis;
use nalgebra::{DMatrix, DVector};
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, StandardNormal};
use synthesis::Analysis;

const DATA_SETS: usize = 20_000;
const TOLERANCE_SE: f64 = 4.0;

/// Light (fixed, 2) x cultivar (fixed, 3) with chambers (random, 3 per light), 2 pots per
/// cultivar and chamber; one chamber lost, one pot lost, one chamber's whole cultivar lost.
const LAYOUT: &str = include_str!("fixtures/layouts/chambers-empty-cell.toml");

/// Projection onto the column space of x, by SVD with a relative rank threshold.
fn projection(x: &DMatrix<f64>) -> (DMatrix<f64>, usize) {
    let n = x.nrows();
    if x.ncols() == 0 {
        return (DMatrix::zeros(n, n), 0);
    }
    let svd = x.clone().svd(true, false);
    let u = svd.u.unwrap();
    let largest = svd.singular_values.max();
    let keep: Vec<usize> = (0..svd.singular_values.len())
        .filter(|&i| svd.singular_values[i] > 1e-9 * largest)
        .collect();
    let mut p = DMatrix::zeros(n, n);
    for &i in &keep {
        let c = u.column(i);
        p += c * c.transpose();
    }
    (p, keep.len())
}

/// The observation-level incidence matrix of a term's cells.
fn incidence(design: &Design, t: usize) -> DMatrix<f64> {
    let grid = design.grid(t);
    let obs = design.observations();
    let mut x = DMatrix::zeros(obs.len(), grid.cells());
    for (i, o) in obs.iter().enumerate() {
        x[(i, grid.cell_of(&o.levels))] = 1.0;
    }
    x
}

#[test]
fn simulated_sequential_mean_squares_match_the_synthesis() {
    let spec = emsplan::spec::parse(LAYOUT).unwrap();
    let layout = Layout::from_spec(&spec, LAYOUT).unwrap();
    let a = Analysis::new(&layout).unwrap();
    let design = &a.design;
    let model = &design.model;
    let s = &layout.structure;
    let n = design.len();
    assert_eq!(n, 36 - 6 - 1 - 2);
    let residual = model.residual();
    let labels: Vec<String> = a
        .fit
        .order
        .iter()
        .map(|&t| model.terms[t].label(s))
        .collect();
    assert_eq!(
        labels,
        [
            "light",
            "cultivar",
            "light x cultivar",
            "chamber(light)",
            "chamber x cultivar(light)"
        ]
    );

    // Projections of the nested models, in the fit order.
    let mut columns = DMatrix::from_element(n, 1, 1.0);
    let (mut previous, mut previous_rank) = projection(&columns);
    let mut blocks: Vec<(usize, DMatrix<f64>, u64)> = Vec::new();
    for &t in &a.fit.order {
        let x = incidence(design, t);
        columns = DMatrix::from_fn(n, columns.ncols() + x.ncols(), |i, j| {
            if j < columns.ncols() {
                columns[(i, j)]
            } else {
                x[(i, j - columns.ncols())]
            }
        });
        let (p, rank) = projection(&columns);
        blocks.push((t, &p - &previous, (rank - previous_rank) as u64));
        previous = p;
        previous_rank = rank;
    }
    let residual_projection = DMatrix::identity(n, n) - &previous;
    let residual_df = (n - previous_rank) as u64;
    for (t, _, df) in &blocks {
        assert_eq!(*df, a.fit.df[*t], "df of {}", model.terms[*t].label(s));
    }
    assert_eq!(residual_df, a.fit.df[residual]);

    // Components: σ² = 1, σ²(chamber) = 0.8², σ²(chamber x cultivar) = 0.5², and κ² of
    // 0.6² (light), 0.4² (cultivar), 0.3² (light x cultivar).
    let mut theta = vec![0.0; model.terms.len()];
    for (t, term) in model.terms.iter().enumerate() {
        theta[t] = match term.label(s).as_str() {
            "light" => 0.36,
            "cultivar" => 0.16,
            "light x cultivar" => 0.09,
            "chamber(light)" => 0.64,
            "chamber x cultivar(light)" => 0.25,
            "residual" => 1.0,
            other => panic!("unexpected term {other}"),
        };
    }
    let expected: Vec<f64> = a
        .ems
        .rows
        .iter()
        .map(|row| row.iter().map(|(c, k)| k * theta[*c]).sum())
        .collect();

    let mut rng = ChaCha8Rng::seed_from_u64(0x756e_6261_6c61);
    let mut sum = vec![0.0; model.terms.len()];
    let mut sum_sq = vec![0.0; model.terms.len()];
    let tests: Vec<(usize, Vec<(usize, f64)>)> = a
        .tests
        .iter()
        .enumerate()
        .filter_map(|(t, e)| {
            let e = e.as_ref()?;
            e.verdict.is_testable().then(|| (t, e.denominator.clone()))
        })
        .collect();
    let mut den_sum = vec![0.0; tests.len()];
    let mut den_sq = vec![0.0; tests.len()];
    for round in 0..DATA_SETS {
        // Effects of every term over its full grid.
        let mut effects: Vec<Vec<f64>> = Vec::new();
        for (t, &component) in theta.iter().enumerate().take(residual) {
            let grid = design.grid(t);
            let mut e: Vec<f64> = (0..grid.cells())
                .map(|_| StandardNormal.sample(&mut rng))
                .collect();
            if model.kinds[t] == Kind::Fixed {
                centre(&mut e, &grid.sizes, &grid.live);
                // Centred iid N(0, 1) draws have E(Σ effect²) = the term's df (the
                // dimension of its contrasts), so scaling by κ makes E(Σ effect²)/df = κ².
                let scale = component.sqrt();
                e.iter_mut().for_each(|x| *x *= scale);
            } else {
                let sd = component.sqrt();
                e.iter_mut().for_each(|x| *x *= sd);
            }
            effects.push(e);
        }
        let y = DVector::from_iterator(
            n,
            design.observations().iter().map(|o| {
                let mut v: f64 = StandardNormal.sample(&mut rng);
                for (t, e) in effects.iter().enumerate() {
                    v += e[design.grid(t).cell_of(&o.levels)];
                }
                v
            }),
        );
        let mut ms = vec![0.0; model.terms.len()];
        for (t, p, df) in &blocks {
            if *df > 0 {
                ms[*t] = (y.transpose() * p * &y)[(0, 0)] / *df as f64;
            }
        }
        ms[residual] = (y.transpose() * &residual_projection * &y)[(0, 0)] / residual_df as f64;
        if round < 5 {
            // The engine's own sums of squares of the same response.
            let ss = a.fit.sums_of_squares(design, y.as_slice());
            for t in 0..model.terms.len() {
                let mine = ms[t] * a.fit.df[t] as f64;
                assert!(
                    (ss[t] - mine).abs() <= 1e-8 * mine.abs().max(1.0),
                    "SS of {}: engine {}, projection {mine}",
                    model.terms[t].label(s),
                    ss[t]
                );
            }
        }
        for t in 0..model.terms.len() {
            sum[t] += ms[t];
            sum_sq[t] += ms[t] * ms[t];
        }
        for (k, (_, den)) in tests.iter().enumerate() {
            let d: f64 = den.iter().map(|(v, w)| w * ms[*v]).sum();
            den_sum[k] += d;
            den_sq[k] += d * d;
        }
    }
    let r = DATA_SETS as f64;
    let within = |total: f64, squares: f64, want: f64| -> (bool, f64, f64) {
        let mean = total / r;
        let se = ((squares / r - mean * mean).max(0.0) / r).sqrt();
        ((mean - want).abs() <= TOLERANCE_SE * se, mean, se)
    };
    for t in 0..model.terms.len() {
        let (ok, mean, se) = within(sum[t], sum_sq[t], expected[t]);
        assert!(
            ok,
            "E(MS[{}]): simulated {mean} ± {se}, synthesis {}",
            model.terms[t].label(s),
            expected[t]
        );
    }
    // Denominators: E(D) is E(MS_T) less what the test tests (the term's own component,
    // and for a fixed term the fixed ones).
    for (k, (t, _)) in tests.iter().enumerate() {
        let want: f64 = emsplan::unbalanced::denominator::target(model, &a.ems, *t)
            .iter()
            .map(|(c, x)| x * theta[*c])
            .sum();
        let (ok, mean, se) = within(den_sum[k], den_sq[k], want);
        assert!(
            ok,
            "denominator of {}: simulated {mean} ± {se}, claimed {want}",
            model.terms[*t].label(s)
        );
    }
}

/// Subtracts the mean along every live dimension (first dimension slowest).
fn centre(values: &mut [f64], sizes: &[usize], live: &[bool]) {
    for k in 0..sizes.len() {
        if !live[k] {
            continue;
        }
        let size = sizes[k];
        let inner: usize = sizes[k + 1..].iter().product();
        let outer: usize = sizes[..k].iter().product();
        for o in 0..outer {
            for i in 0..inner {
                let at = |x: usize| (o * size + x) * inner + i;
                let mean = (0..size).map(|x| values[at(x)]).sum::<f64>() / size as f64;
                for x in 0..size {
                    values[at(x)] -= mean;
                }
            }
        }
    }
}

/// Columns of a term in deviation coding (level i of the levels present: the i-th unit
/// vector, the last level: all -1), within each combination of its nesting factors, the
/// Kronecker product over its live factors; a live factor's levels present are those
/// observed with its own nests. A different basis of the same sum-to-zero space as the
/// engine's Helmert contrasts, so the same type III sums of squares.
fn deviation_columns(design: &Design, layout: &Layout, t: usize) -> DMatrix<f64> {
    use std::collections::BTreeMap;
    let s = &layout.structure;
    let grid = design.grid(t);
    let obs = design.observations();
    let live: Vec<usize> = (0..grid.subscripts.len())
        .filter(|&k| grid.live[k])
        .map(|k| grid.subscripts[k])
        .collect();
    let nest: Vec<usize> = (0..grid.subscripts.len())
        .filter(|&k| !grid.live[k])
        .map(|k| grid.subscripts[k])
        .collect();
    let ancestors = |f: usize| -> Vec<usize> {
        (0..s.factors.len())
            .filter(|&g| s.factors[f].ancestors & (1 << g) != 0)
            .collect()
    };
    let mut present: Vec<BTreeMap<Vec<u64>, Vec<u64>>> = vec![BTreeMap::new(); live.len()];
    for o in obs {
        for (k, &f) in live.iter().enumerate() {
            let key: Vec<u64> = ancestors(f).iter().map(|&g| o.levels[g]).collect();
            let list = present[k].entry(key).or_default();
            if !list.contains(&o.levels[f]) {
                list.push(o.levels[f]);
            }
        }
    }
    present
        .iter_mut()
        .for_each(|p| p.values_mut().for_each(|l| l.sort()));
    let mut column: BTreeMap<(Vec<u64>, Vec<usize>), usize> = BTreeMap::new();
    let mut entries: Vec<(usize, usize, f64)> = Vec::new();
    for (i, o) in obs.iter().enumerate() {
        let combo: Vec<u64> = nest.iter().map(|&g| o.levels[g]).collect();
        // Each live factor's coding row: (contrast index, value) pairs.
        let mut rows: Vec<Vec<(usize, f64)>> = Vec::new();
        for (k, &f) in live.iter().enumerate() {
            let key: Vec<u64> = ancestors(f).iter().map(|&g| o.levels[g]).collect();
            let list = &present[k][&key];
            let at = list.iter().position(|&v| v == o.levels[f]).unwrap();
            let width = list.len() - 1;
            rows.push(if at < width {
                vec![(at, 1.0)]
            } else {
                (0..width).map(|j| (j, -1.0)).collect()
            });
        }
        let mut acc: Vec<(Vec<usize>, f64)> = vec![(Vec::new(), 1.0)];
        for row in &rows {
            let mut next = Vec::new();
            for (idx, v) in &acc {
                for &(j, x) in row {
                    let mut idx = idx.clone();
                    idx.push(j);
                    next.push((idx, v * x));
                }
            }
            acc = next;
        }
        for (idx, v) in acc {
            let len = column.len();
            let c = *column.entry((combo.clone(), idx)).or_insert(len);
            entries.push((i, c, v));
        }
    }
    let mut x = DMatrix::zeros(obs.len(), column.len());
    for (i, c, v) in entries {
        x[(i, c)] = v;
    }
    x
}

fn side_by_side(parts: &[DMatrix<f64>], n: usize) -> DMatrix<f64> {
    let width: usize = parts.iter().map(|p| p.ncols()).sum();
    let mut x = DMatrix::zeros(n, width);
    let mut at = 0;
    for p in parts {
        x.view_mut((0, at), (n, p.ncols())).copy_from(p);
        at += p.ncols();
    }
    x
}

/// Type III sums of squares, R(T | every other term) = y'(P_X - P_{X without T})y in
/// deviation coding, computed here by SVD projections, against the engine's (df and sums
/// of squares of random responses). The layout has a lost chamber and an empty cell.
#[test]
fn type3_sums_of_squares_are_reductions_given_every_other_term() {
    let spec = emsplan::spec::parse(LAYOUT).unwrap();
    let mut layout = Layout::from_spec(&spec, LAYOUT).unwrap();
    layout.sums_of_squares = emsplan::layout::SumsOfSquares::Type3;
    let a = Analysis::new(&layout).unwrap();
    let design = &a.design;
    let model = &design.model;
    let n = design.len();
    let residual = model.residual();
    let ones = DMatrix::from_element(n, 1, 1.0);
    let coded: Vec<DMatrix<f64>> = (0..residual)
        .map(|t| deviation_columns(design, &layout, t))
        .collect();
    let mut all = vec![ones.clone()];
    all.extend(coded.iter().cloned());
    let (full, full_rank) = projection(&side_by_side(&all, n));
    let mut rng = ChaCha8Rng::seed_from_u64(7);
    let ys: Vec<DVector<f64>> = (0..3)
        .map(|_| DVector::from_iterator(n, (0..n).map(|_| StandardNormal.sample(&mut rng))))
        .collect();
    for t in 0..residual {
        let mut others = vec![ones.clone()];
        others.extend((0..residual).filter(|&u| u != t).map(|u| coded[u].clone()));
        let (reduced, rank) = projection(&side_by_side(&others, n));
        let label = model.terms[t].label(&layout.structure);
        assert_eq!(
            a.fit.df[t],
            (full_rank - rank) as u64,
            "type III df of {label}"
        );
        let a_t = &full - &reduced;
        for y in &ys {
            let want = (y.transpose() * &a_t * y)[(0, 0)];
            let got = a.fit.sums_of_squares(design, y.as_slice())[t];
            assert!(
                (want - got).abs() <= 1e-8 * want.abs().max(1.0),
                "type III SS of {label}: engine {got}, projections {want}"
            );
        }
    }
}
