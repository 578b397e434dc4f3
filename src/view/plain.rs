//! The plain frame log: one line per record, to a terminal, pipe or file.

use std::io::{self, Write};

use crate::ascii::EscapeMemo;
use crate::record::Level;
use crate::record::{Record, Sink};

use super::format::{Layout, log_line, step_line, write_frame_line};

pub struct PlainLog<W: Write> {
    out: W,
    /// One line's text, reused so a frame costs no allocation.
    line: String,
    layout: Layout,
    /// Print only log lines and steps, not frames (`--quiet`).
    frames: bool,
    /// The script file name as last escaped.
    files: EscapeMemo,
}

impl<W: Write> PlainLog<W> {
    /// Whole frame lines (nothing fitted to a width), coloured or not.
    pub fn new(out: W, colour: bool, frames: bool) -> Self {
        Self::with_layout(out, Layout { colour, ..Layout::default() }, frames)
    }

    pub fn with_layout(out: W, layout: Layout, frames: bool) -> Self {
        PlainLog { out, line: String::with_capacity(256), layout, frames, files: EscapeMemo::default() }
    }
}

impl<W: Write> Sink for PlainLog<W> {
    fn record(&mut self, r: &Record) -> io::Result<()> {
        match r {
            Record::Frame(f) if self.frames => {
                self.line.clear();
                write_frame_line(&mut self.line, f, &self.layout, &mut self.files);
                self.line.push('\n');
                self.out.write_all(self.line.as_bytes())
            }
            Record::Frame(_) => Ok(()),
            Record::Log { t, level, text, .. } => {
                writeln!(self.out, "{}", log_line(*t, *level == Level::Warn, text, self.layout.colour))
            }
            Record::Step { t, name, .. } => writeln!(self.out, "{}", step_line(*t, name, self.layout.colour)),
            // The summary goes to standard error, written by the command.
            Record::End { .. } => Ok(()),
        }
    }

    fn flush(&mut self) -> io::Result<()> {
        self.out.flush()
    }
}
