//! The reader side of the store: the database opened read-only whatever its schema version
//! (never migrated, nothing written or created in the store directory), verification of a
//! store directory, checkpoints, and the explicit migration (`tragus store migrate`).

use std::path::Path;
use std::time::Duration;

use rusqlite::{Connection, ErrorCode};

use super::archive::ARCHIVE_DIR;
use super::capture::CAPTURE_DIR;
use super::checkpoint::{self, Checkpoint};
use super::error::{self, StoreError};
use super::record::parse_time_utc;
use super::schema::{self, check_identity, sqlite_err, SCHEMA_VERSION};
use super::verify::{self, Problem, ProblemKind, VerifyOptions, VerifyReport};
use super::{Store, DB_FILE};

/// How long a read waits for a writer's lock (only while a crashed writer's log is
/// recovered; readers of a write-ahead log are otherwise never blocked).
const BUSY_TIMEOUT: Duration = schema::BUSY_TIMEOUT;

/// How a read-only connection reads the database file.
#[derive(Debug, Clone, PartialEq, Eq)]
pub(crate) enum ReadMode {
    /// `mode=ro` with SQLite's locks and write-ahead-log index: another process has the store
    /// open (or a crash left its log), so its log must be read and its writes waited for.
    Locked,
    /// `mode=ro&immutable=1`: no locks, no log, no file created. Used when no write-ahead
    /// log exists (the last writer closed cleanly, so the file holds every commit), because
    /// a `mode=ro` connection would create the `-wal` and `-shm` files beside it and leave
    /// them there; and on read-only media where a log cannot be read.
    Immutable {
        /// The database file as it was before the open; a writer that started meanwhile
        /// shows as a difference ([`ReadOnlyDb::changed_since_open`]).
        before: FileState,
        /// Size of a write-ahead log that exists but could not be read (read-only media):
        /// commits in it are not seen.
        wal_unread: Option<u64>,
    },
}

/// What identifies one state of a file: device, inode, size, modification and change times.
#[derive(Debug, Clone, PartialEq, Eq)]
pub(crate) struct FileState {
    id: (u64, u64),
    len: u64,
    modified: (i64, i64),
    changed: (i64, i64),
}

impl FileState {
    /// The state of `path` now (without following a final link); `None` when absent.
    pub(crate) fn of(path: &Path) -> Option<FileState> {
        let meta = std::fs::symlink_metadata(path).ok()?;
        #[cfg(unix)]
        {
            use std::os::unix::fs::MetadataExt;
            Some(FileState {
                id: (meta.dev(), meta.ino()),
                len: meta.len(),
                modified: (meta.mtime(), meta.mtime_nsec()),
                changed: (meta.ctime(), meta.ctime_nsec()),
            })
        }
        #[cfg(not(unix))]
        {
            let since = |t: std::io::Result<std::time::SystemTime>| {
                t.ok()
                    .and_then(|t| t.duration_since(std::time::UNIX_EPOCH).ok())
                    .map_or((0, 0), |d| {
                        (d.as_secs() as i64, i64::from(d.subsec_nanos()))
                    })
            };
            Some(FileState {
                id: (0, 0),
                len: meta.len(),
                modified: since(meta.modified()),
                changed: since(meta.created()),
            })
        }
    }
}

/// A read-only connection to a store's database, of whatever schema version it has.
#[derive(Debug)]
pub(crate) struct ReadOnlyDb {
    /// The connection (`query_only`, `trusted_schema` off).
    pub conn: Connection,
    /// How it reads.
    pub mode: ReadMode,
    /// The schema version found (`PRAGMA user_version`), 1 to [`SCHEMA_VERSION`].
    pub version: i64,
}

/// `path` with `suffix` appended to its file name (`tragus.db` → `tragus.db-wal`).
pub(crate) fn sidecar(path: &Path, suffix: &str) -> std::path::PathBuf {
    let mut s = path.as_os_str().to_owned();
    s.push(suffix);
    s.into()
}

