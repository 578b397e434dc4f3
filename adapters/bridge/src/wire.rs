//! Frame layout and message bodies of the native protocol, shared by the
//! adapter ([`crate::bridge`]) and the host driver. `adapters/PROTOCOL.md`
//! is the normative description; this module is its code.
//!
//! A frame, before COBS: `version u8 | kind u8 | seq u16 | session u16 |
//! body | crc u32`, little-endian, the CRC-32/ISO-HDLC of everything before
//! it. Sizes and limits below are protocol constants of version 1.

use crate::cobs;
use crate::crc::{Crc32, crc32};

/// Protocol version this crate speaks.
pub const VERSION: u8 = 1;
/// Header bytes before the body.
pub const HEADER_LEN: usize = 6;
/// CRC bytes after the body.
pub const CRC_LEN: usize = 4;
/// Bytes of one transaction's result header in a `RUN` reply.
pub const TX_REPORT_LEN: usize = 16;
/// Marks a 10-bit address in a request's address field.
pub const TEN_BIT_FLAG: u16 = 0x8000;
/// Marks a read in an operation's length field.
pub const READ_FLAG: u16 = 0x8000;
/// Value of `op`/`index` when the adapter cannot tell.
pub const UNKNOWN_OP: u8 = 0xFF;
pub const UNKNOWN_INDEX: u16 = 0xFFFF;
/// Value of `bus_ns` when the adapter does not model bus time.
pub const UNKNOWN_NS: u32 = 0xFFFF_FFFF;

/// Frame kinds. Requests go host to adapter; a reply's kind is its
/// request's kind with bit 7 set; 0xC0.. are adapter notices.
pub mod kind {
    pub const HELLO: u8 = 0x01;
    pub const RUN: u8 = 0x02;
    pub const SPEED: u8 = 0x03;
    pub const RECOVER: u8 = 0x04;
    pub const LINES: u8 = 0x05;
    pub const DELAY: u8 = 0x06;
    /// `RUN` whose reply carries short results ([`super::TxReport::write_short`]);
    /// only to an adapter with [`super::flag::SHORT`].
    pub const RUN_SHORT: u8 = 0x07;
    pub const REPLY: u8 = 0x80;
    pub const BOOT: u8 = 0xC0;
    pub const REFUSED: u8 = 0xC1;
    pub const GAP: u8 = 0xC2;
}

/// Why the adapter refused a frame (`REFUSED` body byte 0).
pub mod refusal {
    pub const VERSION: u8 = 1;
    pub const SESSION: u8 = 2;
    pub const MALFORMED: u8 = 3;
    pub const TOO_LARGE: u8 = 4;
    pub const UNKNOWN_KIND: u8 = 5;
}

/// Capability flag bits.
pub mod flag {
    pub const TEN_BIT: u8 = 1 << 0;
    pub const LINE_READBACK: u8 = 1 << 1;
    pub const RECOVERY: u8 = 1 << 2;
    /// Results carry the exact failing operation and byte, and modelled
    /// bus time (the board has a side channel beyond embedded-hal).
    pub const PRECISE: u8 = 1 << 3;
    /// The adapter keeps requests that arrive ahead of a missing one (up
    /// to its window) and runs them once the gap fills, so the host
    /// re-sends only what is missing (selective repeat); its `GAP`
    /// notices then carry a third byte saying whether the request was kept.
    pub const REORDER: u8 = 1 << 4;
    /// The adapter answers `RUN_SHORT`: a successful transaction's result
    /// is its status byte and two varint times, not the 16-byte header,
    /// so a reply of register reads is about half as long on the wire.
    pub const SHORT: u8 = 1 << 5;
}

/// Bytes of a varint of a `u32`, at most.
pub const VARINT_U32_MAX: usize = 5;

/// A frame header.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Header {
    pub version: u8,
    pub kind: u8,
    pub seq: u16,
    pub session: u16,
}

/// Why a decoded frame is not a frame.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum FrameError {
    TooShort,
    BadCrc,
}

