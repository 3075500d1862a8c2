//! A guarded text input: every text reader (XYZ maps, the wells CSV) reads its file through
//! [`Guarded`], which
//!
//! - skips a UTF-8 byte-order mark at the start (spreadsheets write one),
//! - turns CRLF and a lone CR into LF, so every reader counts lines alike whatever wrote the file,
//! - stops with an error once the file passes its byte limit or a line passes its length limit,
//!   so that neither a huge file nor an endless one (a device such as `/dev/zero`) fills memory.
//!
//! The errors are `std::io::Error`s of kind `InvalidData` wrapping a [`Limit`]; readers recover it
//! with [`Limit::from_io`] to name the file and line in their own error.

use std::fmt;
use std::fs::File;
use std::io::{self, BufRead, BufReader, Read};
use std::path::Path;

/// The UTF-8 encoding of U+FEFF, the byte-order mark.
const BOM: [u8; 3] = [0xEF, 0xBB, 0xBF];

/// A limit that stopped a guarded read.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Limit {
    /// The file holds more bytes than allowed.
    File {
        /// The limit in bytes.
        max: u64,
        /// Why that limit, in words.
        why: String,
    },
    /// A line is longer than allowed.
    Line {
        /// 1-based line number.
        line: u64,
        /// The limit in bytes.
        max: usize,
    },
}

impl fmt::Display for Limit {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Limit::File { max, why } => {
                write!(f, "more than {max} bytes ({why}); reading stopped there")
            }
            Limit::Line { line, max } => write!(
                f,
                "line {line} is longer than {max} bytes; reading stopped there"
            ),
        }
    }
}

impl std::error::Error for Limit {}

impl Limit {
    /// The limit behind an I/O error returned by a [`Guarded`] reader, if that is what it is.
    pub fn from_io(e: &io::Error) -> Option<&Limit> {
        e.get_ref().and_then(|inner| inner.downcast_ref::<Limit>())
    }
}

/// Line counting and line-end state of a [`Guarded`] reader.
struct Lines {
    max_line: usize,
    /// Bytes of the current line so far (after normalisation).
    len: usize,
    /// 1-based number of the current line.
    line: u64,
    /// The previous byte was a CR whose line end is yet to be written.
    pending_cr: bool,
}

impl Lines {
    /// Writes a line end to `out[*n]` and starts the next line.
    fn end_line(&mut self, out: &mut [u8], n: &mut usize) {
        out[*n] = b'\n';
        *n += 1;
        self.line += 1;
        self.len = 0;
    }

    /// Normalises bytes of `chunk` into `out`; returns (bytes of `chunk` used, bytes written).
    fn process(&mut self, chunk: &[u8], out: &mut [u8]) -> io::Result<(usize, usize)> {
        let (mut used, mut n) = (0, 0);
        while used < chunk.len() && n < out.len() {
            let b = chunk[used];
            if self.pending_cr {
                // The CR ends the line whatever follows; a following LF belongs to it.
                self.pending_cr = false;
                self.end_line(out, &mut n);
                if b == b'\n' {
                    used += 1;
                }
                continue;
            }
            match b {
                b'\r' => {
                    self.pending_cr = true;
                    used += 1;
                }
                b'\n' => {
                    self.end_line(out, &mut n);
                    used += 1;
                }
                _ => {
                    // A run of ordinary bytes, copied at once.
                    let rest = &chunk[used..];
                    let run = rest
                        .iter()
                        .position(|&c| c == b'\r' || c == b'\n')
                        .unwrap_or(rest.len())
                        .min(out.len() - n);
                    out[n..n + run].copy_from_slice(&rest[..run]);
                    n += run;
                    used += run;
                    self.len += run;
                    if self.len > self.max_line {
                        return Err(io::Error::new(
                            io::ErrorKind::InvalidData,
                            Limit::Line {
                                line: self.line,
                                max: self.max_line,
                            },
                        ));
                    }
                }
            }
        }
        Ok((used, n))
    }
}

/// A reader that skips a leading byte-order mark, normalises line ends to LF and enforces a file
/// size and a line length limit (see the module documentation).
pub struct Guarded<R> {
    inner: BufReader<R>,
    max_bytes: u64,
    why: String,
    /// Bytes taken from `inner` so far.
    taken: u64,
    /// Still at the start of the input (a byte-order mark may follow).
    at_start: bool,
    lines: Lines,
}

