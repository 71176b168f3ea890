//! Reference firmware of the holdup kernel for a Cortex-M4F gateway.
//!
//! Runs four compiled-in scenarios through the kernel in `f32` inside the
//! gateway's fixed-tick loop (open loop: analytic, reference and stiff;
//! with the kernel's soft sensor: the reference shift seen through biased,
//! noisy 4–20 mA meters, a level transmitter whose loop fails for 3 min and
//! delayed lab results), checks the estimates, counters and NE107 statuses
//! against values computed on the host (`build.rs`), reports what each tick
//! cost and how much stack it used, and exits through semihosting: status 0
//! when every check passed, non-zero otherwise. See the README's "Gateway
//! firmware" section.

#![no_std]
#![no_main]

mod meter;
mod observed;
mod report;
mod scenarios;
mod tick;

use cortex_m_rt::entry;
use holdup_kernel::diagnostics::ChiSquareBounds;
use holdup_kernel::reference::{self, ReferenceVessel};
use holdup_kernel::Error;

use meter::Meter;
use observed::{
    Instruments, RefObserver, RefSensor, Tally, Tracked, CAUSTIC_BIAS, HOLD_MS, LEVEL_FAULT_S,
    OBS_EVERY, OBS_POINTS, OBS_TICKS,
};
use report::Report;
use scenarios::*;
use tick::{rel_error, ulps, Stats};

#[cfg(feature = "defmt-rtt")]
use defmt_rtt as _;
#[cfg(feature = "defmt-semihosting")]
use defmt_semihosting as _;

/// Floating-point work per tick, counted on the host (see `host/flops.rs`).
#[allow(dead_code)]
pub struct Flops {
    add: f32,
    sub: f32,
    mul: f32,
    div: f32,
    exp: f32,
    expm1: f32,
    ln: f32,
    ln1p: f32,
    powf: f32,
    sqrt: f32,
    cbrt: f32,
    acos: f32,
    arith_min: u32,
    arith_max: u32,
}

impl Flops {
    /// `+ − × ÷` per tick.
    fn arithmetic(&self) -> f32 {
        self.add + self.sub + self.mul + self.div
    }
    /// Calls into `libm` per tick.
    fn elementary(&self) -> f32 {
        self.exp + self.expm1 + self.ln + self.ln1p + self.powf + self.sqrt + self.cbrt + self.acos
    }
}

/// Expected values, computed on the host by `build.rs`.
mod expected {
    use super::observed::*;
    use super::scenarios::*;
    use super::Flops;
    include!(concat!(env!("OUT_DIR"), "/expected.rs"));
}

/// Relative tolerance of the `f32` estimates against the `f64` answers.
/// Measured: 5.9e-7 (reference, against the host kernel in f64) and 2.3e-7
/// (analytic, against the closed forms); the gate allows about 17× that, the
/// same as the host's `verify` allows the exact step in `f32`.
const TOLERANCE: f32 = 1e-5;

/// Sensor, target against host: the same code on the same raw readings in
/// IEEE-754 single precision. Measured: 0 ulp (bit-identical) on all five
/// estimates at all 48 checkpoints; the gate allows none.
const OBS_HOST_ULPS: u32 = 0;
/// Sensor NaOH against the plant (host f64, true flows), absolute mol/m³,
/// at every checkpoint from [`OBS_SETTLE_S`] on: 3σ of one lab analysis.
/// Measured: 0.200 (at 3 h 50 min, after the 3 h result, whose lab noise is
/// +0.275); 0.086 at 8 h. The open-loop sensor on the same readings is off
/// by up to 1.079 (the +3 % caustic meter), so it would fail. (Unchanged
/// since the level moved to the start of the tick: 0.19985 then, 0.19967
/// now.)
const OBS_NAOH_TOL: f32 = 0.3;
/// The NaOH check starts here (s): the first lab result is in (1 h 45 min)
/// and the bias has been learnt from the level.
const OBS_SETTLE_S: u32 = 7200;
/// Bias estimate at the end of the shift: within this of [`CAUSTIC_BIAS`]
/// (the band 2.5 % … 3.5 %; about 1.7 times the filter's own 1σ of
/// 0.0030). Measured: 0.02901, i.e. 9.9e-4 off.
const OBS_BIAS_BAND: f32 = 0.005;

