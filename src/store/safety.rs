//! Hearing-safety rows of the store (schema 3, issue 5 points 6 and 8): safety events
//! (refusals, scale-downs, abandoned sweeps, guard trips, dose warnings and refusals) and
//! operators' listening exposures, each table append-only and hash-chained on its own.
//!
//! Sits at the store end of the data flow beside the records: the CLI appends an event
//! whenever the safety layer refuses, scales down, trips or warns, and an exposure after
//! every listening step; `tragus exposure` and the station read exposures back as
//! [`Exposure`] values for an [`ExposureLedger`](crate::safety::dose::ExposureLedger).
//!
//! The canonical byte forms of both chains are specified in the [store module
//! documentation](super#hearing-safety-rows); this file and `verify.rs` implement them.

use rusqlite::types::Value;
use rusqlite::{params, OptionalExtension, Row, TransactionBehavior};

use super::error::{shorten, StoreError};
use super::hash::{
    chain_row_bytes, is_sha256_hex, real_text, sha256_hex, EXPOSURE_FIELDS, EXPOSURE_HEADER,
    GENESIS_PREV_HASH, SAFETY_EVENT_FIELDS, SAFETY_EVENT_HEADER,
};
use super::record::{check_id_text, parse_time_utc, unix_ns};
use super::schema::sqlite_err;
use super::Store;
use crate::safety::dose::Exposure;

pub use crate::safety::event::SafetyKind;

/// One safety event as the caller hands it to [`Store::append_safety_event`].
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct NewSafetyEvent {
    /// When it happened, UTC, `YYYY-MM-DDTHH:MM:SS[.f]Z` (as [`NewRecord::time_utc`](super::NewRecord::time_utc)).
    pub time_utc: String,
    /// Station name.
    pub station: String,
    /// Operator at the station.
    pub operator: String,
    /// Unit serial number; `None` when there is no unit (a plan refused before any was
    /// scanned). Never empty.
    pub serial: Option<String>,
    /// Id of the plan concerned.
    pub plan_id: String,
    /// SHA-256 of the plan's canonical form, when the plan got far enough to have one.
    pub plan_sha256: Option<String>,
    /// What happened.
    pub kind: SafetyKind,
    /// The words shown to people, as shown.
    pub message: String,
    /// The numbers (levels, caps, doses) as a JSON document.
    pub detail_json: String,
    /// The unit record this event belongs to, when there is one; it must exist.
    pub record_id: Option<i64>,
}

/// A safety event as stored: the appended fields plus its place in the chain.
#[derive(Debug, Clone, PartialEq, Eq, serde::Serialize)]
pub struct StoredSafetyEvent {
    /// Position in the safety-event chain, 1 for the first.
    pub id: i64,
    /// See [`NewSafetyEvent::time_utc`].
    pub time_utc: String,
    /// See [`NewSafetyEvent::station`].
    pub station: String,
    /// See [`NewSafetyEvent::operator`].
    pub operator: String,
    /// See [`NewSafetyEvent::serial`].
    pub serial: Option<String>,
    /// See [`NewSafetyEvent::plan_id`].
    pub plan_id: String,
    /// See [`NewSafetyEvent::plan_sha256`].
    pub plan_sha256: Option<String>,
    /// See [`NewSafetyEvent::kind`].
    pub kind: SafetyKind,
    /// See [`NewSafetyEvent::message`].
    pub message: String,
    /// See [`NewSafetyEvent::detail_json`].
    pub detail_json: String,
    /// See [`NewSafetyEvent::record_id`].
    pub record_id: Option<i64>,
    /// `row_hash` of the event before, or the genesis value for the first.
    pub prev_hash: String,
    /// SHA-256 of this event's canonical bytes, lowercase hex.
    pub row_hash: String,
}

impl StoredSafetyEvent {
    /// The canonical bytes `row_hash` is taken over (module doc).
    pub fn canonical_bytes(&self) -> Vec<u8> {
        let id = self.id.to_string();
        let record_id = self.record_id.map(|r| r.to_string()).unwrap_or_default();
        let values: [&str; 12] = [
            &id,
            &self.time_utc,
            &self.station,
            &self.operator,
            self.serial.as_deref().unwrap_or(""),
            &self.plan_id,
            self.plan_sha256.as_deref().unwrap_or(""),
            self.kind.word(),
            &self.message,
            &self.detail_json,
            &record_id,
            &self.prev_hash,
        ];
        let fields: Vec<(&str, &str)> = SAFETY_EVENT_FIELDS.into_iter().zip(values).collect();
        chain_row_bytes(SAFETY_EVENT_HEADER, &fields)
    }

