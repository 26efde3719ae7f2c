//! The `analysis:` section: harmonics analysed, grid density and the SNR a valid
//! measurement needs. Its schema ([`RawAnalysis`]) and validation, including whether the
//! sweep separates the harmonics asked for.

use super::raw::Section;
use super::stimulus::DURATION_RANGE_S;
use super::validate::Validator;
use super::{AnalysisSpec, DEFAULT_MAX_HARMONIC, DEFAULT_MIN_SNR_DB, DEFAULT_POINTS_PER_OCTAVE};
use crate::config::{label, Pos};
use crate::dsp::sweep::SweepParams;
use marked_yaml::Spanned;
use serde::Deserialize;

/// Smallest time between the impulse responses of neighbouring harmonics n−1 and n that the
/// analysis can separate, s. They lie `L·ln(n/(n−1))` apart (Novak et al. 2015, Δt_n =
/// L·ln n); the analysis windows each harmonic within that gap.
pub const MIN_HARMONIC_SEPARATION_S: f64 = 0.004;
/// Highest harmonic order a plan may ask for.
pub const MAX_HARMONIC_LIMIT: usize = 20;
/// Highest points-per-octave of the analysis grid.
pub const MAX_POINTS_PER_OCTAVE: u32 = 96;

/// `analysis:` keys.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields, expecting = "a mapping")]
pub struct RawAnalysis {
    /// Highest harmonic order analysed.
    pub max_harmonic: Option<Spanned<i128>>,
    /// Points per octave of the analysis grid.
    pub points_per_octave: Option<Spanned<i128>>,
    /// Minimum SNR, dB.
    pub min_snr_db: Option<Spanned<f64>>,
}

impl Validator {
    /// `analysis:` (defaults when absent); `sweep` is the synchronized sweep when the
    /// stimulus is valid, `duration_pos` where to point when the default `max_harmonic`
    /// does not fit it.
    pub(super) fn analysis(
        &mut self,
        sec: Option<&Section<RawAnalysis>>,
        sweep: Option<&SweepParams>,
        duration_pos: Pos,
    ) -> Option<AnalysisSpec> {
        let l = |k: &str| label("analysis", k);
        let (max_harmonic_value, ppo_value, snr_value) = match sec {
            Some(s) => (
                s.value.max_harmonic.as_ref(),
                s.value.points_per_octave.as_ref(),
                s.value.min_snr_db.as_ref(),
            ),
            None => (None, None, None),
        };
        let max_harmonic = match max_harmonic_value {
            None => Some(DEFAULT_MAX_HARMONIC),
            Some(v) => self
                .int_in_range(v, &l("max_harmonic"), 1, MAX_HARMONIC_LIMIT as i128)
                .map(|n| n as usize),
        };
        let points_per_octave = match ppo_value {
            None => Some(DEFAULT_POINTS_PER_OCTAVE),
            Some(v) => self
                .int_in_range(
                    v,
                    &l("points_per_octave"),
                    1,
                    i128::from(MAX_POINTS_PER_OCTAVE),
                )
                .map(|n| n as u32),
        };
        let min_snr_db = match snr_value {
            None => Some(DEFAULT_MIN_SNR_DB),
            Some(v) => self.finite(v, &l("min_snr_db")).and_then(|x| {
                if x >= 0.0 {
                    Some(x)
                } else {
                    self.report(
                        Pos::of_value(v),
                        format!("{}: expected 0 dB or more, found {x}", l("min_snr_db")),
                    );
                    None
                }
            }),
        };
        if let (Some(n), Some(p)) = (max_harmonic, sweep) {
            if !self.harmonics_separate(n, p, max_harmonic_value, duration_pos) {
                return None;
            }
        }
        Some(AnalysisSpec {
            max_harmonic: max_harmonic?,
            points_per_octave: points_per_octave?,
            min_snr_db: min_snr_db?,
        })
    }

    /// Whether harmonics up to `n` lie at least [`MIN_HARMONIC_SEPARATION_S`] apart; reports
    /// the separation found, the largest order that works and the duration that would.
    fn harmonics_separate(
        &mut self,
        n: usize,
        p: &SweepParams,
        written: Option<&Spanned<i128>>,
        duration_pos: Pos,
    ) -> bool {
        // Neighbouring harmonics n−1 and n lie L·ln(n/(n−1)) apart (Novak et al. 2015).
        let gap_s = |l_s: f64, n: usize| l_s * (n as f64 / (n as f64 - 1.0)).ln();
        // The closest pair is the highest; the rounding allowance keeps a value computed to
        // exactly the limit from failing on the last bit.
        let fits = |l_s: f64, n: usize| {
            n < 2 || gap_s(l_s, n) >= MIN_HARMONIC_SEPARATION_S * (1.0 - 1e-12)
        };
        if fits(p.l_s, n) {
            return true;
        }
        let largest = (1..n).rev().find(|&m| fits(p.l_s, m)).unwrap_or(1);
        // Shortest requested duration whose synchronized L separates harmonic n: the
        // smallest whole k = f1·L with k/f1·ln(n/(n−1)) ≥ the limit; T̂ rounds to k from
        // (k − ½)/f1·ln(f2/f1) on (Novak et al. 2015, eq. 12). Rounded up for the message
        // and confirmed with the same synchronization.
        let ln_band = (p.f2_hz / p.f1_hz).ln();
        let l_needed = MIN_HARMONIC_SEPARATION_S / (n as f64 / (n as f64 - 1.0)).ln();
        let k = (p.f1_hz * l_needed * (1.0 - 1e-12)).ceil().max(1.0);
        let t_exact = (k - 0.5) / p.f1_hz * ln_band;
        let needed = [1000.0, 1e6].iter().find_map(|scale| {
            let t = (t_exact * scale).ceil() / scale;
            SweepParams::synchronized(p.sample_rate_hz, p.f1_hz, p.f2_hz, t, 1.0, 0.0, 0.0, 0.0)
                .ok()
                .filter(|q| fits(q.l_s, n))
                .map(|_| t)
        });
        let gap_ms = gap_s(p.l_s, n) * 1e3;
        let min_ms = MIN_HARMONIC_SEPARATION_S * 1e3;
        let duration_hint = match needed {
            Some(t) if t <= DURATION_RANGE_S.1 => format!(", or a duration_s of at least {t} s"),
            _ => String::new(),
        };
        let body = format!(
            "harmonics {} and {n} lie {gap_ms:.1} ms apart in this sweep (L·ln({n}/{}) with \
             L = {:.4} s), at least {min_ms} ms is needed to separate them; use max_harmonic \
             {largest} or less{duration_hint}",
            n - 1,
            n - 1,
            p.l_s
        );
        match written {
            Some(v) => self.report(Pos::of_value(v), format!("analysis.max_harmonic: {body}")),
            None => self.report(
                duration_pos,
                format!("stimulus.duration_s: with the default max_harmonic {n}, {body}"),
            ),
        }
        false
    }
}
