"""Benchmark: the link at an emulated 115 200 baud, against the real firmware in MicroPython behind a pty relay.

Figures (issue 4), each measured in this one run, side by side:

- wire efficiency: journal bytes stored / bytes on the wire both ways during a full sync (goal >= 0.9);
- full-journal sync as a fraction of link capacity: journal bytes / (seconds x 11 520 bytes/s; 8N1 framing is
  10 bits a byte) (goal >= 0.85), with reads kept in flight (depth 2) and, alongside, one read at a time (depth 1);
- incremental sync with nothing new: seconds for a sync that finds only its own anchor (goal <= 0.5 s).

    python tests/bench/bench_link.py [--quick]
"""

from __future__ import annotations

import statistics
import sys
import tempfile
import time
from pathlib import Path

from nightcell.wire.link import Board
from nightcell.sim.board import SimulatedBoard
sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # tests/: the shared support package
from support.campaigns import fill_journal
from nightcell.store.database import Store
from nightcell.store.sync import sync_board

BAUD = 115_200
CAPACITY = BAUD / 10.0
SETTINGS = {"interval_ms": 1000, "durability_ms": 2000,
            "channels": [{"name": n, "led": 15 - i, "adc": 26 + (i % 3)} for i, n in enumerate("abcd")]}


def _full_sync(sim: SimulatedBoard, image: Path, db: Path, depth: int) -> dict:
    sim.restore_flash(image)
    assert sim.relay is not None
    sim.relay.baud = None
    with Board.open(sim.url) as board:
        board.hello(timeout=10.0)
        sim.relay.baud = BAUD
        sim.relay.reset_counters()
        with Store.open(db) as store:
            t = time.perf_counter()
            s = sync_board(board, store, depth=depth)
            seconds = time.perf_counter() - t
            wire = sim.relay.bytes_to_host + sim.relay.bytes_to_board
            t = time.perf_counter()
            again = sync_board(board, store, depth=depth)
            incremental = time.perf_counter() - t
    return {"bytes": s.bytes, "seconds": seconds, "wire": wire, "incremental": incremental,
            "again_new_samples": again.new_rows.get("samples", 0)}


def run(quick: bool = False) -> list[dict]:
    size = 30_000 if quick else 60_000
    repeats = 1 if quick else 3
    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp)
        sim = SimulatedBoard(root / "board", device="be4c000000000001", speed=200.0, seed=9, settings=SETTINGS)
        sim.start()
        try:
            fill_journal(sim, size, timeout=300.0)
            image = sim.save_flash(root / "image")
            got: dict[int, list[dict]] = {1: [], 2: []}
            for i in range(repeats):
                for depth in (2, 1):
                    got[depth].append(_full_sync(sim, image, root / f"d{depth}-{i}.db", depth))
        finally:
            sim.stop()
    frac = {d: statistics.median(r["bytes"] / (r["seconds"] * CAPACITY) for r in got[d]) for d in got}
    eff = statistics.median(r["bytes"] / r["wire"] for r in got[2])
    inc = statistics.median(r["incremental"] for r in got[2] + got[1])
    journal = got[2][0]["bytes"]
    return [
        {"name": "journal_bytes", "value": journal, "goal": None, "ok": None},
        {"name": "wire_efficiency", "value": round(eff, 3), "goal": ">= 0.9", "ok": eff >= 0.9},
        {"name": "full_sync_fraction_of_115200_baud", "value": round(frac[2], 3), "goal": ">= 0.85",
         "ok": frac[2] >= 0.85},
        {"name": "full_sync_fraction_one_read_at_a_time", "value": round(frac[1], 3), "goal": None, "ok": None},
        {"name": "reads_in_flight_speedup", "value": round(frac[2] / frac[1], 3), "goal": None, "ok": None},
        {"name": "incremental_sync_nothing_new_s", "value": round(inc, 3), "goal": "<= 0.5", "ok": inc <= 0.5},
    ]


if __name__ == "__main__":  # the same as: python tests/bench/run.py --only NAME [--quick] [--json]
    from run import script

    sys.exit(script(__file__))
