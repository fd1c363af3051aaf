"""NIST digits: how many significant digits nightcell's fits agree with the certified values of two NIST
Statistical Reference Datasets (StRD; public-domain work of the US National Institute of Standards and Technology).

- Norris (linear, 36 observations), fitted as a calibration line by ``calibration.fit_calibration`` — the path a
  user's standards take. Certified B0, B1, their SDs and the residual SD. Goal (StRD guidance, as in
  shared/REFERENCES.md): at least 9 digits.
- Misra1a (nonlinear, y = b1·(1 − exp(−b2·x)), 14 observations) from both NIST starts, by ``fitting.nonlinear_lstsq``
  (the machinery under every rate law), and as the rise law ``first_order_rise_to_final`` with A0 held at 0 (the path of
  ``nightcell rate --model first_order_rise_to_final --a0 0 --start …``). Goal: parameters and residual sum of squares to 6
  digits, SDs to 4.

Digits are the log relative error, LRE = −log10(|fitted − certified| / |certified|), capped at the digits the
certificate gives (15 for Norris, 11 for Misra1a): the StRD way of scoring agreement. The tables are copied from
shared/REFERENCES.md (which quotes the NIST files); the benchmark prints the lowest LRE of each group.

    python tests/bench/bench_nist.py
"""

from __future__ import annotations

import math
import sys
from pathlib import Path

import numpy as np

from nightcell.science.calibration import fit_calibration
from nightcell.science.fitting import nonlinear_lstsq

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
# NIST StRD Norris and Misra1a data, as the fitting tests hold them (copied from shared/REFERENCES.md)
from test_fitting import MISRA_X, MISRA_Y, NORRIS_X, NORRIS_Y  # noqa: E402

NORRIS_CERTIFIED = {"intercept": -0.262323073774029, "slope": 1.00211681802045}
NORRIS_CERTIFIED_SD = {"intercept": 0.232818234301152, "slope": 0.429796848199937e-03}
NORRIS_RESIDUAL_SD = 0.884796396144373

# NIST StRD Misra1a: starts and certified values
MISRA_STARTS = ((500.0, 1e-4), (250.0, 5e-4))
MISRA_CERTIFIED = {"b1": 2.3894212918e02, "b2": 5.5015643181e-04}
MISRA_CERTIFIED_SD = {"b1": 2.7070075241e00, "b2": 7.2668688436e-06}
MISRA_RSS = 1.2455138894e-01


def lre(value: float, certified: float, cap: float) -> float:
    """Log relative error: the number of leading significant digits that agree, at most ``cap``."""
    if not math.isfinite(value):
        return 0.0
    err = abs(value - certified) / abs(certified)
    return cap if err == 0 else max(0.0, min(cap, -math.log10(err)))


def norris_digits() -> dict[str, float]:
    cal = fit_calibration(NORRIS_X, NORRIS_Y)
    params = min(lre(cal.param(k), v, 15) for k, v in NORRIS_CERTIFIED.items())
    sds = min(lre(cal.se(k), v, 15) for k, v in NORRIS_CERTIFIED_SD.items())
    return {"params": params, "sds": min(sds, lre(cal.residual_sd, NORRIS_RESIDUAL_SD, 15))}


def misra_digits() -> dict[str, float]:
    def model(x, b1, b2):
        return b1 * (1.0 - np.exp(-b2 * x))

    params = sds = math.inf
    for start in MISRA_STARTS:
        fit = nonlinear_lstsq(model, MISRA_X, MISRA_Y, start, ("b1", "b2"), model="misra1a")
        params = min(params, lre(fit.rss, MISRA_RSS, 11), *(lre(fit.param(k), v, 11) for k, v in MISRA_CERTIFIED.items()))
        sds = min(sds, *(lre(fit.se(k), v, 11) for k, v in MISRA_CERTIFIED_SD.items()))
    return {"params": params, "sds": sds}


def misra_rise_digits() -> dict[str, float]:
    from nightcell.science.kinetics import fit_model

    params = sds = math.inf
    for b1, b2 in MISRA_STARTS:
        fit = fit_model(MISRA_X, MISRA_Y, "first_order_rise_to_final", a0=0.0, start={"A_rise": b1, "k": b2})
        got = {"b1": fit.param("A_rise"), "b2": fit.param("k")}
        se = {"b1": fit.se("A_rise"), "b2": fit.se("k")}
        params = min(params, lre(fit.rss, MISRA_RSS, 11), *(lre(got[k], v, 11) for k, v in MISRA_CERTIFIED.items()))
        sds = min(sds, *(lre(se[k], v, 11) for k, v in MISRA_CERTIFIED_SD.items()))
    return {"params": params, "sds": sds}


def run(quick: bool) -> list[dict]:
    """The same in quick and full runs (it takes milliseconds)."""
    n, m, r = norris_digits(), misra_digits(), misra_rise_digits()
    return [
        {"name": "NIST Norris digits, B0 and B1 (calibration line)", "value": round(n["params"], 2), "goal": ">= 9",
         "ok": n["params"] >= 9},
        {"name": "NIST Norris digits, SDs and residual SD", "value": round(n["sds"], 2), "goal": ">= 9",
         "ok": n["sds"] >= 9},
        {"name": "NIST Misra1a digits, b1, b2 and RSS (both starts)", "value": round(m["params"], 2), "goal": ">= 6",
         "ok": m["params"] >= 6},
        {"name": "NIST Misra1a digits, SDs (both starts)", "value": round(m["sds"], 2), "goal": ">= 4",
         "ok": m["sds"] >= 4},
        {"name": "NIST Misra1a digits as first_order_rise_to_final, A_rise, k and RSS (both starts)",
         "value": round(r["params"], 2), "goal": ">= 6", "ok": r["params"] >= 6},
        {"name": "NIST Misra1a digits as first_order_rise_to_final, SDs (both starts)", "value": round(r["sds"], 2),
         "goal": ">= 4", "ok": r["sds"] >= 4},
    ]


if __name__ == "__main__":  # the same as: python tests/bench/run.py --only NAME [--quick] [--json]
    from run import script

    sys.exit(script(__file__))
