//! A run's bus session: the one path every transaction takes from a script
//! (or a command such as `scan`) to the adapter and back.
//!
//! Contract:
//! - [`Session::transact`] validates the transaction (shape, reserved
//!   addresses, adapter limits), then tries it up to the policy's attempts,
//!   retrying only NACKs, waiting the policy's delay on the adapter clock;
//!   each try becomes one [`Frame`] handed to every sink before the next
//!   thing happens.
//! - An interrupt request (Ctrl-C) and the run's time limit are honoured
//!   between transactions and during every wait the session makes (retry
//!   delays, ACK polling, sleeps, sliced so a long one ends promptly): the
//!   transaction on the bus completes (with its STOP) and nothing new starts.
//! - A viewer sink that fails is dropped with one warning (a closed pipe
//!   silently), so a viewer going away never stops a bus sequence half-way.
//!   The record sink (the trace, [`Sink::is_record`]) is different: when it
//!   cannot write, the run stops at the next transaction with
//!   [`RunError::Record`], since a run without its record has failed.

use std::sync::Arc;
use std::sync::atomic::{AtomicBool, Ordering};
use std::time::{Duration, Instant};

use thiserror::Error;

use crate::adapter::{Adapter, AdapterError, Recovery};
use crate::bus::{Address, Fault, Operation, Outcome, ShapeError, Transaction};
use crate::record::{FieldValue, Frame, Origin, Record, Sink};
use crate::record::{Level, PecMark, Purpose, Stats};

use super::retry::RetryPolicy;

/// Why a session operation stopped.
#[derive(Debug, Clone, Error)]
pub enum RunError {
    #[error("{0}")]
    Shape(#[from] ShapeError),
    #[error("{address}: {} ({attempts} of {attempts} attempt{})", describe(fault, ops), if *attempts == 1 { "" } else { "s" })]
    Bus { address: Address, fault: Fault, attempts: u32, ops: Vec<Operation> },
    #[error("{address}: still NACKing after {waited_ms:.3} ms of ACK polling")]
    PollTimeout { address: Address, waited_ms: f64 },
    /// A polled register never showed the awaited value: the device never became ready.
    #[error("{address} {what}")]
    WaitTimeout { address: Address, what: String },
    /// The bus exchange worked but its content broke the protocol (a PEC
    /// or block count that does not check out).
    #[error("{address}: {message}")]
    Protocol { address: Address, message: String },
    #[error("adapter: {0}")]
    Adapter(AdapterError),
    #[error("interrupted")]
    Interrupted,
    /// The trace could not be written: a run without its record is a
    /// failed run.
    #[error("the trace cannot be written: {0}")]
    Record(String),
    /// The run's wall-clock limit passed.
    #[error("ran past its time limit of {} s (--timeout)", limit.as_secs_f64())]
    TimeLimit { limit: Duration },
}

fn describe(fault: &Fault, ops: &[Operation]) -> String {
    match fault {
        Fault::AddressNack { direction, .. } => {
            format!("address NACK on {direction}")
        }
        Fault::DataNack { op, index } => {
            let byte = match ops.get(*op) {
                Some(Operation::Write(b)) => b.get(*index).map(|v| format!(" (0x{v:02X})")).unwrap_or_default(),
                _ => String::new(),
            };
            format!("data NACK at operation {op}, byte {index}{byte}")
        }
        other => other.to_string(),
    }
}

pub struct Session {
    adapter: Box<dyn Adapter>,
    sinks: Vec<Box<dyn Sink>>,
    seq: u64,
    pub default_retry: RetryPolicy,
    pub stats: Stats,
    pub allow_reserved: bool,
    interrupt: Arc<AtomicBool>,
    /// When the run must stop, and the limit that set it, in wall time.
    deadline: Option<(Instant, Duration)>,
    /// Why the trace stopped being written, if it did: the run stops.
    record_failure: Option<String>,
    warnings: Vec<String>,
    /// The operations of the last frame, handed back by the sinks: the
    /// next frame copies its transaction's operations into these buffers
    /// instead of allocating new ones.
    frame_ops: Vec<Operation>,
    /// An outcome the caller is done with ([`Session::recycle`]): the next
    /// attempt has the adapter fill it, reusing its buffers.
    spare: Outcome,
}

/// Works out the PEC mark of an attempt's outcome for its frame.
pub type Marker<'a> = dyn Fn(&Outcome) -> Option<PecMark> + 'a;

/// Works out what a register map reads in an attempt's bytes, for its
/// frame (the register helper: it knows the map, the session does not).
pub type Explainer<'a> = dyn Fn(&Outcome) -> Vec<FieldValue> + 'a;

/// What a transaction request carries besides the transaction.
#[derive(Debug, Clone, Default)]
pub struct Request {
    pub retry: Option<RetryPolicy>,
    pub origin: Option<Origin>,
    pub purpose: Option<Purpose>,
    pub decoded: Option<String>,
    pub allow_reserved: bool,
}

impl Session {
    pub fn new(adapter: Box<dyn Adapter>, interrupt: Arc<AtomicBool>) -> Self {
        Session {
            adapter,
            sinks: Vec::new(),
            seq: 0,
            default_retry: RetryPolicy::default(),
            stats: Stats::default(),
            allow_reserved: false,
            interrupt,
            deadline: None,
            record_failure: None,
            warnings: Vec::new(),
            frame_ops: Vec::new(),
            spare: Outcome::default(),
        }
    }

