//! One vessel's state and its fixed tick: the balance step.
//!
//! [`Vessel::step`] advances the holdup and every component amount by one
//! tick with the inputs held (zero-order hold). In order:
//!
//! 1. **Inputs.** Negative flows and concentrations become zero
//!    ([`StatusFlags::INPUT_NEGATIVE`]); NaN and infinities become zero, a bad
//!    temperature holds the last good one ([`StatusFlags::INPUT_NOT_FINITE`]).
//! 2. **Holdup.** With measured outlets only, `V₁ = V₀ + h·(Σq_in − Σq_out)`
//!    exactly; an outflow that would take more than the vessel holds is
//!    limited at empty ([`StatusFlags::EMPTY`], [`StatusFlags::OUTLET_LIMITED`]).
//!    With computed outlets (orifice, weir), the holdup equation is stepped by
//!    the scalar MPRK22 with the outflow as destruction term: positive at any
//!    tick, second order. Above capacity the holdup is clamped and the excess
//!    leaves as overflow ([`StatusFlags::OVERFLOW`]).
//! 3. **Components.** With the tick's average outflow `q_out = (V₀ + h·q_in − V₁)/h`
//!    and `V(t)` linear over the tick, the configured integrator
//!    ([`crate::Method`]) advances the amounts. Below the minimum observable
//!    holdup, no concentration is formed: the tick mixes feed into the
//!    content and draws the outflow as a fraction of both
//!    ([`StatusFlags::NEAR_EMPTY`]); reported concentrations are held.
//! 4. **Totals.** Holdup and amounts are double-word
//!    [`Compensated`] totals, so `f32` keeps increments of 1e-7 relative
//!    over a year of ticks.
//!
//! Bounded work: one pass over inlets and outlets, at most two evaluations
//! of the computed outlets (each a level inversion of bounded iterations),
//! then the integrator's fixed work; no heap, no recursion, no panic.

use crate::integrate::linear::{phi_step, residual, system_matrix};
#[cfg(feature = "reference-methods")]
use crate::integrate::{euler_step, rk4_step, TickRhs};
use crate::integrate::{exact, mprk22_step, Advance, TickFrame};
use crate::model::{Inputs, Method, Model, Network, Outlet};
use crate::status::{MethodUsed, StatusFlags, StepReport};
use crate::units::Millis;
use crate::{Compensated, Error, Scalar};

/// The state a vessel starts from.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct InitialState<S, const N: usize> {
    /// Holdup, m³.
    pub volume: S,
    /// Concentration of each species, mol/m³.
    pub concentrations: [S; N],
    /// Temperature, K (held until the first good reading).
    pub temperature: S,
}

/// A vessel's balance state and time without its model: what a checkpoint
/// stores ([`Vessel::state`], [`Vessel::restore_state`]). Built only from a
/// vessel or by decoding; checked against the model before it is installed.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(
    feature = "serde",
    derive(serde::Serialize, serde::Deserialize),
    serde(bound(
        serialize = "S: serde::Serialize",
        deserialize = "S: serde::Deserialize<'de> + Copy + Default"
    ))
)]
pub struct VesselState<S, const N: usize> {
    volume: Compensated<S>,
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_arrays"))]
    amounts: [Compensated<S>; N],
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_arrays"))]
    held: [S; N],
    temperature: S,
    time_ms: Millis,
}

impl<S: Scalar, const N: usize> VesselState<S, N> {
    /// Time of the state, ms.
    pub fn time_ms(&self) -> Millis {
        self.time_ms
    }

    /// Holdup, m³.
    pub fn volume(&self) -> S {
        self.volume.value()
    }
}

/// A compensated total with finite words, a low word within rounding of the
/// high one, and a value of at least `min`.
fn total_ok<S: Scalar>(t: &Compensated<S>, min: S) -> bool {
    let (hi, lo) = t.parts();
    let v = t.value();
    hi.is_finite()
        && lo.is_finite()
        && v.is_finite()
        && v >= min
        && !(lo.abs() > hi.abs() * S::EPSILON + S::MIN_POSITIVE)
}

