//! The contract between the simulated bus and a device model.
//!
//! The bus calls a device in wire order: [`Device::select`] when its
//! address (with R/W) has been sent, [`Device::write`] for each byte the
//! controller sends, [`Device::read`] for each byte the controller clocks
//! out, and [`Device::stop`] when the transaction ends, whether by STOP
//! after success or by the STOP the controller sends after a NACK. `now` is
//! the bus clock at the start of the transaction plus any clock stretching
//! so far. A repeated START re-selects the same device.

use std::time::Duration;

use crate::bus::{Address, Direction};

/// A device's answer to its address.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Answer {
    Ack,
    /// ACK, then hold SCL low for this long before the first data bit.
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
}
