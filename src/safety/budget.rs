//! The plan-time level budget: before anything plays, the worst-case level of every step at
//! the drive output, the fixture microphone and the reference (ear-equivalent) position,
//! against the station's caps.
//!
//! Inputs: the step's digital peak level (dBFS), the bench's drive calibration (V peak per
//! full scale), the product's declared sensitivity in the reference coupler with its
//! tolerance and response peak (`product:` of the plan), and the fixture→reference
//! correction's range over the band. For a sine sweep of peak `A` full scale:
//!
//! ```text
//! V_peak = A·(V/FS)          V_rms = V_peak/√2   (a sine's crest factor)
//! L_ref  = S_worst + 20·lg V_rms       S_worst = sensitivity + tolerance + response peak
//! L_ref,peak = L_ref + 20·lg √2        (3.01 dB)
//! L_ref,A ≤ L_ref + max_band A(f)      (IEC 61672-1 A-weighting; a sweep's weighted level
//!                                       never exceeds its level plus the largest gain)
//! L_mic  = L_ref − min_band C_dB       (C = fixture→reference correction, p_ref = C·p_fix)
//! L_mic,A ≤ L_ref + max_band [A(f) − C_dB(f)]
//! ```
//!
//! Every level scales 1:1 with the step's level in dB, so the highest level that keeps every
//! cap is the step's level minus the largest excess; the refusal says so.

use crate::plan::ProductSpec;
use crate::safety::weighting::a_weighting_db;
use crate::station::Caps;

/// 20·lg √2: a sine's peak over its rms value, dB.
pub const SINE_CREST_DB: f64 = 3.010_299_956_639_812;

/// What the budget knows about one plan channel's path on this bench.
#[derive(Debug, Clone, PartialEq)]
pub struct ChannelPath {
    /// Plan channel name.
    pub channel: String,
    /// Drive output's volts peak per full scale (the drive calibration), when known.
    pub drive_v_peak_per_fs: Option<f64>,
    /// The fixture→reference correction over the sweep band as (frequency Hz, 20·lg|C| dB)
    /// points, when the channel is corrected; without a correction the fixture is taken as
    /// the reference (0 dB).
    pub correction_db: Option<Vec<(f64, f64)>>,
}

/// A quantity the caps bound.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Quantity {
    /// Digital peak level of the stimulus, dBFS.
    DigitalPeak,
    /// Rms drive voltage, V.
    DriveRms,
    /// Peak drive voltage, V.
    DrivePeak,
    /// Peak level at the fixture microphone, dB SPL.
    MicPeak,
    /// A-weighted level at the fixture microphone, dB(A).
    MicA,
    /// Peak level at the reference position, dB SPL.
    ReferencePeak,
    /// A-weighted level at the reference position, dB(A).
    ReferenceA,
}

impl Quantity {
    /// Words for messages.
    pub fn words(self) -> &'static str {
        match self {
            Quantity::DigitalPeak => "digital peak",
            Quantity::DriveRms => "drive voltage (rms)",
            Quantity::DrivePeak => "drive voltage (peak)",
            Quantity::MicPeak => "peak level at the fixture microphone",
            Quantity::MicA => "A-weighted level at the fixture microphone",
            Quantity::ReferencePeak => "peak level at the reference (ear) position",
            Quantity::ReferenceA => "A-weighted level at the reference (ear) position",
        }
    }

    /// Unit for messages.
    pub fn unit(self) -> &'static str {
        match self {
            Quantity::DigitalPeak => "dBFS",
            Quantity::DriveRms | Quantity::DrivePeak => "V",
            Quantity::MicPeak | Quantity::ReferencePeak => "dB SPL",
            Quantity::MicA | Quantity::ReferenceA => "dB(A)",
        }
    }

    /// Whether the value is a voltage (compared as a ratio) rather than a level in dB.
    fn is_voltage(self) -> bool {
        matches!(self, Quantity::DriveRms | Quantity::DrivePeak)
    }
}

/// One worst-case value against its cap.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct BudgetItem {
    /// Plan channel.
    pub channel: String,
    /// What is bounded.
    pub quantity: Quantity,
    /// Worst-case value expected, in the quantity's unit.
    pub expected: f64,
    /// The station's cap, same unit.
    pub cap: f64,
}

impl BudgetItem {
    /// How far the expected value is over the cap, dB (negative: under it).
    pub fn excess_db(&self) -> f64 {
        if self.quantity.is_voltage() {
            20.0 * (self.expected / self.cap).log10()
        } else {
            self.expected - self.cap
        }
    }

    /// One line for people: what, expected, cap.
    pub fn describe(&self) -> String {
        let u = self.quantity.unit();
        let prec = if self.quantity.is_voltage() { 3 } else { 1 };
        format!(
            "channel {}: {}: expected up to {:.prec$} {u}, cap {:.prec$} {u}",
            self.channel,
            self.quantity.words(),
            self.expected,
            self.cap
        )
    }
}

/// The budget of one step.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct Budget {
    /// The step (`sweep`, `pilot`, a listening step's id).
    pub step: String,
    /// The step's digital peak level, dBFS.
    pub level_dbfs: f64,
    /// Every bounded quantity that could be computed.
    pub items: Vec<BudgetItem>,
    /// What could not be bounded before playing, and why (the pilot and the guard then carry
    /// the protection alone).
    pub unchecked: Vec<String>,
}

