//! Stiff ticks of a general network: error-controlled substeps.
//!
//! Two substep methods. The **quasi-linear exponential** takes every
//! substep but a mild whole tick: each reaction direction is frozen as
//! first order in its most depleted reactant (`ρ = (ρ/c_l)·c_l`), the
//! frozen linear system with the transport is stepped exactly by
//! [`super::linear`] (stage 1 frozen at the substep's start, stage 2 at the
//! midpoint of the start and stage 1: second order); it is exact for a
//! first-order decay however fast, conservative (columns carry whole
//! stoichiometric vectors), non-negative for single-reactant directions
//! (a co-reactant is clipped at zero), and a steady state is a fixed point
//! (the increment is proportional to the residual). The **exponential
//! MPRK22** below steps a tick whole when its largest Patankar weight is at
//! most 0.02:
//!
//! A tick that is not mild (a reaction direction or the dilution too fast
//! for the whole-tick MPRK22) is covered by substeps, each of which treats
//! the transport exactly and the reactions by Patankar weights:
//!
//! ```text
//! dc/dt = a(t)·(c_f − c) + P(c) − D(c),    a = q_in/V(t),  c_f = feed/q_in
//! ```
//!
//! Over a substep of length `τ`, with `z = ∫a` (exact for `V` linear in
//! `t`), `E = e^{−z}`, and the transport alone giving `b = E·c₀ + (1 − E)·c_f`,
//! the variation-of-constants formula with the mean dilution `ā = z/τ`
//! weighs a reaction term `g(s)` by `e^{−ā(τ−s)}`:
//!
//! * stage 1 (exponential Patankar–Euler): `g` frozen at `c₀`, weight
//!   `τ·P(z)`, `P(z) = (1 − e^{−z})/z`, destruction weighted by `c₁/c₀`;
//! * stage 2: `g` linear between `c₀` and `c₁`, weights `τ·Q(z)` on `g(c₀)`
//!   and `τ·(P(z) − Q(z))` on `g(c₁)`, `Q(z) = (1 − e^{−z}(1 + z))/z²`,
//!   destruction weighted by `c₂/c₁` (as in MPRK22).
//!
//! At `z → 0` this is MPRK22 (`P → 1`, `Q → 1/2`: the trapezoidal weights)
//! of Burchard, Deleersnijder & Meister (2003); the transport weights are
//! those of the second-order exponential time differencing of Cox &
//! Matthews (J. Comput. Phys. 176 (2002) 430–455). Its properties at any
//! substep: positive (each stage is a Patankar system with a non-negative
//! right-hand side); conservative (the reaction terms carry the
//! stoichiometry, so every linear invariant follows its exact transport);
//! a species in no reaction is stepped exactly (so it never leaves the range
//! of its initial and feed concentrations, however many residence times a
//! substep spans); and a steady state of the held inputs is a fixed point
//! (stage weights sum to `τ·P(z) = (1 − E)/ā`, which balances the transport
//! exactly). Second order (measured in the tests below).
//!
//! **Substep control.** Stage 1 is first order and stage 2 second order, so
//! their difference estimates the error of the substep. The first substep
//! is sized from the stiffness of the starting state; then the usual
//! controller `τ ← τ·min(4, max(1/5, 0.9·√(tol/err)))` accepts or rejects.
//! A steady state has no error: one substep covers the tick. At most
//! [`MAX_SUBSTEPS`] attempts per tick (accepted or rejected); when they
//! run out, the last one takes the rest of the tick (still positive,
//! conservative and a fixed point, but less accurate) and the tick raises
//! [`crate::StatusFlags::SUBSTEP_BUDGET`].
//!
//! **Work.** At most `MAX_SUBSTEPS` substeps of two rate evaluations, two
//! Patankar solves and one `expm1`; no loop depends on input values beyond
//! that bound.

use super::linear::phi_step;
use super::{PatankarSystem, TickFrame};
use crate::linalg::Singular;
use crate::model::Model;
use crate::Scalar;

/// Most substep attempts (accepted and rejected) in one tick.
pub const MAX_SUBSTEPS: u16 = 1000;

