//! The JSON stream: one record per line, the same objects a trace holds.

use std::io::{self, Write};

use crate::record::{Record, Sink};

pub struct JsonLines<W: Write> {
    out: W,
}

impl<W: Write> JsonLines<W> {
    pub fn new(out: W) -> Self {
        JsonLines { out }
    }
}

impl<W: Write> Sink for JsonLines<W> {
    fn record(&mut self, r: &Record) -> io::Result<()> {
        serde_json::to_writer(&mut self.out, r)?;
        self.out.write_all(b"\n")
    }

    fn flush(&mut self) -> io::Result<()> {
        self.out.flush()
    }
}
