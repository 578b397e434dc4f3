//! Consistent Overhead Byte Stuffing (Cheshire and Baker, "Consistent
//! Overhead Byte Stuffing", IEEE/ACM Transactions on Networking, 1999).
//!
//! Contract:
//! - An encoded frame contains no zero byte; frames on the link are
//!   separated by one 0x00 delimiter, which the encoder does not emit.
//! - A block code of 0xFF means "254 data bytes, no zero follows"; a frame
//!   whose last block is full ends without an extra 0x01 (the paper's
//!   rule that the appended phantom zero is dropped).
//! - Overhead is at most one byte per 254 bytes plus one
//!   ([`max_encoded_len`]).
//! - [`Decoder`] is a streaming decoder with a fixed buffer: it takes one
//!   byte at a time, so a receiver needs no second buffer, and after any
//!   garbage it resynchronises on the next delimiter.

/// Largest encoded size of `n` bytes.
pub const fn max_encoded_len(n: usize) -> usize {
    n + n / 254 + 1
}

/// A streaming encoder: bytes go in one at a time, encoded pieces come out
/// through `emit` as each block closes. Holds one block (254 bytes), so a
/// frame can be encoded from several pieces without joining them first.
pub struct StreamEncoder {
    block: [u8; 254],
    len: usize,
    /// The last block closed was a full 0xFF block, so the phantom zero
    /// at the end needs no code of its own.
    after_full: bool,
}

impl Default for StreamEncoder {
    fn default() -> Self {
        Self::new()
    }
}

impl StreamEncoder {
    pub const fn new() -> Self {
        StreamEncoder { block: [0; 254], len: 0, after_full: false }
    }

    pub fn push<E, F: FnMut(&[u8]) -> Result<(), E>>(&mut self, b: u8, emit: &mut F) -> Result<(), E> {
        self.after_full = false;
        if b == 0 {
            emit(&[(self.len + 1) as u8])?;
            emit(&self.block[..self.len])?;
            self.len = 0;
        } else {
            self.block[self.len] = b;
            self.len += 1;
            if self.len == 254 {
                emit(&[0xFF])?;
                emit(&self.block)?;
                self.len = 0;
                self.after_full = true;
            }
        }
        Ok(())
    }

    /// Closes the last block (the delimiter is the caller's).
    pub fn finish<E, F: FnMut(&[u8]) -> Result<(), E>>(&mut self, emit: &mut F) -> Result<(), E> {
        if !(self.after_full && self.len == 0) {
            emit(&[(self.len + 1) as u8])?;
            emit(&self.block[..self.len])?;
        }
        self.len = 0;
        self.after_full = false;
        Ok(())
    }
}

/// Encodes `src` into `out`; returns the length, or `None` if `out` is
/// shorter than needed.
pub fn encode(src: &[u8], out: &mut [u8]) -> Option<usize> {
    let mut o = 0;
    let mut emit = |piece: &[u8]| {
        let dst = out.get_mut(o..o + piece.len()).ok_or(())?;
        dst.copy_from_slice(piece);
        o += piece.len();
        Ok::<(), ()>(())
    };
    let mut e = StreamEncoder::new();
    for &b in src {
        e.push(b, &mut emit).ok()?;
    }
    e.finish(&mut emit).ok()?;
    Some(o)
}

/// Why a received frame was thrown away.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum DecodeError {
    /// The delimiter arrived in the middle of a block.
    Truncated,
    /// The frame was longer than the decoder's buffer.
    Overflow,
}

/// A streaming COBS decoder holding at most `N` decoded bytes.
pub struct Decoder<const N: usize> {
    buf: [u8; N],
    len: usize,
    block_left: u8,
    zero_pending: bool,
    overflow: bool,
    started: bool,
}

impl<const N: usize> Default for Decoder<N> {
    fn default() -> Self {
        Self::new()
    }
}

impl<const N: usize> Decoder<N> {
    pub const fn new() -> Self {
        Decoder { buf: [0; N], len: 0, block_left: 0, zero_pending: false, overflow: false, started: false }
    }

    /// Forgets a partly received frame.
    pub fn reset(&mut self) {
        self.len = 0;
        self.block_left = 0;
        self.zero_pending = false;
        self.overflow = false;
        self.started = false;
    }

    /// Whether bytes of an unfinished frame are held.
    pub fn in_frame(&self) -> bool {
        self.started
    }

    fn put(&mut self, b: u8) {
        if self.len < N {
            self.buf[self.len] = b;
            self.len += 1;
        } else {
            self.overflow = true;
        }
    }

