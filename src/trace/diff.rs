//! Diff: align the frames of two traces by content and say where they
//! differ, with per-address summaries.
//!
//! Contract (docs/traces.md, "Diff"):
//! - A frame's content key is its address, operations and outcome (ACKs,
//!   read bytes after masks, result); times, sequence numbers, attempt
//!   numbers and script lines are not part of it, so an extra retry or an
//!   inserted poll is one inserted frame, not a cascade.
//! - Alignment is a shortest edit script over the key sequences (Myers,
//!   "An O(ND) Difference Algorithm and Its Variations", Algorithmica 1986,
//!   with the linear-space middle-snake refinement of its section 4b):
//!   O((N+M)·D) time and O(N+M) space for D differences, after stripping
//!   the common prefix and suffix. Keys are 64-bit hashes, so a trace
//!   is held as 8 bytes per frame plus its line offset; frames are read
//!   back from the files only to show a difference.
//! - A region needing more than [`MAX_EDITS`] edits is reported as one
//!   replaced block rather than aligned, which bounds the time on traces
//!   that have little in common.

use std::borrow::Cow;
use std::collections::BTreeMap;
use std::hash::{DefaultHasher, Hash, Hasher};
use std::io::BufRead;
use std::ops::Range;
use std::path::Path;
use std::time::Duration;

use serde::Deserialize;

use crate::bus::{Address, Fault, Operation, Outcome};

use super::ignore::{Collapse, Ignore};
use super::mask::{Masks, RegisterNames};
use super::{Header, TraceError, TraceReader};
use crate::record::{FieldValue, Frame, Purpose, Stats};

/// Edit-distance bound per aligned region; see the module contract.
pub const MAX_EDITS: usize = 20_000;

/// One trace reduced to what alignment needs.
pub struct Keyed {
    pub header: Header,
    pub keys: Vec<u64>,
    /// Byte offset and line number of each frame, to read it back.
    pub places: Vec<(u64, u64)>,
    /// Per-address counters, as a run's end record counts them.
    pub summary: BTreeMap<Address, Stats>,
    /// The register names the frames carry, for checking masks.
    pub names: RegisterNames,
    /// Frames left out by the [`Ignore`] asked for.
    pub left_out: u64,
    pub warnings: Vec<String>,
}

/// The content key of a frame; see the module contract.
pub fn frame_key(f: &Frame, masks: &Masks) -> u64 {
    let mut h = DefaultHasher::new();
    f.address.hash(&mut h);
    f.ops.len().hash(&mut h);
    let fm = masks.for_frame(f);
    let mut read_index = 0;
    for (i, op) in f.ops.iter().enumerate() {
        let oo = f.outcome.ops.get(i);
        match op {
            Operation::Write(b) => {
                0u8.hash(&mut h);
                b.hash(&mut h);
                oo.map(|o| o.acks.as_slice()).unwrap_or(&[]).hash(&mut h);
            }
            Operation::Read(_) | Operation::ReadCounted { .. } => {
                match op {
                    Operation::ReadCounted { max, trailer } => (2u8, max, trailer).hash(&mut h),
                    _ => (1u8, op.len()).hash(&mut h),
                }
                let data = oo.map(|o| o.data.as_slice()).unwrap_or(&[]);
                data.len().hash(&mut h);
                for (j, b) in data.iter().enumerate() {
                    // A masked byte hashes as a value no byte has.
                    if fm.is_empty() || !fm.hides(read_index + j) { u16::from(*b) } else { 0x100 }.hash(&mut h);
                }
                read_index += data.len();
            }
        }
    }
    f.outcome.fault.as_ref().map(Fault::class).hash(&mut h);
    h.finish()
}

/// The parts of a record line the diff needs. Parsing into this plain
/// struct skips the buffering an internally tagged enum costs and the
/// strings the diff never looks at (script lines). The purpose is kept:
/// the summaries count the NACKs of probes apart.
#[derive(Deserialize)]
struct FrameLine<'a> {
    #[serde(borrow)]
    kind: Cow<'a, str>,
    #[serde(default)]
    seq: u64,
    #[serde(default)]
    address: Option<Address>,
    #[serde(default)]
    ops: Vec<Operation>,
    #[serde(default)]
    outcome: Option<Outcome>,
    #[serde(default)]
    attempt: u32,
    #[serde(default)]
    attempts: u32,
    #[serde(default)]
    purpose: Option<Purpose>,
    #[serde(default)]
    decoded: Option<String>,
    #[serde(default)]
    values: Vec<FieldValue>,
}

impl FrameLine<'_> {
    /// The frame, for a frame record.
    fn into_frame(self) -> Option<Frame> {
        if self.kind != "frame" {
            return None;
        }
        Some(Frame {
            seq: self.seq,
            t: Duration::ZERO,
            address: self.address?,
            ops: self.ops,
            outcome: self.outcome?,
            attempt: self.attempt,
            attempts: self.attempts,
            purpose: self.purpose,
            origin: None,
            decoded: self.decoded,
            values: self.values,
            pec: None,
        })
    }
}

