//! Ticks of a general network that are not mild: error-controlled
//! substeps of the quasi-linear exponential.
//!
//! **The substep.** Each reaction direction is frozen as first order in its
//! limiting reactant `l` (the species that weights it in the Patankar
//! stages, `integrate::limiting`): `ρ = (ρ/c_l)·c_l`. With the transport
//! (mean dilution `ā = q_in·mean(1/V)` over the substep, forcing `ā·c_f`),
//! the frozen system `dc/dt = A·c + ā·c_f` is a first-order network, and
//! [`super::linear`] steps it exactly: stage 1 with `A` frozen at the
//! substep's start `c₀`, stage 2 with `A` frozen at the midpoint of `c₀`
//! and the stage-1 result, both from `c₀`. Its properties at any substep:
//!
//! * **second order** (the midpoint freeze, as the exponential midpoint
//!   rule; measured in the tests of [`super`]), and **exact for a
//!   first-order decay** however fast (the frozen constant is the true one);
//! * **a steady state is a fixed point**: the increment is `τ·φ₁(τA)·r`
//!   with `r = A·c₀ + ā·c_f` the true right-hand side at `c₀`, zero there;
//! * **conservative**: every column of `A` carries whole stoichiometric
//!   vectors, so `wᵀA = −ā·wᵀ` for every linear invariant `w` and `w·c`
//!   follows its exact transport; the residual is formed reaction by
//!   reaction (`linear::residual`);
//! * **non-negative** where every direction has one reactant (`A` is then a
//!   Metzler matrix and `e^{τA} ≥ 0`); a co-reactant, which `A` consumes in
//!   proportion to the limiting one, is clipped at zero if a substep
//!   overshoots it (the error control keeps that from happening in
//!   practice).
//!
//! **Substep control.** Stage 1 is first order and stage 2 second order, so
//! their difference estimates the error of the substep, relative to each
//! species' size (absolute below a millionth of the largest). The first
//! substep is the whole tick when the state barely moves (a steady state:
//! no error, one substep), otherwise sized so that its largest Patankar
//! weight is 0.2 (`FIRST_WEIGHT`); then the usual controller
//! `τ ← τ·min(4, max(1/10, 0.9·√(tol/err)))` accepts or rejects. At most
//! [`MAX_SUBSTEPS`] attempts per tick (accepted or rejected); when they
//! run out, the last one takes the rest of the tick (still conservative
//! and a fixed point, but less accurate) and the tick raises
//! [`crate::StatusFlags::SUBSTEP_BUDGET`].
//!
//! **Work.** At most `MAX_SUBSTEPS` substeps, each one rate evaluation and
//! two matrix exponentials of at most [`STAGE_SQUARINGS`] doublings; no
//! loop depends on input values beyond that bound. Measured: 2A → B from
//! `k·c₀·h = 100` takes about 360 substeps at the tolerance below (per-tick
//! error 2.6e-5 against the Riccati closed form); a steady state one.

use super::linear::{phi_step, residual, system_matrix, Pseudo};
use super::{limiting, TickFrame};
use crate::linalg::Singular;
use crate::model::Model;
use crate::Scalar;

/// Most substep attempts (accepted and rejected) in one tick.
pub const MAX_SUBSTEPS: u16 = 1000;

/// Error tolerance of a substep: the largest stage difference, relative to
/// each species' size (see [`error_norm`]). Chosen by measurement: 1e-4
/// gives per-tick errors of 2.6e-5 on 2A → B (1e-3 gave 3.2e-3).
const TOLERANCE: f64 = 1e-4;

/// Target of the first substep's largest Patankar weight `w·|ν|`.
pub(crate) const FIRST_WEIGHT: f64 = 0.2;

/// Below this fraction of the largest concentration (initial or feed), a
/// species' error counts absolutely.
const FLOOR: f64 = 1e-6;

/// Largest number of doublings in one stage. The controller keeps
/// `‖τ·A‖` near its first substep's (a Patankar weight of
/// `FIRST_WEIGHT`, 0.2); a stage that would need more is inaccurate and
/// rejected by the error estimate.
pub const STAGE_SQUARINGS: u16 = 40;

/// Weighted error of a substep: `max_i |c₂ − c₁| / (|c₀| + |c₂| + floor)`.
fn error_norm<S: Scalar, const N: usize>(c0: &[S; N], d1: &[S; N], d2: &[S; N], floor: S) -> S {
    let mut err = S::ZERO;
    for i in 0..N {
        let c2 = c0[i] + d2[i];
        let scale = c0[i].abs() + c2.abs() + floor;
        err = err.max((d2[i] - d1[i]).abs() / scale);
    }
    err
}

