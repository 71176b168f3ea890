//! Signal conditioning: raw transmitter inputs to validated engineering
//! values with a quality, before they reach the balance tick.
//!
//! A [`SignalSpec`] is the raw description of one input (public fields, as
//! read from a configuration). [`Signal::new`] checks it once; the resulting
//! [`Signal`] cannot be invalid. Each sample then goes through
//! [`Signal::update`], which returns a [`Reading`]: the value to use, its
//! [`Quality`] and the [`SignalFlags`] that explain it.
//!
//! # What one update does, in order
//!
//! 1. **Time.** Times are integer milliseconds owned by the caller and must
//!    rise strictly. A sample at or before the last accepted time (duplicate
//!    or out of order) is rejected: the state is not touched and the last
//!    reading is returned again, with [`SignalFlags::TIME_NOT_INCREASING`]
//!    added.
//! 2. **Finite.** A NaN or infinite raw value is a fault
//!    ([`SignalFlags::NOT_FINITE`]).
//! 3. **Scaling.** `Current4to20`: the current is classified after NAMUR NE43
//!    (see [`Ne43`]); at or below 3.6 mA, or at or above 21.0 mA, it is a
//!    signal failure and a fault; between 3.6 and 3.8 mA or 20.5 and 21.0 mA
//!    the transmitter is saturated: the value at the nearer measurement limit
//!    (3.8 or 20.5 mA) is used, with quality at best `Uncertain`. Then 4 mA
//!    maps linearly to `lo` and 20 mA to `hi`. `Counts`: `raw_lo` maps to
//!    `lo` and `raw_hi` to `hi`, linearly, without limits. `Engineering`: the
//!    value is used as is.
//! 4. **Range.** A value outside the configured valid range `[min, max]` (or
//!    one that overflowed in scaling) is a fault
//!    ([`SignalFlags::OUT_OF_RANGE`]).
//! 5. **Rate of change.** A value that departs from the last accepted value
//!    (the last one that passed steps 2–5, `Good` or `Uncertain`) faster
//!    than the configured rate is a spike and a fault
//!    ([`SignalFlags::RATE_LIMIT`]). If the next sample to pass steps 2–4
//!    lies within the rate of that rejected one, the change is taken as a
//!    real step and accepted (so a genuine step costs one sample of hold).
//! 6. **Stuck.** If the value has stayed within the tolerance of the first
//!    value of its flat run for longer than the configured duration, the
//!    reading is at best `Uncertain` ([`SignalFlags::STUCK`]); the value
//!    is still used.
//! 7. **Negative clamp.** For flows (`clamp_negative`), a negative value that
//!    passed the range check becomes zero ([`SignalFlags::NEGATIVE_CLAMPED`]);
//!    the quality is not lowered. Set `min` slightly below zero (zero-point
//!    noise of the meter) to use this; a value below `min` is a fault, not
//!    clamped.
//! 8. **Hold.** On any fault the last good value is used while it is at
//!    most `hold_max_ms` old: quality `Uncertain`, [`SignalFlags::HELD`].
//!    Past that age, or with no good value yet, the quality is `Bad` and
//!    [`SignalFlags::STALE`] is set; the value is still the last good one if
//!    there is one ([`SignalFlags::HELD`] too), else the point of `[min, max]`
//!    nearest zero. Every value returned is finite.
//!
//! Only `Good` readings become the last good value; `Uncertain` ones
//! (saturated, stuck) are passed on but not held later.
//!
//! # Policies
//!
//! | input condition | value used | quality | flags |
//! |---|---|---|---|
//! | time ≤ last accepted time | last reading's | last reading's | last reading's + `TIME_NOT_INCREASING` |
//! | NaN or ±∞ | held / fallback | `Uncertain` held, else `Bad` | `NOT_FINITE` + `HELD` and/or `STALE` |
//! | ≤ 3.6 mA | held / fallback | as above | `NE43_LOW` + … |
//! | ≥ 21.0 mA | held / fallback | as above | `NE43_HIGH` + … |
//! | 3.6–3.8 or 20.5–21.0 mA (exclusive) | scaled at 3.8 / 20.5 mA | `Uncertain` | `OUT_OF_MEASUREMENT_RANGE` |
//! | outside `[min, max]` | held / fallback | as above | `OUT_OF_RANGE` + … |
//! | change faster than `max_rate_per_s` vs last accepted | held / fallback | as above | `RATE_LIMIT` + … |
//! | flat within tolerance longer than `max_flat_ms` | the value | `Uncertain` | `STUCK` |
//! | negative, within `[min, max]`, `clamp_negative` | 0 | unchanged | `NEGATIVE_CLAMPED` |
//! | negative, within `[min, max]`, no clamping | the value | unchanged | none |
//! | fault, last good ≤ `hold_max_ms` old | last good | `Uncertain` | fault + `HELD` |
//! | fault, last good older | last good | `Bad` | fault + `HELD` + `STALE` |
//! | fault, no good value yet | nearest point of `[min, max]` to 0 | `Bad` | fault + `STALE` |
//!
//! Outputs that depend on several signals take the worst of their qualities:
//! [`Quality::worst`], [`Quality::combine`].
//!
//! # Real-time contract
//!
//! [`Signal::update`] does a fixed amount of work (no loop, no recursion, no
//! heap) and cannot fail or panic; everything about a sample is said in the
//! returned [`Reading`]. All types here are `Copy` and fixed-size.

use crate::units::Millis;
use crate::{Error, Scalar};

/// NAMUR NE43: at or below this current the loop signals a failure, mA.
pub const NE43_FAIL_LOW_MA: f64 = 3.6;
/// NAMUR NE43: lower end of the measurement range (underrange included), mA.
pub const NE43_MEASURE_LOW_MA: f64 = 3.8;
/// NAMUR NE43: upper end of the measurement range (overrange included), mA.
pub const NE43_MEASURE_HIGH_MA: f64 = 20.5;
/// NAMUR NE43: at or above this current the loop signals a failure, mA.
pub const NE43_FAIL_HIGH_MA: f64 = 21.0;

