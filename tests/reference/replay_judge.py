#!/usr/bin/env python3
"""An independent judge for `tragus replay`: every record of a tragus store judged against a
new plan's limits from its *stored result JSON* alone, without tragus.

It reads the store's database with sqlite3 (read-only, immutable: nothing is written), the
archived plan of each record from `archive/<sha256>.json` (the documented bundle form), and
the new plan with PyYAML. It then writes what the new limits make of each record, and the
verdict transitions, as JSON.

How each check of the new plan is judged, from the stored result's per-channel curves on
the analysis grid (`frequencies_hz`; band edges inclusive within a relative 1e-9, as the
plan documentation says):

- sensitivity: the plain mean of `response_db` over the grid points in the band (null
  points skipped); margin = min(mean - min_db, max_db - mean). Limits in dB only.
- thd: the largest `thd_percent` in the band (nulls skipped); margin =
  20*log10(max_percent / value); a largest value <= 0 passes without a margin.
- harmonic (order n): the largest `harmonics_db[n]` in the band; margin = max_db - value.
- rub_buzz: the largest `rub_buzz_db` in the band; margin = max_db - value.
- polarity: the channel's stored `polarity` against `expected`.
- response and balance judge *smoothed* curves, and the smoothed curves are not stored
  (only the unsmoothed `response_db`). ASSUMPTION, checked here and refused otherwise: the
  new plan moves both limit lines of a response check toward each other by the same d dB
  at every point of the record's own (archived) lines, at the same frequencies, and
  narrows a balance check's max_diff_db by d. Every point's margin, min(upper - r, r -
  lower) or max_diff - |a - b|, then falls by exactly d, so the new worst margin is the
  stored worst margin minus d (at the same frequency). A record whose stored check was not
  judged (retest on a valid measurement) stays a retest.

A record is replayable when its archived plan has the new plan's sample rate, the same
`stimulus` section and the same channels (name, output, input); the others are listed as
not replayable. ASSUMPTION: the stations of the store map channels alike for both plans.
A record is a retest when its sweep was abandoned (`playback_json.abandoned`: then no check
is judged, nothing was measured), when the
stored result has retest reasons, when a channel of the new plan has no stored measurement
or its measurement has retest reasons (each check on it is then a retest too); otherwise it
fails when a check fails, is a retest when a check is, and passes. The new plan's checks
only are judged (a listening step of the old plan is dropped; the new plan must have none).

As a self-check of the reading of the curves, every recomputable check is also judged
against the record's own archived limits and must give its stored margin within 1e-9 dB.

Usage: replay_judge.py --store DIR --plan NEW.yaml --out OUT.json
"""

import argparse
import json
import math
import os
import posixpath
import sqlite3
import sys

import yaml

REL_TOL = 1e-9


def in_band(f, band):
    return band[0] * (1 - REL_TOL) <= f <= band[1] * (1 + REL_TOL)


def band_values(ch, values, band):
    return [(v, f) for f, v in zip(ch["frequencies_hz"], values) if in_band(f, band)]


def band_max(ch, values, band):
    best = None
    for v, f in band_values(ch, values, band):
        if v is None or (isinstance(v, float) and math.isnan(v)):
            continue
        if best is None or v > best[0]:
            best = (v, f)
    return best


def judged(margin):
    return ("pass" if margin >= 0 else "fail"), margin