/// The network at concentrations `c` with rates `r` (per volume) frozen as
/// first order in each direction's limiting reactant: `(l, ρ/c_l)`. Out of
/// line, with [`limiting`] called rather than inlined into each of its
/// `2R` directions (1 KiB of a gateway image): a stiff tick's cost, not the
/// everyday tick's.
#[inline(never)]
fn frozen<S: Scalar, const N: usize, const R: usize, const O: usize>(
    model: &Model<S, N, R, O>,
    r: &[[S; 2]; R],
    c: &[S; N],
) -> Pseudo<S, R> {
    let mut pseudo = [[(N, S::ZERO); 2]; R];
    for ((reaction, p), ps) in model.reactions.iter().zip(r.iter()).zip(pseudo.iter_mut()) {
        for ((&rate, slot), sign) in p.iter().zip(ps.iter_mut()).zip([S::ONE, -S::ONE]) {
            if !(rate > S::ZERO) {
                continue;
            }
            if let Some((l, _, cl)) = limiting_out_of_line(&reaction.nu, c, sign) {
                *slot = (l, rate / cl);
            }
        }
    }
    pseudo
}

/// [`limiting`], not inlined.
#[inline(never)]
fn limiting_out_of_line<S: Scalar, const N: usize>(
    nu: &[S; N],
    c: &[S; N],
    sign: S,
) -> Option<(usize, S, S)> {
    limiting(nu, c, sign)
}

/// One stage: the exact solution over `tau` from `c0` of the network frozen
/// as `pseudo`, with dilution `a` and forcing `a·c_f`. Returns `c − c0`.
fn frozen_stage<S: Scalar, const N: usize, const R: usize, const O: usize>(
    model: &Model<S, N, R, O>,
    pseudo: &Pseudo<S, R>,
    forcing: &[S; N],
    a: S,
    c0: &[S; N],
    tau: S,
) -> Result<[S; N], Singular> {
    let m = system_matrix(model, pseudo, a);
    let r = residual(model, pseudo, forcing, a, c0);
    let step = phi_step(&m, forcing, &r, c0, tau, STAGE_SQUARINGS)?;
    let mut d = [S::ZERO; N];
    for i in 0..N {
        let c = if step.use_direct[i] {
            step.direct[i]
        } else {
            (c0[i] + step.delta[i]).max(S::ZERO)
        };
        d[i] = c - c0[i];
    }
    Ok(d)
}

/// One substep of length `tau` starting `t0` seconds into the tick, from
/// concentrations `c0` whose rates (per volume) are `r0` (see the module
/// documentation). Returns both stages' increments.
fn substep<S: Scalar, const N: usize, const R: usize, const O: usize>(
    model: &Model<S, N, R, O>,
    fr: &TickFrame<S, N, R>,
    t0: S,
    tau: S,
    c0: &[S; N],
    r0: &[[S; 2]; R],
    evals: &mut u16,
) -> Result<([S; N], [S; N]), Singular> {
    // Mean dilution q_in·mean(1/V) and forcing a·c_f = a·feed/q_in.
    let a = fr.q_in * fr.mean_inverse_volume(t0, tau);
    let mut forcing = [S::ZERO; N];
    if fr.q_in > S::ZERO {
        for (fi, &feed) in forcing.iter_mut().zip(fr.feed.iter()) {
            *fi = a * feed / fr.q_in;
        }
    }
    let d1 = frozen_stage(model, &frozen(model, r0, c0), &forcing, a, c0, tau)?;
    let mut mid = [S::ZERO; N];
    for i in 0..N {
        mid[i] = c0[i] + S::HALF * d1[i];
    }
    let mut rm = [[S::ZERO; 2]; R];
    model.molar_rates(&fr.k, &mid, S::ONE, &mut rm);
    *evals = evals.saturating_add(1);
    let d2 = frozen_stage(model, &frozen(model, &rm, &mid), &forcing, a, c0, tau)?;
    Ok((d1, d2))
}

/// What a tick did.
#[derive(Clone, Copy, Debug, Default)]
pub(crate) struct Substeps {
    /// Substeps accepted.
    pub(crate) accepted: u16,
    /// Substeps rejected by the error control.
    pub(crate) rejected: u16,
    /// The budget ran out and the last substep took the rest of the tick.
    pub(crate) exhausted: bool,
}

