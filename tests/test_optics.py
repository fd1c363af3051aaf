"""Counts → absorbance: photometric round trips, flags, stray light and noise propagation."""

from __future__ import annotations

import json

import numpy as np
import pytest
from numpy.testing import assert_allclose

from nightcell.science import optics
from nightcell.errors import InputError, NonFiniteInput, ShapeMismatch

BLANK_LIGHT, BLANK_DARK = 3600.0, 120.0


def _counts_for(absorbance_values, *, quantise=False):
    """Light counts a cell would give for true absorbances against the blank above (dark equal to the blank's)."""
    t = 10.0 ** (-np.asarray(absorbance_values, dtype=float))
    light = BLANK_DARK + (BLANK_LIGHT - BLANK_DARK) * t
    return np.round(light) if quantise else light


def test_srm930_nominal_transmittance_gives_tabulated_absorbance():
    nominal_t = np.array([0.10, 0.20, 0.30])
    light = BLANK_DARK + (BLANK_LIGHT - BLANK_DARK) * nominal_t
    res = optics.absorbance(light, np.full(3, BLANK_DARK), BLANK_LIGHT, BLANK_DARK)
    # NIST SRM 930 series, nominal 10, 20 and 30 %T ⇒ A = 1.000, 0.699, 0.523 (arithmetic check).
    assert_allclose(res.absorbance, [1.000, 0.699, 0.523], atol=5e-4)
    assert_allclose(res.transmittance, nominal_t, rtol=1e-12)
    assert res.flags.tolist() == [0, 0, 0]


@pytest.mark.parametrize(
    "wavelength, specific, low, high",
    [(235, 124.5, 122.9, 126.2), (257, 144.5, 142.8, 146.2), (313, 48.6, 47.0, 50.3), (350, 107.3, 105.6, 109.0)],
)
def test_dichromate_beer_lambert_round_trip(wavelength, specific, low, high):
    # Potassium dichromate absorbance standard, specific absorbance A(1 %, 1 cm) (pharmacopoeia table, as quoted by
    # laboratory procedure pages): concentration → expected A → 12-bit counts → A → specific absorbance back.
    mg_per_l = np.array([57.0, 60.0, 63.0])
    expected_a = specific * mg_per_l / 10_000.0  # 1 % w/v = 10 000 mg/L
    light = _counts_for(expected_a, quantise=True)
    res = optics.absorbance(light, np.full(3, BLANK_DARK), BLANK_LIGHT, BLANK_DARK)
    back = res.absorbance * 10_000.0 / mg_per_l
    assert np.all((back > low) & (back < high))
    # Photometric accuracy tolerance commonly stated for instrument checks: ±0.010 A or ±1 % [memory].
    assert_allclose(res.absorbance, expected_a, atol=0.010)


def test_stray_light_ceiling_and_low_reading():
    # Stray light: A_obs = −log10((T + s)/(1 + s)) [memory]: 1 % stray caps the reading near A = 2 and reads
    # A = 1 about 4 % low (loose tolerance because the statement is recalled).
    assert optics.stray_ceiling(0.01) == pytest.approx(2.0, abs=0.01)
    low_by = 1.0 - optics.apparent_absorbance(1.0, 0.01) / 1.0
    assert 0.03 < low_by < 0.05
    assert optics.stray_ceiling(0.0) == float("inf")
    a_true = np.array([0.1, 0.5, 1.0, 1.5])
    assert_allclose(optics.correct_stray(optics.apparent_absorbance(a_true, 0.01), 0.01), a_true, rtol=1e-12)


def test_stray_fraction_from_opaque_and_ceiling_flag():
    s = 0.004
    t_obs = s / (1 + s)  # what an opaque filter reads through stray light
    opaque_light = BLANK_DARK + (BLANK_LIGHT - BLANK_DARK) * t_obs
    assert optics.stray_fraction_from_opaque(opaque_light, BLANK_DARK, BLANK_LIGHT, BLANK_DARK) == pytest.approx(s)
    a_obs = optics.apparent_absorbance(np.array([1.0, 2.0, 3.0]), s)
    res = optics.absorbance(_counts_for(a_obs), np.full(3, BLANK_DARK), BLANK_LIGHT, BLANK_DARK, stray=s)
    # true A ≥ −log10(0.004) ≈ 2.40 is beyond the stated criterion (stray ≥ half the detected light)
    assert res.flags.tolist() == [0, 0, optics.FLAG_BEYOND_STRAY]
    assert optics.flag_names(res.flags[2]) == ["beyond_stray"]


