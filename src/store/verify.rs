//! Verification: recompute every record hash, walk the chain, rehash every capture file and
//! list each problem with the record it concerns. Used by auditors and before exporting.
//!
//! Verification reads the raw column values, not [`StoredRecord`](super::StoredRecord)s,
//! because a tampered database may hold values no record can have (a verdict "maybe", text
//! where a number belongs); those are reported, not raised as errors.

use std::collections::{HashMap, HashSet};
use std::fmt;
use std::path::{Path, PathBuf};

use rusqlite::types::ValueRef;
use rusqlite::Row;

use super::capture::{capture_file, hash_file, CAPTURE_EXT, TEMP_PREFIX};
use super::error::StoreError;
use super::hash::{
    chain_row_bytes, is_sha256_hex, real_text, sha256_hex, CanonicalFields, EXPOSURE_FIELDS,
    EXPOSURE_HEADER, GENESIS_PREV_HASH, SAFETY_EVENT_FIELDS, SAFETY_EVENT_HEADER,
};
use super::record::{parse_time_utc, unix_ns, verdict_from_word};
use super::safety::SafetyKind;
use super::schema::{sqlite_err, SAFETY_TRIGGERS, TRIGGERS};

/// What [`Store::verify`](super::Store::verify) found.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct VerifyReport {
    /// Number of records read.
    pub n_records: u64,
    /// `record_hash` of the last record ([`GENESIS_PREV_HASH`] for an empty store). Keep
    /// it somewhere else (a report, a log at another site): records cut off the end of the
    /// chain can only be detected against a head hash kept elsewhere. Empty if the last
    /// record's own hash is unreadable (then reported as a problem).
    pub head_hash: String,
    /// Number of distinct capture files rehashed.
    pub n_captures_checked: u64,
    /// Signs of tampering or damage; empty when the store is intact.
    pub problems: Vec<Problem>,
    /// Things worth knowing that are not tampering, e.g. orphan captures left by a crash.
    pub notices: Vec<Notice>,
    /// Number of safety events read (schema 3).
    pub n_safety_events: u64,
    /// `row_hash` of the last safety event ([`GENESIS_PREV_HASH`] when there is none); keep
    /// it elsewhere like [`head_hash`](Self::head_hash).
    pub safety_events_head_hash: String,
    /// Number of exposures read (schema 3).
    pub n_exposures: u64,
    /// `row_hash` of the last exposure ([`GENESIS_PREV_HASH`] when there is none).
    pub exposures_head_hash: String,
}

impl VerifyReport {
    /// True when no problem was found (notices do not count).
    pub fn is_intact(&self) -> bool {
        self.problems.is_empty()
    }
}

/// One sign of tampering or damage.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Problem {
    /// The record concerned; `None` for the store as a whole (a missing trigger, a damaged
    /// database page) and for a row of another chain ([`ProblemKind::ChainRow`] names it).
    pub record_id: Option<i64>,
    /// What is wrong.
    pub kind: ProblemKind,
}

/// What is wrong, as data so tools can act on it; `Display` gives a sentence.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum ProblemKind {
    /// The stored `record_hash` is not the hash of the stored fields: a field was edited.
    RecordHashMismatch {
        /// `record_hash` as stored.
        stored: String,
        /// Hash of the fields as stored now.
        computed: String,
    },
    /// `prev_hash` is not the previous record's `record_hash`: a record before this one was
    /// deleted, inserted, or rewritten together with its hash.
    ChainBroken {
        /// The previous record's `record_hash` (or the genesis value).
        expected: String,
        /// This record's `prev_hash`.
        found: String,
    },
    /// Ids `first..=last` are absent before this record: those records were deleted.
    RecordsMissing {
        /// First missing id.
        first: i64,
        /// Last missing id.
        last: i64,
    },
    /// A column holds a value no record can have (wrong type, bad verdict, bad hash form).
    FieldDamaged {
        /// Column name.
        column: &'static str,
        /// What was found.
        detail: String,
    },
    /// The time index column does not match `time_utc` (the time filter would mislead).
    TimeIndexMismatch,
    /// The record's capture file is not there.
    CaptureMissing {
        /// Where it should be.
        path: PathBuf,
    },
    /// The record's capture file does not hash to its name: its bytes were altered.
    CaptureAltered {
        /// The file.
        path: PathBuf,
        /// SHA-256 of its content now.
        computed: String,
    },
    /// A row of the safety-event or exposure chain is wrong (schema 3).
    ChainRow {
        /// The table.
        table: ChainTable,
        /// The row's id.
        id: i64,
        /// What is wrong with it.
        problem: RowProblem,
    },
    /// An append-only trigger is gone: someone dropped it.
    TriggerMissing {
        /// Trigger name.
        name: &'static str,
    },
    /// An append-only trigger exists but its text is not the one the store created.
    TriggerAltered {
        /// Trigger name.
        name: &'static str,
    },
    /// SQLite's own integrity check failed (damaged pages, broken index).
    DatabaseDamaged {
        /// SQLite's message.
        detail: String,
    },
}

