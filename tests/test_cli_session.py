"""A whole session through the command line against a simulated board (the real firmware behind a pty, real
pyserial): set up, clock, dark, blank, standards, start, watch, note, stop, sync, then list, calibrate, rate, report
and export on the database. Every step must succeed and say what it did.

The same helper captures the README's "A full session" (run this file: ``python tests/test_cli_session.py``), so the
output shown there is real output. The cuvette's contents are invented for the session (a dye of our own choosing,
its absorptivity and fading rate below); the fits must give them back within the uncertainty they state.
"""

from __future__ import annotations

import json
import os
import re
import sys
import time
from dataclasses import dataclass
from pathlib import Path

import pytest
from click.testing import CliRunner

from nightcell.cli import cli
from nightcell.sim.board import SimulatedBoard, folder_device_id

# The session's invented cuvette (ours, used nowhere else): absorbance per µM, standards, and a first-order fading.
EPSILON_PER_UM = 0.075
STANDARDS_UM = (2.0, 4.0, 6.0, 8.0, 10.0)
START_UM = 9.0
K_PER_S = 0.02
A_INF = 0.0  # fades to colourless: the first-order law is then exact


@dataclass
class Step:
    args: list[str]
    output: str
    exit_code: int

    def shown(self) -> str:
        quoted = " ".join(a if a and all(c.isalnum() or c in "-_./:=" for c in a) else json.dumps(a, ensure_ascii=False)
                          for a in self.args)
        body = "\n".join(line.rstrip() for line in self.output.rstrip().splitlines())  # tables pad with spaces
        return f"$ nightcell {quoted}\n{body}"


def run_session(workdir: Path, *, interval_s: float = 0.5, run_s: float = 8.0, watch_polls: int = 2,
                watch_every: float = 1.0,
                label: str = "dye fading", db_name: str = "bench.db") -> tuple[list[Step], SimulatedBoard]:
    """Run the session in ``workdir`` against a fresh simulated board (real time: speed 1); returns every step."""
    # the board's id is the one its folder keeps, as `nightcell sim-board --dir board` would use
    device = folder_device_id(workdir / "board", create=True)
    sim = SimulatedBoard(workdir / "board", device=device, speed=1.0, seed=11, settings={"board": "sim"})
    sim.start()
    env = {"NIGHTCELL_PORT": sim.url, "COLUMNS": "100"}
    runner = CliRunner()
    steps: list[Step] = []
    cwd = os.getcwd()
    os.chdir(workdir)

    def run(*args: str) -> Step:
        r = runner.invoke(cli, list(args), env=env)
        step = Step(list(args), r.output, r.exit_code)
        steps.append(step)
        return step

    try:
        deadline = time.monotonic() + 20
        while run("hello").exit_code != 0:
            steps.pop()
            if time.monotonic() > deadline:
                raise RuntimeError("the simulated board did not answer: " + sim.stderr_text())
            time.sleep(0.1)
        run("setup", "--interval", f"{interval_s:g}", "--warmup", "1", "--durability", "1", "--label", "bench 3")
        run("clock")
        # the cuvette is filled as a reader of the README fills it: with `nightcell sim-cuvette`
        run("sim-cuvette", "--dir", "board", "--blocked")
        run("dark", "--label", "lid on, LED off")
        run("sim-cuvette", "--dir", "board", "--absorbance", "0")
        run("blank", "--label", "alkaline water")
        for c in STANDARDS_UM:
            run("sim-cuvette", "--dir", "board", "--absorbance", f"{EPSILON_PER_UM * c:g}")
            run("standard", f"{c:g}", "--label", f"dye {c:g} µM")
        run("sim-cuvette", "--dir", "board", "--fading", f"{EPSILON_PER_UM * START_UM:g}:{A_INF:g}:{K_PER_S:g}")
        run("start", "--label", label)
        time.sleep(2.0)
        run("watch", "--every", f"{watch_every:g}", "--polls", str(watch_polls))
        run("note", "stirred once")
        sim.unplug()  # the host goes away; the board logs on its own
        time.sleep(run_s)
        sim.plug()
        run("stop")
        run("sync", "--db", db_name)
        run("list", "runs", "--db", db_name)
        run("calibrate", "--db", db_name)
        run("rate", "--db", db_name, "--run", label)
        run("report", "--db", db_name, "--run", label, "--out", "reports")
        run("export", "--db", db_name, "--out", "csv")
        run("list", "results", "--db", db_name)
    finally:
        os.chdir(cwd)
        sim.stop()
    return steps, sim


@pytest.fixture(scope="module")
def session(tmp_path_factory):
    workdir = tmp_path_factory.mktemp("session")
    steps, _ = run_session(workdir)
    return workdir, {s.args[0] if s.args[0] != "list" else "list " + s.args[1]: s for s in steps}, steps


