//! The adapter side of the buscue native serial protocol, written once.
//!
//! `no_std`, no allocator. A firmware author links this crate into a
//! microcontroller image, implements [`Link`] over the board's USB serial
//! interface and [`Target`] over its embedded-hal I2C peripheral and a
//! clock, and calls [`Bridge::poll`] from the main loop. The host side of
//! buscue uses the same [`cobs`], [`crc`] and [`wire`] modules, so both ends
//! share one codec.
//!
//! The protocol itself is specified in `adapters/PROTOCOL.md`; this crate
//! is its reference implementation.

#![no_std]

pub mod bridge;
pub mod cobs;
pub mod crc;
pub mod wire;

pub use bridge::{Bridge, Link, SevenBitOnly, Target};
pub use wire::{BusLine, Caps, Failure, Status, TxReport};
