"""The raw tables of the schema (``schema/migrations``), named once: every room that lists them imports them here.

Raw rows are what boards journaled; they are never changed or deleted, and their identity makes merging idempotent.
"""

from __future__ import annotations

__all__ = ["RAW_IDENTITY", "RAW_TABLES", "TIMED_RAW_TABLES"]

RAW_IDENTITY: dict[str, tuple[str, ...]] = {
    "boots": ("device", "boot"),
    "samples": ("device", "boot", "seq", "channel"),
    "marks": ("device", "boot", "seq"),
    "mark_counts": ("device", "boot", "seq", "channel"),
    "anchors": ("device", "boot", "seq"),
    "events": ("device", "boot", "seq"),
    "settings_records": ("device", "boot", "seq"),
    "health": ("device", "boot", "seq"),
}
"""Raw tables and the columns that identify a row."""

RAW_TABLES: tuple[str, ...] = tuple(RAW_IDENTITY)
"""Every raw table."""

TIMED_RAW_TABLES: tuple[str, ...] = tuple(t for t in RAW_TABLES if t != "mark_counts")
"""The raw tables whose rows carry the board's uptime (a mark's counts share their mark's)."""
