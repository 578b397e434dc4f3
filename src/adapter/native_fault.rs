//! Our bus [`Fault`]s in the native protocol's terms, and back.
//!
//! Contract:
//! - The codes themselves (`status`, `info`) are defined once, in the
//!   protocol crate (`buscue_bridge::wire::Failure`, the status table of
//!   `adapters/PROTOCOL.md`); this module only maps our model onto them.
//! - [`failure_of`] is the adapter side (the served simulated board
//!   reports its faults with it); [`fault_of`] is the host side (the native
//!   driver rebuilds outcomes with it). Both directions sit here so they
//!   stay each other's inverse; a served fault comes back as itself, except
//!   an adapter failure, whose detail does not cross the wire.

use buscue_bridge::wire::{BusLine, Failure};

use crate::bus::{Direction, Fault, LineFault};

/// How the adapter reports a fault on the wire.
pub fn failure_of(fault: &Fault) -> Failure {
    match fault {
        Fault::AddressNack { direction, .. } => Failure::AddressNack { read: *direction == Direction::Read },
        Fault::DataNack { .. } => Failure::DataNack,
        // Only a kernel adapter reports a NACK it cannot place, and a
        // served board never does: the nearest codes, should one pass.
        Fault::Nack { address: true } => Failure::AddressNack { read: false },
        Fault::Nack { address: false } => Failure::DataNack,
        Fault::ArbitrationLost => Failure::ArbitrationLost,
        Fault::Bus { line } => Failure::BusError(match line {
            LineFault::SdaStuckLow => BusLine::SdaStuckLow,
            LineFault::SclStuckLow => BusLine::SclStuckLow,
            LineFault::MisplacedCondition => BusLine::MisplacedCondition,
        }),
        Fault::StretchTimeout { waited_us } => {
            Failure::StretchTimeout { waited_us: (*waited_us).min(u32::MAX as u64) as u32 }
        }
        Fault::Adapter { .. } => Failure::Other,
    }
}

/// The fault a reported failure stands for, at operation `op` and (for a
/// data NACK) byte `index`. A bus error whose line the adapter cannot name
/// counts as a misplaced condition, the general case.
pub fn fault_of(failure: Failure, op: usize, index: usize) -> Fault {
    match failure {
        Failure::AddressNack { read } => {
            Fault::AddressNack { op, direction: if read { Direction::Read } else { Direction::Write } }
        }
        Failure::DataNack => Fault::DataNack { op, index },
        Failure::ArbitrationLost => Fault::ArbitrationLost,
        Failure::BusError(line) => Fault::Bus {
            line: match line {
                BusLine::SdaStuckLow => LineFault::SdaStuckLow,
                BusLine::SclStuckLow => LineFault::SclStuckLow,
                BusLine::MisplacedCondition | BusLine::Unknown => LineFault::MisplacedCondition,
            },
        },
        Failure::StretchTimeout { waited_us } => Fault::StretchTimeout { waited_us: waited_us as u64 },
        Failure::Overrun => Fault::Adapter { detail: "the adapter's I2C controller overran".into() },
        Failure::Other => Fault::Adapter { detail: "the adapter's I2C controller reported an error".into() },
        Failure::Refused => Fault::Adapter { detail: "the adapter refused the transaction's shape".into() },
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // Every fault the simulator can raise crosses the wire and comes back
    // as itself; an adapter failure comes back as one, with the host's text.
    #[test]
    fn faults_cross_the_wire_and_back() {
        let faults = [
            Fault::AddressNack { op: 1, direction: Direction::Write },
            Fault::AddressNack { op: 0, direction: Direction::Read },
            Fault::DataNack { op: 2, index: 5 },
            Fault::ArbitrationLost,
            Fault::Bus { line: LineFault::SdaStuckLow },
            Fault::Bus { line: LineFault::SclStuckLow },
            Fault::Bus { line: LineFault::MisplacedCondition },
            Fault::StretchTimeout { waited_us: 25_000 },
        ];
        for f in faults {
            let (op, index) = match f {
                Fault::AddressNack { op, .. } => (op, 0),
                Fault::DataNack { op, index } => (op, index),
                _ => (0, 0),
            };
            let (status, info) = failure_of(&f).encode();
            assert_eq!(fault_of(Failure::decode(status, info).unwrap(), op, index), f);
        }
        let back = fault_of(failure_of(&Fault::Adapter { detail: "port gone".into() }), 0, 0);
        assert!(matches!(back, Fault::Adapter { .. }));
        assert_eq!(
            fault_of(Failure::BusError(BusLine::Unknown), 0, 0),
            Fault::Bus { line: LineFault::MisplacedCondition }
        );
        let long = Fault::StretchTimeout { waited_us: u64::MAX };
        assert_eq!(failure_of(&long), Failure::StretchTimeout { waited_us: u32::MAX }, "saturates, never wraps");
    }
}
