//! Steps as test cases and measurements: `step(name, function)` runs the
//! function as one step with its own verdict, `measure(name, value,
//! {low=, high=, unit=})` records a value against its limits.
//!
//! Contract:
//! - A step passes when its function returns, fails on a failed check or
//!   a measurement out of limits, and is an error on any other failure
//!   (the bus, the adapter, the script). A failure ends the step; a
//!   top-level step that fails lets the run go on with the next one
//!   unless `stop_on_fail`; a nested step's failure fails its parents.
//! - Failures that end the whole run (Ctrl-C, the time limit, the memory
//!   limit, the adapter or the trace failing) end it from inside any step:
//!   the steps the run never reached are reported skipped with that
//!   reason ([`Book::finish`]), planned from the script's text
//!   ([`planned`]).
//! - `step(name)` with no function stays a boundary mark in the trace.

use std::sync::Arc;
use std::time::Instant;

use mlua::{Function, Lua, Result as LuaResult};

use super::{Abort, Ctx, RunError, classify, origin};
use crate::record::Origin;
use crate::report::{Measurement, Status, StepResult};

/// What a step watcher ([`Watch`]) hears: a step started (`result`
/// None) or ended, with the run's transactions so far.
#[derive(Debug, Clone)]
pub struct StepEvent {
    /// The step's full name (`outer/inner`).
    pub name: String,
    pub depth: u32,
    pub result: Option<StepResult>,
    pub transactions: u64,
}

/// Told of every step as it starts and ends (the station's progress
/// lines); called on the run's thread, so it should only pass the event on.
#[derive(Clone)]
pub struct Watch(pub Arc<dyn Fn(StepEvent) + Send + Sync>);

impl std::fmt::Debug for Watch {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str("Watch")
    }
}

/// What the run's steps and measurements came to so far.
#[derive(Debug, Default)]
pub struct Book {
    pub steps: Vec<StepResult>,
    pub measurements: Vec<Measurement>,
    /// The names of the steps running now, outermost first.
    pub(crate) open: Vec<String>,
    /// The first failure of a top-level step the run went on after: the
    /// run's exit code when nothing else stopped it.
    pub first_failure: Option<Abort>,
    pub stop_on_fail: bool,
    pub watch: Option<Watch>,
}

impl Book {
    /// The step running now, named as the report names it (`outer/inner`).
    pub fn current(&self) -> Option<String> {
        (!self.open.is_empty()).then(|| self.open.join("/"))
    }

    /// Marks the `planned` top-level steps the run never started as skipped
    /// with `reason`.
    pub fn finish(&mut self, planned: &[String], reason: &str) {
        for name in planned {
            if !self.steps.iter().any(|s| s.name == *name || s.name.rsplit('/').next() == Some(name.as_str())) {
                self.steps.push(StepResult {
                    name: name.clone(),
                    depth: 0,
                    status: Status::Skipped,
                    message: Some(reason.to_string()),
                    origin: None,
                    frames: None,
                    failed_at_frame: None,
                    duration: Default::default(),
                });
            }
        }
    }
}

/// Whether `a` ends the whole run rather than one step.
fn ends_run(a: &Abort) -> bool {
    match a {
        Abort::Limit(_) => true,
        Abort::Run { error, .. } => matches!(
            error,
            RunError::Interrupted | RunError::TimeLimit { .. } | RunError::Adapter(_) | RunError::Record(_)
        ),
        Abort::Check { .. } | Abort::Script { .. } => false,
    }
}

/// The script line an abort names, if any.
fn where_of(a: &Abort) -> Option<Origin> {
    match a {
        Abort::Check { origin, .. } | Abort::Run { origin, .. } | Abort::Script { origin, .. } => origin.clone(),
        Abort::Limit(_) => None,
    }
}