def judge_scalar(spec, ch):
    """(verdict, margin) of a recomputable check on one stored channel."""
    kind = spec["kind"]
    band = spec.get("band_hz")
    if kind == "sensitivity":
        if spec.get("unit", "db") != "db":
            raise SystemExit(f"sensitivity unit {spec['unit']} is not handled")
        pts = [v for v, _ in band_values(ch, ch["response_db"], band) if v is not None]
        if not pts:
            return "retest", None
        mean = 0.0
        for v in pts:
            mean += v
        mean /= len(pts)
        return judged(min(mean - spec["min_db"], spec["max_db"] - mean))
    if kind == "thd":
        best = band_max(ch, ch["thd_percent"], band)
        if best is None:
            return "retest", None
        if best[0] <= 0:
            return ("pass" if spec["max_percent"] >= 0 else "fail"), None
        return judged(20 * math.log10(spec["max_percent"] / best[0]))
    if kind == "harmonic":
        curve = ch["harmonics_db"].get(str(spec["order"]))
        best = band_max(ch, curve, band) if curve is not None else None
        return ("retest", None) if best is None else judged(spec["max_db"] - best[0])
    if kind == "rub_buzz":
        best = band_max(ch, ch["rub_buzz_db"], band)
        return ("retest", None) if best is None else judged(spec["max_db"] - best[0])
    if kind == "polarity":
        return ("pass" if ch["polarity"] == spec["expected"] else "fail"), None
    raise SystemExit(f"check kind {kind} is not recomputable")


def read_line(text):
    pts = []
    for raw in text.splitlines():
        line = raw.split("#", 1)[0].strip()
        if not line:
            continue
        f, v = line.split(",")[:2]
        try:
            pts.append((float(f), float(v)))
        except ValueError:
            continue  # a header row
    return pts


def inward_shift(old_upper, old_lower, new_upper, new_lower):
    """d such that new_upper = old_upper - d and new_lower = old_lower + d everywhere."""
    ds = set()
    for old, new, sign in ((old_upper, new_upper, 1), (old_lower, new_lower, -1)):
        if [f for f, _ in old] != [f for f, _ in new]:
            raise SystemExit("ASSUMPTION broken: the new limit line has other frequencies")
        ds.update(round(sign * (o - n), 9) for (_, o), (_, n) in zip(old, new))
    if len(ds) != 1:
        raise SystemExit(f"ASSUMPTION broken: the lines do not move by one amount: {ds}")
    return ds.pop()


def check_channels(plan, spec):
    names = [c["name"] for c in plan["channels"]]
    listed = spec.get("channels") or names
    return sorted(dict.fromkeys(listed), key=lambda n: names.index(n) if n in names else 1e9)


class PlanFiles:
    """A plan's YAML and its limit lines, from disk or from an archived bundle."""

    def __init__(self, plan, read):
        self.plan, self.read = plan, read

    def check(self, check_id):
        return next(c for c in self.plan["checks"] if c["id"] == check_id)

    def lines(self, check_id):
        spec = self.check(check_id)
        return read_line(self.read(spec["upper"])), read_line(self.read(spec["lower"]))


def from_disk(path):
    base = os.path.dirname(os.path.abspath(path))
    with open(path, encoding="utf-8") as f:
        plan = yaml.safe_load(f)

    def read(rel):
        with open(os.path.join(base, rel), encoding="utf-8") as f:
            return f.read()

    return PlanFiles(plan, read)


def from_bundle(store, sha):
    with open(os.path.join(store, "archive", sha + ".json"), encoding="utf-8") as f:
        bundle = json.load(f)
    base = posixpath.dirname(bundle["main"])
    plan = yaml.safe_load(bundle["files"][bundle["main"]])
    return PlanFiles(plan, lambda rel: bundle["files"][posixpath.normpath(posixpath.join(base, rel))])


