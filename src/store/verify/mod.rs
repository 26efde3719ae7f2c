//! Verification: a pure, complete reader of a store. It recomputes every hash of the three
//! chains, walks each chain, checks every signature against a keyring and every checkpoint,
//! looks at every schema object, rehashes every capture and archived input, and lists each
//! problem with the record or row it concerns, going on after each one.
//!
//! It reads the raw column values, not [`StoredRecord`](super::StoredRecord)s, because a
//! tampered database may hold values no record can have (a verdict "maybe", text where a
//! number belongs); those are reported, not raised as errors. It reads a store of any schema
//! version as it is (only the tables and columns of that version) and never writes: the
//! database is opened read-only ([`super::read_only::open_read_only`]), files are looked at
//! without following links and read only when regular and of bounded size.

mod chains;
mod files;
mod objects;
mod problem;
mod records;
mod report;

use std::collections::{BTreeMap, HashSet};
use std::path::Path;

use rusqlite::types::ValueRef;
use rusqlite::Connection;

pub use problem::{ChainTable, CheckpointProblem, FileProblem, Problem, ProblemKind, RowProblem};
pub use report::{CheckpointOutcome, Notice, SignatureCount, SignatureCounts, VerifyReport};

use super::checkpoint::Checkpoint;
use super::error::StoreError;
use super::hash::GENESIS_PREV_HASH;
use super::schema::{sqlite_err, SCHEMA_VERSION};
use crate::keys::Keyring;

/// What to check besides the chains, files and schema.
#[derive(Debug, Clone, Default)]
pub struct VerifyOptions<'a> {
    /// The auditor's keyring. With it, every row must carry a valid signature of a key of
    /// its station, valid at its time; without it, signatures are only counted.
    pub keyring: Option<&'a Keyring>,
    /// Checkpoints the store must still match (each checked against the keyring, which
    /// they then require).
    pub checkpoints: Vec<Checkpoint>,
}

/// Where the store's files are.
pub(crate) struct StorePaths<'a> {
    pub capture_dir: &'a Path,
    pub archive_dir: &'a Path,
}

/// What one walk of a chain leaves for the checkpoint check.
#[derive(Debug, Default)]
pub(super) struct Trace {
    /// Row id → stored hash (`None` when unreadable), every row read.
    pub hashes: BTreeMap<i64, Option<String>>,
    /// The lowest id of a row with a problem of the chain itself (hash, link, ids, fields).
    pub first_problem: Option<i64>,
    /// Rows read.
    pub count: u64,
    /// Stored hash of the last row (genesis for none; empty when unreadable).
    pub head: String,
    /// Signed and unsigned rows.
    pub signatures: SignatureCount,
}

impl Trace {
    fn new() -> Trace {
        Trace {
            head: GENESIS_PREV_HASH.to_owned(),
            ..Trace::default()
        }
    }

    fn flag(&mut self, id: i64) {
        self.first_problem = Some(self.first_problem.map_or(id, |f| f.min(id)));
    }
}

/// Shared state of one verification.
pub(super) struct Ctx<'a> {
    pub conn: &'a Connection,
    pub version: i64,
    pub paths: StorePaths<'a>,
    pub keyring: Option<&'a Keyring>,
    pub problems: Vec<Problem>,
    pub notices: Vec<Notice>,
}

impl Ctx<'_> {
    pub(super) fn problem(&mut self, record_id: Option<i64>, kind: ProblemKind) {
        self.problems.push(Problem { record_id, kind });
    }

    /// A table could not be read to the end: reported, and verification goes on.
    pub(super) fn read_failed(&mut self, table: &str, e: rusqlite::Error) {
        self.problem(
            None,
            ProblemKind::DatabaseDamaged {
                detail: format!("reading {table}: {e}"),
            },
        );
    }
}

