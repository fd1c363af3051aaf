"""Merge another host's nightcell database into this one: idempotent, and loud about disagreements.

A department gathers the laptops of several classes into one file. Raw rows carry their identity (device + journal
+ boot + seq [+ channel]; the journal through ``journal_boots``, whose boot numbers may differ between hosts and are
translated first), so a row already here is skipped and merging the same file twice adds nothing. A row with the same
identity but different content is a conflict: it is listed (in the report and in ``merge_conflicts``), the row here
is kept, and the other is not taken — raw data is never overwritten. Device metadata that disagrees (label, board,
firmware) is reported the same way. Sync progress (``journals``) stays this host's own: positions acknowledged by
another host say nothing about what this host still has to read, and a sync that re-reads a stretch adds nothing.
Everything happens in one transaction. This module never talks to a board.

Example::

    with Store.open("department.db") as store:
        report = merge_database(store, "class-3b.db")
        print(report.text())
"""

from __future__ import annotations

import contextlib
import json
import os
import sqlite3
import tempfile
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from ..errors import InputError
from .database import Store
from .tables import RAW_IDENTITY
from .clocks import rebuild_clocks

__all__ = ["MergeReport", "merge_database", "RAW_IDENTITY"]


# Where a row was read from is provenance, not content: two hosts may have read it at different journal positions.
_PROVENANCE = {"boots": {"journal", "position"}}
_DEVICE_METADATA = ("board", "firmware", "label")
_MAX_LISTED = 20


@dataclass
class MergeReport:
    """What a merge did: new rows per table, and every disagreement found (nothing was overwritten)."""

    source: str
    new_rows: dict[str, int] = field(default_factory=dict)
    conflicts: list[dict[str, Any]] = field(default_factory=list)
    merge_id: int | None = None
    applied: bool = True

    @property
    def new(self) -> int:
        return sum(self.new_rows.values())

    def to_dict(self) -> dict[str, Any]:
        return {"source": self.source, "new_rows": self.new_rows, "conflicts": self.conflicts,
                "merge_id": self.merge_id, "applied": self.applied}

    def text(self) -> str:
        lines = [f"merged {self.source}: {self.new} new rows"
                 + ("" if self.applied else " (not applied: conflicts found)")]
        lines += [f"  {t}: {n}" for t, n in sorted(self.new_rows.items()) if n]
        if self.conflicts:
            lines.append(f"{len(self.conflicts)} conflicting rows kept as they are here (the other copy was not "
                         "taken); see the table merge_conflicts:")
            for c in self.conflicts[:_MAX_LISTED]:
                lines.append(f"  {c['table']} {json.dumps(c['identity'], sort_keys=True)}: "
                             f"here {json.dumps(c['here'], sort_keys=True)}, "
                             f"there {json.dumps(c['there'], sort_keys=True)}")
            if len(self.conflicts) > _MAX_LISTED:
                lines.append(f"  … and {len(self.conflicts) - _MAX_LISTED} more")
        return "\n".join(lines)


def merge_database(store: Store, source: str | Path, *, strict: bool = False) -> MergeReport:
    """Merge the nightcell database at ``source`` into ``store``; returns a ``MergeReport``.

    ``source`` is opened first as a nightcell database (an older one is migrated, a newer one refused). With
    ``strict`` any conflict cancels the whole merge (nothing is written) and the report says so.
    """
    src = Path(source)
    if not src.exists():
        raise InputError(f"no database at {src}: give the path of the other host's nightcell database")
    if os.path.exists(store.path) and os.path.samefile(src, store.path):
        raise InputError(f"{src} is the database being merged into: give another host's database")
    with contextlib.ExitStack() as held:
        return _merge(store, src, strict, held)


