//! What every observer of a run consumes: the record types ([`Frame`],
//! [`Record`], [`Stats`]) and the [`Sink`] trait. Serialized as one JSON object per line with a `kind`
//! tag; field names are part of the trace format and change only with its
//! version.

use std::fmt;
use std::sync::Arc;
use std::time::Duration;

use serde::{Deserialize, Serialize};

use crate::bus::outcome::nanos;
use crate::bus::{Address, Operation, Outcome};

mod line;
pub use line::{with_address_text, write_line, write_line_with};

/// Where in a script something happened.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct Origin {
    /// Shared, not owned: every frame of a script names the same file, so
    /// the player hands out one string (serialized as a plain string).
    pub file: Arc<str>,
    pub line: u32,
}

impl fmt::Display for Origin {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}:{}", self.file, self.line)
    }
}

/// One attempt at one transaction.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Frame {
    /// Sequence number of the attempt within the run, from 1.
    pub seq: u64,
    /// Adapter clock when the attempt started.
    #[serde(rename = "t_ns", with = "nanos")]
    pub t: Duration,
    pub address: Address,
    pub ops: Vec<Operation>,
    pub outcome: Outcome,
    /// Attempt number, from 1, and the most the retry policy allows.
    pub attempt: u32,
    pub attempts: u32,
    /// Why the tool sent it when the script did not ask directly.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub purpose: Option<Purpose>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub origin: Option<Origin>,
    /// Register or field names, where a register map is known.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub decoded: Option<String>,
    /// The values the register map reads in the register's bytes: each
    /// field (or the whole register) with its raw value and its meaning
    /// (trace 1.3; empty, and not written, without a map).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub values: Vec<FieldValue>,
    /// The SMBus PEC byte of the frame, where it carried one.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub pec: Option<PecMark>,
}

impl Frame {
    /// A frame of one attempt the script asked for itself: no purpose,
    /// script line, register names or PEC (tests, benches and tools that
    /// build frames by hand fill in what they need on top).
    pub fn single(seq: u64, t: Duration, address: Address, ops: Vec<Operation>, outcome: Outcome) -> Frame {
        Frame {
            seq,
            t,
            address,
            ops,
            outcome,
            attempt: 1,
            attempts: 1,
            purpose: None,
            origin: None,
            decoded: None,
            values: Vec::new(),
            pec: None,
        }
    }
}

/// One value of a frame as the register map reads it.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct FieldValue {
    /// The field's name (`RATE`), or the register's for a register that is
    /// one value.
    pub name: String,
    pub raw: u32,
    /// What it means: an enum name, a scaled value with its unit, or the
    /// raw number (`3`, `0x5E11`).
    pub shown: String,
}

impl FieldValue {
    /// `NAME=shown`, the form frame lines and the view write.
    pub fn push_to(&self, out: &mut String) {
        crate::ascii::push_escaped(out, &self.name);
        out.push('=');
        crate::ascii::push_escaped(out, &self.shown);
    }
}

/// Why the tool sent a frame the script did not ask for directly.
/// Serialized as its name (`scan`, `ack-poll`, `poll`, `batch`).
///
/// A name this version does not know (a trace of a newer minor version,
/// or a foreign one) still loads: it is kept as written
/// ([`Purpose::Other`]), shown and written back unchanged, and treated as
/// no purpose of ours (a plain transaction) by replay and to-script.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Purpose {
    /// A probe of `bus.scan` or the `scan` command.
    Scan,
    /// A probe of ACK polling (`bus.wait_ack`), repeated until the target answers.
    AckPoll,
    /// A register read of a register helper's `wait`, repeated until a
    /// field has the value asked for.
    Poll,
    /// A transaction of a `bus.batch` block.
    Batch,
    /// A name this version does not know.
    Other(OtherPurpose),
}

/// The name of a purpose this version does not know. Its field is private
/// so it never holds a known name: a known name always reads as its own
/// variant, which keeps loading and writing a trace an exact round trip.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct OtherPurpose(Box<str>);

