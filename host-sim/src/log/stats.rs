//! What the reader counted: plain data with public fields (ready for a
//! serialiser), bounded lists of the first occurrences, and a summary for
//! people.

use super::time::{format_duration, format_ms};
use crate::plant::{Decimal, LogFormat, TimeFormat};
use crate::zone::Zone;

/// How many occurrences of each kind are kept with their details; the rest
/// are only counted.
pub const KEEP_FIRST: usize = 50;

/// One occurrence of a fault at a line of the log.
#[derive(Clone, Debug, PartialEq, serde::Serialize)]
pub struct Fault {
    /// 1-based line of the log.
    pub line: u64,
    /// Time of the row, ms since the epoch, when it could be read
    /// (serialised as RFC 3339 text).
    #[serde(serialize_with = "opt_time")]
    pub time: Option<i64>,
    /// The value concerned (raw value of a clamped point), when numeric.
    pub value: Option<f64>,
    /// Short detail: the offending text, a reason, field counts.
    pub detail: String,
}

/// A count of faults of one kind and the first [`KEEP_FIRST`] of them.
#[derive(Clone, Debug, Default, PartialEq, serde::Serialize)]
pub struct FaultList {
    /// Every occurrence.
    pub total: u64,
    /// The first occurrences, in file order.
    pub first: Vec<Fault>,
}

impl FaultList {
    /// Count one occurrence; the detail is only built while it is kept.
    pub fn push(
        &mut self,
        line: u64,
        time: Option<i64>,
        value: Option<f64>,
        detail: impl FnOnce() -> String,
    ) {
        self.total += 1;
        if self.first.len() < KEEP_FIRST {
            self.first.push(Fault {
                line,
                time,
                value,
                detail: detail(),
            });
        }
    }
}

/// An interval of the log, `[start, end]` ms since the epoch, with the lines
/// of its two ends.
#[derive(Clone, Debug, PartialEq, Eq, serde::Serialize)]
pub struct Window {
    /// Start, ms since the epoch (serialised as RFC 3339 text).
    #[serde(serialize_with = "time")]
    pub start: i64,
    /// End, ms since the epoch (serialised as RFC 3339 text).
    #[serde(serialize_with = "time")]
    pub end: i64,
    /// Line of the start.
    pub start_line: u64,
    /// Line of the end.
    pub end_line: u64,
}

/// A count of windows of one kind, their summed length and the first
/// [`KEEP_FIRST`] of them.
#[derive(Clone, Debug, Default, PartialEq, Eq, serde::Serialize)]
pub struct WindowList {
    /// Every window.
    pub total: u64,
    /// Summed length of every window, ms.
    pub total_ms: u64,
    /// The first windows, in time order.
    pub first: Vec<Window>,
}

impl WindowList {
    /// Record a window.
    pub fn push(&mut self, w: Window) {
        self.total += 1;
        self.total_ms = self
            .total_ms
            .saturating_add(w.end.saturating_sub(w.start).unsigned_abs());
        if self.first.len() < KEEP_FIRST {
            self.first.push(w);
        }
    }
}

/// How many `sample` calls returned each state, for one tag.
#[derive(Clone, Debug, Default, PartialEq, Eq, serde::Serialize)]
pub struct StateTicks {
    /// A stored point at the sample time.
    pub exact: u64,
    /// Linear between two stored points.
    pub interpolated: u64,
    /// Last value held, within the maximum age.
    pub held: u64,
    /// Last value held, older than the maximum age.
    pub stale: u64,
    /// No stored point yet.
    pub missing: u64,
}

