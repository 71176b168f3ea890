//! The exact step of a first-order network: the matrix exponential of the
//! held linear system.
//!
//! When every reaction direction runs at `k·c_l` with `l` its only consumed
//! species (A → B, A → B → C, parallel A → B and A → C, A ⇌ B, A → B + C),
//! the component balance over a tick with the inputs held is the affine
//! linear system
//!
//! ```text
//! dn/dt = f + M·n,    M = K − d·I,
//! ```
//!
//! `f` the molar feed, `K` the network matrix (`K[i][l] += ν_ij·k_j` for each
//! direction `j` consuming `l`), `d = q_out/V` the dilution. `K` does not
//! depend on the holdup (in amounts, `V·ν·k·n_l/V = ν·k·n_l`) and `d·I`
//! commutes with it, so the tick is
//!
//! ```text
//! n(h) = n₀ + h·φ₁(h·M)·(M·n₀ + f),    φ₁(z) = (eᶻ − 1)/z,
//! ```
//!
//! exact at constant holdup. Written as an increment proportional to the
//! residual `M·n₀ + f`, a steady state of the held inputs is a fixed point at
//! any tick, whatever the rounding in `φ₁`.
//!
//! **Changing holdup.** With `V` linear over the tick the dilution `d(t) =
//! q_out/V(t)` is a scalar that still commutes with `K`; replacing it by its
//! tick mean `d̄ = (1/h)∫d = q_out·ln(V₁/V₀)/(h·(q_in − q_out))` makes the
//! homogeneous part `e^{hK}·(V₀/V₁)^{q_out/(q_in−q_out)}` exact and leaves an
//! error only in how the feed of the tick decays: the feed weight
//! `ω(s) = exp(−∫ₛʰ d)/e^{−d̄(h−s)}` is 1 at both ends and `1 + O(h²)`
//! between, `|ω − 1| ≤ (h·q_out/V)·(h·|q_in − q_out|/V)/8`. The step is
//! therefore second order in the tick while the holdup changes, and exact
//! when it does not (`tests/tests/stiff_ticks.rs` measures it against the
//! integrating-factor solution).
//!
//! **Evaluation.** `φ₁(A)` and `e^A` together by scaling and squaring
//! (Higham, *Functions of Matrices*, SIAM 2008, ch. 10, for the method;
//! the doubling `φ₁(2A) = ½·φ₁(A)·(e^A + I)` follows from
//! `e^{2A} − I = (e^A − I)(e^A + I)`): scale `A = h·M` by `2^{−s}` until
//! `‖A‖₁ ≤ 1/2`, sum the Taylor series of `φ₁` by Horner's rule (degree 7 in
//! `f32`, 13 in `f64`: truncation below `ε/4`), form `e^A = I + A·φ₁(A)`,
//! and double `s` times.
//!
//! **Flush.** When the one-norm logarithmic norm of `A` is below `−L`
//! (`L = 2·ln(1/ε) + 2`), `‖e^A‖ ≤ e^{−L} < ε²`: the tick ends on the
//! steady state of the held inputs to working precision, and the step is
//! the solve `M·n₁ = −f` (a vessel flushed through many times in one tick).
//! That also bounds the squarings: outside the flush `h·d ≤ L + h·‖K‖₁`, so
//! `‖A‖₁ ≤ 2h·‖K‖₁ + L`, and `‖K‖₁` is bounded at configuration by the rate
//! constants at infinite temperature ([`crate::Model::max_squarings`]).
//!
//! **Work.** At most `(m + 1 + 2·s_max)` products of `N × N` matrices
//! (`m` the Taylor degree, `s_max` fixed at configuration) and one
//! matrix–vector product, or one `N × N` solve for a flush. No loop depends
//! on input values beyond `s_max`.

use super::Advance;
use crate::linalg::{mat_mul, solve, zeros, Singular};
use crate::model::Model;
use crate::Scalar;

/// Largest one-norm of the scaled matrix given to the Taylor series.
pub(crate) const THETA: f64 = 0.5;

