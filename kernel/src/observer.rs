//! The observer: an extended Kalman filter that corrects the balances with
//! what the plant does measure.
//!
//! State `x = [V, n_1 … n_N, β_1 … β_B]`: holdup (m³), component amounts
//! (mol), and the relative bias of up to four flow meters (a meter with bias
//! `β` reads `(1 + β)` times the true flow, so the balance uses
//! `q = q_read·(1 − β)`, to first order). `D = 1 + N + B` is a const
//! generic; the compiler refuses `D ≤ N`.
//!
//! * **Prediction.** The mean is the kernel's own tick ([`Vessel::step`])
//!   with the bias-corrected flows. The covariance is propagated with the
//!   Jacobian `F` of the balance at the tick's start, discretised by the
//!   Cayley (Padé (1,1)) transform `Φ = (I − hF/2)⁻¹(I + hF/2)`: second
//!   order like the integrator, and contracting wherever the balance is
//!   stable, however stiff (`k·h` of 1e4 leaves `P` bounded, where
//!   `I + hF` would explode). `P ← Φ P Φᵀ + Q h` with diagonal spectral
//!   densities from the configuration; each bias is a random walk.
//! * **Measurements.** Level `z = level(V)`, `H = [1/A(z), 0 …]`; an online
//!   analyser `z = n_i/V`; lab results. Each is a scalar update in Joseph
//!   form, `P ← (I − KH) P (I − KH)ᵀ + K r Kᵀ`, which keeps `P` symmetric
//!   positive definite in `f32` where the short form does not. An
//!   innovation gate rejects a value whose normalised innovation squared
//!   `ν²/S` exceeds the configured chi-square quantile (1 degree of
//!   freedom); each rejection is counted.
//! * **Delayed lab results** (Larsen, Andersen, Ravn & Poulsen, "Incorporation
//!   of time delayed measurements in a discrete-time Kalman filter", IEEE
//!   CDC 1998). The variance of a lab analysis is known when the sample is
//!   drawn, and a Kalman filter's covariance does not depend on measured
//!   values, so at the draw ([`Observer::lab_drawn`]) the covariance is
//!   updated at once as if the result were in, and the filter keeps the
//!   predicted measurement `h(x̂_s)`, `P_s Hᵀ`, `S = H P_s Hᵀ + r` and starts
//!   the product `M = Π (I − K_i H_i) Φ_i` of what happens to the state
//!   afterwards. When the result arrives ([`Observer::lab_result`]) only the
//!   state moves: `x̂ += M P_s Hᵀ ν / S`. In the linear case this equals a
//!   filter re-run from the sample time with the value known there (tested).
//!   No history is stored; memory is `L` fixed slots. A result that is
//!   rejected by the gate, or a sample whose result never comes within the
//!   maximum age, gives the anticipated information back
//!   (`P += M P_s Hᵀ H P_s Mᵀ / S`). A result whose slot is gone is an
//!   error, never ignored. Between draw and result the reported σ already
//!   counts the pending analysis. All of this is exact for samples whose
//!   draw-to-result windows do not overlap (the usual lab rhythm: a result
//!   before the next draw); overlapping samples are fused with the gains
//!   each draw anticipated, an approximation that keeps `P` positive
//!   definite but may leave it somewhat optimistic.
//!
//! Bounded work per tick: one Jacobian (`N²·R`), one `D × D` solve with
//! `D` right-hand sides, two `D × D` products, and one more per pending lab
//! sample; each measurement update is `O(D²)` plus `O(D²)` per pending
//! sample. No heap, no recursion, no panic.

use heapless::Vec;

use crate::linalg::{
    is_positive_definite, left_multiply_identity_tail, mat_mul_identity_tail, zeros,
};
use crate::model::Inputs;
use crate::units::Millis;
use crate::vessel::{Vessel, VesselState};
use crate::{Error, Scalar, StepReport};

mod covariance;
mod lab;
#[cfg(test)]
mod tests;

use covariance::{
    all_finite, clean, concentration_covariance, make_positive_definite, mat_vec, symmetrize,
    transition,
};
use lab::Pending;

/// Most flow meters whose bias is estimated.
pub const MAX_BIASES: usize = 4;

/// A flow meter whose relative bias is part of the state.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
pub enum BiasTarget {
    /// Inlet meter, by index into [`Inputs::inlet_flows`].
    Inlet(u8),
    /// Outlet meter, by index into [`Inputs::outlet_flows`] (a measured outlet).
    Outlet(u8),
    /// A placeholder state with no effect on the balance, so that a host can
    /// compile one state size for configurations with fewer biases. Its
    /// variance only grows with the bias drift; it is not correlated with
    /// anything.
    Unused,
}