    /// SHA-256 of [`canonical_bytes`](Self::canonical_bytes) now; equals `row_hash` unless
    /// the event was altered.
    pub fn computed_hash(&self) -> String {
        sha256_hex(&self.canonical_bytes())
    }
}

/// Which safety events [`Store::safety_events`] returns; the default returns all, oldest
/// first.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct SafetyEventFilter {
    /// Only this kind.
    pub kind: Option<SafetyKind>,
    /// Only this serial number (exact match).
    pub serial: Option<String>,
    /// Only this operator (exact match).
    pub operator: Option<String>,
    /// Only events belonging to this record.
    pub record_id: Option<i64>,
    /// Only events at or after this instant.
    pub since: Option<time::OffsetDateTime>,
    /// Only events before this instant.
    pub until: Option<time::OffsetDateTime>,
    /// At most this many events; with `newest_first` the newest ones.
    pub limit: Option<usize>,
    /// Order by id descending instead of ascending.
    pub newest_first: bool,
}

/// One listening exposure as the caller hands it to [`Store::append_exposure`].
#[derive(Debug, Clone, PartialEq)]
pub struct NewExposure {
    /// Operator who listened.
    pub operator: String,
    /// Station name.
    pub station: String,
    /// Start, whole seconds since 1970-01-01T00:00:00Z.
    pub start_unix_s: i64,
    /// A-weighted level at the reference (ear-equivalent) position, dB(A) re 20 µPa; finite.
    pub level_dba: f64,
    /// How long the operator listened, s; finite and 0 or more.
    pub duration_s: f64,
    /// Serial number of the unit listened to.
    pub serial: String,
    /// Id of the plan whose listening step it was.
    pub plan_id: String,
    /// The unit record it belongs to, when there is one; it must exist.
    pub record_id: Option<i64>,
}

/// An exposure as stored.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct StoredExposure {
    /// Position in the exposure chain, 1 for the first.
    pub id: i64,
    /// See [`NewExposure::operator`].
    pub operator: String,
    /// See [`NewExposure::station`].
    pub station: String,
    /// See [`NewExposure::start_unix_s`].
    pub start_unix_s: i64,
    /// See [`NewExposure::level_dba`].
    pub level_dba: f64,
    /// See [`NewExposure::duration_s`].
    pub duration_s: f64,
    /// See [`NewExposure::serial`].
    pub serial: String,
    /// See [`NewExposure::plan_id`].
    pub plan_id: String,
    /// See [`NewExposure::record_id`].
    pub record_id: Option<i64>,
    /// `row_hash` of the exposure before, or the genesis value for the first.
    pub prev_hash: String,
    /// SHA-256 of this exposure's canonical bytes, lowercase hex.
    pub row_hash: String,
}

impl StoredExposure {
    /// The canonical bytes `row_hash` is taken over (module doc).
    pub fn canonical_bytes(&self) -> Vec<u8> {
        let id = self.id.to_string();
        let start = self.start_unix_s.to_string();
        let level = real_text(self.level_dba);
        let duration = real_text(self.duration_s);
        let record_id = self.record_id.map(|r| r.to_string()).unwrap_or_default();
        let values: [&str; 10] = [
            &id,
            &self.operator,
            &self.station,
            &start,
            &level,
            &duration,
            &self.serial,
            &self.plan_id,
            &record_id,
            &self.prev_hash,
        ];
        let fields: Vec<(&str, &str)> = EXPOSURE_FIELDS.into_iter().zip(values).collect();
        chain_row_bytes(EXPOSURE_HEADER, &fields)
    }

    /// SHA-256 of [`canonical_bytes`](Self::canonical_bytes) now.
    pub fn computed_hash(&self) -> String {
        sha256_hex(&self.canonical_bytes())
    }

    /// The exposure as the dose ledger takes it.
    pub fn to_exposure(&self) -> Exposure {
        Exposure {
            operator: self.operator.clone(),
            start_unix_s: self.start_unix_s,
            level_dba: self.level_dba,
            duration_s: self.duration_s,
        }
    }
}

