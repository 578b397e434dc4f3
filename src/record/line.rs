//! A record as one line of JSON: the form a trace file and the `--json`
//! stream hold.
//!
//! Contract: [`write_line`] appends exactly the bytes
//! `serde_json::to_writer(out, record)` followed by a newline would, for
//! every record. The frame record — one per transaction, on the path
//! every run takes — is encoded here by hand, with its keys as constant
//! bytes: serde_json scans every key and string for characters to escape
//! and goes through a formatter per value, which cost more than the rest
//! of the recording path together. Every other record, and the rare parts
//! of a frame (a fault, a PEC mark), go through serde_json itself, so the
//! two cannot drift where it matters least to be fast. The property test
//! `frame_lines_are_the_bytes_serde_writes` (tests/traces.rs) checks whole
//! frames against serde_json byte for byte.

use std::cell::RefCell;

use crate::ascii::EscapeMemo;
use crate::bus::{Address, OpOutcome, Operation};

use super::{Frame, Origin, Record};

/// Appends `record` as one JSON line, newline included.
pub fn write_line(record: &Record, out: &mut Vec<u8>) {
    write_line_with(record, out, &mut EscapeMemo::default());
}

/// [`write_line`] for a writer of many lines: `files` keeps the script
/// file name as last written, so a run's frames escape it once.
pub fn write_line_with(record: &Record, out: &mut Vec<u8>, files: &mut EscapeMemo) {
    match record {
        Record::Frame(f) => frame(f, out, files),
        // Writing to a Vec cannot fail, and every record type serializes
        // (no maps with non-string keys, no failing Serialize impls).
        other => serde_with(other, out),
    }
    out.push(b'\n');
}

/// Hands `address`'s display text ([`Address::text`]) to `use_it`, from a
/// one-entry memo per thread: a run's frames name the same target one
/// after another, and spelling it out and checking it as text cost more
/// than the rest of the address's share of a frame line and record
/// together. A different address replaces the memo (no allocation once
/// the memo's string has room for the longest spelling).
pub fn with_address_text<R>(address: Address, use_it: impl FnOnce(&str) -> R) -> R {
    thread_local! {
        static LAST: RefCell<(Option<Address>, String)> = const { RefCell::new((None, String::new())) };
    }
    LAST.with(|memo| {
        let mut memo = memo.borrow_mut();
        if memo.0 != Some(address) {
            memo.1.clear();
            memo.1.push_str(address.text().as_str());
            memo.0 = Some(address);
        }
        use_it(&memo.1)
    })
}

fn serde_with<T: serde::Serialize + ?Sized>(value: &T, out: &mut Vec<u8>) {
    let _ = serde_json::to_writer(out, value);
}

