//! A virtual line: N simulated units of the plan's own product, with a known defect mix,
//! tested through the real engine ([`Bench::test_unit`]: pilot, guard, analysis,
//! correction, checks), to predict a plan's yield and see which defects its checks catch.
//!
//! Each unit is a member of the simulated population (its serial picks its spread, see
//! [`crate::rig::simulated`]); the mix ([`DefectMix`]) decides which units carry which
//! defect and on which channel. A unit whose first test is a RETEST is reseated and tested
//! once more, as an operator would: its first test counts for the first-pass yield, its last
//! for the final verdict. With `record`, every test is appended to the bench's store as the
//! bench writes any record (signed when the station has a key); without, nothing is written.
//!
//! The fixture tables and the correction are made once per line: the correction with the
//! bench ([`super::Prepared`]), the fixture's per-frequency tables at the first unit, shared
//! by every later unit and by every worker thread; only each unit's own parameters are
//! computed per unit. Workers (`jobs`) each test their share of units on their own bench;
//! every unit's outcome depends only on (seed, serial, reseat), so the report is the same
//! whatever the number of workers.

pub mod mix;
pub mod report;

pub use mix::{DefectMix, MixError};
pub use report::{build_report, LineReport, ReportHeader, UnitLine};

use super::{Bench, BenchError, SimChoice, UnitOutcome};
use crate::plan::checks::CheckKind;
use crate::rig::simulated::{Defect, UnitKind};
use crate::Verdict;
use report::{Closest, MixEntry, NO_DEFECT};
use std::collections::BTreeMap;
use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};
use std::sync::mpsc;

/// Default serial prefix of virtual units (`VL-000001`, …): apart from any real serial.
pub const DEFAULT_SERIAL_PREFIX: &str = "VL-";

/// What a virtual line tests.
#[derive(Debug, Clone)]
pub struct LineOptions {
    /// Units to test (at least 1).
    pub units: usize,
    /// Which defects, in which fractions.
    pub mix: DefectMix,
    /// Population seed (spread, noise, defect placement); `None`: the plan's `rig.seed`.
    pub seed: Option<u64>,
    /// Serial prefix; unit k (from 1) is `PREFIX` + k on 6 digits.
    pub serial_prefix: String,
    /// Append every test to the bench's store.
    pub record: bool,
    /// Worker threads (at least 1).
    pub jobs: usize,
}

/// One unit to build: its serial and its defect on a channel.
#[derive(Debug, Clone)]
struct Planned {
    serial: String,
    defect: Option<(Defect, usize)>,
}

/// One unit tested: its summary and, when recording, its tests' outcomes in order.
struct UnitRun {
    line: UnitLine,
    outcomes: Vec<UnitOutcome>,
}

/// Refuse what a virtual line cannot do, before anything plays.
fn check_bench(bench: &Bench, opts: &LineOptions) -> Result<(), BenchError> {
    if opts.units == 0 {
        return Err(BenchError::bad_input(
            "--units: expected at least 1 unit, found 0",
        ));
    }
    if bench.rig_kind() != crate::station::RigKind::Simulated {
        return Err(BenchError::bad_input(
            "simulate-line: expected the simulated rig, found the sound card (a virtual \
             line simulates its units)",
        ));
    }
    let plan = &bench.prep.plan;
    if let Some(c) = plan
        .checks
        .iter()
        .find(|c| matches!(c.kind, CheckKind::Listening { .. }))
    {
        return Err(BenchError::bad_input(format!(
            "simulate-line: expected a plan without listening steps (a virtual unit has \
             nobody to listen to it), found check `{}` of kind listening",
            c.id
        )));
    }
    let width = 6usize.max(opts.units.to_string().len());
    let last = format!("{}{:0width$}", opts.serial_prefix, opts.units);
    crate::serial::check_serial(&last)
        .map_err(|e| BenchError::bad_input(format!("--serial-prefix: {e}")))?;
    Ok(())
}

/// The units of the line: serials and defects, from the mix and the seed.
fn plan_units(opts: &LineOptions, n_channels: usize, seed: u64) -> Vec<Planned> {
    let width = 6usize.max(opts.units.to_string().len());
    opts.mix
        .assign(opts.units, n_channels, seed)
        .into_iter()
        .enumerate()
        .map(|(k, defect)| Planned {
            serial: format!("{}{:0width$}", opts.serial_prefix, k + 1),
            defect,
        })
        .collect()
}

