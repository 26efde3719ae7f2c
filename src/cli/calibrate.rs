//! `tragus calibrate mic|drive|monitor|tone`: make or update the station's calibration file.
//!
//! A reading comes from a WAV file (`--capture`) or is recorded through the sound card
//! (`--record SECONDS`, feature `soundcard`): the calibrator on a microphone input, or the
//! calibration tone played on a drive output and recorded through an input of known volts
//! per full scale. A recording with an xrun or a stream fault is refused (exit 3) and a
//! reading that is not a clean tone is refused (exit 2); either way nothing is written.
//!
//! A reading updates one channel's entry of the file named by `--out` (default: the
//! `calibration:` of the `--station FILE`; created when missing, or anew with `--fresh`),
//! written atomically. The file's date becomes now; its due date
//! becomes today + `--due-days` (default [`DEFAULT_DUE_DAYS`]), but never later than the due
//! date it already had unless `--fresh` starts it over: a new microphone reading does not
//! make an old drive reading younger.

use super::soundcard_args::SoundcardArgs;
use super::{write_atomic, Exit, JsonOut};
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
    /// A drive-monitor input: its volts per full scale, from the interface's certificate or
    /// data sheet (a drive reading through an input records that input's gain too).
    Monitor(MonitorArgs),
    /// Write the sine `calibrate drive` expects to be played, as 32-bit float WAV.
    Tone(ToneArgs),
}

/// Options every reading shares.
#[derive(Debug, clap::Args)]
pub struct Common {
    /// The calibration file to create or update; default: the station file's
    /// `calibration:`.
    #[arg(long, value_name = "CAL.yaml")]
    pub out: Option<PathBuf>,
    /// Start the file anew instead of updating it.
    #[arg(long)]
    pub fresh: bool,
    /// Station file: the calibration belongs to its station id, `--record` uses its audio
    /// settings, and `--out` defaults to its `calibration:` path.
    #[arg(long, value_name = "FILE")]
    pub station: Option<PathBuf>,
    /// Station id the calibration belongs to when no station file is given (default: the
    /// file's, else `bench-1`).
    #[arg(long, value_name = "ID", conflicts_with = "station")]
    pub station_id: Option<String>,
    /// Who calibrates (defaults to $USER).
    #[arg(long)]
    pub operator: Option<String>,
    /// Days until the calibration is due.
    #[arg(long, default_value_t = DEFAULT_DUE_DAYS, value_name = "DAYS")]
    pub due_days: u32,
    /// Write what was measured and the calibration written as one JSON document here (`-`
    /// for stdout: the human lines then go nowhere).
    #[arg(long, value_name = "OUT")]
    pub json: Option<JsonOut>,
    /// Sound-card options for `--record` (override the station's `audio:` settings).
    #[command(flatten)]
    pub soundcard: SoundcardArgs,
}

/// Arguments of `calibrate mic`.
#[derive(Debug, clap::Args)]
pub struct MicArgs {
    /// Recording of the calibrator tone (WAV; other channels are ignored).
    #[arg(long, value_name = "FILE.wav", required_unless_present = "record")]
    pub capture: Option<PathBuf>,
    /// Record the calibrator through the sound card for this long instead (the outputs
    /// play silence meanwhile), s.
    #[arg(long, value_name = "SECONDS", conflicts_with = "capture")]
    pub record: Option<f64>,
    /// Sample rate of `--record`, Hz.
    #[arg(long, default_value_t = 48_000, value_name = "HZ", requires = "record")]
    pub rate_hz: u32,
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
    /// Input method through the sound card: play the sine (`--tone-dbfs`, `--freq-hz`) on
    /// `--output` for this long while recording `--input`, s.
    #[arg(
        long,
        value_name = "SECONDS",
        conflicts_with_all = ["capture", "measured_v_rms"],
        requires_all = ["input", "input_volts_peak_per_fs"]
    )]
    pub record: Option<f64>,
    /// Sample rate of `--record`, Hz.
    #[arg(long, default_value_t = 48_000, value_name = "HZ", requires = "record")]
    pub rate_hz: u32,
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

