//! The kernel adapter: any I2C or SMBus bus Linux already drives, through
//! its character device `/dev/i2c-N` (the i2c-dev interface,
//! Documentation/i2c/dev-interface.rst).
//!
//! Contract:
//! - [`KernelAdapter::open`] opens the device and asks what the adapter
//!   can do (`I2C_FUNCS`). Adapters that advertise plain I2C take whole
//!   transactions (`I2C_RDWR`); others take the SMBus protocols one at a
//!   time (`I2C_SMBUS`), and a transaction whose shape is none of them is
//!   refused before anything reaches the bus ([`super::kernel_map`] holds
//!   every rule of that mapping).
//! - Addresses a kernel driver owns (bound in sysfs) are refused unless
//!   the spec says `force`, which also uses `I2C_SLAVE_FORCE`: taking a
//!   driver's device from under it can corrupt the driver's state.
//! - The bus clock is the kernel's: it is reported where the device tree
//!   gives it (`clock-frequency`), and a speed change is refused. Without
//!   a reported clock, bus time is modelled at 100 kHz and the identity
//!   says so.
//! - Time is the wall clock since open; `recover` and line levels are the
//!   kernel's business and unsupported here.
//! - Linux only; elsewhere opening says so.

use std::path::{Path, PathBuf};
use std::time::{Duration, Instant};

use crate::bus::timing::breakdown_events;
use crate::bus::{Address, BusSpeed, Fault, Outcome, Transaction};

use super::kernel_map::{self, Funcs, Plan};
use super::{Adapter, AdapterError, Capabilities, Identity, LineLevels, Recovery};

/// `kernel:N` or `kernel:/dev/i2c-N`, with `,force` to take addresses a
/// kernel driver owns.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct KernelSpec {
    pub path: PathBuf,
    pub force: bool,
}

impl KernelSpec {
    pub fn parse(text: &str) -> anyhow::Result<Self> {
        let mut parts = text.split(',');
        let dev = parts.next().unwrap_or_default().trim();
        let path = if !dev.is_empty() && dev.bytes().all(|b| b.is_ascii_digit()) {
            PathBuf::from(format!("/dev/i2c-{dev}"))
        } else if dev.starts_with('/') {
            PathBuf::from(dev)
        } else {
            anyhow::bail!("`kernel:{text}`: name the bus by number or device, as in kernel:1 or kernel:/dev/i2c-1");
        };
        let mut force = false;
        for p in parts {
            match p.trim() {
                "force" => force = true,
                other => anyhow::bail!(
                    "`{other}` is not a kernel adapter setting: the one setting is `force` (take addresses a kernel driver owns)"
                ),
            }
        }
        Ok(KernelSpec { path, force })
    }
}

/// The bus number of `/dev/i2c-N`.
fn bus_number(path: &Path) -> Option<u32> {
    let name = std::fs::canonicalize(path).unwrap_or_else(|_| path.to_path_buf());
    name.file_name()?.to_str()?.strip_prefix("i2c-")?.parse().ok()
}

/// What sysfs says of bus `n`: its name, its clock, who owns an address.
pub struct Sysfs {
    root: PathBuf,
}

impl Sysfs {
    pub fn new() -> Self {
        Sysfs { root: PathBuf::from("/sys") }
    }

    fn read(&self, rel: &str) -> Option<String> {
        std::fs::read_to_string(self.root.join(rel)).ok().map(|s| s.trim().to_string())
    }

    /// The adapter's name (`/sys/class/i2c-dev/i2c-N/name`).
    pub fn name(&self, bus: u32) -> Option<String> {
        self.read(&format!("class/i2c-dev/i2c-{bus}/name"))
            .or_else(|| self.read(&format!("bus/i2c/devices/i2c-{bus}/name")))
    }

    /// The bus clock the device tree gives (`clock-frequency`, one
    /// big-endian 32-bit cell).
    pub fn clock_hz(&self, bus: u32) -> Option<u32> {
        let bytes = std::fs::read(self.root.join(format!("bus/i2c/devices/i2c-{bus}/of_node/clock-frequency"))).ok()?;
        Some(u32::from_be_bytes(bytes.get(..4)?.try_into().ok()?))
    }

