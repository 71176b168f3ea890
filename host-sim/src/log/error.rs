//! Errors of the log reader: a log that cannot be read at all. Bad rows are
//! not errors; they are counted in [`super::LogStats`].

use std::fmt;
use std::io;

use super::time;

/// A log that cannot be read (bad rows are counted, not errors).
#[derive(Debug)]
pub enum LogError {
    /// The file cannot be opened.
    Open {
        /// Path.
        path: String,
        /// Cause.
        source: io::Error,
    },
    /// Reading failed.
    Read {
        /// Path.
        path: String,
        /// Last line read.
        line: u64,
        /// Cause.
        source: io::Error,
    },
    /// No header row: the file is empty or blank, or its first line is data.
    NoHeader {
        /// Path.
        path: String,
        /// What was found instead.
        found: String,
    },
    /// A temporary file of the on-disk sort cannot be written or read.
    SortTemp {
        /// Path of the log.
        path: String,
        /// The system's error.
        source: std::io::Error,
    },
    /// The file is UTF-16 encoded.
    Utf16 {
        /// Path.
        path: String,
    },
    /// The header row cannot be split into columns.
    BadHeader {
        /// Path.
        path: String,
        /// Line of the header.
        line: u64,
        /// Why.
        why: &'static str,
    },
    /// The timestamp column is not in the header.
    NoTimeColumn {
        /// Path.
        path: String,
        /// Line of the header.
        line: u64,
        /// The name looked for.
        wanted: String,
        /// The header's columns.
        available: Vec<String>,
    },
    /// Wide format: a tag asked for is not a column.
    TagNotInHeader {
        /// Path.
        path: String,
        /// Line of the header.
        line: u64,
        /// The tag.
        tag: String,
        /// Why it may be missing (empty: no idea).
        hint: String,
        /// The header's columns.
        available: Vec<String>,
    },
    /// Long format: a required column is missing.
    MissingColumn {
        /// Path.
        path: String,
        /// Line of the header.
        line: u64,
        /// The column name(s) looked for.
        column: String,
        /// The `[log]` key naming it.
        key: &'static str,
        /// The header's columns.
        available: Vec<String>,
    },
    /// A column that is used appears twice in the header.
    DuplicateColumn {
        /// Path.
        path: String,
        /// Line of the header.
        line: u64,
        /// The column.
        column: String,
    },
    /// A tag asked for has no numeric value anywhere in the log (found by
    /// the order pass, before anything is replayed).
    NoNumericValue {
        /// Path.
        path: String,
        /// The tag.
        tag: String,
        /// Why: its first cell that is not a number, or that no row has it.
        why: String,
    },
    /// The same tag was asked for twice.
    DuplicateTag {
        /// Path.
        path: String,
        /// The tag.
        tag: String,
    },
    /// A timestamp without an offset.
    NoOffset {
        /// Path.
        path: String,
        /// Line.
        line: u64,
        /// Timestamp column.
        column: String,
        /// The timestamp as written.
        text: String,
    },
    /// `sample` was called with a time earlier than the previous call's.
    SampleBackwards {
        /// Path.
        path: String,
        /// Time asked, ms.
        t: i64,
        /// Previous time asked, ms.
        previous: i64,
    },
    /// The look-ahead needed more than [`super::MAX_BUFFERED_POINTS`] points.
    LookAheadOverflow {
        /// Path.
        path: String,
        /// Line being read.
        line: u64,
        /// Limit, points.
        limit: usize,
    },
}

