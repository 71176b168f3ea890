//! Integrators for the component balances over one tick.
//!
//! The holdup trajectory of the tick is settled first (see
//! [`crate::vessel`]); what is left is the component system with the inputs
//! held: feed `F_i` (mol/s), outflow `q` (m³/s), holdup `V(t)` linear from
//! `V₀` to `V₁`, temperature fixed.
//!
//! * `exact` — closed form for the linear, uncoupled class: with no
//!   reaction, `c(t) = c_f + (c₀ − c_f)·(V₀/V(t))^{q_in/(q_in − q_out)}`,
//!   which at constant volume is `c_f + (c₀ − c_f)·e^{−λt}`; with first-order
//!   consumption at constant volume, `λ = q/V + k`. Written with `expm1` and
//!   `ln1p` so that `f32` keeps its digits when `λh` is 1e-6.
//! * `split_step` — for general networks: Strang splitting of the tick into
//!   reactions for `h/2`, transport (feed, outflow, volume change) for `h`
//!   by the exact step, reactions for `h/2`. The reactions are stepped by the
//!   modified Patankar–Runge–Kutta scheme MPRK22 of Burchard, Deleersnijder
//!   & Meister (Appl. Numer. Math. 47 (2003) 1–30): second order,
//!   unconditionally positive, and conservative — every linear invariant of
//!   the stoichiometry (`w·ν_j = 0`) is kept to rounding at any tick. Each
//!   reaction direction is weighted by one species (its most depleted
//!   reactant), so the stoichiometric ratios of every reaction hold exactly.
//!   Each stage solves one `N × N` system on the stack.
//! * [`euler_step`], [`rk4_step`] — reference methods for work–precision
//!   comparisons, generic over any [`Rhs`]. Not positive: explicit Euler
//!   goes negative at `λh > 1` and diverges at `λh > 2`.
//!
//! Bounds: `exact` does `N` `expm1` and one `ln1p`; `split_step` does one
//! `exact` and two MPRK22 steps, each two rate evaluations and two `N × N`
//! solves (`N³/3` multiply-adds each); no loop depends on input values.

use crate::linalg::{solve, Singular};
use crate::model::Model;
use crate::Scalar;

/// A right-hand side `dy/dt = f(t, y)` written into a caller-owned array.
pub trait Rhs<S, const N: usize> {
    /// Evaluate `f(t, y)` into `dy`.
    fn eval(&self, t: S, y: &[S; N], dy: &mut [S; N]);
}

/// One explicit Euler step of length `h` from `(t, y)`. Reference only.
pub fn euler_step<S: Scalar, const N: usize, F: Rhs<S, N>>(
    f: &F,
    t: S,
    y: &[S; N],
    h: S,
) -> [S; N] {
    let mut k = [S::ZERO; N];
    f.eval(t, y, &mut k);
    let mut out = *y;
    for (o, ki) in out.iter_mut().zip(k.iter()) {
        *o += h * *ki;
    }
    out
}

/// One classical fourth-order Runge–Kutta step of length `h` from `(t, y)`.
/// Reference only.
pub fn rk4_step<S: Scalar, const N: usize, F: Rhs<S, N>>(f: &F, t: S, y: &[S; N], h: S) -> [S; N] {
    let half = S::HALF * h;
    let mut k1 = [S::ZERO; N];
    let mut k2 = [S::ZERO; N];
    let mut k3 = [S::ZERO; N];
    let mut k4 = [S::ZERO; N];
    let mut tmp = [S::ZERO; N];
    f.eval(t, y, &mut k1);
    for i in 0..N {
        tmp[i] = y[i] + half * k1[i];
    }
    f.eval(t + half, &tmp, &mut k2);
    for i in 0..N {
        tmp[i] = y[i] + half * k2[i];
    }
    f.eval(t + half, &tmp, &mut k3);
    for i in 0..N {
        tmp[i] = y[i] + h * k3[i];
    }
    f.eval(t + h, &tmp, &mut k4);
    let sixth = h / S::of(6.0);
    let mut out = *y;
    for i in 0..N {
        out[i] += sixth * (k1[i] + S::TWO * (k2[i] + k3[i]) + k4[i]);
    }
    out
}

