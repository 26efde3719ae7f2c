//! The calibration file: YAML in, YAML out, and the canonical form its SHA-256 is taken over.
//!
//! ```yaml
//! station: larkspur-line3-st1
//! date_utc: "2026-12-02T04:40:00Z"      # when it was made
//! due_date: "2027-01-01"                # last day it may be used (UTC, inclusive)
//! operator: j.okafor
//! instruments:
//!   - {role: calibrator, model: "Fernhill SC-2 class 1", serial: "FH-40117"}
//!   - {role: meter, model: "Quillon DM-6", serial: "QD-2290"}
//! microphone:                           # per input channel, 1-based
//!   1:
//!     fs_per_pa: 0.0501187              # rms full scale per Pa rms
//!     reading: {nominal_hz: 1000, level_db_spl: 94, measured_hz: 1000.02,
//!               level_dbfs: -25.98, level_spread_db: 0.004, thd_percent: 0.3,
//!               snr_db: 61.2, measured_utc: "2026-12-02T04:38:10Z"}   # optional
//! drive:                                # per output channel, 1-based
//!   1:
//!     volts_peak_per_fs: 1.4142         # volts per sample value: a full-scale sine's peak
//!     reading: {method: meter, tone_hz: 1000, tone_dbfs: -20, measured_v_rms: 0.1,
//!               measured_utc: "2026-12-02T04:39:00Z"}                 # optional
//! monitor:                              # optional; per drive-monitor input, 1-based
//!   3:
//!     volts_peak_per_fs: 2.0            # volts at the input per sample value
//! ```
//!
//! Problems are reported as `path:line:col: message`, all at once.
//!
//! # Canonical form (a contract: auditors recompute it)
//!
//! `sha256` is the lowercase hex SHA-256 of one JSON document with no whitespace, keys sorted
//! by their bytes, numbers as serde_json 1 writes an `f64` (shortest round trip, `-0.0` as
//! `0.0`), absent optional values as `null`:
//!
//! ```text
//! {"canonical":"tragus-calibration/1","date_utc":S,
//!  "drive":{"<output>":{"reading":DR|null,"volts_peak_per_fs":R},...},
//!  "due_date":"YYYY-MM-DD",
//!  "instruments":[{"model":S,"role":S,"serial":S},...],            (file order)
//!  "microphone":{"<input>":{"fs_per_pa":R,"reading":MR|null},...},
//!  "monitor":{"<input>":{"volts_peak_per_fs":R},...},      (only when not empty)
//!  "operator":S,"station":S}
//! MR = {"level_db_spl":R,"level_dbfs":R,"level_spread_db":R,"measured_hz":R,
//!       "measured_utc":S,"nominal_hz":R,"snr_db":R,"thd_percent":R}
//! DR = {"input_volts_peak_per_fs":R|null,"measured_utc":S,"measured_v_rms":R,
//!       "method":S,"tone_dbfs":R,"tone_hz":R}
//! ```
//!
//! Channel keys are the 1-based channel numbers as decimal strings (sorted as strings).
//! `monitor` is left out when there is none, so a calibration without drive monitors hashes
//! as it did before they existed.
//! Comments, layout and the order of keys in the file do not change the hash; any value does.

use super::{
    Calibration, CalibrationError, DriveCalibration, DriveReading, Instrument, MicCalibration,
    MicReading, MonitorCalibration,
};
use crate::config::{
    found, found_scalar, parse_tree, sort_problems, FileError, Location, NodeReader, Pos, Problem,
};
use marked_yaml::Node;
use serde_json::{json, Value};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

/// Name of this version of the canonical form, written into it.
pub const CANONICAL_FORM: &str = "tragus-calibration/1";

const TOP_KEYS: [&str; 8] = [
    "station",
    "date_utc",
    "due_date",
    "operator",
    "instruments",
    "microphone",
    "drive",
    "monitor",
];
const MIC_READING_KEYS: [&str; 8] = [
    "nominal_hz",
    "level_db_spl",
    "measured_hz",
    "level_dbfs",
    "level_spread_db",
    "thd_percent",
    "snr_db",
    "measured_utc",
];
const DRIVE_READING_KEYS: [&str; 6] = [
    "method",
    "tone_hz",
    "tone_dbfs",
    "measured_v_rms",
    "input_volts_peak_per_fs",
    "measured_utc",
];

