//! A log that is not in time order, sorted on disk: an external merge sort
//! of its lines by `(time, line number)` with a fixed memory budget.
//!
//! Historians export newest-first, or one tag after another (a long log
//! grouped by tag). The reader needs time order, so such a file is read
//! once to cut it into sorted runs of at most [`RUN_BUDGET`] bytes each,
//! written to anonymous temporary files (deleted by the system when
//! closed, even after a crash), and the runs are merged back one line at a
//! time ([`Merged`]). Memory is the run budget while cutting, and one
//! buffered reader per run ([`MERGE_BUFFER`] bytes) while merging; runs
//! beyond [`FAN_IN`] are first merged in groups into longer runs, so the
//! number of open runs stays bounded whatever the log's length.
//!
//! Every line goes through, with its original line number: a row whose
//! time cannot be read (or a blank or over-long line) is keyed before all
//! timed rows, in file order, so the reader still counts and reports it at
//! its own line. Equal times keep their file order.

use std::cmp::Reverse;
use std::collections::BinaryHeap;
use std::fs::File;
use std::io::{self, BufReader, BufWriter, Read, Seek, Write};

use super::lines::Line;

/// Bytes held in memory per run while cutting (24 MiB: line text, and 32
/// bytes of index per line, the index taking at most a quarter).
pub const RUN_BUDGET: usize = 24 << 20;
/// Buffer of each run's reader while merging (64 KiB).
pub const MERGE_BUFFER: usize = 64 << 10;
/// Most runs merged at once.
pub const FAN_IN: usize = 64;

/// Sort key of a line without a readable time: before every timed row.
pub const UNTIMED: i64 = i64::MIN;

/// A line to sort: its key, number and text (`None`: longer than the line
/// limit, kept as a marker so the reader reports it).
#[derive(Clone, Copy, Debug)]
pub struct Entry<'a> {
    /// Time, ms since the epoch, or [`UNTIMED`].
    pub t: i64,
    /// 1-based line number in the original file.
    pub line: u64,
    /// The line's bytes, or `None` for a line too long to keep.
    pub text: Option<&'a [u8]>,
}

/// How the sort went, for the log's statistics.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, serde::Serialize)]
pub struct SortFigures {
    /// Runs written while cutting.
    pub runs: u64,
    /// Extra merge passes (groups of [`FAN_IN`] merged first).
    pub cascade_merges: u64,
    /// Bytes written to temporary files, all passes.
    pub temp_bytes: u64,
}

/// Cuts lines into sorted runs on disk.
pub struct Sorter {
    budget: usize,
    /// `(t, line, start, len)`; `len == u32::MAX`: too long.
    index: Vec<(i64, u64, usize, u32)>,
    bytes: Vec<u8>,
    runs: Vec<File>,
    figures: SortFigures,
}

impl Sorter {
    /// A sorter holding at most `budget` bytes at once: three quarters for
    /// line text, a quarter for the index (32 bytes a line). Both buffers
    /// are allocated once at their full size and never grow (a line longer
    /// than the text buffer is a run of its own).
    pub fn new(budget: usize) -> Self {
        let budget = budget.max(64);
        Self {
            budget: budget / 4 * 3,
            index: Vec::with_capacity((budget / 4 / 32).max(1)),
            bytes: Vec::with_capacity(budget / 4 * 3),
            runs: Vec::new(),
            figures: SortFigures::default(),
        }
    }

    /// Add one line.
    pub fn push(&mut self, e: Entry<'_>) -> io::Result<()> {
        let len = e.text.map_or(0, <[u8]>::len);
        if self.index.len() == self.index.capacity() || self.bytes.len() + len > self.budget {
            self.flush()?;
        }
        let start = self.bytes.len();
        let len = match e.text {
            Some(text) => {
                self.bytes.extend_from_slice(text);
                u32::try_from(text.len()).unwrap_or(u32::MAX - 1)
            }
            None => u32::MAX,
        };
        self.index.push((e.t, e.line, start, len));
        Ok(())
    }

