//! Streaming historian-log reader and resampler.
//!
//! A [`LogReader`] reads a CSV log row by row and answers, for a
//! non-decreasing sequence of times, the value of every asked-for tag
//! ([`LogReader::sample`]), counting every value it had to repair, hold or
//! reject in [`LogStats`].
//!
//! # Formats
//!
//! Delimited text with a header row required (a UTF-8 byte-order mark and
//! `\r\n` line ends are accepted; fields may be quoted with `"`, a quoted
//! field ends on its own line). The delimiter is `,` `;` tab or `|`
//! ([`LogOptions::delimiter`]; detected from the header and the first
//! [`DETECT_ROWS`] rows: the one giving the most fields, at least two, the
//! same number on every row), and numbers use a decimal point or comma
//! ([`LogOptions::decimal`]; a comma detected only with a delimiter other
//! than `,`). Quoted numbers are numbers.
//!
//! - **Wide**: a timestamp column ([`LogOptions::time_column`], matched
//!   exactly, then ignoring ASCII case; else the first of
//!   [`TIME_NAMES`] present, ignoring case; else the first column)
//!   and one column per tag, named exactly as the tag. Other columns are
//!   ignored. Rows may be irregular in time.
//! - **Long**: timestamp, tag, value and optionally quality columns, named
//!   by `time_column`, `tag_column`, `value_column`, `quality_column` or
//!   found by the names of [`TIME_NAMES`], [`TAG_NAMES`],
//!   [`VALUE_NAMES`], [`QUALITY_NAMES`] (ignoring ASCII
//!   case), in any order; other columns are ignored.
//!   One stored point per row, rows in time order; a tag appears only when
//!   it was stored (exception-compressed). Tag values are matched exactly
//!   (after trimming blanks); rows of other tags are counted and skipped.
//!   Quality is `good`, `uncertain` or `bad` (any case) or a number read the
//!   way OPC-style quality codes commonly are (common practice, not a
//!   standard this reader claims): ≥ 192 good, 64–191 uncertain, < 64 bad.
//!   An empty quality cell is good; other text is treated as uncertain.
//!   Bad points are rejected, uncertain ones used; both are counted.
//! - **Auto** ([`LogFormat::Auto`]): long if the header has both a tag and
//!   a value column, wide otherwise.
//!
//! Timestamps are epoch seconds (decimals allowed), milliseconds or
//! microseconds, ISO 8601 / RFC 3339 (`2026-03-01T06:00:00+01:00`,
//! `2026-03-01T05:00:00Z`, fractional seconds allowed), or a strftime-like
//! pattern ([`TimeFormat::Pattern`]). [`TimeFormat::Auto`] decides on the
//! first readable timestamp: a number is seconds, milliseconds with 13
//! digits and microseconds with 16 (a guess, reported in
//! [`LogStats::time_unit_guessed`]) unless the column's name ends in `_s`,
//! `_ms` or `_us`; text is ISO 8601. A stamp with an offset is read with
//! it; one without is local time in [`LogOptions::timezone`] (without a
//! zone: [`LogError::NoOffset`]). A local time in a skipped hour (clocks
//! set forward) rejects its row ([`LogStats::dst_skipped`]); one in a
//! repeated hour takes the first offset unless that would put it before
//! the previous accepted row, then the second ([`LogStats::dst_repeated`]).
//! Internally time is `i64` milliseconds since the Unix epoch.
//!
//! A value cell that is empty, `NaN`, infinite or not a number is a missing
//! value of that tag at that row (counted). Every other value is stored as
//! logged: range checks and the clamping of negative flows are the
//! sensor's conditioning (`holdup_kernel::signal`), not the reader's.
//!
//! # Resampling
//!
//! For each tag the reader keeps the last stored point at or before the
//! sample time `t` (`p`) and a queue of the points read ahead (after `t`):
//!
//! - a point at `t`: [`SampleState::Exact`];
//! - linear tag, next point `n` with `n.t − p.t ≤ max_age`: linear between
//!   them, [`SampleState::Interpolated`];
//! - otherwise (hold tags; linear across a gap or after the last point): the
//!   value of `p`, [`SampleState::Held`] while `t − p.t ≤ max_age`, then
//!   [`SampleState::Stale`];
//! - no point yet: `NaN`, [`SampleState::Missing`].
//!
//! `sample` returns `None` once `t` is past the last stored point of the
//! whole log (for every tag asked for).
//!
//! # Memory bound
//!
//! The reader reads ahead only as far as `t` needs: until a row later than
//! `t` has been read and, for each linear tag with a point `p ≤ t`, until its
//! next point or a row later than `p.t + max_age` (and, to tell the end of
//! the log, until some tag has a point after `t`). The buffered points are
//! therefore those of the rows within `max_age` (largest of the linear tags)
//! after `t`, plus one row; rows of other tags and rows without valid
//! values are never buffered. For a dense log this is one row; for an
//! exception-compressed log it is at most the points stored within
//! `max_age`. A hard limit of [`MAX_BUFFERED_POINTS`] stops a log too dense
//! for its `max_age` with [`LogError::LookAheadOverflow`] instead of growing.
//! Lines are read with a bounded buffer (1 MiB per line), and the fault lists
//! keep the first [`KEEP_FIRST`] occurrences with a total count.

mod cells;
mod error;
mod header;
mod lines;
pub mod sorted;
mod stats;
pub mod storage;
pub mod time;

#[cfg(test)]
mod order_tests;
#[cfg(test)]
mod tests;
#[cfg(test)]
mod tests_historian;

use std::collections::VecDeque;
use std::fmt;
use std::fs::File;
use std::io::Read;
use std::path::Path;

use crate::plant::{
    Decimal, Delimiter, EmptyCells, Interpolation, LogFormat, LogOptions, TagOptions, TimeFormat,
};
use crate::zone::{Local, Zone};
use cells::{comma_number, missing_detail, parse_quality, parse_value, point_number, Quality};
use error::shown;
pub use error::LogError;
use header::Layout;
pub use header::{QUALITY_NAMES, TAG_NAMES, TIME_NAMES, VALUE_NAMES};
use lines::{is_blank, Fields, Line, LineReader};
use sorted::{Entry, Merged, Sorter, UNTIMED};
pub use stats::{
    Fault, FaultList, LogStats, Order, OrderKind, StateTicks, TagStats, Window, WindowList,
    KEEP_FIRST,
};
use time::{
    integer_digits, looks_numeric, parse_epoch, parse_epoch_unit, parse_iso_local, TimeError,
};

