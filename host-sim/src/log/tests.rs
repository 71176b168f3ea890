//! Reader tests. All logs are invented here; expected values are worked out
//! by hand from the invented data (noted at each test), or follow from a
//! construction the test makes (the deadband compression).

use super::time::format_ms;
use super::*;
use std::collections::HashMap;
use std::io::{self, BufWriter, Write};
use std::path::PathBuf;

/// 2026-03-01T05:00:00Z (see the time module's tests for the day count).
const T0: i64 = 1_772_341_200_000;
const MIN: i64 = 60_000;

fn tag(name: &str, interpolation: Interpolation, max_age_min: u64) -> TagOptions {
    TagOptions {
        tag: name.into(),
        interpolation,
        max_age_ms: max_age_min * 60_000,
        flow: false,
        conditioning: Default::default(),
    }
}

fn flow(name: &str, max_age_min: u64) -> TagOptions {
    TagOptions {
        flow: true,
        ..tag(name, Interpolation::Linear, max_age_min)
    }
}

fn opts(format: LogFormat, time: TimeFormat) -> LogOptions {
    LogOptions {
        format,
        time,
        time_column: None,
        max_age_ms: 600_000,
        empty_cells: EmptyCells::Skip,
        ..LogOptions::default()
    }
}

fn auto() -> LogOptions {
    opts(LogFormat::Auto, TimeFormat::Auto)
}

fn reader_with(text: &str, o: &LogOptions, tags: &[TagOptions], flat: u64) -> LogReader {
    let bytes = text.as_bytes().to_vec();
    match LogReader::from_reader(Box::new(io::Cursor::new(bytes)), "test.csv", o, tags, flat) {
        Ok(r) => r,
        Err(e) => panic!("open failed: {e}"),
    }
}

fn reader(text: &str, tags: &[TagOptions]) -> LogReader {
    reader_with(text, &auto(), tags, DEFAULT_FLAT_LINE_MS)
}

fn open_err(text: &str, o: &LogOptions, tags: &[TagOptions]) -> String {
    let bytes = text.as_bytes().to_vec();
    match LogReader::from_reader(Box::new(io::Cursor::new(bytes)), "test.csv", o, tags, 0) {
        Ok(_) => panic!("opened, expected an error"),
        Err(e) => e.to_string(),
    }
}

fn at(r: &mut LogReader, t: i64) -> Vec<TagSample> {
    match r.sample(t) {
        Ok(Some(s)) => s.to_vec(),
        Ok(None) => panic!("end of log at {}", format_ms(t)),
        Err(e) => panic!("{e}"),
    }
}

fn iso(t: i64) -> String {
    format_ms(t)
}

fn s(value: f64, state: SampleState) -> TagSample {
    TagSample { value, state }
}

fn missing() -> TagSample {
    s(f64::NAN, SampleState::Missing)
}

/// Compare samples, NaN equal to NaN.
#[track_caller]
fn check(got: Vec<TagSample>, want: &[TagSample]) {
    let same = got.len() == want.len()
        && got.iter().zip(want).all(|(g, w)| {
            g.state == w.state && (g.value == w.value || (g.value.is_nan() && w.value.is_nan()))
        });
    assert!(same, "got {got:?}\nwant {want:?}");
}

/// Temporary file removed on drop.
struct TempFile(PathBuf);

impl TempFile {
    fn write(name: &str, fill: impl FnOnce(&mut BufWriter<File>) -> io::Result<()>) -> Self {
        let path = std::env::temp_dir().join(format!("holdup-log-{}-{name}", std::process::id()));
        let file = File::create(&path).expect("create temp file");
        let mut w = BufWriter::new(file);
        fill(&mut w).expect("write temp file");
        w.flush().expect("flush temp file");
        TempFile(path)
    }
}

impl Drop for TempFile {
    fn drop(&mut self) {
        let _ = std::fs::remove_file(&self.0);
    }
}

/// Small deterministic generator (xorshift64*), for noise and garbage.
struct Rng(u64);

impl Rng {
    fn next(&mut self) -> u64 {
        self.0 ^= self.0 >> 12;
        self.0 ^= self.0 << 25;
        self.0 ^= self.0 >> 27;
        self.0.wrapping_mul(0x2545_F491_4F6C_DD1D)
    }
    fn below(&mut self, n: u64) -> u64 {
        self.next() % n
    }
}

#[test]
fn wide_iso_linear_and_hold() {
    // Irregular rows: 0, 60 s, 150 s, with three notations of the offset.
    // FI-101 linear 10 → 20 → 11; PUMP hold 0 → 1 → 0.
    let log = "time,FI-101,PUMP,note\n\
               2026-03-01T06:00:00+01:00,10,0,start\n\
               2026-03-01T05:01:00Z,20,1,\n\
               2026-03-01T05:02:30.000Z,11,0,x\n";
    let tags = [
        tag("FI-101", Interpolation::Linear, 10),
        tag("PUMP", Interpolation::Hold, 10),
    ];
    let mut r = reader(log, &tags);
    assert_eq!(r.first_time().ok(), Some(Some(T0)));
    assert_eq!(r.stats().format, LogFormat::Wide);
    assert_eq!(r.stats().time, TimeFormat::Iso8601);
    use SampleState::*;
    check(at(&mut r, T0 - 1000), &[missing(), missing()]);
    check(at(&mut r, T0), &[s(10.0, Exact), s(0.0, Exact)]);
    // Hand-worked: at 15 s, 10 + 10·15/60 = 12.5; at 105 s, 20 − 9·45/90 = 15.5.
    check(
        at(&mut r, T0 + 15_000),
        &[s(12.5, Interpolated), s(0.0, Held)],
    );
    check(
        at(&mut r, T0 + 15_000),
        &[s(12.5, Interpolated), s(0.0, Held)],
    );
    check(at(&mut r, T0 + 60_000), &[s(20.0, Exact), s(1.0, Exact)]);
    check(
        at(&mut r, T0 + 105_000),
        &[s(15.5, Interpolated), s(1.0, Held)],
    );
    check(at(&mut r, T0 + 150_000), &[s(11.0, Exact), s(0.0, Exact)]);
    // Past the last stored point of the log: end of replay, and it stays so.
    assert!(matches!(r.sample(T0 + 150_001), Ok(None)));
    assert!(matches!(r.sample(T0 + 999_999), Ok(None)));
    let ticks = &r.stats().tags[0].ticks;
    assert_eq!((ticks.missing, ticks.exact, ticks.interpolated), (1, 3, 3));
    // Going back in time is refused.
    assert!(matches!(
        r.sample(T0),
        Err(LogError::SampleBackwards { .. })
    ));
}

