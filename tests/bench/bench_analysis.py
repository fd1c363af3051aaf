"""Benchmark: analysis of stored runs versus what a user would write by hand — sqlite3 + numpy + one ``curve_fit``
reading the same run from the same file (issue 17) — and, as before, versus a bare ``curve_fit`` on arrays (issue
5).

Full analysis of a stored run = what ``nightcell rate --db`` does for each run: read the run's samples from a real
nightcell SQLite database (``analyse.analyse_run``: the run's bounds, its blank and stray light by the recorded
rules, the counts, the boot clock), absorbance against the blank with flags, every candidate rate law with standard
errors, AIC ranking, runs test and half-life, weighted by T², then the result (``RunAnalysis.to_dict()``, naming its
inputs) saved with ``Store.save_result``. Results are committed once per batch of ``BATCH`` runs, as a caller that
analyses many runs would do; the commit time is counted in the full path, and one commit alone is reported beside.

The hand-written reference (goal: full ≤ 1.5×) = ``sidebyside.PLAIN_RATE``'s ``read_run`` and ``fit``: the run's
stop mark and the blank before it found with two queries, the samples read with ``fetchall`` into a numpy array (its
own sqlite3 connection to the same file, opened once), absorbance against the blank, and ``curve_fit`` of the
plateau law weighted T², started at the true parameters.

The bare reference (the old goal, ≤ 3×, reported beside) = ``scipy.optimize.curve_fit`` of the first-order approach
towards a final absorbance on the same arrays (the run's times, absorbances and weights as the full path read them, flagged points
left out), started at the true parameters (the most favourable case for it). All are timed run by run, interleaved
(the order alternates), in one process, so the ratio is meaningful on a shared, noisy machine; the runs are split
into ``ROUNDS`` rounds of consecutive runs, each ratio is the median of the per-round ratios and its spread is
printed. Reported beside them, timed in the same interleaved loop: nightcell's ``fit_model`` of the same single
model on the same arrays, and the full path's two big parts on their own (the read, ``analyse.run_series``; the
fits, ``kinetics.fit_all``).

The database is built from encoded journal records (one boot: anchors, a blank, then each run as a run_start mark,
samples records of at most 250 samples, a run_stop mark), ingested as a sync stores them. Runs are synthetic
(invented numbers, fixed seed): a first-order approach towards a final absorbance seen through counts with Gaussian noise, summed
over 16 reads and stored as integers.

Usage: python tests/bench/bench_analysis.py [--quick]
"""

from __future__ import annotations

import sqlite3
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

sys.path.insert(0, str(Path(__file__).resolve().parent))
from sidebyside import ROUNDS, plain_rate_namespace, ratio_row  # noqa: E402

