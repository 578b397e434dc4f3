//! Standard output of every command, through one writer.
//!
//! Contract: commands write what they print to standard output through
//! [`Out`] (frame-log sinks included). When the reader has gone (a closed
//! pipe, as with `| head -c1`), a write fails with an error [`closed`]
//! recognises, and `main` ends the command quietly with exit code 0: the
//! reader took all it wanted. Rust ignores SIGPIPE, so a closed pipe
//! shows up as `BrokenPipe` write errors; `print!` would panic on them.
//! The error keeps its `BrokenPipe` kind, so a session that drops a
//! failed sink still drops this one silently and plays on (`run`,
//! `replay`). A broken pipe elsewhere, such as a serial link, is not
//! marked and stays an error.

use std::io::{self, BufWriter, IsTerminal, Stdout, StdoutLock, Write};
use std::sync::{Arc, Mutex, MutexGuard};
use std::time::{Duration, Instant};

use thiserror::Error;

/// The marker inside the `BrokenPipe` error of a closed standard output.
#[derive(Debug, Error)]
#[error("standard output was closed")]
struct Closed;

/// Standard output, with a closed pipe marked as such.
pub struct Out<W: Write>(W);

impl<W: Write> Out<W> {
    /// Any output, marked as standard output is (benchmarks and tests
    /// stand a file in for it).
    pub fn new(w: W) -> Self {
        Out(w)
    }
}

/// Standard output, locked per write: for sinks that live as long as a
/// session.
pub fn stdout() -> Out<Stdout> {
    Out(io::stdout())
}

/// Standard output, locked while the writer lives: for a command's report.
pub fn locked() -> Out<StdoutLock<'static>> {
    Out(io::stdout().lock())
}

fn mark(e: io::Error) -> io::Error {
    if e.kind() == io::ErrorKind::BrokenPipe { io::Error::new(io::ErrorKind::BrokenPipe, Closed) } else { e }
}

impl<W: Write> Write for Out<W> {
    fn write(&mut self, buf: &[u8]) -> io::Result<usize> {
        self.0.write(buf).map_err(mark)
    }

    fn write_all(&mut self, buf: &[u8]) -> io::Result<()> {
        self.0.write_all(buf).map_err(mark)
    }

    fn flush(&mut self) -> io::Result<()> {
        self.0.flush().map_err(mark)
    }
}

/// A run's frame log on standard output: line-buffered on a terminal
/// (a person watches it), block-buffered to a file or pipe (the trace is
/// the durable record, and a `write` per line would cost more than the
/// rest of a transaction). Flushed by the sink at the end of the run and
/// by the watchdog ([`LogFlush`]) before it exits the process.
pub fn frame_log() -> LogOut<Out<Stdout>> {
    LogOut::new(stdout(), io::stdout().is_terminal())
}

/// The frame-log writer [`frame_log`] makes, over any output (a
/// benchmark gives it a file), shared with its [`LogFlush`].
pub struct LogOut<W: Write>(Arc<Mutex<Buffer<W>>>);

enum Buffer<W: Write> {
    /// Written through as it comes (standard output buffers whole lines).
    Lines(W),
    Blocks(BufWriter<W>),
}

/// A handle that flushes a [`LogOut`] from another thread.
pub struct LogFlush(Box<dyn Fn() + Send>);

/// How long [`LogFlush::flush`] waits for a write in progress.
const FLUSH_WAIT: Duration = Duration::from_millis(200);

impl<W: Write> LogOut<W> {
    /// `lines`: the output is a terminal, so write each line as it comes.
    pub fn new(out: W, lines: bool) -> Self {
        let b = if lines { Buffer::Lines(out) } else { Buffer::Blocks(BufWriter::with_capacity(64 << 10, out)) };
        LogOut(Arc::new(Mutex::new(b)))
    }

    fn lock(&self) -> MutexGuard<'_, Buffer<W>> {
        self.0.lock().unwrap_or_else(|p| p.into_inner())
    }

    fn inner(b: &mut Buffer<W>) -> &mut dyn Write {
        match b {
            Buffer::Lines(w) => w,
            Buffer::Blocks(w) => w,
        }
    }
}

