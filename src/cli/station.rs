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
use std::io::{IsTerminal, Write};
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
use crate::script::guarded::AllowGuarded;
use crate::script::params::{self, Given};
use crate::script::{self, RunConfig, Session};
use crate::trace::{Header, TraceRescue, TraceWriter};

use super::{compose, exit, interrupt_flag, parse_adapter, parse_assignment, parse_duration, shown, watchdog};

#[derive(Args, Debug)]
pub struct StationArgs {
    /// The Lua script every fixture runs; or a fixtures file (TOML,
    /// `format = "buscue-fixtures/1"`) and then the script.
    #[arg(value_name = "[FIXTURES.toml] SCRIPT", num_args = 1..=2, required = true)]
    pub files: Vec<PathBuf>,
    /// A fixture: its name (letters, digits, `-`, `_`) and its adapter,
    /// as --adapter takes it (`a=serial:/dev/ttyUSB0`); repeatable.
    #[arg(long = "fixture", value_name = "NAME=ADAPTER", value_parser = parse_fixture)]
    pub fixtures: Vec<Fixture>,
    /// Script parameter for every fixture; repeatable. Wins over the
    /// fixtures file and --params.
    #[arg(long = "set", value_name = "NAME=VALUE", value_parser = parse_assignment, allow_hyphen_values = true)]
    pub set: Vec<(String, String)>,
    /// Script parameters for every fixture from a TOML file of NAME = VALUE.
    #[arg(long = "params", value_name = "FILE")]
    pub params: Option<PathBuf>,
    /// Unlock guarded registers for the whole run: map names,
    /// comma-separated (REG,REG), or `all`; every guarded write is listed.
    #[arg(long = "allow-guarded", value_name = "REGS", value_parser = AllowGuarded::parse)]
    pub allow_guarded: Vec<AllowGuarded>,
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
    /// Print a line per fixture as it goes even on a terminal, instead of
    /// lines redrawn in place.
    #[arg(long)]
    pub plain: bool,
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
    fixture_of(name, spec)
}

