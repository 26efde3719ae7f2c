//! The auditor's report: one self-contained HTML file about a store.
//!
//! At the very end of the data flow, reading what the stations recorded: [`build_report`]
//! lists the selected records ([`Selection`]), verifies the store, reads each record's
//! result JSON leniently (`load`), computes the figures (`stats`), draws the charts with
//! `plotters` as inline SVG (`plot`, `curves`) and writes the page (`sections`, `units`).
//! `tragus report` calls it and writes the file.
//!
//! The page holds, in order: the store's identity and verification (each chain's rows and
//! head hash, every problem and notice, the place for signatures and checkpoints); counts,
//! yield, first-pass yield and retest rate overall and per UTC day, plan revision and
//! station; the Pareto of failing checks; a histogram with mean, σ and Cpk per scalar
//! check; an overlay of every unit's response per response check against its limits; the
//! hearing-safety events and exposures; an index of every serial; a section or a row per
//! unit; and notes defining every figure. It needs no network, no script and no font file,
//! and prints one unit per page.
//!
//! Limit lines are not in a record: they are drawn from plan files given in
//! [`AuditOptions::limits_from`], for the records whose plan SHA-256 they match
//! (`limits`).

mod curves;
mod html;
mod limits;
mod load;
mod plot;
mod sections;
mod stats;
mod units;

use std::collections::BTreeSet;
use std::path::PathBuf;

use crate::store::{
    RecordFilter, SafetyEventFilter, Store, StoreError, StoredExposure, StoredRecord,
    StoredSafetyEvent, SCHEMA_VERSION,
};

pub use curves::MAX_OVERLAY_POINTS;
pub use html::unit_anchor;
pub use plot::PlotError;
pub use sections::MAX_SAFETY_ROWS;

/// Which records a report or an export covers. The default is every record.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct Selection {
    /// Only records measured at or after this instant (inclusive).
    pub since: Option<time::OffsetDateTime>,
    /// Only records measured before this instant (exclusive).
    pub until: Option<time::OffsetDateTime>,
    /// Only records of this plan id.
    pub plan_id: Option<String>,
    /// Only records of this station.
    pub station: Option<String>,
}

impl Selection {
    /// The selected records, oldest first (chain order).
    pub fn records(&self, store: &Store) -> Result<Vec<StoredRecord>, StoreError> {
        let mut records = store.list(&RecordFilter {
            plan_id: self.plan_id.clone(),
            since: self.since,
            until: self.until,
            ..RecordFilter::default()
        })?;
        if let Some(station) = &self.station {
            records.retain(|r| &r.station == station);
        }
        Ok(records)
    }

    /// The selection in words, for the report's subtitle.
    pub fn describe(&self) -> String {
        let fmt =
            time::macros::format_description!("[year]-[month]-[day]T[hour]:[minute]:[second]Z");
        let t = |x: &time::OffsetDateTime| x.format(&fmt).unwrap_or_else(|_| x.to_string());
        let mut parts = Vec::new();
        if let Some(s) = &self.since {
            parts.push(format!("from {}", t(s)));
        }
        if let Some(u) = &self.until {
            parts.push(format!("before {}", t(u)));
        }
        if let Some(p) = &self.plan_id {
            parts.push(format!("plan {p}"));
        }
        if let Some(s) = &self.station {
            parts.push(format!("station {s}"));
        }
        if parts.is_empty() {
            "every record".into()
        } else {
            parts.join(", ")
        }
    }

    fn contains_time(&self, t: time::OffsetDateTime) -> bool {
        self.since.is_none_or(|s| t >= s) && self.until.is_none_or(|u| t < u)
    }
}

/// How to build the report.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct AuditOptions {
    /// The records covered.
    pub selection: Selection,
    /// Plan files whose response limit lines are drawn for the records they judged (matched
    /// by SHA-256).
    pub limits_from: Vec<PathBuf>,
    /// Most units with a detailed section (charts, check tables, provenance); the others
    /// get a row each.
    pub detail_limit: usize,
    /// Most units whose curves are drawn one by one in a response overlay.
    pub overlay_limit: usize,
}

impl Default for AuditOptions {
    fn default() -> Self {
        AuditOptions {
            selection: Selection::default(),
            limits_from: Vec::new(),
            detail_limit: DEFAULT_DETAIL_LIMIT,
            overlay_limit: DEFAULT_OVERLAY_LIMIT,
        }
    }
}

