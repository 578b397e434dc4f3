//! What a person sees: frame lines fitted to a width, the wide form off a
//! terminal, rounded durations, NACKs of probes counted apart, colour on
//! demand, help wrapped to the terminal.
//!
//! Modelled bus times are not pinned here (the time model may change);
//! shapes, counts the script itself determines and widths are.

mod common;
use common::*;

/// The frame lines of an output: the lines with a sequence number.
fn frame_lines(out: &str) -> Vec<&str> {
    out.lines().filter(|l| l.split(' ').nth(1).is_some_and(|w| w.starts_with('#'))).collect()
}

/// Register-level demo scripts: every frame of theirs is an ordinary one.
const REGISTER_SCRIPTS: [&str; 4] = [
    "scripts/climate_bringup.lua",
    "scripts/vent_retry.lua",
    "scripts/valve_expander.lua",
    "scripts/eeprom_calibration.lua",
];

#[test]
fn fitted_to_80_columns_every_frame_of_the_register_demos_fits() {
    for s in REGISTER_SCRIPTS {
        let o = run(&["run", s, "--no-trace", "--width", "80"]);
        assert_eq!(code(&o), 0, "{s}: {}", stderr(&o));
        let out = stdout(&o);
        let frames = frame_lines(&out);
        assert!(!frames.is_empty(), "{s}: {out}");
        for l in &frames {
            assert!(l.chars().count() <= 80, "{s}: {} columns: {l}", l.chars().count());
            assert!(!l.contains("scripts/"), "the run's own script is named by line alone: {l}");
        }
        // Register reads keep their script line (`:N`) at 80 columns.
        assert!(frames.iter().filter(|l| l.contains(" | R ")).all(|l| l.contains("  :")), "{s}: {out}");
    }
}

