//! Text dialects end to end over real pseudo-terminals: `buscue serve
//! --speak dialect:...` emulates the adapter firmware, `buscue run
//! --adapter dialect:...` drives it, and the frames must match an
//! in-process run.

mod common;

use std::path::Path;
use std::process::{Child, Command};
use std::time::Duration;

use serde_json::Value;

const BIN: &str = env!("CARGO_BIN_EXE_buscue");
const PROFILES: &[&str] = &["stepwise", "oneline"];

fn root() -> &'static Path {
    Path::new(env!("CARGO_MANIFEST_DIR"))
}

/// Starts `serve` in `profile`'s dialect, for one peer, and returns it
/// with the device path it printed.
fn serve(profile: &str, extra: &[&str]) -> (Child, String) {
    let speak = format!("dialect:{profile}");
    common::serve(&[&["--speak", speak.as_str(), "--once"], extra].concat())
}

struct Run {
    code: i32,
    records: Vec<Value>,
    stderr: String,
}

fn run(script: &str, adapter: &str) -> Run {
    let out = Command::new(BIN)
        .current_dir(root())
        .args(["run", "--json", "--adapter", adapter, script])
        .output()
        .expect("buscue run starts");
    let records = String::from_utf8_lossy(&out.stdout)
        .lines()
        .map(|l| serde_json::from_str(l).unwrap_or_else(|e| panic!("`{l}` is not a JSON record: {e}")))
        .collect();
    Run { code: out.status.code().unwrap_or(-1), records, stderr: String::from_utf8_lossy(&out.stderr).into_owned() }
}

/// Frames with their times removed: transactions, data and ACK patterns.
fn frames(records: &[Value]) -> Vec<Value> {
    records
        .iter()
        .filter(|r| r["kind"] == "frame")
        .map(|r| {
            let mut f = r.clone();
            let o = f.as_object_mut().expect("a frame is an object");
            o.remove("t_ns");
            let out = o.get_mut("outcome").and_then(Value::as_object_mut).expect("a frame has an outcome");
            out.remove("bus_ns");
            out.remove("measured_ns");
            f
        })
        .collect()
}

fn wait(mut child: Child) -> String {
    for _ in 0..100 {
        if child.try_wait().expect("wait works").is_some() {
            break;
        }
        std::thread::sleep(Duration::from_millis(50));
    }
    let _ = child.kill();
    let out = child.wait_with_output().expect("buscue serve output");
    String::from_utf8_lossy(&out.stderr).into_owned()
}

fn lua_in(dir: &str) -> Vec<String> {
    let mut v: Vec<String> = std::fs::read_dir(root().join(dir))
        .unwrap_or_else(|e| panic!("{dir}/ exists: {e}"))
        .filter_map(|e| e.ok())
        .map(|e| e.path())
        .filter(|p| p.extension().is_some_and(|x| x == "lua"))
        .map(|p| format!("{dir}/{}", p.file_name().unwrap_or_default().to_string_lossy()))
        .collect();
    v.sort();
    v
}

/// The demo scripts, and the failure demos that fail on the bus (the
/// runaway loop only tests the script time limit).
fn scripts() -> Vec<String> {
    let demos = lua_in("scripts");
    assert!(demos.len() >= 4, "the demo scripts are there: {demos:?}");
    let failures: Vec<String> = lua_in("scripts/failures").into_iter().filter(|s| !s.contains("runaway")).collect();
    assert!(failures.len() >= 3, "the failure demos are there: {failures:?}");
    demos.into_iter().chain(failures).collect()
}

#[test]
fn every_demo_script_gives_the_same_frames_through_each_dialect_as_in_process() {
    for script in scripts() {
        let local = run(&script, "sim");
        let expect_code = if script.contains("failures/") { [1, 3] } else { [0, 0] };
        assert!(expect_code.contains(&local.code), "{script} in-process exit {}: {}", local.code, local.stderr);
        let want = frames(&local.records);
        assert!(!want.is_empty(), "{script} puts frames on the bus");
        for profile in PROFILES {
            let (child, path) = serve(profile, &[]);
            let remote = run(&script, &format!("dialect:{profile}@{path}"));
            let served = wait(child);
            if script.contains("battery") {
                // SMBus block reads need a counted read, which dialect
                // version 1 cannot express: a clear adapter error instead.
                assert_eq!(remote.code, 4, "{script} via {profile}: {}", remote.stderr);
                assert!(remote.stderr.contains("counted read"), "{}", remote.stderr);
                continue;
            }
            assert_eq!(remote.code, local.code, "{script} via {profile}: {}", remote.stderr);
            let got = frames(&remote.records);
            assert_eq!(got.len(), want.len(), "{script} via {profile}: frame count");
            for (i, (g, w)) in got.iter().zip(&want).enumerate() {
                assert_eq!(g, w, "{script} via {profile}: frame {i} differs");
            }
            assert!(served.contains("the peer closed the port"), "{profile} server ended cleanly: {served}");
        }
    }
}