#[test]
fn max_age_held_then_stale() {
    // Points at 0 and 20 min, max_age 10 min: no interpolation across the
    // gap; held up to 10 min after the first point (inclusive), stale after.
    let log = format!(
        "time,FI-101,PUMP\n{},4,1\n{},8,0\n",
        iso(T0),
        iso(T0 + 20 * MIN)
    );
    let tags = [
        tag("FI-101", Interpolation::Linear, 10),
        tag("PUMP", Interpolation::Hold, 10),
    ];
    let mut r = reader(&log, &tags);
    use SampleState::*;
    check(at(&mut r, T0 + 5 * MIN), &[s(4.0, Held), s(1.0, Held)]);
    check(at(&mut r, T0 + 10 * MIN), &[s(4.0, Held), s(1.0, Held)]);
    check(
        at(&mut r, T0 + 10 * MIN + 1),
        &[s(4.0, Stale), s(1.0, Stale)],
    );
    check(at(&mut r, T0 + 19 * MIN), &[s(4.0, Stale), s(1.0, Stale)]);
    check(at(&mut r, T0 + 20 * MIN), &[s(8.0, Exact), s(0.0, Exact)]);
    assert!(matches!(r.sample(T0 + 20 * MIN + 1), Ok(None)));
    let st = r.stats();
    assert_eq!(st.tags[0].ticks.stale, 2);
    assert_eq!(st.tags[1].ticks.stale, 2);
    // The 20-minute interval is a gap of both tags, lines 2–3.
    for t in &st.tags {
        assert_eq!(t.gaps.total, 1);
        assert_eq!(
            t.gaps.first,
            [Window {
                start: T0,
                end: T0 + 20 * MIN,
                start_line: 2,
                end_line: 3
            }]
        );
    }
    // A longer max_age interpolates across the same interval.
    let mut r = reader(&log, &[tag("FI-101", Interpolation::Linear, 20)]);
    check(at(&mut r, T0 + 5 * MIN), &[s(5.0, Interpolated)]);
    assert_eq!(r.stats().tags[0].gaps.total, 0);
}

#[test]
fn a_recordings_empty_cell_is_no_reading_at_its_time() {
    // One row a minute, FI-101 empty at 2 min. A historian export
    // (`Skip`): interpolated across the cell. A recording of one row a
    // tick (`NoReading`): missing at 2 min, the next row's value after,
    // and one missing value but no gap either way.
    let log = format!(
        "time,FI-101\n{},4\n{},5\n{},\n{},7\n",
        iso(T0),
        iso(T0 + MIN),
        iso(T0 + 2 * MIN),
        iso(T0 + 3 * MIN)
    );
    use SampleState::*;
    for (empty, at_2, interpolation) in [
        (
            EmptyCells::Skip,
            s(6.0, Interpolated),
            Interpolation::Linear,
        ),
        (EmptyCells::NoReading, missing(), Interpolation::Hold),
    ] {
        let o = LogOptions {
            empty_cells: empty,
            ..auto()
        };
        let tags = [tag("FI-101", interpolation, 10)];
        let mut r = reader_with(&log, &o, &tags, 0);
        check(at(&mut r, T0 + MIN), &[s(5.0, Exact)]);
        check(at(&mut r, T0 + 2 * MIN), &[at_2]);
        check(at(&mut r, T0 + 3 * MIN), &[s(7.0, Exact)]);
        let st = &r.stats().tags[0];
        assert_eq!(st.missing.total, 1, "{empty:?}");
        assert_eq!(st.gaps.total, 0, "{empty:?}");
    }
}