/// Default flat-line age, ms (30 min).
pub const DEFAULT_FLAT_LINE_MS: u64 = 30 * 60 * 1000;

/// Most stored points buffered at once, all tags (about 64 MB).
pub const MAX_BUFFERED_POINTS: usize = 2_000_000;

/// The value of one tag at a sample time.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct TagSample {
    /// Raw log value (not converted to SI); `NaN` when there is no point yet.
    pub value: f64,
    /// How the value was obtained.
    pub state: SampleState,
}

/// How a sampled value was obtained.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum SampleState {
    /// A stored point at the sample time.
    Exact,
    /// Linear between the stored points around the sample time.
    Interpolated,
    /// The last stored value, held (hold interpolation, or no next point
    /// within the maximum age), at most the maximum age old.
    Held,
    /// The last stored value, older than the maximum age, with no newer point.
    Stale,
    /// No stored point yet: the value is `NaN`.
    Missing,
}

#[derive(Clone, Copy, Debug)]
struct Point {
    t: i64,
    v: f64,
    line: u64,
}

#[derive(Clone, Copy, Debug)]
struct FlatRun {
    bits: u64,
    start: Point,
    end: Point,
}

/// Which tags asked for have a numeric value (order pass): the first
/// cell that is not one, and a few tags of a long log not asked for.
struct Survey {
    numeric: Vec<bool>,
    cells: Vec<u64>,
    first_bad: Vec<Option<(u64, String)>>,
    timed_rows: u64,
    other_tags: Vec<String>,
}

/// Most names of other tags kept for a message.
const OTHER_TAGS_KEPT: usize = 8;

impl Survey {
    fn new(n: usize) -> Self {
        Self {
            numeric: vec![false; n],
            cells: vec![0; n],
            first_bad: vec![None; n],
            timed_rows: 0,
            other_tags: Vec::new(),
        }
    }

    /// A timed row, split in `fields`. Tags already known to be numeric
    /// are not parsed again, so the cost falls to nothing once every tag
    /// has shown a number.
    fn row(&mut self, line: u64, layout: &Layout, fields: &Fields, comma: bool) {
        self.timed_rows += 1;
        let look = |k: usize, cell: &[u8], s: &mut Self| {
            if s.numeric.get(k).copied().unwrap_or(true) {
                return;
            }
            if let Some(c) = s.cells.get_mut(k) {
                *c += 1;
            }
            match parse_value(cell, comma) {
                Ok(_) => {
                    if let Some(n) = s.numeric.get_mut(k) {
                        *n = true;
                    }
                }
                Err(why) => {
                    if let Some(slot @ None) = s.first_bad.get_mut(k) {
                        *slot = Some((line, missing_detail(&why, cell)));
                    }
                }
            }
        };
        match layout {
            Layout::Wide { columns, .. } => {
                for (k, &col) in columns.iter().enumerate() {
                    look(k, fields.get(col), self);
                }
            }
            Layout::Long {
                tag_col,
                value_col,
                index,
                ..
            } => {
                let tag = fields.get(*tag_col);
                match index.get(tag) {
                    Some(&k) => look(k, fields.get(*value_col), self),
                    None => {
                        if self.other_tags.len() < OTHER_TAGS_KEPT {
                            let name = String::from_utf8_lossy(tag).into_owned();
                            if !self.other_tags.contains(&name) {
                                self.other_tags.push(name);
                            }
                        }
                    }
                }
            }
        }
    }

    /// An error for the first tag without a numeric value (none when no
    /// row had a readable time: the empty log says why).
    fn check(&self, path: &str, layout: &Layout, stats: &LogStats) -> Result<(), LogError> {
        if self.timed_rows == 0 {
            return Ok(());
        }
        let Some(k) = self.numeric.iter().position(|n| !n) else {
            return Ok(());
        };
        let tag = stats.tags.get(k).map(|t| t.tag.clone()).unwrap_or_default();
        let why = match self.first_bad.get(k).cloned().flatten() {
            Some((line, detail)) => format!(
                "none of its {} cells is a number (the first, line {line}: {detail})",
                self.cells.get(k).copied().unwrap_or(0)
            ),
            None if matches!(layout, Layout::Long { .. }) => format!(
                "no row has it in the tag column{}",
                if self.other_tags.is_empty() {
                    String::new()
                } else {
                    format!("; tags seen: {}", self.other_tags.join(", "))
                }
            ),
            None => "it has no cell in a row with a readable time".to_string(),
        };
        Err(LogError::NoNumericValue {
            path: path.to_string(),
            tag,
            why,
        })
    }
}

/// Replay state of one tag.
#[derive(Debug)]
struct TagState {
    linear: bool,
    /// Maximum age, ms (saturated to `i64::MAX`).
    max_age: i64,
    /// Last stored point at or before the last sample time.
    prev: Option<Point>,
    /// Points read ahead, after `prev`, in time order.
    queue: VecDeque<Point>,
    /// Current run of identical values.
    flat: Option<FlatRun>,
    /// Intervals and changes between stored points.
    storage: storage::Histogram,
}

impl TagState {
    fn last(&self) -> Option<&Point> {
        self.queue.back().or(self.prev.as_ref())
    }
    fn last_mut(&mut self) -> Option<&mut Point> {
        match self.queue.back_mut() {
            Some(p) => Some(p),
            None => self.prev.as_mut(),
        }
    }
}

/// Counters shared by all tags while storing points.
#[derive(Debug)]
struct Buffer {
    /// Most points allowed ([`MAX_BUFFERED_POINTS`]; lower in tests).
    limit: usize,
    buffered: usize,
    peak: usize,
    first_point: Option<i64>,
    last_point: Option<i64>,
}

/// Where the reader's lines come from: the file itself, or the file's
/// lines sorted by time ([`sorted`]), numbered as in the file.
enum Lines {
    File(LineReader),
    Sorted(Merged),
}