    /// Write the lines held as one sorted run.
    fn flush(&mut self) -> io::Result<()> {
        if self.index.is_empty() {
            return Ok(());
        }
        self.index
            .sort_unstable_by_key(|&(t, line, _, _)| (t, line));
        let mut w = BufWriter::with_capacity(MERGE_BUFFER, tempfile::tempfile()?);
        for &(t, line, start, len) in &self.index {
            let text = match len {
                u32::MAX => None,
                n => self.bytes.get(start..start + n as usize),
            };
            self.figures.temp_bytes += write_record(&mut w, t, line, text)?;
        }
        let mut file = w.into_inner().map_err(|e| e.into_error())?;
        file.rewind()?;
        self.runs.push(file);
        self.figures.runs += 1;
        self.index.clear();
        self.bytes.clear();
        Ok(())
    }

    /// Finish cutting and merge the runs (in groups first when there are
    /// more than [`FAN_IN`]).
    pub fn finish(mut self) -> io::Result<(Merged, SortFigures)> {
        self.flush()?;
        self.index = Vec::new();
        self.bytes = Vec::new();
        let mut runs = std::mem::take(&mut self.runs);
        while runs.len() > FAN_IN {
            let rest = runs.split_off(FAN_IN);
            let mut merged = Merged::open(runs)?;
            let mut w = BufWriter::with_capacity(MERGE_BUFFER, tempfile::tempfile()?);
            while let Some((t, line, too_long)) = merged.advance()? {
                let text = (!too_long).then_some(merged.line());
                self.figures.temp_bytes += write_record(&mut w, t, line, text)?;
            }
            let mut file = w.into_inner().map_err(|e| e.into_error())?;
            file.rewind()?;
            runs = rest;
            runs.push(file);
            self.figures.cascade_merges += 1;
        }
        Ok((Merged::open(runs)?, self.figures))
    }
}

/// One record: time, line, length (`u32::MAX`: too long), text. Returns
/// the bytes written.
fn write_record(w: &mut impl Write, t: i64, line: u64, text: Option<&[u8]>) -> io::Result<u64> {
    let (len, body) = match text {
        Some(b) => (u32::try_from(b.len()).unwrap_or(u32::MAX - 1), b),
        None => (u32::MAX, &b""[..]),
    };
    w.write_all(&t.to_le_bytes())?;
    w.write_all(&line.to_le_bytes())?;
    w.write_all(&len.to_le_bytes())?;
    w.write_all(body)?;
    Ok(20 + body.len() as u64)
}

/// A run being read: its next record's key and text.
struct Run {
    reader: BufReader<File>,
    t: i64,
    line: u64,
    too_long: bool,
    text: Vec<u8>,
}

impl Run {
    /// Read the next record; `false` at the end of the run.
    fn next(&mut self) -> io::Result<bool> {
        let mut head = [0u8; 20];
        match self.reader.read_exact(&mut head) {
            Ok(()) => {}
            Err(e) if e.kind() == io::ErrorKind::UnexpectedEof => return Ok(false),
            Err(e) => return Err(e),
        }
        let word = |a: usize| {
            let mut b = [0u8; 8];
            b.copy_from_slice(head.get(a..a + 8).unwrap_or(&[0; 8]));
            b
        };
        self.t = i64::from_le_bytes(word(0));
        self.line = u64::from_le_bytes(word(8));
        let mut l = [0u8; 4];
        l.copy_from_slice(head.get(16..20).unwrap_or(&[0; 4]));
        let len = u32::from_le_bytes(l);
        self.too_long = len == u32::MAX;
        self.text.clear();
        if !self.too_long {
            self.text.resize(len as usize, 0);
            self.reader.read_exact(&mut self.text)?;
        }
        Ok(true)
    }
}

/// The merged runs: every line in `(time, line)` order, read like a file.
pub struct Merged {
    runs: Vec<Run>,
    heap: BinaryHeap<Reverse<(i64, u64, usize)>>,
    current: Vec<u8>,
}

