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


def main() -> None:
    rows = run("--quick" in sys.argv)
    for row in rows:
        print(f"{row['name']}: {row['value']} (goal {row['goal']}){'' if row['ok'] else '  MISSED'}")
    missed = [r for r in rows if not r["ok"]]
    print(f"firmware goals met: {len(rows) - len(missed)}/{len(rows)}")


if __name__ == "__main__":
    main()