/// Taylor degree of `φ₁` for the scalar type: the truncation
/// `θ^{m+1}/(m+2)!` is below `ε/4` (1.1e-8 at degree 7 for `f32`,
/// 4.7e-17 at degree 13 for `f64`).
#[inline]
pub(crate) fn taylor_degree<S: Scalar>() -> usize {
    if S::EPSILON > S::of(1e-10) {
        7
    } else {
        13
    }
}

/// Decay exponent beyond which the homogeneous part is below `ε²` relative.
#[inline]
pub(crate) fn flush_exponent<S: Scalar>() -> S {
    S::TWO * (-S::EPSILON.ln()) + S::TWO
}

/// The one-norm of `a` (largest column sum of magnitudes) and its
/// logarithmic norm (largest `a_jj + Σ_{i≠j}|a_ij|`).
fn norms<S: Scalar, const N: usize>(a: &[[S; N]; N]) -> (S, S) {
    let mut norm = S::ZERO;
    let mut log_norm = -S::MAX;
    for j in 0..N {
        let mut col = S::ZERO;
        let mut off = S::ZERO;
        for (i, row) in a.iter().enumerate() {
            col += row[j].abs();
            if i != j {
                off += row[j].abs();
            }
        }
        norm = norm.max(col);
        log_norm = log_norm.max(a[j][j] + off);
    }
    (norm, log_norm)
}

/// Each reaction direction written as first order in one species:
/// `(l, κ)` with rate `κ·n_l` (`l = N` for a direction that does not run),
/// `[forward, reverse]` per reaction. For a first-order network `κ` is the
/// rate constant ([`crate::Model`] builds it); the quasi-linear exponential
/// of [`super::stiff`] freezes any network into this form.
pub(crate) type Pseudo<S, const R: usize> = [[(usize, S); 2]; R];

/// `a · b`, out of line: the exponential's four products share one copy
/// (each inlined `3 × 3` product is about 0.4 KiB of a gateway image).
#[inline(never)]
fn product<S: Scalar, const N: usize>(a: &[[S; N]; N], b: &[[S; N]; N]) -> [[S; N]; N] {
    mat_mul(a, b)
}

/// The matrix `M = K − d·I` of the network written as `pseudo`, with
/// dilution `d` (1/s): each direction adds `±ν·κ` to column `l`.
#[inline(never)]
pub(crate) fn system_matrix<S: Scalar, const N: usize, const R: usize, const O: usize>(
    model: &Model<S, N, R, O>,
    pseudo: &Pseudo<S, R>,
    d: S,
) -> [[S; N]; N] {
    let mut m = [[S::ZERO; N]; N];
    for (i, row) in m.iter_mut().enumerate() {
        row[i] = -d;
    }
    for (reaction, ps) in model.reactions.iter().zip(pseudo.iter()) {
        for (&(l, kappa), sign) in ps.iter().zip([S::ONE, -S::ONE]) {
            if l >= N {
                continue;
            }
            for (row, &nu) in m.iter_mut().zip(reaction.nu.iter()) {
                row[l] += sign * nu * kappa;
            }
        }
    }
    m
}

/// The residual `M·n + f` of the network written as `pseudo`, formed
/// reaction by reaction: each reaction's net extent rate
/// `κ_f·n_l − κ_r·n_m` is rounded once and given to every species by its
/// stoichiometry, so a fast reversible reaction near equilibrium leaves
/// only the rounding of its small net rate in the conserved totals, not
/// that of its large gross rates.
#[inline(never)]
pub(crate) fn residual<S: Scalar, const N: usize, const R: usize, const O: usize>(
    model: &Model<S, N, R, O>,
    pseudo: &Pseudo<S, R>,
    f: &[S; N],
    d: S,
    n: &[S; N],
) -> [S; N] {
    let mut r = [S::ZERO; N];
    for i in 0..N {
        r[i] = f[i] - d * n[i];
    }
    for (reaction, ps) in model.reactions.iter().zip(pseudo.iter()) {
        let mut net = S::ZERO;
        for (&(l, kappa), sign) in ps.iter().zip([S::ONE, -S::ONE]) {
            if let Some(&nl) = n.get(l) {
                net += sign * kappa * nl;
            }
        }
        for (ri, &nu) in r.iter_mut().zip(reaction.nu.iter()) {
            *ri += nu * net;
        }
    }
    r
}

