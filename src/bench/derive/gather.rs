//! The chosen records' measurements, re-analysed from their captures.
//!
//! A stored result holds each channel's unsmoothed response and distortion curves, but not
//! the fine spectrum that a check's fractional-octave smoothing is computed from (it is not
//! serialised). So every chosen record is judged again from its raw capture with its
//! archived plan, station file and recorded gains ([`crate::bench::reanalyze`]), which
//! gives the measurements whole, exactly as the bench had them. A record whose re-analysis
//! does not reproduce its stored verdict and margins is refused: limits must rest on the
//! numbers the record shows. Records are re-analysed in parallel (rayon), each worker with
//! its own handle on the store.

use super::super::reanalyze::reanalyze;
use super::super::BenchError;
use crate::analysis::ChannelMeasurement;
use crate::plan::Plan;
use crate::store::{Store, StoredRecord};
use crate::Verdict;
use rayon::prelude::*;
use std::path::Path;

/// One unit of a set, measured.
#[derive(Debug, Clone)]
pub struct MeasuredUnit {
    /// Serial number.
    pub serial: String,
    /// The record it comes from.
    pub record_id: i64,
    /// When it was measured, UTC.
    pub time_utc: String,
    /// The verdict stored with the record.
    pub stored_verdict: Verdict,
    /// Its channels' measurements, in plan channel order.
    pub channels: Vec<ChannelMeasurement>,
}

impl MeasuredUnit {
    /// The measurement of channel `name`.
    pub fn channel(&self, name: &str) -> Option<&ChannelMeasurement> {
        self.channels.iter().find(|m| m.name == name)
    }
}

/// Re-analyse `records` of the store in `store_dir` (module doc) and check that each has a
/// valid measurement of every channel of `plan` on the grid `grid_hz`.
pub fn measure(
    store_dir: &Path,
    records: &[StoredRecord],
    plan: &Plan,
    grid_hz: &[f64],
) -> Result<Vec<MeasuredUnit>, BenchError> {
    records
        .par_iter()
        .map_init(
            || Store::open(store_dir),
            |store, record| {
                let store = store
                    .as_ref()
                    .map_err(|e| BenchError::bad_input(format!("{}: {e}", store_dir.display())))?;
                measure_one(store, record, plan, grid_hz)
            },
        )
        .collect()
}

fn measure_one(
    store: &Store,
    record: &StoredRecord,
    plan: &Plan,
    grid_hz: &[f64],
) -> Result<MeasuredUnit, BenchError> {
    let who = format!("record #{} ({})", record.id, record.serial);
    let re = reanalyze(store, record).map_err(|e| BenchError::bad_input(format!("{who}: {e}")))?;
    if !re.judged {
        return Err(BenchError::bad_input(format!(
            "{who}: its sweep was abandoned; nothing was measured"
        )));
    }
    if !re.comparison.reproduced() {
        return Err(BenchError::bad_input(format!(
            "{who}: re-analysed from the archive, it does not reproduce its stored result ({}); \
             limits cannot rest on it (check the store with tragus verify)",
            re.comparison.differences.join("; ")
        )));
    }
    let mut channels = Vec::new();
    for c in &plan.channels {
        let m = re
            .result
            .channels
            .iter()
            .find(|m| m.name == c.name)
            .ok_or_else(|| {
                BenchError::bad_input(format!(
                    "{who}: expected a measurement of channel {} (a channel of {}), found none",
                    c.name, plan.id
                ))
            })?;
        if !m.is_valid() {
            return Err(BenchError::bad_input(format!(
                "{who}: channel {} was not validly measured",
                c.name
            )));
        }
        if m.frequencies_hz != grid_hz {
            return Err(BenchError::bad_input(format!(
                "{who}: measured on another frequency grid ({} points, {:.1}–{:.1} Hz) than \
                 {} analyses ({} points): its plan revision {} had another stimulus or \
                 analysis; derive from records of this plan's stimulus",
                m.frequencies_hz.len(),
                m.frequencies_hz.first().copied().unwrap_or(0.0),
                m.frequencies_hz.last().copied().unwrap_or(0.0),
                plan.source.display(),
                grid_hz.len(),
                record.plan_revision
            )));
        }
        channels.push(m.clone());
    }
    Ok(MeasuredUnit {
        serial: record.serial.clone(),
        record_id: record.id,
        time_utc: record.time_utc.clone(),
        stored_verdict: record.verdict,
        channels,
    })
}
