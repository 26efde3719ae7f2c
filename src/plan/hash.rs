//! The plan's SHA-256 over a canonical form.
//!
//! Computed at the end of stage two ([`super::validate`]) and recorded with every result, so
//! that a record says exactly which limits judged the unit. The hash is taken over the
//! *typed* plan, not the file: comments, key order, flow or block style, quoting, `20`
//! versus `20.0`, and writing a default out or leaving it implicit do not change it; any
//! change of a value does, including an edit of a limit-line CSV file (its points are part
//! of the canonical form).
//!
//! # The canonical form (a contract: auditors recompute it)
//!
//! `sha256` is the lowercase hex SHA-256 of the UTF-8 bytes of one JSON document:
//!
//! - no whitespace outside strings; object keys sorted by their UTF-8 bytes; strings
//!   escaped as JSON requires (`"`, `\`, control characters as `\n` `\r` `\t` `\b` `\f` or
//!   `\u00xx`, lowercase hex), all other characters written as themselves;
//! - whole-number fields (`revision`, `sample_rate_hz`, `max_harmonic`, `points_per_octave`,
//!   channel `output`/`input`, `seed`, `order`, `smoothing_fraction`) as JSON integers;
//! - every other number as a JSON real in the shortest form that reads back to the same
//!   `f64`, as serde_json 1 writes it (`20.0`, `0.005`, `-12.5`, `0.00001`, `1e+16`), with
//!   `-0.0` written as `0.0`; for 0 and 1e-4 ≤ |x| < 1e16 (every value in a sensible plan)
//!   this is exactly Python's `json.dumps` of the float;
//! - absent optional values as `null`.
//!
//! The document, with the fields of [`Plan`] (all but `sha256` and `source`):
//!
//! ```text
//! {"analysis":{"max_harmonic":I,"min_snr_db":R,"points_per_octave":I},
//!  "canonical":"tragus-plan/1",
//!  "channels":[{"input":I,"name":S,"output":I[,"correction":CORR]},...],  (0-based indices)
//!  "checks":[{"channels":[S,...],"id":S,"kind":S, ...kind fields...},...],
//!  "description":S,"id":S,"revision":I,
//!  "rig":{"kind":"simulated","seed":I} | {"kind":"soundcard"},
//!  "sample_rate_hz":I,
//!  "stimulus":{"duration_s":R,"fade_in_s":R,"fade_out_s":R,"level_dbfs":R,
//!              "silence_after_s":R,"silence_before_s":R,"start_hz":R,"stop_hz":R}}
//! ```
//!
//! Kind fields (kind names as in the plan; defaults already applied) are documented with
//! each kind, in its file under [`super::checks`] (for example
//! [`balance`](super::checks::balance)), where `"band"` is `{"high_hz":R,"low_hz":R}`.
//!
//! The top-level `"nominal_impedance_ohm":R` is present only when the plan declares it (so
//! plans without it keep the hash they had before it existed). The top-level
//! `"level_unit":"db_spl_per_v"` is present only when the plan's levels are dB SPL/V (written
//! so, or by default because a sensitivity check is in dB SPL); a plan in dB FS/FS has no such
//! key. The top-level `"product"` is present only when the plan declares one:
//! `{"response_peak_db":R,"sensitivity_db":R,"sensitivity_unit":S,"tolerance_db":R}` (the
//! values as written, not converted). The top-level `"max_retests":I` is present only when
//! the plan declares it. The product's earphone file (`product.earphone`) and
//! an earphone file's `spread:` are not part of the form: they decide what the simulated rig
//! simulates, never how a capture is judged.
//!
//! A channel's `"correction"` key is present only when the channel is corrected (the
//! plan-wide `correction:` applied, or its own; absent for `correction: none`), so that a
//! plan without corrections has the form, and the hash, it had before corrections existed:
//!
//! ```text
//! CORR = {"fixture":{"id":S,"sha256":S,"tap":S},"reference":{"id":S,"sha256":S,"tap":S},
//!         "source":SRC}
//! SRC  = {"kind":"volume_velocity"}
//!      | {"kind":"thevenin_csv","points":[[HZ,P_RE,P_IM,Z_RE,Z_IM],...]}
//!      | {"earphone":EARPHONE,"kind":"virtual_earphone"}
//! ```
//!
//! `sha256` is the coupler model's canonical hash (`tragus-coupler/1`, documented in
//! [`crate::models::coupler`]; `tragus coupler MODEL --json` prints it as `model_sha256`),
//! the Thévenin points are the table's values, and `EARPHONE` is the earphone file's
//! canonical form (`tragus-earphone/1`, [`crate::models::earphone`]). Files enter
//! by their content, never by their path: copying a model elsewhere with the same content
//! keeps the hash, changing any value, tap or source parameter changes it. `"canonical"` names this version of the
//! form; a change to it gets a new name.

