//! Units, physical constants and time.
//!
//! The kernel computes in SI throughout: volume m³, flow m³/s, amount mol,
//! concentration mol/m³, temperature K, energy J/mol, length m, time s.
//! Conversion from plant units (m³/h, L/min, °C, mol/L …) happens before the
//! kernel, in the host or the firmware's signal layer.
//!
//! Time is never an accumulated float: the caller owns the clock and the
//! kernel keeps time as an integer count of milliseconds ([`Millis`]).

use crate::Scalar;

/// A time or duration in integer milliseconds.
///
/// A `u64` of milliseconds lasts 584 million years, so it never wraps in
/// service; a plant tick is 100 ms to 60 s.
pub type Millis = u64;

/// Molar gas constant R = 8.314462618 J/(mol·K), exact since the 2019 SI
/// redefinition (CODATA 2018).
pub const GAS_CONSTANT: f64 = 8.314_462_618;

/// Standard acceleration of gravity g₀ = 9.80665 m/s², exact (3rd CGPM,
/// 1901; NIST SP 330).
pub const STANDARD_GRAVITY: f64 = 9.806_65;

/// A tick length in milliseconds as seconds in the scalar type.
#[inline]
pub fn seconds<S: Scalar>(ms: u32) -> S {
    // Correctly rounded (one division of exact operands) for ticks below
    // 2^24 ms (4.6 h) in f32, always in f64; no f64 arithmetic on the target.
    S::of_u32(ms) / S::of(1000.0)
}
