//! One frame as the wire saw it, in the trade's notation: S, the seven
//! address bits, R/W, A or N, eight data bits per byte, Sr, P
//! (UM10204 §3.1.4–§3.1.11: START, address and direction bit, acknowledge,
//! repeated START, STOP). Built from [`Transaction::events_crossed`], the
//! one description of the wire, so it shows only what crossed the bus: a
//! refused byte is the last before the STOP.

use crate::bus::{Event, Fault, Transaction};
use crate::record::Frame;

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum BitKind {
    /// S, Sr, P.
    Condition,
    /// Address bits.
    Address,
    /// The R/W bit, written `R` or `W`.
    Direction,
    /// Eight data bits.
    Data,
    Ack,
    Nack,
    /// An acknowledge the adapter did not report (a NACK it could not place).
    Unknown,
}

#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Bit {
    pub text: String,
    pub kind: BitKind,
}

fn bit(text: impl Into<String>, kind: BitKind) -> Bit {
    Bit { text: text.into(), kind }
}

fn binary(v: u8, n: u32) -> String {
    (0..n).rev().map(|i| if v >> i & 1 == 1 { '1' } else { '0' }).collect()
}

/// The frame's wire events as symbols, in order.
pub fn sequence(f: &Frame) -> Vec<Bit> {
    let t = Transaction { address: f.address, ops: f.ops.clone() };
    let events = t.events_crossed(&f.outcome);
    let refused = events.len().checked_sub(2).filter(|_| matches!(f.outcome.fault, Some(ref x) if x.is_nack()));
    let unplaced = matches!(f.outcome.fault, Some(Fault::Nack { .. }));
    let mut out = Vec::with_capacity(events.len() * 3);
    let mut prev_addr = false;
    for (i, e) in events.iter().enumerate() {
        // The acknowledge of a byte the controller sent.
        let answer = |ok: bool| {
            if refused == Some(i) && unplaced {
                bit("?", BitKind::Unknown)
            } else if refused == Some(i) || !ok {
                bit("N", BitKind::Nack)
            } else {
                bit("A", BitKind::Ack)
            }
        };
        match *e {
            Event::Start => out.push(bit("S", BitKind::Condition)),
            Event::RepeatedStart => out.push(bit("Sr", BitKind::Condition)),
            Event::Stop => out.push(bit("P", BitKind::Condition)),
            Event::AddressByte(b) => {
                if prev_addr && b & 0xF8 != 0xF0 {
                    out.push(bit(binary(b, 8), BitKind::Address)); // the second byte of a 10-bit address
                } else {
                    out.push(bit(binary(b >> 1, 7), BitKind::Address));
                    out.push(bit(if b & 1 == 1 { "R" } else { "W" }, BitKind::Direction));
                }
                out.push(answer(true));
            }
            Event::WriteByte { op, index, byte } => {
                out.push(bit(binary(byte, 8), BitKind::Data));
                let acked = f.outcome.ops.get(op).and_then(|o| o.acks.get(index)).copied().unwrap_or(true);
                out.push(answer(acked));
            }
            Event::ReadByte { op, index, ack } => {
                let data = f.outcome.ops.get(op).and_then(|o| o.data.get(index)).copied();
                out.push(bit(data.map_or_else(|| "????????".into(), |d| binary(d, 8)), BitKind::Data));
                out.push(if ack { bit("A", BitKind::Ack) } else { bit("N", BitKind::Nack) });
            }
        }
        prev_addr = matches!(e, Event::AddressByte(_));
    }
    out
}

/// The sequence as one line of text, symbols separated by spaces.
pub fn sequence_text(f: &Frame) -> String {
    sequence(f).iter().map(|b| b.text.as_str()).collect::<Vec<_>>().join(" ")
}

#[cfg(test)]
mod tests {
    use std::time::Duration;

    use super::*;
    use crate::bus::{Address, OpOutcome, Operation, Outcome};

    fn frame(ops: Vec<Operation>, outs: Vec<OpOutcome>, fault: Option<Fault>) -> Frame {
        let outcome = Outcome { ops: outs, bus_time: Duration::ZERO, measured: None, fault };
        Frame::single(1, Duration::ZERO, Address::Seven(0x48), ops, outcome)
    }

    // UM10204 §3.1.10 (combined format, figure 13): S, address, W, A,
    // data, A, Sr, address, R, A, data, then the controller's NACK on the
    // last byte read (§3.1.6) and P.
    #[test]
    fn a_write_then_read_shows_the_repeated_start_and_the_closing_nack() {
        let f = frame(
            vec![Operation::Write(vec![0x02]), Operation::Read(2)],
            vec![OpOutcome { acks: vec![true], data: vec![] }, OpOutcome { acks: vec![], data: vec![0x12, 0x80] }],
            None,
        );
        assert_eq!(sequence_text(&f), "S 1001000 W A 00000010 A Sr 1001000 R A 00010010 A 10000000 N P");
    }

    // A data NACK ends the frame at the refused byte: the controller sends
    // STOP (UM10204 §3.1.6, case 5), the bytes after it never cross.
    #[test]
    fn a_data_nack_is_the_last_byte_before_the_stop() {
        let f = frame(
            vec![Operation::Write(vec![0x10, 0xAB, 0xCD])],
            vec![OpOutcome { acks: vec![true, false], data: vec![] }],
            Some(Fault::DataNack { op: 0, index: 1 }),
        );
        assert_eq!(sequence_text(&f), "S 1001000 W A 00010000 A 10101011 N P");
    }

    #[test]
    fn an_address_nack_stops_after_the_address() {
        let f = frame(
            vec![Operation::Write(vec![1])],
            vec![OpOutcome::default()],
            Some(Fault::AddressNack { op: 0, direction: crate::bus::Direction::Write }),
        );
        assert_eq!(sequence_text(&f), "S 1001000 W N P");
    }
}
