//! The native-protocol driver: an [`Adapter`] that talks to any device
//! speaking `adapters/PROTOCOL.md` over a serial port.
//!
//! Contract:
//! - Opening does the handshake (`HELLO`) and adopts the adapter's
//!   capabilities, clamped by the user's [`NativeSettings`].
//! - Requests are numbered; up to the window are in flight at once, and
//!   the adapter runs them in number order exactly once. A lost request
//!   or reply is sent again with the same number: at once when a later
//!   reply or a `GAP` notice shows it is missing, else after the reply
//!   timeout. The adapter answers a repeat from its reply cache without
//!   touching the bus.
//! - [`Adapter::execute_batch`] packs independent transactions into
//!   requests (up to `batch` per request and the frame size) and pipelines
//!   the requests, in rounds of a few windows' worth so the batch
//!   follows the loss between rounds.
//! - Timing is learned from the link ([`super::rto`], RFC 6298): a request
//!   is sent again when its timer runs out (first a probe timeout of
//!   twice the smoothed round trip, then the RTO, doubled per expiry), or
//!   at once when a later reply or a `GAP` shows it missing. Only a timer
//!   expiry is a try; duplicate replies are harmless, and a second reply
//!   to a request sent twice times the first send (the resend was
//!   needless), so a timer that fell short learns the longer round trip.
//! - On a noisy line (at least 1 % of the adapter's frames arriving
//!   corrupt, [`super::rto::LineNoise`]) whatever goes last is followed
//!   by a status probe: a request numbered far past the window, which
//!   every adapter drops unrun and answers with a `GAP` naming the
//!   request it expects, so a loss shows one round trip later instead of
//!   after a timer. Each immediate resend then goes twice. Resends and
//!   probes go out in one write when the exchange would wait.
//! - The batch follows the loss ([`super::rto::FrameSizer`]): it starts
//!   at one and grows per clean reply, and once frames are lost it is the
//!   size that moves the most transactions through the loss measured;
//!   the window stays at its limit. A script's batch resolves whatever
//!   sizes went on the wire.
//! - The link fails when no new answer has come for `silence` (default
//!   3 s; `tries` adds a count of timer expiries, off by default), so a
//!   slow but working link never aborts a run, and one that only repeats
//!   itself ends. The handshake follows the same timing and give-up
//!   rules.
//! - A reply must carry exactly what its request asked for: more results
//!   or data bytes is a malformed reply.
//! - Time is the adapter's: [`Adapter::now`] is the adapter clock as of its
//!   last reply, and [`Adapter::delay`] asks the adapter to wait, so a
//!   served simulated bench keeps its virtual time.
//! - Any link failure (silence past the limit, wrong protocol
//!   version, adapter reset, port gone) is final: the outcome carries
//!   [`Fault::Adapter`](crate::bus::Fault::Adapter) and every later call fails the same way.

use std::time::{Duration, Instant};

use anyhow::{Result, bail};
use buscue_bridge::wire::{
    CRC_LEN, Caps, Failure, HEADER_LEN, Header, READ_FLAG, Reader, Status, TEN_BIT_FLAG, TX_REPORT_LEN, TxReport,
    UNKNOWN_INDEX, UNKNOWN_NS, UNKNOWN_OP, VERSION, Writer, flag, kind, refusal,
};
use thiserror::Error;

use super::link::{LinkError, SerialLink};
use super::native_fault;
use super::rto::{FrameCost, FrameSizer, LineNoise, RTO_FLOOR, RetransmitTimer};
use super::{Adapter, AdapterError, Capabilities, Identity, LineLevels, LinkCounters, Recovery};
use crate::bus::timing::{breakdown_events, transaction_time};
use crate::bus::{BusSpeed, Direction, OpOutcome, Operation, Outcome, Transaction};

/// User settings of a native serial adapter (`serial:PATH,key=value`).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct NativeSettings {
    pub baud: u32,
    /// Most requests in flight; `None`: the adapter's window.
    pub window: Option<u8>,
    /// Most transactions per request; `None`: the adapter's limit.
    pub batch: Option<u8>,
    /// Longest wait for the first try of a request: the ceiling of the
    /// learned retransmission timeout.
    pub timeout: Duration,
    /// How long the link may go without a new answer from the adapter
    /// before it counts as failed.
    pub silence: Duration,
    /// Timer expiries of one request before the adapter counts as not
    /// answering; `None`: no count, only `silence`.
    pub tries: Option<u32>,
}

/// Default of [`NativeSettings::silence`].
pub const DEFAULT_SILENCE: Duration = Duration::from_secs(3);

impl Default for NativeSettings {
    fn default() -> Self {
        NativeSettings {
            baud: 115_200,
            window: None,
            batch: None,
            timeout: Duration::from_millis(100),
            silence: DEFAULT_SILENCE,
            tries: None,
        }
    }
}

impl NativeSettings {
    /// Applies one `key=value` of the adapter spec.
    pub fn set(&mut self, key: &str, value: &str) -> Result<()> {
        let num = |max: u64| -> Result<u64> {
            let v: u64 =
                value.trim().parse().map_err(|_| anyhow::anyhow!("`{key}={value}`: {key} must be a number"))?;
            if v == 0 || v > max {
                bail!("`{key}={value}`: {key} must be 1 to {max}");
            }
            Ok(v)
        };
        match key.trim() {
            "baud" => self.baud = num(20_000_000)? as u32,
            "window" => self.window = Some(num(255)? as u8),
            "batch" => self.batch = Some(num(255)? as u8),
            "timeout_ms" => self.timeout = Duration::from_millis(num(60_000)?),
            "silence_ms" => self.silence = Duration::from_millis(num(3_600_000)?),
            "tries" => self.tries = Some(num(1_000_000)? as u32),
            other => {
                bail!("`{other}` is not a serial setting: use baud, window, batch, timeout_ms, silence_ms or tries")
            }
        }
        Ok(())
    }
}