/// The targets of the gateway issue.
const TARGET_OPEN_LOOP: u32 = 1_500;
/// Largest relative error of the stiff scenario against the host's `f64`
/// kernel (measured 9.6e-6: the substeps' error control and `f32`
/// rounding); below the injected 1e-4, so the check can fail.
const STIFF_TOLERANCE: f32 = 5e-5;
/// Worst stiff tick of the stiff scenario, instructions (issue 11).
const TARGET_STIFF_WORST: u32 = 500_000;
/// Mean of the sensor's pipeline tick (lab calls and `Sensor::tick`:
/// conditioning of every input, level update, closure, NIS, prediction,
/// NE107 diagnosis), instructions (issue 12).
const TARGET_PIPELINE: u32 = 6_000;
const TARGET_STATE_BYTES: usize = 2 * 1024;

#[cfg(not(feature = "board"))]
mod platform {
    //! The emulator: instructions by SysTick under icount, virtual delay.
    pub type Meter = crate::meter::IcountSysTick;
    pub type Delay = crate::tick::VirtualDelay;
    pub fn take(cp: cortex_m::Peripherals) -> (Meter, Delay) {
        (Meter::new(cp.SYST), Delay::default())
    }
}

#[cfg(feature = "board")]
mod platform {
    //! A real board: DWT cycles, SysTick busy-wait delay in real time.
    /// The core clock after reset, Hz. Set it to the board's clock (and
    /// configure the clock tree before `main` if it is not the reset one).
    pub const CORE_HZ: u32 = 16_000_000;
    pub type Meter = crate::meter::DwtCycles;
    pub type Delay = cortex_m::delay::Delay;
    pub fn take(cp: cortex_m::Peripherals) -> (Meter, Delay) {
        (
            Meter::new(cp.DCB, cp.DWT, CORE_HZ),
            Delay::new(cp.SYST, CORE_HZ),
        )
    }
}

#[entry]
fn main() -> ! {
    let mut out = Report::open();
    let pass = match cortex_m::Peripherals::take() {
        Some(cp) => run(&mut out, cp),
        None => {
            out.line("core peripherals already taken");
            false
        }
    };
    finish(&mut out, pass)
}

fn finish(out: &mut Report, pass: bool) -> ! {
    out.finish("holdup-firmware", pass)
}

fn run(out: &mut Report, cp: cortex_m::Peripherals) -> bool {
    let (stack_bottom, stack_top) = meter::stack_bounds();
    let sp = meter::stack_pointer();
    meter::paint(stack_bottom, sp.saturating_sub(256));

    let (meter, mut delay) = platform::take(cp);
    let unit = <platform::Meter as Meter>::UNIT;
    out.line("holdup-firmware: kernel in f32 on a Cortex-M4F");
    out.count(
        "size_of ReferenceVessel<f32> (kernel state, reference)",
        core::mem::size_of::<ReferenceVessel<f32>>() as u32,
        "bytes",
    );
    out.count(
        "size_of Observer<f32, 3, 2, 1, 5, 2> (observer state)",
        core::mem::size_of::<RefObserver<f32>>() as u32,
        "bytes",
    );
    out.count(
        "size_of Sensor<f32, 3, 2, 1, 2, 5, 2> (sensor state)",
        core::mem::size_of::<RefSensor<f32>>() as u32,
        "bytes",
    );
    out.count("meter overhead (subtracted)", meter.calibrate(), unit);

    let mut pass = true;
    pass &= analytic(out, &meter, &mut delay);
    pass &= reference_run(out, &meter, &mut delay);
    pass &= stiff_run(out, &meter, &mut delay);
    pass &= sensor_run(out, &meter, &mut delay);
    signal_cost(out, &meter);
    #[cfg(feature = "checkpoint")]
    {
        pass &= checkpoint_run(out);
    }

    #[cfg(not(feature = "board"))]
    out.value(
        "virtual time waited by the fixed-tick loop",
        delay.waited_ns as f32 * 1e-9,
        "s",
    );

    let state = core::mem::size_of::<ReferenceVessel<f32>>();
    let state_ok = state <= TARGET_STATE_BYTES;
    out.count(
        "target kernel state <= 2048 bytes (gated)",
        state as u32,
        if state_ok {
            "bytes: met"
        } else {
            "bytes: MISSED"
        },
    );
    pass &= state_ok;
    let obs_state = core::mem::size_of::<RefObserver<f32>>();
    let obs_state_ok = obs_state <= TARGET_STATE_BYTES;
    out.count(
        "target observer state <= 2048 bytes (gated)",
        obs_state as u32,
        if obs_state_ok {
            "bytes: met"
        } else {
            "bytes: MISSED"
        },
    );
    pass &= obs_state_ok;

    let touched = meter::lowest_touched(stack_bottom, sp.saturating_sub(256));
    out.count(
        "stack high-water, whole firmware (from reset)",
        (stack_top.saturating_sub(touched)) as u32,
        "bytes",
    );
    pass
}

