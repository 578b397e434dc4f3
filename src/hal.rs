//! The embedded-hal 1.0 bridge: [`HalBus`] implements
//! `embedded_hal::i2c::I2c` for 7-bit and 10-bit addresses on top of a
//! [`Session`], so a device driver written for a microcontroller runs
//! unchanged from a PC through any buscue adapter, with every transaction
//! in the frame log like a script's.
//!
//! Contract:
//! - `transaction(address, operations)` becomes exactly one of our
//!   [`Transaction`]s with the operations one-to-one and in order
//!   (embedded-hal 1.0 `I2c::transaction` and our transaction contract
//!   agree: repeated START only between operations of different
//!   direction, NACK on the last byte read). Read buffers are filled from
//!   the outcome. `read`, `write` and `write_read` are the trait's
//!   defaults on top of it.
//! - No retries: a NACK is returned to the driver, which owns its retry
//!   logic. Errors carry our [`Fault`] and report the nearest
//!   [`ErrorKind`] through [`Fault::kind`].
//! - Reserved 7-bit addresses (UM10204 §3.1.12) are refused unless
//!   [`HalBus::allow_reserved`] is set; a zero-length read is refused
//!   (the controller could not NACK its last byte). Both are
//!   [`ErrorKind::Other`].

use std::sync::Arc;
use std::sync::atomic::AtomicBool;

use embedded_hal::i2c::{self, ErrorKind, ErrorType, SevenBitAddress, TenBitAddress};
use thiserror::Error;

use crate::adapter::Adapter;
use crate::bus::{Address, Fault, Operation, Transaction};
use crate::player::Request;
use crate::player::{RunError, Session};

/// An embedded-hal bus error.
#[derive(Debug, Clone, Error)]
pub enum HalError {
    /// The bus or adapter failed the transaction.
    #[error("{0}")]
    Bus(Fault),
    /// The transaction was refused before it reached the bus.
    #[error("{0}")]
    Refused(String),
}

impl i2c::Error for HalError {
    fn kind(&self) -> ErrorKind {
        match self {
            HalError::Bus(f) => f.kind(),
            HalError::Refused(_) => ErrorKind::Other,
        }
    }
}

impl From<RunError> for HalError {
    fn from(e: RunError) -> Self {
        match e {
            RunError::Bus { fault, .. } => HalError::Bus(fault),
            RunError::Adapter(e) => HalError::Bus(Fault::Adapter { detail: e.to_string() }),
            other => HalError::Refused(other.to_string()),
        }
    }
}

/// A host-side I2C bus handle for embedded-hal drivers.
pub struct HalBus {
    session: Session,
    /// Let drivers address reserved 7-bit addresses (general call etc.).
    pub allow_reserved: bool,
}

impl HalBus {
    /// A bus over an adapter, with no frame log.
    pub fn new(adapter: Box<dyn Adapter>) -> Self {
        HalBus::from_session(Session::new(adapter, Arc::new(AtomicBool::new(false))))
    }

    /// A bus over a session: its sinks see every transaction.
    pub fn from_session(session: Session) -> Self {
        HalBus { session, allow_reserved: false }
    }

    pub fn session(&mut self) -> &mut Session {
        &mut self.session
    }

    /// Gives the session back, to finish it (end record, adapter close).
    pub fn into_session(self) -> Session {
        self.session
    }

    fn run(&mut self, address: Address, operations: &mut [i2c::Operation<'_>]) -> Result<(), HalError> {
        let tx = Transaction::new(address, Operation::from_hal(operations));
        let req = Request { allow_reserved: self.allow_reserved, ..Request::default() };
        let outcome = self.session.transact(&tx, &req)?;
        for (o, got) in operations.iter_mut().zip(&outcome.ops) {
            if let i2c::Operation::Read(buf) = o {
                if got.data.len() != buf.len() {
                    return Err(HalError::Bus(Fault::Adapter {
                        detail: format!("asked for {} bytes, the adapter returned {}", buf.len(), got.data.len()),
                    }));
                }
                buf.copy_from_slice(&got.data);
            }
        }
        Ok(())
    }
}

impl ErrorType for HalBus {
    type Error = HalError;
}

impl i2c::I2c<SevenBitAddress> for HalBus {
    fn transaction(&mut self, address: u8, operations: &mut [i2c::Operation<'_>]) -> Result<(), HalError> {
        let a = Address::seven(address as i64).map_err(|e| HalError::Refused(e.to_string()))?;
        self.run(a, operations)
    }
}

impl i2c::I2c<TenBitAddress> for HalBus {
    fn transaction(&mut self, address: u16, operations: &mut [i2c::Operation<'_>]) -> Result<(), HalError> {
        let a = Address::ten(address as i64).map_err(|e| HalError::Refused(e.to_string()))?;
        self.run(a, operations)
    }
}

#[cfg(test)]
mod tests {
    use std::cell::RefCell;
    use std::rc::Rc;

