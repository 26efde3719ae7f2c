//! The `product:` section: what the product's specification declares (sensitivity,
//! tolerance, response peak), which the hearing-safety checks bound the level with, and
//! optionally the product's earphone file (`earphone: FILE`, relative to the plan), the
//! unit the simulated rig simulates ([`super::Plan::simulated_earphone`]). Its schema
//! ([`RawProduct`]) and validation.

use super::raw::Section;
use super::validate::Validator;
use super::{ProductSpec, SensitivityUnit};
use crate::config::{found_scalar, Pos};
use crate::models::earphone::EarphoneFile;
use marked_yaml::Spanned;
use serde::Deserialize;

/// `product:` keys: what the product's specification declares, in the reference coupler.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields, expecting = "a mapping")]
pub struct RawProduct {
    /// Declared nominal sensitivity.
    pub sensitivity_db: Option<Spanned<f64>>,
    /// Its unit: `db_spl_per_v` or `db_spl_per_mw`.
    pub sensitivity_unit: Option<Spanned<String>>,
    /// Declared tolerance of the sensitivity, ± dB.
    pub tolerance_db: Option<Spanned<f64>>,
    /// Highest response above the sensitivity anywhere in the sweep band, dB.
    pub response_peak_db: Option<Spanned<f64>>,
    /// The product's earphone file (a virtual-earphone file, optionally with `spread:`).
    pub earphone: Option<Spanned<String>>,
}

impl Validator {
    /// `product.earphone`: the earphone file loaded (problems in it at their own positions,
    /// prefixed with the key). `Some(None)` when not given, `None` when it could not be read.
    pub(super) fn earphone(&mut self, sec: &Section<RawProduct>) -> Option<Option<EarphoneFile>> {
        match &sec.value.earphone {
            None => Some(None),
            Some(file) => self.earphone_file(file, "product.earphone").map(Some),
        }
    }

    /// `product:`: the declared sensitivity (per V, or per mW with the plan's nominal
    /// impedance), its tolerance and the response peak above it.
    pub(super) fn product(&mut self, sec: &Section<RawProduct>) -> Option<ProductSpec> {
        let p = &sec.value;
        let value = self
            .required(sec, &p.sensitivity_db, "product", "sensitivity_db")
            .and_then(|v| self.in_range(v, "product.sensitivity_db", 40.0, 200.0, " dB"));
        let unit = self
            .required(sec, &p.sensitivity_unit, "product", "sensitivity_unit")
            .and_then(|u| match u.as_str() {
                "db_spl_per_v" => Some((SensitivityUnit::DbSplPerV, u)),
                "db_spl_per_mw" => Some((SensitivityUnit::DbSplPerMw, u)),
                other => {
                    self.report(
                        Pos::of_value(u),
                        format!(
                            "product.sensitivity_unit: expected db_spl_per_v or db_spl_per_mw, \
                             found {}",
                            found_scalar(other)
                        ),
                    );
                    None
                }
            });
        let tolerance_db = self
            .required(sec, &p.tolerance_db, "product", "tolerance_db")
            .and_then(|v| self.in_range(v, "product.tolerance_db", 0.0, 20.0, " dB"));
        let response_peak_db = self
            .required(sec, &p.response_peak_db, "product", "response_peak_db")
            .and_then(|v| self.in_range(v, "product.response_peak_db", 0.0, 40.0, " dB"));
        let (unit, unit_pos) = unit?;
        let value = value?;
        let per_v = match unit {
            SensitivityUnit::DbSplPerMw => match self.nominal_impedance_ohm {
                Some(r) => value - 10.0 * (r / 1000.0).log10(),
                None => {
                    self.report(
                        Pos::of_value(unit_pos),
                        "product.sensitivity_unit: db_spl_per_mw needs the plan's \
                         `nominal_impedance_ohm` (the earphone's declared impedance), found none"
                            .into(),
                    );
                    return None;
                }
            },
            _ => value,
        };
        Some(ProductSpec {
            sensitivity_db: value,
            sensitivity_unit: unit,
            tolerance_db: tolerance_db?,
            response_peak_db: response_peak_db?,
            sensitivity_db_spl_per_v: per_v,
        })
    }
}