/// Load and validate a calibration file (read by [`crate::config::load_file`]).
pub fn load_calibration(path: &Path) -> Result<Calibration, CalibrationError> {
    crate::config::load_file(path, load_calibration_str)
}

impl FileError for CalibrationError {
    fn unreadable(path: String, source: std::io::Error) -> Self {
        CalibrationError::Io { path, source }
    }

    fn invalid(problems: Vec<Problem>) -> Self {
        CalibrationError::Invalid(problems)
    }
}

/// Load a calibration from text; `path` labels problems.
pub fn load_calibration_str(text: &str, path: &Path) -> Result<Calibration, CalibrationError> {
    let label = path.display().to_string();
    let (root, mut problems) = parse_tree(text, &label, "calibration");
    let mut v = NodeReader::new(label.clone(), PathBuf::from("."));
    let cal = root.as_ref().and_then(|r| match r {
        Node::Mapping(m) => read_top(&mut v, m, path),
        other => {
            v.report(
                Pos::of(other.span()),
                format!(
                    "expected a mapping of calibration keys, found {}",
                    found(other)
                ),
            );
            None
        }
    });
    problems.append(&mut v.problems);
    match cal {
        Some(c) if problems.is_empty() => Ok(c),
        _ => {
            if problems.is_empty() {
                problems.push(Problem {
                    location: Location {
                        path: label.clone(),
                        line: 1,
                        col: 1,
                    },
                    message: "the calibration could not be read".into(),
                });
            }
            sort_problems(&mut problems, &label);
            Err(CalibrationError::Invalid(problems))
        }
    }
}

fn required<'n>(
    v: &mut NodeReader,
    m: &'n marked_yaml::types::MarkedMappingNode,
    key: &str,
    at: Pos,
) -> Option<&'n Node> {
    let n = m.get_node(key);
    if n.is_none() {
        v.report(at, format!("missing required key `{key}`"));
    }
    n
}

fn text(v: &mut NodeReader, n: &Node, what: &str) -> Option<String> {
    v.scalar(n, what, "text")
}

fn read_top(
    v: &mut NodeReader,
    top: &marked_yaml::types::MarkedMappingNode,
    source: &Path,
) -> Option<Calibration> {
    let top_pos = top
        .keys()
        .next()
        .map_or(Pos { line: 1, col: 1 }, |k| Pos::of(k.span()));
    v.unknown_keys(top, &TOP_KEYS, "");
    let station = required(v, top, "station", top_pos).and_then(|n| text(v, n, "station"));
    let operator = required(v, top, "operator", top_pos).and_then(|n| text(v, n, "operator"));
    let date_utc = required(v, top, "date_utc", top_pos).and_then(|n| time_utc(v, n, "date_utc"));
    let due_date = required(v, top, "due_date", top_pos).and_then(|n| date(v, n, "due_date"));
    let instruments = match top.get_node("instruments") {
        None => Some(Vec::new()),
        Some(n) => instruments(v, n),
    };
    let microphone = match top.get_node("microphone") {
        None => Some(BTreeMap::new()),
        Some(n) => channels(v, n, "microphone", mic_entry),
    };
    let drive = match top.get_node("drive") {
        None => Some(BTreeMap::new()),
        Some(n) => channels(v, n, "drive", drive_entry),
    };
    let monitor = match top.get_node("monitor") {
        None => Some(BTreeMap::new()),
        Some(n) => channels(v, n, "monitor", monitor_entry),
    };
    if let (Some(d), Some(due)) = (&date_utc, &due_date) {
        if let Some(made) = parse_time_utc(d) {
            if *due < made.date() {
                let pos = top
                    .get_node("due_date")
                    .map_or(top_pos, |n| Pos::of(n.span()));
                v.report(
                    pos,
                    format!("due_date: expected a date on or after date_utc ({d}), found {due}"),
                );
                return None;
            }
        }
    }
    Some(Calibration {
        station: station?,
        date_utc: date_utc?,
        due_date: due_date?,
        operator: operator?,
        instruments: instruments?,
        microphone: microphone?,
        drive: drive?,
        monitor: monitor?,
        source: source.to_path_buf(),
    })
}

