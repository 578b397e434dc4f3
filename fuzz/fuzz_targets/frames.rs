//! Arbitrary bytes into the adapter's decoder and executor must never
//! panic (the same property as the proptest cases in
//! adapters/bridge/tests/executor.rs, run without limits).

#![no_main]

use buscue_bridge::wire::{Caps, Header, VERSION, emit_frame, flag, kind};
use buscue_bridge::{Bridge, Link, Target};
use embedded_hal::i2c::{self, ErrorKind, I2c, Operation, SevenBitAddress, TenBitAddress};
use libfuzzer_sys::fuzz_target;

struct Bus;

#[derive(Debug)]
struct Never;

impl i2c::Error for Never {
    fn kind(&self) -> ErrorKind {
        ErrorKind::Other
    }
}

impl i2c::ErrorType for Bus {
    type Error = Never;
}

impl I2c<SevenBitAddress> for Bus {
    fn transaction(&mut self, _a: u8, ops: &mut [Operation<'_>]) -> Result<(), Never> {
        for op in ops {
            if let Operation::Read(b) = op {
                b.fill(0x5A);
            }
        }
        Ok(())
    }
}

impl I2c<TenBitAddress> for Bus {
    fn transaction(&mut self, _a: u16, _ops: &mut [Operation<'_>]) -> Result<(), Never> {
        Ok(())
    }
}

struct Board(Bus, u64);

impl Target for Board {
    type Bus = Bus;
    fn bus(&mut self) -> &mut Bus {
        &mut self.0
    }
    fn now_ns(&mut self) -> u64 {
        self.1 += 1;
        self.1
    }
    fn delay_ns(&mut self, ns: u64) {
        self.1 = self.1.saturating_add(ns);
    }
}

struct Sink<'a>(&'a [u8]);

impl Link for Sink<'_> {
    type Error = ();
    fn read(&mut self, buf: &mut [u8]) -> Result<usize, ()> {
        let n = buf.len().min(self.0.len());
        buf[..n].copy_from_slice(&self.0[..n]);
        self.0 = &self.0[n..];
        Ok(n)
    }
    fn write(&mut self, _bytes: &[u8]) -> Result<(), ()> {
        Ok(())
    }
}

fuzz_target!(|data: &[u8]| {
    let caps = Caps {
        max_frame: 256,
        max_bytes_per_op: 64,
        max_ops_per_tx: 16,
        max_tx_per_request: 8,
        window: 4,
        flags: flag::TEN_BIT,
        min_speed_hz: 1,
        max_speed_hz: 1_000_000,
        speed_hz: 100_000,
        stretch_timeout_us: 1,
    };
    let mut bridge: Bridge<256, 4> = Bridge::new(caps, 1);
    let mut board = Board(Bus, 0);
    // Greet first so request frames reach the executor, then the input.
    let mut hello = Vec::new();
    let _ = emit_frame(Header { version: VERSION, kind: kind::HELLO, seq: 0, session: 0 }, &[], |p: &[u8]| {
        hello.extend_from_slice(p);
        Ok::<(), ()>(())
    });
    let mut link = Sink(&hello);
    while bridge.poll(&mut link, &mut board) == Ok(64) {}
    let _ = bridge.poll(&mut link, &mut board);
    let mut link = Sink(data);
    while matches!(bridge.poll(&mut link, &mut board), Ok(n) if n > 0) {}
});
