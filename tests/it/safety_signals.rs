//! The guard's fade to silence and level detector, and the pilot tone: generated, read back
//! from captures made here from the definitions, and the sweep decision it leads to.

use proptest::prelude::*;
use proptest::test_runner::{Config, RngSeed};
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, Normal};
use std::f64::consts::PI;
use tragus::safety::pilot::{
    decide_sweep, extrapolate_db, generate_pilot, read_pilot, AbandonReason, PilotError,
    PilotReading, PilotSpec, ReadSettings, SweepDecision, SweepLimits, CLIP_FS, FLOOR_DBFS,
};
use tragus::safety::ramp::{
    fade_gain, fade_len, fade_to_silence, first_exceedance, max_gain_step, output_step_bound,
    FadeOut, GuardError, LevelWatch,
};

const RATE_HZ: u32 = 48_000;
const FS: f64 = 48_000.0;

/// A seeded proptest configuration (STYLE: seeded randomness only) that writes no files.
fn seeded(cases: u32) -> Config {
    Config {
        cases,
        rng_seed: RngSeed::Fixed(0x7261_6d70),
        failure_persistence: None,
        ..Config::default()
    }
}

/// Largest |y[n+1] − y[n]|.
fn max_step(y: &[f32]) -> f64 {
    y.windows(2)
        .map(|w| (f64::from(w[1]) - f64::from(w[0])).abs())
        .fold(0.0, f64::max)
}

fn sine(peak: f64, freq_hz: f64, phase: f64, n: usize) -> Vec<f32> {
    (0..n)
        .map(|i| (peak * (2.0 * PI * freq_hz * i as f64 / FS + phase).sin()) as f32)
        .collect()
}

// ---------------------------------------------------------------- fade to silence

#[test]
fn fade_of_a_constant_is_the_raised_cosine_exactly() {
    // On a constant 1.0 the output is the gain itself: ½(1 + cos(π(i+1)/N)) (the raised
    // cosine, by definition), monotone, N samples long, exactly 0 from start + N − 1 on.
    let n_fade = 240;
    let start = 100;
    let mut y = vec![1.0f32; 1000];
    fade_to_silence(&mut y, start, n_fade).unwrap();
    assert!(
        y[..start].iter().all(|&v| v == 1.0),
        "samples before the fade are untouched"
    );
    for i in 0..n_fade - 1 {
        let g = 0.5 * (1.0 + (PI * (i + 1) as f64 / n_fade as f64).cos());
        // f32 rounding of the product: 2^-24 relative.
        assert!((f64::from(y[start + i]) - g).abs() <= 6e-8, "sample {i}");
        assert!(
            y[start + i] > 0.0,
            "the fade is N samples: nonzero until its last"
        );
    }
    assert_eq!(y[start + n_fade - 1], 0.0, "final gain exactly 0");
    assert!(y[start + n_fade - 1..].iter().all(|&v| v == 0.0));
    assert!(
        y.windows(2).all(|w| w[1] <= w[0]),
        "monotone: never louder on the way down"
    );
    // Half-way the raised cosine is ½ (cos(π/2) = 0).
    assert!((fade_gain(n_fade / 2, n_fade) - 0.5).abs() < 1e-15);
    assert_eq!(fade_gain(n_fade, n_fade), 0.0);
    assert_eq!(fade_gain(0, n_fade), 1.0);
}

#[test]
fn largest_gain_step_is_sin_pi_over_2n() {
    // Derived in the module doc: |Δg| = sin(π(2n+1)/(2N))·sin(π/(2N)) ≤ sin(π/(2N)) ≤ π/(2N).
    // On a constant full-scale signal the measured largest step must not exceed it and, for
    // odd N (where (2n+1)/(2N) = ½ is reached), equal it to f32 rounding.
    for n_fade in [1usize, 2, 3, 7, 48, 239, 240, 241, 4800] {
        let mut y = vec![1.0f32; n_fade + 10];
        fade_to_silence(&mut y, 5, n_fade).unwrap();
        let measured = max_step(&y);
        let exact = max_gain_step(n_fade);
        assert!(exact <= PI / (2.0 * n_fade as f64));
        // Two f32 roundings of values ≤ 1: 2·2^-24.
        assert!(
            measured <= exact + 1.2e-7,
            "N {n_fade}: {measured} > {exact}"
        );
        if n_fade % 2 == 1 {
            assert!(
                (measured - exact).abs() <= 1.2e-7,
                "N {n_fade}: {measured} vs {exact}"
            );
        }
    }
}