    pub fn add_sink(&mut self, sink: Box<dyn Sink>) {
        self.sinks.push(sink);
    }

    pub fn adapter(&mut self) -> &mut dyn Adapter {
        self.adapter.as_mut()
    }

    /// The adapter back, for a caller that ran a session on it and goes on
    /// with another (a reset script before a trial). Sinks are dropped
    /// unflushed: give such a session none that needs [`Session::finish`].
    pub fn into_adapter(self) -> Box<dyn Adapter> {
        self.adapter
    }

    pub fn adapter_ref(&self) -> &dyn Adapter {
        self.adapter.as_ref()
    }

    /// The sequence number of the last frame recorded (0 before the first).
    pub fn seq(&self) -> u64 {
        self.seq
    }

    pub fn now(&self) -> Duration {
        self.adapter.now()
    }

    pub fn interrupted(&self) -> bool {
        self.interrupt.load(Ordering::Relaxed)
    }

    /// Sets a wall-clock limit on the run from now (`None`: no limit).
    /// Wall time, whatever the adapter: the limit protects whoever waits
    /// for the run, and on the virtual-clock bench waiting costs nothing.
    pub fn set_time_limit(&mut self, limit: Option<Duration>) {
        self.deadline = limit.map(|l| (Instant::now() + l, l));
    }

    /// The wall-clock deadline and the limit behind it, if any.
    pub fn deadline(&self) -> Option<(Instant, Duration)> {
        self.deadline
    }

    /// Whether the run must stop now: an interrupt, the time limit, or a
    /// trace that can no longer be written.
    pub fn check_stop(&self) -> Result<(), RunError> {
        if let Some(e) = &self.record_failure {
            return Err(RunError::Record(e.clone()));
        }
        if self.interrupted() {
            return Err(RunError::Interrupted);
        }
        match self.deadline {
            Some((when, limit)) if Instant::now() >= when => Err(RunError::TimeLimit { limit }),
            _ => Ok(()),
        }
    }

    /// Warnings collected from failed sinks and [`Self::warn`], for the end of the run.
    pub fn take_warnings(&mut self) -> Vec<String> {
        std::mem::take(&mut self.warnings)
    }

    /// A warning for the end of the run (a script's text that was cut).
    pub fn warn(&mut self, warning: String) {
        self.warnings.push(warning);
    }

