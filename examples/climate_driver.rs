//! A platform-agnostic driver for the greenhouse climate sensor (our
//! fictional device; register map in src/sim/climate.rs), written against
//! `embedded_hal::i2c::I2c` only, so the same code would build for a
//! microcontroller. Here it runs from a PC through buscue's bus handle.
//!
//!   cargo run --example climate_driver
//!   cargo run --example climate_driver -- --address 0x35 --samples 3 --frames
//!   cargo run --example climate_driver -- --adapter dialect:stepwise@/dev/pts/3

use embedded_hal::i2c::{Error, ErrorKind, I2c, NoAcknowledgeSource};

/// The driver: nothing in it knows about buscue.
pub mod climate {
    use super::*;

    const ID: u8 = 0x00;
    const CONTROL: u8 = 0x01;
    const STATUS: u8 = 0x02;
    const TEMPERATURE: u8 = 0x03;
    const HUMIDITY: u8 = 0x04;
    /// The value of the ID register.
    pub const EXPECTED_ID: u16 = 0x5E11;
    // One write_read reads both results: the pointer auto-increments.
    const _: () = assert!(HUMIDITY == TEMPERATURE + 1);
    const START: u16 = 1 << 0;
    const DRDY: u16 = 1 << 0;

    #[derive(Debug)]
    pub enum DriverError<E> {
        Bus(E),
        WrongId(u16),
        /// DRDY did not come within the allowed polls.
        NotReady,
    }

    impl<E: Error> From<E> for DriverError<E> {
        fn from(e: E) -> Self {
            DriverError::Bus(e)
        }
    }

    /// One measurement, in hundredths of a degree Celsius and of %RH.
    #[derive(Debug, Clone, Copy, PartialEq, Eq)]
    pub struct Sample {
        pub centi_celsius: i16,
        pub centi_percent_rh: u16,
    }

    pub struct ClimateSensor<I2C> {
        i2c: I2C,
        address: u8,
    }

    impl<I2C: I2c> ClimateSensor<I2C> {
        /// Checks the ID register before handing out a driver.
        pub fn new(mut i2c: I2C, address: u8) -> Result<Self, DriverError<I2C::Error>> {
            let id = read_reg(&mut i2c, address, ID)?;
            if id != EXPECTED_ID {
                return Err(DriverError::WrongId(id));
            }
            Ok(ClimateSensor { i2c, address })
        }

        /// Starts a conversion with averaging 0..=3 (2, 4, 8, 16 ms).
        pub fn start(&mut self, averaging: u8) -> Result<(), DriverError<I2C::Error>> {
            let control = ((averaging as u16 & 0b11) << 1) | START;
            let [hi, lo] = control.to_be_bytes();
            self.i2c.write(self.address, &[CONTROL, hi, lo])?;
            Ok(())
        }

        /// Polls STATUS.DRDY. A sensor that NACKs its address while it
        /// converts counts as not ready yet.
        pub fn wait_ready(&mut self, max_polls: u32) -> Result<(), DriverError<I2C::Error>> {
            for _ in 0..max_polls {
                match read_reg(&mut self.i2c, self.address, STATUS) {
                    Ok(s) if s & DRDY != 0 => return Ok(()),
                    Ok(_) => {}
                    Err(e) if e.kind() == ErrorKind::NoAcknowledge(NoAcknowledgeSource::Address) => {}
                    Err(e) => return Err(e.into()),
                }
            }
            Err(DriverError::NotReady)
        }

        /// Reads TEMPERATURE and HUMIDITY in one transaction (the pointer
        /// auto-increments).
        pub fn read(&mut self) -> Result<Sample, DriverError<I2C::Error>> {
            let mut b = [0u8; 4];
            self.i2c.write_read(self.address, &[TEMPERATURE], &mut b)?;
            Ok(Sample {
                centi_celsius: i16::from_be_bytes([b[0], b[1]]),
                centi_percent_rh: u16::from_be_bytes([b[2], b[3]]),
            })
        }

        pub fn measure(&mut self, averaging: u8) -> Result<Sample, DriverError<I2C::Error>> {
            self.start(averaging)?;
            self.wait_ready(1000)?;
            self.read()
        }

