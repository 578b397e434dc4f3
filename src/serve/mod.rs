//! Serving a simulated bench on a pseudo-terminal, so a second buscue (or
//! anyone's host code) can open it like real hardware.
//!
//! Contract:
//! - [`serve`] reads the port on a helper thread (so the peer's writes
//!   never block on us), hands arriving bytes to a [`Server`] (the
//!   protocol), and writes its answers back. It returns when the peer
//!   closes the port ([`Peers::One`]), when an injected hang-up fires, or
//!   when `stop` is set; with [`Peers::Many`] a peer closing the port is
//!   not the end: the next one to open it is served by the same adapter
//!   (the bench keeps its state, as hardware would).
//! - [`LinkFaults`] injects seeded link trouble in both directions:
//!   dropped bytes, flipped bits, added latency per answer, a reset of the
//!   served adapter in the middle of a frame, a hang-up after N frames, a
//!   dead line for a while after N frames;
//!   and paces bytes like a UART at a given baud rate ([`Pacer`]).
//! - [`NativeServer`] speaks the native protocol through the same
//!   `buscue_bridge` library firmware links, over [`SimBoard`];
//!   [`DialectServer`](dialect::DialectServer) speaks a text
//!   dialect. Both are [`Server`]s on this one loop, so every fault and
//!   end condition works the same for both.

pub mod board;
pub mod dialect;

use std::collections::VecDeque;
use std::io::{self, Read, Write};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::mpsc;
use std::time::Duration;

use buscue_bridge::wire::{Caps, flag};
use buscue_bridge::{Bridge, Link};
use serialport::{SerialPort, TTYPort};

use crate::adapter::Adapter;
use crate::sim::SimAdapter;
use crate::sim::rng::SplitMix64;

use board::SimBoard;

/// Seeded link fault injection. Probabilities are per byte.
#[derive(Debug, Clone, Default)]
pub struct LinkFaults {
    /// Probability that a byte is lost.
    pub drop: f64,
    /// Probability that one bit of a byte is inverted.
    pub flip: f64,
    /// Added before each answer the adapter sends.
    pub latency: Duration,
    /// Bytes cross like a UART at this baud rate (10 bits a byte), each
    /// direction on its own line; `None`: as fast as the pseudo-terminal.
    pub baud: Option<u32>,
    /// After this many frames received, the adapter resets in the middle
    /// of the next one (it announces a new session).
    pub reset_after: Option<u64>,
    /// After this many frames received, the adapter hangs up (closes the
    /// port).
    pub hang_up_after: Option<u64>,
    /// After this many frames received, the line goes dead for this long:
    /// every byte either way is lost (a loose connector), then it works
    /// again.
    pub stall: Option<(u64, Duration)>,
    pub seed: u64,
}

/// Bytes in one direction after the faults.
struct Mangler {
    drop: f64,
    flip: f64,
    rng: SplitMix64,
}

impl Mangler {
    fn apply(&mut self, bytes: &[u8], out: &mut Vec<u8>) {
        if self.drop <= 0.0 && self.flip <= 0.0 {
            out.extend_from_slice(bytes);
            return;
        }
        for &b in bytes {
            if self.rng.chance(self.drop) {
                continue;
            }
            let b = if self.rng.chance(self.flip) { b ^ (1 << (self.rng.next_u64() % 8)) } else { b };
            out.push(b);
        }
    }
}

/// One direction of a paced line: a byte takes 10 bit times (start, 8
/// data, stop: 8N1), and bytes queue behind each other.
pub struct Pacer {
    byte_time: Duration,
    /// When the line finishes the bytes handed to it so far.
    free_at: std::time::Instant,
}

impl Pacer {
    pub fn new(baud: u32) -> Self {
        Pacer { byte_time: Duration::from_secs_f64(10.0 / baud.max(1) as f64), free_at: std::time::Instant::now() }
    }

    /// When `n` more bytes, handed over now, have crossed the line.
    pub fn carry(&mut self, n: usize) -> std::time::Instant {
        let now = std::time::Instant::now();
        self.free_at = self.free_at.max(now) + self.byte_time * n as u32;
        self.free_at
    }

    /// Waits until `n` more bytes have crossed.
    pub fn wait(&mut self, n: usize) {
        let at = self.carry(n);
        let now = std::time::Instant::now();
        if at > now {
            std::thread::sleep(at - now);
        }
    }
}

/// The adapter's side of the port: answers go out through it, with the
/// outgoing faults applied per frame (at [`Link::flush`]).
pub struct ServedLink {
    port: TTYPort,
    out: Vec<u8>,
    mangled: Vec<u8>,
    faults: Mangler,
    latency: Duration,
    pace: Option<Pacer>,
    inbox: VecDeque<u8>,
}

