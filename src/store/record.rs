//! What a record holds: the fields a caller appends, the fields the store adds, the filter
//! for listing, and the checks a record must pass before anything is written.

use time::{Date, Month, OffsetDateTime, PrimitiveDateTime, Time};

use super::error::{shorten, StoreError};
use super::hash::{is_sha256_hex, CanonicalFields};
use crate::Verdict;

/// One unit's result as the caller hands it to [`Store::append`](super::Store::append).
///
/// Every text field must be non-empty (an audit record with no operator or station is a gap,
/// not a default). All fields are hashed into the chain exactly as given.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct NewRecord {
    /// When the unit was measured, UTC, `YYYY-MM-DDTHH:MM:SS[.f]Z` with 1 to 9 fraction
    /// digits (RFC 3339 restricted to the `Z` offset).
    pub time_utc: String,
    /// Unit serial number, e.g. `E2-000123`.
    pub serial: String,
    /// Id of the plan that judged the unit.
    pub plan_id: String,
    /// Revision of that plan.
    pub plan_revision: u32,
    /// SHA-256 of the plan's canonical form, 64 lowercase hex digits.
    pub plan_sha256: String,
    /// Version of the software that measured and judged the unit.
    pub software_version: String,
    /// Station name (one store per station).
    pub station: String,
    /// Operator who ran the test.
    pub operator: String,
    /// Rig that made the capture, e.g. `simulated` or a sound card description.
    pub rig: String,
    /// Unit verdict.
    pub verdict: Verdict,
    /// The full result document (docs/architecture.md "Result JSON"); must be valid JSON.
    pub result_json: String,
    /// Under which calibration mode the unit was tested: `production`, `non-production` or
    /// `uncalibrated` (an id: lowercase letters, digits, `-`).
    pub calibration_mode: String,
    /// SHA-256 of the calibration applied (`tragus-calibration/1`, 64 lowercase hex digits),
    /// `None` when none was.
    pub calibration_sha256: Option<String>,
    /// The software build that measured the unit: version, git commit and whether the
    /// working tree had changes (`0.1.0+git.0123456789ab`, `….dirty`), set at build time.
    pub build: String,
    /// Links to the archived inputs, a JSON object of role → SHA-256 of the archived file
    /// (`{"plan":…,"station":…,"calibration":…}`; roles absent when there was no such
    /// input). Every linked file must be in the archive or handed to the append.
    pub inputs_json: String,
    /// What was played, a JSON object: `drive_gain_db` (per plan channel, the gain the
    /// sweep was played at relative to the plan, 0 unless hearing safety scaled it down),
    /// `calibration_offsets_db` (per plan channel, or `null`), `abandoned` (true when the
    /// sweep was stopped for safety and nothing was judged).
    pub playback_json: String,
}

/// A record as stored: the appended fields plus what the store added.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct StoredRecord {
    /// Position in the chain, 1 for the first record, each next one exactly one more.
    pub id: i64,
    /// See [`NewRecord::time_utc`].
    pub time_utc: String,
    /// See [`NewRecord::serial`].
    pub serial: String,
    /// See [`NewRecord::plan_id`].
    pub plan_id: String,
    /// See [`NewRecord::plan_revision`].
    pub plan_revision: u32,
    /// See [`NewRecord::plan_sha256`].
    pub plan_sha256: String,
    /// See [`NewRecord::software_version`].
    pub software_version: String,
    /// See [`NewRecord::station`].
    pub station: String,
    /// See [`NewRecord::operator`].
    pub operator: String,
    /// See [`NewRecord::rig`].
    pub rig: String,
    /// See [`NewRecord::verdict`].
    pub verdict: Verdict,
    /// See [`NewRecord::result_json`].
    pub result_json: String,
    /// See [`NewRecord::calibration_mode`]; `None` for a record written before schema 2
    /// (its hash is then over the v1 form, without calibration fields).
    pub calibration_mode: Option<String>,
    /// See [`NewRecord::calibration_sha256`].
    pub calibration_sha256: Option<String>,
    /// SHA-256 of the raw capture WAV, lowercase hex; the file is
    /// [`Store::capture_path`](super::Store::capture_path) of it.
    pub capture_sha256: String,
    /// `record_hash` of the record before this one, or
    /// [`GENESIS_PREV_HASH`](super::GENESIS_PREV_HASH) for the first.
    pub prev_hash: String,
    /// SHA-256 of this record's canonical bytes, lowercase hex.
    pub record_hash: String,
    /// See [`NewRecord::build`]; `None` for a record written before schema 4 (then its hash
    /// is over the v1 or v2 form, without the three provenance fields).
    pub build: Option<String>,
    /// See [`NewRecord::inputs_json`]; `None` before schema 4.
    pub inputs_json: Option<String>,
    /// See [`NewRecord::playback_json`]; `None` before schema 4.
    pub playback_json: Option<String>,
    /// Id of the station key that signed `record_hash`; `None` when unsigned.
    pub key_id: Option<String>,
    /// Ed25519 signature over `record_hash` (64 bytes); `None` when unsigned.
    pub signature: Option<Vec<u8>>,
}

