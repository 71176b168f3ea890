//! The observed scenario, shared by the firmware (which runs it) and by
//! `build.rs` (which computes the plant it observes and replays the filter
//! on the host).
//!
//! The reference configuration's 8 h shift, now watched by the observer
//! `Observer<f32, 3, 2, 1, 5, 2>` (states: holdup, 3 amounts, the relative
//! bias of the caustic inlet meter; 2 lab slots), with the observer settings
//! of the kernel's `observer_tick` benchmark.
//!
//! * **The plant** (the "truth") is the reference vessel run on the host in
//!   `f64` with the true flows. It is not run on the target: what the target
//!   needs of it is compiled in (`build.rs`): its level every
//!   [`LEVEL_KNOT_S`] s and its NaOH concentration when each lab sample is
//!   drawn.
//! * **The meters** read the true flows of `reference::inputs_at` with
//!   pseudo-noise, and the caustic meter reads [`CAUSTIC_BIAS`] high. The
//!   level transmitter reads the plant's level (linear between the knots)
//!   plus noise of σ = [`LEVEL_SIGMA`]. A NaOH sample is drawn every
//!   [`LAB_EVERY_S`] s from [`LAB_FIRST_S`]; its result (plant value plus
//!   noise of σ = [`LAB_SIGMA`]) comes [`LAB_DELAY_S`] s later.
//! * **The input path** is a gateway's: each analog value travels as a
//!   4–20 mA loop current ([`LOOPS`]) and comes back through the kernel's
//!   signal conditioning (`holdup_kernel::signal`: NAMUR NE43 limits,
//!   range, hold of the last good value). The level loop fails for
//!   [`LEVEL_FAULT_S`] s from [`LEVEL_FAULT_AT_S`] (3.4 mA: a broken wire
//!   after NE43); those readings are not `Good`, and the level update is
//!   skipped while they last.
//! * **Each tick**: `Observer::tick` with the conditioned meter readings,
//!   then `update_level` if the level reading is `Good`, then the lab event
//!   of that second if any (`lab_drawn` / `lab_result`).
//!
//! The noise is a 32-bit xorshift generator whose output is turned into
//! `f32` by exact operations only (a 24-bit integer times 2⁻²⁴, sums and
//! products of IEEE-754 single floats, no libm), so the host and the target
//! see bit-identical readings.

use holdup_kernel::{
    reference, BiasTarget, Error, Inputs, Observer, ObserverSpec, Quality, Scalar, Signal,
    SignalKind, SignalSpec, StepReport,
};

/// The observer type of the scenario: 3 species, 2 reactions, 1 outlet,
/// 5 states, 2 pending lab samples.
pub type RefObserver<S> = Observer<S, 3, 2, 1, 5, 2>;
/// The meter readings of one tick of the reference configuration.
pub type RefInputs<S> = Inputs<S, 3, 2, 1>;

/// Ticks (1 s) in the scenario: the reference shift.
pub const OBS_TICKS: u32 = (reference::SHIFT_MS / reference::TICK_MS as u64) as u32;
/// A checkpoint every this many ticks (10 min).
pub const OBS_EVERY: u32 = 600;
/// Number of checkpoints.
pub const OBS_POINTS: usize = (OBS_TICKS / OBS_EVERY) as usize;

/// Relative bias of the caustic (inlet 0) meter: it reads `1 + β` times
/// the true flow.
pub const CAUSTIC_BIAS: f32 = 0.03;
/// Relative noise (1σ) of every flow meter reading.
pub const FLOW_NOISE: f32 = 0.005;
/// Level transmitter noise (1σ), m; also the observer's `level_sigma`.
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
/// How long a loop's last good value stands in for a failed one, ms.
pub const HOLD_MS: u64 = 60_000;

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
    /// centred, times √3 (bounded by ±2√3).
    pub fn normal(&mut self) -> f32 {
        let s = self.uniform() + self.uniform() + self.uniform() + self.uniform();
        (s - 2.0) * 1.732_050_8
    }
}

/// A lab event at the end of a tick.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Lab<S> {
    /// Nothing from the lab this second.
    None,
    /// Sample `id` drawn now.
    Drawn(u32),
    /// The result of sample `id` is in.
    Result(u32, S),
}