#[test]
fn faded_sine_steps_stay_under_the_bound() {
    // |Δy| ≤ A·(π/(2N) + 2πf/fs) (module doc), for full-scale sines at several frequencies,
    // fades and phases, measured over the whole buffer (before, during and after the fade).
    for &(freq_hz, n_fade, phase) in &[
        (1000.0, 240, 0.3),
        (20.0, 240, 1.9),
        (8000.0, 48, 0.0),
        (19_000.0, 480, 2.2),
        (100.0, 12, 0.7),
    ] {
        let mut y = sine(1.0, freq_hz, phase, 4000);
        fade_to_silence(&mut y, 1234, n_fade).unwrap();
        let bound = output_step_bound(1.0, freq_hz, FS, n_fade);
        assert!(
            max_step(&y) <= bound + 1.2e-7,
            "{freq_hz} Hz, N {n_fade}: {} > {bound}",
            max_step(&y)
        );
        assert!(y[1234 + n_fade - 1..].iter().all(|&v| v == 0.0));
    }
}

#[test]
fn fade_length_from_a_duration() {
    // 5 ms at 48 kHz is 240 samples; 1 µs rounds up to one sample, never none.
    assert_eq!(fade_len(0.005, 48_000).unwrap(), 240);
    assert_eq!(fade_len(1e-6, 48_000).unwrap(), 1);
    assert!(matches!(
        fade_len(0.0, 48_000),
        Err(GuardError::BadFadeDuration { .. })
    ));
    assert_eq!(FadeOut::new(0).unwrap_err(), GuardError::ZeroFade);
    assert_eq!(
        GuardError::ZeroFade.to_string(),
        "expected a fade of at least 1 sample, found 0 (a hard cut clicks)"
    );
    // A fade starting past the end changes nothing.
    let mut y = vec![0.5f32; 10];
    fade_to_silence(&mut y, 10, 4).unwrap();
    assert!(y.iter().all(|&v| v == 0.5));
}

proptest! {
    #![proptest_config(seeded(200))]

    /// Differential: the fade applied block by block (as in an audio callback) equals the fade
    /// applied to the whole buffer, sample for sample, and stays under the step bound.
    #[test]
    fn fade_in_blocks_equals_fade_at_once(
        n_fade in 1usize..3000,
        start in 0usize..2000,
        freq_hz in 10.0f64..20_000.0,
        peak in 0.0f64..1.0,
        phase in 0.0f64..6.3,
        block in 1usize..700,
    ) {
        let x = sine(peak, freq_hz, phase, 5000);
        let mut whole = x.clone();
        fade_to_silence(&mut whole, start, n_fade).unwrap();
        let mut blocks = x.clone();
        let mut fade = FadeOut::new(n_fade).unwrap();
        for chunk in blocks[start..].chunks_mut(block) {
            fade.apply(chunk);
        }
        prop_assert_eq!(&whole, &blocks);
        // f32 rounding of two samples of magnitude ≤ peak: 2·2^-24·peak.
        let bound = output_step_bound(peak, freq_hz, FS, n_fade) + 1.2e-7 * peak;
        prop_assert!(max_step(&whole) <= bound);
        if start + n_fade - 1 < whole.len() {
            prop_assert!(whole[start + n_fade - 1..].iter().all(|&v| v == 0.0));
            prop_assert!(fade.is_silent());
        }
    }
}

// ---------------------------------------------------------------- level detector

