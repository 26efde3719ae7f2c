//! Coupler model files: the YAML an engineer writes for a fixture or a reference coupler.
//!
//! Sits at the start of the acoustic side of the data flow: [`load_model`] reads a model
//! file, checks it and builds a [`CouplerModel`], whose [`CouplerModel::coupler`] is the
//! [`Coupler`] network that `tragus coupler`, the simulated rig and the fixture→reference
//! correction evaluate. Like plans, every problem is reported at once as
//! `PATH:LINE:COL: message`, and the model carries a SHA-256 over a canonical form, so a
//! record can say exactly which acoustic model corrected it.
//!
//! # Schema (extends the minimal form of docs/architecture.md, every key of which is accepted)
//!
//! ```yaml
//! coupler: closed-tube-25mm       # id: [a-z0-9][a-z0-9._-]*
//! description: free text          # optional
//! temperature_c: 20               # optional, default 20 °C
//! static_pressure_pa: 101325      # optional, default 101 325 Pa
//! elements:                       # from the reference plane inward, at least one element
//!   - tube: {length_mm: 25, radius_mm: 3.75, loss: zwikker_kosten}  # | keefe | lossless
//!   - slit: {length_mm: 2, width_mm: 4, gap_mm: 0.1}               # Stinson (1991)
//!   - cavity: {volume_mm3: 2000}
//!   - series: {resistance_pa_s_m3: 1e6, inertance_kg_m4: 500, compliance_m3_pa: 1e-12}
//!   - branch:                     # shunt to ground: side volume, leak to the outside
//!       elements: [{slit: {length_mm: 3, width_mm: 2, gap_mm: 0.05}}]
//!       termination: open_baffled
//!   - tap: mic                    # a microphone at this node; at least one, names unique
//! termination: rigid              # rigid | open_baffled | open_unbaffled
//!                                 # | {open_baffled: {radius_mm: R}} | {open_unbaffled: …}
//!                                 # | {impedance_csv: FILE} | {eardrum: kringlebotn_1988}
//! ```
//!
//! `series` takes any of its three parts (at least one); an omitted part is absent (no
//! resistance, no mass, no compliance). A bare `open_baffled` / `open_unbaffled` takes the
//! radius of the last tube of its chain (the main chain, or the branch it ends). Taps are
//! not allowed inside a branch (a branch is a shunt impedance, [`Element::Branch`]).
//!
//! Impedance CSV files (`impedance_csv`, path relative to the model file): three columns
//! `hz,re,im` (Pa·s/m³), frequencies strictly ascending and above 0, at least two points;
//! an optional header line (first non-comment line whose fields are not numbers), `#`
//! comments, blank lines, a byte-order mark and `\r` line ends are accepted. Problems in
//! the CSV are reported at the CSV's own `path:line:col`.
//!
//! Messages name the value by its path, list items 1-based: `elements[2].tube.radius_mm`.
//!
//! # The canonical form of the hash (a contract: auditors recompute it)
//!
//! `sha256` is the lowercase hex SHA-256 of one compact JSON document (keys sorted, numbers
//! as serde_json 1 writes an `f64`, the same conventions as the plan's hash,
//! [`crate::plan::hash`]), over the typed model in SI units, not the file text:
//!
//! ```text
//! {"canonical":"tragus-coupler/1","chain":[ITEM,...],"description":S,"id":S,
//!  "static_pressure_pa":R,"temperature_c":R,"termination":TERM}
//! ITEM = {"tap":S} | {"tube":{"length_m":R,"loss":S,"radius_m":R}}
//!      | {"slit":{"gap_m":R,"length_m":R,"width_m":R}} | {"cavity":{"volume_m3":R}}
//!      | {"series":{"compliance_m3_pa":R|null,"inertance_kg_m4":R,"resistance_pa_s_m3":R}}
//!      | {"branch":{"elements":[ITEM,...],"termination":TERM}}
//! TERM = "rigid" | "eardrum_kringlebotn_1988" | {"open_baffled":{"radius_m":R}}
//!      | {"open_unbaffled":{"radius_m":R}} | {"table":[[HZ,RE,IM],...]}
//! ```
//!
//! Loss names are `zwikker_kosten`, `keefe`, `lossless`. A tabulated termination enters by
//! its points, so an edit of the CSV changes the hash and moving the file does not.

