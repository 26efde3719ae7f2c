//! Reading a station file: YAML node tree → checks at each node → [`Station`].

use super::{
    Caps, ChannelRoute, DriveMonitor, Mode, RigKind, Station, StationError, StationFixture,
    BUFFER_FRAMES_RANGE, CLOCK_DRIFT_RANGE_PPM, DEFAULT_MAX_CLOCK_DRIFT_PPM, MAX_CHANNEL_NUMBER,
};
use crate::config::{
    found, found_scalar, is_channel_name, is_id, parse_tree, sort_problems, suggest, FileError,
    NodeReader, Pos, Problem,
};
use crate::models::coupler::{load_model, ModelError};
use crate::station::audio::SoundcardSpec;
use marked_yaml::types::MarkedMappingNode;
use marked_yaml::Node;
use sha2::{Digest, Sha256};
use std::path::{Path, PathBuf};

const TOP_KEYS: [&str; 14] = [
    "station",
    "description",
    "mode",
    "rig",
    "audio",
    "channels",
    "drive_monitors",
    "fixture",
    "fixture_tap",
    "calibration",
    "store",
    "signing_key",
    "caps",
    "max_retests",
];
const AUDIO_KEYS: [&str; 6] = [
    "host",
    "output_device",
    "input_device",
    "buffer_frames",
    "loopback",
    "max_clock_drift_ppm",
];
const CAPS_KEYS: [&str; 7] = [
    "max_drive_v_rms",
    "max_drive_v_peak",
    "max_digital_dbfs",
    "max_spl_mic_peak_db",
    "max_spl_mic_dba",
    "max_spl_reference_peak_db",
    "max_spl_reference_dba",
];
/// Sound pressure levels a cap may name, dB SPL: above 0 and below 194 dB, where the
/// rarefaction would reach vacuum at one atmosphere (common practice).
const SPL_RANGE_DB: (f64, f64) = (0.0, 194.0);
/// Drive voltages a cap may name, V: a line-level converter output does not exceed tens of
/// volts; larger values are typos (common practice).
const DRIVE_RANGE_V: (f64, f64) = (0.001, 50.0);
/// Digital peak levels a cap may name, dBFS.
const DIGITAL_RANGE_DBFS: (f64, f64) = (-120.0, 0.0);

/// Load and validate a station file (read by [`crate::config::load_file`]); its fixture
/// model is loaded too (its problems are reported at the model file's own positions).
pub fn load_station(path: &Path) -> Result<Station, StationError> {
    crate::config::load_file(path, load_station_str)
}

impl FileError for StationError {
    fn unreadable(path: String, source: std::io::Error) -> Self {
        StationError::Io { path, source }
    }

    fn invalid(problems: Vec<Problem>) -> Self {
        StationError::Invalid(problems)
    }
}

/// Load a station from text; `path` labels problems and anchors relative paths.
pub fn load_station_str(text: &str, path: &Path) -> Result<Station, StationError> {
    let label = path.display().to_string();
    let (root, mut problems) = parse_tree(text, &label, "station file");
    let mut r = Reader {
        v: NodeReader::new(
            label.clone(),
            path.parent().unwrap_or(Path::new(".")).to_path_buf(),
        ),
        extra: Vec::new(),
    };
    let station = root.as_ref().and_then(|n| match n {
        Node::Mapping(m) => r.station(m, text, path),
        _ => None,
    });
    problems.append(&mut r.v.problems);
    sort_problems(&mut problems, &label);
    // Problems of the fixture model file come after the station's own, in their file order.
    problems.append(&mut r.extra);
    match station {
        Some(s) if problems.is_empty() => Ok(s),
        _ => {
            if problems.is_empty() {
                problems.push(Problem {
                    location: Pos::default().at(&label),
                    message: "the station file could not be read".into(),
                });
            }
            Err(StationError::Invalid(problems))
        }
    }
}

