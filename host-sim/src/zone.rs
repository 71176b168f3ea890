//! The time zone of a log: reading its local (naive) timestamps and
//! writing report times in it.
//!
//! Zones are IANA time-zone names (`Europe/Vienna`, `America/Chicago`,
//! `UTC`), with their rules from the `chrono-tz` crate's copy of the IANA
//! database. Internally every time is `i64` milliseconds since the Unix
//! epoch (UTC); a zone only converts at the edges.

use chrono::{LocalResult, NaiveDateTime, Offset, TimeZone};
use chrono_tz::Tz;

/// A time zone for reading naive timestamps and writing report times.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Zone {
    /// Coordinated Universal Time; report times end in `Z`.
    Utc,
    /// An IANA zone.
    Named(Tz),
}

/// Where a local date-time falls in a zone.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Local {
    /// One instant, ms since the epoch.
    Single(i64),
    /// In a repeated hour (clocks set back): the first occurrence (earlier
    /// instant, the offset before the change) and the second.
    Repeated {
        /// First occurrence, ms since the epoch.
        earlier: i64,
        /// Second occurrence, ms since the epoch.
        later: i64,
    },
    /// In a skipped hour (clocks set forward): no such local time.
    Skipped,
}

impl Zone {
    /// A zone by IANA name (exact spelling; `UTC` and `Etc/UTC` give
    /// [`Zone::Utc`]). The error suggests close names.
    pub fn from_name(name: &str) -> Result<Zone, String> {
        let name = name.trim();
        if name == "UTC" || name == "Etc/UTC" || name == "Z" {
            return Ok(Zone::Utc);
        }
        match name.parse::<Tz>() {
            Ok(tz) => Ok(Zone::Named(tz)),
            Err(_) => {
                let near = close_names(name);
                let mut msg = format!("unknown IANA time-zone name \"{name}\"");
                if near.is_empty() {
                    msg.push_str(" (names are Area/City, e.g. \"Europe/Vienna\" or \"UTC\")");
                } else {
                    msg.push_str(&format!(
                        " (did you mean {}?)",
                        near.iter()
                            .map(|n| format!("\"{n}\""))
                            .collect::<Vec<_>>()
                            .join(" or ")
                    ));
                }
                Err(msg)
            }
        }
    }

    /// The zone's name: `UTC` or the IANA name.
    pub fn label(&self) -> &str {
        match self {
            Zone::Utc => "UTC",
            Zone::Named(tz) => tz.name(),
        }
    }

    /// Offset from UTC at the instant `ms_utc`, seconds (east positive).
    pub fn offset_seconds(&self, ms_utc: i64) -> i32 {
        match self {
            Zone::Utc => 0,
            Zone::Named(tz) => chrono::DateTime::from_timestamp_millis(ms_utc)
                .map(|d| {
                    tz.offset_from_utc_datetime(&d.naive_utc())
                        .fix()
                        .local_minus_utc()
                })
                .unwrap_or(0),
        }
    }

    /// ISO 8601 with milliseconds and the offset:
    /// `2026-03-01T06:00:00.000+01:00`; in UTC exactly [`crate::text::iso`]
    /// (`…Z`).
    pub fn iso(&self, ms_utc: i64) -> String {
        match self {
            Zone::Utc => crate::text::iso(ms_utc),
            Zone::Named(tz) => chrono::DateTime::from_timestamp_millis(ms_utc)
                .map(|d| {
                    d.with_timezone(tz)
                        .format("%Y-%m-%dT%H:%M:%S%.3f%:z")
                        .to_string()
                })
                .unwrap_or_else(|| format!("{ms_utc} ms")),
        }
    }

    /// The instant(s) of a local date-time given as milliseconds of the
    /// wall clock counted as if it were UTC (`local_ms`).
    pub fn resolve(&self, local_ms: i64) -> Local {
        let Zone::Named(tz) = self else {
            return Local::Single(local_ms);
        };
        let Some(naive) = chrono::DateTime::from_timestamp_millis(local_ms).map(|d| d.naive_utc())
        else {
            return Local::Skipped;
        };
        resolve_naive(tz, &naive)
    }
}

fn resolve_naive(tz: &Tz, naive: &NaiveDateTime) -> Local {
    match tz.from_local_datetime(naive) {
        LocalResult::Single(d) => Local::Single(d.timestamp_millis()),
        LocalResult::Ambiguous(a, b) => {
            let (a, b) = (a.timestamp_millis(), b.timestamp_millis());
            Local::Repeated {
                earlier: a.min(b),
                later: a.max(b),
            }
        }
        LocalResult::None => Local::Skipped,
    }
}

/// Up to three IANA names close to `name`: the same ignoring case, or
/// ending in the same city, or within a small edit distance.
fn close_names(name: &str) -> Vec<&'static str> {
    let lower = name.to_ascii_lowercase().replace(' ', "_");
    let city = lower.rsplit('/').next().unwrap_or(&lower).to_string();
    let mut scored: Vec<(usize, &'static str)> = chrono_tz::TZ_VARIANTS
        .iter()
        .filter_map(|tz| {
            let n = tz.name();
            let l = n.to_ascii_lowercase();
            let score = if l == lower {
                0
            } else if l.rsplit('/').next() == Some(city.as_str()) {
                1
            } else {
                let d = edit_distance(&l, &lower);
                if d <= 3 {
                    d + 1
                } else {
                    return None;
                }
            };
            Some((score, n))
        })
        .collect();
    scored.sort();
    scored.into_iter().take(3).map(|(_, n)| n).collect()
}

