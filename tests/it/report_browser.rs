//! The audit report as a browser renders it: headless Chromium loads the file of a store
//! of more than 50 units (no network: background networking, component updates and sync
//! are off, and the page names no address) and dumps its DOM, which must hold the same
//! figures and anchors as the store; a screenshot must come out as a PNG.
//!
//! Skipped with a notice where /usr/bin/chromium is missing, except on CI (`CI` set),
//! which installs it (.ci/run) and where its absence is a failure.

use crate::report_audit::{assert_structure, copy_store, demo_store, grow, report};
use crate::support::common::assert_exit;

use std::path::{Path, PathBuf};
use std::process::{Command, Output, Stdio};
use std::time::{Duration, Instant};

const CHROMIUM: &str = "/usr/bin/chromium";

/// Generous bound on one headless render; only guards against a hung browser.
const WAIT: Duration = Duration::from_secs(180);

fn chromium() -> Option<PathBuf> {
    let p = PathBuf::from(CHROMIUM);
    if p.exists() {
        return Some(p);
    }
    assert!(
        std::env::var_os("CI").is_none(),
        "{CHROMIUM} is missing on CI (.ci/run installs it)"
    );
    eprintln!(
        "report_browser: {CHROMIUM} not found, browser check skipped (apt-get install chromium)"
    );
    None
}

/// Run headless Chromium on `page` with `extra` arguments; its profile in `profile`.
fn run_chromium(bin: &Path, profile: &Path, page: &Path, extra: &[String]) -> Output {
    let mut child = Command::new(bin)
        .args([
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--disable-background-networking",
            "--disable-component-update",
            "--disable-sync",
            "--no-first-run",
        ])
        .arg(format!("--user-data-dir={}", profile.display()))
        .args(extra)
        .arg(format!("file://{}", page.display()))
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("start chromium");
    // Read stdout on a thread (the DOM can exceed a pipe's buffer) while waiting.
    let mut stdout = child.stdout.take().unwrap();
    let reader = std::thread::spawn(move || {
        let mut v = Vec::new();
        std::io::Read::read_to_end(&mut stdout, &mut v).map(|_| v)
    });
    let start = Instant::now();
    while child.try_wait().unwrap().is_none() {
        if start.elapsed() > WAIT {
            let _ = child.kill();
            panic!("chromium did not finish in {WAIT:?}");
        }
        std::thread::sleep(Duration::from_millis(50));
    }
    let mut out = child.wait_with_output().unwrap();
    out.stdout = reader.join().unwrap().unwrap();
    out
}

#[test]
fn chromium_renders_every_unit_and_the_figures() {
    let Some(bin) = chromium() else { return };
    let dir = tempfile::tempdir().unwrap();
    let store = dir.path().join("store");
    copy_store(demo_store(), &store);
    grow(&store, 50);
    let (out, html) = report(&store, dir.path(), &[]);
    assert_exit(&out, 0);
    let page = dir.path().join("report.html");
    assert!(!html.is_empty());

    let dom = run_chromium(
        &bin,
        &dir.path().join("profile"),
        &page,
        &["--dump-dom".to_string()],
    );
    assert!(
        dom.status.success(),
        "{}",
        String::from_utf8_lossy(&dom.stderr)
    );
    let dom = String::from_utf8(dom.stdout).unwrap();
    // The same figures and anchors as the file, as the browser parsed it.
    assert_structure(&dom, &store);
    let overlays: Vec<&str> = dom.split("<figure class=\"overlay\"").skip(1).collect();
    for o in &overlays {
        let figure = &o[..o.find("</figure>").unwrap()];
        assert_eq!(figure.matches("<svg").count(), 1, "one chart per overlay");
    }

    let png = dir.path().join("report.png");
    let shot = run_chromium(
        &bin,
        &dir.path().join("profile"),
        &page,
        &[
            format!("--screenshot={}", png.display()),
            "--window-size=1280,2400".to_string(),
        ],
    );
    assert!(
        shot.status.success(),
        "{}",
        String::from_utf8_lossy(&shot.stderr)
    );
    let bytes = std::fs::read(&png).unwrap();
    // The PNG signature (ISO/IEC 15948, 5.2): 89 50 4E 47 0D 0A 1A 0A.
    assert_eq!(&bytes[..8], b"\x89PNG\r\n\x1a\n");
    // A blank 1280×2400 page compresses to a few kB; a drawn one is far larger.
    assert!(bytes.len() > 50_000, "{} bytes", bytes.len());
}
