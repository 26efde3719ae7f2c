//! The plan's `correction:` section: every problem in the plan and in the files it names
//! reported at once with its position (messages are part of the interface), and the plan
//! hash following the correction's values, not its file paths.

use crate::support::common;

use std::fs;
use std::path::{Path, PathBuf};
use tragus::plan::{load_plan, Plan, PlanError};

/// A directory holding the test couplers, a two-tap fixture, the Ember E2 earphone and a
/// plan written from `plan_text`; returns (dir guard, plan path).
fn setup(plan_text: &str) -> (tempfile::TempDir, PathBuf) {
    let dir = tempfile::tempdir().unwrap();
    let data = common::root().join("tests/data/correction");
    for f in [
        "fixture-test.yaml",
        "reference-test.yaml",
        "zero-impedance.csv",
    ] {
        fs::copy(data.join(f), dir.path().join(f)).unwrap();
    }
    fs::copy(
        common::root().join("reference/earphones/ember-e2.yaml"),
        dir.path().join("ember-e2.yaml"),
    )
    .unwrap();
    fs::write(
        dir.path().join("two-taps.yaml"),
        "coupler: two-taps\nelements:\n  - tap: inlet\n  - tube: {length_mm: 3, radius_mm: 1.5}\n  \
         - cavity: {volume_mm3: 500}\n  - tap: mic\ntermination: rigid\n",
    )
    .unwrap();
    let path = dir.path().join("plan.yaml");
    fs::write(&path, plan_text).unwrap();
    (dir, path)
}

const PLAN: &str = "\
plan: corr-test
revision: 1
sample_rate_hz: 48000
stimulus: {start_hz: 20, stop_hz: 20000, duration_s: 1.0, level_dbfs: -12}
correction:
  fixture: two-taps.yaml
  fixture_tap: mic
  reference: reference-test.yaml
  reference_tap: mic
  source: {virtual_earphone: ember-e2.yaml}
channels:
  - {name: left, output: 1, input: 1}
  - {name: right, output: 2, input: 2}
checks:
  - {id: pol, kind: polarity, expected: positive}
";

fn load(text: &str) -> Result<Plan, Vec<String>> {
    let (_dir, path) = setup(text);
    let dir = path.parent().unwrap().display().to_string();
    load_plan(&path).map_err(|e| match e {
        PlanError::Invalid(problems) => problems
            .iter()
            .map(|p| p.to_string().replace(&format!("{dir}/"), ""))
            .collect(),
        other => vec![other.to_string()],
    })
}

fn problems(text: &str) -> Vec<String> {
    load(text).expect_err("the plan should be refused")
}

#[test]
fn plan_wide_correction_applies_to_every_channel_and_none_turns_it_off() {
    let plan = load(PLAN).unwrap();
    let c = plan.channels[0].correction.as_ref().unwrap();
    assert_eq!(c.fixture.id, "two-taps");
    assert_eq!(c.reference.id, "test-reference");
    assert_eq!(c.source.kind_name(), "virtual_earphone");
    assert_eq!(plan.channels[1].correction, plan.channels[0].correction);

    let text = PLAN.replace(
        "{name: right, output: 2, input: 2}",
        "{name: right, output: 2, input: 2, correction: none}",
    );
    let plan = load(&text).unwrap();
    assert!(plan.channels[0].correction.is_some());
    assert!(plan.channels[1].correction.is_none());

    // A channel's own section overrides the plan's.
    let text = PLAN.replace(
        "{name: right, output: 2, input: 2}",
        "{name: right, output: 2, input: 2, correction: {fixture: fixture-test.yaml, \
         fixture_tap: mic, reference: reference-test.yaml, reference_tap: mic, \
         source: volume_velocity}}",
    );
    let plan = load(&text).unwrap();
    let right = plan.channels[1].correction.as_ref().unwrap();
    assert_eq!(right.fixture.id, "test-fixture");
    assert_eq!(right.source.kind_name(), "volume_velocity");
}

