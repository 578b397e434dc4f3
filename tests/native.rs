//! End-to-end tests of the native serial protocol over real
//! pseudo-terminals: `buscue serve` (or the same server in-process) on
//! one side, the native driver on the other.

#![cfg(unix)]

use std::io::{BufRead, BufReader};
use std::process::{Child, Command, Output, Stdio};
use std::sync::Arc;
use std::sync::atomic::{AtomicBool, Ordering};
use std::time::Duration;

use buscue::adapter::native::{NativeAdapter, NativeError, NativeSettings};
use buscue::adapter::{Adapter, AdapterSpec, OpenOptions};
use buscue::bus::{Address, Operation, Transaction};
use buscue::cli::compose::open_sim;
use buscue::serve::{LinkFaults, Peers, ServeEnd, pty, serve_native};
use serde_json::Value;

const BIN: &str = env!("CARGO_BIN_EXE_buscue");

/// A `buscue serve` child and the device path it printed.
struct Served {
    child: Child,
    path: String,
}

impl Drop for Served {
    fn drop(&mut self) {
        let _ = self.child.kill();
        let _ = self.child.wait();
    }
}

fn serve(extra: &[&str]) -> Served {
    let mut child = Command::new(BIN)
        .arg("serve")
        .args(extra)
        .stdout(Stdio::piped())
        .stderr(Stdio::null())
        .spawn()
        .expect("buscue serve starts");
    let mut line = String::new();
    BufReader::new(child.stdout.take().unwrap()).read_line(&mut line).unwrap();
    let path = line.trim().to_string();
    assert!(path.starts_with("/dev/"), "first line is the device path, got {line:?}");
    Served { child, path }
}

fn run(script: &str, adapter: &str, extra: &[&str]) -> Output {
    Command::new(BIN)
        .args(["run", script, "--json", "--adapter", adapter])
        .args(extra)
        .output()
        .expect("buscue run starts")
}

/// JSON records with the measured timing removed ("timing aside"). The
/// modelled bus time stays: the served board reports it through the
/// side channel, so it must match too.
fn records(out: &[u8]) -> Vec<Value> {
    String::from_utf8_lossy(out)
        .lines()
        .map(|l| {
            let mut v: Value = serde_json::from_str(l).unwrap_or_else(|e| panic!("not JSON ({e}): {l}"));
            let o = v.as_object_mut().unwrap();
            o.remove("t_ns");
            // Only a serial link has a link account in the end record.
            o.remove("link");
            if let Some(out) = o.get_mut("outcome").and_then(Value::as_object_mut) {
                out.remove("measured_ns");
            }
            v
        })
        .collect()
}

#[test]
fn demo_scripts_give_the_same_frames_in_process_and_over_a_pty() {
    for script in [
        "scripts/climate_bringup.lua",
        "scripts/eeprom_calibration.lua",
        "scripts/valve_expander.lua",
        "scripts/vent_retry.lua",
        "scripts/light_batch.lua",
    ] {
        let local = run(script, "sim", &[]);
        assert_eq!(local.status.code(), Some(0), "{script} in-process: {}", String::from_utf8_lossy(&local.stderr));
        let served = serve(&[]);
        let remote = run(script, &format!("serial:{}", served.path), &[]);
        assert_eq!(remote.status.code(), Some(0), "{script} over PTY: {}", String::from_utf8_lossy(&remote.stderr));
        let (a, b) = (records(&local.stdout), records(&remote.stdout));
        assert!(a.iter().filter(|r| r["kind"] == "frame").count() > 3, "{script} puts frames on the bus");
        assert_eq!(a.len(), b.len(), "{script}: record counts");
        for (i, (x, y)) in a.iter().zip(&b).enumerate() {
            assert_eq!(x, y, "{script}: record {i} differs");
        }
    }
}

#[test]
fn served_frames_carry_measured_time() {
    let served = serve(&[]);
    let out = run("scripts/valve_expander.lua", &format!("serial:{}", served.path), &[]);
    assert_eq!(out.status.code(), Some(0));
    let text = String::from_utf8_lossy(&out.stdout);
    let frame: Value = serde_json::from_str(text.lines().find(|l| l.contains("\"frame\"")).unwrap()).unwrap();
    assert!(frame["outcome"]["measured_ns"].is_u64(), "the native adapter reports its measured time: {frame}");
    assert!(frame["outcome"]["bus_ns"].as_u64().unwrap() > 0);
}

