//! Trace files: writing them as a run goes and reading them back.
//!
//! Contract (docs/traces.md):
//! - A trace is UTF-8 text, one JSON object per line: the [`Header`] first,
//!   then one [`Record`] per line in the order things happened.
//! - [`TraceWriter`] hands each record to the operating system as one
//!   whole line before the run moves on (through a shared mapping of the
//!   file, or a `write` per line where there is none: [`super::append`]),
//!   so a crash, Ctrl-C, SIGKILL or unplugged adapter loses nothing that
//!   completed; at most the last line is cut. It does not `fsync` per
//!   record (that would cost milliseconds per frame); the file is cut to
//!   what was written and synced when the run ends.
//! - A writer may have a size limit ([`TraceWriter::set_limit`]): a record
//!   that would bring the file within [`END_ROOM`] bytes of it is not
//!   written; the writer ends the trace with an end record saying so
//!   (which the room kept for it holds) and returns [`LimitReached`].
//! - A [`TraceRescue`] taken from a writer lets another thread end the
//!   trace (a watchdog that stops a run which no longer answers): it
//!   waits for the record being written, appends an end record with the
//!   counts of the frames written so far, cuts and syncs the file, and
//!   from then on the writer writes nothing more, so the end record stays
//!   last.
//! - [`TraceReader`] refuses a file whose header is missing, names another
//!   format or an unknown major version; accepts newer minor versions
//!   (unknown fields are ignored, unknown record kinds skipped with a
//!   warning); tolerates a cut last line with a warning; takes NUL bytes
//!   after the last line as the end of the file (what a killed writer
//!   leaves of its last chunk); and reports any other unreadable line as
//!   an error naming its line number.

use std::fs::File;
use std::io::{self, BufRead, BufReader, Read, Seek, SeekFrom};
use std::path::{Path, PathBuf};
use std::sync::{Arc, Mutex, MutexGuard};
use std::time::Duration;

use thiserror::Error;

use super::append::Appender;
use super::header::{FORMAT, Header, VERSION_MAJOR, VERSION_MINOR};
use crate::ascii::EscapeMemo;
use crate::record::{Record, Sink, Stats, write_line, write_line_with};

/// Why a trace cannot be read.
#[derive(Debug, Error)]
pub enum TraceError {
    #[error("{file}: {source}")]
    Io { file: String, source: io::Error },
    #[error("{file}: empty file, no trace header")]
    Empty { file: String },
    #[error("{file}:1: not a {FORMAT} file: {detail}")]
    NotATrace { file: String, detail: String },
    #[error(
        "{file}:1: trace format version {version} is not supported: this build reads {VERSION_MAJOR}.x (written by {tool})"
    )]
    UnknownMajor { file: String, version: String, tool: String },
    #[error("{file}:{line}: unreadable record: {detail}")]
    Corrupt { file: String, line: u64, detail: String },
    /// A frame that reads well but that no adapter could send as recorded
    /// (found by `replay::check`).
    #[error("{file}:{line}: frame {seq} cannot be replayed: {detail}")]
    Unplayable { file: String, line: u64, seq: u64, detail: String },
}

/// A run's trace reached the size limit it was given: the record that
/// would have passed it was not written.
#[derive(Debug, Error)]
#[error("the trace reached its size limit of {} (--trace-limit)", size_text(*.limit))]
pub struct LimitReached {
    pub limit: u64,
}

/// Bytes of a size limit kept for the end record: other records stop
/// this far short of it.
pub const END_ROOM: u64 = 1024;

/// A size as people write it: whole binary units where it is one, else bytes.
pub fn size_text(n: u64) -> String {
    const UNITS: [(u64, &str); 4] = [(1 << 40, "TiB"), (1 << 30, "GiB"), (1 << 20, "MiB"), (1 << 10, "KiB")];
    match UNITS.iter().find(|(u, _)| n >= *u && n.is_multiple_of(*u)) {
        Some((u, name)) => format!("{} {name}", n / u),
        None => format!("{n} B"),
    }
}

/// A sink that writes a trace file, one line per record, in the OS's hands
/// before `record` returns.
pub struct TraceWriter {
    shared: Arc<Mutex<Written>>,
    path: PathBuf,
    line: Vec<u8>,
    /// The script file name as last written.
    files: EscapeMemo,
}

