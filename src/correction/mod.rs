//! The plan's fixture→reference correction, built once and applied to every measurement.
//!
//! Sits between the analysis and the checks: [`PlanCorrections::new`] evaluates, once per
//! plan, the complex factor C = p_reference/p_fixture ([`super::correction`], docs/architecture.md
//! formula) of each corrected channel everywhere the measurement has a value, and
//! [`PlanCorrections::apply`] then corrects each unit's [`ChannelMeasurement`] with table
//! look-ups only (no coupler is evaluated per unit; the analysis bench target is 5 ms per
//! two-channel unit).
//!
//! # What is corrected, and how
//!
//! - `response_db += 20·lg|C(f)|` and `phase_deg += arg C(f)` (wrapped to ±180°) on the grid,
//!   C evaluated exactly at each grid frequency; the measured response is kept as
//!   `fixture_response_db`.
//! - The fine spectrum (|H|² per 0.5 Hz bin, read by smoothing, sensitivity and balance)
//!   is multiplied by |C|² over the excited band and its running integral rebuilt. C is
//!   evaluated on a log grid of [`DENSE_POINTS_PER_OCTAVE`] points per octave over the
//!   excited band and its level interpolated to each bin (cubic, in dB against log f):
//!   evaluating the ≈40 000 bins one by one took ≈0.5 s per channel, the dense grid takes
//!   a few milliseconds, and the interpolation error is tested to stay below 0.001 dB
//!   (`tests/pipeline_correction.rs`). Bins outside the excited band are left as measured:
//!   the checks never read them (smoothing bands are clipped to the excited band).
//! - `harmonics_db[n] += 20·lg|C(n·f)/C(f)|`: harmonic n of the excitation at f is heard
//!   at n·f, the fundamental at f (docs/architecture.md, "Correction of harmonics uses the correction
//!   at n·f for harmonic n"); C exact at each n·f. THD (`thd_percent`, `thd_iec_percent`)
//!   is recomputed from the corrected HDn with the analyzer's formulas.
//! - `rub_buzz_db` is left as measured: it is the peak of an impulsive residual in the
//!   time domain, spread over many frequencies at once, so no single C(f) applies to it, and
//!   its limits are written as a ratio to the fundamental at the same instant, which the
//!   coupler changes little (common practice: rub-and-buzz limits are set on the station,
//!   not transferred from a reference coupler).
//! - Latency, polarity, SNR, peak level and validity are properties of the capture and are
//!   left as measured.

use crate::acoustics::correction::{Correction, CorrectionError};
use crate::analysis::{Analyzer, ChannelMeasurement};
use crate::analysis::{CorrectionInfo, CouplerRef};
use crate::plan::{CorrectionSpec, Plan};

/// Points per octave of the log grid on which C is evaluated for the fine spectrum: with
/// 384 the interpolation error of the shipped models is ≤ 1e-5 dB (measured; bar 0.001 dB),
/// at ≈ 20 ms of set-up per plan; see the module doc.
pub const DENSE_POINTS_PER_OCTAVE: f64 = 384.0;

pub use crate::dsp::sweep::needed_band_hz;

/// Why a plan's correction cannot be set up (bad input: fix the plan or a model).
#[derive(Debug, thiserror::Error)]
#[error("channel {channel}: correction from {fixture} to {reference}: {source}")]
pub struct SetupError {
    /// Plan channel name.
    pub channel: String,
    /// Fixture model id.
    pub fixture: String,
    /// Reference model id.
    pub reference: String,
    /// What went wrong (a non-finite factor names its frequency).
    #[source]
    pub source: Box<CorrectionError>,
}

/// One channel's correction, tabulated where the measurement has values.
#[derive(Debug, Clone, PartialEq)]
pub struct ChannelCorrection {
    info: CorrectionInfo,
    /// 20·lg|C| on the analysis grid, dB.
    grid_gain_db: Vec<f64>,
    /// arg C on the analysis grid, degrees.
    grid_phase_deg: Vec<f64>,
    /// Per harmonic order n (index n − 2), per grid point: 20·lg|C(n·f)/C(f)|, dB; NaN
    /// where n·f is above the analyzer's harmonic top (the harmonic is null there).
    harmonic_gain_db: Vec<Vec<f64>>,
    /// First fine bin corrected.
    fine_first_bin: usize,
    /// |C|² per fine bin from `fine_first_bin` on.
    fine_power_gain: Vec<f64>,
}

