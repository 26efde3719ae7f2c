//! Fixture → reference correction of a measured response.
//!
//! Sits between the analysis (a response measured at the fixture's microphone) and the
//! checks (limits written for the reference coupler). A source of impedance Zs and
//! open-circuit pressure p_oc makes, in a coupler of input impedance Z whose microphone sees
//! T = p_mic/p_in, the microphone pressure `p_oc·Z/(Zs+Z)·T` (Thévenin's theorem; Beranek &
//! Mellow 2012, ch. 3). The ratio reference/fixture is therefore (docs/architecture.md, "Acoustic
//! models")
//!
//! `C = [Zr·Tr/(Zs+Zr)] / [Zf·Tf/(Zs+Zf)]`,
//!
//! independent of p_oc, and for an ideal volume-velocity source (Zs → ∞) `C = Zr·Tr/(Zf·Tf)`.
//! A response in the reference coupler is `C·(response in the fixture)`.
use super::source::{Source, SourceError};
use super::C64;
use sha2::{Digest, Sha256};

/// Errors of the correction.
#[derive(Debug, thiserror::Error)]
pub enum CorrectionError {
    /// The named tap is not in the coupler.
    #[error("coupler {coupler}: no microphone tap \"{tap}\" (taps: {known})")]
    UnknownTap {
        /// Coupler id.
        coupler: String,
        /// Requested tap.
        tap: String,
        /// Comma-separated taps the coupler has.
        known: String,
    },
    /// The source could not be evaluated (a Thévenin table outside its range).
    #[error(transparent)]
    Source(#[from] SourceError),
    /// Frequency and value arrays differ in length.
    #[error("expected {expected} values to match the frequencies, found {found}")]
    Length {
        /// Number of frequencies.
        expected: usize,
        /// Number of values.
        found: usize,
    },
    /// A harmonic order below 2.
    #[error("expected a harmonic order of at least 2, found {0}")]
    HarmonicOrder(usize),
    /// The correction is not finite at a frequency (a coupler with zero transfer there).
    #[error("the correction is not finite at {freq_hz} hz")]
    NotFinite {
        /// Frequency, Hz.
        freq_hz: f64,
    },
}

/// A coupler as the correction sees it: input impedance and the pressure transfer to one
/// microphone, plus a stable identity.
///
/// Implementors must return, at `freq_hz`, `(Z_in Pa·s/m³, T = p_tap/p_in)` for the tap
/// `tap` given to [`Correction::new`], which has been checked with [`has_tap`] first.
///
/// [`has_tap`]: CouplerModel::has_tap
pub trait CouplerModel {
    /// `(input impedance Pa·s/m³, p_tap/p_in)` at `freq_hz`; `None` if there is no such tap.
    fn response(&self, freq_hz: f64, tap: &str) -> Option<(C64, C64)>;
    /// The taps the model has.
    fn tap_names(&self) -> Vec<String>;
    /// Whether the model has the tap `tap`.
    fn has_tap(&self, tap: &str) -> bool {
        self.tap_names().iter().any(|t| t == tap)
    }
    /// Model id (for messages).
    fn id(&self) -> String;
    /// Hex SHA-256 of the model's canonical description.
    fn model_hash(&self) -> String;
}

/// A coupler given as a closure `freq_hz → (Z_in, T)` with a single tap, for models built
/// directly from two-ports.
pub struct FnCoupler<F: Fn(f64) -> (C64, C64)> {
    /// Model id.
    pub id: String,
    /// The one tap's name.
    pub tap: String,
    /// Canonical description of the model (hashed for the identity).
    pub description: String,
    /// `freq_hz → (Z_in Pa·s/m³, p_tap/p_in)`.
    pub response: F,
}

impl<F: Fn(f64) -> (C64, C64)> CouplerModel for FnCoupler<F> {
    fn response(&self, freq_hz: f64, tap: &str) -> Option<(C64, C64)> {
        (tap == self.tap).then(|| (self.response)(freq_hz))
    }
    fn tap_names(&self) -> Vec<String> {
        vec![self.tap.clone()]
    }
    fn id(&self) -> String {
        self.id.clone()
    }
    fn model_hash(&self) -> String {
        sha256_hex(self.description.as_bytes())
    }
}

/// The fixture → reference correction for one source and one pair of taps.
pub struct Correction<'a> {
    fixture: &'a dyn CouplerModel,
    reference: &'a dyn CouplerModel,
    fixture_tap: String,
    reference_tap: String,
    source: &'a Source,
}

