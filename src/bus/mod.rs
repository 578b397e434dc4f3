//! The trade's core model: addresses, operations, transactions, outcomes,
//! faults, bus speed, bus-time accounting and the SMBus PEC (CRC-8). Nothing here does I/O; the
//! adapters put these on a bus and the simulator answers them.

pub mod address;
pub mod outcome;
pub mod pec;
pub mod speed;
pub mod timing;
pub mod transaction;

pub use address::{Address, AddressError, Reserved};
pub use outcome::{Fault, FaultClass, LineFault, OpOutcome, Outcome};
pub use speed::{BusSpeed, Mode};
pub use transaction::{Direction, Event, Operation, PhaseTracker, ShapeError, Transaction};
