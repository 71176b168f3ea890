//! The stiff and first-order cases of `holdup verify`: a constant-volume
//! CSTR whose reactions run far faster than the tick (k·h from 0.01 to 30),
//! held at its steady state and stepped off it, series and reversible
//! first-order networks, and a filling and drawing vessel, each against a
//! closed form or a quadrature of the balance's integrating-factor solution.

use super::{cylinder, reaction, rel, scalar_name, series_closed_form, vessel, CaseResult};
use holdup_kernel::{Inputs, Kinetics, Method, Outlet, ReactionSpec, Scalar, Vessel};

/// Tolerance of the stiff cases in each precision: issue 11's target, 1e-9
/// relative in `f64` and 1e-5 in `f32` at any k·h.
fn stiff_tolerance<S: Scalar>() -> f64 {
    if scalar_name::<S>() == "f32" {
        1e-5
    } else {
        1e-9
    }
}

/// The constant-volume CSTR of the stiff cases: V = 2 m³ with
/// q = 0.002 m³/s in and out (τ = 1000 s, λ = q/V = 1e-3 1/s), fed with A at
/// 1000 mol/m³, tick 1 s, so a rate constant k in 1/s is k·h.
const STIFF_V: f64 = 2.0;
const STIFF_Q: f64 = 2e-3;
const STIFF_AF: f64 = 1000.0;
/// Ticks of a held steady state (10 minutes at 1 s).
const HELD_TICKS: u32 = 600;
/// Ticks of a step response: 3τ, so the slow (dilution) mode is seen too.
const STEP_TICKS: u32 = 3000;

/// A vessel of the stiff cases: `reactions` in a 2 m × 5 m flat cylinder
/// with one measured outlet, tick 1 s, `Method::Auto`, holding `v0` m³ at
/// concentrations `start`.
fn stiff_cstr<S: Scalar, const N: usize, const R: usize>(
    reactions: &[ReactionSpec<S, N>],
    v0: f64,
    start: [f64; N],
) -> Vessel<S, N, R, 1> {
    vessel(
        cylinder(2.0, 5.0),
        [Outlet::Measured],
        reactions,
        1000,
        Method::Auto,
        v0,
        start,
    )
}

/// One inlet and one measured outlet, held over every tick.
fn held<S: Scalar, const N: usize>(q_in: f64, feed: [f64; N], q_out: f64) -> Inputs<S, N, 1, 1> {
    Inputs {
        inlet_flows: [S::of(q_in)],
        feed: [feed.map(S::of)],
        outlet_flows: [S::of(q_out)],
        temperature: S::of(298.15),
    }
}

/// Step `ves` for `ticks` ticks of 1 s under the held inputs `u`; the
/// largest relative error of every concentration and of the holdup, at every
/// tick `n`, against `exact(t)` = (concentrations, holdup) at `t = n` s.
fn track<S: Scalar, const N: usize, const R: usize>(
    ves: &mut Vessel<S, N, R, 1>,
    u: &Inputs<S, N, 1, 1>,
    ticks: u32,
    mut exact: impl FnMut(f64) -> ([f64; N], f64),
) -> f64 {
    let mut err: f64 = 0.0;
    for n in 1..=ticks {
        ves.step(u);
        let (c_exact, v_exact) = exact(f64::from(n));
        for (c, e) in ves.concentrations().iter().zip(c_exact.iter()) {
            err = err.max(rel(c.to_f64(), *e));
        }
        err = err.max(rel(ves.volume().to_f64(), v_exact));
    }
    err
}

