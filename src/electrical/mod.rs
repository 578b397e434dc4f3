//! The bus arithmetic of the trade: pull-up sizing, rise time, bus
//! loading ([`pullup`], limits in [`limits`]), and bus time of a
//! transaction shape ([`bustime`], a report over
//! [`crate::bus::timing`]).
//!
//! Everything here is plain computation on numbers the user gives, with no
//! I/O: the named options every front end reads ([`options`]) and the
//! readable text of the reports ([`tables`]) for the command line to
//! print. Results are `serde::Serialize`, for JSON and for scripts.

pub mod bustime;
pub mod eseries;
pub mod limits;
pub mod options;
pub mod pullup;
pub mod tables;
pub mod units;

pub use bustime::{BusTimeReport, bus_time};
pub use options::{BusTimeOptions, PullupOptions};
pub use pullup::{Capacitance, ElectricalError, Fit, PullupInput, PullupReport, SpeedTarget, size_pullups};