/// A fixture named `name` on the adapter `spec` (as --adapter takes it).
pub fn fixture_of(name: &str, spec: &str) -> Result<Fixture, String> {
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
        guarded_writes: std::mem::take(&mut run.guarded),
        dry_run_writes: None,
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

/// The parameters of one run: the values and their sources as
/// [`RunConfig`] takes them, and what the reports and the trace header
/// show (every declared parameter resolved, defaults included, and the
/// undeclared ones as given).
#[derive(Debug, Clone, Default)]
pub struct ParamSet {
    pub values: BTreeMap<String, String>,
    pub sources: BTreeMap<String, String>,
    pub shown: BTreeMap<String, String>,
}

/// `--params FILE` then `--set`, the later winning.
pub fn given_params(file: Option<&Path>, set: &[(String, String)]) -> Result<BTreeMap<String, Given>> {
    let mut given = match file {
        Some(p) => super::fixtures::read_params(p)?,
        None => BTreeMap::new(),
    };
    for (k, v) in set {
        given.insert(k.clone(), Given { value: v.clone(), source: "--set".into() });
    }
    Ok(given)
}

/// Checks `given` against the script's `params { ... }` declaration
/// before anything is opened: an error names the parameter, the type and
/// where the value came from.
pub fn param_set(text: &str, given: BTreeMap<String, Given>) -> Result<ParamSet> {
    let mut set = ParamSet::default();
    for (k, g) in &given {
        set.values.insert(k.clone(), g.value.clone());
        set.sources.insert(k.clone(), g.source.clone());
        set.shown.insert(k.clone(), g.value.clone());
    }
    if let Some(decls) = params::declared(text)? {
        for (k, v) in params::resolve(&decls, &given)? {
            set.shown.insert(k, v.text());
        }
    }
    Ok(set)
}

/// The guarded registers every `--allow-guarded` unlocks.
pub fn allowed(list: &[AllowGuarded]) -> AllowGuarded {
    list.iter().cloned().fold(AllowGuarded::None, AllowGuarded::merge)
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
    let (fixtures_file, script_path) = match a.files.as_slice() {
        [script] => (None, script.clone()),
        [file, script] => (Some(file.clone()), script.clone()),
        _ => bail!("give the script, or a fixtures file and then the script"),
    };
    let mut fixtures: Vec<(Fixture, BTreeMap<String, Given>)> = Vec::new();
    if let Some(file) = &fixtures_file {
        let (listed, warnings) = super::fixtures::read_fixtures(file)?;
        for w in warnings {
            eprintln!("{}", super::warning_line(shown(w), false));
        }
        fixtures.extend(listed.into_iter().map(|f| (f.fixture, f.params)));
    }
    fixtures.extend(a.fixtures.iter().map(|f| (f.clone(), BTreeMap::new())));
    if fixtures.is_empty() {
        bail!("no fixtures: give a fixtures file before the script, or --fixture NAME=ADAPTER");
    }
    let mut names = std::collections::BTreeSet::new();
    for (f, _) in &fixtures {
        if !names.insert(f.name.as_str()) {
            bail!("fixture `{}` is named twice; every fixture needs its own name", f.name);
        }
    }
    if !script_path.is_file() {
        bail!("script {} does not exist or is not a file", script_path.display());
    }
    let text = std::fs::read_to_string(&script_path)
        .with_context(|| format!("cannot read script {}", script_path.display()))?;
    // Every fixture's parameters are checked before any adapter is opened.
    let common = given_params(a.params.as_deref(), &[])?;
    let mut jobs_params = Vec::new();
    for (f, own) in &fixtures {
        let mut given = common.clone();
        given.extend(own.clone());
        for (k, v) in &a.set {
            given.insert(k.clone(), Given { value: v.clone(), source: "--set".into() });
        }
        let set = param_set(&text, given).with_context(|| format!("fixture {}", f.name))?;
        jobs_params.push(set);
    }
    let allow_guarded = allowed(&a.allow_guarded);
    let stem = script_path.file_stem().map(|s| s.to_string_lossy().into_owned()).unwrap_or_else(|| "station".into());
    let dir = match &a.out {
        Some(p) => new_folder(p, false)?,
        None => {
            let stamp = crate::trace::header::file_stamp(std::time::SystemTime::now());
            new_folder(&Path::new("station").join(format!("{stem}-{stamp}")), true)?
        }
    };
    let interrupt = interrupt_flag()?;
    let total = fixtures.len();
    let started = Instant::now();
    let mut err = std::io::stderr();
    let _ = writeln!(err, "station: {total} fixture(s), files in {}", shown(dir.display()));
    let names: Vec<String> = fixtures.iter().map(|(f, _)| f.name.clone()).collect();
    let plan = script::steps::planned(&text);
    let live = !a.plain && std::io::stderr().is_terminal();
    let mut progress = super::progress::Progress::new(&names, plan.len(), live);
    let (tx, rx) = std::sync::mpsc::channel::<Event>();
    for (i, ((f, _), params)) in fixtures.iter().zip(jobs_params).enumerate() {
        let job = Job {
            fixture: f.clone(),
            script: script_path.clone(),
            text: text.clone(),
            params,
            allow_guarded: allow_guarded.clone(),
            timeout: a.timeout,
            stop_on_fail: a.stop_on_fail,
            dir: dir.clone(),
            dry: a.dry.dry_run.clone(),
            interrupt: interrupt.clone(),
        };
        let (name, script_name, sender) = (f.name.clone(), script_path.clone(), tx.clone());
        let spawned = std::thread::Builder::new().name(format!("fixture-{name}")).spawn(move || {
            let run = std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| job.run(i, &sender)));
            let report = run.unwrap_or_else(|_| failed_fixture(&name, &script_name, "the fixture's thread panicked"));
            let _ = sender.send(Event::Done(i, Box::new(report)));
        });
        if let Err(e) = spawned {
            let _ = tx.send(Event::Done(
                i,
                Box::new(failed_fixture(&f.name, &script_path, &format!("cannot start the fixture's thread: {e}"))),
            ));
        }
    }
    drop(tx);
    let mut watch: Vec<Watched> = (0..total).map(|_| Watched::default()).collect();
    let mut reports: Vec<Option<RunReport>> = vec![None; total];
    // Each fixture's own deadline: its time limit, plus the grace the
    // run's watchdog gives, plus (before its session starts) time to open
    // its adapter. A fixture still running then is ended here, alone.
    let backstop = (a.timeout > Duration::ZERO).then(|| started + a.timeout + watchdog::GRACE + OPEN_ALLOWANCE);
    let mut interrupted_at = None;
    while reports.iter().any(Option::is_none) {
        let now = Instant::now();
        if interrupt.load(std::sync::atomic::Ordering::SeqCst) {
            interrupted_at.get_or_insert(now);
        }
        for i in 0..total {
            let due = watch[i].deadline.or(backstop);
            let due = match (due, interrupted_at) {
                (Some(d), Some(t)) => Some(d.min(t + watchdog::GRACE)),
                (d, t) => d.or(t.map(|t| t + watchdog::GRACE)),
            };
            if reports[i].is_none() && due.is_some_and(|d| now >= d) {
                let r =
                    stuck_fixture(&fixtures[i].0, &script_path, &dir, &plan, &mut watch[i], interrupted_at.is_some());
                progress.done(i, &r);
                reports[i] = Some(r);
            }
        }
        match rx.recv_timeout(Duration::from_millis(100)) {
            Ok(Event::Started(i, rescue, deadline)) => {
                watch[i].rescue = rescue;
                watch[i].deadline = deadline.map(|d| d + watchdog::GRACE);
            }
            Ok(Event::Step(i, ev)) => {
                progress.step(i, &ev);
                watch[i].heard(ev);
            }
            Ok(Event::Done(i, r)) => {
                if reports[i].is_none() {
                    progress.done(i, &r);
                    reports[i] = Some(*r);
                }
            }
            Err(std::sync::mpsc::RecvTimeoutError::Timeout) => {}
            Err(std::sync::mpsc::RecvTimeoutError::Disconnected) => {
                for (i, r) in reports.iter_mut().enumerate().filter(|(_, r)| r.is_none()) {
                    *r = Some(failed_fixture(&names[i], &script_path, "the fixture's thread ended without a report"));
                }
            }
        }
    }
    let mut runs = Vec::new();
    for report in reports.into_iter().flatten() {
        let name = report.name.clone();
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
        for g in &report.guarded_writes {
            let _ = writeln!(err, "  guarded write: {}", shown(g));
        }
        if let Some(w) = &report.dry_run_writes {
            let _ =
                writeln!(err, "  dry run: {} write(s) would have gone to the board (in {name}.writes.txt)", w.len());
        }
        runs.push(report);
    }
    let combined = [
        Target { format: report::Format::Junit, path: dir.join("junit.xml") },
        Target { format: report::Format::Json, path: dir.join("report.json") },
    ];
    // A report that cannot be written fails the station, as it fails a
    // run; the other reports are still written.
    let mut unwritten = false;
    for (targets, force) in [(&combined[..], false), (&a.reports[..], a.force)] {
        if let Err(e) = write_reports(targets, &runs, &stem, force) {
            let _ = writeln!(err, "{}", super::error_line(shown(format!("{e:#}")), err.is_terminal()));
            unwritten = true;
        }
    }
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
    } else if unwritten {
        exit::RECORD_FAILED
    } else if passed == total {
        exit::OK
    } else {
        exit::STATION_FAILED
    })
}

