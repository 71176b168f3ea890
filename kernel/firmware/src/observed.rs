//! The observed scenario, shared by the firmware (which runs it) and by
//! `build.rs` (which computes the plant it observes and replays the sensor
//! on the host).
//!
//! The reference configuration's 8 h shift, watched by the kernel's soft
//! sensor `Sensor<f32, 3, 2, 1, 2, 5, 2>` ([`RefSensor`]): input
//! conditioning, the observer `Observer<f32, 3, 2, 1, 5, 2>` (states:
//! holdup, 3 amounts, the relative bias of the caustic inlet meter; 2 lab
//! slots, with the settings of the kernel's `observer_tick` benchmark), the
//! level update with recovery, balance closure, NIS and NAMUR NE107
//! diagnosis. The gateway has no per-tick logic of its own: it hands the
//! sensor the raw readings and the lab events ([`step`]).
//!
//! * **The plant** (the "truth") is the reference vessel run on the host in
//!   `f64` with the true flows. It is not run on the target: what the target
//!   needs of it is compiled in (`build.rs`): its level every
//!   [`LEVEL_KNOT_S`] s and its NaOH concentration when each lab sample is
//!   drawn.
//! * **The instruments** ([`Instruments`]) give raw readings only, taken
//!   at the start of each tick (tick `n` starts at `n` s). The three flow
//!   meters read the true flows of `reference::inputs_at` with pseudo-noise,
//!   the caustic meter [`CAUSTIC_BIAS`] high; the level transmitter reads the
//!   plant's level at `n` s (linear between the knots) plus noise of
//!   σ = [`LEVEL_SIGMA`]. Each of these four travels as a 4–20 mA loop
//!   current ([`LOOPS`]); the level loop fails for [`LEVEL_FAULT_S`] s from
//!   [`LEVEL_FAULT_AT_S`] (3.4 mA: a broken wire after NE43). The feed
//!   concentrations are the recipe's constants and the temperature is the
//!   jacket program's value, both given in SI units as they are. A NaOH
//!   sample is drawn every [`LAB_EVERY_S`] s from [`LAB_FIRST_S`]; its
//!   result (plant value plus noise of σ = [`LAB_SIGMA`]) comes
//!   [`LAB_DELAY_S`] s later.
//! * **The sensor's conditioning** ([`sensor_spec`]): the four loops as
//!   `Current4to20` channels (NAMUR NE43 limits, the span as valid range —
//!   flows a little below zero allowed and clamped — and the last good value
//!   held for [`HOLD_MS`]). The feeds and the temperature have no channel
//!   (`None`: passed on as given): the feeds are configured constants, not
//!   measurements, and the scenario models no temperature transmitter.
//!   Closure test, NIS probability and re-seed: [`CLOSURE_WINDOW_TICKS`],
//!   [`CLOSURE_K`], [`CLOSURE_H`], [`NIS_PROBABILITY`], [`RESEED_AFTER`].
//! * **Each tick** ([`step`]): the lab event of that second if any
//!   (`lab_drawn` / `lab_result`: it describes the state at the start of the
//!   tick), then `Sensor::tick(now, readings)` — conditioning, level update
//!   (only for a `Good` level reading), re-seed after a run of gated
//!   rejections, closure, prediction over `[now, now + 1 s)`, diagnosis.
//!
//! The noise is a 32-bit xorshift generator whose output is turned into
//! `f32` by exact operations only (a 24-bit integer times 2⁻²⁴, sums and
//! products of IEEE-754 single floats, no libm), so the host and the target
//! see bit-identical readings.

use holdup_kernel::diagnostics::{ChiSquareBounds, DeviceStatus, NisState, Reasons};
use holdup_kernel::units::Millis;
use holdup_kernel::{
    reference, BiasTarget, ClosureSpec, Error, Observer, ObserverSpec, Quality, Readings, Scalar,
    Sensor, SensorReport, SensorSpec, SignalKind, SignalSpec,
};

/// The observer type inside the sensor: 3 species, 2 reactions, 1 outlet,
/// 5 states, 2 pending lab samples.
pub type RefObserver<S> = Observer<S, 3, 2, 1, 5, 2>;
/// The sensor of the scenario: the observer's sizes and 2 inlets.
pub type RefSensor<S> = Sensor<S, 3, 2, 1, 2, 5, 2>;
/// The raw readings of one tick of the reference configuration.
pub type RefReadings<S> = Readings<S, 3, 2, 1>;

