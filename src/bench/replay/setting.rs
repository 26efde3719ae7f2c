//! What is built once per distinct archived input of a replay: the archived plans and
//! station files written back into a private directory, the new plan prepared on each
//! (station file, calibration file, fixture model), the plan each record was tested with
//! (its stimulus and routing), and whether a record's capture fits the new plan.

use super::super::prepare::{load, Prepared};
use super::super::reanalyze::{archived_input, materialise_station, playback, Playback, TempDir};
use super::super::BenchError;
use crate::analysis::Analyzer;
use crate::correction::PlanCorrections;
use crate::dsp::sweep::Stimulus;
use crate::plan::{LevelUnit, Plan};
use crate::station::StationInfo;
use crate::store::{InputBundle, Store, StoredRecord};
use std::collections::HashMap;
use std::path::{Path, PathBuf};
use std::sync::Mutex;

/// The new plan prepared on one (station file, calibration file, fixture model): loaded
/// once, with its stimulus and correction tables; analyzers (one per thread at work, as
/// each keeps scratch buffers) are made from it on demand and reused.
pub(super) struct Setting {
    /// The plan after the station's channel map and fixture.
    pub plan: Plan,
    stimulus: Stimulus,
    corrections: PlanCorrections,
    /// The station's identity as results record it (`None`: no station file).
    pub station: Option<StationInfo>,
    idle: Mutex<Vec<Prepared>>,
}

impl Setting {
    fn new(prep: Prepared, station: Option<StationInfo>) -> Setting {
        Setting {
            plan: prep.plan.clone(),
            stimulus: prep.stimulus.clone(),
            corrections: prep.corrections.clone(),
            station,
            idle: Mutex::new(vec![prep]),
        }
    }

    /// A prepared bench of this setting for one record: an idle one, or a new one sharing
    /// the plan, stimulus and correction tables (only the analyzer is built). Give it back
    /// with [`Setting::put`].
    pub fn take(&self) -> Result<Prepared, String> {
        if let Some(p) = self.idle.lock().unwrap_or_else(|p| p.into_inner()).pop() {
            return Ok(p);
        }
        let analyzer = Analyzer::new(&self.plan, &self.stimulus).map_err(|e| e.to_string())?;
        Ok(Prepared {
            plan: self.plan.clone(),
            stimulus: self.stimulus.clone(),
            analyzer,
            corrections: self.corrections.clone(),
            calibration: crate::result::CalibrationInfo::uncalibrated(),
            calibration_offsets_db: None,
        })
    }

    /// Give back a bench taken with [`Setting::take`].
    pub fn put(&self, prep: Prepared) {
        self.idle
            .lock()
            .unwrap_or_else(|p| p.into_inner())
            .push(prep);
    }
}

/// The plan a record was tested with, after its station's channel map: what its capture
/// holds.
struct Origin {
    stimulus: Stimulus,
    /// `(name, output, input)` per plan channel, in plan order.
    channels: Vec<(String, usize, usize)>,
    level_unit: LevelUnit,
}

/// One record ready to judge, or why it cannot be.
pub(super) type Task = Result<Ready, String>;

/// What a record's judging needs besides the record.
pub(super) struct Ready {
    /// Index of its [`Setting`].
    pub setting: usize,
    /// What was played.
    pub playback: Playback,
    /// Per new-plan channel, the index of the same channel in the plan the unit was tested
    /// with (whose order `playback`'s per-channel lists follow).
    pub channel_map: Vec<usize>,
    /// Channels of the plan the unit was tested with.
    pub n_origin_channels: usize,
    /// The capture file.
    pub capture: PathBuf,
}

/// Every archived input of a replay, read, written back and loaded once.
pub(super) struct Settings {
    tmp: TempDir,
    n_dirs: usize,
    new_plan: PathBuf,
    new_sha256: String,
    /// The new plan's stimulus before any station's channel map (the sweep does not depend
    /// on the routing).
    new_stimulus: Result<Stimulus, String>,
    /// Directories written, with what they hold in words (for messages).
    labels: Vec<(PathBuf, String)>,
    /// Plan bundle SHA-256 → its tree (main file, fixture file and the fixture's SHA-256).
    plans: HashMap<String, Result<PlanTree, String>>,
    /// (station bundle, calibration bundle) → the station loaded from its written tree.
    stations: HashMap<(String, String), Result<Option<crate::station::Station>, String>>,
    /// (plan bundle, station bundle, calibration bundle) → the plan the unit was tested with.
    origins: HashMap<(String, String, String), Result<Origin, String>>,
    /// (station bundle, calibration bundle, fixture SHA-256) → index into `list`.
    index: HashMap<(String, String, String), Result<usize, String>>,
    list: Vec<Setting>,
}

struct PlanTree {
    main: PathBuf,
    fixture: Option<(PathBuf, String)>,
}

