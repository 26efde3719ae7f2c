//! The acoustic elements against scipy: Bessel ratio, exact Zwikker–Kosten tube, Stinson slit,
//! baffled piston. Data from `tests/reference/make_acoustics.py` (scipy.special.jve, j1,
//! struve; numpy 2.4.6, scipy 1.17.1), committed as CSV.
use tragus::acoustics::air::Air;
use tragus::acoustics::bessel::j1_over_z_j0;
use tragus::acoustics::elements::{slit_effective, tube_propagation, TubeLoss};
use tragus::acoustics::termination::piston_radiation_impedance;
use tragus::acoustics::C64;

fn rows(name: &str) -> Vec<Vec<f64>> {
    let path = format!("{}/tests/reference/{name}", env!("CARGO_MANIFEST_DIR"));
    let text = std::fs::read_to_string(&path).expect("reference csv");
    text.lines()
        .skip(1)
        .filter(|l| !l.is_empty())
        .map(|l| l.split(',').map(|v| v.parse().expect("number")).collect())
        .collect()
}

fn rel(a: C64, b: C64) -> f64 {
    (a - b).norm() / b.norm()
}

#[test]
fn bessel_ratio_matches_scipy() {
    let data = rows("acoustics_bessel.csv");
    assert!(data.len() > 100);
    let mut worst = 0.0f64;
    for r in &data {
        let z = C64::new(r[0], r[1]);
        let g = C64::new(r[2], r[3]);
        let e = rel(j1_over_z_j0(z), g);
        worst = worst.max(e);
        // scipy.special.jve (AMOS) is good to ~1e-14 relative; 1e-10 is the accuracy asked
        // of the ratio (brief), leaving room for the conditioning near the zeros of J0.
        assert!(
            e < 1e-10,
            "z = {z}: {} vs scipy {g} (rel {e:e})",
            j1_over_z_j0(z)
        );
    }
    eprintln!("bessel ratio worst relative error {worst:e}");
}

#[test]
fn zwikker_kosten_matches_scipy() {
    let air = Air::standard();
    let data = rows("acoustics_zk.csv");
    assert_eq!(data.len(), 96);
    for r in &data {
        let (gamma, zc) = tube_propagation(r[1], r[0], TubeLoss::ZwikkerKosten, &air);
        let (eg, ez) = (
            rel(gamma, C64::new(r[2], r[3])),
            rel(zc, C64::new(r[4], r[5])),
        );
        // Same formulas and air in the script; the difference is only the Bessel evaluation
        // (scipy AMOS vs our continued fraction / Hankel), ~1e-14; 1e-9 is the brief's aim.
        assert!(
            eg < 1e-9 && ez < 1e-9,
            "a = {} m, f = {} Hz: rel {eg:e} {ez:e}",
            r[0],
            r[1]
        );
    }
}

#[test]
fn stinson_slit_matches_scipy() {
    let air = Air::standard();
    let bulk = air.bulk_modulus_pa();
    let data = rows("acoustics_slit.csv");
    assert_eq!(data.len(), 96);
    for r in &data {
        let (rho_eff, k_eff) = slit_effective(r[1], r[0], &air);
        let er = rel(rho_eff / air.density_kg_m3, C64::new(r[2], r[3]));
        let ek = rel(k_eff / bulk, C64::new(r[4], r[5]));
        // numpy tanh vs num-complex tanh on the same formula: rounding only.
        assert!(
            er < 1e-9 && ek < 1e-9,
            "gap {} m, {} Hz: {er:e} {ek:e}",
            r[0],
            r[1]
        );
    }
}

#[test]
fn piston_radiation_matches_scipy() {
    let air = Air::standard();
    let radius_m = 3.0e-3;
    let z0 = air.duct_impedance(std::f64::consts::PI * radius_m * radius_m);
    for r in rows("acoustics_piston.csv") {
        let freq_hz = r[0] * air.speed_of_sound_m_s / (2.0 * std::f64::consts::PI * radius_m);
        let z = piston_radiation_impedance(freq_hz, radius_m, &air) / z0;
        let want = C64::new(r[1], r[2]);
        // J1 and H1 series/asymptotic are good to ~5e-9 absolute (bessel.rs); relative to
        // |Z/Z0| ≥ 8ka/(3π) at small ka, 1e-6 relative covers ka down to 1e-3.
        assert!(rel(z, want) < 1e-6, "ka = {}: {z} vs scipy {want}", r[0]);
    }
}