/// Ticks (1 s) in the scenario: the reference shift.
pub const OBS_TICKS: u32 = (reference::SHIFT_MS / reference::TICK_MS as u64) as u32;
/// A checkpoint every this many ticks (10 min).
pub const OBS_EVERY: u32 = 600;
/// Number of checkpoints.
pub const OBS_POINTS: usize = (OBS_TICKS / OBS_EVERY) as usize;

/// Relative bias of the caustic (inlet 0) meter: it reads `1 + β` times
/// the true flow.
pub const CAUSTIC_BIAS: f32 = 0.03;
/// Relative noise (1σ) of every flow meter reading; also the closure
/// test's `flow_sigma`.
pub const FLOW_NOISE: f32 = 0.005;
/// Level transmitter noise (1σ), m; also the observer's `level_sigma` and
/// the closure test's.
pub const LEVEL_SIGMA: f32 = 0.003;
/// Lab analysis noise (1σ), mol/m³; also the sigma given to `lab_drawn`.
pub const LAB_SIGMA: f32 = 0.1;
/// Species analysed by the lab (NaOH).
pub const LAB_SPECIES: usize = 0;
/// First lab draw, s from the start of the shift.
pub const LAB_FIRST_S: u32 = 3600;
/// Time between lab draws, s.
pub const LAB_EVERY_S: u32 = 7200;
/// Time from draw to result, s.
pub const LAB_DELAY_S: u32 = 2700;
/// Lab samples drawn in the shift (1 h, 3 h, 5 h, 7 h; results 45 min later).
pub const LAB_DRAWS: usize = 4;
/// The plant's level is compiled in every this many seconds (10 min: the
/// holdup moves slowly, and linear interpolation between knots is far
/// below the transmitter's noise; in this shift the plant's in- and
/// outflows balance, so its level is constant and the interpolation exact).
pub const LEVEL_KNOT_S: u32 = 600;
/// Number of level knots (both ends of the shift included).
pub const LEVEL_KNOTS: usize = (OBS_TICKS / LEVEL_KNOT_S) as usize + 1;

/// The 4–20 mA spans (engineering value at 4 and at 20 mA) of the caustic
/// meter, the ester meter, the outlet meter (m³/s) and the level
/// transmitter (m, the vessel's full height).
pub const LOOPS: [(f32, f32); 4] = [
    (0.0, 1.2 / 3600.0),
    (0.0, 1.2 / 3600.0),
    (0.0, 2.4 / 3600.0),
    (0.0, 2.25),
];
/// The level loop fails at this second of the shift (5 h) ...
pub const LEVEL_FAULT_AT_S: u32 = 5 * 3600;
/// ... for this many seconds ...
pub const LEVEL_FAULT_S: u32 = 180;
/// ... reading this current, mA (below NE43's 3.6 mA failure limit).
pub const LEVEL_FAULT_MA: f32 = 3.4;
/// How long a loop's last good value stands in for a failed one, ms: the
/// first minute of the level loop's fault is held (`Uncertain`), the rest
/// is stale (`Bad`).
pub const HOLD_MS: u64 = 60_000;

/// Closure test: ticks of flow in one window (30 min). Its residual's σ is
/// `√(2·(A·σ_z)² + n·(σ_q·h)²)` ≈ 8.5e-3 m³ here (the level term
/// dominates: A ≈ 2.0 m², σ_z = 3 mm), i.e. a net-flow error of about
/// 4.7e-6 m³/s (2.8 % of the caustic flow) shifts a window by 1σ.
pub const CLOSURE_WINDOW_TICKS: u32 = 1800;
/// Closure test: CUSUM reference value (σ of a window residual): half the
/// 1σ shift it is tuned to find.
pub const CLOSURE_K: f32 = 0.5;
/// Closure test: CUSUM decision interval (σ): with `k = 0.5` a two-sided
/// in-control run of about 470 windows (about 10 days of 30-min windows)
/// between false alarms, and a 1σ shift found in about 10 windows (5 h).
pub const CLOSURE_H: f32 = 5.0;
/// Probability of the NIS test's two-sided bounds (a consistent filter's
/// 120-update window is flagged one time in a thousand).
pub const NIS_PROBABILITY: f32 = 0.999;
/// Level readings rejected by the gate in a row that make the filter
/// re-seed its holdup from the level.
pub const RESEED_AFTER: u16 = 10;