/// Runs `body` as the step `name`; returns whether it passed.
pub fn run(lua: &Lua, ctx: &Ctx, name: String, body: Function) -> LuaResult<bool> {
    let called_at = origin(lua);
    ctx.session.borrow_mut().step(name.clone(), called_at.clone());
    let (full, depth, first_measure) = {
        let mut b = ctx.book.borrow_mut();
        b.open.push(name);
        (b.open.join("/"), b.open.len() as u32 - 1, b.measurements.len())
    };
    let seq0 = ctx.session.borrow().seq();
    let watch = ctx.book.borrow().watch.clone();
    if let Some(w) = &watch {
        let transactions = ctx.session.borrow().stats.transactions;
        w.0(StepEvent { name: full.clone(), depth, result: None, transactions });
    }
    let started = Instant::now();
    let result = body.call::<()>(());
    let seq1 = ctx.session.borrow().seq();
    let transactions = ctx.session.borrow().stats.transactions;
    let tell = |step: &StepResult| {
        if let Some(w) = &watch {
            w.0(StepEvent { name: step.name.clone(), depth: step.depth, result: Some(step.clone()), transactions });
        }
    };
    let mut b = ctx.book.borrow_mut();
    b.open.pop();
    let mut step = StepResult {
        name: full,
        depth,
        status: Status::Passed,
        message: None,
        origin: called_at,
        frames: (seq1 > seq0).then_some((seq0 + 1, seq1)),
        failed_at_frame: None,
        duration: started.elapsed(),
    };
    match result {
        Ok(()) => {
            let out: Vec<String> = b.measurements[first_measure..]
                .iter()
                .filter(|m| !m.passed)
                .map(|m| format!("measurement {} = {} is out of limits", m.name, m.value))
                .collect();
            if !out.is_empty() {
                step.status = Status::Failed;
                step.message = Some(out.join("; "));
            }
            let passed = step.status == Status::Passed;
            if !passed && depth == 0 {
                b.first_failure.get_or_insert_with(|| Abort::Check { message: out.join("; "), origin: None });
            }
            tell(&step);
            b.steps.push(step);
            Ok(passed)
        }
        Err(e) => {
            let abort = classify(&e);
            step.status = if matches!(abort, Abort::Check { .. }) { Status::Failed } else { Status::Error };
            step.message = Some(match &abort {
                Abort::Check { message, .. } => format!("check failed: {message}"),
                Abort::Run { error, .. } => error.to_string(),
                Abort::Script { message, .. } | Abort::Limit(message) => message.clone(),
            });
            if let Some(o) = where_of(&abort) {
                step.origin = Some(o);
            }
            step.failed_at_frame = (seq1 > 0).then_some(seq1);
            tell(&step);
            b.steps.push(step);
            if depth > 0 || b.stop_on_fail || ends_run(&abort) {
                return Err(e);
            }
            b.first_failure.get_or_insert(abort);
            Ok(false)
        }
    }
}

/// `measure(name, value, {low=, high=, unit=})`: records the value in the
/// current step; returns whether it is within its limits.
pub fn measure(lua: &Lua, ctx: &Ctx, name: String, value: f64, limits: Option<mlua::Table>) -> LuaResult<bool> {
    let (mut low, mut high, mut unit) = (None, None, None);
    if let Some(t) = limits {
        super::convert::check_keys(&t, "measure limits", &["low", "high", "unit"])?;
        low = t.get::<Option<f64>>("low")?;
        high = t.get::<Option<f64>>("high")?;
        unit = t.get::<Option<String>>("unit")?;
    }
    if let (Some(l), Some(h)) = (low, high)
        && l > h
    {
        return Err(super::convert::bad(format!("measure {name}: low limit {l} is above high limit {h}")));
    }
    let passed = Measurement::within(value, low, high);
    let mut b = ctx.book.borrow_mut();
    let step = b.current();
    b.measurements.push(Measurement { name, value, low, high, unit, passed, step, origin: origin(lua) });
    Ok(passed)
}

/// The names of the steps a script's text calls with a literal name
/// (`step("name", ...)` or `step('name', ...)`), in order, each once: the
/// plan a run that stops early reports the rest of as skipped. Names a
/// script builds at run time are not known before they run.
pub fn planned(text: &str) -> Vec<String> {
    let mut out: Vec<String> = Vec::new();
    let bytes = text.as_bytes();
    let mut i = 0;
    while let Some(k) = text[i..].find("step(") {
        let at = i + k;
        i = at + 5;
        // `step(` as a whole word, not `my_step(`.
        if at > 0 && (bytes[at - 1].is_ascii_alphanumeric() || bytes[at - 1] == b'_' || bytes[at - 1] == b'.') {
            continue;
        }
        let rest = text[i..].trim_start();
        let Some(q) = rest.chars().next().filter(|c| *c == '"' || *c == '\'') else { continue };
        let body = &rest[1..];
        let Some(end) = body.find(q) else { continue };
        let name = &body[..end];
        // A literal that continues after the name (`step("a" .. n`) is built at run time.
        let after = body[end + 1..].trim_start();
        if name.contains('\\') || !(after.starts_with(',') || after.starts_with(')')) {
            continue;
        }
        // Only steps with a body are test cases.
        if !after.starts_with(',') {
            continue;
        }
        if !out.iter().any(|n| n == name) {
            out.push(name.to_string());
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn plan_from_text() {
        let text = r#"
            step("boundary")
            step("configure", function() end)
            step( 'read back' , function()
              step("inner", function() end)
            end)
            my_step("not one", function() end)
            step("n" .. i, function() end)
            step("configure", function() end)
        "#;
        assert_eq!(planned(text), ["configure", "read back", "inner"]);
    }
}
