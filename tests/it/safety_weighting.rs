//! IEC 61672-1 frequency weightings against the standard's table and constants, and the
//! weighted level of a pressure power spectrum against ISO 1683 and power summation.

use tragus::safety::weighting::{
    a1000_db, a_weighted_level_db, a_weighting_db, c1000_db, c_weighting_db, pole_frequencies_hz,
    weighted_level_db, Weighting, WeightingError,
};

/// IEC 61672-1:2002 Table 2 (read in a national reprint identical to the IEC text): nominal
/// frequency, A and C weighting in dB, for n = 10..=43 (10 Hz .. 20 kHz).
const TABLE_2: [(f64, f64, f64); 34] = [
    (10.0, -70.4, -14.3),
    (12.5, -63.4, -11.2),
    (16.0, -56.7, -8.5),
    (20.0, -50.5, -6.2),
    (25.0, -44.7, -4.4),
    (31.5, -39.4, -3.0),
    (40.0, -34.6, -2.0),
    (50.0, -30.2, -1.3),
    (63.0, -26.2, -0.8),
    (80.0, -22.5, -0.5),
    (100.0, -19.1, -0.3),
    (125.0, -16.1, -0.2),
    (160.0, -13.4, -0.1),
    (200.0, -10.9, 0.0),
    (250.0, -8.6, 0.0),
    (315.0, -6.6, 0.0),
    (400.0, -4.8, 0.0),
    (500.0, -3.2, 0.0),
    (630.0, -1.9, 0.0),
    (800.0, -0.8, 0.0),
    (1000.0, 0.0, 0.0),
    (1250.0, 0.6, 0.0),
    (1600.0, 1.0, -0.1),
    (2000.0, 1.2, -0.2),
    (2500.0, 1.3, -0.3),
    (3150.0, 1.2, -0.5),
    (4000.0, 1.0, -0.8),
    (5000.0, 0.5, -1.3),
    (6300.0, -0.1, -2.0),
    (8000.0, -1.1, -3.0),
    (10000.0, -2.5, -4.4),
    (12500.0, -4.3, -6.2),
    (16000.0, -6.6, -8.5),
    (20000.0, -9.3, -11.2),
];

/// Round to 0.1 dB as the table does, with −0.0 folded into 0.0.
fn round_01(x: f64) -> f64 {
    (x * 10.0).round() / 10.0 + 0.0
}

#[test]
fn every_table_2_value_from_10_hz_to_20_khz() {
    for (i, &(nominal_hz, a_db, c_db)) in TABLE_2.iter().enumerate() {
        // IEC 61672-1:2002 Table 2 footnote: the values are computed at the exact base-10
        // frequencies 1000·10^(0.1(n−30)), n = 10..=43, and rounded to 0.1 dB.
        let n = 10 + i as i32;
        let exact_hz = 1000.0 * 10f64.powf(0.1 * f64::from(n - 30));
        // The nominal frequency is the exact one rounded (IEC 61260-1 preferred numbers);
        // 3 % covers the largest gap (12.5 Hz nominal against 12.589 Hz exact).
        assert!(
            (exact_hz / nominal_hz - 1.0).abs() < 0.03,
            "row {nominal_hz}"
        );
        let a = round_01(a_weighting_db(exact_hz));
        let c = round_01(c_weighting_db(exact_hz));
        // Equality after rounding to the table's 0.1 dB; 1e-9 absorbs the binary form of
        // one decimal place.
        assert!(
            (a - a_db).abs() < 1e-9,
            "A at {nominal_hz} Hz ({exact_hz:.4} Hz): computed {:.4} dB, table {a_db}",
            a_weighting_db(exact_hz)
        );
        assert!(
            (c - c_db).abs() < 1e-9,
            "C at {nominal_hz} Hz ({exact_hz:.4} Hz): computed {:.4} dB, table {c_db}",
            c_weighting_db(exact_hz)
        );
    }
}

