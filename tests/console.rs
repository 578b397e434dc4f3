//! `buscue console`: driven through standard input, and through a
//! pseudo-terminal as a person meets it (line editing, completion, history,
//! Ctrl-C). Every wait is for text on the screen, bounded so a broken
//! console fails the test instead of hanging it.

mod common;

use std::io::{Read, Write};
use std::process::Stdio;

use common::*;

fn console_stdin(input: &str, extra: &[&str]) -> std::process::Output {
    let mut child = buscue()
        .args(["console", "--no-trace", "--map", "0x31=scripts/maps/climate.lua"])
        .args(extra)
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("console starts");
    child.stdin.take().unwrap().write_all(input.as_bytes()).unwrap();
    child.wait_with_output().unwrap()
}

#[test]
fn stdin_runs_line_by_line_with_values_frames_and_multi_line_chunks() {
    let out = console_stdin(
        "dev31:get(\"ID\")\nfunction twice(x)\n  return 2 * x\nend\ntwice(21)\n%devices\ndev31:explain(\"CONTROL\")\n",
        &[],
    );
    let text = stdout(&out);
    assert_eq!(code(&out), 0, "{text}{}", stderr(&out));
    // The demo sensor's ID, 0x5E11 = 24081, after the frame that read it.
    let frame = text.find("[ID 0x5E11]").expect("the ID read's frame, with the value it read");
    let value = text.find("= 0x5E11 (24081)").expect("the value in hex and decimal");
    assert!(frame < value, "{text}");
    assert!(text.contains("= 0x2A (42)"), "a function defined over three lines, then called: {text}");
    assert!(text.contains("dev31      0x31  6 registers from scripts/maps/climate.lua"), "{text}");
    assert!(text.contains("= CONTROL      @0x01  0x0000"), "{text}");
    assert!(text.contains("=       AVG        = 2ms (0)"), "{text}");
}

#[test]
fn a_failed_command_keeps_going_and_sets_the_exit_code() {
    let out = console_stdin("error(\"boom\")\n1 + 1\n", &[]);
    let text = stdout(&out);
    assert!(text.contains("error: console:1:1: boom"), "{text}");
    assert!(text.contains("= 0x2 (2)"), "the next command still runs: {text}");
    assert_eq!(code(&out), 2, "a script error's code (README exit codes)");
}

#[test]
fn saved_session_runs_with_run_and_gives_the_same_frames() {
    let dir = tempfile::tempdir().unwrap();
    let saved = dir.path().join("session.lua");
    let input = format!(
        "dev31:get(\"ID\")\ndev31:set(\"CONTROL\", {{ AVG = \"8ms\", HEATER = \"on\" }})\ndev31:read(\"CONTROL.AVG\")\nnot_a_function()\n%save {}\n",
        saved.display()
    );
    let trace = dir.path().join("console.jsonl");
    let out = buscue()
        .args(["console", "--map", "0x31=scripts/maps/climate.lua", "--trace", trace.to_str().unwrap()])
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .and_then(|mut c| {
            c.stdin.take().unwrap().write_all(input.as_bytes())?;
            c.wait_with_output()
        })
        .unwrap();
    assert!(stdout(&out).contains("saved 3 command(s)"), "the failed command is left out: {}", stdout(&out));
    let ops = |path: &std::path::Path| -> Vec<String> {
        std::fs::read_to_string(path)
            .unwrap()
            .lines()
            .filter_map(|l| serde_json::from_str::<serde_json::Value>(l).ok())
            .filter(|r| r["kind"] == "frame")
            .map(|r| format!("{} {} {}", r["address"], r["ops"], r["outcome"]["ops"]))
            .collect()
    };
    let console_frames = ops(&trace);
    assert_eq!(console_frames.len(), 4, "ID read, CONTROL read and write, CONTROL read");
    let run_trace = dir.path().join("run.jsonl");
    let r = run(&["run", saved.to_str().unwrap(), "--trace", run_trace.to_str().unwrap()]);
    assert_eq!(code(&r), 0, "{}", stderr(&r));
    assert_eq!(ops(&run_trace), console_frames);
}

/// A console on a pseudo-terminal that is its controlling terminal, as a
/// shell would start it.
#[cfg(unix)]
mod terminal {
    use super::*;
    use std::os::fd::{AsRawFd, FromRawFd, OwnedFd};
    use std::os::unix::process::CommandExt;
    use std::sync::mpsc;
    use std::time::Duration;

