//! The safety-event and exposure chains (schema 3): every row's hash, link, id and field
//! form, that the record it names exists, and its signature (schema 4).

use std::collections::{HashMap, HashSet};

use rusqlite::types::ValueRef;

use super::{
    missing_columns, opt_blob, opt_text, select_list, ChainTable, Ctx, ProblemKind, RowProblem,
    Trace,
};
use crate::store::hash::{
    chain_row_bytes, real_text, sha256_hex, EXPOSURE_FIELDS, EXPOSURE_HEADER, GENESIS_PREV_HASH,
    SAFETY_EVENT_FIELDS, SAFETY_EVENT_HEADER,
};
use crate::store::record::{parse_time_utc, unix_ns};
use crate::store::safety::SafetyKind;
use crate::store::schema::table_columns;

/// SQLite type a column of a [`ChainTable`] must hold.
#[derive(Clone, Copy, PartialEq, Eq)]
pub(super) enum ColumnType {
    Text,
    OptText,
    Int,
    OptInt,
    Real,
}

/// How to verify one chain: its table, header, and every column read with its type. The
/// hashed columns are the header's field list, in canonical order; `row_hash` and
/// `time_unix_ns` are read but not hashed.
pub(super) struct ChainSpec {
    pub table: ChainTable,
    header: &'static [u8],
    hashed: &'static [&'static str],
    columns: &'static [(&'static str, ColumnType)],
}

pub(super) const SAFETY_EVENTS_SPEC: ChainSpec = ChainSpec {
    table: ChainTable::SafetyEvents,
    header: SAFETY_EVENT_HEADER,
    hashed: &SAFETY_EVENT_FIELDS,
    columns: &[
        ("id", ColumnType::Int),
        ("time_utc", ColumnType::Text),
        ("time_unix_ns", ColumnType::Int),
        ("station", ColumnType::Text),
        ("operator", ColumnType::Text),
        ("serial", ColumnType::OptText),
        ("plan_id", ColumnType::Text),
        ("plan_sha256", ColumnType::OptText),
        ("kind", ColumnType::Text),
        ("message", ColumnType::Text),
        ("detail_json", ColumnType::Text),
        ("record_id", ColumnType::OptInt),
        ("prev_hash", ColumnType::Text),
        ("row_hash", ColumnType::Text),
    ],
};

pub(super) const EXPOSURES_SPEC: ChainSpec = ChainSpec {
    table: ChainTable::Exposures,
    header: EXPOSURE_HEADER,
    hashed: &EXPOSURE_FIELDS,
    columns: &[
        ("id", ColumnType::Int),
        ("operator", ColumnType::Text),
        ("station", ColumnType::Text),
        ("start_unix_s", ColumnType::Int),
        ("level_dba", ColumnType::Real),
        ("duration_s", ColumnType::Real),
        ("serial", ColumnType::Text),
        ("plan_id", ColumnType::Text),
        ("record_id", ColumnType::OptInt),
        ("prev_hash", ColumnType::Text),
        ("row_hash", ColumnType::Text),
    ],
};

/// One column's value in its canonical text (module doc of the store), or what is wrong.
fn canonical_text(value: ValueRef<'_>, ty: ColumnType) -> Result<String, String> {
    match (ty, value) {
        (ColumnType::OptText | ColumnType::OptInt, ValueRef::Null) => Ok(String::new()),
        (ColumnType::Text | ColumnType::OptText, ValueRef::Text(bytes)) => {
            match std::str::from_utf8(bytes) {
                Ok(s) if ty == ColumnType::OptText && s.is_empty() => {
                    Err("expected NULL or non-empty text, found empty text".into())
                }
                Ok(s) => Ok(s.to_owned()),
                Err(_) => Err("text is not valid UTF-8".into()),
            }
        }
        (ColumnType::Int | ColumnType::OptInt, ValueRef::Integer(v)) => Ok(v.to_string()),
        (ColumnType::Real, ValueRef::Real(x)) if x.is_finite() => Ok(real_text(x)),
        (ColumnType::Real, ValueRef::Real(x)) => {
            Err(format!("expected a finite number, found {x}"))
        }
        (_, other) => Err(format!(
            "expected {}, found {}",
            match ty {
                ColumnType::Text => "text",
                ColumnType::OptText => "text or NULL",
                ColumnType::Int => "an integer",
                ColumnType::OptInt => "an integer or NULL",
                ColumnType::Real => "a real number",
            },
            other.data_type()
        )),
    }
}

