//! Virtual-earphone parameter files: the YAML form of an [`EarphoneModel`].
//!
//! Sits beside the coupler model files ([`super::coupler`]): a plan's `correction:` names one
//! as its source (`source: {virtual_earphone: FILE}`), and the fixture→reference correction
//! needs the source impedance it gives. Every problem is reported at once as
//! `PATH:LINE:COL: message`, with the same YAML guards as plans
//! ([`crate::config::parse_tree`]) and the element syntax and messages of coupler models
//! (the rear vent is a `tube` or `slit` element written as in a coupler file).
//!
//! # Schema (human units; converted to the SI fields of [`EarphoneModel`])
//!
//! ```yaml
//! earphone: ember-e2              # optional label: [a-z0-9][a-z0-9._-]*
//! description: free text          # optional
//! temperature_c: 23               # optional, default 20 °C
//! static_pressure_pa: 101325      # optional, default 101 325 Pa
//! re_ohm: 24                      # voice-coil resistance, Ω, > 0
//! le_uh: 30                       # voice-coil inductance, µH, ≥ 0
//! bl_t_m: 0.8                     # force factor, T·m, > 0
//! mms_mg: 25                      # moving mass, mg, > 0
//! cms_mm_per_n: 25                # suspension compliance, mm/N, > 0
//! rms_n_s_per_m: 0.02             # mechanical resistance, N·s/m, ≥ 0
//! sd_mm2: 60                      # diaphragm area, mm², > 0
//! rear_volume_mm3: 150            # > 0
//! rear_vent: {tube: {length_mm: 1.5, radius_mm: 0.25}}   # or {slit: {length_mm, width_mm, gap_mm}}
//! front_volume_mm3: 80            # > 0
//! outlet: {length_mm: 3, radius_mm: 1, loss: zwikker_kosten}   # loss optional, as for tubes
//! damper: {resistance_pa_s_m3: 1.5e7, inertance_kg_m4: 200}    # both ≥ 0
//! spread: {bl_t_m: 3%, mms_mg: 0.36}   # optional manufacturing spread, σ ([`spread`])
//! ```
//!
//! Conversions: µH, mg and mm² are divided by 1e6, mm/N and the outlet's mm by 1e3, mm³ by
//! 1e9 (powers of ten are exact in `f64`, so `30 µH` becomes exactly the double nearest
//! 30e-6). The rear vent goes through the coupler element parser (mm × 1e-3, as in coupler
//! files). The label and the description are not part of the model: renaming a file's
//! label does not change a correction.
//!
//! # Canonical form (part of the plan hash and of the correction identity)
//!
//! Compact JSON, keys sorted, numbers as serde_json 1 writes an `f64`, `-0.0` as `0.0` (the
//! conventions of [`crate::plan::hash`] and [`super::coupler`]), over the SI fields:
//!
//! ```text
//! {"bl_t_m":R,"canonical":"tragus-earphone/1","cms_m_per_n":R,"damper_inertance_kg_m4":R,
//!  "damper_resistance_pa_s_m3":R,"front_volume_m3":R,"le_h":R,"mms_kg":R,
//!  "outlet_length_m":R,"outlet_loss":S,"outlet_radius_m":R,"re_ohm":R,"rear_vent":ITEM,
//!  "rear_volume_m3":R,"rms_n_s_per_m":R,"sd_m2":R,"static_pressure_pa":R,"temperature_c":R}
//! ```
//!
//! with `ITEM` the coupler form of a tube or slit (`{"tube":{"length_m":R,"loss":S,
//! "radius_m":R}}`, `{"slit":{"gap_m":R,"length_m":R,"width_m":R}}`).
//!
//! # Manufacturing spread (`spread:`, optional; [`spread`])
//!
//! A file may declare how its product varies from unit to unit, per parameter (a relative
//! σ such as `3%`, or an absolute one in the unit of the key of the same name), for the
//! simulated rig's population ([`EarphoneFile::spread`]). The spread is deliberately not
//! part of the model nor of the canonical form above: the correction uses the design, and
//! declaring or changing a spread changes neither a correction's identity nor a plan's hash
//! (it changes what a simulation draws, never how a capture is judged). Without the
//! section, the simulated rig draws the demo population's own spread.

