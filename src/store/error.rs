//! Errors of the store. Each message says what went wrong and what to do next, because the
//! person reading it is usually a line operator or a technician, not the author.

use std::path::PathBuf;

/// Everything that can go wrong opening, appending to, reading or verifying a store.
///
/// Tampering and damage found by [`Store::verify`](super::Store::verify) are not errors: they
/// are listed in the [`VerifyReport`](super::VerifyReport). An error means the operation
/// itself could not be done.
#[derive(Debug, thiserror::Error)]
pub enum StoreError {
    /// A file or directory of the store could not be created, read or written.
    #[error("{path}: could not {action}: {source}; check that the path exists, is writable and the disk is not full")]
    Io {
        /// The file or directory concerned.
        path: PathBuf,
        /// What was being done, e.g. "create the store directory".
        action: &'static str,
        /// The operating system's error.
        #[source]
        source: std::io::Error,
    },

    /// The database file is not SQLite at all, or is a SQLite database of some other program.
    #[error("{path}: database is not a tragus store ({detail}); point the store option at a tragus data directory or move this file aside")]
    NotAStore {
        /// The database file.
        path: PathBuf,
        /// What was found instead.
        detail: String,
    },

    /// The store was written by a newer tragus whose schema this version cannot read safely.
    #[error("{path}: store schema version {found} is newer than this tragus supports ({supported}); upgrade tragus")]
    NewerSchema {
        /// The database file.
        path: PathBuf,
        /// Schema version found in the file.
        found: i64,
        /// Newest schema version this build knows.
        supported: i64,
    },

    /// The store has an older schema and the operation reads the current one only
    /// (verification reads every version; appends migrate).
    #[error("{path}: store schema version {found} is older than this tragus's ({current}); run `tragus store migrate --store DIR` first (verify reads it as it is)")]
    OlderSchema {
        /// The database file.
        path: PathBuf,
        /// Schema version found in the file.
        found: i64,
        /// Schema version this build writes.
        current: i64,
    },

    /// Another process held the write lock for longer than the busy timeout.
    #[error("{path}: store is locked by another process, retry")]
    Locked {
        /// The database file.
        path: PathBuf,
    },

    /// Any other SQLite error.
    #[error("{path}: database error: {source}; run verify on the store to look for damage")]
    Sqlite {
        /// The database file.
        path: PathBuf,
        /// SQLite's error.
        #[source]
        source: rusqlite::Error,
    },

    /// A field of a record to append is not acceptable; nothing was written.
    /// The database holds schema objects that are not the store's own (a trigger, view,
    /// table or index someone added): nothing is appended, since such an object can change
    /// or drop what is written.
    #[error("{path}: the store holds schema objects that are not its own ({objects}); nothing was written; keep the store for the audit and run verify on it")]
    ForeignObjects {
        /// The database file.
        path: PathBuf,
        /// The objects, as `type name`, comma-separated.
        objects: String,
    },
    /// An append could not prove its row was written as meant (not exactly one row inserted,
    /// another id, another hash read back): the transaction was rolled back.
    #[error("{path}: the append of {table} row {id} was not written as meant ({detail}); nothing was written; run verify on the store")]
    AppendNotProven {
        /// The database file.
        path: PathBuf,
        /// The table.
        table: &'static str,
        /// The id the row was to have.
        id: i64,
        /// What was found instead.
        detail: String,
    },
    #[error("record field `{field}`: expected {expected}, found {found}")]
    InvalidRecord {
        /// Field name as in [`NewRecord`](super::NewRecord).
        field: &'static str,
        /// What the field must look like.
        expected: &'static str,
        /// What it was (shortened).
        found: String,
    },

    /// A capture file is not where its hash says it should be.
    #[error("{path}: capture file missing; restore it from a backup and run verify on the store")]
    CaptureMissing {
        /// Where the capture should be.
        path: PathBuf,
    },

    /// A capture file exists but its content does not hash to its name.
    #[error("{path}: capture file content does not match its SHA-256 name (damaged or altered); keep it for the audit, restore the original from a backup and run verify on the store")]
    CaptureAltered {
        /// The capture file.
        path: PathBuf,
    },

    /// A stored record cannot be read back as a record (wrong type or value in a column).
    #[error("record {id}: stored field `{column}` is damaged ({detail}); run verify on the store")]
    Corrupt {
        /// Record id.
        id: i64,
        /// Column name.
        column: &'static str,
        /// What was found.
        detail: String,
    },

    /// A stored safety event or exposure cannot be read back (wrong type or value in a
    /// column).
    #[error(
        "{table} row {id}: stored field `{column}` is damaged ({detail}); run verify on the store"
    )]
    CorruptRow {
        /// Table name, `safety_events` or `exposures`.
        table: &'static str,
        /// Row id.
        id: i64,
        /// Column name.
        column: &'static str,
        /// What was found.
        detail: String,
    },
}

/// Shorten outside text for an error message so a megabyte of JSON does not end up in a log.
pub(crate) fn shorten(s: &str) -> String {
    const MAX_CHARS: usize = 40;
    if s.chars().count() <= MAX_CHARS {
        format!("{s:?}")
    } else {
        let head: String = s.chars().take(MAX_CHARS).collect();
        format!("{head:?}…")
    }
}
