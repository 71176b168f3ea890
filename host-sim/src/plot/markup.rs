//! SVG text: XML escaping, estimated text widths, word wrap, coordinates
//! and `<text>` elements.

use std::fmt::Write as _;

/// Appends `s` XML-escaped; characters XML 1.0 forbids become U+FFFD.
pub(super) fn push_esc(out: &mut String, s: &str) {
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
pub(super) fn text_w(s: &str, fs: f64) -> f64 {
    s.chars().count() as f64 * fs * 0.6
}

/// Greedy word wrap to at most `max_chars` per line; `\n` forces a break.
pub(super) fn wrap(s: &str, max_chars: usize) -> Vec<String> {
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
pub(super) struct N(pub(super) f64);

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

/// A text element; `attrs` are extra attributes (already valid XML).
pub(super) fn text(out: &mut String, x: f64, y: f64, attrs: &str, s: &str) {
    let _ = write!(out, r#"<text x="{}" y="{}"{attrs}>"#, N(x), N(y));
    push_esc(out, s);
    out.push_str("</text>\n");
}

pub(super) const HALO: &str =
    r##" stroke="#ffffff" stroke-width="3" stroke-linejoin="round" paint-order="stroke""##;
