//! `tragus station --station FILE --plan PLAN [--operator NAME]`: the operator loop.
//!
//! Reads serial numbers as lines on stdin (a barcode scanner types them and presses
//! Enter), tests and records each unit ([`crate::bench`]), shows the verdict in large words
//! (colour only on a terminal), the failed checks with their margins and the running counts
//! ([`crate::bench::tally`] defines them). Before each unit it shows the serial's earlier
//! results from the store (any station, any day), and after it what they decided: a FAIL
//! for too many retests, a pass after a fail ([`crate::bench::history`]). Blank lines are skipped; a line that is not a
//! serial number by [`crate::serial`]'s rule (the one `run --serial` keeps) once trimmed is
//! refused with a message and the loop goes on.
//!
//! Stopping: end of input stops cleanly. The first Ctrl-C (SIGINT) while a unit is being
//! tested lets it finish and be recorded, then stops; while waiting for a serial it stops
//! at once. A second Ctrl-C during a unit abandons it: it is not recorded (the check is the
//! last thing before the store's single transaction, so there is never half a record). The
//! summary is printed on every stop; exit code 0 on a clean stop (end of input or Ctrl-C),
//! else the code of the error that stopped the loop (2 bad input, 3 record not written).
//!
//! `--json OUT` writes JSON Lines: one `{"kind":"unit",...}` line per recorded unit, then one
//! `{"kind":"summary",...}` line. With `--json -` the operator screen goes to stderr.

use super::soundcard_args::SoundcardArgs;
use super::{Exit, JsonOut, Output, EXIT_PASS};
use crate::bench::history;
use crate::bench::tally::{Counts, Tally};
use crate::bench::{Bench, BenchOptions, SimChoice, Tested, UnitStop};
use crate::serial::check_serial;
use anyhow::Context;
use std::collections::HashMap;
use std::io::{BufRead, IsTerminal, Write};
use std::path::PathBuf;
use std::sync::atomic::{AtomicU32, Ordering};
use std::sync::{mpsc, Arc};
use std::time::Duration;

/// Arguments of `station`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Station file (channel map, fixture, store, rig, station id and mode).
    #[arg(long, value_name = "FILE")]
    pub station: PathBuf,
    /// The test plan every unit is tested with.
    #[arg(long, value_name = "PLAN")]
    pub plan: PathBuf,
    /// Operator recorded with every unit (defaults to $USER).
    #[arg(long)]
    pub operator: Option<String>,
    /// Store directory; wins over the station's `store`.
    #[arg(long, value_name = "DIR")]
    pub store: Option<PathBuf>,
    /// Write JSON Lines here (`-` for stdout): one line per recorded unit, then a summary.
    #[arg(long, value_name = "OUT")]
    pub json: Option<JsonOut>,
    /// Simulated rig: simulate this serial as this unit kind (`SERIAL=KIND` or
    /// `SERIAL=KIND@CHANNEL`, kinds as `run --sim-unit`); repeatable. Other serials are
    /// `nominal` units. For demonstrations and tests.
    #[arg(long, value_name = "SERIAL=KIND")]
    pub sim_unit: Vec<String>,
    /// Simulated rig: take as long per unit as the sweep takes to play on a sound card
    /// (operator training; tests use it to press Ctrl-C during a unit).
    #[arg(long)]
    pub sim_realtime: bool,
    /// At the end of the session (the shift), write a checkpoint of the store signed with
    /// the station key into this directory; keep it off the station.
    #[arg(long, value_name = "DIR")]
    pub checkpoint_dir: Option<PathBuf>,
    /// Sound-card options (override the station's `audio:` settings).
    #[command(flatten)]
    pub soundcard: SoundcardArgs,
}

/// Why the loop stopped.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "snake_case")]
enum StopReason {
    EndOfInput,
    Interrupt,
    Error,
}

/// Where the JSON lines go.
enum Lines {
    Stdout,
    File(std::fs::File, PathBuf),
}

