//! The database schema, how a file is recognised as a tragus store, and the migration path
//! from one schema version to the next.
//!
//! The schema version lives in `PRAGMA user_version`; `PRAGMA application_id` marks the file
//! as a tragus store so another program's database is never migrated by mistake.

use std::path::Path;
use std::time::Duration;

use rusqlite::{Connection, ErrorCode, TransactionBehavior};

use super::error::StoreError;

/// `PRAGMA application_id` of a tragus store: the ASCII bytes "TRGS" as a big-endian i32.
pub(crate) const APPLICATION_ID: i64 = 0x5452_4753;

/// Schema version this build writes and reads.
pub const SCHEMA_VERSION: i64 = 4;

/// How long an append waits for another process's write to finish before giving up with
/// [`StoreError::Locked`]. An append holds the lock for one fsync'd transaction
/// (milliseconds), so 10 s is only exceeded when something is really stuck.
pub(crate) const BUSY_TIMEOUT: Duration = Duration::from_secs(10);

/// The triggers that make records append-only and the chain linear, as `(name, SQL)`.
///
/// Verification checks that each exists with exactly this text. They belong to schema
/// version 1; a later version that changes one must write its new text into its own
/// migration and update this list to the newest text.
pub(crate) const TRIGGERS: [(&str, &str); 3] = [
    (
        "records_no_update",
        "CREATE TRIGGER records_no_update BEFORE UPDATE ON records
BEGIN
    SELECT RAISE(ABORT, 'tragus store is append-only: records cannot be updated');
END",
    ),
    (
        "records_no_delete",
        "CREATE TRIGGER records_no_delete BEFORE DELETE ON records
BEGIN
    SELECT RAISE(ABORT, 'tragus store is append-only: records cannot be deleted');
END",
    ),
    // Also stops INSERT OR REPLACE over an existing id, which deletes a row without firing
    // the delete trigger.
    (
        "records_chain_linear",
        "CREATE TRIGGER records_chain_linear BEFORE INSERT ON records
WHEN NEW.id IS NOT (SELECT COALESCE(MAX(id), 0) + 1 FROM records)
  OR NEW.prev_hash IS NOT COALESCE(
        (SELECT record_hash FROM records ORDER BY id DESC LIMIT 1),
        '0000000000000000000000000000000000000000000000000000000000000000')
BEGIN
    SELECT RAISE(ABORT, 'tragus store chain: a record must follow the last record');
END",
    ),
];

/// The triggers that make `safety_events` and `exposures` append-only and their chains
/// linear, as `(name, SQL)`: the same three rules as [`TRIGGERS`], one set per table.
///
/// They belong to schema version 3 (created by its migration); verification checks them
/// like [`TRIGGERS`].
pub(crate) const SAFETY_TRIGGERS: [(&str, &str); 6] = [
    (
        "safety_events_no_update",
        "CREATE TRIGGER safety_events_no_update BEFORE UPDATE ON safety_events
BEGIN
    SELECT RAISE(ABORT, 'tragus store is append-only: safety events cannot be updated');
END",
    ),
    (
        "safety_events_no_delete",
        "CREATE TRIGGER safety_events_no_delete BEFORE DELETE ON safety_events
BEGIN
    SELECT RAISE(ABORT, 'tragus store is append-only: safety events cannot be deleted');
END",
    ),
    (
        "safety_events_chain_linear",
        "CREATE TRIGGER safety_events_chain_linear BEFORE INSERT ON safety_events
WHEN NEW.id IS NOT (SELECT COALESCE(MAX(id), 0) + 1 FROM safety_events)
  OR NEW.prev_hash IS NOT COALESCE(
        (SELECT row_hash FROM safety_events ORDER BY id DESC LIMIT 1),
        '0000000000000000000000000000000000000000000000000000000000000000')
BEGIN
    SELECT RAISE(ABORT, 'tragus store chain: a safety event must follow the last safety event');
END",
    ),
    (
        "exposures_no_update",
        "CREATE TRIGGER exposures_no_update BEFORE UPDATE ON exposures
BEGIN
    SELECT RAISE(ABORT, 'tragus store is append-only: exposures cannot be updated');
END",
    ),
    (
        "exposures_no_delete",
        "CREATE TRIGGER exposures_no_delete BEFORE DELETE ON exposures
BEGIN
    SELECT RAISE(ABORT, 'tragus store is append-only: exposures cannot be deleted');
END",
    ),
    (
        "exposures_chain_linear",
        "CREATE TRIGGER exposures_chain_linear BEFORE INSERT ON exposures
WHEN NEW.id IS NOT (SELECT COALESCE(MAX(id), 0) + 1 FROM exposures)
  OR NEW.prev_hash IS NOT COALESCE(
        (SELECT row_hash FROM exposures ORDER BY id DESC LIMIT 1),
        '0000000000000000000000000000000000000000000000000000000000000000')
BEGIN
    SELECT RAISE(ABORT, 'tragus store chain: an exposure must follow the last exposure');
END",
    ),
];