impl NewSafetyEvent {
    /// Check every field; returns the time as Unix nanoseconds for the time index.
    pub(crate) fn validate(&self) -> Result<i64, StoreError> {
        check_id_text("station", &self.station)?;
        check_id_text("operator", &self.operator)?;
        check_id_text("plan_id", &self.plan_id)?;
        if let Some(serial) = &self.serial {
            check_id_text("serial", serial)?;
        }
        if let Some(sha) = &self.plan_sha256 {
            if !is_sha256_hex(sha) {
                return Err(StoreError::InvalidRecord {
                    field: "plan_sha256",
                    expected: "64 lowercase hex digits",
                    found: shorten(sha),
                });
            }
        }
        if self.message.trim().is_empty() {
            return Err(StoreError::InvalidRecord {
                field: "message",
                expected: "the words shown to people, non-empty",
                found: shorten(&self.message),
            });
        }
        if serde_json::from_str::<serde::de::IgnoredAny>(&self.detail_json).is_err() {
            return Err(StoreError::InvalidRecord {
                field: "detail_json",
                expected: "a JSON document",
                found: shorten(&self.detail_json),
            });
        }
        parse_time_utc(&self.time_utc)
            .and_then(unix_ns)
            .ok_or_else(|| StoreError::InvalidRecord {
                field: "time_utc",
                expected: "a UTC time like 2025-03-14T09:26:53.589Z",
                found: shorten(&self.time_utc),
            })
    }
}

impl NewExposure {
    pub(crate) fn validate(&self) -> Result<(), StoreError> {
        check_id_text("operator", &self.operator)?;
        check_id_text("station", &self.station)?;
        check_id_text("serial", &self.serial)?;
        check_id_text("plan_id", &self.plan_id)?;
        if !self.level_dba.is_finite() {
            return Err(StoreError::InvalidRecord {
                field: "level_dba",
                expected: "a finite level in dB(A)",
                found: self.level_dba.to_string(),
            });
        }
        if !(self.duration_s.is_finite() && self.duration_s >= 0.0) {
            return Err(StoreError::InvalidRecord {
                field: "duration_s",
                expected: "a finite duration of 0 s or more",
                found: self.duration_s.to_string(),
            });
        }
        Ok(())
    }
}

/// −0.0 → 0.0, so the canonical text has one spelling for zero.
fn no_negative_zero(x: f64) -> f64 {
    if x == 0.0 {
        0.0
    } else {
        x
    }
}

/// Columns of a safety event in the order [`read_event`] expects.
const EVENT_COLUMNS: &str = "id, time_utc, station, operator, serial, plan_id, plan_sha256, \
    kind, message, detail_json, record_id, prev_hash, row_hash";

/// Columns of an exposure in the order [`read_exposure`] expects.
const EXPOSURE_COLUMNS: &str = "id, operator, station, start_unix_s, level_dba, duration_s, \
    serial, plan_id, record_id, prev_hash, row_hash";

impl Store {
    /// Append one safety event and return it as stored, with its id and place in the
    /// safety-event chain.
    ///
    /// Nothing is written when a field is invalid or `record_id` names no record
    /// ([`StoreError::InvalidRecord`]).
    pub fn append_safety_event(
        &mut self,
        event: &NewSafetyEvent,
    ) -> Result<StoredSafetyEvent, StoreError> {
        self.append_row(|tx, signer| insert_safety_event(tx, event, signer))
    }

    /// The safety events matching `filter`, by id, oldest first unless
    /// `filter.newest_first`.
    ///
    /// Does not check hashes (that is [`verify`](Self::verify)).
    pub fn safety_events(
        &self,
        filter: &SafetyEventFilter,
    ) -> Result<Vec<StoredSafetyEvent>, StoreError> {
        let mut conditions: Vec<&str> = Vec::new();
        let mut values: Vec<Value> = Vec::new();
        if let Some(kind) = filter.kind {
            conditions.push("kind = ?");
            values.push(Value::Text(kind.word().to_owned()));
        }
        if let Some(serial) = &filter.serial {
            conditions.push("serial = ?");
            values.push(Value::Text(serial.clone()));
        }
        if let Some(operator) = &filter.operator {
            conditions.push("operator = ?");
            values.push(Value::Text(operator.clone()));
        }
        if let Some(record_id) = filter.record_id {
            conditions.push("record_id = ?");
            values.push(Value::Integer(record_id));
        }
        let sql = super::select_sql(
            &format!("SELECT {EVENT_COLUMNS} FROM safety_events"),
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
            out.push(read_event(row).map_err(|e| e.into_store(&self.db_path))?);
        }
        Ok(out)
    }

