//! Reference firmware of the holdup kernel for a Cortex-M4F gateway.
//!
//! Runs two compiled-in scenarios through the kernel in `f32` inside the
//! gateway's fixed-tick loop, checks the estimates against values computed
//! on the host (`build.rs`), reports what each tick cost and how much stack
//! it used, and exits through semihosting: status 0 when every check
//! passed, non-zero otherwise. See the README's "Gateway firmware" section.

#![no_std]
#![no_main]

mod meter;
mod report;
mod scenarios;
mod tick;

use cortex_m_rt::entry;
use cortex_m_semihosting::debug;
use holdup_kernel::reference::{self, ReferenceVessel};

use meter::Meter;
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
    use super::scenarios::*;
    use super::Flops;
    include!(concat!(env!("OUT_DIR"), "/expected.rs"));
}

/// Relative tolerance of the `f32` estimates against the `f64` answers.
/// Measured: 4.2e-7 (reference, against the host kernel in f64) and 1.2e-7
/// (analytic, against the closed form); the gate allows about 25× that, the
/// same as the host's `verify` allows the exact step in `f32`.
const TOLERANCE: f32 = 1e-5;

/// The targets of the gateway issue.
const TARGET_OPEN_LOOP: u32 = 1_500;
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
    out.line(if pass {
        "holdup-firmware: PASS"
    } else {
        "holdup-firmware: FAIL"
    });
    debug::exit(if pass {
        debug::EXIT_SUCCESS
    } else {
        debug::EXIT_FAILURE
    });
    // Not reached under a debugger or QEMU; on a bare board, park here.
    loop {
        cortex_m::asm::wfi();
    }
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
        "size_of ExactVessel<f32> (kernel state, analytic)",
        core::mem::size_of::<ExactVessel<f32>>() as u32,
        "bytes",
    );
    out.count("meter overhead (subtracted)", meter.calibrate(), unit);

    let mut pass = true;
    pass &= analytic(out, &meter, &mut delay);
    pass &= reference_run(out, &meter, &mut delay);

    #[cfg(not(feature = "board"))]
    out.value(
        "virtual time waited by the fixed-tick loop",
        (delay.waited_ns / 1_000_000) as f32 / 1000.0,
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
        |n, v| {
            let want = expected::EXACT_EXPECTED
                .get((n / EXACT_EVERY) as usize - 1)
                .copied()
                .unwrap_or(f32::NAN);
            let got = injected(v.concentrations()[0], n, EXACT_TICKS / 2);
            let e = rel_error(got, want);
            // NaN never compares: count it as a failure explicitly.
            worst = if e.is_nan() {
                f32::INFINITY
            } else {
                worst.max(e)
            };
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
        "exact tick (1 species, 1 reaction)",
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
    if unit == "instructions" {
        // Reported, not gated: meeting it needs kernel changes (see README).
        let mean = stats.mean();
        out.value(
            "target open-loop tick mean < 1500 instructions (not gated)",
            mean,
            if mean < TARGET_OPEN_LOOP as f32 {
                "instructions: met"
            } else {
                "instructions: MISSED"
            },
        );
    }
    ok
}

/// `x`, or `x·(1 + 1e-4)` at tick `at` with the `inject-error` feature.
fn injected(x: f32, n: u32, at: u32) -> f32 {
    if cfg!(feature = "inject-error") && n == at {
        x * (1.0 + 1e-4)
    } else {
        x
    }
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
