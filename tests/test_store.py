"""The store on a real SQLite file: migrations, idempotent ingest, immutable raw rows, refusal of newer schemas."""

import sqlite3

import pytest

from nightcell.wire import frames as F
from nightcell.errors import InputError, SchemaTooNew, StoreError
from nightcell.store.database import Store, migration_files
from nightcell.store.clocks import rebuild_clocks


def _records(vectors):
    out = []
    pos = 0
    for v in vectors["records"]["records"]:
        raw = bytes.fromhex(v["hex"])
        rec, _ = F.decode_record(raw)
        rec.position = pos
        pos += len(raw)
        out.append(rec)
    return out


def test_fresh_db_is_migrated_and_wal(store):
    names = {m for (m,) in store.conn.execute("SELECT name FROM _sqlite_migrations")}
    assert names == {name for name, _ in migration_files()}
    assert store.conn.execute("PRAGMA journal_mode").fetchone()[0] == "wal"


def test_ingest_twice_adds_nothing(store, vectors):
    recs = _records(vectors)
    with store.write():
        first = store.ingest("dev1", recs)
    with store.write():
        second = store.ingest("dev1", recs)
    assert first["samples"] == 5 + 3 * 2  # 5 one-channel samples, 3 two-channel samples
    assert first["marks"] == 2 and first["anchors"] == 1 and first["boots"] == 1
    assert sum(second.values()) == 0
    assert store.count("samples") == 11


def test_raw_rows_cannot_be_changed_or_deleted(store, vectors):
    with store.write():
        store.ingest("dev1", _records(vectors))
    with pytest.raises(sqlite3.DatabaseError, match="never changed"):
        store.conn.execute("UPDATE samples SET light = 0")
    with pytest.raises(sqlite3.DatabaseError, match="never deleted"):
        store.conn.execute("DELETE FROM marks")


def _sample_rows(n, light=40000):
    return [("dev", 1, seq, 0, 1000 * seq, 0, 0, 16, 1600, light, None) for seq in range(n)]


def _guard_text(conn):
    return conn.execute("SELECT sql FROM sqlite_master WHERE name = 'samples_not_replaced'").fetchone()


def test_raw_rows_are_not_replaced_from_another_connection_after_a_large_insert(store):
    """Migration 4's guard: INSERT OR REPLACE from any connection keeps the stored row; a large insert (which sets
    the guard aside inside its own transaction) leaves it in place, its text unchanged."""
    before = _guard_text(store.conn)
    with store.write():
        store.insert_rows({"samples": _sample_rows(5000)})
    assert _guard_text(store.conn) == before is not None
    other = sqlite3.connect(store.path)
    other.execute("INSERT OR REPLACE INTO samples VALUES ('dev', 1, 7, 0, 7000, 0, 0, 16, 1600, 1, NULL)")
    other.commit()
    other.close()
    assert store.conn.execute("SELECT light FROM samples WHERE seq = 7").fetchone()[0] == 40000
    assert store.count("samples") == 5000


def test_no_other_connection_sees_the_table_without_its_guard(store):
    """While a large insert runs, another connection still reads the guard, and cannot write; when the transaction
    fails, the guard is back with everything else."""
    seen = []

    class Watched(list):
        def __iter__(self):
            for i, row in enumerate(super().__iter__()):
                if i == 2500:
                    other = sqlite3.connect(store.path, timeout=0.05)
                    seen.append(_guard_text(other))
                    with pytest.raises(sqlite3.OperationalError, match="locked"):
                        other.execute("INSERT OR REPLACE INTO samples VALUES "
                                      "('dev', 1, 7, 0, 7000, 0, 0, 16, 1600, 1, NULL)")
                    other.close()
                yield row

    before = _guard_text(store.conn)
    with store.write():
        store.insert_rows({"samples": Watched(_sample_rows(5000))})
    assert seen == [before] and before is not None
    with pytest.raises(RuntimeError, match="cut"):
        with store.write():
            store.insert_rows({"samples": _sample_rows(9000, light=1)})
            raise RuntimeError("cut")
    assert _guard_text(store.conn) == before
    assert store.count("samples") == 5000


