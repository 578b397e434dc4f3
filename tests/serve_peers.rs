//! `buscue serve` with peers coming and going, and `ports` touching only
//! the ports it is given.

#![cfg(unix)]

mod common;
use common::*;

use std::io::{BufRead, BufReader};
use std::process::{Child, Command};

/// Reads the server's standard error until a line containing `text`;
/// returns every line read.
fn until(err: &mut impl BufRead, text: &str) -> String {
    let mut seen = String::new();
    loop {
        let mut line = String::new();
        let n = err.read_line(&mut line).expect("server stderr");
        assert!(n > 0, "the server ended before saying `{text}`:\n{seen}");
        seen.push_str(&line);
        if line.contains(text) {
            return seen;
        }
    }
}

fn interrupt(child: &Child) {
    let sent = Command::new("kill").args(["-INT", &child.id().to_string()]).status().unwrap();
    assert!(sent.success());
}

#[test]
fn the_next_peer_is_served_and_finds_the_bench_as_the_last_left_it() {
    let (mut child, path) = serve(&[]);
    let mut err = BufReader::new(child.stderr.take().unwrap());
    let adapter = format!("serial:{path}");
    // The first peer writes a byte to the EEPROM's scratch area...
    let first = run_script(
        "bus.write(0x50, {0x07, 0xF0, 0x5C}) bus.wait_ack(0x50)\n",
        &["--adapter", &adapter, "--no-trace", "-q"],
    );
    assert_eq!(code(&first), 0, "{}", stderr(&first));
    until(&mut err, "waiting for the next one");
    // ...and the second reads it back through the same port.
    let second = run_script(
        "check_eq(bus.write_read(0x50, {0x07, 0xF0}, 1), {0x5C}, 'kept by the bench')\n",
        &["--adapter", &adapter, "--no-trace", "-q"],
    );
    assert_eq!(code(&second), 0, "{}", stderr(&second));
    until(&mut err, "waiting for the next one");
    // A probe is a peer too: it leaves the server serving.
    let probe = run(&["ports", "--probe", "--port", &path]);
    assert!(stdout(&probe).contains("answers: native protocol"), "{}", stdout(&probe));
    until(&mut err, "waiting for the next one");
    interrupt(&child);
    let rest = until(&mut err, "serving ended");
    assert!(rest.contains("serving ended: stopped"), "{rest}");
    assert_eq!(child.wait().unwrap().code(), Some(130));
}

#[test]
fn once_ends_with_the_first_peer() {
    let (mut child, path) = serve(&["--once"]);
    let o = run_script("bus.read(0x2B, 1)\n", &["--adapter", &format!("serial:{path}"), "--no-trace", "-q"]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let mut err = BufReader::new(child.stderr.take().unwrap());
    let said = until(&mut err, "serving ended");
    assert!(said.contains("serving ended: the peer closed the port"), "{said}");
    assert_eq!(child.wait().unwrap().code(), Some(0));
}

// A reset starts a new session on the served adapter, not a new count of
// what it served: the summary counts the requests run before it.
#[test]
fn a_reset_does_not_forget_what_was_served() {
    let (mut child, path) = serve(&["--once", "--reset-after", "10"]);
    let o = run_path(
        &root().join("scripts/eeprom_calibration.lua"),
        &["--adapter", &format!("serial:{path}"), "--no-trace", "-q"],
    );
    assert_eq!(code(&o), 4, "the reset ends the run as an adapter failure: {}", stderr(&o));
    let mut err = BufReader::new(child.stderr.take().unwrap());
    let said = until(&mut err, "serving ended");
    let n: u64 = said
        .split("; ")
        .last()
        .and_then(|t| t.split_whitespace().next())
        .and_then(|n| n.parse().ok())
        .unwrap_or_else(|| panic!("a count of requests: {said}"));
    // Ten frames arrived before the reset: the handshake and requests.
    assert!((1..=10).contains(&n), "{said}");
    let _ = child.wait();
}

#[test]
fn ports_with_named_ports_lists_and_probes_only_those() {
    let (mut child, path) = serve(&[]);
    // Named twice, listed (and probed) once.
    let o = run(&["ports", "--probe", "--port", &path, "--port", "/dev/null", "--port", &path]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let lines: Vec<String> = stdout(&o).lines().map(str::to_string).collect();
    assert_eq!(lines.len(), 2, "only the ports named, each once: {lines:?}");
    assert!(lines[0].starts_with(&format!("{path}\t")) && lines[0].contains("answers"), "{lines:?}");
    assert!(lines[1].starts_with("/dev/null\t"), "{lines:?}");
    // The ports the system lists (where it lists any) are left alone.
    let listed = stdout(&run(&["ports"]));
    for system in listed.lines().filter_map(|l| l.split('\t').next()) {
        assert!(!lines.iter().any(|l| l.starts_with(&format!("{system}\t"))), "{system} was touched: {lines:?}");
    }
    let _ = child.kill();
    let _ = child.wait();
}
