//! The fixed-tick loop and what it runs.
//!
//! [`Estimator`] is one tick of whatever the gateway estimates: the
//! open-loop kernel tick ([`holdup_kernel::Vessel::step`]) or the soft
//! sensor's pipeline tick ([`crate::observed::step`]: lab event, then
//! `Sensor::tick`); both are measured by the same loop.
//!
//! [`run`] is the gateway's main loop: take the tick's inputs, step, measure
//! the step's cost, hand its report on, wait out the rest of the tick with an
//! [`embedded_hal::delay::DelayNs`]. On a board that delay sleeps; on the
//! emulator it is [`VirtualDelay`], which only adds up the time asked for, so
//! the 8 h shift runs in seconds.

use embedded_hal::delay::DelayNs;
use holdup_kernel::{Inputs, Scalar, SensorReport, StatusFlags, StepReport, Vessel};

use crate::meter::{self, Meter};
use crate::observed::{step, Lab, Tick, Tracked};

/// One tick of an estimator with inputs `U`.
pub trait Estimator<U> {
    /// What a tick reports.
    type Report;
    /// Advance one tick.
    fn tick(&mut self, u: &U) -> Self::Report;
    /// The kernel's status flags in a report.
    fn flags(report: &Self::Report) -> StatusFlags;
    /// Whether the coming tick belongs to the estimator's dearer kind
    /// (counted apart in [`Stats`]): the sensor with a lab sample pending.
    fn busy(&self) -> bool {
        false
    }
    /// Whether the stack of the tick with inputs `u` must be measured even
    /// off the checkpoints (a rare event: a lab draw or result).
    fn sample_stack(&self, _u: &U) -> bool {
        false
    }
}

impl<const N: usize, const R: usize, const O: usize, const I: usize> Estimator<Inputs<f32, N, I, O>>
    for Vessel<f32, N, R, O>
{
    type Report = StepReport<f32>;

    #[inline(always)]
    fn tick(&mut self, u: &Inputs<f32, N, I, O>) -> StepReport<f32> {
        self.step(u)
    }

    fn flags(report: &StepReport<f32>) -> StatusFlags {
        report.flags
    }
}

impl Estimator<Tick<f32>> for Tracked<f32> {
    type Report = SensorReport<f32, 3>;

    #[inline(always)]
    fn tick(&mut self, r: &Tick<f32>) -> SensorReport<f32, 3> {
        step(self, r)
    }

    fn flags(report: &SensorReport<f32, 3>) -> StatusFlags {
        report.step.flags
    }

    fn busy(&self) -> bool {
        self.sensor
            .observer()
            .is_some_and(|o| o.pending_lab_samples() > 0)
    }

    fn sample_stack(&self, r: &Tick<f32>) -> bool {
        r.lab != Lab::None
    }
}

/// A delay that does not wait: it records the time asked for (emulator).
#[cfg(not(feature = "board"))]
#[derive(Default)]
pub struct VirtualDelay {
    /// Total time asked for, ns.
    pub waited_ns: u64,
}

#[cfg(not(feature = "board"))]
impl DelayNs for VirtualDelay {
    fn delay_ns(&mut self, ns: u32) {
        self.waited_ns = self.waited_ns.saturating_add(u64::from(ns));
    }
}

/// Per-tick cost and stack over a run.
pub struct Stats {
    /// Ticks run.
    pub ticks: u32,
    /// Cheapest tick, meter units.
    pub min: u32,
    /// Dearest tick, meter units.
    pub max: u32,
    /// Sum over all ticks, meter units.
    pub sum: u64,
    /// Deepest stack use of the sampled ticks, bytes.
    pub stack: usize,
    /// Union of the ticks' status flags.
    pub flags: StatusFlags,
    /// Ticks for which [`Estimator::busy`] held before the tick.
    pub busy_ticks: u32,
    /// Their summed cost, meter units.
    pub busy_sum: u64,
}

impl Stats {
    /// Add one tick's cost. Out of line: one copy for the four scenarios'
    /// loops (it runs outside the measured window).
    #[inline(never)]
    fn record(&mut self, cost: u32, busy: bool, flags: StatusFlags) {
        self.ticks += 1;
        self.min = self.min.min(cost);
        self.max = self.max.max(cost);
        self.sum += u64::from(cost);
        self.flags |= flags;
        if busy {
            self.busy_ticks += 1;
            self.busy_sum += u64::from(cost);
        }
    }

