//! Checkpoints: a signed statement of how far each chain of a store reached at one time, kept
//! away from the station (with the auditor, in another system), so that rows removed from
//! the end of a chain, or a chain rewritten consistently by someone without the station's
//! private key, show against it.
//!
//! # The file (`tragus-checkpoint/1`)
//!
//! One JSON object, written by [`Checkpoint::write`] (pretty-printed, keys in this order;
//! readers accept any order and spacing, and refuse unknown keys):
//!
//! ```text
//! {
//!   "form": "tragus-checkpoint/1",
//!   "store_id": "<32 lowercase hex digits: the store's store_meta store_id>",
//!   "time_utc": "2025-03-14T17:00:00.000Z",
//!   "station": "larkspur-line3-st1",
//!   "chains": {
//!     "records":       {"count": 12, "head_hash": "<64 lowercase hex>"},
//!     "safety_events": {"count": 3,  "head_hash": "<64 lowercase hex>"},
//!     "exposures":     {"count": 0,  "head_hash": "000…000"}
//!   },
//!   "key_id": "<16 lowercase hex digits>",
//!   "signature": "<128 lowercase hex digits: the 64-byte Ed25519 signature>"
//! }
//! ```
//!
//! `count` is the number of rows of the chain (ids 1 to `count`), `head_hash` the stored hash
//! of row `count` (`record_hash` or `row_hash`), or 64 zeros when `count` is 0.
//!
//! # What is signed
//!
//! The statement's canonical bytes are built like a record's (store module documentation,
//! "Canonical byte form"): a header line, then `NAME ":" LEN ":" VALUE LF` per field, in
//! exactly this order, with counts in decimal ASCII (no sign, no leading zeros), text as in
//! the file, LEN the byte length of VALUE:
//!
//! ```text
//! statement = "tragus-checkpoint-v1" LF field("store_id") field("time_utc")
//!             field("station") field("records_count") field("records_head")
//!             field("safety_events_count") field("safety_events_head")
//!             field("exposures_count") field("exposures_head")
//! ```
//!
//! `statement_sha256` is the SHA-256 of those bytes in lowercase hex, and `signature` is the
//! station key's Ed25519 signature (RFC 8032) over
//! [`signature_message`](crate::keys::signature_message)`("checkpoint", statement_sha256)`,
//! i.e. the bytes `"tragus-signature-v1" LF "checkpoint" LF statement_sha256`. The key id is
//! not signed: the keyring entry it names must verify the signature, be of `station` and be
//! valid at `time_utc`.

use std::io::Write;
use std::path::Path;

use super::error::StoreError;
use super::hash::{chain_row_bytes, is_sha256_hex, sha256_hex, GENESIS_PREV_HASH};
use super::record::parse_time_utc;
use crate::keys::{Keyring, SignatureProblem, StationKey};

/// The file form's name, the value of its `form` key.
pub const CHECKPOINT_FORM: &str = "tragus-checkpoint/1";

/// First line of a checkpoint statement's canonical bytes.
pub const CHECKPOINT_HEADER: &[u8] = b"tragus-checkpoint-v1\n";

/// The purpose word a checkpoint is signed under ([`crate::keys::signature_message`]).
pub const CHECKPOINT_PURPOSE: &str = "checkpoint";

/// Largest checkpoint file read; a real one is under 1 KiB.
const MAX_CHECKPOINT_BYTES: usize = 64 << 10;

/// How far one chain reached.
#[derive(Debug, Clone, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ChainHead {
    /// Number of rows (ids 1 to `count`).
    pub count: u64,
    /// Stored hash of row `count`; the genesis value (64 zeros) when `count` is 0.
    pub head_hash: String,
}

impl ChainHead {
    /// The head of an empty chain.
    pub fn empty() -> ChainHead {
        ChainHead {
            count: 0,
            head_hash: GENESIS_PREV_HASH.to_owned(),
        }
    }
}

