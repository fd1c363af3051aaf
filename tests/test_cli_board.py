"""Board commands against one simulated board (the real firmware behind a pty, real pyserial): values are checked on
the host before anything is sent, refusals say what to do with exit code 2 or 3, and `watch` leaves the board
logging when Ctrl-C ends it."""

from __future__ import annotations

import json
import re
import time
from pathlib import Path

import pytest
from click.testing import CliRunner

from nightcell import cli as cli_module
from nightcell.cli import cli
from nightcell.wire.link import Board
from nightcell.sim.board import SimulatedBoard

SETTINGS_MD = Path(__file__).resolve().parent.parent / "schema" / "settings.md"


@pytest.fixture(scope="module")
def sim(tmp_path_factory):
    board = SimulatedBoard(tmp_path_factory.mktemp("board"), device="5eb0000000000002", speed=20.0, seed=5,
                           settings={"interval_ms": 1000, "durability_ms": 1000})
    board.start()
    deadline = time.monotonic() + 20
    while True:
        try:
            with Board.open(board.url, timeout=1.0) as b:
                b.hello(timeout=1.0)
            break
        except Exception:
            if time.monotonic() > deadline:
                raise
            time.sleep(0.1)
    yield board
    board.stop()


def _run(sim, *args):
    return CliRunner().invoke(cli, [str(a) for a in args], env={"NIGHTCELL_PORT": sim.url, "COLUMNS": "120"})


def _hello(sim) -> dict:
    r = _run(sim, "hello", "--json")
    assert r.exit_code == 0, r.output
    return json.loads(r.output)


@pytest.mark.parametrize("args, message", [
    ([], "nothing to set: give at least one of --interval"),
    (["--interval", "0.1"], "interval must be from 0.2 to 86400 s, not 0.1 s"),
    (["--warmup", "601"], "warmup must be from 0 to 600 s, not 601 s"),
    (["--durability", "-1"], "durability must be from 0 to 3600 s"),
    (["--label", "x" * 33], "the board keeps at most 32: shorten it"),
    (["--channel", "red-15-26"], "must be NAME:LED:ADC, e.g. red:15:26"),
    (["--channel", "red:15:300"], "pin numbers run from 0 to 255"),
    (["--channel", "a:1:2", "--channel", "a:3:4"], "two channels have the same name"),
    (["--reads", "0"], "--reads must be from 1 to 256"),
    (["--path-cm", "20"], "--path-cm must be from 0.01 to 10 cm"),
])
def test_setup_checks_values_on_the_host_and_changes_nothing(sim, args, message):
    before = _hello(sim)
    r = _run(sim, "setup", *args)
    assert r.exit_code == 2, r.output
    assert message in r.output and "Traceback" not in r.output
    after = _hello(sim)
    assert after["settings_crc"] == before["settings_crc"] and after["head"] == before["head"]


def test_setup_sets_and_says_what_waits_for_a_restart(sim):
    r = _run(sim, "setup", "--interval", "1.5", "--label", "bench 3", "--channel", "red:15:26", "--json")
    assert r.exit_code == 0, r.output
    data = json.loads(r.output)
    assert data["applied"] == {"label": "bench 3", "interval_ms": 1500,
                               "channels": [{"name": "red", "led": 15, "adc": 26}]}
    assert data["after_reset"] == ["channels"]
    assert data["settings"]["interval_ms"] == 1500
    info = _hello(sim)
    assert info["interval_ms"] == 1500 and info["label"] == "bench 3"
    text = _run(sim, "setup", "--interval", "1")
    assert text.exit_code == 0 and "interval_ms = 1000" in text.output


def test_setup_of_a_board_with_no_label_says_so_and_how_to_name_it(sim_board):
    """A fresh simulated board has no label: setup names it in words and tells how to give it one; its hex id
    appears only as detail at the end of that hint (and in --json)."""
    r = _run(sim_board, "setup", "--interval", "2")
    assert r.exit_code == 0, r.output
    lines = r.output.splitlines()
    assert lines[0] == "the board with no label yet: interval_ms = 2000", r.output
    assert lines[-1] == ('give it a label with `nightcell setup --label "bench 1"`, so its runs, tables and reports '
                         "name it (device id 5e1f000000000001)"), r.output
    assert sum("5e1f000000000001" in line for line in lines) == 1, r.output
    assert json.loads(_run(sim_board, "setup", "--interval", "2", "--json").output)["device"] == "5e1f000000000001"
    named = _run(sim_board, "setup", "--label", "bench 7")
    assert named.exit_code == 0 and named.output.startswith('bench 7: label = "bench 7"'), named.output
    assert "5e1f000000000001" not in named.output and "give it a label" not in named.output
    again = _run(sim_board, "setup", "--interval", "2")
    assert again.output.startswith("bench 7: interval_ms = 2000"), again.output


def test_setting_ranges_agree_with_the_schema():
    """The host's checks use the ranges of schema/settings.md (docs kept true by machine)."""
    table = {}
    for line in SETTINGS_MD.read_text(encoding="utf-8").splitlines():
        cells = [c.strip() for c in line.strip().strip("|").split("|")]
        if len(cells) == 4:
            table[cells[0]] = cells[3]
    for key, (lo, hi) in {**cli_module.SETTING_RANGES_MS, **cli_module.SETTING_RANGES}.items():
        numbers = [float(n.replace(" ", "")) for n in re.findall(r"[\d][\d .]*", table[key])]
        assert numbers == [lo, hi], key
    assert f"≤ {cli_module.LABEL_MAX_BYTES} bytes" in table["label"]
    assert f"1 – {cli_module.MAX_CHANNELS} channels" in table["channels"]


