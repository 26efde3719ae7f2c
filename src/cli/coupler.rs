//! `tragus coupler MODEL.yaml [--json OUT] [--svg OUT] [--frequencies-hz A,B,C]
//! [--points-per-octave N]`: input impedance and transfer functions of a coupler model.
//!
//! Loads the model ([`crate::models::coupler`]), evaluates its network
//! ([`crate::acoustics::network::Coupler::evaluate`]) on the IEC 61260-1 base-10 grid
//! (20 Hz–20 kHz, 24 points per octave unless told otherwise) or on the given frequencies,
//! and prints a short table at octave points, the docs/architecture.md JSON document, and an SVG plot
//! ([`crate::report::svg`]). Exit codes: 0 ok, 2 bad input (problems as `path:line:col`).

use super::{write_atomic, Exit, JsonOut, EXIT_PASS};
use crate::acoustics::air::Air;
use crate::acoustics::C64;
use crate::dsp::bands::{grid_hz, midband_hz};
use crate::models::coupler::{load_model, CouplerModel, ModelError};
use crate::plan::validate::MAX_POINTS_PER_OCTAVE;
use crate::report::svg::{Panel, Plot, Series};
use serde::Serialize;
use std::collections::BTreeMap;
use std::path::PathBuf;

/// Lowest frequency of the default grid, Hz.
pub const GRID_LOW_HZ: f64 = 20.0;
/// Highest frequency of the default grid, Hz.
pub const GRID_HIGH_HZ: f64 = 20_000.0;
/// Most frequencies `--frequencies-hz` takes (bounds the output; common practice).
pub const MAX_FREQUENCIES: usize = 10_000;

/// Arguments of `coupler`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// The coupler model file (YAML).
    #[arg(value_name = "MODEL.yaml")]
    pub model: PathBuf,
    /// Write the JSON document here (`-` for stdout: the table then goes nowhere).
    #[arg(long, value_name = "OUT")]
    pub json: Option<JsonOut>,
    /// Write an SVG plot (|Z| in dB re 1 Pa·s/m³ and phase) here.
    #[arg(long, value_name = "OUT.svg")]
    pub svg: Option<PathBuf>,
    /// Evaluate at these frequencies (Hz, comma-separated, ascending) instead of the grid.
    #[arg(long, value_name = "A,B,C", conflicts_with = "points_per_octave")]
    pub frequencies_hz: Option<String>,
    /// Points per octave of the IEC 61260-1 grid from 20 Hz to 20 kHz.
    #[arg(long, value_name = "N", default_value_t = 24,
          value_parser = clap::value_parser!(u32).range(1..=i64::from(MAX_POINTS_PER_OCTAVE)))]
    pub points_per_octave: u32,
}

/// A complex curve in the JSON document: the architecture notes' (docs/architecture.md) `re`, `im`, plus magnitude and phase.
#[derive(Debug, Serialize)]
struct Curve {
    re: Vec<f64>,
    im: Vec<f64>,
    /// 20·lg|x| re 1 (Pa·s/m³ for impedances, 1 for pressure ratios).
    magnitude_db: Vec<f64>,
    /// arg x, degrees, in (−180, 180].
    phase_deg: Vec<f64>,
}

impl Curve {
    fn new(values: &[C64]) -> Self {
        Curve {
            re: values.iter().map(|z| z.re).collect(),
            im: values.iter().map(|z| z.im).collect(),
            magnitude_db: values.iter().map(|z| db(*z)).collect(),
            phase_deg: values.iter().map(|z| z.arg().to_degrees()).collect(),
        }
    }
}

#[derive(Debug, Serialize)]
struct TapJson {
    /// p_tap / U_in, Pa·s/m³.
    transfer_impedance: Curve,
    /// p_tap / p_in.
    pressure_transfer: Curve,
}

#[derive(Debug, Serialize)]
struct AirJson {
    temperature_c: f64,
    static_pressure_pa: f64,
    density_kg_m3: f64,
    speed_of_sound_m_s: f64,
    viscosity_pa_s: f64,
    gamma: f64,
    prandtl: f64,
}

#[derive(Debug, Serialize)]
struct CouplerJson {
    coupler: String,
    description: String,
    model_sha256: String,
    source: String,
    air: AirJson,
    frequencies_hz: Vec<f64>,
    /// At the reference plane, Pa·s/m³.
    input_impedance: Curve,
    taps: BTreeMap<String, TapJson>,
}