/// True when SQLite's write-ahead log, its index or a rollback journal is beside `path`.
fn has_sidecars(path: &Path) -> bool {
    ["-wal", "-shm", "-journal"]
        .iter()
        .any(|s| std::fs::symlink_metadata(sidecar(path, s)).is_ok())
}

impl ReadOnlyDb {
    /// True when the connection is [`ReadMode::Immutable`] and the file may have changed
    /// while it was read (a writer started: the file or a log changed or appeared). What was
    /// read then may be a mix of two states and must be read again.
    pub(crate) fn changed_since_open(&self, path: &Path) -> bool {
        changed_since(&self.mode, path)
    }
}

/// See [`ReadOnlyDb::changed_since_open`].
pub(crate) fn changed_since(mode: &ReadMode, path: &Path) -> bool {
    match mode {
        // Under locks SQLite keeps the snapshot; with an unread log the log was there from
        // the start (and is reported).
        ReadMode::Locked
        | ReadMode::Immutable {
            wal_unread: Some(_),
            ..
        } => false,
        ReadMode::Immutable { before, .. } => {
            FileState::of(path).as_ref() != Some(before) || has_sidecars(path)
        }
    }
}

/// A `file:` URI for `path` with `query`: every byte outside the unreserved set and `/`
/// percent-encoded, so `?`, `#` and `%` in a directory name stay part of the path.
fn file_uri(path: &Path, query: &str) -> String {
    let bytes: Vec<u8> = {
        #[cfg(unix)]
        {
            use std::os::unix::ffi::OsStrExt;
            path.as_os_str().as_bytes().to_vec()
        }
        #[cfg(not(unix))]
        {
            path.to_string_lossy().replace('\\', "/").into_bytes()
        }
    };
    let mut uri = String::from("file:");
    for b in bytes {
        if b.is_ascii_alphanumeric() || b"-._~/".contains(&b) {
            uri.push(char::from(b));
        } else {
            uri.push_str(&format!("%{b:02X}"));
        }
    }
    uri.push('?');
    uri.push_str(query);
    uri
}

/// Open the database at `path` read-only, whatever its schema version (1 to
/// [`SCHEMA_VERSION`]), never migrating and never writing: [`ReadMode`] says how.
///
/// Fails with [`StoreError::NotAStore`] for a file that is not a tragus store (an empty
/// database included), [`StoreError::NewerSchema`] for a newer one, [`StoreError::Io`] when
/// the file cannot be opened.
pub(crate) fn open_read_only(path: &Path) -> Result<ReadOnlyDb, StoreError> {
    if std::fs::symlink_metadata(path).is_err() {
        return Err(StoreError::Io {
            path: path.to_owned(),
            action: "open the database",
            source: std::io::Error::new(std::io::ErrorKind::NotFound, "no such file"),
        });
    }
    let mode = if has_sidecars(path) {
        match connect_read_only(path, "mode=ro") {
            Ok(conn) => return finish_read_only(path, conn, ReadMode::Locked),
            // Read-only media: the log's index cannot be created or locked. Read the file as
            // it is and say how much log was left unread.
            Err(e) if is_read_only_failure(&e) => ReadMode::Immutable {
                before: FileState::of(path).ok_or_else(|| gone(path))?,
                wal_unread: std::fs::metadata(sidecar(path, "-wal"))
                    .map(|m| m.len())
                    .ok()
                    .filter(|&n| n > 0),
            },
            Err(e) => return Err(open_err(path, e)),
        }
    } else {
        ReadMode::Immutable {
            before: FileState::of(path).ok_or_else(|| gone(path))?,
            wal_unread: None,
        }
    };
    let conn = connect_read_only(path, "mode=ro&immutable=1").map_err(|e| open_err(path, e))?;
    finish_read_only(path, conn, mode)
}