use super::coupler::{
    item, loss, ChainCtx, DEFAULT_STATIC_PRESSURE_PA, DEFAULT_TEMPERATURE_C,
    STATIC_PRESSURE_RANGE_PA, TEMPERATURE_RANGE_C,
};
use crate::acoustics::air::Air;
use crate::acoustics::elements::{Element, TubeLoss};
use crate::acoustics::network::ChainItem;
use crate::acoustics::source::EarphoneModel;
use crate::config::{
    found, found_scalar, is_id, parse_tree, show_text, sort_problems, FileError, NodeReader, Pos,
    Problem,
};
use marked_yaml::types::MarkedMappingNode;
use marked_yaml::Node;
use std::path::Path;

pub use crate::acoustics::canonical::EARPHONE_CANONICAL_FORM as CANONICAL_FORM;

pub mod spread;
pub use spread::{EarphoneSpread, Sigma};

/// An earphone file as loaded: the model (the design) and its declared spread.
#[derive(Debug, Clone, PartialEq)]
pub struct EarphoneFile {
    /// The design, as the correction and the plan hash see it.
    pub model: EarphoneModel,
    /// The `spread:` section, when the file has one.
    pub spread: Option<EarphoneSpread>,
}

const TOP_KEYS: [&str; 17] = [
    "earphone",
    "description",
    "temperature_c",
    "static_pressure_pa",
    "re_ohm",
    "le_uh",
    "bl_t_m",
    "mms_mg",
    "cms_mm_per_n",
    "rms_n_s_per_m",
    "sd_mm2",
    "rear_volume_mm3",
    "rear_vent",
    "front_volume_mm3",
    "outlet",
    "damper",
    "spread",
];

/// Why an earphone file could not be loaded.
#[derive(Debug, thiserror::Error)]
pub enum EarphoneFileError {
    /// The file could not be read.
    #[error("{path}: cannot read earphone file: {source}")]
    Io {
        /// The path.
        path: String,
        /// The I/O error.
        source: std::io::Error,
    },
    /// The file was read but is not valid; one `path:line:col: message` line per problem.
    #[error("{}", .0.iter().map(|p| p.to_string()).collect::<Vec<_>>().join("\n"))]
    Invalid(Vec<Problem>),
}

/// Load and validate an earphone parameter file (read by [`crate::config::load_file`]):
/// the model only (a `spread:` section is validated, then left out).
pub fn load_earphone(path: &Path) -> Result<EarphoneModel, EarphoneFileError> {
    load_earphone_file(path).map(|f| f.model)
}

/// Load and validate an earphone parameter file with its `spread:` section.
pub fn load_earphone_file(path: &Path) -> Result<EarphoneFile, EarphoneFileError> {
    crate::config::load_file(path, load_earphone_file_str)
}

impl FileError for EarphoneFileError {
    fn unreadable(path: String, source: std::io::Error) -> Self {
        EarphoneFileError::Io { path, source }
    }

    fn invalid(problems: Vec<Problem>) -> Self {
        EarphoneFileError::Invalid(problems)
    }
}

/// Load an earphone file from text; `path` labels the problems. The model only.
pub fn load_earphone_str(text: &str, path: &Path) -> Result<EarphoneModel, EarphoneFileError> {
    load_earphone_file_str(text, path).map(|f| f.model)
}

/// Load an earphone file from text with its `spread:` section; `path` labels the problems.
pub fn load_earphone_file_str(text: &str, path: &Path) -> Result<EarphoneFile, EarphoneFileError> {
    let label = path.display().to_string();
    let (root, mut problems) = parse_tree(text, &label, "earphone file");
    let mut v = NodeReader::new(
        label.clone(),
        path.parent().unwrap_or(Path::new(".")).to_path_buf(),
    );
    let file = match &root {
        Some(Node::Mapping(m)) => {
            let model = earphone(&mut v, m);
            let spread = match m.get_node("spread") {
                None => Some(None),
                Some(n) => spread::read_spread(&mut v, n, model.as_ref()).map(Some),
            };
            model
                .zip(spread)
                .map(|(model, spread)| EarphoneFile { model, spread })
        }
        _ => None,
    };
    problems.append(&mut v.problems);
    match file {
        Some(f) if problems.is_empty() => Ok(f),
        _ => {
            if problems.is_empty() {
                problems.push(Problem {
                    location: Pos::default().at(&label),
                    message: "the earphone file could not be read".into(),
                });
            }
            sort_problems(&mut problems, &label);
            Err(EarphoneFileError::Invalid(problems))
        }
    }
}