fn analytic(out: &mut Report, meter: &platform::Meter, delay: &mut platform::Delay) -> bool {
    let Ok(mut v) = exact_vessel::<f32>() else {
        out.line("analytic vessel: configuration rejected");
        return false;
    };
    let u = exact_inputs::<f32>();
    let mut worst = 0.0f32;
    let mut points = 0u32;
    let stats = tick::run(
        &mut v,
        meter,
        delay,
        1_000_000_000,
        EXACT_TICKS,
        EXACT_EVERY,
        |_| u,
        |_, _| {},
        |n, v| {
            let want = expected::EXACT_EXPECTED
                .get((n / EXACT_EVERY) as usize - 1)
                .copied()
                .unwrap_or([f32::NAN; 3]);
            let c = v.concentrations();
            for (i, (&got, &want)) in c.iter().zip(want.iter()).enumerate() {
                let got = if i == 0 {
                    injected(got, n, EXACT_TICKS / 2)
                } else {
                    got
                };
                let e = rel_error(got, want);
                // NaN never compares: count it as a failure explicitly.
                worst = if e.is_nan() {
                    f32::INFINITY
                } else {
                    worst.max(e)
                };
            }
            points += 1;
        },
    );
    let ok = points == EXACT_POINTS as u32 && worst <= TOLERANCE && stats.flags.is_empty();
    out.check(
        "analytic (exact step vs closed form)",
        points,
        worst,
        TOLERANCE,
        ok,
    );
    report_stats(
        out,
        "exact tick (3 species, 1 reaction)",
        &stats,
        &expected::FLOPS_EXACT,
    );
    ok
}

fn reference_run(out: &mut Report, meter: &platform::Meter, delay: &mut platform::Delay) -> bool {
    let Ok(mut v) = reference::vessel::<f32>() else {
        out.line("reference vessel: configuration rejected");
        return false;
    };
    let mut worst = 0.0f32;
    let mut worst_ulps = 0u32;
    let mut points = 0u32;
    let mut t = 0u64;
    let stats = tick::run(
        &mut v,
        meter,
        delay,
        reference::TICK_MS * 1_000_000,
        REF_TICKS,
        REF_EVERY,
        |n| {
            t = u64::from(n) * u64::from(reference::TICK_MS);
            reference::inputs_at::<f32>(t)
        },
        |_, _| {},
        |n, v| {
            let j = (n / REF_EVERY) as usize - 1;
            let mut got = tick::state4(v);
            got[1] = injected(got[1], n, REF_TICKS / 2);
            let want = expected::REF_EXPECTED
                .get(j)
                .copied()
                .unwrap_or([f32::NAN; 4]);
            let host = expected::REF_HOST_F32
                .get(j)
                .copied()
                .unwrap_or([f32::NAN; 4]);
            for ((g, w), h) in got.iter().zip(want).zip(host) {
                let e = rel_error(*g, w);
                worst = if e.is_nan() {
                    f32::INFINITY
                } else {
                    worst.max(e)
                };
                worst_ulps = worst_ulps.max(ulps(*g, h));
            }
            points += 1;
        },
    );
    // No status flag either: the scenario never clamps, faults or falls back.
    let ok = points == REF_POINTS as u32 && worst <= TOLERANCE && stats.flags.is_empty();
    out.check(
        "reference (3 species, 2 reactions, MPRK22) vs host f64 kernel",
        points,
        worst,
        TOLERANCE,
        ok,
    );
    out.count(
        "reference: max distance from the host f32 kernel (information)",
        worst_ulps,
        "ulp",
    );
    report_stats(
        out,
        "open-loop reference tick",
        &stats,
        &expected::FLOPS_REFERENCE,
    );
    let unit = <platform::Meter as Meter>::UNIT;
    let mut met = true;
    if unit == "instructions" {
        // Gated: on the emulator the count is exact and the same on every
        // run, so a regression fails CI (a real board counts cycles: not
        // gated there).
        let mean = stats.mean();
        met = mean < TARGET_OPEN_LOOP as f32;
        out.value(
            "target open-loop tick mean < 1500 instructions (gated)",
            mean,
            if met {
                "instructions: met"
            } else {
                "instructions: MISSED"
            },
        );
    }
    ok && met
}

