//! A measured transfer function on a uniform fine frequency grid: what smoothing and
//! interpolation work on.

/// The linear transfer function on a uniform fine grid, for smoothing and interpolation.
#[derive(Debug, Clone, Default)]
pub struct FineSpectrum {
    /// Bin spacing, Hz.
    pub df_hz: f64,
    /// |H|² per bin, starting at 0 Hz.
    pub power: Vec<f64>,
    /// Lowest and highest excited frequency, Hz (smoothing bands are clipped to it).
    pub band_hz: (f64, f64),
    /// Running integral of `power` over frequency (trapezoids), `cumulative[k]` = ∫₀^{k·df}
    /// |H|² df, so that a band average costs two look-ups; see [`FineSpectrum::new`].
    pub cumulative: Vec<f64>,
}

impl FineSpectrum {
    /// Build from per-bin power, computing the running integral.
    pub fn new(df_hz: f64, power: Vec<f64>, band_hz: (f64, f64)) -> Self {
        let mut fine = FineSpectrum {
            df_hz,
            power,
            band_hz,
            cumulative: Vec::new(),
        };
        fine.rebuild_cumulative();
        fine
    }

    /// Recompute the running integral after `power` changed (in place, no allocation once
    /// `cumulative` has its length).
    pub fn rebuild_cumulative(&mut self) {
        self.cumulative.resize(self.power.len(), 0.0);
        let mut acc = 0.0;
        for k in 0..self.power.len() {
            if k > 0 {
                acc += 0.5 * (self.power[k - 1] + self.power[k]) * self.df_hz;
            }
            self.cumulative[k] = acc;
        }
    }
}
