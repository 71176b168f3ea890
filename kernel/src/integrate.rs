//! Integrators for the component balances over one tick.
//!
//! The holdup trajectory of the tick is settled first (see
//! [`crate::vessel`]); what is left is the component system with the inputs
//! held: feed `F_i` (mol/s), outflow `q` (m³/s), holdup `V(t)` linear from
//! `V₀` to `V₁`, temperature fixed. Which method a network gets is decided
//! once, at configuration ([`crate::model::Network`]):
//!
//! * `exact` — closed form for the uncoupled class (no reaction, or only
//!   first-order consumption without products): with no reaction,
//!   `c(t) = c_f + (c₀ − c_f)·(V₀/V(t))^{q_in/(q_in − q_out)}`, which at
//!   constant volume is `c_f + (c₀ − c_f)·e^{−λt}`; with first-order
//!   consumption at constant volume, `λ = q/V + k`. Written with `expm1` and
//!   `ln1p` so that `f32` keeps its digits when `λh` is 1e-6.
//! * [`linear`] — every other first-order network (A → B, A → B → C,
//!   A ⇌ B, …): the exact solution of the held affine linear system,
//!   `n₁ = n₀ + h·φ₁(hM)·(M·n₀ + f)`, by scaling and squaring; exact at
//!   constant holdup, second order while the holdup changes.
//! * `mprk22_step` — every other network, by the modified
//!   Patankar–Runge–Kutta scheme MPRK22 of Burchard, Deleersnijder &
//!   Meister (Appl. Numer. Math. 47 (2003) 1–30): second order,
//!   unconditionally positive, and conservative — every linear invariant of
//!   the stoichiometry (`w·ν_j = 0`) is kept to rounding at any tick. Each
//!   reaction direction is weighted by one species (its most depleted
//!   reactant), so the stoichiometric ratios of every reaction hold exactly.
//!   Each stage solves one small system on the stack: only the species that
//!   weight a direction (the limiting ones) are unknowns. Two ways through
//!   a tick, both with a steady state of the held inputs as a fixed point:
//!   * `whole_step` — a *mild* tick (every direction's weight and the
//!     dilution `h·q_in/V` at most 0.02): MPRK22 on the concentrations with
//!     feed, dilution and reactions together; two stages.
//!   * [`stiff`] — every other tick: error-controlled substeps of the
//!     quasi-linear exponential (each direction frozen as first order in
//!     its limiting reactant, the frozen linear system stepped exactly;
//!     exact for first-order decays however fast), at most
//!     [`stiff::MAX_SUBSTEPS`] per tick.
//! * [`euler_step`], [`rk4_step`] — reference methods for work–precision
//!   comparisons, generic over any [`Rhs`]. Not positive: explicit Euler
//!   goes negative at `λh > 1` and diverges at `λh > 2`.
//!
//! Bounds: `exact` does `N` `expm1` and one `ln1p`; `linear` at most
//! `m + 1 + 2·s_max` products of `N × N` matrices (`s_max` from
//! [`crate::Model::max_squarings`]); `whole_step` two rate evaluations and
//! two solves of at most `min(N, 2R)` unknowns; any other tick one rate
//! evaluation and an assembly to find that out, then per substep (at most
//! `MAX_SUBSTEPS`) one rate evaluation and two exponentials of the frozen
//! network, each at most `m + 1 + 2·STAGE_SQUARINGS` products.
//! No loop depends on input values beyond these bounds.
//!
//! Cost on the Cortex-M4F (kernel/firmware/measure.sh): the reference tick
//! (3 species, 2 reactions, mild) went from 2,839 instructions with every
//! tick split and dense `3 × 3` stage solves to about 1,400.

pub mod linear;
pub mod stiff;

use crate::linalg::{solve, zeros, Singular};
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

/// The outcome of one tick's integrator: the increment of the amounts, and
/// the new amounts computed without cancellation for species whose total
/// should be set rather than incremented (see [`linear::phi_step`]).
#[derive(Clone, Copy, Debug)]
pub(crate) struct Advance<S, const N: usize> {
    /// `n₁ − n₀`.
    pub(crate) delta: [S; N],
    /// `n₁` where `use_direct` says so.
    pub(crate) direct: [S; N],
    /// Species whose new amount is taken from `direct`.
    pub(crate) use_direct: [bool; N],
}