/// The hash chains besides `records` (schema 3).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum ChainTable {
    /// `safety_events`.
    SafetyEvents,
    /// `exposures`.
    Exposures,
}

impl ChainTable {
    /// The table name.
    pub fn name(self) -> &'static str {
        match self {
            ChainTable::SafetyEvents => "safety_events",
            ChainTable::Exposures => "exposures",
        }
    }
}

impl fmt::Display for ChainTable {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

/// What is wrong with one row of a [`ChainTable`]; `Display` gives a sentence.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum RowProblem {
    /// The stored `row_hash` is not the hash of the stored fields: a field was edited.
    HashMismatch {
        /// `row_hash` as stored.
        stored: String,
        /// Hash of the fields as stored now.
        computed: String,
    },
    /// `prev_hash` is not the previous row's `row_hash`.
    ChainBroken {
        /// The previous row's `row_hash` (or the genesis value).
        expected: String,
        /// This row's `prev_hash`.
        found: String,
    },
    /// Ids `first..=last` are absent before this row: those rows were deleted.
    RowsMissing {
        /// First missing id.
        first: i64,
        /// Last missing id.
        last: i64,
    },
    /// A column holds a value no row can have.
    FieldDamaged {
        /// Column name.
        column: &'static str,
        /// What was found.
        detail: String,
    },
    /// The time index column does not match `time_utc`.
    TimeIndexMismatch,
}

impl fmt::Display for RowProblem {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            RowProblem::HashMismatch { stored, computed } => write!(
                f,
                "row hash does not match its fields (edited after it was written): stored {stored}, computed {computed}"
            ),
            RowProblem::ChainBroken { expected, found } => write!(
                f,
                "chain broken: prev_hash is {found}, the previous row's hash is {expected} (a row was deleted, inserted or rewritten)"
            ),
            RowProblem::RowsMissing { first, last } if first == last => {
                write!(f, "row {first} is missing (deleted)")
            }
            RowProblem::RowsMissing { first, last } => {
                write!(f, "rows {first} to {last} are missing (deleted)")
            }
            RowProblem::FieldDamaged { column, detail } => {
                write!(f, "field `{column}` is damaged: {detail}")
            }
            RowProblem::TimeIndexMismatch => {
                write!(f, "time index does not match time_utc (edited)")
            }
        }
    }
}

/// Something verification noticed that is not tampering.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Notice {
    /// A capture file that no record refers to: an append was interrupted after writing the
    /// capture and before committing the record. Safe to delete.
    OrphanCapture {
        /// The file.
        path: PathBuf,
    },
    /// A temporary file left by an append interrupted while writing the capture. Safe to
    /// delete when no append is running.
    LeftoverTemp {
        /// The file.
        path: PathBuf,
    },
    /// A file in the capture directory that the store did not write.
    UnexpectedFile {
        /// The file.
        path: PathBuf,
    },
}

impl fmt::Display for Problem {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match (&self.kind, self.record_id) {
            (ProblemKind::ChainRow { table, id, problem }, _) => {
                write!(f, "{table} row {id}: {problem}")
            }
            (_, Some(id)) => write!(f, "record {id}: {}", self.kind),
            (_, None) => write!(f, "store: {}", self.kind),
        }
    }
}

