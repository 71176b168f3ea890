//! The small dense solve each MPRK stage needs, on the stack.
//!
//! Gaussian elimination with partial pivoting on an `N × N` array: `N³/3`
//! multiply-adds, no heap, loops bounded by `N` only. The Patankar matrices
//! are M-matrices (positive diagonal, non-positive off-diagonal, diagonally
//! dominant in mass-weighted columns), for which elimination is stable even
//! without pivoting; pivoting costs little and covers co-reactant entries.

use crate::Scalar;

/// Why a solve could not be done.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(crate) struct Singular;

/// Swap rows `i` and `j` element by element (`<[T]>::swap` on whole rows
/// goes through `memmove` on the Cortex-M4F, 1.5 KiB of image for this).
fn swap_rows<S: Scalar, const N: usize>(a: &mut [[S; N]; N], i: usize, j: usize) {
    if i >= N || j >= N {
        return;
    }
    for k in 0..N {
        let t = a[i][k];
        a[i][k] = a[j][k];
        a[j][k] = t;
    }
}

/// Solve `a · x = b` in place for the leading `m × m` block of `a` and the
/// first `m` entries of `b` (`m ≤ N`; the rest is neither read nor
/// written): on success `b[..m]` holds `x`. `a` is destroyed.
pub(crate) fn solve<S: Scalar, const N: usize>(
    a: &mut [[S; N]; N],
    b: &mut [S; N],
    m: usize,
) -> Result<(), Singular> {
    let m = m.min(N);
    for col in 0..m {
        // Pivot: largest magnitude in this column at or below the diagonal.
        let mut piv = col;
        let mut best = a[col][col].abs();
        for row in col + 1..m {
            let m = a[row][col].abs();
            if m > best {
                best = m;
                piv = row;
            }
        }
        if !(best > S::ZERO) || !best.is_finite() {
            return Err(Singular);
        }
        if piv != col {
            swap_rows(a, piv, col);
            b.swap(piv, col);
        }
        let d = a[col][col];
        for row in col + 1..m {
            let f = a[row][col] / d;
            if f != S::ZERO {
                for k in col..m {
                    let t = a[col][k];
                    a[row][k] -= f * t;
                }
                let t = b[col];
                b[row] -= f * t;
            }
        }
    }
    // Back substitution.
    for row in (0..m).rev() {
        let mut s = b[row];
        for k in row + 1..m {
            s -= a[row][k] * b[k];
        }
        let x = s / a[row][row];
        if !x.is_finite() {
            return Err(Singular);
        }
        b[row] = x;
    }
    Ok(())
}

/// Solve `a · X = b` for a matrix right-hand side, in place, on the leading
/// `m × m` block of `a` and the first `m` rows of `b` (all `N` columns;
/// `m ≤ N`, the other rows are neither read nor written): on success
/// `b[..m]` holds `X`. `a` is destroyed. Partial pivoting, `m³/3 + m²·N`
/// multiply-adds.
///
/// The same elimination as [`solve`], kept separate on purpose: the vector
/// form runs in every Patankar stage on the gateway, and a one-column
/// matrix there would add copies to the hottest loop. Here `a` is factored
/// first (its rows and `b`'s exchanged as the pivots ask, the multipliers
/// kept below the diagonal), then each column of `b` is eliminated and
/// back-substituted on its own, in registers. Every entry of `X` goes
/// through the same operations in the same order as when `b`'s rows are
/// updated along with `a`'s (a row's multipliers travel with it through
/// later exchanges, and the pivot row of a step is final), so the result
/// is the same to the bit.
pub(crate) fn solve_matrix<S: Scalar, const N: usize>(
    a: &mut [[S; N]; N],
    b: &mut [[S; N]; N],
    m: usize,
) -> Result<(), Singular> {
    let m = m.min(N);
    for col in 0..m {
        let mut piv = col;
        let mut best = a[col][col].abs();
        for row in col + 1..m {
            let x = a[row][col].abs();
            if x > best {
                best = x;
                piv = row;
            }
        }
        if !(best > S::ZERO) || !best.is_finite() {
            return Err(Singular);
        }
        if piv != col {
            swap_rows(a, piv, col);
            swap_rows(b, piv, col);
        }
        let d = a[col][col];
        for row in col + 1..m {
            let f = a[row][col] / d;
            // The multiplier, for the right-hand sides (the eliminated
            // entry itself is never read again).
            a[row][col] = f;
            if f != S::ZERO {
                for k in col + 1..m {
                    let t = a[col][k];
                    a[row][k] -= f * t;
                }
            }
        }
    }
    // Each right-hand column: elimination, then back substitution.
    // Non-finite results are caught together at the end: `x·0` is ±0 for a
    // finite `x` and NaN otherwise, so `nan` is NaN exactly when some entry
    // is not finite (on failure `b` is garbage, as before).
    let mut nan = S::ZERO;
    for c in 0..N {
        let mut x = [S::ZERO; N];
        for (xr, row) in x.iter_mut().zip(b.iter()).take(m) {
            *xr = row[c];
        }
        for col in 0..m {
            for row in col + 1..m {
                let f = a[row][col];
                if f != S::ZERO {
                    let t = x[col];
                    x[row] -= f * t;
                }
            }
        }
        for row in (0..m).rev() {
            let mut s = x[row];
            for k in row + 1..m {
                s -= a[row][k] * x[k];
            }
            let v = s / a[row][row];
            nan += v * S::ZERO;
            x[row] = v;
        }
        for (xr, row) in x.iter().zip(b.iter_mut()).take(m) {
            row[c] = *xr;
        }
    }
    if nan.is_finite() {
        Ok(())
    } else {
        Err(Singular)
    }
}