impl<S: Scalar, const N: usize> Advance<S, N> {
    /// An increment to be added to every amount.
    #[inline]
    pub(crate) fn increment(delta: [S; N]) -> Self {
        Self {
            delta,
            direct: [S::ZERO; N],
            use_direct: [false; N],
        }
    }
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

    /// The mean of `1/V` over `[t, t + τ]`, 1/m³: `ln(V_b/V_a)/(V_b − V_a)`,
    /// written `g/V_a` with `g = ln(1 + x)/x`, `x = (V_b − V_a)/V_a` (→ 1 at
    /// constant holdup), so that `f32` keeps its digits when the holdup
    /// barely changes. A flow times it is the mean dilution rate.
    #[inline]
    pub fn mean_inverse_volume(&self, t: S, tau: S) -> S {
        let va = self.volume_at(t);
        let x = (self.volume_at(t + tau) - va) / va;
        let g = if x != S::ZERO { x.ln1p() / x } else { S::ONE };
        g / va
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
    // Exponent of the dilution: q_in·∫1/V dt.
    let inv_v = fr.mean_inverse_volume(S::ZERO, h);
    let dilution = fr.q_in * h * inv_v;
    let mut d = [S::ZERO; N];
    // Species without first-order consumption share one exponent: one
    // `expm1` serves them all.
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
        d[i] = fr.v1 * (fr.feed[i] * h * inv_v * psi - c0 * phi) + x * y0[i];
    }
    Some(d)
}

/// The species that weights a reaction direction (`sign` +1 forward, −1
/// reverse): its most depleted reactant, the largest `|ν_i|/den_i`
/// (compared as `|ν_i|·den_l > |ν_l|·den_i`, no division), with its `|ν_l|`
/// and `den_l`. `None` when the direction consumes nothing, or when one of
/// its reactants is exhausted (the direction cannot run). Shared by the
/// Patankar stages and the quasi-linear exponential ([`stiff`]), so both
/// write a direction against the same species.
#[inline(always)]
pub(crate) fn limiting<S: Scalar, const N: usize>(
    nu: &[S; N],
    den: &[S; N],
    sign: S,
) -> Option<(usize, S, S)> {
    let mut l = N;
    let mut nu_l = S::ZERO;
    let mut den_l = S::ONE;
    for (i, (&n, &di)) in nu.iter().zip(den.iter()).enumerate() {
        let consumed = -sign * n;
        if consumed > S::ZERO {
            if !(di > tiny()) {
                return None;
            }
            if l >= N || consumed * den_l > nu_l * di {
                nu_l = consumed;
                den_l = di;
                l = i;
            }
        }
    }
    (l < N).then_some((l, nu_l, den_l))
}

/// Below this a denominator of a Patankar weight counts as zero.
#[inline]
fn tiny<S: Scalar>() -> S {
    S::MIN_POSITIVE
}

/// The linear system of one Patankar stage, `(diag(a) − U)·y = b`.
///
/// Each reaction direction with (stage-averaged) molar rate `ρ_j` is
/// weighted by `y_l/den_l` of its most depleted reactant `l`, so every
/// reaction keeps its stoichiometric ratios exactly; it adds
/// `s_j·w_j` (`s_j` its signed stoichiometry, `w_j = h·ρ_j/den_l`) to column
/// `l` of `U`. `U` is therefore zero outside the columns of the weighting
/// species `L` (at most one per direction, often fewer: competing reactions
/// share their limiting reagent), and the rows outside `L` are decoupled
/// once `y_L` is known. So `y_L` is solved from the `|L| × |L|` block
/// first and every other amount follows from its own row: Gaussian
/// elimination of the full system with the `L` rows first, exact in the
/// same arithmetic, at a division for one weighting species and a pivoted
/// `2 × 2` for two, against a pivoted `N × N` solve (`N³/3` multiply-adds)
/// for the dense form.
pub(crate) struct PatankarSystem<S, const N: usize> {
    /// `u[l]` is column `l` of `U`.
    u: [[S; N]; N],
    /// Column `l` is non-zero (species `l` weights some direction).
    weighting: [bool; N],
    /// Largest `w_j·|ν_l|` of the stage: above one the stage is stiff.
    stiffest: S,
}

