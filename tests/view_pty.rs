//! The live view end to end: the real binary on a pseudo-terminal, keys
//! typed into it, the screen read back through a terminal emulator
//! (vt100). The terminal must come back as it was and the trace whole.
#![cfg(unix)]

mod common;

use std::io::{Read, Write};
use std::os::fd::{AsRawFd, FromRawFd};
use std::process::Stdio;
use std::sync::{Arc, Condvar, Mutex};
use std::time::{Duration, Instant};

use common::{buscue, script};

/// What the view wrote, and a signal each time more arrives.
type Output = Arc<(Mutex<Vec<u8>>, Condvar)>;

struct Screen {
    bytes: Output,
    input: std::fs::File,
}

impl Screen {
    /// Waits (up to a minute) until the screen shows `what`.
    fn wait_for(&self, what: &str) -> String {
        self.wait_until(what, |t| t.contains(what))
    }

    /// Waits (up to a minute) until the screen passes `ok`, looking again
    /// each time the view writes more.
    fn wait_until(&self, what: &str, ok: impl Fn(&str) -> bool) -> String {
        let until = Instant::now() + Duration::from_secs(60);
        let (bytes, more) = &*self.bytes;
        let mut got = bytes.lock().unwrap();
        loop {
            // The screen and the length it was read at, under one lock: a
            // write between the two would otherwise be waited for again.
            let t = screen_of(&got);
            if ok(&t) {
                return t;
            }
            let left = until.saturating_duration_since(Instant::now());
            assert!(!left.is_zero(), "never showed {what}:\n{t}");
            let seen = got.len();
            got = more.wait_timeout_while(got, left, |b| b.len() == seen).unwrap().0;
        }
    }

    fn press(&mut self, keys: &str) {
        self.input.write_all(keys.as_bytes()).unwrap();
    }

    fn raw(&self) -> String {
        String::from_utf8_lossy(&self.bytes.0.lock().unwrap()).into_owned()
    }
}

/// The screen as a 100x30 terminal shows `bytes`.
fn screen_of(bytes: &[u8]) -> String {
    let mut p = vt100::Parser::new(30, 100, 0);
    p.process(bytes);
    p.screen().contents()
}

fn termios(fd: i32) -> libc::termios {
    // SAFETY: tcgetattr fills the termios it is given for a valid descriptor.
    unsafe {
        let mut t = std::mem::zeroed::<libc::termios>();
        assert_eq!(libc::tcgetattr(fd, &mut t), 0);
        t
    }
}

