//! The small logs of `fixtures/historian/` (see its README): zones and
//! daylight saving, patterns, epoch milliseconds, delimiters, decimal
//! commas, quoted numbers, column names; and the causes of an empty log.
//!
//! Reference instants, by hand: 2026-03-01T05:00:00Z is 1 772 341 200 s
//! after the epoch (see `time.rs`). EU rule (common practice, Directive
//! 2000/84/EC): CET = UTC+1, CEST = UTC+2 from 01:00 UTC on the last Sunday
//! of March (2026-03-29) to 01:00 UTC on the last Sunday of October
//! (2026-10-25). US rule (common practice, from memory): CST = UTC−6 until
//! 2026-03-08 (second Sunday of March).

use std::io;
use std::path::PathBuf;

use super::*;
use crate::plant::{Decimal, Delimiter, TagOptions};
use crate::zone::Zone;

const T0: i64 = 1_772_341_200_000;
const MIN: i64 = 60_000;
const H: i64 = 3_600_000;
const D: i64 = 86_400_000;
/// 2026-03-29T01:00:00Z: T0 + 28 d − 4 h.
const SPRING: i64 = T0 + 28 * D - 4 * H;
/// 2026-10-25T01:00:00Z: T0 + 238 d − 4 h (Mar 1 → Oct 25 = 214 + 24 days).
const AUTUMN: i64 = T0 + 238 * D - 4 * H;

fn fixture(name: &str) -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join("../fixtures/historian")
        .join(name)
}

fn tag(name: &str) -> TagOptions {
    TagOptions {
        tag: name.into(),
        interpolation: Interpolation::Linear,
        max_age_ms: 24 * 3_600_000,
        flow: false,
        conditioning: Default::default(),
    }
}

fn vienna() -> Zone {
    Zone::from_name("Europe/Vienna").unwrap_or_else(|e| panic!("{e}"))
}

fn open(name: &str, o: &LogOptions, tags: &[&str]) -> LogReader {
    let tags: Vec<TagOptions> = tags.iter().map(|t| tag(t)).collect();
    LogReader::open_with(&fixture(name), o, &tags, 0).unwrap_or_else(|e| panic!("{e}"))
}

fn open_text(text: &str, o: &LogOptions, tags: &[&str]) -> LogReader {
    let tags: Vec<TagOptions> = tags.iter().map(|t| tag(t)).collect();
    let bytes = Box::new(io::Cursor::new(text.as_bytes().to_vec()));
    LogReader::from_reader(bytes, "test.csv", o, &tags, 0).unwrap_or_else(|e| panic!("{e}"))
}

/// The values at `t`, each required to be a stored point there (`Exact`),
/// so the time is checked to the millisecond.
fn exact(r: &mut LogReader, t: i64) -> Vec<f64> {
    match r.sample(t) {
        Ok(Some(s)) => s
            .iter()
            .map(|x| {
                assert_eq!(x.state, SampleState::Exact, "at {}", Zone::Utc.iso(t));
                x.value
            })
            .collect(),
        Ok(None) => panic!("end of log at {}", Zone::Utc.iso(t)),
        Err(e) => panic!("{e}"),
    }
}

fn drain(r: &mut LogReader) {
    let mut t = r
        .first_time()
        .unwrap_or_else(|e| panic!("{e}"))
        .unwrap_or(0);
    while let Ok(Some(_)) = r.sample(t) {
        t += MIN;
    }
}