impl Settings {
    /// Empty caches for the new plan at `path` (loaded as `plan`).
    pub fn new(path: &Path, plan: &Plan) -> Result<Settings, BenchError> {
        Ok(Settings {
            tmp: TempDir::new()?,
            n_dirs: 0,
            new_plan: path.to_path_buf(),
            new_sha256: plan.sha256.clone(),
            new_stimulus: Stimulus::from_plan(plan).map_err(|e| e.to_string()),
            labels: Vec::new(),
            plans: HashMap::new(),
            stations: HashMap::new(),
            origins: HashMap::new(),
            index: HashMap::new(),
            list: Vec::new(),
        })
    }

    /// The setting at `i` (of a [`Ready`] task).
    pub fn get(&self, i: usize) -> &Setting {
        &self.list[i]
    }

    /// A new directory for the archived input `role` of SHA-256 `sha`.
    fn fresh_dir(&mut self, role: &str, sha: &str) -> PathBuf {
        self.n_dirs += 1;
        let dir = self.tmp.path().join(format!("{role}-{}", self.n_dirs));
        let short: String = sha.chars().take(12).collect();
        self.labels
            .push((dir.clone(), format!("archived {role} {short}…:")));
        dir
    }

    /// `message` with the private directories' paths replaced by what they hold.
    fn readable(&self, message: String) -> String {
        let mut m = message;
        for (dir, label) in &self.labels {
            let prefix = format!("{}/", dir.display());
            while let Some(at) = m.find(&prefix) {
                let mut end = at + prefix.len();
                while m[end..].starts_with("up/") {
                    end += 3;
                }
                m.replace_range(at..end, &format!("{label} "));
            }
        }
        m
    }

    /// Everything `record` needs that is shared with others, built the first time.
    pub fn task(&mut self, store: &Store, record: &StoredRecord) -> Task {
        self.task_of(store, record).map_err(|e| self.readable(e))
    }

    fn task_of(&mut self, store: &Store, record: &StoredRecord) -> Task {
        let playback = playback(record).map_err(|e| e.to_string())?;
        let bundle = |role: &str| -> Result<Option<InputBundle>, String> {
            archived_input(store, record, role).map_err(|e| e.to_string())
        };
        let links = super::super::reanalyze::input_links(record).map_err(|e| e.to_string())?;
        let sha = |role: &str| links.get(role).cloned().unwrap_or_default();
        let (plan_sha, station_sha, cal_sha) = (sha("plan"), sha("station"), sha("calibration"));
        if plan_sha.is_empty() {
            return Err(format!(
                "record #{} links no archived plan (recorded without archived inputs)",
                record.id
            ));
        }

        if !self.plans.contains_key(&plan_sha) {
            let tree = match bundle("plan") {
                Ok(Some(b)) => {
                    let dir = self.fresh_dir("plan", &plan_sha);
                    write_plan(&b, &dir)
                }
                Ok(None) => Err("no archived plan".to_string()),
                Err(e) => Err(e),
            };
            self.plans.insert(plan_sha.clone(), tree);
        }
        let station_key = (station_sha.clone(), cal_sha.clone());
        if !self.stations.contains_key(&station_key) {
            let loaded = match (bundle("station"), bundle("calibration")) {
                (Ok(None), _) => Ok(None),
                (Ok(Some(st)), Ok(cal)) => {
                    let dir = self.fresh_dir("station", &station_sha);
                    materialise_station(&st, cal.as_ref(), &dir)
                        .map(Some)
                        .map_err(|e| e.to_string())
                }
                (Err(e), _) | (_, Err(e)) => Err(e),
            };
            self.stations.insert(station_key.clone(), loaded);
        }
        let tree = self.plans[&plan_sha].as_ref().map_err(Clone::clone)?;
        let station = self.stations[&station_key].as_ref().map_err(Clone::clone)?;

        let origin_key = (plan_sha.clone(), station_sha.clone(), cal_sha.clone());
        if !self.origins.contains_key(&origin_key) {
            let origin = load_origin(&tree.main, station.as_ref(), &record.plan_sha256);
            self.origins.insert(origin_key.clone(), origin);
        }
        let origin = self.origins[&origin_key].as_ref().map_err(Clone::clone)?;
        same_sweep(origin, self.new_stimulus.as_ref().map_err(Clone::clone)?)?;
        let fixture_sha = tree
            .fixture
            .as_ref()
            .map(|(_, s)| s.clone())
            .unwrap_or_default();
        let setting_key = (station_sha, cal_sha, fixture_sha);
        if !self.index.contains_key(&setting_key) {
            let fixture = tree.fixture.as_ref().map(|(p, _)| p.as_path());
            let made = Prepared::on_station(&self.new_plan, station.as_ref(), fixture)
                .map_err(|e| format!("the new plan does not load on this record's station: {e}"))
                .and_then(|prep| {
                    if prep.plan.sha256 == self.new_sha256 {
                        Ok(prep)
                    } else {
                        Err(format!(
                            "{}: the plan file changed during the replay (sha256 {} then {})",
                            self.new_plan.display(),
                            self.new_sha256,
                            prep.plan.sha256
                        ))
                    }
                })
                .map(|prep| {
                    self.list
                        .push(Setting::new(prep, station.as_ref().map(|s| s.info())));
                    self.list.len() - 1
                });
            self.index.insert(setting_key.clone(), made);
        }
        let setting = self.index[&setting_key].clone()?;
        let origin = self.origins[&origin_key].as_ref().map_err(Clone::clone)?;
        let channel_map = fits(origin, &self.list[setting])?;
        Ok(Ready {
            setting,
            playback,
            channel_map,
            n_origin_channels: origin.channels.len(),
            capture: store.capture_path(&record.capture_sha256),
        })
    }
}