/// Verify the database behind `conn`, of schema `version`, and the files in `paths`.
///
/// An error only when the verification itself cannot start (no read transaction, no
/// integrity check); everything found is in the report.
pub(crate) fn verify_db(
    conn: &Connection,
    db_path: &Path,
    version: i64,
    paths: StorePaths<'_>,
    options: &VerifyOptions<'_>,
) -> Result<VerifyReport, StoreError> {
    let err = |e| sqlite_err(db_path, e);
    // One read transaction: the walk sees one consistent snapshot even while another
    // process appends. (An append in flight has its capture on disk before its record is
    // committed, so it may show as an orphan notice; never as a problem.)
    let tx = conn.unchecked_transaction().map_err(err)?;
    let mut ctx = Ctx {
        conn,
        version,
        paths,
        keyring: options.keyring,
        problems: Vec::new(),
        notices: Vec::new(),
    };
    if version < SCHEMA_VERSION {
        ctx.notices.push(Notice::OlderSchema {
            found: version,
            current: SCHEMA_VERSION,
        });
    }
    objects::check_database(&mut ctx).map_err(err)?;
    let tables = objects::check_schema(&mut ctx);
    let store_id = if version >= 4 && tables.contains("store_meta") {
        objects::store_id(&mut ctx)
    } else {
        None
    };

    let mut referenced = files::Referenced::default();
    let (records, n_captures, n_archived) = if tables.contains("records") {
        records::walk(&mut ctx, &mut referenced)
    } else {
        (Trace::new(), 0, 0)
    };
    let record_ids: HashSet<i64> = records.hashes.keys().copied().collect();
    files::scan_dirs(&mut ctx, &referenced);
    let chain = |ctx: &mut Ctx<'_>, spec: &chains::ChainSpec| {
        if ctx.version >= 3 && tables.contains(spec.table.name()) {
            chains::walk(ctx, spec, &record_ids)
        } else {
            Trace::new()
        }
    };
    let safety = chain(&mut ctx, &chains::SAFETY_EVENTS_SPEC);
    let exposures = chain(&mut ctx, &chains::EXPOSURES_SPEC);
    tx.finish().map_err(err)?;

    let signatures = SignatureCounts {
        records: records.signatures,
        safety_events: safety.signatures,
        exposures: exposures.signatures,
    };
    let n_signed =
        signatures.records.signed + signatures.safety_events.signed + signatures.exposures.signed;
    if options.keyring.is_none() && n_signed > 0 {
        ctx.notices
            .push(Notice::SignaturesNotChecked { signed: n_signed });
    }
    let traces = [
        ("records", &records),
        ("safety_events", &safety),
        ("exposures", &exposures),
    ];
    let mut outcomes = Vec::with_capacity(options.checkpoints.len());
    for c in &options.checkpoints {
        outcomes.push(check_checkpoint(&mut ctx, c, store_id.as_deref(), &traces));
    }

    Ok(VerifyReport {
        n_records: records.count,
        head_hash: records.head,
        n_captures_checked: n_captures,
        problems: ctx.problems,
        notices: ctx.notices,
        n_safety_events: safety.count,
        safety_events_head_hash: safety.head,
        n_exposures: exposures.count,
        exposures_head_hash: exposures.head,
        schema_version: version,
        store_id,
        n_archived_checked: n_archived,
        signatures,
        signatures_checked: options.keyring.is_some(),
        checkpoints: outcomes,
    })
}

