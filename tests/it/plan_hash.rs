//! The plan hash: an auditor's recomputation, invariance to formatting, sensitivity to
//! values (including limit-line CSV files).

use std::fs;
use std::path::Path;
use tragus::plan::hash::canonical_json;
use tragus::plan::{load_plan, Plan};

const REFERENCE: &str = "tests/data/plans/hash/reference.yaml";

/// Load `plan_text` from a fresh directory holding `limits/upper.csv` = `csv_text`.
fn load_in_dir(plan_text: &str, csv_text: &str) -> Plan {
    let dir = tempfile::tempdir().unwrap();
    fs::create_dir(dir.path().join("limits")).unwrap();
    fs::write(dir.path().join("limits/upper.csv"), csv_text).unwrap();
    let path = dir.path().join("plan.yaml");
    fs::write(&path, plan_text).unwrap();
    load_plan(&path).unwrap_or_else(|e| panic!("{e}\n{plan_text}"))
}

fn reference_texts() -> (String, String) {
    (
        fs::read_to_string(REFERENCE).unwrap(),
        fs::read_to_string("tests/data/plans/hash/limits/upper.csv").unwrap(),
    )
}

#[test]
fn hash_matches_an_independent_implementation_of_the_canonical_form() {
    // expected.txt was written by tests/reference/plan_canonical.py (Python json + hashlib),
    // implemented from the contract in src/plan/hash.rs alone.
    let expected = fs::read_to_string("tests/data/plans/hash/expected.txt").unwrap();
    let mut lines = expected.lines();
    let (json, sha) = (lines.next().unwrap(), lines.next().unwrap());
    let plan = load_plan(Path::new(REFERENCE)).unwrap();
    assert_eq!(canonical_json(&plan), json);
    assert_eq!(plan.sha256, sha);
}

#[test]
fn formatting_does_not_change_the_hash() {
    let (text, csv) = reference_texts();
    let base = load_in_dir(&text, &csv).sha256;
    assert_eq!(base, load_plan(Path::new(REFERENCE)).unwrap().sha256);

    // Same values: keys reordered, block and flow style swapped, comments moved, strings
    // quoted, integers written as reals and back, -0.0 as 0, defaults written out, the
    // default channel list spelled out, and the CSV without header or comments.
    let reformatted = r#"
checks:
  - {kind: response, id: "fr", lower: [[20.0, -12.50], [1e3, -3], [4e4, -20]],
     upper: 'limits/upper.csv', normalize: {band_hz: [500.0, 2000]}, smoothing: "1/12",
     channels: [left, right]}
  - id: fr-left
    kind: response
    channels: [left]
    normalize:
      at_hz: 1000.000
    upper:
      - [20, 6.0]
      - [40000, 6]
  - {id: sens, kind: sensitivity, band_hz: [500, 2000], max_db: -8.0, min_db: -20}
  - {id: thd, kind: thd, band_hz: [100, 10000], max_percent: 2.50}
  - {id: hd3, kind: harmonic, band_hz: [100, 5000], max_db: -40, order: 3}
  - {id: rb, kind: rub_buzz, channels: ["right"], band_hz: [100, 8000], max_db: -35}
  - {id: pol, kind: polarity, expected: "negative"}
  - {id: bal, kind: balance, band_hz: [200, 5000], max_diff_db: 1.5}   # no smoothing
rig:
  seed: 18446744073709551615
  kind: simulated
channels:
  - name: left
    input: 2
    output: 1
  - {input: 1, name: 'right', output: 2}
analysis: {points_per_octave: 48, max_harmonic: 7, min_snr_db: 20.0}
stimulus:
  silence_after_s: 0.2
  silence_before_s: 0.050
  fade_out_s: 5e-3
  fade_in_s: 1.0e-4
  level_dbfs: 0
  duration_s: 2.0
  stop_hz: 40000
  start_hz: 20.0
sample_rate_hz: 96000
description: "Ember E2 \u2014 \u201creference\u201d plan\twith a tab"
revision: 7
plan: "ember-e2.ref"
"#;
    let csv2 = "20,12\n1000,3.25\n\n40000.0 , 10.0\n";
    assert_eq!(load_in_dir(reformatted, csv2).sha256, base);
}

#[test]
fn any_value_change_changes_the_hash() {
    let (text, csv) = reference_texts();
    let base = load_in_dir(&text, &csv).sha256;
    // One digit (or one character) at a time, each still a valid plan.
    let edits = [
        ("revision: 7", "revision: 8"),
        ("stop_hz: 40000.0", "stop_hz: 40001.0"),
        ("max_db: -40", "max_db: -41"),
        ("max_percent: 2.5", "max_percent: 2.6"),
        ("smoothing: 1/12", "smoothing: 1/13"),
        ("seed: 18446744073709551615", "seed: 18446744073709551614"),
        ("[1000, -3]", "[1001, -3]"),
        ("input: 2}", "input: 3}"),
        ("with a tab", "with a tub"),
        ("expected: negative", "expected: positive"),
        ("channels: [right]", "channels: [left]"),
        ("points_per_octave: 48", "points_per_octave: 47"),
    ];
    for (from, to) in edits {
        assert!(text.contains(from), "{from}");
        let edited = load_in_dir(&text.replacen(from, to, 1), &csv).sha256;
        assert_ne!(edited, base, "{from} -> {to}");
    }
}

#[test]
fn editing_a_limit_csv_changes_the_hash() {
    let (text, csv) = reference_texts();
    let base = load_in_dir(&text, &csv).sha256;
    let edited = csv.replace("3.25", "3.35");
    assert_ne!(edited, csv);
    assert_ne!(load_in_dir(&text, &edited).sha256, base);
    // A comment-only edit of the CSV keeps it.
    let commented = format!("# reviewed\n{csv}");
    assert_eq!(load_in_dir(&text, &commented).sha256, base);
}

#[test]
fn hash_with_corrections_matches_the_independent_implementation() {
    // expected-corrected.txt was written by tests/reference/plan_canonical.py, which
    // recomputes the coupler models' hashes and the earphone's canonical form from their
    // documented forms (and reads the Thévenin table itself).
    let expected = fs::read_to_string("tests/data/plans/hash/expected-corrected.txt").unwrap();
    let mut lines = expected.lines();
    let (json, sha) = (lines.next().unwrap(), lines.next().unwrap());
    let plan = load_plan(Path::new("tests/data/plans/hash/corrected.yaml")).unwrap();
    let ours = canonical_json(&plan);
    if ours != json {
        let at = ours
            .bytes()
            .zip(json.bytes())
            .position(|(a, b)| a != b)
            .unwrap_or(ours.len().min(json.len()));
        let from = at.saturating_sub(80);
        panic!(
            "differ at byte {at}:\n ours: {}\n want: {}",
            &ours[from..(at + 80).min(ours.len())],
            &json[from..(at + 80).min(json.len())]
        );
    }
    assert_eq!(plan.sha256, sha);
}
