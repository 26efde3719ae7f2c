//! The sound-card rig through a real sound server: PulseAudio's null sink, whose monitor is
//! the default source, so ALSA's `default` device is a bit-exact digital loopback (output
//! 1 → input 1, output 2 → input 2). Start it with `tests/soundcard/pulse.sh start` (CI
//! does, in `.ci/run`). Without a reachable server every test here prints why and skips;
//! with `CI=true` a skip is a failure.
//!
//! The reference for every level check is the loopback itself: a digital copy has a
//! transfer of exactly 0 dB and positive polarity (the null sink mixes at unity gain in
//! float32, and the monitor returns what it mixed).
#![cfg(feature = "soundcard")]

use crate::support::soundcard;

use soundcard::{
    root, server_pid, server_up, signal, tragus, wait_for_playback_streams, BUFFER_FRAMES, SERVER,
};
use std::path::Path;
use std::process::Command;
use std::time::Duration;

/// `tragus run PLAN --rig soundcard ...` with the result JSON in `dir`.
fn run_plan(dir: &Path, plan: &str, extra: &[&str]) -> (i32, serde_json::Value) {
    let json = dir.join("result.json");
    let _ = std::fs::remove_file(&json);
    let store = dir.join("store");
    let mut args = vec![
        "run",
        plan,
        "--rig",
        "soundcard",
        "--serial",
        "SC-1",
        // The plans here are digital (dB FS/FS): an engineering measurement, which the
        // production gate only lets through outside production.
        "--non-production",
        "--buffer-frames",
        BUFFER_FRAMES,
        "--store",
        store.to_str().unwrap(),
        "--json",
        json.to_str().unwrap(),
    ];
    args.extend_from_slice(extra);
    let out = tragus(&args);
    let code = out.status.code().unwrap_or(-1);
    let value = std::fs::read_to_string(&json)
        .map(|t| serde_json::from_str(&t).expect("result JSON"))
        .unwrap_or(serde_json::Value::Null);
    if value.is_null() {
        eprintln!("stderr: {}", String::from_utf8_lossy(&out.stderr));
    }
    (code, value)
}

/// Largest |response| of channel `c` between `lo_hz` and `hi_hz`, dB.
fn worst_db(result: &serde_json::Value, c: usize, lo_hz: f64, hi_hz: f64) -> f64 {
    let ch = &result["channels"][c];
    let f = ch["frequencies_hz"].as_array().unwrap();
    let r = ch["response_db"].as_array().unwrap();
    f.iter()
        .zip(r)
        .filter(|(f, _)| (lo_hz..=hi_hz).contains(&f.as_f64().unwrap()))
        .map(|(_, r)| r.as_f64().unwrap().abs())
        .fold(0.0, f64::max)
}

#[test]
fn loopback_plan_is_flat_on_five_runs_in_a_row() {
    let _guard = SERVER.lock().unwrap_or_else(|e| e.into_inner());
    if !server_up() {
        return;
    }
    let dir = tempfile::tempdir().unwrap();
    for run in 0..5 {
        // Alternate the alignment: by the loopback reference (input 1 replays output 1),
        // and by cross-correlation alone.
        let extra: &[&str] = if run % 2 == 0 {
            &["--loopback-input", "1", "--loopback-output", "1"]
        } else {
            &[]
        };
        let (code, result) = run_plan(dir.path(), "plans/loopback.yaml", extra);
        assert_eq!(code, 0, "run {run}: {result:#}");
        assert_eq!(result["verdict"], "pass", "run {run}");
        // A digital copy is 0 dB; ±0.05 dB is the bound and leaves room only for
        // the analysis' own window and interpolation error (below 0.01 dB on the simulated
        // rig's flat loopback).
        let worst = worst_db(&result, 0, 50.0, 16000.0);
        assert!(worst <= 0.05, "run {run}: {worst} dB off flat");
        assert_eq!(result["channels"][0]["polarity"], "positive");
        // Aligned on the digital path: what remains for the analysis is no latency.
        assert_eq!(result["channels"][0]["latency_samples"], 0, "run {run}");
    }
}

/// A station file as a bench would have it for the sound card: `rig: soundcard`, the
/// default devices, the buffer size the tests use, and the plan's `loop` channel wired to
/// the second channel of the stereo device (`spare` is the bench's other channel, which
/// this plan does not use).
const STATION: &str = "\
station: larkspur-sc-bench
mode: engineering
rig: soundcard
audio:
  buffer_frames: 4096
channels:
  loop: {output: 2, input: 2}
  spare: {output: 1, input: 1}
";