impl fmt::Display for LogError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            LogError::Open { path, source } => write!(f, "{path}: cannot open: {source}"),
            LogError::Read { path, line, source } => {
                write!(f, "{path}: read error after line {line}: {source}")
            }
            LogError::NoHeader { path, found } => write!(
                f,
                "{path}: a header row naming the columns is required; {found}"
            ),
            LogError::SortTemp { path, source } => write!(
                f,
                "{path}: the rows are not in time order and sorting them needs temporary \
                 files, which failed ({source}); set TMPDIR to a folder with room for a \
                 copy of the log, or export the log in time order"
            ),
            LogError::Utf16 { path } => write!(
                f,
                "{path}: the file is UTF-16 encoded; save it as UTF-8 (or ASCII)"
            ),
            LogError::BadHeader { path, line, why } => {
                write!(f, "{path}:{line}: header cannot be read: {why}")
            }
            LogError::NoTimeColumn {
                path,
                line,
                wanted,
                available,
            } => write!(
                f,
                "{path}:{line}: no timestamp column '{wanted}' in the header; columns are {}",
                list(available)
            ),
            LogError::TagNotInHeader {
                path,
                line,
                tag,
                hint,
                available,
            } => {
                write!(
                    f,
                    "{path}:{line}: tag '{tag}' is not a column of the header"
                )?;
                if !hint.is_empty() {
                    write!(f, " ({hint})")?;
                }
                write!(f, "; columns are {}", list(available))
            }
            LogError::MissingColumn {
                path,
                line,
                column,
                key,
                available,
            } => write!(
                f,
                "{path}:{line}: long format needs a '{column}' column (or set [log] {key}); \
                 columns are {}",
                list(available)
            ),
            LogError::DuplicateColumn { path, line, column } => write!(
                f,
                "{path}:{line}: column '{column}' appears more than once in the header"
            ),
            LogError::NoNumericValue { path, tag, why } => write!(
                f,
                "{path}: tag {tag} has no numeric value in the whole log: {why}; the plant \
                 needs it: check the tag's name, the column, the decimal separator ([log] \
                 decimal) and the export"
            ),
            LogError::DuplicateTag { path, tag } => {
                write!(f, "{path}: tag '{tag}' is asked for twice")
            }
            LogError::NoOffset {
                path,
                line,
                column,
                text,
            } => write!(
                f,
                "{path}:{line}: column '{column}': timestamp '{text}' has no offset; \
                 set [log] timezone to the log's IANA zone (e.g. \"Europe/Vienna\") to read \
                 local times, or log with an offset (2026-03-01T06:00:00+01:00, \
                 2026-03-01T05:00:00Z)"
            ),
            LogError::SampleBackwards { path, t, previous } => write!(
                f,
                "{path}: sample at {} requested after {}: sample times must not decrease",
                time::format_ms(*t),
                time::format_ms(*previous)
            ),
            LogError::LookAheadOverflow { path, line, limit } => write!(
                f,
                "{path}:{line}: more than {limit} points buffered ahead of the sample time; \
                 the log is too dense for its max_age (lower max_age of the linear tags)"
            ),
        }
    }
}

impl std::error::Error for LogError {
    fn source(&self) -> Option<&(dyn std::error::Error + 'static)> {
        match self {
            LogError::Open { source, .. }
            | LogError::Read { source, .. }
            | LogError::SortTemp { source, .. } => Some(source),
            _ => None,
        }
    }
}

/// Column names for an error message, at most 30.
pub(super) fn list(names: &[String]) -> String {
    const SHOWN: usize = 30;
    let mut s = names
        .iter()
        .take(SHOWN)
        .map(|n| format!("'{n}'"))
        .collect::<Vec<_>>()
        .join(", ");
    if names.len() > SHOWN {
        s.push_str(&format!(" and {} more", names.len() - SHOWN));
    }
    if names.is_empty() {
        s.push_str("(none)");
    }
    s
}

/// Text of a field for a message: lossy UTF-8, control characters escaped,
/// at most 40 characters.
pub(super) fn shown(bytes: &[u8]) -> String {
    let text = String::from_utf8_lossy(bytes);
    let mut out: String = text.chars().take(40).flat_map(char::escape_debug).collect();
    if text.chars().nth(40).is_some() {
        out.push('…');
    }
    out
}
