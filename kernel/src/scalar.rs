//! The scalar type: one small trait implemented for `f32` and `f64`.
//!
//! The gateway (Cortex-M4F) has single-precision hardware only, so `f32` is the
//! firmware's type; the host replays in either. Every elementary function the
//! kernel uses goes through this trait, and every one of them is `libm`'s
//! correctly-rounded-or-nearly routine. The measured error of `micromath`'s
//! approximations on the same functions and ranges is tabulated in the crate
//! root documentation; it does not fit the integrator's budget, so `micromath`
//! is not used on the state path.

use core::fmt::Debug;
use core::ops::{Add, AddAssign, Div, Mul, MulAssign, Neg, Sub, SubAssign};

/// A real number type the kernel can compute in (`f32` or `f64`).
///
/// Only what the kernel needs: arithmetic, comparisons, a few constants, and
/// the elementary functions, all of them total (no panics; NaN propagates and
/// is caught by the callers' finiteness checks).
pub trait Scalar:
    Copy
    + Default
    + Debug
    + PartialOrd
    + Add<Output = Self>
    + Sub<Output = Self>
    + Mul<Output = Self>
    + Div<Output = Self>
    + Neg<Output = Self>
    + AddAssign
    + SubAssign
    + MulAssign
{
    /// 0.
    const ZERO: Self;
    /// 1.
    const ONE: Self;
    /// 2.
    const TWO: Self;
    /// 1/2.
    const HALF: Self;
    /// Machine epsilon (distance from 1 to the next larger number).
    const EPSILON: Self;
    /// Smallest positive normal number.
    const MIN_POSITIVE: Self;
    /// Largest finite number.
    const MAX: Self;
    /// π.
    const PI: Self;

    /// Nearest representable value of an `f64` constant.
    fn of(x: f64) -> Self;
    /// Widen to `f64` (exact for both implementations).
    fn to_f64(self) -> f64;
    /// `e^x`.
    fn exp(self) -> Self;
    /// `e^x − 1`, accurate for tiny `x`.
    fn expm1(self) -> Self;
    /// Natural logarithm.
    fn ln(self) -> Self;
    /// `ln(1 + x)`, accurate for tiny `x`.
    fn ln1p(self) -> Self;
    /// `self^y`.
    fn powf(self, y: Self) -> Self;
    /// Square root.
    fn sqrt(self) -> Self;
    /// Cube root (real, odd).
    fn cbrt(self) -> Self;
    /// Arc cosine, in radians.
    fn acos(self) -> Self;
    /// Absolute value.
    fn abs(self) -> Self;
    /// True unless NaN or infinite.
    fn is_finite(self) -> bool;
    /// True for NaN.
    fn is_nan(self) -> bool;

    /// The larger of two values; a NaN argument yields the other one.
    #[inline]
    fn max(self, other: Self) -> Self {
        if self >= other || other.is_nan() {
            self
        } else {
            other
        }
    }

    /// The smaller of two values; a NaN argument yields the other one.
    #[inline]
    fn min(self, other: Self) -> Self {
        if self <= other || other.is_nan() {
            self
        } else {
            other
        }
    }

    /// Clamp into `[lo, hi]` (assumes `lo <= hi`); NaN becomes `lo`.
    #[inline]
    fn clamp_to(self, lo: Self, hi: Self) -> Self {
        if self >= lo {
            if self <= hi {
                self
            } else {
                hi
            }
        } else {
            lo
        }
    }
}

macro_rules! impl_scalar {
    ($t:ty, $exp:ident, $expm1:ident, $ln:ident, $ln1p:ident, $pow:ident, $sqrt:ident, $cbrt:ident, $acos:ident, $fabs:ident) => {
        impl Scalar for $t {
            const ZERO: Self = 0.0;
            const ONE: Self = 1.0;
            const TWO: Self = 2.0;
            const HALF: Self = 0.5;
            const EPSILON: Self = <$t>::EPSILON;
            const MIN_POSITIVE: Self = <$t>::MIN_POSITIVE;
            const MAX: Self = <$t>::MAX;
            const PI: Self = core::f64::consts::PI as $t;

            #[inline]
            fn of(x: f64) -> Self {
                x as $t
            }
            #[inline]
            fn to_f64(self) -> f64 {
                self as f64
            }
            #[inline]
            fn exp(self) -> Self {
                libm::$exp(self)
            }
            #[inline]
            fn expm1(self) -> Self {
                libm::$expm1(self)
            }
            #[inline]
            fn ln(self) -> Self {
                libm::$ln(self)
            }
            #[inline]
            fn ln1p(self) -> Self {
                libm::$ln1p(self)
            }
            #[inline]
            fn powf(self, y: Self) -> Self {
                libm::$pow(self, y)
            }
            #[inline]
            fn sqrt(self) -> Self {
                libm::$sqrt(self)
            }
            #[inline]
            fn cbrt(self) -> Self {
                libm::$cbrt(self)
            }
            #[inline]
            fn acos(self) -> Self {
                libm::$acos(self)
            }
            #[inline]
            fn abs(self) -> Self {
                libm::$fabs(self)
            }
            #[inline]
            fn is_finite(self) -> bool {
                <$t>::is_finite(self)
            }
            #[inline]
            fn is_nan(self) -> bool {
                <$t>::is_nan(self)
            }
        }
    };
}