/// Everything held over one tick, SI units.
#[derive(Clone, Copy, Debug)]
pub struct TickFrame<S, const N: usize, const R: usize> {
    /// Tick length, s.
    pub h: S,
    /// Holdup at the start of the tick, m³ (above the minimum holdup).
    pub v0: S,
    /// Holdup at the end of the tick, m³ (above the minimum holdup).
    pub v1: S,
    /// Total inflow, m³/s.
    pub q_in: S,
    /// Total outflow (tick average, including overflow), m³/s.
    pub q_out: S,
    /// Molar feed of each species, mol/s.
    pub feed: [S; N],
    /// Rate constants `[forward, reverse]` of each reaction at the tick's temperature.
    pub k: [[S; 2]; R],
}

impl<S: Scalar, const N: usize, const R: usize> TickFrame<S, N, R> {
    /// Holdup at time `t` into the tick (linear in `t`).
    #[inline]
    pub fn volume_at(&self, t: S) -> S {
        self.v0 + (self.v1 - self.v0) * (t / self.h)
    }
}

/// The component balance of a model over one tick, as an [`Rhs`] in amounts
/// (mol), time in seconds from the tick's start.
pub struct TickRhs<'a, S, const N: usize, const R: usize, const O: usize> {
    /// The vessel model (reactions).
    pub model: &'a Model<S, N, R, O>,
    /// The tick's held inputs.
    pub frame: &'a TickFrame<S, N, R>,
}

impl<S: Scalar, const N: usize, const R: usize, const O: usize> Rhs<S, N>
    for TickRhs<'_, S, N, R, O>
{
    fn eval(&self, t: S, y: &[S; N], dy: &mut [S; N]) {
        let v = self.frame.volume_at(t);
        let d = self.frame.q_out / v;
        for i in 0..N {
            dy[i] = self.frame.feed[i] - d * y[i];
        }
        let mut rho = [[S::ZERO; 2]; R];
        self.model.molar_rates(&self.frame.k, y, v, &mut rho);
        for (r, p) in self.model.reactions.iter().zip(rho.iter()) {
            let net = p[0] - p[1];
            for i in 0..N {
                dy[i] += r.nu[i] * net;
            }
        }
    }
}

/// Increment of the amounts over the tick by the closed form, or `None` when
/// this tick is outside its class (changing volume with a reaction).
///
/// `lam` holds each species' first-order consumption constant (1/s).
pub(crate) fn exact<S: Scalar, const N: usize, const R: usize>(
    fr: &TickFrame<S, N, R>,
    y0: &[S; N],
    lam: &[S; N],
) -> Option<[S; N]> {
    let varying = fr.v1 != fr.v0;
    if varying && lam.iter().any(|&l| l > S::ZERO) {
        return None;
    }
    let h = fr.h;
    let x = (fr.v1 - fr.v0) / fr.v0;
    // g(x) = ln(1 + x)/x → 1 as x → 0; exponent of the dilution = q_in·h·g/V₀.
    let g = if varying { x.ln1p() / x } else { S::ONE };
    let dilution = fr.q_in * h * g / fr.v0;
    let mut d = [S::ZERO; N];
    // Species without first-order consumption share one exponent: one
    // `expm1` serves them all (saves N − 1 calls per tick in the split step).
    let mut cached: Option<(S, S, S)> = None;
    for i in 0..N {
        let e = dilution + lam[i] * h;
        // φ = 1 − e^{−E}, ψ = φ/E (→ 1 as E → 0).
        let (phi, psi) = match cached {
            Some((ce, cphi, cpsi)) if ce == e => (cphi, cpsi),
            _ => {
                let phi = -(-e).expm1();
                let psi = if e > S::ZERO { phi / e } else { S::ONE };
                cached = Some((e, phi, psi));
                (phi, psi)
            }
        };
        let c0 = y0[i] / fr.v0;
        d[i] = fr.v1 * (fr.feed[i] * h * g * psi / fr.v0 - c0 * phi) + x * y0[i];
    }
    Some(d)
}