/// A vessel: validated model, balance state and integer time.
#[derive(Clone, Debug)]
pub struct Vessel<S, const N: usize, const R: usize, const O: usize> {
    model: Model<S, N, R, O>,
    volume: Compensated<S>,
    amounts: [Compensated<S>; N],
    held: [S; N],
    temperature: S,
    time_ms: Millis,
}

/// Replace a bad input by zero and say so.
#[inline]
fn sanitize<S: Scalar>(x: S, rep: &mut StepReport<S>) -> S {
    if !x.is_finite() {
        rep.flags |= StatusFlags::INPUT_NOT_FINITE;
        rep.clamps = rep.clamps.saturating_add(1);
        S::ZERO
    } else if x < S::ZERO {
        rep.flags |= StatusFlags::INPUT_NEGATIVE;
        rep.clamps = rep.clamps.saturating_add(1);
        S::ZERO
    } else {
        x
    }
}

impl<S: Scalar, const N: usize, const R: usize, const O: usize> Vessel<S, N, R, O> {
    /// A vessel at time 0 in state `init`.
    ///
    /// Errors: [`Error::InitialVolume`], [`Error::InitialConcentration`],
    /// [`Error::InitialTemperature`].
    pub fn new(model: Model<S, N, R, O>, init: &InitialState<S, N>) -> Result<Self, Error> {
        let v = init.volume;
        if !v.is_finite() || v < S::ZERO || v > model.capacity {
            return Err(Error::InitialVolume);
        }
        if !init.temperature.is_finite() || init.temperature <= S::ZERO {
            return Err(Error::InitialTemperature);
        }
        let mut amounts = [Compensated::new(S::ZERO); N];
        for (i, (a, &c)) in amounts
            .iter_mut()
            .zip(init.concentrations.iter())
            .enumerate()
        {
            if !c.is_finite() || c < S::ZERO {
                return Err(Error::InitialConcentration(i as u8));
            }
            *a = Compensated::new(c * v);
        }
        Ok(Self {
            model,
            volume: Compensated::new(v),
            amounts,
            held: init.concentrations,
            temperature: init.temperature,
            time_ms: 0,
        })
    }

    /// The model.
    pub fn model(&self) -> &Model<S, N, R, O> {
        &self.model
    }

    /// Time since start, ms.
    pub fn time_ms(&self) -> Millis {
        self.time_ms
    }

    /// When the next tick is due, ms.
    pub fn next_due(&self) -> Millis {
        self.time_ms.saturating_add(u64::from(self.model.tick_ms))
    }

    /// Holdup, m³.
    pub fn volume(&self) -> S {
        self.volume.value()
    }

    /// Level from the vessel bottom, m.
    pub fn level(&self) -> S {
        self.model.geometry.level_at(self.volume())
    }

    /// Temperature in use, K (the last good reading).
    pub fn temperature(&self) -> S {
        self.temperature
    }

    /// Amount of each species, mol.
    pub fn amounts(&self) -> [S; N] {
        let mut out = [S::ZERO; N];
        for (o, a) in out.iter_mut().zip(self.amounts.iter()) {
            *o = a.value();
        }
        out
    }

    /// True while the holdup is at or below the minimum observable holdup.
    pub fn is_near_empty(&self) -> bool {
        !(self.volume() > self.observable_floor())
    }

    /// Concentration of each species, mol/m³; held at the last observable
    /// value while the vessel is near empty.
    pub fn concentrations(&self) -> [S; N] {
        if self.is_near_empty() {
            return self.held;
        }
        let v = self.volume();
        let mut out = self.amounts();
        for o in out.iter_mut() {
            *o = *o / v;
        }
        out
    }

