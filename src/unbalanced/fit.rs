//! Sums of squares of an unbalanced layout as projections, and their expected values by
//! Hartley's method of synthesis.
//!
//! Every sum of squares here is a quadratic form y'Ay whose matrix A is the orthogonal
//! projection onto a subspace of the model's column space: with Q an orthonormal basis of
//! that subspace, A = QQ' and SS = ||Q'y||².
//!
//! - Sequential (type I): the terms are fitted one after another; A_k = P_k - P_{k-1}, with
//!   P_k the projection onto the columns of the intercept and the first k terms. Its df are
//!   the rank increase.
//! - Type III: each term adjusted for every other; A_T = P_X - P_{X without T}.
//!
//! Terms are coded by sum-to-zero (orthonormal Helmert) contrasts over their live factors
//! (see `contrast_columns`); for a term that follows all its marginal terms the span is
//! that of its cells' incidence matrix.
//!
//! Hartley (1967, "Expectations, variances and covariances of ANOVA mean squares by
//! 'synthesis'", Biometrics 23:105-114): for y = Xβ + Σ_U Z_U u_U + e with independent
//! random effects (the unrestricted model), E(y'Ay) = Σ_U σ²_U tr(A Z_U Z_U') + σ² tr(A) +
//! μ'Aμ, and tr(A Z_U Z_U') = Σ over the columns z of Z_U of z'Az: the sum of squares of
//! the term computed with each column of the random term's incidence matrix as the data,
//! summed. With A = QQ' that is ||Q'Z_U||²_F, and tr(A) = rank(A) = df.
//!
//! Fixed terms: μ'Aμ is a quadratic form in the fixed effects. Each fixed term F gets the
//! component κ²_F = Σ effect² / df_F over its cells (its effects summing to zero over each
//! live factor, as in the balanced case), and its coefficient is the average of μ'Aμ over
//! effect patterns of that size spread evenly over every contrast direction: with C_F an
//! orthonormal basis of F's contrasts, coefficient = ||Q'X_F C_F||²_F, the synthesis with
//! the contrast columns as data. In a balanced layout every pattern gives that value.
//!
//! The computations run over the non-empty cells of the full layout (see `design`):
//! vectors are scaled by √n_c, so that the Euclidean inner product over cells is the one
//! over observations.
//!
//! A response's sums of squares are projections of its cell means centred on the grand
//! mean (every A here annihilates the constant, the intercept being in every model), the
//! residual is the within-cell sum of squares plus what the model leaves of the cell means,
//! and the cell term fitted last is the norm of an explicit residual vector: nothing is a
//! difference of uncentred totals, so a response near 1e7 keeps the digits of one near 0
//! (see `Fit::sums_of_squares`).

use nalgebra::{DMatrix, DVector};

use crate::layout::{Kind, SumsOfSquares};

use super::blocked;
use super::design::Design;

/// Relative size below which a residual direction counts as inside the span already:
/// a new direction must have a norm of at least this much of its column's.
const RANK_TOLERANCE: f64 = 1e-7;

/// How a term's sum of squares is held.
#[derive(Debug, Clone)]
enum Block {
    /// An orthonormal basis (rows: non-empty cells, scaled by √n_c) of its subspace.
    Basis(DMatrix<f64>),
    /// The rest of the cell space once every other block is taken out (the cell term,
    /// fitted last): held implicitly, computed by subtraction.
    Rest,
    /// No df.
    Empty,
}