    use embedded_hal::i2c::{Error as _, I2c, NoAcknowledgeSource};

    use super::*;
    use crate::record::{Record, Sink};
    use crate::sim::SimAdapter;

    fn bus() -> HalBus {
        HalBus::new(Box::new(SimAdapter::demo()))
    }

    type Seen = Rc<RefCell<Vec<(Address, Vec<Operation>)>>>;
    struct Count(Seen);
    impl Sink for Count {
        fn record(&mut self, r: &Record) -> std::io::Result<()> {
            if let Record::Frame(f) = r {
                self.0.borrow_mut().push((f.address, f.ops.clone()));
            }
            Ok(())
        }
        fn flush(&mut self) -> std::io::Result<()> {
            Ok(())
        }
    }

    #[test]
    fn write_read_reads_the_climate_sensor_id_and_logs_one_frame() {
        let seen = Rc::new(RefCell::new(Vec::new()));
        let mut b = bus();
        b.session().add_sink(Box::new(Count(seen.clone())));
        let mut id = [0u8; 2];
        b.write_read(0x31u8, &[0x00], &mut id).unwrap();
        assert_eq!(u16::from_be_bytes(id), crate::sim::climate::ID);
        assert_eq!(*seen.borrow(), vec![(Address::Seven(0x31), vec![Operation::Write(vec![0]), Operation::Read(2)])]);
    }

    #[test]
    fn operations_map_one_to_one() {
        let seen = Rc::new(RefCell::new(Vec::new()));
        let mut b = bus();
        b.session().add_sink(Box::new(Count(seen.clone())));
        let (mut a, mut c) = ([0u8; 1], [0u8; 1]);
        let mut ops = [
            i2c::Operation::Write(&[0x00]),
            i2c::Operation::Write(&[]),
            i2c::Operation::Read(&mut a),
            i2c::Operation::Read(&mut c),
        ];
        b.transaction(0x31u8, &mut ops).unwrap();
        let want = vec![Operation::Write(vec![0]), Operation::Write(vec![]), Operation::Read(1), Operation::Read(1)];
        assert_eq!(seen.borrow()[0].1, want);
        assert_eq!(u16::from_be_bytes([a[0], c[0]]), crate::sim::climate::ID);
    }

    #[test]
    fn ten_bit_addresses_reach_the_valve_expander() {
        let mut b = bus();
        let mut input = [0u8; 1];
        I2c::<TenBitAddress>::write_read(&mut b, 0x2A5u16, &[0x00], &mut input).unwrap();
        assert_eq!(input[0], 0xF0, "INPUT register reset value on the demo bench");
    }

    #[test]
    fn faults_map_to_error_kinds() {
        let mut b = bus();
        let e = b.write(0x13u8, &[0x00]).unwrap_err();
        assert_eq!(e.kind(), ErrorKind::NoAcknowledge(NoAcknowledgeSource::Address));
        // CONTROL of the climate sensor is writable, ID is not: the data
        // byte after the pointer is NACKed.
        let e = b.write(0x31u8, &[0x00, 0x12]).unwrap_err();
        assert_eq!(e.kind(), ErrorKind::NoAcknowledge(NoAcknowledgeSource::Data));
        assert_eq!(b.write(0x80u8, &[0]).unwrap_err().kind(), ErrorKind::Other);
        assert_eq!(b.write(0x00u8, &[0x06]).unwrap_err().kind(), ErrorKind::Other, "general call needs allow_reserved");
        assert_eq!(b.read(0x31u8, &mut []).unwrap_err().kind(), ErrorKind::Other);
    }
}
