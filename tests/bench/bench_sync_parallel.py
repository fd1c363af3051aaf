"""Benchmark: several boards synced at once into one database (a class set), with a reader polling it meanwhile.

Two simulated boards (the real firmware in MicroPython) behind cables paced at 115 200 baud; the same saved
journals are synced one after another and then all at once (``sync_ports(parallel=True)``), alternating, in one run.
Figures: the speed-up of syncing at once (goal >= 1.4 for two boards: each cable, not the database, is the limit),
"database is locked" failures (goal 0) and duplicate rows (goal 0). The speed-up is the median of the per-round
ratios over 5 rounds (the order alternating), its spread printed beside it.

    python tests/bench/bench_sync_parallel.py [--quick]
"""

from __future__ import annotations

import sqlite3
import sys
import tempfile
import threading
import time
from pathlib import Path

from nightcell.wire.link import Board
from nightcell.sim.board import SimulatedBoard
sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # tests/: the shared support package
from support.campaigns import fill_journal
from nightcell.store.database import Store
from nightcell.store.sync import sync_ports

sys.path.insert(0, str(Path(__file__).resolve().parent))
from sidebyside import ROUNDS, ratio_row  # noqa: E402

BAUD = 115_200
SETTINGS = {"interval_ms": 1000, "durability_ms": 2000,
            "channels": [{"name": "red", "led": 15, "adc": 26}, {"name": "green", "led": 14, "adc": 27}]}


def _round(sims: list[SimulatedBoard], images: list[Path], db: Path, parallel: bool) -> tuple[float, int, list]:
    for sim, image in zip(sims, images):
        sim.restore_flash(image)
        assert sim.relay is not None
        sim.relay.baud = None
        with Board.open(sim.url) as board:
            board.hello(timeout=10.0)
        sim.relay.baud = BAUD
    Store.open(db).close()
    stop = threading.Event()
    reads = [0]
    errors: list[str] = []

    def reader() -> None:
        try:
            with Store.open(db) as s:
                while not stop.is_set():
                    s.query("SELECT device, count(*) FROM sample_readings GROUP BY device")
                    reads[0] += 1
        except Exception as exc:  # noqa: BLE001 - counted as a failure
            errors.append(repr(exc))

    r = threading.Thread(target=reader)
    r.start()
    t = time.perf_counter()
    results = sync_ports([s.url for s in sims], db, parallel=parallel)
    seconds = time.perf_counter() - t
    stop.set()
    r.join()
    errors += [e["error"] for e in results if "error" in e]
    conn = sqlite3.connect(db)
    dups = conn.execute("SELECT count(*) FROM (SELECT 1 FROM samples GROUP BY device, boot, seq, channel "
                        "HAVING count(*) > 1)").fetchone()[0]
    conn.close()
    return seconds, dups, errors


def run(quick: bool = False) -> list[dict]:
    size = 3_000 if quick else 25_000  # quick: five small rounds cost what one of 8000 did
    repeats = ROUNDS
    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp)
        sims = [SimulatedBoard(root / f"b{i}", device=f"9a4a11e1000000{i:02d}", speed=200.0, seed=i,
                               settings=SETTINGS) for i in range(2)]
        try:
            images = []
            for i, sim in enumerate(sims):
                sim.start()
                fill_journal(sim, size)
                images.append(sim.save_flash(root / f"image{i}"))
            times: dict[bool, list[float]] = {False: [], True: []}
            dups = 0
            errors: list[str] = []
            for k in range(repeats):
                for parallel in ((False, True) if k % 2 == 0 else (True, False)):  # the order alternates
                    s, d, e = _round(sims, images, root / f"db{k}{int(parallel)}.db", parallel)
                    times[parallel].append(s)
                    dups += d
                    errors += e
        finally:
            for sim in sims:
                sim.stop()
    locked = sum("locked" in e for e in errors)
    for e in errors[:5]:
        print("ERROR", e, file=sys.stderr)
    return [
        ratio_row("parallel_sync_speedup_two_boards", times[False], times[True], least=1.4),
        {"name": "concurrent_sync_database_locked_failures", "value": locked, "goal": "== 0", "ok": locked == 0},
        {"name": "concurrent_sync_other_failures", "value": len(errors) - locked, "goal": "== 0",
         "ok": len(errors) == locked},
        {"name": "concurrent_sync_duplicate_rows", "value": dups, "goal": "== 0", "ok": dups == 0},
    ]


if __name__ == "__main__":  # the same as: python tests/bench/run.py --only NAME [--quick] [--json]
    from run import script

    sys.exit(script(__file__))