/// The stiff scenario ([`scenarios::stiff_vessel`]): the reference shift's
/// first two hours with the saponification 10⁴ times faster. Checked at
/// every checkpoint against the host's `f64` kernel (to the substep
/// tolerance) and bit for bit against the host's `f32` kernel, with no
/// status flag (in particular no exhausted substep budget); the worst tick
/// is gated.
fn stiff_run(out: &mut Report, meter: &platform::Meter, delay: &mut platform::Delay) -> bool {
    let Ok(mut v) = scenarios::stiff_vessel::<f32>() else {
        out.line("stiff vessel: configuration rejected");
        return false;
    };
    let mut worst = 0.0f32;
    let mut worst_ulps = 0u32;
    let mut points = 0u32;
    let stats = tick::run(
        &mut v,
        meter,
        delay,
        reference::TICK_MS * 1_000_000,
        scenarios::STIFF_TICKS,
        scenarios::STIFF_EVERY,
        |n| reference::inputs_at::<f32>(u64::from(n) * u64::from(reference::TICK_MS)),
        |_, _| {},
        |n, v| {
            let j = (n / scenarios::STIFF_EVERY) as usize - 1;
            let mut got = tick::state4(v);
            got[1] = injected(got[1], n, scenarios::STIFF_TICKS / 2);
            let want = expected::STIFF_EXPECTED
                .get(j)
                .copied()
                .unwrap_or([f32::NAN; 4]);
            let host = expected::STIFF_HOST_F32
                .get(j)
                .copied()
                .unwrap_or([f32::NAN; 4]);
            for ((g, w), h) in got.iter().zip(want).zip(host) {
                worst = nan_max(worst, rel_error(*g, w));
                worst_ulps = worst_ulps.max(ulps(*g, h));
            }
            points += 1;
        },
    );
    let ok = points == scenarios::STIFF_POINTS as u32
        && worst <= STIFF_TOLERANCE
        && stats.flags.is_empty();
    out.check(
        "stiff reference (k x 1e4) vs host f64 kernel",
        points,
        worst,
        STIFF_TOLERANCE,
        ok,
    );
    let same = worst_ulps == 0;
    out.count(
        "stiff reference: distance from the host f32 kernel (gated at 0)",
        worst_ulps,
        "ulp",
    );
    let unit = <platform::Meter as Meter>::UNIT;
    out.cost(
        "stiff reference tick (k x 1e4)",
        unit,
        stats.ticks,
        stats.min,
        stats.mean(),
        stats.max,
    );
    let mut met = true;
    if unit == "instructions" {
        met = stats.max < TARGET_STIFF_WORST;
        out.value(
            "target stiff tick worst < 500000 instructions (gated)",
            stats.max as f32,
            if met {
                "instructions: met"
            } else {
                "instructions: MISSED"
            },
        );
    }
    ok && same && met
}

