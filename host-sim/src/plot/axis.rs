//! Axes: the data range of each panel (and the shared x range), "nice"
//! tick steps and the labels of ticks and values; the clock-time axis with
//! ticks at round local times.

use super::{Panel, LIMIT};
use crate::clock::Clock;
use chrono::{Datelike, NaiveDate};

/// Running min/max of finite values, clamped to ±LIMIT.
#[derive(Clone, Copy, Debug)]
pub(super) struct Range {
    pub(super) lo: f64,
    pub(super) hi: f64,
}

impl Range {
    pub(super) fn new() -> Self {
        Range {
            lo: f64::INFINITY,
            hi: f64::NEG_INFINITY,
        }
    }

    pub(super) fn add(&mut self, v: f64) {
        if v.is_finite() {
            let v = v.clamp(-LIMIT, LIMIT);
            self.lo = self.lo.min(v);
            self.hi = self.hi.max(v);
        }
    }

    pub(super) fn is_empty(&self) -> bool {
        self.lo > self.hi
    }
}

/// An axis: limits, tick values inside them and their labels.
#[derive(Clone, Debug)]
pub(super) struct Axis {
    pub(super) lo: f64,
    pub(super) hi: f64,
    pub(super) step: f64,
    pub(super) ticks: Vec<f64>,
    pub(super) labels: Vec<String>,
    /// Second line under the tick labels of a clock axis (the date; drawn
    /// where it changes), empty for a number axis.
    pub(super) dates: Vec<String>,
}

impl Axis {
    /// Maps `v` to `[a, b]` (pixels); finite for any input.
    pub(super) fn map(&self, v: f64, a: f64, b: f64) -> f64 {
        let v = if v.is_nan() { self.lo } else { v };
        let t = (v.clamp(-LIMIT, LIMIT) - self.lo) / (self.hi - self.lo);
        a + t * (b - a)
    }
}

/// `10^e` correctly rounded where that is cheap (|e| ≤ 22).
pub(super) fn pow10(e: i32) -> f64 {
    if (0..=22).contains(&e) {
        10f64.powi(e)
    } else if (-22..0).contains(&e) {
        1.0 / 10f64.powi(-e)
    } else {
        10f64.powi(e)
    }
}

/// The 1-2-5 step nearest `span / target`, with the decimal exponent of the
/// step (`step = m × 10^e`, m ∈ {1, 2, 5}).
pub(super) fn nice_step(span: f64, target: usize) -> (f64, i32) {
    let raw = span / target.max(1) as f64;
    let mut e = raw.log10().floor() as i32;
    let f = raw / pow10(e);
    let m = if f < 1.5 {
        1.0
    } else if f < 3.5 {
        2.0
    } else if f < 7.5 {
        5.0
    } else {
        e += 1;
        1.0
    };
    let step = if e < 0 { m / pow10(-e) } else { m * pow10(e) };
    (step, e)
}

/// A readable axis covering `[lo, hi]` with about `target` intervals.
/// Empty, non-finite or zero-width ranges give a sensible finite axis.
/// A limit moves out to the next whole step when that costs at most
/// `slack × step`; otherwise it is padded by `pad × span`.
pub(super) fn nice_axis(range: Range, target: usize, slack: f64, pad: f64) -> Axis {
    let (mut lo, mut hi) = if range.is_empty() {
        (0.0, 1.0)
    } else {
        (range.lo, range.hi)
    };
    let mag = lo.abs().max(hi.abs());
    let min_span = (mag * 1e-10).max(1e-200);
    if hi - lo < min_span {
        let c = lo / 2.0 + hi / 2.0;
        let half = if hi - lo > 0.0 {
            min_span / 2.0
        } else if mag == 0.0 {
            1.0
        } else {
            (mag * 0.05).max(1e-200)
        };
        lo = c - half;
        hi = c + half;
    }
    let span = hi - lo;
    let (step, e) = nice_step(span, target);
    // Extend to whole steps when that costs little; otherwise pad a bit.
    let nlo = (lo / step).floor() * step;
    let nhi = (hi / step).ceil() * step;
    let alo = if lo - nlo <= slack * step {
        nlo
    } else {
        lo - pad * span
    };
    let ahi = if nhi - hi <= slack * step {
        nhi
    } else {
        hi + pad * span
    };
    let k0 = (alo / step - 1e-9).ceil();
    let k1 = (ahi / step + 1e-9).floor();
    let count = if k1 >= k0 {
        ((k1 - k0) as usize).min(200) + 1
    } else {
        0
    };
    let ticks: Vec<f64> = (0..count).map(|i| (k0 + i as f64) * step).collect();
    let scientific = alo.abs().max(ahi.abs()) >= 1e7 || e < -6;
    let labels = ticks
        .iter()
        .map(|&v| tick_label(v, e, scientific))
        .collect();
    Axis {
        lo: alo,
        hi: ahi,
        step,
        ticks,
        labels,
        dates: Vec::new(),
    }
}