struct Reader {
    v: NodeReader,
    /// Problems in other files (the fixture model).
    extra: Vec<Problem>,
}

fn pos(n: &Node) -> Pos {
    Pos::of(n.span())
}

impl Reader {
    fn station(&mut self, top: &MarkedMappingNode, text: &str, source: &Path) -> Option<Station> {
        let top_pos = top
            .keys()
            .next()
            .map_or(Pos { line: 1, col: 1 }, |k| Pos::of(k.span()));
        self.v.unknown_keys(top, &TOP_KEYS, "");

        let id = match top.get_node("station") {
            None => {
                self.v
                    .report(top_pos, "missing required key `station`".into());
                None
            }
            Some(n) => self.v.scalar(n, "station", "an id").and_then(|s| {
                if is_id(&s) {
                    Some(s)
                } else {
                    self.v.report(
                        pos(n),
                        format!(
                            "station: expected an id of lowercase letters, digits, `.`, `_` and \
                             `-`, starting with a letter or digit, found {}",
                            found_scalar(&s)
                        ),
                    );
                    None
                }
            }),
        };
        let description = match top.get_node("description") {
            None => Some(String::new()),
            Some(n) => self.v.scalar(n, "description", "text"),
        };
        let mode = match top.get_node("mode") {
            None => Some(Mode::Production),
            Some(n) => self.choice(
                n,
                "mode",
                &[
                    ("production", Mode::Production),
                    ("engineering", Mode::Engineering),
                ],
            ),
        };
        let rig = match top.get_node("rig") {
            None => Some(RigKind::Simulated),
            Some(n) => self.choice(
                n,
                "rig",
                &[
                    ("simulated", RigKind::Simulated),
                    ("soundcard", RigKind::Soundcard),
                ],
            ),
        };
        let (channels, partial) = match top.get_node("channels") {
            None => (Some(Vec::new()), Vec::new()),
            Some(n) => self.channels(n),
        };
        let soundcard = match top.get_node("audio") {
            None => Some(SoundcardSpec {
                host: None,
                output_device: None,
                input_device: None,
                buffer_frames: None,
                loopback_input: None,
                loopback_output: None,
                extra_inputs: Vec::new(),
                max_clock_drift_ppm: DEFAULT_MAX_CLOCK_DRIFT_PPM,
            }),
            Some(n) => self.audio(n, &partial),
        };
        let drive_monitors = match top.get_node("drive_monitors") {
            None => Some(Vec::new()),
            Some(n) => self.drive_monitors(n, &partial, soundcard.as_ref()),
        };
        let fixture = self.fixture(top);
        let calibration = match top.get_node("calibration") {
            None => {
                if mode == Some(Mode::Production) {
                    let at = top.get_node("mode").map_or(top_pos, pos);
                    self.v.report(
                        at,
                        "mode production: missing required key `calibration` (a production \
                         station measures calibrated units; write `mode: engineering` for a \
                         bench without a calibration)"
                            .into(),
                    );
                    None
                } else {
                    Some(None)
                }
            }
            Some(n) => self.existing_file(n, "calibration").map(Some),
        };
        let store = match top.get_node("store") {
            None => Some(None),
            Some(n) => self
                .v
                .scalar(n, "store", "a directory path")
                .map(|s| Some(self.v.dir.join(s))),
        };
        // Absolute, so the key is found whatever the working directory of whoever reads it.
        let signing_key = match top.get_node("signing_key") {
            None => Some(None),
            Some(n) => self
                .existing_file(n, "signing_key")
                .map(|p| Some(std::path::absolute(&p).unwrap_or(p))),
        };
        let caps = match top.get_node("caps") {
            None => Some(Caps::default()),
            Some(n) => self.caps(n),
        };
        let max_retests = match top.get_node("max_retests") {
            None => Some(None),
            Some(n) => self
                .int_in(
                    n,
                    "max_retests",
                    0,
                    i128::from(crate::plan::MAX_RETESTS_LIMIT),
                )
                .map(|x| Some(x as u32)),
        };

        Some(Station {
            id: id?,
            description: description?,
            mode: mode?,
            rig: rig?,
            soundcard: soundcard?,
            channels: channels?,
            drive_monitors: drive_monitors?,
            fixture: fixture?,
            calibration: calibration?,
            store: store?,
            signing_key: signing_key?,
            caps: caps?,
            max_retests: max_retests?,
            sha256: hex::encode(Sha256::digest(text.as_bytes())),
            source: source.to_path_buf(),
        })
    }