/// Checkpoint round trip on the target: run the sensor with a lab sample
/// pending, save it twice into a RAM-backed store (two slots), restore into
/// a freshly configured sensor, then continue both on the same readings;
/// the two must go on bit-identically, reports included (the kernel's
/// restore-then-continue property for the whole sensor: observer,
/// conditioning memories, closure and NIS monitors, counters). With
/// `panic-link-check` this also puts the save and restore paths under the
/// no-panic gate.
#[cfg(feature = "checkpoint")]
fn checkpoint_run(out: &mut Report) -> bool {
    use holdup_kernel::checkpoint::Checkpoints;
    use holdup_kernel::storage::MemStorage;
    const SLOT: usize = 1024;
    let (Ok(mut a), Ok(mut b)) = (
        nis_bounds().and_then(Tracked::<f32>::new),
        nis_bounds().and_then(Tracked::<f32>::new),
    ) else {
        out.line("checkpoint: configuration rejected");
        return false;
    };
    let mut inst = Instruments::new(&expected::PLANT_LEVEL, &expected::LAB_VALUES);
    for n in 0..700 {
        let mut r = inst.readings(n);
        if n == 600 {
            r.lab = observed::Lab::Drawn(1);
        }
        let _ = observed::step(&mut a, &r);
    }
    let drawn = a
        .sensor
        .observer()
        .is_some_and(|o| o.pending_lab_samples() == 1);
    let mut mem = [0u8; 2 * SLOT];
    let mut scratch = [0u8; SLOT];
    let mut store = MemStorage::new(&mut mem);
    let slots = Checkpoints::new(0, SLOT as u32);
    let saved = slots.save(&a.sensor, &mut store, &mut scratch).is_ok()
        && slots.save(&a.sensor, &mut store, &mut scratch).is_ok();
    let restored = slots
        .restore_into(&mut b.sensor, &mut store, &mut scratch)
        .is_ok();
    let mut same = true;
    for n in 700..1300 {
        let mut r = inst.readings(n);
        if n == 700 {
            r.lab = observed::Lab::Result(1, 7.0);
        }
        let (ra, rb) = (observed::step(&mut a, &r), observed::step(&mut b, &r));
        let (sa, sb) = (observed::state5(&a.sensor), observed::state5(&b.sensor));
        same &= ra == rb
            && sa
                .iter()
                .zip(sb.iter())
                .all(|(x, y)| x.to_bits() == y.to_bits());
    }
    let pass = drawn && saved && restored && same && a.lab_errors == 0 && b.lab_errors == 0;
    out.check(
        "checkpoint save, restore, continue (sensor, lab pending): bit-identical",
        600,
        if same { 0.0 } else { 1.0 },
        0.0,
        pass,
    );
    pass
}

