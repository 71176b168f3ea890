//! The reference configuration: one vessel, 3 species, 2 reactions.
//!
//! An invented plant used by the benchmarks, the firmware and the host demo,
//! so that all of them measure the same thing: a small continuous
//! saponification reactor at a (fictional) soap works, where caustic soda
//! and ethyl acetate are fed by two pumps into a dished-bottom stirred vessel
//! and the product leaves through a metered outlet.
//!
//! * Species: 0 NaOH, 1 ethyl acetate, 2 sodium acetate (ethanol, the other
//!   product, is not tracked).
//! * Reaction 0: NaOH + EtOAc → NaOAc, first order in each;
//!   `k(25 °C) = 1.1e-4 m³/(mol·s)` (0.11 L/(mol·s)), `E_a = 41 kJ/mol`
//!   (textbook values for this reaction, from memory; here they only make the
//!   scenario plausible, no test depends on them).
//! * Reaction 1: NaOH → (carbonate), slow pseudo-first-order loss of caustic
//!   to CO₂ picked up from the air, `k = 2e-6 1/s`.
//!
//! The scenario ([`inputs_at`]) is a shift of 8 h at a 1 s tick: steady feed,
//! the ester pump drops to 80 % at 2 h, and the jacket brings the vessel from
//! 25 °C to 35 °C between 4 h and 6 h.

use heapless::Vec;

use crate::geometry::{Bottom, Geometry, Shape};
use crate::model::{Inputs, Kinetics, Method, Model, Outlet, ReactionSpec, VesselSpec};
use crate::units::Millis;
use crate::vessel::{InitialState, Vessel};
use crate::{Error, Scalar};

/// Species in the reference configuration.
pub const N: usize = 3;
/// Reactions in the reference configuration.
pub const R: usize = 2;
/// Inlets in the reference configuration.
pub const I: usize = 2;
/// Outlets in the reference configuration.
pub const O: usize = 1;

/// The reference vessel type.
pub type ReferenceVessel<S> = Vessel<S, N, R, O>;

/// Feed concentration of each pump, mol/m³ (0.1 mol/L).
pub const FEED_CONCENTRATION: f64 = 100.0;
/// Nominal flow of each feed pump, m³/s (0.6 m³/h).
pub const PUMP_FLOW: f64 = 0.6 / 3600.0;
/// Tick, ms.
pub const TICK_MS: u32 = 1000;
/// Length of the scenario, ms (8 h).
pub const SHIFT_MS: Millis = 8 * 3600 * 1000;

const T_REF: f64 = 298.15;

/// The reference model. Errors only if the constants above were edited into
/// something invalid.
pub fn model<S: Scalar>() -> Result<Model<S, N, R, O>, Error> {
    Model::new(spec()?)
}

/// The reference model's raw description (for variants of it, such as the
/// firmware's stiff scenario).
pub fn spec<S: Scalar>() -> Result<VesselSpec<S, N, R, O>, Error> {
    let geometry = Geometry::new(Shape::VerticalCylinder {
        diameter: S::of(1.6),
        height: S::of(2.0),
        bottom: Bottom::Dished { depth: S::of(0.25) },
    })?;
    let mut outlets = Vec::new();
    let _ = outlets.push(Outlet::Measured);
    let mut reactions = Vec::new();
    let _ = reactions.push(ReactionSpec {
        stoichiometry: [S::of(-1.0), S::of(-1.0), S::ONE],
        forward: Kinetics {
            rate_constant: S::of(1.1e-4),
            activation_energy: S::of(41_000.0),
            orders: [S::ONE, S::ONE, S::ZERO],
        },
        reverse: None,
        reference_temperature: S::of(T_REF),
    });
    let _ = reactions.push(ReactionSpec {
        stoichiometry: [S::of(-1.0), S::ZERO, S::ZERO],
        forward: Kinetics {
            rate_constant: S::of(2e-6),
            activation_energy: S::ZERO,
            orders: [S::ONE, S::ZERO, S::ZERO],
        },
        reverse: None,
        reference_temperature: S::of(T_REF),
    });
    Ok(VesselSpec {
        geometry,
        outlets,
        reactions,
        min_holdup: S::of(0.05),
        tick_ms: TICK_MS,
        method: Method::Auto,
    })
}

/// The reference vessel at the start of the shift: 2.5 m³ of water-diluted
/// product at 25 °C.
pub fn vessel<S: Scalar>() -> Result<ReferenceVessel<S>, Error> {
    Vessel::new(model()?, &initial_state())
}

/// The reference vessel's state at the start of the shift.
pub fn initial_state<S: Scalar>() -> InitialState<S, N> {
    InitialState {
        volume: S::of(2.5),
        concentrations: [S::of(5.0), S::of(5.0), S::of(40.0)],
        temperature: S::of(T_REF),
    }
}

/// The scenario's inputs at time `t` (ms since the start of the shift).
pub fn inputs_at<S: Scalar>(t: Millis) -> Inputs<S, N, I, O> {
    const H: Millis = 3600 * 1000;
    let ester = if t < 2 * H { S::ONE } else { S::of(0.8) };
    // In the scalar type (integer milliseconds below 2^24 convert exactly):
    // no f64 arithmetic on the target.
    let temp_c = if t < 4 * H {
        S::of(25.0)
    } else if t < 6 * H {
        let frac = S::of_u32((t - 4 * H) as u32) / S::of_u32((2 * H) as u32);
        S::of(25.0) + S::of(10.0) * frac
    } else {
        S::of(35.0)
    };
    let q_caustic = S::of(PUMP_FLOW);
    let q_ester = q_caustic * ester;
    Inputs {
        inlet_flows: [q_caustic, q_ester],
        feed: [
            [S::of(FEED_CONCENTRATION), S::ZERO, S::ZERO],
            [S::ZERO, S::of(FEED_CONCENTRATION), S::ZERO],
        ],
        outlet_flows: [q_caustic + q_ester],
        temperature: temp_c + S::of(273.15),
    }
}