impl ServedLink {
    /// The next byte the peer sent (after the incoming faults).
    pub fn next_byte(&mut self) -> Option<u8> {
        self.inbox.pop_front()
    }
}

impl Link for ServedLink {
    type Error = io::Error;

    fn read(&mut self, buf: &mut [u8]) -> io::Result<usize> {
        let n = buf.len().min(self.inbox.len());
        for (d, s) in buf.iter_mut().zip(self.inbox.drain(..n)) {
            *d = s;
        }
        Ok(n)
    }

    fn write(&mut self, bytes: &[u8]) -> io::Result<()> {
        self.out.extend_from_slice(bytes);
        Ok(())
    }

    fn flush(&mut self) -> io::Result<()> {
        if !self.latency.is_zero() {
            std::thread::sleep(self.latency);
        }
        self.mangled.clear();
        self.faults.apply(&self.out, &mut self.mangled);
        self.out.clear();
        // The frame leaves when its last byte has crossed the line: the
        // host reads it no sooner than a UART would deliver it.
        if let Some(p) = &mut self.pace {
            p.wait(self.mangled.len());
        }
        self.port.write_all(&self.mangled)
    }
}

/// A protocol served on the port.
pub trait Server {
    /// Handles some of what is waiting in the link's inbox (at least one
    /// byte); answers through the link. Called until the inbox is empty.
    fn poll(&mut self, link: &mut ServedLink) -> io::Result<()>;
    /// Frames (or lines) received so far, for the fault triggers.
    fn frames(&self) -> u64;
    /// Whether part of a frame has been received.
    fn in_frame(&self) -> bool;
    /// Simulates a reset of the adapter: forget all link state, announce.
    fn reset(&mut self, link: &mut ServedLink) -> io::Result<()>;
    /// Called once before the first byte, e.g. to announce a boot.
    fn start(&mut self, _link: &mut ServedLink) -> io::Result<()> {
        Ok(())
    }
    /// The peer closed the port and another may open it: forget what the
    /// last one left half said. (An adapter does not see a host close its
    /// port; what it keeps is what a real one would keep.)
    fn peer_left(&mut self) {}
}

/// Frame size and pipelining window of the served native adapter.
pub const SERVED_FRAME: usize = 1024;
pub const SERVED_WINDOW: usize = 8;

/// The native protocol over a simulated bench.
pub struct NativeServer {
    bridge: Box<Bridge<SERVED_FRAME, SERVED_WINDOW, SERVED_WINDOW>>,
    pub board: SimBoard,
    caps: Caps,
    sessions: SplitMix64,
    frames: u64,
    in_frame: bool,
    /// What the bridges before the last reset counted: a reset starts a
    /// new bridge (and session), not a new count of what was served.
    earlier: buscue_bridge::bridge::BridgeStats,
}

impl NativeServer {
    pub fn new(sim: SimAdapter, seed: u64) -> Self {
        let c = sim.capabilities().clone();
        let mut flags = flag::PRECISE | flag::SHORT;
        for (on, f) in
            [(c.ten_bit, flag::TEN_BIT), (c.line_readback, flag::LINE_READBACK), (c.recovery, flag::RECOVERY)]
        {
            if on {
                flags |= f;
            }
        }
        let caps = Caps {
            max_frame: SERVED_FRAME as u16,
            max_bytes_per_op: c.max_bytes_per_op.min(u16::MAX as usize) as u16,
            max_ops_per_tx: buscue_bridge::bridge::MAX_OPS as u8,
            max_tx_per_request: 32,
            window: SERVED_WINDOW as u8,
            flags,
            min_speed_hz: c.min_speed_hz,
            max_speed_hz: c.max_speed_hz,
            speed_hz: sim.speed().hz(),
            stretch_timeout_us: c.stretch_timeout_us.min(u32::MAX as u64) as u32,
        };
        let mut sessions = SplitMix64::new(seed ^ 0x5E55_1011);
        let session = sessions.next_u64() as u16;
        NativeServer {
            bridge: Box::new(Bridge::new(caps, session)),
            board: SimBoard::new(sim),
            caps,
            sessions,
            frames: 0,
            in_frame: false,
            earlier: Default::default(),
        }
    }

    /// What was served since the start, across adapter resets.
    pub fn bridge_stats(&self) -> buscue_bridge::bridge::BridgeStats {
        let now = self.bridge.stats();
        buscue_bridge::bridge::BridgeStats {
            executed: self.earlier.executed + now.executed,
            dropped: self.earlier.dropped + now.dropped,
        }
    }
}

impl Server for NativeServer {
    fn poll(&mut self, link: &mut ServedLink) -> io::Result<()> {
        // One byte per call, so the fault triggers can act between any two.
        let Some(b) = link.next_byte() else { return Ok(()) };
        if b == 0 {
            if self.in_frame {
                self.frames += 1;
            }
            self.in_frame = false;
        } else {
            self.in_frame = true;
        }
        self.bridge.feed(b, link, &mut self.board)
    }

