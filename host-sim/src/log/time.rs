//! Timestamps of the log: parsing (epoch seconds, ISO 8601 / RFC 3339 with an
//! offset) to integer milliseconds since 1970-01-01T00:00:00Z, and formatting
//! back for reports. Written by hand: the calendar arithmetic is the
//! proleptic Gregorian day count (days-from-civil and its inverse).

/// Earliest accepted time, ms: 0000-01-01T00:00:00Z.
pub const MIN_MS: i64 = -62_167_219_200_000;
/// Latest accepted time, ms: 9999-12-31T23:59:59.999Z.
pub const MAX_MS: i64 = 253_402_300_799_999;

/// Why a timestamp text was refused.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum TimeError {
    /// Not a timestamp in the expected notation.
    Invalid(&'static str),
    /// A well-formed ISO 8601 date-time with no offset (`Z` or `±HH:MM`).
    NoOffset,
}

/// Does the text look like a number (epoch seconds, or microseconds within
/// range)? Used by auto-detection.
pub fn looks_numeric(text: &[u8]) -> bool {
    parse_epoch(text).is_ok() || parse_epoch_unit(text, 1000).is_ok()
}

/// Seconds since the Unix epoch, decimals allowed (`1772344800`,
/// `1772344800.25`, `-5.5`; an exponent such as `1.7723448e9` is accepted
/// too). Rounded to the nearest millisecond.
pub fn parse_epoch(text: &[u8]) -> Result<i64, TimeError> {
    let s = trim(text);
    if s.is_empty() {
        return Err(TimeError::Invalid("empty"));
    }
    if s.iter().any(|&b| b == b'e' || b == b'E') {
        // Rare notation: go through f64 (exact enough for ms at epoch scale).
        let text = std::str::from_utf8(s).map_err(|_| TimeError::Invalid("not a number"))?;
        let x: f64 = text
            .parse()
            .map_err(|_| TimeError::Invalid("not a number"))?;
        let ms = (x * 1000.0).round();
        if !(ms >= MIN_MS as f64 && ms <= MAX_MS as f64) {
            return Err(TimeError::Invalid("out of range (years 0..9999)"));
        }
        return Ok(ms as i64);
    }
    let (negative, digits) = match s.first() {
        Some(b'-') => (true, &s[1..]),
        Some(b'+') => (false, &s[1..]),
        _ => (false, s),
    };
    let (int_part, frac_part) = match digits.iter().position(|&b| b == b'.') {
        Some(i) => (&digits[..i], &digits[i + 1..]),
        None => (digits, &digits[digits.len()..]),
    };
    if int_part.is_empty() && frac_part.is_empty() {
        return Err(TimeError::Invalid("not a number"));
    }
    if !int_part.iter().chain(frac_part).all(u8::is_ascii_digit) {
        return Err(TimeError::Invalid("not a number"));
    }
    let mut secs: i64 = 0;
    for &d in int_part {
        secs = secs
            .checked_mul(10)
            .and_then(|v| v.checked_add(i64::from(d - b'0')))
            .ok_or(TimeError::Invalid("out of range (years 0..9999)"))?;
    }
    let ms = secs
        .checked_mul(1000)
        .and_then(|v| v.checked_add(frac_to_ms(frac_part)))
        .ok_or(TimeError::Invalid("out of range (years 0..9999)"))?;
    let ms = if negative { -ms } else { ms };
    if !(MIN_MS..=MAX_MS).contains(&ms) {
        return Err(TimeError::Invalid("out of range (years 0..9999)"));
    }
    Ok(ms)
}

/// Fraction digits (after the decimal point) to milliseconds, rounded half
/// up on the fourth digit. May return 1000 (`.9996`).
fn frac_to_ms(frac: &[u8]) -> i64 {
    let mut ms = 0i64;
    for i in 0..3 {
        ms = ms * 10 + frac.get(i).map_or(0, |&d| i64::from(d - b'0'));
    }
    if frac.get(3).is_some_and(|&d| d >= b'5') {
        ms += 1;
    }
    ms
}

