//! Trace records: what a run did, one record per transaction attempt, log
//! line or step boundary, in the order it happened. The frame log, the
//! JSON output and trace files all carry these same records.
//!
//! Rooms: [`record`] (the record types), [`header`] (a trace file's first
//! line), [`file`] (writing and reading trace files), [`mask`] (volatile
//! data to ignore when comparing), [`replay`] (play a trace against an
//! adapter and compare), [`diff`] (align two traces), [`to_script`]
//! (turn a trace into an editable Lua script). The format is documented
//! in docs/traces.md.

pub mod diff;
pub mod file;
pub mod header;
pub mod mask;
pub mod record;
pub mod replay;
pub mod to_script;

pub use file::{Trace, TraceError, TraceReader, TraceWriter};
pub use header::Header;
pub use record::{Frame, Origin, Record};

/// Something that watches a run's records as they happen: the frame log,
/// the JSON stream, a trace file. Sinks never talk to the adapter.
pub trait Sink {
    fn record(&mut self, r: &Record) -> std::io::Result<()>;
    fn flush(&mut self) -> std::io::Result<()>;
}