/// Per-tag counts.
#[derive(Clone, Debug, Default, PartialEq, serde::Serialize)]
pub struct TagStats {
    /// Tag name.
    pub tag: String,
    /// Maximum age used for this tag, ms.
    pub max_age_ms: u64,
    /// Stored points accepted (a duplicate replacing a point is not a new one).
    pub points: u64,
    /// Time of the first accepted point, ms.
    #[serde(serialize_with = "opt_time")]
    pub first_time: Option<i64>,
    /// Time of the last accepted point, ms.
    #[serde(serialize_with = "opt_time")]
    pub last_time: Option<i64>,
    /// Missing values: empty cell, `NaN`, infinite or non-numeric text.
    pub missing: FaultList,
    /// Points replaced by a later row at the same time (last write wins).
    pub duplicates: FaultList,
    /// Long format: points of bad quality, rejected.
    pub bad_quality: FaultList,
    /// Long format: points of uncertain (or unrecognised) quality, used.
    pub uncertain_quality: FaultList,
    /// Intervals between consecutive stored points longer than the maximum age.
    pub gaps: WindowList,
    /// Linear (analog) tags: runs of bit-identical consecutive stored points
    /// longer than the flat-line age, recorded when the run ends (or at the
    /// end of the log).
    pub flat_lines: WindowList,
    /// Runs of consecutive rows where this tag's value was missing (from the
    /// first to the last missing row of the run), for marking on plots.
    pub missing_runs: WindowList,
    /// States returned by `sample` (`ticks.stale` is the stale-tick count).
    pub ticks: StateTicks,
    /// How the tag was stored: its typical interval, and whether it looks
    /// exception-stored (complete once the log has been read).
    pub storage: super::storage::Pattern,
    /// The missing-value run still open (closed by the next valid value or
    /// the end of the log).
    #[serde(skip)]
    pub(crate) open_missing: Option<Window>,
}

/// Extend the open run `open` with a row at `t`, `line`.
pub(crate) fn extend_run(open: &mut Option<Window>, t: i64, line: u64) {
    match open {
        Some(w) => {
            w.end = t;
            w.end_line = line;
        }
        None => {
            *open = Some(Window {
                start: t,
                end: t,
                start_line: line,
                end_line: line,
            })
        }
    }
}

/// Close the open run into `list`.
pub(crate) fn close_run(open: &mut Option<Window>, list: &mut WindowList) {
    if let Some(w) = open.take() {
        list.push(w);
    }
}

/// How the file's rows were ordered in time.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "snake_case")]
pub enum OrderKind {
    /// Every row at or after the one before it (or not read by path).
    #[default]
    InOrder,
    /// Every row at or before the one before it.
    NewestFirst,
    /// A long log whose time starts over, for example one tag after another.
    Grouped,
    /// Rows out of order in places.
    Shuffled,
}

/// The order pass over a log read from a file.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, serde::Serialize)]
pub struct Order {
    /// What the order pass found.
    pub kind: OrderKind,
    /// Timed rows later than the row before them.
    pub steps_forward: u64,
    /// Timed rows earlier than the row before them.
    pub steps_back: u64,
    /// Rows earlier than some row before them.
    pub out_of_order_rows: u64,
    /// The first of those rows.
    pub first_out_of_order_line: Option<u64>,
    /// The on-disk sort, when the log was not in time order.
    pub sort: Option<super::sorted::SortFigures>,
}

impl Order {
    /// One line for people, or `None` for a log in time order.
    pub fn describe(&self) -> Option<String> {
        let how = match self.kind {
            OrderKind::InOrder => return None,
            OrderKind::NewestFirst => "newest first".to_string(),
            OrderKind::Grouped => format!(
                "grouped (time starts over {} {}, as in a log exported one tag after another)",
                self.steps_back,
                plural(self.steps_back, "time", "times")
            ),
            OrderKind::Shuffled => format!(
                "out of time order in places ({} {} earlier than a row before {}, first at line {})",
                self.out_of_order_rows,
                plural(self.out_of_order_rows, "row", "rows"),
                plural(self.out_of_order_rows, "it", "them"),
                self.first_out_of_order_line.unwrap_or(0)
            ),
        };
        let sort = self.sort.map_or(String::new(), |s| {
            format!(
                " ({} sorted {}, {:.1} MB of temporary files)",
                s.runs,
                plural(s.runs, "run", "runs"),
                s.temp_bytes as f64 / 1e6
            )
        });
        Some(format!(
            "the rows are {how}: they were sorted by time on disk before the replay{sort}"
        ))
    }
}

