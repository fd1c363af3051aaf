"""Board time to wall-clock time: one clock per boot, rebuilt from the host's clock anchors.

A board keeps only (boot, milliseconds since that boot). While connected, the host journals anchors (its own Unix
time at a board uptime). With two or more anchors in a boot we fit wall = unix_at_zero + rate · uptime by least
squares, so crystal drift is corrected (quality ``fitted``). With one anchor the drift cannot be seen: the boot
borrows the rate fitted on another boot of the same board when there is one (quality ``borrowed``: same crystal,
usually the same bench) and otherwise assumes rate 1 (quality ``one-anchor``); both rest on one anchor and say so. A
boot without an anchor gets no clock at all and keeps its relative times until an anchor arrives. This module
computes; it never talks to a board.

Example::

    clock = fit_boot_clock([(1_000, 1_700_000_000_000), (600_000, 1_700_000_599_030)])
    clock.to_unix(300_000)
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Iterable, Sequence

import numpy as np

__all__ = ["BootClock", "fit_boot_clock", "fit_clocks", "unwrap_uptimes", "UPTIME_WRAP_MS"]

UPTIME_WRAP_MS = 1 << 32
"""Record uptimes are u32 milliseconds (schema/records.md): they wrap after 49.7 days."""

_MIN_SPAN_S = 600.0
"""Anchors closer together than this cannot show drift; they are treated as one. An anchor's host time carries the
USB round trip's jitter (tens of ms at worst); over 600 s that is below the ~50 ppm a board crystal drifts, whereas
two anchors a few seconds apart once gave a fitted rate 5000 ppm off."""


@dataclass
class BootClock:
    """Wall-clock seconds = unix_at_zero + rate · uptime_s for one boot.

    ``quality`` is ``fitted`` (two or more anchors, drift fitted), ``borrowed`` (one anchor, the rate of another
    boot of the same board) or ``one-anchor`` (one anchor, rate 1 assumed). ``anchor_seqs`` names the inputs.
    """

    unix_at_zero: float
    rate: float
    anchors: int
    quality: str
    residual_ms: float | None = None
    anchor_seqs: list[int] = field(default_factory=list)
    span_s: float = 0.0

    def to_unix(self, uptime_ms: float | np.ndarray) -> float | np.ndarray:
        return self.unix_at_zero + self.rate * np.asarray(uptime_ms, dtype=float) / 1000.0


def fit_boot_clock(anchors: Sequence[tuple[int, int]], *, borrowed_rate: float | None = None) -> BootClock | None:
    """Fit a boot's clock from (uptime_ms, host_unix_ms) anchors; None when there are none.

    Uptimes are centred before fitting, so that a boot of many days keeps sub-millisecond precision in float64.
    ``borrowed_rate`` is used when the anchors cannot show drift (one anchor, or all within a second).
    """
    if not anchors:
        return None
    up = np.array([a[0] for a in anchors], dtype=float) / 1000.0
    wall = np.array([a[1] for a in anchors], dtype=float) / 1000.0
    span = float(np.ptp(up))
    if len(anchors) == 1 or span < _MIN_SPAN_S:
        rate = 1.0 if borrowed_rate is None else float(borrowed_rate)
        offset = float(np.mean(wall - rate * up))
        return BootClock(offset, rate, len(anchors), "one-anchor" if borrowed_rate is None else "borrowed",
                         span_s=span)
    u0 = up.mean()
    w0 = wall.mean()
    du = up - u0
    rate = float(np.dot(du, wall - w0) / np.dot(du, du))
    unix_at_zero = float(w0 - rate * u0)
    resid = wall - (unix_at_zero + rate * up)
    rms = float(np.sqrt(np.mean(resid**2)) * 1000.0)
    return BootClock(unix_at_zero, rate, len(anchors), "fitted", rms, span_s=span)


def unwrap_uptimes(values: Iterable[int], last: int | None = None) -> list[int]:
    """Undo the u32 wrap of record uptimes (a boot longer than 49.7 days), using record order.

    ``last`` is the unwrapped uptime of the record before these (already stored), if any. A value more than half the
    wrap below the previous one has wrapped.
    """
    out = []
    prev = last
    for v in values:
        v = int(v) & (UPTIME_WRAP_MS - 1)
        if prev is None:
            u = v
        else:
            u = (prev - (prev % UPTIME_WRAP_MS)) + v
            if u < prev - UPTIME_WRAP_MS // 2:
                u += UPTIME_WRAP_MS
            elif u > prev + UPTIME_WRAP_MS // 2 and u >= UPTIME_WRAP_MS:
                u -= UPTIME_WRAP_MS
        out.append(u)
        prev = u
    return out


def fit_clocks(anchors: dict[tuple[str, int], list[tuple[int, int, int]]]) -> dict[tuple[str, int], BootClock]:
    """Clocks of every boot with an anchor, from ``{(device, boot): [(seq, uptime_ms, host_unix_ms), ...]}``.

    A one-anchor boot borrows the drift of the same board's longest fitted boot (quality ``borrowed``).
    """
    clocks: dict[tuple[str, int], BootClock] = {}
    for key, rows in anchors.items():
        clock = fit_boot_clock([(a[1], a[2]) for a in rows])
        if clock is not None:
            clock.anchor_seqs = [a[0] for a in rows]
            clocks[key] = clock
    # One-anchor boots borrow the drift of the same board's longest fitted boot.
    best: dict[str, BootClock] = {}
    for (dev, _), clock in clocks.items():
        if clock.quality == "fitted" and (dev not in best or clock.span_s > best[dev].span_s):
            best[dev] = clock
    for (dev, boot), clock in list(clocks.items()):
        if clock.quality == "one-anchor" and dev in best:
            rows = anchors[(dev, boot)]
            again = fit_boot_clock([(a[1], a[2]) for a in rows], borrowed_rate=best[dev].rate)
            assert again is not None
            again.anchor_seqs = clock.anchor_seqs
            clocks[(dev, boot)] = again
    return clocks
