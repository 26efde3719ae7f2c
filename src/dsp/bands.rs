//! IEC 61260-1:2014 base-10 fractional-octave midband frequencies and the analysis grid.
//!
//! The analysis reports every response on the midband frequencies of 1/b-octave bands, so
//! that results from different stations and tools line up point for point. Formulas from
//! IEC 61260-1:2014 §5.2–5.4: octave ratio G = 10^(3/10), reference f_r = 1000 Hz; for odd b
//! f_m = f_r·G^(x/b), for even b f_m = f_r·G^((2x+1)/(2b)); band edges f_m·G^(∓1/(2b)).

/// Base-10 octave frequency ratio G = 10^(3/10) (IEC 61260-1:2014, §5.2).
pub const OCTAVE_RATIO_G: f64 = 1.995_262_314_968_879_5;

/// Reference frequency f_r, Hz (IEC 61260-1:2014, §5.3).
pub const REFERENCE_HZ: f64 = 1000.0;

/// Exact midband frequency of band index `x` for 1/`b`-octave bands, Hz.
///
/// # Panics
/// When `b` is 0 (a programmer error: the plan stage refuses it).
pub fn midband_hz(x: i32, b: u32) -> f64 {
    assert!(b > 0, "fractional-octave designator b must be positive");
    let b = f64::from(b);
    let exponent = if (b as u32) % 2 == 1 {
        f64::from(x) / b
    } else {
        (2.0 * f64::from(x) + 1.0) / (2.0 * b)
    };
    REFERENCE_HZ * OCTAVE_RATIO_G.powf(exponent)
}

/// Lower and upper band-edge frequencies of the 1/`b`-octave band at `midband_hz`, Hz.
pub fn band_edges_hz(midband_hz: f64, b: u32) -> (f64, f64) {
    let half = OCTAVE_RATIO_G.powf(1.0 / (2.0 * f64::from(b)));
    (midband_hz / half, midband_hz * half)
}

/// Every 1/`b`-octave midband frequency with `low_hz ≤ f_m ≤ high_hz`, ascending.
pub fn grid_hz(low_hz: f64, high_hz: f64, b: u32) -> Vec<f64> {
    if !(low_hz > 0.0 && high_hz >= low_hz) || b == 0 {
        return Vec::new();
    }
    // Invert f_m(x) for a starting index, then walk: a few ulps of slack either way so
    // that a band exactly on an edge is kept.
    let pos = (low_hz / REFERENCE_HZ).log(OCTAVE_RATIO_G) * f64::from(b);
    let mut x = pos.floor() as i32 - 2;
    let mut out = Vec::new();
    let tol = 1e-9;
    loop {
        let f = midband_hz(x, b);
        if f > high_hz * (1.0 + tol) {
            break;
        }
        if f >= low_hz * (1.0 - tol) {
            out.push(f);
        }
        x += 1;
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    // IEC 61260-1:2014 Annex E lists exact third-octave midbands 1000·10^(n/10):
    // 12.589, 15.849, 19.953, 25.119 Hz … (also in docs/reference-values.md with the source).
    #[test]
    fn third_octave_midbands_match_the_standard() {
        let expect = [
            (-20, 10.0),
            (-19, 12.589_254),
            (-18, 15.848_932),
            (-17, 19.952_623),
        ];
        for (x, f) in expect {
            let got = midband_hz(x, 3);
            assert!((got - f).abs() < 1e-5, "x={x}: {got} vs {f}");
        }
        assert_eq!(midband_hz(0, 3), 1000.0);
    }

    // G^(1/6) = 1.1220185 per IEC 61260-1 base-10 (not 2^(1/6) = 1.1224620).
    #[test]
    fn base_ten_ratio() {
        assert!((OCTAVE_RATIO_G - 10f64.powf(0.3)).abs() < 1e-15);
        assert!((OCTAVE_RATIO_G.powf(1.0 / 6.0) - 1.122_018_5).abs() < 1e-7);
    }

    // Even b: midbands sit half a band off f_r (IEC 61260-1:2014 eq. 3), so 1 kHz is an edge.
    #[test]
    fn even_designator_offsets_half_a_band() {
        let (lo, _) = band_edges_hz(midband_hz(0, 24), 24);
        assert!((lo - 1000.0).abs() < 1e-9);
        let g = grid_hz(20.0, 20_000.0, 24);
        assert!(g.first().unwrap() >= &20.0 && g.last().unwrap() <= &20_000.0);
        // 1000 octaves… 20 Hz to 20 kHz is log_G(1000) = 10 base-10 octaves: 240 points.
        assert_eq!(g.len(), 240);
    }
}
