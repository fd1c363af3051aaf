"""Deploy: mpy-cross compiles every firmware module; mpremote copies them onto MicroPython's unix REPL behind a pty
(``resume``), the board is restarted and asked its version, and a board that was logging is logging again after.
"""

import json
import time

import pytest

from nightcell.tasks.deploy import SIM_FILES, build_firmware, deploy, firmware_version
from nightcell.wire.link import Board
from nightcell.sim.board import UnixRepl, micropython_command

# A real board restarts with a reset; the unix stand-in runs the firmware again in the same interpreter, so the
# simulated flash mounted by the run before is unmounted first.
START = ("import vfs\ntry:\n vfs.umount('/flash')\nexcept OSError:\n pass\n"
         "import sim_main\nsim_main.main(['sim_main.py', 'cfg.json'])")


def test_every_firmware_module_compiles_and_sim_files_stay_home(tmp_path):
    files = build_firmware(tmp_path / "out")
    assert "main.py" in files
    assert not any(f in files for f in SIM_FILES) and "boards/sim.mpy" not in files
    mpys = [f for f in files if f.endswith(".mpy")]
    assert "nightcell_fw/journal.mpy" in mpys and "boards/pico.mpy" in mpys
    for f in mpys:
        head = (tmp_path / "out" / f).read_bytes()[:2]
        assert head[0] == ord("M") and head[1] == 6, f  # .mpy format: 'M', version 6 (MicroPython >= 1.19)


def test_version_is_read_from_the_firmware_package():
    assert firmware_version().count(".") == 2


@pytest.mark.skipif(micropython_command() is None, reason="needs MicroPython's unix interpreter")
@pytest.mark.slow
def test_deploy_to_a_unix_repl_and_leave_it_logging(tmp_path):
    cfg = {"device": "de9100000000aa01", "flash": str(tmp_path / "flash.img"), "flash_blocks": 64, "speed": 50,
           "seed": 1, "cell": str(tmp_path / "cell.json"),
           "settings": {"board": "sim", "interval_ms": 1000, "durability_ms": 1000}}
    (tmp_path / "cell.json").write_text(json.dumps({"version": 1, "absorbance": 0.1}))
    (tmp_path / "cfg.json").write_text(json.dumps(cfg))
    with UnixRepl(tmp_path) as repl:
        time.sleep(0.3)
        first = deploy(repl.url, include_sim=True, resume=True, start_code=START, wait=15)
        assert first.before is None  # a bare REPL: not nightcell yet
        assert first.after["firmware"] == firmware_version() and first.after["device"] == cfg["device"]
        assert (tmp_path / "nightcell_fw" / "journal.mpy").exists()
        assert not (tmp_path / "nightcell_fw" / "journal.py").exists()
        with Board.open(repl.url) as board:
            board.start("overnight")
            head = board.hello()["head"]
        second = deploy(repl.url, include_sim=True, resume=True, start_code=START, wait=15)
        assert second.before["running"] is True
        assert second.after["running"] is True  # logging again, whether it resumed or was started again
        assert second.after["head"] >= head  # the journal on flash is kept
        assert "logging" in second.text()


def test_a_running_board_is_held_before_anything_is_copied(tmp_path):
    """Before copying, deploy asks a board that answers `hello` to restart held (no watchdog, no logger, once), so a
    watchdog reset cannot cut the copy short; the board journals why it reset."""
    from nightcell.tasks import deploy as deploy_module
    from nightcell.sim.board import SimulatedBoard
    from nightcell.store.database import Store
    from nightcell.store.sync import sync_board
    from nightcell.wire.link import Board

    sim = SimulatedBoard(tmp_path / "held", device="5e1f0000000000d7", speed=20.0)
    sim.start()
    try:
        assert deploy_module._hello(sim.url, 20) is not None
        deploy_module._hold(sim.url, 5.0)
        assert sim.wait_exit(10) == 0  # the simulated board "resets" by ending its process
        sim.start()  # power back (the sim has no REPL: it logs again, which is what a second reset does)
        assert deploy_module._hello(sim.url, 20) is not None
        with Board.open(sim.url) as board, Store.open(tmp_path / "h.db") as store:
            sync_board(board, store)
            events = store.query("SELECT text FROM events WHERE code = 5")
    finally:
        sim.stop()
    assert any("held for maintenance" in e["text"] for e in events)