/// The triggers that keep `store_meta` (the store's identity) write-once, as `(name, SQL)`.
/// They belong to schema version 4; verification checks them like [`TRIGGERS`].
pub(crate) const META_TRIGGERS: [(&str, &str); 2] = [
    (
        "store_meta_no_update",
        "CREATE TRIGGER store_meta_no_update BEFORE UPDATE ON store_meta
BEGIN
    SELECT RAISE(ABORT, 'tragus store identity cannot be changed');
END",
    ),
    (
        "store_meta_no_delete",
        "CREATE TRIGGER store_meta_no_delete BEFORE DELETE ON store_meta
BEGIN
    SELECT RAISE(ABORT, 'tragus store identity cannot be deleted');
END",
    ),
];

/// Every schema object a version-4 store has, as `(type, name)`: the tables, their indexes
/// (SQLite's own automatic index of `store_meta`'s primary key included) and the triggers.
/// Anything else in `sqlite_schema` (a trigger, view, table or index someone added) is
/// foreign: the append refuses to write and verification reports it as tampering.
pub(crate) const OWN_OBJECTS: [(&str, &str); 22] = [
    ("table", "records"),
    ("table", "safety_events"),
    ("table", "exposures"),
    ("table", "store_meta"),
    ("index", "records_by_serial"),
    ("index", "records_by_plan"),
    ("index", "records_by_time"),
    ("index", "safety_events_by_time"),
    ("index", "safety_events_by_serial"),
    ("index", "exposures_by_operator"),
    ("index", "sqlite_autoindex_store_meta_1"),
    ("trigger", "records_no_update"),
    ("trigger", "records_no_delete"),
    ("trigger", "records_chain_linear"),
    ("trigger", "safety_events_no_update"),
    ("trigger", "safety_events_no_delete"),
    ("trigger", "safety_events_chain_linear"),
    ("trigger", "exposures_no_update"),
    ("trigger", "exposures_no_delete"),
    ("trigger", "exposures_chain_linear"),
    ("trigger", "store_meta_no_update"),
    ("trigger", "store_meta_no_delete"),
];

