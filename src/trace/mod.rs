//! Trace records: what a run did, one record per transaction attempt, log
//! line or step boundary, in the order it happened. The frame log, the
//! JSON output and trace files all carry these same records.
//!
//! The record types and the [`Sink`](crate::record::Sink) trait live in
//! [`crate::record`]; this room holds [`header`] (a trace file's first
//! line), [`file`] (writing and reading trace files), [`mask`] (volatile
//! data to ignore when comparing), [`replay`] (play a trace against an
//! adapter and compare), [`diff`] (align two traces), [`ignore`] (polls, retries and scans left out of both), [`to_script`]
//! (turn a trace into an editable Lua script), [`shrink`] (the fewest
//! recorded transactions that still diverge, through [`ddmin`]). The format is documented
//! in docs/traces.md.

mod append;
pub mod ddmin;
pub mod diff;
pub mod file;
pub mod header;
pub mod ignore;
pub mod mask;
pub mod replay;
pub mod shrink;
pub mod to_script;

pub use file::{LimitReached, Trace, TraceError, TraceReader, TraceRescue, TraceWriter};
pub use header::{CaptureInfo, Header};
