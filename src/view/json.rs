//! The JSON stream: one record per line, the same objects a trace holds.

use std::io::{self, Write};

use crate::ascii::EscapeMemo;
use crate::record::{Record, Sink, write_line_with};

pub struct JsonLines<W: Write> {
    out: W,
    /// One line, reused: the output gets it in one write, not serde's many.
    line: Vec<u8>,
    /// The script file name as last written.
    files: EscapeMemo,
}

impl<W: Write> JsonLines<W> {
    pub fn new(out: W) -> Self {
        JsonLines { out, line: Vec::with_capacity(512), files: EscapeMemo::default() }
    }
}

impl<W: Write> Sink for JsonLines<W> {
    fn record(&mut self, r: &Record) -> io::Result<()> {
        self.line.clear();
        write_line_with(r, &mut self.line, &mut self.files);
        self.out.write_all(&self.line)
    }

    fn flush(&mut self) -> io::Result<()> {
        self.out.flush()
    }
}
