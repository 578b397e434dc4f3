//! The simulated adapter: a real [`Adapter`] driver over a simulated bus
//! of device models loaded from a bench file.
//!
//! It is not a mock: scripts, tests and the demo go through the same
//! trait and code paths as hardware. Its clock is virtual unless paced in
//! real time (see [`clock`]).

pub mod bench;
pub mod bus;
pub mod climate;
pub mod clock;
pub mod device;
pub mod eeprom;
pub mod gauge;
pub mod mapped;
pub mod recorded;
pub mod register;
pub mod rng;
pub mod signal;

use std::time::Duration;

use crate::adapter::{Adapter, AdapterError, Capabilities, Identity, LineLevels, Recovery};
use crate::bus::{BusSpeed, Outcome, Transaction};

pub use bench::{Bench, BenchError, DEMO_BENCH, DEMO_BENCH_NAME};
use bus::SimBus;
use clock::Clock;

pub struct SimAdapter {
    identity: Identity,
    caps: Capabilities,
    bus: SimBus,
}

impl SimAdapter {
    pub fn new(bench: Bench, realtime: bool) -> Self {
        let identity = Identity {
            driver: "simulated".into(),
            target: bench.file.clone(),
            description: if bench.description.is_empty() {
                bench.name.clone()
            } else {
                format!("{}: {}", bench.name, bench.description)
            },
        };
        let caps = Capabilities {
            max_bytes_per_op: bench.max_bytes_per_op,
            ten_bit: bench.ten_bit,
            min_speed_hz: 1_000,
            max_speed_hz: BusSpeed::FAST_PLUS.hz(),
            stretch_timeout_us: bench.stretch_timeout.as_micros() as u64,
            line_readback: true,
            recovery: true,
        };
        let bus = SimBus::new(bench.slots, Clock::new(realtime), bench.speed, bench.stretch_timeout, bench.arbitration);
        SimAdapter { identity, caps, bus }
    }

    /// The built-in demo bench (the greenhouse climate node) on virtual time.
    pub fn demo() -> Self {
        SimAdapter::new(Bench::from_str(DEMO_BENCH, DEMO_BENCH_NAME).expect("the demo bench is valid"), false)
    }

    /// The simulated bus, for tests that look at the board side.
    pub fn bus(&self) -> &SimBus {
        &self.bus
    }

    /// The simulated bus, for callers that drive it one wire event at a
    /// time (a primitive-level dialect served on a serial port).
    pub fn bus_mut(&mut self) -> &mut SimBus {
        &mut self.bus
    }
}

impl Adapter for SimAdapter {
    fn identity(&self) -> &Identity {
        &self.identity
    }

    fn capabilities(&self) -> &Capabilities {
        &self.caps
    }

    fn speed(&self) -> BusSpeed {
        self.bus.speed
    }

    fn set_speed(&mut self, speed: BusSpeed) -> Result<BusSpeed, AdapterError> {
        self.caps.check_speed(speed, "the simulated adapter")?;
        self.bus.speed = speed;
        Ok(speed)
    }

    fn execute(&mut self, tx: &Transaction) -> Outcome {
        if tx.address.is_ten_bit() && !self.caps.ten_bit {
            return Outcome::adapter_failure("this bench has 10-bit addressing turned off");
        }
        self.bus.execute(tx)
    }

    fn execute_into(&mut self, tx: &Transaction, out: &mut Outcome) {
        if tx.address.is_ten_bit() && !self.caps.ten_bit {
            *out = Outcome::adapter_failure("this bench has 10-bit addressing turned off");
            return;
        }
        self.bus.execute_into(tx, out)
    }

    fn recover(&mut self) -> Result<Recovery, AdapterError> {
        let (pulses, released) = self.bus.recover();
        Ok(Recovery { pulses, released })
    }

    fn line_levels(&mut self) -> Result<Option<LineLevels>, AdapterError> {
        Ok(Some(LineLevels { sda: !self.bus.sda_held(), scl: true }))
    }

    fn now(&self) -> Duration {
        self.bus.clock.now()
    }

    fn delay(&mut self, d: Duration) {
        self.bus.clock.advance(d);
    }

    fn close(&mut self) -> Result<(), AdapterError> {
        Ok(())
    }
}
