//! Replay: the stored raw captures of a store judged again under another plan (or another
//! revision of the same plan), to see what the new limits would have done to units already
//! tested.
//!
//! Each selected record is judged as [`super::reanalyze`] judges it — its own archived
//! station file and `--fixture` model, the calibration it was judged under, the gains it
//! was really played at, its raw capture, the operator's listening answers and the rig's
//! faults carried over, an abandoned sweep left unjudged — except that the plan is the
//! new one. The store is opened read-only and nothing in it is written.
//!
//! The work is split so that nothing is built per unit that does not change per unit:
//!
//! 1. [`Replay::open`] loads the new plan once (a plan that does not load is bad input, with
//!    every `file:line:col`) and selects the records;
//! 2. [`Replay::run`] reads each distinct archived input once, loads the new plan on each
//!    distinct (station file, calibration file, fixture model) of the selection once —
//!    stimulus, analyzer, fixture→reference correction tables —, and the plan each record
//!    was tested with once per (plan, station file), to tell whether its capture can be
//!    judged under the new plan at all (same stimulus and sample rate, same routing of
//!    every channel, same level unit: otherwise the record is *not replayable*, with the
//!    reason);
//! 3. the records are then judged in parallel on a pool of `jobs` threads, each thread
//!    taking an analyzer of its own (the analysis keeps scratch buffers) built from the
//!    shared plan, stimulus and correction tables.
//!
//! What the report holds and how yield is counted: see [`ReplayReport`].

mod judge;
mod report;
mod setting;

pub use report::{
    CheckChange, CheckPair, CheckSide, NotReplayable, RecordReplay, Reproduction,
    ReproductionDifference, Transition, Yield, Yields,
};

use super::BenchError;
use crate::store::{RecordFilter, Store, StoredRecord};
use std::path::{Path, PathBuf};
use time::OffsetDateTime;

/// Which records to replay, and on how many threads.
#[derive(Debug, Clone, Default)]
pub struct ReplayOptions {
    /// Only records measured at or after this instant (inclusive).
    pub since: Option<OffsetDateTime>,
    /// Only records measured before this instant (exclusive).
    pub until: Option<OffsetDateTime>,
    /// Only these serial numbers (empty: every serial). A serial the store has no record
    /// of is bad input.
    pub serials: Vec<String>,
    /// Only records of this station id. A station the store has no record of is bad input.
    pub station: Option<String>,
    /// Threads judging records (`None`: one per core).
    pub jobs: Option<usize>,
}

/// A replay set up: the new plan loaded, the records selected, nothing judged yet.
pub struct Replay {
    store: Store,
    store_dir: PathBuf,
    plan_path: PathBuf,
    plan: crate::plan::Plan,
    records: Vec<StoredRecord>,
    options: ReplayOptions,
    jobs: usize,
}

impl Replay {
    /// Open the store in `store_dir` read-only, load the plan `plan` and select the records
    /// (oldest first). Bad input: no store there, a plan that does not load, an unknown
    /// serial or station, `jobs` of 0.
    pub fn open(
        store_dir: &Path,
        plan: &Path,
        options: &ReplayOptions,
    ) -> Result<Replay, BenchError> {
        let jobs = match options.jobs {
            Some(0) => {
                return Err(BenchError::bad_input(
                    "--jobs: expected at least 1 thread, found 0",
                ))
            }
            Some(n) => n,
            None => std::thread::available_parallelism().map_or(1, |n| n.get()),
        };
        if !store_dir.join(crate::store::DB_FILE).is_file() {
            return Err(BenchError::bad_input(format!(
                "{}: expected a tragus store (a directory holding {}), found none",
                store_dir.display(),
                crate::store::DB_FILE
            )));
        }
        let plan_loaded = super::load(plan)?;
        let store = Store::open_read_only(store_dir).map_err(|e| {
            BenchError::bad_input(format!(
                "{}: cannot read the store: {e}",
                store_dir.display()
            ))
        })?;
        let records = select(&store, store_dir, options)?;
        Ok(Replay {
            store,
            store_dir: store_dir.to_path_buf(),
            plan_path: plan.to_path_buf(),
            plan: plan_loaded,
            records,
            options: options.clone(),
            jobs,
        })
    }

    /// Records selected.
    pub fn len(&self) -> usize {
        self.records.len()
    }

    /// True when no record was selected.
    pub fn is_empty(&self) -> bool {
        self.records.is_empty()
    }

    /// Threads the records are judged on.
    pub fn jobs(&self) -> usize {
        self.jobs
    }

    /// The new plan, as loaded (before any station's channel map).
    pub fn plan(&self) -> &crate::plan::Plan {
        &self.plan
    }

