//! The coupler network against circuit theory: a chain equals the product of its two-ports
//! (ABCD cascade, Beranek & Mellow 2012 §3), a tap at the reference plane sees p_in, a
//! passive lossy chain absorbs power (Re Z_in ≥ 0), and batch evaluation equals single.

use rand::{Rng, SeedableRng};
use tragus::acoustics::air::Air;
use tragus::acoustics::elements::{Element, TubeLoss};
use tragus::acoustics::network::{ChainItem, Coupler};
use tragus::acoustics::termination::Termination;
use tragus::acoustics::C64;

fn tube(l_mm: f64, r_mm: f64) -> Element {
    Element::Tube {
        length_m: l_mm * 1e-3,
        radius_m: r_mm * 1e-3,
        loss: TubeLoss::ZwikkerKosten,
    }
}

fn coupler(chain: Vec<ChainItem>, termination: Termination) -> Coupler {
    Coupler {
        id: "test".into(),
        air: Air::standard(),
        chain,
        termination,
    }
}

// Tube → cavity → tube, rigid end: Z_in = A/C of the matrix product, and the pressure at the
// node after the cavity follows from the partial product acting on the remaining load.
#[test]
fn chain_equals_the_product_of_its_two_ports() {
    let air = Air::standard();
    let e1 = tube(5.0, 1.0);
    let e2 = Element::Cavity { volume_m3: 500e-9 };
    let e3 = tube(10.0, 2.0);
    let c = coupler(
        vec![
            ChainItem::Element(e1.clone()),
            ChainItem::Element(e2.clone()),
            ChainItem::Tap("mid".into()),
            ChainItem::Element(e3.clone()),
            ChainItem::Tap("end".into()),
        ],
        Termination::Rigid,
    );
    for f in [50.0, 500.0, 3000.0, 12_000.0] {
        let (m1, m2, m3) = (
            e1.two_port(f, &air),
            e2.two_port(f, &air),
            e3.two_port(f, &air),
        );
        let total = m1.then(&m2).then(&m3);
        let z_in = total.a / total.c;
        let pt = c.evaluate(f);
        assert!((pt.input_impedance / z_in - 1.0).norm() < 1e-9, "f={f}");
        // With U_end = 0: p_in = A·p_end and U_in = C·p_end, so p_end/p_in = 1/A and
        // p_end/U_in = 1/C; at "mid", [p; U]_mid = m3·[p_end; 0].
        let (zt_end, t_end) = pt.taps["end"];
        assert!((t_end * total.a - 1.0).norm() < 1e-9, "f={f}");
        assert!((zt_end * total.c - 1.0).norm() < 1e-9, "f={f}");
        let (_, t_mid) = pt.taps["mid"];
        assert!((t_mid * total.a / m3.a - 1.0).norm() < 1e-9, "f={f}");
    }
}

// A tap before any element is the reference plane itself: p_tap/p_in = 1, p_tap/U_in = Z_in.
#[test]
fn tap_at_the_reference_plane_sees_the_input_pressure() {
    let c = coupler(
        vec![
            ChainItem::Tap("inlet".into()),
            ChainItem::Element(tube(8.0, 1.5)),
            ChainItem::Element(Element::Cavity { volume_m3: 1e-6 }),
        ],
        Termination::Eardrum,
    );
    for f in [20.0, 1000.0, 8000.0] {
        let pt = c.evaluate(f);
        let (zt, t) = pt.taps["inlet"];
        assert!((t - C64::new(1.0, 0.0)).norm() < 1e-12);
        assert!((zt / pt.input_impedance - 1.0).norm() < 1e-12);
    }
}

// Passivity: random chains of lossy tubes, slits, cavities, resistances and leak branches
// (seeded) never give Re Z_in < 0 — a passive network cannot deliver power.
#[test]
fn passive_lossy_chains_absorb_power_and_batch_equals_single() {
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(2026);
    let freqs: Vec<f64> = (0..60)
        .map(|i| 20.0 * 1000f64.powf(i as f64 / 59.0))
        .collect();
    for _ in 0..40 {
        let mut chain = Vec::new();
        for _ in 0..rng.random_range(1..5) {
            let e = match rng.random_range(0..5) {
                0 => tube(rng.random_range(1.0..20.0), rng.random_range(0.3..4.0)),
                1 => Element::Slit {
                    length_m: rng.random_range(0.5e-3..3e-3),
                    width_m: rng.random_range(1e-3..5e-3),
                    gap_m: rng.random_range(0.05e-3..0.3e-3),
                },
                2 => Element::Cavity {
                    volume_m3: rng.random_range(50e-9..2e-6),
                },
                3 => Element::Series {
                    resistance_pa_s_m3: rng.random_range(0.0..5e7),
                    inertance_kg_m4: rng.random_range(0.0..1e3),
                    compliance_m3_pa: None,
                },
                _ => Element::Branch {
                    elements: vec![tube(rng.random_range(1.0..10.0), 0.2)],
                    termination: Termination::OpenUnbaffled { radius_m: 0.2e-3 },
                },
            };
            chain.push(ChainItem::Element(e));
        }
        // A chain of series elements into a rigid wall has an infinite input impedance;
        // a final cavity keeps every chain a finite (and still passive) load.
        chain.push(ChainItem::Element(Element::Cavity {
            volume_m3: rng.random_range(50e-9..2e-6),
        }));
        chain.push(ChainItem::Tap("mic".into()));
        let term = if rng.random_bool(0.5) {
            Termination::Rigid
        } else {
            Termination::Eardrum
        };
        let c = coupler(chain, term);
        let many = c.evaluate_many(&freqs);
        for (f, p) in freqs.iter().zip(&many) {
            assert!(p.input_impedance.re >= 0.0, "Re Z_in < 0 at {f} Hz: {c:?}");
            assert_eq!(p, &c.evaluate(*f));
        }
    }
}