/// Why the link to the adapter is unusable.
#[derive(Debug, Clone, Error)]
pub enum NativeError {
    #[error("{0}")]
    Link(String),
    #[error("no reply from the adapter on {path} after {tries} tries ({waited_ms} ms)")]
    NoReply { path: String, tries: u32, waited_ms: u128 },
    #[error("no answer from the adapter on {path} for {waited_ms} ms (silence_ms): the link is down")]
    Silent { path: String, waited_ms: u128 },
    #[error("the adapter on {path} speaks native protocol version {theirs}; this buscue speaks version {VERSION}")]
    Version { path: String, theirs: u8 },
    #[error("the adapter on {path} was reset mid-run ({why}); the bus state is unknown")]
    Reset { path: String, why: &'static str },
    #[error("the adapter on {path} refused request kind 0x{kind:02X} (code {code}): {}", refusal_text(*code))]
    Refused { path: String, kind: u8, code: u8 },
    #[error("the adapter on {path} sent a malformed reply to request kind 0x{kind:02X}")]
    Malformed { path: String, kind: u8 },
}

fn refusal_text(code: u8) -> &'static str {
    match code {
        refusal::VERSION => "wrong protocol version",
        refusal::SESSION => "unknown session",
        refusal::MALFORMED => "malformed request",
        refusal::TOO_LARGE => "request too large",
        refusal::UNKNOWN_KIND => "unknown request kind",
        _ => "unknown reason",
    }
}

impl From<NativeError> for AdapterError {
    fn from(e: NativeError) -> Self {
        let text = e.to_string();
        match e {
            NativeError::Link(_) | NativeError::Reset { .. } => AdapterError::LinkLost(text),
            NativeError::NoReply { .. } | NativeError::Silent { .. } => AdapterError::NoAnswer(text),
            NativeError::Version { .. } | NativeError::Refused { .. } => AdapterError::Refused(text),
            NativeError::Malformed { .. } => AdapterError::Protocol(text),
        }
    }
}

impl From<LinkError> for NativeError {
    fn from(e: LinkError) -> Self {
        NativeError::Link(e.to_string())
    }
}

/// Protocol-level counters, for the benchmark and diagnostics.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct NativeStats {
    /// Distinct requests (each executed once by the adapter).
    pub requests: u64,
    /// Request frames sent, repeats included.
    pub sends: u64,
    pub repeats: u64,
    /// Repeats because a request's timer expired.
    pub timeouts: u64,
    /// Repeats because a reply or a gap notice showed a request missing.
    pub fast_resends: u64,
    /// Gap notices received.
    pub gaps: u64,
    /// Status probes sent, and gap notices that answered one.
    pub status_probes: u64,
    pub status_answers: u64,
    /// Frames received from the adapter during exchanges (replies,
    /// repeats of replies, notices).
    pub received: u64,
}

pub struct NativeAdapter {
    link: SerialLink,
    settings: NativeSettings,
    wire: Caps,
    caps: Capabilities,
    identity: Identity,
    session: u16,
    next_seq: u16,
    clock: Duration,
    speed: BusSpeed,
    failed: Option<NativeError>,
    timer: RetransmitTimer,
    batch_size: FrameSizer,
    /// Requests in flight at most.
    window: usize,
    noise: LineNoise,
    /// The link's frames received and dropped as of the last exchange.
    noise_seen: (u64, u64),
    pub stats: NativeStats,
}

/// One request of a pipelined exchange.
struct Pending {
    kind: u8,
    body: Vec<u8>,
    /// Extra time the adapter needs (a DELAY).
    extra: Duration,
    reply: Option<(u8, Vec<u8>)>,
    /// Bytes of this request and of its expected reply on the wire.
    wire: usize,
    reply_wire: usize,
    /// Bytes it waited behind at its last send (its own and those of the
    /// requests in flight before it): what its round trip grows with.
    load: usize,
    sent_at: Instant,
    /// Order of this request's last send among all sends of the exchange.
    send_no: u64,
    /// Sends, for Karn's rule: only a reply to a request sent once times
    /// the link.
    sends: u32,
    /// Frames sent, copies included.
    frames: u32,
    /// Times this request's own timer ran out (its tries).
    expiries: u32,
    first_sent: Option<Instant>,
    /// [`Self::load`] and [`Self::send_no`] of the first send.
    first_load: usize,
    first_send_no: u64,
    /// Replies received (a needless resend is answered twice).
    answers: u32,
    /// When the first reply came (a later one is a repeat).
    answered_at: Option<Instant>,
    /// The adapter said it keeps this request until the gap before it
    /// fills (selective repeat): it needs no resend for that gap.
    held: bool,
}

/// One request for [`NativeAdapter::exchange`].
struct Request {
    kind: u8,
    body: Vec<u8>,
    /// Extra time the adapter needs (a DELAY).
    extra: Duration,
    /// Body bytes of the reply it should get.
    reply_len: usize,
}

/// Bytes a frame with a body of `body` bytes takes on the wire: header,
/// CRC, a COBS code byte per 254 and the two delimiters.
fn wire_len(body: usize) -> usize {
    let raw = HEADER_LEN + body + CRC_LEN;
    raw + raw / 254 + 1 + 2
}

/// Wire bytes of the replies still to come for the requests in `p`: what
/// the reply to a request sent now waits behind (the request line runs
/// beside the reply line).
fn in_flight(p: &[Pending]) -> usize {
    p.iter().filter(|q| q.reply.is_none() && q.sends > 0).map(|q| q.reply_wire).sum()
}

/// Where a request's timer starts and the bytes it covers: its send and
/// all it waited behind, or, when a reply has come since, that reply and
/// its own reply's bytes (its request has crossed meanwhile).
fn timer_start(p: &Pending, progress: Instant) -> (Instant, usize) {
    if progress > p.sent_at { (progress, p.reply_wire) } else { (p.sent_at, p.load) }
}

/// How far past the last request sent a status probe is numbered: far
/// beyond any adapter's window, so it is never run nor kept, only
/// answered with a `GAP` naming the request expected (PROTOCOL.md §3).
const PROBE_AHEAD: u16 = 0x4000;

/// Probes of one exchange take numbers spread over this many, so the
/// answer names the probe it answers.
const PROBE_SPREAD: u16 = 0x1000;

/// Share of frames arriving corrupt from which the line counts as noisy:
/// an exchange then follows what it sends last with a status probe and
/// sends every fast resend twice. Below it a timer wait is rare enough
/// that the extra frames would cost more than they save.
const NOISY: f64 = 0.01;

/// Fewest tries of one request within the silence limit.
const SILENCE_TRIES: u32 = 30;

/// Why a request goes out again.
#[derive(Clone, Copy, PartialEq, Eq)]
enum Resend {
    First,
    Timer,
    Fast,
}