/// Arguments of `calibrate monitor`.
#[derive(Debug, clap::Args)]
pub struct MonitorArgs {
    /// Input channel (1-based) an amplifier output is wired back into.
    #[arg(long, value_name = "N")]
    pub input: usize,
    /// That input's volts per full scale (instantaneous: a full-scale sine's peak).
    #[arg(long, value_name = "V")]
    pub volts_peak_per_fs: f64,
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
        What::Monitor(a) => monitor(a),
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

/// The station file of `--station`, if given.
fn load_station(common: &Common) -> Result<Option<crate::station::Station>, Exit> {
    common
        .station
        .as_deref()
        .map(|p| crate::bench::load_station(p).map_err(Exit::from))
        .transpose()
}

/// The file to update (or a new one), with date, due date, operator and station set. The
/// station id comes from the station file, else `--station-id`, else the file's own.
fn start(common: &Common, station: Option<&crate::station::Station>) -> Result<Calibration, Exit> {
    let out = match (&common.out, station) {
        (Some(p), _) => p.clone(),
        (None, Some(st)) => st.calibration.clone().ok_or_else(|| {
            Exit::bad_input(anyhow::anyhow!(
                "--out: expected a calibration file to write; the station file {} names no \
                 `calibration:`",
                st.source.display()
            ))
        })?,
        (None, None) => {
            return Err(Exit::bad_input(anyhow::anyhow!(
                "--out: expected a calibration file to write (or --station FILE whose \
                 `calibration:` names one)"
            )))
        }
    };
    let station_id = station
        .map(|s| s.id.clone())
        .or_else(|| common.station_id.clone());
    let today = Calibration::today_utc();
    let due = today
        .checked_add(time::Duration::days(i64::from(common.due_days)))
        .ok_or_else(|| Exit::bad_input(anyhow::anyhow!("--due-days: too far ahead")))?;
    let operator = common
        .operator
        .clone()
        .or_else(|| std::env::var("USER").ok())
        .unwrap_or_else(|| "unknown".into());
    let existing = if !common.fresh && out.exists() {
        Some(load_calibration(&out).map_err(|e| match e {
            CalibrationError::Invalid(p) => Exit::problems("calibration", &p),
            other => Exit::bad_input(other),
        })?)
    } else {
        None
    };
    let mut cal = match existing {
        Some(mut c) => {
            if let Some(s) = &station_id {
                if *s != c.station {
                    return Err(Exit::bad_input(anyhow::anyhow!(
                        "station `{s}`: {} belongs to station `{}`; use --fresh to start a \
                         calibration for `{s}`",
                        out.display(),
                        c.station
                    )));
                }
            }
            c.due_date = c.due_date.min(due);
            c
        }
        None => Calibration {
            station: station_id.unwrap_or_else(|| "bench-1".into()),
            date_utc: String::new(),
            due_date: due,
            operator: String::new(),
            instruments: Vec::new(),
            microphone: BTreeMap::new(),
            drive: BTreeMap::new(),
            monitor: BTreeMap::new(),
            source: out,
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

/// Write the file; say `what` was measured and what was written, in words and, with
/// `--json`, as `{"measured": measured, "calibration": {...}}`.
fn finish(
    cal: &Calibration,
    what: &str,
    measured: serde_json::Value,
    json: Option<&JsonOut>,
) -> Result<i32, Exit> {
    let path = &cal.source;
    write_atomic(path, cal.to_yaml().as_bytes()).map_err(Exit::bad_input)?;
    if let Some(j) = json {
        let doc = serde_json::json!({
            "measured": measured,
            "calibration": {
                "path": path,
                "sha256": cal.sha256(),
                "station": cal.station,
                "date_utc": cal.date_utc,
                "due_date": format_date(cal.due_date),
                "operator": cal.operator,
                "instruments": cal.instruments.iter().map(|i| serde_json::json!({
                    "role": i.role, "model": i.model, "serial": i.serial,
                })).collect::<Vec<_>>(),
                "microphone": cal.microphone.iter().map(|(n, m)| serde_json::json!({
                    "input": n, "fs_per_pa": m.fs_per_pa,
                })).collect::<Vec<_>>(),
                "drive": cal.drive.iter().map(|(n, d)| serde_json::json!({
                    "output": n, "volts_peak_per_fs": d.volts_peak_per_fs,
                })).collect::<Vec<_>>(),
                "monitor": cal.monitor.iter().map(|(n, m)| serde_json::json!({
                    "input": n, "volts_peak_per_fs": m.volts_peak_per_fs,
                })).collect::<Vec<_>>(),
            },
        });
        j.write(&doc).map_err(Exit::bad_input)?;
        if j.is_stdout() {
            return Ok(super::EXIT_PASS);
        }
    }
    outln!(
        "{what}\nwrote {} (due {}, sha256 {})",
        path.display(),
        format_date(cal.due_date),
        cal.sha256()
    );
    Ok(super::EXIT_PASS)
}

/// Where a reading's samples come from, for messages: the WAV's path or the sound card.
fn source_label(capture: Option<&Path>) -> String {
    capture.map_or_else(|| "sound card".into(), |p| p.display().to_string())
}

/// `--record SECONDS` checked: long enough for a tone reading, short enough to hold.
fn record_samples(seconds: f64, rate_hz: u32) -> Result<usize, Exit> {
    use crate::calibration::tone::MIN_DURATION_S;
    // The tone reading judges the middle 80 % of what it is given (tone.rs); a drive
    // recording is cut to the tone's own length, so the tone itself must be long enough.
    let max_s = 600.0;
    if !(seconds.is_finite() && (MIN_DURATION_S..=max_s).contains(&seconds)) {
        return Err(Exit::bad_input(anyhow::anyhow!(
            "--record: expected {MIN_DURATION_S} to {max_s} s, found {seconds}"
        )));
    }
    if !(8_000..=384_000).contains(&rate_hz) {
        return Err(Exit::bad_input(anyhow::anyhow!(
            "--rate-hz: expected 8000 to 384000 Hz, found {rate_hz}"
        )));
    }
    Ok((seconds * f64::from(rate_hz)).round() as usize)
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
    let station = load_station(&a.common)?;
    // The file is checked before anything is recorded: a reading is not thrown away for a
    // file problem found afterwards.
    let mut cal = start(&a.common, station.as_ref())?;
    let (rate, samples) = match (&a.capture, a.record) {
        (Some(path), _) => wav_channel(path, input, "--input")?,
        (None, Some(seconds)) => {
            let n = record_samples(seconds, a.rate_hz)?;
            let spec = a.common.soundcard.spec_for(station.as_ref());
            // Silence on output 1 (every station has one): the recording primitive plays
            // and records together, and silence disturbs no calibrator.
            let rec = crate::calibration::record::record_through_soundcard(
                spec,
                (0, input - 1),
                a.rate_hz,
                &[vec![0.0; n]],
            )
            .map_err(recording_exit)?;
            (a.rate_hz, rec)
        }
        (None, None) => {
            return Err(Exit::bad_input(anyhow::anyhow!(
                "calibrate mic: expected --capture FILE.wav or --record SECONDS"
            )))
        }
    };
    let m = calibrate_microphone(&samples, rate, a.level_db, a.freq_hz).map_err(|e| {
        Exit::bad_input(anyhow::anyhow!(
            "{} input {input}: {e}; nothing was written",
            source_label(a.capture.as_deref())
        ))
    })?;
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
    let measured = serde_json::json!({
        "kind": "microphone",
        "input": input,
        "fs_per_pa": m.fs_per_pa,
        "reading": m.reading.as_ref().map(|r| serde_json::json!({
            "nominal_hz": r.nominal_hz, "level_db_spl": r.level_db_spl,
            "measured_hz": r.measured_hz, "level_dbfs": r.level_dbfs,
            "level_spread_db": r.level_spread_db, "thd_percent": r.thd_percent,
            "snr_db": r.snr_db, "measured_utc": r.measured_utc,
        })),
    });
    cal.microphone.insert(input, m);
    finish(&cal, &what, measured, a.common.json.as_ref())
}

fn monitor(a: MonitorArgs) -> Result<i32, Exit> {
    let input = one_based("--input", a.input)?;
    let v = a.volts_peak_per_fs;
    if !(v.is_finite() && v > 0.0) {
        return Err(Exit::bad_input(anyhow::anyhow!(
            "--volts-peak-per-fs: expected a gain above 0 V per full scale, found {v}"
        )));
    }
    let station = load_station(&a.common)?;
    let mut cal = start(&a.common, station.as_ref())?;
    cal.monitor.insert(
        input,
        crate::calibration::MonitorCalibration {
            volts_peak_per_fs: v,
        },
    );
    finish(
        &cal,
        &format!("drive-monitor input {input}: {v:.6} V peak per FS"),
        serde_json::json!({"kind": "monitor", "input": input, "volts_peak_per_fs": v}),
        a.common.json.as_ref(),
    )
}

fn drive(a: DriveArgs) -> Result<i32, Exit> {
    let output = one_based("--output", a.output)?;
    let station = load_station(&a.common)?;
    let mut cal = start(&a.common, station.as_ref())?;
    let (d, instrument) = match (a.measured_v_rms, &a.capture, a.record) {
        (Some(v), None, None) => {
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
        (None, Some(_), None) | (None, None, Some(_)) => {
            let input = one_based("--input", a.input.unwrap_or(0))?;
            let gain = a.input_volts_peak_per_fs.unwrap_or(f64::NAN);
            let (rate, samples) = match (&a.capture, a.record) {
                (Some(path), _) => wav_channel(path, input, "--input")?,
                (None, seconds) => {
                    let seconds = seconds.unwrap_or(f64::NAN);
                    (
                        a.rate_hz,
                        record_drive_tone(&a, station.as_ref(), output, input, seconds, gain)?,
                    )
                }
            };
            let d =
                drive_from_input(&samples, rate, gain, a.tone_dbfs, a.freq_hz).map_err(|e| {
                    Exit::bad_input(anyhow::anyhow!(
                        "{} input {input}: {e}; nothing was written",
                        source_label(a.capture.as_deref())
                    ))
                })?;
            // The input's gain was known to read the drive: it is that input's monitor
            // gain too (used when the station wires a drive monitor into it).
            cal.monitor.insert(
                input,
                crate::calibration::MonitorCalibration {
                    volts_peak_per_fs: gain,
                },
            );
            (d, None)
        }
        _ => {
            return Err(Exit::bad_input(anyhow::anyhow!(
                "calibrate drive: expected --measured-v-rms V (meter), or --capture FILE.wav or \
                 --record SECONDS with --input N --input-volts-peak-per-fs V (calibrated input)"
            )))
        }
    };
    if let Some((m, s)) = instrument {
        add_instrument(&mut cal, "meter", &m, &s);
    }
    let what = format!(
        "output {output}: {:.6} V peak per FS ({:.4} V rms for a full-scale sine)",
        d.volts_peak_per_fs,
        d.volts_peak_per_fs / std::f64::consts::SQRT_2
    );
    let measured = serde_json::json!({
        "kind": "drive",
        "output": output,
        "volts_peak_per_fs": d.volts_peak_per_fs,
        "reading": d.reading.as_ref().map(|r| serde_json::json!({
            "method": r.method, "tone_hz": r.tone_hz, "tone_dbfs": r.tone_dbfs,
            "measured_v_rms": r.measured_v_rms,
            "input_volts_peak_per_fs": r.input_volts_peak_per_fs,
            "measured_utc": r.measured_utc,
        })),
    });
    cal.drive.insert(output, d);
    finish(&cal, &what, measured, a.common.json.as_ref())
}

/// Fade at each end of the tone `calibrate drive --record` plays, s: a hard start clicks
/// in the transducer; the reading judges only the middle 80 % of the tone anyway.
const DRIVE_FADE_S: f64 = 0.01;

use crate::dsp::signals::{faded_sine, sine};

/// Play the calibration sine on `output` and return the part of `input`'s recording that
/// holds it ([`crate::calibration::record`]).
fn record_drive_tone(
    a: &DriveArgs,
    station: Option<&crate::station::Station>,
    output: usize,
    input: usize,
    seconds: f64,
    gain: f64,
) -> Result<Vec<f32>, Exit> {
    let n = record_samples(seconds, a.rate_hz)?;
    // Checked before playing: nothing out of range reaches the output.
    let ok = gain > 0.0
        && (-60.0..=0.0).contains(&a.tone_dbfs)
        && a.freq_hz > 0.0
        && a.freq_hz < f64::from(a.rate_hz) / 2.0;
    if !ok {
        return Err(Exit::bad_input(anyhow::anyhow!(
            "calibrate drive --record: expected --input-volts-peak-per-fs above 0, --tone-dbfs \
             from -60 to 0 and 0 < --freq-hz < rate/2, found {gain} V, {} dBFS, {} Hz",
            a.tone_dbfs,
            a.freq_hz
        )));
    }
    let amp = 10f64.powf(a.tone_dbfs / 20.0);
    let fade = ((DRIVE_FADE_S * f64::from(a.rate_hz)) as usize).min(n / 2);
    let tone = faded_sine(amp, a.freq_hz, a.rate_hz, n, fade);
    let spec = a.common.soundcard.spec_for(station);
    crate::calibration::record::record_drive_tone(spec, output, input, a.rate_hz, tone)
        .map_err(recording_exit)
}

/// A recording that failed: bad input when the user can fix it, retest when the rig failed.
fn recording_exit(e: crate::calibration::record::RecordError) -> Exit {
    if e.is_bad_input() {
        Exit::bad_input(e)
    } else {
        Exit::retest(e)
    }
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
    let mut channels = vec![vec![0.0f32; n]; n_ch];
    channels[output - 1] = sine(amp, a.freq_hz, a.rate_hz, n);
    let bytes = crate::wav::encode_wav_f32(a.rate_hz, &channels).map_err(Exit::bad_input)?;
    write_atomic(&a.out, &bytes).map_err(Exit::bad_input)?;
    outln!(
        "wrote {}: {} Hz at {} dBFS peak on output {output} of {n_ch}, {} s",
        a.out.display(),
        a.freq_hz,
        a.tone_dbfs,
        a.duration_s
    );
    Ok(super::EXIT_PASS)
}
