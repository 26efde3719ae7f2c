#!/usr/bin/env python3
"""Independent check of `tragus limits derive`'s statistics with numpy.

Reads the JSON written by tests/it/limits_derive.rs: one object per derived check, either
scalar (`values`, `lsl`, `usl`, and tragus' `mean`, `sd`, `cp`, `cpk`) or a response check
(`freqs_hz`, the golden `curves`, the written `upper`/`lower` lines as [[hz, db], ...], and
tragus' per-frequency `mean` and `sd`, smallest `cp`/`cpk` and where they are).

Recomputes with numpy: mean and sample standard deviation (ddof=1); Cp = (USL - LSL)/(6 sigma)
and Cpk = min(USL - mu, mu - LSL)/(3 sigma), one-sided Cpu/Cpl with one limit (the usual SPC
definitions, NIST/SEMATECH e-Handbook of Statistical Methods, section 6.1.6); a limit line
read at a frequency by linear interpolation in log10 frequency (numpy.interp on log10 f).
Prints "N checks agree" and exits 0, or lists every disagreement and exits 1.
"""

import json
import sys

import numpy as np

REL = 1e-9  # relative tolerance: both sides compute in float64 from the same inputs


def close(a, b, what, problems, rel=REL):
    if a is None or b is None:
        if a is not None or b is not None:
            problems.append(f"{what}: tragus {a}, numpy {b}")
        return
    if not np.isclose(a, b, rtol=rel, atol=1e-12):
        problems.append(f"{what}: tragus {a!r}, numpy {b!r}")


def capability(mu, sd, lsl, usl):
    if not sd > 0:
        return None, None
    cp = (usl - lsl) / (6 * sd) if lsl is not None and usl is not None else None
    sides = []
    if usl is not None:
        sides.append((usl - mu) / (3 * sd))
    if lsl is not None:
        sides.append((mu - lsl) / (3 * sd))
    return cp, (min(sides) if sides else None)


def line_at(points, f):
    """The line's level at f (None outside its span, widened by 1e-9 as tragus reads it)."""
    if points is None:
        return None
    p = np.asarray(points, dtype=float)
    if f < p[0, 0] * (1 - 1e-9) or f > p[-1, 0] * (1 + 1e-9):
        return None
    return float(np.interp(np.log10(f), np.log10(p[:, 0]), p[:, 1]))


def check_scalar(c, problems):
    v = np.asarray(c["values"], dtype=float)
    mu, sd = float(v.mean()), float(v.std(ddof=1))
    close(c["mean"], mu, f"{c['id']} mean", problems)
    close(c["sd"], sd, f"{c['id']} sd", problems)
    cp, cpk = capability(mu, sd, c["lsl"], c["usl"])
    close(c["cp"], cp, f"{c['id']} Cp", problems)
    close(c["cpk"], cpk, f"{c['id']} Cpk", problems)


def check_curve(c, problems):
    f = np.asarray(c["freqs_hz"], dtype=float)
    x = np.asarray(c["curves"], dtype=float)
    mu, sd = x.mean(axis=0), x.std(axis=0, ddof=1)
    if not np.allclose(c["mean"], mu, rtol=REL, atol=1e-12):
        problems.append(f"{c['id']} mean per frequency differs")
    if not np.allclose(c["sd"], sd, rtol=REL, atol=1e-12):
        problems.append(f"{c['id']} sd per frequency differs")
    best = {"cp": (None, None), "cpk": (None, None)}
    for i, fi in enumerate(f):
        u, l = line_at(c["upper"], fi), line_at(c["lower"], fi)
        if u is None and l is None:
            continue
        cp, cpk = capability(mu[i], sd[i], l, u)
        for name, value in (("cp", cp), ("cpk", cpk)):
            if value is not None and (best[name][0] is None or value < best[name][0]):
                best[name] = (value, fi)
    for name in ("cp", "cpk"):
        value, at = best[name]
        # Interpolation in another library's order of operations: a few ulp of dB.
        close(c[name], value, f"{c['id']} smallest {name}", problems, rel=1e-7)
        close(c[f"{name}_at_hz"], at, f"{c['id']} {name} frequency", problems)


def main():
    checks = json.load(open(sys.argv[1]))
    problems = []
    for c in checks:
        (check_curve if "curves" in c else check_scalar)(c, problems)
    if problems:
        print("\n".join(problems))
        sys.exit(1)
    print(f"{len(checks)} checks agree")


if __name__ == "__main__":
    main()