impl NativeAdapter {
    /// Opens the port and does the handshake.
    pub fn open(path: &str, settings: NativeSettings) -> Result<Self, NativeError> {
        let mut link = SerialLink::open(path, settings.baud)?;
        // A start number that differs between runs, so replies from an
        // earlier host session cannot be mistaken for ours.
        let seq0 = (std::time::SystemTime::now().duration_since(std::time::UNIX_EPOCH).map_or(0, |d| d.subsec_nanos())
            & 0x7FFF) as u16;
        let hello = Header { version: VERSION, kind: kind::HELLO, seq: seq0, session: 0 };
        // The same give-up rule as every request: the handshake fails when
        // `silence` passes without its answer. Before any sample the wait
        // is what the exchange needs on the wire at this baud rate, with
        // room to spare, never above the ceiling; it does not back off: a
        // HELLO runs nothing, so a repeat costs the adapter nothing, and
        // whichever answer arrives first is taken (they are all alike).
        let mut timer = RetransmitTimer::new(RTO_FLOOR, settings.timeout)
            .assuming_byte_time(Duration::from_secs_f64(10.0 / settings.baud.max(1) as f64));
        let wait = hello_wait(settings.baud).min(settings.timeout);
        let give_up = Instant::now() + settings.silence;
        let mut expiries = 0u32;
        let mut answer = None;
        'outer: while Instant::now() < give_up && settings.tries.is_none_or(|t| expiries < t) {
            link.send(hello, &[])?;
            let sent = Instant::now();
            let deadline = (sent + wait).min(give_up);
            while let Some((h, body)) = link.recv(deadline)? {
                if h.kind == kind::REFUSED && body.first() == Some(&refusal::VERSION) {
                    let theirs = body.get(1).copied().unwrap_or(h.version);
                    return Err(NativeError::Version { path: path.into(), theirs });
                }
                if h.kind == (kind::HELLO | kind::REPLY) && h.seq == seq0 {
                    if h.version != VERSION {
                        return Err(NativeError::Version { path: path.into(), theirs: h.version });
                    }
                    // Every HELLO is answered alike, so this answer may be
                    // to an earlier one (Karn's ambiguity); timed from the
                    // last send it is short if anything, which costs a
                    // spurious resend at worst and is corrected by the
                    // next samples, where the ceiling would cost a wait of
                    // `timeout_ms` per lost frame until a clean reply.
                    timer.sample(sent.elapsed());
                    answer = Some((h, body));
                    break 'outer;
                }
            }
            expiries += 1;
        }
        let Some((h, body)) = answer else {
            return Err(NativeError::Link(format!(
                "no answer to the native handshake on {path} within {} ms: is a buscue native adapter there, at {} baud?",
                settings.silence.as_millis(),
                settings.baud
            )));
        };
        let mut r = Reader::new(&body);
        let (Some(t), Some(wire)) = (r.u64(), Caps::read(&mut r)) else {
            return Err(NativeError::Malformed { path: path.into(), kind: kind::HELLO });
        };
        let frame_room = (wire.max_frame as usize).min(super::link::MAX_FRAME).saturating_sub(HEADER_LEN + CRC_LEN);
        // One single-operation transaction must fit a request and a reply.
        let per_op = frame_room.saturating_sub(8 + TX_REPORT_LEN + 1 + 3 + 2);
        let caps = Capabilities {
            max_bytes_per_op: (wire.max_bytes_per_op as usize).min(per_op).min(READ_FLAG as usize - 1),
            ten_bit: wire.has(flag::TEN_BIT),
            min_speed_hz: wire.min_speed_hz,
            max_speed_hz: wire.max_speed_hz,
            stretch_timeout_us: wire.stretch_timeout_us as u64,
            line_readback: wire.has(flag::LINE_READBACK),
            recovery: wire.has(flag::RECOVERY),
        };
        let identity = Identity {
            driver: "native".into(),
            target: path.into(),
            description: format!(
                "native protocol v{VERSION}, session {:04X}, window {}, frames up to {} bytes{}{}{}",
                h.session,
                wire.window,
                wire.max_frame,
                if wire.has(flag::PRECISE) { ", per-byte results" } else { "" },
                if wire.has(flag::REORDER) { ", keeps early requests" } else { "" },
                if wire.has(flag::SHORT) { ", short results" } else { "" }
            ),
        };
        let speed = BusSpeed::from_hz(wire.speed_hz as u64).unwrap_or(BusSpeed::STANDARD);
        let window = settings.window.map_or(wire.window, |w| w.min(wire.window)).max(1) as usize;
        let batch = settings.batch.map_or(wire.max_tx_per_request, |b| b.min(wire.max_tx_per_request)).max(1) as usize;
        Ok(NativeAdapter {
            link,
            settings,
            wire,
            caps,
            identity,
            session: h.session,
            next_seq: seq0.wrapping_add(1),
            clock: Duration::from_nanos(t),
            speed,
            failed: None,
            timer,
            batch_size: FrameSizer::new(batch),
            window,
            noise: LineNoise::default(),
            noise_seen: (0, 0),
            stats: NativeStats::default(),
        })
    }

    /// Transactions per request now in use (shrinks under loss).
    pub fn batch_in_use(&self) -> usize {
        self.batch_size.size()
    }

    /// Requests in flight allowed: the limit throughout (how many are in
    /// flight does not change the chance that one crosses).
    pub fn window_in_use(&self) -> usize {
        self.window
    }

    /// The most transactions per request and requests in flight: the
    /// adapter's limits, or the user's if lower.
    pub fn limits(&self) -> (usize, usize) {
        (self.batch_size.max(), self.window)
    }

    /// The retransmission timeout now in use.
    pub fn rto(&self) -> Duration {
        self.timer.rto()
    }

    fn path(&self) -> String {
        self.link.path().to_string()
    }

    fn send(
        &mut self,
        p: &mut Pending,
        ahead: usize,
        seq: u16,
        send_no: &mut u64,
        why: Resend,
    ) -> Result<(), NativeError> {
        let h = Header { version: VERSION, kind: p.kind, seq, session: self.session };
        p.load = ahead + p.wire;
        if why == Resend::Fast {
            // Repairs go out together, at the latest when the exchange
            // waits next (one wake-up of the adapter for the lot), so a
            // repair also waits behind the ones queued before it. On a
            // noisy line each goes twice: a resend is what the exchange
            // waits for, and the second copy (answered from the adapter's
            // cache if both arrive) saves a round trip whenever the first
            // is lost (both measured in the lossy_link bench).
            p.load += self.link.queued_bytes();
            let copies = if self.noise.share() >= NOISY { 2 } else { 1 };
            for _ in 0..copies {
                self.link.queue(h, &p.body);
            }
            p.frames += copies;
        } else {
            self.link.send(h, &p.body)?;
            p.frames += 1;
        }
        let now = Instant::now();
        p.sent_at = now;
        if p.first_sent.is_none() {
            (p.first_sent, p.first_load, p.first_send_no) = (Some(now), p.load, *send_no + 1);
        }
        p.sends += 1;
        *send_no += 1;
        p.send_no = *send_no;
        self.stats.sends += 1;
        match why {
            Resend::First => {}
            Resend::Timer => {
                self.stats.repeats += 1;
                self.stats.timeouts += 1;
            }
            Resend::Fast => {
                self.stats.repeats += 1;
                self.stats.fast_resends += 1;
            }
        }
        Ok(())
    }

    /// Re-sends at once (a repair) each request of `range` without a reply
    /// that `lost` says was lost; each waits behind the replies still to
    /// come for the requests in flight, `done..sent`.
    fn repair(
        &mut self,
        p: &mut [Pending],
        (done, sent): (usize, usize),
        range: std::ops::Range<usize>,
        base: u16,
        send_no: &mut u64,
        lost: impl Fn(usize, &Pending) -> bool,
    ) -> Result<(), NativeError> {
        let ahead = in_flight(&p[done..sent]);
        for i in range {
            if p[i].reply.is_none() && lost(i, &p[i]) {
                self.send(&mut p[i], ahead, base.wrapping_add(i as u16), send_no, Resend::Fast)?;
            }
        }
        Ok(())
    }

    /// Sends requests pipelined and collects their replies in order.
    fn exchange(&mut self, reqs: Vec<Request>) -> Result<Vec<(u8, Vec<u8>)>, NativeError> {
        if let Some(e) = &self.failed {
            return Err(e.clone());
        }
        let r = self.exchange_inner(reqs);
        if let Err(e) = &r {
            self.failed = Some(e.clone());
        }
        r
    }

    fn exchange_inner(&mut self, reqs: Vec<Request>) -> Result<Vec<(u8, Vec<u8>)>, NativeError> {
        let n = reqs.len();
        let base = self.next_seq;
        self.next_seq = self.next_seq.wrapping_add(n as u16);
        self.stats.requests += n as u64;
        let now = Instant::now();
        let mut p: Vec<Pending> = reqs
            .into_iter()
            .map(|Request { kind, body, extra, reply_len }| Pending {
                kind,
                wire: wire_len(body.len()) + wire_len(reply_len),
                reply_wire: wire_len(reply_len),
                load: 0,
                body,
                extra,
                reply: None,
                sent_at: now,
                send_no: 0,
                sends: 0,
                frames: 0,
                expiries: 0,
                first_sent: None,
                first_load: 0,
                first_send_no: 0,
                answered_at: None,
                answers: 0,
                held: false,
            })
            .collect();
        let (mut done, mut sent, mut send_no) = (0usize, 0usize, 0u64);
        // When the last new reply came; the wait starts now. The link
        // gives up `silence` after it: frames that answer nothing new (a
        // repeat, a gap notice) show an adapter alive but not a run that
        // moves, and a run that does not move must end, not hang.
        let mut progress = now;
        let seq = |i: usize| base.wrapping_add(i as u16);
        // Status probes of this exchange: number sent as, and the send
        // count when it went (what went before it).
        let mut probes: Vec<(u16, u64)> = Vec::new();
        let l = self.link.stats;
        let (good, bad) = self.noise_seen;
        self.noise.add(l.frames_received - good, l.frames_dropped - bad);
        self.noise_seen = (l.frames_received, l.frames_dropped);
        let noisy = self.noise.share() >= NOISY;
        while done < n {
            while sent < n && sent < done + self.window {
                let ahead = in_flight(&p[done..sent]);
                self.send(&mut p[sent], ahead, seq(sent), &mut send_no, Resend::First)?;
                sent += 1;
            }
            // On a lossy link, whatever went last is followed by a status
            // probe, so its loss shows one round trip later instead of
            // after its timer (most timer waits under loss were for a
            // resend, which nothing else follows).
            if noisy
                && probes.last().is_none_or(|&(_, at)| at < send_no)
                && p[done..sent].iter().any(|q| q.reply.is_none())
            {
                let number = seq(sent).wrapping_add(PROBE_AHEAD).wrapping_add(probes.len() as u16 % PROBE_SPREAD);
                let h = Header { version: VERSION, kind: kind::RUN, seq: number, session: self.session };
                self.link.queue(h, &[0]);
                send_no += 1;
                probes.push((number, send_no));
                self.stats.status_probes += 1;
            }
            // The timer runs from the oldest request's send or from the
            // last new reply, whichever is later (RFC 6298 §5.3: restart
            // on progress): on a slow line the replies before it were
            // what it waited behind.
            let oldest = &p[done];
            let (start, bytes) = timer_start(oldest, progress);
            // However far backed off, the silence limit sees at least
            // `SILENCE_TRIES` tries: an adapter speaks only when spoken to,
            // so a long wait would let a working but lossy link go quiet.
            // Its first resend comes after a probe timeout, the later ones
            // after the RTO, backed off.
            let wait = match oldest.expiries {
                0 => self.timer.probe_sized(bytes),
                e => self.timer.backed_off_sized(e - 1, bytes),
            }
            .min(self.settings.silence / SILENCE_TRIES);
            let timer = start + wait + oldest.extra;
            // A DELAY keeps the adapter quiet for as long as it asked.
            let give_up = progress + self.settings.silence + oldest.extra;
            // Checked here too, not only when a wait runs out: frames
            // already read come back without a look at the clock, and a
            // steady stream of frames that answer nothing new (notices
            // that call for a resend each time) must still end.
            let now = Instant::now();
            if now >= give_up {
                return Err(NativeError::Silent { path: self.path(), waited_ms: (now - progress).as_millis() });
            }
            let Some((h, body)) = self.link.recv(timer.min(give_up))? else {
                let now = Instant::now();
                if now >= give_up {
                    return Err(NativeError::Silent { path: self.path(), waited_ms: (now - progress).as_millis() });
                }
                // The oldest request's own timer ran out: one try. It goes
                // again, with every later one whose own timer (from its own
                // send, over all it waited behind) has run out too: sending
                // the rest as well would queue duplicates on a slow line and
                // make the next timers expire in turn (measured at 115200
                // baud: the link collapsed into repeats).
                p[done].expiries += 1;
                if let Some(limit) = self.settings.tries
                    && p[done].expiries >= limit
                {
                    let waited = p[done].first_sent.map_or(0, |t| t.elapsed().as_millis());
                    return Err(NativeError::NoReply { path: self.path(), tries: p[done].expiries, waited_ms: waited });
                }
                let mut ahead = 0;
                for (i, q) in p.iter_mut().enumerate().take(sent).skip(done) {
                    let due = i == done
                        || (!q.held && q.sent_at + self.timer.backed_off_sized(q.expiries, q.load) + q.extra <= now);
                    if q.reply.is_none() && due {
                        self.send(q, ahead, seq(i), &mut send_no, Resend::Timer)?;
                        ahead += q.reply_wire;
                    }
                }
                continue;
            };
            self.stats.received += 1;
            if h.kind == kind::BOOT {
                return Err(NativeError::Reset { path: self.path(), why: "it announced a new boot" });
            }
            if h.session != self.session {
                continue; // a stale frame from before the handshake
            }
            let now = Instant::now();
            let idx = h.seq.wrapping_sub(base) as usize;
            match h.kind {
                kind::GAP => {
                    // The adapter still waits for number `h.seq`; the request
                    // that triggered the notice is named in the body, and an
                    // adapter that keeps early requests (flag REORDER) adds
                    // whether it kept that one. Every request from `h.seq`
                    // up to it that is neither answered nor kept, and not
                    // re-sent since it went, was lost: the line keeps order,
                    // so it would have arrived first.
                    self.stats.gaps += 1;
                    let mut r = Reader::new(&body);
                    let trigger = r.u16().map(|s| s.wrapping_sub(base) as usize);
                    let kept = self.wire.has(flag::REORDER) && r.u8() == Some(1);
                    let probe = trigger
                        .and_then(|j| probes.iter().find(|&&(number, _)| number.wrapping_sub(base) as usize == j));
                    if let Some(&(_, probe_no)) = probe {
                        // The answer to a status probe: everything sent
                        // before it has reached the adapter or was lost.
                        // Before `h.seq` every request ran, so one without
                        // a reply lost it; from `h.seq` on, one neither
                        // answered nor kept was lost.
                        self.stats.status_answers += 1;
                        let lost = |i: usize, q: &Pending| q.send_no < probe_no && (i <= idx || !q.held);
                        self.repair(&mut p, (done, sent), done..sent, base, &mut send_no, lost)?;
                        continue;
                    }
                    let Some(j) = trigger.filter(|&j| j < sent) else { continue };
                    if kept {
                        p[j].held = true;
                    }
                    let limit = p[j].send_no;
                    let lost = |_: usize, q: &Pending| !q.held && q.send_no <= limit;
                    self.repair(&mut p, (done, sent), idx.min(n)..j + 1, base, &mut send_no, lost)?;
                }
                kind::REFUSED if body.first() == Some(&refusal::SESSION) => {
                    return Err(NativeError::Reset { path: self.path(), why: "it no longer knows this session" });
                }
                kind::REFUSED if body.first() == Some(&refusal::VERSION) => {
                    return Err(NativeError::Version {
                        path: self.path(),
                        theirs: body.get(1).copied().unwrap_or(h.version),
                    });
                }
                k if idx < sent && p[idx].reply.is_none() && (k == kind::REFUSED || k == p[idx].kind | kind::REPLY) => {
                    p[idx].reply = Some((k, body));
                    p[idx].answered_at = Some(now);
                    p[idx].answers = 1;
                    // Every try but one (so far) was lost: what frames
                    // of this length go through (sizes follow the loss).
                    self.batch_size.tried(p[idx].frames, 1, p[idx].wire);
                    // Karn's rule: a reply to a repeated request could
                    // answer any of its sends, so it is no sample; nor is
                    // one that includes a DELAY's wait. Timed as its timer
                    // runs: from its send or the reply before it.
                    // Nor is one that waited behind a repair: a request
                    // re-sent after it went out runs first, so its reply
                    // includes that resend's round trip (Karn's reasoning,
                    // extended to the pipeline).
                    let repaired = p[done..idx].iter().any(|q| q.sends > 1 && q.send_no > p[idx].send_no);
                    if p[idx].sends == 1 && p[idx].extra.is_zero() && !p[idx].held && !repaired {
                        let (start, bytes) = timer_start(&p[idx], progress);
                        self.timer.sample_sized(now.saturating_duration_since(start), bytes);
                        self.batch_size.clean();
                    }
                    // Replies come in request order, so a request before
                    // this one still without a reply (and sent before it)
                    // lost its reply on the way: ask again at once.
                    let limit = p[idx].send_no;
                    let lost = |_: usize, q: &Pending| q.send_no < limit;
                    self.repair(&mut p, (done, sent), done..idx, base, &mut send_no, lost)?;
                    progress = now;
                    while done < n && p[done].reply.is_some() {
                        done += 1;
                    }
                }
                // Another reply to a request sent more than once: once
                // every frame sent has been answered, all reached the
                // adapter and came back, so the first answer was to the
                // first send (the line keeps order, and the adapter
                // answers in arrival order) and the resend was needless.
                // That answer times the link after all: without it, a
                // timer that fell short (a host busy for a while) would
                // never learn the longer round trip, since every reply
                // would follow a resend (the duplicate-reply detection of
                // RFC 3708 §2, in place of TCP's D-SACK).
                k if idx < sent && k == p[idx].kind | kind::REPLY && p[idx].answers < p[idx].frames => {
                    // Not a loss after all: that try was answered too.
                    p[idx].answers += 1;
                    self.batch_size.tried(0, 1, 0);
                    let q = &p[idx];
                    let repaired = p[..idx].iter().any(|r| r.sends > 1 && r.send_no > q.first_send_no);
                    // Each frame answered: this happens once per request.
                    if q.answers == q.frames
                        && q.sends > 1
                        && q.extra.is_zero()
                        && !q.held
                        && !repaired
                        && let (Some(sent_at), Some(at)) = (q.first_sent, q.answered_at)
                    {
                        self.timer.sample_sized(at.saturating_duration_since(sent_at), q.first_load);
                    }
                }
                _ => {} // a repeat reply we already have
            }
        }
        self.link.flush()?;
        let path = self.path();
        p.into_iter()
            .map(|q| {
                let (k, body) = q.reply.expect("every request has its reply when the loop ends");
                if k == kind::REFUSED {
                    let code = body.first().copied().unwrap_or(0);
                    return Err(NativeError::Refused { path: path.clone(), kind: q.kind, code });
                }
                if let Some(t) = Reader::new(&body).u64() {
                    self.clock = self.clock.max(Duration::from_nanos(t));
                }
                Ok((k, body))
            })
            .collect()
    }

    /// One control request with a small reply; returns the body after the
    /// adapter time.
    fn control(&mut self, k: u8, body: Vec<u8>, extra: Duration) -> Result<Vec<u8>, NativeError> {
        let mut r = self.exchange(vec![Request { kind: k, body, extra, reply_len: 8 + 5 }])?;
        let (_, body) = r.pop().ok_or_else(|| NativeError::Malformed { path: self.path(), kind: k })?;
        Ok(body.get(8..).unwrap_or_default().to_vec())
    }

    /// Groups transactions into requests that fit the frame and batch
    /// limits, up to `batch` per request; returns the groups as index
    /// ranges.
    fn pack(&self, txs: &[Transaction], batch: usize) -> Result<Vec<std::ops::Range<usize>>, String> {
        let room = (self.wire.max_frame as usize).min(super::link::MAX_FRAME).saturating_sub(HEADER_LEN + CRC_LEN);
        let mut groups = Vec::new();
        let (mut start, mut req, mut rep) = (0usize, 1usize, 8usize);
        for (i, tx) in txs.iter().enumerate() {
            if tx.ops.iter().any(Operation::is_counted) {
                // Protocol version 1 has no counted read: its adapter side
                // runs on embedded-hal, whose operations have fixed lengths.
                return Err(format!(
                    "transaction {} has a counted read (an SMBus block read); the native protocol cannot carry one",
                    i + 1
                ));
            }
            let (w, r) = tx.byte_counts();
            let (tq, tr) = encoded_len(tx, TX_REPORT_LEN);
            if 1 + tq > room || 8 + tr > room || tx.ops.len() > self.wire.max_ops_per_tx as usize {
                return Err(format!(
                    "transaction {} ({} operations, {w} bytes out, {r} in) does not fit one frame of this adapter \
                     ({} bytes, {} operations)",
                    i + 1,
                    tx.ops.len(),
                    self.wire.max_frame,
                    self.wire.max_ops_per_tx
                ));
            }
            if i > start && (i - start == batch || req + tq > room || rep + tr > room) {
                groups.push(start..i);
                (start, req, rep) = (i, 1, 8);
            }
            req += tq;
            rep += tr;
        }
        if start < txs.len() {
            groups.push(start..txs.len());
        }
        Ok(groups)
    }
}

