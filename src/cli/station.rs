//! `buscue station`: one script on many fixtures at once, each on its own
//! thread with its own Lua state, session, trace and reports, and a
//! combined report of all. Also the pieces `run` shares with it: turning
//! a script run into a [`RunReport`], writing `--report` files, and the
//! dry-run stand-in.
//!
//! Contract:
//! - A fixture's failure (a check, a hang past `--timeout`, an unplugged
//!   adapter) ends that fixture only; its report marks the steps it never
//!   reached as skipped with the reason.
//! - Every file goes into a new folder (`--out`, by default
//!   `station/<script>-<UTC time>[-N]`, made with create-new semantics), one
//!   trace and one report pair per fixture, named after the fixture; so
//!   no two runs, and no two fixtures, ever share a file.
//! - Reports are written whole ([`report::write_atomic`]) even when the
//!   run is interrupted.
//! - Exit code: 0 when every fixture passed, [`exit::STATION_FAILED`]
//!   when any did not, [`exit::INTERRUPTED`] after Ctrl-C, 2 for usage.

use std::collections::BTreeMap;
use std::io::Write;
use std::path::{Path, PathBuf};
use std::sync::Arc;
use std::sync::atomic::AtomicBool;
use std::time::{Duration, Instant};

use anyhow::{Context, Result, bail};
use clap::Args;

use crate::adapter::{AdapterSpec, OpenOptions};
use crate::ascii::push_hex_bytes;
use crate::bus::Operation;
use crate::record::{Record, Sink};
use crate::report::{self, RunReport, Status, Target};
use crate::script::{self, RunConfig, Session};
use crate::trace::{Header, TraceWriter};

use super::{compose, exit, interrupt_flag, parse_adapter, parse_assignment, parse_duration, shown};

#[derive(Args, Debug)]
pub struct StationArgs {
    /// The Lua script every fixture runs.
    pub script: PathBuf,
    /// A fixture: its name (letters, digits, `-`, `_`) and its adapter,
    /// as --adapter takes it (`a=serial:/dev/ttyUSB0`); repeatable.
    #[arg(long = "fixture", value_name = "NAME=ADAPTER", value_parser = parse_fixture, required = true)]
    pub fixtures: Vec<Fixture>,
    /// Script parameter for every fixture (`param`); repeatable.
    #[arg(long = "set", value_name = "NAME=VALUE", value_parser = parse_assignment, allow_hyphen_values = true)]
    pub set: Vec<(String, String)>,
    /// Wall-clock limit per fixture (30s, 2m; 0 = none).
    #[arg(long, default_value = "10m", value_parser = parse_duration, allow_hyphen_values = true)]
    pub timeout: Duration,
    /// End a fixture's run at its first failed step.
    #[arg(long)]
    pub stop_on_fail: bool,
    /// The folder for traces and reports (must not exist); default
    /// station/<script>-<UTC time>.
    #[arg(long, value_name = "DIR")]
    pub out: Option<PathBuf>,
    /// Also write the combined report here: junit:PATH or json:PATH; repeatable.
    #[arg(long = "report", value_name = "FORMAT:PATH", value_parser = Target::parse)]
    pub reports: Vec<Target>,
    /// Replace files --report names if they exist.
    #[arg(long)]
    pub force: bool,
    #[command(flatten)]
    pub dry: DryRunArgs,
}

/// `--dry-run`: the script runs against a stand-in and the named adapter
/// is never opened.
#[derive(Args, Debug, Clone)]
pub struct DryRunArgs {
    /// Run against a stand-in instead of the adapter, which is not opened:
    /// `sim` (the demo bench, the default), `sim:PATH` (a bench file) or
    /// `trace:PATH` (the board as a recording says it answered). Every
    /// write that would have gone to the board is listed.
    #[arg(long, value_name = "STAND-IN", num_args = 0..=1, default_missing_value = "sim", value_parser = parse_stand_in)]
    pub dry_run: Option<StandIn>,
}

/// What answers a dry run.
#[derive(Debug, Clone)]
pub enum StandIn {
    /// A simulated bench: `sim` or `sim:PATH`.
    Bench(AdapterSpec),
    /// Recorded devices made from a trace ([`compose::open_recorded`]).
    Trace(PathBuf),
}