/// Closed form of A → B (first order, rate constant `k`) in a
/// constant-volume CSTR with dilution rate λ = q/V, fed at `feed` = [A_f, B_f]
/// and started at `start` = [A₀, B₀].
///
/// `A' = λ(A_f − A) − kA` is linear with one eigenvalue −(λ + k):
/// `A = A_ss + (A₀ − A_ss)e^{−(λ+k)t}`, `A_ss = λA_f/(λ + k) = A_f/(1 + kτ)`
/// (Fogler, ch. 5, from memory). The total `T = A + B` has no reaction
/// term, `T' = λ(T_f − T)`, so `T = T_f + (T₀ − T_f)e^{−λt}` (the feed step
/// of Levenspiel, ch. 11) and `B = T − A`. (With `B_f = 0` this is
/// [`series_closed_form`] with `k₂ = 0`, whose `C` term would divide by
/// `λ − β = 0`.)
pub fn a_to_b_closed_form(lam: f64, k: f64, feed: [f64; 2], start: [f64; 2], t: f64) -> [f64; 2] {
    let a_ss = lam * feed[0] / (lam + k);
    let a = a_ss + (start[0] - a_ss) * (-(lam + k) * t).exp();
    let t_f = feed[0] + feed[1];
    let total = t_f + (start[0] + start[1] - t_f) * (-lam * t).exp();
    [a, total - a]
}

/// A → B in the stiff CSTR started at its steady state and held there for
/// 10 minutes, `Method::Auto`; every tick must stay at the steady state.
///
/// Reference: `c_A = c_f/(1 + kτ)` (Fogler, *Elements of Chemical Reaction
/// Engineering*, ch. 5, from memory) and `c_B = kτ·c_A` (the B balance at
/// steady state, `0 = −B/τ + kA`).
pub fn a_to_b_steady<S: Scalar>(k: f64, name: &'static str) -> CaseResult {
    let tau = STIFF_V / STIFF_Q;
    let a_ss = STIFF_AF / (1.0 + k * tau);
    let ss = [a_ss, k * tau * a_ss];
    let mut ves: Vessel<S, 2, 1, 1> =
        stiff_cstr(&[reaction([-1.0, 1.0], [1.0, 0.0], k)], STIFF_V, ss);
    let u = held(STIFF_Q, [STIFF_AF, 0.0], STIFF_Q);
    CaseResult {
        name,
        scalar: scalar_name::<S>(),
        source: "Fogler ch. 5 (from memory): c_A = c_f/(1+k tau); c_B = k tau c_A from the balance",
        max_rel_error: track(&mut ves, &u, HELD_TICKS, |_| (ss, STIFF_V)),
        tolerance: stiff_tolerance::<S>(),
    }
}

/// A → B in the stiff CSTR started off its steady state (c_A = 50,
/// c_B = 200 mol/m³, as in issue 11's report), `Method::Auto`, every tick for
/// 3τ against [`a_to_b_closed_form`].
///
/// Reference: `c_A(t) = c_ss + (c₀ − c_ss)e^{−(1/τ+k)t}` (constant-volume
/// CSTR with first-order reaction, derived from the balance; Fogler, ch. 5,
/// from memory) and `c_B` from the unreacting total (Levenspiel, ch. 11).
pub fn a_to_b_step<S: Scalar>(k: f64, name: &'static str) -> CaseResult {
    let start = [50.0, 200.0];
    let feed = [STIFF_AF, 0.0];
    let mut ves: Vessel<S, 2, 1, 1> =
        stiff_cstr(&[reaction([-1.0, 1.0], [1.0, 0.0], k)], STIFF_V, start);
    let u = held(STIFF_Q, feed, STIFF_Q);
    let lam = STIFF_Q / STIFF_V;
    let err = track(&mut ves, &u, STEP_TICKS, |t| {
        (a_to_b_closed_form(lam, k, feed, start, t), STIFF_V)
    });
    CaseResult {
        name,
        scalar: scalar_name::<S>(),
        source: "c_ss+(c0-c_ss)e^(-(1/tau+k)t), Fogler ch. 5 (from memory); B from A+B, Levenspiel ch. 11",
        max_rel_error: err,
        tolerance: stiff_tolerance::<S>(),
    }
}