impl Lines {
    fn open(j: &JsonOut) -> Result<Self, Exit> {
        Ok(match j {
            JsonOut::Stdout => Lines::Stdout,
            JsonOut::File(p) => {
                let f = std::fs::OpenOptions::new()
                    .create(true)
                    .append(true)
                    .open(p)
                    .with_context(|| format!("{}: cannot open for writing", p.display()))
                    .map_err(Exit::bad_input)?;
                Lines::File(f, p.clone())
            }
        })
    }

    /// One compact JSON document and a newline, flushed at once (a reader sees every
    /// unit as it is recorded).
    fn write(&mut self, value: &serde_json::Value) -> anyhow::Result<()> {
        let mut text = serde_json::to_string(value)?;
        text.push('\n');
        match self {
            Lines::Stdout => {
                let mut o = std::io::stdout().lock();
                o.write_all(text.as_bytes())?;
                o.flush()?;
            }
            Lines::File(f, p) => {
                f.write_all(text.as_bytes())
                    .and_then(|_| f.flush())
                    .with_context(|| format!("{}: cannot write", p.display()))?;
            }
        }
        Ok(())
    }
}

/// The operator screen: stdout, or stderr when JSON goes to stdout.
struct Screen {
    to_stderr: bool,
    color: bool,
    terminal: bool,
}

impl Screen {
    fn print(&self, text: &str) {
        // A closed screen (a pipe whose reader went away) must not stop the tests of
        // units already scanned: the store and the JSON lines are the record.
        if self.to_stderr {
            let mut e = std::io::stderr().lock();
            let _ = e.write_all(text.as_bytes());
            let _ = e.flush();
        } else {
            let mut o = std::io::stdout().lock();
            let _ = o.write_all(text.as_bytes());
            let _ = o.flush();
        }
    }
}

fn parse_sim_units(bench: &Bench, specs: &[String]) -> Result<HashMap<String, SimChoice>, Exit> {
    let mut map = HashMap::new();
    for spec in specs {
        let Some((serial, rest)) = spec.split_once('=') else {
            return Err(Exit::bad_input(anyhow::anyhow!(
                "--sim-unit: expected SERIAL=KIND or SERIAL=KIND@CHANNEL, found `{spec}`"
            )));
        };
        check_serial(serial)
            .map_err(|e| Exit::bad_input(anyhow::anyhow!("--sim-unit {spec}: {e}")))?;
        let (kind, channel) = match rest.split_once('@') {
            Some((k, c)) => (k, Some(c)),
            None => (rest, None),
        };
        map.insert(serial.to_string(), bench.sim_choice(kind, channel)?);
    }
    Ok(map)
}

fn counts_line(c: &Counts) -> String {
    let fpy = c
        .first_pass_yield
        .map_or_else(|| "—".to_string(), |y| format!("{:.1} %", 100.0 * y));
    format!(
        "tested {} · pass {} · fail {} · retest {} · retested {} · tests {} · first-pass yield {} \
         (of {} first tested)",
        c.tested, c.pass, c.fail, c.retest, c.retested, c.tests, fpy, c.first_tested
    )
}

