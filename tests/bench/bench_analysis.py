"""Benchmark: analysis of stored runs versus a bare scipy curve_fit of one model on the same arrays (issue 5).

Full analysis of a stored run = what ``nightcell rate --db`` does for each run: read the run's samples from a real
nightcell SQLite database (``analyse.analyse_run``: the run's bounds, its blank and stray light by the recorded
rules, the counts, the boot clock), absorbance against the blank with flags, every candidate rate law with standard
errors, AIC ranking, runs test and half-life, weighted by T², then the result (``RunAnalysis.to_dict()``, naming its
inputs) saved with ``Store.save_result``. Results are committed once per batch of ``BATCH`` runs, as a caller that
analyses many runs would do; the commit time is counted in the full path, and one commit alone is reported beside.

The bare reference = ``scipy.optimize.curve_fit`` of the exponential approach to a plateau on the same arrays (the
run's times, absorbances and weights as the full path read them, flagged points left out), started at the true
parameters (the most favourable case for it). Both are timed run by run, interleaved (the order alternates), in one
process, so the ratio is meaningful on a shared, noisy machine. Goal: ratio ≤ 3. Reported beside them, timed in
the same interleaved loop: nightcell's ``fit_model`` of the same single model on the same arrays, and the full
path's two big parts on their own (the read, ``analyse.run_series``; the fits, ``kinetics.fit_all``).

The database is built from encoded journal records (one boot: anchors, a blank, then each run as a run_start mark,
samples records of at most 250 samples, a run_stop mark), ingested as a sync stores them. Runs are synthetic
(invented numbers, fixed seed): an exponential approach to a plateau seen through counts with Gaussian noise,
summed over 16 reads and stored as integers.

Usage: python tests/bench/bench_analysis.py [--quick]
"""

from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from scipy.optimize import curve_fit

from nightcell.tasks import analyse
from nightcell.science import kinetics
from nightcell.wire import frames as F
from nightcell.store.database import Store

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
from test_bad_input import store_as_synced  # noqa: E402  (the database a sync would have made of these records)

GOAL_RATIO = 3.0
BATCH = 100  # runs whose results are committed together
DEVICE = "bench-cell"
READS, DARK, LED, INTERVAL_MS, COUNT_SD = 16, 100.0, 3400.0, 2000, 3.0


def _plateau(t, a0, a_inf, k):
    return a_inf + (a0 - a_inf) * np.exp(-k * t)


def build_database(path: Path, n_runs: int, n_points: int, seed: int = 1234) -> list[tuple[float, float, float]]:
    """A nightcell database of ``n_runs`` stored runs of ``n_points`` samples; returns each run's true
    (A0, A_inf, k)."""
    rng = np.random.default_rng(seed)
    recs: list[bytes] = []
    seq = up = 0

    def add(kind: int, fields: dict, step: int = 1000, count: int = 1) -> None:
        nonlocal seq, up
        recs.append(F.encode_record(kind, 1, seq, up, fields))
        seq += count
        up += step

    def mark(kind_mark: int, label: str, light: float | None = None) -> None:
        counts = {"reads": 0, "dark": [], "light": []} if light is None else {
            "reads": READS, "dark": [int(DARK * READS)], "light": [int(round(light * READS))]}
        add(F.KIND_MARK, {"mark": kind_mark, "source": 0, "label": label, "value": "", **counts})

    add(F.KIND_BOOT, {"reset_cause": 0, "settings_crc": 1, "firmware": "0.1.0", "device": DEVICE, "board": "sim"})
    add(F.KIND_ANCHOR, {"host_unix_ms": 1_796_000_000_000})
    mark(2, "water", DARK + LED)
    t = np.arange(n_points) * (INTERVAL_MS / 1000.0)
    truths = []
    for i in range(n_runs):
        k = rng.uniform(0.001, 0.01)
        a0, a_inf = rng.uniform(0.6, 1.0), rng.uniform(0.05, 0.2)
        truths.append((a0, a_inf, k))
        mark(4, f"run {i}")
        light = DARK + LED * 10.0 ** (-_plateau(t, a0, a_inf, k)) + rng.normal(0.0, COUNT_SD, n_points)
        sums = np.round(light * READS).astype(int).tolist()
        for lo in range(0, n_points, 250):  # a samples record holds at most 255 samples
            chunk = sums[lo:lo + 250]
            samples = [{"late_ms": 0, "flags": 0, "dark": [int(DARK * READS)], "light": [v]} for v in chunk]
            add(F.KIND_SAMPLES, {"interval_ms": INTERVAL_MS, "reads": READS, "channels": 1, "options": 0,
                                 "samples": samples}, step=INTERVAL_MS * len(chunk), count=len(chunk))
        mark(5, "")
    add(F.KIND_ANCHOR, {"host_unix_ms": 1_796_000_000_000 + up})
    store_as_synced(path, DEVICE, [F.decode_record(r, lazy_samples=True)[0] for r in recs])
    return truths