/// Series A → B → C at stiff ticks (k₁·h = 3, k₂·h = 30) in the stiff CSTR,
/// started off its steady state, `Method::Auto`, every tick for 3τ.
///
/// Reference: [`series_closed_form`] (the triangular linear system solved
/// by hand).
pub fn series_stiff<S: Scalar>() -> CaseResult {
    let (k1, k2) = (3.0, 30.0);
    let start = [50.0, 200.0, 100.0];
    let mut ves: Vessel<S, 3, 2, 1> = stiff_cstr(
        &[
            reaction([-1.0, 1.0, 0.0], [1.0, 0.0, 0.0], k1),
            reaction([0.0, -1.0, 1.0], [0.0, 1.0, 0.0], k2),
        ],
        STIFF_V,
        start,
    );
    let u = held(STIFF_Q, [STIFF_AF, 0.0, 0.0], STIFF_Q);
    let lam = STIFF_Q / STIFF_V;
    let err = track(&mut ves, &u, STEP_TICKS, |t| {
        (series_closed_form(lam, k1, k2, STIFF_AF, start, t), STIFF_V)
    });
    CaseResult {
        name: "A->B->C k1*h = 3, k2*h = 30, step (exact, tick 1 s)",
        scalar: scalar_name::<S>(),
        source: "triangular linear system solved in closed form",
        max_rel_error: err,
        tolerance: stiff_tolerance::<S>(),
    }
}

/// Closed form of the reversible reaction A ⇌ B (first order each way,
/// `k_f`, `k_r`) in a constant-volume CSTR with dilution rate λ = q/V, fed
/// at `feed` = [A_f, B_f], started at `start` = [A₀, B₀].
///
/// The balances are
///
/// ```text
/// A' = λ(A_f − A) − k_f·A + k_r·B
/// B' = λ(B_f − B) + k_f·A − k_r·B
/// ```
///
/// Two combinations decouple them. The total `S = A + B` loses the reaction
/// terms: `S' = λ(S_f − S)`. The net rate `D = k_f·A − k_r·B` obeys
/// `D' = k_f·A' − k_r·B' = λ(D_f − D) − (k_f + k_r)·D` with
/// `D_f = k_f·A_f − k_r·B_f`. So the eigenvalues of the 2×2 system are −λ
/// and −(λ + K), `K = k_f + k_r`, and
///
/// ```text
/// S(t) = S_f + (S₀ − S_f)·e^{−λt}
/// D(t) = D_ss + (D₀ − D_ss)·e^{−(λ+K)t},   D_ss = λ·D_f/(λ + K)
/// A = (D + k_r·S)/K,   B = (k_f·S − D)/K
/// ```
///
/// At steady state `λ(A_f − A_ss) = D_ss`, which is the A balance with
/// `A' = 0` (the tests check the steady state against it).
pub fn reversible_closed_form(
    lam: f64,
    kf: f64,
    kr: f64,
    feed: [f64; 2],
    start: [f64; 2],
    t: f64,
) -> [f64; 2] {
    let big_k = kf + kr;
    let s_f = feed[0] + feed[1];
    let s = s_f + (start[0] + start[1] - s_f) * (-lam * t).exp();
    let d_ss = lam * (kf * feed[0] - kr * feed[1]) / (lam + big_k);
    let d0 = kf * start[0] - kr * start[1];
    let d = d_ss + (d0 - d_ss) * (-(lam + big_k) * t).exp();
    [(d + kr * s) / big_k, (kf * s - d) / big_k]
}

/// A ⇌ B (first order each way) in the stiff CSTR fed with A and some B,
/// started off its steady state, `Method::Auto`, every tick for 3τ.
///
/// Reference: [`reversible_closed_form`], the 2×2 linear system solved by
/// hand (eigenvalues −λ and −(λ + k_f + k_r)).
pub fn reversible<S: Scalar>(kf: f64, kr: f64, name: &'static str) -> CaseResult {
    let start = [50.0, 200.0];
    let feed = [STIFF_AF, 100.0];
    let mut rx = reaction([-1.0, 1.0], [1.0, 0.0], kf);
    rx.reverse = Some(Kinetics {
        rate_constant: S::of(kr),
        activation_energy: S::ZERO,
        orders: [S::ZERO, S::ONE],
    });
    let mut ves: Vessel<S, 2, 1, 1> = stiff_cstr(&[rx], STIFF_V, start);
    let u = held(STIFF_Q, feed, STIFF_Q);
    let lam = STIFF_Q / STIFF_V;
    let err = track(&mut ves, &u, STEP_TICKS, |t| {
        (reversible_closed_form(lam, kf, kr, feed, start, t), STIFF_V)
    });
    CaseResult {
        name,
        scalar: scalar_name::<S>(),
        source: "2x2 linear system solved by hand: modes A+B (-lam), kf A-kr B (-(lam+kf+kr))",
        max_rel_error: err,
        tolerance: stiff_tolerance::<S>(),
    }
}

