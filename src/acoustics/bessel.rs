//! Bessel and Struve functions the acoustic elements need: the ratio J1(z)/(z·J0(z)) for
//! complex z (visco-thermal tube losses) and J1(x), H1(x) for real x (piston radiation).
//!
//! Used by [`super::elements`] (Zwikker–Kosten F(x) = 2J1(x)/(x·J0(x))) and
//! [`super::termination`] (baffled piston). Only ratios are computed for complex arguments:
//! J0 and J1 grow like e^{|Im z|} and overflow for |Im z| > ~700, their ratio never does.
//!
//! Accuracy (tested against `scipy.special.jve` in `tests/acoustics_bessel.rs` with data from
//! `tests/reference/make_acoustics.py`): better than 1e-12 relative on the line arg z = −45°
//! where the tube model evaluates it, for |z| from 1e-3 to 1e3, and away from the zeros of J0.
use super::C64;

/// |z| at and above which [`j1_over_z_j0`] uses the Hankel asymptotic expansion instead of
/// the continued fraction. At |z| = 25 the expansion's smallest term is about e^{−2|z|}
/// ≈ 2e-22 (Abramowitz & Stegun 9.2.5–9.2.10: the error is below the first omitted term for
/// |arg z| ≤ π/2), far below double precision; below 25 the continued fraction converges in
/// fewer than about 60 steps.
const HANKEL_SWITCH: f64 = 25.0;

/// J1(z)/(z·J0(z)) for complex z; 1/2 at z = 0 (so F(z) = 2·this is 1 there).
///
/// |z| < 25: Gauss's continued fraction J_ν/J_{ν−1} = z/(2ν − z²/(2(ν+1) − …)) (from the
/// recurrence J_{ν−1} + J_{ν+1} = (2ν/z)J_ν, A&S 9.1.27 and 9.1.73), evaluated by the modified
/// Lentz method (Numerical Recipes 3rd ed. §5.2) to 1e-16. |z| ≥ 25: the Hankel asymptotic
/// expansion (A&S 9.2.5, 9.2.9, 9.2.10) with the dominant exponential factored out of both
/// J0 and J1, so nothing overflows. Odd and conjugate symmetry (J1/J0 is odd, real on the
/// real axis) map z into Re z ≥ 0, Im z ≤ 0 first.
pub fn j1_over_z_j0(z: C64) -> C64 {
    if z.norm() < HANKEL_SWITCH {
        j1_over_z_j0_cf(z)
    } else {
        // J1/(z J0) is even in z: J1/J0 is odd, z is odd.
        let w = if z.re < 0.0 { -z } else { z };
        if w.im > 0.0 {
            j1_over_j0_hankel(w.conj()).conj() / w
        } else {
            j1_over_j0_hankel(w) / w
        }
    }
}

/// J1(z)/J0(z) for complex z (see [`j1_over_z_j0`] for the method and accuracy).
pub fn j1_over_j0(z: C64) -> C64 {
    z * j1_over_z_j0(z)
}

fn j1_over_z_j0_cf(z: C64) -> C64 {
    // G = 1/T, T = 2 − w/(4 − w/(6 − …)), w = z²; T by the modified Lentz method (b0 = 2).
    // TINY replaces an exact zero denominator; its square must not underflow (complex
    // division divides by |·|²).
    const TINY: f64 = 1e-150;
    let w = z * z;
    let tiny = C64::new(TINY, 0.0);
    let mut f = C64::new(2.0, 0.0);
    let mut c = f;
    let mut d = C64::new(0.0, 0.0);
    for k in 2..=10_000u32 {
        let a = -w;
        let b = C64::new(2.0 * f64::from(k), 0.0);
        d = b + a * d;
        if d.norm_sqr() == 0.0 {
            d = tiny;
        }
        c = b + a / c;
        if c.norm_sqr() == 0.0 {
            c = tiny;
        }
        d = d.inv();
        let delta = c * d;
        f *= delta;
        if (delta - 1.0).norm() < 1e-16 {
            break;
        }
    }
    f.inv()
}

/// Hankel asymptotic P_ν(z), Q_ν(z) (A&S 9.2.9, 9.2.10) for ν = 0, 1, summed until the terms
/// fall below 1e-17 or start to grow (the series is asymptotic).
fn hankel_pq(nu: u32, z: C64) -> (C64, C64) {
    let mu = 4.0 * f64::from(nu * nu);
    let mut p = C64::new(1.0, 0.0);
    let mut q = C64::new(0.0, 0.0);
    // term_k = a_k(ν)/z^k, a_k = Π_{i=1..k} (μ − (2i−1)²) / (k! 8^k); sign (−1)^{k/2} folded in.
    let mut term = C64::new(1.0, 0.0);
    let inv_z = z.inv();
    let mut last = f64::INFINITY;
    for k in 1..60u32 {
        let odd = f64::from(2 * k - 1);
        term = term * (mu - odd * odd) / (f64::from(k) * 8.0) * inv_z;
        let size = term.norm();
        if size > last {
            break;
        }
        last = size;
        // k odd → Q gets (−1)^{(k−1)/2} term; k even → P gets (−1)^{k/2} term.
        let sign = if (k / 2) % 2 == 0 { 1.0 } else { -1.0 };
        if k % 2 == 1 {
            q += term * sign;
        } else {
            p += term * sign;
        }
        if size < 1e-17 {
            break;
        }
    }
    (p, q)
}

