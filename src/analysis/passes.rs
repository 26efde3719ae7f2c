//! The per-sample passes of the analysis, written so that the compiler vectorises them:
//! fixed-width lanes with independent accumulators instead of one serial chain (a running
//! `f32::max` or a running f64 sum cannot be vectorised, and each step waits for the last).
//!
//! Maxima and counts are exact, so these return what a plain loop returns, to the bit.
//! Sums of squares are reassociated over the lanes: the result differs from a serial sum by
//! rounding only (relative 1e-16).

use crate::dsp::fft::{get, set};
use realfft::num_complex::Complex;

/// Lanes of the vectorised passes.
const LANES: usize = 16;

/// What a scan of a capture channel found.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(super) struct CaptureScan {
    /// Largest finite |sample|.
    pub peak: f32,
    /// Samples at or beyond `clip` in magnitude, or not finite.
    pub n_clipped: usize,
}

/// Scan `samples` for clipping and peak, and copy them into the packed buffer `time` with
/// non-finite samples as 0 and every sample after them 0.
pub(super) fn scan_capture(samples: &[f32], clip: f32, time: &mut [Complex<f32>]) -> CaptureScan {
    let mut peak = [0f32; LANES];
    let mut clipped = [0u32; LANES];
    let mut total_clipped = 0usize;
    let chunks = samples.len() / LANES;
    for (c, chunk) in samples.chunks_exact(LANES).enumerate() {
        let mut out = [0f32; LANES];
        for i in 0..LANES {
            let s = chunk[i];
            let a = s.abs();
            let finite = a < f32::INFINITY;
            let v = if finite { a } else { 0.0 };
            peak[i] = if v > peak[i] { v } else { peak[i] };
            clipped[i] += u32::from(a >= clip || !finite);
            out[i] = if finite { s } else { 0.0 };
        }
        let dst = &mut time[c * LANES / 2..(c + 1) * LANES / 2];
        for (d, pair) in dst.iter_mut().zip(out.chunks_exact(2)) {
            *d = Complex::new(pair[0], pair[1]);
        }
        // Lane counters hold at most 2³² − 1 chunks; fold them in well before that.
        if c % (1 << 20) == (1 << 20) - 1 {
            total_clipped += clipped.iter().map(|&n| n as usize).sum::<usize>();
            clipped = [0; LANES];
        }
    }
    total_clipped += clipped.iter().map(|&n| n as usize).sum::<usize>();
    let mut peak = peak.iter().fold(0f32, |m, &v| if v > m { v } else { m });
    for (i, &s) in samples.iter().enumerate().skip(chunks * LANES) {
        let a = s.abs();
        let finite = a < f32::INFINITY;
        if finite && a > peak {
            peak = a;
        }
        if a >= clip || !finite {
            total_clipped += 1;
        }
        set(time, i, if finite { s } else { 0.0 });
    }
    // Zero the rest: an odd sample count leaves half an element to clear first.
    let n = samples.len();
    if n % 2 == 1 && n / 2 < time.len() {
        time[n / 2].im = 0.0;
    }
    for d in time.iter_mut().skip(n.div_ceil(2)) {
        *d = Complex::new(0.0, 0.0);
    }
    CaptureScan {
        peak,
        n_clipped: total_clipped,
    }
}

/// Largest |x| over the packed samples `[lo, hi)` (0 for an empty range).
pub(super) fn max_abs(packed: &[Complex<f32>], lo: usize, hi: usize) -> f32 {
    if lo >= hi {
        return 0.0;
    }
    let mut m = 0f32;
    // Ragged ends sample by sample; whole elements in between, in lanes.
    let (mut a, mut b) = (lo, hi);
    if a % 2 == 1 {
        m = m.max(get(packed, a).abs());
        a += 1;
    }
    if b % 2 == 1 && b > a {
        b -= 1;
        m = m.max(get(packed, b).abs());
    }
    let whole = &packed[a / 2..b / 2];
    let mut lane = [0f32; LANES];
    let chunks = whole.chunks_exact(LANES / 2);
    let rest = chunks.remainder();
    for chunk in chunks {
        for i in 0..LANES / 2 {
            let (x, y) = (chunk[i].re.abs(), chunk[i].im.abs());
            lane[2 * i] = if x > lane[2 * i] { x } else { lane[2 * i] };
            lane[2 * i + 1] = if y > lane[2 * i + 1] {
                y
            } else {
                lane[2 * i + 1]
            };
        }
    }
    for c in rest {
        m = m.max(c.re.abs()).max(c.im.abs());
    }
    lane.iter().fold(m, |m, &v| if v > m { v } else { m })
}