#[test]
fn long_epoch_with_quality_and_detection() {
    // Long, epoch seconds with decimals, header in another case and order,
    // quoted fields. OPC-style codes (common practice): 192 good, 64
    // uncertain, 0 bad.
    let t0 = T0 / 1000;
    let log = format!(
        "Value,TAG,Timestamp,Quality\n\
         1.5,FI-101,{t0},good\n\
         7,LI-301,{t0}.5,192\n\
         99,\"FI-101\",{t1},BAD\n\
         2.5,FI-101,{t2},Uncertain\n\
         3,OTHER,{t2},good\n\
         9,LI-301,{t3},64\n\
         5,FI-101,{t3},0\n\
         4.5,FI-101,{t4},questionable\n\
         8,LI-301,{t4},\n",
        t1 = t0 + 30,
        t2 = t0 + 60,
        t3 = t0 + 90,
        t4 = t0 + 120,
    );
    let tags = [
        tag("FI-101", Interpolation::Linear, 10),
        tag("LI-301", Interpolation::Linear, 10),
    ];
    let mut r = reader(&log, &tags);
    assert_eq!(r.stats().format, LogFormat::Long);
    use SampleState::*;
    check(at(&mut r, T0), &[s(1.5, Exact), missing()]);
    assert_eq!(r.stats().time, TimeFormat::Epoch);
    // The bad point at 30 s is rejected: FI-101 is linear 1.5 → 2.5 over
    // 60 s, so 2.0 at 30 s. LI-301: 7 at 0.5 s, 9 at 90 s.
    check(
        at(&mut r, T0 + 500),
        &[s(1.5 + 0.5 / 60.0, Interpolated), s(7.0, Exact)],
    );
    check(
        at(&mut r, T0 + 30_000),
        &[
            s(2.0, Interpolated),
            s(7.0 + 2.0 * 29.5 / 89.5, Interpolated),
        ],
    );
    // FI-101's point at 90 s is bad too: 2.5 → 4.5 over 60 s.
    check(
        at(&mut r, T0 + 90_000),
        &[s(3.5, Interpolated), s(9.0, Exact)],
    );
    check(at(&mut r, T0 + 120_000), &[s(4.5, Exact), s(8.0, Exact)]);
    assert!(matches!(r.sample(T0 + 120_001), Ok(None)));
    let st = r.stats();
    let fi = &st.tags[0];
    assert_eq!(fi.bad_quality.total, 2);
    assert_eq!(
        fi.bad_quality
            .first
            .iter()
            .map(|f| f.line)
            .collect::<Vec<_>>(),
        [4, 8]
    );
    assert_eq!(fi.uncertain_quality.total, 2);
    assert_eq!(fi.uncertain_quality.first[0].line, 5);
    assert!(fi.uncertain_quality.first[1]
        .detail
        .contains("unrecognised"));
    assert_eq!(st.tags[1].uncertain_quality.total, 1);
    assert_eq!(st.rows_other_tags, 1);
    assert_eq!(st.rows, 9);
    assert_eq!(fi.points, 3);
}

#[test]
fn format_and_time_detection() {
    let tags = [tag("FI-101", Interpolation::Linear, 10)];
    let cases = [
        (
            format!("Time,FI-101\n{},1\n", iso(T0)),
            LogFormat::Wide,
            TimeFormat::Iso8601,
        ),
        (
            format!("stamp,FI-101\n{},1\n", T0 / 1000),
            LogFormat::Wide,
            TimeFormat::Epoch,
        ),
        (
            format!("time,tag,value\n{},FI-101,1\n", iso(T0)),
            LogFormat::Long,
            TimeFormat::Iso8601,
        ),
        (
            format!("TAG,timestamp,VALUE\nFI-101,{},1\n", T0 / 1000),
            LogFormat::Long,
            TimeFormat::Epoch,
        ),
    ];
    for (log, format, time) in cases {
        let mut r = reader(&log, &tags);
        assert_eq!(r.first_time().ok(), Some(Some(T0)), "{log}");
        assert_eq!((r.stats().format, r.stats().time), (format, time), "{log}");
    }
    // Auto time decides on the first readable timestamp; a bad first one
    // is rejected and counted.
    let log = format!(
        "time,FI-101\nsoon,1\n{},2\n{},3\n",
        T0 / 1000,
        iso(T0 + 1000)
    );
    let mut r = reader(&log, &tags);
    check(at(&mut r, T0), &[s(2.0, SampleState::Exact)]);
    assert!(matches!(r.sample(T0 + 1000), Ok(None)));
    assert_eq!(r.stats().time, TimeFormat::Epoch);
    assert_eq!(
        r.stats()
            .bad_time
            .first
            .iter()
            .map(|f| f.line)
            .collect::<Vec<_>>(),
        [2, 4]
    );
    // Forced formats: epoch refuses ISO rows; a configured time column.
    let log = format!("a,time,FI-101\nx,{},1\ny,{},2\n", iso(T0), T0 / 1000 + 1);
    let mut o = opts(LogFormat::Wide, TimeFormat::Epoch);
    o.time_column = Some("TIME".into());
    let mut r = reader_with(&log, &o, &tags, 0);
    assert_eq!(r.first_time().ok(), Some(Some(T0 + 1000)));
    assert_eq!(r.stats().bad_time.total, 1);
    // A long-looking header read as wide needs the tag as a column.
    let e = open_err(
        "time,tag,value\n",
        &opts(LogFormat::Wide, TimeFormat::Auto),
        &tags,
    );
    assert!(e.contains("'FI-101' is not a column"), "{e}");
}

#[test]
fn open_errors_name_file_line_and_columns() {
    let tags = [tag("FI-101", Interpolation::Linear, 10)];
    let missing = LogReader::open(Path::new("/nonexistent/holdup.csv"), &auto(), &tags);
    assert!(matches!(missing, Err(LogError::Open { .. })));
    let e = open_err("", &auto(), &tags);
    assert!(e.contains("header row") && e.contains("empty"), "{e}");
    let e = open_err("\n  \n", &auto(), &tags);
    assert!(e.contains("empty or blank"), "{e}");
    let e = open_err(&format!("{},1\n", iso(T0)), &auto(), &tags);
    assert!(e.contains("line 1 holds data"), "{e}");
    let e = open_err("time,fi-101,TI-301\n", &auto(), &tags);
    assert!(
        e.starts_with("test.csv:1: tag 'FI-101' is not a column")
            && e.contains("did you mean 'fi-101'")
            && e.contains("'time', 'fi-101', 'TI-301'"),
        "{e}"
    );
    let mut o = auto();
    o.time_column = Some("stamp".into());
    let e = open_err("time,FI-101\n", &o, &tags);
    assert!(
        e.contains("no timestamp column 'stamp'") && e.contains("'time', 'FI-101'"),
        "{e}"
    );
    let e = open_err(
        "time,tag,quality\n",
        &opts(LogFormat::Long, TimeFormat::Auto),
        &tags,
    );
    assert!(
        e.contains("needs a 'value' or 'val' column (or set [log] value_column)"),
        "{e}"
    );
    let e = open_err("tag,value\n", &auto(), &tags);
    assert!(e.contains("'time' or 'timestamp'"), "{e}");
    let e = open_err("time,FI-101,FI-101\n", &auto(), &tags);
    assert!(e.contains("'FI-101' appears more than once"), "{e}");
    let e = open_err(
        "time,FI-101\n",
        &auto(),
        &[tags[0].clone(), tags[0].clone()],
    );
    assert!(e.contains("asked for twice"), "{e}");
    let e = open_err("\"time,FI-101\n", &auto(), &tags);
    assert!(
        e.contains("test.csv:1: header") && e.contains("quote"),
        "{e}"
    );
    let utf16 = b"\xFF\xFEt\0i\0m\0e\0".to_vec();
    let r = LogReader::from_reader(Box::new(io::Cursor::new(utf16)), "u.csv", &auto(), &tags, 0);
    assert!(matches!(r, Err(LogError::Utf16 { .. })));
}