/// How long a handshake try waits before the link has been timed: four
/// times the bytes of a HELLO and its answer (about 70 with framing) at
/// `baud`, 10 bits a byte, and at least 10 ms for a USB adapter's polling
/// and the host's scheduling (common practice).
fn hello_wait(baud: u32) -> Duration {
    let wire = Duration::from_secs_f64(4.0 * 70.0 * 10.0 / baud.max(1) as f64);
    wire.max(Duration::from_millis(10))
}

/// Bytes a short result header usually takes on the wire, for the
/// timer's byte count: a status and two three-byte varints (bus times of
/// 16 µs to 2 ms). A longer one only makes a timer a little short.
const SHORT_REPORT_GUESS: usize = 7;

/// Transactions [`NativeAdapter::frame_cost`] looks at to learn what one
/// adds to a frame: enough for a mix, few enough to be cheap.
const COST_SAMPLE: usize = 64;

/// Windows' worth of requests per round of [`Adapter::execute_batch`]:
/// enough to keep the pipe full, few enough that the sizes adapt soon.
const ROUND_WINDOWS: usize = 4;

impl NativeAdapter {
    /// What a request of these transactions costs on the wire and in
    /// time, for the batch size ([`FrameSizer::choose`]).
    fn frame_cost(&self, txs: &[Transaction]) -> FrameCost {
        let report = if self.wire.has(flag::SHORT) { SHORT_REPORT_GUESS } else { TX_REPORT_LEN };
        let sample = &txs[..txs.len().min(COST_SAMPLE)];
        let per_tx = sample
            .iter()
            .map(|t| {
                let (q, r) = encoded_len(t, report);
                q + r
            })
            .sum::<usize>() as f64
            / sample.len().max(1) as f64;
        // A request's count byte, the reply's adapter time, and framing
        // both ways; COBS adds about one byte in 254.
        let fixed = wire_len(1) + wire_len(8);
        let srtt = self.timer.srtt().unwrap_or(self.timer.rto());
        FrameCost {
            fixed_bytes: fixed as f64,
            bytes_per_tx: per_tx * 255.0 / 254.0,
            // The requests in flight share the fixed part of a round trip.
            fixed_time: srtt / self.window.max(1) as u32,
            per_byte: self.timer.per_byte(),
        }
    }