#[test]
fn level_watch_finds_the_first_sample_past_the_limit() {
    let limit = 0.5;
    let a = [0.1f32, -0.5, 0.4];
    let b = [0.2f32, -0.50001, 0.9];
    let c = [0.7f32];
    // −0.5 equals the limit and does not pass it; −0.50001 does, at overall index 4.
    assert_eq!(
        first_exceedance([&a[..], &b[..], &c[..]], limit).unwrap(),
        Some(4)
    );
    assert_eq!(first_exceedance([&a[..]], limit).unwrap(), None);
    let mut watch = LevelWatch::new(limit).unwrap();
    assert_eq!(watch.check_block(&a), None);
    assert_eq!(watch.check_block(&b), Some(4));
    assert_eq!(watch.check_block(&c), Some(6));
    assert_eq!(watch.tripped_at(), Some(4));
    assert_eq!(watch.samples_seen(), 7);
    // A NaN is a fault and trips the guard.
    assert_eq!(
        first_exceedance([&[0.0f32, f32::NAN][..]], limit).unwrap(),
        Some(1)
    );
    assert_eq!(
        LevelWatch::new(0.0).unwrap_err().to_string(),
        "expected a level limit above 0 full scale, found 0"
    );
    assert!(LevelWatch::new(f64::NAN).is_err());
}

#[test]
fn level_watch_on_a_sine_trips_where_the_sine_crosses() {
    // A sine of peak 1 at 1 kHz passes 0.5 first where sin(2πf·n/fs) > 0.5, i.e. after
    // 1/12 period (arcsin ½ = π/6): n > 48000/12000 = 4 samples, so n = 5 (n = 4 lands
    // exactly on 0.5 in exact arithmetic; f64 sin gives 0.49999999999999994).
    let x = sine(1.0, 1000.0, 0.0, 480);
    let blocks: Vec<&[f32]> = x.chunks(3).collect();
    let found = first_exceedance(blocks, 0.5).unwrap().unwrap();
    assert!(found == 4 || found == 5, "{found}");
    assert!(f64::from(x[found]).abs() > 0.5);
    assert!(x[..found].iter().all(|&v| f64::from(v).abs() <= 0.5));
}

// ---------------------------------------------------------------- pilot

/// The pilot written from its definition (not with the library's generator): peak
/// 10^(L/20), raised-cosine fades of `n_fade`, total `n_total`, starting at capture index
/// `at`, with start phase `phase`.
fn add_tone(
    x: &mut [f32],
    at: usize,
    level_dbfs: f64,
    freq_hz: f64,
    phase: f64,
    n_total: usize,
    n_fade: usize,
) {
    let a = 10f64.powf(level_dbfs / 20.0);
    for n in 0..n_total {
        let m = n.min(n_total - 1 - n);
        let env = if m < n_fade {
            0.5 * (1.0 - (PI * m as f64 / n_fade as f64).cos())
        } else {
            1.0
        };
        let v = a * env * (2.0 * PI * freq_hz * n as f64 / FS + phase).sin();
        x[at + n] = (f64::from(x[at + n]) + v) as f32;
    }
}

/// White Gaussian noise of rms `rms_fs`, seeded.
fn noise(len: usize, rms_fs: f64, seed: u64) -> Vec<f32> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let normal = Normal::new(0.0, rms_fs).unwrap();
    (0..len).map(|_| normal.sample(&mut rng) as f32).collect()
}

/// Pre-roll 0.1 s, pilot 0.1 s (10 ms fades) at pre-roll + delay, 0.1 s after the largest
/// (50 ms) latency.
const PRE: usize = 4800;
const LEN: usize = PRE + 2400 + 4800 + 4800;

fn capture(
    level_dbfs: f64,
    freq_hz: f64,
    phase: f64,
    delay: usize,
    noise_rms: f64,
    seed: u64,
) -> Vec<f32> {
    let mut x = noise(LEN, noise_rms, seed);
    add_tone(&mut x, PRE + delay, level_dbfs, freq_hz, phase, 4800, 480);
    x
}

#[test]
fn generated_pilot_is_the_defined_sine() {
    let spec = PilotSpec::new(1000.0, -30.0);
    let p = generate_pilot(&spec, RATE_HZ).unwrap();
    // 100 ms at 48 kHz (issue 5 default).
    assert_eq!(p.len(), 4800);
    let mut reference = vec![0.0f32; 4800];
    add_tone(&mut reference, 0, -30.0, 1000.0, 0.0, 4800, 480);
    // f32 rounding of values ≤ 10^(−30/20) = 0.0316: 2^-24 relative.
    for (n, (&g, &r)) in p.iter().zip(&reference).enumerate() {
        assert!((g - r).abs() <= 4e-9, "sample {n}: {g} vs {r}");
    }
    assert_eq!(p[0], 0.0);
    assert_eq!(p[4799], 0.0);
    let peak = p.iter().fold(0.0f32, |m, &v| m.max(v.abs()));
    // The steady part reaches the peak 10^(−1.5) = 0.031623 at 1 kHz (48 samples a period,
    // the crest sampled exactly).
    assert!((f64::from(peak) - 10f64.powf(-1.5)).abs() < 1e-8);
}

