//! What happened when a transaction was put on the bus.
//!
//! Contract: an [`Outcome`] holds one [`OpOutcome`] per operation that was
//! started, in order (a transaction cut short by a NACK holds the prefix
//! that ran, including the operation that failed), the modelled bus time,
//! the adapter's measured time where it reports one, and a result. A NACK
//! ends the transaction: the controller sends STOP right after it.

use std::time::Duration;

use serde::{Deserialize, Serialize};
use thiserror::Error;

use super::transaction::Direction;

/// What one operation did.
#[derive(Debug, Clone, PartialEq, Eq, Default, Serialize, Deserialize)]
pub struct OpOutcome {
    /// For a write: ACK (true) or NACK (false) per byte that was sent.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub acks: Vec<bool>,
    /// For a read: the bytes received; for a counted read, the count
    /// byte first, then the data, then the trailer.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub data: Vec<u8>,
}

/// Bus-level trouble on the lines themselves.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum LineFault {
    SdaStuckLow,
    SclStuckLow,
    /// A START or STOP condition where none belongs.
    MisplacedCondition,
}

impl std::fmt::Display for LineFault {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(match self {
            LineFault::SdaStuckLow => "SDA stuck low",
            LineFault::SclStuckLow => "SCL stuck low",
            LineFault::MisplacedCondition => "a START or STOP where none belongs",
        })
    }
}

/// How a transaction failed.
#[derive(Debug, Clone, PartialEq, Eq, Error, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "kebab-case")]
pub enum Fault {
    /// No target ACKed the address byte(s) of the phase starting at `op`.
    #[error("address NACK ({direction} phase at operation {op})")]
    AddressNack { op: usize, direction: Direction },
    /// The target NACKed data byte `index` of write operation `op`.
    #[error("data NACK at operation {op}, byte {index}")]
    DataNack { op: usize, index: usize },
    /// A NACK the adapter reports without placing it: `address` when it
    /// says an address byte went unanswered but not in which phase, false
    /// when it cannot tell an address NACK from a data NACK at all (a
    /// kernel adapter's driver reports both the same way). Said as such
    /// rather than guessed.
    #[error("{}", if *address {
        "address NACK (the adapter does not say in which address phase)"
    } else {
        "NACK (the adapter does not say whether of an address or a data byte)"
    })]
    Nack { address: bool },
    #[error("arbitration lost")]
    ArbitrationLost,
    #[error("bus error: {line}")]
    Bus { line: LineFault },
    /// A target held SCL low for longer than the adapter waits.
    #[error("clock-stretch timeout after {waited_us} us")]
    StretchTimeout { waited_us: u64 },
    /// The adapter or the link to it failed; the bus state is unknown.
    #[error("adapter or link failure: {detail}")]
    Adapter { detail: String },
}

impl Fault {
    /// NACKs are the faults a retry policy may retry: the target was busy
    /// or absent. Everything else points at wiring, contention or the
    /// adapter and is not retried blindly.
    pub fn is_nack(&self) -> bool {
        matches!(self, Fault::AddressNack { .. } | Fault::DataNack { .. } | Fault::Nack { .. })
    }

    /// The nearest embedded-hal 1.0 error kind.
    pub fn kind(&self) -> embedded_hal::i2c::ErrorKind {
        use embedded_hal::i2c::{ErrorKind, NoAcknowledgeSource};
        match self {
            Fault::AddressNack { .. } => ErrorKind::NoAcknowledge(NoAcknowledgeSource::Address),
            Fault::DataNack { .. } => ErrorKind::NoAcknowledge(NoAcknowledgeSource::Data),
            Fault::Nack { address: true } => ErrorKind::NoAcknowledge(NoAcknowledgeSource::Address),
            Fault::Nack { address: false } => ErrorKind::NoAcknowledge(NoAcknowledgeSource::Unknown),
            Fault::ArbitrationLost => ErrorKind::ArbitrationLoss,
            Fault::Bus { .. } => ErrorKind::Bus,
            Fault::StretchTimeout { .. } | Fault::Adapter { .. } => ErrorKind::Other,
        }
    }

    /// What replay and diff compare; see [`FaultClass`].
    pub fn class(&self) -> FaultClass {
        match self {
            Fault::AddressNack { .. } => FaultClass::AddressNack,
            Fault::DataNack { index, .. } => FaultClass::DataNack { index: *index },
            Fault::Nack { address } => FaultClass::Nack { address: *address },
            Fault::ArbitrationLost => FaultClass::ArbitrationLost,
            Fault::Bus { line } => FaultClass::Bus(*line),
            Fault::StretchTimeout { .. } => FaultClass::StretchTimeout,
            Fault::Adapter { .. } => FaultClass::Adapter,
        }
    }

    /// A short label for frame logs: that of its [`FaultClass`].
    pub fn label(&self) -> String {
        self.class().label()
    }
}

/// A fault as replay and diff compare it, and as a frame log labels it:
/// its kind, the byte a data NACK hit and the line a bus error names.
/// Left out: where a NACKed address phase started, how long a stretch
/// lasted and an adapter's message, which differ between runs of the
/// same sequence. Two faults count as the same result exactly when their
/// classes are equal, which is exactly when their labels are.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum FaultClass {
    AddressNack,
    DataNack { index: usize },
    Nack { address: bool },
    ArbitrationLost,
    Bus(LineFault),
    StretchTimeout,
    Adapter,
}