impl Purpose {
    /// The purposes this version knows, in no particular order; a new
    /// variant goes here too, or its name would load as [`Purpose::Other`].
    const KNOWN: [Purpose; 4] = [Purpose::Scan, Purpose::AckPoll, Purpose::Poll, Purpose::Batch];

    /// Its name in frame logs and traces.
    pub fn as_str(&self) -> &str {
        match self {
            Purpose::Scan => "scan",
            Purpose::AckPoll => "ack-poll",
            Purpose::Poll => "poll",
            Purpose::Batch => "batch",
            Purpose::Other(OtherPurpose(name)) => name,
        }
    }

    /// Whether frames of this purpose are probes: they ask whether a
    /// device answers (a scan probe, an ACK poll), so a NACK is one of the
    /// answers they expect, not a failure. [`Stats`] counts their NACKs
    /// apart.
    pub fn is_probe(&self) -> bool {
        matches!(self, Purpose::Scan | Purpose::AckPoll)
    }

    /// The purpose a name stands for; see the type's note on unknown names.
    pub fn from_name(name: &str) -> Purpose {
        Purpose::KNOWN
            .into_iter()
            .find(|p| p.as_str() == name)
            .unwrap_or_else(|| Purpose::Other(OtherPurpose(name.into())))
    }
}

impl fmt::Display for Purpose {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.as_str())
    }
}

impl Serialize for Purpose {
    fn serialize<S: serde::Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        s.serialize_str(self.as_str())
    }
}

impl<'de> Deserialize<'de> for Purpose {
    fn deserialize<D: serde::Deserializer<'de>>(d: D) -> Result<Purpose, D::Error> {
        struct Name;
        impl serde::de::Visitor<'_> for Name {
            type Value = Purpose;
            fn expecting(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
                f.write_str("a purpose name")
            }
            fn visit_str<E: serde::de::Error>(self, v: &str) -> Result<Purpose, E> {
                Ok(Purpose::from_name(v))
            }
        }
        d.deserialize_str(Name)
    }
}

/// Where a frame's PEC byte sits and whether it checked out.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub struct PecMark {
    /// Operation and byte index of the PEC byte.
    pub op: usize,
    pub index: usize,
    /// The PEC the message calls for (computed, or sent by the controller).
    pub expected: u8,
    /// The PEC the target sent, for PECs the controller reads.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub received: Option<u8>,
    pub ok: bool,
}

/// Severity of a script log line.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Level {
    Info,
    Warn,
}

/// What a framed serial link did over a run (trace 1.2, the end record's
/// `link`): how much it carried, how often it had to send again, and the
/// timing and sizes it ended on.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct LinkReport {
    pub frames_sent: u64,
    pub frames_received: u64,
    /// Frames that arrived damaged and were dropped.
    pub frames_dropped: u64,
    /// Distinct requests.
    pub requests: u64,
    /// Request frames sent again, for any reason.
    pub retransmissions: u64,
    /// Of those, after the request's own timer ran out.
    pub timeouts: u64,
    /// Of those, at once, because a reply or gap notice showed it missing.
    pub fast_resends: u64,
    /// Gap notices from the adapter.
    pub gaps: u64,
    /// The retransmission timeout in use at the end.
    #[serde(rename = "rto_ns", with = "nanos")]
    pub rto: Duration,
    /// Transactions per request and requests in flight in use at the end.
    pub batch: u32,
    pub window: u32,
    /// Retransmissions per request frame sent, an estimate of the loss.
    pub loss: f64,
}