#[test]
fn timestamp_without_offset_is_an_error_naming_the_line() {
    let tags = [tag("FI-101", Interpolation::Linear, 10)];
    let log = format!("time,FI-101\n{},1\n2026-03-01T05:01:00,2\n", iso(T0));
    let mut r = reader(&log, &tags);
    let e = match r.sample(T0 + 30_000) {
        Err(e) => e.to_string(),
        Ok(_) => panic!("read a timestamp without offset"),
    };
    assert!(
        e.starts_with("test.csv:3: column 'time': timestamp '2026-03-01T05:01:00' has no offset")
            && e.contains("set [log] timezone"),
        "{e}"
    );
    let mut r = reader("time,FI-101\n2026-03-01 05:00:00,1\n", &tags);
    assert!(matches!(
        r.first_time(),
        Err(LogError::NoOffset { line: 2, .. })
    ));
}

/// Compress a dense series: keep a point when the straight line from the
/// last kept point to the current sample would miss an intermediate sample
/// by more than `db`, or the span would exceed `max_span` samples. By
/// construction, linear interpolation between kept points reproduces every
/// dense sample within `db`.
fn compress(v: &[f64], db: f64, max_span: usize) -> Vec<usize> {
    let lerp = |a: usize, b: usize, j: usize| {
        let (va, vb) = (v[a], v[b]);
        // Same arithmetic as the reader (times in ms, 1 s apart).
        let f = ((j - a) as i64 * 1000) as f64 / ((b - a) as i64 * 1000) as f64;
        va + (vb - va) * f
    };
    let mut kept = vec![0];
    let mut anchor = 0;
    for i in 1..v.len() {
        let fits = i - anchor <= max_span
            && (anchor + 1..i).all(|j| (lerp(anchor, i, j) - v[j]).abs() <= db);
        if !fits {
            anchor = i - 1;
            kept.push(anchor);
        }
    }
    if kept.last() != Some(&(v.len() - 1)) {
        kept.push(v.len() - 1);
    }
    kept
}

#[test]
fn exception_compressed_long_log_reproduces_dense_wide_log() {
    // Four hours at 1 s: two smooth analog signals and a pump state.
    let n = 4 * 3600;
    let tau = std::f64::consts::TAU;
    let fi: Vec<f64> = (0..n)
        .map(|i| {
            let x = i as f64;
            50.0 + 20.0 * (tau * x / 3600.0).sin() + 5.0 * (tau * x / 517.0 + 1.0).sin()
        })
        .collect();
    let ti: Vec<f64> = (0..n)
        .map(|i| 60.0 + 3.0 * (tau * i as f64 / 5000.0).cos())
        .collect();
    let pump: Vec<f64> = (0..n).map(|i| ((i / 1000) % 2) as f64).collect();
    let mut wide = String::from("time,FI-101,TI-301,PUMP\n");
    for i in 0..n {
        wide.push_str(&format!(
            "{},{},{},{}\n",
            iso(T0 + i as i64 * 1000),
            fi[i],
            ti[i],
            pump[i]
        ));
    }
    let (db_fi, db_ti) = (0.5, 0.05);
    let kept_fi = compress(&fi, db_fi, 300);
    let kept_ti = compress(&ti, db_ti, 300);
    let kept_pump: Vec<usize> = (0..n)
        .filter(|&i| i == 0 || pump[i] != pump[i - 1])
        .collect();
    // Merge into one long log in time order.
    let mut rows: Vec<(usize, &str, f64)> = Vec::new();
    rows.extend(kept_fi.iter().map(|&i| (i, "FI-101", fi[i])));
    rows.extend(kept_ti.iter().map(|&i| (i, "TI-301", ti[i])));
    rows.extend(kept_pump.iter().map(|&i| (i, "PUMP", pump[i])));
    rows.sort_by_key(|r| r.0);
    let mut long = String::from("timestamp,tag,value,quality\n");
    for (i, name, v) in &rows {
        long.push_str(&format!("{},{name},{v},good\n", (T0 / 1000) + *i as i64));
    }
    // The compression is real: under a fifth of the dense analog points.
    assert!(
        kept_fi.len() * 5 < n && kept_ti.len() * 5 < n,
        "{} {}",
        kept_fi.len(),
        kept_ti.len()
    );
    let tags = [
        tag("FI-101", Interpolation::Linear, 10),
        tag("TI-301", Interpolation::Linear, 10),
        tag("PUMP", Interpolation::Hold, 60),
    ];
    let mut w = reader(&wide, &tags);
    let mut l = reader(&long, &tags);
    let mut worst: f64 = 0.0;
    for i in 0..n {
        let t = T0 + i as i64 * 1000;
        let dense = at(&mut w, t);
        let sparse = at(&mut l, t);
        check(
            dense.clone(),
            &[
                s(fi[i], SampleState::Exact),
                s(ti[i], SampleState::Exact),
                s(pump[i], SampleState::Exact),
            ],
        );
        for (k, db) in [(0, db_fi), (1, db_ti)] {
            assert!(matches!(
                sparse[k].state,
                SampleState::Exact | SampleState::Interpolated
            ));
            let err = (sparse[k].value - dense[k].value).abs();
            assert!(err <= db + 1e-9, "tag {k} at {i}: {err}");
            worst = worst.max(err / db);
        }
        assert_eq!(sparse[2].value, pump[i]);
        assert!(matches!(
            sparse[2].state,
            SampleState::Exact | SampleState::Held
        ));
    }
    // The deadband is used, not just met by accident.
    assert!(worst > 0.5, "{worst}");
    assert!(matches!(l.sample(T0 + n as i64 * 1000), Ok(None)));
    assert!(matches!(w.sample(T0 + n as i64 * 1000), Ok(None)));
    assert_eq!(l.stats().tags[0].points as usize, kept_fi.len());
    assert_eq!(l.stats().rows_rejected(), 0);
    // Exception-compressed: stored points far apart, so no flat lines.
    assert_eq!(l.stats().tags[0].flat_lines.total, 0);
}

