"""`nightcell sim-board` and `nightcell sim-cuvette`: a new user tries every board command without hardware.

The board is the real firmware behind a pty; the cuvette's contents are the test's own (absorbance 0.5 and a blank).
"""

import json
import math
import signal
import subprocess
import sys
import time

from click.testing import CliRunner

from nightcell.cli import cli


def _cli(*args):
    return CliRunner().invoke(cli, [str(a) for a in args])


def test_sim_board_then_commands_against_its_port(tmp_path):
    folder = tmp_path / "sim"
    proc = subprocess.Popen([sys.executable, "-m", "nightcell.cli", "sim-board", "--dir", str(folder),
                             "--seconds", "60"], stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)
    try:
        line = proc.stdout.readline()
        assert line.startswith("port: "), line
        port = line.split(": ", 1)[1].strip()
        deadline = time.monotonic() + 20
        while True:
            r = _cli("hello", "--port", port, "--json")
            if r.exit_code == 0 or time.monotonic() > deadline:
                break
        assert r.exit_code == 0, r.output
        assert json.loads(r.output)["board"] == "sim"
        assert _cli("sim-cuvette", "--dir", folder, "--absorbance", "0").exit_code == 0
        blank = json.loads(_cli("blank", "--port", port, "--json").output)
        r = _cli("sim-cuvette", "--dir", folder, "--absorbance", "0.5")
        assert r.exit_code == 0 and "0.5" in r.output
        std = json.loads(_cli("standard", "0.5", "--port", port, "--json").output)
        # the board measured what was put in: A = -log10((I - I_dark)/(I0 - I0_dark)) ≈ 0.5 (stray light lowers it
        # slightly; the simulated cell's default stray fraction is 0.2 %)
        a = -math.log10((std["light"][0] - std["dark"][0]) / (blank["light"][0] - blank["dark"][0]))
        assert 0.48 < a < 0.51, a
        assert _cli("sim-cuvette", "--dir", folder, "--blocked").exit_code == 0
        opaque = json.loads(_cli("opaque", "--port", port, "--json").output)
        assert opaque["light"][0] - opaque["dark"][0] < 0.02 * (blank["light"][0] - blank["dark"][0])
    finally:
        proc.send_signal(signal.SIGINT)
        out, _ = proc.communicate(timeout=20)
    assert proc.returncode == 0, out
    assert "switched off" in out


def test_sim_cuvette_refusals(tmp_path):
    r = _cli("sim-cuvette", "--dir", tmp_path / "none", "--absorbance", "0.2")
    assert r.exit_code == 2 and "start one with `nightcell sim-board" in r.output
    r = _cli("sim-cuvette", "--dir", tmp_path, "--absorbance", "0.2", "--blocked")
    assert r.exit_code == 2 and "exactly one of" in r.output
    (tmp_path / "5e1fc0ffee000001.cell.json").write_text('{"version": 3, "absorbance": 0}')
    r = _cli("sim-cuvette", "--dir", tmp_path, "--fading", "0.8:0.05")
    assert r.exit_code == 2 and "A0:A_END:K" in r.output
    r = _cli("sim-cuvette", "--dir", tmp_path, "--absorbance", "nan")
    assert r.exit_code == 2
    r = _cli("sim-cuvette", "--dir", tmp_path, "--fading", "0.8:0.05:0.01", "--json")
    assert r.exit_code == 0
    doc = json.loads((tmp_path / "5e1fc0ffee000001.cell.json").read_text())
    assert doc["version"] == 4 and doc["reaction"]["k_per_s"] == 0.01


def _start_sim_board(folder, *extra):
    proc = subprocess.Popen([sys.executable, "-m", "nightcell.cli", "sim-board", "--dir", str(folder), "--seconds",
                             "90", *extra], stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)
    lines = [proc.stdout.readline()]
    assert lines[0].startswith("port: "), lines
    if "changed" in (nxt := proc.stdout.readline()):
        lines.append(nxt)
    return proc, lines[0].split(": ", 1)[1].strip(), lines


def _stop(proc):
    proc.send_signal(signal.SIGINT)
    out, _ = proc.communicate(timeout=30)
    assert proc.returncode == 0, out
    return out


def _answering(port):
    deadline = time.monotonic() + 30
    while True:
        r = _cli("hello", "--port", port, "--json")
        if r.exit_code == 0 or time.monotonic() > deadline:
            return r