/// Seed of the meters' noise (flows and level, in that order every tick).
pub const METER_SEED: u32 = 0x2545_F491;
/// Seed of the lab noise (one value per sample, in draw order; used by
/// `build.rs`, which makes the lab results).
#[allow(dead_code)]
pub const LAB_SEED: u32 = 0x9E37_79B9;

/// The scenario's observer around the reference vessel at the start of the
/// shift (the settings of the kernel's `observer_tick` benchmark, with a
/// maximum lab age of 3 h).
pub fn observer<S: Scalar>() -> Result<RefObserver<S>, Error> {
    let mut spec = ObserverSpec {
        level_sigma: S::of(f64::from(LEVEL_SIGMA)),
        volume_noise: S::of(1e-8),
        amount_noise: [S::of(1e-4); 3],
        bias_noise: S::of(1e-12),
        initial_volume_sigma: S::of(0.01),
        initial_amount_sigma: [S::of(2.0); 3],
        initial_bias_sigma: S::of(0.05),
        gate: S::of(9.0),
        lab_max_age_ms: 3 * 3600 * 1000,
        biases: Default::default(),
    };
    spec.biases
        .push(BiasTarget::Inlet(0))
        .map_err(|_| Error::ObserverConfig)?;
    Observer::new(reference::vessel()?, spec)
}

/// The conditioning of one loop with span `(lo, hi)`: NE43 limits, the
/// span as valid range (flows a little below zero allowed and clamped),
/// the last good value held for [`HOLD_MS`].
pub fn loop_spec<S: Scalar>((lo, hi): (f32, f32), flow: bool) -> SignalSpec<S> {
    let (lo, hi) = (f64::from(lo), f64::from(hi));
    SignalSpec {
        kind: SignalKind::Current4to20 {
            lo: S::of(lo),
            hi: S::of(hi),
        },
        min: S::of(if flow { lo - 0.01 * (hi - lo) } else { lo }),
        max: S::of(hi),
        max_rate_per_s: None,
        stuck: None,
        hold_max_ms: HOLD_MS,
        clamp_negative: flow,
    }
}

/// Everything the sensor needs besides its observer: the four loops as
/// channels (feeds and temperature unconditioned), the closure test, the
/// NIS probability and the re-seed rule.
pub fn sensor_spec<S: Scalar>() -> SensorSpec<S, 3, 2, 1> {
    let [caustic, ester, outlet, level] = LOOPS;
    let mut spec = SensorSpec::plain();
    spec.channels.inlet_flows = [Some(loop_spec(caustic, true)), Some(loop_spec(ester, true))];
    spec.channels.outlet_flows = [Some(loop_spec(outlet, true))];
    spec.channels.level = Some(loop_spec(level, false));
    spec.closure = Some(ClosureSpec {
        window_ticks: CLOSURE_WINDOW_TICKS,
        level_sigma: S::of(f64::from(LEVEL_SIGMA)),
        flow_sigma: S::of(f64::from(FLOW_NOISE)),
        k: S::of(f64::from(CLOSURE_K)),
        h: S::of(f64::from(CLOSURE_H)),
    });
    spec.nis_probability = S::of(f64::from(NIS_PROBABILITY));
    spec.reseed_after = RESEED_AFTER;
    spec
}

/// The scenario's sensor at the start of the shift, with the NIS bounds
/// `bounds` (for [`NIS_PROBABILITY`]). They are computed once, on the host,
/// by `ChiSquareBounds::new` (`build.rs`) and compiled into the firmware,
/// which takes them with `ChiSquareBounds::from_quantiles`: the target then
/// needs no double precision (their computation in `f64` with `erfc` would
/// add about 8 KB to the image), and its bounds are the host's bit for bit.
///
/// Errors: only if the constants above were edited into an invalid
/// configuration, or the bounds are for another probability.
pub fn sensor<S: Scalar>(bounds: ChiSquareBounds<S>) -> Result<RefSensor<S>, Error> {
    Sensor::observed_with_bounds(observer()?, sensor_spec(), bounds)
}

/// 32-bit xorshift (13, 17, 5): a small deterministic generator.
pub struct Noise(u32);