/// Nodes and weights of the `M`-point Gauss–Legendre rule on [−1, 1].
///
/// The nodes are the roots of the Legendre polynomial `P_M`, found by
/// Newton's method from `cos(π(i + 3/4)/(M + 1/2))`, with `P_M` and its
/// derivative from the three-term recurrence
/// `(j + 1)P_{j+1} = (2j + 1)x·P_j − j·P_{j−1}` and
/// `P_M'(x) = M(x·P_M − P_{M−1})/(x² − 1)`; the weights are
/// `2/((1 − x²)P_M'(x)²)` (Abramowitz & Stegun, *Handbook of Mathematical
/// Functions*, 25.4.29, from memory; the tests check the rule against
/// exact polynomial integrals and A&S's table 25.4).
pub fn gauss_legendre<const M: usize>() -> ([f64; M], [f64; M]) {
    let legendre = |x: f64| {
        let (mut p0, mut p1) = (1.0, x);
        for j in 1..M {
            let j = j as f64;
            let p2 = ((2.0 * j + 1.0) * x * p1 - j * p0) / (j + 1.0);
            p0 = p1;
            p1 = p2;
        }
        let m = M as f64;
        (p1, m * (x * p1 - p0) / (x * x - 1.0))
    };
    let mut nodes = [0.0; M];
    let mut weights = [0.0; M];
    for i in 0..M {
        let mut x = (core::f64::consts::PI * (i as f64 + 0.75) / (M as f64 + 0.5)).cos();
        for _ in 0..100 {
            let (p, dp) = legendre(x);
            let dx = p / dp;
            x -= dx;
            if dx.abs() < 1e-16 {
                break;
            }
        }
        let (_, dp) = legendre(x);
        nodes[i] = x;
        weights[i] = 2.0 / ((1.0 - x * x) * dp * dp);
    }
    (nodes, weights)
}

/// `∫_a^b f` by the 8-point Gauss–Legendre rule on `panels` equal panels.
pub fn composite_gauss(f: impl Fn(f64) -> f64, a: f64, b: f64, panels: u32) -> f64 {
    let (x, w) = gauss_legendre::<8>();
    let width = (b - a) / f64::from(panels);
    let half = 0.5 * width;
    let mut sum = 0.0;
    for p in 0..panels {
        let mid = a + (f64::from(p) + 0.5) * width;
        for (xi, wi) in x.iter().zip(w.iter()) {
            sum += wi * f(mid + half * xi);
        }
    }
    sum * half
}

/// A → B (first order, `k`) with the holdup linear in time: one inlet
/// `q_in` at `feed` = [A_f, B_f], one measured outlet `q_out ≠ q_in`.
#[derive(Clone, Copy, Debug)]
pub struct FillDraw {
    /// Holdup at t = 0, m³.
    pub v0: f64,
    /// Inflow, m³/s.
    pub q_in: f64,
    /// Outflow, m³/s.
    pub q_out: f64,
    /// Rate constant, 1/s.
    pub k: f64,
    /// Feed concentrations of A and B, mol/m³.
    pub feed: [f64; 2],
    /// Concentrations of A and B at t = 0, mol/m³.
    pub start: [f64; 2],
}

impl FillDraw {
    /// The fill/draw cases: 2 m³ to start, feed `[1000, 100]` mol/m³,
    /// starting at `[50, 200]` mol/m³.
    pub fn case(q_in: f64, q_out: f64, k: f64) -> Self {
        Self {
            v0: STIFF_V,
            q_in,
            q_out,
            k,
            feed: [STIFF_AF, 100.0],
            start: [50.0, 200.0],
        }
    }

    /// Holdup at `t`: `V(t) = V₀ + (q_in − q_out)t`.
    pub fn volume(&self, t: f64) -> f64 {
        self.v0 + (self.q_in - self.q_out) * t
    }