#[test]
fn pilot_read_within_0_05_db_in_noise() {
    // Analytic sines at known dBFS, frequencies and phases, 137 samples late, in seeded white
    // noise. Noise of rms σ lands in the analysis bin (Hann, 3840 samples, scaled as an
    // amplitude) with mean power σ²·6/3840 (Σw² / (Σw/2)²), 28 dB below σ². Cases are kept
    // where the tone is ≥ 55 dB above that: the reading is then off by 0.05 dB only if the
    // bin's noise is 10 dB above its mean power (20·lg(1 + 10^(−45/20)) = 0.049 dB), which
    // white Gaussian noise does with probability e^−10.
    let mut worst_db = 0.0f64;
    let mut snr_diffs = Vec::new();
    let mut seed = 1;
    for &level in &[-6.0, -20.0, -40.0, -60.0] {
        for &(freq_hz, phase) in &[(250.0, 0.0), (1000.0, 1.1), (3150.0, 2.5), (12_500.0, 0.4)] {
            for &noise_rms in &[1e-5, 1e-4, 1e-3, 3e-3] {
                let bin_snr_db = level - 20.0 * (noise_rms * (6.0f64 / 3840.0).sqrt()).log10();
                if bin_snr_db < 55.0 {
                    continue;
                }
                seed += 1;
                let x = capture(level, freq_hz, phase, 137, noise_rms, seed);
                let spec = PilotSpec::new(freq_hz, level);
                let r = read_pilot(&x, RATE_HZ, &spec, &ReadSettings::new(PRE)).unwrap();
                let err = r.level_dbfs - level;
                worst_db = worst_db.max(err.abs());
                assert!(
                    err.abs() < 0.05,
                    "{level} dBFS at {freq_hz} Hz, noise {noise_rms}: read {} dBFS",
                    r.level_dbfs
                );
                assert!(r.present && !r.clipped);
                assert!((20.0 * r.amplitude_fs.log10() - r.level_dbfs).abs() < 1e-9);
                snr_diffs.push(r.snr_db - bin_snr_db);
            }
        }
    }
    assert!(snr_diffs.len() >= 30, "{} cases", snr_diffs.len());
    // The SNR is the level above the estimated noise. One estimate (0.1 s pre-roll: two
    // windows × 17 frequencies, correlated) scatters by about ±2 dB; over 30+ cases the mean
    // must sit within 1 dB of the analytic SNR (its own scatter ≈ ±0.3 dB plus the ≈ +0.2 dB
    // bias of a log of a mean).
    let mean = snr_diffs.iter().sum::<f64>() / snr_diffs.len() as f64;
    let spread = snr_diffs.iter().fold(0.0f64, |m, d| m.max(d.abs()));
    assert!(mean.abs() < 1.0, "mean SNR error {mean} dB");
    eprintln!(
        "pilot read: {} cases, worst level error {worst_db:.5} dB, SNR error mean {mean:.2} dB, \
         largest {spread:.2} dB",
        snr_diffs.len()
    );
}

#[test]
fn pilot_noise_estimate_matches_white_noise() {
    // White noise of rms σ through a Hann window of S samples, scaled as an amplitude
    // (2/Σw), has mean power 4σ²·Σw²/(Σw)² = σ²·6/S. With a 0.5 s pre-roll (11 windows × 9
    // frequencies) the estimate is within 1 dB (seeded; the spread of a mean of ~50
    // independent exponentials is about ±0.6 dB).
    let sigma = 1e-3;
    let pre = 24_000;
    let mut x = noise(pre + 2400 + 4800 + 4800, sigma, 99);
    add_tone(&mut x, pre + 500, -20.0, 1000.0, 0.3, 4800, 480);
    let r = read_pilot(
        &x,
        RATE_HZ,
        &PilotSpec::new(1000.0, -20.0),
        &ReadSettings::new(pre),
    )
    .unwrap();
    let expected_dbfs = 20.0 * (sigma * (6.0f64 / 3840.0).sqrt()).log10();
    assert!(
        (r.noise_dbfs - expected_dbfs).abs() < 1.0,
        "{} vs {expected_dbfs}",
        r.noise_dbfs
    );
}