/// How long a fixture may take to open its adapter before its time
/// limit starts, as far as the station's backstop deadline goes; opening
/// has its own time-outs, this only bounds a fixture that never starts.
const OPEN_ALLOWANCE: Duration = Duration::from_secs(10);

/// What a fixture's thread tells the station.
enum Event {
    /// The session started: its trace (to end it from here if the
    /// fixture never stops) and its deadline.
    Started(usize, Option<TraceRescue>, Option<Instant>),
    Step(usize, script::steps::StepEvent),
    Done(usize, Box<RunReport>),
}

/// What the station knows of a running fixture.
#[derive(Default)]
struct Watched {
    rescue: Option<TraceRescue>,
    deadline: Option<Instant>,
    /// Steps that ended, and the ones running now (outermost first).
    ended: Vec<crate::report::StepResult>,
    open: Vec<String>,
    transactions: u64,
}

impl Watched {
    fn heard(&mut self, ev: script::steps::StepEvent) {
        self.transactions = ev.transactions;
        match ev.result {
            None => self.open.push(ev.name),
            Some(r) => {
                self.open.retain(|n| *n != r.name);
                self.ended.push(r);
            }
        }
    }
}

/// The report of a fixture that did not stop by itself after its time
/// limit (one long library call the script's hook never sees) or after
/// Ctrl-C: the steps it finished as they ended, the ones running as
/// errors, the rest skipped; its trace ended here. Its thread is left to
/// the end of the process.
fn stuck_fixture(
    f: &Fixture,
    script: &Path,
    dir: &Path,
    plan: &[String],
    w: &mut Watched,
    interrupted: bool,
) -> RunReport {
    let why = if interrupted {
        format!("interrupted; the fixture did not stop within {} s", watchdog::GRACE.as_secs())
    } else {
        format!("script ran past its time limit (--timeout) and did not stop within {} s", watchdog::GRACE.as_secs())
    };
    let mut r = failed_fixture(&f.name, script, &why);
    r.adapter = f.written.clone();
    r.stats.transactions = w.transactions;
    // The trace's own counts of what it holds, where the fixture has one:
    // the same numbers its end record gets.
    if let Some(t) = &w.rescue {
        r.stats = t.stats();
    }
    let mut steps = std::mem::take(&mut w.ended);
    for name in w.open.drain(..).rev() {
        steps.push(crate::report::StepResult {
            depth: name.matches('/').count() as u32,
            name,
            status: Status::Error,
            message: Some(why.clone()),
            origin: None,
            frames: None,
            failed_at_frame: None,
            duration: Duration::ZERO,
        });
    }
    let mut book = script::steps::Book { steps, ..Default::default() };
    book.finish(plan, &format!("not run: the run stopped ({why})"));
    r.steps = book.steps;
    if let Some(t) = w.rescue.take()
        && let Err(e) = t.end(if interrupted { exit::INTERRUPTED } else { exit::INPUT }, &why)
    {
        r.stopped = Some(format!("{why}; cannot end its trace: {e}"));
    } else {
        r.trace = Some(dir.join(format!("{}.trace.jsonl", f.name)));
    }
    if let Err(e) = write_own(dir, &f.name, std::slice::from_ref(&r)) {
        r.stopped = Some(format!("{why}; {e}"));
    }
    r
}

