//! The optional `spread:` section of an earphone file: the manufacturing spread of the
//! product, per parameter, which the simulated rig draws every unit from.
//!
//! Not part of the model nor of its canonical form: the correction and the plan hash see the
//! design only (see the module doc of [`super`]).
//!
//! ```yaml
//! spread:                       # optional
//!   bl_t_m: 3%                  # relative σ: a number followed by `%`
//!   mms_mg: 0.36                # absolute σ, in the unit of the key of the same name
//!   cms_mm_per_n: 8%
//!   nonlinearity: 10%           # every nonlinear coefficient of the simulated motor
//! ```
//!
//! Keys: `re_ohm`, `le_uh`, `bl_t_m`, `mms_mg`, `cms_mm_per_n`, `rms_n_s_per_m`, `sd_mm2`,
//! `front_volume_mm3`, `damper_resistance_pa_s_m3`, `damper_inertance_kg_m4` (relative or
//! absolute) and `nonlinearity` (relative only: the file has no nonlinear coefficients). A
//! key left out does not vary. The rear volume, rear vent and outlet tube have no spread:
//! they are tooling, the same for every unit, and the simulated fixture tabulates them once
//! per line.
//!
//! Each unit's value is `nominal + σ·z` with `z` a standard normal draw truncated at
//! ±[`TRUNCATE_SIGMAS`] (drawn again beyond it: a line's incoming inspection screens the
//! tails; common practice). So that every unit's value keeps its sign, `σ` must stay below a
//! third of the nominal value (relative: below 33.3 %); `0` or `0%` is allowed and means no
//! spread.

use crate::acoustics::source::EarphoneModel;
use crate::config::{found_scalar, NodeReader, Pos};
use marked_yaml::Node;

/// Standard deviations at which the normal spread is cut (a draw beyond is drawn again).
pub const TRUNCATE_SIGMAS: f64 = 3.0;

/// σ of one parameter as written.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Sigma {
    /// Relative to the nominal value, a fraction (`2%` is 0.02).
    Relative(f64),
    /// Absolute, in the parameter's SI unit (written in the file's unit, converted).
    Absolute(f64),
}

impl Sigma {
    /// No spread.
    pub const ZERO: Sigma = Sigma::Absolute(0.0);

    /// σ in the parameter's SI unit around `nominal`.
    pub fn si(self, nominal: f64) -> f64 {
        match self {
            Sigma::Relative(f) => f * nominal.abs(),
            Sigma::Absolute(a) => a,
        }
    }
}

/// The manufacturing spread of an earphone file's `spread:` section (σ per parameter).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct EarphoneSpread {
    /// Per parameter of [`SPREAD_KEYS`], in that order.
    pub sigmas: [Sigma; 10],
    /// Relative σ of each nonlinear coefficient of the simulated motor, fraction.
    pub nonlinearity: f64,
}

/// A spread key of [`SPREAD_KEYS`]: unit in messages, divisor from the file's unit to SI.
struct Key {
    unit: &'static str,
    per_si: f64,
}

const KEYS: [Key; 10] = [
    Key {
        unit: "Ω",
        per_si: 1.0,
    },
    Key {
        unit: "µH",
        per_si: 1e6,
    },
    Key {
        unit: "T·m",
        per_si: 1.0,
    },
    Key {
        unit: "mg",
        per_si: 1e6,
    },
    Key {
        unit: "mm/N",
        per_si: 1e3,
    },
    Key {
        unit: "N·s/m",
        per_si: 1.0,
    },
    Key {
        unit: "mm²",
        per_si: 1e6,
    },
    Key {
        unit: "mm³",
        per_si: 1e9,
    },
    Key {
        unit: "Pa·s/m³",
        per_si: 1.0,
    },
    Key {
        unit: "kg/m⁴",
        per_si: 1.0,
    },
];

/// The keys of `spread:` that vary a model parameter, in the order units draw them.
pub const SPREAD_KEYS: [&str; 10] = [
    "re_ohm",
    "le_uh",
    "bl_t_m",
    "mms_mg",
    "cms_mm_per_n",
    "rms_n_s_per_m",
    "sd_mm2",
    "front_volume_mm3",
    "damper_resistance_pa_s_m3",
    "damper_inertance_kg_m4",
];

/// The model parameter of `SPREAD_KEYS[i]`, SI.
fn param(m: &mut EarphoneModel, i: usize) -> &mut f64 {
    match i {
        0 => &mut m.re_ohm,
        1 => &mut m.le_h,
        2 => &mut m.bl_t_m,
        3 => &mut m.mms_kg,
        4 => &mut m.cms_m_per_n,
        5 => &mut m.rms_n_s_per_m,
        6 => &mut m.sd_m2,
        7 => &mut m.front_volume_m3,
        8 => &mut m.damper_resistance_pa_s_m3,
        _ => &mut m.damper_inertance_kg_m4,
    }
}

impl EarphoneSpread {
    /// No spread at all (every unit is the design).
    pub const NONE: EarphoneSpread = EarphoneSpread {
        sigmas: [Sigma::ZERO; 10],
        nonlinearity: 0.0,
    };

