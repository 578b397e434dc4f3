//! The adapter's request executor: decodes frames from a [`Link`], runs
//! them on a [`Target`], answers, and keeps the exactly-once promise.
//!
//! Contract (normative text in `adapters/PROTOCOL.md`):
//! - Requests execute strictly in sequence order. A request whose sequence
//!   number is the expected one runs, and its reply is cached; a repeat of
//!   one of the last `WINDOW` requests gets its cached reply again without
//!   touching the bus; a request from ahead of the expected number is
//!   answered with `GAP` naming the number expected, so the host can go
//!   back to it at once. With `HOLD > 0` such a request (up to `HOLD`
//!   ahead) is kept, not dropped, and runs as soon as the requests before
//!   it have; the adapter then advertises
//!   [`flag::REORDER`](crate::wire::flag::REORDER), its `GAP` says whether
//!   the request was kept, and after running kept requests it names the
//!   next missing one with a `GAP` at once.
//! - `HELLO` restarts the numbering (the next request is HELLO's number
//!   plus one) and forgets the cache; it is answered at any time.
//! - Frames with a bad CRC or broken COBS are dropped silently; the
//!   decoder resynchronises on the next delimiter.
//! - No allocation: buffers are `FRAME` bytes each; RAM is about
//!   `(WINDOW + HOLD + 1) * FRAME` bytes plus a few hundred bytes of stack.
//! - No number from the host wraps or panics: a wrap in firmware is a
//!   field failure. Sequence numbers are compared modulo 2^16 on purpose;
//!   every other count, length and time from a request is checked before
//!   it meets a buffer or the board's clock. A `DELAY` longer than
//!   [`MAX_DELAY_NS`], or one that would carry the board's clock past
//!   `u64::MAX`, is refused with `TOO_LARGE` and never reaches the board;
//!   a `SPEED` outside the advertised range is answered "refused" without
//!   asking the board.
//!
//! What embedded-hal can report per byte: `I2c::transaction` returns only
//! an error kind for the whole transaction, so through embedded-hal alone
//! the adapter knows that an address or a data byte was NACKed but not
//! which operation or byte, and it has no bus-time model. A [`Target`]
//! that knows more (a HAL with a byte counter, the simulator) reports it
//! through [`Target::last_report`], and the adapter then advertises
//! [`flag::PRECISE`](crate::wire::flag::PRECISE).

use embedded_hal::i2c::{self, ErrorKind, I2c, NoAcknowledgeSource, Operation, SevenBitAddress, TenBitAddress};

use crate::cobs::Decoder;
use crate::wire::{
    self, BusLine, Caps, Failure, HEADER_LEN, Header, READ_FLAG, Reader, Status, TEN_BIT_FLAG, TX_REPORT_LEN, TxReport,
    UNKNOWN_INDEX, UNKNOWN_NS, UNKNOWN_OP, VERSION, Writer, flag, kind, refusal,
};

/// Most operations one transaction may have in this implementation.
pub const MAX_OPS: usize = 16;

/// Longest wait one `DELAY` may ask for: a day, the host's own bound on a
/// script's `sleep_ms` and on every timeout, so no host request comes
/// near it. Bounding each wait keeps a board's nanosecond clock (584
/// years of range) from being pushed to its end by a few requests.
pub const MAX_DELAY_NS: u64 = 86_400 * 1_000_000_000;

/// The serial side: a byte stream to the host.
pub trait Link {
    type Error;
    /// Copies bytes that have arrived into `buf` without waiting for more;
    /// `Ok(0)` when none are there.
    fn read(&mut self, buf: &mut [u8]) -> Result<usize, Self::Error>;
    /// Queues all of `bytes` for sending (it may wait for room).
    fn write(&mut self, bytes: &[u8]) -> Result<(), Self::Error>;
    /// Called after each complete frame, for links that buffer.
    fn flush(&mut self) -> Result<(), Self::Error> {
        Ok(())
    }
}