/// Cubic (Catmull–Rom) interpolation of samples `y` on a uniform axis at position `x`
/// (in sample units); clamped at the ends.
fn catmull_rom(y: &[f64], x: f64) -> f64 {
    let n = y.len();
    if n == 1 {
        return y[0];
    }
    let x = x.clamp(0.0, (n - 1) as f64);
    let i = (x.floor() as usize).min(n - 2);
    let t = x - i as f64;
    // Beyond an end, the neighbour is extrapolated by the quadratic through the three end
    // samples (y₋₁ = 3y₀ − 3y₁ + y₂), so the end intervals keep the interior's order.
    let at = |k: isize| -> f64 {
        let last = n as isize - 1;
        if (0..=last).contains(&k) {
            y[k as usize]
        } else if n < 3 {
            y[k.clamp(0, last) as usize]
        } else if k < 0 {
            3.0 * y[0] - 3.0 * y[1] + y[2]
        } else {
            let l = last as usize;
            3.0 * y[l] - 3.0 * y[l - 1] + y[l - 2]
        }
    };
    let (p0, p1, p2, p3) = (
        at(i as isize - 1),
        at(i as isize),
        at(i as isize + 1),
        at(i as isize + 2),
    );
    // Catmull & Rom (1974); the standard uniform form with tension ½.
    0.5 * (2.0 * p1
        + (-p0 + p2) * t
        + (2.0 * p0 - 5.0 * p1 + 4.0 * p2 - p3) * t * t
        + (-p0 + 3.0 * p1 - 3.0 * p2 + p3) * t * t * t)
}

impl ChannelCorrection {
    /// Tabulate the correction `spec` for the measurements `analyzer` makes.
    pub fn new(spec: &CorrectionSpec, analyzer: &Analyzer) -> Result<Self, CorrectionError> {
        let corr = Correction::new(
            &spec.fixture,
            &spec.reference,
            &spec.fixture_tap,
            &spec.reference_tap,
            &spec.source,
        )?;
        let grid = analyzer.grid_hz();
        let top_hz = analyzer.harmonic_top_hz();
        let mut c_grid = Vec::with_capacity(grid.len());
        for &f in grid {
            c_grid.push(corr.factor(f)?);
        }
        let mut harmonic_gain_db = Vec::new();
        for n in 2..=analyzer.max_harmonic() {
            let mut row = Vec::with_capacity(grid.len());
            for (&f, c) in grid.iter().zip(&c_grid) {
                let fh = n as f64 * f;
                if fh > top_hz {
                    row.push(f64::NAN);
                } else {
                    row.push(20.0 * (corr.factor(fh)? / c).norm().log10());
                }
            }
            harmonic_gain_db.push(row);
        }

        // Fine bins of the excited band, from a dense log grid.
        let sweep = analyzer.sweep();
        let (lo_hz, hi_hz) = (sweep.f1_hz, sweep.f2_hz);
        let octaves = (hi_hz / lo_hz).log2();
        let n_dense = (octaves * DENSE_POINTS_PER_OCTAVE).ceil() as usize + 1;
        let step_oct = octaves / (n_dense - 1) as f64;
        let mut dense_db = Vec::with_capacity(n_dense);
        for i in 0..n_dense {
            let f = (lo_hz * (i as f64 * step_oct).exp2()).min(hi_hz);
            dense_db.push(20.0 * corr.factor(f)?.norm().log10());
        }
        let df = analyzer.fine_df_hz();
        let last_bin = analyzer.fine_n_bins().saturating_sub(1);
        let first = ((lo_hz / df).floor() as usize).min(last_bin);
        let last = ((hi_hz / df).ceil() as usize).min(last_bin);
        let fine_power_gain = (first..=last)
            .map(|k| {
                // The bins just outside [f1, f2] take the value at the band edge: they are
                // read only as the outer end of an interpolation at the edge.
                let f = (k as f64 * df).clamp(lo_hz, hi_hz);
                let x = (f / lo_hz).log2() / step_oct;
                10f64.powf(catmull_rom(&dense_db, x) / 10.0)
            })
            .collect();

        let identity = corr.identity();
        let coupler_ref = |m: &crate::models::coupler::CouplerModel, tap: &str| CouplerRef {
            id: m.id.clone(),
            sha256: m.sha256.clone(),
            tap: tap.to_string(),
        };
        Ok(ChannelCorrection {
            info: CorrectionInfo {
                fixture: coupler_ref(&spec.fixture, &spec.fixture_tap),
                reference: coupler_ref(&spec.reference, &spec.reference_tap),
                source: spec.source.kind_name().to_string(),
                sha256: identity,
            },
            grid_gain_db: c_grid.iter().map(|c| 20.0 * c.norm().log10()).collect(),
            grid_phase_deg: c_grid.iter().map(|c| c.arg().to_degrees()).collect(),
            harmonic_gain_db,
            fine_first_bin: first,
            fine_power_gain,
        })
    }

    /// What the result JSON says about this correction.
    pub fn info(&self) -> &CorrectionInfo {
        &self.info
    }

    /// The |C|² applied to the fine spectrum: (first bin, one gain per bin from there).
    pub fn fine_power_gain(&self) -> (usize, &[f64]) {
        (self.fine_first_bin, &self.fine_power_gain)
    }

