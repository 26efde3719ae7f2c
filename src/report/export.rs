//! Exports of a store's records for other tools: CSV (one row per record and check) and
//! JSON Lines (one object per record: its columns and its parsed result).
//!
//! Beside the audit report at the end of the data flow; `tragus export` calls [`export`]
//! with the same [`Selection`] as `tragus report`.
//!
//! CSV follows RFC 4180: the header line [`CSV_HEADER`], records ending in CRLF, a field
//! quoted (`"…"`, an inner `"` doubled) when it holds a comma, a quote, CR or LF. Columns:
//! `serial, time_utc, station, plan_id, plan_revision` from the record; `check, channel,
//! verdict, value, margin_db, at_hz` from each check of the result (`value` only when the
//! result carries one; numbers in the shortest form that reads back as the same double;
//! empty for none). A record whose result holds no check (a sweep not played) gets one row
//! with empty check and channel and the record's verdict, so every record appears.
//!
//! JSON Lines: per record, in chain order, one line `{"id", "time_utc", "serial",
//! "plan_id", "plan_revision", "plan_sha256", "software_version", "station", "operator",
//! "rig", "verdict", "capture_sha256", "calibration_mode", "calibration_sha256",
//! "prev_hash", "record_hash", "result"}` where `result` is the parsed result JSON (or, if
//! it does not parse, `null` and the text as `result_json`).

use std::io::Write;

use serde_json::{json, Value};

use super::audit::Selection;
use crate::store::{Store, StoreError, StoredRecord};

/// The CSV header line (without its CRLF).
pub const CSV_HEADER: &str =
    "serial,time_utc,station,plan_id,plan_revision,check,channel,verdict,value,margin_db,at_hz";

/// Export format.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ExportFormat {
    /// RFC 4180 CSV, one row per record and check.
    Csv,
    /// JSON Lines, one object per record.
    Jsonl,
}

/// Why an export stopped.
#[derive(Debug, thiserror::Error)]
pub enum ExportError {
    /// The store could not be read.
    #[error(transparent)]
    Store(#[from] StoreError),
    /// The output could not be written.
    #[error("cannot write the export: {0}")]
    Write(#[from] std::io::Error),
}

/// What was exported.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub struct ExportSummary {
    /// Records exported.
    pub records: u64,
    /// Lines written after the header (CSV rows, or JSON lines).
    pub rows: u64,
}

/// One CSV field, quoted when RFC 4180 requires it (section 2, rules 6 and 7).
pub fn csv_field(s: &str) -> String {
    if s.contains([',', '"', '\r', '\n']) {
        format!("\"{}\"", s.replace('"', "\"\""))
    } else {
        s.to_owned()
    }
}

fn csv_number(v: &Value) -> String {
    v.as_f64()
        .filter(|x| x.is_finite())
        .map(|x| x.to_string())
        .unwrap_or_default()
}

fn csv_text(v: &Value) -> String {
    v.as_str().map(csv_field).unwrap_or_default()
}

fn csv_rows(r: &StoredRecord, out: &mut dyn Write) -> std::io::Result<u64> {
    let head = [
        csv_field(&r.serial),
        csv_field(&r.time_utc),
        csv_field(&r.station),
        csv_field(&r.plan_id),
        r.plan_revision.to_string(),
    ]
    .join(",");
    let result: Value = serde_json::from_str(&r.result_json).unwrap_or(Value::Null);
    let checks: &[Value] = result["checks"].as_array().map_or(&[], Vec::as_slice);
    let mut n = 0;
    for c in checks.iter().filter(|c| c.is_object()) {
        write!(
            out,
            "{head},{},{},{},{},{},{}\r\n",
            csv_text(&c["id"]),
            csv_text(&c["channel"]),
            csv_text(&c["verdict"]),
            csv_number(&c["value"]),
            csv_number(&c["worst_margin_db"]),
            csv_number(&c["at_hz"]),
        )?;
        n += 1;
    }
    if n == 0 {
        write!(out, "{head},,,{},,,\r\n", r.verdict.word().to_lowercase())?;
        n = 1;
    }
    Ok(n)
}

fn jsonl_line(r: &StoredRecord, out: &mut dyn Write) -> std::io::Result<()> {
    let mut doc = json!({
        "id": r.id, "time_utc": r.time_utc, "serial": r.serial, "plan_id": r.plan_id,
        "plan_revision": r.plan_revision, "plan_sha256": r.plan_sha256,
        "software_version": r.software_version, "station": r.station, "operator": r.operator,
        "rig": r.rig, "verdict": r.verdict, "capture_sha256": r.capture_sha256,
        "calibration_mode": r.calibration_mode, "calibration_sha256": r.calibration_sha256,
        "prev_hash": r.prev_hash, "record_hash": r.record_hash,
    });
    match serde_json::from_str::<Value>(&r.result_json) {
        Ok(v) => doc["result"] = v,
        Err(_) => {
            doc["result"] = Value::Null;
            doc["result_json"] = Value::String(r.result_json.clone());
        }
    }
    serde_json::to_writer(&mut *out, &doc)?;
    out.write_all(b"\n")
}

/// Write the selected records of `store` to `out` in `format` (module doc).
pub fn export(
    store: &Store,
    selection: &Selection,
    format: ExportFormat,
    out: &mut dyn Write,
) -> Result<ExportSummary, ExportError> {
    let records = selection.records(store)?;
    let mut summary = ExportSummary::default();
    if format == ExportFormat::Csv {
        write!(out, "{CSV_HEADER}\r\n")?;
    }
    for r in &records {
        summary.records += 1;
        match format {
            ExportFormat::Csv => summary.rows += csv_rows(r, out)?,
            ExportFormat::Jsonl => {
                jsonl_line(r, out)?;
                summary.rows += 1;
            }
        }
    }
    out.flush()?;
    Ok(summary)
}

#[cfg(test)]
mod tests {
    use super::*;

    // RFC 4180, section 2: fields with commas, quotes or line breaks are enclosed in double
    // quotes, and a double quote inside is escaped by another double quote.
    #[test]
    fn fields_are_quoted_as_rfc_4180_says() {
        assert_eq!(csv_field("plain"), "plain");
        assert_eq!(csv_field("a,b"), "\"a,b\"");
        assert_eq!(csv_field("say \"hi\""), "\"say \"\"hi\"\"\"");
        assert_eq!(csv_field("two\r\nlines"), "\"two\r\nlines\"");
    }
}