    /// Mean cost per tick (in `f32`, relative error ~1e-7: no software
    /// `f64` in the image).
    pub fn mean(&self) -> f32 {
        if self.ticks == 0 {
            0.0
        } else {
            self.sum as f32 / self.ticks as f32
        }
    }

    /// Mean cost of the busy ticks.
    pub fn busy_mean(&self) -> f32 {
        if self.busy_ticks == 0 {
            0.0
        } else {
            self.busy_sum as f32 / self.busy_ticks as f32
        }
    }
}

/// Bytes of stack below the caller painted before a sampled tick.
const PAINT_DEPTH: usize = 16 * 1024;
/// Room left unpainted for `paint`'s own frame.
const PAINT_MARGIN: usize = 64;

/// One tick, not inlined, so that its stack use starts at the caller's
/// stack pointer.
#[inline(never)]
fn step_once<U, E: Estimator<U>>(est: &mut E, u: &U) -> E::Report {
    est.tick(u)
}

/// Run `ticks` ticks of `period_ns` each. `inputs(n)` gives tick `n`'s
/// inputs (from 0); `report(n, r)` gets tick `n`'s report (from 0, outside
/// the measured window); `checkpoint(n, est)` is called after tick `n`
/// (from 1) when `n % every == 0`, and that tick's stack is measured
/// (painting is outside the measured window), as is the stack of every tick
/// for which [`Estimator::sample_stack`] holds.
#[allow(clippy::too_many_arguments)]
pub fn run<U, E, M, D>(
    est: &mut E,
    meter: &M,
    delay: &mut D,
    period_ns: u32,
    ticks: u32,
    every: u32,
    mut inputs: impl FnMut(u32) -> U,
    mut report: impl FnMut(u32, &E::Report),
    mut checkpoint: impl FnMut(u32, &E),
) -> Stats
where
    E: Estimator<U>,
    M: Meter,
    D: DelayNs,
{
    let overhead = meter.calibrate();
    let (stack_bottom, _) = meter::stack_bounds();
    let mut st = Stats {
        ticks: 0,
        min: u32::MAX,
        max: 0,
        sum: 0,
        stack: 0,
        flags: StatusFlags::NONE,
        busy_ticks: 0,
        busy_sum: 0,
    };
    for n in 0..ticks {
        let u = inputs(n);
        let checkpoint_due = every > 0 && (n + 1) % every == 0;
        let sampled = checkpoint_due || est.sample_stack(&u);
        let busy = est.busy();
        let sp = meter::stack_pointer();
        let low = sp.saturating_sub(PAINT_DEPTH).max(stack_bottom);
        let top = sp.saturating_sub(PAINT_MARGIN);
        if sampled {
            meter::paint(low, top);
        }
        let t0 = meter.now();
        let rep = step_once(est, &u);
        let t1 = meter.now();
        if sampled {
            let touched = meter::lowest_touched(low, top);
            st.stack = st.stack.max(sp.saturating_sub(touched));
        }
        report(n, &rep);
        if checkpoint_due {
            checkpoint(n + 1, est);
        }
        let cost = meter.units(t0, t1).saturating_sub(overhead);
        st.record(cost, busy, E::flags(&rep));
        let spent = cost.saturating_mul(meter.ns_per_unit());
        delay.delay_ns(period_ns.saturating_sub(spent));
    }
    st
}

/// Relative error of `got` against `want` (absolute where `want` is 0).
// Out of line: called at every checkpoint of every scenario; inlined
// copies cost flash, not time that counts.
#[inline(never)]
pub fn rel_error(got: f32, want: f32) -> f32 {
    let d = Scalar::abs(got - want);
    let w = Scalar::abs(want);
    if w > 0.0 {
        d / w
    } else {
        d
    }
}

/// Distance in units in the last place between two finite `f32`s of the
/// same sign (saturating; `u32::MAX` otherwise).
// Out of line: called at every checkpoint of every scenario; inlined
// copies cost flash, not time that counts.
#[inline(never)]
pub fn ulps(a: f32, b: f32) -> u32 {
    if !a.is_finite() || !b.is_finite() || (a < 0.0) != (b < 0.0) {
        return u32::MAX;
    }
    let (x, y) = (a.to_bits(), b.to_bits());
    x.max(y) - x.min(y)
}

/// The reference concentrations as `[V, c₀, c₁, c₂]` (out of line: called
/// at checkpoints by two scenarios).
#[inline(never)]
pub fn state4<const R: usize, const O: usize>(v: &Vessel<f32, 3, R, O>) -> [f32; 4] {
    let c = v.concentrations();
    [v.volume(), c[0], c[1], c[2]]
}