    fn emit(&mut self, r: &Record) {
        let mut failed = Vec::new();
        for (i, s) in self.sinks.iter_mut().enumerate() {
            if let Err(e) = s.record(r) {
                failed.push((i, e));
            }
        }
        for (i, e) in failed.into_iter().rev() {
            let sink = self.sinks.remove(i);
            if sink.is_record() {
                // Keep the first: later failures follow from it.
                self.record_failure.get_or_insert_with(|| e.to_string());
            } else if e.kind() != std::io::ErrorKind::BrokenPipe {
                self.warnings.push(format!("stopped writing one output: {e}"));
            }
        }
    }

    pub fn log(&mut self, level: Level, text: String, origin: Option<Origin>) {
        let r = Record::Log { t: self.now(), level, text, origin };
        self.emit(&r);
    }

    pub fn step(&mut self, name: String, origin: Option<Origin>) {
        let r = Record::Step { t: self.now(), name, origin };
        self.emit(&r);
    }

    pub fn delay(&mut self, d: Duration) -> Result<(), RunError> {
        // Sleep in slices so Ctrl-C and the time limit are honoured during
        // long waits on a paced or real clock (and over a served adapter,
        // where each slice is one delay request).
        let slice = Duration::from_millis(50);
        let mut left = d;
        while left > Duration::ZERO {
            self.check_stop()?;
            let step = left.min(slice);
            self.adapter.delay(step);
            left -= step;
        }
        Ok(())
    }

    /// Hands back an outcome the caller has read: the next transaction's
    /// outcome is written into its buffers instead of new ones
    /// ([`Adapter::execute_into`]). Optional; an outcome not handed back
    /// only costs the next one its allocations.
    pub fn recycle(&mut self, outcome: Outcome) {
        self.spare = outcome;
    }

    /// Puts a transaction on the bus with retries; see the module contract.
    pub fn transact(&mut self, tx: &Transaction, req: &Request) -> Result<Outcome, RunError> {
        self.transact_marked(tx, req, &|_| None)
    }

    /// [`Session::transact`], with `pec` working out each attempt's PEC
    /// mark for its frame before the frame is emitted.
    pub fn transact_marked(&mut self, tx: &Transaction, req: &Request, pec: &Marker<'_>) -> Result<Outcome, RunError> {
        self.transact_explained(tx, req, pec, &|_| Vec::new())
    }

    /// [`Session::transact_marked`], with `explain` working out the
    /// register values each attempt's frame carries.
    pub fn transact_explained(
        &mut self,
        tx: &Transaction,
        req: &Request,
        pec: &Marker<'_>,
        explain: &Explainer<'_>,
    ) -> Result<Outcome, RunError> {
        self.check(tx, req)?;
        let policy = req.retry.unwrap_or(self.default_retry);
        self.attempts_from(tx, req, policy, 1, (pec, explain))
    }

    /// Shape, reserved-address and adapter checks before anything is sent.
    fn check(&self, tx: &Transaction, req: &Request) -> Result<(), RunError> {
        let caps = self.adapter.capabilities();
        tx.validate(caps.max_bytes_per_op, self.allow_reserved || req.allow_reserved)?;
        if tx.address.is_ten_bit() && !caps.ten_bit {
            return Err(RunError::Adapter(AdapterError::Unsupported(format!(
                "{} is a 10-bit address and this adapter has no 10-bit support",
                tx.address
            ))));
        }
        if let Some(why) = self.adapter.refuses(tx) {
            return Err(RunError::Adapter(AdapterError::Unsupported(why)));
        }
        Ok(())
    }

