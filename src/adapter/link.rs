//! The host end of a serial link: opening a port ([`open_port`], for every
//! serial driver), the one [`LinkError`] every serial driver reports, and
//! [`SerialLink`], which carries native-protocol frames: sending frames,
//! receiving them with a deadline.
//!
//! Contract:
//! - Frames go out COBS-encoded with a trailing delimiter (the codec is
//!   `buscue_bridge::wire`, the same code the adapter runs).
//! - [`SerialLink::recv`] returns the next frame with a good CRC, or
//!   `None` at the deadline; bytes that do not form a good frame are
//!   counted and skipped, and decoding resynchronises on the next
//!   delimiter.
//! - A port that stops working (hang-up, EIO/ENXIO, unplug, end of file)
//!   is [`LinkError::Gone`]; the link never retries that on its own.

use std::io::{self, Read, Write};
use std::time::{Duration, Instant};

use buscue_bridge::cobs::Decoder;
use buscue_bridge::wire::{self, Header};
use thiserror::Error;

/// Largest frame the host accepts (the adapter advertises its own limit,
/// which is never above this in protocol version 1).
pub const MAX_FRAME: usize = 4096;

/// Why a serial link failed, for every serial driver (native and dialect).
#[derive(Debug, Clone, Error)]
pub enum LinkError {
    #[error("cannot open serial port {path}: {detail}")]
    Open { path: String, detail: String },
    #[error("serial port {path} stopped working ({detail}): the adapter was unplugged or closed the port")]
    Gone { path: String, detail: String },
    /// A command that expects a reply got none in time.
    #[error("no reply to `{sent}` within {waited_ms} ms")]
    Timeout { sent: String, waited_ms: u64 },
    /// A reply that answers something else.
    #[error("unexpected reply `{got}` to `{sent}`")]
    Unexpected { sent: String, got: String },
    /// A reply the driver cannot use (an error report, noise).
    #[error("{0}")]
    Reply(String),
}

/// How to set up a serial port.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct PortSettings {
    pub baud: u32,
    pub data_bits: serialport::DataBits,
    pub parity: serialport::Parity,
    pub stop_bits: serialport::StopBits,
    pub flow: serialport::FlowControl,
    /// How long one read waits before it returns with nothing.
    pub read_timeout: Duration,
}

impl PortSettings {
    /// 8 data bits, no parity, one stop bit, no flow control.
    pub fn eight_n_one(baud: u32, read_timeout: Duration) -> Self {
        PortSettings {
            baud,
            data_bits: serialport::DataBits::Eight,
            parity: serialport::Parity::None,
            stop_bits: serialport::StopBits::One,
            flow: serialport::FlowControl::None,
            read_timeout,
        }
    }
}

/// Opens a serial port; the one place every serial driver opens one.
pub fn open_port(path: &str, s: &PortSettings) -> Result<Box<dyn serialport::SerialPort>, LinkError> {
    serialport::new(path, s.baud)
        .data_bits(s.data_bits)
        .parity(s.parity)
        .stop_bits(s.stop_bits)
        .flow_control(s.flow)
        .timeout(s.read_timeout)
        .open()
        .map_err(|e| LinkError::Open { path: path.to_string(), detail: e.to_string() })
}

/// Link-level counters.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct LinkStats {
    pub frames_sent: u64,
    pub frames_received: u64,
    /// Received frames dropped for a bad CRC, broken COBS or size.
    pub frames_dropped: u64,
}

pub struct SerialLink {
    port: Box<dyn serialport::SerialPort>,
    path: String,
    decoder: Box<Decoder<MAX_FRAME>>,
    inbox: Vec<u8>,
    inbox_pos: usize,
    out: Vec<u8>,
    /// Frames in `out`.
    queued: u64,
    /// Time a byte takes at the configured rate (10 bits).
    byte_time: Duration,
    pub stats: LinkStats,
}

/// What a write may wait for room in the port's buffer beyond the wire
/// time of its bytes: a USB adapter or a busy peer can hold the buffer
/// full for a while without being gone.
const WRITE_SLACK: Duration = Duration::from_secs(1);

impl SerialLink {
    /// Opens `path` at `baud`, 8 data bits, no parity, one stop bit, no
    /// flow control, and discards whatever was waiting in its buffers.
    pub fn open(path: &str, baud: u32) -> Result<Self, LinkError> {
        let port = open_port(path, &PortSettings::eight_n_one(baud, Duration::from_millis(10)))?;
        let _ = port.clear(serialport::ClearBuffer::All);
        Ok(SerialLink {
            port,
            path: path.to_string(),
            decoder: Box::new(Decoder::new()),
            inbox: vec![0; 4096],
            inbox_pos: 0,
            out: Vec::with_capacity(MAX_FRAME + 32),
            queued: 0,
            byte_time: Duration::from_secs_f64(10.0 / baud.max(1) as f64),
            stats: LinkStats::default(),
        })
    }

    pub fn path(&self) -> &str {
        &self.path
    }

    fn gone(&self, detail: impl ToString) -> LinkError {
        LinkError::Gone { path: self.path.clone(), detail: detail.to_string() }
    }

    /// Sends one frame, after any queued ones.
    pub fn send(&mut self, h: Header, body: &[u8]) -> Result<(), LinkError> {
        self.queue(h, body);
        self.flush()
    }