    /// Takes one byte from the link. Returns `Some` when a delimiter ends a
    /// non-empty frame: the decoded bytes, or why they were discarded.
    /// Back-to-back delimiters (empty frames) are ignored.
    pub fn push(&mut self, b: u8) -> Option<Result<&[u8], DecodeError>> {
        if b == 0 {
            if !self.started {
                return None;
            }
            let (len, left, overflow) = (self.len, self.block_left, self.overflow);
            self.reset();
            return Some(if overflow {
                Err(DecodeError::Overflow)
            } else if left != 0 {
                Err(DecodeError::Truncated)
            } else {
                Ok(&self.buf[..len])
            });
        }
        self.started = true;
        if self.block_left == 0 {
            if self.zero_pending {
                self.put(0);
            }
            self.block_left = b - 1;
            self.zero_pending = b != 0xFF;
        } else {
            self.put(b);
            self.block_left -= 1;
        }
        None
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn enc(src: &[u8]) -> ([u8; 600], usize) {
        let mut out = [0u8; 600];
        let n = encode(src, &mut out).unwrap();
        (out, n)
    }

    fn roundtrip(src: &[u8]) {
        let (out, n) = enc(src);
        assert!(!out[..n].contains(&0), "encoded data has no zero byte");
        assert!(n <= max_encoded_len(src.len()));
        let mut d = Decoder::<600>::new();
        for &b in &out[..n] {
            assert!(d.push(b).is_none());
        }
        assert_eq!(d.push(0).unwrap().unwrap(), src);
    }

    // The commonly published table of COBS examples (the one general
    // references on the algorithm reproduce), not a table of the 1999
    // paper: vectors from memory of that table, each also decoded back.
    // They follow the paper's encoding rules (block codes, the dropped
    // phantom zero).
    #[test]
    fn published_examples() {
        let cases: [(&[u8], &[u8]); 5] = [
            (&[0x00], &[0x01, 0x01]),
            (&[0x00, 0x00], &[0x01, 0x01, 0x01]),
            (&[0x11, 0x22, 0x00, 0x33], &[0x03, 0x11, 0x22, 0x02, 0x33]),
            (&[0x11, 0x22, 0x33, 0x44], &[0x05, 0x11, 0x22, 0x33, 0x44]),
            (&[0x11, 0x00, 0x00, 0x00], &[0x02, 0x11, 0x01, 0x01, 0x01]),
        ];
        for (src, want) in cases {
            let (out, n) = enc(src);
            assert_eq!(&out[..n], want, "encoding {src:02X?}");
            roundtrip(src);
        }
        let (e, n) = enc(&[]);
        assert_eq!(&e[..n], &[0x01], "empty data encodes as one block code");
    }

    // The 254-byte maximum block of the paper's encoding: 254 non-zero
    // bytes are one 0xFF block with no trailing code; a 255th byte starts
    // a new block (the last two rows of the published example table, from
    // memory).
    #[test]
    fn full_blocks() {
        let mut data = [0u8; 255];
        for (i, b) in data.iter_mut().enumerate() {
            *b = (i % 255 + 1) as u8;
        }
        let (out, n) = enc(&data[..254]);
        assert_eq!(n, 255);
        assert_eq!(out[0], 0xFF);
        assert_eq!(&out[1..255], &data[..254]);
        let (out, n) = enc(&data);
        assert_eq!(n, 257);
        assert_eq!((out[0], out[255], out[256]), (0xFF, 0x02, 0xFF));
        let mut zero_first = [0u8; 255];
        zero_first[1..].copy_from_slice(&data[..254]);
        let (out, n) = enc(&zero_first);
        assert_eq!((n, out[0], out[1]), (256, 0x01, 0xFF));
        roundtrip(&data);
        roundtrip(&data[..254]);
        roundtrip(&zero_first);
        let mut tail_zero = [0u8; 255];
        tail_zero[..254].copy_from_slice(&data[..254]);
        roundtrip(&tail_zero);
    }

    #[test]
    fn resynchronises_after_garbage() {
        let mut d = Decoder::<16>::new();
        // A block code promising 5 bytes, cut short by a delimiter.
        for b in [0x06, 0x01, 0x02] {
            assert!(d.push(b).is_none());
        }
        assert_eq!(d.push(0), Some(Err(DecodeError::Truncated)));
        assert_eq!(d.push(0), None, "empty frames are ignored");
        for b in [0x03, 0xAA, 0xBB] {
            assert!(d.push(b).is_none());
        }
        assert_eq!(d.push(0).unwrap().unwrap(), &[0xAA, 0xBB]);
        let mut small = Decoder::<2>::new();
        for b in [0x04, 1, 2, 3] {
            assert!(small.push(b).is_none());
        }
        assert_eq!(small.push(0), Some(Err(DecodeError::Overflow)));
    }
}