/// Walk one chain: recompute every row hash, check links, ids, field forms, the record each
/// row names and, with a keyring, each signature.
pub(super) fn walk(ctx: &mut Ctx<'_>, spec: &ChainSpec, record_ids: &HashSet<i64>) -> Trace {
    let mut trace = Trace::new();
    let table = spec.table.name();
    let present = match table_columns(ctx.conn, table) {
        Ok(p) => p,
        Err(e) => {
            ctx.read_failed(table, e);
            return trace;
        }
    };
    let mut wanted: Vec<&'static str> = spec.columns.iter().map(|(n, _)| *n).collect();
    if ctx.version >= 4 {
        wanted.extend(["key_id", "signature"]);
    }
    let missing = missing_columns(ctx, table, &wanted, &present);
    if missing.contains(&"id") {
        return trace;
    }
    let sql = format!(
        "SELECT {} FROM {table} ORDER BY id",
        select_list(&wanted, &present)
    );
    let result = (|| -> rusqlite::Result<()> {
        let mut stmt = ctx.conn.prepare(&sql)?;
        let mut rows = stmt.query([])?;
        let mut prev_id = 0i64;
        let mut expected_prev: Option<String> = Some(GENESIS_PREV_HASH.to_owned());
        while let Some(row) = rows.next()? {
            trace.count += 1;
            // The id is the primary key (an alias of the rowid), so always an integer.
            let id: i64 = row.get(0)?;
            let mut problems: Vec<RowProblem> = Vec::new();
            let mut text: HashMap<&'static str, String> = HashMap::new();
            for (i, &(column, ty)) in spec.columns.iter().enumerate() {
                if missing.contains(&column) {
                    continue;
                }
                match canonical_text(row.get_ref(i)?, ty) {
                    Ok(t) => {
                        text.insert(column, t);
                    }
                    Err(detail) => problems.push(RowProblem::FieldDamaged { column, detail }),
                }
            }
            let n = spec.columns.len();
            let (mut key_id, mut signature) = (None, None);
            if ctx.version >= 4 {
                if !missing.contains(&"key_id") {
                    match opt_text(row.get_ref(n)?) {
                        Ok(v) => key_id = v,
                        Err(detail) => problems.push(RowProblem::FieldDamaged {
                            column: "key_id",
                            detail,
                        }),
                    }
                }
                if !missing.contains(&"signature") {
                    match opt_blob(row.get_ref(n + 1)?) {
                        Ok(v) => signature = v,
                        Err(detail) => problems.push(RowProblem::FieldDamaged {
                            column: "signature",
                            detail,
                        }),
                    }
                }
            }
            check_row(spec, id, prev_id, &expected_prev, &text, &mut problems);
            if !problems.is_empty() {
                trace.flag(id);
            }
            if let Some(Ok(record_id)) = text
                .get("record_id")
                .filter(|r| !r.is_empty())
                .map(|r| r.parse::<i64>())
            {
                if !record_ids.contains(&record_id) {
                    problems.push(RowProblem::RecordMissing { record_id });
                }
            }
            if key_id.is_some() && signature.is_some() {
                trace.signatures.signed += 1;
            } else {
                trace.signatures.unsigned += 1;
            }
            if let Some(p) = check_signature(ctx, spec, &text, key_id, signature) {
                problems.push(p);
            }
            for problem in problems {
                ctx.problem(
                    None,
                    ProblemKind::ChainRow {
                        table: spec.table,
                        id,
                        problem,
                    },
                );
            }
            prev_id = id;
            expected_prev = text.get("row_hash").cloned();
            trace.hashes.insert(id, expected_prev.clone());
        }
        trace.head = expected_prev.unwrap_or_default();
        Ok(())
    })();
    if let Err(e) = result {
        ctx.read_failed(table, e);
    }
    trace
}

/// The checks of the chain itself on one row (ids, link, hash, field forms).
fn check_row(
    spec: &ChainSpec,
    id: i64,
    prev_id: i64,
    expected_prev: &Option<String>,
    text: &HashMap<&'static str, String>,
    problems: &mut Vec<RowProblem>,
) {
    if id != prev_id + 1 {
        problems.push(RowProblem::RowsMissing {
            first: prev_id + 1,
            last: id - 1,
        });
    }
    if let (Some(expected), Some(found)) = (expected_prev, text.get("prev_hash")) {
        if expected != found {
            problems.push(RowProblem::ChainBroken {
                expected: expected.clone(),
                found: found.clone(),
            });
        }
    }
    let fields: Option<Vec<(&str, &str)>> = spec
        .hashed
        .iter()
        .map(|&c| text.get(c).map(|v| (c, v.as_str())))
        .collect();
    if let (Some(fields), Some(stored)) = (fields, text.get("row_hash")) {
        let computed = sha256_hex(&chain_row_bytes(spec.header, &fields));
        if &computed != stored {
            problems.push(RowProblem::HashMismatch {
                stored: stored.clone(),
                computed,
            });
        }
    }
    if let Some(k) = text.get("kind") {
        if SafetyKind::from_word(k).is_none() {
            problems.push(RowProblem::FieldDamaged {
                column: "kind",
                detail: format!("expected a safety event kind, found {k:?}"),
            });
        }
    }
    if let Some(d) = text.get("duration_s") {
        if d.starts_with('-') {
            problems.push(RowProblem::FieldDamaged {
                column: "duration_s",
                detail: format!("expected 0 s or more, found {d} s"),
            });
        }
    }
    if let (Some(t), Some(ns)) = (text.get("time_utc"), text.get("time_unix_ns")) {
        match parse_time_utc(t).and_then(unix_ns) {
            Some(parsed) if parsed.to_string() == *ns => {}
            Some(_) => problems.push(RowProblem::TimeIndexMismatch),
            None => problems.push(RowProblem::FieldDamaged {
                column: "time_utc",
                detail: format!("expected a UTC time, found {t:?}"),
            }),
        }
    }
}

/// With a keyring, check the row's signature: its station's key, valid at its time (an
/// event's `time_utc`, an exposure's start), over its stored hash.
fn check_signature(
    ctx: &Ctx<'_>,
    spec: &ChainSpec,
    text: &HashMap<&'static str, String>,
    key_id: Option<String>,
    signature: Option<Vec<u8>>,
) -> Option<RowProblem> {
    let keyring = ctx.keyring?;
    let at = match spec.table {
        ChainTable::SafetyEvents => parse_time_utc(text.get("time_utc")?)?,
        ChainTable::Exposures => {
            let s: i64 = text.get("start_unix_s")?.parse().ok()?;
            time::OffsetDateTime::from_unix_timestamp(s).ok()?
        }
    };
    let message = crate::keys::signature_message(spec.table.name(), text.get("row_hash")?);
    keyring
        .check(
            key_id.as_deref(),
            signature.as_deref(),
            text.get("station")?,
            at,
            &message,
        )
        .err()
        .map(RowProblem::Signature)
}