impl<'a> Correction<'a> {
    /// A correction from `fixture` at `fixture_tap` to `reference` at `reference_tap` for
    /// `source`. Fails if a tap does not exist.
    pub fn new(
        fixture: &'a dyn CouplerModel,
        reference: &'a dyn CouplerModel,
        fixture_tap: &str,
        reference_tap: &str,
        source: &'a Source,
    ) -> Result<Self, CorrectionError> {
        for (model, tap) in [(fixture, fixture_tap), (reference, reference_tap)] {
            if !model.has_tap(tap) {
                return Err(CorrectionError::UnknownTap {
                    coupler: model.id(),
                    tap: tap.to_string(),
                    known: model.tap_names().join(", "),
                });
            }
        }
        Ok(Correction {
            fixture,
            reference,
            fixture_tap: fixture_tap.to_string(),
            reference_tap: reference_tap.to_string(),
            source,
        })
    }

    /// The complex factor C(f) = p_reference/p_fixture at `freq_hz` (docs/architecture.md formula).
    pub fn factor(&self, freq_hz: f64) -> Result<C64, CorrectionError> {
        let unknown = |model: &dyn CouplerModel, tap: &str| CorrectionError::UnknownTap {
            coupler: model.id(),
            tap: tap.to_string(),
            known: model.tap_names().join(", "),
        };
        let (zf, tf) = self
            .fixture
            .response(freq_hz, &self.fixture_tap)
            .ok_or_else(|| unknown(self.fixture, &self.fixture_tap))?;
        let (zr, tr) = self
            .reference
            .response(freq_hz, &self.reference_tap)
            .ok_or_else(|| unknown(self.reference, &self.reference_tap))?;
        let c = match self.source.impedance(freq_hz)? {
            // Zs → ∞: Zs cancels between numerator and denominator.
            None => (zr * tr) / (zf * tf),
            // Written as one fraction so a zero Zf or Zr does not divide by zero twice.
            Some(zs) => (zr * tr * (zs + zf)) / (zf * tf * (zs + zr)),
        };
        if c.re.is_finite() && c.im.is_finite() {
            Ok(c)
        } else {
            Err(CorrectionError::NotFinite { freq_hz })
        }
    }

    /// Correct a response (level dB, phase degrees at `freqs_hz`) to the reference coupler:
    /// level + 20·log10|C|, phase + arg C. Returns (level dB, phase deg); the phase is not
    /// wrapped, so an unwrapped input stays unwrapped.
    pub fn apply_to_response(
        &self,
        freqs_hz: &[f64],
        response_db: &[f64],
        phase_deg: &[f64],
    ) -> Result<(Vec<f64>, Vec<f64>), CorrectionError> {
        for n in [response_db.len(), phase_deg.len()] {
            if n != freqs_hz.len() {
                return Err(CorrectionError::Length {
                    expected: freqs_hz.len(),
                    found: n,
                });
            }
        }
        let mut level = Vec::with_capacity(freqs_hz.len());
        let mut phase = Vec::with_capacity(freqs_hz.len());
        for ((&f, &l), &p) in freqs_hz.iter().zip(response_db).zip(phase_deg) {
            let c = self.factor(f)?;
            level.push(l + 20.0 * c.norm().log10());
            phase.push(p + c.arg().to_degrees());
        }
        Ok((level, phase))
    }

    /// Correct the n-th harmonic distortion (dB relative to the fundamental, at fundamental
    /// frequencies `freqs_hz`): the harmonic sits at n·f and the fundamental at f, so
    /// HDn + 20·log10|C(n·f)/C(f)|.
    pub fn apply_to_harmonic(
        &self,
        n: usize,
        freqs_hz: &[f64],
        hd_db: &[f64],
    ) -> Result<Vec<f64>, CorrectionError> {
        if n < 2 {
            return Err(CorrectionError::HarmonicOrder(n));
        }
        if hd_db.len() != freqs_hz.len() {
            return Err(CorrectionError::Length {
                expected: freqs_hz.len(),
                found: hd_db.len(),
            });
        }
        freqs_hz
            .iter()
            .zip(hd_db)
            .map(|(&f, &hd)| {
                let ratio = self.factor(n as f64 * f)? / self.factor(f)?;
                Ok(hd + 20.0 * ratio.norm().log10())
            })
            .collect()
    }

    /// Canonical description hashed by [`identity`](Self::identity): a JSON object of the
    /// model hashes, taps and the source description.
    pub fn canonical_description(&self) -> String {
        serde_json::json!({
            "fixture": self.fixture.model_hash(),
            "fixture_tap": self.fixture_tap,
            "reference": self.reference.model_hash(),
            "reference_tap": self.reference_tap,
            "source": self.source.description(),
        })
        .to_string()
    }

    /// Stable identity of this correction for the result JSON: hex SHA-256 of
    /// [`canonical_description`](Self::canonical_description).
    pub fn identity(&self) -> String {
        sha256_hex(self.canonical_description().as_bytes())
    }
}

fn sha256_hex(bytes: &[u8]) -> String {
    hex::encode(Sha256::digest(bytes))
}
