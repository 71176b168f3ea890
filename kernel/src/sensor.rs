//! The soft sensor: conditioning, balance, correction and diagnostics in
//! one type, driven one tick at a time. The gateway firmware and the host
//! replay both drive a [`Sensor`]; neither has per-tick logic of its own.
//!
//! # What one [`Sensor::tick`] does, in order
//!
//! Call it once per tick with the readings taken at the start of the tick
//! (time `now`, the caller's clock in ms, rising). Lab samples drawn and lab
//! results known by `now`, and online analyser readings taken at `now`, are
//! given first ([`Sensor::lab_drawn`], [`Sensor::lab_result`],
//! [`Sensor::analyser`]): they, like the level, describe the state at the
//! start of the tick.
//!
//! 1. **Condition** every measured input ([`crate::signal`]: NE43 for loop
//!    currents, range, rate of change, stuck, hold of the last good value).
//!    A rejected value never reaches the balance: the held value does, with
//!    its quality lowered.
//! 2. **Level update** (with an observer, and only for a `Good` level
//!    reading): the level is fused through the innovation gate and its
//!    normalised innovation squared enters the NIS window.
//! 3. **Recovery**: after [`SensorSpec::reseed_after`] level readings in a
//!    row rejected by the gate, the filter has locked itself out (its holdup
//!    is off and every reading that would correct it looks like an outlier);
//!    it is re-seeded from the level ([`Observer::reseed_from_level`]), the
//!    NIS window restarts, and the report says so.
//! 4. **Balance closure**: the holdup read from the level now against the
//!    net inflow the meters gave over the previous tick — corrected by the
//!    observer's estimated meter biases, so that a bias the filter has
//!    identified is not reported again as a balance that does not close.
//! 5. **Predict**: the balance over `[now, now + h)` with the conditioned
//!    inputs held (the observer's tick, or the open-loop vessel's step).
//! 6. **Diagnose**: NAMUR NE107 status and a quality per output
//!    ([`crate::diagnostics::diagnose`]) from the step's flags, the input
//!    qualities, the closure alarm, the NIS state and the function-check
//!    switch. A negative flow clamped to zero by the conditioning raises
//!    [`StatusFlags::INPUT_NEGATIVE`] (check the meter's zero).
//!
//! # Real-time contract
//!
//! Fixed work per tick: one signal update per conditioned channel, one
//! observer tick (or vessel step), at most one level update and one re-seed,
//! one closure update, an `O(1)` NIS update and one diagnosis. No heap, no
//! recursion, no panic; every error is a value and configuration errors are
//! found by the constructors.

mod channels;
#[cfg(test)]
pub(crate) mod tests;

pub(crate) use channels::Channels;
pub use channels::{Channel, ChannelSpecs, InputQuality, Readings};

use crate::diagnostics::{
    diagnose, ChiSquareBounds, ClosureAlarm, ClosureConfig, ClosureMonitor, Cusum, Diagnosis,
    DiagnosticInputs, NisMonitor, NisState, WindowResidual,
};
use crate::observer::{BiasTarget, Observer, Update, MAX_BIASES};
use crate::signal::{Quality, Reading, Signal, SignalFlags};
use crate::units::Millis;
use crate::vessel::Vessel;
use crate::{Error, Inputs, Scalar, StatusFlags, StepReport};

/// Level innovations in one NIS window (disjoint windows).
pub const NIS_WINDOW: usize = 120;

/// The balance-closure test of a sensor.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
pub struct ClosureSpec<S> {
    /// Ticks of flow in one window (at least 1; see [`ClosureMonitor`]).
    pub window_ticks: u32,
    /// Standard deviation of the level transmitter, m (≥ 0). The holdup
    /// noise is this times the cross-section at the first good level.
    pub level_sigma: S,
    /// Relative standard deviation of each flow meter's noise (≥ 0). The
    /// net-flow noise is this times `√Σq²` of the first tick with a good
    /// level.
    pub flow_sigma: S,
    /// CUSUM reference value, in σ of the window residual.
    pub k: S,
    /// CUSUM decision interval, in σ of the window residual.
    pub h: S,
}

