//! Each problem verification finds, as data naming the record or row it concerns;
//! `Display` gives the sentences `tragus verify` prints.

use std::fmt;
use std::path::PathBuf;

use crate::keys::SignatureProblem;

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
    /// Something is in the capture's place that cannot be its capture: not a regular file
    /// (a FIFO, a link, a directory), too large, or unreadable. It was not read.
    CaptureUnusable {
        /// The path.
        path: PathBuf,
        /// What is there.
        problem: FileProblem,
    },
    /// An archived input the record links to (`inputs_json`) is missing, altered or not a
    /// regular file.
    ArchivedInput {
        /// Its role in the link (`plan`, `station`, `calibration`).
        role: String,
        /// Where it should be.
        path: PathBuf,
        /// What is wrong.
        problem: FileProblem,
    },
    /// The record's signature does not count (checked against a keyring).
    Signature {
        /// Why.
        problem: SignatureProblem,
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
    /// A schema object (trigger, view, table, index) that is not the store's own: it can
    /// change or drop what is written, or hide what is read.
    ForeignObject {
        /// `trigger`, `view`, `table` or `index`.
        object_type: String,
        /// Its name.
        name: String,
    },
    /// One of the store's own tables is gone; its rows cannot be verified.
    TableMissing {
        /// Table name.
        table: &'static str,
    },
    /// A column of one of the store's own tables is gone (the table was rebuilt).
    ColumnMissing {
        /// Table name.
        table: &'static str,
        /// Column name.
        column: &'static str,
    },
    /// The store's identity (`store_meta`) is missing or not one value.
    StoreIdentity {
        /// What was found.
        detail: String,
    },
    /// A checkpoint does not match the store, or does not count.
    Checkpoint {
        /// Its file, as given.
        source: String,
        /// What is wrong.
        problem: CheckpointProblem,
    },
    /// A write-ahead log exists but could not be read (read-only media): commits in it were
    /// not verified.
    WalUnread {
        /// The log file.
        path: PathBuf,
        /// Its size.
        bytes: u64,
    },
    /// A directory of the store could not be listed.
    DirectoryUnreadable {
        /// The directory.
        path: PathBuf,
        /// The operating system's error.
        detail: String,
    },
    /// SQLite's own integrity check failed, or a table could not be read to the end.
    DatabaseDamaged {
        /// SQLite's message.
        detail: String,
    },
}

/// What is wrong with a file the store refers to by its hash.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum FileProblem {
    /// Nothing there.
    Missing,
    /// Not a regular file: `a FIFO`, `a symbolic link`, `a directory`, ...; never opened.
    NotRegular(&'static str),
    /// A regular file larger than any the store writes (bytes); not read.
    TooLarge(u64),
    /// Its content does not hash to its name.
    Altered {
        /// SHA-256 of its content now.
        computed: String,
    },
    /// It could not be read (the operating system's error).
    Unreadable(String),
}

impl fmt::Display for FileProblem {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            FileProblem::Missing => write!(f, "missing"),
            FileProblem::NotRegular(what) => write!(f, "not a regular file but {what}; not read"),
            FileProblem::TooLarge(n) => {
                write!(
                    f,
                    "{n} bytes, larger than any file the store writes; not read"
                )
            }
            FileProblem::Altered { computed } => write!(f, "altered: now hashes to {computed}"),
            FileProblem::Unreadable(e) => write!(f, "unreadable: {e}"),
        }
    }
}

/// Why a checkpoint does not match or does not count.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum CheckpointProblem {
    /// Checkpoints are checked against a keyring, and none was given.
    NoKeyring,
    /// Its signature does not count.
    Signature(SignatureProblem),
    /// It names another store.
    OtherStore {
        /// The store id in the checkpoint.
        checkpoint: String,
        /// This store's id (`None`: it has none).
        store: Option<String>,
    },
    /// Rows it counts are gone: the store holds `found` of the first `count` rows.
    RowsRemoved {
        /// `records`, `safety_events` or `exposures`.
        table: &'static str,
        /// Rows the checkpoint counts.
        count: u64,
        /// Rows with ids 1 to `count` the store holds.
        found: u64,
        /// The lowest id of those removed.
        first_missing: i64,
    },
    /// Row `count`'s hash is not the checkpoint's head: a row up to it was changed, removed
    /// or reordered (and the chain rewritten) since.
    HeadMismatch {
        /// `records`, `safety_events` or `exposures`.
        table: &'static str,
        /// Rows the checkpoint counts.
        count: u64,
        /// The checkpoint's head hash.
        expected: String,
        /// Row `count`'s stored hash.
        found: String,
    },
    /// Row `count` has the head hash, but the chain up to it does not verify (its first
    /// problem is at row `first`).
    ChainBroken {
        /// `records`, `safety_events` or `exposures`.
        table: &'static str,
        /// Rows the checkpoint counts.
        count: u64,
        /// The first row with a problem.
        first: i64,
    },
}

