//! The contract between the simulated bus and a device model.
//!
//! The bus calls a device in wire order: [`Device::select`] when its
//! address (with R/W) has been sent, [`Device::write`] for each byte the
//! controller sends, [`Device::read`] for each byte the controller clocks
//! out, and [`Device::stop`] when the transaction ends, whether by STOP
//! after success or by the STOP the controller sends after a NACK. A
//! repeated START re-selects the same device.
//!
//! `now` is the bus time at which the device sees its event on the wire,
//! clock stretching so far included (`bus::timing::EventTimes::seen_ns`):
//! - [`Device::select`] and [`Device::write`]: the end of the byte's ACK
//!   clock, which is where an [`Answer::AckAfter`] stretch starts;
//! - [`Device::read`]: the start of the byte, when the device puts its
//!   first bit on SDA;
//! - [`Device::stop`]: the STOP condition itself (SDA rising), before the
//!   bus-free time. A write cycle or a conversion that starts at STOP
//!   starts here.

use std::time::Duration;

use crate::bus::{Address, Direction};

/// A device's answer to its address.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Answer {
    Ack,
    /// ACK, then hold SCL low for this long, counted from the `now` the
    /// device was selected at, before the first data bit.
    AckAfter(Duration),
    Nack,
}

pub trait Device {
    fn name(&self) -> &str;
    fn address(&self) -> Address;
    fn select(&mut self, dir: Direction, now: Duration) -> Answer;
    /// A byte from the controller; true = ACK.
    fn write(&mut self, byte: u8, now: Duration) -> bool;
    fn read(&mut self, now: Duration) -> u8;
    fn stop(&mut self, now: Duration);
    /// Why the transaction just ended cannot stand as the device's answer
    /// (a recorded device asked for something its recording never saw);
    /// the bus turns it into an adapter failure. Most models never fail.
    fn take_failure(&mut self) -> Option<String> {
        None
    }
}