/// Checks the CRC and splits a decoded frame into header and body.
pub fn parse_frame(frame: &[u8]) -> Result<(Header, &[u8]), FrameError> {
    if frame.len() < HEADER_LEN + CRC_LEN {
        return Err(FrameError::TooShort);
    }
    let (data, tail) = frame.split_at(frame.len() - CRC_LEN);
    let want = u32::from_le_bytes([tail[0], tail[1], tail[2], tail[3]]);
    if crc32(data) != want {
        return Err(FrameError::BadCrc);
    }
    let h = Header {
        version: data[0],
        kind: data[1],
        seq: u16::from_le_bytes([data[2], data[3]]),
        session: u16::from_le_bytes([data[4], data[5]]),
    };
    Ok((h, &data[HEADER_LEN..]))
}

/// Writes a whole frame to a link: header, body, CRC, COBS, delimiter.
/// `emit` receives the encoded bytes in pieces.
pub fn emit_frame<E, F: FnMut(&[u8]) -> Result<(), E>>(h: Header, body: &[u8], mut emit: F) -> Result<(), E> {
    let mut head = [0u8; HEADER_LEN];
    head[0] = h.version;
    head[1] = h.kind;
    head[2..4].copy_from_slice(&h.seq.to_le_bytes());
    head[4..6].copy_from_slice(&h.session.to_le_bytes());
    // COBS works on the frame as one run of bytes; header, body and CRC are
    // streamed through the encoder's one-block window, so no full-frame
    // copy is needed.
    let mut crc = Crc32::new();
    crc.update(&head);
    crc.update(body);
    let crc = crc.finish().to_le_bytes();
    let mut enc = cobs::StreamEncoder::new();
    for &b in head.iter().chain(body).chain(crc.iter()) {
        enc.push(b, &mut emit)?;
    }
    enc.finish(&mut emit)?;
    emit(&[0])
}

/// Little-endian writer over a byte slice; writes past the end are
/// counted, not performed, so one check at the end ([`Writer::ok`]) covers
/// a whole message.
pub struct Writer<'a> {
    buf: &'a mut [u8],
    pos: usize,
    overrun: bool,
}

impl<'a> Writer<'a> {
    pub fn new(buf: &'a mut [u8]) -> Self {
        Writer { buf, pos: 0, overrun: false }
    }
    pub fn bytes(&mut self, b: &[u8]) {
        match self.buf.get_mut(self.pos..self.pos + b.len()) {
            Some(d) => d.copy_from_slice(b),
            None => self.overrun = true,
        }
        self.pos += b.len();
    }
    pub fn u8(&mut self, v: u8) {
        self.bytes(&[v]);
    }
    pub fn u16(&mut self, v: u16) {
        self.bytes(&v.to_le_bytes());
    }
    pub fn u32(&mut self, v: u32) {
        self.bytes(&v.to_le_bytes());
    }
    pub fn u64(&mut self, v: u64) {
        self.bytes(&v.to_le_bytes());
    }
    /// An unsigned LEB128 varint: seven bits a byte, low bits first, bit
    /// 7 set on every byte but the last.
    pub fn varint(&mut self, mut v: u32) {
        while v >= 0x80 {
            self.u8(v as u8 | 0x80);
            v >>= 7;
        }
        self.u8(v as u8);
    }
    pub fn len(&self) -> usize {
        self.pos
    }
    pub fn is_empty(&self) -> bool {
        self.pos == 0
    }
    /// The bytes written, or `None` if the message did not fit.
    pub fn ok(self) -> Option<usize> {
        (!self.overrun).then_some(self.pos)
    }
}

/// Little-endian reader; every getter returns `None` past the end, so a
/// short or malformed body is an error, never a panic.
pub struct Reader<'a> {
    buf: &'a [u8],
    pos: usize,
}

