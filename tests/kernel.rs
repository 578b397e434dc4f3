//! The kernel adapter against a real Linux kernel: a guest booted under
//! QEMU (software emulation) with the stock i2c-dev and i2c-stub modules
//! runs the statically linked buscue, and this test reads what it printed
//! on the serial console.
//!
//! Not part of plain `cargo test` (it needs the kit of
//! `tests/kernel/kit.sh`: a kernel, QEMU and busybox unpacked from the
//! system's package archive). `.ci/run` builds the kit and runs
//!
//! ```text
//! cargo test --test kernel -- --ignored
//! ```
//!
//! which fails, never skips, when the kit is missing. With
//! `BUSCUE_KERNEL_BENCH=1` the guest runs the benchmark of BENCHMARKS.md
//! instead and the test prints its lines.
//!
//! i2c-stub advertises only SMBus (its I2C_RDWR answers EOPNOTSUPP), so the
//! guest covers the SMBus path and the refusal of other shapes; the
//! I2C_RDWR path is covered by the unit tests of `adapter::kernel_map`.

use std::io::{BufRead, BufReader};
use std::path::PathBuf;
use std::process::{Command, Stdio};
use std::sync::mpsc;
use std::time::Duration;

fn kit() -> PathBuf {
    let kit = std::env::var_os("BUSCUE_KERNEL_KIT")
        .map(PathBuf::from)
        .unwrap_or_else(|| PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("target/kernel-kit"));
    assert!(
        kit.join("initrd.gz").is_file() && kit.join("kernel-path").is_file(),
        "no guest kit at {}: run `bash tests/kernel/kit.sh` first",
        kit.display()
    );
    kit
}

/// Boots the guest and returns every line it printed, up to its end
/// marker. The guest powers itself off; a guest that has not ended after
/// ten minutes (TCG boots in seconds here) fails the test.
fn boot(mode: &str) -> Vec<String> {
    let kit = kit();
    let root = kit.join("root");
    let kernel = std::fs::read_to_string(kit.join("kernel-path")).unwrap();
    let libs =
        format!("{}:{}", root.join("usr/lib/x86_64-linux-gnu").display(), root.join("lib/x86_64-linux-gnu").display());
    let mut child = Command::new(root.join("usr/bin/qemu-system-x86_64"))
        .env("LD_LIBRARY_PATH", libs)
        .args(["-L"])
        .arg(root.join("usr/share/qemu"))
        .args(["-L"])
        .arg(root.join("usr/share/seabios"))
        .args(["-accel", "tcg", "-nodefaults", "-display", "none", "-serial", "stdio", "-nic", "none", "-no-reboot"])
        .args(["-m", "256", "-kernel", kernel.trim()])
        .arg("-initrd")
        .arg(kit.join("initrd.gz"))
        .args(["-append", &format!("console=ttyS0 panic=-1 quiet buscue.mode={mode}")])
        .stdin(Stdio::null())
        .stdout(Stdio::piped())
        .stderr(Stdio::inherit())
        .spawn()
        .expect("start qemu-system-x86_64 from the kit");
    let stdout = child.stdout.take().unwrap();
    let (tx, rx) = mpsc::channel();
    std::thread::spawn(move || {
        for line in BufReader::new(stdout).lines() {
            let Ok(line) = line else { break };
            let end = line.starts_with("=== END");
            if tx.send(line).is_err() || end {
                break;
            }
        }
    });
    let mut lines = Vec::new();
    loop {
        match rx.recv_timeout(Duration::from_secs(600)) {
            Ok(line) => {
                let end = line.starts_with("=== END");
                lines.push(line.trim_end_matches('\r').to_string());
                if end {
                    break;
                }
            }
            Err(mpsc::RecvTimeoutError::Disconnected) => break,
            Err(mpsc::RecvTimeoutError::Timeout) => {
                let _ = child.kill();
                panic!("the guest printed nothing for ten minutes:\n{}", lines.join("\n"));
            }
        }
    }
    let _ = child.wait();
    assert!(lines.iter().any(|l| l.starts_with("=== END")), "the guest ended early:\n{}", lines.join("\n"));
    lines
}

/// The lines of one case and its exit code.
fn case<'a>(lines: &'a [String], name: &str) -> (Vec<&'a str>, i32) {
    let start = lines.iter().position(|l| *l == format!("=== CASE {name}")).unwrap_or_else(|| {
        panic!("no case {name} in the guest's output:\n{}", lines.join("\n"));
    });
    let mut out = Vec::new();
    for l in &lines[start + 1..] {
        if let Some(rc) = l.strip_prefix(&format!("=== RC {name} ")) {
            return (out, rc.trim().parse().expect("an exit code"));
        }
        out.push(l.as_str());
    }
    panic!("case {name} has no exit code:\n{}", lines.join("\n"));
}

#[test]
#[ignore = "boots a Linux guest under QEMU: `bash tests/kernel/kit.sh && cargo test --test kernel -- --ignored`"]
fn the_kernel_adapter_drives_a_real_kernels_smbus_stub() {
    if std::env::var_os("BUSCUE_KERNEL_BENCH").is_some() {
        for l in boot("bench").iter().filter(|l| l.starts_with("=== BENCH")) {
            println!("{l}");
        }
        return;
    }
    let lines = boot("test");
    let all = lines.join("\n");

    // `ports` names the bus as sysfs does and says what it offers.
    let (out, rc) = case(&lines, "ports");
    assert_eq!(rc, 0, "{all}");
    let bus = out.iter().find(|l| l.starts_with("/dev/i2c-0")).unwrap_or_else(|| panic!("{all}"));
    assert!(bus.contains("kernel \"SMBus stub driver\""), "{bus}");
    assert!(bus.contains("SMBus only") && bus.contains("Quick Command") && bus.contains("Block Read"), "{bus}");

    // The scan finds the stub's two chips with Quick Command probes.
    let (out, rc) = case(&lines, "scan");
    assert_eq!(rc, 0, "{all}");
    let answering: Vec<&str> = out.iter().filter(|l| l.contains("answers")).map(|l| l.trim()).collect();
    assert_eq!(answering.len(), 2, "{all}");
    assert!(answering[0].starts_with("0x31") && answering[1].starts_with("0x35"), "{all}");
    assert!(out.contains(&"2 answered"), "{all}");
    // The caution for a computer's own SMBus controller is said.
    assert!(out.iter().any(|l| l.starts_with("caution:") && l.contains("SMBus controller")), "{all}");

    // Every protocol the stub carries, checked by the script itself.
    let (out, rc) = case(&lines, "run");
    assert_eq!(rc, 0, "the guest script failed:\n{all}");
    assert!(out.iter().any(|l| l.contains("kernel guest: every protocol checked")), "{all}");
    assert!(out.iter().any(|l| l.contains("adapter: kernel:smbus /dev/i2c-0")), "{all}");
    // Frames show the absent address's NACK as the kernel reported it.
    assert!(out.iter().any(|l| l.contains("0x36") && l.contains("addr-NACK")), "{all}");

    // The recording replays on the same bus without a divergence.
    let (out, rc) = case(&lines, "replay");
    assert_eq!(rc, 0, "replay diverged:\n{all}");
    assert!(!out.iter().any(|l| l.contains("diverge")), "{all}");

    // The kernel sets the clock: a speed is refused, with the reason.
    let (out, rc) = case(&lines, "speed");
    assert_ne!(rc, 0, "{all}");
    assert!(out.iter().any(|l| l.contains("the kernel sets this bus's clock")), "{all}");
}