/// Error tolerance of a substep: the largest stage difference, relative to
/// each species' size (see [`error_norm`]).
const TOLERANCE: f64 = 1e-4;

/// Largest Patankar weight `w·|ν|` of a tick stepped whole by one
/// exponential MPRK22 substep (the cheap path of a mild tick). MPRK22's
/// error estimate understates its error on some networks (on 2A → B its
/// first stage is exact), so the whole step is kept to weights where its
/// error is small however estimated: about `0.06·(2w)³`, 4e-6 at 0.02.
const WHOLE_WEIGHT: f64 = 0.02;

/// Target of the first substep's largest Patankar weight `w·|ν|`.
const FIRST_WEIGHT: f64 = 0.2;

/// Below this fraction of the largest concentration (initial or feed), a
/// species' error counts absolutely.
const FLOOR: f64 = 1e-6;

/// Transport weights of a substep with dilution exponent `z ≥ 0`:
/// `E = e^{−z}`, `1 − E`, `P(z) = (1 − e^{−z})/z` and
/// `Q(z) = (1 − e^{−z}(1 + z))/z²`. Below `z = 1/4` the series
/// `P = Σ(−z)^k/(k+1)!`, `Q = Σ(−z)^k/(k!·(k+2))` (twelve terms, truncation
/// below 1.2e-16) avoid the cancellation of the closed forms.
#[derive(Clone, Copy, Debug)]
struct Transport<S> {
    decay: S,
    one_minus: S,
    p: S,
    q: S,
}

impl<S: Scalar> Transport<S> {
    fn new(z: S) -> Self {
        if z < S::of(0.25) {
            // Horner on the two series, highest term first: P's coefficients
            // 1/(k+1)!, Q's 1/(k!·(k+2)).
            const P: [f64; 12] = {
                let mut c = [1.0; 12];
                let mut k = 1;
                while k < 12 {
                    c[k] = c[k - 1] / (k as f64 + 1.0);
                    k += 1;
                }
                c
            };
            const Q: [f64; 12] = {
                let mut c = [0.5; 12];
                let mut fact = 1.0;
                let mut k = 1;
                while k < 12 {
                    fact *= k as f64;
                    c[k] = 1.0 / (fact * (k as f64 + 2.0));
                    k += 1;
                }
                c
            };
            let mut p = S::ZERO;
            let mut q = S::ZERO;
            for k in (0..12).rev() {
                p = p * (-z) + S::of(P[k]);
                q = q * (-z) + S::of(Q[k]);
            }
            let one_minus = z * p;
            Self {
                decay: S::ONE - one_minus,
                one_minus,
                p,
                q,
            }
        } else {
            let one_minus = -(-z).expm1();
            let decay = S::ONE - one_minus;
            let p = one_minus / z;
            let q = (one_minus - z * decay) / (z * z);
            Self {
                decay,
                one_minus,
                p,
                q,
            }
        }
    }
}

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

