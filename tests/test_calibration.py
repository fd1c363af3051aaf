"""Calibration: fit, inverse prediction, LOD/LOQ, linear range, molar absorptivity."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from numpy.testing import assert_allclose

from nightcell.science import optics
from nightcell.science.calibration import CalibrationResult, fit_calibration
from nightcell.errors import (
    DegenerateData,
    InputError,
    NonFiniteInput,
    OutsideCalibration,
    ShapeMismatch,
    TooFewPoints,
)
from nightcell.science.fitting import FitResult

# Inverse prediction worked example (Miller & Miller, ch. 5 [memory for the attribution; the numbers were
# reproduced]) — as given in shared/REFERENCES.md.
MM_X = np.array([0, 2, 4, 6, 8, 10, 12], dtype=float)
MM_Y = np.array([2.1, 5.0, 9.0, 12.6, 17.3, 21.0, 24.7])


def test_worked_example_line_figures():
    cal = fit_calibration(MM_X, MM_Y)
    # Miller & Miller, ch. 5 [memory for the attribution; the numbers were reproduced]
    assert_allclose(cal.slope, 1.93036, atol=5e-6)
    assert_allclose(cal.intercept, 1.51786, atol=5e-6)
    assert_allclose(cal.r, 0.99888, atol=5e-6)
    assert_allclose(cal.s_yx, 0.432848, atol=5e-7)
    assert_allclose(cal.slope_se, 0.040900, atol=5e-7)
    assert_allclose(cal.intercept_se, 0.294936, atol=5e-7)
    assert isinstance(cal, FitResult) and isinstance(cal, CalibrationResult)
    assert cal.dof == 5


def test_worked_example_inverse_prediction():
    cal = fit_calibration(MM_X, MM_Y)
    pred = cal.predict(2.9, m=1)
    # Miller & Miller, ch. 5 [memory for the attribution; the numbers were reproduced]: x0, s_x0, t(0.975, 5), ±0.680
    assert_allclose(pred.value, 0.7160, atol=5e-5)
    assert_allclose(pred.stderr, 0.2646, atol=5e-5)
    assert_allclose((pred.ci_high - pred.ci_low) / 2, 0.680, atol=5e-4)
    assert_allclose((pred.ci_high - pred.ci_low) / 2 / pred.stderr, 2.5706, atol=5e-5)
    assert pred.level == 0.95 and pred.m == 1 and not pred.extrapolated
    # replicate readings: giving the list equals giving the mean and m
    reps = [2.8, 2.9, 3.0]
    assert cal.predict(reps).stderr == pytest.approx(cal.predict(2.9, m=3).stderr)
    assert cal.predict(reps).stderr < pred.stderr


def test_worked_example_lod_loq():
    cal = fit_calibration(MM_X, MM_Y)
    # ICH Q2 LOD = 3.3σ/S, LOQ = 10σ/S with σ = s_y/x of the worked example: 0.740, 2.242 [reproduced]
    assert_allclose(cal.lod, 0.740, atol=5e-4)
    assert_allclose(cal.loq, 2.242, atol=5e-4)
    assert cal.sigma_source == "residual"
    by_intercept = cal.detection_limits("intercept")
    assert by_intercept["sigma_source"] == "intercept"
    assert_allclose(by_intercept["lod"], 3.3 * 0.294936 / 1.93036, rtol=1e-5)
    blank = fit_calibration(MM_X, MM_Y, blank_sd=0.1)
    assert blank.sigma_source == "blank" and blank.lod == pytest.approx(0.33 / blank.slope)


def test_cross_check_with_statsmodels_ols_and_wls_prediction():
    sm = pytest.importorskip("statsmodels.api")
    X = sm.add_constant(MM_X)
    ref = sm.OLS(MM_Y, X).fit()
    cal = fit_calibration(MM_X, MM_Y)
    # statsmodels OLS: params, bse (reference library)
    assert_allclose([cal.intercept, cal.slope], ref.params, rtol=1e-10)
    assert_allclose([cal.intercept_se, cal.slope_se], ref.bse, rtol=1e-10)
    # statsmodels OLS get_prediction: s_x0 = se_obs / b at x0 (reference library)
    pred = cal.predict(2.9)
    frame = ref.get_prediction(np.array([[1.0, pred.value]])).summary_frame()
    se_obs = math.sqrt(frame["mean_se"].iloc[0] ** 2 + ref.scale)
    assert_allclose(pred.stderr, se_obs / cal.slope, rtol=1e-10)

    w = 1.0 / (0.05 + 0.03 * MM_X) ** 2  # synthetic relative weights for the cross-check
    calw = fit_calibration(MM_X, MM_Y, weights=w)
    refw = sm.WLS(MM_Y, X, weights=w).fit()
    # statsmodels WLS: params, bse, prediction with the reading's weight (reference library)
    assert_allclose([calw.intercept, calw.slope], refw.params, rtol=1e-10)
    assert_allclose([calw.intercept_se, calw.slope_se], refw.bse, rtol=1e-9)
    w0 = w[3]
    pw = calw.predict(12.0, reading_weight=w0 / w.mean())
    fw = refw.get_prediction(np.array([[1.0, pw.value]])).summary_frame()
    se_obs_w = math.sqrt(fw["mean_se"].iloc[0] ** 2 + refw.scale / w0)
    assert_allclose(pw.stderr, se_obs_w / calw.slope, rtol=1e-9)


def test_cross_check_with_uncertainties_line_and_quadratic():
    unc = pytest.importorskip("uncertainties")
    from uncertainties import umath

    cal = fit_calibration(MM_X, MM_Y)
    a, b = unc.correlated_values([cal.intercept, cal.slope], cal.cov_matrix)
    y0 = unc.ufloat(2.9, cal.s_yx)
    # uncertainties.correlated_values with y0 as ufloat(y0, s_y/x) reproduces s_x0 (reference library)
    assert_allclose(cal.predict(2.9).stderr, ((y0 - a) / b).std_dev, rtol=1e-10)

    x = np.array([0.0, 0.5, 1.0, 1.5, 2.0, 2.5, 3.0, 3.5])  # synthetic curved calibration
    y = 0.01 + 0.62 * x - 0.045 * x**2 + np.array([3, -2, 1, 4, -3, -1, 2, -2]) * 1e-3
    quad = fit_calibration(x, y, model="quadratic")
    a, b, c = unc.correlated_values([quad.intercept, quad.slope, quad.values["curvature"]], quad.cov_matrix)
    y0 = unc.ufloat(1.2, quad.s_yx / math.sqrt(2))
    x0 = (-b + umath.sqrt(b * b - 4 * c * (a - y0))) / (2 * c)
    pred = quad.predict(1.2, m=2)
    # uncertainties propagation through the quadratic root (reference library)
    assert_allclose(pred.value, x0.nominal_value, rtol=1e-10)
    assert_allclose(pred.stderr, x0.std_dev, rtol=1e-8)
    with pytest.raises(OutsideCalibration, match="dilute the sample"):
        quad.predict(5.0)


def test_delta_method_equals_textbook_formula_for_the_line():
    cal = fit_calibration(MM_X, MM_Y)
    for y0 in (2.9, 13.0, 30.0):
        pred = cal.predict(y0, m=2)
        g = np.array([1.0, pred.value])
        delta = math.sqrt(g @ cal.cov_matrix @ g + cal.s_yx**2 / 2) / cal.slope
        assert_allclose(pred.stderr, delta, rtol=1e-10)
    assert cal.predict(30.0).extrapolated


def test_intercept_test_and_through_origin():
    sm = pytest.importorskip("statsmodels.api")
    cal = fit_calibration(MM_X, MM_Y)
    ref = sm.OLS(MM_Y, sm.add_constant(MM_X)).fit()
    # statsmodels OLS t value and p value of the intercept (reference library)
    assert_allclose(cal.extra["intercept_test"]["t"], ref.tvalues[0], rtol=1e-10)
    assert_allclose(cal.extra["intercept_test"]["p_value"], ref.pvalues[0], rtol=1e-8)
    assert cal.extra["intercept_test"]["differs_from_zero"]
    origin = fit_calibration(MM_X, MM_Y, through_origin=True)
    ref0 = sm.OLS(MM_Y, MM_X[:, None]).fit()
    assert origin.names == ("slope",) and origin.intercept == 0.0
    assert_allclose(origin.slope, ref0.params[0], rtol=1e-10)
    assert_allclose(origin.slope_se, ref0.bse[0], rtol=1e-10)
    x0 = origin.predict(10.0)
    assert_allclose(x0.value, 10.0 / origin.slope, rtol=1e-12)
    assert "intercept_test" not in origin.extra


def test_lack_of_fit_with_replicates_matches_statsmodels_anova():
    sm = pytest.importorskip("statsmodels.api")
    from statsmodels.stats.anova import anova_lm

    # synthetic curved standards, three replicates per level
    levels = np.repeat([0.0, 0.2, 0.4, 0.6, 0.8, 1.0], 3)
    noise = np.tile([0.004, -0.003, -0.001], 6)
    y = 1.2 * levels - 0.25 * levels**2 + noise
    cal = fit_calibration(levels, y)
    lin = cal.extra["linearity"]
    line = sm.OLS(y, sm.add_constant(levels)).fit()
    dummies = (levels[:, None] == np.unique(levels)[None, :]).astype(float)
    full = sm.OLS(y, dummies).fit()
    table = anova_lm(line, full)
    # statsmodels anova_lm of the line against one mean per level = lack-of-fit F test (reference library)
    assert lin["method"] == "lack_of_fit_F"
    assert_allclose(lin["statistic"], table["F"].iloc[1], rtol=1e-9)
    assert_allclose(lin["p_value"], table["Pr(>F)"].iloc[1], rtol=1e-7)
    assert lin["passed"] is False
    assert fit_calibration(levels, y, model="quadratic").extra["linearity"]["passed"] is True


def test_linear_range_without_replicates_uses_the_curvature_term():
    sm = pytest.importorskip("statsmodels.api")
    cal = fit_calibration(MM_X, MM_Y)
    lin = cal.extra["linearity"]
    ref = sm.OLS(MM_Y, np.column_stack([np.ones(7), MM_X, MM_X**2])).fit()
    # statsmodels OLS t test of the added x² term (reference library)
    assert lin["method"] == "curvature_term_t"
    assert_allclose(lin["p_value"], ref.pvalues[2], rtol=1e-8)
    assert "no replicates" in lin["criterion"]
    assert fit_calibration(MM_X[:3], MM_Y[:3]).extra["linearity"]["method"] == "not_assessed"


def test_molar_absorptivity():
    # synthetic standards in mol/L with ε = 8.7e4 L/mol/cm (crystal violet at 590 nm, [memory]) in a 1 cm cell
    c = np.array([0.0, 2e-6, 4e-6, 6e-6, 8e-6, 1e-5])
    a = 8.7e4 * c + np.array([0.002, -0.001, 0.001, -0.002, 0.0, 0.001])
    cal = fit_calibration(c, a)
    eps = cal.molar_absorptivity(1.0)
    assert_allclose(eps.value, 8.7e4, rtol=0.01)
    assert_allclose(eps.stderr, cal.slope_se, rtol=1e-12)
    assert abs(eps.value - 8.7e4) < 4 * eps.stderr
    assert cal.molar_absorptivity(0.5, 0.005).value == pytest.approx(2 * cal.slope)
    with pytest.raises(InputError, match="positive number"):
        cal.molar_absorptivity(0)


def test_result_exports_plain_json_and_a_report():
    cal = fit_calibration(MM_X, MM_Y, inputs={"standards": "worked example"})
    d = cal.to_dict()
    back = json.loads(json.dumps(d, allow_nan=False))
    assert back["extra"]["lod"] == pytest.approx(0.740, abs=5e-4)
    assert back["inputs"] == {"standards": "worked example"}
    json.dumps(cal.predict(2.9).to_dict(), allow_nan=False)
    text = cal.report()
    assert "slope" in text and "LOD" in text and "linear range" in text


def test_bad_input_says_what_to_do():
    with pytest.raises(TooFewPoints, match="measure at least 3 standards"):
        fit_calibration([1, 2], [0.1, 0.2])
    with pytest.raises(DegenerateData, match="prepare standards at more levels"):
        fit_calibration([1, 1, 1, 1], [0.1, 0.2, 0.1, 0.2])
    with pytest.raises(NonFiniteInput, match="remove that point"):
        fit_calibration([1, 2, 3, 4], [0.1, np.nan, 0.3, 0.4])
    with pytest.raises(NonFiniteInput):
        fit_calibration([1, 2, np.inf, 4], [0.1, 0.2, 0.3, 0.4])
    with pytest.raises(ShapeMismatch, match="give one absorbance per concentration"):
        fit_calibration([1, 2, 3], [0.1, 0.2])
    with pytest.raises(InputError, match="'line' or 'quadratic'"):
        fit_calibration(MM_X, MM_Y, model="cubic")
    with pytest.raises(InputError, match="needs blank_sd"):
        fit_calibration(MM_X, MM_Y, sigma_source="blank")
    with pytest.raises(InputError, match="weights must be positive"):
        fit_calibration(MM_X, MM_Y, weights=[1, 1, 1, 0, 1, 1, 1])
    with pytest.raises(TooFewPoints, match="at least 4"):
        fit_calibration([1, 2, 3], [0.1, 0.2, 0.25], model="quadratic")


def test_prediction_interval_coverage_ci_slice():
    """Synthetic Monte Carlo (fixed seed, 200 calibrations): nominal 95 % intervals cover the true concentration.

    Readings go through optics: true absorbance → LED counts with Gaussian noise and 12-bit quantisation → A.
    The band 90–99 % is wide on purpose (binomial SD at 200 runs is 1.5 %); the long campaign is in tests/bench.
    """
    rng = np.random.default_rng(20240501)
    conc = np.repeat(np.array([0.0, 0.1, 0.2, 0.3, 0.4, 0.5]), 2)
    eps_l, c_true, blank_light, dark, noise = 2.0, 0.27, 3000.0, 80.0, 4.0
    covered = 0
    runs = 200
    for _ in range(runs):
        def read(a):
            light = dark + (blank_light - dark) * 10.0 ** (-np.asarray(a))
            return optics.absorbance(
                np.round(light + rng.normal(0, noise, np.shape(light))), np.full(np.shape(light), dark),
                blank_light, dark,
            ).absorbance
        cal = fit_calibration(conc, read(eps_l * conc))
        pred = cal.predict(read(np.full(3, eps_l * c_true)))
        covered += pred.ci_low <= c_true <= pred.ci_high
    assert 0.90 <= covered / runs <= 0.99


def test_curve_and_bands_at_any_level_agree_with_statsmodels():
    sm = pytest.importorskip("statsmodels.api")
    grid = np.linspace(0.0, max(MM_X) * 1.1, 7)
    for quadratic in (False, True):
        cal = fit_calibration(MM_X, MM_Y, model="quadratic" if quadratic else "line")
        powers = (0, 1, 2) if quadratic else (0, 1)
        ref = sm.OLS(MM_Y, np.column_stack([np.asarray(MM_X, float) ** p for p in powers])).fit()
        new = np.column_stack([grid**p for p in powers])
        for level in (0.80, 0.95, 0.99):
            # statsmodels OLS get_prediction: fitted mean, mean_ci (confidence) and obs_ci (prediction) at alpha =
            # 1 - level (reference library)
            frame = ref.get_prediction(new).summary_frame(alpha=1.0 - level)
            assert_allclose(cal.curve(grid), frame["mean"], rtol=1e-9, atol=1e-12)
            low, high = cal.band(grid, level)
            assert_allclose(low, frame["mean_ci_lower"], rtol=1e-7, atol=1e-10)
            assert_allclose(high, frame["mean_ci_upper"], rtol=1e-7, atol=1e-10)
            low, high = cal.band(grid, level, kind="prediction")
            assert_allclose(low, frame["obs_ci_lower"], rtol=1e-7, atol=1e-10)
            assert_allclose(high, frame["obs_ci_upper"], rtol=1e-7, atol=1e-10)
    with pytest.raises(InputError, match="between 0 and 1"):
        cal.band(grid, 1.5)
