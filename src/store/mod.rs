//! The store: one SQLite database per station, append-only records, raw captures by hash.
//!
//! It sits at the end of the data flow: after [`checks`](crate::checks) has judged a unit, the
//! CLI hands the result (as JSON) and the raw capture (as WAV bytes) to [`Store::append`];
//! [`report`](crate::report) and auditors read records back with [`Store::get`],
//! [`Store::list`] and [`Store::verify`].
//!
//! # Layout on disk
//!
//! ```text
//! DIR/tragus.db                      SQLite, WAL journal, synchronous=FULL
//! DIR/tragus.db-wal, tragus.db-shm   SQLite's write-ahead log and its index
//! DIR/captures/<sha256-hex>.wav      raw captures, named by the SHA-256 of their bytes
//! DIR/archive/<sha256-hex>.json      archived inputs (plan with its CSVs and models, station
//!                                    file, calibration file), named by the SHA-256 of their
//!                                    bytes (form: [`InputBundle`])
//! ```
//!
//! Since schema 3 the store also keeps hearing-safety events and operators' listening
//! exposures in two more append-only tables, `safety_events` and `exposures`, each its own
//! hash chain (see "Hearing-safety rows" below).
//!
//! Records are append-only: triggers make SQLite refuse any `UPDATE` or `DELETE` on
//! `records`, and any `INSERT` whose id and `prev_hash` do not continue the chain. Triggers
//! stop mistakes, not someone with write access to the file; the hash chain is what makes
//! tampering visible. The schema version is `PRAGMA user_version` (see [`SCHEMA_VERSION`]);
//! opening an older store migrates it, opening a newer one is refused.
//!
//! # Canonical byte form
//!
//! `record_hash` is the SHA-256 (FIPS 180-4) of these bytes, written as 64 lowercase hex
//! digits. Auditors recompute it from the stored columns alone. Records appended since
//! schema 4 use the v3 form:
//!
//! ```text
//! canonical = "tragus-record-v3" LF  (the fields of the v2 form below, up to and including
//!             field("calibration_sha256"))  field("build") field("inputs_json")
//!             field("playback_json") field("prev_hash")
//! ```
//!
//! `build` is the software build identity, `inputs_json` the links to the archived inputs
//! (a JSON object, role → SHA-256 of the archived file, written `{}` when there are none),
//! `playback_json` what was played (a JSON object: `abandoned`, `calibration_offsets_db`,
//! `drive_gain_db`), each as stored. A verifier picks the form by `build`: non-NULL → v3.
//! Worked example (the reference's first schema-4 record; checked like the v2 example
//! below), `record_hash` `8f37f3442ff66c52264240b8b4cf86f734bd2584cd5dc7c09772e1124783c3ef`:
//!
//! ```text
//! tragus-record-v3
//! id:1:1
//! time_utc:24:2025-03-14T09:26:53.589Z
//! serial:9:E2-000123
//! plan_id:11:demo-earbud
//! plan_revision:1:3
//! plan_sha256:64:aaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaa
//! software_version:5:0.1.0
//! station:18:larkspur-line3-st1
//! operator:8:j.okafor
//! rig:9:simulated
//! verdict:4:pass
//! result_json:18:{"verdict":"pass"}
//! capture_sha256:64:531cd597b25052b4845ef2f3887dec2183240802a93b6e044960de8ba017caa0
//! calibration_mode:10:production
//! calibration_sha256:64:bbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbb
//! build:22:0.1.0+git.0123456789ab
//! inputs_json:2:{}
//! playback_json:76:{"abandoned":false,"calibration_offsets_db":null,"drive_gain_db":[0.0,-6.5]}
//! prev_hash:64:0000000000000000000000000000000000000000000000000000000000000000
//! ```
//!
//! Records appended under schemas 2 and 3 keep the v2 form:
//!
//! ```text
//! canonical = "tragus-record-v2" LF  field("id") field("time_utc") field("serial")
//!             field("plan_id") field("plan_revision") field("plan_sha256")
//!             field("software_version") field("station") field("operator") field("rig")
//!             field("verdict") field("result_json") field("capture_sha256")
//!             field("calibration_mode") field("calibration_sha256") field("prev_hash")
//! field(NAME) = NAME ":" LEN ":" VALUE LF
//! ```
//!
//! Records written by schema 1 (before calibrations were recorded; after the migration
//! their `calibration_mode` is NULL) keep the v1 form they were hashed with: header
//! `"tragus-record-v1"`, and no `calibration_mode` or `calibration_sha256` fields. A
//! verifier picks the form by `calibration_mode`: NULL → v1, else v2; changing it to or
//! from NULL changes the form and so breaks the hash.
//!
//! - `NAME` is the column name in ASCII, exactly as above, in exactly that order.
//! - `VALUE` is the column's value as UTF-8 bytes, unescaped and untrimmed: text as stored;
//!   `id` and `plan_revision` in decimal ASCII digits with no sign, no leading zeros, no
//!   separators; `verdict` as `pass`, `fail` or `retest`; hashes as 64 lowercase hex digits;
//!   `calibration_mode` as `production`, `non-production` or `uncalibrated`;
//!   `calibration_sha256` (the calibration file's canonical SHA-256) as the empty value
//!   (`calibration_sha256:0:`) when no calibration was applied (NULL in the database).
//! - `LEN` is the number of bytes of `VALUE` (not characters) in decimal ASCII, no leading
//!   zeros.
//! - `LF` is the single byte 0x0A; there is no other separator and nothing at the end.
//!
//! The length prefix makes the form unambiguous whatever the values contain (colons, line
//! feeds, JSON). The first record's `prev_hash` is [`GENESIS_PREV_HASH`] (64 zeros); every
//! other record's `prev_hash` is the `record_hash` of the record with the id one less,
//! whichever form either has. Not hashed: `time_unix_ns` (derived from `time_utc`;
//! verification checks it), `signature` and `key_id` (the station key's Ed25519 signature
//! over the hash, see "Signatures" below).
//!
//! Worked example (checked by `tests/store_reference.rs` against
//! `tests/reference/store_record_hash.py`, which uses Python's `hashlib`): the first record
//! of a store with `time_utc` `2025-03-14T09:26:53.589Z`, serial `E2-000123`, plan
//! `demo-earbud` revision 3, `plan_sha256` 64 × `a`, software `0.1.0`, station
//! `larkspur-line3-st1`, operator `j.okafor`, rig `simulated`, verdict `pass`,
//! `result_json` `{"verdict":"pass"}`, as capture the 44-byte WAV header of a mono 16-bit
//! 48 kHz file with no samples (SHA-256 `531cd597…caa0`), tested in `production` under a
//! calibration whose SHA-256 is 64 × `b`, has these canonical bytes (each line ends with
//! LF, including the last):
//!
//! ```text
//! tragus-record-v2
//! id:1:1
//! time_utc:24:2025-03-14T09:26:53.589Z
//! serial:9:E2-000123
//! plan_id:11:demo-earbud
//! plan_revision:1:3
//! plan_sha256:64:aaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaa
//! software_version:5:0.1.0
//! station:18:larkspur-line3-st1
//! operator:8:j.okafor
//! rig:9:simulated
//! verdict:4:pass
//! result_json:18:{"verdict":"pass"}
//! capture_sha256:64:531cd597b25052b4845ef2f3887dec2183240802a93b6e044960de8ba017caa0
//! calibration_mode:10:production
//! calibration_sha256:64:bbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbb
//! prev_hash:64:0000000000000000000000000000000000000000000000000000000000000000
//! ```
//!
//! and `record_hash` `91c3830f9e147fd2e78d82411c26a3f54abea939b0b83bb7e39b61bd0b322437`. The
//! same unit written by schema 1 (v1 form: header `tragus-record-v1`, the two calibration
//! lines absent) has `record_hash`
//! `d43705c5cc69a7d592b5ba63ed20e990f3440f9348a7343bb0754c55bf12bcf6`.
//!
//! # Hearing-safety rows
//!
//! Schema 3 adds `safety_events` ([`Store::append_safety_event`], [`Store::safety_events`])
//! and `exposures` ([`Store::append_exposure`], [`Store::exposures_for`]). Each table has
//! the same three triggers as `records` (no update, no delete, linear chain) and its own
//! chain from [`GENESIS_PREV_HASH`]: `prev_hash` is the `row_hash` of the row with the id one
//! less in the same table, `row_hash` the SHA-256 of the row's canonical bytes, built like a
//! record's (a header line, then `NAME ":" LEN ":" VALUE LF` per field in this order):
//!
//! ```text
//! safety event = "tragus-safety-event-v1" LF field("id") field("time_utc") field("station")
//!     field("operator") field("serial") field("plan_id") field("plan_sha256") field("kind")
//!     field("message") field("detail_json") field("record_id") field("prev_hash")
//! exposure     = "tragus-exposure-v1" LF field("id") field("operator") field("station")
//!     field("start_unix_s") field("level_dba") field("duration_s") field("serial")
//!     field("plan_id") field("record_id") field("prev_hash")
//! ```
//!
//! - Text as stored. A NULL (`serial` and `plan_sha256` of an event, `record_id`) is the
//!   empty value; the store refuses empty text in those fields, so the two never meet.
//! - Integers (`id`, `record_id`, `start_unix_s`) in decimal ASCII, `-` only when negative.
//! - Reals (`level_dba`, `duration_s`) as the shortest decimal that reads back as the same
//!   IEEE 754 double, positional, no exponent, no trailing `.0` (`94`, `30.5`, `0.1`,
//!   `0.30000000000000004`); −0.0 is stored as 0.0.
//! - `kind` is a [`SafetyKind`] word (`plan_refused`, `sweep_scaled_down`,
//!   `sweep_abandoned`, `guard_tripped`, `listening_scaled_down`, `dose_warning`,
//!   `dose_refused`).
//! - Not hashed: `time_unix_ns` of an event (derived from `time_utc`; verify checks it).
//!
//! `tests/reference/store_safety_hash.py` recomputes both forms with Python's `hashlib`;
//! `tests/store_safety.rs` checks the store against it. A `record_id` must name an existing
//! record when the row is appended.
//!
//! # Signatures
//!
//! A store with a signer ([`Store::set_signer`], the station's key from its station file)
//! signs every row it appends: `signature` is the 64-byte Ed25519 signature (RFC 8032) over
//! [`crate::keys::signature_message`]`(TABLE, HASH)` — the bytes
//! `"tragus-signature-v1" LF TABLE LF HASH`, with TABLE the table name (`records`,
//! `safety_events`, `exposures`) and HASH the row's stored hash in lowercase hex — and
//! `key_id` names the key (first 16 hex digits of the SHA-256 of the public key). The hash
//! chain shows any edit to someone who kept a head hash; the signature shows it to anyone
//! with the auditor's keyring, because re-chaining a forged row needs the private key.
//!
//! # Crash safety
//!
//! A crash must never leave a half record. [`Store::append_unit`] writes the capture (and
//! the archived inputs) to a temporary file, fsyncs it, renames it to its hash name, fsyncs
//! the directory, and only then inserts the record, its safety events and exposures in one
//! `BEGIN IMMEDIATE` transaction (which also serializes appends from several processes, so
//! the chains stay linear). A crash can leave at worst a temporary file or an orphan
//! capture, which [`Store::verify`] lists as [`Notice`]s, never a record without its capture,
//! never a record without its safety events and never a partial row.
//!
//! The append proves itself: it refuses a database holding schema objects that are not the
//! store's own (a planted trigger could drop or alter the row), and after each insert it
//! checks that exactly one row was written, that it is the last one and that its hash reads
//! back; otherwise the transaction is rolled back and the unit is NOT recorded.
//!
//! For tests of exactly this, debug builds read the environment variable
//! [`CRASH_AT_ENV`] (`TRAGUS_STORE_CRASH_AT`): set to `during_capture` (temporary file
//! written, not yet renamed), `after_capture` (capture in place, no transaction yet),
//! `after_record` (record inserted, its safety rows not yet) or `before_commit` (every row
//! inserted, transaction not committed), an append reaching that
//! point writes the line [`CRASH_MARKER`] followed by the point's name to stderr and then
//! blocks forever, so the test can kill the process there with SIGKILL. Release builds
//! ignore the variable.