/// One substep of length `tau` starting `t0` seconds into the tick, from
/// concentrations `c0` whose rates (per volume) are `r0`. Returns the
/// stage-1 and stage-2 increments.
fn substep<S: Scalar, const N: usize, const R: usize, const O: usize>(
    model: &Model<S, N, R, O>,
    fr: &TickFrame<S, N, R>,
    t0: S,
    tau: S,
    c0: &[S; N],
    r0: &[[S; 2]; R],
    evals: &mut u16,
) -> Result<([S; N], [S; N]), Singular> {
    let v_start = fr.volume_at(t0);
    let x = (fr.volume_at(t0 + tau) - v_start) / v_start;
    // ∫a over the substep: q_in·τ·ln(1 + x)/(x·V) (→ q_in·τ/V as x → 0).
    let g = if x != S::ZERO { x.ln1p() / x } else { S::ONE };
    let z = fr.q_in * tau * g / v_start;
    let tr = Transport::new(z);
    // Transport alone: b = E·c₀ + (1 − E)·c_f, with (1 − E)·c_f written as
    // (1 − E)·feed/q_in (zero without inflow).
    let mut b = [S::ZERO; N];
    let mut e = [S::ZERO; N];
    for i in 0..N {
        let fed = if fr.q_in > S::ZERO {
            tr.one_minus * fr.feed[i] / fr.q_in
        } else {
            S::ZERO
        };
        b[i] = tr.decay * c0[i] + fed;
        e[i] = fed - tr.one_minus * c0[i];
    }
    let ones = [S::ONE; N];
    // Stage 1.
    let sys = PatankarSystem::assemble(model, r0, c0, tau * tr.p);
    let d1 = sys.solve(&ones, &b, &e, c0)?;
    let mut c1 = [S::ZERO; N];
    for i in 0..N {
        c1[i] = (c0[i] + d1[i]).max(S::ZERO);
    }
    // Stage 2: rates weighted Q on the start, P − Q on the predictor.
    let mut r1 = [[S::ZERO; 2]; R];
    model.molar_rates(&fr.k, &c1, S::ONE, &mut r1);
    *evals = evals.saturating_add(1);
    let (w0, w1) = (tr.q / tr.p, (tr.p - tr.q) / tr.p);
    let mut rho = [[S::ZERO; 2]; R];
    for ((m, p0), p1) in rho.iter_mut().zip(r0.iter()).zip(r1.iter()) {
        m[0] = w0 * p0[0] + w1 * p1[0];
        m[1] = w0 * p0[1] + w1 * p1[1];
    }
    let sys = PatankarSystem::assemble(model, &rho, &c1, tau * tr.p);
    let d2 = sys.solve(&ones, &b, &e, c0)?;
    Ok((d1, d2))
}

/// Largest number of doublings in one quasi-linear stage. The controller
/// keeps `‖τ·A‖` near its first substep's (a Patankar weight of
/// [`FIRST_WEIGHT`]); a stage that would need more is inaccurate and
/// rejected by the error estimate.
const STAGE_SQUARINGS: u16 = 40;

/// The frozen quasi-linear matrix of the network at concentrations `c`
/// with rates `r` (per volume), mean dilution `a` (1/s): each reaction
/// direction is written as first order in its most depleted reactant `l`,
/// `ρ = (ρ/c_l)·c_l`, and put into column `l` with its stoichiometry; the
/// dilution is `−a` on the diagonal. `A(c)·c + a·c_f` is the exact
/// right-hand side at `c`, and every column carries whole stoichiometric
/// vectors, so the linear invariants of the network are kept.
///
/// Also returns each direction's weighting species and pseudo-first-order
/// constant `(l, ρ/c_l)` (`l = N` for a direction that does not run), from
/// which [`frozen_residual`] forms `A·c₀ + a·c_f` reaction by reaction.
#[allow(clippy::type_complexity)]
fn quasi_linear<S: Scalar, const N: usize, const R: usize, const O: usize>(
    model: &Model<S, N, R, O>,
    r: &[[S; 2]; R],
    c: &[S; N],
    a: S,
) -> ([[S; N]; N], [[(usize, S); 2]; R]) {
    let mut m = [[S::ZERO; N]; N];
    let mut pseudo = [[(N, S::ZERO); 2]; R];
    for (i, row) in m.iter_mut().enumerate() {
        row[i] = -a;
    }
    for ((reaction, p), ps) in model.reactions.iter().zip(r.iter()).zip(pseudo.iter_mut()) {
        for (dir, &rate) in p.iter().enumerate() {
            if !(rate > S::ZERO) {
                continue;
            }
            let sign = if dir == 0 { S::ONE } else { -S::ONE };
            let mut l = N;
            let mut best = S::ZERO;
            for (i, (&nu, &ci)) in reaction.nu.iter().zip(c.iter()).enumerate() {
                let consumed = -sign * nu;
                if consumed > S::ZERO && ci > S::MIN_POSITIVE {
                    let depletion = consumed / ci;
                    if l == N || depletion > best {
                        best = depletion;
                        l = i;
                    }
                }
            }
            if l >= N {
                continue;
            }
            let kappa = rate / c[l];
            for (row, &nu) in m.iter_mut().zip(reaction.nu.iter()) {
                row[l] += sign * nu * kappa;
            }
            ps[dir] = (l, kappa);
        }
    }
    (m, pseudo)
}