impl FaultClass {
    /// The short label frame logs, replay and diff reports show.
    pub fn label(self) -> String {
        match self {
            FaultClass::AddressNack => "addr-NACK".into(),
            FaultClass::DataNack { index } => format!("data-NACK@{index}"),
            FaultClass::Nack { address: true } => "addr-NACK?".into(),
            FaultClass::Nack { address: false } => "NACK?".into(),
            FaultClass::ArbitrationLost => "arb-lost".into(),
            FaultClass::Bus(LineFault::SdaStuckLow) => "SDA-stuck".into(),
            FaultClass::Bus(LineFault::SclStuckLow) => "SCL-stuck".into(),
            FaultClass::Bus(LineFault::MisplacedCondition) => "bus-error".into(),
            FaultClass::StretchTimeout => "stretch-timeout".into(),
            FaultClass::Adapter => "adapter-fail".into(),
        }
    }
}

/// The result of one transaction. The default is an empty outcome (no
/// operations, no time, no fault): a buffer for
/// [`Adapter::execute_into`](crate::adapter::Adapter::execute_into) to fill.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, Deserialize)]
pub struct Outcome {
    pub ops: Vec<OpOutcome>,
    /// Modelled time on the wire, clock stretching included.
    #[serde(rename = "bus_ns", with = "nanos")]
    pub bus_time: Duration,
    /// Time the adapter measured, where it reports one.
    #[serde(rename = "measured_ns", default, skip_serializing_if = "Option::is_none", with = "opt_nanos")]
    pub measured: Option<Duration>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub fault: Option<Fault>,
}

impl Outcome {
    pub fn is_ok(&self) -> bool {
        self.fault.is_none()
    }

    /// An outcome for a transaction that never reached the bus.
    pub fn adapter_failure(detail: impl Into<String>) -> Self {
        Outcome {
            ops: Vec::new(),
            bus_time: Duration::ZERO,
            measured: None,
            fault: Some(Fault::Adapter { detail: detail.into() }),
        }
    }

    /// Empties the outcome for `n` operations, keeping the buffers it has:
    /// `n` operation outcomes with no ACKs and no data, no time, no fault.
    /// An adapter filling a recycled outcome starts here, so a run of
    /// transactions of one shape allocates nothing for its outcomes.
    pub fn reset(&mut self, n: usize) {
        self.ops.truncate(n);
        for o in &mut self.ops {
            o.acks.clear();
            o.data.clear();
        }
        self.ops.resize_with(n, OpOutcome::default);
        self.bus_time = Duration::ZERO;
        self.measured = None;
        self.fault = None;
    }

    /// All bytes read, in order, across the read operations.
    pub fn read_bytes(&self) -> Vec<u8> {
        self.ops.iter().flat_map(|o| o.data.iter().copied()).collect()
    }
}

/// Durations in trace records are whole nanoseconds.
pub mod nanos {
    use serde::{Deserialize, Deserializer, Serializer};
    use std::time::Duration;

    pub fn serialize<S: Serializer>(d: &Duration, s: S) -> Result<S::Ok, S::Error> {
        s.serialize_u64(d.as_nanos() as u64)
    }
    pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<Duration, D::Error> {
        Ok(Duration::from_nanos(u64::deserialize(d)?))
    }
}

pub mod opt_nanos {
    use serde::{Deserialize, Deserializer, Serializer};
    use std::time::Duration;

    pub fn serialize<S: Serializer>(d: &Option<Duration>, s: S) -> Result<S::Ok, S::Error> {
        match d {
            Some(d) => s.serialize_some(&(d.as_nanos() as u64)),
            None => s.serialize_none(),
        }
    }
    pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<Option<Duration>, D::Error> {
        Ok(Option::<u64>::deserialize(d)?.map(Duration::from_nanos))
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use embedded_hal::i2c::{Error as _, ErrorKind, NoAcknowledgeSource};

    #[test]
    fn faults_map_to_embedded_hal_kinds() {
        let f = Fault::AddressNack { op: 0, direction: Direction::Write };
        assert_eq!(f.kind(), ErrorKind::NoAcknowledge(NoAcknowledgeSource::Address));
        assert_eq!(Fault::DataNack { op: 0, index: 2 }.kind(), ErrorKind::NoAcknowledge(NoAcknowledgeSource::Data));
        assert_eq!(Fault::ArbitrationLost.kind(), ErrorKind::ArbitrationLoss);
        assert_eq!(Fault::Bus { line: LineFault::SdaStuckLow }.kind(), ErrorKind::Bus);
        assert_eq!(ErrorKind::Bus.kind(), ErrorKind::Bus);
        assert!(f.is_nack());
        assert!(!Fault::ArbitrationLost.is_nack());
    }

    // Replay and diff compare classes where they used to compare labels:
    // the two must split faults the same way.
    #[test]
    fn classes_equal_exactly_when_labels_do() {
        let faults = [
            Fault::AddressNack { op: 0, direction: Direction::Write },
            Fault::AddressNack { op: 2, direction: Direction::Read },
            Fault::DataNack { op: 0, index: 1 },
            Fault::DataNack { op: 3, index: 1 },
            Fault::DataNack { op: 0, index: 2 },
            Fault::ArbitrationLost,
            Fault::Bus { line: LineFault::SdaStuckLow },
            Fault::Bus { line: LineFault::SclStuckLow },
            Fault::Bus { line: LineFault::MisplacedCondition },
            Fault::StretchTimeout { waited_us: 10 },
            Fault::StretchTimeout { waited_us: 99 },
            Fault::Adapter { detail: "a".into() },
            Fault::Adapter { detail: "b".into() },
        ];
        for a in &faults {
            for b in &faults {
                assert_eq!(a.class() == b.class(), a.label() == b.label(), "{a:?} vs {b:?}");
            }
        }
        assert_eq!(Fault::DataNack { op: 1, index: 4 }.label(), "data-NACK@4");
        assert_ne!(faults[0].class(), faults[2].class());
    }
}