    /// Replace the balance state (used by the observer after a measurement
    /// update). The holdup is kept within `[0, capacity]` and amounts at or
    /// above zero; returns `true` if anything had to be clamped. Non-finite
    /// values leave the state unchanged and return `true`.
    pub fn set_state(&mut self, volume: S, amounts: &[S; N]) -> bool {
        if !volume.is_finite() || amounts.iter().any(|a| !a.is_finite()) {
            return true;
        }
        let v = volume.clamp_to(S::ZERO, self.model.capacity);
        let mut clamped = v != volume;
        self.volume.set(v);
        for (a, &x) in self.amounts.iter_mut().zip(amounts.iter()) {
            if x < S::ZERO {
                clamped = true;
            }
            a.set(x.max(S::ZERO));
        }
        if v > self.observable_floor() {
            self.held = self.concentrations();
        }
        clamped
    }

    /// The balance state and time (for a checkpoint).
    pub fn state(&self) -> VesselState<S, N> {
        VesselState {
            volume: self.volume,
            amounts: self.amounts,
            held: self.held,
            temperature: self.temperature,
            time_ms: self.time_ms,
        }
    }

    /// Check that `state` could be this vessel's: every number finite,
    /// holdup within `[0, capacity]` (to rounding), amounts and held
    /// concentrations non-negative, temperature positive, time a whole
    /// number of ticks.
    ///
    /// Errors: [`Error::CheckpointInvalidState`].
    pub fn check_state(&self, state: &VesselState<S, N>) -> Result<(), Error> {
        let cap = self.model.capacity * (S::ONE + S::of(4.0) * S::EPSILON);
        let ok = total_ok(&state.volume, S::ZERO)
            && state.volume.value() <= cap
            && state.amounts.iter().all(|a| total_ok(a, S::ZERO))
            && state.held.iter().all(|&c| c.is_finite() && c >= S::ZERO)
            && state.temperature.is_finite()
            && state.temperature > S::ZERO
            && state
                .time_ms
                .checked_rem(u64::from(self.model.tick_ms))
                .is_some_and(|r| r == 0);
        if ok {
            Ok(())
        } else {
            Err(Error::CheckpointInvalidState)
        }
    }

    /// Replace the balance state and time by `state` after
    /// [`Vessel::check_state`]; on error nothing changes. The next tick
    /// continues exactly as the vessel that produced `state` would have.
    ///
    /// Errors: [`Error::CheckpointInvalidState`].
    pub fn restore_state(&mut self, state: &VesselState<S, N>) -> Result<(), Error> {
        self.check_state(state)?;
        self.volume = state.volume;
        self.amounts = state.amounts;
        self.held = state.held;
        self.temperature = state.temperature;
        self.time_ms = state.time_ms;
        Ok(())
    }

    /// The holdup at or below which concentrations are not formed: the
    /// configured minimum, but never below `ε·capacity`.
    fn observable_floor(&self) -> S {
        self.model.min_holdup.max(S::EPSILON * self.model.capacity)
    }

