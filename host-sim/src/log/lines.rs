//! Bounded line reader and field splitter for the log's CSV (delimiter `,`
//! by default; `;`, tab or `|` when detected or configured).
//!
//! Written for constant memory: a line longer than [`MAX_LINE`] bytes is not
//! kept (it is skipped to its end and reported), so a file without newlines
//! or with an unterminated quote cannot make the reader grow. A quoted field
//! must close on its own line (numeric historian logs never need a newline
//! inside a field); `""` inside quotes is a literal quote. `\r\n`, `\n` and a
//! final line without terminator are accepted; a UTF-8 byte-order mark at
//! the start of the file is skipped.

use std::collections::VecDeque;
use std::io::{self, BufRead, BufReader, Read};

/// Longest accepted line, bytes (1 MiB: about 50 000 columns of 20 characters).
pub const MAX_LINE: usize = 1 << 20;

/// What [`LineReader::next_line`] found.
#[derive(Debug, PartialEq, Eq)]
pub enum Line {
    /// A line (1-based number), its bytes in [`LineReader::line`] without the terminator.
    Text(u64),
    /// A line longer than [`MAX_LINE`]: skipped.
    TooLong(u64),
    /// End of file.
    End,
}

/// Reads lines with a bounded buffer.
pub struct LineReader {
    inner: BufReader<Box<dyn Read>>,
    buf: Vec<u8>,
    line_no: u64,
    at_start: bool,
    /// Lines read ahead by [`LineReader::peek`], handed out again in order.
    ahead: VecDeque<(Line, Vec<u8>)>,
}

impl LineReader {
    /// Wrap a reader.
    pub fn new(inner: Box<dyn Read>) -> Self {
        Self {
            inner: BufReader::with_capacity(64 * 1024, inner),
            buf: Vec::new(),
            line_no: 0,
            at_start: true,
            ahead: VecDeque::new(),
        }
    }

    /// Read ahead up to `n` more non-blank text lines (fewer at the end of
    /// the file) without consuming them: [`LineReader::next_line`] hands
    /// them out again. Returns the bytes of every text line read ahead so
    /// far (blank ones excluded). Bounded by `n` lines of at most
    /// [`MAX_LINE`] bytes.
    pub fn peek(&mut self, n: usize) -> io::Result<Vec<Vec<u8>>> {
        let have = |ahead: &VecDeque<(Line, Vec<u8>)>| {
            ahead
                .iter()
                .filter(|(l, b)| matches!(l, Line::Text(_)) && !is_blank(b))
                .count()
        };
        while have(&self.ahead) < n {
            let line = self.read_line()?;
            let end = line == Line::End;
            self.ahead.push_back((line, std::mem::take(&mut self.buf)));
            if end {
                break;
            }
        }
        Ok(self
            .ahead
            .iter()
            .filter(|(l, b)| matches!(l, Line::Text(_)) && !is_blank(b))
            .map(|(_, b)| b.clone())
            .collect())
    }

    /// The bytes of the last [`Line::Text`].
    pub fn line(&self) -> &[u8] {
        &self.buf
    }

    /// Read the next line.
    pub fn next_line(&mut self) -> io::Result<Line> {
        if let Some((line, bytes)) = self.ahead.pop_front() {
            if line == Line::End {
                self.ahead.push_front((Line::End, Vec::new()));
            }
            self.buf = bytes;
            return Ok(line);
        }
        self.read_line()
    }