#[test]
fn at_the_nominal_12_5_hz_the_table_is_not_reproduced() {
    // IEC 61672-1:2002 Table 2 footnote b: the tabulated −63.4 dB belongs to 12.589 Hz; at
    // the nominal 12.5 Hz the formula gives −63.6 dB. Guards against a table checked at
    // nominal frequencies by accident.
    assert_eq!(round_01(a_weighting_db(12.5)), -63.6);
    assert_eq!(round_01(a_weighting_db(1000.0 * 10f64.powf(-1.9))), -63.4);
}

#[test]
fn pole_frequencies_from_the_design_inputs() {
    let [f1, f2, f3, f4] = pole_frequencies_hz();
    // IEC 61672-1:2013 Annex E gives the poles rounded: f1 ≈ 20.60 Hz, f2 ≈ 107.7 Hz,
    // f3 ≈ 737.9 Hz, f4 ≈ 12194 Hz (from memory).
    assert_eq!((f1 * 100.0).round() / 100.0, 20.60);
    assert_eq!((f2 * 10.0).round() / 10.0, 107.7);
    assert_eq!((f3 * 10.0).round() / 10.0, 737.9);
    assert_eq!(f4.round(), 12194.0);
    // The same formulas evaluated in double precision by public implementations of IEC
    // 61672-1 (a widely copied Python A/C-weighting module: 20.598997057568145,
    // 107.65264864304628, 737.8622307362899, 12194.21714799801 Hz; docs/reference-values.md has
    // the same to the last digit or two). 1e-12 relative: the digits the two sources share.
    for (got, want) in [
        (f1, 20.598997057568145),
        (f2, 107.65264864304628),
        (f3, 737.8622307362899),
        (f4, 12194.21714799801),
    ] {
        assert!(
            (got / want - 1.0).abs() < 1e-12,
            "pole {got} Hz, expected {want} Hz"
        );
    }
}

#[test]
fn normalisation_constants_at_1_khz() {
    // IEC 61672-1:2002 §5.4.11: A1000 = −2.000 dB and C1000 = −0.062 dB (rounded to
    // 0.001 dB in the standard); exact values −1.9996555 and −0.0619019 dB evaluated from the
    // same formulas in double precision (docs/reference-values.md), to their 7 decimals.
    assert_eq!((a1000_db() * 1000.0).round() / 1000.0, -2.000);
    assert_eq!((c1000_db() * 1000.0).round() / 1000.0, -0.062);
    assert!((a1000_db() - -1.9996555).abs() < 1e-7, "{}", a1000_db());
    assert!((c1000_db() - -0.0619019).abs() < 1e-7, "{}", c1000_db());
    // Normalised, both weightings are 0 dB at 1 kHz by definition; 1e-12 is rounding.
    assert!(a_weighting_db(1000.0).abs() < 1e-12);
    assert!(c_weighting_db(1000.0).abs() < 1e-12);
    assert_eq!(Weighting::Z.gain_db(37.0), 0.0);
}

#[test]
fn weightings_vanish_at_0_hz() {
    // The analogue responses have zeros at s = 0 (four for A, two for C; IEC 61672-1 Annex
    // E): a DC bin carries no weighted power.
    assert_eq!(Weighting::A.power_gain(0.0), 0.0);
    assert_eq!(Weighting::C.power_gain(0.0), 0.0);
    assert_eq!(a_weighting_db(0.0), f64::NEG_INFINITY);
}

#[test]
fn one_pascal_at_1_khz_is_93_98_db_a() {
    // ISO 1683:2015: p0 = 20 µPa, so 1 Pa rms = 20·lg(1/20e-6) = 93.979 dB; A(1 kHz) = 0.
    let level = a_weighted_level_db(&[(1000.0, 1.0)]).unwrap();
    assert_eq!((level * 100.0).round() / 100.0, 93.98);
    assert!((level - 20.0 * (1.0f64 / 20e-6).log10()).abs() < 1e-12);
    // IEC 60942 calibrator nominal 94.0 dB is 1.0024 Pa rms (10^(94/20)·20 µPa).
    let p = 20e-6 * 10f64.powf(94.0 / 20.0);
    let level = a_weighted_level_db(&[(1000.0, p * p)]).unwrap();
    assert!((level - 94.0).abs() < 1e-12, "{level}");
}

