//! Text shared by the reports: the caution printed with every report and
//! the time format of their timestamps.

/// The caution printed with every report.
pub const CAUTION: &str = "Estimates are advisory: validate them against lab results, never use \
them as the only input to a safety function, and follow site procedures and local codes.";

/// Format ms since the Unix epoch as ISO 8601 UTC (reports in the log's
/// zone use [`crate::zone::Zone::iso`], which gives exactly this in UTC).
pub fn iso(ms: i64) -> String {
    chrono::DateTime::from_timestamp_millis(ms)
        .map(|d| d.format("%Y-%m-%dT%H:%M:%S%.3fZ").to_string())
        .unwrap_or_else(|| format!("{ms} ms"))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn iso_is_utc_with_milliseconds() {
        assert_eq!(iso(0), "1970-01-01T00:00:00.000Z");
        assert_eq!(iso(1_772_427_600_250), "2026-03-02T05:00:00.250Z");
    }

    #[test]
    fn iso_out_of_range_names_the_milliseconds() {
        assert_eq!(iso(i64::MAX), format!("{} ms", i64::MAX));
    }
}
