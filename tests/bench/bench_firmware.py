"""All firmware benchmarks in one run: journal size and flash cost, power cuts, heap, command fuzzing.

    python tests/bench/bench_firmware.py [--quick]

Prints ``name: value (goal ...)`` lines; ``run(quick)`` returns the rows for a runner.
"""

from __future__ import annotations

import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(HERE.parent))

import bench_fw_fuzz  # noqa: E402
import bench_fw_heap  # noqa: E402
import bench_fw_journal  # noqa: E402
import bench_fw_powercut  # noqa: E402

MODULES = [bench_fw_journal, bench_fw_powercut, bench_fw_heap, bench_fw_fuzz]


def run(quick: bool) -> list[dict]:
    rows: list[dict] = []
    for mod in MODULES:
        rows.extend(mod.run(quick))
    return rows


if __name__ == "__main__":  # the same as: python tests/bench/run.py --only NAME [--quick] [--json]
    from run import script

    sys.exit(script(__file__))