mod archive;
mod capture;
mod checkpoint;
mod error;
mod hash;
pub mod history;
mod read_only;
mod record;
mod safety;
mod schema;
mod verify;

use std::path::{Path, PathBuf};

use rusqlite::types::Value;
use rusqlite::{params, Connection, OptionalExtension, Row, TransactionBehavior};

pub use archive::{InputBundle, BUNDLE_FORM};
pub use checkpoint::{
    ChainHead, ChainHeads, Checkpoint, CheckpointError, CHECKPOINT_FORM, CHECKPOINT_HEADER,
    CHECKPOINT_PURPOSE,
};
pub use error::StoreError;
pub use hash::{
    sha256_hex, CANONICAL_HEADER, CANONICAL_HEADER_V2, CANONICAL_HEADER_V3, GENESIS_PREV_HASH,
};
pub use read_only::{verify_dir, Migration};
pub use record::{NewRecord, RecordFilter, StoredRecord};
pub use safety::{
    NewExposure, NewSafetyEvent, SafetyEventFilter, SafetyKind, StoredExposure, StoredSafetyEvent,
};
pub use schema::SCHEMA_VERSION;
pub use verify::{
    ChainTable, CheckpointOutcome, CheckpointProblem, FileProblem, Notice, Problem, ProblemKind,
    RowProblem, SignatureCount, SignatureCounts, VerifyOptions, VerifyReport,
};