#[test]
fn a_run_in_the_view_jumps_to_a_nack_quits_and_gives_the_terminal_back() {
    let dir = tempfile::tempdir().unwrap();
    let trace = dir.path().join("view.jsonl");
    let (master, slave, path, before) = terminal();
    let open = || std::fs::OpenOptions::new().read(true).write(true).open(&path).unwrap();
    let child = buscue()
        .args(["run", "scripts/vent_retry.lua", "--trace"])
        .arg(&trace)
        .stdin(open())
        .stdout(open())
        .stderr(Stdio::null())
        .spawn()
        .unwrap();
    let mut screen = reader(&master);
    // A redraw reaches the reader in pieces: wait for the whole of what is
    // asserted below, not for its first line.
    let first = screen.wait_until("the run's summary", |t| t.contains("ended") && t.contains("run over"));
    assert!(first.contains("16 frames 5 NACK 5 retries 0 errors"), "{first}");
    assert!(first.contains("run over: exit 0"), "{first}");
    screen.press("g");
    screen.wait_for("step: identify");
    screen.press("n");
    // The first NACK: the vent controller's address refused (UM10204 §3.1.6).
    let t = screen.wait_until("the NACK's detail", |t| t.contains("wire S 0010001 W N P") && t.contains("frame 2 · "));
    assert!(t.contains("frame 2 · 0x11 · attempt 1 of 6"), "{t}");
    screen.press("q");
    let status = wait(child);
    assert_eq!(status.code(), Some(0));
    let raw = screen.raw();
    let entered = raw.rfind("\x1b[?1049h").expect("the alternate screen was used");
    let left = raw.rfind("\x1b[?1049l").expect("the alternate screen was left");
    assert!(left > entered && raw[left..].contains("\x1b[?25h"), "left last, cursor shown");
    let after = termios(slave.as_raw_fd());
    assert_eq!(before.c_lflag, after.c_lflag, "echo and line editing as they were");
    assert_eq!(before.c_iflag, after.c_iflag);
    let text = std::fs::read_to_string(&trace).unwrap();
    let last = text.trim_end_matches('\0').lines().last().unwrap().to_string();
    assert!(last.starts_with(r#"{"kind":"end""#) && last.contains(r#""exit":0"#), "{last}");
    drop(slave);
}

#[test]
fn quitting_during_a_run_stops_it_after_the_transaction_with_the_trace_complete() {
    let (_d, s) = script("forever.lua", "local v = bus.device(0x2B)\nstep(\"spin\")\nwhile true do v:get(0) end\n");
    let dir = tempfile::tempdir().unwrap();
    let trace = dir.path().join("forever.jsonl");
    let (master, slave, path, before) = terminal();
    let open = || std::fs::OpenOptions::new().read(true).write(true).open(&path).unwrap();
    let child = buscue()
        .arg("run")
        .arg(&s)
        .args(["--realtime", "--trace"])
        .arg(&trace)
        .stdin(open())
        .stdout(open())
        .stderr(Stdio::null())
        .spawn()
        .unwrap();
    let mut screen = reader(&master);
    screen.wait_until("three frames, following", |t| {
        let counted =
            t.split("following │ ").nth(1).and_then(|r| r.split(' ').next()).and_then(|n| n.parse::<u64>().ok());
        counted.is_some_and(|n| n >= 3)
    });
    screen.press("q");
    let status = wait(child);
    assert_eq!(status.code(), Some(130), "stopped as Ctrl-C stops a run");
    assert_eq!(termios(slave.as_raw_fd()).c_lflag, before.c_lflag);
    let text = std::fs::read_to_string(&trace).unwrap();
    let lines: Vec<&str> = text.trim_end_matches('\0').lines().collect();
    let last = lines.last().unwrap();
    assert!(last.starts_with(r#"{"kind":"end""#) && last.contains(r#""exit":130"#), "{last}");
    let frames = lines.iter().filter(|l| l.starts_with(r#"{"kind":"frame""#)).count();
    assert!(frames >= 3, "{frames} frames");
    drop(slave);
}

/// A 100x30 pseudo-terminal: master, slave, the slave's path, and its
/// settings before the view ran (to compare with after).
fn terminal() -> (serialport::TTYPort, serialport::TTYPort, String, libc::termios) {
    let (master, slave, path) = buscue::serve::pty().expect("a pseudo-terminal");
    let ws = libc::winsize { ws_row: 30, ws_col: 100, ws_xpixel: 0, ws_ypixel: 0 };
    // SAFETY: TIOCSWINSZ reads one winsize from the pointer it is given.
    assert_eq!(unsafe { libc::ioctl(master.as_raw_fd(), libc::TIOCSWINSZ, &ws) }, 0);
    let before = termios(slave.as_raw_fd());
    (master, slave, path, before)
}

fn reader(master: &impl AsRawFd) -> Screen {
    // SAFETY: duplicates of the master's descriptor, each owned by one File.
    let mut out = unsafe { std::fs::File::from_raw_fd(libc::dup(master.as_raw_fd())) };
    let input = unsafe { std::fs::File::from_raw_fd(libc::dup(master.as_raw_fd())) };
    let bytes: Output = Arc::new((Mutex::new(Vec::new()), Condvar::new()));
    let b = bytes.clone();
    std::thread::spawn(move || {
        let mut buf = [0u8; 4096];
        while let Ok(n @ 1..) = out.read(&mut buf) {
            b.0.lock().unwrap().extend_from_slice(&buf[..n]);
            b.1.notify_all();
        }
    });
    Screen { bytes, input }
}

/// The child's exit status, waited for on a thread of its own (up to a
/// minute; then it is killed and the test fails).
fn wait(mut child: std::process::Child) -> std::process::ExitStatus {
    let pid = child.id() as libc::pid_t;
    let (tx, rx) = std::sync::mpsc::channel();
    std::thread::spawn(move || {
        let _ = tx.send(child.wait());
    });
    match rx.recv_timeout(Duration::from_secs(60)) {
        Ok(s) => s.unwrap(),
        Err(_) => {
            // SAFETY: signals our own child, still unreaped (its waiter has not returned).
            unsafe { libc::kill(pid, libc::SIGKILL) };
            panic!("the view did not end");
        }
    }
}
