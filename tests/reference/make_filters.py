#!/usr/bin/env python3
"""Outside reference data for tragus: biquad coefficients, their responses, band frequencies.

Independent oracle for the Rust biquads (src/rig/simulated/biquad.rs) and the IEC 61260-1
band formula (src/dsp/bands.rs): nothing here imports or runs project code.

  python3 tests/reference/make_filters.py          # (re)write the CSVs beside this script
  python3 tests/reference/make_filters.py --check  # recompute, compare, exit 1 on mismatch

Made with Python 3.11.7, numpy 2.4.6, scipy 1.17.1 (pip install numpy scipy).

Files written:
  filters.csv    name,b0,b1,b2,a1,a2 (a0 = 1), floats as repr (shortest round trip)
  responses.csv  name,freq_hz,mag_db,phase_deg from scipy.signal.freqz(b, a, worN=freqs, fs=48000)
                 at the IEC 61260-1:2014 base-10 1/24-octave exact midband frequencies
  bands.csv      b,x,midband_hz,lower_hz,upper_hz for 1/3- and 1/24-octave bands

Filters:
  peaking_6db_2khz_q1p41   RBJ audio-EQ cookbook peaking EQ (R. Bristow-Johnson, "Cookbook
                           formulae for audio EQ biquad filter coefficients"), gain +6 dB,
                           f0 = 2 kHz, Q = 1.41, fs = 48 kHz, coefficients divided by a0
  butter2_hp_100hz         scipy.signal.butter(2, 100, 'highpass', fs=48000): 2nd-order
                           Butterworth high-pass by the bilinear transform with pre-warping

Bands (IEC 61260-1:2014, 5.2 and 5.4, base 10): G = 10^(3/10), f_r = 1000 Hz;
odd b: f_m = f_r * G^(x/b); even b: f_m = f_r * G^((2x+1)/(2b)); band edges
f_m * G^(-1/(2b)) and f_m * G^(+1/(2b)). Kept: every band that overlaps 20 Hz .. 20 kHz
(from the band holding 20 Hz to the band holding 20 kHz; for b = 3 that is the usual 31
bands, nominal 20 Hz .. 20 kHz).
"""

import csv
import math
import sys
from pathlib import Path

import numpy as np
import scipy
import scipy.signal

HERE = Path(__file__).resolve().parent
FS_HZ = 48000.0
G = 10.0 ** (3.0 / 10.0)  # IEC 61260-1:2014, 5.2 (base-10 octave ratio)
F_R_HZ = 1000.0           # IEC 61260-1:2014, 5.3 (reference frequency)
BAND_LOW_HZ = 20.0
BAND_HIGH_HZ = 20000.0
# Relative tolerance of --check (the brief's 1e-12); abs_tol guards values that are ~0
# (phase at the peaking filter's centre, dB far from its centre), where relative means nothing.
REL_TOL = 1e-12
ABS_TOL = 1e-12


def rbj_peaking(gain_db, f0_hz, q, fs_hz):
    """RBJ cookbook peakingEQ: A = 10^(gain/40), w0 = 2 pi f0/fs, alpha = sin(w0)/(2Q)."""
    a = 10.0 ** (gain_db / 40.0)
    w0 = 2.0 * math.pi * f0_hz / fs_hz
    alpha = math.sin(w0) / (2.0 * q)
    cw = math.cos(w0)
    b0, b1, b2 = 1.0 + alpha * a, -2.0 * cw, 1.0 - alpha * a
    a0, a1, a2 = 1.0 + alpha / a, -2.0 * cw, 1.0 - alpha / a
    return [b0 / a0, b1 / a0, b2 / a0], [1.0, a1 / a0, a2 / a0]