/// The projections of a layout's sums of squares: fitted once, then used for the
/// expected mean squares and for the sums of squares of any response.
#[derive(Debug, Clone)]
pub struct Fit {
    pub sums_of_squares: SumsOfSquares,
    /// Model terms (not the residual) in the order they were fitted.
    pub order: Vec<usize>,
    /// df of every model term, the residual last.
    pub df: Vec<u64>,
    /// The df the same terms have as sequential sums of squares (equal to `df` for a
    /// sequential fit; type III can leave a term fewer when a cell is empty).
    pub sequential_df: Vec<u64>,
    /// The intercept's direction, √n_c / √N.
    intercept: DMatrix<f64>,
    /// Sequential blocks, by term (they span the model's column space with the intercept).
    sequential: Vec<Block>,
    /// The blocks whose sums of squares are reported, by term.
    reported: Vec<Block>,
    /// Rank of the model's column space (the intercept included).
    rank: usize,
    /// Whether the model's column space is every cell (the cell term is in the model).
    full: bool,
}

/// Expected mean squares: for every model term (residual last) its components (term
/// indices, the residual's for σ²) with their coefficients. A term with 0 df has none.
#[derive(Debug, Clone, PartialEq)]
pub struct SynthesisEms {
    pub rows: Vec<Vec<(usize, f64)>>,
}

impl SynthesisEms {
    pub fn coefficient(&self, t: usize, c: usize) -> f64 {
        self.rows[t]
            .iter()
            .find(|(u, _)| *u == c)
            .map_or(0.0, |(_, x)| *x)
    }
}

/// The order of the sequential fit: every fixed term ahead of the random ones, and within
/// each, terms with fewer subscripts first (so every term comes after the terms marginal
/// to it), then the model's order. With the fixed terms first, the random terms' sums of
/// squares are adjusted for every fixed effect and hold no fixed component (the idea of
/// Henderson's 1953 "fitting constants" method; citation from memory).
pub fn fit_order(design: &Design) -> Vec<usize> {
    let model = &design.model;
    let mut order: Vec<usize> = (0..model.residual()).collect();
    order.sort_by_key(|&t| {
        (
            model.kinds[t] == Kind::Random,
            model.terms[t].subscripts().count_ones(),
            t,
        )
    });
    order
}

/// Orthonormal Helmert contrasts of n levels: column k (0-based) compares level k + 1 with
/// the levels before it.
fn helmert(n: usize) -> DMatrix<f64> {
    let mut h = DMatrix::zeros(n, n.saturating_sub(1));
    for k in 0..n.saturating_sub(1) {
        let a = (k + 1) as f64;
        let norm = (a * (a + 1.0)).sqrt();
        for i in 0..=k {
            h[(i, k)] = 1.0 / norm;
        }
        h[(k + 1, k)] = -a / norm;
    }
    h
}

