//! `tragus calibrate mic|drive|tone`: make or update the station's calibration file.
//!
//! A reading updates one channel's entry of the file named by `--out` (created when missing,
//! or anew with `--fresh`), written atomically. The file's date becomes now; its due date
//! becomes today + `--due-days` (default [`DEFAULT_DUE_DAYS`]), but never later than the due
//! date it already had unless `--fresh` starts it over: a new microphone reading does not
//! make an old drive reading younger.

use super::{write_atomic, Exit};
use crate::calibration::{
    calibrate_microphone, drive_from_input, drive_from_meter, format_date, load_calibration,
    Calibration, CalibrationError, Instrument, DEFAULT_DUE_DAYS,
};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

/// Arguments of `calibrate`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// What to calibrate.
    #[command(subcommand)]
    pub what: What,
}

/// What `calibrate` reads.
#[derive(Debug, clap::Subcommand)]
pub enum What {
    /// A microphone input, from a recording of a sound calibrator on the fixture microphone.
    Mic(MicArgs),
    /// A drive output: from a meter reading of a played tone, or a recording of it through
    /// an input of known volts per full scale.
    Drive(DriveArgs),
    /// Write the sine `calibrate drive` expects to be played, as 32-bit float WAV.
    Tone(ToneArgs),
}

/// Options every reading shares.
#[derive(Debug, clap::Args)]
pub struct Common {
    /// The calibration file to create or update.
    #[arg(long, value_name = "CAL.yaml")]
    pub out: PathBuf,
    /// Start the file anew instead of updating it.
    #[arg(long)]
    pub fresh: bool,
    /// Station the calibration belongs to (default: the file's, else `bench-1`).
    #[arg(long)]
    pub station: Option<String>,
    /// Who calibrates (defaults to $USER).
    #[arg(long)]
    pub operator: Option<String>,
    /// Days until the calibration is due.
    #[arg(long, default_value_t = DEFAULT_DUE_DAYS, value_name = "DAYS")]
    pub due_days: u32,
}

/// Arguments of `calibrate mic`.
#[derive(Debug, clap::Args)]
pub struct MicArgs {
    /// Recording of the calibrator tone (WAV; other channels are ignored).
    #[arg(long, value_name = "FILE.wav")]
    pub capture: PathBuf,
    /// Input channel (1-based) the microphone is on; also its channel in the WAV.
    #[arg(long, value_name = "N")]
    pub input: usize,
    /// The calibrator's nominal level, dB SPL re 20 µPa (IEC 60942 calibrators: 94 or 114).
    #[arg(long, default_value_t = 94.0, value_name = "DB")]
    pub level_db: f64,
    /// The calibrator's nominal frequency, Hz.
    #[arg(long, default_value_t = 1000.0, value_name = "HZ")]
    pub freq_hz: f64,
    /// The calibrator's model.
    #[arg(long, value_name = "TEXT")]
    pub calibrator_model: String,
    /// The calibrator's serial number.
    #[arg(long, value_name = "TEXT")]
    pub calibrator_serial: String,
    /// Shared options.
    #[command(flatten)]
    pub common: Common,
}

/// Arguments of `calibrate drive`.
#[derive(Debug, clap::Args)]
pub struct DriveArgs {
    /// Output channel (1-based) that played the tone.
    #[arg(long, value_name = "N")]
    pub output: usize,
    /// Peak level of the played sine, dBFS (what `calibrate tone` wrote).
    #[arg(long, default_value_t = -20.0, value_name = "DBFS", allow_hyphen_values = true)]
    pub tone_dbfs: f64,
    /// Frequency of the played sine, Hz.
    #[arg(long, default_value_t = 1000.0, value_name = "HZ")]
    pub freq_hz: f64,
    /// Meter method: the rms voltage the meter read across the output.
    #[arg(long, value_name = "V", conflicts_with = "capture")]
    pub measured_v_rms: Option<f64>,
    /// The meter's model (meter method).
    #[arg(long, value_name = "TEXT", requires = "measured_v_rms")]
    pub meter_model: Option<String>,
    /// The meter's serial number (meter method).
    #[arg(long, value_name = "TEXT", requires = "measured_v_rms")]
    pub meter_serial: Option<String>,
    /// Input method: the recording of the output through a calibrated input (WAV).
    #[arg(long, value_name = "FILE.wav", requires_all = ["input", "input_volts_peak_per_fs"])]
    pub capture: Option<PathBuf>,
    /// Input method: the input channel (1-based) that recorded the output.
    #[arg(long, value_name = "N")]
    pub input: Option<usize>,
    /// Input method: that input's volts per full scale (instantaneous, a full-scale sine's
    /// peak).
    #[arg(long, value_name = "V")]
    pub input_volts_peak_per_fs: Option<f64>,
    /// Shared options.
    #[command(flatten)]
    pub common: Common,
}