def test_marks_print_counts_and_json(sim):
    r = _run(sim, "dark", "--label", "lid on")
    assert r.exit_code == 0 and "dark 'lid on' recorded on the board" in r.output and "counts per read" in r.output
    r = _run(sim, "blank", "--json")
    assert r.exit_code == 0, r.output
    data = json.loads(r.output)
    assert data["mark"] == "blank" and data["reads"] > 0 and len(data["light"]) == 1
    # the simulated LED gives 3000 counts above a dark of 60 per read (simulate.DEFAULT_OPTICS)
    assert data["light"][0] / data["reads"] - data["dark"][0] / data["reads"] == pytest.approx(3000, rel=0.02)
    r = _run(sim, "opaque", "--label", "black card")
    assert r.exit_code == 0 and "opaque 'black card' recorded" in r.output
    r = _run(sim, "standard", "1e-3", "--label", "std A")
    assert r.exit_code == 0 and "standard 1e-3 'std A'" in r.output


@pytest.mark.parametrize("value", ["abc", "1,5", "0x10", "1" * 33])
def test_standard_value_must_be_a_number_as_typed(sim, value):
    head = _hello(sim)["head"]
    r = _run(sim, "standard", value)
    assert r.exit_code == 2 and "must be a decimal number as typed" in r.output
    assert _hello(sim)["head"] == head


def test_long_labels_and_empty_notes_are_refused_before_sending(sim):
    head = _hello(sim)["head"]
    r = _run(sim, "blank", "--label", "é" * 120)
    assert r.exit_code == 2 and "too long for one request" in r.output
    r = _run(sim, "note", "  ")
    assert r.exit_code == 2 and "the note is empty" in r.output
    assert _hello(sim)["head"] == head


def test_start_stop_note_clock_and_their_refusals(sim):
    r = _run(sim, "stop")
    assert r.exit_code == 2 and "is not logging a run: nothing to stop" in r.output
    r = _run(sim, "clock")
    assert r.exit_code == 0 and "clock set from this computer's time" in r.output
    r = _run(sim, "start", "--label", "run A")
    assert r.exit_code == 0 and "run 'run A' started" in r.output
    r = _run(sim, "start")
    assert r.exit_code == 2 and "already logging a run: stop it first" in r.output
    r = _run(sim, "note", "added base")
    assert r.exit_code == 0 and "note recorded on the board" in r.output
    r = _run(sim, "stop", "--json")
    assert r.exit_code == 0 and json.loads(r.output)["device"] == "5eb0000000000002"
    assert _hello(sim)["running"] is False


def test_watch_ctrl_c_leaves_the_board_logging(sim, monkeypatch):
    assert _run(sim, "start", "--label", "watched").exit_code == 0
    calls = []
    real_status = Board.status

    def status(self):
        calls.append(1)
        if len(calls) == 3:
            raise KeyboardInterrupt
        return real_status(self)

    monkeypatch.setattr(Board, "status", status)
    sent = []
    real_request = Board.request

    def request(self, verb, *args, **kwargs):
        sent.append(verb)
        return real_request(self, verb, *args, **kwargs)

    monkeypatch.setattr(Board, "request", request)
    r = _run(sim, "watch", "--every", "0.1", "--db", "no-such.db")
    monkeypatch.undo()
    assert r.exit_code == 0, r.output
    assert "stopped watching after 2 polls; the board goes on logging" in r.output
    assert "stop" not in sent and "ack" not in sent and set(sent) <= {"hello", "flush", "read", "status"}
    assert _hello(sim)["running"] is True
    assert not Path("no-such.db").exists()  # watching never makes a database
    assert _run(sim, "stop").exit_code == 0


def test_missing_port_says_how_to_give_one():
    r = CliRunner().invoke(cli, ["dark"], env={"NIGHTCELL_PORT": ""})
    assert r.exit_code == 2 and "--port" in r.output


def test_a_port_with_no_board_is_exit_3():
    r = CliRunner().invoke(cli, ["blank", "--port", "/dev/nightcell-no-such-port"])
    assert r.exit_code == 3 and "no board at /dev/nightcell-no-such-port" in r.output
    assert "Traceback" not in r.output


def test_start_for_checks_the_journal_room_and_hello_tells_time_until_full(sim):
    info = _hello(sim)
    assert info["measure_ms"] == 20 and info["full_in_s"] is None  # the default pulses: 2 pairs of 5 + 5 ms
    r = _run(sim, "start", "--for", "100000d")
    assert r.exit_code == 2 and "does not fit" in r.output and "the design figure of 4.00 B a sample" in r.output
    assert _hello(sim)["running"] is False  # refused: nothing started
    r = _run(sim, "start", "--for", "100000d", "--even-if-short", "--json")
    assert r.exit_code == 0, r.output
    room = json.loads(r.output)["room"]
    assert room["fits"] is False and room["design"] is True
    deadline = time.monotonic() + 30
    while _hello(sim).get("bytes_per_sample") is None and time.monotonic() < deadline:
        time.sleep(0.5)  # 20 samples at 1 s of a board running 20 times faster
    info = _hello(sim)
    assert 2.0 <= info["bytes_per_sample"] <= 6.0
    r = _run(sim, "hello")
    assert r.exit_code == 0 and "storage full in: " in r.output
    assert _run(sim, "stop").exit_code == 0
    r = _run(sim, "start", "--for", "1h", "--json")  # fits: started, with the room it has
    assert r.exit_code == 0, r.output
    assert json.loads(r.output)["room"]["design"] is False
    assert _run(sim, "stop").exit_code == 0
