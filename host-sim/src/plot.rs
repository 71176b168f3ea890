//! Dependency-free SVG line charts for replay reports.
//!
//! A [`Figure`] is a title, one or more stacked [`Panel`]s that share one x
//! axis (hours since the replay start, see [`time_axis_label`]) and a footer
//! of small text. Each panel has one y axis whose label carries the unit,
//! line [`Series`], scatter [`Markers`] (lab results: open circles labelled
//! with their value), shaded x-ranges ([`Band`]) and horizontal reference
//! lines. Legends sit above each panel, right-aligned, so they never cover
//! data.
//!
//! # Output
//! The SVG is UTF-8 (declared in the XML prologue), every piece of text is
//! XML-escaped, and the bytes depend only on the data: no font is read, text
//! widths are estimated from character counts, coordinates are written with
//! one decimal. A number that is not finite never reaches the output: NaN
//! and infinite samples are gaps, finite values beyond ±1e300 are clamped.
//!
//! # Constant memory
//! A [`Series`] keeps at most `max_buckets` buckets ([`MAX_BUCKETS`] = 2000
//! unless [`Series::with_max_buckets`] says otherwise). A bucket covers a run
//! of consecutive finite samples and keeps at most four of them, in arrival
//! order: the first, the minimum, the maximum and the last. When every bucket
//! is in use, adjacent pairs are merged and the run length doubles. So a
//! series never holds more than `4 × max_buckets` points (8,000 by default,
//! in at most 2,048 buckets of 112 bytes: 224 KiB), however long the
//! replay, and a one-sample spike survives
//! as its bucket's minimum or maximum. Resolution is uniform in sample count,
//! which is uniform in time for a regularly sampled log. A gap (NaN) is
//! remembered as a break between the two kept points around it, so a gap
//! stays visible after any amount of merging.
//!
//! [`Markers`] keep at most [`MAX_MARKERS`] points; past that they keep every
//! second one (a stride that doubles), which is plenty for lab results.
//!
//! # Palette
//! [`Color`] is the 8-colour Okabe–Ito palette (Okabe & Ito, "Color
//! Universal Design", 2008), which stays distinguishable under the common
//! forms of colour blindness. Yellow comes last: it is weak on white.

use std::fmt::Write as _;
use std::path::Path;

/// Default bucket bound of a [`Series`]: at most `4 × MAX_BUCKETS` points.
pub const MAX_BUCKETS: usize = 2000;
/// Most scatter points a [`Markers`] keeps.
pub const MAX_MARKERS: usize = 2000;
/// Finite values are clamped to ±`LIMIT` so that differences never overflow.
const LIMIT: f64 = 1e300;

/// One of the 8 Okabe–Ito colours.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum Color {
    /// `#0072B2`
    Blue,
    /// `#D55E00`
    Vermillion,
    /// `#009E73`
    Green,
    /// `#CC79A7`
    Purple,
    /// `#E69F00`
    Orange,
    /// `#56B4E9`
    SkyBlue,
    /// `#000000`
    Black,
    /// `#F0E442` (weak on white: use last)
    Yellow,
}

impl Color {
    /// The palette in the order series should take it.
    pub const PALETTE: [Color; 8] = [
        Color::Blue,
        Color::Vermillion,
        Color::Green,
        Color::Purple,
        Color::Orange,
        Color::SkyBlue,
        Color::Black,
        Color::Yellow,
    ];

    /// The `i`-th palette colour, wrapping around after 8.
    pub fn nth(i: usize) -> Color {
        Self::PALETTE[i % Self::PALETTE.len()]
    }

    /// `#rrggbb`.
    pub fn hex(self) -> &'static str {
        match self {
            Color::Blue => "#0072B2",
            Color::Vermillion => "#D55E00",
            Color::Green => "#009E73",
            Color::Purple => "#CC79A7",
            Color::Orange => "#E69F00",
            Color::SkyBlue => "#56B4E9",
            Color::Black => "#000000",
            Color::Yellow => "#F0E442",
        }
    }
}

/// Label for the shared x axis: `time since <start> [h]`.
pub fn time_axis_label(start_iso: &str) -> String {
    format!("time since {start_iso} [h]")
}

/// A kept sample. `brk`: the line does not join the previous kept point to
/// this one (there was a gap between them).
#[derive(Clone, Copy, Debug)]
struct Pt {
    x: f64,
    y: f64,
    brk: bool,
}

/// A run of `count` consecutive finite samples, of which at most four are
/// kept: first, min, max, last, in arrival order.
#[derive(Clone, Copy, Debug)]
struct Bucket {
    pts: [Pt; 4],
    n: u8,
    count: u64,
}

impl Bucket {
    fn single(p: Pt) -> Self {
        Bucket {
            pts: [p; 4],
            n: 1,
            count: 1,
        }
    }

    fn points(&self) -> &[Pt] {
        &self.pts[..usize::from(self.n)]
    }

    /// Appends the run `other` (which follows this one) and keeps first, min,
    /// max and last of the union. A break on any dropped point moves to the
    /// next kept point, so gaps survive.
    fn absorb(&mut self, other: &Bucket) {
        let mut cand = [self.pts[0]; 8];
        let mut m = 0;
        for p in self.points().iter().chain(other.points()) {
            cand[m] = *p;
            m += 1;
        }
        let cand = &cand[..m];
        let (mut lo, mut hi) = (0, 0);
        for (i, p) in cand.iter().enumerate() {
            if p.y < cand[lo].y {
                lo = i;
            }
            if p.y > cand[hi].y {
                hi = i;
            }
        }
        let mut keep = [false; 8];
        keep[0] = true;
        keep[m - 1] = true;
        keep[lo] = true;
        keep[hi] = true;
        let mut out = [cand[0]; 4];
        let mut n = 0;
        let mut brk = false;
        for (i, p) in cand.iter().enumerate() {
            brk |= p.brk;
            if keep[i] {
                out[n] = Pt { brk, ..*p };
                n += 1;
                brk = false;
            }
        }
        self.pts = out;
        self.n = n as u8;
        self.count = self.count.saturating_add(other.count);
    }
}

/// A named line with min/max decimation (see the module docs for the bound).
#[derive(Clone, Debug)]
pub struct Series {
    name: String,
    color: Color,
    buckets: Vec<Bucket>,
    max_buckets: usize,
    per_bucket: u64,
    pushed: u64,
    pending_break: bool,
}

impl Series {
    /// A series with the default bound of [`MAX_BUCKETS`] buckets.
    pub fn new(name: &str, color: Color) -> Self {
        Self::with_max_buckets(name, color, MAX_BUCKETS)
    }

    /// A series that keeps at most `max_buckets` buckets (at least 2), i.e.
    /// at most `4 × max_buckets` points.
    pub fn with_max_buckets(name: &str, color: Color, max_buckets: usize) -> Self {
        Series {
            name: name.to_owned(),
            color,
            buckets: Vec::new(),
            max_buckets: max_buckets.max(2),
            per_bucket: 1,
            pushed: 0,
            pending_break: false,
        }
    }

    /// Adds a sample. A non-finite `x` or `y` is a gap: the line is broken
    /// there.
    pub fn push(&mut self, x: f64, y: f64) {
        self.pushed = self.pushed.saturating_add(1);
        if !(x.is_finite() && y.is_finite()) {
            self.pending_break = true;
            return;
        }
        let b = Bucket::single(Pt {
            x,
            y,
            brk: std::mem::take(&mut self.pending_break),
        });
        if !self.last_has_room() && self.buckets.len() >= self.max_buckets {
            self.compact();
        }
        match self.buckets.last_mut() {
            Some(last) if last.count < self.per_bucket => last.absorb(&b),
            _ => self.buckets.push(b),
        }
    }

    fn last_has_room(&self) -> bool {
        self.buckets
            .last()
            .is_some_and(|l| l.count < self.per_bucket)
    }