impl<'a> Reader<'a> {
    pub fn new(buf: &'a [u8]) -> Self {
        Reader { buf, pos: 0 }
    }
    pub fn bytes(&mut self, n: usize) -> Option<&'a [u8]> {
        let s = self.buf.get(self.pos..self.pos.checked_add(n)?)?;
        self.pos += n;
        Some(s)
    }
    pub fn u8(&mut self) -> Option<u8> {
        self.bytes(1).map(|b| b[0])
    }
    pub fn u16(&mut self) -> Option<u16> {
        self.bytes(2).map(|b| u16::from_le_bytes([b[0], b[1]]))
    }
    pub fn u32(&mut self) -> Option<u32> {
        self.bytes(4).map(|b| u32::from_le_bytes([b[0], b[1], b[2], b[3]]))
    }
    pub fn u64(&mut self) -> Option<u64> {
        let b = self.bytes(8)?;
        let mut a = [0u8; 8];
        a.copy_from_slice(b);
        Some(u64::from_le_bytes(a))
    }
    /// A varint of a `u32` ([`Writer::varint`]); `None` when it is cut
    /// off, longer than five bytes, or past `u32::MAX`.
    pub fn varint(&mut self) -> Option<u32> {
        let mut v = 0u64;
        for i in 0..VARINT_U32_MAX {
            let b = self.u8()?;
            v |= u64::from(b & 0x7F) << (7 * i);
            if b & 0x80 == 0 {
                return u32::try_from(v).ok();
            }
        }
        None
    }
    pub fn position(&self) -> usize {
        self.pos
    }
    pub fn remaining(&self) -> usize {
        self.buf.len() - self.pos
    }
}

/// What an adapter can do, sent in the `HELLO` reply.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Caps {
    /// Largest frame (before COBS, header and CRC included) either side
    /// may send.
    pub max_frame: u16,
    pub max_bytes_per_op: u16,
    pub max_ops_per_tx: u8,
    pub max_tx_per_request: u8,
    /// Requests the host may have in flight.
    pub window: u8,
    pub flags: u8,
    pub min_speed_hz: u32,
    pub max_speed_hz: u32,
    pub speed_hz: u32,
    pub stretch_timeout_us: u32,
}

/// Encoded size of [`Caps`].
pub const CAPS_LEN: usize = 28;

impl Caps {
    pub fn write(&self, w: &mut Writer<'_>) {
        w.u16(self.max_frame);
        w.u16(self.max_bytes_per_op);
        w.u8(self.max_ops_per_tx);
        w.u8(self.max_tx_per_request);
        w.u8(self.window);
        w.u8(self.flags);
        w.u32(self.min_speed_hz);
        w.u32(self.max_speed_hz);
        w.u32(self.speed_hz);
        w.u32(self.stretch_timeout_us);
        w.u32(0); // reserved, zero in version 1
    }

    pub fn read(r: &mut Reader<'_>) -> Option<Caps> {
        let c = Caps {
            max_frame: r.u16()?,
            max_bytes_per_op: r.u16()?,
            max_ops_per_tx: r.u8()?,
            max_tx_per_request: r.u8()?,
            window: r.u8()?,
            flags: r.u8()?,
            min_speed_hz: r.u32()?,
            max_speed_hz: r.u32()?,
            speed_hz: r.u32()?,
            stretch_timeout_us: r.u32()?,
        };
        r.u32()?;
        Some(c)
    }

    pub fn has(&self, f: u8) -> bool {
        self.flags & f != 0
    }
}

/// Result code of one transaction.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[repr(u8)]
pub enum Status {
    Ok = 0,
    /// `info` bit 0: the phase was a read.
    AddressNack = 1,
    DataNack = 2,
    ArbitrationLost = 3,
    /// `info`: 1 SDA stuck low, 2 SCL stuck low, 3 misplaced START/STOP,
    /// 0 not known.
    BusError = 4,
    /// `info`: microseconds waited.
    StretchTimeout = 5,
    Overrun = 6,
    /// The I2C peripheral failed in a way embedded-hal calls `Other`.
    Other = 7,
    /// The adapter refused the transaction's shape (too long, 10-bit not
    /// supported, too many operations); nothing reached the bus.
    Refused = 8,
}