    /// Runs one round of a batch: packs, exchanges and decodes, pushing
    /// one outcome per transaction onto `out`.
    fn round(&mut self, txs: &[Transaction], batch: usize, out: &mut Vec<Outcome>) -> Result<(), NativeError> {
        // As many requests as the batch needs, of even sizes: a round
        // starts with an empty pipe and the adapter answers a request once
        // all of it has crossed, so on a slow line the first request's
        // length is time the reply line stands idle. 40 transactions at a
        // batch of 32 go as 20 + 20, not 32 + 8 (measured in the
        // lossy_link bench: 115200 baud 750 -> 870 tx/s, 1 Mbaud about
        // 5,900 -> 6,100). A ramp of smaller first requests would gain
        // more but makes the later, larger requests' timers (restarted
        // on the smaller ones' replies) fire while they still cross.
        let even = even_batch(txs.len(), batch);
        let groups = self.pack(txs, even).map_err(|_| NativeError::Malformed { path: self.path(), kind: kind::RUN })?;
        // Short results where the adapter has them: a success's header
        // shrinks from 16 bytes to about 7 (status and two varint times),
        // which on a slow line is most of a register read's reply.
        let short = self.wire.has(flag::SHORT);
        let (run_kind, report_len) =
            if short { (kind::RUN_SHORT, SHORT_REPORT_GUESS) } else { (kind::RUN, TX_REPORT_LEN) };
        let reqs = groups
            .iter()
            .map(|g| Request {
                kind: run_kind,
                body: encode_run(&txs[g.clone()]),
                extra: Duration::ZERO,
                reply_len: 8 + txs[g.clone()].iter().map(|t| encoded_len(t, report_len).1).sum::<usize>(),
            })
            .collect();
        let replies = self.exchange(reqs)?;
        for (g, (_, body)) in groups.iter().zip(&replies) {
            let mut r = Reader::new(body);
            r.u64();
            for tx in &txs[g.clone()] {
                let rep = if short { TxReport::read_short(&mut r) } else { TxReport::read(&mut r) };
                let o = rep.and_then(|rep| outcome_of(tx, &rep, &mut r, self.speed));
                out.push(o.ok_or_else(|| NativeError::Malformed { path: self.path(), kind: run_kind })?);
            }
            // More results or data bytes than the request asked for: the
            // reply answers something else.
            if r.remaining() != 0 {
                return Err(NativeError::Malformed { path: self.path(), kind: run_kind });
            }
        }
        Ok(())
    }
}

