//! Renders a trace's frames as the VCD a logic analyser would have taken
//! of them at the trace's bus speed (1 ns ticks), for trying `buscue
//! decode` without a capture of your own:
//!
//! ```text
//! cargo run --example render_capture -- TRACE OUT.vcd
//! ```

use std::io::BufWriter;

fn main() -> anyhow::Result<()> {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let [trace, out] = args.as_slice() else {
        anyhow::bail!("usage: render_capture TRACE OUT.vcd");
    };
    let trace = buscue::trace::Trace::load(std::path::Path::new(trace))?;
    let frames: Vec<_> = trace.frames().cloned().collect();
    let file = std::fs::File::create_new(out).map_err(|e| anyhow::anyhow!("{out}: {e}"))?;
    let shape = buscue::capture::synth::Shape {
        hz: trace.header.speed_hz.into(),
        tick_fs: 1_000_000,
        setup_ps: None,
        stretch_ps: 0,
    };
    buscue::capture::synth::render(&frames, shape, &mut BufWriter::new(file))?;
    Ok(())
}
