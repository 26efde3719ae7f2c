//! The command line: argument types, wiring of the library, human and JSON output.
//!
//! The only place that connects the stages of the data flow (plan → stimulus → rig →
//! analysis → checks → store → report). One file per command. Exit codes (docs/architecture.md):
//! 0 pass/success, 1 fail, 2 bad input, 3 retest (including "the record could not be
//! written": a unit without a record must be tested again, never shipped).
//!
//! Standard output is written only through `out!` and `outln!` (or [`JsonOut`]): a
//! reader that goes away (`tragus records | head -1`) ends the output quietly, as with
//! other Unix tools, instead of a panic; the command still finishes and exits with its
//! own code.

/// `print!` to stdout through `write_stdout`: never panics, a closed pipe ends the output
/// quietly.
macro_rules! out {
    ($($arg:tt)*) => {
        $crate::cli::write_stdout(format_args!($($arg)*))
    };
}

/// `println!` to stdout through `write_stdout`: never panics, a closed pipe ends the
/// output quietly.
macro_rules! outln {
    () => {
        $crate::cli::write_stdout(format_args!("\n"))
    };
    ($($arg:tt)*) => {
        $crate::cli::write_stdout(format_args!("{}\n", format_args!($($arg)*)))
    };
}

mod analyze;
mod calibrate;
mod checkpoint;
mod coupler;
mod devices;
mod export;
mod exposure;
mod key_files;
mod keys;
mod limits;
mod operator_loop;
mod records;
mod replay;
mod report;
mod run;
mod show;
mod simulate_line;
mod soundcard_args;
mod stimulus;
mod store_cmd;
mod validate;

use clap::{Parser, Subcommand};
use std::ffi::OsString;
use std::io::IsTerminal;
use std::path::PathBuf;

/// Exit code: pass / success.
pub const EXIT_PASS: i32 = 0;
/// Exit code: a unit failed a check.
pub const EXIT_FAIL: i32 = 1;
/// Exit code: bad input (arguments, plan, files).
pub const EXIT_BAD_INPUT: i32 = 2;
/// Exit code: retest (measurement not valid, rig fault, record not written).
pub const EXIT_RETEST: i32 = 3;

/// End-of-line acoustic test for earphones: synchronized sweep, deconvolution, limit checks,
/// records.
///
/// Exit codes: 0 pass, 1 fail, 2 bad input, 3 retest.
#[derive(Debug, Parser)]
#[command(
    name = "tragus",
    version,
    about,
    long_about = None,
    after_help = "Exit codes: 0 pass, 1 fail, 2 bad input, 3 retest (test the unit again)."
)]
pub struct Cli {
    /// More log output on stderr (-v info, -vv debug, -vvv trace).
    #[arg(short, long, action = clap::ArgAction::Count, global = true)]
    pub verbose: u8,

    /// Never colour the output, log lines included (also when NO_COLOR is set; colour only
    /// ever goes to a terminal).
    #[arg(long, global = true)]
    pub no_color: bool,

    /// The command to run.
    #[command(subcommand)]
    pub command: Command,
}