/// The reference shift through the kernel's soft sensor: checked against
/// the host's `f32` sensor (estimates bit for bit, counters, NE107 status
/// and rule tallies), for the level loop's fault (caught exactly, reported
/// by the diagnosis, level updates skipped), against the plant (NaOH, the
/// caustic meter's bias) and against the open-loop sensor on the same
/// readings; the pipeline tick's mean is gated.
fn sensor_run(out: &mut Report, meter: &platform::Meter, delay: &mut platform::Delay) -> bool {
    let Ok(mut t) = nis_bounds().and_then(Tracked::<f32>::new) else {
        out.line("sensor: configuration rejected");
        return false;
    };
    let mut inst = Instruments::new(&expected::PLANT_LEVEL, &expected::LAB_VALUES);
    let mut worst_ulps = 0u32;
    let mut points = 0u32;
    // |NaOH − plant| of the sensor at every checkpoint.
    let mut err = [f32::NAN; OBS_POINTS];
    let mut beta = f32::NAN;
    let mut tally = Tally::default();
    let stats = tick::run(
        &mut t,
        meter,
        delay,
        reference::TICK_MS * 1_000_000,
        OBS_TICKS,
        OBS_EVERY,
        |n| inst.readings(n),
        |n, r| tally.add(n, r),
        |n, t| {
            let j = (n / OBS_EVERY) as usize - 1;
            let mut got = observed::state5(&t.sensor);
            got[1] = injected(got[1], n, OBS_TICKS / 2);
            let host = expected::OBS_HOST_F32
                .get(j)
                .copied()
                .unwrap_or([f32::NAN; 5]);
            for (g, h) in got.iter().zip(host) {
                worst_ulps = worst_ulps.max(ulps(*g, h));
            }
            if let (Some(e), Some(p)) = (err.get_mut(j), expected::PLANT_NAOH.get(j)) {
                *e = abs(got[1] - *p);
            }
            beta = got[4];
            points += 1;
        },
    );
    let unit = <platform::Meter as Meter>::UNIT;
    let all = points == OBS_POINTS as u32;

    // (1) The target's sensor is the host's, bit for bit, with the same
    // counters (updates fused and rejected, guards, lab errors, re-seeds,
    // closure windows).
    let counts = observed::counters(&t);
    let counts_ok = counts == expected::OBS_HOST_COUNTERS;
    // With the gate at 0 this is `worst_ulps == 0`; written as a tolerance.
    #[allow(clippy::absurd_extreme_comparisons)]
    let ulps_ok = worst_ulps <= OBS_HOST_ULPS;
    let ok_host = all && ulps_ok && counts_ok && stats.flags.is_empty();
    out.check_value(
        "sensor [V, c0, c1, c2, bias] vs host f32 sensor",
        points,
        "max distance",
        worst_ulps as f32,
        OBS_HOST_ULPS as f32,
        if counts_ok {
            "ulp; counters equal"
        } else {
            "ulp; counters DIFFER"
        },
        ok_host,
    );
    out.counts(
        "  level updates fused / rejected by the gate / re-seeds",
        &[counts[0], counts[1], counts[9]],
    );
    out.counts(
        "  lab results fused / rejected, skipped, expired, call errors",
        &[counts[2], counts[3] + counts[4] + counts[5] + counts[8]],
    );
    out.counts(
        "  covariance guards, transition fallbacks, NIS samples rejected",
        &[counts[6] + counts[7], counts[12]],
    );
    out.counts(
        "  closure windows evaluated / lost",
        &[counts[10], counts[11]],
    );

    // (2) The diagnostics: ticks per NE107 status and per rule, per NIS
    // state and with a closure alarm, equal to the host's (`inject-error`
    // moves the middle tick one status up).
    if cfg!(feature = "inject-error") {
        if let Some(c) = tally.status.get_mut(0) {
            *c = c.wrapping_sub(1);
        }
        if let Some(c) = tally.status.get_mut(1) {
            *c = c.wrapping_add(1);
        }
    }
    let host = expected::OBS_HOST_TALLY;
    let same_status = tally.status == host.status;
    let ok_ne107 = all
        && same_status
        && tally.reasons == host.reasons
        && tally.nis == host.nis
        && tally.closure_alarm == host.closure_alarm;
    let differ = tally
        .status
        .iter()
        .zip(host.status.iter())
        .filter(|(a, b)| a != b)
        .count();
    out.check_value(
        "sensor NE107, rule, NIS, closure tallies vs host f32",
        5,
        "statuses differing",
        differ as f32,
        0.0,
        if ok_ne107 {
            "statuses; tallies equal"
        } else {
            "statuses; tallies DIFFER"
        },
        ok_ne107,
    );
    out.counts(
        "  ticks per NE107 status (good / M / S / C / F)",
        &tally.status,
    );
    out.counts(
        "  ticks per NIS state (filling / consistent / over / under)",
        &tally.nis,
    );
    out.counts("  ticks with a closure alarm", &[tally.closure_alarm]);

    // (3) The input path: the level loop's injected failure (3.4 mA, below
    // NAMUR NE43's 3.6 mA limit) is caught by the signal layer on every one
    // of its ticks and on no other (held for a minute — Uncertain — then
    // stale — Bad), the diagnosis says so on each (`level_uncertain`,
    // `level_bad`), and the level update is skipped exactly then.
    let held = (HOLD_MS / u64::from(reference::TICK_MS)) as u32;
    let not_good = tally.level_uncertain + tally.level_bad;
    let skipped_exactly = tally.level_updates == OBS_TICKS - LEVEL_FAULT_S;
    let ok_loops = all
        && not_good == LEVEL_FAULT_S
        && tally.level_uncertain == held
        && tally.level_misplaced == 0
        && tally.level_unexplained == 0
        && skipped_exactly;
    out.check_value(
        "level loop fault (3.4 mA, 180 s) caught, diagnosed",
        1,
        "ticks not Good",
        not_good as f32,
        LEVEL_FAULT_S as f32,
        if skipped_exactly && tally.level_unexplained == 0 {
            "exactly; reasons, skips right"
        } else {
            "exactly; reasons, skips WRONG"
        },
        ok_loops,
    );
    out.counts(
        "  ticks level Uncertain / Bad; with level_uncertain / level_bad",
        &[
            tally.level_uncertain,
            tally.level_bad,
            tally.reasons[14],
            tally.reasons[12],
        ],
    );

    // (4) Against the plant: the NaOH estimate within a tolerance, and closer
    // than the open-loop sensor fed the same readings.
    let first = (OBS_SETTLE_S / OBS_EVERY) as usize - 1;
    let mut worst_obs = 0.0f32;
    let mut worst_open = 0.0f32;
    let mut n_window = 0u32;
    for (j, e) in err.iter().enumerate().skip(first) {
        worst_obs = nan_max(worst_obs, *e);
        let open = expected::OPEN_LOOP_NAOH.get(j).copied().unwrap_or(f32::NAN);
        let plant = expected::PLANT_NAOH.get(j).copied().unwrap_or(f32::NAN);
        worst_open = nan_max(worst_open, abs(open - plant));
        n_window += 1;
    }
    let last = OBS_POINTS - 1;
    let end_obs = err.get(last).copied().unwrap_or(f32::NAN);
    let end_open = abs(expected::OPEN_LOOP_NAOH[last] - expected::PLANT_NAOH[last]);
    let ok_plant = all && worst_obs <= OBS_NAOH_TOL;
    out.check_value(
        "sensor NaOH vs plant (f64, true flows) from 2 h",
        n_window,
        "max |error|",
        worst_obs,
        OBS_NAOH_TOL,
        "mol/m3",
        ok_plant,
    );
    // The ratio is below 1 only if both of its parts are.
    let ratio = nan_max(worst_obs / worst_open, end_obs / end_open);
    let ok_open = all && ratio < 1.0;
    out.check_value(
        "sensor closer to the plant than open loop",
        n_window,
        "max of (max |error|, final |error|) ratio",
        ratio,
        1.0,
        "exclusive",
        ok_open,
    );
    out.value(
        "  open-loop NaOH max |error| in the window",
        worst_open,
        "mol/m3",
    );
    out.value("  NaOH |error| at 8 h: sensor", end_obs, "mol/m3");
    out.value("  NaOH |error| at 8 h: open loop", end_open, "mol/m3");

    // (5) The caustic meter's bias, learnt from the level and the lab.
    let bias_err = abs(beta - CAUSTIC_BIAS);
    let ok_bias = all && bias_err <= OBS_BIAS_BAND;
    out.check_value(
        "sensor caustic meter bias at 8 h vs +0.03",
        1,
        "|error|",
        nan_max(0.0, bias_err),
        OBS_BIAS_BAND,
        "relative",
        ok_bias,
    );
    let (_, bias_sigma) = t.sensor.biases();
    let naoh_sigma = t
        .sensor
        .observer()
        .map_or(f32::NAN, |o| o.concentrations().1[observed::LAB_SPECIES]);
    out.value("  bias estimate at 8 h", beta, "");
    out.value("  its 1 sigma (observer)", bias_sigma[0], "");
    out.value("  NaOH 1 sigma at 8 h (observer)", naoh_sigma, "mol/m3");

    report_stats(out, "sensor pipeline tick", &stats, &expected::FLOPS_SENSOR);
    out.count("  ticks with a lab sample pending", stats.busy_ticks, "");
    out.value("  mean of those ticks", stats.busy_mean(), unit);
    let mut met = true;
    if unit == "instructions" {
        // Gated, as the open-loop tick.
        let mean = stats.mean();
        met = mean < TARGET_PIPELINE as f32;
        out.value(
            "target pipeline tick mean < 6000 instructions (gated)",
            mean,
            if met {
                "instructions: met"
            } else {
                "instructions: MISSED"
            },
        );
    }
    ok_host && ok_ne107 && ok_loops && ok_plant && ok_open && ok_bias && met
}

