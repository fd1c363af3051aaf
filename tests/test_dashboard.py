"""The class page's state and alert rules (``tasks.dashboard``), without a browser: each alert a teacher relies on,
the planned end, discovery plus ``--port``, a board restarted in the middle of a run, and the command's wiring.

Counts are ADC counts summed over ``reads`` reads, as the status reply carries them (schema/protocol.md).
"""

from __future__ import annotations

import time

import pytest

from nightcell.science import optics
from nightcell.errors import InputError
from nightcell.tasks.live import Blank
from nightcell.tasks import dashboard as D

NOW = 1_800_000_000.0
READS = 16


def _tile(**over):
    """A healthy logging tile: blank of this boot, a clear reading at A ≈ 0.3, journal far from full."""
    tile = {"port": "/dev/x", "device": "5e1f000000000001", "label": "bench", "boot": 4, "state": "logging",
            "blank": {"light": [3100.0], "dark": [100.0], "boot": 4, "seq": 6, "label": "water", "source": "board"},
            "last": {"seq": 40, "reads": READS, "light": [READS * 1600], "dark": [READS * 100]},
            "flags": [0], "journal": {"full": False, "wall_seconds_left": 50_000.0, "fraction": 0.1},
            "restart": None, "planned_end_unix": None, "last_answer_unix": NOW - 0.2}
    tile.update(over)
    return tile


def _codes(tile, now=NOW):
    return [a["code"] for a in D.alerts_for(tile, now=now)]


def test_a_healthy_board_raises_no_alert():
    assert _codes(_tile()) == []


def test_a_silent_board_says_how_long_it_has_been_silent():
    alerts = D.alerts_for(_tile(state="not answering", last_answer_unix=NOW - 7.0), now=NOW)
    assert [a["code"] for a in alerts] == ["not_answering"]
    assert "no answer for 7 s" in alerts[0]["detail"]
    # its last reading is old news: it does not also raise "light close to dark"
    dark_reading = {"seq": 1, "reads": READS, "light": [READS * 100], "dark": [READS * 100]}
    assert _codes(_tile(state="not answering", last=dark_reading)) == ["not_answering"]


def test_a_restart_in_the_middle_of_a_run_is_an_alert_that_says_whether_it_resumed():
    alerts = D.alerts_for(_tile(restart={"from_boot": 3, "to_boot": 4, "reset_cause": 1, "resumed": True}), now=NOW)
    assert [a["code"] for a in alerts] == ["restarted"]
    assert "boot 3 → 4" in alerts[0]["detail"] and "resumed the run" in alerts[0]["detail"]


def test_no_blank_since_boot_and_a_blank_from_an_earlier_boot():
    assert _codes(_tile(blank=None)) == ["no_blank"]
    old = _tile()["blank"] | {"boot": 3}
    alerts = D.alerts_for(_tile(blank=old), now=NOW)
    assert [a["code"] for a in alerts] == ["no_blank"] and "from boot 3" in alerts[0]["detail"]


def test_a_blank_whose_light_is_barely_above_dark_looks_blocked():
    # 40 counts above dark of 4095 full scale: below the 2 % limit (82 counts), a blocked path or an LED off
    blocked = _tile()["blank"] | {"light": [140.0], "dark": [100.0]}
    assert "blank_blocked" in _codes(_tile(blank=blocked))


def test_light_close_to_dark_is_an_led_off_or_a_blocked_path():
    reading = {"seq": 41, "reads": READS, "light": [READS * 150], "dark": [READS * 100]}
    assert _codes(_tile(last=reading)) == ["light_near_dark"]


def test_saturation_comes_from_the_optics_flags_of_the_live_reading():
    blank = Blank([3100.0], [100.0], 4, 6, "water", "board")
    at_top = {"last": {"seq": 3, "reads": READS, "light": [READS * 4095], "dark": [READS * 100]}}
    flags = D._reading_flags(at_top, blank, 0.0, D.Limits())
    assert flags[0] & optics.FLAG_SATURATED
    assert _codes(_tile(flags=flags)) == ["saturated"]


def test_readings_beyond_the_stray_light_ceiling_are_flagged():
    # 1 % stray light caps a reading near A = 2 (standard spectrophotometry result [memory], REFERENCES.md)
    blank = Blank([3100.0], [100.0], 4, 6, "water", "board")
    s = optics.stray_fraction_from_opaque(130.0, 100.0, 3100.0, 100.0)  # opaque passes 1 % of the blank's light
    assert abs(optics.stray_ceiling(s) - 2.0) < 0.01
    deep = 3000.0 * 10 ** -1.8  # the reading of A = 1.8: beyond ceiling − log10 2
    reading = {"last": {"seq": 9, "reads": READS, "light": [READS * (100 + deep)], "dark": [READS * 100]}}
    flags = D._reading_flags(reading, blank, s, D.Limits())
    assert flags[0] & optics.FLAG_BEYOND_STRAY
    clear = {"last": {"seq": 9, "reads": READS, "light": [READS * (100 + 300.0)], "dark": [READS * 100]}}
    assert not D._reading_flags(clear, blank, s, D.Limits())[0] & optics.FLAG_BEYOND_STRAY
    assert "beyond_stray" in _codes(_tile(flags=flags))