    /// Advance one tick with inputs `u` held over it. Never fails; see the
    /// module documentation for what is clamped and flagged.
    pub fn step<const I: usize>(&mut self, u: &Inputs<S, N, I, O>) -> StepReport<S> {
        let mut rep = StepReport::default();
        let h: S = self.model.tick_s;

        // 1. Inputs.
        let mut q_in = S::ZERO;
        let mut feed = [S::ZERO; N];
        for (&q, conc) in u.inlet_flows.iter().zip(u.feed.iter()) {
            let q = sanitize(q, &mut rep);
            if q > S::ZERO {
                q_in += q;
                for (f, &c) in feed.iter_mut().zip(conc.iter()) {
                    *f += q * sanitize(c, &mut rep);
                }
            }
        }
        let mut q_meas = S::ZERO;
        for (o, &q) in self.model.outlets.iter().zip(u.outlet_flows.iter()) {
            if *o == Outlet::Measured {
                q_meas += sanitize(q, &mut rep);
            }
        }
        if u.temperature.is_finite() && u.temperature > S::ZERO {
            self.temperature = u.temperature;
        } else {
            rep.flags |= if u.temperature.is_finite() {
                StatusFlags::INPUT_NEGATIVE
            } else {
                StatusFlags::INPUT_NOT_FINITE
            };
            rep.clamps = rep.clamps.saturating_add(1);
        }

        // 2. Holdup.
        let v0 = self.volume();
        let available = v0 + h * q_in;
        if h * q_meas > available {
            rep.flags |= StatusFlags::OUTLET_LIMITED;
        }
        let net = q_in - q_meas;
        let mut dv = if self.model.has_computed_outlets {
            self.holdup_increment_computed(v0, net, h)
        } else {
            h * net
        };
        if v0 + dv <= S::ZERO {
            dv = -v0;
        }
        let v1 = v0 + dv;
        let capacity = self.model.capacity;
        if v1 > capacity {
            rep.flags |= StatusFlags::OVERFLOW;
            rep.clamps = rep.clamps.saturating_add(1);
            rep.spilled_volume = v1 - capacity;
            dv = capacity - v0;
            self.volume.set(capacity);
        } else if !(v1 > S::ZERO) {
            rep.flags |= StatusFlags::EMPTY;
            self.volume.set(S::ZERO);
        } else {
            self.volume.add(dv);
        }
        let v1 = self.volume();
        // Everything that came in and did not stay went out.
        let outflow_volume = (h * q_in - dv).max(S::ZERO);
        rep.outflow_volume = outflow_volume;

        // 3. Components.
        let y0 = self.amounts();
        let floor = self.observable_floor();
        let delta = if !(v0 > floor) || !(v1 > floor) {
            rep.flags |= StatusFlags::NEAR_EMPTY;
            rep.method = MethodUsed::NearEmpty;
            let frac = if available > S::ZERO {
                (outflow_volume / available).clamp_to(S::ZERO, S::ONE)
            } else {
                S::ZERO
            };
            let mut d = [S::ZERO; N];
            for i in 0..N {
                let mixed = y0[i] + h * feed[i];
                d[i] = h * feed[i] - frac * mixed;
            }
            Some(Advance::increment(d))
        } else {
            let mut k = [[S::ZERO; 2]; R];
            self.model.rate_constants(self.temperature, &mut k);
            let frame = TickFrame {
                h,
                v0,
                v1,
                q_in,
                q_out: outflow_volume / h,
                feed,
                k,
            };
            self.component_increment(&frame, &y0, &mut rep)
        };

        // 4. Totals.
        match delta {
            Some(step) if step.delta.iter().all(|x| x.is_finite()) => {
                for (i, (a, &yi)) in self.amounts.iter_mut().zip(y0.iter()).enumerate() {
                    let di = step.delta[i];
                    if step.use_direct[i] {
                        // Computed without cancellation (a fast-consumed
                        // species; see `integrate::linear::phi_step`).
                        a.set(step.direct[i]);
                    } else {
                        a.add(di);
                    }
                    let v = a.value();
                    if v < S::MIN_POSITIVE {
                        // Rounding may leave −ulp; anything larger is a real
                        // clamp. Subnormal amounts (a species washed out for
                        // days) are flushed to zero: they carry no
                        // information and cost 100× per operation on some
                        // FPUs.
                        if -v > S::of(8.0) * S::EPSILON * (yi.abs() + di.abs()) {
                            rep.flags |= StatusFlags::AMOUNT_CLAMPED;
                            rep.clamps = rep.clamps.saturating_add(1);
                        }
                        a.set(S::ZERO);
                    }
                }
            }
            _ => rep.flags |= StatusFlags::NUMERIC_FAULT,
        }
        if v1 > floor {
            self.held = self.concentrations();
        }
        self.time_ms = self.next_due();
        rep
    }

