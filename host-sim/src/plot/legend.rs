//! Legends: the entries of a panel (lines, markers, bands), laid out in
//! right-aligned rows above it, and their swatches.

use std::fmt::Write as _;

use super::markup::{text_w, N};
use super::svg::{BAND_FILLS, BAND_OPACITY, LABEL_FS, LEGEND_FS, PAD, SWATCH_W};
use super::Color;
use super::Panel;

pub(super) enum Swatch {
    Line(Color),
    Dot(Color),
    Band(usize),
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
pub(super) fn legend_rows<'a>(
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
