//! Frames rendered as a VCD at a bus speed: the waveform a controller
//! would put on the bus for them, for tests, benchmarks and examples.
//! SCL low for 55 % of the period and high for 45 % (Table 10's tLOW and
//! tHIGH minimums are met at 100 kHz, 400 kHz and 1 MHz), SDA changed 15 %
//! of a period after SCL falls unless a set-up time is asked for; a frame
//! starts no earlier than its recorded time after the first one's.

use std::io::{self, Write};

use crate::bus::{Address, Direction, Fault, Operation};
use crate::record::Frame;

/// The waveform's shape.
#[derive(Debug, Clone, Copy)]
pub struct Shape {
    pub hz: u64,
    /// Femtoseconds per tick of the written file (1000 = 1 ps).
    pub tick_fs: u64,
    /// SDA set-up before SCL rises, in picoseconds; None: 40 % of a period.
    pub setup_ps: Option<u64>,
    /// Extra SCL low after each ACK bit, in picoseconds (a stretching target).
    pub stretch_ps: u64,
}

struct W<'a, O: Write> {
    out: &'a mut O,
    t: u64,
    u: u64,
    shape: Shape,
    sda: bool,
    scl: bool,
}

impl<O: Write> W<'_, O> {
    fn at(&mut self, ps: u64) -> io::Result<()> {
        self.t = self.t.saturating_add(ps);
        let ticks = (self.t as u128 * 1000 / self.shape.tick_fs as u128) as u64;
        writeln!(self.out, "#{ticks}")
    }
    fn set(&mut self, sda: Option<bool>, scl: Option<bool>) -> io::Result<()> {
        if let Some(v) = sda {
            self.sda = v;
            writeln!(self.out, "{}d", u8::from(v))?;
        }
        if let Some(v) = scl {
            self.scl = v;
            writeln!(self.out, "{}c", u8::from(v))?;
        }
        Ok(())
    }
    /// One bit, starting with SCL low just fallen; ends with SCL fallen.
    fn bit(&mut self, v: bool, extra_low: u64) -> io::Result<()> {
        let setup = self.shape.setup_ps.unwrap_or(8 * self.u).min(11 * self.u - 1);
        self.at(11 * self.u - setup)?;
        if v != self.sda {
            self.set(Some(v), None)?;
        }
        self.at(setup + extra_low)?;
        self.set(None, Some(true))?;
        self.at(9 * self.u)?;
        self.set(None, Some(false))
    }
    fn byte(&mut self, b: u8, ack: bool) -> io::Result<()> {
        for i in (0..8).rev() {
            self.bit(b >> i & 1 == 1, 0)?;
        }
        self.bit(!ack, 0)?;
        if self.shape.stretch_ps > 0 {
            self.t = self.t.saturating_add(self.shape.stretch_ps);
        }
        Ok(())
    }
    fn start(&mut self, repeated: bool) -> io::Result<()> {
        if repeated {
            self.at(3 * self.u)?;
            self.set(Some(true), None)?;
            self.at(8 * self.u)?;
            self.set(None, Some(true))?;
            // tSU;STA: Standard-mode asks 4.7 us (Table 10), more than tHIGH.
            self.at(self.u)?;
        }
        self.at(9 * self.u)?;
        self.set(Some(false), None)?;
        self.at(9 * self.u)?;
        self.set(None, Some(false))
    }
    fn stop(&mut self) -> io::Result<()> {
        self.at(3 * self.u)?;
        if self.sda {
            self.set(Some(false), None)?;
        }
        self.at(8 * self.u)?;
        self.set(None, Some(true))?;
        self.at(9 * self.u)?;
        self.set(Some(true), None)?;
        self.at(20 * self.u)
    }
}

/// Writes `frames` as a VCD with wires `top.sda` (`d`) and `top.scl` (`c`).
pub fn render<'a, O: Write>(frames: impl IntoIterator<Item = &'a Frame>, shape: Shape, out: &mut O) -> io::Result<()> {
    let mut r = Renderer::new(shape, out)?;
    for f in frames {
        r.frame(f)?;
    }
    Ok(())
}

/// [`render`] one frame at a time, for a trace read as a stream.
pub struct Renderer<'a, O: Write> {
    w: W<'a, O>,
    t0: Option<std::time::Duration>,
}

