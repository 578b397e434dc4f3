//! The pure half of the kernel adapter: what a transaction becomes for
//! the Linux i2c-dev interface, and what the kernel's answer means. No
//! system calls here, so every rule is tested without a kernel.
//!
//! Contract:
//! - [`plan`] turns a [`Transaction`] into either one `I2C_RDWR` call
//!   (a list of [`Msg`]s) when the adapter advertises plain I2C, or one
//!   SMBus call ([`SmbusCall`]) when it speaks only SMBus. A shape neither
//!   can carry is refused with a message naming the shape and what the
//!   adapter supports; nothing reaches the bus.
//! - Messages: the kernel puts a repeated START between consecutive
//!   messages (Documentation/i2c/i2c-protocol.rst, "Combined
//!   transactions"), while adjacent operations of one direction continue
//!   without one in our bus model. So adjacent same-direction operations
//!   are merged into one message, and split back when the reply is read.
//!   A counted read (SMBus block) is a message of its own, read with
//!   `I2C_M_RECV_LEN`, only where the adapter advertises block reads.
//! - SMBus-only adapters: a shape runs as the protocol whose bytes on the
//!   wire are the same (SMBus 3.x §6.5; the ioctl's protocol sizes are
//!   those of include/uapi/linux/i2c.h). Protocols with PEC whose reply is
//!   longer than any protocol without it (Receive Byte, Process Call,
//!   Block Read, Block Process Call; Read Word where I2C block reads are
//!   missing) run with the kernel's PEC (`I2C_PEC`): the kernel reads and
//!   checks the PEC byte and hands over the data without it, and the
//!   outcome carries the byte the kernel checked (it equals the CRC-8 of
//!   the message, [`crate::bus::pec`]). Writes with PEC need no help: our
//!   PEC byte goes out as data, the same bytes on the wire.
//! - Errors ([`fault_of_errno`]) follow Documentation/i2c/fault-codes.rst:
//!   ENXIO is an address NACK; which address phase is known only when
//!   there is one. EREMOTEIO (used by controller drivers for a NACK of
//!   either kind, common practice) is a NACK the kernel does not place.

use crate::bus::pec::crc8;
use crate::bus::{Address, Direction, Fault, OpOutcome, Operation, Outcome, Transaction};

/// The driver names a kernel adapter gives itself ([`super::Identity`]):
/// one that takes whole I2C transactions, and one that speaks only SMBus.
pub const DRIVER_I2C: &str = "kernel:i2c";
pub const DRIVER_SMBUS: &str = "kernel:smbus";

// ioctl requests of /dev/i2c-N (include/uapi/linux/i2c-dev.h).
pub const I2C_SLAVE: u64 = 0x0703;
pub const I2C_SLAVE_FORCE: u64 = 0x0706;
pub const I2C_TENBIT: u64 = 0x0704;
pub const I2C_FUNCS: u64 = 0x0705;
pub const I2C_RDWR: u64 = 0x0707;
pub const I2C_PEC: u64 = 0x0708;
pub const I2C_SMBUS: u64 = 0x0720;
/// Most messages one `I2C_RDWR` call takes (i2c-dev.h).
pub const RDWR_MAX_MSGS: usize = 42;
/// Longest message i2c-dev accepts (drivers/i2c/i2c-dev.c refuses longer
/// ones with EINVAL; the value from memory).
pub const RDWR_MAX_LEN: usize = 8192;
/// Most data bytes of one SMBus block (include/uapi/linux/i2c.h,
/// I2C_SMBUS_BLOCK_MAX).
pub const SMBUS_BLOCK_MAX: usize = 32;

// Message flags (include/uapi/linux/i2c.h, struct i2c_msg).
pub const I2C_M_RD: u16 = 0x0001;
pub const I2C_M_TEN: u16 = 0x0010;
pub const I2C_M_RECV_LEN: u16 = 0x0400;

// SMBus ioctl directions and protocol sizes (include/uapi/linux/i2c.h).
pub const SMBUS_WRITE: u8 = 0;
pub const SMBUS_READ: u8 = 1;
pub const SIZE_QUICK: u32 = 0;
pub const SIZE_BYTE: u32 = 1;
pub const SIZE_BYTE_DATA: u32 = 2;
pub const SIZE_WORD_DATA: u32 = 3;
pub const SIZE_PROC_CALL: u32 = 4;
pub const SIZE_BLOCK_DATA: u32 = 5;
pub const SIZE_BLOCK_PROC_CALL: u32 = 7;
pub const SIZE_I2C_BLOCK_DATA: u32 = 8;

/// What an adapter can do: the `I2C_FUNCS` bits
/// (include/uapi/linux/i2c.h), with their names for messages.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub struct Funcs(pub u64);