/// One exact step of `dn/dt = f + M·n` over `h` from `n0`, with at most
/// `max_squarings` doublings. `Err` on a singular flush solve or a
/// non-finite result.
///
/// The increment is `h·φ₁(hM)·(M·n₀ + f)`: a steady state is a fixed point.
/// For a species that falls by more than half (a reactant consumed far
/// faster than the tick), `n₀ + Δ` would lose the digits of a small `n₁`
/// to the cancellation with `n₀` (in `f32`, 1e-3 relative when `n₁` is 1e4
/// times smaller than `n₀`); there the new amount is taken as
/// `e^{hM}·n₀ + h·φ₁(hM)·f`, whose terms are all non-negative for the
/// Metzler matrix of a first-order network.
///
/// `r` is the residual `M·n₀ + f`, formed by the caller (by [`residual`],
/// reaction by reaction).
#[inline(never)]
pub(crate) fn phi_step<S: Scalar, const N: usize>(
    m: &[[S; N]; N],
    f: &[S; N],
    r: &[S; N],
    n0: &[S; N],
    h: S,
    max_squarings: u16,
) -> Result<Advance<S, N>, Singular> {
    let r = *r;
    let mut a = *m;
    for row in a.iter_mut() {
        for x in row.iter_mut() {
            *x *= h;
        }
    }
    let (norm, log_norm) = norms(&a);
    if log_norm < -flush_exponent::<S>() {
        // Flushed: n₁ = −M⁻¹·f.
        let mut lhs = *m;
        let mut n1 = [S::ZERO; N];
        for (x, &fi) in n1.iter_mut().zip(f.iter()) {
            *x = -fi;
        }
        solve(&mut lhs, &mut n1, N)?;
        let mut step = Advance {
            delta: [S::ZERO; N],
            direct: [S::ZERO; N],
            use_direct: [true; N],
        };
        for i in 0..N {
            step.direct[i] = n1[i].max(S::ZERO);
            step.delta[i] = step.direct[i] - n0[i];
        }
        return finite(step);
    }
    // Scaling: the smallest s with ‖A‖/2^s ≤ θ, at most the configured bound.
    let theta = S::of(THETA);
    let mut s = 0u16;
    let mut scaled = norm;
    let mut factor = S::ONE;
    while s < max_squarings && !(scaled <= theta) {
        scaled *= S::HALF;
        factor *= S::HALF;
        s += 1;
    }
    for row in a.iter_mut() {
        for x in row.iter_mut() {
            *x *= factor;
        }
    }
    // φ₁(A) = Σ_{j≥0} A^j/(j+1)! by Horner's rule: F ← I/(j+1)! + A·F.
    let degree = taylor_degree::<S>();
    let mut coeff = [S::ONE; 16];
    for j in 1..coeff.len() {
        coeff[j] = coeff[j - 1] / S::of_u32(j as u32 + 1);
    }
    // coeff[j] = 1/(j+1)!.
    let mut phi: [[S; N]; N] = zeros();
    for (i, row) in phi.iter_mut().enumerate() {
        row[i] = coeff[degree.min(coeff.len() - 1)];
    }
    for j in (0..degree.min(coeff.len() - 1)).rev() {
        phi = product(&a, &phi);
        for (i, row) in phi.iter_mut().enumerate() {
            row[i] += coeff[j];
        }
    }
    // e^A = I + A·φ₁(A).
    let mut e = product(&a, &phi);
    for (i, row) in e.iter_mut().enumerate() {
        row[i] += S::ONE;
    }
    // Doubling: φ₁(2A) = ½·φ₁(A)·(e^A + I), e^{2A} = (e^A)².
    for _ in 0..s {
        let mut e_plus = e;
        for (i, row) in e_plus.iter_mut().enumerate() {
            row[i] += S::ONE;
        }
        phi = product(&phi, &e_plus);
        for row in phi.iter_mut() {
            for x in row.iter_mut() {
                *x *= S::HALF;
            }
        }
        e = product(&e, &e);
    }
    let mut step = Advance {
        delta: [S::ZERO; N],
        direct: [S::ZERO; N],
        use_direct: [false; N],
    };
    for i in 0..N {
        let mut d = S::ZERO;
        let mut hom = S::ZERO;
        let mut fed = S::ZERO;
        for j in 0..N {
            d += phi[i][j] * r[j];
            hom += e[i][j] * n0[j];
            fed += phi[i][j] * f[j];
        }
        step.delta[i] = h * d;
        step.direct[i] = (hom + h * fed).max(S::ZERO);
        step.use_direct[i] = step.delta[i] < -S::HALF * n0[i];
    }
    finite(step)
}