/// How a loop current is read after NAMUR NE43.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Ne43 {
    /// At or below 3.6 mA (or NaN, or −∞): signal failure, low.
    FailLow,
    /// Above 3.6 and below 3.8 mA: saturated below the measurement range.
    SaturatedLow,
    /// 3.8 to 20.5 mA inclusive: a measurement (3.8–4 and 20–20.5 mA are
    /// under- and overrange, still valid).
    Measuring,
    /// Above 20.5 and below 21.0 mA: saturated above the measurement range.
    SaturatedHigh,
    /// At or above 21.0 mA (or +∞): signal failure, high.
    FailHigh,
}

impl Ne43 {
    /// Classify a loop current in mA. NaN classifies as [`Ne43::FailLow`]
    /// ([`Signal::update`] catches it earlier as not finite).
    pub fn classify<S: Scalar>(ma: S) -> Self {
        // Written so that NaN fails every `>` and lands on FailLow.
        if ma > S::of(NE43_FAIL_LOW_MA) {
            if ma < S::of(NE43_MEASURE_LOW_MA) {
                Ne43::SaturatedLow
            } else if ma <= S::of(NE43_MEASURE_HIGH_MA) {
                Ne43::Measuring
            } else if ma < S::of(NE43_FAIL_HIGH_MA) {
                Ne43::SaturatedHigh
            } else {
                Ne43::FailHigh
            }
        } else {
            Ne43::FailLow
        }
    }
}

/// How the raw input is turned into engineering units.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
pub enum SignalKind<S> {
    /// A 4–20 mA loop: the raw value is the current in mA; `lo` is the
    /// engineering value at 4 mA, `hi` at 20 mA (`hi > lo`).
    Current4to20 {
        /// Engineering value at 4 mA.
        lo: S,
        /// Engineering value at 20 mA.
        hi: S,
    },
    /// ADC counts (or any raw number) with a configured span: `raw_lo` maps
    /// to `lo`, `raw_hi` to `hi` (`raw_hi > raw_lo`, `hi > lo`); values
    /// outside the span are extrapolated, then range-checked.
    Counts {
        /// Raw value at the low end of the span.
        raw_lo: S,
        /// Raw value at the high end of the span.
        raw_hi: S,
        /// Engineering value at `raw_lo`.
        lo: S,
        /// Engineering value at `raw_hi`.
        hi: S,
    },
    /// Already in engineering units: used as is.
    Engineering,
}

/// Flat-line (stuck value) detection.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
pub struct StuckSpec<S> {
    /// Longest time the value may stay flat before it is called stuck, ms
    /// (at least 1).
    pub max_flat_ms: Millis,
    /// Largest change, in engineering units, still counted as "unchanged"
    /// (0 means bit-for-bit equal; must not be negative).
    pub tolerance: S,
}

/// Raw description of one input signal; checked by [`Signal::new`].
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
pub struct SignalSpec<S> {
    /// Scaling from the raw input to engineering units.
    pub kind: SignalKind<S>,
    /// Lowest valid engineering value (`min < max`).
    pub min: S,
    /// Highest valid engineering value.
    pub max: S,
    /// Largest plausible rate of change, engineering units per second
    /// (positive); `None` disables the check.
    pub max_rate_per_s: Option<S>,
    /// Flat-line detection; `None` disables it.
    pub stuck: Option<StuckSpec<S>>,
    /// How long the last good value may stand in for faulty samples, ms;
    /// 0 means never (a fault is `Bad` at once).
    pub hold_max_ms: Millis,
    /// Replace negative values (within `[min, max]`) by zero, for flows.
    /// Needs `max ≥ 0`.
    pub clamp_negative: bool,
}

/// How far a value can be trusted.
///
/// Ordered from best to worst; a value computed from several signals takes
/// the worst of their qualities ([`Quality::worst`], [`Quality::combine`]).
/// (A diagnostics module may define its own quality type; the two are meant
/// to be unified.)
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, PartialOrd, Ord, Hash)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
pub enum Quality {
    /// Measured, and every check passed.
    #[default]
    Good,
    /// Usable with care: saturated, stuck, or the last good value held.
    Uncertain,
    /// Not to be used: signal failure with nothing fresh enough to hold.
    Bad,
}

impl Quality {
    /// The worse of two qualities.
    pub const fn worst(a: Quality, b: Quality) -> Quality {
        // The declaration order is the order of badness (as `Ord` says):
        // the larger discriminant. A compare and a select, where a match
        // on the pair branches (it runs a dozen times a sensor tick).
        if b as u8 > a as u8 {
            b
        } else {
            a
        }
    }

    /// The worst of any number of qualities; `Good` for none.
    pub fn combine<I: IntoIterator<Item = Quality>>(qualities: I) -> Quality {
        qualities.into_iter().fold(Quality::Good, Quality::worst)
    }

    /// True for [`Quality::Good`].
    pub const fn is_good(self) -> bool {
        matches!(self, Quality::Good)
    }

    /// True unless [`Quality::Bad`].
    pub const fn is_usable(self) -> bool {
        !matches!(self, Quality::Bad)
    }
}

/// What the checks of one update found (bits are stable, for registers and
/// logs).
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
pub struct SignalFlags(u16);

impl SignalFlags {
    /// Nothing to report.
    pub const NONE: Self = Self(0);
    /// Loop current at or below 3.6 mA: NE43 signal failure, low.
    pub const NE43_LOW: Self = Self(1 << 0);
    /// Loop current at or above 21.0 mA: NE43 signal failure, high.
    pub const NE43_HIGH: Self = Self(1 << 1);
    /// Loop current between 3.6 and 3.8 or 20.5 and 21.0 mA: saturated,
    /// the measurement limit used, quality `Uncertain`.
    pub const OUT_OF_MEASUREMENT_RANGE: Self = Self(1 << 2);
    /// Engineering value outside the configured valid range.
    pub const OUT_OF_RANGE: Self = Self(1 << 3);
    /// Change from the last good value faster than the configured rate
    /// (a spike).
    pub const RATE_LIMIT: Self = Self(1 << 4);
    /// Value flat for longer than the configured duration.
    pub const STUCK: Self = Self(1 << 5);
    /// The last good value is in use instead of this sample.
    pub const HELD: Self = Self(1 << 6);
    /// No good value within the hold age (or none yet): quality `Bad`.
    pub const STALE: Self = Self(1 << 7);
    /// The raw value was NaN or infinite.
    pub const NOT_FINITE: Self = Self(1 << 8);
    /// A negative value was replaced by zero.
    pub const NEGATIVE_CLAMPED: Self = Self(1 << 9);
    /// The sample's time was not after the last accepted one (duplicate or
    /// out of order): rejected, state unchanged, last reading repeated.
    pub const TIME_NOT_INCREASING: Self = Self(1 << 10);