impl Lines {
    fn next_line(&mut self) -> std::io::Result<Line> {
        match self {
            Lines::File(r) => r.next_line(),
            Lines::Sorted(m) => m.next_line(),
        }
    }

    fn line(&self) -> &[u8] {
        match self {
            Lines::File(r) => r.line(),
            Lines::Sorted(m) => m.line(),
        }
    }
}

/// What [`LogReader::scan_row`] found on one line.
enum Scanned {
    End,
    /// A line with its number and time ([`UNTIMED`] when it has none: blank,
    /// malformed, too long, or an unreadable timestamp); `too_long` lines
    /// have no text.
    Line {
        line: u64,
        t: i64,
        too_long: bool,
    },
}

/// Streaming reader and resampler of one historian log.
pub struct LogReader {
    path: String,
    lines: Lines,
    fields: Fields,
    layout: Layout,
    time_col_name: String,
    time_format: TimeFormat,
    /// Unit of numeric timestamps implied by the time column's name.
    time_unit: Option<TimeFormat>,
    /// [`TimeFormat::Pattern`]: the pattern, parsed once.
    pattern: Option<Pattern>,
    /// Zone of naive timestamps.
    zone: Option<Zone>,
    decimal_comma: bool,
    empty_cells: EmptyCells,
    flat_line_ms: i64,
    tags: Vec<TagState>,
    stats: LogStats,
    buffer: Buffer,
    /// Time of the last accepted row.
    frontier: Option<i64>,
    /// Line of the last line read.
    line: u64,
    eof: bool,
    finished: bool,
    last_sample: Option<i64>,
    out: Vec<TagSample>,
}

impl fmt::Debug for LogReader {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.debug_struct("LogReader")
            .field("path", &self.path)
            .field("line", &self.line)
            .field("frontier", &self.frontier)
            .field("eof", &self.eof)
            .finish_non_exhaustive()
    }
}

impl LogReader {
    /// Open a log and read its header, with the default flat-line age.
    ///
    /// Errors: the file cannot be opened, no header row, a tag absent from a
    /// wide header (the error lists the columns), no timestamp column, long
    /// format without `tag`/`value` columns.
    pub fn open(path: &Path, opts: &LogOptions, tags: &[TagOptions]) -> Result<Self, LogError> {
        Self::open_with(path, opts, tags, DEFAULT_FLAT_LINE_MS)
    }

    /// As [`LogReader::open`], with a flat-line age in ms (0: no flat-line
    /// detection).
    pub fn open_with(
        path: &Path,
        opts: &LogOptions,
        tags: &[TagOptions],
        flat_line_ms: u64,
    ) -> Result<Self, LogError> {
        Self::open_sorting(path, opts, tags, flat_line_ms, sorted::RUN_BUDGET)
    }

    /// As [`LogReader::open_with`], sorting with runs of at most `budget`
    /// bytes when the file is not in time order.
    fn open_sorting(
        path: &Path,
        opts: &LogOptions,
        tags: &[TagOptions],
        flat_line_ms: u64,
        budget: usize,
    ) -> Result<Self, LogError> {
        let name = path.display().to_string();
        let open = || {
            File::open(path).map_err(|source| LogError::Open {
                path: name.clone(),
                source,
            })
        };
        // First pass: the times only, to learn the order.
        let mut scan = Self::from_reader(Box::new(open()?), &name, opts, tags, flat_line_ms)?;
        let order = scan.scan_order()?;
        let mut opts = opts.clone();
        opts.time = scan.time_format;
        // The notation decided by the first pass (and how, if guessed).
        let guessed = scan.stats.time_unit_guessed.clone();
        if order.kind == OrderKind::InOrder {
            let mut r = Self::from_reader(Box::new(open()?), &name, &opts, tags, flat_line_ms)?;
            r.stats.order = order;
            r.stats.time_unit_guessed = guessed;
            return Ok(r);
        }
        // Not in time order: cut into sorted runs, then read the merge.
        let mut feed = Self::from_reader(Box::new(open()?), &name, &opts, tags, flat_line_ms)?;
        let temp_err = |source| LogError::SortTemp {
            path: name.clone(),
            source,
        };
        let mut sorter = Sorter::new(budget);
        while let Scanned::Line { line, t, too_long } = feed.scan_row()? {
            let text = (!too_long).then(|| feed.lines.line());
            sorter.push(Entry { t, line, text }).map_err(temp_err)?;
        }
        let (merged, figures) = sorter.finish().map_err(temp_err)?;
        let mut r = Self::from_reader(Box::new(open()?), &name, &opts, tags, flat_line_ms)?;
        r.lines = Lines::Sorted(merged);
        r.stats.time_unit_guessed = guessed;
        r.stats.order = Order {
            sort: Some(figures),
            ..order
        };
        Ok(r)
    }

    /// Read every remaining line's time (nothing is stored or counted) and
    /// tell the order of the rows.
    ///
    /// The same pass makes sure that every tag asked for has a numeric
    /// value somewhere in a timed row: a tag without one is an error
    /// ([`LogError::NoNumericValue`]) before anything is replayed.
    fn scan_order(&mut self) -> Result<Order, LogError> {
        let mut order = Order::default();
        let mut last: Option<i64> = None;
        let mut latest = i64::MIN;
        let mut survey = Survey::new(self.tags.len());
        while let Scanned::Line { line, t, .. } = self.scan_row()? {
            if t == UNTIMED {
                continue;
            }
            survey.row(line, &self.layout, &self.fields, self.decimal_comma);
            if let Some(prev) = last {
                if t > prev {
                    order.steps_forward += 1;
                } else if t < prev {
                    order.steps_back += 1;
                }
            }
            if t < latest {
                order.out_of_order_rows += 1;
                order.first_out_of_order_line.get_or_insert(line);
            }
            latest = latest.max(t);
            last = Some(t);
        }
        survey.check(&self.path, &self.layout, &self.stats)?;
        order.kind = match (order.steps_back, order.steps_forward) {
            (0, _) => OrderKind::InOrder,
            (_, 0) => OrderKind::NewestFirst,
            _ if matches!(self.layout, Layout::Long { .. }) => OrderKind::Grouped,
            _ => OrderKind::Shuffled,
        };
        Ok(order)
    }

