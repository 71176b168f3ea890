//! The clock of a report: a zone's label and its offset from UTC at each
//! instant, so that plots, tables and the time column of `estimates.csv`
//! show the plant's local time. Instants stay ms since the Unix epoch (UTC)
//! everywhere else; only these outputs turn them into clock time.
//!
//! The offset is a function of the instant because it can change during a
//! log (daylight saving). A replay's clock is its report zone
//! (`[log] timezone`, or UTC: [`crate::zone::Zone`]); [`Clock::utc`] where
//! there is none.

use std::fmt;
use std::sync::Arc;

use chrono::{DateTime, NaiveDateTime, Timelike};

/// Seconds east of UTC at an instant given in ms since the epoch.
pub type OffsetFn = dyn Fn(i64) -> i32 + Send + Sync;

/// A zone label and its offset function. Cheap to clone.
#[derive(Clone)]
pub struct Clock {
    zone: String,
    offset: Arc<OffsetFn>,
}

impl fmt::Debug for Clock {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.debug_struct("Clock").field("zone", &self.zone).finish()
    }
}

impl Default for Clock {
    fn default() -> Self {
        Clock::utc()
    }
}

impl From<crate::zone::Zone> for Clock {
    /// The clock of a log's zone (its report times, [`crate::zone::Zone`]).
    fn from(zone: crate::zone::Zone) -> Self {
        Clock::new(zone.label(), move |ms| zone.offset_seconds(ms))
    }
}

impl Clock {
    /// Coordinated Universal Time: offset 0 at every instant.
    pub fn utc() -> Self {
        Clock::new("UTC", |_| 0)
    }

    /// A zone named `zone` (e.g. `Europe/Vienna`) whose offset from UTC at
    /// an instant (ms since the epoch) is `offset_seconds(ms)` seconds east.
    pub fn new(zone: &str, offset_seconds: impl Fn(i64) -> i32 + Send + Sync + 'static) -> Self {
        Clock {
            zone: zone.to_owned(),
            offset: Arc::new(offset_seconds),
        }
    }

    /// The zone's label, e.g. `UTC`.
    pub fn zone(&self) -> &str {
        &self.zone
    }

    /// Seconds east of UTC at `ms_utc`.
    pub fn offset_seconds(&self, ms_utc: i64) -> i32 {
        (self.offset)(ms_utc)
    }

    /// The local wall-clock time at `ms_utc` (None past chrono's range).
    pub fn local(&self, ms_utc: i64) -> Option<NaiveDateTime> {
        let off = i64::from(self.offset_seconds(ms_utc)) * 1000;
        DateTime::from_timestamp_millis(ms_utc.checked_add(off)?).map(|d| d.naive_utc())
    }

    /// The instant (ms UTC) whose local time is `local_ms` (local time
    /// written as ms since 1970-01-01T00:00 local). Around a change of
    /// offset a local time may not exist or exist twice; the answer is then
    /// one of the instants near it.
    pub fn instant_of_local(&self, local_ms: i64) -> i64 {
        let first = local_ms - i64::from(self.offset_seconds(local_ms)) * 1000;
        local_ms - i64::from(self.offset_seconds(first)) * 1000
    }

    /// ISO 8601 with milliseconds and the offset:
    /// `2026-03-01T06:00:00.000+01:00`; `Z` when the offset is zero (as
    /// [`crate::text::iso`] writes UTC). Out of range: `<ms> ms`.
    pub fn iso(&self, ms_utc: i64) -> String {
        let Some(d) = self.local(ms_utc) else {
            return format!("{ms_utc} ms");
        };
        let mut s = d.format("%Y-%m-%dT%H:%M:%S%.3f").to_string();
        s.push_str(&offset_text(self.offset_seconds(ms_utc)));
        s
    }

    /// Minutes-resolution text for tables: `2026-03-01 06:00:05` (seconds
    /// shown), no zone (the table's heading names it).
    pub fn short(&self, ms_utc: i64) -> String {
        match self.local(ms_utc) {
            Some(d) if d.nanosecond() == 0 => d.format("%Y-%m-%d %H:%M:%S").to_string(),
            Some(d) => d.format("%Y-%m-%d %H:%M:%S%.3f").to_string(),
            None => format!("{ms_utc} ms"),
        }
    }

