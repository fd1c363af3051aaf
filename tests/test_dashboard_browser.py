"""The class page in a real browser: three simulated boards (the real firmware behind ptys), `nightcell benches` in
its own process, and the system's headless Chromium driven by playwright.

The tests share one set of boards, one server and one page, and run in this file's order; the last one switches a
board off. What each checks is what a teacher at the front of the room relies on (issue "the class set at a
glance"): a tile per board with its label, absorbance that follows the cuvette within 2 s, a board that stops
answering shown as such with an alert within 5 s, "Sync all" filling the database, a page that fits a 1280×720
projector and a 390 px phone, labels shown as text, and a server that refuses what it must refuse.
"""

from __future__ import annotations

import json
import sqlite3
import time
import urllib.error
import urllib.request
from pathlib import Path

import pytest
from click.testing import CliRunner

from support.dashboard import (WIDEST_ELEMENT_JS, boards, browser, browser_missing, page_server,
                               tile_absorbance_js)
from nightcell.cli import cli

pytestmark = pytest.mark.skipif(browser_missing() is not None, reason=browser_missing() or "")

SIM_DEVICE = "5e1fdab0a4d00001"  # the test's own boards (every sim-board folder now makes an id of its own)
HOSTILE_IMG = "<img src=x onerror=pwned=1>"
HOSTILE_SCRIPT = "<script>pwned=2</script>"
SIM_DEVICE = "5e1fdab0a4d00001"
SPECS = [(SIM_DEVICE, "bench 1", 200), ("5e1fdab0a4d00002", HOSTILE_IMG, 1000),
         ("5e1fdab0a4d00003", HOSTILE_SCRIPT, 1000)]


@pytest.fixture(scope="module")
def room(tmp_path_factory):
    """Three boards logging, the page server (with --control) and a browser page on it at 1280×720."""
    work = tmp_path_factory.mktemp("benches")
    db = work / "class.db"
    with boards(work, SPECS) as sims, page_server([s.url for s in sims], db, "--control") as server, \
            browser() as chromium:
        # bypass_csp: playwright's polling predicates are evaluated strings, which the page's policy forbids. It also
        # means the hostile labels below are kept inert by the page's own escaping, not by the policy (checked
        # apart, on the header).
        page = chromium.new_page(viewport={"width": 1280, "height": 720}, bypass_csp=True)
        page.goto(server.url)
        page.wait_for_function("document.querySelectorAll('.tile[data-device]:not([data-device=\"\"])').length === 3",
                               timeout=20_000)
        yield {"sims": sims, "server": server, "page": page, "db": db, "work": work}


def _tile(device: str) -> str:
    return f'.tile[data-device="{device}"]'


def test_three_tiles_carry_the_boards_labels_and_hostile_labels_stay_text(room):
    page = room["page"]
    labels = page.eval_on_selector_all(".tile .label", "els => els.map(e => e.textContent)")
    assert sorted(labels) == sorted(label for _, label, _ in SPECS)
    # the labels are shown as the characters they are: no element was made from them and no script ran
    assert page.eval_on_selector_all(".tile img, .tile script, #alerts img, #alerts script", "els => els.length") == 0
    assert page.evaluate("typeof window.pwned") == "undefined"
    for device, label, _ in SPECS:
        assert page.text_content(f"{_tile(device)} .label") == label
    # every tile is logging, with an absorbance against its blank near what the cuvette holds (0.2)
    page.wait_for_function("[...document.querySelectorAll('.tile')].every(t => t.dataset.state === 'logging')",
                           timeout=10_000)
    for device, _, _ in SPECS:
        page.wait_for_function(f"Math.abs({tile_absorbance_js(device)} - 0.2) < 0.02", timeout=10_000)
        assert page.text_content(f"{_tile(device)} [data-fact=mark]").startswith("run start")


def test_a_tile_follows_a_cuvette_change_within_two_seconds(room):
    page = room["page"]
    folder = room["sims"][0].workdir
    for target in (0.55, 0.12):
        result = CliRunner().invoke(cli, ["sim-cuvette", "--dir", str(folder), "--absorbance", str(target)])
        assert result.exit_code == 0, result.output
        t0 = time.monotonic()
        page.wait_for_function(f"Math.abs({tile_absorbance_js(SIM_DEVICE)} - {target}) < 0.02", timeout=2_000,
                               polling=20)
        assert time.monotonic() - t0 < 2.0
        shown = page.text_content(f"{_tile(SIM_DEVICE)} .value")
        decimals = int(page.get_attribute(f"{_tile(SIM_DEVICE)} .value", "data-decimals"))
        assert abs(float(shown) - target) < 0.02 and len(shown.split(".")[1]) == decimals and 1 <= decimals <= 4


def _widest(page) -> dict:
    return page.evaluate(WIDEST_ELEMENT_JS)


