//! Tone generators: the steady and the faded sine every tone of tragus is made from (the
//! pilot before each sweep, the calibration tones). The sweeps are in
//! [`super::sweep`]; together they are every signal tragus plays.

use std::f64::consts::PI;

/// `n` samples of `amplitude·sin(2π·f·k/fs)`, k = 0..n (full scale ±1.0).
pub fn sine(amplitude: f64, freq_hz: f64, rate_hz: u32, n: usize) -> Vec<f32> {
    let w = 2.0 * PI * freq_hz / f64::from(rate_hz);
    (0..n)
        .map(|k| (amplitude * (w * k as f64).sin()) as f32)
        .collect()
}

/// Raised-cosine fade-in gain at `n` of `n_fade`: `½·(1 − cos(π·n/F))`, 0 at n = 0.
pub fn fade_in_gain(n: usize, n_fade: usize) -> f64 {
    0.5 * (1.0 - (PI * n as f64 / n_fade as f64).cos())
}

/// `n_total` samples of a sine of peak `amplitude` whose envelope rises over the first
/// `n_fade` samples and falls over the last `n_fade` (raised cosine, symmetric; 0 at the
/// first and last sample), 1 in between. `n_fade` ≥ 1 and `2·n_fade ≤ n_total`.
pub fn faded_sine(
    amplitude: f64,
    freq_hz: f64,
    rate_hz: u32,
    n_total: usize,
    n_fade: usize,
) -> Vec<f32> {
    let w = 2.0 * PI * freq_hz / f64::from(rate_hz);
    (0..n_total)
        .map(|n| {
            let from_edge = n.min(n_total - 1 - n);
            let envelope = if from_edge < n_fade {
                fade_in_gain(from_edge, n_fade)
            } else {
                1.0
            };
            (amplitude * envelope * (w * n as f64).sin()) as f32
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    // A 1 kHz sine at 48 kHz repeats every 48 samples; its rms over whole periods is a/√2.
    #[test]
    fn sine_period_and_rms() {
        let x = sine(0.5, 1000.0, 48_000, 480);
        assert!((x[48] - x[0]).abs() < 1e-6 && (x[12] - 0.5).abs() < 1e-6);
        let rms = (x.iter().map(|&v| f64::from(v).powi(2)).sum::<f64>() / 480.0).sqrt();
        assert!((rms - 0.5 / 2f64.sqrt()).abs() < 1e-6, "{rms}");
    }

    #[test]
    fn faded_sine_starts_and_ends_at_zero_and_is_steady_inside() {
        let x = faded_sine(1.0, 1000.0, 48_000, 4800, 480);
        let steady = sine(1.0, 1000.0, 48_000, 4800);
        assert_eq!(x[0], 0.0);
        assert!(x[4799].abs() < 1e-6);
        assert_eq!(&x[480..4320], &steady[480..4320]);
    }
}
