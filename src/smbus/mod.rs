//! SMBus on top of bus transactions: PEC ([`pec`]) and the protocols
//! ([`protocol`]), with typed replies and errors.
//!
//! The protocols are built from, and decoded against, the same
//! [`Transaction`](crate::bus::Transaction) events every adapter puts on
//! the bus; nothing here talks to hardware.

/// PEC lives with the bus model (an adapter that checks PEC itself
/// rebuilds the byte it checked); its SMBus meaning is described here.
pub use crate::bus::pec;
pub mod protocol;

pub use pec::{Pec, crc8};
pub use protocol::{BlockLimit, Call, PecCheck, PecSender, Reply, Request, SmbusError, Value, execute, message};