/// A square matrix of zeros for scratch work, filled with `−0` rather than
/// `+0`. The two are the same in every sum and product the kernel forms
/// (`−0 + x = x`, and a zero stays zero), but an all-zero-bits array is
/// cleared by a call to `memclr`, which on the Cortex-M4F cost 60–80
/// instructions per matrix, while `−0` is stored inline (measured with
/// kernel/firmware/profile.sh: 114 of the reference tick's ~1,500
/// instructions). Use it only where the sign of a zero cannot matter.
#[inline(always)]
pub(crate) fn zeros<S: Scalar, const N: usize>() -> [[S; N]; N] {
    [[-S::ZERO; N]; N]
}

/// `a · b` for square matrices.
pub(crate) fn mat_mul<S: Scalar, const N: usize>(a: &[[S; N]; N], b: &[[S; N]; N]) -> [[S; N]; N] {
    let mut out = zeros();
    for i in 0..N {
        for k in 0..N {
            let aik = a[i][k];
            if aik != S::ZERO {
                for j in 0..N {
                    out[i][j] += aik * b[k][j];
                }
            }
        }
    }
    out
}

/// `a · b` for an `a` whose rows from `m` on are rows of the identity
/// (the observer's transition: its bias states are random walks). The
/// first `m` rows are formed as [`mat_mul`] forms them; the others are
/// `b`'s rows, which is what [`mat_mul`] gives there bit for bit (it skips
/// the zero entries, and `−0 + 1·x = x`), without the `N²` multiply-adds
/// and zero tests. Only for such an `a`.
pub(crate) fn mat_mul_identity_tail<S: Scalar, const N: usize>(
    a: &[[S; N]; N],
    b: &[[S; N]; N],
    m: usize,
) -> [[S; N]; N] {
    let m = m.min(N);
    let mut out = *b;
    for (out_row, a_row) in out.iter_mut().zip(a.iter()).take(m) {
        // A row at a time in a local (registers on the Cortex-M4F, where
        // the matrix in memory costs a load and a store per term).
        let mut row = [-S::ZERO; N];
        for (&aik, b_row) in a_row.iter().zip(b.iter()) {
            if aik != S::ZERO {
                for (x, &bkj) in row.iter_mut().zip(b_row.iter()) {
                    *x += aik * bkj;
                }
            }
        }
        *out_row = row;
    }
    out
}