/// The three chains, in file order.
#[derive(Debug, Clone, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ChainHeads {
    /// `records`.
    pub records: ChainHead,
    /// `safety_events`.
    pub safety_events: ChainHead,
    /// `exposures`.
    pub exposures: ChainHead,
}

impl ChainHeads {
    /// `(table name, head)` of each chain, in canonical order.
    pub fn by_table(&self) -> [(&'static str, &ChainHead); 3] {
        [
            ("records", &self.records),
            ("safety_events", &self.safety_events),
            ("exposures", &self.exposures),
        ]
    }
}

/// A signed checkpoint (module doc).
#[derive(Debug, Clone, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Checkpoint {
    /// Always [`CHECKPOINT_FORM`].
    pub form: String,
    /// The store's identity ([`Store::store_id`](super::Store::store_id)).
    pub store_id: String,
    /// When it was made, UTC, the store's time form.
    pub time_utc: String,
    /// The station whose key signed it.
    pub station: String,
    /// How far each chain reached.
    pub chains: ChainHeads,
    /// Id of the key that signed it.
    pub key_id: String,
    /// Ed25519 signature, 128 lowercase hex digits.
    pub signature: String,
    /// Where it was read from, for messages; not part of the file.
    #[serde(skip)]
    pub source: String,
}

/// A checkpoint file that cannot be read, written or is not a checkpoint; the message names
/// the file (and line and column for a JSON error) and what was expected.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error("{location}: {detail}")]
pub struct CheckpointError {
    /// `path` or `path:line:col`.
    pub location: String,
    /// What is wrong and what was expected.
    pub detail: String,
}

impl CheckpointError {
    fn at(path: &Path, detail: impl Into<String>) -> Self {
        CheckpointError {
            location: path.display().to_string(),
            detail: detail.into(),
        }
    }
}

impl Checkpoint {
    /// A checkpoint of `heads` for `store_id` at `time_utc`, signed with `key`.
    pub fn sign(store_id: &str, time_utc: &str, heads: ChainHeads, key: &StationKey) -> Self {
        let mut c = Checkpoint {
            form: CHECKPOINT_FORM.to_owned(),
            store_id: store_id.to_owned(),
            time_utc: time_utc.to_owned(),
            station: key.station().to_owned(),
            chains: heads,
            key_id: key.key_id().to_owned(),
            signature: String::new(),
            source: "(made now)".into(),
        };
        c.signature = hex::encode(key.sign_hash(CHECKPOINT_PURPOSE, &c.statement_sha256()));
        c
    }

    /// The statement's canonical bytes (module doc, "What is signed").
    pub fn canonical_bytes(&self) -> Vec<u8> {
        let counts: Vec<String> = self
            .chains
            .by_table()
            .iter()
            .map(|(_, h)| h.count.to_string())
            .collect();
        let [r, s, x] = self.chains.by_table();
        let fields: [(&str, &str); 9] = [
            ("store_id", &self.store_id),
            ("time_utc", &self.time_utc),
            ("station", &self.station),
            ("records_count", &counts[0]),
            ("records_head", &r.1.head_hash),
            ("safety_events_count", &counts[1]),
            ("safety_events_head", &s.1.head_hash),
            ("exposures_count", &counts[2]),
            ("exposures_head", &x.1.head_hash),
        ];
        chain_row_bytes(CHECKPOINT_HEADER, &fields)
    }

    /// SHA-256 of [`canonical_bytes`](Self::canonical_bytes), lowercase hex: what is signed.
    pub fn statement_sha256(&self) -> String {
        sha256_hex(&self.canonical_bytes())
    }

    /// Check the signature against `keyring`: a key of the keyring, of `station`, valid at
    /// `time_utc`, verifying over the statement.
    pub fn check_signature(&self, keyring: &Keyring) -> Result<(), SignatureProblem> {
        let at = parse_time_utc(&self.time_utc).ok_or_else(|| SignatureProblem::NotValidAt {
            key_id: self.key_id.clone(),
            at: self.time_utc.clone(),
        })?;
        let signature = hex::decode(&self.signature).ok();
        keyring.check(
            Some(&self.key_id),
            signature.as_deref(),
            &self.station,
            at,
            &crate::keys::signature_message(CHECKPOINT_PURPOSE, &self.statement_sha256()),
        )
    }

