//! Correction with a tabulated Thévenin source and couplers built directly from two-ports:
//! the corrected fixture response equals the reference response found by solving each
//! source + coupler circuit as one linear system (Kirchhoff's laws on the analogous
//! circuit; Beranek & Mellow 2012, ch. 3), not through the correction formula.
use crate::support::source_support;

use source_support::*;
use tragus::acoustics::correction::{Correction, CorrectionError, FnCoupler};
use tragus::acoustics::source::Source;
use tragus::acoustics::twoport::TwoPort;
use tragus::acoustics::C64;

/// Reference: a 2 cm³ rigid-ended cylinder (radius 9.45 mm, length 7.13 mm), microphone at
/// the closed end. Invented test geometry.
const REF_RADIUS_M: f64 = 9.45e-3;
fn ref_length_m() -> f64 {
    2e-6 / (std::f64::consts::PI * REF_RADIUS_M * REF_RADIUS_M)
}
fn reference_chain(f: f64) -> Vec<TwoPort> {
    vec![lossless_tube(f, ref_length_m(), REF_RADIUS_M, &air())]
}

/// Pressure at the rigid end of `chain` driven by (p_oc, Zs), by solving all node
/// equations at once: p_0 + Zs·U_0 = p_oc, the two-port relations, U_end = 0.
fn direct_end_pressure(p_oc: C64, zs: C64, chain: &[TwoPort]) -> C64 {
    let n_nodes = chain.len() + 1;
    let n = 2 * n_nodes;
    let zero = C64::new(0.0, 0.0);
    let one = C64::new(1.0, 0.0);
    let mut a = vec![vec![zero; n]; n];
    let mut b = vec![zero; n];
    a[0][0] = one;
    a[0][1] = zs;
    b[0] = p_oc;
    for (k, t) in chain.iter().enumerate() {
        let r = 1 + 2 * k;
        a[r][2 * k] = one;
        a[r][2 * k + 2] = -t.a;
        a[r][2 * k + 3] = -t.b;
        a[r + 1][2 * k + 1] = one;
        a[r + 1][2 * k + 2] = -t.c;
        a[r + 1][2 * k + 3] = -t.d;
    }
    a[n - 1][n - 1] = one;
    solve(a, b)[n - 2]
}

/// An invented Thévenin table: source impedance a damper resistance plus an inertance and
/// a compliance (2e7 Pa·s/m³, 1500 kg/m⁴, 1e-13 m³/Pa), p_oc a smooth band-pass.
fn table_source() -> Source {
    let table = log_freqs(10.0, 20_000.0, 400)
        .into_iter()
        .map(|f| {
            let w = omega(f);
            let zs = C64::new(2e7, w * 1500.0 - 1.0 / (w * 1e-13));
            let p = C64::new(2.0, 0.0) / C64::new(1.0, f / 3000.0 - 200.0 / f);
            (f, p, zs)
        })
        .collect();
    Source::Thevenin { table }
}

#[allow(clippy::type_complexity)] // two opaque closure types; a type alias cannot name them
fn couplers() -> (
    FnCoupler<impl Fn(f64) -> (C64, C64)>,
    FnCoupler<impl Fn(f64) -> (C64, C64)>,
) {
    let fixture = FnCoupler {
        id: "fixture-test".into(),
        tap: "mic".into(),
        description: "tube 3 mm r 1.5 mm; cavity 0.5 cm3; leak 5e7 + j w 2000".into(),
        response: |f| z_and_t(&fixture_chain(f)),
    };
    let reference = FnCoupler {
        id: "reference-test".into(),
        tap: "drp".into(),
        description: "tube r 9.45 mm, 2 cm3, rigid".into(),
        response: |f| z_and_t(&reference_chain(f)),
    };
    (fixture, reference)
}

#[test]
fn corrected_fixture_response_matches_the_reference_circuit() {
    let src = table_source();
    let (fixture, reference) = couplers();
    let corr = Correction::new(&fixture, &reference, "mic", "drp", &src).unwrap();
    let freqs = log_freqs(20.0, 10_000.0, 300);
    let mut level_fix = Vec::new();
    let mut phase_fix = Vec::new();
    let mut p_ref = Vec::new();
    for &f in &freqs {
        let t = src.thevenin(f).unwrap().unwrap();
        let pf = direct_end_pressure(t.p_oc_pa_per_v, t.z_s_pa_s_m3, &fixture_chain(f));
        let pr = direct_end_pressure(t.p_oc_pa_per_v, t.z_s_pa_s_m3, &reference_chain(f));
        level_fix.push(20.0 * pf.norm().log10());
        phase_fix.push(pf.arg().to_degrees());
        p_ref.push(pr);
    }
    let (level, phase) = corr
        .apply_to_response(&freqs, &level_fix, &phase_fix)
        .unwrap();
    let mut worst_db = 0.0f64;
    for i in 0..freqs.len() {
        let want_db = 20.0 * p_ref[i].norm().log10();
        worst_db = worst_db.max((level[i] - want_db).abs());
        let d = (phase[i] - p_ref[i].arg().to_degrees()).rem_euclid(360.0);
        assert!(d.min(360.0 - d) < 1e-6, "phase at {} Hz", freqs[i]);
    }
    // Exact for linear circuits; 1e-9 dB leaves room for rounding in the dense solve of
    // systems whose impedances span ~10 decades (f64 epsilon × condition number).
    assert!(worst_db < 1e-9, "worst {worst_db} dB");
}