def _merge(store: Store, src: Path, strict: bool, held: contextlib.ExitStack) -> MergeReport:
    # a nightcell database of a version we can read, opened for reading only; one an older nightcell wrote is
    # read from a migrated copy (the file given is never changed)
    # The source is read through a private copy: a read-only file or folder (where SQLite could not make the
    # write-ahead log an ATTACH needs), or one an older nightcell wrote (migrated in memory), merges the same.
    source = held.enter_context(Store.open_read(src))
    folder = Path(held.enter_context(tempfile.TemporaryDirectory(prefix="nightcell-merge-")))
    attach = str(folder / "source.db")
    target = sqlite3.connect(attach)
    try:
        source.conn.backup(target)
    finally:
        target.close()
    source.close()
    report = MergeReport(str(src))
    conn = store.conn
    conn.execute("ATTACH DATABASE ? AS other", (attach,))
    try:
        with store.write():
            renumbered = _translate_boots(store, conn)
            for table, key in RAW_IDENTITY.items():
                there = _translated(conn, table) if renumbered else f"other.{table}"
                report.conflicts += _conflicts(conn, table, key, there)
                report.new_rows[table] = _insert_missing(conn, table, there)
            report.conflicts += _device_conflicts(conn)
            report.new_rows["devices"] = _merge_devices(conn)
            report.new_rows["results"] = _merge_results(conn)
            report.conflicts += _condition_conflicts(conn)
            report.new_rows["run_conditions"] = _merge_run_conditions(conn)
            report.new_rows["sync_sessions"] = _merge_sync_sessions(conn)
            if strict and report.conflicts:
                raise _Cancel()
            for (device,) in conn.execute("SELECT device FROM devices").fetchall():
                rebuild_clocks(store, device)
            cur = conn.execute("INSERT INTO merges(source, merged_unix, new_rows_json, conflicts) VALUES (?,?,?,?)",
                               (str(src.resolve()), time.time(), json.dumps(report.new_rows, sort_keys=True),
                                len(report.conflicts)))
            report.merge_id = int(cur.lastrowid)
            conn.executemany(
                "INSERT INTO merge_conflicts(merge_id, table_name, identity_json, here_json, there_json) "
                "VALUES (?,?,?,?,?)",
                [(report.merge_id, c["table"], json.dumps(c["identity"], sort_keys=True),
                  json.dumps(c["here"], sort_keys=True), json.dumps(c["there"], sort_keys=True))
                 for c in report.conflicts])
    except _Cancel:
        report.applied = False
        report.new_rows = {t: 0 for t in report.new_rows}
    finally:
        for table in RAW_IDENTITY:
            conn.execute(f"DROP TABLE IF EXISTS temp.merging_{table}")
        conn.execute("DROP TABLE IF EXISTS temp.merging_boot_numbers")
        conn.execute("DETACH DATABASE other")
    return report


def _translate_boots(store: Store, conn: sqlite3.Connection) -> bool:
    """Number the other database's boots as this one does, by (device, journal, journal_boot); True when some
    number differs (a later journal of a device numbered apart on one side, see ``Store.host_boot``).

    Fills ``temp.merging_boot_numbers(device, there, here)`` and records the boots new here in ``journal_boots``.
    A boot the other database stored with no journal recorded counts as journal 0 (unknown).
    """
    theirs = conn.execute(
        "SELECT k.device, k.boot, j.journal, coalesce(j.journal_boot, k.boot) FROM ("
        + " UNION ".join(f"SELECT device, boot FROM other.{t}" for t in RAW_IDENTITY)
        + ") k LEFT JOIN other.journal_boots j ON j.device = k.device AND j.boot = k.boot "
        "ORDER BY k.device, k.boot").fetchall()
    pairs = []
    for device, there, journal, journal_boot in theirs:
        here = store.assign_host_boot(device, None if not journal else journal, journal_boot)
        pairs.append((device, there, here))
    conn.execute("CREATE TEMP TABLE merging_boot_numbers (device TEXT NOT NULL, there INTEGER NOT NULL, "
                 "here INTEGER NOT NULL, PRIMARY KEY (device, there))")
    conn.executemany("INSERT INTO temp.merging_boot_numbers VALUES (?,?,?)", pairs)
    return any(there != here for _, there, here in pairs)


def _translated(conn: sqlite3.Connection, table: str) -> str:
    """A temporary copy of the other database's ``table`` with its boots numbered as here; returns its name."""
    cols = _columns(conn, table)
    sel = ", ".join("n.here AS boot" if c == "boot" else f"t.{c}" for c in cols)
    name = f"temp.merging_{table}"
    conn.execute(f"CREATE TEMP TABLE merging_{table} AS SELECT {sel} FROM other.{table} t "
                 "JOIN temp.merging_boot_numbers n ON n.device = t.device AND n.there = t.boot")
    return name


class _Cancel(Exception):
    """Raised inside the transaction to roll a strict merge back."""


def _columns(conn: sqlite3.Connection, table: str) -> list[str]:
    return [r[1] for r in conn.execute(f"PRAGMA main.table_info({table})").fetchall()]


def _conflicts(conn: sqlite3.Connection, table: str, key: tuple[str, ...], there: str) -> list[dict[str, Any]]:
    cols = _columns(conn, table)
    content = [c for c in cols if c not in key and c not in _PROVENANCE.get(table, set())]
    on = " AND ".join(f"h.{k} = t.{k}" for k in key)
    differs = " OR ".join(f"h.{c} IS NOT t.{c}" for c in content)
    sel = ", ".join([f"h.{k}" for k in key] + [f"h.{c}" for c in content] + [f"t.{c}" for c in content])
    rows = conn.execute(f"SELECT {sel} FROM main.{table} h JOIN {there} t ON {on} WHERE {differs}").fetchall()
    out = []
    n = len(key)
    m = len(content)
    for r in rows:
        here = dict(zip(content, r[n:n + m]))
        there = dict(zip(content, r[n + m:]))
        changed = [c for c in content if here[c] != there[c]]
        out.append({"table": table, "identity": dict(zip(key, r[:n])),
                    "here": {c: here[c] for c in changed}, "there": {c: there[c] for c in changed}})
    return out


def _insert_missing(conn: sqlite3.Connection, table: str, there: str) -> int:
    cols = ", ".join(_columns(conn, table))
    before = conn.total_changes
    conn.execute(f"INSERT OR IGNORE INTO main.{table} ({cols}) SELECT {cols} FROM {there}")
    return conn.total_changes - before