impl StandIn {
    pub fn open(&self) -> Result<Box<dyn crate::adapter::Adapter>> {
        Ok(match self {
            StandIn::Bench(spec) => compose::open(spec, &OpenOptions { realtime: false })?,
            StandIn::Trace(path) => Box::new(compose::open_recorded(path)?),
        })
    }
}

fn parse_stand_in(s: &str) -> Result<StandIn, String> {
    if let Some(p) = s.strip_prefix("trace:") {
        if p.is_empty() {
            return Err("trace: needs the trace file's path (trace:PATH)".into());
        }
        return Ok(StandIn::Trace(PathBuf::from(p)));
    }
    match AdapterSpec::parse(s) {
        Ok(a @ (AdapterSpec::DemoBench | AdapterSpec::Bench(_))) => Ok(StandIn::Bench(a)),
        Ok(_) => Err(format!("`{s}` is not a stand-in: a dry run takes sim, sim:PATH or trace:PATH")),
        Err(e) => Err(e.to_string()),
    }
}

/// A `--fixture NAME=ADAPTER` value.
#[derive(Debug, Clone)]
pub struct Fixture {
    pub name: String,
    pub spec: AdapterSpec,
    /// The adapter as written, for the report.
    pub written: String,
}

fn parse_fixture(s: &str) -> Result<Fixture, String> {
    let (name, spec) = s.split_once('=').ok_or_else(|| format!("`{s}`: write --fixture NAME=ADAPTER"))?;
    if name.is_empty() || name.len() > 64 || !name.chars().all(|c| c.is_ascii_alphanumeric() || c == '-' || c == '_') {
        return Err(format!("`{name}` is not a fixture name: 1 to 64 letters, digits, '-' or '_'"));
    }
    Ok(Fixture { name: name.to_string(), spec: parse_adapter(spec)?, written: spec.to_string() })
}

/// Every write a dry run would have sent, in order.
#[derive(Default)]
pub struct WriteList {
    pub lines: Arc<std::sync::Mutex<Vec<String>>>,
}

impl Sink for WriteList {
    fn record(&mut self, r: &Record) -> std::io::Result<()> {
        if let Record::Frame(f) = r {
            for op in &f.ops {
                if let Operation::Write(bytes) = op {
                    let mut line = format!("#{} {} write ", f.seq, f.address);
                    push_hex_bytes(&mut line, bytes);
                    if f.attempt > 1 {
                        line.push_str(&format!(" (attempt {})", f.attempt));
                    }
                    if let Some(d) = &f.decoded {
                        line.push_str("  ");
                        line.push_str(d);
                    }
                    self.lines.lock().unwrap_or_else(|p| p.into_inner()).push(line);
                }
            }
        }
        Ok(())
    }
    fn flush(&mut self) -> std::io::Result<()> {
        Ok(())
    }
}

/// The report of one script run.
pub fn report_of(
    name: &str,
    script_name: &str,
    adapter: &str,
    params: &BTreeMap<String, String>,
    trace: Option<PathBuf>,
    run: &mut script::Report,
    wall: Duration,
) -> RunReport {
    let id = &run.session.adapter_ref().snapshot().identity;
    let mut r = RunReport {
        name: name.to_string(),
        script: script_name.to_string(),
        adapter: adapter.to_string(),
        adapter_identity: Some(format!("{} {} {}", id.driver, id.target, id.description).trim().to_string()),
        parameters: params.clone(),
        trace,
        steps: std::mem::take(&mut run.book.steps),
        measurements: std::mem::take(&mut run.book.measurements),
        stopped: None,
        stats: run.session.stats.clone(),
        wall,
        passed: false,
    };
    // A failure outside every step (or one that ended the run) is the
    // run's own; a step's failure is already in its step.
    if let Some(a) = &run.abort {
        let in_a_step = r.steps.iter().any(|s| matches!(s.status, Status::Failed | Status::Error));
        let stopped_run = run.book.first_failure.as_ref().map(|f| f.to_string()) != Some(a.to_string());
        if stopped_run || !in_a_step {
            r.stopped = Some(a.to_string());
        }
    }
    r.passed = r.verdict();
    r
}

/// Writes each `--report` target for `runs`.
pub fn write_reports(targets: &[Target], runs: &[RunReport], suite: &str, force: bool) -> Result<()> {
    for t in targets {
        let bytes = t.render(runs, suite).with_context(|| format!("cannot render the report {}", t.path.display()))?;
        report::write_atomic(&t.path, &bytes, force)
            .with_context(|| format!("cannot write the report {}", t.path.display()))?;
    }
    Ok(())
}