impl Status {
    /// Every status, so decoding reads the codes off the enum instead of
    /// writing them a second time.
    pub const ALL: [Status; 9] = [
        Status::Ok,
        Status::AddressNack,
        Status::DataNack,
        Status::ArbitrationLost,
        Status::BusError,
        Status::StretchTimeout,
        Status::Overrun,
        Status::Other,
        Status::Refused,
    ];

    pub fn from_u8(v: u8) -> Option<Status> {
        Status::ALL.into_iter().find(|s| *s as u8 == v)
    }
}

/// The line condition a `BUS_ERROR` names in its `info`.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[repr(u32)]
pub enum BusLine {
    /// The adapter cannot tell (also what any code this version does not
    /// define reads as).
    Unknown = 0,
    SdaStuckLow = 1,
    SclStuckLow = 2,
    /// A START or STOP condition where none belongs.
    MisplacedCondition = 3,
}

impl BusLine {
    const ALL: [BusLine; 4] =
        [BusLine::Unknown, BusLine::SdaStuckLow, BusLine::SclStuckLow, BusLine::MisplacedCondition];

    pub fn from_info(info: u32) -> BusLine {
        BusLine::ALL.into_iter().find(|l| *l as u32 == info).unwrap_or(BusLine::Unknown)
    }
}

/// `info` bit of an `ADDRESS_NACK`: the NACKed address phase was a read.
pub const ADDRESS_NACK_READ: u32 = 1 << 0;

/// How a transaction failed: a result's `status` and `info` read together.
/// The one definition of the fault codes; the adapter encodes with
/// [`Failure::encode`] and the host decodes with [`Failure::decode`].
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Failure {
    /// `read`: the NACKed address phase was a read.
    AddressNack {
        read: bool,
    },
    /// `op` and `index` of the report locate the byte.
    DataNack,
    ArbitrationLost,
    BusError(BusLine),
    StretchTimeout {
        waited_us: u32,
    },
    Overrun,
    Other,
    Refused,
}

impl Failure {
    /// The `status` and `info` fields of a result.
    pub fn encode(self) -> (Status, u32) {
        match self {
            Failure::AddressNack { read } => (Status::AddressNack, if read { ADDRESS_NACK_READ } else { 0 }),
            Failure::DataNack => (Status::DataNack, 0),
            Failure::ArbitrationLost => (Status::ArbitrationLost, 0),
            Failure::BusError(line) => (Status::BusError, line as u32),
            Failure::StretchTimeout { waited_us } => (Status::StretchTimeout, waited_us),
            Failure::Overrun => (Status::Overrun, 0),
            Failure::Other => (Status::Other, 0),
            Failure::Refused => (Status::Refused, 0),
        }
    }

    /// The failure a result's `status` and `info` say; `None` for `OK`.
    /// Info bits a status does not define are ignored.
    pub fn decode(status: Status, info: u32) -> Option<Failure> {
        Some(match status {
            Status::Ok => return None,
            Status::AddressNack => Failure::AddressNack { read: info & ADDRESS_NACK_READ != 0 },
            Status::DataNack => Failure::DataNack,
            Status::ArbitrationLost => Failure::ArbitrationLost,
            Status::BusError => Failure::BusError(BusLine::from_info(info)),
            Status::StretchTimeout => Failure::StretchTimeout { waited_us: info },
            Status::Overrun => Failure::Overrun,
            Status::Other => Failure::Other,
            Status::Refused => Failure::Refused,
        })
    }
}

/// Result header of one transaction in a `RUN` reply.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct TxReport {
    pub status: Status,
    /// Operation where the transaction stopped (meaningless for `Ok`).
    pub op: u8,
    /// Byte within `op` that was NACKed (data NACK) or reached.
    pub index: u16,
    pub info: u32,
    /// Modelled time on the wire, or [`UNKNOWN_NS`].
    pub bus_ns: u32,
    /// Time the adapter measured around the transaction.
    pub measured_ns: u32,
}

impl TxReport {
    pub const OK: TxReport =
        TxReport { status: Status::Ok, op: 0, index: 0, info: 0, bus_ns: UNKNOWN_NS, measured_ns: 0 };

