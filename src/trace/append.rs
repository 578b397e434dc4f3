//! Appending whole lines to a trace file so that a killed process loses
//! none it finished, without a system call per line.
//!
//! Contract:
//! - [`Appender::append`] returns once the line is in the operating
//!   system's hands: a SIGKILL (or any crash of this process) after it
//!   returns loses nothing of the line; only a power cut can lose what the
//!   kernel had not yet written to disk.
//! - A regular file on Linux is written through a shared memory mapping
//!   (`MAP_SHARED`): a line is copied into the kernel's page cache by
//!   plain stores, which belong to the file, not to the process, so they
//!   survive its death. Anything else (a FIFO, a device, another system,
//!   or a file the kernel will not map) gets one `write(2)` per line.
//! - The mapped file grows in chunks that are allocated with
//!   `posix_fallocate` (and then written with zeros, which makes the
//!   mapping's page faults cheap) before a byte of them is touched through
//!   the mapping, so a full disk is an `ENOSPC` error returned by
//!   `append`, never a SIGBUS on a page fault. A killed run therefore leaves the file longer than what was
//!   written, ending in NUL bytes up to the chunk's end (the reader treats
//!   such a tail as the end of the file).
//! - [`Appender::finish`] cuts the file to the bytes appended and syncs
//!   it; dropping an appender cuts it without syncing. After either the
//!   file is byte for byte what a `write` per line would have left.
//!
//! Why a line is never left complete-looking but wrong: a kill can stop
//! the copy of a line part way, and a fast `memcpy` does not store its
//! bytes front to back (it may store the tail first). So every byte but
//! the last newline is copied first, and the newline after a compiler
//! fence: a kill lands on an instruction boundary and the stores before
//! it, in program order, are in the page cache, so a line that ends in a
//! newline in the file was copied whole. A cut line has no newline; some
//! of its bytes may be stored and others not (in any pattern the copy
//! left), the unstored ones reading as NULs, and NULs follow it to the
//! chunk's end. The reader takes such a last line as cut.

use std::fs::File;
use std::io::{self, Write};

/// A trace file being appended to; see the module doc.
pub struct Appender {
    file: File,
    /// Bytes appended: the file's true length.
    len: u64,
    #[cfg(target_os = "linux")]
    map: Option<mapped::Window>,
}

impl Appender {
    /// Appends to `file`, which is empty (just created or truncated).
    pub fn new(file: File) -> Self {
        #[cfg(target_os = "linux")]
        {
            let regular = file.metadata().map(|m| m.file_type().is_file()).unwrap_or(false);
            // A file the kernel will not map falls back to plain writes.
            if regular
                && let Ok(rw) = mapped::reopen(&file)
                && let Ok(map) = mapped::Window::new(&rw)
            {
                return Appender { file: rw, len: 0, map: Some(map) };
            }
            Appender { file, len: 0, map: None }
        }
        #[cfg(not(target_os = "linux"))]
        Appender { file, len: 0 }
    }

    /// Bytes appended so far.
    pub fn len(&self) -> u64 {
        self.len
    }

    /// Appends one whole line (`line` ends in a newline).
    pub fn append(&mut self, line: &[u8]) -> io::Result<()> {
        debug_assert_eq!(line.last(), Some(&b'\n'));
        #[cfg(target_os = "linux")]
        if let Some(map) = &mut self.map {
            map.append(&self.file, self.len, line)?;
            self.len += line.len() as u64;
            return Ok(());
        }
        // One write of the whole line: the OS has it when this returns.
        self.file.write_all(line)?;
        self.len += line.len() as u64;
        Ok(())
    }

    /// Cuts the file to the bytes appended and syncs it to disk. Appending
    /// after it goes on where it left off.
    pub fn finish(&mut self) -> io::Result<()> {
        self.cut()?;
        self.file.sync_data()
    }

    /// Cuts a mapped file to the bytes appended (the rest of its chunk is
    /// NULs that were never written).
    fn cut(&mut self) -> io::Result<()> {
        #[cfg(target_os = "linux")]
        if let Some(map) = &mut self.map {
            return map.cut(&self.file, self.len);
        }
        Ok(())
    }
}

impl Drop for Appender {
    fn drop(&mut self) {
        // A writer dropped without finishing (an error path) still leaves
        // only what was written.
        let _ = self.cut();
    }
}

#[cfg(target_os = "linux")]
mod mapped {
    use std::fs::File;
    use std::io;
    use std::os::fd::AsRawFd;
    use std::ptr::NonNull;
    use std::sync::atomic::{Ordering, compiler_fence};