/// Migrations, index `i` takes the schema from version `i` to `i + 1`. Add a new entry for a
/// new version; never edit an old one, stores in the field have already run it.
const MIGRATIONS: [&str; SCHEMA_VERSION as usize] = [
    // 0 → 1: the first schema.
    r#"
CREATE TABLE records (
    -- Assigned by the store as the previous id + 1; hashed into the record.
    id               INTEGER PRIMARY KEY,
    time_utc         TEXT    NOT NULL,
    -- Derived from time_utc for the time filter; not hashed, verification recomputes it.
    time_unix_ns     INTEGER NOT NULL,
    serial           TEXT    NOT NULL,
    plan_id          TEXT    NOT NULL,
    plan_revision    INTEGER NOT NULL,
    plan_sha256      TEXT    NOT NULL,
    software_version TEXT    NOT NULL,
    station          TEXT    NOT NULL,
    operator         TEXT    NOT NULL,
    rig              TEXT    NOT NULL,
    verdict          TEXT    NOT NULL CHECK (verdict IN ('pass', 'fail', 'retest')),
    result_json      TEXT    NOT NULL,
    capture_sha256   TEXT    NOT NULL,
    prev_hash        TEXT    NOT NULL,
    record_hash      TEXT    NOT NULL,
    -- Reserved for the station key's signature over record_hash; NULL until keys exist.
    signature        BLOB
) STRICT;

CREATE INDEX records_by_serial ON records (serial);
CREATE INDEX records_by_plan   ON records (plan_id);
CREATE INDEX records_by_time   ON records (time_unix_ns);
"#,
    // 1 → 2: the calibration each unit was tested under. Records from schema 1 keep NULL in
    // both columns (their hash is over the v1 form); every record appended from now on has
    // a mode, and its hash is over the v2 form that includes both columns.
    r#"
ALTER TABLE records ADD COLUMN calibration_mode   TEXT;
ALTER TABLE records ADD COLUMN calibration_sha256 TEXT;
"#,
    // 2 → 3: hearing-safety events and operators' listening exposures (issue 5), each table
    // its own hash chain. Records are untouched, so every record keeps verifying. No CHECK
    // on `kind`: a new kind must not need a table rebuild; the store and verify check it.
    r#"
CREATE TABLE safety_events (
    -- Assigned by the store as the previous id + 1; hashed.
    id           INTEGER PRIMARY KEY,
    time_utc     TEXT    NOT NULL,
    -- Derived from time_utc for the time filter; not hashed, verification recomputes it.
    time_unix_ns INTEGER NOT NULL,
    station      TEXT    NOT NULL,
    operator     TEXT    NOT NULL,
    -- NULL when there is no unit (a plan refused before any unit was scanned).
    serial       TEXT,
    plan_id      TEXT    NOT NULL,
    plan_sha256  TEXT,
    kind         TEXT    NOT NULL,
    message      TEXT    NOT NULL,
    detail_json  TEXT    NOT NULL,
    -- The unit record the event belongs to, when there is one.
    record_id    INTEGER,
    prev_hash    TEXT    NOT NULL,
    row_hash     TEXT    NOT NULL
) STRICT;

CREATE INDEX safety_events_by_time   ON safety_events (time_unix_ns);
CREATE INDEX safety_events_by_serial ON safety_events (serial);

CREATE TABLE exposures (
    id           INTEGER PRIMARY KEY,
    operator     TEXT    NOT NULL,
    station      TEXT    NOT NULL,
    start_unix_s INTEGER NOT NULL,
    level_dba    REAL    NOT NULL,
    duration_s   REAL    NOT NULL,
    serial       TEXT    NOT NULL,
    plan_id      TEXT    NOT NULL,
    record_id    INTEGER,
    prev_hash    TEXT    NOT NULL,
    row_hash     TEXT    NOT NULL
) STRICT;

CREATE INDEX exposures_by_operator ON exposures (operator, start_unix_s);
"#,
    // 3 → 4: the auditor's store (issue 12). Records gain the build identity, the links to
    // the archived inputs and what was played (gains), all three hashed (record form v3),
    // and the key id beside the signature; safety events and exposures gain a signature
    // and key id (not hashed: a signature is over the hash). `store_meta` holds the
    // store's random identity, which checkpoints name. Older rows keep their forms.
    r#"
ALTER TABLE records ADD COLUMN key_id        TEXT;
ALTER TABLE records ADD COLUMN build         TEXT;
ALTER TABLE records ADD COLUMN inputs_json   TEXT;
ALTER TABLE records ADD COLUMN playback_json TEXT;
ALTER TABLE safety_events ADD COLUMN signature BLOB;
ALTER TABLE safety_events ADD COLUMN key_id    TEXT;
ALTER TABLE exposures ADD COLUMN signature BLOB;
ALTER TABLE exposures ADD COLUMN key_id    TEXT;
CREATE TABLE store_meta (
    name  TEXT PRIMARY KEY,
    value TEXT NOT NULL
) STRICT;
"#,
];