use crate::acoustics::air::Air;
use crate::acoustics::canonical::{element_value, real, termination_value};
use crate::acoustics::elements::{Element, TubeLoss};
use crate::acoustics::network::{evaluate_chain_into, ChainItem, Coupler};
use crate::acoustics::termination::Termination;
use crate::acoustics::C64;
use crate::config::{
    found, found_scalar, is_channel_name, is_id, parse_tree, read_data_file, show_text,
    sort_problems, suggest, FileError, Location, NodeReader, Pos, Problem,
};
use marked_yaml::types::MarkedMappingNode;
use marked_yaml::Node;
use serde_json::{json, Value};
use sha2::{Digest, Sha256};
use std::path::{Path, PathBuf};

/// Name of this version of the canonical form of the hash, written into it.
pub const CANONICAL_FORM: &str = "tragus-coupler/1";
/// Default temperature, °C (docs/architecture.md).
pub const DEFAULT_TEMPERATURE_C: f64 = 20.0;
/// Default static pressure, Pa (docs/architecture.md; standard atmosphere).
pub const DEFAULT_STATIC_PRESSURE_PA: f64 = 101_325.0;
/// Accepted temperature range, °C: the Keefe (1984) air formulas are fits around room
/// temperature; a station runs indoors (common practice).
pub const TEMPERATURE_RANGE_C: (f64, f64) = (-20.0, 60.0);
/// Accepted static pressure range, Pa: sea level to high-altitude sites, with margin
/// (common practice).
pub const STATIC_PRESSURE_RANGE_PA: (f64, f64) = (50_000.0, 120_000.0);
/// The only eardrum model known.
pub const EARDRUM_MODELS: [&str; 1] = ["kringlebotn_1988"];

const TOP_KEYS: [&str; 6] = [
    "coupler",
    "description",
    "temperature_c",
    "static_pressure_pa",
    "elements",
    "termination",
];
const ELEMENT_KINDS: [&str; 6] = ["tube", "slit", "cavity", "series", "branch", "tap"];
const LOSS_NAMES: [&str; 3] = ["zwikker_kosten", "keefe", "lossless"];
const TERMINATION_NAMES: [&str; 3] = ["rigid", "open_baffled", "open_unbaffled"];
const TERMINATION_KEYS: [&str; 4] = ["open_baffled", "open_unbaffled", "impedance_csv", "eardrum"];

/// A validated coupler model file.
#[derive(Debug, Clone, PartialEq)]
pub struct CouplerModel {
    /// Model id (`coupler:`).
    pub id: String,
    /// Free-text description (empty when absent).
    pub description: String,
    /// Temperature the model is evaluated at, °C.
    pub temperature_c: f64,
    /// Static pressure, Pa.
    pub static_pressure_pa: f64,
    /// Chain from the reference plane inward, SI units.
    pub chain: Vec<ChainItem>,
    /// What ends the chain.
    pub termination: Termination,
    /// Hex SHA-256 of the canonical form (module doc).
    pub sha256: String,
    /// The file the model came from.
    pub source: PathBuf,
}

impl CouplerModel {
    /// The network to evaluate, in air at the model's temperature and pressure.
    pub fn coupler(&self) -> Coupler {
        Coupler {
            id: self.id.clone(),
            air: Air::new(self.temperature_c, self.static_pressure_pa),
            chain: self.chain.clone(),
            termination: self.termination.clone(),
        }
    }

    /// Tap names in chain order.
    pub fn tap_names(&self) -> Vec<&str> {
        self.chain
            .iter()
            .filter_map(|c| match c {
                ChainItem::Tap(n) => Some(n.as_str()),
                ChainItem::Element(_) => None,
            })
            .collect()
    }
}

/// Why a model could not be loaded.
#[derive(Debug, thiserror::Error)]
pub enum ModelError {
    /// The file could not be read.
    #[error("{path}: cannot read coupler model: {source}")]
    Io {
        /// The path.
        path: String,
        /// The I/O error.
        source: std::io::Error,
    },
    /// The model was read but is not valid; one `path:line:col: message` line per problem.
    #[error("{}", .0.iter().map(|p| p.to_string()).collect::<Vec<_>>().join("\n"))]
    Invalid(Vec<Problem>),
}