impl fmt::Display for CheckpointProblem {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            CheckpointProblem::NoKeyring => write!(
                f,
                "not checked: a checkpoint is only worth its signature; give the keyring (--keys)"
            ),
            CheckpointProblem::Signature(p) => write!(f, "its signature does not count: {p}"),
            CheckpointProblem::OtherStore { checkpoint, store } => write!(
                f,
                "it is for store {checkpoint}, this store is {}",
                store
                    .as_deref()
                    .unwrap_or("without an identity (schema before 4)")
            ),
            CheckpointProblem::RowsRemoved {
                table,
                count,
                found,
                first_missing,
            } => write!(
                f,
                "it counts {count} {table} rows, the store holds {found} of them: {} removed \
                 since the checkpoint, the first is {table} row {first_missing}",
                count - found
            ),
            CheckpointProblem::HeadMismatch {
                table,
                count,
                expected,
                found,
            } => write!(
                f,
                "{table} row {count} hashes to {found}, the checkpoint's head is {expected}: a \
                 row up to {count} was changed, removed or reordered since the checkpoint"
            ),
            CheckpointProblem::ChainBroken {
                table,
                count,
                first,
            } => write!(
                f,
                "the {table} chain up to row {count} does not verify (first problem at row {first})"
            ),
        }
    }
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
    /// `record_id` names no record of the store (the record was removed).
    RecordMissing {
        /// The id it names.
        record_id: i64,
    },
    /// The row's signature does not count (checked against a keyring).
    Signature(SignatureProblem),
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
            RowProblem::RecordMissing { record_id } => write!(
                f,
                "belongs to record {record_id}, which the store does not hold (removed)"
            ),
            RowProblem::Signature(p) => write!(f, "signature: {p}"),
        }
    }
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
            ProblemKind::CaptureUnusable { path, problem } => {
                write!(f, "capture file {}: {problem}", path.display())
            }
            ProblemKind::ArchivedInput {
                role,
                path,
                problem,
            } => write!(f, "archived {role} input {}: {problem}", path.display()),
            ProblemKind::Signature { problem } => write!(f, "signature: {problem}"),
            ProblemKind::ChainRow { table, id, problem } => {
                write!(f, "{table} row {id}: {problem}")
            }
            ProblemKind::TriggerMissing { name } => {
                write!(f, "append-only trigger `{name}` is missing (dropped)")
            }
            ProblemKind::TriggerAltered { name } => {
                write!(f, "append-only trigger `{name}` has been altered")
            }
            ProblemKind::ForeignObject { object_type, name } => write!(
                f,
                "foreign schema object: {object_type} `{name}` is not the store's own (added by someone; it can change or drop what is written)"
            ),
            ProblemKind::TableMissing { table } => {
                write!(f, "table `{table}` is missing (dropped); its rows cannot be verified")
            }
            ProblemKind::ColumnMissing { table, column } => {
                write!(f, "column `{column}` of table `{table}` is missing (the table was rebuilt)")
            }
            ProblemKind::StoreIdentity { detail } => {
                write!(f, "store identity (store_meta) damaged: {detail}")
            }
            ProblemKind::Checkpoint { source, problem } => {
                write!(f, "checkpoint {source}: {problem}")
            }
            ProblemKind::WalUnread { path, bytes } => write!(
                f,
                "write-ahead log {} ({bytes} bytes) could not be read on this medium; commits in it were not verified (copy the store to a writable disk and verify again)",
                path.display()
            ),
            ProblemKind::DirectoryUnreadable { path, detail } => {
                write!(f, "directory {} could not be listed: {detail}", path.display())
            }
            ProblemKind::DatabaseDamaged { detail } => {
                write!(f, "database integrity check failed: {detail}")
            }
        }
    }
}

impl ProblemKind {
    /// A stable word for tools (`tragus verify --json`'s `kind`).
    pub fn word(&self) -> &'static str {
        match self {
            ProblemKind::RecordHashMismatch { .. } => "record_hash_mismatch",
            ProblemKind::ChainBroken { .. } => "chain_broken",
            ProblemKind::RecordsMissing { .. } => "records_missing",
            ProblemKind::FieldDamaged { .. } => "field_damaged",
            ProblemKind::TimeIndexMismatch => "time_index_mismatch",
            ProblemKind::CaptureMissing { .. } => "capture_missing",
            ProblemKind::CaptureAltered { .. } => "capture_altered",
            ProblemKind::CaptureUnusable { .. } => "capture_unusable",
            ProblemKind::ArchivedInput { .. } => "archived_input",
            ProblemKind::Signature { .. } => "signature",
            ProblemKind::ChainRow { .. } => "chain_row",
            ProblemKind::TriggerMissing { .. } => "trigger_missing",
            ProblemKind::TriggerAltered { .. } => "trigger_altered",
            ProblemKind::ForeignObject { .. } => "foreign_object",
            ProblemKind::TableMissing { .. } => "table_missing",
            ProblemKind::ColumnMissing { .. } => "column_missing",
            ProblemKind::StoreIdentity { .. } => "store_identity",
            ProblemKind::Checkpoint { .. } => "checkpoint",
            ProblemKind::WalUnread { .. } => "wal_unread",
            ProblemKind::DirectoryUnreadable { .. } => "directory_unreadable",
            ProblemKind::DatabaseDamaged { .. } => "database_damaged",
        }
    }
}
