"""Pull a board's journal into the store: read from the last stored position, verify, commit, then acknowledge.

The order is the whole point: records are committed to SQLite (one transaction per batch) *before* the board is
told it may trim them, so a cable pulled or a laptop closed at any moment loses nothing and duplicates nothing —
the next sync starts from what was committed. This module uses the link and the store; it computes no science.

Example::

    with Board.open(url) as board, Store.open("class.db") as store:
        summary = sync_board(board, store)
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field
from typing import Any, Callable

from .errors import ProtocolError
from .frames import iter_records
from .link import READ_CHUNK, Board
from .store import Store
from .timeline import rebuild_clocks

__all__ = ["SyncSummary", "sync_board"]

BATCH_BYTES = 64 * 1024


@dataclass
class SyncSummary:
    """What one sync did."""

    device: str
    journal: int
    start: int
    end: int
    head: int
    records: int = 0
    new_rows: dict[str, int] = field(default_factory=dict)
    bytes: int = 0
    seconds: float = 0.0
    acked_to: int = 0
    warnings: list[str] = field(default_factory=list)

    def to_dict(self) -> dict[str, Any]:
        return {
            "device": self.device, "journal": self.journal, "start": self.start, "end": self.end,
            "head": self.head, "records": self.records, "new_rows": self.new_rows, "bytes": self.bytes,
            "seconds": round(self.seconds, 3), "acked_to": self.acked_to, "warnings": self.warnings,
        }


def sync_board(
    board: Board,
    store: Store,
    *,
    anchor: bool = True,
    clock: Callable[[], float] = time.time,
    acknowledge: bool = True,
    flush: bool = True,
    progress: Callable[[int, int], None] | None = None,
    batch_bytes: int = BATCH_BYTES,
) -> SyncSummary:
    """Sync one board into ``store``; return a summary.

    ``clock`` gives the host's Unix time for the clock anchor (the demo passes its accelerated clock).
    ``progress(done_bytes, total_bytes)`` is called after every read.
    """
    t0 = time.monotonic()
    if anchor:
        board.anchor(int(round(clock() * 1000)))
    if flush:
        board.flush()
    info = board.hello()
    device = str(info["device"])
    journal = int(info["journal"])
    head = int(info["head"])
    tail = int(info["tail"])
    with store.write():
        store.touch_device(device, board=info.get("board"), firmware=info.get("firmware"),
                           label=info.get("label") or None)
        state = store.journal_state(device, journal)
        if state is None:
            store.set_journal_state(device, journal, stored_to=tail, acked_to=0)
    stored_to = tail if state is None else state[0]
    summary = SyncSummary(device, journal, stored_to, stored_to, head)
    if stored_to < tail:
        summary.warnings.append(
            f"the board no longer holds positions {stored_to}–{tail} of journal {journal}: another host may have "
            "synced and acknowledged them; merge that host's database to get them"
        )
        stored_to = tail
    if stored_to > head:
        raise ProtocolError(
            f"the store has journal {journal} of {device} up to {stored_to} but the board's head is {head}: "
            "the board's journal went backwards — do not acknowledge; keep both databases and report this"
        )
    pos = stored_to
    pending: list = []
    pending_bytes = 0

    def commit(upto: int) -> None:
        nonlocal pending, pending_bytes
        with store.write():
            counts = store.ingest(device, pending, journal=journal)
            store.set_journal_state(device, journal, stored_to=upto)
            rebuild_clocks(store, device)
        for k, v in counts.items():
            summary.new_rows[k] = summary.new_rows.get(k, 0) + v
        summary.records += len(pending)
        pending = []
        pending_bytes = 0

    total = max(0, head - pos)
    while pos < head:
        _, data = board.read(pos, READ_CHUNK)
        if not data:
            break
        consumed = 0
        for rec in iter_records(data, pos):
            pending.append(rec)
            consumed = rec.position + rec.size - pos
        if consumed == 0:
            raise ProtocolError(f"the board sent {len(data)} bytes at position {pos} holding no whole record")
        pos += consumed
        pending_bytes += consumed
        summary.bytes += consumed
        if progress:
            progress(pos - stored_to, total)
        if pending_bytes >= batch_bytes:
            commit(pos)
            if acknowledge:
                board.ack(pos)
                _set_acked(store, device, journal, pos)
                summary.acked_to = pos
    if pending or summary.records == 0:
        commit(pos)
    if acknowledge and pos > 0:
        board.ack(pos)
        _set_acked(store, device, journal, pos)
        summary.acked_to = pos
    summary.end = pos
    summary.seconds = time.monotonic() - t0
    return summary


def _set_acked(store: Store, device: str, journal: int, pos: int) -> None:
    with store.write():
        store.set_journal_state(device, journal, acked_to=pos)