fn instruments(v: &mut NodeReader, n: &Node) -> Option<Vec<Instrument>> {
    let Node::Sequence(seq) = n else {
        v.report(
            Pos::of(n.span()),
            format!(
                "instruments: expected a list of {{role, model, serial}}, found {}",
                found(n)
            ),
        );
        return None;
    };
    let mut out = Vec::new();
    let mut ok = true;
    for (i, item) in seq.iter().enumerate() {
        let what = format!("instruments[{}]", i + 1);
        let keys = ["role", "model", "serial"];
        match v.fields(item, &what, &keys, &keys) {
            Some(f) => {
                let role = f[0].and_then(|n| text(v, n, &format!("{what}.role")));
                let model = f[1].and_then(|n| text(v, n, &format!("{what}.model")));
                let serial = f[2].and_then(|n| text(v, n, &format!("{what}.serial")));
                match (role, model, serial) {
                    (Some(role), Some(model), Some(serial)) => out.push(Instrument {
                        role,
                        model,
                        serial,
                    }),
                    _ => ok = false,
                }
            }
            None => ok = false,
        }
    }
    ok.then_some(out)
}

/// A mapping from 1-based channel numbers to entries.
fn channels<T>(
    v: &mut NodeReader,
    n: &Node,
    what: &str,
    entry: fn(&mut NodeReader, &Node, &str) -> Option<T>,
) -> Option<BTreeMap<usize, T>> {
    let Node::Mapping(m) = n else {
        v.report(
            Pos::of(n.span()),
            format!(
                "{what}: expected a mapping from channel numbers (1, 2, ...) to entries, found {}",
                found(n)
            ),
        );
        return None;
    };
    let mut out = BTreeMap::new();
    let mut ok = true;
    for (k, val) in m.iter() {
        let ch = match k.as_str().trim().parse::<usize>() {
            Ok(c) if (1..=1024).contains(&c) => c,
            _ => {
                v.report(
                    Pos::of(k.span()),
                    format!(
                        "{what}: expected a channel number from 1 to 1024 (1-based), found {}",
                        found_scalar(k.as_str())
                    ),
                );
                ok = false;
                continue;
            }
        };
        match entry(v, val, &format!("{what}.{ch}")) {
            Some(e) => {
                out.insert(ch, e);
            }
            None => ok = false,
        }
    }
    ok.then_some(out)
}

fn positive(v: &mut NodeReader, n: Option<&Node>, what: &str, unit: &str) -> Option<f64> {
    n.and_then(|n| v.positive(n, what, unit))
}

fn number(v: &mut NodeReader, n: Option<&Node>, what: &str) -> Option<f64> {
    n.and_then(|n| v.number(n, what))
}

fn mic_entry(v: &mut NodeReader, n: &Node, what: &str) -> Option<MicCalibration> {
    let f = v.fields(n, what, &["fs_per_pa", "reading"], &["fs_per_pa"])?;
    let fs_per_pa = positive(v, f[0], &format!("{what}.fs_per_pa"), "FS/Pa");
    let reading = match f[1] {
        None => Some(None),
        Some(r) => {
            let w = format!("{what}.reading");
            let g = v.fields(r, &w, &MIC_READING_KEYS, &MIC_READING_KEYS)?;
            let nominal_hz = positive(v, g[0], &format!("{w}.nominal_hz"), "Hz");
            let level_db_spl = number(v, g[1], &format!("{w}.level_db_spl"));
            let measured_hz = positive(v, g[2], &format!("{w}.measured_hz"), "Hz");
            let level_dbfs = number(v, g[3], &format!("{w}.level_dbfs"));
            let level_spread_db = number(v, g[4], &format!("{w}.level_spread_db"));
            let thd_percent = number(v, g[5], &format!("{w}.thd_percent"));
            let snr_db = number(v, g[6], &format!("{w}.snr_db"));
            let measured_utc = g[7].and_then(|n| time_utc(v, n, &format!("{w}.measured_utc")));
            Some(Some(MicReading {
                nominal_hz: nominal_hz?,
                level_db_spl: level_db_spl?,
                measured_hz: measured_hz?,
                level_dbfs: level_dbfs?,
                level_spread_db: level_spread_db?,
                thd_percent: thd_percent?,
                snr_db: snr_db?,
                measured_utc: measured_utc?,
            }))
        }
    };
    Some(MicCalibration {
        fs_per_pa: fs_per_pa?,
        reading: reading?,
    })
}