#[test]
fn two_tones_sum_on_power() {
    // 1 Pa at 1 kHz plus 1 Pa at 100 Hz: A(100 Hz) = −19.1 dB (IEC 61672-1:2002 Table 2,
    // 100 Hz is an exact base-10 frequency), so the level is 93.979 + 10·lg(1 + 10^(−1.91)).
    // Tolerance: the table's ±0.05 dB rounding moves this by 0.05·0.0121 = 0.0006 dB.
    let expected = 20.0 * (1.0f64 / 20e-6).log10() + 10.0 * (1.0 + 10f64.powf(-1.91)).log10();
    let level = a_weighted_level_db(&[(1000.0, 1.0), (100.0, 1.0)]).unwrap();
    assert!((level - expected).abs() < 0.001, "{level} vs {expected}");
    // Summed on amplitude instead it would be 0.93 dB higher: the check can tell.
    let on_amplitude = 20.0 * (1.0f64 / 20e-6).log10() + 20.0 * (1.0 + 10f64.powf(-0.955)).log10();
    assert!((level - on_amplitude).abs() > 0.5);
    // Order does not matter; two equal tones are +3.01 dB (10·lg 2).
    let swapped = a_weighted_level_db(&[(100.0, 1.0), (1000.0, 1.0)]).unwrap();
    assert!((swapped - level).abs() < 1e-12);
    let twice = a_weighted_level_db(&[(1000.0, 1.0), (1000.0, 1.0)]).unwrap();
    assert!((twice - 20.0 * (1.0f64 / 20e-6).log10() - 10.0 * 2f64.log10()).abs() < 1e-12);
}

#[test]
fn a_spectrum_split_into_bins_keeps_its_level() {
    // Parseval: 1 Pa² spread over ten 1 kHz bins of 0.1 Pa² plus a silent DC bin is still
    // 93.979 dB(A).
    let mut bins = vec![(0.0, 0.0)];
    bins.extend(std::iter::repeat_n((1000.0, 0.1), 10));
    let level = a_weighted_level_db(&bins).unwrap();
    assert!((level - 20.0 * (1.0f64 / 20e-6).log10()).abs() < 1e-12);
    // C- and Z-weighted levels of a 1 kHz tone are the same 93.979 dB.
    for w in [Weighting::C, Weighting::Z] {
        let l = weighted_level_db(&[(1000.0, 1.0)], w).unwrap();
        assert!((l - 93.979).abs() < 1e-3, "{w:?}: {l}");
    }
}

#[test]
fn bad_spectra_are_errors_with_the_bin() {
    assert_eq!(a_weighted_level_db(&[]), Err(WeightingError::Empty));
    let e = a_weighted_level_db(&[(1000.0, 1.0), (-5.0, 1.0)]).unwrap_err();
    assert_eq!(
        e,
        WeightingError::BadFrequency {
            index: 1,
            found_hz: -5.0
        }
    );
    assert_eq!(
        e.to_string(),
        "expected a finite frequency of 0 Hz or more at bin 1, found -5 Hz"
    );
    let e = a_weighted_level_db(&[(1000.0, -1.0)]).unwrap_err();
    assert_eq!(
        e.to_string(),
        "expected a finite mean-square pressure of 0 Pa² or more at bin 0, found -1 Pa²"
    );
    assert!(matches!(
        a_weighted_level_db(&[(f64::NAN, 1.0)]),
        Err(WeightingError::BadFrequency { index: 0, .. })
    ));
    assert!(matches!(
        a_weighted_level_db(&[(1000.0, f64::INFINITY)]),
        Err(WeightingError::BadPower { index: 0, .. })
    ));
    // Silence, or power only at DC, has no level (−∞ dB): an error, not a number.
    let e = a_weighted_level_db(&[(1000.0, 0.0), (0.0, 5.0)]).unwrap_err();
    assert_eq!(e, WeightingError::NoPower { weighting: "A" });
    assert_eq!(
        e.to_string(),
        "expected some sound power after A-weighting, found none (the level would be −∞ dB)"
    );
}
