//! The header row: which layout, which columns.

use std::collections::HashMap;

use super::time::{looks_numeric, parse_iso_local};
use super::LogError;
use crate::plant::{LogFormat, LogOptions, TagOptions, TimeFormat};

/// Where the values are, per layout.
#[derive(Debug)]
pub(super) enum Layout {
    /// One column per tag.
    Wide {
        time_col: usize,
        width: usize,
        /// Column of each tag, in the order asked for.
        columns: Vec<usize>,
    },
    /// One point per row.
    Long {
        time_col: usize,
        tag_col: usize,
        value_col: usize,
        quality_col: Option<usize>,
        width: usize,
        /// Tag name → index into the tags.
        index: HashMap<Vec<u8>, usize>,
    },
}

/// Timestamp column names looked for when `time_column` is not set, in
/// this order, ignoring ASCII case. A time column whose name ends in `_s`,
/// `_ms` or `_us` gives the unit of numeric timestamps when `[log] time` is
/// `auto`.
pub const TIME_NAMES: &[&str] = &[
    "time",
    "timestamp",
    "datetime",
    "date_time",
    "date",
    "time_s",
    "time_ms",
    "time_us",
];
/// Long format: tag column names, ignoring ASCII case.
pub const TAG_NAMES: &[&str] = &["tag", "tag_name", "tagname"];
/// Long format: value column names, ignoring ASCII case.
pub const VALUE_NAMES: &[&str] = &["value", "val"];
/// Long format: quality column names, ignoring ASCII case.
pub const QUALITY_NAMES: &[&str] = &["quality", "quality_code"];

/// The header's decisions.
#[derive(Debug)]
pub(super) struct Decided {
    pub layout: Layout,
    pub time_col: usize,
    /// Unit of numeric timestamps implied by the column's name.
    pub unit: Option<TimeFormat>,
}

/// The unit a time column's name implies: a name ending in `_s`, `_ms` or
/// `_us` (any case; `time_ms`, `sampled_ms`).
fn unit_of(name: &str) -> Option<TimeFormat> {
    let n = name.to_ascii_lowercase();
    if n.ends_with("_ms") {
        Some(TimeFormat::EpochMs)
    } else if n.ends_with("_us") {
        Some(TimeFormat::EpochUs)
    } else if n.ends_with("_s") {
        Some(TimeFormat::Epoch)
    } else {
        None
    }
}