def filters():
    out = []
    b, a = rbj_peaking(6.0, 2000.0, 1.41, FS_HZ)
    out.append(("peaking_6db_2khz_q1p41", b, a))
    b, a = scipy.signal.butter(2, 100.0, "highpass", fs=FS_HZ)
    b = [float(v / a[0]) for v in b]
    a = [float(v / a[0]) for v in a]
    out.append(("butter2_hp_100hz", b, a))
    return out


def bands(b):
    """(x, f_m, f_lo, f_hi) of every 1/b-octave band overlapping [20 Hz, 20 kHz]."""
    rows = []
    for x in range(-400, 400):
        if b % 2 == 1:
            fm = F_R_HZ * G ** (x / b)
        else:
            fm = F_R_HZ * G ** ((2 * x + 1) / (2 * b))
        lo = fm * G ** (-1.0 / (2 * b))
        hi = fm * G ** (1.0 / (2 * b))
        if hi > BAND_LOW_HZ and lo < BAND_HIGH_HZ:
            rows.append((x, fm, lo, hi))
    return rows


def tables():
    """The three tables as lists of rows (header first), every number a Python float/int."""
    filt = filters()
    t_filters = [["name", "b0", "b1", "b2", "a1", "a2"]]
    for name, b, a in filt:
        t_filters.append([name, b[0], b[1], b[2], a[1], a[2]])

    # The analysis grid: 1/24-octave midbands that lie inside the sweep band itself.
    freqs = np.array([fm for _, fm, _, _ in bands(24) if BAND_LOW_HZ <= fm <= BAND_HIGH_HZ])
    t_resp = [["name", "freq_hz", "mag_db", "phase_deg"]]
    for name, b, a in filt:
        w, h = scipy.signal.freqz(b, a, worN=freqs, fs=FS_HZ)
        for f, hv in zip(w, h):
            t_resp.append([name, float(f), float(20.0 * np.log10(np.abs(hv))),
                           float(np.degrees(np.angle(hv)))])

    t_bands = [["b", "x", "midband_hz", "lower_hz", "upper_hz"]]
    for b in (3, 24):
        for x, fm, lo, hi in bands(b):
            t_bands.append([b, x, fm, lo, hi])
    return {"filters.csv": t_filters, "responses.csv": t_resp, "bands.csv": t_bands}


def fmt(v):
    return repr(v) if isinstance(v, float) else str(v)


def write_all(tabs):
    for fname, rows in tabs.items():
        with open(HERE / fname, "w", newline="") as f:
            w = csv.writer(f, lineterminator="\n")
            for r in rows:
                w.writerow([fmt(v) for v in r])
        print(f"wrote {fname}: {len(rows) - 1} rows")


def same(expected, found):
    """Cells equal: text exactly, numbers within REL_TOL (ABS_TOL near zero)."""
    if isinstance(expected, str):
        return expected == found
    try:
        v = float(found)
    except ValueError:
        return False
    return math.isclose(float(expected), v, rel_tol=REL_TOL, abs_tol=ABS_TOL)


def check_all(tabs):
    bad = 0
    for fname, rows in tabs.items():
        path = HERE / fname
        try:
            with open(path, newline="") as f:
                committed = list(csv.reader(f))
        except OSError as e:
            print(f"{path}: cannot read: {e}")
            bad += 1
            continue
        if len(committed) != len(rows):
            print(f"{path}: expected {len(rows)} lines, found {len(committed)}")
            bad += 1
            continue
        for i, (want, got) in enumerate(zip(rows, committed), start=1):
            if len(want) != len(got) or not all(same(w, g) for w, g in zip(want, got)):
                print(f"{path}:{i}: expected {[fmt(v) for v in want]}, found {got}")
                bad += 1
    return bad


def main(argv):
    print(f"numpy {np.__version__}, scipy {scipy.__version__}")
    tabs = tables()
    if "--check" in argv[1:]:
        bad = check_all(tabs)
        if bad:
            print(f"{bad} mismatches")
            return 1
        print("all reference CSVs match")
        return 0
    write_all(tabs)
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