/// The board side: the I2C controller, a clock, and the optional extras.
pub trait Target {
    type Bus: I2c<SevenBitAddress> + I2c<TenBitAddress>;
    fn bus(&mut self) -> &mut Self::Bus;
    /// A monotonic clock in nanoseconds (the board's timer).
    fn now_ns(&mut self) -> u64;
    /// Waits `ns` on that clock. The bridge passes at most
    /// [`MAX_DELAY_NS`], and never a wait that would carry `now_ns` past
    /// `u64::MAX`.
    fn delay_ns(&mut self, ns: u64);
    /// Sets SCL; returns the frequency used, or `None` if refused. The
    /// bridge asks only for a frequency within the advertised
    /// `min_speed_hz ..= max_speed_hz`, and never for 0 Hz (a divider
    /// computed from it would divide by zero).
    fn set_speed(&mut self, _hz: u32) -> Option<u32> {
        None
    }
    /// Clocks SCL until SDA is released (at most nine pulses), then STOP;
    /// returns pulses sent and whether SDA is free, or `None` if the board
    /// cannot drive the pins by hand.
    fn recover(&mut self) -> Option<(u8, bool)> {
        None
    }
    /// SDA and SCL levels (true = high), if the pins can be read.
    fn lines(&mut self) -> Option<(bool, bool)> {
        None
    }
    /// Side channel: the exact result of the transaction just run, beyond
    /// what embedded-hal's error kind says. `None` = use the error kind.
    fn last_report(&mut self) -> Option<TxReport> {
        None
    }
}

/// Wraps a HAL that has only 7-bit addressing so it meets [`Target::Bus`];
/// 10-bit transactions fail with `ErrorKind::Other` (advertise no 10-bit
/// support and the host never sends one).
pub struct SevenBitOnly<I>(pub I);

/// Error of [`SevenBitOnly`].
#[derive(Debug)]
pub enum SevenBitOnlyError<E> {
    Bus(E),
    TenBitUnsupported,
}

impl<E: i2c::Error> i2c::Error for SevenBitOnlyError<E> {
    fn kind(&self) -> ErrorKind {
        match self {
            SevenBitOnlyError::Bus(e) => e.kind(),
            SevenBitOnlyError::TenBitUnsupported => ErrorKind::Other,
        }
    }
}

impl<I: I2c<SevenBitAddress>> i2c::ErrorType for SevenBitOnly<I> {
    type Error = SevenBitOnlyError<I::Error>;
}

impl<I: I2c<SevenBitAddress>> I2c<SevenBitAddress> for SevenBitOnly<I> {
    fn transaction(&mut self, address: u8, operations: &mut [Operation<'_>]) -> Result<(), Self::Error> {
        self.0.transaction(address, operations).map_err(SevenBitOnlyError::Bus)
    }
}

impl<I: I2c<SevenBitAddress>> I2c<TenBitAddress> for SevenBitOnly<I> {
    fn transaction(&mut self, _address: u16, _operations: &mut [Operation<'_>]) -> Result<(), Self::Error> {
        Err(SevenBitOnlyError::TenBitUnsupported)
    }
}

/// One cached reply.
struct Slot<const FRAME: usize> {
    valid: bool,
    seq: u16,
    kind: u8,
    len: usize,
    body: [u8; FRAME],
}

/// One request kept until the requests before it have run.
struct Held<const FRAME: usize> {
    valid: bool,
    seq: u16,
    kind: u8,
    len: usize,
    body: [u8; FRAME],
}

/// Everything but the receive decoder, so a decoded frame (borrowed from
/// the decoder) can be handled without copying it.
struct Core<const FRAME: usize, const WINDOW: usize, const HOLD: usize> {
    caps: Caps,
    session: u16,
    greeted: bool,
    expected: u16,
    slots: [Slot<FRAME>; WINDOW],
    next_slot: usize,
    held: [Held<FRAME>; HOLD],
    executed: u64,
    dropped: u64,
}

/// Counters for diagnostics.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub struct BridgeStats {
    /// Requests executed (each at most once).
    pub executed: u64,
    /// Frames thrown away: bad CRC, broken COBS, too long.
    pub dropped: u64,
}

/// The adapter: `FRAME` is the largest frame in bytes (before COBS),
/// `WINDOW` the number of requests the host may pipeline, `HOLD` the
/// number of early requests it keeps while one before them is missing
/// (0: none, the go-back-N behaviour of the first adapters; `WINDOW`
/// covers every request the host may have in flight).
pub struct Bridge<const FRAME: usize, const WINDOW: usize, const HOLD: usize = 0> {
    rx: Decoder<FRAME>,
    core: Core<FRAME, WINDOW, HOLD>,
}

impl<const FRAME: usize, const WINDOW: usize, const HOLD: usize> Bridge<FRAME, WINDOW, HOLD> {
    /// A bridge with the board's capabilities and a session id that should
    /// differ from the previous boot's (a boot counter or a random number),
    /// so the host can tell that the adapter restarted. `max_frame` and
    /// `window` in `caps` are clamped to `FRAME` and `WINDOW`, and
    /// `max_ops_per_tx` to [`MAX_OPS`]; the `REORDER` flag is set exactly
    /// when `HOLD > 0`.
    pub fn new(mut caps: Caps, session: u16) -> Self {
        if HOLD > 0 {
            caps.flags |= flag::REORDER;
        } else {
            caps.flags &= !flag::REORDER;
        }
        caps.max_frame = caps.max_frame.min(FRAME.min(u16::MAX as usize) as u16);
        caps.window = caps.window.clamp(1, WINDOW.clamp(1, 255) as u8);
        caps.max_ops_per_tx = caps.max_ops_per_tx.clamp(1, MAX_OPS as u8);
        caps.max_tx_per_request = caps.max_tx_per_request.max(1);
        Bridge {
            rx: Decoder::new(),
            core: Core {
                caps,
                session,
                greeted: false,
                expected: 0,
                slots: core::array::from_fn(|_| Slot { valid: false, seq: 0, kind: 0, len: 0, body: [0; FRAME] }),
                next_slot: 0,
                held: core::array::from_fn(|_| Held { valid: false, seq: 0, kind: 0, len: 0, body: [0; FRAME] }),
                executed: 0,
                dropped: 0,
            },
        }
    }