/// Counters a run reports at its end.
///
/// NACKs are counted twice over: `nacks` holds every NACKed attempt (as
/// the trace's end record always has), `probe_nacks` those of probes
/// (scan probes and ACK polls, [`Purpose::is_probe`]), which ask whether
/// a device answers and expect a NACK as often as not. What a person
/// should look at is the rest, [`Stats::other_nacks`]. The probe counters
/// are not part of the trace format (its end record keeps the fields it
/// has always had); a reader recounts them from the frames.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, Deserialize)]
pub struct Stats {
    /// Transactions asked for (a retried one counts once).
    pub transactions: u64,
    /// Tries put on the bus, retries included.
    pub attempts: u64,
    pub retries: u64,
    /// NACKed attempts, probes included.
    pub nacks: u64,
    pub bytes_written: u64,
    pub bytes_read: u64,
    #[serde(rename = "bus_ns", with = "nanos")]
    pub bus_time: Duration,
    /// Attempts that were probes, and how many of them were NACKed.
    #[serde(skip)]
    pub probes: u64,
    #[serde(skip)]
    pub probe_nacks: u64,
}

impl Stats {
    /// Counts one recorded frame: a first attempt is a transaction, a
    /// later one a retry; written bytes are those ACKed or NACKed.
    pub fn add_frame(&mut self, f: &Frame) {
        self.attempts += 1;
        if f.attempt <= 1 {
            self.transactions += 1;
        } else {
            self.retries += 1;
        }
        let probe = f.purpose.as_ref().is_some_and(Purpose::is_probe);
        self.probes += probe as u64;
        if f.outcome.fault.as_ref().is_some_and(crate::bus::Fault::is_nack) {
            self.nacks += 1;
            self.probe_nacks += probe as u64;
        }
        for (op, oo) in f.ops.iter().zip(&f.outcome.ops) {
            match op {
                Operation::Write(_) => self.bytes_written += oo.acks.len() as u64,
                Operation::Read(_) | Operation::ReadCounted { .. } => self.bytes_read += oo.data.len() as u64,
            }
        }
        self.bus_time += f.outcome.bus_time;
    }

    /// NACKed attempts other than probes: the ones a script should care about.
    pub fn other_nacks(&self) -> u64 {
        self.nacks.saturating_sub(self.probe_nacks)
    }

    /// Attempts other than probes.
    pub fn other_attempts(&self) -> u64 {
        self.attempts.saturating_sub(self.probes)
    }

    /// Whether every attempt counted was a probe (and there was one).
    pub fn only_probes(&self) -> bool {
        self.probes > 0 && self.probes == self.attempts
    }
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "lowercase")]
pub enum Record {
    Frame(Frame),
    Log {
        #[serde(rename = "t_ns", with = "nanos")]
        t: Duration,
        level: Level,
        text: String,
        #[serde(default, skip_serializing_if = "Option::is_none")]
        origin: Option<Origin>,
    },
    Step {
        #[serde(rename = "t_ns", with = "nanos")]
        t: Duration,
        name: String,
        #[serde(default, skip_serializing_if = "Option::is_none")]
        origin: Option<Origin>,
    },
    /// The last record of a run: counters, exit code and the error, if any.
    End {
        #[serde(rename = "t_ns", with = "nanos")]
        t: Duration,
        stats: Stats,
        exit: u8,
        #[serde(default, skip_serializing_if = "Option::is_none")]
        error: Option<String>,
        /// Adapters with a framed link (trace 1.2).
        #[serde(default, skip_serializing_if = "Option::is_none")]
        link: Option<LinkReport>,
    },
}