    /// One of a few names.
    fn choice<T: Copy>(&mut self, n: &Node, what: &str, names: &[(&str, T)]) -> Option<T> {
        let list = names.iter().map(|(k, _)| *k).collect::<Vec<_>>();
        let s = self
            .v
            .scalar(n, what, &format!("one of {}", list.join(", ")))?;
        if let Some((_, t)) = names.iter().find(|(k, _)| *k == s) {
            return Some(*t);
        }
        let hint = match suggest(&s, list.iter().copied()) {
            Some(x) => format!("did you mean `{x}`?"),
            None => format!("expected one of {}", list.join(", ")),
        };
        self.v.report(
            pos(n),
            format!("{what}: unknown value {}, {hint}", found_scalar(&s)),
        );
        None
    }

    /// A whole number in `[lo, hi]`.
    fn int_in(&mut self, n: &Node, what: &str, lo: i128, hi: i128) -> Option<i128> {
        let text = self.v.scalar(n, what, "a whole number")?;
        match text.trim().replace('_', "").parse::<i128>() {
            Ok(x) if (lo..=hi).contains(&x) => Some(x),
            Ok(x) => {
                self.v.report(
                    pos(n),
                    format!("{what}: expected a whole number from {lo} to {hi}, found {x}"),
                );
                None
            }
            Err(_) => {
                self.v.report(
                    pos(n),
                    format!(
                        "{what}: expected a whole number, found {}",
                        found_scalar(&text)
                    ),
                );
                None
            }
        }
    }

    /// A 1-based device channel number, returned 0-based.
    fn channel_number(&mut self, n: &Node, what: &str) -> Option<usize> {
        self.int_in(n, what, 1, MAX_CHANNEL_NUMBER as i128)
            .map(|x| x as usize - 1)
    }

    /// `{output: N, input: M}`, 0-based; each part `None` where it is missing or wrong.
    fn pair_parts(&mut self, n: &Node, what: &str) -> (Option<usize>, Option<usize>) {
        let Some(f) = self
            .v
            .fields(n, what, &["output", "input"], &["output", "input"])
        else {
            return (None, None);
        };
        let output = f[0].and_then(|n| self.channel_number(n, &format!("{what}.output")));
        let input = f[1].and_then(|n| self.channel_number(n, &format!("{what}.input")));
        (output, input)
    }

    /// `{output: N, input: M}`, 0-based.
    fn pair(&mut self, n: &Node, what: &str) -> Option<(usize, usize)> {
        match self.pair_parts(n, what) {
            (Some(o), Some(i)) => Some((o, i)),
            _ => None,
        }
    }