/// Below this a denominator of a Patankar weight counts as zero.
#[inline]
fn tiny<S: Scalar>() -> S {
    S::MIN_POSITIVE
}

/// One Patankar stage of the closed reaction system: solve
/// `(I + Σ_j h·ρ_j·ν_j·e_lᵀ/den_l)·y_new = y0` and return `y_new − y0`.
///
/// Each direction with molar rate `rho` (already stage-averaged) is weighted
/// by `y_new,l/den_l` for its most depleted reactant `l`, so every reaction
/// keeps its stoichiometric ratios exactly.
///
/// Two algebraically equal forms: when the stage is mild (every weight
/// `h·ρ/den ≤ 1`) the system is solved for the increment, which keeps the
/// digits of a small change in `f32`; when it is stiff it is solved for
/// `y_new` itself, whose right-hand side is just `y0`, so that a `k·h` of 1e4
/// does not make the increment a difference of numbers 1e8 times larger
/// (which lost the product's mass to rounding).
fn patankar_stage<S: Scalar, const N: usize, const R: usize, const O: usize>(
    model: &Model<S, N, R, O>,
    rho: &[[S; 2]; R],
    den: &[S; N],
    y0: &[S; N],
    h: S,
) -> Result<[S; N], Singular> {
    let mut a = [[S::ZERO; N]; N];
    for (i, row) in a.iter_mut().enumerate() {
        row[i] = S::ONE;
    }
    let mut inc = [S::ZERO; N];
    let mut stiffest = S::ZERO;
    for (reaction, p) in model.reactions.iter().zip(rho.iter()) {
        for (dir, &rate) in p.iter().enumerate() {
            if !(rate > S::ZERO) {
                continue;
            }
            let sign = if dir == 0 { S::ONE } else { -S::ONE };
            // Most depleted reactant: largest |ν|/den.
            let mut l = N;
            let mut worst = S::ZERO;
            let mut blocked = false;
            for i in 0..N {
                let s = sign * reaction.nu[i];
                if s < S::ZERO {
                    if !(den[i] > tiny()) {
                        blocked = true;
                        break;
                    }
                    let depletion = -s / den[i];
                    if depletion > worst {
                        worst = depletion;
                        l = i;
                    }
                }
            }
            if blocked || l >= N {
                // A reactant is exhausted: the direction cannot run.
                continue;
            }
            let w = h * rate / den[l];
            stiffest = stiffest.max(w * worst * den[l]);
            for i in 0..N {
                let s = sign * reaction.nu[i];
                if s != S::ZERO {
                    a[i][l] -= s * w;
                    inc[i] += s * w * y0[l];
                }
            }
        }
    }
    if stiffest <= S::ONE {
        solve(&mut a, &mut inc)?;
        Ok(inc)
    } else {
        let mut y = *y0;
        solve(&mut a, &mut y)?;
        for (yi, &y0i) in y.iter_mut().zip(y0.iter()) {
            *yi = yi.max(S::ZERO) - y0i;
        }
        Ok(y)
    }
}

