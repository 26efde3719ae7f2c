//! Virtual earphone: Thévenin equivalence against a direct solve of the whole circuit,
//! fixture→reference round trip, the cost of treating it as an ideal volume-velocity source,
//! and driver sanity checks against closed forms.
use crate::support::source_support;

use source_support::*;
use tragus::acoustics::correction::{Correction, FnCoupler};
use tragus::acoustics::elements::TubeLoss;
use tragus::acoustics::source::{EarphoneModel, Source};
use tragus::acoustics::twoport::TwoPort;
use tragus::acoustics::C64;

fn model() -> EarphoneModel {
    EarphoneModel::demo(air())
}

#[test]
fn thevenin_pair_reproduces_the_direct_solve_in_several_loads() {
    // Thévenin's theorem (linear circuit theory): p_L = p_oc·Z_L/(Zs+Z_L) for any load.
    let m = model();
    let a = air();
    for f in log_freqs(20.0, 10_000.0, 60) {
        let loads = [
            (
                "cavity 2 cm3",
                C64::new(1.0, 0.0) / cavity_admittance(f, 2e-6, &a),
            ),
            (
                "tube 20 mm r 3 mm",
                closed_tube_impedance(f, 20e-3, 3e-3, &a),
            ),
            ("resistor 3e7", C64::new(3e7, 0.0)),
        ];
        for (name, z) in loads {
            let p = direct_node_pressures(&m, f, &outlet_chain(&m, f), End::Impedance(z));
            let want = *p.last().unwrap();
            let got = m.pressure_at_load(f, z);
            // 1e-9 relative: brief's bar; rounding in the dense solve is far below it.
            assert!(
                rel(got, want) < 1e-9,
                "{name} at {f} Hz: {}",
                rel(got, want)
            );
        }
        // the tube load as explicit two-ports instead of its closed-form impedance
        let mut chain = outlet_chain(&m, f);
        chain.push(lossless_tube(f, 20e-3, 3e-3, &a));
        let p = direct_node_pressures(&m, f, &chain, End::Rigid);
        let want = p[2];
        let got = m.pressure_at_load(f, closed_tube_impedance(f, 20e-3, 3e-3, &a));
        assert!(rel(got, want) < 1e-9, "tube chain at {f} Hz");
    }
}

fn reference_chain(f: f64) -> Vec<TwoPort> {
    // 2 cm³ rigid-ended cylinder, radius 9.45 mm (invented test geometry)
    let r = 9.45e-3;
    vec![lossless_tube(
        f,
        2e-6 / (std::f64::consts::PI * r * r),
        r,
        &air(),
    )]
}

#[test]
fn correction_round_trip_and_the_cost_of_the_ideal_source() {
    let m = model();
    let src = Source::VirtualEarphone(m.clone());
    let fixture = FnCoupler {
        id: "fixture-test".into(),
        tap: "mic".into(),
        description: "fixture".into(),
        response: |f| z_and_t(&fixture_chain(f)),
    };
    let reference = FnCoupler {
        id: "reference-test".into(),
        tap: "drp".into(),
        description: "reference".into(),
        response: |f| z_and_t(&reference_chain(f)),
    };
    let corr = Correction::new(&fixture, &reference, "mic", "drp", &src).unwrap();
    let vv = Source::VolumeVelocity;
    let ideal = Correction::new(&fixture, &reference, "mic", "drp", &vv).unwrap();
    let freqs = log_freqs(20.0, 10_000.0, 300);
    let (mut lf, mut pf, mut lr) = (vec![], vec![], vec![]);
    for &f in &freqs {
        let mut ch = outlet_chain(&m, f);
        ch.extend(fixture_chain(f));
        let p_fix = *direct_node_pressures(&m, f, &ch, End::Rigid)
            .last()
            .unwrap();
        let mut ch = outlet_chain(&m, f);
        ch.extend(reference_chain(f));
        let p_ref = *direct_node_pressures(&m, f, &ch, End::Rigid)
            .last()
            .unwrap();
        lf.push(20.0 * p_fix.norm().log10());
        pf.push(p_fix.arg().to_degrees());
        lr.push(20.0 * p_ref.norm().log10());
    }
    let (got, _) = corr.apply_to_response(&freqs, &lf, &pf).unwrap();
    let worst = got
        .iter()
        .zip(&lr)
        .map(|(a, b)| (a - b).abs())
        .fold(0.0, f64::max);
    println!("round trip worst {worst:e} dB");
    // issue's bar 0.1 dB; exact for a linear model, so aim far below it (1e-9 dB)
    assert!(worst < 1e-9, "round trip worst {worst} dB");

    let (got_vv, _) = ideal.apply_to_response(&freqs, &lf, &pf).unwrap();
    let (i, err) = got_vv
        .iter()
        .zip(&lr)
        .map(|(a, b)| (a - b).abs())
        .enumerate()
        .fold((0, 0.0), |acc, (i, e)| if e > acc.1 { (i, e) } else { acc });
    println!(
        "ideal volume-velocity correction: max error {err:.2} dB at {:.0} Hz",
        freqs[i]
    );
    // larger than the ±0.5 dB usually asked of an ear-simulator model (common practice):
    // the source impedance matters for this earphone in these couplers
    assert!(err > 0.5, "ideal-source error only {err} dB");
}