/// Arguments of `calibrate tone`.
#[derive(Debug, clap::Args)]
pub struct ToneArgs {
    /// Where to write the WAV.
    #[arg(long, value_name = "FILE.wav")]
    pub out: PathBuf,
    /// Output channel (1-based) that carries the tone; the others are silent.
    #[arg(long, default_value_t = 1, value_name = "N")]
    pub output: usize,
    /// Number of channels in the file (at least `--output`).
    #[arg(long, value_name = "N")]
    pub channels: Option<usize>,
    /// Peak level of the sine, dBFS.
    #[arg(long, default_value_t = -20.0, value_name = "DBFS", allow_hyphen_values = true)]
    pub tone_dbfs: f64,
    /// Frequency, Hz.
    #[arg(long, default_value_t = 1000.0, value_name = "HZ")]
    pub freq_hz: f64,
    /// Duration, s.
    #[arg(long, default_value_t = 5.0, value_name = "S")]
    pub duration_s: f64,
    /// Sample rate, Hz.
    #[arg(long, default_value_t = 48_000, value_name = "HZ")]
    pub rate_hz: u32,
}

pub(crate) fn run(args: Args) -> Result<i32, Exit> {
    match args.what {
        What::Mic(a) => mic(a),
        What::Drive(a) => drive(a),
        What::Tone(a) => tone(a),
    }
}

fn one_based(what: &str, n: usize) -> Result<usize, Exit> {
    if n == 0 {
        Err(Exit::bad_input(anyhow::anyhow!(
            "{what}: expected a channel number from 1 (1-based), found 0"
        )))
    } else {
        Ok(n)
    }
}

/// One channel of a WAV, 1-based.
fn wav_channel(path: &Path, channel: usize, what: &str) -> Result<(u32, Vec<f32>), Exit> {
    let data = crate::wav::read_wav(path).map_err(Exit::bad_input)?;
    let n = data.channels.len();
    let mut channels = data.channels;
    if channel > n {
        return Err(Exit::bad_input(anyhow::anyhow!(
            "{}: {what} {channel}: expected a channel from 1 to {n}, the file has {n}",
            path.display()
        )));
    }
    Ok((data.sample_rate_hz, channels.swap_remove(channel - 1)))
}

/// The file to update (or a new one), with date, due date, operator and station set.
fn start(common: &Common) -> Result<Calibration, Exit> {
    let today = Calibration::today_utc();
    let due = today
        .checked_add(time::Duration::days(i64::from(common.due_days)))
        .ok_or_else(|| Exit::bad_input(anyhow::anyhow!("--due-days: too far ahead")))?;
    let operator = common
        .operator
        .clone()
        .or_else(|| std::env::var("USER").ok())
        .unwrap_or_else(|| "unknown".into());
    let existing = if !common.fresh && common.out.exists() {
        Some(load_calibration(&common.out).map_err(|e| match e {
            CalibrationError::Invalid(p) => Exit::problems("calibration", &p),
            other => Exit::bad_input(other),
        })?)
    } else {
        None
    };
    let mut cal = match existing {
        Some(mut c) => {
            if let Some(s) = &common.station {
                if *s != c.station {
                    return Err(Exit::bad_input(anyhow::anyhow!(
                        "--station {s}: {} belongs to station `{}`; use --fresh to start a \
                         calibration for `{s}`",
                        common.out.display(),
                        c.station
                    )));
                }
            }
            c.due_date = c.due_date.min(due);
            c
        }
        None => Calibration {
            station: common.station.clone().unwrap_or_else(|| "bench-1".into()),
            date_utc: String::new(),
            due_date: due,
            operator: String::new(),
            instruments: Vec::new(),
            microphone: BTreeMap::new(),
            drive: BTreeMap::new(),
            source: common.out.clone(),
        },
    };
    cal.date_utc = Calibration::now_utc();
    cal.operator = operator;
    Ok(cal)
}

/// Add an instrument unless one with the same role and serial is listed.
fn add_instrument(cal: &mut Calibration, role: &str, model: &str, serial: &str) {
    let i = Instrument {
        role: role.into(),
        model: model.into(),
        serial: serial.into(),
    };
    cal.instruments
        .retain(|x| !(x.role == i.role && x.serial == i.serial));
    cal.instruments.push(i);
}

fn finish(cal: &Calibration, what: &str) -> Result<i32, Exit> {
    let path = &cal.source;
    write_atomic(path, cal.to_yaml().as_bytes()).map_err(Exit::bad_input)?;
    println!(
        "{what}\nwrote {} (due {}, sha256 {})",
        path.display(),
        format_date(cal.due_date),
        cal.sha256()
    );
    Ok(super::EXIT_PASS)
}

