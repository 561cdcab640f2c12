//! The nodal core every analysis shares: node merging for wires and shorts, and dense
//! Gaussian elimination with partial pivoting on the handful of nodes of a stage or a
//! group, in real numbers (DC) or complex numbers (AC at any s).
//!
//! Matrices are row-major slices of `m × m` entries, so the caller chooses where they
//! live: a fixed array on the stack for one stage's sub-circuit (no allocation on the
//! evaluation path), a buffer allocated once for a whole group or network.
//!
//! Why hand-written: the systems have 2 to 12 unknowns and are solved millions of
//! times in `spread`; a general dense library allocates per matrix or needs sizes at
//! compile time. The elimination is the textbook one (Golub and Van Loan, "Matrix
//! Computations", algorithm 3.4.1, from memory); `tests` check it against nalgebra.
//! A whole chain's network (thousands of unknowns, each coupled only to its
//! neighbours) is solved in band storage ([`band`]), by the same elimination on the
//! band's entries; the small dense solve keeps its own loop, which the evaluation
//! benchmark measured about 3 % faster than the band routine at full width.

pub mod band;
pub mod merge;

pub use band::{band_ordering, Band, Numbering};
pub use merge::Merge;

use num_complex::Complex64;
use std::ops::{Add, AddAssign, Div, Mul, Neg, Sub, SubAssign};

/// A number the core computes in: f64 for DC, Complex64 for AC.
pub trait Scalar:
    Copy
    + PartialEq
    + Add<Output = Self>
    + Sub<Output = Self>
    + Mul<Output = Self>
    + Div<Output = Self>
    + Neg<Output = Self>
    + AddAssign
    + SubAssign
    + std::fmt::Debug
{
    const ZERO: Self;
    const ONE: Self;
    /// Size used to choose a pivot (|x| for real, |z|² for complex: no square root).
    fn size(self) -> f64;
    fn is_finite(self) -> bool;
    fn from_real(x: f64) -> Self;
}

impl Scalar for f64 {
    const ZERO: f64 = 0.0;
    const ONE: f64 = 1.0;
    fn size(self) -> f64 {
        self.abs()
    }
    fn is_finite(self) -> bool {
        f64::is_finite(self)
    }
    fn from_real(x: f64) -> f64 {
        x
    }
}

impl Scalar for Complex64 {
    const ZERO: Complex64 = Complex64::new(0.0, 0.0);
    const ONE: Complex64 = Complex64::new(1.0, 0.0);
    fn size(self) -> f64 {
        self.norm_sqr()
    }
    fn is_finite(self) -> bool {
        self.re.is_finite() && self.im.is_finite()
    }
    fn from_real(x: f64) -> Complex64 {
        Complex64::new(x, 0.0)
    }
}

/// Add conductance (admittance) `g` between unknowns `p` and `q` of the `m × m`
/// matrix `y`; `None` is a node held fixed (ground, a rail), whose row and column are
/// not in the system.
#[inline]
pub fn stamp_between<T: Scalar>(y: &mut [T], m: usize, p: Option<usize>, q: Option<usize>, g: T) {
    stamp_at(y, |i, j| i * m + j, p, q, g);
}

/// [`stamp_between`] in any storage: `at(i, j)` is where entry (i, j) lives in `y`.
#[inline]
pub(crate) fn stamp_at<T: Scalar>(
    y: &mut [T],
    at: impl Fn(usize, usize) -> usize,
    p: Option<usize>,
    q: Option<usize>,
    g: T,
) {
    if let Some(i) = p {
        y[at(i, i)] += g;
        if let Some(j) = q {
            y[at(i, j)] -= g;
            y[at(j, i)] -= g;
        }
    }
    if let Some(j) = q {
        y[at(j, j)] += g;
    }
}

/// The row with the largest entry in column `col`: the diagonal or one of `others`
/// (partial pivoting), entry (i, j) at `at(i, j)`. `None` when they are all zero or
/// not finite.
#[inline]
fn pivot_row<T: Scalar>(
    a: &[T],
    at: impl Fn(usize, usize) -> usize,
    col: usize,
    others: std::ops::Range<usize>,
) -> Option<usize> {
    let mut pivot = col;
    let mut best = a[at(col, col)].size();
    for row in others {
        let s = a[at(row, col)].size();
        if s > best {
            best = s;
            pivot = row;
        }
    }
    (best != 0.0 && best.is_finite()).then_some(pivot)
}