    /// The flags that make a sample unusable (it is replaced by a held
    /// value or reported `Bad`).
    pub const FAULTS: Self = Self(
        Self::NE43_LOW.0
            | Self::NE43_HIGH.0
            | Self::OUT_OF_RANGE.0
            | Self::RATE_LIMIT.0
            | Self::NOT_FINITE.0,
    );

    /// Names of the set flags, in bit order (fixed strings, for reports).
    pub fn names(self) -> impl Iterator<Item = &'static str> {
        const NAMES: [&str; 11] = [
            "ne43_low",
            "ne43_high",
            "out_of_measurement_range",
            "out_of_range",
            "rate_limit",
            "stuck",
            "held",
            "stale",
            "not_finite",
            "negative_clamped",
            "time_not_increasing",
        ];
        NAMES
            .into_iter()
            .enumerate()
            .filter(move |(i, _)| self.0 & (1 << i) != 0)
            .map(|(_, n)| n)
    }
}

crate::status::flag_set_ops!(SignalFlags, u16);

/// One conditioned sample: the value to use, how far to trust it, and why.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
pub struct Reading<S> {
    /// Engineering value to use (always finite).
    pub value: S,
    /// Its quality.
    pub quality: Quality,
    /// What the checks found.
    pub flags: SignalFlags,
}

/// A value and the time it was seen.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
struct Sample<S> {
    value: S,
    at: Millis,
}

/// One conditioned input: a validated [`SignalSpec`] and the little state its
/// checks need.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
pub struct Signal<S> {
    spec: SignalSpec<S>,
    /// Time and result of the last accepted update.
    last: Option<(Millis, Reading<S>)>,
    /// Last `Good` value (what a fault holds).
    good: Option<Sample<S>>,
    /// Last value that passed the fault checks, before negative clamping
    /// (what the rate check compares with).
    accepted: Option<Sample<S>>,
    /// First value of the current flat run.
    flat: Option<Sample<S>>,
    /// A value rejected as a spike, kept to confirm a real step.
    spike: Option<Sample<S>>,
}

/// `Err(SignalNonFinite)` unless finite.
fn finite<S: Scalar>(x: S) -> Result<S, Error> {
    if x.is_finite() {
        Ok(x)
    } else {
        Err(Error::SignalNonFinite)
    }
}

/// True if `lo < hi` and `hi − lo` is finite (both already finite).
fn span_ok<S: Scalar>(lo: S, hi: S) -> bool {
    hi > lo && (hi - lo).is_finite()
}

/// Linear interpolation `lo` at `t = 0`, `hi` at `t = 1`, exact at both ends.
#[inline]
fn lerp<S: Scalar>(lo: S, hi: S, t: S) -> S {
    lo * (S::ONE - t) + hi * t
}

/// A duration in ms as seconds.
#[inline]
fn secs<S: Scalar>(ms: Millis) -> S {
    // Through u32, not f64 (software double precision on the Cortex-M4F):
    // an interval beyond 2^32 ms (49.7 days) saturates there, which only
    // allows a larger change after a longer gap: harmless for a rate check.
    let ms = u32::try_from(ms).unwrap_or(u32::MAX);
    S::of_u32(ms) / S::of(1000.0)
}

impl<S: Scalar> Signal<S> {
    /// Check `spec` once and build the signal (no sample seen yet).
    ///
    /// Errors: [`Error::SignalNonFinite`] (any number NaN or infinite),
    /// [`Error::SignalScaleSpan`] (`hi ≤ lo`, `raw_hi ≤ raw_lo`, or a span
    /// too wide to represent), [`Error::SignalRange`] (`max ≤ min`, or
    /// `clamp_negative` with `max < 0`), [`Error::SignalRate`] (rate not
    /// positive), [`Error::SignalStuck`] (`max_flat_ms` zero or tolerance
    /// negative). Durations are [`Millis`] and so cannot be negative.
    pub fn new(spec: SignalSpec<S>) -> Result<Self, Error> {
        match spec.kind {
            SignalKind::Current4to20 { lo, hi } => {
                if !span_ok(finite(lo)?, finite(hi)?) {
                    return Err(Error::SignalScaleSpan);
                }
            }
            SignalKind::Counts {
                raw_lo,
                raw_hi,
                lo,
                hi,
            } => {
                let (raw_lo, raw_hi) = (finite(raw_lo)?, finite(raw_hi)?);
                let (lo, hi) = (finite(lo)?, finite(hi)?);
                if !span_ok(raw_lo, raw_hi) || !span_ok(lo, hi) {
                    return Err(Error::SignalScaleSpan);
                }
            }
            SignalKind::Engineering => {}
        }
        let (min, max) = (finite(spec.min)?, finite(spec.max)?);
        if !(max > min) || (spec.clamp_negative && max < S::ZERO) {
            return Err(Error::SignalRange);
        }
        if let Some(rate) = spec.max_rate_per_s {
            if !(finite(rate)? > S::ZERO) {
                return Err(Error::SignalRate);
            }
        }
        if let Some(stuck) = spec.stuck {
            if finite(stuck.tolerance)? < S::ZERO || stuck.max_flat_ms == 0 {
                return Err(Error::SignalStuck);
            }
        }
        Ok(Self {
            spec,
            last: None,
            good: None,
            accepted: None,
            flat: None,
            spike: None,
        })
    }

    /// The validated specification.
    pub fn spec(&self) -> &SignalSpec<S> {
        &self.spec
    }

    /// The last accepted reading, if any.
    pub fn last_reading(&self) -> Option<Reading<S>> {
        self.last.map(|(_, r)| r)
    }

    /// Time of the last accepted update, ms.
    pub fn last_time(&self) -> Option<Millis> {
        self.last.map(|(t, _)| t)
    }

    /// The last `Good` value and its time, ms.
    pub fn last_good(&self) -> Option<(S, Millis)> {
        self.good.map(|g| (g.value, g.at))
    }

    /// True when the state (as decoded from a checkpoint) holds only finite
    /// values and readings within what [`Signal::update`] can return.
    #[cfg(feature = "serde")]
    pub(crate) fn state_ok(&self) -> bool {
        let fin = |x: Option<Sample<S>>| x.is_none_or(|s| s.value.is_finite());
        self.last.is_none_or(|(_, r)| r.value.is_finite())
            && fin(self.good)
            && fin(self.accepted)
            && fin(self.flat)
            && fin(self.spike)
    }