use archive::{archive_file, ensure_archived, ARCHIVE_DIR, MAX_ARCHIVE_BYTES};
use capture::{capture_file, check_file, ensure_capture, looks_like_wav, FileCheck, CAPTURE_DIR};
use hash::is_sha256_hex;
pub(crate) use record::parse_time_utc;
use record::{unix_ns, verdict_from_word, verdict_word};
use schema::{open_database, sqlite_err};

/// File name of the database inside the store directory.
pub const DB_FILE: &str = "tragus.db";

/// Default store directory when the CLI gets no `--store`.
pub const DEFAULT_DIR: &str = "./tragus-data";

/// Environment variable naming a crash point for tests (debug builds only; module doc).
pub const CRASH_AT_ENV: &str = "TRAGUS_STORE_CRASH_AT";

/// Written to stderr, followed by the point's name, when a debug build stops at a crash
/// point (module doc).
pub const CRASH_MARKER: &str = "tragus-store-crash-point: ";

/// Stop here forever if the crash-point variable names `point` (debug builds only).
#[cfg(debug_assertions)]
pub(crate) fn crash_point(point: &str) {
    use std::io::Write;
    if std::env::var_os(CRASH_AT_ENV).is_some_and(|v| v == point) {
        let mut err = std::io::stderr().lock();
        let _ = writeln!(err, "{CRASH_MARKER}{point}");
        let _ = err.flush();
        drop(err);
        // Park, not exit: the test must kill the process itself so nothing (no destructor,
        // no rollback) runs after this point, as in a real crash.
        loop {
            std::thread::park();
        }
    }
}

