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

/// Solve `a · x = b` in place: on success `b` holds `x`. `a` is destroyed.
pub(crate) fn solve<S: Scalar, const N: usize>(
    a: &mut [[S; N]; N],
    b: &mut [S; N],
) -> Result<(), Singular> {
    for col in 0..N {
        // Pivot: largest magnitude in this column at or below the diagonal.
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
                let t = b[col];
                b[row] -= f * t;
            }
        }
    }
    // Back substitution.
    for row in (0..N).rev() {
        let mut s = b[row];
        for k in row + 1..N {
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

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn solves_a_pivoting_system() {
        // Hand-checked: x = (1, 2, 3).
        let mut a = [[0.0f64, 2.0, 1.0], [1.0, 1.0, 1.0], [2.0, 1.0, 0.0]];
        let mut b = [7.0, 6.0, 4.0];
        solve(&mut a, &mut b).unwrap();
        for (x, e) in b.iter().zip([1.0, 2.0, 3.0]) {
            assert!((x - e).abs() < 1e-14);
        }
    }

    #[test]
    fn reports_singular_and_nan() {
        let mut a = [[1.0f32, 2.0], [2.0, 4.0]];
        let mut b = [1.0, 2.0];
        assert_eq!(solve(&mut a, &mut b), Err(Singular));
        let mut a = [[f32::NAN, 0.0], [0.0, 1.0]];
        let mut b = [1.0, 2.0];
        assert_eq!(solve(&mut a, &mut b), Err(Singular));
    }
}
