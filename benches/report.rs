//! Speed of the auditor's report and the CSV export on a store of 10 000 records, and the
//! report's size (printed).
//!
//! The store is built once: eight units of the demo population through the real station
//! loop (nominal units, a seal leak, a rubbing coil, a clipping input with its scaled-down
//! sweep, a unit too loud to play), then copies of their records under new serials and
//! times, each with its margins and response shifted a little, up to 10 000 records (no
//! simulated sweep per record); a unit whose copy is a retest is tested again next and
//! passes. Each copy gets its own small capture, so verification
//! rehashes 10 000 files as on a real store, only smaller ones. The store lives on
//! /dev/shm when there is one, so building it does not wait on 30 000 fsyncs
//! (`TRAGUS_REPORT_BENCH_DIR` puts it elsewhere and keeps it; `TRAGUS_REPORT_BENCH_OUT`
//! writes the report built there).

use std::io::Write;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::Instant;

use criterion::{criterion_group, criterion_main, Criterion};
use tragus::report::audit::{build_report, AuditOptions};
use tragus::report::export::{export, ExportFormat};
use tragus::store::{NewRecord, RecordFilter, Store};

const N_RECORDS: usize = 10_000;

fn root() -> &'static Path {
    Path::new(env!("CARGO_MANIFEST_DIR"))
}

/// A small WAV capture distinct for each `k` (mono 16-bit, 64 samples).
fn capture(k: usize) -> Vec<u8> {
    let samples: Vec<u8> = (0..64u32)
        .flat_map(|i| ((i as usize * 37 + k * 101) as u16).to_le_bytes())
        .collect();
    let mut fmt = Vec::new();
    fmt.extend_from_slice(&1u16.to_le_bytes());
    fmt.extend_from_slice(&1u16.to_le_bytes());
    fmt.extend_from_slice(&48_000u32.to_le_bytes());
    fmt.extend_from_slice(&96_000u32.to_le_bytes());
    fmt.extend_from_slice(&2u16.to_le_bytes());
    fmt.extend_from_slice(&16u16.to_le_bytes());
    let mut body = b"WAVEfmt ".to_vec();
    body.extend_from_slice(&(fmt.len() as u32).to_le_bytes());
    body.extend_from_slice(&fmt);
    body.extend_from_slice(b"data");
    body.extend_from_slice(&(samples.len() as u32).to_le_bytes());
    body.extend_from_slice(&samples);
    let mut out = b"RIFF".to_vec();
    out.extend_from_slice(&(body.len() as u32).to_le_bytes());
    out.extend_from_slice(&body);
    out
}

fn station_session(store: &Path, sims: &[&str], scans: &str) {
    let mut cmd = Command::new(env!("CARGO_BIN_EXE_tragus"));
    cmd.arg("station")
        .arg("--station")
        .arg(root().join("stations/line3-st1.yaml"))
        .arg("--plan")
        .arg(root().join("plans/demo-earbud.yaml"))
        .arg("--store")
        .arg(store)
        .args(["--operator", "bench"]);
    for s in sims {
        cmd.args(["--sim-unit", s]);
    }
    let mut child = cmd
        .stdin(Stdio::piped())
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .expect("start tragus station");
    child
        .stdin
        .take()
        .unwrap()
        .write_all(scans.as_bytes())
        .unwrap();
    assert!(
        child.wait().unwrap().success(),
        "the station session failed"
    );
}