fn frame(f: &Frame, out: &mut Vec<u8>, files: &mut EscapeMemo) {
    out.extend_from_slice(b"{\"kind\":\"frame\",\"seq\":");
    number(f.seq, out);
    out.extend_from_slice(b",\"t_ns\":");
    number(f.t.as_nanos() as u64, out);
    out.extend_from_slice(b",\"address\":\"");
    with_address_text(f.address, |a| out.extend_from_slice(a.as_bytes()));
    out.extend_from_slice(b"\",\"ops\":[");
    for (i, op) in f.ops.iter().enumerate() {
        if i > 0 {
            out.push(b',');
        }
        operation(op, out);
    }
    out.extend_from_slice(b"],\"outcome\":{\"ops\":[");
    for (i, oo) in f.outcome.ops.iter().enumerate() {
        if i > 0 {
            out.push(b',');
        }
        op_outcome(oo, out);
    }
    out.extend_from_slice(b"],\"bus_ns\":");
    number(f.outcome.bus_time.as_nanos() as u64, out);
    if let Some(m) = f.outcome.measured {
        out.extend_from_slice(b",\"measured_ns\":");
        number(m.as_nanos() as u64, out);
    }
    if let Some(fault) = &f.outcome.fault {
        out.extend_from_slice(b",\"fault\":");
        serde_with(fault, out);
    }
    out.extend_from_slice(b"},\"attempt\":");
    number(f.attempt as u64, out);
    out.extend_from_slice(b",\"attempts\":");
    number(f.attempts as u64, out);
    if let Some(p) = &f.purpose {
        out.extend_from_slice(b",\"purpose\":");
        string(p.as_str(), out);
    }
    if let Some(Origin { file, line }) = &f.origin {
        out.extend_from_slice(b",\"origin\":{\"file\":");
        out.extend_from_slice(files.get(file, push_string).as_bytes());
        out.extend_from_slice(b",\"line\":");
        number(*line as u64, out);
        out.push(b'}');
    }
    if let Some(d) = &f.decoded {
        out.extend_from_slice(b",\"decoded\":");
        string(d, out);
    }
    if !f.values.is_empty() {
        out.extend_from_slice(b",\"values\":[");
        for (i, v) in f.values.iter().enumerate() {
            if i > 0 {
                out.push(b',');
            }
            out.extend_from_slice(b"{\"name\":");
            string(&v.name, out);
            out.extend_from_slice(b",\"raw\":");
            number(v.raw as u64, out);
            out.extend_from_slice(b",\"shown\":");
            string(&v.shown, out);
            out.push(b'}');
        }
        out.push(b']');
    }
    if let Some(pec) = &f.pec {
        out.extend_from_slice(b",\"pec\":");
        serde_with(pec, out);
    }
    out.push(b'}');
}

fn operation(op: &Operation, out: &mut Vec<u8>) {
    match op {
        Operation::Write(bytes) => {
            out.extend_from_slice(b"{\"write\":");
            byte_list(bytes, out);
            out.push(b'}');
        }
        Operation::Read(n) => {
            out.extend_from_slice(b"{\"read\":");
            number(*n as u64, out);
            out.push(b'}');
        }
        Operation::ReadCounted { max, trailer } => {
            out.extend_from_slice(b"{\"read-counted\":{\"max\":");
            number(*max as u64, out);
            out.extend_from_slice(b",\"trailer\":");
            number(*trailer as u64, out);
            out.extend_from_slice(b"}}");
        }
    }
}

fn op_outcome(oo: &OpOutcome, out: &mut Vec<u8>) {
    out.push(b'{');
    if !oo.acks.is_empty() {
        out.extend_from_slice(b"\"acks\":[");
        for (i, &ack) in oo.acks.iter().enumerate() {
            if i > 0 {
                out.push(b',');
            }
            out.extend_from_slice(if ack { b"true" } else { b"false" });
        }
        out.push(b']');
    }
    if !oo.data.is_empty() {
        if !oo.acks.is_empty() {
            out.push(b',');
        }
        out.extend_from_slice(b"\"data\":");
        byte_list(&oo.data, out);
    }
    out.push(b'}');
}

fn byte_list(bytes: &[u8], out: &mut Vec<u8>) {
    out.push(b'[');
    for (i, &b) in bytes.iter().enumerate() {
        if i > 0 {
            out.push(b',');
        }
        number(b as u64, out);
    }
    out.push(b']');
}

fn number(n: u64, out: &mut Vec<u8>) {
    // Most numbers of a frame are bytes, counts and attempt numbers: the
    // ones below 100 skip the general formatter.
    match n {
        0..=9 => out.push(b'0' + n as u8),
        10..=99 => out.extend_from_slice(&[b'0' + (n / 10) as u8, b'0' + (n % 10) as u8]),
        _ => out.extend_from_slice(itoa::Buffer::new().format(n).as_bytes()),
    }
}

