//! Axes: the data range of each panel (and the shared x range), "nice"
//! tick steps and the labels of ticks and values.

use super::{Panel, LIMIT};

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
    }
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
        for pt in s.points() {
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