/// `A·c₀ + a·c_f` for the frozen matrix of [`quasi_linear`], reaction by
/// reaction: each reaction's net extent rate `κ_f·c₀,l − κ_r·c₀,m` is
/// rounded once and given to every species by its stoichiometry, so a fast
/// reversible reaction near equilibrium leaves only the rounding of its
/// small net rate in the conserved totals.
fn frozen_residual<S: Scalar, const N: usize, const R: usize, const O: usize>(
    model: &Model<S, N, R, O>,
    pseudo: &[[(usize, S); 2]; R],
    forcing: &[S; N],
    a: S,
    c0: &[S; N],
) -> [S; N] {
    let mut r = [S::ZERO; N];
    for i in 0..N {
        r[i] = forcing[i] - a * c0[i];
    }
    for (reaction, ps) in model.reactions.iter().zip(pseudo.iter()) {
        let mut net = S::ZERO;
        for (dir, &(l, kappa)) in ps.iter().enumerate() {
            if let Some(&cl) = c0.get(l) {
                let sign = if dir == 0 { S::ONE } else { -S::ONE };
                net += sign * kappa * cl;
            }
        }
        for (ri, &nu) in r.iter_mut().zip(reaction.nu.iter()) {
            *ri += nu * net;
        }
    }
    r
}