/// Map a SQLite error on `path` to the store error that says what to do.
pub(crate) fn sqlite_err(path: &Path, e: rusqlite::Error) -> StoreError {
    match e.sqlite_error_code() {
        Some(ErrorCode::DatabaseBusy) | Some(ErrorCode::DatabaseLocked) => StoreError::Locked {
            path: path.to_owned(),
        },
        Some(ErrorCode::NotADatabase) => StoreError::NotAStore {
            path: path.to_owned(),
            detail: "the file is not a SQLite database".into(),
        },
        Some(ErrorCode::ReadOnly) => StoreError::Io {
            path: path.to_owned(),
            action: "write the database",
            source: std::io::Error::new(
                std::io::ErrorKind::PermissionDenied,
                "the database file or its directory is read-only",
            ),
        },
        Some(ErrorCode::DiskFull) => StoreError::Io {
            path: path.to_owned(),
            action: "write the database",
            source: std::io::Error::other("the disk is full"),
        },
        _ => StoreError::Sqlite {
            path: path.to_owned(),
            source: e,
        },
    }
}

/// Open (or create) the database at `path`, set the connection up and bring the schema to
/// [`SCHEMA_VERSION`].
pub(crate) fn open_database(path: &Path) -> Result<Connection, StoreError> {
    let err = |e| sqlite_err(path, e);
    let mut conn = Connection::open(path).map_err(|e| match e.sqlite_error_code() {
        Some(ErrorCode::CannotOpen) => StoreError::Io {
            path: path.to_owned(),
            action: "open the database",
            source: std::io::Error::other(e),
        },
        _ => sqlite_err(path, e),
    })?;
    conn.busy_timeout(BUSY_TIMEOUT).map_err(err)?;
    // A database from elsewhere must not run our connection's functions from its schema.
    conn.pragma_update(None, "trusted_schema", false)
        .map_err(err)?;

    // The first read of the header is where a non-SQLite file shows itself.
    let app_id: i64 = conn
        .pragma_query_value(None, "application_id", |r| r.get(0))
        .map_err(err)?;
    let version: i64 = conn
        .pragma_query_value(None, "user_version", |r| r.get(0))
        .map_err(err)?;
    check_identity(path, &conn, app_id, version)?;

    let mode: String = conn
        .pragma_update_and_check(None, "journal_mode", "WAL", |r| r.get(0))
        .map_err(err)?;
    if !mode.eq_ignore_ascii_case("wal") {
        return Err(StoreError::Io {
            path: path.to_owned(),
            action: "switch the database to write-ahead logging",
            source: std::io::Error::other(format!(
                "journal mode stayed {mode:?}; put the store on a local disk"
            )),
        });
    }
    // FULL: a commit is on the disk when append returns, not only in the OS cache.
    conn.pragma_update(None, "synchronous", "FULL")
        .map_err(err)?;

    if version < SCHEMA_VERSION {
        migrate(path, &mut conn)?;
    }
    Ok(conn)
}

/// Refuse files that are some other program's database or a newer tragus's store.
pub(crate) fn check_identity(
    path: &Path,
    conn: &Connection,
    app_id: i64,
    version: i64,
) -> Result<(), StoreError> {
    if app_id == APPLICATION_ID {
        if version > SCHEMA_VERSION {
            return Err(StoreError::NewerSchema {
                path: path.to_owned(),
                found: version,
                supported: SCHEMA_VERSION,
            });
        }
        return Ok(());
    }
    if app_id != 0 {
        return Err(StoreError::NotAStore {
            path: path.to_owned(),
            detail: format!(
                "its application id is {app_id:#010x}, a tragus store's is {APPLICATION_ID:#010x}"
            ),
        });
    }
    let n_objects: i64 = conn
        .query_row("SELECT COUNT(*) FROM sqlite_schema", [], |r| r.get(0))
        .map_err(|e| sqlite_err(path, e))?;
    if n_objects > 0 || version != 0 {
        return Err(StoreError::NotAStore {
            path: path.to_owned(),
            detail: format!(
                "it is a SQLite database with {n_objects} schema objects but no tragus mark"
            ),
        });
    }
    Ok(())
}