const SECOND: i64 = 1000;
const MINUTE: i64 = 60 * SECOND;
const HOUR: i64 = 60 * MINUTE;
const DAY: i64 = 24 * HOUR;

/// Tick steps of a clock axis up to a week, ms; each below a day divides a
/// day, so ticks fall on the same local times every day.
const CLOCK_STEPS: [i64; 20] = [
    SECOND,
    2 * SECOND,
    5 * SECOND,
    10 * SECOND,
    15 * SECOND,
    30 * SECOND,
    MINUTE,
    2 * MINUTE,
    5 * MINUTE,
    10 * MINUTE,
    15 * MINUTE,
    30 * MINUTE,
    HOUR,
    2 * HOUR,
    3 * HOUR,
    6 * HOUR,
    12 * HOUR,
    DAY,
    2 * DAY,
    7 * DAY,
];

/// Month steps past a week.
const MONTH_STEPS: [i64; 5] = [1, 2, 3, 6, 12];

/// A clock axis over `range` (ms since the epoch, UTC) with at most
/// `target` intervals: ticks at round local times of `clock` (whole
/// seconds, minutes, hours, local midnights, Mondays for weekly ticks, the
/// first of a month), labels `HH:MM` (`HH:MM:SS` below a minute), `02 Mar`
/// for days, `Mar` for months; `dates` holds the line under them (the date,
/// or the year for day and month ticks). The limits are the data's own.
pub(super) fn clock_axis(range: Range, target: usize, clock: &Clock) -> Axis {
    let (lo, hi) = if range.is_empty() {
        (0.0, HOUR as f64)
    } else if range.hi - range.lo < 1.0 {
        (
            range.lo - 30.0 * MINUTE as f64,
            range.hi + 30.0 * MINUTE as f64,
        )
    } else {
        (range.lo, range.hi)
    };
    let target = target.max(2) as f64;
    let span = hi - lo;
    let step = CLOCK_STEPS
        .iter()
        .copied()
        .find(|&s| span / s as f64 <= target);
    let (lo_i, hi_i) = (lo.floor() as i64, hi.ceil() as i64);
    let local_lo = lo_i + i64::from(clock.offset_seconds(lo_i)) * SECOND;
    let mut ticks: Vec<f64> = Vec::new();
    let push = |local: i64, ticks: &mut Vec<f64>| {
        let t = clock.instant_of_local(local) as f64;
        if t >= lo && t <= hi && ticks.last().is_none_or(|&l| t > l) {
            ticks.push(t);
        }
    };
    let step_ms = match step {
        Some(s) => {
            // Weekly ticks on Mondays (1970-01-05 was one).
            let phase = if s == 7 * DAY { 4 * DAY } else { 0 };
            let mut local = (local_lo - phase).div_euclid(s) * s + phase;
            for _ in 0..400 {
                if local > local_lo + (hi_i - lo_i) + DAY {
                    break;
                }
                push(local, &mut ticks);
                local += s;
            }
            s
        }
        None => {
            let months = span / (30.44 * DAY as f64);
            let m = MONTH_STEPS
                .iter()
                .copied()
                .find(|&m| months / m as f64 <= target)
                .unwrap_or_else(|| 12 * ((months / 12.0 / target).ceil() as i64).max(1));
            let start = clock
                .local(lo_i)
                .map(|d| d.date())
                .unwrap_or(NaiveDate::MIN);
            let mut idx = i64::from(start.year()) * 12 + i64::from(start.month0());
            idx = idx.div_euclid(m) * m;
            for _ in 0..400 {
                let (y, mo) = (idx.div_euclid(12), idx.rem_euclid(12) as u32 + 1);
                let Some(d) = i32::try_from(y)
                    .ok()
                    .and_then(|y| NaiveDate::from_ymd_opt(y, mo, 1))
                else {
                    break;
                };
                let local = d
                    .and_hms_opt(0, 0, 0)
                    .map_or(i64::MAX, |d| d.and_utc().timestamp_millis());
                if local > local_lo + (hi_i - lo_i) + DAY {
                    break;
                }
                push(local, &mut ticks);
                idx += m;
            }
            m * 30 * DAY
        }
    };
    let (label_fmt, date_fmt) = if step_ms < MINUTE {
        ("%H:%M:%S", "%Y-%m-%d")
    } else if step_ms < DAY {
        ("%H:%M", "%Y-%m-%d")
    } else if step_ms < 28 * DAY {
        ("%d %b", "%Y")
    } else {
        ("%b", "%Y")
    };
    let mut labels = Vec::with_capacity(ticks.len());
    let mut dates = Vec::with_capacity(ticks.len());
    for &t in &ticks {
        match clock.local(t as i64) {
            Some(d) => {
                labels.push(d.format(label_fmt).to_string());
                dates.push(d.format(date_fmt).to_string());
            }
            None => {
                labels.push(String::new());
                dates.push(String::new());
            }
        }
    }
    Axis {
        lo,
        hi,
        step: step_ms as f64,
        ticks,
        labels,
        dates,
    }
}

