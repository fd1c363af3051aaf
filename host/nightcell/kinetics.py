"""Rate laws fitted to one run of absorbance against time.

Owns: the initial rate (with an automatic early-window rule), the integrated zero-, first- and second-order laws,
the exponential approach to a plateau with a free offset, half-lives with standard errors, and the comparison of all
candidate models by AIC with a runs test of the residual signs.

Must never: open a serial port or a database, print, or read files. It takes arrays ``(time_s, absorbance)``; points
flagged by optics are left out with ``mask`` (True = leave out). Bad input raises a named error from
``nightcell.errors`` whose message says what to do; a fit that does not converge raises ``FitFailed``.

Conventions (all fits are least squares on absorbance itself, so the noise is treated as additive on A):

- Time origin: every model is fitted in ``τ = t − t0`` where ``t0`` is the first point used (after ``mask`` and
  ``t_start``); ``A0`` is the absorbance at ``t0`` (``extra["time_origin_s"]``). Rate constants and half-lives
  do not depend on this choice.
- Absorbance is taken proportional to the concentration of the species followed, measured from ``a_end`` (the
  absorbance when that species is used up; 0 when only it absorbs and the blank is the solvent):
  ``D = A − a_end = ε·l·[X]`` for a fading species, ``a_end − A`` for a growing product.
- ``zero_order``: ``A = A0 + rate·τ``; ``rate`` is dA/dt (absorbance s⁻¹); k = |rate|/(ε·l) in M s⁻¹.
- ``first_order``: ``A = a_end + (A0 − a_end)·exp(−k·τ)``; k in s⁻¹, unchanged by the absorbance scale.
- ``second_order``: ``A = a_end + D0/(1 + k·|D0|·τ)`` with ``D0 = A0 − a_end`` (from 1/[X] = 1/[X]0 + k·t);
  k is in (absorbance·s)⁻¹; multiply by ε·l to get M⁻¹ s⁻¹.
- ``first_order_plateau``: ``A = A_inf + (A0 − A_inf)·exp(−k·τ)`` with A_inf free; works for fading and growth.
  Starting values come from a grid over k on which the model is linear in (A0, A_inf), so no guess is needed.
- Initial-rate window rule (automatic): growing windows from the first point (at least 6 points, ×1.25 each step);
  the window chosen is the longest one whose added quadratic term is not significant (two-sided t test,
  p ≥ 0.05; the shortest window if every one is curved); the rate is the slope of a straight line over it, so any
  curvature too small to detect in the noise still biases it slightly toward the mean slope of the window.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Mapping, Sequence

import numpy as np
from scipy import stats as _stats

from .errors import AnalysisError, FitFailed, InputError, NonFiniteInput, TimeOrderError, TooFewPoints
from .fitting import FitResult, as_vector, check_pairs, jsonable, linear_lstsq, nonlinear_lstsq, runs_test

__all__ = [
    "MODELS",
    "ModelComparison",
    "fit_all",
    "fit_model",
    "half_life",
    "initial_rate",
]

MODELS: tuple[str, ...] = ("zero_order", "first_order", "second_order", "first_order_plateau")
_LN2 = math.log(2.0)
_TOL = 1.49012e-08  # curve_fit's default: parameters settle far below any standard error
_MIN_WINDOW = 6
_ALPHA = 0.05


def _prepare(
    t: Any, a: Any, mask: Any, t_start: float | None, need: int, what: str
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Checked (t, A) of the points used, and the boolean ``keep`` over the input."""
    tv = as_vector(t, "time_s")
    if not np.all(np.isfinite(tv)):
        i = int(np.flatnonzero(~np.isfinite(tv))[0])
        raise NonFiniteInput(f"time_s is not a finite number at point {i}; every reading needs its time")
    steps = np.diff(tv)
    if np.any(steps <= 0):
        i = int(np.flatnonzero(steps <= 0)[0]) + 1
        kind = "repeats" if steps[i - 1] == 0 else "goes back"
        raise TimeOrderError(
            f"time_s {kind} at point {i} ({tv[i - 1]:g} then {tv[i]:g} s); sort the readings by time and drop "
            "duplicates"
        )
    tv, av, _, keep = check_pairs(tv, a, "time_s", "absorbance", mask=mask)
    if t_start is not None:
        keep = keep & (tv >= t_start)
    n = int(keep.sum())
    if n < need:
        raise TooFewPoints(
            f"{what}: {n} usable points, need at least {need}; record a longer run, a shorter interval, "
            "or mask fewer points"
        )
    return tv[keep], av[keep], keep


