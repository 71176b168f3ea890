//! How a tag was stored: its typical interval between points, and whether
//! it looks exception-stored (a point only when the value moved by more
//! than a deadband), which decides its interpolation.
//!
//! The rule of thumb (common practice for process historians): an archive
//! compressed so that a straight line between stored points stays within a
//! deadband of the signal (swing-door style) is read with **linear**
//! interpolation; a tag stored only when it changes (exception reporting,
//! and step-like tags such as set-points, valve states, lab-entered
//! values) is read with **hold**, because its value stayed put until the
//! next point. Read the wrong way, an exception-stored step turns into a
//! ramp across the whole stretch before it.
//!
//! The pattern that betrays exception storage is a long stretch between
//! two points followed by a jump larger than the tag's typical change.
//! Both are judged from the tag's own points in one pass with fixed memory:
//! a two-way histogram of (interval, |change|) in powers of two. A stretch
//! is *long* when its interval is at least four times (two octaves above)
//! the tag's 10th-percentile interval; a change is a *jump* when it is at
//! least about three times (two octaves above) the median |change| of all
//! intervals, or any change at all when most points repeat the previous
//! value. A tag *looks exception-stored* when at least
//! [`MIN_JUMPS`] long stretches end in a jump and they are at least
//! [`MIN_JUMP_SHARE`] of its long stretches. A log at a regular interval
//! has no long stretch and is never flagged. This is a heuristic: it says
//! which tags to look at, not how the historian was configured.

/// Octaves of interval, from 1 ms: bucket `k` holds `[2^k, 2^(k+1))` ms.
const DT_BUCKETS: usize = 48;
/// Octaves of |change| from 2⁻⁴⁰, after bucket 0 (no change at all).
const DV_OCTAVES: i32 = 80;
const DV_BUCKETS: usize = DV_OCTAVES as usize + 1;
/// Fewest long stretches ending in a jump for a tag to be flagged.
pub const MIN_JUMPS: u64 = 3;
/// Least share of long stretches ending in a jump for a tag to be flagged.
pub const MIN_JUMP_SHARE: f64 = 0.2;

/// The counts of one tag's intervals, by interval and |change|.
#[derive(Clone, Debug)]
pub struct Histogram {
    counts: Vec<u32>,
    n: u64,
}

impl Default for Histogram {
    fn default() -> Self {
        Self {
            counts: vec![0; DT_BUCKETS * DV_BUCKETS],
            n: 0,
        }
    }
}

fn dt_bucket(dt_ms: i64) -> usize {
    let dt = dt_ms.max(1) as u64;
    (63 - dt.leading_zeros() as usize).min(DT_BUCKETS - 1)
}

fn dv_bucket(dv: f64) -> usize {
    if dv.is_nan() || dv == 0.0 {
        return 0;
    }
    let octave = dv.abs().log2().floor() as i32 + DV_OCTAVES / 2;
    (octave.clamp(0, DV_OCTAVES - 1) + 1) as usize
}

impl Histogram {
    /// One interval between consecutive stored points of the tag.
    pub fn add(&mut self, dt_ms: i64, dv: f64) {
        let k = dt_bucket(dt_ms) * DV_BUCKETS + dv_bucket(dv);
        if let Some(c) = self.counts.get_mut(k) {
            *c = c.saturating_add(1);
            self.n += 1;
        }
    }

    fn count(&self, dt: usize, dv: usize) -> u64 {
        u64::from(self.counts.get(dt * DV_BUCKETS + dv).copied().unwrap_or(0))
    }

    /// The bucket below which a share `q` of the intervals lie, along the
    /// interval (`by_dt`) or the change axis.
    fn quantile(&self, q: f64, by_dt: bool) -> usize {
        let (outer, inner) = if by_dt {
            (DT_BUCKETS, DV_BUCKETS)
        } else {
            (DV_BUCKETS, DT_BUCKETS)
        };
        let target = (q * self.n as f64).ceil().max(1.0) as u64;
        let mut seen = 0;
        for a in 0..outer {
            for b in 0..inner {
                seen += if by_dt {
                    self.count(a, b)
                } else {
                    self.count(b, a)
                };
            }
            if seen >= target {
                return a;
            }
        }
        outer - 1
    }

    /// What the histogram says.
    pub fn pattern(&self) -> Pattern {
        if self.n == 0 {
            return Pattern::default();
        }
        let p10 = self.quantile(0.1, true);
        let median_dt = self.quantile(0.5, true);
        let median_dv = self.quantile(0.5, false);
        let long_from = p10 + 2;
        let jump_from = if median_dv == 0 { 1 } else { median_dv + 2 };
        let mut long = 0;
        let mut jumps = 0;
        for dt in long_from..DT_BUCKETS {
            for dv in 0..DV_BUCKETS {
                let c = self.count(dt, dv);
                long += c;
                if dv >= jump_from {
                    jumps += c;
                }
            }
        }
        Pattern {
            intervals: self.n,
            // The geometric middle of the median's octave.
            median_interval_ms: ((1u64 << median_dt) as f64 * std::f64::consts::SQRT_2).round()
                as u64,
            long_stretches: long,
            jumps_after_long_stretch: jumps,
            looks_exception_stored: jumps >= MIN_JUMPS
                && jumps as f64 >= MIN_JUMP_SHARE * long as f64,
        }
    }
}

/// How one tag was stored, from its points ([`Histogram::pattern`]).
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, serde::Serialize)]
pub struct Pattern {
    /// Intervals between consecutive stored points.
    pub intervals: u64,
    /// Median interval, ms (to within a factor √2: the middle of its octave).
    pub median_interval_ms: u64,
    /// Intervals at least 4× the tag's 10th-percentile interval.
    pub long_stretches: u64,
    /// Long stretches ending in a jump.
    pub jumps_after_long_stretch: u64,
    /// The pattern of exception storage (see the module docs).
    pub looks_exception_stored: bool,
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_regular_log_is_not_flagged_and_its_interval_is_found() {
        let mut h = Histogram::default();
        for i in 0..1000 {
            h.add(1000, if i % 2 == 0 { 0.3 } else { -0.25 });
        }
        let p = h.pattern();
        assert_eq!(p.intervals, 1000);
        assert_eq!(p.long_stretches, 0);
        assert!(!p.looks_exception_stored);
        // 1000 ms lies in the octave [512, 1024): middle 724 ms.
        assert_eq!(p.median_interval_ms, 724);
    }

    #[test]
    fn flat_stretches_ending_in_steps_are_flagged() {
        // A set-point stored on change: bursts of points a second apart
        // while it settles, then long flat stretches ending in a step.
        let mut h = Histogram::default();
        for _ in 0..10 {
            for _ in 0..8 {
                h.add(1000, 0.01);
            }
            h.add(1_800_000, 5.0);
        }
        let p = h.pattern();
        assert_eq!(p.long_stretches, 10);
        assert_eq!(p.jumps_after_long_stretch, 10);
        assert!(p.looks_exception_stored);
    }

    #[test]
    fn slow_smooth_stretches_are_not_jumps() {
        // A deadband-stored smooth signal: long stretches near its turning
        // points, but every change about one deadband (the typical change).
        let mut h = Histogram::default();
        for i in 0..200 {
            let dt = if i % 10 == 0 { 60_000 } else { 10_000 };
            h.add(dt, 0.012);
        }
        let p = h.pattern();
        assert!(p.long_stretches > 0);
        assert_eq!(p.jumps_after_long_stretch, 0);
        assert!(!p.looks_exception_stored);
    }
}