    /// Read one line and its time without storing anything: for the order
    /// pass and for cutting sorted runs. Decides the time notation, as
    /// [`Self::row_time`] does.
    fn scan_row(&mut self) -> Result<Scanned, LogError> {
        let next = self.lines.next_line().map_err(|source| LogError::Read {
            path: self.path.clone(),
            line: self.line,
            source,
        })?;
        let line = match next {
            Line::End => return Ok(Scanned::End),
            Line::TooLong(n) => {
                self.line = n;
                return Ok(Scanned::Line {
                    line: n,
                    t: UNTIMED,
                    too_long: true,
                });
            }
            Line::Text(n) => n,
        };
        self.line = line;
        let untimed = Scanned::Line {
            line,
            t: UNTIMED,
            too_long: false,
        };
        if is_blank(self.lines.line()) || self.fields.split(self.lines.line()).is_err() {
            return Ok(untimed);
        }
        let time_col = match &self.layout {
            Layout::Wide { time_col, .. } | Layout::Long { time_col, .. } => *time_col,
        };
        Ok(match self.row_instant(line, time_col)? {
            Some(t) => {
                // Row order resolves a repeated local hour, as when reading.
                self.frontier = Some(self.frontier.map_or(t, |f| f.max(t)));
                Scanned::Line {
                    line,
                    t,
                    too_long: false,
                }
            }
            None => untimed,
        })
    }

    /// Read a log from any reader (`name` is used in messages and stats).
    pub fn from_reader(
        reader: Box<dyn Read>,
        name: &str,
        opts: &LogOptions,
        tags: &[TagOptions],
        flat_line_ms: u64,
    ) -> Result<Self, LogError> {
        let path = name.to_string();
        let mut lines = LineReader::new(reader);
        let read_err = |line, source| LogError::Read {
            path: path.clone(),
            line,
            source,
        };
        if lines.starts_utf16().map_err(|e| read_err(0, e))? {
            return Err(LogError::Utf16 { path });
        }
        let mut blank = 0;
        let header_line = loop {
            match lines.next_line().map_err(|e| read_err(blank, e))? {
                Line::End => {
                    return Err(LogError::NoHeader {
                        path,
                        found: "the file is empty or blank".into(),
                    })
                }
                Line::TooLong(n) => {
                    return Err(LogError::BadHeader {
                        path,
                        line: n,
                        why: "line longer than 1 MiB",
                    })
                }
                Line::Text(n) if is_blank(lines.line()) => blank = n,
                Line::Text(n) => break n,
            }
        };
        let header_bytes = lines.line().to_vec();
        let ahead = lines
            .peek(DETECT_ROWS)
            .map_err(|e| read_err(header_line, e))?;
        let (delimiter, delimiter_detected) = match opts.delimiter {
            Delimiter::Byte(d) => (d, false),
            Delimiter::Auto => (detect_delimiter(&header_bytes, &ahead), true),
        };
        let decimal = match opts.decimal {
            Decimal::Auto => detect_decimal(delimiter, &ahead),
            Decimal::Comma if delimiter == b',' => {
                return Err(LogError::BadHeader {
                    path,
                    line: header_line,
                    why: "[log] decimal = \"comma\" but the fields are separated by ','; \
                          set [log] delimiter",
                })
            }
            d => d,
        };
        let mut fields = Fields::with_delimiter(delimiter);
        fields
            .split(&header_bytes)
            .map_err(|e| LogError::BadHeader {
                path: path.clone(),
                line: header_line,
                why: match e {
                    lines::SplitError::UnterminatedQuote => "a quote is not closed",
                    lines::SplitError::TextAfterQuote => "text after a closing quote",
                },
            })?;
        let header: Vec<String> = (0..fields.len())
            .map(|i| String::from_utf8_lossy(fields.get(i)).into_owned())
            .collect();
        let decided = header::layout(path.clone(), header_line, &header, opts, tags, delimiter)?;
        let (layout, time_col) = (decided.layout, decided.time_col);
        let pattern = match (opts.time, &opts.time_pattern) {
            (TimeFormat::Pattern, Some(p)) => Some(Pattern::new(p)),
            _ => None,
        };
        let states: Vec<TagState> = tags
            .iter()
            .map(|t| TagState {
                linear: t.interpolation == Interpolation::Linear,
                max_age: i64::try_from(t.max_age_ms).unwrap_or(i64::MAX),
                prev: None,
                queue: VecDeque::new(),
                flat: None,
                storage: storage::Histogram::default(),
            })
            .collect();
        let time_col_name = header.get(time_col).cloned().unwrap_or_default();
        let stats = LogStats {
            path: path.clone(),
            format: if matches!(layout, Layout::Long { .. }) {
                LogFormat::Long
            } else {
                LogFormat::Wide
            },
            time: opts.time,
            time_unit_guessed: None,
            timezone: opts.timezone.map(|z| z.label().to_string()),
            report_zone: opts.output_zone,
            delimiter: header::delimiter_key(delimiter),
            delimiter_detected,
            decimal: if decimal == Decimal::Comma {
                Decimal::Comma
            } else {
                Decimal::Point
            },
            flat_line_ms,
            lines: header_line,
            rows: 0,
            blank_lines: blank,
            rows_other_tags: 0,
            other_tags_seen: Vec::new(),
            first_other_tag_line: None,
            bad_time: FaultList::default(),
            dst_skipped: FaultList::default(),
            dst_repeated: FaultList::default(),
            dst_repeated_later: 0,
            backwards: FaultList::default(),
            wrong_fields: FaultList::default(),
            malformed: FaultList::default(),
            duplicate_rows: FaultList::default(),
            peak_buffered_points: 0,
            order: Order::default(),
            tags: tags
                .iter()
                .map(|t| TagStats {
                    tag: t.tag.clone(),
                    max_age_ms: t.max_age_ms,
                    ..TagStats::default()
                })
                .collect(),
        };
        Ok(Self {
            path,
            lines: Lines::File(lines),
            fields,
            layout,
            time_col_name,
            time_format: opts.time,
            time_unit: decided.unit,
            pattern,
            zone: opts.timezone,
            decimal_comma: decimal == Decimal::Comma,
            empty_cells: opts.empty_cells,
            flat_line_ms: i64::try_from(flat_line_ms).unwrap_or(i64::MAX),
            tags: states,
            stats,
            buffer: Buffer {
                limit: MAX_BUFFERED_POINTS,
                buffered: 0,
                peak: 0,
                first_point: None,
                last_point: None,
            },
            frontier: None,
            line: header_line,
            eof: false,
            finished: false,
            last_sample: None,
            out: vec![
                TagSample {
                    value: f64::NAN,
                    state: SampleState::Missing,
                };
                tags.len()
            ],
        })
    }