/// Everything a [`Sensor`] needs besides its balance (a [`Vessel`]) or its
/// observer: checked by the constructors.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(
    feature = "serde",
    derive(serde::Serialize, serde::Deserialize),
    serde(bound(
        serialize = "S: serde::Serialize",
        deserialize = "S: serde::Deserialize<'de> + Copy + Default"
    ))
)]
pub struct SensorSpec<S, const N: usize, const I: usize, const O: usize> {
    /// The conditioning of each input.
    pub channels: ChannelSpecs<S, N, I, O>,
    /// The balance-closure test; needs a level channel and no computed
    /// outlet (orifice, weir): every outflow must be metered.
    pub closure: Option<ClosureSpec<S>>,
    /// Probability of the two-sided NIS bounds (for example 0.999: a
    /// consistent filter's window is flagged one time in a thousand).
    pub nis_probability: S,
    /// Level readings rejected in a row that make the filter re-seed its
    /// holdup from the level (0: never). 10 rejections in a row of a
    /// consistent filter at a gate of 9 have a chance of 0.0027¹⁰ ≈ 2e-26.
    pub reseed_after: u16,
}

impl<S: Scalar, const N: usize, const I: usize, const O: usize> SensorSpec<S, N, I, O> {
    /// No conditioning, no closure test, NIS at 0.999, re-seed after 10.
    pub fn plain() -> Self {
        Self {
            channels: ChannelSpecs::unconditioned(),
            closure: None,
            nis_probability: S::of(0.999),
            reseed_after: 10,
        }
    }
}

/// The balance a sensor corrects, or not.
#[derive(Clone, Debug)]
#[allow(clippy::large_enum_variant)]
enum Core<S, const N: usize, const R: usize, const O: usize, const D: usize, const L: usize> {
    Open(Vessel<S, N, R, O>),
    Observed(Observer<S, N, R, O, D, L>),
}

/// The estimates now.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Estimate<S, const N: usize> {
    /// Holdup, m³.
    pub volume: S,
    /// Its 1σ, m³ (`None` for an open-loop sensor).
    pub volume_sigma: Option<S>,
    /// Level of that holdup, m.
    pub level: S,
    /// Concentrations, mol/m³.
    pub concentrations: [S; N],
    /// Their 1σ, mol/m³ (`None` for an open-loop sensor).
    pub concentration_sigma: Option<[S; N]>,
}

/// What one [`Sensor::tick`] reports.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct SensorReport<S, const N: usize> {
    /// The balance step's report (flags with the sensor's additions).
    pub step: StepReport<S>,
    /// NE107 status and the quality of each output.
    pub diagnosis: Diagnosis<N>,
    /// Quality of each kind of input after conditioning.
    pub inputs: InputQuality<N>,
    /// Union of every channel's conditioning flags this tick.
    pub signal_flags: SignalFlags,
    /// Conditioned channels whose reading was not `Good` this tick.
    pub channels_not_good: u16,
    /// What the level update did (`None`: no observer, no level channel, or
    /// the reading was not `Good`).
    pub level_update: Option<Update<S>>,
    /// The filter re-seeded its holdup from the level this tick.
    pub reseeded: bool,
    /// The closure window that closed this tick, if one did.
    pub closure_window: Option<WindowResidual<S>>,
    /// The closure alarm after this tick.
    pub closure: Option<ClosureAlarm>,
    /// The NIS state after this tick.
    pub nis: NisState,
}

/// Counters since start.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
pub struct SensorCounters {
    /// Ticks run.
    pub ticks: u32,
    /// Level readings rejected by the gate in the current run.
    pub rejection_run: u16,
    /// Re-seeds after a run of rejections.
    pub reseeds: u32,
}