impl Noise {
    /// A generator from a non-zero seed.
    pub fn new(seed: u32) -> Self {
        Self(if seed == 0 { 1 } else { seed })
    }

    fn next(&mut self) -> u32 {
        let mut x = self.0;
        x ^= x << 13;
        x ^= x >> 17;
        x ^= x << 5;
        self.0 = x;
        x
    }

    /// Uniform on `[0, 1)`: the top 24 bits times 2⁻²⁴ (exact in `f32`).
    pub fn uniform(&mut self) -> f32 {
        (self.next() >> 8) as f32 * (1.0 / 16_777_216.0)
    }

    /// Zero mean, unit variance, bell-shaped: the sum of four uniforms,
    /// centred, times √3 (bounded by ±2√3). Out of line: four draws a tick,
    /// outside the measured window; inlined copies cost flash only.
    #[inline(never)]
    pub fn normal(&mut self) -> f32 {
        let s = self.uniform() + self.uniform() + self.uniform() + self.uniform();
        (s - 2.0) * 1.732_050_8
    }
}

/// A lab event at the start of a tick.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Lab<S> {
    /// Nothing from the lab this second.
    None,
    /// Sample `id` drawn now.
    Drawn(u32),
    /// The result of sample `id` is in.
    Result(u32, S),
}

/// What the plant's instruments and the lab give the gateway for one tick.
#[derive(Clone, Copy, Debug)]
pub struct Tick<S> {
    /// The tick's start, ms since the start of the shift.
    pub now: Millis,
    /// Raw readings taken then: loop currents (mA) of the three meters and
    /// the level transmitter; feeds and temperature in SI units.
    pub raw: RefReadings<S>,
    /// Lab event at the start of the tick.
    pub lab: Lab<S>,
}

impl Tick<f32> {
    /// The same tick in another scalar type (exact: `f32` widens; used by
    /// `build.rs` to count the tick's flops).
    #[allow(dead_code)]
    pub fn cast<S: Scalar>(&self) -> Tick<S> {
        let c = |x: f32| S::of(f64::from(x));
        let r = &self.raw;
        Tick {
            now: self.now,
            raw: Readings {
                inlet_flows: [c(r.inlet_flows[0]), c(r.inlet_flows[1])],
                feed: [
                    [c(r.feed[0][0]), c(r.feed[0][1]), c(r.feed[0][2])],
                    [c(r.feed[1][0]), c(r.feed[1][1]), c(r.feed[1][2])],
                ],
                outlet_flows: [c(r.outlet_flows[0])],
                temperature: c(r.temperature),
                level: c(r.level),
            },
            lab: match self.lab {
                Lab::None => Lab::None,
                Lab::Drawn(id) => Lab::Drawn(id),
                Lab::Result(id, v) => Lab::Result(id, c(v)),
            },
        }
    }
}

/// The lab sample drawn at second `s` of the shift, if any (index from 0).
pub fn lab_draw_at(s: u32) -> Option<usize> {
    let k = s.checked_sub(LAB_FIRST_S)?;
    let j = (k / LAB_EVERY_S) as usize;
    (k % LAB_EVERY_S == 0 && j < LAB_DRAWS).then_some(j)
}

/// True if second `s` of the shift is in the level loop's fault window.
pub fn level_fault_at(s: u32) -> bool {
    (LEVEL_FAULT_AT_S..LEVEL_FAULT_AT_S + LEVEL_FAULT_S).contains(&s)
}

/// The plant's instruments: raw readings of tick `n` from the compiled-in
/// plant (`level_knots`, `lab_values`) and the noise generator. Call once
/// per tick, in order: the noise is a sequence.
pub struct Instruments<'a> {
    noise: Noise,
    level_knots: &'a [f32],
    lab_values: &'a [f32],
}

/// The loop current (mA) of engineering value `v` on span `(lo, hi)`.
fn current(v: f32, (lo, hi): (f32, f32)) -> f32 {
    4.0 + 16.0 * (v - lo) / (hi - lo)
}

impl<'a> Instruments<'a> {
    /// The instruments of a plant whose level (m) at `0, LEVEL_KNOT_S,
    /// 2·LEVEL_KNOT_S, …` s is `level_knots` and whose lab results are
    /// `lab_values` (in draw order).
    pub fn new(level_knots: &'a [f32], lab_values: &'a [f32]) -> Self {
        Self {
            noise: Noise::new(METER_SEED),
            level_knots,
            lab_values,
        }
    }

