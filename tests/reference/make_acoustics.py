#!/usr/bin/env python3
"""Outside reference data for the acoustic elements (tests/acoustics_*.rs).

Computes, from the published formulas and scipy's Bessel/Struve functions (AMOS / Cephes,
not the Rust code):

* acoustics_bessel.csv   z_re,z_im,g_re,g_im: G(z) = J1(z)/(z*J0(z)) from scipy.special.jve
                         (exponentially scaled; the scaling cancels in the ratio), on the
                         line arg z = -45 deg (where the tube model uses it, |z| 1e-3..1e3)
                         and at points off that line (away from zeros of J0).
* acoustics_zk.csv       radius_m,freq_hz,gamma_re,gamma_im,zc_re,zc_im: exact
                         Zwikker-Kosten tube (Keefe 1984 air, 20 degC, 101325 Pa),
                         F(x) = 2 J1(x)/(x J0(x)), radii 0.2..5 mm, 20 Hz..20 kHz.
* acoustics_slit.csv     gap_m,freq_hz,rho_re,rho_im,k_re,k_im: Stinson (1991) slit,
                         rho_eff/rho and K_eff/(rho c^2), same air.
* acoustics_piston.csv   ka,r_norm,x_norm: baffled piston Z/(rho c/S) =
                         1 - J1(2ka)/ka + j H1(2ka)/ka with scipy.special.j1, struve.

Floats are written with repr (shortest text that reads back to the same double).

    python3 tests/reference/make_acoustics.py          # write the CSVs beside the script
    python3 tests/reference/make_acoustics.py --check  # recompute, compare; exit 1 on mismatch

Pinned: numpy==2.4.6 scipy==1.17.1 (tests/reference/requirements.txt).
"""
import math
import os
import sys

import numpy as np
from scipy import special

HERE = os.path.dirname(os.path.abspath(__file__))


def keefe_air(t_c=20.0, p_pa=101325.0):
    """Keefe (1984) JASA 75(1); density scaled by p/101325 (ideal gas)."""
    dt = t_c - 26.85
    rho = 1.1769 * (1 - 0.00335 * dt) * p_pa / 101325.0
    eta = 1.846e-5 * (1 + 0.0025 * dt)
    c = 347.23 * (1 + 0.00166 * dt)
    gamma = 1.4017 * (1 - 0.00002 * dt)
    sqrt_pr = 0.8410 * (1 - 0.0002 * dt)
    return rho, eta, c, gamma, sqrt_pr


def g_ratio(z):
    z = complex(z)
    if z == 0:
        return 0.5 + 0j
    return complex(special.jve(1, z) / (z * special.jve(0, z)))


def zk(radius, f, air):
    rho, eta, c, gamma, sqrt_pr = air
    w = 2 * math.pi * f
    s = math.pi * radius**2
    rv = radius * math.sqrt(w * rho / eta)
    xv = (1 - 1j) / math.sqrt(2) * rv
    xt = sqrt_pr * xv
    fv = 2 * g_ratio(xv)
    ft = 2 * g_ratio(xt)
    z = (1j * w * rho / s) / (1 - fv)
    y = (1j * w * s / (rho * c * c)) * (1 + (gamma - 1) * ft)
    return complex(np.sqrt(z * y)), complex(np.sqrt(z / y)), fv


def slit(gap, f, air):
    rho, eta, c, gamma, sqrt_pr = air
    w = 2 * math.pi * f
    h = gap / 2
    s = np.sqrt(1j * w * rho / eta)
    sh = s * h
    st = sqrt_pr * sh
    rho_n = 1 / (1 - np.tanh(sh) / sh)
    k_n = 1 / (1 + (gamma - 1) * np.tanh(st) / st)
    return complex(rho_n), complex(k_n)


def piston(ka):
    x = 2 * ka
    return 1 - special.j1(x) / ka, special.struve(1, x) / ka


def freqs():
    return [float(f) for f in np.geomspace(20.0, 20000.0, 16)]


def tables():
    air = keefe_air()
    out = {}
    rows = ["z_re,z_im,g_re,g_im"]
    pts = []
    for m in np.geomspace(1e-3, 1e3, 61):
        pts.append(complex(m * (1 - 1j) / math.sqrt(2)))
    for m in [0.3, 2.0, 7.5, 18.0, 24.9, 25.1, 40.0, 150.0]:
        for ang in [-80.0, -30.0, 10.0, 60.0, 135.0, -170.0]:
            pts.append(complex(m * np.exp(1j * math.radians(ang))))
    for z in pts:
        g = g_ratio(z)
        rows.append(f"{z.real!r},{z.imag!r},{g.real!r},{g.imag!r}")
    out["acoustics_bessel.csv"] = rows

    rows = ["radius_m,freq_hz,gamma_re,gamma_im,zc_re,zc_im"]
    for r_mm in [0.2, 0.5, 1.0, 2.0, 3.75, 5.0]:
        for f in freqs():
            g, zc, _ = zk(r_mm * 1e-3, f, air)
            r = r_mm * 1e-3
            rows.append(f"{r!r},{f!r},{g.real!r},{g.imag!r},{zc.real!r},{zc.imag!r}")
    out["acoustics_zk.csv"] = rows

    rows = ["gap_m,freq_hz,rho_re,rho_im,k_re,k_im"]
    for gap_mm in [0.02, 0.05, 0.1, 0.2, 0.5, 1.0]:
        for f in freqs():
            rn, kn = slit(gap_mm * 1e-3, f, air)
            g = gap_mm * 1e-3
            rows.append(f"{g!r},{f!r},{rn.real!r},{rn.imag!r},{kn.real!r},{kn.imag!r}")
    out["acoustics_slit.csv"] = rows

    rows = ["ka,r_norm,x_norm"]
    for ka in np.geomspace(1e-3, 15.0, 40):
        r, x = piston(float(ka))
        rows.append(f"{float(ka)!r},{float(r)!r},{float(x)!r}")
    out["acoustics_piston.csv"] = rows
    return out


def sanity():
    """Published worked examples (docs/reference-values.md sources) the script must reproduce."""
    air = keefe_air()
    g, zc, fv = zk(3.75e-3, 1000.0, air)
    z0 = air[0] * air[2] / (math.pi * 3.75e-3**2)
    ok = abs(g - (0.253096 + 18.552958j)) < 1e-6
    ok &= abs(zc / z0 - (1.0048271 - 0.0050243j)) < 1e-7
    ok &= abs(fv - (0.0184702072 - 0.0182988455j)) < 1e-10
    rn, kn = slit(0.2e-3, 1000.0, air)
    ok &= abs(rn - (1.19576 - 0.74255j)) < 1e-5
    ok &= abs(kn - (0.81172 + 0.11136j)) < 1e-5
    return ok


def main():
    check = "--check" in sys.argv[1:]
    if not sanity():
        print("worked examples not reproduced", file=sys.stderr)
        return 1
    bad = 0
    for name, rows in tables().items():
        path = os.path.join(HERE, name)
        text = "\n".join(rows) + "\n"
        if check:
            with open(path) as fh:
                old = fh.read()
            if old != text:
                print(f"{name}: differs from a fresh computation", file=sys.stderr)
                bad += 1
        else:
            with open(path, "w") as fh:
                fh.write(text)
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main())
