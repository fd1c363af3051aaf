"""Board time to wall-clock time: one clock per boot, rebuilt from the host's clock anchors.

A board keeps only (boot, milliseconds since that boot). While connected, the host journals anchors (its own Unix
time at a board uptime). With two or more anchors in a boot we fit wall = unix_at_zero + rate · uptime by least
squares, so crystal drift is corrected; with one we assume rate 1 and say so; a boot without an anchor borrows
nothing and keeps relative times until one arrives. This module computes; it never talks to a board.

Example::

    clock = fit_boot_clock([(1_000, 1_700_000_000_000), (600_000, 1_700_000_599_030)])
    clock.to_unix(300_000)
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Iterable, Sequence

import numpy as np

from .store import Store

__all__ = ["BootClock", "fit_boot_clock", "rebuild_clocks"]


@dataclass
class BootClock:
    """Wall-clock seconds = unix_at_zero + rate · uptime_s for one boot."""

    unix_at_zero: float
    rate: float
    anchors: int
    quality: str
    residual_ms: float | None = None

    def to_unix(self, uptime_ms: float | np.ndarray) -> float | np.ndarray:
        return self.unix_at_zero + self.rate * np.asarray(uptime_ms, dtype=float) / 1000.0


def fit_boot_clock(anchors: Sequence[tuple[int, int]]) -> BootClock | None:
    """Fit a boot's clock from (uptime_ms, host_unix_ms) anchors; None when there are none.

    Uptimes are centred before fitting, so that a boot of many days keeps millisecond precision in float64.
    """
    if not anchors:
        return None
    up = np.array([a[0] for a in anchors], dtype=float) / 1000.0
    wall = np.array([a[1] for a in anchors], dtype=float) / 1000.0
    if len(anchors) == 1 or np.ptp(up) < 1.0:
        # One anchor (or all at the same moment): drift cannot be seen; take the mean offset at rate 1.
        offset = float(np.mean(wall - up))
        return BootClock(offset, 1.0, len(anchors), "one-anchor")
    u0 = up.mean()
    w0 = wall.mean()
    du = up - u0
    rate = float(np.dot(du, wall - w0) / np.dot(du, du))
    unix_at_zero = float(w0 - rate * u0)
    resid = wall - (unix_at_zero + rate * up)
    rms = float(np.sqrt(np.mean(resid**2)) * 1000.0)
    return BootClock(unix_at_zero, rate, len(anchors), "fitted", rms)


def _unwrap(values: Iterable[int]) -> list[int]:
    """Undo the u32 wrap of uptime_ms (a boot longer than 49.7 days), using record order."""
    out = []
    offset = 0
    prev = None
    for v in values:
        if prev is not None and v + offset < prev - (1 << 31):
            offset += 1 << 32
        prev = v + offset
        out.append(prev)
    return out


def rebuild_clocks(store: Store, device: str | None = None) -> int:
    """Recompute ``boot_clocks`` from the stored anchors (inside the caller's transaction). Returns boots with a clock."""
    where = "WHERE device = ?" if device else ""
    params = (device,) if device else ()
    rows = store.conn.execute(
        f"SELECT device, boot, uptime_ms, host_unix_ms FROM anchors {where} ORDER BY device, boot, seq", params
    ).fetchall()
    by_boot: dict[tuple[str, int], list[tuple[int, int]]] = {}
    for dev, boot, up, host in rows:
        by_boot.setdefault((dev, boot), []).append((up, host))
    store.conn.execute(f"DELETE FROM boot_clocks {where}", params)
    n = 0
    for (dev, boot), anchors in by_boot.items():
        ups = _unwrap(a[0] for a in anchors)
        clock = fit_boot_clock([(u, a[1]) for u, a in zip(ups, anchors)])
        if clock is None:
            continue
        store.conn.execute(
            "INSERT INTO boot_clocks VALUES (?,?,?,?,?,?,?)",
            (dev, boot, clock.unix_at_zero, clock.rate, clock.anchors, clock.quality, clock.residual_ms),
        )
        n += 1
    return n
