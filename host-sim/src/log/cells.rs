//! Value and quality cells.

use super::error::shown;

/// Why a value cell gave no value.
pub(super) enum Missing {
    Empty,
    NotANumber,
    Infinite,
    Text,
}

/// A value cell (quotes already removed by the splitter). With
/// `decimal_comma`, `12,5` is 12.5 and a cell with a point is not a number
/// (a point there would be a thousands separator, which is not read).
pub(super) fn parse_value(cell: &[u8], decimal_comma: bool) -> Result<f64, Missing> {
    if cell.is_empty() {
        return Err(Missing::Empty);
    }
    let v: f64 = if decimal_comma {
        if cell.contains(&b'.') {
            return Err(Missing::Text);
        }
        std::str::from_utf8(cell)
            .ok()
            .and_then(|s| s.replacen(',', ".", 1).parse().ok())
            .ok_or(Missing::Text)?
    } else {
        std::str::from_utf8(cell)
            .ok()
            .and_then(|s| s.parse().ok())
            .ok_or(Missing::Text)?
    };
    if v.is_nan() {
        Err(Missing::NotANumber)
    } else if v.is_infinite() {
        Err(Missing::Infinite)
    } else {
        Ok(v)
    }
}

pub(super) fn missing_detail(why: &Missing, cell: &[u8]) -> String {
    match why {
        Missing::Empty => "empty".into(),
        Missing::NotANumber => "NaN".into(),
        Missing::Infinite => format!("infinite '{}'", shown(cell)),
        Missing::Text => format!("not a number '{}'", shown(cell)),
    }
}

pub(super) enum Quality {
    Good,
    Uncertain,
    Unrecognised,
    Bad,
}

/// Quality cell: words, or an OPC-style numeric code (common practice:
/// ≥ 192 good, 64–191 uncertain, < 64 bad).
pub(super) fn parse_quality(cell: &[u8]) -> Quality {
    if cell.is_empty() || cell.eq_ignore_ascii_case(b"good") {
        return Quality::Good;
    }
    if cell.eq_ignore_ascii_case(b"uncertain") {
        return Quality::Uncertain;
    }
    if cell.eq_ignore_ascii_case(b"bad") {
        return Quality::Bad;
    }
    match std::str::from_utf8(cell)
        .ok()
        .and_then(|s| s.parse::<f64>().ok())
    {
        Some(q) if q >= 192.0 => Quality::Good,
        Some(q) if q >= 64.0 => Quality::Uncertain,
        Some(q) if q < 64.0 => Quality::Bad,
        _ => Quality::Unrecognised,
    }
}

/// Does the cell look like a number written with a decimal comma (`12,5`,
/// `-0,25`)? Used by detection.
pub(super) fn comma_number(cell: &[u8]) -> bool {
    let digits = cell.strip_prefix(b"-").unwrap_or(cell);
    let Some(i) = digits.iter().position(|&b| b == b',') else {
        return false;
    };
    let (a, b) = (&digits[..i], &digits[i + 1..]);
    !a.is_empty() && !b.is_empty() && a.iter().chain(b).all(u8::is_ascii_digit)
}

/// Does the cell look like a number written with a decimal point (`12.5`)?
pub(super) fn point_number(cell: &[u8]) -> bool {
    let digits = cell.strip_prefix(b"-").unwrap_or(cell);
    let Some(i) = digits.iter().position(|&b| b == b'.') else {
        return false;
    };
    let (a, b) = (&digits[..i], &digits[i + 1..]);
    !b.is_empty() && a.iter().chain(b).all(u8::is_ascii_digit)
}