#[test]
fn unplugging_mid_run_stops_with_the_adapter_exit_code_and_keeps_the_frames() {
    for profile in PROFILES {
        // Enough lines for a few transactions, far fewer than the script needs.
        let (child, path) = serve(profile, &["--hang-up-after", "40"]);
        let r = run("scripts/climate_bringup.lua", &format!("dialect:{profile}@{path}"));
        let served = wait(child);
        assert!(served.contains("hung up as asked"), "{served}");
        assert_eq!(r.code, 4, "exit code for an adapter/link failure ({profile}): {}", r.stderr);
        assert!(!r.stderr.contains("panicked"), "{}", r.stderr);
        assert!(
            r.stderr.contains("stopped working")
                || r.stderr.contains("closed or was unplugged")
                || r.stderr.contains("no reply"),
            "{}",
            r.stderr
        );
        // Said once: by the call that failed, not again when the adapter closes.
        assert_eq!(r.stderr.matches("error:").count(), 1, "{profile}: {}", r.stderr);
        assert!(!r.stderr.contains("closing the adapter"), "{profile}: {}", r.stderr);
        let f = frames(&r.records);
        assert!(f.len() >= 2, "{profile}: frames before the unplug are logged ({} of them)", f.len());
        let last = f.last().expect("at least one frame");
        assert_eq!(last["outcome"]["fault"]["kind"], "adapter", "{profile}: the last frame is the failed one: {last}");
        assert!(f[..f.len() - 1].iter().all(|x| x["outcome"]["fault"]["kind"] != "adapter"));
        let end = r.records.last().expect("an end record");
        assert_eq!(end["kind"], "end");
        assert_eq!(end["exit"], 4);
    }
}

#[test]
fn a_silent_port_times_out_with_the_command_named() {
    use buscue::adapter::dialect::DialectAdapter;
    use buscue::adapter::dialect_profile::Profile;
    use serialport::SerialPort as _;

    let (_master, slave) = serialport::TTYPort::pair().expect("a pseudo-terminal");
    let path = slave.name().expect("slave path");
    let mut p = Profile::load("stepwise").expect("shipped profile");
    p.serial.timeout = Duration::from_millis(50);
    let e = DialectAdapter::open(p, Path::new(&path)).err().expect("nobody answers");
    let msg = format!("{e:#}");
    assert!(msg.contains("no reply to `QUIET` within 50 ms"), "{msg}");
    assert!(msg.contains("init[0]"), "{msg}");
}

#[test]
fn an_ambiguous_reply_pattern_is_refused_on_load() {
    let dir = tempfile::tempdir().expect("temp dir");
    let bad = dir.path().join("bad.toml");
    let text = std::fs::read_to_string(root().join("adapters/dialect-stepwise.toml")).expect("shipped profile");
    let from = "error = \"E {fault} {us} {text}\"";
    assert!(text.contains(from), "the stepwise profile has its error pattern");
    std::fs::write(&bad, text.replace(from, "error = \"E {fault} {us} {text} {text}\"")).expect("write");
    let line = text.lines().position(|l| l.contains(from)).expect("error line") + 1;
    let r = run("scripts/climate_bringup.lua", &format!("dialect:{}@/dev/null", bad.display()));
    assert_eq!(r.code, 2, "{}", r.stderr);
    assert!(r.stderr.contains(&format!("bad.toml:{line}: key `replies.error`")), "{}", r.stderr);
    assert!(r.stderr.contains("ambiguous"), "{}", r.stderr);
    assert_eq!(r.stderr.matches("error:").count(), 1, "{}", r.stderr);
}

#[test]
fn a_malformed_profile_is_refused_with_file_line_and_key() {
    let dir = tempfile::tempdir().expect("temp dir");
    let bad = dir.path().join("bad.toml");
    let text = std::fs::read_to_string(root().join("adapters/dialect-stepwise.toml")).expect("shipped profile");
    std::fs::write(&bad, text.replace("parity = \"none\"", "parity = \"mark-ish\"")).expect("write");
    let line = text.lines().position(|l| l.contains("parity =")).expect("parity line") + 1;
    let r = run("scripts/climate_bringup.lua", &format!("dialect:{}@/dev/null", bad.display()));
    assert_eq!(r.code, 2, "{}", r.stderr);
    assert!(r.stderr.contains(&format!("bad.toml:{line}: key `serial.parity`")), "{}", r.stderr);
    assert!(r.records.is_empty(), "nothing reaches a bus");
}

