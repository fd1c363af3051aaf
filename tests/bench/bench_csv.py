"""Benchmark: reading a plain numeric CSV through nightcell's table reader against ``numpy.loadtxt``.

Figure (issue 14): the reader's time for a 10⁶-row ``time_s,absorbance`` file over ``numpy.loadtxt``'s time for the
same file (goal ≤ 1.5), both timed in this process, interleaved, the median of the per-round ratios of ≥ 5 rounds
(10⁵ rows in the quick run). The reader detects the dialect and headers, then takes its numpy fast path; the same
numbers must come back. A semicolon file with decimal commas (what a spreadsheet in many locales writes) is timed
beside it and reported without a goal.

    python tests/bench/bench_csv.py [--quick]
"""

from __future__ import annotations

import statistics
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

from nightcell.tasks.tables import read_table


def _files(folder: Path, n: int) -> tuple[Path, Path]:
    rng = np.random.default_rng(14)
    t = np.arange(n) * 2.0
    a = 0.05 + 0.6 * np.exp(-1e-5 * t) + rng.normal(0, 0.002, n)
    plain = folder / "plain.csv"
    plain.write_text("time_s,absorbance\n" + "\n".join(f"{x:.1f},{y:.5f}" for x, y in zip(t, a)) + "\n")
    semi = folder / "semicolon.csv"
    semi.write_text("time_s;absorbance\n" + "\n".join(f"{x:.1f};{y:.5f}".replace(".", ",") for x, y in zip(t, a))
                    + "\n")
    return plain, semi


def _timed(fn) -> tuple[float, object]:
    start = time.perf_counter()
    out = fn()
    return time.perf_counter() - start, out


def run(quick: bool = False) -> list[dict]:
    n = 100_000 if quick else 1_000_000
    rounds = 5 if quick else 7
    with tempfile.TemporaryDirectory() as tmp:
        plain, semi = _files(Path(tmp), n)
        ratios, semi_ratios, ours_s, bare_s = [], [], [], []
        for _ in range(rounds):
            t_bare, bare = _timed(lambda: np.loadtxt(plain, delimiter=",", skiprows=1))
            t_ours, table = _timed(lambda: read_table(plain, ["time_s", "absorbance"]))
            t_semi, semi_table = _timed(lambda: read_table(semi, ["time_s", "absorbance"]))
            assert np.array_equal(table.columns["time_s"], bare[:, 0])
            assert np.array_equal(table.columns["absorbance"], bare[:, 1])
            assert np.array_equal(semi_table.columns["absorbance"], bare[:, 1])
            ratios.append(t_ours / t_bare)
            semi_ratios.append(t_semi / t_bare)
            ours_s.append(t_ours)
            bare_s.append(t_bare)
    ratio = statistics.median(ratios)
    return [
        {"name": f"csv_reader_over_loadtxt_ratio ({n} rows, median of {rounds})", "value": round(ratio, 3),
         "goal": "<= 1.5", "ok": ratio <= 1.5},
        {"name": "csv_reader_seconds", "value": round(statistics.median(ours_s), 3), "goal": None, "ok": None},
        {"name": "csv_loadtxt_seconds", "value": round(statistics.median(bare_s), 3), "goal": None, "ok": None},
        {"name": "csv_semicolon_decimal_comma_over_loadtxt_ratio", "value": round(statistics.median(semi_ratios), 3),
         "goal": None, "ok": None},
    ]


if __name__ == "__main__":  # the same as: python tests/bench/run.py --only NAME [--quick] [--json]
    from run import script

    sys.exit(script(__file__))
