"""Benchmark: Monte Carlo coverage of nominal 95 % intervals (rate constant, calibrated concentration, Ea).

Every simulated reading goes the way a real one does: a true absorbance sets the LED light reaching the photodiode,
Gaussian count noise is added, the counts are quantised to 12 bits, and optics turns them back into absorbance
against a blank. The true value is then checked against the 95 % Student-t interval nightcell reports.
Goal: coverage between 93.5 % and 96.5 % (binomial SD at 2000 runs ≈ 0.5 %). All data are synthetic (invented
numbers, fixed seeds).

Campaigns (every interval: value ± t·SE with Student t of the fit's own degrees of freedom):
- k of first_order_to_final, weighted by optics' weights (T²); the unweighted coverage is reported beside it;
  and k of the law ranked best by AICc among every candidate (``fit_all``), as ``rate`` reports it.
- concentration predicted from a straight-line calibration (6 levels × 2 replicates; unknown read 3 times).
- Ea from an Arrhenius design (5 temperatures; each k fitted from a simulated run, weighted by its SE), and from
  3 temperatures (1 dof: t = 12.7), with the one SE rule of ``study.SE_RULE``.

Usage: python tests/bench/bench_coverage.py [--quick]
"""

from __future__ import annotations

import sys
import math

import numpy as np

from nightcell.science import calibration, kinetics, optics, study

LOW, HIGH = 0.935, 0.965
BLANK_LIGHT, DARK, FULL_SCALE = 3500.0, 100.0, 4095.0


def _read(rng: np.random.Generator, true_a: np.ndarray, noise_counts: float = 3.0) -> optics.OpticsResult:
    light = DARK + (BLANK_LIGHT - DARK) * 10.0 ** (-np.asarray(true_a, dtype=float))
    counts = np.clip(np.round(light + rng.normal(0.0, noise_counts, light.shape)), 0, FULL_SCALE)
    dark = np.clip(np.round(DARK + rng.normal(0.0, noise_counts, light.shape)), 0, FULL_SCALE)
    return optics.absorbance(counts, dark, BLANK_LIGHT, DARK, full_scale=FULL_SCALE)


def _row(name: str, hits: int, runs: int) -> dict:
    value = hits / runs
    # the window is ±1.5 % at 2000 runs (3 binomial SDs); fewer runs (--quick) widen it to 3 SDs of their own, or a
    # true 95 % interval would miss the goal by chance alone about one time in four
    half = max((HIGH - LOW) / 2, 3 * math.sqrt(0.95 * 0.05 / runs))
    low, high = 0.95 - half, 0.95 + half
    return {"name": name, "value": value, "goal": f"{low:.3f}-{high:.3f} ({runs} runs)", "ok": low <= value <= high}


def coverage_k(runs: int, seed: int = 11) -> list[dict]:
    rng = np.random.default_rng(seed)
    t = np.arange(0.0, 900.0, 10.0)
    hits_w = hits_u = hits_aicc = 0
    chosen: dict[str, int] = {}
    for _ in range(runs):
        k = rng.uniform(0.003, 0.012)
        true_a = 0.1 + 0.8 * np.exp(-k * t)
        res = _read(rng, true_a)
        fit = kinetics.fit_model(t, res.absorbance, "first_order_to_final", mask=res.mask, weights=res.weights)
        lo, hi = fit.confint("k")
        hits_w += lo <= k <= hi
        fit_u = kinetics.fit_model(t, res.absorbance, "first_order_to_final", mask=res.mask)
        lo, hi = fit_u.confint("k")
        hits_u += lo <= k <= hi
        best = kinetics.fit_all(t, res.absorbance, mask=res.mask, weights=res.weights).best
        chosen[best.model] = chosen.get(best.model, 0) + 1
        if "k" in best.values:
            lo, hi = best.confint("k")
            hits_aicc += lo <= k <= hi
    rows = [_row("coverage_k_first_order_to_final_weighted", hits_w, runs),
            _row("coverage_k_best_by_AICc_weighted", hits_aicc, runs),
            {"name": "models chosen by AICc (k campaign)", "value": ", ".join(f"{m}: {c}" for m, c in
                                                                                 sorted(chosen.items())),
             "goal": None, "ok": None}]
    rows.append({"name": "coverage_k_first_order_to_final_unweighted", "value": hits_u / runs,
                 "goal": "report (A noise is not constant, so unweighted SEs are expected to be off)", "ok": True})
    return rows


def coverage_calibration(runs: int, seed: int = 12) -> list[dict]:
    rng = np.random.default_rng(seed)
    conc = np.repeat([0.0, 0.1, 0.2, 0.3, 0.4, 0.5], 2)
    eps_l = 1.8
    hits = 0
    for _ in range(runs):
        c_true = rng.uniform(0.05, 0.45)
        cal = calibration.fit_calibration(conc, _read(rng, eps_l * conc, 2.0).absorbance)
        pred = cal.predict(_read(rng, np.full(3, eps_l * c_true), 2.0).absorbance)
        hits += pred.ci_low <= c_true <= pred.ci_high
    return [_row("coverage_calibrated_concentration", hits, runs)]


def coverage_arrhenius(runs: int, seed: int = 13, temps: tuple[float, ...] = (288.0, 298.0, 308.0, 318.0, 328.0),
                       name: str = "coverage_Ea_arrhenius") -> list[dict]:
    rng = np.random.default_rng(seed)
    temps_a = np.array(temps)
    ea, ln_a = 60_600.0, math.log(2.0e8)  # Ea of the size reported for crystal violet fading (REFERENCES: Sci. Rep. 2020)
    ks = np.exp(ln_a - ea / (study.GAS_CONSTANT * temps_a))
    t = np.arange(0.0, 900.0, 10.0)
    hits = 0
    for _ in range(runs):
        k_fit, k_se = [], []
        for k in ks:
            res = _read(rng, 0.1 + 0.8 * np.exp(-k * t))
            fit = kinetics.fit_model(t, res.absorbance, "first_order_to_final", mask=res.mask, weights=res.weights)
            k_fit.append(fit.param("k"))
            k_se.append(fit.se("k"))
        arr = study.arrhenius(temps_a, k_fit, k_se)
        lo, hi = arr.confint("Ea_J_per_mol")
        hits += lo <= ea <= hi
    return [_row(name, hits, runs)]


def run(quick: bool) -> list[dict]:
    """All campaigns; rows {name, value, goal, ok}."""
    runs = 300 if quick else 2000
    return (coverage_k(runs) + coverage_calibration(runs) + coverage_arrhenius(runs)
            + coverage_arrhenius(runs, 14, (293.0, 308.0, 323.0), "coverage_Ea_arrhenius_3_temperatures_t12.7"))


if __name__ == "__main__":  # the same as: python tests/bench/run.py --only NAME [--quick] [--json]
    from run import script

    sys.exit(script(__file__))