/// Whether a value must be above 0 or may be 0.
#[derive(Clone, Copy)]
enum Sign {
    Positive,
    NonNegative,
}

fn value(v: &mut NodeReader, n: &Node, what: &str, unit: &str, sign: Sign) -> Option<f64> {
    match sign {
        Sign::Positive => v.positive(n, what, unit),
        Sign::NonNegative => {
            let x = v.number(n, what)?;
            if x >= 0.0 {
                Some(x)
            } else {
                v.report(
                    Pos::of(n.span()),
                    format!("{what}: expected a value of 0 {unit} or more, found {x}"),
                );
                None
            }
        }
    }
}

fn earphone(v: &mut NodeReader, top: &MarkedMappingNode) -> Option<EarphoneModel> {
    let top_pos = top
        .keys()
        .next()
        .map_or(Pos { line: 1, col: 1 }, |k| Pos::of(k.span()));
    v.unknown_keys(top, &TOP_KEYS, "");
    // The label is checked when given, though it is not part of the model.
    if let Some(n) = top.get_node("earphone") {
        if let Some(s) = v.scalar(n, "earphone", "an id") {
            if !is_id(&s) {
                v.report(
                    Pos::of(n.span()),
                    format!(
                        "earphone: expected an id of lowercase letters, digits, `.`, `_` and \
                         `-`, starting with a letter or digit, found {}",
                        found_scalar(&s)
                    ),
                );
            }
        }
    }
    if let Some(n) = top.get_node("description") {
        v.scalar(n, "description", "text");
    }
    let temperature_c = match top.get_node("temperature_c") {
        None => Some(DEFAULT_TEMPERATURE_C),
        Some(n) => v.number_in(n, "temperature_c", TEMPERATURE_RANGE_C, " °C"),
    };
    let static_pressure_pa = match top.get_node("static_pressure_pa") {
        None => Some(DEFAULT_STATIC_PRESSURE_PA),
        Some(n) => v.number_in(n, "static_pressure_pa", STATIC_PRESSURE_RANGE_PA, " Pa"),
    };
    let required = |v: &mut NodeReader, key: &str, unit: &str, sign: Sign, scale: f64| match top
        .get_node(key)
    {
        None => {
            v.report(top_pos, format!("missing required key `{key}`"));
            None
        }
        Some(n) => value(v, n, key, unit, sign).map(|x| x / scale),
    };
    let re_ohm = required(v, "re_ohm", "Ω", Sign::Positive, 1.0);
    let le_h = required(v, "le_uh", "µH", Sign::NonNegative, 1e6);
    let bl_t_m = required(v, "bl_t_m", "T·m", Sign::Positive, 1.0);
    let mms_kg = required(v, "mms_mg", "mg", Sign::Positive, 1e6);
    let cms_m_per_n = required(v, "cms_mm_per_n", "mm/N", Sign::Positive, 1e3);
    let rms_n_s_per_m = required(v, "rms_n_s_per_m", "N·s/m", Sign::NonNegative, 1.0);
    let sd_m2 = required(v, "sd_mm2", "mm²", Sign::Positive, 1e6);
    let rear_volume_m3 = required(v, "rear_volume_mm3", "mm³", Sign::Positive, 1e9);
    let front_volume_m3 = required(v, "front_volume_mm3", "mm³", Sign::Positive, 1e9);

    let rear_vent = match top.get_node("rear_vent") {
        None => {
            v.report(top_pos, "missing required key `rear_vent`".into());
            None
        }
        Some(n) => vent(v, n),
    };
    let outlet = match top.get_node("outlet") {
        None => {
            v.report(top_pos, "missing required key `outlet`".into());
            None
        }
        Some(n) => outlet(v, n),
    };
    let damper = match top.get_node("damper") {
        None => {
            v.report(top_pos, "missing required key `damper`".into());
            None
        }
        Some(n) => damper(v, n),
    };
    let (outlet_length_m, outlet_radius_m, outlet_loss) = outlet?;
    let (damper_resistance_pa_s_m3, damper_inertance_kg_m4) = damper?;
    Some(EarphoneModel {
        re_ohm: re_ohm?,
        le_h: le_h?,
        bl_t_m: bl_t_m?,
        mms_kg: mms_kg?,
        cms_m_per_n: cms_m_per_n?,
        rms_n_s_per_m: rms_n_s_per_m?,
        sd_m2: sd_m2?,
        rear_volume_m3: rear_volume_m3?,
        rear_vent: rear_vent?,
        front_volume_m3: front_volume_m3?,
        outlet_length_m,
        outlet_radius_m,
        outlet_loss,
        damper_resistance_pa_s_m3,
        damper_inertance_kg_m4,
        air: Air::new(temperature_c?, static_pressure_pa?),
    })
}

