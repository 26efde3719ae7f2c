//! Which records make a unit set (golden or validation), and the serial-list file.
//!
//! # The rule
//!
//! Only records of the plan being derived (the same `plan:` id, any revision) count, and
//! only those with a valid measurement: verdict pass or fail, never retest (a retest's
//! measurement is not valid, its numbers say nothing about the unit). Of those, each serial
//! is represented by its **latest** record (inside `--since`/`--until` when given): the unit
//! as it was last measured.
//!
//! - Golden set chosen by time only: a unit whose latest record is a fail is left out (and
//!   counted in the report): the window is the line's ordinary production, and a failing
//!   unit is not golden.
//! - Golden set from a serial list: every listed serial must have such a record, or the
//!   derivation is refused naming it; a serial whose latest record is a fail is kept — the
//!   engineer named it golden, and the old limits are what is being replaced — and flagged
//!   in the report.
//! - Validation set: every unit's latest record, pass or fail.
//!
//! # Serial-list files
//!
//! One serial per line; `#` starts a comment; blank lines and surrounding blanks are
//! ignored. Each serial must pass [`crate::serial::check_serial`]; a repeated serial is
//! refused (a list that names a unit twice was not made with care). Problems are reported
//! as `path:line:col: message`.

use super::super::BenchError;
use crate::config::Location;
use crate::store::{RecordFilter, Store, StoredRecord};
use crate::Verdict;
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use time::OffsetDateTime;

/// A list of serials read from a file.
#[derive(Debug, Clone, PartialEq)]
pub struct SerialList {
    /// The file.
    pub path: PathBuf,
    /// Each serial with where it is written.
    pub serials: Vec<(String, Location)>,
}

/// Read a serial-list file (module doc).
pub fn read_serial_list(path: &Path) -> Result<SerialList, BenchError> {
    let text = crate::config::read_data_file(path, "serial list").map_err(BenchError::bad_input)?;
    let label = path.display().to_string();
    let mut serials: Vec<(String, Location)> = Vec::new();
    let mut problems = Vec::new();
    for (i, line) in text.lines().enumerate() {
        let content = line.split('#').next().unwrap_or("");
        let serial = content.trim();
        if serial.is_empty() {
            continue;
        }
        let col = content.chars().take_while(|c| c.is_whitespace()).count() + 1;
        let at = Location {
            path: label.clone(),
            line: i + 1,
            col,
        };
        if let Err(e) = crate::serial::check_serial(serial) {
            problems.push(format!(
                "{}:{}:{}: expected a serial number, found `{serial}`: {e}",
                at.path, at.line, at.col
            ));
            continue;
        }
        if let Some((_, first)) = serials.iter().find(|(s, _)| s == serial) {
            problems.push(format!(
                "{}:{}:{}: expected each serial once, found {serial} again (first on line {})",
                at.path, at.line, at.col, first.line
            ));
            continue;
        }
        serials.push((serial.to_string(), at));
    }
    if !problems.is_empty() {
        return Err(BenchError::problems("serial list", &problems));
    }
    if serials.is_empty() {
        return Err(BenchError::bad_input(format!(
            "{label}: expected at least one serial number, found none"
        )));
    }
    Ok(SerialList {
        path: path.to_path_buf(),
        serials,
    })
}

/// What chooses a set of units.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct UnitSelection {
    /// Only these serials (and each of them must be found).
    pub serials: Option<SerialList>,
    /// Only records measured at or after this instant.
    pub since: Option<OffsetDateTime>,
    /// Only records measured before this instant.
    pub until: Option<OffsetDateTime>,
}

impl UnitSelection {
    /// True when nothing selects: neither a list nor a time.
    pub fn is_empty(&self) -> bool {
        self.serials.is_none() && self.since.is_none() && self.until.is_none()
    }
}

/// Which kind of set is chosen (the rule differs, module doc).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum SetKind {
    /// The units the limits are made from.
    Golden,
    /// Units the limits are tried on.
    Validation,
}

/// The records chosen, and what was left out.
#[derive(Debug, Clone)]
pub struct Chosen {
    /// One record per unit, in serial order of the list (or by serial).
    pub records: Vec<StoredRecord>,
    /// Units left out, with why (a golden window's failing units).
    pub left_out: Vec<(String, String)>,
}

/// Choose the records of `plan_id` in `store` by `sel` (module doc).
pub fn choose(
    store: &Store,
    plan_id: &str,
    sel: &UnitSelection,
    kind: SetKind,
) -> Result<Chosen, BenchError> {
    let records = store
        .list(&RecordFilter {
            plan_id: Some(plan_id.to_string()),
            since: sel.since,
            until: sel.until,
            ..RecordFilter::default()
        })
        .map_err(|e| BenchError::bad_input(format!("{}: {e}", store.dir().display())))?;
    // Oldest first: the last one seen per serial is its latest.
    let mut latest: BTreeMap<String, StoredRecord> = BTreeMap::new();
    let mut seen: BTreeMap<String, usize> = BTreeMap::new();
    for r in records {
        *seen.entry(r.serial.clone()).or_default() += 1;
        if r.verdict != Verdict::Retest {
            latest.insert(r.serial.clone(), r);
        }
    }
    let mut chosen = Chosen {
        records: Vec::new(),
        left_out: Vec::new(),
    };
    match &sel.serials {
        Some(list) => {
            let mut missing = Vec::new();
            for (serial, at) in &list.serials {
                match latest.remove(serial) {
                    Some(r) => chosen.records.push(r),
                    None => missing.push(format!(
                        "{}:{}:{}: {serial}: {}",
                        at.path,
                        at.line,
                        at.col,
                        match seen.get(serial) {
                            Some(n) => format!(
                                "expected a pass or fail record of plan {plan_id}{}, found only \
                                 {n} retest(s)",
                                window_words(sel)
                            ),
                            None => format!(
                                "expected a record of plan {plan_id}{}, found none in {}",
                                window_words(sel),
                                store.dir().display()
                            ),
                        }
                    )),
                }
            }
            if !missing.is_empty() {
                return Err(BenchError::problems("serial list", &missing));
            }
        }
        None => {
            for (serial, r) in latest {
                if kind == SetKind::Golden && r.verdict == Verdict::Fail {
                    chosen
                        .left_out
                        .push((serial, format!("its latest record #{} is a fail", r.id)));
                } else {
                    chosen.records.push(r);
                }
            }
        }
    }
    Ok(chosen)
}

fn window_words(sel: &UnitSelection) -> String {
    let t = |t: &Option<OffsetDateTime>| t.map(crate::keys::format_time_utc);
    match (t(&sel.since), t(&sel.until)) {
        (None, None) => String::new(),
        (Some(a), None) => format!(" since {a}"),
        (None, Some(b)) => format!(" before {b}"),
        (Some(a), Some(b)) => format!(" from {a} to before {b}"),
    }
}
