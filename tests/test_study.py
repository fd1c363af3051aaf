"""Several runs: orders from initial rates, Arrhenius and Eyring."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import stats

from nightcell.science import study
from nightcell.errors import DegenerateData, InputError, NonFiniteInput, ShapeMismatch, TooFewPoints

# Arrhenius worked example, N2O5 decomposition (Daniels & Johnston 1921, as reprinted in physical-chemistry
# textbooks [memory for the table]).
N2O5_T = np.array([273.0, 298.0, 308.0, 318.0, 328.0, 338.0])
N2O5_K = np.array([7.87e-7, 3.46e-5, 1.35e-4, 4.98e-4, 1.50e-3, 4.87e-3])


def test_n2o5_arrhenius():
    fit = study.arrhenius(N2O5_T, N2O5_K)
    # N2O5 decomposition (Daniels & Johnston 1921 [memory for the table]): Ea = 102.9 ± 0.5 kJ/mol [reproduced]
    assert_allclose(fit.extra["Ea_kJ_per_mol"], 102.9, atol=0.05)
    assert_allclose(fit.extra["Ea_se_kJ_per_mol"], 0.5, atol=0.05)
    # A ≈ 3.8×10¹³ s⁻¹ [reproduced]
    assert_allclose(fit.extra["A"], 3.8e13, rtol=0.02)
    # scipy.stats.linregress of ln k on 1/T (reference library)
    ref = stats.linregress(1.0 / N2O5_T, np.log(N2O5_K))
    assert_allclose(fit.param("Ea_J_per_mol"), -ref.slope * study.GAS_CONSTANT, rtol=1e-10)
    assert_allclose(fit.se("Ea_J_per_mol"), ref.stderr * study.GAS_CONSTANT, rtol=1e-9)
    assert_allclose(fit.param("ln_A"), ref.intercept, rtol=1e-10)
    assert_allclose(fit.se("ln_A"), ref.intercept_stderr, rtol=1e-9)
    assert fit.covariance("Ea_J_per_mol", "ln_A") > 0
    json.dumps(fit.to_dict(), allow_nan=False)


def test_eyring_matches_statsmodels_and_the_arrhenius_relation():
    sm = pytest.importorskip("statsmodels.api")
    fit = study.eyring(N2O5_T, N2O5_K)
    ref = sm.OLS(np.log(N2O5_K / N2O5_T), sm.add_constant(1.0 / N2O5_T)).fit()
    R = study.GAS_CONSTANT
    # statsmodels OLS of ln(k/T) on 1/T: ΔH‡ = −R·slope, ΔS‡ = R·(intercept − ln(k_B/h)) (reference library)
    assert_allclose(fit.param("dH_J_per_mol"), -R * ref.params[1], rtol=1e-10)
    assert_allclose(fit.se("dH_J_per_mol"), R * ref.bse[1], rtol=1e-9)
    assert_allclose(
        fit.param("dS_J_per_mol_K"), R * (ref.params[0] - math.log(study.BOLTZMANN / study.PLANCK)), rtol=1e-9
    )
    assert_allclose(fit.se("dS_J_per_mol_K"), R * ref.bse[0], rtol=1e-9)
    # Ea − ΔH‡ ≈ R·T over the range (standard relation for a unimolecular step; T here a mean, so loose)
    ea = study.arrhenius(N2O5_T, N2O5_K).param("Ea_J_per_mol")
    assert_allclose(ea - fit.param("dH_J_per_mol"), R * N2O5_T.mean(), rtol=0.05)


def test_weighted_arrhenius_matches_statsmodels_wls():
    sm = pytest.importorskip("statsmodels.api")
    k_se = N2O5_K * np.array([0.05, 0.02, 0.03, 0.02, 0.04, 0.03])  # synthetic SEs for the cross-check
    fit = study.arrhenius(N2O5_T, N2O5_K, k_se)
    X = np.column_stack([-1.0 / (study.GAS_CONSTANT * N2O5_T), np.ones(6)])
    ref = sm.WLS(np.log(N2O5_K), X, weights=(N2O5_K / k_se) ** 2).fit()
    # statsmodels WLS (reference library)
    assert_allclose([fit.param("Ea_J_per_mol"), fit.param("ln_A")], ref.params, rtol=1e-9)
    assert_allclose([fit.se("Ea_J_per_mol"), fit.se("ln_A")], ref.bse, rtol=1e-8)
    absolute = study.arrhenius(N2O5_T, N2O5_K, k_se, absolute_sigma=True)
    ref_abs = sm.WLS(np.log(N2O5_K), X, weights=(N2O5_K / k_se) ** 2).fit(cov_type="fixed scale")
    assert_allclose([absolute.se("Ea_J_per_mol"), absolute.se("ln_A")], ref_abs.bse, rtol=1e-8)


def _order_design():
    """Synthetic isolation design (invented numbers): rate = k·[ketone]·[acid], zero order in iodine.

    The shape is the standard result for acid-catalysed iodination of a ketone (common textbook result).
    """
    base = {"ketone": 0.4, "acid": 0.2, "iodine": 0.002}
    rows = [dict(base)]
    for name, levels in (("ketone", [0.2, 0.8, 1.2]), ("acid", [0.1, 0.4, 0.6]), ("iodine", [0.001, 0.004, 0.006])):
        for level in levels:
            row = dict(base)
            row[name] = level
            rows.append(row)
    conc = {n: np.array([r[n] for r in rows]) for n in base}
    rng = np.random.default_rng(2024)
    true = 3.5e-5 * conc["ketone"] * conc["acid"]
    rates = true * np.exp(rng.normal(0.0, 0.03, true.size))
    return rates, conc


def test_orders_with_a_zero_order_reactant_synthetic():
    rates, conc = _order_design()
    res = study.orders(rates, conc)
    truth = {"ketone": 1.0, "acid": 1.0, "iodine": 0.0}
    for name, order in truth.items():
        assert abs(res.joint.param(f"order_{name}") - order) < 3 * res.joint.se(f"order_{name}")
        per = res.per_reactant[name]
        assert abs(per.param("order") - order) < 3 * per.se("order")
        assert per.n == 4
    assert abs(res.joint.extra["k"] - 3.5e-5) < 3 * res.joint.extra["k_se"]
    # statsmodels OLS of ln rate on ln concentrations (reference library)
    sm = pytest.importorskip("statsmodels.api")
    X = sm.add_constant(np.column_stack([np.log(conc[n]) for n in conc]))
    ref = sm.OLS(np.log(rates), X).fit()
    assert_allclose([res.joint.param(n) for n in res.joint.names], ref.params, rtol=1e-9)
    assert_allclose([res.joint.se(n) for n in res.joint.names], ref.bse, rtol=1e-8)

    nl = study.orders(-rates, conc, rate_se=0.03 * rates, nonlinear=True)
    assert nl.joint.model == "power_law_nonlinear" and nl.log_linear is not None
    assert nl.joint.inputs["rate_sign"] == -1
    for name, order in truth.items():
        assert abs(nl.joint.param(f"order_{name}") - order) < 3 * nl.joint.se(f"order_{name}")
    assert "order" in res.report()
    json.dumps(nl.to_dict(), allow_nan=False)


def test_orders_without_an_isolation_design_still_fit_jointly():
    rng = np.random.default_rng(5)  # synthetic, fixed seed: every run varies both reactants
    a = rng.uniform(0.1, 1.0, 12)
    b = rng.uniform(0.1, 1.0, 12)
    rates = 2e-4 * a**2 * b**0.5 * np.exp(rng.normal(0, 0.02, 12))
    res = study.orders(rates, {"a": a, "b": b})
    assert set(res.skipped) == {"a", "b"} and not res.per_reactant
    assert abs(res.joint.param("order_a") - 2.0) < 3 * res.joint.se("order_a")
    assert abs(res.joint.param("order_b") - 0.5) < 3 * res.joint.se("order_b")


def test_bad_input_says_what_to_do():
    with pytest.raises(InputError, match="add 273.15"):
        study.arrhenius([25.0, -5.0, 35.0], [1e-3, 2e-3, 4e-3])
    with pytest.raises(InputError, match="must be positive"):
        study.arrhenius([300.0, 310.0, 320.0], [1e-3, -2e-3, 4e-3])
    with pytest.raises(DegenerateData, match="different temperatures"):
        study.arrhenius([300.0, 300.0, 300.0], [1e-3, 2e-3, 4e-3])
    with pytest.raises(TooFewPoints, match="at least 3 temperatures"):
        study.arrhenius([300.0, 310.0], [1e-3, 2e-3])
    with pytest.raises(ShapeMismatch):
        study.arrhenius([300.0, 310.0, 320.0], [1e-3, 2e-3])
    with pytest.raises(NonFiniteInput):
        study.eyring([300.0, 310.0, np.nan], [1e-3, 2e-3, 4e-3])
    rates, conc = _order_design()
    with pytest.raises(InputError, match="mixed signs"):
        study.orders(np.r_[-rates[:1], rates[1:]], conc)
    bad = dict(conc)
    bad["acid"] = np.r_[0.0, conc["acid"][1:]]
    with pytest.raises(InputError, match="must be positive to take logarithms"):
        study.orders(rates, bad)
    with pytest.raises(TooFewPoints, match="add runs"):
        study.orders(rates[:3], {n: c[:3] for n, c in conc.items()})


def test_arrhenius_eyring_and_order_fits_evaluate_their_lines_and_bands():
    sm = pytest.importorskip("statsmodels.api")
    grid = np.array([280.0, 300.0, 330.0])
    for fit, y in ((study.arrhenius(N2O5_T, N2O5_K), np.log(N2O5_K)),
                   (study.eyring(N2O5_T, N2O5_K), np.log(N2O5_K / N2O5_T) - math.log(study.BOLTZMANN / study.PLANCK))):
        assert_allclose(fit.curve(fit.x), fit.y - fit.residuals, rtol=1e-10)
        # statsmodels OLS of the same line in 1/T: mean and 90 % confidence band at new temperatures (reference
        # library)
        ref = sm.OLS(y, sm.add_constant(1.0 / N2O5_T)).fit()
        frame = ref.get_prediction(sm.add_constant(1.0 / grid)).summary_frame(alpha=0.10)
        assert_allclose(fit.curve(grid), frame["mean"], rtol=1e-9)
        low, high = fit.band(grid, 0.90)
        assert_allclose(low, frame["mean_ci_lower"], rtol=1e-7)
        assert_allclose(high, frame["mean_ci_upper"], rtol=1e-7)
    rates, conc = _order_design()
    per = study.orders(rates, conc).per_reactant["ketone"]
    # the per-reactant line is ln rate = ln_rate_at_1 + order·ln c (common practice)
    c = np.array([0.1, 0.5])
    assert_allclose(per.curve(c), per.param("ln_rate_at_1") + per.param("order") * np.log(c), rtol=1e-12)
    assert_allclose(per.curve(per.x), per.y - per.residuals, rtol=1e-10, atol=1e-12)