/// The file and what has gone into it, shared with [`TraceRescue`].
struct Written {
    out: Appender,
    /// The size the file may not pass, with the exit code its end record
    /// gives when it is reached.
    limit: Option<(u64, u8)>,
    /// Counts of the frames written, for an end record written by rescue.
    stats: Stats,
    /// The time of the last record written.
    last_t: Duration,
    /// An end record is in the file: nothing may follow it.
    ended: bool,
}

/// A handle that can end a trace from another thread; see the module doc.
#[derive(Clone)]
pub struct TraceRescue {
    shared: Arc<Mutex<Written>>,
}

fn lock(m: &Mutex<Written>) -> MutexGuard<'_, Written> {
    // A panic while writing leaves the file as it was; keep using it.
    m.lock().unwrap_or_else(|p| p.into_inner())
}

impl TraceRescue {
    /// The counts of the frames written so far (what an end record would say).
    pub fn stats(&self) -> Stats {
        lock(&self.shared).stats.clone()
    }

    /// Ends the trace now, unless it has ended: an end record with `exit`,
    /// `error` and the counts of the frames written, then a sync.
    pub fn end(&self, exit: u8, error: &str) -> io::Result<()> {
        let mut w = lock(&self.shared);
        if w.ended {
            return Ok(());
        }
        w.end(exit, error)?;
        w.out.finish()
    }
}

impl Written {
    /// Appends an end record with the counts so far; nothing follows it.
    fn end(&mut self, exit: u8, error: &str) -> io::Result<()> {
        let end =
            Record::End { t: self.last_t, stats: self.stats.clone(), exit, error: Some(error.to_string()), link: None };
        let mut line = Vec::new();
        write_line(&end, &mut line);
        self.ended = true;
        self.out.append(&line)
    }
}

impl TraceWriter {
    /// Creates `path`, replacing a file that is there, and writes the
    /// header line. The folder must exist: a path the user typed never
    /// makes folders (a typo would scatter them).
    pub fn create(path: &Path, header: &Header) -> io::Result<Self> {
        Self::open_with(path, header, std::fs::OpenOptions::new().write(true).create(true).truncate(true))
    }

    /// Creates `path` only if no file is there (`AlreadyExists` if one is),
    /// and writes the header line.
    pub fn create_new(path: &Path, header: &Header) -> io::Result<Self> {
        Self::open_with(path, header, std::fs::OpenOptions::new().write(true).create_new(true))
    }

    /// Creates the default trace of a run of `script`: a new file
    /// `traces/<script stem>-<UTC stamp>.jsonl` under the working folder
    /// (`traces/` is the one folder made when missing), with `-2`, `-3`, ...
    /// added when the name is taken. Two runs that start in the same second get
    /// different files: each name is taken with create-new semantics, and a
    /// taken name moves on to the next suffix.
    pub fn create_default(script: &Path, now: std::time::SystemTime, header: &Header) -> io::Result<Self> {
        std::fs::create_dir_all(DEFAULT_DIR)?;
        let base = default_stem(script, now);
        for n in 1..=10_000u32 {
            let path = numbered(&base, n);
            match Self::create_new(&path, header) {
                Err(e) if e.kind() == io::ErrorKind::AlreadyExists => continue,
                other => return other,
            }
        }
        Err(io::Error::new(io::ErrorKind::AlreadyExists, format!("{DEFAULT_DIR}/: 10000 traces of {base} already")))
    }

    fn open_with(path: &Path, header: &Header, opts: &std::fs::OpenOptions) -> io::Result<Self> {
        if let Some(dir) = path.parent().filter(|d| !d.as_os_str().is_empty())
            && !dir.is_dir()
        {
            return Err(io::Error::new(io::ErrorKind::NotFound, format!("folder {} does not exist", dir.display())));
        }
        let out = Appender::new(opts.open(path)?);
        let written = Written { out, limit: None, stats: Stats::default(), last_t: Duration::ZERO, ended: false };
        let mut w = TraceWriter {
            shared: Arc::new(Mutex::new(written)),
            path: path.to_path_buf(),
            line: Vec::with_capacity(512),
            files: EscapeMemo::default(),
        };
        w.line.clear();
        serde_json::to_writer(&mut w.line, header)?;
        w.line.push(b'\n');
        lock(&w.shared).out.append(&w.line)?;
        Ok(w)
    }

