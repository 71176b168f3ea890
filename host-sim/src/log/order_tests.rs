//! Logs not in time order: newest-first, grouped by tag, shuffled. Each is
//! the same invented data as a log in time order, so the expected samples
//! are those of the ordered file (the construction is the reference).

use super::*;
use std::io::Write;

const T0: i64 = 1_772_341_200_000; // 2026-03-01T05:00:00Z
const S: i64 = 1000;

fn tag(name: &str, interpolation: Interpolation) -> TagOptions {
    TagOptions {
        tag: name.into(),
        interpolation,
        max_age_ms: 600_000,
        flow: false,
        conditioning: Default::default(),
    }
}

fn options() -> LogOptions {
    LogOptions {
        max_age_ms: 600_000,
        ..LogOptions::default()
    }
}

fn file(lines: &[String]) -> tempfile::NamedTempFile {
    let mut f = tempfile::NamedTempFile::new().unwrap();
    for l in lines {
        writeln!(f, "{l}").unwrap();
    }
    f
}

/// Every sample from the first point to the end, every `step` ms.
fn samples(
    path: &Path,
    tags: &[TagOptions],
    budget: usize,
    step: i64,
) -> (Vec<Vec<Bits>>, LogStats) {
    let mut r = LogReader::open_sorting(path, &options(), tags, DEFAULT_FLAT_LINE_MS, budget)
        .unwrap_or_else(|e| panic!("{e}"));
    let t0 = r.first_time().unwrap().unwrap();
    let mut out = Vec::new();
    let mut t = t0;
    while let Some(s) = r.sample(t).unwrap() {
        out.push(s.to_vec());
        t += step;
    }
    (
        out.iter()
            .map(|row| row.iter().map(Bits::of).collect())
            .collect(),
        r.stats().clone(),
    )
}

/// A sample compared bit for bit (`NaN` equal to itself).
#[derive(Debug, PartialEq)]
struct Bits(u64, SampleState);

impl Bits {
    fn of(s: &TagSample) -> Self {
        Bits(s.value.to_bits(), s.state)
    }
}

/// A wide log of two tags every 10 s for 20 min, some cells empty.
fn wide_rows() -> Vec<String> {
    (0..120)
        .map(|i| {
            let t = (T0 + i * 10 * S) / 1000;
            let a = if i % 7 == 3 {
                String::new()
            } else {
                format!("{}", 1.0 + 0.5 * i as f64)
            };
            format!("{t},{a},{}", (i % 5) as f64)
        })
        .collect()
}

#[test]
fn a_newest_first_wide_log_reads_as_the_ordered_one() {
    let tags = [
        tag("FI-7", Interpolation::Linear),
        tag("XV-7", Interpolation::Hold),
    ];
    let rows = wide_rows();
    let mut ordered = vec!["time,FI-7,XV-7".to_string()];
    ordered.extend(rows.iter().cloned());
    let mut newest = vec!["time,FI-7,XV-7".to_string()];
    newest.extend(rows.iter().rev().cloned());
    let (f1, f2) = (file(&ordered), file(&newest));
    let (want, s1) = samples(f1.path(), &tags, 1 << 20, 3 * S);
    // A budget of a few lines: many runs and a cascade of merges.
    for budget in [1 << 20, 200, 1] {
        let (got, s2) = samples(f2.path(), &tags, budget, 3 * S);
        assert_eq!(got, want, "budget {budget}");
        assert_eq!(s2.order.kind, OrderKind::NewestFirst);
        assert_eq!(s2.order.steps_back, 119);
        assert_eq!(s2.rows, s1.rows);
        assert_eq!(s2.rows_rejected(), 0);
        assert_eq!(s2.tags[0].missing.total, s1.tags[0].missing.total);
        assert_eq!(s2.tags[0].points, s1.tags[0].points);
        let sort = s2.order.sort.unwrap();
        if budget == 1 {
            assert!(
                sort.runs > FAN_IN_FOR_TESTS && sort.cascade_merges > 0,
                "{sort:?}"
            );
        }
    }
    assert_eq!(s1.order.kind, OrderKind::InOrder);
    assert!(s1.order.sort.is_none());
}

const FAN_IN_FOR_TESTS: u64 = sorted::FAN_IN as u64;

