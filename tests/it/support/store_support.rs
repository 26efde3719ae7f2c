//! Helpers shared by the store tests: invented records (Ember E2 earbuds, Larkspur Audio
//! Works line 3) and small WAV captures.
#![allow(dead_code)]

use std::path::Path;

use tragus::store::NewRecord;
use tragus::Verdict;

/// A 16-bit PCM WAV file (RIFF header, `fmt ` chunk, `data` chunk), built by hand so the
/// tests do not depend on the project's own WAV code.
pub fn wav(n_channels: u16, rate_hz: u32, samples: &[i16]) -> Vec<u8> {
    let data: Vec<u8> = samples.iter().flat_map(|s| s.to_le_bytes()).collect();
    let block = 2 * n_channels;
    let mut fmt = Vec::new();
    fmt.extend_from_slice(&1u16.to_le_bytes());
    fmt.extend_from_slice(&n_channels.to_le_bytes());
    fmt.extend_from_slice(&rate_hz.to_le_bytes());
    fmt.extend_from_slice(&(rate_hz * u32::from(block)).to_le_bytes());
    fmt.extend_from_slice(&block.to_le_bytes());
    fmt.extend_from_slice(&16u16.to_le_bytes());
    let mut body = b"WAVE".to_vec();
    body.extend_from_slice(b"fmt ");
    body.extend_from_slice(&(fmt.len() as u32).to_le_bytes());
    body.extend_from_slice(&fmt);
    body.extend_from_slice(b"data");
    body.extend_from_slice(&(data.len() as u32).to_le_bytes());
    body.extend_from_slice(&data);
    let mut out = b"RIFF".to_vec();
    out.extend_from_slice(&(body.len() as u32).to_le_bytes());
    out.extend_from_slice(&body);
    out
}

/// A distinct small capture for unit `i` (a short ramp, so each `i` hashes differently).
pub fn capture(i: u32) -> Vec<u8> {
    let samples: Vec<i16> = (0..64).map(|k| (k * 37 + i as i32 * 101) as i16).collect();
    wav(1, 48_000, &samples)
}

/// Unit `i`'s record: serial `E2-000<100+i>`, measured `i` minutes after 09:00 on
/// 2025-03-14, every third unit failing.
pub fn record(i: u32) -> NewRecord {
    let verdict = if i.is_multiple_of(3) {
        Verdict::Fail
    } else {
        Verdict::Pass
    };
    NewRecord {
        time_utc: format!("2025-03-14T{:02}:{:02}:00.250Z", 9 + i / 60, i % 60),
        serial: format!("E2-{:06}", 100 + i),
        plan_id: "demo-earbud".into(),
        plan_revision: 3,
        plan_sha256: "5d".repeat(32),
        software_version: tragus::VERSION.into(),
        station: "larkspur-line3-st1".into(),
        operator: "j.okafor".into(),
        rig: "simulated".into(),
        verdict,
        result_json: format!(
            r#"{{"serial":"E2-{:06}","verdict":"{}"}}"#,
            100 + i,
            verdict.word().to_lowercase()
        ),
        calibration_mode: "production".into(),
        calibration_sha256: Some("c1".repeat(32)),
        build: tragus::BUILD.into(),
        inputs_json: "{}".into(),
        playback_json: r#"{"abandoned":false,"calibration_offsets_db":null,"drive_gain_db":[0.0]}"#
            .into(),
    }
}

/// A raw connection to the store's database, as an attacker with file access would open it.
pub fn raw(dir: &Path) -> rusqlite::Connection {
    rusqlite::Connection::open(dir.join(tragus::store::DB_FILE)).expect("open raw connection")
}