#[test]
fn semicolon_decimal_comma_across_the_autumn_change() {
    let o = LogOptions {
        timezone: Some(vienna()),
        output_zone: vienna(),
        ..LogOptions::default()
    };
    let mut r = open("eu-autumn-semicolon.csv", &o, &["FI-1", "LI-1"]);
    // Rows every 30 min of wall clock; 02:00 and 02:30 occur twice (CEST,
    // then CET), so the instants are every 30 min from 23:30Z (hand values
    // from the EU rule above).
    let expected = [
        (AUTUMN - 90 * MIN, [12.5, 1.20]),  // 01:30 CEST
        (AUTUMN - 60 * MIN, [12.75, 1.21]), // 02:00 CEST, first
        (AUTUMN - 30 * MIN, [13.0, 1.22]),  // 02:30 CEST, first
        (AUTUMN, [13.25, 1.23]),            // 02:00 CET, second
        (AUTUMN + 30 * MIN, [13.5, 1.24]),  // 02:30 CET, second
        (AUTUMN + 60 * MIN, [13.75, 1.25]), // 03:00 CET
    ];
    assert_eq!(r.first_time().ok().flatten(), Some(expected[0].0));
    for (t, v) in expected {
        assert_eq!(exact(&mut r, t), v);
    }
    drain(&mut r);
    let st = r.stats();
    assert_eq!((st.delimiter.as_str(), st.delimiter_detected), (";", true));
    assert_eq!(st.decimal, Decimal::Comma);
    assert_eq!(st.rows_rejected(), 0);
    // Four stamps in the repeated hour, two read with the second offset.
    assert_eq!((st.dst_repeated.total, st.dst_repeated_later), (4, 2));
    assert_eq!(st.dst_repeated.first[0].line, 3);
    assert!(st.dst_repeated.first[2]
        .detail
        .contains("second offset (+01:00)"));
    let text = st.describe().join("\n");
    assert!(
        text.contains("';' delimiter, decimal comma, local times in Europe/Vienna"),
        "{text}"
    );
    assert!(
        text.contains("4 timestamps in a repeated hour") && text.contains("2 with the second"),
        "{text}"
    );
    // Times described in the zone, with the offset.
    assert!(text.contains("2026-10-25T02:00:00.000+02:00"), "{text}");
}

#[test]
fn tab_log_across_the_spring_change_rejects_the_skipped_hour() {
    let o = LogOptions {
        timezone: Some(vienna()),
        ..LogOptions::default()
    };
    let mut r = open("eu-spring-tab.csv", &o, &["FI-1", "LI-1"]);
    // 01:30 CET = 00:30Z; 02:00 and 02:30 do not exist; 03:00 CEST = 01:00Z.
    assert_eq!(exact(&mut r, SPRING - 30 * MIN), [12.5, 1.20]);
    assert_eq!(exact(&mut r, SPRING), [13.25, 1.23]);
    assert_eq!(exact(&mut r, SPRING + 30 * MIN), [13.5, 1.24]);
    drain(&mut r);
    let st = r.stats();
    assert_eq!(st.delimiter, "tab");
    assert_eq!(st.dst_skipped.total, 2);
    assert_eq!(st.dst_skipped.first[0].line, 3);
    assert!(st.dst_skipped.first[0]
        .detail
        .contains("does not exist in Europe/Vienna"));
    assert_eq!(st.rows_rejected(), 2);
}

#[test]
fn us_dates_need_the_pattern_and_then_read_month_first() {
    // Without a pattern: nothing readable, and the cause names the key.
    let mut r = open("us-dates.csv", &LogOptions::default(), &["FI-1"]);
    assert_eq!(r.first_time().ok().flatten(), None);
    let why = r.stats().why_empty();
    assert!(
        why.starts_with("3 of 3 rows with an unreadable timestamp (first at line 2: '03/01/2026 11:30:00 PM' is not")
            && why.contains("[log] time_format"),
        "{why}"
    );
    let chicago = Zone::from_name("America/Chicago").unwrap_or_else(|e| panic!("{e}"));
    let o = LogOptions {
        time: TimeFormat::Pattern,
        time_pattern: Some("%m/%d/%Y %I:%M:%S %p".into()),
        timezone: Some(chicago),
        ..LogOptions::default()
    };
    let mut r = open("us-dates.csv", &o, &["FI-1", "LI-1"]);
    // 2026-03-01 23:30 CST = 2026-03-02T05:30Z = T0 + 24.5 h (month first:
    // read day first it would be 3 January).
    assert_eq!(exact(&mut r, T0 + 24 * H + 30 * MIN), [2.5, 1.20]);
    assert_eq!(exact(&mut r, T0 + 25 * H), [2.6, 1.21]);
    assert_eq!(exact(&mut r, T0 + 25 * H + 30 * MIN), [2.7, 1.22]);
    // The time column was found by its name 'Date'.
    assert_eq!(r.stats().time, TimeFormat::Pattern);
}