    /// Tries `tx` from attempt number `attempt` until it succeeds, fails
    /// for good, or the policy's attempts are used up.
    fn attempts_from(
        &mut self,
        tx: &Transaction,
        req: &Request,
        policy: RetryPolicy,
        mut attempt: u32,
        (pec, explain): (&Marker<'_>, &Explainer<'_>),
    ) -> Result<Outcome, RunError> {
        loop {
            self.check_stop()?;
            let t = self.adapter.now();
            let mut outcome = std::mem::take(&mut self.spare);
            self.adapter.execute_into(tx, &mut outcome);
            let marks = (pec(&outcome), explain(&outcome));
            let outcome = self.record(tx, req, (attempt, policy.attempts), t, outcome, marks);
            match self.verdict(tx, outcome, attempt, policy) {
                Verdict::Done(o) => return Ok(o),
                Verdict::Retry(o) => {
                    self.spare = o;
                    attempt += 1;
                    self.delay(policy.delay_before(attempt))?;
                }
                Verdict::Fail(e) => return Err(e),
            }
        }
    }

    /// Accounts one attempt and hands its frame to the sinks.
    fn record(
        &mut self,
        tx: &Transaction,
        req: &Request,
        (attempt, attempts): (u32, u32),
        t: Duration,
        outcome: Outcome,
        (pec, values): (Option<PecMark>, Vec<FieldValue>),
    ) -> Outcome {
        self.seq += 1;
        let mut ops = std::mem::take(&mut self.frame_ops);
        ops.clone_from(&tx.ops);
        let frame = Frame {
            seq: self.seq,
            t,
            address: tx.address,
            ops,
            outcome,
            attempt,
            attempts,
            purpose: req.purpose.clone(),
            origin: req.origin.clone(),
            decoded: req.decoded.clone(),
            values,
            pec,
        };
        self.stats.add_frame(&frame);
        let record = Record::Frame(frame);
        self.emit(&record);
        let Record::Frame(Frame { outcome, ops, .. }) = record else { unreachable!("built as a frame above") };
        self.frame_ops = ops;
        outcome
    }

    fn verdict(&self, tx: &Transaction, outcome: Outcome, attempt: u32, policy: RetryPolicy) -> Verdict {
        match &outcome.fault {
            None => Verdict::Done(outcome),
            Some(Fault::Adapter { detail }) => Verdict::Fail(RunError::Adapter(AdapterError::Failed(detail.clone()))),
            Some(f) if f.is_nack() && attempt < policy.attempts => Verdict::Retry(outcome),
            Some(f) => Verdict::Fail(RunError::Bus {
                address: tx.address,
                fault: f.clone(),
                attempts: attempt,
                ops: tx.ops.clone(),
            }),
        }
    }

    /// Puts independent transactions on the bus together through
    /// [`Adapter::execute_batch`] (one request, pipelined, on a serial
    /// adapter).
    ///
    /// Contract: every transaction is checked before any is sent; all of
    /// them then run once, in order, each recorded as its own frame
    /// (stamped with the batch's start time plus the bus time of the
    /// transactions before it: the adapter reports one time per batch). No retry
    /// happens inside the batch: afterwards, in order, a NACKed
    /// transaction is retried on its own under its retry policy. The first
    /// transaction that still fails ends the call with its error; the
    /// transactions after it have run but are not retried.
    pub fn transact_batch(&mut self, items: &[(Transaction, Request)]) -> Result<Vec<Outcome>, RunError> {
        for (tx, req) in items {
            self.check(tx, req)?;
        }
        self.check_stop()?;
        let mut t = self.adapter.now();
        let txs: Vec<Transaction> = items.iter().map(|(tx, _)| tx.clone()).collect();
        let outcomes = self.adapter.execute_batch(&txs);
        let mut first = Vec::with_capacity(items.len());
        for ((tx, req), o) in items.iter().zip(outcomes) {
            let policy = req.retry.unwrap_or(self.default_retry);
            let took = o.bus_time;
            first.push(self.record(tx, req, (1, policy.attempts), t, o, (None, Vec::new())));
            t += took;
        }
        let mut done = Vec::with_capacity(items.len());
        for ((tx, req), o) in items.iter().zip(first) {
            let policy = req.retry.unwrap_or(self.default_retry);
            match self.verdict(tx, o, 1, policy) {
                Verdict::Done(o) => done.push(o),
                Verdict::Retry(o) => {
                    self.spare = o;
                    self.delay(policy.delay_before(2))?;
                    done.push(self.attempts_from(tx, req, policy, 2, (&|_| None, &|_| Vec::new()))?);
                }
                Verdict::Fail(e) => return Err(e),
            }
        }
        Ok(done)
    }

