"""The fast path of the rate laws (variable projection over k, standard errors from the moments) against the
reference library on the same points, weighted and unweighted, on curves each law fits well and on curves it fits
badly: the minimum from ``scipy.optimize.least_squares`` (MINPACK Levenberg–Marquardt) run to tolerances of 1e-15,
and the covariance from ``scipy.optimize.curve_fit`` (absolute_sigma=False) started at that minimum. (curve_fit's
own stopping rule, even tightened, can halt a little short of the minimum in a long, flat valley: the fast path then
has the lower sum of squares, which the tests check.)

Every curve here is synthetic (invented numbers, fixed seeds). The reference path (``nonlinear_lstsq`` /
``linear_lstsq``) is made to fail in these tests, so a pass means the fast path itself gave the numbers.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.optimize import curve_fit, least_squares

from nightcell.science import kinetics
from nightcell.errors import FitFailed

T = np.arange(0.0, 2000.0, 2.0)
TIGHT = {"xtol": 1e-14, "ftol": 1e-14, "gtol": 1e-14, "maxfev": 20000}


def _curve(kind: str, seed: int, sd: float = 0.003, t: np.ndarray = T) -> np.ndarray:
    rng = np.random.default_rng(seed)
    shapes = {
        "plateau": 0.12 + 0.8 * np.exp(-0.004 * t),
        "growth": 0.9 - 0.75 * np.exp(-0.002 * t),
        "first": 0.85 * np.exp(-0.003 * t),
        "second": 0.9 / (1.0 + 0.004 * 0.9 * t),
        "line": 0.9 - 0.0003 * t,
    }
    return shapes[kind] + rng.normal(0.0, sd, t.size)


def _laws(a: np.ndarray, a_end: float = 0.0):
    """The three nonlinear laws as (function, Jacobian) for curve_fit, in the parameters nightcell reports.

    The Jacobians are given so curve_fit's covariance is not limited by finite differences (about 1e-5 relative
    on these long runs without them).
    """
    d = a - a_end
    s = 1.0 if (d[0] if d[0] != 0 else np.median(d)) >= 0 else -1.0

    def first_jac(x, a0, k):
        e = np.exp(-k * x)
        return np.column_stack([e, -(a0 - a_end) * x * e])

    def second_jac(x, a0, k):
        u = 1.0 + k * s * (a0 - a_end) * x
        return np.column_stack([1.0 / u**2, -s * (a0 - a_end) ** 2 * x / u**2])

    def plateau_jac(x, a0, a_inf, k):
        e = np.exp(-k * x)
        return np.column_stack([e, 1.0 - e, -(a0 - a_inf) * x * e])

    return {
        "first_order_to_zero": (lambda x, a0, k: a_end + (a0 - a_end) * np.exp(-k * x), first_jac),
        "second_order": (lambda x, a0, k: a_end + (a0 - a_end) / (1.0 + k * s * (a0 - a_end) * x), second_jac),
        "first_order_to_final": (lambda x, a0, a_inf, k: a_inf + (a0 - a_inf) * np.exp(-k * x), plateau_jac),
    }


@pytest.fixture()
def no_reference(monkeypatch):
    """Make the reference path fail, so only the fast path can give a result."""
    def refuse(*args, **kwargs):
        raise AssertionError("the reference path was used")

    monkeypatch.setattr(kinetics, "_fit_reference", refuse)


def _check_against_scipy(fit, law, t, a, w=None):
    """Parameters, covariance and RSS of a nightcell fit against scipy on the same points."""
    f, jac = law
    sigma = None if w is None else 1.0 / np.sqrt(w)
    sw = np.ones_like(a) if w is None else np.sqrt(w)
    p = np.array([fit.param(n) for n in fit.names])

    def resid(q):
        return sw * (a - f(t, *q))

    # scipy.optimize.least_squares (MINPACK Levenberg–Marquardt, tolerances 1e-15) started at our answer finds
    # nothing better: it is the minimum (reference library)
    here = least_squares(resid, p, method="lm", xtol=1e-15, ftol=1e-15, gtol=1e-15, max_nfev=20000)
    # ... and started 1 % away it comes back to it, to well within a standard error
    near = least_squares(resid, p * 1.01, method="lm", xtol=1e-15, ftol=1e-15, gtol=1e-15, max_nfev=20000)
    # the covariance: scipy.optimize.curve_fit (absolute_sigma=False) at the minimum (reference library)
    popt, pcov = curve_fit(f, t, a, p0=p, sigma=sigma, jac=jac, **TIGHT)
    se = np.sqrt(np.diag(pcov))
    assert np.all(np.abs(here.x - p) <= 1e-8 * np.abs(p) + 1e-6 * se), (fit.model, here.x, p)
    assert np.all(np.abs(near.x - p) <= 1e-3 * se), (fit.model, near.x, p)
    assert fit.rss <= 2.0 * near.cost * (1 + 1e-12), fit.model  # cost = RSS/2
    assert_allclose(fit.rss, 2.0 * here.cost, rtol=1e-10, err_msg=fit.model)
    assert_allclose(fit.cov_matrix, pcov, rtol=1e-6, atol=1e-9 * np.abs(pcov).max(), err_msg=fit.model)


CASES = [(kind, weighted) for kind in ("plateau", "growth", "first", "second") for weighted in (False, True)]


@pytest.mark.parametrize("kind,weighted", CASES)
def test_every_law_matches_scipy(no_reference, kind, weighted):
    a = _curve(kind, seed=len(kind) + 10 * weighted)
    w = 10.0 ** (-2.0 * a) if weighted else None  # T² weights, as analyse_run uses
    comparison = kinetics.fit_all(T, a, weights=w)
    # on a rising curve a law that decays toward a_end = 0 can only fit with k < 0: a failure with its reason
    # (issue 12 §2), never a result
    allowed = {"first_order_to_zero", "second_order"} if kind == "growth" else set()
    assert set(comparison.failures) <= allowed, comparison.failures
    assert all("is negative" in why for why in comparison.failures.values()), comparison.failures
    for model, f in _laws(a).items():
        if model in comparison.failures:
            continue
        _check_against_scipy(comparison.results[model], f, T - T[0], a, w)
    # zero order: a weighted straight line — statsmodels WLS (reference library): parameters and covariance
    sm = pytest.importorskip("statsmodels.api")
    zero = comparison.results["zero_order"]
    wls = sm.WLS(a, sm.add_constant(T - T[0]), weights=np.ones_like(a) if w is None else w).fit()
    assert_allclose([zero.param("A0"), zero.param("rate")], wls.params, rtol=1e-10)
    assert_allclose(zero.cov_matrix, wls.cov_params(), rtol=1e-8)
    assert_allclose(zero.rss, wls.ssr, rtol=1e-10)


def test_a_straight_line_fitted_by_every_law(no_reference):
    # the laws that bend must find their (poor) best on data that do not bend; the plateau law cannot separate
    # A_inf from k there, which the fallback test below covers
    a = _curve("line", seed=2)
    comparison = kinetics.fit_all(T, a, models=("zero_order", "first_order_to_zero", "second_order"))
    for model in ("first_order_to_zero", "second_order"):
        _check_against_scipy(comparison.results[model], _laws(a)[model], T - T[0], a)
    assert comparison.best.model == "zero_order"


def test_short_uneven_noisy_runs_match_scipy(no_reference):
    rng = np.random.default_rng(7)
    t = np.sort(rng.uniform(0.0, 900.0, 40))
    a = 0.1 + 0.7 * np.exp(-0.005 * t) + rng.normal(0.0, 0.02, t.size)
    comparison = kinetics.fit_all(t, a)
    for model, f in _laws(a).items():
        _check_against_scipy(comparison.results[model], f, t - t[0], a)


def test_a_end_and_masked_points(no_reference):
    a = 0.05 + 0.8 * np.exp(-0.003 * T) + np.random.default_rng(3).normal(0.0, 0.002, T.size)
    mask = np.zeros(T.size, dtype=bool)
    mask[::17] = True
    a[mask] = np.nan
    w = 10.0 ** (-2.0 * np.nan_to_num(a))
    comparison = kinetics.fit_all(T, a, mask=mask, a_end=0.05, t_start=10.0, weights=w)
    keep = ~mask & (T >= 10.0)
    t, y = T[keep], a[keep]
    for model in ("first_order_to_zero", "second_order"):
        fit = comparison.results[model]
        _check_against_scipy(fit, _laws(y, a_end=0.05)[model], t - t[0], y, w[keep])
        assert fit.inputs["a_end"] == 0.05 and fit.n == int(keep.sum())


def test_fast_path_equals_the_reference_path():
    """Both paths reach the same minimum; where they differ it is the reference stopping early (its RSS is not
    lower), by far less than a standard error."""
    for kind in ("plateau", "growth", "first", "second"):
        a = _curve(kind, seed=99)
        w = 10.0 ** (-2.0 * a)
        for model in ("first_order_to_zero", "second_order", "first_order_to_final"):
            # the two paths themselves (below fit_model's check that k is positive, which a growth curve fails
            # for the laws that decay toward a_end = 0)
            fast = kinetics._fit_one(T - T[0], a, model, 0.0, {}, w)
            ref = kinetics._fit_reference(T - T[0], a, model, 0.0, {}, w)
            if fast.param("k") < 0:
                with pytest.raises(FitFailed, match="is negative"):
                    kinetics.fit_model(T, a, model, weights=w)
            assert fast.rss <= ref.rss * (1 + 1e-12)
            for n in fast.names:
                assert abs(fast.param(n) - ref.param(n)) <= 1e-2 * ref.se(n), (kind, model, n)
                assert_allclose(fast.se(n), ref.se(n), rtol=1e-3)


def test_degenerate_data_still_gets_the_reference_answer():
    # a plateau law on a straight line with almost no noise cannot pin A_inf and k apart: the fast path declines
    # and the reference path decides (a fit, or FitFailed with its message)
    a = 0.9 - 0.0003 * T + np.random.default_rng(5).normal(0.0, 1e-9, T.size)
    m = kinetics._Moments(T, a, None)
    if kinetics._fast_fit(m, "first_order_to_final", 0.0, {}) is not None:
        pytest.skip("the fast path handled this line; nothing to fall back from")
    try:
        ref = kinetics._fit_reference(T, a, "first_order_to_final", 0.0, {}, None)
    except FitFailed as exc:
        with pytest.raises(FitFailed, match=str(exc)[:40].replace("(", r"\(").replace(")", r"\)")):
            kinetics.fit_model(T, a, "first_order_to_final")
    else:
        fit = kinetics.fit_model(T, a, "first_order_to_final")
        assert_allclose([fit.param(n) for n in fit.names], [ref.param(n) for n in ref.names], rtol=1e-12)


def test_small_inverse_matches_numpy():
    rng = np.random.default_rng(11)
    for p in (2, 3):
        for _ in range(20):
            X = rng.normal(size=(50, p)) * rng.uniform(0.01, 100.0, p)
            N = X.T @ X
            inv = kinetics._inverse_scaled(N.tolist())
            # numpy.linalg.inv (reference library)
            assert_allclose(np.array(inv), np.linalg.inv(N), rtol=1e-9, atol=1e-12 * np.abs(np.linalg.inv(N)).max())
    assert kinetics._inverse_scaled([[1.0, 1.0], [1.0, 1.0]]) is None
    assert kinetics._inverse_scaled([[0.0, 0.0], [0.0, 1.0]]) is None


def test_half_life_and_ranking_unchanged_in_shape(no_reference):
    a = _curve("plateau", seed=4)
    comparison = kinetics.fit_all(T, a)
    best = comparison.best
    assert best.model == "first_order_to_final"
    hl, hl_se = kinetics.half_life(best)
    assert_allclose(hl, math.log(2) / best.param("k"), rtol=1e-12)
    assert_allclose(hl_se, math.log(2) * best.se("k") / best.param("k") ** 2, rtol=1e-12)
    assert best.extra["runs_test"]["p_value"] is not None
    assert set(comparison.results) == set(kinetics.MODELS)


# -- the read a fast analysis rests on ----------------------------------------------------------------------------

def test_columnar_read_of_a_run_equals_the_row_read(store):
    """``Store.run_sample_columns`` (group_concat text parsed by numpy) gives exactly the rows ``run_samples`` gives:
    a run across two boots, a run with no stop mark, runs within one boot whose reads and flags vary or do not."""
    from nightcell.store.database import Run

    rng = np.random.default_rng(8)
    rows = {"marks": [], "mark_counts": [], "samples": []}
    rows["marks"].append(("dev", 1, 2, 0, "run_start", 0, 0, "a", ""))
    for boot, first in ((1, 3), (2, 1)):
        for i in range(300):
            seq = first + i
            reads = 16 if i % 7 else 8
            rows["samples"].append(("dev", boot, seq, 0, 1000 * seq + int(rng.integers(0, 5)), 0,
                                    int(i % 11 == 0), reads, 100 * reads + int(rng.integers(0, 30)),
                                    int(rng.integers(500, 60000)), None))
            rows["samples"].append(("dev", boot, seq, 1, 1000 * seq, 0, 0, reads, 1, 2, None))  # another channel
    rows["marks"].append(("dev", 2, 400, 0, "run_stop", 0, 0, "", ""))
    rows["samples"].append(("dev", 2, 401, 0, 401000, 0, 0, 16, 1, 2, None))  # after the stop
    with store.write():
        store.insert_rows(rows)
    for run in (Run("dev", "a", 1, 2, 2, 400), Run("dev", "a", 1, 2, None, None), Run("dev", "a", 2, 100, 2, 150),
                Run("dev", "a", 1, 3, 1, 10)):  # ... and one whose reads and flags do not vary
        cols = store.run_sample_columns(run)
        expect = store.run_samples(run)
        assert len(expect) == cols["seq"].size > 0
        for name in ("boot", "seq", "uptime_ms", "flags", "reads", "dark", "light"):
            assert cols[name].tolist() == [r[name] for r in expect], name
    empty = store.run_sample_columns(Run("dev", "a", 3, 0, None, None))
    assert empty["seq"].size == 0 and empty["clocks"] == {}


def test_chunked_read_of_a_long_run_equals_the_row_read(store, monkeypatch):
    """A run within one boot longer than one text is read a chunk at a time; with chunks of 64 seqs, gaps in seq,
    a second channel and reads that vary, every column still equals ``run_samples``' rows in order."""
    from nightcell.store import database
    from nightcell.store.database import Run

    monkeypatch.setattr(database, "_TEXT_RUN_MAX", 50)
    monkeypatch.setattr(database, "_TEXT_CHUNK", 64)
    rng = np.random.default_rng(9)
    rows = {"marks": [("dev", 1, 2, 0, "run_start", 0, 0, "a", ""), ("dev", 1, 1000, 0, "run_stop", 0, 0, "", "")],
            "mark_counts": [], "samples": []}
    for seq in range(3, 1000):
        if seq % 97 in (0, 1, 2, 3, 4):  # gaps, some across a chunk's edge
            continue
        reads = 16 if seq % 5 else 8
        rows["samples"].append(("dev", 1, seq, 0, 1000 * seq, 0, int(seq % 13 == 0), reads,
                                int(rng.integers(0, 2000)), int(rng.integers(500, 60000)), None))
        rows["samples"].append(("dev", 1, seq, 1, 1000 * seq, 0, 0, reads, 1, 2, None))
    with store.write():
        store.insert_rows(rows)
    for run in (Run("dev", "a", 1, 2, 1, 1000), Run("dev", "a", 1, 60, 1, 700), Run("dev", "a", 1, 2, 1, 66)):
        cols = store.run_sample_columns(run)
        expect = store.run_samples(run)
        assert len(expect) == cols["seq"].size > 0
        for name in ("boot", "seq", "uptime_ms", "flags", "reads", "dark", "light"):
            assert cols[name].tolist() == [r[name] for r in expect], name