    /// The kernel driver bound to `address` on bus `bus`, if any
    /// (`/sys/bus/i2c/devices/N-00AA/driver`, a link named for it).
    pub fn owner(&self, bus: u32, address: Address) -> Option<String> {
        let client = match address {
            Address::Seven(a) => format!("{bus}-{a:04x}"),
            // 10-bit clients carry 0xa000 in their name (i2c-core's
            // I2C_ADDR_OFFSET_TEN_BIT; from memory).
            Address::Ten(a) => format!("{bus}-{:04x}", 0xa000 | a),
        };
        let link = std::fs::read_link(self.root.join(format!("bus/i2c/devices/{client}/driver"))).ok()?;
        Some(link.file_name()?.to_string_lossy().into_owned())
    }

    /// Every `/dev/i2c-N` the kernel lists, with its name.
    pub fn buses(&self) -> Vec<(u32, String)> {
        let mut out: Vec<(u32, String)> = std::fs::read_dir(self.root.join("class/i2c-dev"))
            .into_iter()
            .flatten()
            .flatten()
            .filter_map(|e| {
                let n: u32 = e.file_name().to_str()?.strip_prefix("i2c-")?.parse().ok()?;
                Some((n, self.name(n).unwrap_or_default()))
            })
            .collect();
        out.sort();
        out
    }
}

impl Default for Sysfs {
    fn default() -> Self {
        Self::new()
    }
}

/// Whether an adapter's name says it is a PC's SMBus controller, whose bus
/// carries memory-module EEPROMs, hardware monitors and battery
/// controllers (common practice: such controllers name themselves
/// "SMBus ..." in sysfs).
pub fn looks_like_system_smbus(name: &str) -> bool {
    name.to_ascii_lowercase().contains("smbus")
}

/// Every kernel bus with its name and what it offers, for `ports`: the
/// offer is asked of the device (`I2C_FUNCS`), or says why it could not be.
pub fn list_buses() -> Vec<(String, String, String)> {
    let sysfs = Sysfs::new();
    sysfs
        .buses()
        .into_iter()
        .map(|(n, name)| {
            let path = format!("/dev/i2c-{n}");
            let offer = match std::fs::OpenOptions::new().read(true).write(true).open(&path) {
                Err(e) => format!("cannot ask it: {e}"),
                Ok(f) => {
                    let mut bits: std::os::raw::c_ulong = 0;
                    match ioctl(&f, kernel_map::I2C_FUNCS, &mut bits as *mut _ as usize) {
                        Ok(()) => {
                            let funcs = Funcs(bits as u64);
                            let kind = if funcs.plain_i2c() { "I2C" } else { "SMBus only" };
                            format!("{kind}: {}", funcs.names())
                        }
                        Err(e) => format!("cannot ask it: {}", std::io::Error::from_raw_os_error(e)),
                    }
                }
            };
            (path, name, offer)
        })
        .collect()
}

/// A bus the kernel drives.
pub struct KernelAdapter {
    file: std::fs::File,
    bus: Option<u32>,
    funcs: Funcs,
    force: bool,
    sysfs: Sysfs,
    identity: Identity,
    caps: Capabilities,
    speed: BusSpeed,
    /// Whether `speed` is the clock the system reports, not a stand-in.
    clock_known: bool,
    /// The address `I2C_SLAVE` last set (SMBus calls go to it), and
    /// whether it was 10-bit.
    client: Option<Address>,
    /// PEC as last set with `I2C_PEC`.
    pec: bool,
    owners: std::cell::RefCell<std::collections::HashMap<Address, Option<String>>>,
    opened: Instant,
    /// A caution for the user before the first write, said by the caller.
    pub caution: Option<String>,
}