    /// ACK polling: probes `address` with address-only writes until it
    /// ACKs or `timeout` passes; returns the time waited.
    pub fn wait_ack(
        &mut self,
        address: Address,
        timeout: Duration,
        interval: Duration,
        origin: Option<Origin>,
    ) -> Result<Duration, RunError> {
        let start = self.now();
        let probe = Transaction::new(address, vec![Operation::Write(Vec::new())]);
        let req = Request {
            retry: Some(RetryPolicy::default()),
            origin,
            purpose: Some(Purpose::AckPoll),
            ..Request::default()
        };
        loop {
            match self.transact(&probe, &req) {
                Ok(_) => return Ok(self.now() - start),
                Err(RunError::Bus { fault: Fault::AddressNack { .. }, .. }) => {
                    let waited = self.now() - start;
                    if waited >= timeout {
                        return Err(RunError::PollTimeout { address, waited_ms: waited.as_secs_f64() * 1e3 });
                    }
                    self.delay(interval)?;
                }
                Err(e) => return Err(e),
            }
        }
    }

    /// Probes each address once and returns those that ACKed.
    pub fn scan(
        &mut self,
        addresses: &[Address],
        probe: Probe,
        retry: RetryPolicy,
        origin: Option<Origin>,
    ) -> Result<Vec<Address>, RunError> {
        let mut found = Vec::new();
        let req = Request {
            retry: Some(retry),
            origin,
            purpose: Some(Purpose::Scan),
            allow_reserved: true,
            ..Request::default()
        };
        for &a in addresses {
            let op = match probe {
                Probe::AddressOnly => Operation::Write(Vec::new()),
                Probe::ReadByte => Operation::Read(1),
            };
            match self.transact(&Transaction::new(a, vec![op]), &req) {
                Ok(_) => found.push(a),
                Err(RunError::Bus { fault, .. }) if fault.is_nack() => {}
                Err(e) => return Err(e),
            }
        }
        Ok(found)
    }

    /// Sets the bus clock; returns the clock the adapter actually uses.
    pub fn set_speed(&mut self, speed: crate::bus::BusSpeed) -> Result<crate::bus::BusSpeed, RunError> {
        self.adapter.set_speed(speed).map_err(RunError::Adapter)
    }

    /// Frees a stuck bus (see [`Adapter::recover`]).
    pub fn recover(&mut self) -> Result<Recovery, RunError> {
        self.adapter.recover().map_err(RunError::Adapter)
    }