/// Increment of the amounts by the reactions alone (closed vessel at holdup
/// `v`) over `h` seconds, by MPRK22 (Burchard, Deleersnijder & Meister 2003,
/// with `α = 1`): a Patankar–Euler predictor, then trapezoidal rates with
/// weights `y_new/y₁`. Counts its rate evaluations into `evals`.
pub(crate) fn mprk22_reactions<S: Scalar, const N: usize, const R: usize, const O: usize>(
    model: &Model<S, N, R, O>,
    k: &[[S; 2]; R],
    v: S,
    h: S,
    y0: &[S; N],
    evals: &mut u8,
) -> Result<[S; N], Singular> {
    if model.reactions.is_empty() {
        return Ok([S::ZERO; N]);
    }
    let mut rho0 = [[S::ZERO; 2]; R];
    model.molar_rates(k, y0, v, &mut rho0);
    let d1 = patankar_stage(model, &rho0, y0, y0, h)?;
    let mut y1 = [S::ZERO; N];
    for i in 0..N {
        y1[i] = (y0[i] + d1[i]).max(S::ZERO);
    }
    let mut rho1 = [[S::ZERO; 2]; R];
    model.molar_rates(k, &y1, v, &mut rho1);
    *evals = evals.saturating_add(2);
    let mut rho = [[S::ZERO; 2]; R];
    for ((m, p0), p1) in rho.iter_mut().zip(rho0.iter()).zip(rho1.iter()) {
        m[0] = S::HALF * (p0[0] + p1[0]);
        m[1] = S::HALF * (p0[1] + p1[1]);
    }
    patankar_stage(model, &rho, &y1, y0, h)
}

/// Increment of the amounts over a tick with reactions, by Strang
/// splitting: reactions for `h/2` at `V₀` (MPRK22), transport (feed, outflow,
/// volume change) for `h` by the exact step, reactions for `h/2` at `V₁`.
///
/// Second order like its parts; positive because each part is; conservative
/// because in a closed vessel the transport part is the identity; and a
/// species that takes part in no reaction is advanced by the exact step
/// alone, so it never leaves the range of its initial and feed
/// concentrations, however many residence times a tick spans (an unsplit
/// MPRK22 overshoots the feed when `h·q/V > 2`). Reactions go outside so
/// that a reagent consumed far faster than the tick leaves the tick reacted,
/// not as freshly fed material.
pub(crate) fn split_step<S: Scalar, const N: usize, const R: usize, const O: usize>(
    model: &Model<S, N, R, O>,
    fr: &TickFrame<S, N, R>,
    y0: &[S; N],
    evals: &mut u8,
) -> Result<[S; N], Singular> {
    let half = S::HALF * fr.h;
    let da = mprk22_reactions(model, &fr.k, fr.v0, half, y0, evals)?;
    let mut ya = [S::ZERO; N];
    for i in 0..N {
        ya[i] = (y0[i] + da[i]).max(S::ZERO);
    }
    let dt = exact(fr, &ya, &[S::ZERO; N]).unwrap_or([S::ZERO; N]);
    let mut yb = [S::ZERO; N];
    for i in 0..N {
        yb[i] = (ya[i] + dt[i]).max(S::ZERO);
    }
    let db = mprk22_reactions(model, &fr.k, fr.v1, half, &yb, evals)?;
    let mut d = [S::ZERO; N];
    for i in 0..N {
        d[i] = da[i] + dt[i] + db[i];
    }
    Ok(d)
}

#[cfg(test)]
mod tests {
    use super::*;

    struct Decay;
    impl Rhs<f64, 1> for Decay {
        fn eval(&self, _t: f64, y: &[f64; 1], dy: &mut [f64; 1]) {
            dy[0] = -y[0];
        }
    }

    #[test]
    fn reference_methods_have_their_textbook_one_step_factors() {
        // y' = −y: Euler multiplies by (1 − h); RK4 by the degree-4 Taylor
        // polynomial of e^{−h} (any numerical-analysis text; hand arithmetic).
        let h = 0.5;
        let e = euler_step(&Decay, 0.0, &[1.0], h)[0];
        assert!((e - 0.5).abs() < 1e-15);
        let r = rk4_step(&Decay, 0.0, &[1.0], h)[0];
        let taylor = 1.0 - h + h * h / 2.0 - h * h * h / 6.0 + h.powi(4) / 24.0;
        assert!((r - taylor).abs() < 1e-15);
    }
}