impl StoredRecord {
    pub(crate) fn canonical_fields(&self) -> CanonicalFields<'_> {
        CanonicalFields {
            id: self.id,
            time_utc: &self.time_utc,
            serial: &self.serial,
            plan_id: &self.plan_id,
            plan_revision: i64::from(self.plan_revision),
            plan_sha256: &self.plan_sha256,
            software_version: &self.software_version,
            station: &self.station,
            operator: &self.operator,
            rig: &self.rig,
            verdict: verdict_word(self.verdict),
            result_json: &self.result_json,
            capture_sha256: &self.capture_sha256,
            prev_hash: &self.prev_hash,
            calibration: self
                .calibration_mode
                .as_deref()
                .map(|m| (m, self.calibration_sha256.as_deref().unwrap_or(""))),
            provenance: self.build.as_deref().map(|b| {
                (
                    b,
                    self.inputs_json.as_deref().unwrap_or(""),
                    self.playback_json.as_deref().unwrap_or(""),
                )
            }),
        }
    }

    /// The canonical bytes this record's hash is taken over (module doc, "Canonical byte
    /// form"), for auditors and reports that show what was signed.
    pub fn canonical_bytes(&self) -> Vec<u8> {
        self.canonical_fields().bytes()
    }

    /// SHA-256 of [`canonical_bytes`](Self::canonical_bytes) recomputed now, lowercase hex;
    /// equals `record_hash` unless the record was altered.
    pub fn computed_hash(&self) -> String {
        self.canonical_fields().hash()
    }
}

/// Which records [`Store::list`](super::Store::list) returns. The default returns all,
/// oldest first.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct RecordFilter {
    /// Only this serial number (exact match).
    pub serial: Option<String>,
    /// Only this plan id (exact match).
    pub plan_id: Option<String>,
    /// Only this verdict.
    pub verdict: Option<Verdict>,
    /// Only units measured at or after this instant (inclusive).
    pub since: Option<OffsetDateTime>,
    /// Only units measured before this instant (exclusive).
    pub until: Option<OffsetDateTime>,
    /// At most this many records; with `newest_first` these are the newest ones.
    pub limit: Option<usize>,
    /// Order by id descending instead of ascending.
    pub newest_first: bool,
}

/// The word stored for a verdict, the same as its serde form in the result JSON.
pub(crate) fn verdict_word(v: Verdict) -> &'static str {
    match v {
        Verdict::Pass => "pass",
        Verdict::Fail => "fail",
        Verdict::Retest => "retest",
    }
}

/// Inverse of [`verdict_word`]; `None` for anything else.
pub(crate) fn verdict_from_word(s: &str) -> Option<Verdict> {
    match s {
        "pass" => Some(Verdict::Pass),
        "fail" => Some(Verdict::Fail),
        "retest" => Some(Verdict::Retest),
        _ => None,
    }
}

/// Parse `YYYY-MM-DDTHH:MM:SS[.f{1,9}]Z`, the only time form the store accepts.
///
/// Written here rather than with the `time` crate's RFC 3339 parser because that accepts
/// any offset, and a field named `time_utc` must not hold a local time.
pub(crate) fn parse_time_utc(s: &str) -> Option<OffsetDateTime> {
    let b = s.as_bytes();
    if b.len() < 20 || *b.last()? != b'Z' {
        return None;
    }
    let num = |range: std::ops::Range<usize>| -> Option<u32> {
        let part = b.get(range)?;
        if part.is_empty() || !part.iter().all(u8::is_ascii_digit) {
            return None;
        }
        part.iter().try_fold(0u32, |acc, d| {
            acc.checked_mul(10)?.checked_add(u32::from(d - b'0'))
        })
    };
    let sep_ok = b[4] == b'-' && b[7] == b'-' && b[10] == b'T' && b[13] == b':' && b[16] == b':';
    if !sep_ok {
        return None;
    }
    let year = i32::try_from(num(0..4)?).ok()?;
    let month = Month::try_from(u8::try_from(num(5..7)?).ok()?).ok()?;
    let day = u8::try_from(num(8..10)?).ok()?;
    let hour = u8::try_from(num(11..13)?).ok()?;
    let minute = u8::try_from(num(14..16)?).ok()?;
    let second = u8::try_from(num(17..19)?).ok()?;
    let end = b.len() - 1;
    let nanos = if end == 19 {
        0
    } else {
        if b[19] != b'.' || end - 20 > 9 {
            return None;
        }
        let digits = end - 20;
        // Scale the fraction to nanoseconds: ".5" is 500 000 000 ns.
        num(20..end)? * 10u32.pow(9 - u32::try_from(digits).ok()?)
    };
    let date = Date::from_calendar_date(year, month, day).ok()?;
    let time = Time::from_hms_nano(hour, minute, second, nanos).ok()?;
    Some(PrimitiveDateTime::new(date, time).assume_utc())
}