#[test]
fn run_with_a_station_file_uses_its_rig_devices_and_channel_map() {
    let _guard = SERVER.lock().unwrap_or_else(|e| e.into_inner());
    if !server_up() {
        return;
    }
    let dir = tempfile::tempdir().unwrap();
    let station = dir.path().join("station.yaml");
    std::fs::write(&station, STATION).unwrap();
    let json = dir.path().join("result.json");
    let store = dir.path().join("store");
    // No --rig and no device options: everything comes from the station file.
    let out = tragus(&[
        "run",
        "plans/loopback.yaml",
        "--station",
        station.to_str().unwrap(),
        "--serial",
        "SC-5",
        "--non-production",
        "--store",
        store.to_str().unwrap(),
        "--json",
        json.to_str().unwrap(),
    ]);
    let result: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&json).unwrap_or_default())
            .unwrap_or(serde_json::Value::Null);
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}\n{result:#}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert_eq!(result["rig"], "soundcard");
    // A digital copy is 0 dB (same bound as the five-run test).
    let worst = worst_db(&result, 0, 50.0, 16000.0);
    assert!(worst <= 0.05, "{worst} dB off flat");
    assert_eq!(result["station"]["id"], "larkspur-sc-bench");
    // The store's record carries the file's station id too.
    let listed = tragus(&["records", "--store", store.to_str().unwrap(), "--json", "-"]);
    let records: serde_json::Value = serde_json::from_slice(&listed.stdout).expect("records");
    assert_eq!(records[0]["station"], "larkspur-sc-bench");
    // The channel map reached the sound card: the raw capture (read with hound) holds the
    // sweep on device input 2 and digital silence on input 1 (the null sink mixes nothing
    // into a channel nobody plays).
    let sha = records[0]["capture_sha256"].as_str().unwrap();
    let mut wav = hound::WavReader::open(store.join("captures").join(format!("{sha}.wav")))
        .expect("capture WAV");
    let n_ch = usize::from(wav.spec().channels);
    assert_eq!(n_ch, 2);
    let samples: Vec<f32> = wav.samples::<f32>().map(|s| s.unwrap()).collect();
    let peak = |c: usize| {
        samples
            .iter()
            .skip(c)
            .step_by(n_ch)
            .fold(0f32, |m, v| m.max(v.abs()))
    };
    assert_eq!(peak(0), 0.0, "input 1 should be silent");
    // −6 dBFS sweep: peak 10^(−6/20) = 0.501 (plans/loopback.yaml's level), within the fades.
    assert!((peak(1) - 0.501).abs() < 0.01, "input 2 peak {}", peak(1));
}

#[test]
fn a_channel_swap_is_detected() {
    let _guard = SERVER.lock().unwrap_or_else(|e| e.into_inner());
    if !server_up() {
        return;
    }
    let dir = tempfile::tempdir().unwrap();
    let plan = "tests/data/plans/soundcard/swapped.yaml";
    // Without a loopback the capture cannot be aligned: no input carries the stimulus, the
    // rig says so and the unit is a retest (exit 3), never a pass.
    let (code, result) = run_plan(dir.path(), plan, &[]);
    assert_eq!(code, 3, "{result:#}");
    assert_eq!(result["verdict"], "retest");
    let reasons = result["retest_reasons"].to_string();
    assert!(
        reasons.contains("no input carries the stimulus"),
        "{reasons}"
    );
    // With the loopback on output 2 → input 2 the alignment holds, and the plan's input 1
    // shows the swap: silence where the response should be, so the flat check fails or
    // the measurement is invalid ("no signal") — never a pass.
    let (code, result) = run_plan(
        dir.path(),
        plan,
        &["--loopback-input", "2", "--loopback-output", "2"],
    );
    assert_ne!(code, 0, "{result:#}");
    assert_ne!(result["verdict"], "pass");
}