    /// The channel map; also returns the routes that could be read when others could
    /// not (so the loopback is still checked against them).
    fn channels(&mut self, node: &Node) -> (Option<Vec<ChannelRoute>>, Vec<ChannelRoute>) {
        let Node::Mapping(m) = node else {
            self.v.report(
                pos(node),
                format!(
                    "channels: expected a mapping from plan channel names to {{output: N, \
                     input: M}}, found {}",
                    found(node)
                ),
            );
            return (None, Vec::new());
        };
        let mut routes = Vec::new();
        let mut ok = true;
        // (number, channel name) of outputs and inputs already mapped, for duplicates.
        let mut seen: [Vec<(usize, String)>; 2] = [Vec::new(), Vec::new()];
        for (k, v) in m.iter() {
            let name = k.as_str();
            if !is_channel_name(name) {
                self.v.report(
                    Pos::of(k.span()),
                    format!(
                        "channels: expected a channel name of lowercase letters, digits, `_` \
                         and `-`, found {}",
                        found_scalar(name)
                    ),
                );
                ok = false;
                continue;
            }
            let what = format!("channels.{name}");
            let (output, input) = self.pair_parts(v, &what);
            for (side, (number, key)) in [(output, "output"), (input, "input")]
                .into_iter()
                .enumerate()
            {
                let Some(number) = number else { continue };
                if let Some((_, other)) = seen[side].iter().find(|(x, _)| *x == number) {
                    let at = match v {
                        Node::Mapping(vm) => vm.get_node(key).map_or(pos(v), pos),
                        _ => pos(v),
                    };
                    self.v.report(
                        at,
                        format!(
                            "{what}.{key}: expected a device {key} no other channel uses, \
                             found {} (also channel {other})",
                            number + 1
                        ),
                    );
                    ok = false;
                }
                seen[side].push((number, name.to_string()));
            }
            match (output, input) {
                (Some(output), Some(input)) => routes.push(ChannelRoute {
                    name: name.to_string(),
                    output,
                    input,
                }),
                _ => ok = false,
            }
        }
        (ok.then(|| routes.clone()), routes)
    }

    fn audio(&mut self, node: &Node, channels: &[ChannelRoute]) -> Option<SoundcardSpec> {
        let f = self.v.fields(node, "audio", &AUDIO_KEYS, &[])?;
        let text = |r: &mut Self, i: usize, what: &str| -> Option<Option<String>> {
            match f[i] {
                None => Some(None),
                Some(n) => r.v.scalar(n, what, "a name").map(Some),
            }
        };
        let host = text(self, 0, "audio.host");
        let output_device = text(self, 1, "audio.output_device");
        let input_device = text(self, 2, "audio.input_device");
        let buffer_frames = match f[3] {
            None => Some(None),
            Some(n) => self
                .int_in(
                    n,
                    "audio.buffer_frames",
                    BUFFER_FRAMES_RANGE.0,
                    BUFFER_FRAMES_RANGE.1,
                )
                .map(|x| Some(x as u32)),
        };
        let loopback = match f[4] {
            None => Some(None),
            Some(n) => {
                let p = self.pair(n, "audio.loopback");
                if let Some((_, input)) = p {
                    if let Some(r) = channels.iter().find(|r| r.input == input) {
                        let at = match n {
                            Node::Mapping(m) => m.get_node("input").map_or(pos(n), pos),
                            _ => pos(n),
                        };
                        self.v.report(
                            at,
                            format!(
                                "audio.loopback.input: expected an input that no channel \
                                 records, found {} (the input of channel {})",
                                input + 1,
                                r.name
                            ),
                        );
                        // Reported; the keys after it are still checked.
                        None
                    } else {
                        Some(p)
                    }
                } else {
                    None
                }
            }
        };
        let max_clock_drift_ppm = match f[5] {
            None => Some(DEFAULT_MAX_CLOCK_DRIFT_PPM),
            Some(n) => self.v.number_in(
                n,
                "audio.max_clock_drift_ppm",
                CLOCK_DRIFT_RANGE_PPM,
                " ppm",
            ),
        };
        let loopback = loopback?;
        Some(SoundcardSpec {
            host: host?,
            output_device: output_device?,
            input_device: input_device?,
            buffer_frames: buffer_frames?,
            loopback_input: loopback.map(|(_, i)| i),
            loopback_output: loopback.map(|(o, _)| o),
            extra_inputs: Vec::new(),
            max_clock_drift_ppm: max_clock_drift_ppm?,
        })
    }