    /// Holdup increment with computed outlets: scalar MPRK22 with inflow as
    /// production and every outflow as destruction.
    fn holdup_increment_computed(&self, v0: S, net: S, h: S) -> S {
        // A net inflow is production; a net measured draw joins the destruction.
        let (p, drawn) = if net >= S::ZERO {
            (net, S::ZERO)
        } else {
            (S::ZERO, -net)
        };
        let tiny = S::MIN_POSITIVE;
        let d0 = drawn + self.model.computed_outflow(v0);
        let v1s = if v0 > tiny {
            (v0 + h * p) / (S::ONE + h * d0 / v0)
        } else {
            v0 + h * p
        };
        if !(v1s > tiny) {
            return h * p;
        }
        let d1 = drawn + self.model.computed_outflow(v1s);
        let a = S::HALF * h * (d0 + d1) / v1s;
        (h * p - a * v0) / (S::ONE + a)
    }

    /// Component increment by the configured integrator; `None` on a
    /// numerical fault. Out of line: `step` is generic over the inlet count,
    /// and one copy of the integrators serves every instance (10 KiB of a
    /// gateway image otherwise).
    #[inline(never)]
    fn component_increment(
        &self,
        frame: &TickFrame<S, N, R>,
        y0: &[S; N],
        rep: &mut StepReport<S>,
    ) -> Option<Advance<S, N>> {
        let model = &self.model;
        let want_exact = match model.method {
            Method::Auto | Method::Exact => model.network != Network::General,
            _ => false,
        };
        if want_exact {
            if model.network == Network::Uncoupled {
                let lam = model.first_order_constants(&frame.k);
                if let Some(d) = exact(frame, y0, &lam) {
                    rep.method = MethodUsed::Exact;
                    rep.rate_evaluations = 0;
                    return Some(Advance::increment(d));
                }
            }
            // A first-order network, or an uncoupled one whose holdup
            // changes while it reacts: the matrix exponential with the
            // tick-mean dilution q_out·ln(V₁/V₀)/(V₁ − V₀).
            let dilution = frame.q_out * frame.mean_inverse_volume(S::ZERO, frame.h);
            let pseudo = model.first_order_pseudo(&frame.k);
            let m = system_matrix(model, &pseudo, dilution);
            let r = residual(model, &pseudo, &frame.feed, dilution, y0);
            let varying = frame.v1 != frame.v0;
            if varying && model.reaction_count() > 0 && model.method == Method::Exact {
                rep.flags |= StatusFlags::METHOD_FALLBACK;
            }
            rep.method = MethodUsed::Exponential;
            rep.rate_evaluations = 0;
            return phi_step(&m, &frame.feed, &r, y0, frame.h, model.max_squarings).ok();
        }
        #[cfg(feature = "reference-methods")]
        {
            let rhs = TickRhs { model, frame };
            let reference = |y1: [S; N]| {
                let mut d = [S::ZERO; N];
                for i in 0..N {
                    d[i] = y1[i] - y0[i];
                }
                Advance::increment(d)
            };
            match model.method {
                Method::ReferenceRk4 => {
                    rep.method = MethodUsed::ReferenceRk4;
                    rep.rate_evaluations = 4;
                    return Some(reference(rk4_step(&rhs, S::ZERO, y0, frame.h)));
                }
                Method::ReferenceEuler => {
                    rep.method = MethodUsed::ReferenceEuler;
                    rep.rate_evaluations = 1;
                    return Some(reference(euler_step(&rhs, S::ZERO, y0, frame.h)));
                }
                _ => {}
            }
        }
        // Without the feature `Model::new` refuses the reference methods.
        rep.method = MethodUsed::Mprk22;
        let out = mprk22_step(model, frame, y0, &mut rep.rate_evaluations).ok()?;
        rep.substeps = out.substeps.accepted.saturating_add(out.substeps.rejected);
        if out.substeps.exhausted {
            rep.flags |= StatusFlags::SUBSTEP_BUDGET;
        }
        Some(Advance::increment(out.delta))
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::geometry::{Bottom, Geometry, Shape};
    use crate::model::{Kinetics, ReactionSpec, VesselSpec};
    use heapless::Vec;

    /// 1 m² flat cylinder, 2 m tall: capacity 2 m³ (diameter 2/√π).
    fn tank(
        outlets: &[Outlet<f64>],
        reactions: &[ReactionSpec<f64, 2>],
        v0: f64,
    ) -> Vessel<f64, 2, 1, 1> {
        let geometry = Geometry::new(Shape::VerticalCylinder {
            diameter: 2.0 / core::f64::consts::PI.sqrt(),
            height: 2.0,
            bottom: Bottom::Flat,
        })
        .unwrap();
        let spec = VesselSpec {
            geometry,
            outlets: Vec::from_slice(outlets).unwrap(),
            reactions: Vec::from_slice(reactions).unwrap(),
            min_holdup: 0.01,
            tick_ms: 1000,
            method: Method::Auto,
        };
        Vessel::new(
            Model::new(spec).unwrap(),
            &InitialState {
                volume: v0,
                concentrations: [10.0, 0.0],
                temperature: 300.0,
            },
        )
        .unwrap()
    }

    /// The reference integrators exist only with the `reference-methods`
    /// feature; without it a model asking for one is refused at
    /// configuration (CI runs the kernel's tests both ways).
    #[test]
    fn reference_methods_follow_their_feature() {
        for method in [Method::ReferenceRk4, Method::ReferenceEuler] {
            let spec = VesselSpec {
                geometry: Geometry::new(Shape::VerticalCylinder {
                    diameter: 1.0,
                    height: 2.0,
                    bottom: Bottom::Flat,
                })
                .unwrap(),
                outlets: Vec::from_slice(&[Outlet::Measured]).unwrap(),
                reactions: Vec::new(),
                min_holdup: 0.01,
                tick_ms: 1000,
                method,
            };
            let model: Result<Model<f64, 2, 1, 1>, Error> = Model::new(spec);
            if cfg!(feature = "reference-methods") {
                assert!(model.is_ok());
            } else {
                assert_eq!(model.err(), Some(Error::ConfigMethodUnavailable));
            }
        }
    }

    fn flows(q_in: f64, q_out: f64) -> Inputs<f64, 2, 1, 1> {
        Inputs {
            inlet_flows: [q_in],
            feed: [[100.0, 0.0]],
            outlet_flows: [q_out],
            temperature: 300.0,
        }
    }

    #[test]
    fn overdrawn_outlet_empties_without_going_negative() {
        let mut t = tank(&[Outlet::Measured], &[], 0.5);
        // Asks for 1 m³ in one tick from 0.5 m³.
        let r = t.step(&flows(0.0, 1.0));
        assert!(r.flags.contains(StatusFlags::EMPTY));
        assert!(r.flags.contains(StatusFlags::OUTLET_LIMITED));
        assert_eq!(t.volume(), 0.0);
        assert_eq!(t.amounts(), [0.0, 0.0]);
        assert!((r.outflow_volume - 0.5).abs() < 1e-15);
        // Concentrations are held, not 0/0.
        assert_eq!(t.concentrations(), [10.0, 0.0]);
        // Refill: feed composition comes back, no NaN on the way.
        for _ in 0..100 {
            let r = t.step(&flows(0.01, 0.0));
            assert!(!r.flags.contains(StatusFlags::NUMERIC_FAULT));
        }
        assert!((t.volume() - 1.0).abs() < 1e-12);
        assert!((t.concentrations()[0] - 100.0).abs() < 1e-9);
    }

    #[test]
    fn overflow_clamps_at_capacity_and_spills_mixed_content() {
        let mut t = tank(&[Outlet::Measured], &[], 1.99);
        let r = t.step(&flows(0.05, 0.0));
        assert!(r.flags.contains(StatusFlags::OVERFLOW));
        assert!((t.volume() - 2.0).abs() < 1e-12);
        assert!((r.spilled_volume - 0.04).abs() < 1e-12);
        // Mass balance: 19.9 mol + 5 mol fed − what spilled at the mixed
        // concentration; the amount is between the no-spill and all-feed-spill bounds.
        let n = t.amounts()[0];
        assert!(n > 19.9 + 5.0 - 0.04 * 100.0 && n < 19.9 + 5.0);
    }

    #[test]
    fn bad_inputs_are_replaced_and_flagged() {
        let mut t = tank(&[Outlet::Measured], &[], 1.0);
        let r = t.step(&flows(f64::NAN, 0.0));
        assert!(r.flags.contains(StatusFlags::INPUT_NOT_FINITE));
        assert_eq!(t.volume(), 1.0);
        let r = t.step(&flows(-1.0, 0.0));
        assert!(r.flags.contains(StatusFlags::INPUT_NEGATIVE));
        assert_eq!(t.volume(), 1.0);
        let mut u = flows(0.0, 0.0);
        u.temperature = f64::INFINITY;
        let r = t.step(&u);
        assert!(r.flags.contains(StatusFlags::INPUT_NOT_FINITE));
        assert_eq!(t.temperature(), 300.0);
        assert_eq!(t.time_ms(), 3000);
    }

    #[test]
    fn near_empty_tick_neither_reacts_nor_divides() {
        let fast = ReactionSpec {
            stoichiometry: [-1.0, 1.0],
            forward: Kinetics {
                rate_constant: 1e3,
                activation_energy: 0.0,
                orders: [1.0, 0.0],
            },
            reverse: None,
            reference_temperature: 300.0,
        };
        let mut t = tank(&[Outlet::Measured], &[fast], 0.005);
        let before = t.amounts();
        let r = t.step(&flows(0.0, 0.001));
        assert!(r.flags.contains(StatusFlags::NEAR_EMPTY));
        assert_eq!(r.method, MethodUsed::NearEmpty);
        // 1 L of 5 L left: a fifth of the content, no conversion to B.
        let after = t.amounts();
        assert!((after[0] - before[0] * 0.8).abs() < 1e-15);
        assert_eq!(after[1], 0.0);
    }

    #[test]
    fn weir_holds_the_poleni_head_at_steady_state() {
        // Rectangular sharp-crested weir, q = (2/3)·C_d·b·√(2g)·H^{3/2}
        // (Poleni's formula; any open-channel hydraulics text, from memory):
        // at steady state the head over the crest is that of the inflow.
        let (cd, b, crest, q) = (0.62, 0.2, 1.5, 2e-3);
        let weir = Outlet::Weir {
            discharge_coefficient: cd,
            width: b,
            crest_level: crest,
        };
        let mut t = tank(&[weir], &[], 1.5);
        for _ in 0..20_000 {
            t.step(&flows(q, 0.0));
        }
        let g = crate::units::STANDARD_GRAVITY;
        let head = (q / (2.0 / 3.0 * cd * b * (2.0 * g).sqrt())).powf(2.0 / 3.0);
        assert!(((t.level() - crest) - head).abs() < 1e-9 * head.max(1.0));
    }

    #[test]
    fn washed_out_species_never_lingers_as_a_subnormal() {
        // Regression: a species with no feed decays as e^{−t/τ} and used to
        // pass through the subnormal range, where the tick got 4× slower on
        // the host (measured with the tick bench). It must be flushed to 0.
        let mut t = tank(&[Outlet::Measured], &[], 1.0);
        let mut u = flows(0.5, 0.5);
        u.feed = [[0.0, 0.0]];
        for _ in 0..3_000 {
            t.step(&u);
            let n = t.amounts()[0];
            assert!(n == 0.0 || n >= f64::MIN_POSITIVE, "subnormal amount {n:e}");
        }
        assert_eq!(t.amounts()[0], 0.0);
    }
}