    /// The file's text (module doc).
    pub fn to_json(&self) -> String {
        let mut s = serde_json::to_string_pretty(self).unwrap_or_default();
        s.push('\n');
        s
    }

    /// Write to `path`, which must not exist: a checkpoint is never overwritten (the file is
    /// created exclusively, written and flushed to disk).
    pub fn write(&self, path: &Path) -> Result<(), CheckpointError> {
        let mut file = std::fs::OpenOptions::new()
            .write(true)
            .create_new(true)
            .open(path)
            .map_err(|e| {
                CheckpointError::at(
                    path,
                    if e.kind() == std::io::ErrorKind::AlreadyExists {
                        "already exists; a checkpoint is never overwritten, choose a new file name"
                            .to_string()
                    } else {
                        format!("cannot create the checkpoint file: {e}")
                    },
                )
            })?;
        file.write_all(self.to_json().as_bytes())
            .and_then(|()| file.sync_all())
            .map_err(|e| CheckpointError::at(path, format!("cannot write: {e}")))
    }

    /// Read and check a checkpoint file: a regular file of at most 64 KiB holding a
    /// `tragus-checkpoint/1` document whose every field has its form. The signature is not
    /// checked here ([`check_signature`](Self::check_signature)).
    pub fn load(path: &Path) -> Result<Checkpoint, CheckpointError> {
        let text =
            crate::config::read_data_file(path, "checkpoint").map_err(|e| CheckpointError {
                location: path.display().to_string(),
                detail: e,
            })?;
        if text.len() > MAX_CHECKPOINT_BYTES {
            return Err(CheckpointError::at(
                path,
                format!(
                    "{} bytes; expected a checkpoint of at most {MAX_CHECKPOINT_BYTES}",
                    text.len()
                ),
            ));
        }
        let mut c = Self::parse(&text).map_err(|(pos, detail)| CheckpointError {
            location: match pos {
                Some((line, col)) => format!("{}:{line}:{col}", path.display()),
                None => path.display().to_string(),
            },
            detail,
        })?;
        c.source = path.display().to_string();
        Ok(c)
    }

    /// Parse and check the text of a checkpoint file; an error has the line and column
    /// when the JSON itself is wrong.
    pub fn parse(text: &str) -> Result<Checkpoint, (Option<(usize, usize)>, String)> {
        let c: Checkpoint = serde_json::from_str(text).map_err(|e| {
            let msg = e.to_string();
            // serde_json appends " at line L column C"; the position goes in front instead.
            let msg = msg
                .rsplit_once(" at line ")
                .map_or(msg.clone(), |(m, _)| m.to_string());
            (
                Some((e.line(), e.column())),
                format!("expected a {CHECKPOINT_FORM} JSON document: {msg}"),
            )
        })?;
        c.check_form().map_err(|d| (None, d))?;
        Ok(c)
    }

