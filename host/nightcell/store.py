"""The SQLite store: open and migrate, ingest decoded records, and answer the queries the analysis needs.

Owns the database file. Raw rows are inserted once and never changed (triggers enforce it); everything derived
can be recomputed from them. Writes happen in ``BEGIN IMMEDIATE`` transactions with a busy timeout, so several
syncs and readers can share one file. This module never talks to a board.

Example::

    with Store.open("class.db") as store:
        print(store.devices())
"""

from __future__ import annotations

import contextlib
import importlib.resources
import json
import sqlite3
import time
from dataclasses import dataclass
from itertools import repeat
from pathlib import Path
from typing import TYPE_CHECKING, Any, Iterable, Iterator

import numpy as np

from . import __version__
from .errors import InputError, SchemaTooNew, StoreError
from .frames import (
    KIND_ANCHOR,
    KIND_BOOT,
    KIND_EVENT,
    KIND_HEALTH,
    KIND_MARK,
    KIND_SAMPLES,
    KIND_SETTINGS,
    MARK_NAMES,
    NO_TEMPERATURE,
    Record,
    sample_columns,
)
from .timeline import unwrap_uptimes

if TYPE_CHECKING:
    import sqlite_utils

__all__ = ["Store", "migration_files", "Run"]

BUSY_TIMEOUT_S = 30.0
_COMPACT = (",", ":")  # JSON of stored results without the padding spaces
_NO_END = 1 << 62  # beyond any boot or seq: the upper bound of a run that has no stop mark
MIGRATION_SET = "nightcell"


def migration_files() -> list[tuple[str, str]]:
    """The ordered (name, SQL) migrations shipped in ``schema/migrations``."""
    root = importlib.resources.files("nightcell.schema").joinpath("migrations")
    files = sorted((p.name, p.read_text(encoding="utf-8")) for p in root.iterdir() if p.name.endswith(".sql"))
    return [(name[: -len(".sql")], sql) for name, sql in files]


def _statements(sql: str) -> Iterator[str]:
    """Split a script into whole statements (``executescript`` would commit behind our transaction's back)."""
    buf = ""
    for line in sql.splitlines(keepends=True):
        buf += line
        if sqlite3.complete_statement(buf):
            stmt = buf.strip()
            buf = ""
            if stmt and not all(ln.strip().startswith("--") or not ln.strip() for ln in stmt.splitlines()):
                yield stmt
    if buf.strip() and not all(ln.strip().startswith("--") or not ln.strip() for ln in buf.splitlines()):
        raise StoreError("a migration file ends in an incomplete SQL statement")


def _migrations() -> "sqlite_utils.Migrations":
    import sqlite_utils  # only to migrate: opening a database that is up to date does not load it (nor pandas)

    migrations = sqlite_utils.Migrations(MIGRATION_SET)
    for name, sql in migration_files():

        def apply(db: "sqlite_utils.Database", _sql: str = sql) -> None:
            for stmt in _statements(_sql):
                db.conn.execute(stmt)

        migrations(name=name)(apply)
    return migrations


@dataclass
class Run:
    """A run as the board marked it: start and stop marks (a run may continue across boots after a power cut)."""

    device: str
    label: str
    start_boot: int
    start_seq: int
    stop_boot: int | None
    stop_seq: int | None

    @property
    def key(self) -> str:
        return f"{self.device}:{self.start_boot}:{self.start_seq}"

    def to_dict(self) -> dict[str, Any]:
        return {
            "key": self.key,
            "device": self.device,
            "label": self.label,
            "start_boot": self.start_boot,
            "start_seq": self.start_seq,
            "stop_boot": self.stop_boot,
            "stop_seq": self.stop_seq,
        }