/// Release builds have no crash points.
#[cfg(not(debug_assertions))]
#[inline(always)]
pub(crate) fn crash_point(_point: &str) {}

/// Columns of a record in the order [`read_record`] expects.
const RECORD_COLUMNS: &str = "id, time_utc, serial, plan_id, plan_revision, plan_sha256, \
    software_version, station, operator, rig, verdict, result_json, capture_sha256, \
    prev_hash, record_hash, calibration_mode, calibration_sha256, build, inputs_json, \
    playback_json, key_id, signature";

/// An open store: the station's database and its capture directory.
///
/// Several `Store`s, in one process or many, may be open on the same directory; appends
/// serialize on SQLite's write lock.
#[derive(Debug)]
pub struct Store {
    dir: PathBuf,
    db_path: PathBuf,
    capture_dir: PathBuf,
    archive_dir: PathBuf,
    conn: Connection,
    /// Signs every row appended; `None`: rows are appended unsigned.
    signer: Option<crate::keys::StationKey>,
    /// How the database is read when opened with [`Store::open_read_only`]; `None` when
    /// opened for appending.
    read_mode: Option<read_only::ReadMode>,
}

/// One tested unit to append in one transaction: its record, raw capture, archived inputs
/// and safety rows.
#[derive(Debug, Clone, Copy)]
pub struct NewUnit<'a> {
    /// The record.
    pub record: &'a NewRecord,
    /// The raw capture, a complete WAV file's bytes.
    pub capture_wav: &'a [u8],
    /// Archived inputs ([`InputBundle::to_bytes`]) the record links to in `inputs_json`
    /// and that the archive may not hold yet.
    pub archive: &'a [Vec<u8>],
    /// The unit's safety events; their `record_id` is set to the new record's id.
    pub safety_events: &'a [NewSafetyEvent],
    /// The unit's listening exposures; their `record_id` is set to the new record's id.
    pub exposures: &'a [NewExposure],
}

/// What [`Store::append_unit`] wrote.
#[derive(Debug, Clone)]
pub struct AppendedUnit {
    /// The record as stored.
    pub record: StoredRecord,
    /// Its safety events as stored.
    pub safety_events: Vec<StoredSafetyEvent>,
    /// Its exposures as stored.
    pub exposures: Vec<StoredExposure>,
}

impl Store {
    /// Open the store in `dir`, creating the directory, the database and `captures/` if
    /// missing, and migrating an older schema.
    ///
    /// Fails with [`StoreError::NotAStore`] if `dir/tragus.db` is not a tragus store,
    /// [`StoreError::NewerSchema`] if a newer tragus wrote it, [`StoreError::Locked`] if
    /// another process holds it for longer than the busy timeout.
    pub fn open(dir: &Path) -> Result<Store, StoreError> {
        let capture_dir = dir.join(CAPTURE_DIR);
        std::fs::create_dir_all(&capture_dir).map_err(|source| StoreError::Io {
            path: capture_dir.clone(),
            action: "create the store directory",
            source,
        })?;
        let archive_dir = dir.join(ARCHIVE_DIR);
        std::fs::create_dir_all(&archive_dir).map_err(|source| StoreError::Io {
            path: archive_dir.clone(),
            action: "create the archive directory",
            source,
        })?;
        let db_path = dir.join(DB_FILE);
        let conn = open_database(&db_path)?;
        Ok(Store {
            dir: dir.to_owned(),
            db_path,
            capture_dir,
            archive_dir,
            conn,
            signer: None,
            read_mode: None,
        })
    }

    /// Sign every row appended from now on with `key` (the station's key). The key's
    /// station should be the one named in the rows; verification reports it otherwise.
    pub fn set_signer(&mut self, key: crate::keys::StationKey) {
        self.signer = Some(key);
    }

    /// The key rows are signed with, if any.
    pub fn signer(&self) -> Option<&crate::keys::StationKey> {
        self.signer.as_ref()
    }

    /// The store's identity: 32 hex digits drawn at random when the store was created (or
    /// migrated to schema 4). Checkpoints name it.
    pub fn store_id(&self) -> Result<String, StoreError> {
        self.conn
            .query_row(
                "SELECT value FROM store_meta WHERE name = 'store_id'",
                [],
                |r| r.get(0),
            )
            .map_err(|e| self.err(e))
    }