/// The soft sensor: input conditioning, the balance (open loop or corrected
/// by an [`Observer`]), balance closure, NIS and NE107 diagnostics. `N`
/// species, `R` reactions, `O` outlets, `I` inlets, `D` observer states,
/// `L` pending lab samples (see [`Observer`]; unused for an open loop).
#[derive(Clone, Debug)]
pub struct Sensor<
    S,
    const N: usize,
    const R: usize,
    const O: usize,
    const I: usize,
    const D: usize,
    const L: usize,
> {
    core: Core<S, N, R, O, D, L>,
    channels: Channels<S, N, I, O>,
    spec: SensorSpec<S, N, I, O>,
    closure: Option<ClosureMonitor<S>>,
    nis: NisMonitor<S, NIS_WINDOW>,
    /// Net inflow of the previous tick, m³ (bias-corrected), for closure.
    net_prev: Option<S>,
    function_check: bool,
    counters: SensorCounters,
}

impl<
        S: Scalar,
        const N: usize,
        const R: usize,
        const O: usize,
        const I: usize,
        const D: usize,
        const L: usize,
    > Sensor<S, N, R, O, I, D, L>
{
    /// An open-loop sensor around `vessel` (no observer: no level, lab or
    /// analyser corrections; the level channel, if any, serves closure and
    /// diagnostics).
    ///
    /// Errors: see [`Sensor::observed`].
    pub fn open_loop(
        vessel: Vessel<S, N, R, O>,
        spec: SensorSpec<S, N, I, O>,
    ) -> Result<Self, Error> {
        Self::build(Core::Open(vessel), spec, ChiSquareBounds::new)
    }

    /// A sensor whose balance is corrected by `observer`.
    ///
    /// Errors: those of [`Signal::new`] for a channel;
    /// [`Error::ConfigProbability`] for the NIS probability;
    /// [`Error::SensorClosure`] for a closure test without a level channel
    /// or with an outlet that has no flow meter; [`Error::ConfigNonFinite`]
    /// or [`Error::ConfigNonPositive`] for its numbers.
    pub fn observed(
        observer: Observer<S, N, R, O, D, L>,
        spec: SensorSpec<S, N, I, O>,
    ) -> Result<Self, Error> {
        Self::build(Core::Observed(observer), spec, ChiSquareBounds::new)
    }

    /// [`Sensor::open_loop`] with the NIS bounds given, not computed (see
    /// [`Sensor::observed_with_bounds`]).
    ///
    /// Errors: those of [`Sensor::observed_with_bounds`].
    pub fn open_loop_with_bounds(
        vessel: Vessel<S, N, R, O>,
        spec: SensorSpec<S, N, I, O>,
        bounds: ChiSquareBounds<S>,
    ) -> Result<Self, Error> {
        Self::build(Core::Open(vessel), spec, |_| Ok(bounds))
    }

    /// [`Sensor::observed`] with the NIS bounds given, not computed: for a
    /// target without double precision, the bounds come from
    /// [`ChiSquareBounds::new`] run on the host and
    /// [`ChiSquareBounds::from_quantiles`] (the sensor is then bit for bit
    /// the one [`Sensor::observed`] builds on the host).
    ///
    /// Errors: [`Error::ConfigProbability`] when the bounds are for another
    /// probability than `spec.nis_probability`; otherwise those of
    /// [`Sensor::observed`].
    pub fn observed_with_bounds(
        observer: Observer<S, N, R, O, D, L>,
        spec: SensorSpec<S, N, I, O>,
        bounds: ChiSquareBounds<S>,
    ) -> Result<Self, Error> {
        Self::build(Core::Observed(observer), spec, |_| Ok(bounds))
    }

    /// The sensor with the NIS bounds `bounds(spec.nis_probability)` (built
    /// after the channels, so that errors come in the same order whichever
    /// way the bounds are made).
    fn build(
        core: Core<S, N, R, O, D, L>,
        spec: SensorSpec<S, N, I, O>,
        bounds: impl FnOnce(S) -> Result<ChiSquareBounds<S>, Error>,
    ) -> Result<Self, Error> {
        let channels = Channels::new(&spec.channels)?;
        let bounds = bounds(spec.nis_probability)?;
        // `!=` (not bits through f64): no double precision on the target.
        if bounds.probability() != spec.nis_probability {
            return Err(Error::ConfigProbability);
        }
        let nis = NisMonitor::new(bounds)?;
        if let Some(c) = &spec.closure {
            let model = match &core {
                Core::Open(v) => v.model(),
                Core::Observed(o) => o.vessel().model(),
            };
            if !channels.has_level() || model.has_computed_outlets {
                return Err(Error::SensorClosure);
            }
            if !c.level_sigma.is_finite() || !c.flow_sigma.is_finite() {
                return Err(Error::ConfigNonFinite);
            }
            if c.window_ticks == 0 || c.level_sigma < S::ZERO || c.flow_sigma < S::ZERO {
                return Err(Error::ConfigNonPositive);
            }
            Cusum::new(c.k, c.h)?;
        }
        Ok(Self {
            core,
            channels,
            spec,
            closure: None,
            nis,
            net_prev: None,
            function_check: false,
            counters: SensorCounters::default(),
        })
    }

    /// The vessel (the observer's mean, for a corrected sensor).
    pub fn vessel(&self) -> &Vessel<S, N, R, O> {
        match &self.core {
            Core::Open(v) => v,
            Core::Observed(o) => o.vessel(),
        }
    }

    /// The observer, if the sensor has one.
    pub fn observer(&self) -> Option<&Observer<S, N, R, O, D, L>> {
        match &self.core {
            Core::Open(_) => None,
            Core::Observed(o) => Some(o),
        }
    }

    /// The specification the sensor was built from.
    pub fn spec(&self) -> &SensorSpec<S, N, I, O> {
        &self.spec
    }

    /// The last reading of a conditioned channel (`None`: not conditioned,
    /// or no reading yet).
    pub fn reading(&self, ch: Channel) -> Option<Reading<S>> {
        self.channels.signal(ch).and_then(Signal::last_reading)
    }

    /// The counters.
    pub fn counters(&self) -> SensorCounters {
        self.counters
    }

    /// The balance-closure monitor, once it has started (at the first good
    /// level reading).
    pub fn closure(&self) -> Option<&ClosureMonitor<S>> {
        self.closure.as_ref()
    }

    /// The NIS monitor.
    pub fn nis(&self) -> &NisMonitor<S, NIS_WINDOW> {
        &self.nis
    }

    /// The caller's function-check switch (simulation, calibration,
    /// maintenance, start-up): while on, the status is at least
    /// FunctionCheck and every output at most Uncertain.
    pub fn set_function_check(&mut self, on: bool) {
        self.function_check = on;
    }

    /// Acknowledge the closure alarm: the CUSUM restarts from zero.
    pub fn acknowledge_closure(&mut self) {
        if let Some(c) = self.closure.as_mut() {
            c.reset();
        }
    }

    /// The estimates now, with their 1σ when the sensor has an observer.
    pub fn estimate(&self) -> Estimate<S, N> {
        match &self.core {
            Core::Open(v) => Estimate {
                volume: v.volume(),
                volume_sigma: None,
                level: v.level(),
                concentrations: v.concentrations(),
                concentration_sigma: None,
            },
            Core::Observed(o) => {
                let (v, sv) = o.volume();
                let (c, sc) = o.concentrations();
                Estimate {
                    volume: v,
                    volume_sigma: Some(sv),
                    level: o.vessel().level(),
                    concentrations: c,
                    concentration_sigma: Some(sc),
                }
            }
        }
    }

    /// The observer's meter biases and their 1σ (zeros for an open loop).
    pub fn biases(&self) -> ([S; MAX_BIASES], [S; MAX_BIASES]) {
        match &self.core {
            Core::Open(_) => ([S::ZERO; MAX_BIASES], [S::ZERO; MAX_BIASES]),
            Core::Observed(o) => o.biases(),
        }
    }

    fn observer_mut(&mut self) -> Result<&mut Observer<S, N, R, O, D, L>, Error> {
        match &mut self.core {
            Core::Open(_) => Err(Error::SensorNotObserved),
            Core::Observed(o) => Ok(o),
        }
    }

    /// A lab sample of `species` drawn now, to be analysed with 1σ `sigma`
    /// (mol/m³): see [`Observer::lab_drawn`].
    ///
    /// Errors: [`Error::SensorNotObserved`] without an observer; those of
    /// [`Observer::lab_drawn`].
    pub fn lab_drawn(&mut self, id: u32, species: usize, sigma: S) -> Result<(), Error> {
        self.observer_mut()?.lab_drawn(id, species, sigma)
    }

    /// The result `c` (mol/m³) of lab sample `id`: see
    /// [`Observer::lab_result`].
    ///
    /// Errors: [`Error::SensorNotObserved`] without an observer; those of
    /// [`Observer::lab_result`].
    pub fn lab_result(&mut self, id: u32, c: S) -> Result<Update<S>, Error> {
        self.observer_mut()?.lab_result(id, c)
    }

    /// An online analyser's reading `c` of `species` (mol/m³, 1σ `sigma`)
    /// taken now: see [`Observer::update_concentration`].
    ///
    /// Errors: [`Error::SensorNotObserved`] without an observer.
    pub fn analyser(&mut self, species: usize, c: S, sigma: S) -> Result<Update<S>, Error> {
        Ok(self.observer_mut()?.update_concentration(species, c, sigma))
    }

    /// Reset the concentration of `species` to `c` (mol/m³, 1σ `sigma`):
    /// see [`Observer::reset_concentration`]; for an open-loop sensor the
    /// amount becomes `c·V` (no uncertainty to set). Returns whether the
    /// state changed.
    pub fn reset_concentration(&mut self, species: usize, c: S, sigma: S) -> bool {
        match &mut self.core {
            Core::Observed(o) => o.reset_concentration(species, c, sigma),
            Core::Open(v) => {
                let vol = v.volume();
                let mut n = v.amounts();
                if species >= N || !c.is_finite() || c < S::ZERO || !(vol > S::ZERO) {
                    return false;
                }
                n[species] = c * vol;
                v.set_state(vol, &n)
            }
        }
    }

    /// One tick from `now` (ms, the caller's clock; rising) with the
    /// readings taken then. See the module documentation for the order.
    pub fn tick(&mut self, now: Millis, raw: &Readings<S, N, I, O>) -> SensorReport<S, N> {
        // 1. Conditioning.
        let c = self.channels.condition(raw, now);
        let level_good = c
            .level
            .filter(|r| r.quality == Quality::Good)
            .map(|r| r.value);

        // 2.–3. Level update and recovery.
        let mut level_update = None;
        let mut reseeded = false;
        if let (Core::Observed(obs), Some(z)) = (&mut self.core, level_good) {
            let u = obs.update_level(z);
            let _ = self.nis.record(&u);
            match u {
                Update::Rejected { .. } => {
                    self.counters.rejection_run = self.counters.rejection_run.saturating_add(1);
                }
                Update::Accepted { .. } => self.counters.rejection_run = 0,
                Update::Skipped => {}
            }
            let after = self.spec.reseed_after;
            if after > 0 && self.counters.rejection_run >= after && obs.reseed_from_level(z) {
                reseeded = true;
                self.counters.rejection_run = 0;
                self.counters.reseeds = self.counters.reseeds.saturating_add(1);
                self.nis.reset();
            }
            level_update = Some(u);
        }

        // 4. Closure.
        let closure_window = self.closure_update(&c.inputs, level_good);

        // 5. Predict.
        let mut step = match &mut self.core {
            Core::Open(v) => v.step(&c.inputs),
            Core::Observed(o) => o.tick(&c.inputs),
        };
        if c.flags.contains(SignalFlags::NEGATIVE_CLAMPED) {
            step.flags |= StatusFlags::INPUT_NEGATIVE;
        }

        // 6. Diagnose.
        let mut quality = c.quality;
        if !self.channels.has_level() && quality.flow == Quality::Bad {
            // No level transmitter: nothing else tells the holdup.
            quality.level = Quality::Bad;
        }
        let closure = self.closure.as_ref().and_then(ClosureMonitor::alarm);
        let nis = self.nis.state();
        let diagnosis = diagnose(&DiagnosticInputs {
            flags: step.flags,
            flow: quality.flow,
            level: quality.level,
            temperature: quality.temperature,
            feed: quality.feed,
            closure,
            nis,
            function_check: self.function_check,
        });
        self.counters.ticks = self.counters.ticks.saturating_add(1);
        SensorReport {
            step,
            diagnosis,
            inputs: c.quality,
            signal_flags: c.flags,
            channels_not_good: c.not_good,
            level_update,
            reseeded,
            closure_window,
            closure,
            nis,
        }
    }

    /// Step 4: the closure window with the holdup from the level now and the
    /// net inflow of the previous tick; then this tick's net inflow.
    fn closure_update(
        &mut self,
        u: &Inputs<S, N, I, O>,
        level: Option<S>,
    ) -> Option<WindowResidual<S>> {
        let spec = self.spec.closure?;
        let geometry = self.vessel().model().geometry();
        let holdup = level.map(|z| geometry.volume_at(z));
        if self.closure.is_none() {
            let z = level?;
            let mut q2 = S::ZERO;
            for q in u.inlet_flows.iter().chain(u.outlet_flows.iter()) {
                q2 += *q * *q;
            }
            let cfg = ClosureConfig {
                window_ticks: spec.window_ticks,
                tick_ms: self.vessel().model().tick_ms(),
                holdup_noise: geometry.area_at(z) * spec.level_sigma,
                net_flow_noise: (spec.flow_sigma * q2.sqrt()).max(S::of(1e-9)),
                k: spec.k,
                h: spec.h,
            };
            // Checked by the constructor but for the noise levels, which
            // are finite and non-negative here; a failure leaves the test off.
            self.closure = ClosureMonitor::new(&cfg).ok();
        }
        let window = match (self.closure.as_mut(), self.net_prev) {
            (Some(m), Some(net)) => m.update(holdup, net).window,
            (Some(m), None) => m.update(holdup, S::ZERO).window,
            _ => None,
        };
        self.net_prev = Some(self.net_inflow(u));
        window
    }

    /// In minus out over one tick, m³, each flow corrected by its meter's
    /// estimated bias (`q·(1 − β)`, as the observer's balance uses it).
    fn net_inflow(&self, u: &Inputs<S, N, I, O>) -> S {
        let mut q_in = u.inlet_flows;
        let mut q_out = u.outlet_flows;
        if let Core::Observed(o) = &self.core {
            let beta = o.bias_estimates();
            for (target, b) in o.spec().biases.iter().zip(beta.iter()) {
                let q = match *target {
                    BiasTarget::Inlet(k) => q_in.get_mut(usize::from(k)),
                    BiasTarget::Outlet(k) => q_out.get_mut(usize::from(k)),
                    BiasTarget::Unused => None,
                };
                if let Some(q) = q {
                    *q *= S::ONE - *b;
                }
            }
        }
        let mut net = S::ZERO;
        for q in q_in.iter() {
            net += *q;
        }
        for q in q_out.iter() {
            net -= *q;
        }
        net * self.vessel().model().tick_s()
    }
}