    /// The size of one mapped window of the file. Only address space: the
    /// file behind it is allocated in smaller steps ([`grow_step`]).
    const WINDOW: u64 = 8 << 20;

    /// The first allocation step; steps double up to [`MAX_STEP`], so a
    /// short run (or a killed one) leaves little slack and a long run
    /// allocates rarely.
    const MIN_STEP: u64 = 64 << 10;
    const MAX_STEP: u64 = 4 << 20;

    fn grow_step(allocated: u64) -> u64 {
        allocated.clamp(MIN_STEP, MAX_STEP)
    }

    /// One window of the file mapped shared and writable, and how much of
    /// the file is allocated.
    pub struct Window {
        base: NonNull<u8>,
        /// File offset of the window's first byte (a multiple of WINDOW).
        start: u64,
        /// The file's size: bytes below it are allocated and may be
        /// touched; touching a mapped page past it would be SIGBUS.
        allocated: u64,
    }

    // SAFETY: the window is memory this value owns alone (mapped by it,
    // unmapped in its drop); moving it to another thread is like moving a
    // Vec. Access is through `&mut self` only.
    unsafe impl Send for Window {}

    /// The same open file, for reading and writing: the kernel maps a file
    /// shared and writable only from a descriptor open for both. Opened
    /// again through /proc rather than by path, so it is the same file
    /// even if the path changed since. (The writer opens write-only: a
    /// FIFO opened for reading too would be its own reader, and a write
    /// to it would wait for ever instead of failing when the reader goes.)
    pub fn reopen(file: &File) -> io::Result<File> {
        std::fs::OpenOptions::new().read(true).write(true).open(format!("/proc/self/fd/{}", file.as_raw_fd()))
    }

    /// Writes zeros over the freshly allocated bytes `from..to`. Not for
    /// the bytes' sake (they read as zeros already) but for the page
    /// faults: an allocated but never written extent makes the first
    /// store to each mapped page a costly fault (the file system converts
    /// the extent page by page), while pages a `write` has filled are in
    /// the page cache with their blocks settled, and fault cheaply.
    /// Measured on ext4, 256-byte records: about 0.7 µs of fault time per
    /// record after `posix_fallocate` alone, 0.1 µs with the zeros
    /// written (BENCHMARKS.md, "the trace's pages").
    fn zero_fill(file: &File, from: u64, to: u64) -> io::Result<()> {
        use std::os::unix::fs::FileExt;
        static ZEROS: [u8; 64 << 10] = [0; 64 << 10];
        let mut at = from;
        while at < to {
            let n = (to - at).min(ZEROS.len() as u64) as usize;
            file.write_all_at(&ZEROS[..n], at)?;
            at += n as u64;
        }
        Ok(())
    }

    fn os_error(rc: libc::c_int) -> io::Error {
        io::Error::from_raw_os_error(rc)
    }

    fn map(file: &File, start: u64) -> io::Result<NonNull<u8>> {
        let offset = libc::off_t::try_from(start).map_err(|_| io::Error::from(io::ErrorKind::FileTooLarge))?;
        // SAFETY: a fresh mapping chosen by the kernel (no address given),
        // of a file descriptor that stays open while the mapping lives
        // (the file outlives the window: both belong to one Appender).
        // Mapping past the end of the file is allowed; those pages are only
        // touched once allocated.
        let p = unsafe {
            libc::mmap(
                std::ptr::null_mut(),
                WINDOW as usize,
                libc::PROT_READ | libc::PROT_WRITE,
                libc::MAP_SHARED,
                file.as_raw_fd(),
                offset,
            )
        };
        if p == libc::MAP_FAILED {
            return Err(io::Error::last_os_error());
        }
        NonNull::new(p.cast()).ok_or_else(|| io::Error::other("mmap returned a null address"))
    }

    impl Window {
        pub fn new(file: &File) -> io::Result<Self> {
            let allocated = file.metadata()?.len();
            Ok(Window { base: map(file, 0)?, start: 0, allocated })
        }

        /// Copies `line` to file offset `at` (the end of what was written):
        /// allocation first, then every byte but the last, then the last.
        pub fn append(&mut self, file: &File, at: u64, line: &[u8]) -> io::Result<()> {
            let end = at + line.len() as u64;
            self.allocate(file, end)?;
            let (body, newline) = line.split_at(line.len() - 1);
            self.copy(file, at, body)?;
            // The newline marks the line complete: no store of it may come
            // before the body's (see the module doc).
            compiler_fence(Ordering::SeqCst);
            self.copy(file, end - 1, newline)
        }