def shape(plan):
    return (
        plan["sample_rate_hz"],
        plan["stimulus"],
        [(c["name"], c["output"], c["input"]) for c in plan["channels"]],
    )


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--store", required=True)
    ap.add_argument("--plan", required=True)
    ap.add_argument("--out", required=True)
    a = ap.parse_args()

    new = from_disk(a.plan)
    if any(c["kind"] == "listening" for c in new.plan["checks"]):
        raise SystemExit("the new plan has a listening step: not handled")
    uri = "file:" + os.path.join(os.path.abspath(a.store), "tragus.db") + "?mode=ro&immutable=1"
    db = sqlite3.connect(uri, uri=True)
    rows = db.execute(
        "SELECT id, serial, verdict, result_json, playback_json, inputs_json FROM records ORDER BY id"
    ).fetchall()
    db.close()

    olds, records, not_replayable, self_checked = {}, {}, {}, 0
    for rid, serial, before, result_json, playback_json, inputs_json in rows:
        stored = json.loads(result_json)
        plan_sha = json.loads(inputs_json)["plan"]
        if plan_sha not in olds:
            olds[plan_sha] = from_bundle(a.store, plan_sha)
        old = olds[plan_sha]
        if shape(old.plan) != shape(new.plan):
            not_replayable[str(rid)] = "another stimulus, sample rate or channel routing"
            continue
        channels = {c["name"]: c for c in stored.get("channels", [])}
        stored_checks = {(c["id"], c["channel"]): c for c in stored.get("checks", [])}
        valid = lambda name: name in channels and not channels[name]["retest_reasons"]
        invalid = (
            json.loads(playback_json)["abandoned"]
            or bool(stored.get("retest_reasons"))
            or not all(valid(c["name"]) for c in new.plan["channels"])
        )
        checks = []
        # An abandoned sweep measured nothing: no check is judged at all.
        abandoned = json.loads(playback_json)["abandoned"]
        for spec in [] if abandoned else new.plan["checks"]:
            names = check_channels(new.plan, spec)
            targets = ["/".join(names)] if spec["kind"] == "balance" else names
            for label in targets:
                if not all(valid(n) for n in label.split("/")):
                    checks.append({"id": spec["id"], "channel": label, "verdict": "retest", "margin_db": None})
                    continue
                if spec["kind"] in ("response", "balance"):
                    if spec["kind"] == "response":
                        d = inward_shift(*old.lines(spec["id"]), *new.lines(spec["id"]))
                    else:
                        d = old.check(spec["id"])["max_diff_db"] - spec["max_diff_db"]
                    was = stored_checks[(spec["id"], label)]
                    if was["worst_margin_db"] is None:
                        verdict, margin = "retest", None
                    else:
                        verdict, margin = judged(was["worst_margin_db"] - d)
                else:
                    verdict, margin = judge_scalar(spec, channels[label])
                    # Self-check against the record's own limits and stored margin.
                    ov, om = judge_scalar(old.check(spec["id"]), channels[label])
                    was = stored_checks[(spec["id"], label)]
                    if ov != was["verdict"] or (om is None) != (was["worst_margin_db"] is None) or (
                        om is not None and abs(om - was["worst_margin_db"]) > 1e-9
                    ):
                        raise SystemExit(f"self-check: record {rid} {spec['id']} {label}: {ov} {om} vs {was}")
                    self_checked += 1
                checks.append({"id": spec["id"], "channel": label, "verdict": verdict, "margin_db": margin})
        verdicts = {c["verdict"] for c in checks}
        if invalid:
            after = "retest"
        elif "fail" in verdicts:
            after = "fail"
        elif "retest" in verdicts:
            after = "retest"
        else:
            after = "pass"
        records[str(rid)] = {"serial": serial, "before": before, "after": after, "checks": checks}

    transitions = {}
    for rid, r in records.items():
        if r["before"] != r["after"]:
            transitions.setdefault((r["before"], r["after"]), []).append(r["serial"])
    out = {
        "records": records,
        "not_replayable": not_replayable,
        "transitions": [
            {"from": f, "to": t, "count": len(s), "serials": s} for (f, t), s in sorted(transitions.items())
        ],
    }
    with open(a.out, "w", encoding="utf-8") as f:
        json.dump(out, f, indent=1)
    print(
        f"replay_judge: {len(records)} records judged, {len(not_replayable)} not replayable, "
        f"{self_checked} stored margins recomputed from the curves; transitions "
        + ", ".join(f"{t['from']}->{t['to']} {t['count']}" for t in out["transitions"])
    )


if __name__ == "__main__":
    sys.exit(main())