    /// Merges adjacent buckets pairwise: half the buckets, twice the run.
    fn compact(&mut self) {
        let n = self.buckets.len();
        let half = n.div_ceil(2);
        for i in 0..half {
            let mut b = self.buckets[2 * i];
            if 2 * i + 1 < n {
                let next = self.buckets[2 * i + 1];
                b.absorb(&next);
            }
            self.buckets[i] = b;
        }
        self.buckets.truncate(half);
        self.per_bucket = self.per_bucket.saturating_mul(2);
    }

    /// Number of samples pushed, gaps included.
    pub fn len(&self) -> usize {
        usize::try_from(self.pushed).unwrap_or(usize::MAX)
    }

    /// True if nothing was pushed.
    pub fn is_empty(&self) -> bool {
        self.pushed == 0
    }

    /// Number of points kept for drawing (at most `4 × max_buckets`).
    pub fn kept(&self) -> usize {
        self.buckets.iter().map(|b| usize::from(b.n)).sum()
    }

    /// Number of buckets in use (at most `max_buckets`).
    pub fn buckets(&self) -> usize {
        self.buckets.len()
    }

    /// The legend name.
    pub fn name(&self) -> &str {
        &self.name
    }

    fn points(&self) -> impl Iterator<Item = Pt> + '_ {
        self.buckets.iter().flat_map(|b| b.points().iter().copied())
    }
}

/// Named scatter points, e.g. lab results, drawn as open circles labelled
/// with their value (labels are left out when a panel shows more than 40).
#[derive(Clone, Debug)]
pub struct Markers {
    name: String,
    color: Color,
    pts: Vec<(f64, f64)>,
    stride: u64,
    seen: u64,
}

impl Markers {
    /// Empty set of markers.
    pub fn new(name: &str, color: Color) -> Self {
        Markers {
            name: name.to_owned(),
            color,
            pts: Vec::new(),
            stride: 1,
            seen: 0,
        }
    }

    /// Adds a point; a non-finite coordinate is ignored (no result).
    pub fn push(&mut self, x: f64, y: f64) {
        if !(x.is_finite() && y.is_finite()) {
            return;
        }
        let i = self.seen;
        self.seen = self.seen.saturating_add(1);
        if i % self.stride != 0 {
            return;
        }
        self.pts.push((x, y));
        if self.pts.len() > MAX_MARKERS {
            // Kept points are samples 0, s, 2s, ...; keep 0, 2s, 4s, ...
            let mut k = 0usize;
            self.pts.retain(|_| {
                k += 1;
                k % 2 == 1
            });
            self.stride = self.stride.saturating_mul(2);
        }
    }

    /// Number of finite points pushed.
    pub fn len(&self) -> usize {
        usize::try_from(self.seen).unwrap_or(usize::MAX)
    }

    /// True if no finite point was pushed.
    pub fn is_empty(&self) -> bool {
        self.seen == 0
    }

    /// Number of points kept for drawing (at most [`MAX_MARKERS`]).
    pub fn kept(&self) -> usize {
        self.pts.len()
    }
}

/// A shaded x-range with a legend entry, e.g. a gap in the log.
#[derive(Clone, Debug, PartialEq)]
pub struct Band {
    /// Start, in x units (hours).
    pub x0: f64,
    /// End, in x units (hours).
    pub x1: f64,
    /// Legend text; bands with the same label share a colour and an entry.
    pub label: String,
}

impl Band {
    /// A band from `x0` to `x1`.
    pub fn new(x0: f64, x1: f64, label: &str) -> Self {
        Band {
            x0,
            x1,
            label: label.to_owned(),
        }
    }
}

/// One chart with its own y axis.
#[derive(Clone, Debug, Default)]
pub struct Panel {
    /// Axis label with the unit, e.g. `holdup [m³]`.
    pub y_label: String,
    /// Lines.
    pub series: Vec<Series>,
    /// Scatter points.
    pub markers: Vec<Markers>,
    /// Shaded x-ranges.
    pub bands: Vec<Band>,
    /// Horizontal reference lines: value and label.
    pub hlines: Vec<(f64, String)>,
}

impl Panel {
    /// An empty panel.
    pub fn new(y_label: &str) -> Self {
        Panel {
            y_label: y_label.to_owned(),
            ..Panel::default()
        }
    }
}

/// Stacked panels sharing one x axis, with a title and a footer.
#[derive(Clone, Debug, Default)]
pub struct Figure {
    /// Heading.
    pub title: String,
    /// Shared x axis label, see [`time_axis_label`].
    pub x_label: String,
    /// Panels, top to bottom (1–4 read best; more are drawn smaller).
    pub panels: Vec<Panel>,
    /// Small text under the chart; wrapped, `\n` starts a new line.
    pub footer: String,
}

impl Figure {
    /// The figure as a UTF-8 SVG document.
    pub fn to_svg(&self) -> String {
        render(self)
    }

    /// Writes [`Figure::to_svg`] to `path`.
    pub fn write(&self, path: &Path) -> std::io::Result<()> {
        std::fs::write(path, self.to_svg())
    }
}

// ---------------------------------------------------------------- axes ----

/// Running min/max of finite values, clamped to ±LIMIT.
#[derive(Clone, Copy, Debug)]
struct Range {
    lo: f64,
    hi: f64,
}

impl Range {
    fn new() -> Self {
        Range {
            lo: f64::INFINITY,
            hi: f64::NEG_INFINITY,
        }
    }

    fn add(&mut self, v: f64) {
        if v.is_finite() {
            let v = v.clamp(-LIMIT, LIMIT);
            self.lo = self.lo.min(v);
            self.hi = self.hi.max(v);
        }
    }

    fn is_empty(&self) -> bool {
        self.lo > self.hi
    }
}

/// An axis: limits, tick values inside them and their labels.
#[derive(Clone, Debug)]
struct Axis {
    lo: f64,
    hi: f64,
    step: f64,
    ticks: Vec<f64>,
    labels: Vec<String>,
}

impl Axis {
    /// Maps `v` to `[a, b]` (pixels); finite for any input.
    fn map(&self, v: f64, a: f64, b: f64) -> f64 {
        let v = if v.is_nan() { self.lo } else { v };
        let t = (v.clamp(-LIMIT, LIMIT) - self.lo) / (self.hi - self.lo);
        a + t * (b - a)
    }
}