    /// `drive_monitors:`, a list of `{output: N, input: M}`: each output's amplifier output
    /// wired back into an input of known volts per full scale (the calibration's `monitor:`).
    /// Outputs and inputs unique; an input no channel records; the loopback input only for
    /// the loopback's own output (it is the same wire).
    fn drive_monitors(
        &mut self,
        node: &Node,
        channels: &[ChannelRoute],
        audio: Option<&SoundcardSpec>,
    ) -> Option<Vec<DriveMonitor>> {
        let Node::Sequence(items) = node else {
            self.v.report(
                pos(node),
                format!(
                    "drive_monitors: expected a list of {{output: N, input: M}}, found {}",
                    found(node)
                ),
            );
            return None;
        };
        let mut out: Vec<DriveMonitor> = Vec::new();
        let mut ok = true;
        for (k, item) in items.iter().enumerate() {
            let what = format!("drive_monitors[{k}]");
            let Some((output, input)) = self.pair(item, &what) else {
                ok = false;
                continue;
            };
            let at = |key: &str| match item {
                Node::Mapping(m) => m.get_node(key).map_or(pos(item), pos),
                _ => pos(item),
            };
            let mut problem = |r: &mut Self, key: &str, message: String| {
                r.v.report(at(key), format!("{what}.{key}: {message}"));
                ok = false;
            };
            if out.iter().any(|m| m.output == output) {
                problem(
                    self,
                    "output",
                    format!(
                        "expected an output no other monitor watches, found {}",
                        output + 1
                    ),
                );
            }
            if out.iter().any(|m| m.input == input) {
                problem(
                    self,
                    "input",
                    format!(
                        "expected an input no other monitor uses, found {}",
                        input + 1
                    ),
                );
            }
            if let Some(r) = channels.iter().find(|r| r.input == input) {
                problem(
                    self,
                    "input",
                    format!(
                        "expected an input that no channel records, found {} (the input of \
                         channel {})",
                        input + 1,
                        r.name
                    ),
                );
            }
            if let Some(a) = audio {
                if a.loopback_input == Some(input) && a.loopback_output != Some(output) {
                    problem(
                        self,
                        "input",
                        format!(
                            "expected the loopback input {} to monitor the loopback's own \
                             output {}, found output {}",
                            input + 1,
                            a.loopback_output.map_or(0, |o| o + 1),
                            output + 1
                        ),
                    );
                }
            }
            out.push(DriveMonitor { output, input });
        }
        ok.then_some(out)
    }

    /// A file that must exist, resolved against the station file's directory.
    fn existing_file(&mut self, n: &Node, what: &str) -> Option<PathBuf> {
        let s = self.v.scalar(n, what, "a file path")?;
        let p = self.v.dir.join(&s);
        if p.is_file() {
            Some(p)
        } else {
            self.v.report(
                pos(n),
                format!(
                    "{what}: expected an existing file, found {} ({} does not exist)",
                    found_scalar(&s),
                    p.display()
                ),
            );
            None
        }
    }

    /// `fixture:` and `fixture_tap:`. `Some(None)` when the station names no fixture.
    fn fixture(&mut self, top: &MarkedMappingNode) -> Option<Option<StationFixture>> {
        let tap = match top.get_node("fixture_tap") {
            None => Some(None),
            Some(n) => self.v.scalar(n, "fixture_tap", "a tap name").map(Some),
        };
        let Some(n) = top.get_node("fixture") else {
            if let Some(t) = top.get_node("fixture_tap") {
                self.v.report(
                    pos(t),
                    "fixture_tap: expected it together with `fixture` (the model whose tap it \
                     names), found no `fixture`"
                        .into(),
                );
                return None;
            }
            return Some(None);
        };
        let file = self.existing_file(n, "fixture")?;
        let model = match load_model(&file) {
            Ok(m) => m,
            Err(ModelError::Invalid(mut problems)) => {
                self.v.report(
                    pos(n),
                    format!(
                        "fixture: expected a valid coupler model, found {} problem(s) in {}",
                        problems.len(),
                        file.display()
                    ),
                );
                self.extra.append(&mut problems);
                return None;
            }
            Err(e) => {
                self.v.report(pos(n), format!("fixture: {e}"));
                return None;
            }
        };
        let tap = tap?;
        if let (Some(t), Some(tn)) = (&tap, top.get_node("fixture_tap")) {
            let taps = model.tap_names();
            if !taps.contains(&t.as_str()) {
                self.v.report(
                    pos(tn),
                    format!(
                        "fixture_tap: expected a tap of {} ({}), found {}",
                        model.id,
                        taps.join(", "),
                        found_scalar(t)
                    ),
                );
                return None;
            }
        }
        Some(Some(StationFixture { model, tap }))
    }