/// [`left_multiply`] for an `a` whose rows from `m` on are rows of the
/// identity: rows from `m` on keep their values, as `+0 + x` — what
/// [`left_multiply`]'s sum `+0 + Σ a_ik·b_kj` gives there bit for bit for
/// finite entries (a `−0` becomes `+0`) — without the `N²` multiply-adds.
/// Only for such an `a`.
pub(crate) fn left_multiply_identity_tail<S: Scalar, const N: usize>(
    a: &[[S; N]; N],
    b: &mut [[S; N]; N],
    m: usize,
) {
    let m = m.min(N);
    for j in 0..N {
        let mut col = [S::ZERO; N];
        for (c, row) in col.iter_mut().zip(b.iter()) {
            *c = row[j];
        }
        for (row_b, row_a) in b.iter_mut().zip(a.iter()).take(m) {
            let mut x = S::ZERO;
            for (&aik, &ck) in row_a.iter().zip(col.iter()) {
                x += aik * ck;
            }
            row_b[j] = x;
        }
        for row_b in b.iter_mut().skip(m) {
            row_b[j] = S::ZERO + row_b[j];
        }
    }
}

/// `b ← a · b` in place, one column at a time (column `j` of the product
/// needs only column `j` of `b`): the same sums as [`mat_mul`], without a
/// second matrix to copy back. The general form of
/// [`left_multiply_identity_tail`], kept as its reference in the tests.
#[cfg(test)]
pub(crate) fn left_multiply<S: Scalar, const N: usize>(a: &[[S; N]; N], b: &mut [[S; N]; N]) {
    for j in 0..N {
        let mut col = [S::ZERO; N];
        for (c, row) in col.iter_mut().zip(b.iter()) {
            *c = row[j];
        }
        for (row_b, row_a) in b.iter_mut().zip(a.iter()) {
            let mut x = S::ZERO;
            for (&aik, &ck) in row_a.iter().zip(col.iter()) {
                x += aik * ck;
            }
            row_b[j] = x;
        }
    }
}

