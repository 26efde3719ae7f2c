//! Fractional-octave smoothing in the power domain.
use crate::analysis::FineSpectrum;

/// Smooth on the grid (stub).
pub fn smooth_on_grid(fine: &FineSpectrum, grid_hz: &[f64], fraction: u32) -> Vec<f64> {
    let _ = (fine, grid_hz, fraction);
    unimplemented!()
}

/// Level at a frequency (stub).
pub fn level_at_db(fine: &FineSpectrum, freq_hz: f64) -> f64 {
    let _ = (fine, freq_hz);
    unimplemented!()
}