    /// The readings taken at the start of tick `n` (from 0), at `n` s.
    pub fn readings(&mut self, n: u32) -> Tick<f32> {
        let now = u64::from(n) * u64::from(reference::TICK_MS);
        let u = reference::inputs_at::<f32>(now);
        let [caustic, ester, outlet, level_span] = LOOPS;
        let q0 = u.inlet_flows[0] * (1.0 + CAUSTIC_BIAS + FLOW_NOISE * self.noise.normal());
        let q1 = u.inlet_flows[1] * (1.0 + FLOW_NOISE * self.noise.normal());
        let q2 = u.outlet_flows[0] * (1.0 + FLOW_NOISE * self.noise.normal());
        let k = (n / LEVEL_KNOT_S) as usize;
        let a = self.level_knots.get(k).copied().unwrap_or(f32::NAN);
        let b = self.level_knots.get(k + 1).copied().unwrap_or(a);
        let frac = (n % LEVEL_KNOT_S) as f32 / LEVEL_KNOT_S as f32;
        let level = a + (b - a) * frac + LEVEL_SIGMA * self.noise.normal();
        let level_ma = if level_fault_at(n) {
            LEVEL_FAULT_MA
        } else {
            current(level, level_span)
        };
        let lab = if let Some(j) = lab_draw_at(n) {
            Lab::Drawn(j as u32 + 1)
        } else if let Some(j) = n.checked_sub(LAB_DELAY_S).and_then(lab_draw_at) {
            Lab::Result(
                j as u32 + 1,
                self.lab_values.get(j).copied().unwrap_or(f32::NAN),
            )
        } else {
            Lab::None
        };
        Tick {
            now,
            raw: Readings {
                inlet_flows: [current(q0, caustic), current(q1, ester)],
                feed: u.feed,
                outlet_flows: [current(q2, outlet)],
                temperature: u.temperature,
                level: level_ma,
            },
            lab,
        }
    }
}

/// The sensor and what went wrong with its lab calls.
pub struct Tracked<S> {
    /// The soft sensor.
    pub sensor: RefSensor<S>,
    /// `lab_drawn` / `lab_result` calls that returned an error (must stay 0).
    pub lab_errors: u32,
    /// [`LAB_SIGMA`] in `S` (converted once, not every draw).
    pub lab_sigma: S,
}

impl<S: Scalar> Tracked<S> {
    /// The scenario's sensor at the start of the shift (see [`sensor`]).
    pub fn new(bounds: ChiSquareBounds<S>) -> Result<Self, Error> {
        Ok(Self {
            sensor: sensor(bounds)?,
            lab_errors: 0,
            lab_sigma: S::of(f64::from(LAB_SIGMA)),
        })
    }
}

/// One tick of the gateway: the lab event at the tick's start, then the
/// sensor's tick with the raw readings. Everything else is the kernel's.
#[inline(always)]
pub fn step<S: Scalar>(t: &mut Tracked<S>, r: &Tick<S>) -> SensorReport<S, 3> {
    let lab_ok = match r.lab {
        Lab::None => true,
        Lab::Drawn(id) => t.sensor.lab_drawn(id, LAB_SPECIES, t.lab_sigma).is_ok(),
        Lab::Result(id, c) => t.sensor.lab_result(id, c).is_ok(),
    };
    if !lab_ok {
        t.lab_errors = t.lab_errors.saturating_add(1);
    }
    t.sensor.tick(r.now, &r.raw)
}

/// The checked estimates: `[V (m³), c₀, c₁, c₂ (mol/m³), β (caustic meter)]`
/// (the means only: `Sensor::estimate` would add the σ, which the checks
/// do not use).
#[inline(never)]
pub fn state5<S: Scalar>(sensor: &RefSensor<S>) -> [S; 5] {
    let v = sensor.vessel();
    let c = v.concentrations();
    [v.volume(), c[0], c[1], c[2], sensor.biases().0[0]]
}

/// Number of [`counters`].
pub const COUNTERS: usize = 13;