class Store:
    """One nightcell database file."""

    def __init__(self, conn: sqlite3.Connection, path: str):
        self.conn = conn
        self.path = path
        self._db: "sqlite_utils.Database | None" = None

    @property
    def db(self) -> "sqlite_utils.Database":
        """sqlite-utils' view of the same connection, made when first asked for (importing sqlite-utils also
        imports pandas where it is installed: about a second of start-up that reading a database does not need)."""
        if self._db is None:
            import sqlite_utils

            self._db = sqlite_utils.Database(self.conn)
        return self._db

    # -- opening ------------------------------------------------------------------------------------------------

    @classmethod
    def open(cls, path: str | Path, *, create: bool = True, readonly: bool = False) -> "Store":
        """Open (and create or migrate) a database file.

        Raises ``StoreError`` when the file is not a nightcell database or cannot be written, and ``SchemaTooNew``
        when a newer nightcell wrote it.
        """
        p = Path(path)
        if not create and not p.exists():
            raise InputError(f"no database at {p}: sync a board first, or give the right --db path")
        if p.exists() and p.is_dir():
            raise InputError(f"{p} is a folder, not a database file: give a file path with --db")
        try:
            if readonly:
                conn = sqlite3.connect(f"file:{p}?mode=ro", uri=True, isolation_level=None, timeout=BUSY_TIMEOUT_S)
            else:
                conn = sqlite3.connect(str(p), isolation_level=None, timeout=BUSY_TIMEOUT_S)
            conn.execute(f"PRAGMA busy_timeout = {int(BUSY_TIMEOUT_S * 1000)}")
            conn.execute("PRAGMA foreign_keys = ON")
        except sqlite3.DatabaseError as exc:
            raise StoreError(f"cannot open {p} as a database ({exc}): is it a nightcell database file?") from exc
        store = cls(conn, str(p))
        try:
            store._migrate(readonly=readonly)
            if not readonly:
                # Only once the file is known to be ours: WAL rewrites the header of any SQLite file it is set on,
                # and another program's database given by mistake must be left exactly as it was.
                try:
                    conn.execute("PRAGMA journal_mode = WAL")
                except sqlite3.DatabaseError as exc:
                    raise StoreError(f"cannot open {p} for writing ({exc}): another program holds it, or it is "
                                     "read-only") from exc
        except BaseException:
            conn.close()
            raise
        return store

    def _migrate(self, *, readonly: bool) -> None:
        known = {name for name, _ in migration_files()}
        try:
            # what sqlite-utils' Migrations.applied and Database.table_names read, read here with plain SQL
            tables = {name for (name,) in self.conn.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
            applied = set() if "_sqlite_migrations" not in tables else {name for (name,) in self.conn.execute(
                "SELECT name FROM _sqlite_migrations WHERE migration_set = ?", (MIGRATION_SET,))}
        except sqlite3.DatabaseError as exc:
            raise StoreError(f"{self.path} is not a nightcell database ({exc}): check the --db path") from exc
        unknown = applied - known
        if unknown:
            raise SchemaTooNew(
                f"{self.path} was written by a newer nightcell (migrations {', '.join(sorted(unknown))} are unknown "
                f"to version {__version__}): upgrade nightcell to open it"
            )
        if tables - {"_sqlite_migrations"} and not applied:
            raise StoreError(f"{self.path} is a SQLite file but not a nightcell database: give another --db path")
        if known - applied:
            if readonly:
                raise StoreError(f"{self.path} needs migrating: open it once without read-only access")
            try:
                with self.write():
                    _migrations().apply(self.db)
            except sqlite3.OperationalError as exc:
                raise StoreError(f"cannot migrate {self.path} ({exc}): is the file or its folder read-only?") from exc

    def close(self) -> None:
        self.conn.close()

    def __enter__(self) -> "Store":
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    @contextlib.contextmanager
    def write(self) -> Iterator[sqlite3.Connection]:
        """One write transaction (``BEGIN IMMEDIATE``): all or nothing."""
        try:
            self.conn.execute("BEGIN IMMEDIATE")
        except sqlite3.OperationalError as exc:
            raise StoreError(f"cannot write {self.path} ({exc}): another program holds it, or it is read-only") from exc
        try:
            yield self.conn
        except sqlite3.OperationalError as exc:
            # a write refused inside the transaction (a read-only file or folder, a full disk) is the database's
            # error, said as such, not a traceback
            if self.conn.in_transaction:
                self.conn.execute("ROLLBACK")
            raise StoreError(f"cannot write {self.path} ({exc}): is the file or its folder read-only, or the disk "
                             "full?") from exc
        except BaseException:
            self.conn.execute("ROLLBACK")
            raise
        else:
            try:
                self.conn.execute("COMMIT")
            except sqlite3.OperationalError as exc:
                self.conn.execute("ROLLBACK")
                raise StoreError(f"cannot commit to {self.path} ({exc})") from exc

    # -- ingest -------------------------------------------------------------------------------------------------

    def ingest(self, device: str, records: Iterable[Record], *, journal: int | None = None) -> dict[str, int]:
        """Insert decoded records (inside the caller's transaction). Rows already present are left as they are.

        Record uptimes are unwrapped (u32 milliseconds wrap after 49.7 days) from the last row stored for the same
        boot, so ``uptime_ms`` in every raw table only grows within a boot. SAMPLES records decoded with
        ``lazy_samples=True`` are decoded here many at a time (``frames.sample_columns``). Returns how many rows
        of each kind were new.
        """
        rows: dict[str, list[tuple]] = {k: [] for k in
                                         ("boots", "samples", "marks", "mark_counts", "anchors", "events",
                                          "settings_records", "health")}
        records = list(records)
        uptime = self._unwrapped_uptimes(device, records)
        lazy: list[Record] = []
        lazy_uptime: dict[int, int] = {}
        for r, up in zip(records, uptime):
            k = r.kind
            f = r.fields
            if k == KIND_SAMPLES:
                if r.payload is not None and "samples" not in f:
                    lazy.append(r)
                    lazy_uptime[id(r)] = up
                    continue
                reads = f["reads"]
                for s in r.samples():
                    at = up + (s.uptime_ms - r.uptime_ms)
                    for c in range(f["channels"]):
                        rows["samples"].append((device, r.boot, s.seq, c, at, s.late_ms, s.flags, reads,
                                                s.dark[c], s.light[c], s.temp_centi))
            elif k == KIND_MARK:
                rows["marks"].append((device, r.boot, r.seq, up, MARK_NAMES.get(f["mark"], str(f["mark"])),
                                      f["source"], f["reads"], f["label"], f["value"]))
                for c, (d, li) in enumerate(zip(f["dark"], f["light"])):
                    rows["mark_counts"].append((device, r.boot, r.seq, c, d, li))
            elif k == KIND_BOOT:
                rows["boots"].append((device, r.boot, r.seq, up, f["reset_cause"], f["settings_crc"],
                                      f["firmware"], f["board"], journal, r.position))
            elif k == KIND_ANCHOR:
                rows["anchors"].append((device, r.boot, r.seq, up, f["host_unix_ms"]))
            elif k == KIND_EVENT:
                rows["events"].append((device, r.boot, r.seq, up, f["code"], f["text"]))
            elif k == KIND_SETTINGS:
                rows["settings_records"].append((device, r.boot, r.seq, up, f["json"]))
            elif k == KIND_HEALTH:
                rows["health"].append((device, r.boot, r.seq, up, f["chip_temp_centi"], f["free_kb"],
                                       f["vsys_mv"]))
        if lazy:
            rows["samples"].extend(self._sample_rows(device, lazy, lazy_uptime))
        return self.insert_rows(rows)

    @staticmethod
    def _sample_rows(device: str, lazy: list[Record], uptime: dict[int, int]) -> list[tuple]:
        out: list[tuple] = []
        for cols in sample_columns(lazy):
            recs = cols.records
            rec = cols.record
            boot = np.array([r.boot for r in recs], dtype=np.int64)[rec].tolist()
            seq = (np.array([r.seq for r in recs], dtype=np.int64)[rec] + cols.index).tolist()
            at = (np.array([uptime[id(r)] for r in recs], dtype=np.int64)[rec]
                  + cols.index * np.array([r.fields["interval_ms"] for r in recs], dtype=np.int64)[rec]
                  + cols.late_ms).tolist()
            reads = np.array([r.fields["reads"] for r in recs], dtype=np.int64)[rec].tolist()
            late = cols.late_ms.tolist()
            flags = cols.flags.tolist()
            if cols.temp_centi is None:
                temp = [None] * len(seq)
            else:
                temp = [None if t == NO_TEMPERATURE else t for t in cols.temp_centi.tolist()]
            for c in range(cols.channels):
                out.extend(zip(repeat(device), boot, seq, repeat(c), at, late, flags, reads,
                               cols.dark[:, c].tolist(), cols.light[:, c].tolist(), temp))
        return out

    _RAW_TABLES = ("boots", "samples", "marks", "anchors", "events", "settings_records", "health")

    def _unwrapped_uptimes(self, device: str, records: list[Record]) -> list[int]:
        """Each record's uptime with the u32 wrap undone, continuing from the last stored row of its boot."""
        last: dict[int, int | None] = {}
        out = []
        for r in records:
            if r.boot not in last:
                last[r.boot] = self._last_uptime(device, r.boot)
            (u,) = unwrap_uptimes([r.uptime_ms], last[r.boot])
            last[r.boot] = u
            out.append(u)
        return out

    def _last_uptime(self, device: str, boot: int) -> int | None:
        """The uptime of the highest-seq raw row stored for a boot (None when none is)."""
        best: tuple[int, int] | None = None
        for table in self._RAW_TABLES:
            row = self.conn.execute(
                f"SELECT seq, uptime_ms FROM {table} WHERE device = ? AND boot = ? ORDER BY seq DESC LIMIT 1",
                (device, boot)).fetchone()
            if row is not None and (best is None or row[0] > best[0]):
                best = (row[0], row[1])
        return None if best is None else best[1]

    def insert_rows(self, rows: dict[str, list[tuple]]) -> dict[str, int]:
        """``INSERT OR IGNORE`` raw rows table by table; returns the number of new rows per table."""
        counts = {}
        for table, values in rows.items():
            if not values:
                counts[table] = 0
                continue
            marks = ",".join("?" * len(values[0]))
            before = self.conn.total_changes
            self.conn.executemany(f"INSERT OR IGNORE INTO {table} VALUES ({marks})", values)
            counts[table] = self.conn.total_changes - before
        return counts

    def touch_device(self, device: str, *, board: str | None = None, firmware: str | None = None,
                     label: str | None = None, now: float | None = None) -> None:
        """Create or update the device row (metadata, not raw data)."""
        now = time.time() if now is None else now
        self.conn.execute(
            "INSERT INTO devices(device, board, firmware, label, first_seen_unix, last_seen_unix) "
            "VALUES (?,?,?,?,?,?) ON CONFLICT(device) DO UPDATE SET "
            "board = coalesce(excluded.board, board), firmware = coalesce(excluded.firmware, firmware), "
            "label = coalesce(excluded.label, label), last_seen_unix = excluded.last_seen_unix",
            (device, board, firmware, label, now, now),
        )

    def journal_state(self, device: str, journal: int) -> tuple[int, int] | None:
        """(stored_to, acked_to) for a device's journal, or None when never synced."""
        row = self.conn.execute("SELECT stored_to, acked_to FROM journals WHERE device = ? AND journal = ?",
                                (device, journal)).fetchone()
        return None if row is None else (row[0], row[1])

    def set_journal_state(self, device: str, journal: int, *, stored_to: int | None = None,
                          acked_to: int | None = None) -> None:
        now = time.time()
        self.conn.execute(
            "INSERT INTO journals(device, journal, stored_to, acked_to, updated_unix) VALUES (?,?,?,?,?) "
            "ON CONFLICT(device, journal) DO UPDATE SET "
            "stored_to = max(stored_to, coalesce(?, stored_to)), acked_to = max(acked_to, coalesce(?, acked_to)), "
            "updated_unix = ?",
            (device, journal, stored_to or 0, acked_to or 0, now, stored_to, acked_to, now),
        )

    def log_sync(self, summary: Any, *, host: str, started_unix: float) -> None:
        """Record one sync in ``sync_sessions`` (inside the caller's transaction)."""
        self.conn.execute(
            "INSERT INTO sync_sessions(device, journal, host, port, started_unix, seconds, from_position, "
            "to_position, bytes, records, new_rows, acked_to) VALUES (?,?,?,?,?,?,?,?,?,?,?,?)",
            (summary.device, summary.journal, host, summary.port, started_unix, summary.seconds, summary.start,
             summary.end, summary.bytes, summary.records, sum(summary.new_rows.values()), summary.acked_to),
        )

    # -- queries ------------------------------------------------------------------------------------------------

    def query(self, sql: str, params: Iterable[Any] = ()) -> list[dict[str, Any]]:
        """Rows of a read query as dicts keyed by column name."""
        cur = self.conn.execute(sql, tuple(params))
        cols = [d[0] for d in cur.description]
        return [dict(zip(cols, row)) for row in cur.fetchall()]

    def devices(self) -> list[dict[str, Any]]:
        return self.query("SELECT * FROM devices ORDER BY device")

    def count(self, table: str) -> int:
        if table not in self.db.table_names():
            raise InputError(f"no table {table!r} in the store")
        return self.conn.execute(f"SELECT count(*) FROM [{table}]").fetchone()[0]

    def marks(self, device: str | None = None, mark: str | None = None) -> list[dict[str, Any]]:
        """Marks in journal order, each with its per-channel counts as lists ``dark`` and ``light``."""
        where = []
        params: list[Any] = []
        if device is not None:
            where.append("m.device = ?")
            params.append(device)
        if mark is not None:
            where.append("m.mark = ?")
            params.append(mark)
        sql = "SELECT m.* FROM marks m" + (" WHERE " + " AND ".join(where) if where else "")
        sql += " ORDER BY m.device, m.boot, m.seq"
        return [self.with_counts(m) for m in self.query(sql, params)]

    def with_counts(self, mark: dict[str, Any]) -> dict[str, Any]:
        """A marks row given its per-channel counts as lists ``dark`` and ``light`` (in channel order)."""
        counts = self.conn.execute(
            "SELECT dark, light FROM mark_counts WHERE device = ? AND boot = ? AND seq = ? ORDER BY channel",
            (mark["device"], mark["boot"], mark["seq"])).fetchall()
        mark["dark"] = [c[0] for c in counts]
        mark["light"] = [c[1] for c in counts]
        return mark

    def runs(self, device: str | None = None) -> list[Run]:
        """Runs from their marks. A run_start journaled by the board itself (source 2) after a restart continues
        the run that was open when the board lost power."""
        runs: list[Run] = []
        open_run: dict[str, Run] = {}
        # only the run marks, without their counts (a run needs neither; one query, not one per mark)
        if device is None:
            marks = self.query("SELECT device, boot, seq, mark, source, label FROM marks "
                               "WHERE mark IN ('run_start', 'run_stop') ORDER BY device, boot, seq")
        else:
            marks = self.query("SELECT device, boot, seq, mark, source, label FROM marks "
                               "WHERE device = ? AND mark IN ('run_start', 'run_stop') ORDER BY boot, seq", (device,))
        for m in marks:
            if m["mark"] == "run_start":
                current = open_run.get(m["device"])
                if m["source"] == 2 and current is not None:
                    continue
                run = Run(m["device"], m["label"], m["boot"], m["seq"], None, None)
                runs.append(run)
                open_run[m["device"]] = run
            elif m["mark"] == "run_stop" and m["device"] in open_run:
                run = open_run.pop(m["device"])
                run.stop_boot, run.stop_seq = m["boot"], m["seq"]
        return runs

    def run_samples(self, run: Run, channel: int = 0) -> list[dict[str, Any]]:
        """Samples of a run, in order, across boots, joined to the boot clocks."""
        sql = (
            "SELECT s.*, c.unix_at_zero, c.rate, c.quality FROM samples s "
            "LEFT JOIN boot_clocks c ON c.device = s.device AND c.boot = s.boot "
            "WHERE s.device = ? AND s.channel = ? AND (s.boot, s.seq) > (?, ?)"
        )
        # row values, so SQLite scans only the run's range of the primary key (an OR of the two halves scanned
        # every sample of the device: 30 ms a run in a database of 200 runs)
        params: list[Any] = [run.device, channel, run.start_boot, run.start_seq]
        if run.stop_boot is not None:
            sql += " AND (s.boot, s.seq) < (?, ?)"
            params += [run.stop_boot, run.stop_seq]
        sql += " ORDER BY s.boot, s.seq"
        return self.query(sql, params)

    def run_sample_counts(self, runs: Iterable[Run], channel: int = 0) -> list[int]:
        """How many samples of ``channel`` each run holds (the rows ``run_samples`` would return), counted by SQLite
        over each run's range of the primary key, so listing runs reads no sample into Python."""
        out = []
        for run in runs:
            if run.stop_boot == run.start_boot:
                row = self.conn.execute(
                    "SELECT count(*) FROM samples WHERE device = ? AND boot = ? AND seq > ? AND seq < ? AND channel = ?",
                    (run.device, run.start_boot, run.start_seq, run.stop_seq, channel)).fetchone()
            else:
                stop = (run.stop_boot, run.stop_seq) if run.stop_boot is not None else (_NO_END, _NO_END)
                row = self.conn.execute(
                    "SELECT count(*) FROM samples WHERE device = ? AND channel = ? AND (boot, seq) > (?, ?) "
                    "AND (boot, seq) < (?, ?)", (run.device, channel, run.start_boot, run.start_seq, *stop)).fetchone()
            out.append(int(row[0]))
        return out

    def run_sample_columns(self, run: Run, channel: int = 0) -> dict[str, Any]:
        """A run's samples as numpy columns, in (boot, seq) order across boots, and the clocks of their boots.

        Returns ``boot``, ``seq``, ``uptime_ms``, ``flags``, ``reads``, ``dark``, ``light`` (int64 arrays, one entry per
        sample; the same rows as ``run_samples``) and ``clocks``: ``{boot: (unix_at_zero, rate, quality)}`` for the
        boots that have a clock. Made for long runs and for many runs: SQLite counts the run's samples first, then
        one range scan of the samples' primary key streams straight into preallocated arrays (``numpy.fromiter``),
        so no row outlives its step and no text of the whole run is built. In a run within one boot the boot is
        known, and reads and flags (the same for every sample of most runs) are read only when they vary (three
        cheap aggregates tell). The range scan meets rows in key order (``ORDER BY`` the key costs nothing more).
        """
        own = not self.conn.in_transaction
        if own:  # the count and the scan see one snapshot, even while a sync adds rows
            self.conn.execute("BEGIN")
        try:
            return self._run_sample_columns(run, channel)
        finally:
            if own and self.conn.in_transaction:
                self.conn.execute("COMMIT")

    def _run_sample_columns(self, run: Run, channel: int) -> dict[str, Any]:
        stop = (run.stop_boot, run.stop_seq) if run.stop_boot is not None else (_NO_END, _NO_END)
        if run.stop_boot == run.start_boot:
            # a run within one boot (most runs): plain bounds on seq, the boot known
            where = "WHERE device = ? AND boot = ? AND seq > ? AND seq < ? AND channel = ?"
            params: tuple = (run.device, run.start_boot, run.start_seq, run.stop_seq, channel)
            n, lo_reads, hi_reads, flagged = self.conn.execute(
                f"SELECT count(*), min(reads), max(reads), sum(flags <> 0) FROM samples {where}", params).fetchone()
            same = bool(n) and lo_reads == hi_reads and flagged == 0
            names = ("seq", "uptime_ms", "dark", "light") + (() if same else ("reads", "flags"))
        else:
            where = "WHERE device = ? AND channel = ? AND (boot, seq) > (?, ?) AND (boot, seq) < (?, ?)"
            params = (run.device, channel, run.start_boot, run.start_seq, *stop)
            (n,) = self.conn.execute(f"SELECT count(*) FROM samples {where}", params).fetchone()
            same = False
            names = ("boot", "seq", "uptime_ms", "dark", "light", "reads", "flags")
        n = int(n)
        # our own column names, never input (the security test lists this place)
        cur = self.conn.execute(f"SELECT {', '.join(names)} FROM samples {where} ORDER BY boot, seq", params)
        table = np.fromiter(cur if len(names) > 1 else (r[0] for r in cur),
                            dtype=[(name, np.int64) for name in names], count=n)
        cols: dict[str, Any] = {name: table[name] for name in names}  # views of the one table: no copies
        if "boot" not in cols:
            cols["boot"] = np.full(n, run.start_boot, dtype=np.int64)
        if same:
            cols["reads"] = np.full(n, lo_reads, dtype=np.int64)
            cols["flags"] = np.zeros(n, dtype=np.int64)
        clocks = {b: (u, r, q) for b, u, r, q in self.conn.execute(
            "SELECT boot, unix_at_zero, rate, quality FROM boot_clocks WHERE device = ? AND boot >= ? AND boot <= ?",
            (run.device, run.start_boot, stop[0]))}
        cols["clocks"] = clocks
        return cols

    def mark_keys(self, device: str, mark: str) -> list[tuple[int, int]]:
        """(boot, seq) of every mark of one kind (``"blank"``, ``"opaque"``...) of a device, in journal order.

        The marks table has no index by kind, so finding "the blank before this run" would read every earlier mark;
        this list is read once and kept while the database is unchanged (SQLite's ``data_version`` for commits by
        other connections, this connection's ``total_changes`` for its own), so analysing many runs reads it once.
        """
        state = (self.conn.execute("PRAGMA data_version").fetchone()[0], self.conn.total_changes)
        cache = self.__dict__.setdefault("_mark_keys", {})
        hit = cache.get((device, mark))
        if hit is not None and hit[0] == state:
            return hit[1]
        keys = self.conn.execute("SELECT boot, seq FROM marks WHERE device = ? AND mark = ? ORDER BY boot, seq",
                                 (device, mark)).fetchall()
        cache[(device, mark)] = (state, keys)
        return keys

    def save_result(self, kind: str, label: str, inputs: dict[str, Any], result: dict[str, Any]) -> int:
        """Store a derived result with its inputs; returns its id.

        Inside a caller's ``write()`` transaction the row joins it, so the results of many runs can be committed
        (and synced to disk) once; otherwise the result is committed on its own.
        """
        if self.conn.in_transaction:
            return self._insert_result(kind, label, inputs, result)
        with self.write():
            return self._insert_result(kind, label, inputs, result)

    def _insert_result(self, kind: str, label: str, inputs: dict[str, Any], result: dict[str, Any]) -> int:
        cur = self.conn.execute(
            "INSERT INTO results(kind, label, created_unix, nightcell_version, inputs_json, result_json) "
            "VALUES (?,?,?,?,?,?)",
            (kind, label, time.time(), __version__, json.dumps(inputs, sort_keys=True, separators=_COMPACT),
             json.dumps(result, sort_keys=True, separators=_COMPACT)),
        )
        return int(cur.lastrowid)
