"""Clock rebuild: wall-clock time from anchors, against synthetic boots with known drift (synthetic, made here)."""

import numpy as np
from numpy.testing import assert_allclose

from nightcell.timeline import fit_boot_clock, unwrap_uptimes


def test_two_anchors_over_seven_days_with_50_ppm_drift_within_one_second():
    # Goal from the sync issue: <= 1 s error over a 7-day boot with two anchors and 50 ppm drift.
    rate = 1 + 50e-6
    t0 = 1_790_000_000.0
    true = lambda up_ms: t0 + rate * up_ms / 1000.0  # noqa: E731
    week = 7 * 86400 * 1000
    anchors = [(1000, round(true(1000) * 1000)), (week, round(true(week) * 1000))]
    clock = fit_boot_clock(anchors)
    ups = np.linspace(0, week, 1001)
    err = np.abs(clock.to_unix(ups) - true(ups))
    assert err.max() < 0.005  # well inside 1 s: anchors carry ms resolution
    assert clock.quality == "fitted"
    assert_allclose(clock.rate, rate, rtol=1e-9)


def test_one_anchor_assumes_rate_one_and_says_so():
    clock = fit_boot_clock([(5000, 1_790_000_005_000)])
    assert clock.quality == "one-anchor"
    assert clock.rate == 1.0
    assert_allclose(clock.to_unix(65000), 1_790_000_065.0)


def test_no_anchor_no_clock():
    assert fit_boot_clock([]) is None


def test_uptime_unwrap_across_u32():
    vals = [2**32 - 2000, 2**32 - 1000, 500, 1500]
    assert unwrap_uptimes(vals) == [2**32 - 2000, 2**32 - 1000, 2**32 + 500, 2**32 + 1500]