impl<W: Write + Send + 'static> LogOut<W> {
    pub fn flusher(&self) -> LogFlush {
        let shared = self.0.clone();
        LogFlush(Box::new(move || {
            // The run's thread may be stuck in a write to a reader that
            // stopped reading: wait a little for it, never for ever (as
            // the standard library's own exit-time flush does).
            let until = Instant::now() + FLUSH_WAIT;
            loop {
                match shared.try_lock() {
                    Ok(mut b) => {
                        let _ = Self::inner(&mut b).flush();
                        return;
                    }
                    Err(std::sync::TryLockError::Poisoned(p)) => {
                        let _ = Self::inner(&mut p.into_inner()).flush();
                        return;
                    }
                    Err(std::sync::TryLockError::WouldBlock) if Instant::now() < until => {
                        std::thread::sleep(Duration::from_millis(1))
                    }
                    Err(std::sync::TryLockError::WouldBlock) => return,
                }
            }
        }))
    }
}

impl LogFlush {
    /// Writes out what the frame log holds, if its writer lets go soon.
    pub fn flush(&self) {
        (self.0)()
    }
}

impl<W: Write> Write for LogOut<W> {
    fn write(&mut self, buf: &[u8]) -> io::Result<usize> {
        Self::inner(&mut self.lock()).write(buf)
    }

    fn write_all(&mut self, buf: &[u8]) -> io::Result<()> {
        Self::inner(&mut self.lock()).write_all(buf)
    }

    fn flush(&mut self) -> io::Result<()> {
        Self::inner(&mut self.lock()).flush()
    }
}

/// The width of the terminal standard output is, when it is one: `COLUMNS`
/// when it holds a positive number (POSIX.1-2017, XBD 8.3: the user's
/// preferred width, which overrides the system's), else the window size
/// the terminal reports. `None` off a terminal: a file or a pipe has no
/// width.
pub fn terminal_width() -> Option<usize> {
    if !io::stdout().is_terminal() {
        return None;
    }
    let columns = std::env::var("COLUMNS").ok().and_then(|v| v.trim().parse::<usize>().ok());
    columns.filter(|&n| n > 0).or_else(window_columns)
}

#[cfg(unix)]
fn window_columns() -> Option<usize> {
    // SAFETY: a zeroed winsize is a valid value of the plain C struct, and
    // TIOCGWINSZ only writes one into the pointer it is given.
    let mut ws: libc::winsize = unsafe { std::mem::zeroed() };
    let rc = unsafe { libc::ioctl(libc::STDOUT_FILENO, libc::TIOCGWINSZ, &mut ws) };
    (rc == 0 && ws.ws_col > 0).then_some(ws.ws_col as usize)
}

#[cfg(not(unix))]
fn window_columns() -> Option<usize> {
    None
}

/// Whether `e` is standard output closed by its reader.
pub fn closed(e: &anyhow::Error) -> bool {
    e.chain().any(|c| c.downcast_ref::<io::Error>().and_then(io::Error::get_ref).is_some_and(|i| i.is::<Closed>()))
}

#[cfg(test)]
mod tests {
    use super::*;

    struct Gone;

    impl Write for Gone {
        fn write(&mut self, _: &[u8]) -> io::Result<usize> {
            Err(io::ErrorKind::BrokenPipe.into())
        }
        fn flush(&mut self) -> io::Result<()> {
            Ok(())
        }
    }

    #[test]
    fn a_block_buffered_log_is_flushed_by_its_handle() {
        let file = tempfile::tempfile().unwrap();
        let mut seen = file.try_clone().unwrap();
        let mut log = LogOut::new(file, false);
        let flush = log.flusher();
        log.write_all(b"frame\n").unwrap();
        let mut text = String::new();
        use std::io::{Read, Seek};
        assert_eq!(seen.read_to_string(&mut text).unwrap(), 0, "buffered");
        std::thread::spawn(move || flush.flush()).join().unwrap();
        seen.rewind().unwrap();
        seen.read_to_string(&mut text).unwrap();
        assert_eq!(text, "frame\n");
    }

    #[test]
    fn a_closed_pipe_is_told_apart() {
        let e = writeln!(Out(Gone), "x").unwrap_err();
        assert_eq!(e.kind(), io::ErrorKind::BrokenPipe, "sessions still drop the sink quietly");
        assert!(closed(&anyhow::Error::from(e).context("printing")));
        let other = anyhow::Error::from(io::Error::from(io::ErrorKind::BrokenPipe));
        assert!(!closed(&other), "a broken pipe that is not standard output stays an error");
    }
}