    /// Condition one raw sample taken at `now` (ms). Never fails; see the
    /// module documentation for every policy. Fixed work: no loop.
    #[must_use]
    // Out of line: one copy however many loops a gateway conditions (an
    // inlined copy is about 0.9 KB of a Cortex-M4F image).
    #[inline(never)]
    pub fn update(&mut self, raw: S, now: Millis) -> Reading<S> {
        // 1. Time.
        if let Some((t, r)) = self.last {
            if now <= t {
                return Reading {
                    flags: r.flags | SignalFlags::TIME_NOT_INCREASING,
                    ..r
                };
            }
        }
        let reading = self.condition(raw, now);
        self.last = Some((now, reading));
        reading
    }

    /// Steps 2–8 for a sample whose time has been accepted.
    fn condition(&mut self, raw: S, now: Millis) -> Reading<S> {
        let mut flags = SignalFlags::NONE;
        let mut quality = Quality::Good;

        // 2.–3. Finite, then scaling (with NE43 for a loop current).
        let value = if !raw.is_finite() {
            flags |= SignalFlags::NOT_FINITE;
            None
        } else {
            match self.spec.kind {
                SignalKind::Current4to20 { lo, hi } => {
                    let ma = match Ne43::classify(raw) {
                        Ne43::FailLow => {
                            flags |= SignalFlags::NE43_LOW;
                            None
                        }
                        Ne43::FailHigh => {
                            flags |= SignalFlags::NE43_HIGH;
                            None
                        }
                        Ne43::SaturatedLow => {
                            flags |= SignalFlags::OUT_OF_MEASUREMENT_RANGE;
                            quality = Quality::Uncertain;
                            Some(S::of(NE43_MEASURE_LOW_MA))
                        }
                        Ne43::SaturatedHigh => {
                            flags |= SignalFlags::OUT_OF_MEASUREMENT_RANGE;
                            quality = Quality::Uncertain;
                            Some(S::of(NE43_MEASURE_HIGH_MA))
                        }
                        Ne43::Measuring => Some(raw),
                    };
                    ma.map(|ma| lerp(lo, hi, (ma - S::of(4.0)) / S::of(16.0)))
                }
                SignalKind::Counts {
                    raw_lo,
                    raw_hi,
                    lo,
                    hi,
                } => Some(lerp(lo, hi, (raw - raw_lo) / (raw_hi - raw_lo))),
                SignalKind::Engineering => Some(raw),
            }
        };

        // 4. Range (a finite raw value that overflowed in scaling is out of
        //    range too).
        let value = value.and_then(|v| {
            if v.is_finite() && v >= self.spec.min && v <= self.spec.max {
                Some(v)
            } else {
                flags |= SignalFlags::OUT_OF_RANGE;
                None
            }
        });

        // 5. Rate of change against the last accepted value.
        let value = value.and_then(|v| self.rate_check(v, now, &mut flags));

        let Some(mut v) = value else {
            // 8. Hold, then stale.
            return self.hold(now, flags);
        };
        self.accepted = Some(Sample { value: v, at: now });

        // 6. Stuck (on the value before negative clamping: a flow meter's
        //    zero noise keeps it from looking flat).
        if let Some(stuck) = self.spec.stuck {
            match self.flat {
                Some(f) if (v - f.value).abs() <= stuck.tolerance => {
                    if now.saturating_sub(f.at) > stuck.max_flat_ms {
                        flags |= SignalFlags::STUCK;
                        quality = Quality::Uncertain;
                    }
                }
                _ => self.flat = Some(Sample { value: v, at: now }),
            }
        }

        // 7. Negative clamp.
        if self.spec.clamp_negative && v < S::ZERO {
            v = S::ZERO;
            flags |= SignalFlags::NEGATIVE_CLAMPED;
        }

        if quality == Quality::Good {
            self.good = Some(Sample { value: v, at: now });
        }
        Reading {
            value: v,
            quality,
            flags,
        }
    }

    /// Step 5: `Some(v)` if `v` is within the rate of the last accepted value, or
    /// confirms a step begun by the previous rejected sample; else remember
    /// it, flag a spike and return `None`.
    fn rate_check(&mut self, v: S, now: Millis, flags: &mut SignalFlags) -> Option<S> {
        let (Some(rate), Some(prev)) = (self.spec.max_rate_per_s, self.accepted) else {
            return Some(v);
        };
        let within = |from: Sample<S>| {
            // NaN-safe: an overflowing difference fails the `<=`.
            (v - from.value).abs() <= rate * secs::<S>(now.saturating_sub(from.at))
        };
        let confirmed = self.spike.is_some_and(within);
        self.spike = None;
        if within(prev) || confirmed {
            Some(v)
        } else {
            self.spike = Some(Sample { value: v, at: now });
            *flags |= SignalFlags::RATE_LIMIT;
            None
        }
    }