#[test]
fn missing_model_file_is_reported_at_the_plan_value() {
    let p = problems(&PLAN.replace("fixture: two-taps.yaml", "fixture: nowhere.yaml"));
    assert_eq!(p.len(), 1, "{p:?}");
    assert!(
        p[0].starts_with("plan.yaml:6:12: correction.fixture: cannot read coupler model file ")
            && p[0].ends_with("nowhere.yaml: file not found"),
        "{p:?}"
    );
}

#[test]
fn problems_inside_a_model_are_at_the_model_files_positions() {
    let (dir, path) = setup(PLAN);
    fs::write(
        dir.path().join("reference-test.yaml"),
        "coupler: bad\nelements:\n  - tube: {length_mm: 3, radius_mm: -1}\n  - tap: mic\n\
         termination: rigd\n",
    )
    .unwrap();
    let err = load_plan(&path).unwrap_err().to_string();
    let d = format!("{}/", dir.path().display());
    let lines: Vec<String> = err.lines().map(|l| l.replace(&d, "")).collect();
    assert_eq!(
        lines,
        [
            "reference-test.yaml:3:37: correction.reference: elements[1].tube.radius_mm: \
             expected a value above 0 mm, found -1",
            "reference-test.yaml:5:14: correction.reference: termination: expected rigid, \
             open_baffled, open_unbaffled, {impedance_csv: FILE} or {eardrum: MODEL}, found \
             `rigd`, did you mean `rigid`?",
        ]
    );
}

#[test]
fn unknown_tap_lists_the_models_taps() {
    let p = problems(&PLAN.replace("fixture_tap: mic", "fixture_tap: outlet"));
    assert_eq!(
        p,
        [
            "plan.yaml:7:16: correction.fixture_tap: expected a tap of coupler two-taps \
          (inlet, mic), found `outlet`"
        ]
    );
}

#[test]
fn unknown_source_kind_and_keys_get_did_you_mean() {
    let p = problems(&PLAN.replace("virtual_earphone: ember", "virtual_earpone: ember"));
    assert_eq!(
        p,
        [
            "plan.yaml:10:12: correction.source: unknown key `virtual_earpone`, did you mean \
          `virtual_earphone`?"
        ]
    );
    let p = problems(&PLAN.replace(
        "source: {virtual_earphone: ember-e2.yaml}",
        "source: volume_velocty\n  referense: x",
    ));
    assert_eq!(
        p,
        [
            "plan.yaml:10:11: correction.source: expected volume_velocity, \
             {virtual_earphone: FILE} or {thevenin_csv: FILE}, found `volume_velocty`, did \
             you mean `volume_velocity`?",
            "plan.yaml:11:3: correction: unknown key `referense`, did you mean `reference`?",
        ]
    );
    let p = problems(&PLAN.replace(
        "{name: right, output: 2, input: 2}",
        "{name: right, output: 2, input: 2, correction: nne}",
    ));
    assert_eq!(
        p,
        [
            "plan.yaml:13:52: channel right: correction: expected a mapping with fixture, \
          fixture_tap, reference, reference_tap and source, or `none`, found `nne`, did you \
          mean `none`?"
        ]
    );
}

#[test]
fn bad_earphone_file_is_reported_in_the_earphone_file() {
    let (dir, path) = setup(PLAN);
    let text = fs::read_to_string(dir.path().join("ember-e2.yaml"))
        .unwrap()
        .replace("sd_mm2: 60 ", "sd_mm2: -60")
        .replace("bl_t_m: 0.5", "bl_tm: 0.5");
    fs::write(dir.path().join("ember-e2.yaml"), text).unwrap();
    let err = load_plan(&path).unwrap_err().to_string();
    let d = format!("{}/", dir.path().display());
    let lines: Vec<String> = err.lines().map(|l| l.replace(&d, "")).collect();
    assert_eq!(
        lines,
        [
            "ember-e2.yaml:8:1: correction.source.virtual_earphone: missing required key \
             `bl_t_m`",
            "ember-e2.yaml:14:1: correction.source.virtual_earphone: unknown key `bl_tm`, did \
             you mean `bl_t_m`?",
            "ember-e2.yaml:18:9: correction.source.virtual_earphone: sd_mm2: expected a value \
             above 0 mm², found -60",
        ]
    );
}