    /// The archived input with this SHA-256 (64 lowercase hex digits), read as a regular
    /// file of bounded size and checked against its name.
    pub fn read_archived(&self, sha256: &str) -> Result<InputBundle, StoreError> {
        if !is_sha256_hex(sha256) {
            return Err(StoreError::InvalidRecord {
                field: "inputs_json",
                expected: "64 lowercase hex digits",
                found: error::shorten(sha256),
            });
        }
        let path = archive_file(&self.archive_dir, sha256);
        match check_file(&path, MAX_ARCHIVE_BYTES)? {
            FileCheck::Missing => return Err(StoreError::CaptureMissing { path }),
            FileCheck::Hashed(h) if h == sha256 => {}
            _ => return Err(StoreError::CaptureAltered { path }),
        }
        let bytes = std::fs::read(&path).map_err(|source| StoreError::Io {
            path: path.clone(),
            action: "read the archived input",
            source,
        })?;
        if sha256_hex(&bytes) != sha256 {
            return Err(StoreError::CaptureAltered { path });
        }
        InputBundle::parse(&bytes).map_err(|detail| StoreError::Corrupt {
            id: 0,
            column: "inputs_json",
            detail: format!("{}: {detail}", path.display()),
        })
    }

    /// The store directory.
    pub fn dir(&self) -> &Path {
        &self.dir
    }

    /// The database file, `dir/tragus.db`.
    pub fn db_path(&self) -> &Path {
        &self.db_path
    }

    /// How long an append waits for another process's write lock before failing with
    /// [`StoreError::Locked`]; 10 s after [`open`](Self::open). Zero fails at once.
    pub fn set_busy_timeout(&mut self, timeout: std::time::Duration) -> Result<(), StoreError> {
        self.conn.busy_timeout(timeout).map_err(|e| self.err(e))
    }

    /// Append one record with its raw capture (a complete WAV file's bytes) and return it as
    /// stored, with its id, capture hash and place in the chain: [`append_unit`] without
    /// archived inputs or safety rows.
    ///
    /// [`append_unit`]: Self::append_unit
    pub fn append(
        &mut self,
        rec: &NewRecord,
        capture_wav: &[u8],
    ) -> Result<StoredRecord, StoreError> {
        let unit = NewUnit {
            record: rec,
            capture_wav,
            archive: &[],
            safety_events: &[],
            exposures: &[],
        };
        Ok(self.append_unit(&unit)?.record)
    }

    /// Append one unit: its record, raw capture, archived inputs, safety events and
    /// exposures, signed with the station key when one is set ([`set_signer`]).
    ///
    /// The capture and archived inputs are made durable first; then the record and every
    /// safety row go in one transaction, so a crash leaves all of them or none (module doc,
    /// "Crash safety"). The append proves itself: it refuses a database with schema objects
    /// that are not the store's own ([`StoreError::ForeignObjects`]), and checks that each
    /// insert wrote exactly one row with the expected id and reads its hash back
    /// ([`StoreError::AppendNotProven`]); anything else rolls the transaction back. Nothing
    /// is written when a field is invalid ([`StoreError::InvalidRecord`]).
    ///
    /// [`set_signer`]: Self::set_signer
    pub fn append_unit(&mut self, unit: &NewUnit<'_>) -> Result<AppendedUnit, StoreError> {
        let rec = unit.record;
        let time_unix_ns = rec.validate()?;
        let capture_wav = unit.capture_wav;
        if !looks_like_wav(capture_wav) {
            let head: String = capture_wav
                .iter()
                .take(12)
                .map(|&b| char::from(b).escape_default().to_string())
                .collect();
            return Err(StoreError::InvalidRecord {
                field: "capture_wav",
                expected: "a WAV file (RIFF....WAVE)",
                found: format!("{} bytes starting \"{head}\"", capture_wav.len()),
            });
        }
        for e in unit.safety_events {
            e.validate()?;
        }
        for e in unit.exposures {
            e.validate()?;
        }
        // Every linked input must be in the archive once the record is committed.
        let links = rec.input_links()?;
        let mut given = std::collections::HashMap::new();
        for bytes in unit.archive {
            given.insert(sha256_hex(bytes), bytes);
        }
        for (role, sha) in &links {
            match given.get(sha) {
                Some(bytes) => {
                    ensure_archived(&self.archive_dir, bytes)?;
                }
                None => match check_file(&archive_file(&self.archive_dir, sha), MAX_ARCHIVE_BYTES)?
                {
                    FileCheck::Hashed(h) if &h == sha => {}
                    _ => {
                        return Err(StoreError::InvalidRecord {
                            field: "inputs_json",
                            expected: "links to archived inputs given with the record or \
                                       already in the archive",
                            found: format!("{role} → {sha}, which is in neither"),
                        })
                    }
                },
            }
        }
        let capture_sha256 = sha256_hex(capture_wav);
        ensure_capture(&self.capture_dir, &capture_sha256, capture_wav)?;
        crash_point("after_capture");

        let db_path = self.db_path.clone();
        let signer = self.signer.take();
        let result = insert_unit(
            &mut self.conn,
            &db_path,
            unit,
            time_unix_ns,
            capture_sha256,
            signer.as_ref(),
        );
        self.signer = signer;
        result
    }
    /// The record with this id, or `None` if there is none.
    ///
    /// Does not check hashes (that is [`verify`](Self::verify)); fails with
    /// [`StoreError::Corrupt`] if a column holds a value no record can have.
    pub fn get(&self, id: i64) -> Result<Option<StoredRecord>, StoreError> {
        let sql = format!("SELECT {RECORD_COLUMNS} FROM records WHERE id = ?1");
        let mut stmt = self.conn.prepare(&sql).map_err(|e| self.err(e))?;
        let mut rows = stmt.query([id]).map_err(|e| self.err(e))?;
        match rows.next().map_err(|e| self.err(e))? {
            Some(row) => Ok(Some(read_record(row, &self.db_path)?)),
            None => Ok(None),
        }
    }