#[test]
fn blocked_outlet_pressure_is_the_pressure_chamber_value_at_low_frequency() {
    // Beranek & Mellow 2012, ch. 3 (pressure chamber): below resonance the diaphragm is
    // stiffness controlled: x = Bl·(e/Re)/k with k = 1/Cms + Sd²ρc²/V, p = ρc²·Sd·x/V,
    // V the blocked front volume (front cavity + outlet tube). Lossless outlet so the tube
    // stays adiabatic; the rear vent shorts the rear cavity at 1 Hz.
    let mut m = model();
    m.outlet_loss = TubeLoss::Lossless;
    let a = air();
    let v =
        m.front_volume_m3 + std::f64::consts::PI * m.outlet_radius_m.powi(2) * m.outlet_length_m;
    let k = 1.0 / m.cms_m_per_n + m.sd_m2.powi(2) * rho_c2(&a) / v;
    let p_want = rho_c2(&a) * m.sd_m2 * (m.bl_t_m / m.re_ohm / k) / v;
    let p1 = m.thevenin(1.0).p_oc_pa_per_v.norm();
    // neglected terms at 1 Hz: ωLe/Re ≈ 8e-6, ω²Mms/k ≈ 2e-7, damping ω·R/k ≈ 1e-4 (enters
    // the magnitude squared); 1e-3 bounds them
    assert!((p1 - p_want).abs() / p_want < 1e-3, "{p1} vs {p_want}");
    // flat through the free-air resonance (~200 Hz): the air spring dominates; blocked
    // resonance ≈ 2.4 kHz so (100/2400)² ≈ 0.015 dB; 0.05 dB bounds it
    for f in log_freqs(1.0, 100.0, 20) {
        let d = 20.0 * (m.thevenin(f).p_oc_pa_per_v.norm() / p1).log10();
        assert!(d.abs() < 0.05, "{d} dB at {f} Hz");
    }
}

#[test]
fn mechanical_reactance_crosses_zero_at_the_closed_form_resonance() {
    // fs = 1/(2π√(Mms·Cms)) (Beranek & Mellow 2012, ch. 3); found by bisection on Im Zm
    let m = model();
    let (mut lo, mut hi) = (10.0, 10_000.0);
    for _ in 0..200 {
        let mid = 0.5 * (lo + hi);
        if m.mechanical_impedance_n_s_per_m(mid).im < 0.0 {
            lo = mid
        } else {
            hi = mid
        }
    }
    let fs = m.free_air_resonance_hz();
    // bisection to f64 resolution
    assert!((lo - fs).abs() / fs < 1e-12, "{lo} vs {fs}");
    // the invented demo is meant to sit at ~200 Hz (brief: 100–300 Hz)
    assert!((100.0..300.0).contains(&fs));
}
