//! What a replay found, summed up: the report and its parts (serialisable: `--json`).

use crate::store::StoredRecord;
use crate::Verdict;
use std::collections::BTreeMap;

/// What a replay found.
///
/// Yield is counted two ways, both over the *replayed* records only (a record that is not
/// replayable has no verdict under the new plan, so it is left out of both sides):
///
/// - by record: the share of replayed records whose verdict is pass — stored verdicts
///   before, new verdicts after (a retest counts as not passing);
/// - by unit: the same over the latest replayed record of each serial (latest by time, then
///   by record id), so a unit tested three times counts once, as it would leave the line.
#[derive(Debug, Clone, Default, serde::Serialize)]
pub struct ReplayReport {
    /// The store directory.
    pub store: String,
    /// The new plan file.
    pub plan_file: String,
    /// The new plan's id.
    pub plan_id: String,
    /// The new plan's revision.
    pub plan_revision: u32,
    /// The new plan's SHA-256.
    pub plan_sha256: String,
    /// Which records were selected.
    pub selection: super::Selection,
    /// Records selected.
    pub n_selected: usize,
    /// Records judged under the new plan.
    pub n_replayed: usize,
    /// Records that could not be.
    pub n_not_replayable: usize,
    /// Serials among the replayed records.
    pub n_units: usize,
    /// Every record that could not be judged under the new plan, and why.
    pub not_replayable: Vec<NotReplayable>,
    /// Verdicts that changed, by (before, after), most frequent first.
    pub transitions: Vec<Transition>,
    /// Replayed records whose verdict did not change, by verdict (`pass`, `fail`, `retest`).
    pub unchanged: BTreeMap<String, usize>,
    /// Per check id and channel: failures and worst margins before and after.
    pub checks: Vec<CheckChange>,
    /// Yield before and after (see the type's doc).
    pub yields: Yields,
    /// Against the stored results, for the records judged by this very plan (same
    /// SHA-256); `None` when none was selected.
    pub reproduction: Option<Reproduction>,
    /// Threads the records were judged on.
    pub jobs: usize,
    /// Seconds to read the archived inputs and prepare the plan on every setting.
    pub setup_s: f64,
    /// Seconds judging the records (in parallel).
    pub judge_s: f64,
    /// Seconds in all.
    pub elapsed_s: f64,
    /// Replayed records per second of the whole replay (set-up included).
    pub units_per_second: f64,
    /// Every replayed record: verdicts and checks before and after.
    pub records: Vec<RecordReplay>,
}

/// A record that cannot be judged under the new plan.
#[derive(Debug, Clone, serde::Serialize)]
pub struct NotReplayable {
    /// The record's id.
    pub record_id: i64,
    /// Its serial.
    pub serial: String,
    /// Its station.
    pub station: String,
    /// Its plan id and revision, as `id rN`.
    pub plan: String,
    /// Why, in words.
    pub reason: String,
}

impl NotReplayable {
    pub(super) fn of(r: &StoredRecord, reason: String) -> NotReplayable {
        NotReplayable {
            record_id: r.id,
            serial: r.serial.clone(),
            station: r.station.clone(),
            plan: format!("{} r{}", r.plan_id, r.plan_revision),
            reason,
        }
    }
}

/// Records whose verdict went from `from` to `to`.
#[derive(Debug, Clone, serde::Serialize)]
pub struct Transition {
    /// The stored verdict.
    pub from: Verdict,
    /// The verdict under the new plan.
    pub to: Verdict,
    /// How many records.
    pub count: usize,
    /// Their serials, in record order (a serial appears once per record).
    pub serials: Vec<String>,
    /// Their record ids.
    pub record_ids: Vec<i64>,
}

/// One check (id and channel) over the replayed records.
#[derive(Debug, Clone, serde::Serialize)]
pub struct CheckChange {
    /// Check id.
    pub id: String,
    /// Channel (`a/b` for balance).
    pub channel: String,
    /// Check kind.
    pub kind: String,
    /// False for a check only the plans the records were judged by have.
    pub in_new_plan: bool,
    /// Records where the check failed before.
    pub n_fail_before: usize,
    /// Records where it fails under the new plan.
    pub n_fail_after: usize,
    /// Serials of the records where it fails now and did not before (absent counts as not
    /// failing).
    pub newly_failing: Vec<String>,
    /// Serials of the records where it failed before and does not now.
    pub newly_passing: Vec<String>,
    /// Smallest stored margin, dB, and the serial it belongs to.
    pub worst_margin_before_db: Option<(f64, String)>,
    /// Smallest margin under the new plan, dB, and the serial.
    pub worst_margin_after_db: Option<(f64, String)>,
}

/// Yield by record and by unit (see [`ReplayReport`]).
#[derive(Debug, Clone, Default, serde::Serialize)]
pub struct Yields {
    /// Over the replayed records.
    pub records: Yield,
    /// Over the latest replayed record of each serial.
    pub units: Yield,
}

