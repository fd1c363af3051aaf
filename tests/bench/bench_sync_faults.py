"""Fault campaign: random fault schedules on the cable during a sync, then the sync is finished on a clean cable.

After each schedule the database must equal, row for row, a fault-free sync of the same journal (the same saved
flash), hold 0 corrupt rows (rows the journal does not have), and the board must not have trimmed anything beyond
what this host acknowledged (its tail <= the acknowledged position, and no stored row missing). Faults: drop, bit flip,
truncate, duplicate, delay, disconnect-and-reconnect, stray traceback, on replies (board -> host) and on requests
(host -> board) alike; a flipped digit in `ack` or `anchor` is caught by the check those requests carry.

    python tests/bench/bench_sync_faults.py [--quick]      (>= 500 schedules; --quick runs 40)
    python tests/bench/bench_sync_faults.py --schedules 5000 [--seed 2024]

Every schedule that ever failed is kept in ``REGRESSION`` (its faults written out, so it no longer depends on the
random stream) and runs first in every campaign, the quick one included.
"""

from __future__ import annotations

import random
import sys
import tempfile
import time
from collections import Counter
from pathlib import Path

from nightcell.sim.board import Fault, SimulatedBoard
sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # tests/: the shared support package
from support.campaigns import random_faults, raw_rows, reference_journal, run_fault_schedule

SETTINGS = {"interval_ms": 1000, "durability_ms": 2000, "segment_bytes": 4096,
            "channels": [{"name": "red", "led": 15, "adc": 26}, {"name": "green", "led": 14, "adc": 27}]}


# Schedules that failed in a campaign, by (seed, index) of the run that found them, with the faults they injected.
REGRESSION: dict[str, list[Fault]] = {
    # A read request's position flipped by one bit to a later one: the board answered from there and the host took
    # the hole as a trim, stored past it and acknowledged it (206 rows lost in the run that found it).
    "seed 2024 schedule 489": [Fault("to_board", 69, "flip", bit=1), Fault("to_host", 10057, "duplicate", size=51)],
    # Ended in 'Write timeout' on a loaded machine instead of finishing on retry.
    "seed 2024 schedule 109": [Fault("to_board", 160, "duplicate", size=181), Fault("to_host", 1505, "flip", bit=2),
                               Fault("to_host", 5674, "truncate", size=2030), Fault("to_host", 6788, "drop", size=14),
                               Fault("to_host", 10030, "delay", seconds=0.315)],
}


def campaign_schedules(n: int, seed: int) -> list[tuple[str, list[Fault]]]:
    """The regression schedules, then ``n`` random ones from ``seed`` (schedule i of a seed is always the same)."""
    rng = random.Random(seed)
    out = list(REGRESSION.items())
    for i in range(n):
        out.append((f"seed {seed} schedule {i}",
                    random_faults(rng, to_host_bytes=11_000, to_board_bytes=400, count=rng.randint(1, 5),
                                  max_seconds=0.4)))
    return out


def _diff(got: dict, want: dict) -> tuple[int, int]:
    """(rows missing, rows that should not be there) over all raw tables."""
    missing = extra = 0
    for table, rows in want.items():
        a, b = set(got.get(table, [])), set(rows)
        missing += len(b - a)
        extra += len(a - b)
    return missing, extra


def run(quick: bool = False, schedules: int | None = None, seed: int = 2024,
        shard: tuple[int, int] = (0, 1)) -> list[dict]:
    """The campaign; ``shard=(k, w)`` runs only schedules ``k, k + w, ...`` of the list (one of ``w`` processes)."""
    n = schedules or (40 if quick else 500)
    stats: Counter = Counter()
    kinds: Counter = Counter()
    failures: list[dict] = []
    t0 = time.monotonic()
    schedules_run = campaign_schedules(n, seed)[shard[0]::shard[1]]
    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp)
        sim = SimulatedBoard(root / "board", device="fa0170000000000a", speed=200.0, seed=3, settings=SETTINGS)
        sim.start()
        try:
            ref = reference_journal(sim, root, 10_000)
            image, reference = ref["image"], ref["rows"]
            size = sum(len(v) for v in reference.values())
            for i, (name, faults) in enumerate(schedules_run):
                kinds.update(f.kind + (" on a request" if f.direction == "to_board" else "") for f in faults)
                db = root / f"s{i}.db"
                try:
                    out = run_fault_schedule(sim, image, faults, db, timeout=0.3)
                except Exception as exc:  # noqa: BLE001 - a finishing sync that fails is a campaign failure
                    failures.append({"schedule": name, "error": repr(exc), "faults": [f.to_dict() for f in faults]})
                    stats["unfinished"] += 1
                    continue
                missing, extra = _diff(raw_rows(db, before_boot=out["before_boot"]), reference)
                stats["first_sync_gave_up"] += out["first_error"] is not None
                stats["missing_rows"] += missing
                stats["corrupt_rows"] += extra
                trimmed_unacked = out["tail"] > out["acked_to"]
                stats["unacked_trims"] += trimmed_unacked
                if missing or extra or trimmed_unacked:
                    failures.append({"schedule": name, "missing": missing, "extra": extra, **out})
                db.unlink()
        finally:
            sim.stop()
    seconds = time.monotonic() - t0
    bad = len(failures)
    for f in failures[:20]:
        print("FAILED", f, file=sys.stderr)
    n = len(schedules_run)
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


