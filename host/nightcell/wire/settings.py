"""The device settings table, read from ``schema/settings.json`` (keys, types, ranges, defaults, units): the one
place the host learns what a board accepts. The firmware checks the same table through its generated copy
(``firmware/nightcell_fw/ranges.py``, written by ``schema/write_ranges.py``).

Uses nothing but the standard library; never talks to a board.

Usage::

    from nightcell.wire import settings
    lo, hi = settings.whole_range("interval_ms")     # (200, 86400000)
    settings.default("reads")                        # 16
"""

from __future__ import annotations

import functools
import importlib.resources
import json
from typing import Any

__all__ = ["table", "setting", "whole_range", "number_range", "default", "unit", "label_max_bytes",
           "max_channels",
           "interval_margin_ms"]


@functools.lru_cache(maxsize=1)
def table() -> dict[str, Any]:
    """The whole table as schema/settings.json gives it."""
    text = importlib.resources.files("nightcell.schema").joinpath("settings.json").read_text(encoding="utf-8")
    return json.loads(text)


def setting(key: str) -> dict[str, Any]:
    """One setting's entry (type, range, default, unit, meaning); KeyError for a key the board does not have."""
    return table()["settings"][key]


def whole_range(key: str) -> tuple[int, int]:
    """(min, max) of a whole-number setting."""
    d = setting(key)
    if d["type"] != "integer":
        raise KeyError(f"{key} is not a whole-number setting")
    return int(d["min"]), int(d["max"])


def number_range(key: str) -> tuple[float, float]:
    """(min, max) of a setting that takes any number."""
    d = setting(key)
    if d["type"] not in ("number", "integer"):
        raise KeyError(f"{key} is not a number setting")
    return float(d["min"]), float(d["max"])


def default(key: str) -> Any:
    return setting(key)["default"]


def unit(key: str) -> str | None:
    return setting(key)["unit"]


def label_max_bytes() -> int:
    return int(setting("label")["max_bytes"])


def max_channels() -> int:
    return int(setting("channels")["max_items"])


def interval_margin_ms() -> int:
    """How much longer than one measurement (``hello``'s ``measure_ms``) an interval must be."""
    return int(table()["interval_margin_ms"])