#[test]
fn delayed_pilot_is_still_read() {
    // Latency 0..=50 ms (the default search range): the level and the latency are found.
    let mut seed = 100;
    for &delay in &[0usize, 1, 48, 480, 1234, 2399, 2400] {
        seed += 1;
        let x = capture(-30.0, 1000.0, 0.9, delay, 1e-5, seed);
        let r = read_pilot(
            &x,
            RATE_HZ,
            &PilotSpec::new(1000.0, -30.0),
            &ReadSettings::new(PRE),
        )
        .unwrap();
        assert!(
            (r.level_dbfs + 30.0).abs() < 0.05,
            "delay {delay}: {}",
            r.level_dbfs
        );
        // The onset is found to 1 ms: the raised-cosine top is flat, and 1 ms of error moves
        // the level by 3e-7 dB (module doc), so no more is asked.
        assert!(
            (r.delay_samples as i64 - delay as i64).abs() <= 48,
            "delay {delay}: found {}",
            r.delay_samples
        );
        assert!(r.present);
    }
}

#[test]
fn silence_is_not_a_pilot() {
    // Noise only (−90 dBFS rms): no tone, so the SNR is that of noise against noise, far
    // below 20 dB.
    let x = noise(LEN, 10f64.powf(-90.0 / 20.0), 7);
    let r = read_pilot(
        &x,
        RATE_HZ,
        &PilotSpec::new(1000.0, -30.0),
        &ReadSettings::new(PRE),
    )
    .unwrap();
    assert!(!r.present, "SNR {}", r.snr_db);
    assert!(r.snr_db < 15.0);
    // Digital silence: no level at all (floored), not present.
    let zeros = vec![0.0f32; LEN];
    let r = read_pilot(
        &zeros,
        RATE_HZ,
        &PilotSpec::new(1000.0, -30.0),
        &ReadSettings::new(PRE),
    )
    .unwrap();
    assert!(!r.present);
    assert_eq!(r.level_dbfs, FLOOR_DBFS);
    // A pilot 10 dB in the bin above the noise is there but below the 20 dB threshold.
    let x = capture(-80.0, 1000.0, 0.0, 100, 10f64.powf(-62.0 / 20.0), 8);
    let r = read_pilot(
        &x,
        RATE_HZ,
        &PilotSpec::new(1000.0, -30.0),
        &ReadSettings::new(PRE),
    )
    .unwrap();
    assert!(!r.present, "SNR {}", r.snr_db);
}

#[test]
fn clipped_pilot_is_flagged_and_abandons() {
    // A pilot 6 dB over full scale, clipped by the input converter.
    let mut x = capture(6.0, 1000.0, 0.2, 300, 1e-5, 11);
    for v in &mut x {
        *v = v.clamp(-1.0, 1.0);
    }
    let spec = PilotSpec::new(1000.0, -30.0);
    let r = read_pilot(&x, RATE_HZ, &spec, &ReadSettings::new(PRE)).unwrap();
    assert!(r.clipped);
    assert!(r.present);
    // Its fundamental reads low (a clipped sine's fundamental is below the unclipped one's):
    // trusting it would under-estimate the sweep.
    assert!(r.level_dbfs < 6.0);
    let limits = SweepLimits {
        cap_db: 0.0,
        margin_db: 0.0,
        min_sweep_dbfs: -60.0,
    };
    let d = decide_sweep(&r, r.level_dbfs, -30.0, 0.0, &limits).unwrap();
    assert!(matches!(
        d,
        SweepDecision::Abandon {
            reason: AbandonReason::PilotClipped { .. }
        }
    ));
    // Just under the clip threshold (0.99 < 32767/32768) is not flagged.
    let x = capture(20.0 * 0.99f64.log10(), 1000.0, 0.0, 300, 0.0, 12);
    let r = read_pilot(&x, RATE_HZ, &spec, &ReadSettings::new(PRE)).unwrap();
    assert!(!r.clipped && r.peak_fs < f64::from(CLIP_FS));
}