/// A new folder for a station run: `base`, else `base-2`, `base-3`...
fn new_folder(base: &Path, numbered: bool) -> Result<PathBuf> {
    if let Some(parent) = base.parent().filter(|p| !p.as_os_str().is_empty()) {
        std::fs::create_dir_all(parent).with_context(|| format!("cannot create {}", parent.display()))?;
    }
    for n in 1..=10_000u32 {
        let p = if n == 1 { base.to_path_buf() } else { PathBuf::from(format!("{}-{n}", base.display())) };
        match std::fs::create_dir(&p) {
            Ok(()) => return Ok(p),
            Err(e) if e.kind() == std::io::ErrorKind::AlreadyExists && numbered => continue,
            Err(e) if e.kind() == std::io::ErrorKind::AlreadyExists => {
                bail!("{} exists; --out names a new folder", p.display())
            }
            Err(e) => return Err(e).with_context(|| format!("cannot create {}", p.display())),
        }
    }
    bail!("{}: 10000 station folders of that name already", base.display())
}

pub fn station(a: StationArgs) -> Result<u8> {
    let mut names = std::collections::BTreeSet::new();
    for f in &a.fixtures {
        if !names.insert(f.name.as_str()) {
            bail!("fixture `{}` is named twice; every fixture needs its own name", f.name);
        }
    }
    if !a.script.is_file() {
        bail!("script {} does not exist or is not a file", a.script.display());
    }
    let text =
        std::fs::read_to_string(&a.script).with_context(|| format!("cannot read script {}", a.script.display()))?;
    let stem = a.script.file_stem().map(|s| s.to_string_lossy().into_owned()).unwrap_or_else(|| "station".into());
    let dir = match &a.out {
        Some(p) => new_folder(p, false)?,
        None => {
            let stamp = crate::trace::header::file_stamp(std::time::SystemTime::now());
            new_folder(&Path::new("station").join(format!("{stem}-{stamp}")), true)?
        }
    };
    let interrupt = interrupt_flag()?;
    let params: BTreeMap<String, String> = a.set.iter().cloned().collect();
    let total = a.fixtures.len();
    let started = Instant::now();
    let mut err = std::io::stderr();
    let _ = writeln!(err, "station: {total} fixture(s), files in {}", shown(dir.display()));
    let handles: Vec<_> = a
        .fixtures
        .iter()
        .map(|f| {
            let job = Job {
                fixture: f.clone(),
                script: a.script.clone(),
                text: text.clone(),
                params: params.clone(),
                timeout: a.timeout,
                stop_on_fail: a.stop_on_fail,
                dir: dir.clone(),
                dry: a.dry.dry_run.clone(),
                interrupt: interrupt.clone(),
            };
            let name = f.name.clone();
            (name, std::thread::Builder::new().name(format!("fixture-{}", f.name)).spawn(move || job.run()))
        })
        .collect();
    let mut runs = Vec::new();
    for (name, h) in handles {
        let report = match h {
            Ok(h) => h.join().unwrap_or_else(|_| failed_fixture(&name, &a.script, "the fixture's thread panicked")),
            Err(e) => failed_fixture(&name, &a.script, &format!("cannot start the fixture's thread: {e}")),
        };
        let _ = writeln!(
            err,
            "fixture {}: {} ({}; {} transactions, {} NACKs, {} retries)",
            shown(&report.name),
            if report.passed { "PASSED" } else { "FAILED" },
            report.summary_line(),
            report.stats.transactions,
            report.stats.nacks,
            report.stats.retries,
        );
        if let Some(s) = &report.stopped {
            let _ = writeln!(err, "  stopped: {}", shown(s));
        }
        runs.push(report);
    }
    let combined = [
        Target { format: report::Format::Junit, path: dir.join("junit.xml") },
        Target { format: report::Format::Json, path: dir.join("report.json") },
    ];
    write_reports(&combined, &runs, &stem, false)?;
    write_reports(&a.reports, &runs, &stem, a.force)?;
    let passed = runs.iter().filter(|r| r.passed).count();
    let _ = writeln!(
        err,
        "station: {passed} of {total} fixture(s) passed in {:.1} s; reports {} and {}",
        started.elapsed().as_secs_f64(),
        shown(combined[0].path.display()),
        shown(combined[1].path.display())
    );
    Ok(if interrupt.load(std::sync::atomic::Ordering::SeqCst) {
        exit::INTERRUPTED
    } else if passed == total {
        exit::OK
    } else {
        exit::STATION_FAILED
    })
}