    /// Limits the file to `limit` bytes (`None`: no limit); when a record
    /// would pass it, the trace ends with an end record whose exit code is
    /// `exit` (see the module doc). A limit the header already leaves no
    /// room under is refused.
    pub fn set_limit(&mut self, limit: Option<u64>, exit: u8) -> io::Result<()> {
        let mut w = lock(&self.shared);
        if let Some(l) = limit
            && w.out.len() + END_ROOM > l
        {
            return Err(io::Error::new(
                io::ErrorKind::InvalidInput,
                format!("a size limit of {} leaves no room for records after the header", size_text(l)),
            ));
        }
        w.limit = limit.map(|l| (l, exit));
        Ok(())
    }

    pub fn path(&self) -> &Path {
        &self.path
    }

    /// A handle that can end this trace from another thread.
    pub fn rescue(&self) -> TraceRescue {
        TraceRescue { shared: self.shared.clone() }
    }
}

impl Sink for TraceWriter {
    fn record(&mut self, r: &Record) -> io::Result<()> {
        self.line.clear();
        write_line_with(r, &mut self.line, &mut self.files);
        let mut w = lock(&self.shared);
        if w.ended {
            return Ok(());
        }
        if let Some((limit, exit)) = w.limit
            && !matches!(r, Record::End { .. })
            && w.out.len() + self.line.len() as u64 + END_ROOM > limit
        {
            let reached = LimitReached { limit };
            w.end(exit, &reached.to_string())?;
            return Err(at_path(&self.path, io::Error::other(reached)));
        }
        match r {
            Record::Frame(f) => {
                w.stats.add_frame(f);
                w.last_t = f.t;
            }
            Record::Log { t, .. } | Record::Step { t, .. } => w.last_t = *t,
            Record::End { .. } => w.ended = true,
        }
        w.out.append(&self.line).map_err(|e| at_path(&self.path, e))
    }

    fn flush(&mut self) -> io::Result<()> {
        lock(&self.shared).out.finish()
    }

    fn is_record(&self) -> bool {
        true
    }
}

/// A write error that names the trace it happened to.
fn at_path(path: &Path, e: io::Error) -> io::Error {
    io::Error::new(e.kind(), format!("{}: {e}", path.display()))
}

/// The folder of default traces, under the working folder.
pub const DEFAULT_DIR: &str = "traces";

/// The stem of a default trace name: `<script stem>-<UTC stamp>`.
fn default_stem(script: &Path, now: std::time::SystemTime) -> String {
    let stem = script.file_stem().map(|s| s.to_string_lossy().into_owned()).unwrap_or_else(|| "run".into());
    format!("{stem}-{}", super::header::file_stamp(now))
}

/// The n-th default name: the stem alone first, then `-2`, `-3`, ...
fn numbered(base: &str, n: u32) -> PathBuf {
    let dir = Path::new(DEFAULT_DIR);
    if n <= 1 { dir.join(format!("{base}.jsonl")) } else { dir.join(format!("{base}-{n}.jsonl")) }
}

/// One record and where it was in the file.
#[derive(Debug, Clone)]
pub struct Located {
    /// Line number, from 1 (the header is line 1).
    pub line: u64,
    /// Byte offset of the line's start, for [`TraceReader::record_at`].
    pub offset: u64,
    pub record: Record,
}

/// Reads a trace record by record, without holding the file in memory.
pub struct TraceReader<R> {
    input: R,
    file: String,
    header: Header,
    line: u64,
    offset: u64,
    buf: Vec<u8>,
    warnings: Vec<String>,
    newer_minor: bool,
}

impl TraceReader<BufReader<File>> {
    pub fn open(path: &Path) -> Result<Self, TraceError> {
        let name = path.display().to_string();
        let f = File::open(path).map_err(|source| TraceError::Io { file: name.clone(), source })?;
        TraceReader::new(BufReader::with_capacity(1 << 16, f), &name)
    }

    /// The record whose line starts at `offset` (from [`Located::offset`]).
    pub fn record_at(&mut self, offset: u64, line: u64) -> Result<Record, TraceError> {
        let io_err = |source| TraceError::Io { file: self.file.clone(), source };
        self.input.seek(SeekFrom::Start(offset)).map_err(io_err)?;
        self.buf.clear();
        let io_err = |source| TraceError::Io { file: self.file.clone(), source };
        self.input.read_until(b'\n', &mut self.buf).map_err(io_err)?;
        serde_json::from_slice(&self.buf).map_err(|e| TraceError::Corrupt {
            file: self.file.clone(),
            line,
            detail: e.to_string(),
        })
    }
}

