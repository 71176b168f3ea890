//! The two open-loop compiled-in scenarios, shared by the firmware (in `f32`) and by
//! `build.rs` (which runs them on the host to produce the expected values).
//!
//! * **Analytic** — a constant-volume stirred tank with a feed step,
//!   exact integrator, in the reference configuration's vessel type (3
//!   species, up to 2 reactions, 1 outlet; so the image carries one
//!   monomorphisation of the kernel, not two):
//!   species 0 fed at 100 mol/m³ from an initial 10 with first-order
//!   consumption `k = 2e-4 1/s`; species 1 an inert washing out from
//!   50 mol/m³ (no feed); species 2 an inert filling from 0 towards its
//!   feed of 20 mol/m³. Closed forms `c(t) = c_ss + (c₀ − c_ss)·e^{−λt}`
//!   with `λ = q/V + k`, `c_ss = c_f·(q/V)/λ` (the component balance
//!   `V dc/dt = q(c_f − c) − kVc` solved with an integrating factor; `k = 0`
//!   for the inerts).
//! * **Reference** — the kernel's reference configuration
//!   ([`holdup_kernel::reference`]: 1 vessel, 3 species, 2 reactions, the
//!   MPRK22 path) over its 8 h shift at a 1 s tick.

use holdup_kernel::{
    Bottom, Error, Geometry, Inputs, Kinetics, Method, Model, Outlet, ReactionSpec, Scalar, Shape,
    Vessel, VesselSpec,
};

/// Analytic scenario: holdup, m³.
pub const EXACT_VOLUME: f64 = 10.0;
/// Analytic scenario: through-flow, m³/s (τ = 10⁴ s).
pub const EXACT_FLOW: f64 = 1e-3;
/// Analytic scenario: feed concentration of each species, mol/m³.
pub const EXACT_FEED: [f64; 3] = [100.0, 0.0, 20.0];
/// Analytic scenario: first-order rate constant of species 0, 1/s.
pub const EXACT_K: f64 = 2e-4;
/// Analytic scenario: initial concentration of each species, mol/m³.
pub const EXACT_C0: [f64; 3] = [10.0, 50.0, 0.0];
/// Analytic scenario: temperature, K (no activation energy: irrelevant).
pub const EXACT_TEMPERATURE: f64 = 298.15;
/// Analytic scenario: ticks (1 s each): 3 residence times of the
/// consumption-accelerated approach, 1/(q/V + k) = 3,333 s.
pub const EXACT_TICKS: u32 = 30_000;
/// Analytic scenario: a checkpoint every this many ticks.
pub const EXACT_EVERY: u32 = 1_000;
/// Analytic scenario: number of checkpoints.
pub const EXACT_POINTS: usize = (EXACT_TICKS / EXACT_EVERY) as usize;

/// Reference scenario: a checkpoint every this many ticks (10 min).
pub const REF_EVERY: u32 = 600;
/// Reference scenario: ticks in the shift.
pub const REF_TICKS: u32 =
    (holdup_kernel::reference::SHIFT_MS / holdup_kernel::reference::TICK_MS as u64) as u32;
/// Reference scenario: number of checkpoints.
pub const REF_POINTS: usize = (REF_TICKS / REF_EVERY) as usize;

/// The analytic scenario's vessel type: the reference configuration's.
pub type ExactVessel<S> = Vessel<S, 3, 2, 1>;

/// The analytic scenario's vessel at `t = 0`.
pub fn exact_vessel<S: Scalar>() -> Result<ExactVessel<S>, Error> {
    let geometry = Geometry::new(Shape::VerticalCylinder {
        diameter: S::of(2.0),
        height: S::of(5.0),
        bottom: Bottom::Flat,
    })?;
    let mut spec = VesselSpec {
        geometry,
        outlets: Default::default(),
        reactions: Default::default(),
        min_holdup: S::of(0.01),
        tick_ms: 1000,
        method: Method::Exact,
    };
    // Capacities 1 and 2: these pushes cannot be refused.
    let _ = spec.outlets.push(Outlet::Measured);
    let _ = spec.reactions.push(ReactionSpec {
        stoichiometry: [-S::ONE, S::ZERO, S::ZERO],
        forward: Kinetics {
            rate_constant: S::of(EXACT_K),
            activation_energy: S::ZERO,
            orders: [S::ONE, S::ZERO, S::ZERO],
        },
        reverse: None,
        reference_temperature: S::of(EXACT_TEMPERATURE),
    });
    Vessel::new(
        Model::new(spec)?,
        &holdup_kernel::InitialState {
            volume: S::of(EXACT_VOLUME),
            concentrations: EXACT_C0.map(S::of),
            temperature: S::of(EXACT_TEMPERATURE),
        },
    )
}

/// The analytic scenario's inputs (held for the whole run): one inlet.
pub fn exact_inputs<S: Scalar>() -> Inputs<S, 3, 1, 1> {
    Inputs {
        inlet_flows: [S::of(EXACT_FLOW)],
        feed: [EXACT_FEED.map(S::of)],
        outlet_flows: [S::of(EXACT_FLOW)],
        temperature: S::of(EXACT_TEMPERATURE),
    }
}

/// Stiff scenario: the reference vessel and network with the
/// saponification 10⁴ times faster (`k = 1.1 m³/(mol·s)` at 25 °C), so that
/// `k·c·h` is about 5 at the start and at the ester pump's drop: the
/// general network's substepped path. Ticks measured.
pub const STIFF_TICKS: u32 = 2 * 3600;

/// Stiff scenario: a checkpoint every this many ticks (10 min).
pub const STIFF_EVERY: u32 = 600;
/// Stiff scenario: number of checkpoints.
pub const STIFF_POINTS: usize = (STIFF_TICKS / STIFF_EVERY) as usize;

/// Factor on the reference saponification rate constant.
pub const STIFF_FACTOR: f64 = 1e4;

/// The stiff scenario's vessel at `t = 0`: the reference vessel with its
/// first reaction [`STIFF_FACTOR`] times faster.
pub fn stiff_vessel<S: Scalar>() -> Result<holdup_kernel::reference::ReferenceVessel<S>, Error> {
    let mut spec = holdup_kernel::reference::spec::<S>()?;
    if let Some(r) = spec.reactions.get_mut(0) {
        r.forward.rate_constant *= S::of(STIFF_FACTOR);
    }
    Vessel::new(
        Model::new(spec)?,
        &holdup_kernel::reference::initial_state(),
    )
}
