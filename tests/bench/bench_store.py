"""Benchmark: sync's host side (decode + verify + ingest in committed batches) against raw sqlite3.executemany.

Goal (issue 4): rows/s of the sync + ingest path >= 0.7 x rows/s of ``sqlite3.executemany`` inserting the same rows
into the same table in one transaction. Both are timed side by side, alternating, in one run (the machine is shared
and noisy); the ratio is the median of the per-round ratios over ≥ 5 rounds, its spread printed beside it.
sqlite-utils' ``insert_all`` is timed too, for the record.

    python tests/bench/bench_store.py [--quick]
"""

from __future__ import annotations

import random
import sqlite3
import sys
import tempfile
import time
from pathlib import Path

import sqlite_utils

sys.path.insert(0, str(Path(__file__).resolve().parent))
from sidebyside import ROUNDS, median, ratio_row  # noqa: E402

from nightcell.store.database import Store, migration_files  # noqa: E402
from nightcell.wire import frames as F  # noqa: E402


def _journal(samples: int, channels: int = 1, seed: int = 1) -> bytes:
    rng = random.Random(seed)
    out = []
    seq = 0
    up = 0
    while seq < samples:
        n = min(60, samples - seq)
        block = [{"late_ms": rng.randint(0, 3), "flags": 0,
                  "dark": [rng.randint(900, 1100) for _ in range(channels)],
                  "light": [rng.randint(40000, 41000) for _ in range(channels)]} for _ in range(n)]
        out.append(F.encode_record(F.KIND_SAMPLES, 1, seq, up, {"interval_ms": 1000, "reads": 16,
                                                                 "channels": channels, "options": 0,
                                                                 "samples": block}))
        seq += n
        up += n * 1000
    return b"".join(out)


def _rows(blob: bytes) -> list[tuple]:
    rows = []
    for r in F.iter_records(blob):
        for s in r.samples():
            for c in range(r.fields["channels"]):
                rows.append(("dev", r.boot, s.seq, c, s.uptime_ms, s.late_ms, s.flags, r.fields["reads"],
                             s.dark[c], s.light[c], None))
    return rows


def _samples_ddl() -> str:
    sql = migration_files()[0][1]
    start = sql.index("CREATE TABLE samples")
    return sql[start:sql.index(";", start) + 1]


def _ours(blob: bytes, path: Path, batch: int = 64 * 1024) -> float:
    """What sync does with the bytes of DATA replies: decode, check every record's CRC, ingest, commit per batch."""
    with Store.open(path) as store:
        with store.write():
            store.touch_device("dev", board="sim")
        t = time.perf_counter()
        pos = 0
        while pos < len(blob):
            chunk = blob[pos:pos + batch]
            recs = list(F.iter_records(chunk, pos, lazy_samples=True))
            used = recs[-1].position + recs[-1].size - pos
            with store.write():
                store.ingest("dev", recs, journal=1)
                store.set_journal_state("dev", 1, stored_to=pos + used)
            pos += used
        return time.perf_counter() - t


def _raw(rows: list[tuple], path: Path) -> float:
    conn = sqlite3.connect(path, isolation_level=None)
    conn.execute("PRAGMA journal_mode = WAL")
    conn.execute(_samples_ddl())
    t = time.perf_counter()
    conn.execute("BEGIN")
    conn.executemany("INSERT INTO samples VALUES (?,?,?,?,?,?,?,?,?,?,?)", rows)
    conn.execute("COMMIT")
    el = time.perf_counter() - t
    conn.close()
    return el


def _sqlite_utils(rows: list[tuple], path: Path) -> float:
    db = sqlite_utils.Database(path)
    db.conn.execute("PRAGMA journal_mode = WAL")
    db.conn.execute(_samples_ddl())
    cols = ["device", "boot", "seq", "channel", "uptime_ms", "late_ms", "flags", "reads", "dark", "light",
            "temp_centi"]
    dicts = [dict(zip(cols, r)) for r in rows]
    t = time.perf_counter()
    db["samples"].insert_all(dicts)
    el = time.perf_counter() - t
    db.close()
    return el


def run(quick: bool = False) -> list[dict]:
    samples = 40_000 if quick else 200_000
    rounds = ROUNDS if quick else 2 * ROUNDS
    blob = _journal(samples)
    rows = _rows(blob)
    times: dict[str, list[float]] = {"ours": [], "raw": [], "sqlite_utils": []}
    paths = (("ours", _ours, blob), ("raw", _raw, rows), ("sqlite_utils", _sqlite_utils, rows))
    with tempfile.TemporaryDirectory() as tmp:
        for i in range(rounds):
            for name, fn, arg in (paths if i % 2 == 0 else paths[::-1]):  # the order alternates
                times[name].append(fn(arg, Path(tmp) / f"{name}{i}.db"))
    n = len(rows)
    # rows/s ours ÷ rows/s raw = raw seconds ÷ our seconds, per round
    return [
        {"name": "sync_ingest_rows_per_s", "value": round(n / median(times["ours"])), "goal": None, "ok": None},
        {"name": "raw_executemany_rows_per_s", "value": round(n / median(times["raw"])), "goal": None, "ok": None},
        ratio_row("sync_ingest_vs_executemany", times["raw"], times["ours"], least=0.7),
        ratio_row("sqlite_utils_insert_all_vs_executemany", times["raw"], times["sqlite_utils"],
                  what="for the record"),
    ]


if __name__ == "__main__":  # the same as: python tests/bench/run.py --only NAME [--quick] [--json]
    from run import script

    sys.exit(script(__file__))
