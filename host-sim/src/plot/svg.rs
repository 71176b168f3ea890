//! SVG rendering of a [`Figure`]: the layout (worked out first, from the
//! whole figure), then the document top to bottom: heading, each panel
//! (header with legend, clipped plot, labels, y ticks), the shared x axis
//! and the footer.

use std::fmt::Write as _;

use super::axis::{clock_axis, clock_label, nice_axis, value_label, x_range, y_range, Axis};
use super::legend::{draw_swatch, legend_rows, Item};
use super::markup::{push_esc, text, text_w, wrap, HALO, N};
use super::series::{Pt, Series};
use super::{Figure, Panel, Shade};

pub(super) const W: f64 = 960.0;
pub(super) const PAD: f64 = 14.0;
pub(super) const TITLE_FS: f64 = 17.0;
pub(super) const LABEL_FS: f64 = 13.0;
pub(super) const LEGEND_FS: f64 = 12.0;
pub(super) const TICK_FS: f64 = 11.0;
pub(super) const SMALL_FS: f64 = 11.0;
pub(super) const ROW_H: f64 = 18.0;
/// How far past the frame drawing may reach (marker radius + stroke).
pub(super) const CLIP_MARGIN: f64 = 6.0;
pub(super) const SWATCH_W: f64 = 22.0;
/// y limits: round out to a whole step if that costs at most 0.6 step,
/// else pad 3 % of the span.
pub(super) const Y_SLACK: f64 = 0.6;
pub(super) const Y_PAD: f64 = 0.03;
/// x (time) limits: the data's own ends unless a whole step is within
/// 0.1 step.
pub(super) const X_SLACK: f64 = 0.1;
/// Most markers in a panel that still get value labels.
pub(super) const MAX_VALUE_LABELS: usize = 40;
/// Height of the date line under a clock axis' tick labels.
pub(super) const DATE_LINE: f64 = 14.0;

/// Opacity of a series' ±1σ band (in the series' colour).
pub(super) const SIGMA_OPACITY: &str = "0.18";

pub(super) fn plot_height(panels: usize) -> f64 {
    match panels {
        0 | 1 => 380.0,
        2 => 240.0,
        3 => 185.0,
        4 => 160.0,
        _ => 130.0,
    }
}

/// Where everything goes, worked out from the whole figure before any of it
/// is drawn.
struct Layout<'a> {
    /// Plot height of each panel.
    ph: f64,
    yaxes: Vec<Axis>,
    left: f64,
    right: f64,
    /// Plot width.
    pw: f64,
    xaxis: Axis,
    /// The x axis label.
    x_label: String,
    /// Legend entries and rows of each panel.
    legends: Vec<(Vec<Item<'a>>, Vec<Vec<usize>>)>,
    footer_lines: Vec<String>,
    title_h: f64,
    height: f64,
}

impl<'a> Layout<'a> {
    fn new(fig: &Figure, panels: &'a [Panel]) -> Self {
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
        let (xaxis, x_label) = match &fig.clock {
            Some(c) => {
                let a = clock_axis(x_range(panels), ((pw / 90.0) as usize).clamp(3, 12), c);
                let label = if fig.x_label.is_empty() {
                    clock_label(c, a.lo)
                } else {
                    fig.x_label.clone()
                };
                (a, label)
            }
            None => (
                nice_axis(
                    x_range(panels),
                    ((pw / 100.0) as usize).clamp(3, 12),
                    X_SLACK,
                    0.0,
                ),
                fig.x_label.clone(),
            ),
        };
        let legends: Vec<_> = panels.iter().map(|p| legend_rows(p, right)).collect();

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
        if !xaxis.dates.is_empty() {
            height += DATE_LINE;
        }
        let height = height.round();
        Layout {
            ph,
            yaxes,
            left,
            right,
            pw,
            xaxis,
            x_label,
            legends,
            footer_lines,
            title_h,
            height,
        }
    }
}

/// One panel's plot area and its axes: data → pixel coordinates.
struct Area<'a> {
    left: f64,
    right: f64,
    top: f64,
    bottom: f64,
    pw: f64,
    ph: f64,
    xaxis: &'a Axis,
    yaxis: &'a Axis,
}