    /// Judge every selected record under the new plan and sum up what changed.
    /// `progress` is called once per record done (replayed or not), from any thread.
    pub fn run(self, progress: &(dyn Fn() + Sync)) -> Result<ReplayReport, BenchError> {
        let started = std::time::Instant::now();
        let mut settings = setting::Settings::new(&self.plan_path, &self.plan)?;
        let tasks: Vec<setting::Task> = self
            .records
            .iter()
            .map(|r| settings.task(&self.store, r))
            .collect();
        let setup_s = started.elapsed().as_secs_f64();
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(self.jobs)
            .thread_name(|i| format!("tragus-replay-{i}"))
            .build()
            .map_err(|e| BenchError::retest(format!("cannot start the replay threads: {e}")))?;
        let judge_started = std::time::Instant::now();
        let outcomes: Vec<Result<RecordReplay, String>> = pool.install(|| {
            use rayon::prelude::*;
            self.records
                .par_iter()
                .zip(tasks.par_iter())
                .map(|(record, task)| {
                    let out = judge::judge(&settings, &self.plan.sha256, record, task);
                    progress();
                    out
                })
                .collect()
        });
        let judge_s = judge_started.elapsed().as_secs_f64();
        drop(settings);
        let mut replayed = Vec::new();
        let mut not_replayable = Vec::new();
        for (record, outcome) in self.records.iter().zip(outcomes) {
            match outcome {
                Ok(r) => replayed.push(r),
                Err(reason) => not_replayable.push(NotReplayable::of(record, reason)),
            }
        }
        let elapsed_s = started.elapsed().as_secs_f64();
        let mut report = report::summarise(
            &self.plan,
            &self.records,
            replayed,
            not_replayable,
            report::Timing {
                jobs: self.jobs,
                setup_s,
                judge_s,
                elapsed_s,
            },
        );
        report.store = self.store_dir.display().to_string();
        report.plan_file = self.plan_path.display().to_string();
        report.selection = Selection::of(&self.options);
        Ok(report)
    }
}

/// Replay `store_dir` under `plan` without a progress indicator: [`Replay::open`] then
/// [`Replay::run`].
pub fn replay(
    store_dir: &Path,
    plan: &Path,
    options: &ReplayOptions,
) -> Result<ReplayReport, BenchError> {
    Replay::open(store_dir, plan, options)?.run(&|| {})
}

/// The records of `options`, oldest first.
fn select(
    store: &Store,
    dir: &Path,
    options: &ReplayOptions,
) -> Result<Vec<StoredRecord>, BenchError> {
    let read = |e: crate::store::StoreError| {
        BenchError::bad_input(format!("{}: cannot read the records: {e}", dir.display()))
    };
    for serial in &options.serials {
        let any = store
            .list(&RecordFilter {
                serial: Some(serial.clone()),
                limit: Some(1),
                ..RecordFilter::default()
            })
            .map_err(read)?;
        if any.is_empty() {
            return Err(BenchError::bad_input(format!(
                "--serial {serial}: expected a serial the store {} has records of, found none",
                dir.display()
            )));
        }
    }
    let all = store
        .list(&RecordFilter {
            since: options.since,
            until: options.until,
            ..RecordFilter::default()
        })
        .map_err(read)?;
    if let Some(station) = &options.station {
        if !all.iter().any(|r| &r.station == station) {
            let every = store.list(&RecordFilter::default()).map_err(read)?;
            if !every.iter().any(|r| &r.station == station) {
                let mut known: Vec<&str> = every.iter().map(|r| r.station.as_str()).collect();
                known.sort_unstable();
                known.dedup();
                return Err(BenchError::bad_input(format!(
                    "--station {station}: expected a station the store {} has records of ({}), \
                     found none",
                    dir.display(),
                    if known.is_empty() {
                        "it has none".to_string()
                    } else {
                        known.join(", ")
                    }
                )));
            }
        }
    }
    Ok(all
        .into_iter()
        .filter(|r| options.serials.is_empty() || options.serials.contains(&r.serial))
        .filter(|r| options.station.as_ref().is_none_or(|s| &r.station == s))
        .collect())
}

/// The selection as given, for the report.
#[derive(Debug, Clone, Default, serde::Serialize)]
pub struct Selection {
    /// `--since`, as the store writes times.
    pub since: Option<String>,
    /// `--until`, as the store writes times.
    pub until: Option<String>,
    /// `--serial` (empty: every serial).
    pub serials: Vec<String>,
    /// `--station`.
    pub station: Option<String>,
}

impl Selection {
    fn of(o: &ReplayOptions) -> Selection {
        let time = |t: &Option<OffsetDateTime>| {
            t.and_then(|t| {
                t.format(&time::format_description::well_known::Rfc3339)
                    .ok()
            })
        };
        Selection {
            since: time(&o.since),
            until: time(&o.until),
            serials: o.serials.clone(),
            station: o.station.clone(),
        }
    }
}

pub use report::ReplayReport;
