//! holdup kernel (crate docs are being written).
#![cfg_attr(not(test), no_std)]

pub mod error;
pub mod scalar;

pub use error::Error;
pub use scalar::{Compensated, Scalar};
