#!/usr/bin/env python3
"""Independent implementation of the canonical form of a tragus plan.

The form is the contract documented in src/plan/hash.rs: JSON with sorted keys, no
whitespace, whole-number fields as integers, every other number as a float, -0.0 as 0.0,
defaults applied, channel numbers 0-based, limit lines resolved to their points. This script
implements it from that description alone (PyYAML to read the plan, json and hashlib for
the form and the digest), so that tests/plan_hash.rs checks the Rust implementation against
an outside one.

A plan's `correction:` sections name coupler model files and an earphone (or Thevenin
table) file. This script RECOMPUTES the coupler models' canonical hash (`tragus-coupler/1`,
documented in src/acoustics/model.rs) and the earphone's canonical form
(`tragus-earphone/1`, src/acoustics/earphone_file.rs) from those documents and the files;
it does not take them from tragus. Numbers are written as serde_json 1 (ryu) writes an f64:
decimal notation for 1e-5 <= |x| < 1e16, otherwise `5e-7` / `1.5e+16` (no zero
padding); Python's json module differs below 1e-4, so floats are formatted here.

Usage: python3 tests/reference/plan_canonical.py tests/data/plans/hash/reference.yaml \
           > tests/data/plans/hash/expected.txt
       python3 tests/reference/plan_canonical.py tests/data/plans/hash/corrected.yaml \
           > tests/data/plans/hash/expected-corrected.txt
Prints two lines: the canonical JSON and its SHA-256 (lowercase hex).
Made with Python 3.11.7, PyYAML 6.0.3.
"""
import decimal
import hashlib
import json
import pathlib
import sys

import yaml


class Real(float):
    """A number the canonical form writes as a real (never as an integer)."""


def fmt_real(x):
    """serde_json 1 / ryu text of a finite f64 (shortest round-trip digits)."""
    x = float(x)
    if x == 0:
        return "0.0"
    sign = "-" if x < 0 else ""
    d = decimal.Decimal(repr(abs(x))).normalize()
    _, digits, exp = d.as_tuple()
    digits = "".join(map(str, digits))
    kk = len(digits) + exp  # position of the decimal point
    if 0 <= exp and kk <= 16:
        text = digits + "0" * exp + ".0"
    elif 0 < kk <= 16:
        text = digits[:kk] + "." + digits[kk:]
    elif -5 < kk <= 0:
        text = "0." + "0" * (-kk) + digits
    else:
        e = kk - 1
        mantissa = digits if len(digits) == 1 else f"{digits[0]}.{digits[1:]}"
        text = f"{mantissa}e{'+' if e > 0 else ''}{e}"
    return sign + text