    /// The zone with its offset at `ms_utc`, e.g. `UTC` or
    /// `Europe/Vienna, UTC+01:00`.
    pub fn describe(&self, ms_utc: i64) -> String {
        let off = self.offset_seconds(ms_utc);
        if self.zone == "UTC" && off == 0 {
            "UTC".to_owned()
        } else {
            let o = offset_text(off);
            let o = if o == "Z" { "+00:00".to_owned() } else { o };
            format!("{}, UTC{o}", self.zone)
        }
    }

    /// Reformat an ISO 8601 / RFC 3339 timestamp (as the summary holds
    /// them) on this clock; text that is not one is returned unchanged.
    pub fn reformat(&self, text: &str) -> String {
        match DateTime::parse_from_rfc3339(text) {
            Ok(d) => self.iso(d.timestamp_millis()),
            Err(_) => text.to_owned(),
        }
    }
}

/// `Z` for 0, else `±hh:mm` (seconds of an offset are dropped; no zone in
/// use today has them).
fn offset_text(seconds: i32) -> String {
    if seconds == 0 {
        return "Z".to_owned();
    }
    let sign = if seconds < 0 { '-' } else { '+' };
    let a = seconds.unsigned_abs();
    format!("{sign}{:02}:{:02}", a / 3600, (a % 3600) / 60)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A zone with a change of offset: +01:00 before 2026-03-29T01:00Z,
    /// +02:00 after (the EU's 2026 switch to summer time is on that
    /// instant: Directive 2000/84/EC, last Sunday of March at 01:00 UTC).
    fn cet() -> Clock {
        const SWITCH: i64 = 1_774_746_000_000; // 2026-03-29T01:00:00Z
        Clock::new("Europe/Vienna", |ms| if ms < SWITCH { 3600 } else { 7200 })
    }

    #[test]
    fn utc_matches_the_reports_iso_text() {
        let c = Clock::utc();
        for ms in [0, 1_772_427_600_250, -1, 1_000_000_000_000] {
            assert_eq!(c.iso(ms), crate::text::iso(ms));
        }
        assert_eq!(c.describe(0), "UTC");
    }

    #[test]
    fn offsets_are_written_and_change_at_the_switch() {
        let c = cet();
        // 2026-03-02T05:00:00Z is 06:00 in Vienna (UTC+1 in winter).
        assert_eq!(c.iso(1_772_427_600_000), "2026-03-02T06:00:00.000+01:00");
        // 2026-03-29T01:00:00Z: clocks go from 02:00 to 03:00 local.
        assert_eq!(c.iso(1_774_746_000_000), "2026-03-29T03:00:00.000+02:00");
        assert_eq!(c.iso(1_774_745_999_000), "2026-03-29T01:59:59.000+01:00");
        assert_eq!(c.describe(0), "Europe/Vienna, UTC+01:00");
        let west = Clock::new("America/St_Johns", |_| -(3 * 3600 + 1800));
        assert_eq!(west.iso(0), "1969-12-31T20:30:00.000-03:30");
    }

    #[test]
    fn local_times_map_back_to_their_instant() {
        let c = cet();
        for ms in [1_772_427_600_000, 1_774_746_000_000 + 3_600_000] {
            let local = c.local(ms).expect("in range").and_utc().timestamp_millis();
            assert_eq!(c.instant_of_local(local), ms);
        }
    }

    #[test]
    fn reformat_reads_rfc3339_and_leaves_other_text() {
        let c = cet();
        assert_eq!(
            c.reformat("2026-03-02T05:00:00.000Z"),
            "2026-03-02T06:00:00.000+01:00"
        );
        assert_eq!(c.reformat("the end"), "the end");
        assert_eq!(Clock::utc().short(1_772_427_600_000), "2026-03-02 05:00:00");
    }
}
