"""The database commands (list, report, export, rate) on a database synced from a simulated board, with a run label
that is HTML and SQL at once: it is stored as text, shown inert everywhere, and every table survives. Files are
written whole or not at all; a run the data cannot support is a clean exit 5."""

from __future__ import annotations

import csv
import json
import re
import sqlite3
import time
from pathlib import Path

import pytest
from click.testing import CliRunner

from nightcell.tasks import export as export_module
from nightcell.cli import cli
from nightcell.errors import InputError
from nightcell.wire.link import Board
from nightcell.sim.board import SimulatedBoard
from nightcell.store.tables import RAW_TABLES

HOSTILE = "<script>alert(1)</script>'; DROP TABLE samples;--"


def _cli(*args, env=None):
    return CliRunner().invoke(cli, [str(a) for a in args], env={"COLUMNS": "250", **(env or {})})


@pytest.fixture(scope="module")
def db(tmp_path_factory) -> Path:
    """A run with no blank before it, then a blank and a run with the hostile label, synced through the CLI."""
    work = tmp_path_factory.mktemp("hostile")
    sim = SimulatedBoard(work / "board", device="5ec0000000000003", speed=20.0, seed=8,
                         settings={"interval_ms": 1000, "durability_ms": 1000})
    sim.start()
    env = {"NIGHTCELL_PORT": sim.url}
    try:
        deadline = time.monotonic() + 20
        while _cli("hello", env=env).exit_code != 0:
            assert time.monotonic() < deadline, sim.stderr_text()
            time.sleep(0.1)
        for args in (("start", "--label", "before any blank"), ("stop",), ("dark",), ("blank", "--label", HOSTILE)):
            if args == ("stop",):
                time.sleep(0.4)
            r = _cli(*args, env=env)
            assert r.exit_code == 0, r.output
        sim.set_cell({"reaction": {"a0": 0.8, "a_inf": 0.0, "k_per_s": 0.01}})
        assert _cli("start", "--label", HOSTILE, env=env).exit_code == 0
        time.sleep(1.0)  # 20 board-seconds: about 20 samples
        for args in (("stop",), ("sync", "--db", work / "hostile.db")):
            r = _cli(*args, env=env)
            assert r.exit_code == 0, r.output
    finally:
        sim.stop()
    return work / "hostile.db"


def _key(db: Path, label: str) -> str:
    runs = json.loads(_cli("list", "runs", "--db", db, "--json").output)
    return next(r["key"] for r in runs if r["label"] == label)