#[test]
fn bus_errors_cross_the_dialects_as_the_same_fault() {
    // A sensor that stretches past the adapter's patience: the read phase
    // of the second transaction ends in a clock-stretch timeout.
    let dir = tempfile::tempdir().expect("temp dir");
    let bench = dir.path().join("slow.toml");
    std::fs::write(
        &bench,
        r#"format = "buscue-bench/1"
name = "slow sensor"
stretch_timeout_ms = 1
[[device]]
name = "slow-climate"
model = "climate-sensor"
address = 0x31
busy = "stretch"
temperature_c = { base = 20.0, swing = 0.0, period_s = 60, noise = 0.0, seed = 1 }
humidity_pct = { base = 50.0, swing = 0.0, period_s = 60, noise = 0.0, seed = 2 }
"#,
    )
    .expect("write bench");
    let script = dir.path().join("stretch.lua");
    std::fs::write(&script, "local s = bus.device(0x31, { width = 16 })\ns:set(0x01, 0x0007)\ns:get(0x03)\n")
        .expect("write script");
    let script = script.to_string_lossy().into_owned();
    let bench_arg = bench.to_string_lossy().into_owned();
    let local = run(&script, &format!("sim:{bench_arg}"));
    assert_eq!(local.code, 3, "{}", local.stderr);
    let want = frames(&local.records);
    assert_eq!(want.last().expect("frames")["outcome"]["fault"]["kind"], "stretch-timeout");
    for profile in PROFILES {
        let (child, path) = serve(profile, &["--bench", &format!("sim:{bench_arg}")]);
        let remote = run(&script, &format!("dialect:{profile}@{path}"));
        wait(child);
        assert_eq!(remote.code, 3, "{profile}: {}", remote.stderr);
        assert_eq!(frames(&remote.records), want, "{profile}");
    }
}

#[test]
fn speed_recovery_and_identity_go_through_both_dialects() {
    use buscue::adapter::Adapter;
    use buscue::adapter::dialect::DialectAdapter;
    use buscue::adapter::dialect_profile::Profile;
    use buscue::bus::BusSpeed;
    use buscue::serve::dialect::DialectServer;
    use buscue::serve::{LinkFaults, Peers, ServeEnd, serve as serve_loop};
    use buscue::sim::{Bench, SimAdapter};
    use serialport::SerialPort as _;

    for name in PROFILES {
        let profile = Profile::load(name).expect("shipped profile");
        let (master, slave) = serialport::TTYPort::pair().expect("a pseudo-terminal");
        let path = slave.name().expect("slave path");
        let served = profile.clone();
        let server = std::thread::spawn(move || {
            let bench = Bench::from_str(buscue::sim::DEMO_BENCH, "greenhouse").expect("demo bench");
            let mut server = DialectServer::new(served, SimAdapter::new(bench, false));
            let stop = std::sync::atomic::AtomicBool::new(false);
            let ended = serve_loop(master, Some(slave), &mut server, &LinkFaults::default(), &stop, Peers::One)
                .expect("serving works");
            (ended, server.adapter().speed())
        });
        let mut a = DialectAdapter::open(profile, Path::new(&path)).expect("opens");
        assert_eq!(a.identity().driver, format!("dialect:{name}"));
        assert!(a.identity().description.contains("greenhouse climate node"), "{:?}", a.identity());
        assert_eq!(a.set_speed(BusSpeed::FAST).expect("speed command"), BusSpeed::FAST);
        assert!(a.set_speed(BusSpeed::from_hz(5_000).unwrap()).is_err(), "below the profile's min_speed");
        let r = a.recover().expect("recover command");
        assert!(r.released, "{r:?}");
        let before = a.now();
        a.delay(Duration::from_millis(3));
        assert_eq!(a.now() - before, Duration::from_millis(3), "the adapter keeps time");
        drop(a);
        let (ended, speed) = server.join().expect("server thread");
        assert_eq!(ended, ServeEnd::PeerClosed);
        assert_eq!(speed, BusSpeed::FAST, "{name}: the bench runs at the speed the host set");
    }
}

#[test]
fn link_faults_of_serve_reach_a_dialect_host_too() {
    // A firmware reset mid-line loses that command: the host waits for a
    // reply that never comes and stops with the adapter code.
    let (child, path) = serve("stepwise", &["--reset-after", "10"]);
    let r = run("scripts/climate_bringup.lua", &format!("dialect:stepwise@{path},timeout_ms=200"));
    wait(child);
    assert_eq!(r.code, 4, "{}", r.stderr);
    assert!(r.stderr.contains("no reply to"), "{}", r.stderr);
}

#[test]
fn serve_refuses_an_unknown_protocol_or_profile_before_printing_a_path() {
    for speak in ["morse", "dialect:", "dialect:adapters/no-such-profile.toml"] {
        let out = Command::new(BIN).current_dir(root()).args(["serve", "--speak", speak]).output().expect("runs");
        assert_eq!(out.status.code(), Some(2), "--speak {speak}");
        assert!(out.stdout.is_empty(), "no device path for --speak {speak}");
        let stderr = String::from_utf8_lossy(&out.stderr);
        assert!(stderr.contains("dialect:") || stderr.contains("no-such-profile"), "{stderr}");
    }
}