def test_the_simulated_board_over_socket_url_without_a_pty(tmp_path):
    """The platform-neutral path (Windows has no pty): the firmware on pipes, the host through pyserial's
    socket:// URL. The try-every-command session runs over it; `boards` and `roll-call` list it; deploy says in
    one line what it cannot do; a restarted sim-board keeps its port."""
    folder = tmp_path / "sim"
    proc, port, _ = _start_sim_board(folder, "--link", "socket", "--speed", "30")
    try:
        assert port.startswith("socket://127.0.0.1:"), port
        r = _answering(port)
        assert r.exit_code == 0, r.output
        env = {"NIGHTCELL_PORT": port}
        run = lambda *a: CliRunner().invoke(cli, [str(x) for x in a], env=env)  # noqa: E731
        assert run("sim-cuvette", "--dir", folder, "--blocked").exit_code == 0
        assert run("dark", "--label", "lid on").exit_code == 0
        assert run("sim-cuvette", "--dir", folder, "--absorbance", "0").exit_code == 0
        blank = json.loads(run("blank", "--label", "water", "--json").output)
        for conc, a in ((2, 0.15), (4, 0.3), (6, 0.45)):
            assert run("sim-cuvette", "--dir", folder, "--absorbance", a).exit_code == 0
            r = run("standard", conc, "--label", f"dye {conc} uM")
            assert r.exit_code == 0, r.output
        assert run("sim-cuvette", "--dir", folder, "--fading", "0.6:0.05:0.05").exit_code == 0
        assert run("start", "--label", "over a socket").exit_code == 0
        time.sleep(3)
        assert run("stop").exit_code == 0
        db = tmp_path / "class.db"
        r = run("sync", "--db", db)
        assert r.exit_code == 0, r.output
        runs = json.loads(run("list", "runs", "--db", db, "--json").output)
        assert [x["label"] for x in runs] == ["over a socket"] and runs[0]["samples"] >= 2
        cal = json.loads(run("calibrate", "--db", db, "--json").output)["calibration"]
        assert cal["n"] == 3 and blank["light"][0] > 0
        listed = run("boards", "--json")
        assert port in [b["port"] for b in json.loads(listed.output)], listed.output
        called = run("roll-call", "--json")
        assert any(e["port"] == port and e.get("hello", {}).get("board") == "sim" for e in json.loads(called.output))
        r = run("deploy")
        assert r.exit_code == 2 and len(r.output.strip().splitlines()) == 1, r.output
        assert "is a simulated board" in r.output and "nothing to copy" in r.output
        assert _answering(port).exit_code == 0  # deploy left it running
    finally:
        _stop(proc)
    proc, again, lines = _start_sim_board(folder, "--link", "socket")
    try:
        assert again == port, lines  # the same socket:// URL: NIGHTCELL_PORT stays right
        assert _answering(again).exit_code == 0
    finally:
        _stop(proc)


def test_a_restarted_pty_sim_board_says_its_port_changed(tmp_path):
    folder = tmp_path / "sim"
    proc, first, _ = _start_sim_board(folder, "--link", "pty")
    _stop(proc)
    proc, second, lines = _start_sim_board(folder, "--link", "pty")
    try:
        if second != first:
            assert f"the port changed since the last run in {folder} (it was {first})" in lines[1], lines
            assert "`nightcell boards`" in lines[1]
        listed = json.loads(_cli("boards", "--json").output)
        assert second in [b["port"] for b in listed]
    finally:
        _stop(proc)


def test_two_sim_boards_have_their_own_device_ids_and_a_restarted_one_keeps_its_own(tmp_path):
    """Two `sim-board`s (two folders) at once: two device ids, so their rows never share a key in one database;
    the same folder started again is the same board and says the same id (its hello too)."""
    procs = []
    ids = []
    try:
        for name in ("a", "b", "a"):
            proc = subprocess.Popen([sys.executable, "-m", "nightcell.cli", "sim-board", "--dir",
                                     str(tmp_path / name), "--seconds", "60"], stdout=subprocess.PIPE,
                                    stderr=subprocess.STDOUT, text=True)
            procs.append(proc)
            port = proc.stdout.readline().split(": ", 1)[1].strip()
            said = proc.stdout.readline().split()[2]  # "simulated board <id> running ..."
            deadline = time.monotonic() + 20
            while True:
                r = _cli("hello", "--port", port, "--json")
                if r.exit_code == 0 or time.monotonic() > deadline:
                    break
            assert r.exit_code == 0, r.output
            assert json.loads(r.output)["device"] == said
            ids.append(said)
            if name == "a" and len(ids) == 1:
                continue  # the first "a" stays on while "b" runs: two boards at once
            if len(ids) == 2:
                procs[0].send_signal(signal.SIGINT)  # then "a" is switched off and started again
                procs[0].communicate(timeout=20)
    finally:
        for proc in procs:
            if proc.poll() is None:
                proc.send_signal(signal.SIGINT)
                proc.communicate(timeout=20)
    assert ids[0] != ids[1], ids
    assert ids[2] == ids[0], ids
    assert len(ids[0]) == 16 and int(ids[0], 16) >= 0
