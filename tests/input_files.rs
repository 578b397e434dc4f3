//! Files a user hands us (bench files, dialect profiles) through the
//! commands: versions, ranges, and how their errors and warnings read.

mod common;
use common::*;

fn bench(text: &str) -> (tempfile::TempDir, String) {
    let dir = tempfile::tempdir().expect("temp dir");
    let path = dir.path().join("b.toml");
    std::fs::write(&path, text).expect("write bench");
    let p = path.display().to_string();
    (dir, p)
}

const DEVICE: &str = "[[device]]\nname = \"d\"\nmodel = \"register\"\naddress = 0x20\n";

#[test]
fn a_newer_bench_minor_is_read_with_one_warning_per_unknown_key() {
    let (_d, path) = bench(&format!("format = \"buscue-bench/1.2\"\nname = \"t\"\nglow = 1\n{DEVICE}"));
    let o = run(&["scan", "--adapter", &format!("sim:{path}")]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    assert!(stdout(&o).contains("0x20"), "{}", stdout(&o));
    let err = stderr(&o);
    assert_eq!(err.matches("warning:").count(), 1, "{err}");
    assert!(err.contains(&format!("warning: {path}:3: key `glow`: not a key this build knows")), "{err}");
    let (_d, path) = bench(&format!("format = \"buscue-bench/1\"\nname = \"t\"\nglow = 1\n{DEVICE}"));
    let o = run(&["scan", "--adapter", &format!("sim:{path}")]);
    assert_eq!(code(&o), 2, "{}", stderr(&o));
    assert_eq!(stderr(&o).matches("unknown field `glow`").count(), 1, "{}", stderr(&o));
}

#[test]
fn a_register_signal_out_of_range_is_refused_like_a_reset_value() {
    for (body, needle) in [
        (
            "[[device.register]]\nat = 1\nreset = 0x1FF\n",
            "key `register[0].reset`: 511 does not fit an unsigned 8-bit register",
        ),
        (
            "[[device.register]]\nat = 1\nsignal = { base = -5 }\n",
            "key `register[0].signal`: reads -5, which does not fit",
        ),
    ] {
        let (_d, path) = bench(&format!("format = \"buscue-bench/1\"\nname = \"t\"\n{DEVICE}{body}"));
        let o = run(&["scan", "--adapter", &format!("sim:{path}")]);
        assert_eq!(code(&o), 2, "{}", stderr(&o));
        assert!(stderr(&o).contains(needle), "{}", stderr(&o));
    }
}

#[test]
fn a_long_value_in_a_bench_error_is_cut() {
    let long = "q".repeat(100_000);
    let (_d, path) = bench(&format!("format = \"buscue-bench/1\"\nname = \"t\"\nspeed = \"{long}\"\n"));
    let o = run(&["scan", "--adapter", &format!("sim:{path}")]);
    assert_eq!(code(&o), 2);
    let err = stderr(&o);
    assert!(err.len() < 400, "{} bytes: {}", err.len(), &err[..400.min(err.len())]);
    assert!(err.contains("(100000 characters)"), "{err}");
}

// A value of the wrong kind is said as the kind the key takes, not as the
// Rust type that reads it.
#[test]
fn a_value_of_the_wrong_kind_names_the_kind_wanted() {
    for (value, want) in [("-5", "expected a whole number, 0 or more, got `-5`"), ("\"big\"", "got \"big\"")] {
        let (_d, path) = bench(&format!(
            "format = \"buscue-bench/1\"\nname = \"t\"\n[[device]]\nname = \"e\"\nmodel = \"eeprom\"\naddress = 0x50\nsize = {value}\n"
        ));
        let o = run(&["scan", "--adapter", &format!("sim:{path}")]);
        assert_eq!(code(&o), 2, "{}", stderr(&o));
        let err = stderr(&o);
        assert!(err.contains(&format!("{path}:7: key `size`: ")) && err.contains(want), "{err}");
        assert!(!err.contains("usize"), "{err}");
    }
}