    /// The records matching `filter`, by id, oldest first unless `filter.newest_first`.
    pub fn list(&self, filter: &RecordFilter) -> Result<Vec<StoredRecord>, StoreError> {
        let mut conditions: Vec<&str> = Vec::new();
        let mut values: Vec<Value> = Vec::new();
        if let Some(serial) = &filter.serial {
            conditions.push("serial = ?");
            values.push(Value::Text(serial.clone()));
        }
        if let Some(plan_id) = &filter.plan_id {
            conditions.push("plan_id = ?");
            values.push(Value::Text(plan_id.clone()));
        }
        if let Some(verdict) = filter.verdict {
            conditions.push("verdict = ?");
            values.push(Value::Text(verdict_word(verdict).to_owned()));
        }
        let sql = select_sql(
            &format!("SELECT {RECORD_COLUMNS} FROM records"),
            conditions,
            &mut values,
            (filter.since, filter.until),
            filter.newest_first,
            filter.limit,
        );
        let mut stmt = self.conn.prepare(&sql).map_err(|e| self.err(e))?;
        let mut rows = stmt
            .query(rusqlite::params_from_iter(values))
            .map_err(|e| self.err(e))?;
        let mut out = Vec::new();
        while let Some(row) = rows.next().map_err(|e| self.err(e))? {
            out.push(read_record(row, &self.db_path)?);
        }
        Ok(out)
    }

    /// Where the capture with this SHA-256 (64 lowercase hex digits) lives:
    /// `dir/captures/<sha256>.wav`. The file may not exist.
    pub fn capture_path(&self, sha256: &str) -> PathBuf {
        capture_file(&self.capture_dir, sha256)
    }

    /// The bytes of the capture with this SHA-256, checked against it.
    ///
    /// Fails with [`StoreError::CaptureMissing`] or [`StoreError::CaptureAltered`] (also when
    /// `sha256` is not 64 lowercase hex digits, which no capture is named by).
    pub fn read_capture(&self, sha256: &str) -> Result<Vec<u8>, StoreError> {
        if !is_sha256_hex(sha256) {
            return Err(StoreError::InvalidRecord {
                field: "capture_sha256",
                expected: "64 lowercase hex digits",
                found: error::shorten(sha256),
            });
        }
        let path = self.capture_path(sha256);
        // Read, then hash what was read, so the bytes returned are the bytes checked.
        let bytes = match std::fs::read(&path) {
            Ok(b) => b,
            Err(e) if e.kind() == std::io::ErrorKind::NotFound => {
                return Err(StoreError::CaptureMissing { path })
            }
            Err(source) => {
                return Err(StoreError::Io {
                    path,
                    action: "read the capture file",
                    source,
                })
            }
        };
        if sha256_hex(&bytes) != sha256 {
            return Err(StoreError::CaptureAltered { path });
        }
        Ok(bytes)
    }

    /// Verify the store without a keyring or checkpoints: [`verify_with`](Self::verify_with)
    /// with the default options (signatures counted, not checked).
    pub fn verify(&self) -> Result<VerifyReport, StoreError> {
        self.verify_with(&VerifyOptions::default())
    }

    fn err(&self, e: rusqlite::Error) -> StoreError {
        sqlite_err(&self.db_path, e)
    }
}

/// Read one row selected with [`RECORD_COLUMNS`].
/// A listing query: `select` with the `conditions` (their values already in `values`), the
/// time window on `time_unix_ns` (`since` inclusive, `until` exclusive), the order by id and
/// the limit; the records and the safety events are listed alike.
pub(crate) fn select_sql(
    select: &str,
    mut conditions: Vec<&'static str>,
    values: &mut Vec<Value>,
    (since, until): (Option<time::OffsetDateTime>, Option<time::OffsetDateTime>),
    newest_first: bool,
    limit: Option<usize>,
) -> String {
    // Instants beyond what i64 nanoseconds hold (years before 1678 or after 2262)
    // saturate, which keeps the comparison right for every storable time.
    let ns = |t: time::OffsetDateTime| {
        unix_ns(t).unwrap_or(if t.unix_timestamp() < 0 {
            i64::MIN
        } else {
            i64::MAX
        })
    };
    if let Some(since) = since {
        conditions.push("time_unix_ns >= ?");
        values.push(Value::Integer(ns(since)));
    }
    if let Some(until) = until {
        conditions.push("time_unix_ns < ?");
        values.push(Value::Integer(ns(until)));
    }
    let mut sql = select.to_string();
    if !conditions.is_empty() {
        sql.push_str(" WHERE ");
        sql.push_str(&conditions.join(" AND "));
    }
    sql.push_str(if newest_first {
        " ORDER BY id DESC"
    } else {
        " ORDER BY id"
    });
    if let Some(limit) = limit {
        sql.push_str(" LIMIT ?");
        values.push(Value::Integer(i64::try_from(limit).unwrap_or(i64::MAX)));
    }
    sql
}

