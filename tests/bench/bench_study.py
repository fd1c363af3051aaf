"""Benchmark: a study report (``nightcell report --study``: every run analysed, one page per run, the study page)
on many stored runs, and the time it takes per run beyond drawing and saving its figures.

The database holds 1000 runs (full; 20 quick) of 1000 samples (``sidebyside.build_runs_db``), each with a recorded
temperature and starting concentration (three temperatures, three concentrations). ``export.study_report`` runs
once in this process; the time inside the report's figure functions (``report._figure``, ``_two_panel``,
``plot_run``, ``_shade_restarts``, ``plot_calibration``, ``plot_orders``, ``plot_arrhenius``, ``_figure_files`` —
drawing, PNG and SVG — and closing figures) is measured by wrapping them, and subtracted. Goal: ≤ 0.15 s per run
beyond its figures. Not a ratio (nothing else makes this page), so one pass is timed.

    python tests/bench/bench_study.py [--quick]
"""

from __future__ import annotations

import functools
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from sidebyside import build_runs_db  # noqa: E402

import matplotlib.pyplot as plt  # noqa: E402

from nightcell.tasks import analyse, export  # noqa: E402
from nightcell.render import report as _report  # noqa: E402
from nightcell.store.database import Store  # noqa: E402

GOAL_S = 0.15
FIGURE_FUNCTIONS = ("_figure", "_two_panel", "plot_run", "_shade_restarts", "plot_calibration", "plot_orders",
                    "plot_arrhenius", "_figure_files")


class _FigureClock:
    """Seconds spent inside the wrapped figure functions (outermost calls only)."""

    def __init__(self) -> None:
        self.seconds = 0.0
        self.depth = 0
        self.saved: list[tuple[object, str, object]] = []

    def wrap(self, owner: object, name: str) -> None:
        fn = getattr(owner, name, None)
        if fn is None:
            return

        @functools.wraps(fn)
        def timed(*args, **kwargs):
            self.depth += 1
            t = time.perf_counter()
            try:
                return fn(*args, **kwargs)
            finally:
                self.depth -= 1
                if self.depth == 0:
                    self.seconds += time.perf_counter() - t

        self.saved.append((owner, name, fn))
        setattr(owner, name, timed)

    def restore(self) -> None:
        for owner, name, fn in reversed(self.saved):
            setattr(owner, name, fn)


def run(quick: bool) -> list[dict]:
    n_runs = 20 if quick else 1000
    with tempfile.TemporaryDirectory() as tmp:
        db = Path(tmp) / "study.db"
        build_runs_db(db, n_runs, 1000)
        with Store.open(db) as store:
            for i, r in enumerate(store.runs()):
                analyse.set_run_condition(store, r, "temperature_K", (288.15, 298.15, 308.15)[i % 3], "bench")
                analyse.set_run_condition(store, r, "conc_dye_M", (0.01, 0.02, 0.04)[(i // 3) % 3], "bench")
            clock = _FigureClock()
            for name in FIGURE_FUNCTIONS:
                clock.wrap(_report, name)
            clock.wrap(plt, "close")
            try:
                t = time.perf_counter()
                done = export.study_report(store, Path(tmp) / "out")
                total = time.perf_counter() - t
            finally:
                clock.restore()
    per_run = (total - clock.seconds) / n_runs
    return [
        {"name": "study_report_seconds_per_run_beyond_figures", "value": round(per_run, 4),
         "goal": f"<= {GOAL_S} ({n_runs} runs x 1000 samples)", "ok": per_run <= GOAL_S},
        {"name": "study_report_seconds_per_run (figures included)", "value": round(total / n_runs, 4), "goal": None,
         "ok": None},
        {"name": "study_report_files_written", "value": len(done.files), "goal": f">= {n_runs + 1} pages",
         "ok": sum(1 for f in done.files if str(f).endswith(".html")) == n_runs + 1},
    ]


if __name__ == "__main__":  # the same as: python tests/bench/run.py --only NAME [--quick] [--json]
    from run import script

    sys.exit(script(__file__))
