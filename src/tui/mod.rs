//! The full-screen terminal view: a run's records as a list a person can
//! move around in, one frame's wire events bit by bit, the counts so far.
//!
//! Contract:
//! - [`source::Source`] is what the view reads: a trace file through its
//!   [`index::TraceIndex`] (byte offsets only; a record is parsed when it
//!   is on screen or a filter visits it), or the live buffer a run's
//!   [`live::LiveSink`] fills. The view never holds the adapter.
//! - [`app::App`] is the state and the key bindings, [`draw`] turns it into
//!   a screen (any ratatui backend: tests use the in-memory one), [`term`]
//!   owns the real terminal and always gives it back (quit, error, panic,
//!   SIGINT/SIGTERM/SIGHUP).
//! - Recorded text (log lines, step names, register names, file names) is
//!   shown through [`crate::ascii::escape_controls`], never obeyed.

pub mod app;
pub mod bits;
pub mod draw;
pub mod filter;
pub mod index;
pub mod live;
pub mod source;
pub mod term;

pub use app::App;
pub use filter::Filter;
pub use index::TraceIndex;