fn gone(path: &Path) -> StoreError {
    StoreError::Io {
        path: path.to_owned(),
        action: "look at the database",
        source: std::io::Error::new(std::io::ErrorKind::NotFound, "it disappeared"),
    }
}

fn open_err(path: &Path, e: rusqlite::Error) -> StoreError {
    match e.sqlite_error_code() {
        Some(ErrorCode::CannotOpen) | Some(ErrorCode::PermissionDenied) => StoreError::Io {
            path: path.to_owned(),
            action: "open the database read-only",
            source: std::io::Error::other(e),
        },
        _ => sqlite_err(path, e),
    }
}

/// SQLite could not set up reading the log on this medium (no `-shm` can be made, no lock
/// taken): worth a retry without the log.
fn is_read_only_failure(e: &rusqlite::Error) -> bool {
    matches!(
        e.sqlite_error_code(),
        Some(ErrorCode::CannotOpen)
            | Some(ErrorCode::ReadOnly)
            | Some(ErrorCode::PermissionDenied)
            | Some(ErrorCode::FileLockingProtocolFailed)
    )
}

/// Open with `query` and read the header once, since SQLite opens lazily and a failure to
/// read the log shows only at the first read.
fn connect_read_only(path: &Path, query: &str) -> rusqlite::Result<Connection> {
    use rusqlite::OpenFlags;
    let conn = Connection::open_with_flags(
        file_uri(path, query),
        OpenFlags::SQLITE_OPEN_READ_ONLY
            | OpenFlags::SQLITE_OPEN_URI
            | OpenFlags::SQLITE_OPEN_NO_MUTEX,
    )?;
    conn.busy_timeout(BUSY_TIMEOUT)?;
    // A database from elsewhere must not run our connection's functions from its schema;
    // and nothing this connection runs may write.
    conn.pragma_update(None, "trusted_schema", false)?;
    conn.pragma_update(None, "query_only", true)?;
    conn.query_row("SELECT COUNT(*) FROM sqlite_schema", [], |r| {
        r.get::<_, i64>(0)
    })?;
    Ok(conn)
}

fn finish_read_only(
    path: &Path,
    conn: Connection,
    mode: ReadMode,
) -> Result<ReadOnlyDb, StoreError> {
    let err = |e| sqlite_err(path, e);
    let app_id: i64 = conn
        .pragma_query_value(None, "application_id", |r| r.get(0))
        .map_err(err)?;
    let version: i64 = conn
        .pragma_query_value(None, "user_version", |r| r.get(0))
        .map_err(err)?;
    check_identity(path, &conn, app_id, version)?;
    if version < 1 {
        return Err(StoreError::NotAStore {
            path: path.to_owned(),
            detail: "it is an empty database: no store was ever created in it".into(),
        });
    }
    Ok(ReadOnlyDb {
        conn,
        mode,
        version,
    })
}

/// The schema version of a store and whether it is current, as `tragus store migrate`
/// reports it.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Migration {
    /// The version the store had.
    pub from: i64,
    /// The version it has now ([`SCHEMA_VERSION`]).
    pub to: i64,
}

/// Verify the store in `dir` as a pure reader: the database is opened read-only, of
/// whatever schema version (1 to [`SCHEMA_VERSION`]) it has, and never migrated; nothing in
/// the directory is written, created or removed. Every problem is in the report; an error
/// means the verification could not run (no store there, an unreadable database).
///
/// When the store was closed cleanly (no write-ahead log beside the database) it is read
/// as an immutable file; should a writer start meanwhile, the verification is done again
/// under SQLite's locks.
pub fn verify_dir(dir: &Path, options: &VerifyOptions<'_>) -> Result<VerifyReport, StoreError> {
    let db_path = dir.join(DB_FILE);
    let capture_dir = dir.join(CAPTURE_DIR);
    let archive_dir = dir.join(ARCHIVE_DIR);
    let mut attempt = 0;
    loop {
        attempt += 1;
        let db = open_read_only(&db_path)?;
        let paths = verify::StorePaths {
            capture_dir: &capture_dir,
            archive_dir: &archive_dir,
        };
        let mut report = verify::verify_db(&db.conn, &db_path, db.version, paths, options)?;
        // A writer started while the file was read without locks: what was read may mix two
        // states. The next open sees its log and reads under locks.
        if db.changed_since_open(&db_path) && attempt < 4 {
            continue;
        }
        if let ReadMode::Immutable {
            wal_unread: Some(bytes),
            ..
        } = db.mode
        {
            report.problems.insert(
                0,
                Problem {
                    record_id: None,
                    kind: ProblemKind::WalUnread {
                        path: sidecar(&db_path, "-wal"),
                        bytes,
                    },
                },
            );
        }
        return Ok(report);
    }
}

