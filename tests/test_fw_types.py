"""The firmware type-checks against the published MicroPython stubs of the ports it runs on (rp2: Raspberry Pi Pico;
esp32: the generic ESP32 board), as CI checks it: mypy with the stub package's own standard library as typeshed
(``--custom-typeshed-dir``: MicroPython's ``os``, ``time``, ``sys``, not CPython's), the port's modules
(``machine``, ``vfs``, ``rp2``/``esp32``) on its path, and the bodies of untyped functions checked (the firmware has
no annotations). Errors inside the stubs themselves are filtered out; the board's files must have none.

The stub wheels (micropython-rp2-rpi-pico-stubs, micropython-esp32-esp32-generic-stubs, 1.29.0.post1, with their
micropython-stdlib-stubs) are fetched with pip into a folder of this environment: the two cannot share one
environment (both ship ``machine.pyi``). A control file with a wrong call must fail, so the check cannot pass by
checking nothing.
"""

from __future__ import annotations

import re
import subprocess
import sys
import zipfile
from pathlib import Path

import pytest

from support.fwharness import FIRMWARE

STUBS = {"rp2": "micropython-rp2-rpi-pico-stubs==1.29.0.post1",
         "esp32": "micropython-esp32-esp32-generic-stubs==1.29.0.post1"}
HOME = Path(sys.prefix) / "nightcell-stubs"


def _stubs(port: str) -> Path:
    """The unpacked stubs of one port (fetched once per environment)."""
    root = HOME / port / "unpacked"
    if (root / "machine.pyi").exists():
        return root
    wheels = HOME / port / "wheels"
    proc = subprocess.run([sys.executable, "-m", "pip", "download", "--no-input", "-q", "-d", str(wheels),
                           STUBS[port]], capture_output=True, text=True, timeout=600)
    if proc.returncode != 0:
        pytest.skip(f"the {port} stubs could not be fetched from the package index: {proc.stderr[-500:]}")
    root.mkdir(parents=True, exist_ok=True)
    for whl in sorted(wheels.glob("*.whl")):
        with zipfile.ZipFile(whl) as z:
            z.extractall(root)
    return root


def _board_files() -> list[str]:
    from nightcell.tasks.deploy import SIM_FILES

    files = []
    for p in sorted(FIRMWARE.rglob("*.py")):
        rel = p.relative_to(FIRMWARE).as_posix()
        if rel in SIM_FILES or rel in ("manifest.py", "__init__.py") or "__pycache__" in rel:
            continue
        files.append(rel)
    return files


def _mypy(port: str, files: list[str], cwd: Path) -> tuple[list[str], str]:
    stubs = _stubs(port)
    env = {"MYPYPATH": str(stubs), "PATH": "/usr/bin:/bin"}
    proc = subprocess.run([sys.executable, "-m", "mypy", "--no-site-packages", "--custom-typeshed-dir", str(stubs),
                           "--check-untyped-defs", "--explicit-package-bases", "--no-error-summary",
                           "--show-error-codes", "--cache-dir", str(HOME / port / "cache"), *files],
                          capture_output=True, text=True, cwd=cwd, env=env, timeout=600)
    errors = [line for line in proc.stdout.splitlines() if re.match(r"[^:]+:\d+: error:", line)
              and not line.startswith(str(stubs))]
    return errors, proc.stdout + proc.stderr


@pytest.mark.parametrize("port", ["rp2", "esp32"])
def test_the_board_firmware_has_no_type_errors_against_the_port_stubs(port, tmp_path):
    files = _board_files()
    assert len(files) >= 20 and "main.py" in files and "boards/pico.py" in files
    errors, out = _mypy(port, files, FIRMWARE)
    assert errors == [], "\n".join(errors)
    # the control: a call the port does not have, inside an untyped function, must be found
    (tmp_path / "control.py").write_text("import machine\n\n\ndef f():\n    machine.Pin(1).no_such_method()\n")
    errors, out = _mypy(port, ["control.py"], tmp_path)
    assert any("no_such_method" in e and "attr-defined" in e for e in errors), out