/// The commands.
#[derive(Debug, Subcommand)]
pub enum Command {
    /// Check test plans (and station files with --station); print one `PATH:LINE:COL:
    /// message` line per problem.
    Validate(validate::Args),
    /// Write the exact signal a plan plays (all output channels) as 32-bit float WAV.
    Stimulus(stimulus::Args),
    /// Judge a recorded capture of a plan's stimulus, or re-analyse a stored record from
    /// the archive (--store DIR --record ID).
    Analyze(analyze::Args),
    /// Test one unit end to end on a rig and record it in the store.
    Run(run::Args),
    /// The operator loop: scan serial numbers, test and record each unit, show the counts.
    Station(operator_loop::Args),
    /// List records from a store, newest first.
    Records(records::ListArgs),
    /// Check a store as a pure reader: every hash and link of the three chains, schema
    /// objects, captures and archived inputs; signatures with --keys, checkpoints with
    /// --checkpoint. Exit 1 on any problem.
    Verify(records::VerifyArgs),
    /// Write a signed checkpoint of the store (each chain's count and head) to keep
    /// elsewhere.
    Checkpoint(checkpoint::Args),
    /// Store maintenance: `store migrate` brings a store to this tragus's schema.
    Store(store_cmd::Args),
    /// Show one record with its provenance (plan, build, station, calibration, capture,
    /// archived inputs, playback, hashes, signature) and recover the plan that judged it.
    Show(show::Args),
    /// Input impedance and transfer functions of a coupler model on the log grid.
    Coupler(coupler::Args),
    /// Calibrate the station: microphone inputs (sound calibrator) and drive outputs.
    Calibrate(calibrate::Args),
    /// List audio hosts and devices: channels, rates, sample formats, defaults.
    Devices(devices::Args),
    /// An operator's listening dose: NIOSH over the shift (default the last 8 h), WHO/ITU-T
    /// H.870 over the last 7 days, minutes left at a level.
    Exposure(exposure::Args),
    /// Station signing keys: make one (`new`), list a keyring (`show`).
    Keys(keys::Args),
    /// The auditor's report of a store: one self-contained HTML file (counts, yields,
    /// failing checks, distributions, response overlays, every unit, verification).
    Report(report::Args),
    /// A store's records as CSV (one row per record and check) or JSON Lines.
    Export(export::Args),
    /// A virtual line: N simulated units of the plan's product with a defect mix, tested
    /// through the engine; predicted yield, Pareto of failing checks, defect × verdict.
    SimulateLine(simulate_line::Args),
    /// Judge a store's raw captures again under another plan or revision (read-only):
    /// verdict transitions, checks newly failing, worst margins, yield before and after.
    Replay(replay::Args),
    /// Test-engineer tools for limits: `limits derive` makes a plan's limits from golden
    /// units in a store (limit CSVs, a new plan revision, a report and a preview).
    Limits(limits::Args),
}

/// Where a `--json` document goes.
#[derive(Debug, Clone)]
pub enum JsonOut {
    /// Standard output (`-`).
    Stdout,
    /// A file.
    File(PathBuf),
}

impl std::str::FromStr for JsonOut {
    type Err = std::convert::Infallible;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        Ok(if s == "-" {
            JsonOut::Stdout
        } else {
            JsonOut::File(PathBuf::from(s))
        })
    }
}

impl JsonOut {
    /// Write a JSON document (pretty, newline-terminated) atomically for files.
    pub fn write(&self, value: &impl serde::Serialize) -> anyhow::Result<()> {
        let mut text = serde_json::to_string_pretty(value)?;
        text.push('\n');
        match self {
            JsonOut::Stdout => stdout_bytes(text.as_bytes())?,
            JsonOut::File(path) => write_atomic(path, text.as_bytes())?,
        }
        Ok(())
    }

    /// True when the document goes to stdout (human output then stays off stdout).
    pub fn is_stdout(&self) -> bool {
        matches!(self, JsonOut::Stdout)
    }
}

/// Set once stdout can take no more (its reader went away, or a write failed): nothing
/// more is written there.
static STDOUT_CLOSED: std::sync::atomic::AtomicBool = std::sync::atomic::AtomicBool::new(false);

/// The first failure writing stdout other than a closed pipe, reported when the command
/// ends (a `println!` would have panicked mid-command).
static STDOUT_ERROR: std::sync::Mutex<Option<std::io::Error>> = std::sync::Mutex::new(None);

/// Write `bytes` to stdout and flush. A closed pipe is not an error: the reader has all it
/// wanted, and the rest of the output is dropped.
pub(crate) fn stdout_bytes(bytes: &[u8]) -> std::io::Result<()> {
    use std::io::Write;
    use std::sync::atomic::Ordering;
    if STDOUT_CLOSED.load(Ordering::Relaxed) {
        return Ok(());
    }
    let mut out = std::io::stdout().lock();
    match out.write_all(bytes).and_then(|()| out.flush()) {
        Err(e) if e.kind() == std::io::ErrorKind::BrokenPipe => {
            STDOUT_CLOSED.store(true, Ordering::Relaxed);
            Ok(())
        }
        other => other,
    }
}