impl fmt::Display for ProblemKind {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            ProblemKind::RecordHashMismatch { stored, computed } => write!(
                f,
                "record hash does not match its fields (edited after it was written): stored {stored}, computed {computed}"
            ),
            ProblemKind::ChainBroken { expected, found } => write!(
                f,
                "chain broken: prev_hash is {found}, the previous record's hash is {expected} (a record was deleted, inserted or rewritten)"
            ),
            ProblemKind::RecordsMissing { first, last } if first == last => {
                write!(f, "record {first} is missing (deleted)")
            }
            ProblemKind::RecordsMissing { first, last } => {
                write!(f, "records {first} to {last} are missing (deleted)")
            }
            ProblemKind::FieldDamaged { column, detail } => {
                write!(f, "field `{column}` is damaged: {detail}")
            }
            ProblemKind::TimeIndexMismatch => {
                write!(f, "time index does not match time_utc (edited)")
            }
            ProblemKind::CaptureMissing { path } => {
                write!(f, "capture file missing: {}", path.display())
            }
            ProblemKind::CaptureAltered { path, computed } => write!(
                f,
                "capture file altered: {} now hashes to {computed}",
                path.display()
            ),
            ProblemKind::ChainRow { table, id, problem } => {
                write!(f, "{table} row {id}: {problem}")
            }
            ProblemKind::TriggerMissing { name } => {
                write!(f, "append-only trigger `{name}` is missing (dropped)")
            }
            ProblemKind::TriggerAltered { name } => {
                write!(f, "append-only trigger `{name}` has been altered")
            }
            ProblemKind::DatabaseDamaged { detail } => {
                write!(f, "database integrity check failed: {detail}")
            }
        }
    }
}

impl fmt::Display for Notice {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Notice::OrphanCapture { path } => write!(
                f,
                "orphan capture {} (no record refers to it; an append was interrupted), safe to delete",
                path.display()
            ),
            Notice::LeftoverTemp { path } => write!(
                f,
                "temporary file {} left by an interrupted append, safe to delete when no append runs",
                path.display()
            ),
            Notice::UnexpectedFile { path } => {
                write!(f, "unexpected file {} in the capture directory", path.display())
            }
        }
    }
}

/// Columns read for verification, in this order.
const COLUMNS: [&str; 21] = [
    "id",
    "time_utc",
    "time_unix_ns",
    "serial",
    "plan_id",
    "plan_revision",
    "plan_sha256",
    "software_version",
    "station",
    "operator",
    "rig",
    "verdict",
    "result_json",
    "capture_sha256",
    "prev_hash",
    "record_hash",
    "calibration_mode",
    "calibration_sha256",
    "build",
    "inputs_json",
    "playback_json",
];

/// Columns that may be NULL (schema 2 columns on records from schema 1; the sha when no
/// calibration was applied).
const NULLABLE_COLUMNS: [&str; 5] = [
    "calibration_mode",
    "calibration_sha256",
    "build",
    "inputs_json",
    "playback_json",
];

/// One row as raw values; a damaged column is `None` and has been reported.
struct RawRow {
    id: i64,
    text: HashMap<&'static str, String>,
    int: HashMap<&'static str, i64>,
}

const INT_COLUMNS: [&str; 2] = ["time_unix_ns", "plan_revision"];

fn read_raw(row: &Row<'_>, problems: &mut Vec<Problem>) -> rusqlite::Result<RawRow> {
    // The id is the primary key (an alias of SQLite's rowid), so it is always an integer.
    let id: i64 = row.get(0)?;
    let mut raw = RawRow {
        id,
        text: HashMap::new(),
        int: HashMap::new(),
    };
    for (i, &column) in COLUMNS.iter().enumerate().skip(1) {
        let value = row.get_ref(i)?;
        let damaged = |detail: String| Problem {
            record_id: Some(id),
            kind: ProblemKind::FieldDamaged { column, detail },
        };
        if INT_COLUMNS.contains(&column) {
            match value {
                ValueRef::Integer(v) => {
                    raw.int.insert(column, v);
                }
                other => problems.push(damaged(format!(
                    "expected an integer, found {}",
                    other.data_type()
                ))),
            }
        } else if NULLABLE_COLUMNS.contains(&column) && value == ValueRef::Null {
            // Absent: recorded as missing from `text`.
        } else {
            match value {
                ValueRef::Text(bytes) => match std::str::from_utf8(bytes) {
                    Ok(s) => {
                        raw.text.insert(column, s.to_owned());
                    }
                    Err(_) => problems.push(damaged("text is not valid UTF-8".into())),
                },
                other => problems.push(damaged(format!(
                    "expected text, found {}",
                    other.data_type()
                ))),
            }
        }
    }
    Ok(raw)
}

