//! `inputs.csv`: the polled values as a wide log in the replay's own
//! format (a `time` column in ISO 8601 UTC with milliseconds, one column
//! per tag named as the tag), each value in the tag's configured unit at
//! full precision (the shortest text that reads back as the same `f64`),
//! a missing reading as an empty cell. Each row is flushed as it is
//! written, so the recording survives the process.

use std::fs::File;
use std::io::{BufWriter, Write};
use std::path::{Path, PathBuf};

use crate::text::iso;

/// Name of the time column.
pub const TIME_COLUMN: &str = "time";

/// The recording being written.
pub struct Recording {
    path: PathBuf,
    out: BufWriter<File>,
    columns: usize,
}

/// A cell: quoted when the text needs it (a tag with a comma or quote).
fn cell(s: &str) -> String {
    if s.contains([',', '"', '\n', '\r']) || s.trim() != s {
        format!("\"{}\"", s.replace('"', "\"\""))
    } else {
        s.to_string()
    }
}

impl Recording {
    /// Create `path` with the header for `tags`.
    ///
    /// Errors: the file cannot be written, or a tag is named like the time
    /// column (the log reader could not tell them apart).
    pub fn create(path: &Path, tags: &[String]) -> std::io::Result<Self> {
        if let Some(t) = tags.iter().find(|t| t.eq_ignore_ascii_case(TIME_COLUMN)) {
            return Err(std::io::Error::other(format!(
                "tag \"{t}\" has the name of the recording's time column"
            )));
        }
        let mut out = BufWriter::new(File::create(path)?);
        let header: Vec<String> = std::iter::once(TIME_COLUMN.to_string())
            .chain(tags.iter().map(|t| cell(t)))
            .collect();
        writeln!(out, "{}", header.join(","))?;
        out.flush()?;
        Ok(Self {
            path: path.to_path_buf(),
            out,
            columns: tags.len(),
        })
    }

    /// The file.
    pub fn path(&self) -> &Path {
        &self.path
    }

    /// One row at `t` (ms since the epoch): a value per tag, in the
    /// header's order.
    pub fn row(&mut self, t: i64, values: &[Option<f64>]) -> std::io::Result<()> {
        debug_assert_eq!(values.len(), self.columns);
        let mut line = iso(t);
        for v in values {
            line.push(',');
            if let Some(x) = v.filter(|x| x.is_finite()) {
                line.push_str(&format!("{x:?}"));
            }
        }
        writeln!(self.out, "{line}")?;
        self.out.flush()
    }
}

#[cfg(test)]
mod tests {
    //! Checked by reading the text back with Rust's own `f64` parser (the
    //! one the log reader uses) and against the ISO 8601 text of a time
    //! worked out by hand (1 764 700 000 s = 20 424 days + 66 400 s).
    use super::*;

    #[test]
    fn values_read_back_exactly_and_missing_cells_are_empty() {
        let dir = std::env::temp_dir().join(format!("holdup-rec-{}", std::process::id()));
        std::fs::create_dir_all(&dir).unwrap();
        let path = dir.join("inputs.csv");
        let tags = vec!["FI-101".to_string(), "TI,301".to_string()];
        let mut r = Recording::create(&path, &tags).unwrap();
        let x = 0.1 + 0.2; // 0.30000000000000004: needs all 17 digits.
        r.row(1_764_700_000_000, &[Some(x), None]).unwrap();
        r.row(1_764_700_001_000, &[Some(1e-7), Some(-2.5)]).unwrap();
        let text = std::fs::read_to_string(&path).unwrap();
        let lines: Vec<&str> = text.lines().collect();
        assert_eq!(lines[0], "time,FI-101,\"TI,301\"");
        assert_eq!(lines[1], "2025-12-02T18:26:40.000Z,0.30000000000000004,");
        let back: f64 = lines[2].split(',').nth(1).unwrap().parse().unwrap();
        assert_eq!(back.to_bits(), 1e-7f64.to_bits());
        assert!(Recording::create(&path, &["Time".to_string()]).is_err());
        std::fs::remove_dir_all(&dir).unwrap();
    }
}
