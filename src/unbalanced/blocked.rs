//! Blocked Cholesky factorisation and triangular solves over nalgebra matrices.
//!
//! The arithmetic is that of nalgebra's own routines, arranged recursively so that almost
//! all of it is matrix products, which nalgebra hands to a cache-blocked kernel
//! (matrixmultiply); nalgebra's triangular solves and Cholesky factorisation go one
//! column at a time and dominate the type III synthesis of a large layout otherwise.
//! This is the textbook recursive formulation (e.g. Golub and Van Loan, Matrix
//! Computations, the block Cholesky and block forward substitution; from memory):
//!
//! - L X = B:  X₁ = L₁₁⁻¹ B₁, then X₂ = L₂₂⁻¹ (B₂ - L₂₁ X₁);
//! - U X = B:  X₂ = U₂₂⁻¹ B₂, then X₁ = U₁₁⁻¹ (B₁ - U₁₂ X₂);
//! - A = L L': L₁₁ = chol(A₁₁), L₂₁ = A₂₁ L₁₁⁻ᵀ, L₂₂ = chol(A₂₂ - L₂₁ L₂₁').

use nalgebra::{DMatrix, DMatrixView, DMatrixViewMut};

/// Below this size the unblocked routines are as fast.
const BLOCK: usize = 64;

/// Solves L X = B in place for a lower triangular L; false when L is singular.
pub fn solve_lower(l: DMatrixView<f64>, mut b: DMatrixViewMut<f64>) -> bool {
    let n = l.nrows();
    if n <= BLOCK {
        return l.solve_lower_triangular_mut(&mut b);
    }
    let h = n / 2;
    let (mut top, mut bottom) = b.rows_range_pair_mut(0..h, h..);
    if !solve_lower(l.view((0, 0), (h, h)), top.as_view_mut()) {
        return false;
    }
    bottom.gemm(-1.0, &l.view((h, 0), (n - h, h)), &top, 1.0);
    solve_lower(l.view((h, h), (n - h, n - h)), bottom.as_view_mut())
}

/// Solves U X = B in place for an upper triangular U; false when U is singular.
pub fn solve_upper(u: DMatrixView<f64>, mut b: DMatrixViewMut<f64>) -> bool {
    let n = u.nrows();
    if n <= BLOCK {
        return u.solve_upper_triangular_mut(&mut b);
    }
    let h = n / 2;
    let (mut top, mut bottom) = b.rows_range_pair_mut(0..h, h..);
    if !solve_upper(u.view((h, h), (n - h, n - h)), bottom.as_view_mut()) {
        return false;
    }
    top.gemm(-1.0, &u.view((0, h), (h, n - h)), &bottom, 1.0);
    solve_upper(u.view((0, 0), (h, h)), top.as_view_mut())
}

/// The lower Cholesky factor of a symmetric positive definite matrix (only its lower
/// triangle is read); None when it is not positive definite.
pub fn cholesky(mut a: DMatrix<f64>) -> Option<DMatrix<f64>> {
    if cholesky_in_place(a.as_view_mut()) {
        Some(a.lower_triangle())
    } else {
        None
    }
}

fn cholesky_in_place(mut a: DMatrixViewMut<f64>) -> bool {
    let n = a.nrows();
    if n <= BLOCK {
        return match a.clone_owned().cholesky() {
            Some(c) => {
                a.copy_from(&c.l());
                true
            }
            None => false,
        };
    }
    let h = n / 2;
    let (mut left, mut right) = a.columns_range_pair_mut(0..h, h..);
    let (mut a11, mut a21) = left.rows_range_pair_mut(0..h, h..);
    if !cholesky_in_place(a11.as_view_mut()) {
        return false;
    }
    // L₂₁' = L₁₁⁻¹ A₂₁'.
    let mut l21t = a21.transpose();
    if !solve_lower(a11.as_view(), l21t.as_view_mut()) {
        return false;
    }
    a21.copy_from(&l21t.transpose());
    let mut a22 = right.rows_range_mut(h..);
    a22.gemm(-1.0, &a21, &l21t, 1.0);
    cholesky_in_place(a22.as_view_mut())
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A reproducible well-conditioned symmetric positive definite matrix: B B' + n I.
    fn spd(n: usize) -> DMatrix<f64> {
        let b = DMatrix::from_fn(n, n, |i, j| ((i * 7 + j * 13) % 17) as f64 / 17.0 - 0.5);
        &b * b.transpose() + DMatrix::identity(n, n) * n as f64
    }

    // Reference: nalgebra's unblocked routines, on sizes across the block boundary.
    #[test]
    fn blocked_routines_agree_with_the_unblocked_ones() {
        for n in [1, 5, 64, 65, 130, 301] {
            let a = spd(n);
            let ours = cholesky(a.clone()).expect("positive definite");
            let theirs = a.clone().cholesky().expect("positive definite").l();
            assert!(
                (&ours - &theirs).amax() < 1e-9 * a.amax(),
                "cholesky, n = {n}"
            );

            let b = DMatrix::from_fn(n, 3, |i, j| (i + 2 * j) as f64 - 4.0);
            let mut x = b.clone();
            assert!(solve_lower(theirs.as_view(), x.as_view_mut()));
            let reference = theirs.solve_lower_triangular(&b).unwrap();
            assert!((&x - &reference).amax() < 1e-9 * (1.0 + reference.amax()));

            let upper = theirs.transpose();
            let mut x = b.clone();
            assert!(solve_upper(upper.as_view(), x.as_view_mut()));
            let reference = upper.solve_upper_triangular(&b).unwrap();
            assert!((&x - &reference).amax() < 1e-9 * (1.0 + reference.amax()));
        }
    }

    #[test]
    fn a_matrix_that_is_not_positive_definite_is_refused() {
        let mut a = spd(100);
        a[(80, 80)] = -1.0e6;
        assert!(cholesky(a).is_none());
    }
}
