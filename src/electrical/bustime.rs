//! Bus time of a transaction shape, as a report.
//!
//! Contract: [`bus_time`] reports what [`crate::bus::timing::breakdown`]
//! models for a transaction at a speed (every byte ACKed, counted reads at
//! their most) and adds nothing of its own to the model; [`shape`] builds
//! the transaction from operation sizes, for callers that have no real
//! address or data (the time does not depend on them).

use serde::Serialize;

use crate::bus::timing::breakdown;
use crate::bus::transaction::MAX_OPERATION_BYTES;
use crate::bus::{Address, BusSpeed, Operation, ShapeError, Transaction};

use super::pullup::ElectricalError;

/// Modelled time on the wire for one transaction.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct BusTimeReport {
    pub speed_hz: u32,
    pub mode_name: &'static str,
    pub address_bits: u8,
    /// The operations: `w2` writes two bytes, `r6` reads six, `rc32+1` is a
    /// counted read of up to 32 bytes plus one trailer byte.
    pub ops: Vec<String>,
    pub total_ns: u64,
    pub conditions_ns: u64,
    pub address_ns: u64,
    pub data_ns: u64,
    pub payload_bytes: u64,
    /// Payload bytes per second over the whole transaction.
    pub payload_bytes_per_s: f64,
    /// Fraction of the time spent on payload data bits.
    pub efficiency: f64,
}

fn label(op: &Operation) -> String {
    match op {
        Operation::Write(b) => format!("w{}", b.len()),
        Operation::Read(n) => format!("r{n}"),
        Operation::ReadCounted { max, trailer } => format!("rc{max}+{trailer}"),
    }
}

/// The bus-time report of `tx` at `speed`.
pub fn bus_time(tx: &Transaction, speed: BusSpeed) -> BusTimeReport {
    let b = breakdown(tx, speed);
    BusTimeReport {
        speed_hz: speed.hz(),
        mode_name: speed.mode().name(),
        address_bits: if tx.address.is_ten_bit() { 10 } else { 7 },
        ops: tx.ops.iter().map(label).collect(),
        total_ns: b.total().as_nanos() as u64,
        conditions_ns: b.conditions_ns,
        address_ns: b.address_ns,
        data_ns: b.data_ns,
        payload_bytes: b.payload_bytes,
        payload_bytes_per_s: b.payload_rate(),
        efficiency: b.efficiency(),
    }
}

/// A write of `n` stand-in bytes as operation `op`; beyond the
/// per-operation limit it is refused here, naming `n`, without allocating
/// whatever a typo asked for.
pub fn stand_in_write(op: usize, n: usize) -> Result<Operation, ElectricalError> {
    if n > MAX_OPERATION_BYTES {
        return Err(ShapeError::TooLong { op, len: n, max: MAX_OPERATION_BYTES }.into());
    }
    Ok(Operation::Write(vec![0; n]))
}

/// Reads an operation list such as `w2,r6` or `w1 r2 w3`.
pub fn parse_ops(text: &str) -> Result<Vec<Operation>, ElectricalError> {
    let bad = || ElectricalError::Ops(text.to_string());
    let ops: Vec<Operation> = text
        .split([',', ' '])
        .filter(|t| !t.is_empty())
        .enumerate()
        .map(|(op, t)| {
            let (kind, n) = t.split_at(t.char_indices().nth(1).map_or(t.len(), |(i, _)| i));
            let n: usize = n.parse().map_err(|_| bad())?;
            match kind {
                "w" | "W" => stand_in_write(op, n),
                "r" | "R" => Ok(Operation::Read(n)),
                _ => Err(bad()),
            }
        })
        .collect::<Result<_, _>>()?;
    if ops.is_empty() { Err(bad()) } else { Ok(ops) }
}

/// A transaction of the given shape to a stand-in address of the given
/// kind, checked against the bus contract (no empty reads, size limits).
pub fn shape(address_bits: u8, ops: Vec<Operation>) -> Result<Transaction, ElectricalError> {
    // 0x08 is the first unreserved 7-bit address (UM10204 §3.1.12); the
    // time does not depend on it.
    let address = if address_bits == 10 { Address::Ten(0x000) } else { Address::Seven(0x08) };
    let tx = Transaction::new(address, ops);
    tx.validate(MAX_OPERATION_BYTES, false)?;
    Ok(tx)
}

#[cfg(test)]
mod tests {
    use super::*;

    // Same figures as bus::timing's own test (arithmetic on its model): a
    // one-byte register read at 1 MHz is 4 bytes × 9 us + START 0.5 +
    // Sr (low 0.5 + tSU;STA 0.5 + tHD;STA 0.5) + STOP (low 0.5 + tSU;STO
    // 0.5 + tBUF 0.5) = 39.5 us.
    #[test]
    fn report_matches_the_timing_model() {
        let tx = shape(7, parse_ops("w1,r1").unwrap()).unwrap();
        let r = bus_time(&tx, BusSpeed::FAST_PLUS);
        assert_eq!(r.total_ns, 39_500);
        assert_eq!((r.conditions_ns, r.address_ns, r.data_ns, r.payload_bytes), (3_500, 18_000, 18_000, 2));
        assert_eq!(r.ops, vec!["w1", "r1"]);
        assert_eq!(r.mode_name, "Fast-mode Plus");
    }

    // UM10204 §3.1.11: a 10-bit write-then-read sends three address bytes
    // (two with R/W = 0, then the first again with R/W = 1).
    #[test]
    fn ten_bit_costs_an_address_byte_more() {
        let seven = bus_time(&shape(7, parse_ops("w2 r6").unwrap()).unwrap(), BusSpeed::FAST);
        let ten = bus_time(&shape(10, parse_ops("w2 r6").unwrap()).unwrap(), BusSpeed::FAST);
        assert_eq!(ten.address_ns, seven.address_ns * 3 / 2);
        assert_eq!(ten.address_bits, 10);
        assert!(ten.payload_bytes_per_s < seven.payload_bytes_per_s);
    }

    #[test]
    fn bad_shapes() {
        assert_eq!(parse_ops("w2,x3"), Err(ElectricalError::Ops("w2,x3".into())));
        assert!(parse_ops("").is_err());
        assert!(parse_ops("r").is_err());
        assert!(parse_ops("r-1").is_err());
        assert!(parse_ops("é2").is_err());
        assert!(matches!(shape(7, parse_ops("r0").unwrap()), Err(ElectricalError::Shape(_))));
        // Too long: the error names the size given, not a stand-in's.
        let e = parse_ops("r1,w99999999999").unwrap_err();
        assert_eq!(e.to_string(), "operation 1 moves 99999999999 bytes; at most 65535 are allowed per operation");
        let e = shape(7, parse_ops("r99999999999").unwrap()).unwrap_err();
        assert_eq!(e.to_string(), "operation 0 moves 99999999999 bytes; at most 65535 are allowed per operation");
        assert!(parse_ops("w65535").is_ok());
    }
}