/// The sensor's NIS bounds as the host computed them (`build.rs`).
fn nis_bounds() -> Result<ChiSquareBounds<f32>, Error> {
    ChiSquareBounds::from_quantiles(
        observed::NIS_PROBABILITY,
        expected::NIS_Z,
        expected::NIS_LOWER,
        expected::NIS_UPPER,
    )
}

fn abs(x: f32) -> f32 {
    holdup_kernel::Scalar::abs(x)
}

/// The larger of `a` and `b`; a NaN in `b` gives infinity (fails any gate).
// Out of line: called at every checkpoint of every scenario; inlined
// copies cost flash, not time that counts.
#[inline(never)]
fn nan_max(a: f32, b: f32) -> f32 {
    if b.is_nan() {
        f32::INFINITY
    } else {
        a.max(b)
    }
}

/// `x`, or `x·(1 + 1e-4)` at tick `at` with the `inject-error` feature.
fn injected(x: f32, n: u32, at: u32) -> f32 {
    if cfg!(feature = "inject-error") && n == at {
        x * (1.0 + 1e-4)
    } else {
        x
    }
}

/// What the input path costs: one `Signal::update` of the level loop's
/// conditioning (4–20 mA scaling, NE43 classification, range check, hold
/// bookkeeping) on a good sample, mean over 1,000 samples of a sweep
/// within the span. Reported, not gated on its own: the sensor runs one
/// per conditioned loop inside its tick (four in the observed scenario),
/// which the pipeline gate covers.
fn signal_cost(out: &mut Report, meter: &platform::Meter) {
    let spec = observed::loop_spec::<f32>(observed::LOOPS[3], false);
    let Ok(mut sig) = holdup_kernel::Signal::new(spec) else {
        out.line("signal cost: loop conditioning rejected");
        return;
    };
    let overhead = meter.calibrate();
    let mut total = 0u32;
    let n = 1000u32;
    for k in 0..n {
        let ma = 8.0 + (k % 100) as f32 * 0.01;
        let a = meter.now();
        let r = sig.update(ma, u64::from(k + 1) * 1000);
        let b = meter.now();
        core::hint::black_box(r);
        total = total.saturating_add(meter.units(a, b).saturating_sub(overhead));
    }
    out.value(
        "cost signal update (4-20 mA loop, good sample), mean",
        total as f32 / n as f32,
        <platform::Meter as Meter>::UNIT,
    );
}

