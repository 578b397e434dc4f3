//! What a timing diagram shows: chosen transactions of a decoded capture
//! with their waveforms, marks, measurements and violations, gathered in
//! two passes over the capture.
//!
//! Contract:
//! - Pass one decodes the whole capture and notes when each chosen
//!   transaction ran ([`Want`]); pass two decodes it again with the
//!   decoder keeping its marks inside those windows and a [`Collect`]
//!   keeping the level changes inside them. Nothing outside the windows
//!   is kept, so a picture of three transactions of a 2 GB capture costs
//!   the memory of three transactions.
//! - A window is the transaction's time from START to STOP widened by a
//!   twelfth on each side (and 200 ns), so the idle bus around it shows.
//! - At most [`MAX_PANELS`] transactions and [`MAX_CHANGES`] level changes
//!   per transaction are drawn; past that the waveform is cut and the
//!   panel says so.
//! - All times of a [`Panel`] are picoseconds from the capture's start.

use super::decode::Mark;
use super::timing::{Checker, TxTiming, Violation};
use super::{Level, Ticks};
use crate::record::Frame;

/// Most transactions in one picture.
pub const MAX_PANELS: usize = 32;

/// Most level changes drawn per transaction.
pub const MAX_CHANGES: usize = 200_000;

/// One transaction as drawn.
#[derive(Debug, Clone)]
pub struct Panel {
    pub frame: Frame,
    pub from_ps: u64,
    pub to_ps: u64,
    /// The levels at `from_ps`, then at each change, time-ordered.
    pub levels: Vec<(u64, Level, Level)>,
    /// Whether changes past [`MAX_CHANGES`] were left out.
    pub cut: bool,
    /// Conditions and bytes, in picoseconds.
    pub marks: Vec<Mark>,
    pub timing: TxTiming,
    pub violations: Vec<Violation>,
}

impl Panel {
    /// Moves every time by `delta_ps` (a modelled waveform placed at the
    /// recorded start time); times stop at zero.
    pub fn shift(&mut self, delta_ps: i128) {
        let ps = |t: u64| (t as i128 + delta_ps).clamp(0, u64::MAX as i128) as u64;
        let ns = |t: u64| (t as i128 + delta_ps / 1000).clamp(0, u64::MAX as i128) as u64;
        self.from_ps = ps(self.from_ps);
        self.to_ps = ps(self.to_ps);
        for l in &mut self.levels {
            l.0 = ps(l.0);
        }
        for m in &mut self.marks {
            (m.at, m.end) = (ps(m.at), ps(m.end));
        }
        for v in &mut self.violations {
            v.at_ns = ns(v.at_ns);
        }
        for s in self.timing.worst.iter_mut().flatten() {
            s.at_ns = ns(s.at_ns);
        }
    }
}

/// Which transactions pass one found: (seq, START ns, STOP ns).
#[derive(Debug, Default, Clone)]
pub struct Want {
    pub found: Vec<(u64, u64, u64)>,
}

impl Want {
    /// Notes `f` when `chosen` takes its sequence number.
    pub fn see(&mut self, f: &Frame, chosen: impl Fn(u64) -> bool) {
        if self.found.len() < MAX_PANELS && chosen(f.seq) {
            let t = f.t.as_nanos() as u64;
            self.found.push((f.seq, t, t.saturating_add(f.outcome.bus_time.as_nanos() as u64)));
        }
    }

    /// The windows to keep, in ticks of the capture.
    pub fn windows(&self, ticks: Ticks) -> Vec<(u64, u64)> {
        self.found
            .iter()
            .map(|&(_, a, b)| {
                let m = (b - a) / 12 + 200;
                let from = (a.saturating_sub(m) as u128 * 1_000_000 / ticks.fs as u128).min(u64::MAX as u128) as u64;
                (from, ticks.ticks_ceil(b.saturating_add(m)))
            })
            .collect()
    }
}

/// Keeps the level changes inside the windows (pass two).
pub struct Collect {
    ticks: Ticks,
    windows: Vec<(u64, u64)>,
    levels: Vec<Vec<(u64, Level, Level)>>,
    cut: Vec<bool>,
    last: (Level, Level),
}

impl Collect {
    pub fn new(ticks: Ticks, windows: Vec<(u64, u64)>) -> Self {
        let n = windows.len();
        Collect {
            ticks,
            windows,
            levels: vec![Vec::new(); n],
            cut: vec![false; n],
            last: (Level::Unknown, Level::Unknown),
        }
    }

    /// The levels of both lines from tick `t` on.
    pub fn levels(&mut self, t: u64, sda: Level, scl: Level) {
        let was = self.last;
        self.last = (sda, scl);
        for (i, &(a, b)) in self.windows.iter().enumerate() {
            if t > b {
                continue;
            }
            let v = &mut self.levels[i];
            // The level a window opens with is the last one before it.
            let at = if t < a { a } else { t };
            if v.is_empty() && t > a {
                v.push((self.ticks.ps(a), was.0, was.1));
            }
            if t < a {
                v.clear();
                v.push((self.ticks.ps(at), sda, scl));
            } else if v.last().is_none_or(|&(_, s, c)| (s, c) != (sda, scl)) {
                if v.len() < MAX_CHANGES {
                    v.push((self.ticks.ps(at), sda, scl));
                } else {
                    self.cut[i] = true;
                }
            }
        }
    }

    /// The panels of the transactions pass two gave (`frames`, in the
    /// order of [`Want::found`]), with the decoder's marks (ticks) and the
    /// violations `checker` finds in each.
    pub fn panels(self, want: &Want, frames: Vec<(Frame, TxTiming)>, marks: &[Mark], checker: &Checker) -> Vec<Panel> {
        let ticks = self.ticks;
        let mut out = Vec::new();
        for (((frame, timing), (i, &(a, b))), mut levels) in
            frames.into_iter().zip(self.windows.iter().enumerate()).zip(self.levels)
        {
            if levels.is_empty() {
                levels.push((ticks.ps(a), self.last.0, self.last.1));
            }
            let (_, s_ns, e_ns) = want.found.get(i).copied().unwrap_or_default();
            // Marks of this transaction: from its START to its STOP (a
            // nanosecond of slack each side: the frame's times are whole ns).
            let (s_ps, e_ps) =
                (s_ns.saturating_sub(1).saturating_mul(1000), e_ns.saturating_add(1).saturating_mul(1000));
            let marks = marks
                .iter()
                .map(|m| Mark { at: ticks.ps(m.at), end: ticks.ps(m.end), kind: m.kind })
                .filter(|m| m.at >= s_ps && m.at <= e_ps)
                .collect();
            let violations = checker.violations_of(frame.seq, &timing);
            out.push(Panel {
                frame,
                from_ps: ticks.ps(a),
                to_ps: ticks.ps(b),
                levels,
                cut: self.cut[i],
                marks,
                timing,
                violations,
            });
        }
        out
    }
}
