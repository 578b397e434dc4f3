//! The player: the one path every transaction takes, whoever asks for it
//! (a Lua script, `scan`, `replay`, the embedded-hal bridge).
//!
//! Contract: [`Session`] owns the adapter and the sinks; it validates each
//! transaction, retries NACKs by a [`RetryPolicy`], polls for ACK, scans,
//! and hands every attempt to the sinks as a [`Frame`](crate::record::Frame)
//! before anything else happens. No Lua here: the script room drives a
//! session through this API like any other caller.

pub mod retry;
pub mod session;

pub use retry::{PolicyError, RetryPolicy};
pub use session::{Explainer, Marker, Probe, Request, RunError, ScanPlan, Session, TEN_BIT_SKIPPED, scan_range};
