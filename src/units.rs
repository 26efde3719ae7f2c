//! Units and constants that every layer shares: the reference sound pressure and the
//! level conversions built on it.

/// Reference sound pressure for levels in air, Pa (ISO 1683:2015, table 1: 20 µPa).
pub const P_REF_PA: f64 = 20e-6;

/// Sound pressure level in dB re 20 µPa of an rms pressure in pascal.
pub fn spl_db(p_rms_pa: f64) -> f64 {
    20.0 * (p_rms_pa / P_REF_PA).log10()
}

/// rms pressure in pascal of a sound pressure level in dB re 20 µPa.
pub fn pressure_pa(level_db_spl: f64) -> f64 {
    P_REF_PA * 10f64.powf(level_db_spl / 20.0)
}

/// The level of a tone in dBFS after AES17 (AES17-2020, §3.12.2: 0 dBFS is the rms of a
/// full-scale sine), from its rms in full scale (sample value 1.0 = 1 FS): `20·lg(√2·rms)`.
/// The one convention of every tone reading in tragus (the pilot, the calibration tones): a
/// sine of peak amplitude a reads `20·lg(a)` dBFS, the same number as the generator's peak
/// level.
pub fn tone_dbfs(rms_fs: f64) -> f64 {
    10.0 * (2.0 * rms_fs * rms_fs).max(1e-300).log10()
}