#[test]
fn smbus_block_reads_are_refused_clearly_over_the_native_protocol() {
    // Protocol version 1 carries fixed-length reads only (its adapter side
    // runs on embedded-hal); a Block Read needs the count byte first.
    let served = serve(&[]);
    let out = run("scripts/battery_telemetry.lua", &format!("serial:{}", served.path), &[]);
    assert_eq!(out.status.code(), Some(4));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("counted read"), "{err}");
    let frames: Vec<Value> = records(&out.stdout).into_iter().filter(|r| r["kind"] == "frame").collect();
    assert_eq!(frames.len(), 7, "six Read Word/Byte exchanges, then the refused Block Read");
    assert!(frames[..6].iter().all(|f| f["outcome"]["fault"].is_null()));
    assert_eq!(frames[6]["outcome"]["fault"]["kind"], "adapter");
}

/// A served bench in this process, so the test can look at the board.
fn serve_in_process(faults: LinkFaults) -> (String, Arc<AtomicBool>, std::thread::JoinHandle<(ServeEnd, u64, u64)>) {
    let (master, slave, path) = pty().unwrap();
    let stop = Arc::new(AtomicBool::new(false));
    let s = stop.clone();
    let h = std::thread::spawn(move || {
        // Device models are not Send: the bench is built on its thread.
        let sim = open_sim(&AdapterSpec::DemoBench, &OpenOptions::default()).unwrap();
        let (end, server) = serve_native(sim, master, Some(slave), &faults, &s, Peers::One).unwrap();
        let light = server.board.adapter().bus().executions("canopy-light").unwrap();
        (end, light, server.bridge_stats().dropped)
    });
    (path, stop, h)
}

/// Transactions per lossy-link case: a few thousand so `cargo test` stays
/// quick on a small machine; `BUSCUE_LOSSY_N=10000` (or more) for the
/// full-size run.
fn lossy_n() -> u32 {
    std::env::var("BUSCUE_LOSSY_N").ok().and_then(|v| v.parse().ok()).unwrap_or(2000).max(2)
}

/// Runs write/read pairs at the defaults (batching and pipelining on)
/// through a link with the given faults: every transaction completes,
/// runs exactly once on the board, and every read returns what was
/// written. Returns the smallest batch the driver used and its limit.
fn exactly_once_through(lose: f64, flip: f64, seed: u64) -> (usize, usize) {
    let faults = LinkFaults { drop: lose, flip, seed, ..LinkFaults::default() };
    let (path, stop, h) = serve_in_process(faults);
    let mut a = NativeAdapter::open(&path, NativeSettings::default()).expect("handshake through a lossy link");
    let light = Address::Seven(0x2B);
    // At 5 % the link moves about a dozen transactions a second: a tenth
    // of the count keeps the test short.
    let n = if lose + flip > 0.02 { lossy_n() / 20 } else { lossy_n() / 2 }.max(20);
    let (mut done, mut smallest) = (0u64, usize::MAX);
    let max = a.limits().0;
    // Script-sized batches of 40, as a Lua `bus.batch` loop sends them.
    for chunk in 0..n.div_ceil(20) {
        let mut txs = Vec::new();
        for k in 0..20u32.min(n - chunk * 20) {
            let v = (chunk * 20 + k) as u16;
            let [lo, hi] = v.to_le_bytes();
            // CONTROL (0x01) of the light sensor: 16-bit, little-endian.
            txs.push(Transaction::new(light, vec![Operation::Write(vec![0x01, lo, hi])]));
            txs.push(Transaction::new(light, vec![Operation::Write(vec![0x01]), Operation::Read(2)]));
        }
        let outs = a.execute_batch(&txs);
        assert_eq!(outs.len(), txs.len());
        for (k, pair) in outs.chunks(2).enumerate() {
            assert!(pair[0].is_ok() && pair[1].is_ok(), "chunk {chunk} pair {k}: {pair:?}");
            let v = (chunk * 20 + k as u32) as u16;
            assert_eq!(pair[1].read_bytes(), v.to_le_bytes(), "read back what was written");
        }
        done += txs.len() as u64;
        // After the slow start: the size the loss allows.
        if chunk >= 2 {
            smallest = smallest.min(a.batch_in_use());
        }
    }
    let (repeats, timeouts, probes) = (a.stats.repeats, a.stats.timeouts, a.stats.status_probes);
    drop(a);
    stop.store(true, Ordering::Relaxed);
    let (_, executions, dropped) = h.join().unwrap();
    assert_eq!(done, 2 * n as u64);
    assert_eq!(executions, done, "every transaction ran exactly once on the board");
    assert!(repeats > 0, "the faults did hit the link ({repeats} repeats, {timeouts} on timeout, {dropped} drops)");
    assert!(probes > 0, "a noisy line is probed");
    (smallest, max)
}