/// Columns of term `t` in sum-to-zero coding: in every combination of its nesting
/// factors' levels, the products over its live factors of Helmert contrasts among the
/// levels present there (a live factor's levels present given its own nests: a lost
/// chamber is not contrasted with the chambers that remain), weighted by √n_c. In a
/// balanced layout this is the Kronecker product of Helmert contrasts (live factors) and
/// indicators (nesting factors). Coding a term by its contrasts, not its cells, keeps an
/// interaction assumed absent out of the terms above it: its df pool into the residual.
fn contrast_columns(design: &Design, t: usize) -> DMatrix<f64> {
    use std::collections::BTreeMap;
    let s = &design.layout.structure;
    let grid = design.grid(t);
    let m = design.rows();
    let live: Vec<usize> = grid
        .subscripts
        .iter()
        .zip(&grid.live)
        .filter(|(_, l)| **l)
        .map(|(&f, _)| f)
        .collect();
    let nest: Vec<usize> = grid
        .subscripts
        .iter()
        .zip(&grid.live)
        .filter(|(_, l)| !**l)
        .map(|(&f, _)| f)
        .collect();
    let key = |tuple: &[u64], factors: &mut dyn Iterator<Item = usize>| -> Vec<u64> {
        factors.map(|g| tuple[g]).collect()
    };
    let ancestors = |f: usize| -> Vec<usize> {
        (0..s.factors.len())
            .filter(|&g| s.factors[f].ancestors & (1 << g) != 0)
            .collect()
    };
    // Levels of each live factor present in each combination of its own nests.
    let mut present: Vec<BTreeMap<Vec<u64>, Vec<u64>>> = vec![BTreeMap::new(); live.len()];
    for row in 0..m {
        let tuple = design.row_tuple(row);
        for (k, &f) in live.iter().enumerate() {
            let a = key(tuple, &mut ancestors(f).into_iter());
            let list = present[k].entry(a).or_default();
            if !list.contains(&tuple[f]) {
                list.push(tuple[f]);
            }
        }
    }
    for p in &mut present {
        for list in p.values_mut() {
            list.sort();
        }
    }
    // Column blocks, one per combination of the nesting factors' levels.
    let mut blocks: BTreeMap<Vec<u64>, (usize, Vec<usize>)> = BTreeMap::new();
    let mut width = 0;
    for row in 0..m {
        let tuple = design.row_tuple(row);
        let c = key(tuple, &mut nest.iter().copied());
        if blocks.contains_key(&c) {
            continue;
        }
        let sizes: Vec<usize> = live
            .iter()
            .enumerate()
            .map(|(k, &f)| present[k][&key(tuple, &mut ancestors(f).into_iter())].len() - 1)
            .collect();
        let count: usize = sizes.iter().product();
        blocks.insert(c, (width, sizes));
        width += count;
    }
    let mut helmerts: BTreeMap<usize, DMatrix<f64>> = BTreeMap::new();
    let mut x = DMatrix::zeros(m, width);
    for row in 0..m {
        let tuple = design.row_tuple(row);
        let (offset, sizes) = &blocks[&key(tuple, &mut nest.iter().copied())];
        // Kronecker product of each live factor's contrast row at this cell's level.
        let mut acc = vec![design.row_count(row).sqrt()];
        for (k, &f) in live.iter().enumerate() {
            let list = &present[k][&key(tuple, &mut ancestors(f).into_iter())];
            let at = list.iter().position(|&v| v == tuple[f]).unwrap_or(0);
            let h = helmerts
                .entry(list.len())
                .or_insert_with(|| helmert(list.len()));
            let mut next = Vec::with_capacity(acc.len() * sizes[k]);
            for &a in &acc {
                for j in 0..sizes[k] {
                    next.push(a * h[(at, j)]);
                }
            }
            acc = next;
        }
        for (j, v) in acc.into_iter().enumerate() {
            x[(row, offset + j)] = v;
        }
    }
    x
}

/// Takes the span of `basis` out of `x` twice (classical Gram-Schmidt with
/// re-orthogonalisation).
fn residualise(basis: &[&DMatrix<f64>], x: &mut DMatrix<f64>) {
    for _ in 0..2 {
        for q in basis {
            if q.ncols() == 0 {
                continue;
            }
            let c = q.transpose() * &*x;
            x.gemm(-1.0, q, &c, 1.0);
        }
    }
}

/// Lower Cholesky factor of a symmetric positive definite matrix with pivoting: returns
/// the permutation and the factor of the leading `rank` pivots, stopping at pivots below
/// `floor`.
fn pivoted_cholesky(mut a: DMatrix<f64>, floor: f64) -> (Vec<usize>, DMatrix<f64>) {
    let n = a.nrows();
    let mut perm: Vec<usize> = (0..n).collect();
    let mut rank = n;
    for k in 0..n {
        let (mut best, mut value) = (k, a[(k, k)]);
        for i in k + 1..n {
            if a[(i, i)] > value {
                best = i;
                value = a[(i, i)];
            }
        }
        if value <= floor {
            rank = k;
            break;
        }
        if best != k {
            a.swap_rows(k, best);
            a.swap_columns(k, best);
            perm.swap(k, best);
        }
        let d = a[(k, k)].sqrt();
        a[(k, k)] = d;
        for i in k + 1..n {
            a[(i, k)] /= d;
        }
        // Keep the whole trailing block symmetric: later pivots swap rows and columns.
        for j in k + 1..n {
            let ajk = a[(j, k)];
            if ajk == 0.0 {
                continue;
            }
            for i in k + 1..n {
                let aik = a[(i, k)];
                a[(i, j)] -= aik * ajk;
            }
        }
        for i in k + 1..n {
            a[(k, i)] = a[(i, k)];
        }
    }
    let l = a.view((0, 0), (rank, rank)).lower_triangle();
    (perm, l)
}