    /// Writes the end record, flushes the sinks and closes the adapter,
    /// leaving the bus idle.
    /// A trace that could not be written or synced is an error (the run
    /// failed), reported before a failure to close the adapter.
    pub fn finish(&mut self, exit: u8, error: Option<String>) -> Result<(), RunError> {
        let link = self.adapter.link_counters().map(|c| link_report(&c));
        let r = Record::End { t: self.now(), stats: self.stats.clone(), exit, error, link };
        self.emit(&r);
        for s in &mut self.sinks {
            if let Err(e) = s.flush()
                && s.is_record()
            {
                self.record_failure.get_or_insert_with(|| format!("syncing it to disk: {e}"));
            }
        }
        let closed = self.adapter.close().map_err(RunError::Adapter);
        match self.record_failure.take() {
            Some(e) => Err(RunError::Record(e)),
            None => closed,
        }
    }
}

/// The trace's account of a link, from the adapter's counters.
fn link_report(c: &crate::adapter::LinkCounters) -> crate::record::LinkReport {
    crate::record::LinkReport {
        frames_sent: c.frames_sent,
        frames_received: c.frames_received,
        frames_dropped: c.frames_dropped,
        requests: c.requests,
        retransmissions: c.retransmissions,
        timeouts: c.timeouts,
        fast_resends: c.fast_resends,
        gaps: c.gaps,
        rto: c.rto,
        batch: c.batch,
        window: c.window,
        // Rounded so the trace reads 0.0123, not a long binary fraction.
        loss: (c.loss_estimate() * 1e6).round() / 1e6,
    }
}

/// What to do after an attempt.
enum Verdict {
    Done(Outcome),
    /// Try again; the failed outcome, for its buffers.
    Retry(Outcome),
    Fail(RunError),
}

/// How `scan` asks each address whether anyone is there.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Probe {
    /// START, address + W, STOP: no data byte crosses the bus.
    AddressOnly,
    /// START, address + R, one byte (NACKed), STOP.
    ReadByte,
}

/// What a scan asked for 10-bit addresses says when the adapter has no
/// 10-bit support: the 7-bit part runs whole, the rest is said skipped.
pub const TEN_BIT_SKIPPED: &str =
    "10-bit addresses were not probed: this adapter has no 10-bit support (the 7-bit results are complete)";

/// What a scan probes on this adapter, and what it leaves out and why.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ScanPlan {
    /// The addresses to probe ([`scan_range`], less the owned ones).
    pub addresses: Vec<Address>,
    /// Whether the 10-bit addresses asked for were left out because the
    /// adapter cannot address them ([`TEN_BIT_SKIPPED`]).
    pub ten_bit_skipped: bool,
    /// Addresses a kernel driver owns, with the driver: not probed (a
    /// probe could disturb the driver's conversation with its device).
    pub owned: Vec<(Address, String)>,
}

impl Session {
    /// What a scan covers on this adapter.
    pub fn scan_plan(&self, include_reserved: bool, ten_bit: bool) -> ScanPlan {
        let adapter = self.adapter_ref();
        let skipped = ten_bit && !adapter.capabilities().ten_bit;
        let mut owned = Vec::new();
        let mut addresses = scan_range(include_reserved, ten_bit && !skipped);
        addresses.retain(|&a| match adapter.owner(a) {
            Some(driver) => {
                owned.push((a, driver));
                false
            }
            None => true,
        });
        ScanPlan { addresses, ten_bit_skipped: skipped, owned }
    }
}