impl Funcs {
    pub const I2C: u64 = 0x0000_0001;
    pub const TEN_BIT: u64 = 0x0000_0002;
    pub const SMBUS_PEC: u64 = 0x0000_0008;
    pub const BLOCK_PROC_CALL: u64 = 0x0000_8000;
    pub const QUICK: u64 = 0x0001_0000;
    pub const READ_BYTE: u64 = 0x0002_0000;
    pub const WRITE_BYTE: u64 = 0x0004_0000;
    pub const READ_BYTE_DATA: u64 = 0x0008_0000;
    pub const WRITE_BYTE_DATA: u64 = 0x0010_0000;
    pub const READ_WORD_DATA: u64 = 0x0020_0000;
    pub const WRITE_WORD_DATA: u64 = 0x0040_0000;
    pub const PROC_CALL: u64 = 0x0080_0000;
    pub const READ_BLOCK_DATA: u64 = 0x0100_0000;
    pub const WRITE_BLOCK_DATA: u64 = 0x0200_0000;
    pub const READ_I2C_BLOCK: u64 = 0x0400_0000;
    pub const WRITE_I2C_BLOCK: u64 = 0x0800_0000;

    /// The bits with the names this tool gives them, in order.
    const NAMES: [(u64, &'static str); 16] = [
        (Self::I2C, "plain I2C"),
        (Self::TEN_BIT, "10-bit addresses"),
        (Self::SMBUS_PEC, "PEC"),
        (Self::QUICK, "Quick Command"),
        (Self::WRITE_BYTE, "Send Byte"),
        (Self::READ_BYTE, "Receive Byte"),
        (Self::WRITE_BYTE_DATA, "Write Byte"),
        (Self::READ_BYTE_DATA, "Read Byte"),
        (Self::WRITE_WORD_DATA, "Write Word"),
        (Self::READ_WORD_DATA, "Read Word"),
        (Self::PROC_CALL, "Process Call"),
        (Self::WRITE_BLOCK_DATA, "Block Write"),
        (Self::READ_BLOCK_DATA, "Block Read"),
        (Self::BLOCK_PROC_CALL, "Block Process Call"),
        (Self::WRITE_I2C_BLOCK, "I2C block write"),
        (Self::READ_I2C_BLOCK, "I2C block read"),
    ];

    pub fn has(self, bits: u64) -> bool {
        self.0 & bits == bits
    }

    /// Whether the adapter takes whole I2C transactions (`I2C_RDWR`).
    pub fn plain_i2c(self) -> bool {
        self.has(Self::I2C)
    }

    /// What the adapter advertises, by name: `plain I2C, 10-bit
    /// addresses, Quick Command, ...`.
    pub fn names(self) -> String {
        let names: Vec<&str> = Self::NAMES.iter().filter(|(b, _)| self.has(*b)).map(|(_, n)| *n).collect();
        if names.is_empty() { "nothing".to_string() } else { names.join(", ") }
    }
}

/// One `struct i2c_msg` to be.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Msg {
    pub flags: u16,
    /// For a write, the bytes; for a read, a buffer of the length to read
    /// (for a counted read, with the kernel's `I2C_M_RECV_LEN` header:
    /// byte 0 says how many bytes besides the data follow the count).
    pub buf: Vec<u8>,
    /// The transaction's operations this message carries, in order.
    pub ops: std::ops::Range<usize>,
}

/// One `I2C_SMBUS` call to be.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct SmbusCall {
    /// The protocol's name, for frames and messages.
    pub protocol: &'static str,
    pub read_write: u8,
    pub command: u8,
    pub size: u32,
    /// `union i2c_smbus_data`: byte, word (little-endian) or block
    /// (`block[0]` the length).
    pub data: [u8; SMBUS_BLOCK_MAX + 2],
    /// Whether the kernel is to add and check PEC (`I2C_PEC`).
    pub pec: bool,
}

/// What the kernel is asked to do for one transaction.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Plan {
    Rdwr(Vec<Msg>),
    Smbus(SmbusCall),
}

/// A phase: operations of one direction in a row.
struct Phase {
    direction: Direction,
    ops: std::ops::Range<usize>,
}

fn phases(tx: &Transaction) -> Vec<Phase> {
    let mut out: Vec<Phase> = Vec::new();
    for (i, op) in tx.ops.iter().enumerate() {
        match out.last_mut() {
            Some(p) if p.direction == op.direction() => p.ops.end = i + 1,
            _ => out.push(Phase { direction: op.direction(), ops: i..i + 1 }),
        }
    }
    out
}

/// The shape of a transaction in words, for refusals: `write 3 bytes,
/// then read 2 bytes`.
pub fn shape(tx: &Transaction) -> String {
    let part = |op: &Operation| match op {
        Operation::Write(b) => format!("write {} byte{}", b.len(), if b.len() == 1 { "" } else { "s" }),
        Operation::Read(n) => format!("read {n} byte{}", if *n == 1 { "" } else { "s" }),
        Operation::ReadCounted { trailer: 0, .. } => "a counted read".to_string(),
        Operation::ReadCounted { .. } => "a counted read with PEC".to_string(),
    };
    tx.ops.iter().map(part).collect::<Vec<_>>().join(", then ")
}

