"""Pull a board's journal into the store: read from the last stored position, verify, commit, then acknowledge.

The order is the whole point: records are committed to SQLite (one transaction per batch, together with the new
stored position) *before* the board is told it may trim them, so a cable pulled, a laptop closed or the host killed at
any moment loses nothing and duplicates nothing — the next sync starts from what was committed, and rows that
arrive twice are the same rows (identity device + journal + boot + seq: a wiped board's new journal, counting boots
from 1 again, is stored beside the old one under boot numbers of its own, see ``Store.host_boot``). A record whose
identity is stored with other content (a forged replay of a stored journal) is refused, nothing of its batch written. This
module uses the link and the store; it computes no science.

Example::

    with Board.open(url) as board, Store.open("class.db") as store:
        summary = sync_board(board, store)
"""

from __future__ import annotations

import concurrent.futures
import socket
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Sequence

from ..errors import DeviceError, NightcellError, ProtocolError, StoreError
from ..wire.frames import KIND_ANCHOR, iter_records
from ..wire.link import READ_CHUNK, Board, JournalPull
from .database import Store
from .clocks import rebuild_clocks

__all__ = ["SyncSummary", "sync_board", "sync_ports", "BATCH_BYTES", "ProgressCallback"]

BATCH_BYTES = 64 * 1024
"""Journal bytes committed per SQLite transaction (and acknowledged after it)."""

ProgressCallback = Callable[[int, int, int], None]
"""``progress(done_bytes, total_bytes, records)``, called after every chunk read."""


@dataclass
class SyncSummary:
    """What one sync did."""

    device: str
    journal: int
    start: int
    end: int
    head: int
    port: str = ""
    records: int = 0
    new_rows: dict[str, int] = field(default_factory=dict)
    bytes: int = 0
    wire_bytes_in: int = 0
    seconds: float = 0.0
    acked_to: int = 0
    board_tail: int = 0
    requests: int = 0
    resends: int = 0
    warnings: list[str] = field(default_factory=list)

    @property
    def new(self) -> int:
        return sum(self.new_rows.values())

    def to_dict(self) -> dict[str, Any]:
        return {
            "device": self.device, "journal": self.journal, "port": self.port, "start": self.start,
            "end": self.end, "head": self.head, "records": self.records, "new_rows": self.new_rows,
            "bytes": self.bytes, "wire_bytes_in": self.wire_bytes_in, "seconds": round(self.seconds, 3),
            "acked_to": self.acked_to, "board_tail": self.board_tail, "requests": self.requests,
            "resends": self.resends, "warnings": self.warnings,
        }


def sync_board(
    board: Board,
    store: Store,
    *,
    anchor: bool = True,
    clock: Callable[[], float] = time.time,
    acknowledge: bool = True,
    flush: bool = True,
    progress: ProgressCallback | None = None,
    batch_bytes: int = BATCH_BYTES,
    depth: int = 2,
) -> SyncSummary:
    """Sync one board into ``store``; return a summary.

    ``clock`` gives the host's Unix time for the clock anchor (the demo passes its accelerated clock). The anchor
    carries the host time advanced by half the round trip just measured, the best estimate of when the board reads
    its own clock. ``depth`` is how many ``read`` requests may be in flight (2 keeps the line busy; 1 waits for
    each reply).
    """
    t0 = time.monotonic()
    bytes_in0 = board.transport.bytes_in
    rtt = 0.0
    if flush:
        t = time.monotonic()
        board.flush()
        rtt = time.monotonic() - t
    sent_anchor = None
    if anchor:
        host_ms = int(round((clock() + rtt / 2) * 1000))
        reply = board.anchor(host_ms)
        sent_anchor = (reply.get("boot"), reply.get("seq"), host_ms)
    info = board.hello()  # its fields checked by Board.hello: a device id, whole-number positions
    device = str(info["device"])
    journal = int(info["journal"])
    head = int(info["head"])
    tail = int(info["tail"])
    # Nothing is written before the first batch commits (the device row and the journal's first position go in
    # with it): a sync that fails before then leaves the database exactly as it was.
    state = store.journal_state(device, journal)
    stored_to = tail if state is None else state[0]
    acked_to = 0 if state is None else state[1]
    summary = SyncSummary(device, journal, stored_to, stored_to, head, port=board.transport.url,
                          acked_to=acked_to, board_tail=tail)
    if stored_to > head:
        raise ProtocolError(
            f"the store has journal {journal} of {device} up to {stored_to} but the board's head is {head}: "
            "the board's journal went backwards — nothing was acknowledged; keep the database and report this"
        )
    if stored_to < tail:
        summary.warnings.append(_gap_warning(journal, stored_to, tail))
        stored_to = tail

    pull = JournalPull(board, stored_to, head, depth=depth, max_bytes=READ_CHUNK)
    pending: list = []
    pending_bytes = 0
    pos = stored_to
    total = max(0, head - stored_to)

    first_commit = True

    def commit(upto: int) -> None:
        nonlocal pending, pending_bytes, first_commit
        with store.write():
            if first_commit:
                store.touch_device(device, board=info.get("board"), firmware=info.get("firmware"),
                                   label=info.get("label") or None)
                if state is None:
                    store.set_journal_state(device, journal, stored_to=summary.start, acked_to=0)
            counts = store.ingest(device, pending, journal=journal, refuse_conflicts=True)
            store.set_journal_state(device, journal, stored_to=upto)
            if any(r.kind == KIND_ANCHOR for r in pending):
                rebuild_clocks(store, device)
        for k, v in counts.items():
            summary.new_rows[k] = summary.new_rows.get(k, 0) + v
        first_commit = False
        summary.records += len(pending)
        pending = []
        pending_bytes = 0

    def acknowledge_to(upto: int) -> None:
        _check_committed(store, device, journal, upto)
        pull.quiesce()
        reply = board.ack(upto)
        with store.write():
            store.set_journal_state(device, journal, acked_to=upto)
        summary.acked_to = upto
        board_tail = int(reply.get("tail", 0))
        summary.board_tail = board_tail
        if board_tail > upto:
            summary.warnings.append(
                f"the board reports its journal now starts at {board_tail}, past the {upto} acknowledged: "
                "it trimmed data this host never stored — keep this database and report it"
            )

    for chunk_pos, data in pull:
        if chunk_pos != pos:
            # Every chunk continues exactly where the store ends; anything else is a hole, never progress.
            raise ProtocolError(
                f"the board's journal jumped from {pos} to {chunk_pos}: a board fault; nothing was acknowledged "
                f"past {summary.acked_to}; keep the database and report this"
            )
        consumed = 0
        for rec in iter_records(data, chunk_pos, lazy_samples=True):
            pending.append(rec)
            consumed = rec.position + rec.size - chunk_pos
        if consumed != len(data):
            raise ProtocolError(
                f"the board sent {len(data)} bytes at position {chunk_pos} that do not end on a record boundary"
            )
        pos = chunk_pos + consumed
        pending_bytes += consumed
        summary.bytes += consumed
        if progress:
            progress(pos - stored_to, max(total, pos - stored_to), summary.records + len(pending))
        if pending_bytes >= batch_bytes:
            commit(pos)
            if acknowledge:
                acknowledge_to(pos)
    commit(pos)
    with store.write():
        rebuild_clocks(store, device)
    if acknowledge and pos > 0 and pos > summary.acked_to:
        acknowledge_to(pos)
    if sent_anchor is not None:
        _check_anchor(store, device, journal, sent_anchor, summary)
    summary.end = pos
    summary.requests = pull.requests
    summary.resends = pull.resends
    summary.seconds = time.monotonic() - t0
    summary.wire_bytes_in = board.transport.bytes_in - bytes_in0
    with store.write():
        store.log_sync(summary, host=socket.gethostname(), started_unix=time.time() - summary.seconds)
    return summary