impl<S: Scalar, const N: usize> PatankarSystem<S, N> {
    /// Assemble the stage's `U` for rates `rho` and weights' denominators
    /// `den` (amounts or concentrations, consistently).
    fn assemble<const R: usize, const O: usize>(
        model: &Model<S, N, R, O>,
        rho: &[[S; 2]; R],
        den: &[S; N],
        h: S,
    ) -> Self {
        let mut sys = Self {
            u: zeros(),
            weighting: [false; N],
            stiffest: S::ZERO,
        };
        for (reaction, p) in model.reactions.iter().zip(rho.iter()) {
            for (dir, &rate) in p.iter().enumerate() {
                if !(rate > S::ZERO) {
                    continue;
                }
                let sign = if dir == 0 { S::ONE } else { -S::ONE };
                let Some((l, nu_l, den_l)) = limiting(&reaction.nu, den, sign) else {
                    continue;
                };
                let (Some(column), Some(flag)) = (sys.u.get_mut(l), sys.weighting.get_mut(l))
                else {
                    continue;
                };
                let w = h * rate / den_l;
                sys.stiffest = sys.stiffest.max(w * nu_l);
                let sw = sign * w;
                for (uc, &nu) in column.iter_mut().zip(reaction.nu.iter()) {
                    *uc += sw * nu;
                }
                *flag = true;
            }
        }
        sys
    }

    /// Solve `(diag(a) − U)·y = b` and return `d = y − y0`, given
    /// `e = b − a∘y0` (which the caller forms exactly: zero for a closed
    /// reaction stage).
    ///
    /// Two forms of the result: when the stage is mild (every
    /// `w_j·|ν_l| ≤ 1`) the increments are `(e + U·y_L)/a`, which keeps the
    /// digits of a small change in `f32`; when it is stiff the weighting
    /// species take their solved amounts themselves and the others
    /// `(b + U·y_L)/a`, clipped at zero, so that a `k·h` of 1e4 does not
    /// make the increment a difference of numbers 1e8 times larger (which
    /// lost the product's mass to rounding).
    #[inline(always)]
    fn solve(&self, a: &[S; N], b: &[S; N], e: &[S; N], y0: &[S; N]) -> Result<[S; N], Singular> {
        let mut first = N;
        let mut second = N;
        let mut m = 0usize;
        for (i, &w) in self.weighting.iter().enumerate() {
            if w {
                if m == 0 {
                    first = i;
                } else if m == 1 {
                    second = i;
                }
                m += 1;
            }
        }
        // z: the new amounts of the weighting species (zero elsewhere).
        let mut z = [S::ZERO; N];
        if m == 0 {
            // Nothing runs: y = b/a.
        } else if m == 1 && first < N {
            // One column: one division.
            let p = first;
            z[p] = b[p] / (a[p] - self.u[p][p]);
        } else if m == 2 && first < N && second < N {
            let (p, q) = (first, second);
            // [[a_p − U_pp, −U_pq], [−U_qp, a_q − U_qq]]·[z_p, z_q] = [b_p, b_q],
            // with U_ij = u[j][i]; pivoted elimination.
            let mut r0 = [a[p] - self.u[p][p], -self.u[q][p], b[p]];
            let mut r1 = [-self.u[p][q], a[q] - self.u[q][q], b[q]];
            if r1[0].abs() > r0[0].abs() {
                // Swapping the equations does not reorder the unknowns.
                core::mem::swap(&mut r0, &mut r1);
            }
            let f = r1[0] / r0[0];
            z[q] = (r1[2] - f * r0[2]) / (r1[1] - f * r0[1]);
            z[p] = (r0[2] - r0[1] * z[q]) / r0[0];
        } else {
            // Three or more weighting species: the dense system (its other
            // columns are zero).
            let mut full = [[S::ZERO; N]; N];
            for (i, row) in full.iter_mut().enumerate() {
                for (j, x) in row.iter_mut().enumerate() {
                    *x = -self.u[j][i];
                }
                row[i] += a[i];
            }
            let mut y = *b;
            solve(&mut full, &mut y, N)?;
            for ((zi, &yi), &w) in z.iter_mut().zip(y.iter()).zip(self.weighting.iter()) {
                if w {
                    *zi = yi;
                }
            }
        }
        // U·z.
        let mut uz = [S::ZERO; N];
        for (column, &zl) in self.u.iter().zip(z.iter()) {
            for (x, &uil) in uz.iter_mut().zip(column.iter()) {
                *x += uil * zl;
            }
        }
        let mut d = [S::ZERO; N];
        if self.stiffest > S::ONE {
            for i in 0..N {
                let y = if self.weighting[i] {
                    z[i]
                } else {
                    (b[i] + uz[i]) / a[i]
                };
                d[i] = y.max(S::ZERO) - y0[i];
            }
        } else {
            for i in 0..N {
                d[i] = (e[i] + uz[i]) / a[i];
            }
        }
        if d.iter().all(|x| x.is_finite()) {
            Ok(d)
        } else {
            Err(Singular)
        }
    }
}