impl KernelAdapter {
    pub fn open(spec: &KernelSpec) -> Result<Self, AdapterError> {
        let shown = spec.path.display().to_string();
        if !cfg!(target_os = "linux") {
            return Err(AdapterError::Unsupported(format!("{shown}: kernel adapters are Linux's i2c-dev devices")));
        }
        let file = std::fs::OpenOptions::new().read(true).write(true).open(&spec.path).map_err(|e| {
            let hint = match e.kind() {
                std::io::ErrorKind::NotFound => {
                    " (is the i2c-dev module loaded? `ls /dev/i2c-*` lists the buses, `buscue ports` names them)"
                }
                std::io::ErrorKind::PermissionDenied => {
                    " (add yourself to the group that owns the device, often `i2c`, rather than running as root)"
                }
                _ => "",
            };
            AdapterError::LinkLost(format!("cannot open {shown}: {e}{hint}"))
        })?;
        let mut funcs: std::os::raw::c_ulong = 0;
        ioctl(&file, kernel_map::I2C_FUNCS, &mut funcs as *mut _ as usize)
            .map_err(|e| AdapterError::Protocol(format!("{shown} is not an I2C bus device ({e})")))?;
        let funcs = Funcs(funcs as u64);
        let sysfs = Sysfs::new();
        let bus = bus_number(&spec.path);
        let name = bus.and_then(|n| sysfs.name(n)).unwrap_or_else(|| "unnamed adapter".into());
        let clock = bus.and_then(|n| sysfs.clock_hz(n)).and_then(|hz| BusSpeed::from_hz(hz as u64).ok());
        let speed = clock.unwrap_or(BusSpeed::STANDARD);
        let driver = if funcs.plain_i2c() { kernel_map::DRIVER_I2C } else { kernel_map::DRIVER_SMBUS };
        let clock_words = match clock {
            Some(s) => format!("bus clock {s} (device tree)"),
            None => "bus clock set by the kernel and not reported (bus time modelled at 100 kHz)".into(),
        };
        let identity = Identity {
            driver: driver.to_string(),
            target: shown.clone(),
            description: format!("{name}; {clock_words}; offers {}", funcs.names()),
        };
        let caps = Capabilities {
            max_bytes_per_op: if funcs.plain_i2c() {
                kernel_map::RDWR_MAX_LEN
            } else {
                kernel_map::SMBUS_BLOCK_MAX + 2
            },
            ten_bit: funcs.has(Funcs::TEN_BIT),
            min_speed_hz: speed.hz(),
            max_speed_hz: speed.hz(),
            // The kernel adapter's own timeout applies; it is not reported.
            stretch_timeout_us: 0,
            line_readback: false,
            recovery: false,
        };
        let mut caution = looks_like_system_smbus(&name).then(|| {
            format!(
                "{shown} ({name}) looks like a computer's own SMBus controller: writes on it can reach memory-module \
                 EEPROMs, hardware monitors or battery controllers and can leave the machine unable to start; \
                 write only to addresses you know"
            )
        });
        if spec.force {
            let forced = format!(
                "{shown}: `force` takes addresses kernel drivers own; a transaction to one can corrupt that driver's \
                 state (unbind or unload the driver instead where you can)"
            );
            caution = Some(match caution {
                Some(c) => format!("{c}\ncaution: {forced}"),
                None => forced,
            });
        }
        Ok(KernelAdapter {
            file,
            bus,
            funcs,
            force: spec.force,
            sysfs,
            identity,
            caps,
            speed,
            clock_known: clock.is_some(),
            client: None,
            pec: false,
            owners: Default::default(),
            opened: Instant::now(),
            caution,
        })
    }

    /// The kernel driver that owns `address`, if one does: asked of sysfs
    /// once per address and run (every transaction asks).
    pub fn owner(&self, address: Address) -> Option<String> {
        let bus = self.bus?;
        self.owners.borrow_mut().entry(address).or_insert_with(|| self.sysfs.owner(bus, address)).clone()
    }

    fn set_client(&mut self, address: Address) -> Result<(), i32> {
        if self.client == Some(address) {
            return Ok(());
        }
        ioctl(&self.file, kernel_map::I2C_TENBIT, usize::from(address.is_ten_bit()))?;
        let request = if self.force { kernel_map::I2C_SLAVE_FORCE } else { kernel_map::I2C_SLAVE };
        ioctl(&self.file, request, address.value() as usize)?;
        self.client = Some(address);
        Ok(())
    }