/// What the kernel is to do for `tx` on an adapter that advertises
/// `funcs`; `Err` says why it cannot, before anything is sent.
pub fn plan(tx: &Transaction, funcs: Funcs) -> Result<Plan, String> {
    if tx.address.is_ten_bit() && !funcs.has(Funcs::TEN_BIT) {
        return Err(format!("{} is a 10-bit address and this adapter does not do 10-bit addressing", tx.address));
    }
    let counted = tx.ops.iter().any(Operation::is_counted);
    if funcs.plain_i2c() && (!counted || funcs.has(Funcs::READ_BLOCK_DATA)) {
        return rdwr(tx).map(Plan::Rdwr);
    }
    if tx.address.is_ten_bit() {
        return Err(format!(
            "{}: this adapter speaks only SMBus here, and the SMBus protocols have 7-bit addresses only",
            tx.address
        ));
    }
    smbus(tx, funcs).map(Plan::Smbus).map_err(|why| {
        let what = if funcs.plain_i2c() {
            "this adapter cannot read a counted block, and no SMBus protocol it offers carries this"
        } else {
            "this adapter speaks only SMBus, and no protocol it offers carries this"
        };
        format!("{} ({}): {what} ({why}); it offers {}", tx.address, shape(tx), funcs.names())
    })
}

fn rdwr(tx: &Transaction) -> Result<Vec<Msg>, String> {
    let ten = if tx.address.is_ten_bit() { I2C_M_TEN } else { 0 };
    let mut msgs = Vec::new();
    for p in phases(tx) {
        let ops = &tx.ops[p.ops.clone()];
        if p.direction == Direction::Write {
            msgs.push(Msg { flags: ten, buf: concat_writes(ops), ops: p.ops });
            continue;
        }
        if let [Operation::ReadCounted { max, trailer }] = ops {
            if *max > SMBUS_BLOCK_MAX {
                return Err(format!(
                    "a counted read of up to {max} bytes: the kernel reads at most {SMBUS_BLOCK_MAX} after the count"
                ));
            }
            // I2C_M_RECV_LEN: byte 0 tells the kernel how many bytes come
            // besides the data (the count itself and the trailer), and the
            // buffer must hold a whole block after them (i2c-dev.c).
            let mut buf = vec![0u8; 1 + trailer + SMBUS_BLOCK_MAX];
            buf[0] = (1 + trailer) as u8;
            msgs.push(Msg { flags: ten | I2C_M_RD | I2C_M_RECV_LEN, buf, ops: p.ops });
            continue;
        }
        if ops.iter().any(Operation::is_counted) {
            return Err("a counted read next to another read: the kernel reads a counted block as a message of its own, with a repeated START before it".into());
        }
        let len: usize = ops.iter().map(Operation::len).sum();
        msgs.push(Msg { flags: ten | I2C_M_RD, buf: vec![0; len], ops: p.ops });
    }
    if msgs.len() > RDWR_MAX_MSGS {
        return Err(format!("{} direction changes: the kernel takes at most {RDWR_MAX_MSGS} messages", msgs.len()));
    }
    if let Some(m) = msgs.iter().find(|m| m.buf.len() > RDWR_MAX_LEN) {
        return Err(format!("a message of {} bytes: the kernel takes at most {RDWR_MAX_LEN}", m.buf.len()));
    }
    Ok(msgs)
}

/// The bytes of adjacent write operations as one run: what the wire
/// carries for them (no START between), so one message or one SMBus
/// command and data.
fn concat_writes<'a>(ops: impl IntoIterator<Item = &'a Operation>) -> Vec<u8> {
    ops.into_iter()
        .flat_map(|o| match o {
            Operation::Write(b) => b.as_slice(),
            _ => &[],
        })
        .copied()
        .collect()
}

fn call(protocol: &'static str, read_write: u8, command: u8, size: u32, pec: bool) -> SmbusCall {
    SmbusCall { protocol, read_write, command, size, data: [0; SMBUS_BLOCK_MAX + 2], pec }
}