fn monitor_entry(v: &mut NodeReader, n: &Node, what: &str) -> Option<MonitorCalibration> {
    let f = v.fields(n, what, &["volts_peak_per_fs"], &["volts_peak_per_fs"])?;
    let volts_peak_per_fs = positive(v, f[0], &format!("{what}.volts_peak_per_fs"), "V/FS")?;
    Some(MonitorCalibration { volts_peak_per_fs })
}

fn drive_entry(v: &mut NodeReader, n: &Node, what: &str) -> Option<DriveCalibration> {
    let f = v.fields(
        n,
        what,
        &["volts_peak_per_fs", "reading"],
        &["volts_peak_per_fs"],
    )?;
    let volts = positive(v, f[0], &format!("{what}.volts_peak_per_fs"), "V/FS");
    let reading = match f[1] {
        None => Some(None),
        Some(r) => {
            let w = format!("{what}.reading");
            let req = [
                "method",
                "tone_hz",
                "tone_dbfs",
                "measured_v_rms",
                "measured_utc",
            ];
            let g = v.fields(r, &w, &DRIVE_READING_KEYS, &req)?;
            let method = g[0].and_then(|n| {
                let m = text(v, n, &format!("{w}.method"))?;
                if m == "meter" || m == "input" {
                    Some(m)
                } else {
                    v.report(
                        Pos::of(n.span()),
                        format!(
                            "{w}.method: expected `meter` or `input`, found {}",
                            found_scalar(&m)
                        ),
                    );
                    None
                }
            });
            let tone_hz = positive(v, g[1], &format!("{w}.tone_hz"), "Hz");
            let tone_dbfs = number(v, g[2], &format!("{w}.tone_dbfs"));
            let measured_v_rms = positive(v, g[3], &format!("{w}.measured_v_rms"), "V");
            let input = match g[4] {
                None => Some(None),
                Some(n) => v
                    .positive(n, &format!("{w}.input_volts_peak_per_fs"), "V/FS")
                    .map(Some),
            };
            let measured_utc = g[5].and_then(|n| time_utc(v, n, &format!("{w}.measured_utc")));
            Some(Some(DriveReading {
                method: method?,
                tone_hz: tone_hz?,
                tone_dbfs: tone_dbfs?,
                measured_v_rms: measured_v_rms?,
                input_volts_peak_per_fs: input?,
                measured_utc: measured_utc?,
            }))
        }
    };
    Some(DriveCalibration {
        volts_peak_per_fs: volts?,
        reading: reading?,
    })
}

fn date(v: &mut NodeReader, n: &Node, what: &str) -> Option<time::Date> {
    let s = v.scalar(n, what, "a date YYYY-MM-DD")?;
    match parse_date(s.trim()) {
        Some(d) => Some(d),
        None => {
            v.report(
                Pos::of(n.span()),
                format!(
                    "{what}: expected a date YYYY-MM-DD, found {}",
                    found_scalar(&s)
                ),
            );
            None
        }
    }
}

fn time_utc(v: &mut NodeReader, n: &Node, what: &str) -> Option<String> {
    let s = v.scalar(n, what, "a UTC time YYYY-MM-DDTHH:MM:SSZ")?;
    let s = s.trim().to_string();
    if parse_time_utc(&s).is_some() {
        Some(s)
    } else {
        v.report(
            Pos::of(n.span()),
            format!(
                "{what}: expected a UTC time YYYY-MM-DDTHH:MM:SSZ, found {}",
                found_scalar(&s)
            ),
        );
        None
    }
}

/// Parse `YYYY-MM-DD`.
pub fn parse_date(s: &str) -> Option<time::Date> {
    let b = s.as_bytes();
    if b.len() != 10 || b[4] != b'-' || b[7] != b'-' {
        return None;
    }
    let year: i32 = s.get(0..4)?.parse().ok()?;
    let month: u8 = s.get(5..7)?.parse().ok()?;
    let day: u8 = s.get(8..10)?.parse().ok()?;
    time::Date::from_calendar_date(year, time::Month::try_from(month).ok()?, day).ok()
}