fn finite<S: Scalar, const N: usize>(step: Advance<S, N>) -> Result<Advance<S, N>, Singular> {
    if step
        .delta
        .iter()
        .chain(step.direct.iter())
        .all(|x| x.is_finite())
    {
        Ok(step)
    } else {
        Err(Singular)
    }
}

/// The number of doublings that covers `‖h·M‖₁ ≤ 2h·k_norm + L` (see the
/// module documentation): `⌈log₂((2h·k_norm + L)/θ)⌉`, at most enough for
/// the largest finite number of the scalar type.
pub(crate) fn squarings_bound<S: Scalar>(h: S, k_norm: S) -> u16 {
    let type_cap = (S::MAX.ln() / S::of(core::f64::consts::LN_2)).to_f64() as u16 + 2;
    let bound = S::TWO * h * k_norm + flush_exponent::<S>();
    if !bound.is_finite() {
        return type_cap;
    }
    let mut s = 0u16;
    let mut x = bound / S::of(THETA);
    while s < type_cap && x > S::ONE {
        x *= S::HALF;
        s += 1;
    }
    s
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Scalar check: φ₁ and the step of `dn/dt = f − λn` against the closed
    /// form `n(h) = n_ss + (n₀ − n_ss)e^{−λh}` (any ODE text), over the
    /// range of λh where scaling, the flush and neither are used.
    #[test]
    fn scalar_decay_matches_the_closed_form() {
        for &lh in &[1e-9f64, 1e-3, 0.4, 3.0, 30.0, 300.0, 3e4, 1e9] {
            let (lam, f, n0) = (lh, 2.0, 50.0);
            let step = phi_step(&[[-lam]], &[f], &[f - lam * n0], &[n0], 1.0, 200).unwrap();
            // n₀·e^{−λh} + f·(1 − e^{−λh})/λ, without the cancellation of
            // the steady-state form at small λh.
            let exact = n0 * (-lh).exp() + f * -(-lh).exp_m1() / lam;
            let got = if step.use_direct[0] {
                step.direct[0]
            } else {
                n0 + step.delta[0]
            };
            assert!(
                ((got - exact) / exact).abs() < 1e-14,
                "λh {lh}: {got} against {exact}"
            );
        }
    }

    /// The doubling bound: enough for 2h‖K‖ + L at θ = 1/2.
    #[test]
    fn squarings_bound_covers_its_norm() {
        let s = squarings_bound::<f64>(1.0, 1e3);
        let bound = 2e3 + flush_exponent::<f64>();
        assert!(bound / 2f64.powi(i32::from(s)) <= THETA);
        assert!(bound / 2f64.powi(i32::from(s) - 1) > THETA);
        assert_eq!(squarings_bound::<f32>(1.0, f32::INFINITY), 130);
    }
}