def test_no_element_is_wider_than_a_projector_or_a_phone(room):
    page = room["page"]
    for width, height in ((1280, 720), (390, 844)):
        page.set_viewport_size({"width": width, "height": height})
        page.wait_for_timeout(300)
        got = _widest(page)
        assert got["scroll"] <= width, got
        assert got["worst"]["right"] <= width + 0.5, got
        assert got["worst"].get("left", 0) >= -0.5, got
        page.screenshot(path=str(room["work"] / f"benches-{width}.png"), full_page=True)
    page.set_viewport_size({"width": 1280, "height": 720})


def _post(url: str, path: str, body: dict, headers: dict | None = None) -> tuple[int, str]:
    req = urllib.request.Request(url.rstrip("/") + path, data=json.dumps(body).encode(), method="POST",
                                 headers={"Content-Type": "application/json", **(headers or {})})
    try:
        with urllib.request.urlopen(req, timeout=10) as r:
            return r.status, r.read().decode()
    except urllib.error.HTTPError as exc:
        return exc.code, exc.read().decode()


def test_the_server_refuses_requests_without_the_page_key_the_token_or_a_loopback_name(room):
    url = room["server"].url
    page = room["page"]
    key = page.get_attribute('meta[name="nightcell-page-key"]', "content")
    # a page of another site cannot read the key, so cannot start a sync or a control
    assert _post(url, "/api/sync", {})[0] == 403
    assert _post(url, "/api/sync", {}, {"X-Page-Key": key, "Origin": "http://elsewhere.example"})[0] == 403
    code, text = _post(url, "/api/control", {"port": room["sims"][2].url, "action": "stop"}, {"X-Page-Key": key})
    assert code == 403 and "wrong control token" in text
    code, text = _post(url, "/api/control", {"port": room["sims"][2].url, "action": "stop"},
                       {"X-Page-Key": key, "X-Control-Token": "guess"})
    assert code == 403
    # a name that is not the loopback's (DNS rebinding) gets nothing, not even the page
    req = urllib.request.Request(url, headers={"Host": "attacker.example:80"})
    with pytest.raises(urllib.error.HTTPError) as err:
        urllib.request.urlopen(req, timeout=10)
    assert err.value.code == 421
    # the page itself allows no inline script
    with urllib.request.urlopen(url, timeout=10) as r:
        assert "script-src 'self'" in r.headers["Content-Security-Policy"]
    # the board was not stopped by any of that
    assert page.get_attribute(_tile(SPECS[2][0]), "data-state") == "logging"


def test_controls_need_the_printed_token_and_then_stop_a_board(room):
    page = room["page"]
    token = room["server"].token
    assert token and any(line.startswith("control token") for line in room["server"].lines)
    assert page.is_hidden(f"{_tile(SPECS[2][0])} .tile-controls")
    page.fill("#control-token", token)
    page.click("#control-use")
    page.click(f"{_tile(SPECS[2][0])} .tile-controls button:text('stop')")
    page.wait_for_function(f"document.querySelector('{_tile(SPECS[2][0])}').dataset.state === 'stopped'",
                           timeout=10_000)
    assert page.text_content(f"{_tile(SPECS[2][0])} [data-fact=mark]").startswith("run stop")


def test_sync_all_fills_the_database_with_every_boards_rows(room):
    page = room["page"]
    page.click("#sync-all")
    # each board's worker lets go of its port for the sync: the sync opens device paths exclusively, so a worker
    # still holding one would make that board's sync fail
    page.wait_for_function("[...document.querySelectorAll('.tile-sync')].every(e => e.textContent.startsWith("
                           "'sync: done'))", timeout=90_000)
    con = sqlite3.connect(f"file:{room['db']}?mode=ro", uri=True)
    try:
        counts = dict(con.execute("SELECT device, count(*) FROM samples GROUP BY device").fetchall())
        blanks = dict(con.execute("SELECT device, count(*) FROM marks WHERE mark = 'blank' GROUP BY device"))
    finally:
        con.close()
    for device, _, _ in SPECS:
        assert counts.get(device, 0) > 0, counts
        assert blanks.get(device) == 1, blanks
    # the boards are watched again afterwards
    page.wait_for_function("[...document.querySelectorAll('.tile')].filter(t => t.dataset.state === 'logging')"
                           ".length === 2", timeout=10_000)


def test_a_board_that_stops_answering_is_shown_and_alerted_within_five_seconds(room):
    page = room["page"]
    device = SPECS[1][0]
    assert page.eval_on_selector_all(f'#alerts li[data-code="not_answering"]', "els => els.length") == 0
    room["sims"][1].power_cut()
    t0 = time.monotonic()
    page.wait_for_function(f"document.querySelector('{_tile(device)}').dataset.state === 'not answering' && "
                           "document.querySelector('#alerts li[data-code=\"not_answering\"]') !== null",
                           timeout=5_000, polling=50)
    assert time.monotonic() - t0 < 5.0
    assert page.text_content(f"{_tile(device)} .state") == "not answering"
    assert page.text_content('#alerts li[data-code="not_answering"] .who') == HOSTILE_IMG
    assert page.eval_on_selector_all(f"{_tile(device)} .tile-alerts li", "els => els.length") >= 1
    page.screenshot(path=str(room["work"] / "benches-silent-board.png"), full_page=True)  # for a person to look at