#[test]
fn stereo_channels_arrive_on_their_own_inputs() {
    use tragus::analysis::Analyzer;
    use tragus::dsp::sweep::Stimulus;
    use tragus::plan::Polarity;
    use tragus::rig::soundcard::SoundcardRig;
    use tragus::rig::{Rig, SoundcardSpec};

    let _guard = SERVER.lock().unwrap_or_else(|e| e.into_inner());
    if !server_up() {
        return;
    }
    let plan = tragus::plan::load_plan(&root().join("tests/data/plans/soundcard/stereo.yaml"))
        .expect("plan");
    let mut stimulus = Stimulus::from_plan(&plan).unwrap();
    // Tell the channels apart: the right output plays the sweep inverted and halved
    // (−6.02 dB = 20·log10(0.5)); the plan cannot say this, so the test does.
    for v in &mut stimulus.channels[1] {
        *v *= -0.5;
    }
    let spec = SoundcardSpec {
        buffer_frames: Some(BUFFER_FRAMES.parse().unwrap()),
        ..Default::default()
    };
    let routes = plan.channels.iter().map(|c| (c.output, c.input)).collect();
    let mut rig = SoundcardRig::open(spec, routes, plan.sample_rate_hz).expect("open");
    let capture = rig
        .play_and_capture(&stimulus, plan.n_inputs())
        .expect("capture");
    assert_eq!(capture.xruns, 0, "{:?}", capture.faults);
    assert!(capture.faults.is_empty(), "{:?}", capture.faults);
    assert!(capture.device_latency_samples.is_some_and(|l| l > 0));
    // The analysis deconvolves with the plan's (unmodified) sweep.
    let mut analyzer = Analyzer::new(&plan, &Stimulus::from_plan(&plan).unwrap()).unwrap();
    let left = analyzer.analyze_channel("left", &capture.channels[0]);
    let right = analyzer.analyze_channel("right", &capture.channels[1]);
    let at_1k = |m: &tragus::analysis::ChannelMeasurement| {
        let i = m.frequencies_hz.iter().position(|&f| f >= 1000.0).unwrap();
        m.response_db[i]
    };
    assert_eq!(left.polarity, Polarity::Positive);
    assert_eq!(right.polarity, Polarity::Negative);
    // Digital copies: 0 dB and 20·log10(0.5) = −6.0206 dB; same ±0.05 dB as above.
    assert!(at_1k(&left).abs() < 0.05, "left {}", at_1k(&left));
    assert!(
        (at_1k(&right) + 6.0206).abs() < 0.05,
        "right {}",
        at_1k(&right)
    );
}

/// Run the long plan in the background and disturb the server `after` into the sweep.
///
/// `after` counts from the moment the server shows the rig's playback stream, not from the
/// spawn: start-up (process, devices, the input's first samples) took over 2 s in CI, and
/// a stall before the sweep starts loses nothing — the rig then rightly passes with the
/// stall as extra device latency (seen: 60 616 samples).
fn run_disturbed(dir: &Path, after: Duration, disturb: impl FnOnce()) -> (i32, serde_json::Value) {
    let json = dir.join("result.json");
    // A run that writes no result must not be judged by the previous run's.
    let _ = std::fs::remove_file(&json);
    let store = dir.join("store");
    let child = Command::new(env!("CARGO_BIN_EXE_tragus"))
        .args([
            "run",
            "tests/data/plans/soundcard/long.yaml",
            "--rig",
            "soundcard",
            "--serial",
            "SC-2",
            "--non-production",
            "--buffer-frames",
            BUFFER_FRAMES,
            "--loopback-input",
            "1",
            "--loopback-output",
            "1",
            "--store",
            store.to_str().unwrap(),
            "--json",
            json.to_str().unwrap(),
        ])
        .current_dir(root())
        .stdout(std::process::Stdio::null())
        .stderr(std::process::Stdio::piped())
        .spawn()
        .expect("spawn tragus");
    // The rig's output stream is the server's only playback stream: the sweep is playing.
    assert!(
        wait_for_playback_streams(1),
        "the rig's playback never started"
    );
    std::thread::sleep(after);
    disturb();
    let out = child.wait_with_output().expect("wait");
    eprintln!("stderr: {}", String::from_utf8_lossy(&out.stderr));
    let value = std::fs::read_to_string(&json)
        .map(|t| serde_json::from_str(&t).expect("result JSON"))
        .unwrap_or(serde_json::Value::Null);
    (out.status.code().unwrap_or(-1), value)
}

/// The xrun count the rig reported, from the retest reason the analysis writes for it
/// ("N buffer xrun(s) while capturing"); 0 when there is none.
fn xruns_reported(result: &serde_json::Value) -> u32 {
    result["retest_reasons"]
        .as_array()
        .into_iter()
        .flatten()
        .filter_map(|r| r.as_str())
        .filter_map(|r| {
            let head = r
                .split(" buffer xrun(s)")
                .next()
                .filter(|h| h.len() < r.len())?;
            head.rsplit(' ').next()?.parse::<u32>().ok()
        })
        .max()
        .unwrap_or(0)
}