/// The log of [`every_wide_fault_is_counted_at_its_line`], and the line of
/// each minute's row; the extra faulty rows are keyed 1000 + a minute (1019:
/// a row back at minute 19, 1021: a second row at minute 21, 1030: too few
/// fields, 1031: a bad timestamp, followed by a blank line).
fn faulty_wide_log() -> (String, HashMap<i64, u64>) {
    let mut lines = vec!["time,FI-101,TI-301,PUMP,comment".to_string()];
    let mut line_of = HashMap::new();
    let row = |m: i64, fi: String, ti: String| format!("{},{fi},{ti},1,", iso(T0 + m * MIN));
    let minutes = (0..=45).chain(65..=70);
    for m in minutes {
        let fi = match m {
            5 => "NaN".to_string(),
            6 => "nan".to_string(),
            7 => " NaN ".to_string(),
            15 => "-0.4".to_string(),
            _ => format!("{}", 10.0 + m as f64 * 0.5),
        };
        let ti = match m {
            12 => String::new(),
            0..=40 => "25.0".to_string(),
            _ => format!("{}", 25 + m - 40),
        };
        lines.push(row(m, fi, ti));
        line_of.insert(m, lines.len() as u64);
        match m {
            20 => {
                lines.push(row(19, "1".into(), "1".into()));
                line_of.insert(1019, lines.len() as u64);
            }
            21 => {
                lines.push(row(21, "99".into(), "25.0".into()));
                line_of.insert(1021, lines.len() as u64);
            }
            30 => {
                lines.push("2026-03-01T05:30:30Z,1,2".into());
                line_of.insert(1030, lines.len() as u64);
            }
            31 => {
                lines.push("2026-03-01T05:3x:00Z,1,2,1,".into());
                line_of.insert(1031, lines.len() as u64);
                lines.push(String::new());
            }
            _ => {}
        }
    }
    (lines.join("\n"), line_of)
}