/// Passing out of counted, before and after.
#[derive(Debug, Clone, Default, serde::Serialize)]
pub struct Yield {
    /// Counted (records or units).
    pub n: usize,
    /// Passing before.
    pub pass_before: usize,
    /// Passing after.
    pub pass_after: usize,
    /// `pass_before / n` (0 when `n` is 0).
    pub before: f64,
    /// `pass_after / n`.
    pub after: f64,
}

impl Yield {
    fn of<'a>(records: impl Iterator<Item = &'a RecordReplay>) -> Yield {
        let mut y = Yield::default();
        for r in records {
            y.n += 1;
            y.pass_before += usize::from(r.before == Verdict::Pass);
            y.pass_after += usize::from(r.after == Verdict::Pass);
        }
        if y.n > 0 {
            y.before = y.pass_before as f64 / y.n as f64;
            y.after = y.pass_after as f64 / y.n as f64;
        }
        y
    }
}

/// The same plan's records judged again against their stored results.
#[derive(Debug, Clone, serde::Serialize)]
pub struct Reproduction {
    /// Selected records judged by the new plan's SHA-256 (replayable or not).
    pub n_same_plan: usize,
    /// Of those, records whose verdicts (unit and checks) and every margin came back within
    /// [`super::super::reanalyze::TOLERANCE_DB`].
    pub n_reproduced: usize,
    /// Largest |Δ margin| over the reproduced comparisons, dB.
    pub max_margin_delta_db: f64,
    /// The records that did not reproduce, with every difference.
    pub differences: Vec<ReproductionDifference>,
}

/// A record of the same plan that did not reproduce.
#[derive(Debug, Clone, serde::Serialize)]
pub struct ReproductionDifference {
    /// The record's id.
    pub record_id: i64,
    /// Its serial.
    pub serial: String,
    /// Every difference in words (or why it was not replayable).
    pub differences: Vec<String>,
}

/// One replayed record.
#[derive(Debug, Clone, serde::Serialize)]
pub struct RecordReplay {
    /// The record's id.
    pub record_id: i64,
    /// Its serial.
    pub serial: String,
    /// Its station.
    pub station: String,
    /// When it was measured.
    pub time_utc: String,
    /// The plan it was judged by.
    pub plan_id: String,
    /// That plan's revision.
    pub plan_revision: u32,
    /// The stored verdict.
    pub before: Verdict,
    /// The verdict under the new plan.
    pub after: Verdict,
    /// False for an abandoned sweep (nothing measured, nothing judged).
    pub judged: bool,
    /// Listening answers carried over from the record.
    pub carried_over: usize,
    /// Checks before and after.
    pub checks: Vec<CheckPair>,
    /// The record was judged by the new plan itself (same SHA-256).
    pub same_plan: bool,
    /// For `same_plan`: every difference from the stored result (empty: reproduced).
    pub differences: Vec<String>,
}

/// A check of a record before and after.
#[derive(Debug, Clone, serde::Serialize)]
pub struct CheckPair {
    /// Check id.
    pub id: String,
    /// Channel.
    pub channel: String,
    /// Check kind.
    pub kind: String,
    /// As stored (`None`: the old plan did not have it).
    pub before: Option<CheckSide>,
    /// Under the new plan (`None`: the new plan does not have it).
    pub after: Option<CheckSide>,
}

/// A check's outcome on one side.
#[derive(Debug, Clone, serde::Serialize)]
pub struct CheckSide {
    /// Verdict.
    pub verdict: Verdict,
    /// Worst margin, dB.
    pub worst_margin_db: Option<f64>,
    /// Where, Hz.
    pub at_hz: Option<f64>,
}

/// How long the replay took.
pub(super) struct Timing {
    pub jobs: usize,
    pub setup_s: f64,
    pub judge_s: f64,
    pub elapsed_s: f64,
}

fn order(v: Verdict) -> u8 {
    match v {
        Verdict::Pass => 0,
        Verdict::Fail => 1,
        Verdict::Retest => 2,
    }
}

