//! A trace file indexed by the byte offset of each record: one streaming
//! pass, 9 bytes a record (offset and [`Flags`]), then any record parsed on
//! demand by seeking to it. A file still being written is indexed further
//! by [`TraceIndex::refresh`]: an incomplete last line, or the zeroed
//! tail of the chunk the writer has allocated (see the trace writer), is
//! not indexed until it is whole.

use std::borrow::Cow;
use std::fs::File;
use std::io::{BufRead, BufReader, Seek, SeekFrom};
use std::path::{Path, PathBuf};

use crate::record::Record;
use crate::trace::{Header, TraceError, TraceReader};

use super::source::{Counts, Ending, Flags, Source};

/// Records parsed and kept for redraws; a screen shows far fewer.
const CACHE: usize = 256;

pub struct TraceIndex {
    path: PathBuf,
    name: String,
    header: Header,
    input: BufReader<File>,
    offsets: Vec<u64>,
    flags: Vec<Flags>,
    /// The position of the first record still indexed (see [`TraceIndex::keeping`]).
    base: usize,
    keep: Option<usize>,
    /// Where the next unindexed line starts.
    scanned: u64,
    line: Vec<u8>,
    counts: Counts,
    /// Byte offsets of the last step record and of the end record.
    last_step: Option<u64>,
    end: Option<u64>,
    follow: bool,
    cache: Vec<(usize, Record)>,
}

impl TraceIndex {
    /// Opens a trace, checks its header and indexes every whole record.
    /// `follow`: the file may still grow (see [`Source::growing`]).
    pub fn open(path: &Path, follow: bool) -> Result<TraceIndex, TraceError> {
        let reader = TraceReader::open(path)?;
        let header = reader.header().clone();
        let name = path.display().to_string();
        let f = File::open(path).map_err(|source| TraceError::Io { file: name.clone(), source })?;
        let mut input = BufReader::with_capacity(1 << 16, f);
        let mut first = Vec::new();
        input.read_until(b'\n', &mut first).map_err(|source| TraceError::Io { file: name.clone(), source })?;
        let mut ix = TraceIndex {
            path: path.to_path_buf(),
            name,
            header,
            input,
            offsets: Vec::new(),
            flags: Vec::new(),
            base: 0,
            keep: None,
            scanned: first.len() as u64,
            line: Vec::with_capacity(512),
            counts: Counts::default(),
            last_step: None,
            end: None,
            follow,
            cache: Vec::with_capacity(CACHE),
        };
        ix.scan()?;
        Ok(ix)
    }

    pub fn header(&self) -> &Header {
        &self.header
    }

    pub fn path(&self) -> &Path {
        &self.path
    }

    /// Keeps only about the newest `n` records indexed (between `n` and
    /// `2n`): a run followed for days must not grow the index without
    /// bound. Older records stay in the file; their positions read as
    /// gone (`None`), as a live feed's dropped records do.
    pub fn keeping(mut self, n: usize) -> TraceIndex {
        self.keep = Some(n.max(1));
        self.trim();
        self
    }

    fn trim(&mut self) {
        if let Some(k) = self.keep
            && self.offsets.len() >= 2 * k
        {
            let drop = self.offsets.len() - k;
            self.offsets.drain(..drop);
            self.flags.drain(..drop);
            self.base += drop;
        }
    }

    /// The byte offset of record `i`'s line.
    pub fn offset(&self, i: usize) -> Option<u64> {
        self.offsets.get(i.checked_sub(self.base)?).copied()
    }

    /// Indexes the lines written since the last pass.
    fn scan(&mut self) -> Result<bool, TraceError> {
        let io = |name: &str, source| TraceError::Io { file: name.to_string(), source };
        self.input.seek(SeekFrom::Start(self.scanned)).map_err(|e| io(&self.name, e))?;
        let before = self.offsets.len();
        loop {
            self.line.clear();
            let n = self.input.read_until(b'\n', &mut self.line).map_err(|e| io(&self.name, e))?;
            if n == 0 || self.line.last() != Some(&b'\n') {
                break; // the end, or a line still being written
            }
            if self.line[0] == 0 {
                break; // the allocated, unwritten rest of the file
            }
            let offset = self.scanned;
            self.scanned += n as u64;
            if self.line.iter().all(u8::is_ascii_whitespace) {
                continue;
            }
            let fl = line_flags(&self.line);
            if fl.has(Flags::STEP) {
                self.last_step = Some(offset);
            }
            if fl.has(Flags::END) {
                self.end = Some(offset);
            }
            self.counts.add(fl);
            if fl.has(Flags::FRAME) {
                self.counts.bus_ns += line_bus_ns(&self.line).unwrap_or(0);
            }
            self.offsets.push(offset);
            self.flags.push(fl);
        }
        let grew = self.offsets.len() > before;
        self.trim();
        Ok(grew)
    }

    fn parse(&mut self, i: usize) -> Option<Record> {
        let off = self.offset(i)?;
        self.input.seek(SeekFrom::Start(off)).ok()?;
        self.line.clear();
        self.input.read_until(b'\n', &mut self.line).ok()?;
        serde_json::from_slice(&self.line).ok()
    }
}