#[test]
fn epoch_milliseconds_long_log_with_own_column_names() {
    let o = LogOptions {
        time_column: Some("sampled_ms".into()),
        tag_column: Some("point_name".into()),
        value_column: Some("reading".into()),
        quality_column: Some("qc".into()),
        ..LogOptions::default()
    };
    let mut r = open("epoch-ms-long.csv", &o, &["FI-1", "LI-1"]);
    // 1772341200000 ms = T0 (definition of the unit); 1772341320500 = T0 +
    // 120.5 s. The bad-quality point at T0 + 60 s is rejected, so FI-1 is
    // interpolated there.
    assert_eq!(exact(&mut r, T0), [2.5, 1.2]);
    let mid = r.sample(T0 + 60_000).ok().flatten().map(|s| s[0]);
    assert_eq!(mid.map(|s| s.state), Some(SampleState::Interpolated));
    match r.sample(T0 + 120_500) {
        Ok(Some(s)) => assert_eq!((s[0].value, s[0].state), (2.7, SampleState::Exact)),
        other => panic!("{other:?}"),
    }
    drain(&mut r);
    let st = r.stats();
    assert_eq!(st.format, LogFormat::Long);
    assert_eq!(st.time, TimeFormat::EpochMs);
    // Guessed from the column's name (time = auto).
    assert!(st
        .time_unit_guessed
        .as_deref()
        .is_some_and(|g| g == "milliseconds from the column name 'sampled_ms'"));
    assert_eq!(st.tags[0].bad_quality.total, 1);
    assert_eq!(
        (st.rows_other_tags, st.other_tags_seen.clone()),
        (1, vec!["AI-9".to_string()])
    );
    // The same log asked for a tag it does not hold: refused when opened
    // (the order pass reads every row), listing the tags seen.
    let tags = [tag("FI-9")];
    let e = LogReader::open_with(&fixture("epoch-ms-long.csv"), &o, &tags, 0)
        .err()
        .map(|e| e.to_string())
        .unwrap_or_default();
    assert!(
        e.contains("tag FI-9 has no numeric value in the whole log: no row has it in the tag column; tags seen: FI-1, LI-1, AI-9"),
        "{e}"
    );
}

#[test]
fn epoch_unit_guessed_by_digits_and_set_explicitly() {
    // 13 digits: milliseconds (a guess, reported); 16 digits: microseconds.
    let mut r = open_text(
        "t,FI-1\n1772341200000,1\n",
        &LogOptions::default(),
        &["FI-1"],
    );
    assert_eq!(r.first_time().ok().flatten(), Some(T0));
    assert!(r
        .stats()
        .describe()
        .join("\n")
        .contains("timestamp unit guessed milliseconds from the 13-digit number of line 2"));
    let mut r = open_text(
        "t,FI-1\n1772341200000000,1\n",
        &LogOptions::default(),
        &["FI-1"],
    );
    assert_eq!(r.first_time().ok().flatten(), Some(T0));
    assert_eq!(r.stats().time, TimeFormat::EpochUs);
    let o = LogOptions {
        time: TimeFormat::EpochUs,
        ..LogOptions::default()
    };
    let mut r = open_text("t,FI-1\n1772341200000,1\n", &o, &["FI-1"]);
    // Explicit µs: 1772341200000 µs = T0 / 1000 (no guess).
    assert_eq!(r.first_time().ok().flatten(), Some(T0 / 1000));
    assert_eq!(r.stats().time_unit_guessed, None);
}

#[test]
fn quoted_numbers_and_a_time_column_not_first() {
    let mut r = open(
        "quoted-time-not-first.csv",
        &LogOptions::default(),
        &["FI-1", "LI-1"],
    );
    // +01:00 stamps: 06:00+01:00 = 05:00Z = T0 (RFC 3339 offsets).
    assert_eq!(exact(&mut r, T0), [2.5, 1.20]);
    assert_eq!(exact(&mut r, T0 + MIN), [2.75, 1.21]);
    match r.sample(T0 + 2 * MIN) {
        Ok(Some(s)) => assert_eq!((s[0].value, s[0].state), (3.0, SampleState::Exact)),
        other => panic!("{other:?}"),
    }
    drain(&mut r);
    assert_eq!(r.stats().tags[1].missing.total, 1);
}

#[test]
fn header_hints_name_the_delimiter_and_the_time_column() {
    let tags = [tag("FI-1")];
    let open_err = |text: &str, o: &LogOptions| {
        let bytes = Box::new(io::Cursor::new(text.as_bytes().to_vec()));
        match LogReader::from_reader(bytes, "test.csv", o, &tags, 0) {
            Ok(_) => panic!("opened"),
            Err(e) => e.to_string(),
        }
    };
    // A ';' log read with a configured ',' delimiter.
    let o = LogOptions {
        delimiter: Delimiter::Byte(b','),
        ..LogOptions::default()
    };
    let e = open_err("timestamp;FI-1;LI-1\n2026-03-01T05:00:00Z;1;2\n", &o);
    assert!(
        e.contains("split at ',' but holds ';': set [log] delimiter = \";\""),
        "{e}"
    );
    // The tag is the first column, and no column has a time name: taken as
    // the timestamp; no "did you mean" of the same name.
    let e = open_err(
        "FI-1,stamp\n1,2026-03-01T05:00:00Z\n",
        &LogOptions::default(),
    );
    assert!(e.contains("was taken as the timestamp column"), "{e}");
    assert!(!e.contains("did you mean 'FI-1'"), "{e}");
}

