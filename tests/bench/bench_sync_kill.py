"""Host killed (SIGKILL) at random moments of a sync: the database opens and is consistent, the next sync completes
with no duplicates, and nothing the host had not acknowledged was trimmed from the board.

Each round restores the same saved flash, starts a sync in a separate process through a cable paced at 230 400
baud, kills it after a random delay, then syncs again in this process and compares the database row for row with a
fault-free sync of the same journal.

    python tests/bench/bench_sync_kill.py [--quick]      (>= 100 kills; --quick runs 10)
"""

from __future__ import annotations

import os
import random
import signal
import sqlite3
import subprocess
import sys
import tempfile
import time
from collections import Counter
from pathlib import Path

from nightcell.wire.link import Board
from nightcell.sim.board import SimulatedBoard
sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # tests/: the shared support package
from support.campaigns import raw_rows, reference_journal
from nightcell.store.database import Store
from nightcell.store.sync import sync_board

SETTINGS = {"interval_ms": 1000, "durability_ms": 2000, "segment_bytes": 4096,
            "channels": [{"name": "red", "led": 15, "adc": 26}, {"name": "green", "led": 14, "adc": 27}]}
BAUD = 230_400

_SYNC = """
import sys
from nightcell.wire.link import Board
from nightcell.store.database import Store
from nightcell.store.sync import sync_board
with Board.open(sys.argv[1]) as board, Store.open(sys.argv[2]) as store:
    print("ready", flush=True)
    sync_board(board, store, batch_bytes=2048)
print("done", flush=True)
"""


def run(quick: bool = False, rounds: int | None = None, seed: int = 99) -> list[dict]:
    n = rounds or (10 if quick else 100)
    rng = random.Random(seed)
    stats: Counter = Counter()
    failures = []
    t0 = time.monotonic()
    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp)
        sim = SimulatedBoard(root / "board", device="c1110000000000aa", speed=200.0, seed=4, settings=SETTINGS)
        sim.start()
        try:
            ref = reference_journal(sim, root, 12_000)
            image, boot, reference, ref_sync = ref["image"], ref["boot"], ref["rows"], ref["summary"]
            span = ref_sync.bytes * 10.0 / BAUD + 0.1  # roughly how long a sync lasts on this cable
            for i in range(n):
                sim.restore_flash(image)
                assert sim.relay is not None
                db = root / f"k{i}.db"
                with Board.open(sim.url) as board:
                    board.hello(timeout=10.0)
                sim.relay.baud = BAUD
                proc = subprocess.Popen([sys.executable, "-c", _SYNC, sim.url, str(db)], stdout=subprocess.PIPE,
                                        text=True)
                assert proc.stdout is not None and proc.stdout.readline().strip() == "ready"
                time.sleep(rng.uniform(0.0, 1.3 * span))
                os.kill(proc.pid, signal.SIGKILL)
                proc.wait()
                sim.relay.baud = None
                try:
                    conn = sqlite3.connect(db)
                    ok = conn.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
                    conn.close()
                    with Store.open(db) as store:
                        before = store.query("SELECT stored_to, acked_to FROM journals")
                        with Board.open(sim.url) as board:
                            board.transport.discard_input()
                            summary = sync_board(board, store)
                            tail = board.hello()["tail"]
                        dups = store.conn.execute(
                            "SELECT count(*) FROM (SELECT 1 FROM samples GROUP BY device, boot, seq, channel "
                            "HAVING count(*) > 1)").fetchone()[0]
                except Exception as exc:  # noqa: BLE001 - a round that cannot finish is a failure
                    failures.append({"round": i, "error": repr(exc)})
                    continue
                got = raw_rows(db, before_boot=boot)
                # Kill points: before anything was stored, part-way, or after the whole journal was stored.
                if not before or before[0]["stored_to"] <= ref_sync.start:
                    stats["killed_before_first_commit"] += 1
                elif before[0]["stored_to"] < ref_sync.end - 200:
                    stats["killed_part_way"] += 1
                else:
                    stats["killed_near_the_end"] += 1
                bad = (not ok) or dups or got != reference or tail > summary.acked_to or summary.warnings
                if bad:
                    failures.append({"round": i, "integrity": ok, "dups": dups, "equal": got == reference,
                                     "tail": tail, "acked": summary.acked_to, "warnings": summary.warnings})
                db.unlink()
        finally:
            sim.stop()
    for f in failures[:5]:
        print("FAILED", f, file=sys.stderr)
    return [
        {"name": "host_kills", "value": n, "goal": ">= 100" if not quick else None,
         "ok": (n >= 100) if not quick else None},
        {"name": "kill_points", "value": dict(stats), "goal": None, "ok": None},
        {"name": "rounds_consistent_complete_no_duplicates", "value": n - len(failures), "goal": f"== {n}",
         "ok": not failures},
        {"name": "campaign_seconds", "value": round(time.monotonic() - t0, 1), "goal": None, "ok": None},
    ]


if __name__ == "__main__":  # the same as: python tests/bench/run.py --only NAME [--quick] [--json]
    from run import script

    sys.exit(script(__file__))
