//! holdup kernel (crate docs are being written).
#![cfg_attr(not(test), no_std)]

pub mod error;
pub mod geometry;
pub mod integrate;
mod linalg;
pub mod model;
pub mod scalar;
pub mod status;
pub mod units;
pub mod vessel;

pub use error::Error;
pub use geometry::{Bottom, Geometry, Shape};
pub use model::{Inputs, Kinetics, Method, Model, Outlet, ReactionSpec, VesselSpec};
pub use scalar::{Compensated, Scalar};
pub use status::{MethodUsed, StatusFlags, StepReport};
pub use vessel::{InitialState, Vessel};
