//! Correction round trip through the shipped coupler model files (not two-ports built by
//! hand): the virtual earphone measured in a fixture model and corrected must equal the
//! same earphone in the reference model, where "in the model" is found by solving the
//! whole earphone + coupler circuit as one linear system (Kirchhoff's laws on the analogous
//! circuit; Beranek & Mellow 2012, ch. 3) — not by the correction formula or the network
//! walk under test.
use crate::support::source_support;

use source_support::*;
use std::path::{Path, PathBuf};
use tragus::acoustics::air::Air;
use tragus::acoustics::correction::Correction;
use tragus::acoustics::network::ChainItem;
use tragus::acoustics::source::{EarphoneModel, Source};
use tragus::acoustics::twoport::TwoPort;
use tragus::models::coupler::{load_model, CouplerModel};

fn model_path(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("reference/couplers")
        .join(name)
}

fn load(name: &str) -> CouplerModel {
    load_model(&model_path(name)).unwrap_or_else(|e| panic!("{name}: {e}"))
}

/// The model's elements as two-ports (each element's matrix is checked against scipy and
/// textbook forms in tests/acoustics_*.rs) and its end, for the direct solve. Every shipped
/// model has its microphone tap at the last node.
fn chain_and_end(m: &CouplerModel, freq_hz: f64) -> (Vec<TwoPort>, End) {
    assert!(
        matches!(m.chain.last(), Some(ChainItem::Tap(_))),
        "{}",
        m.id
    );
    let c = m.coupler();
    let chain = m
        .chain
        .iter()
        .filter_map(|item| match item {
            ChainItem::Element(e) => Some(e.two_port(freq_hz, &c.air)),
            ChainItem::Tap(_) => None,
        })
        .collect();
    let end = match c.termination.impedance(freq_hz, &c.air) {
        None => End::Rigid,
        Some(z) => End::Impedance(z),
    };
    (chain, end)
}

/// Pressure at the model's microphone per volt of drive, by the whole-circuit solve.
fn direct_mic_pressure(e: &EarphoneModel, m: &CouplerModel, freq_hz: f64) -> f64 {
    let mut chain = outlet_chain(e, freq_hz);
    let (coupler, end) = chain_and_end(m, freq_hz);
    chain.extend(coupler);
    let p = *direct_node_pressures(e, freq_hz, &chain, end)
        .last()
        .unwrap();
    20.0 * p.norm().log10()
}

fn round_trip(fixture: &str, reference: &str, f_hi_hz: f64) -> (f64, f64) {
    let e = EarphoneModel::demo(Air::new(23.0, 101_325.0));
    let fix = load(fixture);
    let refm = load(reference);
    let src = Source::VirtualEarphone(e.clone());
    let corr = Correction::new(&fix, &refm, "mic", &tap_of(&refm), &src).unwrap();
    let vv = Source::VolumeVelocity;
    let ideal = Correction::new(&fix, &refm, "mic", &tap_of(&refm), &vv).unwrap();
    let (mut worst, mut worst_ideal) = (0.0f64, 0.0f64);
    for f in log_freqs(20.0, f_hi_hz, 200) {
        let l_fix = direct_mic_pressure(&e, &fix, f);
        let l_ref = direct_mic_pressure(&e, &refm, f);
        let c = corr.factor(f).unwrap();
        worst = worst.max((l_fix + 20.0 * c.norm().log10() - l_ref).abs());
        let c = ideal.factor(f).unwrap();
        worst_ideal = worst_ideal.max((l_fix + 20.0 * c.norm().log10() - l_ref).abs());
    }
    println!("{fixture} → {reference}: worst {worst:e} dB, ideal-source {worst_ideal:.2} dB");
    (worst, worst_ideal)
}

fn tap_of(m: &CouplerModel) -> String {
    m.tap_names()[0].to_string()
}

// Issue 3: corrected fixture response within 0.1 dB of the direct reference response,
// 20 Hz–10 kHz. The models are linear, so the only error left is round-off; 1e-6 dB leaves
// room for the ill-conditioning of the direct solve (impedances from 1e2 to 1e12 Pa·s/m³).
#[test]
fn fixture_a_to_the_2cc_coupler_round_trips() {
    let (worst, ideal) = round_trip("fixture-line3-a.yaml", "iec-60318-5-2cc.yaml", 10_000.0);
    assert!(worst < 1e-6, "{worst} dB");
    // Treating this earphone as an ideal volume-velocity source errs by more than the
    // ±0.5 dB usually asked of an ear-simulator model (common practice).
    assert!(ideal > 0.5, "{ideal} dB");
}

#[test]
fn fixture_b_to_the_2cc_coupler_round_trips() {
    let (worst, _) = round_trip("fixture-line3-b.yaml", "iec-60318-5-2cc.yaml", 10_000.0);
    assert!(worst < 1e-6, "{worst} dB");
}

// The occluded-ear model holds to about 2.5 kHz (its eardrum network's stated band), so
// its round trip is checked there only.
#[test]
fn fixture_a_to_the_occluded_ear_round_trips() {
    let (worst, _) = round_trip("fixture-line3-a.yaml", "occluded-ear.yaml", 2_500.0);
    assert!(worst < 1e-6, "{worst} dB");
}