    /// Counts so far (complete once the log has been read to its end).
    pub fn stats(&self) -> &LogStats {
        &self.stats
    }

    /// Most stored points buffered at once so far, all tags.
    pub fn peak_buffered_points(&self) -> usize {
        self.buffer.peak
    }

    /// Stored points buffered now, all tags.
    pub fn buffered_points(&self) -> usize {
        self.buffer.buffered
    }

    /// Time of the first valid stored point of any tag asked for, ms (reads
    /// ahead as needed; rows without a valid value are not buffered). `None`
    /// if the log holds no valid point.
    pub fn first_time(&mut self) -> Result<Option<i64>, LogError> {
        while self.buffer.first_point.is_none() && !self.eof {
            self.read_row()?;
        }
        Ok(self.buffer.first_point)
    }

    /// Values of all tags (in the order asked for) at time `t`, ms since the
    /// epoch. Calls must have non-decreasing `t`. `None` once `t` is past the
    /// last stored point of the whole log (end of replay).
    pub fn sample(&mut self, t: i64) -> Result<Option<&[TagSample]>, LogError> {
        if let Some(previous) = self.last_sample {
            if t < previous {
                return Err(LogError::SampleBackwards {
                    path: self.path.clone(),
                    t,
                    previous,
                });
            }
        }
        self.last_sample = Some(t);
        if self.finished {
            return Ok(None);
        }
        loop {
            self.consume_upto(t);
            if self.eof || self.read_enough(t) {
                break;
            }
            self.read_row()?;
        }
        let all_consumed = self.tags.iter().all(|s| s.queue.is_empty());
        if self.eof && all_consumed && self.buffer.last_point.is_none_or(|last| t > last) {
            self.finished = true;
            return Ok(None);
        }
        for ((state, ts), out) in self
            .tags
            .iter()
            .zip(self.stats.tags.iter_mut())
            .zip(self.out.iter_mut())
        {
            *out = resample(state, t);
            let ticks = &mut ts.ticks;
            match out.state {
                SampleState::Exact => ticks.exact += 1,
                SampleState::Interpolated => ticks.interpolated += 1,
                SampleState::Held => ticks.held += 1,
                SampleState::Stale => ticks.stale += 1,
                SampleState::Missing => ticks.missing += 1,
            }
        }
        Ok(Some(&self.out))
    }

    /// Move every queued point at or before `t` into `prev`.
    fn consume_upto(&mut self, t: i64) {
        for s in &mut self.tags {
            while s.queue.front().is_some_and(|p| p.t <= t) {
                if let Some(p) = s.queue.pop_front() {
                    s.prev = Some(p);
                    self.buffer.buffered = self.buffer.buffered.saturating_sub(1);
                }
            }
        }
    }

    /// Has enough been read to answer for `t` (after [`Self::consume_upto`])?
    fn read_enough(&self, t: i64) -> bool {
        let Some(frontier) = self.frontier else {
            return false;
        };
        if frontier <= t {
            return false;
        }
        let mut any_later = false;
        for s in &self.tags {
            if !s.queue.is_empty() {
                any_later = true;
            } else if let (true, Some(p)) = (s.linear, &s.prev) {
                if frontier <= p.t.saturating_add(s.max_age) {
                    return false;
                }
            }
        }
        // With no point after t anywhere, read on (without buffering: rows
        // holding no valid point add nothing) to tell the end of the log.
        any_later
    }

    /// Read one line and store what it holds.
    fn read_row(&mut self) -> Result<(), LogError> {
        let next = self.lines.next_line().map_err(|source| LogError::Read {
            path: self.path.clone(),
            line: self.line,
            source,
        })?;
        let line = match next {
            Line::End => {
                self.end_of_file();
                return Ok(());
            }
            Line::TooLong(n) => {
                self.line = n;
                self.stats.lines = self.stats.lines.max(n);
                self.stats.rows += 1;
                self.stats
                    .malformed
                    .push(n, None, None, || "line longer than 1 MiB".into());
                return Ok(());
            }
            Line::Text(n) => n,
        };
        self.line = line;
        self.stats.lines = self.stats.lines.max(line);
        if is_blank(self.lines.line()) {
            self.stats.blank_lines += 1;
            return Ok(());
        }
        self.stats.rows += 1;
        if let Err(e) = self.fields.split(self.lines.line()) {
            self.stats.malformed.push(line, None, None, || match e {
                lines::SplitError::UnterminatedQuote => "a quote is not closed".into(),
                lines::SplitError::TextAfterQuote => "text after a closing quote".into(),
            });
            return Ok(());
        }
        match &self.layout {
            Layout::Wide {
                time_col, width, ..
            } => {
                let (time_col, width) = (*time_col, *width);
                self.wide_row(line, time_col, width)
            }
            Layout::Long { .. } => self.long_row(line),
        }
    }

    fn wrong_fields(&mut self, line: u64, width: usize) -> bool {
        let found = self.fields.len();
        if found == width {
            return false;
        }
        self.stats.wrong_fields.push(line, None, None, || {
            format!("{found} fields, the header has {width}")
        });
        true
    }