/// x L^{-T} for a lower triangular L: the columns of x made orthonormal when L L' = x'x.
fn right_solve_transpose(x: &DMatrix<f64>, l: &DMatrix<f64>) -> DMatrix<f64> {
    // Solve L Y = X' for Y = L^{-1} X', then return Y'.
    let mut y = x.transpose();
    if !blocked::solve_lower(l.as_view(), y.as_view_mut()) {
        return DMatrix::zeros(x.nrows(), l.nrows());
    }
    y.transpose()
}

/// An orthonormal basis of the part of col(x) outside col(basis), found with a
/// rank-revealing (pivoted) Cholesky factorisation of the residual columns' Gram matrix,
/// then one more pass of re-orthogonalisation and Cholesky QR for accuracy.
fn extend(basis: &[&DMatrix<f64>], mut x: DMatrix<f64>) -> DMatrix<f64> {
    let m = x.nrows();
    let scale = x
        .column_iter()
        .map(|c| c.norm_squared())
        .fold(0.0f64, f64::max);
    if scale == 0.0 || x.ncols() == 0 {
        return DMatrix::zeros(m, 0);
    }
    residualise(basis, &mut x);
    let gram = x.transpose() * &x;
    let (perm, l) = pivoted_cholesky(gram, scale * RANK_TOLERANCE * RANK_TOLERANCE);
    let rank = l.nrows();
    if rank == 0 {
        return DMatrix::zeros(m, 0);
    }
    let chosen = DMatrix::from_fn(m, rank, |i, j| x[(i, perm[j])]);
    let mut q = right_solve_transpose(&chosen, &l);
    residualise(basis, &mut q);
    let gram = q.transpose() * &q;
    match blocked::cholesky(gram.clone()) {
        Some(c) => right_solve_transpose(&q, &c),
        None => {
            let (_, l2) = pivoted_cholesky(gram, 0.0);
            if l2.nrows() == rank {
                right_solve_transpose(&q, &l2)
            } else {
                q
            }
        }
    }
}

