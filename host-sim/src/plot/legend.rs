//! Legends: the entries of a panel (lines, markers, bands), laid out in
//! right-aligned rows above it, and their swatches. Only what the panel
//! draws is listed: a line or a set of markers with no point kept has no
//! entry, and shaded kinds come once each, in the [`Shade`] table's order.

use std::fmt::Write as _;

use super::markup::{text_w, N};
use super::svg::{LABEL_FS, LEGEND_FS, PAD, SIGMA_OPACITY, SWATCH_W};
use super::Panel;
use super::{Color, Shade};

pub(super) enum Swatch {
    Line(Color),
    /// A line over its ±1σ band.
    LineBand(Color),
    Dot(Color),
    Band(Shade),
}

pub(super) struct Item<'a> {
    pub(super) swatch: Swatch,
    pub(super) text: &'a str,
}

impl Item<'_> {
    pub(super) fn width(&self) -> f64 {
        SWATCH_W + 6.0 + text_w(self.text, LEGEND_FS) + 18.0
    }
}

/// Legend items of a panel and their rows (right-aligned). Row 0 shares the
/// line with the y label, so it has less room.
pub(super) fn legend_rows(panel: &Panel, right: f64) -> (Vec<Item<'_>>, Vec<Vec<usize>>) {
    let mut items = Vec::new();
    for s in panel.series.iter().filter(|s| s.kept() > 0) {
        items.push(match s.sigma_kept() {
            0 => Item {
                swatch: Swatch::Line(s.color),
                text: &s.name,
            },
            _ => Item {
                swatch: Swatch::LineBand(s.color),
                text: &s.band_name,
            },
        });
    }
    for m in panel.markers.iter().filter(|m| m.kept() > 0) {
        items.push(Item {
            swatch: Swatch::Dot(m.color),
            text: &m.name,
        });
    }
    for shade in Shade::ALL {
        if panel.bands.iter().any(|b| b.shade == shade) {
            items.push(Item {
                swatch: Swatch::Band(shade),
                text: shade.label(),
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

/// The swatch of a legend entry, its vertical middle at `ymid`.
pub(super) fn draw_swatch(out: &mut String, sw: &Swatch, x: f64, ymid: f64) {
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
        Swatch::LineBand(c) => {
            let _ = writeln!(
                out,
                r#"<rect x="{}" y="{}" width="{}" height="10" fill="{}" fill-opacity="{SIGMA_OPACITY}"/>"#,
                N(x),
                N(ymid - 5.0),
                N(SWATCH_W),
                c.hex()
            );
            draw_swatch(out, &Swatch::Line(c), x, ymid);
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
        Swatch::Band(shade) => {
            let _ = writeln!(
                out,
                r##"<rect x="{}" y="{}" width="{}" height="10" fill="{}" fill-opacity="{}" stroke="#999999" stroke-width="0.5"/>"##,
                N(x + 2.0),
                N(ymid - 5.0),
                N(SWATCH_W - 4.0),
                shade.fill(),
                Shade::OPACITY
            );
        }
    }
}