/// A record's flags read off its JSON line without parsing it. Records are
/// written with `kind` first (the record writer's field order); a line
/// written otherwise is parsed to find out. A frame's fault kind follows
/// the `"fault":{"kind":"` key, which no string value can contain
/// unescaped.
pub fn line_flags(line: &[u8]) -> Flags {
    const FRAME: &[u8] = br#"{"kind":"frame""#;
    if line.starts_with(FRAME) {
        let mut b = Flags::FRAME;
        const FAULT: &[u8] = br#""fault":{"kind":""#;
        const ATTEMPT: &[u8] = br#""attempt":"#;
        if let Some(at) = find(line, FAULT) {
            let rest = &line[at + FAULT.len()..];
            let nack = [&b"address-nack\""[..], b"data-nack\"", b"nack\""];
            b |= if nack.iter().any(|k| rest.starts_with(k)) { Flags::NACK } else { Flags::ERROR };
        }
        if let Some(at) = find(line, ATTEMPT) {
            let digits = &line[at + ATTEMPT.len()..];
            if !(digits.starts_with(b"1,") || digits.starts_with(b"0,")) {
                b |= Flags::RETRY;
            }
        }
        return Flags(b);
    }
    for (prefix, bit) in
        [(&br#"{"kind":"log""#[..], Flags::LOG), (br#"{"kind":"step""#, Flags::STEP), (br#"{"kind":"end""#, Flags::END)]
    {
        if line.starts_with(prefix) {
            return Flags(bit);
        }
    }
    serde_json::from_slice::<Record>(line).map(|r| Flags::of(&r)).unwrap_or_default()
}

/// A frame line's modelled bus time, read off the line without parsing
/// it: the digits after the outcome's `"bus_ns":` key (the record writer
/// puts the outcome's fields before the attempt numbers, and no string
/// value holds the key unescaped). `None` when it is not there.
pub fn line_bus_ns(line: &[u8]) -> Option<u64> {
    const KEY: &[u8] = br#""bus_ns":"#;
    let at = find(line, KEY)? + KEY.len();
    let digits = line[at..].iter().take_while(|b| b.is_ascii_digit()).count();
    std::str::from_utf8(&line[at..at + digits]).ok()?.parse().ok()
}

fn find(hay: &[u8], needle: &[u8]) -> Option<usize> {
    hay.windows(needle.len()).position(|w| w == needle)
}

impl Source for TraceIndex {
    fn len(&self) -> usize {
        self.base + self.offsets.len()
    }

    fn record(&mut self, i: usize) -> Option<Cow<'_, Record>> {
        if let Some(p) = self.cache.iter().position(|(j, _)| *j == i) {
            return Some(Cow::Borrowed(&self.cache[p].1));
        }
        let r = self.parse(i)?;
        if self.cache.len() >= CACHE {
            self.cache.remove(0);
        }
        self.cache.push((i, r));
        self.cache.last().map(|(_, r)| Cow::Borrowed(r))
    }

    fn flags(&self, i: usize) -> Flags {
        i.checked_sub(self.base).and_then(|j| self.flags.get(j)).copied().unwrap_or_default()
    }

    fn refresh(&mut self) -> bool {
        self.follow && self.end.is_none() && self.scan().unwrap_or(false)
    }

    fn counts(&self) -> Counts {
        self.counts
    }

    fn adapter(&self) -> String {
        let id = &self.header.adapter.identity;
        format!("{} {} @ {} Hz", id.driver, id.target, self.header.speed_hz)
    }

    fn current_step(&self) -> Option<String> {
        let at = self.last_step?;
        // Not through the cache: `&self`. One small line.
        let mut f = File::open(&self.path).ok()?;
        f.seek(SeekFrom::Start(at)).ok()?;
        let mut line = Vec::new();
        BufReader::new(f).read_until(b'\n', &mut line).ok()?;
        match serde_json::from_slice(&line).ok()? {
            Record::Step { name, .. } => Some(name),
            _ => None,
        }
    }

    fn ending(&self) -> Option<Ending> {
        let at = self.end?;
        let mut f = File::open(&self.path).ok()?;
        f.seek(SeekFrom::Start(at)).ok()?;
        let mut line = Vec::new();
        BufReader::new(f).read_until(b'\n', &mut line).ok()?;
        match serde_json::from_slice(&line).ok()? {
            Record::End { stats, exit, error, .. } => Some(Ending { stats, exit, error }),
            _ => None,
        }
    }

    fn growing(&self) -> bool {
        self.follow && self.end.is_none()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn flags_come_off_the_line_without_parsing() {
        let ok = br#"{"kind":"frame","seq":1,"t_ns":0,"address":"0x0B","ops":[],"outcome":{"ops":[],"bus_ns":0},"attempt":1,"attempts":1}"#;
        assert_eq!(line_flags(ok), Flags(Flags::FRAME));
        let nack = br#"{"kind":"frame","seq":2,"outcome":{"fault":{"kind":"data-nack","op":0,"index":1}},"attempt":3,"attempts":3}"#;
        assert_eq!(line_flags(nack), Flags(Flags::FRAME | Flags::NACK | Flags::RETRY));
        let err = br#"{"kind":"frame","outcome":{"fault":{"kind":"arbitration-lost"}},"attempt":12,"attempts":20}"#;
        assert_eq!(line_flags(err), Flags(Flags::FRAME | Flags::ERROR | Flags::RETRY));
        // A decoded text that names a fault is a string, escaped: no flag.
        let text = br#"{"kind":"frame","decoded":"\"fault\":{\"kind\":\"nack\"","attempt":1,"attempts":1}"#;
        assert_eq!(line_flags(text), Flags(Flags::FRAME));
        assert_eq!(line_flags(br#"{"kind":"step","t_ns":0,"name":"a"}"#), Flags(Flags::STEP));
    }
}