def test_bad_points_are_flagged_never_raised():
    light = np.array([2000.0, 110.0, 4093.0, np.nan, 1500.0])
    dark = np.array([120.0, 120.0, 120.0, 120.0, 300.0])
    res = optics.absorbance(light, dark, BLANK_LIGHT, BLANK_DARK, dark_drift_limit=50)
    assert res.flags.tolist() == [
        0,
        optics.FLAG_NONPOSITIVE,
        optics.FLAG_SATURATED | optics.FLAG_BELOW_BLANK,  # 4093 counts is also far more light than the blank
        optics.FLAG_MISSING,
        optics.FLAG_DARK_DRIFT,
    ]
    assert np.isnan(res.absorbance[1]) and np.isnan(res.absorbance[3])
    assert np.isfinite(res.absorbance[[0, 2, 4]]).all()
    assert res.mask.tolist() == [False, True, True, True, True]
    json.dumps(res.to_dict(), allow_nan=False)


def test_saturated_blank_flags_everything():
    res = optics.absorbance([1000.0, 2000.0], [100.0, 100.0], 4094.0, 100.0)
    assert (res.flags & optics.FLAG_SATURATED).all()
    assert "re-take the blank" in res.message


def test_whole_computation_errors_say_what_to_do():
    with pytest.raises(ShapeMismatch, match="give one dark per light reading"):
        optics.absorbance([1, 2, 3], [1, 2], BLANK_LIGHT, BLANK_DARK)
    with pytest.raises(NonFiniteInput, match="record a blank"):
        optics.absorbance([1000.0], [100.0], float("nan"), BLANK_DARK)
    with pytest.raises(InputError, match="check that the LED is on"):
        optics.absorbance([1000.0], [100.0], 100.0, 120.0)
    with pytest.raises(InputError, match=r"must lie in \[0, 1\)"):
        optics.stray_ceiling(1.5)


def test_noise_propagation_matches_uncertainties_and_simulation():
    unc = pytest.importorskip("uncertainties")
    from uncertainties import umath

    rng = np.random.default_rng(3)  # synthetic count scatter for a reference-library cross-check
    reads = 16
    light = rng.normal(1500.0, 6.0, (4, reads))
    dark = rng.normal(120.0, 3.0, (4, reads))
    blank_light = rng.normal(BLANK_LIGHT, 8.0, reads)
    blank_dark = rng.normal(BLANK_DARK, 3.0, reads)
    est = optics.absorbance_noise(light, dark, blank_light, blank_dark)

    def umean(x):
        return unc.ufloat(x.mean(), x.std(ddof=1) / np.sqrt(x.size))

    for i in range(4):
        a = -umath.log10((umean(light[i]) - umean(dark[i])) / (umean(blank_light) - umean(blank_dark)))
        # uncertainties (linear error propagation): value and SD of A (reference library).
        assert_allclose(est.absorbance[i], a.nominal_value, rtol=1e-12)
        assert_allclose(est.sd[i], a.std_dev, rtol=1e-10)
    assert (est.sd_reading < est.sd).all()

    # Monte Carlo (synthetic): the propagated SD matches the scatter of A over repeated readings within 10 %.
    true_sd_light, true_sd_dark, n_rep = 6.0, 3.0, 4000
    li = rng.normal(1500.0, true_sd_light, (n_rep, reads)).mean(axis=1)
    da = rng.normal(120.0, true_sd_dark, (n_rep, reads)).mean(axis=1)
    sim = optics.absorbance(li, da, BLANK_LIGHT, BLANK_DARK).absorbance
    one = optics.absorbance_noise(
        rng.normal(1500.0, true_sd_light, (200, reads)), rng.normal(120.0, true_sd_dark, (200, reads)),
        np.full(reads, BLANK_LIGHT) + rng.normal(0, 1e-9, reads), np.full(reads, BLANK_DARK) + rng.normal(0, 1e-9, reads),
    )
    assert_allclose(np.median(one.sd_reading), sim.std(ddof=1), rtol=0.10)


def test_readings_below_the_blank_beyond_noise_are_flagged_and_named():
    # more light than the blank by more than 5 SDs of A (3 counts of noise on 3480 counts: 5 SD ≈ 0.0037, so the
    # 0.005 floor rules) is flagged; a reading just below zero within the noise is not (common practice: a reading
    # of the blank itself scatters around A = 0)
    reference = BLANK_LIGHT - BLANK_DARK
    a = np.array([0.0, -0.002, -0.004, -0.02, 0.5])
    res = optics.absorbance(BLANK_DARK + reference * 10 ** -a, np.full(5, BLANK_DARK), BLANK_LIGHT, BLANK_DARK)
    assert res.flags.tolist() == [0, 0, 0, optics.FLAG_BELOW_BLANK, 0]
    assert optics.flag_names(res.flags[3]) == ["below_blank"]