/// Everything the reader counted.
#[derive(Clone, Debug, PartialEq, serde::Serialize)]
pub struct LogStats {
    /// The log's path (or the name given to an in-memory reader).
    pub path: String,
    /// Layout in use (never `Auto`).
    pub format: LogFormat,
    /// Timestamp notation in use (`Auto` until the first timestamp is read).
    pub time: TimeFormat,
    /// The epoch unit was guessed from the number of digits (13: ms, 16:
    /// µs, otherwise s) or from the column's name (`time_ms`).
    pub time_unit_guessed: Option<String>,
    /// Zone of naive timestamps (`[log] timezone`), if set.
    pub timezone: Option<String>,
    /// Zone of the times in [`LogStats::describe`] (and the reports).
    #[serde(serialize_with = "zone_label")]
    pub report_zone: Zone,
    /// Field delimiter in use, as written in `[log] delimiter` (`tab` for
    /// a tab).
    pub delimiter: String,
    /// Whether the delimiter was detected (not configured).
    pub delimiter_detected: bool,
    /// Decimal separator in use (never `Auto`).
    pub decimal: Decimal,
    /// Flat-line age in use, ms (0: detection off).
    pub flat_line_ms: u64,
    /// Lines read, header and blank lines included.
    pub lines: u64,
    /// Data rows read (non-blank lines after the header).
    pub rows: u64,
    /// Blank lines skipped.
    pub blank_lines: u64,
    /// Long format: rows of tags not asked for (not checked further).
    pub rows_other_tags: u64,
    /// Long format: the first distinct tags not asked for (at most 10).
    pub other_tags_seen: Vec<String>,
    /// Long format: line of the first row of a tag not asked for.
    pub first_other_tag_line: Option<u64>,
    /// Rejected: timestamp that cannot be parsed.
    pub bad_time: FaultList,
    /// Rejected: a local time in the hour skipped when clocks are set
    /// forward (daylight saving time starts): no such instant.
    pub dst_skipped: FaultList,
    /// Local times in the hour repeated when clocks are set back, read by
    /// row order: the first offset (the earlier instant) until time goes
    /// back within the hour, then the second. All are counted here (used,
    /// not rejected); the detail gives the offset chosen.
    pub dst_repeated: FaultList,
    /// Of [`LogStats::dst_repeated`], the stamps read with the second
    /// (later) offset.
    pub dst_repeated_later: u64,
    /// Rejected: timestamp earlier than the previous accepted row.
    pub backwards: FaultList,
    /// Rejected: number of fields differs from the header's.
    pub wrong_fields: FaultList,
    /// Rejected: unterminated quote, text after a quote, line too long.
    pub malformed: FaultList,
    /// Wide format: rows with the same time as the previous row (merged,
    /// later values win).
    pub duplicate_rows: FaultList,
    /// Most stored points buffered at once (look-ahead), all tags.
    pub peak_buffered_points: usize,
    /// The order of the rows in the file, and the sort when it was not
    /// time order.
    pub order: Order,
    /// Per tag, in the order asked for.
    pub tags: Vec<TagStats>,
}

impl LogStats {
    /// Rows rejected whole, all reasons.
    pub fn rows_rejected(&self) -> u64 {
        self.bad_time.total
            + self.dst_skipped.total
            + self.backwards.total
            + self.wrong_fields.total
            + self.malformed.total
    }

    /// The delimiter as a byte.
    fn delimiter_byte(&self) -> u8 {
        match self.delimiter.as_str() {
            "tab" => b'\t',
            d => d.bytes().next().unwrap_or(b','),
        }
    }