impl RawRow {
    fn canonical(&self) -> Option<CanonicalFields<'_>> {
        let t = |c: &str| self.text.get(c).map(String::as_str);
        Some(CanonicalFields {
            id: self.id,
            time_utc: t("time_utc")?,
            serial: t("serial")?,
            plan_id: t("plan_id")?,
            plan_revision: *self.int.get("plan_revision")?,
            plan_sha256: t("plan_sha256")?,
            software_version: t("software_version")?,
            station: t("station")?,
            operator: t("operator")?,
            rig: t("rig")?,
            verdict: t("verdict")?,
            result_json: t("result_json")?,
            capture_sha256: t("capture_sha256")?,
            prev_hash: t("prev_hash")?,
            calibration: t("calibration_mode").map(|m| (m, t("calibration_sha256").unwrap_or(""))),
            provenance: t("build").map(|b| {
                (
                    b,
                    t("inputs_json").unwrap_or(""),
                    t("playback_json").unwrap_or(""),
                )
            }),
        })
    }
}

/// State of one capture file, hashed once however many records share it.
#[derive(Clone)]
enum CaptureState {
    Ok,
    Missing,
    Altered(String),
}

pub(crate) fn verify(
    conn: &rusqlite::Connection,
    db_path: &Path,
    capture_dir: &Path,
) -> Result<VerifyReport, StoreError> {
    let err = |e| sqlite_err(db_path, e);
    let mut problems = Vec::new();
    let mut notices = Vec::new();

    // One read transaction: the walk sees one consistent snapshot even while another
    // process appends. (An append in flight has its capture on disk before its record is
    // committed, so it may show as an orphan notice; never as a problem.)
    let tx = conn.unchecked_transaction().map_err(err)?;

    let mut check = tx.prepare("PRAGMA integrity_check").map_err(err)?;
    let lines: Vec<String> = check
        .query_map([], |r| r.get(0))
        .map_err(err)?
        .collect::<rusqlite::Result<_>>()
        .map_err(err)?;
    drop(check);
    if lines != ["ok"] {
        for detail in lines {
            problems.push(Problem {
                record_id: None,
                kind: ProblemKind::DatabaseDamaged { detail },
            });
        }
    }

    for (name, expected_sql) in TRIGGERS.into_iter().chain(SAFETY_TRIGGERS) {
        let sql: Option<String> = tx
            .query_row(
                "SELECT sql FROM sqlite_schema WHERE type = 'trigger' AND name = ?1",
                [name],
                |r| r.get(0),
            )
            .map(Some)
            .or_else(|e| match e {
                rusqlite::Error::QueryReturnedNoRows => Ok(None),
                e => Err(e),
            })
            .map_err(err)?;
        let kind = match sql {
            None => Some(ProblemKind::TriggerMissing { name }),
            Some(sql) if normalize_sql(&sql) != normalize_sql(expected_sql) => {
                Some(ProblemKind::TriggerAltered { name })
            }
            Some(_) => None,
        };
        if let Some(kind) = kind {
            problems.push(Problem {
                record_id: None,
                kind,
            });
        }
    }

    let mut stmt = tx
        .prepare(&format!(
            "SELECT {} FROM records ORDER BY id",
            COLUMNS.join(", ")
        ))
        .map_err(err)?;
    let mut rows = stmt.query([]).map_err(err)?;
    let mut n_records = 0u64;
    let mut prev_id = 0i64;
    // Hash the next record's prev_hash must equal; `None` after a record whose own hash
    // was unreadable (already reported), so one damage is not reported twice.
    let mut expected_prev: Option<String> = Some(GENESIS_PREV_HASH.to_owned());
    let mut captures: HashMap<String, CaptureState> = HashMap::new();
    let mut referenced: HashSet<String> = HashSet::new();

    while let Some(row) = rows.next().map_err(err)? {
        n_records += 1;
        let raw = read_raw(row, &mut problems).map_err(err)?;
        let id = raw.id;
        let mut report = |kind| {
            problems.push(Problem {
                record_id: Some(id),
                kind,
            })
        };

        if id != prev_id + 1 {
            report(ProblemKind::RecordsMissing {
                first: prev_id + 1,
                last: id - 1,
            });
        }
        prev_id = id;

        let stored_prev = raw.text.get("prev_hash");
        if let (Some(expected), Some(found)) = (&expected_prev, stored_prev) {
            if expected != found {
                report(ProblemKind::ChainBroken {
                    expected: expected.clone(),
                    found: found.clone(),
                });
            }
        }
        let stored_hash = raw.text.get("record_hash").cloned();
        if let (Some(fields), Some(stored)) = (raw.canonical(), &stored_hash) {
            let computed = fields.hash();
            if &computed != stored {
                report(ProblemKind::RecordHashMismatch {
                    stored: stored.clone(),
                    computed,
                });
            }
        }
        expected_prev = stored_hash;

        if let Some(v) = raw.text.get("verdict") {
            if verdict_from_word(v).is_none() {
                report(ProblemKind::FieldDamaged {
                    column: "verdict",
                    detail: format!("expected pass, fail or retest, found {v:?}"),
                });
            }
        }
        if let Some(rev) = raw.int.get("plan_revision") {
            if u32::try_from(*rev).is_err() {
                report(ProblemKind::FieldDamaged {
                    column: "plan_revision",
                    detail: format!("expected 0 to {}, found {rev}", u32::MAX),
                });
            }
        }
        if let (Some(t), Some(ns)) = (raw.text.get("time_utc"), raw.int.get("time_unix_ns")) {
            match parse_time_utc(t).and_then(unix_ns) {
                Some(parsed) if parsed == *ns => {}
                Some(_) => report(ProblemKind::TimeIndexMismatch),
                None => report(ProblemKind::FieldDamaged {
                    column: "time_utc",
                    detail: format!("expected a UTC time, found {t:?}"),
                }),
            }
        }

        let Some(sha) = raw.text.get("capture_sha256") else {
            continue;
        };
        if !is_sha256_hex(sha) {
            // Never build a path from this text: it could point anywhere.
            report(ProblemKind::FieldDamaged {
                column: "capture_sha256",
                detail: "expected 64 lowercase hex digits".into(),
            });
            continue;
        }
        referenced.insert(sha.clone());
        let path = capture_file(capture_dir, sha);
        let state = match captures.get(sha) {
            Some(state) => state.clone(),
            None => {
                let state = match hash_file(&path)? {
                    None => CaptureState::Missing,
                    Some(h) if &h == sha => CaptureState::Ok,
                    Some(h) => CaptureState::Altered(h),
                };
                captures.insert(sha.clone(), state.clone());
                state
            }
        };
        match state {
            CaptureState::Ok => {}
            CaptureState::Missing => report(ProblemKind::CaptureMissing { path }),
            CaptureState::Altered(computed) => {
                report(ProblemKind::CaptureAltered { path, computed })
            }
        }
    }
    drop(rows);
    drop(stmt);

    scan_capture_dir(capture_dir, &referenced, &mut notices)?;
    let (n_safety_events, safety_events_head_hash) =
        verify_chain(&tx, &SAFETY_EVENTS_SPEC, &mut problems).map_err(err)?;
    let (n_exposures, exposures_head_hash) =
        verify_chain(&tx, &EXPOSURES_SPEC, &mut problems).map_err(err)?;
    tx.finish().map_err(err)?;

    Ok(VerifyReport {
        n_records,
        head_hash: expected_prev.unwrap_or_default(),
        n_captures_checked: captures.len() as u64,
        problems,
        notices,
        n_safety_events,
        safety_events_head_hash,
        n_exposures,
        exposures_head_hash,
    })
}