/// The size of each of the fewest requests of at most `batch` that carry
/// `n` transactions, as even as can be ([`NativeAdapter::round`]).
fn even_batch(n: usize, batch: usize) -> usize {
    let batch = batch.max(1);
    n.div_ceil(n.div_ceil(batch).max(1)).clamp(1, batch)
}

/// Bytes one transaction takes in a `RUN` request (address, count, a
/// length per operation, the bytes written) and in its reply (a result
/// header of `report` bytes and the bytes read).
fn encoded_len(tx: &Transaction, report: usize) -> (usize, usize) {
    let (w, r) = tx.byte_counts();
    (3 + 2 * tx.ops.len() + w, report + r)
}

fn encode_run(txs: &[Transaction]) -> Vec<u8> {
    let size = 1 + txs.iter().map(|t| encoded_len(t, 0).0).sum::<usize>();
    let mut buf = vec![0u8; size];
    let mut w = Writer::new(&mut buf);
    w.u8(txs.len() as u8);
    for tx in txs {
        let a = tx.address.value() | if tx.address.is_ten_bit() { TEN_BIT_FLAG } else { 0 };
        w.u16(a);
        w.u8(tx.ops.len() as u8);
        for op in &tx.ops {
            match op {
                Operation::Write(b) => {
                    w.u16(b.len() as u16);
                    w.bytes(b);
                }
                Operation::Read(n) => w.u16(*n as u16 | READ_FLAG),
                Operation::ReadCounted { .. } => unreachable!("refused by pack()"),
            }
        }
    }
    debug_assert_eq!(w.ok(), Some(size));
    buf
}