/// Load, validate and hash a coupler model file (read by [`crate::config::load_file`]).
pub fn load_model(path: &Path) -> Result<CouplerModel, ModelError> {
    crate::config::load_file(path, load_model_str)
}

impl FileError for ModelError {
    fn unreadable(path: String, source: std::io::Error) -> Self {
        ModelError::Io { path, source }
    }

    fn invalid(problems: Vec<Problem>) -> Self {
        ModelError::Invalid(problems)
    }
}

/// Load a model from text; `path` labels problems and anchors relative CSV paths.
pub fn load_model_str(text: &str, path: &Path) -> Result<CouplerModel, ModelError> {
    let label = path.display().to_string();
    let (root, mut problems) = parse_tree(text, &label, "coupler model");
    let mut v = NodeReader::new(
        label.clone(),
        path.parent().unwrap_or(Path::new(".")).to_path_buf(),
    );
    let model = root.as_ref().and_then(|r| match r {
        Node::Mapping(m) => model(&mut v, m, path),
        _ => None,
    });
    problems.append(&mut v.problems);
    match model {
        Some(m) if problems.is_empty() => Ok(m),
        _ => {
            if problems.is_empty() {
                problems.push(Problem {
                    location: Pos::default().at(&label),
                    message: "the coupler model could not be read".into(),
                });
            }
            sort_problems(&mut problems, &label);
            Err(ModelError::Invalid(problems))
        }
    }
}

/// What [`chain`] read.
#[derive(Default)]
struct ChainRead {
    /// The items that could be read, each with its position.
    items: Vec<(ChainItem, Pos)>,
    /// Whether every item could be read (and the chain is not empty).
    ok: bool,
    /// Radius of the last tube, m.
    last_radius_m: Option<f64>,
}

/// Where a chain is, for messages and for the open-end radius.
pub(crate) struct ChainCtx<'a> {
    /// Path prefix of its items (`elements`, `elements[3].branch.elements`).
    pub(crate) prefix: &'a str,
    /// Whether taps are allowed (main chain only).
    pub(crate) taps_allowed: bool,
}

fn model(v: &mut NodeReader, top: &MarkedMappingNode, source: &Path) -> Option<CouplerModel> {
    let top_pos = top
        .keys()
        .next()
        .map_or(Pos { line: 1, col: 1 }, |k| Pos::of(k.span()));
    v.unknown_keys(top, &TOP_KEYS, "");

    let id = match top.get_node("coupler") {
        None => {
            v.report(top_pos, "missing required key `coupler`".into());
            None
        }
        Some(n) => {
            let s = v.scalar(n, "coupler", "an id");
            s.and_then(|s| {
                if is_id(&s) {
                    Some(s)
                } else {
                    v.report(
                        Pos::of(n.span()),
                        format!(
                            "coupler: expected an id of lowercase letters, digits, `.`, `_` \
                             and `-`, starting with a letter or digit, found {}",
                            found_scalar(&s)
                        ),
                    );
                    None
                }
            })
        }
    };
    let description = match top.get_node("description") {
        None => Some(String::new()),
        Some(n) => v.scalar(n, "description", "text"),
    };
    let temperature_c = match top.get_node("temperature_c") {
        None => Some(DEFAULT_TEMPERATURE_C),
        Some(n) => v.number_in(n, "temperature_c", TEMPERATURE_RANGE_C, " °C"),
    };
    let static_pressure_pa = match top.get_node("static_pressure_pa") {
        None => Some(DEFAULT_STATIC_PRESSURE_PA),
        Some(n) => v.number_in(n, "static_pressure_pa", STATIC_PRESSURE_RANGE_PA, " Pa"),
    };

    let read = match top.get_node("elements") {
        None => {
            v.report(top_pos, "missing required key `elements`".into());
            None
        }
        Some(n) => {
            let read = chain(
                v,
                n,
                &ChainCtx {
                    prefix: "elements",
                    taps_allowed: true,
                },
            );
            check_taps(v, &read.items, n);
            Some(read)
        }
    };
    let last_radius = read.as_ref().and_then(|r| r.last_radius_m);
    let termination = match top.get_node("termination") {
        None => {
            v.report(top_pos, "missing required key `termination`".into());
            None
        }
        Some(n) => termination(v, n, "termination", last_radius),
    };

    let read = read.filter(|r| r.ok)?;
    if let (Some(Termination::Rigid), Some(n)) = (&termination, top.get_node("termination")) {
        // Only series elements in front of a rigid wall: no volume velocity can flow, so
        // the input impedance is infinite at every frequency and no source can drive the
        // coupler. Refused here rather than carried as a non-finite number.
        let drivable = read.items.iter().any(|(item, _)| {
            matches!(item, ChainItem::Element(e) if !matches!(e, Element::Series { .. }))
        });
        if !drivable {
            v.report(
                Pos::of(n.span()),
                "termination: a rigid end behind series elements only has an infinite \
                 input impedance; expected a tube, slit, cavity or branch in the chain, \
                 or a termination that admits flow (open_baffled, open_unbaffled, \
                 impedance_csv, eardrum)"
                    .into(),
            );
            return None;
        }
    }
    let chain: Vec<ChainItem> = read.items.into_iter().map(|(item, _)| item).collect();
    let mut model = CouplerModel {
        id: id?,
        description: description?,
        temperature_c: temperature_c?,
        static_pressure_pa: static_pressure_pa?,
        chain,
        termination: termination?,
        sha256: String::new(),
        source: source.to_path_buf(),
    };
    model.sha256 = model_sha256(&model);
    Some(model)
}