    pub fn write(&self, out: &mut [u8; TX_REPORT_LEN]) {
        let mut w = Writer::new(out);
        w.u8(self.status as u8);
        w.u8(self.op);
        w.u16(self.index);
        w.u32(self.info);
        w.u32(self.bus_ns);
        w.u32(self.measured_ns);
    }

    /// A failed transaction's report: `op` and `index` locate the failure
    /// ([`UNKNOWN_OP`] / [`UNKNOWN_INDEX`] when the adapter cannot tell).
    pub fn failed(failure: Failure, op: u8, index: u16, bus_ns: u32) -> TxReport {
        let (status, info) = failure.encode();
        TxReport { status, op, index, info, bus_ns, measured_ns: 0 }
    }

    /// How the transaction failed; `None` if it did not.
    pub fn failure(&self) -> Option<Failure> {
        Failure::decode(self.status, self.info)
    }

    /// The short form of a `RUN_SHORT` reply: a successful transaction
    /// is `status` (0), then `bus_ns` and `measured_ns` as varints; any
    /// other status is the full 16-byte header. Returns the bytes
    /// written, at most [`TX_REPORT_LEN`].
    pub fn write_short(&self, out: &mut [u8; TX_REPORT_LEN]) -> usize {
        if self.status != Status::Ok {
            self.write(out);
            return TX_REPORT_LEN;
        }
        let mut w = Writer::new(out);
        w.u8(Status::Ok as u8);
        w.varint(self.bus_ns);
        w.varint(self.measured_ns);
        w.len()
    }

    /// Reads a result written by [`TxReport::write_short`].
    pub fn read_short(r: &mut Reader<'_>) -> Option<TxReport> {
        let status = Status::from_u8(r.u8()?)?;
        if status != Status::Ok {
            return Self::read_after_status(status, r);
        }
        Some(TxReport { bus_ns: r.varint()?, measured_ns: r.varint()?, ..TxReport::OK })
    }

    pub fn read(r: &mut Reader<'_>) -> Option<TxReport> {
        let status = Status::from_u8(r.u8()?)?;
        Self::read_after_status(status, r)
    }

    /// The full header's fields after its status byte.
    fn read_after_status(status: Status, r: &mut Reader<'_>) -> Option<TxReport> {
        Some(TxReport { status, op: r.u8()?, index: r.u16()?, info: r.u32()?, bus_ns: r.u32()?, measured_ns: r.u32()? })
    }

