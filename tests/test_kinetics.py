"""Single-run rate laws: reference-library cross-checks, synthetic runs with known constants, bad input."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.optimize import curve_fit

from nightcell.science import kinetics, optics
from nightcell.errors import FitFailed, InputError, NonFiniteInput, TimeOrderError, TooFewPoints

T = np.arange(0.0, 900.0, 10.0)


def _synthetic_plateau(seed, a0=0.95, a_inf=0.12, k=0.006, sd=0.004, t=T):
    """Synthetic run (invented numbers, fixed seed): first-order approach towards a final absorbance plus Gaussian noise."""
    rng = np.random.default_rng(seed)
    return a_inf + (a0 - a_inf) * np.exp(-k * t) + rng.normal(0.0, sd, t.size)


def test_plateau_matches_scipy_curve_fit():
    a = _synthetic_plateau(1)
    fit = kinetics.fit_model(T, a, model="first_order_to_final")

    def f(t, a0, a_inf, k):
        return a_inf + (a0 - a_inf) * np.exp(-k * t)

    popt, pcov = curve_fit(f, T, a, p0=(1.0, 0.1, 0.005))
    # scipy.optimize.curve_fit (absolute_sigma=False): parameters and standard errors (reference library)
    assert_allclose([fit.param(n) for n in ("A0", "A_inf", "k")], popt, rtol=1e-6)
    assert_allclose([fit.se(n) for n in ("A0", "A_inf", "k")], np.sqrt(np.diag(pcov)), rtol=1e-4)
    assert_allclose(fit.cov_matrix, pcov, rtol=1e-4, atol=1e-14)


@pytest.mark.parametrize("direction", ["fading", "growth"])
def test_plateau_recovers_known_k_synthetic(direction):
    # Synthetic runs with known k (fixed seeds): the true value lies within 3 SE.
    a0, a_inf = (0.95, 0.12) if direction == "fading" else (0.05, 0.80)
    for seed in range(5):
        a = _synthetic_plateau(seed, a0=a0, a_inf=a_inf)
        fit = kinetics.fit_model(T, a, model="first_order_to_final", inputs={"run": f"synthetic-{seed}"})
        assert abs(fit.param("k") - 0.006) < 3 * fit.se("k")
        assert abs(fit.param("A_inf") - a_inf) < 3 * fit.se("A_inf")
        hl, hl_se = kinetics.half_life(fit)
        assert_allclose(hl, math.log(2) / fit.param("k"), rtol=1e-12)
        assert_allclose(hl_se, math.log(2) * fit.se("k") / fit.param("k") ** 2, rtol=1e-12)
        assert fit.inputs["run"] == f"synthetic-{seed}"


def test_integrated_laws_recover_known_constants_synthetic():
    rng = np.random.default_rng(7)  # synthetic runs, fixed seed
    noise = rng.normal(0.0, 0.003, T.size)
    first = kinetics.fit_model(T, 0.9 * np.exp(-0.004 * T) + noise, model="first_order_to_zero")
    assert abs(first.param("k") - 0.004) < 3 * first.se("k")
    second = kinetics.fit_model(T, 0.9 / (1 + 0.02 * 0.9 * T) + noise, model="second_order")
    assert abs(second.param("k") - 0.02) < 3 * second.se("k")
    # second-order half-life 1/(k·[A]0)
    assert_allclose(second.extra["half_life_s"], 1 / (second.param("k") * second.param("A0")), rtol=1e-12)
    zero = kinetics.fit_model(T, 0.9 - 5e-4 * T + noise, model="zero_order")
    assert abs(zero.param("rate") + 5e-4) < 3 * zero.se("rate")
    # growth towards a known end value with the fixed-offset first-order law
    growth = kinetics.fit_model(T, 0.7 - 0.6 * np.exp(-0.004 * T) + noise, model="first_order_to_zero", a_end=0.7)
    assert abs(growth.param("k") - 0.004) < 3 * growth.se("k")


def test_fit_all_ranks_the_true_model_first_synthetic():
    rng = np.random.default_rng(8)  # synthetic runs, fixed seed
    noise = rng.normal(0.0, 0.003, T.size)
    plateau = kinetics.fit_all(T, 0.15 + 0.8 * np.exp(-0.005 * T) + noise)
    assert plateau.ranking[0] == "first_order_to_final"
    assert plateau.best.extra["runs_test"]["p_value"] > 0.01
    assert plateau.results["zero_order"].extra["runs_test"]["p_value"] < 1e-6  # a line misses the curve
    assert sum(plateau.akaike_weight.values()) == pytest.approx(1.0)
    second = kinetics.fit_all(T, 0.9 / (1 + 0.02 * 0.9 * T) + noise)
    assert second.ranking.index("second_order") < second.ranking.index("first_order_to_zero")
    d = json.loads(json.dumps(plateau.to_dict(), allow_nan=False))
    assert d["ranking"][0] == "first_order_to_final"
    assert "ΔAIC" in plateau.report()


def test_dead_time_and_flagged_points_synthetic():
    a = _synthetic_plateau(3)
    a_dirty = a.copy()
    a_dirty[:4] = [0.2, 1.4, 0.6, 1.1]  # mixing and placing the cuvette (synthetic)
    clean = kinetics.fit_model(T, a_dirty, t_start=40.0)
    assert abs(clean.param("k") - 0.006) < 3 * clean.se("k")
    assert clean.extra["time_origin_s"] == 40.0 and clean.n == T.size - 4
    # points flagged by optics (saturated / non-positive) are left out through the mask
    light = 120 + 3480 * 10 ** (-a)
    light[[10, 30]] = [4095.0, 100.0]
    res = optics.absorbance(light, np.full(T.size, 120.0), 3600.0, 120.0)
    masked = kinetics.fit_model(T, res.absorbance, mask=res.mask)
    assert masked.n == T.size - 2
    assert abs(masked.param("k") - 0.006) < 3 * masked.se("k")


def test_initial_rate_window_given_and_automatic_synthetic():
    rng = np.random.default_rng(9)  # synthetic run, fixed seed
    a = 0.1 + 0.8 * (1 - np.exp(-0.0005 * T)) + rng.normal(0.0, 0.002, T.size)
    true_rate = 0.8 * 0.0005
    given = kinetics.initial_rate(T, a, window=(0, 200))
    assert given.extra["window_s"] == [0.0, 200.0] and given.n == 21
    auto = kinetics.initial_rate(T, a)
    assert "automatic" in auto.message and auto.extra["window_points"] >= 6
    assert abs(auto.param("rate") - true_rate) < 3 * auto.se("rate") + 0.05 * true_rate
    # a straight run uses every point
    straight = kinetics.initial_rate(T, 0.1 + 4e-4 * T + rng.normal(0, 0.002, T.size))
    assert straight.extra["window_points"] >= T.size // 2
    assert abs(straight.param("rate") - 4e-4) < 3 * straight.se("rate")


def test_bad_input_says_what_to_do():
    a = _synthetic_plateau(4)
    with pytest.raises(TimeOrderError, match="sort the readings by time"):
        kinetics.fit_model(T[::-1], a)
    with pytest.raises(TimeOrderError, match="repeats at point 2"):
        kinetics.fit_model(np.r_[0.0, 1.0, 1.0, 2.0, 3.0, 4.0], np.arange(6.0))
    bad = a.copy()
    bad[5] = np.nan
    with pytest.raises(NonFiniteInput, match="mask it out"):
        kinetics.fit_model(T, bad)
    with pytest.raises(TooFewPoints, match="need at least 5"):
        kinetics.fit_model(T[:4], a[:4])
    with pytest.raises(FitFailed, match="does not change"):
        kinetics.fit_model(T, np.full(T.size, 0.5))
    with pytest.raises(InputError, match="choose one of"):
        kinetics.fit_model(T, a, model="third_order")
    with pytest.raises(InputError, match="has no half-life"):
        kinetics.half_life(kinetics.initial_rate(T, a))


def test_rate_constant_interval_coverage_ci_slice():
    """Synthetic Monte Carlo (fixed seed, 200 runs): nominal 95 % t intervals for k of first_order_to_final.

    Counts with Gaussian noise and 12-bit quantisation go through optics. The band 90–99 % is wide on purpose;
    the long campaign is tests/bench/bench_coverage.py.
    """
    rng = np.random.default_rng(77)
    t = np.arange(0.0, 600.0, 10.0)
    k_true, covered, runs = 0.008, 0, 200
    true_a = 0.1 + 0.7 * np.exp(-k_true * t)
    for _ in range(runs):
        light = np.round(100 + 3400 * 10 ** (-true_a) + rng.normal(0, 3.0, t.size))
        res = optics.absorbance(light, np.full(t.size, 100.0), 3500.0, 100.0)
        # count noise is constant, so A is noisier at low light: weight by T² (optics' weights)
        fit = kinetics.fit_model(t, res.absorbance, model="first_order_to_final", weights=res.weights)
        lo, hi = fit.confint("k")
        covered += lo <= k_true <= hi
    assert 0.90 <= covered / runs <= 0.99


@pytest.mark.parametrize("model", kinetics.MODELS)
def test_every_rate_law_evaluates_its_curve_and_band_like_uncertainties(model):
    unc = pytest.importorskip("uncertainties")
    from uncertainties import unumpy
    from scipy import stats

    fit = kinetics.fit_model(T, _synthetic_plateau(4), model)
    # the curve at the fitted points is the data minus the residuals
    assert_allclose(fit.curve(fit.x), fit.y - fit.residuals, rtol=1e-9, atol=1e-12)
    # delta-method band: uncertainties propagates the correlated parameters through the same law (reference
    # library), times Student t at the fit's dof (scipy)
    p = unc.correlated_values([fit.values[n] for n in fit.names], fit.cov_matrix)
    grid = np.linspace(0.0, fit.x.max(), 9)
    names = dict(zip(fit.names, p))
    if model == "zero_order":
        law = names["A0"] + names["rate"] * grid
    elif model == "first_order_to_final":
        law = names["A_inf"] + (names["A0"] - names["A_inf"]) * unumpy.exp(-names["k"] * grid)
    elif model == "first_order_to_zero":
        law = names["A0"] * unumpy.exp(-names["k"] * grid)  # a_end = 0
    else:
        law = names["A0"] / (1.0 + names["k"] * names["A0"] * grid)  # a_end = 0, decreasing signal
    sd = unumpy.std_devs(law)
    for level in (0.9, 0.99):
        q = stats.t.ppf(0.5 + level / 2.0, fit.dof)
        low, high = fit.band(grid, level)
        assert_allclose(fit.curve(grid), unumpy.nominal_values(law), rtol=1e-9)
        assert_allclose(high - fit.curve(grid), q * sd, rtol=1e-5)
        low_p, high_p = fit.band(grid, level, kind="prediction")
        assert_allclose(high_p - fit.curve(grid), q * np.sqrt(sd**2 + fit.residual_sd**2), rtol=1e-5)
