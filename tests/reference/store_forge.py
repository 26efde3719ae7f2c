#!/usr/bin/env python3
"""A forger of tragus stores, for the tamper-matrix test: an attacker with write access to
the station's disk but without the station's private key.

Implements the documented canonical byte forms independently of tragus, with Python's
standard library only (sqlite3, hashlib for SHA-256 per FIPS 180-4, json, decimal):

- records: `tragus-record-v1` (schema 1: no calibration fields), `-v2` (calibration_mode and
  calibration_sha256 after capture_sha256), `-v3` (schema 4: build, inputs_json,
  playback_json after the calibration fields), chosen as the store documents it: build not
  NULL -> v3, else calibration_mode not NULL -> v2, else v1;
- safety events: `tragus-safety-event-v1`; exposures: `tragus-exposure-v1` (reals as the
  shortest decimal that reads back as the same double, positional, no trailing ".0").

Every field is `NAME ":" LEN ":" VALUE LF`, LEN the byte length of the UTF-8 VALUE, NULL as
the empty value; the first prev_hash is 64 zeros.

Like an attacker, it opens the SQLite file directly, saves and drops the append-only
triggers of the table it changes, edits, recomputes every later hash so that each chain is
consistent again, and restores the triggers with their original SQL. Signatures and key ids
are left as they are (it has no private key) unless told to copy them from another row.

Usage (DB is the store's tragus.db):
  store_forge.py DB check                      every stored hash and link recomputed; JSON out
  store_forge.py DB set-verdict ID VERDICT     verdict and result_json's "verdict", re-chained
  store_forge.py DB copy-signature FROM TO     record TO gets record FROM's key id and signature
  store_forge.py DB truncate N                 the last N records and the safety rows naming
                                               them removed (they must end their chains)
Exit 0 on success; on `check`, 1 when a hash or link does not hold.
"""
import hashlib
import json
import sqlite3
import sys
from decimal import Decimal

GENESIS = "0" * 64

RECORD_V1 = ["id", "time_utc", "serial", "plan_id", "plan_revision", "plan_sha256",
             "software_version", "station", "operator", "rig", "verdict", "result_json",
             "capture_sha256"]
CALIBRATION = ["calibration_mode", "calibration_sha256"]
PROVENANCE = ["build", "inputs_json", "playback_json"]
EVENT = ["id", "time_utc", "station", "operator", "serial", "plan_id", "plan_sha256", "kind",
         "message", "detail_json", "record_id", "prev_hash"]
EXPOSURE = ["id", "operator", "station", "start_unix_s", "level_dba", "duration_s", "serial",
            "plan_id", "record_id", "prev_hash"]
EXPOSURE_REALS = {"level_dba", "duration_s"}



def real_text(x):
    """Shortest round-trip decimal (repr), positional, no trailing zeros or '.'."""
    s = format(Decimal(repr(float(x))), "f")
    if "." in s:
        s = s.rstrip("0").rstrip(".")
    return "0" if s in ("-0", "") else s


def field(name, value):
    v = value.encode("utf-8")
    return name.encode("ascii") + b":" + str(len(v)).encode("ascii") + b":" + v + b"\n"


def text(v):
    return "" if v is None else str(v)


def record_bytes(row):
    names = list(RECORD_V1)
    if row.get("build") is not None:
        header, names = b"tragus-record-v3\n", names + CALIBRATION + PROVENANCE
    elif row.get("calibration_mode") is not None:
        header, names = b"tragus-record-v2\n", names + CALIBRATION
    else:
        header = b"tragus-record-v1\n"
    out = header
    for n in names + ["prev_hash"]:
        out += field(n, text(row.get(n)))
    return out


def event_bytes(row):
    return b"tragus-safety-event-v1\n" + b"".join(field(n, text(row[n])) for n in EVENT)


def exposure_bytes(row):
    out = b"tragus-exposure-v1\n"
    for n in EXPOSURE:
        out += field(n, real_text(row[n]) if n in EXPOSURE_REALS else text(row[n]))
    return out


CHAINS = {
    "records": ("record_hash", record_bytes),
    "safety_events": ("row_hash", event_bytes),
    "exposures": ("row_hash", exposure_bytes),
}


def sha256(b):
    return hashlib.sha256(b).hexdigest()


def rows(conn, table):
    cur = conn.execute(f"SELECT * FROM {table} ORDER BY id")
    cols = [d[0] for d in cur.description]
    return [dict(zip(cols, r)) for r in cur.fetchall()]