/// `10^e` correctly rounded where that is cheap (|e| ≤ 22).
fn pow10(e: i32) -> f64 {
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
fn nice_step(span: f64, target: usize) -> (f64, i32) {
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
fn nice_axis(range: Range, target: usize, slack: f64, pad: f64) -> Axis {
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
fn tick_label(v: f64, e: i32, scientific: bool) -> String {
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

fn strip_negative_zero(s: String) -> String {
    match s.strip_prefix('-') {
        Some(rest) if rest.chars().all(|c| c == '0' || c == '.') => rest.to_owned(),
        _ => s,
    }
}

/// A measured value with about four significant digits, e.g. `12.34`.
fn value_label(v: f64) -> String {
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

// ---------------------------------------------------------------- text ----

/// Appends `s` XML-escaped; characters XML 1.0 forbids become U+FFFD.
fn push_esc(out: &mut String, s: &str) {
    for c in s.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&apos;"),
            '\t' | '\n' | '\r' => out.push(' '),
            c if (c as u32) < 0x20 || c == '\u{FFFE}' || c == '\u{FFFF}' => out.push('\u{FFFD}'),
            c => out.push(c),
        }
    }
}

/// Estimated width of `s` at font size `fs` (no font metrics: 0.6 em per
/// character, generous for sans-serif digits and lower case).
fn text_w(s: &str, fs: f64) -> f64 {
    s.chars().count() as f64 * fs * 0.6
}

/// Greedy word wrap to at most `max_chars` per line; `\n` forces a break.
fn wrap(s: &str, max_chars: usize) -> Vec<String> {
    let mut lines = Vec::new();
    for para in s.split('\n') {
        let mut line = String::new();
        for word in para.split_whitespace() {
            let len = line.chars().count();
            if len > 0 && len + 1 + word.chars().count() > max_chars {
                lines.push(std::mem::take(&mut line));
            }
            if !line.is_empty() {
                line.push(' ');
            }
            line.push_str(word);
        }
        if !line.trim().is_empty() {
            lines.push(line);
        }
    }
    lines
}

/// A pixel coordinate: one decimal, never NaN, never `-0`.
struct N(f64);

impl std::fmt::Display for N {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        let v = if self.0.is_finite() {
            (self.0 * 10.0).round() / 10.0
        } else {
            0.0
        };
        if v == 0.0 {
            f.write_str("0")
        } else if v.fract() == 0.0 {
            write!(f, "{v:.0}")
        } else {
            write!(f, "{v:.1}")
        }
    }
}

// -------------------------------------------------------------- layout ----

const W: f64 = 960.0;
const PAD: f64 = 14.0;
const TITLE_FS: f64 = 17.0;
const LABEL_FS: f64 = 13.0;
const LEGEND_FS: f64 = 12.0;
const TICK_FS: f64 = 11.0;
const SMALL_FS: f64 = 11.0;
const ROW_H: f64 = 18.0;
/// How far past the frame drawing may reach (marker radius + stroke).
const CLIP_MARGIN: f64 = 6.0;
const SWATCH_W: f64 = 22.0;
/// y limits: round out to a whole step if that costs at most 0.6 step,
/// else pad 3 % of the span.
const Y_SLACK: f64 = 0.6;
const Y_PAD: f64 = 0.03;
/// x (time) limits: the data's own ends unless a whole step is within
/// 0.1 step.
const X_SLACK: f64 = 0.1;
/// Most markers in a panel that still get value labels.
const MAX_VALUE_LABELS: usize = 40;

/// Light fills for bands, by first appearance of the label in the figure.
const BAND_FILLS: [&str; 4] = ["#b0b0b0", "#f0d96b", "#9ecae1", "#e7a6c8"];
const BAND_OPACITY: &str = "0.45";

fn plot_height(panels: usize) -> f64 {
    match panels {
        0 | 1 => 380.0,
        2 => 240.0,
        3 => 185.0,
        4 => 160.0,
        _ => 130.0,
    }
}

enum Swatch {
    Line(Color),
    Dot(Color),
    Band(usize),
}

struct Item<'a> {
    swatch: Swatch,
    text: &'a str,
}

impl Item<'_> {
    fn width(&self) -> f64 {
        SWATCH_W + 6.0 + text_w(self.text, LEGEND_FS) + 18.0
    }
}

/// Legend items of a panel and their rows (right-aligned). Row 0 shares the
/// line with the y label, so it has less room.
fn legend_rows<'a>(
    panel: &'a Panel,
    band_labels: &[&str],
    right: f64,
) -> (Vec<Item<'a>>, Vec<Vec<usize>>) {
    let mut items = Vec::new();
    for s in &panel.series {
        items.push(Item {
            swatch: Swatch::Line(s.color),
            text: &s.name,
        });
    }
    for m in &panel.markers {
        items.push(Item {
            swatch: Swatch::Dot(m.color),
            text: &m.name,
        });
    }
    let mut seen: Vec<&str> = Vec::new();
    for b in &panel.bands {
        if !seen.contains(&b.label.as_str()) {
            seen.push(&b.label);
            let k = band_labels.iter().position(|l| *l == b.label).unwrap_or(0);
            items.push(Item {
                swatch: Swatch::Band(k),
                text: &b.label,
            });
        }
    }
    let full = right - PAD;
    let first = full - text_w(&panel.y_label, LABEL_FS) - 24.0;
    let mut rows: Vec<Vec<usize>> = vec![Vec::new()];
    let mut used = 0.0;
    for (i, it) in items.iter().enumerate() {
        let w = it.width();
        let room = if rows.len() == 1 { first } else { full };
        let last = rows.len() - 1;
        if used + w > room && !(rows[last].is_empty() && rows.len() > 1) {
            rows.push(Vec::new());
            used = 0.0;
        }
        let last = rows.len() - 1;
        rows[last].push(i);
        used += w;
    }
    (items, rows)
}