#[test]
fn generated_pilot_through_a_gain_reads_drive_plus_gain() {
    // End to end: the library's pilot through a known gain (−17.3 dB) and latency (7 ms)
    // reads drive + gain; the extrapolation to a sweep 30 dB louder adds 30 dB.
    let spec = PilotSpec::below_sweep(1000.0, -6.0);
    assert_eq!(spec.level_dbfs, -36.0);
    let p = generate_pilot(&spec, RATE_HZ).unwrap();
    let gain = 10f64.powf(-17.3 / 20.0);
    let mut x = noise(LEN, 1e-6, 21);
    for (i, &s) in p.iter().enumerate() {
        x[PRE + 336 + i] += (f64::from(s) * gain) as f32;
    }
    let r = read_pilot(&x, RATE_HZ, &spec, &ReadSettings::new(PRE)).unwrap();
    assert!(
        (r.level_dbfs - (-36.0 - 17.3)).abs() < 0.05,
        "{}",
        r.level_dbfs
    );
    let swept = extrapolate_db(spec.level_dbfs, r.level_dbfs, -6.0);
    assert!((swept - (-6.0 - 17.3)).abs() < 0.05);
    // With a microphone input of 1 FS/Pa, a tone of peak 1 FS is 1/√2 Pa rms:
    // 93.979 − 3.010 = 90.969 dB SPL (ISO 1683 reference 20 µPa).
    let full = PilotReading {
        amplitude_fs: 1.0,
        ..r
    };
    assert!((full.spl_db(1.0) - 90.969).abs() < 1e-3);
}

fn reading(present: bool) -> PilotReading {
    PilotReading {
        level_dbfs: -40.0,
        amplitude_fs: 0.01,
        noise_dbfs: -100.0,
        snr_db: if present { 60.0 } else { 3.0 },
        present,
        clipped: false,
        peak_fs: 0.01,
        delay_samples: 0,
        window_samples: 3840,
    }
}

#[test]
fn sweep_decision_boundaries() {
    // Pilot driven at −40 dBFS, sweep planned at −10 dBFS (+30 dB), cap 90 dB SPL with a
    // 3 dB margin (so at most 87 dB), lowest useful sweep −30 dBFS.
    let limits = SweepLimits {
        cap_db: 90.0,
        margin_db: 3.0,
        min_sweep_dbfs: -30.0,
    };
    let r = reading(true);
    let decide = |measured: f64| decide_sweep(&r, measured, -40.0, -10.0, &limits).unwrap();
    // A quiet unit (80 dB expected) is swept at the planned level, never louder.
    assert_eq!(
        decide(50.0),
        SweepDecision::Proceed {
            sweep_dbfs: -10.0,
            expected_db: 80.0
        }
    );
    // Exactly at cap − margin: allowed as planned.
    assert_eq!(
        decide(57.0),
        SweepDecision::Proceed {
            sweep_dbfs: -10.0,
            expected_db: 87.0
        }
    );
    // 0.5 dB over: scaled down by exactly 0.5 dB.
    assert_eq!(
        decide(57.5),
        SweepDecision::ScaleDown {
            gain_db: -0.5,
            sweep_dbfs: -10.5,
            expected_db: 87.0,
            planned_expected_db: 87.5
        }
    );
    // 20 dB over: the sweep lands exactly on the lowest useful level, still played.
    assert_eq!(
        decide(77.0),
        SweepDecision::ScaleDown {
            gain_db: -20.0,
            sweep_dbfs: -30.0,
            expected_db: 87.0,
            planned_expected_db: 107.0
        }
    );
    // 20.5 dB over: below the lowest useful level, abandoned with the numbers.
    let d = decide(77.5);
    let SweepDecision::Abandon { reason } = d else {
        panic!("expected abandon, found {d:?}");
    };
    assert_eq!(
        reason.to_string(),
        "the sweep would reach 107.5 dB against a cap of 90.0 dB (3.0 dB margin); staying \
         under it needs a sweep at -30.5 dBFS, below the lowest useful -30.0 dBFS; the unit is \
         far more sensitive than declared"
    );
    // An absent pilot abandons even when the sweep would be quiet: no sweeping louder to
    // find the unit.
    let absent = reading(false);
    let d = decide_sweep(&absent, 0.0, -40.0, -10.0, &limits).unwrap();
    assert!(matches!(
        d,
        SweepDecision::Abandon {
            reason: AbandonReason::PilotAbsent { .. }
        }
    ));
    // Bad inputs are errors, not decisions.
    let e = decide_sweep(
        &r,
        50.0,
        -40.0,
        -10.0,
        &SweepLimits {
            margin_db: -1.0,
            ..limits
        },
    )
    .unwrap_err();
    assert_eq!(
        e.to_string(),
        "expected a finite margin of 0 dB or more for the sweep decision's margin, found -1"
    );
    assert!(decide_sweep(&r, f64::NAN, -40.0, -10.0, &limits).is_err());
}