/// A JSON string as serde_json writes one: `"` and `\` escaped, the
/// controls below 0x20 as `\b \t \n \f \r` or `\u00xx` (lower-case hex),
/// everything else (DEL, non-ASCII) as it is.
fn string(s: &str, out: &mut Vec<u8>) {
    out.push(b'"');
    let mut rest = s.as_bytes();
    // Runs of bytes that need no escape are copied whole.
    while let Some(i) = rest.iter().position(|&b| ESCAPED[b as usize]) {
        out.extend_from_slice(&rest[..i]);
        let b = rest[i];
        match b {
            b'"' => out.extend_from_slice(b"\\\""),
            b'\\' => out.extend_from_slice(b"\\\\"),
            0x08 => out.extend_from_slice(b"\\b"),
            b'\t' => out.extend_from_slice(b"\\t"),
            b'\n' => out.extend_from_slice(b"\\n"),
            0x0C => out.extend_from_slice(b"\\f"),
            b'\r' => out.extend_from_slice(b"\\r"),
            _ => out.extend_from_slice(&[b'\\', b'u', b'0', b'0', HEX[(b >> 4) as usize], HEX[(b & 0xF) as usize]]),
        }
        rest = &rest[i + 1..];
    }
    out.extend_from_slice(rest);
    out.push(b'"');
}

/// The bytes a JSON string cannot hold as they are (RFC 8259 section 7).
const ESCAPED: [bool; 256] = {
    let mut t = [false; 256];
    let mut b = 0;
    while b < 0x20 {
        t[b] = true;
        b += 1;
    }
    t[b'"' as usize] = true;
    t[b'\\' as usize] = true;
    t
};

const HEX: [u8; 16] = *b"0123456789abcdef";

/// [`string`] into a `String` (what an [`EscapeMemo`] keeps).
fn push_string(s: &str, out: &mut String) {
    let mut bytes = Vec::with_capacity(s.len() + 2);
    string(s, &mut bytes);
    // JSON escaping keeps valid UTF-8 valid (it only adds ASCII).
    out.push_str(&String::from_utf8_lossy(&bytes));
}

#[cfg(test)]
mod tests {
    use std::time::Duration;

    use super::*;
    use crate::record::{Level, Stats};

    fn serde_line(r: &Record) -> Vec<u8> {
        let mut v = serde_json::to_vec(r).unwrap();
        v.push(b'\n');
        v
    }

    // The frame encoder against serde, byte for byte, over random frames:
    // tests/traces.rs (`frame_lines_are_the_bytes_serde_writes`).

    #[test]
    fn every_character_below_0x80_escapes_as_serde_does() {
        let all: String = (0u8..0x80).map(char::from).collect();
        let mut mine = Vec::new();
        string(&all, &mut mine);
        assert_eq!(mine, serde_json::to_vec(&all).unwrap());
        // RFC 8259 section 7: quotation mark, reverse solidus and the
        // controls U+0000-U+001F must be escaped; DEL need not be.
        let text = String::from_utf8(mine).unwrap();
        assert!(text.contains(r#"\u0000"#) && text.contains(r#"\u001f"#) && text.contains(r#"\""#));
        assert!(text.contains('\u{7f}'));
    }

    #[test]
    fn other_records_go_through_serde() {
        let records = [
            Record::Log {
                t: Duration::from_nanos(5),
                level: Level::Warn,
                text: "a\rb".into(),
                origin: Some(Origin { file: "x.lua".into(), line: 2 }),
            },
            Record::Step { t: Duration::ZERO, name: "s".into(), origin: None },
            Record::End {
                t: Duration::from_nanos(9),
                stats: Stats::default(),
                exit: 3,
                error: Some("e".into()),
                link: Some(crate::record::LinkReport { rto: Duration::from_micros(2500), ..Default::default() }),
            },
        ];
        for r in &records {
            let mut v = Vec::new();
            write_line(r, &mut v);
            assert_eq!(v, serde_line(r));
        }
    }

    // The memo answers for the address asked about, never the one before:
    // alternating targets, 7- and 10-bit, and a 10-bit address whose low
    // byte equals a 7-bit one.
    #[test]
    fn address_text_memo_follows_the_address() {
        use crate::bus::Address;
        let addresses = [
            Address::Seven(0x20),
            Address::Seven(0x20),
            Address::Ten(0x20),
            Address::Seven(0x7F),
            Address::Ten(0x3FF),
            Address::Seven(0x20),
        ];
        for a in addresses {
            assert_eq!(super::with_address_text(a, str::to_string), a.text().as_str());
        }
    }
}