    /// The most a step waits for its text: far beyond what a step takes,
    /// so only a broken console reaches it.
    const PATIENCE: Duration = Duration::from_secs(20);

    pub struct Screen {
        master: std::fs::File,
        got: mpsc::Receiver<Vec<u8>>,
        pub seen: String,
        child: std::process::Child,
    }

    impl Screen {
        pub fn start(data_home: &std::path::Path) -> Screen {
            let (mut m, mut s) = (0, 0);
            // SAFETY: openpty writes two descriptors; the rest may be null.
            let r = unsafe { libc::openpty(&mut m, &mut s, std::ptr::null_mut(), std::ptr::null(), std::ptr::null()) };
            assert_eq!(r, 0, "openpty");
            // SAFETY: both descriptors were just opened and are ours alone.
            let (master, slave) = unsafe { (OwnedFd::from_raw_fd(m), OwnedFd::from_raw_fd(s)) };
            let ws = libc::winsize { ws_row: 40, ws_col: 200, ws_xpixel: 0, ws_ypixel: 0 };
            // SAFETY: TIOCSWINSZ reads one winsize.
            unsafe { libc::ioctl(master.as_raw_fd(), libc::TIOCSWINSZ, &ws) };
            let mut cmd = buscue();
            cmd.args(["console", "--no-trace", "--map", "0x31=scripts/maps/climate.lua"])
                .env("XDG_DATA_HOME", data_home)
                .env("TERM", "xterm")
                .stdin(Stdio::from(slave.try_clone().unwrap()))
                .stdout(Stdio::from(slave.try_clone().unwrap()))
                .stderr(Stdio::from(slave));
            // SAFETY: setsid and TIOCSCTTY between fork and exec, on the
            // child's own standard input: async-signal-safe calls only.
            unsafe {
                cmd.pre_exec(|| {
                    if libc::setsid() < 0 || libc::ioctl(0, libc::TIOCSCTTY as _, 0) < 0 {
                        return Err(std::io::Error::last_os_error());
                    }
                    Ok(())
                });
            }
            let child = cmd.spawn().expect("console starts");
            let master = std::fs::File::from(master);
            let mut reader = master.try_clone().unwrap();
            let (tx, got) = mpsc::channel();
            std::thread::spawn(move || {
                let mut buf = [0u8; 4096];
                while let Ok(n @ 1..) = reader.read(&mut buf) {
                    if tx.send(buf[..n].to_vec()).is_err() {
                        break;
                    }
                }
            });
            Screen { master, got, seen: String::new(), child }
        }

        /// Waits until `text` has appeared since the last wait; answers the
        /// line editor's cursor-position queries meanwhile.
        pub fn wait_for(&mut self, text: &str) {
            let deadline = std::time::Instant::now() + PATIENCE;
            loop {
                if let Some(i) = self.seen.find(text) {
                    self.seen.drain(..i + text.len());
                    return;
                }
                let left = deadline.saturating_duration_since(std::time::Instant::now());
                // Output that never stops must not outlast the patience.
                assert!(!left.is_zero(), "no {text:?} on the screen in time; it ends:\n{}", self.seen);
                match self.got.recv_timeout(left) {
                    Ok(b) => {
                        let s = String::from_utf8_lossy(&b).into_owned();
                        for _ in 0..s.matches("\x1b[6n").count() {
                            self.master.write_all(b"\x1b[1;1R").unwrap();
                        }
                        self.seen.push_str(&s.replace("\x1b[6n", ""));
                        // Keep only what could still hold the start of
                        // `text`: a command that floods frames (a long
                        // poll) must not make each search slower than the
                        // output.
                        if self.seen.len() > 64 * 1024 && !self.seen.contains(text) {
                            let mut cut = self.seen.len() - 4 * 1024;
                            while !self.seen.is_char_boundary(cut) {
                                cut += 1;
                            }
                            self.seen.drain(..cut);
                        }
                    }
                    Err(_) => panic!("no {text:?} on the screen; it shows:\n{}", self.seen),
                }
            }
        }

        pub fn send(&mut self, keys: &str) {
            self.master.write_all(keys.as_bytes()).unwrap();
        }