/// Whitespace-insensitive comparison form of a SQL statement.
fn normalize_sql(sql: &str) -> String {
    sql.split_whitespace().collect::<Vec<_>>().join(" ")
}

/// List files in the capture directory that no record refers to.
fn scan_capture_dir(
    capture_dir: &Path,
    referenced: &HashSet<String>,
    notices: &mut Vec<Notice>,
) -> Result<(), StoreError> {
    let io_err = |source| StoreError::Io {
        path: capture_dir.to_owned(),
        action: "list the capture directory",
        source,
    };
    let mut entries: Vec<_> = std::fs::read_dir(capture_dir)
        .map_err(io_err)?
        .collect::<Result<_, _>>()
        .map_err(io_err)?;
    // Sorted so two runs of verify print the same report.
    entries.sort_by_key(|e| e.file_name());
    for entry in entries {
        let path = entry.path();
        let name = entry.file_name();
        let name = name.to_string_lossy();
        let is_file = entry.file_type().map(|t| t.is_file()).unwrap_or(false);
        let stem = name.strip_suffix(&format!(".{CAPTURE_EXT}"));
        if is_file && name.starts_with(TEMP_PREFIX) {
            notices.push(Notice::LeftoverTemp { path });
        } else if let Some(stem) = stem.filter(|s| is_file && is_sha256_hex(s)) {
            if !referenced.contains(stem) {
                notices.push(Notice::OrphanCapture { path });
            }
        } else {
            notices.push(Notice::UnexpectedFile { path });
        }
    }
    Ok(())
}

