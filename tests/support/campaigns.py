"""Fault campaigns and reference journals for the sync tests and benchmarks: fill a simulated board's journal,
keep its flash as an image, sync it once without faults (the reference), then replay it through fault schedules
and compare the raw rows. Test support only: nightcell itself never imports this.
"""

from __future__ import annotations

import random
import sqlite3
import time
from pathlib import Path
from typing import Any, Sequence

from nightcell.errors import NightcellError
from nightcell.sim.board import FAULT_KINDS, Fault, SimulatedBoard
from nightcell.store.database import Store
from nightcell.store.sync import sync_board
from nightcell.store.tables import RAW_TABLES
from nightcell.wire.link import Board, Deadline

__all__ = ["RAW_TABLES", "fill_journal", "random_faults", "raw_rows", "reference_journal", "run_fault_schedule"]


def random_faults(rng: random.Random, *, to_host_bytes: int, to_board_bytes: int, count: int,
                  kinds: Sequence[str] = FAULT_KINDS, board_kinds: Sequence[str] | None = None,
                  max_seconds: float = 0.6) -> list[Fault]:
    """A random fault schedule over the first bytes of each direction.

    ``board_kinds`` limits the faults on requests (host → board); by default every kind, bit flips included: the
    two requests whose value the board keeps (``ack`` and ``anchor``) carry a check, and the board refuses one
    that does not match (schema/protocol.md).
    """
    if board_kinds is None:
        board_kinds = list(kinds)
    out = []
    for _ in range(count):
        to_host = not board_kinds or rng.random() < 0.75
        direction = "to_host" if to_host else "to_board"
        span = max(1, to_host_bytes if to_host else to_board_bytes)
        kind = rng.choice(list(kinds if to_host else board_kinds))
        size = {"drop": rng.randint(1, 16), "truncate": rng.randint(16, 6000),
                "duplicate": rng.randint(1, 300)}.get(kind, 1)
        seconds = rng.uniform(0.05, max_seconds) if kind in ("delay", "disconnect") else 0.0
        out.append(Fault(direction, rng.randrange(span), kind, size, rng.randrange(8), round(seconds, 3)))
    return sorted(out, key=lambda f: (f.direction, f.at))


# -- journals and fault campaigns -------------------------------------------------------------

def fill_journal(sim: SimulatedBoard, min_bytes: int, *, label: str = "fill", timeout: float = 120.0) -> dict:
    """Let the board log a run until its journal holds at least ``min_bytes``, stop the run, and power off.

    Returns the board's last ``hello``. The flash can then be saved (``save_flash``) and restored for each of many
    experiments on the same journal.
    """
    with Board.open(sim.url, timeout=5.0) as board:
        board.hello(timeout=10.0)
        board.start(label)
        deadline = Deadline(timeout)
        while board.hello()["head"] < min_bytes:
            if deadline.expired():
                raise RuntimeError(f"the simulated board did not log {min_bytes} bytes in {timeout} s")
            time.sleep(0.2)
        board.stop()
        board.flush()
        info = board.hello()
    sim.power_cut()
    return info


def reference_journal(sim: SimulatedBoard, root: str | Path, min_bytes: int) -> dict[str, Any]:
    """A journal to run many experiments on, and its fault-free sync: the reference every experiment is held to.

    Fills the board's journal (``fill_journal``), saves its flash to ``root/image``, restores it and syncs it once
    without acknowledging into ``root/reference.db``. Returns ``image``, ``reference`` (the database path), ``boot``
    (the boot the restored board came up in), ``rows`` (``raw_rows`` of the earlier boots) and ``summary`` (the
    reference sync's ``SyncSummary``).
    """
    root = Path(root)
    fill_journal(sim, min_bytes)
    image = sim.save_flash(root / "image")
    sim.restore_flash(image)
    reference = root / "reference.db"
    with Board.open(sim.url) as board, Store.open(reference) as store:
        boot = board.hello(timeout=10.0)["boot"]
        summary = sync_board(board, store, acknowledge=False)
    return {"image": image, "reference": reference, "boot": boot, "rows": raw_rows(reference, before_boot=boot),
            "summary": summary}


def raw_rows(db_path: str | Path, *, before_boot: int | None = None, tables: Sequence[str] = RAW_TABLES,
             ) -> dict[str, list[tuple]]:
    """Raw rows of a database, table by table, sorted (provenance columns left out), for row-by-row comparison.

    ``before_boot`` keeps only rows of boots before it (the boots a restored flash already held).
    """
    conn = sqlite3.connect(f"file:{db_path}?mode=ro", uri=True)
    try:
        out = {}
        for table in tables:
            cols = [r[1] for r in conn.execute(f"PRAGMA table_info({table})") if r[1] not in ("journal", "position")]
            sql = f"SELECT {', '.join(cols)} FROM {table}"
            params: tuple = ()
            if before_boot is not None:
                sql += " WHERE boot < ?"
                params = (before_boot,)
            out[table] = sorted(conn.execute(sql + " ORDER BY 1, 2, 3", params).fetchall(), key=repr)
        return out
    finally:
        conn.close()


def run_fault_schedule(sim: SimulatedBoard, image: str | Path, faults: Sequence[Fault], db_path: str | Path, *,
                       timeout: float = 0.5, retries: int = 3, batch_bytes: int = 4096,
                       finish_tries: int = 3) -> dict[str, Any]:
    """One schedule of a fault campaign: restore the saved flash, sync through the faults, then finish the sync.

    Returns what a check needs: ``before_boot`` (rows of earlier boots must equal a fault-free sync's),
    ``first_error`` (the faulted sync's error, if it gave up), the board's ``tail`` and the database's
    ``stored_to``/``acked_to`` after finishing (nothing past what was acknowledged may be gone from the board).
    """
    sim.restore_flash(image)
    out: dict[str, Any] = {"faults": [f.to_dict() for f in faults], "first_error": None, "finish_attempts": 0}
    with Store.open(db_path) as store:
        with Board.open(sim.url, timeout=timeout) as board:
            board.retries = retries
            info = board.hello(timeout=5.0)
            out["before_boot"] = int(info["boot"])
            assert sim.relay is not None
            sim.relay.reset_counters()
            sim.schedule(faults)
            try:
                sync_board(board, store, batch_bytes=batch_bytes)
            except NightcellError as exc:
                out["first_error"] = f"{type(exc).__name__}: {exc}"
            out["injected"] = len(sim.relay.injected)
            sim.schedule([])
            sim.relay.connected = True
            time.sleep(0.02)
            board.transport.discard_input()
            last: Exception | None = None
            for _ in range(finish_tries):
                out["finish_attempts"] += 1
                try:
                    sync_board(board, store, batch_bytes=batch_bytes)
                    last = None
                    break
                except NightcellError as exc:
                    last = exc
                    board.transport.discard_input()
            if last is not None:
                raise last
            final = board.hello()
        out["tail"] = int(final["tail"])
        state = store.journal_state(str(final["device"]), int(final["journal"]))
        assert state is not None
        out["stored_to"], out["acked_to"] = state
    return out
