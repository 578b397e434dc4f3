//! buscue: a scriptable I2C transaction-sequence player.
//!
//! Data flows one way: script -> bus model -> adapter -> outcome ->
//! trace + view. See DEVELOPERS.md for the module map.

pub mod adapter;
pub mod ascii;
pub mod bus;
pub mod electrical;
pub mod exit;
pub mod hal;
pub mod script;
pub mod sim;
pub mod smbus;
pub mod trace;
pub mod view;
