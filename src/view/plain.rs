//! The plain frame log: one line per record, to a terminal, pipe or file.

use std::io::{self, Write};

use crate::trace::record::Level;
use crate::trace::{Record, Sink};

use super::format::{frame_line, log_line, step_line};

pub struct PlainLog<W: Write> {
    out: W,
    colour: bool,
    /// Print only log lines and steps, not frames (`--quiet`).
    frames: bool,
}

impl<W: Write> PlainLog<W> {
    pub fn new(out: W, colour: bool, frames: bool) -> Self {
        PlainLog { out, colour, frames }
    }
}

impl<W: Write> Sink for PlainLog<W> {
    fn record(&mut self, r: &Record) -> io::Result<()> {
        match r {
            Record::Frame(f) if self.frames => writeln!(self.out, "{}", frame_line(f, self.colour)),
            Record::Frame(_) => Ok(()),
            Record::Log { t, level, text, .. } => {
                writeln!(self.out, "{}", log_line(*t, *level == Level::Warn, text, self.colour))
            }
            Record::Step { t, name, .. } => writeln!(self.out, "{}", step_line(*t, name, self.colour)),
            // The summary goes to standard error, written by the command.
            Record::End { .. } => Ok(()),
        }
    }

    fn flush(&mut self) -> io::Result<()> {
        self.out.flush()
    }
}
