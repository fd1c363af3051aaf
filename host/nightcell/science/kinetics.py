"""Rate laws fitted to one run of absorbance against time.

Owns: the initial rate (with an automatic early-window rule), the integrated zero-, first- and second-order laws,
the first-order approach towards a final absorbance (offset free), half-lives with standard errors, and the comparison of all
candidate models by AICc (AIC with the small-sample correction; ΔAICc and Akaike weights) with a runs test of
the residual signs.

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
- ``first_order_to_zero``: ``A = a_end + (A0 − a_end)·exp(−k·τ)``; k in s⁻¹, unchanged by the absorbance scale.
- ``second_order``: ``A = a_end + D0/(1 + k·|D0|·τ)`` with ``D0 = A0 − a_end`` (from 1/[X] = 1/[X]0 + k·t);
  k is in (absorbance·s)⁻¹; multiply by ε·l to get M⁻¹ s⁻¹.
- ``first_order_to_final``: ``A = A_inf + (A0 − A_inf)·exp(−k·τ)`` with A_inf free; works for fading and growth.
- ``first_order_rise_to_final`` (not in the default set ``MODELS``: with A0 free it is ``first_order_to_final`` written another way):
  ``A = A0 + A_rise·(1 − exp(−k·t))``, a rise to the final value ``A0 + A_rise`` (product formation, growth-like
  curves), with A0 free or fixed (``a0=``). Its time is the time as given (t = 0 is when the reaction began: the
  CSV's zero, a stored run's first sample), not the first point used, because a fixed A0 is the absorbance at t = 0.
  Fitted by Levenberg–Marquardt from the given start (``start=``) *and* from the best point of a log grid over k
  (the linear parameters solved exactly at each k); the lower sum of squares wins. It fails, with the reason,
  when k is not positive, when the best k lies at the edge of the grid (the curve is still straight, or has
  finished rising before the first point), or when the Jacobian is singular — never a wrong answer as a success.
- A fitted rate constant (or a first/second-order half-life) that is not positive is a failed fit (``FitFailed``
  with the reason), never a result: e.g. ``first_order_to_zero`` on rising data. A zero-order line keeps its fit, but
  gives no half-life when the absorbance moves away from ``a_end`` (``extra["half_life_note"]`` says so).
  No guess is needed: the start comes from the integrated law (a straight line in τ and ∫A dτ), or from a grid
  over k where that fails.
- How the laws are fitted: each is linear in all its parameters but one once that one is fixed, so the search is
  over k alone (variable projection; see "the fast path" below), and the standard errors come from the full
  Jacobian at the minimum, cov = s²·(JᵀWJ)⁻¹ — the minimum and the covariance of MINPACK's leastsq and of
  ``curve_fit(absolute_sigma=False)``. Where that search cannot settle (a law that cannot pin its parameters on
  these points), MINPACK's Levenberg–Marquardt (``fitting.nonlinear_lstsq``) decides, as it always did. The search
  runs to a relative step of 1e-10 in k, so on badly fitting laws it can end a little beyond where MINPACK's own
  stopping rule halts (a lower RSS, differences far below a standard error).
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

from ..errors import AnalysisError, FitFailed, InputError, NonFiniteInput, TimeOrderError, TooFewPoints
from . import laws as _laws
from .laws import ALL_MODELS, MODELS
from .fitting import FitResult, _package, as_vector, check_pairs, jsonable, linear_lstsq, nonlinear_lstsq, runs_test
from .fitting import _stats  # scipy.stats, imported when first used

__all__ = [
    "ALL_MODELS",
    "MODELS",
    "ModelComparison",
    "fit_all",
    "fit_model",
    "half_life",
    "initial_rate",
    "rank_by_aicc",
]

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
    if model_inputs:
        result.inputs.update(jsonable(dict(model_inputs)))
    return result


def _half_life(result: FitResult) -> None:
    """Add half_life_s and half_life_se_s (delta method) to ``result.extra`` where the model defines one."""
    v, c, names = result.values, result.cov, result.names
    a_end = result.inputs.get("a_end", 0.0)
    grad = [0.0] * len(names)
    if result.model in ("first_order_to_zero", "first_order_to_final", "first_order_rise_to_final"):
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
    if not value > 0:
        # a zero-order line moving away from a_end never reaches half of it (the k-laws fail before this point)
        result.extra["half_life_note"] = (f"no half-life: the absorbance moves away from a_end = {a_end:g} "
                                          "instead of toward it")
        return
    result.extra["half_life_s"] = value
    var = sum(gi * cij * gj for gi, row in zip(grad, c) for cij, gj in zip(row, grad))  # gradᵀ·cov·grad
    result.extra["half_life_se_s"] = math.sqrt(max(var, 0.0))


def half_life(result: FitResult) -> tuple[float, float]:
    """``(half-life, its SE)`` in seconds from a fitted zero-, first- or second-order law."""
    if "half_life_s" not in result.extra:
        raise InputError(f"model {result.model!r} has no half-life here; fit first_order_to_zero or first_order_to_final")
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


# -- the fast path: one nonlinear parameter, the others linear ---------------------------------------------------
#
# Each nonlinear law is linear in all but one parameter once that one is fixed (variable projection):
#   first_order_to_zero  A − a_end = d0·e^(−kτ)                      linear in d0 given k
#   second_order         A − a_end = d0/(1 + c·τ),  c = k·sign·d0   linear in d0 given c
#   first_order_to_final A = A_inf + d·e^(−kτ),     d = A0 − A_inf  linear in (A_inf, d) given k
# so the fit is a 1-D search over k (or c): Newton on the reduced sum of squares, whose first and second derivatives
# variable projection gives in closed form (Gauss–Newton, Kaufman's step, where the second derivative is not
# positive), with step halving so the weighted RSS never rises. Every weighted sum an iteration needs comes from one
# small matrix product of [f, f²(, f³, f⁴)] with the per-fit moments [w, w·A, w·τ, w·τ², w·τ·A, w·τ²·A], shared by
# the models (the zero-order line comes from the moments directly). At the minimum the standard errors come from
# JᵀWJ in the reported parameters, also from the moments, cov = s²·(JᵀWJ)⁻¹ with s² = RSS/(n − p): the same
# convention and the same minimum as MINPACK's leastsq / curve_fit(absolute_sigma=False), to far below their own
# tolerance (tests/test_kinetics_fast.py). Anything unusual (no convergence, a start that cannot be found, a nearly
# singular JᵀWJ) falls back to ``nonlinear_lstsq`` / ``linear_lstsq`` from the original start values, so hard cases
# keep the reference behaviour.

_FAST_MAX_ITER = 60
_EPS = float(np.finfo(float).eps)
_FAST_XTOL = 1e-10  # relative step in k (or c) at which the search stops: far below curve_fit's 1.5e-8
_WARM_MIN = 20_000  # beyond twice this many points, a search starts from the minimum over a subset of them
_WARM_HEAD = 4_000  # the subset keeps the run's first points whole: a fast reaction is over within them
_FAST_COND = 1e-10  # smallest determinant of the unit-diagonal JᵀWJ the fast path accepts (else the SVD path decides)


class _Moments:
    """Per-fit arrays shared by the models: τ, A, weights and the moment matrix [w, wA, wτ, wτ², wτA, wτ²A]."""

    def __init__(self, tau: np.ndarray, a: np.ndarray, w: np.ndarray | None):
        self.tau, self.a, self.w = tau, a, w
        wv = np.ones_like(tau) if w is None else w
        self.wv = wv
        rows = np.empty((6, tau.size))  # filled row by row (contiguous); used as its n×6 transpose
        rows[0] = wv
        np.multiply(wv, a, out=rows[1])
        np.multiply(wv, tau, out=rows[2])
        np.multiply(rows[2], tau, out=rows[3])
        np.multiply(rows[2], a, out=rows[4])
        np.multiply(rows[3], a, out=rows[5])
        self.M = rows.T
        self.sums = rows.sum(axis=1).tolist()  # Σw, ΣwA, Σwτ, Σwτ², ΣwτA, Σwτ²A
        self.sw, self.swa = self.sums[0], self.sums[1]
        self.sum_waa = float(wv @ (a * a))
        self.span = float(tau[-1]) if tau[-1] > 0 else 1.0
        self.ntau = -tau
        self._integral: np.ndarray | None = None
        self._warm: _Moments | None = None

    def warm_start(self) -> "_Moments | None":
        """For a long run (> ``_WARM_MIN`` points), the moments of a subset of its points — the first
        ``_WARM_HEAD`` and about ``_WARM_MIN`` spread evenly — whose minimum starts the search on every point near
        its end, so that search needs two or three passes over the whole run instead of five to ten. None for a
        short run."""
        n = self.tau.size
        if n <= 2 * _WARM_MIN:
            return None
        if self._warm is None:  # made once, shared by the laws fitted to these points
            idx = np.union1d(np.arange(_WARM_HEAD), np.arange(0, n, n // _WARM_MIN))
            self._warm = _Moments(self.tau[idx], self.a[idx], None if self.w is None else self.w[idx])
        return self._warm

    def integral(self) -> np.ndarray:
        """∫A dτ from the first point (trapezoid rule)."""
        if self._integral is None:
            steps = np.diff(self.tau) * (self.a[1:] + self.a[:-1]) * 0.5
            self._integral = np.concatenate(([0.0], np.cumsum(steps)))
        return self._integral


def _line(x: np.ndarray, y: np.ndarray) -> tuple[float, float]:
    """(intercept, slope) of an unweighted straight line through (x, y)."""
    xm, ym = x.mean(), y.mean()
    dx = x - xm
    sxx = float(dx @ dx)
    if not sxx > 0:
        return math.nan, math.nan
    slope = float(dx @ (y - ym)) / sxx
    return float(ym - slope * xm), slope


def _search(step_at: Any, theta: float, valid: Any, slack: float) -> tuple[float, tuple] | None:
    """Minimise the reduced RSS over one parameter θ. None if it fails.

    ``step_at(θ)`` gives (rss, step, state): the Newton step on the reduced RSS (its exact first and second
    derivatives, which variable projection gives in closed form), or the Gauss–Newton step where the second
    derivative is not positive. A step is halved until the RSS does not rise by more than ``slack`` (the rounding
    of its formula).
    """
    got = step_at(theta)
    if got is None:
        return None
    rss, step, state = got
    for _ in range(_FAST_MAX_ITER):
        if not math.isfinite(step):
            return None
        if abs(step) <= _FAST_XTOL * abs(theta):
            return theta, state
        first = abs(step)
        for _ in range(40):
            new = theta + step
            got = step_at(new) if valid(new) else None
            if got is not None and got[0] <= rss + slack:
                break
            step *= 0.5
        else:
            # no step lowers the RSS: at the minimum to rounding if the step asked for was already tiny
            return (theta, state) if first <= 1e-6 * abs(theta) else None
        theta = new
        rss, step, state = got
    return None


def _fast_exponential(m: _Moments, k0: float, a_end: float | None) -> tuple[float, float, float, list] | None:
    """Weighted LS over k of A = c0 + d·e^(−kτ): the plateau when ``a_end`` is None (c0 free), else first order
    (c0 = a_end). Returns (k, c0, d, sums at k) at the minimum, or None."""
    warm = m.warm_start()
    if warm is not None:
        got = _fast_exponential(warm, k0, a_end)
        if got is not None:
            k0 = got[0]
    sw, swa = m.sw, m.swa
    E = np.empty((2, m.tau.size))
    plateau = a_end is None
    yy = m.sum_waa if plateau else m.sum_waa - 2.0 * a_end * swa + a_end * a_end * sw

    def step_at(k: float) -> tuple[float, float, tuple] | None:
        np.multiply(m.ntau, k, out=E[0])
        np.exp(E[0], out=E[0])
        np.multiply(E[0], E[0], out=E[1])
        S = (E @ m.M).tolist()  # rows e, e²; columns w, wA, wτ, wτ², wτA, wτ²A
        (se, sea, ste, stte, sta, stta), (see, _, stee, sttee, _, _) = S
        # The model is c0 + d·e with e = exp(−kτ); ∂/∂k of e is −τe, ∂²/∂k² is τ²e. With r the residual and
        # g = Σw·τe·r, the reduced RSS has slope 2·d·g; its second derivative is 2·h with h below (variable
        # projection: the linear parameters follow k, dc/dk from differentiating their normal equations).
        try:
            if plateau:
                det = sw * see - se * se
                if not det > 0:
                    return None
                d = (sw * sea - se * swa) / det
                c0 = (see * swa - se * sea) / det
                rss = yy - c0 * swa - d * sea  # Σw·r² from the sums; only used to compare steps
                g = sta - c0 * ste - d * stee
                rhs0, rhs1 = d * ste, d * stee - g
                dc0 = (see * rhs0 - se * rhs1) / det
                dd = (sw * rhs1 - se * rhs0) / det
                h = (d * d * sttee - d * (dc0 * ste + dd * stee) - d * (stta - c0 * stte - d * sttee) + dd * g)
                gn = d * d * (sttee - (ste * (see * ste - se * stee) + stee * (sw * stee - se * ste)) / det)
            else:
                if not see > 0:
                    return None
                sey = sea - a_end * se
                d = sey / see
                c0 = a_end
                rss = yy - d * sey
                g = (sta - a_end * ste) - d * stee
                dd = (d * stee - g) / see
                h = d * d * sttee - d * dd * stee - d * ((stta - a_end * stte) - d * sttee) + dd * g
                gn = d * d * (sttee - stee * stee / see)
            slope = d * g
            if h > 0:
                return rss, -slope / h, (c0, d, S)
            if gn > 0:
                return rss, -slope / gn, (c0, d, S)
            return None
        except (ZeroDivisionError, OverflowError):
            return None

    # e = exp(−kτ) only overflows for growth (k < 0) over a long span; a decay that ends long before the run does
    # (k·span of thousands: a long run logging its plateau) underflows to 0, which the sums take as it is
    out = _search(step_at, k0, lambda k: -k * m.span < 300.0, 64 * _EPS * yy)
    if out is None:
        return None
    k, (c0, d, S) = out
    return k, c0, d, S


def _fast_second(m: _Moments, c_start: float, a_end: float) -> tuple[float, float, list] | None:
    """Weighted LS over c of A − a_end = d0/(1 + c·τ). Returns (c, d0, sums at c) at the minimum, or None."""
    warm = m.warm_start()
    if warm is not None:
        got = _fast_second(warm, c_start, a_end)
        if got is not None:
            c_start = got[0]
    sw, swa = m.sw, m.swa
    U = np.empty((4, m.tau.size))
    yy = m.sum_waa - 2.0 * a_end * swa + a_end * a_end * sw
    tmax = m.span

    def step_at(c: float) -> tuple[float, float, tuple] | None:
        np.multiply(m.tau, c, out=U[0])
        U[0] += 1.0
        np.reciprocal(U[0], out=U[0])
        np.multiply(U[0], U[0], out=U[1])
        np.multiply(U[1], U[0], out=U[2])
        np.multiply(U[1], U[1], out=U[3])
        S = (U @ m.M).tolist()  # rows 1/u, 1/u², 1/u³, 1/u⁴; columns w, wA, wτ, wτ², wτA, wτ²A
        # The model is d0·b with b = 1/u; ∂b/∂c = −τ/u², ∂²b/∂c² = 2τ²/u³. With g = Σw·(τ/u²)·r the reduced RSS
        # has slope 2·d0·g and second derivative 2·h (variable projection, as for the exponential laws).
        try:
            sbb = S[1][0]
            if not sbb > 0:
                return None
            sby = S[0][1] - a_end * S[0][0]
            d0 = sby / sbb
            rss = yy - d0 * sby
            g = (S[1][4] - a_end * S[1][2]) - d0 * S[2][2]
            sbd = S[2][2]
            sdd = S[3][3]
            dd = (d0 * sbd - g) / sbb
            h = d0 * d0 * sdd - dd * d0 * sbd - 2.0 * d0 * ((S[2][5] - a_end * S[2][3]) - d0 * sdd) + dd * g
            gn = d0 * d0 * (sdd - sbd * sbd / sbb)
            slope = d0 * g
            if h > 0:
                return rss, -slope / h, (d0, S)
            if gn > 0:
                return rss, -slope / gn, (d0, S)
            return None
        except (ZeroDivisionError, OverflowError):
            return None

    out = _search(step_at, c_start, lambda c: 1.0 + c * tmax > 1e-9, 64 * _EPS * max(yy, 0.0))
    if out is None:
        return None
    c, (d0, S) = out
    return c, d0, S


def _inverse_scaled(N: list[list[float]]) -> list[list[float]] | None:
    """Inverse of a 2×2 or 3×3 symmetric positive definite matrix, through its unit-diagonal scaling; None when the
    scaled matrix is too close to singular for the normal equations (determinant ≤ ``_FAST_COND``; its smallest
    eigenvalue is then at most that, so the reference path's SVD judges the fit)."""
    p = len(N)
    d = [math.sqrt(N[i][i]) if N[i][i] > 0 else 0.0 for i in range(p)]
    if not all(v > 0 and math.isfinite(v) for v in d):
        return None
    S = [[N[i][j] / (d[i] * d[j]) for j in range(p)] for i in range(p)]
    if p == 2:
        r = S[0][1]
        det = 1.0 - r * r
        if not det > _FAST_COND:
            return None
        inv = [[1.0 / det, -r / det], [-r / det, 1.0 / det]]
    else:
        a, b, c = S[0][1], S[0][2], S[1][2]
        det = 1.0 + 2.0 * a * b * c - a * a - b * b - c * c
        if not det > _FAST_COND:
            return None
        inv = [[(1.0 - c * c) / det, (b * c - a) / det, (a * c - b) / det],
               [(b * c - a) / det, (1.0 - b * b) / det, (a * b - c) / det],
               [(a * c - b) / det, (a * b - c) / det, (1.0 - a * a) / det]]
    return [[inv[i][j] / (d[i] * d[j]) for j in range(p)] for i in range(p)]


def _fast_package(m: _Moments, model: str, names: tuple[str, ...], beta: list[float], pred: np.ndarray,
                  normal: list[list[float]], inputs: Mapping[str, Any]) -> FitResult | None:
    """FitResult at the minimum: cov = s²·(JᵀWJ)⁻¹ from ``normal`` = JᵀWJ in the reported parameters, s² = RSS/(n−p)
    (None when it is too close to singular, so the reference path can judge it)."""
    if not all(map(math.isfinite, beta)):
        return None
    inv = _inverse_scaled(normal)
    if inv is None:
        return None
    resid = m.a - pred
    rss = float(m.wv @ (resid * resid))
    s2 = rss / (m.a.size - len(names))
    cov = np.array(inv) * s2
    return _package(model, names, beta, cov, m.tau, m.a, resid, rss, inputs=inputs)


def _fast_line(m: _Moments, inputs: Mapping[str, Any]) -> FitResult | None:
    """Weighted straight line A = A0 + rate·τ from the moments (the zero-order law)."""
    sw, swa, swt, swtt, swta, _ = m.sums
    try:
        det = sw * swtt - swt * swt
        if not det > _FAST_COND * sw * swtt:
            return None
        rate = (sw * swta - swt * swa) / det
        a0 = (swtt * swa - swt * swta) / det
    except (ZeroDivisionError, OverflowError):
        return None
    return _fast_package(m, "zero_order", ("A0", "rate"), [a0, rate], a0 + rate * m.tau,
                         [[sw, swt], [swt, swtt]], inputs)


def _fast_fit(m: _Moments, model: str, a_end: float, inputs: Mapping[str, Any]) -> FitResult | None:
    """The variable-projection fit of one law, or None to use the reference path."""
    tau, a = m.tau, m.a
    if model == "zero_order":
        return _fast_line(m, inputs)
    # the starts come from a subset of a long run's points (its warm start; the points themselves otherwise): a start
    # only has to lie near the minimum, which the search over every point then finds
    s = m.warm_start() or m
    if model == "first_order_to_final":
        c = math.nan
        X = np.column_stack([np.ones_like(s.tau), s.tau, s.integral()])
        try:
            coef = np.linalg.solve(X.T @ X, X.T @ s.a)  # A = A0 + k·A_inf·τ − k·∫A dτ (the law, integrated)
            c = -float(coef[2])
        except np.linalg.LinAlgError:
            pass
        # the integrated law's k where it is a usable start (on a long run that reached its plateau early, k·span
        # runs to thousands, beyond the grid's range)
        k0 = c if math.isfinite(c) and 0.05 < c * m.span else _plateau_start(s.tau, s.a)[2]
        got = _fast_exponential(m, k0, None)
        if got is None:
            return None
        k, a_inf, d, S = got
        (se, _, ste, _, _, _), (see, _, stee, sttee, _, _) = S
        sw = m.sw
        # JᵀWJ in (A_inf, d, k) — columns 1, e, −d·τe: sums of positive terms — then carried to (A0, A_inf, k)
        # with A0 = A_inf + d, an exact linear change of parameters: cov = T·C·Tᵀ.
        inner = _inverse_scaled([[sw, se, -d * ste], [se, see, -d * stee], [-d * ste, -d * stee, d * d * sttee]])
        if inner is None:
            return None
        (c11, c12, c13), (_, c22, c23), (_, _, c33) = inner
        # rows/columns of the reported order A0 = A_inf + d, A_inf, k
        T = [[c11 + 2 * c12 + c22, c11 + c12, c13 + c23], [c11 + c12, c11, c13], [c13 + c23, c13, c33]]
        beta = [a_inf + d, a_inf, k]
        if not all(map(math.isfinite, beta)):
            return None
        pred = a_inf + d * np.exp(m.ntau * k)
        resid = m.a - pred
        rss = float(m.wv @ (resid * resid))
        cov = np.array(T) * (rss / (m.a.size - 3))
        return _package(model, ("A0", "A_inf", "k"), beta, cov, m.tau, m.a, resid, rss, inputs=inputs)
    d = a - a_end
    sd = s.a - a_end
    if model == "first_order_to_zero":
        _, slope = _line(s.integral() - a_end * s.tau, sd)  # D = D0 − k·∫D dτ (the law, integrated)
        k0 = -slope
        if not (math.isfinite(k0) and k0 > 0):
            k0 = _first_order_start(s.tau, sd)
        got = _fast_exponential(m, k0, a_end)
        if got is None:
            return None
        k, _, d0, S = got
        see, _, stee, sttee, _, _ = S[1]
        # J = [e, −d0·τe]
        normal = [[see, -d0 * stee], [-d0 * stee, d0 * d0 * sttee]]
        return _fast_package(m, model, ("A0", "k"), [a_end + d0, k], a_end + d0 * np.exp(m.ntau * k), normal,
                             inputs)
    if model == "second_order":
        sign = _second_sign(d)
        # D = D0 − (c/D0)·∫D² dτ (the law, integrated)
        sq = sd * sd
        integral_sq = np.concatenate(([0.0], np.cumsum(np.diff(s.tau) * (sq[1:] + sq[:-1]) * 0.5)))
        d0_line, slope = _line(integral_sq, sd)
        c0 = -slope * d0_line
        if not (math.isfinite(c0) and c0 > 0):
            k_start, inv_d0 = _second_order_start(s.tau, sd, sign)
            c0 = k_start / inv_d0
        got = _fast_second(m, c0, a_end)
        if got is None:
            return None
        c, d0, S = got
        k = c / (sign * d0)
        u4w, _, u4wt, u4wtt, _, _ = S[3]
        # J = [1/u², −sign·d0²·τ/u²]
        f = -sign * d0 * d0
        normal = [[u4w, f * u4wt], [f * u4wt, f * f * u4wtt]]
        return _fast_package(m, model, ("A0", "k"), [a_end + d0, k], a_end + d0 / (1.0 + c * tau), normal, inputs)
    return None


def _first_order_start(tau: np.ndarray, d: np.ndarray) -> float:
    """k from a straight line through ln|A − a_end| (the reference path's start)."""
    good = d * np.sign(d[0] if d[0] != 0 else np.median(d)) > 0
    k0 = 1.0 / float(tau[-1] - tau[0])
    if good.sum() >= 2:
        slope, _ = np.polyfit(tau[good], np.log(np.abs(d[good])), 1)
        k0 = max(-slope, 1e-3 * k0) if np.isfinite(slope) else k0
    return k0


def _second_sign(d: np.ndarray) -> float:
    return 1.0 if (d[0] if d[0] != 0 else np.median(d)) >= 0 else -1.0


def _second_order_start(tau: np.ndarray, d: np.ndarray, sign: float) -> tuple[float, float]:
    """(k, 1/|D0|) from a straight line through 1/|A − a_end| (the reference path's start)."""
    good = d * sign > 0
    k0, inv_d0 = 1.0 / (float(tau[-1] - tau[0]) * max(abs(d[0]), 1e-6)), 1.0 / max(abs(d[0]), 1e-6)
    if good.sum() >= 2:
        slope, icpt = np.polyfit(tau[good], 1.0 / np.abs(d[good]), 1)
        if np.isfinite(slope) and slope > 0:
            k0 = slope
        if np.isfinite(icpt) and icpt > 0:
            inv_d0 = icpt
    return k0, inv_d0


# -- the rise to a final value -------------------------------------------------------------------------------------
_RISE_GRID = 96


def _rise(t: np.ndarray, a0: float, a_rise: float, k: float) -> np.ndarray:
    return a0 + a_rise * -np.expm1(-k * t)


def _rise_grid(t: np.ndarray, a: np.ndarray, w: np.ndarray | None, a0: float | None) -> tuple[list[float], int]:
    """Best (A0, A_rise, k) on a log grid of k (the linear parameters solved exactly at each k), and the index of
    that k in the grid (0 or the last means the best k lies at an edge)."""
    span = float(t.max()) if t.max() > 0 else 1.0
    ks = np.geomspace(0.01 / span, 500.0 / span, _RISE_GRID)
    sw = np.ones_like(t) if w is None else np.sqrt(w)
    best, best_i, best_p = math.inf, 0, [math.nan] * 3
    for i, k in enumerate(ks):
        basis = -np.expm1(-k * t)
        if a0 is None:
            X = np.column_stack([np.ones_like(t), basis]) * sw[:, None]
            coef, *_ = np.linalg.lstsq(X, a * sw, rcond=None)
            p = [float(coef[0]), float(coef[1]), float(k)]
        else:
            bb = float(np.sum((sw * basis) ** 2))
            if not bb > 0:
                continue
            p = [a0, float(np.sum(sw * sw * basis * (a - a0)) / bb), float(k)]
        rss = float(np.sum((sw * (a - _rise(t, *p))) ** 2))
        if rss < best:
            best, best_i, best_p = rss, i, p
    return best_p, best_i


def _fit_rise(t: np.ndarray, a: np.ndarray, w: np.ndarray | None, a0: float | None,
              start: Mapping[str, float] | None, inputs: Mapping[str, Any]) -> FitResult:
    """``first_order_rise_to_final`` (module docstring): LM from the given start and from the grid's best, the lower RSS."""
    model = "first_order_rise_to_final"
    names = ("A0", "A_rise", "k") if a0 is None else ("A_rise", "k")
    fixed = 0.0 if a0 is None else a0

    def f(x: np.ndarray, *p: float) -> np.ndarray:
        return _rise(x, *p) if a0 is None else _rise(x, fixed, *p)

    def jac(x: np.ndarray, *p: float) -> np.ndarray:
        a_rise, k = p[-2], p[-1]
        e = np.exp(-k * x)
        cols = [-np.expm1(-k * x), a_rise * x * e]
        return np.column_stack(([np.ones_like(x)] if a0 is None else []) + cols)

    grid, edge = _rise_grid(t, a, w, a0)
    starts: list[tuple[str, list[float]]] = []
    if start:
        unknown = sorted(set(start) - set(names))
        if unknown:
            raise InputError(f"{model}: no parameter {unknown[0]!r} to start from; its parameters are "
                             f"{', '.join(names)}")
        auto = dict(zip(("A0", "A_rise", "k"), grid))
        starts.append(("given", [float(start.get(n, auto[n])) for n in names]))
    starts.append(("grid", grid if a0 is None else grid[1:]))
    best: FitResult | None = None
    failures = []
    given_rss = None
    for origin, p0 in starts:
        try:
            fit = nonlinear_lstsq(f, t, a, p0, names, model=model, jac=jac, weights=w, inputs=inputs)
        except FitFailed as exc:
            failures.append(f"from the {origin} start: {exc}")
            continue
        if origin == "given":
            given_rss = fit.rss
        fit.extra["start"] = dict(zip(names, p0))
        fit.extra["start_used"] = origin
        if best is None or fit.rss < best.rss * (1.0 - 1e-9):
            best = fit
    if best is None:
        raise FitFailed(f"{model}: no start converged ({'; '.join(failures)}); check the data or give --start values")
    k = best.values["k"]
    if not k > 0:
        raise FitFailed(f"{model}: the fitted rate constant k = {k:.4g} is not positive; the curve does not rise "
                        "toward a final value as this law needs — fit zero_order or first_order_to_final instead")
    span = float(t.max())
    if (edge == 0 or edge == _RISE_GRID - 1) and not 0.01 < k * span < 500.0:
        raise FitFailed(
            f"{model}: the rise cannot be pinned down (k·t_max = {k * span:.3g}): "
            + ("the curve is still nearly straight, so the final value is not determined — record longer or fit "
               "zero_order" if k * span <= 0.01 else
               "the curve has finished rising before most points — use shorter intervals or fit zero_order")
        )
    if len(starts) > 1 and best.extra["start_used"] == "grid":
        best.message = ((f"from the given start the fit stopped at a higher sum of squares ({given_rss:.6g} against "
                         f"{best.rss:.6g})" if given_rss is not None else "the fit from the given start did not "
                         "converge") + "; the minimum from the grid start is reported")
    best.extra["A_final"] = best.values["A_rise"] + (best.values["A0"] if a0 is None else fixed)
    if a0 is not None:
        best.inputs["a0_fixed"] = fixed
    return best


def _fit_one(
    tau: np.ndarray, a: np.ndarray, model: str, a_end: float, inputs: Mapping[str, Any], w: np.ndarray | None,
    moments: _Moments | None = None,
) -> FitResult:
    fit = None
    if model in MODELS:
        fit = _fast_fit(moments if moments is not None else _Moments(tau, a, w), model, a_end, inputs)
    if fit is None:
        fit = _fit_reference(tau, a, model, a_end, inputs, w)
    fit.curve_fn = _law_curve(model, a_end, _second_sign(a - a_end) if model == "second_order" else 1.0)
    return fit


def _law_curve(model: str, a_end: float, sign: float) -> Any:
    """The rate law ``model`` as ``curve(tau, beta)`` (beta in the fit's parameter order), for ``FitResult.curve``."""
    if model == "zero_order":
        return lambda x, b: b[0] + b[1] * x
    if model == "first_order_to_zero":
        return lambda x, b: _first(x, b[0], b[1], a_end=a_end)
    if model == "second_order":
        return lambda x, b: a_end + (b[0] - a_end) / (1.0 + b[1] * sign * (b[0] - a_end) * x)
    if model == "first_order_to_final":
        return lambda x, b: _plateau(x, *b)
    return None


def _fit_reference(
    tau: np.ndarray, a: np.ndarray, model: str, a_end: float, inputs: Mapping[str, Any], w: np.ndarray | None
) -> FitResult:
    if model == "zero_order":
        return linear_lstsq(np.column_stack([np.ones_like(tau), tau]), a, ("A0", "rate"), model=model, x=tau,
                            inputs=inputs, weights=w)
    d = a - a_end
    if model == "first_order_to_zero":
        k0 = _first_order_start(tau, d)
        # a simple line in log space gives the start; the fit itself is on absorbance
        def f(x: np.ndarray, a0: float, k: float) -> np.ndarray:
            return _first(x, a0, k, a_end=a_end)

        def jac(x: np.ndarray, a0: float, k: float) -> np.ndarray:
            e = np.exp(-k * x)
            return np.column_stack([e, -(a0 - a_end) * x * e])

        return nonlinear_lstsq(f, tau, a, (a[0], k0), ("A0", "k"), model=model, jac=jac, inputs=inputs, tol=_TOL,
                               weights=w)
    if model == "second_order":
        sign = _second_sign(d)
        k0, inv_d0 = _second_order_start(tau, d, sign)

        def f2(x: np.ndarray, a0: float, k: float) -> np.ndarray:
            d0 = a0 - a_end
            return a_end + d0 / (1.0 + k * sign * d0 * x)

        def jac2(x: np.ndarray, a0: float, k: float) -> np.ndarray:
            d0 = a0 - a_end
            u = 1.0 + k * sign * d0 * x
            return np.column_stack([1.0 / u**2, -sign * d0 * d0 * x / u**2])

        return nonlinear_lstsq(f2, tau, a, (a_end + sign / inv_d0, k0), ("A0", "k"), model=model, jac=jac2,
                               inputs=inputs, tol=_TOL, weights=w)
    if model == "first_order_to_final":
        start = _plateau_start(tau, a)
        return nonlinear_lstsq(_plateau, tau, a, start, ("A0", "A_inf", "k"), model=model, jac=_plateau_jac,
                               inputs=inputs, tol=_TOL, weights=w)
    raise InputError(f"unknown model {model!r}; choose one of {', '.join(MODELS)}")


def fit_model(
    t: Any,
    A: Any,
    model: str = "first_order_to_final",
    *,
    mask: Any = None,
    inputs: Mapping[str, Any] | None = None,
    t_start: float | None = None,
    a_end: float = 0.0,
    weights: Any = None,
    a0: float | None = None,
    start: Mapping[str, float] | None = None,
) -> FitResult:
    """Fit one rate law (module docstring) to a run.

    Parameters
    ----------
    t, A : times (s, strictly increasing) and absorbances of the run.
    model : one of ``MODELS``.
    mask : boolean array, True where a point must be left out (e.g. ``optics_result.mask``); such points may be NaN.
    inputs : plain-JSON record of where the run came from (run id, blank id...), kept in ``result.inputs``.
    t_start : leave out points before this time (dead time while mixing and placing the cuvette).
    a_end : absorbance when the followed species is used up (zero-, first- and second-order laws;
        first_order_to_final fits it).
    weights : relative weights (1/variance of A up to a constant), e.g. ``optics_result.weights`` when the count
        noise is about constant — A read at low light is noisier, and unweighted SEs then understate the truth.
    a0 : ``first_order_rise_to_final`` only: hold A0 (the absorbance at t = 0) fixed at this value; None fits it.
    start : ``first_order_rise_to_final`` only: starting values by parameter name (``A0``, ``A_rise``, ``k``); the grid's
        start is always tried too and the lower sum of squares wins.

    Returns
    -------
    FitResult with ``extra``: ``time_origin_s``, ``runs_test``, ``half_life_s``/``half_life_se_s`` where defined.
    """
    model = _laws.resolve(model)
    if model not in ALL_MODELS:
        raise InputError(f"unknown rate law {model!r}; choose one of {', '.join(ALL_MODELS)}")
    if model != "first_order_rise_to_final" and (a0 is not None or start):
        raise InputError("a0 and start apply to first_order_rise_to_final only")
    return _fit_prepared(_points(t, A, mask, t_start, weights), model, inputs, t_start, a_end, a0=a0, start=start)


@dataclass
class _Points:
    """The checked points of a run, shared by every model fitted to it."""

    t: Any
    A: Any
    weights: Any
    keep: np.ndarray
    tv: np.ndarray
    av: np.ndarray
    w: np.ndarray | None = None
    checked: bool = False
    flat: bool | None = None
    moments: _Moments | None = None


def _points(t: Any, A: Any, mask: Any, t_start: float | None, weights: Any) -> _Points:
    tv, av, keep = _prepare(t, A, mask, t_start, 0, "fit")
    return _Points(t, A, weights, keep, tv, av)


def _fit_prepared(p: _Points, model: str, inputs: Mapping[str, Any] | None, t_start: float | None,
                  a_end: float, *, a0: float | None = None, start: Mapping[str, float] | None = None) -> FitResult:
    tv, av = p.tv, p.av
    k = 3 if model == "first_order_to_final" or (model == "first_order_rise_to_final" and a0 is None) else 2
    if tv.size < k + 2:
        raise TooFewPoints(
            f"{model}: {tv.size} usable points, need at least {k + 2}; record a longer run, a shorter interval, "
            "or mask fewer points"
        )
    if not p.checked:  # the weights are checked after the count, as each model's own check did
        if p.weights is not None:
            _, _, wall, _ = check_pairs(p.t, p.A, "time_s", "absorbance", weights=p.weights, mask=~p.keep)
            p.w = wall[p.keep]
        p.checked = True
    w = p.w
    if p.flat is None:
        p.flat = bool(av.max() == av.min())
    if p.flat:
        raise FitFailed(f"{model}: the absorbance does not change at all; check that the reaction started")
    if not math.isfinite(a_end):
        raise InputError("a_end must be a finite absorbance (0 when only the followed species absorbs)")
    t0 = float(tv[0])
    rec = dict(inputs or {})
    rec.update(model=model, t_start=t_start, points_used=int(tv.size))
    if model in ("zero_order", "first_order_to_zero", "second_order"):
        rec["a_end"] = a_end
    rec["weighted"] = w is not None
    if model == "first_order_rise_to_final":
        if a0 is not None and not math.isfinite(a0):
            raise InputError("a0 must be a finite absorbance (the absorbance at t = 0)")
        result = _fit_rise(tv, av, w, a0, start, rec)
        _half_life(result)
        return _finish(result, 0.0, {})
    if p.moments is None:
        p.moments = _Moments(tv - t0, av, w)
    result = _fit_one(p.moments.tau, av, model, a_end, rec, w, p.moments)
    result.x = tv
    if model != "zero_order" and not result.values["k"] > 0:
        k_value = result.values["k"]
        hint = ("the absorbance rises, so it does not decay toward a_end = "
                f"{a_end:g} as this law needs — fit first_order_to_final or first_order_rise_to_final"
                if av[-1] > av[0] else "the data do not follow this law — fit another model")
        if not k_value < 0:
            raise FitFailed(f"{model}: the fitted rate constant is zero; the data show no reaction")
        life = f" (half-life {_LN2 / k_value:.3g} s)" if model != "second_order" else ""
        raise FitFailed(f"{model}: the fitted rate constant k = {k_value:.4g} is negative{life}, which is not "
                        f"physical: {hint}")
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
    """Every candidate model fitted to the same points, ranked by AICc (lowest first).

    AICc = AIC + 2k(k+1)/(n−k−1) (fitting module docstring): with the few points of a short run plain AIC favours
    the model with more parameters too often.

    Attributes
    ----------
    results : fitted models by name.
    failures : models that could not be fitted, with the reason.
    ranking : model names, best first; ``delta_aicc`` and ``akaike_weight`` (from AICc) by name.
    """

    results: dict[str, FitResult]
    failures: dict[str, str]
    ranking: list[str]
    delta_aicc: dict[str, float] = field(default_factory=dict)
    akaike_weight: dict[str, float] = field(default_factory=dict)

    @property
    def best(self) -> FitResult:
        """The model with the lowest AICc."""
        return self.results[self.ranking[0]]

    def report(self) -> str:
        """A ranking table followed by each model's report."""
        lines = ["model comparison (AICc = n·ln(RSS/n) + 2k + 2k(k+1)/(n−k−1); lowest first)"]
        for name in self.ranking:
            r = self.results[name]
            rt = r.extra["runs_test"]["p_value"]
            lines.append(
                f"  {name:<20} AICc = {r.extra['aicc']:10.2f}  ΔAICc = {self.delta_aicc[name]:8.2f}  "
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
                "ranked_by": "AICc",
                "delta_aicc": self.delta_aicc,
                "akaike_weight": self.akaike_weight,
                "failures": self.failures,
                "results": {k: v.to_dict() for k, v in self.results.items()},
            }
        )