def _finish(result: FitResult, t0: float, model_inputs: Mapping[str, Any]) -> FitResult:
    result.extra["time_origin_s"] = t0
    result.extra["runs_test"] = runs_test(result.residuals)
    result.inputs.update(jsonable(dict(model_inputs)))
    return result


def _half_life(result: FitResult) -> None:
    """Add half_life_s and half_life_se_s (delta method) to ``result.extra`` where the model defines one."""
    v, c, names = result.values, result.cov_matrix, result.names
    a_end = result.inputs.get("a_end", 0.0)
    grad = np.zeros(len(names))
    if result.model in ("first_order", "first_order_plateau"):
        k = v["k"]
        value = _LN2 / k
        grad[names.index("k")] = -_LN2 / k**2
    elif result.model == "second_order":
        d0, k = v["A0"] - a_end, v["k"]
        value = 1.0 / (k * abs(d0))
        grad[names.index("k")] = -value / k
        grad[names.index("A0")] = -value / d0
    elif result.model == "zero_order":
        d0, rate = v["A0"] - a_end, v["rate"]
        value = -d0 / (2.0 * rate) if rate != 0 else math.inf
        grad[names.index("A0")] = -1.0 / (2.0 * rate) if rate != 0 else 0.0
        grad[names.index("rate")] = d0 / (2.0 * rate**2) if rate != 0 else 0.0
    else:
        return
    result.extra["half_life_s"] = value
    result.extra["half_life_se_s"] = math.sqrt(max(float(grad @ c @ grad), 0.0))


def half_life(result: FitResult) -> tuple[float, float]:
    """``(half-life, its SE)`` in seconds from a fitted zero-, first-, second-order or plateau model."""
    if "half_life_s" not in result.extra:
        raise InputError(f"model {result.model!r} has no half-life; fit first_order or first_order_plateau")
    return result.extra["half_life_s"], result.extra["half_life_se_s"]


# -- models --------------------------------------------------------------------------------------------------------
def _first(tau: np.ndarray, a0: float, k: float, *, a_end: float) -> np.ndarray:
    return a_end + (a0 - a_end) * np.exp(-k * tau)


def _plateau(tau: np.ndarray, a0: float, a_inf: float, k: float) -> np.ndarray:
    return a_inf + (a0 - a_inf) * np.exp(-k * tau)


def _plateau_jac(tau: np.ndarray, a0: float, a_inf: float, k: float) -> np.ndarray:
    e = np.exp(-k * tau)
    return np.column_stack([e, 1.0 - e, -(a0 - a_inf) * tau * e])


def _plateau_start(tau: np.ndarray, a: np.ndarray) -> tuple[float, float, float]:
    """Best (A0, A_inf, k) on a log grid of k; for each k the model is a straight line in exp(−kτ)."""
    if tau.size > 400:  # the start needs the shape of the curve, not every point
        idx = np.linspace(0, tau.size - 1, 400).round().astype(int)
        tau, a = tau[idx], a[idx]
    span = float(tau[-1] - tau[0]) or 1.0
    ks = np.geomspace(0.05 / span, 200.0 / span, 64)
    e = np.exp(-np.outer(ks, tau))
    em = e.mean(axis=1, keepdims=True)
    am = a.mean()
    de = e - em
    see = np.sum(de * de, axis=1)
    sea = de @ (a - am)
    with np.errstate(invalid="ignore", divide="ignore"):
        slope = np.where(see > 0, sea / see, 0.0)
        rss = np.sum((a - am) ** 2) - np.where(see > 0, sea**2 / see, 0.0)
    i = int(np.nanargmin(rss))
    d, c = slope[i], am - slope[i] * em[i, 0]
    return c + d, c, float(ks[i])