impl<R: Read> Guarded<R> {
    /// Guards `inner`: at most `max_bytes` bytes (`why` says where that limit comes from, for the
    /// message) and lines of at most `max_line` bytes.
    pub fn new(inner: R, max_bytes: u64, why: impl Into<String>, max_line: usize) -> Self {
        Guarded {
            inner: BufReader::with_capacity(64 * 1024, inner),
            max_bytes,
            why: why.into(),
            taken: 0,
            at_start: true,
            lines: Lines {
                max_line,
                len: 0,
                line: 1,
                pending_cr: false,
            },
        }
    }
}

impl<R: Read> Read for Guarded<R> {
    fn read(&mut self, out: &mut [u8]) -> io::Result<usize> {
        if out.is_empty() {
            return Ok(0);
        }
        let mut n = 0;
        while n == 0 {
            let chunk = self.inner.fill_buf()?;
            if chunk.is_empty() {
                if self.lines.pending_cr {
                    self.lines.pending_cr = false;
                    self.lines.end_line(out, &mut n);
                }
                return Ok(n);
            }
            let mut skip = 0;
            if self.at_start {
                self.at_start = false;
                if chunk.starts_with(&BOM) {
                    skip = BOM.len();
                }
            }
            let (used, wrote) = self.lines.process(&chunk[skip..], out)?;
            n = wrote;
            self.inner.consume(skip + used);
            self.taken += (skip + used) as u64;
            if self.taken > self.max_bytes {
                return Err(io::Error::new(
                    io::ErrorKind::InvalidData,
                    Limit::File {
                        max: self.max_bytes,
                        why: self.why.clone(),
                    },
                ));
            }
        }
        Ok(n)
    }
}

/// Opens `path` for a guarded read. A regular file larger than `max_bytes` is refused before any
/// of it is read.
pub fn open(path: &Path, max_bytes: u64, why: &str, max_line: usize) -> io::Result<Guarded<File>> {
    let file = File::open(path)?;
    let meta = file.metadata()?;
    if meta.is_dir() {
        return Err(io::Error::new(io::ErrorKind::InvalidInput, "is a folder"));
    }
    if meta.is_file() && meta.len() > max_bytes {
        return Err(io::Error::new(
            io::ErrorKind::InvalidData,
            Limit::File {
                max: max_bytes,
                why: why.to_string(),
            },
        ));
    }
    Ok(Guarded::new(file, max_bytes, why, max_line))
}

/// Reads at most `max_bytes` bytes of `path` into memory (binary files such as GeoTIFF); a
/// regular file larger than that is refused before reading, and any other file (a device, a
/// pipe) stops with the same error once it passes the limit.
pub fn read_capped(path: &Path, max_bytes: u64, why: &str) -> io::Result<Vec<u8>> {
    let file = File::open(path)?;
    let meta = file.metadata()?;
    if meta.is_dir() {
        return Err(io::Error::new(io::ErrorKind::InvalidInput, "is a folder"));
    }
    let too_big = || {
        io::Error::new(
            io::ErrorKind::InvalidData,
            Limit::File {
                max: max_bytes,
                why: why.to_string(),
            },
        )
    };
    if meta.is_file() && meta.len() > max_bytes {
        return Err(too_big());
    }
    let mut bytes = Vec::new();
    file.take(max_bytes.saturating_add(1))
        .read_to_end(&mut bytes)?;
    if bytes.len() as u64 > max_bytes {
        return Err(too_big());
    }
    Ok(bytes)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn all(input: &[u8], max_bytes: u64, max_line: usize) -> io::Result<Vec<u8>> {
        let mut g = Guarded::new(input, max_bytes, "test", max_line);
        let mut out = Vec::new();
        // Small reads exercise the carry-over of a CR across calls.
        let mut buf = [0u8; 3];
        loop {
            let n = g.read(&mut buf)?;
            if n == 0 {
                return Ok(out);
            }
            out.extend_from_slice(&buf[..n]);
        }
    }

    #[test]
    fn bom_and_line_ends_are_normalised() {
        let out = all(b"\xEF\xBB\xBFa\r\nb\rc\n\r\nd\r", 100, 10).unwrap();
        assert_eq!(out, b"a\nb\nc\n\nd\n");
    }

    #[test]
    fn limits_stop_the_read() {
        let e = all(b"abc\ndefghij\n", 100, 4).unwrap_err();
        assert_eq!(
            Limit::from_io(&e),
            Some(&Limit::Line { line: 2, max: 4 }),
            "{e}"
        );
        let e = all(&[b'x'; 50], 20, 100).unwrap_err();
        assert!(matches!(
            Limit::from_io(&e),
            Some(Limit::File { max: 20, .. })
        ));
    }
}