    fn frames(&self) -> u64 {
        self.frames
    }

    fn in_frame(&self) -> bool {
        self.in_frame
    }

    fn reset(&mut self, link: &mut ServedLink) -> io::Result<()> {
        let old = self.bridge.caps().speed_hz;
        let mut session = self.sessions.next_u64() as u16;
        if session == self.bridge.session() {
            session = session.wrapping_add(1);
        }
        self.earlier = self.bridge_stats();
        *self.bridge = Bridge::new(Caps { speed_hz: old, ..self.caps }, session);
        self.in_frame = false;
        self.bridge.announce(link)
    }

    fn start(&mut self, link: &mut ServedLink) -> io::Result<()> {
        self.bridge.announce(link)
    }
}

/// Why serving stopped.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ServeEnd {
    /// The peer closed the port (and only one was to be served).
    PeerClosed,
    /// The injected hang-up fired.
    HungUp,
    /// `stop` was set.
    Stopped,
}

/// How many peers, one after another, a [`serve`] call serves.
pub enum Peers<'a> {
    /// The first; serving ends when it closes the port.
    One,
    /// Any number: when one closes the port, the next may open it. The
    /// function is told each time one leaves.
    Many(&'a mut dyn FnMut()),
}

/// Where the dead-line fault ([`LinkFaults::stall`]) stands.
#[derive(Clone, Copy)]
enum Stall {
    Armed,
    Dead(std::time::Instant),
    Over,
}

/// What the reader thread hands the serving loop.
enum Incoming {
    /// Bytes, and when a paced line has delivered the last of them.
    Bytes(Vec<u8>, Option<std::time::Instant>),
    /// The peer closed its side (the master reads EIO while no one has
    /// the port open).
    Closed,
}

/// How often the reader looks again for a new peer while none has the
/// port open: the kernel offers no wake-up for a pseudo-terminal being
/// opened.
const NEXT_PEER_POLL: Duration = Duration::from_millis(50);

