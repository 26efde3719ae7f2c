//! Canonical descriptions of physics objects: the JSON form of elements, terminations and
//! earphone models that hashes and identities are taken over. It changes exactly when a
//! value does (numbers as shortest round-trip decimals), never with a file's layout; the
//! model files ([`crate::models`]) build their canonical forms from these.

use super::elements::{Element, TubeLoss};
use super::source::EarphoneModel;
use super::termination::Termination;
use serde_json::{json, Value};

/// Name of this version of the canonical form.
pub const EARPHONE_CANONICAL_FORM: &str = "tragus-earphone/1";

pub fn loss_name(loss: TubeLoss) -> &'static str {
    match loss {
        TubeLoss::ZwikkerKosten => "zwikker_kosten",
        TubeLoss::Keefe => "keefe",
        TubeLoss::Lossless => "lossless",
    }
}

/// serde_json 1 writes `-0.0` as `-0.0`; the canonical form writes it as `0.0`.
pub fn real(x: f64) -> Value {
    json!(if x == 0.0 { 0.0 } else { x })
}

pub fn element_value(e: &Element) -> Value {
    // Keys written in sorted order, so the document is canonical whether or not
    // serde_json keeps insertion order.
    match e {
        Element::Tube {
            length_m,
            radius_m,
            loss,
        } => {
            json!({"tube": {"length_m": real(*length_m), "loss": loss_name(*loss), "radius_m": real(*radius_m)}})
        }
        Element::Slit {
            length_m,
            width_m,
            gap_m,
        } => {
            json!({"slit": {"gap_m": real(*gap_m), "length_m": real(*length_m), "width_m": real(*width_m)}})
        }
        Element::Cavity { volume_m3 } => json!({"cavity": {"volume_m3": real(*volume_m3)}}),
        Element::Series {
            resistance_pa_s_m3,
            inertance_kg_m4,
            compliance_m3_pa,
        } => json!({"series": {
            "compliance_m3_pa": compliance_m3_pa.map(real),
            "inertance_kg_m4": real(*inertance_kg_m4),
            "resistance_pa_s_m3": real(*resistance_pa_s_m3)}}),
        Element::Branch {
            elements,
            termination,
        } => json!({"branch": {
            "elements": elements.iter().map(element_value).collect::<Vec<_>>(),
            "termination": termination_value(termination)}}),
    }
}

pub fn termination_value(t: &Termination) -> Value {
    match t {
        Termination::Rigid => json!("rigid"),
        Termination::Eardrum => json!("eardrum_kringlebotn_1988"),
        Termination::OpenBaffled { radius_m } => {
            json!({"open_baffled": {"radius_m": real(*radius_m)}})
        }
        Termination::OpenUnbaffled { radius_m } => {
            json!({"open_unbaffled": {"radius_m": real(*radius_m)}})
        }
        Termination::Table { points } => json!({"table": points
            .iter()
            .map(|(f, z)| json!([real(*f), real(z.re), real(z.im)]))
            .collect::<Vec<_>>()}),
    }
}

/// The canonical form of an earphone model (module doc) as a JSON value.
pub fn canonical_value(m: &EarphoneModel) -> Value {
    json!({
        "bl_t_m": real(m.bl_t_m),
        "canonical": EARPHONE_CANONICAL_FORM,
        "cms_m_per_n": real(m.cms_m_per_n),
        "damper_inertance_kg_m4": real(m.damper_inertance_kg_m4),
        "damper_resistance_pa_s_m3": real(m.damper_resistance_pa_s_m3),
        "front_volume_m3": real(m.front_volume_m3),
        "le_h": real(m.le_h),
        "mms_kg": real(m.mms_kg),
        "outlet_length_m": real(m.outlet_length_m),
        "outlet_loss": loss_name(m.outlet_loss),
        "outlet_radius_m": real(m.outlet_radius_m),
        "re_ohm": real(m.re_ohm),
        "rear_vent": element_value(&m.rear_vent),
        "rear_volume_m3": real(m.rear_volume_m3),
        "rms_n_s_per_m": real(m.rms_n_s_per_m),
        "sd_m2": real(m.sd_m2),
        "static_pressure_pa": real(m.air.static_pressure_pa),
        "temperature_c": real(m.air.temperature_c),
    })
}

/// The canonical JSON text of an earphone model.
pub fn canonical_json(m: &EarphoneModel) -> String {
    canonical_value(m).to_string()
}