/// Everything a panel contributes to the y range.
fn y_range(p: &Panel) -> Range {
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

fn x_range(panels: &[Panel]) -> Range {
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

/// A text element; `attrs` are extra attributes (already valid XML).
fn text(out: &mut String, x: f64, y: f64, attrs: &str, s: &str) {
    let _ = write!(out, r#"<text x="{}" y="{}"{attrs}>"#, N(x), N(y));
    push_esc(out, s);
    out.push_str("</text>\n");
}

const HALO: &str =
    r##" stroke="#ffffff" stroke-width="3" stroke-linejoin="round" paint-order="stroke""##;

fn render(fig: &Figure) -> String {
    let fallback = [Panel::default()];
    let panels: &[Panel] = if fig.panels.is_empty() {
        &fallback
    } else {
        &fig.panels
    };
    let ph = plot_height(panels.len());
    let y_target = ((ph / 45.0) as usize).clamp(3, 8);
    let yaxes: Vec<Axis> = panels
        .iter()
        .map(|p| nice_axis(y_range(p), y_target, Y_SLACK, Y_PAD))
        .collect();
    let widest = yaxes
        .iter()
        .flat_map(|a| a.labels.iter())
        .map(|l| text_w(l, TICK_FS))
        .fold(0.0, f64::max);
    let left = (PAD + widest + 10.0).max(52.0).round();
    let right = W - 26.0;
    let pw = right - left;
    let xaxis = nice_axis(
        x_range(panels),
        ((pw / 100.0) as usize).clamp(3, 12),
        X_SLACK,
        0.0,
    );

    let mut band_labels: Vec<&str> = Vec::new();
    for p in panels {
        for b in &p.bands {
            if !band_labels.contains(&b.label.as_str()) {
                band_labels.push(&b.label);
            }
        }
    }
    let legends: Vec<_> = panels
        .iter()
        .map(|p| legend_rows(p, &band_labels, right))
        .collect();

    let footer_lines = wrap(&fig.footer, ((W - 2.0 * PAD) / (SMALL_FS * 0.6)) as usize);
    let title_h = if fig.title.trim().is_empty() {
        12.0
    } else {
        40.0
    };
    let mut height = title_h;
    for (_, rows) in &legends {
        height += rows.len() as f64 * ROW_H + 6.0 + ph + 12.0;
    }
    height += 50.0 + footer_lines.len() as f64 * 14.0 + 6.0;
    let height = height.round();

    let mut out = String::with_capacity(64 * 1024);
    out.push_str("<?xml version=\"1.0\" encoding=\"UTF-8\"?>\n");
    let _ = writeln!(
        out,
        r#"<svg xmlns="http://www.w3.org/2000/svg" width="{w}" height="{h}" viewBox="0 0 {w} {h}" font-family="DejaVu Sans, Verdana, Arial, sans-serif">"#,
        w = N(W),
        h = N(height)
    );
    out.push_str("<title>");
    push_esc(&mut out, &fig.title);
    out.push_str("</title>\n");
    let _ = writeln!(
        out,
        r##"<rect x="0" y="0" width="{}" height="{}" fill="#ffffff"/>"##,
        N(W),
        N(height)
    );
    if !fig.title.trim().is_empty() {
        let attrs = format!(r##" font-size="{TITLE_FS}" font-weight="bold" fill="#111111""##);
        text(&mut out, PAD, 27.0, &attrs, &fig.title);
    }

    let mut cursor = title_h;
    let mut bottom = cursor;
    for (pi, (panel, yaxis)) in panels.iter().zip(&yaxes).enumerate() {
        let (items, rows) = &legends[pi];
        let top = cursor + rows.len() as f64 * ROW_H + 6.0;
        bottom = top + ph;
        let _ = writeln!(out, r#"<g id="panel{pi}">"#);

        // Header: y label left, legend rows right-aligned.
        let label_attrs = format!(r##" font-size="{LABEL_FS}" font-weight="bold" fill="#222222""##);
        text(&mut out, PAD, cursor + 13.0, &label_attrs, &panel.y_label);
        for (r, row) in rows.iter().enumerate() {
            let total: f64 = row.iter().map(|&i| items[i].width()).sum::<f64>() - 18.0;
            let mut x = right - total;
            let base = cursor + 13.0 + r as f64 * ROW_H;
            for &i in row {
                draw_swatch(&mut out, &items[i].swatch, x, base - 4.0);
                let attrs = format!(r##" font-size="{LEGEND_FS}" fill="#222222""##);
                text(&mut out, x + SWATCH_W + 6.0, base, &attrs, items[i].text);
                x += items[i].width();
            }
        }

        // Every sample lies inside the axis limits, so the clip is only a
        // safety net; it is a little larger than the frame so that a line
        // or marker on a limit is drawn whole.
        let _ = writeln!(
            out,
            r#"<clipPath id="clip{pi}"><rect x="{}" y="{}" width="{}" height="{}"/></clipPath>"#,
            N(left - CLIP_MARGIN),
            N(top - CLIP_MARGIN),
            N(pw + 2.0 * CLIP_MARGIN),
            N(ph + 2.0 * CLIP_MARGIN)
        );
        let _ = writeln!(out, r#"<g clip-path="url(#clip{pi})">"#);
        let xm = |v: f64| xaxis.map(v, left, right);
        let ym = |v: f64| yaxis.map(v, bottom, top);

        // Bands under everything.
        for b in &panel.bands {
            if !(b.x0.is_finite() && b.x1.is_finite()) {
                continue;
            }
            let (a, c) = (xm(b.x0.min(b.x1)), xm(b.x0.max(b.x1)));
            let w = (c - a).max(1.5);
            let k = band_labels.iter().position(|l| *l == b.label).unwrap_or(0);
            let _ = writeln!(
                out,
                r#"<rect x="{}" y="{}" width="{}" height="{}" fill="{}" fill-opacity="{BAND_OPACITY}"/>"#,
                N(a),
                N(top),
                N(w),
                N(ph),
                BAND_FILLS[k % BAND_FILLS.len()]
            );
        }

        // Grid.
        out.push_str(r##"<g stroke="#e2e2e2" stroke-width="1">"##);
        out.push('\n');
        for &t in &xaxis.ticks {
            let x = xm(t);
            let _ = writeln!(
                out,
                r#"<line x1="{}" y1="{}" x2="{}" y2="{}"/>"#,
                N(x),
                N(top),
                N(x),
                N(bottom)
            );
        }
        for &t in &yaxis.ticks {
            let y = ym(t);
            let _ = writeln!(
                out,
                r#"<line x1="{}" y1="{}" x2="{}" y2="{}"/>"#,
                N(left),
                N(y),
                N(right),
                N(y)
            );
        }
        out.push_str("</g>\n");

        // Frame, under the data.
        let _ = writeln!(
            out,
            r##"<rect x="{}" y="{}" width="{}" height="{}" fill="none" stroke="#999999" stroke-width="1"/>"##,
            N(left),
            N(top),
            N(pw),
            N(ph)
        );

        // Reference lines.
        for (v, _) in &panel.hlines {
            if v.is_finite() {
                let y = ym(*v);
                let _ = writeln!(
                    out,
                    r##"<line x1="{}" y1="{}" x2="{}" y2="{}" stroke="#444444" stroke-width="1.2" stroke-dasharray="6 4"/>"##,
                    N(left),
                    N(y),
                    N(right),
                    N(y)
                );
            }
        }

        // Lines.
        for s in &panel.series {
            draw_series(&mut out, s, &xm, &ym);
        }

        // Markers.
        let visible: usize = panel.markers.iter().map(|m| m.pts.len()).sum();
        for m in &panel.markers {
            let _ = writeln!(
                out,
                r##"<g fill="#ffffff" stroke="{}" stroke-width="1.8">"##,
                m.color.hex()
            );
            for &(x, y) in &m.pts {
                let _ = writeln!(
                    out,
                    r#"<circle cx="{}" cy="{}" r="4"/>"#,
                    N(xm(x)),
                    N(ym(y))
                );
            }
            out.push_str("</g>\n");
        }
        out.push_str("</g>\n");

        // Value labels and reference-line labels, outside the clip (kept
        // inside the frame by placement), avoiding each other.
        let mut placed: Vec<[f64; 4]> = Vec::new();
        for (v, label) in &panel.hlines {
            if !v.is_finite() || label.is_empty() {
                continue;
            }
            let y = ym(*v);
            let base = if y - 4.0 - TICK_FS < top {
                y + TICK_FS + 3.0
            } else {
                y - 4.0
            };
            let w = text_w(label, TICK_FS);
            placed.push([right - 4.0 - w, base - TICK_FS, right - 4.0, base + 2.0]);
            let attrs =
                format!(r##" font-size="{TICK_FS}" fill="#333333" text-anchor="end"{HALO}"##);
            text(&mut out, right - 4.0, base, &attrs, label);
        }
        if visible <= MAX_VALUE_LABELS {
            for m in &panel.markers {
                for &(x, y) in &m.pts {
                    let label = value_label(y);
                    let (cx, cy) = (xm(x), ym(y));
                    let w = text_w(&label, TICK_FS);
                    let x0 = (cx - w / 2.0).clamp(left + 2.0, (right - 2.0 - w).max(left + 2.0));
                    let above = cy - 8.0;
                    let below = cy + 8.0 + TICK_FS;
                    let spot = [above, below]
                        .into_iter()
                        .filter(|&b| b - TICK_FS >= top && b + 2.0 <= bottom)
                        .map(|b| [x0, b - TICK_FS + 1.0, x0 + w, b + 2.0])
                        .find(|bx| !placed.iter().any(|p| overlaps(p, bx)));
                    if let Some(bx) = spot {
                        placed.push(bx);
                        let attrs =
                            format!(r##" font-size="{TICK_FS}" fill="{}"{HALO}"##, m.color.hex());
                        text(&mut out, x0, bx[3] - 2.0, &attrs, &label);
                    }
                }
            }
        }

        let empty = panel.series.iter().all(|s| s.kept() == 0)
            && visible == 0
            && !panel.hlines.iter().any(|(v, _)| v.is_finite());
        if empty {
            let attrs = format!(r##" font-size="{LABEL_FS}" fill="#888888" text-anchor="middle""##);
            text(&mut out, left + pw / 2.0, top + ph / 2.0, &attrs, "no data");
        }

        // y tick labels.
        let spacing = if yaxis.ticks.len() > 1 {
            (ym(yaxis.ticks[0]) - ym(yaxis.ticks[1])).abs()
        } else {
            ph
        };
        let every = ((TICK_FS + 3.0) / spacing.max(1e-9)).ceil().clamp(1.0, 1e6) as usize;
        let tick_attrs = format!(r##" font-size="{TICK_FS}" fill="#444444" text-anchor="end""##);
        for (i, (&t, l)) in yaxis.ticks.iter().zip(&yaxis.labels).enumerate() {
            if i % every == 0 {
                text(&mut out, left - 6.0, ym(t) + 4.0, &tick_attrs, l);
            }
        }
        out.push_str("</g>\n");
        cursor = bottom + 12.0;
    }

    // Shared x axis under the last panel.
    let xspacing = if xaxis.ticks.len() > 1 {
        xaxis.step / (xaxis.hi - xaxis.lo) * pw
    } else {
        pw
    };
    let widest_x = xaxis
        .labels
        .iter()
        .map(|l| text_w(l, TICK_FS))
        .fold(0.0, f64::max);
    let every = ((widest_x + 12.0) / xspacing.max(1e-9))
        .ceil()
        .clamp(1.0, 1e6) as usize;
    let xtick_attrs = format!(r##" font-size="{TICK_FS}" fill="#444444" text-anchor="middle""##);
    for (i, (&t, l)) in xaxis.ticks.iter().zip(&xaxis.labels).enumerate() {
        if i % every == 0 {
            let x = xaxis.map(t, left, right);
            let _ = writeln!(
                out,
                r##"<line x1="{}" y1="{}" x2="{}" y2="{}" stroke="#999999"/>"##,
                N(x),
                N(bottom),
                N(x),
                N(bottom + 4.0)
            );
            text(&mut out, x, bottom + 17.0, &xtick_attrs, l);
        }
    }
    let xl_attrs = format!(r##" font-size="{LABEL_FS}" fill="#222222" text-anchor="middle""##);
    text(
        &mut out,
        left + pw / 2.0,
        bottom + 37.0,
        &xl_attrs,
        &fig.x_label,
    );
    let foot_attrs = format!(r##" font-size="{SMALL_FS}" fill="#555555""##);
    for (i, line) in footer_lines.iter().enumerate() {
        text(
            &mut out,
            PAD,
            bottom + 60.0 + i as f64 * 14.0,
            &foot_attrs,
            line,
        );
    }
    out.push_str("</svg>\n");
    out
}

fn overlaps(a: &[f64; 4], b: &[f64; 4]) -> bool {
    a[0] < b[2] && b[0] < a[2] && a[1] < b[3] && b[1] < a[3]
}

fn draw_swatch(out: &mut String, sw: &Swatch, x: f64, ymid: f64) {
    match *sw {
        Swatch::Line(c) => {
            let _ = writeln!(
                out,
                r#"<line x1="{}" y1="{}" x2="{}" y2="{}" stroke="{}" stroke-width="2.5"/>"#,
                N(x),
                N(ymid),
                N(x + SWATCH_W),
                N(ymid),
                c.hex()
            );
        }
        Swatch::Dot(c) => {
            let _ = writeln!(
                out,
                r##"<circle cx="{}" cy="{}" r="4" fill="#ffffff" stroke="{}" stroke-width="1.8"/>"##,
                N(x + SWATCH_W / 2.0),
                N(ymid),
                c.hex()
            );
        }
        Swatch::Band(k) => {
            let _ = writeln!(
                out,
                r##"<rect x="{}" y="{}" width="{}" height="10" fill="{}" fill-opacity="{BAND_OPACITY}" stroke="#999999" stroke-width="0.5"/>"##,
                N(x + 2.0),
                N(ymid - 5.0),
                N(SWATCH_W - 4.0),
                BAND_FILLS[k % BAND_FILLS.len()]
            );
        }
    }
}

/// One `<polyline>` per unbroken run; a run of one point is a dot.
fn draw_series(out: &mut String, s: &Series, xm: &dyn Fn(f64) -> f64, ym: &dyn Fn(f64) -> f64) {
    let _ = writeln!(
        out,
        r#"<g fill="none" stroke="{}" stroke-width="1.6" stroke-linejoin="round" stroke-linecap="round">"#,
        s.color.hex()
    );
    let mut run: Vec<(i64, i64)> = Vec::new();
    let flush = |out: &mut String, run: &mut Vec<(i64, i64)>| {
        match run.len() {
            0 => {}
            1 => {
                let _ = writeln!(
                    out,
                    r#"<circle cx="{}" cy="{}" r="2.5" fill="{}" stroke="none"/>"#,
                    N(run[0].0 as f64 / 10.0),
                    N(run[0].1 as f64 / 10.0),
                    s.color.hex()
                );
            }
            _ => {
                out.push_str(r#"<polyline points=""#);
                for (i, &(x, y)) in run.iter().enumerate() {
                    if i > 0 {
                        out.push(' ');
                    }
                    let _ = write!(out, "{},{}", N(x as f64 / 10.0), N(y as f64 / 10.0));
                }
                out.push_str("\"/>\n");
            }
        }
        run.clear();
    };
    for p in s.points() {
        if p.brk {
            flush(out, &mut run);
        }
        // Pixel coordinates in tenths; drop repeats of the same pixel.
        let q = (
            (xm(p.x) * 10.0).round() as i64,
            (ym(p.y) * 10.0).round() as i64,
        );
        if run.last() != Some(&q) {
            run.push(q);
        }
    }
    flush(out, &mut run);
    out.push_str("</g>\n");
}

#[cfg(test)]
mod tests {
    use super::*;

    const CAUTION: &str = "Estimates are advisory: validate against lab results; not for use as the only input to a safety function.";

    /// An element as the checker saw it.
    #[derive(Debug)]
    struct Elem {
        name: String,
        attrs: Vec<(String, String)>,
    }

    /// Unescapes the five predefined entities; any other `&` is an error.
    fn unescape(s: &str) -> Result<String, String> {
        let mut out = String::new();
        let mut rest = s;
        while let Some(i) = rest.find('&') {
            out.push_str(&rest[..i]);
            let tail = &rest[i..];
            let (rep, len) = [
                ("&amp;", '&'),
                ("&lt;", '<'),
                ("&gt;", '>'),
                ("&quot;", '"'),
                ("&apos;", '\''),
            ]
            .iter()
            .find(|(e, _)| tail.starts_with(e))
            .map(|(e, c)| (*c, e.len()))
            .ok_or_else(|| format!("bad entity at {:?}", &tail[..tail.len().min(12)]))?;
            out.push(rep);
            rest = &tail[len..];
        }
        out.push_str(rest);
        Ok(out)
    }

    fn is_name_char(c: char) -> bool {
        c.is_ascii_alphanumeric() || matches!(c, '-' | '_' | ':' | '.')
    }

    /// A minimal XML well-formedness check: prologue, balanced tags, quoted
    /// and unique attributes, valid entities, no stray `<`, one root. Returns
    /// the elements and the unescaped text nodes.
    fn check_xml(doc: &str) -> Result<(Vec<Elem>, Vec<String>), String> {
        let prologue = "<?xml version=\"1.0\" encoding=\"UTF-8\"?>";
        let mut rest = doc.strip_prefix(prologue).ok_or("missing UTF-8 prologue")?;
        let mut stack: Vec<String> = Vec::new();
        let mut elems = Vec::new();
        let mut texts = Vec::new();
        let mut roots = 0;
        while !rest.is_empty() {
            let lt = rest.find('<').unwrap_or(rest.len());
            let t = &rest[..lt];
            if stack.is_empty() && !t.trim().is_empty() {
                return Err(format!("text outside root: {t:?}"));
            }
            if t.contains('>') {
                return Err(format!("raw '>' in text {t:?}"));
            }
            let t = unescape(t)?;
            if !t.trim().is_empty() {
                texts.push(t);
            }
            rest = &rest[lt..];
            if rest.is_empty() {
                break;
            }
            if let Some(r) = rest.strip_prefix("</") {
                let end = r.find('>').ok_or("unclosed end tag")?;
                let name = r[..end].trim();
                match stack.pop() {
                    Some(open) if open == name => {}
                    other => return Err(format!("</{name}> closes {other:?}")),
                }
                rest = &r[end + 1..];
                continue;
            }
            let r = &rest[1..];
            let name_len = r.find(|c: char| !is_name_char(c)).unwrap_or(r.len());
            if name_len == 0 {
                return Err(format!("bad tag at {:?}", &rest[..rest.len().min(20)]));
            }
            let name = r[..name_len].to_owned();
            let mut r = &r[name_len..];
            let mut attrs: Vec<(String, String)> = Vec::new();
            let self_closing;
            loop {
                let trimmed = r.trim_start();
                let had_space = trimmed.len() < r.len();
                r = trimmed;
                if let Some(x) = r.strip_prefix("/>") {
                    self_closing = true;
                    r = x;
                    break;
                }
                if let Some(x) = r.strip_prefix('>') {
                    self_closing = false;
                    r = x;
                    break;
                }
                if !had_space {
                    return Err(format!("attribute without space in <{name}>"));
                }
                let an = r.find(|c: char| !is_name_char(c)).unwrap_or(r.len());
                if an == 0 {
                    return Err(format!(
                        "bad attribute in <{name}>: {:?}",
                        &r[..r.len().min(20)]
                    ));
                }
                let aname = r[..an].to_owned();
                let x = r[an..]
                    .strip_prefix("=\"")
                    .ok_or(format!("unquoted {aname}"))?;
                let q = x.find('"').ok_or("unterminated attribute")?;
                let raw = &x[..q];
                if raw.contains('<') {
                    return Err(format!("'<' in attribute {aname}"));
                }
                if attrs.iter().any(|(n, _)| *n == aname) {
                    return Err(format!("duplicate attribute {aname}"));
                }
                attrs.push((aname, unescape(raw)?));
                r = &x[q + 1..];
            }
            if stack.is_empty() {
                roots += 1;
            }
            if !self_closing {
                stack.push(name.clone());
            }
            elems.push(Elem { name, attrs });
            rest = r;
        }
        if !stack.is_empty() {
            return Err(format!("unclosed {stack:?}"));
        }
        if roots != 1 {
            return Err(format!("{roots} roots"));
        }
        Ok((elems, texts))
    }

    /// Attributes that hold numbers; each must parse to finite values.
    fn check_numbers(elems: &[Elem]) -> Result<(), String> {
        const NUMERIC: [&str; 15] = [
            "x",
            "y",
            "x1",
            "x2",
            "y1",
            "y2",
            "cx",
            "cy",
            "r",
            "width",
            "height",
            "points",
            "viewBox",
            "stroke-width",
            "font-size",
        ];
        for e in elems {
            for (n, v) in &e.attrs {
                if !NUMERIC.contains(&n.as_str()) {
                    continue;
                }
                for tok in v.split([' ', ',']).filter(|t| !t.is_empty()) {
                    match tok.parse::<f64>() {
                        Ok(f) if f.is_finite() => {}
                        _ => return Err(format!("<{}> {n}={v:?}", e.name)),
                    }
                }
            }
        }
        Ok(())
    }

    /// The document without its text nodes (titles and legends may
    /// legitimately say "inflow"), for the NaN/inf check on numbers.
    fn markup_only(svg: &str) -> String {
        let mut out = String::new();
        let mut in_tag = false;
        for c in svg.chars() {
            match c {
                '<' => in_tag = true,
                '>' => in_tag = false,
                _ if in_tag => out.push(c),
                _ => {}
            }
        }
        out
    }

    fn no_non_finite(svg: &str) -> bool {
        let m = markup_only(svg).to_ascii_lowercase();
        !m.contains("nan") && !m.contains("inf")
    }

    fn polylines(svg: &str) -> usize {
        svg.matches("<polyline").count()
    }

    /// xorshift64*, for reproducible noise.
    struct Rng(u64);
    impl Rng {
        fn next(&mut self) -> f64 {
            self.0 ^= self.0 >> 12;
            self.0 ^= self.0 << 25;
            self.0 ^= self.0 >> 27;
            (self.0.wrapping_mul(0x2545_F491_4F6C_DD1D) >> 11) as f64 / (1u64 << 53) as f64
        }
    }

    #[test]
    fn decimation_keeps_spikes_within_bound() {
        let mut s = Series::new("flow", Color::Blue);
        let n = 1_000_000u32;
        let mut peak_buckets = 0;
        for i in 0..n {
            let x = f64::from(i) * 0.001;
            // Spikes at the start, middle and end of their final buckets
            // (512 samples each at the end): 876_544 = 1712 × 512.
            let y = match i {
                123_457 => 1000.0,
                876_543 => -1000.0,
                876_544 => 2000.0,
                500_100 => -2000.0,
                _ => (x * 0.7).sin(),
            };
            s.push(x, y);
            peak_buckets = peak_buckets.max(s.buckets());
        }
        assert_eq!(s.len(), n as usize);
        assert!(peak_buckets <= MAX_BUCKETS, "{peak_buckets} buckets");
        assert!(s.kept() <= 4 * MAX_BUCKETS, "{} points", s.kept());
        // The data has 1e6 samples; the kept set must be a real reduction.
        assert!(s.kept() < 10_000);
        let ys: Vec<f64> = s.points().map(|p| p.y).collect();
        for spike in [1000.0, -1000.0, 2000.0, -2000.0] {
            assert!(ys.contains(&spike), "spike {spike} lost");
        }
        // Ends survive, arrival order is kept, no break was invented.
        let pts: Vec<Pt> = s.points().collect();
        assert_eq!(pts[0].x, 0.0);
        assert_eq!(pts[pts.len() - 1].x, f64::from(n - 1) * 0.001);
        assert!(pts.windows(2).all(|w| w[0].x < w[1].x));
        assert!(pts.iter().all(|p| !p.brk));
    }

    /// Brute force: every bucket keeps the first, min, max and last of
    /// exactly the raw samples it covers.
    #[test]
    fn each_bucket_keeps_first_min_max_last_of_its_run() {
        for cap in [2usize, 7, 16, 100] {
            let mut rng = Rng(cap as u64 + 1);
            let raw: Vec<f64> = (0..20_000).map(|_| rng.next() * 100.0).collect();
            let mut s = Series::with_max_buckets("s", Color::Blue, cap);
            for (i, &y) in raw.iter().enumerate() {
                s.push(i as f64, y);
            }
            let mut start = 0usize;
            for b in &s.buckets {
                let run = &raw[start..start + b.count as usize];
                let ys: Vec<f64> = b.points().iter().map(|p| p.y).collect();
                let min = run.iter().copied().fold(f64::INFINITY, f64::min);
                let max = run.iter().copied().fold(f64::NEG_INFINITY, f64::max);
                assert_eq!(b.points()[0].x, start as f64);
                assert_eq!(ys[0], run[0]);
                assert_eq!(ys[ys.len() - 1], run[run.len() - 1]);
                assert!(ys.contains(&min) && ys.contains(&max), "cap {cap}");
                start += run.len();
            }
            assert_eq!(start, raw.len());
        }
    }

    #[test]
    fn coordinates_are_never_non_finite() {
        assert_eq!(N(f64::NAN).to_string(), "0");
        assert_eq!(N(f64::INFINITY).to_string(), "0");
        assert_eq!(N(-0.04).to_string(), "0");
        assert_eq!(N(12.25).to_string(), "12.3");
        assert_eq!(N(7.0).to_string(), "7");
    }

    #[test]
    fn memory_stays_bounded() {
        let mut s = Series::new("flow", Color::Blue);
        for i in 0..3_000_000u32 {
            s.push(f64::from(i), f64::from(i % 1000));
        }
        let bytes = s.buckets.capacity() * std::mem::size_of::<Bucket>();
        assert!(bytes <= 224 * 1024, "{bytes} bytes");
    }

    #[test]
    fn small_bucket_bound_is_respected_at_every_push() {
        for cap in [2usize, 3, 5, 16] {
            let mut s = Series::with_max_buckets("s", Color::Green, cap);
            let mut rng = Rng(7);
            for i in 0..10_000 {
                s.push(f64::from(i), rng.next());
                assert!(s.buckets() <= cap && s.kept() <= 4 * cap);
            }
        }
    }

    #[test]
    fn short_series_is_kept_exactly() {
        let mut s = Series::new("s", Color::Blue);
        for i in 0..3000 {
            s.push(f64::from(i), f64::from(i % 7));
        }
        // 3000 samples fit 1000 buckets of 4 (one merge): nothing is lost.
        assert_eq!(s.kept(), 3000);
    }

    #[test]
    fn nan_breaks_the_line_even_after_decimation() {
        let mut s = Series::new("level", Color::Blue);
        for i in 0..10 {
            s.push(f64::from(i), 1.0);
        }
        s.push(10.0, f64::NAN);
        for i in 11..20 {
            s.push(f64::from(i), 2.0);
        }
        s.push(20.0, f64::INFINITY);
        s.push(21.0, 3.0);
        let mut p = Panel::new("level [m]");
        p.series.push(s);
        let fig = Figure {
            panels: vec![p],
            ..Figure::default()
        };
        let svg = fig.to_svg();
        assert_eq!(polylines(&svg), 2, "two runs as lines");
        assert!(
            svg.contains(r#"r="2.5""#),
            "isolated last point drawn as a dot"
        );

        // One NaN in 200,000 samples, merged many times over.
        let mut s = Series::with_max_buckets("s", Color::Blue, 64);
        for i in 0..200_000 {
            let y = if i == 77_777 { f64::NAN } else { 1.0 };
            s.push(f64::from(i), y);
        }
        let breaks = s.points().filter(|p| p.brk).count();
        assert_eq!(breaks, 1);
        let mut p = Panel::new("y");
        p.series.push(s);
        let svg = Figure {
            panels: vec![p],
            ..Figure::default()
        }
        .to_svg();
        assert_eq!(polylines(&svg), 2);
    }

    fn axis(lo: f64, hi: f64) -> Axis {
        let mut r = Range::new();
        r.add(lo);
        r.add(hi);
        nice_axis(r, 5, Y_SLACK, Y_PAD)
    }

    fn assert_good_axis(a: &Axis, lo: f64, hi: f64) {
        assert!(a.lo.is_finite() && a.hi.is_finite() && a.lo < a.hi, "{a:?}");
        if lo.is_finite() && hi.is_finite() {
            assert!(
                a.lo <= lo && a.hi >= hi,
                "{a:?} does not cover [{lo}, {hi}]"
            );
        }
        assert!(a.ticks.len() >= 2 && a.ticks.len() <= 12, "{a:?}");
        assert!(a.ticks.iter().all(|t| *t >= a.lo && *t <= a.hi), "{a:?}");
        // Step is 1, 2 or 5 times a power of ten.
        let e = a.step.log10().floor();
        let m = a.step / 10f64.powf(e);
        assert!(
            [1.0, 2.0, 5.0, 10.0].iter().any(|k| (m - k).abs() < 1e-9),
            "step {} ({m})",
            a.step
        );
        let mut l = a.labels.clone();
        l.dedup();
        assert_eq!(l.len(), a.labels.len(), "repeated labels {:?}", a.labels);
        assert!(a
            .labels
            .iter()
            .all(|l| !l.starts_with("-0") || l.len() > 2 && l.as_bytes()[2] == b'.'));
        for l in &a.labels {
            let v: f64 = l
                .parse()
                .unwrap_or_else(|_| panic!("label {l:?} is not a number"));
            assert!(v.is_finite());
        }
    }

    #[test]
    fn nice_ticks_for_typical_and_odd_ranges() {
        let a = axis(0.0, 1.0);
        assert_good_axis(&a, 0.0, 1.0);
        assert_eq!(a.labels, ["0", "0.2", "0.4", "0.6", "0.8", "1.0"]);

        let a = axis(0.0013, 0.0021);
        assert_good_axis(&a, 0.0013, 0.0021);
        assert_eq!(a.step, 0.0002);
        assert_eq!(a.labels.first().map(String::as_str), Some("0.0012"));

        let a = axis(-5.0, 1e6);
        assert_good_axis(&a, -5.0, 1e6);
        assert!(a.labels.contains(&"0".to_owned()));
        assert!(a.labels.contains(&"1000000".to_owned()));
        // -5 must not drag the axis down a whole step of 200,000.
        assert!(a.lo > -100_000.0, "{a:?}");

        for (lo, hi) in [
            (3.0, 3.0),
            (0.0, 0.0),
            (-1e-300, -1e-300),
            (1e15, 1e15 + 1.0),
            (-f64::MAX, f64::MAX),
            (1e8, 1e8 + 1e-3),
            (1e-9, 3e-9),
            (-7.5, -7.2),
        ] {
            let a = axis(lo, hi);
            assert_good_axis(&a, lo.clamp(-LIMIT, LIMIT), hi.clamp(-LIMIT, LIMIT));
        }
        let a = axis(3.0, 3.0);
        assert!(a.ticks.iter().any(|t| (t - 3.0).abs() < 1e-12), "{a:?}");

        // NaN-only and empty input: the default axis.
        let mut r = Range::new();
        r.add(f64::NAN);
        r.add(f64::INFINITY);
        let a = nice_axis(r, 5, Y_SLACK, Y_PAD);
        assert_good_axis(&a, 0.0, 1.0);
        assert_eq!((a.lo, a.hi), (0.0, 1.0));
    }

    #[test]
    fn value_labels_read_well() {
        assert_eq!(value_label(12.34), "12.34");
        assert_eq!(value_label(1.5), "1.5");
        assert_eq!(value_label(850.26), "850.3");
        assert_eq!(value_label(0.01234), "0.01234");
        assert_eq!(value_label(-0.0), "0");
        assert_eq!(value_label(2.5e7), "2.5e7");
        assert_eq!(value_label(-0.00001), "-1e-5");
        assert_eq!(value_label(f64::NAN), "");
    }

    #[test]
    fn escaping_and_forbidden_characters() {
        let mut s = String::new();
        push_esc(&mut s, "a<b & c>\"d\" 'e' \u{1}\u{FFFF} m³ °C");
        assert_eq!(
            s,
            "a&lt;b &amp; c&gt;&quot;d&quot; &apos;e&apos; \u{FFFD}\u{FFFD} m³ °C"
        );
    }

    #[test]
    fn checker_rejects_broken_xml() {
        let p = "<?xml version=\"1.0\" encoding=\"UTF-8\"?>";
        assert!(check_xml(&format!("{p}<a><b></a></b>")).is_err());
        assert!(check_xml(&format!("{p}<a>x & y</a>")).is_err());
        assert!(check_xml(&format!("{p}<a x=1/>")).is_err());
        assert!(check_xml(&format!("{p}<a x=\"1\" x=\"2\"/>")).is_err());
        assert!(check_xml(&format!("{p}<a/><b/>")).is_err());
        assert!(check_xml(&format!("{p}<a>")).is_err());
        assert!(check_xml("<a/>").is_err());
        let (e, t) = check_xml(&format!("{p}<a k=\"&lt;\"><b/>x &amp; y</a>")).unwrap();
        assert_eq!(e.len(), 2);
        assert_eq!(e[0].attrs[0].1, "<");
        assert_eq!(t, ["x & y"]);
        let bad = vec![Elem {
            name: "line".into(),
            attrs: vec![("x1".into(), "NaN".into())],
        }];
        assert!(check_numbers(&bad).is_err());
    }

    /// Three panels sharing time: flows, holdup with lab results, and a
    /// temperature; 72 h at 10 s, with a gap, a flat-lined meter, a spike.
    fn example_figure() -> Figure {
        let mut rng = Rng(0x9E37_79B9_7F4A_7C15);
        let mut fin = Series::new("FI-101 inflow", Color::Blue);
        let mut fout = Series::new("FI-102 outflow", Color::Vermillion);
        let mut est = Series::new("holdup estimate", Color::Blue);
        let mut lvl = Series::new("holdup from level LI-103", Color::Green);
        let mut temp = Series::new("TI-104", Color::Purple);
        let dt = 10.0 / 3600.0;
        for i in 0..(72 * 360) {
            let t = f64::from(i) * dt;
            let gap = (30.0..34.0).contains(&t);
            let flat = (50.0..58.0).contains(&t);
            // Holdup 20 ± 4 m³; outflow is inflow minus d(holdup)/dt.
            let holdup = 20.0 + 4.0 * (t / 9.0).sin() + 0.05 * t;
            let qin_true = 12.0 + 3.0 * (t / 7.0).sin();
            let qin = if flat {
                11.8
            } else {
                qin_true + 0.3 * (rng.next() - 0.5)
            };
            let mut qout =
                qin_true - (4.0 / 9.0) * (t / 9.0).cos() - 0.05 + 0.3 * (rng.next() - 0.5);
            if i == 15_000 {
                qout = 24.0;
            }
            if gap {
                for s in [&mut fin, &mut fout, &mut est, &mut lvl, &mut temp] {
                    s.push(t, f64::NAN);
                }
                continue;
            }
            fin.push(t, qin);
            fout.push(t, qout);
            est.push(t, holdup);
            lvl.push(
                t,
                holdup + 0.9 + 0.5 * (t / 2.5).sin() + 0.1 * (rng.next() - 0.5),
            );
            temp.push(t, 61.0 + 1.5 * (t / 11.0).cos() + 0.04 * (rng.next() - 0.5));
        }
        let mut lab = Markers::new("lab sample", Color::Black);
        for (t, v) in [(6.0, 22.9), (18.5, 24.42), (42.0, 17.3), (66.25, 22.05)] {
            lab.push(t, v);
        }
        let gap = Band::new(30.0, 34.0, "gap in log");
        let flat = Band::new(50.0, 58.0, "flat-lined FI-101");
        Figure {
            title: "Replay of tank T-1: holdup estimate vs. level and lab".into(),
            x_label: time_axis_label("2024-03-05T06:00:00Z"),
            panels: vec![
                Panel {
                    y_label: "flow [m³/h]".into(),
                    series: vec![fin, fout],
                    markers: vec![],
                    bands: vec![gap.clone(), flat.clone()],
                    hlines: vec![],
                },
                Panel {
                    y_label: "holdup [m³]".into(),
                    series: vec![est, lvl],
                    markers: vec![lab],
                    bands: vec![gap.clone(), flat],
                    hlines: vec![
                        (28.0, "high limit 28 m³".into()),
                        (12.0, "low limit 12 m³".into()),
                    ],
                },
                Panel {
                    y_label: "temperature [°C]".into(),
                    series: vec![temp],
                    markers: vec![],
                    bands: vec![gap],
                    hlines: vec![],
                },
            ],
            footer: CAUTION.into(),
        }
    }

    #[test]
    fn example_figure_is_well_formed_and_complete() {
        let fig = example_figure();
        let svg = fig.to_svg();
        let (elems, texts) = check_xml(&svg).unwrap();
        check_numbers(&elems).unwrap();
        assert!(no_non_finite(&svg));
        let has = |s: &str| texts.iter().any(|t| t == s);
        for s in [
            fig.title.as_str(),
            "time since 2024-03-05T06:00:00Z [h]",
            "flow [m³/h]",
            "holdup [m³]",
            "temperature [°C]",
            "FI-101 inflow",
            "FI-102 outflow",
            "holdup estimate",
            "holdup from level LI-103",
            "lab sample",
            "gap in log",
            "flat-lined FI-101",
            "high limit 28 m³",
            "24.42",
        ] {
            assert!(has(s), "missing text {s:?}");
        }
        // The footer may be wrapped: its words, in order, are all there.
        let footer: Vec<&str> = texts
            .iter()
            .filter(|t| CAUTION.contains(t.as_str()))
            .map(String::as_str)
            .collect();
        assert_eq!(footer.join(" "), CAUTION);
        // Gap in the log breaks each of the five lines once.
        assert_eq!(polylines(&svg), 10);
        // Same data, same bytes.
        assert_eq!(svg, example_figure().to_svg());
        if let Some(path) = std::env::var_os("HOLDUP_PLOT_EXAMPLE") {
            fig.write(Path::new(&path)).unwrap();
        }
    }

    #[test]
    fn hostile_data_never_panics_or_leaks_non_finite_numbers() {
        let mut cases: Vec<Vec<(f64, f64)>> = vec![
            vec![],
            vec![(1.0, 2.0)],
            vec![(f64::NAN, f64::NAN); 10],
            vec![(0.0, 5.0), (1.0, 5.0), (2.0, 5.0)],
            vec![(0.0, f64::MAX), (1.0, -f64::MAX), (2.0, f64::INFINITY)],
            vec![(f64::NEG_INFINITY, 1.0), (f64::INFINITY, 2.0), (3.0, 3.0)],
            vec![(-1e300, 1e-300), (1e300, -1e-300)],
            vec![(5.0, 1.0), (5.0, 1.0)],
            vec![(1e15, 0.0), (1e15 + 1e-3, 1.0)],
        ];
        cases.push(
            (0..500)
                .map(|i| (f64::from(i % 3), f64::from(i).sin()))
                .collect(),
        );
        for (ci, pts) in cases.iter().enumerate() {
            let mut s = Series::new("a & <b>", Color::nth(ci));
            let mut m = Markers::new("lab \"x\"", Color::nth(ci + 1));
            for &(x, y) in pts {
                s.push(x, y);
                m.push(x, y);
            }
            let panel = Panel {
                y_label: "y ['u']".into(),
                series: vec![s, Series::new("empty", Color::Yellow)],
                markers: vec![m],
                bands: vec![
                    Band::new(f64::NAN, 1.0, "bad band"),
                    Band::new(2.0, 2.0, "zero-width"),
                    Band::new(3.0, -1.0, "reversed"),
                ],
                hlines: vec![(f64::NAN, "nan line".into()), (f64::MAX, "max".into())],
            };
            for panels in [vec![], vec![panel.clone()], vec![panel; 6]] {
                let fig = Figure {
                    title: "t < & >".into(),
                    x_label: "x".into(),
                    panels,
                    footer: "f\u{0}oot\ner".into(),
                };
                let svg = fig.to_svg();
                let (elems, texts) = check_xml(&svg).unwrap_or_else(|e| panic!("case {ci}: {e}"));
                check_numbers(&elems).unwrap_or_else(|e| panic!("case {ci}: {e}"));
                assert!(no_non_finite(&svg), "case {ci}");
                assert!(texts.iter().any(|t| t == "t < & >"));
                assert!(texts.iter().any(|t| t == "f\u{FFFD}oot"));
            }
        }
    }

    #[test]
    fn empty_figure_says_no_data() {
        let svg = Figure::default().to_svg();
        let (_, texts) = check_xml(&svg).unwrap();
        assert!(texts.iter().any(|t| t == "no data"));
    }

    #[test]
    fn markers_are_bounded_and_evenly_thinned() {
        let mut m = Markers::new("lab", Color::Black);
        for i in 0..100_000 {
            m.push(f64::from(i), 1.0);
            assert!(m.kept() <= MAX_MARKERS);
        }
        m.push(f64::NAN, 1.0);
        assert_eq!(m.len(), 100_000);
        assert!(m.kept() > MAX_MARKERS / 2);
        let stride = m.pts[1].0 - m.pts[0].0;
        assert!(m.pts.windows(2).all(|w| w[1].0 - w[0].0 == stride));
    }

    #[test]
    fn legends_wrap_and_many_markers_drop_value_labels() {
        let mut p = Panel::new("flow [m³/h]");
        for i in 0..12 {
            let mut s = Series::new(&format!("a rather long series name {i}"), Color::nth(i));
            s.push(0.0, f64::from(i as u32));
            s.push(1.0, 1.0);
            p.series.push(s);
        }
        let mut m = Markers::new("lab", Color::Black);
        for i in 0..41 {
            m.push(f64::from(i) / 41.0, 123.456);
        }
        p.markers.push(m);
        let (items, rows) = legend_rows(&p, &[], W - 26.0);
        assert_eq!(items.len(), 13);
        assert!(rows.len() >= 3);
        for row in &rows {
            let w: f64 = row.iter().map(|&i| items[i].width()).sum();
            assert!(w <= W || row.len() == 1);
        }
        let svg = Figure {
            panels: vec![p],
            ..Figure::default()
        }
        .to_svg();
        check_xml(&svg).unwrap();
        assert!(!svg.contains(">123.5<"), "41 markers: no value labels");
    }
}