/// Parse `YYYY-MM-DDTHH:MM:SSZ` (whole seconds, UTC).
pub fn parse_time_utc(s: &str) -> Option<time::PrimitiveDateTime> {
    let b = s.as_bytes();
    if b.len() != 20 || b[10] != b'T' || b[13] != b':' || b[16] != b':' || b[19] != b'Z' {
        return None;
    }
    let date = parse_date(s.get(0..10)?)?;
    let h: u8 = s.get(11..13)?.parse().ok()?;
    let m: u8 = s.get(14..16)?.parse().ok()?;
    let sec: u8 = s.get(17..19)?.parse().ok()?;
    Some(time::PrimitiveDateTime::new(
        date,
        time::Time::from_hms(h, m, sec).ok()?,
    ))
}

/// `YYYY-MM-DDTHH:MM:SSZ`.
pub(crate) fn format_time_utc(t: time::OffsetDateTime) -> String {
    let t = t.to_offset(time::UtcOffset::UTC);
    format!(
        "{:04}-{:02}-{:02}T{:02}:{:02}:{:02}Z",
        t.year(),
        u8::from(t.month()),
        t.day(),
        t.hour(),
        t.minute(),
        t.second()
    )
}

/// serde_json 1 writes `-0.0` as `-0.0`; the canonical form writes it as `0.0`.
fn real(x: f64) -> Value {
    json!(if x == 0.0 { 0.0 } else { x })
}

/// An object with keys inserted in sorted order, so the text is canonical whether or not
/// serde_json keeps insertion order.
fn obj(pairs: Vec<(&str, Value)>) -> Value {
    let sorted: BTreeMap<&str, Value> = pairs.into_iter().collect();
    let mut m = serde_json::Map::new();
    for (k, v) in sorted {
        m.insert(k.to_string(), v);
    }
    Value::Object(m)
}

fn mic_reading_value(r: &MicReading) -> Value {
    obj(vec![
        ("level_db_spl", real(r.level_db_spl)),
        ("level_dbfs", real(r.level_dbfs)),
        ("level_spread_db", real(r.level_spread_db)),
        ("measured_hz", real(r.measured_hz)),
        ("measured_utc", json!(r.measured_utc)),
        ("nominal_hz", real(r.nominal_hz)),
        ("snr_db", real(r.snr_db)),
        ("thd_percent", real(r.thd_percent)),
    ])
}

fn drive_reading_value(r: &DriveReading) -> Value {
    obj(vec![
        (
            "input_volts_peak_per_fs",
            r.input_volts_peak_per_fs.map_or(Value::Null, real),
        ),
        ("measured_utc", json!(r.measured_utc)),
        ("measured_v_rms", real(r.measured_v_rms)),
        ("method", json!(r.method)),
        ("tone_dbfs", real(r.tone_dbfs)),
        ("tone_hz", real(r.tone_hz)),
    ])
}

fn channel_map<T>(m: &BTreeMap<usize, T>, f: impl Fn(&T) -> Value) -> Value {
    let sorted: BTreeMap<String, Value> = m.iter().map(|(k, v)| (k.to_string(), f(v))).collect();
    let mut out = serde_json::Map::new();
    for (k, v) in sorted {
        out.insert(k, v);
    }
    Value::Object(out)
}

/// The canonical JSON text of a calibration (module doc).
pub fn canonical_json(c: &Calibration) -> String {
    let mut fields = vec![
        ("canonical", json!(CANONICAL_FORM)),
        ("date_utc", json!(c.date_utc)),
        (
            "drive",
            channel_map(&c.drive, |d| {
                obj(vec![
                    (
                        "reading",
                        d.reading.as_ref().map_or(Value::Null, drive_reading_value),
                    ),
                    ("volts_peak_per_fs", real(d.volts_peak_per_fs)),
                ])
            }),
        ),
        ("due_date", json!(format_date(c.due_date))),
        (
            "instruments",
            Value::Array(
                c.instruments
                    .iter()
                    .map(|i| {
                        obj(vec![
                            ("model", json!(i.model)),
                            ("role", json!(i.role)),
                            ("serial", json!(i.serial)),
                        ])
                    })
                    .collect(),
            ),
        ),
        (
            "microphone",
            channel_map(&c.microphone, |m| {
                obj(vec![
                    ("fs_per_pa", real(m.fs_per_pa)),
                    (
                        "reading",
                        m.reading.as_ref().map_or(Value::Null, mic_reading_value),
                    ),
                ])
            }),
        ),
        ("operator", json!(c.operator)),
        ("station", json!(c.station)),
    ];
    if !c.monitor.is_empty() {
        fields.push((
            "monitor",
            channel_map(&c.monitor, |m| {
                obj(vec![("volts_peak_per_fs", real(m.volts_peak_per_fs))])
            }),
        ));
    }
    obj(fields).to_string()
}