/// Default [`AuditOptions::detail_limit`]: with 10 000 units the report stays near 10 MB.
pub const DEFAULT_DETAIL_LIMIT: usize = 250;
/// Default [`AuditOptions::overlay_limit`].
pub const DEFAULT_OVERLAY_LIMIT: usize = 300;

/// Why no report could be built.
#[derive(Debug, thiserror::Error)]
pub enum AuditError {
    /// The store could not be read or verified.
    #[error(transparent)]
    Store(#[from] StoreError),
    /// A plan file given for limit lines could not be loaded.
    #[error("{path}: cannot take limit lines from this plan:\n{message}", path = .path.display())]
    Plan {
        /// The plan file.
        path: PathBuf,
        /// Every problem, one per line.
        message: String,
    },
    /// A chart could not be drawn.
    #[error(transparent)]
    Plot(#[from] PlotError),
}

/// The figures of a built report, for the command line to print.
#[derive(Debug, Clone, PartialEq)]
pub struct AuditSummary {
    /// Records in the report.
    pub n_records: u64,
    /// Units (serials) in the report.
    pub n_units: u64,
    /// Units passing on their latest record.
    pub n_pass: u64,
    /// `n_pass / n_units`, `None` without units.
    pub yield_fraction: Option<f64>,
    /// Units with a detailed section.
    pub n_detailed: usize,
    /// Response overlays drawn.
    pub n_overlays: usize,
    /// Whether verification found the store intact.
    pub intact: bool,
    /// Problems verification found.
    pub n_problems: usize,
}

/// A built report.
#[derive(Debug, Clone)]
pub struct AuditReport {
    /// The page.
    pub html: String,
    /// Its figures.
    pub summary: AuditSummary,
}

/// The safety events of the selection (the store filters the time window; station and plan
/// are filtered here).
fn events_of(store: &Store, sel: &Selection) -> Result<Vec<StoredSafetyEvent>, StoreError> {
    let mut events = store.safety_events(&SafetyEventFilter {
        since: sel.since,
        until: sel.until,
        ..SafetyEventFilter::default()
    })?;
    events.retain(|e| {
        sel.station.as_ref().is_none_or(|s| &e.station == s)
            && sel.plan_id.as_ref().is_none_or(|p| &e.plan_id == p)
    });
    Ok(events)
}

/// The exposures of the selection. The store lists exposures per operator, so this asks
/// for every operator named by a selected record or event.
fn exposures_of(
    store: &Store,
    sel: &Selection,
    operators: BTreeSet<&str>,
) -> Result<Vec<StoredExposure>, StoreError> {
    let mut out = Vec::new();
    for op in operators {
        for x in store.exposure_rows(op)? {
            let start = time::OffsetDateTime::from_unix_timestamp(x.start_unix_s).ok();
            let keep = start.is_some_and(|t| sel.contains_time(t))
                && sel.station.as_ref().is_none_or(|s| &x.station == s)
                && sel.plan_id.as_ref().is_none_or(|p| &x.plan_id == p);
            if keep {
                out.push(x);
            }
        }
    }
    out.sort_by_key(|x| x.id);
    Ok(out)
}

/// Build the report of `store` (module doc).
pub fn build_report(store: &Store, options: &AuditOptions) -> Result<AuditReport, AuditError> {
    let book = limits::LimitBook::load(&options.limits_from).map_err(|e| AuditError::Plan {
        path: e.path,
        message: e.message,
    })?;
    let verify = store.verify()?;
    let selection = &options.selection;
    let records = load::views(selection.records(store)?);
    let events = events_of(store, selection)?;
    let operators: BTreeSet<&str> = records
        .iter()
        .map(|r| r.record.operator.as_str())
        .chain(events.iter().map(|e| e.operator.as_str()))
        .collect();
    let exposures = exposures_of(store, selection, operators)?;

    // First-pass yield counts each unit's first test ever, store-wide (stats module doc).
    let first = stats::FirstTests::of_store(store)?;
    let total = stats::Tally::of(&records, &first);
    let units = units::units_of(&records);
    let detailed = units::choose_detailed(&units, options.detail_limit);
    let n_detailed = detailed.iter().filter(|d| **d).count();
    let n_needing = units.iter().filter(|u| u.needs_a_look()).count();
    let detail_note = format!(
        "{n_detailed} of {} units have a detailed section (charts at full detail, check tables, provenance): \
         units with a record not passing or with more than one record first ({n_needing} here), then passing units, \
         by serial, up to {} (--detail-limit). Every other unit has a row in the table of other units. \
         Every serial is in the index and has its anchor.",
        units.len(),
        options.detail_limit
    );

    let mut out = String::with_capacity(64 * 1024 + records.len() * 600);
    let dir = store.dir().display().to_string();
    html::open_page(
        &mut out,
        &format!("Audit report · {dir}"),
        &format!(
            "Generated {} by tragus {} · records: {} · limit lines from {} plan file(s)",
            html::escape(&crate::result::now_utc_rfc3339()),
            html::escape(crate::VERSION),
            html::escape(&selection.describe()),
            book.plans.len()
        ),
    );
    out.push_str(
        "<nav class=\"toc\"><a href=\"#store\">store</a><a href=\"#yield\">yield</a>\
         <a href=\"#pareto\">failing checks</a><a href=\"#scalars\">scalar checks</a>\
         <a href=\"#responses\">responses</a><a href=\"#safety\">hearing safety</a>\
         <a href=\"#units-index\">units by serial</a><a href=\"#units\">units</a>\
         <a href=\"#notes\">notes</a></nav>\n<main>\n",
    );
    let db_file = store.db_path().display().to_string();
    sections::store_section(
        &mut out,
        &sections::StoreFacts {
            dir: &dir,
            db_file: &db_file,
            schema: SCHEMA_VERSION,
            n_selected: records.len(),
            n_units: total.units,
        },
        &verify,
    );
    let plan_shas = |key: &str| -> String {
        let shas: BTreeSet<&str> = records
            .iter()
            .filter(|r| format!("{} r{}", r.record.plan_id, r.record.plan_revision) == key)
            .map(|r| r.record.plan_sha256.as_str())
            .collect();
        let mut s: Vec<String> = shas
            .iter()
            .map(|h| {
                format!(
                    "<code>{}…</code>",
                    html::escape(&h.chars().take(12).collect::<String>())
                )
            })
            .collect();
        if shas.len() > 1 {
            s.push("<b>several SHA-256 under one revision</b>".into());
        }
        s.join(" ")
    };
    let groups = [
        sections::Groups {
            id: "by-day",
            title: "By day (UTC)",
            key_title: "day",
            rows: with_blank(stats::tally_by(&records, &first, stats::day_of)),
            extra_title: None,
        },
        sections::Groups {
            id: "by-plan",
            title: "By plan revision",
            key_title: "plan",
            rows: stats::tally_by(&records, &first, |r| {
                format!("{} r{}", r.record.plan_id, r.record.plan_revision)
            })
            .into_iter()
            .map(|(k, t)| {
                let shas = plan_shas(&k);
                (k, t, shas)
            })
            .collect(),
            extra_title: Some("plan SHA-256"),
        },
        sections::Groups {
            id: "by-station",
            title: "By station",
            key_title: "station",
            rows: with_blank(stats::tally_by(&records, &first, |r| {
                r.record.station.clone()
            })),
            extra_title: None,
        },
    ];
    sections::yield_section(&mut out, &total, &groups);
    sections::pareto_section(&mut out, &stats::pareto(&records))?;
    sections::scalar_section(&mut out, &stats::scalars(&records))?;
    let overlays = curves::overlays(&records, &book, options.overlay_limit)?;
    let plan_files: Vec<(String, String, u32, String, usize)> = book
        .files()
        .into_iter()
        .map(|(path, id, rev, sha)| {
            let n = records
                .iter()
                .filter(|r| r.record.plan_sha256 == sha)
                .count();
            (
                path.display().to_string(),
                id.to_owned(),
                rev,
                sha.to_owned(),
                n,
            )
        })
        .collect();
    sections::response_section(&mut out, &overlays, options.overlay_limit, &plan_files);
    let serials: BTreeSet<&str> = units.iter().map(|u| u.serial).collect();
    sections::safety_section(&mut out, &events, &exposures, &|s| serials.contains(s));
    units::index_section(&mut out, &units);
    units::units_section(&mut out, &units, &detailed, &book, &detail_note)?;
    sections::notes_section(&mut out, &detail_note);
    html::close_page(&mut out);

    Ok(AuditReport {
        html: out,
        summary: AuditSummary {
            n_records: total.records,
            n_units: total.units,
            n_pass: total.pass,
            yield_fraction: total.yield_fraction(),
            n_detailed,
            n_overlays: overlays.len(),
            intact: verify.is_intact(),
            n_problems: verify.problems.len(),
        },
    })
}

fn with_blank(rows: Vec<(String, stats::Tally)>) -> Vec<(String, stats::Tally, String)> {
    rows.into_iter()
        .map(|(k, t)| (k, t, String::new()))
        .collect()
}