    /// Why no tag has any valid point (for a log that gives nothing to
    /// replay): each cause that occurred, the most frequent first, with its
    /// count and first offending line.
    pub fn why_empty(&self) -> String {
        let zone = &self.report_zone;
        if self.rows == 0 {
            return format!(
                "no data rows after the header (line {} is the last line of the file)",
                self.lines
            );
        }
        let mut causes: Vec<(u64, String)> = Vec::new();
        let mut row_cause = |list: &FaultList, what: &str, hint: &str| {
            if list.total > 0 {
                causes.push((
                    list.total,
                    format!(
                        "{} of {} {} {what}{}{hint}",
                        list.total,
                        self.rows,
                        plural(self.rows, "row", "rows"),
                        first_fault(list, zone)
                    ),
                ));
            }
        };
        let time_hint = match self.time {
            TimeFormat::Pattern => "; check [log] time_format",
            _ => {
                "; set [log] time (\"iso8601\", \"epoch\", \"epoch_ms\", \"epoch_us\") or \
                 [log] time_format (e.g. \"%m/%d/%Y %I:%M:%S %p\"), and [log] timezone for \
                 times without offset"
            }
        };
        row_cause(&self.bad_time, "with an unreadable timestamp", time_hint);
        row_cause(
            &self.dst_skipped,
            "with a local time that does not exist (clocks set forward)",
            "",
        );
        row_cause(
            &self.backwards,
            "going back in time",
            "; rows must be in time order",
        );
        let wrong_hint = format!(
            "; the delimiter is {}{}: set [log] delimiter if that is wrong",
            super::header::delimiter_name(self.delimiter_byte()),
            if self.delimiter_detected {
                " (detected)"
            } else {
                ""
            }
        );
        row_cause(
            &self.wrong_fields,
            "with a different number of fields than the header",
            &wrong_hint,
        );
        row_cause(&self.malformed, "malformed", "");
        if self.rows_other_tags > 0 {
            causes.push((
                self.rows_other_tags,
                format!(
                    "{} of {} {} of tags not asked for (first at line {}; tags seen: {}); \
                     tags are matched exactly",
                    self.rows_other_tags,
                    self.rows,
                    plural(self.rows, "row", "rows"),
                    self.first_other_tag_line.unwrap_or(0),
                    self.other_tags_seen
                        .iter()
                        .map(|t| format!("'{t}'"))
                        .collect::<Vec<_>>()
                        .join(", ")
                ),
            ));
        }
        for t in &self.tags {
            let decimal = if self.decimal == Decimal::Comma {
                "; values are read with a decimal comma ([log] decimal)"
            } else {
                "; a decimal comma needs [log] decimal = \"comma\" and a delimiter other than ','"
            };
            let lists = [
                (
                    &t.missing,
                    "value missing or not a number",
                    "values missing or not numbers",
                    decimal,
                ),
                (
                    &t.bad_quality,
                    "point of bad quality (rejected)",
                    "points of bad quality (rejected)",
                    "",
                ),
            ];
            for (list, one, many, hint) in lists {
                if list.total > 0 {
                    causes.push((
                        list.total,
                        format!(
                            "{}: {} {}{}{hint}",
                            t.tag,
                            list.total,
                            plural(list.total, one, many),
                            first_fault(list, zone)
                        ),
                    ));
                }
            }
        }
        if causes.is_empty() {
            return format!(
                "{} rows read, none holds a value of a tag asked for",
                self.rows
            );
        }
        causes.sort_by_key(|c| std::cmp::Reverse(c.0));
        causes
            .into_iter()
            .map(|(_, c)| c)
            .collect::<Vec<_>>()
            .join("; and ")
    }

    /// Stats of one tag by name.
    pub fn tag(&self, tag: &str) -> Option<&TagStats> {
        self.tags.iter().find(|t| t.tag == tag)
    }