def run(quick: bool) -> list[dict]:
    """Time both paths; return rows {name, value, goal, ok}."""
    n_runs, n_points = (40, 1000) if quick else (1000, 1000)
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "bench.db"
        truths = build_database(path, n_runs, n_points)
        with Store.open(path) as store:
            runs = store.runs(DEVICE)
            assert len(runs) == n_runs
            # the arrays the full path analyses, read once beforehand for the bare fit
            arrays = []
            for r in runs:
                s = analyse.run_series(store, r)
                ok = s["flags"] == 0
                t, a = s["time_s"][ok], s["absorbance"][ok]
                assert t.size == n_points
                arrays.append((t, a, 10.0 ** (-2.0 * a)))  # weights T², as analyse_run uses
            full_s = bare_s = single_s = read_s = fits_s = commit_s = 0.0
            worst = 0.0
            pending: list[tuple] = []
            saved = 0
            for i, (r, (t, a, w), truth) in enumerate(zip(runs, arrays, truths)):
                order = (0, 1, 2, 3, 4) if i % 2 == 0 else (4, 3, 2, 1, 0)  # alternate which goes first
                for which in order:
                    start = time.perf_counter()
                    if which == 0:
                        analysis = analyse.analyse_run(store, r)
                        pending.append((r.label or r.key, analysis.fits[analysis.best].inputs, analysis.to_dict()))
                        if len(pending) == BATCH or i == n_runs - 1:
                            with store.write():
                                for label, inputs, data in pending:
                                    store.save_result("rate", label, inputs, data)
                            saved += len(pending)
                            pending = []
                        full_s += time.perf_counter() - start
                    elif which == 2:
                        single = kinetics.fit_model(t, a, model="first_order_plateau", weights=w)
                        single_s += time.perf_counter() - start
                    elif which == 3:  # where the full path's time goes: its read alone ...
                        series = analyse.run_series(store, r)
                        read_s += time.perf_counter() - start
                    elif which == 4:  # ... and its fits alone
                        kinetics.fit_all(t, a, weights=w)
                        fits_s += time.perf_counter() - start
                    else:
                        popt, pcov = curve_fit(_plateau, t, a, p0=truth, sigma=1.0 / np.sqrt(w))
                        bare_s += time.perf_counter() - start
                assert np.all(np.isfinite(np.sqrt(np.diag(pcov)))) and single.stderr["k"] > 0
                assert series["time_s"].size == n_points
                fit = analysis.fits["first_order_plateau"]
                assert set(analysis.fits) == set(kinetics.MODELS) and fit.stderr["k"] > 0
                worst = max(worst, abs(fit.values["k"] - popt[2]) / popt[2])
            stored = store.conn.execute("SELECT count(*) FROM results WHERE kind = 'rate'").fetchone()[0]
            # one durable commit on its own, for the record: what saving every result apart would add per run
            for _ in range(5):
                start = time.perf_counter()
                store.save_result("bench", "commit timing", {}, {})
                commit_s += time.perf_counter() - start
    ratio = full_s / bare_s
    return [
        {"name": "full_analysis_ms_per_run", "value": 1000 * full_s / n_runs,
         "goal": f"report (read, absorbance, 4 rate laws with SEs, AIC, result stored; commit per {BATCH} runs)",
         "ok": True},
        {"name": "bare_curve_fit_ms_per_run", "value": 1000 * bare_s / n_runs, "goal": "report", "ok": True},
        {"name": "full_over_bare_ratio", "value": ratio, "goal": f"<= {GOAL_RATIO}", "ok": ratio <= GOAL_RATIO},
        {"name": "of_which_read_ms_per_run", "value": 1000 * read_s / n_runs, "goal": "report (run_series alone: "
         "bounds, blank, counts from SQLite, absorbance, clock)", "ok": True},
        {"name": "of_which_fits_ms_per_run", "value": 1000 * fits_s / n_runs, "goal": "report (kinetics.fit_all "
         "alone on the same arrays: 4 rate laws with SEs, AIC, runs tests)", "ok": True},
        {"name": "plateau_fit_model_ms_per_run", "value": 1000 * single_s / n_runs, "goal": "report", "ok": True},
        {"name": "plateau_fit_model_over_bare_ratio", "value": single_s / bare_s, "goal": "report (same model, "
         "automatic start, SEs, runs test)", "ok": True},
        {"name": "one_result_commit_ms", "value": 1000 * commit_s / 5, "goal": "report (one save_result in its own "
         "transaction, synced to disk)", "ok": True},
        {"name": "max_rel_diff_k_vs_curve_fit", "value": worst, "goal": "<= 1e-5", "ok": worst <= 1e-5},
        {"name": "results_stored", "value": stored, "goal": f"= {n_runs}", "ok": stored == saved == n_runs},
        {"name": "runs_x_points", "value": f"{n_runs} x {n_points}", "goal": "1000 x 1000 full", "ok": True},
    ]


if __name__ == "__main__":  # the same as: python tests/bench/run.py --only NAME [--quick] [--json]
    from run import script

    sys.exit(script(__file__))