    fn wide_row(&mut self, line: u64, time_col: usize, width: usize) -> Result<(), LogError> {
        if self.wrong_fields(line, width) {
            return Ok(());
        }
        let Some(t) = self.row_time(line, time_col)? else {
            return Ok(());
        };
        if self.frontier == Some(t) {
            self.stats
                .duplicate_rows
                .push(line, Some(t), None, String::new);
        }
        self.frontier = Some(t);
        for k in 0..self.tags.len() {
            let col = match &self.layout {
                Layout::Wide { columns, .. } => columns.get(k).copied(),
                Layout::Long { .. } => None,
            };
            let Some(col) = col else {
                continue;
            };
            let cell = self.fields.get(col);
            match parse_value(cell, self.decimal_comma) {
                Ok(v) => self.store(k, t, v, line)?,
                Err(why) => {
                    if let Some(ts) = self.stats.tags.get_mut(k) {
                        ts.missing
                            .push(line, Some(t), None, || missing_detail(&why, cell));
                        stats::extend_run(&mut ts.open_missing, t, line);
                    }
                    if self.empty_cells == EmptyCells::NoReading {
                        self.store_no_reading(k, t, line)?;
                    }
                }
            }
        }
        Ok(())
    }

    fn long_row(&mut self, line: u64) -> Result<(), LogError> {
        let Layout::Long {
            time_col,
            tag_col,
            value_col,
            quality_col,
            width,
            index,
        } = &self.layout
        else {
            return Ok(());
        };
        let (time_col, value_col, quality_col, width) =
            (*time_col, *value_col, *quality_col, *width);
        let found = self.fields.len();
        if found != width {
            self.stats.wrong_fields.push(line, None, None, || {
                format!("{found} fields, the header has {width}")
            });
            return Ok(());
        }
        let Some(&k) = index.get(self.fields.get(*tag_col)) else {
            let st = &mut self.stats;
            st.rows_other_tags += 1;
            st.first_other_tag_line.get_or_insert(line);
            if st.other_tags_seen.len() < 10 {
                let name = shown(self.fields.get(*tag_col));
                if !st.other_tags_seen.contains(&name) {
                    st.other_tags_seen.push(name);
                }
            }
            return Ok(());
        };
        let Some(t) = self.row_time(line, time_col)? else {
            return Ok(());
        };
        self.frontier = Some(t);
        let quality = quality_col.map_or(Quality::Good, |c| parse_quality(self.fields.get(c)));
        let cell = self.fields.get(value_col);
        let Some(ts) = self.stats.tags.get_mut(k) else {
            return Ok(());
        };
        let value = parse_value(cell, self.decimal_comma);
        let raw = value.as_ref().ok().copied();
        let qtext = || shown(quality_col.map_or(&b""[..], |c| self.fields.get(c)));
        match quality {
            Quality::Bad => {
                ts.bad_quality
                    .push(line, Some(t), raw, || format!("quality '{}'", qtext()));
                return Ok(());
            }
            Quality::Uncertain => {
                ts.uncertain_quality
                    .push(line, Some(t), raw, || format!("quality '{}'", qtext()));
            }
            Quality::Unrecognised => {
                ts.uncertain_quality.push(line, Some(t), raw, || {
                    format!("unrecognised quality '{}', used as uncertain", qtext())
                });
            }
            Quality::Good => {}
        }
        match value {
            Ok(v) => self.store(k, t, v, line),
            Err(why) => {
                ts.missing
                    .push(line, Some(t), None, || missing_detail(&why, cell));
                stats::extend_run(&mut ts.open_missing, t, line);
                Ok(())
            }
        }
    }

    /// The instant in column `time_col` of the line just split, or `None`
    /// when it cannot be read (counted); decides the time notation on the
    /// first readable timestamp.
    fn row_instant(&mut self, line: u64, time_col: usize) -> Result<Option<i64>, LogError> {
        let raw = self.fields.get(time_col);
        // A decimal comma in numeric timestamps too.
        let comma;
        let text = if self.decimal_comma && raw.contains(&b',') && !raw.contains(&b':') {
            comma = raw
                .iter()
                .map(|&b| if b == b',' { b'.' } else { b })
                .collect::<Vec<u8>>();
            &comma[..]
        } else {
            raw
        };
        if self.time_format == TimeFormat::Auto {
            if looks_numeric(text) {
                let digits = integer_digits(text);
                let (unit, why) = match self.time_unit {
                    Some(u) => (
                        u,
                        format!(
                            "{} from the column name '{}'",
                            match u {
                                TimeFormat::EpochMs => "milliseconds",
                                TimeFormat::EpochUs => "microseconds",
                                _ => "seconds",
                            },
                            self.time_col_name
                        ),
                    ),
                    None => match digits {
                        13 => (
                            TimeFormat::EpochMs,
                            format!("milliseconds from the 13-digit number of line {line}"),
                        ),
                        16 => (
                            TimeFormat::EpochUs,
                            format!("microseconds from the 16-digit number of line {line}"),
                        ),
                        _ => (TimeFormat::Epoch, String::new()),
                    },
                };
                if !why.is_empty() {
                    self.stats.time_unit_guessed = Some(why);
                }
                self.time_format = unit;
            } else if parse_iso_local(text).is_ok() {
                self.time_format = TimeFormat::Iso8601;
            }
        }
        self.stats.time = self.time_format;
        let parsed = match self.time_format {
            TimeFormat::Epoch => parse_epoch(text).map(Stamp::Utc),
            TimeFormat::EpochMs => parse_epoch_unit(text, 1).map(Stamp::Utc),
            TimeFormat::EpochUs => parse_epoch_unit(text, 1000).map(Stamp::Utc),
            TimeFormat::Iso8601 | TimeFormat::Auto => {
                parse_iso_local(text).and_then(|(ms, off)| match off {
                    Some(off) => utc_in_range(ms - i64::from(off) * 60_000).map(Stamp::Utc),
                    None => Ok(Stamp::Local(ms)),
                })
            }
            TimeFormat::Pattern => match &self.pattern {
                Some(p) => p.parse(text),
                None => Err(TimeError::Invalid("no [log] time_format pattern")),
            },
        };
        let t = match parsed {
            Ok(Stamp::Utc(t)) => t,
            Ok(Stamp::Local(local)) => {
                let Some(zone) = self.zone else {
                    return Err(LogError::NoOffset {
                        path: self.path.clone(),
                        line,
                        column: self.time_col_name.clone(),
                        text: shown(raw),
                    });
                };
                match zone.resolve(local) {
                    Local::Single(t) => t,
                    Local::Skipped => {
                        self.stats.dst_skipped.push(line, None, None, || {
                            format!(
                                "'{}' does not exist in {} (clocks set forward)",
                                shown(raw),
                                zone.label()
                            )
                        });
                        return Ok(None);
                    }
                    Local::Repeated { earlier, later } => {
                        // Row order decides: the first offset until time
                        // would go back, then the second.
                        let second = self.frontier.is_some_and(|f| earlier < f);
                        let t = if second { later } else { earlier };
                        if second {
                            self.stats.dst_repeated_later += 1;
                        }
                        self.stats.dst_repeated.push(line, Some(t), None, || {
                            format!(
                                "'{}' read with the {} offset ({})",
                                shown(raw),
                                if second { "second" } else { "first" },
                                offset_text(zone.offset_seconds(t))
                            )
                        });
                        t
                    }
                }
            }
            Err(TimeError::NoOffset) => {
                return Err(LogError::NoOffset {
                    path: self.path.clone(),
                    line,
                    column: self.time_col_name.clone(),
                    text: shown(raw),
                })
            }
            Err(TimeError::Invalid(why)) => {
                let expected = match self.time_format {
                    TimeFormat::Epoch => "epoch seconds",
                    TimeFormat::EpochMs => "epoch milliseconds",
                    TimeFormat::EpochUs => "epoch microseconds",
                    TimeFormat::Iso8601 => "ISO 8601",
                    TimeFormat::Pattern => "in the [log] time_format pattern",
                    TimeFormat::Auto => "epoch seconds or ISO 8601",
                };
                let hint = match self.time_format {
                    TimeFormat::Pattern => "",
                    _ => " (another notation needs [log] time_format)",
                };
                self.stats.bad_time.push(line, None, None, || {
                    format!("'{}' is not {expected}: {why}{hint}", shown(raw))
                });
                return Ok(None);
            }
        };
        Ok(Some(t))
    }