def test_readable_view_has_units_and_wall_clock(store, vectors):
    with store.write():
        store.ingest("dev1", _records(vectors))
        rebuild_clocks(store)
    rows = store.query("SELECT * FROM sample_readings WHERE boot = 7 ORDER BY seq")
    assert rows[0]["dark_counts_per_read"] == pytest.approx(1650 / 16)
    assert rows[0]["signal_counts_per_read"] == pytest.approx((52400 - 1650) / 16)
    # boot 7 has one anchor (host 1796131200123 ms at uptime 130500 ms) -> clock at rate 1
    assert rows[0]["clock_quality"] == "one-anchor"
    assert rows[0]["wall_clock_unix_s"] == pytest.approx(1796131200.123 - 130.5 + 60.0)


def test_reopen_keeps_data(tmp_path, vectors):
    p = tmp_path / "a.db"
    with Store.open(p) as s, s.write():
        s.ingest("dev1", _records(vectors))
    with Store.open(p) as s:
        assert s.count("samples") == 11


def test_newer_schema_is_refused(tmp_path):
    p = tmp_path / "new.db"
    with Store.open(p) as s, s.write():
        s.conn.execute("INSERT INTO _sqlite_migrations(migration_set, name, applied_at) "
                       "VALUES ('nightcell', '9999_from_the_future', 'x')")
    with pytest.raises(SchemaTooNew, match="newer nightcell"):
        Store.open(p)


def test_not_a_database_is_refused(tmp_path):
    p = tmp_path / "notes.db"
    p.write_text("these are my notes, not a database" * 100)
    with pytest.raises(StoreError, match="nightcell database"):
        Store.open(p)


def test_foreign_sqlite_file_is_refused(tmp_path):
    p = tmp_path / "other.db"
    c = sqlite3.connect(p)
    c.execute("CREATE TABLE recipes (name TEXT)")
    c.commit()
    c.close()
    with pytest.raises(StoreError, match="not a nightcell database"):
        Store.open(p)


def test_missing_db_without_create(tmp_path):
    with pytest.raises(InputError, match="sync a board first"):
        Store.open(tmp_path / "none.db", create=False)


def test_transaction_rolls_back_on_error(store, vectors):
    with pytest.raises(RuntimeError):
        with store.write():
            store.ingest("dev1", _records(vectors))
            raise RuntimeError("cable pulled")
    assert store.count("samples") == 0


def test_an_older_database_is_migrated_when_opened(tmp_path, vectors):
    """A file written by a nightcell that knew only migration 0001 gets the newer ones, in one go, recorded."""
    import sqlite_utils

    from nightcell.store.database import _statements

    p = tmp_path / "old.db"
    db = sqlite_utils.Database(p)
    migrations = sqlite_utils.Migrations("nightcell")
    name, sql = migration_files()[0]

    @migrations(name=name)
    def first(d):
        for stmt in _statements(sql):
            d.conn.execute(stmt)

    migrations.apply(db)
    db.conn.execute("INSERT INTO anchors VALUES ('dev1', 7, 11, 130500, 1796131200123)")
    db.conn.commit()
    db.close()
    with Store.open(p) as s:
        names = [m for (m,) in s.conn.execute("SELECT name FROM _sqlite_migrations ORDER BY id")]
        assert names == [n for n, _ in migration_files()] and len(names) >= 2
        assert s.count("anchors") == 1  # old rows kept
        assert "anchor_seqs_json" in s.db["boot_clocks"].columns_dict
        assert s.count("sync_sessions") == 0