/// Milliseconds (`scale` 1) or microseconds (`scale` 1000) since the epoch,
/// an integer (a decimal part is accepted and rounded); returned in ms,
/// rounded to the nearest (halves away from zero).
pub fn parse_epoch_unit(text: &[u8], scale: i128) -> Result<i64, TimeError> {
    let s = trim(text);
    let (negative, digits) = match s.first() {
        Some(b'-') => (true, &s[1..]),
        Some(b'+') => (false, &s[1..]),
        _ => (false, s),
    };
    let (int_part, frac_part) = match digits.iter().position(|&b| b == b'.') {
        Some(i) => (&digits[..i], &digits[i + 1..]),
        None => (digits, &digits[digits.len()..]),
    };
    if int_part.is_empty() || !int_part.iter().chain(frac_part).all(u8::is_ascii_digit) {
        return Err(TimeError::Invalid("not an integer"));
    }
    if int_part.len() > 20 {
        return Err(TimeError::Invalid("out of range (years 0..9999)"));
    }
    // The number in units of 1/1000 of its unit (three fraction digits).
    let mut milli: i128 = 0;
    for &d in int_part {
        milli = milli * 10 + i128::from(d - b'0');
    }
    milli *= 1000;
    milli += i128::from(frac_to_ms(frac_part));
    let per_ms = scale * 1000;
    let ms = (milli + per_ms / 2) / per_ms;
    let ms = if negative { -ms } else { ms };
    match i64::try_from(ms) {
        Ok(ms) if (MIN_MS..=MAX_MS).contains(&ms) => Ok(ms),
        _ => Err(TimeError::Invalid("out of range (years 0..9999)")),
    }
}

/// Digits before the decimal point of a numeric timestamp (sign excluded),
/// for guessing its unit.
pub fn integer_digits(text: &[u8]) -> usize {
    let s = trim(text);
    let s = s.strip_prefix(b"-").unwrap_or(s);
    s.iter().take_while(|b| b.is_ascii_digit()).count()
}

/// ISO 8601 / RFC 3339 date-time with an offset:
/// `YYYY-MM-DDTHH:MM[:SS[.fff…]]` followed by `Z` or `±HH:MM` (also `±HHMM`
/// and `±HH`). `T` may be a space or lower case, `Z` lower case; a decimal
/// comma is accepted. Leap seconds (`:60`) are refused.
pub fn parse_iso(text: &[u8]) -> Result<i64, TimeError> {
    match parse_iso_local(text)? {
        (ms, Some(offset_min)) => {
            let ms = ms - i64::from(offset_min) * 60_000;
            if !(MIN_MS..=MAX_MS).contains(&ms) {
                return Err(TimeError::Invalid("out of range (years 0..9999)"));
            }
            Ok(ms)
        }
        (_, None) => Err(TimeError::NoOffset),
    }
}