// The served adapter keeps requests that arrive after a lost one
// (selective repeat, flag REORDER in adapters/PROTOCOL.md section 3) and
// the host says so; the lossy tests below then run through it and count
// executions at the board.
#[test]
fn the_served_adapter_keeps_early_requests() {
    let (path, stop, h) = serve_in_process(LinkFaults::default());
    let a = NativeAdapter::open(&path, NativeSettings::default()).expect("handshake");
    assert!(a.identity().description.contains("keeps early requests"), "{}", a.identity().description);
    drop(a);
    stop.store(true, Ordering::Relaxed);
    h.join().unwrap();
}

#[test]
fn one_percent_flipped_bits_lose_nothing_at_the_defaults() {
    exactly_once_through(0.0, 0.01, 11);
}

#[test]
fn one_percent_dropped_bytes_lose_nothing_at_the_defaults() {
    exactly_once_through(0.01, 0.0, 12);
}

// At 5 % a 32-transaction request (about 200 bytes out, 300 back) almost
// never crosses whole (0.95^500 < 1e-11): the batch must fall.
#[test]
fn five_percent_flipped_bits_lose_nothing_and_shrink_the_batch() {
    let (smallest, max) = exactly_once_through(0.0, 0.05, 13);
    assert!(smallest < max, "the batch in use fell under loss ({smallest} of {max})");
}

#[test]
fn five_percent_dropped_bytes_lose_nothing_at_the_defaults() {
    exactly_once_through(0.05, 0.0, 14);
}

// A dead line (a burst of loss) makes every try of the requests in flight
// fail, so the measured loss per byte rises and the batch falls (to two
// or so after a 300 ms burst: a hundred or more failed tries of the
// stalled requests against the 64 the estimate remembers); once the line
// is clean again the estimate decays (1/64 per try) and the batch
// returns to the adapter's limit. The window stays at its limit.
#[test]
fn frames_shrink_in_a_loss_burst_and_grow_back_on_a_clean_link() {
    let faults = LinkFaults { stall: Some((200, Duration::from_millis(300))), seed: 5, ..LinkFaults::default() };
    let (path, stop, h) = serve_in_process(faults);
    let mut a = NativeAdapter::open(&path, NativeSettings::default()).unwrap();
    let (max_batch, max_window) = a.limits();
    let light = Address::Seven(0x2B);
    let read = Transaction::new(light, vec![Operation::Write(vec![0x01]), Operation::Read(2)]);
    let mut smallest = max_batch;
    let mut rounds = 0;
    // Until some rounds past the frame the line dies after (the size
    // follows at the start of the next round), and back at the limits.
    let mut past = None;
    while rounds < 2000
        && (past.is_none_or(|r| rounds < r + 10) || a.batch_in_use() < max_batch || a.window_in_use() < max_window)
    {
        if past.is_none() && a.link_counters().unwrap().frames_sent > 300 {
            past = Some(rounds);
        }
        let outs = a.execute_batch(&vec![read.clone(); 40]);
        assert!(outs.iter().all(|o| o.is_ok()), "round {rounds}");
        smallest = smallest.min(a.batch_in_use());
        rounds += 1;
    }
    let timeouts = a.stats.timeouts;
    assert!(smallest < max_batch, "the burst cut the batch ({smallest} of {max_batch}, {timeouts} timeouts)");
    assert_eq!((a.batch_in_use(), a.window_in_use()), (max_batch, max_window), "back at the limits");
    drop(a);
    stop.store(true, Ordering::Relaxed);
    h.join().unwrap();
}

/// `buscue serve` with a line that goes dead after a few frames, and a
/// run of many transactions through it; returns the run and how long it
/// took.
fn run_through_a_dead_line(stall_ms: &str, silence_ms: &str, trace: &std::path::Path) -> (Output, Duration) {
    let served = serve(&["--stall-after", "20", "--stall-ms", stall_ms]);
    let started = std::time::Instant::now();
    let out = Command::new(BIN)
        .args(["run", "scripts/climate_bringup.lua", "--set", "samples=30", "--trace"])
        .arg(trace)
        .args(["--adapter", &format!("serial:{},silence_ms={silence_ms}", served.path)])
        .output()
        .unwrap();
    (out, started.elapsed())
}

fn end_record(trace: &std::path::Path) -> Value {
    let text = std::fs::read_to_string(trace).unwrap();
    serde_json::from_str(text.lines().last().unwrap()).unwrap()
}