    /// Step 8: the reading for a faulty sample.
    fn hold(&self, now: Millis, mut flags: SignalFlags) -> Reading<S> {
        match self.good {
            Some(g) if now.saturating_sub(g.at) <= self.spec.hold_max_ms => Reading {
                value: g.value,
                quality: Quality::Uncertain,
                flags: flags | SignalFlags::HELD,
            },
            Some(g) => Reading {
                value: g.value,
                quality: Quality::Bad,
                flags: flags | SignalFlags::HELD | SignalFlags::STALE,
            },
            None => {
                flags |= SignalFlags::STALE;
                Reading {
                    value: S::ZERO.clamp_to(self.spec.min, self.spec.max),
                    quality: Quality::Bad,
                    flags,
                }
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    /// A level transmitter, 0–5 m on 4–20 mA, valid −0.1 … 5.2 m; no rate,
    /// stuck or hold unless a test sets them.
    fn level_spec() -> SignalSpec<f64> {
        SignalSpec {
            kind: SignalKind::Current4to20 { lo: 0.0, hi: 5.0 },
            min: -0.1,
            max: 5.2,
            max_rate_per_s: None,
            stuck: None,
            hold_max_ms: 0,
            clamp_negative: false,
        }
    }

    fn engineering(min: f64, max: f64) -> SignalSpec<f64> {
        SignalSpec {
            kind: SignalKind::Engineering,
            min,
            max,
            ..level_spec()
        }
    }

    fn sig(spec: SignalSpec<f64>) -> Signal<f64> {
        match Signal::new(spec) {
            Ok(s) => s,
            Err(e) => panic!("valid spec rejected: {e}"),
        }
    }

    // NAMUR NE43 (from memory, as in REFERENCES.md): measurement range
    // 3.8–20.5 mA; ≤ 3.6 mA or ≥ 21.0 mA is a signal failure. Between them:
    // saturated, not a failure.
    const NE43_CASES: [(f64, Ne43); 11] = [
        (3.59, Ne43::FailLow),
        (3.6, Ne43::FailLow),
        (3.61, Ne43::SaturatedLow),
        (3.79, Ne43::SaturatedLow),
        (3.8, Ne43::Measuring),
        (4.0, Ne43::Measuring),
        (20.0, Ne43::Measuring),
        (20.5, Ne43::Measuring),
        (20.51, Ne43::SaturatedHigh),
        (20.99, Ne43::SaturatedHigh),
        (21.0, Ne43::FailHigh),
    ];

    #[test]
    fn ne43_classification_at_each_boundary_f64_and_f32() {
        for (ma, want) in NE43_CASES {
            assert_eq!(Ne43::classify(ma), want, "{ma} mA (f64)");
            assert_eq!(Ne43::classify(ma as f32), want, "{ma} mA (f32)");
        }
        assert_eq!(Ne43::classify(21.01f64), Ne43::FailHigh);
        assert_eq!(Ne43::classify(0.0f64), Ne43::FailLow);
        assert_eq!(Ne43::classify(f64::NAN), Ne43::FailLow);
        assert_eq!(Ne43::classify(f64::INFINITY), Ne43::FailHigh);
        assert_eq!(Ne43::classify(f64::NEG_INFINITY), Ne43::FailLow);
    }

    #[test]
    fn ne43_classification_drives_quality_and_flags() {
        // Each sample on a fresh signal (no good value to hold).
        for (ma, class) in NE43_CASES {
            let r = sig(level_spec()).update(ma, 0);
            match class {
                Ne43::FailLow => {
                    assert_eq!(r.quality, Quality::Bad, "{ma}");
                    assert!(r.flags.contains(SignalFlags::NE43_LOW | SignalFlags::STALE));
                }
                Ne43::FailHigh => {
                    assert_eq!(r.quality, Quality::Bad, "{ma}");
                    assert!(r
                        .flags
                        .contains(SignalFlags::NE43_HIGH | SignalFlags::STALE));
                }
                Ne43::SaturatedLow | Ne43::SaturatedHigh => {
                    assert_eq!(r.quality, Quality::Uncertain, "{ma}");
                    assert_eq!(r.flags, SignalFlags::OUT_OF_MEASUREMENT_RANGE);
                }
                Ne43::Measuring => {
                    assert_eq!(r.quality, Quality::Good, "{ma}");
                    assert!(r.flags.is_empty());
                }
            }
        }
        // Saturated values are read at the measurement limits 3.8 / 20.5 mA:
        // 0–5 m over 16 mA is 0.3125 m/mA.
        let low = sig(level_spec()).update(3.7, 0);
        assert!((low.value - (-0.2 * 0.3125)).abs() < 1e-12);
        let high = sig(level_spec()).update(20.9, 0);
        assert!((high.value - (5.0 + 0.5 * 0.3125)).abs() < 1e-12);
        // Underrange within the measurement range is a valid measurement.
        let under = sig(level_spec()).update(3.9, 0);
        assert_eq!(under.quality, Quality::Good);
        assert!((under.value - (-0.1 * 0.3125)).abs() < 1e-12);
    }

    #[test]
    fn current_scaling_4_12_20_ma() {
        // Linear 4–20 mA ↔ span: common practice.
        let spec = SignalSpec {
            kind: SignalKind::Current4to20 {
                lo: -20.0,
                hi: 180.0,
            },
            min: -30.0,
            max: 200.0,
            ..level_spec()
        };
        let mut s = sig(spec);
        assert_eq!(s.update(4.0, 1).value, -20.0);
        assert_eq!(s.update(12.0, 2).value, 80.0);
        assert_eq!(s.update(20.0, 3).value, 180.0);
        // f32, same points exactly.
        let mut s32 = match Signal::new(SignalSpec {
            kind: SignalKind::Current4to20 {
                lo: 0.0f32,
                hi: 5.0,
            },
            min: -0.1,
            max: 5.2,
            max_rate_per_s: None,
            stuck: None,
            hold_max_ms: 0,
            clamp_negative: false,
        }) {
            Ok(s) => s,
            Err(e) => panic!("{e}"),
        };
        assert_eq!(s32.update(4.0, 1).value, 0.0);
        assert_eq!(s32.update(12.0, 2).value, 2.5);
        assert_eq!(s32.update(20.0, 3).value, 5.0);
    }

    #[test]
    fn counts_scaling() {
        // A 12-bit ADC: 819 counts at 0 %, 4095 at 100 % (4–20 mA over a
        // 250 Ω shunt to a 5 V reference is 1–5 V: 819–4095 counts; common
        // practice).
        let spec = SignalSpec {
            kind: SignalKind::Counts {
                raw_lo: 819.0,
                raw_hi: 4095.0,
                lo: 0.0,
                hi: 100.0,
            },
            min: 0.0,
            max: 100.0,
            ..level_spec()
        };
        let mut s = sig(spec);
        assert_eq!(s.update(819.0, 1).value, 0.0);
        assert_eq!(s.update(2457.0, 2).value, 50.0);
        assert_eq!(s.update(4095.0, 3).value, 100.0);
        let r = s.update(4200.0, 4);
        assert!(r.flags.contains(SignalFlags::OUT_OF_RANGE));
        assert_eq!(r.quality, Quality::Bad);
        let r = s.update(f64::MAX, 5);
        assert!(r.flags.contains(SignalFlags::OUT_OF_RANGE));
        assert!(r.value.is_finite());
        // A finite count that overflows in scaling (0·∞ = NaN inside the
        // interpolation) is out of range, not "not finite".
        let mut tiny = sig(SignalSpec {
            kind: SignalKind::Counts {
                raw_lo: 0.0,
                raw_hi: 1e-300,
                lo: 0.0,
                hi: 1.0,
            },
            ..engineering(0.0, 1.0)
        });
        let r = tiny.update(f64::MAX, 0);
        assert_eq!(r.flags, SignalFlags::OUT_OF_RANGE | SignalFlags::STALE);
        assert_eq!((r.value, r.quality), (0.0, Quality::Bad));
    }

    #[test]
    fn range_check_boundaries() {
        let mut s = sig(engineering(0.0, 10.0));
        assert_eq!(s.update(0.0, 1).quality, Quality::Good);
        assert_eq!(s.update(10.0, 2).quality, Quality::Good);
        let r = s.update(10.000_001, 3);
        assert_eq!(
            r.flags,
            SignalFlags::OUT_OF_RANGE | SignalFlags::HELD | SignalFlags::STALE
        );
        let r = s.update(-1e-9, 4);
        assert!(r.flags.contains(SignalFlags::OUT_OF_RANGE));
        assert_eq!(r.value, 10.0); // last good, kept
    }

    #[test]
    fn rate_limit_rejects_a_spike_and_confirms_a_step() {
        let spec = SignalSpec {
            max_rate_per_s: Some(1.0),
            hold_max_ms: 5_000,
            ..engineering(0.0, 100.0)
        };
        let mut s = sig(spec);
        assert_eq!(s.update(10.0, 0).quality, Quality::Good);
        // Exactly 1 unit/s over 1 s: allowed (≤).
        assert_eq!(s.update(11.0, 1_000).quality, Quality::Good);
        // 5 units in 1 s: a spike, last good held.
        let r = s.update(16.0, 2_000);
        assert_eq!(r.value, 11.0);
        assert_eq!(r.quality, Quality::Uncertain);
        assert_eq!(r.flags, SignalFlags::RATE_LIMIT | SignalFlags::HELD);
        // Back near the last good value: accepted, spike forgotten.
        let r = s.update(11.5, 3_000);
        assert_eq!((r.value, r.quality), (11.5, Quality::Good));
        // A real step: rejected once, then confirmed by the next sample.
        let r = s.update(40.0, 4_000);
        assert!(r.flags.contains(SignalFlags::RATE_LIMIT));
        let r = s.update(40.5, 5_000);
        assert_eq!((r.value, r.quality), (40.5, Quality::Good));
        assert!(r.flags.is_empty());
    }

    #[test]
    fn rate_reference_is_last_accepted_so_a_step_into_saturation_holds_once() {
        // 0–5 m level, 0.1 m/s; the process steps above the top of the span.
        let spec = SignalSpec {
            max_rate_per_s: Some(0.1),
            hold_max_ms: 10_000,
            ..level_spec()
        };
        let mut s = sig(spec);
        assert_eq!(s.update(19.0, 0).quality, Quality::Good); // 4.6875 m
        let r = s.update(20.8, 1_000); // saturated: read at 20.5 mA, 5.15625 m
        assert_eq!(
            r.flags,
            SignalFlags::OUT_OF_MEASUREMENT_RANGE | SignalFlags::RATE_LIMIT | SignalFlags::HELD
        );
        for t in [2_000, 3_000, 4_000] {
            let r = s.update(20.8, t);
            assert_eq!(
                (r.value, r.quality),
                (5.156_25, Quality::Uncertain),
                "t = {t}"
            );
            assert_eq!(r.flags, SignalFlags::OUT_OF_MEASUREMENT_RANGE, "t = {t}");
        }
    }

    #[test]
    fn stuck_detection_after_max_flat_duration() {
        let spec = SignalSpec {
            stuck: Some(StuckSpec {
                max_flat_ms: 10_000,
                tolerance: 0.01,
            }),
            ..engineering(0.0, 100.0)
        };
        let mut s = sig(spec);
        // Flat run starts at t = 0 with 50.0; wobble within 0.01.
        for (t, v) in [(0, 50.0), (5_000, 50.005), (10_000, 49.995)] {
            let r = s.update(v, t);
            assert_eq!(r.quality, Quality::Good, "t = {t}");
        }
        let r = s.update(50.0, 10_001);
        assert_eq!(
            (r.value, r.quality, r.flags),
            (50.0, Quality::Uncertain, SignalFlags::STUCK)
        );
        // Stuck readings are not "good": the last good time stays at 10 000.
        assert_eq!(s.last_good(), Some((49.995, 10_000)));
        // A change beyond the tolerance ends the run.
        let r = s.update(50.02, 12_000);
        assert_eq!(r.quality, Quality::Good);
        assert!(r.flags.is_empty());
    }

    #[test]
    fn hold_then_stale_after_max_age() {
        let spec = SignalSpec {
            hold_max_ms: 3_000,
            ..level_spec()
        };
        let mut s = sig(spec);
        assert_eq!(s.update(12.0, 1_000).value, 2.5);
        for t in [2_000, 4_000] {
            let r = s.update(2.0, t); // NE43 low failure
            assert_eq!((r.value, r.quality), (2.5, Quality::Uncertain), "t = {t}");
            assert_eq!(r.flags, SignalFlags::NE43_LOW | SignalFlags::HELD);
        }
        let r = s.update(22.0, 4_001); // 3 001 ms after the last good
        assert_eq!((r.value, r.quality), (2.5, Quality::Bad));
        assert_eq!(
            r.flags,
            SignalFlags::NE43_HIGH | SignalFlags::HELD | SignalFlags::STALE
        );
        // Recovery.
        let r = s.update(20.0, 5_000);
        assert_eq!(
            (r.value, r.quality, r.flags),
            (5.0, Quality::Good, SignalFlags::NONE)
        );
    }

    #[test]
    fn zero_hold_is_bad_at_once_and_no_good_value_gives_nearest_to_zero() {
        let mut s = sig(engineering(2.0, 8.0));
        let r = s.update(f64::NAN, 0);
        assert_eq!((r.value, r.quality), (2.0, Quality::Bad));
        assert_eq!(r.flags, SignalFlags::NOT_FINITE | SignalFlags::STALE);
        assert_eq!(s.update(3.0, 1).quality, Quality::Good);
        let r = s.update(9.0, 2);
        assert_eq!((r.value, r.quality), (3.0, Quality::Bad));
    }

    #[test]
    fn nan_and_infinities_are_not_finite_faults() {
        let spec = SignalSpec {
            hold_max_ms: 60_000,
            ..level_spec()
        };
        let mut s = sig(spec);
        assert_eq!(s.update(8.0, 0).value, 1.25);
        for (i, x) in [f64::NAN, f64::INFINITY, f64::NEG_INFINITY]
            .into_iter()
            .enumerate()
        {
            let r = s.update(x, 1 + i as u64);
            assert_eq!((r.value, r.quality), (1.25, Quality::Uncertain));
            assert_eq!(r.flags, SignalFlags::NOT_FINITE | SignalFlags::HELD);
        }
    }

    #[test]
    fn negative_flows_clamped_within_range_faults_beyond() {
        // A flow meter, m³/s, with 1 % of span allowed below zero for noise.
        let spec = SignalSpec {
            kind: SignalKind::Current4to20 { lo: 0.0, hi: 0.01 },
            min: -1e-4,
            max: 0.0105,
            clamp_negative: true,
            hold_max_ms: 10_000,
            ..level_spec()
        };
        let mut s = sig(spec);
        let r = s.update(3.9, 0); // −6.25e-5 m³/s
        assert_eq!(
            (r.value, r.quality, r.flags),
            (0.0, Quality::Good, SignalFlags::NEGATIVE_CLAMPED)
        );
        assert_eq!(s.last_good(), Some((0.0, 0)));
        // Far below zero (a reversed or broken meter): out of range, held.
        let mut e = sig(SignalSpec {
            clamp_negative: true,
            hold_max_ms: 10_000,
            ..engineering(-0.1, 10.0)
        });
        assert_eq!(e.update(-0.05, 0).value, 0.0);
        let r = e.update(-3.0, 1);
        assert_eq!((r.value, r.quality), (0.0, Quality::Uncertain));
        assert_eq!(r.flags, SignalFlags::OUT_OF_RANGE | SignalFlags::HELD);
        // Without clamping a negative in-range value passes untouched.
        let mut n = sig(engineering(-5.0, 5.0));
        let r = n.update(-2.0, 0);
        assert_eq!(
            (r.value, r.quality, r.flags),
            (-2.0, Quality::Good, SignalFlags::NONE)
        );
    }

    #[test]
    fn duplicate_and_backward_times_are_rejected_state_unchanged() {
        let spec = SignalSpec {
            max_rate_per_s: Some(1.0),
            hold_max_ms: 1_000,
            ..engineering(0.0, 100.0)
        };
        let mut s = sig(spec);
        let first = s.update(10.0, 5_000);
        let before = s;
        for t in [5_000, 4_999, 0] {
            let r = s.update(99.0, t);
            assert_eq!(r.value, first.value);
            assert_eq!(r.quality, first.quality);
            assert_eq!(r.flags, first.flags | SignalFlags::TIME_NOT_INCREASING);
            assert_eq!(s, before);
        }
        // The next later sample is judged against the unchanged state.
        assert_eq!(s.update(10.5, 6_000).quality, Quality::Good);
        assert_eq!(s.last_time(), Some(6_000));
    }

    #[test]
    fn quality_worst_and_combine() {
        use Quality::*;
        assert_eq!(Quality::worst(Good, Good), Good);
        assert_eq!(Quality::worst(Good, Uncertain), Uncertain);
        assert_eq!(Quality::worst(Bad, Uncertain), Bad);
        assert_eq!(Quality::worst(Good, Bad), Bad);
        assert_eq!(Quality::combine([]), Good);
        assert_eq!(Quality::combine([Good, Uncertain, Good]), Uncertain);
        assert_eq!(Quality::combine([Uncertain, Bad, Good]), Bad);
        for a in [Good, Uncertain, Bad] {
            for b in [Good, Uncertain, Bad] {
                assert_eq!(Quality::worst(a, b), a.max(b));
            }
        }
    }

    #[test]
    fn flag_names_follow_bits() {
        let f = SignalFlags::NE43_LOW | SignalFlags::TIME_NOT_INCREASING;
        let mut names = f.names();
        assert_eq!(names.next(), Some("ne43_low"));
        assert_eq!(names.next(), Some("time_not_increasing"));
        assert_eq!(names.next(), None);
        assert!(SignalFlags::FAULTS.intersects(SignalFlags::RATE_LIMIT));
        assert!(!SignalFlags::FAULTS.intersects(SignalFlags::STUCK));
    }

    #[test]
    fn validation_errors_for_each_bad_spec() {
        let ok = level_spec();
        let cases: [(SignalSpec<f64>, Error); 16] = [
            (
                SignalSpec {
                    kind: SignalKind::Current4to20 {
                        lo: f64::NAN,
                        hi: 5.0,
                    },
                    ..ok
                },
                Error::SignalNonFinite,
            ),
            (
                SignalSpec {
                    kind: SignalKind::Current4to20 {
                        lo: 0.0,
                        hi: f64::INFINITY,
                    },
                    ..ok
                },
                Error::SignalNonFinite,
            ),
            (
                SignalSpec {
                    kind: SignalKind::Current4to20 { lo: 5.0, hi: 5.0 },
                    ..ok
                },
                Error::SignalScaleSpan,
            ),
            (
                SignalSpec {
                    kind: SignalKind::Current4to20 { lo: 5.0, hi: 0.0 },
                    ..ok
                },
                Error::SignalScaleSpan,
            ),
            (
                SignalSpec {
                    kind: SignalKind::Current4to20 {
                        lo: -f64::MAX,
                        hi: f64::MAX,
                    },
                    ..ok
                },
                Error::SignalScaleSpan,
            ),
            (
                SignalSpec {
                    kind: SignalKind::Counts {
                        raw_lo: 4095.0,
                        raw_hi: 819.0,
                        lo: 0.0,
                        hi: 1.0,
                    },
                    ..ok
                },
                Error::SignalScaleSpan,
            ),
            (
                SignalSpec {
                    kind: SignalKind::Counts {
                        raw_lo: 0.0,
                        raw_hi: 4095.0,
                        lo: 1.0,
                        hi: 1.0,
                    },
                    ..ok
                },
                Error::SignalScaleSpan,
            ),
            (
                SignalSpec {
                    kind: SignalKind::Counts {
                        raw_lo: 0.0,
                        raw_hi: f64::NAN,
                        lo: 0.0,
                        hi: 1.0,
                    },
                    ..ok
                },
                Error::SignalNonFinite,
            ),
            (
                SignalSpec {
                    min: f64::NAN,
                    ..ok
                },
                Error::SignalNonFinite,
            ),
            (
                SignalSpec {
                    max: f64::NEG_INFINITY,
                    ..ok
                },
                Error::SignalNonFinite,
            ),
            (SignalSpec { min: 5.2, ..ok }, Error::SignalRange),
            (
                SignalSpec {
                    min: -10.0,
                    max: -1.0,
                    clamp_negative: true,
                    ..ok
                },
                Error::SignalRange,
            ),
            (
                SignalSpec {
                    max_rate_per_s: Some(0.0),
                    ..ok
                },
                Error::SignalRate,
            ),
            (
                SignalSpec {
                    max_rate_per_s: Some(-1.0),
                    ..ok
                },
                Error::SignalRate,
            ),
            (
                SignalSpec {
                    stuck: Some(StuckSpec {
                        max_flat_ms: 0,
                        tolerance: 0.0,
                    }),
                    ..ok
                },
                Error::SignalStuck,
            ),
            (
                SignalSpec {
                    stuck: Some(StuckSpec {
                        max_flat_ms: 1_000,
                        tolerance: -0.1,
                    }),
                    ..ok
                },
                Error::SignalStuck,
            ),
        ];
        for (i, (spec, want)) in cases.into_iter().enumerate() {
            assert_eq!(Signal::new(spec).err(), Some(want), "case {i}");
        }
        assert_eq!(
            Signal::new(SignalSpec {
                max_rate_per_s: Some(f64::NAN),
                ..ok
            })
            .err(),
            Some(Error::SignalNonFinite)
        );
        // Negative ages cannot be written: durations are `Millis` (u64).
        assert!(Signal::new(ok).is_ok());
    }

    // ---- property test ----------------------------------------------------

    /// Raw values with a good share of the awkward ones.
    fn raw_value() -> impl Strategy<Value = f64> {
        prop_oneof![
            6 => 0.0..24.0f64,
            2 => -1e3..1e3f64,
            1 => Just(f64::NAN),
            1 => Just(f64::INFINITY),
            1 => Just(f64::NEG_INFINITY),
            1 => any::<f64>(),
            1 => prop::sample::select(vec![3.6, 3.8, 20.5, 21.0, 0.0, -0.0, f64::MAX, -f64::MAX]),
        ]
    }

    /// Time steps, including duplicates and jumps backwards.
    fn time_step() -> impl Strategy<Value = i64> {
        prop_oneof![
            6 => 1..5_000i64,
            1 => Just(0i64),
            1 => -10_000..0i64,
            1 => 1..100_000_000i64,
        ]
    }

    fn spec_strategy() -> impl Strategy<Value = SignalSpec<f64>> {
        let kind = prop_oneof![
            (-100.0..100.0f64, 0.1..100.0f64)
                .prop_map(|(lo, w)| SignalKind::Current4to20 { lo, hi: lo + w }),
            (
                -10.0..1000.0f64,
                1.0..5000.0f64,
                -100.0..100.0f64,
                0.1..100.0f64
            )
                .prop_map(|(raw_lo, rw, lo, w)| SignalKind::Counts {
                    raw_lo,
                    raw_hi: raw_lo + rw,
                    lo,
                    hi: lo + w,
                }),
            Just(SignalKind::Engineering),
        ];
        (
            kind,
            -100.0..100.0f64,
            0.01..200.0f64,
            prop::option::of(0.01..100.0f64),
            prop::option::of((1..60_000u64, 0.0..1.0f64)),
            0..60_000u64,
            any::<bool>(),
        )
            .prop_map(|(kind, min, w, rate, stuck, hold, clamp)| SignalSpec {
                kind,
                min,
                max: min + w,
                max_rate_per_s: rate,
                stuck: stuck.map(|(max_flat_ms, tolerance)| StuckSpec {
                    max_flat_ms,
                    tolerance,
                }),
                hold_max_ms: hold,
                clamp_negative: clamp && min + w >= 0.0,
            })
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(512))]

        /// Any sequence of raw values (NaN and infinities included) and
        /// times (duplicates and backward jumps included) never panics,
        /// always yields a finite value, never calls a value outside
        /// `[min, max]` Good, and rejects every non-increasing time.
        #[test]
        fn never_panics_finite_and_good_only_in_range(
            spec in spec_strategy(),
            start in 0..u64::MAX / 2,
            samples in prop::collection::vec((raw_value(), time_step()), 1..200),
        ) {
            let mut s = match Signal::new(spec) {
                Ok(s) => s,
                Err(e) => return Err(TestCaseError::fail(format!("spec rejected: {e}"))),
            };
            let mut now = start;
            for (raw, dt) in samples {
                now = now.saturating_add_signed(dt);
                let last = s.last_time();
                let r = s.update(raw, now);
                prop_assert!(r.value.is_finite(), "value {}", r.value);
                if r.quality == Quality::Good {
                    prop_assert!(r.value >= spec.min && r.value <= spec.max);
                    prop_assert!(!r.flags.intersects(SignalFlags::FAULTS));
                }
                let rejected = last.is_some_and(|t| now <= t);
                prop_assert_eq!(r.flags.contains(SignalFlags::TIME_NOT_INCREASING), rejected);
                if !rejected {
                    prop_assert_eq!(s.last_time(), Some(now));
                }
            }
        }

        /// The same in f32, with f32's own overflow edges.
        #[test]
        fn never_panics_f32(
            samples in prop::collection::vec((any::<f32>(), 0..3_000u64), 1..200),
        ) {
            let spec = SignalSpec {
                kind: SignalKind::Current4to20 { lo: 0.0f32, hi: 5.0 },
                min: -0.1,
                max: 5.2,
                max_rate_per_s: Some(0.5),
                stuck: Some(StuckSpec { max_flat_ms: 2_000, tolerance: 1e-3 }),
                hold_max_ms: 4_000,
                clamp_negative: true,
            };
            let mut s = match Signal::new(spec) {
                Ok(s) => s,
                Err(e) => return Err(TestCaseError::fail(format!("spec rejected: {e}"))),
            };
            let mut now = 0u64;
            for (raw, dt) in samples {
                now += dt;
                let r = s.update(raw, now);
                prop_assert!(r.value.is_finite());
                if r.quality == Quality::Good {
                    prop_assert!(r.value >= spec.min && r.value <= spec.max);
                }
            }
        }
    }
}