    /// Whether the read data of operation `op` is in the reply: all reads
    /// on success; on failure every read before the stopping operation,
    /// and none when that operation is not known.
    pub fn has_data_of(&self, op: usize) -> bool {
        self.status == Status::Ok || (self.op != UNKNOWN_OP && op < self.op as usize)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn frame_roundtrip_and_crc_guard() {
        let h = Header { version: VERSION, kind: kind::RUN, seq: 0x1234, session: 0xBEEF };
        let body = [0u8, 1, 2, 0, 0xFF];
        let mut wire = [0u8; 64];
        let mut n = 0;
        emit_frame(h, &body, |p: &[u8]| {
            wire[n..n + p.len()].copy_from_slice(p);
            n += p.len();
            Ok::<(), ()>(())
        })
        .unwrap();
        assert_eq!(wire[n - 1], 0, "ends with the delimiter");
        assert!(!wire[..n - 1].contains(&0));
        let mut d = cobs::Decoder::<64>::new();
        let mut got = None;
        for &b in &wire[..n] {
            if let Some(r) = d.push(b) {
                let f = r.unwrap();
                let (hh, bb) = parse_frame(f).unwrap();
                assert_eq!(hh, h);
                assert_eq!(bb, body);
                got = Some(f.len());
            }
        }
        assert_eq!(got, Some(HEADER_LEN + body.len() + CRC_LEN));
        let mut frame = [VERSION, kind::RUN, 0, 0, 0, 0, 0, 0, 0, 0];
        let c = crc32(&frame[..6]).to_le_bytes();
        frame[6..].copy_from_slice(&c);
        assert!(parse_frame(&frame).is_ok());
        frame[1] ^= 0x10;
        assert_eq!(parse_frame(&frame), Err(FrameError::BadCrc));
        assert_eq!(parse_frame(&frame[..5]), Err(FrameError::TooShort));
    }

    // The worked examples of adapters/PROTOCOL.md ("A frame on the wire").
    #[test]
    fn protocol_document_examples() {
        let mut wire = [0u8; 32];
        let mut n = 0;
        let mut emit = |p: &[u8]| {
            wire[n..n + p.len()].copy_from_slice(p);
            n += p.len();
            Ok::<(), ()>(())
        };
        emit_frame(Header { version: 1, kind: kind::HELLO, seq: 0x0100, session: 0 }, &[], &mut emit).unwrap();
        assert_eq!(&wire[..n], &[0x03, 0x01, 0x01, 0x02, 0x01, 0x01, 0x05, 0x81, 0x31, 0x3C, 0x46, 0x00]);
        let mut wire = [0u8; 32];
        let mut n = 0;
        let body = [0x01, 0x2B, 0x00, 0x02, 0x01, 0x00, 0x02, 0x02, 0x80];
        let h = Header { version: 1, kind: kind::RUN, seq: 0x0101, session: 0x3C5A };
        emit_frame(h, &body, |p: &[u8]| {
            wire[n..n + p.len()].copy_from_slice(p);
            n += p.len();
            Ok::<(), ()>(())
        })
        .unwrap();
        // CRC-32 of the 15 raw bytes 3E6EB96A, sent low byte first; checked
        // with Python's zlib.crc32, an implementation independent of ours.
        let want = [
            0x09, 0x01, 0x02, 0x01, 0x01, 0x5A, 0x3C, 0x01, 0x2B, 0x03, 0x02, 0x01, 0x08, 0x02, 0x02, 0x80, 0x6A, 0xB9,
            0x6E, 0x3E, 0x00,
        ];
        assert_eq!(&wire[..n], &want);
    }

    // Every fault kind, with each info value the status table of
    // adapters/PROTOCOL.md defines, encodes and decodes back.
    #[test]
    fn failures_roundtrip_through_status_and_info() {
        let all = [
            Failure::AddressNack { read: false },
            Failure::AddressNack { read: true },
            Failure::DataNack,
            Failure::ArbitrationLost,
            Failure::BusError(BusLine::Unknown),
            Failure::BusError(BusLine::SdaStuckLow),
            Failure::BusError(BusLine::SclStuckLow),
            Failure::BusError(BusLine::MisplacedCondition),
            Failure::StretchTimeout { waited_us: 0 },
            Failure::StretchTimeout { waited_us: u32::MAX },
            Failure::Overrun,
            Failure::Other,
            Failure::Refused,
        ];
        for f in all {
            let (status, info) = f.encode();
            assert_ne!(status, Status::Ok);
            assert_eq!(Failure::decode(status, info), Some(f), "{f:?}");
            let mut b = [0u8; TX_REPORT_LEN];
            TxReport::failed(f, 1, 2, 3).write(&mut b);
            assert_eq!(TxReport::read(&mut Reader::new(&b)).and_then(|r| r.failure()), Some(f), "{f:?} on the wire");
        }
        assert_eq!(Failure::decode(Status::Ok, 0), None);
        // The codes as the protocol document's status table gives them.
        assert_eq!(Failure::AddressNack { read: true }.encode(), (Status::AddressNack, 1));
        assert_eq!(Failure::BusError(BusLine::SdaStuckLow).encode(), (Status::BusError, 1));
        assert_eq!(Failure::BusError(BusLine::SclStuckLow).encode(), (Status::BusError, 2));
        assert_eq!(Failure::BusError(BusLine::MisplacedCondition).encode(), (Status::BusError, 3));
        assert_eq!(Failure::decode(Status::BusError, 9), Some(Failure::BusError(BusLine::Unknown)));
        let codes: [u8; 9] = Status::ALL.map(|s| s as u8);
        assert_eq!(codes, [0, 1, 2, 3, 4, 5, 6, 7, 8]);
        assert!((0..=255u8).all(|v| Status::from_u8(v).is_none_or(|s| s as u8 == v)));
    }

    #[test]
    fn caps_and_reports_roundtrip() {
        let c = Caps {
            max_frame: 1024,
            max_bytes_per_op: 256,
            max_ops_per_tx: 16,
            max_tx_per_request: 32,
            window: 8,
            flags: flag::TEN_BIT | flag::PRECISE,
            min_speed_hz: 1000,
            max_speed_hz: 1_000_000,
            speed_hz: 100_000,
            stretch_timeout_us: 25_000,
        };
        let mut buf = [0u8; CAPS_LEN];
        let mut w = Writer::new(&mut buf);
        c.write(&mut w);
        assert_eq!(w.ok(), Some(CAPS_LEN));
        assert_eq!(Caps::read(&mut Reader::new(&buf)), Some(c));
        assert_eq!(Caps::read(&mut Reader::new(&buf[..10])), None);
        let t = TxReport { status: Status::DataNack, op: 1, index: 3, info: 0, bus_ns: 500, measured_ns: 9 };
        let mut b = [0u8; TX_REPORT_LEN];
        t.write(&mut b);
        assert_eq!(TxReport::read(&mut Reader::new(&b)), Some(t));
        b[0] = 99;
        assert_eq!(TxReport::read(&mut Reader::new(&b)), None, "unknown status codes are refused");
    }

    // Unsigned LEB128 as the DWARF 5 standard defines it (section 7.6,
    // table 7.8 of its examples; values from memory of that table):
    // 2 -> 02, 127 -> 7F, 128 -> 80 01, 129 -> 81 01, 12857 -> B9 64.
    #[test]
    fn varints_are_unsigned_leb128() {
        for (v, bytes) in [
            (2u32, &[0x02u8][..]),
            (127, &[0x7F]),
            (128, &[0x80, 0x01]),
            (129, &[0x81, 0x01]),
            (12857, &[0xB9, 0x64]),
            (u32::MAX, &[0xFF, 0xFF, 0xFF, 0xFF, 0x0F]),
        ] {
            let mut buf = [0u8; VARINT_U32_MAX];
            let mut w = Writer::new(&mut buf);
            w.varint(v);
            let n = w.ok().unwrap();
            assert_eq!(&buf[..n], bytes, "{v}");
            assert_eq!(Reader::new(bytes).varint(), Some(v));
        }
        assert_eq!(Reader::new(&[0x80, 0x80]).varint(), None, "cut off");
        assert_eq!(Reader::new(&[0xFF, 0xFF, 0xFF, 0xFF, 0x1F]).varint(), None, "past u32::MAX");
        assert_eq!(Reader::new(&[0x80, 0x80, 0x80, 0x80, 0x80, 0x01]).varint(), None, "longer than five bytes");
    }

    // A short result is 1 + two varints for a success, the full header for
    // anything else, and reads back the same.
    #[test]
    fn short_reports_roundtrip() {
        // 75,000 = 0x124F8: 78|80, 49|80, 04; 300 = 0x12C: 2C|80, 02.
        let ok = TxReport { bus_ns: 75_000, measured_ns: 300, ..TxReport::OK };
        let mut b = [0u8; TX_REPORT_LEN];
        assert_eq!(ok.write_short(&mut b), 1 + 3 + 2);
        assert_eq!(&b[..6], [0, 0xF8, 0xC9, 0x04, 0xAC, 0x02]);
        assert_eq!(TxReport::read_short(&mut Reader::new(&b[..6])), Some(ok));
        let worst = TxReport { bus_ns: UNKNOWN_NS, measured_ns: u32::MAX, ..TxReport::OK };
        assert_eq!(worst.write_short(&mut b), 11, "never longer than the full header");
        let nack = TxReport::failed(Failure::DataNack, 1, 2, 900);
        assert_eq!(nack.write_short(&mut b), TX_REPORT_LEN);
        assert_eq!(TxReport::read_short(&mut Reader::new(&b)), Some(nack));
        assert_eq!(TxReport::read_short(&mut Reader::new(&b[..5])), None, "cut off");
    }
}
