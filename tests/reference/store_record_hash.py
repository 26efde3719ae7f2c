#!/usr/bin/env python3
"""Independent recomputation of the tragus store's record hash chain.

Implements the canonical byte form exactly as the `tragus::store` module documentation
states it ("Canonical byte form"), with nothing but Python's standard library
(hashlib.sha256, FIPS 180-4), and writes store_record_hash.json beside this script.
tests/store_reference.rs appends the same records to a fresh store and checks that the
store computes the same capture hashes, prev_hash values and record hashes.

Run: python3 tests/reference/store_record_hash.py   (deterministic; no arguments)
"""
import hashlib
import json
import os
import struct

GENESIS = "0" * 64
ORDER_V1 = ["id", "time_utc", "serial", "plan_id", "plan_revision", "plan_sha256",
            "software_version", "station", "operator", "rig", "verdict", "result_json",
            "capture_sha256", "prev_hash"]
# Schema 2: the calibration fields go between capture_sha256 and prev_hash; an absent
# calibration_sha256 (None) is the empty value.
ORDER_V2 = ORDER_V1[:13] + ["calibration_mode", "calibration_sha256", "prev_hash"]
# Schema 4: build identity, archived-input links and playback after the calibration fields.
ORDER_V3 = ORDER_V2[:15] + ["build", "inputs_json", "playback_json", "prev_hash"]
ORDERS = {1: ORDER_V1, 2: ORDER_V2, 3: ORDER_V3}


def wav(n_channels, rate_hz, samples):
    """A 16-bit PCM WAV file (RIFF header, fmt chunk, data chunk)."""
    data = b"".join(struct.pack("<h", s) for s in samples)
    block = 2 * n_channels
    fmt = struct.pack("<HHIIHH", 1, n_channels, rate_hz, rate_hz * block, block, 16)
    body = b"WAVE" + b"fmt " + struct.pack("<I", len(fmt)) + fmt \
        + b"data" + struct.pack("<I", len(data)) + data
    return b"RIFF" + struct.pack("<I", len(body)) + body


def canonical(rec, version):
    out = b"tragus-record-v%d\n" % version
    for name in ORDERS[version]:
        value = rec[name]
        value = ("" if value is None else str(value)).encode("utf-8")
        out += name.encode("ascii") + b":" + str(len(value)).encode("ascii") + b":" + value + b"\n"
    return out


records = [
    dict(time_utc="2025-03-14T09:26:53.589Z", serial="E2-000123", plan_id="demo-earbud",
         plan_revision=3, plan_sha256="a" * 64, software_version="0.1.0",
         station="larkspur-line3-st1", operator="j.okafor", rig="simulated",
         verdict="pass", result_json='{"verdict":"pass"}',
         capture=wav(1, 48000, [])),
    # Multi-byte UTF-8, colons and line feeds inside values: LEN counts bytes.
    dict(time_utc="2025-03-14T09:27:41Z", serial="E2-000124", plan_id="demo-earbud",
         plan_revision=3, plan_sha256="a" * 64, software_version="0.1.0",
         station="larkspur-line3-st1", operator="Zoë Ndlovu", rig="simulated",
         verdict="fail",
         result_json='{\n  "verdict": "fail",\n  "note": "Größe: 5"\n}',
         capture=wav(2, 48000, [0, 1000, -1000, 32767])),
]

# The same two units as tested under schema 2: the first in production with a calibration,
# the second uncalibrated (no calibration applied: the empty value).
CALIBRATION = [("production", "b" * 64), ("uncalibrated", None)]


def chain(records, version, first_id=1, prev=GENESIS):
    out = []
    for i, rec in enumerate(records, start=first_id):
        rec = dict(rec)
        capture = rec.pop("capture")
        rec["id"] = i
        rec["capture_sha256"] = hashlib.sha256(capture).hexdigest()
        rec["prev_hash"] = prev
        canon = canonical(rec, version)
        rec["record_hash"] = hashlib.sha256(canon).hexdigest()
        rec["capture_hex"] = capture.hex()
        rec["canonical"] = canon.decode("utf-8")
        prev = rec["record_hash"]
        out.append(rec)
    return out


v2 = []
for rec, (mode, sha) in zip(records, CALIBRATION):
    rec = dict(rec)
    rec["calibration_mode"] = mode
    rec["calibration_sha256"] = sha
    v2.append(rec)
out_v2 = chain(v2, 2)


def bundle(role, main, files, options=None):
    """An archived input in the documented bundle form: the compact JSON with sorted keys
    (serde_json's compact output of the same document)."""
    doc = {"canonical": "tragus-inputs/1", "files": files, "main": main,
           "options": options or {}, "role": role}
    return json.dumps(doc, sort_keys=True, separators=(",", ":"),
                      ensure_ascii=False).encode("utf-8")


PLAN_BUNDLE = bundle("plan", "plans/demo.yaml", {
    "plans/demo.yaml": "plan: demo-earbud\nrevision: 3\n# \u00e9t\u00e9 \"quoted\"\n",
    "plans/limits/upper.csv": "hz,db\r\n100,3\n\t1000,3\n"})

# The same two units under schema 4: the first without archived inputs, the second linked
# to a plan bundle; both with a build identity and what was played.
PROVENANCE = [
    ("0.1.0+git.0123456789ab", "{}",
     '{"abandoned":false,"calibration_offsets_db":null,"drive_gain_db":[0.0,-6.5]}'),
    ("0.1.0+git.0123456789ab.dirty",
     json.dumps({"plan": hashlib.sha256(PLAN_BUNDLE).hexdigest()}, separators=(",", ":")),
     '{"abandoned":true,"calibration_offsets_db":[1.25,-0.5],"drive_gain_db":null}'),
]
v3 = []
for rec, (build, inputs, playback) in zip(v2, PROVENANCE):
    rec = dict(rec)
    rec["build"] = build
    rec["inputs_json"] = inputs
    rec["playback_json"] = playback
    v3.append(rec)
out = chain(v3, 3)
out[1]["archive_hex"] = [PLAN_BUNDLE.hex()]
out[1]["plan_bundle_sha256"] = hashlib.sha256(PLAN_BUNDLE).hexdigest()
# A store written by schema 1 (v1 form), then migrated, then continued by schema 4: the
# v3 record's prev_hash is the last v1 record's hash.
out_v1 = chain(records, 1)
after = dict(v3[0])
out_after = chain([after], 3, first_id=len(out_v1) + 1, prev=out_v1[-1]["record_hash"])

path = os.path.join(os.path.dirname(os.path.abspath(__file__)), "store_record_hash.json")
with open(path, "w", encoding="utf-8") as f:
    json.dump({"made_by": "tests/reference/store_record_hash.py", "records": out,
               "records_v2": out_v2, "records_v1": out_v1, "after_migration": out_after}, f,
              indent=1, ensure_ascii=False)
    f.write("\n")
print(out[0]["canonical"])
for r in out + out_v2 + out_v1 + out_after:
    print(r["id"], r["capture_sha256"], r["record_hash"])