/// Type III blocks: for every term T the part of the model space orthogonal to every
/// other term's columns, col(X) ⊖ col(X without T), found from one factorisation.
///
/// With U an orthonormal basis of col(X) (the sequential blocks, or every cell when the
/// model is complete) and R = U'X, a vector Uz of the model space is orthogonal to the
/// other terms' columns when R_{-T}'z = 0. Write R = C W with C the Cholesky factor of RR'
/// (so W has orthonormal rows, WW' = I) and w = C'z: the condition is W_{-T}'w = 0, and
/// since W_{-T}W_{-T}' + W_T W_T' = I, exactly the w with ||W_T'w|| = ||w||: the
/// eigenvectors of W_T'W_T with eigenvalue 1, mapped by W_T. The cell term of a complete
/// model, fitted last, is already adjusted for every other term.
fn type3_blocks(
    design: &Design,
    order: &[usize],
    sequential: &[Block],
    basis: &[&DMatrix<f64>],
    full: bool,
) -> Vec<Block> {
    let m = design.rows();
    let residual = design.model.residual();
    let mut out = vec![Block::Empty; residual];
    // Every term's columns side by side, after the intercept's.
    let mut pieces: Vec<DMatrix<f64>> =
        vec![DMatrix::from_fn(m, 1, |r, _| design.row_count(r).sqrt())];
    let mut range = vec![(0usize, 0usize); residual];
    let mut width = 1;
    for &t in order {
        let x = contrast_columns(design, t);
        range[t] = (width, x.ncols());
        width += x.ncols();
        pieces.push(x);
    }
    let mut x = DMatrix::zeros(m, width);
    let mut at = 0;
    for p in &pieces {
        x.view_mut((0, at), (m, p.ncols())).copy_from(p);
        at += p.ncols();
    }
    let u: Option<DMatrix<f64>> = if full {
        None
    } else {
        let r: usize = basis.iter().map(|b| b.ncols()).sum();
        let mut u = DMatrix::zeros(m, r);
        let mut at = 0;
        for b in basis {
            u.view_mut((0, at), (m, b.ncols())).copy_from(*b);
            at += b.ncols();
        }
        Some(u)
    };
    let r_coords = match &u {
        None => x,
        Some(u) => u.transpose() * &x,
    };
    let Some(c) = blocked::cholesky(&r_coords * r_coords.transpose()) else {
        return out;
    };
    let mut w = r_coords;
    if !blocked::solve_lower(c.as_view(), w.as_view_mut()) {
        return out;
    }
    let ct = c.transpose();
    for &t in order {
        if matches!(sequential[t], Block::Rest) {
            out[t] = Block::Rest;
            continue;
        }
        let (start, count) = range[t];
        if count == 0 {
            continue;
        }
        let wt = w.columns(start, count).into_owned();
        let eig = (wt.transpose() * &wt).symmetric_eigen();
        let keep: Vec<usize> = (0..count)
            .filter(|&i| eig.eigenvalues[i] > 1.0 - 1e-10)
            .collect();
        if keep.is_empty() {
            continue;
        }
        let vectors = DMatrix::from_fn(count, keep.len(), |i, j| eig.eigenvectors[(i, keep[j])]);
        let mut z = &wt * vectors;
        if !blocked::solve_upper(ct.as_view(), z.as_view_mut()) {
            continue;
        }
        let v = match &u {
            None => z,
            Some(u) => u * z,
        };
        let q = extend(&[], v);
        out[t] = if q.ncols() == 0 {
            Block::Empty
        } else {
            Block::Basis(q)
        };
    }
    out
}

/// A response summarised by the cells of the layout in one pass: the cell means centred
/// on the weighted grand mean and scaled by √n_c, v_c = √n_c (ȳ_c - ȳ), and the
/// within-cell sum of squares Σ_c Σ_i (y_ci - ȳ_c)².
///
/// Welford's (1962, "Note on a method for calculating corrected sums of squares and
/// products", Technometrics 4:419-420) update, on the responses less the first one (a
/// difference of two doubles within a factor of two of each other is exact, Sterbenz 1974,
/// so a response far from zero loses nothing there): for the n-th observation d of a cell,
/// δ = d - m, m += δ / n, W += δ (d - m). The grand mean of the cell means is corrected
/// once (ȳ += Σ n_c (ȳ_c - ȳ) / N) so that v sums to zero with the weights √n_c to
/// rounding.
struct CellMeans {
    centred: DVector<f64>,
    within: f64,
}

impl CellMeans {
    fn of(design: &Design, y: &[f64]) -> CellMeans {
        debug_assert_eq!(y.len(), design.len());
        let m = design.rows();
        let reference = y.first().copied().unwrap_or(0.0);
        let mut seen = vec![0.0f64; m];
        let mut mean = vec![0.0f64; m];
        let mut within = 0.0;
        for (i, &value) in y.iter().enumerate() {
            let row = design.observation_row(i);
            let d = value - reference;
            seen[row] += 1.0;
            let delta = d - mean[row];
            mean[row] += delta / seen[row];
            within += delta * (d - mean[row]);
        }
        let n: f64 = (0..m).map(|r| design.row_count(r)).sum();
        let weighted = |g: f64| -> f64 {
            (0..m)
                .map(|r| design.row_count(r) * (mean[r] - g))
                .sum::<f64>()
                / n
        };
        let first = weighted(0.0);
        let grand = first + weighted(first);
        let centred = DVector::from_fn(m, |r, _| design.row_count(r).sqrt() * (mean[r] - grand));
        CellMeans { centred, within }
    }
}