/// As [`parse_iso`], the offset optional: the wall-clock time in ms counted
/// as if it were UTC, and the offset in minutes when written.
pub fn parse_iso_local(text: &[u8]) -> Result<(i64, Option<i32>), TimeError> {
    let s = trim(text);
    let mut p = Cursor { s, i: 0 };
    let year = p
        .digits(4)
        .ok_or(TimeError::Invalid("expected YYYY-MM-DD"))?;
    p.expect(b'-')
        .ok_or(TimeError::Invalid("expected YYYY-MM-DD"))?;
    let month = p
        .digits(2)
        .ok_or(TimeError::Invalid("expected YYYY-MM-DD"))?;
    p.expect(b'-')
        .ok_or(TimeError::Invalid("expected YYYY-MM-DD"))?;
    let day = p
        .digits(2)
        .ok_or(TimeError::Invalid("expected YYYY-MM-DD"))?;
    if !(1..=12).contains(&month) {
        return Err(TimeError::Invalid("month out of range"));
    }
    if day < 1 || day > days_in_month(year, month) {
        return Err(TimeError::Invalid("day out of range"));
    }
    match p.peek() {
        Some(b'T' | b't' | b' ') => p.i += 1,
        None => return Err(TimeError::Invalid("a date without a time of day")),
        _ => return Err(TimeError::Invalid("expected 'T' between date and time")),
    }
    let hour = p.digits(2).ok_or(TimeError::Invalid("expected HH:MM"))?;
    p.expect(b':').ok_or(TimeError::Invalid("expected HH:MM"))?;
    let minute = p.digits(2).ok_or(TimeError::Invalid("expected HH:MM"))?;
    let mut second = 0;
    let mut frac_ms = 0;
    if p.peek() == Some(b':') {
        p.i += 1;
        second = p
            .digits(2)
            .ok_or(TimeError::Invalid("expected seconds SS"))?;
        if matches!(p.peek(), Some(b'.' | b',')) {
            p.i += 1;
            let start = p.i;
            while p.peek().is_some_and(|b| b.is_ascii_digit()) {
                p.i += 1;
            }
            let frac = s.get(start..p.i).unwrap_or_default();
            if frac.is_empty() {
                return Err(TimeError::Invalid("no digits after the decimal point"));
            }
            frac_ms = frac_to_ms(frac);
        }
    }
    if hour > 23 || minute > 59 || second > 59 {
        return Err(TimeError::Invalid("time of day out of range"));
    }
    let offset_min = match p.peek() {
        None => None,
        Some(b'Z' | b'z') => {
            p.i += 1;
            Some(0)
        }
        Some(sign @ (b'+' | b'-')) => {
            p.i += 1;
            let oh = p.digits(2).ok_or(TimeError::Invalid("bad offset"))?;
            let om = match p.peek() {
                Some(b':') => {
                    p.i += 1;
                    p.digits(2).ok_or(TimeError::Invalid("bad offset"))?
                }
                Some(b'0'..=b'9') => p.digits(2).ok_or(TimeError::Invalid("bad offset"))?,
                _ => 0,
            };
            if oh > 23 || om > 59 {
                return Err(TimeError::Invalid("offset out of range"));
            }
            let m = oh * 60 + om;
            Some(if sign == b'-' { -m } else { m })
        }
        Some(_) => return Err(TimeError::Invalid("unexpected text after the time")),
    };
    if p.i != s.len() {
        return Err(TimeError::Invalid("unexpected text after the offset"));
    }
    let days = days_from_civil(year, month, day);
    let local_s = days * 86_400 + hour * 3600 + minute * 60 + second;
    let offset = offset_min.map(|m| i32::try_from(m).unwrap_or(0));
    Ok((local_s * 1000 + frac_ms, offset))
}

struct Cursor<'a> {
    s: &'a [u8],
    i: usize,
}

impl Cursor<'_> {
    fn peek(&self) -> Option<u8> {
        self.s.get(self.i).copied()
    }
    fn expect(&mut self, b: u8) -> Option<()> {
        (self.peek() == Some(b)).then(|| self.i += 1)
    }
    /// Exactly `n` ASCII digits.
    fn digits(&mut self, n: usize) -> Option<i64> {
        let d = self.s.get(self.i..self.i + n)?;
        if !d.iter().all(u8::is_ascii_digit) {
            return None;
        }
        self.i += n;
        Some(d.iter().fold(0, |a, &b| a * 10 + i64::from(b - b'0')))
    }
}

fn trim(s: &[u8]) -> &[u8] {
    s.trim_ascii()
}

fn is_leap(y: i64) -> bool {
    (y % 4 == 0 && y % 100 != 0) || y % 400 == 0
}

fn days_in_month(y: i64, m: i64) -> i64 {
    match m {
        2 if is_leap(y) => 29,
        2 => 28,
        4 | 6 | 9 | 11 => 30,
        _ => 31,
    }
}

/// Days since 1970-01-01 of a proleptic Gregorian date (era arithmetic:
/// 400-year cycles of 146 097 days, years starting in March).
fn days_from_civil(y: i64, m: i64, d: i64) -> i64 {
    let y = if m <= 2 { y - 1 } else { y };
    let era = y.div_euclid(400);
    let yoe = y - era * 400;
    let mp = (m + 9) % 12;
    let doy = (153 * mp + 2) / 5 + d - 1;
    let doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;
    era * 146_097 + doe - 719_468
}