/// True when the symmetric matrix `p` is positive definite beyond rounding
/// and has only finite entries: in its `L·D·Lᵀ` factorisation every pivot
/// must exceed `16ε` times its diagonal entry, so that a matrix the working
/// precision cannot tell from singular is not passed (a plain `f32`
/// factorisation accepts matrices whose exact one fails). The `LDLᵀ` form
/// needs no square root (a software routine on the Cortex-M4F).
/// `N³/6` multiply-adds, no allocation.
///
/// Non-finite entries need no test of their own: an infinite or NaN entry
/// at or below the diagonal reaches a later pivot (through `l` and `d`) as
/// ±∞ or NaN, and every pivot must be finite and positive.
pub(crate) fn is_positive_definite<S: Scalar, const N: usize>(p: &[[S; N]; N]) -> bool {
    let margin = S::of(16.0) * S::EPSILON;
    // One scratch matrix holds both factors: below the diagonal the unit
    // lower triangle, m[i][k] = l_ik; above it m[k][i] = l_ik·d_k.
    let mut m: [[S; N]; N] = zeros();
    for j in 0..N {
        let mut dj = p[j][j];
        for k in 0..j {
            dj -= m[j][k] * m[k][j];
        }
        if !(dj > margin * p[j][j]) || !(dj > S::ZERO) || !dj.is_finite() {
            return false;
        }
        let inv = S::ONE / dj;
        for i in j + 1..N {
            let mut s = p[i][j];
            for k in 0..j {
                s -= m[i][k] * m[k][j];
            }
            m[j][i] = s;
            m[i][j] = s * inv;
        }
    }
    true
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn solves_a_pivoting_system() {
        // Hand-checked: x = (1, 2, 3).
        let mut a = [[0.0f64, 2.0, 1.0], [1.0, 1.0, 1.0], [2.0, 1.0, 0.0]];
        let mut b = [7.0, 6.0, 4.0];
        solve(&mut a, &mut b, 3).unwrap();
        for (x, e) in b.iter().zip([1.0, 2.0, 3.0]) {
            assert!((x - e).abs() < 1e-14);
        }
    }

    #[test]
    fn matrix_solve_inverts_and_cholesky_tells_definiteness() {
        // A · A⁻¹ = I for a hand-made well-conditioned matrix.
        let a0 = [[4.0f64, 1.0, 0.5], [1.0, 3.0, 0.2], [0.5, 0.2, 2.0]];
        let mut a = a0;
        let mut x = [[1.0, 0.0, 0.0], [0.0, 1.0, 0.0], [0.0, 0.0, 1.0]];
        solve_matrix(&mut a, &mut x, 3).unwrap();
        let i = mat_mul(&a0, &x);
        for r in 0..3 {
            for c in 0..3 {
                let e = if r == c { 1.0 } else { 0.0 };
                assert!((i[r][c] - e).abs() < 1e-14);
            }
        }
        assert!(is_positive_definite(&a0));
        // Eigenvalues 3 and −1: indefinite.
        assert!(!is_positive_definite(&[[1.0f64, 2.0], [2.0, 1.0]]));
        assert!(!is_positive_definite(&[[f32::NAN, 0.0], [0.0, 1.0]]));
    }

    #[test]
    fn in_place_left_product_and_scratch_zeros_match_the_plain_ones() {
        let a = [[4.0f64, 1.0, 0.0], [1.0, 3.0, 0.2], [0.5, 0.0, 2.0]];
        let b0 = [[1.0f64, -2.0, 0.25], [0.0, 3.0, 1.0], [7.0, 0.5, -1.0]];
        let mut b = b0;
        left_multiply(&a, &mut b);
        assert_eq!(b, mat_mul(&a, &b0));
        // −0 scratch: equal to +0, and adding to it gives the same bits.
        let z: [[f32; 2]; 2] = zeros();
        assert!(z.iter().flatten().all(|&x| x == 0.0));
        assert_eq!((z[0][0] + 1.5f32).to_bits(), 1.5f32.to_bits());
    }

    /// The identity-tail products give the general products' bits, signed
    /// zeros included, for an `a` with identity rows from `m` on (a
    /// `−0`-filled scratch start, as the observer's transition has).
    #[test]
    fn identity_tail_products_match_the_general_ones_bit_for_bit() {
        let bits = |m: &[[f32; 4]; 4]| m.map(|r| r.map(f32::to_bits));
        let mut a: [[f32; 4]; 4] = zeros();
        for (i, row) in a.iter_mut().enumerate() {
            row[i] = 1.0;
        }
        a[0] = [0.9, -0.0, 1e-3, -2e-4];
        a[1] = [3e-2, 0.7, 0.0, 5e-5];
        let b = [
            [2.0f32, -0.0, 1e-7, 3.5],
            [-0.0, 1.25, -4e-3, 0.0],
            [1e-7, -4e-3, 0.5, -0.0],
            [3.5, 0.0, -0.0, 9.0],
        ];
        assert_eq!(
            bits(&mat_mul_identity_tail(&a, &b, 2)),
            bits(&mat_mul(&a, &b))
        );
        let mut general = b;
        left_multiply(&a, &mut general);
        let mut tail = b;
        left_multiply_identity_tail(&a, &mut tail, 2);
        assert_eq!(bits(&tail), bits(&general));
        // The general product turns −0 into +0 in identity rows too.
        assert_eq!(general[3][2].to_bits(), 0.0f32.to_bits());
    }

    #[test]
    fn reports_singular_and_nan() {
        // The matrix solve: an overflowing back substitution and a NaN
        // right-hand side are caught, a singular pivot too.
        let mut a = [[1e-30f32, 0.0], [0.0, 1.0]];
        let mut x = [[1e30f32, 0.0], [0.0, 1.0]];
        assert_eq!(solve_matrix(&mut a, &mut x, 2), Err(Singular));
        let mut a = [[2.0f32, 0.0], [0.0, 1.0]];
        let mut x = [[1.0f32, f32::NAN], [0.0, 1.0]];
        assert_eq!(solve_matrix(&mut a, &mut x, 2), Err(Singular));
        let mut a = [[1.0f32, 2.0], [2.0, 4.0]];
        let mut x = [[1.0f32, 0.0], [0.0, 1.0]];
        assert_eq!(solve_matrix(&mut a, &mut x, 2), Err(Singular));
        let mut a = [[1.0f32, 2.0], [2.0, 4.0]];
        let mut b = [1.0, 2.0];
        assert_eq!(solve(&mut a, &mut b, 2), Err(Singular));
        let mut a = [[f32::NAN, 0.0], [0.0, 1.0]];
        let mut b = [1.0, 2.0];
        assert_eq!(solve(&mut a, &mut b, 2), Err(Singular));
    }
}