impl Store {
    /// Open the store in `dir` for reading only: nothing is created, migrated or written
    /// (see [`verify_dir`]); appends fail. The store must have the current schema
    /// ([`StoreError::OlderSchema`] otherwise: run `tragus store migrate`).
    pub fn open_read_only(dir: &Path) -> Result<Store, StoreError> {
        let db_path = dir.join(DB_FILE);
        let db = open_read_only(&db_path)?;
        if db.version < SCHEMA_VERSION {
            return Err(StoreError::OlderSchema {
                path: db_path,
                found: db.version,
                current: SCHEMA_VERSION,
            });
        }
        Ok(Store {
            dir: dir.to_owned(),
            db_path,
            capture_dir: dir.join(CAPTURE_DIR),
            archive_dir: dir.join(ARCHIVE_DIR),
            conn: db.conn,
            signer: None,
            read_mode: Some(db.mode),
        })
    }

    /// Verify the store (see [`verify_dir`] for what is checked) with a keyring and
    /// checkpoints.
    pub fn verify_with(&self, options: &VerifyOptions<'_>) -> Result<VerifyReport, StoreError> {
        let paths = verify::StorePaths {
            capture_dir: &self.capture_dir,
            archive_dir: &self.archive_dir,
        };
        verify::verify_db(&self.conn, &self.db_path, SCHEMA_VERSION, paths, options)
    }

    /// A checkpoint of the store now, signed with `key` (the station's key): the store id
    /// and each chain's row count and head hash. Fails when a chain's ids are not 1 to its
    /// count (the store must be verified, not checkpointed).
    pub fn checkpoint(&self, key: &crate::keys::StationKey) -> Result<Checkpoint, StoreError> {
        self.checkpoint_at(key, &checkpoint::now_time_utc())
    }

    /// [`checkpoint`](Self::checkpoint) stating the time `time_utc` (the store's time form).
    pub fn checkpoint_at(
        &self,
        key: &crate::keys::StationKey,
        time_utc: &str,
    ) -> Result<Checkpoint, StoreError> {
        if parse_time_utc(time_utc).is_none() {
            return Err(StoreError::InvalidRecord {
                field: "time_utc",
                expected: "a UTC time like 2025-03-14T17:00:00Z",
                found: error::shorten(time_utc),
            });
        }
        let (store_id, heads) = checkpoint::read_heads(&self.conn, &self.db_path)?;
        if let Some(mode) = &self.read_mode {
            if changed_since(mode, &self.db_path) {
                // Read without locks while a writer started: never sign a mixed state.
                return Err(StoreError::Locked {
                    path: self.db_path.clone(),
                });
            }
        }
        Ok(Checkpoint::sign(&store_id, time_utc, heads, key))
    }

    /// Bring the store in `dir` to the current schema (`tragus store migrate`), the only
    /// change of schema besides an append by a newer tragus. Refuses a directory without a
    /// store ([`StoreError::Io`]) and a file that is not one.
    pub fn migrate(dir: &Path) -> Result<Migration, StoreError> {
        let (from, to) = schema::migrate_file(&dir.join(DB_FILE))?;
        Ok(Migration { from, to })
    }
}