    fn set_pec(&mut self, on: bool) -> Result<(), i32> {
        if self.pec != on {
            ioctl(&self.file, kernel_map::I2C_PEC, usize::from(on))?;
            self.pec = on;
        }
        Ok(())
    }

    fn run(&mut self, tx: &Transaction) -> Result<Outcome, (i32, &'static str)> {
        match kernel_map::plan(tx, self.funcs) {
            // `refuses` said so before the session sent it; a caller that
            // skipped the check gets the same words as an adapter failure.
            Err(why) => Ok(Outcome::adapter_failure(why)),
            Ok(Plan::Rdwr(mut msgs)) => {
                let mut raw: Vec<RawMsg> = msgs
                    .iter_mut()
                    .map(|m| RawMsg {
                        addr: tx.address.value(),
                        flags: m.flags,
                        len: m.buf.len() as u16,
                        buf: m.buf.as_mut_ptr(),
                    })
                    .collect();
                let mut data = RawRdwr { msgs: raw.as_mut_ptr(), nmsgs: raw.len() as u32 };
                ioctl(&self.file, kernel_map::I2C_RDWR, &mut data as *mut _ as usize).map_err(|e| (e, "I2C_RDWR"))?;
                Ok(kernel_map::rdwr_outcome(tx, &msgs))
            }
            Ok(Plan::Smbus(call)) => {
                self.set_client(tx.address).map_err(|e| (e, "I2C_SLAVE"))?;
                self.set_pec(call.pec).map_err(|e| (e, "I2C_PEC"))?;
                let mut block = call.data;
                let mut args =
                    RawSmbus { read_write: call.read_write, command: call.command, size: call.size, data: &mut block };
                ioctl(&self.file, kernel_map::I2C_SMBUS, &mut args as *mut _ as usize)
                    .map_err(|e| (e, call.protocol))?;
                Ok(kernel_map::smbus_outcome(tx, &call, &block))
            }
        }
    }
}

#[repr(C)]
struct RawMsg {
    addr: u16,
    flags: u16,
    len: u16,
    buf: *mut u8,
}

#[repr(C)]
struct RawRdwr {
    msgs: *mut RawMsg,
    nmsgs: u32,
}

#[repr(C)]
struct RawSmbus {
    read_write: u8,
    command: u8,
    size: u32,
    data: *mut [u8; kernel_map::SMBUS_BLOCK_MAX + 2],
}

/// One ioctl on the device; `Err` is the errno.
fn ioctl(file: &std::fs::File, request: u64, arg: usize) -> Result<(), i32> {
    use std::os::fd::AsRawFd;
    // SAFETY: `request` is one of i2c-dev's requests, and `arg` is either a
    // plain number or the address of a live value of the layout that
    // request reads and writes (include/uapi/linux/i2c-dev.h), which the
    // caller keeps alive and unaliased for the call.
    let r = unsafe { libc::ioctl(file.as_raw_fd(), request as _, arg) };
    if r < 0 { Err(std::io::Error::last_os_error().raw_os_error().unwrap_or(libc::EIO)) } else { Ok(()) }
}

