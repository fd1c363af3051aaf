"""Merging another host's database: idempotent by (device, boot, seq) identity, conflicts reported and never taken.

Rows come from the record test vectors in schema/vectors (our own format); the expectations are the merge rules of
issue 4, not values from elsewhere.
"""

import json
import sqlite3

import pytest

from nightcell.wire import frames as F
from nightcell.errors import InputError, SchemaTooNew
from nightcell.store.merge import RAW_IDENTITY, merge_database
from nightcell.store.database import Store


def _records(vectors, names=None):
    out = []
    for v in vectors["records"]["records"]:
        if names is None or v["name"] in names:
            rec, _ = F.decode_record(bytes.fromhex(v["hex"]))
            out.append(rec)
    return out


def _db(path, vectors, device="dev1", names=None, label=None):
    s = Store.open(path)
    with s.write():
        s.touch_device(device, board="pico", firmware="0.1.0", label=label)
        s.ingest(device, _records(vectors, names))
    return s


def _raw(store):
    out = {}
    for table in RAW_IDENTITY:
        cols = [c for c in store.db[table].columns_dict if c not in ("journal", "position")]
        out[table] = sorted(store.conn.execute(f"SELECT {', '.join(cols)} FROM {table}").fetchall(),
                            key=lambda r: tuple(str(x) for x in r))
    return out


def test_merge_adds_the_missing_rows_and_twice_adds_nothing(tmp_path, vectors):
    here = _db(tmp_path / "here.db", vectors, names={"boot", "samples_one_channel", "anchor"})
    there = _db(tmp_path / "there.db", vectors, names={"samples_one_channel", "mark_standard", "health"})
    there.close()
    first = merge_database(here, tmp_path / "there.db")
    assert first.conflicts == []
    assert first.new_rows["marks"] == 1 and first.new_rows["mark_counts"] == 1 and first.new_rows["health"] == 1
    assert first.new_rows["samples"] == 0  # the 5 samples were already here
    second = merge_database(here, tmp_path / "there.db")
    assert second.new == 0 and second.conflicts == []
    # The union of both, each row once.
    union = _db(tmp_path / "union.db", vectors, names={"boot", "samples_one_channel", "anchor", "mark_standard",
                                                         "health"})
    assert _raw(here) == _raw(union)
    assert here.count("merges") == 2
    # The clock of boot 7 was rebuilt from the anchor (one anchor -> rate 1, and it says so).
    q = here.query("SELECT quality, anchors FROM boot_clocks WHERE device = 'dev1' AND boot = 7")
    assert q == [{"quality": "one-anchor", "anchors": 1}]
    here.close()
    union.close()


def test_conflicting_raw_row_is_reported_and_not_taken(tmp_path, vectors):
    here = _db(tmp_path / "here.db", vectors, names={"mark_standard"})
    there = _db(tmp_path / "there.db", vectors, names={"mark_standard", "health"})
    # The other host holds a different label for the same (device, boot, seq): a real conflict.
    there.conn.execute("DROP TRIGGER marks_immutable")
    there.conn.execute("UPDATE marks SET label = 'dye 0.30 µM'")
    there.close()
    report = merge_database(here, tmp_path / "there.db")
    assert report.new_rows["health"] == 1
    assert len(report.conflicts) == 1
    c = report.conflicts[0]
    assert c["table"] == "marks" and c["identity"] == {"device": "dev1", "boot": 7, "seq": 9}
    assert c["here"] == {"label": "dye 0.25 µM"} and c["there"] == {"label": "dye 0.30 µM"}
    assert here.query("SELECT label FROM marks") == [{"label": "dye 0.25 µM"}]
    listed = here.query("SELECT table_name, identity_json FROM merge_conflicts")
    assert listed == [{"table_name": "marks", "identity_json": json.dumps(c["identity"], sort_keys=True)}]
    assert "conflicting rows kept" in report.text()
    here.close()


def test_strict_merge_with_a_conflict_writes_nothing(tmp_path, vectors):
    here = _db(tmp_path / "here.db", vectors, names={"mark_standard"}, label="bench 1")
    there = _db(tmp_path / "there.db", vectors, names={"mark_standard", "health"}, label="bench 2")
    there.close()
    report = merge_database(here, tmp_path / "there.db", strict=True)
    assert not report.applied
    assert report.conflicts[0]["table"] == "devices"
    assert report.conflicts[0]["here"] == {"label": "bench 1"}
    assert here.count("health") == 0 and here.count("merges") == 0
    assert here.query("SELECT label FROM devices") == [{"label": "bench 1"}]
    here.close()


