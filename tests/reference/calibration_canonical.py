#!/usr/bin/env python3
"""Independent recomputation of a calibration file's canonical JSON and SHA-256.

Implements the canonical form exactly as src/calibration/file.rs documents it ("Canonical
form"), with PyYAML, json and hashlib, and prints the canonical text and its SHA-256.
tests/calibration_file.rs compares them with tragus's. Output committed as
tests/data/calibration/expected.txt.

Run: python3 tests/reference/calibration_canonical.py tests/data/calibration/example.yaml
"""
import hashlib
import json
import sys

import yaml


def real(x):
    x = float(x)
    return 0.0 if x == 0.0 else x


def mic_reading(r):
    if r is None:
        return None
    return {k: (r[k] if k == "measured_utc" else real(r[k])) for k in [
        "level_db_spl", "level_dbfs", "level_spread_db", "measured_hz", "measured_utc",
        "nominal_hz", "snr_db", "thd_percent"]}


def drive_reading(r):
    if r is None:
        return None
    g = r.get("input_volts_peak_per_fs")
    return {
        "input_volts_peak_per_fs": None if g is None else real(g),
        "measured_utc": r["measured_utc"],
        "measured_v_rms": real(r["measured_v_rms"]),
        "method": r["method"],
        "tone_dbfs": real(r["tone_dbfs"]),
        "tone_hz": real(r["tone_hz"]),
    }


def canonical(path):
    with open(path, encoding="utf-8") as f:
        c = yaml.safe_load(f)
    doc = {
        "canonical": "tragus-calibration/1",
        "date_utc": c["date_utc"],
        "drive": {str(k): {"reading": drive_reading(v.get("reading")),
                           "volts_peak_per_fs": real(v["volts_peak_per_fs"])}
                  for k, v in c.get("drive", {}).items()},
        "due_date": str(c["due_date"]),
        "instruments": [{"model": i["model"], "role": i["role"], "serial": i["serial"]}
                        for i in c.get("instruments", [])],
        "microphone": {str(k): {"fs_per_pa": real(v["fs_per_pa"]),
                                "reading": mic_reading(v.get("reading"))}
                       for k, v in c.get("microphone", {}).items()},
        "operator": c["operator"],
        "station": c["station"],
    }
    # Drive-monitor inputs: present only when the file has some, so older files hash alike.
    if c.get("monitor"):
        doc["monitor"] = {str(k): {"volts_peak_per_fs": real(v["volts_peak_per_fs"])}
                          for k, v in c["monitor"].items()}
    return json.dumps(doc, sort_keys=True, separators=(",", ":"), ensure_ascii=False)


if __name__ == "__main__":
    text = canonical(sys.argv[1])
    print(text)
    print(hashlib.sha256(text.encode("utf-8")).hexdigest())
