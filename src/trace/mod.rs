//! Trace records: what a run did, one record per transaction attempt, log
//! line or step boundary, in the order it happened. The frame log, the
//! JSON output and (later) trace files all carry these same records.

pub mod record;

pub use record::{Frame, Origin, Record};

/// Something that watches a run's records as they happen: the frame log,
/// the JSON stream, a trace file. Sinks never talk to the adapter.
pub trait Sink {
    fn record(&mut self, r: &Record) -> std::io::Result<()>;
    fn flush(&mut self) -> std::io::Result<()>;
}