/// Reads a trace into keys and summaries, one frame at a time, leaving
/// out what `ignore` says (see [`super::ignore`]); the summaries count
/// only the frames kept.
pub fn key_trace<R: BufRead>(r: &mut TraceReader<R>, masks: &Masks, ignore: Ignore) -> Result<Keyed, TraceError> {
    let mut keyed = Keyed {
        header: r.header().clone(),
        keys: Vec::new(),
        places: Vec::new(),
        summary: BTreeMap::new(),
        names: RegisterNames::default(),
        left_out: 0,
        warnings: Vec::new(),
    };
    let parse = |line: &[u8]| serde_json::from_slice::<FrameLine>(line).map(FrameLine::into_frame);
    let mut collapse = Collapse::new(ignore);
    let keep = |keyed: &mut Keyed, (mut f, place): (Frame, (u64, u64))| {
        if ignore.retries {
            // The attempt kept stands for its request: counted as one
            // transaction, not as a retry, whichever attempt it was.
            f.attempt = 1;
        }
        keyed.keys.push(frame_key(&f, masks));
        keyed.places.push(place);
        keyed.summary.entry(f.address).or_default().add_frame(&f);
        keyed.names.add(&f);
    };
    while let Some((line, offset, f)) = r.next_with(parse)? {
        let Some(f) = f else { continue };
        if let Some(kept) = collapse.push(f, (offset, line)) {
            keep(&mut keyed, kept);
        }
    }
    if let Some(kept) = collapse.finish() {
        keep(&mut keyed, kept);
    }
    keyed.left_out = collapse.left_out;
    keyed.warnings = r.warnings().to_vec();
    Ok(keyed)
}

pub fn key_file(path: &Path, masks: &Masks, ignore: Ignore) -> Result<Keyed, TraceError> {
    key_trace(&mut TraceReader::open(path)?, masks, ignore)
}

/// Keys two files at once, one thread each.
pub fn key_files(a: &Path, b: &Path, masks: &Masks, ignore: Ignore) -> Result<(Keyed, Keyed), TraceError> {
    std::thread::scope(|s| {
        let other = s.spawn(|| key_file(b, masks, ignore));
        let ka = key_file(a, masks, ignore);
        let kb = match other.join() {
            Ok(r) => r,
            Err(panic) => std::panic::resume_unwind(panic),
        };
        Ok((ka?, kb?))
    })
}

/// A region where the traces differ: frames `a` of the first trace stand
/// where frames `b` of the second do (either may be empty).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Hunk {
    pub a: Range<usize>,
    pub b: Range<usize>,
}

/// Aligns two key sequences; returns the regions that differ, in order.
pub fn align(a: &[u64], b: &[u64]) -> Vec<Hunk> {
    let mut matched = Vec::new();
    let mut v = Vec::new();
    let mut w = Vec::new();
    compare(a, b, 0, 0, &mut matched, &mut v, &mut w);
    hunks(&matched, a.len(), b.len())
}

/// Turns runs of matched pairs into the gaps between them.
fn hunks(matched: &[(Range<usize>, Range<usize>)], n: usize, m: usize) -> Vec<Hunk> {
    let mut out = Vec::new();
    let (mut x, mut y) = (0, 0);
    for (ra, rb) in matched.iter().chain(std::iter::once(&(n..n, m..m))) {
        if ra.start > x || rb.start > y {
            out.push(Hunk { a: x..ra.start, b: y..rb.start });
        }
        x = ra.end;
        y = rb.end;
    }
    out
}

/// Records matches of `a` against `b` (offset by `x0`, `y0`) in order.
fn compare(
    a: &[u64],
    b: &[u64],
    x0: usize,
    y0: usize,
    matched: &mut Vec<(Range<usize>, Range<usize>)>,
    v: &mut Vec<usize>,
    w: &mut Vec<usize>,
) {
    let pre = a.iter().zip(b).take_while(|(p, q)| p == q).count();
    let (a2, b2) = (&a[pre..], &b[pre..]);
    let suf = a2.iter().rev().zip(b2.iter().rev()).take_while(|(p, q)| p == q).count();
    let (a3, b3) = (&a2[..a2.len() - suf], &b2[..b2.len() - suf]);
    if pre > 0 {
        push(matched, x0..x0 + pre, y0..y0 + pre);
    }
    if !a3.is_empty() && !b3.is_empty() {
        let (xs, ys) = (x0 + pre, y0 + pre);
        // None: too different to align within the bound; the region is
        // left unmatched, one replaced block.
        if let Some((x, y, u, vv)) = middle_snake(a3, b3, v, w) {
            compare(&a3[..x], &b3[..y], xs, ys, matched, v, w);
            if u > x {
                push(matched, xs + x..xs + u, ys + y..ys + vv);
            }
            compare(&a3[u..], &b3[vv..], xs + u, ys + vv, matched, v, w);
        }
    }
    if suf > 0 {
        let (xe, ye) = (x0 + a.len(), y0 + b.len());
        push(matched, xe - suf..xe, ye - suf..ye);
    }
}