/// Levenshtein distance, bytes.
fn edit_distance(a: &str, b: &str) -> usize {
    let (a, b) = (a.as_bytes(), b.as_bytes());
    let mut row: Vec<usize> = (0..=b.len()).collect();
    for (i, &ca) in a.iter().enumerate() {
        let mut diag = row[0];
        row[0] = i + 1;
        for (j, &cb) in b.iter().enumerate() {
            let up = row[j + 1];
            row[j + 1] = (diag + usize::from(ca != cb)).min(up + 1).min(row[j] + 1);
            diag = up;
        }
    }
    row[b.len()]
}

#[cfg(test)]
mod tests {
    use super::*;

    // 2026-03-01T05:00:00Z = 1 772 341 200 s (hand count, see log::time).
    const T0: i64 = 1_772_341_200_000;
    // EU rule (common practice, Directive 2000/84/EC): summer time from
    // 01:00 UTC on the last Sunday of March (2026-03-29) to 01:00 UTC on the
    // last Sunday of October (2026-10-25). 2026-03-29T01:00Z = T0 + 28 d
    // − 4 h; 2026-10-25T01:00Z = T0 + 238 d − 4 h (Mar 1 → Oct 25: 30 + 30
    // + 31 + 30 + 31 + 31 + 30 + 31 + 24 = 238 days).
    const SPRING: i64 = T0 + 28 * 86_400_000 - 4 * 3_600_000;
    const AUTUMN: i64 = T0 + 238 * 86_400_000 - 4 * 3_600_000;

    fn vienna() -> Zone {
        Zone::from_name("Europe/Vienna").unwrap()
    }

    #[test]
    fn iso_in_utc_is_text_iso() {
        // Identical to the UTC text of the reports (by construction, checked).
        assert_eq!(Zone::Utc.iso(T0 + 250), "2026-03-01T05:00:00.250Z");
        assert_eq!(Zone::Utc.iso(T0), crate::text::iso(T0));
        assert_eq!(Zone::Utc.label(), "UTC");
        assert_eq!(Zone::from_name("UTC"), Ok(Zone::Utc));
    }

    #[test]
    fn vienna_offsets_follow_the_eu_rule() {
        let z = vienna();
        assert_eq!(z.label(), "Europe/Vienna");
        // CET = UTC+1 in winter (common practice).
        assert_eq!(z.iso(T0), "2026-03-01T06:00:00.000+01:00");
        assert_eq!(z.offset_seconds(T0), 3600);
        // One ms before the spring change still CET, at it CEST (UTC+2).
        assert_eq!(z.offset_seconds(SPRING - 1), 3600);
        assert_eq!(z.offset_seconds(SPRING), 7200);
        assert_eq!(z.iso(SPRING), "2026-03-29T03:00:00.000+02:00");
        assert_eq!(z.offset_seconds(AUTUMN - 1), 7200);
        assert_eq!(z.offset_seconds(AUTUMN), 3600);
    }

    #[test]
    fn local_times_resolve_gap_and_repeat() {
        let z = vienna();
        let h = 3_600_000;
        // Local 2026-03-29 02:30 does not exist (02:00 → 03:00 CEST).
        // Wall clock as if UTC: local midnight of 2026-03-29 is SPRING − 1 h.
        let local_0230 = SPRING + 90 * 60_000;
        assert_eq!(z.resolve(local_0230), Local::Skipped);
        // Local 01:30 (CET) is 00:30Z; local 03:30 (CEST) is 01:30Z.
        assert_eq!(
            z.resolve(SPRING + h - 30 * 60_000),
            Local::Single(SPRING - 30 * 60_000)
        );
        assert_eq!(
            z.resolve(SPRING + 150 * 60_000),
            Local::Single(SPRING + 30 * 60_000)
        );
        // Local 2026-10-25 02:30 happens at 00:30Z (CEST) and 01:30Z (CET).
        let local = AUTUMN + h + 30 * 60_000; // midnight is AUTUMN − 1 h
        assert_eq!(
            z.resolve(local),
            Local::Repeated {
                earlier: AUTUMN - 30 * 60_000,
                later: AUTUMN + 30 * 60_000
            }
        );
        assert_eq!(Zone::Utc.resolve(local), Local::Single(local));
    }

    #[test]
    fn unknown_names_suggest_close_ones() {
        let e = Zone::from_name("europe/vienna").unwrap_err();
        assert!(e.contains("\"Europe/Vienna\""), "{e}");
        let e = Zone::from_name("Europe/Viena").unwrap_err();
        assert!(e.contains("\"Europe/Vienna\""), "{e}");
        let e = Zone::from_name("Vienna").unwrap_err();
        assert!(e.contains("\"Europe/Vienna\""), "{e}");
        let e = Zone::from_name("xyzzy-nowhere-at-all").unwrap_err();
        assert!(e.contains("Area/City"), "{e}");
    }
}
