//! The station with eight fixtures against one, in one run: each fixture
//! a simulated bench served by `buscue serve` on its own pseudo-terminal
//! (so the serial driver and the link are in the loop), all running the
//! demo end-of-line script (`scripts/station_line.lua`) with a soak step
//! of register reads appended, so the bus work outweighs start-up.
//!
//!   cargo bench --bench station              # 400 soak reads per fixture
//!   BUSCUE_BENCH_N=2000 cargo bench --bench station
//!
//! Reports the wall time of `buscue station` with 1 and with 8 fixtures,
//! their ratio (goal: under 1.5), and the station process's CPU time per
//! fixture (user + system, from wait4's rusage). Every fixture must pass
//! and its report must count every transaction, so a fast wrong run
//! cannot pass.
//!
//! Two links in the same run: the bare pseudo-terminal (answers as fast
//! as the two processes can turn them round, so the host's CPU is all
//! there is to wait for), and the same paced like a 115200-baud UART
//! (`serve --baud 115200`), as a fixture's USB-serial adapter would be.

use std::path::Path;
use std::process::{Child, Command, Stdio};
use std::time::{Duration, Instant};

fn serve(baud: Option<u32>) -> (Child, String) {
    use std::io::{BufRead, BufReader};
    let mut child = Command::new(env!("CARGO_BIN_EXE_buscue"))
        .args(["serve", "--bench", "sim"])
        .args(baud.map(|b| vec!["--baud".to_string(), b.to_string()]).unwrap_or_default())
        .stdout(Stdio::piped())
        .stderr(Stdio::null())
        .spawn()
        .expect("buscue serve starts");
    let mut line = String::new();
    BufReader::new(child.stdout.take().unwrap()).read_line(&mut line).expect("the device path");
    (child, line.trim().to_string())
}

/// Runs the station over `n` served fixtures: wall time and CPU time.
fn station(n: usize, script: &Path, dir: &Path, reads: usize, baud: Option<u32>) -> (Duration, Duration) {
    let served: Vec<_> = (0..n).map(|_| serve(baud)).collect();
    let out = dir.join(format!("out-{n}-{}", baud.unwrap_or(0)));
    let mut cmd = Command::new(env!("CARGO_BIN_EXE_buscue"));
    cmd.current_dir(env!("CARGO_MANIFEST_DIR")).arg("station").arg(script).arg("--out").arg(&out);
    for (i, (_, path)) in served.iter().enumerate() {
        cmd.arg("--fixture").arg(format!("f{i}=serial:{path}"));
    }
    cmd.stdout(Stdio::null()).stderr(Stdio::null());
    let started = Instant::now();
    let child = cmd.spawn().expect("buscue station starts");
    let (status, cpu) = wait_with_cpu(child);
    let wall = started.elapsed();
    for (mut c, _) in served {
        let _ = c.kill();
        let _ = c.wait();
    }
    assert_eq!(status, 0, "every fixture passes");
    let report: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("report.json")).unwrap()).unwrap();
    let fixtures = report["fixtures"].as_array().unwrap();
    assert_eq!(fixtures.len(), n);
    for f in fixtures {
        assert_eq!(f["passed"], true);
        assert_eq!(f["stats"]["transactions"].as_u64(), Some(7 + reads as u64), "every transaction counted");
    }
    (wall, cpu)
}

/// Waits for `child`; its exit code and the CPU time it used (wait4(2)).
fn wait_with_cpu(child: Child) -> (i32, Duration) {
    let mut status = 0;
    // SAFETY: a zeroed rusage is a valid out-parameter; the pid is our child's.
    let mut usage: libc::rusage = unsafe { std::mem::zeroed() };
    let r = unsafe { libc::wait4(child.id() as i32, &mut status, 0, &mut usage) };
    assert_eq!(r, child.id() as i32, "wait4");
    let tv = |t: libc::timeval| Duration::from_secs(t.tv_sec as u64) + Duration::from_micros(t.tv_usec as u64);
    (libc::WEXITSTATUS(status), tv(usage.ru_utime) + tv(usage.ru_stime))
}

fn main() {
    if !std::env::args().any(|a| a == "--bench") {
        return;
    }
    let reads: usize = std::env::var("BUSCUE_BENCH_N").ok().and_then(|v| v.parse().ok()).unwrap_or(400);
    let dir = tempfile::tempdir().unwrap();
    let demo = std::fs::read_to_string(Path::new(env!("CARGO_MANIFEST_DIR")).join("scripts/station_line.lua")).unwrap();
    let script = dir.path().join("soak.lua");
    std::fs::write(
        &script,
        format!("{demo}\nstep(\"soak\", function()\n  for _ = 1, {reads} do light:get(0x02) end\nend)\n"),
    )
    .unwrap();
    for (link, baud) in [("pseudo-terminals", None), ("pseudo-terminals paced at 115200 baud", Some(115_200))] {
        let (one, one_cpu) = station(1, &script, dir.path(), reads, baud);
        let (eight, eight_cpu) = station(8, &script, dir.path(), reads, baud);
        println!("station, {} transactions per fixture over {link} (native protocol):", 7 + reads);
        println!("  1 fixture : wall {:8.1} ms, CPU {:7.1} ms", one.as_secs_f64() * 1e3, one_cpu.as_secs_f64() * 1e3);
        println!(
            "  8 fixtures: wall {:8.1} ms, CPU {:7.1} ms ({:.1} ms per fixture)",
            eight.as_secs_f64() * 1e3,
            eight_cpu.as_secs_f64() * 1e3,
            eight_cpu.as_secs_f64() * 1e3 / 8.0
        );
        println!("  8 / 1 wall time: {:.2} (goal: under 1.5)", eight.as_secs_f64() / one.as_secs_f64());
    }
}