/// Inverse of [`days_from_civil`]: (year, month, day).
fn civil_from_days(z: i64) -> (i64, i64, i64) {
    let z = z + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z - era * 146_097;
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let d = doy - (153 * mp + 2) / 5 + 1;
    let m = if mp < 10 { mp + 3 } else { mp - 9 };
    let y = yoe + era * 400 + i64::from(m <= 2);
    (y, m, d)
}

/// RFC 3339 in UTC: `2026-03-01T07:12:00Z`, with `.sss` when not a whole
/// second.
pub fn format_ms(ms: i64) -> String {
    let days = ms.div_euclid(86_400_000);
    let rem = ms.rem_euclid(86_400_000);
    let (y, mo, d) = civil_from_days(days);
    let (h, mi, s, f) = (
        rem / 3_600_000,
        rem / 60_000 % 60,
        rem / 1000 % 60,
        rem % 1000,
    );
    if f == 0 {
        format!("{y:04}-{mo:02}-{d:02}T{h:02}:{mi:02}:{s:02}Z")
    } else {
        format!("{y:04}-{mo:02}-{d:02}T{h:02}:{mi:02}:{s:02}.{f:03}Z")
    }
}

/// A duration for people: `850 ms`, `45 s`, `20 min`, `1 h 5 min`, `3 d 2 h`.
pub fn format_duration(ms: u64) -> String {
    const S: u64 = 1000;
    const MIN: u64 = 60 * S;
    const H: u64 = 60 * MIN;
    const D: u64 = 24 * H;
    let two = |big: u64, bu: &str, small: u64, su: &str| {
        if small == 0 {
            format!("{big} {bu}")
        } else {
            format!("{big} {bu} {small} {su}")
        }
    };
    if ms < S {
        format!("{ms} ms")
    } else if ms < MIN {
        if ms % S == 0 {
            format!("{} s", ms / S)
        } else {
            format!("{:.1} s", ms as f64 / 1000.0)
        }
    } else if ms < H {
        two(ms / MIN, "min", ms % MIN / S, "s")
    } else if ms < D {
        two(ms / H, "h", ms % H / MIN, "min")
    } else {
        two(ms / D, "d", ms % D / H, "h")
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // Reference instants: 2026-03-01T05:00:00Z is 1772341200 s after the
    // epoch (20 513 days × 86 400 s + 5 h; 20 513 = days from 1970-01-01 to
    // 2026-03-01, counted as 56 years of 365 days + 14 leap days + 59 days of
    // Jan–Feb 2026).
    const T0: i64 = 1_772_341_200_000;

    #[test]
    fn iso_with_offsets() {
        assert_eq!(parse_iso(b"2026-03-01T05:00:00Z"), Ok(T0));
        assert_eq!(parse_iso(b"2026-03-01T06:00:00+01:00"), Ok(T0));
        assert_eq!(parse_iso(b"2026-03-01T00:30:00-04:30"), Ok(T0));
        assert_eq!(parse_iso(b"2026-03-01t06:00:00+0100"), Ok(T0));
        assert_eq!(parse_iso(b"2026-03-01 06:00+01"), Ok(T0));
        assert_eq!(parse_iso(b" 2026-03-01T05:00:00.250z "), Ok(T0 + 250));
        assert_eq!(parse_iso(b"2026-03-01T05:00:00,5Z"), Ok(T0 + 500));
        assert_eq!(parse_iso(b"2026-03-01T05:00:00.0004Z"), Ok(T0));
        assert_eq!(parse_iso(b"2026-03-01T05:00:00.0005Z"), Ok(T0 + 1));
        assert_eq!(parse_iso(b"2026-03-01T05:00:00.123456789Z"), Ok(T0 + 123));
        assert_eq!(parse_iso(b"1970-01-01T00:00:00Z"), Ok(0));
        // 2024 is a leap year, 2100 is not, 2000 is (Gregorian rule).
        assert!(parse_iso(b"2024-02-29T00:00:00Z").is_ok());
        assert!(parse_iso(b"2100-02-29T00:00:00Z").is_err());
        assert!(parse_iso(b"2000-02-29T00:00:00Z").is_ok());
    }

    #[test]
    fn iso_refusals() {
        assert_eq!(parse_iso(b"2026-03-01T05:00:00"), Err(TimeError::NoOffset));
        assert_eq!(parse_iso(b"2026-03-01T05:00"), Err(TimeError::NoOffset));
        for bad in [
            &b""[..],
            b"2026-03-01",
            b"2026-13-01T05:00:00Z",
            b"2026-04-31T05:00:00Z",
            b"2026-03-01T24:00:00Z",
            b"2026-03-01T23:59:60Z",
            b"2026-03-01T05:00:00+24:00",
            b"2026-03-01T05:00:00Zjunk",
            b"2026-03-01T05:00:00.Z",
            b"26-03-01T05:00:00Z",
            b"\xff\xfe2026",
        ] {
            assert!(
                matches!(parse_iso(bad), Err(TimeError::Invalid(_))),
                "{bad:?}"
            );
        }
    }

    #[test]
    fn epoch_seconds() {
        assert_eq!(parse_epoch(b"1772341200"), Ok(T0));
        assert_eq!(parse_epoch(b"1772341200.25"), Ok(T0 + 250));
        assert_eq!(parse_epoch(b" 1772341200.0006 "), Ok(T0 + 1));
        assert_eq!(parse_epoch(b"-1.5"), Ok(-1500));
        assert_eq!(parse_epoch(b".5"), Ok(500));
        assert_eq!(parse_epoch(b"1.7723412e9"), Ok(T0));
        for bad in [
            &b""[..],
            b"-",
            b".",
            b"12a",
            b"1e999",
            b"99999999999999999999",
            b"2026-03-01",
        ] {
            assert!(parse_epoch(bad).is_err(), "{bad:?}");
        }
    }

    #[test]
    fn epoch_milli_and_microseconds() {
        // T0 in ms and µs is the same digits with 3 and 6 zeros (definition).
        assert_eq!(parse_epoch_unit(b"1772341200000", 1), Ok(T0));
        assert_eq!(parse_epoch_unit(b"1772341200250.6", 1), Ok(T0 + 251));
        assert_eq!(parse_epoch_unit(b"1772341200000000", 1000), Ok(T0));
        assert_eq!(parse_epoch_unit(b"1772341200000499", 1000), Ok(T0));
        assert_eq!(parse_epoch_unit(b"1772341200000500", 1000), Ok(T0 + 1));
        assert_eq!(parse_epoch_unit(b"-1500", 1), Ok(-1500));
        for bad in [
            &b""[..],
            b"12a",
            b"1e12",
            b"2026-03-01",
            b"123456789012345678901",
        ] {
            assert!(parse_epoch_unit(bad, 1).is_err(), "{bad:?}");
        }
        assert_eq!(integer_digits(b" 1772341200000 "), 13);
        assert_eq!(integer_digits(b"-1772341200.5"), 10);
    }

    #[test]
    fn iso_local_keeps_the_wall_clock() {
        // Without offset: the wall clock as if UTC; with one: also returned.
        assert_eq!(parse_iso_local(b"2026-03-01T05:00:00"), Ok((T0, None)));
        assert_eq!(
            parse_iso_local(b"2026-03-01 06:00:00+01:00"),
            Ok((T0 + 3_600_000, Some(60)))
        );
    }

    #[test]
    fn format_round_trips() {
        assert_eq!(format_ms(T0), "2026-03-01T05:00:00Z");
        assert_eq!(format_ms(T0 + 7), "2026-03-01T05:00:00.007Z");
        assert_eq!(format_ms(-1), "1969-12-31T23:59:59.999Z");
        // Instants spread over years 0–9999 round-trip through the day count.
        let mut ms = MIN_MS;
        while ms <= MAX_MS {
            let text = format_ms(ms);
            assert_eq!(parse_iso(text.as_bytes()), Ok(ms), "{text}");
            ms += 86_400_000 * 7 + 3_600_000 + 61_001;
        }
        assert_eq!(format_duration(20 * 60_000), "20 min");
        assert_eq!(format_duration(3_900_000), "1 h 5 min");
        assert_eq!(format_duration(1500), "1.5 s");
    }
}
