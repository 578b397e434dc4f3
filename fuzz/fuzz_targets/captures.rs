//! Arbitrary bytes as a VCD and as a sample table must never panic, and
//! every error must name the file and a line (the same property as the
//! proptest cases in tests/capture.rs, run without limits).

#![no_main]

use buscue::capture::decode::{Decoder, Options};
use buscue::capture::table::{self, TableOptions};
use buscue::capture::{CaptureError, Lines, vcd};
use libfuzzer_sys::fuzz_target;

fn named(e: &CaptureError) -> bool {
    e.to_string().starts_with("f:")
}

fuzz_target!(|data: &[u8]| {
    let mut lines = Lines::new(data, "f");
    match vcd::header(&mut lines) {
        Err(e) => assert!(named(&e)),
        Ok(h) => {
            if let Ok((sda, scl)) = vcd::pick(&h, &vcd::Select::default(), "f") {
                let mut dec = Decoder::new(h.ticks, Options::default(), |_, _| {});
                match vcd::body(&mut lines, &h, &sda, &scl, |t, s, c| dec.levels(t, s, c)) {
                    Ok(last) => dec.finish(last),
                    Err(e) => assert!(named(&e)),
                }
            }
        }
    }
    let mut lines = Lines::new(data, "f");
    let dec = std::cell::RefCell::new(Decoder::new(table::TICKS, Options::default(), |_, _| {}));
    let opts = TableOptions { sample_rate: None, thresholds: Some((0.99, 2.31)), vdd: None };
    let levels = |t, s, c| dec.borrow_mut().levels(t, s, c);
    if let Err(e) = table::read_slopes(&mut lines, opts, levels, |p, ps, at| dec.borrow_mut().slope(p, ps, at)) {
        assert!(named(&e));
    }
});