/// How a tick went through [`mprk22_step`].
#[derive(Clone, Copy, Debug)]
pub(crate) struct Mprk22Outcome<S, const N: usize> {
    /// Increment of the amounts, mol.
    pub(crate) delta: [S; N],
    /// The substeps taken (one accepted for a tick stepped whole).
    pub(crate) substeps: stiff::Substeps,
}

/// Largest Patankar weight `w·|ν_l|` of a reaction direction, and largest
/// dilution `h·q_in/V`, for which a tick is stepped whole by the plain
/// MPRK22 ([`whole_step`]): there its error, about `0.06·(2w)³`, is below
/// 1e-6 relative however the network is made.
const MILD: f64 = 0.02;

/// Increment of the amounts over a tick of a general network.
///
/// *Mild* (every reaction direction's weight at the tick's start and the
/// dilution at both ends at most [`MILD`]): [`whole_step`], the plain
/// MPRK22 over the whole tick — two Patankar stages and two rate
/// evaluations, a steady state a fixed point. This is the gateway's
/// everyday tick (the reference tick on the Cortex-M4F).
///
/// *Otherwise*: [`stiff::substepped`] — error-controlled substeps (one
/// substep when the state is steady), at most [`stiff::MAX_SUBSTEPS`].
pub(crate) fn mprk22_step<S: Scalar, const N: usize, const R: usize, const O: usize>(
    model: &Model<S, N, R, O>,
    fr: &TickFrame<S, N, R>,
    y0: &[S; N],
    evals: &mut u16,
) -> Result<Mprk22Outcome<S, N>, Singular> {
    let h = fr.h;
    let mild = S::of(MILD);
    let inv_v0 = S::ONE / fr.v0;
    let mut c0 = [S::ZERO; N];
    for (c, &y) in c0.iter_mut().zip(y0.iter()) {
        *c = y * inv_v0;
    }
    let mut r0 = [[S::ZERO; 2]; R];
    model.molar_rates(&fr.k, &c0, S::ONE, &mut r0);
    *evals = evals.saturating_add(1);
    let sys = PatankarSystem::assemble(model, &r0, &c0, h);
    if h * fr.q_in * inv_v0 <= mild && h * fr.q_in / fr.v1 <= mild && sys.stiffest <= mild {
        let delta = whole_step(model, fr, &c0, &r0, &sys, evals)?;
        return Ok(Mprk22Outcome {
            delta,
            substeps: stiff::Substeps {
                accepted: 1,
                ..Default::default()
            },
        });
    }
    let (delta, substeps) = stiff::substepped(model, fr, &c0, &r0, sys.stiffest, evals)?;
    Ok(Mprk22Outcome { delta, substeps })
}