fn build_store(dir: &Path) {
    station_session(
        dir,
        &[
            "E2-000002=seal-leak@left",
            "E2-000003=too-loud",
            "E2-000004=clipping",
            "E2-000006=rub",
        ],
        "E2-000001\nE2-000002\nE2-000003\nE2-000004\nE2-000005\nE2-000006\nE2-000007\nE2-000008\n",
    );
    let mut s = Store::open(dir).expect("store");
    let templates = s.list(&RecordFilter::default()).expect("records");
    let templates: Vec<(NewRecord, serde_json::Value)> = templates
        .into_iter()
        .map(|t| {
            let json: serde_json::Value = serde_json::from_str(&t.result_json).unwrap();
            let rec = NewRecord {
                time_utc: t.time_utc,
                serial: t.serial,
                plan_id: t.plan_id,
                plan_revision: t.plan_revision,
                plan_sha256: t.plan_sha256,
                software_version: t.software_version,
                station: t.station,
                operator: t.operator,
                rig: t.rig,
                verdict: t.verdict,
                result_json: String::new(),
                calibration_mode: t.calibration_mode.unwrap_or_else(|| "uncalibrated".into()),
                calibration_sha256: t.calibration_sha256,
                build: t.build.unwrap_or_else(|| tragus::BUILD.into()),
                // The same store: the templates' archived inputs are already there.
                inputs_json: t.inputs_json.unwrap_or_else(|| "{}".into()),
                playback_json: t.playback_json.unwrap_or_else(|| "{}".into()),
            };
            (rec, json)
        })
        .collect();
    let n_real = templates.len();
    // A unit whose record is a retest is tested again next, as a nominal unit.
    let mut retest_of: Option<String> = None;
    for k in 0..N_RECORDS - n_real {
        // Mostly nominal units, with the defects at their share of the templates.
        let i = if retest_of.is_some() || k % 10 < 7 {
            0
        } else {
            k % n_real
        };
        let (t, json) = &templates[i];
        let mut json = json.clone();
        let delta = 0.1 * ((k % 11) as f64 - 5.0);
        let serial = retest_of
            .take()
            .unwrap_or_else(|| format!("E2-{:06}", 100_000 + k));
        if t.verdict == tragus::Verdict::Retest {
            retest_of = Some(serial.clone());
        }
        let time = format!(
            "2026-11-{:02}T{:02}:{:02}:{:02}.000Z",
            1 + k / 1000,
            6 + k % 1000 / 60,
            k % 60,
            k % 7
        );
        json["serial"] = serial.clone().into();
        json["time_utc"] = time.clone().into();
        for c in json["checks"].as_array_mut().into_iter().flatten() {
            if let Some(m) = c["worst_margin_db"].as_f64() {
                if (m + delta).signum() == m.signum() {
                    c["worst_margin_db"] = (m + delta).into();
                }
            }
        }
        for ch in json["channels"].as_array_mut().into_iter().flatten() {
            for v in ch["response_db"].as_array_mut().into_iter().flatten() {
                if let Some(x) = v.as_f64() {
                    *v = (x + delta).into();
                }
            }
        }
        let rec = NewRecord {
            time_utc: time,
            serial,
            result_json: json.to_string(),
            ..t.clone()
        };
        s.append(&rec, &capture(k)).expect("append");
    }
}

/// Where the store is built: `TRAGUS_REPORT_BENCH_DIR` if set (and then kept afterwards,
/// to look at), else a fresh directory removed at the end.
fn bench_dir() -> PathBuf {
    if let Some(dir) = std::env::var_os("TRAGUS_REPORT_BENCH_DIR") {
        return PathBuf::from(dir);
    }
    let shm = Path::new("/dev/shm");
    let base = if shm.is_dir() {
        shm.to_path_buf()
    } else {
        std::env::temp_dir()
    };
    base.join(format!("tragus-report-bench-{}", std::process::id()))
}

fn bench(c: &mut Criterion) {
    let dir = bench_dir();
    let _ = std::fs::remove_dir_all(&dir);
    let t = Instant::now();
    build_store(&dir);
    eprintln!(
        "report bench: built a store of {N_RECORDS} records in {:.1} s at {}",
        t.elapsed().as_secs_f64(),
        dir.display()
    );
    let store = Store::open(&dir).expect("store");
    let options = AuditOptions {
        limits_from: vec![root().join("plans/demo-earbud.yaml")],
        ..AuditOptions::default()
    };
    let t = Instant::now();
    let report = build_report(&store, &options).expect("report");
    eprintln!(
        "report bench: {} records, {} units, {} detailed sections: {} bytes ({:.1} MB), first build {:.2} s",
        report.summary.n_records,
        report.summary.n_units,
        report.summary.n_detailed,
        report.html.len(),
        report.html.len() as f64 / 1e6,
        t.elapsed().as_secs_f64()
    );
    if let Ok(path) = std::env::var("TRAGUS_REPORT_BENCH_OUT") {
        std::fs::write(&path, &report.html).expect("write the report");
    }
    let mut group = c.benchmark_group("audit report");
    group.sample_size(10);
    group.measurement_time(std::time::Duration::from_secs(30));
    group.bench_function("report, 10 000 records", |b| {
        b.iter(|| build_report(&store, &options).expect("report").html.len())
    });
    group.bench_function("CSV export, 10 000 records", |b| {
        b.iter(|| {
            export(
                &store,
                &Default::default(),
                ExportFormat::Csv,
                &mut std::io::sink(),
            )
            .expect("export")
        })
    });
    group.finish();
    drop(store);
    if std::env::var_os("TRAGUS_REPORT_BENCH_DIR").is_none() {
        let _ = std::fs::remove_dir_all(&dir);
    }
}

criterion_group!(benches, bench);
criterion_main!(benches);
