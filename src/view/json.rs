//! The JSON stream: one record per line, the same objects a trace holds.

use std::io::{self, Write};

use crate::record::{Record, Sink, write_line};

pub struct JsonLines<W: Write> {
    out: W,
    /// One line, reused: the output gets it in one write, not serde's many.
    line: Vec<u8>,
}

impl<W: Write> JsonLines<W> {
    pub fn new(out: W) -> Self {
        JsonLines { out, line: Vec::with_capacity(512) }
    }
}

impl<W: Write> Sink for JsonLines<W> {
    fn record(&mut self, r: &Record) -> io::Result<()> {
        self.line.clear();
        write_line(r, &mut self.line);
        self.out.write_all(&self.line)
    }

    fn flush(&mut self) -> io::Result<()> {
        self.out.flush()
    }
}