/// The sensor's and the observer's counters and the lab errors as one
/// array (compared between host and target): level updates fused and
/// rejected by the gate, lab results fused and rejected, measurements
/// skipped, lab samples expired, covariance guards, transition fallbacks,
/// lab call errors, re-seeds, closure windows evaluated and lost, NIS
/// samples rejected.
pub fn counters<S: Scalar>(t: &Tracked<S>) -> [u32; COUNTERS] {
    let o = t
        .sensor
        .observer()
        .map(|o| o.counters())
        .unwrap_or_default();
    let (windows, lost) = t
        .sensor
        .closure()
        .map_or((0, 0), |c| (c.windows_evaluated(), c.windows_lost()));
    [
        o.level_accepted,
        o.level_rejected,
        o.composition_accepted,
        o.composition_rejected,
        o.skipped,
        o.lab_expired,
        o.covariance_guarded,
        o.transition_fallbacks,
        t.lab_errors,
        t.sensor.counters().reseeds,
        windows,
        lost,
        t.sensor.nis().rejected(),
    ]
}

/// Diagnosis rules (bits of `Reasons`) tallied.
pub const REASONS: usize = 19;

/// What the shift's sensor reports add up to. Host (`build.rs`) and target
/// tally with this same code, and the target's tally must equal the host's.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct Tally {
    /// Ticks per NE107 status, in `DeviceStatus` order: good, maintenance
    /// required, out of specification, function check, failure.
    pub status: [u32; 5],
    /// Ticks on which each diagnosis rule fired, in `Reasons` bit order.
    pub reasons: [u32; REASONS],
    /// Ticks per NIS state after the tick: filling, consistent,
    /// overconfident, too cautious.
    pub nis: [u32; 4],
    /// Ticks with a closure alarm after the tick.
    pub closure_alarm: u32,
    /// Ticks whose level reading was `Uncertain`.
    pub level_uncertain: u32,
    /// Ticks whose level reading was `Bad`.
    pub level_bad: u32,
    /// Ticks whose level reading was not `Good` outside the level loop's
    /// fault window, or `Good` inside it (0 when the fault is caught
    /// exactly).
    pub level_misplaced: u32,
    /// Ticks whose level quality and level reasons disagree: `Uncertain`
    /// without `level_uncertain`, `Bad` without `level_bad`, or a level
    /// reason with a `Good` reading (0 when the diagnosis reports it).
    pub level_unexplained: u32,
    /// Ticks on which the level went to the filter (accepted, rejected or
    /// skipped by it).
    pub level_updates: u32,
}

impl Tally {
    /// Add the report of tick `n` (which started at `n` s).
    pub fn add<S>(&mut self, n: u32, r: &SensorReport<S, 3>) {
        let status = match r.diagnosis.status {
            DeviceStatus::Good => 0,
            DeviceStatus::MaintenanceRequired => 1,
            DeviceStatus::OutOfSpecification => 2,
            DeviceStatus::FunctionCheck => 3,
            DeviceStatus::Failure => 4,
        };
        if let Some(c) = self.status.get_mut(status) {
            *c += 1;
        }
        // Over the set bits only (most ticks have none).
        let mut bits = r.diagnosis.reasons.bits();
        while bits != 0 {
            if let Some(c) = self.reasons.get_mut(bits.trailing_zeros() as usize) {
                *c += 1;
            }
            bits &= bits - 1;
        }
        let nis = match r.nis {
            NisState::Filling => 0,
            NisState::Consistent => 1,
            NisState::Overconfident => 2,
            NisState::TooCautious => 3,
        };
        if let Some(c) = self.nis.get_mut(nis) {
            *c += 1;
        }
        self.closure_alarm += u32::from(r.closure.is_some());
        let level = r.inputs.level;
        self.level_uncertain += u32::from(level == Quality::Uncertain);
        self.level_bad += u32::from(level == Quality::Bad);
        self.level_misplaced += u32::from((level != Quality::Good) != level_fault_at(n));
        let reasons = r.diagnosis.reasons;
        let said_uncertain = reasons.contains(Reasons::LEVEL_UNCERTAIN);
        let said_bad = reasons.contains(Reasons::LEVEL_BAD);
        let agrees = match level {
            Quality::Good => !said_uncertain && !said_bad,
            Quality::Uncertain => said_uncertain && !said_bad,
            Quality::Bad => said_bad && !said_uncertain,
        };
        self.level_unexplained += u32::from(!agrees);
        self.level_updates += u32::from(r.level_update.is_some());
    }
}
