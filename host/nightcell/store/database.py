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
from typing import Any, Iterable, Iterator

import numpy as np
from ._sqlite import sqlite_utils

from .. import __version__
from ..errors import InputError, RecordConflict, SchemaTooNew, StoreError
from ..wire.frames import (
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
from ..science.timeline import unwrap_uptimes
from .queries import StoreQueries
from .tables import TIMED_RAW_TABLES

__all__ = ["Store", "migration_files", "Run", "damage_report", "damaged"]

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


def _migrations() -> sqlite_utils.Migrations:
    migrations = sqlite_utils.Migrations(MIGRATION_SET)
    for name, sql in migration_files():

        def apply(db: sqlite_utils.Database, _sql: str = sql) -> None:
            for stmt in _statements(_sql):
                db.conn.execute(stmt)

        migrations(name=name)(apply)
    return migrations


# Migrations that change nothing a reading command reads (write-side guards): a database still without them can
# be read as it is.
_READERS_NEED_NOT = {"0004_raw_rows_refuse_replace"}


def _existing_file(path: str | Path) -> Path:
    """``path`` as an existing regular file, or the ``InputError`` that says what it is instead."""
    p = Path(path)
    if not p.exists():
        raise InputError(f"no database at {p}: sync a board first, or give the right --db path")
    if p.is_dir():
        raise InputError(f"{p} is a folder, not a database file: give a file path with --db")
    if not p.is_file():
        raise InputError(f"{p} is not a regular file: give the path of a database file with --db")
    return p


def damaged(path: str | Path, exc: BaseException) -> StoreError:
    """The error for a database SQLite finds damaged: what can still be read, and how to recover the rest."""
    return StoreError(f"{path} is a damaged database ({exc}); nothing was written. {damage_report(path)}. Recover "
                      f"what is readable into a new file with `sqlite3 {path} .recover | sqlite3 recovered.db` and "
                      "use that file")


def _not_ours(path: str | Path, exc: BaseException) -> StoreError:
    if "malformed" in str(exc):
        return damaged(path, exc)
    return StoreError(f"{path} is not a nightcell database ({exc}): check the --db path")


def damage_report(path: str | Path) -> str:
    """What of a damaged database can still be read: the tables whose rows all read back, and those that do not."""
    try:
        conn = sqlite3.connect(Path(path).resolve().as_uri() + "?mode=ro", uri=True)
    except sqlite3.DatabaseError:
        return "nothing can be read"
    good, bad = [], []
    try:
        names = [r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type = 'table' ORDER BY name")]
        for name in names:
            try:
                quoted = name.replace('"', '""')
                n = conn.execute(f'SELECT count(*) FROM "{quoted}"').fetchone()[0]
                conn.execute(f'SELECT * FROM "{quoted}"').fetchall()
                good.append(f"{name} ({n})")
            except sqlite3.DatabaseError:
                bad.append(name)
    except sqlite3.DatabaseError:
        return "its list of tables cannot be read"
    finally:
        conn.close()
    return (f"Still readable: {', '.join(good) or 'none'}; damaged: {', '.join(bad) or 'an index'}")


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


def _int_columns(names: tuple[str, ...], texts: tuple, n: int, run: Run) -> dict[str, np.ndarray]:
    """Columns of ``n`` integers each from SQLite's comma-separated group_concat texts (parsed in one go)."""
    if n == 0:
        return {name: np.zeros(0, dtype=np.int64) for name in names}
    values = np.fromstring(",".join(texts), dtype=np.int64, sep=",")
    if values.size != len(names) * n:
        raise StoreError(f"run {run.key}: a sample column did not read back whole; check the database with "
                         "`sqlite3 DB 'PRAGMA integrity_check'`")
    return dict(zip(names, values.reshape(len(names), n)))


def _in_seq_order(cols: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """Columns read through group_concat, put in seq order if they came otherwise (SQLite does not promise the order
    in which group_concat meets rows)."""
    seq = cols["seq"]
    if seq.size and np.any(seq[1:] <= seq[:-1]):
        order = np.argsort(seq, kind="stable")
        return {name: c[order] for name, c in cols.items()}
    return cols


_TEXT_RUN_MAX = 20_000  # seqs between a run's marks up to which its columns are read as texts (a few hundred kB)
_TEXT_CHUNK = 65_536  # seqs per statement of a longer run within one boot


class Store(StoreQueries):
    """One nightcell database file."""

    def __init__(self, conn: sqlite3.Connection, path: str):
        self.conn = conn
        self.path = path
        self.db = sqlite_utils.Database(conn)

    # -- opening ------------------------------------------------------------------------------------------------

    @classmethod
    def open(cls, path: str | Path, *, create: bool = True, readonly: bool = False) -> "Store":
        """Open a database file: ``open_read`` when ``readonly``, else ``open_write`` (creating it if ``create``)."""
        if readonly:
            return cls.open_read(path)
        return cls.open_write(path, create=create)

    @classmethod
    def open_read(cls, path: str | Path) -> "Store":
        """Open an existing nightcell database for reading only: never creates, migrates or changes the file.

        SQLite opens it with ``mode=ro``; where no write-ahead log can be made beside it (a read-only folder or
        medium) it is opened ``immutable``. Raises ``InputError`` when there is no file, and ``StoreError`` when
        the file is not a nightcell database (empty, another program's, damaged) or needs migrating first;
        ``SchemaTooNew`` when a newer nightcell wrote it.
        """
        p = _existing_file(path)
        with open(p, "rb") as fh:
            head = fh.read(100)
        if not head:
            raise StoreError(f"{p} is empty, not a nightcell database: give the path of a database that "
                             "`nightcell sync` wrote")
        if not head.startswith(b"SQLite format 3\x00"):
            raise StoreError(f"{p} is not a nightcell database (not a SQLite file): check the --db path")
        uri = p.resolve().as_uri()
        last: Exception | None = None
        for query in ("?mode=ro", "?mode=ro&immutable=1"):
            try:
                conn = sqlite3.connect(uri + query, uri=True, isolation_level=None, timeout=BUSY_TIMEOUT_S)
            except sqlite3.DatabaseError as exc:
                last = exc
                continue
            store = cls(conn, str(p))
            store.readonly = True
            try:
                conn.execute(f"PRAGMA busy_timeout = {int(BUSY_TIMEOUT_S * 1000)}")
                conn.execute("PRAGMA query_only = ON")
                conn.execute("SELECT count(*) FROM sqlite_master").fetchone()
            except sqlite3.OperationalError as exc:
                conn.close()
                if not any(w in str(exc) for w in ("unable to open", "readonly", "disk I/O")):
                    raise StoreError(f"cannot read {p} ({exc}): another program holds it; try again when it is "
                                     "done") from exc
                # a WAL database whose folder cannot hold its -shm file (read-only, or full): read it as the
                # unchanging file it is
                last = exc
                continue
            except sqlite3.DatabaseError as exc:
                conn.close()
                raise _not_ours(p, exc) from exc
            try:
                applied = store._check_schema(write=False)
                if {name for name, _ in migration_files()} - applied - _READERS_NEED_NOT:
                    store = store._migrated_copy()
            except BaseException:
                conn.close()
                raise
            return store
        raise StoreError(f"cannot open {p} for reading ({last}): check the --db path and that you may read it")

    @classmethod
    def open_write(cls, path: str | Path, *, create: bool = True) -> "Store":
        """Open (and create or migrate) a database file for a command that writes.

        Raises ``StoreError`` when the file is not a nightcell database or cannot be written, and ``SchemaTooNew``
        when a newer nightcell wrote it.
        """
        p = Path(path)
        if not create:
            p = _existing_file(p)
        elif p.exists() and p.is_dir():
            raise InputError(f"{p} is a folder, not a database file: give a file path with --db")
        elif p.exists() and not p.is_file():
            raise InputError(f"{p} is not a regular file: give the path of a database file with --db")
        try:
            conn = sqlite3.connect(str(p), isolation_level=None, timeout=BUSY_TIMEOUT_S)
            conn.execute(f"PRAGMA busy_timeout = {int(BUSY_TIMEOUT_S * 1000)}")
            conn.execute("PRAGMA foreign_keys = ON")
        except sqlite3.DatabaseError as exc:
            raise StoreError(f"cannot open {p} as a database ({exc}): is it a nightcell database file?") from exc
        store = cls(conn, str(p))
        try:
            try:
                conn.execute("SELECT count(*) FROM sqlite_master").fetchone()
            except sqlite3.OperationalError as exc:
                if "unable to open" in str(exc) or "readonly" in str(exc):
                    raise StoreError(f"cannot open {p} for writing ({exc}): the file or its folder is read-only; "
                                     "this command saves to the database, so copy it somewhere writable (reading "
                                     "commands such as `nightcell list runs` and `nightcell report` work as it "
                                     "is)") from exc
                if "disk I/O" in str(exc) or "full" in str(exc):
                    raise StoreError(f"cannot open {p} for writing ({exc}): its disk is full (or failing) — free "
                                     "some space and try again; nothing was written") from exc
                raise StoreError(f"cannot open {p} ({exc}): another program holds it; try again when it is "
                                 "done") from exc
            except sqlite3.DatabaseError as exc:
                raise _not_ours(p, exc) from exc
            store._migrate(readonly=False)
            # Only once the file is known to be ours: WAL rewrites the header of any SQLite file it is set on,
            # and another program's database given by mistake must be left exactly as it was.
            try:
                conn.execute("PRAGMA journal_mode = WAL")
            except sqlite3.DatabaseError as exc:
                raise StoreError(f"cannot open {p} for writing ({exc}): another program holds it, or it is "
                                 "read-only (reading commands such as `nightcell list runs` work as it is)") from exc
        except BaseException:
            conn.close()
            raise
        return store

    readonly = False
    copied = False  # read through a migrated copy in memory (an older nightcell wrote the file)

    def _check_schema(self, *, write: bool) -> set[str]:
        """The migrations applied to this file, after checking it is a nightcell database this version can read."""
        known = {name for name, _ in migration_files()}
        try:
            applied = {m.name for m in _migrations().applied(self.db)}
            tables = set(self.db.table_names())
            version = int(self.conn.execute("PRAGMA user_version").fetchone()[0])
        except sqlite3.DatabaseError as exc:
            raise _not_ours(self.path, exc) from exc
        unknown = applied - known
        if unknown:
            raise SchemaTooNew(
                f"{self.path} was written by a newer nightcell (migrations {', '.join(sorted(unknown))} are unknown "
                f"to version {__version__}): upgrade nightcell to open it"
            )
        if version > len(known):
            raise SchemaTooNew(f"{self.path} was written by a newer nightcell (schema version {version}; version "
                               f"{__version__} knows up to {len(known)}): upgrade nightcell to open it")
        if tables - {"_sqlite_migrations"} and not applied:
            raise StoreError(f"{self.path} is a SQLite file but not a nightcell database: give another --db path")
        if not write and not applied:
            raise StoreError(f"{self.path} is not a nightcell database (it holds no tables): give the path of a "
                             "database that `nightcell sync` wrote")
        return applied

    def _migrated_copy(self) -> "Store":
        """A database an older nightcell wrote, read through a migrated copy in memory: the file stays as it is."""
        copy = sqlite3.connect(":memory:", isolation_level=None)
        self.conn.backup(copy)
        self.conn.close()
        store = Store(copy, self.path)
        store.readonly = True
        store.copied = True
        with store.write():
            _migrations().apply(store.db)
        copy.execute("PRAGMA query_only = ON")
        return store

    def _migrate(self, *, readonly: bool) -> None:
        applied = self._check_schema(write=not readonly)
        known = {name for name, _ in migration_files()}
        if known - applied:
            if readonly:
                return
            try:
                with self.write():
                    _migrations().apply(self.db)
                    self.conn.execute(f"PRAGMA user_version = {len(known)}")
            except sqlite3.OperationalError as exc:
                raise StoreError(f"cannot migrate {self.path} ({exc}): is the file or its folder read-only?") from exc

    def check_whole(self) -> None:
        """Every page of the file reads back (SQLite's ``quick_check``), else the ``damaged`` error."""
        try:
            problem = self.conn.execute("PRAGMA quick_check").fetchone()[0]
        except sqlite3.DatabaseError as exc:
            raise damaged(self.path, exc) from exc
        if problem != "ok":
            raise damaged(self.path, problem)

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
            if exc.sqlite_errorcode == sqlite3.SQLITE_FULL if hasattr(exc, "sqlite_errorcode") else "full" in str(exc):
                raise StoreError(f"cannot write {self.path} ({exc}): free some space and run it again — nothing of "
                                 "this transaction was stored, and nothing unstored was acknowledged") from exc
            raise StoreError(f"cannot write {self.path} ({exc}): is the file or its folder read-only, or the disk "
                             "full?") from exc
        except sqlite3.DatabaseError as exc:
            if self.conn.in_transaction:
                self.conn.execute("ROLLBACK")
            raise StoreError(f"cannot write {self.path} ({exc}): check it with `sqlite3 {self.path} 'PRAGMA "
                             "integrity_check'`") from exc
        except BaseException:
            # SQLite may have rolled back by itself already (a full disk does that): a second ROLLBACK would fail
            # and hide the error that matters
            if self.conn.in_transaction:
                self.conn.execute("ROLLBACK")
            raise
        else:
            try:
                self.conn.execute("COMMIT")
            except sqlite3.DatabaseError as exc:
                if self.conn.in_transaction:
                    self.conn.execute("ROLLBACK")
                raise StoreError(f"cannot commit to {self.path} ({exc}): is the disk full? Nothing of this "
                                 "batch was stored") from exc

    # -- ingest -------------------------------------------------------------------------------------------------

    def ingest(self, device: str, records: Iterable[Record], *, journal: int | None = None,
               refuse_conflicts: bool = False) -> dict[str, int]:
        """Insert decoded records (inside the caller's transaction). Rows already present are left as they are;
        with ``refuse_conflicts`` (the sync) a record whose key is stored with other content is refused
        (``RecordConflict``, see ``insert_rows``).

        Record uptimes are unwrapped (u32 milliseconds wrap after 49.7 days) from the last row stored for the same
        boot, so ``uptime_ms`` in every raw table only grows within a boot. SAMPLES records decoded with
        ``lazy_samples=True`` are decoded here many at a time (``frames.sample_columns``). Returns how many rows
        of each kind were new.
        """
        rows: dict[str, list[tuple]] = {k: [] for k in
                                         ("boots", "samples", "marks", "mark_counts", "anchors", "events",
                                          "settings_records", "health")}
        records = list(records)
        host_boot = self._host_boots(device, journal, {r.boot for r in records})
        uptime = self._unwrapped_uptimes(device, records, host_boot)
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
        if any(b != h for b, h in host_boot.items()):  # a later journal's boots, numbered here apart from earlier ones
            rows = {t: [(v[0], host_boot[v[1]]) + v[2:] for v in vs] for t, vs in rows.items()}
        return self.insert_rows(rows, refuse_conflicts=refuse_conflicts, journal=journal)

    # -- boots of several journals --------------------------------------------------------------------------------

    def host_boot(self, device: str, journal: int | None, journal_boot: int) -> int | None:
        """This host's number for boot ``journal_boot`` of ``journal`` of ``device`` (None when none is stored).

        A boot recorded with journal 0 (unknown: stored before journals were told apart) answers for any journal,
        and ``journal`` None (records of unknown provenance) finds the boot of any journal, as the old key did.
        """
        if journal is None:
            row = self.conn.execute("SELECT boot FROM journal_boots WHERE device = ? AND journal_boot = ? "
                                    "ORDER BY journal LIMIT 1", (device, journal_boot)).fetchone()
        else:
            row = self.conn.execute("SELECT boot FROM journal_boots WHERE device = ? AND journal_boot = ? AND "
                                    "journal IN (?, 0) ORDER BY journal = 0 LIMIT 1",
                                    (device, journal_boot, int(journal))).fetchone()
        return None if row is None else int(row[0])

    def assign_host_boot(self, device: str, journal: int | None, journal_boot: int) -> int:
        """``host_boot``, numbering the boot here first when it is new (inside the caller's transaction).

        A new boot keeps the board's number while the device has boots of no other journal here (and the number is
        free); otherwise it gets the next number after every boot of the device stored here, so a later journal's
        boots sort after the earlier journals' ones, as they happened.
        """
        found = self.host_boot(device, journal, journal_boot)
        if found is not None:
            return found
        taken = self.conn.execute("SELECT 1 FROM journal_boots WHERE device = ? AND boot = ?",
                                  (device, journal_boot)).fetchone()
        if journal is not None and not taken:
            taken = self.conn.execute("SELECT 1 FROM journal_boots WHERE device = ? AND journal NOT IN (?, 0)",
                                      (device, int(journal))).fetchone()
        boot = journal_boot
        if taken:
            (top,) = self.conn.execute("SELECT max(boot) FROM journal_boots WHERE device = ?", (device,)).fetchone()
            boot = int(top) + 1
        self.conn.execute("INSERT INTO journal_boots(device, journal, journal_boot, boot) VALUES (?,?,?,?)",
                          (device, 0 if journal is None else int(journal), journal_boot, boot))
        return boot

    def _host_boots(self, device: str, journal: int | None, boots: Iterable[int]) -> dict[int, int]:
        return {b: self.assign_host_boot(device, journal, b) for b in sorted(boots)}

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

    _RAW_TABLES = TIMED_RAW_TABLES

    def _unwrapped_uptimes(self, device: str, records: list[Record], host_boot: dict[int, int]) -> list[int]:
        """Each record's uptime with the u32 wrap undone, continuing from the last stored row of its boot."""
        last: dict[int, int | None] = {}
        out = []
        for r in records:
            if r.boot not in last:
                last[r.boot] = self._last_uptime(device, host_boot[r.boot])
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

    # How many leading columns of each raw table are its key (device, boot[, seq[, channel]]).
    _KEY_COLUMNS = {"boots": 2, "samples": 4, "mark_counts": 4, "marks": 3, "anchors": 3, "events": 3,
                    "settings_records": 3, "health": 3}

    def insert_rows(self, rows: dict[str, list[tuple]], *, refuse_conflicts: bool = False,
                    journal: int | None = None) -> dict[str, int]:
        """``INSERT OR IGNORE`` raw rows table by table; returns the number of new rows per table.

        With ``refuse_conflicts`` a row whose key is already stored must be the stored row itself (a row arriving
        twice); one with other content raises ``RecordConflict`` — inside the caller's transaction, which then
        writes nothing. Only rows that were not new are looked at, so a sync of fresh records pays nothing.
        """
        counts = {}
        for table, values in rows.items():
            if not values:
                counts[table] = 0
                continue
            marks = ",".join("?" * len(values[0]))
            before = self.conn.total_changes
            with self._guard_set_aside(table, len(values)):
                self.conn.executemany(f"INSERT OR IGNORE INTO {table} VALUES ({marks})", values)
            counts[table] = self.conn.total_changes - before
            if refuse_conflicts and counts[table] < len(values):
                self._refuse_conflicts(table, values, journal)
        return counts

    _GUARD_MIN_ROWS = 2_000  # rows of one insert from which setting the guard aside pays for its two statements

    @contextlib.contextmanager
    def _guard_set_aside(self, table: str, rows: int) -> Iterator[None]:
        """Inside this connection's open transaction, a large ``INSERT OR IGNORE`` runs without the table's
        ``<table>_not_replaced`` trigger (migration 4), which is dropped and created again from its own stored text
        before the transaction can commit.

        The trigger is there so that ``INSERT OR REPLACE`` from any connection cannot replace a raw row; ``OR
        IGNORE`` never replaces one, and its per-row lookup costs a third of a sync's insert time (0.54 s against
        0.39 s for 2·10⁵ samples, measured here). No other connection can see the table without it: SQLite lets one
        connection write at a time, readers see the last commit, and a rollback (a crash, an error) puts the
        dropped trigger back with everything else. Small inserts, and any insert outside a transaction, keep it.
        """
        name = f"{table}_not_replaced"
        row = None
        if rows >= self._GUARD_MIN_ROWS and self.conn.in_transaction:
            row = self.conn.execute("SELECT sql FROM sqlite_master WHERE type = 'trigger' AND name = ?",
                                    (name,)).fetchone()
        if row is None:
            yield
            return
        self.conn.execute(f'DROP TRIGGER "{name}"')
        try:
            yield
        finally:
            if self.conn.in_transaction:  # else SQLite rolled back by itself, and the trigger is back already
                self.conn.execute(row[0])

    def _refuse_conflicts(self, table: str, values: list[tuple], journal: int | None) -> None:
        k = self._KEY_COLUMNS[table]
        names = [r[1] for r in self.conn.execute(f"PRAGMA table_info({table})")]
        where = " AND ".join(f"{n} = ?" for n in names[:k])
        for row in values:
            stored = self.conn.execute(f"SELECT * FROM {table} WHERE {where}", row[:k]).fetchone()
            if stored is None or self._same_row(names, stored, row):
                continue
            key = ", ".join(f"{n} {v}" for n, v in zip(names[1:k], row[1:k]))
            other = self.conn.execute("SELECT journal FROM boots WHERE device = ? AND boot = ?",
                                      row[:2]).fetchone()
            was = f" (stored from journal {other[0]})" if other and other[0] not in (None, journal) else ""
            raise RecordConflict(
                f"journal {journal} of {row[0]} would change rows already stored here: its {table} row of {key} "
                f"differs from the one stored{was}, under the same journal id. A board is replaying records it "
                "did not journal, or another board has the same device id and journal id. Nothing was written: "
                "sync it into another database (--db other.db) and keep both"
            )

    @staticmethod
    def _same_row(names: list[str], stored: tuple, row: tuple) -> bool:
        for name, a, b in zip(names, stored, row):
            if name == "position" or (name == "journal" and (a is None or b is None)):
                continue  # provenance: where the row was read from, unknown for rows stored without it
            if a != b:
                return False
        return True

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
                    "SELECT count(*) FROM samples WHERE device = ? AND boot = ? AND seq > ? AND seq < ? "
                    "AND channel = ?",
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
        boots that have a clock, with no per-row Python objects kept. A short run within one boot (at most
        ``_TEXT_RUN_MAX`` seqs between its marks: most runs) is read by one statement, each column as one
        comma-separated text that numpy parses (the fastest way for a thousand rows: 1.8 ms against 3 ms streamed);
        the reads and flags (the same for every sample of most runs) are read only when three cheap aggregates say
        they vary. A longer run within one boot is read the same way a chunk of ``_TEXT_CHUNK`` seqs at a time into
        preallocated arrays, after SQLite counts its samples; a run across boots streams one range scan of the primary
        key into them (``numpy.fromiter``). Either way no row outlives its step and no text of the whole run is built
        (a 10⁶-sample run's texts and tuples cost some 290 MiB).
        """
        if run.stop_boot == run.start_boot and run.stop_seq - run.start_seq <= _TEXT_RUN_MAX:
            return self._short_run_columns(run, channel)
        own = not self.conn.in_transaction
        if own:  # the count and the scan see one snapshot, even while a sync adds rows
            self.conn.execute("BEGIN")
        try:
            return self._run_sample_columns(run, channel)
        finally:
            if own and self.conn.in_transaction:
                self.conn.execute("COMMIT")

    def _short_run_columns(self, run: Run, channel: int) -> dict[str, Any]:
        names = ("seq", "uptime_ms", "dark", "light")
        where = (run.device, run.start_boot, run.start_seq, run.stop_seq, channel)
        row = self.conn.execute(
            "SELECT count(*), min(reads), max(reads), sum(flags <> 0), group_concat(seq), group_concat(uptime_ms), "
            "group_concat(dark), group_concat(light) FROM samples "
            "WHERE device = ? AND boot = ? AND seq > ? AND seq < ? AND channel = ?", where).fetchone()
        n = int(row[0])
        cols = _int_columns(names, row[4:], n, run)
        cols["boot"] = np.full(n, run.start_boot, dtype=np.int64)
        if n and row[1] == row[2] and row[3] == 0:
            cols["reads"] = np.full(n, row[1], dtype=np.int64)
            cols["flags"] = np.zeros(n, dtype=np.int64)
        elif n:
            more = self.conn.execute(
                "SELECT group_concat(seq), group_concat(reads), group_concat(flags) FROM samples "
                "WHERE device = ? AND boot = ? AND seq > ? AND seq < ? AND channel = ?", where).fetchone()
            extra = _int_columns(("seq", "reads", "flags"), more, n, run)
            if not np.array_equal(extra.pop("seq"), cols["seq"]):
                raise StoreError(f"run {run.key}: its samples changed while they were read; read it again")
            cols.update(extra)
        cols = _in_seq_order(cols)
        cols["clocks"] = {b: (u, r, q) for b, u, r, q in self.conn.execute(
            "SELECT boot, unix_at_zero, rate, quality FROM boot_clocks WHERE device = ? AND boot = ?",
            (run.device, run.start_boot))}
        return cols

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
        if run.stop_boot == run.start_boot:
            cols: dict[str, Any] = self._chunked_columns(run, channel, names, n)
        else:
            # our own column names, never input (the security test lists this place)
            cur = self.conn.execute(f"SELECT {', '.join(names)} FROM samples {where} ORDER BY boot, seq", params)
            table = np.fromiter(cur, dtype=[(name, np.int64) for name in names], count=n)
            cols = {name: table[name] for name in names}  # views of the one table: no copies
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

    def _chunked_columns(self, run: Run, channel: int, names: tuple[str, ...], n: int) -> dict[str, np.ndarray]:
        """The ``n`` samples of a run within one boot, ``_TEXT_CHUNK`` seqs per statement, each column of a chunk one
        group_concat text that numpy parses: twice as fast as streaming tuples (0.43 s against 0.82 s for 10⁶
        samples of four columns, measured here), and no text longer than a chunk's (~2 MB) is ever built."""
        cols = {name: np.empty(n, dtype=np.int64) for name in names}
        concat = ", ".join(f"group_concat({name})" for name in names)  # our own column names, never input
        filled, lo = 0, run.start_seq
        while lo < run.stop_seq - 1:
            hi = min(lo + _TEXT_CHUNK, run.stop_seq)
            row = self.conn.execute(
                f"SELECT count(*), {concat} FROM samples "
                "WHERE device = ? AND boot = ? AND seq > ? AND seq < ? AND channel = ?",
                (run.device, run.start_boot, lo, hi, channel)).fetchone()
            got = int(row[0])
            if got:
                if filled + got > n:
                    raise StoreError(f"run {run.key}: its samples changed while they were read; read it again")
                for name, column in _int_columns(names, row[1:], got, run).items():
                    cols[name][filled:filled + got] = column
                filled += got
            lo = hi - 1
        if filled != n:
            raise StoreError(f"run {run.key}: its samples changed while they were read; read it again")
        return _in_seq_order(cols)

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