impl Fit {
    /// Fits the layout's terms and finds the blocks of its sums of squares.
    pub fn new(design: &Design, sums_of_squares: SumsOfSquares) -> Fit {
        let m = design.rows();
        let n_obs: f64 = (0..m).map(|r| design.row_count(r)).sum();
        let residual = design.model.residual();
        let intercept = DMatrix::from_fn(m, 1, |r, _| (design.row_count(r) / n_obs).sqrt());
        let order = fit_order(design);
        let cell_term = design.cell_term();
        // With no interaction assumed absent, the terms span every cell and the cell term,
        // fitted last, is what the others leave.
        let complete = design.layout.structure.omitted.is_empty();
        let mut sequential: Vec<Block> = vec![Block::Empty; residual];
        let mut df = vec![0u64; residual + 1];
        let mut rank = 1usize;
        // Bases fitted so far, in order.
        let mut fitted: Vec<DMatrix<f64>> = Vec::new();
        for (k, &t) in order.iter().enumerate() {
            let last = k + 1 == order.len();
            if last && cell_term == Some(t) && complete {
                let d = m - rank;
                df[t] = d as u64;
                rank = m;
                sequential[t] = if d == 0 { Block::Empty } else { Block::Rest };
                continue;
            }
            let basis: Vec<&DMatrix<f64>> =
                std::iter::once(&intercept).chain(fitted.iter()).collect();
            let q = extend(&basis, contrast_columns(design, t));
            df[t] = q.ncols() as u64;
            rank += q.ncols();
            if q.ncols() == 0 {
                sequential[t] = Block::Empty;
            } else {
                fitted.push(q.clone());
                sequential[t] = Block::Basis(q);
            }
        }
        let full = rank == m;
        df[residual] = (n_obs as u64).saturating_sub(rank as u64);

        let sequential_df = df.clone();
        let reported = match sums_of_squares {
            SumsOfSquares::Sequential => sequential.clone(),
            SumsOfSquares::Type3 => {
                let basis: Vec<&DMatrix<f64>> =
                    std::iter::once(&intercept).chain(fitted.iter()).collect();
                let out = type3_blocks(design, &order, &sequential, &basis, full);
                for (t, b) in out.iter().enumerate() {
                    df[t] = match b {
                        Block::Basis(q) => q.ncols() as u64,
                        Block::Rest => df[t],
                        Block::Empty => 0,
                    };
                }
                out
            }
        };
        Fit {
            sums_of_squares,
            order,
            df,
            sequential_df,
            intercept,
            sequential,
            reported,
            rank,
            full,
        }
    }

    /// Rank of the model's column space, the intercept included.
    pub fn rank(&self) -> usize {
        self.rank
    }