def _fit_one(
    tau: np.ndarray, a: np.ndarray, model: str, a_end: float, inputs: Mapping[str, Any], w: np.ndarray | None
) -> FitResult:
    if model == "zero_order":
        return linear_lstsq(np.column_stack([np.ones_like(tau), tau]), a, ("A0", "rate"), model=model, x=tau,
                            inputs=inputs, weights=w)
    d = a - a_end
    if model == "first_order":
        good = d * np.sign(d[0] if d[0] != 0 else np.median(d)) > 0
        k0 = 1.0 / float(tau[-1] - tau[0])
        if good.sum() >= 2:
            slope, _ = np.polyfit(tau[good], np.log(np.abs(d[good])), 1)
            k0 = max(-slope, 1e-3 * k0) if np.isfinite(slope) else k0
        # a simple line in log space gives the start; the fit itself is on absorbance
        def f(x: np.ndarray, a0: float, k: float) -> np.ndarray:
            return _first(x, a0, k, a_end=a_end)

        def jac(x: np.ndarray, a0: float, k: float) -> np.ndarray:
            e = np.exp(-k * x)
            return np.column_stack([e, -(a0 - a_end) * x * e])

        return nonlinear_lstsq(f, tau, a, (a[0], k0), ("A0", "k"), model=model, jac=jac, inputs=inputs, tol=_TOL,
                               weights=w)
    if model == "second_order":
        sign = 1.0 if (d[0] if d[0] != 0 else np.median(d)) >= 0 else -1.0
        good = d * sign > 0
        k0, inv_d0 = 1.0 / (float(tau[-1] - tau[0]) * max(abs(d[0]), 1e-6)), 1.0 / max(abs(d[0]), 1e-6)
        if good.sum() >= 2:
            slope, icpt = np.polyfit(tau[good], 1.0 / np.abs(d[good]), 1)
            if np.isfinite(slope) and slope > 0:
                k0 = slope
            if np.isfinite(icpt) and icpt > 0:
                inv_d0 = icpt

        def f2(x: np.ndarray, a0: float, k: float) -> np.ndarray:
            d0 = a0 - a_end
            return a_end + d0 / (1.0 + k * sign * d0 * x)

        def jac2(x: np.ndarray, a0: float, k: float) -> np.ndarray:
            d0 = a0 - a_end
            u = 1.0 + k * sign * d0 * x
            return np.column_stack([1.0 / u**2, -sign * d0 * d0 * x / u**2])

        return nonlinear_lstsq(f2, tau, a, (a_end + sign / inv_d0, k0), ("A0", "k"), model=model, jac=jac2,
                               inputs=inputs, tol=_TOL, weights=w)
    if model == "first_order_plateau":
        start = _plateau_start(tau, a)
        return nonlinear_lstsq(_plateau, tau, a, start, ("A0", "A_inf", "k"), model=model, jac=_plateau_jac,
                               inputs=inputs, tol=_TOL, weights=w)
    raise InputError(f"unknown model {model!r}; choose one of {', '.join(MODELS)}")