#[test]
fn a_stalled_or_killed_server_mid_sweep_is_a_retest() {
    let _guard = SERVER.lock().unwrap_or_else(|e| e.into_inner());
    if !server_up() {
        return;
    }
    let Some(pid) = server_pid() else {
        panic!("no PulseAudio pid file under $PULSE_RUNTIME_PATH");
    };
    let dir = tempfile::tempdir().unwrap();
    // A lossless stall: 40 ms, well inside what the server holds of our 4096-frame
    // (85 ms) buffers (measured here: stalls up to 100 ms lost nothing, 200 ms and more
    // always did). The server catches up from the buffered samples, no xrun, and the rig
    // judges the capture by its alignment and loopback check: a clean pass.
    let (code, result) = run_disturbed(dir.path(), Duration::from_millis(1000), || {
        signal(pid, "-STOP");
        std::thread::sleep(Duration::from_millis(40));
        signal(pid, "-CONT");
    });
    eprintln!("lossless stall: xruns {}", xruns_reported(&result));
    assert_eq!(code, 0, "{result:#}");
    assert_eq!(xruns_reported(&result), 0, "{result:#}");
    // A lossy stall: 1.2 s (far beyond the buffers, under the rig's 2 s no-input limit).
    // The server runs out of our samples and fills the gap with silence; with the pulse
    // plugin's `handle_underrun` on (tests/soundcard/pulse.sh) that underrun reaches cpal
    // as an xrun, and the retest reason says so. Without it the client never heard of the
    // loss (measured: no xrun, a retest only because the analysis found no clean signal).
    let (code, result) = run_disturbed(dir.path(), Duration::from_millis(1000), || {
        signal(pid, "-STOP");
        std::thread::sleep(Duration::from_millis(1200));
        signal(pid, "-CONT");
    });
    eprintln!("lossy stall: xruns {}", xruns_reported(&result));
    assert_eq!(code, 3, "{result:#}");
    assert!(xruns_reported(&result) >= 1, "{result:#}");
    let reasons = result["retest_reasons"].to_string();
    assert!(reasons.contains("xrun: samples were lost"), "{reasons}");
    // Killed mid-sweep: the device is lost; retest, and whatever was recorded is
    // recorded as a retest (or nothing is written at all), never a pass.
    let (code, result) = run_disturbed(dir.path(), Duration::from_millis(1000), || {
        signal(pid, "-KILL");
    });
    assert_eq!(code, 3, "{result:#}");
    assert_ne!(result["verdict"], "pass");
    // Bring the server back for any test after this one (a few tries: the killed server's
    // pid may linger until it is reaped).
    let mut ok = false;
    for _ in 0..10 {
        std::thread::sleep(Duration::from_millis(500));
        let out = Command::new(root().join("tests/soundcard/pulse.sh"))
            .arg("start")
            .output()
            .expect("run pulse.sh");
        if out.status.success() {
            ok = true;
            break;
        }
        eprintln!("restart: {}", String::from_utf8_lossy(&out.stderr));
    }
    assert!(ok, "restart the sound server");
}

#[test]
fn a_wrong_device_name_is_bad_input() {
    // Needs the ALSA host only, not a server: a device name the host does not know is the
    // station's mistake (exit 2, docs/architecture.md), and the message lists the devices it has.
    let out = tragus(&[
        "run",
        "plans/loopback.yaml",
        "--rig",
        "soundcard",
        "--serial",
        "SC-3",
        "--non-production",
        "--output-device",
        "no-such-device",
        "--store",
        std::env::temp_dir()
            .join("tragus-sc-unused")
            .to_str()
            .unwrap(),
    ]);
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("expected one of the output devices") && err.contains("no-such-device"),
        "{err}"
    );
}

#[test]
fn devices_lists_the_servers_default_device() {
    let _guard = SERVER.lock().unwrap_or_else(|e| e.into_inner());
    if !server_up() {
        return;
    }
    let out = tragus(&["devices", "--json", "-"]);
    assert_eq!(out.status.code(), Some(0));
    let hosts: serde_json::Value = serde_json::from_slice(&out.stdout).expect("JSON");
    // tests/soundcard/pulse.sh routes ALSA's `default` to the server's stereo null sink.
    let default = hosts
        .as_array()
        .unwrap()
        .iter()
        .flat_map(|h| h["devices"].as_array().unwrap())
        .find(|d| d["default_output"] == true && d["default_input"] == true)
        .expect("a default output and input device");
    assert!(
        default["output_channels"].as_u64().unwrap() >= 2,
        "{default:#}"
    );
    assert!(
        default["input_channels"].as_u64().unwrap() >= 2,
        "{default:#}"
    );
    let runs_48k = default["output_configs"]
        .as_array()
        .unwrap()
        .iter()
        .any(|c| {
            c["sample_format"] == "f32"
                && c["min_rate_hz"].as_u64().unwrap() <= 48000
                && c["max_rate_hz"].as_u64().unwrap() >= 48000
        });
    assert!(runs_48k, "{default:#}");
}