impl Merged {
    fn open(files: Vec<File>) -> io::Result<Self> {
        let mut runs = Vec::with_capacity(files.len());
        let mut heap = BinaryHeap::with_capacity(files.len());
        for file in files {
            let mut run = Run {
                reader: BufReader::with_capacity(MERGE_BUFFER, file),
                t: 0,
                line: 0,
                too_long: false,
                text: Vec::new(),
            };
            if run.next()? {
                heap.push(Reverse((run.t, run.line, runs.len())));
                runs.push(run);
            }
        }
        Ok(Self {
            runs,
            heap,
            current: Vec::new(),
        })
    }

    /// Move to the next line: its key and whether it was too long.
    fn advance(&mut self) -> io::Result<Option<(i64, u64, bool)>> {
        let Some(Reverse((t, line, k))) = self.heap.pop() else {
            self.current.clear();
            return Ok(None);
        };
        let Some(run) = self.runs.get_mut(k) else {
            return Ok(None);
        };
        let too_long = run.too_long;
        std::mem::swap(&mut self.current, &mut run.text);
        if run.next()? {
            self.heap.push(Reverse((run.t, run.line, k)));
        }
        Ok(Some((t, line, too_long)))
    }

    /// The next line, as [`super::lines::LineReader::next_line`] gives it,
    /// numbered as in the original file.
    pub fn next_line(&mut self) -> io::Result<Line> {
        Ok(match self.advance()? {
            None => Line::End,
            Some((_, line, true)) => Line::TooLong(line),
            Some((_, line, false)) => Line::Text(line),
        })
    }

    /// The bytes of the last [`Line::Text`].
    pub fn line(&self) -> &[u8] {
        &self.current
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn sorted(entries: &[(i64, u64, Option<&str>)], budget: usize) -> (Vec<(Line, String)>, u64) {
        let mut s = Sorter::new(budget);
        for &(t, line, text) in entries {
            s.push(Entry {
                t,
                line,
                text: text.map(str::as_bytes),
            })
            .unwrap();
        }
        let (mut m, fig) = s.finish().unwrap();
        let mut out = Vec::new();
        loop {
            let l = m.next_line().unwrap();
            if l == Line::End {
                return (out, fig.runs);
            }
            out.push((l, String::from_utf8_lossy(m.line()).into_owned()));
        }
    }

    #[test]
    fn sorts_by_time_then_line_keeping_untimed_lines_first() {
        let input = [
            (30, 2, Some("c")),
            (10, 3, Some("a")),
            (UNTIMED, 4, Some("bad")),
            (20, 5, None),
            (10, 6, Some("a2")),
        ];
        let want = vec![
            (Line::Text(4), "bad".to_string()),
            (Line::Text(3), "a".to_string()),
            (Line::Text(6), "a2".to_string()),
            (Line::TooLong(5), String::new()),
            (Line::Text(2), "c".to_string()),
        ];
        // One run, one line per run, and a cascade (more runs than FAN_IN
        // is tested below): the same order every way.
        assert_eq!(sorted(&input, 1 << 20).0, want);
        let (got, runs) = sorted(&input, 1);
        assert_eq!(got, want);
        assert_eq!(runs, 5);
    }

    #[test]
    fn merges_more_runs_than_the_fan_in() {
        // A newest-first file of 3·FAN_IN lines, one line per run: the
        // cascade must give every line back once, in time order.
        let n = 3 * FAN_IN as u64;
        let texts: Vec<String> = (0..n).map(|i| format!("row {i}")).collect();
        let input: Vec<(i64, u64, Option<&str>)> = (0..n)
            .map(|i| {
                (
                    (n - i) as i64 * 1000,
                    i + 2,
                    Some(texts[i as usize].as_str()),
                )
            })
            .collect();
        let mut s = Sorter::new(1);
        for &(t, line, text) in &input {
            s.push(Entry {
                t,
                line,
                text: text.map(str::as_bytes),
            })
            .unwrap();
        }
        let (mut m, fig) = s.finish().unwrap();
        assert_eq!(fig.runs, n);
        assert!(fig.cascade_merges >= 2, "{fig:?}");
        let mut lines = Vec::new();
        while let Line::Text(l) = m.next_line().unwrap() {
            lines.push(l);
        }
        let want: Vec<u64> = (0..n).rev().map(|i| i + 2).collect();
        assert_eq!(lines, want);
    }
}