def test_kept_mark_list_follows_changes_from_this_and_other_connections(store, tmp_path):
    import sqlite3

    from nightcell.tasks.analyse import _mark_before

    def blank(boot, seq):
        return {"marks": [("dev", boot, seq, 0, "blank", 0, 16, "water", "")],
                "mark_counts": [("dev", boot, seq, 0, 1600, 50000)]}

    with store.write():
        store.insert_rows(blank(1, 5))
    assert _mark_before(store, "dev", "blank", (1, 100))["seq"] == 5
    assert _mark_before(store, "dev", "blank", (1, 5)) is None
    with store.write():  # this connection adds a nearer blank
        store.insert_rows(blank(1, 50))
    assert _mark_before(store, "dev", "blank", (1, 100))["seq"] == 50
    other = sqlite3.connect(store.path, isolation_level=None)  # another program adds a nearer one still
    other.execute("INSERT INTO marks VALUES ('dev', 1, 70, 0, 'blank', 0, 16, 'water', '')")
    other.execute("INSERT INTO mark_counts VALUES ('dev', 1, 70, 0, 1600, 50000)")
    other.close()
    assert _mark_before(store, "dev", "blank", (1, 100))["seq"] == 70
    assert _mark_before(store, "dev", "blank", None)["seq"] == 70
    assert _mark_before(store, "dev", "opaque", None) is None


def test_results_of_many_runs_can_share_one_transaction(store):
    import json
    import sqlite3

    first = store.save_result("rate", "alone", {"run": "a"}, {"k": 1.5})  # committed on its own
    with store.write():
        ids = [store.save_result("rate", f"batch {i}", {"run": str(i)}, {"k": float(i)}) for i in range(3)]
    assert ids == [first + 1, first + 2, first + 3]
    with pytest.raises(RuntimeError):
        with store.write():
            store.save_result("rate", "rolled back", {}, {"k": 0.0})
            raise RuntimeError("analysis failed half-way")
    other = sqlite3.connect(store.path)  # what another program sees: the committed rows, none of the rolled back
    rows = other.execute("SELECT label, inputs_json, result_json FROM results ORDER BY id").fetchall()
    other.close()
    assert [r[0] for r in rows] == ["alone", "batch 0", "batch 1", "batch 2"]
    assert json.loads(rows[1][1]) == {"run": "0"} and json.loads(rows[3][2]) == {"k": 2.0}
