"""The one result shape for every fit, and the least-squares machinery the analysis rooms share.

Owns: ``FitResult`` (values, standard errors, covariance in parameter order, n, dof, residual SD, RSS, AIC,
the inputs the fit came from, a text report and a plain-JSON export), linear least squares (OLS/WLS through a
QR factorisation of the column-equilibrated design), nonlinear least squares (MINPACK Levenberg–Marquardt via scipy's ``leastsq``, with the
covariance convention of NIST StRD and ``curve_fit(absolute_sigma=False)``), input checks and the runs test of
residual signs.

Must never: open a serial port or a database, print, or read files. Callers pass arrays; results come back as
objects; bad input raises a named error from ``nightcell.errors`` whose message says what to do.

AIC used throughout: ``AIC = n·ln(RSS/n) + 2·k`` where RSS is the (weighted) residual sum of squares and k the number
of fitted parameters (the Gaussian log-likelihood up to a constant that is the same for every model fitted to the
same points, so only differences between models on the same data mean anything). ``aicc`` in ``extra`` adds the
small-sample correction ``2k(k+1)/(n−k−1)``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Callable, Mapping, Sequence

import numpy as np
from scipy import linalg as _sla
from scipy import optimize as _opt

from ..errors import DegenerateData, FitFailed, InputError, NonFiniteInput, ShapeMismatch, TooFewPoints


class _OnFirstUse:
    """A module imported when one of its names is first used: ``scipy.stats`` takes about a second to import and
    most commands (a listing, one run's fit) need at most one quantile from it."""

    def __init__(self, name: str):
        self._name = name

    def __getattr__(self, attr: str) -> Any:
        import importlib

        return getattr(importlib.import_module(self._name), attr)


_stats: Any = _OnFirstUse("scipy.stats")

__all__ = [
    "FitResult",
    "aic",
    "as_vector",
    "check_pairs",
    "jsonable",
    "linear_lstsq",
    "nonlinear_lstsq",
    "runs_test",
    "t_quantile",
]


def jsonable(value: Any) -> Any:
    """Turn numpy scalars/arrays, tuples and non-finite floats into plain JSON types (NaN/inf become ``None``)."""
    kind = type(value)  # the plain types first: results are mostly these, and the checks below are slower
    if kind is str or kind is int or value is None or kind is bool:
        return value
    if kind is float:
        return value if math.isfinite(value) else None
    if kind is dict:
        return {k if type(k) is str else str(k): jsonable(v) for k, v in value.items()}
    if kind is list:
        return [jsonable(v) for v in value]
    if isinstance(value, Mapping):
        return {str(k): jsonable(v) for k, v in value.items()}
    if isinstance(value, np.ndarray):
        return jsonable(value.tolist())
    if isinstance(value, (list, tuple)):
        return [jsonable(v) for v in value]
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        v = float(value)
        return v if math.isfinite(v) else None
    if value is None or isinstance(value, str):
        return value
    if hasattr(value, "to_dict"):
        return jsonable(value.to_dict())
    return str(value)


def t_quantile(level: float, dof: int) -> float:
    """Two-sided Student-t multiplier for a ``level`` interval (e.g. 0.95) with ``dof`` degrees of freedom."""
    if not 0.0 < level < 1.0:
        raise InputError(f"confidence level {level!r} must lie between 0 and 1, e.g. 0.95")
    if dof <= 0:
        return math.inf
    from scipy.special import stdtrit  # what scipy.stats.t.ppf computes, without loading scipy.stats (~1 s)

    return float(stdtrit(dof, 0.5 + level / 2.0))


def aic(rss: float, n: int, k: int) -> float:
    """``n·ln(RSS/n) + 2k``; ``-inf`` for an exact fit (RSS = 0)."""
    if n <= 0:
        return math.nan
    if rss <= 0.0:
        return -math.inf
    return n * math.log(rss / n) + 2.0 * k


def _aicc(rss: float, n: int, k: int) -> float:
    base = aic(rss, n, k)
    if n - k - 1 <= 0:
        return math.inf
    return base + 2.0 * k * (k + 1) / (n - k - 1)


def as_vector(values: Any, what: str) -> np.ndarray:
    """A 1-D float array from ``values``; raise ``InputError`` naming ``what`` if that is impossible."""
    try:
        arr = np.asarray(values, dtype=float)
    except (TypeError, ValueError) as exc:
        raise InputError(f"{what} must be numbers ({exc}); fix the values and try again") from None
    if arr.ndim == 0:
        arr = arr.reshape(1)
    if arr.ndim != 1:
        raise ShapeMismatch(f"{what} must be a flat list of numbers, got an array of shape {arr.shape}")
    return arr


def check_pairs(
    x: Any, y: Any, x_name: str, y_name: str, *, weights: Any = None, mask: Any = None
) -> tuple[np.ndarray, np.ndarray, np.ndarray | None, np.ndarray]:
    """Check paired arrays and return ``(x, y, weights, keep)`` where ``keep`` is the boolean array of used points.

    ``mask`` (optional) is True where a point must be left out; left-out points may hold NaN. Every kept point must
    be finite, and weights (if any) finite and positive.
    """
    xa = as_vector(x, x_name)
    ya = as_vector(y, y_name)
    if xa.shape != ya.shape:
        raise ShapeMismatch(
            f"{x_name} has {xa.size} values but {y_name} has {ya.size}; give one {y_name} per {x_name}"
        )
    keep = np.ones(xa.shape, dtype=bool)
    if mask is not None:
        m = np.asarray(mask)
        if m.shape != xa.shape:
            raise ShapeMismatch(f"mask has {m.size} entries but there are {xa.size} points; give one per point")
        keep &= ~m.astype(bool)
    wa = None
    if weights is not None:
        wa = as_vector(weights, "weights")
        if wa.shape != xa.shape:
            raise ShapeMismatch(f"weights has {wa.size} values but there are {xa.size} points; give one per point")
    for arr, name in ((xa, x_name), (ya, y_name)) + (((wa, "weights"),) if wa is not None else ()):
        bad = keep & ~np.isfinite(arr)
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise NonFiniteInput(
                f"{name} is not a finite number at point {i} (of {arr.size}); remove that point or mask it out"
            )
    if wa is not None and (wa[keep] <= 0).any():
        i = int(np.flatnonzero(keep & (wa <= 0))[0])
        raise InputError(f"weight at point {i} is {wa[i]!r}; weights must be positive (use 1/variance)")
    return xa, ya, wa, keep


@dataclass
class FitResult:
    """A fitted model: parameters with standard errors and everything needed to judge and reproduce the fit.

    Attributes
    ----------
    model : name of the model (``"line"``, ``"first_order_to_final"``, ...).
    names : parameter names; ``cov`` rows and columns follow this order.
    values, stderr : parameter value and standard error by name.
    cov : covariance matrix of the parameters (list of lists, ``names`` order).
    n, dof : number of points used and residual degrees of freedom (n − number of parameters).
    residual_sd : sqrt(RSS / dof) — s_y/x for a calibration line (weighted RSS for weighted fits).
    rss : residual sum of squares (weighted if weights were given).
    aic : n·ln(RSS/n) + 2k (module docstring); ``aicc`` (property, also in ``extra``) adds 2k(k+1)/(n−k−1).
    success, message : whether the fit can be trusted, and why / why not.
    inputs : plain-JSON record of what the fit came from (ids, windows, choices).
    extra : model-specific derived values (half-life, runs test, LOD...), plain JSON.
    x, y, residuals : the points actually used and their residuals (numpy; not exported).
    curve_fn : ``curve_fn(x, beta)`` — the fitted model at ``x`` (the units of ``x`` above) for parameters ``beta``
        in ``names`` order; set by the function that fitted it (None when the model has no curve over ``x``).
        ``curve`` and ``band`` use it, so a plot asks the result instead of re-deriving the model.
    """

    model: str
    names: tuple[str, ...]
    values: dict[str, float]
    stderr: dict[str, float]
    cov: list[list[float]]
    n: int
    dof: int
    residual_sd: float
    rss: float
    aic: float
    success: bool = True
    message: str = ""
    inputs: dict[str, Any] = field(default_factory=dict)
    extra: dict[str, Any] = field(default_factory=dict)
    x: np.ndarray = field(default_factory=lambda: np.empty(0), repr=False)
    y: np.ndarray = field(default_factory=lambda: np.empty(0), repr=False)
    residuals: np.ndarray = field(default_factory=lambda: np.empty(0), repr=False)
    curve_fn: Callable[[np.ndarray, np.ndarray], np.ndarray] | None = field(default=None, repr=False, compare=False)

    def curve(self, x: Any) -> np.ndarray:
        """The fitted model at ``x`` (same units as ``self.x``)."""
        if self.curve_fn is None:
            raise InputError(f"{self.model} has no curve over x to evaluate")
        beta = np.array([self.values[n] for n in self.names], dtype=float)
        return np.asarray(self.curve_fn(np.asarray(x, dtype=float), beta), dtype=float)

    def band(self, x: Any, level: float = 0.95, *, kind: str = "confidence") -> tuple[np.ndarray, np.ndarray]:
        """Lower and upper edges at ``x`` of the two-sided ``level`` band of the fitted curve.

        ``kind="confidence"``: where the true curve lies; ``kind="prediction"``: where one new observation falls
        (adds the residual variance; for a weighted fit, an observation of unit relative weight). Half-width
        ``t(level, dof)·sqrt(g·cov·gᵀ [+ s²])`` with ``g`` the gradient of the curve in the parameters (central
        differences; exact for models linear in their parameters, the delta method otherwise).
        """
        if kind not in ("confidence", "prediction"):
            raise InputError(f"band kind {kind!r} must be 'confidence' or 'prediction'")
        xv = np.asarray(x, dtype=float)
        centre = self.curve(xv)
        assert self.curve_fn is not None
        beta = np.array([self.values[n] for n in self.names], dtype=float)
        grad = np.empty((len(beta),) + centre.shape)
        for i, (b, se) in enumerate(zip(beta, (self.stderr[n] for n in self.names))):
            h = 1e-6 * max(abs(b), se if math.isfinite(se) else 0.0) or 1e-9
            up, down = beta.copy(), beta.copy()
            up[i] += h
            down[i] -= h
            grad[i] = (self.curve_fn(xv, up) - self.curve_fn(xv, down)) / (2.0 * h)
        var = np.einsum("i...,ij,j...->...", grad, self.cov_matrix, grad)
        if kind == "prediction":
            var = var + self.residual_sd**2
        half = t_quantile(level, self.dof) * np.sqrt(np.clip(var, 0.0, None))
        return centre - half, centre + half

    def param(self, name: str) -> float:
        """Value of parameter ``name``."""
        try:
            return self.values[name]
        except KeyError:
            raise KeyError(f"{self.model} has no parameter {name!r}; it has {', '.join(self.names)}") from None

    def se(self, name: str) -> float:
        """Standard error of parameter ``name``."""
        self.param(name)
        return self.stderr[name]

    def covariance(self, a: str, b: str) -> float:
        """Covariance between parameters ``a`` and ``b``."""
        self.param(a), self.param(b)
        return float(self.cov[self.names.index(a)][self.names.index(b)])

    @property
    def aicc(self) -> float:
        """AIC with the small-sample correction 2k(k+1)/(n−k−1) (module docstring); what models are ranked by."""
        return float(self.extra.get("aicc", _aicc(self.rss, self.n, len(self.names))))

    @property
    def cov_matrix(self) -> np.ndarray:
        """Covariance as a numpy array in ``names`` order."""
        return np.asarray(self.cov, dtype=float).reshape(len(self.names), len(self.names))

    def correlation(self) -> np.ndarray:
        """Correlation matrix of the parameters (``names`` order)."""
        c = self.cov_matrix
        d = np.sqrt(np.diag(c))
        with np.errstate(invalid="ignore", divide="ignore"):
            return c / np.outer(d, d)

    def confint(self, name: str, level: float = 0.95) -> tuple[float, float]:
        """Student-t interval for parameter ``name`` at ``level`` using the fit's degrees of freedom."""
        v, s = self.param(name), self.se(name)
        h = t_quantile(level, self.dof) * s
        return v - h, v + h

    def report(self, extras: bool = True) -> str:
        """A plain-text table: parameter, value ± SE, then n, dof, residual SD, RSS, AIC, the scalar ``extra``
        values (unless ``extras=False``) and the message."""
        lines = [f"model: {self.model}" + ("" if self.success else "  (NOT TRUSTED)")]
        width = max([len(n) for n in self.names] + [9])
        t = t_quantile(0.95, self.dof)
        for name in self.names:
            lo, hi = self.confint(name)
            lines.append(f"  {name:<{width}}  {_fmt(self.values[name])} ± {_fmt(self.stderr[name])} (SE); "
                         f"95 % CI {_fmt(lo)} to {_fmt(hi)}")
        lines.append(f"  95 % intervals: value ± t·SE with t = {_fmt(t)} (Student t, {self.dof} dof)")
        lines.append(
            f"  n = {self.n}, dof = {self.dof}, residual SD = {_fmt(self.residual_sd)}, "
            f"RSS = {_fmt(self.rss)}, AIC = {_fmt(self.aic)}, AICc = {_fmt(self.aicc)}"
        )
        for key, value in (self.extra.items() if extras else ()):
            if key == "aicc":
                continue
            if isinstance(value, (int, float, str)) and not isinstance(value, bool):
                lines.append(f"  {key}: {_fmt(value) if isinstance(value, float) else value}")
        if self.message:
            lines.append(f"  note: {self.message}")
        return "\n".join(lines)

    def to_dict(self) -> dict[str, Any]:
        """Plain JSON types only (NaN/inf become ``None``); the arrays x, y, residuals are left out."""
        return jsonable(
            {
                "model": self.model,
                "names": list(self.names),
                "values": self.values,
                "stderr": self.stderr,
                "cov": self.cov,
                "n": self.n,
                "dof": self.dof,
                "residual_sd": self.residual_sd,
                "rss": self.rss,
                "aic": self.aic,
                "success": self.success,
                "message": self.message,
                "inputs": self.inputs,
                "extra": self.extra,
            }
        )


def _fmt(v: Any) -> str:
    if isinstance(v, (float, np.floating)):
        if not math.isfinite(v):
            return str(v)
        return f"{v:.6g}"
    return str(v)


def _package(
    model: str,
    names: Sequence[str],
    beta: np.ndarray,
    cov: np.ndarray,
    x: np.ndarray,
    y: np.ndarray,
    resid: np.ndarray,
    rss: float,
    *,
    success: bool = True,
    message: str = "",
    inputs: Mapping[str, Any] | None = None,
    extra: Mapping[str, Any] | None = None,
    curve: Callable[[np.ndarray, np.ndarray], np.ndarray] | None = None,
) -> FitResult:
    n, k = int(y.size), len(names)
    dof = n - k
    s = math.sqrt(rss / dof) if dof > 0 else math.nan
    cov = np.asarray(cov, dtype=float)
    se = np.sqrt(np.clip(cov.diagonal(), 0.0, None)).tolist()
    ex = {"aicc": _aicc(rss, n, k)}
    ex.update(extra or {})
    return FitResult(
        model=model,
        names=tuple(names),
        values={nm: float(v) for nm, v in zip(names, beta)},
        stderr=dict(zip(names, se)),
        cov=cov.tolist(),
        n=n,
        dof=dof,
        residual_sd=s,
        rss=float(rss),
        aic=aic(rss, n, k),
        success=success,
        message=message,
        inputs=dict(jsonable(dict(inputs or {}))),
        extra=ex,
        x=x,
        y=y,
        residuals=resid,
        curve_fn=curve,
    )


def linear_lstsq(
    design: np.ndarray,
    y: np.ndarray,
    names: Sequence[str],
    *,
    model: str,
    weights: np.ndarray | None = None,
    x: np.ndarray | None = None,
    inputs: Mapping[str, Any] | None = None,
    extra: Mapping[str, Any] | None = None,
    curve: Callable[[np.ndarray, np.ndarray], np.ndarray] | None = None,
) -> FitResult:
    """Ordinary or weighted least squares ``y ≈ design @ beta`` (``curve(x, beta)``, optional: the model over ``x``,
    kept on the result for ``FitResult.curve``/``band``).

    The rows are scaled by sqrt(weight), the columns equilibrated to unit norm, and the system solved by a QR
    factorisation; ``cov = s²·(XᵀWX)⁻¹`` with ``s² = Σw·r²/(n−k)`` (scale estimated from the residuals, the
    convention of NIST StRD and of statsmodels ``WLS``). Weights are relative (1/variance up to a constant).

    Raises
    ------
    TooFewPoints : n ≤ k, so no standard errors can be estimated.
    DegenerateData : the design is (numerically) rank deficient, e.g. all x equal.
    """
    X = np.asarray(design, dtype=float)
    yv = np.asarray(y, dtype=float)
    n, k = X.shape
    if n <= k:
        raise TooFewPoints(
            f"{model}: {n} points for {k} parameters; need at least {k + 1} to estimate standard errors — "
            "add more points"
        )
    sw = np.ones(n) if weights is None else np.sqrt(np.asarray(weights, dtype=float))
    Xw = X * sw[:, None]
    yw = yv * sw
    scale = np.linalg.norm(Xw, axis=0)
    if np.any(scale == 0):
        raise DegenerateData(f"{model}: a column of the design is all zeros; the data cannot determine the model")
    Xs = Xw / scale
    Q, R = np.linalg.qr(Xs, mode="reduced")
    diag = np.abs(np.diag(R))
    if diag.min() <= 1e-10 * diag.max():
        raise DegenerateData(
            f"{model}: the points cannot determine all of {', '.join(names)} (e.g. all x equal); "
            "spread the x values out"
        )
    qty = Q.T @ yw
    # numpy's own LAPACK for the tiny k×k solves: alternating numpy's and scipy's BLAS builds in one hot loop
    # made each call wait on the other's threads (measured: ~1 ms a call instead of ~10 µs).
    beta_s = np.linalg.solve(R, qty)
    # Residuals from the original (unscaled) system so the RSS carries no QR round-off beyond the solve itself.
    beta = beta_s / scale
    resid = yv - X @ beta
    rss = float(np.sum((sw * resid) ** 2))
    dof = n - k
    s2 = rss / dof
    Rinv = np.linalg.inv(R)
    cov = s2 * (Rinv @ Rinv.T) / np.outer(scale, scale)
    xv = np.asarray(x, dtype=float) if x is not None else X[:, min(1, k - 1)]
    return _package(model, names, beta, cov, xv, yv, resid, rss, inputs=inputs, extra=extra, curve=curve)


def nonlinear_lstsq(
    func: Callable[..., np.ndarray],
    x: np.ndarray,
    y: np.ndarray,
    p0: Sequence[float],
    names: Sequence[str],
    *,
    model: str,
    jac: Callable[..., np.ndarray] | None = None,
    weights: np.ndarray | None = None,
    inputs: Mapping[str, Any] | None = None,
    extra: Mapping[str, Any] | None = None,
    max_nfev: int | None = None,
    tol: float = 1e-15,
) -> FitResult:
    """Nonlinear least squares ``y ≈ func(x, *p)`` by Levenberg–Marquardt (MINPACK through ``scipy.optimize.leastsq``).

    ``jac(x, *p)`` (optional) returns the n×k derivative matrix. The covariance is ``s²·(JᵀWJ)⁻¹`` from the
    Jacobian at the solution with ``s²`` estimated from the residuals — the NIST StRD convention, equal to
    ``scipy.optimize.curve_fit(absolute_sigma=False)``.

    Raises
    ------
    TooFewPoints : n ≤ k.
    FitFailed : no convergence, non-finite result, or a singular Jacobian (no usable standard errors).
    """
    xv = np.asarray(x, dtype=float)
    yv = np.asarray(y, dtype=float)
    k = len(names)
    n = yv.size
    if n <= k:
        raise TooFewPoints(
            f"{model}: {n} points for {k} parameters; need at least {k + 1} to estimate standard errors — "
            "add more points"
        )
    sw = np.ones(n) if weights is None else np.sqrt(np.asarray(weights, dtype=float))

    def resid_fn(p: np.ndarray) -> np.ndarray:
        return sw * (func(xv, *p) - yv)

    dfun = None
    if jac is not None:
        def dfun(p: np.ndarray) -> np.ndarray:  # noqa: E306 - small closure
            return sw[:, None] * jac(xv, *p)

    p_start = np.asarray(p0, dtype=float)
    if not np.all(np.isfinite(p_start)):
        raise FitFailed(f"{model}: no usable starting values could be found; check that the signal changes")
    # MINPACK's Levenberg–Marquardt (the engine behind curve_fit), with its column scaling of the Jacobian.
    with np.errstate(all="ignore"):
        try:
            beta, _, info, mesg, ier = _opt.leastsq(
                resid_fn, p_start, Dfun=dfun, full_output=True, xtol=tol, ftol=tol,
                maxfev=max_nfev or 200 * (k + 1) * (1 if jac is not None else k + 1),
            )
        except (ValueError, FloatingPointError, TypeError) as exc:
            raise FitFailed(f"{model}: the fit broke down ({exc}); check the data or give other starting values") from None
    if ier not in (1, 2, 3, 4) or not np.all(np.isfinite(beta)) or not np.all(np.isfinite(info["fvec"])):
        raise FitFailed(
            f"{model}: the fit did not converge ({mesg.strip()}); check the data, use a longer run or another model"
        )
    beta = np.atleast_1d(beta)
    if dfun is not None:
        J = dfun(beta)
    else:
        J = _opt.approx_fprime(beta, resid_fn, np.sqrt(np.finfo(float).eps) * np.maximum(np.abs(beta), 1e-8))
    _, svals, VT = np.linalg.svd(J, full_matrices=False)
    threshold = np.finfo(float).eps * max(J.shape) * svals[0] if svals.size else 0.0
    if svals.size < k or svals[-1] <= threshold:
        raise FitFailed(
            f"{model}: the data do not determine all of {', '.join(names)} (singular Jacobian); "
            "use a longer run or a simpler model"
        )
    resid = yv - func(xv, *beta)
    rss = float(np.sum((sw * resid) ** 2))
    s2 = rss / (n - k)
    cov = (VT.T / svals**2) @ VT * s2
    return _package(model, names, beta, cov, xv, yv, resid, rss, inputs=inputs, extra=extra)


def runs_test(residuals: Any) -> dict[str, Any]:
    """Wald–Wolfowitz runs test on the signs of residuals (zeros dropped), normal approximation, no continuity
    correction.

    Too few runs (long stretches of one sign) mean the model misses a systematic trend. Returns a plain dict with
    ``runs``, ``n_positive``, ``n_negative``, ``expected_runs``, ``z`` and the two-sided ``p_value`` (``None`` when
    all residuals share one sign, where the test is undefined).
    """
    r = np.asarray(residuals, dtype=float)
    r = r[np.isfinite(r) & (r != 0)]
    signs = r > 0
    n1 = int(signs.sum())
    n2 = int(signs.size - n1)
    runs = int(1 + np.count_nonzero(signs[1:] != signs[:-1])) if signs.size else 0
    out: dict[str, Any] = {"runs": runs, "n_positive": n1, "n_negative": n2}
    if n1 == 0 or n2 == 0:
        out.update(expected_runs=None, z=None, p_value=None)
        return out
    N = n1 + n2
    mu = 2.0 * n1 * n2 / N + 1.0
    var = 2.0 * n1 * n2 * (2.0 * n1 * n2 - N) / (N * N * (N - 1.0))
    z = (runs - mu) / math.sqrt(var) if var > 0 else 0.0
    out.update(expected_runs=mu, z=z, p_value=math.erfc(abs(z) / math.sqrt(2.0)))  # two-sided normal tail
    return out