#[test]
fn empty_log_causes_name_the_first_line() {
    let cases = [
        ("time,FI-1\n", "no data rows after the header"),
        (
            "time,FI-1\n2026-03-01T05:00:00Z,x\n2026-03-01T05:01:00Z,\n",
            "FI-1: 2 values missing or not numbers (first at line 2, 2026-03-01T05:00:00Z: not a number 'x')",
        ),
        (
            "time,FI-1\n2026-03-01T05:00:00Z,1,9\n",
            "1 of 1 row with a different number of fields than the header (first at line 2",
        ),
        (
            "time,tag,value,quality\n2026-03-01T05:00:00Z,FI-1,1,bad\n",
            "FI-1: 1 point of bad quality (rejected) (first at line 2",
        ),
    ];
    for (text, want) in cases {
        let mut r = open_text(text, &LogOptions::default(), &["FI-1"]);
        assert_eq!(r.first_time().ok().flatten(), None, "{text}");
        let why = r.stats().why_empty();
        assert!(why.contains(want), "{why}");
    }
}

#[test]
fn stamps_with_an_offset_keep_it_in_a_zoned_log() {
    // 06:00+01:00 is T0 whatever the zone (RFC 3339); 2026-03-01 07:00
    // local in Europe/Vienna (CET, UTC+1, common practice) is T0 + 1 h.
    let o = LogOptions {
        timezone: Some(vienna()),
        ..LogOptions::default()
    };
    let text =
        "time,FI-1\n2026-03-01T06:00:00+01:00,1\n2026-03-01 07:00:00,2\n2026-03-01T06:30:00Z,3\n";
    let mut r = open_text(text, &o, &["FI-1"]);
    assert_eq!(exact(&mut r, T0), [1.0]);
    assert_eq!(exact(&mut r, T0 + H), [2.0]);
    assert_eq!(exact(&mut r, T0 + 90 * MIN), [3.0]);
}

#[test]
fn long_log_with_alias_names_and_a_unit_in_the_time_name() {
    // `time_s`, `TagName`, `Value`: found without configuration; the unit
    // (seconds) follows from the `_s` name. 1772341200 s = T0 (see above).
    let text = "time_s,TagName,Value\n1772341200,FI-1,2.5\n1772341260.5,FI-1,2.75\n";
    let mut r = open_text(text, &LogOptions::default(), &["FI-1"]);
    assert_eq!(exact(&mut r, T0), [2.5]);
    assert_eq!(exact(&mut r, T0 + 60_500), [2.75]);
    let st = r.stats();
    assert_eq!((st.format, st.time), (LogFormat::Long, TimeFormat::Epoch));
    assert_eq!(
        st.time_unit_guessed.as_deref(),
        Some("seconds from the column name 'time_s'")
    );
}

#[test]
fn pattern_with_an_offset_needs_no_zone() {
    // 01.03.2026 06:00 +0100 = 2026-03-01T05:00Z = T0 (RFC 3339 offset
    // arithmetic); a stamp not matching the pattern is a counted bad time.
    let o = LogOptions {
        time: TimeFormat::Pattern,
        time_pattern: Some("%d.%m.%Y %H:%M %z".into()),
        ..LogOptions::default()
    };
    let text = "time;FI-1\n01.03.2026 06:00 +0100;1,5\n2026-03-01T05:01:00Z;2\n01.03.2026 05:02 +0000;2,5\n";
    let mut r = open_text(text, &o, &["FI-1"]);
    assert_eq!(exact(&mut r, T0), [1.5]);
    assert_eq!(exact(&mut r, T0 + 2 * MIN), [2.5]);
    drain(&mut r);
    let bad = &r.stats().bad_time;
    assert_eq!((bad.total, bad.first[0].line), (1, 3));
    assert!(bad.first[0].detail.contains("does not match the pattern"));
}