GOAL_RATIO = 1.5  # against the hand-written sqlite3 + numpy + curve_fit
OLD_GOAL_RATIO = 3.0  # against a bare curve_fit on arrays already read
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
    """Time every path; return rows {name, value, goal, ok} (ratios with their rounds and spread)."""
    n_runs, n_points = (100, 1000) if quick else (1000, 1000)
    plain = plain_rate_namespace()
    paths = ("full", "bare", "single", "read", "fits", "hand")
    per_round = {p: [0.0] * ROUNDS for p in paths}
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "bench.db"
        truths = build_database(path, n_runs, n_points)
        conn = sqlite3.connect(path)
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
            commit_s = 0.0
            worst = worst_hand = 0.0
            pending: list[tuple] = []
            saved = 0
            for i, (r, (t, a, w), truth) in enumerate(zip(runs, arrays, truths)):
                rnd = i * ROUNDS // n_runs
                order = paths if i % 2 == 0 else paths[::-1]  # alternate which goes first
                for which in order:
                    start = time.perf_counter()
                    if which == "full":
                        analysis = analyse.analyse_run(store, r)
                        pending.append((r.label or r.key, analysis.fits[analysis.best].inputs, analysis.to_dict()))
                        if len(pending) == BATCH or i == n_runs - 1:
                            with store.write():
                                for label, inputs, data in pending:
                                    store.save_result("rate", label, inputs, data)
                            saved += len(pending)
                            pending = []
                    elif which == "single":
                        single = kinetics.fit_model(t, a, model="first_order_to_final", weights=w)
                    elif which == "read":  # where the full path's time goes: its read alone ...
                        series = analyse.run_series(store, r)
                    elif which == "fits":  # ... and its fits alone
                        kinetics.fit_all(t, a, weights=w)
                    elif which == "hand":  # what a user would write: read the same run from the file, one fit
                        ht, ha, htrans = plain["read_run"](conn, DEVICE, r.start_boot, r.start_seq)
                        hand, _ = plain["fit"](ht, ha, htrans, truth)
                    else:
                        popt, pcov = curve_fit(_plateau, t, a, p0=truth, sigma=1.0 / np.sqrt(w))
                    per_round[which][rnd] += time.perf_counter() - start
                assert np.all(np.isfinite(np.sqrt(np.diag(pcov)))) and single.stderr["k"] > 0
                assert series["time_s"].size == n_points and ht.size == n_points
                fit = analysis.fits["first_order_to_final"]
                assert set(analysis.fits) == set(kinetics.MODELS) and fit.stderr["k"] > 0
                worst = max(worst, abs(fit.values["k"] - popt[2]) / popt[2])
                worst_hand = max(worst_hand, abs(fit.values["k"] - hand[2]) / hand[2])
            stored = store.conn.execute("SELECT count(*) FROM results WHERE kind = 'rate'").fetchone()[0]
            # one durable commit on its own, for the record: what saving every result apart would add per run
            for _ in range(5):
                start = time.perf_counter()
                store.save_result("bench", "commit timing", {}, {})
                commit_s += time.perf_counter() - start
        conn.close()
    ms = {p: 1000 * sum(v) / n_runs for p, v in per_round.items()}
    return [
        {"name": "full_analysis_ms_per_run", "value": ms["full"],
         "goal": f"report (read, absorbance, 4 rate laws with SEs, AIC, result stored; commit per {BATCH} runs)",
         "ok": True},
        {"name": "handwritten_sqlite3_numpy_curve_fit_ms_per_run", "value": ms["hand"], "goal": "report (the same "
         "run read from the same file with fetchall into numpy, absorbance, one curve_fit)", "ok": True},
        ratio_row("analysis_full_over_handwritten_ratio", per_round["full"], per_round["hand"], most=GOAL_RATIO),
        {"name": "bare_curve_fit_ms_per_run", "value": ms["bare"], "goal": "report", "ok": True},
        ratio_row("full_over_bare_ratio", per_round["full"], per_round["bare"],
                  what=f"the old goal, <= {OLD_GOAL_RATIO}: against a bare curve_fit on arrays already read"),
        {"name": "of_which_read_ms_per_run", "value": ms["read"], "goal": "report (run_series alone: "
         "bounds, blank, counts from SQLite, absorbance, clock)", "ok": True},
        {"name": "of_which_fits_ms_per_run", "value": ms["fits"], "goal": "report (kinetics.fit_all "
         "alone on the same arrays: 4 rate laws with SEs, AIC, runs tests)", "ok": True},
        {"name": "final_law_fit_model_ms_per_run", "value": ms["single"], "goal": "report", "ok": True},
        ratio_row("final_law_fit_model_over_bare_ratio", per_round["single"], per_round["bare"],
                  what="same model, automatic start, SEs, runs test"),
        {"name": "one_result_commit_ms", "value": 1000 * commit_s / 5, "goal": "report (one save_result in its own "
         "transaction, synced to disk)", "ok": True},
        {"name": "max_rel_diff_k_vs_curve_fit", "value": worst, "goal": "<= 1e-5", "ok": worst <= 1e-5},
        # the hand-written script times readings by board uptime; nightcell by the clock fitted to the anchors,
        # whose rate differs from 1 by ~1e-5 here, which scales k by as much
        {"name": "max_rel_diff_k_vs_handwritten_curve_fit", "value": worst_hand,
         "goal": "<= 1e-4 (it times by uptime, nightcell by the anchored clock)", "ok": worst_hand <= 1e-4},
        {"name": "results_stored", "value": stored, "goal": f"= {n_runs}", "ok": stored == saved == n_runs},
        {"name": "runs_x_points", "value": f"{n_runs} x {n_points}", "goal": "1000 x 1000 full", "ok": True},
    ]


if __name__ == "__main__":  # the same as: python tests/bench/run.py --only NAME [--quick] [--json]
    from run import script

    sys.exit(script(__file__))