def _merge(parts: list[list[dict]]) -> list[dict]:
    """One table from the tables of several shards: counts added, the wall time the longest shard's."""
    by_name = [{r["name"]: r["value"] for r in rows} for rows in parts]
    total = lambda name: sum(p[name] for p in by_name)  # noqa: E731
    n = total("fault_schedules")
    kinds: Counter = Counter()
    for p in by_name:
        kinds.update(p["fault_kinds_injected"])
    equal, corrupt, missing, unacked = (total(k) for k in ("schedules_equal_to_fault_free", "corrupt_rows",
                                                           "missing_rows", "unacknowledged_trims"))
    return [
        {"name": "fault_schedules", "value": n, "goal": ">= 500", "ok": n >= 500},
        {"name": "fault_kinds_injected", "value": dict(kinds), "goal": None, "ok": None},
        {"name": "reference_rows", "value": [p["reference_rows"] for p in by_name], "goal": None, "ok": None},
        {"name": "schedules_equal_to_fault_free", "value": equal, "goal": f"== {n}", "ok": equal == n},
        {"name": "corrupt_rows", "value": corrupt, "goal": "== 0", "ok": corrupt == 0},
        {"name": "missing_rows", "value": missing, "goal": "== 0", "ok": missing == 0},
        {"name": "unacknowledged_trims", "value": unacked, "goal": "== 0", "ok": unacked == 0},
        {"name": "first_sync_gave_up", "value": total("first_sync_gave_up"), "goal": None, "ok": None},
        {"name": "campaign_seconds", "value": max(p["campaign_seconds"] for p in by_name), "goal": None,
         "ok": None},
    ]


def _main(argv: list[str]) -> int:
    """``--schedules N [--seed S] [--workers W]``: a campaign of any size, one line per figure (W processes share
    the schedules, each with its own simulated board); otherwise as run.py --only."""
    import argparse
    import json
    import subprocess

    from run import line, script

    if "--schedules" not in " ".join(argv):
        return script(__file__)
    parser = argparse.ArgumentParser(description="The link fault campaign at a chosen size.")
    parser.add_argument("--schedules", type=int, required=True)
    parser.add_argument("--seed", type=int, default=2024)
    parser.add_argument("--workers", type=int, default=1)
    parser.add_argument("--shard", default=None, help=argparse.SUPPRESS)  # k/w: one worker's share, JSON out
    args = parser.parse_args(argv)
    if args.shard:
        k, w = (int(x) for x in args.shard.split("/"))
        json.dump(run(schedules=args.schedules, seed=args.seed, shard=(k, w)), sys.stdout)
        return 0
    if args.workers > 1:
        procs = [subprocess.Popen([sys.executable, __file__, "--schedules", str(args.schedules), "--seed",
                                   str(args.seed), "--shard", f"{k}/{args.workers}"], stdout=subprocess.PIPE,
                                  text=True) for k in range(args.workers)]
        rows = _merge([json.loads(p.communicate()[0]) for p in procs])
    else:
        rows = run(schedules=args.schedules, seed=args.seed)
    for r in rows:
        print(line(r), flush=True)
    return 0 if all(r["ok"] is not False for r in rows) else 1


if __name__ == "__main__":  # the same as: python tests/bench/run.py --only NAME [--quick] [--json]
    sys.exit(_main(sys.argv[1:]))