    /// The sum of squares of every model term (0 for a term with no df) and of the
    /// residual, for a response given in the order of `Design::observations`.
    ///
    /// Every model sum of squares is a projection of the cell means, and the intercept is
    /// in every model, so the projections are taken of the cell means centred on the
    /// weighted grand mean, v_c = √n_c (ȳ_c - ȳ) (see `CellMeans`): the same sums of
    /// squares, without squaring the response's location. Nothing is found as a
    /// difference of totals:
    ///
    /// - a block with a basis Q: ||Q'v||²;
    /// - the cell term fitted last (held implicitly): ||r||², with r = v less its
    ///   projection on the intercept and every sequential block, taken off block by block
    ///   and taken off again when that cancelled most of v (re-orthogonalisation by the
    ///   criterion of Daniel, Gragg, Kaufman and Stewart 1976, "Reorthogonalization and
    ///   stable algorithms for updating the Gram-Schmidt QR factorization", Math. Comp.
    ///   30: repeat while ||r|| falls below ||r_before|| / √2);
    /// - the residual: Σ_c Σ_i (y_ci - ȳ_c)², the within-cell sum of squares, plus ||r||²
    ///   when the model does not span every cell (an interaction assumed absent pools the
    ///   part of the cell means outside the model into the residual).
    pub fn sums_of_squares(&self, design: &Design, y: &[f64]) -> Vec<f64> {
        let cells = CellMeans::of(design, y);
        let v = &cells.centred;
        let ss_of = |q: &DMatrix<f64>| q.tr_mul(v).norm_squared();
        let rest_reported = self.reported.iter().any(|b| matches!(b, Block::Rest));
        let (sequential, outside) = if rest_reported || !self.full {
            self.outside_model(v)
        } else {
            let ss = self
                .sequential
                .iter()
                .map(|b| match b {
                    Block::Basis(q) => ss_of(q),
                    _ => 0.0,
                })
                .collect();
            (ss, 0.0)
        };
        let mut out: Vec<f64> = self
            .reported
            .iter()
            .enumerate()
            .map(|(t, b)| match b {
                Block::Basis(_) if self.sums_of_squares == SumsOfSquares::Sequential => {
                    sequential[t]
                }
                Block::Basis(q) => ss_of(q),
                Block::Rest => outside,
                Block::Empty => 0.0,
            })
            .collect();
        out.push(cells.within + if self.full { 0.0 } else { outside });
        out
    }

    /// The sequential blocks' sums of squares of the centred cell means `v`, and what is
    /// left of v outside the model's sequential blocks and the intercept, ||r||², from an
    /// explicit residual vector (see `sums_of_squares`). Each block's sum of squares is
    /// that of its coefficients on the first pass, taken of what the blocks before it
    /// leave (modified Gram-Schmidt order).
    fn outside_model(&self, v: &DVector<f64>) -> (Vec<f64>, f64) {
        let mut sequential = vec![0.0; self.sequential.len()];
        let mut r = v.clone();
        let mut before = r.norm_squared();
        for pass in 0..2 {
            let c = self.intercept.tr_mul(&r);
            r.gemv(-1.0, &self.intercept, &c, 1.0);
            for (t, b) in self.sequential.iter().enumerate() {
                if let Block::Basis(q) = b {
                    let c = q.tr_mul(&r);
                    if pass == 0 {
                        sequential[t] = c.norm_squared();
                    }
                    r.gemv(-1.0, q, &c, 1.0);
                }
            }
            let after = r.norm_squared();
            if after >= 0.5 * before {
                break;
            }
            before = after;
        }
        (sequential, r.norm_squared())
    }

