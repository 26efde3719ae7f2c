//! The recording rig: a WAV capture checked against the stimulus it claims to answer.

use tragus::dsp::sweep::{Stimulus, SweepParams};
use tragus::rig::recording::RecordingRig;
use tragus::rig::{Rig, RigError};
use tragus::wav::write_wav_f32;

/// A 48 kHz stimulus: 0.05 s silence, a synchronized sweep (Novak et al. 2015) of 0.5 s,
/// 0.1 s after, two outputs.
fn stimulus() -> Stimulus {
    let p = SweepParams::synchronized(48_000, 20.0, 20_000.0, 0.5, 0.25, 0.01, 0.01, 0.05).unwrap();
    Stimulus::build(p, 4800, 2, &[0, 1])
}

fn bad_message(e: RigError) -> String {
    match e {
        RigError::BadInput { message, .. } => message,
        other => panic!("expected bad input, got {other}"),
    }
}

#[test]
fn capture_is_the_file() {
    let s = stimulus();
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("cap.wav");
    let chans: Vec<Vec<f32>> = (0..3)
        .map(|c| {
            (0..s.n_samples())
                .map(|k| ((k * (c + 1)) % 97) as f32 / 97.0 - 0.5)
                .collect()
        })
        .collect();
    write_wav_f32(&path, 48_000, &chans).unwrap();
    let mut rig = RecordingRig::open(&path).unwrap();
    assert_eq!(rig.name(), "recording");
    let cap = rig.play_and_capture(&s, 2).unwrap();
    assert_eq!(cap.sample_rate_hz, 48_000);
    assert_eq!(cap.channels, chans);
    assert!(cap.faults.is_empty());
    assert_eq!(cap.xruns, 0);
}

#[test]
fn wrong_rate_names_both_rates() {
    let s = stimulus();
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("cap44.wav");
    write_wav_f32(&path, 44_100, &vec![vec![0.0; s.n_samples()]; 2]).unwrap();
    let e = RecordingRig::open(&path)
        .unwrap()
        .play_and_capture(&s, 2)
        .unwrap_err();
    assert_eq!(
        e.to_string(),
        format!(
            "{}: expected a capture at the stimulus rate 48000 Hz, found 44100 Hz",
            path.display()
        )
    );
    assert_eq!(
        bad_message(
            RecordingRig::open(&path)
                .unwrap()
                .play_and_capture(&s, 2)
                .unwrap_err()
        ),
        "expected a capture at the stimulus rate 48000 Hz, found 44100 Hz"
    );
}

#[test]
fn too_few_channels_names_both_counts() {
    let s = stimulus();
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("mono.wav");
    write_wav_f32(&path, 48_000, &[vec![0.0; s.n_samples()]]).unwrap();
    let e = RecordingRig::open(&path)
        .unwrap()
        .play_and_capture(&s, 2)
        .unwrap_err();
    assert_eq!(
        bad_message(e),
        "expected at least 2 input channels (the plan reads 2), found 1"
    );
}

#[test]
fn short_capture_is_returned_with_a_fault() {
    let s = stimulus();
    let n = s.n_samples();
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("short.wav");
    write_wav_f32(&path, 48_000, &[vec![0.1; n - 1000], vec![0.2; n - 1000]]).unwrap();
    let cap = RecordingRig::open(&path)
        .unwrap()
        .play_and_capture(&s, 2)
        .unwrap();
    assert_eq!(cap.n_samples(), n - 1000);
    assert_eq!(
        cap.faults,
        vec![format!("capture truncated: {} of {n} samples", n - 1000)]
    );
}

#[test]
fn unreadable_file_is_bad_input_naming_it() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("junk.wav");
    std::fs::write(&path, b"not audio at all").unwrap();
    match RecordingRig::open(&path) {
        Err(RigError::BadInput { path: p, message }) => {
            assert_eq!(p, path.display().to_string());
            assert_eq!(
                message,
                "expected a WAV file (bytes 0..4 \"RIFF\", 8..12 \"WAVE\"), found \"not \" at byte 0"
            );
        }
        Err(other) => panic!("expected bad input, got {other}"),
        Ok(_) => panic!("junk opened"),
    }
}