/// The SMBus protocol whose wire bytes are those of `tx`.
fn smbus(tx: &Transaction, f: Funcs) -> Result<SmbusCall, String> {
    let need = |bits: u64, what: &str| if f.has(bits) { Ok(()) } else { Err(format!("it has no {what}")) };
    let pec_needed = |what: &str| need(Funcs::SMBUS_PEC, &format!("PEC, which {what} with PEC needs"));
    let mut ops: Vec<&Operation> = tx.ops.iter().collect();
    // Adjacent writes are one write on the wire.
    let merged: Vec<u8>;
    let first_write = if let Some(Operation::Write(_)) = ops.first() {
        let n = ops.iter().take_while(|o| matches!(o, Operation::Write(_))).count();
        merged = concat_writes(ops[..n].iter().copied());
        ops.drain(..n);
        Some(merged.as_slice())
    } else {
        None
    };
    let read = match ops.as_slice() {
        [] => None,
        [r] => Some(*r),
        _ => return Err("more than one direction change".into()),
    };
    match (first_write, read) {
        (Some([]), None) => {
            need(Funcs::QUICK, "Quick Command")?;
            Ok(call("Quick Command", SMBUS_WRITE, 0, SIZE_QUICK, false))
        }
        (Some([d]), None) => {
            need(Funcs::WRITE_BYTE, "Send Byte")?;
            Ok(call("Send Byte", SMBUS_WRITE, *d, SIZE_BYTE, false))
        }
        (Some([c, d]), None) if f.has(Funcs::WRITE_BYTE_DATA) => {
            let mut x = call("Write Byte", SMBUS_WRITE, *c, SIZE_BYTE_DATA, false);
            x.data[0] = *d;
            Ok(x)
        }
        (Some([c, lo, hi]), None) if f.has(Funcs::WRITE_WORD_DATA) => {
            let mut x = call("Write Word", SMBUS_WRITE, *c, SIZE_WORD_DATA, false);
            x.data[0] = *lo;
            x.data[1] = *hi;
            Ok(x)
        }
        // A command, a count and that many bytes: Block Write, which has
        // the same bytes on the wire as an I2C block write but is a
        // protocol of its own to the adapter (and to an emulated target).
        (Some([c, n, rest @ ..]), None)
            if f.has(Funcs::WRITE_BLOCK_DATA)
                && *n as usize == rest.len()
                && (1..=SMBUS_BLOCK_MAX).contains(&rest.len()) =>
        {
            let mut x = call("Block Write", SMBUS_WRITE, *c, SIZE_BLOCK_DATA, false);
            x.data[0] = *n;
            x.data[1..=rest.len()].copy_from_slice(rest);
            Ok(x)
        }
        (Some([c, rest @ ..]), None) => {
            need(Funcs::WRITE_I2C_BLOCK, "I2C block write for a command and several bytes")?;
            if rest.len() > SMBUS_BLOCK_MAX {
                return Err(format!(
                    "{} bytes after the command: a block carries at most {SMBUS_BLOCK_MAX}",
                    rest.len()
                ));
            }
            let mut x = call("I2C block write", SMBUS_WRITE, *c, SIZE_I2C_BLOCK_DATA, false);
            x.data[0] = rest.len() as u8;
            x.data[1..=rest.len()].copy_from_slice(rest);
            Ok(x)
        }
        (None, Some(Operation::Read(1))) => {
            need(Funcs::READ_BYTE, "Receive Byte")?;
            Ok(call("Receive Byte", SMBUS_READ, 0, SIZE_BYTE, false))
        }
        (None, Some(Operation::Read(2))) => {
            // Two bytes with no command: only Receive Byte with its PEC.
            need(Funcs::READ_BYTE, "Receive Byte")?;
            pec_needed("Receive Byte")?;
            Ok(call("Receive Byte", SMBUS_READ, 0, SIZE_BYTE, true))
        }
        (Some([c]), Some(Operation::Read(1))) => {
            need(Funcs::READ_BYTE_DATA, "Read Byte")?;
            Ok(call("Read Byte", SMBUS_READ, *c, SIZE_BYTE_DATA, false))
        }
        (Some([c]), Some(Operation::Read(2))) if f.has(Funcs::READ_WORD_DATA) => {
            Ok(call("Read Word", SMBUS_READ, *c, SIZE_WORD_DATA, false))
        }
        (Some([c]), Some(Operation::Read(3))) if !f.has(Funcs::READ_I2C_BLOCK) => {
            need(Funcs::READ_WORD_DATA, "Read Word")?;
            pec_needed("Read Word")?;
            Ok(call("Read Word", SMBUS_READ, *c, SIZE_WORD_DATA, true))
        }
        (Some([c]), Some(Operation::Read(n))) => {
            need(Funcs::READ_I2C_BLOCK, "I2C block read for a command and several bytes")?;
            if *n > SMBUS_BLOCK_MAX {
                return Err(format!("a read of {n} bytes: a block carries at most {SMBUS_BLOCK_MAX}"));
            }
            let mut x = call("I2C block read", SMBUS_READ, *c, SIZE_I2C_BLOCK_DATA, false);
            x.data[0] = *n as u8;
            Ok(x)
        }
        (Some([c, lo, hi]), Some(Operation::Read(n @ (2 | 3)))) => {
            need(Funcs::PROC_CALL, "Process Call")?;
            let pec = *n == 3;
            if pec {
                pec_needed("Process Call")?;
            }
            let mut x = call("Process Call", SMBUS_WRITE, *c, SIZE_PROC_CALL, pec);
            x.data[0] = *lo;
            x.data[1] = *hi;
            Ok(x)
        }
        (Some([c]), Some(Operation::ReadCounted { max, trailer })) => {
            need(Funcs::READ_BLOCK_DATA, "Block Read")?;
            counted_fits(*max, *trailer)?;
            if *trailer == 1 {
                pec_needed("Block Read")?;
            }
            Ok(call("Block Read", SMBUS_READ, *c, SIZE_BLOCK_DATA, *trailer == 1))
        }
        (Some([c, m, data @ ..]), Some(Operation::ReadCounted { max, trailer })) if *m as usize == data.len() => {
            need(Funcs::BLOCK_PROC_CALL, "Block Process Call")?;
            counted_fits(*max, *trailer)?;
            if *trailer == 1 {
                pec_needed("Block Process Call")?;
            }
            let mut x = call("Block Process Call", SMBUS_WRITE, *c, SIZE_BLOCK_PROC_CALL, *trailer == 1);
            x.data[0] = *m;
            x.data[1..=data.len()].copy_from_slice(data);
            Ok(x)
        }
        // (No lone write is left here: every leading write was merged,
        // so the one operation left reads.)
        _ => Err("no SMBus protocol has these bytes on the wire".into()),
    }
}