/// The balance part of a [`SensorState`].
#[cfg(feature = "serde")]
#[derive(Clone, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
#[serde(bound(
    serialize = "S: serde::Serialize",
    deserialize = "S: serde::Deserialize<'de> + Copy + Default"
))]
#[allow(clippy::large_enum_variant)]
enum CoreState<S, const N: usize, const D: usize, const L: usize> {
    Open(crate::vessel::VesselState<S, N>),
    Observed(crate::observer::ObserverState<S, N, D, L>),
}

/// A sensor's whole state without its configuration: the balance (or the
/// observer), every channel's conditioning memory, the closure and NIS
/// monitors and the counters. What a checkpoint stores
/// ([`Sensor::state`], [`Sensor::restore_state`]).
#[cfg(feature = "serde")]
#[derive(Clone, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
#[serde(bound(
    serialize = "S: serde::Serialize",
    deserialize = "S: serde::Deserialize<'de> + Copy + Default"
))]
pub struct SensorState<
    S,
    const N: usize,
    const I: usize,
    const O: usize,
    const D: usize,
    const L: usize,
> {
    core: CoreState<S, N, D, L>,
    channels: Channels<S, N, I, O>,
    closure: Option<ClosureMonitor<S>>,
    nis: NisMonitor<S, NIS_WINDOW>,
    net_prev: Option<S>,
    counters: SensorCounters,
}