def rank_by_aicc(results: Mapping[str, FitResult]) -> tuple[list[str], dict[str, float], dict[str, float]]:
    """Model names by AICc (lowest first), ΔAICc and Akaike weights from AICc."""
    score = {m: r.extra.get("aicc", math.inf) for m, r in results.items()}
    ranking = sorted(results, key=lambda m: (score[m], results[m].aic))
    best = score[ranking[0]]
    if math.isinf(best):  # an exact fit (−inf) or too few points for the correction (+inf): fall back to AIC
        score = {m: r.aic for m, r in results.items()}
        ranking = sorted(results, key=lambda m: score[m])
        best = score[ranking[0]]
    delta = {m: score[m] - best for m in ranking}
    if math.isinf(best):
        raw = {m: 1.0 if delta[m] == 0 or math.isnan(delta[m]) else 0.0 for m in ranking}
    else:
        raw = {m: math.exp(-0.5 * delta[m]) for m in ranking}
    total = sum(raw.values())
    return ranking, delta, {m: raw[m] / total for m in ranking}


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
    """Fit every candidate model to the same points and rank them by AICc.

    A model that cannot be fitted is listed in ``failures``; input errors (unsorted times, NaN, too few points)
    still raise. Raises ``FitFailed`` if no model could be fitted.
    """
    results: dict[str, FitResult] = {}
    failures: dict[str, str] = {}
    models = [_laws.resolve(m) for m in models]
    for model in models:
        if model not in ALL_MODELS:
            raise InputError(f"unknown rate law {model!r}; choose one of {', '.join(ALL_MODELS)}")
    points = _points(t, A, mask, t_start, weights)  # checked once, shared by every model
    for model in models:
        try:
            results[model] = _fit_prepared(points, model, inputs, t_start, a_end)
        except InputError:
            raise
        except AnalysisError as exc:
            if isinstance(exc, TooFewPoints) and model not in ("first_order_to_final", "first_order_rise_to_final"):
                raise
            failures[model] = str(exc)
    if not results:
        raise FitFailed("no rate law could be fitted: " + "; ".join(failures.values()))
    ranking, delta, weights = rank_by_aicc(results)
    return ModelComparison(results, failures, ranking, delta, weights)