#[test]
fn every_wide_fault_is_counted_at_its_line() {
    // Rows every minute; FI-101 = 10 + m/2 (a flow, clamped at 0), TI-301
    // flat at 25.0 up to minute 40, PUMP (hold) always 1. Faults are put in
    // at known lines, recorded as the log is written.
    let tags = [
        flow("FI-101", 10),
        tag("TI-301", Interpolation::Linear, 10),
        tag("PUMP", Interpolation::Hold, 60),
    ];
    let (log, line_of) = faulty_wide_log();
    let mut r = reader(&log, &tags);
    use SampleState::*;
    let mut samples = Vec::new();
    let mut m = 0;
    while let Ok(Some(x)) = r.sample(T0 + m * MIN) {
        samples.push(x.to_vec());
        m += 1;
    }
    assert_eq!(samples.len(), 71);
    // NaN run: interpolated across (4 min span ≤ 10): 10 + 6/2 = 13.
    check(
        samples[6].clone(),
        &[s(13.0, Interpolated), s(25.0, Exact), s(1.0, Exact)],
    );
    // Empty TI-301 cell at minute 12: interpolated between equal values.
    assert_eq!(samples[12][1], s(25.0, Interpolated));
    // A negative flow is stored as logged (the sensor conditions it);
    // duplicate row: the later value wins.
    assert_eq!(samples[15][0], s(-0.4, Exact));
    assert_eq!(samples[21][0], s(99.0, Exact));
    // The 20-minute gap: held to minute 55 (10 min after 45), stale after.
    assert_eq!(samples[55][0], s(10.0 + 45.0 * 0.5, Held));
    assert_eq!(samples[56][0], s(10.0 + 45.0 * 0.5, Stale));
    assert_eq!(samples[60][2], s(1.0, Held));
    let st = r.stats();
    let line = |m: i64| line_of.get(&m).copied().unwrap_or(0);
    let lines_of = |l: &FaultList| l.first.iter().map(|f| f.line).collect::<Vec<_>>();
    assert_eq!(st.rows, 52 + 4);
    assert_eq!(st.blank_lines, 1);
    assert_eq!(st.rows_rejected(), 3);
    assert_eq!(lines_of(&st.backwards), [line(1019)]);
    assert_eq!(st.backwards.first[0].time, Some(T0 + 19 * MIN));
    assert_eq!(lines_of(&st.wrong_fields), [line(1030)]);
    assert_eq!(lines_of(&st.bad_time), [line(1031)]);
    assert_eq!(lines_of(&st.duplicate_rows), [line(1021)]);
    let (fi, ti, pump) = (&st.tags[0], &st.tags[1], &st.tags[2]);
    assert_eq!(lines_of(&fi.missing), [line(5), line(6), line(7)]);
    assert_eq!(fi.missing.first[0].detail, "NaN");
    assert_eq!(fi.missing.first[0].time, Some(T0 + 5 * MIN));
    assert_eq!(lines_of(&ti.missing), [line(12)]);
    assert_eq!(ti.missing.first[0].detail, "empty");
    assert_eq!(lines_of(&fi.duplicates), [line(1021)]);
    assert_eq!(fi.duplicates.first[0].value, Some(20.5));
    assert_eq!(pump.duplicates.total, 1);
    let gap = Window {
        start: T0 + 45 * MIN,
        end: T0 + 65 * MIN,
        start_line: line(45),
        end_line: line(65),
    };
    assert_eq!(fi.gaps.first, std::slice::from_ref(&gap));
    assert_eq!(ti.gaps.first, [gap]);
    assert_eq!(pump.gaps.total, 0);
    // TI-301 flat from minute 0 to 40 (40 min > 30); FI-101 never; PUMP is
    // discrete (hold), not checked.
    assert_eq!(
        ti.flat_lines.first,
        [Window {
            start: T0,
            end: T0 + 40 * MIN,
            start_line: line(0),
            end_line: line(40)
        }]
    );
    assert_eq!((fi.flat_lines.total, pump.flat_lines.total), (0, 0));
    // Stale ticks: minutes 56..=64 for both analog tags.
    assert_eq!(
        (fi.ticks.stale, ti.ticks.stale, pump.ticks.stale),
        (9, 9, 0)
    );
    let text = st.describe();
    let has = |needle: &str| text.iter().any(|l| l.contains(needle));
    assert!(
        has(&format!(
            "FI-101: 3 missing values (first at line {}, 2026-03-01T05:05:00Z: NaN)",
            line(5)
        )),
        "{text:#?}"
    );
    assert!(
        has("TI-301: 1 flat line longer than 30 min, 40 min in all"),
        "{text:#?}"
    );
    assert!(
        has("FI-101: 1 gap longer than 10 min, 20 min in all (first 2026-03-01T05:45:00Z"),
        "{text:#?}"
    );
    assert!(has("FI-101: 9 stale samples"), "{text:#?}");
    assert!(
        has("1 row rejected: timestamp earlier than the previous row"),
        "{text:#?}"
    );
    assert!(
        text[0]
            .starts_with("test.csv: 56 rows read (wide format, ISO 8601 timestamps), 3 rejected"),
        "{text:#?}"
    );
    // For plots: the flat line, the NaN run and the empty cell (runs of
    // missing values) and the row gap once (both analog tags had it).
    assert_eq!(
        st.fault_windows(),
        [
            (T0, T0 + 40 * MIN, "flat line".to_string()),
            (T0 + 5 * MIN, T0 + 7 * MIN, "missing values".to_string()),
            (T0 + 12 * MIN, T0 + 12 * MIN, "missing values".to_string()),
            (T0 + 45 * MIN, T0 + 65 * MIN, "data gap".to_string()),
        ]
    );
    // A flat-line age of 0 turns detection off.
    let r = drain(reader_with(&log, &auto(), &tags, 0));
    assert_eq!(r.stats().tags[1].flat_lines.total, 0);
}

/// Sample every second until the end; return the reader.
fn drain(mut r: LogReader) -> LogReader {
    let Ok(Some(mut t)) = r.first_time() else {
        return r;
    };
    while let Ok(Some(_)) = r.sample(t) {
        t += 1000;
    }
    r
}

#[test]
fn long_faults_duplicates_and_gaps_per_tag() {
    let line = |dt: i64, tag: &str, v: &str| format!("{},{tag},{v}\n", iso(T0 + dt));
    let mut log = String::from("time,tag,value\n");
    log += &line(0, "FI-101", "1"); // 2
    log += &line(0, "LI-301", "5"); // 3
    log += &line(0, "FI-101", "2"); // 4: duplicate, replaces line 2
    log += &line(5 * MIN, "FI-101", ""); // 5: missing
    log += &line(12 * MIN, "FI-101", "3"); // 6: gap 0 → 12 min for FI-101
    log += &line(11 * MIN, "LI-301", "6"); // 7: backwards
    log += &line(13 * MIN, "LI-301", "-1"); // 8: LI-301 gap 0 → 13 min; not clamped
    log += "not,enough\n"; // 9
    let tags = [flow("FI-101", 10), tag("LI-301", Interpolation::Linear, 10)];
    let mut r = reader(&log, &tags);
    check(
        at(&mut r, T0),
        &[s(2.0, SampleState::Exact), s(5.0, SampleState::Exact)],
    );
    let r = drain(r);
    let st = r.stats();
    let (fi, li) = (&st.tags[0], &st.tags[1]);
    assert_eq!((fi.duplicates.total, fi.duplicates.first[0].line), (1, 4));
    assert_eq!(fi.duplicates.first[0].value, Some(1.0));
    assert_eq!((fi.missing.total, fi.missing.first[0].line), (1, 5));
    assert_eq!(
        (fi.gaps.first[0].start_line, fi.gaps.first[0].end_line),
        (4, 6)
    );
    assert_eq!(
        (li.gaps.first[0].start_line, li.gaps.first[0].end_line),
        (3, 8)
    );
    assert_eq!((st.backwards.total, st.backwards.first[0].line), (1, 7));
    assert_eq!(
        (st.wrong_fields.total, st.wrong_fields.first[0].line),
        (1, 9)
    );
    assert_eq!((fi.points, li.points), (2, 2));
}

