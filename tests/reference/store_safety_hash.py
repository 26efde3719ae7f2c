#!/usr/bin/env python3
"""Independent recomputation of the tragus store's safety-event and exposure hash chains.

Implements the canonical byte forms exactly as the `tragus::store` module documentation
states them ("Hearing-safety rows"), with nothing but Python's standard library
(hashlib.sha256, FIPS 180-4; decimal for the real-number text), and writes
store_safety_hash.json beside this script. tests/store_safety.rs appends the same rows to a
fresh store and checks the store's prev_hash and row_hash values against these.

Run: python3 tests/reference/store_safety_hash.py   (deterministic; no arguments)
"""
import hashlib
import json
import os
from decimal import Decimal

GENESIS = "0" * 64
EVENT_ORDER = ["id", "time_utc", "station", "operator", "serial", "plan_id", "plan_sha256",
               "kind", "message", "detail_json", "record_id", "prev_hash"]
EXPOSURE_ORDER = ["id", "operator", "station", "start_unix_s", "level_dba", "duration_s",
                  "serial", "plan_id", "record_id", "prev_hash"]


def real_text(x):
    """Shortest round-trip decimal (Python's repr), positional, no trailing '.0'."""
    s = format(Decimal(repr(float(x))), "f")
    if "." in s:
        s = s.rstrip("0").rstrip(".")
    return "0" if s in ("-0", "") else s


def text(v, real=False):
    if v is None:
        return ""
    if real:
        return real_text(v)
    return str(v)


def canonical(header, order, row, reals=()):
    out = header
    for name in order:
        value = text(row[name], name in reals).encode("utf-8")
        out += name.encode("ascii") + b":" + str(len(value)).encode("ascii") + b":" + value + b"\n"
    return out


events = [
    dict(time_utc="2025-03-14T09:30:00Z", station="larkspur-line3-st1", operator="j.okafor",
         serial=None, plan_id="demo-earbud", plan_sha256=None, kind="plan_refused",
         message="plan refused: step sweep could reach 131.0 dB SPL at the microphone, cap 120.0 dB SPL",
         detail_json='{"expected_db_spl":131.0,"cap_db_spl":120.0}', record_id=None),
    dict(time_utc="2025-03-14T09:31:12.500Z", station="larkspur-line3-st1", operator="j.okafor",
         serial="E2-000123", plan_id="demo-earbud", plan_sha256="a" * 64, kind="guard_tripped",
         message="guard tripped: 125.3 dB SPL at the microphone passed the cap 120.0 dB SPL;\nretest",
         detail_json='{"level_db_spl":125.3}', record_id=1),
]
exposures = [
    dict(operator="j.okafor", station="larkspur-line3-st1", start_unix_s=1741942800,
         level_dba=94.0, duration_s=1800.0, serial="E2-000123", plan_id="demo-earbud",
         record_id=1),
    dict(operator="m.lindqvist", station="larkspur-line3-st1", start_unix_s=-5,
         level_dba=0.1 + 0.2, duration_s=12.5, serial="E2-000124", plan_id="demo-earbud",
         record_id=None),
]

prev = GENESIS
for i, e in enumerate(events, start=1):
    e["id"] = i
    e["prev_hash"] = prev
    c = canonical(b"tragus-safety-event-v1\n", EVENT_ORDER, e)
    e["canonical"] = c.decode("utf-8")
    e["row_hash"] = prev = hashlib.sha256(c).hexdigest()

prev = GENESIS
for i, x in enumerate(exposures, start=1):
    x["id"] = i
    x["prev_hash"] = prev
    c = canonical(b"tragus-exposure-v1\n", EXPOSURE_ORDER, x, reals=("level_dba", "duration_s"))
    x["canonical"] = c.decode("utf-8")
    x["row_hash"] = prev = hashlib.sha256(c).hexdigest()

# Spot checks of the real-number text (shortest round trip, positional).
assert real_text(94.0) == "94" and real_text(0.1 + 0.2) == "0.30000000000000004"
assert real_text(1e-7) == "0.0000001" and real_text(-0.0) == "0" and real_text(12.5) == "12.5"

out = os.path.join(os.path.dirname(os.path.abspath(__file__)), "store_safety_hash.json")
with open(out, "w") as f:
    json.dump({"safety_events": events, "exposures": exposures}, f, indent=1, ensure_ascii=False)
    f.write("\n")
print(out)