impl Adapter for KernelAdapter {
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
        if self.clock_known && speed == self.speed {
            return Ok(speed);
        }
        Err(AdapterError::Unsupported(format!(
            "{}: the kernel sets this bus's clock (a device-tree or driver setting), not buscue; drop --speed",
            self.identity.target
        )))
    }

    fn refuses(&self, tx: &Transaction) -> Option<String> {
        if let Some(driver) = self.owner(tx.address)
            && !self.force
        {
            return Some(format!(
                "{} on {} is owned by the kernel driver `{driver}`; buscue leaves it alone (add `,force` to the \
                 adapter to take it anyway, which can corrupt that driver's state)",
                tx.address, self.identity.target
            ));
        }
        kernel_map::plan(tx, self.funcs).err()
    }

    fn owner(&self, address: Address) -> Option<String> {
        KernelAdapter::owner(self, address)
    }

    fn execute(&mut self, tx: &Transaction) -> Outcome {
        let started = Instant::now();
        let mut outcome = match self.run(tx) {
            Ok(o) => o,
            // ENODEV is i2c-stub's answer for an empty address, and also
            // what every call returns once a USB bridge is unplugged: the
            // device node tells the two apart.
            Err((libc::ENODEV, _)) if !Path::new(&self.identity.target).exists() => Outcome::adapter_failure(format!(
                "{} is gone (unplugged, or its driver unloaded)",
                self.identity.target
            )),
            Err((errno, what)) => match kernel_map::fault_of_errno(errno, tx) {
                Some(fault) => {
                    Outcome { ops: Vec::new(), bus_time: Duration::ZERO, measured: None, fault: Some(fault) }
                }
                // I2C_SLAVE's EBUSY: a driver bound to the address since
                // sysfs was asked (dev-interface.rst).
                None if errno == libc::EBUSY && what == "I2C_SLAVE" => Outcome::adapter_failure(format!(
                    "{} on {} is owned by a kernel driver (I2C_SLAVE: EBUSY); add `,force` to the adapter to take \
                     it anyway, which can corrupt that driver's state",
                    tx.address, self.identity.target
                )),
                None => Outcome::adapter_failure(format!(
                    "{} on {} ({what}): {}",
                    tx.address,
                    self.identity.target,
                    kernel_map::errno_words(errno)
                )),
            },
        };
        if !matches!(outcome.fault, Some(Fault::Adapter { .. })) {
            outcome.bus_time = breakdown_events(&tx.events_crossed(&outcome), self.speed).total();
            outcome.measured = Some(started.elapsed());
        }
        outcome
    }

    fn recover(&mut self) -> Result<Recovery, AdapterError> {
        Err(AdapterError::Unsupported(format!(
            "{}: the kernel's adapter driver recovers its bus itself; user space cannot clock it free",
            self.identity.target
        )))
    }

    fn line_levels(&mut self) -> Result<Option<LineLevels>, AdapterError> {
        Ok(None)
    }

    fn now(&self) -> Duration {
        self.opened.elapsed()
    }

    fn delay(&mut self, d: Duration) {
        std::thread::sleep(d);
    }

    fn close(&mut self) -> Result<(), AdapterError> {
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn specs_name_the_bus_by_number_or_path() {
        assert_eq!(KernelSpec::parse("1").unwrap(), KernelSpec { path: "/dev/i2c-1".into(), force: false });
        assert_eq!(
            KernelSpec::parse("/dev/i2c-7,force").unwrap(),
            KernelSpec { path: "/dev/i2c-7".into(), force: true }
        );
        assert!(KernelSpec::parse("").is_err());
        assert!(KernelSpec::parse("one").unwrap_err().to_string().contains("kernel:1"));
        assert!(KernelSpec::parse("1,speed=1").unwrap_err().to_string().contains("`speed=1`"));
    }

    #[test]
    fn sysfs_names_buses_clocks_and_owners() {
        let dir = tempfile::tempdir().unwrap();
        let root = dir.path();
        std::fs::create_dir_all(root.join("class/i2c-dev/i2c-3")).unwrap();
        std::fs::write(root.join("class/i2c-dev/i2c-3/name"), "Greenhouse bus\n").unwrap();
        std::fs::create_dir_all(root.join("bus/i2c/devices/i2c-3/of_node")).unwrap();
        std::fs::write(root.join("bus/i2c/devices/i2c-3/of_node/clock-frequency"), 400_000u32.to_be_bytes()).unwrap();
        std::fs::create_dir_all(root.join("bus/i2c/drivers/climate-node")).unwrap();
        std::fs::create_dir_all(root.join("bus/i2c/devices/3-0031")).unwrap();
        std::os::unix::fs::symlink("../../drivers/climate-node", root.join("bus/i2c/devices/3-0031/driver")).unwrap();
        let s = Sysfs { root: root.to_path_buf() };
        assert_eq!(s.name(3).as_deref(), Some("Greenhouse bus"));
        assert_eq!(s.clock_hz(3), Some(400_000));
        assert_eq!(s.owner(3, Address::Seven(0x31)).as_deref(), Some("climate-node"));
        assert_eq!(s.owner(3, Address::Seven(0x35)), None);
        assert_eq!(s.buses(), vec![(3, "Greenhouse bus".to_string())]);
    }

    #[test]
    fn opening_a_missing_bus_says_how_to_find_one() {
        let e = KernelAdapter::open(&KernelSpec { path: "/nonexistent/i2c-99".into(), force: false })
            .err()
            .unwrap()
            .to_string();
        assert!(e.contains("/nonexistent/i2c-99") && e.contains("buscue ports"), "{e}");
        // A file that is no bus device is told apart.
        let f = tempfile::NamedTempFile::new().unwrap();
        let e = KernelAdapter::open(&KernelSpec { path: f.path().into(), force: false }).err().unwrap().to_string();
        assert!(e.contains("not an I2C bus device"), "{e}");
    }

    /// An adapter over a file that is no bus device, with a made-up sysfs:
    /// what it refuses and what a failed ioctl becomes.
    fn fake(root: &Path, force: bool) -> KernelAdapter {
        let file = tempfile::tempfile().unwrap();
        KernelAdapter {
            file,
            bus: Some(3),
            funcs: Funcs(Funcs::QUICK | Funcs::READ_BYTE_DATA | Funcs::WRITE_BYTE_DATA),
            force,
            sysfs: Sysfs { root: root.to_path_buf() },
            identity: Identity {
                driver: kernel_map::DRIVER_SMBUS.into(),
                target: "/dev/i2c-3".into(),
                description: String::new(),
            },
            caps: Capabilities {
                max_bytes_per_op: 34,
                ten_bit: false,
                min_speed_hz: 100_000,
                max_speed_hz: 100_000,
                stretch_timeout_us: 0,
                line_readback: false,
                recovery: false,
            },
            speed: BusSpeed::STANDARD,
            clock_known: false,
            client: None,
            pec: false,
            owners: Default::default(),
            opened: Instant::now(),
            caution: None,
        }
    }

    #[test]
    fn owned_addresses_and_shapes_without_a_protocol_are_refused_before_the_bus() {
        use crate::bus::Operation;
        let dir = tempfile::tempdir().unwrap();
        let root = dir.path();
        std::fs::create_dir_all(root.join("bus/i2c/drivers/climate-node")).unwrap();
        std::fs::create_dir_all(root.join("bus/i2c/devices/3-0031")).unwrap();
        std::os::unix::fs::symlink("../../drivers/climate-node", root.join("bus/i2c/devices/3-0031/driver")).unwrap();
        let read = |a: u8| Transaction::new(Address::Seven(a), vec![Operation::Write(vec![0x01]), Operation::Read(1)]);
        let a = fake(root, false);
        let why = a.refuses(&read(0x31)).expect("an owned address is refused");
        assert!(why.contains("kernel driver `climate-node`") && why.contains(",force"), "{why}");
        assert_eq!(a.owner(Address::Seven(0x31)).as_deref(), Some("climate-node"));
        assert_eq!(a.refuses(&read(0x35)), None);
        let odd = Transaction::new(Address::Seven(0x35), vec![Operation::Read(3)]);
        assert!(a.refuses(&odd).unwrap().contains("read 3 bytes"));
        // With force the owner no longer stops it; the shape rule still does.
        let mut forced = fake(root, true);
        assert_eq!(forced.refuses(&read(0x31)), None);
        // A failed ioctl (this file is no bus) is the adapter's failure,
        // named with the call and the kernel's words.
        let o = forced.execute(&read(0x31));
        let Some(Fault::Adapter { detail }) = &o.fault else { panic!("{o:?}") };
        assert!(detail.contains("0x31 on /dev/i2c-3 (I2C_SLAVE)"), "{detail}");
        // The clock is the kernel's.
        assert!(forced.set_speed(BusSpeed::FAST).unwrap_err().to_string().contains("the kernel sets"));
    }

    #[test]
    fn smbus_controller_names_draw_the_caution() {
        assert!(looks_like_system_smbus("SMBus stub driver"));
        assert!(!looks_like_system_smbus("Greenhouse bus"));
    }
}