/// Raw observer configuration (SI units).
#[derive(Clone, Debug, PartialEq)]
#[cfg_attr(
    feature = "serde",
    derive(serde::Serialize, serde::Deserialize),
    serde(bound(
        serialize = "S: serde::Serialize",
        deserialize = "S: serde::Deserialize<'de> + Copy + Default"
    ))
)]
pub struct ObserverSpec<S, const N: usize> {
    /// Standard deviation of the level transmitter, m.
    pub level_sigma: S,
    /// Process noise density of the holdup, m⁶/s (variance added per second).
    ///
    /// An unexplained change of holdup (a meter reading a little wrong, an
    /// unmetered drain or top-up) is taken to leave or enter at the
    /// vessel's own composition: the noise is added along `[1, c₁, …, c_N]`
    /// in `[V, n₁, …, n_N]`, so a level reading that corrects the holdup
    /// moves each amount by `cᵢ·ΔV` and leaves the concentrations as they
    /// were. (Uncorrelated holdup noise let the correction take out volume
    /// without its solute: an outlet meter stuck at zero for 17 minutes on
    /// a slow tank left the concentration 3σ high for hours.)
    pub volume_noise: S,
    /// Process noise density of each amount, mol²/s.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_arrays"))]
    pub amount_noise: [S; N],
    /// Random-walk density of each meter bias, 1/s (relative² per second).
    pub bias_noise: S,
    /// Initial standard deviation of the holdup, m³.
    pub initial_volume_sigma: S,
    /// Initial standard deviation of each amount, mol.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_arrays"))]
    pub initial_amount_sigma: [S; N],
    /// Initial standard deviation of each bias (relative).
    pub initial_bias_sigma: S,
    /// Innovation gate: chi-square quantile for 1 degree of freedom (for
    /// example 9.0 ≈ 99.73 %, 6.63 ≈ 99 %).
    pub gate: S,
    /// A drawn lab sample whose result has not come within this age is
    /// dropped (and counted), ms.
    pub lab_max_age_ms: Millis,
    /// Meters whose bias is estimated; its length must be `D − 1 − N`.
    pub biases: Vec<BiasTarget, MAX_BIASES>,
}

/// What a measurement update did.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Update<S> {
    /// Fused; the normalised innovation squared.
    Accepted {
        /// `ν²/S`.
        nis: S,
    },
    /// Rejected by the innovation gate.
    Rejected {
        /// `ν²/S`.
        nis: S,
    },
    /// Not used: non-finite value, non-positive variance, or the vessel is
    /// near empty (concentrations not observable).
    Skipped,
}

/// Counters since start (for reports and diagnostics).
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
pub struct ObserverCounters {
    /// Level values fused.
    pub level_accepted: u32,
    /// Level values rejected by the gate.
    pub level_rejected: u32,
    /// Analyser or lab values fused.
    pub composition_accepted: u32,
    /// Analyser or lab values rejected by the gate.
    pub composition_rejected: u32,
    /// Measurements skipped (non-finite, near empty).
    pub skipped: u32,
    /// Drawn lab samples dropped because no result came within the maximum age.
    pub lab_expired: u32,
    /// Covariance updates not applied, or predictions repaired, because
    /// rounding would have left `P` not positive definite (the previous,
    /// larger `P` was kept, or the diagonal loaded; see the module docs).
    pub covariance_guarded: u32,
    /// Ticks where the covariance transition fell back to `I + hF`.
    pub transition_fallbacks: u32,
    /// Re-seeds of the holdup from the level ([`Observer::reseed_from_level`]).
    pub reseeds: u32,
}

/// An observer's state without its configuration: the vessel's balance
/// state, the bias estimates, the covariance, the pending lab samples and
/// the counters. What a checkpoint stores ([`Observer::state`],
/// [`Observer::restore_state`]).
#[derive(Clone, Debug, PartialEq)]
#[cfg_attr(
    feature = "serde",
    derive(serde::Serialize, serde::Deserialize),
    serde(bound(
        serialize = "S: serde::Serialize",
        deserialize = "S: serde::Deserialize<'de> + Copy + Default"
    ))
)]
pub struct ObserverState<S, const N: usize, const D: usize, const L: usize> {
    vessel: VesselState<S, N>,
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_arrays"))]
    bias: [S; D],
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_arrays::matrix"))]
    p: [[S; D]; D],
    pending: Vec<Pending<S, D>, L>,
    counters: ObserverCounters,
}

impl<S: Scalar, const N: usize, const D: usize, const L: usize> ObserverState<S, N, D, L> {
    /// The vessel part.
    pub fn vessel(&self) -> &VesselState<S, N> {
        &self.vessel
    }

    /// The counters.
    pub fn counters(&self) -> ObserverCounters {
        self.counters
    }

    /// Number of pending lab samples.
    pub fn pending_lab_samples(&self) -> usize {
        self.pending.len()
    }
}

/// The extended Kalman filter around a [`Vessel`]. `D = 1 + N + B` states,
/// `L` pending lab samples.
#[derive(Clone, Debug)]
pub struct Observer<
    S,
    const N: usize,
    const R: usize,
    const O: usize,
    const D: usize,
    const L: usize,
