"""The questions the tasks ask the database, as methods of ``Store`` (it inherits them), so that no SQL lives
outside this room. Each method names what it answers in the trade's words; values always travel as parameters.
"""

from __future__ import annotations

import json
import sqlite3
from typing import Any, Iterator

__all__ = ["StoreQueries"]


class StoreQueries:
    """Read and record what analyses, reports, the demo and the commands need (mixed into ``Store``)."""

    conn: sqlite3.Connection  # and write(): both come with Store

    def _rows(self, sql: str, params: tuple = ()) -> list[dict[str, Any]]:
        cur = self.conn.execute(sql, params)
        cols = [d[0] for d in cur.description]
        return [dict(zip(cols, row)) for row in cur.fetchall()]

    def _one(self, sql: str, params: tuple = ()) -> dict[str, Any] | None:
        rows = self._rows(sql, params)
        return rows[0] if rows else None

    # -- marks and runs ----------------------------------------------------------------------------------------------
    def mark(self, device: str, boot: int, seq: int, kind: str | None = None) -> dict[str, Any] | None:
        """The marks row journaled as (boot, seq) by ``device`` (only if it is of ``kind`` when given)."""
        if kind is None:
            return self._one("SELECT * FROM marks WHERE device = ? AND boot = ? AND seq = ?", (device, boot, seq))
        return self._one("SELECT * FROM marks WHERE device = ? AND mark = ? AND boot = ? AND seq = ?",
                         (device, kind, boot, seq))

    def marks_labelled(self, device: str, kind: str, label: str) -> list[dict[str, Any]]:
        """The ``kind`` marks of ``device`` whose label is exactly ``label``, in journal order (a blank named by
        its label)."""
        return self.query("SELECT * FROM marks WHERE device = ? AND mark = ? AND label = ? ORDER BY boot, seq",
                          (device, kind, label))

    def run_starts_after(self, device: str, boot: int, seq: int) -> Iterator[tuple[int, int, int]]:
        """(boot, seq, source) of each run_start mark of ``device`` after (boot, seq), in journal order."""
        yield from self.conn.execute(
            "SELECT boot, seq, source FROM marks WHERE device = ? AND mark = 'run_start' AND (boot, seq) > (?, ?) "
            "ORDER BY boot, seq", (device, boot, seq))

    def resume_marks(self, device: str, boot: int, source: int) -> list[int]:
        """Seqs of the run_start marks of ``source`` (the board's own resume) journaled in one boot."""
        return [seq for (seq,) in self.conn.execute(
            "SELECT seq FROM marks WHERE device = ? AND boot = ? AND mark = 'run_start' AND source = ? ORDER BY seq",
            (device, boot, source))]

    def mark_times(self, mark: str) -> dict[tuple[str, int, int], str]:
        """Wall-clock time (UTC text, '' where the boot has no clock) of every mark of one kind, by (device, boot,
        seq)."""
        rows = self.conn.execute(
            "SELECT DISTINCT device, boot, seq, wall_clock_utc FROM mark_readings WHERE mark = ?", (mark,))
        return {(dev, boot, seq): utc or "" for dev, boot, seq, utc in rows}

    def mark_reading(self, device: str, boot: int, seq: int) -> dict[str, Any] | None:
        """A mark's kind, label and wall-clock time (UTC text, None where its boot has no clock), or None."""
        return self._one("SELECT mark, label, wall_clock_utc FROM mark_readings WHERE device = ? AND boot = ? "
                         "AND seq = ? LIMIT 1", (device, int(boot), int(seq)))

    # -- devices, boots, clocks, settings, events --------------------------------------------------------------------
    def device(self, device: str) -> dict[str, Any] | None:
        """The devices row of ``device`` (board profile, firmware, label, last seen)."""
        return self._one("SELECT * FROM devices WHERE device = ?", (device,))

    def boot(self, device: str, boot: int) -> dict[str, Any] | None:
        """The boots row: firmware, board profile and reset cause of one boot."""
        return self._one("SELECT * FROM boots WHERE device = ? AND boot = ?", (device, boot))

    def boot_clock(self, device: str, boot: int) -> dict[str, Any] | None:
        """The clock rebuilt for one boot (quality, anchors, rate), or None when it has no anchor."""
        return self._one("SELECT * FROM boot_clocks WHERE device = ? AND boot = ?", (device, boot))

    def settings_before(self, device: str, boot: int, seq: int) -> dict[str, Any] | None:
        """The last settings record of ``device`` journaled before (boot, seq): boot, seq and its JSON text."""
        return self._one(
            "SELECT boot, seq, json FROM settings_records WHERE device = ? AND (boot < ? OR (boot = ? AND seq < ?)) "
            "ORDER BY boot DESC, seq DESC LIMIT 1", (device, boot, boot, seq))

    def event_texts(self, device: str, boot: int) -> list[str]:
        """The events one boot journaled (recovery, restarts), in order."""
        return [t for (t,) in self.conn.execute(
            "SELECT text FROM events WHERE device = ? AND boot = ? ORDER BY seq", (device, boot))]

    def sample_count(self, device: str | None = None, boot: int | None = None, channel: int = 0) -> int:
        """Samples of one channel: of every device, of one device, or of one boot of it."""
        given = {name: value for name, value in (("channel", channel), ("device", device), ("boot", boot))
                 if value is not None}  # column names of this method's own, values as parameters
        return self.conn.execute("SELECT count(*) FROM samples WHERE " + " AND ".join(f"{c} = ?" for c in given),
                                 tuple(given.values())).fetchone()[0]

    # -- run conditions ------------------------------------------------------------------------------------------------
    def record_run_condition(self, device: str, start_boot: int, start_seq: int, quantity: str, value: float,
                             source: str, recorded_unix: float) -> None:
        """Record (or replace) one condition of the run that starts at (start_boot, start_seq), in its own
        transaction."""
        with self.write():
            self.conn.execute(
                "INSERT INTO run_conditions(device, start_boot, start_seq, quantity, value, source, recorded_unix) "
                "VALUES (?,?,?,?,?,?,?) ON CONFLICT(device, start_boot, start_seq, quantity) DO UPDATE SET "
                "value = excluded.value, source = excluded.source, recorded_unix = excluded.recorded_unix",
                (device, start_boot, start_seq, quantity, value, source, recorded_unix))

    def run_condition_rows(self, device: str | None = None, start_boot: int | None = None,
                           start_seq: int | None = None) -> list[tuple[str, int, int, str, float, str]]:
        """(device, start_boot, start_seq, quantity, value, source) of every recorded condition, or of one run's."""
        sql = "SELECT device, start_boot, start_seq, quantity, value, source FROM run_conditions"
        params: tuple = ()
        if device is not None:
            sql += " WHERE device = ? AND start_boot = ? AND start_seq = ?"
            params = (device, start_boot, start_seq)
        return self.conn.execute(sql + " ORDER BY device, start_boot, start_seq, quantity", params).fetchall()

    # -- results ---------------------------------------------------------------------------------------------------
    def results(self, kind: str | None = None) -> list[dict[str, Any]]:
        """Every saved result (or those of one kind) with its inputs and result decoded from JSON."""
        if kind:
            rows = self._rows("SELECT * FROM results WHERE kind = ? ORDER BY id", (kind,))
        else:
            rows = self._rows("SELECT * FROM results ORDER BY id")
        return [dict(r, inputs=json.loads(r.pop("inputs_json")), result=json.loads(r.pop("result_json")))
                for r in rows]