def dump(v):
    """Canonical JSON: sorted keys, no whitespace, reals as serde_json writes them."""
    if v is None:
        return "null"
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, float):
        return fmt_real(v)
    if isinstance(v, int):
        return str(v)
    if isinstance(v, str):
        return json.dumps(v, ensure_ascii=False)
    if isinstance(v, list):
        return "[" + ",".join(dump(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{" + ",".join(json.dumps(k, ensure_ascii=False) + ":" + dump(v[k])
                              for k in sorted(v)) + "}"
    raise TypeError(type(v))


# --- coupler models (src/acoustics/model.rs, "The canonical form of the hash") ----------

def mm(x):
    return real(x) * 1e-3  # as the Rust parser: mm × 1e-3


def element(item, last_radius, model_dir=None):
    """(canonical item, radius of the last tube so far) of one chain item."""
    (kind, v), = item.items()
    if kind == "tap":
        return {"tap": v}, last_radius
    if kind == "tube":
        r = mm(v["radius_mm"])
        return {"tube": {"length_m": mm(v["length_mm"]), "loss": v.get("loss", "zwikker_kosten"),
                         "radius_m": r}}, r
    if kind == "slit":
        return {"slit": {"gap_m": mm(v["gap_mm"]), "length_m": mm(v["length_mm"]),
                         "width_m": mm(v["width_mm"])}}, last_radius
    if kind == "cavity":
        return {"cavity": {"volume_m3": real(v["volume_mm3"]) * 1e-9}}, last_radius
    if kind == "series":
        c = v.get("compliance_m3_pa")
        return {"series": {"compliance_m3_pa": None if c is None else real(c),
                           "inertance_kg_m4": real(v.get("inertance_kg_m4", 0)),
                           "resistance_pa_s_m3": real(v.get("resistance_pa_s_m3", 0))}}, last_radius
    if kind == "branch":
        items, r = chain(v["elements"], model_dir)
        return {"branch": {"elements": items,
                           "termination": termination(v["termination"], r, model_dir)}}, last_radius
    raise ValueError(f"unknown element {kind}")


def chain(items, model_dir):
    out, r = [], None
    for item in items:
        c, r = element(item, r, model_dir)
        out.append(c)
    return out, r


def read_impedance_csv(path):
    points, first = [], True
    for line in path.read_text(encoding="utf-8-sig").splitlines():
        line = line.split("#", 1)[0].strip()
        if not line:
            continue
        fields = [f.strip() for f in line.split(",")]
        if first:
            first = False
            try:
                [float(f) for f in fields]
            except ValueError:
                continue  # header line
        points.append([real(f) for f in fields])
    return points


def termination(t, last_radius, model_dir):
    if isinstance(t, str):
        if t == "rigid":
            return "rigid"
        return {t: {"radius_m": Real(last_radius)}}  # bare open end: last tube's radius
    (k, v), = t.items()
    if k == "eardrum":
        return "eardrum_kringlebotn_1988"
    if k == "impedance_csv":
        return {"table": read_impedance_csv(model_dir / v)}
    return {k: {"radius_m": mm(v["radius_mm"])}}


def coupler_sha256(path):
    m = yaml.safe_load(path.read_text(encoding="utf-8"))
    items, r = chain(m["elements"], path.parent)
    term_c = termination(m["termination"], r, path.parent)
    doc = {
        "canonical": "tragus-coupler/1",
        "chain": items,
        "description": m.get("description", ""),
        "id": m["coupler"],
        "static_pressure_pa": real(m.get("static_pressure_pa", 101325)),
        "temperature_c": real(m.get("temperature_c", 20)),
        "termination": term_c,
    }
    return m["coupler"], hashlib.sha256(dump(doc).encode("utf-8")).hexdigest()


# --- earphone files (src/acoustics/earphone_file.rs) -------------------------------------

def earphone(path):
    e = yaml.safe_load(path.read_text(encoding="utf-8"))
    vent, _ = element(e["rear_vent"], None)
    out = e["outlet"]
    return {
        "bl_t_m": real(e["bl_t_m"]),
        "canonical": "tragus-earphone/1",
        "cms_m_per_n": real(e["cms_mm_per_n"]) / 1e3,
        "damper_inertance_kg_m4": real(e["damper"]["inertance_kg_m4"]),
        "damper_resistance_pa_s_m3": real(e["damper"]["resistance_pa_s_m3"]),
        "front_volume_m3": real(e["front_volume_mm3"]) / 1e9,
        "le_h": real(e["le_uh"]) / 1e6,
        "mms_kg": real(e["mms_mg"]) / 1e6,
        "outlet_length_m": real(out["length_mm"]) / 1e3,
        "outlet_loss": out.get("loss", "zwikker_kosten"),
        "outlet_radius_m": real(out["radius_mm"]) / 1e3,
        "re_ohm": real(e["re_ohm"]),
        "rear_vent": vent,
        "rear_volume_m3": real(e["rear_volume_mm3"]) / 1e9,
        "rms_n_s_per_m": real(e["rms_n_s_per_m"]),
        "sd_m2": real(e["sd_mm2"]) / 1e6,
        "static_pressure_pa": real(e.get("static_pressure_pa", 101325)),
        "temperature_c": real(e.get("temperature_c", 20)),
    }


def read_thevenin_csv(path):
    rows = []
    for line in path.read_text(encoding="utf-8").splitlines():
        line = line.strip()
        if not line or line.startswith("#") or line.startswith("hz"):
            continue
        rows.append([real(f) for f in line.split(",")])
    return rows


def correction(c, plan_dir):
    refs = {}
    for side in ("fixture", "reference"):
        cid, sha = coupler_sha256(plan_dir / c[side])
        refs[side] = {"id": cid, "sha256": sha, "tap": c[side + "_tap"]}
    src = c["source"]
    if src == "volume_velocity":
        source = {"kind": "volume_velocity"}
    elif "virtual_earphone" in src:
        source = {"earphone": earphone(plan_dir / src["virtual_earphone"]),
                  "kind": "virtual_earphone"}
    else:
        source = {"kind": "thevenin_csv",
                  "points": read_thevenin_csv(plan_dir / src["thevenin_csv"])}
    return {"fixture": refs["fixture"], "reference": refs["reference"], "source": source}


def real(x):
    x = float(x)
    return Real(0.0 if x == 0 else x)  # -0.0 is written 0.0


def read_csv(path):
    points = []
    first = True
    for line in path.read_text(encoding="utf-8-sig").splitlines():
        line = line.split("#", 1)[0].strip()
        if not line:
            continue
        hz, db = [f.strip() for f in line.split(",")]
        if first:
            first = False
            try:
                float(hz)
            except ValueError:
                continue  # header line
        points.append([real(hz), real(db)])
    return points


def limit(value, plan_dir):
    if value is None:
        return None
    if isinstance(value, str):
        return {"origin": value, "points": read_csv(plan_dir / value)}
    return {"origin": "inline", "points": [[real(h), real(d)] for h, d in value]}


def band(pair):
    return {"high_hz": real(pair[1]), "low_hz": real(pair[0])}


def fraction(text):
    return None if text is None else int(text.split("/")[1])


def canonical(path):
    path = pathlib.Path(path)
    plan = yaml.safe_load(path.read_text(encoding="utf-8"))
    st = plan["stimulus"]
    an = plan.get("analysis") or {}
    channels = []
    plan_wide = plan.get("correction")
    for c in plan["channels"]:
        ch = {"input": c["input"] - 1, "name": c["name"], "output": c["output"] - 1}
        corr = c.get("correction", plan_wide)
        # Present only when the channel is corrected (src/plan/hash.rs).
        if corr is not None and corr != "none":
            ch["correction"] = correction(corr, path.parent)
        channels.append(ch)
    rig = plan.get("rig") or {"kind": "simulated"}
    if rig["kind"] == "simulated":
        rig = {"kind": "simulated", "seed": rig.get("seed", 1)}
    checks = []
    for c in plan["checks"]:
        out = {
            "id": c["id"],
            "kind": c["kind"],
            "channels": c.get("channels", [ch["name"] for ch in channels]),
        }
        k = c["kind"]
        if k == "response":
            out["upper"] = limit(c.get("upper"), path.parent)
            out["lower"] = limit(c.get("lower"), path.parent)
            out["smoothing_fraction"] = fraction(c.get("smoothing"))
            n = c.get("normalize")
            if n is None:
                out["normalize"] = None
            elif "at_hz" in n:
                out["normalize"] = {"at_hz": real(n["at_hz"])}
            else:
                out["normalize"] = {"band": band(n["band_hz"])}
        elif k == "sensitivity":
            out.update(band=band(c["band_hz"]), min_db=real(c["min_db"]), max_db=real(c["max_db"]))
            # The unit enters only when it is not the default `db` (hash contract).
            if c.get("unit", "db") != "db":
                out["unit"] = c["unit"]
        elif k == "thd":
            out.update(band=band(c["band_hz"]), max_percent=real(c["max_percent"]))
        elif k == "harmonic":
            out.update(band=band(c["band_hz"]), max_db=real(c["max_db"]), order=c["order"])
        elif k == "rub_buzz":
            out.update(band=band(c["band_hz"]), max_db=real(c["max_db"]))
        elif k == "polarity":
            out["expected"] = c["expected"]
        elif k == "balance":
            out.update(
                band=band(c["band_hz"]),
                max_diff_db=real(c["max_diff_db"]),
                smoothing_fraction=fraction(c.get("smoothing")),
            )
        elif k == "listening":
            out.update(
                band=band(c["band_hz"]),
                level_dbfs=real(c["level_dbfs"]),
                duration_s=real(c["duration_s"]),
            )
        checks.append(out)
    doc = {
        "analysis": {
            "max_harmonic": an.get("max_harmonic", 5),
            "min_snr_db": real(an.get("min_snr_db", 20)),
            "points_per_octave": an.get("points_per_octave", 24),
        },
        "canonical": "tragus-plan/1",
        "channels": channels,
        "checks": checks,
        "description": plan.get("description", ""),
        "id": plan["plan"],
        "revision": plan["revision"],
        "rig": rig,
        "sample_rate_hz": plan["sample_rate_hz"],
        "stimulus": {
            "duration_s": real(st["duration_s"]),
            "fade_in_s": real(st.get("fade_in_s", 0.005)),
            "fade_out_s": real(st.get("fade_out_s", 0.005)),
            "level_dbfs": real(st["level_dbfs"]),
            "silence_after_s": real(st.get("silence_after_s", 0.2)),
            "silence_before_s": real(st.get("silence_before_s", 0.1)),
            "start_hz": real(st["start_hz"]),
            "stop_hz": real(st["stop_hz"]),
        },
    }
    # Present only when the plan declares it (hash contract).
    if "nominal_impedance_ohm" in plan:
        doc["nominal_impedance_ohm"] = real(plan["nominal_impedance_ohm"])
    # Present only for calibrated levels: written so, or by default when a sensitivity
    # check is in dB SPL (hash contract).
    spl_check = any(
        c.get("kind") == "sensitivity" and c.get("unit", "db") in ("db_spl_per_v", "db_spl_per_mw")
        for c in plan["checks"]
    )
    if plan.get("level_unit", "db_spl_per_v" if spl_check else "db_fs_per_fs") == "db_spl_per_v":
        doc["level_unit"] = "db_spl_per_v"
    # Present only when declared, with the values as written (hash contract).
    if "product" in plan:
        pr = plan["product"]
        doc["product"] = {
            "response_peak_db": real(pr["response_peak_db"]),
            "sensitivity_db": real(pr["sensitivity_db"]),
            "sensitivity_unit": pr["sensitivity_unit"],
            "tolerance_db": real(pr["tolerance_db"]),
        }
    # Present only when declared (hash contract).
    if "max_retests" in plan:
        doc["max_retests"] = plan["max_retests"]
    return dump(doc)


if __name__ == "__main__":
    text = canonical(sys.argv[1])
    print(text)
    print(hashlib.sha256(text.encode("utf-8")).hexdigest())