    /// The row's time, or `None` when rejected (counted): unreadable, a
    /// local time that does not exist, or earlier than the previous row.
    /// Also decides the time notation on the first readable timestamp.
    fn row_time(&mut self, line: u64, time_col: usize) -> Result<Option<i64>, LogError> {
        let Some(t) = self.row_instant(line, time_col)? else {
            return Ok(None);
        };
        if let Some(f) = self.frontier {
            if t < f {
                self.stats.backwards.push(line, Some(t), None, || {
                    format!("previous row at {}", time::format_ms(f))
                });
                return Ok(None);
            }
        }
        Ok(Some(t))
    }

    /// Store a valid value of tag `k` at `t`: clamp, duplicates, gaps, flat
    /// lines, look-ahead bound.
    /// [`EmptyCells::NoReading`]: a NaN point at `t`, so that the tag reads
    /// NaN there and nothing is held or interpolated across it. Not a
    /// value: no flat-line or gap bookkeeping, and the missing run stays
    /// open.
    fn store_no_reading(&mut self, k: usize, t: i64, line: u64) -> Result<(), LogError> {
        let Some(s) = self.tags.get_mut(k) else {
            return Ok(());
        };
        let point = Point {
            t,
            v: f64::NAN,
            line,
        };
        if let Some(last) = s.last_mut().filter(|p| p.t == t) {
            *last = point;
            return Ok(());
        }
        if self.buffer.buffered >= self.buffer.limit {
            return Err(LogError::LookAheadOverflow {
                path: self.path.clone(),
                line,
                limit: self.buffer.limit,
            });
        }
        s.queue.push_back(point);
        self.count_buffered(t);
        Ok(())
    }

    /// One more point read ahead, at `t`.
    fn count_buffered(&mut self, t: i64) {
        let b = &mut self.buffer;
        b.buffered += 1;
        b.peak = b.peak.max(b.buffered);
        b.first_point.get_or_insert(t);
        b.last_point = Some(b.last_point.map_or(t, |l| l.max(t)));
        self.stats.peak_buffered_points = b.peak;
    }

    fn store(&mut self, k: usize, t: i64, raw: f64, line: u64) -> Result<(), LogError> {
        let (Some(s), Some(ts)) = (self.tags.get_mut(k), self.stats.tags.get_mut(k)) else {
            return Ok(());
        };
        stats::close_run(&mut ts.open_missing, &mut ts.missing_runs);
        let point = Point { t, v: raw, line };
        // Flat lines: analog (linear) tags only, a discrete signal is meant
        // to stay put. They follow the raw value (a transmitter stuck below
        // zero is stuck all the same).
        if s.linear && self.flat_line_ms > 0 {
            let bits = raw.to_bits();
            match &mut s.flat {
                Some(run) if run.bits == bits => run.end = point,
                run => {
                    if let Some(done) = run.take() {
                        close_flat(&done, self.flat_line_ms, ts);
                    }
                    *run = Some(FlatRun {
                        bits,
                        start: point,
                        end: point,
                    });
                }
            }
        }
        match s.last_mut() {
            Some(last) if last.t == t => {
                let old = last.v;
                let old_line = last.line;
                *last = point;
                ts.duplicates.push(line, Some(t), Some(old), || {
                    format!("replaces the value of line {old_line}")
                });
                return Ok(());
            }
            _ => {}
        }
        if self.buffer.buffered >= self.buffer.limit {
            return Err(LogError::LookAheadOverflow {
                path: self.path.clone(),
                line,
                limit: self.buffer.limit,
            });
        }
        if let Some(last) = s.last().copied() {
            s.storage.add(t.saturating_sub(last.t), raw - last.v);
            if t.saturating_sub(last.t) > s.max_age {
                ts.gaps.push(Window {
                    start: last.t,
                    end: t,
                    start_line: last.line,
                    end_line: line,
                });
            }
        }
        s.queue.push_back(point);
        ts.points += 1;
        ts.first_time.get_or_insert(t);
        ts.last_time = Some(t);
        self.count_buffered(t);
        Ok(())
    }