> {
    vessel: Vessel<S, N, R, O>,
    spec: ObserverSpec<S, N>,
    bias: [S; D],
    p: [[S; D]; D],
    pending: Vec<Pending<S, D>, L>,
    counters: ObserverCounters,
}

impl<S: Scalar, const N: usize, const R: usize, const O: usize, const D: usize, const L: usize>
    Observer<S, N, R, O, D, L>
{
    const SIZES_OK: () = assert!(D > N && D <= N + 1 + MAX_BIASES, "D must be 1 + N + biases");

    /// Wrap `vessel` (its current state is the initial mean).
    ///
    /// Errors: [`Error::ObserverConfig`] for a non-finite or negative noise
    /// level or sigma, a non-positive gate or level sigma, a bias count that
    /// is not `D − 1 − N`, or a bias on a meter that does not exist (an
    /// inlet index ≥ the inputs' inlet count is caught at the first tick and
    /// ignored).
    pub fn new(vessel: Vessel<S, N, R, O>, spec: ObserverSpec<S, N>) -> Result<Self, Error> {
        let () = Self::SIZES_OK;
        let nonneg = |x: S| x.is_finite() && x >= S::ZERO;
        let ok = spec.level_sigma.is_finite()
            && spec.level_sigma > S::ZERO
            && nonneg(spec.volume_noise)
            && spec.amount_noise.iter().all(|&x| nonneg(x))
            && nonneg(spec.bias_noise)
            && nonneg(spec.initial_volume_sigma)
            && spec.initial_amount_sigma.iter().all(|&x| nonneg(x))
            && nonneg(spec.initial_bias_sigma)
            && spec.gate.is_finite()
            && spec.gate > S::ZERO
            && spec.biases.len() == D - 1 - N
            && spec.biases.iter().all(|b| match *b {
                BiasTarget::Inlet(_) | BiasTarget::Unused => true,
                BiasTarget::Outlet(k) => usize::from(k) < O,
            });
        if !ok {
            return Err(Error::ObserverConfig);
        }
        let mut p = [[S::ZERO; D]; D];
        // A zero initial sigma still needs a positive-definite P: floor it at
        // ε relative to the state's scale.
        let floor = |sigma: S, scale: S| {
            let f = S::EPSILON * scale.abs().max(S::ONE);
            let s = sigma.max(f);
            s * s
        };
        p[0][0] = floor(spec.initial_volume_sigma, vessel.volume());
        let amounts = vessel.amounts();
        for i in 0..N {
            p[1 + i][1 + i] = floor(spec.initial_amount_sigma[i], amounts[i]);
        }
        for j in 1 + N..D {
            p[j][j] = floor(spec.initial_bias_sigma, S::ONE);
        }
        Ok(Self {
            vessel,
            spec,
            bias: [S::ZERO; D],
            p,
            pending: Vec::new(),
            counters: ObserverCounters::default(),
        })
    }

    /// The vessel (model and current mean).
    pub fn vessel(&self) -> &Vessel<S, N, R, O> {
        &self.vessel
    }

    /// Counters since start.
    pub fn counters(&self) -> ObserverCounters {
        self.counters
    }

    /// The covariance of `[V, n, β]`.
    pub fn covariance(&self) -> &[[S; D]; D] {
        &self.p
    }

    /// Holdup estimate and its 1σ, m³.
    pub fn volume(&self) -> (S, S) {
        (self.vessel.volume(), self.p[0][0].max(S::ZERO).sqrt())
    }

    /// Concentration estimates and their 1σ, mol/m³ (first-order propagation
    /// of the covariance of `n_i` and `V` through `c = n/V`). Near empty,
    /// the held concentrations with a σ of the same size.
    pub fn concentrations(&self) -> ([S; N], [S; N]) {
        let c = self.vessel.concentrations();
        let mut sd = [S::ZERO; N];
        let v = self.vessel.volume();
        if self.vessel.is_near_empty() || !(v > S::ZERO) {
            for (s, ci) in sd.iter_mut().zip(c.iter()) {
                *s = ci.abs();
            }
            return (c, sd);
        }
        let n = self.vessel.amounts();
        for i in 0..N {
            let a = S::ONE / v;
            let b = -n[i] / (v * v);
            let var = a * a * self.p[1 + i][1 + i]
                + S::TWO * a * b * self.p[1 + i][0]
                + b * b * self.p[0][0];
            sd[i] = var.max(S::ZERO).sqrt();
        }
        (c, sd)
    }

    /// Estimated relative bias of each configured meter and its 1σ.
    pub fn biases(&self) -> ([S; MAX_BIASES], [S; MAX_BIASES]) {
        let mut b = [S::ZERO; MAX_BIASES];
        let mut sd = [S::ZERO; MAX_BIASES];
        for j in 0..D - 1 - N {
            if j < MAX_BIASES {
                b[j] = self.bias[j];
                sd[j] = self.p[1 + N + j][1 + N + j].max(S::ZERO).sqrt();
            }
        }
        (b, sd)
    }

    /// The bias estimates alone, as [`Observer::biases`] gives them without
    /// their 1σ (for a caller that corrects flows with them every tick).
    pub(crate) fn bias_estimates(&self) -> [S; MAX_BIASES] {
        let mut b = [S::ZERO; MAX_BIASES];
        for (x, y) in b.iter_mut().zip(self.bias.iter()).take(D - 1 - N) {
            *x = *y;
        }
        b
    }

    /// Number of lab samples waiting for their result.
    pub fn pending_lab_samples(&self) -> usize {
        self.pending.len()
    }

    /// The state without the configuration (for a checkpoint).
    pub fn state(&self) -> ObserverState<S, N, D, L> {
        ObserverState {
            vessel: self.vessel.state(),
            bias: self.bias,
            p: self.p,
            pending: self.pending.clone(),
            counters: self.counters,
        }
    }

    /// Check that `state` could be this observer's: the vessel part as
    /// [`Vessel::check_state`]; biases finite (zero beyond the configured
    /// ones); the covariance finite, exactly symmetric (as every update
    /// leaves it) with a positive diagonal, and positive definite; each
    /// pending sample finite, with a positive innovation variance, drawn no
    /// later than the state's time.
    ///
    /// Errors: [`Error::CheckpointInvalidState`].
    pub fn check_state(&self, state: &ObserverState<S, N, D, L>) -> Result<(), Error> {
        self.vessel.check_state(&state.vessel)?;
        let biases = D - 1 - N;
        let bias_ok = state
            .bias
            .iter()
            .enumerate()
            .all(|(j, &b)| b.is_finite() && (j < biases || b == S::ZERO));
        let p = &state.p;
        let mut cov_ok = p.iter().flatten().all(|x| x.is_finite());
        for (i, row) in p.iter().enumerate() {
            for (j, &x) in row.iter().enumerate() {
                let mirrored = p.get(j).and_then(|r| r.get(i)).copied();
                if mirrored != Some(x) || (i == j && !(x > S::ZERO)) {
                    cov_ok = false;
                }
            }
        }
        let cov_ok = cov_ok && is_positive_definite(p);
        let now = state.vessel.time_ms();
        let pending_ok = state.pending.iter().all(|pd| {
            pd.predicted.is_finite()
                && pd.s.is_finite()
                && pd.s > S::ZERO
                && pd.ph.iter().all(|x| x.is_finite())
                && pd.m.iter().flatten().all(|x| x.is_finite())
                && pd.drawn_ms <= now
        });
        if bias_ok && cov_ok && pending_ok {
            Ok(())
        } else {
            Err(Error::CheckpointInvalidState)
        }
    }

    /// Replace the state by `state` after [`Observer::check_state`]; on
    /// error nothing changes. The observer then continues exactly as the
    /// one that produced `state` would have (bit for bit, in the same
    /// build).
    ///
    /// Errors: [`Error::CheckpointInvalidState`].
    pub fn restore_state(&mut self, state: &ObserverState<S, N, D, L>) -> Result<(), Error> {
        self.check_state(state)?;
        self.vessel.restore_state(&state.vessel)?;
        self.bias = state.bias;
        self.p = state.p;
        self.pending = state.pending.clone();
        self.counters = state.counters;
        Ok(())
    }

    /// The configuration.
    pub fn spec(&self) -> &ObserverSpec<S, N> {
        &self.spec
    }

    /// The inputs with each biased meter corrected: `q·(1 − β)`.
    fn corrected<const I: usize>(&self, u: &Inputs<S, N, I, O>) -> Inputs<S, N, I, O> {
        let mut c = *u;
        for (j, t) in self.spec.biases.iter().enumerate() {
            let beta = self.bias.get(j).copied().unwrap_or(S::ZERO);
            // One correction for either kind of meter (a copy of it per
            // arm cost the gateway image ~0.5 KB).
            let q = match *t {
                BiasTarget::Inlet(k) => c.inlet_flows.get_mut(usize::from(k)),
                BiasTarget::Outlet(k) => c.outlet_flows.get_mut(usize::from(k)),
                BiasTarget::Unused => None,
            };
            if let Some(q) = q {
                *q = clean(*q) * (S::ONE - beta);
            }
        }
        c
    }

    /// Jacobian of the balance at the current mean with inputs `u` (already
    /// corrected) and raw meter readings `raw` (for the bias columns).
    fn jacobian<const I: usize>(
        &self,
        u: &Inputs<S, N, I, O>,
        raw: &Inputs<S, N, I, O>,
    ) -> [[S; D]; D] {
        let mut f = zeros();
        let model = self.vessel.model();
        let v = self.vessel.volume();
        let n = self.vessel.amounts();
        let (q_c, dq_c) = model.computed_outflow_with_slope(v);
        f[0][0] = -dq_c;
        let mut q_out = q_c;
        for (o, &q) in model.outlets.iter().zip(u.outlet_flows.iter()) {
            if *o == crate::model::Outlet::Measured {
                q_out += clean(q);
            }
        }
        let observable = !self.vessel.is_near_empty() && v > S::ZERO;
        if observable {
            let mut k = [[S::ZERO; 2]; R];
            model.rate_constants(self.vessel.temperature(), &mut k);
            let mut dg_dn = [[S::ZERO; N]; N];
            let mut dg_dv = [S::ZERO; N];
            model.reaction_jacobian(&k, &n, v, &mut dg_dn, &mut dg_dv);
            for i in 0..N {
                let c = n[i] / v;
                f[1 + i][0] = q_out * c / v - dq_c * c + dg_dv[i];
                for kk in 0..N {
                    f[1 + i][1 + kk] = dg_dn[i][kk];
                }
                f[1 + i][1 + i] -= q_out / v;
            }
        }
        for (j, t) in self.spec.biases.iter().enumerate() {
            let col = 1 + N + j;
            if col >= D {
                break;
            }
            match *t {
                BiasTarget::Inlet(k) => {
                    let k = usize::from(k);
                    let q = raw
                        .inlet_flows
                        .get(k)
                        .copied()
                        .map(clean)
                        .unwrap_or(S::ZERO);
                    f[0][col] = -q;
                    if let Some(feed) = raw.feed.get(k) {
                        for i in 0..N {
                            f[1 + i][col] = -q * clean(feed[i]);
                        }
                    }
                }
                BiasTarget::Outlet(k) => {
                    let q = raw
                        .outlet_flows
                        .get(usize::from(k))
                        .copied()
                        .map(clean)
                        .unwrap_or(S::ZERO);
                    f[0][col] = q;
                    if observable {
                        for i in 0..N {
                            f[1 + i][col] = q * n[i] / v;
                        }
                    }
                }
                BiasTarget::Unused => {}
            }
        }
        f
    }

    /// Predict over one tick with the measured inputs `u`: the kernel's step
    /// with bias-corrected flows for the mean, the Cayley transition for the
    /// covariance. Returns the kernel's report.
    pub fn tick<const I: usize>(&mut self, u: &Inputs<S, N, I, O>) -> StepReport<S> {
        let h: S = self.vessel.model().tick_s();
        let uc = self.corrected(u);
        let f = self.jacobian(&uc, u);
        let (phi, cayley) = transition(&f, h, 1 + N);
        if !cayley {
            self.counters.transition_fallbacks =
                self.counters.transition_fallbacks.saturating_add(1);
        }
        // Φ P Φᵀ: T = Φ P, then only the upper triangle of T Φᵀ (the result
        // is symmetric), mirrored. The bias rows of Φ are rows of the
        // identity (`transition`), so T's bias rows are P's and T Φᵀ's bias
        // columns are T's (`+0 + t`: the sum the full product forms there,
        // bit for bit for finite T; a non-finite T reaches a diagonal
        // entry either way and the prediction is refused below).
        let m = 1 + N;
        let t = mat_mul_identity_tail(&phi, &self.p, m);
        let mut p = zeros();
        // The product is mirrored, so exactly symmetric: the pass that
        // averaged it with its transpose changed nothing but an entry
        // beyond half the largest finite value (which it made infinite,
        // refusing the prediction); `bounded` keeps that rule.
        let half_max = S::MAX * S::HALF;
        let mut bounded = true;
        for i in 0..D {
            for j in i..D {
                let x = if j < m {
                    let mut x = S::ZERO;
                    for (a, b) in t[i].iter().zip(phi[j].iter()) {
                        x += *a * *b;
                    }
                    x
                } else {
                    S::ZERO + t[i][j]
                };
                if i != j {
                    bounded &= x.abs() <= half_max;
                }
                p[i][j] = x;
                p[j][i] = x;
            }
        }
        let qv = self.spec.volume_noise * h;
        p[0][0] += qv;
        let c = self.vessel_concentrations();
        for i in 0..N {
            let x = c[i] * qv;
            p[0][1 + i] += x;
            p[1 + i][0] += x;
            // Upper triangle, mirrored: `P` stays exactly symmetric.
            for j in i..N {
                let y = x * c[j];
                p[1 + i][1 + j] += y;
                if j != i {
                    p[1 + j][1 + i] += y;
                }
            }
        }
        for i in 0..N {
            p[1 + i][1 + i] += self.spec.amount_noise[i] * h;
        }
        for j in 1 + N..D {
            p[j][j] += self.spec.bias_noise * h;
        }
        if bounded && (0..D).all(|i| p[i][i].is_finite()) {
            if !make_positive_definite(&mut p) {
                self.counters.covariance_guarded =
                    self.counters.covariance_guarded.saturating_add(1);
            }
            // Row by row: a whole-matrix assignment is a `memcpy` call,
            // ~100 instructions on the Cortex-M4F for these 100 bytes.
            for (dst, src) in self.p.iter_mut().zip(p.iter()) {
                *dst = *src;
            }
        } else {
            self.counters.transition_fallbacks =
                self.counters.transition_fallbacks.saturating_add(1);
        }
        for pend in self.pending.iter_mut() {
            left_multiply_identity_tail(&phi, &mut pend.m, m);
        }
        let report = self.vessel.step(&uc);
        // Drop samples whose result is overdue, giving back the information
        // their draw anticipated.
        let now = self.vessel.time_ms();
        let max_age = self.spec.lab_max_age_ms;
        let mut i = 0;
        while i < self.pending.len() {
            let overdue = self
                .pending
                .get(i)
                .is_some_and(|p| now.saturating_sub(p.drawn_ms) > max_age);
            if overdue {
                let Some(p) = self.take_pending(i) else {
                    break;
                };
                self.release(&p);
                self.counters.lab_expired = self.counters.lab_expired.saturating_add(1);
            } else {
                i += 1;
            }
        }
        report
    }

    /// The vessel's concentrations `n/V`, each a finite number ≥ 0 (zero
    /// where the holdup is not positive or the quotient not finite).
    /// Not [`Vessel::concentrations`]: its near-empty hold costs the
    /// gateway's pipeline tick 114 instructions (6,025 against its 6,000
    /// gate), and the noise direction needs no held value.
    fn vessel_concentrations(&self) -> [S; N] {
        let v = self.vessel.volume();
        let mut c = [S::ZERO; N];
        for (ci, ni) in c.iter_mut().zip(self.vessel.amounts().iter()) {
            *ci = clean(*ni / v);
        }
        c
    }

    /// Apply `x += k·ν` to the vessel state and the biases.
    fn apply_correction(&mut self, k: &[S; D], innovation: S) {
        let mut n = self.vessel.amounts();
        let v = self.vessel.volume() + k[0] * innovation;
        for i in 0..N {
            n[i] += k[1 + i] * innovation;
        }
        for j in 1 + N..D {
            self.bias[j - 1 - N] += k[j] * innovation;
        }
        let _ = self.vessel.set_state(v, &n);
    }

    /// The covariance half of a scalar update with row `h` and measurement
    /// variance `r` (Joseph form; also carried into every pending sample's
    /// `M`). Returns the gain and the innovation variance, or `None` if the
    /// update is not possible. With `gate_nu = Some(ν)` nothing changes when
    /// `ν²/S` exceeds the gate (returned as `Err(nis)`).
    #[allow(clippy::type_complexity)]
    fn covariance_update(
        &mut self,
        h: &[S; D],
        r: S,
        gate_nu: Option<S>,
    ) -> Option<Result<([S; D], [S; D], S), S>> {
        if !(r > S::ZERO) || !r.is_finite() {
            return None;
        }
        let ph = mat_vec(&self.p, h);
        let mut s = r;
        for (a, b) in h.iter().zip(ph.iter()) {
            // Zero entries of h skipped, as in `mat_vec` (the same bits).
            if *a != S::ZERO {
                s += *a * *b;
            }
        }
        if !(s > S::ZERO) || !s.is_finite() {
            return None;
        }
        if let Some(nu) = gate_nu {
            let nis = nu * nu / s;
            if !(nis <= self.spec.gate) {
                return Some(Err(nis));
            }
        }
        let mut k = [S::ZERO; D];
        for (ki, phi) in k.iter_mut().zip(ph.iter()) {
            *ki = *phi / s;
        }
        // Joseph form P ← A P Aᵀ + K r Kᵀ with A = I − K Hᵀ, evaluated with
        // the rank-one structure of A in O(D²) instead of two D×D products:
        // B = A P = P − K (Hᵀ P) (Hᵀ P = (P H)ᵀ, P symmetric), then
        // B Aᵀ = B − (B H) Kᵀ. Same arithmetic terms as the products.
        // In place: P is not needed again (ph holds P H), and copying a D×D
        // matrix costs ~100 instructions on the Cortex-M4F.
        let p = &mut self.p;
        for i in 0..D {
            for j in 0..D {
                p[i][j] -= k[i] * ph[j];
            }
        }
        let bh = mat_vec(p, h);
        for i in 0..D {
            for j in 0..D {
                p[i][j] += k[j] * (r * k[i] - bh[i]);
            }
        }
        symmetrize(p);
        if !make_positive_definite(p) {
            self.counters.covariance_guarded = self.counters.covariance_guarded.saturating_add(1);
        }
        // M ← A M = M − K (Hᵀ M), also O(D²).
        for pend in self.pending.iter_mut() {
            // Hᵀ M by rows of M, zero entries of h skipped (as `mat_vec`).
            let mut hm = [S::ZERO; D];
            for (row, hi) in pend.m.iter().zip(h.iter()) {
                if *hi != S::ZERO {
                    for (hmc, x) in hm.iter_mut().zip(row.iter()) {
                        *hmc += *hi * *x;
                    }
                }
            }
            for (row, ki) in pend.m.iter_mut().zip(k.iter()) {
                for (x, hmc) in row.iter_mut().zip(hm.iter()) {
                    *x -= *ki * *hmc;
                }
            }
        }
        Some(Ok((k, ph, s)))
    }

    /// A scalar update with measurement row `h`, innovation `nu` and
    /// measurement variance `r`, Joseph form.
    fn scalar_update(&mut self, h: &[S; D], nu: S, r: S) -> Update<S> {
        if !nu.is_finite() {
            self.counters.skipped = self.counters.skipped.saturating_add(1);
            return Update::Skipped;
        }
        match self.covariance_update(h, r, Some(nu)) {
            None => {
                self.counters.skipped = self.counters.skipped.saturating_add(1);
                Update::Skipped
            }
            Some(Err(nis)) => Update::Rejected { nis },
            Some(Ok((k, _, s))) => {
                self.apply_correction(&k, nu);
                Update::Accepted { nis: nu * nu / s }
            }
        }
    }

    /// Fuse a level reading `z` (m, from the vessel bottom) with standard
    /// deviation `level_sigma` from the configuration.
    pub fn update_level(&mut self, z: S) -> Update<S> {
        let geometry = self.vessel.model().geometry();
        let level = self.vessel.level();
        let area = geometry.area_at(level);
        if !(area > S::ZERO) || !z.is_finite() {
            self.counters.skipped = self.counters.skipped.saturating_add(1);
            return Update::Skipped;
        }
        let mut h = [S::ZERO; D];
        h[0] = S::ONE / area;
        let sigma = self.spec.level_sigma;
        let out = self.scalar_update(&h, z - level, sigma * sigma);
        match out {
            Update::Accepted { .. } => {
                self.counters.level_accepted = self.counters.level_accepted.saturating_add(1)
            }
            Update::Rejected { .. } => {
                self.counters.level_rejected = self.counters.level_rejected.saturating_add(1)
            }
            Update::Skipped => {}
        }
        out
    }

    /// Re-seed the holdup from a level reading `z` (m) after the filter has
    /// locked itself out: its holdup is so far off (a flow meter that read
    /// wrong for a while, an unmetered drain) that the innovation gate
    /// rejects every level reading that would correct it. The caller
    /// decides when (the sensor does it after a run of rejected level
    /// readings); this is the mechanism.
    ///
    /// * The holdup becomes `V(z)`, with variance `(A(z)·σ_z)²`, uncorrelated
    ///   with everything else.
    /// * The concentrations are kept (the level says nothing about them):
    ///   the amounts become `cᵢ·V(z)`. Their covariance (carried from the
    ///   amounts' by `c = n/V` to first order) is widened by each species'
    ///   initial uncertainty, `(σ_n,0/V(z))²`, since whatever moved the
    ///   holdup also moved what came in and out.
    /// * The meter biases keep their estimates and their covariance; their
    ///   correlation with the holdup is dropped. (Widening them instead was
    ///   tried on a meter stuck at zero: the bias then absorbed the rest of
    ///   the fault and stayed 0.4 % off for the remaining 10 hours.)
    /// * Pending lab samples are dropped (counted as expired): their stored
    ///   sensitivities refer to the state before the re-seed.
    ///
    /// Returns `false` (nothing changed) if `z` is not finite, or gives no
    /// positive holdup or cross-section. `O(D²)`, no solve.
    pub fn reseed_from_level(&mut self, z: S) -> bool {
        let geometry = self.vessel.model().geometry();
        let v_new = geometry.volume_at(z);
        let area = geometry.area_at(z);
        let v_old = self.vessel.volume();
        if !z.is_finite() || !(v_new > S::ZERO) || !(area > S::ZERO) || !(v_old > S::ZERO) {
            return false;
        }
        let n_old = self.vessel.amounts();
        let mut c = [S::ZERO; N];
        for (ci, ni) in c.iter_mut().zip(n_old.iter()) {
            *ci = *ni / v_old;
        }
        // Rows of J_c = ∂c/∂x: c_i = n_i/V.
        let p = &self.p;
        let cov_c = |i: usize, j: usize| concentration_covariance(p, &c, v_old, i, j);
        let cov_cb = |i: usize, b: usize| (-c[i] / v_old) * p[0][b] + p[1 + i][b] / v_old;
        let sigma_v = area * self.spec.level_sigma;
        let var_v = sigma_v * sigma_v;
        let mut q = zeros::<S, D>();
        q[0][0] = var_v;
        for i in 0..N {
            q[0][1 + i] = c[i] * var_v;
            q[1 + i][0] = c[i] * var_v;
            for j in 0..N {
                let Some(mut pc) = cov_c(i, j) else {
                    return false;
                };
                if i == j {
                    let widen = self.spec.initial_amount_sigma[i] / v_new;
                    pc += widen * widen;
                }
                q[1 + i][1 + j] = c[i] * c[j] * var_v + v_new * v_new * pc;
            }
            for b in 1 + N..D {
                let x = v_new * cov_cb(i, b);
                q[1 + i][b] = x;
                q[b][1 + i] = x;
            }
        }
        for b in 1 + N..D {
            for b2 in 1 + N..D {
                q[b][b2] = p[b][b2];
            }
        }
        let mut n_new = [S::ZERO; N];
        for (ni, ci) in n_new.iter_mut().zip(c.iter()) {
            *ni = *ci * v_new;
        }
        if !all_finite(q.as_flattened()) || !all_finite(&n_new) {
            return false;
        }
        // Clamping here only keeps V within the capacity (V(z) is already).
        self.install(v_new, &n_new, q);
        self.counters.reseeds = self.counters.reseeds.saturating_add(1);
        true
    }

    /// Replace the mean and the covariance after a re-seed or a reset: the
    /// covariance symmetrised and kept positive definite, pending lab
    /// samples dropped (counted as expired: their stored sensitivities
    /// refer to the state before).
    fn install(&mut self, volume: S, amounts: &[S; N], mut p: [[S; D]; D]) {
        let _ = self.vessel.set_state(volume, amounts);
        symmetrize(&mut p);
        if !make_positive_definite(&mut p) {
            self.counters.covariance_guarded = self.counters.covariance_guarded.saturating_add(1);
        }
        self.p = p;
        let dropped = u32::try_from(self.pending.len()).unwrap_or(u32::MAX);
        self.pending.clear();
        self.counters.lab_expired = self.counters.lab_expired.saturating_add(dropped);
    }

    /// Reset the concentration of `species` to `c` (mol/m³) with standard
    /// deviation `sigma`, bypassing the innovation gate: for a lab result
    /// that the operator knows is right while the estimate is not (the
    /// vessel was drained and refilled, a batch was dosed by hand).
    ///
    /// * The amount becomes `c·V`; the holdup and the other amounts keep
    ///   their estimates.
    /// * The new concentration is independent of everything else: with
    ///   `nᵢ = c·V` to first order, `Var(nᵢ) = c²·Var(V) + V²·σ²` and
    ///   `Cov(nᵢ, x) = c·Cov(V, x)` for every other state `x`.
    /// * Pending lab samples are dropped (counted as expired): their stored
    ///   sensitivities refer to the state before the reset.
    ///
    /// Returns `false` (nothing changed) for a species out of range, a
    /// negative or non-finite `c`, a `sigma` that is not a positive number,
    /// or a vessel near empty. `O(D)`, no solve.
    pub fn reset_concentration(&mut self, species: usize, c: S, sigma: S) -> bool {
        let v = self.vessel.volume();
        if species >= N
            || !c.is_finite()
            || c < S::ZERO
            || !(sigma > S::ZERO)
            || !sigma.is_finite()
            || self.vessel.is_near_empty()
            || !(v > S::ZERO)
        {
            return false;
        }
        let i = 1 + species;
        let mut n = self.vessel.amounts();
        n[species] = c * v;
        let mut p = self.p;
        for k in 0..D {
            if k != i {
                let x = c * p[0][k];
                p[i][k] = x;
                p[k][i] = x;
            }
        }
        p[i][i] = c * c * p[0][0] + v * v * sigma * sigma;
        if !all_finite(p.as_flattened()) || !n[species].is_finite() {
            return false;
        }
        self.install(v, &n, p);
        true
    }

    /// Measurement row of the concentration of `species` at the current
    /// mean, and the predicted value; `None` when near empty.
    fn concentration_row(&self, species: usize) -> Option<([S; D], S)> {
        let v = self.vessel.volume();
        if self.vessel.is_near_empty() || !(v > S::ZERO) || species >= N {
            return None;
        }
        let n = self.vessel.amounts();
        let mut h = [S::ZERO; D];
        h[0] = -n[species] / (v * v);
        h[1 + species] = S::ONE / v;
        Some((h, n[species] / v))
    }

    fn count_composition(&mut self, out: Update<S>) {
        match out {
            Update::Accepted { .. } => {
                self.counters.composition_accepted =
                    self.counters.composition_accepted.saturating_add(1)
            }
            Update::Rejected { .. } => {
                self.counters.composition_rejected =
                    self.counters.composition_rejected.saturating_add(1)
            }
            Update::Skipped => {}
        }
    }

    /// Fuse an online analyser reading of `species` (mol/m³) with standard
    /// deviation `sigma`, taken now.
    pub fn update_concentration(&mut self, species: usize, c: S, sigma: S) -> Update<S> {
        let Some((h, predicted)) = self.concentration_row(species) else {
            self.counters.skipped = self.counters.skipped.saturating_add(1);
            return Update::Skipped;
        };
        let out = self.scalar_update(&h, c - predicted, sigma * sigma);
        self.count_composition(out);
        out
    }
}