def test_device_metadata_conflict_keeps_ours(tmp_path, vectors):
    here = _db(tmp_path / "here.db", vectors, names={"boot"}, label="bench 1")
    _db(tmp_path / "there.db", vectors, names={"boot"}, label="bench 2").close()
    report = merge_database(here, tmp_path / "there.db")
    assert [c["table"] for c in report.conflicts] == ["devices"]
    assert here.query("SELECT label FROM devices") == [{"label": "bench 1"}]
    here.close()


def test_merge_refuses_itself_a_missing_file_and_a_newer_database(tmp_path, vectors):
    here = _db(tmp_path / "here.db", vectors)
    with pytest.raises(InputError, match="being merged into"):
        merge_database(here, tmp_path / "here.db")
    with pytest.raises(InputError, match="no database at"):
        merge_database(here, tmp_path / "nope.db")
    newer = _db(tmp_path / "newer.db", vectors)
    newer.conn.execute("INSERT INTO _sqlite_migrations(migration_set, name, applied_at) "
                       "VALUES ('nightcell', '9999_from_the_future', 'x')")
    newer.close()
    with pytest.raises(SchemaTooNew, match="newer nightcell"):
        merge_database(here, tmp_path / "newer.db")
    assert here.count("merges") == 0
    here.close()


def test_merge_of_a_foreign_sqlite_file_is_refused(tmp_path, vectors):
    here = _db(tmp_path / "here.db", vectors)
    c = sqlite3.connect(tmp_path / "recipes.db")
    c.execute("CREATE TABLE recipes (name TEXT)")
    c.commit()
    c.close()
    with pytest.raises(Exception, match="not a nightcell database"):
        merge_database(here, tmp_path / "recipes.db")
    here.close()


def _journal_db(path, vectors, journal):
    s = Store.open(path)
    with s.write():
        s.touch_device("dev1", board="pico", firmware="0.1.0")
        s.ingest("dev1", _records(vectors, {"boot", "mark_run_start_button", "samples_one_channel"}),
                 journal=journal)
    return s


def test_run_conditions_come_across_under_this_databases_boot_numbers(tmp_path, vectors):
    """A run of a later journal (its boot numbered apart here) keeps its temperature and concentration after the
    merge, on the same run: the conditions follow the run's start mark, not the other database's boot number."""
    here = _journal_db(tmp_path / "here.db", vectors, journal=1)
    there = _journal_db(tmp_path / "there.db", vectors, journal=2)
    (run,) = there.runs()
    there.record_run_condition("dev1", run.start_boot, run.start_seq, "temperature_K", 298.15, "sheet", 1.0)
    there.record_run_condition("dev1", run.start_boot, run.start_seq, "conc_hydroxide_M", 0.02, "sheet", 1.0)
    there.close()
    report = merge_database(here, tmp_path / "there.db")
    assert report.conflicts == [] and report.new_rows["run_conditions"] == 2
    runs = here.runs()
    assert len(runs) == 2  # the run of journal 1 and the one of journal 2, apart
    moved = [r for r in runs if r.start_boot != run.start_boot]
    assert len(moved) == 1 and moved[0].start_seq == run.start_seq
    assert here.run_condition_rows() == [
        ("dev1", moved[0].start_boot, run.start_seq, "conc_hydroxide_M", 0.02, "sheet"),
        ("dev1", moved[0].start_boot, run.start_seq, "temperature_K", 298.15, "sheet")]
    assert merge_database(here, tmp_path / "there.db").new == 0  # twice adds nothing
    here.close()


def test_a_condition_recorded_otherwise_there_is_reported_and_ours_kept(tmp_path, vectors):
    here = _journal_db(tmp_path / "here.db", vectors, journal=1)
    there = _journal_db(tmp_path / "there.db", vectors, journal=1)
    (run,) = here.runs()
    here.record_run_condition("dev1", run.start_boot, run.start_seq, "temperature_K", 298.15, "bench sheet", 1.0)
    there.record_run_condition("dev1", run.start_boot, run.start_seq, "temperature_K", 308.15, "probe mean", 2.0)
    there.close()
    strict = merge_database(here, tmp_path / "there.db", strict=True)
    assert not strict.applied and here.count("merges") == 0
    report = merge_database(here, tmp_path / "there.db")
    (c,) = report.conflicts
    assert c["table"] == "run_conditions" and c["identity"]["quantity"] == "temperature_K"
    assert c["here"] == {"value": 298.15, "source": "bench sheet"} and c["there"]["value"] == 308.15
    assert here.run_condition_rows()[0][4:] == (298.15, "bench sheet")
    here.close()