    /// `nominal` varied by one draw `z()` per parameter of [`SPREAD_KEYS`], in that order
    /// (a draw is taken for every parameter, spread or not, so that giving one parameter a
    /// spread does not change the draws of the others). `z` gives truncated standard normal
    /// values.
    pub fn vary(&self, nominal: &EarphoneModel, mut z: impl FnMut() -> f64) -> EarphoneModel {
        let mut m = nominal.clone();
        for (i, s) in self.sigmas.iter().enumerate() {
            let p = param(&mut m, i);
            let d = z();
            *p += s.si(*p) * d;
        }
        m
    }

    /// σ of `key` (one of [`SPREAD_KEYS`]) in SI around `nominal`'s value; `None` for an
    /// unknown key.
    pub fn sigma_si(&self, key: &str, nominal: &EarphoneModel) -> Option<f64> {
        let i = SPREAD_KEYS.iter().position(|k| *k == key)?;
        let mut m = nominal.clone();
        Some(self.sigmas[i].si(*param(&mut m, i)))
    }
}

/// `NUMBER%` → Relative(NUMBER/100); `NUMBER` → Absolute(NUMBER / per_si); problems
/// reported at the node.
fn sigma(v: &mut NodeReader, n: &Node, what: &str, per_si: f64) -> Option<(Sigma, f64)> {
    let text = v.scalar(n, what, "a σ such as `3%` or a number in the key's unit")?;
    let t = text.trim();
    let (number, relative) = match t.strip_suffix('%') {
        Some(x) => (x.trim(), true),
        None => (t, false),
    };
    let x = match number.replace('_', "").parse::<f64>() {
        Ok(x) if x.is_finite() && x >= 0.0 => x,
        _ => {
            v.report(
                Pos::of(n.span()),
                format!(
                    "{what}: expected a σ of 0 or more, relative (`3%`) or in the key's unit \
                     (`0.02`), found {}",
                    found_scalar(&text)
                ),
            );
            return None;
        }
    };
    Some(if relative {
        (Sigma::Relative(x / 100.0), x)
    } else {
        (Sigma::Absolute(x / per_si), x)
    })
}

/// Read `spread:` (node `n`) against the file's `model` (its nominal values bound each σ).
/// `None` when a problem was reported.
pub(super) fn read_spread(
    v: &mut NodeReader,
    n: &Node,
    model: Option<&EarphoneModel>,
) -> Option<EarphoneSpread> {
    let Node::Mapping(m) = n else {
        v.report(
            Pos::of(n.span()),
            format!(
                "spread: expected a mapping of parameter σ (such as `{{bl_t_m: 3%}}`), found {}",
                crate::config::found(n)
            ),
        );
        return None;
    };
    let mut known: Vec<&str> = SPREAD_KEYS.to_vec();
    known.push("nonlinearity");
    v.unknown_keys(m, &known, "spread");
    let mut out = EarphoneSpread::NONE;
    let mut ok = true;
    let limit = 100.0 / TRUNCATE_SIGMAS;
    for (i, key) in KEYS.iter().enumerate() {
        let Some(node) = m.get_node(SPREAD_KEYS[i]) else {
            continue;
        };
        let what = format!("spread.{}", SPREAD_KEYS[i]);
        let Some((s, written)) = sigma(v, node, &what, key.per_si) else {
            ok = false;
            continue;
        };
        let nominal_si = model.map(|m| {
            let mut m = m.clone();
            *param(&mut m, i)
        });
        let too_big = match (s, nominal_si) {
            (Sigma::Relative(_), _) => (written >= limit)
                .then(|| format!("below {limit:.1}% (a third of the nominal value)")),
            (Sigma::Absolute(a), Some(nom)) if a > 0.0 && TRUNCATE_SIGMAS * a >= nom => {
                Some(format!(
                    "below a third of the nominal {} {}",
                    nom * key.per_si,
                    key.unit
                ))
            }
            _ => None,
        };
        if let Some(bound) = too_big {
            let shown = match s {
                Sigma::Relative(_) => format!("{written}%"),
                Sigma::Absolute(_) => format!("{written} {}", key.unit),
            };
            v.report(
                Pos::of(node.span()),
                format!(
                    "{what}: expected a σ {bound}, so that every unit's value stays above 0 \
                     (draws are cut at ±{TRUNCATE_SIGMAS}σ), found {shown}"
                ),
            );
            ok = false;
            continue;
        }
        out.sigmas[i] = s;
    }
    if let Some(node) = m.get_node("nonlinearity") {
        match sigma(v, node, "spread.nonlinearity", 1.0) {
            Some((Sigma::Relative(f), written)) if written < limit => out.nonlinearity = f,
            Some((Sigma::Relative(_), written)) => {
                v.report(
                    Pos::of(node.span()),
                    format!(
                        "spread.nonlinearity: expected a relative σ below {limit:.1}%, so \
                         that no coefficient changes sign (draws are cut at \
                         ±{TRUNCATE_SIGMAS}σ), found {written}%"
                    ),
                );
                ok = false;
            }
            Some((Sigma::Absolute(_), written)) => {
                v.report(
                    Pos::of(node.span()),
                    format!(
                        "spread.nonlinearity: expected a relative σ such as `10%` (the file \
                         has no nonlinear coefficients to give an absolute σ for), found \
                         {written}"
                    ),
                );
                ok = false;
            }
            None => ok = false,
        }
    }
    ok.then_some(out)
}