/// A chain of elements (with taps when allowed). Each item comes with its position;
/// also returns the radius of the last tube, m (for a bare open end).
/// The items that could be read are returned even when others could not (so that tap
/// names are still checked); `ok` says whether all could.
fn chain(v: &mut NodeReader, node: &Node, ctx: &ChainCtx) -> ChainRead {
    let Node::Sequence(seq) = node else {
        v.report(
            Pos::of(node.span()),
            format!(
                "{}: expected a list of elements, found {}",
                ctx.prefix,
                found(node)
            ),
        );
        return ChainRead::default();
    };
    let mut items = Vec::new();
    let mut ok = true;
    let mut last_radius = None;
    let mut n_elements = 0usize;
    for (i, node) in seq.iter().enumerate() {
        let what = format!("{}[{}]", ctx.prefix, i + 1);
        // A block mapping's own mark points past its first key; use the key.
        let pos = match node {
            Node::Mapping(m) => m
                .keys()
                .next()
                .map_or(Pos::of(node.span()), |k| Pos::of(k.span())),
            _ => Pos::of(node.span()),
        };
        match item(v, node, &what, ctx) {
            Some(ci) => {
                if let ChainItem::Element(e) = &ci {
                    n_elements += 1;
                    if let Element::Tube { radius_m, .. } = e {
                        last_radius = Some(*radius_m);
                    }
                }
                items.push((ci, pos));
            }
            None => ok = false,
        }
    }
    if seq.is_empty() {
        v.report(
            Pos::of(node.span()),
            format!(
                "{}: expected at least one element, found an empty list",
                ctx.prefix
            ),
        );
        ok = false;
    } else if ok && n_elements == 0 {
        v.report(
            Pos::of(node.span()),
            format!(
                "{}: expected at least one element besides taps, found none",
                ctx.prefix
            ),
        );
        ok = false;
    }
    ChainRead {
        items,
        ok,
        last_radius_m: last_radius,
    }
}