#[cfg(feature = "serde")]
impl<
        S: Scalar,
        const N: usize,
        const R: usize,
        const O: usize,
        const I: usize,
        const D: usize,
        const L: usize,
    > Sensor<S, N, R, O, I, D, L>
{
    /// The whole state (for a checkpoint).
    pub fn state(&self) -> SensorState<S, N, I, O, D, L> {
        SensorState {
            core: match &self.core {
                Core::Open(v) => CoreState::Open(v.state()),
                Core::Observed(o) => CoreState::Observed(o.state()),
            },
            channels: self.channels,
            closure: self.closure,
            nis: self.nis,
            net_prev: self.net_prev,
            counters: self.counters,
        }
    }

    /// Check a decoded state against this sensor's configuration: the
    /// balance's own checks, the same channel specifications with finite
    /// memories, a closure monitor with this window, `k` and `h`, a NIS
    /// window with these bounds.
    ///
    /// Errors: [`Error::CheckpointInvalidState`].
    pub fn check_state(&self, state: &SensorState<S, N, I, O, D, L>) -> Result<(), Error> {
        match (&self.core, &state.core) {
            (Core::Open(v), CoreState::Open(s)) => v.check_state(s)?,
            (Core::Observed(o), CoreState::Observed(s)) => o.check_state(s)?,
            _ => return Err(Error::CheckpointInvalidState),
        }
        let bits = |a: S| a.to_f64().to_bits();
        let closure_ok = match (&self.spec.closure, &state.closure) {
            (_, None) => true,
            (None, Some(_)) => false,
            (Some(spec), Some(m)) => {
                let (w, _, k, h) = m.config_key();
                w == spec.window_ticks
                    && bits(k) == bits(spec.k)
                    && bits(h) == bits(spec.h)
                    && m.accepts(m)
            }
        };
        let ok = closure_ok
            && self.channels.same_specs(&state.channels)
            && self.nis.accepts(&state.nis)
            && state.net_prev.is_none_or(|x| x.is_finite());
        if ok {
            Ok(())
        } else {
            Err(Error::CheckpointInvalidState)
        }
    }

    /// Check and install a state; on error nothing changes.
    ///
    /// Errors: [`Error::CheckpointInvalidState`].
    pub fn restore_state(&mut self, state: &SensorState<S, N, I, O, D, L>) -> Result<(), Error> {
        self.check_state(state)?;
        match (&mut self.core, &state.core) {
            (Core::Open(v), CoreState::Open(s)) => v.restore_state(s)?,
            (Core::Observed(o), CoreState::Observed(s)) => o.restore_state(s)?,
            _ => return Err(Error::CheckpointInvalidState),
        }
        self.channels = state.channels;
        self.closure = state.closure;
        self.nis = state.nis;
        self.net_prev = state.net_prev;
        self.counters = state.counters;
        Ok(())
    }
}