/// Rebuilds an [`Outcome`] from one transaction's report and read data.
fn outcome_of(tx: &Transaction, rep: &TxReport, r: &mut Reader<'_>, speed: BusSpeed) -> Option<Outcome> {
    let precise = rep.op != UNKNOWN_OP;
    let first_write = tx.ops.iter().position(|o| matches!(o, Operation::Write(_))).unwrap_or(0);
    let stop = match rep.status {
        Status::Ok => tx.ops.len(),
        Status::DataNack if !precise => first_write,
        _ if !precise => 0,
        _ => rep.op as usize,
    };
    let mut ops = Vec::with_capacity(tx.ops.len());
    for (i, op) in tx.ops.iter().enumerate().take(stop + 1) {
        let mut oo = OpOutcome::default();
        if i < stop {
            match op {
                Operation::Write(b) => oo.acks = vec![true; b.len()],
                Operation::Read(n) if rep.has_data_of(i) => oo.data = r.bytes(*n)?.to_vec(),
                Operation::Read(_) | Operation::ReadCounted { .. } => {}
            }
        } else if rep.status == Status::DataNack && rep.index != UNKNOWN_INDEX {
            oo.acks = vec![true; rep.index as usize];
            oo.acks.push(false);
        }
        if i < tx.ops.len() {
            ops.push(oo);
        }
    }
    let fault = rep.failure().map(|failure| match failure {
        // An imprecise adapter cannot say which phase was NACKed: it is
        // the one the transaction stopped at.
        Failure::AddressNack { .. } if !precise => {
            let read = tx.ops.get(stop).is_some_and(|o| o.direction() == Direction::Read);
            native_fault::fault_of(Failure::AddressNack { read }, stop, 0)
        }
        f => native_fault::fault_of(f, stop, if precise { rep.index as usize } else { 0 }),
    });
    let mut outcome =
        Outcome { ops, bus_time: Duration::ZERO, measured: Some(Duration::from_nanos(rep.measured_ns as u64)), fault };
    // An adapter that does not time the bus: model what crossed it, where
    // the report says where a NACK cut the transaction short; an
    // imprecise report (its fault placed conservatively) is timed whole,
    // an upper bound.
    outcome.bus_time = if rep.bus_ns != UNKNOWN_NS {
        Duration::from_nanos(rep.bus_ns as u64)
    } else if precise {
        breakdown_events(&tx.events_crossed(&outcome), speed).total()
    } else {
        transaction_time(tx, speed)
    };
    Some(outcome)
}

impl Adapter for NativeAdapter {
    fn identity(&self) -> &Identity {
        &self.identity
    }

    fn capabilities(&self) -> &Capabilities {
        &self.caps
    }

    fn speed(&self) -> BusSpeed {
        self.speed
    }

    fn set_speed(&mut self, speed: BusSpeed) -> Result<BusSpeed, AdapterError> {
        let body = self.control(kind::SPEED, speed.hz().to_le_bytes().to_vec(), Duration::ZERO)?;
        let mut r = Reader::new(&body);
        let malformed = || NativeError::Malformed { path: self.path(), kind: kind::SPEED };
        let (Some(status), Some(hz)) = (r.u8(), r.u32()) else {
            return Err(malformed().into());
        };
        if status != 0 {
            return Err(AdapterError::Input(format!(
                "the adapter refused {speed}: it clocks {} Hz to {} Hz",
                self.caps.min_speed_hz, self.caps.max_speed_hz
            )));
        }
        self.speed = BusSpeed::from_hz(hz as u64).map_err(|_| malformed())?;
        Ok(self.speed)
    }

    fn execute(&mut self, tx: &Transaction) -> Outcome {
        self.execute_batch(std::slice::from_ref(tx)).pop().unwrap_or_else(|| Outcome::adapter_failure("no outcome"))
    }

    fn execute_batch(&mut self, txs: &[Transaction]) -> Vec<Outcome> {
        if txs.is_empty() {
            return Vec::new();
        }
        // Every transaction is checked before anything is sent.
        if let Err(msg) = self.pack(txs, usize::MAX) {
            return (0..txs.len()).map(|_| Outcome::adapter_failure(msg.clone())).collect();
        }
        let mut out = Vec::with_capacity(txs.len());
        // Rounds of a few windows' worth, so the batch in use follows
        // the loss: each round is packed at the size of its start.
        while out.len() < txs.len() {
            let at = out.len();
            let cost = self.frame_cost(&txs[at..]);
            let batch = self.batch_size.choose(cost);
            let end = txs.len().min(at + batch * self.window * ROUND_WINDOWS);
            if let Err(e) = self.round(&txs[at..end], batch, &mut out) {
                self.failed = Some(e.clone());
                out.resize_with(txs.len(), || Outcome::adapter_failure(e.to_string()));
            }
        }
        out
    }