def test_a_journal_that_will_be_full_before_the_planned_end():
    soon = {"full": False, "wall_seconds_left": 600.0, "fraction": 0.95}
    alerts = D.alerts_for(_tile(journal=soon, planned_end_unix=NOW + 3600), now=NOW)
    assert [a["code"] for a in alerts] == ["full_before_end"]
    assert "10 min" in alerts[0]["detail"] and "60 min" in alerts[0]["detail"]
    assert _codes(_tile(journal=soon, planned_end_unix=NOW + 300)) == []  # the run ends first
    assert _codes(_tile(journal=soon)) == []  # no plan, no promise to break
    assert _codes(_tile(journal={"full": True, "wall_seconds_left": None, "fraction": 1.0})) == ["journal_full"]


def test_every_alert_code_has_a_title():
    assert set(D.ALERT_CODES) == {"not_answering", "restarted", "no_blank", "blank_blocked", "saturated",
                                  "beyond_stray", "light_near_dark", "journal_full", "full_before_end"}


def test_planned_end_as_a_duration_or_a_time_of_day():
    assert D.parse_planned_end(None) is None
    assert D.parse_planned_end("90min", now=NOW) == NOW + 5400
    assert D.parse_planned_end("3h", now=NOW) == NOW + 3 * 3600
    assert D.parse_planned_end("2d", now=NOW) == NOW + 2 * 86400
    at = D.parse_planned_end("15:30", now=NOW)
    assert NOW < at <= NOW + 86400 and time.localtime(at)[3:5] == (15, 30)
    for bad in ("tea time", "25:00", "-3h", "nanh", "3:5"):
        with pytest.raises(InputError, match="HH:MM"):
            D.parse_planned_end(bad, now=NOW)


def test_boards_are_those_discovery_finds_then_each_port_given_once(monkeypatch):
    from nightcell.wire import link

    found = [{"port": "/dev/ttyACM0", "hello": {}}, {"port": "/dev/ttyACM1", "error": "not a board"}]
    monkeypatch.setattr(link, "discover", lambda timeout=1.0: found)
    assert D.board_ports(["/dev/pts/4", "/dev/ttyACM0"]) == ["/dev/ttyACM0", "/dev/pts/4"]


def test_a_board_restarted_mid_run_is_seen_by_its_worker(sim_board):
    """A power cut in the middle of a run: the board comes back, resumes the run by itself, and the tile says so."""
    from nightcell.wire.link import Board

    with Board.open(sim_board.url) as board:
        board.hello(timeout=20.0)
        board.set("interval_ms", 500)
        board.mark("blank", "water")
        board.start("overnight")
    worker = D.BoardWorker(sim_board.url, every=0.3).start()
    try:
        _wait(lambda: worker.snapshot()["state"] == "logging", 20.0)
        first_boot = worker.snapshot()["boot"]
        sim_board.power_cut()
        _wait(lambda: worker.snapshot()["state"] == "not answering", 10.0)
        sim_board.start()
        _wait(lambda: worker.snapshot()["boot"] != first_boot and worker.snapshot()["state"] == "logging", 30.0)
        tile = worker.snapshot()
        codes = [a["code"] for a in tile["alerts"]]
        assert "restarted" in codes and tile["restart"]["resumed"] is True
        assert tile["restart"]["from_boot"] == first_boot
        assert "no_blank" in codes  # the blank was taken before this boot
        _wait(lambda: (worker.snapshot()["last_mark"] or {}).get("value") == "resumed", 20.0)
        assert worker.snapshot()["last_mark"]["source"] == D.MARK_SOURCE_BOARD
    finally:
        worker.stop()


def _wait(predicate, seconds: float) -> None:
    end = time.monotonic() + seconds
    while time.monotonic() < end:
        if predicate():
            return
        time.sleep(0.1)
    raise AssertionError("timed out waiting")


def test_a_paused_worker_lets_go_of_its_port(sim_board):
    """While paused (a sync of its board) the worker holds no port: the port can be opened exclusively."""
    from nightcell.wire.link import Board

    worker = D.BoardWorker(sim_board.url, every=0.3).start()
    try:
        _wait(lambda: worker.snapshot()["device"] is not None, 20.0)
        assert worker.pause("sync")
        assert worker.snapshot()["state"] == "paused"
        with Board.open(sim_board.url) as board:  # device paths are opened exclusively: fails if still held
            assert board.hello(timeout=10.0)["device"] == sim_board.device
        worker.resume()
        _wait(lambda: worker.snapshot()["state"] in ("idle", "logging"), 10.0)
    finally:
        worker.stop()