def fit_model(
    t: Any,
    A: Any,
    model: str = "first_order_plateau",
    *,
    mask: Any = None,
    inputs: Mapping[str, Any] | None = None,
    t_start: float | None = None,
    a_end: float = 0.0,
    weights: Any = None,
) -> FitResult:
    """Fit one rate law (module docstring) to a run.

    Parameters
    ----------
    t, A : times (s, strictly increasing) and absorbances of the run.
    model : one of ``MODELS``.
    mask : boolean array, True where a point must be left out (e.g. ``optics_result.mask``); such points may be NaN.
    inputs : plain-JSON record of where the run came from (run id, blank id...), kept in ``result.inputs``.
    t_start : leave out points before this time (dead time while mixing and placing the cuvette).
    a_end : absorbance when the followed species is used up (zero-, first- and second-order laws; the plateau
        model fits it).
    weights : relative weights (1/variance of A up to a constant), e.g. ``optics_result.weights`` when the count
        noise is about constant — A read at low light is noisier, and unweighted SEs then understate the truth.

    Returns
    -------
    FitResult with ``extra``: ``time_origin_s``, ``runs_test``, ``half_life_s``/``half_life_se_s`` where defined.
    """
    if model not in MODELS:
        raise InputError(f"unknown model {model!r}; choose one of {', '.join(MODELS)}")
    k = 3 if model == "first_order_plateau" else 2
    tv, av, keep = _prepare(t, A, mask, t_start, k + 2, model)
    w = None
    if weights is not None:
        _, _, wall, _ = check_pairs(t, A, "time_s", "absorbance", weights=weights, mask=~keep)
        w = wall[keep]
    if np.ptp(av) == 0:
        raise FitFailed(f"{model}: the absorbance does not change at all; check that the reaction started")
    if not math.isfinite(a_end):
        raise InputError("a_end must be a finite absorbance (0 when only the followed species absorbs)")
    t0 = float(tv[0])
    rec = dict(inputs or {})
    rec.update(model=model, t_start=t_start, points_used=int(tv.size))
    if model in ("zero_order", "first_order", "second_order"):
        rec["a_end"] = a_end
    rec["weighted"] = w is not None
    result = _fit_one(tv - t0, av, model, a_end, rec, w)
    result.x = tv
    _half_life(result)
    return _finish(result, t0, {})


def initial_rate(
    t: Any,
    A: Any,
    window: Sequence[float] | None = None,
    *,
    mask: Any = None,
    t_start: float | None = None,
    inputs: Mapping[str, Any] | None = None,
) -> FitResult:
    """Initial rate dA/dt (absorbance s⁻¹) from a straight line over an early window.

    ``window=(t_low, t_high)`` in seconds fixes the window; otherwise the automatic rule of the module docstring
    picks it and says so in ``extra["window_rule"]`` and ``message``. Parameters: ``A0`` (at the window's first
    point) and ``rate``.
    """
    tv, av, _ = _prepare(t, A, mask, t_start, 4 if window is not None else _MIN_WINDOW, "initial_rate")
    t0 = float(tv[0])
    tau = tv - t0
    rec = dict(inputs or {})
    rec.update(model="initial_rate", t_start=t_start)
    if window is not None:
        lo, hi = (float(v) for v in window)
        if not (hi > lo):
            raise InputError(f"window ({lo:g}, {hi:g}) s must have its end after its start")
        sel = (tv >= lo) & (tv <= hi)
        if sel.sum() < 3:
            raise TooFewPoints(f"initial_rate: only {int(sel.sum())} points in window ({lo:g}, {hi:g}) s; widen it")
        n_use = None
        rule = f"window given: {lo:g} to {hi:g} s"
        p_curv = None
    else:
        sizes = []
        n = _MIN_WINDOW
        while n < tv.size:
            sizes.append(n)
            n = max(n + 1, int(round(n * 1.25)))
        sizes.append(tv.size)
        n_use, p_curv = sizes[0], None
        for size in sizes:
            x = tau[:size]
            X = np.column_stack([np.ones(size), x, x * x])
            try:
                q = linear_lstsq(X, av[:size], ("c0", "c1", "c2"), model="window check")
            except AnalysisError:
                continue
            se = q.se("c2")
            p = float(2.0 * _stats.t.sf(abs(q.param("c2") / se), q.dof)) if se > 0 else 0.0
            if p >= _ALPHA:
                n_use, p_curv = size, p
        sel = np.zeros(tv.size, dtype=bool)
        sel[:n_use] = True
        rule = (
            "automatic: longest early window (≥ 6 points, growing ×1.25) whose added quadratic term is not "
            f"significant (p ≥ {_ALPHA}); {n_use} points"
        )
    X = np.column_stack([np.ones(int(sel.sum())), tau[sel] - tau[sel][0]])
    result = linear_lstsq(X, av[sel], ("A0", "rate"), model="initial_rate", x=tv[sel], inputs=rec)
    result.extra.update(
        window_s=[float(tv[sel][0]), float(tv[sel][-1])], window_points=int(sel.sum()), window_rule=rule,
        curvature_p_value=p_curv,
    )
    result.message = rule
    return _finish(result, float(tv[sel][0]), {})


