//! The record chain: every record's hash recomputed in the form its columns select (v1, v2,
//! v3), each link and id, every field's form, its signature, its capture and its archived
//! inputs.

use std::collections::HashMap;

use rusqlite::types::ValueRef;
use rusqlite::Row;

use super::files::{self, Referenced};
use super::{missing_columns, opt_blob, opt_text, select_list, Ctx, ProblemKind, Trace};
use crate::store::hash::{is_sha256_hex, CanonicalFields, GENESIS_PREV_HASH};
use crate::store::record::{parse_input_links, parse_time_utc, unix_ns, verdict_from_word};
use crate::store::schema::table_columns;

/// Columns of a schema-1 record, in the order read.
const COLUMNS_V1: [&str; 16] = [
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
];

/// Added by schema 2.
const COLUMNS_V2: [&str; 2] = ["calibration_mode", "calibration_sha256"];

/// Added by schema 4 (the last three hashed in the v3 form).
const COLUMNS_V4: [&str; 3] = ["build", "inputs_json", "playback_json"];

/// Columns that may be NULL.
const NULLABLE_COLUMNS: [&str; 5] = [
    "calibration_mode",
    "calibration_sha256",
    "build",
    "inputs_json",
    "playback_json",
];

const INT_COLUMNS: [&str; 2] = ["time_unix_ns", "plan_revision"];