/// Solve `a·x = rhs` for the `m × m` row-major `a`; the solution replaces `rhs` and `a`
/// is overwritten. `None` when `a` is singular or the solution is not finite.
pub fn solve_in_place<T: Scalar>(a: &mut [T], m: usize, rhs: &mut [T]) -> Option<()> {
    for col in 0..m {
        let pivot = pivot_row(a, |i, j| i * m + j, col, col + 1..m)?;
        if pivot != col {
            for k in 0..m {
                a.swap(col * m + k, pivot * m + k);
            }
            rhs.swap(col, pivot);
        }
        let inv = T::ONE / a[col * m + col];
        for row in col + 1..m {
            let f = a[row * m + col] * inv;
            if f == T::ZERO {
                continue;
            }
            for k in col + 1..m {
                let v = a[col * m + k];
                a[row * m + k] -= f * v;
            }
            let r = rhs[col];
            rhs[row] -= f * r;
        }
    }
    for row in (0..m).rev() {
        let mut acc = rhs[row];
        for k in row + 1..m {
            acc -= a[row * m + k] * rhs[k];
        }
        rhs[row] = acc / a[row * m + row];
    }
    rhs.iter().all(|x| x.is_finite()).then_some(())
}

/// Eliminate unknowns `keep..m` of the `m × m` row-major `a` (Kron reduction, the
/// Schur complement): afterwards the top-left `keep × keep` block, read with stride
/// `m`, is the matrix of the kept unknowns with the others solved out. Pivots are
/// chosen among the eliminated rows. `None` when the eliminated block is singular.
pub fn eliminate_in_place<T: Scalar>(a: &mut [T], m: usize, keep: usize) -> Option<()> {
    eliminate_strided(a, m, m, keep)
}

/// [`eliminate_in_place`] on the top-left `m × m` block of a row-major matrix whose
/// rows are `stride` entries long (the rest of each row is ignored).
pub fn eliminate_strided<T: Scalar>(
    a: &mut [T],
    stride: usize,
    m: usize,
    keep: usize,
) -> Option<()> {
    if m == keep + 1 {
        // One node to eliminate (a bipolar stage's emitter, the common case): no pivot
        // to choose, Y'_ij = Y_ij − Y_i,k·Y_k,j / Y_k,k written out.
        let k = keep;
        let d = a[k * stride + k];
        let size = d.size();
        if size == 0.0 || !size.is_finite() {
            return None;
        }
        let inv = T::ONE / d;
        for row in 0..k {
            let f = a[row * stride + k] * inv;
            for col in 0..k {
                let v = a[k * stride + col];
                a[row * stride + col] -= f * v;
            }
        }
        return Some(());
    }
    for col in (keep..m).rev() {
        // Pivot among the rows still to be eliminated (keep..=col).
        let pivot = pivot_row(a, |i, j| i * stride + j, col, keep..col)?;
        if pivot != col {
            for k in 0..m {
                a.swap(col * stride + k, pivot * stride + k);
            }
        }
        // Y'_ij = Y_ij − Y_i,col·Y_col,j / Y_col,col for the rows and columns left.
        let inv = T::ONE / a[col * stride + col];
        for row in 0..col {
            let f = a[row * stride + col] * inv;
            if f == T::ZERO {
                continue;
            }
            for k in 0..col {
                let v = a[col * stride + k];
                a[row * stride + k] -= f * v;
            }
        }
    }
    Some(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn solve_matches_a_hand_solution() {
        // [[2, 1], [1, 3]]·x = [3, 5] ⇒ x = [0.8, 1.4] (by hand, Cramer's rule).
        let mut a = [2.0, 1.0, 1.0, 3.0];
        let mut b = [3.0, 5.0];
        solve_in_place(&mut a, 2, &mut b).unwrap();
        assert!((b[0] - 0.8).abs() < 1e-15 && (b[1] - 1.4).abs() < 1e-15);
    }

    #[test]
    fn a_system_that_needs_a_row_swap() {
        // Zero on the first pivot; the solution is checked by substituting it back
        // (the definition of a solution).
        let a0 = [0.0, 2.0, 1.0, 1.0, 1.0, 0.0, 3.0, 0.0, 1.0];
        let b0 = [3.0, 2.0, 4.0];
        let (mut a, mut x) = (a0, b0);
        solve_in_place(&mut a, 3, &mut x).unwrap();
        for r in 0..3 {
            let s: f64 = (0..3).map(|k| a0[r * 3 + k] * x[k]).sum();
            assert!((s - b0[r]).abs() < 1e-12);
        }
    }

    #[test]
    fn singular_is_refused() {
        let mut a = [1.0, 2.0, 2.0, 4.0];
        let mut b = [1.0, 1.0];
        assert!(solve_in_place(&mut a, 2, &mut b).is_none());
    }

    #[test]
    fn kron_reduction_of_a_resistor_chain() {
        // Three nodes: 1 Ω from node 0 to node 2, 2 Ω from node 2 to node 1, node 2
        // eliminated: what remains is 3 Ω between 0 and 1 (series resistors, Ohm's law).
        let mut y = [0.0; 9];
        stamp_between(&mut y, 3, Some(0), Some(2), 1.0);
        stamp_between(&mut y, 3, Some(2), Some(1), 0.5);
        eliminate_in_place(&mut y, 3, 2).unwrap();
        let g = 1.0 / 3.0;
        assert!((y[0] - g).abs() < 1e-15 && (y[1] + g).abs() < 1e-15);
        assert!((y[3] + g).abs() < 1e-15 && (y[4] - g).abs() < 1e-15);
    }
}
