//! Analysis: capture + stimulus → one [`ChannelMeasurement`] per plan channel.
//!
//! Sits after the rig and before the checks. [`Analyzer`] is built once per stimulus (FFT
//! plans, inverse sweep spectra, windows, grid) and reused for every unit.

mod analyzer;
mod passes;
mod tables;

pub use analyzer::{AnalysisError, Analyzer, Outputs, HARMONIC_TOP_FRACTION_OF_NYQUIST};

use crate::plan::Polarity;
use std::collections::BTreeMap;

/// Why a measurement is not valid (each makes the unit a retest).
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum RetestReason {
    /// The capture holds no usable signal on this channel.
    NoSignal {
        /// Peak level found, dBFS.
        peak_dbfs: f64,
    },
    /// Samples at or beyond full scale.
    Clipping {
        /// Number of clipped samples.
        n_samples: usize,
    },
    /// SNR below the plan's minimum.
    LowSnr {
        /// SNR found, dB.
        snr_db: f64,
        /// Minimum required, dB.
        min_db: f64,
    },
    /// The capture is shorter than the stimulus.
    Truncated {
        /// Samples captured.
        n_captured: usize,
        /// Samples needed.
        n_needed: usize,
    },
    /// The rig reported xruns or a fault.
    RigFault {
        /// What the rig said.
        message: String,
    },
}

impl std::fmt::Display for RetestReason {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            RetestReason::NoSignal { peak_dbfs } => {
                write!(f, "no signal (peak {peak_dbfs:.1} dBFS)")
            }
            RetestReason::Clipping { n_samples } => {
                write!(f, "clipping ({n_samples} samples at full scale)")
            }
            RetestReason::LowSnr { snr_db, min_db } => {
                write!(f, "SNR {snr_db:.1} dB below the minimum {min_db:.1} dB")
            }
            RetestReason::Truncated {
                n_captured,
                n_needed,
            } => {
                write!(f, "capture truncated ({n_captured} of {n_needed} samples)")
            }
            RetestReason::RigFault { message } => write!(f, "rig fault: {message}"),
        }
    }
}

/// Everything measured on one channel. Serialised field names are a contract (docs/architecture.md).
#[derive(Debug, Clone, serde::Serialize)]
pub struct ChannelMeasurement {
    /// Plan channel name.
    pub name: String,
    /// Unit of `response_db`: `dB FS/FS` uncalibrated.
    pub unit: String,
    /// Latency of the linear impulse response peak, whole samples.
    pub latency_samples: i64,
    /// Latency with sub-sample refinement, samples.
    pub latency_fractional_samples: f64,
    /// Polarity of the linear impulse response.
    pub polarity: Polarity,
    /// Signal (sweep) to noise (leading silence) ratio, dB; capped at 150 dB.
    pub snr_db: f64,
    /// Peak capture level, dBFS.
    pub peak_dbfs: f64,
    /// Log-frequency grid, Hz (IEC 61260-1 base-10 midbands).
    pub frequencies_hz: Vec<f64>,
    /// Linear response magnitude on the grid, unsmoothed, dB.
    pub response_db: Vec<f64>,
    /// Linear response phase on the grid with the whole-sample latency removed, degrees.
    pub phase_deg: Vec<f64>,
    /// THD referred to the fundamental, √ΣHDn², %, at the excitation frequency.
    pub thd_percent: Vec<Option<f64>>,
    /// THD in the IEC 60268 form, referred to the total (fundamental and harmonics), %.
    pub thd_iec_percent: Vec<Option<f64>>,
    /// HDn re fundamental, dB, at the excitation frequency; `null` where n·f is not measured.
    pub harmonics_db: BTreeMap<String, Vec<Option<f64>>>,
    /// Rub-and-buzz indicator: peak of the residual beyond the modelled harmonics re the
    /// fundamental's peak, dB, at the excitation frequency.
    pub rub_buzz_db: Vec<Option<f64>>,
    /// Reasons this channel's measurement is not valid (empty when valid).
    pub retest_reasons: Vec<RetestReason>,
    /// The response at the fixture's microphone before the fixture→reference correction,
    /// dB, on `frequencies_hz`; present only when the channel was corrected (then
    /// `response_db` is the corrected one), so that an auditor sees both.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub fixture_response_db: Option<Vec<f64>>,
    /// Which fixture→reference correction was applied; absent when none was.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub correction: Option<CorrectionInfo>,
    /// Fine linear spectrum for smoothing (not serialised).
    #[serde(skip)]
    pub fine: FineSpectrum,
}

impl ChannelMeasurement {
    /// True when nothing makes this channel a retest.
    pub fn is_valid(&self) -> bool {
        self.retest_reasons.is_empty()
    }

    /// Response on the grid smoothed over 1/`fraction` octave in the power domain, dB.
    pub fn smoothed_response_db(&self, fraction: u32) -> Vec<f64> {
        crate::dsp::smoothing::smooth_on_grid(&self.fine, &self.frequencies_hz, fraction)
    }

    /// Unsmoothed level at any frequency in the excited band, dB (interpolated fine bins).
    pub fn level_at_db(&self, freq_hz: f64) -> f64 {
        crate::dsp::smoothing::level_at_db(&self.fine, freq_hz)
    }
}

pub use crate::dsp::spectrum::FineSpectrum;

/// A coupler model as a result names it.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct CouplerRef {
    /// Model id (`coupler:` of the file).
    pub id: String,
    /// The model's canonical SHA-256 (`tragus-coupler/1`).
    pub sha256: String,
    /// The microphone tap used.
    pub tap: String,
}

/// Which fixture→reference correction was applied to a channel (the `correction` object of
/// the channel JSON).
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct CorrectionInfo {
    /// The fixture model the response was measured in.
    pub fixture: CouplerRef,
    /// The reference coupler the response was corrected to.
    pub reference: CouplerRef,
    /// Source kind: `volume_velocity`, `thevenin_csv` or `virtual_earphone`.
    pub source: String,
    /// Identity of the whole correction (models, taps and source values): hex SHA-256 of
    /// `acoustics::correction::Correction::canonical_description`.
    pub sha256: String,
}
