//! Helpers shared by the end-to-end tests: run the real binary, read and write WAVs.
#![allow(dead_code)]

use std::path::{Path, PathBuf};
use std::process::Command;

/// Path of the built `tragus` binary.
pub fn tragus() -> Command {
    Command::new(env!("CARGO_BIN_EXE_tragus"))
}

/// Repository root.
pub fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

/// Read a float WAV into channels (hound, independent of tragus' own reader).
pub fn read_f32_wav(path: &Path) -> (u32, Vec<Vec<f32>>) {
    let mut r = hound::WavReader::open(path).expect("wav");
    let spec = r.spec();
    let n = spec.channels as usize;
    let samples: Vec<f32> = r.samples::<f32>().map(|s| s.expect("sample")).collect();
    let mut ch = vec![Vec::with_capacity(samples.len() / n); n];
    for (i, s) in samples.into_iter().enumerate() {
        ch[i % n].push(s);
    }
    (spec.sample_rate, ch)
}

/// Write channels as a 32-bit float WAV (hound).
pub fn write_f32_wav(path: &Path, rate: u32, ch: &[Vec<f32>]) {
    let spec = hound::WavSpec {
        channels: ch.len() as u16,
        sample_rate: rate,
        bits_per_sample: 32,
        sample_format: hound::SampleFormat::Float,
    };
    let mut w = hound::WavWriter::create(path, spec).expect("create");
    for i in 0..ch[0].len() {
        for c in ch {
            w.write_sample(c[i]).expect("write");
        }
    }
    w.finalize().expect("finalize");
}

/// Write the stimulus of `plan` with the real binary and read it back.
pub fn stimulus_of(plan: &Path, dir: &Path) -> (u32, Vec<Vec<f32>>) {
    let out = dir.join("stimulus.wav");
    let st = tragus()
        .arg("stimulus")
        .arg(plan)
        .arg("--out")
        .arg(&out)
        .status()
        .expect("run tragus");
    assert!(st.success(), "tragus stimulus failed");
    read_f32_wav(&out)
}

/// Analyse a capture with the real binary; returns (exit code, result JSON).
pub fn analyze(plan: &Path, capture: &Path) -> (i32, serde_json::Value) {
    let out = tragus()
        .arg("analyze")
        .arg(plan)
        .arg("--capture")
        .arg(capture)
        .arg("--json")
        .arg("-")
        .output()
        .expect("run tragus");
    let code = out.status.code().unwrap_or(-1);
    let json = serde_json::from_slice(&out.stdout).unwrap_or_else(|e| {
        panic!(
            "analyze printed no JSON ({e}); stderr: {}",
            String::from_utf8_lossy(&out.stderr)
        )
    });
    (code, json)
}

/// Direct-form-I biquad in f64 (b0,b1,b2,a1,a2 with a0 = 1).
pub fn biquad(c: [f64; 5], x: &[f32]) -> Vec<f32> {
    let (mut x1, mut x2, mut y1, mut y2) = (0.0, 0.0, 0.0, 0.0);
    x.iter()
        .map(|&v| {
            let v = f64::from(v);
            let y = c[0] * v + c[1] * x1 + c[2] * x2 - c[3] * y1 - c[4] * y2;
            x2 = x1;
            x1 = v;
            y2 = y1;
            y1 = y;
            y as f32
        })
        .collect()
}

/// Seeded Gaussian noise (Box–Muller over ChaCha8) with the given rms.
pub fn gaussian_noise(n: usize, rms: f64, seed: u64) -> Vec<f64> {
    use rand::{Rng, SeedableRng};
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    (0..n)
        .map(|_| {
            let u1: f64 = rng.random::<f64>().max(1e-300);
            let u2: f64 = rng.random::<f64>();
            rms * (-2.0 * u1.ln()).sqrt() * (2.0 * std::f64::consts::PI * u2).cos()
        })
        .collect()
}

/// RMS of a slice.
pub fn rms(x: &[f32]) -> f64 {
    (x.iter().map(|&v| f64::from(v).powi(2)).sum::<f64>() / x.len().max(1) as f64).sqrt()
}

