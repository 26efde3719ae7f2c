//! Test helpers for the source and correction tests: textbook two-ports written out, and a
//! direct solve of the whole earphone + load circuit as one linear system (independent of
//! the library's Thévenin reduction).
#![allow(dead_code)]

use std::f64::consts::PI;
use tragus::acoustics::air::Air;
use tragus::acoustics::elements::Element;
use tragus::acoustics::source::EarphoneModel;
use tragus::acoustics::twoport::TwoPort;
use tragus::acoustics::C64;

/// Air at 20 °C, 101 325 Pa: ρ = 1.204 kg/m³, c = 343.2 m/s, η = 1.814e-5 Pa·s, γ = 1.4,
/// Pr = 0.71 (Kinsler et al. 2000, *Fundamentals of Acoustics*, appendix A10; written out
/// so these tests do not depend on the air model).
pub fn air() -> Air {
    Air {
        temperature_c: 20.0,
        static_pressure_pa: 101_325.0,
        density_kg_m3: 1.204,
        speed_of_sound_m_s: 343.2,
        viscosity_pa_s: 1.814e-5,
        gamma: 1.4,
        prandtl: 0.71,
    }
}

pub fn j() -> C64 {
    C64::new(0.0, 1.0)
}

pub fn omega(freq_hz: f64) -> f64 {
    2.0 * PI * freq_hz
}

pub fn rho_c2(air: &Air) -> f64 {
    air.density_kg_m3 * air.speed_of_sound_m_s.powi(2)
}

/// Lossless tube: [cos kL, jZc sin kL; j sin kL/Zc, cos kL], Zc = ρc/S (Kinsler et al.
/// 2000, §10.2 / Beranek & Mellow 2012, ch. 4, transmission-line two-port).
pub fn lossless_tube(freq_hz: f64, length_m: f64, radius_m: f64, air: &Air) -> TwoPort {
    let k = omega(freq_hz) / air.speed_of_sound_m_s;
    let zc = air.density_kg_m3 * air.speed_of_sound_m_s / (PI * radius_m * radius_m);
    let (s, c) = (k * length_m).sin_cos();
    TwoPort {
        a: C64::new(c, 0.0),
        b: j() * zc * s,
        c: j() * s / zc,
        d: C64::new(c, 0.0),
    }
}

/// Input impedance of a rigid-ended lossless tube: −j·Zc·cot(kL) (Kinsler et al. 2000,
/// §10.3).
pub fn closed_tube_impedance(freq_hz: f64, length_m: f64, radius_m: f64, air: &Air) -> C64 {
    let k = omega(freq_hz) / air.speed_of_sound_m_s;
    let zc = air.density_kg_m3 * air.speed_of_sound_m_s / (PI * radius_m * radius_m);
    -j() * zc / (k * length_m).tan()
}

/// Lumped cavity admittance jωV/(ρc²) (Beranek & Mellow 2012, ch. 3).
pub fn cavity_admittance(freq_hz: f64, volume_m3: f64, air: &Air) -> C64 {
    j() * omega(freq_hz) * volume_m3 / rho_c2(air)
}

/// What ends a direct-solve chain.
#[derive(Debug, Clone, Copy)]
pub enum End {
    /// U = 0.
    Rigid,
    /// p = Z·U.
    Impedance(C64),
}

/// Solve `a·x = b` (complex, dense) by Gaussian elimination with partial pivoting.
pub fn solve(mut a: Vec<Vec<C64>>, mut b: Vec<C64>) -> Vec<C64> {
    let n = b.len();
    for col in 0..n {
        let piv = (col..n)
            .max_by(|&x, &y| a[x][col].norm().total_cmp(&a[y][col].norm()))
            .unwrap();
        a.swap(col, piv);
        b.swap(col, piv);
        let d = a[col][col];
        assert!(d.norm() > 0.0, "singular system");
        for row in col + 1..n {
            let f = a[row][col] / d;
            if f.norm() == 0.0 {
                continue;
            }
            let pivot_row = a[col].clone();
            for (x, v) in a[row].iter_mut().zip(pivot_row).skip(col) {
                *x -= f * v;
            }
            let v = b[col];
            b[row] -= f * v;
        }
    }
    let mut x = vec![C64::new(0.0, 0.0); n];
    for row in (0..n).rev() {
        let mut s = b[row];
        for k in row + 1..n {
            s -= a[row][k] * x[k];
        }
        x[row] = s / a[row][row];
    }
    x
}