    pub fn caps(&self) -> &Caps {
        &self.core.caps
    }

    /// The session id given at construction.
    pub fn session(&self) -> u16 {
        self.core.session
    }

    pub fn stats(&self) -> BridgeStats {
        BridgeStats { executed: self.core.executed, dropped: self.core.dropped }
    }

    /// Sends the `BOOT` notice; call once after power-up, before polling.
    pub fn announce<L: Link>(&mut self, link: &mut L) -> Result<(), L::Error> {
        send(link, Header { version: VERSION, kind: kind::BOOT, seq: 0, session: self.core.session }, &[])
    }

    /// Reads what the link has, handles every complete frame, and answers.
    /// Returns the number of bytes taken from the link (0: nothing to do).
    pub fn poll<L: Link, T: Target>(&mut self, link: &mut L, target: &mut T) -> Result<usize, L::Error> {
        let mut buf = [0u8; 64];
        let n = link.read(&mut buf)?;
        for &b in &buf[..n] {
            self.feed(b, link, target)?;
        }
        Ok(n)
    }

    /// Handles one received byte.
    pub fn feed<L: Link, T: Target>(&mut self, byte: u8, link: &mut L, target: &mut T) -> Result<(), L::Error> {
        let Bridge { rx, core } = self;
        match rx.push(byte) {
            None => Ok(()),
            Some(Err(_)) => {
                core.dropped = core.dropped.saturating_add(1);
                Ok(())
            }
            Some(Ok(frame)) => core.handle(frame, link, target),
        }
    }
}

fn send<L: Link>(link: &mut L, h: Header, body: &[u8]) -> Result<(), L::Error> {
    // A delimiter before the frame as well as after it: a corrupted
    // trailing delimiter of the last frame then costs that frame only,
    // not the next one too (the host skips empty frames).
    link.write(&[0])?;
    wire::emit_frame(h, body, |p: &[u8]| link.write(p))?;
    link.flush()
}

impl<const FRAME: usize, const WINDOW: usize, const HOLD: usize> Core<FRAME, WINDOW, HOLD> {
    fn header(&self, kind: u8, seq: u16) -> Header {
        Header { version: VERSION, kind, seq, session: self.session }
    }

    fn refuse<L: Link>(&self, link: &mut L, seq: u16, why: u8) -> Result<(), L::Error> {
        send(link, self.header(kind::REFUSED, seq), &[why, VERSION])
    }