/// Run the migrations from the file's version up to [`SCHEMA_VERSION`], each in its own
/// immediate transaction so two processes opening a new store at once do not both run it.
fn migrate(path: &Path, conn: &mut Connection) -> Result<(), StoreError> {
    let err = |e| sqlite_err(path, e);
    loop {
        let tx = conn
            .transaction_with_behavior(TransactionBehavior::Immediate)
            .map_err(err)?;
        // Re-read under the write lock: another process may have migrated meanwhile.
        let version: i64 = tx
            .pragma_query_value(None, "user_version", |r| r.get(0))
            .map_err(err)?;
        if version >= SCHEMA_VERSION {
            return Ok(());
        }
        let step = usize::try_from(version).map_err(|_| StoreError::NotAStore {
            path: path.to_owned(),
            detail: format!("its schema version is {version}"),
        })?;
        tx.execute_batch(MIGRATIONS[step]).map_err(err)?;
        if step == 0 {
            for (_, sql) in TRIGGERS {
                tx.execute_batch(sql).map_err(err)?;
            }
        }
        if step == 2 {
            for (_, sql) in SAFETY_TRIGGERS {
                tx.execute_batch(sql).map_err(err)?;
            }
        }
        if step == 3 {
            for (_, sql) in META_TRIGGERS {
                tx.execute_batch(sql).map_err(err)?;
            }
            tx.execute(
                "INSERT INTO store_meta (name, value) VALUES ('store_id', ?1)",
                [new_store_id()],
            )
            .map_err(err)?;
        }
        tx.pragma_update(None, "application_id", APPLICATION_ID)
            .map_err(err)?;
        tx.pragma_update(None, "user_version", version + 1)
            .map_err(err)?;
        tx.commit().map_err(err)?;
    }
}

/// A new store's identity: 128 random bits from the OS, as 32 lowercase hex digits.
fn new_store_id() -> String {
    let mut bytes = [0u8; 16];
    rand::Rng::fill(&mut rand::rng(), &mut bytes);
    hex::encode(bytes)
}

/// The schema objects of the database that are not the store's own
/// ([`OWN_OBJECTS`]), as `(type, name)`, sorted. Empty for an intact store of the current
/// version; for an older version only the objects of that version count as own.
pub(crate) fn foreign_objects(
    conn: &Connection,
    version: i64,
) -> rusqlite::Result<Vec<(String, String)>> {
    let own: Vec<(&str, &str)> = OWN_OBJECTS
        .iter()
        .copied()
        .filter(|(_, name)| object_version(name) <= version)
        .collect();
    let mut stmt = conn.prepare("SELECT type, name FROM sqlite_schema ORDER BY type, name")?;
    let rows = stmt.query_map([], |r| Ok((r.get::<_, String>(0)?, r.get::<_, String>(1)?)))?;
    let mut out = Vec::new();
    for row in rows {
        let (ty, name) = row?;
        if !own.iter().any(|&(t, n)| t == ty && n == name) {
            out.push((ty, name));
        }
    }
    Ok(out)
}

/// The schema version that created an own object.
fn object_version(name: &str) -> i64 {
    if name.starts_with("records") {
        1
    } else if name.starts_with("safety_events") || name.starts_with("exposures") {
        3
    } else {
        4
    }
}

/// Bring the database at `path` to [`SCHEMA_VERSION`] (`tragus store migrate`); returns
/// the version it had and the version it has now. Refuses a file that is not a store.
pub(crate) fn migrate_file(path: &Path) -> Result<(i64, i64), StoreError> {
    let from = super::read_only::open_read_only(path)?.version;
    drop(open_database(path)?);
    Ok((from, SCHEMA_VERSION))
}

/// The names of the columns of `table`, empty when there is no such table.
pub(crate) fn table_columns(conn: &Connection, table: &str) -> rusqlite::Result<Vec<String>> {
    let mut stmt = conn.prepare("SELECT name FROM pragma_table_info(?1)")?;
    let rows = stmt.query_map([table], |r| r.get::<_, String>(0))?;
    rows.collect()
}

/// The triggers a store of schema `version` has, as `(name, SQL)`.
pub(crate) fn own_triggers(version: i64) -> Vec<(&'static str, &'static str)> {
    let mut out: Vec<(&str, &str)> = TRIGGERS.to_vec();
    if version >= 3 {
        out.extend(SAFETY_TRIGGERS);
    }
    if version >= 4 {
        out.extend(META_TRIGGERS);
    }
    out
}