/// Test one unit (and once more after a retest), summarised.
fn test_one(bench: &mut Bench, u: &Planned, keep: bool) -> Result<UnitRun, BenchError> {
    let (kind, channel) = match u.defect {
        Some((d, c)) => (UnitKind::Defect(d), c),
        None => (UnitKind::Nominal, 0),
    };
    let mut sim = SimChoice {
        kind,
        defect_channel: channel,
        label: kind.to_string(),
        amplifier_db: 0.0,
        reseat: 0,
    };
    let no_answer = |_: &str| None;
    let first = bench.test_unit(&u.serial, &sim, &no_answer)?;
    let first_verdict = first.result.verdict;
    let mut outcomes = Vec::new();
    let last = if first_verdict == Verdict::Retest {
        sim.reseat = 1;
        let second = bench.test_unit(&u.serial, &sim, &no_answer)?;
        if keep {
            outcomes.push(first);
        }
        second
    } else {
        first
    };
    let r = &last.result;
    let mut failed: Vec<String> = r
        .checks
        .iter()
        .filter(|c| c.verdict == Verdict::Fail)
        .map(|c| c.id.clone())
        .collect();
    failed.sort();
    failed.dedup();
    let closest = r
        .checks
        .iter()
        .filter_map(|c| c.worst_margin_db.map(|m| (m, c)))
        .min_by(|a, b| a.0.total_cmp(&b.0))
        .map(|(m, c)| Closest {
            check: c.id.clone(),
            channel: c.channel.clone(),
            margin_db: m,
            at_hz: c.at_hz,
        });
    let plan = &bench.prep.plan;
    let line = UnitLine {
        serial: u.serial.clone(),
        defect: u
            .defect
            .map_or(NO_DEFECT.to_string(), |(d, _)| d.to_string()),
        defect_channel: u
            .defect
            .and_then(|(_, c)| plan.channels.get(c).map(|ch| ch.name.clone())),
        first_verdict,
        final_verdict: r.verdict,
        tests: if first_verdict == Verdict::Retest {
            2
        } else {
            1
        },
        failed_checks: failed,
        retest_reasons: r.retest_reasons.clone(),
        closest,
    };
    if keep {
        outcomes.push(last);
    }
    Ok(UnitRun { line, outcomes })
}

/// Test a virtual line. `make_bench` builds a bench for the plan on the station (called
/// once, and once more per extra worker); `progress` is told the units done so far, in
/// order. The report is the same for any `jobs`.
pub fn simulate_line(
    make_bench: &(dyn Fn() -> Result<Bench, BenchError> + Sync),
    opts: &LineOptions,
    progress: &mut dyn FnMut(usize),
) -> Result<LineReport, BenchError> {
    let mut main = make_bench()?;
    check_bench(&main, opts)?;
    let seed = opts.seed.unwrap_or(main.population_seed());
    main.set_population_seed(seed);
    let plan = &main.prep.plan;
    let units = plan_units(opts, plan.channels.len(), seed);
    let counts = opts.mix.counts(opts.units);
    let header = ReportHeader {
        plan: (plan.id.clone(), plan.revision, plan.sha256.clone()),
        station: main.station.id.clone(),
        product: plan
            .simulated_earphone()
            .filter(|_| main.population().is_some())
            .map_or("demo earbud".to_string(), |e| e.named_by.to_string()),
        seed,
        mix: opts
            .mix
            .parts
            .iter()
            .zip(&counts)
            .map(|((d, f), (_, c))| MixEntry {
                defect: d.to_string(),
                fraction: *f,
                units: *c,
            })
            .collect(),
    };
    let jobs = opts.jobs.clamp(1, units.len());
    let mut lines: Vec<Option<UnitLine>> = vec![None; units.len()];
    let mut pending: BTreeMap<usize, UnitRun> = BTreeMap::new();
    let mut next = 0usize;
    // Units are recorded and counted in serial order, whichever worker finished first.
    let mut take = |k: usize, run: UnitRun, main: &Bench| -> Result<(), BenchError> {
        pending.insert(k, run);
        while let Some(run) = pending.remove(&next) {
            for outcome in run.outcomes {
                main.record(outcome)?;
            }
            lines[next] = Some(run.line);
            next += 1;
            progress(next);
        }
        Ok(())
    };
    if jobs == 1 {
        for (k, u) in units.iter().enumerate() {
            let run = test_one(&mut main, u, opts.record)?;
            take(k, run, &main)?;
        }
    } else {
        let cursor = AtomicUsize::new(0);
        let stop = AtomicBool::new(false);
        let (tx, rx) = mpsc::channel::<Result<(usize, UnitRun), BenchError>>();
        let population = main.population().cloned();
        std::thread::scope(|s| -> Result<(), BenchError> {
            for _ in 0..jobs {
                let tx = tx.clone();
                let (cursor, stop, units) = (&cursor, &stop, &units);
                let population = population.clone();
                s.spawn(move || {
                    let mut bench = match make_bench() {
                        Ok(b) => b,
                        Err(e) => {
                            let _ = tx.send(Err(e));
                            return;
                        }
                    };
                    bench.set_population_seed(seed);
                    // The same fixture tables for every worker: made once per line.
                    bench.share_population(population);
                    while !stop.load(Ordering::Relaxed) {
                        let k = cursor.fetch_add(1, Ordering::Relaxed);
                        let Some(u) = units.get(k) else { break };
                        let r = test_one(&mut bench, u, opts.record).map(|run| (k, run));
                        let failed = r.is_err();
                        if tx.send(r).is_err() || failed {
                            break;
                        }
                    }
                });
            }
            drop(tx);
            for r in rx {
                let step = r.and_then(|(k, run)| take(k, run, &main));
                if let Err(e) = step {
                    stop.store(true, Ordering::Relaxed);
                    return Err(e);
                }
            }
            Ok(())
        })?;
    }
    let lines = lines
        .into_iter()
        .collect::<Option<Vec<_>>>()
        .ok_or_else(|| BenchError::retest("a worker stopped before testing every unit"))?;
    Ok(build_report(header, lines))
}