    fn handle<L: Link, T: Target>(&mut self, frame: &[u8], link: &mut L, target: &mut T) -> Result<(), L::Error> {
        let Ok((h, body)) = wire::parse_frame(frame) else {
            self.dropped = self.dropped.saturating_add(1);
            return Ok(());
        };
        if h.version != VERSION {
            return self.refuse(link, h.seq, refusal::VERSION);
        }
        if h.kind == kind::HELLO {
            self.greeted = true;
            self.expected = h.seq.wrapping_add(1);
            for s in &mut self.slots {
                s.valid = false;
            }
            for s in &mut self.held {
                s.valid = false;
            }
            let mut out = [0u8; 8 + wire::CAPS_LEN];
            let mut w = Writer::new(&mut out);
            w.u64(target.now_ns());
            self.caps.write(&mut w);
            let n = w.len();
            return send(link, self.header(kind::HELLO | kind::REPLY, h.seq), &out[..n]);
        }
        if !self.greeted || h.session != self.session {
            return self.refuse(link, h.seq, refusal::SESSION);
        }
        // Sequence numbers live modulo 2^16: the wrap is the protocol's.
        let ahead = h.seq.wrapping_sub(self.expected) as i16;
        if ahead > 0 {
            let kept = self.hold(h.seq, h.kind, body, ahead as usize);
            let [a, b] = h.seq.to_le_bytes();
            let gap = [a, b, kept as u8];
            let n = if HOLD > 0 { 3 } else { 2 };
            return send(link, self.header(kind::GAP, self.expected), &gap[..n]);
        }
        if ahead < 0 {
            if let Some(s) = self.slots.iter().find(|s| s.valid && s.seq == h.seq) {
                return send(link, self.header(s.kind, s.seq), &s.body[..s.len]);
            }
            // Older than the cache: the host has long had its reply.
            return Ok(());
        }
        self.run_expected(h.seq, h.kind, None, body, link, target)?;
        // A kept copy of a request that just ran directly is stale.
        let expected = self.expected;
        for s in self.held.iter_mut().filter(|s| s.valid && (s.seq.wrapping_sub(expected) as i16) < 0) {
            s.valid = false;
        }
        // Requests kept while this one was missing run now, in order.
        let mut ran_kept = false;
        while let Some(k) = self.held.iter().position(|s| s.valid && s.seq == self.expected) {
            self.held[k].valid = false;
            let (seq, kind) = (self.held[k].seq, self.held[k].kind);
            self.run_expected(seq, kind, Some(k), &[], link, target)?;
            ran_kept = true;
        }
        // Still holding later ones: the next request is missing too. Say so
        // at once rather than wait for the host's timer.
        if ran_kept
            && let Some(first) =
                self.held.iter().filter(|s| s.valid).map(|s| s.seq).min_by_key(|&q| q.wrapping_sub(self.expected))
        {
            let [a, b] = first.to_le_bytes();
            return send(link, self.header(kind::GAP, self.expected), &[a, b, 1]);
        }
        Ok(())
    }

    /// Keeps a request `ahead` of the expected one, if there is room and
    /// it is not kept already; whether it is kept now.
    fn hold(&mut self, seq: u16, kind: u8, body: &[u8], ahead: usize) -> bool {
        if ahead > HOLD {
            return false;
        }
        if self.held.iter().any(|s| s.valid && s.seq == seq) {
            return true;
        }
        let Some(slot) = self.held.iter_mut().find(|s| !s.valid) else { return false };
        if body.len() > slot.body.len() {
            return false;
        }
        slot.body[..body.len()].copy_from_slice(body);
        (slot.valid, slot.seq, slot.kind, slot.len) = (true, seq, kind, body.len());
        true
    }

