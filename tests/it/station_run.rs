//! `tragus run PLAN --station FILE` on the simulated rig: the station's channel map, fixture,
//! store and identity are what the unit is tested and recorded with.
//!
//! The oracle for the routing is the raw capture in the store, read with hound (not with
//! tragus): a unit whose left earphone is dead must leave the device input that the station
//! wires to `left` silent. Station 1 wires left to input 1, station 2 to input 2.

use crate::support::common;

use common::*;
use std::path::Path;

fn demo() -> std::path::PathBuf {
    root().join("plans/demo-earbud.yaml")
}

fn run(station: &Path, store: &Path, serial: &str, extra: &[&str]) -> serde_json::Value {
    let out = tragus()
        .arg("run")
        .arg(demo())
        .args(["--serial", serial])
        .arg("--station")
        .arg(station)
        .arg("--store")
        .arg(store)
        .args(extra)
        .args(["--json", "-"])
        .output()
        .expect("run tragus");
    serde_json::from_slice(&out.stdout)
        .unwrap_or_else(|e| panic!("{e}: {}", String::from_utf8_lossy(&out.stderr)))
}

fn records(store: &Path) -> Vec<serde_json::Value> {
    let out = tragus()
        .arg("records")
        .arg("--store")
        .arg(store)
        .args(["--json", "-"])
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    serde_json::from_slice::<serde_json::Value>(&out.stdout)
        .unwrap()
        .as_array()
        .unwrap()
        .clone()
}

fn rms_db(x: &[f32]) -> f64 {
    let ms = x.iter().map(|&s| f64::from(s).powi(2)).sum::<f64>() / x.len() as f64;
    10.0 * ms.max(1e-30).log10()
}

/// Level (dB re full scale, rms) of each input of the newest capture in `store`.
fn capture_levels(store: &Path) -> Vec<f64> {
    let rec = &records(store)[0];
    let sha = rec["capture_sha256"].as_str().unwrap();
    let (_, ch) = read_f32_wav(&store.join("captures").join(format!("{sha}.wav")));
    ch.iter().map(|c| rms_db(c)).collect()
}

#[test]
fn station_routes_fixture_and_identity_reach_the_record() {
    let dir = tempfile::tempdir().unwrap();
    for (file, id, fixture_id, dead_input) in [
        ("line3-st1.yaml", "line3-st1", "fixture-line3-a", 0usize),
        ("line3-st2.yaml", "line3-st2", "fixture-line3-b", 1usize),
    ] {
        let station = root().join("stations").join(file);
        let store = dir.path().join(id);
        let json = run(
            &station,
            &store,
            "E2-DEAD-1",
            &["--sim-unit", "dead-channel", "--sim-channel", "left"],
        );
        // The station object of the result: id, mode and the file's SHA-256 (computed here
        // with the sha2 crate over the file bytes, FIPS 180-4).
        use sha2::Digest;
        let sha = hex::encode(sha2::Sha256::digest(std::fs::read(&station).unwrap()));
        assert_eq!(json["station"]["id"], id);
        assert_eq!(json["station"]["mode"], "engineering");
        assert_eq!(json["station"]["sha256"], sha.as_str());
        // The station's fixture replaced the plan's (the plan names fixture A).
        for ch in json["channels"].as_array().unwrap() {
            assert_eq!(ch["correction"]["fixture"]["id"], fixture_id, "{file}");
        }
        // The store record names the station; its result JSON carries the mode.
        let recs = records(&store);
        assert_eq!(recs.len(), 1);
        assert_eq!(recs[0]["station"], id);
        // Routing: the dead left earphone leaves the station's left input silent. A live
        // channel of the demo sweep (−18 dBFS peak, ~144 dB SPL/V) sits tens of dB above
        // the simulated converter noise; 30 dB apart is a loose bound that a swapped or
        // ignored map (dead input carrying the live channel) could not meet.
        let levels = capture_levels(&store);
        let live_input = 1 - dead_input;
        assert!(
            levels[live_input] - levels[dead_input] > 30.0,
            "{file}: input levels {levels:?} dB, expected input {} silent",
            dead_input + 1
        );
    }
}

#[test]
fn the_station_store_is_used_unless_store_is_given() {
    let dir = tempfile::tempdir().unwrap();
    let fixture = root().join("reference/couplers/fixture-line3-b.yaml");
    let station = dir.path().join("bench.yaml");
    std::fs::write(
        &station,
        format!(
            "station: bench-9\nmode: engineering\nstore: here\nfixture: {}\n",
            fixture.display()
        ),
    )
    .unwrap();
    let out = tragus()
        .arg("run")
        .arg(demo())
        .args(["--serial", "E2-77", "--sim-unit", "design"])
        .arg("--station")
        .arg(&station)
        .output()
        .unwrap();
    assert_exit(&out, 0);
    // Relative to the station file, not to the working directory.
    assert!(dir.path().join("here/tragus.db").is_file());
    assert_eq!(records(&dir.path().join("here"))[0]["station"], "bench-9");

    let explicit = dir.path().join("explicit");
    let json = run(&station, &explicit, "E2-78", &["--sim-unit", "design"]);
    assert_eq!(json["verdict"], "pass");
    assert_eq!(records(&explicit).len(), 1);
    assert_eq!(records(&dir.path().join("here")).len(), 1, "--store wins");
}