    fn read_line(&mut self) -> io::Result<Line> {
        self.buf.clear();
        let mut too_long = false;
        let mut any = false;
        loop {
            let chunk = match self.inner.fill_buf() {
                Ok(c) => c,
                Err(e) if e.kind() == io::ErrorKind::Interrupted => continue,
                Err(e) => return Err(e),
            };
            if chunk.is_empty() {
                break;
            }
            any = true;
            let (take, done) = match chunk.iter().position(|&b| b == b'\n') {
                Some(i) => (i, true),
                None => (chunk.len(), false),
            };
            if !too_long {
                if self.buf.len() + take > MAX_LINE {
                    too_long = true;
                    self.buf.clear();
                } else {
                    self.buf
                        .extend_from_slice(chunk.get(..take).unwrap_or_default());
                }
            }
            self.inner.consume(if done { take + 1 } else { take });
            if done {
                break;
            }
        }
        if !any {
            return Ok(Line::End);
        }
        self.line_no += 1;
        if too_long {
            return Ok(Line::TooLong(self.line_no));
        }
        if self.buf.last() == Some(&b'\r') {
            self.buf.pop();
        }
        if self.at_start {
            self.at_start = false;
            if self.buf.starts_with(b"\xEF\xBB\xBF") {
                self.buf.drain(..3);
            }
        }
        Ok(Line::Text(self.line_no))
    }

    /// Does the file start with a UTF-16 byte-order mark? (Checked before
    /// the first line is read.)
    pub fn starts_utf16(&mut self) -> io::Result<bool> {
        let head = self.inner.fill_buf()?;
        Ok(head.starts_with(b"\xFF\xFE") || head.starts_with(b"\xFE\xFF"))
    }
}

/// Why a line could not be split.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum SplitError {
    /// A quoted field without its closing quote on the line.
    UnterminatedQuote,
    /// Text between a closing quote and the next comma.
    TextAfterQuote,
}

/// The fields of one line, reusing their buffers from line to line.
pub struct Fields {
    bytes: Vec<u8>,
    ends: Vec<usize>,
    delimiter: u8,
}

impl Default for Fields {
    fn default() -> Self {
        Self::with_delimiter(b',')
    }
}

impl Fields {
    /// Fields split at `delimiter`.
    pub fn with_delimiter(delimiter: u8) -> Self {
        Self {
            bytes: Vec::new(),
            ends: Vec::new(),
            delimiter,
        }
    }

    /// Split `line` at the delimiter (quotes as described in the module doc).
    pub fn split(&mut self, line: &[u8]) -> Result<(), SplitError> {
        self.bytes.clear();
        self.ends.clear();
        let mut i = 0;
        loop {
            // Leading blanks before a quote are allowed; otherwise kept and
            // trimmed by the callers.
            let mut j = i;
            let delim = self.delimiter;
            let blank = |b: u8| (b == b' ' || b == b'\t') && b != delim;
            while line.get(j).is_some_and(|&b| blank(b)) {
                j += 1;
            }
            if line.get(j) == Some(&b'"') {
                j += 1;
                loop {
                    match line.get(j) {
                        None => return Err(SplitError::UnterminatedQuote),
                        Some(b'"') if line.get(j + 1) == Some(&b'"') => {
                            self.bytes.push(b'"');
                            j += 2;
                        }
                        Some(b'"') => {
                            j += 1;
                            break;
                        }
                        Some(&b) => {
                            self.bytes.push(b);
                            j += 1;
                        }
                    }
                }
                while line.get(j).is_some_and(|&b| blank(b)) {
                    j += 1;
                }
                self.ends.push(self.bytes.len());
                match line.get(j) {
                    None => return Ok(()),
                    Some(&b) if b == delim => i = j + 1,
                    Some(_) => return Err(SplitError::TextAfterQuote),
                }
            } else {
                let rest = line.get(i..).unwrap_or_default();
                match rest.iter().position(|&b| b == delim) {
                    Some(k) => {
                        self.bytes
                            .extend_from_slice(rest.get(..k).unwrap_or_default());
                        self.ends.push(self.bytes.len());
                        i += k + 1;
                    }
                    None => {
                        self.bytes.extend_from_slice(rest);
                        self.ends.push(self.bytes.len());
                        return Ok(());
                    }
                }
            }
        }
    }

    /// Number of fields.
    pub fn len(&self) -> usize {
        self.ends.len()
    }

    /// Field `i`, trimmed of ASCII blanks; empty if out of range.
    pub fn get(&self, i: usize) -> &[u8] {
        let start = match i {
            0 => 0,
            _ => self.ends.get(i - 1).copied().unwrap_or(0),
        };
        let end = self.ends.get(i).copied().unwrap_or(start);
        self.bytes.get(start..end).unwrap_or_default().trim_ascii()
    }
}