/// What `out!` and `outln!` call: like [`stdout_bytes`], with any other failure kept
/// for [`main_with_args`] to report once the command has finished.
pub(crate) fn write_stdout(args: std::fmt::Arguments<'_>) {
    let text = std::fmt::format(args);
    if let Err(e) = stdout_bytes(text.as_bytes()) {
        STDOUT_CLOSED.store(true, std::sync::atomic::Ordering::Relaxed);
        let mut slot = STDOUT_ERROR.lock().unwrap_or_else(|p| p.into_inner());
        slot.get_or_insert(e);
    }
}

/// Write a file through a temporary sibling and a rename, so a crash never leaves half a
/// file under the final name.
pub(crate) fn write_atomic(path: &std::path::Path, bytes: &[u8]) -> anyhow::Result<()> {
    use anyhow::Context;
    use std::io::Write;
    let dir = path
        .parent()
        .filter(|p| !p.as_os_str().is_empty())
        .unwrap_or(std::path::Path::new("."));
    let name = path
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_else(|| "out".into());
    let tmp = dir.join(format!(".{name}.tmp-{}", std::process::id()));
    let result = (|| -> std::io::Result<()> {
        let mut f = std::fs::File::create(&tmp)?;
        f.write_all(bytes)?;
        f.sync_all()?;
        std::fs::rename(&tmp, path)
    })();
    if result.is_err() {
        let _ = std::fs::remove_file(&tmp);
    }
    result.with_context(|| format!("{}: cannot write", path.display()))
}

/// An error with the exit code it maps to.
#[derive(Debug)]
pub(crate) struct Exit {
    pub code: i32,
    pub error: anyhow::Error,
}

impl Exit {
    pub fn bad_input(error: impl Into<anyhow::Error>) -> Self {
        Exit {
            code: EXIT_BAD_INPUT,
            error: error.into(),
        }
    }
    pub fn retest(error: impl Into<anyhow::Error>) -> Self {
        Exit {
            code: EXIT_RETEST,
            error: error.into(),
        }
    }
    /// Every problem of a plan or model file as one bad-input error: a heading, then one
    /// `path:line:col: message` line per problem.
    pub fn problems<P: std::fmt::Display>(what: &str, problems: &[P]) -> Self {
        Exit::bad_input(anyhow::anyhow!(
            "invalid {what} ({} problem(s)):\n{}",
            problems.len(),
            problems
                .iter()
                .map(|p| p.to_string())
                .collect::<Vec<_>>()
                .join("\n")
        ))
    }
    /// A file or device the user named is wrong → bad input; the rig failed → retest.
    pub fn from_rig(e: crate::rig::RigError) -> Self {
        match e {
            crate::rig::RigError::BadInput { .. } => Exit::bad_input(e),
            crate::rig::RigError::Fault(_) => Exit::retest(e),
        }
    }
}

impl From<crate::bench::BenchError> for Exit {
    fn from(e: crate::bench::BenchError) -> Self {
        use crate::bench::ErrorKind;
        Exit {
            code: match e.kind() {
                ErrorKind::BadInput => EXIT_BAD_INPUT,
                ErrorKind::Retest => EXIT_RETEST,
            },
            error: anyhow::Error::new(e),
        }
    }
}

impl From<crate::bench::UnitStop> for Exit {
    fn from(e: crate::bench::UnitStop) -> Self {
        match e {
            crate::bench::UnitStop::Error(e) => e.into(),
            crate::bench::UnitStop::Abandoned => Exit::retest(anyhow::anyhow!(
                "the unit was abandoned and NOT recorded; test it again"
            )),
        }
    }
}

/// The `--rig` values: the library's one rig-kind enum, parsed by its own words.
pub(crate) fn rig_kind_parser(
) -> impl clap::builder::TypedValueParser<Value = crate::station::RigKind> {
    use clap::builder::{PossibleValue, PossibleValuesParser, TypedValueParser};
    PossibleValuesParser::new([
        PossibleValue::new("simulated").help("The simulated earphone and fixture (no hardware)"),
        PossibleValue::new("soundcard").help("A sound card (the station's audio settings)"),
    ])
    .try_map(|s| s.parse::<crate::station::RigKind>())
}