/// The report of a fixture that could not run at all.
fn failed_fixture(name: &str, script: &Path, why: &str) -> RunReport {
    RunReport {
        name: name.to_string(),
        script: script.display().to_string(),
        adapter: String::new(),
        adapter_identity: None,
        parameters: BTreeMap::new(),
        trace: None,
        steps: Vec::new(),
        measurements: Vec::new(),
        stopped: Some(why.to_string()),
        stats: Default::default(),
        wall: Duration::ZERO,
        passed: false,
    }
}

/// One fixture's run, on its own thread.
struct Job {
    fixture: Fixture,
    script: PathBuf,
    text: String,
    params: BTreeMap<String, String>,
    timeout: Duration,
    stop_on_fail: bool,
    dir: PathBuf,
    dry: Option<StandIn>,
    interrupt: Arc<AtomicBool>,
}

impl Job {
    fn run(self) -> RunReport {
        let name = self.fixture.name.clone();
        let script_name = self.script.display().to_string();
        let started = Instant::now();
        let opened = match &self.dry {
            Some(stand_in) => stand_in.open(),
            None => compose::open(&self.fixture.spec, &OpenOptions { realtime: false }).map_err(Into::into),
        };
        let adapter = match opened {
            Ok(a) => a,
            Err(e) => {
                let e = super::message(&e);
                let mut r = failed_fixture(&name, &self.script, &format!("cannot open the adapter: {e}"));
                r.adapter = self.fixture.written.clone();
                r.parameters = self.params.clone();
                let mut book = script::steps::Book::default();
                book.finish(&script::steps::planned(&self.text), &format!("not run: cannot open the adapter: {e}"));
                r.steps = book.steps;
                self.write_own(std::slice::from_ref(&r));
                return r;
            }
        };
        let mut session = Session::new(adapter, self.interrupt.clone());
        let timeout = (self.timeout > Duration::ZERO).then_some(self.timeout);
        session.set_time_limit(timeout);
        let trace_path = self.dir.join(format!("{name}.trace.jsonl"));
        let header = Header::new("station", session.adapter_ref().snapshot()).with_script(
            &script_name,
            self.text.as_bytes(),
            self.params.clone(),
        );
        let trace = match TraceWriter::create_new(&trace_path, &header) {
            Ok(w) => {
                session.add_sink(Box::new(w));
                Some(trace_path)
            }
            Err(e) => {
                session.warn(format!("no trace: cannot create {}: {e}", trace_path.display()));
                None
            }
        };
        let writes = WriteList::default();
        let listed = writes.lines.clone();
        if self.dry.is_some() {
            session.add_sink(Box::new(writes));
        }
        let cfg = RunConfig {
            script: self.script.clone(),
            text: Some(self.text.clone()),
            params: self.params.clone(),
            timeout,
            memory_limit: script::DEFAULT_MEMORY_LIMIT,
            allow_io: false,
            stop_on_fail: self.stop_on_fail,
        };
        let mut run = script::run(session, &cfg, self.interrupt.clone());
        let code = run.abort.as_ref().map_or(exit::OK, exit::of_abort);
        let closed = run.session.finish(code, run.abort.as_ref().map(|a| a.to_string()));
        let mut r =
            report_of(&name, &script_name, &self.fixture.written, &self.params, trace, &mut run, started.elapsed());
        if let Err(e) = closed {
            r.stopped.get_or_insert_with(|| e.to_string());
            r.passed = false;
        }
        if self.dry.is_some() {
            let lines = listed.lock().unwrap_or_else(|p| p.into_inner());
            let _ = std::fs::write(self.dir.join(format!("{name}.writes.txt")), lines.join("\n") + "\n");
        }
        self.write_own(std::slice::from_ref(&r));
        r
    }

    /// The fixture's own report pair.
    fn write_own(&self, runs: &[RunReport]) {
        let name = &self.fixture.name;
        let own = [
            Target { format: report::Format::Junit, path: self.dir.join(format!("{name}.junit.xml")) },
            Target { format: report::Format::Json, path: self.dir.join(format!("{name}.report.json")) },
        ];
        if let Err(e) = write_reports(&own, runs, name, false) {
            eprintln!("fixture {}: {}", shown(name), shown(super::message(&e)));
        }
    }
}