def test_the_page_writes_text_only_and_loads_nothing_from_elsewhere():
    """Labels reach the page only through textContent (the browser tests show two hostile ones inert); the page's own
    files never build HTML from strings, evaluate text, or name another host (labs are often offline)."""
    import re

    from nightcell.render.dashboard.server import static_dir

    folder = static_dir()
    assert sorted(p.name for p in folder.iterdir()) == ["dashboard.css", "dashboard.js", "index.html"]
    js = (folder / "dashboard.js").read_text(encoding="utf-8")
    for sink in ("innerHTML", "outerHTML", "insertAdjacentHTML", "document.write", "eval(", "new Function",
                 "setTimeout(\"", "setInterval(\""):
        assert sink not in js, sink
    for name in ("index.html", "dashboard.js", "dashboard.css"):
        text = (folder / name).read_text(encoding="utf-8")
        urls = re.findall(r"(?:https?:)?//[A-Za-z0-9.-]+\.[A-Za-z]{2,}[^\s\"')]*", text)
        assert [u for u in urls if u != "http://www.w3.org/2000/svg"] == [], (name, urls)  # a name, not a load


def test_another_address_is_warned_about_and_controls_are_off_without_the_flag(tmp_path):
    """`--host` prints a warning; a board absent at the start is a tile that is not answering, not a crash; without
    `--control` the page's controls are refused whatever it sends."""
    import json
    import urllib.error
    import urllib.request

    from support.dashboard import page_server

    # 127.0.0.2 is a loopback address on Linux that the command does not know as one: it warns, nothing is exposed
    with page_server(["/dev/nightcell-no-such-board"], tmp_path / "class.db", "--host", "127.0.0.2") as server:
        assert server.token is None
        assert any(line.startswith("warning: listening on 127.0.0.2") for line in server.lines), server.lines
        assert server.url.startswith("http://127.0.0.2:")
        state = json.loads(urllib.request.urlopen(server.url + "api/state", timeout=10).read())
        assert [t["state"] for t in state["tiles"]] == ["not answering"]
        page = urllib.request.urlopen(server.url, timeout=10).read().decode()
        key = page.split('name="nightcell-page-key" content="')[1].split('"')[0]
        assert 'name="nightcell-control" content="off"' in page
        req = urllib.request.Request(server.url + "api/control", method="POST",
                                     data=json.dumps({"port": "/dev/nightcell-no-such-board", "action": "stop"}).encode(),
                                     headers={"X-Page-Key": key, "X-Control-Token": "anything"})
        with pytest.raises(urllib.error.HTTPError) as err:
            urllib.request.urlopen(req, timeout=10)
        assert err.value.code == 403 and "controls are off" in err.value.read().decode()


def test_a_blank_already_synced_comes_from_the_database(sim_board, tmp_path):
    """After a sync the board may trim its blank away; the tile reads against the database's newest blank then
    (the live view's rule: the board's unsynced journal first, the database after)."""
    from nightcell.store.database import Store
    from nightcell.store.sync import sync_board
    from nightcell.wire.link import Board

    db = tmp_path / "class.db"
    with Board.open(sim_board.url) as board, Store.open(db) as store:
        board.hello(timeout=20.0)
        board.mark("blank", "water")
        sync_board(board, store)
    worker = D.BoardWorker(sim_board.url, db=db, every=0.3).start()
    try:
        _wait(lambda: worker.snapshot()["device"] is not None, 20.0)
        blank = worker.snapshot()["blank"]
        assert blank is not None and blank["source"] == "database" and blank["label"] == "water"
    finally:
        worker.stop()


def test_the_scatter_of_readings_is_robust_to_drift_and_to_a_change_of_cuvette():
    """For independent normal readings the median absolute successive difference is 0.6745·√2·σ (the normal
    distribution's quartile, a textbook fact); checked against numpy's SD on normal noise, with a reaction's drift
    added, and with one step of 0.3 A among 12 readings."""
    import numpy as np

    rng = np.random.default_rng(5)
    noise = rng.normal(0.3, 0.004, 4000)
    assert abs(D.scatter_sd(list(noise), last=4000) - np.std(noise, ddof=1)) < 0.05 * 0.004
    drifting = noise + np.linspace(0, 0.5, noise.size)  # 0.5 A over the series: a reaction
    assert abs(D.scatter_sd(list(drifting), last=4000) - 0.004) < 0.05 * 0.004
    step = list(noise[:6]) + list(noise[6:12] + 0.3)
    assert D.scatter_sd(step) < 3 * 0.004
    assert D.scatter_sd([0.1, None, 0.2, float("nan")]) is None