#[test]
fn wide_duplicate_rows_merge_cell_by_cell() {
    // The later row wins where it has a value; its empty cell keeps the
    // earlier value (and is counted as missing).
    let log = format!("time,A,B\n{t},1,2\n{t},3,\n", t = iso(T0));
    let tags = [
        tag("A", Interpolation::Linear, 10),
        tag("B", Interpolation::Linear, 10),
    ];
    let mut r = reader(&log, &tags);
    check(
        at(&mut r, T0),
        &[s(3.0, SampleState::Exact), s(2.0, SampleState::Exact)],
    );
    let st = r.stats();
    assert_eq!(
        (st.duplicate_rows.total, st.tags[0].duplicates.total),
        (1, 1)
    );
    assert_eq!(
        (st.tags[1].duplicates.total, st.tags[1].missing.total),
        (0, 1)
    );
}

#[test]
fn trailing_rows_without_values_end_the_replay_at_the_last_point() {
    let mut log = format!("time,A\n{},1\n{},2\n", iso(T0), iso(T0 + 1000));
    for i in 2..2000 {
        log += &format!("{},\n", iso(T0 + i * 1000));
    }
    let mut r = reader(&log, &[tag("A", Interpolation::Linear, 10)]);
    check(at(&mut r, T0 + 1000), &[s(2.0, SampleState::Exact)]);
    assert!(matches!(r.sample(T0 + 1001), Ok(None)));
    assert!(r.peak_buffered_points() <= 2);
    // A log with no valid value at all.
    let mut r = reader(
        &format!("time,A\n{},\n", iso(T0)),
        &[tag("A", Interpolation::Linear, 10)],
    );
    assert!(matches!(r.first_time(), Ok(None)));
    assert!(matches!(r.sample(T0), Ok(None)));
    assert!(r
        .stats()
        .describe()
        .iter()
        .any(|l| l == "A: no stored point in the log"));
}

#[test]
fn memory_stays_bounded_on_a_200k_row_log() {
    // Long log, 1 s apart: B and C every second, A (linear) every 5 min.
    // A's look-ahead needs its next point, 5 min away, so the reader must
    // buffer about 300 s of B and C (2 points/s): bounded by the rows
    // within max_age (10 min) of t, never by the log length. Values are
    // linear in time, so the interpolation must reproduce them exactly.
    let rows = 200_000;
    let mut last_a = 0;
    let file = TempFile::write("bound.csv", |w| {
        writeln!(w, "time,tag,value")?;
        let mut written = 0;
        let mut sec = 0i64;
        while written < rows {
            let t = T0 / 1000 + sec;
            if sec % 300 == 0 {
                writeln!(w, "{t},A,{}", sec / 300)?;
                last_a = sec;
                written += 1;
            }
            writeln!(w, "{t},B,{}", sec)?;
            writeln!(w, "{t},C,{}.5", sec)?;
            written += 2;
            sec += 1;
        }
        Ok(())
    });
    let tags = [
        tag("A", Interpolation::Linear, 10),
        tag("B", Interpolation::Linear, 10),
        tag("C", Interpolation::Hold, 10),
    ];
    let mut r = match LogReader::open(&file.0, &auto(), &tags) {
        Ok(r) => r,
        Err(e) => panic!("{e}"),
    };
    let mut t = T0;
    let mut n = 0;
    let mut max_now = 0;
    while let Ok(Some(x)) = r.sample(t) {
        let sec = (t - T0) as f64 / 1000.0;
        if sec <= last_a as f64 {
            assert!((x[0].value - sec / 300.0).abs() < 1e-9, "{sec}: {:?}", x[0]);
        } else {
            assert_eq!(x[0].state, SampleState::Held);
        }
        assert!((x[1].value - sec).abs() < 1e-9, "{sec}: {:?}", x[1]);
        assert_eq!(x[2].value, sec.floor() + 0.5);
        n += 1;
        t += 2500;
        max_now = max_now.max(r.buffered_points());
    }
    assert!(n > 30_000, "{n}");
    let peak = r.peak_buffered_points();
    // Bound: 600 s of rows (3 points/s at most) plus one row.
    assert!(peak <= 600 * 3 + 3, "peak {peak}");
    // And the look-ahead is real (about 300 s × 2 points).
    assert!(peak >= 500, "peak {peak}");
    assert!(max_now <= peak);
    assert_eq!(r.stats().rows, rows as u64 + 1);
    assert_eq!(r.stats().peak_buffered_points, peak);
    // A dense wide log needs one row ahead, whatever its length.
    let wide = TempFile::write("bound-wide.csv", |w| {
        writeln!(w, "time,A,B,C")?;
        for i in 0..rows {
            writeln!(w, "{},{i},{},1", iso(T0 + i as i64 * 1000), i % 7)?;
        }
        Ok(())
    });
    let r = match LogReader::open(&wide.0, &auto(), &tags) {
        Ok(r) => drain(r),
        Err(e) => panic!("{e}"),
    };
    assert!(
        r.peak_buffered_points() <= 6,
        "{}",
        r.peak_buffered_points()
    );
    assert_eq!(r.stats().tags[0].ticks.exact, rows as u64);
}

fn try_everything(bytes: Vec<u8>, o: &LogOptions, tags: &[TagOptions]) -> Option<LogStats> {
    let mut r =
        LogReader::from_reader(Box::new(io::Cursor::new(bytes)), "g.csv", o, tags, 60_000).ok()?;
    let first = r.first_time().ok()??;
    let mut t = first;
    for _ in 0..10_000 {
        match r.sample(t) {
            Ok(Some(x)) => assert_eq!(x.len(), tags.len()),
            _ => break,
        }
        t = t.saturating_add(997);
    }
    let _ = r.stats().describe();
    Some(r.stats().clone())
}