// The line dies for longer than the silence limit: the run fails with the
// adapter code once the limit has passed (never sooner), keeps its trace,
// and the end record carries the link's account (trace 1.2).
#[test]
fn a_link_silent_past_the_limit_fails_with_exit_4_and_keeps_the_trace() {
    let dir = tempfile::tempdir().unwrap();
    let trace = dir.path().join("dead.jsonl");
    let (out, took) = run_through_a_dead_line("60000", "700", &trace);
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(4), "{stderr}");
    assert!(stderr.contains("no answer from the adapter") && stderr.contains("silence_ms"), "{stderr}");
    assert!(took >= Duration::from_millis(700), "gave up before the silence limit: {took:?}");
    // Silence + one RTO (at most the 100 ms ceiling) is the rule; the
    // margin here only catches a run that hangs instead.
    assert!(took < Duration::from_secs(10), "{took:?}");
    let end = end_record(&trace);
    assert_eq!((end["kind"].as_str(), end["exit"].as_u64()), (Some("end"), Some(4)));
    assert!(end["link"]["timeouts"].as_u64().unwrap() > 0, "{end}");
    let floor = buscue::adapter::rto::RTO_FLOOR.as_nanos() as u64;
    assert!(end["link"]["rto_ns"].as_u64().unwrap() >= floor, "never below the RTO floor: {end}");
    let frames = std::fs::read_to_string(&trace).unwrap().lines().filter(|l| l.contains("\"kind\":\"frame\"")).count();
    assert!(frames >= 10, "what was done before the line died is kept ({frames} frames)");
}

// A dead line shorter than the silence limit is a pause, not a failure.
#[test]
fn a_link_that_stalls_for_less_than_the_limit_recovers() {
    let dir = tempfile::tempdir().unwrap();
    let trace = dir.path().join("stall.jsonl");
    let (out, _) = run_through_a_dead_line("400", "3000", &trace);
    assert_eq!(out.status.code(), Some(0), "{}", String::from_utf8_lossy(&out.stderr));
    let end = end_record(&trace);
    assert_eq!(end["exit"].as_u64(), Some(0));
    assert!(end["link"]["retransmissions"].as_u64().unwrap() > 0, "the stall cost resends: {end}");
}

#[test]
fn hang_up_mid_run_stops_with_the_adapter_code_and_keeps_the_log() {
    let served = serve(&["--hang-up-after", "12"]);
    let out = run("scripts/climate_bringup.lua", &format!("serial:{}", served.path), &[]);
    assert_eq!(out.status.code(), Some(4), "exit code 4: adapter/link failure");
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(stderr.contains("stopped working"), "a clear error: {stderr}");
    assert!(!stderr.contains("panicked"), "{stderr}");
    let recs = records(&out.stdout);
    let good = recs.iter().filter(|r| r["kind"] == "frame" && r["outcome"].get("fault").is_none()).count();
    assert!(good >= 8, "the frames done before the hang-up are logged ({good})");
    let end = recs.last().unwrap();
    assert_eq!((end["kind"].as_str(), end["exit"].as_u64()), (Some("end"), Some(4)));
}

#[test]
fn killing_the_server_mid_run_is_a_clear_link_error() {
    let mut served = serve(&["--realtime"]);
    let child = Command::new(BIN)
        .args(["run", "scripts/climate_bringup.lua", "--json", "--set", "samples=1000"])
        .args(["--adapter", &format!("serial:{}", served.path)])
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    std::thread::sleep(Duration::from_millis(600));
    served.child.kill().unwrap();
    let out = child.wait_with_output().unwrap();
    assert_eq!(out.status.code(), Some(4), "{}", String::from_utf8_lossy(&out.stderr));
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(stderr.contains("stopped working") && !stderr.contains("panicked"), "{stderr}");
    assert!(records(&out.stdout).iter().any(|r| r["kind"] == "frame"), "frames so far are logged");
}

#[test]
fn adapter_reset_mid_run_is_reported() {
    let served = serve(&["--reset-after", "6"]);
    let out = run("scripts/climate_bringup.lua", &format!("serial:{}", served.path), &[]);
    assert_eq!(out.status.code(), Some(4));
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(stderr.contains("was reset mid-run"), "{stderr}");
}

#[test]
fn a_port_nobody_answers_on_fails_the_handshake() {
    let (_master, _slave, path) = pty().unwrap();
    let settings = NativeSettings {
        timeout: Duration::from_millis(50),
        silence: Duration::from_millis(400),
        ..NativeSettings::default()
    };
    let e = NativeAdapter::open(&path, settings).err().expect("no adapter there");
    assert!(e.to_string().contains("no answer to the native handshake"), "{e}");
    let out = run("scripts/valve_expander.lua", &format!("serial:{path},silence_ms=400"), &[]);
    assert_eq!(out.status.code(), Some(4), "an unreachable adapter is the adapter/link exit code");
}

