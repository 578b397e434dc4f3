//! CRC-32/ISO-HDLC, the frame check of the native protocol.
//!
//! Parameters as catalogued in the CRC RevEng catalogue ("Catalogue of
//! parametrised CRC algorithms", entry CRC-32/ISO-HDLC): width 32, poly
//! 0x04C11DB7, init 0xFFFFFFFF, refin true, refout true, xorout
//! 0xFFFFFFFF, check 0xCBF43926 (the CRC of the ASCII bytes "123456789").
//! A 256-entry table built at compile time keeps it fast on small cores
//! without costing RAM (it lives in flash).

/// The reflected polynomial 0x04C11DB7.
const POLY_REFLECTED: u32 = 0xEDB8_8320;

const TABLE: [u32; 256] = build_table();

const fn build_table() -> [u32; 256] {
    let mut t = [0u32; 256];
    let mut i = 0;
    while i < 256 {
        let mut c = i as u32;
        let mut k = 0;
        while k < 8 {
            c = if c & 1 != 0 { (c >> 1) ^ POLY_REFLECTED } else { c >> 1 };
            k += 1;
        }
        t[i] = c;
        i += 1;
    }
    t
}

/// A running CRC, for data that arrives in pieces.
#[derive(Debug, Clone, Copy)]
pub struct Crc32(u32);

impl Default for Crc32 {
    fn default() -> Self {
        Self::new()
    }
}

impl Crc32 {
    pub const fn new() -> Self {
        Crc32(0xFFFF_FFFF)
    }

    pub fn update(&mut self, bytes: &[u8]) {
        let mut c = self.0;
        for &b in bytes {
            c = TABLE[((c ^ b as u32) & 0xFF) as usize] ^ (c >> 8);
        }
        self.0 = c;
    }

    pub fn finish(self) -> u32 {
        self.0 ^ 0xFFFF_FFFF
    }
}

/// CRC-32/ISO-HDLC of `bytes`.
pub fn crc32(bytes: &[u8]) -> u32 {
    let mut c = Crc32::new();
    c.update(bytes);
    c.finish()
}

#[cfg(test)]
mod tests {
    use super::*;

    // CRC RevEng catalogue, CRC-32/ISO-HDLC: check = 0xCBF43926.
    #[test]
    fn catalogue_check_value() {
        assert_eq!(crc32(b"123456789"), 0xCBF4_3926);
    }

    #[test]
    fn pieces_equal_whole() {
        let mut c = Crc32::new();
        c.update(b"1234");
        c.update(b"56789");
        assert_eq!(c.finish(), 0xCBF4_3926);
        assert_eq!(crc32(b""), 0, "init and xorout cancel on empty input (follows from the catalogue parameters)");
    }
}
