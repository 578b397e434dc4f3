//! Logic captures of SDA and SCL in, transactions, bus errors and timing
//! measurements out.
//!
//! Contract:
//! - Inputs are a Value Change Dump ([`vcd`], IEEE 1364-2005 clause 18) or
//!   a sample table ([`table`]), either of them gzip-compressed (told by
//!   the gzip magic bytes, RFC 1952 §2.3.1, not by the file name).
//! - One pass, constant memory: readers push line levels into the
//!   [`decode::Decoder`] as they read; transactions leave it as
//!   [`record::Frame`](crate::record::Frame)s through a callback, never
//!   collected. Stored issues and violations are capped ([`MAX_KEPT`]);
//!   the rest are counted.
//! - Time is an integer count of the file's own ticks ([`Ticks`]) on the
//!   decode path; nanoseconds are made only for output.
//! - Unknown levels (`x`, `z`, a voltage between the thresholds at the
//!   start) are reported as issues, never guessed as 0 or 1.
//! - Every error of a file names the file and line ([`CaptureError`]).
//! - Pictures: [`picture`] gathers chosen transactions in two passes
//!   (memory for those transactions only) and [`svg`] draws them, every
//!   text from a file XML-escaped.

pub mod decode;
pub mod picture;
pub mod svg;
pub mod synth;
pub mod table;
pub mod timing;
pub mod vcd;

use std::fs::File;
use std::io::{BufRead, BufReader, Read};
use std::path::Path;

use thiserror::Error;

/// Most issues and violations kept for the report; more are counted.
pub const MAX_KEPT: usize = 10_000;

/// The longest line a capture may hold; a longer one is refused rather
/// than buffered whole.
pub const MAX_LINE: usize = 1 << 20;

/// A time as a count of the capture's ticks, with the tick's length.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Ticks {
    /// Femtoseconds per tick: 1 (1 fs) up to 10^17 (100 s).
    pub fs: u64,
}

impl Ticks {
    /// Ticks to nanoseconds, rounded down (u128: no overflow for any u64).
    pub fn ns(self, t: u64) -> u64 {
        (t as u128 * self.fs as u128 / 1_000_000) as u64
    }

    /// Nanoseconds to ticks, rounded up (a limit in ticks is never shorter
    /// than the limit itself).
    pub fn ticks_ceil(self, ns: u64) -> u64 {
        let fs = ns as u128 * 1_000_000;
        fs.div_ceil(self.fs as u128).min(u64::MAX as u128) as u64
    }

    /// Ticks to picoseconds, for durations shorter than a nanosecond.
    pub fn ps(self, t: u64) -> u64 {
        (t as u128 * self.fs as u128 / 1000).min(u64::MAX as u128) as u64
    }
}

/// A line level as a capture gives it.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Level {
    Low,
    High,
    /// `x`, `z`, or a voltage never yet past a threshold.
    Unknown,
}

/// Why a capture could not be read.
#[derive(Debug, Error)]
pub enum CaptureError {
    #[error("{file}: {source}")]
    Io {
        file: String,
        #[source]
        source: std::io::Error,
    },
    #[error("{file}:{line}: {message}")]
    At { file: String, line: u64, message: String },
    #[error("{file}: {message}")]
    File { file: String, message: String },
}

/// The kinds of capture file.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Kind {
    Vcd,
    Table,
}

/// Opens a capture, unpacking gzip when the file starts with its magic.
pub fn open(path: &Path) -> Result<Box<dyn BufRead>, CaptureError> {
    let file = path.display().to_string();
    let f = File::open(path).map_err(|source| CaptureError::Io { file: file.clone(), source })?;
    let mut r = BufReader::with_capacity(1 << 16, f);
    let head = r.fill_buf().map_err(|source| CaptureError::Io { file, source })?;
    if head.starts_with(&[0x1f, 0x8b]) {
        let gz = flate2::bufread::MultiGzDecoder::new(r);
        Ok(Box::new(BufReader::with_capacity(1 << 16, gz)))
    } else {
        Ok(Box::new(r))
    }
}

/// The kind of a capture from its first bytes: a VCD starts with a `$`
/// section (after blank lines); anything else is read as a table.
pub fn sniff(r: &mut dyn BufRead) -> std::io::Result<Kind> {
    let head = r.fill_buf()?;
    let first = head.iter().find(|b| !b.is_ascii_whitespace());
    Ok(if first == Some(&b'$') { Kind::Vcd } else { Kind::Table })
}

/// Lines of a reader, one buffer refilled in place: no allocation per
/// line, a line number for every error, [`MAX_LINE`] enforced.
pub struct Lines<R> {
    input: R,
    buf: Vec<u8>,
    start: usize,
    end: usize,
    eof: bool,
    /// The number of the line last returned, from 1.
    pub line: u64,
    pub file: String,
}

impl<R: Read> Lines<R> {
    pub fn new(input: R, file: &str) -> Self {
        Lines { input, buf: vec![0; 1 << 18], start: 0, end: 0, eof: false, line: 0, file: file.into() }
    }

    /// An error at the current line.
    pub fn err(&self, message: impl Into<String>) -> CaptureError {
        CaptureError::At { file: self.file.clone(), line: self.line.max(1), message: message.into() }
    }

    /// The next line without its end (`\n` or `\r\n`), or None at the end.
    pub fn next_line(&mut self) -> Result<Option<&[u8]>, CaptureError> {
        Ok(self.next_range()?.map(|r| &self.buf[r]))
    }

    /// The bytes of a range [`Lines::next_range`] returned.
    pub fn slice(&self, r: std::ops::Range<usize>) -> &[u8] {
        &self.buf[r]
    }

    /// Where the next line sits in the buffer (valid until the next call).
    pub fn next_range(&mut self) -> Result<Option<std::ops::Range<usize>>, CaptureError> {
        loop {
            if let Some(i) = memchr::memchr(b'\n', &self.buf[self.start..self.end]) {
                let s = self.start;
                self.start += i + 1;
                self.line += 1;
                let e = if i > 0 && self.buf[s + i - 1] == b'\r' { s + i - 1 } else { s + i };
                return Ok(Some(s..e));
            }
            if self.eof {
                if self.start == self.end {
                    return Ok(None);
                }
                let s = self.start;
                self.start = self.end;
                self.line += 1;
                return Ok(Some(s..self.end));
            }
            if self.end - self.start >= MAX_LINE {
                self.line += 1;
                return Err(self.err(format!("line longer than {MAX_LINE} bytes")));
            }
            // Move the partial line to the front and read behind it.
            self.buf.copy_within(self.start..self.end, 0);
            self.end -= self.start;
            self.start = 0;
            if self.end == self.buf.len() {
                self.buf.resize(self.buf.len() * 2, 0);
            }
            let n = loop {
                match self.input.read(&mut self.buf[self.end..]) {
                    Ok(n) => break n,
                    Err(e) if e.kind() == std::io::ErrorKind::Interrupted => continue,
                    Err(source) => return Err(CaptureError::Io { file: self.file.clone(), source }),
                }
            };
            if n == 0 {
                self.eof = true;
            }
            self.end += n;
        }
    }
}