/// One list item: a mapping with exactly one element kind (the element syntax of coupler
/// files, shared with earphone files' rear vent).
pub(crate) fn item(
    v: &mut NodeReader,
    item: &Node,
    what: &str,
    ctx: &ChainCtx,
) -> Option<ChainItem> {
    let map = match item {
        Node::Mapping(m) if m.len() == 1 => m,
        Node::Mapping(m) => {
            let found = if m.is_empty() {
                "an empty mapping".to_string()
            } else {
                let keys: Vec<&str> = m.keys().map(|k| k.as_str()).collect();
                format!("{} keys ({})", m.len(), keys.join(", "))
            };
            v.report(
                Pos::of(item.span()),
                format!(
                    "{what}: expected one element ({}), found {found}",
                    ELEMENT_KINDS.join(", ")
                ),
            );
            return None;
        }
        other => {
            v.report(
                Pos::of(other.span()),
                format!(
                    "{what}: expected an element such as `tube: {{...}}`, found {}",
                    found(other)
                ),
            );
            return None;
        }
    };
    let (key, value) = map.iter().next()?;
    let kind = key.as_str();
    let w = format!("{what}.{kind}");
    let mm = |x: f64| x * 1e-3;
    match kind {
        "tap" => {
            if !ctx.taps_allowed {
                v.report(
                    Pos::of(key.span()),
                    format!(
                        "{what}: expected an element, found a tap; taps are allowed only \
                         in the main chain (a branch is a shunt impedance)"
                    ),
                );
                return None;
            }
            let name = v.scalar(value, &w, "a tap name")?;
            if is_channel_name(&name) {
                Some(ChainItem::Tap(name))
            } else {
                v.report(
                    Pos::of(value.span()),
                    format!(
                        "{w}: expected a name of lowercase letters, digits, `_` and `-`, \
                         found {}",
                        found_scalar(&name)
                    ),
                );
                None
            }
        }
        "tube" => {
            let f = v.fields(
                value,
                &w,
                &["length_mm", "radius_mm", "loss"],
                &["length_mm", "radius_mm"],
            );
            let f = f?;
            let length = f[0].and_then(|n| v.positive(n, &format!("{w}.length_mm"), "mm"));
            let radius = f[1].and_then(|n| v.positive(n, &format!("{w}.radius_mm"), "mm"));
            let loss = match f[2] {
                None => Some(TubeLoss::ZwikkerKosten),
                Some(n) => loss(v, n, &format!("{w}.loss")),
            };
            Some(ChainItem::Element(Element::Tube {
                length_m: mm(length?),
                radius_m: mm(radius?),
                loss: loss?,
            }))
        }
        "slit" => {
            let keys = ["length_mm", "width_mm", "gap_mm"];
            let f = v.fields(value, &w, &keys, &keys)?;
            let mut vals = [None; 3];
            for (k, key) in keys.iter().enumerate() {
                vals[k] = f[k].and_then(|n| v.positive(n, &format!("{w}.{key}"), "mm"));
            }
            let [l, wd, g] = vals;
            let (l, wd, g) = (l?, wd?, g?);
            if g > wd {
                v.report(
                    Pos::of(value.span()),
                    format!(
                        "{w}: expected gap_mm no larger than width_mm (the gap is the short \
                         side), found gap {g} mm and width {wd} mm"
                    ),
                );
                return None;
            }
            Some(ChainItem::Element(Element::Slit {
                length_m: mm(l),
                width_m: mm(wd),
                gap_m: mm(g),
            }))
        }
        "cavity" => {
            let f = v.fields(value, &w, &["volume_mm3"], &["volume_mm3"])?;
            let volume_mm3 = f[0].and_then(|n| v.positive(n, &format!("{w}.volume_mm3"), "mm³"))?;
            Some(ChainItem::Element(Element::Cavity {
                volume_m3: volume_mm3 * 1e-9,
            }))
        }
        "series" => {
            let keys = ["resistance_pa_s_m3", "inertance_kg_m4", "compliance_m3_pa"];
            let f = v.fields(value, &w, &keys, &[])?;
            if f.iter().all(Option::is_none) {
                v.report(
                    Pos::of(value.span()),
                    format!(
                        "{w}: expected at least one of {}, found none",
                        keys.join(", ")
                    ),
                );
                return None;
            }
            let mut nonneg = |n: Option<&Node>, key: &str| -> Option<f64> {
                let Some(n) = n else { return Some(0.0) };
                let what = format!("{w}.{key}");
                let x = v.number(n, &what)?;
                if x >= 0.0 {
                    Some(x)
                } else {
                    v.report(
                        Pos::of(n.span()),
                        format!("{what}: expected a value of 0 or more, found {x}"),
                    );
                    None
                }
            };
            let r = nonneg(f[0], keys[0]);
            let m = nonneg(f[1], keys[1]);
            let c = match f[2] {
                None => Some(None),
                Some(n) => v
                    .positive(n, &format!("{w}.{}", keys[2]), "m³/Pa")
                    .map(Some),
            };
            Some(ChainItem::Element(Element::Series {
                resistance_pa_s_m3: r?,
                inertance_kg_m4: m?,
                compliance_m3_pa: c?,
            }))
        }
        "branch" => {
            let f = v.fields(
                value,
                &w,
                &["elements", "termination"],
                &["elements", "termination"],
            );
            let f = f?;
            let prefix = format!("{w}.elements");
            let read = match f[0] {
                Some(n) => chain(
                    v,
                    n,
                    &ChainCtx {
                        prefix: &prefix,
                        taps_allowed: false,
                    },
                ),
                None => ChainRead::default(),
            };
            let term = f[1]
                .and_then(|n| termination(v, n, &format!("{w}.termination"), read.last_radius_m));
            let elements = read
                .ok
                .then_some(read.items)?
                .into_iter()
                .filter_map(|(i, _)| match i {
                    ChainItem::Element(e) => Some(e),
                    ChainItem::Tap(_) => None,
                })
                .collect();
            Some(ChainItem::Element(Element::Branch {
                elements,
                termination: term?,
            }))
        }
        other => {
            let hint = match suggest(other, ELEMENT_KINDS) {
                Some(s) => format!("did you mean `{s}`?"),
                None => format!("expected one of {}", ELEMENT_KINDS.join(", ")),
            };
            v.report(
                Pos::of(key.span()),
                format!("{what}: unknown element `{}`, {hint}", show_text(other)),
            );
            None
        }
    }
}