pub(crate) fn run(args: Args, out: Output) -> Result<i32, Exit> {
    let station = crate::bench::load_station(&args.station)?;
    let mut bench = Bench::new(BenchOptions {
        plan: &args.plan,
        station: Some(&station),
        fixture: None,
        rig: None,
        store: args.store.clone(),
        station_id: None,
        operator: args.operator.clone(),
        calibration: None,
        non_production: false,
        soundcard: args.soundcard.spec_for(Some(&station)),
        record_refusals: true,
    })?;
    bench.pace_realtime = args.sim_realtime;
    super::show_cautions_if_new(&bench);
    let sims = parse_sim_units(&bench, &args.sim_unit)?;
    let nominal = bench.sim_choice("nominal", None)?;
    let mut lines = args.json.as_ref().map(Lines::open).transpose()?;
    let to_stderr = args.json.as_ref().is_some_and(JsonOut::is_stdout);
    let terminal = if to_stderr {
        std::io::stderr().is_terminal()
    } else {
        std::io::stdout().is_terminal()
    };
    let screen = Screen {
        to_stderr,
        color: out.color_allowed && terminal,
        terminal,
    };

    // Ctrl-C only counts; the loop decides what it means at its safe points.
    let interrupts = Arc::new(AtomicU32::new(0));
    {
        let i = Arc::clone(&interrupts);
        ctrlc::set_handler(move || {
            i.fetch_add(1, Ordering::SeqCst);
        })
        .context("cannot install the Ctrl-C handler")
        .map_err(Exit::bad_input)?;
    }

    // Stdin on its own thread, so that a Ctrl-C while waiting for a serial stops at once
    // (a blocked read would not return).
    let (tx, rx) = mpsc::channel::<std::io::Result<String>>();
    std::thread::spawn(move || {
        for line in std::io::stdin().lock().lines() {
            let end = line.is_err();
            if tx.send(line).is_err() || end {
                break;
            }
        }
    });

    screen.print(&format!(
        "station {} ({}) · plan {} rev {} · store {}\nscan a serial number (Ctrl-C or end of input to stop)\n",
        bench.station.id,
        bench.station.mode.as_str(),
        bench.prep.plan.id,
        bench.prep.plan.revision,
        bench.store.display()
    ));

    let mut tally = Tally::new();
    let mut refused = 0u64;
    let mut line_no = 0u64;
    let mut abandoned: Option<String> = None;
    let mut error: Option<Exit> = None;
    let reason = loop {
        if interrupts.load(Ordering::SeqCst) > 0 {
            break StopReason::Interrupt;
        }
        let line = match rx.recv_timeout(Duration::from_millis(100)) {
            Err(mpsc::RecvTimeoutError::Timeout) => continue,
            Err(mpsc::RecvTimeoutError::Disconnected) => break StopReason::EndOfInput,
            Ok(Err(e)) => {
                error = Some(Exit::bad_input(
                    anyhow::Error::new(e).context("cannot read serial numbers from stdin"),
                ));
                break StopReason::Error;
            }
            Ok(Ok(l)) => l,
        };
        line_no += 1;
        let serial = line.trim();
        if serial.is_empty() {
            continue;
        }
        if let Err(why) = check_serial(serial) {
            refused += 1;
            screen.print(&format!(
                "refused input line {line_no}: {why}; scan again\n"
            ));
            continue;
        }
        let sim = sims.get(serial).unwrap_or(&nominal).clone();
        // The unit's earlier results, from every station writing to this store; the test
        // reads them again for its retest limit.
        match bench.history(serial) {
            Ok(h) => {
                if let Some(line) = h.summary_line(&bench.retest_rule) {
                    screen.print(&format!("{line}\n"));
                }
            }
            Err(e) => {
                error = Some(e.into());
                break StopReason::Error;
            }
        }
        screen.print(&format!("testing {serial} …\n"));
        let progress = screen.terminal.then(|| {
            let pb = indicatif::ProgressBar::new_spinner();
            pb.set_draw_target(if to_stderr {
                indicatif::ProgressDrawTarget::stderr()
            } else {
                indicatif::ProgressDrawTarget::stdout()
            });
            pb.set_message(format!(
                "{serial}: sweep of {:.1} s playing, then analysis",
                bench.stimulus_duration_s()
            ));
            pb.enable_steady_tick(Duration::from_millis(100));
            pb
        });
        let abandon = || interrupts.load(Ordering::SeqCst) >= 2;
        // A listening step's answer is the next input line: `p`/`pass` or `f`/`fail`.
        let listen = |prompt: &str| -> Option<bool> {
            eprintln!("{prompt} [p/f]");
            loop {
                if interrupts.load(Ordering::SeqCst) > 0 {
                    return None;
                }
                match rx.recv_timeout(Duration::from_millis(100)) {
                    Err(mpsc::RecvTimeoutError::Timeout) => continue,
                    Err(mpsc::RecvTimeoutError::Disconnected) | Ok(Err(_)) => return None,
                    Ok(Ok(l)) => match parse_answer(&l) {
                        Some(a) => return Some(a),
                        None => eprintln!("answer p (pass) or f (fail)"),
                    },
                }
            }
        };
        let outcome = bench.test_and_record(serial, &sim, &abandon, &listen);
        if let Some(pb) = progress {
            pb.finish_and_clear();
        }
        match outcome {
            Ok(Tested { result, stored }) => {
                let first_ever = result.history.as_ref().is_none_or(|h| h.earlier_tests == 0);
                let repeat = tally.add_tested(serial, result.verdict, first_ever);
                let counts = tally.counts();
                let mut text = crate::report::render_operator(&result, screen.color);
                for line in history::outcome_lines(result.history.as_ref()) {
                    text.push_str(&format!("  {line}\n"));
                }
                if repeat {
                    text.push_str("  (retest of a unit already tested this session)\n");
                }
                text.push_str(&format!(
                    "  recorded as #{} · {}\n\n",
                    stored.id,
                    counts_line(&counts)
                ));
                screen.print(&text);
                if let Some(l) = &mut lines {
                    let doc = serde_json::json!({
                        "kind": "unit",
                        "record": stored.id,
                        "repeat": repeat,
                        "counts": counts,
                        "result": result,
                    });
                    if let Err(e) = l.write(&doc) {
                        error = Some(Exit::bad_input(e));
                        break StopReason::Error;
                    }
                }
            }
            Err(UnitStop::Abandoned) => {
                screen.print(&format!(
                    "ABANDONED {serial}: NOT recorded; test it again\n"
                ));
                abandoned = Some(serial.to_string());
                break StopReason::Interrupt;
            }
            Err(UnitStop::Error(e)) => {
                error = Some(e.into());
                break StopReason::Error;
            }
        }
    };

    let counts = tally.counts();
    let mut text = format!(
        "\nsession over ({}): {}\n",
        match reason {
            StopReason::EndOfInput => "end of input",
            StopReason::Interrupt => "Ctrl-C",
            StopReason::Error => "error",
        },
        counts_line(&counts)
    );
    if refused > 0 {
        text.push_str(&format!("refused input lines: {refused}\n"));
    }
    if let Some(s) = &abandoned {
        text.push_str(&format!("abandoned, not recorded: {s}\n"));
    }
    let mut checkpoint = None;
    if let Some(dir) = &args.checkpoint_dir {
        match bench.write_checkpoint(dir) {
            Ok(path) => {
                text.push_str(&format!("checkpoint written: {}\n", path.display()));
                checkpoint = Some(path);
            }
            Err(e) => {
                text.push_str(&format!("checkpoint NOT written: {e}\n"));
                error.get_or_insert(Exit::from(e));
            }
        }
    }
    screen.print(&text);
    if let Some(l) = &mut lines {
        let doc = serde_json::json!({
            "kind": "summary",
            "stopped_by": reason,
            "station": bench.station,
            "counts": counts,
            "refused_lines": refused,
            "abandoned": abandoned,
            "checkpoint": checkpoint,
        });
        if let Err(e) = l.write(&doc) {
            error.get_or_insert(Exit::bad_input(e));
        }
    }
    match error {
        Some(e) => Err(e),
        None => Ok(EXIT_PASS),
    }
}

/// An operator's answer to a listening step: `p`/`pass` → pass, `f`/`fail` → fail
/// (case-insensitive, spaces ignored); anything else is no answer.
pub(crate) fn parse_answer(line: &str) -> Option<bool> {
    match line.trim().to_ascii_lowercase().as_str() {
        "p" | "pass" => Some(true),
        "f" | "fail" => Some(false),
        _ => None,
    }
}

/// Ask a listening step's answer on the terminal (stdin); `None` when stdin is not a
/// terminal or gives no valid answer.
pub(crate) fn ask_terminal(prompt: &str) -> Option<bool> {
    use std::io::{BufRead, IsTerminal};
    if !std::io::stdin().is_terminal() {
        return None;
    }
    eprintln!("{prompt} [p/f]");
    let mut line = String::new();
    std::io::stdin().lock().read_line(&mut line).ok()?;
    parse_answer(&line)
}
