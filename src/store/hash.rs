//! The hash chain: the canonical byte form of a record and its SHA-256.
//!
//! The form is specified in the [store module documentation](super#canonical-byte-form);
//! this file is its only implementation, and `tests/reference/store_record_hash.py`
//! recomputes it independently with Python's `hashlib`.

/// `prev_hash` of the first record of a store: 64 ASCII zeros.
pub const GENESIS_PREV_HASH: &str =
    "0000000000000000000000000000000000000000000000000000000000000000";

/// First line of the canonical form of records written by schema 1 (no calibration fields);
/// the `v1` changes only with the form itself.
pub const CANONICAL_HEADER: &[u8] = b"tragus-record-v1\n";

/// First line of the canonical form of records written since schema 2 (with
/// `calibration_mode` and `calibration_sha256`).
pub const CANONICAL_HEADER_V2: &[u8] = b"tragus-record-v2\n";

/// First line of the canonical form of records written since schema 4 (with `build`,
/// `inputs_json` and `playback_json` after the calibration fields).
pub const CANONICAL_HEADER_V3: &[u8] = b"tragus-record-v3\n";

pub use crate::digest::sha256_hex;

/// True when `s` is 64 lowercase hex digits, the only spelling of a SHA-256 the store uses.
pub fn is_sha256_hex(s: &str) -> bool {
    s.len() == 64
        && s.bytes()
            .all(|b| b.is_ascii_digit() || (b'a'..=b'f').contains(&b))
}

/// Every hashed field of one record, borrowed, as text and integers exactly as stored.
///
/// Verification builds this from raw database values (which an attacker may have set to
/// anything), so the verdict is plain text here, not a [`crate::Verdict`].
#[derive(Debug, Clone, Copy)]
pub(crate) struct CanonicalFields<'a> {
    pub id: i64,
    pub time_utc: &'a str,
    pub serial: &'a str,
    pub plan_id: &'a str,
    pub plan_revision: i64,
    pub plan_sha256: &'a str,
    pub software_version: &'a str,
    pub station: &'a str,
    pub operator: &'a str,
    pub rig: &'a str,
    pub verdict: &'a str,
    pub result_json: &'a str,
    pub capture_sha256: &'a str,
    pub prev_hash: &'a str,
    /// `(calibration_mode, calibration_sha256 or "")` for a v2 record; `None` for a record
    /// written before schema 2, whose form is v1.
    pub calibration: Option<(&'a str, &'a str)>,
    /// `(build, inputs_json, playback_json)` for a v3 record (schema 4); `None` before.
    /// A v3 record always has `calibration` too.
    pub provenance: Option<(&'a str, &'a str, &'a str)>,
}

impl CanonicalFields<'_> {
    /// The canonical bytes: header, then `NAME ":" LEN ":" VALUE "\n"` per field in order.
    pub fn bytes(&self) -> Vec<u8> {
        let id = self.id.to_string();
        let plan_revision = self.plan_revision.to_string();
        // The order is part of the format (module doc); never reorder.
        let mut fields: Vec<(&str, &str)> = vec![
            ("id", &id),
            ("time_utc", self.time_utc),
            ("serial", self.serial),
            ("plan_id", self.plan_id),
            ("plan_revision", &plan_revision),
            ("plan_sha256", self.plan_sha256),
            ("software_version", self.software_version),
            ("station", self.station),
            ("operator", self.operator),
            ("rig", self.rig),
            ("verdict", self.verdict),
            ("result_json", self.result_json),
            ("capture_sha256", self.capture_sha256),
        ];
        let mut header = match self.calibration {
            None => CANONICAL_HEADER,
            Some((mode, sha)) => {
                fields.push(("calibration_mode", mode));
                fields.push(("calibration_sha256", sha));
                CANONICAL_HEADER_V2
            }
        };
        if let Some((build, inputs, playback)) = self.provenance {
            if self.calibration.is_none() {
                // Not a form any store writes; keep the fields in the v3 order anyway so
                // the hash still covers them and the mismatch shows.
                fields.push(("calibration_mode", ""));
                fields.push(("calibration_sha256", ""));
            }
            fields.push(("build", build));
            fields.push(("inputs_json", inputs));
            fields.push(("playback_json", playback));
            header = CANONICAL_HEADER_V3;
        }
        fields.push(("prev_hash", self.prev_hash));
        let len: usize = fields.iter().map(|(n, v)| n.len() + v.len() + 24).sum();
        let mut out = Vec::with_capacity(header.len() + len);
        out.extend_from_slice(header);
        for (name, value) in fields {
            out.extend_from_slice(name.as_bytes());
            out.push(b':');
            out.extend_from_slice(value.len().to_string().as_bytes());
            out.push(b':');
            out.extend_from_slice(value.as_bytes());
            out.push(b'\n');
        }
        out
    }

    /// `record_hash`: SHA-256 of the canonical bytes, lowercase hex.
    pub fn hash(&self) -> String {
        sha256_hex(&self.bytes())
    }
}

/// First line of the canonical form of a safety event (schema 3).
pub const SAFETY_EVENT_HEADER: &[u8] = b"tragus-safety-event-v1\n";

/// First line of the canonical form of an exposure (schema 3).
pub const EXPOSURE_HEADER: &[u8] = b"tragus-exposure-v1\n";

/// Hashed columns of a safety event, in canonical order (never reorder).
pub(crate) const SAFETY_EVENT_FIELDS: [&str; 12] = [
    "id",
    "time_utc",
    "station",
    "operator",
    "serial",
    "plan_id",
    "plan_sha256",
    "kind",
    "message",
    "detail_json",
    "record_id",
    "prev_hash",
];

/// Hashed columns of an exposure, in canonical order (never reorder).
pub(crate) const EXPOSURE_FIELDS: [&str; 10] = [
    "id",
    "operator",
    "station",
    "start_unix_s",
    "level_dba",
    "duration_s",
    "serial",
    "plan_id",
    "record_id",
    "prev_hash",
];

/// The canonical bytes of a row of the safety-event or exposure chain: `header`, then
/// `NAME ":" LEN ":" VALUE "\n"` for each `(NAME, VALUE)` in the order given, where each
/// VALUE is already in its canonical text ([`real_text`] for reals, decimal for integers,
/// empty for NULL).
pub(crate) fn chain_row_bytes(header: &[u8], fields: &[(&str, &str)]) -> Vec<u8> {
    let len: usize = fields.iter().map(|(n, v)| n.len() + v.len() + 24).sum();
    let mut out = Vec::with_capacity(header.len() + len);
    out.extend_from_slice(header);
    for (name, value) in fields {
        out.extend_from_slice(name.as_bytes());
        out.push(b':');
        out.extend_from_slice(value.len().to_string().as_bytes());
        out.push(b':');
        out.extend_from_slice(value.as_bytes());
        out.push(b'\n');
    }
    out
}

/// Canonical text of a finite real: the shortest decimal that reads back as the same `f64`,
/// positional (never an exponent), no trailing `.0`, `-` only for negative values (the
/// store stores −0.0 as 0.0). Rust's `Display` for `f64` is exactly this; Python gets it
/// from `repr` through `Decimal` (`tests/reference/store_safety_hash.py`).
pub(crate) fn real_text(x: f64) -> String {
    format!("{x}")
}