    /// Queues one frame, to go out with the next [`Self::send`] or
    /// [`Self::flush`], or when [`Self::recv`] has nothing whole left to
    /// return and must wait, in one write: frames sent together cost the
    /// adapter one wake-up, not one each.
    pub fn queue(&mut self, h: Header, body: &[u8]) {
        // A delimiter before the frame makes the adapter drop any garbage
        // that arrived since the last one (common practice on COBS links).
        self.out.push(0);
        let out = &mut self.out;
        let Ok(()) = wire::emit_frame(h, body, |p: &[u8]| {
            out.extend_from_slice(p);
            Ok::<(), std::convert::Infallible>(())
        });
        self.queued += 1;
    }

    /// Bytes queued and not yet written.
    pub fn queued_bytes(&self) -> usize {
        self.out.len()
    }

    /// Writes the queued frames.
    pub fn flush(&mut self) -> Result<(), LinkError> {
        if self.out.is_empty() {
            return Ok(());
        }
        // Room in the port's buffer may take a while: as long as the bytes
        // take to cross at the line's rate, twice over, and a second more
        // (the read timeout left by the last wait can be microseconds, and
        // a write that times out fails the link).
        let wire = self.byte_time.saturating_mul(2 * self.out.len().min(u32::MAX as usize) as u32);
        self.port.set_timeout(WRITE_SLACK + wire).map_err(|e| self.gone(e))?;
        let r = self.port.write_all(&self.out).and_then(|_| self.port.flush());
        self.out.clear();
        let frames = std::mem::take(&mut self.queued);
        match r {
            Ok(()) => {
                self.stats.frames_sent += frames;
                Ok(())
            }
            Err(e) if e.kind() == io::ErrorKind::TimedOut => Err(self.gone(format!("a write did not complete: {e}"))),
            Err(e) => Err(self.gone(e)),
        }
    }

    /// The next good frame, or `None` if none arrives before `deadline`.
    pub fn recv(&mut self, deadline: Instant) -> Result<Option<(Header, Vec<u8>)>, LinkError> {
        loop {
            while self.inbox_pos < self.inbox.len() {
                let b = self.inbox[self.inbox_pos];
                self.inbox_pos += 1;
                match self.decoder.push(b) {
                    None => {}
                    Some(Err(_)) => self.stats.frames_dropped += 1,
                    Some(Ok(frame)) => match wire::parse_frame(frame) {
                        Ok((h, body)) => {
                            self.stats.frames_received += 1;
                            return Ok(Some((h, body.to_vec())));
                        }
                        Err(_) => self.stats.frames_dropped += 1,
                    },
                }
            }
            // Nothing whole is waiting: what is queued goes now, before
            // the wait for more.
            self.flush()?;
            let now = Instant::now();
            if now >= deadline {
                return Ok(None);
            }
            // The wait as asked: a sub-millisecond retransmission timer
            // must not sleep a millisecond (poll times in nanoseconds).
            let wait = (deadline - now).max(Duration::from_micros(10));
            self.port.set_timeout(wait).map_err(|e| self.gone(e))?;
            self.inbox.resize(4096, 0);
            match self.port.read(&mut self.inbox) {
                Ok(0) => return Err(self.gone("end of file")),
                Ok(n) => {
                    self.inbox.truncate(n);
                    self.inbox_pos = 0;
                }
                Err(e) if matches!(e.kind(), io::ErrorKind::TimedOut | io::ErrorKind::Interrupted) => {
                    self.inbox.clear();
                    self.inbox_pos = 0;
                }
                Err(e) => return Err(self.gone(e)),
            }
        }
    }
}

#[cfg(all(test, unix))]
mod tests {
    use super::*;
    use buscue_bridge::cobs::Decoder;
    use buscue_bridge::wire::{Header, VERSION};
    use std::io::Read;

    // Queued frames go out in one write, in order, before the next frame
    // sent, and count as sent only once written.
    #[test]
    fn queued_frames_go_out_in_order_before_the_next_one() {
        let (mut master, slave) = serialport::TTYPort::pair().unwrap();
        let path = serialport::SerialPort::name(&slave).unwrap();
        let mut link = SerialLink::open(&path, 115_200).unwrap();
        let h = |seq| Header { version: VERSION, kind: 0x02, seq, session: 7 };
        link.queue(h(1), &[1]);
        link.queue(h(2), &[2, 2]);
        assert!(link.queued_bytes() > 0);
        assert_eq!(link.stats.frames_sent, 0, "queued, not yet written");
        link.send(h(3), &[3, 3, 3]).unwrap();
        assert_eq!((link.queued_bytes(), link.stats.frames_sent), (0, 3));
        serialport::SerialPort::set_timeout(&mut master, Duration::from_secs(5)).unwrap();
        let mut d = Decoder::<64>::new();
        let (mut seqs, mut buf) = (Vec::new(), [0u8; 256]);
        while seqs.len() < 3 {
            let n = master.read(&mut buf).unwrap();
            for &b in &buf[..n] {
                if let Some(Ok(f)) = d.push(b) {
                    let (h, body) = wire::parse_frame(f).unwrap();
                    assert_eq!(body.len(), h.seq as usize);
                    seqs.push(h.seq);
                }
            }
        }
        assert_eq!(seqs, [1, 2, 3]);
    }
}