def _check_committed(store: Store, device: str, journal: int, upto: int) -> None:
    """Refuse to acknowledge ``upto`` unless the database holds, committed, every record before it.

    The invariant the board's trim rests on, checked where the ack is sent rather than trusted to the code before
    it: no write transaction may be open (its rows could still roll back), and the stored position committed for
    this very journal must reach ``upto``. Not an ``assert``: it must hold under ``python -O`` too.
    """
    state = store.journal_state(device, journal)
    if store.conn.in_transaction or state is None or state[0] < upto:
        raise StoreError(
            f"refusing to acknowledge position {upto} of journal {journal} of {device}: the database has it stored "
            f"only to {None if state is None else state[0]}{' (uncommitted)' if store.conn.in_transaction else ''} "
            "— nothing was trimmed; this is a bug in nightcell, please report it"
        )


def _gap_warning(journal: int, lo: int, hi: int) -> str:
    return (f"the board no longer holds positions {lo}–{hi} of journal {journal}: another host may have synced and "
            "acknowledged them; merge that host's database to get them")


def _check_anchor(store: Store, device: str, journal: int, sent: tuple[Any, Any, int], summary: SyncSummary) -> None:
    """The anchor sent travels back in the journal: say so if the board recorded another time (a garbled line)."""
    boot, seq, host_ms = sent
    if boot is None or seq is None:
        return
    here = store.host_boot(device, journal, int(boot))  # the board's boot number, as this host numbers it
    if here is None:
        return
    rows = store.conn.execute("SELECT host_unix_ms FROM anchors WHERE device = ? AND boot = ? AND seq = ?",
                              (device, here, seq)).fetchall()
    if rows and rows[0][0] != host_ms:
        off_s = (rows[0][0] - host_ms) / 1000.0
        summary.warnings.append(
            f"the clock set during this sync came back {abs(off_s):.3f} s {'later' if off_s > 0 else 'earlier'} than "
            "the time sent: the request was damaged on the way; times of the readings since the board last started "
            "may be off"
        )


def sync_ports(
    ports: Sequence[str],
    db: str | Path,
    *,
    parallel: bool = False,
    acknowledge: bool = True,
    timeout: float = 5.0,
    clock: Callable[[], float] = time.time,
    progress: Callable[[str, int, int, int], None] | None = None,
) -> list[dict[str, Any]]:
    """Sync several boards into one database, one after another or (``parallel``) all at once.

    Each port gets its own connection to the database; WAL, ``BEGIN IMMEDIATE`` and the busy timeout let their
    batches take turns. A board that fails does not stop the others: its entry carries ``error`` instead of
    ``summary``. ``progress(port, done_bytes, total_bytes, records)``.
    """

    def one(port: str) -> dict[str, Any]:
        entry: dict[str, Any] = {"port": port}
        try:
            with Board.open(port, timeout=timeout) as board, Store.open(db) as store:
                cb = (lambda d, t, r: progress(port, d, t, r)) if progress else None
                summary = sync_board(board, store, acknowledge=acknowledge, clock=clock, progress=cb)
            entry["summary"] = summary
        except (NightcellError, DeviceError) as exc:
            entry["error"] = str(exc)
        return entry

    Store.open(db).close()  # create and migrate once, before several connections race to
    if not parallel or len(ports) < 2:
        return [one(p) for p in ports]
    with concurrent.futures.ThreadPoolExecutor(max_workers=min(len(ports), 16)) as pool:
        return list(pool.map(one, ports))