/// Node pressures (Pa per volt) of the whole circuit solved at once: the voice coil
/// (e = Ze·i + Bl·v), the diaphragm (Bl·i = Zm·v + Sd·(p_front − p_rear)), the rear node
/// (−Sd·v flows into rear cavity ∥ vent), the front node (Sd·v = Y_front·p_0 + U_0), then
/// the two-ports of `chain` node by node and the end condition. The driver equations are the
/// raw electrical and mechanical ones (Beranek & Mellow 2012, ch. 3), not the acoustic-side
/// reduction the library uses. Node 0 is the front node; node k+1 follows `chain[k]`.
pub fn direct_node_pressures(
    m: &EarphoneModel,
    freq_hz: f64,
    chain: &[TwoPort],
    end: End,
) -> Vec<C64> {
    let w = omega(freq_hz);
    let air = &m.air;
    let ze = C64::new(m.re_ohm, w * m.le_h);
    let zm = C64::new(m.rms_n_s_per_m, w * m.mms_kg - 1.0 / (w * m.cms_m_per_n));
    let vent = m.rear_vent.two_port(freq_hz, air);
    let y_rear = cavity_admittance(freq_hz, m.rear_volume_m3, air) + vent.d / vent.b;
    let y_front = cavity_admittance(freq_hz, m.front_volume_m3, air);
    let (bl, sd) = (m.bl_t_m, m.sd_m2);

    let n_nodes = chain.len() + 1;
    let n = 3 + 2 * n_nodes;
    // unknowns: 0 i, 1 v, 2 p_rear, 3 + 2k p_k, 4 + 2k U_k
    let (iu, iv, ipr) = (0, 1, 2);
    let ip = |k: usize| 3 + 2 * k;
    let iq = |k: usize| 4 + 2 * k;
    let zero = C64::new(0.0, 0.0);
    let one = C64::new(1.0, 0.0);
    let mut a = vec![vec![zero; n]; n];
    let mut b = vec![zero; n];
    let mut row = 0;
    // voice coil, 1 V drive
    a[row][iu] = ze;
    a[row][iv] = C64::new(bl, 0.0);
    b[row] = one;
    row += 1;
    // diaphragm force balance
    a[row][iu] = C64::new(bl, 0.0);
    a[row][iv] = -zm;
    a[row][ip(0)] = C64::new(-sd, 0.0);
    a[row][ipr] = C64::new(sd, 0.0);
    row += 1;
    // rear node
    a[row][iv] = C64::new(sd, 0.0);
    a[row][ipr] = y_rear;
    row += 1;
    // front node
    a[row][iv] = C64::new(sd, 0.0);
    a[row][ip(0)] = -y_front;
    a[row][iq(0)] = -one;
    row += 1;
    for (k, t) in chain.iter().enumerate() {
        a[row][ip(k)] = one;
        a[row][ip(k + 1)] = -t.a;
        a[row][iq(k + 1)] = -t.b;
        row += 1;
        a[row][iq(k)] = one;
        a[row][ip(k + 1)] = -t.c;
        a[row][iq(k + 1)] = -t.d;
        row += 1;
    }
    let last = n_nodes - 1;
    match end {
        End::Rigid => a[row][iq(last)] = one,
        End::Impedance(z) => {
            a[row][ip(last)] = one;
            a[row][iq(last)] = -z;
        }
    }
    row += 1;
    assert_eq!(row, n);
    let x = solve(a, b);
    (0..n_nodes).map(|k| x[ip(k)]).collect()
}

/// The earphone's outlet (tube then damper) built from its parameters, for the direct solve.
pub fn outlet_chain(m: &EarphoneModel, freq_hz: f64) -> Vec<TwoPort> {
    let tube = Element::Tube {
        length_m: m.outlet_length_m,
        radius_m: m.outlet_radius_m,
        loss: m.outlet_loss,
    }
    .two_port(freq_hz, &m.air);
    let damper = TwoPort::series(C64::new(
        m.damper_resistance_pa_s_m3,
        omega(freq_hz) * m.damper_inertance_kg_m4,
    ));
    vec![tube, damper]
}

/// Relative difference |a − b|/|b|.
pub fn rel(a: C64, b: C64) -> f64 {
    (a - b).norm() / b.norm()
}

/// `n` log-spaced frequencies from `f0` to `f1`, Hz.
pub fn log_freqs(f0: f64, f1: f64, n: usize) -> Vec<f64> {
    (0..n)
        .map(|i| f0 * (f1 / f0).powf(i as f64 / (n - 1) as f64))
        .collect()
}

/// Fixture: 3 mm × 1.5 mm-radius tube, then a 0.5 cm³ cavity with a leak (R 5e7 Pa·s/m³,
/// M 2000 kg/m⁴) to the outside, microphone in the cavity. Invented test geometry.
pub fn fixture_chain(f: f64) -> Vec<TwoPort> {
    let a = air();
    let leak = C64::new(5e7, omega(f) * 2000.0);
    vec![
        lossless_tube(f, 3e-3, 1.5e-3, &a),
        TwoPort::shunt(cavity_admittance(f, 0.5e-6, &a) + C64::new(1.0, 0.0) / leak),
    ]
}

/// (Z_in, p_end/p_in) of a rigid-ended chain by the two-port product.
pub fn z_and_t(chain: &[TwoPort]) -> (C64, C64) {
    let m = chain.iter().fold(TwoPort::identity(), |acc, t| acc.then(t));
    // U2 = 0 at the rigid end: p1 = a·p2, U1 = c·p2.
    (m.a / m.c, C64::new(1.0, 0.0) / m.a)
}