/// What the plant's instruments give the observer in one tick.
#[derive(Clone, Copy, Debug)]
pub struct Readings<S> {
    /// Meter readings over the tick (caustic biased, all noisy).
    pub u: RefInputs<S>,
    /// Level at the end of the tick, m.
    pub level: S,
    /// The level reading is `Good` (fused only then).
    pub level_good: bool,
    /// Lab event at the end of the tick.
    pub lab: Lab<S>,
}

impl Readings<f32> {
    /// The same readings in another scalar type (exact: `f32` widens; used
    /// by `build.rs` to count the tick's flops).
    #[allow(dead_code)]
    pub fn cast<S: Scalar>(&self) -> Readings<S> {
        let c = |x: f32| S::of(f64::from(x));
        let u = &self.u;
        Readings {
            u: Inputs {
                inlet_flows: [c(u.inlet_flows[0]), c(u.inlet_flows[1])],
                feed: [
                    [c(u.feed[0][0]), c(u.feed[0][1]), c(u.feed[0][2])],
                    [c(u.feed[1][0]), c(u.feed[1][1]), c(u.feed[1][2])],
                ],
                outlet_flows: [c(u.outlet_flows[0])],
                temperature: c(u.temperature),
            },
            level: c(self.level),
            level_good: self.level_good,
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

/// The plant's instruments: readings of tick `n` from the compiled-in
/// plant (`level_knots`, `lab_values`) and the noise generator. Call once
/// per tick, in order: the noise is a sequence.
pub struct Instruments<'a> {
    noise: Noise,
    level_knots: &'a [f32],
    lab_values: &'a [f32],
    /// The gateway's conditioning of the four loops ([`LOOPS`] order).
    loops: [Signal<f32>; 4],
    /// Ticks whose level reading was not `Good`.
    pub level_not_good: u32,
}

/// The conditioning of one loop with span `(lo, hi)`: NE43 limits, the
/// span as valid range (flows a little below zero allowed and clamped),
/// the last good value held for [`HOLD_MS`].
pub fn conditioned(lo: f32, hi: f32, flow: bool) -> Result<Signal<f32>, Error> {
    Signal::new(SignalSpec {
        kind: SignalKind::Current4to20 { lo, hi },
        min: if flow { lo - 0.01 * (hi - lo) } else { lo },
        max: hi,
        max_rate_per_s: None,
        stuck: None,
        hold_max_ms: HOLD_MS,
        clamp_negative: flow,
    })
}

/// The loop current (mA) of engineering value `v` on span `(lo, hi)`.
fn current(v: f32, (lo, hi): (f32, f32)) -> f32 {
    4.0 + 16.0 * (v - lo) / (hi - lo)
}

impl<'a> Instruments<'a> {
    /// The instruments of a plant whose level (m) every [`LEVEL_KNOT_S`] s
    /// is `level_knots` and whose lab results are `lab_values` (in draw order).
    ///
    /// Errors: only if the loop constants above were edited into an invalid
    /// signal specification.
    pub fn new(level_knots: &'a [f32], lab_values: &'a [f32]) -> Result<Self, Error> {
        let [(a0, b0), (a1, b1), (a2, b2), (a3, b3)] = LOOPS;
        Ok(Self {
            noise: Noise::new(METER_SEED),
            level_knots,
            lab_values,
            loops: [
                conditioned(a0, b0, true)?,
                conditioned(a1, b1, true)?,
                conditioned(a2, b2, true)?,
                conditioned(a3, b3, false)?,
            ],
            level_not_good: 0,
        })
    }

    /// The readings of tick `n` (from 0), which runs from `n` s to `n + 1` s.
    pub fn readings(&mut self, n: u32) -> Readings<f32> {
        let mut u = reference::inputs_at::<f32>(u64::from(n) * u64::from(reference::TICK_MS));
        let caustic = 1.0 + CAUSTIC_BIAS + FLOW_NOISE * self.noise.normal();
        u.inlet_flows[0] *= caustic;
        u.inlet_flows[1] *= 1.0 + FLOW_NOISE * self.noise.normal();
        u.outlet_flows[0] *= 1.0 + FLOW_NOISE * self.noise.normal();
        let s = n + 1;
        let k = (s / LEVEL_KNOT_S) as usize;
        let a = self.level_knots.get(k).copied().unwrap_or(f32::NAN);
        let b = self.level_knots.get(k + 1).copied().unwrap_or(a);
        let frac = (s % LEVEL_KNOT_S) as f32 / LEVEL_KNOT_S as f32;
        let level = a + (b - a) * frac + LEVEL_SIGMA * self.noise.normal();
        // Through the loops and the gateway's conditioning.
        let now = u64::from(s) * u64::from(reference::TICK_MS);
        let fault = (LEVEL_FAULT_AT_S..LEVEL_FAULT_AT_S + LEVEL_FAULT_S).contains(&s);
        let values = [u.inlet_flows[0], u.inlet_flows[1], u.outlet_flows[0], level];
        let mut out = [(0.0f32, Quality::Bad); 4];
        // One loop over the four (one copy of the conditioning in the image).
        for (k, ((o, sig), (v, span))) in out
            .iter_mut()
            .zip(self.loops.iter_mut())
            .zip(values.into_iter().zip(LOOPS))
            .enumerate()
        {
            let ma = if k == 3 && fault {
                LEVEL_FAULT_MA
            } else {
                current(v, span)
            };
            let r = sig.update(ma, now);
            *o = (r.value, r.quality);
        }
        let [(q0, _), (q1, _), (q2, _), (level, level_q)] = out;
        u.inlet_flows = [q0, q1];
        u.outlet_flows = [q2];
        let level_good = level_q == Quality::Good;
        if !level_good {
            self.level_not_good += 1;
        }
        let lab = if let Some(j) = lab_draw_at(s) {
            Lab::Drawn(j as u32 + 1)
        } else if let Some(j) = s.checked_sub(LAB_DELAY_S).and_then(lab_draw_at) {
            Lab::Result(
                j as u32 + 1,
                self.lab_values.get(j).copied().unwrap_or(f32::NAN),
            )
        } else {
            Lab::None
        };
        Readings {
            u,
            level,
            level_good,
            lab,
        }
    }
}

/// The observer and what went wrong with its lab calls.
pub struct Tracked<S> {
    /// The filter.
    pub obs: RefObserver<S>,
    /// `lab_drawn` / `lab_result` calls that returned an error (must stay 0).
    pub lab_errors: u32,
    /// [`LAB_SIGMA`] in `S` (converted once, not every draw).
    pub lab_sigma: S,
}

impl<S: Scalar> Tracked<S> {
    /// The scenario's observer at the start of the shift.
    pub fn new() -> Result<Self, Error> {
        Ok(Self {
            obs: observer()?,
            lab_errors: 0,
            lab_sigma: S::of(f64::from(LAB_SIGMA)),
        })
    }
}

/// One tick of the observed scenario: predict, level update, lab event.
#[inline(always)]
pub fn observe<S: Scalar>(t: &mut Tracked<S>, r: &Readings<S>) -> StepReport<S> {
    let report = t.obs.tick(&r.u);
    if r.level_good {
        let _ = t.obs.update_level(r.level);
    }
    let lab_ok = match r.lab {
        Lab::None => true,
        Lab::Drawn(id) => t.obs.lab_drawn(id, LAB_SPECIES, t.lab_sigma).is_ok(),
        Lab::Result(id, c) => t.obs.lab_result(id, c).is_ok(),
    };
    if !lab_ok {
        t.lab_errors = t.lab_errors.saturating_add(1);
    }
    report
}

/// The checked estimates: `[V (m³), c₀, c₁, c₂ (mol/m³), β (caustic meter)]`.
pub fn state5<S: Scalar>(obs: &RefObserver<S>) -> [S; 5] {
    let v = obs.vessel();
    let c = v.concentrations();
    [v.volume(), c[0], c[1], c[2], obs.biases().0[0]]
}

/// The observer's counters and the lab errors as one array (compared
/// between host and target).
pub fn counters<S: Scalar>(t: &Tracked<S>) -> [u32; 9] {
    let c = t.obs.counters();
    [
        c.level_accepted,
        c.level_rejected,
        c.composition_accepted,
        c.composition_rejected,
        c.skipped,
        c.lab_expired,
        c.covariance_guarded,
        c.transition_fallbacks,
        t.lab_errors,
    ]
}
