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

use std::io::{self, Stdout, StdoutLock, Write};

use thiserror::Error;

/// The marker inside the `BrokenPipe` error of a closed standard output.
#[derive(Debug, Error)]
#[error("standard output was closed")]
struct Closed;

/// Standard output, with a closed pipe marked as such.
pub struct Out<W: Write>(W);

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
    fn a_closed_pipe_is_told_apart() {
        let e = writeln!(Out(Gone), "x").unwrap_err();
        assert_eq!(e.kind(), io::ErrorKind::BrokenPipe, "sessions still drop the sink quietly");
        assert!(closed(&anyhow::Error::from(e).context("printing")));
        let other = anyhow::Error::from(io::Error::from(io::ErrorKind::BrokenPipe));
        assert!(!closed(&other), "a broken pipe that is not standard output stays an error");
    }
}