fn read_record(row: &Row<'_>, db_path: &Path) -> Result<StoredRecord, StoreError> {
    let id: i64 = row.get(0).map_err(|e| sqlite_err(db_path, e))?;
    let corrupt = |column: &'static str, e: rusqlite::Error| StoreError::Corrupt {
        id,
        column,
        detail: e.to_string(),
    };
    let text = |i: usize, column: &'static str| -> Result<String, StoreError> {
        row.get::<_, String>(i).map_err(|e| corrupt(column, e))
    };
    let revision: i64 = row.get(4).map_err(|e| corrupt("plan_revision", e))?;
    let plan_revision = u32::try_from(revision).map_err(|_| StoreError::Corrupt {
        id,
        column: "plan_revision",
        detail: format!("{revision} is not a revision number"),
    })?;
    let verdict_text = text(10, "verdict")?;
    let verdict = verdict_from_word(&verdict_text).ok_or_else(|| StoreError::Corrupt {
        id,
        column: "verdict",
        detail: format!("{verdict_text:?} is not pass, fail or retest"),
    })?;
    Ok(StoredRecord {
        id,
        time_utc: text(1, "time_utc")?,
        serial: text(2, "serial")?,
        plan_id: text(3, "plan_id")?,
        plan_revision,
        plan_sha256: text(5, "plan_sha256")?,
        software_version: text(6, "software_version")?,
        station: text(7, "station")?,
        operator: text(8, "operator")?,
        rig: text(9, "rig")?,
        verdict,
        result_json: text(11, "result_json")?,
        capture_sha256: text(12, "capture_sha256")?,
        prev_hash: text(13, "prev_hash")?,
        record_hash: text(14, "record_hash")?,
        calibration_mode: row
            .get::<_, Option<String>>(15)
            .map_err(|e| corrupt("calibration_mode", e))?,
        calibration_sha256: row
            .get::<_, Option<String>>(16)
            .map_err(|e| corrupt("calibration_sha256", e))?,
        build: row
            .get::<_, Option<String>>(17)
            .map_err(|e| corrupt("build", e))?,
        inputs_json: row
            .get::<_, Option<String>>(18)
            .map_err(|e| corrupt("inputs_json", e))?,
        playback_json: row
            .get::<_, Option<String>>(19)
            .map_err(|e| corrupt("playback_json", e))?,
        key_id: row
            .get::<_, Option<String>>(20)
            .map_err(|e| corrupt("key_id", e))?,
        signature: row
            .get::<_, Option<Vec<u8>>>(21)
            .map_err(|e| corrupt("signature", e))?,
    })
}

