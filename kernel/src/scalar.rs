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
    /// Nearest representable value of an integer (exact below 2²⁴ in `f32`).
    /// A hardware conversion on the Cortex-M4F, where going through `f64`
    /// would link software double-precision arithmetic into the image.
    fn of_u32(x: u32) -> Self;
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
    ($t:ty, $exp:ident, $expm1:ident, $ln:ident, $ln1p:ident, $pow:ident, $sqrt:ident, $cbrt:path, $acos:ident, $fabs:ident) => {
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
            fn of_u32(x: u32) -> Self {
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
                $cbrt(self)
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

impl_scalar!(f32, expf, expm1f, logf, log1pf, powf, sqrtf, cbrt_f32, acosf, fabsf);
impl_scalar!(
    f64,
    exp,
    expm1,
    log,
    log1p,
    pow,
    sqrt,
    libm::cbrt,
    acos,
    fabs
);

/// Cube root in `f32` arithmetic only. libm's `cbrtf` finishes in `f64`,
/// which on the Cortex-M4F links about 3 KiB of software double precision
/// into the image for this one function (the cone-bottom inverse). A first
/// guess from the exponent divided by three (the bit-level start of
/// libm's `cbrtf`, ~6 % off), two Halley steps `y ← y·(y³ + 2x)/(2y³ + x)`
/// (cubic convergence: ~1e-4, then below `f32` rounding), and a final
/// Newton step `y ← y − (y − x/y²)/3`. Max relative error 7.8e-8 against
/// `f64` libm over [1e-9, 1e6] and the subnormals (libm's `cbrtf`: 6.0e-8),
/// far inside the geometry's 1e-5; see the test below.
fn cbrt_f32(x: f32) -> f32 {
    if x == 0.0 || !x.is_finite() {
        return x;
    }
    let mut a = x.abs();
    let mut unscale = 1.0f32;
    if a < f32::MIN_POSITIVE {
        // Subnormal: scale by 2^24 (cube root 2^8) into the normal range.
        a *= 16_777_216.0;
        unscale = 1.0 / 256.0;
    }
    let mut y = f32::from_bits(a.to_bits() / 3 + 709_958_130);
    for _ in 0..2 {
        let y3 = y * y * y;
        y *= (y3 + a + a) / (y3 + y3 + a);
    }
    y -= (y - a / (y * y)) * (1.0 / 3.0);
    y *= unscale;
    if x < 0.0 {
        -y
    } else {
        y
    }
}

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

    /// The `f32` cube root against `f64` libm (reference) on a log grid
    /// over [1e-9, 1e6] (the geometry's range), the subnormals, and the
    /// special values. Measured max relative error: see the assertion.
    #[test]
    fn f32_cube_root_within_an_ulp_of_the_f64_reference() {
        let mut worst = 0.0f64;
        let n = 200_000;
        for k in 0..=n {
            let t = f64::from(k) / f64::from(n);
            for (lo, hi) in [(1e-9f64, 1e6f64), (1.0e-45, 1.2e-38)] {
                let x = (lo.ln() + t * (hi.ln() - lo.ln())).exp() as f32;
                if x == 0.0 {
                    continue;
                }
                let want = libm::cbrt(f64::from(x));
                for s in [1.0f32, -1.0] {
                    let got = f64::from(cbrt_f32(s * x));
                    worst = worst.max((got - f64::from(s) * want).abs() / want);
                }
            }
        }
        // 2^-23 = 1.19e-7 is one ulp at the bottom of a binade.
        // Measured 7.8e-8 (libm's cbrtf, which finishes in f64: 6.0e-8).
        assert!(worst <= 1e-7, "max rel error {worst:e}");
        assert_eq!(cbrt_f32(0.0).to_bits(), 0.0f32.to_bits());
        assert_eq!(cbrt_f32(-0.0).to_bits(), (-0.0f32).to_bits());
        assert_eq!(cbrt_f32(f32::INFINITY), f32::INFINITY);
        assert!(cbrt_f32(f32::NAN).is_nan());
        assert_eq!(cbrt_f32(27.0), 3.0);
        assert_eq!(cbrt_f32(-8.0), -2.0);
        println!("f32 cube root: max rel error {worst:.2e}");
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