impl<R: BufRead> TraceReader<R> {
    /// Reads and checks the header line.
    pub fn new(mut input: R, file: &str) -> Result<Self, TraceError> {
        let file = file.to_string();
        let mut buf = Vec::new();
        let n = input.read_until(b'\n', &mut buf).map_err(|source| TraceError::Io { file: file.clone(), source })?;
        if n == 0 {
            return Err(TraceError::Empty { file });
        }
        let not = |detail: String| TraceError::NotATrace { file: file.clone(), detail };
        let value: serde_json::Value =
            serde_json::from_slice(&buf).map_err(|e| not(format!("the first line is not JSON ({e})")))?;
        let format = value.get("format").and_then(|v| v.as_str()).unwrap_or("");
        if format != FORMAT {
            return Err(not(format!("the header's format is `{format}`")));
        }
        let version = value.get("version").and_then(|v| v.as_str()).unwrap_or("").to_string();
        let tool = value.get("tool").and_then(|v| v.as_str()).unwrap_or("an unknown tool").to_string();
        let major = version.split('.').next().and_then(|m| m.parse::<u32>().ok());
        if major != Some(VERSION_MAJOR) {
            return Err(TraceError::UnknownMajor { file, version, tool });
        }
        let header: Header =
            serde_json::from_value(value).map_err(|e| not(format!("the header has a bad field: {e}")))?;
        let newer_minor = header.version_numbers().is_some_and(|(_, minor)| minor > VERSION_MINOR);
        let mut warnings = Vec::new();
        if newer_minor {
            warnings.push(format!(
                "{file}: written as format {} by {}; this build knows {VERSION_MAJOR}.{VERSION_MINOR} and ignores what it does not know",
                header.version, header.tool
            ));
        }
        Ok(TraceReader { input, file, header, line: 1, offset: n as u64, buf, warnings, newer_minor })
    }

    pub fn header(&self) -> &Header {
        &self.header
    }

    pub fn file(&self) -> &str {
        &self.file
    }

    /// The line number of the record read last (the header is line 1).
    pub fn line(&self) -> u64 {
        self.line
    }

    /// Warnings so far: a cut last line, a newer minor version, skipped records.
    pub fn warnings(&self) -> &[String] {
        &self.warnings
    }

    /// The next record, or `None` at the end.
    pub fn next_located(&mut self) -> Result<Option<Located>, TraceError> {
        let next = self.next_with(|line| serde_json::from_slice::<Record>(line))?;
        Ok(next.map(|(line, offset, record)| Located { line, offset, record }))
    }

    /// The next line parsed by `parse` as `(line number, offset, value)`,
    /// under the same rules as [`Self::next_located`]: for readers that
    /// need only part of each record and parse it faster.
    pub fn next_with<T>(
        &mut self,
        mut parse: impl FnMut(&[u8]) -> Result<T, serde_json::Error>,
    ) -> Result<Option<(u64, u64, T)>, TraceError> {
        loop {
            self.buf.clear();
            let n = self
                .input
                .read_until(b'\n', &mut self.buf)
                .map_err(|source| TraceError::Io { file: self.file.clone(), source })?;
            if n == 0 {
                return Ok(None);
            }
            self.line += 1;
            let offset = self.offset;
            self.offset += n as u64;
            let complete = self.buf.last() == Some(&b'\n');
            if !complete && self.buf.iter().all(|&b| b == 0) {
                // The unwritten rest of the chunk a killed writer had
                // allocated (super::append): the end of the file.
                return Ok(None);
            }
            if self.buf.iter().all(u8::is_ascii_whitespace) {
                continue;
            }
            match parse(&self.buf) {
                Ok(value) => return Ok(Some((self.line, offset, value))),
                Err(_) if !complete => {
                    self.warnings.push(format!(
                        "{}:{}: the last line is cut short (the recording stopped mid-write); ignored",
                        self.file, self.line
                    ));
                    return Ok(None);
                }
                Err(e) => {
                    if self.newer_minor && self.unknown_kind() {
                        self.warnings.push(format!(
                            "{}:{}: skipped a record of a kind this build does not know",
                            self.file, self.line
                        ));
                        continue;
                    }
                    return Err(TraceError::Corrupt {
                        file: self.file.clone(),
                        line: self.line,
                        detail: e.to_string(),
                    });
                }
            }
        }
    }

    /// Whether the line in the buffer is a well-formed object whose `kind`
    /// this build does not know (a newer minor version may add kinds).
    fn unknown_kind(&self) -> bool {
        let Ok(v) = serde_json::from_slice::<serde_json::Value>(&self.buf) else { return false };
        let kind = v.get("kind").and_then(|k| k.as_str()).unwrap_or("");
        !["frame", "log", "step", "end"].contains(&kind)
    }