fn push(matched: &mut Vec<(Range<usize>, Range<usize>)>, a: Range<usize>, b: Range<usize>) {
    if let Some((la, lb)) = matched.last_mut()
        && la.end == a.start
        && lb.end == b.start
    {
        la.end = a.end;
        lb.end = b.end;
        return;
    }
    matched.push((a, b));
}

/// Myers' middle snake of two non-empty sequences whose first and last
/// elements differ: `(x, y, u, v)` with the snake from (x, y) to (u, v),
/// or `None` when the edit distance exceeds [`MAX_EDITS`].
fn middle_snake(
    a: &[u64],
    b: &[u64],
    vf: &mut Vec<usize>,
    vb: &mut Vec<usize>,
) -> Option<(usize, usize, usize, usize)> {
    let (n, m) = (a.len() as isize, b.len() as isize);
    let delta = n - m;
    let odd = delta & 1 != 0;
    let dmax = ((n + m + 1) / 2).min(MAX_EDITS as isize / 2 + 1);
    let off = dmax + 1;
    let size = (2 * off + 1) as usize;
    vf.clear();
    vf.resize(size, 0);
    vb.clear();
    vb.resize(size, 0);
    let at = |k: isize| (k + off) as usize;
    for d in 0..=dmax {
        let mut k = -d;
        while k <= d {
            let mut x =
                if k == -d || (k != d && vf[at(k - 1)] < vf[at(k + 1)]) { vf[at(k + 1)] } else { vf[at(k - 1)] + 1 }
                    as isize;
            let mut y = x - k;
            let (sx, sy) = (x, y);
            while x < n && y < m && a[x as usize] == b[y as usize] {
                x += 1;
                y += 1;
            }
            vf[at(k)] = x as usize;
            let c = delta - k;
            if odd && (-(d - 1)..=d - 1).contains(&c) && x + vb[at(c)] as isize >= n {
                return Some((sx as usize, sy as usize, x as usize, y as usize));
            }
            k += 2;
        }
        let mut c = -d;
        while c <= d {
            let mut x =
                if c == -d || (c != d && vb[at(c - 1)] < vb[at(c + 1)]) { vb[at(c + 1)] } else { vb[at(c - 1)] + 1 }
                    as isize;
            let mut y = x - c;
            let (sx, sy) = (x, y);
            while x < n && y < m && a[(n - 1 - x) as usize] == b[(m - 1 - y) as usize] {
                x += 1;
                y += 1;
            }
            vb[at(c)] = x as usize;
            let k = delta - c;
            if !odd && (-d..=d).contains(&k) && x + vf[at(k)] as isize >= n {
                return Some(((n - x) as usize, (m - y) as usize, (n - sx) as usize, (m - sy) as usize));
            }
            c += 2;
        }
    }
    None
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    /// Longest common subsequence length by the textbook O(n·m) table,
    /// to check the alignment against.
    fn lcs_len(a: &[u64], b: &[u64]) -> usize {
        let mut t = vec![vec![0usize; b.len() + 1]; a.len() + 1];
        for i in 0..a.len() {
            for j in 0..b.len() {
                t[i + 1][j + 1] = if a[i] == b[j] { t[i][j] + 1 } else { t[i][j + 1].max(t[i + 1][j]) };
            }
        }
        t[a.len()][b.len()]
    }

    fn check(a: &[u64], b: &[u64]) {
        let h = align(a, b);
        // Outside the hunks, the sequences match one for one, in order.
        let (mut x, mut y, mut same) = (0, 0, 0);
        for hk in h.iter().chain(std::iter::once(&Hunk { a: a.len()..a.len(), b: b.len()..b.len() })) {
            assert_eq!(hk.a.start - x, hk.b.start - y, "matched stretch lengths differ");
            assert_eq!(a[x..hk.a.start], b[y..hk.b.start]);
            same += hk.a.start - x;
            x = hk.a.end;
            y = hk.b.end;
        }
        assert_eq!(same, lcs_len(a, b), "the alignment keeps a longest common subsequence");
    }

    #[test]
    fn one_insertion_is_one_hunk() {
        let a: Vec<u64> = (0..100).map(|i| i % 7).collect();
        let mut b = a.clone();
        b.insert(40, 99);
        assert_eq!(align(&a, &b), vec![Hunk { a: 40..40, b: 40..41 }]);
        assert!(align(&a, &a).is_empty());
        assert_eq!(align(&[], &[1, 2]), vec![Hunk { a: 0..0, b: 0..2 }]);
    }

    proptest! {
        #[test]
        fn alignment_is_a_longest_common_subsequence(
            a in proptest::collection::vec(0u64..4, 0..40),
            b in proptest::collection::vec(0u64..4, 0..40),
        ) {
            check(&a, &b);
        }
    }
}