#[test]
fn thevenin_table_must_cover_the_analysed_band() {
    let (dir, path) = setup(&PLAN.replace(
        "source: {virtual_earphone: ember-e2.yaml}",
        "source: {thevenin_csv: zs.csv}",
    ));
    fs::write(
        dir.path().join("zs.csv"),
        "hz,p_re,p_im,z_re,z_im\n20,1,0,1e8,0\n20000,1,0,1e8,0\n",
    )
    .unwrap();
    let err = load_plan(&path).unwrap_err().to_string();
    assert!(
        err.ends_with(
            "plan.yaml:10:26: correction.source.thevenin_csv: expected a table covering 20 to \
             21600 Hz (the sweep, and the harmonics up to n·f that the analysis reports), \
             found 20 to 20000 Hz"
        ),
        "{err}"
    );
}

fn sha(dir: &Path, plan_text: &str) -> String {
    let path = dir.join("plan.yaml");
    fs::write(&path, plan_text).unwrap();
    load_plan(&path).unwrap().sha256
}

#[test]
fn hash_follows_model_tap_and_earphone_values_not_file_paths() {
    let (dir, path) = setup(PLAN);
    let d = dir.path();
    let base = load_plan(&path).unwrap().sha256;

    // The same files copied elsewhere and named by their new paths: same hash.
    fs::create_dir(d.join("models")).unwrap();
    for f in ["two-taps.yaml", "reference-test.yaml", "ember-e2.yaml"] {
        fs::copy(d.join(f), d.join("models").join(f)).unwrap();
    }
    let moved = PLAN
        .replace("two-taps.yaml", "models/two-taps.yaml")
        .replace("reference-test.yaml", "./models/reference-test.yaml")
        .replace("ember-e2.yaml", "models/../models/ember-e2.yaml");
    assert_eq!(sha(d, &moved), base);
    // A comment in a model file changes nothing either (the models enter by their values).
    let text = fs::read_to_string(d.join("models/two-taps.yaml")).unwrap();
    fs::write(
        d.join("models/two-taps.yaml"),
        format!("# reviewed\n{text}"),
    )
    .unwrap();
    assert_eq!(sha(d, &moved), base);

    // A model value, a tap, an earphone parameter, the source kind: each changes it.
    fs::write(
        d.join("models/two-taps.yaml"),
        text.replace("volume_mm3: 500", "volume_mm3: 501"),
    )
    .unwrap();
    assert_ne!(sha(d, &moved), base, "model value");
    assert_ne!(
        sha(d, &PLAN.replace("fixture_tap: mic", "fixture_tap: inlet")),
        base,
        "tap"
    );
    let ear = fs::read_to_string(d.join("ember-e2.yaml")).unwrap();
    fs::write(
        d.join("ember-e2.yaml"),
        ear.replace("mms_mg: 12", "mms_mg: 13"),
    )
    .unwrap();
    assert_ne!(sha(d, PLAN), base, "earphone parameter");
    fs::write(d.join("ember-e2.yaml"), &ear).unwrap();
    assert_eq!(sha(d, PLAN), base);
    assert_ne!(
        sha(
            d,
            &PLAN.replace(
                "source: {virtual_earphone: ember-e2.yaml}",
                "source: volume_velocity"
            )
        ),
        base,
        "source kind"
    );
    // Turning one channel's correction off changes it too.
    assert_ne!(
        sha(
            d,
            &PLAN.replace(
                "{name: right, output: 2, input: 2}",
                "{name: right, output: 2, input: 2, correction: none}"
            )
        ),
        base
    );
}