/// The whole-tick MPRK22 of [`mprk22_step`] on a mild tick, given the
/// concentrations `c0` at the tick's start, their rates `r0` and the stage-1
/// system `sys`. Stage 1 (Patankar–Euler) at the tick's start; stage 2 with
/// the trapezoidal average of sources, sinks and rates, every sink weighted
/// by `c_new/c₁` (Burchard, Deleersnijder & Meister 2003, `α = 1`).
pub(crate) fn whole_step<S: Scalar, const N: usize, const R: usize, const O: usize>(
    model: &Model<S, N, R, O>,
    fr: &TickFrame<S, N, R>,
    c0: &[S; N],
    r0: &[[S; 2]; R],
    sys: &PatankarSystem<S, N>,
    evals: &mut u16,
) -> Result<[S; N], Singular> {
    let h = fr.h;
    let inv_v0 = S::ONE / fr.v0;
    let inv_v1 = S::ONE / fr.v1;
    // Dilution rates (1/s) at both ends.
    let (dil0, dil1) = (fr.q_in * inv_v0, fr.q_in * inv_v1);
    // Stage 1.
    let a1 = S::ONE + h * dil0;
    let mut a = [a1; N];
    let mut b = [S::ZERO; N];
    let mut e = [S::ZERO; N];
    for i in 0..N {
        let src = h * fr.feed[i] * inv_v0;
        b[i] = c0[i] + src;
        e[i] = src - h * dil0 * c0[i];
    }
    let d1 = sys.solve(&a, &b, &e, c0)?;
    let mut c1 = [S::ZERO; N];
    for i in 0..N {
        c1[i] = (c0[i] + d1[i]).max(S::ZERO);
    }
    // Stage 2.
    let mut r1 = [[S::ZERO; 2]; R];
    model.molar_rates(&fr.k, &c1, S::ONE, &mut r1);
    *evals = evals.saturating_add(1);
    let mut rho = [[S::ZERO; 2]; R];
    for ((m, p0), p1) in rho.iter_mut().zip(r0.iter()).zip(r1.iter()) {
        m[0] = S::HALF * (p0[0] + p1[0]);
        m[1] = S::HALF * (p0[1] + p1[1]);
    }
    let sys = PatankarSystem::assemble(model, &rho, &c1, h);
    let half_h = S::HALF * h;
    for i in 0..N {
        // Trapezoidal source; sink (dil0·c0 + dil1·c1)/2 weighted by c_new/c1.
        let src = half_h * fr.feed[i] * (inv_v0 + inv_v1);
        let ratio = if c1[i] > tiny() {
            c0[i] / c1[i]
        } else {
            S::ONE
        };
        let sink = half_h * (dil0 * ratio + dil1);
        a[i] = S::ONE + sink;
        b[i] = c0[i] + src;
        e[i] = src - sink * c0[i];
    }
    let d2 = sys.solve(&a, &b, &e, c0)?;
    // Amounts: y = c·V₁, so y − y0 = c0·(V₁ − V₀) + d·V₁.
    let dv = fr.v1 - fr.v0;
    let mut d = [S::ZERO; N];
    for i in 0..N {
        d[i] = c0[i] * dv + d2[i] * fr.v1;
    }
    Ok(d)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::geometry::{Bottom, Geometry, Shape};
    use crate::model::{Kinetics, Method, ReactionSpec, VesselSpec};
    use crate::Outlet;

    fn kinetics<const N: usize>(k: f64, orders: [f64; N]) -> Kinetics<f64, N> {
        Kinetics {
            rate_constant: k,
            activation_energy: 0.0,
            orders,
        }
    }

    fn network<const N: usize, const R: usize>(
        reactions: &[([f64; N], f64, Option<f64>)],
    ) -> Model<f64, N, R, 1> {
        let mut specs = heapless::Vec::new();
        for &(nu, kf, kr) in reactions {
            let fwd = nu.map(|x| if x < 0.0 { -x } else { 0.0 });
            let rev = nu.map(|x| if x > 0.0 { x } else { 0.0 });
            let _ = specs.push(ReactionSpec {
                stoichiometry: nu,
                forward: kinetics(kf, fwd),
                reverse: kr.map(|k| kinetics(k, rev)),
                reference_temperature: 300.0,
            });
        }
        let mut outlets = heapless::Vec::new();
        let _ = outlets.push(Outlet::Measured);
        Model::new(VesselSpec {
            geometry: Geometry::new(Shape::VerticalCylinder {
                diameter: 1.0,
                height: 2.0,
                bottom: Bottom::Flat,
            })
            .unwrap(),
            outlets,
            reactions: specs,
            min_holdup: 0.01,
            tick_ms: 1000,
            method: Method::Mprk22,
        })
        .unwrap()
    }

    /// The Patankar stage as published: the dense `N × N` system
    /// `(I + Σ_j h·ρ_j·ν_j·e_lᵀ/den_l)·y = y0`, weighted by each direction's
    /// most depleted reactant, solved by pivoted elimination.
    fn dense_stage<const N: usize, const R: usize>(
        model: &Model<f64, N, R, 1>,
        rho: &[[f64; 2]; R],
        den: &[f64; N],
        y0: &[f64; N],
        h: f64,
    ) -> [f64; N] {
        let mut a = [[0.0; N]; N];
        for (i, row) in a.iter_mut().enumerate() {
            row[i] = 1.0;
        }
        for (r, p) in model.reactions.iter().zip(rho.iter()) {
            for (dir, &rate) in p.iter().enumerate() {
                let sign = if dir == 0 { 1.0 } else { -1.0 };
                let l = (0..N)
                    .filter(|&i| sign * r.nu[i] < 0.0)
                    .max_by(|&i, &j| {
                        (-sign * r.nu[i] / den[i]).total_cmp(&(-sign * r.nu[j] / den[j]))
                    })
                    .unwrap();
                for i in 0..N {
                    a[i][l] -= sign * r.nu[i] * h * rate / den[l];
                }
            }
        }
        let mut y = *y0;
        solve(&mut a, &mut y, N).unwrap();
        y
    }

    fn frame<const N: usize, const R: usize>(
        model: &Model<f64, N, R, 1>,
        h: f64,
        v: f64,
        q: f64,
        feed: [f64; N],
    ) -> TickFrame<f64, N, R> {
        let mut k = [[0.0; 2]; R];
        model.rate_constants(300.0, &mut k);
        TickFrame {
            h,
            v0: v,
            v1: v,
            q_in: q,
            q_out: q,
            feed: feed.map(|c| q * c),
            k,
        }
    }

    /// A steady state of the CSTR balances is a fixed point of the step,
    /// whole or substepped: 2A → B (rate k·c_A²) fed with A at c_f, where
    /// `D·(c_f − c) = 2k·c²` gives `c = (−D + √(D² + 8kD·c_f))/(4k)` and
    /// `c_B = k·c²/D` (the quadratic formula on the CSTR balance; Levenspiel
    /// ch. 5 for the balance, from memory).
    #[test]
    fn a_steady_state_is_a_fixed_point_whole_and_stiff() {
        let (k, cf, v, q) = (2e-3, 50.0, 2.0, 1e-3);
        let model = network::<2, 1>(&[([-2.0, 1.0], k, None)]);
        let d = q / v;
        let ca = (-d + (d * d + 8.0 * k * d * cf).sqrt()) / (4.0 * k);
        let cb = k * ca * ca / d;
        let y0 = [ca * v, cb * v];
        // 1 s: mild. 1000 s: 2h·k·c_A ≈ 10, stiff; 1e5 s: 50 residence
        // times in one tick. All see no error at the steady state and take
        // one step: the whole MPRK22 (two rate evaluations) or one substep
        // (the starting rates and one at the midpoint).
        for (h, evals_expected, substeps) in [(1.0, 2, 1), (1000.0, 2, 1), (1e5, 2, 1)] {
            let fr = frame(&model, h, v, q, [cf, 0.0]);
            let mut evals = 0u16;
            let out = mprk22_step(&model, &fr, &y0, &mut evals).unwrap();
            assert_eq!(evals, evals_expected, "tick {h} s");
            assert_eq!(out.substeps.accepted + out.substeps.rejected, substeps);
            for i in 0..2 {
                assert!(
                    out.delta[i].abs() <= 1e-13 * y0[i],
                    "tick {h} s: species {i} moved {:e}",
                    out.delta[i]
                );
            }
        }
    }

    /// The quasi-linear exponential substep is second order: on 2A → B in
    /// a closed vessel (Riccati closed form `c_A = c₀/(1 + 2k·c₀·t)`,
    /// derived from the balance), halving a single substep cuts its error
    /// about eightfold (local error O(τ³)).
    #[test]
    fn quasi_linear_substep_is_second_order() {
        let model = network::<2, 1>(&[([-2.0, 1.0], 1.0, None)]);
        let c0 = 1.0;
        let mut last = f64::NAN;
        for tau in [0.04, 0.02, 0.01, 0.005, 0.0025] {
            let fr = frame(&model, tau, 1.0, 0.0, [0.0, 0.0]);
            let (_, d2) = stiff::tests_substep(&model, &fr, tau, &[c0, 0.0]).unwrap();
            let exact = c0 / (1.0 + 2.0 * c0 * tau);
            let err = ((c0 + d2[0]) - exact).abs();
            if last.is_finite() {
                let ratio = last / err;
                assert!(ratio > 7.0 && ratio < 9.0, "τ {tau}: ratio {ratio}");
            }
            last = err;
        }
    }

    /// The reduced solve (weighting species first) against the dense
    /// system, for one, two and three weighting species, mild and stiff.
    #[test]
    fn reduced_patankar_solve_matches_the_dense_system() {
        // A + B → C, A → D, C ⇌ B + D: A limits both forward reactions in
        // the first state (one column), B the first in the second (two); C
        // weights the third forward (three), D its reverse (four).
        let model = network::<4, 3>(&[
            ([-1.0, -1.0, 1.0, 0.0], 1.0, None),
            ([-1.0, 0.0, 0.0, 1.0], 1.0, None),
            ([0.0, 1.0, -1.0, 1.0], 1.0, Some(1.0)),
        ]);
        let cases: [([f64; 4], [[f64; 2]; 3], usize); 4] = [
            (
                [1.0, 5.0, 2.0, 0.5],
                [[0.3, 0.0], [0.2, 0.0], [0.0, 0.0]],
                1,
            ),
            (
                [4.0, 1.0, 2.0, 0.5],
                [[0.3, 0.0], [0.2, 0.0], [0.0, 0.0]],
                2,
            ),
            (
                [4.0, 1.0, 2.0, 0.5],
                [[0.3, 0.0], [0.2, 0.0], [0.4, 0.0]],
                3,
            ),
            (
                [4.0, 1.0, 2.0, 0.5],
                [[30.0, 0.0], [20.0, 0.0], [40.0, 10.0]],
                4,
            ),
        ];
        for (y0, rho, columns) in cases {
            for h in [0.01, 1.0, 100.0] {
                let sys = PatankarSystem::assemble(&model, &rho, &y0, h);
                assert_eq!(sys.weighting.iter().filter(|&&w| w).count(), columns);
                let d = sys.solve(&[1.0; 4], &y0, &[0.0; 4], &y0).unwrap();
                let mut dense = dense_stage(&model, &rho, &y0, &y0, h);
                // A stiff stage clips at zero (the dense solution can go
                // negative when co-reactants couple several columns); then
                // the invariants hold only up to what was clipped.
                let clipped = dense.iter().any(|&x| x < 0.0);
                assert!(!clipped || sys.stiffest > 1.0);
                if sys.stiffest > 1.0 {
                    dense = dense.map(|x| x.max(0.0));
                }
                for i in 0..4 {
                    let y = y0[i] + d[i];
                    assert!(y >= 0.0);
                    assert!(
                        (y - dense[i]).abs() <= 1e-13 * (1.0 + dense[i].abs()),
                        "h {h}, {columns} columns, species {i}: {y} against dense {}",
                        dense[i]
                    );
                }
                if clipped {
                    continue;
                }
                // The network's linear invariants (w·ν_j = 0 for every j;
                // hand algebra): (1, 0, 1, 1) and (0, 1, 1, 0).
                for w in [[1.0, 0.0, 1.0, 1.0], [0.0, 1.0, 1.0, 0.0]] {
                    let change: f64 = (0..4).map(|i| w[i] * d[i]).sum();
                    let total: f64 = (0..4).map(|i| w[i] * y0[i]).sum();
                    assert!(
                        change.abs() <= 1e-14 * total,
                        "h {h}: invariant moved {change:e}"
                    );
                }
            }
        }
    }

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
