//! Helpers shared by the tests through the real sound server (`tests/soundcard_*.rs`):
//! whether the server answers (a skip is a failure under `CI=true`), its pid, its playback
//! streams. The server itself is `tests/soundcard/pulse.sh`.
#![allow(dead_code)]

use std::path::{Path, PathBuf};
use std::process::{Command, Output};
use std::sync::Mutex;

/// One sound server: the tests of one test binary take turns (cargo runs test binaries
/// one after the other).
pub static SERVER: Mutex<()> = Mutex::new(());

/// Buffer size for the runs, frames: the device default of ALSA's pulse plugin drops
/// samples now and then on a loaded 2-core machine (measured: 3 of 12 runs), 4096 frames
/// (85 ms) never did in 12 (docs/decisions.md, "Server underruns must be xruns").
pub const BUFFER_FRAMES: &str = "4096";

/// Repository root.
pub fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

/// True when a sound server answers; otherwise print why (and fail under CI).
pub fn server_up() -> bool {
    let reason = match std::env::var("PULSE_SERVER") {
        Err(_) => Some("PULSE_SERVER is not set".to_string()),
        Ok(_) => match Command::new("pactl").arg("info").output() {
            Ok(o) if o.status.success() => None,
            Ok(o) => Some(format!(
                "pactl info failed: {}",
                String::from_utf8_lossy(&o.stderr).trim()
            )),
            Err(e) => Some(format!("pactl not runnable: {e}")),
        },
    };
    match reason {
        None => true,
        Some(r) => {
            let msg = format!(
                "SKIP sound-card test: no sound server ({r}); run \
                 `eval \"$(tests/soundcard/pulse.sh start)\"` first"
            );
            if std::env::var("CI").is_ok_and(|v| v == "true") {
                panic!("{msg} (CI=true: the sound-card tests must run in CI)");
            }
            eprintln!("{msg}");
            false
        }
    }
}

/// Run the built `tragus` in the repository root.
pub fn tragus(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_tragus"))
        .args(args)
        .current_dir(root())
        .output()
        .expect("run tragus")
}

/// PID of the running PulseAudio server (its pid file in the runtime directory).
pub fn server_pid() -> Option<i32> {
    let runtime = std::env::var("PULSE_RUNTIME_PATH").ok()?;
    std::fs::read_to_string(Path::new(&runtime).join("pid"))
        .ok()?
        .trim()
        .parse()
        .ok()
}

/// Send `sig` (`-STOP`, `-CONT`, `-KILL`) to `pid`.
pub fn signal(pid: i32, sig: &str) {
    let ok = Command::new("kill")
        .args([sig, &pid.to_string()])
        .status()
        .is_ok_and(|s| s.success());
    assert!(ok, "kill {sig} {pid}");
}

/// How many playback streams (sink inputs) the server has right now.
pub fn playback_streams() -> usize {
    Command::new("pactl")
        .args(["list", "short", "sink-inputs"])
        .output()
        .ok()
        .filter(|o| o.status.success())
        .map_or(0, |o| {
            String::from_utf8_lossy(&o.stdout)
                .lines()
                .filter(|l| !l.trim().is_empty())
                .count()
        })
}

/// Wait (at most 15 s, polling) until the server has at least `n` playback streams.
pub fn wait_for_playback_streams(n: usize) -> bool {
    let t0 = std::time::Instant::now();
    while t0.elapsed() < std::time::Duration::from_secs(15) {
        if playback_streams() >= n {
            return true;
        }
        std::thread::sleep(std::time::Duration::from_millis(20));
    }
    false
}