def test_migration_0006_keeps_every_row_and_numbers_a_later_journal_apart(tmp_path, vectors):
    """A database written before journals were told apart (every migration but 0006, rows of one synced journal and
    an anchor whose boot has no boots row) is migrated with every row as it was; each stored boot keeps its number,
    recorded with its journal (from its boots row, else the device's only journal). Records of a second journal
    with the same boot and seq numbers are then stored beside them, under boot numbers of their own; the same
    records again add nothing, and the first journal's rows are unchanged."""
    p = tmp_path / "old.db"
    recs = _records(vectors)
    with Store.open(p) as s:  # rows of the first journal keep the board's boot numbers: as an older nightcell stored
        with s.write():
            s.touch_device("dev1")
            s.conn.execute("INSERT INTO journals VALUES ('dev1', 77, 0, 0, 0)")
            s.ingest("dev1", recs, journal=77)
            s.conn.execute("INSERT INTO anchors VALUES ('dev1', 99, 11, 130500, 1796131200123)")
        # back to the schema before 0006 (no other table refers to journal_boots)
        s.conn.execute("DROP TABLE journal_boots")
        s.conn.execute("DELETE FROM _sqlite_migrations WHERE name LIKE '0006%'")
        s.conn.commit()
        tables = [t for t in s.db.table_names() if t not in ("_sqlite_migrations", "journal_boots")]
        before = {t: sorted(s.conn.execute(f"SELECT * FROM {t}").fetchall(), key=repr) for t in tables}
    with Store.open(p) as s:
        assert "journal_boots" in s.db.table_names()
        assert {t: sorted(s.conn.execute(f"SELECT * FROM {t}").fetchall(), key=repr) for t in tables} == before
        mapped = s.conn.execute("SELECT journal, journal_boot, boot FROM journal_boots").fetchall()
        boots = {b for (b,) in s.conn.execute("SELECT DISTINCT boot FROM samples")} | {99}
        assert {b for _, _, b in mapped} >= boots and all(j == 77 and jb == b for j, jb, b in mapped)
        n = s.count("samples")
        with s.write():
            s.ingest("dev1", recs, journal=78)  # the board wiped: the same keys, a new journal
        assert s.count("samples") == 2 * n
        with s.write():
            assert sum(s.ingest("dev1", recs, journal=78).values()) == 0
        later = {b for (b,) in s.conn.execute("SELECT boot FROM journal_boots WHERE journal = 78")}
        assert later and not later & {b for _, _, b in mapped}
        rows = sorted(s.conn.execute("SELECT * FROM samples WHERE boot IN (%s)" % ",".join("?" * len(boots)),
                                     sorted(boots)).fetchall(), key=repr)
        assert rows == before["samples"]


def test_lazy_samples_ingest_the_same_rows_as_decoded_ones(tmp_path, vectors):
    eager = _records(vectors)
    lazy = []
    for v in vectors["records"]["records"]:
        rec, _ = F.decode_record(bytes.fromhex(v["hex"]), lazy_samples=True)
        lazy.append(rec)
    rows = []
    for name, recs in (("a", eager), ("b", lazy)):
        with Store.open(tmp_path / f"{name}.db") as s:
            with s.write():
                s.ingest("dev1", recs)
            rows.append(s.conn.execute("SELECT * FROM samples ORDER BY boot, seq, channel").fetchall())
    assert rows[0] == rows[1] and len(rows[0]) == 11
    # The vector's block at uptime 4294967000 ms crosses the u32 wrap: later samples keep counting up.
    ups = [r[4] for r in rows[0] if r[1] == 8 and r[3] == 0]
    assert ups == [4294967000 + i * 30000 + late for i, late in enumerate([r[5] for r in rows[0]
                                                                           if r[1] == 8 and r[3] == 0])]


def test_two_writers_and_a_reader_share_one_file(tmp_path):
    """Two syncs' worth of batches from two threads plus a reader polling a view: no 'database is locked'."""
    import threading

    path = tmp_path / "shared.db"
    Store.open(path).close()
    errors = []

    def blocks(boot):
        out = []
        for b in range(40):
            s = [{"late_ms": 0, "flags": 0, "dark": [100 + b], "light": [4000 + i]} for i in range(50)]
            raw = F.encode_record(F.KIND_SAMPLES, boot, b * 50, b * 50_000,
                                  {"interval_ms": 1000, "reads": 1, "channels": 1, "options": 0, "samples": s})
            out.append(F.decode_record(raw, lazy_samples=True)[0])
        return out

    def writer(device):
        try:
            with Store.open(path) as s:
                recs = blocks(1)
                for i in range(0, len(recs), 4):
                    with s.write():
                        s.ingest(device, recs[i:i + 4])
                        rebuild_clocks(s, device)
                with s.write():  # the same again: a re-sync adds nothing
                    assert sum(s.ingest(device, recs).values()) == 0
        except Exception as exc:  # noqa: BLE001 - reported below
            errors.append(exc)

    def reader(stop):
        try:
            with Store.open(path) as s:
                while not stop.is_set():
                    s.query("SELECT count(*) AS n FROM sample_readings")
        except Exception as exc:  # noqa: BLE001
            errors.append(exc)

    stop = threading.Event()
    threads = [threading.Thread(target=writer, args=(d,)) for d in ("dev-a", "dev-b")]
    r = threading.Thread(target=reader, args=(stop,))
    r.start()
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    stop.set()
    r.join()
    assert errors == []
    with Store.open(path) as s:
        assert s.count("samples") == 2 * 40 * 50
        dup = s.conn.execute("SELECT count(*) FROM (SELECT device, boot, seq, channel FROM samples "
                             "GROUP BY 1, 2, 3, 4 HAVING count(*) > 1)").fetchone()[0]
        assert dup == 0