/// Increment of the amounts over a tick by error-controlled substeps (see
/// the module documentation), from concentrations `c0` at the tick's start,
/// their rates `r0` (per volume) and the tick's largest Patankar weight
/// `first_weight` there (all three from [`super::mprk22_step`], which has
/// them already). Rates are evaluated once per accepted state (a rejected
/// substep reuses them).
#[inline(never)]
pub(crate) fn substepped<S: Scalar, const N: usize, const R: usize, const O: usize>(
    model: &Model<S, N, R, O>,
    fr: &TickFrame<S, N, R>,
    c0: &[S; N],
    r0: &[[S; 2]; R],
    first_weight: S,
    evals: &mut u16,
) -> Result<([S; N], Substeps), Singular> {
    let h = fr.h;
    let mut c = *c0;
    let mut r = *r0;
    let mut floor = S::ZERO;
    for i in 0..N {
        let cf = if fr.q_in > S::ZERO {
            fr.feed[i] / fr.q_in
        } else {
            S::ZERO
        };
        floor = floor.max(c[i]).max(cf);
    }
    floor = floor * S::of(FLOOR) + S::MIN_POSITIVE;
    let tol = S::of(TOLERANCE);
    let mut tau = h;
    if first_weight > S::of(FIRST_WEIGHT) {
        // The starting slope dc/dt = (feed − q_in·c)/V₀ + Σ_j ν_j·(ρ_f − ρ_r):
        // a steady state tries the whole tick.
        let mut activity = S::ZERO;
        for i in 0..N {
            let mut slope = (fr.feed[i] - fr.q_in * c[i]) / fr.v0;
            for (reaction, p) in model.reactions.iter().zip(r.iter()) {
                slope += reaction.nu[i] * (p[0] - p[1]);
            }
            activity = activity.max(h * slope.abs() / (c[i].abs() + floor));
        }
        if activity > tol {
            tau = h * S::of(FIRST_WEIGHT) / first_weight;
        }
    }
    let mut t = S::ZERO;
    let mut done = Substeps::default();
    let mut fresh = true;
    let mut attempts = 0u16;
    while t < h && attempts < MAX_SUBSTEPS {
        attempts += 1;
        let last = attempts == MAX_SUBSTEPS;
        if !fresh {
            model.molar_rates(&fr.k, &c, S::ONE, &mut r);
            *evals = evals.saturating_add(1);
            fresh = true;
        }
        let rest = h - t;
        // Take the rest when it is within a tenth of the planned substep
        // (no sliver at the end of the tick), or when the budget is spent.
        let final_step = last || tau >= rest * S::of(0.9);
        let step = if final_step { rest } else { tau };
        let (d1, d2) = substep(model, fr, t, step, &c, &r, evals)?;
        let err = error_norm(&c, &d1, &d2, floor);
        let accept = err <= tol || last;
        if accept {
            for i in 0..N {
                c[i] = (c[i] + d2[i]).max(S::ZERO);
            }
            fresh = false;
            t = if final_step { h } else { t + step };
            done.accepted = done.accepted.saturating_add(1);
            done.exhausted = last && !(err <= tol);
        } else {
            done.rejected = done.rejected.saturating_add(1);
        }
        // Controller: factor 0.9·√(tol/err), within [1/10, 4].
        let grow = if err > S::ZERO {
            (S::of(0.9) * (tol / err).sqrt()).clamp_to(S::of(0.1), S::of(4.0))
        } else {
            S::of(4.0)
        };
        tau = step * grow;
    }
    // Amounts: y = c·V₁, so y − y0 = c0·(V₁ − V₀) + (c − c0)·V₁.
    let dv = fr.v1 - fr.v0;
    let mut d = [S::ZERO; N];
    for i in 0..N {
        d[i] = c0[i] * dv + (c[i] - c0[i]) * fr.v1;
    }
    Ok((d, done))
}

/// One substep from the start of the tick, for the parent module's tests.
#[cfg(test)]
pub(crate) fn tests_substep<S: Scalar, const N: usize, const R: usize, const O: usize>(
    model: &Model<S, N, R, O>,
    fr: &TickFrame<S, N, R>,
    tau: S,
    c0: &[S; N],
) -> Result<([S; N], [S; N]), Singular> {
    let mut r0 = [[S::ZERO; 2]; R];
    model.molar_rates(&fr.k, c0, S::ONE, &mut r0);
    substep(model, fr, S::ZERO, tau, c0, &r0, &mut 0)
}