/// Assert that a finished `tragus` exited with `code`, showing its stderr and stdout when
/// it did not (what the user would have read).
#[track_caller]
pub fn assert_exit(out: &std::process::Output, code: i32) {
    assert_eq!(
        out.status.code(),
        Some(code),
        "stderr: {}\nstdout: {}",
        String::from_utf8_lossy(&out.stderr),
        String::from_utf8_lossy(&out.stdout)
    );
}

/// The demo plan's sweep and its hearing-safety set-up on the simulated bench's own gains
/// (`DRIVE_V_PER_FS`, `MIC_FS_PER_PA`), with `caps` and drive `monitors`, the fixture taken
/// as the reference (no correction): the library's own set-up
/// ([`tragus::safety::setup::SafetySetup::for_plan`]), as a bench builds it.
pub fn demo_safety_setup(
    caps: tragus::station::Caps,
    monitors: Vec<tragus::safety::monitor::MonitorPath>,
) -> (
    tragus::dsp::sweep::Stimulus,
    tragus::safety::setup::SafetySetup,
) {
    use tragus::safety::setup::{BenchPaths, SafetySetup};
    let plan = tragus::plan::load_plan(&root().join("plans/demo-earbud.yaml")).unwrap();
    let stimulus = tragus::dsp::sweep::Stimulus::from_plan(&plan).unwrap();
    let wired: Vec<tragus::station::DriveMonitor> = monitors
        .iter()
        .map(|m| tragus::station::DriveMonitor {
            output: m.output,
            input: m.input,
        })
        .collect();
    let mut setup = SafetySetup::for_plan(BenchPaths {
        plan: &plan,
        grid_hz: &[],
        correction_grid_db: vec![None; plan.channels.len()],
        caps,
        calibration: None,
        monitors: &wired,
        rig: tragus::station::RigKind::Simulated,
        non_production: false,
    })
    .expect("the demo plan is within the caps before playing");
    // The tests give the monitors' gains themselves (a bench reads them from its
    // calibration, or the simulated rig's constants).
    setup.monitors = monitors;
    (stimulus, setup)
}

/// The physical simulated rig (v2) with unit `serial` of population 1 in the demo's fixture A
/// (`reference/couplers/fixture-line3-a.yaml`, tap `mic`), routes left (1→1) and right
/// (2→2); a defect, if any, on the left channel.
pub fn demo_physical_rig(
    serial: &str,
    kind: tragus::rig::simulated::UnitKind,
) -> tragus::rig::simulated::SimulatedRig {
    let fixture = tragus::models::coupler::load_model(
        &root().join("reference/couplers/fixture-line3-a.yaml"),
    )
    .unwrap()
    .coupler();
    tragus::rig::simulated::SimulatedRig::physical(
        vec![(0, 0), (1, 1)],
        1,
        tragus::rig::simulated::SimUnit {
            serial: serial.into(),
            kind,
            defect_channel: 0,
        },
        fixture,
        "mic",
    )
    .unwrap()
}

/// The reference interpreter that can `import` the given modules (`imports`, e.g.
/// `"numpy"` or `"cryptography, yaml"`): `TRAGUS_REFERENCE_PYTHON` (set by tests/run, which
/// has just installed the pinned requirements: then it must work), else
/// target/reference-venv's. `None` (the caller's check is skipped, saying so) only outside
/// tests/run and CI, when there is no such environment yet; under them it panics.
pub fn reference_python(imports: &str) -> Option<PathBuf> {
    let required =
        std::env::var_os("TRAGUS_REFERENCE_PYTHON").is_some() || std::env::var_os("CI").is_some();
    let python = std::env::var_os("TRAGUS_REFERENCE_PYTHON")
        .map(PathBuf::from)
        .unwrap_or_else(|| root().join("target/reference-venv/bin/python"));
    let usable = Command::new(&python)
        .args(["-c", &format!("import {imports}")])
        .output()
        .is_ok_and(|o| o.status.success());
    if usable {
        return Some(python);
    }
    assert!(
        !required,
        "{}: no Python that can import {imports}; run ./tests/run",
        python.display()
    );
    eprintln!(
        "skipped: {} cannot import {imports} (./tests/run makes target/reference-venv)",
        python.display()
    );
    None
}