use super::checks::canonical_fields;
use super::{Band, CorrectionSpec, LevelUnit, Plan, RigSpec};
use crate::acoustics::source::Source;
use crate::models::coupler::CouplerModel;
use crate::models::earphone;
use sha2::{Digest, Sha256};
use std::collections::BTreeMap;

/// Name of this version of the canonical form, written into it.
pub const CANONICAL_FORM: &str = "tragus-plan/1";

/// A value of the canonical document (check kinds build theirs with [`real`], [`int`],
/// [`s`], [`band`], [`fraction`] and [`obj`]).
pub(in crate::plan) enum C {
    Null,
    Int(i128),
    Real(f64),
    Str(String),
    List(Vec<C>),
    Obj(BTreeMap<&'static str, C>),
    /// An object with keys from data (a model's canonical JSON).
    Map(BTreeMap<String, C>),
}

/// A JSON value made by a model's canonical form, as a canonical value (reals stay reals,
/// integers stay integers).
fn from_json(v: &serde_json::Value) -> C {
    use serde_json::Value as V;
    match v {
        V::Null => C::Null,
        V::Bool(b) => C::Str(b.to_string()),
        V::Number(n) => match (n.as_i64(), n.as_f64()) {
            (Some(i), _) if !n.is_f64() => C::Int(i128::from(i)),
            (_, Some(x)) => C::Real(x),
            _ => C::Null,
        },
        V::String(t) => C::Str(t.clone()),
        V::Array(items) => C::List(items.iter().map(from_json).collect()),
        V::Object(m) => C::Map(m.iter().map(|(k, v)| (k.clone(), from_json(v))).collect()),
    }
}

fn coupler_ref(model: &CouplerModel, tap: &str) -> C {
    obj([
        ("id", s(&model.id)),
        ("sha256", s(&model.sha256)),
        ("tap", s(tap)),
    ])
}

fn source(src: &Source) -> C {
    let kind = ("kind", s(src.kind_name()));
    match src {
        Source::VolumeVelocity => obj([kind]),
        Source::Thevenin { table } => obj([
            kind,
            (
                "points",
                C::List(
                    table
                        .iter()
                        .map(|(hz, p, z)| {
                            C::List(vec![
                                real(*hz),
                                real(p.re),
                                real(p.im),
                                real(z.re),
                                real(z.im),
                            ])
                        })
                        .collect(),
                ),
            ),
        ]),
        Source::VirtualEarphone(m) => {
            obj([("earphone", from_json(&earphone::canonical_value(m))), kind])
        }
    }
}

fn correction(c: &CorrectionSpec) -> C {
    obj([
        ("fixture", coupler_ref(&c.fixture, &c.fixture_tap)),
        ("reference", coupler_ref(&c.reference, &c.reference_tap)),
        ("source", source(&c.source)),
    ])
}

/// An object of fixed keys.
pub(in crate::plan) fn obj<const N: usize>(fields: [(&'static str, C); N]) -> C {
    C::Obj(fields.into_iter().collect())
}

/// A string.
pub(in crate::plan) fn s(text: &str) -> C {
    C::Str(text.to_string())
}

/// A JSON real.
pub(in crate::plan) fn real(x: f64) -> C {
    C::Real(x)
}

/// A JSON integer.
pub(in crate::plan) fn int<T: Into<i128>>(x: T) -> C {
    C::Int(x.into())
}

/// A band, `{"high_hz":R,"low_hz":R}`.
pub(in crate::plan) fn band(b: &Band) -> C {
    obj([("high_hz", real(b.high_hz)), ("low_hz", real(b.low_hz))])
}

/// A fractional-octave smoothing, an integer or `null`.
pub(in crate::plan) fn fraction(f: Option<u32>) -> C {
    f.map_or(C::Null, int)
}

fn to_canonical(plan: &Plan) -> C {
    // Destructured without `..`: a field added to `Plan` fails to compile here until the
    // canonical form says what to do with it.
    let Plan {
        id,
        revision,
        description,
        sha256: _,
        source: _,
        sample_rate_hz,
        stimulus,
        analysis,
        channels,
        rig,
        checks,
        nominal_impedance_ohm,
        level_unit,
        product,
        max_retests,
        // What the simulated rig simulates, not how a capture is judged: not in the form.
        product_earphone: _,
    } = plan;
    let st = stimulus;
    let stimulus = obj([
        ("duration_s", real(st.duration_s)),
        ("fade_in_s", real(st.fade_in_s)),
        ("fade_out_s", real(st.fade_out_s)),
        ("level_dbfs", real(st.level_dbfs)),
        ("silence_after_s", real(st.silence_after_s)),
        ("silence_before_s", real(st.silence_before_s)),
        ("start_hz", real(st.start_hz)),
        ("stop_hz", real(st.stop_hz)),
    ]);
    let analysis = obj([
        ("max_harmonic", int(analysis.max_harmonic as u64)),
        ("min_snr_db", real(analysis.min_snr_db)),
        ("points_per_octave", int(analysis.points_per_octave)),
    ]);
    let channels = C::List(
        channels
            .iter()
            .map(|c| {
                let mut m = BTreeMap::new();
                m.insert("input", int(c.input as u64));
                m.insert("name", s(&c.name));
                m.insert("output", int(c.output as u64));
                // Only when corrected, so that the form of a plan without correction is
                // what it was before corrections existed (its hash did not change).
                if let Some(corr) = &c.correction {
                    m.insert("correction", correction(corr));
                }
                C::Obj(m)
            })
            .collect(),
    );
    let rig = match rig {
        RigSpec::Simulated { seed } => obj([("kind", s("simulated")), ("seed", int(*seed))]),
        RigSpec::Soundcard => obj([("kind", s("soundcard"))]),
    };
    let checks = C::List(
        checks
            .iter()
            .map(|c| {
                let mut m: BTreeMap<&'static str, C> = BTreeMap::new();
                m.insert("id", s(&c.id));
                m.insert("kind", s(c.kind.name()));
                m.insert(
                    "channels",
                    C::List(c.channels.iter().map(|n| s(n)).collect()),
                );
                m.extend(canonical_fields(&c.kind));
                C::Obj(m)
            })
            .collect(),
    );
    let mut top = BTreeMap::new();
    for (k, v) in [
        ("analysis", analysis),
        ("canonical", s(CANONICAL_FORM)),
        ("channels", channels),
        ("checks", checks),
        ("description", s(description)),
        ("id", s(id)),
        ("revision", int(*revision)),
        ("rig", rig),
        ("sample_rate_hz", int(*sample_rate_hz)),
        ("stimulus", stimulus),
    ] {
        top.insert(k, v);
    }
    // Only when declared, so plans without it keep their hash.
    if let Some(r) = nominal_impedance_ohm {
        top.insert("nominal_impedance_ohm", real(*r));
    }
    // Only for calibrated levels: digital-level plans keep the hash they had before
    // `level_unit` existed.
    if *level_unit == LevelUnit::DbSplPerV {
        top.insert("level_unit", s(level_unit.name()));
    }
    // Only when declared (safety checks use it, so a change of it is a change of the plan).
    if let Some(p) = product {
        top.insert(
            "product",
            obj([
                ("response_peak_db", real(p.response_peak_db)),
                ("sensitivity_db", real(p.sensitivity_db)),
                ("sensitivity_unit", s(p.sensitivity_unit.name())),
                ("tolerance_db", real(p.tolerance_db)),
            ]),
        );
    }
    // Only when declared (it decides verdicts: a unit retested too often fails), so plans
    // without it keep their hash.
    if let Some(n) = max_retests {
        top.insert("max_retests", int(*n));
    }
    C::Obj(top)
}

fn write(c: &C, out: &mut String) {
    match c {
        C::Null => out.push_str("null"),
        C::Int(i) => out.push_str(&i.to_string()),
        C::Real(x) => {
            // -0.0 and 0.0 are the same limit; validation admits only finite numbers, and a
            // non-finite one would be written `null` by serde_json rather than panic.
            let x = if *x == 0.0 { 0.0 } else { *x };
            out.push_str(&serde_json::Value::from(x).to_string());
        }
        C::Str(text) => out.push_str(&serde_json::Value::from(text.as_str()).to_string()),
        C::List(items) => {
            out.push('[');
            for (i, item) in items.iter().enumerate() {
                if i > 0 {
                    out.push(',');
                }
                write(item, out);
            }
            out.push(']');
        }
        C::Obj(fields) => {
            // BTreeMap<&str> iterates in byte order of the keys, as the form requires.
            write_object(fields.iter().map(|(k, v)| (*k, v)), out);
        }
        C::Map(fields) => write_object(fields.iter().map(|(k, v)| (k.as_str(), v)), out),
    }
}

fn write_object<'a>(fields: impl Iterator<Item = (&'a str, &'a C)>, out: &mut String) {
    out.push('{');
    for (i, (k, v)) in fields.enumerate() {
        if i > 0 {
            out.push(',');
        }
        out.push_str(&serde_json::Value::from(k).to_string());
        out.push(':');
        write(v, out);
    }
    out.push('}');
}

/// The canonical JSON text of a plan (see the module doc).
pub fn canonical_json(plan: &Plan) -> String {
    let mut out = String::new();
    write(&to_canonical(plan), &mut out);
    out
}

/// Lowercase hex SHA-256 of [`canonical_json`].
pub fn plan_sha256(plan: &Plan) -> String {
    hex::encode(Sha256::digest(canonical_json(plan).as_bytes()))
}