fn counted_fits(max: usize, trailer: usize) -> Result<(), String> {
    if trailer > 1 {
        return Err(format!("a counted read with {trailer} bytes after the data; SMBus has only the PEC byte"));
    }
    if max > SMBUS_BLOCK_MAX {
        return Err(format!("a counted read of up to {max} bytes: the kernel reads at most {SMBUS_BLOCK_MAX}"));
    }
    Ok(())
}

/// The outcome of a plan the kernel carried out: `msgs` or `call` as the
/// kernel left them.
pub fn rdwr_outcome(tx: &Transaction, msgs: &[Msg]) -> Outcome {
    let mut ops: Vec<OpOutcome> = Vec::with_capacity(tx.ops.len());
    for m in msgs {
        let mut at = 0;
        for op in &tx.ops[m.ops.clone()] {
            match op {
                Operation::Write(b) => ops.push(OpOutcome { acks: vec![true; b.len()], data: Vec::new() }),
                Operation::Read(n) => {
                    ops.push(OpOutcome { acks: Vec::new(), data: m.buf[at..at + n].to_vec() });
                    at += n;
                }
                Operation::ReadCounted { max, trailer } => {
                    // The kernel stored the count first, then the data.
                    let count = (m.buf.first().copied().unwrap_or(0) as usize).min(*max);
                    let end = (1 + count + trailer).min(m.buf.len());
                    ops.push(OpOutcome { acks: Vec::new(), data: m.buf[..end].to_vec() });
                }
            }
        }
    }
    Outcome { ops, bus_time: Default::default(), measured: None, fault: None }
}

/// The outcome of an SMBus call the kernel carried out, `data` as the
/// kernel left it: per operation of `tx`, writes ACKed, reads as the
/// target sent them, a PEC the kernel checked put back where it was.
pub fn smbus_outcome(tx: &Transaction, call: &SmbusCall, data: &[u8; SMBUS_BLOCK_MAX + 2]) -> Outcome {
    let mut ops: Vec<OpOutcome> = Vec::with_capacity(tx.ops.len());
    let mut read: Vec<u8> = match call.size {
        _ if call.read_write == SMBUS_WRITE && call.size != SIZE_PROC_CALL && call.size != SIZE_BLOCK_PROC_CALL => {
            Vec::new()
        }
        SIZE_BYTE | SIZE_BYTE_DATA => vec![data[0]],
        SIZE_WORD_DATA | SIZE_PROC_CALL => vec![data[0], data[1]],
        SIZE_I2C_BLOCK_DATA => data[1..=(data[0] as usize).min(SMBUS_BLOCK_MAX)].to_vec(),
        // Blocks: the count, then the data.
        _ => data[..=(data[0] as usize).min(SMBUS_BLOCK_MAX)].to_vec(),
    };
    for op in &tx.ops {
        if let Operation::Write(b) = op {
            ops.push(OpOutcome { acks: vec![true; b.len()], data: Vec::new() });
        }
    }
    if call.pec {
        read.push(crc8(&message(tx, &read)));
    }
    if tx.ops.iter().any(|o| o.direction() == Direction::Read) {
        ops.push(OpOutcome { acks: Vec::new(), data: read });
    }
    Outcome { ops, bus_time: Default::default(), measured: None, fault: None }
}

