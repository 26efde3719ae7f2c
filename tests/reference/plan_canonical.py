#!/usr/bin/env python3
"""Independent implementation of the canonical form of a tragus plan.

The form is the contract documented in src/plan/hash.rs: JSON with sorted keys, no
whitespace, whole-number fields as integers, every other number as a float, -0.0 as 0.0,
defaults applied, channel numbers 0-based, limit lines resolved to their points. This script
implements it from that description alone (PyYAML to read the plan, json and hashlib for
the form and the digest), so that tests/plan_hash.rs checks the Rust implementation against
an outside one.

Usage: python3 tests/reference/plan_canonical.py tests/data/plans/hash/reference.yaml \
           > tests/data/plans/hash/expected.txt
Prints two lines: the canonical JSON and its SHA-256 (lowercase hex).
Made with Python 3.11.7, PyYAML 6.0.3.
"""
import hashlib
import json
import pathlib
import sys

import yaml


def real(x):
    x = float(x)
    return 0.0 if x == 0 else x  # -0.0 is written 0.0


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
    channels = [
        {"input": c["input"] - 1, "name": c["name"], "output": c["output"] - 1}
        for c in plan["channels"]
    ]
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
    return json.dumps(doc, sort_keys=True, separators=(",", ":"), ensure_ascii=False)


if __name__ == "__main__":
    text = canonical(sys.argv[1])
    print(text)
    print(hashlib.sha256(text.encode("utf-8")).hexdigest())
