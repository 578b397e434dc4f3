//! The station's progress on standard error: one line per fixture (its
//! current step, steps done of those planned, transactions, the result so
//! far), redrawn in place on a terminal; on anything else a plain line
//! each time a top-level step ends.
//!
//! Contract:
//! - Plain lines are whole lines, never redrawn, so a log file or a CI
//!   console reads them as they came: `fixture NAME: step N/M STEP
//!   VERDICT (T transactions)`.
//! - In place, each fixture line is cut to the terminal's width so none
//!   wraps (a wrapped line would throw the redraw off by one); every text
//!   from the script is shown escaped ([`super::shown`]).

use std::io::Write;

use crossterm::{cursor, queue, terminal};

use crate::report::{RunReport, Status};
use crate::script::steps::StepEvent;

use super::shown;

/// One fixture's line.
#[derive(Debug, Clone, Default)]
struct Line {
    name: String,
    current: Option<String>,
    done: usize,
    transactions: u64,
    failing: bool,
    /// Set when the fixture has finished: passed or not.
    finished: Option<bool>,
}

pub struct Progress {
    lines: Vec<Line>,
    /// Steps with a body the script's text plans, nested ones included
    /// (0: not known).
    planned: usize,
    live: bool,
    /// Lines drawn last time, to move back over.
    drawn: u16,
}

impl Progress {
    pub fn new(names: &[String], planned: usize, live: bool) -> Progress {
        let lines = names.iter().map(|n| Line { name: n.clone(), ..Default::default() }).collect();
        let mut p = Progress { lines, planned, live, drawn: 0 };
        p.redraw();
        p
    }

    /// A step of fixture `i` started or ended.
    pub fn step(&mut self, i: usize, ev: &StepEvent) {
        let Some(line) = self.lines.get_mut(i) else { return };
        line.transactions = ev.transactions;
        match &ev.result {
            None => line.current = Some(ev.name.clone()),
            Some(r) => {
                if r.status != Status::Passed {
                    line.failing = true;
                }
                // Every step with a body counts, nested ones too: the plan
                // read off the script's text cannot tell nesting either.
                line.done += 1;
                line.current = None;
                if !self.live {
                    let of = if self.planned >= line.done { format!("/{}", self.planned) } else { String::new() };
                    let _ = writeln!(
                        std::io::stderr(),
                        "fixture {}: {}step {}{of} {} {} ({} transactions)",
                        line.name,
                        "  ".repeat(ev.depth as usize),
                        line.done,
                        shown(&r.name),
                        r.status.word(),
                        ev.transactions
                    );
                }
            }
        }
        self.redraw();
    }

    /// Fixture `i` finished with `report`.
    pub fn done(&mut self, i: usize, report: &RunReport) {
        if let Some(line) = self.lines.get_mut(i) {
            line.finished = Some(report.passed);
            line.current = None;
            line.transactions = report.stats.transactions;
        }
        self.redraw();
    }

    /// The text of one line, uncut.
    fn text(&self, l: &Line) -> String {
        let of = if self.planned >= l.done { format!("/{}", self.planned) } else { String::new() };
        let state = match l.finished {
            Some(true) => "PASSED",
            Some(false) => "FAILED",
            None if l.failing => "failing",
            None => "passing so far",
        };
        let current = match &l.current {
            Some(c) => format!("  in {}", shown(c)),
            None => String::new(),
        };
        format!("{}  steps {}{of}{current}  {} transactions  {state}", l.name, l.done, l.transactions)
    }

    fn redraw(&mut self) {
        if !self.live {
            return;
        }
        let width = terminal::size().map(|(w, _)| w as usize).unwrap_or(80).max(20);
        let mut err = std::io::stderr().lock();
        if self.drawn > 0 {
            let _ = queue!(err, cursor::MoveUp(self.drawn));
        }
        for l in &self.lines {
            let text: String = self.text(l).chars().take(width - 1).collect();
            let _ = queue!(err, cursor::MoveToColumn(0), terminal::Clear(terminal::ClearType::CurrentLine));
            let _ = writeln!(err, "{text}");
        }
        let _ = err.flush();
        self.drawn = self.lines.len().min(u16::MAX as usize) as u16;
    }
}