/// Show the cautions once, on a station's first run (a store that does not exist yet),
/// before anything plays (on stderr, so JSON on stdout stays clean).
pub(crate) fn show_cautions_if_new(bench: &crate::bench::Bench) {
    if bench.is_new_store() {
        eprint!("{}", crate::safety::CAUTIONS);
    }
}

/// Output settings shared by the commands.
#[derive(Debug, Clone, Copy)]
pub(crate) struct Output {
    pub color: bool,
    /// Colour is allowed (no --no-color, no NO_COLOR) on whichever stream is a terminal.
    pub color_allowed: bool,
}

/// `ansi`: colour the log lines (only when colour is allowed and stderr is a terminal).
fn init_tracing(verbose: u8, ansi: bool) {
    let level = match verbose {
        0 => "warn",
        1 => "info",
        2 => "debug",
        _ => "trace",
    };
    let filter = tracing_subscriber::EnvFilter::try_from_env("TRAGUS_LOG")
        .unwrap_or_else(|_| tracing_subscriber::EnvFilter::new(format!("tragus={level}")));
    let _ = tracing_subscriber::fmt()
        .with_env_filter(filter)
        .with_writer(std::io::stderr)
        .with_target(false)
        .with_ansi(ansi)
        .try_init();
}

/// Run with the given arguments and return the process exit code.
pub fn main_with_args<I: IntoIterator<Item = OsString>>(args: I) -> i32 {
    let cli = match Cli::try_parse_from(args) {
        Ok(cli) => cli,
        Err(e) => {
            let code = match e.kind() {
                clap::error::ErrorKind::DisplayHelp | clap::error::ErrorKind::DisplayVersion => {
                    EXIT_PASS
                }
                _ => EXIT_BAD_INPUT,
            };
            let _ = e.print();
            return code;
        }
    };
    let color_allowed = !cli.no_color && std::env::var_os("NO_COLOR").is_none();
    init_tracing(
        cli.verbose,
        color_allowed && std::io::stderr().is_terminal(),
    );
    let out = Output {
        color: color_allowed && std::io::stdout().is_terminal(),
        color_allowed,
    };
    let result = match cli.command {
        Command::Validate(a) => validate::run(a),
        Command::Stimulus(a) => stimulus::run(a),
        Command::Analyze(a) => analyze::run(a, out),
        Command::Run(a) => run::run(a, out),
        Command::Station(a) => operator_loop::run(a, out),
        Command::Records(a) => records::list(a),
        Command::Verify(a) => records::verify(a),
        Command::Checkpoint(a) => checkpoint::run(a),
        Command::Store(a) => store_cmd::run(a),
        Command::Show(a) => show::run(a),
        Command::Coupler(a) => coupler::run(a),
        Command::Calibrate(a) => calibrate::run(a),
        Command::Devices(a) => devices::run(a),
        Command::Exposure(a) => exposure::run(a),
        Command::Keys(a) => keys::run(a),
        Command::Report(a) => report::run(a),
        Command::Export(a) => export::run(a),
        Command::SimulateLine(a) => simulate_line::run(a, out),
        Command::Replay(a) => replay::run(a),
        Command::Limits(a) => limits::run(a),
    };
    let code = match result {
        Ok(code) => code,
        Err(Exit { code, error }) => {
            error_line(&format_error(&error));
            code
        }
    };
    let failed = STDOUT_ERROR
        .lock()
        .unwrap_or_else(|p| p.into_inner())
        .take();
    match failed {
        // Output the user asked for went missing: never a silent success.
        Some(e) => {
            error_line(&format!("cannot write to standard output: {e}"));
            if code == EXIT_PASS {
                EXIT_BAD_INPUT
            } else {
                code
            }
        }
        None => code,
    }
}

/// `tragus: message` on stderr; a closed stderr leaves nowhere to say it, so no panic.
fn error_line(message: &str) {
    use std::io::Write;
    let _ = writeln!(std::io::stderr().lock(), "tragus: {message}");
}

/// `outer: inner: innermost`, without repeating text a cause already contains.
fn format_error(error: &anyhow::Error) -> String {
    let mut parts: Vec<String> = Vec::new();
    for cause in error.chain() {
        let s = cause.to_string();
        if !parts.iter().any(|p| p.contains(&s)) {
            parts.push(s);
        }
    }
    parts.join(": ")
}