@dataclass
class ModelComparison:
    """Every candidate model fitted to the same points, ranked by AIC (lowest first).

    Attributes
    ----------
    results : fitted models by name.
    failures : models that could not be fitted, with the reason.
    ranking : model names, best first; ``delta_aic`` and ``akaike_weight`` by name.
    """

    results: dict[str, FitResult]
    failures: dict[str, str]
    ranking: list[str]
    delta_aic: dict[str, float] = field(default_factory=dict)
    akaike_weight: dict[str, float] = field(default_factory=dict)

    @property
    def best(self) -> FitResult:
        """The model with the lowest AIC."""
        return self.results[self.ranking[0]]

    def report(self) -> str:
        """A ranking table followed by each model's report."""
        lines = ["model comparison (AIC = n·ln(RSS/n) + 2k; lowest first)"]
        for name in self.ranking:
            r = self.results[name]
            rt = r.extra["runs_test"]["p_value"]
            lines.append(
                f"  {name:<20} AIC = {r.aic:10.2f}  ΔAIC = {self.delta_aic[name]:8.2f}  "
                f"weight = {self.akaike_weight[name]:.3f}  runs-test p = {'n/a' if rt is None else f'{rt:.3g}'}"
            )
        for name, why in self.failures.items():
            lines.append(f"  {name:<20} not fitted: {why}")
        for name in self.ranking:
            lines.append(self.results[name].report())
        return "\n".join(lines)

    def to_dict(self) -> dict[str, Any]:
        """Plain JSON types only."""
        return jsonable(
            {
                "ranking": self.ranking,
                "delta_aic": self.delta_aic,
                "akaike_weight": self.akaike_weight,
                "failures": self.failures,
                "results": {k: v.to_dict() for k, v in self.results.items()},
            }
        )


def fit_all(
    t: Any,
    A: Any,
    *,
    models: Sequence[str] = MODELS,
    mask: Any = None,
    inputs: Mapping[str, Any] | None = None,
    t_start: float | None = None,
    a_end: float = 0.0,
    weights: Any = None,
) -> ModelComparison:
    """Fit every candidate model to the same points and rank them by AIC.

    A model that cannot be fitted is listed in ``failures``; input errors (unsorted times, NaN, too few points)
    still raise. Raises ``FitFailed`` if no model could be fitted.
    """
    results: dict[str, FitResult] = {}
    failures: dict[str, str] = {}
    for model in models:
        try:
            results[model] = fit_model(
                t, A, model, mask=mask, inputs=inputs, t_start=t_start, a_end=a_end, weights=weights
            )
        except InputError:
            raise
        except AnalysisError as exc:
            if isinstance(exc, TooFewPoints) and model != "first_order_plateau":
                raise
            failures[model] = str(exc)
    if not results:
        raise FitFailed("no rate law could be fitted: " + "; ".join(failures.values()))
    ranking = sorted(results, key=lambda m: results[m].aic)
    best = results[ranking[0]].aic
    delta = {m: results[m].aic - best for m in ranking}
    if math.isinf(best):
        raw = {m: 1.0 if delta[m] == 0 or math.isnan(delta[m]) else 0.0 for m in ranking}
    else:
        raw = {m: math.exp(-0.5 * delta[m]) for m in ranking}
    total = sum(raw.values())
    weights = {m: raw[m] / total for m in ranking}
    return ModelComparison(results, failures, ranking, delta, weights)
