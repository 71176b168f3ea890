//! From a checked [`Plant`] to the kernel's validated types, in the scalar
//! type and species count the replay runs with.

use heapless::Vec as HVec;
use holdup_kernel::{
    Bottom, Geometry, InitialState, Kinetics, Model, Outlet, ReactionSpec, Scalar, Shape, Vessel,
    VesselSpec,
};

use crate::plant::{limits, OutletKind, Plant};

/// Reactions capacity of the host replay.
pub const R: usize = limits::REACTIONS;
/// Outlets capacity of the host replay.
pub const O: usize = limits::OUTLETS;
/// Inlets capacity of the host replay.
pub const I: usize = limits::INLETS;

/// The kernel vessel the replay drives.
pub type HostVessel<S, const N: usize> = Vessel<S, N, R, O>;

/// Convert an SI `f64` shape to the scalar type.
pub fn shape<S: Scalar>(s: &Shape<f64>) -> Shape<S> {
    let b = |b: &Bottom<f64>| match *b {
        Bottom::Flat => Bottom::Flat,
        Bottom::Cone { height } => Bottom::Cone {
            height: S::of(height),
        },
        Bottom::Dished { depth } => Bottom::Dished {
            depth: S::of(depth),
        },
    };
    match s {
        Shape::VerticalCylinder {
            diameter,
            height,
            bottom,
        } => Shape::VerticalCylinder {
            diameter: S::of(*diameter),
            height: S::of(*height),
            bottom: b(bottom),
        },
        Shape::HorizontalCylinder { diameter, length } => Shape::HorizontalCylinder {
            diameter: S::of(*diameter),
            length: S::of(*length),
        },
        Shape::Rectangular {
            length,
            width,
            height,
        } => Shape::Rectangular {
            length: S::of(*length),
            width: S::of(*width),
            height: S::of(*height),
        },
        Shape::Sphere { diameter } => Shape::Sphere {
            diameter: S::of(*diameter),
        },
        Shape::Strapping(points) => {
            let mut v = HVec::new();
            for &(l, vol) in points.iter() {
                // Same capacity on both sides.
                let _ = v.push((S::of(l), S::of(vol)));
            }
            Shape::Strapping(v)
        }
    }
}

fn array<S: Scalar, const N: usize>(v: &[f64]) -> [S; N] {
    let mut a = [S::ZERO; N];
    for (x, &y) in a.iter_mut().zip(v.iter()) {
        *x = S::of(y);
    }
    a
}

/// Build the kernel vessel for `plant` with `N` species, starting at
/// `temperature` K. Errors carry the kernel's message.
pub fn vessel<S: Scalar, const N: usize>(
    plant: &Plant,
    temperature: f64,
) -> Result<HostVessel<S, N>, holdup_kernel::Error> {
    let geometry = Geometry::new(shape::<S>(&plant.shape))?;
    let mut outlets = HVec::new();
    for o in &plant.outlets {
        let k = match o.kind {
            OutletKind::Measured(_) => Outlet::Measured,
            OutletKind::Orifice {
                discharge_coefficient,
                area,
                elevation,
            } => Outlet::Orifice {
                discharge_coefficient: S::of(discharge_coefficient),
                area: S::of(area),
                elevation: S::of(elevation),
            },
            OutletKind::Weir {
                discharge_coefficient,
                width,
                crest,
            } => Outlet::Weir {
                discharge_coefficient: S::of(discharge_coefficient),
                width: S::of(width),
                crest_level: S::of(crest),
            },
        };
        // The config reader enforces the outlet limit.
        let _ = outlets.push(k);
    }
    let mut reactions = HVec::new();
    for r in &plant.reactions {
        let kin = |k: &crate::plant::Kinetics| Kinetics {
            rate_constant: S::of(k.rate_constant),
            activation_energy: S::of(k.activation_energy),
            orders: array(&k.orders),
        };
        let _ = reactions.push(ReactionSpec {
            stoichiometry: array(&r.stoichiometry),
            forward: kin(&r.forward),
            reverse: r.reverse.as_ref().map(kin),
            reference_temperature: S::of(r.reference_temperature),
        });
    }
    let model = Model::new(VesselSpec {
        geometry,
        outlets,
        reactions,
        min_holdup: S::of(plant.min_holdup),
        tick_ms: plant.tick_ms,
        method: plant.method,
    })?;
    Vessel::new(
        model,
        &InitialState {
            volume: S::of(plant.initial.volume),
            concentrations: array(&plant.initial.concentrations),
            temperature: S::of(temperature),
        },
    )
}