#[test]
fn a_long_log_grouped_by_tag_reads_as_the_ordered_one() {
    // Two tags stored at their own times (exception-style), and a tag of
    // no interest; grouped by tag, and then in time order.
    let tags = [
        tag("TI-3", Interpolation::Linear),
        tag("LI-3", Interpolation::Linear),
    ];
    let mut by_tag: Vec<(i64, String)> = Vec::new();
    for i in 0..40 {
        by_tag.push((T0 + i * 15 * S, format!("TI-3,{}", 20.0 + i as f64 * 0.25)));
    }
    for i in 0..25 {
        by_tag.push((
            T0 + 7 * S + i * 23 * S,
            format!("LI-3,{}", 1.5 - i as f64 * 0.01),
        ));
    }
    for i in 0..10 {
        by_tag.push((T0 + i * 60 * S, format!("PI-9,{i}")));
    }
    let line = |(t, rest): &(i64, String)| {
        let (tag, value) = rest.split_once(',').unwrap();
        format!("{},{tag},{value},192", super::time::format_ms(*t))
    };
    let mut grouped = vec!["time,tag,value,quality".to_string()];
    grouped.extend(by_tag.iter().map(line));
    let mut ordered_rows = by_tag.clone();
    ordered_rows.sort_by_key(|(t, _)| *t);
    let mut ordered = vec!["time,tag,value,quality".to_string()];
    ordered.extend(ordered_rows.iter().map(line));
    let (f1, f2) = (file(&ordered), file(&grouped));
    let (want, _) = samples(f1.path(), &tags, 1 << 20, 5 * S);
    let (got, stats) = samples(f2.path(), &tags, 300, 5 * S);
    assert_eq!(got, want);
    assert_eq!(stats.order.kind, OrderKind::Grouped);
    assert_eq!(stats.order.steps_back, 2);
    assert_eq!(stats.rows_other_tags, 10);
    let text = stats.describe().join("\n");
    assert!(text.contains("time starts over 2 times"), "{text}");
}

#[test]
fn faults_keep_their_own_line_numbers_after_sorting() {
    // Newest first with a bad timestamp on line 4, a short row on line 6
    // and an over-long line on line 8 (line numbers of this file).
    let mut lines = vec!["time,FI-7".to_string()];
    for i in (0..10).rev() {
        lines.push(format!("{},{}", (T0 + i * 10 * S) / 1000, i));
    }
    lines[3] = "yesterday,3".into();
    lines[5] = format!("{}", (T0 + 5 * 10 * S) / 1000);
    lines[7] = "x".repeat(lines::MAX_LINE + 5);
    let f = file(&lines);
    let (_, stats) = samples(f.path(), &[tag("FI-7", Interpolation::Linear)], 64, 10 * S);
    assert_eq!(stats.order.kind, OrderKind::NewestFirst);
    assert_eq!(stats.bad_time.first[0].line, 4);
    assert_eq!(stats.wrong_fields.first[0].line, 6);
    assert_eq!(stats.malformed.first[0].line, 8);
    assert_eq!(stats.rows, 10);
    assert_eq!(stats.lines, 11);
    assert_eq!(stats.tags[0].points, 7);
}

/// xorshift64* (Vigna 2016): a seeded shuffle for the property below.
fn shuffle<T>(v: &mut [T], seed: u64) {
    let mut x = seed | 1;
    for i in (1..v.len()).rev() {
        x ^= x >> 12;
        x ^= x << 25;
        x ^= x >> 27;
        let r = x.wrapping_mul(0x2545_f491_4f6c_dd1d);
        v.swap(i, (r % (i as u64 + 1)) as usize);
    }
}

proptest::proptest! {
    #![proptest_config(proptest::prelude::ProptestConfig::with_cases(48))]

    /// Any permutation of a log's rows, sorted with any run budget, reads
    /// sample for sample as the log in time order (the reference is the
    /// ordered file itself). Times strictly increase, so the order is
    /// unique.
    #[test]
    fn any_order_reads_as_time_order(
        gaps in proptest::collection::vec(1i64..40, 2..150),
        seed in proptest::prelude::any::<u64>(),
        budget in 1usize..4096,
        long in proptest::prelude::any::<bool>(),
    ) {
        let tags = [tag("FI-7", Interpolation::Linear), tag("XV-7", Interpolation::Hold)];
        let mut t = T0 / 1000;
        let mut rows = Vec::new();
        for (i, g) in gaps.iter().enumerate() {
            t += g;
            if long {
                rows.push(format!("{t},FI-7,{}", (i as f64 * 0.37).sin()));
                if i % 3 == 0 {
                    rows.push(format!("{t},XV-7,{}", i % 2));
                }
            } else {
                rows.push(format!("{t},{},{}", (i as f64 * 0.37).sin(), i % 2));
            }
        }
        let header = if long { "time,tag,value" } else { "time,FI-7,XV-7" };
        let mut ordered = vec![header.to_string()];
        ordered.extend(rows.iter().cloned());
        let mut shuffled_rows = rows.clone();
        shuffle(&mut shuffled_rows, seed);
        let mut shuffled = vec![header.to_string()];
        shuffled.extend(shuffled_rows);
        let (f1, f2) = (file(&ordered), file(&shuffled));
        let (want, s1) = samples(f1.path(), &tags, 1 << 20, S);
        let (got, s2) = samples(f2.path(), &tags, budget, S);
        proptest::prop_assert_eq!(got, want);
        proptest::prop_assert_eq!(s2.rows, s1.rows);
        proptest::prop_assert_eq!(s2.rows_rejected(), 0);
        proptest::prop_assert_eq!(s2.tags[0].points, s1.tags[0].points);
    }
}
