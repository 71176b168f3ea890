//! The header row: which layout, which columns.

use std::collections::HashMap;

use super::time::{looks_numeric, parse_iso};
use super::LogError;
use crate::plant::{LogFormat, LogOptions, TagOptions};

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

/// Decide the layout from the header's column names (already trimmed).
/// Returns it with the timestamp column.
pub(super) fn layout(
    path: String,
    header_line: u64,
    header: &[String],
    opts: &LogOptions,
    tags: &[TagOptions],
) -> Result<(Layout, usize), LogError> {
    let looks_like_data = header
        .iter()
        .all(|h| h.is_empty() || looks_numeric(h.as_bytes()) || parse_iso(h.as_bytes()).is_ok());
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
    let no_time = |wanted: &str| LogError::NoTimeColumn {
        path: path.clone(),
        line: header_line,
        wanted: wanted.to_string(),
        available: header.to_vec(),
    };
    let long = match opts.format {
        LogFormat::Long => true,
        LogFormat::Wide => false,
        LogFormat::Auto => find_ci("tag")?.is_some() && find_ci("value")?.is_some(),
    };
    let (layout, time_col) = if long {
        let time_col = match &opts.time_column {
            Some(name) => find_ci(name)?.ok_or_else(|| no_time(name))?,
            None => match find_ci("time")? {
                Some(i) => i,
                None => find_ci("timestamp")?.ok_or_else(|| no_time("time' or 'timestamp"))?,
            },
        };
        let missing = |column| LogError::MissingColumn {
            path: path.clone(),
            line: header_line,
            column,
            available: header.to_vec(),
        };
        let tag_col = find_ci("tag")?.ok_or_else(|| missing("tag"))?;
        let value_col = find_ci("value")?.ok_or_else(|| missing("value"))?;
        let quality_col = find_ci("quality")?;
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
        let time_col = match &opts.time_column {
            Some(name) => {
                let exact: Vec<usize> = (0..header.len())
                    .filter(|&i| header.get(i).is_some_and(|h| h == name))
                    .collect();
                match exact.as_slice() {
                    [i] => *i,
                    [] => find_ci(name)?.ok_or_else(|| no_time(name))?,
                    _ => {
                        return Err(LogError::DuplicateColumn {
                            path,
                            line: header_line,
                            column: name.clone(),
                        })
                    }
                }
            }
            None if header.is_empty() => return Err(no_time("(first column)")),
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
    Ok((layout, time_col))
}