/// The message a PEC covers (SMBus 3.x §6.4): the address byte, what was
/// written, the address byte again for the read, what was read.
fn message(tx: &Transaction, read: &[u8]) -> Vec<u8> {
    let Address::Seven(a) = tx.address else { return Vec::new() };
    let mut m = Vec::new();
    let mut direction = None;
    for op in &tx.ops {
        if direction != Some(op.direction()) {
            m.push(a << 1 | u8::from(op.direction() == Direction::Read));
            direction = Some(op.direction());
        }
        if let Operation::Write(b) = op {
            m.extend_from_slice(b);
        }
    }
    m.extend_from_slice(read);
    m
}

/// The outcome of a kernel error `errno` on `tx`; `None` when the error
/// is not about the bus at all (the caller reports it as the adapter's).
pub fn fault_of_errno(errno: i32, tx: &Transaction) -> Option<Fault> {
    let single_phase = phases(tx).len() == 1;
    Some(match errno {
        // "the address phase of a transfer didn't get an ACK"
        // (fault-codes.rst). i2c-stub answers ENODEV for an address where
        // it emulates no chip.
        libc::ENXIO | libc::ENODEV if single_phase => {
            Fault::AddressNack { op: 0, direction: tx.ops.first().map_or(Direction::Write, Operation::direction) }
        }
        libc::ENXIO | libc::ENODEV => Fault::Nack { address: true },
        libc::EREMOTEIO => Fault::Nack { address: false },
        // "arbitration lost" (fault-codes.rst).
        libc::EAGAIN => Fault::ArbitrationLost,
        // "an operation took too much time ... a slave stretches clocks
        // too far" (fault-codes.rst); the kernel does not say how long it
        // waited.
        libc::ETIMEDOUT => Fault::StretchTimeout { waited_us: 0 },
        _ => return None,
    })
}

