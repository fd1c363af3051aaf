"""Heap benchmark: the logger's peak heap above idle and its growth over a 10 000-sample run, in MicroPython from
.mpy files (method in tests/test_fw_heap.py).

    python tests/bench/bench_fw_heap.py [--quick]
"""

from __future__ import annotations

import sys
import tempfile
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from test_fw_heap import OPEN_FILES, compile_firmware, lfs_file_extra, run_heap  # noqa: E402


def run(quick: bool) -> list[dict]:
    n = 2000 if quick else 10000
    with tempfile.TemporaryDirectory() as tmp:
        path = compile_firmware(Path(tmp) / "lib")
        growth = run_heap(n, "growth", path)
        flash = Path(tmp) / "flash"
        flash.mkdir()
        peak = run_heap(n, "peak", path, str(flash))
        extra = lfs_file_extra(tmp)
    measured = int(peak["peak_above_idle"])
    total = measured + extra * OPEN_FILES
    return [
        {"name": f"fw heap peak above idle over {n} samples (measured + littlefs file caches)", "value": total,
         "goal": "<= 20480 bytes", "ok": total <= 20480},
        {"name": "fw heap peak above idle, firmware allocations alone", "value": measured, "goal": "(reported)",
         "ok": True},
        {"name": f"fw heap an open littlefs file holds beyond a host folder's (x {OPEN_FILES} open at once)",
         "value": extra, "goal": "(reported)", "ok": True},
        {"name": "fw heap growth after the first round of every request", "value": int(growth["growth"]),
         "goal": "0 bytes", "ok": int(growth["growth"]) == 0},
        {"name": "fw first-use allocations (first mark, health, ack)", "value": int(growth["first_use"]),
         "goal": "(reported)", "ok": True},
        {"name": "fw idle heap incl. the 160 KB RAM flash and test kit", "value": int(growth["idle_bytes"]),
         "goal": "(reported)", "ok": True},
    ]


if __name__ == "__main__":  # the same as: python tests/bench/run.py --only NAME [--quick] [--json]
    from run import script

    sys.exit(script(__file__))