/// Decide the layout from the header's column names (already trimmed),
/// split at `delimiter`.
pub(super) fn layout(
    path: String,
    header_line: u64,
    header: &[String],
    opts: &LogOptions,
    tags: &[TagOptions],
    delimiter: u8,
) -> Result<Decided, LogError> {
    let looks_like_data = header.iter().all(|h| {
        h.is_empty() || looks_numeric(h.as_bytes()) || parse_iso_local(h.as_bytes()).is_ok()
    });
    if looks_like_data {
        return Err(LogError::NoHeader {
            path,
            found: format!("line {header_line} holds data, not column names"),
        });
    }
    let mut seen = HashMap::new();
    for (i, t) in tags.iter().enumerate() {
        if seen.insert(t.tag.as_str(), i).is_some() {
            return Err(LogError::DuplicateTag {
                path,
                tag: t.tag.clone(),
            });
        }
    }
    let find_ci = |name: &str| -> Result<Option<usize>, LogError> {
        let mut hits = header
            .iter()
            .enumerate()
            .filter(|(_, h)| h.eq_ignore_ascii_case(name));
        let first = hits.next().map(|(i, _)| i);
        if let Some((_, h)) = hits.next() {
            return Err(LogError::DuplicateColumn {
                path: path.clone(),
                line: header_line,
                column: h.clone(),
            });
        }
        Ok(first)
    };
    // The configured name (exact first, then ignoring case), else the first
    // of `names` present.
    let find = |configured: &Option<String>, names: &[&str]| -> Result<Option<usize>, LogError> {
        if let Some(name) = configured {
            let exact: Vec<usize> = (0..header.len())
                .filter(|&i| header.get(i).is_some_and(|h| h == name))
                .collect();
            return match exact.as_slice() {
                [i] => Ok(Some(*i)),
                [] => find_ci(name),
                _ => Err(LogError::DuplicateColumn {
                    path: path.clone(),
                    line: header_line,
                    column: name.clone(),
                }),
            };
        }
        for name in names {
            if let Some(i) = find_ci(name)? {
                return Ok(Some(i));
            }
        }
        Ok(None)
    };
    let wanted = |configured: &Option<String>, names: &[&str]| match configured {
        Some(n) => n.clone(),
        None => names.join("' or '"),
    };
    let no_time = |wanted: String| LogError::NoTimeColumn {
        path: path.clone(),
        line: header_line,
        wanted,
        available: header.to_vec(),
    };
    let tag_col = find(&opts.tag_column, TAG_NAMES)?;
    let value_col = find(&opts.value_column, VALUE_NAMES)?;
    let long = match opts.format {
        LogFormat::Long => true,
        LogFormat::Wide => false,
        LogFormat::Auto => tag_col.is_some() && value_col.is_some(),
    };
    let (layout, time_col) = if long {
        let time_col = find(&opts.time_column, TIME_NAMES)?
            .ok_or_else(|| no_time(wanted(&opts.time_column, TIME_NAMES)))?;
        let missing = |key: &'static str, configured: &Option<String>, names: &[&str]| {
            LogError::MissingColumn {
                path: path.clone(),
                line: header_line,
                column: wanted(configured, names),
                key,
                available: header.to_vec(),
            }
        };
        let tag_col = tag_col.ok_or_else(|| missing("tag_column", &opts.tag_column, TAG_NAMES))?;
        let value_col =
            value_col.ok_or_else(|| missing("value_column", &opts.value_column, VALUE_NAMES))?;
        let quality_col = find(&opts.quality_column, QUALITY_NAMES)?;
        if opts.quality_column.is_some() && quality_col.is_none() {
            return Err(missing(
                "quality_column",
                &opts.quality_column,
                QUALITY_NAMES,
            ));
        }
        let index = tags
            .iter()
            .enumerate()
            .map(|(i, t)| (t.tag.trim().as_bytes().to_vec(), i))
            .collect();
        let layout = Layout::Long {
            time_col,
            tag_col,
            value_col,
            quality_col,
            width: header.len(),
            index,
        };
        (layout, time_col)
    } else {
        let mut columns = Vec::with_capacity(tags.len());
        let time_col = match find(&opts.time_column, TIME_NAMES)? {
            Some(i) => i,
            None if opts.time_column.is_some() => {
                return Err(no_time(wanted(&opts.time_column, TIME_NAMES)))
            }
            None if header.is_empty() => return Err(no_time("(first column)".into())),
            None => 0,
        };
        for opt in tags {
            let name = opt.tag.trim();
            let mut cols = (0..header.len())
                .filter(|&i| i != time_col && header.get(i).is_some_and(|h| h == name));
            let col = cols.next().ok_or_else(|| LogError::TagNotInHeader {
                path: path.clone(),
                line: header_line,
                tag: opt.tag.clone(),
                hint: tag_hint(name, header, time_col, delimiter),
                available: header.to_vec(),
            })?;
            if cols.next().is_some() {
                return Err(LogError::DuplicateColumn {
                    path,
                    line: header_line,
                    column: name.to_string(),
                });
            }
            columns.push(col);
        }
        let layout = Layout::Wide {
            time_col,
            width: header.len(),
            columns,
        };
        (layout, time_col)
    };
    let unit = header.get(time_col).and_then(|h| unit_of(h));
    Ok(Decided {
        layout,
        time_col,
        unit,
    })
}

/// Why a wide log's tag may be missing from its header: the tag is the
/// timestamp column, a column differs only in case, or the header holds
/// another delimiter character.
fn tag_hint(tag: &str, header: &[String], time_col: usize, delimiter: u8) -> String {
    let mut hints = Vec::new();
    if header.get(time_col).is_some_and(|h| h == tag) {
        hints.push(format!(
            "'{tag}' is column {} and was taken as the timestamp column (set [log] time_column \
             to the timestamp's column name)",
            time_col + 1
        ));
    }
    if let Some(near) = header
        .iter()
        .find(|c| c.as_str() != tag && c.eq_ignore_ascii_case(tag))
    {
        hints.push(format!("did you mean '{near}'? tags are case-sensitive"));
    }
    let other = [b',', b';', b'\t', b'|']
        .into_iter()
        .filter(|&d| d != delimiter)
        .find(|&d| header.iter().any(|h| h.as_bytes().contains(&d)));
    if let Some(d) = other {
        hints.push(format!(
            "the header was split at {} but holds {}: set [log] delimiter = \"{}\"",
            delimiter_name(delimiter),
            delimiter_name(d),
            delimiter_key(d)
        ));
    }
    hints.join("; ")
}

/// A delimiter for messages: `','`, `';'`, `tab`, `'|'`.
pub(super) fn delimiter_name(d: u8) -> String {
    if d == b'\t' {
        "tab".into()
    } else {
        format!("'{}'", char::from(d))
    }
}

/// A delimiter as written in `[log] delimiter`.
pub(super) fn delimiter_key(d: u8) -> String {
    if d == b'\t' {
        "tab".into()
    } else {
        char::from(d).to_string()
    }
}