proptest! {
    #![proptest_config(seeded(500))]

    /// Whatever the unit, the decision never raises the sweep, and a sweep that is played
    /// is expected at or under cap − margin.
    #[test]
    fn sweep_never_louder_and_never_over_the_cap(
        measured in -50.0f64..150.0,
        pilot in -80.0f64..-20.0,
        planned in -40.0f64..0.0,
        cap in 60.0f64..120.0,
        margin in 0.0f64..10.0,
        min_sweep in -80.0f64..-20.0,
    ) {
        let limits = SweepLimits { cap_db: cap, margin_db: margin, min_sweep_dbfs: min_sweep };
        match decide_sweep(&reading(true), measured, pilot, planned, &limits).unwrap() {
            SweepDecision::Proceed { sweep_dbfs, expected_db } => {
                prop_assert_eq!(sweep_dbfs, planned);
                prop_assert!(expected_db <= cap - margin);
            }
            SweepDecision::ScaleDown { gain_db, sweep_dbfs, expected_db, .. } => {
                prop_assert!(gain_db < 0.0);
                prop_assert!(sweep_dbfs < planned && sweep_dbfs >= min_sweep);
                // Re-extrapolated from the pilot at the new level: 1e-9 dB is rounding.
                let again = measured + (sweep_dbfs - pilot);
                prop_assert!(again <= cap - margin + 1e-9);
                prop_assert!((expected_db - again).abs() < 1e-9);
            }
            SweepDecision::Abandon { reason } => {
                let is_too_loud = matches!(reason, AbandonReason::TooLoud { .. });
                prop_assert!(is_too_loud);
            }
        }
    }
}

#[test]
fn pilot_errors_say_what_was_expected() {
    let spec = PilotSpec::new(1000.0, -30.0);
    let short = vec![0.0f32; PRE + 4000];
    assert_eq!(
        read_pilot(&short, RATE_HZ, &spec, &ReadSettings::new(PRE)).unwrap_err(),
        PilotError::CaptureTooShort {
            needed: PRE + 2400 + 4800,
            found: PRE + 4000
        }
    );
    let x = vec![0.0f32; LEN];
    assert_eq!(
        read_pilot(&x, RATE_HZ, &spec, &ReadSettings::new(1000))
            .unwrap_err()
            .to_string(),
        "expected a pre-roll of at least 3840 samples before the pilot (one analysis window, \
         for the noise), found 1000"
    );
    let mut bad = x.clone();
    bad[17] = f32::INFINITY;
    assert_eq!(
        read_pilot(&bad, RATE_HZ, &spec, &ReadSettings::new(PRE)).unwrap_err(),
        PilotError::NotFinite {
            index: 17,
            value: f32::INFINITY
        }
    );
    assert!(matches!(
        generate_pilot(&PilotSpec::new(30_000.0, -30.0), RATE_HZ),
        Err(PilotError::BadFrequency { .. })
    ));
    assert_eq!(
        generate_pilot(&PilotSpec::new(1000.0, 1.0), RATE_HZ)
            .unwrap_err()
            .to_string(),
        "expected a pilot peak level of 0 dBFS or less, found 1 dBFS"
    );
    // 80 ms steady at 40 Hz is 3.2 cycles: too few to keep the image off the bin.
    assert!(matches!(
        generate_pilot(&PilotSpec::new(40.0, -30.0), RATE_HZ),
        Err(PilotError::TooFewCycles { .. })
    ));
    let no_fade = PilotSpec {
        fade_s: 0.0,
        ..spec
    };
    assert!(matches!(
        generate_pilot(&no_fade, RATE_HZ),
        Err(PilotError::BadShape { .. })
    ));
    assert_eq!(generate_pilot(&spec, 0).unwrap_err(), PilotError::BadRate);
}