        /// Leaves with Ctrl-D at the next prompt (a key typed before the
        /// line editor has the terminal again can be lost) and returns
        /// the exit code.
        pub fn finish(mut self) -> i32 {
            self.wait_for("bus> ");
            self.send("\x04");
            let deadline = std::time::Instant::now() + PATIENCE;
            loop {
                if let Some(status) = self.child.try_wait().unwrap() {
                    return status.code().unwrap_or(-1);
                }
                if std::time::Instant::now() >= deadline {
                    let _ = self.child.kill();
                    panic!("the console did not leave on Ctrl-D; the screen ends:\n{}", self.seen);
                }
                // Whatever the console prints while it leaves.
                if let Ok(b) = self.got.recv_timeout(Duration::from_millis(50)) {
                    self.seen.push_str(&String::from_utf8_lossy(&b));
                }
            }
        }
    }
}

#[cfg(unix)]
#[test]
fn on_a_terminal_editing_completion_errors_ctrl_c_and_history_work() {
    use terminal::Screen;
    let data = tempfile::tempdir().unwrap();
    let mut s = Screen::start(data.path());
    s.wait_for("bus> ");
    // A multi-line function: the second line gets the continuation prompt.
    s.send("function twice(x)\r");
    s.wait_for("...> ");
    // One line at a time, each after its prompt: the line editor sets the
    // terminal back between lines, and keys typed ahead may be dropped then.
    s.send("return 2 * x\r");
    s.wait_for("...> ");
    s.send("end\r");
    s.wait_for("bus> ");
    s.send("twice(21)\r");
    s.wait_for("= 0x2A (42)");
    // Completion of a register name inside a method's string argument
    // (one candidate: completed in place), then of an API name.
    s.send("dev31:get(\"CON\t");
    s.wait_for("CONTROL");
    s.send("\")\r");
    s.wait_for("[CONTROL]");
    s.wait_for("= 0x0 (0)");
    s.send("bus.wait_a\t");
    s.wait_for("bus.wait_ack");
    s.send("\x15"); // Ctrl-U: drop the line
    // An error keeps the prompt.
    s.send("error(\"boom\")\r");
    s.wait_for("boom");
    s.wait_for("bus> ");
    // Ctrl-C during a poll that would last an hour of bus time: back to the
    // prompt, the bus idle, the next command runs.
    // The marker is built at run time: the line editor echoes the typed
    // line, and a marker found in the echo would send Ctrl-C while the
    // editor still holds the terminal raw (a key, not a signal).
    s.send("print(\"poll\" .. \"ing\") dev31:wait(\"STATUS\", 0x8000, 0x8000, { timeout_ms = 3600000 })\r");
    s.wait_for("polling");
    s.send("\x03");
    s.wait_for("interrupted");
    s.wait_for("bus> ");
    s.send("dev31:get(\"ID\")\r");
    s.wait_for("= 0x5E11 (24081)");
    assert_eq!(s.finish(), 2, "the error and the interrupt were failures");
    let history = std::fs::read_to_string(data.path().join("buscue/console_history")).expect("history written");
    assert!(history.contains("twice(21)"), "{history}");

    // A new session reloads it: Up shows the last command.
    let mut s = Screen::start(data.path());
    s.wait_for("bus> ");
    s.send("\x1b[A");
    s.wait_for("dev31:get(\"ID\")");
    s.send("\r");
    s.wait_for("= 0x5E11 (24081)");
    assert_eq!(s.finish(), 0);
}

/// `%view` opens the full-screen view over the session's frames (the
/// alternate screen, the frame in its list) and `q` comes back
/// to the prompt, where the session goes on.
#[cfg(unix)]
#[test]
fn the_view_opens_over_the_session_and_q_returns_to_the_prompt() {
    use terminal::Screen;
    let data = tempfile::tempdir().unwrap();
    let mut s = Screen::start(data.path());
    s.wait_for("bus> ");
    s.send("dev31:get(\"ID\")\r");
    s.wait_for("= 0x5E11 (24081)");
    s.wait_for("bus> ");
    s.send("%view\r");
    s.wait_for("\x1b[?1049h");
    // The session's one frame in the list (ratatui moves the cursor
    // between the status line's words, so the list row is what is matched).
    s.wait_for("0x31 W 00 | R 5E 11 ok");
    s.send("q");
    s.wait_for("\x1b[?1049l");
    s.wait_for("bus> ");
    s.send("dev31:get(\"ID\")\r");
    s.wait_for("= 0x5E11 (24081)");
    assert_eq!(s.finish(), 0);
}

#[test]
fn the_view_needs_a_terminal() {
    let o = console_stdin("%view\n", &[]);
    assert_eq!(o.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&o.stdout).contains("%view needs a terminal"), "{o:?}");
}