        /// Allocates the file up to at least `end`, a step at a time, so
        /// ENOSPC shows here and not as a signal on a page fault.
        fn allocate(&mut self, file: &File, end: u64) -> io::Result<()> {
            if end <= self.allocated {
                return Ok(());
            }
            let to = end.max(self.allocated + grow_step(self.allocated));
            let (Ok(off), Ok(len)) =
                (libc::off_t::try_from(self.allocated), libc::off_t::try_from(to - self.allocated))
            else {
                return Err(io::ErrorKind::FileTooLarge.into());
            };
            // SAFETY: a plain system call on an open descriptor.
            let rc = unsafe { libc::posix_fallocate(file.as_raw_fd(), off, len) };
            if rc != 0 {
                return Err(os_error(rc));
            }
            zero_fill(file, self.allocated, to)?;
            self.allocated = to;
            Ok(())
        }

        /// Copies `bytes` to file offset `at`, moving the window as needed.
        /// The bytes are allocated.
        fn copy(&mut self, file: &File, mut at: u64, mut bytes: &[u8]) -> io::Result<()> {
            while !bytes.is_empty() {
                if at < self.start || at >= self.start + WINDOW {
                    self.move_to(file, at - at % WINDOW)?;
                }
                let room = (self.start + WINDOW - at) as usize;
                let n = room.min(bytes.len());
                // SAFETY: `at - start + n <= WINDOW`, inside the mapping;
                // the file is allocated there (`allocate` ran), so the pages
                // exist; the mapping is ours alone in this process, and
                // `bytes` is not part of it.
                unsafe {
                    std::ptr::copy_nonoverlapping(bytes.as_ptr(), self.base.as_ptr().add((at - self.start) as usize), n)
                };
                at += n as u64;
                bytes = &bytes[n..];
            }
            Ok(())
        }

        fn move_to(&mut self, file: &File, start: u64) -> io::Result<()> {
            let base = map(file, start)?;
            self.unmap();
            self.base = base;
            self.start = start;
            Ok(())
        }

        /// Cuts the file to `len` bytes: what was written, without the
        /// allocated slack. Pages past the new end are not touched again
        /// before `allocate` grows the file.
        pub fn cut(&mut self, file: &File, len: u64) -> io::Result<()> {
            if self.allocated != len {
                file.set_len(len)?;
                self.allocated = len;
            }
            Ok(())
        }

        fn unmap(&mut self) {
            // SAFETY: `base` is a live mapping of WINDOW bytes made by `map`,
            // unmapped once (here or replaced by `move_to` right after).
            unsafe { libc::munmap(self.base.as_ptr().cast(), WINDOW as usize) };
        }
    }

    impl Drop for Window {
        fn drop(&mut self) {
            self.unmap();
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn create(path: &std::path::Path) -> File {
        File::create_new(path).unwrap()
    }

    fn lines(n: usize) -> Vec<Vec<u8>> {
        (0..n).map(|i| format!("{{\"n\":{i},\"pad\":\"{}\"}}\n", "x".repeat(i % 300)).into_bytes()).collect()
    }

    #[test]
    fn finished_file_is_exactly_the_lines() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("a.jsonl");
        let mut a = Appender::new(create(&path));
        // Enough to cross several allocation steps and a window boundary.
        let ls = lines(60_000);
        let mut want = Vec::new();
        for l in &ls {
            a.append(l).unwrap();
            want.extend_from_slice(l);
        }
        assert!(want.len() as u64 > 8 << 20, "crosses a window");
        assert_eq!(a.len(), want.len() as u64);
        a.finish().unwrap();
        assert_eq!(std::fs::read(&path).unwrap(), want);
        // Appending after finish goes on where it stopped.
        a.append(b"more\n").unwrap();
        drop(a);
        want.extend_from_slice(b"more\n");
        assert_eq!(std::fs::read(&path).unwrap(), want, "a drop cuts the slack too");
    }

    #[cfg(target_os = "linux")]
    #[test]
    fn unfinished_file_ends_in_nuls() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("a.jsonl");
        let mut a = Appender::new(create(&path));
        a.append(b"{\"n\":1}\n").unwrap();
        // What a killed process leaves: the mapping's stores, the chunk's size.
        let seen = std::fs::read(&path).unwrap();
        assert!(seen.starts_with(b"{\"n\":1}\n"));
        assert!(seen.len() > 8 && seen[8..].iter().all(|&b| b == 0), "{} bytes", seen.len());
        drop(a);
        assert_eq!(std::fs::read(&path).unwrap(), b"{\"n\":1}\n");
    }
}