/// The transaction of [`Store::append_unit`]: the record, then its safety events and
/// exposures pointing at it, each proven, committed together.
fn insert_unit(
    conn: &mut Connection,
    db_path: &Path,
    unit: &NewUnit<'_>,
    time_unix_ns: i64,
    capture_sha256: String,
    signer: Option<&crate::keys::StationKey>,
) -> Result<AppendedUnit, StoreError> {
    let err = |e| sqlite_err(db_path, e);
    let rec = unit.record;
    let tx = conn
        .transaction_with_behavior(TransactionBehavior::Immediate)
        .map_err(err)?;
    check_own_schema(&tx, db_path)?;
    let last: Option<(i64, String)> = tx
        .query_row(
            "SELECT id, record_hash FROM records ORDER BY id DESC LIMIT 1",
            [],
            |r| Ok((r.get(0)?, r.get(1)?)),
        )
        .optional()
        .map_err(err)?;
    let (id, prev_hash) = match last {
        None => (1, GENESIS_PREV_HASH.to_owned()),
        Some((last_id, last_hash)) => {
            let id = last_id.checked_add(1).ok_or(StoreError::Corrupt {
                id: last_id,
                column: "id",
                detail: "no id can follow it".into(),
            })?;
            (id, last_hash)
        }
    };
    let mut stored = StoredRecord {
        id,
        time_utc: rec.time_utc.clone(),
        serial: rec.serial.clone(),
        plan_id: rec.plan_id.clone(),
        plan_revision: rec.plan_revision,
        plan_sha256: rec.plan_sha256.clone(),
        software_version: rec.software_version.clone(),
        station: rec.station.clone(),
        operator: rec.operator.clone(),
        rig: rec.rig.clone(),
        verdict: rec.verdict,
        result_json: rec.result_json.clone(),
        capture_sha256,
        prev_hash,
        record_hash: String::new(),
        calibration_mode: Some(rec.calibration_mode.clone()),
        calibration_sha256: rec.calibration_sha256.clone(),
        build: Some(rec.build.clone()),
        inputs_json: Some(rec.inputs_json.clone()),
        playback_json: Some(rec.playback_json.clone()),
        key_id: None,
        signature: None,
    };
    stored.record_hash = stored.computed_hash();
    let (key_id, signature) = safety::sign_row(signer, "records", &stored.record_hash);
    stored.key_id = key_id;
    stored.signature = signature;
    let n = tx
        .execute(
            "INSERT INTO records (id, time_utc, time_unix_ns, serial, plan_id, plan_revision, \
             plan_sha256, software_version, station, operator, rig, verdict, result_json, \
             capture_sha256, prev_hash, record_hash, signature, calibration_mode, \
             calibration_sha256, build, inputs_json, playback_json, key_id) \
             VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13, ?14, ?15, ?16, ?17, \
             ?18, ?19, ?20, ?21, ?22, ?23)",
            params![
                stored.id,
                stored.time_utc,
                time_unix_ns,
                stored.serial,
                stored.plan_id,
                stored.plan_revision,
                stored.plan_sha256,
                stored.software_version,
                stored.station,
                stored.operator,
                stored.rig,
                verdict_word(stored.verdict),
                stored.result_json,
                stored.capture_sha256,
                stored.prev_hash,
                stored.record_hash,
                stored.signature,
                stored.calibration_mode,
                stored.calibration_sha256,
                stored.build,
                stored.inputs_json,
                stored.playback_json,
                stored.key_id,
            ],
        )
        .map_err(err)?;
    prove_insert(&tx, "records", "record_hash", id, &stored.record_hash, n)
        .map_err(|e| e.into_store(db_path))?;
    crash_point("after_record");
    let mut events = Vec::with_capacity(unit.safety_events.len());
    for e in unit.safety_events {
        let mut e = e.clone();
        e.record_id = Some(id);
        events
            .push(safety::insert_safety_event(&tx, &e, signer).map_err(|e| e.into_store(db_path))?);
    }
    let mut exposures = Vec::with_capacity(unit.exposures.len());
    for x in unit.exposures {
        let mut x = x.clone();
        x.record_id = Some(id);
        exposures
            .push(safety::insert_exposure(&tx, &x, signer).map_err(|e| e.into_store(db_path))?);
    }
    crash_point("before_commit");
    tx.commit().map_err(err)?;
    Ok(AppendedUnit {
        record: stored,
        safety_events: events,
        exposures,
    })
}

/// Refuse to write into a database holding schema objects that are not the store's own.
pub(crate) fn check_own_schema(
    tx: &rusqlite::Transaction<'_>,
    db_path: &Path,
) -> Result<(), StoreError> {
    let foreign =
        schema::foreign_objects(tx, SCHEMA_VERSION).map_err(|e| sqlite_err(db_path, e))?;
    if foreign.is_empty() {
        return Ok(());
    }
    Err(StoreError::ForeignObjects {
        path: db_path.to_owned(),
        objects: foreign
            .iter()
            .map(|(t, n)| format!("{t} {n}"))
            .collect::<Vec<_>>()
            .join(", "),
    })
}

/// Prove an insert into `table`: exactly one row changed, the row with `id` is the last one
/// and its `hash_column` reads back as `hash`. A trigger that silently dropped or altered
/// the row, or wrote another, shows here.
pub(crate) fn prove_insert(
    tx: &rusqlite::Transaction<'_>,
    table: &'static str,
    hash_column: &str,
    id: i64,
    hash: &str,
    changed: usize,
) -> Result<(), safety::RowError> {
    let not_proven = |detail: String| {
        safety::RowError::Store(StoreError::AppendNotProven {
            path: PathBuf::new(),
            table,
            id,
            detail,
        })
    };
    if changed != 1 {
        return Err(not_proven(format!("{changed} rows inserted, expected 1")));
    }
    let read: Option<String> = tx
        .query_row(
            &format!("SELECT {hash_column} FROM {table} WHERE id = ?1"),
            [id],
            |r| r.get(0),
        )
        .optional()?;
    match read {
        None => return Err(not_proven("no row with that id after the insert".into())),
        Some(h) if h != hash => return Err(not_proven(format!("its hash reads back as {h}"))),
        Some(_) => {}
    }
    let max: Option<i64> =
        tx.query_row(&format!("SELECT MAX(id) FROM {table}"), [], |r| r.get(0))?;
    if max != Some(id) {
        return Err(not_proven(format!(
            "the last id is {}, not this row's",
            max.map_or("none".into(), |m| m.to_string())
        )));
    }
    Ok(())
}