/// SQLite type a column of a [`ChainTable`] must hold.
#[derive(Clone, Copy, PartialEq, Eq)]
enum ColumnType {
    Text,
    OptText,
    Int,
    OptInt,
    Real,
}

/// How to verify one chain: its table, header, and every column read with its type. The
/// hashed columns are the header's field list, in canonical order; `row_hash` and
/// `time_unix_ns` are read but not hashed.
struct ChainSpec {
    table: ChainTable,
    header: &'static [u8],
    hashed: &'static [&'static str],
    columns: &'static [(&'static str, ColumnType)],
}

const SAFETY_EVENTS_SPEC: ChainSpec = ChainSpec {
    table: ChainTable::SafetyEvents,
    header: SAFETY_EVENT_HEADER,
    hashed: &SAFETY_EVENT_FIELDS,
    columns: &[
        ("id", ColumnType::Int),
        ("time_utc", ColumnType::Text),
        ("time_unix_ns", ColumnType::Int),
        ("station", ColumnType::Text),
        ("operator", ColumnType::Text),
        ("serial", ColumnType::OptText),
        ("plan_id", ColumnType::Text),
        ("plan_sha256", ColumnType::OptText),
        ("kind", ColumnType::Text),
        ("message", ColumnType::Text),
        ("detail_json", ColumnType::Text),
        ("record_id", ColumnType::OptInt),
        ("prev_hash", ColumnType::Text),
        ("row_hash", ColumnType::Text),
    ],
};

const EXPOSURES_SPEC: ChainSpec = ChainSpec {
    table: ChainTable::Exposures,
    header: EXPOSURE_HEADER,
    hashed: &EXPOSURE_FIELDS,
    columns: &[
        ("id", ColumnType::Int),
        ("operator", ColumnType::Text),
        ("station", ColumnType::Text),
        ("start_unix_s", ColumnType::Int),
        ("level_dba", ColumnType::Real),
        ("duration_s", ColumnType::Real),
        ("serial", ColumnType::Text),
        ("plan_id", ColumnType::Text),
        ("record_id", ColumnType::OptInt),
        ("prev_hash", ColumnType::Text),
        ("row_hash", ColumnType::Text),
    ],
};

/// One column's value in its canonical text (module doc of the store), or `None` when the
/// column is damaged (already reported).
fn canonical_text(value: ValueRef<'_>, ty: ColumnType) -> Result<String, String> {
    match (ty, value) {
        (ColumnType::OptText | ColumnType::OptInt, ValueRef::Null) => Ok(String::new()),
        (ColumnType::Text | ColumnType::OptText, ValueRef::Text(bytes)) => {
            match std::str::from_utf8(bytes) {
                Ok(s) if ty == ColumnType::OptText && s.is_empty() => {
                    Err("expected NULL or non-empty text, found empty text".into())
                }
                Ok(s) => Ok(s.to_owned()),
                Err(_) => Err("text is not valid UTF-8".into()),
            }
        }
        (ColumnType::Int | ColumnType::OptInt, ValueRef::Integer(v)) => Ok(v.to_string()),
        (ColumnType::Real, ValueRef::Real(x)) if x.is_finite() => Ok(real_text(x)),
        (ColumnType::Real, ValueRef::Real(x)) => {
            Err(format!("expected a finite number, found {x}"))
        }
        (_, other) => Err(format!(
            "expected {}, found {}",
            match ty {
                ColumnType::Text => "text",
                ColumnType::OptText => "text or NULL",
                ColumnType::Int => "an integer",
                ColumnType::OptInt => "an integer or NULL",
                ColumnType::Real => "a real number",
            },
            other.data_type()
        )),
    }
}

