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
            a.swap(piv, col);
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

/// Solve `a · X = b` for a matrix right-hand side, in place: on success `b`
/// holds `X`. `a` is destroyed. Partial pivoting, `N³/3 + N³` multiply-adds.
///
/// The same elimination as [`solve`], kept separate on purpose: the vector
/// form runs four times in every tick on the gateway, and a one-column
/// matrix there would add copies to the hottest loop.
pub(crate) fn solve_matrix<S: Scalar, const N: usize>(
    a: &mut [[S; N]; N],
    b: &mut [[S; N]; N],
) -> Result<(), Singular> {
    for col in 0..N {
        let mut piv = col;
        let mut best = a[col][col].abs();
        for row in col + 1..N {
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
            a.swap(piv, col);
            b.swap(piv, col);
        }
        let d = a[col][col];
        for row in col + 1..N {
            let f = a[row][col] / d;
            if f != S::ZERO {
                for k in col..N {
                    let t = a[col][k];
                    a[row][k] -= f * t;
                }
                for k in 0..N {
                    let t = b[col][k];
                    b[row][k] -= f * t;
                }
            }
        }
    }
    for row in (0..N).rev() {
        for c in 0..N {
            let mut s = b[row][c];
            for k in row + 1..N {
                s -= a[row][k] * b[k][c];
            }
            let x = s / a[row][row];
            if !x.is_finite() {
                return Err(Singular);
            }
            b[row][c] = x;
        }
    }
    Ok(())
}

/// `a · b` for square matrices.
pub(crate) fn mat_mul<S: Scalar, const N: usize>(a: &[[S; N]; N], b: &[[S; N]; N]) -> [[S; N]; N] {
    let mut out = [[S::ZERO; N]; N];
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

/// True when the symmetric matrix `p` is positive definite beyond rounding
/// and has only finite entries: in its `L·D·Lᵀ` factorisation every pivot
/// must exceed `16ε` times its diagonal entry, so that a matrix the working
/// precision cannot tell from singular is not passed (a plain `f32`
/// factorisation accepts matrices whose exact one fails). The `LDLᵀ` form
/// needs no square root (a software routine on the Cortex-M4F).
/// `N³/6` multiply-adds, no allocation.
pub(crate) fn is_positive_definite<S: Scalar, const N: usize>(p: &[[S; N]; N]) -> bool {
    let margin = S::of(16.0) * S::EPSILON;
    // l[i][k] for k < i (unit lower triangle), d[k] the pivots.
    let mut l = [[S::ZERO; N]; N];
    let mut d = [S::ZERO; N];
    for j in 0..N {
        let mut dj = p[j][j];
        for k in 0..j {
            dj -= l[j][k] * l[j][k] * d[k];
        }
        if !(dj > margin * p[j][j]) || !(dj > S::ZERO) || !dj.is_finite() {
            return false;
        }
        d[j] = dj;
        for i in j + 1..N {
            let mut s = p[i][j];
            for k in 0..j {
                s -= l[i][k] * l[j][k] * d[k];
            }
            l[i][j] = s / dj;
            if !l[i][j].is_finite() {
                return false;
            }
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
        solve_matrix(&mut a, &mut x).unwrap();
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
    fn reports_singular_and_nan() {
        let mut a = [[1.0f32, 2.0], [2.0, 4.0]];
        let mut b = [1.0, 2.0];
        assert_eq!(solve(&mut a, &mut b, 2), Err(Singular));
        let mut a = [[f32::NAN, 0.0], [0.0, 1.0]];
        let mut b = [1.0, 2.0];
        assert_eq!(solve(&mut a, &mut b, 2), Err(Singular));
    }
}