    /// Runs the expected request once, caches its reply and sends it; its
    /// body is `body`, or that of kept request `held`.
    fn run_expected<L: Link, T: Target>(
        &mut self,
        seq: u16,
        req_kind: u8,
        held: Option<usize>,
        body: &[u8],
        link: &mut L,
        target: &mut T,
    ) -> Result<(), L::Error> {
        let i = self.next_slot;
        self.next_slot = (self.next_slot + 1) % WINDOW;
        self.expected = self.expected.wrapping_add(1);
        self.executed = self.executed.saturating_add(1);
        let (reply_kind, len) = {
            let caps = self.caps;
            let slot = &mut self.slots[i];
            slot.valid = false;
            let body = match held {
                Some(k) => &self.held[k].body[..self.held[k].len],
                None => body,
            };
            match execute(&caps, req_kind, body, &mut slot.body, target) {
                Ok(n) => (req_kind | kind::REPLY, n),
                Err(why) => {
                    slot.body[0] = why;
                    slot.body[1] = VERSION;
                    (kind::REFUSED, 2)
                }
            }
        };
        if req_kind == kind::SPEED && reply_kind == (kind::SPEED | kind::REPLY) {
            let b = &self.slots[i].body;
            if b[8] == 0 {
                self.caps.speed_hz = u32::from_le_bytes([b[9], b[10], b[11], b[12]]);
            }
        }
        let slot = &mut self.slots[i];
        slot.valid = true;
        slot.seq = seq;
        slot.kind = reply_kind;
        slot.len = len;
        let hdr = Header { version: VERSION, kind: reply_kind, seq, session: self.session };
        send(link, hdr, &self.slots[i].body[..len])
    }
}

/// Runs one request; returns the reply body length or a refusal code.
fn execute<T: Target>(caps: &Caps, k: u8, body: &[u8], out: &mut [u8], target: &mut T) -> Result<usize, u8> {
    let mut r = Reader::new(body);
    let room = out.len().saturating_sub(HEADER_LEN + wire::CRC_LEN);
    let out = &mut out[..room];
    match k {
        kind::RUN => run(caps, &mut r, out, target, false),
        kind::RUN_SHORT if caps.has(flag::SHORT) => run(caps, &mut r, out, target, true),
        kind::SPEED => {
            let hz = r.u32().ok_or(refusal::MALFORMED)?;
            let allowed = (caps.min_speed_hz.max(1)..=caps.max_speed_hz).contains(&hz);
            let (status, used) = match allowed.then(|| target.set_speed(hz)).flatten() {
                Some(used) => (0u8, used),
                None => (1, caps.speed_hz),
            };
            small_reply(out, target, &[status], Some(used))
        }
        kind::RECOVER => {
            let b = match target.recover() {
                Some((pulses, released)) => [0, pulses, released as u8],
                None => [1, 0, 0],
            };
            small_reply(out, target, &b, None)
        }
        kind::LINES => {
            let b = match target.lines() {
                Some((sda, scl)) => [0, sda as u8 | (scl as u8) << 1],
                None => [1, 0],
            };
            small_reply(out, target, &b, None)
        }
        kind::DELAY => {
            let ns = r.u64().ok_or(refusal::MALFORMED)?;
            // Refused rather than saturated: a shorter wait than asked
            // for would be a silent lie about the board's timing.
            if ns > MAX_DELAY_NS || target.now_ns().checked_add(ns).is_none() {
                return Err(refusal::TOO_LARGE);
            }
            target.delay_ns(ns);
            small_reply(out, target, &[], None)
        }
        _ => Err(refusal::UNKNOWN_KIND),
    }
}

fn small_reply<T: Target>(out: &mut [u8], target: &mut T, b: &[u8], hz: Option<u32>) -> Result<usize, u8> {
    let mut w = Writer::new(out);
    w.u64(target.now_ns());
    w.bytes(b);
    if let Some(hz) = hz {
        w.u32(hz);
    }
    w.ok().ok_or(refusal::TOO_LARGE)
}

/// One operation as parsed from a request: direction and the byte range
/// (of the request body for writes, of the reply for reads).
#[derive(Clone, Copy, Default)]
struct OpDesc {
    read: bool,
    start: usize,
    len: usize,
}

/// Runs a `RUN` (or, `short`, a `RUN_SHORT`) request into `out`. Each
/// result is laid out at full length first, so the room check before the
/// bus is touched holds for both forms; a short result then moves its
/// read data down over the header bytes it does not need.
fn run<T: Target>(caps: &Caps, r: &mut Reader<'_>, out: &mut [u8], target: &mut T, short: bool) -> Result<usize, u8> {
    let body = r.bytes(r.remaining()).ok_or(refusal::MALFORMED)?;
    let mut r = Reader::new(body);
    let count = r.u8().ok_or(refusal::MALFORMED)?;
    if count == 0 || count > caps.max_tx_per_request {
        return Err(refusal::TOO_LARGE);
    }
    if out.len() < 8 {
        return Err(refusal::TOO_LARGE);
    }
    let mut pos = 8; // adapter time goes first, written at the end
    for _ in 0..count {
        let raw_addr = r.u16().ok_or(refusal::MALFORMED)?;
        let nops = r.u8().ok_or(refusal::MALFORMED)? as usize;
        let mut ops = [OpDesc::default(); MAX_OPS];
        let mut refused = nops == 0 || nops > caps.max_ops_per_tx as usize;
        let mut data_at = pos + TX_REPORT_LEN;
        for i in 0..nops {
            let field = r.u16().ok_or(refusal::MALFORMED)?;
            let len = (field & !READ_FLAG) as usize;
            let read = field & READ_FLAG != 0;
            let start = if read { data_at } else { r.position() };
            if !read {
                r.bytes(len).ok_or(refusal::MALFORMED)?;
            } else {
                // Saturating: 255 reads of 32767 bytes overflow a 16-bit
                // usize; any sum past the reply is refused below anyway.
                data_at = data_at.saturating_add(len);
                refused |= len == 0;
            }
            refused |= len > caps.max_bytes_per_op as usize;
            if let Some(o) = ops.get_mut(i) {
                *o = OpDesc { read, start, len };
            }
        }
        if data_at > out.len() {
            return Err(refusal::TOO_LARGE);
        }
        let ten = raw_addr & TEN_BIT_FLAG != 0;
        let addr = raw_addr & !TEN_BIT_FLAG;
        refused |= if ten { addr > 0x3FF || !caps.has(flag::TEN_BIT) } else { addr > 0x7F };
        let report = if refused {
            TxReport::failed(Failure::Refused, UNKNOWN_OP, UNKNOWN_INDEX, UNKNOWN_NS)
        } else {
            transact(target, ten, addr, &ops[..nops], body, &mut out[pos + TX_REPORT_LEN..data_at])
        };
        let mut head = [0u8; TX_REPORT_LEN];
        let head_len = if short {
            report.write_short(&mut head)
        } else {
            report.write(&mut head);
            TX_REPORT_LEN
        };
        // Keep only the read data the host expects for this result.
        let mut data = 0;
        for (i, o) in ops[..nops.min(MAX_OPS)].iter().enumerate() {
            if o.read && report.has_data_of(i) && report.status != Status::Refused {
                data += o.len;
            }
        }
        let from = pos + TX_REPORT_LEN;
        out.copy_within(from..from + data, pos + head_len);
        out[pos..pos + head_len].copy_from_slice(&head[..head_len]);
        pos += head_len + data;
    }
    if r.remaining() != 0 {
        return Err(refusal::MALFORMED);
    }
    let t = target.now_ns().to_le_bytes();
    out[..8].copy_from_slice(&t);
    Ok(pos)
}

/// Puts one transaction on the bus. `reads` is the reply area that holds
/// the read operations' bytes back to back.
fn transact<T: Target>(
    target: &mut T,
    ten: bool,
    addr: u16,
    descs: &[OpDesc],
    body: &[u8],
    reads: &mut [u8],
) -> TxReport {
    let mut ops: [Operation<'_>; MAX_OPS] = core::array::from_fn(|_| Operation::Write(&[]));
    let mut rest: &mut [u8] = reads;
    for (slot, d) in ops.iter_mut().zip(descs) {
        *slot = if d.read {
            let (head, tail) = core::mem::take(&mut rest).split_at_mut(d.len);
            rest = tail;
            Operation::Read(head)
        } else {
            Operation::Write(&body[d.start..d.start + d.len])
        };
    }
    let n = descs.len();
    let t0 = target.now_ns();
    let result = if ten {
        I2c::<TenBitAddress>::transaction(target.bus(), addr, &mut ops[..n]).map_err(|e| i2c::Error::kind(&e))
    } else {
        I2c::<SevenBitAddress>::transaction(target.bus(), addr as u8, &mut ops[..n]).map_err(|e| i2c::Error::kind(&e))
    };
    let measured = target.now_ns().saturating_sub(t0).min(u32::MAX as u64) as u32;
    let mut report = target.last_report().unwrap_or_else(|| from_kind(result));
    report.measured_ns = measured;
    report
}

/// What embedded-hal's error kind alone says: no operation or byte index.
fn from_kind(result: Result<(), ErrorKind>) -> TxReport {
    // Which address phase or line is not known, so the failures carry
    // "write" and "unknown" (info 0), as adapters/PROTOCOL.md section 6 says.
    let failure = match result {
        Ok(()) => return TxReport::OK,
        Err(ErrorKind::NoAcknowledge(NoAcknowledgeSource::Data)) => Failure::DataNack,
        Err(ErrorKind::NoAcknowledge(_)) => Failure::AddressNack { read: false },
        Err(ErrorKind::ArbitrationLoss) => Failure::ArbitrationLost,
        Err(ErrorKind::Bus) => Failure::BusError(BusLine::Unknown),
        Err(ErrorKind::Overrun) => Failure::Overrun,
        Err(_) => Failure::Other,
    };
    TxReport::failed(failure, UNKNOWN_OP, UNKNOWN_INDEX, UNKNOWN_NS)
}