    /// Kept gap and flat-line windows of all tags, for plotting: `(start,
    /// end, label)` in ms since the epoch, label `"data gap"` or `"flat
    /// line"` (one label per kind, so a plot can give each kind one colour).
    /// Windows identical in time and kind (a row gap of a wide log is a gap
    /// of every tag) are given once; sorted by start.
    pub fn fault_windows(&self) -> Vec<(i64, i64, String)> {
        let mut out: Vec<(i64, i64, &str)> = Vec::new();
        for t in &self.tags {
            out.extend(t.gaps.first.iter().map(|w| (w.start, w.end, "data gap")));
            out.extend(
                t.flat_lines
                    .first
                    .iter()
                    .map(|w| (w.start, w.end, "flat line")),
            );
            out.extend(
                t.missing_runs
                    .first
                    .iter()
                    .map(|w| (w.start, w.end, "missing values")),
            );
        }
        out.sort_unstable();
        out.dedup();
        out.into_iter()
            .map(|(a, b, label)| (a, b, label.to_string()))
            .collect()
    }

    /// A summary for people: one line for the log, then one per fault kind
    /// that occurred, with its count and first occurrence, e.g.
    /// `FI-101: 312 missing values (first at line 1045, 2026-03-01T07:12:00Z: empty)`.
    pub fn describe(&self) -> Vec<String> {
        let mut out = Vec::new();
        let format = match self.format {
            LogFormat::Long => "long",
            _ => "wide",
        };
        let zone = &self.report_zone;
        let time = match self.time {
            TimeFormat::Iso8601 => "ISO 8601 timestamps",
            TimeFormat::Epoch => "epoch-second timestamps",
            TimeFormat::EpochMs => "epoch-millisecond timestamps",
            TimeFormat::EpochUs => "epoch-microsecond timestamps",
            TimeFormat::Pattern => "timestamps by [log] time_format",
            TimeFormat::Auto => "no timestamp read",
        };
        let mut dialect = String::new();
        if self.delimiter != "," {
            dialect.push_str(&format!(
                ", {} delimiter",
                super::header::delimiter_name(self.delimiter_byte())
            ));
        }
        if self.decimal == Decimal::Comma {
            dialect.push_str(", decimal comma");
        }
        if let Some(z) = &self.timezone {
            dialect.push_str(&format!(", local times in {z}"));
        }
        out.push(format!(
            "{}: {} rows read ({format} format, {time}{dialect}), {} rejected",
            self.path,
            self.rows,
            self.rows_rejected()
        ));
        out.extend(self.order.describe());
        if let Some(why) = &self.time_unit_guessed {
            out.push(format!(
                "timestamp unit guessed {why}; set [log] time to be sure"
            ));
        }
        if self.dst_repeated.total > 0 {
            out.push(format!(
                "{} {} in a repeated hour (clocks set back), read by row order: {} with the \
                 first offset, {} with the second{}",
                self.dst_repeated.total,
                plural(self.dst_repeated.total, "timestamp", "timestamps"),
                self.dst_repeated.total - self.dst_repeated_later,
                self.dst_repeated_later,
                first_fault(&self.dst_repeated, zone)
            ));
        }
        let rows = [
            (&self.bad_time, "rejected: timestamp cannot be parsed"),
            (
                &self.dst_skipped,
                "rejected: local time in the hour skipped when clocks were set forward",
            ),
            (
                &self.backwards,
                "rejected: timestamp earlier than the previous row",
            ),
            (&self.wrong_fields, "rejected: wrong number of fields"),
            (&self.malformed, "rejected: malformed line"),
            (
                &self.duplicate_rows,
                "with the same timestamp as the previous row (merged, later values win)",
            ),
        ];
        for (list, what) in rows {
            if list.total > 0 {
                out.push(format!(
                    "{} {} {what}{}",
                    list.total,
                    plural(list.total, "row", "rows"),
                    first_fault(list, zone)
                ));
            }
        }
        if self.rows_other_tags > 0 {
            out.push(format!(
                "{} {} of other tags ignored",
                self.rows_other_tags,
                plural(self.rows_other_tags, "row", "rows")
            ));
        }
        for t in &self.tags {
            let name = &t.tag;
            if t.points == 0 {
                out.push(format!("{name}: no stored point in the log"));
            }
            let faults = [
                (&t.missing, "missing value", "missing values"),
                (
                    &t.duplicates,
                    "point replaced by a later duplicate",
                    "points replaced by later duplicates",
                ),
                (
                    &t.bad_quality,
                    "bad-quality point rejected",
                    "bad-quality points rejected",
                ),
                (
                    &t.uncertain_quality,
                    "uncertain-quality point used",
                    "uncertain-quality points used",
                ),
            ];
            for (list, one, many) in faults {
                if list.total > 0 {
                    out.push(format!(
                        "{name}: {} {}{}",
                        list.total,
                        plural(list.total, one, many),
                        first_fault(list, zone)
                    ));
                }
            }
            let age = format_duration(t.max_age_ms);
            let flat = format_duration(self.flat_line_ms);
            let windows = [
                (&t.gaps, format!("longer than {age}"), "gap", "gaps"),
                (
                    &t.flat_lines,
                    format!("longer than {flat}"),
                    "flat line",
                    "flat lines",
                ),
                (
                    &t.missing_runs,
                    "of missing values".to_string(),
                    "run",
                    "runs",
                ),
            ];
            for (list, limit, one, many) in windows {
                if list.total > 0 {
                    out.push(format!(
                        "{name}: {} {} {limit}, {} in all{}",
                        list.total,
                        plural(list.total, one, many),
                        format_duration(list.total_ms),
                        first_window(list, zone)
                    ));
                }
            }
            if t.ticks.stale > 0 {
                out.push(format!(
                    "{name}: {} stale {} (value older than {age})",
                    t.ticks.stale,
                    plural(t.ticks.stale, "sample", "samples")
                ));
            }
        }
        out
    }
}

