//! Dependency-free SVG line charts for replay reports.
//!
//! A [`Figure`] is a title, one or more stacked [`Panel`]s that share one x
//! axis and a footer of small text. The x axis is clock time when the
//! figure has a [`Clock`] (x values are then ms since the Unix epoch, ticks
//! fall on round local times: seconds to months as the span needs, the date
//! under the first tick of each day) and a plain number axis otherwise.
//! Each panel has one y axis whose label carries the unit, line [`Series`]
//! (optionally with a shaded ±1σ band, [`Series::with_sigma_band`]),
//! scatter [`Markers`] (lab results: open circles labelled with their
//! value), shaded x-ranges ([`Band`], one fixed fill per [`Shade`]) and
//! horizontal reference lines. Legends sit above each panel, right-aligned,
//! so they never cover data; they list only what the panel draws.
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
//! A series with a ±1σ band keeps two more such series (`y + σ` and
//! `y − σ`, pushed in step with the line, so their buckets and gaps match),
//! three times the bound in all.
//!
//! [`Markers`] keep at most [`MAX_MARKERS`] points; past that they keep every
//! second one (a stride that doubles), which is plenty for lab results.
//!
//! # Palette
//! [`Color`] is the 8-colour Okabe–Ito palette (Okabe & Ito, "Color
//! Universal Design", 2008), which stays distinguishable under the common
//! forms of colour blindness. Yellow comes last: it is weak on white.
//! Shaded windows take their fill from the [`Shade`] table, never from the
//! order they appear in.
//!
//! Element ids (clip paths, panels) start with [`Figure::id`], so several
//! figures can be inlined in one HTML page.

mod axis;
mod legend;
mod markup;
mod series;
mod shade;
mod svg;
#[cfg(test)]
mod tests;

use std::path::Path;

pub use self::series::{Markers, Series};
pub use self::shade::Shade;
use crate::clock::Clock;

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

/// A shaded x-range of one [`Shade`] kind, e.g. a gap in the log; its
/// kind gives its fill and its legend entry.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Band {
    /// Start, in x units.
    pub x0: f64,
    /// End, in x units.
    pub x1: f64,
    /// What it marks.
    pub shade: Shade,
}

impl Band {
    /// A band from `x0` to `x1`.
    pub fn new(x0: f64, x1: f64, shade: Shade) -> Self {
        Band { x0, x1, shade }
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
    /// Shared x axis label, see [`time_axis_label`]; with a clock, empty
    /// means `clock time [<zone>]`.
    pub x_label: String,
    /// With a clock, x values are ms since the Unix epoch and the axis
    /// shows that clock's local time.
    pub clock: Option<Clock>,
    /// Prefix of the SVG's element ids (unique per figure on one page).
    pub id: String,
    /// Panels, top to bottom (1–4 read best; more are drawn smaller).
    pub panels: Vec<Panel>,
    /// Small text under the chart; wrapped, `\n` starts a new line.
    pub footer: String,
}

impl Figure {
    /// The figure as a UTF-8 SVG document.
    pub fn to_svg(&self) -> String {
        svg::render(self)
    }

    /// Writes [`Figure::to_svg`] to `path`.
    pub fn write(&self, path: &Path) -> std::io::Result<()> {
        std::fs::write(path, self.to_svg())
    }
}