/// The label of a clock axis: `clock time [UTC]`.
pub(super) fn clock_label(clock: &Clock, at: f64) -> String {
    format!("clock time [{}]", clock.describe(at as i64))
}

/// Label of tick `v` on an axis whose step has decimal exponent `e`.
pub(super) fn tick_label(v: f64, e: i32, scientific: bool) -> String {
    let s = if v == 0.0 {
        "0".to_owned()
    } else if scientific {
        let ev = v.abs().log10().floor() as i32;
        let d = (ev - e).clamp(0, 15) as usize;
        format!("{v:.d$e}")
    } else {
        let d = (-e).clamp(0, 15) as usize;
        format!("{v:.d$}")
    };
    strip_negative_zero(s)
}

pub(super) fn strip_negative_zero(s: String) -> String {
    match s.strip_prefix('-') {
        Some(rest) if rest.chars().all(|c| c == '0' || c == '.') => rest.to_owned(),
        _ => s,
    }
}

/// A measured value with about four significant digits, e.g. `12.34`.
pub(super) fn value_label(v: f64) -> String {
    let a = v.abs();
    let s = if !v.is_finite() {
        String::new()
    } else if a == 0.0 {
        "0".to_owned()
    } else if !(1e-3..1e6).contains(&a) {
        let mut s = format!("{v:.3e}");
        if let Some(epos) = s.find('e') {
            let (mant, exp) = s.split_at(epos);
            let mant = mant.trim_end_matches('0').trim_end_matches('.');
            s = format!("{mant}{exp}");
        }
        s
    } else {
        let d = (3 - a.log10().floor() as i32).clamp(0, 6) as usize;
        let s = format!("{v:.d$}");
        if s.contains('.') {
            s.trim_end_matches('0').trim_end_matches('.').to_owned()
        } else {
            s
        }
    };
    strip_negative_zero(s)
}

/// Everything a panel contributes to the y range.
pub(super) fn y_range(p: &Panel) -> Range {
    let mut r = Range::new();
    for s in &p.series {
        for pt in s.points().chain(s.sigma_points()) {
            r.add(pt.y);
        }
    }
    for m in &p.markers {
        for &(_, y) in &m.pts {
            r.add(y);
        }
    }
    for (y, _) in &p.hlines {
        r.add(*y);
    }
    r
}

pub(super) fn x_range(panels: &[Panel]) -> Range {
    let mut r = Range::new();
    for p in panels {
        for s in &p.series {
            for pt in s.points() {
                r.add(pt.x);
            }
        }
        for m in &p.markers {
            for &(x, _) in &m.pts {
                r.add(x);
            }
        }
        for b in &p.bands {
            if b.x0.is_finite() && b.x1.is_finite() {
                r.add(b.x0);
                r.add(b.x1);
            }
        }
    }
    r
}