impl Area<'_> {
    fn x(&self, v: f64) -> f64 {
        self.xaxis.map(v, self.left, self.right)
    }

    fn y(&self, v: f64) -> f64 {
        self.yaxis.map(v, self.bottom, self.top)
    }
}

/// The figure as an SVG document.
pub(super) fn render(fig: &Figure) -> String {
    let fallback = [Panel::default()];
    let panels: &[Panel] = if fig.panels.is_empty() {
        &fallback
    } else {
        &fig.panels
    };
    let layout = Layout::new(fig, panels);

    let mut out = String::with_capacity(64 * 1024);
    draw_head(&mut out, &fig.title, layout.height);
    let mut cursor = layout.title_h;
    let mut bottom = cursor;
    for (pi, (panel, yaxis)) in panels.iter().zip(&layout.yaxes).enumerate() {
        bottom = draw_panel(&mut out, &layout, (&fig.id, pi), panel, yaxis, cursor);
        cursor = bottom + 12.0;
    }
    draw_x_axis(&mut out, &layout, bottom);
    let foot_attrs = format!(r##" font-size="{SMALL_FS}" fill="#555555""##);
    let foot_top = if layout.xaxis.dates.is_empty() {
        bottom + 60.0
    } else {
        bottom + 60.0 + DATE_LINE
    };
    for (i, line) in layout.footer_lines.iter().enumerate() {
        text(&mut out, PAD, foot_top + i as f64 * 14.0, &foot_attrs, line);
    }
    out.push_str("</svg>\n");
    out
}

/// The XML prologue, the `<svg>` element, its `<title>`, the white
/// background and the heading.
fn draw_head(out: &mut String, title: &str, height: f64) {
    out.push_str("<?xml version=\"1.0\" encoding=\"UTF-8\"?>\n");
    let _ = writeln!(
        out,
        r#"<svg xmlns="http://www.w3.org/2000/svg" width="{w}" height="{h}" viewBox="0 0 {w} {h}" font-family="DejaVu Sans, Verdana, Arial, sans-serif">"#,
        w = N(W),
        h = N(height)
    );
    out.push_str("<title>");
    push_esc(out, title);
    out.push_str("</title>\n");
    let _ = writeln!(
        out,
        r##"<rect x="0" y="0" width="{}" height="{}" fill="#ffffff"/>"##,
        N(W),
        N(height)
    );
    if !title.trim().is_empty() {
        let attrs = format!(r##" font-size="{TITLE_FS}" font-weight="bold" fill="#111111""##);
        text(out, PAD, 27.0, &attrs, title);
    }
}

/// Panel `pi` of the figure with id prefix `id` from `cursor` down: its
/// header, plot, labels and y ticks. Returns the bottom of its plot area.
fn draw_panel(
    out: &mut String,
    layout: &Layout<'_>,
    (id, pi): (&str, usize),
    panel: &Panel,
    yaxis: &Axis,
    cursor: f64,
) -> f64 {
    let (items, rows) = &layout.legends[pi];
    let top = cursor + rows.len() as f64 * ROW_H + 6.0;
    let area = Area {
        left: layout.left,
        right: layout.right,
        top,
        bottom: top + layout.ph,
        pw: layout.pw,
        ph: layout.ph,
        xaxis: &layout.xaxis,
        yaxis,
    };
    out.push_str("<g id=\"");
    push_esc(out, id);
    let _ = writeln!(out, r#"panel{pi}">"#);

    // Header: y label left, legend rows right-aligned.
    let label_attrs = format!(r##" font-size="{LABEL_FS}" font-weight="bold" fill="#222222""##);
    text(out, PAD, cursor + 13.0, &label_attrs, &panel.y_label);
    for (r, row) in rows.iter().enumerate() {
        let total: f64 = row.iter().map(|&i| items[i].width()).sum::<f64>() - 18.0;
        let mut x = area.right - total;
        let base = cursor + 13.0 + r as f64 * ROW_H;
        for &i in row {
            draw_swatch(out, &items[i].swatch, x, base - 4.0);
            let attrs = format!(r##" font-size="{LEGEND_FS}" fill="#222222""##);
            text(out, x + SWATCH_W + 6.0, base, &attrs, items[i].text);
            x += items[i].width();
        }
    }

    draw_plot(out, &area, (id, pi), panel);
    let visible: usize = panel.markers.iter().map(|m| m.pts.len()).sum();
    draw_labels(out, &area, panel, visible <= MAX_VALUE_LABELS);

    let empty = panel.series.iter().all(|s| s.kept() == 0)
        && visible == 0
        && !panel.hlines.iter().any(|(v, _)| v.is_finite());
    if empty {
        let attrs = format!(r##" font-size="{LABEL_FS}" fill="#888888" text-anchor="middle""##);
        text(
            out,
            area.left + area.pw / 2.0,
            area.top + area.ph / 2.0,
            &attrs,
            "no data",
        );
    }
    draw_y_ticks(out, &area);
    out.push_str("</g>\n");
    area.bottom
}

/// Inside the panel's clip: bands, grid, frame, reference lines, lines and
/// markers, in that order (later ones on top).
fn draw_plot(out: &mut String, area: &Area<'_>, (id, pi): (&str, usize), panel: &Panel) {
    let (left, right, top, bottom) = (area.left, area.right, area.top, area.bottom);
    // Every sample lies inside the axis limits, so the clip is only a
    // safety net; it is a little larger than the frame so that a line
    // or marker on a limit is drawn whole.
    let mut clip = String::new();
    push_esc(&mut clip, id);
    let _ = write!(clip, "clip{pi}");
    let _ = writeln!(
        out,
        r#"<clipPath id="{clip}"><rect x="{}" y="{}" width="{}" height="{}"/></clipPath>"#,
        N(left - CLIP_MARGIN),
        N(top - CLIP_MARGIN),
        N(area.pw + 2.0 * CLIP_MARGIN),
        N(area.ph + 2.0 * CLIP_MARGIN)
    );
    let _ = writeln!(out, r#"<g clip-path="url(#{clip})">"#);

    // Bands under everything, each kind in its fixed fill.
    for b in &panel.bands {
        if !(b.x0.is_finite() && b.x1.is_finite()) {
            continue;
        }
        let (a, c) = (area.x(b.x0.min(b.x1)), area.x(b.x0.max(b.x1)));
        let w = (c - a).max(1.5);
        let _ = writeln!(
            out,
            r#"<rect x="{}" y="{}" width="{}" height="{}" fill="{}" fill-opacity="{}"/>"#,
            N(a),
            N(top),
            N(w),
            N(area.ph),
            b.shade.fill(),
            Shade::OPACITY
        );
    }

    // Grid.
    out.push_str(r##"<g stroke="#e2e2e2" stroke-width="1">"##);
    out.push('\n');
    for &t in &area.xaxis.ticks {
        let x = area.x(t);
        let _ = writeln!(
            out,
            r#"<line x1="{}" y1="{}" x2="{}" y2="{}"/>"#,
            N(x),
            N(top),
            N(x),
            N(bottom)
        );
    }
    for &t in &area.yaxis.ticks {
        let y = area.y(t);
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
        N(area.pw),
        N(area.ph)
    );

    // Reference lines.
    for (v, _) in &panel.hlines {
        if v.is_finite() {
            let y = area.y(*v);
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

    // ±1σ bands, then the lines over them.
    for s in &panel.series {
        draw_sigma(out, s, &|v| area.x(v), &|v| area.y(v));
    }
    for s in &panel.series {
        draw_series(out, s, &|v| area.x(v), &|v| area.y(v));
    }

    // Markers.
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
                N(area.x(x)),
                N(area.y(y))
            );
        }
        out.push_str("</g>\n");
    }
    out.push_str("</g>\n");
}

/// Reference-line labels and (if `values`) the markers' value labels,
/// outside the clip (kept inside the frame by placement), avoiding each
/// other.
fn draw_labels(out: &mut String, area: &Area<'_>, panel: &Panel, values: bool) {
    let (left, right, top, bottom) = (area.left, area.right, area.top, area.bottom);
    let mut placed: Vec<[f64; 4]> = Vec::new();
    for (v, label) in &panel.hlines {
        if !v.is_finite() || label.is_empty() {
            continue;
        }
        let y = area.y(*v);
        let base = if y - 4.0 - TICK_FS < top {
            y + TICK_FS + 3.0
        } else {
            y - 4.0
        };
        let w = text_w(label, TICK_FS);
        placed.push([right - 4.0 - w, base - TICK_FS, right - 4.0, base + 2.0]);
        let attrs = format!(r##" font-size="{TICK_FS}" fill="#333333" text-anchor="end"{HALO}"##);
        text(out, right - 4.0, base, &attrs, label);
    }
    if !values {
        return;
    }
    for m in &panel.markers {
        for &(x, y) in &m.pts {
            let label = value_label(y);
            let (cx, cy) = (area.x(x), area.y(y));
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
                let attrs = format!(r##" font-size="{TICK_FS}" fill="{}"{HALO}"##, m.color.hex());
                text(out, x0, bx[3] - 2.0, &attrs, &label);
            }
        }
    }
}

/// The y tick labels, thinned so that they do not overlap.
fn draw_y_ticks(out: &mut String, area: &Area<'_>) {
    let yaxis = area.yaxis;
    let spacing = if yaxis.ticks.len() > 1 {
        (area.y(yaxis.ticks[0]) - area.y(yaxis.ticks[1])).abs()
    } else {
        area.ph
    };
    let every = ((TICK_FS + 3.0) / spacing.max(1e-9)).ceil().clamp(1.0, 1e6) as usize;
    let tick_attrs = format!(r##" font-size="{TICK_FS}" fill="#444444" text-anchor="end""##);
    for (i, (&t, l)) in yaxis.ticks.iter().zip(&yaxis.labels).enumerate() {
        if i % every == 0 {
            text(out, area.left - 6.0, area.y(t) + 4.0, &tick_attrs, l);
        }
    }
}

/// The shared x axis under the last panel (whose plot ends at `bottom`):
/// tick marks, thinned labels and the axis label.
fn draw_x_axis(out: &mut String, layout: &Layout<'_>, bottom: f64) {
    let (xaxis, left, right, pw) = (&layout.xaxis, layout.left, layout.right, layout.pw);
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
    let mut last_date: Option<&str> = None;
    for (i, (&t, l)) in xaxis.ticks.iter().zip(&xaxis.labels).enumerate() {
        if i % every == 0 {
            // The date under the first drawn tick and wherever it changes.
            if let Some(d) = xaxis.dates.get(i) {
                if last_date != Some(d.as_str()) {
                    let x = xaxis.map(t, left, right);
                    text(out, x, bottom + 17.0 + DATE_LINE, &xtick_attrs, d);
                    last_date = Some(d);
                }
            }
            let x = xaxis.map(t, left, right);
            let _ = writeln!(
                out,
                r##"<line x1="{}" y1="{}" x2="{}" y2="{}" stroke="#999999"/>"##,
                N(x),
                N(bottom),
                N(x),
                N(bottom + 4.0)
            );
            text(out, x, bottom + 17.0, &xtick_attrs, l);
        }
    }
    let xl_attrs = format!(r##" font-size="{LABEL_FS}" fill="#222222" text-anchor="middle""##);
    let y = if xaxis.dates.is_empty() {
        bottom + 37.0
    } else {
        bottom + 37.0 + DATE_LINE
    };
    text(out, left + pw / 2.0, y, &xl_attrs, &layout.x_label);
}

/// Whether two boxes `[x0, y0, x1, y1]` overlap.
fn overlaps(a: &[f64; 4], b: &[f64; 4]) -> bool {
    a[0] < b[2] && b[0] < a[2] && a[1] < b[3] && b[1] < a[3]
}

/// The ±1σ band of `s`: one polygon per unbroken run, the upper edge left
/// to right and the lower edge back, in the series' colour.
fn draw_sigma(out: &mut String, s: &Series, xm: &dyn Fn(f64) -> f64, ym: &dyn Fn(f64) -> f64) {
    let runs = s.sigma_runs();
    if runs.is_empty() {
        return;
    }
    let _ = writeln!(
        out,
        r#"<g fill="{}" fill-opacity="{SIGMA_OPACITY}" stroke="none">"#,
        s.color.hex()
    );
    let pt = |out: &mut String, p: &Pt| {
        let _ = write!(out, "{},{} ", N(xm(p.x)), N(ym(p.y)));
    };
    for (hi, lo) in runs {
        if hi.len() < 2 || lo.len() < 2 {
            continue;
        }
        out.push_str(r#"<polygon points=""#);
        for p in &hi {
            pt(out, p);
        }
        for p in lo.iter().rev() {
            pt(out, p);
        }
        out.pop();
        out.push_str("\"/>\n");
    }
    out.push_str("</g>\n");
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
