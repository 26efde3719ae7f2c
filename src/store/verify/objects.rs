//! The database as a whole: SQLite's integrity check, the store's own triggers with their
//! exact text, every schema object that is not the store's own, the own tables, and the
//! store's identity.

use std::collections::HashSet;

use super::{Ctx, ProblemKind};
use crate::store::schema::{foreign_objects, own_triggers};

/// SQLite's integrity check; an error only when it cannot run at all.
pub(super) fn check_database(ctx: &mut Ctx<'_>) -> rusqlite::Result<()> {
    let mut check = ctx.conn.prepare("PRAGMA integrity_check")?;
    let lines: Vec<String> = check
        .query_map([], |r| r.get(0))?
        .collect::<rusqlite::Result<_>>()?;
    drop(check);
    if lines != ["ok"] {
        for detail in lines {
            ctx.problem(None, ProblemKind::DatabaseDamaged { detail });
        }
    }
    Ok(())
}

/// The own triggers, the foreign objects and the own tables of the store's version; returns
/// the own tables that exist (the walks read only those).
pub(super) fn check_schema(ctx: &mut Ctx<'_>) -> HashSet<&'static str> {
    for (name, expected_sql) in own_triggers(ctx.version) {
        let sql: rusqlite::Result<Option<String>> = ctx
            .conn
            .query_row(
                "SELECT sql FROM sqlite_schema WHERE type = 'trigger' AND name = ?1",
                [name],
                |r| r.get(0),
            )
            .or_else(|e| match e {
                rusqlite::Error::QueryReturnedNoRows => Ok(None),
                e => Err(e),
            });
        let kind = match sql {
            Err(e) => {
                ctx.read_failed("sqlite_schema", e);
                continue;
            }
            Ok(None) => Some(ProblemKind::TriggerMissing { name }),
            Ok(Some(sql)) if normalize_sql(&sql) != normalize_sql(expected_sql) => {
                Some(ProblemKind::TriggerAltered { name })
            }
            Ok(Some(_)) => None,
        };
        if let Some(kind) = kind {
            ctx.problem(None, kind);
        }
    }
    match foreign_objects(ctx.conn, ctx.version) {
        Ok(foreign) => {
            for (object_type, name) in foreign {
                ctx.problem(None, ProblemKind::ForeignObject { object_type, name });
            }
        }
        Err(e) => ctx.read_failed("sqlite_schema", e),
    }
    let mut own: Vec<&'static str> = vec!["records"];
    if ctx.version >= 3 {
        own.extend(["safety_events", "exposures"]);
    }
    if ctx.version >= 4 {
        own.push("store_meta");
    }
    let mut present = HashSet::new();
    for table in own {
        let exists: rusqlite::Result<i64> = ctx.conn.query_row(
            "SELECT COUNT(*) FROM sqlite_schema WHERE type = 'table' AND name = ?1",
            [table],
            |r| r.get(0),
        );
        match exists {
            Ok(0) => ctx.problem(None, ProblemKind::TableMissing { table }),
            Ok(_) => {
                present.insert(table);
            }
            Err(e) => ctx.read_failed("sqlite_schema", e),
        }
    }
    present
}

/// The store's identity: exactly one `store_meta` row, `store_id`, 32 lowercase hex digits.
pub(super) fn store_id(ctx: &mut Ctx<'_>) -> Option<String> {
    let rows: rusqlite::Result<Vec<(String, String)>> = ctx
        .conn
        .prepare("SELECT CAST(name AS TEXT), CAST(value AS TEXT) FROM store_meta ORDER BY name")
        .and_then(|mut s| {
            s.query_map([], |r| Ok((r.get(0)?, r.get(1)?)))?
                .collect::<rusqlite::Result<_>>()
        });
    let rows = match rows {
        Ok(rows) => rows,
        Err(e) => {
            ctx.read_failed("store_meta", e);
            return None;
        }
    };
    let ok_id = |v: &str| {
        v.len() == 32
            && v.bytes()
                .all(|b| b.is_ascii_digit() || (b'a'..=b'f').contains(&b))
    };
    match rows.as_slice() {
        [(name, value)] if name == "store_id" && ok_id(value) => Some(value.clone()),
        _ => {
            ctx.problem(
                None,
                ProblemKind::StoreIdentity {
                    detail: format!(
                        "expected one row store_id = 32 lowercase hex digits, found {}",
                        if rows.is_empty() {
                            "none".to_string()
                        } else {
                            rows.iter()
                                .map(|(n, v)| format!("{n:?} = {v:?}"))
                                .collect::<Vec<_>>()
                                .join(", ")
                        }
                    ),
                },
            );
            rows.iter()
                .find(|(n, v)| n == "store_id" && ok_id(v))
                .map(|(_, v)| v.clone())
        }
    }
}

/// Whitespace-insensitive comparison form of a SQL statement.
fn normalize_sql(sql: &str) -> String {
    sql.split_whitespace().collect::<Vec<_>>().join(" ")
}
