//! Development check of the analyzer against analytic systems (temporary harness).
use tragus::analysis::Analyzer;
use tragus::dsp::sweep::{Stimulus, SweepParams};

fn stim(level: f64) -> Stimulus {
    let sweep =
        SweepParams::synchronized(48_000, 20.0, 20_000.0, 1.0, level, 0.005, 0.005, 0.1).unwrap();
    Stimulus::build(sweep, (0.2 * 48_000.0) as usize, 1, &[0])
}

fn biquad(b: [f64; 3], a: [f64; 3], x: &[f32]) -> Vec<f32> {
    let (mut z1, mut z2) = (0.0, 0.0);
    x.iter()
        .map(|&v| {
            let v = f64::from(v);
            let y = b[0] * v + z1;
            z1 = b[1] * v - a[1] * y + z2;
            z2 = b[2] * v - a[2] * y;
            y as f32
        })
        .collect()
}

fn resp(b: [f64; 3], a: [f64; 3], f: f64) -> f64 {
    use std::f64::consts::PI;
    let w = 2.0 * PI * f / 48_000.0;
    let z = |k: f64| (-(k * w)).sin_cos();
    let num = (
        b[0] + b[1] * z(1.0).1 + b[2] * z(2.0).1,
        b[1] * z(1.0).0 + b[2] * z(2.0).0,
    );
    let den = (
        a[0] + a[1] * z(1.0).1 + a[2] * z(2.0).1,
        a[1] * z(1.0).0 + a[2] * z(2.0).0,
    );
    10.0 * ((num.0 * num.0 + num.1 * num.1) / (den.0 * den.0 + den.1 * den.1)).log10()
}

#[test]
fn dev_peaking() {
    use std::f64::consts::PI;
    let s = stim(0.5);
    let (g, f0, q) = (6.0f64, 2000.0f64, 1.41f64);
    let aa = 10f64.powf(g / 40.0);
    let w0 = 2.0 * PI * f0 / 48_000.0;
    let alpha = w0.sin() / (2.0 * q);
    let a0 = 1.0 + alpha / aa;
    let b = [
        (1.0 + alpha * aa) / a0,
        -2.0 * w0.cos() / a0,
        (1.0 - alpha * aa) / a0,
    ];
    let a = [1.0, -2.0 * w0.cos() / a0, (1.0 - alpha / aa) / a0];
    let y = biquad(b, a, s.driven_signal());
    let mut an = Analyzer::with_options(&s, 5, 24, 20.0);
    let m = an.analyze_channel("x", &y);
    let mut worst: f64 = 0.0;
    for (f, r) in m.frequencies_hz.iter().zip(&m.response_db) {
        let e = r - resp(b, a, *f);
        if *f >= 50.0 && *f <= 16000.0 {
            worst = worst.max(e.abs());
        }
        if (*f as i64) % 7 == 0 {
            eprintln!("{f:.1} {e:+.5}");
        }
    }
    eprintln!(
        "worst {worst} latency {} pol {:?} snr {}",
        m.latency_samples, m.polarity, m.snr_db
    );
    eprintln!(
        "first {:?} last {:?}",
        m.response_db.first(),
        m.response_db.last()
    );
    eprintln!("hd2 {:?}", &m.harmonics_db["2"][100..104]);
    eprintln!("rb {:?}", &m.rub_buzz_db[100..104]);
    assert!(worst < 0.02);
}

#[test]
fn dev_poly() {
    let s = stim(0.5);
    let (a2, a3) = (0.02, 0.01);
    let y: Vec<f32> = s
        .driven_signal()
        .iter()
        .map(|&v| {
            let v = f64::from(v);
            (v + a2 * v * v + a3 * v * v * v) as f32
        })
        .collect();
    let mut an = Analyzer::with_options(&s, 5, 24, 20.0);
    let m = an.analyze_channel("x", &y);
    let hd2 = 20.0 * (a2 * 0.5 / 2.0f64).log10();
    let hd3 = 20.0 * (a3 * 0.25 / 4.0f64).log10();
    for i in (0..m.frequencies_hz.len()).step_by(12) {
        eprintln!(
            "{:.1} hd2 {:?} (want {hd2:.2}) hd3 {:?} (want {hd3:.2}) hd4 {:?} rb {:?}",
            m.frequencies_hz[i],
            m.harmonics_db["2"][i],
            m.harmonics_db["3"][i],
            m.harmonics_db["4"][i],
            m.rub_buzz_db[i]
        );
    }
}

#[test]
fn dev_delay() {
    let s = stim(0.5);
    let mut an = Analyzer::with_options(&s, 5, 24, 20.0);
    for d in [0usize, 1, 137, 4801] {
        let mut y = vec![0f32; d];
        y.extend_from_slice(s.driven_signal());
        y.truncate(s.n_samples());
        let m = an.analyze_channel("x", &y);
        eprintln!(
            "d={d} latency {} frac {} r1k {}",
            m.latency_samples,
            m.latency_fractional_samples,
            m.level_at_db(1000.0)
        );
    }
}

#[test]
fn dev_cubic() {
    let sweep =
        SweepParams::synchronized(48_000, 20.0, 6_000.0, 1.0, 0.5, 0.005, 0.005, 0.1).unwrap();
    let s = Stimulus::build(sweep, 9600, 1, &[0]);
    let y: Vec<f32> = s
        .driven_signal()
        .iter()
        .map(|&v| {
            let v = f64::from(v);
            (v + 0.1 * v * v * v) as f32
        })
        .collect();
    let mut an = Analyzer::with_options(&s, 5, 24, 20.0);
    let m = an.analyze_channel("x", &y);
    let i = 120;
    eprintln!(
        "L={} f {:.1} hd3 {:?} want {}",
        sweep.l_s,
        m.frequencies_hz[i],
        m.harmonics_db["3"][i],
        20.0 * (0.1 * 0.25f64 / 4.0).log10()
    );
}

#[test]
fn dev_hp_noise() {
    use rand::{Rng, SeedableRng};
    let s = stim(0.5);
    let b = [0.9907866988640353, -1.9815733977280706, 0.9907866988640353];
    let a = [1.0, -1.9814883375013124, 0.9816584579548290];
    let mut y = biquad(b, a, s.driven_signal());
    // 60 dB SNR re sweep rms (0.5/sqrt2): noise rms 3.5e-4; uniform*sqrt12 approximates.
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(7);
    let sig = 0.5 / 2f64.sqrt();
    let sigma = sig * 1e-3;
    for v in y.iter_mut() {
        let u: f64 = rng.random::<f64>() - 0.5;
        *v += (u * sigma * 12f64.sqrt()) as f32;
    }
    let mut an = Analyzer::with_options(&s, 5, 24, 20.0);
    let m = an.analyze_channel("x", &y);
    let mut worst: f64 = 0.0;
    let mut wf = 0.0;
    for (f, r) in m.frequencies_hz.iter().zip(&m.response_db) {
        let e = r - resp(b, a, *f);
        if *f >= 50.0 && *f <= 16000.0 && e.abs() > worst {
            worst = e.abs();
            wf = *f;
        }
    }
    eprintln!("HP worst {worst} at {wf} snr {}", m.snr_db);
}
