"""Simulated boards, the ``nightcell benches`` page and a headless Chromium, for the page's tests and benchmark.

The browser is the system's Chromium (Debian/Ubuntu: ``apt-get install -y chromium``; ``.ci/run`` installs it),
driven by the ``playwright`` package with ``executable_path`` — never a browser downloaded by playwright.

Usage (from tests/, which puts the support package on the path)::

    with boards(tmp, [("5e1f...", "bench 1", 200)]) as sims, page_server([s.url for s in sims], db) as server:
        with browser() as (pw_browser, note):
            page = pw_browser.new_page()
            page.goto(server.url)
"""

from __future__ import annotations

import contextlib
import os
import shutil
import signal
import subprocess
import sys
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterator, Sequence

from nightcell.wire.link import Board
from nightcell.sim.board import SIM_DEVICE_FILE, SimulatedBoard

CHROMIUM_ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
                 "--disable-component-update", "--disable-sync", "--no-first-run"]
INSTALL_HINT = ("Chromium is not installed: `apt-get install -y chromium` (Debian/Ubuntu; .ci/run does this), "
                "then `pip install -e '.[test]'` for playwright")


def chromium_path() -> str | None:
    """The system's Chromium, or None."""
    for name in ("chromium", "chromium-browser"):
        found = shutil.which(name)
        if found:
            return found
    return None


def browser_missing() -> str | None:
    """Why the browser tests cannot run here (None when they can)."""
    if chromium_path() is None:
        return INSTALL_HINT
    try:
        import playwright.sync_api  # noqa: F401
    except ImportError:
        return "the playwright package is not installed: pip install -e '.[test]'"
    return None


WIDEST_ELEMENT_JS = """() => {
        const w = document.documentElement.clientWidth;
        let worst = {right: 0, tag: ''};
        for (const e of document.querySelectorAll('body *')) {
            const r = e.getBoundingClientRect();
            if (r.width === 0 && r.height === 0) continue;
            if (r.right > worst.right) worst = {right: r.right, left: r.left, tag: e.tagName + '.' + e.className};
        }
        return {viewport: w, scroll: document.documentElement.scrollWidth, worst: worst};
    }"""
"""A page's width (``viewport``), its scroll width (``scroll``) and the element that reaches furthest right
(``worst``): what a page that fits its window must keep within the window."""


@contextlib.contextmanager
def browser() -> Iterator[Any]:
    """A headless Chromium from the system packages, driven by playwright."""
    from playwright.sync_api import sync_playwright

    path = chromium_path()
    assert path is not None, INSTALL_HINT
    with sync_playwright() as p:
        b = p.chromium.launch(executable_path=path, args=CHROMIUM_ARGS)
        try:
            yield b
        finally:
            b.close()


@contextlib.contextmanager
def boards(workdir: Path, specs: Sequence[tuple[str, str, int]], *, run: bool = True) -> Iterator[list[SimulatedBoard]]:
    """Simulated boards (device, label, interval ms), each with a blank on clear solvent and, if ``run``, a run
    started; the cuvettes then hold absorbance 0.2."""
    sims: list[SimulatedBoard] = []
    try:
        for i, (device, label, interval_ms) in enumerate(specs):
            folder = workdir / f"board{i}"
            folder.mkdir(parents=True, exist_ok=True)
            (folder / SIM_DEVICE_FILE).write_text(device + "\n", encoding="ascii")  # so `sim-cuvette --dir` finds it
            sim = SimulatedBoard(folder, device=device, seed=11 + i,
                                 settings={"interval_ms": interval_ms, "durability_ms": 1000, "label": label})
            sims.append(sim.start())
        for sim in sims:
            sim.set_cell({"absorbance": 0.0})
            with Board.open(sim.url) as board:
                board.hello(timeout=20.0)
                board.mark("blank", "water")
                if run:
                    board.start("class run")
            sim.set_cell({"absorbance": 0.2})
        yield sims
    finally:
        for sim in sims:
            sim.stop()


@dataclass
class PageServer:
    process: subprocess.Popen
    url: str
    token: str | None
    lines: list[str]


@contextlib.contextmanager
def page_server(ports: Sequence[str], db: Path, *extra: str, timeout: float = 30.0) -> Iterator[PageServer]:
    """``nightcell benches`` in its own process on a free port, without a browser of its own; yields its URL."""
    cmd = [sys.executable, "-m", "nightcell.cli", "benches", "--no-browser", "--http-port", "0", "--db", str(db),
           *extra]
    for p in ports:
        cmd += ["--port", p]
    env = dict(os.environ, PYTHONUNBUFFERED="1")
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True, env=env,
                            start_new_session=True)
    lines: list[str] = []
    url = None
    token = None
    end = time.monotonic() + timeout
    try:
        assert proc.stdout is not None
        while time.monotonic() < end:
            line = proc.stdout.readline()
            if not line:
                break
            lines.append(line.rstrip("\n"))
            if line.startswith("page: "):
                url = line.split()[1]
            if line.startswith("control token"):
                token = line.rsplit(" ", 1)[1].strip()
            if line.startswith("Ctrl-C"):
                break
        assert url, "the page did not start:\n" + "\n".join(lines)
        yield PageServer(proc, url, token, lines)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGINT)
            try:
                proc.wait(timeout=10)
            except subprocess.TimeoutExpired:
                os.killpg(proc.pid, signal.SIGKILL)
                proc.wait(timeout=10)
        if proc.stdout is not None:
            proc.stdout.close()


def tile_absorbance_js(device: str) -> str:
    """A JS expression: the absorbance the tile of ``device`` shows at full precision (NaN when none)."""
    return (f"parseFloat((document.querySelector('.tile[data-device=\"{device}\"] .value') || {{dataset: {{}}}})"
            ".dataset.absorbance)")