    /// Expected mean squares by synthesis (see the module notes), every coefficient
    /// E(SS)/df; entries smaller than `1e-10` of the row's largest are dropped.
    pub fn ems(&self, design: &Design) -> SynthesisEms {
        let model = &design.model;
        let residual = model.residual();
        let n_obs: f64 = (0..design.rows()).map(|r| design.row_count(r)).sum();
        // Components: every model term, and σ² (the residual's index).
        let of_block = |q: &DMatrix<f64>| -> Vec<f64> {
            let mut v: Vec<f64> = (0..residual).map(|u| component_ss(design, u, q)).collect();
            v.push(q.ncols() as f64);
            v
        };
        let intercept = of_block(&self.intercept);
        let sequential: Vec<Option<Vec<f64>>> = self
            .sequential
            .iter()
            .map(|b| match b {
                Block::Basis(q) => Some(of_block(q)),
                _ => None,
            })
            .collect();
        // What each component's columns sum to over the whole model space: N for a random
        // term's incidence (every observation has one 1), N Π(1 - 1/n) for a fixed term's
        // contrasts, and the rank for σ².
        let totals: Vec<f64> = (0..=residual)
            .map(|u| {
                if u == residual {
                    self.rank as f64
                } else if model.kinds[u] == Kind::Fixed {
                    let g = design.grid(u);
                    g.sizes
                        .iter()
                        .zip(&g.live)
                        .filter(|(_, l)| **l)
                        .fold(n_obs, |acc, (&n, _)| acc * (1.0 - 1.0 / n as f64))
                } else {
                    n_obs
                }
            })
            .collect();
        let explained: Vec<f64> = (0..=residual)
            .map(|u| intercept[u] + sequential.iter().flatten().map(|row| row[u]).sum::<f64>())
            .collect();
        let rest: Vec<f64> = (0..=residual)
            .map(|u| (totals[u] - explained[u]).max(0.0))
            .collect();
        let mut rows: Vec<Vec<(usize, f64)>> = Vec::with_capacity(residual + 1);
        for (t, synthesised) in sequential.iter().enumerate() {
            let ss: Option<Vec<f64>> = match &self.reported[t] {
                Block::Basis(q) => Some(match (self.sums_of_squares, synthesised) {
                    (SumsOfSquares::Sequential, Some(v)) => v.clone(),
                    _ => of_block(q),
                }),
                Block::Rest => Some(rest.clone()),
                Block::Empty => None,
            };
            rows.push(match ss {
                Some(ss) if self.df[t] > 0 => clean(&ss, self.df[t] as f64),
                _ => Vec::new(),
            });
        }
        // The residual: what the model space leaves of every component. Random terms of
        // the model are inside it; with interactions omitted, σ² alone remains.
        let mut left: Vec<f64> = (0..=residual)
            .map(|u| {
                if u == residual || model.kinds[u] == Kind::Fixed {
                    0.0
                } else {
                    (n_obs - totals_in_model(self.full, &explained, &rest, u)).max(0.0)
                }
            })
            .collect();
        left[residual] = self.df[residual] as f64;
        rows.push(if self.df[residual] > 0 {
            clean(&left, self.df[residual] as f64)
        } else {
            Vec::new()
        });
        SynthesisEms { rows }
    }
}

fn totals_in_model(full: bool, explained: &[f64], rest: &[f64], u: usize) -> f64 {
    if full {
        explained[u] + rest[u]
    } else {
        explained[u]
    }
}

/// E(SS) / df, dropping entries that are rounding noise.
fn clean(ss: &[f64], df: f64) -> Vec<(usize, f64)> {
    let largest = ss.iter().fold(0.0f64, |a, &x| a.max(x.abs()));
    ss.iter()
        .enumerate()
        .filter(|(_, x)| x.abs() > 1e-10 * largest.max(1.0))
        .map(|(u, &x)| (u, x / df))
        .collect()
}

/// The synthesis of one component over a block Q: ||Q'Z_U||² for a random term's
/// incidence, ||Q'X_F C_F||² for a fixed term's contrasts. Both start by summing the rows
/// of √n_c Q within each of the term's cells; a fixed term's sums are then centred along
/// each live factor (C_F C_F' is that centring).
fn component_ss(design: &Design, u: usize, q: &DMatrix<f64>) -> f64 {
    let grid = design.grid(u);
    let cells = grid.cells();
    let d = q.ncols();
    let m = design.rows();
    let mut sums = vec![0.0; cells * d];
    for j in 0..d {
        let column = q.column(j);
        let out = &mut sums[j * cells..(j + 1) * cells];
        for row in 0..m {
            out[design.cell(u, row)] += design.row_count(row).sqrt() * column[row];
        }
    }
    if design.kind(u) == Kind::Fixed {
        for j in 0..d {
            centre_live(
                &mut sums[j * cells..(j + 1) * cells],
                &grid.sizes,
                &grid.live,
            );
        }
    }
    sums.iter().map(|x| x * x).sum()
}

/// Subtracts the mean along every live dimension of an array laid out in mixed radix
/// (the first dimension slowest).
pub(crate) fn centre_live(values: &mut [f64], sizes: &[usize], live: &[bool]) {
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