/// Check one checkpoint against the chains as walked; every mismatch is a problem naming
/// the first row concerned.
fn check_checkpoint(
    ctx: &mut Ctx<'_>,
    c: &Checkpoint,
    store_id: Option<&str>,
    traces: &[(&'static str, &Trace); 3],
) -> CheckpointOutcome {
    let mut outcome = CheckpointOutcome {
        source: c.source.clone(),
        time_utc: c.time_utc.clone(),
        counts: [
            c.chains.records.count,
            c.chains.safety_events.count,
            c.chains.exposures.count,
        ],
        matched: false,
    };
    let report = |ctx: &mut Ctx<'_>, record_id: Option<i64>, problem| {
        ctx.problem(
            record_id,
            ProblemKind::Checkpoint {
                source: c.source.clone(),
                problem,
            },
        )
    };
    let Some(keyring) = ctx.keyring else {
        report(ctx, None, CheckpointProblem::NoKeyring);
        return outcome;
    };
    if let Err(p) = c.check_signature(keyring) {
        report(ctx, None, CheckpointProblem::Signature(p));
        return outcome;
    }
    if store_id != Some(c.store_id.as_str()) {
        report(
            ctx,
            None,
            CheckpointProblem::OtherStore {
                checkpoint: c.store_id.clone(),
                store: store_id.map(str::to_owned),
            },
        );
        return outcome;
    }
    let mut matched = true;
    for ((table, head), (_, trace)) in c.chains.by_table().into_iter().zip(traces) {
        if head.count == 0 {
            continue;
        }
        // Within i64 (checked when the checkpoint was read).
        let count = head.count as i64;
        let on_records = |id: i64| (table == "records").then_some(id);
        let found = trace.hashes.range(..=count).count() as u64;
        if found < head.count {
            let first_missing = (1..=count)
                .find(|id| !trace.hashes.contains_key(id))
                .unwrap_or(count);
            report(
                ctx,
                on_records(first_missing),
                CheckpointProblem::RowsRemoved {
                    table,
                    count: head.count,
                    found,
                    first_missing,
                },
            );
            matched = false;
            continue;
        }
        let stored = trace.hashes.get(&count).cloned().flatten();
        if stored.as_deref() != Some(head.head_hash.as_str()) {
            report(
                ctx,
                on_records(count),
                CheckpointProblem::HeadMismatch {
                    table,
                    count: head.count,
                    expected: head.head_hash.clone(),
                    found: stored.unwrap_or_else(|| "(unreadable)".into()),
                },
            );
            matched = false;
            continue;
        }
        if let Some(first) = trace.first_problem.filter(|&f| f <= count) {
            report(
                ctx,
                on_records(first),
                CheckpointProblem::ChainBroken {
                    table,
                    count: head.count,
                    first,
                },
            );
            matched = false;
        }
    }
    outcome.matched = matched;
    outcome
}

/// A nullable text column as stored: `Ok(None)` for NULL, an error text for another type.
pub(super) fn opt_text(v: ValueRef<'_>) -> Result<Option<String>, String> {
    match v {
        ValueRef::Null => Ok(None),
        ValueRef::Text(b) => std::str::from_utf8(b)
            .map(|s| Some(s.to_owned()))
            .map_err(|_| "text is not valid UTF-8".into()),
        other => Err(format!(
            "expected text or NULL, found {}",
            other.data_type()
        )),
    }
}

/// A nullable blob column as stored.
pub(super) fn opt_blob(v: ValueRef<'_>) -> Result<Option<Vec<u8>>, String> {
    match v {
        ValueRef::Null => Ok(None),
        ValueRef::Blob(b) => Ok(Some(b.to_vec())),
        other => Err(format!(
            "expected a blob or NULL, found {}",
            other.data_type()
        )),
    }
}

/// The `SELECT` list for `wanted` columns of a table that has `present` ones: a missing
/// column is read as NULL (and has been reported as missing).
pub(super) fn select_list(wanted: &[&str], present: &[String]) -> String {
    wanted
        .iter()
        .map(|c| {
            if present.iter().any(|p| p == c) {
                (*c).to_string()
            } else {
                format!("NULL AS {c}")
            }
        })
        .collect::<Vec<_>>()
        .join(", ")
}

/// Report every `wanted` column `table` lacks; returns them.
pub(super) fn missing_columns(
    ctx: &mut Ctx<'_>,
    table: &'static str,
    wanted: &[&'static str],
    present: &[String],
) -> Vec<&'static str> {
    let missing: Vec<&'static str> = wanted
        .iter()
        .copied()
        .filter(|c| !present.iter().any(|p| p == c))
        .collect();
    for &column in &missing {
        ctx.problem(None, ProblemKind::ColumnMissing { table, column });
    }
    missing
}