/// Sum up the replayed and not replayable records of `selected`.
pub(super) fn summarise(
    plan: &crate::plan::Plan,
    selected: &[StoredRecord],
    records: Vec<RecordReplay>,
    not_replayable: Vec<NotReplayable>,
    timing: Timing,
) -> ReplayReport {
    let mut transitions: BTreeMap<(u8, u8), Transition> = BTreeMap::new();
    let mut unchanged: BTreeMap<String, usize> = BTreeMap::new();
    for r in &records {
        if r.before == r.after {
            *unchanged
                .entry(format!("{:?}", r.before).to_lowercase())
                .or_insert(0) += 1;
            continue;
        }
        let t = transitions
            .entry((order(r.before), order(r.after)))
            .or_insert_with(|| Transition {
                from: r.before,
                to: r.after,
                count: 0,
                serials: Vec::new(),
                record_ids: Vec::new(),
            });
        t.count += 1;
        t.serials.push(r.serial.clone());
        t.record_ids.push(r.record_id);
    }
    let mut transitions: Vec<Transition> = transitions.into_values().collect();
    transitions.sort_by_key(|t| std::cmp::Reverse(t.count));

    let mut latest: BTreeMap<&str, &RecordReplay> = BTreeMap::new();
    for r in &records {
        let e = latest.entry(&r.serial).or_insert(r);
        if (r.time_utc.as_str(), r.record_id) > (e.time_utc.as_str(), e.record_id) {
            *e = r;
        }
    }
    let yields = Yields {
        records: Yield::of(records.iter()),
        units: Yield::of(latest.values().copied()),
    };

    let reproduction = reproduction(plan, selected, &records, &not_replayable);
    let n_replayed = records.len();
    ReplayReport {
        plan_id: plan.id.clone(),
        plan_revision: plan.revision,
        plan_sha256: plan.sha256.clone(),
        n_selected: selected.len(),
        n_replayed,
        n_not_replayable: not_replayable.len(),
        n_units: latest.len(),
        not_replayable,
        transitions,
        unchanged,
        checks: check_changes(&records),
        yields,
        reproduction,
        jobs: timing.jobs,
        setup_s: timing.setup_s,
        judge_s: timing.judge_s,
        elapsed_s: timing.elapsed_s,
        units_per_second: if timing.elapsed_s > 0.0 {
            n_replayed as f64 / timing.elapsed_s
        } else {
            0.0
        },
        records,
        ..ReplayReport::default()
    }
}

fn reproduction(
    plan: &crate::plan::Plan,
    selected: &[StoredRecord],
    records: &[RecordReplay],
    not_replayable: &[NotReplayable],
) -> Option<Reproduction> {
    let n_same_plan = selected
        .iter()
        .filter(|r| r.plan_sha256 == plan.sha256)
        .count();
    if n_same_plan == 0 {
        return None;
    }
    let mut differences = Vec::new();
    let mut max_delta = 0.0f64;
    for r in records.iter().filter(|r| r.same_plan) {
        if !r.differences.is_empty() {
            differences.push(ReproductionDifference {
                record_id: r.record_id,
                serial: r.serial.clone(),
                differences: r.differences.clone(),
            });
            continue;
        }
        for c in &r.checks {
            let (b, a) = (
                c.before.as_ref().and_then(|s| s.worst_margin_db),
                c.after.as_ref().and_then(|s| s.worst_margin_db),
            );
            if let (Some(b), Some(a)) = (b, a) {
                max_delta = max_delta.max((a - b).abs());
            }
        }
    }
    let same: Vec<i64> = selected
        .iter()
        .filter(|r| r.plan_sha256 == plan.sha256)
        .map(|r| r.id)
        .collect();
    for n in not_replayable
        .iter()
        .filter(|n| same.contains(&n.record_id))
    {
        differences.push(ReproductionDifference {
            record_id: n.record_id,
            serial: n.serial.clone(),
            differences: vec![format!("not replayable: {}", n.reason)],
        });
    }
    differences.sort_by_key(|d| d.record_id);
    Some(Reproduction {
        n_same_plan,
        n_reproduced: n_same_plan - differences.len(),
        max_margin_delta_db: max_delta,
        differences,
    })
}

/// Per check id and channel, in the order they first appear (the new plan's order).
fn check_changes(records: &[RecordReplay]) -> Vec<CheckChange> {
    let mut out: Vec<CheckChange> = Vec::new();
    let mut index: BTreeMap<(String, String), usize> = BTreeMap::new();
    for r in records {
        for c in &r.checks {
            let i = *index
                .entry((c.id.clone(), c.channel.clone()))
                .or_insert_with(|| {
                    out.push(CheckChange {
                        id: c.id.clone(),
                        channel: c.channel.clone(),
                        kind: c.kind.clone(),
                        in_new_plan: false,
                        n_fail_before: 0,
                        n_fail_after: 0,
                        newly_failing: Vec::new(),
                        newly_passing: Vec::new(),
                        worst_margin_before_db: None,
                        worst_margin_after_db: None,
                    });
                    out.len() - 1
                });
            let ch = &mut out[i];
            ch.in_new_plan |= c.after.is_some();
            let failed = |s: &Option<super::CheckSide>| {
                s.as_ref().is_some_and(|s| s.verdict == Verdict::Fail)
            };
            let (before, after) = (failed(&c.before), failed(&c.after));
            ch.n_fail_before += usize::from(before);
            ch.n_fail_after += usize::from(after);
            if after && !before {
                ch.newly_failing.push(r.serial.clone());
            }
            if before && !after && c.after.is_some() {
                ch.newly_passing.push(r.serial.clone());
            }
            let worst = |slot: &mut Option<(f64, String)>, side: &Option<super::CheckSide>| {
                if let Some(m) = side.as_ref().and_then(|s| s.worst_margin_db) {
                    if slot.as_ref().is_none_or(|(w, _)| m < *w) {
                        *slot = Some((m, r.serial.clone()));
                    }
                }
            };
            worst(&mut ch.worst_margin_before_db, &c.before);
            worst(&mut ch.worst_margin_after_db, &c.after);
        }
    }
    out
}
