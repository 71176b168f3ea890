//! The covariance arithmetic of the observer: the Cayley transition,
//! symmetry and definiteness repairs, small products.

use crate::linalg::{is_positive_definite, solve_matrix, zeros};
use crate::Scalar;

pub(super) fn clean<S: Scalar>(x: S) -> S {
    if x.is_finite() && x > S::ZERO {
        x
    } else {
        S::ZERO
    }
}

pub(super) fn symmetrize<S: Scalar, const D: usize>(p: &mut [[S; D]; D]) {
    for i in 0..D {
        for j in i + 1..D {
            let m = S::HALF * (p[i][j] + p[j][i]);
            p[i][j] = m;
            p[j][i] = m;
        }
    }
}

pub(super) fn identity<S: Scalar, const D: usize>() -> [[S; D]; D] {
    let mut m = zeros();
    for (i, row) in m.iter_mut().enumerate() {
        row[i] = S::ONE;
    }
    m
}

/// `a · v`, skipping the zero entries of `v` (a measurement row is sparse:
/// the level's has one nonzero of `D`, a concentration's two). For finite
/// `a` these are the full sums' bits: each sum starts at `+0` and adds its
/// terms in the same order, a partial sum is never `−0` (in round to
/// nearest an exact cancellation gives `+0`), and adding the skipped `±0`
/// products would change nothing.
pub(super) fn mat_vec<S: Scalar, const D: usize>(a: &[[S; D]; D], v: &[S; D]) -> [S; D] {
    let mut out = [S::ZERO; D];
    for (k, &vk) in v.iter().enumerate() {
        if vk != S::ZERO {
            for (o, row) in out.iter_mut().zip(a.iter()) {
                *o += row[k] * vk;
            }
        }
    }
    out
}

/// The transition `Φ = (I − hF/2)⁻¹(I + hF/2)` (Cayley: second order, and
/// bounded for any `h` when `F` is stable) of a Jacobian whose rows from
/// `m` on are zero (the biases are random walks). With
/// `F = [[F₁₁, F₁₂], [0, 0]]` split there,
/// `Φ = [[(I − hF₁₁/2)⁻¹(I + hF₁₁/2), (I − hF₁₁/2)⁻¹·hF₁₂], [0, I]]`: one
/// `m × m` solve with `D` right-hand columns instead of a `D × D` one.
/// Returns `(Φ, true)`, or `(I + hF, false)` (explicit Euler) if the solve
/// fails. Either way the rows of `Φ` from `m` on are exactly rows of the
/// identity (zeros and a one), which the covariance products rely on.
pub(super) fn transition<S: Scalar, const D: usize>(
    f: &[[S; D]; D],
    h: S,
    m: usize,
) -> ([[S; D]; D], bool) {
    let m = m.min(D);
    let mut a = identity::<S, D>();
    let mut phi = identity::<S, D>();
    for i in 0..m {
        for j in 0..D {
            let x = S::HALF * h * f[i][j];
            if j < m {
                a[i][j] -= x;
                phi[i][j] += x;
            } else {
                phi[i][j] = x + x;
            }
        }
    }
    if solve_matrix(&mut a, &mut phi, m).is_ok() {
        return (phi, true);
    }
    let mut phi = identity::<S, D>();
    for i in 0..D {
        for j in 0..D {
            phi[i][j] += h * f[i][j];
        }
    }
    (phi, false)
}

/// `cov(c_i, c_j)` of the concentrations `c = n/V` to first order, from
/// the covariance `p` of `[V, n, …]`: the rows of `∂c/∂x` are
/// `[−c/V, 1/V]`. Out of line: the re-seed forms it `N²` times, and it is
/// no tick's hot path (inlined copies cost a gateway image ~0.5 KB).
/// `None` for an index out of range.
#[inline(never)]
pub(super) fn concentration_covariance<S: Scalar, const N: usize, const D: usize>(
    p: &[[S; D]; D],
    c: &[S; N],
    v: S,
    i: usize,
    j: usize,
) -> Option<S> {
    let at = |r: usize, k: usize| p.get(r).and_then(|row| row.get(k)).copied();
    let (ci, cj) = (*c.get(i)?, *c.get(j)?);
    let (p_vv, p_vj, p_iv, p_ij) = (at(0, 0)?, at(0, 1 + j)?, at(1 + i, 0)?, at(1 + i, 1 + j)?);
    let (ai, bi) = (-ci / v, S::ONE / v);
    let (aj, bj) = (-cj / v, S::ONE / v);
    Some(ai * aj * p_vv + ai * bj * p_vj + bi * aj * p_iv + bi * bj * p_ij)
}

/// True if every entry is finite. Out of line, over a slice: one short loop
/// in the image for checks off the hot path.
#[inline(never)]
pub(super) fn all_finite<S: Scalar>(xs: &[S]) -> bool {
    xs.iter().all(|x| x.is_finite())
}

/// Make a symmetric `p` with positive diagonal positive definite if
/// rounding has left it slightly indefinite (states of very different
/// scales in `f32`). Returns `true` if `p` was already positive definite.
///
/// The loading is relative to each variance, `P + α·diag(P)`, which is
/// `D^{1/2}(C + αI)D^{1/2}` for the correlation matrix `C`: it lifts the
/// smallest eigenvalue of `C` by `α` without swamping a small variance
/// with a large one. `α` starts at `64ε` and doubles at most 16 times; if
/// that is not enough the correlations are dropped (the diagonal alone is
/// positive definite). Bounded: at most 17 Cholesky attempts of `D³/6`.
pub(super) fn make_positive_definite<S: Scalar, const D: usize>(p: &mut [[S; D]; D]) -> bool {
    if is_positive_definite(p) {
        return true;
    }
    let floor = S::MIN_POSITIVE;
    let mut diag = [S::ZERO; D];
    for i in 0..D {
        diag[i] = p[i][i].max(floor);
        p[i][i] = diag[i];
    }
    let mut alpha = S::of(64.0) * S::EPSILON;
    for _ in 0..16 {
        let mut q = *p;
        for i in 0..D {
            q[i][i] = diag[i] * (S::ONE + alpha);
        }
        if is_positive_definite(&q) {
            *p = q;
            return false;
        }
        alpha *= S::TWO;
    }
    for i in 0..D {
        for j in 0..D {
            if i != j {
                p[i][j] = S::ZERO;
            }
        }
    }
    false
}