/// Serves `server` on the master side of a pseudo-terminal. `slave`, if
/// given, is held open until the first byte arrives, so the port does not
/// read as hung up before a peer has opened it.
pub fn serve<S: Server>(
    port: TTYPort,
    slave: Option<TTYPort>,
    server: &mut S,
    faults: &LinkFaults,
    stop: &AtomicBool,
    mut peers: Peers<'_>,
) -> io::Result<ServeEnd> {
    let mut reader = port.try_clone_native().map_err(io::Error::from)?;
    reader.set_timeout(Duration::from_millis(200)).map_err(io::Error::from)?;
    let (tx, rx) = mpsc::channel::<Incoming>();
    let reader_stop = std::sync::Arc::new(AtomicBool::new(false));
    let rs = reader_stop.clone();
    // Timed as they arrive, on this thread, so the incoming line runs
    // while the adapter is busy sending (a UART is full duplex).
    let mut pace_in = faults.baud.map(Pacer::new);
    let thread = std::thread::spawn(move || {
        let mut buf = [0u8; 4096];
        let mut open = true;
        while !rs.load(Ordering::Relaxed) {
            match reader.read(&mut buf) {
                Ok(0) => break,
                Ok(n) => {
                    open = true;
                    // A paced line delivers each frame once its own last
                    // byte has crossed: one read can hold several frames,
                    // and the first must not wait for the last (a frame
                    // ends at its delimiter).
                    let gone = match pace_in.as_mut() {
                        None => tx.send(Incoming::Bytes(buf[..n].to_vec(), None)).is_err(),
                        Some(pace) => buf[..n].split_inclusive(|&b| b == 0).any(|piece| {
                            tx.send(Incoming::Bytes(piece.to_vec(), Some(pace.carry(piece.len())))).is_err()
                        }),
                    };
                    if gone {
                        break;
                    }
                }
                Err(e) if e.kind() == io::ErrorKind::TimedOut || e.kind() == io::ErrorKind::Interrupted => {}
                // No one has the slave side open (the master reads EIO,
                // or polls as hung up). Said once per peer; then look
                // again until the next one opens it.
                Err(e) if no_peer(&e) => {
                    if open && tx.send(Incoming::Closed).is_err() {
                        break;
                    }
                    open = false;
                    std::thread::sleep(NEXT_PEER_POLL);
                }
                Err(_) => break,
            }
        }
    });
    let mut port = port;
    port.set_timeout(Duration::from_secs(5)).map_err(io::Error::from)?;
    let mut link = ServedLink {
        port,
        out: Vec::new(),
        mangled: Vec::new(),
        faults: Mangler { drop: faults.drop, flip: faults.flip, rng: SplitMix64::new(faults.seed ^ 0x0A) },
        latency: faults.latency,
        pace: faults.baud.map(Pacer::new),
        inbox: VecDeque::new(),
    };

    let mut incoming = Mangler { drop: faults.drop, flip: faults.flip, rng: SplitMix64::new(faults.seed ^ 0x0B) };
    server.start(&mut link)?;
    let mut slave = slave;
    let mut reset_done = false;
    let mut stall = if faults.stall.is_some() { Stall::Armed } else { Stall::Over };
    let mut chunk = Vec::new();
    let end = loop {
        if stop.load(Ordering::Relaxed) {
            break ServeEnd::Stopped;
        }
        match rx.recv_timeout(Duration::from_millis(50)) {
            Ok(Incoming::Bytes(bytes, ready)) => {
                slave = None;
                if let Stall::Dead(until) = stall {
                    if std::time::Instant::now() < until {
                        continue; // the dead line loses it
                    }
                    stall = Stall::Over;
                }
                // What the host wrote is here once the line has carried it.
                if let Some(at) = ready {
                    let now = std::time::Instant::now();
                    if at > now {
                        std::thread::sleep(at - now);
                    }
                }
                chunk.clear();
                incoming.apply(&bytes, &mut chunk);
                link.inbox.extend(chunk.iter().copied());
            }
            Ok(Incoming::Closed) => match &mut peers {
                Peers::One => break ServeEnd::PeerClosed,
                Peers::Many(left) => {
                    link.inbox.clear();
                    server.peer_left();
                    left();
                    continue;
                }
            },
            Err(mpsc::RecvTimeoutError::Timeout) => continue,
            Err(mpsc::RecvTimeoutError::Disconnected) => break ServeEnd::PeerClosed,
        }
        let mut hung = false;
        while !link.inbox.is_empty() {
            if let Err(e) = server.poll(&mut link) {
                if is_peer_gone(&e) {
                    hung = true;
                    break;
                }
                return Err(e);
            }
            if let Some(n) = faults.reset_after
                && !reset_done
                && server.frames() >= n
                && server.in_frame()
            {
                reset_done = true;
                link.inbox.clear();
                server.reset(&mut link)?;
            }
            if let (Stall::Armed, Some((n, d))) = (stall, faults.stall)
                && server.frames() >= n
            {
                stall = Stall::Dead(std::time::Instant::now() + d);
                link.inbox.clear();
            }
            if faults.hang_up_after.is_some_and(|n| server.frames() >= n) {
                hung = true;
                break;
            }
        }
        if hung {
            if faults.hang_up_after.is_some() {
                break ServeEnd::HungUp;
            }
            // An answer could not be written (the peer went, or stopped
            // reading). With one peer that is the end; with many, what it
            // half sent is forgotten, and the peer is said to have left
            // once, when the reader sees the port closed.
            match &mut peers {
                Peers::One => break ServeEnd::PeerClosed,
                Peers::Many(_) => {
                    link.inbox.clear();
                    server.peer_left();
                }
            }
        }
    };
    drop(slave);
    reader_stop.store(true, Ordering::Relaxed);
    drop(link);
    let _ = thread.join();
    Ok(end)
}

/// Whether no one has the slave side open: the master reads EIO, or
/// polls as hung up (the serial library's `BrokenPipe`).
fn no_peer(e: &io::Error) -> bool {
    e.kind() == io::ErrorKind::BrokenPipe || e.raw_os_error() == Some(5)
}

/// Whether an answer could not reach the peer: it went, or stopped
/// reading until the write timed out.
fn is_peer_gone(e: &io::Error) -> bool {
    no_peer(e) || e.kind() == io::ErrorKind::TimedOut
}

/// Opens a pseudo-terminal pair: the master for [`serve`], the slave to
/// keep open until a peer arrives, and the slave's path for the peer.
pub fn pty() -> io::Result<(TTYPort, TTYPort, String)> {
    let (master, slave) = TTYPort::pair().map_err(io::Error::from)?;
    let name = slave.name().ok_or_else(|| io::Error::other("the pseudo-terminal has no device path"))?;
    Ok((master, slave, name))
}

/// Serves a simulated bench with the native protocol until the peer (or
/// the last of `peers`) closes, `stop` is set or a fault ends it; returns
/// the server so callers can look at the board side (executions per
/// device).
pub fn serve_native(
    sim: SimAdapter,
    port: TTYPort,
    slave: Option<TTYPort>,
    faults: &LinkFaults,
    stop: &AtomicBool,
    peers: Peers<'_>,
) -> io::Result<(ServeEnd, NativeServer)> {
    let mut server = NativeServer::new(sim, faults.seed);
    let end = serve(port, slave, &mut server, faults, stop, peers)?;
    Ok((end, server))
}