impl<'a, O: Write> Renderer<'a, O> {
    /// Writes the header and the idle bus before the first frame.
    pub fn new(shape: Shape, out: &'a mut O) -> io::Result<Self> {
        let scale = match shape.tick_fs {
            1 => "1fs",
            1000 => "1ps",
            10_000 => "10ps",
            1_000_000 => "1ns",
            10_000_000 => "10ns",
            _ => {
                return Err(io::Error::new(
                    io::ErrorKind::InvalidInput,
                    "tick must be 1 fs, 1 ps, 10 ps, 1 ns or 10 ns",
                ));
            }
        };
        // A twentieth of a period in picoseconds: at least 1.
        if shape.hz == 0 || shape.hz > 50_000_000_000 {
            return Err(io::Error::new(
                io::ErrorKind::InvalidInput,
                format!("no waveform at a bus speed of {} Hz", shape.hz),
            ));
        }
        write!(
            out,
            "$comment greenhouse climate node bus $end\n$timescale {scale} $end\n$scope module top $end\n\
             $var wire 1 d sda $end\n$var wire 1 c scl $end\n$upscope $end\n$enddefinitions $end\n\
             $dumpvars\n1d\n1c\n$end\n"
        )?;
        let u = 1_000_000_000_000 / shape.hz / 20;
        let mut w = W { out, t: 0, u, shape, sda: true, scl: true };
        w.at(20 * u)?;
        Ok(Renderer { w, t0: None })
    }

    /// Writes one frame.
    pub fn frame(&mut self, f: &Frame) -> io::Result<()> {
        let w = &mut self.w;
        let t0 = *self.t0.get_or_insert(f.t);
        // The recorded gaps between frames are kept: a device that was
        // busy converting sees the same idle bus.
        let due = f.t.saturating_sub(t0).as_nanos().saturating_mul(1000);
        // Far below u64::MAX picoseconds (213 days), so the frame's own
        // edges still fit after it: a time past that is refused, not
        // written as edges piled up at one saturated instant.
        if due > (u64::MAX / 4) as u128 || w.t > u64::MAX / 4 {
            return Err(io::Error::new(
                io::ErrorKind::InvalidData,
                format!(
                    "frame {} starts {:?} after the first: too late for a VCD of picosecond ticks",
                    f.seq,
                    f.t.saturating_sub(t0)
                ),
            ));
        }
        let due = due as u64;
        if due > w.t {
            w.t = due;
        }
        let nack_at = match &f.outcome.fault {
            Some(Fault::AddressNack { op, .. }) => Some(*op),
            _ => None,
        };
        let mut written_ten = false;
        for (i, op) in f.ops.iter().enumerate() {
            w.start(i > 0)?;
            let dir = op.direction();
            let a_ack = nack_at != Some(i);
            match f.address {
                Address::Seven(a) => w.byte(a << 1 | u8::from(dir == Direction::Read), a_ack)?,
                Address::Ten(_) => {
                    if dir == Direction::Read && !written_ten {
                        w.byte(f.address.first_byte(false), true)?;
                        w.byte(f.address.second_byte().unwrap_or(0), true)?;
                        w.start(true)?;
                    }
                    w.byte(f.address.first_byte(dir == Direction::Read), a_ack)?;
                    if dir == Direction::Write {
                        w.byte(f.address.second_byte().unwrap_or(0), a_ack)?;
                        written_ten = true;
                    }
                }
            }
            if !a_ack {
                break;
            }
            let oo = f.outcome.ops.get(i);
            match op {
                Operation::Write(bytes) => {
                    let acks = oo.map(|o| o.acks.as_slice()).unwrap_or(&[]);
                    for (j, b) in bytes.iter().enumerate().take(acks.len().max(1).min(bytes.len())) {
                        w.byte(*b, acks.get(j).copied().unwrap_or(true))?;
                    }
                }
                _ => {
                    let data = oo.map(|o| o.data.as_slice()).unwrap_or(&[]);
                    for (j, b) in data.iter().enumerate() {
                        w.byte(*b, j + 1 < data.len())?;
                    }
                }
            }
        }
        w.stop()
    }
}
