"""The store on a real SQLite file: migrations, idempotent ingest, immutable raw rows, refusal of newer schemas."""

import sqlite3

import pytest

from nightcell import frames as F
from nightcell.errors import InputError, SchemaTooNew, StoreError
from nightcell.store import Store, migration_files
from nightcell.timeline import rebuild_clocks


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