/// One stage of the quasi-linear exponential substep: the exact solution
/// over `tau` of `dc/dt = A·c + a·c_f` from `c0`, with `A` frozen.
fn frozen_stage<S: Scalar, const N: usize>(
    m: &[[S; N]; N],
    forcing: &[S; N],
    r: &[S; N],
    c0: &[S; N],
    tau: S,
) -> Result<[S; N], Singular> {
    let step = phi_step(m, forcing, r, c0, tau, STAGE_SQUARINGS)?;
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

/// One quasi-linear exponential substep (see the module documentation):
/// stage 1 freezes the matrix at `c0`, stage 2 at the midpoint of `c0` and
/// the stage-1 result. Returns both stages' increments.
fn quasi_linear_substep<S: Scalar, const N: usize, const R: usize, const O: usize>(
    model: &Model<S, N, R, O>,
    fr: &TickFrame<S, N, R>,
    t0: S,
    tau: S,
    c0: &[S; N],
    r0: &[[S; 2]; R],
    evals: &mut u16,
) -> Result<([S; N], [S; N]), Singular> {
    let v_start = fr.volume_at(t0);
    let x = (fr.volume_at(t0 + tau) - v_start) / v_start;
    let g = if x != S::ZERO { x.ln1p() / x } else { S::ONE };
    // Mean dilution q_in·ln(V₁/V₀)/(V₁ − V₀) and forcing a·c_f = a·feed/q_in.
    let a = fr.q_in * g / v_start;
    let mut forcing = [S::ZERO; N];
    if fr.q_in > S::ZERO {
        for (fi, &feed) in forcing.iter_mut().zip(fr.feed.iter()) {
            *fi = a * feed / fr.q_in;
        }
    }
    let (m0, p0) = quasi_linear(model, r0, c0, a);
    let res0 = frozen_residual(model, &p0, &forcing, a, c0);
    let d1 = frozen_stage(&m0, &forcing, &res0, c0, tau)?;
    let mut mid = [S::ZERO; N];
    for i in 0..N {
        mid[i] = c0[i] + S::HALF * d1[i];
    }
    let mut rm = [[S::ZERO; 2]; R];
    model.molar_rates(&fr.k, &mid, S::ONE, &mut rm);
    *evals = evals.saturating_add(1);
    let (mm, pm) = quasi_linear(model, &rm, &mid, a);
    let resm = frozen_residual(model, &pm, &forcing, a, c0);
    let d2 = frozen_stage(&mm, &forcing, &resm, c0, tau)?;
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

/// The largest Patankar weight `h·ρ·|ν_l|/c_l` of any reaction direction
/// (weighted by its most depleted reactant, as [`PatankarSystem`] does) at
/// concentrations `c` with rates `r`: how stiff a step of `h` would be.
fn stiffness<S: Scalar, const N: usize, const R: usize, const O: usize>(
    model: &Model<S, N, R, O>,
    r: &[[S; 2]; R],
    c: &[S; N],
    h: S,
) -> S {
    let mut worst = S::ZERO;
    for (reaction, p) in model.reactions.iter().zip(r.iter()) {
        for (dir, &rate) in p.iter().enumerate() {
            if !(rate > S::ZERO) {
                continue;
            }
            let sign = if dir == 0 { S::ONE } else { -S::ONE };
            for (&nu, &ci) in reaction.nu.iter().zip(c.iter()) {
                let consumed = -sign * nu;
                if consumed > S::ZERO && ci > S::MIN_POSITIVE {
                    worst = worst.max(h * rate * consumed / ci);
                }
            }
        }
    }
    worst
}

/// Increment of the amounts over a tick by the exponential MPRK22 under
/// error control (see the module documentation).
///
/// The first substep: the whole tick when its largest Patankar weight is
/// at most [`FIRST_WEIGHT`], or when the state barely moves (the tick's
/// change at the starting slope, `h·|dc/dt|`, within the tolerance of every
/// species' size — a steady state); otherwise sized so that its largest
/// weight is `FIRST_WEIGHT`. Rates are evaluated once per accepted state
/// (a rejected substep reuses them).
#[inline(never)]
pub(crate) fn substepped<S: Scalar, const N: usize, const R: usize, const O: usize>(
    model: &Model<S, N, R, O>,
    fr: &TickFrame<S, N, R>,
    y0: &[S; N],
    evals: &mut u16,
) -> Result<([S; N], Substeps), Singular> {
    let h = fr.h;
    let inv_v0 = S::ONE / fr.v0;
    let mut c = [S::ZERO; N];
    let mut floor = S::ZERO;
    for i in 0..N {
        c[i] = y0[i] * inv_v0;
        let cf = if fr.q_in > S::ZERO {
            fr.feed[i] / fr.q_in
        } else {
            S::ZERO
        };
        floor = floor.max(c[i]).max(cf);
    }
    // Species below a millionth of the largest concentration count
    // absolutely (their relative error is not meaningful).
    floor = floor * S::of(FLOOR) + S::MIN_POSITIVE;
    let c_start = c;
    let tol = S::of(TOLERANCE);
    let mut r = [[S::ZERO; 2]; R];
    model.molar_rates(&fr.k, &c, S::ONE, &mut r);
    *evals = evals.saturating_add(1);
    let first_weight = stiffness(model, &r, &c, h);
    let mut tau = h;
    if first_weight > S::of(FIRST_WEIGHT) {
        // The starting slope dc/dt = (feed − q_in·c)/V₀ + Σ_j ν_j·(ρ_f − ρ_r).
        let mut activity = S::ZERO;
        for i in 0..N {
            let mut slope = (fr.feed[i] - fr.q_in * c[i]) * inv_v0;
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
        // The whole tick of a mild state by the exponential MPRK22 (cheap);
        // every other substep by the quasi-linear exponential, which is
        // exact for first-order decays however fast.
        let (d1, d2) = if attempts == 1 && step == h && !(first_weight > S::of(WHOLE_WEIGHT)) {
            substep(model, fr, t, step, &c, &r, evals)?
        } else {
            quasi_linear_substep(model, fr, t, step, &c, &r, evals)?
        };
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
    // Amounts: y = c·V₁, so y − y0 = c_start·(V₁ − V₀) + (c − c_start)·V₁.
    let dv = fr.v1 - fr.v0;
    let mut d = [S::ZERO; N];
    for i in 0..N {
        d[i] = c_start[i] * dv + (c[i] - c_start[i]) * fr.v1;
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
    evals: &mut u16,
) -> Result<([S; N], [S; N]), Singular> {
    let mut r0 = [[S::ZERO; 2]; R];
    model.molar_rates(&fr.k, c0, S::ONE, &mut r0);
    substep(model, fr, S::ZERO, tau, c0, &r0, evals)
}