    /// 20·lg|C| on the analysis grid, dB.
    pub fn grid_gain_db(&self) -> &[f64] {
        &self.grid_gain_db
    }

    /// Correct one measurement in place (module doc). A measurement made on another grid
    /// than the analyzer's this was built for is a programmer error.
    ///
    /// # Panics
    /// If `m` has another number of grid points than the analyzer had.
    pub fn apply(&self, m: &mut ChannelMeasurement) {
        assert_eq!(
            m.response_db.len(),
            self.grid_gain_db.len(),
            "measurement and correction grids differ"
        );
        m.fixture_response_db = Some(m.response_db.clone());
        for (r, g) in m.response_db.iter_mut().zip(&self.grid_gain_db) {
            *r += g;
        }
        for (p, g) in m.phase_deg.iter_mut().zip(&self.grid_phase_deg) {
            // Back to (−180°, 180°], the analyzer's convention.
            let mut x = *p + g;
            while x > 180.0 {
                x -= 360.0;
            }
            while x <= -180.0 {
                x += 360.0;
            }
            *p = x;
        }
        for (k, row) in self.harmonic_gain_db.iter().enumerate() {
            let Some(hd) = m.harmonics_db.get_mut(&(k + 2).to_string()) else {
                continue;
            };
            for (v, g) in hd.iter_mut().zip(row) {
                if let Some(x) = v {
                    // A NaN gain would mean the analyzer reported a harmonic above its own
                    // top; both use HARMONIC_TOP_FRACTION_OF_NYQUIST, so it cannot happen.
                    if g.is_finite() {
                        *x += g;
                    }
                }
            }
        }
        // THD from the corrected HDn, as the analyzer computes it (analysis/analyzer.rs):
        // THD = √ΣHDn², IEC 60268 form √(ΣHDn²/(1 + ΣHDn²)).
        for g in 0..m.thd_percent.len() {
            let mut sum = 0.0;
            let mut any = false;
            for row in m.harmonics_db.values() {
                if let Some(Some(db)) = row.get(g) {
                    sum += 10f64.powf(db / 10.0);
                    any = true;
                }
            }
            if any {
                m.thd_percent[g] = Some(100.0 * sum.sqrt());
                if let Some(t) = m.thd_iec_percent.get_mut(g) {
                    *t = Some(100.0 * (sum / (1.0 + sum)).sqrt());
                }
            }
        }
        let first = self.fine_first_bin;
        if let Some(bins) = m.fine.power.get_mut(first..) {
            for (p, g) in bins.iter_mut().zip(&self.fine_power_gain) {
                *p *= g;
            }
        }
        m.fine.rebuild_cumulative();
        m.correction = Some(self.info.clone());
    }
}

/// Every channel's correction of a plan, in plan channel order.
#[derive(Debug, Clone, PartialEq)]
pub struct PlanCorrections {
    per_channel: Vec<Option<ChannelCorrection>>,
}

impl PlanCorrections {
    /// Tabulate each corrected channel of `plan` for `analyzer` (channels with the same
    /// correction share the work). A non-finite factor, or a source that cannot be
    /// evaluated somewhere in the band, is an error naming the channel and the frequency.
    pub fn new(plan: &Plan, analyzer: &Analyzer) -> Result<Self, SetupError> {
        let mut per_channel: Vec<Option<ChannelCorrection>> = Vec::new();
        for (i, ch) in plan.channels.iter().enumerate() {
            let built = match &ch.correction {
                None => None,
                Some(spec) => {
                    let same = plan.channels[..i]
                        .iter()
                        .position(|c| c.correction.as_ref() == Some(spec));
                    match same.and_then(|k| per_channel[k].clone()) {
                        Some(c) => Some(c),
                        None => Some(ChannelCorrection::new(spec, analyzer).map_err(|e| {
                            SetupError {
                                channel: ch.name.clone(),
                                fixture: spec.fixture.id.clone(),
                                reference: spec.reference.id.clone(),
                                source: Box::new(e),
                            }
                        })?),
                    }
                }
            };
            per_channel.push(built);
        }
        Ok(PlanCorrections { per_channel })
    }

    /// Whether any channel is corrected.
    pub fn any(&self) -> bool {
        self.per_channel.iter().any(Option::is_some)
    }

    /// The correction of plan channel `index`, if it has one.
    pub fn channel(&self, index: usize) -> Option<&ChannelCorrection> {
        self.per_channel.get(index).and_then(Option::as_ref)
    }

    /// Correct the measurements of one unit, given in plan channel order.
    pub fn apply(&self, measurements: &mut [ChannelMeasurement]) {
        for (m, c) in measurements.iter_mut().zip(&self.per_channel) {
            if let Some(c) = c {
                c.apply(m);
            }
        }
    }
}