#[test]
fn garbage_never_panics() {
    let tags = [flow("FI-101", 1), tag("TI-301", Interpolation::Hold, 1)];
    let all_opts = [
        auto(),
        opts(LogFormat::Wide, TimeFormat::Epoch),
        opts(LogFormat::Long, TimeFormat::Iso8601),
    ];
    let mut rng = Rng(0x9E37_79B9_7F4A_7C15);
    let alphabet = b"0123456789,.-+:TZ\"\n\r eE\xEF\xBB\xBFNaNtagvluimeFI-101TI-301";
    for round in 0..300 {
        let len = rng.below(3000) as usize;
        let mut bytes: Vec<u8> = match round % 3 {
            0 => Vec::new(),
            1 => b"time,FI-101,TI-301\n".to_vec(),
            _ => b"time,tag,value,quality\n".to_vec(),
        };
        for _ in 0..len {
            let b = if rng.below(4) == 0 {
                rng.below(256) as u8
            } else {
                alphabet[rng.below(alphabet.len() as u64) as usize]
            };
            bytes.push(b);
        }
        for o in &all_opts {
            let _ = try_everything(bytes.clone(), o, &tags);
        }
    }
    // Every truncation of a valid log, and each with one byte flipped.
    let mut log = String::from("time,FI-101,TI-301\n");
    for i in 0..20 {
        log += &format!("{},{}.25,\"{}\"\n", iso(T0 + i * 1000), i, 20 - i);
    }
    let full = log.into_bytes();
    for cut in 0..full.len() {
        let part = full[..cut].to_vec();
        let _ = try_everything(part.clone(), &auto(), &tags);
        let mut flipped = full.clone();
        flipped[cut] ^= 1 << rng.below(8);
        let _ = try_everything(flipped, &auto(), &tags);
    }
}

#[test]
fn bom_and_crlf_read_like_plain_text() {
    let tags = [flow("FI-101", 10), tag("TI-301", Interpolation::Hold, 10)];
    let mut plain = String::from("time,FI-101,TI-301\n");
    for i in 0..50i64 {
        plain += &format!("{},{},{}\n", iso(T0 + i * 2000), (i * 7 % 11) - 2, i % 3);
    }
    let crlf = format!("\u{FEFF}{}", plain.replace('\n', "\r\n"));
    let mut a = reader(&plain, &tags);
    let mut b = reader(&crlf, &tags);
    for k in 0..100 {
        let t = T0 + k * 900;
        let (x, y) = (at(&mut a, t), at(&mut b, t));
        check(y, &x);
    }
    let (x, y) = (at(&mut a, T0 + 98_000), at(&mut b, T0 + 98_000));
    check(y, &x);
    assert!(a.sample(T0 + 98_001).ok() == Some(None) && b.sample(T0 + 98_001).ok() == Some(None));
    assert!(b.stats().rows_rejected() == 0 && b.stats().rows == 50);
    assert_eq!(a.stats().tags, b.stats().tags);
    // A BOM before a long header too.
    let log = format!("\u{FEFF}time,tag,value\r\n{},FI-101,1\r\n", iso(T0));
    let mut r = reader(&log, &tags);
    assert_eq!(r.stats().format, LogFormat::Long);
    check(at(&mut r, T0), &[s(1.0, SampleState::Exact), missing()]);
}

#[test]
fn fault_lists_are_bounded_with_totals() {
    let mut log = String::from("time,A\n");
    for i in 0..500 {
        log += &format!("{},x\n", iso(T0 + i * 1000));
    }
    let mut r = reader(&log, &[tag("A", Interpolation::Linear, 10)]);
    assert!(matches!(r.first_time(), Ok(None)));
    let m = &r.stats().tags[0].missing;
    assert_eq!((m.total, m.first.len()), (500, KEEP_FIRST));
    assert_eq!(m.first[0].detail, "not a number 'x'");
}

#[test]
fn too_dense_a_log_for_its_max_age_stops_with_an_error() {
    // A linear tag whose next point is 9 min away makes the reader buffer
    // every point of the dense tag in between (540 of them); with the limit
    // lowered to 100 that is refused at the row that would exceed it: the
    // points at T0 are consumed, FAST's points at 1..=100 s (lines 4–103)
    // fill the buffer, line 104 is one too many.
    let mut log = String::from("time,tag,value\n");
    log += &format!("{},SLOW,1\n", iso(T0));
    for i in 0..600 {
        log += &format!("{},FAST,{i}\n", iso(T0 + i * 1000));
        if i == 540 {
            log += &format!("{},SLOW,2\n", iso(T0 + 540_000));
        }
    }
    let tags = [
        tag("SLOW", Interpolation::Linear, 10),
        tag("FAST", Interpolation::Linear, 10),
    ];
    let mut r = reader(&log, &tags);
    r.buffer.limit = 100;
    match r.sample(T0 + 500) {
        Err(LogError::LookAheadOverflow {
            line, limit: 100, ..
        }) => assert_eq!(line, 104),
        other => panic!("{other:?}"),
    }
    // With the normal limit it interpolates SLOW across the 9 minutes.
    let mut r = reader(&log, &tags);
    check(
        at(&mut r, T0 + 270_000),
        &[
            s(1.5, SampleState::Interpolated),
            s(270.0, SampleState::Exact),
        ],
    );
}

#[test]
fn a_row_one_millisecond_back_is_rejected() {
    let log = "time,A\n1772341200.001,1\n1772341200.000,2\n1772341200.001,3\n";
    let mut r = reader(log, &[tag("A", Interpolation::Linear, 10)]);
    check(at(&mut r, T0 + 1), &[s(3.0, SampleState::Exact)]);
    let st = r.stats();
    assert_eq!((st.backwards.total, st.backwards.first[0].line), (1, 3));
    assert_eq!(st.backwards.first[0].time, Some(T0));
    assert_eq!(st.tags[0].duplicates.total, 1);
}