// An adapter that answers every request with a gap notice and never with
// a reply: frames keep coming, none answers anything. The link fails on
// the silence limit, counted from the last new answer (the handshake's),
// instead of waiting for ever on a line that only repeats itself.
/// A scripted adapter on a pseudo-terminal, for what the served one never
/// does on its own. It answers `HELLO` (session 0x5EED, `caps`), first
/// sending `garbage` corrupt frames (a noisy line); every later request
/// goes to `answer`, which returns the frames to send back. The thread
/// ends with the count of requests `answer` saw.
fn fake_adapter<F>(
    caps: buscue_bridge::wire::Caps,
    garbage: usize,
    mut answer: F,
) -> (String, Arc<AtomicBool>, std::thread::JoinHandle<u64>)
where
    F: FnMut(buscue_bridge::wire::Header, &[u8]) -> Vec<(buscue_bridge::wire::Header, Vec<u8>)> + Send + 'static,
{
    use buscue_bridge::cobs::Decoder;
    use buscue_bridge::wire::{self, Header, Writer, kind};
    use std::io::{Read, Write};
    let (mut master, slave, path) = pty().unwrap();
    let stop = Arc::new(AtomicBool::new(false));
    let done = stop.clone();
    let fake = std::thread::spawn(move || {
        let _keep = slave;
        let mut d = Decoder::<256>::new();
        let mut buf = [0u8; 256];
        let (mut seen, mut out) = (0u64, Vec::new());
        serialport::SerialPort::set_timeout(&mut master, Duration::from_millis(50)).unwrap();
        while !done.load(Ordering::Relaxed) {
            let n = master.read(&mut buf).unwrap_or(0);
            for &b in &buf[..n] {
                let Some(Ok(f)) = d.push(b) else { continue };
                let Ok((h, body)) = wire::parse_frame(f) else { continue };
                out.clear();
                let replies = if h.kind == kind::HELLO {
                    // A COBS block that promises more bytes than come: dropped as corrupt.
                    for _ in 0..garbage {
                        out.extend_from_slice(&[0, 0x40, 0x11, 0x22, 0]);
                    }
                    let mut hello = [0u8; 8 + wire::CAPS_LEN];
                    let mut w = Writer::new(&mut hello);
                    w.u64(0);
                    caps.write(&mut w);
                    let len = w.len();
                    let reply =
                        Header { version: wire::VERSION, kind: kind::HELLO | kind::REPLY, seq: h.seq, session: 0x5EED };
                    vec![(reply, hello[..len].to_vec())]
                } else {
                    seen += 1;
                    answer(h, body)
                };
                for (reply, body) in replies {
                    out.push(0);
                    let Ok(()) = wire::emit_frame(reply, &body, |p: &[u8]| {
                        out.extend_from_slice(p);
                        Ok::<(), std::convert::Infallible>(())
                    });
                }
                if master.write_all(&out).is_err() {
                    return seen;
                }
            }
        }
        seen
    });
    (path, stop, fake)
}

fn fake_caps() -> buscue_bridge::wire::Caps {
    buscue_bridge::wire::Caps {
        max_frame: 256,
        max_bytes_per_op: 64,
        max_ops_per_tx: 4,
        max_tx_per_request: 8,
        window: 4,
        flags: 0,
        min_speed_hz: 10_000,
        max_speed_hz: 400_000,
        speed_hz: 100_000,
        stretch_timeout_us: 1000,
    }
}

#[test]
fn an_adapter_that_only_repeats_itself_fails_on_the_silence_limit() {
    use buscue_bridge::wire::{Header, VERSION, kind};
    // "Still waiting for a number before this one": never true, never answered.
    let (path, stop, fake) = fake_adapter(fake_caps(), 0, |h, _| {
        let [a, b] = h.seq.to_le_bytes();
        vec![(Header { version: VERSION, kind: kind::GAP, seq: h.seq.wrapping_sub(1), session: h.session }, vec![a, b])]
    });
    let settings = NativeSettings { silence: Duration::from_millis(500), ..NativeSettings::default() };
    let mut a = NativeAdapter::open(&path, settings).expect("the handshake is answered");
    let started = std::time::Instant::now();
    let read = Transaction::new(Address::Seven(0x2B), vec![Operation::Write(vec![0x01]), Operation::Read(2)]);
    let out = a.execute(&read);
    let took = started.elapsed();
    stop.store(true, Ordering::Relaxed);
    let detail = format!("{:?}", out.fault);
    assert!(detail.contains("no answer from the adapter") && detail.contains("silence_ms"), "{detail}");
    assert!(took >= Duration::from_millis(500), "gave up before the silence limit: {took:?}");
    // The margin only catches a run that waits on instead.
    assert!(took < Duration::from_secs(10), "{took:?}");
    assert!(a.stats.gaps > 0, "the adapter kept talking: {:?}", a.stats);
    drop(a);
    assert!(fake.join().unwrap() > 0);
}

