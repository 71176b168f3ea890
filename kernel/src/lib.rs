//! # holdup-kernel
//!
//! The balance kernel of a soft sensor for tanks, blend vessels and
//! continuous stirred reactors: from measured flows, feed compositions and
//! temperature it integrates, one fixed tick at a time, the holdup of the
//! vessel and the amount of every species in it, with reactions, and says
//! what it had to clamp on the way. The same code runs on a Cortex-M4F
//! gateway (`f32`, `no_std`, no heap) and in the host replay tool (`f32` or
//! `f64`).
//!
//! Its estimates are advisory. Validate them against lab results, never use
//! them as the only input to a safety function, and follow site procedures
//! and local codes.
//!
//! ## The model and its assumptions
//!
//! * **Well mixed.** The outlet composition is the vessel composition. (A
//!   poorly mixed vessel is better described as tanks in series; not yet
//!   provided.)
//! * **Constant density.** Volumes add: `dV/dt = Σq_in − Σq_out`.
//! * **Conservative form.** The state is holdup `V` (m³) and component
//!   amounts `n_i` (mol), not concentrations, so in-minus-out balances exactly.
//! * **Zero-order hold.** Inputs are held over each tick at the values given
//!   for it; time is integer milliseconds, owned by the caller.
//! * **Kinetics.** Mass-action power law with per-species orders, optional
//!   reverse direction, Arrhenius temperature dependence around a reference
//!   temperature (`R = 8.314462618 J/(mol·K)`).
//! * **Units.** SI everywhere: m, m², m³, m³/s, mol, mol/m³, K, J/mol, s (see
//!   [`units`]).
//! * **Any tick, any speed of reaction.** A first-order network is stepped
//!   by the exact solution of the held linear system; any other network by
//!   MPRK22 when the tick is mild and by error-controlled substeps
//!   otherwise. A steady state of the held inputs is a fixed point at any
//!   tick, amounts never go negative, and the work of a tick is bounded by
//!   numbers fixed at configuration ([`Model::max_squarings`],
//!   [`Model::max_substeps`]).
//!
//! The equations are written out in [`model`]; what one tick does, in order,
//! in [`vessel`]; the integrators and their properties in [`integrate`]. The
//! sensor a plant runs — raw readings in, conditioned, balanced, corrected
//! and diagnosed, estimates with their uncertainty and NE107 status out — is
//! [`Sensor`], one `tick` in the order documented in [`sensor`].
//!
//! ## Layers (one module each)
//!
//! | module | holds |
//! |---|---|
//! | [`scalar`] | the `f32`/`f64` trait, compensated totals |
//! | [`units`] | SI units, constants, integer time |
//! | [`signal`] | raw 4–20 mA / counts / engineering inputs → value + quality + flags (NE43, range, rate, stuck, hold) |
//! | [`geometry`] | level ↔ volume ↔ cross-section of the vessel shapes |
//! | [`model`] | raw [`VesselSpec`] → validated [`Model`]; outlets, kinetics |
//! | [`integrate`] | exact step, matrix exponential of first-order networks, MPRK22 (whole and substepped), reference RK4 and Euler |
//! | [`vessel`] | the state and its [`Vessel::step`] |
//! | [`observer`] | extended Kalman filter: level, analyser and delayed lab corrections, meter biases |
//! | [`diagnostics`] | balance-closure CUSUM, NIS model-mismatch test, NAMUR NE107 status and output qualities |
//! | [`sensor`] | the soft sensor as one type: conditioning of every input, the balance or the observer, recovery, closure, NIS, NE107 — what the firmware and the replay drive |
//! | `modbus` | (feature `modbus`) the PLC link: one register map, and the sensor served over Modbus RTU or TCP |
//! | [`status`] | status flags and what a tick reports |
//! | [`storage`] | byte storage for checkpoints: trait, RAM, SPI FRAM driver |
//! | [`crc`] | CRC-32 for checkpoint records |
//! | `checkpoint` | (feature `serde`) state in two CRC-checked, versioned slots; postcard config encoding |
//! | [`error`] | the one error enum |
//! | [`reference`](mod@reference) | the reference configuration (benchmarks, firmware, demo) |
//!
//! ## Real-time contract
//!
//! [`Vessel::step`] does a fixed amount of work (bounded by the const
//! capacities, never by input values), allocates nothing, does not recurse,
//! and cannot fail: bad inputs are clamped and flagged in the returned
//! [`StepReport`]. Configuration errors are found once, by [`Model::new`] and
//! [`Vessel::new`]; nothing invalid reaches the tick.
//!
//! ## Elementary functions: libm, not micromath
//!
//! The `f32` error of both candidate libraries was measured against `f64`
//! `libm` on the ranges the kernel uses (200,000 points per range; the bench
//! `tests/benches/math_functions.rs` prints the full table):
//!
//! | function, range | libm `f32` max rel | micromath max rel |
//! |---|---|---|
//! | `exp`, [−40, 40] (Arrhenius) | 7.2e-8 | 2.4e-3 |
//! | `expm1`, [−1e-2, −1e-9] (`1 − e^{−λh}`) | 6.0e-8 | 1.0 (no `expm1`; `exp(x) − 1`) |
//! | `ln1p`, ±[1e-9, 1e-2] (volume ratio) | 6.0e-8 | 1.0e3 (no `ln_1p`; `ln(1 + x)`) |
//! | `ln`, [1e-6, 1e4] | 7.8e-8 | 2.3 (near 1) |
//! | `powf`, `c^1.5`, c ∈ [1e-6, 1e4] (orders) | 6.8e-8 | 1.6e-1 |
//! | `sqrt`, [0, 600] (`2 g h`) | 6.0e-8 | 6.1e-2 |
//! | `acos`, [−1, 1] (horizontal cylinder) | 9.9e-8 | 6.0e-2 |
//! | `cbrt`, [1e-9, 1e6] (cone inverse) | 6.0e-8; the kernel's own `f32` routine 7.8e-8 | (none) |
//!
//! The exact integrator must hold 1e-5 relative in `f32` over 5·10⁴ ticks,
//! which needs ≲1e-6 per call; geometry needs 1e-5; even a displayed 1σ
//! needs 1e-2. micromath fits none of these budgets, and on the host it is
//! faster only for `ln` and `powf` (about 0.55–0.75× libm's time) and slower
//! for `exp` (1.9×) and `sqrt` (1.4×). So every function goes through
//! [`Scalar`] to `libm`, and integer orders (1, 2) avoid `powf` altogether.
//! One exception: `f32` `cbrt` is the kernel's own routine (exponent guess,
//! two Halley steps, one Newton step, all in `f32`), because libm's `cbrtf`
//! finishes in `f64`, and that alone linked about 3 KiB of software double
//! precision into the Cortex-M4F image.
//!
//! ## Example
//!
//! A 10 m³ tank with 1 L/s through it, feed stepped from 0 to 100 mol/m³:
//! after one residence time (10⁴ s) it is at 63.2 % of the step.
//!
//! ```
//! use heapless::Vec;
//! use holdup_kernel::{
//!     Bottom, Geometry, InitialState, Inputs, Method, Model, Outlet, Shape, Vessel, VesselSpec,
//! };
//!
//! let geometry = Geometry::new(Shape::VerticalCylinder {
//!     diameter: 2.0f64,
//!     height: 5.0,
//!     bottom: Bottom::Flat,
//! })?;
//! let mut outlets = Vec::new();
//! outlets.push(Outlet::Measured).unwrap();
//! let model: Model<f64, 1, 0, 1> = Model::new(VesselSpec {
//!     geometry,
//!     outlets,
//!     reactions: Vec::new(),
//!     min_holdup: 0.01,
//!     tick_ms: 1000,
//!     method: Method::Auto,
//! })?;
//! let mut tank = Vessel::new(
//!     model,
//!     &InitialState { volume: 10.0, concentrations: [0.0], temperature: 293.15 },
//! )?;
//! let u = Inputs {
//!     inlet_flows: [1e-3],
//!     feed: [[100.0]],
//!     outlet_flows: [1e-3],
//!     temperature: 293.15,
//! };
//! for _ in 0..10_000 {
//!     let report = tank.step(&u);
//!     assert!(report.flags.is_empty());
//! }
//! assert_eq!(tank.time_ms(), 10_000_000);
//! let c = tank.concentrations()[0];
//! assert!((c - 63.212_055_882_855_77).abs() < 1e-9);
//! # Ok::<(), holdup_kernel::Error>(())
//! ```
#![cfg_attr(not(test), no_std)]
#![forbid(unsafe_code)]
#![deny(missing_docs)]

#[cfg(feature = "serde")]
pub mod checkpoint;
pub mod crc;
pub mod diagnostics;
pub mod error;
pub mod geometry;
pub mod integrate;
mod linalg;
#[cfg(feature = "modbus")]
pub mod modbus;
pub mod model;
pub mod observer;
pub mod reference;
pub mod scalar;
pub mod sensor;
#[cfg(feature = "serde")]
mod serde_arrays;
pub mod signal;
pub mod status;
pub mod storage;
pub mod units;
pub mod vessel;

pub use error::Error;
pub use geometry::{Bottom, Geometry, Shape};
pub use model::{Inputs, Kinetics, Method, Model, Network, Outlet, ReactionSpec, VesselSpec};
pub use observer::{BiasTarget, Observer, ObserverSpec, ObserverState, Update};
pub use scalar::{Compensated, Scalar};
pub use sensor::{
    Channel, ChannelSpecs, ClosureSpec, Estimate, Readings, Sensor, SensorReport, SensorSpec,
};
pub use signal::{Quality, Reading, Signal, SignalFlags, SignalKind, SignalSpec, StuckSpec};
pub use status::{MethodUsed, StatusFlags, StepReport};
pub use vessel::{InitialState, Vessel, VesselState};
