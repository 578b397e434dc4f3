//! buscue: a scriptable I2C transaction-sequence player.
//!
//! Data flows one way: script -> player -> adapter -> outcome -> record ->
//! trace + view. Each module is a room; a room may use only the rooms
//! below it in DEVELOPERS.md's module map (`tests/rooms.rs` enforces it).

pub mod ascii;
pub mod bus;
pub mod config;
pub mod regmap;

pub mod adapter;
pub mod electrical;
pub mod record;
pub mod report;
pub mod smbus;

pub mod sim;

pub mod player;
pub mod view;

pub mod hal;
#[cfg(unix)]
pub mod serve;
pub mod trace;
pub mod tui;

pub mod script;

pub mod capture;
pub mod cli;