/// A fixture's own report pair; a report that cannot be written fails
/// the fixture (the error comes back for the combined report).
fn write_own(dir: &Path, name: &str, runs: &[RunReport]) -> Result<(), String> {
    let own = [
        Target { format: report::Format::Junit, path: dir.join(format!("{name}.junit.xml")) },
        Target { format: report::Format::Json, path: dir.join(format!("{name}.report.json")) },
    ];
    write_reports(&own, runs, name, false).map_err(|e| super::message(&e))
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
        guarded_writes: Vec::new(),
        dry_run_writes: None,
        stopped: Some(why.to_string()),
        stats: Default::default(),
        wall: Duration::ZERO,
        passed: false,
    }
}

/// Writes a dry run's list of writes to `path` (whole, never over a file)
/// and into the report; a list that cannot be written fails the run.
fn record_dry_run(r: &mut RunReport, path: &Path, lines: Vec<String>) {
    let text = lines.iter().map(|l| l.clone() + "\n").collect::<String>();
    if let Err(e) = report::write_atomic(path, text.as_bytes(), false) {
        r.stopped.get_or_insert_with(|| format!("cannot write the dry run's writes to {}: {e}", path.display()));
        r.passed = false;
    }
    r.dry_run_writes = Some(lines);
}

/// One fixture's run, on its own thread.
struct Job {
    fixture: Fixture,
    script: PathBuf,
    text: String,
    params: ParamSet,
    allow_guarded: AllowGuarded,
    timeout: Duration,
    stop_on_fail: bool,
    dir: PathBuf,
    dry: Option<StandIn>,
    interrupt: Arc<AtomicBool>,
}