    pub fn next_record(&mut self) -> Result<Option<Record>, TraceError> {
        Ok(self.next_located()?.map(|l| l.record))
    }

    /// Reads every remaining record.
    pub fn read_all(&mut self) -> Result<Vec<Record>, TraceError> {
        let mut v = Vec::new();
        while let Some(r) = self.next_record()? {
            v.push(r);
        }
        Ok(v)
    }
}

/// A whole trace in memory: for small traces (conversion, tests).
pub struct Trace {
    pub header: Header,
    pub records: Vec<Record>,
    pub warnings: Vec<String>,
}

impl Trace {
    pub fn load(path: &Path) -> Result<Trace, TraceError> {
        let mut r = TraceReader::open(path)?;
        Self::collect(&mut r)
    }

    pub fn from_reader<R: Read>(input: R, file: &str) -> Result<Trace, TraceError> {
        let mut r = TraceReader::new(BufReader::new(input), file)?;
        Self::collect(&mut r)
    }

    fn collect<R: BufRead>(r: &mut TraceReader<R>) -> Result<Trace, TraceError> {
        let records = r.read_all()?;
        Ok(Trace { header: r.header.clone(), records, warnings: r.warnings.clone() })
    }

    pub fn frames(&self) -> impl Iterator<Item = &crate::record::Frame> {
        self.records.iter().filter_map(|r| match r {
            Record::Frame(f) => Some(f),
            _ => None,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::adapter::Adapter as _;
    use crate::record::Level;
    use crate::sim::SimAdapter;
    use std::time::Duration;

    fn header() -> Header {
        Header::new("run", SimAdapter::demo().snapshot())
    }

    fn text(lines: &[String]) -> String {
        lines.iter().map(|l| format!("{l}\n")).collect()
    }

    fn log(i: u64) -> String {
        serde_json::to_string(&Record::Log {
            t: Duration::from_nanos(i),
            level: Level::Info,
            text: format!("line {i}"),
            origin: None,
        })
        .unwrap()
    }

    fn header_line(version: &str) -> String {
        let mut h = header();
        h.version = version.into();
        serde_json::to_string(&h).unwrap()
    }

    #[test]
    fn writer_output_reads_back() {
        let dir = tempfile::tempdir().unwrap();
        // A folder that does not exist is not made for a path given.
        let missing = dir.path().join("sub/t.jsonl");
        let e = TraceWriter::create(&missing, &header()).err().expect("refused");
        assert!(e.to_string().contains("does not exist"), "{e}");
        assert!(!dir.path().join("sub").exists());
        let path = dir.path().join("t.jsonl");
        let mut w = TraceWriter::create(&path, &header()).unwrap();
        let r = Record::Step { t: Duration::from_millis(3), name: "configure".into(), origin: None };
        w.record(&r).unwrap();
        w.flush().unwrap();
        let t = Trace::load(&path).unwrap();
        assert_eq!(t.header, header_with_time(&t.header));
        assert_eq!(t.records, vec![r]);
        assert!(t.warnings.is_empty());
    }

    fn header_with_time(h: &Header) -> Header {
        Header { started: h.started.clone(), ..header() }
    }

    #[test]
    fn cut_last_line_is_a_warning() {
        let mut s = text(&[header_line("1.0"), log(1), log(2)]);
        s.push_str(&log(3)[..20]);
        let t = Trace::from_reader(s.as_bytes(), "cut.jsonl").unwrap();
        assert_eq!(t.records.len(), 2);
        assert_eq!(t.warnings.len(), 1);
        assert!(t.warnings[0].starts_with("cut.jsonl:4: the last line is cut short"), "{:?}", t.warnings);
    }

    #[test]
    fn nul_tail_is_the_end_of_the_file() {
        // What a killed writer leaves: its lines, then NULs to the chunk's end.
        let mut s = text(&[header_line("1.0"), log(1), log(2)]).into_bytes();
        s.extend(std::iter::repeat_n(0u8, 70_000));
        let t = Trace::from_reader(&s[..], "killed.jsonl").unwrap();
        assert_eq!(t.records.len(), 2);
        assert!(t.warnings.is_empty(), "not a cut line: {:?}", t.warnings);
        // A line cut by the kill, then NULs: the cut line's warning, as before.
        let mut s = text(&[header_line("1.0"), log(1)]).into_bytes();
        s.extend_from_slice(&log(2).as_bytes()[..20]);
        s.extend(std::iter::repeat_n(0u8, 4096));
        let t = Trace::from_reader(&s[..], "cut.jsonl").unwrap();
        assert_eq!(t.records.len(), 1);
        assert!(
            t.warnings.len() == 1 && t.warnings[0].starts_with("cut.jsonl:3: the last line is cut short"),
            "{:?}",
            t.warnings
        );
        // A line whose copy the kill stopped part way, with holes where
        // bytes were not yet stored (a copy does not store front to back).
        let mut s = text(&[header_line("1.0"), log(1)]).into_bytes();
        let mut holed = log(2).into_bytes();
        holed.pop();
        holed[4..12].fill(0);
        s.extend_from_slice(&holed);
        s.extend(std::iter::repeat_n(0u8, 4096));
        let t = Trace::from_reader(&s[..], "holed.jsonl").unwrap();
        assert_eq!(t.records.len(), 1);
        assert!(t.warnings.len() == 1 && t.warnings[0].contains("the last line is cut short"), "{:?}", t.warnings);
    }

    #[test]
    fn limit_ends_the_trace_with_room_for_the_end_record() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("t.jsonl");
        let mut w = TraceWriter::create(&path, &header()).unwrap();
        assert!(w.set_limit(Some(100), 6).is_err(), "no room after the header");
        let limit = 16 << 10;
        w.set_limit(Some(limit), 6).unwrap();
        let r = Record::Step { t: Duration::from_millis(3), name: "configure".into(), origin: None };
        let mut written = 0;
        let e = loop {
            match w.record(&r) {
                Ok(()) => written += 1,
                Err(e) => break e,
            }
        };
        assert!(e.to_string().ends_with("the trace reached its size limit of 16 KiB (--trace-limit)"), "{e}");
        assert!(w.record(&r).is_ok(), "nothing more is written after the end");
        w.flush().unwrap();
        assert!(std::fs::metadata(&path).unwrap().len() <= limit);
        let t = Trace::load(&path).unwrap();
        assert_eq!(t.records.len(), written + 1);
        match t.records.last().unwrap() {
            Record::End { exit: 6, error: Some(e), .. } => assert!(e.contains("size limit of 16 KiB"), "{e}"),
            other => panic!("{other:?}"),
        }
    }

    #[test]
    fn sizes_read_as_people_write_them() {
        assert_eq!(size_text(1 << 30), "1 GiB");
        assert_eq!(size_text(100 << 20), "100 MiB");
        assert_eq!(size_text(1500), "1500 B");
    }

    #[test]
    fn corrupt_middle_line_names_its_number() {
        let s = text(&[header_line("1.0"), log(1), "{\"kind\":\"frame\",\"seq\":".into(), log(3)]);
        let e = Trace::from_reader(s.as_bytes(), "bad.jsonl").err().unwrap();
        assert!(matches!(e, TraceError::Corrupt { line: 3, .. }), "{e}");
        assert!(e.to_string().starts_with("bad.jsonl:3: unreadable record"), "{e}");
    }

    #[test]
    fn versions() {
        let e = Trace::from_reader(text(&[header_line("2.0"), log(1)]).as_bytes(), "v2").err().unwrap();
        assert!(matches!(e, TraceError::UnknownMajor { .. }), "{e}");
        assert!(e.to_string().contains("version 2.0 is not supported"), "{e}");
        let newer = text(&[header_line("1.4"), r#"{"kind":"marker","t_ns":5}"#.into(), log(1)]);
        let t = Trace::from_reader(newer.as_bytes(), "v14").unwrap();
        assert_eq!(t.records.len(), 1, "the unknown kind is skipped");
        assert_eq!(t.warnings.len(), 2, "{:?}", t.warnings);
        let same_minor = text(&[header_line("1.0"), r#"{"kind":"marker","t_ns":5}"#.into()]);
        assert!(Trace::from_reader(same_minor.as_bytes(), "v10").is_err(), "1.0 has no such kind");
    }

    #[test]
    fn refuses_other_files() {
        assert!(matches!(Trace::from_reader(&b""[..], "e").err().unwrap(), TraceError::Empty { .. }));
        let e = Trace::from_reader(&b"hello\n"[..], "h").err().unwrap();
        assert!(matches!(e, TraceError::NotATrace { .. }), "{e}");
        let e = Trace::from_reader(&b"{\"format\":\"other\",\"version\":\"1.0\"}\n"[..], "o").err().unwrap();
        assert!(e.to_string().contains("format is `other`"), "{e}");
    }
}