/// Something that watches a run's records as they happen: the frame log,
/// the JSON stream, a trace file. Sinks never talk to the adapter.
pub trait Sink {
    fn record(&mut self, r: &Record) -> std::io::Result<()>;
    fn flush(&mut self) -> std::io::Result<()>;
    /// Whether this sink is the run's durable record (the trace file):
    /// when it cannot write, the run fails. A viewer that goes away only
    /// stops being written to.
    fn is_record(&self) -> bool {
        false
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::bus::{OpOutcome, Operation};

    #[test]
    fn frame_round_trips_through_json() {
        let f = Record::Frame(Frame {
            seq: 3,
            t: Duration::from_nanos(1_234_567),
            address: Address::Ten(0x2A5),
            ops: vec![Operation::Write(vec![1]), Operation::Read(2)],
            outcome: Outcome {
                ops: vec![OpOutcome { acks: vec![true], data: vec![] }, OpOutcome { acks: vec![], data: vec![7, 8] }],
                bus_time: Duration::from_nanos(38_500),
                measured: None,
                fault: None,
            },
            attempt: 1,
            attempts: 3,
            purpose: None,
            origin: Some(Origin { file: "a.lua".into(), line: 4 }),
            decoded: None,
            values: vec![FieldValue { name: "RATE".into(), raw: 1, shown: "4Hz".into() }],
            pec: None,
        });
        let text = serde_json::to_string(&f).unwrap();
        assert!(text.starts_with(r#"{"kind":"frame","seq":3,"t_ns":1234567,"address":"10:0x2A5""#), "{text}");
        assert_eq!(serde_json::from_str::<Record>(&text).unwrap(), f);
    }

    // Probes (scan, ACK poll) are counted apart; the end record's fields
    // stay those of trace format 1.0, the probe counters are not written.
    #[test]
    fn stats_count_probe_nacks_apart() {
        let nack = Some(crate::bus::Fault::AddressNack { op: 0, direction: crate::bus::Direction::Write });
        let frame = |purpose: Option<Purpose>, fault: Option<crate::bus::Fault>| Frame {
            seq: 1,
            t: Duration::ZERO,
            address: Address::Seven(0x50),
            ops: vec![Operation::Write(vec![])],
            outcome: Outcome { ops: vec![OpOutcome::default()], bus_time: Duration::ZERO, measured: None, fault },
            attempt: 1,
            attempts: 1,
            purpose,
            origin: None,
            decoded: None,
            values: Vec::new(),
            pec: None,
        };
        let mut s = Stats::default();
        for f in [
            frame(Some(Purpose::AckPoll), nack.clone()),
            frame(Some(Purpose::AckPoll), nack.clone()),
            frame(Some(Purpose::AckPoll), None),
            frame(Some(Purpose::Scan), nack.clone()),
            frame(Some(Purpose::Poll), nack.clone()),
            frame(None, nack.clone()),
            frame(None, None),
        ] {
            s.add_frame(&f);
        }
        assert_eq!((s.attempts, s.nacks, s.probes, s.probe_nacks), (7, 5, 4, 3));
        assert_eq!((s.other_nacks(), s.other_attempts()), (2, 3), "a register poll's NACK is one to look at");
        assert!(!s.only_probes());
        let text = serde_json::to_string(&s).unwrap();
        assert_eq!(
            text,
            r#"{"transactions":7,"attempts":7,"retries":0,"nacks":5,"bytes_written":0,"bytes_read":0,"bus_ns":0}"#
        );
        assert_eq!(serde_json::from_str::<Stats>(&text).unwrap().probes, 0, "recounted from frames, not read");
    }

    // Trace format 1.0 writes purposes as these names; they must not change.
    #[test]
    fn purposes_keep_their_trace_names() {
        let names = [
            (Purpose::Scan, "scan"),
            (Purpose::AckPoll, "ack-poll"),
            (Purpose::Poll, "poll"),
            (Purpose::Batch, "batch"),
        ];
        for (p, name) in names.clone() {
            assert_eq!(serde_json::to_string(&p).unwrap(), format!("\"{name}\""));
            assert_eq!(serde_json::from_str::<Purpose>(&format!("\"{name}\"")).unwrap(), p);
            assert_eq!(p.to_string(), name);
        }
        for p in Purpose::KNOWN {
            assert!(names.iter().any(|(q, _)| *q == p), "{p:?} has its name checked above");
        }
    }

    // A purpose from a newer or foreign trace loads, shows and writes back as it was.
    #[test]
    fn unknown_purposes_round_trip_unchanged() {
        let p: Purpose = serde_json::from_str(r#""warm-up""#).unwrap();
        assert!(matches!(p, Purpose::Other(_)));
        assert_eq!(p.as_str(), "warm-up");
        assert_eq!(serde_json::to_string(&p).unwrap(), r#""warm-up""#);
        assert_ne!(p, Purpose::from_name("scan"));
        assert!(serde_json::from_str::<Purpose>("3").is_err(), "a purpose is a name");
    }
}
