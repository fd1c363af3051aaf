"""firmware/main.py itself, run by the MicroPython unix interpreter on a board-like filesystem.

A real board runs main.py from the root of its flash: the test mounts a temporary folder at ``/`` (MicroPython's
``os.VfsPosix``), copies the firmware there as deploy would, and gives main.py a ``machine`` module whose ``WDT``
writes down that the watchdog was started and then stops the script (a board's pins are not there to go further).

What is checked is the boot choice of schema/protocol.md's ``hold``: with the hold file present the board stays in
the REPL with no watchdog and removes the file; the boot after that starts the watchdog again; a board never held
starts it at once.
"""

from __future__ import annotations

import shutil
import subprocess
from pathlib import Path

from support.fwharness import FIRMWARE, micropython

WDT_STOP = 42

# The stand-in for the board's ``machine``: only what main.py touches before the watchdog starts.
MACHINE = f"""
class WDT:
    def __init__(self, timeout):
        with open("/wdt_started", "w") as f:
            f.write(str(timeout))
        raise SystemExit({WDT_STOP})
"""

BOOT = """
import os, sys
os.umount("/")
os.mount(os.VfsPosix({root!r}), "/")
os.chdir("/")
sys.path[:] = ["/"]
import fake_machine
sys.modules["machine"] = fake_machine
exec(open("/main.py").read(), {{"__name__": "__main__"}})
"""


def _board(tmp_path: Path) -> Path:
    root = tmp_path / "flash"
    root.mkdir()
    shutil.copy(FIRMWARE / "main.py", root / "main.py")
    for package in ("nightcell_fw", "boards"):
        shutil.copytree(FIRMWARE / package, root / package, ignore=shutil.ignore_patterns("__pycache__"))
    (root / "fake_machine.py").write_text(MACHINE)
    return root


def _boot(tmp_path: Path, root: Path) -> subprocess.CompletedProcess:
    script = tmp_path / "boot.py"
    script.write_text(BOOT.format(root=str(root)))
    return subprocess.run([micropython(), str(script)], capture_output=True, text=True, timeout=60,
                          stdin=subprocess.DEVNULL)


def test_a_held_board_starts_no_watchdog_once_then_logs_again(tmp_path):
    root = _board(tmp_path)
    (root / "nc_hold").write_text("held by the host\n")  # what the firmware's hold request leaves (test_fw_sim)

    held = _boot(tmp_path, root)
    assert held.returncode == 0, held.stderr
    assert "held for maintenance" in held.stdout
    assert not (root / "wdt_started").exists(), "a held board must not start the watchdog"
    assert not (root / "nc_hold").exists(), "the hold is for one boot: main.py removes the file first"

    again = _boot(tmp_path, root)
    assert again.returncode == WDT_STOP, again.stdout + again.stderr
    assert (root / "wdt_started").read_text() == "8000"  # main.py's _WDT_MS, under the RP2040's ~8.3 s limit


def test_a_board_never_held_starts_the_watchdog_at_once(tmp_path):
    root = _board(tmp_path)
    boot = _boot(tmp_path, root)
    assert boot.returncode == WDT_STOP, boot.stdout + boot.stderr
    assert "held" not in boot.stdout
    assert (root / "wdt_started").read_text() == "8000"
