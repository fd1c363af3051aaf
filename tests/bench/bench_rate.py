"""Benchmark: ``nightcell rate --db`` on one long stored run against a plain script (sqlite3 → numpy arrays → one
``curve_fit``), each in a fresh process, time and peak memory side by side.

The run holds 10⁶ samples (full; 2·10⁴ quick, where start-up is most of either side) of one device in a database
built by ``sidebyside.build_runs_db``. nightcell reads it against its blank, fits every rate law with standard
errors, ranks them and saves the result; the plain script (``sidebyside.PLAIN_RATE``) reads the same run from the
same file into arrays, makes absorbance against the same blank and fits the plateau law with ``curve_fit`` started
at the true parameters (the most favourable case for it), weights T². Each is a fresh process
(``sidebyside.fresh_process``: wall time of the command, peak RSS from ``getrusage(RUSAGE_CHILDREN)``), interleaved
over ≥ 5 rounds. Goals: time ≤ 1.2×, peak memory ≤ 1.5× (medians of the per-round ratios).

    python tests/bench/bench_rate.py [--quick]

"""

from __future__ import annotations

import sys
import tempfile
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from sidebyside import (DEVICE, LONG_RUN_RATE_SPAN_S, PLAIN_RATE, build_runs_db, interleaved_processes,  # noqa: E402
                        median, ratio_row)

from nightcell.store.database import Store  # noqa: E402

TIME_GOAL, MEMORY_GOAL = 1.2, 1.5


def run(quick: bool) -> list[dict]:
    n_points = 20_000 if quick else 1_000_000
    with tempfile.TemporaryDirectory() as tmp:
        db = Path(tmp) / "long.db"
        (truth,) = build_runs_db(db, 1, n_points, span_s=LONG_RUN_RATE_SPAN_S)
        with Store.open(db) as store:
            (r,) = store.runs()
        script = Path(tmp) / "plain_rate.py"
        script.write_text(PLAIN_RATE)
        nightcell = str(Path(sys.executable).parent / "nightcell")
        got = interleaved_processes({
            "ours": [nightcell, "rate", "--db", db, "--run", r.key, "--json"],
            "plain": [sys.executable, script, db, DEVICE, r.start_boot, r.start_seq, *truth]})
    ours_s, plain_s = [g["seconds"] for g in got["ours"]], [g["seconds"] for g in got["plain"]]
    ours_m, plain_m = [g["peak_mib"] for g in got["ours"]], [g["peak_mib"] for g in got["plain"]]
    size = f"{n_points:.0e} samples".replace("e+0", "e")
    return [
        ratio_row("rate_db_long_run_time_ratio", ours_s, plain_s, most=TIME_GOAL,
                  what=f"vs sqlite3 + arrays + curve_fit, {size}, fresh processes"),
        ratio_row("rate_db_long_run_memory_ratio", ours_m, plain_m, most=MEMORY_GOAL, what=f"peak RSS, {size}"),
        {"name": "rate_db_long_run_seconds (median)", "value": round(median(ours_s), 2), "goal": None, "ok": None},
        {"name": "plain_curve_fit_script_seconds (median)", "value": round(median(plain_s), 2), "goal": None,
         "ok": None},
        {"name": "rate_db_long_run_peak_MiB (median)", "value": round(median(ours_m), 1), "goal": None, "ok": None},
        {"name": "plain_curve_fit_script_peak_MiB (median)", "value": round(median(plain_m), 1), "goal": None,
         "ok": None},
    ]


if __name__ == "__main__":  # the same as: python tests/bench/run.py --only NAME [--quick] [--json]
    from run import script

    sys.exit(script(__file__))