def tables(conn):
    return {r[0] for r in conn.execute("SELECT name FROM sqlite_schema WHERE type = 'table'")}


class Unguarded:
    """Drop the triggers of `table` for the edit, put them back (same SQL) afterwards."""

    def __init__(self, conn, table):
        self.conn, self.table = conn, table

    def __enter__(self):
        self.saved = self.conn.execute(
            "SELECT name, sql FROM sqlite_schema WHERE type = 'trigger' AND tbl_name = ?",
            (self.table,)).fetchall()
        for name, _ in self.saved:
            self.conn.execute(f"DROP TRIGGER {name}")
        return self

    def __exit__(self, *exc):
        for _, sql in self.saved:
            self.conn.execute(sql)
        return False


def rechain(conn, table):
    """Recompute every prev_hash and hash of `table` from the first row on."""
    hash_col, form = CHAINS[table]
    prev = GENESIS
    with Unguarded(conn, table):
        for row in rows(conn, table):
            row["prev_hash"] = prev
            h = sha256(form(row))
            conn.execute(f"UPDATE {table} SET prev_hash = ?, {hash_col} = ? WHERE id = ?",
                         (prev, h, row["id"]))
            prev = h


def check(conn):
    out, ok = {}, True
    for table, (hash_col, form) in CHAINS.items():
        if table not in tables(conn):
            continue
        prev, n, bad = GENESIS, 0, []
        for row in rows(conn, table):
            n += 1
            if row["prev_hash"] != prev or sha256(form(row)) != row[hash_col]:
                bad.append(row["id"])
            prev = row[hash_col]
        out[table] = {"count": n, "head_hash": prev, "bad": bad}
        ok = ok and not bad
    out["ok"] = ok
    print(json.dumps(out, sort_keys=True))
    return 0 if ok else 1


def set_verdict(conn, rid, verdict):
    row = conn.execute("SELECT result_json FROM records WHERE id = ?", (rid,)).fetchone()
    if row is None:
        sys.exit(f"store_forge: no record {rid}")
    result = json.loads(row[0])
    result["verdict"] = verdict
    with Unguarded(conn, "records"):
        conn.execute("UPDATE records SET verdict = ?, result_json = ? WHERE id = ?",
                     (verdict, json.dumps(result, separators=(",", ":")), rid))
    rechain(conn, "records")


def copy_signature(conn, src, dst):
    key_id, sig = conn.execute("SELECT key_id, signature FROM records WHERE id = ?",
                               (src,)).fetchone()
    with Unguarded(conn, "records"):
        conn.execute("UPDATE records SET key_id = ?, signature = ? WHERE id = ?",
                     (key_id, sig, dst))


def truncate(conn, n):
    ids = [r[0] for r in conn.execute("SELECT id FROM records ORDER BY id DESC LIMIT ?", (n,))]
    marks = ",".join("?" * len(ids))
    for table in ("safety_events", "exposures"):
        gone = [r[0] for r in conn.execute(
            f"SELECT id FROM {table} WHERE record_id IN ({marks}) ORDER BY id", ids)]
        last = conn.execute(f"SELECT COALESCE(MAX(id), 0) FROM {table}").fetchone()[0]
        if gone and gone != list(range(last - len(gone) + 1, last + 1)):
            sys.exit(f"store_forge: the {table} rows of records {ids} do not end the chain")
        with Unguarded(conn, table):
            conn.execute(f"DELETE FROM {table} WHERE record_id IN ({marks})", ids)
    with Unguarded(conn, "records"):
        conn.execute(f"DELETE FROM records WHERE id IN ({marks})", ids)


def main(argv):
    if len(argv) < 3:
        sys.exit(__doc__)
    conn = sqlite3.connect(argv[1], isolation_level=None)
    cmd, args = argv[2], argv[3:]
    if cmd == "check":
        return check(conn)
    conn.execute("BEGIN IMMEDIATE")
    if cmd == "set-verdict":
        set_verdict(conn, int(args[0]), args[1])
    elif cmd == "copy-signature":
        copy_signature(conn, int(args[0]), int(args[1]))
    elif cmd == "truncate":
        truncate(conn, int(args[0]))
    else:
        sys.exit(f"store_forge: unknown command {cmd!r}\n{__doc__}")
    conn.execute("COMMIT")
    conn.close()
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