    /// Append one listening exposure and return it as stored, with its id and place in the
    /// exposure chain. −0.0 is stored as 0.0.
    ///
    /// Nothing is written when a field is invalid or `record_id` names no record
    /// ([`StoreError::InvalidRecord`]).
    pub fn append_exposure(
        &mut self,
        exposure: &NewExposure,
    ) -> Result<StoredExposure, StoreError> {
        self.append_row(|tx, signer| insert_exposure(tx, exposure, signer))
    }

    /// One safety row on its own: `insert` inside an immediate transaction on a store that
    /// holds only its own schema objects, signed with the store's signer, committed.
    fn append_row<T>(
        &mut self,
        insert: impl FnOnce(
            &rusqlite::Transaction<'_>,
            Option<&crate::keys::StationKey>,
        ) -> Result<T, RowError>,
    ) -> Result<T, StoreError> {
        let db_path = self.db_path.clone();
        let err = |e| sqlite_err(&db_path, e);
        let tx = self
            .conn
            .transaction_with_behavior(TransactionBehavior::Immediate)
            .map_err(err)?;
        super::check_own_schema(&tx, &db_path)?;
        let stored = insert(&tx, self.signer.as_ref()).map_err(|e| e.into_store(&db_path))?;
        tx.commit().map_err(err)?;
        Ok(stored)
    }

    /// Every stored exposure of `operator`, by id.
    pub fn exposure_rows(&self, operator: &str) -> Result<Vec<StoredExposure>, StoreError> {
        let sql =
            format!("SELECT {EXPOSURE_COLUMNS} FROM exposures WHERE operator = ?1 ORDER BY id");
        let mut stmt = self.conn.prepare(&sql).map_err(|e| self.err(e))?;
        let mut rows = stmt.query([operator]).map_err(|e| self.err(e))?;
        let mut out = Vec::new();
        while let Some(row) = rows.next().map_err(|e| self.err(e))? {
            out.push(read_exposure(row).map_err(|e| e.into_store(&self.db_path))?);
        }
        Ok(out)
    }

    /// `operator`'s exposures that end after `since_unix_s` (start + duration >
    /// `since_unix_s`), by id, as the dose ledger takes them. An exposure across `since`
    /// is returned whole: the ledger counts only its part inside a window. Exposures stamped
    /// in the future are returned too (a clock set back must not hide exposure).
    pub fn exposures_for(
        &self,
        operator: &str,
        since_unix_s: i64,
    ) -> Result<Vec<Exposure>, StoreError> {
        // Filtered here rather than in SQL: the end is a real sum, and the rows of one
        // operator over a week are a few thousand at most.
        Ok(self
            .exposure_rows(operator)?
            .iter()
            .filter(|e| e.start_unix_s as f64 + e.duration_s > since_unix_s as f64)
            .map(StoredExposure::to_exposure)
            .collect())
    }
}

/// Insert one safety event at the end of its chain inside the caller's transaction, signed
/// when `signer` is given, and prove it was written ([`super::prove_insert`]).
pub(crate) fn insert_safety_event(
    tx: &rusqlite::Transaction<'_>,
    event: &NewSafetyEvent,
    signer: Option<&crate::keys::StationKey>,
) -> Result<StoredSafetyEvent, RowError> {
    let time_unix_ns = event.validate().map_err(RowError::Store)?;
    check_record_exists(tx, event.record_id)?;
    let (id, prev_hash) = next_in_chain(tx, "safety_events")?;
    let mut stored = StoredSafetyEvent {
        id,
        time_utc: event.time_utc.clone(),
        station: event.station.clone(),
        operator: event.operator.clone(),
        serial: event.serial.clone(),
        plan_id: event.plan_id.clone(),
        plan_sha256: event.plan_sha256.clone(),
        kind: event.kind,
        message: event.message.clone(),
        detail_json: event.detail_json.clone(),
        record_id: event.record_id,
        prev_hash,
        row_hash: String::new(),
    };
    stored.row_hash = stored.computed_hash();
    let (key_id, signature) = sign_row(signer, "safety_events", &stored.row_hash);
    let n = tx.execute(
        "INSERT INTO safety_events (id, time_utc, time_unix_ns, station, operator, serial, \
         plan_id, plan_sha256, kind, message, detail_json, record_id, prev_hash, row_hash, \
         key_id, signature) \
         VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13, ?14, ?15, ?16)",
        params![
            stored.id,
            stored.time_utc,
            time_unix_ns,
            stored.station,
            stored.operator,
            stored.serial,
            stored.plan_id,
            stored.plan_sha256,
            stored.kind.word(),
            stored.message,
            stored.detail_json,
            stored.record_id,
            stored.prev_hash,
            stored.row_hash,
            key_id,
            signature,
        ],
    )?;
    super::prove_insert(tx, "safety_events", "row_hash", id, &stored.row_hash, n)?;
    Ok(stored)
}