def test_every_step_succeeds(session):
    _, _, steps = session
    for s in steps:
        assert s.exit_code == 0, s.shown()
        assert "Traceback" not in s.output


def test_board_steps_say_what_they_did(session):
    workdir, by, _ = session
    sim_device = folder_device_id(workdir / "board", create=False)
    assert "interval_ms = 500" in by["setup"].output and "label = \"bench 3\"" in by["setup"].output
    assert "clock set from this computer's time" in by["clock"].output
    assert re.search(r"\d\d:\d\d:\d\d [A-Z][A-Za-z0-9:+-]*", by["clock"].output)  # local time, zone named
    assert "bench 3: dark 'lid on, LED off' recorded on the board" in by["dark"].output
    assert "blank 'alkaline water' recorded" in by["blank"].output
    assert "standard 10 'dye 10 µM' recorded" in by["standard"].output
    assert "bench 3: run 'dye fading' started" in by["start"].output
    assert "note recorded" in by["note"].output
    assert "run stopped" in by["stop"].output
    assert "new readings and marks stored" in by["sync"].output
    # the board by its label; its id and the journal's record keys are for --json and the detail
    for step in ("clock", "dark", "blank", "start", "note", "stop", "sync"):
        assert "5e55000000000001" not in by[step].output and "journal" not in by[step].output, step


def test_watch_shows_absorbance_against_the_boards_blank_and_the_journal(session):
    _, by, _ = session
    out = by["watch"].output
    assert "blank 'alkaline water' (from the board)" in out
    assert "logging a run" in out and "storage" in out and "% used" in out
    assert "the board goes on logging" in out
    # the cuvette held the fading dye: absorbance near a0 = 0.675 at the start (invented session value)
    row = next(line for line in out.splitlines() if line.strip().startswith("0 "))
    a_now = float(row.split()[3])
    assert 0.4 < a_now < EPSILON_PER_UM * START_UM + 0.05


def test_list_runs_shows_the_run(session):
    _, by, _ = session
    assert "dye fading" in by["list runs"].output and "stopped" in by["list runs"].output


def test_calibration_recovers_the_invented_absorptivity(session):
    _, by, _ = session
    out = by["calibrate"].output
    slope_line = next(line for line in out.splitlines() if line.strip().startswith("slope"))
    slope, se = float(slope_line.split()[1]), float(slope_line.split()[3])
    # the simulated cell has 0.2 % stray light (simulate.DEFAULT_OPTICS), which bends the line slightly low
    assert slope == pytest.approx(EPSILON_PER_UM, rel=0.03)
    assert se < 0.01 * slope
    assert "saved in bench.db as result" in out


def test_rate_recovers_the_invented_fading_rate(session):
    _, by, _ = session
    out = by["rate"].output
    # the answer first: k with its unit, then how well the law fits, the parameters, the laws ranked
    assert out.index("answer:") < out.index("how well it fits") < out.index("parameters") < out.index("laws ranked")
    k_line = next(line for line in out.splitlines() if line.strip().startswith("k = "))
    k, se = float(k_line.split()[2]), float(k_line.split()[4])
    assert k_line.split()[5] == "s⁻¹"
    # times come from the host's clock anchors (clock and sync); the board runs in real time here
    assert abs(k - K_PER_S) < 4 * se


def test_report_and_export_write_their_files(session):
    workdir, by, _ = session
    reports = workdir / "reports"
    html = sorted(reports.glob("*.html"))
    assert len(html) == 1 and html[0].name.startswith("dye_fading-")
    assert len(list(reports.glob("*.png"))) == 2 and len(list(reports.glob("*.svg"))) == 2
    page = html[0].read_text(encoding="utf-8")
    assert "data:image/png;base64," in page and "Rate laws ranked" in page
    assert "stirred once" in page  # the note taken during the run is on its page
    csv = workdir / "csv"
    names = sorted(p.name for p in csv.iterdir())
    assert "marks.csv" in names
    assert any(n.endswith("-samples.csv") for n in names) and any(n.endswith("-absorbance.csv") for n in names)
    assert not list(csv.glob("*.part")) and not list(reports.glob("*.part"))
    marks = (csv / "marks.csv").read_text(encoding="utf-8")
    assert "stirred once" in marks and "dye 10 µM" in marks


def test_results_are_listed_with_their_inputs(session):
    _, by, _ = session
    out = by["list results"].output
    assert "calibration" in out and "rate" in out and "dye fading" in out


if __name__ == "__main__":  # capture the README's session
    import tempfile

    with tempfile.TemporaryDirectory() as d:
        steps, _ = run_session(Path(d), interval_s=float(sys.argv[1]) if len(sys.argv) > 1 else 2.0,
                               run_s=float(sys.argv[2]) if len(sys.argv) > 2 else 60.0, watch_polls=4,
                               watch_every=2.0)
        print("\n\n".join(s.shown() for s in steps))