/// `rear_vent: {tube: {...}}` or `{slit: {...}}`, read by the coupler element parser.
fn vent(v: &mut NodeReader, n: &Node) -> Option<Element> {
    let kind = match n {
        Node::Mapping(m) if m.len() == 1 => m.keys().next().map(|k| k.as_str().to_string()),
        _ => None,
    };
    match kind.as_deref() {
        Some("tube" | "slit") => {}
        _ => {
            let found = match (n, kind.as_deref()) {
                (_, Some(k)) => format!("`{}`", show_text(k)),
                (Node::Mapping(m), None) => format!("a mapping with {} keys", m.len()),
                (other, None) => found(other),
            };
            v.report(
                Pos::of(n.span()),
                format!(
                    "rear_vent: expected `{{tube: {{length_mm, radius_mm}}}}` or \
                     `{{slit: {{length_mm, width_mm, gap_mm}}}}`, found {found}"
                ),
            );
            return None;
        }
    }
    let ctx = ChainCtx {
        prefix: "rear_vent",
        taps_allowed: false,
    };
    match item(v, n, "rear_vent", &ctx)? {
        ChainItem::Element(e) => Some(e),
        ChainItem::Tap(_) => None,
    }
}

/// `outlet: {length_mm, radius_mm, loss}` → (length m, radius m, loss).
fn outlet(v: &mut NodeReader, n: &Node) -> Option<(f64, f64, TubeLoss)> {
    let f = v.fields(
        n,
        "outlet",
        &["length_mm", "radius_mm", "loss"],
        &["length_mm", "radius_mm"],
    )?;
    let length = f[0].and_then(|n| v.positive(n, "outlet.length_mm", "mm"));
    let radius = f[1].and_then(|n| v.positive(n, "outlet.radius_mm", "mm"));
    let loss = match f[2] {
        None => Some(TubeLoss::ZwikkerKosten),
        Some(n) => loss(v, n, "outlet.loss"),
    };
    Some((length? / 1e3, radius? / 1e3, loss?))
}

/// `damper: {resistance_pa_s_m3, inertance_kg_m4}`.
fn damper(v: &mut NodeReader, n: &Node) -> Option<(f64, f64)> {
    let keys = ["resistance_pa_s_m3", "inertance_kg_m4"];
    let f = v.fields(n, "damper", &keys, &keys)?;
    let r = f[0].and_then(|n| {
        value(
            v,
            n,
            "damper.resistance_pa_s_m3",
            "Pa·s/m³",
            Sign::NonNegative,
        )
    });
    let m = f[1].and_then(|n| value(v, n, "damper.inertance_kg_m4", "kg/m⁴", Sign::NonNegative));
    Some((r?, m?))
}

pub use crate::acoustics::canonical::{canonical_json, canonical_value};
