"""The shared fitting machinery against certified data and reference libraries."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from numpy.testing import assert_allclose

from nightcell.errors import DegenerateData, FitFailed, NonFiniteInput, ShapeMismatch, TooFewPoints
from nightcell.science.fitting import FitResult, check_pairs, linear_lstsq, nonlinear_lstsq, runs_test

# NIST Statistical Reference Datasets (StRD), Norris — table copied from shared/REFERENCES.md.
NORRIS_Y = np.array([
    0.1, 338.8, 118.1, 888.0, 9.2, 228.1, 668.5, 998.5, 449.1, 778.9, 559.2, 0.3, 0.1, 778.1, 668.8, 339.3, 448.9, 10.8,
    557.7, 228.3, 998.0, 888.8, 119.6, 0.3, 0.6, 557.6, 339.3, 888.0, 998.5, 778.9, 10.2, 117.6, 228.9, 668.4, 449.2, 0.2,
])
NORRIS_X = np.array([
    0.2, 337.4, 118.2, 884.6, 10.1, 226.5, 666.3, 996.3, 448.6, 777.0, 558.2, 0.4, 0.6, 775.5, 666.9, 338.0, 447.5, 11.6,
    556.0, 228.1, 995.8, 887.6, 120.2, 0.3, 0.3, 556.8, 339.1, 887.2, 999.0, 779.0, 11.1, 118.3, 229.2, 669.1, 448.9, 0.5,
])

# NIST Statistical Reference Datasets (StRD), Misra1a — the NIST file lists y first.
MISRA_Y = np.array([10.07, 14.73, 17.94, 23.93, 29.61, 35.18, 40.02, 44.82, 50.76, 55.05, 61.01, 66.40, 75.47, 81.78])
MISRA_X = np.array([77.6, 114.9, 141.1, 190.8, 239.9, 289.0, 332.8, 378.4, 434.8, 477.3, 536.8, 593.1, 689.1, 760.0])


def _line_design(x: np.ndarray) -> np.ndarray:
    return np.column_stack([np.ones_like(x), x])


def test_norris_certified_values():
    fit = linear_lstsq(_line_design(NORRIS_X), NORRIS_Y, ("B0", "B1"), model="line", x=NORRIS_X)
    # NIST Statistical Reference Datasets (StRD), Norris: certified values, goal ≥ 9 significant digits.
    assert_allclose(fit.param("B0"), -0.262323073774029, rtol=1e-9)
    assert_allclose(fit.param("B1"), 1.00211681802045, rtol=1e-9)
    assert_allclose(fit.se("B0"), 0.232818234301152, rtol=1e-9)
    assert_allclose(fit.se("B1"), 0.429796848199937e-03, rtol=1e-9)
    assert_allclose(fit.residual_sd, 0.884796396144373, rtol=1e-9)
    r_squared = 1.0 - fit.rss / np.sum((NORRIS_Y - NORRIS_Y.mean()) ** 2)
    assert_allclose(r_squared, 0.999993745883712, rtol=1e-9)
    assert fit.n == 36 and fit.dof == 34


def _misra(x, b1, b2):
    return b1 * (1.0 - np.exp(-b2 * x))


def _misra_jac(x, b1, b2):
    e = np.exp(-b2 * x)
    return np.column_stack([1.0 - e, b1 * x * e])


@pytest.mark.parametrize("start", [(500.0, 1e-4), (250.0, 5e-4)])
@pytest.mark.parametrize("with_jac", [True, False])
def test_misra1a_certified_values_from_both_starts(start, with_jac):
    fit = nonlinear_lstsq(
        _misra, MISRA_X, MISRA_Y, start, ("b1", "b2"), model="misra1a", jac=_misra_jac if with_jac else None
    )
    # NIST Statistical Reference Datasets (StRD), Misra1a: parameters to 6 digits, SDs to 4, from both NIST starts.
    assert_allclose(fit.param("b1"), 2.3894212918e02, rtol=1e-6)
    assert_allclose(fit.param("b2"), 5.5015643181e-04, rtol=1e-6)
    assert_allclose(fit.se("b1"), 2.7070075241e00, rtol=1e-4)
    assert_allclose(fit.se("b2"), 7.2668688436e-06, rtol=1e-4)
    assert_allclose(fit.rss, 1.2455138894e-01, rtol=1e-6)
    assert_allclose(fit.residual_sd, 1.0187876330e-01, rtol=1e-6)
    assert fit.dof == 12


def test_linear_matches_statsmodels_ols_and_wls():
    sm = pytest.importorskip("statsmodels.api")
    rng = np.random.default_rng(5)  # synthetic data for a reference-library cross-check
    x = np.linspace(0.0, 10.0, 15)
    y = 0.3 + 0.8 * x + 0.02 * x**2 + rng.normal(0, 0.1, x.size)
    w = 1.0 / (0.05 + 0.01 * x) ** 2
    X = np.column_stack([np.ones_like(x), x, x**2])
    for weights in (None, w):
        ours = linear_lstsq(X, y, ("a", "b", "c"), model="quadratic", weights=weights)
        ref = (sm.OLS(y, X) if weights is None else sm.WLS(y, X, weights=weights)).fit()
        # statsmodels OLS/WLS: params, bse, scale (reference library).
        assert_allclose([ours.param(n) for n in "abc"], ref.params, rtol=1e-10)
        assert_allclose([ours.se(n) for n in "abc"], ref.bse, rtol=1e-9)
        assert_allclose(ours.residual_sd**2, ref.scale, rtol=1e-9)
        assert_allclose(ours.cov_matrix, ref.cov_params(), rtol=1e-8)


def test_runs_test_matches_statsmodels():
    runs_mod = pytest.importorskip("statsmodels.sandbox.stats.runs")
    rng = np.random.default_rng(11)  # synthetic residuals for a reference-library cross-check
    for _ in range(5):
        r = rng.normal(size=40)
        ours = runs_test(r)
        z, p = runs_mod.runstest_1samp(r, cutoff=0.0, correction=False)
        # statsmodels runstest_1samp (no continuity correction): z and p (reference library).
        assert_allclose(ours["z"], z, rtol=1e-10)
        assert_allclose(ours["p_value"], p, rtol=1e-10)


def test_runs_test_detects_a_trend_and_undefined_case():
    trend = np.r_[np.ones(10), -np.ones(10), np.ones(10)]
    out = runs_test(trend)
    assert out["runs"] == 3 and out["p_value"] < 0.01
    assert runs_test(np.ones(5))["p_value"] is None


def test_result_to_dict_is_plain_json_and_report_lists_parameters():
    fit = linear_lstsq(_line_design(NORRIS_X), NORRIS_Y, ("B0", "B1"), model="line", inputs={"source": "Norris"})
    fit.extra["bad"] = float("nan")
    d = fit.to_dict()
    text = json.dumps(d, allow_nan=False)
    assert json.loads(text)["values"]["B1"] == pytest.approx(1.00211681802045, rel=1e-9)
    assert d["extra"]["bad"] is None and d["inputs"] == {"source": "Norris"}
    assert "x" not in d and "residuals" not in d
    rep = fit.report()
    assert "B0" in rep and "±" in rep and "dof = 34" in rep
    lo, hi = fit.confint("B1")
    assert lo < fit.param("B1") < hi
    with pytest.raises(KeyError, match="has no parameter 'slope'"):
        fit.param("slope")
    assert isinstance(fit, FitResult)
    assert math.isclose(fit.aic, 36 * math.log(fit.rss / 36) + 4)


def test_bad_inputs_raise_named_errors():
    with pytest.raises(ShapeMismatch, match="give one y per x"):
        check_pairs([1, 2, 3], [1, 2], "x", "y")
    with pytest.raises(NonFiniteInput, match="remove that point or mask it out"):
        check_pairs([1, 2, 3], [1, np.nan, 2], "x", "y")
    x, y, w, keep = check_pairs([1, 2, 3], [1, np.nan, 2], "x", "y", mask=[False, True, False])
    assert keep.tolist() == [True, False, True]
    with pytest.raises(TooFewPoints, match="need at least 3"):
        linear_lstsq(_line_design(np.array([1.0, 2.0])), np.array([1.0, 2.0]), ("a", "b"), model="line")
    with pytest.raises(DegenerateData, match="spread the x values out"):
        linear_lstsq(_line_design(np.full(5, 2.0)), np.arange(5.0), ("a", "b"), model="line")
    with pytest.raises(FitFailed, match="singular Jacobian"):
        nonlinear_lstsq(lambda x, a, b: a * b * x, np.arange(5.0), np.arange(5.0), (1, 1), ("a", "b"), model="ab")