/// Words for a kernel error that is not a bus fault, with the kernel's
/// meaning from fault-codes.rst where it has one.
pub fn errno_words(errno: i32) -> String {
    let meaning = match errno {
        libc::EBADMSG => "the PEC byte did not check out (the kernel does not hand over the byte it received)",
        libc::EBUSY => "the bus was busy for too long",
        libc::EIO => "an I/O error the driver did not describe further",
        libc::EOPNOTSUPP => "the adapter cannot do this operation",
        libc::EPROTO => "the target broke the protocol (for a block read: a count outside 1 to 32)",
        libc::EINVAL => "the kernel refused the request's parameters",
        libc::ESHUTDOWN => "the adapter is suspended",
        _ => "",
    };
    let os = std::io::Error::from_raw_os_error(errno);
    if meaning.is_empty() { format!("{os}") } else { format!("{meaning} ({os})") }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn tx(ops: Vec<Operation>) -> Transaction {
        Transaction::new(Address::Seven(0x31), ops)
    }

    const SMBUS_ONLY: Funcs = Funcs(
        Funcs::QUICK
            | Funcs::READ_BYTE
            | Funcs::WRITE_BYTE
            | Funcs::READ_BYTE_DATA
            | Funcs::WRITE_BYTE_DATA
            | Funcs::READ_WORD_DATA
            | Funcs::WRITE_WORD_DATA
            | Funcs::READ_I2C_BLOCK
            | Funcs::WRITE_I2C_BLOCK
            | Funcs::READ_BLOCK_DATA
            | Funcs::WRITE_BLOCK_DATA,
    );
    const I2C: Funcs = Funcs(Funcs::I2C | Funcs::TEN_BIT | Funcs::READ_BLOCK_DATA);

    #[test]
    fn a_write_then_read_is_two_messages_and_same_direction_operations_merge() {
        // The kernel puts a repeated START between messages
        // (Documentation/i2c/i2c-protocol.rst): W,W,R,R is two messages.
        let t = tx(vec![
            Operation::Write(vec![0x10]),
            Operation::Write(vec![0x20, 0x21]),
            Operation::Read(2),
            Operation::Read(1),
        ]);
        let Plan::Rdwr(msgs) = plan(&t, I2C).unwrap() else { panic!("I2C_RDWR") };
        assert_eq!(msgs.len(), 2);
        assert_eq!((msgs[0].flags, msgs[0].buf.as_slice(), msgs[0].ops.clone()), (0, &[0x10, 0x20, 0x21][..], 0..2));
        assert_eq!((msgs[1].flags, msgs[1].buf.len(), msgs[1].ops.clone()), (I2C_M_RD, 3, 2..4));
        // The reply splits back per operation.
        let mut done = msgs.clone();
        done[1].buf = vec![0xA1, 0xA2, 0xA3];
        let o = rdwr_outcome(&t, &done);
        assert_eq!(o.ops.len(), 4);
        assert_eq!(o.ops[1].acks, vec![true, true]);
        assert_eq!(o.ops[2].data, vec![0xA1, 0xA2]);
        assert_eq!(o.ops[3].data, vec![0xA3]);
    }

    #[test]
    fn ten_bit_messages_carry_the_ten_bit_flag_and_need_the_function() {
        let t = Transaction::new(Address::Ten(0x2A5), vec![Operation::Write(vec![1]), Operation::Read(1)]);
        let Plan::Rdwr(msgs) = plan(&t, I2C).unwrap() else { panic!("I2C_RDWR") };
        // I2C_M_TEN = 0x0010, I2C_M_RD = 0x0001 (include/uapi/linux/i2c.h).
        assert_eq!(msgs[0].flags, 0x0010);
        assert_eq!(msgs[1].flags, 0x0011);
        let e = plan(&t, Funcs(Funcs::I2C)).unwrap_err();
        assert!(e.contains("10-bit"), "{e}");
    }

    #[test]
    fn a_counted_read_asks_the_kernel_for_the_length_byte() {
        let t = tx(vec![Operation::Write(vec![0x40]), Operation::ReadCounted { max: 32, trailer: 1 }]);
        let Plan::Rdwr(msgs) = plan(&t, I2C).unwrap() else { panic!("I2C_RDWR") };
        // I2C_M_RECV_LEN (0x0400): buf[0] = bytes besides the data (count
        // + PEC), the buffer a whole block longer (drivers/i2c/i2c-dev.c).
        assert_eq!(msgs[1].flags, I2C_M_RD | 0x0400);
        assert_eq!((msgs[1].buf[0], msgs[1].buf.len()), (2, 2 + 32));
        let mut done = msgs.clone();
        done[1].buf[..4].copy_from_slice(&[2, 0xB1, 0xB2, 0x77]);
        assert_eq!(rdwr_outcome(&t, &done).ops[1].data, vec![2, 0xB1, 0xB2, 0x77]);
        // Without block reads advertised, an I2C adapter cannot carry it
        // unless an SMBus protocol can.
        assert!(plan(&t, Funcs(Funcs::I2C)).is_err());
        let t2 = tx(vec![Operation::Read(1), Operation::ReadCounted { max: 4, trailer: 0 }]);
        assert!(plan(&t2, I2C).unwrap_err().contains("counted read next to another read"));
    }

    #[test]
    fn smbus_shapes_map_onto_their_protocols() {
        let p = |ops| match plan(&tx(ops), SMBUS_ONLY) {
            Ok(Plan::Smbus(c)) => (c.protocol, c.read_write, c.command, c.size, c.data[0], c.pec),
            other => panic!("{other:?}"),
        };
        // Sizes and directions: include/uapi/linux/i2c.h.
        assert_eq!(p(vec![Operation::Write(vec![])]), ("Quick Command", 0, 0, 0, 0, false));
        assert_eq!(p(vec![Operation::Write(vec![0x5C])]), ("Send Byte", 0, 0x5C, 1, 0, false));
        assert_eq!(p(vec![Operation::Write(vec![0x02, 0x9A])]), ("Write Byte", 0, 0x02, 2, 0x9A, false));
        assert_eq!(p(vec![Operation::Write(vec![0x02, 0x34, 0x12])]), ("Write Word", 0, 0x02, 3, 0x34, false));
        assert_eq!(p(vec![Operation::Write(vec![0x02, 1, 2, 3])]), ("I2C block write", 0, 0x02, 8, 3, false));
        assert_eq!(p(vec![Operation::Write(vec![0x02, 3, 7, 8, 9])]), ("Block Write", 0, 0x02, 5, 3, false));
        assert_eq!(p(vec![Operation::Read(1)]), ("Receive Byte", 1, 0, 1, 0, false));
        assert_eq!(p(vec![Operation::Write(vec![0x07]), Operation::Read(1)]), ("Read Byte", 1, 0x07, 2, 0, false));
        assert_eq!(p(vec![Operation::Write(vec![0x07]), Operation::Read(2)]), ("Read Word", 1, 0x07, 3, 0, false));
        assert_eq!(p(vec![Operation::Write(vec![0x07]), Operation::Read(5)]), ("I2C block read", 1, 0x07, 8, 5, false));
        assert_eq!(
            p(vec![Operation::Write(vec![0x07]), Operation::ReadCounted { max: 32, trailer: 0 }]),
            ("Block Read", 1, 0x07, 5, 0, false)
        );
    }

    #[test]
    fn pec_reads_longer_than_any_plain_protocol_use_the_kernels_pec() {
        let with_pec = Funcs(SMBUS_ONLY.0 | Funcs::SMBUS_PEC | Funcs::PROC_CALL);
        let t = tx(vec![Operation::Read(2)]);
        let Ok(Plan::Smbus(c)) = plan(&t, with_pec) else { panic!() };
        assert_eq!((c.protocol, c.pec), ("Receive Byte", true));
        // Without PEC support the shape is refused, naming what is offered.
        let e = plan(&t, SMBUS_ONLY).unwrap_err();
        assert!(e.contains("read 2 bytes") && e.contains("PEC") && e.contains("Quick Command"), "{e}");
        // The PEC byte the kernel checked is put back: CRC-8/SMBUS over
        // 0x63 (0x31, read) and 0x5A is 0x4B, worked bit by bit from the
        // catalogue's definition (poly 0x07, init 0, no reflection; its
        // check value 0xF4 is pinned in bus::pec's tests).
        let mut data = [0u8; SMBUS_BLOCK_MAX + 2];
        data[0] = 0x5A;
        let o = smbus_outcome(&t, &c, &data);
        assert_eq!(o.ops[0].data, vec![0x5A, crc8(&[0x63, 0x5A])]);
        assert_eq!(crc8(&[0x63, 0x5A]), 0x4B);
        let pc = tx(vec![Operation::Write(vec![0x03, 0x11, 0x22]), Operation::Read(3)]);
        let Ok(Plan::Smbus(c)) = plan(&pc, with_pec) else { panic!() };
        assert_eq!((c.protocol, c.size, c.pec, c.data[0], c.data[1]), ("Process Call", 4, true, 0x11, 0x22));
    }

    #[test]
    fn smbus_outcomes_put_reads_where_the_operations_are() {
        let t = tx(vec![Operation::Write(vec![0x40]), Operation::ReadCounted { max: 32, trailer: 0 }]);
        let Ok(Plan::Smbus(c)) = plan(&t, SMBUS_ONLY) else { panic!() };
        let mut data = [0u8; SMBUS_BLOCK_MAX + 2];
        data[..4].copy_from_slice(&[3, 0xC1, 0xC2, 0xC3]);
        let o = smbus_outcome(&t, &c, &data);
        assert_eq!(o.ops[0].acks, vec![true]);
        assert_eq!(o.ops[1].data, vec![3, 0xC1, 0xC2, 0xC3]);
        let w = tx(vec![Operation::Write(vec![0x02, 0x34, 0x12])]);
        let Ok(Plan::Smbus(c)) = plan(&w, SMBUS_ONLY) else { panic!() };
        let o = smbus_outcome(&w, &c, &c.data);
        assert_eq!((o.ops.len(), o.ops[0].acks.len()), (1, 3));
    }

    #[test]
    fn shapes_no_protocol_carries_are_refused_with_the_shape_named() {
        let e =
            plan(&tx(vec![Operation::Read(1), Operation::Write(vec![1]), Operation::Read(1)]), SMBUS_ONLY).unwrap_err();
        assert!(e.contains("read 1 byte, then write 1 byte, then read 1 byte"), "{e}");
        assert!(e.contains("speaks only SMBus"), "{e}");
        let e = plan(&tx(vec![Operation::Read(4)]), SMBUS_ONLY).unwrap_err();
        assert!(e.contains("no SMBus protocol"), "{e}");
        let ten = Transaction::new(Address::Ten(0x2A5), vec![Operation::Read(1)]);
        assert!(plan(&ten, Funcs(SMBUS_ONLY.0 | Funcs::TEN_BIT)).unwrap_err().contains("7-bit"));
        let e = plan(&tx(vec![Operation::Write(vec![0; 40])]), SMBUS_ONLY).unwrap_err();
        assert!(e.contains("39 bytes after the command"), "{e}");
    }

    #[test]
    fn kernel_errors_become_faults_as_fault_codes_rst_says() {
        let one = tx(vec![Operation::Read(1)]);
        let two = tx(vec![Operation::Write(vec![1]), Operation::Read(1)]);
        assert_eq!(fault_of_errno(libc::ENXIO, &one), Some(Fault::AddressNack { op: 0, direction: Direction::Read }));
        // Which address phase went unanswered is not said: not guessed.
        assert_eq!(fault_of_errno(libc::ENXIO, &two), Some(Fault::Nack { address: true }));
        assert_eq!(fault_of_errno(libc::EREMOTEIO, &two), Some(Fault::Nack { address: false }));
        assert_eq!(fault_of_errno(libc::EAGAIN, &two), Some(Fault::ArbitrationLost));
        assert_eq!(fault_of_errno(libc::ETIMEDOUT, &two), Some(Fault::StretchTimeout { waited_us: 0 }));
        assert_eq!(fault_of_errno(libc::EOPNOTSUPP, &two), None);
        assert!(errno_words(libc::EBADMSG).contains("PEC"));
    }

    #[test]
    fn functionality_names_read_as_the_bits_say() {
        assert_eq!(Funcs(0).names(), "nothing");
        assert_eq!(Funcs(Funcs::I2C | Funcs::QUICK).names(), "plain I2C, Quick Command");
        assert!(!SMBUS_ONLY.plain_i2c());
    }
}
