//! What can go wrong with an adapter outside a transaction's own outcome
//! (setting the speed, recovering the bus, reading line levels, closing),
//! typed by what the user should do about it.
//!
//! Contract: every [`Adapter`](super::Adapter) method that can fail
//! returns an [`AdapterError`]; the message is complete on its own (it
//! names the port or the adapter). [`AdapterError::Input`] means the
//! request was wrong whatever the hardware (fix the script or the command
//! line); every other kind is the adapter's or the link's (look at the
//! hardware), and the command line gives the two different exit codes.
//! A failure *during* a transaction is not an error but an
//! [`Outcome`](crate::bus::Outcome) with [`Fault::Adapter`](crate::bus::Fault).

use thiserror::Error;

use super::link::LinkError;

#[derive(Debug, Clone, PartialEq, Eq, Error)]
pub enum AdapterError {
    /// The link is gone: the port closed, the adapter was unplugged or
    /// reset, an I/O error. Nothing more can go through it.
    #[error("{0}")]
    LinkLost(String),
    /// The adapter did not answer in time.
    #[error("{0}")]
    NoAnswer(String),
    /// The adapter answered, but refused the request.
    #[error("{0}")]
    Refused(String),
    /// The adapter answered with something that does not make sense.
    #[error("{0}")]
    Protocol(String),
    /// The adapter cannot do this at all (10-bit addresses, counted reads,
    /// bus recovery).
    #[error("{0}")]
    Unsupported(String),
    /// The request is wrong whatever the adapter: a speed outside the range
    /// the adapter states it has.
    #[error("{0}")]
    Input(String),
    /// The adapter or its link failed while a transaction was on the bus
    /// (the detail of its [`Fault::Adapter`](crate::bus::Fault)); the bus
    /// state is unknown.
    #[error("{0}")]
    Failed(String),
}

impl From<LinkError> for AdapterError {
    fn from(e: LinkError) -> Self {
        let text = e.to_string();
        match e {
            LinkError::Open { .. } | LinkError::Gone { .. } => AdapterError::LinkLost(text),
            LinkError::Timeout { .. } => AdapterError::NoAnswer(text),
            LinkError::Unexpected { .. } | LinkError::Reply(_) => AdapterError::Protocol(text),
        }
    }
}