/// Insert one exposure at the end of its chain inside the caller's transaction, signed
/// when `signer` is given, and prove it was written. −0.0 is stored as 0.0.
pub(crate) fn insert_exposure(
    tx: &rusqlite::Transaction<'_>,
    exposure: &NewExposure,
    signer: Option<&crate::keys::StationKey>,
) -> Result<StoredExposure, RowError> {
    exposure.validate().map_err(RowError::Store)?;
    check_record_exists(tx, exposure.record_id)?;
    let (id, prev_hash) = next_in_chain(tx, "exposures")?;
    let mut stored = StoredExposure {
        id,
        operator: exposure.operator.clone(),
        station: exposure.station.clone(),
        start_unix_s: exposure.start_unix_s,
        level_dba: no_negative_zero(exposure.level_dba),
        duration_s: no_negative_zero(exposure.duration_s),
        serial: exposure.serial.clone(),
        plan_id: exposure.plan_id.clone(),
        record_id: exposure.record_id,
        prev_hash,
        row_hash: String::new(),
    };
    stored.row_hash = stored.computed_hash();
    let (key_id, signature) = sign_row(signer, "exposures", &stored.row_hash);
    let n = tx.execute(
        "INSERT INTO exposures (id, operator, station, start_unix_s, level_dba, duration_s, \
         serial, plan_id, record_id, prev_hash, row_hash, key_id, signature) \
         VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13)",
        params![
            stored.id,
            stored.operator,
            stored.station,
            stored.start_unix_s,
            stored.level_dba,
            stored.duration_s,
            stored.serial,
            stored.plan_id,
            stored.record_id,
            stored.prev_hash,
            stored.row_hash,
            key_id,
            signature,
        ],
    )?;
    super::prove_insert(tx, "exposures", "row_hash", id, &stored.row_hash, n)?;
    Ok(stored)
}

/// `(key_id, signature)` of a row for the database, both NULL without a signer.
pub(crate) fn sign_row(
    signer: Option<&crate::keys::StationKey>,
    table: &str,
    hash: &str,
) -> (Option<String>, Option<Vec<u8>>) {
    match signer {
        Some(k) => (
            Some(k.key_id().to_string()),
            Some(k.sign_hash(table, hash).to_vec()),
        ),
        None => (None, None),
    }
}

/// A failure inside an append or read, before it is tied to the database path.
pub(crate) enum RowError {
    Sqlite(rusqlite::Error),
    Store(StoreError),
}

impl From<rusqlite::Error> for RowError {
    fn from(e: rusqlite::Error) -> Self {
        RowError::Sqlite(e)
    }
}

impl RowError {
    pub(crate) fn into_store(self, db_path: &std::path::Path) -> StoreError {
        match self {
            RowError::Sqlite(e) => sqlite_err(db_path, e),
            RowError::Store(e) => e,
        }
    }
}

/// Refuse a `record_id` that names no record: a dangling link is a gap in the audit trail.
fn check_record_exists(
    tx: &rusqlite::Transaction<'_>,
    record_id: Option<i64>,
) -> Result<(), RowError> {
    let Some(id) = record_id else {
        return Ok(());
    };
    let found: Option<i64> = tx
        .query_row("SELECT id FROM records WHERE id = ?1", [id], |r| r.get(0))
        .optional()?;
    if found.is_none() {
        return Err(RowError::Store(StoreError::InvalidRecord {
            field: "record_id",
            expected: "the id of a record in this store",
            found: format!("{id}, which no record has"),
        }));
    }
    Ok(())
}