    fn end_of_file(&mut self) {
        if self.eof {
            return;
        }
        self.eof = true;
        for (s, ts) in self.tags.iter_mut().zip(self.stats.tags.iter_mut()) {
            if let Some(run) = s.flat.take() {
                close_flat(&run, self.flat_line_ms, ts);
            }
            stats::close_run(&mut ts.open_missing, &mut ts.missing_runs);
            ts.storage = s.storage.pattern();
        }
    }
}

/// Data rows read ahead to detect the delimiter and the decimal separator.
pub const DETECT_ROWS: usize = 5;

/// A timestamp read: an instant, or a wall-clock time (ms as if UTC) to
/// place in the log's zone.
enum Stamp {
    Utc(i64),
    Local(i64),
}

fn utc_in_range(ms: i64) -> Result<i64, TimeError> {
    if (time::MIN_MS..=time::MAX_MS).contains(&ms) {
        Ok(ms)
    } else {
        Err(TimeError::Invalid("out of range (years 0..9999)"))
    }
}

/// `+02:00` for 7200 s.
fn offset_text(seconds: i32) -> String {
    let sign = if seconds < 0 { '-' } else { '+' };
    let m = seconds.unsigned_abs() / 60;
    format!("{sign}{:02}:{:02}", m / 60, m % 60)
}

/// A strftime-like timestamp pattern, its items parsed once.
#[derive(Debug)]
struct Pattern {
    items: Vec<chrono::format::Item<'static>>,
    /// Does it carry an offset (`%z`, `%:z`, …)? Then a stamp is an
    /// instant, otherwise a wall-clock time.
    offset: bool,
}

impl Pattern {
    fn new(pattern: &str) -> Self {
        use chrono::format::{Fixed, Item, StrftimeItems};
        let items = StrftimeItems::new(pattern)
            .parse_to_owned()
            .unwrap_or_else(|_| vec![Item::Error]);
        let offset = items.iter().any(|i| {
            matches!(
                i,
                Item::Fixed(
                    Fixed::TimezoneOffset
                        | Fixed::TimezoneOffsetColon
                        | Fixed::TimezoneOffsetDoubleColon
                        | Fixed::TimezoneOffsetTripleColon
                        | Fixed::TimezoneOffsetColonZ
                        | Fixed::TimezoneOffsetZ
                        | Fixed::RFC2822
                        | Fixed::RFC3339
                )
            )
        });
        Self { items, offset }
    }

    fn parse(&self, text: &[u8]) -> Result<Stamp, TimeError> {
        let text = std::str::from_utf8(text).map_err(|_| TimeError::Invalid("not UTF-8 text"))?;
        let bad = |_| TimeError::Invalid("does not match the pattern");
        let mut parsed = chrono::format::Parsed::new();
        chrono::format::parse(&mut parsed, text, self.items.iter()).map_err(bad)?;
        if self.offset {
            let d = parsed.to_datetime().map_err(bad)?;
            utc_in_range(d.timestamp_millis()).map(Stamp::Utc)
        } else {
            let d = parsed.to_naive_datetime_with_offset(0).map_err(bad)?;
            Ok(Stamp::Local(d.and_utc().timestamp_millis()))
        }
    }
}

/// The delimiter of a header and its first rows: of `,` `;` tab `|`, the
/// one splitting the header into the most fields (at least two) with every
/// row read ahead split into as many; `,` when none does.
fn detect_delimiter(header: &[u8], rows: &[Vec<u8>]) -> u8 {
    let count = |line: &[u8], d: u8| {
        let mut f = Fields::with_delimiter(d);
        f.split(line).ok().map(|()| f.len())
    };
    let mut best = (b',', 1);
    for d in [b',', b';', b'\t', b'|'] {
        let Some(n) = count(header, d) else {
            continue;
        };
        if n < 2 || n <= best.1 {
            continue;
        }
        if rows.iter().all(|r| count(r, d) == Some(n)) {
            best = (d, n);
        }
    }
    best.0
}

/// A decimal comma when the delimiter is not `,`, some cell of the rows
/// read ahead is a number with a comma (`12,5`) and none with a point.
fn detect_decimal(delimiter: u8, rows: &[Vec<u8>]) -> Decimal {
    if delimiter == b',' {
        return Decimal::Point;
    }
    let (mut comma, mut point) = (false, false);
    let mut f = Fields::with_delimiter(delimiter);
    for r in rows {
        if f.split(r).is_err() {
            continue;
        }
        for i in 0..f.len() {
            comma |= comma_number(f.get(i));
            point |= point_number(f.get(i));
        }
    }
    if comma && !point {
        Decimal::Comma
    } else {
        Decimal::Point
    }
}

fn close_flat(run: &FlatRun, flat_line_ms: i64, ts: &mut TagStats) {
    if flat_line_ms > 0 && run.end.t.saturating_sub(run.start.t) > flat_line_ms {
        ts.flat_lines.push(Window {
            start: run.start.t,
            end: run.end.t,
            start_line: run.start.line,
            end_line: run.end.line,
        });
    }
}

/// The value of one tag at `t`, all points ≤ `t` consumed.
fn resample(s: &TagState, t: i64) -> TagSample {
    // No point yet, or the last one is a recording's "no reading" (the only
    // NaN a point can hold: values are finite).
    let Some(p) = s.prev.filter(|p| !p.v.is_nan()) else {
        return TagSample {
            value: f64::NAN,
            state: SampleState::Missing,
        };
    };
    if p.t == t {
        return TagSample {
            value: p.v,
            state: SampleState::Exact,
        };
    }
    if s.linear {
        if let Some(n) = s.queue.front() {
            let span = n.t.saturating_sub(p.t);
            if span > 0 && span <= s.max_age {
                let f = t.saturating_sub(p.t) as f64 / span as f64;
                let mut value = p.v + (n.v - p.v) * f;
                if !value.is_finite() {
                    value = p.v * (1.0 - f) + n.v * f;
                }
                return TagSample {
                    value,
                    state: SampleState::Interpolated,
                };
            }
        }
    }
    let state = if t.saturating_sub(p.t) <= s.max_age {
        SampleState::Held
    } else {
        SampleState::Stale
    };
    TagSample { value: p.v, state }
}
