//! The bus arithmetic of the trade: pull-up sizing, rise time, bus
//! loading ([`pullup`], limits in [`limits`]), and bus time of a
//! transaction shape ([`bustime`], a report over
//! [`crate::bus::timing`]).
//!
//! Everything here is plain computation on numbers the user gives: no I/O
//! but the printing in [`cli`]. Results are `serde::Serialize`, for JSON
//! and for scripts.

pub mod bustime;
pub mod cli;
pub mod eseries;
pub mod limits;
pub mod pullup;
pub mod units;

pub use bustime::{BusTimeReport, bus_time};
pub use cli::{BusTimeArgs, PullupArgs, run, run_bus_time};
pub use pullup::{Capacitance, ElectricalError, Fit, PullupInput, PullupReport, SpeedTarget, size_pullups};
