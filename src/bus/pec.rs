//! Packet Error Code: the SMBus CRC-8.
//!
//! Contract: [`crc8`] is CRC-8 with polynomial x⁸ + x² + x + 1 (0x07),
//! initial value 0, no reflection, no final XOR, as the SMBus
//! specification defines PEC (SMBus 3.x §6.4, 2.0 §5.4: the section
//! before the bus protocols, which are 3.x §6.5 and 2.0 §5.5; section
//! numbers from memory). It covers every byte of the message on the wire,
//! address bytes included (the repeated address byte of a read protocol
//! too), up to but not including the PEC byte itself. The CRC catalogue
//! calls it CRC-8/SMBUS.

/// The generator polynomial without its x⁸ term.
pub const POLY: u8 = 0x07;

/// One table entry per byte value: the CRC of that single byte from a zero
/// register. Built at compile time from [`POLY`], so the table cannot
/// drift from the polynomial.
const TABLE: [u8; 256] = {
    let mut table = [0u8; 256];
    let mut i = 0;
    while i < 256 {
        let mut crc = i as u8;
        let mut bit = 0;
        while bit < 8 {
            crc = if crc & 0x80 != 0 { (crc << 1) ^ POLY } else { crc << 1 };
            bit += 1;
        }
        table[i] = crc;
        i += 1;
    }
    table
};

/// A running PEC, for callers that see a message byte by byte (a device
/// model on the bus).
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct Pec(u8);

impl Pec {
    pub fn new() -> Self {
        Pec(0)
    }

    pub fn update(&mut self, byte: u8) {
        self.0 = TABLE[(self.0 ^ byte) as usize];
    }

    pub fn extend(&mut self, bytes: &[u8]) {
        for &b in bytes {
            self.update(b);
        }
    }

    pub fn value(self) -> u8 {
        self.0
    }
}

/// The PEC of a whole message.
pub fn crc8(bytes: &[u8]) -> u8 {
    let mut p = Pec::new();
    p.extend(bytes);
    p.value()
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Bit-at-a-time reference, straight from the definition of the
    /// polynomial division, to check the table against.
    fn bitwise(bytes: &[u8]) -> u8 {
        let mut crc = 0u8;
        for &b in bytes {
            crc ^= b;
            for _ in 0..8 {
                crc = if crc & 0x80 != 0 { (crc << 1) ^ POLY } else { crc << 1 };
            }
        }
        crc
    }

    // The CRC catalogue (CRC RevEng), CRC-8/SMBUS: width=8 poly=0x07
    // init=0x00 refin=false refout=false xorout=0x00 check=0xf4.
    #[test]
    fn catalogue_check_value() {
        assert_eq!(crc8(b"123456789"), 0xF4);
    }

    // Cross-check with the `crc` crate's CRC_8_SMBUS over assorted messages.
    #[test]
    fn agrees_with_the_crc_crate() {
        const REF: crc::Crc<u8> = crc::Crc::<u8>::new(&crc::CRC_8_SMBUS);
        let messages: [&[u8]; 5] = [b"", b"\x00", b"\xFF\xFF", b"123456789", &[0x16, 0x09, 0x17, 0x34, 0x12]];
        for m in messages {
            assert_eq!(crc8(m), REF.checksum(m), "{m:02X?}");
            assert_eq!(crc8(m), bitwise(m), "{m:02X?}");
        }
        let all: Vec<u8> = (0..=255).collect();
        assert_eq!(crc8(&all), REF.checksum(&all));
    }

    // A message followed by its own PEC leaves a zero remainder (property
    // of any CRC without final XOR): how a receiver can check in one pass.
    #[test]
    fn message_with_its_pec_leaves_zero() {
        let mut m = vec![0x16, 0x0D, 0x17, 0x5A];
        m.push(crc8(&m));
        assert_eq!(crc8(&m), 0);
    }
}