def test_hostile_label_is_stored_as_text_and_the_tables_survive(db):
    con = sqlite3.connect(db)
    labels = [r[0] for r in con.execute("SELECT label FROM marks WHERE mark = 'run_start' ORDER BY seq")]
    assert labels == ["before any blank", HOSTILE]
    tables = {r[0] for r in con.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
    assert set(RAW_TABLES) <= tables
    assert con.execute("SELECT count(*) FROM samples").fetchone()[0] >= 10
    con.close()


def test_listings_show_the_label_as_typed(db):
    for what in ("runs", "blanks"):
        r = _cli("list", what, "--db", db)
        assert r.exit_code == 0, r.output
        assert HOSTILE in r.output, r.output
    data = json.loads(_cli("list", "runs", "--db", db, "--json").output)
    assert [d["label"] for d in data] == ["before any blank", HOSTILE]
    assert data[1]["samples"] >= 10 and data[1]["state"] == "stopped"
    devices = json.loads(_cli("list", "devices", "--db", db, "--json").output)
    assert devices[0]["device"] == "5ec0000000000003" and devices[0]["runs"] == 2


def test_report_escapes_the_label_and_names_files_safely(db, tmp_path):
    r = _cli("report", "--db", db, "--run", HOSTILE, "--out", tmp_path)
    assert r.exit_code == 0, r.output
    pages = list(tmp_path.glob("*.html"))
    assert len(pages) == 1
    assert all(set(p.name) <= set("abcdefghijklmnopqrstuvwxyzABCDEFGHIJKLMNOPQRSTUVWXYZ0123456789._-")
               for p in tmp_path.iterdir())
    page = pages[0].read_text(encoding="utf-8")
    assert "<script" not in page.lower()
    assert "&lt;script&gt;alert(1)&lt;/script&gt;&#x27;; DROP TABLE samples;--" in page
    assert {p.suffix for p in tmp_path.iterdir()} == {".html", ".png", ".svg"}
    svg = next(tmp_path.glob("*-absorbance.svg")).read_text(encoding="utf-8")
    assert "<script" not in svg.lower()


def test_report_all_rescues_a_run_without_blank_before_it_and_says_so(db, tmp_path):
    # issue 12 §5: a run with no blank before it is read against the first blank after it, with a warning
    r = _cli("report", "--db", db, "--all", "--out", tmp_path, "--json")
    assert r.exit_code == 0, r.output
    data = json.loads(r.output)
    assert len([f for f in data["files"] if f.endswith(".html")]) == 2
    page = next(f for f in data["files"] if "before_any_blank" in f and f.endswith(".html"))
    assert "taken after" in Path(page).read_text(encoding="utf-8")


def test_rate_on_a_run_without_blank_before_it_uses_the_next_blank_with_a_warning(db):
    r = _cli("rate", "--db", db, "--run", "before any blank")
    assert r.exit_code == 0, r.output
    assert "no blank before" in r.output and "taken after" in r.output
    data = json.loads(_cli("rate", "--db", db, "--run", "before any blank", "--json").output)
    assert "no blank before the run" in data["detail"]["readings_from"]["blank"]["rule"]


def test_rate_by_key_saves_a_result_naming_its_inputs(db):
    key = _key(db, HOSTILE)
    r = _cli("rate", "--db", db, "--run", key, "--model", "first_order_to_zero", "--json")
    assert r.exit_code == 0, r.output
    data = json.loads(r.output)
    row = sqlite3.connect(db).execute("SELECT kind, label, inputs_json FROM results WHERE id = ?",
                                      (data["result_id"],)).fetchone()
    assert row[0] == "rate" and row[1] == HOSTILE
    inputs = json.loads(row[2])
    assert inputs["run"] == key and inputs["blank"] and inputs["blank_rule"]
    assert HOSTILE in _cli("list", "results", "--db", db).output


def test_export_writes_raw_and_derived_csv(db, tmp_path):
    r = _cli("export", "--db", db, "--out", tmp_path, "--json")
    assert r.exit_code == 0, r.output
    data = json.loads(r.output)
    names = sorted(Path(f).name for f in data["files"])
    # marks, two sample files, two absorbance files (the run before any blank is read against the next blank)
    assert "marks.csv" in names and len(names) == 5
    with open(tmp_path / "marks.csv", newline="", encoding="utf-8") as fh:
        marks = list(csv.DictReader(fh))
    assert HOSTILE in {m["label"] for m in marks}  # CSV quoting keeps the label whole
    samples = next(tmp_path.glob("script_alert_1_script_DROP_TABLE_samples-*-samples.csv"))
    with open(samples, newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    con = sqlite3.connect(db)
    key = _key(db, HOSTILE).split(":")
    stored = con.execute("SELECT seq, dark, light FROM samples WHERE device = ? AND boot = ? AND seq > ? "
                         "ORDER BY seq", (key[0], int(key[1]), int(key[2]))).fetchall()
    # raw counts leave the database unchanged (up to the run's stop mark)
    assert [(int(r["seq"]), int(r["dark"]), int(r["light"])) for r in rows] == stored[:len(rows)]
    absorbance = next(tmp_path.glob("script_alert_1_script_DROP_TABLE_samples-*-absorbance.csv"))
    with open(absorbance, newline="", encoding="utf-8") as fh:
        derived = list(csv.DictReader(fh))
    assert len(derived) == len(rows) and float(derived[0]["time_s"]) == 0.0
    assert 0.5 < float(derived[0]["absorbance"]) < 0.85  # the reaction started at A = 0.8 (invented for this test)


def test_write_atomic_leaves_nothing_when_the_rename_fails(tmp_path, monkeypatch):
    target = tmp_path / "page.html"
    target.write_text("old page")

    def broken(src, dst):
        raise OSError("disk full")

    monkeypatch.setattr(export_module._report.os, "replace", broken)
    # a write the OS refuses is bad input (exit 2) that names the path and the reason
    with pytest.raises(InputError, match="cannot write .*page.html: disk full"):
        export_module.write_atomic(target, b"new page")
    assert target.read_text() == "old page"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["page.html"]


@pytest.mark.parametrize("args, code, message", [
    (["list", "runs", "--db", "missing.db"], 2, "no database at missing.db"),
    (["report", "--db", "DB", "--run", "no such run", "--out", "OUT"], 2, "no run 'no such run'"),
    (["report", "--db", "DB", "--run", "x", "--all", "--out", "OUT"], 2, "give one of --run, --all or --study"),
    (["report", "--db", "DB", "--out", "OUT"], 2, "holds 2 runs: name one with --run KEY"),
    (["calibrate", "--db", "DB"], 5, "has no standards: record some with `nightcell standard`"),
    (["calibrate", "--db", "DB", "--device", "nope"], 2, "no device 'nope'"),
    (["rate", "--db", "DB", "--run", "x", "--a-end", "0.1"], 2, "--a-end applies to CSV files"),
    (["rate"], 2, "give a CSV file (time_s,absorbance) or --db DATABASE"),
])
def test_database_command_errors(db, tmp_path, args, code, message):
    args = [str(db) if a == "DB" else str(tmp_path / "out") if a == "OUT" else a for a in args]
    r = _cli(*args)
    assert r.exit_code == code, r.output
    assert message in r.output and "Traceback" not in r.output
    assert not (tmp_path / "out").exists() or not any((tmp_path / "out").iterdir())


def test_not_a_database_is_exit_4(tmp_path):
    bad = tmp_path / "notes.db"
    bad.write_text("this is not SQLite")
    r = _cli("list", "runs", "--db", bad)
    assert r.exit_code == 4 and "Traceback" not in r.output
    assert bad.read_text() == "this is not SQLite"


# -- file names: the bench's label, not its hex id --------------------------------------------------------------

BENCHES = {"5eba0000000000a1": "bench A", "5eba0000000000a2": "Bench a", "5eba0000000000b1": "bench B",
           "5eba0000000000c1": ""}
"""Four boards: two whose labels differ only in case (one file on Windows and macOS), one of its own, one with no
label."""


@pytest.fixture(scope="module")
def benches_db(tmp_path_factory) -> Path:
    from test_bad_input import journal_records, store_as_synced
    from nightcell.wire import frames as F

    db = tmp_path_factory.mktemp("benches") / "class.db"
    for device, label in BENCHES.items():
        store_as_synced(db, device, [F.decode_record(r)[0] for r in journal_records(device=device)], label=label)
    return db


def test_device_stems_use_the_label_made_safe_and_keep_alike_labels_apart():
    from nightcell.render.report import device_stems

    assert device_stems(BENCHES) == {"5eba0000000000a1": "bench_A-5eba0000000000a1",
                                     "5eba0000000000a2": "Bench_a-5eba0000000000a2",
                                     "5eba0000000000b1": "bench_B", "5eba0000000000c1": "5eba0000000000c1"}
    # labels a file system would refuse or misread are made safe (safe_filename): a reserved name, a path, dots only
    assert device_stems({"d1": "CON", "d2": "../etc", "d3": "..."}) == {"d1": "_CON", "d2": "etc", "d3": "d3"}


def test_report_and_export_files_are_named_by_the_bench_label(benches_db, tmp_path):
    r = _cli("report", "--db", benches_db, "--all", "--out", tmp_path / "r")
    assert r.exit_code == 0, r.output
    pages = sorted(p.name for p in (tmp_path / "r").glob("*.html"))
    assert pages == ["fading_25_C-5eba0000000000c1-1-9.html", "fading_25_C-Bench_a-5eba0000000000a2-1-9.html",
                     "fading_25_C-bench_A-5eba0000000000a1-1-9.html", "fading_25_C-bench_B-1-9.html"], pages
    assert (tmp_path / "r" / "fading_25_C-bench_B-1-9-calibration.png").is_file()
    # no two files differ only by case (one file on Windows and macOS)
    names = [p.name for p in (tmp_path / "r").iterdir()]
    assert len({n.lower() for n in names}) == len(names)
    x = _cli("export", "--db", benches_db, "--out", tmp_path / "x")
    assert x.exit_code == 0, x.output
    assert (tmp_path / "x" / "fading_25_C-bench_B-1-9-samples.csv").is_file()
    assert (tmp_path / "x" / "fading_25_C-bench_B-1-9-absorbance.csv").is_file()
    assert len(list((tmp_path / "x").glob("*-absorbance.csv"))) == len(BENCHES)


def test_a_study_links_its_run_pages_and_names_calibrations_by_bench(benches_db, tmp_path):
    import shutil

    from nightcell.store.database import Store
    from nightcell.tasks.analyse import set_run_condition

    db = tmp_path / "study.db"
    shutil.copy(benches_db, db)
    with Store.open(db) as store:
        for i, run in enumerate(store.runs()):
            set_run_condition(store, run, "temperature_K", 298.15, "sheet")
            set_run_condition(store, run, "conc_hydroxide_M", 0.01 * 2 ** i, "sheet")
    r = _cli("report", "--db", db, "--study", "--out", tmp_path / "s")
    assert r.exit_code == 0, r.output
    out = tmp_path / "s"
    page = (out / "study.html").read_text(encoding="utf-8")
    hrefs = re.findall(r"href='([^']*)'", page)
    assert sorted(hrefs) == ["runs/fading_25_C-5eba0000000000c1-1-9.html",
                             "runs/fading_25_C-Bench_a-5eba0000000000a2-1-9.html",
                             "runs/fading_25_C-bench_A-5eba0000000000a1-1-9.html",
                             "runs/fading_25_C-bench_B-1-9.html"], hrefs
    assert all((out / h).is_file() for h in hrefs)  # every link reaches its page
    assert (out / "study-calibration-bench_B.png").is_file() and (out / "study-calibration-bench_B.svg").is_file()
    assert (out / "study-calibration-5eba0000000000c1.png").is_file()  # no label: the id
    assert (out / "runs" / "calibration-bench_B.png").is_file()  # the run pages' shared figure