/// Nanoseconds since 1970-01-01T00:00:00Z, the indexed form used for time filters.
pub(crate) fn unix_ns(t: OffsetDateTime) -> Option<i64> {
    i64::try_from(t.unix_timestamp_nanos()).ok()
}

impl NewRecord {
    /// Check every field; returns the time as Unix nanoseconds for the time index.
    pub(crate) fn validate(&self) -> Result<i64, StoreError> {
        let text_fields: [(&'static str, &str); 8] = [
            ("time_utc", &self.time_utc),
            ("serial", &self.serial),
            ("plan_id", &self.plan_id),
            ("plan_sha256", &self.plan_sha256),
            ("software_version", &self.software_version),
            ("station", &self.station),
            ("operator", &self.operator),
            ("rig", &self.rig),
        ];
        for (field, value) in text_fields {
            check_id_text(field, value)?;
        }
        let time_ns = parse_time_utc(&self.time_utc)
            .and_then(unix_ns)
            .ok_or_else(|| StoreError::InvalidRecord {
                field: "time_utc",
                expected: "a UTC time like 2025-03-14T09:26:53.589Z",
                found: shorten(&self.time_utc),
            })?;
        if self.calibration_mode.is_empty()
            || !self
                .calibration_mode
                .bytes()
                .all(|b| b.is_ascii_lowercase() || b.is_ascii_digit() || b == b'-')
        {
            return Err(StoreError::InvalidRecord {
                field: "calibration_mode",
                expected: "an id of lowercase letters, digits and `-` (production, ...)",
                found: shorten(&self.calibration_mode),
            });
        }
        if let Some(c) = &self.calibration_sha256 {
            if !is_sha256_hex(c) {
                return Err(StoreError::InvalidRecord {
                    field: "calibration_sha256",
                    expected: "64 lowercase hex digits",
                    found: shorten(c),
                });
            }
        }
        if !is_sha256_hex(&self.plan_sha256) {
            return Err(StoreError::InvalidRecord {
                field: "plan_sha256",
                expected: "64 lowercase hex digits",
                found: shorten(&self.plan_sha256),
            });
        }
        check_id_text("build", &self.build)?;
        self.input_links()?;
        match serde_json::from_str::<serde_json::Value>(&self.playback_json) {
            Ok(serde_json::Value::Object(_)) => {}
            _ => {
                return Err(StoreError::InvalidRecord {
                    field: "playback_json",
                    expected: "a JSON object",
                    found: shorten(&self.playback_json),
                })
            }
        }
        if serde_json::from_str::<serde::de::IgnoredAny>(&self.result_json).is_err() {
            return Err(StoreError::InvalidRecord {
                field: "result_json",
                expected: "a JSON document",
                found: shorten(&self.result_json),
            });
        }
        Ok(time_ns)
    }
}

/// The archived inputs `inputs_json` links to, as `(role, sha256)`, in the JSON's order;
/// an error unless it is a JSON object of role (an id) → 64 lowercase hex digits.
pub(crate) fn parse_input_links(inputs_json: &str) -> Result<Vec<(String, String)>, String> {
    let map = match serde_json::from_str::<serde_json::Value>(inputs_json) {
        Ok(serde_json::Value::Object(m)) => m,
        _ => return Err("expected a JSON object of role → SHA-256".into()),
    };
    let mut out = Vec::with_capacity(map.len());
    for (role, v) in map {
        let ok_role = !role.is_empty()
            && role
                .bytes()
                .all(|b| b.is_ascii_lowercase() || b.is_ascii_digit() || b == b'_');
        match v.as_str() {
            Some(sha) if ok_role && is_sha256_hex(sha) => out.push((role, sha.to_string())),
            _ => {
                return Err(format!(
                    "expected role → 64 lowercase hex digits, found {role:?} → {v}"
                ))
            }
        }
    }
    Ok(out)
}

impl NewRecord {
    /// The archived inputs this record links to (see [`parse_input_links`]).
    pub(crate) fn input_links(&self) -> Result<Vec<(String, String)>, StoreError> {
        parse_input_links(&self.inputs_json).map_err(|_| StoreError::InvalidRecord {
            field: "inputs_json",
            expected: "a JSON object of role → 64 lowercase hex digits",
            found: shorten(&self.inputs_json),
        })
    }
}

/// Non-empty text without control characters (identity fields: they end up in one-line
/// reports).
pub(super) fn check_id_text(field: &'static str, value: &str) -> Result<(), StoreError> {
    if value.trim().is_empty() {
        return Err(StoreError::InvalidRecord {
            field,
            expected: "non-empty text",
            found: shorten(value),
        });
    }
    if value.chars().any(char::is_control) {
        return Err(StoreError::InvalidRecord {
            field,
            expected: "text without control characters",
            found: shorten(value),
        });
    }
    Ok(())
}