/// A tube's loss model by name (`zwikker_kosten`, `keefe`, `lossless`).
pub(crate) fn loss(v: &mut NodeReader, n: &Node, what: &str) -> Option<TubeLoss> {
    let s = v.scalar(n, what, "a loss model")?;
    match s.as_str() {
        "zwikker_kosten" => Some(TubeLoss::ZwikkerKosten),
        "keefe" => Some(TubeLoss::Keefe),
        "lossless" => Some(TubeLoss::Lossless),
        other => {
            let hint = match suggest(other, LOSS_NAMES) {
                Some(s) => format!(", did you mean `{s}`?"),
                None => String::new(),
            };
            v.report(
                Pos::of(n.span()),
                format!(
                    "{what}: expected one of {}, found {}{hint}",
                    LOSS_NAMES.join(", "),
                    found_scalar(other)
                ),
            );
            None
        }
    }
}

/// Tap names unique, and at least one tap.
fn check_taps(v: &mut NodeReader, chain: &[(ChainItem, Pos)], elements: &Node) {
    let mut seen: Vec<(&str, Pos)> = Vec::new();
    for (item, pos) in chain {
        if let ChainItem::Tap(name) = item {
            if let Some((_, first)) = seen.iter().find(|(n, _)| n == name) {
                v.report(
                    *pos,
                    format!(
                        "elements: expected each tap name once, found `{name}` again \
                         (first at line {})",
                        first.line
                    ),
                );
            } else {
                seen.push((name, *pos));
            }
        }
    }
    if seen.is_empty() {
        v.report(
            Pos::of(elements.span()),
            "elements: expected at least one `tap: NAME` (a microphone), found none".into(),
        );
    }
}