/// The model evaluated at every frequency.
struct Evaluated {
    freqs_hz: Vec<f64>,
    z_in: Vec<C64>,
    /// Per tap in chain order: (name, transfer impedance, pressure transfer).
    taps: Vec<(String, Vec<C64>, Vec<C64>)>,
    air: Air,
}

fn db(z: C64) -> f64 {
    20.0 * z.norm().log10()
}

/// Parse `--frequencies-hz`: positive finite numbers, strictly ascending.
pub(crate) fn parse_frequencies(text: &str) -> Result<Vec<f64>, String> {
    let mut out: Vec<f64> = Vec::new();
    let items: Vec<&str> = text.split(',').collect();
    if items.len() > MAX_FREQUENCIES {
        return Err(format!(
            "--frequencies-hz: expected at most {MAX_FREQUENCIES} frequencies, found {}",
            items.len()
        ));
    }
    for (i, item) in items.iter().enumerate() {
        let t = item.trim();
        let f = match t.parse::<f64>() {
            Ok(f) if f.is_finite() && f > 0.0 => f,
            _ => {
                let found = if t.is_empty() {
                    "an empty item".to_string()
                } else {
                    format!("`{}`", crate::plan::raw::show_text(t))
                };
                return Err(format!(
                    "--frequencies-hz: expected a comma-separated list of frequencies above 0 Hz, \
                     found {found} (item {})",
                    i + 1
                ));
            }
        };
        if let Some(&prev) = out.last() {
            if f <= prev {
                return Err(format!(
                    "--frequencies-hz: expected frequencies in strictly ascending order, found \
                     {f} after {prev} (item {})",
                    i + 1
                ));
            }
        }
        out.push(f);
    }
    Ok(out)
}

fn load(args: &Args) -> Result<CouplerModel, Exit> {
    load_model(&args.model).map_err(|e| match e {
        ModelError::Invalid(problems) => Exit::problems("coupler model", &problems),
        other => Exit::bad_input(other),
    })
}

fn evaluate(model: &CouplerModel, freqs_hz: Vec<f64>) -> Evaluated {
    let coupler = model.coupler();
    let names: Vec<String> = model.tap_names().into_iter().map(String::from).collect();
    let mut z_in = Vec::with_capacity(freqs_hz.len());
    let mut taps: Vec<(String, Vec<C64>, Vec<C64>)> = names
        .iter()
        .map(|n| (n.clone(), Vec::new(), Vec::new()))
        .collect();
    let nan = C64::new(f64::NAN, f64::NAN);
    for &f in &freqs_hz {
        let point = coupler.evaluate(f);
        z_in.push(point.input_impedance);
        for (name, zt, pt) in &mut taps {
            let (a, b) = point.taps.get(name).copied().unwrap_or((nan, nan));
            zt.push(a);
            pt.push(b);
        }
    }
    Evaluated {
        freqs_hz,
        z_in,
        taps,
        air: coupler.air,
    }
}

fn to_json(model: &CouplerModel, e: &Evaluated) -> CouplerJson {
    let a = &e.air;
    CouplerJson {
        coupler: model.id.clone(),
        description: model.description.clone(),
        model_sha256: model.sha256.clone(),
        source: model.source.display().to_string(),
        air: AirJson {
            temperature_c: a.temperature_c,
            static_pressure_pa: a.static_pressure_pa,
            density_kg_m3: a.density_kg_m3,
            speed_of_sound_m_s: a.speed_of_sound_m_s,
            viscosity_pa_s: a.viscosity_pa_s,
            gamma: a.gamma,
            prandtl: a.prandtl,
        },
        frequencies_hz: e.freqs_hz.clone(),
        input_impedance: Curve::new(&e.z_in),
        taps: e
            .taps
            .iter()
            .map(|(n, zt, pt)| {
                (
                    n.clone(),
                    TapJson {
                        transfer_impedance: Curve::new(zt),
                        pressure_transfer: Curve::new(pt),
                    },
                )
            })
            .collect(),
    }
}

