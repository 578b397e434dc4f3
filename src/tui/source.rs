//! What the view reads records from, and the few facts it keeps about
//! each record without parsing it (its [`Flags`]).

use std::borrow::Cow;

use crate::record::{Frame, Record, Stats};

/// One byte per record: its kind and whether it is a frame that failed.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub struct Flags(pub u8);

impl Flags {
    pub const FRAME: u8 = 1;
    pub const LOG: u8 = 2;
    pub const STEP: u8 = 4;
    pub const END: u8 = 8;
    /// A frame whose fault is a NACK of any kind.
    pub const NACK: u8 = 16;
    /// A frame whose fault is anything but a NACK.
    pub const ERROR: u8 = 32;
    /// A frame that is a retry (attempt > 1).
    pub const RETRY: u8 = 64;

    pub fn has(self, bit: u8) -> bool {
        self.0 & bit != 0
    }

    /// Whether the record is a failed frame (the NACK/error jumps stop here).
    pub fn failed(self) -> bool {
        self.has(Flags::NACK | Flags::ERROR)
    }

    /// The flags of a parsed record.
    pub fn of(r: &Record) -> Flags {
        match r {
            Record::Frame(f) => Flags::of_frame(f),
            Record::Log { .. } => Flags(Flags::LOG),
            Record::Step { .. } => Flags(Flags::STEP),
            Record::End { .. } => Flags(Flags::END),
        }
    }

    pub fn of_frame(f: &Frame) -> Flags {
        let mut b = Flags::FRAME;
        match &f.outcome.fault {
            Some(fault) if fault.is_nack() => b |= Flags::NACK,
            Some(_) => b |= Flags::ERROR,
            None => {}
        }
        if f.attempt > 1 {
            b |= Flags::RETRY;
        }
        Flags(b)
    }
}

/// The counts the status line shows.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct Counts {
    pub frames: u64,
    pub retries: u64,
    pub nacks: u64,
    pub errors: u64,
    pub bus_ns: u64,
}

impl Counts {
    pub fn add(&mut self, fl: Flags) {
        self.frames += fl.has(Flags::FRAME) as u64;
        self.retries += fl.has(Flags::RETRY) as u64;
        self.nacks += fl.has(Flags::NACK) as u64;
        self.errors += fl.has(Flags::ERROR) as u64;
    }
}

/// How a run (or a recording of one) ended, for the status line.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Ending {
    pub stats: Stats,
    pub exit: u8,
    pub error: Option<String>,
}

/// Records by position, from 0, in the order they happened.
pub trait Source {
    /// Records known so far.
    fn len(&self) -> usize;
    fn is_empty(&self) -> bool {
        self.len() == 0
    }
    /// The record at `i`, parsed (or `None` when it cannot be had: a damaged
    /// line, or a live record dropped from the bounded buffer).
    fn record(&mut self, i: usize) -> Option<Cow<'_, Record>>;
    fn flags(&self, i: usize) -> Flags;
    /// Takes in records that arrived since the last call; whether any did.
    fn refresh(&mut self) -> bool;
    /// Counts over every record known so far.
    fn counts(&self) -> Counts;
    /// The adapter and bus speed, for the status line.
    fn adapter(&self) -> String;
    /// The step the run was in at its newest record.
    fn current_step(&self) -> Option<String>;
    /// The end of the run, once it has ended.
    fn ending(&self) -> Option<Ending>;
    /// Whether more records may still come (a live run, a followed file).
    fn growing(&self) -> bool;
}
