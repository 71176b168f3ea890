//! Figures of the output files with the digits their scalar type holds.
//!
//! A replay runs the kernel in `f32` or `f64`. Every figure it writes to
//! `estimates.csv` is printed with the shortest digits that read back to the
//! same value of that type: up to 17 significant digits for `f64`, up to 9
//! for `f32` (the `f32` value itself is formatted, not its widening to
//! `f64`, which would print 17 digits of which the last 8 are noise). An
//! outside check can then see the kernel's own error, 1e-10 relative and
//! below in `f64`, instead of the rounding of the printout.

use std::fmt;

use holdup_kernel::Scalar;

/// The precision of the replay's scalar type.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Digits {
    /// Shortest round-trip digits of an `f32` (at most 9 significant).
    F32,
    /// Shortest round-trip digits of an `f64` (at most 17 significant).
    F64,
}

impl Digits {
    /// The digits of the scalar type `S` (by its machine epsilon).
    pub fn of<S: Scalar>() -> Self {
        if S::EPSILON.to_f64() > 1e-10 {
            Digits::F32
        } else {
            Digits::F64
        }
    }

    /// `x` in scientific notation, `3.3322226e-1`: for amounts that span
    /// decades (holdups, concentrations, their uncertainties).
    pub fn sci(self, x: f64) -> Figure {
        Figure {
            x,
            digits: self,
            scientific: true,
        }
    }

    /// `x` in positional notation, `1.7683882`: for figures of a familiar
    /// size (levels in m, meter biases as fractions).
    pub fn pos(self, x: f64) -> Figure {
        Figure {
            x,
            digits: self,
            scientific: false,
        }
    }
}

/// One figure, ready for `Display`. An `f32` figure is narrowed to `f32`
/// before printing: without loss for the widening of an `f32` (every kernel
/// output of an `f32` replay), and for a host input (a measured level, an
/// analyser reading) it is the value the kernel was given.
#[derive(Clone, Copy, Debug)]
pub struct Figure {
    x: f64,
    digits: Digits,
    scientific: bool,
}

impl fmt::Display for Figure {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        // Rust prints floats without a precision as the shortest decimal
        // that parses back to the same value.
        match (self.digits, self.scientific) {
            (Digits::F64, true) => write!(f, "{:e}", self.x),
            (Digits::F64, false) => write!(f, "{}", self.x),
            (Digits::F32, true) => write!(f, "{:e}", self.x as f32),
            (Digits::F32, false) => write!(f, "{}", self.x as f32),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Significant digits of a printed figure (the mantissa's digits
    /// without leading or trailing zeros).
    fn significant(s: &str) -> usize {
        let mantissa = s.split('e').next().unwrap_or(s);
        let digits: String = mantissa.chars().filter(char::is_ascii_digit).collect();
        digits.trim_matches('0').len()
    }

    #[test]
    fn f64_figures_read_back_bit_for_bit() {
        // 0.1 + 0.2 is the classic value with no short decimal (IEEE 754
        // binary64: 0x3FD3333333333334).
        let x = 0.1 + 0.2;
        let s = Digits::F64.sci(x).to_string();
        assert_eq!(s, "3.0000000000000004e-1");
        assert_eq!(s.parse::<f64>().map(f64::to_bits), Ok(x.to_bits()));
        for x in [
            1.0 / 3.0,
            2.0f64.sqrt(),
            1000.0 / 3001.0,
            6.02214076e23,
            1e-300,
        ] {
            for s in [
                Digits::F64.sci(x).to_string(),
                Digits::F64.pos(x).to_string(),
            ] {
                assert_eq!(s.parse::<f64>().map(f64::to_bits), Ok(x.to_bits()), "{s}");
                assert!(significant(&s) <= 17, "{s}");
            }
        }
        // A short value stays short and positional where asked.
        assert_eq!(Digits::F64.pos(1.25).to_string(), "1.25");
        assert_eq!(Digits::F64.sci(1000.0).to_string(), "1e3");
    }

    #[test]
    fn f32_figures_print_the_f32_not_its_widening() {
        // 0.1f32 widened is 0.100000001490116119384765625 exactly.
        let x = f64::from(0.1f32);
        assert_eq!(Digits::F32.sci(x).to_string(), "1e-1");
        assert_eq!(Digits::F32.pos(x).to_string(), "0.1");
        for v in [
            1.0f32 / 3.0,
            2.0f32.sqrt(),
            1000.0 / 3001.0,
            f32::MIN_POSITIVE,
        ] {
            let s = Digits::F32.sci(f64::from(v)).to_string();
            assert_eq!(s.parse::<f32>().map(f32::to_bits), Ok(v.to_bits()), "{s}");
            assert!(significant(&s) <= 9, "{s}");
        }
    }

    #[test]
    fn the_digits_follow_the_scalar_type() {
        assert_eq!(Digits::of::<f32>(), Digits::F32);
        assert_eq!(Digits::of::<f64>(), Digits::F64);
    }

    #[test]
    fn non_finite_figures_stay_readable() {
        assert_eq!(Digits::F64.sci(f64::NAN).to_string(), "NaN");
        assert_eq!(Digits::F32.pos(f64::INFINITY).to_string(), "inf");
    }
}