/// The two-panel plot: magnitudes (dB re 1 Pa·s/m³) on top, phases below.
fn plot(model: &CouplerModel, e: &Evaluated) -> Plot {
    let series = |label: String, v: &[C64], f: fn(C64) -> f64| Series {
        label,
        points: e
            .freqs_hz
            .iter()
            .zip(v)
            .map(|(&hz, z)| (hz, f(*z)))
            .collect(),
    };
    let phase = |z: C64| z.arg().to_degrees();
    let mut mags = vec![series("input impedance Z_in".into(), &e.z_in, db)];
    let mut phases = vec![series("input impedance Z_in".into(), &e.z_in, phase)];
    for (name, zt, _) in &e.taps {
        mags.push(series(format!("transfer impedance p_{name}/U_in"), zt, db));
        phases.push(series(
            format!("transfer impedance p_{name}/U_in"),
            zt,
            phase,
        ));
    }
    Plot {
        title: format!("coupler {}: input and transfer impedance", model.id),
        freq_range_hz: None,
        panels: vec![
            Panel {
                y_label: "|Z| (dB re 1 Pa·s/m³)".into(),
                y_range: None,
                y_step: None,
                series: mags,
            },
            Panel {
                y_label: "phase (degrees)".into(),
                y_range: Some((-180.0, 180.0)),
                y_step: Some(45.0),
                series: phases,
            },
        ],
    }
}

/// Rows of the human table: the grid points nearest the octave midbands, or every given
/// frequency when they are few.
fn table_rows(freqs_hz: &[f64], given: bool) -> Vec<usize> {
    if given && freqs_hz.len() <= 40 {
        return (0..freqs_hz.len()).collect();
    }
    let (Some(&lo), Some(&hi)) = (freqs_hz.first(), freqs_hz.last()) else {
        return Vec::new();
    };
    let mut rows = Vec::new();
    for x in -20..=20 {
        let fm = midband_hz(x, 1);
        if fm < lo / 1.1 || fm > hi * 1.1 {
            continue;
        }
        let nearest = (0..freqs_hz.len()).min_by(|&a, &b| {
            let da = (freqs_hz[a] / fm).ln().abs();
            let db_ = (freqs_hz[b] / fm).ln().abs();
            da.total_cmp(&db_)
        });
        if let Some(i) = nearest {
            if rows.last() != Some(&i) {
                rows.push(i);
            }
        }
    }
    rows
}

fn table(model: &CouplerModel, e: &Evaluated, given: bool) -> String {
    use std::fmt::Write as _;
    let mut s = String::new();
    let a = &e.air;
    let _ = writeln!(
        s,
        "coupler {} (sha256 {})\nair {:.1} °C, {:.0} Pa: ρ = {:.5} kg/m³, c = {:.3} m/s",
        model.id,
        model.sha256,
        a.temperature_c,
        a.static_pressure_pa,
        a.density_kg_m3,
        a.speed_of_sound_m_s
    );
    let mut header = format!("{:>10}  {:>10}  {:>9}", "frequency", "|Z_in| dB", "phase °");
    for (name, _, _) in &e.taps {
        let _ = write!(header, "  {:>14}", format!("p_{name}/p_in dB"));
    }
    let _ = writeln!(s, "{header}");
    for i in table_rows(&e.freqs_hz, given) {
        let z = e.z_in[i];
        let _ = write!(
            s,
            "{:>10}  {:>10.2}  {:>9.1}",
            crate::checks::format_hz(e.freqs_hz[i]),
            db(z),
            z.arg().to_degrees()
        );
        for (_, _, pt) in &e.taps {
            let _ = write!(s, "  {:>14.2}", db(pt[i]));
        }
        s.push('\n');
    }
    s
}

pub(crate) fn run(args: Args) -> Result<i32, Exit> {
    let given = args.frequencies_hz.is_some();
    let freqs_hz = match &args.frequencies_hz {
        Some(text) => parse_frequencies(text).map_err(|m| Exit::bad_input(anyhow::anyhow!(m)))?,
        None => grid_hz(GRID_LOW_HZ, GRID_HIGH_HZ, args.points_per_octave),
    };
    let model = load(&args)?;
    let evaluated = evaluate(&model, freqs_hz);
    if let Some(j) = &args.json {
        j.write(&to_json(&model, &evaluated))
            .map_err(Exit::bad_input)?;
    }
    if let Some(path) = &args.svg {
        write_atomic(path, plot(&model, &evaluated).to_svg().as_bytes())
            .map_err(Exit::bad_input)?;
    }
    if !args.json.as_ref().is_some_and(JsonOut::is_stdout) {
        out!("{}", table(&model, &evaluated, given));
    }
    Ok(EXIT_PASS)
}
