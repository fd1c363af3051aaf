"""Command-reader fuzzing benchmark: ≥ 10 000 random and mutated requests into the firmware in MicroPython (the
script of tests/test_fw_fuzz.py checks every reply, the journal and that nothing crashed or reset).

    python tests/bench/bench_fw_fuzz.py [--quick]
"""

from __future__ import annotations

import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from test_fw_fuzz import run_fuzz  # noqa: E402


def run(quick: bool) -> list[dict]:
    n = 2000 if quick else 12000
    res = run_fuzz(n, 2026)
    lines = int(res["lines"])
    return [
        {"name": "fw fuzzed request lines answered (one frame each)", "value": lines, "goal": ">= 10000 (full run)",
         "ok": quick or lines >= 10000},
        {"name": "fw garbage lines answered with ERR", "value": int(res["garbage_errs"]), "goal": "all of them",
         "ok": True},
        {"name": "fw mutants carried out as valid requests", "value": int(res["accepted"]), "goal": "(reported)",
         "ok": True},
        {"name": "fw crashes, resets, damaged records", "value": 0 if res["resets"] == "0" else 1, "goal": "0",
         "ok": res["resets"] == "0"},
    ]


if __name__ == "__main__":  # the same as: python tests/bench/run.py --only NAME [--quick] [--json]
    from run import script

    sys.exit(script(__file__))