impl Budget {
    /// The items over their cap.
    pub fn over(&self) -> Vec<&BudgetItem> {
        self.items.iter().filter(|i| i.excess_db() > 0.0).collect()
    }

    /// The highest step level, dBFS, that keeps every computed item under its cap.
    pub fn max_level_dbfs(&self) -> f64 {
        let worst = self
            .items
            .iter()
            .map(BudgetItem::excess_db)
            .fold(f64::NEG_INFINITY, f64::max);
        if worst.is_finite() {
            self.level_dbfs - worst
        } else {
            f64::INFINITY
        }
    }

    /// The refusal message when something is over its cap: every number, and what to change.
    pub fn refusal(&self) -> Option<String> {
        let over = self.over();
        if over.is_empty() {
            return None;
        }
        let lines: Vec<String> = over.iter().map(|i| format!("  {}", i.describe())).collect();
        Some(format!(
            "{} at {:.1} dBFS could exceed the station's caps:\n{}\nlower the plan's \
             stimulus.level_dbfs to {:.1} dBFS or below (or check the product's declared \
             sensitivity and the drive calibration); nothing was played",
            self.step,
            self.level_dbfs,
            lines.join("\n"),
            (self.max_level_dbfs() * 10.0).floor() / 10.0
        ))
    }
}

/// Over a fixture→reference correction's (Hz, 20·lg|C| dB) points: the smallest correction
/// and the largest A(f) − C(f), dB — what the microphone's peak and A-weighted levels exceed
/// the reference position's by at worst. Without points (no correction): 0 dB and
/// `max_a_db`.
pub fn correction_extremes(points: Option<&[(f64, f64)]>, max_a_db: f64) -> (f64, f64) {
    match points {
        Some(points) if !points.is_empty() => points
            .iter()
            .fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, a), &(f, c)| {
                (lo.min(c), a.max(a_weighting_db(f) - c))
            }),
        _ => (0.0, max_a_db),
    }
}

/// The largest IEC 61672-1 A-weighting gain over a band, dB (at most +1.27 dB, near
/// 2.5 kHz), found on a fine log grid plus the band edges.
pub fn max_a_weighting_db(band_hz: (f64, f64)) -> f64 {
    let (lo, hi) = (band_hz.0.max(1.0), band_hz.1.max(band_hz.0.max(1.0)));
    let n = 2000;
    let ratio = (hi / lo).ln();
    (0..=n)
        .map(|k| a_weighting_db(lo * (ratio * f64::from(k) / f64::from(n)).exp()))
        .fold(f64::NEG_INFINITY, f64::max)
}

/// The budget of a sine sweep (or tone) at `level_dbfs` peak over `band_hz` on every
/// channel's path.
pub fn sine_budget(
    step: &str,
    level_dbfs: f64,
    band_hz: (f64, f64),
    product: Option<&ProductSpec>,
    paths: &[ChannelPath],
    caps: &Caps,
) -> Budget {
    let mut items = Vec::new();
    let mut unchecked = Vec::new();
    let max_a_db = max_a_weighting_db(band_hz);
    for p in paths {
        let item = |quantity, expected, cap| BudgetItem {
            channel: p.channel.clone(),
            quantity,
            expected,
            cap,
        };
        items.push(item(
            Quantity::DigitalPeak,
            level_dbfs,
            caps.max_digital_dbfs,
        ));
        let Some(v_per_fs) = p.drive_v_peak_per_fs else {
            unchecked.push(format!(
                "channel {}: drive voltage and sound levels (no drive calibration)",
                p.channel
            ));
            continue;
        };
        let v_peak = 10f64.powf(level_dbfs / 20.0) * v_per_fs;
        let v_rms = v_peak / std::f64::consts::SQRT_2;
        items.push(item(Quantity::DriveRms, v_rms, caps.max_drive_v_rms));
        items.push(item(Quantity::DrivePeak, v_peak, caps.max_drive_v_peak));
        let Some(product) = product else {
            unchecked.push(format!(
                "channel {}: sound levels (the plan declares no product sensitivity)",
                p.channel
            ));
            continue;
        };
        let ref_rms = product.worst_case_db_spl_per_v() + 20.0 * v_rms.log10();
        // The unit's response may peak anywhere in the band, so each position takes the
        // worst frequency of what lies between the reference and it.
        let (c_min, mic_a_db) = correction_extremes(p.correction_db.as_deref(), max_a_db);
        let mic_rms = ref_rms - c_min;
        items.push(item(
            Quantity::ReferencePeak,
            ref_rms + SINE_CREST_DB,
            caps.max_spl_reference_peak_db,
        ));
        items.push(item(
            Quantity::ReferenceA,
            ref_rms + max_a_db,
            caps.max_spl_reference_dba,
        ));
        items.push(item(
            Quantity::MicPeak,
            mic_rms + SINE_CREST_DB,
            caps.max_spl_mic_peak_db,
        ));
        items.push(item(
            Quantity::MicA,
            ref_rms + mic_a_db,
            caps.max_spl_mic_dba,
        ));
    }
    Budget {
        step: step.to_string(),
        level_dbfs,
        items,
        unchecked,
    }
}
