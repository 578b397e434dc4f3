//! What `diff` and `replay` may leave out of a comparison: the frames
//! whose number depends on the board's speed or luck rather than on what
//! the script asked for.
//!
//! Contract (docs/traces.md, "Ignoring polls, retries and scans"):
//! - `scans`: every frame with the `scan` purpose is left out.
//! - `retries`: of the attempts of one request (frames where
//!   [`retry_of`] holds between neighbours) only the last is kept: it is
//!   the one whose outcome the script saw.
//! - `polls`: of a run of polls (frames where [`same_wait`] holds between
//!   neighbours: register polls of a `wait`, or the probes of an ACK poll)
//!   only the last is kept: the read or probe that ended the wait.
//! - A frame is left out only by looking at the frame after it, so a
//!   trace is filtered in one pass holding one frame ([`Collapse`]).
//!
//! So a faster EEPROM (fewer ACK polls), one more retry or a scan of a
//! different range makes no difference, while a wait that ended
//! differently (a timeout against a success) still does: the last frame
//! of the run is compared.

use std::fmt;
use std::str::FromStr;

use crate::record::{Frame, Purpose};

/// Which kinds of frames to leave out.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct Ignore {
    pub polls: bool,
    pub retries: bool,
    pub scans: bool,
}

/// A list item `--ignore` does not know.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error("`{0}` is not something to ignore: give polls, retries or scans, comma-separated")]
pub struct IgnoreError(String);

impl FromStr for Ignore {
    type Err = IgnoreError;

    fn from_str(s: &str) -> Result<Self, Self::Err> {
        let mut out = Ignore::default();
        for item in s.split(',').map(str::trim) {
            match item {
                "polls" | "poll" => out.polls = true,
                "retries" | "retry" => out.retries = true,
                "scans" | "scan" => out.scans = true,
                other => return Err(IgnoreError(crate::ascii::escape_controls(other).into_owned())),
            }
        }
        Ok(out)
    }
}

impl fmt::Display for Ignore {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let names: Vec<&str> = [(self.polls, "polls"), (self.retries, "retries"), (self.scans, "scans")]
            .into_iter()
            .filter_map(|(on, n)| on.then_some(n))
            .collect();
        f.write_str(&names.join(","))
    }
}

impl Ignore {
    /// Whether anything is ignored at all.
    pub fn any(&self) -> bool {
        self.polls || self.retries || self.scans
    }

    /// Whether `f` is left out whatever follows it.
    pub fn drops(&self, f: &Frame) -> bool {
        self.scans && f.purpose == Some(Purpose::Scan)
    }

    /// Whether `f` is left out because `next` (the frame after it) stands
    /// for it: a later attempt of the same request, or a later poll of
    /// the same wait.
    pub fn superseded(&self, f: &Frame, next: &Frame) -> bool {
        (self.retries && retry_of(f, next)) || (self.polls && same_wait(f, next))
    }

    /// Whether `f` is one poll of a wait, with polls ignored.
    pub fn is_ignored_poll(&self, f: &Frame) -> bool {
        self.polls && matches!(f.purpose, Some(Purpose::Poll | Purpose::AckPoll))
    }
}

/// Whether `next` is another attempt of the same request as `prev`.
pub fn retry_of(prev: &Frame, next: &Frame) -> bool {
    next.attempt == prev.attempt + 1
        && next.address == prev.address
        && next.ops == prev.ops
        && next.origin == prev.origin
        && next.purpose == prev.purpose
}

/// Whether `next` polls on for the same wait as `prev`: both polls of one
/// kind to one address from one script line, the same request, and `prev`
/// did not end it (an ACK poll ends at its first ACK; a register poll's
/// end is only known from the frame after it, which is not a poll).
pub fn same_wait(prev: &Frame, next: &Frame) -> bool {
    let kind = match prev.purpose {
        Some(Purpose::AckPoll) => prev.outcome.fault.is_some(),
        Some(Purpose::Poll) => next.ops == prev.ops,
        _ => false,
    };
    kind && next.purpose == prev.purpose && next.address == prev.address && next.origin == prev.origin
}

/// One-pass filter: push frames in order, get back those kept. Holds the
/// one frame whose fate the next decides, with whatever the caller keeps
/// beside it (its place in the file).
#[derive(Debug)]
pub struct Collapse<T> {
    ignore: Ignore,
    held: Option<(Frame, T)>,
    /// Frames left out so far.
    pub left_out: u64,
}

impl<T> Collapse<T> {
    pub fn new(ignore: Ignore) -> Self {
        Collapse { ignore, held: None, left_out: 0 }
    }

    /// Takes the next frame; returns the frame before it if that one is kept.
    pub fn push(&mut self, f: Frame, extra: T) -> Option<(Frame, T)> {
        if self.ignore.drops(&f) {
            self.left_out += 1;
            return None;
        }
        let out = match self.held.take() {
            Some((prev, _)) if self.ignore.superseded(&prev, &f) => {
                self.left_out += 1;
                None
            }
            held => held,
        };
        self.held = Some((f, extra));
        out
    }

    /// The frame held at the end, which nothing follows: kept.
    pub fn finish(&mut self) -> Option<(Frame, T)> {
        self.held.take()
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::bus::{Address, Fault, OpOutcome, Operation, Outcome};
    use std::time::Duration;

    fn frame(seq: u64, purpose: Option<Purpose>, nack: bool, attempt: u32) -> Frame {
        let outcome = Outcome {
            ops: vec![OpOutcome::default()],
            bus_time: Duration::ZERO,
            measured: None,
            fault: nack.then_some(Fault::AddressNack { op: 0, direction: crate::bus::Direction::Write }),
        };
        let mut f = Frame::single(seq, Duration::ZERO, Address::Seven(0x52), vec![Operation::Write(vec![])], outcome);
        f.purpose = purpose;
        f.attempt = attempt;
        f.attempts = 3;
        f
    }

    fn kept(ignore: Ignore, frames: Vec<Frame>) -> Vec<u64> {
        let mut c = Collapse::new(ignore);
        let mut out: Vec<u64> = frames.into_iter().filter_map(|f| c.push(f, ())).map(|(f, ())| f.seq).collect();
        out.extend(c.finish().map(|(f, ())| f.seq));
        out
    }

    #[test]
    fn a_run_of_ack_polls_keeps_its_last_probe() {
        let poll = |seq, nack| frame(seq, Some(Purpose::AckPoll), nack, 1);
        let frames = vec![poll(1, true), poll(2, true), poll(3, false), frame(4, None, false, 1), poll(5, false)];
        assert_eq!(kept("polls".parse().unwrap(), frames.clone()), [3, 4, 5]);
        assert_eq!(kept(Ignore::default(), frames), [1, 2, 3, 4, 5]);
    }

    #[test]
    fn retries_keep_the_last_attempt_and_scans_go() {
        let frames = vec![
            frame(1, None, true, 1),
            frame(2, None, true, 2),
            frame(3, None, false, 3),
            frame(4, Some(Purpose::Scan), true, 1),
            frame(5, None, false, 1),
        ];
        assert_eq!(kept("retries,scans".parse().unwrap(), frames.clone()), [3, 5]);
        assert_eq!(kept("retries".parse().unwrap(), frames), [3, 4, 5]);
    }

    #[test]
    fn unknown_items_are_named() {
        let e = "polls,naps".parse::<Ignore>().unwrap_err();
        assert!(e.to_string().contains("`naps`"), "{e}");
        assert_eq!("scans,polls".parse::<Ignore>().unwrap().to_string(), "polls,scans");
    }
}