// A GAP that names the very request it answers as the one expected (an
// adapter that never takes it) calls for an immediate resend every time:
// frames never stop, so the silence limit must be checked as frames
// arrive, not only when a wait runs out.
#[test]
fn an_adapter_that_always_wants_the_same_request_fails_on_the_silence_limit() {
    use buscue_bridge::wire::{Header, VERSION, kind};
    let (path, stop, fake) = fake_adapter(fake_caps(), 0, |h, _| {
        let [a, b] = h.seq.to_le_bytes();
        vec![(Header { version: VERSION, kind: kind::GAP, seq: h.seq, session: h.session }, vec![a, b])]
    });
    let settings = NativeSettings { silence: Duration::from_millis(300), ..NativeSettings::default() };
    let mut a = NativeAdapter::open(&path, settings).expect("the handshake is answered");
    let started = std::time::Instant::now();
    let out = a.execute(&Transaction::new(Address::Seven(0x2B), vec![Operation::Write(vec![0x01, 0x02])]));
    let took = started.elapsed();
    stop.store(true, Ordering::Relaxed);
    let detail = format!("{:?}", out.fault);
    assert!(detail.contains("no answer from the adapter") && detail.contains("silence_ms"), "{detail}");
    // The margin only catches a run that goes on instead.
    assert!(took < Duration::from_secs(10), "{took:?}");
    assert!(a.stats.fast_resends > 0, "the notices did call for resends: {:?}", a.stats);
    drop(a);
    fake.join().unwrap();
}

/// Runs one write through a fake adapter that loses the first copy of
/// the request and otherwise follows PROTOCOL.md section 3 (no flags: a
/// request ahead of the expected one is dropped and answered with a
/// 2-byte `GAP`); the line shows `garbage` corrupt frames before the
/// handshake's answer. At 2400 baud (assumed, a pty ignores it) the timer
/// waits about a third of a second. Returns the host's counters and how
/// often the fake ran the request.
fn one_write_with_its_first_copy_lost(garbage: usize) -> (buscue::adapter::native::NativeStats, u64) {
    use buscue_bridge::wire::{Header, TX_REPORT_LEN, TxReport, VERSION, kind};
    let runs = Arc::new(std::sync::atomic::AtomicU64::new(0));
    let counted = runs.clone();
    let (mut expected, mut lost, mut cache) = (None::<u16>, false, None);
    let (path, stop, fake) = fake_adapter(fake_caps(), garbage, move |h, _| {
        let e = *expected.get_or_insert(h.seq);
        let ahead = h.seq.wrapping_sub(e) as i16;
        if ahead > 0 {
            let [a, b] = h.seq.to_le_bytes();
            return vec![(Header { version: VERSION, kind: kind::GAP, seq: e, session: h.session }, vec![a, b])];
        }
        if ahead < 0 {
            return cache.iter().filter(|(r, _): &&(Header, Vec<u8>)| r.seq == h.seq).cloned().collect();
        }
        if !lost {
            lost = true;
            return Vec::new();
        }
        counted.fetch_add(1, Ordering::Relaxed);
        let mut body = vec![0u8; 8 + TX_REPORT_LEN];
        let mut report = [0u8; TX_REPORT_LEN];
        TxReport::OK.write(&mut report);
        body[8..].copy_from_slice(&report);
        let reply = (Header { version: VERSION, kind: h.kind | kind::REPLY, seq: h.seq, session: h.session }, body);
        cache = Some(reply.clone());
        expected = Some(e.wrapping_add(1));
        vec![reply]
    });
    let settings = NativeSettings { baud: 2400, ..NativeSettings::default() };
    let mut a = NativeAdapter::open(&path, settings).expect("the handshake is answered");
    let out = a.execute(&Transaction::new(Address::Seven(0x2B), vec![Operation::Write(vec![0x01, 0x02])]));
    assert!(out.is_ok(), "{out:?}");
    let stats = a.stats;
    drop(a);
    stop.store(true, Ordering::Relaxed);
    fake.join().unwrap();
    (stats, runs.load(Ordering::Relaxed))
}

