"""Fault campaign: random fault schedules on the cable during a sync, then the sync is finished on a clean cable.

After each schedule the database must equal, row for row, a fault-free sync of the same journal (the same saved
flash), hold 0 corrupt rows (rows the journal does not have), and the board must not have trimmed anything beyond
what this host acknowledged (its tail <= the acknowledged position, and no stored row missing). Faults: drop, bit flip,
truncate, duplicate, delay, disconnect-and-reconnect, stray traceback, on replies (board -> host) and on requests
(host -> board) alike; a flipped digit in `ack` or `anchor` is caught by the check those requests carry.

    python tests/bench/bench_sync_faults.py [--quick]      (>= 500 schedules; --quick runs 40)
"""

from __future__ import annotations

import random
import sys
import tempfile
import time
from collections import Counter
from pathlib import Path

from nightcell.sim.board import SimulatedBoard, random_faults, raw_rows, reference_journal, run_fault_schedule

SETTINGS = {"interval_ms": 1000, "durability_ms": 2000, "segment_bytes": 4096,
            "channels": [{"name": "red", "led": 15, "adc": 26}, {"name": "green", "led": 14, "adc": 27}]}


def _diff(got: dict, want: dict) -> tuple[int, int]:
    """(rows missing, rows that should not be there) over all raw tables."""
    missing = extra = 0
    for table, rows in want.items():
        a, b = set(got.get(table, [])), set(rows)
        missing += len(b - a)
        extra += len(a - b)
    return missing, extra


def run(quick: bool = False, schedules: int | None = None, seed: int = 2024) -> list[dict]:
    n = schedules or (40 if quick else 500)
    rng = random.Random(seed)
    stats: Counter = Counter()
    kinds: Counter = Counter()
    failures: list[dict] = []
    t0 = time.monotonic()
    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp)
        sim = SimulatedBoard(root / "board", device="fa0170000000000a", speed=200.0, seed=3, settings=SETTINGS)
        sim.start()
        try:
            ref = reference_journal(sim, root, 10_000)
            image, reference = ref["image"], ref["rows"]
            size = sum(len(v) for v in reference.values())
            for i in range(n):
                faults = random_faults(rng, to_host_bytes=11_000, to_board_bytes=400, count=rng.randint(1, 5),
                                       max_seconds=0.4)
                kinds.update(f.kind + (" on a request" if f.direction == "to_board" else "") for f in faults)
                db = root / f"s{i}.db"
                try:
                    out = run_fault_schedule(sim, image, faults, db, timeout=0.3)
                except Exception as exc:  # noqa: BLE001 - a finishing sync that fails is a campaign failure
                    failures.append({"schedule": i, "error": repr(exc), "faults": [f.to_dict() for f in faults]})
                    stats["unfinished"] += 1
                    continue
                missing, extra = _diff(raw_rows(db, before_boot=out["before_boot"]), reference)
                stats["first_sync_gave_up"] += out["first_error"] is not None
                stats["missing_rows"] += missing
                stats["corrupt_rows"] += extra
                trimmed_unacked = out["tail"] > out["acked_to"]
                stats["unacked_trims"] += trimmed_unacked
                if missing or extra or trimmed_unacked:
                    failures.append({"schedule": i, "missing": missing, "extra": extra, **out})
                db.unlink()
        finally:
            sim.stop()
    seconds = time.monotonic() - t0
    bad = len(failures)
    for f in failures[:5]:
        print("FAILED", f, file=sys.stderr)
    return [
        {"name": "fault_schedules", "value": n, "goal": ">= 500" if not quick else None,
         "ok": (n >= 500) if not quick else None},
        {"name": "fault_kinds_injected", "value": dict(kinds), "goal": None, "ok": None},
        {"name": "reference_rows", "value": size, "goal": None, "ok": None},
        {"name": "schedules_equal_to_fault_free", "value": n - bad, "goal": f"== {n}", "ok": bad == 0},
        {"name": "corrupt_rows", "value": stats["corrupt_rows"], "goal": "== 0", "ok": stats["corrupt_rows"] == 0},
        {"name": "missing_rows", "value": stats["missing_rows"], "goal": "== 0", "ok": stats["missing_rows"] == 0},
        {"name": "unacknowledged_trims", "value": stats["unacked_trims"], "goal": "== 0",
         "ok": stats["unacked_trims"] == 0},
        {"name": "first_sync_gave_up", "value": stats["first_sync_gave_up"], "goal": None, "ok": None},
        {"name": "campaign_seconds", "value": round(seconds, 1), "goal": None, "ok": None},
    ]


if __name__ == "__main__":  # the same as: python tests/bench/run.py --only NAME [--quick] [--json]
    from run import script

    sys.exit(script(__file__))