impl_scalar!(f32, expf, expm1f, logf, log1pf, powf, sqrtf, cbrtf, acosf, fabsf);
impl_scalar!(f64, exp, expm1, log, log1p, pow, sqrt, cbrt, acos, fabs);

/// Compensated (double-word) accumulator: a large total plus the
/// rounding error lost by adding small increments to it.
///
/// A 500 m³ tank stepped at 1 s with 1 m³/h throughput changes its holdup and
/// amounts by about 1e-6 relative per tick; in `f32` each plain addition would
/// lose most of the increment's digits, and the loss accumulates over a year of
/// ticks. The accumulator keeps the lost part and folds it back in.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
pub struct Compensated<S> {
    hi: S,
    lo: S,
}

impl<S: Scalar> Compensated<S> {
    /// A total equal to `x` with no pending correction.
    #[inline]
    pub fn new(x: S) -> Self {
        Self { hi: x, lo: S::ZERO }
    }

    /// The best single-number value of the total.
    #[inline]
    pub fn value(&self) -> S {
        self.hi + self.lo
    }

    /// Add `dx`: an exact two-sum of the total and the increment, the
    /// rounding error folded into the low part, then renormalised so that the
    /// low part stays below one ulp of the high part (a double-word total).
    #[inline]
    pub fn add(&mut self, dx: S) {
        // Knuth's TwoSum: s + e == hi + dx exactly.
        let s = self.hi + dx;
        let bb = s - self.hi;
        let e = (self.hi - (s - bb)) + (dx - bb);
        let lo = self.lo + e;
        // Dekker's Fast2Sum (|s| >= |lo| holds after the two-sum).
        let hi = s + lo;
        self.lo = lo - (hi - s);
        self.hi = hi;
    }

    /// The high and low words (for checkpoints).
    #[inline]
    pub(crate) fn parts(&self) -> (S, S) {
        (self.hi, self.lo)
    }

    /// Replace the total by `x` (dropping any pending correction).
    #[inline]
    pub fn set(&mut self, x: S) {
        self.hi = x;
        self.lo = S::ZERO;
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn min_max_ignore_nan() {
        assert_eq!(Scalar::max(1.0f32, f32::NAN), 1.0);
        assert_eq!(Scalar::min(f64::NAN, 2.0), 2.0);
        assert_eq!(f32::NAN.clamp_to(0.0, 1.0), 0.0);
        assert_eq!(5.0f64.clamp_to(0.0, 1.0), 1.0);
    }

    #[test]
    fn compensated_sum_keeps_small_increments_in_f32() {
        // 1e7 additions of 1e-3 to 500 in f32: plain summation loses the
        // increments almost entirely (ulp(500) = 3.05e-5, so each add rounds
        // 1e-3 to a multiple of it: 30.5 % error); the compensated total is
        // exact to a few ulp. Reference: 500 + 1e4 exactly (hand arithmetic).
        let mut plain = 500.0f32;
        let mut comp = Compensated::new(500.0f32);
        for _ in 0..10_000_000 {
            plain += 1e-3;
            comp.add(1e-3);
        }
        let exact = 500.0f64 + 1e7 * (1e-3f32 as f64);
        let rel_comp = ((comp.value() as f64) - exact).abs() / exact;
        let rel_plain = ((plain as f64) - exact).abs() / exact;
        assert!(rel_comp < 1e-7, "compensated rel error {rel_comp}");
        assert!(
            rel_plain > 1e-3,
            "plain sum unexpectedly accurate: {rel_plain}"
        );
    }
}
