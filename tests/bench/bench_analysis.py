"""Benchmark: full analysis of one run versus a bare scipy curve_fit of one model on the same arrays.

Full analysis = absorbance from counts (optics, with flags) + every candidate rate law with standard errors, AIC and
runs test (kinetics.fit_all). The bare reference = ``scipy.optimize.curve_fit`` of the exponential approach to a
plateau, started at the true parameters (the most favourable case for it). Both are timed run by run, interleaved,
in one process, so the ratio is meaningful on a shared, noisy machine. Goal: ratio ≤ 3. A third timing, nightcell's
``fit_model`` of the same single model (automatic start values, SEs, runs test), is reported beside them.

Runs are synthetic (invented numbers, fixed seed): Gaussian count noise and 12-bit quantisation.

Usage: python tests/bench/bench_analysis.py [--quick]
"""

from __future__ import annotations

import sys
import time

import numpy as np
from scipy.optimize import curve_fit

from nightcell import kinetics, optics

GOAL_RATIO = 3.0


def _plateau(t, a0, a_inf, k):
    return a_inf + (a0 - a_inf) * np.exp(-k * t)


def run(quick: bool) -> list[dict]:
    """Time both paths; return rows {name, value, goal, ok}."""
    n_runs, n_points = (40, 1000) if quick else (1000, 1000)
    rng = np.random.default_rng(1234)
    t = np.arange(n_points) * 2.0
    blank_light, dark = 3500.0, 100.0
    full_s = bare_s = single_s = 0.0
    worst = 0.0
    for i in range(n_runs):
        k = rng.uniform(0.001, 0.01)
        a0, a_inf = rng.uniform(0.6, 1.0), rng.uniform(0.05, 0.2)
        true_a = _plateau(t, a0, a_inf, k)
        light = np.round(dark + (blank_light - dark) * 10.0 ** (-true_a) + rng.normal(0, 3.0, n_points))
        dark_reads = np.full(n_points, dark)
        a_for_bare = optics.absorbance(light, dark_reads, blank_light, dark).absorbance
        order = (0, 1, 2) if i % 2 == 0 else (2, 1, 0)  # alternate which goes first
        for which in order:
            start = time.perf_counter()
            if which == 0:
                res = optics.absorbance(light, dark_reads, blank_light, dark)
                comparison = kinetics.fit_all(t, res.absorbance, mask=res.mask)
                assert comparison.results["first_order_plateau"].stderr["k"] > 0
                full_s += time.perf_counter() - start
            elif which == 2:
                single = kinetics.fit_model(t, a_for_bare, model="first_order_plateau")
                assert single.stderr["k"] > 0
                single_s += time.perf_counter() - start
            else:
                popt, pcov = curve_fit(_plateau, t, a_for_bare, p0=(a0, a_inf, k))
                assert np.all(np.isfinite(np.sqrt(np.diag(pcov))))
                bare_s += time.perf_counter() - start
        worst = max(worst, abs(comparison.results["first_order_plateau"].values["k"] - popt[2]) / popt[2])
    ratio = full_s / bare_s
    return [
        {"name": "full_analysis_ms_per_run", "value": 1000 * full_s / n_runs, "goal": "report", "ok": True},
        {"name": "bare_curve_fit_ms_per_run", "value": 1000 * bare_s / n_runs, "goal": "report", "ok": True},
        {"name": "plateau_fit_model_ms_per_run", "value": 1000 * single_s / n_runs, "goal": "report", "ok": True},
        {"name": "plateau_fit_model_over_bare_ratio", "value": single_s / bare_s, "goal": "report (same model, "
         "automatic start, SEs, runs test)", "ok": True},
        {"name": "full_over_bare_ratio", "value": ratio, "goal": f"<= {GOAL_RATIO}", "ok": ratio <= GOAL_RATIO},
        {"name": "max_rel_diff_k_vs_curve_fit", "value": worst, "goal": "<= 1e-5", "ok": worst <= 1e-5},
        {"name": "runs_x_points", "value": f"{n_runs} x {n_points}", "goal": "1000 x 1000 full", "ok": True},
    ]


if __name__ == "__main__":  # the same as: python tests/bench/run.py --only NAME [--quick] [--json]
    from run import script

    sys.exit(script(__file__))