/// A termination; `last_radius_m` is the radius of the last tube of its chain.
fn termination(
    v: &mut NodeReader,
    n: &Node,
    what: &str,
    last_radius_m: Option<f64>,
) -> Option<Termination> {
    let pos = Pos::of(n.span());
    let bare_open = |this: &mut NodeReader, name: &str| -> Option<f64> {
        match last_radius_m {
            Some(r) => Some(r),
            None => {
                this.report(
                    pos,
                    format!(
                        "{what}: `{name}` takes the radius of the last tube of its chain, \
                         found no tube; write `{{{name}: {{radius_mm: R}}}}`"
                    ),
                );
                None
            }
        }
    };
    match n {
        Node::Scalar(s) => match s.as_str() {
            "rigid" => Some(Termination::Rigid),
            "open_baffled" => Some(Termination::OpenBaffled {
                radius_m: bare_open(v, "open_baffled")?,
            }),
            "open_unbaffled" => Some(Termination::OpenUnbaffled {
                radius_m: bare_open(v, "open_unbaffled")?,
            }),
            other => {
                let all: Vec<&str> = TERMINATION_NAMES
                    .iter()
                    .chain(&TERMINATION_KEYS[2..])
                    .copied()
                    .collect();
                let hint = match suggest(other, all.iter().copied()) {
                    Some(s) => format!(", did you mean `{s}`?"),
                    None => String::new(),
                };
                v.report(
                    pos,
                    format!(
                        "{what}: expected rigid, open_baffled, open_unbaffled, \
                         {{impedance_csv: FILE}} or {{eardrum: MODEL}}, found {}{hint}",
                        found_scalar(other)
                    ),
                );
                None
            }
        },
        Node::Mapping(m) if m.len() == 1 => {
            let (k, value) = m.iter().next()?;
            let w = format!("{what}.{}", k.as_str());
            match k.as_str() {
                "open_baffled" | "open_unbaffled" => {
                    let f = v.fields(value, &w, &["radius_mm"], &["radius_mm"])?;
                    let r = f[0].and_then(|n| v.positive(n, &format!("{w}.radius_mm"), "mm"))?;
                    Some(if k.as_str() == "open_baffled" {
                        Termination::OpenBaffled { radius_m: r * 1e-3 }
                    } else {
                        Termination::OpenUnbaffled { radius_m: r * 1e-3 }
                    })
                }
                "eardrum" => {
                    let s = v.scalar(value, &w, "an eardrum model")?;
                    if EARDRUM_MODELS.contains(&s.as_str()) {
                        Some(Termination::Eardrum)
                    } else {
                        v.report(
                            Pos::of(value.span()),
                            format!(
                                "{w}: expected {}, found {}",
                                EARDRUM_MODELS.join(", "),
                                found_scalar(&s)
                            ),
                        );
                        None
                    }
                }
                "impedance_csv" => {
                    let rel = v.scalar(value, &w, "a CSV file path")?;
                    impedance_file(v, &rel, &w, Pos::of(value.span()))
                }
                other => {
                    let hint = match suggest(other, TERMINATION_KEYS) {
                        Some(s) => format!("did you mean `{s}`?"),
                        None => format!("expected one of {}", TERMINATION_KEYS.join(", ")),
                    };
                    v.report(
                        Pos::of(k.span()),
                        format!("{what}: unknown key `{}`, {hint}", show_text(other)),
                    );
                    None
                }
            }
        }
        other => {
            v.report(
                pos,
                format!(
                    "{what}: expected rigid, open_baffled, open_unbaffled or a mapping with \
                     one of {}, found {}",
                    TERMINATION_KEYS.join(", "),
                    match other {
                        Node::Mapping(m) => format!("a mapping with {} keys", m.len()),
                        o => found(o),
                    }
                ),
            );
            None
        }
    }
}

fn impedance_file(v: &mut NodeReader, rel: &str, what: &str, pos: Pos) -> Option<Termination> {
    let file = v.dir.join(rel);
    let file_label = file.display().to_string();
    let text = match read_data_file(&file, "impedance") {
        Ok(t) => t,
        Err(why) => {
            v.report(pos, format!("{what}: {why}"));
            return None;
        }
    };
    let (points, problems) = parse_impedance_csv(&text, &file_label);
    if problems.is_empty() {
        Some(Termination::Table { points })
    } else {
        v.problems.extend(problems);
        None
    }
}