/// The 7-bit addresses a scan covers: all but the reserved ones, unless
/// `include_reserved`.
pub fn scan_range(include_reserved: bool, ten_bit: bool) -> Vec<Address> {
    let mut v: Vec<Address> =
        (0u8..=0x7F).map(Address::Seven).filter(|a| include_reserved || a.reserved().is_none()).collect();
    if ten_bit {
        v.extend((0u16..=0x3FF).map(Address::Ten));
    }
    v
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::sim::SimAdapter;

    fn session() -> Session {
        Session::new(Box::new(SimAdapter::demo()), Arc::new(AtomicBool::new(false)))
    }

    #[test]
    fn scan_finds_the_demo_devices() {
        let mut s = session();
        let found = s.scan(&scan_range(false, false), Probe::AddressOnly, RetryPolicy::default(), None).unwrap();
        for a in [0x2B, 0x31, 0x35, 0x50] {
            assert!(found.contains(&Address::Seven(a)), "{a:#x} missing from {found:?}");
        }
        assert_eq!(s.stats.attempts, 112, "0x08-0x77 is 112 addresses (UM10204 Table 3 reserves the other 16)");
    }

    #[test]
    fn retries_count_and_exhaust() {
        let mut s = session();
        let tx = Transaction::new(Address::Seven(0x13), vec![Operation::Write(vec![0])]);
        let req = Request { retry: Some(RetryPolicy::new(4, 1.0, 2.0).unwrap()), ..Request::default() };
        let t0 = s.now();
        let e = s.transact(&tx, &req).unwrap_err();
        assert!(matches!(e, RunError::Bus { attempts: 4, .. }), "{e}");
        assert_eq!(s.stats.retries, 3);
        assert_eq!(s.stats.nacks, 4);
        assert!(s.now() - t0 >= Duration::from_millis(1 + 2 + 4));
        assert_eq!(e.to_string(), "0x13: address NACK on write (4 of 4 attempts)");
    }

    // The vent controller NACKs its address with probability 0.35 (demo
    // bench): NACKed transactions of a batch are retried on their own
    // after it, and each attempt is a frame.
    #[test]
    fn batches_run_once_then_retry_nacks_individually() {
        let mut s = session();
        let vent = Address::Seven(0x11);
        let items: Vec<(Transaction, Request)> = (0..12)
            .map(|_| {
                let tx = Transaction::new(vent, vec![Operation::Write(vec![0x00]), Operation::Read(1)]);
                (tx, Request { retry: Some(RetryPolicy::new(8, 0.5, 1.0).unwrap()), ..Request::default() })
            })
            .collect();
        let out = s.transact_batch(&items).unwrap();
        assert_eq!(out.len(), 12);
        assert!(out.iter().all(|o| o.read_bytes() == [0xA7]), "the vent controller ID is 0xA7");
        assert_eq!(s.stats.transactions, 12);
        assert!(s.stats.retries > 0, "with p = 0.35 over 12 tries some NACK (seeded)");
        assert_eq!(s.stats.attempts, 12 + s.stats.retries);

        let bad = vec![items[0].clone(), (Transaction::new(vent, vec![Operation::Read(0)]), Request::default())];
        let before = s.stats.attempts;
        assert!(matches!(s.transact_batch(&bad), Err(RunError::Shape(ShapeError::EmptyRead { .. }))));
        assert_eq!(s.stats.attempts, before, "a bad transaction keeps the whole batch off the bus");
    }

    // A handed-back outcome is what the next transaction is written into:
    // same buffers, new contents (the demo EEPROM at 0x50, 16-bit word
    // address, reads back what was written to it).
    #[test]
    fn recycled_outcomes_carry_the_next_transaction() {
        let mut s = session();
        let eeprom = Address::Seven(0x50);
        let write = Transaction::new(eeprom, vec![Operation::Write(vec![0x00, 0x40, 0xA1, 0xB2])]);
        s.transact(&write, &Request::default()).unwrap();
        s.delay(Duration::from_millis(6)).unwrap(); // its 5 ms write cycle (demo bench)
        let read = Transaction::new(eeprom, vec![Operation::Write(vec![0x00, 0x40]), Operation::Read(2)]);
        let first = s.transact(&read, &Request::default()).unwrap();
        assert_eq!(first.read_bytes(), [0xA1, 0xB2]);
        let buffers = first.ops.as_ptr();
        s.recycle(first);
        let again = Transaction::new(eeprom, vec![Operation::Write(vec![0x00, 0x41]), Operation::Read(2)]);
        let second = s.transact(&again, &Request::default()).unwrap();
        assert_eq!(second.ops.as_ptr(), buffers, "the recycled outcome's buffers are reused");
        assert_eq!(second.read_bytes()[0], 0xB2, "the second read starts one byte further on");
        assert_eq!(second.ops[0].acks, [true, true]);
    }

    #[test]
    fn reserved_addresses_are_refused() {
        let mut s = session();
        let tx = Transaction::new(Address::Seven(0x00), vec![Operation::Write(vec![0x06])]);
        assert!(matches!(s.transact(&tx, &Request::default()), Err(RunError::Shape(ShapeError::Reserved { .. }))));
        assert_eq!(s.stats.attempts, 0, "nothing may reach the bus");
    }
}