fn mic(a: MicArgs) -> Result<i32, Exit> {
    let input = one_based("--input", a.input)?;
    let ok = a.freq_hz > 0.0 && a.level_db > 0.0 && a.level_db < 200.0;
    if !ok {
        return Err(Exit::bad_input(anyhow::anyhow!(
            "--freq-hz/--level-db: expected a frequency above 0 Hz and a level from 0 to 200 dB \
             SPL, found {} Hz and {} dB",
            a.freq_hz,
            a.level_db
        )));
    }
    let (rate, samples) = wav_channel(&a.capture, input, "--input")?;
    let m = calibrate_microphone(&samples, rate, a.level_db, a.freq_hz).map_err(|e| {
        Exit::bad_input(anyhow::anyhow!(
            "{} input {input}: {e}; nothing was written",
            a.capture.display()
        ))
    })?;
    let mut cal = start(&a.common)?;
    add_instrument(
        &mut cal,
        "calibrator",
        &a.calibrator_model,
        &a.calibrator_serial,
    );
    let what = match &m.reading {
        Some(r) => format!(
            "input {input}: {:.6} FS/Pa ({:.2} dBFS at {} dB SPL), tone {:.2} Hz, spread {:.3} dB, \
             THD {:.2} %, SNR {:.1} dB",
            m.fs_per_pa, r.level_dbfs, r.level_db_spl, r.measured_hz, r.level_spread_db,
            r.thd_percent, r.snr_db
        ),
        None => format!("input {input}: {:.6} FS/Pa", m.fs_per_pa),
    };
    cal.microphone.insert(input, m);
    finish(&cal, &what)
}

fn drive(a: DriveArgs) -> Result<i32, Exit> {
    let output = one_based("--output", a.output)?;
    let (d, instrument) = match (a.measured_v_rms, &a.capture) {
        (Some(v), None) => {
            let d = drive_from_meter(v, a.tone_dbfs, a.freq_hz).map_err(Exit::bad_input)?;
            let inst = match (&a.meter_model, &a.meter_serial) {
                (Some(m), Some(s)) => Some((m.clone(), s.clone())),
                _ => {
                    return Err(Exit::bad_input(anyhow::anyhow!(
                        "--measured-v-rms: expected --meter-model and --meter-serial too (the \
                         instrument goes into the calibration file)"
                    )))
                }
            };
            (d, inst)
        }
        (None, Some(path)) => {
            let input = one_based("--input", a.input.unwrap_or(0))?;
            let gain = a.input_volts_peak_per_fs.unwrap_or(f64::NAN);
            let (rate, samples) = wav_channel(path, input, "--input")?;
            let d =
                drive_from_input(&samples, rate, gain, a.tone_dbfs, a.freq_hz).map_err(|e| {
                    Exit::bad_input(anyhow::anyhow!(
                        "{} input {input}: {e}; nothing was written",
                        path.display()
                    ))
                })?;
            (d, None)
        }
        _ => {
            return Err(Exit::bad_input(anyhow::anyhow!(
                "calibrate drive: expected --measured-v-rms V (meter) or --capture FILE.wav \
                 --input N --input-volts-peak-per-fs V (calibrated input)"
            )))
        }
    };
    let mut cal = start(&a.common)?;
    if let Some((m, s)) = instrument {
        add_instrument(&mut cal, "meter", &m, &s);
    }
    let what = format!(
        "output {output}: {:.6} V peak per FS ({:.4} V rms for a full-scale sine)",
        d.volts_peak_per_fs,
        d.volts_peak_per_fs / std::f64::consts::SQRT_2
    );
    cal.drive.insert(output, d);
    finish(&cal, &what)
}

fn tone(a: ToneArgs) -> Result<i32, Exit> {
    let output = one_based("--output", a.output)?;
    let n_ch = a.channels.unwrap_or(output);
    let ok = n_ch >= output
        && a.freq_hz > 0.0
        && a.freq_hz < f64::from(a.rate_hz) / 2.0
        && a.duration_s > 0.0
        && a.duration_s <= 600.0
        && (-120.0..=0.0).contains(&a.tone_dbfs);
    if !ok {
        return Err(Exit::bad_input(anyhow::anyhow!(
            "calibrate tone: expected --channels ≥ --output, 0 < --freq-hz < rate/2, 0 < \
             --duration-s ≤ 600 and -120 ≤ --tone-dbfs ≤ 0"
        )));
    }
    let amp = 10f64.powf(a.tone_dbfs / 20.0);
    let n = (a.duration_s * f64::from(a.rate_hz)).round() as usize;
    let w = 2.0 * std::f64::consts::PI * a.freq_hz / f64::from(a.rate_hz);
    let mut channels = vec![vec![0.0f32; n]; n_ch];
    for (i, s) in channels[output - 1].iter_mut().enumerate() {
        *s = (amp * (w * i as f64).sin()) as f32;
    }
    let bytes = crate::wav::encode_wav_f32(a.rate_hz, &channels).map_err(Exit::bad_input)?;
    write_atomic(&a.out, &bytes).map_err(Exit::bad_input)?;
    println!(
        "wrote {}: {} Hz at {} dBFS peak on output {output} of {n_ch}, {} s",
        a.out.display(),
        a.freq_hz,
        a.tone_dbfs,
        a.duration_s
    );
    Ok(super::EXIT_PASS)
}