/// J1(z)/J0(z) by the Hankel expansion for Re z ≥ 0, Im z ≤ 0, |z| large.
fn j1_over_j0_hankel(z: C64) -> C64 {
    // J_ν = √(2/(πz))·[P cos χ − Q sin χ], χ = z − νπ/2 − π/4. With Im z ≤ 0, e^{jχ} dominates:
    // P cos χ − Q sin χ = (e^{jχ}/2)·[(P + jQ) + e^{−2jχ}(P − jQ)]; χ1 = χ0 − π/2 gives
    // e^{jχ1} = −j·e^{jχ0} and e^{−2jχ1} = −e^{−2jχ0}.
    let j = C64::new(0.0, 1.0);
    let chi0 = z - std::f64::consts::FRAC_PI_4;
    let e = (-2.0 * j * chi0).exp(); // |e| = e^{2 Im z} ≤ 1
    let (p0, q0) = hankel_pq(0, z);
    let (p1, q1) = hankel_pq(1, z);
    let num = (p1 + j * q1) - e * (p1 - j * q1);
    let den = (p0 + j * q0) + e * (p0 - j * q0);
    -j * num / den
}

/// |x| at and above which the real J1 and H1 use asymptotic forms instead of power series.
/// At 20 the power series lose about lg(I1(20)) ≈ 7.6 digits to cancellation (absolute error
/// ≲ 4e-9) and the asymptotic Struve series' smallest term is about (9!)²/10^20 ≈ 1.3e-9.
const REAL_SWITCH: f64 = 20.0;

/// Bessel J1(x) for real x (A&S 9.1.10 power series below |x| = 20, Hankel expansion
/// A&S 9.2.1 above); absolute error ≲ 5e-9, far better for |x| ≲ 5.
pub fn bessel_j1(x: f64) -> f64 {
    let ax = x.abs();
    let v = if ax < REAL_SWITCH {
        let h = ax / 2.0;
        let w = -h * h;
        let mut term = h;
        let mut sum = term;
        for k in 1..200 {
            let kf = f64::from(k);
            term *= w / (kf * (kf + 1.0));
            sum += term;
            if term.abs() < 1e-17 * sum.abs().max(1e-300) {
                break;
            }
        }
        sum
    } else {
        let (j1, _) = j1_y1_asymptotic(ax);
        j1
    };
    if x < 0.0 {
        -v
    } else {
        v
    }
}

fn j1_y1_asymptotic(x: f64) -> (f64, f64) {
    let (p, q) = hankel_pq(1, C64::new(x, 0.0));
    let chi = x - 0.75 * std::f64::consts::PI;
    let amp = (2.0 / (std::f64::consts::PI * x)).sqrt();
    (
        amp * (p.re * chi.cos() - q.re * chi.sin()),
        amp * (p.re * chi.sin() + q.re * chi.cos()),
    )
}

/// Struve H1(x) for real x ≥ 0: power series A&S 12.1.3 below x = 20, above it
/// H1 = Y1 + (1/π)·Σ_k Γ(k+½)/Γ(3/2−k)·(x/2)^{−2k} (A&S 12.1.29, 12.1.31), truncated at its
/// smallest term. Absolute error ≲ 5e-9. Negative x: H1 is even.
pub fn struve_h1(x: f64) -> f64 {
    let ax = x.abs();
    if ax < REAL_SWITCH {
        // H1(x) = Σ (−1)^k (x/2)^{2k+2} / (Γ(k+3/2)·Γ(k+5/2)); Γ(3/2)Γ(5/2) = 3π/8.
        let h = ax / 2.0;
        let w = -h * h;
        let mut term = h * h / (3.0 * std::f64::consts::PI / 8.0);
        let mut sum = term;
        for k in 1..200 {
            let kf = f64::from(k);
            term *= w / ((kf + 0.5) * (kf + 1.5));
            sum += term;
            if term.abs() < 1e-17 * sum.abs().max(1e-300) {
                break;
            }
        }
        sum
    } else {
        let (_, y1) = j1_y1_asymptotic(ax);
        // t_k = Γ(k+½)/Γ(3/2−k)·(2/x)^{2k}; t_0 = 2; t_{k+1}/t_k = (k+½)(½−k)·(2/x)².
        let r = (2.0 / ax) * (2.0 / ax);
        let mut term = 2.0;
        let mut sum = term;
        let mut last = f64::INFINITY;
        for k in 0..60 {
            let kf = f64::from(k);
            let next = term * (kf + 0.5) * (0.5 - kf) * r;
            if next.abs() > last || next == 0.0 {
                break;
            }
            last = next.abs();
            term = next;
            sum += term;
        }
        y1 + sum / std::f64::consts::PI
    }
}