/// One row as raw values; a damaged column is absent and has been reported.
struct RawRow {
    id: i64,
    text: HashMap<&'static str, String>,
    int: HashMap<&'static str, i64>,
    key_id: Option<String>,
    signature: Option<Vec<u8>>,
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

/// Walk the records; returns the trace, and the numbers of captures and archived inputs
/// checked.
pub(super) fn walk(ctx: &mut Ctx<'_>, refs: &mut Referenced) -> (Trace, u64, u64) {
    let mut trace = Trace::new();
    let present = match table_columns(ctx.conn, "records") {
        Ok(p) => p,
        Err(e) => {
            ctx.read_failed("records", e);
            return (trace, 0, 0);
        }
    };
    let mut wanted: Vec<&'static str> = COLUMNS_V1.to_vec();
    if ctx.version >= 2 {
        wanted.extend(COLUMNS_V2);
    }
    if ctx.version >= 4 {
        wanted.extend(COLUMNS_V4);
    }
    // Read though unhashed: the signature column exists since schema 1, the key id since 4.
    wanted.push("signature");
    if ctx.version >= 4 {
        wanted.push("key_id");
    }
    let missing = missing_columns(ctx, "records", &wanted, &present);
    if missing.contains(&"id") {
        return (trace, 0, 0);
    }
    let sql = format!(
        "SELECT {} FROM records ORDER BY id",
        select_list(&wanted, &present)
    );
    let result = (|| -> rusqlite::Result<()> {
        let mut stmt = ctx.conn.prepare(&sql)?;
        let mut rows = stmt.query([])?;
        let mut prev_id = 0i64;
        // Hash the next record's prev_hash must equal; `None` after a record whose own hash
        // was unreadable (already reported), so one damage is not reported twice.
        let mut expected_prev: Option<String> = Some(GENESIS_PREV_HASH.to_owned());
        while let Some(row) = rows.next()? {
            let raw = read_raw(ctx, &mut trace, row, &wanted, &missing)?;
            trace.count += 1;
            check_record(ctx, &mut trace, refs, &raw, prev_id, &expected_prev);
            check_signature(ctx, &mut trace, &raw);
            prev_id = raw.id;
            expected_prev = raw.text.get("record_hash").cloned();
            trace.hashes.insert(raw.id, expected_prev.clone());
        }
        trace.head = expected_prev.unwrap_or_default();
        Ok(())
    })();
    if let Err(e) = result {
        ctx.read_failed("records", e);
    }
    (trace, refs.n_captures(), refs.n_archived())
}

fn read_raw(
    ctx: &mut Ctx<'_>,
    trace: &mut Trace,
    row: &Row<'_>,
    wanted: &[&'static str],
    missing: &[&'static str],
) -> rusqlite::Result<RawRow> {
    // The id is the primary key (an alias of SQLite's rowid), so it is always an integer.
    let id: i64 = row.get(0)?;
    let mut raw = RawRow {
        id,
        text: HashMap::new(),
        int: HashMap::new(),
        key_id: None,
        signature: None,
    };
    for (i, &column) in wanted.iter().enumerate().skip(1) {
        let value = row.get_ref(i)?;
        let damaged = |detail: String| ProblemKind::FieldDamaged { column, detail };
        let problem = if missing.contains(&column) {
            None
        } else if column == "signature" {
            opt_blob(value)
                .map(|v| raw.signature = v)
                .err()
                .map(damaged)
        } else if column == "key_id" {
            opt_text(value).map(|v| raw.key_id = v).err().map(damaged)
        } else if INT_COLUMNS.contains(&column) {
            match value {
                ValueRef::Integer(v) => {
                    raw.int.insert(column, v);
                    None
                }
                other => Some(damaged(format!(
                    "expected an integer, found {}",
                    other.data_type()
                ))),
            }
        } else if NULLABLE_COLUMNS.contains(&column) && value == ValueRef::Null {
            // Absent: recorded as missing from `text`.
            None
        } else {
            match value {
                ValueRef::Text(bytes) => match std::str::from_utf8(bytes) {
                    Ok(s) => {
                        raw.text.insert(column, s.to_owned());
                        None
                    }
                    Err(_) => Some(damaged("text is not valid UTF-8".into())),
                },
                other => Some(damaged(format!(
                    "expected text, found {}",
                    other.data_type()
                ))),
            }
        };
        if let Some(kind) = problem {
            trace.flag(id);
            ctx.problem(Some(id), kind);
        }
    }
    Ok(raw)
}

fn check_record(
    ctx: &mut Ctx<'_>,
    trace: &mut Trace,
    refs: &mut Referenced,
    raw: &RawRow,
    prev_id: i64,
    expected_prev: &Option<String>,
) {
    let id = raw.id;
    // Problems of the chain itself also mark the trace (checkpoints look at it).
    let mut chain = |ctx: &mut Ctx<'_>, kind| {
        trace.flag(id);
        ctx.problem(Some(id), kind);
    };
    if id != prev_id + 1 {
        chain(
            ctx,
            ProblemKind::RecordsMissing {
                first: prev_id + 1,
                last: id - 1,
            },
        );
    }
    if let (Some(expected), Some(found)) = (expected_prev, raw.text.get("prev_hash")) {
        if expected != found {
            chain(
                ctx,
                ProblemKind::ChainBroken {
                    expected: expected.clone(),
                    found: found.clone(),
                },
            );
        }
    }
    if let (Some(fields), Some(stored)) = (raw.canonical(), raw.text.get("record_hash")) {
        let computed = fields.hash();
        if &computed != stored {
            chain(
                ctx,
                ProblemKind::RecordHashMismatch {
                    stored: stored.clone(),
                    computed,
                },
            );
        }
    }
    let mut damaged = |ctx: &mut Ctx<'_>, column: &'static str, detail: String| {
        chain(ctx, ProblemKind::FieldDamaged { column, detail })
    };
    if let Some(v) = raw.text.get("verdict") {
        if verdict_from_word(v).is_none() {
            damaged(
                ctx,
                "verdict",
                format!("expected pass, fail or retest, found {v:?}"),
            );
        }
    }
    if let Some(rev) = raw.int.get("plan_revision") {
        if u32::try_from(*rev).is_err() {
            damaged(
                ctx,
                "plan_revision",
                format!("expected 0 to {}, found {rev}", u32::MAX),
            );
        }
    }
    let has = |c: &str| raw.text.contains_key(c);
    // Unhashed in the record's own form: a value there would be trusted and is not covered.
    if !has("calibration_mode") && has("calibration_sha256") {
        damaged(
            ctx,
            "calibration_sha256",
            "expected NULL on a record without calibration_mode (v1 form, not hashed)".into(),
        );
    }
    if !has("build") {
        for column in ["inputs_json", "playback_json"] {
            if has(column) {
                damaged(
                    ctx,
                    column,
                    "expected NULL on a record without build (v1/v2 form, not hashed)".into(),
                );
            }
        }
    } else {
        match raw.text.get("inputs_json").map(|j| parse_input_links(j)) {
            Some(Ok(links)) => {
                for (role, sha) in links {
                    files::check_archived(ctx, refs, id, &role, &sha);
                }
            }
            Some(Err(detail)) => damaged(ctx, "inputs_json", detail),
            None => damaged(
                ctx,
                "inputs_json",
                "expected a JSON object of role → SHA-256, found NULL".into(),
            ),
        }
        let playback = raw
            .text
            .get("playback_json")
            .map(|p| serde_json::from_str::<serde_json::Value>(p));
        if !matches!(playback, Some(Ok(serde_json::Value::Object(_)))) {
            damaged(ctx, "playback_json", "expected a JSON object".into());
        }
    }
    if let (Some(t), Some(ns)) = (raw.text.get("time_utc"), raw.int.get("time_unix_ns")) {
        match parse_time_utc(t).and_then(unix_ns) {
            Some(parsed) if parsed == *ns => {}
            Some(_) => ctx.problem(Some(id), ProblemKind::TimeIndexMismatch),
            None => damaged(ctx, "time_utc", format!("expected a UTC time, found {t:?}")),
        }
    }

    let Some(sha) = raw.text.get("capture_sha256") else {
        return;
    };
    if !is_sha256_hex(sha) {
        // Never build a path from this text: it could point anywhere.
        damaged(
            ctx,
            "capture_sha256",
            "expected 64 lowercase hex digits".into(),
        );
        return;
    }
    files::check_capture(ctx, refs, id, sha);
}

/// Count the record's signature and, with a keyring, check it.
fn check_signature(ctx: &mut Ctx<'_>, trace: &mut Trace, raw: &RawRow) {
    let signed = raw.key_id.is_some() && raw.signature.is_some();
    if signed {
        trace.signatures.signed += 1;
    } else {
        trace.signatures.unsigned += 1;
    }
    let Some(keyring) = ctx.keyring else {
        return;
    };
    // A row whose station, time or hash is unreadable has been reported already.
    let (Some(station), Some(at), Some(hash)) = (
        raw.text.get("station"),
        raw.text.get("time_utc").and_then(|t| parse_time_utc(t)),
        raw.text.get("record_hash"),
    ) else {
        return;
    };
    let message = crate::keys::signature_message("records", hash);
    if let Err(problem) = keyring.check(
        raw.key_id.as_deref(),
        raw.signature.as_deref(),
        station,
        at,
        &message,
    ) {
        ctx.problem(Some(raw.id), ProblemKind::Signature { problem });
    }
}