    fn check_form(&self) -> Result<(), String> {
        let hex_of = |s: &str, n: usize| {
            s.len() == n
                && s.bytes()
                    .all(|b| b.is_ascii_digit() || (b'a'..=b'f').contains(&b))
        };
        if self.form != CHECKPOINT_FORM {
            return Err(format!(
                "`form`: expected {CHECKPOINT_FORM:?}, found {:?}",
                self.form
            ));
        }
        if !hex_of(&self.store_id, 32) {
            return Err(format!(
                "`store_id`: expected 32 lowercase hex digits, found {:?}",
                self.store_id
            ));
        }
        if parse_time_utc(&self.time_utc).is_none() {
            return Err(format!(
                "`time_utc`: expected a UTC time like 2025-03-14T17:00:00Z, found {:?}",
                self.time_utc
            ));
        }
        if self.station.trim().is_empty() || self.station.chars().any(char::is_control) {
            return Err(format!(
                "`station`: expected a station id, found {:?}",
                self.station
            ));
        }
        for (table, head) in self.chains.by_table() {
            if i64::try_from(head.count).is_err() {
                return Err(format!(
                    "`chains.{table}.count`: expected a row count, found {}",
                    head.count
                ));
            }
            if !is_sha256_hex(&head.head_hash) {
                return Err(format!(
                    "`chains.{table}.head_hash`: expected 64 lowercase hex digits, found {:?}",
                    head.head_hash
                ));
            }
            if (head.count == 0) != (head.head_hash == GENESIS_PREV_HASH) {
                return Err(format!(
                    "`chains.{table}`: expected the head hash of 64 zeros exactly when the \
                     count is 0, found count {} with head {}",
                    head.count, head.head_hash
                ));
            }
        }
        if !hex_of(&self.key_id, 16) {
            return Err(format!(
                "`key_id`: expected 16 lowercase hex digits, found {:?}",
                self.key_id
            ));
        }
        if !hex_of(&self.signature, 128) {
            return Err(format!(
                "`signature`: expected 128 lowercase hex digits (64 bytes), found {:?}",
                self.signature
            ));
        }
        Ok(())
    }
}

/// The chain heads and the store id of an open database, read in one transaction: what a
/// checkpoint states. Fails when a chain's ids are not 1 to its row count (the store is not
/// intact: it must be verified, not checkpointed).
pub(crate) fn read_heads(
    conn: &rusqlite::Connection,
    db_path: &Path,
) -> Result<(String, ChainHeads), StoreError> {
    let err = |e| super::schema::sqlite_err(db_path, e);
    let tx = conn.unchecked_transaction().map_err(err)?;
    let store_id: String = tx
        .query_row(
            "SELECT value FROM store_meta WHERE name = 'store_id'",
            [],
            |r| r.get(0),
        )
        .map_err(err)?;
    let heads = ChainHeads {
        records: read_head(&tx, "records", "record_hash").map_err(|e| e.into_store(db_path))?,
        safety_events: read_head(&tx, "safety_events", "row_hash")
            .map_err(|e| e.into_store(db_path))?,
        exposures: read_head(&tx, "exposures", "row_hash").map_err(|e| e.into_store(db_path))?,
    };
    tx.finish().map_err(err)?;
    Ok((store_id, heads))
}

/// Count and head of one chain; an error unless its ids are 1 to its row count.
fn read_head(
    tx: &rusqlite::Transaction<'_>,
    table: &str,
    hash: &str,
) -> Result<ChainHead, super::safety::RowError> {
    let (count, max, head): (i64, Option<i64>, Option<String>) = tx.query_row(
        &format!(
            "SELECT COUNT(*), MAX(id), \
             (SELECT {hash} FROM {table} ORDER BY id DESC LIMIT 1) FROM {table}"
        ),
        [],
        |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?)),
    )?;
    let max = max.unwrap_or(0);
    if max != count {
        return Err(super::safety::RowError::Store(StoreError::Corrupt {
            id: max,
            column: "id",
            detail: format!(
                "{table} holds {count} rows but its last id is {max}; run verify, no \
                 checkpoint was made"
            ),
        }));
    }
    Ok(ChainHead {
        count: count as u64,
        head_hash: head.unwrap_or_else(|| GENESIS_PREV_HASH.to_owned()),
    })
}

/// Now, UTC, in the store's time form with milliseconds.
pub(crate) fn now_time_utc() -> String {
    let now = time::OffsetDateTime::now_utc();
    let fmt = time::macros::format_description!(
        "[year]-[month]-[day]T[hour]:[minute]:[second].[subsecond digits:3]Z"
    );
    now.format(&fmt)
        .unwrap_or_else(|_| format!("{}", now.unix_timestamp()))
}
