//! What the bench writes to the store: a unit's record with its capture, its safety events
//! and listening exposures, and a plan's hearing-safety refusal.

use super::{BenchError, Tested, UnitOutcome};
use crate::safety::event::SafetyEvent;
use crate::safety::setup::SafetyRefusal;
use crate::store::{NewExposure, NewSafetyEvent, NewUnit, Store};
use std::path::Path;

/// Record a plan refusal in the store (created if needed): the refusal belongs to the
/// station's safety history even though no unit was tested. A store that cannot take it is
/// logged and does not change the refusal.
pub(super) fn record_refusal(
    store: &Path,
    station: &str,
    operator: &str,
    plan: &crate::plan::Plan,
    refusal: &SafetyRefusal,
) {
    let e = refusal.event();
    let event = NewSafetyEvent {
        time_utc: crate::result::now_utc_rfc3339(),
        station: station.to_string(),
        operator: operator.to_string(),
        serial: None,
        plan_id: plan.id.clone(),
        plan_sha256: Some(plan.sha256.clone()),
        kind: e.kind,
        message: e.message,
        detail_json: e.detail_json,
        record_id: None,
    };
    if let Err(e) = Store::open(store).and_then(|mut s| s.append_safety_event(&event)) {
        tracing::warn!("{}: the refusal was not recorded: {e}", store.display());
    }
}

/// Append a unit: its record, raw capture, archived inputs, safety events (the record
/// already holds them in its result; these rows let an auditor list every safety event of a
/// station at once) and listening exposures with their events, all in one transaction: a
/// crash leaves all of them or none. The station key, when the station has one, signs
/// every row.
pub(super) fn record_unit(
    store_dir: &Path,
    operator: &str,
    inputs: &super::archive::Inputs,
    signer: Option<&crate::keys::StationKey>,
    outcome: UnitOutcome,
) -> Result<Tested, BenchError> {
    let UnitOutcome {
        result,
        record,
        capture_wav,
        events,
        heard,
    } = outcome;
    let not_recorded = |source| BenchError::NotRecorded {
        store: store_dir.to_path_buf(),
        source,
    };
    let station = result
        .station
        .as_ref()
        .map_or_else(String::new, |st| st.id.clone());
    let row = |e: &SafetyEvent| NewSafetyEvent {
        time_utc: result.time_utc.clone(),
        station: station.clone(),
        operator: operator.to_string(),
        serial: Some(result.serial.clone()),
        plan_id: result.plan.id.clone(),
        plan_sha256: Some(result.plan.sha256.clone()),
        kind: e.kind,
        message: e.message.clone(),
        detail_json: e.detail_json.clone(),
        // Set by the store to the record appended with it.
        record_id: None,
    };
    let mut safety_events: Vec<NewSafetyEvent> = events.iter().map(row).collect();
    let mut exposures = Vec::new();
    for h in &heard {
        if let Some(level_dba) = h.level_dba {
            exposures.push(NewExposure {
                operator: operator.to_string(),
                station: station.clone(),
                start_unix_s: h.start_unix_s,
                level_dba,
                duration_s: h.duration_s,
                serial: result.serial.clone(),
                plan_id: result.plan.id.clone(),
                record_id: None,
            });
        }
        safety_events.extend(h.events.iter().map(row));
    }
    let archive = inputs.archive_bytes();
    let mut store = Store::open(store_dir).map_err(not_recorded)?;
    if let Some(key) = signer {
        store.set_signer(key.clone());
    }
    let appended = store
        .append_unit(&NewUnit {
            record: &record,
            capture_wav: &capture_wav,
            archive: &archive,
            safety_events: &safety_events,
            exposures: &exposures,
        })
        .map_err(not_recorded)?;
    let stored = appended.record;
    tracing::info!(record = stored.id, hash = %stored.record_hash, "recorded");
    Ok(Tested { result, stored })
}