/// Parse an impedance CSV (`hz,re,im`, Pa·s/m³; format in the module doc). Returns the
/// points and every problem (`path` labels them); the points are usable only when there
/// are no problems.
pub fn parse_impedance_csv(text: &str, path: &str) -> (Vec<(f64, C64)>, Vec<Problem>) {
    let text = text.strip_prefix('\u{feff}').unwrap_or(text);
    let at = |line: usize, col: usize| Location {
        path: path.to_string(),
        line,
        col,
    };
    let mut points: Vec<(f64, C64)> = Vec::new();
    let mut problems = Vec::new();
    let mut seen_line = false;
    let mut last: Option<(f64, usize)> = None;
    for (i, raw_line) in text.split('\n').enumerate() {
        let line_no = i + 1;
        let line = raw_line.strip_suffix('\r').unwrap_or(raw_line);
        let content = line.find('#').map_or(line, |k| &line[..k]);
        if content.trim().is_empty() {
            continue;
        }
        // Fields with the 1-based character column of their first non-blank character.
        let mut fields: Vec<(&str, usize)> = Vec::new();
        let mut start = 0usize;
        for part in content.split(',') {
            let lead = part.len() - part.trim_start().len();
            let col = content[..start + lead].chars().count() + 1;
            fields.push((part.trim(), col));
            start += part.len() + 1;
        }
        let first_line = !seen_line;
        seen_line = true;
        let numbers: Vec<Option<f64>> = fields
            .iter()
            .map(|(f, _)| f.parse::<f64>().ok().filter(|x| x.is_finite()))
            .collect();
        if first_line && numbers.iter().all(Option::is_none) {
            continue; // header
        }
        if fields.len() != 3 {
            problems.push(Problem {
                location: at(line_no, 1),
                message: format!(
                    "expected 3 fields hz,re,im, found {} field{}",
                    fields.len(),
                    if fields.len() == 1 { "" } else { "s" }
                ),
            });
            continue;
        }
        let mut ok = true;
        for (k, name) in ["hz", "re", "im"].iter().enumerate() {
            if numbers[k].is_none() {
                problems.push(Problem {
                    location: at(line_no, fields[k].1),
                    message: format!(
                        "{name}: expected a number, found {}",
                        found_scalar(fields[k].0)
                    ),
                });
                ok = false;
            }
        }
        if !ok {
            continue;
        }
        let (hz, re, im) = (
            numbers[0].unwrap_or(0.0),
            numbers[1].unwrap_or(0.0),
            numbers[2].unwrap_or(0.0),
        );
        if hz <= 0.0 {
            problems.push(Problem {
                location: at(line_no, fields[0].1),
                message: format!("hz: expected a frequency above 0 Hz, found {hz}"),
            });
            continue;
        }
        if let Some((prev, prev_line)) = last {
            if hz <= prev {
                problems.push(Problem {
                    location: at(line_no, fields[0].1),
                    message: format!(
                        "hz: expected frequencies in strictly ascending order, found {hz} Hz \
                         after {prev} Hz (line {prev_line})"
                    ),
                });
                continue;
            }
        }
        last = Some((hz, line_no));
        points.push((hz, C64::new(re, im)));
    }
    if problems.is_empty() && points.len() < 2 {
        problems.push(Problem {
            location: at(1, 1),
            message: format!(
                "expected at least 2 impedance points, found {}",
                points.len()
            ),
        });
    }
    (points, problems)
}

/// The canonical JSON text of a model (module doc).
pub fn canonical_json(model: &CouplerModel) -> String {
    let chain: Vec<Value> = model
        .chain
        .iter()
        .map(|c| match c {
            ChainItem::Tap(n) => json!({"tap": n}),
            ChainItem::Element(e) => element_value(e),
        })
        .collect();
    let doc = json!({
        "canonical": CANONICAL_FORM,
        "chain": chain,
        "description": model.description,
        "id": model.id,
        "static_pressure_pa": real(model.static_pressure_pa),
        "temperature_c": real(model.temperature_c),
        "termination": termination_value(&model.termination),
    });
    doc.to_string()
}

/// Lowercase hex SHA-256 of [`canonical_json`].
pub fn model_sha256(model: &CouplerModel) -> String {
    hex::encode(Sha256::digest(canonical_json(model).as_bytes()))
}

/// A coupler file is a coupler for the correction: evaluated on its own air.
impl crate::acoustics::correction::CouplerModel for CouplerModel {
    fn response(&self, freq_hz: f64, tap: &str) -> Option<(C64, C64)> {
        let k = self.tap_names().iter().position(|t| *t == tap)?;
        let air = Air::new(self.temperature_c, self.static_pressure_pa);
        // A coupler file has a handful of taps; a small buffer per call is far cheaper
        // than the element evaluations.
        let mut taps = vec![(C64::new(0.0, 0.0), C64::new(0.0, 0.0)); self.tap_names().len()];
        let z_in = evaluate_chain_into(&air, &self.chain, &self.termination, freq_hz, &mut taps);
        Some((z_in, taps[k].1))
    }
    fn tap_names(&self) -> Vec<String> {
        CouplerModel::tap_names(self)
            .into_iter()
            .map(str::to_owned)
            .collect()
    }
    fn has_tap(&self, tap: &str) -> bool {
        CouplerModel::tap_names(self).contains(&tap)
    }
    fn id(&self) -> String {
        self.id.clone()
    }
    /// The canonical coupler hash of the file (`tragus-coupler/1`, this module): it
    /// changes exactly when a value of the model does, and not when the file moves.
    fn model_hash(&self) -> String {
        self.sha256.clone()
    }
}