/// Index of the first largest |x| among the packed samples `[0, end)` (0 when `end` is 0).
pub(super) fn argmax_abs(packed: &[Complex<f32>], end: usize) -> usize {
    let m = max_abs(packed, 0, end);
    // The maximum is exact, so the first sample equal to it is the first maximum.
    let whole = &packed[..end / 2];
    if let Some(k) = whole
        .iter()
        .position(|c| c.re.abs() == m || c.im.abs() == m)
    {
        return if whole[k].re.abs() == m {
            2 * k
        } else {
            2 * k + 1
        };
    }
    if end % 2 == 1 && get(packed, end - 1).abs() == m {
        return end - 1;
    }
    0
}

/// Σx² over the finite samples of `x`, in f64.
pub(super) fn sum_squares_finite(x: &[f32]) -> f64 {
    let mut acc = [0f64; LANES];
    let chunks = x.chunks_exact(LANES);
    let rest = chunks.remainder();
    for chunk in chunks {
        for i in 0..LANES {
            let v = f64::from(chunk[i]);
            // Non-finite samples add nothing (as `filter(is_finite)` would).
            acc[i] += if v.abs() < f64::INFINITY { v * v } else { 0.0 };
        }
    }
    let mut s: f64 = acc.iter().sum();
    for &v in rest.iter().filter(|v| v.is_finite()) {
        s += f64::from(v) * f64::from(v);
    }
    s
}

#[cfg(test)]
mod tests {
    use super::*;

    fn packed(x: &[f32]) -> Vec<Complex<f32>> {
        let mut p = vec![Complex::new(0.0, 0.0); x.len().div_ceil(2)];
        for (i, &v) in x.iter().enumerate() {
            set(&mut p, i, v);
        }
        p
    }

    // Each pass against the plain loop it replaces, on lengths that leave ragged ends.
    #[test]
    fn passes_equal_plain_loops() {
        for n in [0usize, 1, 2, 15, 16, 17, 33, 100, 257] {
            let mut x: Vec<f32> = (0..n)
                .map(|i| ((i * 7919 % 211) as f32 - 105.0) / 100.0)
                .collect();
            if n > 10 {
                x[3] = f32::NAN;
                x[7] = f32::NEG_INFINITY;
            }
            let mut time = vec![Complex::new(9.0f32, 9.0); n.div_ceil(2) + 3];
            let scan = scan_capture(&x, 1.0, &mut time);
            let plain_peak = x
                .iter()
                .filter(|v| v.is_finite())
                .fold(0f32, |m, v| m.max(v.abs()));
            let plain_clip = x
                .iter()
                .filter(|v| !v.is_finite() || v.abs() >= 1.0)
                .count();
            assert_eq!(scan.peak, plain_peak, "n={n}");
            assert_eq!(scan.n_clipped, plain_clip, "n={n}");
            for i in 0..2 * time.len() {
                let want = x
                    .get(i)
                    .map_or(0.0, |v| if v.is_finite() { *v } else { 0.0 });
                assert_eq!(get(&time, i), want, "n={n} i={i}");
            }
            let clean: Vec<f32> = x
                .iter()
                .map(|v| if v.is_finite() { *v } else { 0.0 })
                .collect();
            let p = packed(&clean);
            for (lo, hi) in [(0, n), (1, n), (0, n.saturating_sub(1)), (3, n / 2 + 3)] {
                let hi = hi.min(n);
                let plain = clean
                    .get(lo..hi)
                    .unwrap_or(&[])
                    .iter()
                    .fold(0f32, |m, v| m.max(v.abs()));
                assert_eq!(max_abs(&p, lo, hi), plain, "n={n} [{lo},{hi})");
            }
            let (mut best, mut at) = (-1f32, 0usize);
            for (i, v) in clean.iter().enumerate() {
                if v.abs() > best {
                    best = v.abs();
                    at = i;
                }
            }
            assert_eq!(argmax_abs(&p, n), at, "n={n}");
            let plain_sq: f64 = x
                .iter()
                .filter(|v| v.is_finite())
                .map(|&v| f64::from(v) * f64::from(v))
                .sum();
            let got = sum_squares_finite(&x);
            assert!(
                (got - plain_sq).abs() <= 1e-14 * plain_sq.max(1e-300),
                "n={n}"
            );
        }
    }
}