/// `YYYY-MM-DD`.
pub fn format_date(d: time::Date) -> String {
    format!("{:04}-{:02}-{:02}", d.year(), u8::from(d.month()), d.day())
}

/// A YAML scalar: a JSON string is a valid YAML double-quoted scalar.
fn q(s: &str) -> String {
    Value::String(s.to_string()).to_string()
}

/// A number as YAML reads it back to the same `f64` (Rust's shortest round-trip form).
fn n(x: f64) -> String {
    if x == 0.0 {
        "0.0".into()
    } else {
        format!("{x:?}")
    }
}

/// The YAML text `tragus calibrate` writes.
pub(crate) fn to_yaml(c: &Calibration) -> String {
    let mut out = String::new();
    out.push_str("# tragus calibration file, written by `tragus calibrate`.\n");
    out.push_str(
        "# Its SHA-256 is taken over the values (not this text) and recorded with every unit.\n",
    );
    out.push_str(&format!("station: {}\n", q(&c.station)));
    out.push_str(&format!("date_utc: {}\n", q(&c.date_utc)));
    out.push_str(&format!("due_date: {}\n", q(&format_date(c.due_date))));
    out.push_str(&format!("operator: {}\n", q(&c.operator)));
    if c.instruments.is_empty() {
        out.push_str("instruments: []\n");
    } else {
        out.push_str("instruments:\n");
        for i in &c.instruments {
            out.push_str(&format!(
                "  - {{role: {}, model: {}, serial: {}}}\n",
                q(&i.role),
                q(&i.model),
                q(&i.serial)
            ));
        }
    }
    if c.microphone.is_empty() {
        out.push_str("microphone: {}\n");
    } else {
        out.push_str("microphone:                 # per input channel, 1-based\n");
        for (ch, m) in &c.microphone {
            out.push_str(&format!(
                "  {ch}:\n    fs_per_pa: {}   # rms full scale per Pa rms\n",
                n(m.fs_per_pa)
            ));
            if let Some(r) = &m.reading {
                out.push_str(&format!(
                    "    reading:\n      nominal_hz: {}\n      level_db_spl: {}\n      measured_hz: {}\n      level_dbfs: {}\n      level_spread_db: {}\n      thd_percent: {}\n      snr_db: {}\n      measured_utc: {}\n",
                    n(r.nominal_hz),
                    n(r.level_db_spl),
                    n(r.measured_hz),
                    n(r.level_dbfs),
                    n(r.level_spread_db),
                    n(r.thd_percent),
                    n(r.snr_db),
                    q(&r.measured_utc)
                ));
            }
        }
    }
    if c.drive.is_empty() {
        out.push_str("drive: {}\n");
    } else {
        out.push_str("drive:                      # per output channel, 1-based\n");
        for (ch, d) in &c.drive {
            out.push_str(&format!(
                "  {ch}:\n    volts_peak_per_fs: {}   # volts per sample value (a full-scale sine's peak)\n",
                n(d.volts_peak_per_fs)
            ));
            if let Some(r) = &d.reading {
                out.push_str(&format!(
                    "    reading:\n      method: {}\n      tone_hz: {}\n      tone_dbfs: {}\n      measured_v_rms: {}\n",
                    q(&r.method),
                    n(r.tone_hz),
                    n(r.tone_dbfs),
                    n(r.measured_v_rms)
                ));
                if let Some(g) = r.input_volts_peak_per_fs {
                    out.push_str(&format!("      input_volts_peak_per_fs: {}\n", n(g)));
                }
                out.push_str(&format!("      measured_utc: {}\n", q(&r.measured_utc)));
            }
        }
    }
    if !c.monitor.is_empty() {
        out.push_str("monitor:                    # per drive-monitor input, 1-based\n");
        for (ch, m) in &c.monitor {
            out.push_str(&format!(
                "  {ch}:\n    volts_peak_per_fs: {}   # volts at the input per sample value\n",
                n(m.volts_peak_per_fs)
            ));
        }
    }
    out
}