        pub fn release(self) -> I2C {
            self.i2c
        }
    }

    fn read_reg<I2C: I2c>(i2c: &mut I2C, address: u8, reg: u8) -> Result<u16, I2C::Error> {
        let mut b = [0u8; 2];
        i2c.write_read(address, &[reg], &mut b)?;
        Ok(u16::from_be_bytes(b))
    }
}

fn main() -> std::process::ExitCode {
    match run() {
        Ok(()) => std::process::ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("error: {e:#}");
            std::process::ExitCode::from(buscue::cli::exit::ADAPTER)
        }
    }
}

fn run() -> anyhow::Result<()> {
    use std::sync::Arc;
    use std::sync::atomic::AtomicBool;

    use anyhow::{Context, bail};
    use buscue::adapter::{AdapterSpec, OpenOptions};
    use buscue::cli::compose::open;
    use buscue::hal::HalBus;
    use buscue::player::Session;
    use buscue::view::plain::PlainLog;

    let (mut adapter, mut address, mut samples, mut frames) = ("sim".to_string(), 0x31u8, 2u32, false);
    let mut args = std::env::args().skip(1);
    while let Some(a) = args.next() {
        let mut value = || args.next().with_context(|| format!("{a} needs a value"));
        match a.as_str() {
            "--adapter" => adapter = value()?,
            "--address" => {
                let v = value()?;
                address =
                    u8::from_str_radix(v.trim_start_matches("0x"), 16).with_context(|| format!("address `{v}`"))?;
            }
            "--samples" => samples = value()?.parse().context("--samples takes a number")?,
            "--frames" => frames = true,
            other => bail!("unknown argument `{other}`; use --adapter SPEC, --address 0xNN, --samples N, --frames"),
        }
    }
    let spec = AdapterSpec::parse(&adapter)?;
    let mut session = Session::new(open(&spec, &OpenOptions::default())?, Arc::new(AtomicBool::new(false)));
    if frames {
        session.add_sink(Box::new(PlainLog::new(std::io::stderr(), false, true)));
    }
    let bus = HalBus::from_session(session);
    let mut sensor = climate::ClimateSensor::new(bus, address).map_err(|e| anyhow::anyhow!("{e:?}"))?;
    for i in 1..=samples {
        let s = sensor.measure(1).map_err(|e| anyhow::anyhow!("{e:?}"))?;
        println!(
            "sample {i}: {:.2} degC, {:.2} %RH",
            s.centi_celsius as f64 / 100.0,
            s.centi_percent_rh as f64 / 100.0
        );
    }
    let mut session = sensor.release().into_session();
    session.finish(0, None)?;
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::climate::*;
    use buscue::adapter::{AdapterSpec, OpenOptions};
    use buscue::cli::compose::open;
    use buscue::hal::HalBus;

    fn bus() -> HalBus {
        HalBus::new(open(&AdapterSpec::DemoBench, &OpenOptions::default()).unwrap())
    }

    #[test]
    fn measures_both_demo_sensors() {
        // The canopy sensor stretches the clock while converting; the
        // outdoor one NACKs its address (src/sim/climate.rs).
        let mut canopy = ClimateSensor::new(bus(), 0x31).unwrap();
        let s = canopy.measure(1).unwrap();
        assert!((1500..3500).contains(&s.centi_celsius), "greenhouse air: {s:?}");
        assert!(s.centi_percent_rh <= 10_000);
        let mut outdoor = ClimateSensor::new(canopy.release(), 0x35).unwrap();
        let s = outdoor.measure(0).unwrap();
        assert!(s.centi_celsius < 0, "a winter night reads below zero: {s:?}");
    }

    #[test]
    fn a_device_that_is_not_ours_is_refused() {
        // 0x2B is the light sensor: its ID register reads something else.
        assert!(matches!(ClimateSensor::new(bus(), 0x2B), Err(DriverError::WrongId(_))));
        assert!(matches!(ClimateSensor::new(bus(), 0x13), Err(DriverError::Bus(_))));
    }
}