fn report_stats(out: &mut Report, name: &str, st: &Stats, flops: &Flops) {
    let unit = <platform::Meter as Meter>::UNIT;
    out.cost(name, unit, st.ticks, st.min, st.mean(), st.max);
    out.count("  stack high-water of a tick", st.stack as u32, "bytes");
    let arith = flops.arithmetic();
    let elem = flops.elementary();
    out.value("  flops per tick (+ - * /, host count)", arith, "");
    out.value("  libm calls per tick (exp, expm1, ...)", elem, "");
    out.value("  of which sqrt", flops.sqrt, "");
    out.value(
        "  ratio: units per (flop + libm call)",
        st.mean() / (arith + elem),
        unit,
    );
}

#[cfg(not(feature = "panic-link-check"))]
#[panic_handler]
fn panic(_: &core::panic::PanicInfo) -> ! {
    let mut out = Report::open();
    out.line("holdup-firmware: panic");
    finish(&mut out, false)
}

#[cfg(feature = "panic-link-check")]
#[panic_handler]
fn panic(_: &core::panic::PanicInfo) -> ! {
    extern "C" {
        /// Deliberately undefined: if any panic path survives optimisation,
        /// the link fails naming this symbol.
        fn holdup_firmware_has_a_reachable_panic() -> !;
    }
    // SAFETY: never defined, so this is never called in a binary that links.
    unsafe { holdup_firmware_has_a_reachable_panic() }
}