    fn caps(&mut self, node: &Node) -> Option<Caps> {
        let f = self.v.fields(node, "caps", &CAPS_KEYS, &[])?;
        let d = Caps::default();
        let get = |r: &mut Self, i: usize, default: f64, range: (f64, f64), unit: &str| match f[i] {
            None => Some(default),
            Some(n) => {
                r.v.number_in(n, &format!("caps.{}", CAPS_KEYS[i]), range, unit)
            }
        };
        let caps = Caps {
            max_drive_v_rms: get(self, 0, d.max_drive_v_rms, DRIVE_RANGE_V, " V")?,
            max_drive_v_peak: get(self, 1, d.max_drive_v_peak, DRIVE_RANGE_V, " V")?,
            max_digital_dbfs: get(self, 2, d.max_digital_dbfs, DIGITAL_RANGE_DBFS, " dBFS")?,
            max_spl_mic_peak_db: get(self, 3, d.max_spl_mic_peak_db, SPL_RANGE_DB, " dB SPL")?,
            max_spl_mic_dba: get(self, 4, d.max_spl_mic_dba, SPL_RANGE_DB, " dB(A)")?,
            max_spl_reference_peak_db: get(
                self,
                5,
                d.max_spl_reference_peak_db,
                SPL_RANGE_DB,
                " dB SPL",
            )?,
            max_spl_reference_dba: get(self, 6, d.max_spl_reference_dba, SPL_RANGE_DB, " dB(A)")?,
        };
        // A signal's peak is never below its rms value (crest factor ≥ 1), so such caps
        // contradict each other.
        if caps.max_drive_v_peak < caps.max_drive_v_rms {
            let at = f[1].or(f[0]).map_or(Pos::default(), pos);
            self.v.report(
                at,
                format!(
                    "caps.max_drive_v_peak: expected at least max_drive_v_rms ({} V; a peak is \
                     never below the rms value), found {} V",
                    caps.max_drive_v_rms, caps.max_drive_v_peak
                ),
            );
            return None;
        }
        // An A-weighted level more than 1.3 dB above the peak cap can only be a typo: an rms
        // level never exceeds the peak, and A-weighting adds at most 1.3 dB (IEC 61672-1
        // Table 2, +1.3 dB at 2.5 kHz).
        for (a, peak, name) in [(4, 3, "max_spl_mic"), (6, 5, "max_spl_reference")] {
            let (la, lp) = match a {
                4 => (caps.max_spl_mic_dba, caps.max_spl_mic_peak_db),
                _ => (caps.max_spl_reference_dba, caps.max_spl_reference_peak_db),
            };
            if la > lp + 1.3 {
                let at = f[a].or(f[peak]).map_or(Pos::default(), pos);
                self.v.report(
                    at,
                    format!(
                        "caps.{name}_dba: expected at most {name}_peak_db + 1.3 dB ({} dB(A); \
                         A-weighting adds at most 1.3 dB), found {la} dB(A)",
                        lp + 1.3
                    ),
                );
                return None;
            }
        }
        Some(caps)
    }
}