/// Write a plan bundle into `dir`: its main file and its `--fixture` model, if any.
fn write_plan(b: &InputBundle, dir: &Path) -> Result<PlanTree, String> {
    let main = b.write_tree(dir)?;
    let fixture = match (b.option_path(dir, "fixture"), b.options.get("fixture")) {
        (Some(path), Some(rel)) => {
            let text = b.files.get(rel).map(String::as_str).unwrap_or_default();
            Some((path, crate::digest::sha256_hex(text.as_bytes())))
        }
        _ => None,
    };
    Ok(PlanTree { main, fixture })
}

/// The plan a record was tested with, loaded from its archive on its station; its hash
/// must be the record's.
fn load_origin(
    plan: &Path,
    station: Option<&crate::station::Station>,
    plan_sha256: &str,
) -> Result<Origin, String> {
    let mut p = load(plan).map_err(|e| format!("its archived plan does not load: {e}"))?;
    if p.sha256 != plan_sha256 {
        return Err(format!(
            "its archived plan loads with sha256 {}, but the record was judged by plan_sha256 \
             {plan_sha256}",
            p.sha256
        ));
    }
    if let Some(st) = station {
        st.apply_to_plan(&mut p)
            .map_err(|e| format!("its archived plan does not load on its station: {e}"))?;
    }
    let stimulus = Stimulus::from_plan(&p).map_err(|e| e.to_string())?;
    Ok(Origin {
        stimulus,
        channels: p
            .channels
            .iter()
            .map(|c| (c.name.clone(), c.output, c.input))
            .collect(),
        level_unit: p.level_unit,
    })
}

/// Whether a capture of `origin` can be judged under `plan` (the new plan on the same
/// station): the same stimulus sample for sample (hence rate, sweep, level, silences and
/// driven outputs), every channel of the new plan routed as it was when the unit was
/// tested, the same level unit. Returns the channel map ([`Ready::channel_map`]).
fn fits(origin: &Origin, setting: &Setting) -> Result<Vec<usize>, String> {
    let (old, new, plan) = (&origin.stimulus, &setting.stimulus, &setting.plan);
    same_sweep(origin, new)?;
    if old != new {
        return Err(format!(
            "the new plan plays its sweep on outputs {:?} with {} samples, the captured \
             stimulus was on outputs {:?} with {} samples",
            new.driven_outputs,
            new.n_samples(),
            old.driven_outputs,
            old.n_samples()
        ));
    }
    if origin.level_unit != plan.level_unit {
        return Err(format!(
            "the new plan's levels are in {}, the unit was judged in {}",
            plan.level_unit.name(),
            origin.level_unit.name()
        ));
    }
    let mut map = Vec::with_capacity(plan.channels.len());
    for c in &plan.channels {
        let Some(i) = origin.channels.iter().position(|(n, _, _)| *n == c.name) else {
            return Err(format!(
                "the new plan's channel `{}` was not a channel of the plan the unit was tested \
                 with ({})",
                c.name,
                origin
                    .channels
                    .iter()
                    .map(|(n, _, _)| n.as_str())
                    .collect::<Vec<_>>()
                    .join(", ")
            ));
        };
        let (_, output, input) = &origin.channels[i];
        if (*output, *input) != (c.output, c.input) {
            return Err(format!(
                "the new plan routes channel `{}` output {} → input {}, the unit was tested \
                 with output {} → input {}",
                c.name,
                c.output + 1,
                c.input + 1,
                output + 1,
                input + 1
            ));
        }
        map.push(i);
    }
    Ok(map)
}

/// The capture holds the new plan's sweep: same sample rate, same sweep (frequencies,
/// duration, level, fades, leading silence).
fn same_sweep(origin: &Origin, new: &Stimulus) -> Result<(), String> {
    let old = &origin.stimulus;
    if old.sample_rate_hz != new.sample_rate_hz {
        return Err(format!(
            "the new plan samples at {} Hz, the capture was made at {} Hz",
            new.sample_rate_hz, old.sample_rate_hz
        ));
    }
    if old.sweep != new.sweep {
        let (a, b) = (&old.sweep, &new.sweep);
        let words = |p: &crate::dsp::sweep::SweepParams| {
            format!(
                "{} to {} in {:.4} s at {:.2} dB FS peak, from sample {}",
                crate::checks::format_hz(p.f1_hz),
                crate::checks::format_hz(p.f2_hz),
                p.duration_s,
                20.0 * p.amplitude.log10(),
                p.start_sample
            )
        };
        return Err(format!(
            "the new plan plays another sweep ({}) than the captured one ({})",
            words(b),
            words(a)
        ));
    }
    Ok(())
}
