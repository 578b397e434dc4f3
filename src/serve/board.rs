//! The simulated bench as an embedded-hal I2C controller and a bridge
//! [`Target`], so the adapter library (`adapters/bridge`) that runs on a
//! microcontroller runs unchanged over the simulated bus.
//!
//! Contract:
//! - [`SimBoard`] implements `embedded_hal::i2c::I2c` for both
//!   `SevenBitAddress` and `TenBitAddress`: each call is one transaction
//!   on the simulated bus, read buffers are filled with the bytes read,
//!   and a fault becomes an error whose `kind()` is [`Fault::kind`].
//! - Side channel: embedded-hal reports only an error kind, so the board
//!   also keeps the full [`Outcome`] of the last transaction and hands it
//!   to the bridge through [`Target::last_report`] (failing operation,
//!   byte index, stretch time, modelled bus time). A real board without
//!   such a channel still works; its NACKs are just less precise.
//! - Time is the bench's clock: virtual unless the bench is paced.

use std::time::Duration;

use buscue_bridge::wire::{UNKNOWN_INDEX, UNKNOWN_NS};
use buscue_bridge::{Target, TxReport};
use embedded_hal::i2c::{self, ErrorKind, I2c, SevenBitAddress, TenBitAddress};

use crate::adapter::{Adapter, native_fault};
use crate::bus::{Address, BusSpeed, Fault, Operation, Outcome, Transaction};

use crate::sim::SimAdapter;

/// A bus fault seen through embedded-hal.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct SimI2cError(pub Fault);

impl i2c::Error for SimI2cError {
    fn kind(&self) -> ErrorKind {
        self.0.kind()
    }
}

/// The simulated adapter behind an embedded-hal face.
pub struct SimBoard {
    adapter: SimAdapter,
    last: Option<Outcome>,
}

impl SimBoard {
    pub fn new(adapter: SimAdapter) -> Self {
        SimBoard { adapter, last: None }
    }

    pub fn adapter(&self) -> &SimAdapter {
        &self.adapter
    }

    fn run(&mut self, address: Address, operations: &mut [i2c::Operation<'_>]) -> Result<(), SimI2cError> {
        let outcome = self.adapter.execute(&Transaction::new(address, Operation::from_hal(operations)));
        for (o, done) in operations.iter_mut().zip(&outcome.ops) {
            if let i2c::Operation::Read(buf) = o {
                let n = done.data.len().min(buf.len());
                buf[..n].copy_from_slice(&done.data[..n]);
            }
        }
        let result = match &outcome.fault {
            None => Ok(()),
            Some(f) => Err(SimI2cError(f.clone())),
        };
        self.last = Some(outcome);
        result
    }
}

impl i2c::ErrorType for SimBoard {
    type Error = SimI2cError;
}

impl I2c<SevenBitAddress> for SimBoard {
    fn transaction(&mut self, address: u8, operations: &mut [i2c::Operation<'_>]) -> Result<(), Self::Error> {
        let a = Address::seven(address as i64).map_err(|e| SimI2cError(Fault::Adapter { detail: e.to_string() }))?;
        self.run(a, operations)
    }
}

impl I2c<TenBitAddress> for SimBoard {
    fn transaction(&mut self, address: u16, operations: &mut [i2c::Operation<'_>]) -> Result<(), Self::Error> {
        let a = Address::ten(address as i64).map_err(|e| SimI2cError(Fault::Adapter { detail: e.to_string() }))?;
        self.run(a, operations)
    }
}

/// The side-channel report of an outcome: where it stopped and why.
pub fn report_of(o: &Outcome) -> TxReport {
    let bus_ns = u32::try_from(o.bus_time.as_nanos()).unwrap_or(UNKNOWN_NS - 1);
    let stopped_at = o.ops.len().saturating_sub(1).min(u8::MAX as usize) as u8;
    match &o.fault {
        None => TxReport { bus_ns, ..TxReport::OK },
        Some(f) => {
            let index = if let Fault::DataNack { index, .. } = f { *index } else { 0 };
            let index = index.min(UNKNOWN_INDEX as usize - 1) as u16;
            TxReport::failed(native_fault::failure_of(f), stopped_at, index, bus_ns)
        }
    }
}

impl Target for SimBoard {
    type Bus = SimBoard;

    fn bus(&mut self) -> &mut SimBoard {
        self
    }

    fn now_ns(&mut self) -> u64 {
        self.adapter.now().as_nanos() as u64
    }

    fn delay_ns(&mut self, ns: u64) {
        self.adapter.delay(Duration::from_nanos(ns));
    }

    fn set_speed(&mut self, hz: u32) -> Option<u32> {
        let s = BusSpeed::from_hz(hz as u64).ok()?;
        self.adapter.set_speed(s).ok().map(BusSpeed::hz)
    }

    fn recover(&mut self) -> Option<(u8, bool)> {
        self.adapter.recover().ok().map(|r| (r.pulses, r.released))
    }

    fn lines(&mut self) -> Option<(bool, bool)> {
        self.adapter.line_levels().ok().flatten().map(|l| (l.sda, l.scl))
    }

    fn last_report(&mut self) -> Option<TxReport> {
        self.last.take().map(|o| report_of(&o))
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::sim::Bench;
    use buscue_bridge::Status;
    use embedded_hal::i2c::NoAcknowledgeSource;

    fn board() -> SimBoard {
        let bench = Bench::from_str(crate::sim::DEMO_BENCH, "demo").unwrap();
        SimBoard::new(SimAdapter::new(bench, false))
    }

    // The light sensor's ID register reads 0x1C5A little-endian (the demo
    // bench file, adapters/greenhouse.toml).
    #[test]
    fn embedded_hal_calls_reach_the_bench() {
        let mut b = board();
        let mut id = [0u8; 2];
        I2c::<SevenBitAddress>::write_read(&mut b, 0x2B, &[0x00], &mut id).unwrap();
        assert_eq!(id, [0x5A, 0x1C]);
        let r = b.last_report().unwrap();
        assert_eq!(r.status, Status::Ok);
        assert!(r.bus_ns > 0 && r.bus_ns != UNKNOWN_NS);
        let mut v = [0u8; 1];
        I2c::<TenBitAddress>::write_read(&mut b, 0x2A5, &[0x00], &mut v).unwrap();
        assert_eq!(v, [0xF0], "the 10-bit expander's INPUT register resets to 0xF0");
        let e = I2c::<SevenBitAddress>::write(&mut b, 0x13, &[0]).unwrap_err();
        assert_eq!(i2c::Error::kind(&e), ErrorKind::NoAcknowledge(NoAcknowledgeSource::Address));
        assert_eq!(b.last_report().unwrap().status, Status::AddressNack);
        assert_eq!(b.adapter().bus().executions("canopy-light"), Some(1));
    }

    #[test]
    fn data_nack_reports_operation_and_byte() {
        let mut b = board();
        // ID (0x00) of the light sensor is read-only: its data bytes are NACKed.
        let e = I2c::<SevenBitAddress>::write(&mut b, 0x2B, &[0x00, 0x12, 0x34]).unwrap_err();
        assert_eq!(i2c::Error::kind(&e), ErrorKind::NoAcknowledge(NoAcknowledgeSource::Data));
        let r = b.last_report().unwrap();
        assert_eq!((r.status, r.op, r.index), (Status::DataNack, 0, 1));
    }
}
