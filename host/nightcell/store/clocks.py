"""Boot clocks in the database: rebuilt from the stored anchors by ``science.timeline.fit_clocks``.

Called inside the caller's transaction (sync and merge rebuild a device's clocks with the rows that changed them).
"""

from __future__ import annotations

import json
from typing import Any

from ..science.timeline import fit_clocks

__all__ = ["rebuild_clocks"]


def rebuild_clocks(store: Any, device: str | None = None) -> int:
    """Recompute ``boot_clocks`` from the stored anchors (inside the caller's transaction). Returns boots with a clock.

    Anchor uptimes are stored unwrapped by the store, so they are used as they are.
    """
    where = "WHERE device = ?" if device else ""
    params = (device,) if device else ()
    rows = store.conn.execute(
        f"SELECT device, boot, seq, uptime_ms, host_unix_ms FROM anchors {where} ORDER BY device, boot, seq", params
    ).fetchall()
    by_boot: dict[tuple[str, int], list[tuple[int, int, int]]] = {}
    for dev, boot, seq, up, host in rows:
        by_boot.setdefault((dev, boot), []).append((seq, up, host))
    clocks = fit_clocks(by_boot)
    store.conn.execute(f"DELETE FROM boot_clocks {where}", params)
    store.conn.executemany(
        "INSERT INTO boot_clocks(device, boot, unix_at_zero, rate, anchors, quality, residual_ms, anchor_seqs_json) "
        "VALUES (?,?,?,?,?,?,?,?)",
        [(dev, boot, c.unix_at_zero, c.rate, c.anchors, c.quality, c.residual_ms, json.dumps(c.anchor_seqs))
         for (dev, boot), c in clocks.items()],
    )
    return len(clocks)