fn plural<'a>(n: u64, one: &'a str, many: &'a str) -> &'a str {
    if n == 1 {
        one
    } else {
        many
    }
}

/// A time for a description: RFC 3339 UTC as before (`…Z`, milliseconds
/// only when not whole), or ISO 8601 with the offset in another zone.
fn at(zone: &Zone, t: i64) -> String {
    match zone {
        Zone::Utc => format_ms(t),
        _ => zone.iso(t),
    }
}

fn first_fault(list: &FaultList, zone: &Zone) -> String {
    let Some(f) = list.first.first() else {
        return String::new();
    };
    let mut s = format!(" (first at line {}", f.line);
    if let Some(t) = f.time {
        s.push_str(", ");
        s.push_str(&at(zone, t));
    }
    if let Some(v) = f.value {
        s.push_str(&format!(", value {v}"));
    }
    if !f.detail.is_empty() {
        s.push_str(": ");
        s.push_str(&f.detail);
    }
    s.push(')');
    s
}

fn first_window(list: &WindowList, zone: &Zone) -> String {
    match list.first.first() {
        Some(w) => format!(
            " (first {} to {}, lines {}–{})",
            at(zone, w.start),
            at(zone, w.end),
            w.start_line,
            w.end_line
        ),
        None => String::new(),
    }
}

/// A time in ms since the epoch as RFC 3339 text.
fn time<Se: serde::Serializer>(t: &i64, s: Se) -> Result<Se::Ok, Se::Error> {
    s.serialize_str(&format_ms(*t))
}

/// An optional time in ms since the epoch as RFC 3339 text.
fn opt_time<Se: serde::Serializer>(t: &Option<i64>, s: Se) -> Result<Se::Ok, Se::Error> {
    match t {
        Some(t) => s.serialize_str(&format_ms(*t)),
        None => s.serialize_none(),
    }
}

/// A zone as its name.
fn zone_label<Se: serde::Serializer>(z: &Zone, s: Se) -> Result<Se::Ok, Se::Error> {
    s.serialize_str(z.label())
}