// On a noisy line (a corrupt frame came before), the request is followed
// by a status probe numbered far ahead; the adapter drops the probe and
// answers with a GAP naming the request it still expects, so the lost
// request goes again at once, not when its timer runs out.
#[test]
fn on_a_noisy_line_a_status_probe_repairs_a_loss_before_the_timer() {
    let (stats, runs) = one_write_with_its_first_copy_lost(1);
    assert_eq!(runs, 1, "ran exactly once: {stats:?}");
    assert!(stats.status_probes >= 1 && stats.status_answers >= 1, "{stats:?}");
    assert_eq!(stats.timeouts, 0, "repaired by the probe's answer, not by a timer: {stats:?}");
    assert!(stats.fast_resends >= 1, "{stats:?}");
}

// On a clean line the same loss waits for the timer: no probes.
#[test]
fn on_a_clean_line_nothing_is_probed_and_the_timer_repairs_a_loss() {
    let (stats, runs) = one_write_with_its_first_copy_lost(0);
    assert_eq!(runs, 1, "ran exactly once: {stats:?}");
    assert_eq!((stats.status_probes, stats.timeouts), (0, 1), "{stats:?}");
}

#[test]
fn a_wrong_protocol_version_is_named() {
    use buscue_bridge::cobs::Decoder;
    use buscue_bridge::wire::{self, Header, kind, refusal};
    use std::io::{Read, Write};
    let (mut master, slave, path) = pty().unwrap();
    // A fake adapter of a future protocol version: it refuses every frame.
    let fake = std::thread::spawn(move || {
        let _keep = slave;
        let mut d = Decoder::<256>::new();
        let mut buf = [0u8; 256];
        serialport::SerialPort::set_timeout(&mut master, Duration::from_secs(3)).unwrap();
        let n = master.read(&mut buf).unwrap_or(0);
        for &b in &buf[..n] {
            if let Some(Ok(f)) = d.push(b) {
                let (h, _) = wire::parse_frame(f).unwrap();
                let reply = Header { version: 2, kind: kind::REFUSED, seq: h.seq, session: 0 };
                let mut out = Vec::new();
                let Ok(()) = wire::emit_frame(reply, &[refusal::VERSION, 2], |p: &[u8]| {
                    out.extend_from_slice(p);
                    Ok::<(), std::convert::Infallible>(())
                });
                master.write_all(&out).unwrap();
                break;
            }
        }
        std::thread::sleep(Duration::from_millis(300));
    });
    let e = NativeAdapter::open(&path, NativeSettings::default()).err().expect("refused");
    assert!(matches!(e, NativeError::Version { theirs: 2, .. }), "{e}");
    assert!(e.to_string().contains("speaks native protocol version 2"), "{e}");
    fake.join().unwrap();
}

#[test]
fn control_requests_reach_the_served_board() {
    let (path, stop, h) = serve_in_process(LinkFaults::default());
    let mut a = NativeAdapter::open(&path, NativeSettings::default()).unwrap();
    assert_eq!(a.identity().driver, "native");
    assert!(a.capabilities().ten_bit && a.capabilities().recovery);
    assert_eq!(a.set_speed("400k".parse().unwrap()).unwrap().hz(), 400_000);
    assert!(a.set_speed("5M".parse().unwrap()).is_err(), "the bench clocks at most 1 MHz");
    let t0 = a.now();
    a.delay(Duration::from_millis(250));
    assert!(a.now() - t0 >= Duration::from_millis(250), "a delay runs on the adapter's clock");
    let levels = a.line_levels().unwrap().unwrap();
    assert!(levels.sda && levels.scl, "an idle bus reads high");
    assert_eq!(a.recover().unwrap().pulses, 0, "a free bus needs no pulses");
    let txs: Vec<Transaction> = (0..40)
        .map(|_| Transaction::new(Address::Seven(0x2B), vec![Operation::Write(vec![0x00]), Operation::Read(2)]))
        .collect();
    // The sizes start small and grow with each clean reply (slow start).
    // Twenty batches reach the limits on an idle machine; on a busy one a
    // reply can come after the timer (a loss as far as the link can tell),
    // which halves the batch and costs more clean replies to grow back, so
    // the bound here is generous and the growth, not its speed, is tested.
    let mut rounds = 0;
    while (a.batch_in_use(), a.window_in_use()) != a.limits() && rounds < 2000 {
        assert!(a.execute_batch(&txs).iter().all(|o| o.read_bytes() == [0x5A, 0x1C]));
        rounds += 1;
    }
    assert_eq!(
        (a.batch_in_use(), a.window_in_use()),
        a.limits(),
        "a clean link reaches the limits ({rounds} batches, {} timeouts)",
        a.stats.timeouts
    );
    let before = a.stats.requests;
    assert!(a.execute_batch(&txs).iter().all(|o| o.read_bytes() == [0x5A, 0x1C]));
    assert_eq!(a.stats.requests - before, 2, "40 transactions travel in two requests of at most 32");
    let nack = a.execute(&Transaction::new(Address::Seven(0x13), vec![Operation::Write(vec![1])]));
    assert!(nack.fault.is_some_and(|f| f.is_nack()), "nobody at 0x13");
    drop(a);
    stop.store(true, Ordering::Relaxed);
    let (end, _, _) = h.join().unwrap();
    assert!(matches!(end, ServeEnd::Stopped | ServeEnd::PeerClosed));
}

