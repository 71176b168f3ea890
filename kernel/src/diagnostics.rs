//! Diagnostics: does the balance close, does the observer's model fit the
//! measurements, and what should the device say about itself.
//!
//! Three independent pieces and one pure function that combines them:
//!
//! | item | question | method |
//! |---|---|---|
//! | [`ClosureMonitor`] | does the level follow the flows? | window residual `ΔV_level − Σ(q_in − q_out)·h`, normalised, two-sided CUSUM ([`Cusum`], Page 1954) |
//! | [`NisMonitor`] | are the observer's innovations as large as it predicts? | windowed normalised innovation squared against two-sided chi-square bounds ([`ChiSquareBounds`]) |
//! | [`diagnose`] | what does the device report? | NAMUR NE107 category ([`DeviceStatus`]) and a [`Quality`] per output value, by the rules tabulated there |
//!
//! Everything is fixed-size and `Copy` (the NIS window is a const-generic
//! array), does bounded work per tick, allocates nothing, cannot panic and
//! never fails on the tick: a missing or non-finite reading is skipped and
//! counted. Configuration is checked once, by the constructors.
//!
//! ## Balance closure
//!
//! With constant density, the holdup seen by the level transmitter must
//! change by what the flow meters say came in minus what went out. Over a
//! window of `n` ticks of length `h` the residual
//!
//! ```text
//! r = (V_level,end − V_level,start) − Σ (q_in − q_out)·h
//! ```
//!
//! is zero up to measurement noise. With independent white noise on each
//! holdup reading (standard deviation `σ_V`, m³; for a level transmitter
//! `σ_V ≈ A·σ_z` with `A` the cross-section at the working level) and on the
//! net flow of each tick (`σ_q`, m³/s, the in and out meters combined as
//! `√(σ_in² + σ_out²)`), its standard deviation is
//!
//! ```text
//! σ_r = √(2·σ_V² + n·(σ_q·h)²)
//! ```
//!
//! and `x = r/σ_r` is a standard normal while the balance closes. Windows are
//! **disjoint** — the reading that ends one window does not start the next;
//! the tick after a window only supplies the next start reading, so one tick
//! in `n + 1` is not covered — and therefore the `x` of successive windows
//! are independent, which is what the CUSUM's average-run-length tables
//! assume. (Residuals formed every tick, or over sliding windows, are
//! strongly correlated: consecutive sliding windows share `n − 1` ticks, and
//! consecutive windows that share an end reading are negatively correlated
//! through it, so the sum of their residuals telescopes and the tabulated run
//! lengths would not hold. A tick-by-tick residual also has the worst
//! signal-to-noise ratio: the level term `√2·σ_V` does not shrink with the
//! window while a leak's effect grows with `n`.)
//!
//! Each window's `x` feeds a two-sided [`Cusum`] with reference value `k`
//! and decision interval `h` in units of `σ_r`. Its alarm carries the sign:
//!
//! | CUSUM side | residual | [`ClosureAlarm`] | typical causes |
//! |---|---|---|---|
//! | lower (`S⁻ > h`) | `r < 0`: the level rises slower / falls faster than the flows say | [`ClosureAlarm::MoreOutThanIn`] | a leak or an unmetered outlet (drain, overflow line, open valve); outlet meter reading low; inlet meter reading high; level transmitter drifting down |
//! | upper (`S⁺ > h`) | `r > 0`: the level rises faster / falls slower than the flows say | [`ClosureAlarm::MoreInThanOut`] | an unmetered inlet (passing valve, flush, condensate); inlet meter reading low; outlet meter reading high; level transmitter drifting up |
//!
//! The sign says which way the books are out, not which instrument is wrong:
//! a leak and an inlet meter reading high give the same alarm.
//!
//! Assumptions the normalisation rests on (each makes `σ_r` too small and
//! false alarms more frequent when violated): constant density (a
//! temperature swing changes the volume without any flow), white flow noise
//! (a damped transmitter's noise is correlated across ticks — configure a
//! larger `σ_q`), a level transmitter inside its range (give `None` for the
//! holdup while the vessel is empty or overflowing) and a cross-section
//! known to the accuracy of `σ_V`.
//!
//! ## Model mismatch
//!
//! An observer with innovation `ν` (dimension `m`) and predicted innovation
//! covariance `S` has `ε = νᵀ S⁻¹ ν` distributed as chi-square with `m`
//! degrees of freedom when its model and noise levels are right. Over a
//! window of `W` updates the sum of `ε` is chi-square with the sum of the
//! `m` as degrees of freedom (Bar-Shalom, Li and Kirubarajan, *Estimation
//! with Applications to Tracking and Navigation*, 2001, §5.4). [`NisMonitor`]
//! compares that sum with the two-sided bounds at a configured probability:
//! above the upper bound the filter is **overconfident** (its innovations are
//! larger than it thinks: model error, or process noise set too low); below
//! the lower bound it is **too cautious** (noise set too high).
//!
//! ## Device status (NAMUR NE107)
//!
//! [`diagnose`] maps the kernel's [`StatusFlags`](crate::StatusFlags), the closure alarm, the NIS
//! state, the qualities of the inputs and a function-check switch to one of
//! the NE107 categories and a [`Quality`] per output value. Its rules are
//! tabulated in its documentation. [`Quality`] is the signal layer's
//! ([`crate::signal::Quality`], re-exported here): input and output
//! qualities are one type, ordered `Good < Uncertain < Bad`.

mod closure;
mod ne107;
mod nis;
#[cfg(test)]
mod tests;

pub use crate::signal::Quality;
pub use closure::{
    ClosureAlarm, ClosureConfig, ClosureMonitor, ClosureReport, Cusum, CusumSide, WindowResidual,
};
pub use ne107::{diagnose, DeviceStatus, Diagnosis, DiagnosticInputs, Reasons};
pub use nis::{ChiSquareBounds, NisMonitor, NisReport, NisState, EXACT_DOF};