    fn recover(&mut self) -> Result<Recovery, AdapterError> {
        let b = self.control(kind::RECOVER, Vec::new(), Duration::ZERO)?;
        match b.as_slice() {
            [0, pulses, released, ..] => Ok(Recovery { pulses: *pulses, released: *released != 0 }),
            [1, ..] => {
                Err(AdapterError::Unsupported(format!("the adapter on {} cannot clock a stuck bus free", self.path())))
            }
            _ => Err(NativeError::Malformed { path: self.path(), kind: kind::RECOVER }.into()),
        }
    }

    fn line_levels(&mut self) -> Result<Option<LineLevels>, AdapterError> {
        let b = self.control(kind::LINES, Vec::new(), Duration::ZERO)?;
        match b.as_slice() {
            [0, bits, ..] => Ok(Some(LineLevels { sda: bits & 1 != 0, scl: bits & 2 != 0 })),
            [1, ..] => Ok(None),
            _ => Err(NativeError::Malformed { path: self.path(), kind: kind::LINES }.into()),
        }
    }

    fn now(&self) -> Duration {
        self.clock
    }

    fn delay(&mut self, d: Duration) {
        let ns = d.as_nanos().min(u64::MAX as u128) as u64;
        // A failure is kept in `failed` and reported by the next call.
        let _ = self.control(kind::DELAY, ns.to_le_bytes().to_vec(), d);
    }

    fn link_counters(&self) -> Option<LinkCounters> {
        let l = self.link.stats;
        Some(LinkCounters {
            frames_sent: l.frames_sent,
            frames_received: l.frames_received,
            frames_dropped: l.frames_dropped,
            retransmissions: self.stats.repeats,
            requests: self.stats.requests,
            timeouts: self.stats.timeouts,
            fast_resends: self.stats.fast_resends,
            gaps: self.stats.gaps,
            status_probes: self.stats.status_probes,
            rto: self.timer.rto(),
            batch: self.batch_size.size() as u32,
            batch_max: self.batch_size.max() as u32,
            window: self.window as u32,
            window_max: self.window as u32,
        })
    }

    fn close(&mut self) -> Result<(), AdapterError> {
        // Every request leaves the bus idle (STOP sent), so there is
        // nothing to undo; a link failure was already reported.
        Ok(())
    }
}

/// Whether something on `path` answers the native handshake; the
/// adapter's description if so.
pub fn probe(path: &str, settings: NativeSettings) -> Result<String, NativeError> {
    NativeAdapter::open(path, settings).map(|a| a.identity.description)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::bus::{Address, Fault};

    fn tx() -> Transaction {
        Transaction::new(
            Address::Seven(0x50),
            vec![Operation::Read(1), Operation::Write(vec![0x00, 0x10, 0xAA]), Operation::Read(2)],
        )
    }

    // A precise data NACK at byte 2 of operation 1: the read before it
    // completed, bytes 0-1 were ACKed, byte 2 NACKed, nothing after.
    #[test]
    fn precise_reports_rebuild_the_per_byte_outcome() {
        let rep = TxReport { status: Status::DataNack, op: 1, index: 2, info: 0, bus_ns: 900, measured_ns: 5 };
        let data = [0x42];
        let o = outcome_of(&tx(), &rep, &mut Reader::new(&data), BusSpeed::STANDARD).unwrap();
        assert_eq!(o.ops.len(), 2);
        assert_eq!(o.ops[0].data, [0x42]);
        assert_eq!(o.ops[1].acks, [true, true, false]);
        assert_eq!(o.fault, Some(Fault::DataNack { op: 1, index: 2 }));
        assert_eq!((o.bus_time, o.measured), (Duration::from_nanos(900), Some(Duration::from_nanos(5))));
    }

    // A precise NACK from an adapter that does not time the bus: the host
    // models what crossed it. Operation 0 reads one byte (START, address
    // byte, one data byte), then the write phase's Sr and address byte
    // and bytes 0-2 of operation 1, then the STOP: the same events as a
    // transaction that ends there, so the same modelled time.
    #[test]
    fn untimed_precise_nack_is_timed_by_what_crossed() {
        let rep = TxReport { status: Status::DataNack, op: 1, index: 2, info: 0, bus_ns: UNKNOWN_NS, measured_ns: 0 };
        let o = outcome_of(&tx(), &rep, &mut Reader::new(&[0x42]), BusSpeed::STANDARD).unwrap();
        let crossed =
            Transaction::new(Address::Seven(0x50), vec![Operation::Read(1), Operation::Write(vec![0x00, 0x10, 0xAA])]);
        assert_eq!(o.bus_time, transaction_time(&crossed, BusSpeed::STANDARD));
        assert!(o.bus_time < transaction_time(&tx(), BusSpeed::STANDARD));
    }

    // The fewest requests, even sizes: 40 at 32 is two of 20; 65 at 32 is
    // three of at most 22 (22 + 22 + 21); a multiple of the batch is the
    // batch; never zero, never above the batch.
    #[test]
    fn a_round_goes_in_even_requests() {
        assert_eq!(even_batch(40, 32), 20);
        assert_eq!(even_batch(65, 32), 22);
        assert_eq!(even_batch(128, 32), 32);
        assert_eq!(even_batch(33, 32), 17);
        assert_eq!((even_batch(1, 32), even_batch(0, 32), even_batch(10, 1), even_batch(5, 0)), (1, 1, 1, 1));
    }

    // Through embedded-hal alone (op unknown) no read data comes back and
    // the NACK is placed at the first write, byte 0, with no ACK list.
    #[test]
    fn imprecise_reports_are_placed_conservatively() {
        let rep = TxReport {
            status: Status::DataNack,
            op: UNKNOWN_OP,
            index: UNKNOWN_INDEX,
            info: 0,
            bus_ns: UNKNOWN_NS,
            measured_ns: 0,
        };
        let o = outcome_of(&tx(), &rep, &mut Reader::new(&[]), BusSpeed::STANDARD).unwrap();
        assert_eq!(o.fault, Some(Fault::DataNack { op: 1, index: 0 }));
        assert!(o.ops.iter().all(|op| op.data.is_empty()) && o.ops[1].acks.is_empty());
        assert_eq!(o.bus_time, transaction_time(&tx(), BusSpeed::STANDARD), "bus time modelled on the host");
        let short = TxReport { status: Status::Ok, ..rep };
        assert!(outcome_of(&tx(), &short, &mut Reader::new(&[1, 2]), BusSpeed::STANDARD).is_none(), "short data");
    }
}