/// Is the line empty or only blanks?
pub fn is_blank(line: &[u8]) -> bool {
    line.iter().all(u8::is_ascii_whitespace)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn split(line: &str) -> Result<Vec<String>, SplitError> {
        let mut f = Fields::default();
        f.split(line.as_bytes())?;
        Ok((0..f.len())
            .map(|i| String::from_utf8_lossy(f.get(i)).into_owned())
            .collect())
    }

    #[test]
    fn splits_at_other_delimiters() {
        // Same quoting rule (RFC 4180) with another delimiter byte.
        let mut f = Fields::with_delimiter(b';');
        f.split(br#"t;"12,5"; 3,0"#).unwrap();
        assert_eq!(
            (f.len(), f.get(1), f.get(2)),
            (3, &b"12,5"[..], &b"3,0"[..])
        );
        let mut f = Fields::with_delimiter(b'\t');
        f.split(b"a\t\tb").unwrap();
        assert_eq!((f.len(), f.get(1), f.get(2)), (3, &b""[..], &b"b"[..]));
    }

    #[test]
    fn peeked_lines_come_again() {
        let mut r = LineReader::new(Box::new(io::Cursor::new(b"h\n\na\nb\n".to_vec())));
        assert_eq!(
            r.peek(5).unwrap(),
            [b"h".to_vec(), b"a".to_vec(), b"b".to_vec()]
        );
        assert_eq!(r.next_line().unwrap(), Line::Text(1));
        assert_eq!(r.line(), b"h");
        assert_eq!(r.next_line().unwrap(), Line::Text(2));
        assert_eq!(r.next_line().unwrap(), Line::Text(3));
        assert_eq!(r.line(), b"a");
        assert_eq!(r.next_line().unwrap(), Line::Text(4));
        assert_eq!(r.next_line().unwrap(), Line::End);
        assert_eq!(r.next_line().unwrap(), Line::End);
    }

    #[test]
    fn splits_fields_and_quotes() {
        // Expected splits follow RFC 4180's quoting rule ("" is a quote).
        assert_eq!(split("a,b,,c").unwrap(), ["a", "b", "", "c"]);
        assert_eq!(split("").unwrap(), [""]);
        assert_eq!(split("a,").unwrap(), ["a", ""]);
        assert_eq!(
            split(r#""x,y", "say ""hi""" ,z"#).unwrap(),
            ["x,y", r#"say "hi""#, "z"]
        );
        assert_eq!(split(r#"a"b,c"#).unwrap(), [r#"a"b"#, "c"]);
        assert_eq!(split(r#""open,b"#), Err(SplitError::UnterminatedQuote));
        assert_eq!(split(r#""a"b,c"#), Err(SplitError::TextAfterQuote));
    }

    fn lines(data: &[u8]) -> Vec<(Line, Vec<u8>)> {
        let mut r = LineReader::new(Box::new(io::Cursor::new(data.to_vec())));
        let mut out = Vec::new();
        loop {
            let l = r.next_line().unwrap();
            let end = l == Line::End;
            out.push((l, r.line().to_vec()));
            if end {
                return out;
            }
        }
    }

    #[test]
    fn reads_lines_crlf_bom_and_long_lines() {
        let got = lines(b"\xEF\xBB\xBFa,b\r\n1,2\n\n3,4");
        assert_eq!(got[0], (Line::Text(1), b"a,b".to_vec()));
        assert_eq!(got[1], (Line::Text(2), b"1,2".to_vec()));
        assert_eq!(got[2], (Line::Text(3), b"".to_vec()));
        assert_eq!(got[3], (Line::Text(4), b"3,4".to_vec()));
        assert_eq!(got[4].0, Line::End);
        let mut big = vec![b'x'; MAX_LINE + 10];
        big.extend_from_slice(b"\nok\n");
        let got = lines(&big);
        assert_eq!(got[0].0, Line::TooLong(1));
        assert_eq!(got[1], (Line::Text(2), b"ok".to_vec()));
        assert_eq!(got[2].0, Line::End);
    }
}