fn script(text: &str) -> tempfile::NamedTempFile {
    let mut f = tempfile::Builder::new().suffix(".lua").tempfile().unwrap();
    std::io::Write::write_all(&mut f, text.as_bytes()).unwrap();
    f
}

#[test]
fn a_failing_batch_block_sends_nothing_and_a_stale_queue_is_refused() {
    let f = script("bus.batch(function(b) b:write(0x2B, {1, 2, 3}); error('changed my mind') end)\n");
    let out = run(f.path().to_str().unwrap(), "sim", &[]);
    assert_eq!(out.status.code(), Some(2));
    assert!(!records(&out.stdout).iter().any(|r| r["kind"] == "frame"), "nothing reached the bus");
    assert!(String::from_utf8_lossy(&out.stderr).contains("changed my mind"));

    let f = script("local q\nbus.batch(function(b) q = b end)\nq:write(0x2B, {1})\n");
    let out = run(f.path().to_str().unwrap(), "sim", &[]);
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(2));
    assert!(stderr.contains("already been sent") && stderr.contains(":3:"), "names the script line: {stderr}");
}

/// Runs a script that keeps asking the adapter for something outside any
/// transaction, against a served board that hangs up after a few frames,
/// and checks the stop: the adapter/link code, the port's error at the line.
fn link_lost_during(call: &str) {
    let served = serve(&["--hang-up-after", "4"]);
    let dir = tempfile::tempdir().unwrap();
    let script = dir.path().join("control.lua");
    std::fs::write(&script, format!("for i = 1, 100 do\n  {call}\nend\n")).unwrap();
    let out = run(script.to_str().unwrap(), &format!("serial:{}", served.path), &["--no-trace"]);
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(4), "{call}: adapter/link failure, not a script error: {stderr}");
    assert!(stderr.contains("stopped working") && stderr.contains("control.lua:2"), "{call}: {stderr}");
}

#[test]
fn a_link_lost_during_bus_speed_is_the_adapter_exit_code() {
    link_lost_during("bus.speed(100000)");
}

#[test]
fn a_link_lost_during_bus_recover_is_the_adapter_exit_code() {
    link_lost_during("bus.recover()");
}

#[test]
fn the_summary_counts_the_native_link() {
    let served = serve(&[]);
    let out = Command::new(BIN)
        .args(["run", "scripts/valve_expander.lua", "--no-trace", "--colour", "never"])
        .args(["--adapter", &format!("serial:{}", served.path)])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(0));
    let stderr = String::from_utf8_lossy(&out.stderr);
    let line = stderr.lines().find(|l| l.starts_with("link: ")).unwrap_or_else(|| panic!("a link line: {stderr}"));
    // "link: S frames sent, R received, D dropped as damaged, N retransmissions
    //  (T on timeout, F fast; G gap notices, P status probes); Q requests, loss ~L%, RTO X ms,
    //  batch B/BM, window W/WM"
    let head = line.split(" (").next().unwrap();
    let n: Vec<u64> = head.split(|c: char| !c.is_ascii_digit()).filter_map(|w| w.parse().ok()).collect();
    assert_eq!(n.len(), 4, "{line}");
    // The script's 6 transactions plus the handshake went out, each answered;
    // a clean pseudo-terminal damages nothing and needs no resend.
    assert!(n[0] >= 7 && n[1] >= 7, "{line}");
    assert_eq!(n[2], 0, "{line}");
    assert!(line.contains("0 fast; 0 gap notices, 0 status probes"), "nothing was lost on the way: {line}");
    assert!(line.contains("RTO ") && line.contains("window "), "{line}");
    assert_eq!(n[2], 0, "{line}");
}