#[test]
fn the_battery_gauges_word_reads_fit_80_columns_with_their_pec() {
    let o = run(&["run", "scripts/battery_telemetry.lua", "--no-trace", "--width", "80"]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let out = stdout(&o);
    let words: Vec<_> = frame_lines(&out).into_iter().filter(|l| l.contains("[Read Word")).collect();
    assert!(!words.is_empty(), "{out}");
    for l in words {
        assert!(l.len() <= 80 && l.contains(" PEC ok "), "{} columns: {l}", l.len());
    }
}

#[test]
fn off_a_terminal_nothing_is_shortened() {
    // A pipe has no width: whole script paths, every byte of the 48-byte verify.
    let o = run(&["run", "scripts/eeprom_calibration.lua", "--no-trace"]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let out = stdout(&o);
    let verify = frame_lines(&out).into_iter().find(|l| l.contains(" | R ")).expect("the verify read");
    assert!(verify.ends_with("scripts/eeprom_calibration.lua:33"), "{verify}");
    let read = verify.split(" | R ").nth(1).unwrap();
    let bytes = read.split(' ').take_while(|w| w.len() == 2 && w.chars().all(|c| c.is_ascii_hexdigit())).count();
    assert_eq!(bytes, 48, "{verify}");
    assert!(!out.contains(" more) "), "{out}");
    // Fitted, the same read loses its middle and says how much.
    let o = run(&["run", "scripts/eeprom_calibration.lua", "--no-trace", "--width", "80"]);
    let out = stdout(&o);
    let verify = frame_lines(&out).into_iter().find(|l| l.contains(" | R ")).expect("the verify read");
    assert!(verify.contains(" more) "), "{verify}");
    // --wide wins over the terminal and cannot be mixed with --width.
    let o = run(&["run", "scripts/vent_retry.lua", "--no-trace", "--wide", "--width", "80"]);
    assert_eq!(code(&o), 2, "{}", stderr(&o));
    let o = run(&["run", "scripts/vent_retry.lua", "--no-trace", "--width", "5"]);
    assert_eq!(code(&o), 2, "a width too narrow for any line is refused: {}", stderr(&o));
}

#[test]
fn frame_bus_times_stay_in_one_unit() {
    // The clock-stretched read takes milliseconds, the others microseconds:
    // all in microseconds, so the column reads down.
    let o = run(&["run", "scripts/climate_bringup.lua", "--no-trace"]);
    let out = stdout(&o);
    let frames = frame_lines(&out);
    for l in &frames {
        let unit = l.split_whitespace().find(|w| w.ends_with("us") && w[..w.len() - 2].contains('.'));
        assert!(unit.is_some(), "a bus time in us: {l}");
        assert!(!l.contains(" ms "), "{l}");
    }
    // Tenths of a microsecond: `475.0us`, never a cut `0.475 ms`.
    let t = frames[0].split_whitespace().find(|w| w.ends_with("us")).unwrap();
    let digits = t.trim_end_matches("us");
    assert_eq!(digits.split('.').nth(1).map(str::len), Some(1), "{t}");
}

/// The summary's numbers in parentheses: `(A attempts, R retries, N NACKs, P of Q probes NACKed)`.
fn summary_numbers(err: &str) -> Vec<u64> {
    let line = err.lines().find(|l| l.contains(" transaction")).unwrap_or_else(|| panic!("a summary: {err}"));
    let inside = &line[line.find('(').unwrap() + 1..line.find(')').unwrap()];
    inside.split(|c: char| !c.is_ascii_digit()).filter(|w| !w.is_empty()).map(|w| w.parse().unwrap()).collect()
}

#[test]
fn the_summary_counts_probe_nacks_apart() {
    let o = run(&["run", "scripts/eeprom_calibration.lua", "--json", "--no-trace"]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let f = frames(&o);
    let polls: Vec<_> = f.iter().filter(|r| r["purpose"] == "ack-poll").collect();
    let answered = polls.iter().filter(|r| r["outcome"]["fault"].is_null()).count() as u64;
    let polls = polls.len() as u64;
    assert!(polls > answered && answered >= 2, "the write cycles make the EEPROM NACK its polls: {polls}, {answered}");
    // The end record keeps counting every NACK, as the trace format has it.
    assert_eq!(end(&o)["stats"]["nacks"].as_u64(), Some(polls - answered));

    let o = run(&["run", "scripts/eeprom_calibration.lua", "--no-trace", "-q"]);
    let n = summary_numbers(&stderr(&o));
    // attempts, retries, NACKs outside probes, NACKed probes, probes.
    assert_eq!(n, vec![f.len() as u64, 0, 0, polls - answered, polls], "{}", stderr(&o));
    assert!(stderr(&o).contains(" 0 NACKs, "), "{}", stderr(&o));

    // A run without probes says nothing about them.
    let o = run(&["run", "scripts/valve_expander.lua", "--no-trace", "-q"]);
    assert!(!stderr(&o).contains("probe"), "{}", stderr(&o));
}

#[test]
fn the_summary_rounds_its_durations_to_three_digits() {
    let o = run(&["run", "scripts/climate_bringup.lua", "--no-trace", "-q"]);
    let err = stderr(&o);
    let after = err.split("bus time ").nth(1).unwrap_or_else(|| panic!("{err}"));
    let number = after.split(' ').next().unwrap();
    let unit = after.split(' ').nth(1).unwrap();
    assert!(["ns", "us", "ms", "s"].contains(&unit), "{after}");
    let digits = number.chars().filter(char::is_ascii_digit).count();
    assert_eq!(digits, 3, "three significant digits: {number}");
}

#[test]
fn colour_on_demand_and_errors_in_colour() {
    let o = run(&["run", "scripts/failures/missing_device.lua", "--no-trace", "--colour", "always"]);
    assert_eq!(code(&o), 3);
    assert!(stderr(&o).contains("\x1b[31;1merror:\x1b[0m "), "{:?}", stderr(&o));
    let o = run(&["run", "scripts/failures/missing_device.lua", "--no-trace", "--colour", "never"]);
    assert!(!stderr(&o).contains('\x1b'), "{:?}", stderr(&o));
    // An error of the command line's own (a missing script) follows --colour too.
    let o = run(&["run", "scripts/nope.lua", "--colour", "always"]);
    assert_eq!(code(&o), 2);
    assert!(stderr(&o).starts_with("\x1b[31;1merror:\x1b[0m "), "{:?}", stderr(&o));
}

/// Whether a help text puts an option's description on its own line.
fn next_line_layout(help: &str) -> bool {
    help.lines().any(|l| {
        let t = l.trim_start();
        t.starts_with("--") && !t.contains("  ")
    })
}

#[test]
fn help_wraps_to_the_terminal_and_every_command_has_one_layout() {
    for cmd in ["run", "scan", "replay", "diff", "serve", "ports", "pullup", "bustime", "to-script"] {
        for columns in ["60", "80", "120"] {
            let o = buscue().args([cmd, "--help"]).env("COLUMNS", columns).output().unwrap();
            assert_eq!(code(&o), 0);
            let help = stdout(&o);
            let width: usize = columns.parse().unwrap();
            let widest = help.lines().map(|l| l.chars().count()).max().unwrap();
            // clap wraps at the terminal width, 100 columns at most.
            assert!(widest <= width.min(100), "{cmd} at {columns}: {widest} columns:\n{help}");
            if columns != "60" {
                assert!(!next_line_layout(&help), "{cmd} at {columns}: options and their help side by side:\n{help}");
            }
            assert!(!help.contains("Possible values:"), "{cmd}: one layout for every command:\n{help}");
        }
    }
}

/// On a real terminal the frame log (`--plain`: without it a terminal gets
/// the full-screen view) fits the window the terminal reports
/// (a pseudo-terminal set to 72 columns), with no COLUMNS to say so.
#[cfg(unix)]
#[test]
fn on_a_terminal_frame_lines_fit_its_window() {
    use std::io::Read;
    use std::os::fd::{AsRawFd, FromRawFd};

    let (master, slave, path) = buscue::serve::pty().expect("a pseudo-terminal");
    let ws = libc::winsize { ws_row: 24, ws_col: 72, ws_xpixel: 0, ws_ypixel: 0 };
    // SAFETY: TIOCSWINSZ reads one winsize from the pointer it is given.
    assert_eq!(unsafe { libc::ioctl(master.as_raw_fd(), libc::TIOCSWINSZ, &ws) }, 0);
    let terminal = std::fs::OpenOptions::new().write(true).open(&path).expect("the terminal side");
    drop(slave);
    let status = buscue()
        .args(["run", "scripts/eeprom_calibration.lua", "--no-trace", "--plain"])
        .env_remove("COLUMNS")
        .stdout(terminal)
        .stderr(std::process::Stdio::null())
        .status()
        .expect("runs");
    assert!(status.success());
    // The run has ended and the last terminal side with it: the master
    // reads what the run wrote, then fails (EIO) instead of waiting.
    // SAFETY: a duplicate of the master's descriptor, owned by the File.
    let mut screen = unsafe { std::fs::File::from_raw_fd(libc::dup(master.as_raw_fd())) };
    let mut bytes = Vec::new();
    let mut buf = [0u8; 4096];
    while let Ok(n @ 1..) = screen.read(&mut buf) {
        bytes.extend_from_slice(&buf[..n]);
    }
    let text = String::from_utf8_lossy(&bytes).replace('\r', "");
    let frames = frame_lines(&text);
    assert!(frames.len() >= 10, "{text}");
    for l in &frames {
        assert!(l.chars().count() <= 72, "{} columns: {l}", l.chars().count());
    }
    assert!(frames.iter().any(|l| l.ends_with("  :27")), "the run's script by line number: {text}");
}