/// Walk one chain: recompute every row hash, check links, ids and field forms. Returns the
/// number of rows and the head hash (empty when the last row's hash is unreadable).
fn verify_chain(
    tx: &rusqlite::Transaction<'_>,
    spec: &ChainSpec,
    problems: &mut Vec<Problem>,
) -> rusqlite::Result<(u64, String)> {
    let names: Vec<&str> = spec.columns.iter().map(|(n, _)| *n).collect();
    let mut stmt = tx.prepare(&format!(
        "SELECT {} FROM {} ORDER BY id",
        names.join(", "),
        spec.table.name()
    ))?;
    let mut rows = stmt.query([])?;
    let mut n_rows = 0u64;
    let mut prev_id = 0i64;
    let mut expected_prev: Option<String> = Some(GENESIS_PREV_HASH.to_owned());
    while let Some(row) = rows.next()? {
        n_rows += 1;
        // The id is the primary key (an alias of the rowid), so always an integer.
        let id: i64 = row.get(0)?;
        let mut report = |problem| {
            problems.push(Problem {
                record_id: None,
                kind: ProblemKind::ChainRow {
                    table: spec.table,
                    id,
                    problem,
                },
            })
        };
        let mut text: HashMap<&'static str, String> = HashMap::new();
        for (i, &(column, ty)) in spec.columns.iter().enumerate() {
            match canonical_text(row.get_ref(i)?, ty) {
                Ok(t) => {
                    text.insert(column, t);
                }
                Err(detail) => report(RowProblem::FieldDamaged { column, detail }),
            }
        }
        if id != prev_id + 1 {
            report(RowProblem::RowsMissing {
                first: prev_id + 1,
                last: id - 1,
            });
        }
        prev_id = id;
        if let (Some(expected), Some(found)) = (&expected_prev, text.get("prev_hash")) {
            if expected != found {
                report(RowProblem::ChainBroken {
                    expected: expected.clone(),
                    found: found.clone(),
                });
            }
        }
        let fields: Option<Vec<(&str, &str)>> = spec
            .hashed
            .iter()
            .map(|&c| text.get(c).map(|v| (c, v.as_str())))
            .collect();
        let stored_hash = text.get("row_hash").cloned();
        if let (Some(fields), Some(stored)) = (fields, &stored_hash) {
            let computed = sha256_hex(&chain_row_bytes(spec.header, &fields));
            if &computed != stored {
                report(RowProblem::HashMismatch {
                    stored: stored.clone(),
                    computed,
                });
            }
        }
        expected_prev = stored_hash;

        if let Some(k) = text.get("kind") {
            if SafetyKind::from_word(k).is_none() {
                report(RowProblem::FieldDamaged {
                    column: "kind",
                    detail: format!("expected a safety event kind, found {k:?}"),
                });
            }
        }
        if let Some(d) = text.get("duration_s") {
            if d.starts_with('-') {
                report(RowProblem::FieldDamaged {
                    column: "duration_s",
                    detail: format!("expected 0 s or more, found {d} s"),
                });
            }
        }
        if let (Some(t), Some(ns)) = (text.get("time_utc"), text.get("time_unix_ns")) {
            match parse_time_utc(t).and_then(unix_ns) {
                Some(parsed) if parsed.to_string() == *ns => {}
                Some(_) => report(RowProblem::TimeIndexMismatch),
                None => report(RowProblem::FieldDamaged {
                    column: "time_utc",
                    detail: format!("expected a UTC time, found {t:?}"),
                }),
            }
        }
    }
    Ok((n_rows, expected_prev.unwrap_or_default()))
}
