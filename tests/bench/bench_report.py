"""Benchmark: ``nightcell report --run`` on one long stored run against a plain one-PNG matplotlib script, each in a
fresh process, time and peak memory side by side, and the size of every file the report writes.

The run holds 10⁶ samples (full; 2·10⁴ quick, where start-up is most of either side), built by
``sidebyside.build_runs_db``. nightcell reads it, fits every rate law, draws the run with its best fit and
residuals, and writes the HTML page with each figure as PNG and SVG; the plain script (``sidebyside.PLAIN_PNG``)
reads the same run from the same file into arrays (the plain read of ``sidebyside.PLAIN_RATE``) and saves one PNG of
its points, no fit. Each is a fresh process (``sidebyside.fresh_process``), interleaved over ≥ 5 rounds. Goals: time
≤ 1.5×, peak memory ≤ 1.5× (medians of the per-round ratios), every file ≤ 2 MB.

    python tests/bench/bench_report.py [--quick]

"""

from __future__ import annotations

import sys
import tempfile
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from sidebyside import (DEVICE, LONG_RUN_RATE_SPAN_S, PLAIN_PNG, PLAIN_RATE, build_runs_db,  # noqa: E402
                        interleaved_processes, median, ratio_row)

from nightcell.store.database import Store  # noqa: E402

TIME_GOAL, MEMORY_GOAL, FILE_GOAL_MB = 1.5, 1.5, 2.0


def run(quick: bool) -> list[dict]:
    n_points = 20_000 if quick else 1_000_000
    with tempfile.TemporaryDirectory() as tmp:
        tmp_p = Path(tmp)
        db = tmp_p / "long.db"
        build_runs_db(db, 1, n_points, span_s=LONG_RUN_RATE_SPAN_S)
        with Store.open(db) as store:
            (r,) = store.runs()
        (tmp_p / "plain_rate.py").write_text(PLAIN_RATE)
        (tmp_p / "plain_png.py").write_text(PLAIN_PNG)
        nightcell = str(Path(sys.executable).parent / "nightcell")
        out = tmp_p / "report"
        got = interleaved_processes({
            "ours": [nightcell, "report", "--db", db, "--run", r.key, "--out", out],
            "plain": [sys.executable, tmp_p / "plain_png.py", db, DEVICE, r.start_boot, r.start_seq,
                      tmp_p / "plain.png"]}, cwd=tmp)
        sizes = {p.name: p.stat().st_size / 1e6 for p in out.iterdir() if p.is_file()}
        plain_mb = (tmp_p / "plain.png").stat().st_size / 1e6
    ours_s, plain_s = [g["seconds"] for g in got["ours"]], [g["seconds"] for g in got["plain"]]
    ours_m, plain_m = [g["peak_mib"] for g in got["ours"]], [g["peak_mib"] for g in got["plain"]]
    biggest = max(sizes, key=sizes.get)
    size = f"{n_points:.0e} samples".replace("e+0", "e")
    return [
        ratio_row("report_run_long_time_ratio", ours_s, plain_s, most=TIME_GOAL,
                  what=f"vs one-PNG matplotlib script, {size}, fresh processes"),
        ratio_row("report_run_long_memory_ratio", ours_m, plain_m, most=MEMORY_GOAL, what=f"peak RSS, {size}"),
        {"name": "report_largest_file_MB", "value": round(sizes[biggest], 3),
         "goal": f"<= {FILE_GOAL_MB} (every file of {len(sizes)}; the largest: {biggest})",
         "ok": sizes[biggest] <= FILE_GOAL_MB},
        {"name": "report_run_long_seconds (median)", "value": round(median(ours_s), 2), "goal": None, "ok": None},
        {"name": "plain_png_script_seconds (median)", "value": round(median(plain_s), 2), "goal": None, "ok": None},
        {"name": "report_run_long_peak_MiB (median)", "value": round(median(ours_m), 1), "goal": None, "ok": None},
        {"name": "plain_png_script_peak_MiB (median)", "value": round(median(plain_m), 1), "goal": None, "ok": None},
        {"name": "plain_png_MB", "value": round(plain_mb, 3), "goal": None, "ok": None},
    ]


if __name__ == "__main__":  # the same as: python tests/bench/run.py --only NAME [--quick] [--json]
    from run import script

    sys.exit(script(__file__))