    /// `G(t)/G(s)` for the integrating factor of the A balance,
    /// `G(t) = e^{−kt}·(V₀/V(t))^{q_out/(q_in − q_out)}`: the fraction of
    /// the A present at `s` still in the vessel at `t`.
    fn carry(&self, s: f64, t: f64) -> f64 {
        let m = self.q_out / (self.q_in - self.q_out);
        (-self.k * (t - s)).exp() * (self.volume(s) / self.volume(t)).powf(m)
    }

    /// Amount of A at `t1` from the amount `n_a` at `t0`.
    ///
    /// The A balance `n_A' = f_A − (q_out/V(t) + k)·n_A`, `f_A = q_in·A_f`,
    /// has the integrating factor `G` of `carry`:
    /// `n_A(t) = G(t)[n_A0 + ∫₀ᵗ f_A/G(s) ds]`. Written from `t0` instead of
    /// 0 (the same formula, restarted), `n_A(t1) = n_a·G(t1)/G(t0) +
    /// ∫_{t0}^{t1} f_A·G(t1)/G(s) ds`, which keeps `e^{kt}` from overflowing;
    /// the integral by the composite 8-point Gauss–Legendre rule on 64
    /// panels.
    pub fn advance_a(&self, n_a: f64, t0: f64, t1: f64) -> f64 {
        let f_a = self.q_in * self.feed[0];
        n_a * self.carry(t0, t1) + composite_gauss(|s| f_a * self.carry(s, t1), t0, t1, 64)
    }

    /// Total concentration `c_A + c_B` at `t`: the unreacting total follows
    /// `c_f + (c_0 − c_f)·(V₀/V(t))^{q_in/(q_in − q_out)}` (integrating factor
    /// of the balance without reaction).
    pub fn total(&self, t: f64) -> f64 {
        let c_f = self.feed[0] + self.feed[1];
        let c_0 = self.start[0] + self.start[1];
        c_f + (c_0 - c_f) * (self.v0 / self.volume(t)).powf(self.q_in / (self.q_in - self.q_out))
    }
}

/// A → B with the holdup filling (q_in = 2·q_out) and then, in a second run,
/// drawn down (q_out = 3·q_in), 10 minutes each, `Method::Auto`; every tick
/// against [`FillDraw`]'s reference.
///
/// Reference: the integrating-factor solution of the A balance with its
/// integral by composite Gauss–Legendre quadrature, and `c_B` from the
/// unreacting total `c_A + c_B` in closed form; both derived from the
/// balance. The kernel's step for a changing holdup with reactions is of
/// second order in the tick (the matrix exponential with the tick-mean
/// dilution): measured 6.8e-7 (`f64`) over these runs at 1 s, tolerance
/// 1e-6; in `f32` 1e-5, its rounding floor.
pub fn fill_draw<S: Scalar>(k: f64, name: &'static str) -> CaseResult {
    let mut err: f64 = 0.0;
    for (q_in, q_out) in [(4e-3, 2e-3), (1e-3, 3e-3)] {
        let fd = FillDraw::case(q_in, q_out, k);
        let mut ves: Vessel<S, 2, 1, 1> =
            stiff_cstr(&[reaction([-1.0, 1.0], [1.0, 0.0], k)], fd.v0, fd.start);
        let u = held(q_in, fd.feed, q_out);
        // The reference walks with the kernel, one tick at a time.
        let mut n_a = fd.start[0] * fd.v0;
        err = err.max(track(&mut ves, &u, HELD_TICKS, |t| {
            n_a = fd.advance_a(n_a, t - 1.0, t);
            let v = fd.volume(t);
            let a = n_a / v;
            ([a, fd.total(t) - a], v)
        }));
    }
    CaseResult {
        name,
        scalar: scalar_name::<S>(),
        source: "balance, integrating factor; Gauss-Legendre 8 x 64 per tick; B from the total",
        max_rel_error: err,
        tolerance: if scalar_name::<S>() == "f32" {
            1e-5
        } else {
            1e-6
        },
    }
}

#[cfg(test)]
mod tests;
