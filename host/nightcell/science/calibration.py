"""Calibration curves: absorbance of standards against concentration, and concentration back from a reading.

Owns: straight-line and quadratic calibration by ordinary or weighted least squares (optionally through the
origin), the intercept-versus-zero test, the linear-range check, molar absorptivity from the slope and path length,
LOD/LOQ (ICH Q2: 3.3σ/S and 10σ/S with the source of σ recorded) and inverse prediction of a concentration with its
standard error and Student-t interval.

Must never: open a serial port or a database, print, or read files. It takes arrays and returns results; bad input
raises a named error from ``nightcell.errors`` whose message says what to do.

Inverse prediction. For the unweighted straight line with intercept, the textbook formula
``s_x0 = (s_y/x / b)·sqrt(1/m + 1/n + (ȳ0 − ȳ)² / (b²·Σ(xi − x̄)²))``. For every other case (weights, through the
origin, quadratic) the delta method: ``var(x0) = (gᵀ·C·g + s²/(m·w0)) / f'(x0)²`` with g = ∂f/∂θ at x0, C the
parameter covariance and w0 the reading's relative weight; for the unweighted line both give the same number.
Intervals use Student t with the calibration's n − p degrees of freedom.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Mapping

import numpy as np

from ..errors import DegenerateData, InputError, OutsideCalibration, SuspectData, TooFewPoints
from .fitting import FitResult, check_pairs, jsonable, linear_lstsq, t_quantile
from .fitting import _stats  # scipy.stats, imported when first used

__all__ = ["CalibrationResult", "Estimate", "Prediction", "fit_calibration", "molar_factor", "LOD_RULE"]

LOD_RULE = "LOD = 3.3σ/S, LOQ = 10σ/S (ICH Q2; S the slope)"

_MOLAR = {"M": 1.0, "mol/L": 1.0, "mol/l": 1.0, "mM": 1e-3, "mmol/L": 1e-3, "mmol/l": 1e-3, "µM": 1e-6, "μM": 1e-6,
          "uM": 1e-6, "µmol/L": 1e-6, "μmol/L": 1e-6, "umol/L": 1e-6, "nM": 1e-9, "nmol/L": 1e-9}


def molar_factor(unit: str) -> float | None:
    """mol/L per unit of concentration (1e-6 for µM), or None when the unit is not an amount per litre."""
    return _MOLAR.get((unit or "").strip())

_MODELS = ("line", "quadratic")
_SIGMA_SOURCES = ("residual", "intercept", "blank")
_LINEARITY_ALPHA = 0.05


@dataclass
class Prediction:
    """A concentration read back from the calibration.

    Attributes
    ----------
    value, stderr : the concentration and its standard error (calibration + reading scatter).
    ci_low, ci_high, level : Student-t interval at ``level`` with ``dof`` degrees of freedom.
    m : number of replicate readings averaged into ``reading``.
    reading : the (mean) absorbance used.
    extrapolated : True if ``value`` lies outside the range of the standards.
    """

    value: float
    stderr: float
    ci_low: float
    ci_high: float
    level: float
    m: int
    dof: int = 0
    reading: float = math.nan
    extrapolated: bool = False

    def to_dict(self) -> dict[str, Any]:
        """Plain JSON types only."""
        return jsonable(self.__dict__)


@dataclass
class Estimate:
    """A derived quantity with its standard error and unit."""

    value: float
    stderr: float
    unit: str = ""

    def to_dict(self) -> dict[str, Any]:
        """Plain JSON types only."""
        return jsonable(self.__dict__)


@dataclass
class CalibrationResult(FitResult):
    """A fitted calibration (a :class:`FitResult`) with the calibration's own figures.

    Parameter names: ``intercept`` (absent through the origin), ``slope``, ``curvature`` (quadratic only).
    ``extra`` holds ``r``, ``intercept_test``, ``linearity``, ``lod``, ``loq``, ``sigma_source`` and ``level``.
    """

    through_origin: bool = False
    unit: str = ""
    level: float = 0.95
    blank_sd: float | None = None
    weights: np.ndarray | None = field(default=None, repr=False)

    # -- the calibration's figures -------------------------------------------------------------------------------
    @property
    def slope(self) -> float:
        """Sensitivity S: the slope (at zero concentration for the quadratic)."""
        return self.values["slope"]

    @property
    def slope_se(self) -> float:
        """Standard error of the slope."""
        return self.stderr["slope"]

    @property
    def intercept(self) -> float:
        """Intercept (0 when fitted through the origin)."""
        return self.values.get("intercept", 0.0)

    @property
    def intercept_se(self) -> float:
        """Standard error of the intercept (0 when fitted through the origin)."""
        return self.stderr.get("intercept", 0.0)

    @property
    def s_yx(self) -> float:
        """Residual standard deviation s_y/x."""
        return self.residual_sd

    @property
    def r(self) -> float:
        """Pearson correlation coefficient of concentration and absorbance."""
        return self.extra["r"]

    @property
    def lod(self) -> float:
        """Limit of detection 3.3σ/S (σ from ``sigma_source``)."""
        return self.extra["lod"]

    @property
    def loq(self) -> float:
        """Limit of quantitation 10σ/S (σ from ``sigma_source``)."""
        return self.extra["loq"]

    @property
    def sigma_source(self) -> str:
        """Where the σ of LOD/LOQ came from: ``residual``, ``intercept`` or ``blank``."""
        return self.extra["sigma_source"]

    def detection_limits(self, sigma_source: str | None = None) -> dict[str, Any]:
        """LOD = 3.3σ/S and LOQ = 10σ/S (ICH Q2) with σ from ``sigma_source`` (default: the one chosen at fit)."""
        source = sigma_source or self.extra["sigma_source"]
        if source not in _SIGMA_SOURCES:
            raise InputError(f"sigma_source must be one of {', '.join(_SIGMA_SOURCES)}, not {source!r}")
        if source == "residual":
            sigma = self.residual_sd
        elif source == "intercept":
            if self.through_origin:
                raise InputError("a calibration through the origin has no intercept SD; use sigma_source='residual'")
            sigma = self.intercept_se
        else:
            if self.blank_sd is None:
                raise InputError("sigma_source='blank' needs blank_sd (the SD of repeated blank readings)")
            sigma = self.blank_sd
        s = abs(self.slope)
        return {"sigma": sigma, "sigma_source": source, "lod": 3.3 * sigma / s, "loq": 10.0 * sigma / s}

    def molar_absorptivity(self, path_cm: float, path_cm_se: float = 0.0) -> Estimate:
        """ε = S / (path · mol/L per unit) with its SE, in L mol⁻¹ cm⁻¹. Concentrations in mol/L when the
        calibration has no unit; ``InputError`` when its unit does not convert to mol/L (mg/L needs a molar mass)."""
        if not (path_cm > 0 and math.isfinite(path_cm)):
            raise InputError(f"path length {path_cm!r} cm must be a positive number (1 for a standard cuvette)")
        factor = molar_factor(self.unit) if self.unit else 1.0
        if factor is None:
            raise InputError(f"the standards are in {self.unit}, which does not convert to mol/L: no molar "
                             "absorptivity (give standards in M, mM, µM or nM)")
        eps = self.slope / path_cm / factor
        rel = math.hypot(self.slope_se / self.slope, path_cm_se / path_cm)
        unit_note = "concentration in mol/L" if not self.unit else f"standards in {self.unit}"
        return Estimate(eps, abs(eps) * rel, f"L mol^-1 cm^-1 ({unit_note})")

    # -- inverse prediction --------------------------------------------------------------------------------------
    def _f(self, x: float) -> float:
        v = self.values
        return v.get("intercept", 0.0) + v["slope"] * x + v.get("curvature", 0.0) * x * x

    def _dfdx(self, x: float) -> float:
        return self.values["slope"] + 2.0 * self.values.get("curvature", 0.0) * x

    def _grad_theta(self, x: float) -> np.ndarray:
        g = {"intercept": 1.0, "slope": x, "curvature": x * x}
        return np.array([g[n] for n in self.names])

    def _solve(self, y0: float) -> float:
        if self.model == "line":
            return (y0 - self.intercept) / self.slope
        c, b, a = self.values["curvature"], self.slope, self.intercept - y0
        roots = np.roots([c, b, a])
        roots = roots[np.abs(roots.imag) <= 1e-12 * (1 + np.abs(roots.real))].real
        if roots.size == 0:
            raise OutsideCalibration(
                f"absorbance {y0:g} is beyond the top of the quadratic calibration; dilute the sample and re-read"
            )
        lo, hi = float(self.x.min()), float(self.x.max())
        # the root nearest the calibrated range is the physical one
        dist = np.maximum(lo - roots, 0) + np.maximum(roots - hi, 0)
        return float(roots[np.argmin(dist)])

    def predict(
        self,
        readings: Any,
        m: int | None = None,
        *,
        level: float | None = None,
        reading_weight: float | None = None,
    ) -> Prediction:
        """Concentration of an unknown from its absorbance.

        Parameters
        ----------
        readings : one mean absorbance (then ``m`` says how many readings it averages, default 1) or the list of
            replicate readings (then ``m`` is their number).
        level : interval level (default: the calibration's, 0.95).
        reading_weight : the reading's relative weight in a weighted calibration (weights are normalised to mean 1);
            default: the weight of the standard whose absorbance is nearest.
        """
        arr = np.atleast_1d(np.asarray(readings, dtype=float))
        if arr.ndim != 1 or arr.size == 0:
            raise InputError("readings must be one absorbance or a flat list of replicate absorbances")
        if not np.all(np.isfinite(arr)):
            raise InputError("a reading is NaN or infinite; drop flagged readings before predicting")
        if arr.size > 1:
            if m is not None and m != arr.size:
                raise InputError(f"m={m} but {arr.size} readings were given; give either the readings or mean and m")
            m = arr.size
        m = 1 if m is None else int(m)
        if m < 1:
            raise InputError(f"m={m}: the number of replicate readings must be at least 1")
        level = self.level if level is None else level
        y0 = float(arr.mean())
        x0 = self._solve(y0)
        slope_at = self._dfdx(x0)
        if slope_at == 0:
            raise OutsideCalibration("the calibration is flat at this reading; no concentration can be read from it")
        s = self.residual_sd
        if self.weights is None:
            w0 = 1.0
        elif reading_weight is not None:
            w0 = float(reading_weight)
        else:
            w0 = float(self.weights[np.argmin(np.abs(self.y - y0))])
        if self.model == "line" and not self.through_origin and self.weights is None:
            xbar, ybar = self.x.mean(), self.y.mean()
            sxx = float(np.sum((self.x - xbar) ** 2))
            b = self.slope
            se = abs(s / b) * math.sqrt(1.0 / m + 1.0 / self.n + (y0 - ybar) ** 2 / (b * b * sxx))
        else:
            g = self._grad_theta(x0)
            var_fit = float(g @ self.cov_matrix @ g)
            se = math.sqrt(var_fit + s * s / (m * w0)) / abs(slope_at)
        h = t_quantile(level, self.dof) * se
        lo, hi = float(self.x.min()), float(self.x.max())
        return Prediction(
            value=x0, stderr=se, ci_low=x0 - h, ci_high=x0 + h, level=level, m=m, dof=self.dof, reading=y0,
            extrapolated=bool(x0 < lo or x0 > hi),
        )

    def report(self, extras: bool = False) -> str:
        """The fit table followed by the calibration's figures."""
        lines = [super().report(extras=extras)]
        ex = self.extra
        lines.append(f"  r = {ex['r']:.6f}, s_y/x = {self.residual_sd:.6g}")
        it = ex.get("intercept_test")
        if it:
            verdict = "differs from zero" if it["differs_from_zero"] else "does not differ from zero"
            lines.append(f"  intercept {verdict}: t = {it['t']:.3f}, p = {it['p_value']:.3g}")
        lin = ex["linearity"]
        lines.append(f"  linear range: {lin['criterion']}: {lin['verdict']}")
        u = f" {self.unit}" if self.unit else ""
        sigma = {"residual": "the residual SD s_y/x", "intercept": "the intercept's SE",
                 "blank": "the SD of repeated blank readings"}[ex["sigma_source"]]
        lines.append(f"  LOD = {ex['lod']:.4g}{u}, LOQ = {ex['loq']:.4g}{u} — convention: {LOD_RULE}, σ = {sigma} = "
                     f"{ex['lod_sigma']:.3g} A")
        if self.unit:
            lines.append(f"  concentrations in {self.unit}; slope in A per {self.unit}")
        return "\n".join(lines)


def _design(x: np.ndarray, degree: int, through_origin: bool) -> tuple[np.ndarray, tuple[str, ...]]:
    cols, names = [], []
    if not through_origin:
        cols.append(np.ones_like(x))
        names.append("intercept")
    labels = ("slope", "curvature", "cubic")
    for d in range(1, degree + 1):
        cols.append(x**d)
        names.append(labels[d - 1])
    return np.column_stack(cols), tuple(names)


def _linearity(
    x: np.ndarray, y: np.ndarray, w: np.ndarray | None, rss: float, k: int, degree: int, through_origin: bool
) -> dict[str, Any]:
    """Lack-of-fit F test when replicates exist; else the t test of the next polynomial term. Alpha 0.05."""
    n = x.size
    levels, inverse = np.unique(x, return_inverse=True)
    g = levels.size
    ww = np.ones(n) if w is None else w
    if g < n and g > k:
        sum_w = np.bincount(inverse, weights=ww)
        means = np.bincount(inverse, weights=ww * y) / sum_w
        sspe = float(np.sum(ww * (y - means[inverse]) ** 2))
        df_pe, df_lf = n - g, g - k
        sslf = max(rss - sspe, 0.0)
        if sspe > 0:
            f = (sslf / df_lf) / (sspe / df_pe)
            p = float(_stats.f.sf(f, df_lf, df_pe))
        else:
            f, p = (math.inf, 0.0) if sslf > 0 else (0.0, 1.0)
        passed = p > _LINEARITY_ALPHA
        return {
            "method": "lack_of_fit_F",
            "criterion": (f"does the {'line' if degree == 1 else 'quadratic'} miss the mean of each concentration "
                          "level by more than the replicates scatter? (lack-of-fit F test, "
                          f"{'line' if degree == 1 else 'quadratic'} kept if p > {_LINEARITY_ALPHA})"),
            "statistic": f, "df": [df_lf, df_pe], "p_value": p, "passed": passed,
            "verdict": f"{'no ' if passed else ''}lack of fit (F = {f:.3g}, p = {p:.3g})",
        }
    name = "curvature" if degree == 1 else "cubic"
    if g >= k + 2 and n >= k + 2:
        X, names = _design(x, degree + 1, through_origin)
        fit = linear_lstsq(X, y, names, model="linearity check", weights=w)
        t = fit.param(name) / fit.se(name) if fit.se(name) > 0 else math.inf
        p = float(2.0 * _stats.t.sf(abs(t), fit.dof))
        passed = p > _LINEARITY_ALPHA
        return {
            "method": f"{name}_term_t",
            "criterion": (f"does the {'line' if degree == 1 else 'quadratic'} need an added {name} term over the "
                          f"standards' range? (no replicates: t test of that term, "
                          f"{'line' if degree == 1 else 'quadratic'} kept if p > {_LINEARITY_ALPHA})"),
            "statistic": t, "df": [fit.dof], "p_value": p, "passed": passed,
            "verdict": f"added {name} term {'not ' if passed else ''}significant (t = {t:.3g}, p = {p:.3g})",
        }
    return {
        "method": "not_assessed",
        "criterion": (f"too few concentration levels to test whether the {'line' if degree == 1 else 'quadratic'} "
                      "holds; add standards"),
        "statistic": None, "df": None, "p_value": None, "passed": None, "verdict": "not assessed",
    }


def _does_not_rise(x: np.ndarray, y: np.ndarray, w: np.ndarray | None) -> str:
    """Why the standards do not rise with concentration, or ``""``: every absorbance equal, or a straight line's
    slope not above zero by a one-sided 95 % t test (common practice: a calibration must show a response)."""
    if np.ptp(y) == 0:
        return f"the standards all read the same absorbance ({y[0]:.4g}), whatever their concentration"
    line = linear_lstsq(np.column_stack([np.ones_like(x), x]), y, ("intercept", "slope"), model="rise check",
                        weights=w)
    b, se = line.param("slope"), line.se("slope")
    t_crit = float(_stats.t.ppf(0.95, line.dof)) if line.dof > 0 else math.inf
    if b > 0 and (se == 0 or b / se > t_crit):
        return ""
    r = float(np.corrcoef(x, y)[0, 1])
    return (f"the standards do not rise with concentration: slope {b:.3g} ± {se:.2g} A per unit "
            f"(t = {b / se if se > 0 else math.inf:.3g}, needs > {t_crit:.3g} for one-sided 95 %), r = {r:.3g}")


def fit_calibration(
    concentration: Any,
    absorbance: Any,
    *,
    weights: Any = None,
    through_origin: bool = False,
    model: str = "line",
    inputs: Mapping[str, Any] | None = None,
    level: float = 0.95,
    sigma_source: str | None = None,
    blank_sd: float | None = None,
    unit: str = "",
    accept_suspect: bool = False,
) -> CalibrationResult:
    """Fit absorbance of standards against their concentration.

    Parameters
    ----------
    concentration, absorbance : one pair per standard reading; repeated concentrations are replicates.
    weights : relative weights (1/variance up to a constant), normalised internally to mean 1.
    through_origin : fit without intercept.
    model : ``"line"`` or ``"quadratic"``.
    inputs : plain-JSON record of where the standards came from (run ids, blank id...).
    level : level for intervals and the intercept test (0.95).
    sigma_source : σ for LOD/LOQ: ``"residual"`` (default), ``"intercept"`` or ``"blank"`` (default when
        ``blank_sd`` is given).
    blank_sd : standard deviation of repeated blank readings (absorbance).
    unit : the concentration unit of the standards (e.g. ``"µM"``), printed with results.
    accept_suspect : keep a calibration whose standards do not rise with concentration (``extra["suspect"]``
        says why); otherwise that raises ``SuspectData``.

    Raises
    ------
    ShapeMismatch, NonFiniteInput, InputError : arrays do not pair up, NaN/inf, bad options.
    TooFewPoints : fewer standards than the model needs (n ≤ number of parameters).
    DegenerateData : too few distinct concentrations (e.g. all equal).
    SuspectData : the absorbance does not rise with concentration (a straight line's slope not above zero at
        one-sided 95 %, or every absorbance equal), unless ``accept_suspect``.
    InputError : a negative concentration.
    """
    if model not in _MODELS:
        raise InputError(f"model must be 'line' or 'quadratic', not {model!r}")
    x, y, w, _ = check_pairs(concentration, absorbance, "concentration", "absorbance", weights=weights)
    if np.any(x < 0):
        i = int(np.flatnonzero(x < 0)[0])
        raise InputError(f"standard {i + 1} has a negative concentration ({x[i]:g}); a standard holds zero or more "
                         "of the analyte — fix its value")
    degree = 1 if model == "line" else 2
    k = degree + (0 if through_origin else 1)
    if x.size <= k:
        raise TooFewPoints(
            f"{x.size} standards for a {model}{' through the origin' if through_origin else ''} with {k} parameters; "
            f"measure at least {k + 1} standards"
        )
    distinct = np.unique(x).size
    need = degree + (0 if through_origin else 1)
    if distinct < need or (through_origin and not np.any(x != 0)):
        raise DegenerateData(
            f"the standards cover {distinct} distinct concentration(s); a {model} needs at least {need} different "
            "concentrations — prepare standards at more levels"
        )
    if sigma_source is None:
        sigma_source = "blank" if blank_sd is not None else "residual"
    if sigma_source not in _SIGMA_SOURCES:
        raise InputError(f"sigma_source must be one of {', '.join(_SIGMA_SOURCES)}, not {sigma_source!r}")
    if blank_sd is not None and not (blank_sd > 0 and math.isfinite(blank_sd)):
        raise InputError(f"blank_sd {blank_sd!r} must be a positive number (SD of repeated blank absorbances)")
    if w is not None:
        w = w / w.mean()
    suspect = _does_not_rise(x, y, w)
    if suspect and not accept_suspect:
        raise SuspectData(suspect + " — check the standards' values, their order and the blank, or pass "
                          "--accept-suspect to keep this calibration anyway")
    X, names = _design(x, degree, through_origin)
    base = linear_lstsq(X, y, names, model=model, weights=w, x=x, inputs=inputs,
                        curve=lambda c, beta: _design(c, degree, through_origin)[0] @ beta)
    extra: dict[str, Any] = dict(base.extra)
    extra["r"] = float(np.corrcoef(x, y)[0, 1]) if np.ptp(y) > 0 else 0.0
    extra["level"] = level
    if not through_origin:
        t = base.param("intercept") / base.se("intercept") if base.se("intercept") > 0 else math.inf
        p = float(2.0 * _stats.t.sf(abs(t), base.dof))
        extra["intercept_test"] = {"t": t, "p_value": p, "differs_from_zero": bool(p < 1.0 - level)}
    extra["linearity"] = _linearity(x, y, w, base.rss, k, degree, through_origin)
    extra["weighted"] = w is not None
    extra["unit"] = unit
    extra["lod_rule"] = LOD_RULE
    if suspect:
        extra["suspect"] = suspect + " (kept with --accept-suspect)"
    result = CalibrationResult(
        **{f: getattr(base, f) for f in FitResult.__dataclass_fields__ if f != "extra"},
        extra=extra, through_origin=through_origin, unit=unit, level=level, blank_sd=blank_sd, weights=w,
    )
    if sigma_source == "intercept" and through_origin:
        raise InputError("a calibration through the origin has no intercept SD; use sigma_source='residual'")
    if sigma_source == "blank" and blank_sd is None:
        raise InputError("sigma_source='blank' needs blank_sd (the SD of repeated blank readings)")
    extra["sigma_source"] = sigma_source
    limits = result.detection_limits(sigma_source)
    extra.update(lod=limits["lod"], loq=limits["loq"], lod_sigma=limits["sigma"])
    return result
