"""Whether a planned run fits in a board's journal, from what the board reports (``hello``: free bytes, bytes per
sample measured in its run, interval, channels): the longest run that fits and the interval that would fit.

Pure arithmetic on the board's numbers; never talks to the board. Where the board has not measured its bytes per
sample yet (fewer than 20 samples since its run began), a design figure is used and said to be one:
``DESIGN_BYTES_PER_SAMPLE`` per channel, the goal the journal benchmark meets (DEVELOPERS.md: ≤ 4 B a sample at one
channel; 3.26 B measured at 1 s).

Usage::

    room = plan_run(info, seconds=7 * 86400)
    if not room.fits: print(room.message())
"""

from __future__ import annotations

import math
import re
from dataclasses import asdict, dataclass
from typing import Any

from ..errors import InputError

__all__ = ["Room", "plan_run", "parse_duration", "DESIGN_BYTES_PER_SAMPLE", "human_duration"]

DESIGN_BYTES_PER_SAMPLE = 4.0
_UNITS = {"s": 1, "m": 60, "min": 60, "h": 3600, "d": 86400, "w": 7 * 86400}


def parse_duration(text: str) -> float:
    """Seconds in ``7d``, ``36h``, ``90m``, ``45s``, ``1w`` or a plain number of seconds; InputError otherwise."""
    m = re.fullmatch(r"\s*(\d+(?:\.\d+)?)\s*(s|m|min|h|d|w)?\s*", text or "")
    if not m or float(m.group(1)) <= 0:
        raise InputError(f"--for {text!r} is not a duration: write e.g. 7d, 36h, 90m or 600s")
    return float(m.group(1)) * _UNITS[m.group(2) or "s"]


def human_duration(seconds: float) -> str:
    """Two significant figures in the largest unit that keeps the number ≥ 1 (days, hours, minutes, seconds)."""
    for name, size in (("days", 86400), ("h", 3600), ("min", 60)):
        if seconds >= size:
            return f"{_two(seconds / size)} {name}"
    return f"{_two(seconds)} s"


def _two(x: float) -> str:
    if x <= 0:
        return "0"
    digits = max(0, 1 - int(math.floor(math.log10(x))))
    return f"{round(x, digits):.{digits}f}"


@dataclass
class Room:
    """The room a planned run has on a board (bytes and seconds are board figures; ``design`` says the bytes per
    sample are the design figure, not measured)."""

    device: str
    seconds_wanted: float
    free_bytes: int
    bytes_per_sample: float
    design: bool
    interval_ms: int
    seconds_that_fit: float
    interval_ms_that_fits: int

    @property
    def fits(self) -> bool:
        return self.seconds_that_fit >= self.seconds_wanted

    def to_dict(self) -> dict[str, Any]:
        return dict(asdict(self), fits=self.fits)

    def message(self) -> str:
        src = "the design figure of" if self.design else "measured"
        return (f"a run of {human_duration(self.seconds_wanted)} does not fit on {self.device}: "
                f"{self.free_bytes / 1e6:.2f} MB free at {src} {self.bytes_per_sample:.2f} B a sample every "
                f"{self.interval_ms / 1000:g} s holds {human_duration(self.seconds_that_fit)} (the longest run that "
                f"fits); an interval of {self.interval_ms_that_fits / 1000:g} s or more would fit "
                f"{human_duration(self.seconds_wanted)}. Sync the board to free room, set a longer interval with "
                "`nightcell setup --interval`, or pass --even-if-short to start anyway")


def plan_run(info: dict[str, Any], seconds: float) -> Room:
    """The room for a run of ``seconds`` at the board's interval, from its ``hello`` info."""
    free = int(info.get("free_bytes") or 0)
    interval = int(info.get("interval_ms") or 0)
    if interval <= 0:
        raise InputError("the board did not say its interval: update its firmware (`nightcell deploy`)")
    bps = info.get("bytes_per_sample")
    design = not bps
    if design:
        bps = DESIGN_BYTES_PER_SAMPLE * max(1, int(info.get("channels") or 1))
    samples = free / float(bps)
    fit_s = samples * interval / 1000
    need_ms = math.ceil(seconds * 1000 / samples) if samples > 0 else 86_400_000
    return Room(device=str(info.get("device", "the board")), seconds_wanted=seconds, free_bytes=free,
                bytes_per_sample=float(bps), design=design, interval_ms=interval, seconds_that_fit=fit_s,
                interval_ms_that_fits=max(interval, need_ms))