impl Job {
    fn run(self, index: usize, tx: &std::sync::mpsc::Sender<Event>) -> RunReport {
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
                r.parameters = self.params.shown.clone();
                let mut book = script::steps::Book::default();
                book.finish(&script::steps::planned(&self.text), &format!("not run: cannot open the adapter: {e}"));
                r.steps = book.steps;
                if let Err(e) = write_own(&self.dir, &self.fixture.name, std::slice::from_ref(&r)) {
                    r.stopped = Some(format!("{}; {e}", r.stopped.unwrap_or_default()));
                }
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
            self.params.shown.clone(),
        );
        let mut rescue = None;
        let trace = match TraceWriter::create_new(&trace_path, &header) {
            Ok(w) => {
                rescue = Some(w.rescue());
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
            params: self.params.values.clone(),
            timeout,
            memory_limit: script::DEFAULT_MEMORY_LIMIT,
            allow_io: false,
            stop_on_fail: self.stop_on_fail,
            allow_guarded: self.allow_guarded.clone(),
            param_sources: self.params.sources.clone(),
            progress: Some(script::steps::Watch(Arc::new({
                let tx = std::sync::Mutex::new(tx.clone());
                move |ev| {
                    let _ = tx.lock().unwrap_or_else(|p| p.into_inner()).send(Event::Step(index, ev));
                }
            }))),
        };
        let _ = tx.send(Event::Started(index, rescue, session.deadline().map(|(when, _)| when)));
        let mut run = script::run(session, &cfg, self.interrupt.clone());
        let code = run.abort.as_ref().map_or(exit::OK, exit::of_abort);
        let closed = run.session.finish(code, run.abort.as_ref().map(|a| a.to_string()));
        let mut r = report_of(
            &name,
            &script_name,
            &self.fixture.written,
            &self.params.shown,
            trace,
            &mut run,
            started.elapsed(),
        );
        if let Err(e) = closed {
            r.stopped.get_or_insert_with(|| e.to_string());
            r.passed = false;
        }
        if self.dry.is_some() {
            // The list of writes is the dry run's result: a list that
            // cannot be written fails the fixture, never a warning.
            let lines = listed.lock().unwrap_or_else(|p| p.into_inner()).clone();
            record_dry_run(&mut r, &self.dir.join(format!("{name}.writes.txt")), lines);
        }
        if let Err(e) = write_own(&self.dir, &self.fixture.name, std::slice::from_ref(&r)) {
            r.stopped.get_or_insert(e);
            r.passed = false;
        }
        r
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_list_of_writes_that_cannot_be_written_fails_the_run() {
        let dir = tempfile::tempdir().unwrap();
        let mut r = failed_fixture("a", Path::new("s.lua"), "x");
        r.stopped = None;
        r.passed = true;
        record_dry_run(&mut r, &dir.path().join("a.writes.txt"), vec!["#1 0x2B write 01".into()]);
        assert!(r.passed && r.stopped.is_none());
        assert_eq!(std::fs::read_to_string(dir.path().join("a.writes.txt")).unwrap(), "#1 0x2B write 01\n");
        // A second list may not replace the first, and a folder that is
        // not there takes none: both fail the run.
        record_dry_run(&mut r, &dir.path().join("a.writes.txt"), vec![]);
        assert!(!r.passed);
        assert!(r.stopped.as_deref().unwrap().contains("cannot write the dry run's writes"), "{:?}", r.stopped);
        let mut r2 = failed_fixture("b", Path::new("s.lua"), "x");
        r2.stopped = None;
        r2.passed = true;
        record_dry_run(&mut r2, &dir.path().join("gone/b.writes.txt"), vec![]);
        assert!(!r2.passed && r2.stopped.is_some());
    }
}