def _device_conflicts(conn: sqlite3.Connection) -> list[dict[str, Any]]:
    out = []
    sel = ", ".join(f"h.{c}, t.{c}" for c in _DEVICE_METADATA)
    for row in conn.execute(f"SELECT h.device, {sel} FROM main.devices h JOIN other.devices t USING (device)"):
        here = {}
        there = {}
        for i, c in enumerate(_DEVICE_METADATA):
            a, b = row[1 + 2 * i], row[2 + 2 * i]
            if a is not None and b is not None and a != b:
                here[c], there[c] = a, b
        if here:
            out.append({"table": "devices", "identity": {"device": row[0]}, "here": here, "there": there})
    return out


def _merge_devices(conn: sqlite3.Connection) -> int:
    before = conn.total_changes
    conn.execute("INSERT OR IGNORE INTO main.devices SELECT * FROM other.devices")
    added = conn.total_changes - before
    # Fill what is unknown here, and widen the seen-interval; a value known on both sides is never replaced.
    conn.execute(
        "UPDATE main.devices SET "
        "board = coalesce(board, (SELECT t.board FROM other.devices t WHERE t.device = devices.device)), "
        "firmware = coalesce(firmware, (SELECT t.firmware FROM other.devices t WHERE t.device = devices.device)), "
        "label = coalesce(label, (SELECT t.label FROM other.devices t WHERE t.device = devices.device)), "
        "first_seen_unix = min(coalesce(first_seen_unix, 1e300), coalesce((SELECT t.first_seen_unix FROM "
        "other.devices t WHERE t.device = devices.device), 1e300)), "
        "last_seen_unix = max(coalesce(last_seen_unix, 0), coalesce((SELECT t.last_seen_unix FROM other.devices t "
        "WHERE t.device = devices.device), 0)) "
        "WHERE device IN (SELECT device FROM other.devices)"
    )
    return added


def _merge_results(conn: sqlite3.Connection) -> int:
    before = conn.total_changes
    conn.execute(
        "INSERT INTO main.results(kind, label, created_unix, nightcell_version, inputs_json, result_json) "
        "SELECT t.kind, t.label, t.created_unix, t.nightcell_version, t.inputs_json, t.result_json "
        "FROM other.results t WHERE NOT EXISTS (SELECT 1 FROM main.results h WHERE h.kind = t.kind AND "
        "h.label = t.label AND h.created_unix = t.created_unix AND h.inputs_json = t.inputs_json AND "
        "h.result_json = t.result_json)"
    )
    return conn.total_changes - before


_THEIR_CONDITIONS = (
    "SELECT t.device, coalesce(n.here, t.start_boot) AS start_boot, t.start_seq, t.quantity, t.value, t.source, "
    "t.recorded_unix FROM other.run_conditions t LEFT JOIN temp.merging_boot_numbers n "
    "ON n.device = t.device AND n.there = t.start_boot")
"""The other database's run conditions, each keyed by its run's start mark with the boot numbered as here."""


def _condition_conflicts(conn: sqlite3.Connection) -> list[dict[str, Any]]:
    """A quantity of one run recorded on both sides with another value: here's is kept, the other listed."""
    rows = conn.execute(
        "SELECT h.device, h.start_boot, h.start_seq, h.quantity, h.value, h.source, t.value, t.source "
        f"FROM main.run_conditions h JOIN ({_THEIR_CONDITIONS}) t ON h.device = t.device AND "
        "h.start_boot = t.start_boot AND h.start_seq = t.start_seq AND h.quantity = t.quantity "
        "WHERE h.value IS NOT t.value").fetchall()
    return [{"table": "run_conditions",
             "identity": {"device": r[0], "start_boot": r[1], "start_seq": r[2], "quantity": r[3]},
             "here": {"value": r[4], "source": r[5]}, "there": {"value": r[6], "source": r[7]}} for r in rows]


def _merge_run_conditions(conn: sqlite3.Connection) -> int:
    """The other database's run conditions that are not recorded here, under this database's boot numbers."""
    before = conn.total_changes
    conn.execute("INSERT OR IGNORE INTO main.run_conditions(device, start_boot, start_seq, quantity, value, source, "
                 f"recorded_unix) {_THEIR_CONDITIONS}")
    return conn.total_changes - before


def _merge_sync_sessions(conn: sqlite3.Connection) -> int:
    cols = [c for c in _columns(conn, "sync_sessions") if c != "id"]
    names = ", ".join(cols)
    before = conn.total_changes
    conn.execute(
        f"INSERT INTO main.sync_sessions ({names}) SELECT {', '.join('t.' + c for c in cols)} "
        "FROM other.sync_sessions t WHERE NOT EXISTS (SELECT 1 FROM main.sync_sessions h WHERE "
        "h.device = t.device AND h.journal = t.journal AND h.host = t.host AND h.started_unix = t.started_unix)"
    )
    return conn.total_changes - before