/// Id and `prev_hash` of the next row of `table`'s chain, under the caller's write lock.
fn next_in_chain(tx: &rusqlite::Transaction<'_>, table: &str) -> Result<(i64, String), RowError> {
    let last: Option<(i64, String)> = tx
        .query_row(
            &format!("SELECT id, row_hash FROM {table} ORDER BY id DESC LIMIT 1"),
            [],
            |r| Ok((r.get(0)?, r.get(1)?)),
        )
        .optional()?;
    match last {
        None => Ok((1, GENESIS_PREV_HASH.to_owned())),
        Some((last_id, last_hash)) => {
            let id = last_id
                .checked_add(1)
                .ok_or_else(|| corrupt(chain_table(table), last_id, "id", "no id can follow it"))?;
            Ok((id, last_hash))
        }
    }
}

fn corrupt(table: &'static str, id: i64, column: &'static str, detail: impl ToString) -> RowError {
    RowError::Store(StoreError::CorruptRow {
        table,
        id,
        column,
        detail: detail.to_string(),
    })
}

/// The table name as a `'static` for errors.
fn chain_table(table: &str) -> &'static str {
    if table == "exposures" {
        "exposures"
    } else {
        "safety_events"
    }
}

/// Read one row selected with [`EVENT_COLUMNS`].
fn read_event(row: &Row<'_>) -> Result<StoredSafetyEvent, RowError> {
    let id: i64 = row.get(0)?;
    let text = |i: usize, column: &'static str| -> Result<String, RowError> {
        row.get::<_, String>(i)
            .map_err(|e| corrupt("safety_events", id, column, e))
    };
    let opt_text = |i: usize, column: &'static str| -> Result<Option<String>, RowError> {
        row.get::<_, Option<String>>(i)
            .map_err(|e| corrupt("safety_events", id, column, e))
    };
    let kind_text = text(7, "kind")?;
    let kind = SafetyKind::from_word(&kind_text).ok_or_else(|| {
        corrupt(
            "safety_events",
            id,
            "kind",
            format!("{kind_text:?} is not a safety event kind"),
        )
    })?;
    Ok(StoredSafetyEvent {
        id,
        time_utc: text(1, "time_utc")?,
        station: text(2, "station")?,
        operator: text(3, "operator")?,
        serial: opt_text(4, "serial")?,
        plan_id: text(5, "plan_id")?,
        plan_sha256: opt_text(6, "plan_sha256")?,
        kind,
        message: text(8, "message")?,
        detail_json: text(9, "detail_json")?,
        record_id: row
            .get::<_, Option<i64>>(10)
            .map_err(|e| corrupt("safety_events", id, "record_id", e))?,
        prev_hash: text(11, "prev_hash")?,
        row_hash: text(12, "row_hash")?,
    })
}

/// Read one row selected with [`EXPOSURE_COLUMNS`].
fn read_exposure(row: &Row<'_>) -> Result<StoredExposure, RowError> {
    let id: i64 = row.get(0)?;
    let text = |i: usize, column: &'static str| -> Result<String, RowError> {
        row.get::<_, String>(i)
            .map_err(|e| corrupt("exposures", id, column, e))
    };
    let real = |i: usize, column: &'static str| -> Result<f64, RowError> {
        let x: f64 = row
            .get(i)
            .map_err(|e| corrupt("exposures", id, column, e))?;
        if x.is_finite() {
            Ok(x)
        } else {
            Err(corrupt(
                "exposures",
                id,
                column,
                format!("{x} is not a finite number"),
            ))
        }
    };
    let duration_s = real(5, "duration_s")?;
    if duration_s < 0.0 {
        return Err(corrupt(
            "exposures",
            id,
            "duration_s",
            format!("{duration_s} s is negative"),
        ));
    }
    Ok(StoredExposure {
        id,
        operator: text(1, "operator")?,
        station: text(2, "station")?,
        start_unix_s: row
            .get::<_, i64>(3)
            .map_err(|e| corrupt("exposures", id, "start_unix_s", e))?,
        level_dba: real(4, "level_dba")?,
        duration_s,
        serial: text(6, "serial")?,
        plan_id: text(7, "plan_id")?,
        record_id: row
            .get::<_, Option<i64>>(8)
            .map_err(|e| corrupt("exposures", id, "record_id", e))?,
        prev_hash: text(9, "prev_hash")?,
        row_hash: text(10, "row_hash")?,
    })
}