#[test]
fn harmonic_correction_moves_hd_by_the_correction_at_n_f_over_f() {
    // A harmonic made inside the source appears as a second pressure generator behind the
    // same Zs (the Thévenin pair of a linear network is the same at every drive). HDn in
    // each coupler = |p(n·f)|/|p(f)|; correcting the fixture's must give the reference's.
    let src = table_source();
    let (fixture, reference) = couplers();
    let corr = Correction::new(&fixture, &reference, "mic", "drp", &src).unwrap();
    let n = 3;
    let freqs = log_freqs(20.0, 3000.0, 50);
    let hd = |chain: fn(f64) -> Vec<TwoPort>, f: f64| {
        let t1 = src.thevenin(f).unwrap().unwrap();
        let tn = src.thevenin(n as f64 * f).unwrap().unwrap();
        // harmonic generator 1 % of the fundamental's (invented)
        let p1 = direct_end_pressure(t1.p_oc_pa_per_v, t1.z_s_pa_s_m3, &chain(f));
        let pn = direct_end_pressure(
            tn.p_oc_pa_per_v * 0.01,
            tn.z_s_pa_s_m3,
            &chain(n as f64 * f),
        );
        20.0 * (pn.norm() / p1.norm()).log10()
    };
    let hd_fix: Vec<f64> = freqs.iter().map(|&f| hd(fixture_chain, f)).collect();
    let hd_ref: Vec<f64> = freqs.iter().map(|&f| hd(reference_chain, f)).collect();
    let got = corr.apply_to_harmonic(n, &freqs, &hd_fix).unwrap();
    for i in 0..freqs.len() {
        // same origin as the response test's bound
        assert!((got[i] - hd_ref[i]).abs() < 1e-9, "at {} Hz", freqs[i]);
    }
    // The fixture and reference differ, so the test would notice a missing correction
    // (threshold 1 dB: ten times the 0.1 dB bar).
    let raw_err = hd_fix
        .iter()
        .zip(&hd_ref)
        .map(|(a, b)| (a - b).abs())
        .fold(0.0, f64::max);
    assert!(raw_err > 1.0, "uncorrected hd differs by only {raw_err} dB");
}

#[test]
fn ideal_limit_is_the_ratio_of_transfer_impedances() {
    // docs/architecture.md: Zs → ∞ gives C = Zr·Tr/(Zf·Tf). A table source with a huge Zs must
    // approach the volume-velocity correction (relative difference ~ |Z|/|Zs| ≈ 1e-7 for
    // Zs = 1e16 against couplers of ≤1e9 Pa·s/m³ at 20 Hz, so 1e-6 bounds it).
    let (fixture, reference) = couplers();
    let vv = Source::VolumeVelocity;
    let stiff = Source::Thevenin {
        table: vec![
            (10.0, C64::new(1.0, 0.0), C64::new(1e16, 0.0)),
            (1e5, C64::new(1.0, 0.0), C64::new(1e16, 0.0)),
        ],
    };
    let c_vv = Correction::new(&fixture, &reference, "mic", "drp", &vv).unwrap();
    let c_stiff = Correction::new(&fixture, &reference, "mic", "drp", &stiff).unwrap();
    for f in log_freqs(20.0, 10_000.0, 40) {
        let (zf, tf) = z_and_t(&fixture_chain(f));
        let (zr, tr) = z_and_t(&reference_chain(f));
        let want = zr * tr / (zf * tf);
        // one formula, a few roundings
        assert!(rel(c_vv.factor(f).unwrap(), want) < 1e-12);
        assert!(rel(c_stiff.factor(f).unwrap(), want) < 1e-6);
    }
}

#[test]
fn identity_changes_with_each_part_and_only_then() {
    let src = table_source();
    let (fixture, reference) = couplers();
    let id = |s: &Source, ft: &str| {
        Correction::new(&fixture, &reference, ft, "drp", s)
            .unwrap()
            .identity()
    };
    let base = id(&src, "mic");
    assert_eq!(base.len(), 64);
    assert!(base.chars().all(|c| c.is_ascii_hexdigit()));
    assert_eq!(base, id(&table_source(), "mic"), "not stable");
    assert_ne!(base, id(&Source::VolumeVelocity, "mic"));
    let Source::Thevenin { mut table } = table_source() else {
        unreachable!()
    };
    table[7].2.re *= 1.0 + 1e-15;
    assert_ne!(base, id(&Source::Thevenin { table }, "mic"));
    let swapped = Correction::new(&reference, &fixture, "drp", "mic", &src).unwrap();
    assert_ne!(base, swapped.identity());
}

#[test]
fn errors_are_typed_and_worded() {
    let src = table_source();
    let (fixture, reference) = couplers();
    let e = Correction::new(&fixture, &reference, "ear", "drp", &src)
        .err()
        .unwrap();
    assert_eq!(
        e.to_string(),
        "coupler fixture-test: no microphone tap \"ear\" (taps: mic)"
    );
    let corr = Correction::new(&fixture, &reference, "mic", "drp", &src).unwrap();
    let e = corr
        .apply_to_response(&[100.0, 200.0], &[0.0], &[0.0, 0.0])
        .unwrap_err();
    assert_eq!(
        e.to_string(),
        "expected 2 values to match the frequencies, found 1"
    );
    let e = corr.apply_to_harmonic(1, &[100.0], &[0.0]).unwrap_err();
    assert_eq!(
        e.to_string(),
        "expected a harmonic order of at least 2, found 1"
    );
    // HD3 at 8 kHz needs the source at 24 kHz, beyond its 20 kHz table.
    let e = corr.apply_to_harmonic(3, &[8000.0], &[-40.0]).unwrap_err();
    assert!(matches!(e, CorrectionError::Source(_)));
    assert!(e
        .to_string()
        .starts_with("frequency 24000 hz is outside the source table"));
}
